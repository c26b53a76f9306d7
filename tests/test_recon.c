/*
 * test_recon.c - truncated-SVD reconstructor (lib/wt_recon.c).
 *
 * Sources of truth: the four Moore-Penrose conditions (R. Penrose 1955,
 * Proc. Camb. Phil. Soc. 51, 406), matrices built with a known SVD from
 * orthonormal factors (singular values are unique: Golub & Van Loan, Matrix
 * Computations, thm. 2.4.1), and numpy.linalg.pinv / numpy.linalg.svd through
 * the fixture in tests/data/recon/ (written by tools/gen_pinv_fixture.py).
 */
#include "wt_test.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <string.h>

#include <cblas.h>
#include <lapacke.h> /* defines I through complex.h: name nothing I */

#include "wt_error.h"
#include "wt_recon.h"

#ifndef WT_SOURCE_DIR
#define WT_SOURCE_DIR "."
#endif

static double *gauss_matrix(int rows, int cols)
{
	double *a = malloc((size_t)rows * cols * sizeof(*a));
	size_t e;

	assert_non_null(a);
	for (e = 0; e < (size_t)rows * cols; e++) {
		a[e] = wt_rng_gauss();
	}
	return a;
}

/* --- small linear-algebra helpers (BLAS and LAPACK, not our code) ------- */

/* C = A B with A rows x inner, B inner x cols, all row-major. */
static double *matmul(const double *a, const double *b, int rows, int inner,
		      int cols)
{
	double *c = malloc((size_t)rows * cols * sizeof(*c));

	assert_non_null(c);
	cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, cols,
		    inner, 1.0, a, inner, b, cols, 0.0, c, cols);
	return c;
}

static double frob(const double *a, size_t elems)
{
	double sum = 0.0;
	size_t e;

	for (e = 0; e < elems; e++) {
		sum += a[e] * a[e];
	}
	return sqrt(sum);
}

/* |A - B|_F / |B|_F */
static double rel_diff(const double *a, const double *b, size_t elems)
{
	double sum = 0.0;
	size_t e;

	for (e = 0; e < elems; e++) {
		sum += (a[e] - b[e]) * (a[e] - b[e]);
	}
	return sqrt(sum) / frob(b, elems);
}

/* |S^T - S|_F / |S|_F for a square S */
static double asymmetry(const double *s, int n)
{
	double sum = 0.0;
	int r, c;

	for (r = 0; r < n; r++) {
		for (c = 0; c < n; c++) {
			double d = s[(size_t)r * n + c] - s[(size_t)c * n + r];

			sum += d * d;
		}
	}
	return sqrt(sum) / frob(s, (size_t)n * n);
}

/* rows x k matrix with orthonormal columns: QR (LAPACK) of a Gaussian one. */
static double *orthonormal(int rows, int k)
{
	double *q = gauss_matrix(rows, k);
	double *tau = malloc((size_t)k * sizeof(*tau));

	assert_non_null(tau);
	assert_int_equal(LAPACKE_dgeqrf(LAPACK_ROW_MAJOR, rows, k, q, k, tau),
			 0);
	assert_int_equal(
		LAPACKE_dorgqr(LAPACK_ROW_MAJOR, rows, k, k, q, k, tau), 0);
	free(tau);
	return q;
}

/* D = U diag(sig) V^T with U m x k and V n x k orthonormal columns. */
static double *with_spectrum(const double *u, const double *sig,
			     const double *v, int m, int n, int k)
{
	double *d = calloc((size_t)m * n, sizeof(*d));
	int r, c, i;

	assert_non_null(d);
	for (r = 0; r < m; r++) {
		for (c = 0; c < n; c++) {
			double sum = 0.0;

			for (i = 0; i < k; i++) {
				sum += u[(size_t)r * k + i] * sig[i] *
				       v[(size_t)c * k + i];
			}
			d[(size_t)r * n + c] = sum;
		}
	}
	return d;
}

/* --- Moore-Penrose ------------------------------------------------------ */

/*
 * X = pinv(A) truncated at the true rank must satisfy Penrose's four
 * conditions (Penrose 1955): A X A = A, X A X = X, (A X)^T = A X,
 * (X A)^T = X A.  Relative Frobenius residuals are held to `tol`.
 */
static void check_penrose(const double *a, int m, int n, int rank, double tol)
{
	wt_error err;
	wt_svd *s = NULL;
	double *x, *ax, *xa, *axa, *xax;
	int kept;

	assert_int_equal(wt_svd_compute(a, m, n, &s, &err), 0);
	assert_int_equal(wt_svd_count(s), m < n ? m : n);
	/* Truncate at the true rank: the dropped values are rounding noise,
	 * about 1e-15 of sigma_1 (common practice). */
	kept = wt_recon_modes(s, 0, 1e-10);
	assert_int_equal(kept, rank);

	x = malloc((size_t)n * m * sizeof(*x));
	assert_non_null(x);
	assert_int_equal(wt_recon_pinv(s, kept, NULL, x), 0);

	ax = matmul(a, x, m, n, m);
	xa = matmul(x, a, n, m, n);
	axa = matmul(ax, a, m, m, n);
	xax = matmul(xa, x, n, n, m);

	print_message("%dx%d rank %d: AXA %.2e XAX %.2e AX %.2e XA %.2e\n", m,
		      n, rank, rel_diff(axa, a, (size_t)m * n),
		      rel_diff(xax, x, (size_t)n * m), asymmetry(ax, m),
		      asymmetry(xa, n));
	/* Penrose 1955, conditions (1) to (4). */
	assert_true(rel_diff(axa, a, (size_t)m * n) < tol);
	assert_true(rel_diff(xax, x, (size_t)n * m) < tol);
	assert_true(asymmetry(ax, m) < tol);
	assert_true(asymmetry(xa, n) < tol);

	free(ax);
	free(xa);
	free(axa);
	free(xax);
	free(x);
	wt_svd_destroy(s);
}

static void penrose_conditions_tall_full_rank(void **state)
{
	double *a;

	(void)state;
	wt_rng_seed(wt_test_seed(1001));
	a = gauss_matrix(280, 140);
	check_penrose(a, 280, 140, 140, 1e-13);
	free(a);
}

static void penrose_conditions_wide_full_rank(void **state)
{
	double *a;

	(void)state;
	wt_rng_seed(wt_test_seed(1002));
	a = gauss_matrix(90, 200);
	check_penrose(a, 90, 200, 90, 1e-13);
	free(a);
}

static void penrose_conditions_rank_deficient(void **state)
{
	double *b, *c, *a;

	(void)state;
	wt_rng_seed(wt_test_seed(1003));
	/* rank 12 as a product (150 x 12)(12 x 100) */
	b = gauss_matrix(150, 12);
	c = gauss_matrix(12, 100);
	a = matmul(b, c, 150, 12, 100);
	check_penrose(a, 150, 100, 12, 1e-13);
	free(a);
	free(b);
	free(c);

	/* and a wide one, rank 7: (60 x 7)(7 x 130) */
	b = gauss_matrix(60, 7);
	c = gauss_matrix(7, 130);
	a = matmul(b, c, 60, 7, 130);
	check_penrose(a, 60, 130, 7, 1e-13);
	free(a);
	free(b);
	free(c);
}

/* --- known spectrum ----------------------------------------------------- */

struct known {
	int m, n, k;
	double *u, *v, *sig, *d;
};

/* D = U diag(sig) V^T, sig_i = 10^(-3 i / (k - 1)): 1 down to 1e-3. */
static void known_make(struct known *kn, int m, int n)
{
	int i;

	kn->m = m;
	kn->n = n;
	kn->k = m < n ? m : n;
	kn->u = orthonormal(m, kn->k);
	kn->v = orthonormal(n, kn->k);
	kn->sig = malloc((size_t)kn->k * sizeof(*kn->sig));
	assert_non_null(kn->sig);
	for (i = 0; i < kn->k; i++) {
		kn->sig[i] = pow(10.0, -3.0 * i / (kn->k - 1));
	}
	kn->d = with_spectrum(kn->u, kn->sig, kn->v, m, n, kn->k);
}

static void known_free(struct known *kn)
{
	free(kn->u);
	free(kn->v);
	free(kn->sig);
	free(kn->d);
}

static void singular_values_match_construction(void **state)
{
	struct known kn;
	wt_svd *s = NULL;
	const double *sv;
	int i;

	(void)state;
	wt_rng_seed(wt_test_seed(1004));
	known_make(&kn, 64, 31);
	assert_int_equal(wt_svd_compute(kn.d, kn.m, kn.n, &s, NULL), 0);
	assert_int_equal(wt_svd_count(s), 31);
	sv = wt_svd_values(s);
	assert_non_null(sv);
	for (i = 0; i < kn.k; i++) {
		/* singular values of U diag(sig) V^T are sig (Golub & Van
		 * Loan thm. 2.4.1); backward stable SVD: error ~ eps sigma_1 */
		assert_true(fabs(sv[i] - kn.sig[i]) < 1e-13);
		if (i > 0) {
			assert_true(sv[i] <= sv[i - 1]); /* descending */
		}
	}
	/* condition number of the kept part: sigma_1 / sigma_kept */
	assert_true(fabs(wt_recon_condition(s, kn.k) - 1e3) < 1e-9);
	assert_true(fabs(wt_recon_condition(s, 1) - 1.0) < 1e-15);
	assert_true(isnan(wt_recon_condition(s, 0)));
	assert_true(isnan(wt_recon_condition(s, kn.k + 1)));
	assert_true(isnan(wt_recon_condition(NULL, 1)));
	wt_svd_destroy(s);
	known_free(&kn);
}

static void modes_by_count_keeps_min_of_modes_and_count(void **state)
{
	struct known kn;
	wt_svd *s = NULL;

	(void)state;
	wt_rng_seed(wt_test_seed(1005));
	known_make(&kn, 20, 9);
	assert_int_equal(wt_svd_compute(kn.d, kn.m, kn.n, &s, NULL), 0);
	/* modes > 0: min(modes, count), whatever min_ratio says */
	assert_int_equal(wt_recon_modes(s, 1, 0.5), 1);
	assert_int_equal(wt_recon_modes(s, 5, 0.9), 5);
	assert_int_equal(wt_recon_modes(s, 9, 0.0), 9);
	assert_int_equal(wt_recon_modes(s, 10, 0.0), 9);
	assert_int_equal(wt_recon_modes(s, 100000, 2.0), 9);
	assert_int_equal(wt_recon_modes(NULL, 3, 0.0), -EINVAL);
	wt_svd_destroy(s);
	known_free(&kn);
}

static void modes_by_ratio_keeps_values_above_threshold(void **state)
{
	struct known kn;
	wt_svd *s = NULL;
	int want, kept;
	double ratio;

	(void)state;
	wt_rng_seed(wt_test_seed(1006));
	/* 11 values sigma_i = 10^(-0.3 i): sigma_i / sigma_1 = 10^(-0.3 i) */
	known_make(&kn, 30, 11);
	assert_int_equal(wt_svd_compute(kn.d, kn.m, kn.n, &s, NULL), 0);
	for (want = 1; want <= 11; want++) {
		/* threshold between values want-1 and want (by construction) */
		ratio = pow(10.0, -0.3 * (want - 0.5));
		assert_int_equal(wt_recon_modes(s, 0, ratio), want);
		/* negative modes mean "by ratio" too */
		assert_int_equal(wt_recon_modes(s, -1, ratio), want);
	}
	assert_int_equal(wt_recon_modes(s, 0, 0.0), 11);
	assert_int_equal(wt_recon_modes(s, 0, 1.5), 0);
	assert_int_equal(wt_recon_modes(s, 0, NAN), 0);

	/* the truncated R keeps exactly `kept` modes: its singular values
	 * are the kept 1/sigma_i and zeros */
	kept = wt_recon_modes(s, 0, 0.05);
	assert_int_equal(kept, 5); /* 10^(-1.2) = 0.063 >= 0.05 > 10^(-1.5) */
	{
		double *r = malloc((size_t)kn.n * kn.m * sizeof(*r));
		wt_svd *sr = NULL;
		const double *rv;

		assert_non_null(r);
		assert_int_equal(wt_recon_pinv(s, kept, NULL, r), 0);
		assert_int_equal(wt_svd_compute(r, kn.n, kn.m, &sr, NULL), 0);
		rv = wt_svd_values(sr);
		/* singular values of the pseudo-inverse are 1/sigma_i
		 * (Penrose 1955), dropped ones 0 */
		assert_true(fabs(rv[0] - 1.0 / kn.sig[kept - 1]) <
			    1e-12 * rv[0]);
		assert_true(rv[kept - 1] > 0.9);
		assert_true(rv[kept] < 1e-12 * rv[0]);
		wt_svd_destroy(sr);
		free(r);
	}
	wt_svd_destroy(s);
	known_free(&kn);
}

static void mode_gains_scale_each_mode(void **state)
{
	struct known kn;
	wt_svd *s = NULL;
	double *r, *gains, *x, *y;
	int kept = 8, i, j, c;

	(void)state;
	wt_rng_seed(wt_test_seed(1007));
	known_make(&kn, 48, 13);
	assert_int_equal(wt_svd_compute(kn.d, kn.m, kn.n, &s, NULL), 0);
	r = malloc((size_t)kn.n * kn.m * sizeof(*r));
	gains = malloc((size_t)kept * sizeof(*gains));
	x = malloc((size_t)kn.m * sizeof(*x));
	y = malloc((size_t)kn.n * sizeof(*y));
	assert_non_null(r);
	assert_non_null(gains);
	assert_non_null(x);
	assert_non_null(y);
	for (i = 0; i < kept; i++) {
		gains[i] = 0.25 + 0.5 * i; /* includes 1 and non-unit */
	}
	gains[3] = 0.0; /* a switched-off mode */
	assert_int_equal(wt_recon_pinv(s, kept, gains, r), 0);

	for (i = 0; i < kn.k; i++) {
		/* R u_i = g_i / sigma_i v_i for kept modes, 0 beyond: the
		 * definition R = V_k diag(g / sigma) U_k^T with U, V
		 * orthonormal (and u_i, v_i known by construction up to a
		 * common sign, which R's action does not see). */
		double scale = i < kept ? gains[i] / kn.sig[i] : 0.0;

		for (c = 0; c < kn.m; c++) {
			x[c] = kn.u[(size_t)c * kn.k + i];
		}
		for (j = 0; j < kn.n; j++) {
			double sum = 0.0;

			for (c = 0; c < kn.m; c++) {
				sum += r[(size_t)j * kn.m + c] * x[c];
			}
			y[j] = sum;
		}
		for (j = 0; j < kn.n; j++) {
			double want = scale * kn.v[(size_t)j * kn.k + i];

			/* eps times |R| = 1/sigma_kept, with margin */
			assert_true(fabs(y[j] - want) < 1e-11);
		}
	}
	free(x);
	free(y);
	free(gains);
	free(r);
	wt_svd_destroy(s);
	known_free(&kn);
}

/* --- numpy reference ---------------------------------------------------- */

static int read_word(FILE *f, char *word, size_t len)
{
	int ch;
	size_t n = 0;

	/* skip blanks and '#' comment lines */
	for (;;) {
		ch = fgetc(f);
		if (ch == '#') {
			while (ch != '\n' && ch != EOF) {
				ch = fgetc(f);
			}
		}
		if (ch == EOF) {
			return -1;
		}
		if (ch != ' ' && ch != '\n' && ch != '\t' && ch != '\r') {
			break;
		}
	}
	while (ch != EOF && ch != ' ' && ch != '\n' && ch != '\t' &&
	       ch != '\r' && n + 1 < len) {
		word[n++] = (char)ch;
		ch = fgetc(f);
	}
	word[n] = '\0';
	return 0;
}

static void expect_word(FILE *f, const char *want)
{
	char word[64];

	assert_int_equal(read_word(f, word, sizeof(word)), 0);
	assert_string_equal(word, want);
}

static double read_number(FILE *f)
{
	char word[64], *end;
	double v;

	assert_int_equal(read_word(f, word, sizeof(word)), 0);
	v = strtod(word, &end);
	assert_true(*end == '\0' && end != word);
	return v;
}

static void matches_numpy_pinv_fixture(void **state)
{
	const char *path = WT_SOURCE_DIR "/tests/data/recon/pinv_40x24.txt";
	FILE *f = fopen(path, "r");
	int m, n, kept, count, e, i;
	double rcond, *sigma, *d, *p, *r, pmax = 0.0, dmax = 0.0;
	wt_svd *s = NULL;
	const double *sv;

	(void)state;
	if (!f) {
		fail_msg("cannot open %s", path);
	}
	expect_word(f, "rows");
	m = (int)read_number(f);
	expect_word(f, "cols");
	n = (int)read_number(f);
	expect_word(f, "kept");
	kept = (int)read_number(f);
	expect_word(f, "rcond");
	rcond = read_number(f);
	assert_true(m == 40 && n == 24 && kept > 0 && kept < n);
	count = m < n ? m : n;
	sigma = malloc((size_t)count * sizeof(*sigma));
	d = malloc((size_t)m * n * sizeof(*d));
	p = malloc((size_t)n * m * sizeof(*p));
	r = malloc((size_t)n * m * sizeof(*r));
	assert_non_null(sigma);
	assert_non_null(d);
	assert_non_null(p);
	assert_non_null(r);
	expect_word(f, "sigma");
	for (i = 0; i < count; i++) {
		sigma[i] = read_number(f);
	}
	expect_word(f, "matrix");
	for (e = 0; e < m * n; e++) {
		d[e] = read_number(f);
	}
	expect_word(f, "pinv");
	for (e = 0; e < n * m; e++) {
		p[e] = read_number(f);
		pmax = fmax(pmax, fabs(p[e]));
	}
	fclose(f);

	assert_int_equal(wt_svd_compute(d, m, n, &s, NULL), 0);
	sv = wt_svd_values(s);
	for (i = 0; i < count; i++) {
		/* singular values from numpy.linalg.svd */
		assert_true(fabs(sv[i] - sigma[i]) < 1e-13 * sigma[0]);
	}
	/* numpy.linalg.pinv keeps sigma_i > rcond sigma_1; the generator put
	 * rcond between two values, so our ratio rule keeps as many */
	assert_int_equal(wt_recon_modes(s, 0, rcond), kept);
	assert_int_equal(wt_recon_pinv(s, kept, NULL, r), 0);
	for (e = 0; e < n * m; e++) {
		dmax = fmax(dmax, fabs(r[e] - p[e]));
	}
	print_message("max |R - numpy pinv| = %.3e (max |pinv| %.3e)\n", dmax,
		      pmax);
	/* reference: numpy.linalg.pinv(matrix, rcond) (numpy 1.24, Debian) */
	assert_true(dmax < 1e-13 * pmax);

	wt_svd_destroy(s);
	free(sigma);
	free(d);
	free(p);
	free(r);
}

/* --- refusals and the float variant ------------------------------------ */

static void refuses_bad_sizes_and_arguments(void **state)
{
	double d[6] = {1, 2, 3, 4, 5, 6};
	double r[6];
	float rf[6];
	double zero[6] = {0};
	double gains[2] = {1.0, NAN};
	wt_svd *s = (wt_svd *)d; /* must be overwritten with NULL */
	wt_error err;

	(void)state;
	assert_int_equal(wt_svd_compute(d, 0, 3, &s, &err), -EINVAL);
	assert_null(s);
	assert_true(strlen(err.msg) > 0);
	assert_int_equal(wt_svd_compute(d, 2, 0, &s, &err), -EINVAL);
	assert_int_equal(wt_svd_compute(d, -2, 3, &s, &err), -EINVAL);
	assert_int_equal(wt_svd_compute(NULL, 2, 3, &s, &err), -EINVAL);
	assert_int_equal(wt_svd_compute(d, 2, 3, NULL, &err), -EINVAL);
	/* m * n beyond what we accept, refused before any allocation */
	assert_int_equal(wt_svd_compute(d, 1 << 20, 1 << 20, &s, &err),
			 -EINVAL);
	d[4] = NAN;
	assert_int_equal(wt_svd_compute(d, 2, 3, &s, &err), -EINVAL);
	d[4] = INFINITY;
	assert_int_equal(wt_svd_compute(d, 2, 3, &s, &err), -EINVAL);
	assert_null(s);
	d[4] = 5;

	assert_int_equal(wt_svd_count(NULL), -EINVAL);
	assert_null(wt_svd_values(NULL));
	wt_svd_destroy(NULL);

	assert_int_equal(wt_svd_compute(d, 2, 3, &s, &err), 0);
	assert_int_equal(wt_svd_count(s), 2);
	assert_int_equal(wt_recon_pinv(s, -1, NULL, r), -EINVAL);
	assert_int_equal(wt_recon_pinv(s, 3, NULL, r), -EINVAL);
	assert_int_equal(wt_recon_pinv(s, 2, NULL, NULL), -EINVAL);
	assert_int_equal(wt_recon_pinv(NULL, 1, NULL, r), -EINVAL);
	assert_int_equal(wt_recon_pinv(s, 2, gains, r), -EINVAL);
	assert_int_equal(wt_recon_pinv_float(s, 3, NULL, rf), -EINVAL);
	assert_int_equal(wt_recon_pinv_float(s, 2, NULL, NULL), -EINVAL);
	/* kept = 0 is a valid (empty) truncation: R = 0 */
	memset(r, 0xff, sizeof(r));
	assert_int_equal(wt_recon_pinv(s, 0, NULL, r), 0);
	for (int e = 0; e < 6; e++) {
		assert_true(r[e] == 0.0);
	}
	wt_svd_destroy(s);

	/* a zero matrix has no mode to invert */
	assert_int_equal(wt_svd_compute(zero, 3, 2, &s, &err), 0);
	assert_int_equal(wt_recon_modes(s, 0, 0.01), 0);
	assert_int_equal(wt_recon_pinv(s, 1, NULL, r), -ERANGE);
	assert_true(isinf(wt_recon_condition(s, 1)));
	wt_svd_destroy(s);
}

static void float_variant_matches_double(void **state)
{
	double *a, *rd, gains[30];
	float *rf;
	wt_svd *s = NULL;
	size_t e, elems = 30 * 70;
	int i;

	(void)state;
	wt_rng_seed(wt_test_seed(1008));
	a = gauss_matrix(70, 30);
	rd = malloc(elems * sizeof(*rd));
	rf = malloc(elems * sizeof(*rf));
	assert_non_null(rd);
	assert_non_null(rf);
	for (i = 0; i < 30; i++) {
		gains[i] = 1.0 - 0.02 * i;
	}
	assert_int_equal(wt_svd_compute(a, 70, 30, &s, NULL), 0);
	assert_int_equal(wt_recon_pinv(s, 25, gains, rd), 0);
	assert_int_equal(wt_recon_pinv_float(s, 25, gains, rf), 0);
	for (e = 0; e < elems; e++) {
		/* rounding to nearest float: relative error <= 2^-24
		 * (IEEE 754) */
		assert_true(fabs((double)rf[e] - rd[e]) <=
			    fabs(rd[e]) * (FLT_EPSILON / 2));
	}
	free(a);
	free(rd);
	free(rf);
	wt_svd_destroy(s);
}

const struct CMUnitTest tests[] = {
	cmocka_unit_test(penrose_conditions_tall_full_rank),
	cmocka_unit_test(penrose_conditions_wide_full_rank),
	cmocka_unit_test(penrose_conditions_rank_deficient),
	cmocka_unit_test(singular_values_match_construction),
	cmocka_unit_test(modes_by_count_keeps_min_of_modes_and_count),
	cmocka_unit_test(modes_by_ratio_keeps_values_above_threshold),
	cmocka_unit_test(mode_gains_scale_each_mode),
	cmocka_unit_test(matches_numpy_pinv_fixture),
	cmocka_unit_test(refuses_bad_sizes_and_arguments),
	cmocka_unit_test(float_variant_matches_double),
};

WT_TEST_MAIN(tests)
