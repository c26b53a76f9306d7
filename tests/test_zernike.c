/*
 * test_zernike.c - Zernike values, gradients, slope matrices and fits.
 *
 * References named beside the assertions:
 *   Noll 1976: R. J. Noll, "Zernike polynomials and atmospheric turbulence",
 *              J. Opt. Soc. Am. 66, 207-211 (1976); Table I and eq. (2).
 *   A&S:       Abramowitz & Stegun, Handbook of Mathematical Functions,
 *              25.4.29 (Gauss-Legendre nodes and weights).
 *   NR:        Press et al., Numerical Recipes, 3rd ed., 15.4 (general linear
 *              least squares: covariance sigma^2 (G^T G)^-1, chi-square).
 */
#include "wt_test.h"

#include <errno.h>
#include <limits.h>
#include <math.h>
#include <string.h>

#include <lapacke.h> /* defines I through complex.h: no variable is named I */

#include "wt_zernike.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* ---- helpers ------------------------------------------------------------ */

/*
 * |a - b| <= tol in double (cmocka 1.1.5's assert_float_equal compares in
 * float); NaN fails.
 */
#define assert_near(a, b, tol)                                                 \
	do {                                                                   \
		double got_ = (a), want_ = (b), tol_ = (tol);                  \
		if (!(fabs(got_ - want_) <= tol_)) {                           \
			print_error("%s = %.17g, expected %.17g (tol %g)\n",   \
				    #a, got_, want_, tol_);                    \
			fail();                                                \
		}                                                              \
	} while (0)

/* splitmix64: small, portable, deterministic. */
struct rng {
	uint64_t s;
};

static uint64_t rng_next(struct rng *r)
{
	uint64_t z = (r->s += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

/* Uniform in (0, 1). */
static double rng_uniform(struct rng *r)
{
	return ((double)(rng_next(r) >> 11) + 0.5) / 9007199254740992.0;
}

/* Standard normal by Box-Muller. */
static double rng_normal(struct rng *r)
{
	double u1 = rng_uniform(r), u2 = rng_uniform(r);

	return sqrt(-2.0 * log(u1)) * cos(2.0 * M_PI * u2);
}

/* Random point uniform in the disk of radius r_max. */
static void rng_disk(struct rng *r, double r_max, double *x, double *y)
{
	double rho = r_max * sqrt(rng_uniform(r));
	double th = 2.0 * M_PI * rng_uniform(r);

	*x = rho * cos(th);
	*y = rho * sin(th);
}

/*
 * Lenslet centres of an n x n grid with the pupil inscribed (pitch 2 / n),
 * keeping cells whose centre lies inside the unit circle.  Returns the count;
 * cx, cy hold room for n * n.
 */
static int make_grid(int n, double *cx, double *cy)
{
	double pitch = 2.0 / n, x, y;
	int i, j, k = 0;

	for (j = 0; j < n; j++) {
		for (i = 0; i < n; i++) {
			x = (i + 0.5 - n / 2.0) * pitch;
			y = (j + 0.5 - n / 2.0) * pitch;
			if (x * x + y * y < 1.0) {
				cx[k] = x;
				cy[k] = y;
				k++;
			}
		}
	}
	return k;
}

static double max_abs(double a, double b)
{
	return fabs(a) > fabs(b) ? fabs(a) : fabs(b);
}

/* ---- Noll ordering ------------------------------------------------------ */

static void noll_index_matches_noll1976_table1(void **state)
{
	/* Noll 1976, Table I: (n, m) of Z1..Z21, m < 0 written for sin. */
	static const int table[21][2] = {
		{0, 0},	 {1, 1},  {1, -1}, {2, 0}, {2, -2}, {2, 2},  {3, -1},
		{3, 1},	 {3, -3}, {3, 3},  {4, 0}, {4, 2},  {4, -2}, {4, 4},
		{4, -4}, {5, 1},  {5, -1}, {5, 3}, {5, -3}, {5, 5},  {5, -5},
	};
	int j, n, m;

	(void)state;
	for (j = 1; j <= 21; j++) {
		n = -99;
		m = -99;
		assert_int_equal(wt_zernike_noll_to_nm(j, &n, &m), 0);
		assert_int_equal(n, table[j - 1][0]); /* Noll 1976 Table I */
		assert_int_equal(m, table[j - 1][1]); /* Noll 1976 Table I */
	}
}

static void noll_rows_hold_every_nm_once_to_n20(void **state)
{
	static int seen[21][41];
	int j, n, m, nn;

	(void)state;
	memset(seen, 0, sizeof(seen));
	for (j = 1; j <= 231; j++) {
		assert_int_equal(wt_zernike_noll_to_nm(j, &n, &m), 0);
		/* Noll 1976: row n holds j = n(n+1)/2 + 1 .. (n+1)(n+2)/2 */
		assert_true(n * (n + 1) / 2 < j && j <= (n + 1) * (n + 2) / 2);
		/* Noll 1976 eq. (2): |m| <= n and n - |m| even */
		assert_true(abs(m) <= n && (n - abs(m)) % 2 == 0);
		/* Noll 1976: even j is the cos term, odd j the sin term */
		if (m != 0) {
			assert_int_equal(m > 0, j % 2 == 0);
		}
		seen[n][m + 20]++;
	}
	/* Each (n, m) allowed by eq. (2) appears exactly once (Noll 1976). */
	for (nn = 0; nn <= 20; nn++) {
		for (m = -nn; m <= nn; m += 2) {
			assert_int_equal(seen[nn][m + 20], 1);
		}
	}
	assert_int_equal(wt_zernike_noll_to_nm(232, &n, &m), 0);
	assert_int_equal(n, 21); /* Noll 1976: row 21 starts at j = 232 */
	/* Large indices still land in the right row (triangular numbers). */
	assert_int_equal(wt_zernike_noll_to_nm(500500, &n, &m), 0);
	assert_int_equal(n, 999); /* 500500 = 1000 * 1001 / 2, end of row 999 */
	assert_int_equal(wt_zernike_noll_to_nm(500501, &n, &m), 0);
	assert_int_equal(n, 1000);
	assert_int_equal(m, 0); /* even row starts with m = 0 (Noll 1976) */
}

static void noll_refuses_j_below_one(void **state)
{
	int n = 7, m = 7;
	double gx = 0.0, gy = 0.0;

	(void)state;
	assert_int_equal(wt_zernike_noll_to_nm(0, &n, &m), -EINVAL);
	assert_int_equal(wt_zernike_noll_to_nm(-3, &n, &m), -EINVAL);
	assert_int_equal(n, 7); /* left alone on error */
	assert_int_equal(m, 7);
	assert_true(isnan(wt_zernike_value(0, 0.5, 0.1)));
	assert_true(isnan(wt_zernike_xy(-1, 0.1, 0.2)));
	wt_zernike_gradient(0, 0.1, 0.2, &gx, &gy);
	assert_true(isnan(gx) && isnan(gy));
	/* NULL outputs are allowed. */
	assert_int_equal(wt_zernike_noll_to_nm(5, NULL, NULL), 0);
	wt_zernike_gradient(5, 0.1, 0.2, NULL, NULL);
}

/* ---- values ------------------------------------------------------------- */

/* Noll 1976, Table I, written out: Z_j(r, t) for j = 1..21. */
static double noll_table1(int j, double r, double t)
{
	double r2 = r * r, r3 = r2 * r, r4 = r2 * r2, r5 = r4 * r;

	switch (j) {
	case 1:
		return 1.0;
	case 2:
		return 2.0 * r * cos(t);
	case 3:
		return 2.0 * r * sin(t);
	case 4:
		return sqrt(3.0) * (2.0 * r2 - 1.0);
	case 5:
		return sqrt(6.0) * r2 * sin(2.0 * t);
	case 6:
		return sqrt(6.0) * r2 * cos(2.0 * t);
	case 7:
		return sqrt(8.0) * (3.0 * r3 - 2.0 * r) * sin(t);
	case 8:
		return sqrt(8.0) * (3.0 * r3 - 2.0 * r) * cos(t);
	case 9:
		return sqrt(8.0) * r3 * sin(3.0 * t);
	case 10:
		return sqrt(8.0) * r3 * cos(3.0 * t);
	case 11:
		return sqrt(5.0) * (6.0 * r4 - 6.0 * r2 + 1.0);
	case 12:
		return sqrt(10.0) * (4.0 * r4 - 3.0 * r2) * cos(2.0 * t);
	case 13:
		return sqrt(10.0) * (4.0 * r4 - 3.0 * r2) * sin(2.0 * t);
	case 14:
		return sqrt(10.0) * r4 * cos(4.0 * t);
	case 15:
		return sqrt(10.0) * r4 * sin(4.0 * t);
	case 16:
		return sqrt(12.0) * (10.0 * r5 - 12.0 * r3 + 3.0 * r) * cos(t);
	case 17:
		return sqrt(12.0) * (10.0 * r5 - 12.0 * r3 + 3.0 * r) * sin(t);
	case 18:
		return sqrt(12.0) * (5.0 * r5 - 4.0 * r3) * cos(3.0 * t);
	case 19:
		return sqrt(12.0) * (5.0 * r5 - 4.0 * r3) * sin(3.0 * t);
	case 20:
		return sqrt(12.0) * r5 * cos(5.0 * t);
	case 21:
		return sqrt(12.0) * r5 * sin(5.0 * t);
	}
	return NAN;
}

static void values_match_noll1976_table1(void **state)
{
	static const double pts[][2] = {
		{0.0, 0.0}, {0.3, 0.4}, {0.5, 1.1},   {0.77, -2.3},
		{1.0, 0.0}, {1.0, 2.5}, {0.123, 3.0}, {0.9, -0.7},
	};
	size_t p;
	int j;
	double r, t, ref;

	(void)state;
	for (p = 0; p < sizeof(pts) / sizeof(pts[0]); p++) {
		r = pts[p][0];
		t = pts[p][1];
		for (j = 1; j <= 21; j++) {
			ref = noll_table1(j, r, t);
			/* Noll 1976 Table I closed forms */
			assert_near(wt_zernike_value(j, r, t), ref, 1e-13);
			assert_near(wt_zernike_xy(j, r * cos(t), r * sin(t)),
				    ref, 1e-13);
		}
	}
	/* The two the brief singles out, at chosen points (Noll Table I). */
	assert_near(wt_zernike_value(4, 0.5, 0.0),
		    sqrt(3.0) * (2.0 * 0.25 - 1.0), 1e-15);
	assert_near(wt_zernike_value(11, 0.5, 1.0),
		    sqrt(5.0) * (6.0 * 0.0625 - 6.0 * 0.25 + 1.0), 1e-15);
	assert_near(wt_zernike_xy(11, 0.6, 0.8), sqrt(5.0), 1e-14);
	assert_near(wt_zernike_xy(4, 0.0, 0.0), -sqrt(3.0), 1e-15);
}

static long double fact(int k)
{
	long double f = 1.0L;

	while (k > 1) {
		f *= k--;
	}
	return f;
}

/* Noll 1976 eq. (2), factorial sum, in long double. */
static long double radial_factorial(int n, int m, long double rho)
{
	long double sum = 0.0L, term;
	int s, e, am = m < 0 ? -m : m;

	for (s = 0; s <= (n - am) / 2; s++) {
		term = fact(n - s) / (fact(s) * fact((n + am) / 2 - s) *
				      fact((n - am) / 2 - s));
		for (e = 0; e < n - 2 * s; e++) {
			term *= rho;
		}
		sum += (s % 2 ? -term : term);
	}
	return sum;
}

static void radial_matches_factorial_sum_to_n20(void **state)
{
	static const double rhos[] = {0.0,   0.05, 0.1,	 0.37,	0.5,
				      0.707, 0.81, 0.95, 0.999, 1.0};
	size_t p;
	int j, n, m, am;
	double theta, norm, ref, got;

	(void)state;
	for (j = 1; j <= 231; j++) {
		assert_int_equal(wt_zernike_noll_to_nm(j, &n, &m), 0);
		am = abs(m);
		/* pick theta where the angular factor is 1 */
		theta = m < 0 ? M_PI / (2.0 * am) : 0.0;
		norm = m == 0 ? sqrt(n + 1.0) : sqrt(2.0 * (n + 1.0));
		for (p = 0; p < sizeof(rhos) / sizeof(rhos[0]); p++) {
			ref = norm * (double)radial_factorial(n, m, rhos[p]);
			got = wt_zernike_value(j, rhos[p], theta);
			/* Noll 1976 eq. (2) and its normalisation */
			assert_true(fabs(got - ref) <=
				    1e-10 * max_abs(1.0, ref));
		}
		/* R_n^m(1) = 1 (Noll 1976 eq. (2); Born & Wolf 9.2.1) */
		assert_near(wt_zernike_value(j, 1.0, theta), norm,
			    1e-11 * norm);
	}
}

static void orthonormal_over_unit_disk_j1_21(void **state)
{
	/*
	 * Midpoint rule in rho (500 rings) times the periodic trapezoid in
	 * theta (64 spokes, exact for the angular frequencies <= 10 that a
	 * product of two modes up to j = 21 holds): quadrature error of the
	 * radial part ~ 1e-5 here, well under the 1e-3 asked.
	 */
	enum { JN = 21, NR = 500, NT = 64 };
	static double gram[JN][JN];
	double z[JN], r, t, wgt;
	int ir, it, a, b;

	(void)state;
	memset(gram, 0, sizeof(gram));
	for (ir = 0; ir < NR; ir++) {
		r = (ir + 0.5) / NR;
		/* area element r dr dt, divided by the disk's area pi */
		wgt = r * (1.0 / NR) * (2.0 * M_PI / NT) / M_PI;
		for (it = 0; it < NT; it++) {
			t = 2.0 * M_PI * it / NT;
			for (a = 0; a < JN; a++) {
				z[a] = wt_zernike_value(a + 1, r, t);
			}
			for (a = 0; a < JN; a++) {
				for (b = 0; b <= a; b++) {
					gram[a][b] += wgt * z[a] * z[b];
				}
			}
		}
	}
	for (a = 0; a < JN; a++) {
		for (b = 0; b <= a; b++) {
			/* Noll 1976 normalisation: mean Zi Zj = delta */
			assert_near(gram[a][b], a == b ? 1.0 : 0.0, 1e-3);
		}
	}
}

static void xy_agrees_with_polar(void **state)
{
	struct rng r = {wt_test_seed(11)};
	int j, k;
	double x, y, rho, th;

	(void)state;
	for (k = 0; k < 50; k++) {
		rng_disk(&r, 1.0, &x, &y);
		rho = hypot(x, y);
		th = atan2(y, x);
		for (j = 1; j <= 231; j++) {
			/* x = rho cos theta, y = rho sin theta (Noll 1976) */
			assert_true(fabs(wt_zernike_xy(j, x, y) -
					 wt_zernike_value(j, rho, th)) <=
				    1e-10);
		}
	}
}

/* ---- gradients ---------------------------------------------------------- */

static void gradient_matches_central_differences(void **state)
{
	struct rng r = {wt_test_seed(12)};
	const double step = 1e-5;
	int j, k;
	double x, y, gx, gy, fx, fy;

	(void)state;
	for (k = 0; k < 40; k++) {
		/* a little beyond the rim too: subapertures overhang it */
		rng_disk(&r, 1.1, &x, &y);
		if (k == 0) {
			x = 0.0; /* and straddling the origin */
			y = 0.0;
		}
		for (j = 1; j <= 36; j++) {
			wt_zernike_gradient(j, x, y, &gx, &gy);
			fx = (wt_zernike_xy(j, x + step, y) -
			      wt_zernike_xy(j, x - step, y)) /
			     (2.0 * step);
			fy = (wt_zernike_xy(j, x, y + step) -
			      wt_zernike_xy(j, x, y - step)) /
			     (2.0 * step);
			/* central differences: error O(step^2 f''') (common
			 * practice) */
			assert_true(fabs(gx - fx) <= 1e-6 * max_abs(1.0, fx));
			assert_true(fabs(gy - fy) <= 1e-6 * max_abs(1.0, fy));
		}
	}
}

static void gradient_at_origin_is_exact(void **state)
{
	int j, n, m, k;
	double gx, gy, ref;

	(void)state;
	/* Noll 1976 Table I differentiated by hand at rho = 0. */
	wt_zernike_gradient(2, 0.0, 0.0, &gx, &gy); /* Z2 = 2x */
	assert_near(gx, 2.0, 1e-15);
	assert_near(gy, 0.0, 1e-15);
	wt_zernike_gradient(3, 0.0, 0.0, &gx, &gy); /* Z3 = 2y */
	assert_near(gx, 0.0, 1e-15);
	assert_near(gy, 2.0, 1e-15);
	wt_zernike_gradient(4, 0.0, 0.0, &gx, &gy); /* sqrt3 (2r^2 - 1) */
	assert_near(gx, 0.0, 1e-15);
	assert_near(gy, 0.0, 1e-15);
	wt_zernike_gradient(7, 0.0, 0.0, &gx, &gy); /* sqrt8 y (3r^2 - 2) */
	assert_near(gx, 0.0, 1e-15);
	assert_near(gy, -2.0 * sqrt(8.0), 1e-14);
	wt_zernike_gradient(8, 0.0, 0.0, &gx, &gy); /* sqrt8 x (3r^2 - 2) */
	assert_near(gx, -2.0 * sqrt(8.0), 1e-14);
	assert_near(gy, 0.0, 1e-15);
	wt_zernike_gradient(16, 0.0, 0.0, &gx, &gy); /* sqrt12 x (..+ 3) */
	assert_near(gx, 3.0 * sqrt(12.0), 1e-14);
	assert_near(gy, 0.0, 1e-15);

	/*
	 * All modes to n = 20: only |m| = 1 has a gradient at the origin,
	 * the rho^1 coefficient of R_n^1, (-1)^k (n + 1) / 2 with
	 * k = (n - 1) / 2 (Noll 1976 eq. (2), term s = k).
	 */
	for (j = 1; j <= 231; j++) {
		assert_int_equal(wt_zernike_noll_to_nm(j, &n, &m), 0);
		wt_zernike_gradient(j, 0.0, 0.0, &gx, &gy);
		ref = 0.0;
		if (abs(m) == 1) {
			k = (n - 1) / 2;
			ref = sqrt(2.0 * (n + 1.0)) * (k % 2 ? -1.0 : 1.0) *
			      (n + 1.0) / 2.0;
		}
		/* Noll 1976 eq. (2) */
		assert_near(gx, m == 1 ? ref : 0.0, 1e-11);
		assert_near(gy, m == -1 ? ref : 0.0, 1e-11);
	}
}

/* ---- slope matrix ------------------------------------------------------- */

static void slope_matrix_tilt_is_exact(void **state)
{
	double cx[256], cy[256], *G;
	int n_sub, k;
	wt_error err;

	(void)state;
	n_sub = make_grid(16, cx, cy);
	G = malloc(2 * (size_t)n_sub * 2 * sizeof(*G));
	assert_non_null(G);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, n_sub, 1.0 / 16, 2, 2, G, &err),
		0);
	for (k = 0; k < n_sub; k++) {
		/* Z2 = 2x, Z3 = 2y (Noll 1976 Table I): mean slopes 2, 0 */
		assert_near(G[k * 2 + 0], 2.0, 1e-12);
		assert_near(G[(n_sub + k) * 2 + 0], 0.0, 1e-12);
		assert_near(G[k * 2 + 1], 0.0, 1e-12);
		assert_near(G[(n_sub + k) * 2 + 1], 2.0, 1e-12);
	}
	free(G);
}

static void slope_matrix_matches_closed_form_averages(void **state)
{
	/*
	 * Noll 1976 Table I in cartesian form, differentiated and averaged
	 * by hand over [cx - h, cx + h] x [cy - h, cy + h] (mean of u over
	 * the interval is its centre c, of u^2 is c^2 + h^2 / 3, of u^3 is
	 * c^3 + c h^2):
	 *   Z4 = sqrt3 (2x^2 + 2y^2 - 1): <dZ/dx> = 4 sqrt3 cx
	 *   Z7 = sqrt8 (3x^2 y + 3y^3 - 2y): <dZ/dx> = 6 sqrt8 cx cy,
	 *        <dZ/dy> = sqrt8 (3cx^2 + 9cy^2 - 2 + 4h^2)
	 *   Z8 = sqrt8 (3x^3 + 3x y^2 - 2x): <dZ/dx> = sqrt8 (9cx^2 + 3cy^2
	 *        - 2 + 4h^2), <dZ/dy> = 6 sqrt8 cx cy
	 *   Z11 = sqrt5 (6r^4 - 6r^2 + 1): <dZ/dx> = sqrt5 (24 (cx^3 + cx h^2)
	 *        + 24 cx (cy^2 + h^2 / 3) - 12 cx)
	 */
	enum { NM = 8 }; /* j = 4..11 */
	double cx[144], cy[144], *G, h = 1.0 / 12, x, y, s8 = sqrt(8.0);
	int n_sub, k;
	wt_error err;

	(void)state;
	n_sub = make_grid(12, cx, cy);
	G = malloc(2 * (size_t)n_sub * NM * sizeof(*G));
	assert_non_null(G);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, n_sub, h, 4, NM, G, &err), 0);
#define GX(k, j) G[(size_t)(k)*NM + (j)-4]
#define GY(k, j) G[((size_t)n_sub + (k)) * NM + (j)-4]
	for (k = 0; k < n_sub; k++) {
		x = cx[k];
		y = cy[k];
		/* closed forms above, from Noll 1976 Table I */
		assert_near(GX(k, 4), 4.0 * sqrt(3.0) * x, 1e-12);
		assert_near(GY(k, 4), 4.0 * sqrt(3.0) * y, 1e-12);
		assert_near(GX(k, 7), 6.0 * s8 * x * y, 1e-12);
		assert_near(GY(k, 7),
			    s8 * (3 * x * x + 9 * y * y - 2 + 4 * h * h),
			    1e-12);
		assert_near(GX(k, 8),
			    s8 * (9 * x * x + 3 * y * y - 2 + 4 * h * h),
			    1e-12);
		assert_near(GY(k, 8), 6.0 * s8 * x * y, 1e-12);
		assert_near(GX(k, 11),
			    sqrt(5.0) * (24 * (x * x * x + x * h * h) +
					 24 * x * (y * y + h * h / 3) - 12 * x),
			    1e-11);
	}
#undef GX
#undef GY
	free(G);
}

/*
 * Brute-force mean of the analytic gradient of mode j over the square of
 * half-width h at (x0, y0): midpoint rule on ns x ns sub-squares.
 */
static void subsampled_mean(int j, double x0, double y0, double h, int ns,
			    double *mx, double *my)
{
	double d = 2.0 * h / ns, gx, gy, sx = 0.0, sy = 0.0;
	int a, b;

	for (b = 0; b < ns; b++) {
		for (a = 0; a < ns; a++) {
			wt_zernike_gradient(j, x0 - h + (a + 0.5) * d,
					    y0 - h + (b + 0.5) * d, &gx, &gy);
			sx += gx;
			sy += gy;
		}
	}
	*mx = sx / ((double)ns * ns);
	*my = sy / ((double)ns * ns);
}

static void slope_matrix_matches_subsampled_average(void **state)
{
	/*
	 * Brute force: mean of the analytic gradient over a fine midpoint
	 * sub-sampling of each square, 32 x 32 and 64 x 64, combined by
	 * Richardson extrapolation (4 M64 - M32) / 3: the midpoint rule's
	 * error is a series in even powers of the sub-square size, so this
	 * removes the d^2 term and leaves O(d^4) (common practice).  For
	 * j <= 36 on an 8 x 8 grid the raw 64 x 64 mean alone differs by up
	 * to ~1e-3 of the slope; the extrapolated one must agree to 1e-6.
	 */
	enum { JF = 1, NM = 36 };
	double cx[64], cy[64], *G, h = 1.0 / 8, x32, y32, x64, y64, ex, ey;
	double scale;
	int n_sub, k, c;
	wt_error err;

	(void)state;
	n_sub = make_grid(8, cx, cy);
	G = malloc(2 * (size_t)n_sub * NM * sizeof(*G));
	assert_non_null(G);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, n_sub, h, JF, NM, G, &err), 0);
	for (k = 0; k < n_sub; k++) {
		for (c = 0; c < NM; c++) {
			subsampled_mean(JF + c, cx[k], cy[k], h, 32, &x32,
					&y32);
			subsampled_mean(JF + c, cx[k], cy[k], h, 64, &x64,
					&y64);
			ex = (4.0 * x64 - x32) / 3.0;
			ey = (4.0 * y64 - y32) / 3.0;
			scale = max_abs(1.0, max_abs(ex, ey));
			/* brute-force average, extrapolated (common
			 * practice) */
			assert_true(fabs(G[(size_t)k * NM + c] - ex) <=
				    1e-6 * scale);
			assert_true(fabs(G[((size_t)n_sub + k) * NM + c] -
					 ey) <= 1e-6 * scale);
		}
	}
	free(G);
}

/*
 * Mean of the analytic gradient of mode j over the square of half-width h at
 * (x0, y0): product 5-point Gauss-Legendre (A&S 25.4.29, closed forms of the
 * nodes and weights) on each of nc x nc sub-squares.
 */
static void gauss_mean(int j, double x0, double y0, double h, int nc,
		       double *mx, double *my)
{
	const double s = 2.0 * sqrt(10.0 / 7.0);
	const double u[5] = {-sqrt(5.0 + s) / 3.0, -sqrt(5.0 - s) / 3.0, 0.0,
			     sqrt(5.0 - s) / 3.0, sqrt(5.0 + s) / 3.0};
	const double w[5] = {(322.0 - 13.0 * sqrt(70.0)) / 900.0,
			     (322.0 + 13.0 * sqrt(70.0)) / 900.0, 128.0 / 225.0,
			     (322.0 + 13.0 * sqrt(70.0)) / 900.0,
			     (322.0 - 13.0 * sqrt(70.0)) / 900.0};
	double d = 2.0 * h / nc, x, y, gx, gy, sx = 0.0, sy = 0.0;
	int a, b, p, q;

	for (b = 0; b < nc; b++) {
		for (a = 0; a < nc; a++) {
			for (q = 0; q < 5; q++) {
				y = y0 - h + (b + 0.5 + 0.5 * u[q]) * d;
				for (p = 0; p < 5; p++) {
					x = x0 - h + (a + 0.5 + 0.5 * u[p]) * d;
					wt_zernike_gradient(j, x, y, &gx, &gy);
					sx += w[p] * w[q] * gx;
					sy += w[p] * w[q] * gy;
				}
			}
		}
	}
	/* the weights sum to 2 per axis: 4 per sub-square */
	*mx = sx / (4.0 * nc * nc);
	*my = sy / (4.0 * nc * nc);
}

static void slope_matrix_exact_to_n20(void **state)
{
	/*
	 * Modes j = 2..231 on a few squares, edge ones included: the edge
	 * quadrature must agree with an area integral of the analytic
	 * gradient by composite 5-point Gauss-Legendre (A&S 25.4.29 nodes)
	 * on 8 x 8 sub-cells, which converges like (h / 8)^10 for these
	 * degree <= 19 gradients.
	 */
	enum { JF = 2, NM = 230, NSUB = 5, NC = 8 };
	static const double cx[NSUB] = {0.0, 0.3, -0.7, 0.9, -0.55};
	static const double cy[NSUB] = {0.0, -0.45, 0.6, 0.4, -0.85};
	const double h = 0.05;
	double *G, sx, sy, scale;
	int k, c;
	wt_error err;

	(void)state;
	G = malloc(2 * NSUB * NM * sizeof(*G));
	assert_non_null(G);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, NSUB, h, JF, NM, G, &err), 0);
	for (k = 0; k < NSUB; k++) {
		for (c = 0; c < NM; c++) {
			gauss_mean(JF + c, cx[k], cy[k], h, NC, &sx, &sy);
			scale = max_abs(1.0, max_abs(sx, sy));
			/* area Gauss quadrature (A&S 25.4.29) */
			assert_true(fabs(G[k * NM + c] - sx) <= 1e-9 * scale);
			assert_true(fabs(G[(NSUB + k) * NM + c] - sy) <=
				    1e-9 * scale);
		}
	}
	free(G);
}

static void slope_matrix_refuses_bad_arguments(void **state)
{
	double cx[1] = {0.0}, cy[1] = {0.0}, G[8] = {42.0};
	double bad[1] = {NAN};
	wt_error err;

	(void)state;
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, 0, 0.1, 1, 2, G, &err),
			 -EINVAL);
	assert_true(strlen(err.msg) > 0);
	assert_int_equal(err.code, -EINVAL);
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, 1, 0.1, 1, 0, G, &err),
			 -EINVAL);
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, 1, 0.1, 0, 2, G, &err),
			 -EINVAL);
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, 1, 0.0, 1, 2, G, &err),
			 -EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, 1, -0.1, 1, 2, G, &err),
		-EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, 1, INFINITY, 1, 2, G, &err),
		-EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, 1, 0.1, INT_MAX, 2, G, &err),
		-EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(NULL, cy, 1, 0.1, 1, 2, G, &err),
		-EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, 1, 0.1, 1, 2, NULL, NULL),
		-EINVAL);
	assert_int_equal(
		wt_zernike_slope_matrix(bad, cy, 1, 0.1, 1, 2, G, &err),
		-EINVAL);
	assert_near(G[0], 42.0, 0.0); /* G left alone */
}

/* ---- fit ---------------------------------------------------------------- */

static void fit_recovers_noise_free_coefficients(void **state)
{
	/* Modes j = 2..36 from slopes of a 16 x 16 grid. */
	enum { JF = 2, NM = 35 };
	struct rng r = {wt_test_seed(13)};
	double cx[256], cy[256], *G, *s, a_true[NM], a_fit[NM];
	int n_sub, rows, k, c;
	wt_error err;

	(void)state;
	n_sub = make_grid(16, cx, cy);
	rows = 2 * n_sub;
	G = malloc((size_t)rows * NM * sizeof(*G));
	s = malloc((size_t)rows * sizeof(*s));
	assert_true(G && s);
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, n_sub, 1.0 / 16, JF,
						 NM, G, &err),
			 0);
	for (c = 0; c < NM; c++) {
		a_true[c] = rng_normal(&r) / (c + 1.0);
	}
	for (k = 0; k < rows; k++) {
		s[k] = 0.0;
		for (c = 0; c < NM; c++) {
			s[k] += G[(size_t)k * NM + c] * a_true[c];
		}
	}
	assert_int_equal(wt_zernike_fit(G, rows, NM, s, a_fit, &err), 0);
	for (c = 0; c < NM; c++) {
		/* a consistent full-rank system is solved exactly by least
		 * squares (common practice) */
		assert_near(a_fit[c], a_true[c], 1e-9);
	}
	free(G);
	free(s);
}

static void fit_noise_within_statistical_error(void **state)
{
	/*
	 * White slope noise sigma: the least-squares estimate is unbiased with
	 * covariance sigma^2 (G^T G)^-1 (NR 15.4), so per trial
	 * e^T (G^T G) e / sigma^2 is chi-square with NM degrees of freedom,
	 * and the residual |G a - s|^2 / sigma^2 chi-square with rows - NM.
	 */
	enum { JF = 2, NM = 20, TRIALS = 300 };
	struct rng r = {wt_test_seed(14)};
	const double sigma = 0.05;
	double cx[144], cy[144], *G, *s, *gtg, *cov, a_true[NM], a_fit[NM];
	double e[NM], chi_coef = 0.0, chi_res = 0.0, q, res;
	int n_sub, rows, k, c, d, t;
	wt_error err;

	(void)state;
	n_sub = make_grid(12, cx, cy);
	rows = 2 * n_sub;
	G = malloc((size_t)rows * NM * sizeof(*G));
	s = malloc((size_t)rows * sizeof(*s));
	gtg = calloc(NM * NM, sizeof(*gtg));
	cov = calloc(NM * NM, sizeof(*cov));
	assert_true(G && s && gtg && cov);
	assert_int_equal(wt_zernike_slope_matrix(cx, cy, n_sub, 1.0 / 12, JF,
						 NM, G, &err),
			 0);
	for (c = 0; c < NM; c++) {
		for (d = 0; d < NM; d++) {
			for (k = 0; k < rows; k++) {
				gtg[c * NM + d] += G[(size_t)k * NM + c] *
						   G[(size_t)k * NM + d];
			}
			cov[c * NM + d] = gtg[c * NM + d];
		}
	}
	/* (G^T G)^-1 by Cholesky (LAPACK dpotrf/dpotri, lower triangle) */
	assert_int_equal(LAPACKE_dpotrf(LAPACK_ROW_MAJOR, 'L', NM, cov, NM), 0);
	assert_int_equal(LAPACKE_dpotri(LAPACK_ROW_MAJOR, 'L', NM, cov, NM), 0);

	for (c = 0; c < NM; c++) {
		a_true[c] = 0.3 * rng_normal(&r);
	}
	for (t = 0; t < TRIALS; t++) {
		for (k = 0; k < rows; k++) {
			s[k] = sigma * rng_normal(&r);
			for (c = 0; c < NM; c++) {
				s[k] += G[(size_t)k * NM + c] * a_true[c];
			}
		}
		assert_int_equal(wt_zernike_fit(G, rows, NM, s, a_fit, &err),
				 0);
		for (c = 0; c < NM; c++) {
			e[c] = a_fit[c] - a_true[c];
			/* |e_c| < 6 standard errors, sqrt(sigma^2 C_cc)
			 * (NR 15.4); P(fail) ~ 1e-5 over all draws */
			assert_true(fabs(e[c]) <
				    6.0 * sigma * sqrt(cov[c * NM + c]));
		}
		q = 0.0;
		for (c = 0; c < NM; c++) {
			for (d = 0; d < NM; d++) {
				q += e[c] * gtg[c * NM + d] * e[d];
			}
		}
		chi_coef += q / (sigma * sigma);
		for (k = 0; k < rows; k++) {
			res = -s[k];
			for (c = 0; c < NM; c++) {
				res += G[(size_t)k * NM + c] * a_fit[c];
			}
			chi_res += res * res / (sigma * sigma);
		}
	}
	chi_coef /= TRIALS;
	chi_res /= TRIALS;
	/* chi-square means NM and rows - NM, standard errors
	 * sqrt(2 dof / TRIALS); allow 5 of them (NR 15.4, 6.2) */
	assert_true(fabs(chi_coef - NM) < 5.0 * sqrt(2.0 * NM / TRIALS));
	assert_true(fabs(chi_res - (rows - NM)) <
		    5.0 * sqrt(2.0 * (rows - NM) / TRIALS));
	free(G);
	free(s);
	free(gtg);
	free(cov);
}

static void fit_refuses_bad_sizes(void **state)
{
	double G[6] = {1, 0, 0, 1, 1, 1}, s[3] = {1, 2, 3}, a[2] = {7, 7};
	double Gnan[6] = {1, 0, 0, NAN, 1, 1}, snan[3] = {1, INFINITY, 3};
	wt_error err;

	(void)state;
	/* 3 x 2: fine (a sanity baseline: least squares of x = 1, y = 2,
	 * x + y = 3 gives (1, 2), common practice) */
	assert_int_equal(wt_zernike_fit(G, 3, 2, s, a, &err), 0);
	assert_near(a[0], 1.0, 1e-12);
	assert_near(a[1], 2.0, 1e-12);
	a[0] = a[1] = 7.0;
	assert_int_equal(wt_zernike_fit(G, 1, 2, s, a, &err), -EINVAL);
	assert_int_equal(err.code, -EINVAL);
	assert_true(strstr(err.msg, "rows") != NULL);
	assert_int_equal(wt_zernike_fit(G, 3, 0, s, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, 0, 0, s, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, -3, 2, s, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(NULL, 3, 2, s, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, 3, 2, NULL, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, 3, 2, s, NULL, NULL), -EINVAL);
	assert_int_equal(wt_zernike_fit(Gnan, 3, 2, s, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, 3, 2, snan, a, &err), -EINVAL);
	assert_int_equal(wt_zernike_fit(G, INT_MAX, 2, s, a, &err), -EINVAL);
	assert_near(a[0], 7.0, 0.0); /* a left alone */
	assert_near(a[1], 7.0, 0.0);
}

static void fit_refuses_rank_deficient(void **state)
{
	/* Piston (j = 1) has no slope: its column is zero (Noll 1976 Table
	 * I: Z1 = 1). */
	enum { NM = 6 };
	double cx[64], cy[64], *G, *s, a[NM];
	double twin[6] = {1, 1, 2, 2, 3, 3}, s3[3] = {1, 2, 3};
	int n_sub, rows, k, c;
	wt_error err;

	(void)state;
	n_sub = make_grid(8, cx, cy);
	rows = 2 * n_sub;
	G = malloc((size_t)rows * NM * sizeof(*G));
	s = malloc((size_t)rows * sizeof(*s));
	assert_true(G && s);
	assert_int_equal(
		wt_zernike_slope_matrix(cx, cy, n_sub, 1.0 / 8, 1, NM, G, &err),
		0);
	for (k = 0; k < rows; k++) {
		assert_near(G[(size_t)k * NM], 0.0, 0.0);
		s[k] = G[(size_t)k * NM + 1];
	}
	for (c = 0; c < NM; c++) {
		a[c] = 5.0;
	}
	assert_int_equal(wt_zernike_fit(G, rows, NM, s, a, &err), -EDOM);
	assert_int_equal(err.code, -EDOM);
	assert_true(strstr(err.msg, "rank") != NULL);
	assert_near(a[0], 5.0, 0.0); /* a left alone */
	/* Without the piston column the same grid is fine (common practice:
	 * tilt alone reproduces s exactly). */
	for (k = 0; k < rows; k++) {
		for (c = 1; c < NM; c++) {
			G[(size_t)k * (NM - 1) + c - 1] = G[(size_t)k * NM + c];
		}
	}
	assert_int_equal(wt_zernike_fit(G, rows, NM - 1, s, a, &err), 0);
	assert_near(a[0], 1.0, 1e-9);
	for (c = 1; c < NM - 1; c++) {
		assert_near(a[c], 0.0, 1e-9);
	}
	free(G);
	free(s);
	/* Two identical columns cannot be told apart. */
	assert_int_equal(wt_zernike_fit(twin, 3, 2, s3, a, &err), -EDOM);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(noll_index_matches_noll1976_table1),
	cmocka_unit_test(noll_rows_hold_every_nm_once_to_n20),
	cmocka_unit_test(noll_refuses_j_below_one),
	cmocka_unit_test(values_match_noll1976_table1),
	cmocka_unit_test(radial_matches_factorial_sum_to_n20),
	cmocka_unit_test(orthonormal_over_unit_disk_j1_21),
	cmocka_unit_test(xy_agrees_with_polar),
	cmocka_unit_test(gradient_matches_central_differences),
	cmocka_unit_test(gradient_at_origin_is_exact),
	cmocka_unit_test(slope_matrix_tilt_is_exact),
	cmocka_unit_test(slope_matrix_matches_closed_form_averages),
	cmocka_unit_test(slope_matrix_matches_subsampled_average),
	cmocka_unit_test(slope_matrix_exact_to_n20),
	cmocka_unit_test(slope_matrix_refuses_bad_arguments),
	cmocka_unit_test(fit_recovers_noise_free_coefficients),
	cmocka_unit_test(fit_noise_within_statistical_error),
	cmocka_unit_test(fit_refuses_bad_sizes),
	cmocka_unit_test(fit_refuses_rank_deficient),
};

WT_TEST_MAIN(tests)
