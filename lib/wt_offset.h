/*
 * wt_offset.h - the Shack-Hartmann slopes of a Zernike aberration, in the
 * sensor's pixels: what `offset zernike J AMOUNT` adds to the loop's target
 * and what `shape zernike J AMOUNT` asks of the mirror.
 *
 * Physics (the first-moment theorem of Fraunhofer diffraction, from
 * memory; it is how Shack-Hartmann sensors are described, e.g. Hardy,
 * Adaptive Optics for Astronomical Telescopes, 1998, ch. 5): a lenslet of
 * focal length f moves the centroid of its spot by f times the wavefront's
 * mean gradient over the lenslet, dx = f <dW/dx>, in the direction of the
 * slope (the simulator's sim_optics.h uses the same convention).
 * The wavefront a Z_j (a in length units of RMS over the pupil, Z_j of unit
 * RMS in Noll's 1976 normalisation) is a Z_j(x / R, y / R) over a pupil of
 * radius R, so its mean gradient over subaperture k is (a / R) G_kj with
 * G the average-slope matrix per pupil radius of wt_zernike_slope_matrix().
 * On the detector, in pixels of pitch p:
 *
 *   shift_k = f a G_kj / (R p),   R = n_lenslets * pixels_per_lenslet * p / 2
 *
 * since the pupil is inscribed in the lenslet grid (wt_grid_lenslets) and a
 * lenslet covers pixels_per_lenslet pixels (wt_centroid.h).  Slopes follow
 * the loop's order: the x slopes of the valid subapertures, then their y
 * slopes.
 */
#ifndef WT_OFFSET_H
#define WT_OFFSET_H

#include "wt_error.h"
#include "wt_geometry.h"

/** Highest Noll index an offset or a shape may name. */
#define WT_OFFSET_NOLL_MAX 1000

/** The sensor's optics as the conversion needs them. */
typedef struct wt_sensor_optics {
	int pixels_per_lenslet; /**< detector pixels across one lenslet */
	double pixel_um;	/**< detector pixel pitch, micrometres */
	double focal_mm;	/**< lenslet focal length, millimetres */
} wt_sensor_optics;

/**
 * Add the slopes (pixels) of amount_nm nm RMS of Noll mode j to
 * out[2 * lenslets->n_valid].  Returns 0; -EINVAL with the reason for a
 * NULL argument, j < 2 (piston has no slope) or above WT_OFFSET_NOLL_MAX,
 * an amount that is not finite, or optics that are not positive and
 * finite; -ENOMEM.  out is left alone on error.  Allocates (not for the
 * real-time loop).
 */
int wt_offset_add_zernike(const wt_grid *lenslets, const wt_sensor_optics *o,
			  int j, double amount_nm, double *out, wt_error *err);

#endif /* WT_OFFSET_H */
