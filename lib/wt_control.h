/*
 * wt_control.h - leaky integrator with the mirror's safety limits.
 *
 * Each frame: u = R s (float), c <- (1 - leak) c - gain u, then the command
 * is clipped to [lo, hi] per actuator and limited to max_step per frame
 * against the previous command.  The integrator state *is* the command
 * sent, so clipping and slew limiting also bound the state (anti-windup):
 * after a long saturation the loop leaves the limit on the first frame the
 * error changes sign.
 *
 * wt_control_step() allocates nothing and takes no lock: call it, and every
 * setter, from one thread (the loop thread applies changes between frames).
 */
#ifndef WT_CONTROL_H
#define WT_CONTROL_H

#include "wt_error.h"
#include "wt_mvm_split.h"

/** Integrator state for n_act actuators driven from n_slopes slopes. */
typedef struct wt_control wt_control;

/**
 * Create a controller: gain 0, leak 0, no matrix, limits [-1, 1] (the
 * normalised stroke of the command messages), no slew limit, command 0.
 * Returns 0, -EINVAL (a size < 1 or too large, out NULL) or -ENOMEM.
 */
int wt_control_create(int n_act, int n_slopes, wt_control **out, wt_error *err);

/** Free a controller (NULL is fine); the control matrix is the caller's. */
void wt_control_destroy(wt_control *c);

/**
 * Swap in a new n_act x n_slopes row-major float control matrix R.  The
 * caller keeps ownership (R must stay valid until swapped out) and gets the
 * previous pointer back.  NULL means no matrix: step then only leaks.
 */
const float *wt_control_swap_matrix(wt_control *c, const float *R);

/**
 * Compute u = R s with sp (wt_mvm_split.h: the rows over two CPUs) from
 * the next step on, or with our own kernel on the calling thread when sp
 * is NULL (the default).  sp stays the caller's and must be for n_act x
 * n_slopes products; the matrix is still the one swapped in here, passed
 * to sp on every step, so a swap needs nothing from sp.  Both give the
 * same u to the bit when sp uses our own kernel (WT_MVM_OWN).  Returns 0,
 * or -EINVAL (nothing changed) for a split of another size.
 */
int wt_control_set_split(wt_control *c, wt_mvm_split *sp);

/** Integrator gain g. */
void wt_control_set_gain(wt_control *c, float gain);

/** Fraction of the command forgotten each frame (0 = pure integrator). */
void wt_control_set_leak(wt_control *c, float leak);

/**
 * Per-actuator limits, copied (n_act values each; +-INFINITY disables a
 * side).  Returns -EINVAL, leaving the limits as they were, when a pointer
 * is NULL, a value is NaN or lo > hi.  They apply from the next step.
 */
int wt_control_set_limits(wt_control *c, const float *lo, const float *hi);

/** Largest change of any actuator per frame; 0 (or less, or NaN) = off. */
void wt_control_set_slew(wt_control *c, float max_step);

/**
 * Set the integrator state and command to cmd (n_act values, clipped to the
 * limits; non-finite values become 0), or to zeros when cmd is NULL.  The
 * rejected count is kept.
 */
void wt_control_reset(wt_control *c, const float *cmd);

/** What one step did. */
typedef struct wt_control_stats {
	int n_clipped; /**< actuators held at a limit this step */
	int n_slewed;  /**< actuators slowed by the slew limit this step */
	long rejected; /**< steps rejected for NaN/Inf since creation */
} wt_control_stats;

/**
 * One frame: u = R s; c <- (1 - leak) c - gain u; clip to [lo, hi] (the
 * state is clipped too: anti-windup); limit the change from the previous
 * command to max_step (should the limits have just been tightened past the
 * previous command, the limits win); copy the command (n_act floats) to
 * cmd.  A NaN or
 * Inf in s, in u or in the new command rejects the whole update: the state
 * is unchanged, the rejection counted, the unchanged command still copied
 * to cmd, and -ERANGE returned.  cmd and st may be NULL.  Returns 0, or
 * -EINVAL for NULL c or s.  No allocation.
 */
int wt_control_step(wt_control *c, const float *s, float *cmd,
		    wt_control_stats *st);

/** The current command (n_act floats, owned by c). */
const float *wt_control_command(const wt_control *c);

#endif /* WT_CONTROL_H */
