/*
 * replay.h - a driver that streams pre-rendered frames to wavetrimd and
 * times its answers: the driver link of lib/wt_proto.h, as
 * tools/driver_template.c speaks it, measured.
 *
 * A replay binds driver.frames (PUSH) and driver.commands (PULL) under the
 * rules of lib/wt_secure.h, renders K synthetic Shack-Hartmann frames for
 * the geometry it is given (tools/bench_util.h) and sends them in turn,
 * each tagged with the next frame id (ids go on counting across runs of
 * the same replay, so the daemon never sees one twice).  Two ways to run:
 *
 *   lockstep  the next frame goes as soon as the command answering the
 *             previous one has arrived; after timeout_ms without it the
 *             frame counts as missing and the next one goes anyway;
 *   free      one frame every 1 / rate_hz s of CLOCK_MONOTONIC on an
 *             absolute schedule (a late frame goes at once), never
 *             waiting for commands; a frame ZeroMQ cannot take at once
 *             (queue full at ZMQ_SNDHWM, no peer) is not sent and its id
 *             is skipped, as a camera that loses an exposure.
 *
 * Per frame it stamps the send time and the arrival of the first command
 * answering it (CLOCK_MONOTONIC) in arrays allocated at creation: the
 * streaming loop allocates nothing (frames are sent without a copy from
 * the K pre-rendered buffers, commands are received into one buffer).  In
 * free mode a command is stamped when the replay next looks (after its
 * sleep to the next frame), so free-mode latencies are upper bounds;
 * lockstep latencies are exact to the poll's wake-up.
 *
 * The echo peer is the trivial other end: it connects as wavetrimd does
 * and answers every frame at once with a zero command of n_act values,
 * tagged with the frame's id: the link's own round-trip floor.
 */
#ifndef REPLAY_H
#define REPLAY_H

#include <signal.h>
#include <stdbool.h>
#include <stdint.h>

#include "bench_util.h"
#include "wt_error.h"
#include "wt_geometry.h"

/** Fewest frame buffers: twice the send queue, so none is reused while
 * libzmq may still be writing it. */
#define REPLAY_MIN_PRERENDER 8
/** The send and receive queues (as wavetrimd's, daemon/wtd.h). */
#define REPLAY_HWM 4

struct replay_config {
	const char *frames_endpoint;   /**< driver.frames, bound (PUSH) */
	const char *commands_endpoint; /**< driver.commands, bound (PULL) */
	const wt_grid *lenslets;       /**< the sensor's grid */
	int pixels_per_lenslet;
	int n_act;	   /**< valid actuators: the command's width */
	long max_frames;   /**< most frames in one run */
	int prerender;	   /**< K >= REPLAY_MIN_PRERENDER frames */
	uint64_t seed;	   /**< of the spots */
	uint64_t first_id; /**< id of the first frame (above any the daemon
			    * has seen, or it skips them as stale) */
	const volatile sig_atomic_t *stop; /**< set: runs end early; NULL ok */
};

/** What one run measured. */
struct replay_result {
	long sent;	  /**< frames ZeroMQ took */
	long send_failed; /**< frames not taken (free) or no peer (lockstep) */
	long received;	  /**< frames answered (first command for each) */
	long missing;	  /**< sent frames never answered */
	long timeouts;	  /**< lockstep waits that ran out */
	long duplicates;  /**< further commands for an answered frame */
	long foreign;	  /**< commands for a frame not of this run */
	long refused;	  /**< messages that are not a good command */
	double elapsed_s; /**< first send to the end of the run */
	double rate_hz;	  /**< sent / time from first to last send */
	struct stats latency; /**< send -> command, ns, over received */
};

typedef struct replay replay;

/** Bind, render, allocate.  zctx: the caller's ZeroMQ context. */
int replay_create(void *zctx, const struct replay_config *cfg, replay **out,
		  wt_error *err);

/** Close the sockets and free (NULL is fine). */
void replay_destroy(replay *r);

/** Bytes of one frame message and one command message. */
size_t replay_frame_bytes(const replay *r);
size_t replay_command_bytes(const replay *r);

/** The id the next frame gets. */
uint64_t replay_next_id(const replay *r);

/** n (1 .. max_frames) frames in lockstep.  0 or a negative code. */
int replay_lockstep(replay *r, long n, int timeout_ms,
		    struct replay_result *res);

/** n frames at rate_hz, then up to drain_ms for the last answers. */
int replay_free(replay *r, long n, double rate_hz, int drain_ms,
		struct replay_result *res);

typedef struct replay_echo replay_echo;

/**
 * Start the echo peer in a thread (pinned to cpu when cpu >= 0): connects
 * a PULL to frames_endpoint and a PUSH to commands_endpoint in zctx and
 * answers each frame of at most frame_bytes with a command of n_act zeros.
 */
int replay_echo_start(void *zctx, const char *frames_endpoint,
		      const char *commands_endpoint, size_t frame_bytes,
		      int n_act, int cpu, replay_echo **out, wt_error *err);

/** Stop the thread and close its sockets (NULL is fine); frames answered
 * in *answered when not NULL. */
void replay_echo_stop(replay_echo *e, uint64_t *answered);

#endif /* REPLAY_H */
