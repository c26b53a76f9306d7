/*
 * test_control.c - leaky integrator (lib/wt_control.c).
 *
 * Most cases close the loop on a scalar plant: one actuator, one slope,
 * control matrix R = [1], and the measurement at frame k is
 *
 *     s_k = w_k + c_{k-d}
 *
 * where w is the disturbance and c_j the command computed at frame j,
 * applied d frames later (the delay line is simulated here).  With
 * c_k = (1 - l) c_{k-1} - g s_k the closed loop obeys
 *
 *     c_k - (1 - l) c_{k-1} + g c_{k-d} = -g w_k,
 *
 * whose characteristic polynomial is z^d - (1 - l) z^(d-1) + g and whose
 * error transfer function is S/W = (1 - (1-l) z^-1) / (1 - (1-l) z^-1 +
 * g z^-d) (F. Madec 1999, "Control techniques", in F. Roddier (ed.),
 * Adaptive Optics in Astronomy, Cambridge University Press).
 */
#include "wt_test.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <string.h>

#include <cblas.h>
#include <lapacke.h> /* defines I through complex.h: name nothing I */

#include "wt_control.h"
#include "wt_error.h"

static const float one = 1.0f;

/* A scalar controller with R = [1], gain g, leak l and limits [lo, hi]. */
static wt_control *scalar(float g, float l, float lo, float hi)
{
	wt_control *c = NULL;

	assert_int_equal(wt_control_create(1, 1, &c, NULL), 0);
	assert_null(wt_control_swap_matrix(c, &one));
	wt_control_set_gain(c, g);
	wt_control_set_leak(c, l);
	assert_int_equal(wt_control_set_limits(c, &lo, &hi), 0);
	return c;
}

/*
 * Close the loop for n frames on s_k = w[k] + c_{k-d}, commands before
 * frame 0 being the controller's command at the start.  res[k] = s_k and
 * cmds[k] = c_k (either may be NULL).
 */
static void run_scalar(wt_control *c, int delay, const float *w, int n,
		       float *res, float *cmds)
{
	float *hist = malloc((size_t)n * sizeof(*hist));
	float c_init = wt_control_command(c)[0];
	int k;

	assert_non_null(hist);
	for (k = 0; k < n; k++) {
		float applied = k - delay >= 0 ? hist[k - delay] : c_init;
		float s = w[k] + applied;

		assert_int_equal(wt_control_step(c, &s, &hist[k], NULL), 0);
		if (res) {
			res[k] = s;
		}
		if (cmds) {
			cmds[k] = hist[k];
		}
	}
	free(hist);
}

static float *constant(int n, float v)
{
	float *w = malloc((size_t)n * sizeof(*w));
	int k;

	assert_non_null(w);
	for (k = 0; k < n; k++) {
		w[k] = v;
	}
	return w;
}

/* --- step responses ----------------------------------------------------- */

static void step_delay1_gain_half_halves_each_frame(void **state)
{
	enum { N = 21 };
	wt_control *c = scalar(0.5f, 0.0f, -10.0f, 10.0f);
	float *w = constant(N, 1.0f), res[N];
	int k;

	(void)state;
	run_scalar(c, 1, w, N, res, NULL);
	for (k = 0; k < N; k++) {
		/* d = 1: S/W = (1 - z^-1) / (1 - (1 - g) z^-1), so a unit
		 * step leaves (1 - g)^k = 0.5^k (Madec 1999); every value is
		 * a power of two, exact in float */
		assert_true(res[k] == (float)ldexp(1.0, -k));
	}
	free(w);
	wt_control_destroy(c);
}

static void step_delay2_gain_half_follows_difference_equation(void **state)
{
	/* d = 2, g = 0.5: e_k = e_{k-1} - g e_{k-2} with e_0 = e_1 = 1, from
	 * the difference equation above (Madec 1999), worked by hand */
	static const float expect[] = {1.0f,   1.0f,	0.5f, 0.0f,   -0.25f,
				       -0.25f, -0.125f, 0.0f, 0.0625f};
	enum { N = 60 };
	wt_control *c = scalar(0.5f, 0.0f, -10.0f, 10.0f);
	float *w = constant(N, 1.0f), res[N];
	double e[N];
	int k;

	(void)state;
	run_scalar(c, 2, w, N, res, NULL);
	for (k = 0; k < (int)(sizeof(expect) / sizeof(expect[0])); k++) {
		assert_true(res[k] == expect[k]); /* dyadic: exact */
	}
	e[0] = e[1] = 1.0;
	for (k = 2; k < N; k++) {
		e[k] = e[k - 1] - 0.5 * e[k - 2];
		assert_true(fabs(res[k] - e[k]) < 1e-6);
	}
	free(w);
	wt_control_destroy(c);
}

/* --- stability limits --------------------------------------------------- */

/* Largest root modulus of z^d - (1 - l) z^(d-1) + g, as the eigenvalues of
 * its companion matrix (LAPACK dgeev). */
static double root_modulus(int d, double g, double l)
{
	double comp[16] = {0}, wr[4], wi[4], coef[4] = {0}, rho = 0.0;
	int k;

	assert_true(d >= 1 && d <= 4);
	/* monic: z^d + coef[0] z^(d-1) + ... + coef[d-1] */
	coef[0] = -(1.0 - l);
	coef[d - 1] += g;
	for (k = 0; k < d; k++) {
		comp[k] = -coef[k]; /* first row */
		if (k > 0) {
			comp[k * d + k - 1] = 1.0; /* subdiagonal */
		}
	}
	assert_int_equal(LAPACKE_dgeev(LAPACK_ROW_MAJOR, 'N', 'N', d, comp, d,
				       wr, wi, NULL, 1, NULL, 1),
			 0);
	for (k = 0; k < d; k++) {
		rho = fmax(rho, hypot(wr[k], wi[k]));
	}
	return rho;
}

static double window_max(const float *res, int from, int to)
{
	double m = 0.0;
	int k;

	for (k = from; k < to; k++) {
		m = fmax(m, fabs(res[k]));
	}
	return m;
}

static void check_stability_limit(int d, double limit)
{
	double lo = 0.98 * limit, hi = 1.02 * limit;
	double rho_lo = root_modulus(d, lo, 0.0);
	double rho_hi = root_modulus(d, hi, 0.0);
	/* frames for the envelope to change by 1e10 */
	int n_lo = (int)ceil(10.0 * log(10.0) / -log(rho_lo));
	int n_hi = (int)ceil(10.0 * log(10.0) / log(rho_hi));
	float *w, *res;
	wt_control *c;
	double grow;
	int win;

	/* the published limit is where the largest root reaches |z| = 1
	 * (Madec 1999), checked against LAPACK's eigenvalues */
	assert_true(fabs(root_modulus(d, limit, 0.0) - 1.0) < 1e-9);
	assert_true(rho_lo < 1.0);
	assert_true(rho_hi > 1.0);
	print_message("d=%d: limit %.6f, rho(0.98 g) %.6f, rho(1.02 g) %.6f\n",
		      d, limit, rho_lo, rho_hi);

	/* just below: the loop converges */
	w = constant(n_lo, 1.0f);
	res = malloc((size_t)n_lo * sizeof(*res));
	assert_non_null(res);
	c = scalar((float)lo, 0.0f, -INFINITY, INFINITY);
	run_scalar(c, d, w, n_lo, res, NULL);
	/* 1e-10 expected; float's resolution of s = 1 + c is ~1e-7 */
	assert_true(window_max(res, n_lo - 50, n_lo) < 1e-5);
	wt_control_destroy(c);
	free(res);
	free(w);

	/* just above: it diverges, at the rate of the largest root */
	w = constant(n_hi, 1.0f);
	res = malloc((size_t)n_hi * sizeof(*res));
	assert_non_null(res);
	c = scalar((float)hi, 0.0f, -INFINITY, INFINITY);
	run_scalar(c, d, w, n_hi, res, NULL);
	assert_true(window_max(res, n_hi - 50, n_hi) > 1e6);
	win = n_hi / 4;
	grow = log(window_max(res, n_hi - win, n_hi) /
		   window_max(res, n_hi - 2 * win, n_hi - win)) /
	       win;
	print_message("d=%d: growth per frame %.6f, log rho %.6f\n", d, grow,
		      log(rho_hi));
	assert_true(fabs(grow - log(rho_hi)) < 0.05 * log(rho_hi));
	wt_control_destroy(c);
	free(res);
	free(w);
}

static void stability_limit_delay1_is_gain_2(void **state)
{
	(void)state;
	check_stability_limit(1, 2.0); /* z = 1 - g: |1 - g| < 1 */
}

static void stability_limit_delay2_is_gain_1(void **state)
{
	(void)state;
	check_stability_limit(2, 1.0); /* complex pair with |z|^2 = g */
}

static void stability_limit_delay3_is_0_618(void **state)
{
	(void)state;
	/* d = 3: (sqrt(5) - 1) / 2 (Madec 1999) */
	check_stability_limit(3, (sqrt(5.0) - 1.0) / 2.0);
}

/* --- leak and sinusoids ------------------------------------------------- */

static void leak_leaves_steady_residual(void **state)
{
	/*
	 * Constant w, fixed point of c = (1 - l) c - g (w + c):
	 *   c (l + g) = -g w, so c = -g w / (g + l) and
	 *   s = w + c = w l / (g + l)
	 * (the leaky integrator's static error; common practice).  With
	 * g = 0.4, l = 0.1: s = 0.2 w, c = -0.8 w, whatever the delay.
	 */
	enum { N = 400 };
	const float g = 0.4f, l = 0.1f, dist = 0.75f;
	float *w = constant(N, dist), res[N], cmds[N];
	int d;

	(void)state;
	for (d = 1; d <= 2; d++) {
		wt_control *c = scalar(g, l, -10.0f, 10.0f);

		run_scalar(c, d, w, N, res, cmds);
		assert_true(fabs(res[N - 1] - dist * l / (g + l)) < 1e-6);
		assert_true(fabs(cmds[N - 1] + dist * g / (g + l)) < 1e-6);
		wt_control_destroy(c);
	}
	free(w);
}

static void sinusoid_rejection_matches_transfer_function(void **state)
{
	/* residual amplitude of w_k = sin(omega k) after the transient is
	 * |S/W| at z = e^(i omega) (Madec 1999, error transfer function) */
	enum { N = 4000, PERIOD = 40, TAIL = 40 * PERIOD };
	const double g = 0.3, l = 0.05, omega = 2.0 * M_PI / PERIOD;
	float *w = malloc(N * sizeof(*w)), *res = malloc(N * sizeof(*res));
	int d, k;

	(void)state;
	assert_non_null(w);
	assert_non_null(res);
	for (k = 0; k < N; k++) {
		w[k] = (float)sin(omega * k);
	}
	for (d = 1; d <= 3; d++) {
		wt_control *c = scalar((float)g, (float)l, -10.0f, 10.0f);
		double re_n = 1.0 - (1.0 - l) * cos(omega);
		double im_n = (1.0 - l) * sin(omega);
		double re_d = re_n + g * cos(omega * d);
		double im_d = im_n - g * sin(omega * d);
		double want = hypot(re_n, im_n) / hypot(re_d, im_d);
		double a_s = 0.0, a_c = 0.0, amp;

		run_scalar(c, d, w, N, res, NULL);
		/* amplitude by projection on sin and cos over whole periods */
		for (k = N - TAIL; k < N; k++) {
			a_s += res[k] * sin(omega * k);
			a_c += res[k] * cos(omega * k);
		}
		amp = 2.0 * hypot(a_s, a_c) / TAIL;
		print_message("d=%d: amplitude %.6f, |S/W| %.6f\n", d, amp,
			      want);
		assert_true(fabs(amp - want) < 1e-4);
		wt_control_destroy(c);
	}
	free(w);
	free(res);
}

/* --- safety ------------------------------------------------------------- */

static void clipping_per_actuator_counts(void **state)
{
	static const float eye[9] = {1, 0, 0, 0, 1, 0, 0, 0, 1};
	const float lo[3] = {-0.2f, -1.0f, -0.5f}, hi[3] = {0.3f, 1.0f, 0.5f};
	const float bad_lo[3] = {0.0f, 0.5f, 0.0f}, bad_hi[3] = {1, 0.4f, 1};
	const float nan_lo[3] = {0.0f, NAN, 0.0f};
	float s[3] = {-5.0f, 0.5f, 5.0f}, cmd[3];
	wt_control_stats st;
	wt_control *c = NULL;

	(void)state;
	assert_int_equal(wt_control_create(3, 3, &c, NULL), 0);
	wt_control_swap_matrix(c, eye);
	wt_control_set_gain(c, 1.0f);
	assert_int_equal(wt_control_set_limits(c, lo, hi), 0);
	assert_int_equal(wt_control_set_limits(c, bad_lo, bad_hi), -EINVAL);
	assert_int_equal(wt_control_set_limits(c, nan_lo, hi), -EINVAL);
	assert_int_equal(wt_control_set_limits(c, NULL, hi), -EINVAL);

	/* c = -s = {5, -0.5, -5}: actuators 0 and 2 clip (to the limits of
	 * the first, good call, not the refused ones) */
	assert_int_equal(wt_control_step(c, s, cmd, &st), 0);
	assert_true(cmd[0] == 0.3f && cmd[1] == -0.5f && cmd[2] == -0.5f);
	assert_int_equal(st.n_clipped, 2);
	assert_int_equal(st.n_slewed, 0);
	assert_int_equal(st.rejected, 0);
	assert_memory_equal(wt_control_command(c), cmd, sizeof(cmd));

	/* the other way: actuator 0 to -0.2, actuator 2 to +0.5 */
	s[0] = 5.0f;
	s[1] = 0.0f;
	s[2] = -5.0f;
	assert_int_equal(wt_control_step(c, s, cmd, &st), 0);
	assert_true(cmd[0] == -0.2f && cmd[1] == -0.5f && cmd[2] == 0.5f);
	assert_int_equal(st.n_clipped, 2);

	/* inside the limits nothing is clipped */
	s[0] = s[1] = s[2] = 0.0f;
	assert_int_equal(wt_control_step(c, s, cmd, &st), 0);
	assert_int_equal(st.n_clipped, 0);
	wt_control_destroy(c);
}

static void anti_windup_recovers_in_one_step(void **state)
{
	/*
	 * Saturate for 300 frames (w = 5 against limits [-1, 1], d = 1,
	 * g = 0.5), then remove the disturbance.  With the state clipped
	 * too, the first frame after sees s = -1 and the command leaves the
	 * limit at once: -1 - 0.5 (-1) = -0.5.  A wound-up integrator would
	 * sit near -1 - 0.5 * 4 * 300 = -601 and stay at the limit for
	 * hundreds of frames (integrator windup; common practice).
	 */
	enum { SAT = 300, REC = 20, N = SAT + REC };
	wt_control *c = scalar(0.5f, 0.0f, -1.0f, 1.0f);
	float prev = 0.0f, s, cmd;
	wt_control_stats st;
	int k;

	(void)state;
	for (k = 0; k < N; k++) {
		s = (k < SAT ? 5.0f : 0.0f) + prev;
		assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
		if (k > 0 && k < SAT) {
			assert_true(cmd == -1.0f);
			assert_int_equal(st.n_clipped, 1);
		}
		if (k >= SAT) {
			/* then s = -0.5^(k - SAT) as in the step response */
			assert_true(s == -(float)ldexp(1.0, -(k - SAT)));
			assert_true(cmd == -(float)ldexp(1.0, -(k - SAT + 1)));
			assert_int_equal(st.n_clipped, 0);
		}
		prev = cmd;
	}
	wt_control_destroy(c);
}

static void slew_limit_bounds_change_per_frame(void **state)
{
	const float max_step = 0.1f;
	wt_control *c = scalar(1.0f, 0.0f, -1.0f, 1.0f);
	float s = -10.0f, cmd, prev = 0.0f, tight_lo = -0.5f, tight_hi = 0.5f;
	wt_control_stats st;
	int k;

	(void)state;
	wt_control_set_slew(c, max_step);
	/* target +10 clips to 1; the slew limit walks there in 10 frames */
	for (k = 0; k < 15; k++) {
		assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
		assert_true(fabsf(cmd - prev) <= max_step * (1.0f + 1e-6f));
		if (k < 9) {
			assert_true(fabsf(cmd - prev - max_step) < 1e-6f);
			assert_int_equal(st.n_slewed, 1);
		}
		prev = cmd;
	}
	assert_true(fabsf(cmd - 1.0f) < 1e-6f);
	assert_int_equal(st.n_slewed, 0);
	/* and back down at the same rate */
	s = 10.0f;
	for (k = 0; k < 5; k++) {
		assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
		assert_true(fabsf(prev - cmd - max_step) < 1e-6f);
		assert_int_equal(st.n_slewed, 1);
		prev = cmd;
	}
	/* limits tightened past the command win over the slew limit */
	assert_true(cmd > 0.45f);
	s = -10.0f;
	assert_int_equal(wt_control_set_limits(c, &tight_lo, &tight_hi), 0);
	wt_control_reset(c, (const float[]){0.9f});
	assert_true(wt_control_command(c)[0] == 0.5f); /* reset clips */
	assert_int_equal(
		wt_control_set_limits(c, &(float){-1.0f}, &(float){1.0f}), 0);
	wt_control_reset(c, (const float[]){0.9f});
	assert_int_equal(wt_control_set_limits(c, &tight_lo, &tight_hi), 0);
	assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
	assert_true(cmd == 0.5f);
	assert_int_equal(st.n_clipped, 1);

	/* slew 0: off, the command jumps */
	wt_control_set_slew(c, 0.0f);
	s = 10.0f;
	assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
	assert_true(cmd == -0.5f);
	assert_int_equal(st.n_slewed, 0);
	wt_control_destroy(c);
}

static void nan_and_inf_rejected_state_unchanged(void **state)
{
	float r[6] = {0.5f, -1.0f, 0.25f, 2.0f, 0.0f, -0.75f};
	const float start[2] = {0.1f, -0.2f};
	float s[3] = {0.1f, 0.2f, 0.3f}, cmd[2], before[2];
	const float bad[4] = {NAN, INFINITY, -INFINITY, 3e38f};
	wt_control_stats st;
	wt_control *c = NULL;
	long n_rej = 0;
	int b;

	(void)state;
	assert_int_equal(wt_control_create(2, 3, &c, NULL), 0);
	wt_control_swap_matrix(c, r);
	wt_control_set_gain(c, 10.0f);
	wt_control_set_leak(c, 0.01f);
	wt_control_reset(c, start);
	memcpy(before, wt_control_command(c), sizeof(before));

	for (b = 0; b < 4; b++) {
		/* NaN, +Inf, -Inf in s; 3e38 overflows g R s to Inf */
		s[1] = bad[b];
		memset(cmd, 0, sizeof(cmd));
		assert_int_equal(wt_control_step(c, s, cmd, &st), -ERANGE);
		assert_int_equal(st.rejected, ++n_rej);
		assert_memory_equal(wt_control_command(c), before,
				    sizeof(before));
		assert_memory_equal(cmd, before, sizeof(before));
	}
	/* Inf in the matrix makes u non-finite */
	s[1] = 0.2f;
	r[2] = INFINITY;
	assert_int_equal(wt_control_step(c, s, cmd, &st), -ERANGE);
	assert_int_equal(st.rejected, ++n_rej);
	assert_memory_equal(wt_control_command(c), before, sizeof(before));
	r[2] = 0.25f;
	/* without a matrix a NaN slope is still refused */
	wt_control_swap_matrix(c, NULL);
	s[0] = NAN;
	assert_int_equal(wt_control_step(c, s, NULL, NULL), -ERANGE);
	assert_int_equal(wt_control_step(c, s, cmd, &st), -ERANGE);
	n_rej += 2;
	assert_int_equal(st.rejected, n_rej);
	assert_memory_equal(wt_control_command(c), before, sizeof(before));

	/* a good frame afterwards updates normally and keeps the count */
	s[0] = 0.1f;
	wt_control_swap_matrix(c, r);
	assert_int_equal(wt_control_step(c, s, cmd, &st), 0);
	assert_int_equal(st.rejected, n_rej);
	assert_false(cmd[0] == before[0]);
	assert_int_equal(wt_control_step(c, NULL, cmd, &st), -EINVAL);
	wt_control_destroy(c);
}

static void swap_matrix_returns_previous_and_null_only_leaks(void **state)
{
	const float r1[2] = {1.0f, 0.0f}, r2[2] = {0.0f, 1.0f};
	const float start[2] = {0.5f, -0.5f};
	float s[2] = {100.0f, -100.0f}, cmd[2];
	wt_control *c = NULL;
	int k;

	(void)state;
	assert_int_equal(wt_control_create(2, 1, &c, NULL), 0);
	assert_null(wt_control_swap_matrix(c, r1));
	assert_ptr_equal(wt_control_swap_matrix(c, r2), r1);
	assert_ptr_equal(wt_control_swap_matrix(c, NULL), r2);
	assert_null(wt_control_swap_matrix(c, NULL));

	/* no matrix: c <- (1 - leak) c, whatever s says; with leak 0.25
	 * c_k = 0.5 * 0.75^k (dyadic, exact for these k) */
	wt_control_set_gain(c, 1.0f);
	wt_control_set_leak(c, 0.25f);
	wt_control_reset(c, start);
	for (k = 1; k <= 8; k++) {
		assert_int_equal(wt_control_step(c, s, cmd, NULL), 0);
		assert_true(cmd[0] == (float)(0.5 * pow(0.75, k)));
		assert_true(cmd[1] == -cmd[0]);
	}
	/* with a matrix again the slopes act: r1 reads s[0] for both */
	wt_control_swap_matrix(c, r1);
	wt_control_set_leak(c, 0.0f);
	wt_control_reset(c, NULL);
	s[0] = 0.25f;
	assert_int_equal(wt_control_step(c, s, cmd, NULL), 0);
	assert_true(cmd[0] == -0.25f && cmd[1] == 0.0f);
	wt_control_destroy(c);
}

/* --- matrix-vector product and lifecycle -------------------------------- */

static uint64_t rng_state;

static float rng_float(void)
{
	/* xorshift64*, uniform in [-1, 1) */
	rng_state ^= rng_state >> 12;
	rng_state ^= rng_state << 25;
	rng_state ^= rng_state >> 27;
	return (float)((double)((rng_state * 0x2545f4914f6cdd1dull) >> 11) /
			       4503599627370496.0 -
		       1.0);
}

static void product_matches_blas(void **state)
{
	static const int sizes[][2] = {{1, 1},	  {1, 9},   {3, 5}, {4, 8},
				       {5, 17},	  {7, 9},   {8, 3}, {37, 101},
				       {64, 200}, {97, 288}};
	size_t t;

	(void)state;
	rng_state = wt_test_seed(2001) | 1;
	for (t = 0; t < sizeof(sizes) / sizeof(sizes[0]); t++) {
		int rows = sizes[t][0], cols = sizes[t][1], e, a;
		float *r = malloc((size_t)rows * cols * sizeof(*r));
		float *s = malloc((size_t)cols * sizeof(*s));
		float *cmd = malloc((size_t)rows * sizeof(*cmd));
		double *rd = malloc((size_t)rows * cols * sizeof(*rd));
		double *sd = malloc((size_t)cols * sizeof(*sd));
		double *ref = malloc((size_t)rows * sizeof(*ref));
		float *lo = malloc((size_t)rows * sizeof(*lo));
		float *hi = malloc((size_t)rows * sizeof(*hi));
		wt_control *c = NULL;

		assert_true(r && s && cmd && rd && sd && ref && lo && hi);
		for (e = 0; e < rows * cols; e++) {
			r[e] = rng_float();
			rd[e] = r[e];
		}
		for (e = 0; e < cols; e++) {
			s[e] = rng_float();
			sd[e] = s[e];
		}
		for (a = 0; a < rows; a++) {
			lo[a] = -INFINITY;
			hi[a] = INFINITY;
		}
		cblas_dgemv(CblasRowMajor, CblasNoTrans, rows, cols, 1.0, rd,
			    cols, sd, 1, 0.0, ref, 1);
		assert_int_equal(wt_control_create(rows, cols, &c, NULL), 0);
		assert_int_equal(wt_control_set_limits(c, lo, hi), 0);
		wt_control_swap_matrix(c, r);
		wt_control_set_gain(c, 1.0f);
		assert_int_equal(wt_control_step(c, s, cmd, NULL), 0);
		for (a = 0; a < rows; a++) {
			double bound = 0.0;

			for (e = 0; e < cols; e++) {
				bound += fabs(rd[(size_t)a * cols + e] * sd[e]);
			}
			/* float dot product: |error| <= gamma_n |r|.|s|,
			 * gamma_n ~ n u (Higham, Accuracy and Stability of
			 * Numerical Algorithms, sec. 3.1); OpenBLAS dgemv is
			 * the reference; c = 0 - 1 * u */
			bound *= (cols + 1) * (FLT_EPSILON / 2) * 1.01;
			assert_true(fabs(cmd[a] + ref[a]) <= bound);
		}
		wt_control_destroy(c);
		free(r);
		free(s);
		free(cmd);
		free(rd);
		free(sd);
		free(ref);
		free(lo);
		free(hi);
	}
}

static void create_refuses_bad_sizes_and_sets_defaults(void **state)
{
	static int dummy;
	wt_control *c = (wt_control *)&dummy; /* must be overwritten */
	wt_error err;
	float s = 1e6f, cmd;
	wt_control_stats st;

	(void)state;
	assert_int_equal(wt_control_create(0, 4, &c, &err), -EINVAL);
	assert_null(c);
	assert_true(strlen(err.msg) > 0);
	assert_int_equal(wt_control_create(4, 0, &c, &err), -EINVAL);
	assert_int_equal(wt_control_create(-1, 4, &c, &err), -EINVAL);
	assert_int_equal(wt_control_create(4, 4, NULL, &err), -EINVAL);
	assert_int_equal(wt_control_create(1 << 20, 1 << 20, &c, &err),
			 -EINVAL);
	wt_control_destroy(NULL);

	assert_int_equal(wt_control_create(1, 1, &c, &err), 0);
	/* defaults: no matrix, gain 0, command 0 */
	assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
	assert_true(cmd == 0.0f);
	/* default limits: the normalised stroke [-1, 1] of the protocol */
	wt_control_swap_matrix(c, &one);
	wt_control_set_gain(c, 1.0f);
	assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
	assert_true(cmd == -1.0f);
	assert_int_equal(st.n_clipped, 1);
	s = -1e6f;
	assert_int_equal(wt_control_step(c, &s, &cmd, &st), 0);
	assert_true(cmd == 1.0f);
	/* reset: NULL is zeros, a non-finite value becomes 0 */
	wt_control_reset(c, NULL);
	assert_true(wt_control_command(c)[0] == 0.0f);
	wt_control_reset(c, (const float[]){0.25f});
	assert_true(wt_control_command(c)[0] == 0.25f);
	wt_control_reset(c, (const float[]){NAN});
	assert_true(wt_control_command(c)[0] == 0.0f);
	wt_control_destroy(c);
}

const struct CMUnitTest tests[] = {
	cmocka_unit_test(step_delay1_gain_half_halves_each_frame),
	cmocka_unit_test(step_delay2_gain_half_follows_difference_equation),
	cmocka_unit_test(stability_limit_delay1_is_gain_2),
	cmocka_unit_test(stability_limit_delay2_is_gain_1),
	cmocka_unit_test(stability_limit_delay3_is_0_618),
	cmocka_unit_test(leak_leaves_steady_residual),
	cmocka_unit_test(sinusoid_rejection_matches_transfer_function),
	cmocka_unit_test(clipping_per_actuator_counts),
	cmocka_unit_test(anti_windup_recovers_in_one_step),
	cmocka_unit_test(slew_limit_bounds_change_per_frame),
	cmocka_unit_test(nan_and_inf_rejected_state_unchanged),
	cmocka_unit_test(swap_matrix_returns_previous_and_null_only_leaks),
	cmocka_unit_test(product_matches_blas),
	cmocka_unit_test(create_refuses_bad_sizes_and_sets_defaults),
};

WT_TEST_MAIN(tests)
