/*
 * sim_world.h - everything the simulator simulates, put together: the pupil
 * grid, the deformable mirror, the sample and the camera, built from the
 * configuration, and the truth of every frame.
 *
 * One exposure (sim_world_expose):
 *   1. W_sample = the sample's wavefront now (sim_sample.h),
 *      W_mirror = 2 x the mirror's surface for the command in force
 *      (sim_mirror.h: reflection doubles the path),
 *      residual = W_sample - W_mirror  (micrometres of path, pupil grid);
 *   2. truth of the residual over the pupil:
 *      rms_nm            RMS about the mean (piston removed),
 *      rms_tt_removed_nm RMS after removing the least-squares plane
 *                        a + b x + c y (piston, tip and tilt),
 *      strehl            |<exp(i phi)>|^2 over the pupil, phi = 2 pi
 *                        residual / wavelength at sensor.wavelength_nm
 *                        (sim_optics_strehl; Born & Wolf 9.1);
 *      zernike_nm        the least-squares coefficients of Noll 1 .. 15
 *                        (Noll 1976 normalisation, lib/wt_zernike.h) of
 *                        the residual over the pupil's samples, in nm; the
 *                        truth carries Noll 2 .. 15;
 *   3. the camera's frame of the residual plus the sensor arm's own
 *      aberration sim.ncp_zernike (non-common path: the sensor sees it,
 *      the truth, which is the science path, does not) (sim_camera.h);
 *   4. simulated time advances by 1 / sim.frame_rate_hz (sample drift and
 *      turbulence move), ready for the next exposure.
 */
#ifndef SIM_WORLD_H
#define SIM_WORLD_H

#include <stdint.h>

#include "sim_camera.h"
#include "sim_mirror.h"
#include "sim_pupil.h"
#include "sim_sample.h"
#include "wt_config.h"
#include "wt_error.h"

/** The residual's Zernike coefficients in the truth: Noll 2 .. 15. */
#define SIM_WORLD_ZERNIKE_FIRST 2
#define SIM_WORLD_ZERNIKES	14

/** What one exposure was: the residual's figures. */
typedef struct sim_world_truth {
	double time_s;		  /**< simulated time of the exposure */
	double rms_nm;		  /**< residual RMS, piston removed */
	double rms_tt_removed_nm; /**< residual RMS, piston/tip/tilt removed */
	double strehl;		  /**< Strehl ratio at the sensing wavelength */
	int saturated;		  /**< saturated pixels in the frame */
	/** residual's coefficients of Noll SIM_WORLD_ZERNIKE_FIRST + i, nm
	 * RMS (least squares over the pupil's samples, Noll 1 .. 15 fitted
	 * together) */
	double zernike_nm[SIM_WORLD_ZERNIKES];
} sim_world_truth;

typedef struct sim_world sim_world;

/**
 * Build the world from the [sensor], [mirror], [sim], [dm], [sample],
 * [turbulence] and [camera] options of cfg (which need not outlive it).
 * Returns 0 or a negative code with the message in *err.  Allocates.
 */
int sim_world_create(const wt_config *cfg, sim_world **out, wt_error *err);

/** Free it (NULL allowed). */
void sim_world_destroy(sim_world *w);

/** The parts (owned by the world). */
const sim_pupil *sim_world_pupil(const sim_world *w);
sim_mirror *sim_world_mirror(sim_world *w);
sim_sample *sim_world_sample(sim_world *w);
sim_camera *sim_world_camera(sim_world *w);

/** Frame side in pixels and number of mirror commands. */
int sim_world_width(const sim_world *w);
int sim_world_actuators(const sim_world *w);

/** Seconds of simulated time per frame (1 / sim.frame_rate_hz). */
double sim_world_dt(const sim_world *w);

/**
 * Expose one frame with the command in force into frame (width^2 uint16),
 * fill *truth (may be NULL), then advance simulated time.  No allocation.
 * Returns 0 or a negative code.
 */
int sim_world_expose(sim_world *w, uint16_t *frame, sim_world_truth *truth);

/**
 * Truth of the residual W_sample - W_mirror now, without exposing or
 * advancing time.  No allocation.
 */
void sim_world_truth_now(sim_world *w, sim_world_truth *truth);

/**
 * The figures of any wavefront on w's pupil grid (um of path): RMS about
 * the mean, RMS with the best plane removed (both nm) and Strehl ratio.
 * No allocation.
 */
void sim_world_figures(sim_world *w, const double *wavefront_um, double *rms_nm,
		       double *rms_tt_removed_nm, double *strehl);

/**
 * Least-squares Zernike coefficients of a wavefront on w's pupil grid (um
 * of path) into nm[SIM_WORLD_ZERNIKES]: Noll SIM_WORLD_ZERNIKE_FIRST + i,
 * nm RMS.  No allocation.
 */
void sim_world_zernikes(const sim_world *w, const double *wavefront_um,
			double *nm);

#endif /* SIM_WORLD_H */
