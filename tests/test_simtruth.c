/*
 * test_simtruth.c - the simulator's truth record, version 2: the residual's
 * Zernike coefficients fitted over the pupil's samples, and the wire format
 * (version 2 written, versions 1 and 2 read).
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "sim_driver.h"
#include "sim_world.h"
#include "wt_config.h"

/* |a - b| <= tol, both shown when not. */
#define assert_double_equal(a, b, tol) near((a), (b), (tol), __LINE__)

static void near(double a, double b, double tol, int line)
{
	if (!(fabs(a - b) <= tol)) {
		print_error("line %d: %.9g is not within %g of %.9g\n", line, a,
			    tol, b);
		fail();
	}
}

static sim_world *world(const char *obscuration)
{
	wt_config *cfg = NULL;
	sim_world *w = NULL;
	wt_error err;

	assert_int_equal(wt_config_create(&cfg, &err), 0);
	assert_int_equal(wt_config_set(cfg, "sensor.lenslets", "12", &err), 0);
	assert_int_equal(
		wt_config_set(cfg, "sensor.obscuration", obscuration, &err), 0);
	assert_int_equal(
		wt_config_set(cfg, "camera.spot_model", "geometric", &err), 0);
	assert_int_equal(sim_world_create(cfg, &w, &err), 0);
	wt_config_destroy(cfg);
	return w;
}

/*
 * A wavefront written from the polynomials' closed forms (Noll 1976, table
 * I: Z4 = sqrt(3) (2 r^2 - 1), Z7 = sqrt(8) (3 r^3 - 2 r) sin(t), Z11 =
 * sqrt(5) (6 r^4 - 6 r^2 + 1)), plus piston, is fitted back to the amounts
 * it was made of, on a clear and on an annular pupil.
 */
static void check_fit(const char *obscuration)
{
	sim_world *w = world(obscuration);
	const sim_pupil *p = sim_world_pupil(w);
	double *wf = calloc((size_t)p->n * (size_t)p->n, sizeof(double));
	double nm[SIM_WORLD_ZERNIKES];
	const double a4 = 0.120, a7 = -0.045, a11 = 0.030; /* um */
	int a, b, i;

	assert_non_null(wf);
	for (b = 0; b < p->n; b++) {
		for (a = 0; a < p->n; a++) {
			double x = sim_pupil_coord(p, a);
			double y = sim_pupil_coord(p, b);
			double r2 = x * x + y * y, r = sqrt(r2);
			double st = r > 0 ? y / r : 0;

			wf[b * p->n + a] =
				0.7 + a4 * sqrt(3.0) * (2 * r2 - 1) +
				a7 * sqrt(8.0) * (3 * r2 * r - 2 * r) * st +
				a11 * sqrt(5.0) * (6 * r2 * r2 - 6 * r2 + 1);
		}
	}
	sim_world_zernikes(w, wf, nm);
	for (i = 0; i < SIM_WORLD_ZERNIKES; i++) {
		int j = SIM_WORLD_ZERNIKE_FIRST + i;
		double want = j == 4	? 1e3 * a4
			      : j == 7	? 1e3 * a7
			      : j == 11 ? 1e3 * a11
					: 0;

		/* A least-squares fit of a combination of the fitted modes
		 * returns it exactly (up to rounding). */
		assert_double_equal(nm[i], want, 1e-6);
	}
	free(wf);
	sim_world_destroy(w);
}

static void zernike_fit_returns_the_amounts_clear_pupil(void **state)
{
	(void)state;
	check_fit("0");
}

static void zernike_fit_returns_the_amounts_annular_pupil(void **state)
{
	(void)state;
	check_fit("0.3");
}

/* The truth of a static sample holds the sample's coefficients (the
 * mirror is flat): the sample is the configured Zernike sum. */
static void truth_carries_the_sample_coefficients(void **state)
{
	wt_config *cfg = NULL;
	sim_world *w = NULL;
	sim_world_truth t;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&cfg, &err), 0);
	assert_int_equal(wt_config_set(cfg, "sensor.lenslets", "12", &err), 0);
	assert_int_equal(
		wt_config_set(cfg, "sample.zernike", "5:0.2, 11:-0.1", &err),
		0);
	assert_int_equal(sim_world_create(cfg, &w, &err), 0);
	sim_world_truth_now(w, &t);
	assert_double_equal(t.zernike_nm[5 - SIM_WORLD_ZERNIKE_FIRST], 200,
			    1e-6);
	assert_double_equal(t.zernike_nm[11 - SIM_WORLD_ZERNIKE_FIRST], -100,
			    1e-6);
	assert_double_equal(t.zernike_nm[4 - SIM_WORLD_ZERNIKE_FIRST], 0, 1e-6);
	/* Orthonormal modes: the RMS is the root sum of squares of the
	 * coefficients (Noll 1976), up to the grid's discreteness. */
	assert_double_equal(t.rms_nm, sqrt(200.0 * 200 + 100 * 100), 3);
	sim_world_destroy(w);
	wt_config_destroy(cfg);
}

static void truth_v2_round_trips_and_v1_still_reads(void **state)
{
	uint8_t msg[SIM_TRUTH_BYTES];
	sim_truth t = {.frame = 42, .command = 41, .rms_nm = 12.5}, u;
	int i;

	(void)state;
	for (i = 0; i < SIM_TRUTH_ZERNIKES; i++) {
		t.zernike_nm[i] = 0.25 * i - 1;
	}
	sim_truth_encode(&t, msg);
	assert_int_equal(msg[5] | msg[6] << 8, 2);
	assert_int_equal(sim_truth_decode(msg, sizeof(msg), &u), 0);
	assert_int_equal(u.frame, 42);
	assert_double_equal(u.rms_nm, 12.5, 0);
	for (i = 0; i < SIM_TRUTH_ZERNIKES; i++) {
		assert_double_equal(u.zernike_nm[i], 0.25 * i - 1, 0);
	}
	/* Version 1: the first 95 bytes; the coefficients are NaN. */
	msg[5] = 1;
	assert_int_equal(sim_truth_decode(msg, SIM_TRUTH_BYTES_V1, &u), 0);
	assert_int_equal(u.frame, 42);
	assert_true(isnan(u.zernike_nm[0]));
	/* A length that is not its version's, an unknown version, a wrong
	 * topic: refused. */
	assert_int_equal(sim_truth_decode(msg, SIM_TRUTH_BYTES, &u), -EINVAL);
	msg[5] = 2;
	assert_int_equal(sim_truth_decode(msg, SIM_TRUTH_BYTES_V1, &u),
			 -EINVAL);
	msg[5] = 3;
	assert_int_equal(sim_truth_decode(msg, SIM_TRUTH_BYTES, &u), -EINVAL);
	msg[5] = 2;
	msg[0] = 'T';
	assert_int_equal(sim_truth_decode(msg, SIM_TRUTH_BYTES, &u), -EINVAL);
	assert_int_equal(sim_truth_decode(msg, 10, &u), -EINVAL);
}

/* A world of 12 lenslets, geometric noiseless spots, no sample, and the
 * given sensor-arm aberration. */
static sim_world *ncp_world(const char *ncp)
{
	static const char *const kv[][2] = {
		{"sensor.lenslets", "12"},
		{"camera.spot_model", "geometric"},
		{"camera.photon_noise", "0"},
		{"camera.read_noise_e", "0"},
	};
	wt_config *cfg = NULL;
	sim_world *w = NULL;
	wt_error err;

	assert_int_equal(wt_config_create(&cfg, &err), 0);
	for (size_t k = 0; k < sizeof(kv) / sizeof(kv[0]); k++) {
		assert_int_equal(wt_config_set(cfg, kv[k][0], kv[k][1], &err),
				 0);
	}
	assert_int_equal(wt_config_set(cfg, "sim.ncp_zernike", ncp, &err), 0);
	assert_int_equal(sim_world_create(cfg, &w, &err), 0);
	wt_config_destroy(cfg);
	return w;
}

/* The sensor arm's aberration reaches the camera's frame but not the
 * truth (the science path). */
static void ncp_is_seen_by_the_camera_not_the_truth(void **state)
{
	sim_world *a = ncp_world(""), *b = ncp_world("4:0.1");
	size_t npix = (size_t)sim_world_width(a) * (size_t)sim_world_width(a);
	uint16_t *fa = calloc(npix, sizeof(uint16_t));
	uint16_t *fb = calloc(npix, sizeof(uint16_t));
	sim_world_truth ta, tb;
	size_t differ = 0;

	(void)state;
	assert_non_null(fa);
	assert_non_null(fb);
	assert_int_equal(sim_world_expose(a, fa, &ta), 0);
	assert_int_equal(sim_world_expose(b, fb, &tb), 0);
	for (size_t k = 0; k < npix; k++) {
		differ += fa[k] != fb[k];
	}
	assert_true(differ > 0);
	assert_double_equal(ta.rms_nm, 0, 1e-9);
	assert_double_equal(tb.rms_nm, 0, 1e-9);
	assert_double_equal(tb.zernike_nm[4 - SIM_WORLD_ZERNIKE_FIRST], 0,
			    1e-9);
	free(fa);
	free(fb);
	sim_world_destroy(a);
	sim_world_destroy(b);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(zernike_fit_returns_the_amounts_clear_pupil),
	cmocka_unit_test(zernike_fit_returns_the_amounts_annular_pupil),
	cmocka_unit_test(truth_carries_the_sample_coefficients),
	cmocka_unit_test(truth_v2_round_trips_and_v1_still_reads),
	cmocka_unit_test(ncp_is_seen_by_the_camera_not_the_truth),
};

WT_TEST_MAIN(tests)
