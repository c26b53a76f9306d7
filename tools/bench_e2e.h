/*
 * bench_e2e.h - wavetrim-bench's end-to-end part: the real wavetrimd over
 * ipc, driven by the replay driver (tools/replay.h) in lockstep and at
 * rising fixed rates, against the ZeroMQ round trip of a trivial echo peer
 * with the same socket types and message sizes.
 *
 * Per system: a private 0700 folder (lib/wt_secure.h's rule for ipc) holds
 * the daemon's INI, a synthetic calibration (a seeded random interaction
 * matrix, its truncated-SVD control matrix by lib/wt_recon, written with
 * lib/wt_store and installed with wavetrimd --calibration: no poking), the
 * sockets and the daemon's log.  The daemon's loop thread is pinned
 * (daemon.cpu) and the replay runs in the calling thread on the other CPU;
 * the echo peer runs on the daemon's CPU.  The loop is closed over the
 * control socket.  Rates up to 10 kHz are always run; above, the ladder
 * ends at the first failure.  A rate passes when the replay saw every frame it
 * sent answered and the daemon's counters (status) show no dropped, stale or
 * unsent frame.  The daemon is stopped (SIGTERM, waited for, SIGKILL after
 * a timeout) and the folder removed whatever happens.
 */
#ifndef BENCH_E2E_H
#define BENCH_E2E_H

#include <stdbool.h>
#include <stddef.h>

#include "replay.h"
#include "wt_geometry.h"
#include "wt_json.h"

#define E2E_RATES_MAX 16

/** The geometry of one reference system (bench.c's table). */
struct bench_geometry {
	const char *name;
	int lenslets, pixels, actuators;
	enum wt_layout layout;
	double pupil_pitches, margin_pitches;
};

struct bench_e2e_options {
	long frames;	  /**< lockstep frames timed (e2e and floor) */
	long warmup;	  /**< lockstep frames first, not timed */
	long rate_frames; /**< frames at each rate */
	double rates_hz[E2E_RATES_MAX];
	int n_rates;
	bool load;		 /**< a busy thread on the replay's CPU */
	const char *daemon_path; /**< wavetrimd */
	int daemon_cpu, replay_cpu;
	unsigned long seed;
	int timeout_ms;		/**< lockstep wait for one answer */
	int rt_priority;	/**< daemon.realtime_priority (0: normal) */
	int driver_rt_priority; /**< SCHED_FIFO of the replay and its
				     ZeroMQ threads (0: normal) */
	bool busy_poll;		/**< daemon.busy_poll */
};

struct bench_e2e_rate {
	double rate_hz;
	struct replay_result r;
	double dropped, stale, send_failed; /**< daemon's, during the run */
	bool pass;
};

struct bench_e2e_result {
	const char *name;
	bool done; /**< measured; else error says why */
	char error[512];
	size_t frame_bytes, command_bytes;
	int n_sub, n_act;
	struct replay_result floor, e2e;
	int n_rates; /**< rates run: all up to 10 kHz, then up to the first
		      * failure */
	struct bench_e2e_rate rates[E2E_RATES_MAX];
	double max_rate_hz;		 /**< highest passed; 0: none */
	double daemon_latency_median_us; /**< status latency_us.median */
};

/** Run the whole end-to-end part for one system. 0, or < 0 with
 * res->error set (nothing is left running either way). */
int bench_e2e_run(const struct bench_geometry *g,
		  const struct bench_e2e_options *o,
		  struct bench_e2e_result *res);

/** The tables; compute_p50_ns[i]: the compute part's total p50 for
 * res[i] (NaN: not measured). */
void bench_e2e_print(const struct bench_e2e_result *res, int n,
		     const double *compute_p50_ns,
		     const struct bench_e2e_options *o);

/** The "e2e" member of the bench's JSON object. */
void bench_e2e_json(wt_json *j, const struct bench_e2e_result *res, int n,
		    const double *compute_p50_ns,
		    const struct bench_e2e_options *o);

#endif /* BENCH_E2E_H */
