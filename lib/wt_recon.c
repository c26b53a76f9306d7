/*
 * wt_recon.c - truncated-SVD reconstructor.
 *
 * <lapacke.h> includes <complex.h>, which defines the macro I: no name in
 * this file may be I.
 */
#include "wt_recon.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cblas.h>
#include <lapacke.h>

struct wt_svd {
	int m;	    /* rows of D: slopes */
	int n;	    /* columns of D: actuators */
	int count;  /* min(m, n) */
	double *u;  /* m x count, row-major: left singular vectors as columns */
	double *sv; /* count, descending */
	double *vt; /* count x n, row-major: right singular vectors as rows */
};

/* Largest m * n we accept: the work arrays of ?gesdd grow with it and
 * LAPACK's integers are 32-bit in Debian's build. */
#define WT_SVD_MAX_ELEMENTS ((size_t)1 << 28)

void wt_svd_destroy(wt_svd *s)
{
	if (!s) {
		return;
	}
	free(s->u);
	free(s->sv);
	free(s->vt);
	free(s);
}

int wt_svd_compute(const double *D, int m, int n, wt_svd **out, wt_error *err)
{
	wt_svd *s = NULL;
	double *a = NULL;
	double *superb = NULL;
	size_t elems, r, c;
	lapack_int info;
	int ret;

	if (out) {
		*out = NULL;
	}
	if (!D || !out) {
		return wt_error_set(err, -EINVAL, "svd: NULL matrix or result");
	}
	if (m < 1 || n < 1) {
		return wt_error_set(
			err, -EINVAL,
			"svd: matrix is %d x %d, needs at least 1 x 1", m, n);
	}
	elems = (size_t)m * (size_t)n;
	if (elems > WT_SVD_MAX_ELEMENTS) {
		return wt_error_set(
			err, -EINVAL,
			"svd: matrix %d x %d has more than %zu entries", m, n,
			WT_SVD_MAX_ELEMENTS);
	}
	for (r = 0; r < (size_t)m; r++) {
		for (c = 0; c < (size_t)n; c++) {
			if (!isfinite(D[r * n + c])) {
				return wt_error_set(
					err, -EINVAL,
					"svd: entry (%zu, %zu) is not finite",
					r, c);
			}
		}
	}

	s = calloc(1, sizeof(*s));
	if (!s) {
		return wt_error_set(err, -ENOMEM, "svd: out of memory");
	}
	s->m = m;
	s->n = n;
	s->count = m < n ? m : n;
	s->u = malloc((size_t)m * s->count * sizeof(*s->u));
	s->sv = malloc((size_t)s->count * sizeof(*s->sv));
	s->vt = malloc((size_t)s->count * n * sizeof(*s->vt));
	a = malloc(elems * sizeof(*a));
	/* dgesvd's superb holds count - 1 values; keep at least one. */
	superb =
		malloc((size_t)(s->count > 1 ? s->count : 2) * sizeof(*superb));
	if (!s->u || !s->sv || !s->vt || !a || !superb) {
		ret = wt_error_set(err, -ENOMEM, "svd: out of memory");
		goto fail;
	}

	/*
	 * ?gesdd overwrites its input, so work on a copy.  The row-major D
	 * is, read column-major, D^T (n x m): its SVD D^T = U' S V'^T is
	 * D = V' S U'^T, and column-major U' (n x count) is row-major V^T,
	 * column-major V'^T (count x m) row-major U.  So LAPACK writes our
	 * layout directly and LAPACKE has nothing to transpose (its
	 * row-major path copies D, U and V^T once each way).
	 */
	memcpy(a, D, elems * sizeof(*a));
	info = LAPACKE_dgesdd(LAPACK_COL_MAJOR, 'S', n, m, a, n, s->sv, s->vt,
			      n, s->u, s->count);
	if (info > 0) {
		/* Divide and conquer can fail on graded matrices; QR iteration
		 * is slower but more robust. */
		memcpy(a, D, elems * sizeof(*a));
		info = LAPACKE_dgesvd(LAPACK_COL_MAJOR, 'S', 'S', n, m, a, n,
				      s->sv, s->vt, n, s->u, s->count, superb);
	}
	if (info == LAPACK_WORK_MEMORY_ERROR) {
		ret = wt_error_set(err, -ENOMEM, "svd: LAPACK out of memory");
		goto fail;
	}
	if (info > 0) {
		ret = wt_error_set(err, -WT_ENUMERIC,
				   "svd: dgesdd and dgesvd did not converge "
				   "(%d superdiagonals left)",
				   (int)info);
		goto fail;
	}
	if (info < 0) {
		ret = wt_error_set(err, -EINVAL,
				   "svd: LAPACK refused argument %d",
				   (int)-info);
		goto fail;
	}
	free(a);
	free(superb);
	*out = s;
	wt_error_clear(err);
	return 0;

fail:
	free(a);
	free(superb);
	wt_svd_destroy(s);
	return ret;
}

int wt_svd_count(const wt_svd *s)
{
	if (!s) {
		return -EINVAL;
	}
	return s->count;
}

const double *wt_svd_values(const wt_svd *s)
{
	if (!s) {
		return NULL;
	}
	return s->sv;
}

const double *wt_svd_u(const wt_svd *s)
{
	return s ? s->u : NULL;
}

const double *wt_svd_vt(const wt_svd *s)
{
	return s ? s->vt : NULL;
}

int wt_recon_modes(const wt_svd *s, int modes, double min_ratio)
{
	int k;

	if (!s) {
		return -EINVAL;
	}
	if (modes > 0) {
		return modes < s->count ? modes : s->count;
	}
	if (!(s->sv[0] > 0.0)) {
		return 0;
	}
	/* The values descend, so the kept ones are a prefix. */
	for (k = 0; k < s->count; k++) {
		if (!(s->sv[k] / s->sv[0] >= min_ratio)) {
			break;
		}
	}
	return k;
}

int wt_recon_pinv(const wt_svd *s, int kept, const double *mode_gains,
		  double *R)
{
	double *w;
	int j, k;

	if (!s || !R || kept < 0 || kept > s->count) {
		return -EINVAL;
	}
	for (k = 0; k < kept; k++) {
		if (!(s->sv[k] > 0.0)) {
			return -ERANGE;
		}
		if (mode_gains && !isfinite(mode_gains[k])) {
			return -EINVAL;
		}
	}
	if (kept == 0) {
		memset(R, 0, (size_t)s->n * s->m * sizeof(*R));
		return 0;
	}

	/* W = V_k diag(g / sigma), n x kept; then R = W U_k^T. */
	w = malloc((size_t)s->n * kept * sizeof(*w));
	if (!w) {
		return -ENOMEM;
	}
	for (k = 0; k < kept; k++) {
		double scale = (mode_gains ? mode_gains[k] : 1.0) / s->sv[k];

		for (j = 0; j < s->n; j++) {
			w[(size_t)j * kept + k] =
				s->vt[(size_t)k * s->n + j] * scale;
		}
	}
	cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, s->n, s->m, kept,
		    1.0, w, kept, s->u, s->count, 0.0, R, s->m);
	free(w);
	return 0;
}

int wt_recon_pinv_float(const wt_svd *s, int kept, const double *mode_gains,
			float *R)
{
	double *rd;
	size_t elems, e;
	int ret;

	if (!s || !R) {
		return -EINVAL;
	}
	elems = (size_t)s->n * s->m;
	rd = malloc(elems * sizeof(*rd));
	if (!rd) {
		return -ENOMEM;
	}
	ret = wt_recon_pinv(s, kept, mode_gains, rd);
	if (ret == 0) {
		for (e = 0; e < elems; e++) {
			R[e] = (float)rd[e];
			if (!isfinite(R[e])) {
				ret = -ERANGE; /* beyond float's range */
				break;
			}
		}
	}
	free(rd);
	return ret;
}

double wt_recon_condition(const wt_svd *s, int kept)
{
	if (!s || kept < 1 || kept > s->count) {
		return NAN;
	}
	if (s->sv[kept - 1] == 0.0) {
		return INFINITY;
	}
	return s->sv[0] / s->sv[kept - 1];
}
