/*
 * sim_sample.h - the simulated aberrating sample: a static Zernike
 * aberration, a slow random-walk drift of its coefficients, and an optional
 * von Karman turbulence screen in frozen flow (sim_screen.h).
 *
 * The wavefront is in micrometres of optical path on the whole pupil sample
 * grid (sim_pupil.h; the polynomials and the screen are continued past the
 * pupil's edge):
 *
 *   W(x, y) = sum_j a_j Z_j(x, y)  [+ turbulence],
 *
 * Z_j the RMS-1 Noll-ordered Zernike polynomials of lib/wt_zernike.h, so a_j
 * is the RMS over the pupil that mode j contributes.
 *
 * Drift: every listed coefficient, and every Noll index 2 .. drift_max_noll
 * besides, takes an independent Gaussian step of drift_nm_per_sqrt_s *
 * sqrt(dt) nanometres RMS at each sim_sample_advance(dt): a random walk
 * whose spread grows as rate * sqrt(t) (a Wiener process).
 *
 * Turbulence: a screen of D/r0 at the sensing wavelength, outer scale L0
 * (in pupil diameters), moved by wind * dt pupil diameters per advance in
 * the wind's direction (Taylor's frozen flow).  The screen's phase
 * (radians at the sensing wavelength) becomes path by wavelength / (2 pi).
 */
#ifndef SIM_SAMPLE_H
#define SIM_SAMPLE_H

#include <stdbool.h>
#include <stdint.h>

#include "sim_pupil.h"
#include "wt_error.h"

/** Most Zernike terms a sample holds (listed and drifting together). */
#define SIM_SAMPLE_MAX_MODES 1024

/** What the sample is. */
typedef struct sim_sample_params {
	int n_modes;		    /**< listed static terms */
	const int *noll;	    /**< n_modes Noll indices (>= 1) */
	const double *coef_um;	    /**< n_modes values, um RMS */
	double drift_nm_per_sqrt_s; /**< random-walk rate (0 = static) */
	int drift_max_noll;	    /**< also drift Noll 2..this (0 = none) */
	uint64_t seed;		    /**< drift and screen random numbers */
	bool turbulence;	    /**< add the screen */
	double d_over_r0;	    /**< pupil diameter / r0 */
	double outer_scale_pupils;  /**< L0 / D, 0 = Kolmogorov */
	double wind_pupils_per_s;   /**< frozen-flow speed, D per second */
	double wind_angle_deg;	    /**< from +x towards +y */
	double wavelength_nm;	    /**< the screen's phase is at this */
} sim_sample_params;

typedef struct sim_sample sim_sample;

/** No aberration, no drift, no turbulence, 920 nm. */
void sim_sample_params_default(sim_sample_params *p);

/**
 * Build the sample over pupil (which must outlive it): tabulates every mode
 * on the grid, and makes and draws the turbulence screen.  Refuses
 * (-EINVAL) Noll indices < 1 or listed twice, more than
 * SIM_SAMPLE_MAX_MODES terms, non-finite values; -ENOMEM.  Allocates.
 */
int sim_sample_create(const sim_sample_params *p, const sim_pupil *pupil,
		      sim_sample **out, wt_error *err);

/** Free the sample (NULL allowed). */
void sim_sample_destroy(sim_sample *s);

/** Advance time by dt_s seconds: drift steps, screen moves.  No allocation. */
void sim_sample_advance(sim_sample *s, double dt_s);

/** Elapsed simulated time, seconds. */
double sim_sample_time(const sim_sample *s);

/** The wavefront now (n * n, um of path, on the whole grid). */
void sim_sample_wavefront(sim_sample *s, double *wavefront_um);

/**
 * The Zernike part's coefficients now: returns the number of terms and, if
 * noll / coef_um are not NULL, copies up to max of them (screen excluded).
 */
int sim_sample_coefficients(const sim_sample *s, int *noll, double *coef_um,
			    int max);

#endif /* SIM_SAMPLE_H */
