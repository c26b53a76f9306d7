/*
 * sim_mirror.h - the simulated continuous-facesheet deformable mirror.
 *
 * Actuators sit on the grid of wt_grid_actuators() (the [mirror] options);
 * command k (normalised stroke, k in the grid's valid order) drives channel
 * k.  The facesheet's surface on the pupil sample grid (sim_pupil.h) is
 *
 *   surface(x, y) = stroke_um * sum_k g_k c_k IF_k(x, y),
 *   IF_k(x, y)    = exp(-((x - x_k)^2 + (y - y_k)^2) / (2 sigma^2)),
 *
 * a Gaussian influence function whose value one actuator pitch away is the
 * nearest-neighbour coupling w (IF(pitch) = w, hence sigma = pitch /
 * sqrt(-2 ln w)); a common model of continuous facesheets (from memory).
 * Each influence function is kept (sparse) on the grid samples within
 * 4 sigma of its actuator, where it has fallen to exp(-8) = 3e-4.  The
 * facesheet goes on past the pupil's edge, so the surface is computed on the
 * whole grid (the optics interpolate across the edge; only points inside
 * the pupil carry light).
 *
 * The mirror is used in reflection, so the wavefront it adds is twice its
 * surface: sim_mirror_wavefront() returns 2 x surface (micrometres of
 * optical path).  The simulator's residual is sample - mirror wavefront.
 *
 * Faults a real corrector has, each optional:
 *  - dead channel: its command moves nothing (g = 0);
 *  - weak channel: g = weak_gain (< 1);
 *  - swapped pair (a, b): channel a drives the actuator at b's position and
 *    channel b the one at a's (a crossed cable);
 *  - misregistration: every actuator position is rotated by rotation_deg
 *    about the pupil centre (counter-clockwise, from +x towards +y) and then
 *    shifted by (shift_x, shift_y) lenslet pitches (subapertures) of the
 *    sensor, which is what the sensor sees of a mirror that is mounted off.
 *
 * Commands outside [-1, 1] are clipped before they are applied (as a real
 * mirror's driver electronics would) and counted.
 */
#ifndef SIM_MIRROR_H
#define SIM_MIRROR_H

#include "sim_pupil.h"
#include "wt_error.h"
#include "wt_geometry.h"

/** What the mirror is. */
typedef struct sim_mirror_params {
	int actuators;	       /**< actuators across the square grid */
	enum wt_layout layout; /**< which grid points exist */
	double pupil_pitches;  /**< pupil diameter in actuator pitches */
	double margin_pitches; /**< CIRCLE layout margin */
	double stroke_um;      /**< surface at command +1, micrometres */
	double coupling;       /**< IF at one pitch, in (0, 1) */
	int dead;	       /**< dead channel, -1 = none */
	int weak;	       /**< weak channel, -1 = none */
	double weak_gain;      /**< its gain, [0, 1] */
	int swap_a, swap_b;    /**< swapped channels, -1 = none */
	double shift_x;	       /**< misregistration, lenslet pitches */
	double shift_y;	       /**< misregistration, lenslet pitches */
	double rotation_deg;   /**< misregistration, degrees */
} sim_mirror_params;

typedef struct sim_mirror sim_mirror;

/** A healthy 12 x 12 corners mirror over 11 pitches, 1 um stroke, w 0.15. */
void sim_mirror_params_default(sim_mirror_params *p);

/**
 * Build the mirror over pupil (which must outlive it) and precompute the
 * influence functions; the command starts flat (all 0).  Refuses (-EINVAL)
 * a coupling outside (0, 1), a stroke <= 0, a fault index outside the valid
 * actuators, a swap of a channel with itself or with only one of the pair
 * given; -ENOMEM.  Allocates.
 */
int sim_mirror_create(const sim_mirror_params *p, const sim_pupil *pupil,
		      sim_mirror **out, wt_error *err);

/** Free the mirror (NULL allowed). */
void sim_mirror_destroy(sim_mirror *m);

/** Number of command values (valid actuators). */
int sim_mirror_count(const sim_mirror *m);

/** The actuator grid (nominal positions, before misregistration). */
const wt_grid *sim_mirror_grid(const sim_mirror *m);

/** Influence function width sigma, pupil-radius units. */
double sim_mirror_sigma(const sim_mirror *m);

/** Where actuator k really is (after misregistration), pupil units. */
void sim_mirror_position(const sim_mirror *m, int k, double *x, double *y);

/**
 * Take a new command (count() floats): values outside [-1, 1] are clipped.
 * Returns the number clipped (>= 0, also added to the running total), or
 * -ERANGE, leaving the mirror as it was, if any value is NaN or infinite.
 * No allocation.
 */
int sim_mirror_apply(sim_mirror *m, const float *cmd);

/** The command in force (after clipping). */
const float *sim_mirror_command(const sim_mirror *m);

/** Values clipped in the command in force / since creation. */
int sim_mirror_clipped_last(const sim_mirror *m);
long sim_mirror_clipped_total(const sim_mirror *m);

/** Surface of the command in force on the whole pupil grid (n * n, um). */
void sim_mirror_surface(const sim_mirror *m, double *surface_um);

/** Wavefront added in reflection: 2 x surface (n * n, um of path). */
void sim_mirror_wavefront(const sim_mirror *m, double *wavefront_um);

#endif /* SIM_MIRROR_H */
