/*
 * test_offset.c - Zernike slopes in sensor pixels (lib/wt_offset.h),
 * checked against closed forms worked by hand.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "wt_geometry.h"
#include "wt_offset.h"

/* The demo sensor: 16 lenslets of 16 pixels of 6.5 um, f = 2 mm, so the
 * pupil radius is R = 16 * 16 * 6.5 / 2 = 832 um. */
static const wt_sensor_optics demo = {
	.pixels_per_lenslet = 16, .pixel_um = 6.5, .focal_mm = 2.0};
#define RADIUS_UM 832.0

static wt_grid *grid(void)
{
	wt_grid *g = NULL;
	wt_error err;

	assert_int_equal(wt_grid_lenslets(16, 0, 0.5, &g, &err), 0);
	return g;
}

/*
 * Tip: Z2 = 2 r cos(t) = 2 x (Noll 1976, table I), so a nm RMS of it is
 * W = 2 a X / R and every lenslet's spot moves by f * 2 a / R along x
 * (spot shift = f times the mean gradient, from memory), divided by the
 * pixel pitch: 2000 um * 2 * 0.1 um / 832 um / 6.5 um = 0.07396 pixel
 * for a = 100 nm.  Nothing along y.
 */
static void tip_moves_every_spot_by_f_times_the_tilt(void **state)
{
	wt_grid *g = grid();
	int n = g->n_valid, k;
	double *s = calloc(2 * (size_t)n, sizeof(double));
	wt_error err;
	const double want = 2000.0 * 2 * 0.1 / RADIUS_UM / 6.5;

	(void)state;
	assert_non_null(s);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 2, 100, s, &err), 0);
	for (k = 0; k < n; k++) {
		assert_true(fabs(s[k] - want) < 1e-12);
		assert_true(fabs(s[n + k]) < 1e-12);
	}
	assert_true(fabs(want - 0.07396) < 1e-4); /* worked by hand */
	free(s);
	wt_grid_destroy(g);
}

/*
 * Defocus: Z4 = sqrt(3) (2 r^2 - 1) (Noll 1976), dZ/dx = 4 sqrt(3) x,
 * linear, so its mean over a square is its value at the centre: the shift
 * of lenslet k is f a 4 sqrt(3) x_k / (R p) along x and the same with y_k
 * along y.  Offsets add: twice 50 nm is 100 nm.
 */
static void defocus_shifts_grow_with_the_radius_and_add(void **state)
{
	wt_grid *g = grid();
	int n = g->n_valid, k;
	double *s = calloc(2 * (size_t)n, sizeof(double));
	wt_error err;
	const double f_um = 2000, a_um = 0.1;

	(void)state;
	assert_non_null(s);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 4, 50, s, &err), 0);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 4, 50, s, &err), 0);
	for (k = 0; k < n; k++) {
		double wx = f_um * a_um * 4 * sqrt(3.0) * g->x[k] /
			    (RADIUS_UM * 6.5);
		double wy = f_um * a_um * 4 * sqrt(3.0) * g->y[k] /
			    (RADIUS_UM * 6.5);

		assert_true(fabs(s[k] - wx) < 1e-12);
		assert_true(fabs(s[n + k] - wy) < 1e-12);
	}
	free(s);
	wt_grid_destroy(g);
}

static void bad_arguments_are_refused_and_leave_out_alone(void **state)
{
	wt_grid *g = grid();
	double s[2 * 256] = {0};
	wt_sensor_optics bad = demo;
	wt_error err;

	(void)state;
	assert_int_equal(wt_offset_add_zernike(g, &demo, 1, 10, s, &err),
			 -EINVAL);
	assert_non_null(strstr(err.msg, "piston"));
	assert_int_equal(wt_offset_add_zernike(g, &demo, 0, 10, s, &err),
			 -EINVAL);
	assert_int_equal(wt_offset_add_zernike(g, &demo, WT_OFFSET_NOLL_MAX + 1,
					       10, s, &err),
			 -EINVAL);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 4, NAN, s, &err),
			 -EINVAL);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 4, INFINITY, s, &err),
			 -EINVAL);
	bad.focal_mm = 0;
	assert_int_equal(wt_offset_add_zernike(g, &bad, 4, 10, s, &err),
			 -EINVAL);
	bad = demo;
	bad.pixel_um = NAN;
	assert_int_equal(wt_offset_add_zernike(g, &bad, 4, 10, s, &err),
			 -EINVAL);
	assert_int_equal(wt_offset_add_zernike(NULL, &demo, 4, 10, s, &err),
			 -EINVAL);
	assert_int_equal(wt_offset_add_zernike(g, &demo, 4, 10, NULL, &err),
			 -EINVAL);
	for (size_t k = 0; k < sizeof(s) / sizeof(s[0]); k++) {
		assert_true(s[k] == 0);
	}
	wt_grid_destroy(g);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(tip_moves_every_spot_by_f_times_the_tilt),
	cmocka_unit_test(defocus_shifts_grow_with_the_radius_and_add),
	cmocka_unit_test(bad_arguments_are_refused_and_leave_out_alone),
};

WT_TEST_MAIN(tests)
