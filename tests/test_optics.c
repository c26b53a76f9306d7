/*
 * test_optics.c - pupil field, Strehl ratio, PSF and Shack-Hartmann spot
 * rendering of the simulator, against textbook optics.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "sim_optics.h"
#include "sim_rng.h"
#include "wt_zernike.h"

/* Phase c * Z_j on an n x n grid (sim_pupil sample positions), 0 outside
 * the unit disk; amp gets the disk mask. */
static void zernike_map(int n, const int *j, const double *c, int n_modes,
			double *phase, double *amp)
{
	int a, b, k;

	sim_optics_disk(n, 0.0, amp);
	for (b = 0; b < n; b++) {
		for (a = 0; a < n; a++) {
			double x = (a + 0.5 - 0.5 * n) * 2.0 / n;
			double y = (b + 0.5 - 0.5 * n) * 2.0 / n;
			double v = 0.0;

			for (k = 0; k < n_modes && amp[b * n + a] > 0.0; k++) {
				v += c[k] * wt_zernike_xy(j[k], x, y);
			}
			phase[b * n + a] = v;
		}
	}
}

/* ---- Strehl and PSF -------------------------------------------------- */

static void psf_axis_value_is_strehl(void **state)
{
	const int n = 64, nf = 128;
	static const int modes[] = {2, 4, 6, 7, 11};
	static const double coef[] = {0.4, 0.3, -0.25, 0.2, 0.15};
	double *phase = malloc(sizeof(double) * n * n);
	double *amp = malloc(sizeof(double) * n * n);
	double *psf = malloc(sizeof(double) * nf * nf);
	double(*field)[2] = malloc(sizeof(*field) * n * n);
	double s_sum, s_psf, peak, re = 0, im = 0, sa = 0, total = 0, sa2 = 0;
	sim_psf *p;
	int k;

	(void)state;
	assert_non_null(phase);
	assert_non_null(amp);
	assert_non_null(psf);
	assert_non_null(field);
	zernike_map(n, modes, coef, 5, phase, amp);
	assert_int_equal(sim_psf_create(n, nf, &p, NULL), 0);
	assert_int_equal(sim_psf_compute(p, phase, amp, psf, &s_psf, &peak), 0);
	s_sum = sim_optics_strehl((size_t)n * n, phase, amp);
	sim_optics_field((size_t)n * n, phase, amp, field);
	for (k = 0; k < n * n; k++) {
		re += field[k][0];
		im += field[k][1];
		sa += amp[k];
		sa2 += amp[k] * amp[k];
	}
	for (k = 0; k < nf * nf; k++) {
		total += psf[k];
	}
	print_message("Strehl: pupil mean %.6f, PSF axis %.6f, PSF peak %.6f\n",
		      s_sum, s_psf, peak);
	/* S = |<exp(i phi)>|^2 equals the normalised on-axis PSF (Born &
	 * Wolf 9.1; common practice): within 1e-3. */
	assert_true(fabs(s_sum - s_psf) < 1e-3);
	assert_true(fabs(psf[(nf / 2) * nf + nf / 2] - s_psf) < 1e-12);
	/* The axis value is |sum of the field|^2 over the unaberrated peak
	 * (zero frequency of the DFT, common practice). */
	assert_true(fabs((re * re + im * im) / (sa * sa) - s_psf) < 1e-9);
	/* Parseval: sum of |F|^2 = n_fft^2 sum |f|^2 (common practice). */
	assert_true(fabs(total / ((double)nf * nf * sa2 / (sa * sa)) - 1.0) <
		    1e-9);
	assert_true(peak >= s_psf);
	assert_int_equal(sim_psf_create(n, nf - 1, &p, NULL), -EINVAL);
	sim_psf_destroy(p);
	free(phase);
	free(amp);
	free(psf);
	free(field);
}

/* J1 from Bessel's integral (1/pi) int_0^pi cos(t - x sin t) dt (A&S
 * 9.1.21), trapezoidal rule (periodic integrand: exponential convergence). */
static double bessel_j1(double x)
{
	const int n = 64;
	double sum = 0.0;
	int k;

	for (k = 0; k <= n; k++) {
		double t = M_PI * k / n;

		sum += (k == 0 || k == n ? 0.5 : 1.0) * cos(t - x * sin(t));
	}
	return sum / n;
}

static void unaberrated_psf_is_airy(void **state)
{
	/* Circular pupil: I(x) = [2 J1(x) / x]^2, x = pi D theta / lambda
	 * (Airy 1835; Born & Wolf 8.5.2); one PSF pixel is lambda / (n_fft
	 * dx), so x = pi n k / n_fft at pixel k from the axis.  The first
	 * dark ring (x = 3.8317) is at 4.88 px here. */
	const int n = 64, nf = 256;
	double *amp = malloc(sizeof(double) * n * n);
	double *phase = calloc((size_t)n * n, sizeof(double));
	double *psf = malloc(sizeof(double) * nf * nf);
	double worst = 0.0;
	sim_psf *p;
	int k;

	(void)state;
	assert_non_null(amp);
	assert_non_null(phase);
	assert_non_null(psf);
	assert_true(fabs(bessel_j1(3.8317)) < 1e-4); /* A&S Table 9.5 */
	assert_true(fabs(bessel_j1(1.0) - 0.4400505857) < 1e-9); /* 9.1 */
	sim_optics_disk(n, 0.0, amp);
	assert_int_equal(sim_psf_create(n, nf, &p, NULL), 0);
	assert_int_equal(sim_psf_compute(p, phase, amp, psf, NULL, NULL), 0);
	for (k = 1; k <= 16; k++) {
		double x = M_PI * n * k / nf, airy = 2.0 * bessel_j1(x) / x;
		const double *row = psf + (size_t)(nf / 2) * nf + nf / 2;
		double d = fabs(row[k] - airy * airy);

		/* the same along y (square grid symmetry) */
		assert_true(
			fabs(row[k] - psf[(size_t)(nf / 2 + k) * nf + nf / 2]) <
			1e-12);
		if (d > worst) {
			worst = d;
		}
	}
	print_message("Airy pattern: worst difference %.2e of the peak\n",
		      worst);
	/* discretised disk of 64 samples: 2e-3 of the peak */
	assert_true(worst < 2e-3);
	assert_true(fabs(psf[(nf / 2) * nf + nf / 2] - 1.0) < 1e-12);
	sim_psf_destroy(p);
	free(amp);
	free(phase);
	free(psf);
}

static void defocus_strehl_matches_mahajan(void **state)
{
	/* Mahajan, JOSA 72, 1258 (1982): pure defocus of c4 rad RMS (Noll)
	 * gives S = [sin(sqrt3 c4) / (sqrt3 c4)]^2, tabulated here. */
	static const double c4[] = {0.2, 0.5, 1.0};
	static const double table[] = {0.9606, 0.7737, 0.3247};
	const int n = 512, j4 = 4;
	double *phase = malloc(sizeof(double) * n * n);
	double *amp = malloc(sizeof(double) * n * n);
	size_t i;

	(void)state;
	assert_non_null(phase);
	assert_non_null(amp);
	for (i = 0; i < 3; i++) {
		double u = sqrt(3.0) * c4[i];
		double exact = (sin(u) / u) * (sin(u) / u);
		double s;

		zernike_map(n, &j4, &c4[i], 1, phase, amp);
		s = sim_optics_strehl((size_t)n * n, phase, amp);
		print_message("c4 %.1f: Strehl %.5f formula %.5f table %.4f "
			      "rms %.4f\n",
			      c4[i], s, exact, table[i],
			      sim_optics_rms((size_t)n * n, phase, amp));
		assert_true(fabs(exact - table[i]) < 1e-4);
		assert_true(fabs(s - exact) < 1e-3);
	}
	free(phase);
	free(amp);
}

static void marechal_holds_below_03_rad(void **state)
{
	/* Marechal 1947 (Born & Wolf 9.1): S ~ exp(-sigma^2) for small RMS
	 * sigma; within 1 % for sigma <= 0.3 rad, single modes and mixes. */
	const int n = 128;
	double *phase = malloc(sizeof(double) * n * n);
	double *amp = malloc(sizeof(double) * n * n);
	sim_rng rng;
	int j, t;

	(void)state;
	assert_non_null(phase);
	assert_non_null(amp);
	sim_rng_seed(&rng, wt_test_seed(41));
	for (t = 0; t < 3 * 12; t++) {
		double sigma = 0.1 * (t % 3 + 1), s, rms, m;
		int modes[10];
		double coef[10], norm = 0.0;
		int n_modes;

		if (t < 3 * 8) {
			/* one mode, Z4 ... Z11 */
			n_modes = 1;
			modes[0] = 4 + t / 3;
			coef[0] = sigma;
		} else {
			/* random mix of Z4 ... Z13, scaled to sigma */
			n_modes = 10;
			for (j = 0; j < 10; j++) {
				modes[j] = 4 + j;
				coef[j] = sim_rng_normal(&rng);
				norm += coef[j] * coef[j];
			}
			for (j = 0; j < 10; j++) {
				coef[j] *= sigma / sqrt(norm);
			}
		}
		zernike_map(n, modes, coef, n_modes, phase, amp);
		s = sim_optics_strehl((size_t)n * n, phase, amp);
		rms = sim_optics_rms((size_t)n * n, phase, amp);
		m = sim_optics_marechal(rms);
		if (t % 3 == 2) {
			print_message("modes %s%d: sigma %.3f S %.5f "
				      "exp(-s^2) %.5f\n",
				      n_modes > 1 ? "mix from Z" : "Z",
				      modes[0], rms, s, m);
		}
		assert_true(fabs(m / s - 1.0) < 0.01);
	}
	free(phase);
	free(amp);
}

/* ---- spots ---------------------------------------------------------- */

/* A sensor like a common bench: 150 um lenslets, 5 mm focal length, 7.5 um
 * pixels (20 per lenslet), 0.6 um light: lambda f / pitch = 2.67 px. */
static sim_spot_params bench_params(int n_lenslets, int samples)
{
	sim_spot_params p = {
		.model = SIM_SPOT_DIFFRACTION,
		.n_lenslets = n_lenslets,
		.pixels_per_lenslet = 20,
		.phase_samples = samples,
		.pitch_um = 150.0,
		.focal_um = 5000.0,
		.wavelength_um = 0.6,
		.pixel_um = 7.5,
	};
	return p;
}

/* Smooth aberration over lenslet (ic, jc), in local um coordinates
 * (u, v) from its centre: tilt + defocus + astigmatism + coma-like cubic
 * + a trefoil-like term.  phi in radians. */
struct aberr {
	double tx, ty, def, ast, cx, tre;
};

static double aberr_phase(const struct aberr *w, double u, double v)
{
	return w->tx * u + w->ty * v + w->def * (u * u + v * v) +
	       w->ast * (u * u - v * v) + w->cx * u * (u * u + v * v) +
	       w->tre * (u * u * u - 3.0 * u * v * v);
}

/* Analytic mean gradient over the square |u|, |v| <= h. */
static void aberr_mean_gradient(const struct aberr *w, double h, double *gx,
				double *gy)
{
	double m2 = h * h / 3.0; /* mean of u^2 over [-h, h] */

	/* d/du: tx + 2 def u + 2 ast u + cx (3u^2 + v^2) + tre 3 (u^2 - v^2) */
	*gx = w->tx + w->cx * (3.0 * m2 + m2);
	/* d/dv: ty + 2 def v - 2 ast v + cx 2uv - tre 6 uv */
	*gy = w->ty;
}

static void fill_map(const sim_spot_params *p, int ic, int jc,
		     const struct aberr *w, double *phase)
{
	int n = p->n_lenslets * p->phase_samples, a, b;
	double ds = p->pitch_um / p->phase_samples;

	for (b = 0; b < n; b++) {
		for (a = 0; a < n; a++) {
			double u = (a + 0.5) * ds - (ic + 0.5) * p->pitch_um;
			double v = (b + 0.5) * ds - (jc + 0.5) * p->pitch_um;

			phase[(size_t)b * n + a] = aberr_phase(w, u, v);
		}
	}
}

static void frame_moments(const float *f, int n, double *sum, double *cx,
			  double *cy)
{
	double s = 0, sx = 0, sy = 0;
	int a, b;

	for (b = 0; b < n; b++) {
		for (a = 0; a < n; a++) {
			double v = f[(size_t)b * n + a];

			s += v;
			sx += v * a;
			sy += v * b;
		}
	}
	*sum = s;
	*cx = sx / s;
	*cy = sy / s;
}

static void spot_centroid_is_focal_times_mean_gradient(void **state)
{
	/* One lenslet in the middle of a 19 x 19 frame that holds its whole
	 * FFT plane (343 pixels across, see below). */
	const int nl = 19, s = 32, ic = 9;
	sim_spot_params p = bench_params(nl, s);
	int col = ic, row = ic, n_map = nl * s, n_frame = nl * 20, t;
	double h = 0.5 * p.pitch_um;
	double *phase = malloc(sizeof(double) * n_map * n_map);
	float *frame = malloc(sizeof(float) * n_frame * n_frame);
	/* radians per um; phase differences across the lenslet of a few
	 * radians for each term */
	static const struct aberr cases[] = {
		{0.04, -0.025, 0.0, 0.0, 0.0, 0.0},
		{0.04, -0.025, 4e-4, 0.0, 0.0, 0.0},
		{-0.03, 0.05, 2e-4, 3e-4, 2e-6, 0.0},
		{0.03, 0.015, -3e-4, 2e-4, -2e-6, 2e-6},
	};
	sim_spots *sp;
	sim_spot_layout lay;

	(void)state;
	assert_non_null(phase);
	assert_non_null(frame);
	/* The periodic FFT plane folds the sinc^2 wings of the lenslet's
	 * sharp edge back in, which pulls the centre of gravity towards the
	 * axis by about 1 / (2 x pupil samples) of the shift: sample the
	 * lenslet finely (120 samples, 0.4 %). */
	p.fov_windows = 8;
	p.min_pupil_samples = 120;
	assert_int_equal(sim_spots_create(&p, &col, &row, 1, &sp, NULL), 0);
	sim_spots_layout(sp, &lay);
	print_message("layout: n_fft %d, q %d, pupil %.2f samples of %.3f "
		      "um\n",
		      lay.n_fft, lay.oversample, lay.pupil_samples, lay.dx_um);
	assert_true(lay.n_fft <= n_frame * lay.oversample);
	for (t = 0; t < (int)(sizeof(cases) / sizeof(cases[0])); t++) {
		double gx, gy, ex, ey, sum, cx, cy, centre = ic * 20 + 9.5;
		float truth[2];

		fill_map(&p, ic, ic, &cases[t], phase);
		assert_int_equal(sim_spots_render(sp, phase, NULL, 1e6, frame),
				 0);
		frame_moments(frame, n_frame, &sum, &cx, &cy);
		aberr_mean_gradient(&cases[t], h, &gx, &gy);
		/* spot shift f * dW/dx with W = phi lambda / 2 pi, in px */
		ex = p.focal_um * p.wavelength_um / (2.0 * M_PI) * gx /
		     p.pixel_um;
		ey = p.focal_um * p.wavelength_um / (2.0 * M_PI) * gy /
		     p.pixel_um;
		sim_spots_mean_slopes(sp, phase, NULL, 1e6, truth, NULL);
		print_message("case %d: COG (%.4f, %.4f) px, f x mean "
			      "gradient (%.4f, %.4f), truth (%.4f, %.4f), "
			      "flux %.5f\n",
			      t, cx - centre, cy - centre, ex, ey, truth[0],
			      truth[1], sum / 1e6);
		/* First-moment theorem of Fraunhofer diffraction (Teague
		 * 1982; Goodman, Introduction to Fourier Optics): the
		 * whole-plane centre of gravity is f x the mean wavefront
		 * gradient, within 1 % of the shift. */
		assert_true(hypot(cx - centre - ex, cy - centre - ey) <
			    0.01 * hypot(ex, ey));
		/* The geometric truth is that same mean gradient, up to the
		 * O(ds^2) error of the bilinear phase between map samples
		 * (ds = pitch / 32): 0.5 %. */
		assert_true(hypot(truth[0] - ex, truth[1] - ey) <
			    5e-3 * hypot(ex, ey));
		/* Parseval: the light is conserved (common practice). */
		assert_true(fabs(sum / 1e6 - 1.0) < 1e-3);
	}
	sim_spots_destroy(sp);
	free(phase);
	free(frame);
}

/* (1/a) sinc^2(x / a) integrated over [x0, x1] by Simpson's rule. */
static double sinc2_bin(double x0, double x1, double a)
{
	const int n = 200;
	double h = (x1 - x0) / n, sum = 0.0;
	int k;

	for (k = 0; k <= n; k++) {
		double x = (x0 + k * h) / a, v;

		v = fabs(x) < 1e-12 ? 1.0 : sin(M_PI * x) / (M_PI * x);
		sum += v * v * (k == 0 || k == n ? 1 : (k % 2 ? 4 : 2));
	}
	return sum * h / 3.0 / a;
}

static void flat_spot_is_pixel_integrated_sinc2(void **state)
{
	/* Fraunhofer pattern of a square aperture of side d at focal length
	 * f: sinc^2(x d / (lambda f)) sinc^2(y d / (lambda f)) (Goodman,
	 * Introduction to Fourier Optics, 4.4.1); the pixels hold its
	 * integral over each pixel (central 6 x 6 pixels, 2 % of the peak
	 * pixel, oversampled 4x). */
	sim_spot_params p = bench_params(3, 16);
	int col = 1, row = 1, n_frame = 60, a, b;
	double *phase = calloc(48 * 48, sizeof(double));
	float *frame = malloc(sizeof(float) * n_frame * n_frame);
	double lfd = p.wavelength_um * p.focal_um / p.pitch_um / p.pixel_um;
	double worst = 0.0, peak;
	sim_spot_layout lay;
	sim_spots *sp;

	(void)state;
	assert_non_null(phase);
	assert_non_null(frame);
	/* q = 4: lambda f / pitch = 10.67 samples; 24 pupil samples across
	 * make a 256 transform with the lenslet edges on sample edges. */
	p.oversample = 4;
	p.fov_windows = 3;
	p.min_pupil_samples = 24;
	assert_int_equal(sim_spots_create(&p, &col, &row, 1, &sp, NULL), 0);
	sim_spots_layout(sp, &lay);
	assert_int_equal(lay.n_fft, 256);
	assert_true(fabs(lay.pupil_samples - 24.0) < 1e-9);
	assert_int_equal(sim_spots_render(sp, phase, NULL, 1.0, frame), 0);
	/* axis at pixel edge 30 (window 20..39, centre 29.5 in index) */
	peak = sinc2_bin(0.0, 1.0, lfd) * sinc2_bin(0.0, 1.0, lfd);
	for (b = 27; b < 33; b++) {
		for (a = 27; a < 33; a++) {
			double e = sinc2_bin(a - 30.0, a - 29.0, lfd) *
				   sinc2_bin(b - 30.0, b - 29.0, lfd);
			double d = fabs(frame[b * n_frame + a] - e) / peak;

			if (d > worst) {
				worst = d;
			}
		}
	}
	print_message("flat spot: peak pixel %.5f (analytic %.5f), worst "
		      "difference %.4f of the peak\n",
		      frame[29 * n_frame + 29], peak, worst);
	assert_true(worst < 0.02);
	/* The four pixels around the axis are equal (symmetry). */
	assert_true(fabs(frame[29 * n_frame + 29] - frame[30 * n_frame + 30]) <
		    1e-5 * peak);
	assert_true(fabs(frame[29 * n_frame + 30] - frame[30 * n_frame + 29]) <
		    1e-5 * peak);
	sim_spots_destroy(sp);
	free(phase);
	free(frame);
}

static void gaussian_spot_sits_at_mean_gradient(void **state)
{
	const int nl = 5, s = 32, ic = 2;
	sim_spot_params p = bench_params(nl, s);
	int col = ic, row = ic, n_frame = nl * 20;
	double *phase = malloc(sizeof(double) * 160 * 160);
	float *frame = malloc(sizeof(float) * n_frame * n_frame);
	struct aberr w = {0.03, -0.02, 2e-4, -1e-4, 3e-6, 0.0};
	double gx, gy, ex, ey, sum, cx, cy, centre = ic * 20 + 9.5;
	sim_spots *sp;

	(void)state;
	assert_non_null(phase);
	assert_non_null(frame);
	p.model = SIM_SPOT_GAUSSIAN;
	assert_int_equal(sim_spots_create(&p, &col, &row, 1, &sp, NULL), 0);
	fill_map(&p, ic, ic, &w, phase);
	assert_int_equal(sim_spots_render(sp, phase, NULL, 5000.0, frame), 0);
	frame_moments(frame, n_frame, &sum, &cx, &cy);
	aberr_mean_gradient(&w, 0.5 * p.pitch_um, &gx, &gy);
	ex = p.focal_um * p.wavelength_um / (2.0 * M_PI) * gx / p.pixel_um;
	ey = p.focal_um * p.wavelength_um / (2.0 * M_PI) * gy / p.pixel_um;
	print_message("gaussian: COG (%.4f, %.4f) expected (%.4f, %.4f) sum "
		      "%.3f\n",
		      cx - centre, cy - centre, ex, ey, sum);
	/* Geometric optics: the spot sits at f x mean slope (the same
	 * first-moment theorem); erf bins sum to the flux. */
	assert_true(hypot(cx - centre - ex, cy - centre - ey) <
		    2e-3 * hypot(ex, ey));
	assert_true(fabs(sum / 5000.0 - 1.0) < 1e-4);
	/* Width: the FWHM of sinc^2 (half power at x = 0.44295, found here
	 * by bisection of sin^2(pi x) / (pi x)^2 = 1/2) as a Gaussian sigma
	 * FWHM / sqrt(8 ln 2); pixel binning adds 1/12 px^2 (Sheppard's
	 * correction, common practice) to the variance. */
	{
		double lo = 0.1, hi = 0.9, var = 0.0, sigma;
		int a, b, k;

		for (k = 0; k < 60; k++) {
			double mid = 0.5 * (lo + hi);
			double v = sin(M_PI * mid) / (M_PI * mid);

			if (v * v > 0.5) {
				lo = mid;
			} else {
				hi = mid;
			}
		}
		sigma = 2.0 * lo / sqrt(8.0 * log(2.0)) * p.wavelength_um *
			p.focal_um / (p.pitch_um * p.pixel_um);
		for (b = 0; b < n_frame; b++) {
			for (a = 0; a < n_frame; a++) {
				var += frame[b * n_frame + a] * (a - cx) *
				       (a - cx);
			}
		}
		var /= sum;
		print_message("gaussian: variance %.4f px^2, expected %.4f\n",
			      var, sigma * sigma + 1.0 / 12.0);
		assert_true(fabs(var / (sigma * sigma + 1.0 / 12.0) - 1.0) <
			    1e-3);
	}
	sim_spots_destroy(sp);
	free(phase);
	free(frame);
}

static void batched_render_equals_single_lenslets(void **state)
{
	/* 6 x 6 = 36 lenslets: one batch of 32 and a remainder of 4. */
	const int nl = 6, s = 8, n_map = nl * s, n_frame = nl * 20;
	sim_spot_params p = bench_params(nl, s);
	double *phase = malloc(sizeof(double) * n_map * n_map);
	double *amp = malloc(sizeof(double) * n_map * n_map);
	float *all = malloc(sizeof(float) * n_frame * n_frame);
	float *one = malloc(sizeof(float) * n_frame * n_frame);
	float *acc = calloc((size_t)n_frame * n_frame, sizeof(float));
	float slopes[72], flux[36];
	sim_spots *sp;
	sim_spot_layout lay;
	sim_rng rng;
	double worst = 0.0, top = 0.0, total;
	int k, q;

	(void)state;
	assert_non_null(phase);
	assert_non_null(amp);
	assert_non_null(all);
	assert_non_null(one);
	assert_non_null(acc);
	sim_rng_seed(&rng, wt_test_seed(51));
	sim_optics_disk(n_map, 0.0, amp);
	for (k = 0; k < n_map * n_map; k++) {
		int a = k % n_map, b = k / n_map;

		phase[k] = 0.3 * sin(0.2 * a + 0.1 * b) +
			   0.002 * (a - 20.0) * (b - 25.0) +
			   0.2 * sim_rng_uniform(&rng);
	}
	assert_int_equal(sim_spots_create(&p, NULL, NULL, 0, &sp, NULL), 0);
	sim_spots_layout(sp, &lay);
	assert_int_equal(lay.batch, 32);
	assert_int_equal(sim_spots_render(sp, phase, amp, 100.0, all), 0);
	assert_int_equal(
		sim_spots_mean_slopes(sp, phase, amp, 100.0, slopes, flux), 0);
	sim_spots_destroy(sp);
	for (k = 0; k < nl * nl; k++) {
		int col = k % nl, row = k / nl;

		assert_int_equal(sim_spots_create(&p, &col, &row, 1, &sp, NULL),
				 0);
		sim_spots_render(sp, phase, amp, 100.0, one);
		for (q = 0; q < n_frame * n_frame; q++) {
			acc[q] += one[q];
		}
		sim_spots_destroy(sp);
	}
	for (q = 0; q < n_frame * n_frame; q++) {
		if (fabs(all[q] - acc[q]) > worst) {
			worst = fabs(all[q] - acc[q]);
		}
		if (acc[q] > top) {
			top = acc[q];
		}
	}
	/* Same arithmetic lenslet by lenslet (common practice): float
	 * rounding only. */
	assert_true(worst < 1e-5 * top);
	/* A central lenslet collects all its light, a corner one a sliver,
	 * and all of them the pupil's area pi R^2 = 9 pi lenslets (common
	 * practice; 3 %, the mask's edge being interpolated). */
	total = 0.0;
	for (k = 0; k < nl * nl; k++) {
		total += flux[k];
	}
	print_message("flux: centre %.3f corner %.3f total %.1f (disk %.1f)\n",
		      flux[2 * nl + 2], flux[0], total, 900.0 * M_PI);
	assert_true(fabs(flux[2 * nl + 2] - 100.0) < 1e-3);
	assert_true(flux[0] >= 0.0f && flux[0] < 10.0f);
	assert_true(fabs(total / (900.0 * M_PI) - 1.0) < 0.03);
	sim_spots_destroy(NULL);
	free(phase);
	free(amp);
	free(all);
	free(one);
	free(acc);
}

static void spots_refuse_bad_parameters(void **state)
{
	sim_spot_params p = bench_params(4, 8), q;
	sim_spots *sp = NULL;
	wt_error err;
	int col = 5, row = 0;

	(void)state;
	q = p;
	q.pixel_um = 7.0; /* 150 / 7 is not 20 */
	assert_int_equal(sim_spots_create(&q, NULL, NULL, 0, &sp, &err),
			 -EINVAL);
	q = p;
	q.focal_um = 0.0;
	assert_int_equal(sim_spots_create(&q, NULL, NULL, 0, &sp, &err),
			 -EINVAL);
	q = p;
	q.model = 7;
	assert_int_equal(sim_spots_create(&q, NULL, NULL, 0, &sp, &err),
			 -EINVAL);
	assert_int_equal(sim_spots_create(&p, &col, &row, 1, &sp, &err),
			 -EINVAL);
	assert_null(sp);
	/* 0.05 px per radian ... lenslet pitch: f lambda / (2 pi pixel pitch)
	 */
	assert_true(fabs(sim_spots_pixels_per_radian(&p) -
			 5000.0 * 0.6 / (2.0 * M_PI * 7.5 * 150.0)) < 1e-12);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(psf_axis_value_is_strehl),
	cmocka_unit_test(unaberrated_psf_is_airy),
	cmocka_unit_test(defocus_strehl_matches_mahajan),
	cmocka_unit_test(marechal_holds_below_03_rad),
	cmocka_unit_test(spot_centroid_is_focal_times_mean_gradient),
	cmocka_unit_test(flat_spot_is_pixel_integrated_sinc2),
	cmocka_unit_test(gaussian_spot_sits_at_mean_gradient),
	cmocka_unit_test(batched_render_equals_single_lenslets),
	cmocka_unit_test(spots_refuse_bad_parameters),
};

WT_TEST_MAIN(tests)
