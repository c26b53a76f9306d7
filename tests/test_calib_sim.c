/*
 * test_calib_sim.c - Hadamard against one-actuator-at-a-time calibration
 * on the simulator (sim/ linked in: sim_world exposes a frame of the
 * simulated mirror and camera, wt_centroid measures it, wt_calib drives
 * the patterns; the same pipeline as wavetrimd's loop, without ZeroMQ, so
 * the runs take seconds).  Done at the library level rather than through
 * the daemon so that many runs fit in a short test.
 *
 * 1. Linear regime, white measurement noise.  The camera's own noise is
 *    switched off so that each frame is a deterministic function of the
 *    command, and independent Gaussian noise of one standard deviation
 *    is added to every slope of every frame (white: independent across
 *    slopes and frames).  The error of each noisy matrix is taken against
 *    the noiseless matrix of the same patterns and amplitude (which holds
 *    the same sensor nonlinearity, if any, so only the noise is left).
 *    The weighing-design result (Harwit & Sloane 1979, Hadamard Transform
 *    Optics, ch. 1; Kasper et al. 2004, JOSA A 21, 1004): the error
 *    variance times the frames spent is smaller for Hadamard patterns by
 *    the factor n (the number of actuators), within 10 % as the issue
 *    asks.
 *
 * 2. Leaving the linear range.  With every actuator displaced at once the
 *    wavefront of a Hadamard pattern is up to n influence functions deep,
 *    so its slopes are far larger than one poke's, and the sensor's
 *    response stops being linear (the spots of a lenslet grow, move
 *    towards the window edge and get cut by it) much earlier.  Push-pull
 *    cancels the even orders for both designs; the odd ones stay, and
 *    for Hadamard they are made of every actuator together, so they do
 *    not average away: a bias that grows with the amplitude.  The case
 *    prints, per amplitude, the RMS bias of each design's noiseless
 *    matrix against the small-amplitude single-poke one (the linear
 *    reference), and checks that the Hadamard bias exceeds the single
 *    poke's at large amplitude (the mechanism above; Kasper et al. 2004
 *    discuss the same limit: common practice to calibrate Hadamard
 *    patterns at a smaller amplitude).
 */
#include "wt_test.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "sim_world.h"
#include "wt_calib.h"
#include "wt_centroid.h"
#include "wt_config.h"
#include "wt_geometry.h"

struct bench {
	wt_config *cfg;
	sim_world *w;
	wt_grid *lenslets;
	wt_centroider *cen;
	uint16_t *frame;
	float *slopes, *cmd;
	uint8_t *valid;
	int n_act, n_slopes;
};

static void set(wt_config *cfg, const char *key, const char *value)
{
	wt_error err;

	if (wt_config_set(cfg, key, value, &err) != 0) {
		fail_msg("%s", err.msg);
	}
}

static void bench_init(struct bench *b)
{
	wt_error err;
	wt_centroid_params cp;
	int side;

	memset(b, 0, sizeof(*b));
	assert_int_equal(wt_config_create(&b->cfg, NULL), 0);
	if (wt_config_load(b->cfg, WT_SOURCE_DIR "/config/demo.ini", &err)) {
		fail_msg("%s", err.msg);
	}
	set(b->cfg, "sensor.lenslets", "8");
	set(b->cfg, "mirror.actuators", "6");
	set(b->cfg, "mirror.pupil_pitches", "5");
	set(b->cfg, "sample.zernike", "");
	set(b->cfg, "camera.photon_noise", "false");
	set(b->cfg, "camera.read_noise_e", "0");
	if (sim_world_create(b->cfg, &b->w, &err) != 0) {
		fail_msg("%s", err.msg);
	}
	assert_int_equal(
		wt_grid_lenslets(
			(int)wt_config_int(b->cfg, WT_OPT_SENSOR_LENSLETS),
			wt_config_double(b->cfg, WT_OPT_SENSOR_OBSCURATION),
			wt_config_double(b->cfg, WT_OPT_SENSOR_MIN_FILL),
			&b->lenslets, NULL),
		0);
	cp.pixels_per_lenslet =
		(int)wt_config_int(b->cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	cp.background =
		(float)wt_config_double(b->cfg, WT_OPT_SENSOR_BACKGROUND);
	cp.threshold = (float)wt_config_double(b->cfg, WT_OPT_SENSOR_THRESHOLD);
	cp.min_flux = (float)wt_config_double(b->cfg, WT_OPT_SENSOR_MIN_FLUX);
	assert_int_equal(wt_centroid_create(b->lenslets, &cp, &b->cen, NULL),
			 0);
	side = sim_world_width(b->w);
	b->n_act = sim_world_actuators(b->w);
	b->n_slopes = 2 * b->lenslets->n_valid;
	b->frame = malloc(sizeof(uint16_t) * (size_t)side * side);
	b->slopes = malloc(sizeof(float) * (size_t)b->n_slopes);
	b->valid = malloc((size_t)b->n_slopes / 2);
	b->cmd = calloc((size_t)b->n_act, sizeof(float));
	assert_non_null(b->frame);
	assert_non_null(b->slopes);
	assert_non_null(b->valid);
	assert_non_null(b->cmd);
}

static void bench_free(struct bench *b)
{
	wt_centroid_destroy(b->cen);
	wt_grid_destroy(b->lenslets);
	sim_world_destroy(b->w);
	wt_config_destroy(b->cfg);
	free(b->frame);
	free(b->slopes);
	free(b->valid);
	free(b->cmd);
}

/*
 * One matrix run with these patterns and amplitude, white slope noise of
 * standard deviation sigma; D (n_slopes x n_act) copied out.  Returns the
 * frames it spent measuring (the first frame, which only shows the
 * previous command, not counted).
 */
static long measure(struct bench *b, int patterns, double amplitude,
		    int average, double sigma, double *D)
{
	wt_calib_params p = {.amplitude = amplitude,
			     .settle = 0,
			     .average = average,
			     .patterns = patterns};
	float *flat = calloc((size_t)b->n_act, sizeof(float));
	wt_calib *c;
	long frames = 0;
	int rc, i;

	assert_non_null(flat);
	assert_int_equal(wt_calib_create(b->n_act, b->n_slopes, &c, NULL), 0);
	assert_int_equal(wt_calib_start(c, WT_CALIB_MATRIX, &p, flat, NULL,
					NULL, NULL),
			 0);
	memset(b->cmd, 0, sizeof(float) * (size_t)b->n_act);
	do {
		/* The command answered to the last frame is in force for
		 * this exposure: a delay of one frame, settle 0 is enough
		 * (lib/wt_calib.h). */
		assert_int_equal(
			sim_mirror_apply(sim_world_mirror(b->w), b->cmd), 0);
		assert_int_equal(sim_world_expose(b->w, b->frame, NULL), 0);
		assert_true(wt_centroid_frame(b->cen, b->frame, b->slopes, NULL,
					      b->valid) >= 0);
		for (i = 0; sigma > 0 && i < b->n_slopes; i++) {
			b->slopes[i] += (float)(sigma * wt_rng_gauss());
		}
		rc = wt_calib_step(c, b->slopes, b->valid, b->cmd);
		assert_true(rc >= 0);
		frames++;
	} while (rc == WT_CALIB_RUNNING);
	assert_int_equal(wt_calib_missing(c), 0);
	memcpy(D, wt_calib_interaction(c),
	       sizeof(double) * (size_t)b->n_slopes * b->n_act);
	wt_calib_destroy(c);
	free(flat);
	return frames - 1;
}

static double mean_sq_diff(const double *a, const double *b, size_t n)
{
	double s = 0;

	for (size_t i = 0; i < n; i++) {
		s += (a[i] - b[i]) * (a[i] - b[i]);
	}
	return s / (double)n;
}

static void hadamard_gains_the_factor_n_in_the_linear_regime(void **state)
{
	const double a = 0.05, sigma = 0.05;
	const int repeats = 3;
	struct bench b;
	double *D0s, *D0h, *D;
	double vs = 0, vh = 0, gain;
	long fs = 0, fh = 0;
	size_t nm;

	(void)state;
	wt_rng_seed(wt_test_seed(2004));
	bench_init(&b);
	nm = (size_t)b.n_slopes * b.n_act;
	D0s = malloc(sizeof(double) * nm);
	D0h = malloc(sizeof(double) * nm);
	D = malloc(sizeof(double) * nm);
	assert_non_null(D0s);
	assert_non_null(D0h);
	assert_non_null(D);
	measure(&b, WT_CALIB_SINGLE, a, 1, 0, D0s);
	measure(&b, WT_CALIB_HADAMARD, a, 1, 0, D0h);
	for (int r = 0; r < repeats; r++) {
		fs = measure(&b, WT_CALIB_SINGLE, a, 1, sigma, D);
		vs += mean_sq_diff(D, D0s, nm) / repeats;
		fh = measure(&b, WT_CALIB_HADAMARD, a, 1, sigma, D);
		vh += mean_sq_diff(D, D0h, nm) / repeats;
	}
	gain = (vs * (double)fs) / (vh * (double)fh);
	printf("calib_sim: %d actuators, %d slopes, a = %g, sigma = %g px: "
	       "variance x frames single %.4g (%ld frames), Hadamard %.4g "
	       "(%ld frames), gain %.2f = %.3f n\n",
	       b.n_act, b.n_slopes, a, sigma, vs * (double)fs, fs,
	       vh * (double)fh, fh, gain, gain / b.n_act);
	/* Single pokes: var = n sigma^2 / (a^2 F) per entry with F = 2 n A
	 * frames (push-pull standard error of a mean, common practice). */
	assert_float_equal(vs * (double)fs / (b.n_act * sigma * sigma /
					     (a * a)),
			   1.0, 0.10);
	/* Harwit & Sloane 1979; Kasper et al. 2004: the factor n, 10 %. */
	assert_float_equal(gain / b.n_act, 1.0, 0.10);
	free(D0s);
	free(D0h);
	free(D);
	bench_free(&b);
}

static void hadamard_loses_its_gain_outside_the_linear_range(void **state)
{
	static const double amps[] = {0.02, 0.1, 0.2, 0.4, 0.8};
	struct bench b;
	double *ref, *D, ref_rms = 0, bias_s = 0, bias_h = 0;
	size_t nm, i;

	(void)state;
	bench_init(&b);
	/* Many photons and 16 bits: the noiseless camera's rounding to whole
	 * counts stays far under the nonlinearity measured here. */
	sim_world_destroy(b.w);
	set(b.cfg, "camera.photons", "2e7");
	set(b.cfg, "camera.bit_depth", "16");
	assert_int_equal(sim_world_create(b.cfg, &b.w, NULL), 0);
	nm = (size_t)b.n_slopes * b.n_act;
	ref = malloc(sizeof(double) * nm);
	D = malloc(sizeof(double) * nm);
	assert_non_null(ref);
	assert_non_null(D);
	/* The linear reference: single pokes at the smallest amplitude. */
	measure(&b, WT_CALIB_SINGLE, amps[0], 1, 0, ref);
	for (i = 0; i < nm; i++) {
		ref_rms += ref[i] * ref[i] / (double)nm;
	}
	ref_rms = sqrt(ref_rms);
	printf("calib_sim: RMS bias of the noiseless matrix against single "
	       "pokes at a = %g (RMS entry %.4g):\n",
	       amps[0], ref_rms);
	for (size_t k = 0; k < sizeof(amps) / sizeof(amps[0]); k++) {
		measure(&b, WT_CALIB_SINGLE, amps[k], 1, 0, D);
		bias_s = sqrt(mean_sq_diff(D, ref, nm)) / ref_rms;
		measure(&b, WT_CALIB_HADAMARD, amps[k], 1, 0, D);
		bias_h = sqrt(mean_sq_diff(D, ref, nm)) / ref_rms;
		/* What is left of the factor n at this amplitude for the
		 * noise of case 1 (sigma 0.05 px, one frame per state):
		 * total mean-square error, bias^2 + variance, single over
		 * Hadamard, with the variances of the weighing design. */
		{
			double sg = 0.05, F = 2.0 * b.n_act;
			double vs = b.n_act * sg * sg / (amps[k] * amps[k] * F);
			double vh = sg * sg / (amps[k] * amps[k] * F);
			double r2 = ref_rms * ref_rms;

			printf("calib_sim:   a = %-5g bias single %.4f  "
			       "Hadamard %.4f (of the RMS entry); error gain "
			       "at sigma %g: %.1f of n = %d\n",
			       amps[k], bias_s, bias_h, sg,
			       (bias_s * bias_s * r2 + vs) /
				       (bias_h * bias_h * r2 + vh),
			       b.n_act);
		}
	}
	/* At the largest amplitude every actuator at +-0.8 stroke together
	 * drives the sensor far outside its linear range: the Hadamard
	 * matrix is biased more than the one-at-a-time one (the mechanism
	 * in the header; common practice). */
	assert_true(bias_h > bias_s);
	free(ref);
	free(D);
	bench_free(&b);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(hadamard_gains_the_factor_n_in_the_linear_regime),
	cmocka_unit_test(hadamard_loses_its_gain_outside_the_linear_range),
};

WT_TEST_MAIN(tests)
