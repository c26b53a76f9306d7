/*
 * e2e_harness.h - end-to-end tests: wavetrim-sim and wavetrimd as real
 * processes on ipc endpoints in a temporary folder, driven only through the
 * control protocol, judged by the simulator's truth stream.
 *
 * The scenario is config/demo.ini with the endpoints moved into the
 * temporary folder and any option a test overrides replaced (an override
 * of an endpoint, e.g. "daemon.control=tcp://127.0.0.1:5000", replaces the
 * moved one and is what the harness uses).
 */
#ifndef E2E_HARNESS_H
#define E2E_HARNESS_H

#include <stddef.h>
#include <stdint.h>
#include <sys/types.h>

#include "sim_driver.h"
#include "wt_secure.h"

#define E2E_REPLY_MAX 65536

typedef struct e2e {
	char dir[128];	     /**< temporary folder (removed at stop) */
	char ini[192];	     /**< the INI file both processes read */
	char control[256];   /**< daemon control endpoint */
	char telemetry[256]; /**< daemon telemetry endpoint */
	char truth[256];     /**< simulator truth endpoint */
	char frames[256];    /**< driver.frames the simulator binds */
	char commands[256];  /**< driver.commands the simulator binds */
	char daemon_ini[192];	   /**< the daemon's INI (e2e_setup_split) */
	char daemon_frames[256];   /**< driver.frames the daemon connects to */
	char daemon_commands[256]; /**< driver.commands the daemon connects to */
	pid_t sim;
	pid_t daemon;
	void *ctx;
	void *truth_sub;
	char reply[E2E_REPLY_MAX]; /**< last control reply */
	/** When server_key is set, e2e_request() is a CURVE client of that
	 * key with the pair `client` (on endpoints that use CURVE). */
	char server_key[WT_KEY_TEXT];
	wt_keypair client;
} e2e;

/**
 * Write the INI (demo scenario + overrides, a NULL-terminated list of
 * "section.key=value" strings, may be NULL) into a new temporary folder and
 * subscribe to the truth stream.  Starts no process.
 */
int e2e_setup(e2e *e, const char *const *overrides);

/**
 * As e2e_setup(), but the daemon gets an INI of its own (e->daemon_ini, the
 * same scenario and overrides) whose driver.frames and driver.commands are
 * e->daemon_frames and e->daemon_commands, other ipc endpoints in the same
 * folder than the simulator's e->frames and e->commands: the test puts
 * something between the two (a proxy that binds the daemon's pair and
 * connects to the simulator's).
 */
int e2e_setup_split(e2e *e, const char *const *overrides);

/**
 * Write the daemon's INI again (e->daemon_ini after e2e_setup_split(),
 * else e->ini) with these overrides instead of the first ones, atomically
 * (a new file renamed over it), e.g. before a `reload`.  0 or -1.
 */
int e2e_rewrite_daemon_ini(e2e *e, const char *const *overrides);

/**
 * Write the simulator's INI again (e->ini) with other overrides (the
 * scenario's endpoints kept): the next e2e_start_sim() runs a different
 * driver, e.g. one of other dimensions.
 */
int e2e_rewrite_sim_ini(e2e *e, const char *const *overrides);

/** Start wavetrim-sim (waits until its truth stream flows). */
int e2e_start_sim(e2e *e);

/** Start wavetrimd (waits until it answers `ping`), extra args may be NULL.
 * It reads e->daemon_ini when e2e_setup_split() wrote one, else e->ini. */
int e2e_start_daemon(e2e *e, const char *const *extra_args);

/** SIGKILL the simulator and reap it. */
void e2e_kill_sim(e2e *e);

/**
 * Send one request line (printf-style); the reply is in e->reply.
 * Returns 1 for ok:true, 0 for ok:false, negative on transport failure.
 */
int e2e_request(e2e *e, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

/** The number at the dotted path (e.g. "result.counts.refused") of the
 * last reply; NAN when absent. */
double e2e_reply_number(const e2e *e, const char *path);

/** The string at a dotted path of the last reply into out; 0 or -1. */
int e2e_reply_string(const e2e *e, const char *path, char *out, size_t len);

/** Poll `status` until result.state equals state, or timeout; 0 or -1. */
int e2e_wait_state(e2e *e, const char *state, int timeout_ms);

/** Next truth record (drops older queued ones if newest != 0); 0 or -1. */
int e2e_truth(e2e *e, sim_truth *t, int timeout_ms);

/**
 * Drop the truth records of frames the daemon had already answered when
 * this is called (status result.last_frame), so the next e2e_truth() shows
 * a frame exposed after every request made so far.  0 or -1.
 */
int e2e_sync(e2e *e, int timeout_ms);

/** Skip n truth records and return the last one; 0 or -1. */
int e2e_truth_skip(e2e *e, int n, sim_truth *t, int timeout_ms);

/** `shutdown` the daemon, SIGTERM the sim, reap both (exit statuses are
 * returned in *daemon_status, *sim_status when not NULL), remove the folder. */
void e2e_teardown(e2e *e, int *daemon_status, int *sim_status);

#ifdef cmocka_unit_test
/** e2e_teardown() and assert that both programs exited 0 (in a cmocka test,
 * with tests/wt_test.h included first). */
static inline void e2e_stop_clean(e2e *e)
{
	int ds, ss;

	e2e_teardown(e, &ds, &ss);
	assert_int_equal(ds, 0);
	assert_int_equal(ss, 0);
}
#endif

/** What a program run by e2e_run() printed, and how it ended. */
typedef struct e2e_run_result {
	int status;	/**< exit status; -1: killed by a signal or the timeout */
	int elapsed_ms; /**< from start to exit */
	char out[16384]; /**< standard output, terminated (cut to fit) */
	char err[8192];	 /**< standard error, terminated (cut to fit) */
} e2e_run_result;

/**
 * Run argv[0] (a path) with argv, standard input from /dev/null, and
 * collect its standard output and error until it exits; SIGKILL it after
 * timeout_ms.  Returns 0 when it ran (its ending is in *r), -1 when it
 * could not be started.
 */
int e2e_run(char *const argv[], int timeout_ms, e2e_run_result *r);

#endif /* E2E_HARNESS_H */
