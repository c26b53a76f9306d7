/*
 * sim_camera.h - the simulated Shack-Hartmann camera.
 *
 * Optics: n x n lenslets of pitch pixels_per_lenslet x pixel_um, focal
 * length focal_mm, in front of a camera with the window layout lib's
 * centroider expects (lenslet (i, j) images onto the p x p window starting
 * at pixel (i p, j p), its axis at the window centre).  The pupil (diameter n
 * lenslet pitches) carries the wavefront of sim_pupil's grid; its phase at
 * the sensing wavelength, 2 pi W / wavelength, goes to the spot renderer of
 * sim_optics.h: "geometric" is a Gaussian spot of the diffraction width
 * placed at f x the lenslet's mean wavefront slope, "diffraction" the
 * |FFT|^2 of each lenslet's field.  So a wavefront tilt of theta radians
 * moves every spot by f theta / pixel_um pixels.
 *
 * Light: `photons` photo-electrons per frame pass the whole pupil (quantum
 * efficiency folded in), shared by the lenslets in proportion to the light
 * each collects (edge lenslets less).  Every lenslet with any light is drawn,
 * valid for the centroider or not.
 *
 * Detector, per pixel, in this order:
 *   e      = expected photo-electrons + background_e
 *   e      = Poisson(e)                    (when photon_noise)
 *   e     += read_noise_e * N(0, 1)        (when read_noise_e > 0)
 *   counts = gain * e + offset_counts
 *   pixel  = round(counts) clipped to [0, 2^bit_depth - 1]
 * so the top code 2^bit_depth - 1 is the saturation level.  All random
 * numbers come from one sim_rng seeded with `seed`.
 */
#ifndef SIM_CAMERA_H
#define SIM_CAMERA_H

#include <stdbool.h>
#include <stdint.h>

#include "sim_optics.h"
#include "sim_pupil.h"
#include "wt_error.h"

/** What the camera is. */
typedef struct sim_camera_params {
	int n_lenslets;		   /**< lenslets across */
	int pixels_per_lenslet;	   /**< window side p */
	double pixel_um;	   /**< pixel pitch */
	double focal_mm;	   /**< lenslet focal length */
	double wavelength_nm;	   /**< sensing wavelength */
	enum sim_spot_model model; /**< SIM_SPOT_GAUSSIAN or _DIFFRACTION */
	double photons;	      /**< photo-electrons per frame, whole pupil */
	bool photon_noise;    /**< Poisson noise on signal + background */
	double read_noise_e;  /**< electrons RMS per pixel */
	double background_e;  /**< mean electrons per pixel */
	double offset_counts; /**< pedestal, counts */
	double gain;	      /**< counts per electron */
	int bit_depth;	      /**< 1 .. 16 */
	uint64_t seed;	      /**< noise random numbers */
} sim_camera_params;

typedef struct sim_camera sim_camera;

/** 16 lenslets of 16 px of 6.5 um, f 5.2 mm, 920 nm, diffraction spots,
 * 2e5 photons, shot noise, 1.5 e- read noise, gain 1, 12 bits. */
void sim_camera_params_default(sim_camera_params *p);

/**
 * Build the camera for pupil (which must outlive it, and must have
 * p->n_lenslets lenslets across).  Refuses (-EINVAL) bad parameters (the
 * message says which); -ENOMEM.  Allocates and plans FFTs: set-up use.
 */
int sim_camera_create(const sim_camera_params *p, const sim_pupil *pupil,
		      sim_camera **out, wt_error *err);

/** Free the camera (NULL allowed). */
void sim_camera_destroy(sim_camera *c);

/** Pixels across the (square) frame: n_lenslets * pixels_per_lenslet. */
int sim_camera_width(const sim_camera *c);

/** Radius of the pupil on the lenslet array, micrometres. */
double sim_camera_pupil_radius_um(const sim_camera *c);

/**
 * Expose one frame of the wavefront (pupil grid, um of path) into frame
 * (width^2 uint16).  Returns the number of saturated pixels (>= 0) or
 * -EINVAL.  No allocation.
 */
int sim_camera_expose(sim_camera *c, const double *wavefront_um,
		      uint16_t *frame);

/** The noiseless expected photo-electrons of the last exposure (width^2). */
const float *sim_camera_expected(const sim_camera *c);

/** Photo-electrons a fully lit lenslet receives per frame. */
double sim_camera_photons_per_lenslet(const sim_camera *c);

#endif /* SIM_CAMERA_H */
