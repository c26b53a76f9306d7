/*
 * wt_calib.h - calibration state machine: reference slopes and the
 * push-pull interaction matrix, driven one frame at a time.
 *
 * Pure computation, no I/O and no allocation after wt_calib_create(): the
 * loop thread feeds it the slopes of each frame it accepts and sends the
 * command it returns, so the timing is exact whatever the frame rate.
 *
 * Timing.  Call wt_calib_step() once per frame, with the slopes measured
 * on that frame; it returns the command to send in answer to it.  The
 * first step after wt_calib_start() discards its frame (it shows whatever
 * the mirror had before) and returns the first pattern.  After each new
 * pattern the next `settle` frames are discarded, then `average` frames
 * are averaged.  So with a plant whose frame k shows the command sent in
 * answer to frame k - d (d = 1 is a mirror that has settled by the next
 * exposure) the averages are clean when settle >= d - 1; settle = d is the
 * safe choice.
 *
 * Reference (WT_CALIB_REFERENCE): one pattern, the flat; the result is the
 * average of `reference_frames` frames of slopes.
 *
 * Interaction matrix (WT_CALIB_MATRIX), one actuator at a time, push-pull
 * (common practice): for actuator j, flat + a e_j then flat - a e_j, each
 * with its own settle and average; column j of D is (s+ - s-) / (2 a).
 * For a linear plant s = s0 + D c this is D e_j exactly (the central
 * difference of a linear map), and the push-pull pair cancels s0 and any
 * slow drift that is linear in time across the pair.
 *
 * Interaction matrix with Hadamard patterns (patterns =
 * WT_CALIB_HADAMARD): the 2N states flat + a h_p then flat - a h_p for the
 * N = wt_hadamard_order(n_act) Sylvester patterns h_p (every actuator at
 * +-a in every state), each with its own settle and average; m_p = (s+ -
 * s-) / (2 a) and D = M H_n / N by wt_hadamard_decode() on the finishing
 * frame (no allocation; N log2 N additions per slope).  For the same frames
 * each entry of D has n_act times less noise variance than one actuator at
 * a time (wt_hadamard.h).  A subaperture with no valid frame in the push or
 * the pull of any pattern gives no measurement for any actuator (every
 * decoded entry of its row mixes every pattern): its rows of D are 0 and
 * wt_calib_missing() counts n_act pairs for it.
 *
 * Noise.  While averaging, the spread of each slope about its pattern's
 * mean is pooled over every pattern of the run (within-group variance,
 * divisor frames - 1 per group: common practice, analysis of variance):
 * wt_calib_noise() gives the per-slope noise of one frame with the mirror
 * held still, the input of wt_diag_matrix_noise().
 *
 * Frames whose slopes hold a NaN or an infinity are not counted: the
 * pattern is simply held one frame longer (wt_calib_skipped() counts them).
 *
 * Subapertures under their flux threshold.  A subaperture that is invalid
 * in a frame (valid[k] = 0; its slopes read 0) is left out of that frame's
 * average, so each pattern's average of a subaperture is taken over the
 * frames it was valid in.  Without this, a subaperture near its threshold
 * that is valid in the push and invalid in the pull would enter D with its
 * whole slope divided by 2a - a huge false response that dominates the
 * singular values.  A subaperture valid in no frame of the push or of the
 * pull gives no measurement: its two entries in that column are 0 (and in
 * the reference, its slopes are 0); wt_calib_missing() counts them.
 *
 * Threads: one thread drives a wt_calib (start, step, abort); the results
 * may be read from another thread once that thread knows (through its own
 * synchronisation) that the run finished and no new one has started.
 */
#ifndef WT_CALIB_H
#define WT_CALIB_H

#include <stdbool.h>
#include <stdint.h>

#include "wt_error.h"

/** What a run measures. */
enum wt_calib_kind {
	WT_CALIB_NONE = 0,	/**< nothing (idle) */
	WT_CALIB_REFERENCE = 1, /**< reference slopes, mirror at its flat */
	WT_CALIB_MATRIX = 2,	/**< push-pull interaction matrix */
};

/** "none", "reference", "matrix". */
const char *wt_calib_kind_name(enum wt_calib_kind kind);

/** Which patterns a matrix run pokes (calibration.patterns). */
enum wt_calib_patterns {
	WT_CALIB_SINGLE = 0,   /**< one actuator at a time */
	WT_CALIB_HADAMARD = 1, /**< every actuator, Hadamard signs */
};

/** "single", "hadamard"; "?" for others. */
const char *wt_calib_patterns_name(int patterns);

/** How to measure (the [calibration] options). */
typedef struct wt_calib_params {
	double amplitude;     /**< poke a, normalised stroke, > 0 */
	int settle;	      /**< frames discarded after each new pattern */
	int average;	      /**< frames averaged per poke (>= 1) */
	int reference_frames; /**< frames averaged for the reference (>= 1) */
	int patterns;	      /**< enum wt_calib_patterns (matrix runs) */
} wt_calib_params;

/** Return values of wt_calib_step() that are not errors. */
enum wt_calib_status {
	WT_CALIB_DONE = 0,    /**< finished on this frame; cmd is the flat */
	WT_CALIB_RUNNING = 1, /**< send cmd and keep stepping */
};

typedef struct wt_calib wt_calib;

/**
 * A calibrator for n_act actuators and n_slopes slopes (2 x valid
 * subapertures, so an even number).  Allocates everything it will ever need
 * (the n_slopes x n_act interaction matrix in double among it).  -EINVAL for
 * sizes < 1 or too large, -ENOMEM.
 */
int wt_calib_create(int n_act, int n_slopes, wt_calib **out, wt_error *err);

/** Free (NULL is fine). */
void wt_calib_destroy(wt_calib *c);

/**
 * Frames a run of this kind takes, from its start to the step that
 * returns WT_CALIB_DONE, when no frame is skipped: reference
 * 1 + settle + reference_frames; matrix 1 + 2 P (settle + average) with
 * P = n_act patterns one at a time, P = wt_hadamard_order(n_act) Hadamard.
 * -EINVAL for bad parameters.
 */
long wt_calib_frames(enum wt_calib_kind kind, const wt_calib_params *p,
		     int n_act);

/**
 * Start a run, dropping any earlier result of the same kind.  flat
 * (n_act values) is copied.  lo and hi (n_act values each, or NULL for no
 * limits) are the mirror's limits: a matrix run whose flat +- amplitude
 * would leave them is refused with -ERANGE and the first actuator that
 * would (every pattern, single or Hadamard, puts each actuator at flat + a
 * or flat - a, so this covers every pattern).  Also -EINVAL for bad parameters or a kind that is no run, and
 * -EBUSY while a run is in progress.  No allocation.
 */
int wt_calib_start(wt_calib *c, enum wt_calib_kind kind,
		   const wt_calib_params *p, const float *flat, const float *lo,
		   const float *hi, wt_error *err);

/**
 * One frame: slopes (n_slopes values, as measured on this frame) and the
 * validity of each subaperture (n_slopes / 2 bytes, 0 = invalid; NULL =
 * all valid) in, the command to send in answer (n_act values) out.
 * Returns WT_CALIB_RUNNING, WT_CALIB_DONE (the result is ready, cmd is the
 * flat), or -EINVAL when no run is in progress or a pointer is NULL.  No
 * allocation.
 */
int wt_calib_step(wt_calib *c, const float *slopes, const uint8_t *valid,
		  float *cmd);

/** Stop a run in progress; its partial data is dropped. */
void wt_calib_abort(wt_calib *c);

/** The kind of the run in progress, WT_CALIB_NONE when idle. */
enum wt_calib_kind wt_calib_running(const wt_calib *c);

/** Frames stepped in the current (or last) run, and how many it takes. */
void wt_calib_progress(const wt_calib *c, long *done, long *total);

/** Frames not counted for non-finite slopes in the current (last) run. */
long wt_calib_skipped(const wt_calib *c);

/** Measurements missing in the current (last) run for lack of a valid
 * frame: (subaperture, actuator) pairs of a matrix run, subapertures of a
 * reference run. */
long wt_calib_missing(const wt_calib *c);

/**
 * Per-slope noise of one frame from the last finished matrix run: the
 * pooled standard deviation of each slope about its pattern's mean (see
 * Noise above) into rms (n_slopes values; NaN where no pattern had two
 * valid frames), and *rms_all (may be NULL) the square root of the mean
 * variance over the slopes that have one.  -ENODATA when no matrix result
 * exists or no slope has a variance (average = 1); -EINVAL for NULL rms.
 */
int wt_calib_noise(const wt_calib *c, double *rms, double *rms_all);

/** The parameters of the last finished matrix run into *p; -ENODATA when
 * there is none. */
int wt_calib_matrix_params(const wt_calib *c, wt_calib_params *p);

/** Whether a finished result of this kind is available. */
bool wt_calib_has_result(const wt_calib *c, enum wt_calib_kind kind);

/** The interaction matrix D, n_slopes x n_act row-major (slope i, actuator
 * j at [i * n_act + j]), of the last finished matrix run; NULL if none. */
const double *wt_calib_interaction(const wt_calib *c);

/** The reference slopes (n_slopes) of the last finished reference run;
 * NULL if none. */
const double *wt_calib_reference(const wt_calib *c);

/** Sizes given at creation. */
int wt_calib_n_act(const wt_calib *c);
int wt_calib_n_slopes(const wt_calib *c);

/**
 * Diagnostics: the Euclidean norm of each column of an m x n row-major D
 * (the response of each actuator) into norm (n values).  A dead or
 * unplugged actuator shows as a norm near 0.  -EINVAL for NULL or sizes
 * < 1.
 */
int wt_calib_response_norms(const double *D, int m, int n, double *norm);

#endif /* WT_CALIB_H */
