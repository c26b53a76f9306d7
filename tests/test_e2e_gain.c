/*
 * test_e2e_gain.c - tuning the gain end to end: `autogain` (modal gain
 * optimisation, Gendron & Lena 1994) against a sweep of scalar gains on a
 * turbulent, noisy simulator, judged by the simulator's truth residual; a
 * closed-loop recording read by Python.
 *
 * fixture_calibration_* runs first (ctest fixture) and leaves a calibration
 * of this module's scenario (geometric spots, no turbulence) for the others.
 */
#include "wt_test.h"

#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "e2e_harness.h"

#define CAL_FILE WT_BINARY_DIR "/tests/e2e-gain-calibration.h5"
#define PYTHON	 "/usr/bin/python3"
#define CHECK	 WT_SOURCE_DIR "/tests/check_recording.py"

/* Truth frames per measurement, and per block for its noise. */
#define MEASURE 400
#define BLOCK	50

/* Long timeouts: a loaded test machine may pause either process. */
static const char *const calm[] = {"camera.spot_model=geometric",
				   "driver.timeout_ms=10000",
				   "sim.timeout_ms=20000", NULL};

/* Faster turbulence than the default and a faint source: the low modes
 * want a high gain, the noisy high modes a low one. */
static const char *const turbulent[] = {
	"camera.spot_model=geometric",
	"turbulence.enabled=true",
	"turbulence.d_over_r0=3",
	"turbulence.wind_pupils_per_s=4",
	"camera.photons=250000",
	"camera.read_noise_e=3",
	"sample.zernike=",
	"control.leak=0",
	"sim.seed=4242",
	"driver.timeout_ms=10000",
	"sim.timeout_ms=20000",
	NULL,
};

/* Poll `autogain status` until done or failed; 1 done, 0 failed, -1. */
static int autogain_wait(e2e *e, int timeout_ms)
{
	char stage[32];

	for (int waited = 0; waited < timeout_ms; waited += 100) {
		if (e2e_request(e, "autogain status") == 1 &&
		    e2e_reply_string(e, "result.stage", stage,
				     sizeof(stage)) == 0) {
			if (!strcmp(stage, "done")) {
				return 1;
			}
			if (!strcmp(stage, "failed")) {
				return 0;
			}
		}
		usleep(100000);
	}
	return -1;
}

static void fixture_calibration_for_gain_tests(void **state)
{
	e2e e;
	struct stat st;

	(void)state;
	unlink(CAL_FILE);
	assert_int_equal(e2e_setup(&e, calm), 0);
	assert_int_equal(e2e_start_sim(&e), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);
	assert_int_equal(e2e_request(&e, "calibrate"), 1);
	assert_int_equal(e2e_wait_state(&e, "calibrating", 5000), 0);
	assert_int_equal(e2e_wait_state(&e, "open", 280000), 0);
	for (int k = 0; k < 200; k++) {
		assert_int_equal(e2e_request(&e, "status"), 1);
		if (e2e_reply_number(&e, "result.modes") > 0) {
			break;
		}
		usleep(50000);
	}
	assert_true(e2e_reply_number(&e, "result.modes") > 0);
	assert_int_equal(e2e_request(&e, "save %s", CAL_FILE), 1);
	assert_int_equal(stat(CAL_FILE, &st), 0);
	e2e_stop_clean(&e);
}

static void start_loaded(e2e *e, const char *const *ov)
{
	assert_int_equal(e2e_setup(e, ov), 0);
	assert_int_equal(e2e_start_sim(e), 0);
	assert_int_equal(e2e_start_daemon(e, NULL), 0);
	assert_int_equal(e2e_request(e, "load %s", CAL_FILE), 1);
}

/*
 * Mean truth RMS (nm) over MEASURE frames exposed after every request so
 * far, and the standard error of that mean from the spread of BLOCK-frame
 * block means (blocks much longer than the loop's correlation time).
 */
static double measure(e2e *e, double *sem)
{
	double block[MEASURE / BLOCK], sum = 0, var = 0;
	int nb = MEASURE / BLOCK;
	sim_truth t;

	assert_int_equal(e2e_sync(e, 5000), 0);
	for (int b = 0; b < nb; b++) {
		block[b] = 0;
		for (int k = 0; k < BLOCK; k++) {
			assert_int_equal(e2e_truth(e, &t, 5000), 0);
			block[b] += t.rms_nm / BLOCK;
		}
		sum += block[b] / nb;
	}
	for (int b = 0; b < nb; b++) {
		var += (block[b] - sum) * (block[b] - sum) / (nb - 1);
	}
	*sem = sqrt(var / nb);
	return sum;
}

/* Close at gain g with unit mode gains, let it settle, measure. */
static double at_gain(e2e *e, double g, double *sem)
{
	sim_truth t;

	assert_int_equal(e2e_request(e, "set control.mode_gains \"\""), 1);
	assert_int_equal(e2e_request(e, "set control.gain %g", g), 1);
	assert_int_equal(e2e_request(e, "close"), 1);
	assert_int_equal(e2e_sync(e, 5000), 0);
	assert_int_equal(e2e_truth_skip(e, 60, &t, 5000), 0);
	return measure(e, sem);
}

/*
 * The optimised per-mode gains give a true residual no worse than the best
 * scalar gain of a sweep, within the measurements' noise (Gendron & Lena
 * 1994: the modal optimum includes every equal-gain choice, so it can only
 * tie or win); the predicted residual at the current gain agrees with the
 * one measured in the record (both in slope space) within a factor 2.
 */
static void autogain_is_no_worse_than_best_scalar_gain(void **state)
{
	static const double gains[] = {0.1, 0.2, 0.35, 0.5, 0.7};
	double best = INFINITY, best_g = 0, best_sem = 0, sem, rms, auto_rms,
	       auto_sem, pc, po, meas, ach;
	e2e e;

	(void)state;
	start_loaded(&e, turbulent);
	rms = measure(&e, &sem);
	print_message("open loop: true residual %.1f +- %.1f nm\n", rms, sem);
	for (size_t k = 0; k < sizeof(gains) / sizeof(gains[0]); k++) {
		rms = at_gain(&e, gains[k], &sem);
		print_message("scalar gain %.2f: true residual %.1f +- %.1f "
			      "nm\n",
			      gains[k], rms, sem);
		if (rms < best) {
			best = rms;
			best_g = gains[k];
			best_sem = sem;
		}
	}
	/* From the loop closed at the sweep's best gain. */
	at_gain(&e, best_g, &sem);
	assert_int_equal(e2e_request(&e, "autogain 1024 apply"), 1);
	assert_int_equal(autogain_wait(&e, 120000), 1);
	print_message("%.600s\n", e.reply);
	pc = e2e_reply_number(&e, "result.predicted.current");
	po = e2e_reply_number(&e, "result.predicted.optimised");
	meas = e2e_reply_number(&e, "result.measured");
	ach = e2e_reply_number(&e, "result.achieved");
	print_message("slope-space residual: measured %.4g, predicted at the "
		      "current gain %.4g, predicted optimised %.4g, achieved "
		      "%.4g\n",
		      meas, pc, po, ach);
	assert_true(isfinite(pc) && isfinite(po) && isfinite(meas) &&
		    isfinite(ach));
	/* the optimum of a grid that holds (about) the current gain */
	assert_true(po <= pc * 1.02);
	assert_true(pc > meas / 2 && pc < meas * 2);
	auto_rms = measure(&e, &auto_sem);
	print_message("best scalar gain %.2f: %.1f +- %.1f nm; autogain: "
		      "%.1f +- %.1f nm (true residual)\n",
		      best_g, best, best_sem, auto_rms, auto_sem);
	/* no worse, within three combined standard errors */
	assert_true(auto_rms <=
		    best + 3 * sqrt(best_sem * best_sem + auto_sem * auto_sem));
	e2e_stop_clean(&e);
}

/* Refused with a reason: no control matrix, and a bad argument. */
static void autogain_refusals(void **state)
{
	e2e e;
	char buf[256];

	(void)state;
	assert_int_equal(e2e_setup(&e, calm), 0);
	assert_int_equal(e2e_start_sim(&e), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);
	assert_int_equal(e2e_request(&e, "autogain 256"), 0);
	assert_int_equal(e2e_reply_string(&e, "error", buf, sizeof(buf)), 0);
	assert_non_null(strstr(buf, "no control matrix"));
	assert_int_equal(e2e_request(&e, "autogain 10"), 0);
	/* out of the option's range 0 .. 10 */
	assert_int_equal(e2e_request(&e, "set control.mode_gains \"0.5 11\""),
			 0);
	/* the daemon still answers */
	assert_int_equal(e2e_request(&e, "ping"), 1);
	e2e_stop_clean(&e);
}

/* Open loop: the record is the disturbance itself; nothing is applied. */
static void autogain_from_open_loop_reports_without_applying(void **state)
{
	e2e e;
	char buf[32];

	(void)state;
	start_loaded(&e, turbulent);
	assert_int_equal(e2e_request(&e, "autogain 512"), 1);
	/* one at a time */
	assert_int_equal(e2e_request(&e, "autogain 512"), 0);
	assert_int_equal(autogain_wait(&e, 60000), 1);
	assert_int_equal(e2e_reply_string(&e, "result.state", buf,
					  sizeof(buf)),
			 0);
	assert_string_equal(buf, "open");
	assert_true(isnan(e2e_reply_number(&e, "result.measured")));
	assert_true(e2e_reply_number(&e, "result.predicted.optimised") > 0);
	assert_int_equal(e2e_request(&e, "get control.mode_gains"), 1);
	assert_non_null(strstr(e.reply, "\"value\":\"\""));
	e2e_stop_clean(&e);
}

/* A closed-loop recording: Python finds every frame closed, commands
 * moving and the file consistent. */
static void closed_loop_recording_python_reads_it(void **state)
{
	e2e e;
	char file[256], buf[32];
	char *argv[] = {PYTHON, CHECK, file, "600", "closed", NULL};
	e2e_run_result r;

	(void)state;
	start_loaded(&e, turbulent);
	assert_int_equal(e2e_request(&e, "close"), 1);
	snprintf(file, sizeof(file), "%s/closed.h5", e.dir);
	assert_int_equal(e2e_request(&e, "record 600 %s", file), 1);
	for (int k = 0; k < 600; k++) {
		assert_int_equal(e2e_request(&e, "status"), 1);
		assert_int_equal(e2e_reply_string(&e, "result.recording.state",
						  buf, sizeof(buf)),
				 0);
		if (!strcmp(buf, "done")) {
			break;
		}
		usleep(100000);
	}
	assert_string_equal(buf, "done");
	assert_int_equal(e2e_run(argv, 60000, &r), 0);
	print_message("%s%s", r.out, r.err);
	if (r.status == 77) {
		e2e_stop_clean(&e);
		skip();
	}
	assert_int_equal(r.status, 0);
	e2e_stop_clean(&e);
}

/*
 * The sweep tool against the simulator and the daemon: a table row per
 * gain with a finite residual, and an SVG plot that is well-formed XML
 * (Python's xml.etree parses it) with both charts drawn.
 */
static void sweep_tool_prints_table_and_svg(void **state)
{
	e2e e;
	char svg[256], check[1024];
	char *argv[] = {WT_SWEEP_BIN, "-c",  e.ini, "--truth", e.truth, "-n",
			"64",	      "-s",  "10",  "-o",      svg,	"0.2",
			"0.5",	      NULL};
	char *py[] = {PYTHON, "-c", check, NULL};
	e2e_run_result r;
	double g, rms, sd;
	int n, rows = 0;
	const char *p;

	(void)state;
	start_loaded(&e, turbulent);
	argv[2] = e.ini;
	argv[4] = e.truth;
	snprintf(svg, sizeof(svg), "%s/sweep.svg", e.dir);
	assert_int_equal(e2e_run(argv, 120000, &r), 0);
	print_message("%s%s", r.out, r.err);
	assert_int_equal(r.status, 0);
	assert_non_null(strstr(r.out, "gain"));
	for (p = strchr(r.out, '\n'); p && *p; p = strchr(p + 1, '\n')) {
		if (sscanf(p + 1, "%lf %lf %lf %d", &g, &rms, &sd, &n) == 4) {
			assert_true(rms > 0 && isfinite(rms));
			assert_int_equal(n, 64);
			rows++;
		}
	}
	assert_int_equal(rows, 2);
	assert_non_null(strstr(r.out, "best gain"));
	snprintf(check, sizeof(check),
		 "import sys, xml.etree.ElementTree as E\n"
		 "r = E.parse('%s').getroot()\n"
		 "ns = '{http://www.w3.org/2000/svg}'\n"
		 "assert r.tag == ns + 'svg', r.tag\n"
		 "t = ' '.join(x.text or '' for x in r.iter(ns + 'text'))\n"
		 "assert 'Residual vs gain' in t and 'power spectrum' in t, t\n"
		 "assert 'gain 0.2' in t and 'gain 0.5' in t, t\n"
		 "n = sum(1 for x in r.iter() if x.tag in (ns + 'line', "
		 "ns + 'polyline', ns + 'path'))\n"
		 "assert n > 20, n\n"
		 "print('svg ok:', n, 'line elements')\n",
		 svg);
	assert_int_equal(e2e_run(py, 60000, &r), 0);
	print_message("%s%s", r.out, r.err);
	assert_int_equal(r.status, 0);
	e2e_stop_clean(&e);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(fixture_calibration_for_gain_tests),
	cmocka_unit_test(autogain_is_no_worse_than_best_scalar_gain),
	cmocka_unit_test(autogain_refusals),
	cmocka_unit_test(autogain_from_open_loop_reports_without_applying),
	cmocka_unit_test(closed_loop_recording_python_reads_it),
	cmocka_unit_test(sweep_tool_prints_table_and_svg),
};

WT_TEST_MAIN(tests)
