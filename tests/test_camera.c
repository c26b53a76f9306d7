/*
 * test_camera.c - the simulated Shack-Hartmann camera: spot displacement by
 * a tilt, saturation, photon budget, and centroid noise from photon and
 * read noise.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "sim_camera.h"
#include "sim_pupil.h"
#include "wt_centroid.h"
#include "wt_geometry.h"

/* cmocka 1.1.5 has no floating-point assertion. */
#define assert_near(a, b, tol)                                                 \
	do {                                                                   \
		double a_ = (a), b_ = (b);                                     \
		if (!(fabs(a_ - b_) <= (tol))) {                               \
			fail_msg("%s = %.12g, expected %.12g +- %g", #a, a_,   \
				 b_, (double)(tol));                           \
		}                                                              \
	} while (0)

/*
 * Width of the geometric model's Gaussian spot in pixels: the FWHM of the
 * square lenslet's sinc^2 core, 0.8859 lambda f / d (Goodman, Introduction
 * to Fourier Optics, sinc^2 half-maximum at x = 0.443), turned into a
 * Gaussian sigma by FWHM / (2 sqrt(2 ln 2)); that is how sim_optics.h
 * defines the "diffraction width" of SIM_SPOT_GAUSSIAN.
 */
static double gaussian_sigma_px(double lambda_um, double f_um, double d_um,
				double pixel_um)
{
	return 0.885893 / (2.0 * sqrt(2.0 * log(2.0))) * lambda_um * f_um /
	       (d_um * pixel_um);
}

/* Focal length (mm) that gives the geometric spot a sigma of sigma_px. */
static double focal_mm_for_sigma(double sigma_px, int p, double pixel_um,
				 double lambda_um)
{
	return 1e-3 * sigma_px /
	       gaussian_sigma_px(lambda_um, 1.0, p * pixel_um, pixel_um);
}

struct cam {
	sim_pupil *pupil;
	sim_camera *camera;
	int width;
	double *wf;
	uint16_t *frame;
};

static void noiseless(sim_camera_params *p)
{
	sim_camera_params_default(p);
	p->photon_noise = false;
	p->read_noise_e = 0.0;
	p->background_e = 0.0;
	p->offset_counts = 0.0;
	p->gain = 1.0;
	p->bit_depth = 16;
}

static void cam_make(struct cam *c, const sim_camera_params *p, int samples)
{
	wt_error err;

	memset(c, 0, sizeof(*c));
	assert_int_equal(
		sim_pupil_create(p->n_lenslets, samples, 0.0, &c->pupil, &err),
		0);
	if (sim_camera_create(p, c->pupil, &c->camera, &err) != 0) {
		fail_msg("%s", err.msg);
	}
	c->width = sim_camera_width(c->camera);
	assert_int_equal(c->width, p->n_lenslets * p->pixels_per_lenslet);
	c->wf = calloc((size_t)c->pupil->n * c->pupil->n, sizeof(double));
	c->frame = calloc((size_t)c->width * c->width, sizeof(uint16_t));
	assert_non_null(c->wf);
	assert_non_null(c->frame);
}

static void cam_free(struct cam *c)
{
	sim_camera_destroy(c->camera);
	sim_pupil_destroy(c->pupil);
	free(c->wf);
	free(c->frame);
}

/* W = theta_x X + theta_y Y over the whole grid, X, Y in micrometres. */
static void tilt(struct cam *c, double radius_um, double tx, double ty)
{
	int a, b;

	for (b = 0; b < c->pupil->n; b++) {
		for (a = 0; a < c->pupil->n; a++) {
			c->wf[b * c->pupil->n + a] =
				tx * radius_um * sim_pupil_coord(c->pupil, a) +
				ty * radius_um * sim_pupil_coord(c->pupil, b);
		}
	}
}

/*
 * Does lenslet (i, j) take light from the outermost ring of pupil samples?
 * There the spot renderer has no sample beyond to interpolate against.
 */
static int on_map_border(const sim_pupil *pp, int i, int j)
{
	int a, b, last = pp->n - 1;

	for (b = j * pp->samples; b < (j + 1) * pp->samples; b++) {
		for (a = i * pp->samples; a < (i + 1) * pp->samples; a++) {
			if (pp->mask[b * pp->n + a] &&
			    (a == 0 || b == 0 || a == last || b == last)) {
				return 1;
			}
		}
	}
	return 0;
}

/* Check the tilt on the valid lenslets on (border = 1) or off the border. */
static void check_tilt(enum sim_spot_model model, double threshold, int border)
{
	const double shift_x = 2.5, shift_y = -1.5; /* pixels */
	wt_centroid_params cp = {.pixels_per_lenslet = 16,
				 .threshold = (float)threshold};
	sim_camera_params p;
	wt_centroider *cen;
	wt_grid *grid;
	wt_error err;
	struct cam c;
	float *slopes;
	double tx, ty, f_um;
	int k, n, checked = 0;

	noiseless(&p);
	p.n_lenslets = 8;
	p.pixels_per_lenslet = 16;
	p.pixel_um = 5.0;
	p.wavelength_nm = 920.0;
	p.focal_mm = focal_mm_for_sigma(1.2, 16, 5.0, 0.92);
	p.model = model;
	p.photons = 64 * 1e5;
	cam_make(&c, &p, 6);
	f_um = p.focal_mm * 1e3;
	/* a wavefront tilted by theta radians */
	tx = shift_x * p.pixel_um / f_um;
	ty = shift_y * p.pixel_um / f_um;
	tilt(&c, sim_camera_pupil_radius_um(c.camera), tx, ty);
	assert_int_equal(sim_camera_expose(c.camera, c.wf, c.frame), 0);

	assert_int_equal(wt_grid_lenslets(8, 0.0, 0.5, &grid, &err), 0);
	assert_int_equal(wt_centroid_create(grid, &cp, &cen, &err), 0);
	n = grid->n_valid;
	slopes = calloc(2 * (size_t)n, sizeof(float));
	assert_non_null(slopes);
	assert_int_equal(wt_centroid_frame(cen, c.frame, slopes, NULL, NULL),
			 0);
	for (k = 0; k < n; k++) {
		if (on_map_border(c.pupil, grid->col[k], grid->row[k]) !=
		    border) {
			continue;
		}
		/* Geometric optics: a wavefront tilted by theta focuses
		 * f theta off axis, so every spot moves by f theta /
		 * pixel_pitch pixels (Hardy 1998, Adaptive Optics for
		 * Astronomical Telescopes, the Shack-Hartmann sensor);
		 * within 1%. */
		assert_near(slopes[k], f_um * tx / p.pixel_um, 0.01 * shift_x);
		assert_near(slopes[n + k], f_um * ty / p.pixel_um,
			    0.01 * fabs(shift_y));
		checked++;
	}
	assert_true(checked >= (border ? 4 : 40));
	free(slopes);
	wt_centroid_destroy(cen);
	wt_grid_destroy(grid);
	cam_free(&c);
}

/*
 * The diffraction spot's sinc^2 side lobes reach past the window, and a
 * plain centre of gravity of a truncated spot is pulled towards the window
 * centre (wt_centroid.h); a threshold of a few percent of the peak (here
 * 1000 counts, 8% of the ~12800-count peak) removes the lobes (common
 * practice).
 */
#define DIFFRACTION_THRESHOLD 1000.0

static void tilt_moves_spots_by_f_theta(void **state)
{
	(void)state;
	check_tilt(SIM_SPOT_GAUSSIAN, 0.0, 0);
	check_tilt(SIM_SPOT_DIFFRACTION, DIFFRACTION_THRESHOLD, 0);
}

/* The lenslets at the 4 points where the pupil touches the edge of the
 * lenslet grid, kept apart because the spot renderer treats the edge of its
 * phase map specially. */
static void tilt_moves_border_spots_by_f_theta(void **state)
{
	(void)state;
	check_tilt(SIM_SPOT_GAUSSIAN, 0.0, 1);
	check_tilt(SIM_SPOT_DIFFRACTION, DIFFRACTION_THRESHOLD, 1);
}

static void saturates_at_top_code(void **state)
{
	static const int depths[] = {10, 12, 16};
	size_t d;

	(void)state;
	for (d = 0; d < sizeof(depths) / sizeof(depths[0]); d++) {
		sim_camera_params p;
		struct cam c;
		int top = (1 << depths[d]) - 1, at_top = 0, s, sat;

		noiseless(&p);
		p.n_lenslets = 4;
		p.pixels_per_lenslet = 12;
		p.model = SIM_SPOT_GAUSSIAN;
		p.focal_mm = 2.0;
		p.bit_depth = depths[d];
		p.photons = 1e9;
		cam_make(&c, &p, 4);
		sat = sim_camera_expose(c.camera, c.wf, c.frame);
		for (s = 0; s < c.width * c.width; s++) {
			/* an n-bit camera's largest code is 2^n - 1 */
			assert_true(c.frame[s] <= top);
			at_top += c.frame[s] == top;
		}
		assert_true(at_top > 16);
		assert_int_equal(sat, at_top);
		cam_free(&c);
	}
}

static void gain_and_offset_map_electrons_to_counts(void **state)
{
	sim_camera_params p;
	const float *e;
	struct cam c;
	int s;

	(void)state;
	noiseless(&p);
	p.n_lenslets = 4;
	p.pixels_per_lenslet = 12;
	p.model = SIM_SPOT_GAUSSIAN;
	p.focal_mm = 2.0;
	p.photons = 4e4;
	p.gain = 2.5;
	p.offset_counts = 100.0;
	p.background_e = 3.0;
	cam_make(&c, &p, 4);
	assert_int_equal(sim_camera_expose(c.camera, c.wf, c.frame), 0);
	e = sim_camera_expected(c.camera);
	for (s = 0; s < c.width * c.width; s++) {
		/* the documented transfer: counts = round(gain (signal +
		 * background) + offset), no noise asked for */
		assert_near(c.frame[s], floor(2.5 * (e[s] + 3.0) + 100.5), 0.5);
	}
	cam_free(&c);
}

static void photon_total_matches_within_poisson(void **state)
{
	const int frames = 400;
	const double photons = 1e5;
	sim_camera_params p;
	struct cam c;
	double sum = 0, sum2 = 0, mean, var;
	int f, s;

	(void)state;
	noiseless(&p);
	p.n_lenslets = 6;
	p.pixels_per_lenslet = 12;
	p.model = SIM_SPOT_GAUSSIAN;
	p.focal_mm = 2.0;
	p.photons = photons;
	p.photon_noise = true;
	p.seed = wt_test_seed(11);
	cam_make(&c, &p, 4);
	for (f = 0; f < frames; f++) {
		double total = 0;

		assert_true(sim_camera_expose(c.camera, c.wf, c.frame) == 0);
		for (s = 0; s < c.width * c.width; s++) {
			total += c.frame[s];
		}
		sum += total;
		sum2 += total * total;
	}
	mean = sum / frames;
	var = (sum2 - frames * mean * mean) / (frames - 1);
	/* A sum of independent Poisson counts is Poisson (Feller, An
	 * Introduction to Probability Theory, vol. 1): mean = variance =
	 * the configured photons.  Mean: within 4 standard errors
	 * sqrt(N / frames); variance: within 4 standard errors of a
	 * sample variance, N sqrt(2 / (frames - 1)). */
	assert_near(mean, photons, 4.0 * sqrt(photons / frames));
	assert_near(var, photons, 4.0 * photons * sqrt(2.0 / (frames - 1)));
	cam_free(&c);
}

/* One lenslet, p x p pixels, geometric spot of sigma_px on axis. */
static void single_lenslet(sim_camera_params *p, int pixels, double sigma_px,
			   double photons)
{
	noiseless(p);
	p->n_lenslets = 1;
	p->pixels_per_lenslet = pixels;
	p->pixel_um = 5.0;
	p->wavelength_nm = 920.0;
	p->focal_mm = focal_mm_for_sigma(sigma_px, pixels, 5.0, 0.92);
	p->model = SIM_SPOT_GAUSSIAN;
	p->photons = photons;
	p->photon_noise = true;
}

static void centroid_noise_photon_limited(void **state)
{
	const int frames = 20000, pixels = 16;
	const double sigma_s = 1.5, n_ph = 1000.0;
	wt_centroid_params cp = {.pixels_per_lenslet = pixels};
	double sx = 0, sy = 0, sxx = 0, syy = 0, vx, vy, expect;
	sim_camera_params p;
	wt_centroider *cen;
	wt_grid *grid;
	wt_error err;
	struct cam c;
	float slopes[2];
	int f;

	(void)state;
	single_lenslet(&p, pixels, sigma_s, n_ph);
	p.seed = wt_test_seed(21);
	cam_make(&c, &p, 8);
	assert_int_equal(wt_grid_lenslets(1, 0.0, 0.5, &grid, &err), 0);
	assert_int_equal(grid->n_valid, 1);
	assert_int_equal(wt_centroid_create(grid, &cp, &cen, &err), 0);
	for (f = 0; f < frames; f++) {
		assert_true(sim_camera_expose(c.camera, c.wf, c.frame) == 0);
		assert_int_equal(
			wt_centroid_frame(cen, c.frame, slopes, NULL, NULL), 0);
		sx += slopes[0];
		sy += slopes[1];
		sxx += (double)slopes[0] * slopes[0];
		syy += (double)slopes[1] * slopes[1];
	}
	vx = (sxx - sx * sx / frames) / (frames - 1);
	vy = (syy - sy * sy / frames) / (frames - 1);
	/* Photon-noise limited centroid variance (sigma_s^2) / N_ph per axis
	 * (Rousset 1999, in Roddier (ed.), Adaptive Optics in Astronomy),
	 * plus 1/12 px^2 for the pixels' binning of each photon's position
	 * (common practice; Sheppard's correction).  5% tolerance: the
	 * estimate's own spread is sqrt(2 / frames) = 1%. */
	expect = (sigma_s * sigma_s + 1.0 / 12.0) / n_ph;
	assert_near(vx, expect, 0.05 * expect);
	assert_near(vy, expect, 0.05 * expect);
	wt_centroid_destroy(cen);
	wt_grid_destroy(grid);
	cam_free(&c);
}

static void centroid_noise_with_read_noise(void **state)
{
	const int frames = 20000, pixels = 8;
	const double sigma_s = 1.0, n_ph = 2000.0, sigma_e = 2.0;
	const double offset = 200.0, x0 = 0.5 * (pixels - 1);
	double sx = 0, sy = 0, sxx = 0, syy = 0, vx, vy, expect, sum_d2;
	sim_camera_params p;
	struct cam c;
	int f, i, j;

	(void)state;
	single_lenslet(&p, pixels, sigma_s, n_ph);
	p.read_noise_e = sigma_e;
	p.offset_counts = offset;
	p.seed = wt_test_seed(31);
	cam_make(&c, &p, 8);
	for (f = 0; f < frames; f++) {
		double w = 0, wx = 0, wy = 0, cx, cy;

		assert_true(sim_camera_expose(c.camera, c.wf, c.frame) == 0);
		/* a plain linear centre of gravity over the whole window,
		 * offset removed and no clamping, which is what the formula
		 * below describes (lib's centroider clamps negative pixels
		 * to zero, which would change the read-noise term) */
		for (j = 0; j < pixels; j++) {
			for (i = 0; i < pixels; i++) {
				double v = c.frame[j * pixels + i] - offset;

				w += v;
				wx += v * i;
				wy += v * j;
			}
		}
		cx = wx / w - x0;
		cy = wy / w - x0;
		sx += cx;
		sy += cy;
		sxx += cx * cx;
		syy += cy * cy;
	}
	vx = (sxx - sx * sx / frames) / (frames - 1);
	vy = (syy - sy * sy / frames) / (frames - 1);
	/*
	 * Read noise: cx = sum_i x_i I_i / N_ph with independent noise of
	 * variance s^2 in every pixel adds sum_i (x_i - x0)^2 s^2 / N_ph^2
	 * (first-order error propagation; Rousset 1999 as above).  Over a
	 * p x p window centred on x0 = (p - 1) / 2, sum_i (x_i - x0)^2 =
	 * p * sum_{k=0}^{p-1} (k - x0)^2 = p * p (p^2 - 1) / 12 =
	 * N (N - 1) / 12 with N = p^2 pixels.  s^2 = sigma_e^2 + 1 / 12:
	 * rounding to whole counts at gain 1 adds a uniform error of
	 * variance 1/12 (Widrow's quantisation model, common practice).
	 */
	sum_d2 = (double)pixels * pixels * (pixels * pixels - 1) / 12.0;
	expect = (sigma_s * sigma_s + 1.0 / 12.0) / n_ph +
		 (sigma_e * sigma_e + 1.0 / 12.0) * sum_d2 / (n_ph * n_ph);
	assert_near(vx, expect, 0.07 * expect);
	assert_near(vy, expect, 0.07 * expect);
	cam_free(&c);
}

static void bad_parameters_are_refused(void **state)
{
	sim_camera_params p;
	sim_camera *cam = NULL;
	sim_pupil *pupil;
	wt_error err;

	(void)state;
	assert_int_equal(sim_pupil_create(4, 4, 0.0, &pupil, &err), 0);
	noiseless(&p);
	p.n_lenslets = 5; /* the pupil grid has 4 */
	assert_int_equal(sim_camera_create(&p, pupil, &cam, &err), -EINVAL);
	noiseless(&p);
	p.n_lenslets = 4;
	p.bit_depth = 17;
	assert_int_equal(sim_camera_create(&p, pupil, &cam, &err), -EINVAL);
	p.bit_depth = 12;
	p.gain = 0.0;
	assert_int_equal(sim_camera_create(&p, pupil, &cam, &err), -EINVAL);
	assert_null(cam);
	sim_pupil_destroy(pupil);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(tilt_moves_spots_by_f_theta),
	cmocka_unit_test(tilt_moves_border_spots_by_f_theta),
	cmocka_unit_test(saturates_at_top_code),
	cmocka_unit_test(gain_and_offset_map_electrons_to_counts),
	cmocka_unit_test(photon_total_matches_within_poisson),
	cmocka_unit_test(centroid_noise_photon_limited),
	cmocka_unit_test(centroid_noise_with_read_noise),
	cmocka_unit_test(bad_parameters_are_refused),
};

WT_TEST_MAIN(tests)
