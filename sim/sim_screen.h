/*
 * sim_screen.h - von Karman phase screens for the simulator's turbulence.
 *
 * A screen is an n x n grid of phase values (radians, at the wavelength r0
 * refers to) with spacing dx, row-major (index b * n + a, column a along x),
 * grid point (a, b) at position (a * dx, b * dx).  r0, L0 and dx are in one
 * length unit of the caller's choice (metres, say).
 *
 * Method: the FFT method with low-frequency subharmonics of Lane, Glindemann
 * & Dainty, Waves in Random Media 2, 209 (1992).  The phase PSD is von
 * Karman's
 *   Phi(f) = C r0^(-5/3) (f^2 + 1/L0^2)^(-11/6),   f in cycles per unit,
 * with C = Gamma(11/6)^2 / (2 pi^(11/3)) (24/5 Gamma(6/5))^(5/6) = 0.022896
 * (the "0.023" of the literature; with it the small-r structure function is
 * Fried's 6.8839 (r / r0)^(5/3)).  The FFT grid has df = 1 / (n dx) and
 * leaves out f = 0; subharmonic level l = 1..levels adds the 8 points
 * (i, j) df / 3^l, i, j in {-1, 0, 1} but not both 0, each with its own cell
 * (df / 3^l)^2.  Every frequency point k gets an independent complex normal
 * amplitude with E|c_k|^2 = 2 Phi(f_k) df_k^2, and the screen is the real
 * part of the sum, so the generator's structure function is exactly
 *   D_exp(r) = 2 sum_k Phi(f_k) df_k^2 [1 - cos(2 pi f_k . r)]
 * (sim_screen_structure_expected).  The subharmonic part is kept as its list
 * of frequencies and amplitudes and evaluated exactly at any position.
 *
 * Frozen flow: sample a window at any real offset.  The FFT part is periodic
 * over n dx and is interpolated bilinearly with wrap-around (seamless, as it
 * is periodic); the subharmonic part is evaluated exactly at each point, so
 * the large scales never repeat within 3^levels n dx.  Advancing the offset
 * by wind speed x dt per frame gives Taylor's frozen flow.  Bilinear
 * interpolation at fractional offsets smooths the finest scale a little;
 * keep the screen sampled finer than the pupil grid, or use integer steps.
 */
#ifndef SIM_SCREEN_H
#define SIM_SCREEN_H

#include "sim_rng.h"
#include "wt_error.h"

/** What to generate. */
typedef struct sim_screen_params {
	int n;	   /**< grid points across, even, 8 ... 8192 */
	double dx; /**< grid spacing */
	double r0; /**< Fried parameter (> 0) */
	double L0; /**< outer scale; <= 0 or infinite: Kolmogorov */
	int subharmonic_levels; /**< 0 (none) ... 8; 3 is usual */
} sim_screen_params;

/** The von Karman PSD constant C above (0.0228956...). */
double sim_screen_psd_constant(void);

/** Phi(f) of the PSD above (f in cycles per unit length). */
double sim_screen_psd(double f, double r0, double L0);

typedef struct sim_screen sim_screen;

/**
 * Allocate a screen and plan its FFT (FFTW_ESTIMATE, before any data is
 * written).  The screen is all zeros until the first sim_screen_generate.
 * Returns 0, -EINVAL (message says which parameter), -ENOMEM.
 */
int sim_screen_create(const sim_screen_params *p, sim_screen **out,
		      wt_error *err);
void sim_screen_destroy(sim_screen *s);

/** Parameters the screen was made with. */
const sim_screen_params *sim_screen_params_of(const sim_screen *s);

/** Draw a new independent screen from rng.  Returns 0 (no allocation). */
int sim_screen_generate(sim_screen *s, sim_rng *rng);

/**
 * The current screen on its own grid, FFT part plus subharmonics (n * n
 * radians).  Valid until the next generate or destroy.
 */
const double *sim_screen_phase(const sim_screen *s);

/**
 * Sample an m x m window: out[j * m + i] is the phase at position
 * (x0 + i * step, y0 + j * step), positions in the length unit of dx (any
 * real values; the FFT part wraps with period n dx, see above).  step > 0.
 * Returns 0, -EINVAL.  No allocation.
 */
int sim_screen_sample(const sim_screen *s, double x0, double y0, double step,
		      int m, double *out);

/**
 * The generator's own expected structure function D_exp at the displacement
 * (rx, ry) (length units), summed over the FFT grid and the subharmonic
 * points it uses (radians^2).
 */
double sim_screen_structure_expected(const sim_screen *s, double rx, double ry);

/**
 * Von Karman structure function in closed form for the PSD above:
 *   D(r) = A (L0/r0)^(5/3) [1 - (2 pi^(5/6) / Gamma(5/6)) (r/L0)^(5/6)
 *          K_5/6(2 pi r / L0)],   A = 2.4 pi C = 0.17263
 * (Schmidt, Numerical Simulation of Optical Wave Propagation, 2010, eq.
 * 9.51); L0 <= 0 or infinite gives Kolmogorov's 6.8839 (r/r0)^(5/3).
 */
double sim_screen_structure_vk(double r, double r0, double L0);

/**
 * Modified Bessel function of the second kind K_nu(x), x > 0, from the
 * integral K_nu(x) = int_0^inf exp(-x cosh t) cosh(nu t) dt (A&S 9.6.24) by
 * the trapezoidal rule, which converges exponentially for this integrand.
 * Relative accuracy ~1e-13 for |nu| <= 10, 1e-6 < x < 700.
 */
double sim_bessel_k(double nu, double x);

#endif /* SIM_SCREEN_H */
