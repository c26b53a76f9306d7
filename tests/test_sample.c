/*
 * test_sample.c - the simulated sample: static Zernike aberration, random
 * walk drift, and the turbulence screen in frozen flow.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "sim_pupil.h"
#include "sim_sample.h"

/* cmocka 1.1.5 has no floating-point assertion. */
#define assert_near(a, b, tol)                                                 \
	do {                                                                   \
		double a_ = (a), b_ = (b);                                     \
		if (!(fabs(a_ - b_) <= (tol))) {                               \
			fail_msg("%s = %.12g, expected %.12g +- %g", #a, a_,   \
				 b_, (double)(tol));                           \
		}                                                              \
	} while (0)

/* RMS about the mean over the pupil's points. */
static double pupil_rms(const sim_pupil *p, const double *w)
{
	double s = 0, s2 = 0;
	int q;

	for (q = 0; q < p->n_inside; q++) {
		s += w[p->inside[q]];
	}
	s /= p->n_inside;
	for (q = 0; q < p->n_inside; q++) {
		double d = w[p->inside[q]] - s;

		s2 += d * d;
	}
	return sqrt(s2 / p->n_inside);
}

static void static_aberration_has_root_sum_square_rms(void **state)
{
	static const int noll[] = {4, 5, 6, 11};
	static const double coef[] = {0.1, -0.25, 0.18, 0.38};
	sim_sample_params p;
	sim_pupil *pupil;
	sim_sample *s;
	wt_error err;
	double *w, expect = 0;
	int k;

	(void)state;
	assert_int_equal(sim_pupil_create(16, 6, 0.0, &pupil, &err), 0);
	sim_sample_params_default(&p);
	p.n_modes = 4;
	p.noll = noll;
	p.coef_um = coef;
	assert_int_equal(sim_sample_create(&p, pupil, &s, &err), 0);
	w = calloc((size_t)pupil->n * pupil->n, sizeof(*w));
	sim_sample_wavefront(s, w);
	for (k = 0; k < 4; k++) {
		expect += coef[k] * coef[k];
	}
	/* RMS-1 Zernike modes are orthonormal over the disk (Noll 1976), so
	 * the RMS is the root sum of squares; the 96-sample disk keeps it to
	 * well within 1% */
	assert_near(pupil_rms(pupil, w), sqrt(expect), 0.01 * sqrt(expect));
	/* time alone changes nothing without drift or turbulence */
	sim_sample_advance(s, 1.0);
	{
		double *w2 = calloc((size_t)pupil->n * pupil->n, sizeof(*w2));

		sim_sample_wavefront(s, w2);
		assert_memory_equal(w, w2,
				    sizeof(double) * pupil->n * pupil->n);
		free(w2);
	}
	free(w);
	sim_sample_destroy(s);
	sim_pupil_destroy(pupil);
}

static void drift_steps_have_configured_rate(void **state)
{
	const double rate_nm = 40.0, dt = 0.01;
	const int steps = 1000, max_noll = 50;
	sim_sample_params p;
	sim_pupil *pupil;
	sim_sample *s;
	wt_error err;
	double a0[64], a1[64], sum2 = 0, expect;
	int noll[64], k, n, m, count = 0;

	(void)state;
	assert_int_equal(sim_pupil_create(4, 2, 0.0, &pupil, &err), 0);
	sim_sample_params_default(&p);
	p.drift_nm_per_sqrt_s = rate_nm;
	p.drift_max_noll = max_noll;
	p.seed = wt_test_seed(5);
	assert_int_equal(sim_sample_create(&p, pupil, &s, &err), 0);
	n = sim_sample_coefficients(s, noll, a0, 64);
	assert_int_equal(n, max_noll - 1); /* Noll 2 .. 50 */
	for (k = 0; k < steps; k++) {
		sim_sample_advance(s, dt);
		assert_int_equal(sim_sample_coefficients(s, NULL, a1, 64), n);
		for (m = 0; m < n; m++) {
			double d = (a1[m] - a0[m]) * 1e3; /* nm */

			sum2 += d * d;
			a0[m] = a1[m];
			count++;
		}
	}
	assert_near(sim_sample_time(s), steps * dt, 1e-9);
	/* a Wiener process: independent steps of variance rate^2 dt
	 * (definition of the rate); 49000 steps estimate it to 0.64%, so
	 * 3% is about 5 standard errors */
	expect = rate_nm * rate_nm * dt;
	assert_near(sum2 / count, expect, 0.03 * expect);
	sim_sample_destroy(s);
	sim_pupil_destroy(pupil);
}

/*
 * Frozen flow (Taylor's hypothesis): with a wind of exactly one pupil
 * sample per time step the screen seen in the pupil moves by one sample,
 * W_{t + dt}(x + step, y) = W_t(x, y), in the wind's direction.
 */
static void check_frozen_flow(double angle_deg, int da, int db)
{
	const double dt = 0.005;
	sim_sample_params p;
	sim_pupil *pupil;
	sim_sample *s;
	wt_error err;
	double *w0, *w1, moved = 0;
	int a, b, n, checked = 0;

	assert_int_equal(sim_pupil_create(8, 4, 0.0, &pupil, &err), 0);
	n = pupil->n;
	sim_sample_params_default(&p);
	p.turbulence = true;
	p.d_over_r0 = 5.0;
	p.outer_scale_pupils = 20.0;
	/* one sample (step / 2 pupil diameters) per dt */
	p.wind_pupils_per_s = 0.5 * pupil->step / dt;
	p.wind_angle_deg = angle_deg;
	p.seed = 77;
	assert_int_equal(sim_sample_create(&p, pupil, &s, &err), 0);
	w0 = calloc((size_t)n * n, sizeof(double));
	w1 = calloc((size_t)n * n, sizeof(double));
	sim_sample_advance(s, dt); /* start off the origin */
	sim_sample_wavefront(s, w0);
	sim_sample_advance(s, dt);
	sim_sample_wavefront(s, w1);
	for (b = 1; b < n - 1; b++) {
		for (a = 1; a < n - 1; a++) {
			double d = w1[(b + db) * n + a + da] - w0[b * n + a];

			/* exact up to the interpolation weights' rounding */
			assert_near(d, 0.0,
				    1e-6 * (fabs(w0[b * n + a]) + 1e-3));
			moved += fabs(w1[b * n + a] - w0[b * n + a]);
			checked++;
		}
	}
	/* and the screen did move: it is no constant */
	assert_true(moved / checked > 1e-4);
	assert_true(pupil_rms(pupil, w0) > 0.01);
	free(w0);
	free(w1);
	sim_sample_destroy(s);
	sim_pupil_destroy(pupil);
}

static void turbulence_moves_with_the_wind(void **state)
{
	(void)state;
	check_frozen_flow(0.0, 1, 0);
	check_frozen_flow(90.0, 0, 1);
	check_frozen_flow(180.0, -1, 0);
}

/*
 * The screen's strength as the sample delivers it (units and scales wired
 * right): over a circular pupil the Kolmogorov phase variance left after
 * removing piston, tip and tilt is Delta_3 = 0.134 (D / r0)^(5/3) rad^2
 * (Noll 1976, Table IV), here in micrometres via wavelength / (2 pi).
 * Piston and tilt themselves are not checked: a finite screen holds less
 * of the largest scales, which is the screen's business (sim_screen.h).
 */
static void turbulence_strength_follows_d_over_r0(void **state)
{
	const int screens = 150;
	const double d_over_r0 = 4.0, lambda_um = 0.92;
	sim_pupil *pupil;
	wt_error err;
	double *w, sum = 0, sum2 = 0, mean, se, expect;
	uint64_t seed = wt_test_seed(1000);
	int k, q;

	(void)state;
	assert_int_equal(sim_pupil_create(8, 4, 0.0, &pupil, &err), 0);
	w = calloc((size_t)pupil->n * pupil->n, sizeof(*w));
	for (k = 0; k < screens; k++) {
		double m = 0, sx = 0, sy = 0, xx = 0, yy = 0, v = 0;
		sim_sample_params p;
		sim_sample *s;

		sim_sample_params_default(&p);
		p.turbulence = true;
		p.d_over_r0 = d_over_r0;
		p.outer_scale_pupils = 0.0; /* Kolmogorov */
		p.wavelength_nm = lambda_um * 1e3;
		p.seed = seed + (uint64_t)k;
		assert_int_equal(sim_sample_create(&p, pupil, &s, &err), 0);
		sim_sample_wavefront(s, w);
		sim_sample_destroy(s);
		/* remove the mean and the least-squares plane (x and y are
		 * orthogonal on the symmetric sampled disk) */
		for (q = 0; q < pupil->n_inside; q++) {
			m += w[pupil->inside[q]];
		}
		m /= pupil->n_inside;
		for (q = 0; q < pupil->n_inside; q++) {
			int i = pupil->inside[q];
			double x = sim_pupil_coord(pupil, i % pupil->n);
			double y = sim_pupil_coord(pupil, i / pupil->n);

			sx += (w[i] - m) * x;
			sy += (w[i] - m) * y;
			xx += x * x;
			yy += y * y;
		}
		for (q = 0; q < pupil->n_inside; q++) {
			int i = pupil->inside[q];
			double x = sim_pupil_coord(pupil, i % pupil->n);
			double y = sim_pupil_coord(pupil, i / pupil->n);
			double d = w[i] - m - sx / xx * x - sy / yy * y;

			v += d * d;
		}
		v /= pupil->n_inside;
		sum += v;
		sum2 += v * v;
	}
	mean = sum / screens;
	se = sqrt((sum2 / screens - mean * mean) / (screens - 1));
	expect = 0.134 * pow(d_over_r0, 5.0 / 3.0) *
		 pow(lambda_um / (2.0 * M_PI), 2.0);
	/* 150 screens give a standard error near 4%; 15% is 3.5 of them */
	assert_true(se < 0.06 * expect);
	assert_near(mean, expect, 0.15 * expect);
	free(w);
	sim_pupil_destroy(pupil);
}

static void bad_parameters_are_refused(void **state)
{
	static const int noll[] = {4, 4};
	static const double coef[] = {0.1, 0.2};
	sim_sample_params p;
	sim_pupil *pupil;
	sim_sample *s = NULL;
	wt_error err;

	(void)state;
	assert_int_equal(sim_pupil_create(4, 2, 0.0, &pupil, &err), 0);
	sim_sample_params_default(&p);
	p.n_modes = 2;
	p.noll = noll;
	p.coef_um = coef;
	assert_int_equal(sim_sample_create(&p, pupil, &s, &err), -EINVAL);
	sim_sample_params_default(&p);
	p.drift_nm_per_sqrt_s = -1.0;
	assert_int_equal(sim_sample_create(&p, pupil, &s, &err), -EINVAL);
	assert_null(s);
	sim_pupil_destroy(pupil);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(static_aberration_has_root_sum_square_rms),
	cmocka_unit_test(drift_steps_have_configured_rate),
	cmocka_unit_test(turbulence_moves_with_the_wind),
	cmocka_unit_test(turbulence_strength_follows_d_over_r0),
	cmocka_unit_test(bad_parameters_are_refused),
};

WT_TEST_MAIN(tests)
