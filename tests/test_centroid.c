/* test_centroid.c - thresholded centre of gravity (lib/wt_centroid). */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "wt_centroid.h"
#include "wt_geometry.h"

#define MAX_P 128

/*
 * Render a Gaussian spot of the given total flux into the p x p window whose
 * first pixel is (wx, wy) of a frame with row length stride.  Each pixel gets
 * the Gaussian integrated over its area (pixel k spans [k - 0.5, k + 0.5] in
 * window pixel-index coordinates), via erf: the integral of a Gaussian over
 * an interval, common practice.  The spot centre (xc, yc) is in window pixel
 * index coordinates.  A constant pedestal is added, then the value is
 * rounded and clipped to uint16 like a camera would.
 */
static void render_spot(uint16_t *frame, size_t stride, int wx, int wy, int p,
			double xc, double yc, double sigma, double total,
			double pedestal)
{
	double ex[MAX_P], ey[MAX_P], s = sigma * sqrt(2.0);
	int i, j;

	assert_true(p <= MAX_P);
	for (i = 0; i < p; i++) {
		ex[i] = 0.5 *
			(erf((i + 0.5 - xc) / s) - erf((i - 0.5 - xc) / s));
		ey[i] = 0.5 *
			(erf((i + 0.5 - yc) / s) - erf((i - 0.5 - yc) / s));
	}
	for (j = 0; j < p; j++) {
		for (i = 0; i < p; i++) {
			double v = pedestal + total * ex[i] * ey[j];

			v = floor(v + 0.5);
			if (v < 0.0) {
				v = 0.0;
			} else if (v > 65535.0) {
				v = 65535.0;
			}
			frame[(size_t)(wy + j) * stride + (size_t)(wx + i)] =
				(uint16_t)v;
		}
	}
}

/* Total flux whose brightest pixel is at most `peak` (reached when the spot
 * is centred on a pixel): peak / erf(1 / (2 sqrt2 sigma))^2. */
static double spot_total(double sigma, double peak)
{
	double e = erf(1.0 / (2.0 * sqrt(2.0) * sigma));

	return peak / (e * e);
}

/* Fraction of a spot's flux that falls inside [-0.5, p - 0.5] in x: the
 * erf integral, for the expected flux of a spot in its window. */
static double inside_fraction(int p, double xc, double sigma)
{
	double s = sigma * sqrt(2.0);

	return 0.5 * (erf((p - 0.5 - xc) / s) - erf((-0.5 - xc) / s));
}

/*
 * The expected thresholded centre of gravity of a window, by direct sums in
 * double over the rendered pixels: written in the test from the formula
 * (w = max(I - B - T, 0), cx = sum w i / sum w - (p - 1) / 2), not by calling
 * the code under test.
 */
static void ref_cog(const uint16_t *frame, size_t stride, int wx, int wy, int p,
		    double bg, double thr, double *cx, double *cy, double *flux)
{
	double s = 0.0, sx = 0.0, sy = 0.0;
	int i, j;

	for (j = 0; j < p; j++) {
		for (i = 0; i < p; i++) {
			double w = frame[(size_t)(wy + j) * stride + wx + i] -
				   bg - thr;

			if (w > 0.0) {
				s += w;
				sx += w * i;
				sy += w * j;
			}
		}
	}
	*flux = s;
	*cx = s > 0.0 ? sx / s - 0.5 * (p - 1) : 0.0;
	*cy = s > 0.0 ? sy / s - 0.5 * (p - 1) : 0.0;
}

/* A one-lenslet grid: a single valid cell (fill pi/4 >= 0.5). */
static wt_grid *one_lenslet(void)
{
	wt_grid *g = NULL;

	assert_int_equal(wt_grid_lenslets(1, 0.0, 0.5, &g, NULL), 0);
	assert_int_equal(g->n_valid, 1);
	return g;
}

static wt_centroider *make(const wt_grid *g, int p, float bg, float thr,
			   float min_flux)
{
	wt_centroid_params prm = {p, bg, thr, min_flux};
	wt_centroider *c = NULL;
	wt_error err;

	if (wt_centroid_create(g, &prm, &c, &err)) {
		print_error("create: %s\n", err.msg);
		fail();
	}
	return c;
}

static void spot_offsets_recovered_to_two_hundredths_of_a_pixel(void **state)
{
	const int ps[] = {15, 16, 20, 24};
	const double sigmas[] = {1.0, 1.2, 1.5};
	wt_grid *g = one_lenslet();
	uint16_t frame[24 * 24];
	size_t a, b;

	(void)state;
	/* 15, 20 and 24 exercise the column tail after the 8-column blocks;
	 * offsets up to 2 px keep the spot >= 3.5 px (2.3 sigma at worst)
	 * from the window's edge */
	for (a = 0; a < sizeof(ps) / sizeof(ps[0]); a++) {
		int p = ps[a];
		wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);

		for (b = 0; b < sizeof(sigmas) / sizeof(sigmas[0]); b++) {
			double total = spot_total(sigmas[b], 40000.0);
			double worst = 0.0;
			int u, v;

			for (v = -8; v <= 8; v++) {
				for (u = -8; u <= 8; u++) {
					double dx = 0.25 * u, dy = 0.25 * v;
					float s[2], f;
					uint8_t ok;

					render_spot(frame, p, 0, 0, p,
						    0.5 * (p - 1) + dx,
						    0.5 * (p - 1) + dy,
						    sigmas[b], total, 0.0);
					assert_int_equal(
						wt_centroid_frame(c, frame, s,
								  &f, &ok),
						0);
					assert_int_equal(ok, 1);
					/* common practice: the CoG of a
					 * pixel-integrated symmetric spot
					 * inside its window is unbiased */
					assert_true(fabs(s[0] - dx) < 0.02);
					assert_true(fabs(s[1] - dy) < 0.02);
					worst = fmax(worst, fabs(s[0] - dx));
					worst = fmax(worst, fabs(s[1] - dy));
				}
			}
			print_message("p %d sigma %.1f: worst error %.1e px\n",
				      p, sigmas[b], worst);
			if (p >= 16) {
				/* from memory: the CoG's sampling error for
				 * a pixel-integrated Gaussian falls as
				 * exp(-2 pi^2 sigma^2) (< 1e-8 px at sigma
				 * 1); what is left is the rounding to whole
				 * counts and the far tails, well < 2e-3 px */
				assert_true(worst < 2e-3);
			}
		}
		wt_centroid_destroy(c);
	}
	wt_grid_destroy(g);
}

static void spot_on_the_lenslet_axis_reads_zero(void **state)
{
	wt_grid *g = one_lenslet();
	uint16_t frame[40 * 40];
	int p;

	(void)state;
	for (p = 2; p <= 40; p++) {
		wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
		float s[2];

		render_spot(frame, p, 0, 0, p, 0.5 * (p - 1), 0.5 * (p - 1),
			    1.2, spot_total(1.2, 40000.0), 0.0);
		assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
		/* worked by hand: a spot centred at (p - 1) / 2 renders
		 * mirror-symmetric pixels, so sum w (i - (p - 1) / 2) = 0 */
		assert_true(fabs(s[0]) < 1e-4);
		assert_true(fabs(s[1]) < 1e-4);
		wt_centroid_destroy(c);
	}
	wt_grid_destroy(g);
}

static void each_subaperture_reads_its_own_offset(void **state)
{
	const int n = 6, p = 16, side = 6 * 16;
	static uint16_t frame[6 * 16 * 6 * 16];
	double dx[36], dy[36], total = spot_total(1.2, 40000.0);
	float slopes[72], flux[36];
	uint8_t valid[36];
	wt_grid *g = NULL;
	wt_centroider *c;
	int i, j, k, nv;

	(void)state;
	assert_int_equal(wt_grid_lenslets(n, 0.0, 0.5, &g, NULL), 0);
	nv = g->n_valid;
	assert_true(nv > 4 && nv < 36);
	memset(frame, 0, sizeof(frame));
	for (j = 0; j < n; j++) {
		for (i = 0; i < n; i++) {
			k = g->index[j * n + i];
			if (k < 0) {
				/* a bright spot in an unused window must be
				 * ignored */
				render_spot(frame, side, i * p, j * p, p, 3.0,
					    3.0, 1.2, total, 0.0);
				continue;
			}
			dx[k] = -1.8 + 3.6 * k / (nv - 1);
			dy[k] = 1.7 * sin(1.3 * k);
			render_spot(frame, side, i * p, j * p, p, 7.5 + dx[k],
				    7.5 + dy[k], 1.2, total, 0.0);
		}
	}
	c = make(g, p, 0.0f, 0.0f, 100.0f);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 0);
	for (k = 0; k < nv; k++) {
		/* common practice: unbiased CoG (see the first test) */
		assert_true(fabs(slopes[k] - dx[k]) < 0.02);
		assert_true(fabs(slopes[nv + k] - dy[k]) < 0.02);
		/* the whole spot is inside: its flux is the total (erf) */
		assert_true(fabs(flux[k] - total) < 1e-3 * total);
		assert_int_equal(valid[k], 1);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void slopes_are_x_block_then_y_block_in_valid_order(void **state)
{
	const int p = 10, side = 20;
	/* worked by hand: a 2 x 2 grid keeps its 4 cells in row-major
	 * order (0, 0), (1, 0), (0, 1), (1, 1); window (i, j) starts at
	 * pixel (i p, j p), x along the row */
	const double dx[4] = {1.0, 0.0, -1.0, 0.0};
	const double dy[4] = {0.0, 1.0, 0.0, -1.0};
	const double want[8] = {1, 0, -1, 0, 0, 1, 0, -1};
	uint16_t frame[20 * 20];
	float slopes[8];
	wt_grid *g = NULL;
	wt_centroider *c;
	int k;

	(void)state;
	assert_int_equal(wt_grid_lenslets(2, 0.0, 0.5, &g, NULL), 0);
	assert_int_equal(g->n_valid, 4);
	for (k = 0; k < 4; k++) {
		render_spot(frame, side, g->col[k] * p, g->row[k] * p, p,
			    4.5 + dx[k], 4.5 + dy[k], 1.0,
			    spot_total(1.0, 30000.0), 0.0);
	}
	c = make(g, p, 0.0f, 0.0f, 1.0f);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, NULL, NULL), 0);
	for (k = 0; k < 8; k++) {
		assert_true(fabs(slopes[k] - want[k]) < 0.02);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void constant_pedestal_removed_by_background(void **state)
{
	const int p = 16;
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 500.0f, 0.0f, 1.0f);
	double total = spot_total(1.3, 40000.0);
	uint16_t frame[16 * 16];
	int u, v;

	(void)state;
	for (v = -4; v <= 4; v++) {
		for (u = -4; u <= 4; u++) {
			double dx = 0.5 * u + 0.1, dy = 0.5 * v - 0.15;
			float s[2], f;

			render_spot(frame, p, 0, 0, p, 7.5 + dx, 7.5 + dy, 1.3,
				    total, 500.0);
			assert_int_equal(
				wt_centroid_frame(c, frame, s, &f, NULL), 0);
			/* common practice: exact background subtraction
			 * leaves the unbiased CoG */
			assert_true(fabs(s[0] - dx) < 0.02);
			assert_true(fabs(s[1] - dy) < 0.02);
			/* flux: the spot's own total (erf) */
			assert_true(fabs(f - total) < 1e-3 * total);
		}
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void unsubtracted_pedestal_pulls_to_centre_by_flux_ratio(void **s0)
{
	const int p = 16;
	const double peds[] = {10.0, 50.0, 200.0, 1000.0};
	const double sigma = 1.2, dx = 1.5, dy = -1.0;
	double total = spot_total(sigma, 40000.0);
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
	uint16_t frame[16 * 16];
	size_t a;

	(void)s0;
	for (a = 0; a < sizeof(peds) / sizeof(peds[0]); a++) {
		double f_spot = total * inside_fraction(p, 7.5 + dx, sigma) *
				inside_fraction(p, 7.5 + dy, sigma);
		double f_bg = peds[a] * p * p;
		/* common practice (Thomas et al. 2006, MNRAS 371, 323): a
		 * uniform background pulls the CoG to the window centre by
		 * F_spot / (F_spot + F_bg) */
		double r = f_spot / (f_spot + f_bg);
		float s[2], f;

		render_spot(frame, p, 0, 0, p, 7.5 + dx, 7.5 + dy, sigma, total,
			    peds[a]);
		assert_int_equal(wt_centroid_frame(c, frame, s, &f, NULL), 0);
		assert_true(fabs(s[0] - r * dx) < 2e-3);
		assert_true(fabs(s[1] - r * dy) < 2e-3);
		assert_true(fabs(s[0]) < fabs(dx) && fabs(s[1]) < fabs(dy));
		assert_true(fabs(f - (f_spot + f_bg)) < 1e-3 * f);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void threshold_at_or_above_the_pedestal_removes_the_pull(void **s0)
{
	const int p = 16;
	const double sigma = 1.2, ped = 200.0, peak = 40000.0;
	double total = spot_total(sigma, peak);
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
	uint16_t frame[16 * 16];
	int u;

	(void)s0;
	for (u = -8; u <= 8; u++) {
		double dx = 0.25 * u, dy = 0.7;
		double f_spot = total * inside_fraction(p, 7.5 + dx, sigma) *
				inside_fraction(p, 7.5 + dy, sigma);
		double f_left = (ped - 150.0) * p * p, r;
		float s[2];

		render_spot(frame, p, 0, 0, p, 7.5 + dx, 7.5 + dy, sigma, total,
			    ped);
		/* threshold equal to the pedestal: the same as subtracting
		 * it, unbiased (common practice) */
		assert_int_equal(wt_centroid_set_levels(c, 0.0f, 200.0f, 1.0f),
				 0);
		assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
		assert_true(fabs(s[0] - dx) < 0.02);
		assert_true(fabs(s[1] - dy) < 0.02);
		/* threshold 1% of the peak above the pedestal: background
		 * pixels weigh nothing, the spot stays symmetric, the pull
		 * is gone (Thomas et al. 2006) */
		assert_int_equal(
			wt_centroid_set_levels(
				c, 0.0f, (float)(ped + 0.01 * peak), 1.0f),
			0);
		assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
		assert_true(fabs(s[0] - dx) < 0.02);
		assert_true(fabs(s[1] - dy) < 0.02);
		/* threshold 150 < pedestal: the 50 counts left per pixel
		 * pull by F_spot / (F_spot + 50 p^2) (common practice) */
		r = f_spot / (f_spot + f_left);
		assert_int_equal(wt_centroid_set_levels(c, 0.0f, 150.0f, 1.0f),
				 0);
		assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
		assert_true(fabs(s[0] - r * dx) < 2e-3);
		assert_true(fabs(s[1] - r * dy) < 2e-3);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

/* Measured x bias of a spot at x offset d (window centre + d) with the
 * given threshold; also checks the code against the direct sums and
 * returns the direct sums' bias in *ref_bias. */
static double edge_bias(wt_centroider *c, uint16_t *frame, int p, double d,
			double thr, double *ref_bias)
{
	const double sigma = 1.2;
	double cx, cy, fl;
	float s[2];

	render_spot(frame, p, 0, 0, p, 0.5 * (p - 1) + d, 0.5 * (p - 1), sigma,
		    spot_total(sigma, 40000.0), 0.0);
	assert_int_equal(wt_centroid_set_levels(c, 0.0f, (float)thr, 1.0f), 0);
	assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
	ref_cog(frame, p, 0, 0, p, 0.0, thr, &cx, &cy, &fl);
	/* the code against direct sums over the same pixels */
	assert_true(fabs(s[0] - cx) < 1e-3);
	assert_true(fabs(s[1] - cy) < 1e-3);
	*ref_bias = cx - d;
	return s[0] - d;
}

static void edge_bias_under_threshold_is_inward_and_shrinks(void **s0)
{
	const int p = 16;
	const double thr = 4000.0; /* 10% of the peak */
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
	uint16_t frame[16 * 16];
	double prev = 0.0, b, rb, b0, rb0;
	int step;

	(void)s0;
	/*
	 * Offsets d in half pixels, so the spot sits on a pixel centre or a
	 * pixel boundary and renders symmetric pixels: any bias is the
	 * window's truncation, not sub-pixel sampling.  d = 7 puts the spot
	 * 1 px from the window's right edge.  Expected values: direct sums
	 * (ref_cog); expected behaviour: the truncated side is missing, so
	 * the CoG moves toward the window centre, common practice.
	 */
	for (step = 0; step <= 14; step++) {
		double d = 0.5 * step;

		b = edge_bias(c, frame, p, d, thr, &rb);
		assert_true(rb <= 1e-6); /* inward: never past the spot */
		assert_true(b <= 1e-4);
		/* the bias grows (never shrinks) toward the edge */
		assert_true(fabs(b) >= fabs(prev) - 1e-4);
		prev = b;
		if (d <= 5.0) {
			/*
			 * worked by hand: at d = 5 (spot at 12.5) the first
			 * pixel past the edge, 16, spans 3..4 px from the
			 * spot; with total 383600 it would hold at most
			 * 383600 (Phi(4/1.2) - Phi(3/1.2)) (Phi(0) -
			 * Phi(-1/1.2)) = 383600 * 0.0058 * 0.298 = 660 <
			 * 4000 counts: nothing above the threshold is cut.
			 */
			assert_true(fabs(rb) < 1e-6);
			assert_true(fabs(b) < 1e-3);
		}
	}
	/* at 1 px from the edge the bias is large (direct sums) */
	assert_true(rb < -0.1);
	assert_true(b < -0.1);

	/* mirror image at the left edge: the bias is positive, inward */
	b = edge_bias(c, frame, p, -7.0, thr, &rb);
	assert_true(rb > 0.1 && b > 0.1);
	assert_true(fabs(b + prev) < 1e-3);

	/* without the threshold the far tail is truncated too: the biased
	 * zone reaches further in and the bias at the edge is larger
	 * (direct sums) */
	b0 = edge_bias(c, frame, p, 5.5, 0.0, &rb0);
	assert_true(rb0 < -0.01 && b0 < -0.01);
	b = edge_bias(c, frame, p, 5.5, thr, &rb);
	assert_true(fabs(rb) < 1e-6 && fabs(b) < 1e-3);
	b0 = edge_bias(c, frame, p, 7.0, 0.0, &rb0);
	b = edge_bias(c, frame, p, 7.0, thr, &rb);
	assert_true(rb0 < rb && b0 < b);

	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void min_flux_invalidates_dim_subapertures_and_counts_them(void **s0)
{
	const int p = 12, side = 24;
	const double totals[4] = {1e5, 5e4, 2e4, 0.0};
	uint16_t frame[24 * 24];
	float slopes[8], flux[4];
	uint8_t valid[4];
	wt_grid *g = NULL;
	wt_centroider *c;
	int k;

	(void)s0;
	assert_int_equal(wt_grid_lenslets(2, 0.0, 0.5, &g, NULL), 0);
	for (k = 0; k < 4; k++) {
		render_spot(frame, side, g->col[k] * p, g->row[k] * p, p,
			    5.5 + 1.0, 5.5 - 0.5, 1.2, totals[k], 0.0);
	}
	c = make(g, p, 0.0f, 0.0f, 3e4f);
	/* worked by hand: 2e4 and 0 are below 3e4 */
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 2);
	assert_int_equal(valid[0], 1);
	assert_int_equal(valid[1], 1);
	assert_int_equal(valid[2], 0);
	assert_int_equal(valid[3], 0);
	assert_true(fabs(slopes[0] - 1.0) < 0.02);
	assert_true(fabs(slopes[4] + 0.5) < 0.02);
	/* invalid: slopes exactly 0, flux still reported */
	assert_true(slopes[2] == 0.0f && slopes[6] == 0.0f);
	assert_true(slopes[3] == 0.0f && slopes[7] == 0.0f);
	/* the erf total, give or take 0.5 rounding per pixel */
	assert_true(fabs(flux[2] - 2e4) < 0.5 * p * p);
	assert_true(flux[3] == 0.0f);

	/* lower min_flux: only the empty window is left invalid */
	assert_int_equal(wt_centroid_set_levels(c, 0.0f, 0.0f, 1e3f), 0);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 1);
	assert_int_equal(valid[2], 1);
	assert_true(fabs(slopes[2] - 1.0) < 0.02);
	/* min_flux 0: a window with no flux at all is still invalid */
	assert_int_equal(wt_centroid_set_levels(c, 0.0f, 0.0f, 0.0f), 0);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 1);
	assert_int_equal(valid[3], 0);
	assert_true(slopes[3] == 0.0f && slopes[7] == 0.0f);
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void all_zero_frame_is_invalid_without_nan(void **s0)
{
	const int p = 16, side = 6 * 16;
	static uint16_t frame[6 * 16 * 6 * 16];
	float slopes[72], flux[36];
	uint8_t valid[36];
	wt_grid *g = NULL;
	wt_centroider *c;
	int k, nv;

	(void)s0;
	assert_int_equal(wt_grid_lenslets(6, 0.0, 0.5, &g, NULL), 0);
	nv = g->n_valid;
	memset(frame, 0, sizeof(frame));
	c = make(g, p, 0.0f, 0.0f, 0.0f);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), nv);
	for (k = 0; k < nv; k++) {
		assert_true(slopes[k] == 0.0f && slopes[nv + k] == 0.0f);
		assert_true(flux[k] == 0.0f);
		assert_int_equal(valid[k], 0);
	}
	/* a frame wholly below the background is the same */
	for (k = 0; k < side * side; k++) {
		frame[k] = 90;
	}
	assert_int_equal(wt_centroid_set_levels(c, 100.0f, 0.0f, 0.0f), 0);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), nv);
	for (k = 0; k < 2 * nv; k++) {
		assert_true(slopes[k] == 0.0f);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void saturated_frames_give_finite_slopes(void **s0)
{
	const int p = 16;
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
	uint16_t frame[16 * 16];
	float s[2], f;
	uint8_t ok;
	int k, u;

	(void)s0;
	for (k = 0; k < p * p; k++) {
		frame[k] = 65535;
	}
	assert_int_equal(wt_centroid_frame(c, frame, s, &f, &ok), 0);
	/* worked by hand: a uniform window is centred: slopes 0; flux
	 * 65535 * 256 = 16776960 < 2^24, exact in float */
	assert_true(s[0] == 0.0f && s[1] == 0.0f);
	assert_true(f == 16776960.0f);
	assert_int_equal(ok, 1);
	/* background at full scale: nothing left, invalid, no NaN */
	assert_int_equal(wt_centroid_set_levels(c, 65535.0f, 0.0f, 1.0f), 0);
	assert_int_equal(wt_centroid_frame(c, frame, s, &f, &ok), 1);
	assert_true(s[0] == 0.0f && s[1] == 0.0f && f == 0.0f && ok == 0);

	/* a spot 5 times over full scale, clipped flat at 65535 */
	assert_int_equal(wt_centroid_set_levels(c, 0.0f, 0.0f, 1.0f), 0);
	for (u = -6; u <= 6; u++) {
		double dx = 0.3 * u, cx, cy, fl;

		render_spot(frame, p, 0, 0, p, 7.5 + dx, 7.5 - 0.4, 1.2,
			    spot_total(1.2, 5 * 65535.0), 0.0);
		assert_int_equal(wt_centroid_frame(c, frame, s, &f, &ok), 0);
		assert_true(isfinite(s[0]) && isfinite(s[1]) && isfinite(f));
		ref_cog(frame, p, 0, 0, p, 0.0, 0.0, &cx, &cy, &fl);
		/* direct sums over the clipped pixels */
		assert_true(fabs(s[0] - cx) < 1e-3 && fabs(s[1] - cy) < 1e-3);
		/* common practice: clipping a symmetric spot keeps it
		 * nearly symmetric, so the offset is still close */
		assert_true(fabs(s[0] - dx) < 0.05);
		assert_true(fabs(s[1] + 0.4) < 0.05);
	}
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static void flux_and_valid_outputs_may_be_null(void **s0)
{
	const int p = 8;
	wt_grid *g = one_lenslet();
	wt_centroider *c = make(g, p, 0.0f, 0.0f, 1.0f);
	uint16_t frame[8 * 8];
	float s[2];

	(void)s0;
	render_spot(frame, p, 0, 0, p, 3.5 + 0.6, 3.5 - 0.9, 1.0,
		    spot_total(1.0, 20000.0), 0.0);
	assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
	/* common practice: unbiased CoG, 8 px window, 3.5 sigma margin */
	assert_true(fabs(s[0] - 0.6) < 0.02);
	assert_true(fabs(s[1] + 0.9) < 0.02);
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
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

static void bad_parameters_and_levels_are_refused(void **s0)
{
	wt_grid *g = one_lenslet(), *big = NULL;
	wt_centroid_params prm = {16, 0.0f, 0.0f, 1.0f};
	wt_centroider *c = (wt_centroider *)1;
	uint16_t frame[16 * 16];
	wt_error err;
	float s[2];

	(void)s0;
	expect_refusal(wt_centroid_create(NULL, &prm, &c, &err), &err, "grid");
	assert_null(c);
	expect_refusal(wt_centroid_create(g, NULL, &c, &err), &err,
		       "parameters");
	expect_refusal(wt_centroid_create(g, &prm, NULL, &err), &err, "output");
	prm.pixels_per_lenslet = 1;
	expect_refusal(wt_centroid_create(g, &prm, &c, &err), &err,
		       "pixels_per_lenslet");
	prm.pixels_per_lenslet = WT_CENTROID_MAX_PIXELS + 1;
	expect_refusal(wt_centroid_create(g, &prm, &c, &err), &err,
		       "pixels_per_lenslet");
	prm.pixels_per_lenslet = 16;
	prm.background = NAN;
	expect_refusal(wt_centroid_create(g, &prm, &c, &err), &err, "finite");
	prm.background = 0.0f;
	prm.threshold = -1.0f;
	expect_refusal(wt_centroid_create(g, &prm, &c, &err), &err,
		       "threshold");
	prm.threshold = 0.0f;
	prm.min_flux = -5.0f;
	expect_refusal(wt_centroid_create(g, &prm, &c, &err), &err, "min_flux");
	prm.min_flux = 1.0f;
	/* worked by hand: 520 x 128 = 66560 > 65535 pixels across */
	assert_int_equal(wt_grid_lenslets(520, 0.0, 0.5, &big, NULL), 0);
	prm.pixels_per_lenslet = 128;
	expect_refusal(wt_centroid_create(big, &prm, &c, &err), &err,
		       "frame side");
	wt_grid_destroy(big);

	prm.pixels_per_lenslet = 16;
	assert_int_equal(wt_centroid_create(g, &prm, &c, &err), 0);
	assert_int_equal(wt_centroid_set_levels(c, NAN, 0, 1), -EINVAL);
	assert_int_equal(wt_centroid_set_levels(c, 0, INFINITY, 1), -EINVAL);
	assert_int_equal(wt_centroid_set_levels(c, 0, -1, 1), -EINVAL);
	assert_int_equal(wt_centroid_set_levels(c, 0, 0, -1), -EINVAL);
	assert_int_equal(wt_centroid_set_levels(NULL, 0, 0, 1), -EINVAL);
	/* refused levels leave the old ones: a 1-count frame still passes
	 * min_flux 1 with background 0 */
	memset(frame, 0, sizeof(frame));
	frame[5 * 16 + 9] = 1;
	assert_int_equal(wt_centroid_frame(c, frame, s, NULL, NULL), 0);
	/* worked by hand: one pixel at (9, 5): 9 - 7.5, 5 - 7.5 */
	assert_true(s[0] == 1.5f && s[1] == -2.5f);
	assert_int_equal(wt_centroid_frame(NULL, frame, s, NULL, NULL),
			 -EINVAL);
	assert_int_equal(wt_centroid_frame(c, NULL, s, NULL, NULL), -EINVAL);
	assert_int_equal(wt_centroid_frame(c, frame, NULL, NULL, NULL),
			 -EINVAL);
	wt_centroid_destroy(c);
	wt_centroid_destroy(NULL);
	wt_grid_destroy(g);
}

/*
 * Every kernel variant (16-byte vectors, and AVX2 where the CPU has it)
 * against the estimator's definition summed in double in this test
 * (w = max(I - B - T, 0), flux = sum w, cx = sum w i / flux - (p - 1) / 2;
 * the centre of gravity, common practice), on random frames with
 * fractional levels and window sides that exercise each code path: 8- and
 * 4-wide blocks, the columns left over, and an odd row count.  Float sums
 * of up to 16 x 16 pixels of up to 4000 counts agree to well under
 * 1e-4 px and 1e-5 relative flux (float epsilon 6e-8 times a few hundred
 * terms).
 */
static void isa_variants_match_double_sums(void **state)
{
	const int ps[] = {2, 3, 5, 7, 8, 12, 13, 16};
	const float bg = 100.25f, thr = 7.5f;
	static uint16_t frame[3 * 16 * 3 * 16];
	float s[2 * 9], f[9];
	int isa, pi, k, checked = 0;
	wt_grid *g = NULL;

	(void)state;
	wt_rng_seed(wt_test_seed(6));
	assert_int_equal(wt_grid_lenslets(3, 0.0, 0.01, &g, NULL), 0);
	assert_int_equal(g->n_valid, 9);
	for (isa = 0; isa < WT_MVM_ISA_COUNT; isa++) {
		for (pi = 0; pi < (int)(sizeof(ps) / sizeof(ps[0])); pi++) {
			int p = ps[pi], side = 3 * p;
			wt_centroider *c = make(g, p, bg, thr, 0.0f);

			if (wt_centroid_use_isa(c, (enum wt_mvm_isa)isa)) {
				assert_false(wt_mvm_isa_supported(
					(enum wt_mvm_isa)isa));
				wt_centroid_destroy(c);
				continue;
			}
			for (k = 0; k < side * side; k++) {
				frame[k] =
					(uint16_t)(wt_rng_uniform() * 4000.0);
			}
			assert_int_equal(
				wt_centroid_frame(c, frame, s, f, NULL), 0);
			for (k = 0; k < 9; k++) {
				int x0 = g->col[k] * p, y0 = g->row[k] * p;
				double sw = 0.0, sx = 0.0, sy = 0.0;
				int i, j;

				for (j = 0; j < p; j++) {
					for (i = 0; i < p; i++) {
						double v =
							frame[(size_t)(y0 + j) *
								      side +
							      (size_t)(x0 +
								       i)] -
							(double)bg -
							(double)thr;

						v = v > 0.0 ? v : 0.0;
						sw += v;
						sx += v * i;
						sy += v * j;
					}
				}
				assert_true(sw > 0.0);
				assert_true(fabs(f[k] - sw) <= 1e-5 * sw);
				assert_true(
					fabs(s[k] - (sx / sw - 0.5 * (p - 1))) <
					1e-4);
				assert_true(fabs(s[9 + k] -
						 (sy / sw - 0.5 * (p - 1))) <
					    1e-4);
			}
			checked++;
			wt_centroid_destroy(c);
		}
	}
	assert_true(checked >= (int)(sizeof(ps) / sizeof(ps[0])));
	assert_int_equal(wt_centroid_use_isa(NULL, WT_MVM_ISA_PORTABLE),
			 -ENOTSUP);
	wt_grid_destroy(g);
}

/*
 * Saturation: a window holding one pixel at or above full scale is marked
 * invalid, the others keep the validity wt_centroid_frame gave them; the
 * count includes windows already invalid.  Worked by hand: 2 x 2 windows,
 * spots peaking at 3000, 3000 with its peak pixel set to 4095 (12-bit
 * full scale, 2^12 - 1), 5000 (over it, rendered unclipped) and an empty
 * window with one pixel at 4095.
 */
static void saturated_pixel_invalidates_its_window_and_is_counted(void **s0)
{
	const int p = 12, side = 24;
	const double peaks[4] = {3000.0, 3000.0, 5000.0, 0.0};
	uint16_t frame[24 * 24];
	float slopes[8], flux[4];
	uint8_t valid[4];
	wt_grid *g = NULL;
	wt_centroider *c;
	int k;

	(void)s0;
	assert_int_equal(wt_grid_lenslets(2, 0.0, 0.5, &g, NULL), 0);
	for (k = 0; k < 4; k++) {
		/* centred on pixel (5, 5): the peak is the brightest pixel */
		render_spot(frame, side, g->col[k] * p, g->row[k] * p, p, 5.0,
			    5.0, 1.0, spot_total(1.0, peaks[k]), 0.0);
	}
	frame[(size_t)(g->row[1] * p + 5) * side + (size_t)(g->col[1] * p + 5)] =
		4095;
	frame[(size_t)(g->row[3] * p + 2) * side + (size_t)(g->col[3] * p)] =
		4095;
	/* the lone pixel (4095 counts) is under min_flux: invalid already */
	c = make(g, p, 0.0f, 0.0f, 5000.0f);
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 1);
	assert_int_equal(valid[3], 0);
	assert_int_equal(wt_centroid_saturated(c, frame, 4095, valid), 3);
	assert_int_equal(valid[0], 1);
	assert_int_equal(valid[1], 0);
	assert_int_equal(valid[2], 0);
	assert_int_equal(valid[3], 0);
	/* a higher full scale (16 bits): nothing saturates */
	assert_int_equal(wt_centroid_frame(c, frame, slopes, flux, valid), 1);
	assert_int_equal(wt_centroid_saturated(c, frame, 65535, valid), 0);
	assert_int_equal(valid[1], 1);
	assert_int_equal(valid[2], 1);
	assert_int_equal(wt_centroid_saturated(NULL, frame, 4095, valid),
			 -EINVAL);
	assert_int_equal(wt_centroid_saturated(c, frame, 4095, NULL), -EINVAL);
	wt_centroid_destroy(c);
	wt_grid_destroy(g);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(spot_offsets_recovered_to_two_hundredths_of_a_pixel),
	cmocka_unit_test(spot_on_the_lenslet_axis_reads_zero),
	cmocka_unit_test(each_subaperture_reads_its_own_offset),
	cmocka_unit_test(slopes_are_x_block_then_y_block_in_valid_order),
	cmocka_unit_test(constant_pedestal_removed_by_background),
	cmocka_unit_test(unsubtracted_pedestal_pulls_to_centre_by_flux_ratio),
	cmocka_unit_test(threshold_at_or_above_the_pedestal_removes_the_pull),
	cmocka_unit_test(edge_bias_under_threshold_is_inward_and_shrinks),
	cmocka_unit_test(min_flux_invalidates_dim_subapertures_and_counts_them),
	cmocka_unit_test(all_zero_frame_is_invalid_without_nan),
	cmocka_unit_test(saturated_frames_give_finite_slopes),
	cmocka_unit_test(saturated_pixel_invalidates_its_window_and_is_counted),
	cmocka_unit_test(flux_and_valid_outputs_may_be_null),
	cmocka_unit_test(bad_parameters_and_levels_are_refused),
	cmocka_unit_test(isa_variants_match_double_sums),
};

WT_TEST_MAIN(tests)
