/*
 * sim_driver.h - wavetrim-sim's driver loop: the simulated camera and mirror
 * speak the driver protocol (lib/wt_proto.h) to wavetrimd over ZeroMQ, and
 * the simulator publishes the truth of every frame.
 *
 * Sockets (all bound by the simulator, ZMQ_LINGER 0):
 *   driver.frames    PUSH  frames out: one single-part wt_proto message of
 *                          kind WT_KIND_PIXELS_U16 per frame, width = height
 *                          = sensor.lenslets * sensor.pixels_per_lenslet,
 *                          sequence = frame id (0, 1, 2, ... no gaps unless
 *                          a frame was dropped in free mode), timestamp_ns =
 *                          CLOCK_MONOTONIC at the exposure
 *   driver.commands  PULL  commands in: WT_KIND_COMMAND_F32, width = the
 *                          mirror's valid actuators, height 1, sequence =
 *                          the id of the frame the command answers
 *   sim.truth        PUB   one message per frame (layout below)
 *
 * A command is refused - counted in `refused`, never applied - when it
 * fails wt_proto_decode(), is not of kind COMMAND_F32, has a width other
 * than the actuator count, holds a NaN or infinity, or answers a frame not
 * yet sent.  A command answering an older frame than a command accepted
 * before it (an out-of-order one) is dropped as stale (counted in
 * `stale`); a second answer to the same frame replaces the first (that is
 * how the daemon's flat or safe command arrives when it stops or faults).
 * An accepted command's values outside [-1, 1] are clipped by the mirror
 * and counted (sim_mirror.h).
 *
 * Timing, sim.mode = lockstep, d = sim.delay >= 1:
 *   - frames 0 .. d-1 are exposed and sent at once, with the mirror flat;
 *   - frame m >= d is exposed only once a command answering frame m - d (or
 *     any later frame) has arrived;
 *   - the command answering frame k is applied to the mirror from the
 *     exposure of frame k + d onward (until a newer one replaces it): before
 *     exposing frame m every accepted command answering a frame <= m - d is
 *     applied in order, commands answering later frames wait their turn.
 *   So d = 1 is strict alternation (the next frame sees the command); with
 *   d = 2 frame m sees the command computed from frame m - 2, and the daemon
 *   always has one more frame in hand while it computes.  For a pure
 *   integrator c <- c - g s on a plant measured with this delay, the loop
 *   is stable for 0 < g < 2 when d = 1 and for 0 < g < 1 when d = 2 (roots
 *   of z^2 - z + g = 0 inside the unit circle: |z|^2 = g), so g = 1.2
 *   diverges and g = 0.5 converges at d = 2.
 *   The daemon must answer every frame (or a later one).  While waiting the
 *   simulator polls in slices of at most 50 ms, retries on EINTR and checks
 *   the stop flag after each.  When sim.timeout_ms passes without the
 *   awaited command it counts a timeout (truth field `timeouts`), logs a
 *   warning and exposes frame m anyway with the command in force, then
 *   waits for the command frame m + 1 needs, and so on: a lost command or
 *   a restarted daemon costs one timeout, never a stalled loop, and a
 *   silent daemon gets one frame per timeout.  A frame exposed that way
 *   breaks the delay rule above, so keep sim.timeout_ms (default 2000)
 *   above the daemon's driver.timeout_ms: a daemon that is merely slow
 *   then declares the link silent before the simulator ever moves on
 *   without it.
 *
 * Timing, sim.mode = free: a frame every 1 / sim.frame_rate_hz seconds of
 * CLOCK_MONOTONIC; before each exposure every command received so far is
 * read and the newest accepted one is applied.  A frame that cannot be sent
 * at once (no daemon connected, or its queue full at ZMQ_SNDHWM) is dropped
 * and counted; a late loop starts its schedule again from now.
 *
 * In both modes simulated time advances by 1 / sim.frame_rate_hz per frame.
 *
 * Truth message: 207 bytes (version 2), single part, all little-endian, no
 * padding; the topic is the 5-byte prefix, so a SUB socket filters on
 * "truth":
 *
 *   offset size type  field
 *        0    5 char  "truth"
 *        5    2 u16   version (1)
 *        7    8 u64   frame            frame id
 *       15    8 i64   command          sequence of the command in force
 *                                      (-1: none yet, the mirror is flat)
 *       23    8 f64   time_s           simulated time of the exposure
 *       31    8 f64   rms_nm           residual RMS, piston removed
 *       39    8 f64   rms_tt_removed_nm  ... piston, tip and tilt removed
 *       47    8 f64   strehl           at sensor.wavelength_nm
 *       55    4 u32   clipped          values clipped in the command in force
 *       59    4 u32   saturated        saturated pixels in the frame
 *       63    8 u64   refused          commands refused so far
 *       71    8 u64   stale            commands dropped as stale so far
 *       79    8 u64   clipped_total    values clipped so far
 *       87    8 u64   timeouts         lockstep timeouts so far
 *       95  112 f64[14] zernike_nm     residual's Zernike coefficients of
 *                                      Noll 2 .. 15, nm RMS (least squares
 *                                      over the pupil, sim_world.h)
 *
 *   (Python: struct.unpack("<5sHQqddddIIQQQQ14d", msg).)  The residual is
 *   the sample's wavefront minus the mirror's (sim_world.h).  Version 1 was
 *   the first 95 bytes alone (no Zernike coefficients); sim_truth_decode()
 *   still reads it, with NaN coefficients.
 */
#ifndef SIM_DRIVER_H
#define SIM_DRIVER_H

#include <signal.h>
#include <stddef.h>
#include <stdint.h>

#include "sim_world.h"
#include "wt_config.h"
#include "wt_error.h"
#include "wt_log.h"

/** The truth topic and the record's size on the wire. */
#define SIM_TRUTH_TOPIC	  "truth"
#define SIM_TRUTH_VERSION  2
#define SIM_TRUTH_BYTES	   207
#define SIM_TRUTH_BYTES_V1 95
#define SIM_TRUTH_ZERNIKES SIM_WORLD_ZERNIKES

/** One truth record (host order). */
typedef struct sim_truth {
	uint64_t frame;
	int64_t command;
	double time_s;
	double rms_nm;
	double rms_tt_removed_nm;
	double strehl;
	uint32_t clipped;
	uint32_t saturated;
	uint64_t refused;
	uint64_t stale;
	uint64_t clipped_total;
	uint64_t timeouts;
	/** Noll SIM_WORLD_ZERNIKE_FIRST + i, nm RMS (NaN from version 1) */
	double zernike_nm[SIM_TRUTH_ZERNIKES];
} sim_truth;

/** Write t as the 207-byte version 2 message into out. */
void sim_truth_encode(const sim_truth *t, uint8_t out[SIM_TRUTH_BYTES]);

/**
 * Read a truth message: 0, or -EINVAL when the topic is not "truth", the
 * version is not 1 or 2, or len is not that version's size.
 */
int sim_truth_decode(const void *msg, size_t len, sim_truth *t);

/** Counters of the loop. */
typedef struct sim_driver_stats {
	uint64_t frames;   /**< frames sent */
	uint64_t accepted; /**< commands applied (or queued to be) */
	uint64_t refused;  /**< commands refused */
	uint64_t stale;	   /**< commands dropped as stale */
	uint64_t dropped;  /**< free mode: frames not sent */
	uint64_t timeouts; /**< lockstep: waits past sim.timeout_ms */
} sim_driver_stats;

typedef struct sim_driver sim_driver;

/**
 * Build the world (sim_world_create) and bind driver.frames,
 * driver.commands and sim.truth in a context of its own.  log may be NULL
 * (then nothing is logged); it must outlive the driver.  Returns 0 or a
 * negative code with the message in *err.  The driver and its sockets
 * belong to the thread that runs it.
 */
int sim_driver_create(const wt_config *cfg, wt_log *log, sim_driver **out,
		      wt_error *err);

/** Close the sockets and the context, free everything (NULL allowed). */
void sim_driver_destroy(sim_driver *d);

/**
 * Run until *stop becomes non-zero (a signal handler or another thread sets
 * it; it is checked at least every 50 ms), or until max_frames frames have
 * been sent (0 = no limit).  Returns 0 when stopped, or a negative code on
 * a socket error.
 */
int sim_driver_run(sim_driver *d, volatile sig_atomic_t *stop,
		   uint64_t max_frames);

/** Counters so far (read them from the driver's thread, or after run). */
void sim_driver_stats_get(const sim_driver *d, sim_driver_stats *st);

/** The world it drives. */
sim_world *sim_driver_world(sim_driver *d);

#endif /* SIM_DRIVER_H */
