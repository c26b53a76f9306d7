/*
 * test_hadamard.c - Hadamard poke patterns (lib/wt_hadamard.c).
 *
 * Sources of truth: Sylvester's recursive construction H_2m = [H H; H -H]
 * (J. J. Sylvester 1867, Phil. Mag. 34, 461), built here independently of
 * the library's closed form; the defining property H H^T = N I of a
 * Hadamard matrix (J. Hadamard 1893, Bull. Sci. Math. 17, 240); BLAS
 * (cblas_dgemm) for the noise-free measurements M = D H_n^T; and, for the
 * noise, the weighing-design result that a Hadamard design divides the
 * variance per measurement spent by the number of objects weighed together
 * (H. Hotelling 1944, Ann. Math. Stat. 15, 297; Harwit & Sloane 1979,
 * Hadamard Transform Optics, ch. 1; Kasper et al. 2004, JOSA A 21, 1004),
 * checked by Monte Carlo against the standard error of a mean.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include <cblas.h>

#include "wt_hadamard.h"

/* --- Sylvester's recursion, written out ----------------------------------- */

/* order x order, row-major, by H_1 = [1], H_2m = [H H; H -H]. */
static int *sylvester(int order)
{
	int *h = malloc((size_t)order * order * sizeof(*h));
	int m, r, c;

	assert_non_null(h);
	h[0] = 1;
	for (m = 1; m < order; m *= 2) {
		/* h holds H_m in its top-left m x m block (stride order). */
		for (r = 0; r < m; r++) {
			for (c = 0; c < m; c++) {
				int v = h[r * order + c];

				h[r * order + c + m] = v;
				h[(r + m) * order + c] = v;
				h[(r + m) * order + c + m] = -v;
			}
		}
	}
	return h;
}

static void closed_form_matches_sylvester_recursion(void **state)
{
	int order, p, k;

	(void)state;
	for (order = 1; order <= 256; order *= 2) {
		int *h = sylvester(order);

		for (p = 0; p < order; p++) {
			for (k = 0; k < order; k++) {
				/* Sylvester 1867 construction */
				assert_int_equal(wt_hadamard_sign(p, k),
						 h[p * order + k]);
			}
		}
		free(h);
	}
	assert_int_equal(wt_hadamard_sign(-1, 3), 0);
	assert_int_equal(wt_hadamard_sign(3, -1), 0);
}

static void rows_are_orthogonal(void **state)
{
	int order, p, q, k;

	(void)state;
	for (order = 1; order <= 256; order *= 2) {
		for (p = 0; p < order; p++) {
			for (q = 0; q < order; q++) {
				long dot = 0, dot_t = 0;

				for (k = 0; k < order; k++) {
					dot += wt_hadamard_sign(p, k) *
					       wt_hadamard_sign(q, k);
					dot_t += wt_hadamard_sign(k, p) *
						 wt_hadamard_sign(k, q);
				}
				/* H H^T = H^T H = N I (Hadamard 1893) */
				assert_int_equal(dot, p == q ? order : 0);
				assert_int_equal(dot_t, p == q ? order : 0);
			}
		}
	}
}

static void order_is_next_power_of_two(void **state)
{
	(void)state;
	/* smallest power of two >= n (arithmetic) */
	assert_int_equal(wt_hadamard_order(1), 1);
	assert_int_equal(wt_hadamard_order(2), 2);
	assert_int_equal(wt_hadamard_order(3), 4);
	assert_int_equal(wt_hadamard_order(12), 16);
	assert_int_equal(wt_hadamard_order(16), 16);
	assert_int_equal(wt_hadamard_order(17), 32);
	assert_int_equal(wt_hadamard_order(140), 256);
	assert_int_equal(wt_hadamard_order(WT_HADAMARD_MAX_ACT),
			 WT_HADAMARD_MAX_ACT);
	assert_int_equal(wt_hadamard_order(0), -EINVAL);
	assert_int_equal(wt_hadamard_order(-4), -EINVAL);
	assert_int_equal(wt_hadamard_order(WT_HADAMARD_MAX_ACT + 1), -EINVAL);
}

static void pattern_is_amplitude_times_row(void **state)
{
	const int n = 12, order = 16;
	const float a = 0.125f;
	int *h = sylvester(order);
	float cmd[12];
	int p, k;

	(void)state;
	for (p = 0; p < order; p++) {
		assert_int_equal(wt_hadamard_pattern(n, p, a, cmd), 0);
		for (k = 0; k < n; k++) {
			/* pattern p = a H[p][k] (Kasper et al. 2004) */
			assert_true(cmd[k] == a * (float)h[p * order + k]);
		}
	}
	assert_int_equal(wt_hadamard_pattern(n, order, a, cmd), -EINVAL);
	assert_int_equal(wt_hadamard_pattern(n, -1, a, cmd), -EINVAL);
	assert_int_equal(wt_hadamard_pattern(0, 0, a, cmd), -EINVAL);
	assert_int_equal(wt_hadamard_pattern(n, 0, a, NULL), -EINVAL);
	assert_int_equal(wt_hadamard_pattern(n, 0, NAN, cmd), -EINVAL);
	free(h);
}

/* M = D H_n^T: column p of M is D times row p of H (first n entries). */
static double *measure_noise_free(const double *D, int m, int n, int order)
{
	int *h = sylvester(order);
	double *hn = malloc((size_t)order * n * sizeof(*hn));
	double *M = malloc((size_t)m * order * sizeof(*M));
	int p, k;

	assert_non_null(hn);
	assert_non_null(M);
	for (p = 0; p < order; p++) {
		for (k = 0; k < n; k++) {
			hn[p * n + k] = h[p * order + k];
		}
	}
	/* M (m x N) = D (m x n) hn^T (n x N), by BLAS */
	cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, m, order, n, 1.0,
		    D, n, hn, n, 0.0, M, order);
	free(hn);
	free(h);
	return M;
}

static void decode_recovers_random_matrix(void **state)
{
	const int sizes[] = {1, 2, 5, 12, 16, 33};
	const int m = 40;
	size_t t;

	(void)state;
	wt_rng_seed(wt_test_seed(1004));
	for (t = 0; t < sizeof(sizes) / sizeof(sizes[0]); t++) {
		int n = sizes[t];
		int order = wt_hadamard_order(n);
		double *D = malloc((size_t)m * n * sizeof(*D));
		double *out = malloc((size_t)m * n * sizeof(*out));
		double *work = malloc((size_t)order * sizeof(*work));
		double *M;
		int e;

		assert_non_null(D);
		assert_non_null(out);
		assert_non_null(work);
		for (e = 0; e < m * n; e++) {
			D[e] = wt_rng_gauss();
		}
		M = measure_noise_free(D, m, n, order);
		assert_int_equal(wt_hadamard_decode(M, m, n, out, work), 0);
		for (e = 0; e < m * n; e++) {
			/* D = M H_n / N since H^T H = N I (Hadamard 1893):
			 * exact up to rounding of N additions */
			assert_true(fabs(out[e] - D[e]) < 1e-12 * order);
		}
		free(M);
		free(work);
		free(out);
		free(D);
	}
}

static void decode_rejects_bad_arguments(void **state)
{
	double M[4] = {0}, D[4], work[4];

	(void)state;
	assert_int_equal(wt_hadamard_decode(NULL, 1, 3, D, work), -EINVAL);
	assert_int_equal(wt_hadamard_decode(M, 1, 3, NULL, work), -EINVAL);
	assert_int_equal(wt_hadamard_decode(M, 1, 3, D, NULL), -EINVAL);
	assert_int_equal(wt_hadamard_decode(M, 0, 3, D, work), -EINVAL);
	assert_int_equal(wt_hadamard_decode(M, 1, 0, D, work), -EINVAL);
}

/* --- noise: Monte Carlo of both schemes at equal total frames ------------- */

/*
 * One measurement run on the linear sensor s = s0 + D c + noise, with
 * `per_state` frames averaged for each (pattern, sign) state; returns the
 * sum of squared errors of the estimated D.  hadamard = 0: the n patterns
 * e_k, column k = (s+ - s-) / (2a).  hadamard = 1: the N Hadamard rows,
 * then wt_hadamard_decode().
 */
static double run_once(const double *D, const double *s0, int m, int n,
		       int hadamard, int per_state, double a, double sigma)
{
	int order = hadamard ? wt_hadamard_order(n) : n;
	double *M = malloc((size_t)m * order * sizeof(*M));
	double *est = malloc((size_t)m * n * sizeof(*est));
	double *work = malloc((size_t)order * sizeof(*work));
	double *mean = malloc(2 * (size_t)m * sizeof(*mean));
	double *clean = malloc((size_t)m * sizeof(*clean));
	double *c = malloc((size_t)n * sizeof(*c));
	double sse = 0;
	int p, sign, f, i, k;

	assert_true(M && est && work && mean && clean && c);
	for (p = 0; p < order; p++) {
		for (sign = 0; sign < 2; sign++) {
			double pm = sign == 0 ? a : -a;

			for (k = 0; k < n; k++) {
				if (hadamard) {
					c[k] = pm * wt_hadamard_sign(p, k);
				} else {
					c[k] = k == p ? pm : 0.0;
				}
			}
			cblas_dgemv(CblasRowMajor, CblasNoTrans, m, n, 1.0, D,
				    n, c, 1, 0.0, clean, 1);
			for (i = 0; i < m; i++) {
				double acc = 0;

				for (f = 0; f < per_state; f++) {
					acc += s0[i] + clean[i] +
					       sigma * wt_rng_gauss();
				}
				mean[sign * m + i] = acc / per_state;
			}
		}
		for (i = 0; i < m; i++) {
			M[(size_t)i * order + p] =
				(mean[i] - mean[m + i]) / (2.0 * a);
		}
	}
	if (hadamard) {
		assert_int_equal(wt_hadamard_decode(M, m, n, est, work), 0);
	} else {
		memcpy(est, M, (size_t)m * n * sizeof(*est));
	}
	for (i = 0; i < m * n; i++) {
		sse += (est[i] - D[i]) * (est[i] - D[i]);
	}
	free(c);
	free(clean);
	free(mean);
	free(work);
	free(est);
	free(M);
	return sse;
}

/* Error variance of each scheme, in units of sigma^2 / (a^2 F). */
static void noise_case(int n, int frames_total, int trials)
{
	const int m = 40;
	const double a = 0.05, sigma = 0.3;
	int order = wt_hadamard_order(n);
	double *D = malloc((size_t)m * n * sizeof(*D));
	double *s0 = malloc((size_t)m * sizeof(*s0));
	double sse_single = 0, sse_had = 0, unit, v_single, v_had, ratio;
	int e, t;

	assert_non_null(D);
	assert_non_null(s0);
	/* equal total frames: F = 2 n f1 = 2 N f2 with whole f1, f2 */
	assert_int_equal(frames_total % (2 * n), 0);
	assert_int_equal(frames_total % (2 * order), 0);
	for (e = 0; e < m * n; e++) {
		D[e] = wt_rng_gauss();
	}
	for (e = 0; e < m; e++) {
		s0[e] = 3.0 * wt_rng_gauss();
	}
	for (t = 0; t < trials; t++) {
		sse_single += run_once(D, s0, m, n, 0, frames_total / (2 * n),
				       a, sigma);
		sse_had += run_once(D, s0, m, n, 1, frames_total / (2 * order),
				    a, sigma);
	}
	unit = sigma * sigma / (a * a * frames_total);
	v_single = sse_single / ((double)trials * m * n) / unit;
	v_had = sse_had / ((double)trials * m * n) / unit;
	ratio = v_single / v_had;
	print_message("n %d N %d F %d: var x a^2 F / s^2 single %.4f "
		      "hadamard %.4f ratio %.3f (n %d, n^2/N %.2f)\n",
		      n, order, frames_total, v_single, v_had, ratio, n,
		      (double)n * n / order);
	/* one at a time: var = n s^2 / (a^2 F), from the standard error of
	 * a mean (see the derivation in wt_hadamard.h); the estimate has a
	 * relative standard error sqrt(2 / (trials m n)) < 1 % */
	assert_true(fabs(v_single / n - 1.0) < 0.05);
	/* Hadamard: var = s^2 / (a^2 F) (Hotelling 1944; Harwit & Sloane
	 * 1979, ch. 1) */
	assert_true(fabs(v_had - 1.0) < 0.05);
	/* the gain at equal frames is n (Kasper et al. 2004), also when n is
	 * not a power of two: within 10 %, which excludes n^2 / N for n = 12,
	 * N = 16 (9 versus 12) */
	assert_true(fabs(ratio / n - 1.0) < 0.10);
	free(s0);
	free(D);
}

static void noise_gain_is_n_for_power_of_two(void **state)
{
	(void)state;
	wt_rng_seed(wt_test_seed(2004));
	noise_case(16, 192, 300);
}

static void noise_gain_is_n_for_other_counts(void **state)
{
	(void)state;
	wt_rng_seed(wt_test_seed(1979));
	noise_case(12, 192, 300);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(closed_form_matches_sylvester_recursion),
	cmocka_unit_test(rows_are_orthogonal),
	cmocka_unit_test(order_is_next_power_of_two),
	cmocka_unit_test(pattern_is_amplitude_times_row),
	cmocka_unit_test(decode_recovers_random_matrix),
	cmocka_unit_test(decode_rejects_bad_arguments),
	cmocka_unit_test(noise_gain_is_n_for_power_of_two),
	cmocka_unit_test(noise_gain_is_n_for_other_counts),
};

WT_TEST_MAIN(tests)
