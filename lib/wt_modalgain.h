/*
 * wt_modalgain.h - modal gain optimisation for an integrator with delay
 * (after Gendron & Lena 1994, A&A 291, 337).
 *
 * For each mode, from a record of its open-loop (or pseudo-open-loop)
 * coefficient, choose the integrator gain on a grid that minimises the
 * predicted residual variance
 *
 *   J(g) = integral |E(f, g)|^2 S_turb(f) df + noise_var integral |N(f, g)|^2
 * df
 *
 * over normalised frequency f in [-1/2, 1/2] (cycles per frame), where
 * S_turb is the PSD of the disturbance and noise_var the variance of the
 * white measurement noise of that mode's coefficient.
 *
 * Loop model (discrete time, one sample per frame t).  phi_t is the
 * disturbance, c_t the integrator's output, m_t the correction in force
 * during exposure t, n_t the measurement noise:
 *
 *   r_t = phi_t - m_t           residual seen by exposure t
 *   y_t = r_t + n_t             measurement of frame t
 *   c_t = c_(t-1) + g y_t       pure integrator
 *   m_t = c_(t-d)               the command computed from frame t is in
 *                               force from exposure t + d (d >= 1: d = 1
 *                               when the mirror has settled by the next
 *                               exposure, as in wt_calib.h; d = 2 when
 *                               read-out and computation take a frame)
 *
 * With the open-loop transfer L(z) = g z^-d / (1 - z^-1), R = Phi - L (R +
 * N), so the closed loop is
 *
 *   E(z) = R / Phi = 1 / (1 + L) = (1 - z^-1) / (1 - z^-1 + g z^-d)
 *   N(z) = R / N   = -L / (1 + L) = -g z^-d / (1 - z^-1 + g z^-d)
 *
 * evaluated at z = exp(i 2 pi f); note E = 1 + N.  Stability: the poles
 * are the roots of z^d - z^(d-1) + g = 0.  They leave the unit circle
 * where z = exp(i w) solves g = exp(i w (d - 1)) (1 - exp(i w)); its
 * modulus 2 sin(w / 2) and phase w (d - 1/2) - pi/2 = 0 give w = pi /
 * (2d - 1) and the limit g_max = 2 sin(pi / (2 (2d - 1))): 2 for d = 1, 1
 * for d = 2, 0.618 for d = 3 (for d = 1, 2 it is the Jury test's result).
 *
 * Noise term.  integral |N|^2 df = sum_t h_t^2 (Parseval), with h the
 * impulse response of N, summed in the time domain (exact to rounding;
 * closed forms g / (2 - g) for d = 1 and g (1 + g) / ((1 - g) (2 + g)) for
 * d = 2, the variance of the matching AR(1) and AR(2) processes).
 *
 * Disturbance term.  S_turb = S - noise_var, with S the Welch estimate of
 * the record's PSD (Welch 1967, IEEE Trans. Audio Electroacoust. 15, 70):
 * segments of `segment` frames overlapping by half, each with its mean
 * removed and a periodic Hann window, |DFT|^2 / sum w^2 averaged, so that
 * (1/L) sum_k S_k is the record's variance (two-sided, k = 0 .. L-1, bin k
 * at f = k / L, folded to [-1/2, 1/2)).  The integral is the mean over the
 * bins of w_k (S_k - noise_var), with weights w_k = |E_k|^2 - (1/6)
 * (|E_(k+1)|^2 - 2 |E_k|^2 + |E_(k-1)|^2): the Welch estimate is the PSD
 * smoothed by the Hann window's spectral kernel (1/6, 2/3, 1/6 on the
 * bins, second moment 1/3 bin^2; Harris 1978), and these weights undo that
 * to second order.  Without them a disturbance concentrated at low
 * frequency, where |E|^2 ~ (2 pi f / g)^2, would be over-predicted by
 * (2 pi / g)^2 var / (3 L^2): 5 to 10 % for a smooth disturbance with L =
 * 1024 in the tests.  The weights sum as |E|^2 does, so the white part is
 * unchanged.  S - noise_var is not clipped at zero per bin: where the noise
 * dominates the difference fluctuates about zero and clipping would bias
 * the sum upwards.  The DFT is this module's radix-2 FFT (Cooley & Tukey
 * 1965), so no planner state is shared with other threads.
 *
 * Noise variance.  Given per mode, or (when negative) the mean of S over
 * the top plateau_fraction of the band, |f| >= (1 - plateau_fraction) / 2:
 * white noise is flat there while most disturbances have fallen off
 * (Gendron & Lena 1994).  Any disturbance power left there biases the
 * estimate upwards.
 *
 * The mean of the record is removed (the integrator rejects a constant
 * exactly, E(1) = 0).  Leak is not modelled: a small leak (<= 0.01) changes
 * E only below f ~ leak / (2 pi).  The gains are the loop gains of each
 * mode: with wt_control's global gain g0 and per-mode gains g_i of
 * wt_recon_pinv() the loop gain of mode i is g0 g_i.
 *
 * Pure computation: no I/O, no threads; wt_modalgain_psd() and
 * wt_modalgain_optimize() allocate their scratch.
 */
#ifndef WT_MODALGAIN_H
#define WT_MODALGAIN_H

#include "wt_error.h"

/** Largest delay accepted, frames. */
#define WT_MODALGAIN_MAX_DELAY 16
/** Segment lengths accepted by the PSD: powers of two in this range. */
#define WT_MODALGAIN_MIN_SEGMENT 8
#define WT_MODALGAIN_MAX_SEGMENT 65536

/** How to search; wt_modalgain_params_default() gives the defaults. */
typedef struct wt_modalgain_params {
	int delay;		 /**< d, frames, 1 .. MAX_DELAY (default 2) */
	int segment;		 /**< Welch segment, power of two (256) */
	double gain_min;	 /**< first grid gain, > 0 (0.01) */
	double gain_step;	 /**< grid spacing, > 0 (0.01) */
	double gain_max;	 /**< last grid gain wanted; <= 0: up to the
				  *   stability margin (0) */
	double stability_margin; /**< the grid stays below this fraction of
				  *   g_max, (0, 1) (0.95) */
	double plateau_fraction; /**< share of the band for the noise
				  *   plateau, (0, 1) (0.2) */
} wt_modalgain_params;

void wt_modalgain_params_default(wt_modalgain_params *p);

/** g_max = 2 sin(pi / (2 (2d - 1))); NaN for d outside 1 .. MAX_DELAY. */
double wt_modalgain_stability_limit(int delay);

/**
 * E(f, g) and N(f, g) as complex numbers (re, im) at normalised frequency
 * f; either pointer may be NULL.  -EINVAL for a bad delay or non-finite
 * arguments.
 */
int wt_modalgain_transfer(double gain, int delay, double f, double rej[2],
			  double noise[2]);

/** integral over [-1/2, 1/2] of |N(f, g)|^2; NaN for a bad delay, g <= 0
 * or g >= g_max (unstable). */
double wt_modalgain_noise_gain(double gain, int delay);

/**
 * Welch PSD of n_frames samples x[0], x[stride], ... into psd (segment
 * values, two-sided, normalised as above).  -EINVAL for NULL pointers,
 * stride < 1, a segment that is no power of two in range or longer than
 * the record, or non-finite samples; -ENOMEM.
 */
int wt_modalgain_psd(const double *x, long n_frames, long stride, int segment,
		     double *psd, wt_error *err);

/** Mean of psd over |f| >= (1 - fraction) / 2 (noise plateau); NaN for
 * bad arguments. */
double wt_modalgain_plateau(const double *psd, int segment, double fraction);

/**
 * Predicted residual variance J(g) for a PSD (segment values) and a noise
 * variance; NaN when the gain is unstable or arguments are bad.
 */
double wt_modalgain_predict(const double *psd, int segment, double noise_var,
			    double gain, int delay);

/**
 * The grid: gain_min, gain_min + step, ... up to min(gain_max,
 * margin x g_max).  Writes at most max values to gains (may be NULL to
 * count) and returns the count (>= 1), or -EINVAL for bad parameters
 * (including a grid with no point below the limit).
 */
int wt_modalgain_grid(const wt_modalgain_params *p, double *gains, int max);

/** What the optimiser found for one mode. */
typedef struct wt_modalgain_result {
	double gain;	  /**< grid gain of least predicted residual */
	double predicted; /**< J at that gain */
	double noise_var; /**< measurement noise variance used */
	double open_loop; /**< variance of the record (mean of the PSD) */
} wt_modalgain_result;

/**
 * Optimise every mode.  record is n_frames x n_modes row-major (one vector
 * of modal coefficients per frame: record[t * n_modes + i]).  noise_var is
 * NULL (estimate every mode's from its plateau) or n_modes values (a
 * negative one is estimated).  p NULL means the defaults.  out gets
 * n_modes results.  -EINVAL, -ENOMEM.
 */
int wt_modalgain_optimize(const double *record, long n_frames, int n_modes,
			  const double *noise_var, const wt_modalgain_params *p,
			  wt_modalgain_result *out, wt_error *err);

#endif /* WT_MODALGAIN_H */
