/*
 * bench_svd.h - how long the daemon takes to turn an interaction matrix
 * into a control matrix, next to a bare LAPACK SVD of the same matrix.
 *
 * The daemon's path (daemon/control.c: ensure_svd, build_matrix) is
 * wt_svd_compute (a copy of D, LAPACKE_dgesdd, the dgesvd fallback),
 * wt_recon_modes and wt_recon_pinv_float (R = V_k diag(1/s) U_k^T in
 * double, rounded to float).  The bare call is LAPACKE_dgesdd(ROW_MAJOR,
 * 'S') on a copy of the same D with buffers allocated beforehand: the least
 * any SVD-based control matrix must cost.  The two are run alternately,
 * bare first, and each is reported as its fastest run.
 */
#ifndef BENCH_SVD_H
#define BENCH_SVD_H

#include "wt_error.h"
#include "wt_geometry.h"

struct bench_svd {
	int m, n;	   /**< slopes, actuators */
	int runs;	   /**< runs of each */
	int kept;	   /**< modes the daemon's path kept */
	double bare_ns;	   /**< fastest bare LAPACKE_dgesdd */
	double svd_ns;	   /**< fastest wt_svd_compute */
	double pinv_ns;	   /**< wt_recon_modes + pinv_float of that run */
	double total_ns;   /**< fastest svd + pinv */
	double sv_max_rel; /**< largest |s_ours - s_bare| / s_bare[0] */
	double cond;	   /**< s_1 / s_kept */
};

/**
 * Modelled interaction matrix D (2 n_valid lenslets x n_valid actuators,
 * row-major, x slopes first, as the daemon orders them): each actuator a
 * Gaussian influence exp(-r^2 / (2 sigma^2)) with sigma = sigma_pitches
 * actuator pitches, its slopes the analytic gradient at each lenslet
 * centre, plus seeded uniform noise of noise_rel times the largest entry
 * (a measured matrix has noise in every entry).  D holds 2 * lenslets->
 * n_valid * actuators->n_valid doubles.
 */
void bench_svd_model(const wt_grid *lenslets, const wt_grid *actuators,
		     double sigma_pitches, double noise_rel, unsigned long seed,
		     double *D);

/**
 * Time both paths runs times on D (m x n), the daemon's keeping modes and
 * min_sv_ratio as control.modes and control.min_sv_ratio do.  0, or a
 * negative code with the reason in *err.
 */
int bench_svd_measure(const double *D, int m, int n, int runs, int modes,
		      double min_sv_ratio, struct bench_svd *out,
		      wt_error *err);

#endif /* BENCH_SVD_H */
