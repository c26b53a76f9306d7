/* test_geometry.c - lenslet and actuator grids (lib/wt_geometry). */
#include "wt_test.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <string.h>

#include "wt_geometry.h"

/*
 * Fill of the cell [x0, x0 + pitch] x [y0, y0 + pitch] inside the annulus
 * obsc <= r <= 1, by midpoint sampling on m x m points: an independent
 * method (the library integrates in closed form).  The error is of order of
 * the cell's boundary crossing over m, well under 1e-3 for m = 256.
 */
static double sampled_fill(double x0, double y0, double pitch, double obsc,
			   int m)
{
	long inside = 0;
	int a, b;

	for (b = 0; b < m; b++) {
		double y = y0 + (b + 0.5) * pitch / m;

		for (a = 0; a < m; a++) {
			double x = x0 + (a + 0.5) * pitch / m;
			double r2 = x * x + y * y;

			if (r2 <= 1.0 && r2 >= obsc * obsc) {
				inside++;
			}
		}
	}
	return (double)inside / ((double)m * m);
}

/* Fill of lenslet cell (i, j) of an n x n grid, sampled independently. */
static double sampled_cell_fill(int n, int i, int j, double obsc, int m)
{
	double pitch = 2.0 / n;

	return sampled_fill(-1.0 + i * pitch, -1.0 + j * pitch, pitch, obsc, m);
}

static void check_consistent(const wt_grid *g, int lenslets)
{
	int n = g->n, k, p, count = 0, last = -1;

	assert_true(g->n_valid >= 1 && g->n_valid <= n * n);
	for (p = 0; p < n * n; p++) {
		if (g->index[p] >= 0) {
			count++;
			/* valid points are listed in row-major order */
			assert_true(g->index[p] > last);
			last = g->index[p];
		} else {
			assert_int_equal(g->index[p], -1);
		}
	}
	assert_int_equal(count, g->n_valid);
	for (k = 0; k < g->n_valid; k++) {
		int i = g->col[k], j = g->row[k];
		double xe, ye;

		assert_true(i >= 0 && i < n && j >= 0 && j < n);
		assert_int_equal(g->index[j * n + i], k);
		if (lenslets) {
			xe = (i + 0.5 - n / 2.0) * g->pitch;
			ye = (j + 0.5 - n / 2.0) * g->pitch;
			assert_true(g->fill[k] > 0.0 && g->fill[k] <= 1.0);
		} else {
			xe = (i - (n - 1) / 2.0) * g->pitch;
			ye = (j - (n - 1) / 2.0) * g->pitch;
			assert_true(g->fill[k] == 1.0);
		}
		assert_true(fabs(g->x[k] - xe) < 1e-12);
		assert_true(fabs(g->y[k] - ye) < 1e-12);
	}
}

static int count_lenslets(int n, double obsc, double min_fill)
{
	wt_grid *g = NULL;
	wt_error err;
	int c;

	assert_int_equal(wt_grid_lenslets(n, obsc, min_fill, &g, &err), 0);
	check_consistent(g, 1);
	c = g->n_valid;
	wt_grid_destroy(g);
	return c;
}

static void square_layout_keeps_every_point(void **state)
{
	int n;

	(void)state;
	for (n = 1; n <= 20; n++) {
		wt_grid *g = NULL;

		assert_int_equal(wt_grid_actuators(n, WT_LAYOUT_SQUARE, n, 0.0,
						   &g, NULL),
				 0);
		assert_int_equal(g->n_valid, n * n); /* worked by hand: n^2 */
		check_consistent(g, 0);
		wt_grid_destroy(g);
	}
}

static void corners_layout_12_keeps_140(void **state)
{
	wt_grid *g = NULL;

	(void)state;
	assert_int_equal(
		wt_grid_actuators(12, WT_LAYOUT_CORNERS, 11, 0.5, &g, NULL), 0);
	/* worked by hand: 12 * 12 - 4 corners = 144 - 4 = 140 */
	assert_int_equal(g->n_valid, 140);
	assert_int_equal(g->index[0], -1);
	assert_int_equal(g->index[11], -1);
	assert_int_equal(g->index[11 * 12], -1);
	assert_int_equal(g->index[11 * 12 + 11], -1);
	/* worked by hand: (1, 0) is the first point kept, (0, 1) is the
	 * 11th (10 kept in row 0, then it) */
	assert_int_equal(g->index[1], 0);
	assert_int_equal(g->index[12], 10);
	check_consistent(g, 0);
	wt_grid_destroy(g);
}

static void circle_layout_11_keeps_97(void **state)
{
	wt_grid *g = NULL;

	(void)state;
	assert_int_equal(
		wt_grid_actuators(11, WT_LAYOUT_CIRCLE, 10, 0.5, &g, NULL), 0);
	/*
	 * worked by hand: radius 10/2 + 0.5 = 5.5 pitches about the centre
	 * actuator; offsets (u, v) in -5..5 with u^2 + v^2 <= 30.25.
	 *   u = 0:  v^2 <= 30.25 -> |v| <= 5 -> 11
	 *   |u| = 1: v^2 <= 29.25 -> |v| <= 5 -> 11 (x2)
	 *   |u| = 2: v^2 <= 26.25 -> |v| <= 5 -> 11 (x2)
	 *   |u| = 3: v^2 <= 21.25 -> |v| <= 4 ->  9 (x2)
	 *   |u| = 4: v^2 <= 14.25 -> |v| <= 3 ->  7 (x2)
	 *   |u| = 5: v^2 <=  5.25 -> |v| <= 2 ->  5 (x2)
	 *   total 11 + 2 * (11 + 11 + 9 + 7 + 5) = 11 + 86 = 97
	 */
	assert_int_equal(g->n_valid, 97);
	check_consistent(g, 0);
	/* worked by hand: the centre actuator sits at the pupil centre */
	assert_true(g->index[5 * 11 + 5] >= 0);
	assert_true(fabs(g->x[g->index[5 * 11 + 5]]) < 1e-15);
	wt_grid_destroy(g);
}

static void circle_layout_keeps_points_exactly_on_the_radius(void **state)
{
	wt_grid *g = NULL;

	(void)state;
	/* radius 5 pitches exactly: (5, 0), (3, 4), (4, 3) lie on it */
	assert_int_equal(
		wt_grid_actuators(11, WT_LAYOUT_CIRCLE, 10, 0.0, &g, NULL), 0);
	/*
	 * worked by hand: u^2 + v^2 <= 25:
	 *   u = 0: 11; |u| = 1: 9; |u| = 2: 9; |u| = 3: 9; |u| = 4: 7;
	 *   |u| = 5: 1; total 11 + 2 * 35 = 81, the Gauss circle count
	 *   N(5) = 81 (OEIS A000328).
	 */
	assert_int_equal(g->n_valid, 81);
	assert_true(g->index[5 * 11 + 10] >= 0);     /* (5, 0) */
	assert_true(g->index[9 * 11 + 8] >= 0);	     /* (3, 4) */
	assert_true(g->index[8 * 11 + 9] >= 0);	     /* (4, 3) */
	assert_int_equal(g->index[10 * 11 + 6], -1); /* (1, 5): 26 > 25 */
	wt_grid_destroy(g);
}

static void actuator_pitch_and_positions_follow_pupil_pitches(void **state)
{
	wt_grid *g = NULL;

	(void)state;
	assert_int_equal(
		wt_grid_actuators(12, WT_LAYOUT_SQUARE, 11, 0.0, &g, NULL), 0);
	/* worked by hand: pitch 2 / 11; point 0 at -(11/2) * pitch = -1 */
	assert_true(fabs(g->pitch - 2.0 / 11.0) < 1e-15);
	assert_true(fabs(g->x[0] + 1.0) < 1e-12);
	assert_true(fabs(g->y[0] + 1.0) < 1e-12);
	/* last point at +1, x grows with the column, y with the row */
	assert_true(fabs(g->x[143] - 1.0) < 1e-12);
	assert_true(fabs(g->y[143] - 1.0) < 1e-12);
	assert_true(g->x[1] > g->x[0] && g->y[1] == g->y[0]);
	assert_true(g->y[12] > g->y[0] && g->x[12] == g->x[0]);
	wt_grid_destroy(g);
}

static void lenslet_pitch_and_centres_inscribe_the_pupil(void **state)
{
	wt_grid *g = NULL;

	(void)state;
	assert_int_equal(wt_grid_lenslets(10, 0.0, 0.5, &g, NULL), 0);
	/* worked by hand: pitch 2 / 10 = 0.2; cell (4, 4) spans
	 * [-0.2, 0] and has its centre at -0.1 */
	assert_true(fabs(g->pitch - 0.2) < 1e-15);
	assert_true(g->index[4 * 10 + 4] >= 0);
	assert_true(fabs(g->x[g->index[4 * 10 + 4]] + 0.1) < 1e-12);
	assert_true(fabs(g->y[g->index[4 * 10 + 4]] + 0.1) < 1e-12);
	/* corner cell [-1, -0.8]^2 lies outside the unit circle */
	assert_int_equal(g->index[0], -1);
	check_consistent(g, 1);
	wt_grid_destroy(g);
}

static void lenslets_2x2_keep_all_for_min_fill_up_to_quarter_pi(void **state)
{
	const double min_fills[] = {1e-6, 0.25, 0.5, 0.78,
				    M_PI / 4.0 * (1.0 - 1e-12)};
	size_t t;
	int k;

	(void)state;
	for (t = 0; t < sizeof(min_fills) / sizeof(min_fills[0]); t++) {
		wt_grid *g = NULL;

		assert_int_equal(
			wt_grid_lenslets(2, 0.0, min_fills[t], &g, NULL), 0);
		/* worked by hand: each unit cell holds a quarter of the
		 * unit disk, area pi/4, so fill = pi/4 */
		assert_int_equal(g->n_valid, 4);
		for (k = 0; k < 4; k++) {
			assert_true(fabs(g->fill[k] - M_PI / 4.0) < 1e-14);
		}
		wt_grid_destroy(g);
	}
}

static void lenslets_4x4_counts_match_hand_and_sampled_areas(void **state)
{
	/*
	 * worked by hand, pitch 0.5, F(x) = (x sqrt(1 - x^2) + asin x) / 2 the
	 * antiderivative of sqrt(1 - x^2):
	 *   4 inner cells [0, .5]^2: corner at r = 0.707 < 1, fill 1;
	 *   8 edge cells [.5, 1] x [0, .5]: area (sqrt3 - 1)/4 + F(1) -
	 *     F(sqrt3/2) = sqrt3/8 - 1/4 + pi/12, fill sqrt3/2 - 1 + pi/3
	 *     = 0.9132;
	 *   4 corner cells [.5, 1]^2: area F(sqrt3/2) - F(1/2) - (sqrt3 -
	 *     1)/4 = pi/12 - (sqrt3 - 1)/4, fill pi/3 - sqrt3 + 1 = 0.3151;
	 *   check: 4 + 8 * 0.9132 + 4 * 0.3151 = 12.566 = pi / 0.25.
	 */
	const double thr[] = {0.1, 0.3, 0.33, 0.5, 0.9, 0.92, 1.0};
	const int by_hand[] = {16, 16, 12, 12, 12, 4, 4};
	size_t t;

	(void)state;
	for (t = 0; t < sizeof(thr) / sizeof(thr[0]); t++) {
		int i, j, sampled = 0;

		/* independent count: cells whose sampled fill >= threshold */
		for (j = 0; j < 4; j++) {
			for (i = 0; i < 4; i++) {
				if (sampled_cell_fill(4, i, j, 0.0, 256) >=
				    thr[t]) {
					sampled++;
				}
			}
		}
		assert_int_equal(sampled, by_hand[t]);
		assert_int_equal(count_lenslets(4, 0.0, thr[t]), by_hand[t]);
	}
}

static void lenslet_fill_matches_sampled_area_clear_and_annular(void **state)
{
	const int ns[] = {5, 8, 11, 16};
	const double obscs[] = {0.0, 0.3, 0.55};
	size_t a, b;

	(void)state;
	for (a = 0; a < sizeof(ns) / sizeof(ns[0]); a++) {
		for (b = 0; b < sizeof(obscs) / sizeof(obscs[0]); b++) {
			int n = ns[a], i, j;
			wt_grid *g = NULL;

			assert_int_equal(
				wt_grid_lenslets(n, obscs[b], 1e-9, &g, NULL),
				0);
			check_consistent(g, 1);
			for (j = 0; j < n; j++) {
				for (i = 0; i < n; i++) {
					double fs = sampled_cell_fill(
						n, i, j, obscs[b], 200);
					int k = g->index[j * n + i];
					double fc = k >= 0 ? g->fill[k] : 0.0;

					/* independent midpoint sampling */
					assert_true(fabs(fc - fs) < 2e-3);
				}
			}
			wt_grid_destroy(g);
		}
	}
}

static void lenslet_fills_sum_to_the_annulus_area(void **state)
{
	const double obscs[] = {0.0, 0.2, 0.5, 0.9};
	size_t b;
	int n, k;

	(void)state;
	for (n = 1; n <= 24; n++) {
		for (b = 0; b < sizeof(obscs) / sizeof(obscs[0]); b++) {
			wt_grid *g = NULL;
			double sum = 0.0, e = obscs[b];

			assert_int_equal(
				wt_grid_lenslets(n, e, DBL_MIN, &g, NULL), 0);
			for (k = 0; k < g->n_valid; k++) {
				sum += g->fill[k] * g->pitch * g->pitch;
			}
			/* area of an annulus: pi (1 - e^2), common practice */
			assert_true(fabs(sum - M_PI * (1.0 - e * e)) < 1e-11);
			wt_grid_destroy(g);
		}
	}
}

/* Nearest and farthest distance from the origin of the square cell
 * [x0, x0 + side] x [y0, y0 + side]. */
static void cell_distances(double x0, double y0, double side, double *near,
			   double *far)
{
	double x1 = x0 + side, y1 = y0 + side;
	double ax = fmax(fabs(x0), fabs(x1)), ay = fmax(fabs(y0), fabs(y1));
	double nx = x0 * x1 <= 0.0 ? 0.0 : fmin(fabs(x0), fabs(x1));
	double ny = y0 * y1 <= 0.0 ? 0.0 : fmin(fabs(y0), fabs(y1));

	*near = sqrt(nx * nx + ny * ny);
	*far = sqrt(ax * ax + ay * ay);
}

static void annular_pupil_removes_the_centre_cells(void **state)
{
	wt_grid *g = NULL;
	int i, j;

	(void)state;
	/*
	 * worked by hand: 4 x 4, hole of radius 0.6.  The hole covers all of
	 * [0, .5]^2 but the corner beyond r = 0.6, so the inner cells keep
	 * fill < 0.1; an edge cell [.5, 1] x [0, .5] loses at most the strip
	 * 0.5 < x < 0.6 (area < 0.05, fill < 0.2) and keeps > 0.7; the corner
	 * cells stay at 0.3151.  With min_fill 0.5: the 8 edge cells.
	 */
	assert_int_equal(wt_grid_lenslets(4, 0.6, 0.5, &g, NULL), 0);
	assert_int_equal(g->n_valid, 8);
	assert_int_equal(g->index[1 * 4 + 1], -1);
	assert_int_equal(g->index[1 * 4 + 2], -1);
	assert_int_equal(g->index[2 * 4 + 1], -1);
	assert_int_equal(g->index[2 * 4 + 2], -1);
	wt_grid_destroy(g);

	/* a larger grid: every cell entirely inside the hole is dropped,
	 * every cell entirely inside the annulus is kept (common practice) */
	assert_int_equal(wt_grid_lenslets(20, 0.4, 0.5, &g, NULL), 0);
	for (j = 0; j < 20; j++) {
		for (i = 0; i < 20; i++) {
			double rnear, rfar;

			cell_distances(-1.0 + i * 0.1, -1.0 + j * 0.1, 0.1,
				       &rnear, &rfar);
			if (rfar < 0.4 - 1e-12) {
				assert_int_equal(g->index[j * 20 + i], -1);
			}
			if (rnear > 0.4 + 1e-12 && rfar < 1.0 - 1e-12) {
				assert_true(g->index[j * 20 + i] >= 0);
			}
		}
	}
	wt_grid_destroy(g);
}

/* The valid set and fill are unchanged by a 90-degree rotation of the grid
 * (i, j) -> (n - 1 - j, i) and a mirror (i, j) -> (n - 1 - i, j). */
static void check_symmetric(const wt_grid *g)
{
	int n = g->n, i, j;

	for (j = 0; j < n; j++) {
		for (i = 0; i < n; i++) {
			int k = g->index[j * n + i];
			int kr = g->index[i * n + (n - 1 - j)];
			int km = g->index[j * n + (n - 1 - i)];

			assert_int_equal(k >= 0, kr >= 0);
			assert_int_equal(k >= 0, km >= 0);
			if (k >= 0 && g->fill) {
				assert_true(fabs(g->fill[k] - g->fill[kr]) <
					    1e-12);
				assert_true(fabs(g->fill[k] - g->fill[km]) <
					    1e-12);
			}
		}
	}
}

static void valid_sets_are_symmetric_under_rotation_and_mirror(void **state)
{
	int n;

	(void)state;
	for (n = 1; n <= 21; n++) {
		wt_grid *g = NULL;

		if (n >= 2) {
			assert_int_equal(
				wt_grid_lenslets(n, 0.25, 0.5, &g, NULL), 0);
			check_symmetric(g);
			check_consistent(g, 1);
			wt_grid_destroy(g);
		}
		assert_int_equal(wt_grid_actuators(n, WT_LAYOUT_CIRCLE, n - 1,
						   0.5, &g, NULL),
				 n == 1 ? -EINVAL : 0);
		if (g) {
			check_symmetric(g);
			check_consistent(g, 0);
			wt_grid_destroy(g);
		}
		if (n >= 3) {
			assert_int_equal(wt_grid_actuators(n, WT_LAYOUT_CORNERS,
							   n, 0.0, &g, NULL),
					 0);
			check_symmetric(g);
			check_consistent(g, 0);
			wt_grid_destroy(g);
		}
	}
}

static void expect_refusal(int rc, const wt_error *err, const char *word)
{
	assert_int_equal(rc, -EINVAL);
	assert_int_equal(err->code, -EINVAL);
	if (!strstr(err->msg, word)) {
		print_error("message \"%s\" lacks \"%s\"\n", err->msg, word);
		fail();
	}
}

static void bad_arguments_are_refused_with_a_message(void **state)
{
	wt_grid *g = (wt_grid *)1;
	wt_error err;

	(void)state;
	expect_refusal(wt_grid_lenslets(0, 0.0, 0.5, &g, &err), &err,
		       "0 across");
	assert_null(g);
	expect_refusal(wt_grid_lenslets(-3, 0.0, 0.5, &g, &err), &err,
		       "across");
	expect_refusal(wt_grid_lenslets(8, -0.1, 0.5, &g, &err), &err,
		       "obscuration");
	expect_refusal(wt_grid_lenslets(8, 1.0, 0.5, &g, &err), &err,
		       "obscuration");
	expect_refusal(wt_grid_lenslets(8, NAN, 0.5, &g, &err), &err,
		       "obscuration");
	expect_refusal(wt_grid_lenslets(8, 0.0, 0.0, &g, &err), &err,
		       "min_fill");
	expect_refusal(wt_grid_lenslets(8, 0.0, 1.0001, &g, &err), &err,
		       "min_fill");
	expect_refusal(wt_grid_lenslets(8, 0.0, NAN, &g, &err), &err,
		       "min_fill");
	/* worked by hand: a single cell holds the whole disk, fill pi/4 */
	expect_refusal(wt_grid_lenslets(1, 0.0, 0.9, &g, &err), &err,
		       "no cell");
	expect_refusal(wt_grid_lenslets(8, 0.0, 0.5, NULL, &err), &err,
		       "output");

	expect_refusal(wt_grid_actuators(0, WT_LAYOUT_SQUARE, 10, 0, &g, &err),
		       &err, "across");
	expect_refusal(wt_grid_actuators(8, WT_LAYOUT_SQUARE, 0, 0, &g, &err),
		       &err, "pupil_pitches");
	expect_refusal(wt_grid_actuators(8, WT_LAYOUT_SQUARE, -2, 0, &g, &err),
		       &err, "pupil_pitches");
	expect_refusal(
		wt_grid_actuators(8, WT_LAYOUT_CIRCLE, INFINITY, 0, &g, &err),
		&err, "pupil_pitches");
	expect_refusal(wt_grid_actuators(8, WT_LAYOUT_CIRCLE, 7, NAN, &g, &err),
		       &err, "margin");
	expect_refusal(wt_grid_actuators(8, (enum wt_layout)7, 7, 0, &g, &err),
		       &err, "layout");
	/* worked by hand: 2 x 2 without its 4 corners keeps nothing */
	expect_refusal(wt_grid_actuators(2, WT_LAYOUT_CORNERS, 2, 0, &g, &err),
		       &err, "keeps no point");
	assert_null(g);
	/* the error pointer may be NULL */
	assert_int_equal(wt_grid_lenslets(0, 0.0, 0.5, &g, NULL), -EINVAL);
	wt_grid_destroy(NULL);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(square_layout_keeps_every_point),
	cmocka_unit_test(corners_layout_12_keeps_140),
	cmocka_unit_test(circle_layout_11_keeps_97),
	cmocka_unit_test(circle_layout_keeps_points_exactly_on_the_radius),
	cmocka_unit_test(actuator_pitch_and_positions_follow_pupil_pitches),
	cmocka_unit_test(lenslet_pitch_and_centres_inscribe_the_pupil),
	cmocka_unit_test(lenslets_2x2_keep_all_for_min_fill_up_to_quarter_pi),
	cmocka_unit_test(lenslets_4x4_counts_match_hand_and_sampled_areas),
	cmocka_unit_test(lenslet_fill_matches_sampled_area_clear_and_annular),
	cmocka_unit_test(lenslet_fills_sum_to_the_annulus_area),
	cmocka_unit_test(annular_pupil_removes_the_centre_cells),
	cmocka_unit_test(valid_sets_are_symmetric_under_rotation_and_mirror),
	cmocka_unit_test(bad_arguments_are_refused_with_a_message),
};

WT_TEST_MAIN(tests)
