/*
 * wt_recon.h - truncated-SVD reconstructor.
 *
 * The interaction matrix D (m slopes x n actuators, row-major double) is
 * decomposed once, D = U S V^T, in double precision.  A control matrix is
 * then the truncated pseudo-inverse R = V_k diag(g_i / sigma_i) U_k^T
 * (n x m, row-major), optionally with a gain g_i per mode, so that mode
 * gains are applied in mode space rather than in the integrator.
 *
 * None of these functions is meant for the per-frame path: they allocate.
 */
#ifndef WT_RECON_H
#define WT_RECON_H

#include "wt_error.h"

/** SVD of an m x n interaction matrix D (m slopes, n actuators), in double. */
typedef struct wt_svd wt_svd;

/**
 * Decompose D (m x n, row-major, not modified).  Uses LAPACK's divide and
 * conquer dgesdd and, when that does not converge, the QR-iteration dgesvd.
 * Returns 0 and *out, or -EINVAL (sizes < 1, too large, NULL pointers or a
 * non-finite entry in D), -ENOMEM, or WT_ENUMERIC negated when neither
 * routine converges.
 */
int wt_svd_compute(const double *D, int m, int n, wt_svd **out, wt_error *err);

/** Free an SVD (NULL is fine). */
void wt_svd_destroy(wt_svd *s);

/** Number of singular values, min(m, n); -EINVAL for NULL. */
int wt_svd_count(const wt_svd *s);

/** The wt_svd_count() singular values, descending; NULL for NULL. */
const double *wt_svd_values(const wt_svd *s);

/** U, m x count row-major (left singular vector i is column i: slope
 * pattern of mode i); NULL for NULL. */
const double *wt_svd_u(const wt_svd *s);

/** V^T, count x n row-major (row i: actuator pattern of mode i); NULL for
 * NULL. */
const double *wt_svd_vt(const wt_svd *s);

/**
 * How many modes to keep.  modes > 0: min(modes, count).  Otherwise the
 * number of singular values with sigma_i / sigma_1 >= min_ratio (0 when
 * sigma_1 is 0 or min_ratio is NaN).  -EINVAL for NULL.
 */
int wt_recon_modes(const wt_svd *s, int modes, double min_ratio);

/**
 * Control matrix R = V_k diag(g_i / sigma_i) U_k^T of the first `kept`
 * modes, written to R (n x m, row-major).  mode_gains holds `kept` values
 * (NULL means all 1).  kept = 0 gives a zero matrix.  Returns 0, -EINVAL
 * (kept outside [0, count], NULL s or R, non-finite gain), -ERANGE (a kept
 * singular value is zero) or -ENOMEM.
 */
int wt_recon_pinv(const wt_svd *s, int kept, const double *mode_gains,
		  double *R);

/** As wt_recon_pinv(), computed in double and rounded to float; also
 * -ERANGE when an entry is beyond float's range. */
int wt_recon_pinv_float(const wt_svd *s, int kept, const double *mode_gains,
			float *R);

/**
 * Condition number of the kept part, sigma_1 / sigma_kept (infinity when
 * sigma_kept is 0).  NaN when s is NULL or kept is outside [1, count].
 */
double wt_recon_condition(const wt_svd *s, int kept);

#endif /* WT_RECON_H */
