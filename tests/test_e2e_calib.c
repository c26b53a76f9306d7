/*
 * test_e2e_calib.c - calibrating a new corrector end to end: wavetrim-sim
 * with one of its mirror faults (dm.dead, dm.weak, dm.swap_a/swap_b,
 * dm.shift_x, dm.rotation_deg) and wavetrimd, calibrated through the
 * control protocol; the calibration report, read back from the saved file
 * and printed by the CLI, must name the fault and the actuator(s) the
 * simulator was told about, and a healthy mirror must raise no flag.
 *
 * The source of truth is the simulator's configuration (which channel is
 * dead, which pair is crossed, how far the grid is shifted), not our
 * diagnostics.  Thresholds are the (dead under 10 % of the median
 * response, weak under 50 %).
 *
 * A small rig keeps each run short: 10 x 10 lenslets, an 8 x 8 mirror
 * (corners dropped: 60 actuators, 7 actuator pitches across the pupil, so
 * 1.43 lenslets per actuator pitch), no sample aberration, Hadamard
 * patterns (64 of them) with settle 1 (the simulator's delay) and 2 frames
 * averaged: 385 frames per calibration.
 */
#include "wt_test.h"

#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "e2e_harness.h"
#include "wt_geometry.h"
#include "wt_jsonparse.h"
#include "wt_store.h"

#define CLI_BIN WT_BINARY_DIR "/tools/wavetrim"

#define RIG                                                              \
	"sensor.lenslets=10", "mirror.actuators=8", "mirror.layout=corners", \
		"mirror.pupil_pitches=7", "sample.zernike=",              \
		"calibration.patterns=hadamard", "calibration.settle=1",  \
		"calibration.average=2", "calibration.amplitude=0.3",     \
		"driver.timeout_ms=20000"

/* Valid index of actuator (i, j) of the rig's 8 x 8 grid. */
static int act_at(int i, int j)
{
	wt_grid *g = NULL;
	int k;

	assert_int_equal(wt_grid_actuators(8, WT_LAYOUT_CORNERS, 7, 0, &g,
					   NULL),
			 0);
	k = g->index[j * g->n + i];
	wt_grid_destroy(g);
	assert_true(k >= 0);
	return k;
}

/* Poll status until the calibration is over: 0 open, -1 otherwise. */
static int wait_calibrated(e2e *e, int timeout_ms)
{
	char st[32];

	for (int waited = 0; waited < timeout_ms; waited += 100) {
		assert_int_equal(e2e_request(e, "status"), 1);
		assert_int_equal(
			e2e_reply_string(e, "result.state", st, sizeof(st)), 0);
		if (strcmp(st, "open") == 0 &&
		    e2e_reply_number(e, "result.modes") > 0) {
			return 0;
		}
		if (strcmp(st, "fault") == 0) {
			fprintf(stderr, "e2e_calib: %s\n", e->reply);
			return -1;
		}
		usleep(100000);
	}
	return -1;
}

/* Calibrate the rig with these extra overrides and this request, save,
 * read the file. */
static wt_calibration *calibrate(e2e *e, const char *const *extra,
				 const char *request, const char *file)
{
	const char *ov[32] = {RIG};
	wt_calibration *c = NULL;
	wt_error err;
	int n = 0;

	while (ov[n]) {
		n++;
	}
	for (int k = 0; extra && extra[k]; k++) {
		ov[n++] = extra[k];
	}
	ov[n] = NULL;
	assert_int_equal(e2e_setup(e, ov), 0);
	assert_int_equal(e2e_start_sim(e), 0);
	assert_int_equal(e2e_start_daemon(e, NULL), 0);
	assert_int_equal(e2e_request(e, "%s", request), 1);
	/* The report is made with the control matrix, off the loop. */
	assert_int_equal(wait_calibrated(e, 120000), 0);
	assert_int_equal(e2e_request(e, "save %s/%s", e->dir, file), 1);
	{
		char path[256];

		snprintf(path, sizeof(path), "%s/%s", e->dir, file);
		if (wt_store_read(path, &c, &err) < 0) {
			fail_msg("%s", err.msg);
		}
	}
	assert_non_null(c->report);
	return c;
}

/* Actuators carrying flag f, and how many flags are raised in all. */
static int flagged(const wt_calibration *c, unsigned int f, int *first,
		   int *second)
{
	const wt_diag_report *d = c->report->diag;
	int n = 0;

	*first = *second = -1;
	for (int k = 0; k < d->n_act; k++) {
		if (d->act[k].flags & f) {
			if (n == 0) {
				*first = k;
			} else if (n == 1) {
				*second = k;
			}
			n++;
		}
	}
	return n;
}

static const unsigned int FINDINGS = WT_DIAG_DEAD | WT_DIAG_WEAK |
				     WT_DIAG_SWAPPED | WT_DIAG_DISPLACED;

static void healthy_mirror_raises_no_flag(void **state)
{
	e2e e;
	wt_calibration *c;
	int a, b;

	(void)state;
	c = calibrate(&e, NULL, "calibrate", "healthy.h5");
	assert_int_equal(flagged(c, FINDINGS, &a, &b), 0);
	assert_false(c->report->diag->misregistered);
	assert_true(c->report->diag->position_checked);
	/* The frame noise was measured from the repeated frames. */
	assert_true(c->report->noise_rms > 0);
	wt_calibration_destroy(c);
	e2e_teardown(&e, NULL, NULL);
}

static void dead_actuator_is_named_with_its_evidence(void **state)
{
	const int dead = act_at(3, 4);
	char opt[64];
	const char *extra[] = {opt, NULL};
	char *argv[] = {(char *)CLI_BIN, "-e", NULL, "-t", NULL, "-w",
			"60000", "calibrate", "single", NULL};
	char want[64];
	e2e_run_result *run = malloc(sizeof(*run));
	wt_calibration *c;
	e2e e;
	int a, b;

	(void)state;
	assert_non_null(run);
	snprintf(opt, sizeof(opt), "dm.dead=%d", dead);
	c = calibrate(&e, extra, "calibrate single", "dead.h5");
	assert_int_equal(flagged(c, FINDINGS, &a, &b), 1);
	assert_int_equal(flagged(c, WT_DIAG_DEAD, &a, &b), 1);
	assert_int_equal(a, dead);
	/* The simulator's dead channel moves nothing: its response is the
	 * noise alone, far under the 10 % threshold. */
	assert_true(c->report->diag->act[dead].norm <
		    0.1 * c->report->diag->act[dead].expected_norm);
	wt_calibration_destroy(c);

	/* The CLI calibrates (one actuator at a time, as asked), waits, and
	 * names it with the evidence. */
	argv[2] = e.control;
	argv[4] = e.telemetry;
	assert_int_equal(e2e_run(argv, 90000, run), 0);
	assert_int_equal(run->status, 0);
	snprintf(want, sizeof(want), "    actuator %d: dead, response ", dead);
	assert_non_null(strstr(run->out, "calibration report\n"));
	assert_non_null(strstr(run->out, "single patterns"));
	assert_non_null(strstr(run->out, want));
	assert_non_null(strstr(run->out, "% of the expected"));
	free(run);
	e2e_teardown(&e, NULL, NULL);
}

static void weak_actuator_is_named(void **state)
{
	const int weak = act_at(4, 3);
	char opt[64];
	const char *extra[] = {opt, "dm.weak_gain=0.3", NULL};
	wt_calibration *c;
	e2e e;
	int a, b;
	double ratio;

	(void)state;
	snprintf(opt, sizeof(opt), "dm.weak=%d", weak);
	c = calibrate(&e, extra, "calibrate", "weak.h5");
	assert_int_equal(flagged(c, FINDINGS, &a, &b), 1);
	assert_int_equal(flagged(c, WT_DIAG_WEAK, &a, &b), 1);
	assert_int_equal(a, weak);
	/* Its response is the simulator's weak_gain (0.3) of a healthy one,
	 * to within the scatter between healthy actuators (20 %). */
	ratio = c->report->diag->act[weak].norm /
		c->report->diag->act[weak].expected_norm;
	assert_float_equal(ratio, 0.3, 0.3 * 0.2);
	wt_calibration_destroy(c);
	e2e_teardown(&e, NULL, NULL);
}

static void swapped_pair_is_named(void **state)
{
	const int sa = act_at(2, 3), sb = act_at(5, 4);
	char oa[64], ob[64];
	const char *extra[] = {oa, ob, NULL};
	wt_calibration *c;
	e2e e;
	int a, b;

	(void)state;
	snprintf(oa, sizeof(oa), "dm.swap_a=%d", sa);
	snprintf(ob, sizeof(ob), "dm.swap_b=%d", sb);
	c = calibrate(&e, extra, "calibrate", "swap.h5");
	assert_int_equal(flagged(c, FINDINGS, &a, &b), 2);
	assert_int_equal(flagged(c, WT_DIAG_SWAPPED, &a, &b), 2);
	assert_int_equal(a, sa < sb ? sa : sb);
	assert_int_equal(b, sa < sb ? sb : sa);
	assert_int_equal(c->report->diag->act[sa].partner, sb);
	assert_int_equal(c->report->diag->act[sb].partner, sa);
	assert_false(c->report->diag->misregistered);
	wt_calibration_destroy(c);
	e2e_teardown(&e, NULL, NULL);
}

static void shifted_grid_is_misregistered(void **state)
{
	const char *extra[] = {"dm.shift_x=0.6", NULL};
	wt_calibration *c;
	e2e e;
	int a, b;

	(void)state;
	c = calibrate(&e, extra, "calibrate", "shift.h5");
	assert_true(c->report->diag->misregistered);
	/* The simulator's shift, 0.6 lenslet pitches along x: at 1.43
	 * lenslets per actuator pitch the centroids read it within ~5 %
	 * (lib/wt_diag.h); 25 % allowed for the noise. */
	assert_float_equal(c->report->diag->shift_x, 0.6, 0.15);
	assert_float_equal(c->report->diag->shift_y, 0.0, 0.1);
	assert_int_equal(flagged(c, WT_DIAG_DEAD | WT_DIAG_SWAPPED, &a, &b),
			 0);
	wt_calibration_destroy(c);
	e2e_teardown(&e, NULL, NULL);
}

static void rotated_grid_is_misregistered(void **state)
{
	const char *extra[] = {"dm.rotation_deg=4", NULL};
	wt_calibration *c;
	e2e e;
	int a, b;

	(void)state;
	c = calibrate(&e, extra, "calibrate", "rotation.h5");
	assert_true(c->report->diag->misregistered);
	/* The simulator's 4 degrees, counter-clockwise in both (sim_mirror.h,
	 * wt_diag.h); centroid sampling may under-read it (lib/wt_diag.h),
	 * so between half and 1.25 times. */
	assert_true(c->report->diag->rotation_deg > 2.0);
	assert_true(c->report->diag->rotation_deg < 5.0);
	assert_int_equal(flagged(c, WT_DIAG_DEAD | WT_DIAG_SWAPPED, &a, &b),
			 0);
	wt_calibration_destroy(c);
	e2e_teardown(&e, NULL, NULL);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(healthy_mirror_raises_no_flag),
	cmocka_unit_test(dead_actuator_is_named_with_its_evidence),
	cmocka_unit_test(weak_actuator_is_named),
	cmocka_unit_test(swapped_pair_is_named),
	cmocka_unit_test(shifted_grid_is_misregistered),
	cmocka_unit_test(rotated_grid_is_misregistered),
};

WT_TEST_MAIN(tests)
