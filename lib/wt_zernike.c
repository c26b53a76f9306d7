/*
 * wt_zernike.c - Zernike polynomials (Noll 1976), gradients, slope matrices
 * and least-squares fits.  See wt_zernike.h for the conventions.
 */
#include "wt_zernike.h"

#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>

/* <lapacke.h> pulls in <complex.h>, which defines the macro I. */
#include <lapacke.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* Radial order and signed azimuthal frequency of one mode. */
struct zk_mode {
	int n;
	int m;
};

int wt_zernike_noll_to_nm(int j, int *n, int *m)
{
	long long row, pos;
	int mm;

	if (j < 1) {
		return -EINVAL;
	}
	/*
	 * Row n holds Noll indices n(n+1)/2 + 1 .. (n+1)(n+2)/2; start from
	 * the closed-form guess and correct any rounding of the square root.
	 */
	row = (long long)((sqrt(8.0 * (double)j - 7.0) - 1.0) / 2.0);
	if (row < 0) {
		row = 0;
	}
	while (row * (row + 1) / 2 >= j) {
		row--;
	}
	while ((row + 1) * (row + 2) / 2 < j) {
		row++;
	}
	pos = j - row * (row + 1) / 2 - 1; /* 0 .. row within the row */
	/* |m| rises in pairs through the row: 0,2,2,4,4.. or 1,1,3,3.. */
	if (row % 2 == 0) {
		mm = (int)(2 * ((pos + 1) / 2));
	} else {
		mm = (int)(2 * (pos / 2) + 1);
	}
	/* Noll: even j carries cos (m > 0), odd j carries sin (m < 0). */
	if (mm != 0 && j % 2 != 0) {
		mm = -mm;
	}
	if (n) {
		*n = (int)row;
	}
	if (m) {
		*m = mm;
	}
	return 0;
}

/*
 * Jacobi polynomial P_k^(0,b)(x) and its derivative, by the three-term
 * recurrence (Abramowitz & Stegun 22.7.1 with alpha = 0, beta = b),
 * differentiated term by term for the derivative.
 */
static void zk_jacobi(int k, int b, double x, double *p, double *dp)
{
	double p0 = 1.0, d0 = 0.0, p1, d1, p2, d2;
	double a1, a2, a3, a4, c, kk, bb = (double)b;
	int i;

	if (k == 0) {
		*p = p0;
		*dp = d0;
		return;
	}
	p1 = 1.0 + (bb + 2.0) * (x - 1.0) / 2.0;
	d1 = (bb + 2.0) / 2.0;
	for (i = 2; i <= k; i++) {
		kk = (double)i;
		a1 = 2.0 * kk * (kk + bb) * (2.0 * kk + bb - 2.0);
		a2 = (2.0 * kk + bb - 1.0) * (2.0 * kk + bb) *
		     (2.0 * kk + bb - 2.0);
		a3 = -(2.0 * kk + bb - 1.0) * bb * bb;
		a4 = 2.0 * (kk - 1.0) * (kk + bb - 1.0) * (2.0 * kk + bb);
		c = a2 * x + a3;
		p2 = (c * p1 - a4 * p0) / a1;
		d2 = (c * d1 + a2 * p1 - a4 * d0) / a1;
		p0 = p1;
		d0 = d1;
		p1 = p2;
		d1 = d2;
	}
	*p = p1;
	*dp = d1;
}

/*
 * Q(t) with R_n^|m|(rho) = rho^|m| Q(rho^2): Q(t) = P_k^(0,|m|)(2t - 1),
 * k = (n - |m|) / 2.  *dq is dQ/dt.
 */
static void zk_radial_q(int n, int am, double t, double *q, double *dq)
{
	double p, dp;

	zk_jacobi((n - am) / 2, am, 2.0 * t - 1.0, &p, &dp);
	*q = p;
	*dq = 2.0 * dp;
}

static double zk_norm(int n, int m)
{
	return m == 0 ? sqrt((double)n + 1.0) : sqrt(2.0 * ((double)n + 1.0));
}

/*
 * Z and (if zx is not NULL) its gradient at (x, y), written as
 * norm * Q(x^2 + y^2) * A(x, y) where A is Re (m > 0) or Im (m < 0) of
 * (x + iy)^|m|, and d/dx (x + iy)^l = l (x + iy)^(l-1), d/dy = i l (..)^(l-1).
 */
static void zk_eval(struct zk_mode md, double x, double y, double *z,
		    double *zx, double *zy)
{
	int am = md.m < 0 ? -md.m : md.m;
	double t = x * x + y * y;
	double q, dq, norm = zk_norm(md.n, md.m);
	double c = 1.0, s = 0.0, c_prev = 0.0, s_prev = 0.0, tmp;
	double a, ax, ay;
	int l;

	zk_radial_q(md.n, am, t, &q, &dq);
	for (l = 0; l < am; l++) {
		c_prev = c;
		s_prev = s;
		tmp = x * c - y * s;
		s = x * s + y * c;
		c = tmp;
	}
	if (md.m >= 0) {
		a = c;
		ax = am * c_prev;
		ay = -am * s_prev;
	} else {
		a = s;
		ax = am * s_prev;
		ay = am * c_prev;
	}
	*z = norm * q * a;
	if (zx) {
		*zx = norm * (dq * 2.0 * x * a + q * ax);
		*zy = norm * (dq * 2.0 * y * a + q * ay);
	}
}

double wt_zernike_value(int j, double rho, double theta)
{
	int n, m, am, l;
	double q, dq, rho_m = 1.0;

	if (wt_zernike_noll_to_nm(j, &n, &m) < 0) {
		return NAN;
	}
	am = m < 0 ? -m : m;
	for (l = 0; l < am; l++) {
		rho_m *= rho;
	}
	zk_radial_q(n, am, rho * rho, &q, &dq);
	if (m > 0) {
		return zk_norm(n, m) * rho_m * q * cos(am * theta);
	}
	if (m < 0) {
		return zk_norm(n, m) * rho_m * q * sin(am * theta);
	}
	return zk_norm(n, m) * q;
}

double wt_zernike_xy(int j, double x, double y)
{
	struct zk_mode md;
	double z;

	if (wt_zernike_noll_to_nm(j, &md.n, &md.m) < 0) {
		return NAN;
	}
	zk_eval(md, x, y, &z, NULL, NULL);
	return z;
}

void wt_zernike_gradient(int j, double x, double y, double *dzdx, double *dzdy)
{
	struct zk_mode md;
	double z, zx = NAN, zy = NAN;

	if (wt_zernike_noll_to_nm(j, &md.n, &md.m) == 0) {
		zk_eval(md, x, y, &z, &zx, &zy);
	}
	if (dzdx) {
		*dzdx = zx;
	}
	if (dzdy) {
		*dzdy = zy;
	}
}

/*
 * Gauss-Legendre nodes u[] and weights w[] of p points on [-1, 1]: Newton's
 * method on P_p from the usual cosine guesses (e.g. Numerical Recipes
 * "gauleg"), nodes ascending.  Exact for polynomials of degree <= 2p - 1.
 */
static void zk_gauss_legendre(int p, double *u, double *w)
{
	int i, l, it;
	double z, z_old, p1, p2, p3, dp = 1.0;

	for (i = 0; i < (p + 1) / 2; i++) {
		z = cos(M_PI * (i + 0.75) / (p + 0.5));
		for (it = 0; it < 100; it++) {
			p1 = 1.0;
			p2 = 0.0;
			for (l = 1; l <= p; l++) {
				p3 = p2;
				p2 = p1;
				p1 = ((2.0 * l - 1.0) * z * p2 -
				      (l - 1.0) * p3) /
				     l;
			}
			dp = p * (z * p1 - p2) / (z * z - 1.0);
			z_old = z;
			z = z_old - p1 / dp;
			if (fabs(z - z_old) <= 1e-15) {
				break;
			}
		}
		u[i] = -z;
		u[p - 1 - i] = z;
		w[i] = 2.0 / ((1.0 - z * z) * dp * dp);
		w[p - 1 - i] = w[i];
	}
}

int wt_zernike_slope_matrix(const double *cx, const double *cy, int n_sub,
			    double h, int j_first, int n_modes, double *G,
			    wt_error *err)
{
	struct zk_mode *modes;
	double *u, *w, x0, y0, sx, sy, zp, zm, zx, zy;
	int n_max, p, k, c, i;
	size_t rows;

	if (!cx || !cy || !G) {
		return wt_error_set(err, -EINVAL,
				    "zernike slope matrix: NULL array");
	}
	if (n_sub < 1 || n_modes < 1) {
		return wt_error_set(err, -EINVAL,
				    "zernike slope matrix: %d subapertures, "
				    "%d modes (need at least 1 of each)",
				    n_sub, n_modes);
	}
	if (j_first < 1 || j_first > INT_MAX - (n_modes - 1)) {
		return wt_error_set(err, -EINVAL,
				    "zernike slope matrix: Noll indices %d.. "
				    "(%d modes) outside 1..%d",
				    j_first, n_modes, INT_MAX);
	}
	if (!isfinite(h) || h <= 0.0) {
		return wt_error_set(err, -EINVAL,
				    "zernike slope matrix: half-width %g must "
				    "be finite and > 0",
				    h);
	}
	rows = 2 * (size_t)n_sub;
	if ((size_t)n_modes > SIZE_MAX / sizeof(double) / rows) {
		return wt_error_set(err, -EINVAL,
				    "zernike slope matrix: %d x %d too large",
				    2 * n_sub, n_modes);
	}
	for (k = 0; k < n_sub; k++) {
		if (!isfinite(cx[k]) || !isfinite(cy[k])) {
			return wt_error_set(err, -EINVAL,
					    "zernike slope matrix: centre %d "
					    "is not finite",
					    k);
		}
	}

	/* The highest Noll index has the highest radial order. */
	wt_zernike_noll_to_nm(j_first + n_modes - 1, &n_max, NULL);
	p = n_max / 2 + 1; /* 2p - 1 >= n_max: exact along every edge */
	modes = malloc((size_t)n_modes * sizeof(*modes));
	u = malloc(2 * (size_t)p * sizeof(*u));
	if (!modes || !u) {
		free(modes);
		free(u);
		return wt_error_set(err, -ENOMEM,
				    "zernike slope matrix: no memory for %d "
				    "modes",
				    n_modes);
	}
	w = u + p;
	zk_gauss_legendre(p, u, w);
	for (c = 0; c < n_modes; c++) {
		wt_zernike_noll_to_nm(j_first + c, &modes[c].n, &modes[c].m);
	}

	/*
	 * Divergence theorem: mean dZ/dx = (1 / 4h^2) int (Z(right) -
	 * Z(left)) dy, and with y = y0 + h u the integral is h sum w (..).
	 */
	for (k = 0; k < n_sub; k++) {
		x0 = cx[k];
		y0 = cy[k];
		for (c = 0; c < n_modes; c++) {
			sx = 0.0;
			sy = 0.0;
			for (i = 0; i < p; i++) {
				zk_eval(modes[c], x0 + h, y0 + h * u[i], &zp,
					NULL, NULL);
				zk_eval(modes[c], x0 - h, y0 + h * u[i], &zm,
					NULL, NULL);
				sx += w[i] * (zp - zm);
				zk_eval(modes[c], x0 + h * u[i], y0 + h, &zp,
					NULL, NULL);
				zk_eval(modes[c], x0 + h * u[i], y0 - h, &zm,
					NULL, NULL);
				sy += w[i] * (zp - zm);
			}
			zx = sx / (4.0 * h);
			zy = sy / (4.0 * h);
			G[(size_t)k * n_modes + c] = zx;
			G[((size_t)n_sub + k) * n_modes + c] = zy;
		}
	}
	free(modes);
	free(u);
	return 0;
}

int wt_zernike_fit(const double *G, int n_rows, int n_modes, const double *s,
		   double *a, wt_error *err)
{
	double *A, *b, *sv, ratio;
	size_t count, i;
	lapack_int info, rank = 0;
	int ret = 0;

	if (!G || !s || !a) {
		return wt_error_set(err, -EINVAL, "zernike fit: NULL array");
	}
	if (n_modes < 1 || n_rows < n_modes) {
		return wt_error_set(err, -EINVAL,
				    "zernike fit: %d rows for %d modes (need "
				    "modes >= 1 and rows >= modes)",
				    n_rows, n_modes);
	}
	/* LAPACKE sizes its own copies in lapack_int. */
	if ((long long)n_rows * n_modes > INT_MAX) {
		return wt_error_set(err, -EINVAL,
				    "zernike fit: %d x %d matrix too large",
				    n_rows, n_modes);
	}
	count = (size_t)n_rows * (size_t)n_modes;
	for (i = 0; i < count; i++) {
		if (!isfinite(G[i])) {
			return wt_error_set(err, -EINVAL,
					    "zernike fit: matrix entry (%zu, "
					    "%zu) is not finite",
					    i / (size_t)n_modes,
					    i % (size_t)n_modes);
		}
	}
	for (i = 0; i < (size_t)n_rows; i++) {
		if (!isfinite(s[i])) {
			return wt_error_set(err, -EINVAL,
					    "zernike fit: slope %zu is not "
					    "finite",
					    i);
		}
	}

	A = malloc(count * sizeof(*A));
	b = malloc((size_t)n_rows * sizeof(*b));
	sv = malloc((size_t)n_modes * sizeof(*sv));
	if (!A || !b || !sv) {
		ret = wt_error_set(err, -ENOMEM,
				   "zernike fit: no memory for %d x %d", n_rows,
				   n_modes);
		goto out;
	}
	for (i = 0; i < count; i++) {
		A[i] = G[i];
	}
	for (i = 0; i < (size_t)n_rows; i++) {
		b[i] = s[i];
	}

	info = LAPACKE_dgelsd(LAPACK_ROW_MAJOR, n_rows, n_modes, 1, A, n_modes,
			      b, 1, sv, WT_ZERNIKE_FIT_RCOND, &rank);
	if (info == LAPACK_WORK_MEMORY_ERROR ||
	    info == LAPACK_TRANSPOSE_MEMORY_ERROR) {
		ret = wt_error_set(err, -ENOMEM,
				   "zernike fit: no memory for LAPACK work");
		goto out;
	}
	if (info > 0) {
		ret = wt_error_set(err, -WT_ENUMERIC,
				   "zernike fit: SVD did not converge (dgelsd "
				   "info %d)",
				   (int)info);
		goto out;
	}
	if (info < 0) {
		ret = wt_error_set(err, -EINVAL,
				   "zernike fit: dgelsd refused argument %d",
				   (int)-info);
		goto out;
	}
	if (rank < n_modes) {
		ratio = sv[0] > 0.0 ? sv[n_modes - 1] / sv[0] : 0.0;
		ret = wt_error_set(err, -EDOM,
				   "zernike fit: matrix rank %d < %d modes "
				   "(sigma_min / sigma_max = %.3g, limit %g): "
				   "a mode without slope signature (piston?) "
				   "or modes the grid cannot tell apart",
				   (int)rank, n_modes, ratio,
				   WT_ZERNIKE_FIT_RCOND);
		goto out;
	}
	for (i = 0; i < (size_t)n_modes; i++) {
		a[i] = b[i];
	}
out:
	free(A);
	free(b);
	free(sv);
	return ret;
}
