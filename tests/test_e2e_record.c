/*
 * test_e2e_record.c - `record N FILE` end to end: wavetrim-sim and wavetrimd
 * as processes; the file is checked by Python (h5py, numpy); a full disk
 * ends the recording with the reason while the loop keeps answering
 * frames (judged by the simulator's truth stream).
 */
#include "wt_test.h"

#include <errno.h>
#include <string.h>
#include <sys/mount.h>
#include <sys/stat.h>
#include <unistd.h>

#include <zmq.h>

#include "e2e_harness.h"

#define PYTHON "/usr/bin/python3"
#define CHECK  WT_SOURCE_DIR "/tests/check_recording.py"

/* Geometric spots: the quick camera model (the recording does not care). */
static const char *const quick[] = {"camera.spot_model=geometric", NULL};

static void start(e2e *e)
{
	assert_int_equal(e2e_setup(e, quick), 0);
	assert_int_equal(e2e_start_sim(e), 0);
	assert_int_equal(e2e_start_daemon(e, NULL), 0);
	assert_int_equal(e2e_sync(e, 5000), 0);
}

/* Poll status until result.recording.state is `state`; 0 or -1. */
static int wait_recording(e2e *e, const char *state, int timeout_ms)
{
	char buf[32];

	for (int waited = 0; waited < timeout_ms; waited += 50) {
		if (e2e_request(e, "status") == 1 &&
		    e2e_reply_string(e, "result.recording.state", buf,
				     sizeof(buf)) == 0 &&
		    strcmp(buf, state) == 0) {
			return 0;
		}
		usleep(50000);
	}
	return -1;
}

/* Run the Python check on a recording; skip when h5py is missing. */
static void python_check(const char *file, long frames, const char *state)
{
	char n[32];
	char *argv[] = {PYTHON, CHECK, (char *)file, n, (char *)state, NULL};
	e2e_run_result r;

	snprintf(n, sizeof(n), "%ld", frames);
	assert_int_equal(e2e_run(argv, 60000, &r), 0);
	print_message("%s%s", r.out, r.err);
	if (r.status == 77) {
		skip();
	}
	assert_int_equal(r.status, 0);
}

/*
 * Every frame of a 1000-frame recording is in the file (the simulator runs
 * lockstep, so without a telemetry drop there is no gap in the ids), the
 * status says done with the counts, and Python reads consistent data.
 */
static void recording_is_complete_and_python_reads_it(void **state)
{
	e2e e;
	char file[256];

	(void)state;
	start(&e);
	snprintf(file, sizeof(file), "%s/rec.h5", e.dir);
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_true(strstr(e.reply, "\"recording\":null") != NULL);
	assert_int_equal(e2e_request(&e, "record 1000 %s", file), 1);
	assert_true(e2e_reply_number(&e, "result.frames") == 1000);
	assert_int_equal(wait_recording(&e, "done", 60000), 0);
	print_message("%s\n", e.reply);
	assert_true(e2e_reply_number(&e, "result.recording.frames") == 1000);
	assert_true(e2e_reply_number(&e, "result.recording.frames_lost") == 0);
	python_check(file, 1000, "open");
	e2e_stop_clean(&e);
}

/* A name that cannot be made is the request's answer; a second recording
 * is refused while one runs; `record stop` ends it with the frames kept. */
static void recording_refusals_and_stop(void **state)
{
	e2e e;
	char file[256], buf[512];

	(void)state;
	start(&e);
	assert_int_equal(e2e_request(&e, "record 10 %s/no/such/dir/x.h5", e.dir),
			 0);
	assert_int_equal(e2e_reply_string(&e, "error", buf, sizeof(buf)), 0);
	print_message("%s\n", buf);
	assert_true(strstr(buf, "cannot create") != NULL);
	/* /dev/full: the file cannot even be started. */
	assert_int_equal(e2e_request(&e, "record 10 /dev/full"), 0);
	assert_int_equal(e2e_reply_string(&e, "error", buf, sizeof(buf)), 0);
	print_message("%s\n", buf);
	assert_true(strstr(buf, "No space left on device") != NULL);
	assert_int_equal(e2e_request(&e, "record stop"), 0);

	snprintf(file, sizeof(file), "%s/long.h5", e.dir);
	assert_int_equal(e2e_request(&e, "record 100000000 %s", file), 1);
	assert_int_equal(e2e_request(&e, "record 10 %s.2", file), 0);
	assert_int_equal(e2e_reply_string(&e, "error", buf, sizeof(buf)), 0);
	assert_true(strstr(buf, "in progress") != NULL);
	assert_int_equal(wait_recording(&e, "recording", 5000), 0);
	usleep(500000);
	assert_int_equal(e2e_request(&e, "record stop"), 1);
	assert_int_equal(wait_recording(&e, "stopped", 20000), 0);
	assert_true(e2e_reply_number(&e, "result.recording.frames") > 0);
	e2e_stop_clean(&e);
}

/*
 * A disk that fills during the recording (a 256 KiB tmpfs, mounted when we
 * may; skipped otherwise): the recording ends "failed" with the reason in
 * status and an event, the loop keeps answering frames (the simulator's
 * truth frame count grows), and no frame or telemetry record is lost.
 */
static void full_disk_fails_the_recording_not_the_loop(void **state)
{
	e2e e;
	sim_truth t0, t1;
	char dir[256], file[300], buf[1024];
	void *sub;
	int got_event = 0;

	(void)state;
	start(&e);
	/* 256 KiB: the first block of frames (128 x 3.1 KB) does not fit. */
	snprintf(dir, sizeof(dir), "%s/tiny", e.dir);
	assert_int_equal(mkdir(dir, 0700), 0);
	if (mount("tmpfs", dir, "tmpfs", 0, "size=256k") != 0) {
		print_message("cannot mount a tmpfs (%s): skipped\n",
			      strerror(errno));
		e2e_stop_clean(&e);
		skip();
	}
	sub = zmq_socket(e.ctx, ZMQ_SUB);
	assert_non_null(sub);
	assert_int_equal(zmq_connect(sub, e.telemetry), 0);
	assert_int_equal(zmq_setsockopt(sub, ZMQ_SUBSCRIBE, "event ", 6), 0);
	usleep(200000);

	snprintf(file, sizeof(file), "%s/rec.h5", dir);
	assert_int_equal(e2e_request(&e, "record 100000 %s", file), 1);
	assert_int_equal(wait_recording(&e, "failed", 10000), 0);
	assert_int_equal(
		e2e_reply_string(&e, "result.recording.error", buf, sizeof(buf)),
		0);
	print_message("status: %s\n", buf);
	assert_true(strstr(buf, "No space left on device") != NULL);
	assert_true(e2e_reply_number(&e, "result.recording.frames") < 100000);
	/* The event came too. */
	for (int k = 0; k < 100 && !got_event; k++) {
		zmq_pollitem_t it = {.socket = sub, .events = ZMQ_POLLIN};
		int n;

		if (zmq_poll(&it, 1, 100) == 1) {
			n = zmq_recv(sub, buf, sizeof(buf) - 1, 0);
			if (n > 0) {
				buf[n < (int)sizeof(buf) ? n : 0] = '\0';
				got_event = strstr(buf, "recording_failed") !=
					    NULL;
			}
		}
	}
	assert_true(got_event);
	/* The loop still answers: the simulator sees new commands. */
	assert_int_equal(e2e_truth(&e, &t0, 5000), 0);
	assert_int_equal(e2e_truth_skip(&e, 200, &t1, 10000), 0);
	print_message("truth frames %llu -> %llu after the failure\n",
		      (unsigned long long)t0.frame,
		      (unsigned long long)t1.frame);
	assert_true(t1.frame >= t0.frame + 200);
	assert_true(t1.command >= (int64_t)t0.frame);
	/* A later status still tells, and nothing else was lost. */
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_int_equal(
		e2e_reply_string(&e, "result.recording.state", buf, sizeof(buf)),
		0);
	assert_string_equal(buf, "failed");
	assert_true(e2e_reply_number(&e, "result.counts.dropped") == 0);
	assert_true(e2e_reply_number(&e, "result.counts.telemetry_dropped") ==
		    0);
	assert_true(e2e_reply_number(&e, "result.counts.send_failed") == 0);
	assert_int_equal(e2e_reply_string(&e, "result.state", buf, sizeof(buf)),
			 0);
	assert_string_equal(buf, "open");
	/* A new recording elsewhere works. */
	snprintf(file, sizeof(file), "%s/after.h5", e.dir);
	assert_int_equal(e2e_request(&e, "record 200 %s", file), 1);
	assert_int_equal(wait_recording(&e, "done", 10000), 0);
	zmq_close(sub);
	umount2(dir, MNT_DETACH);
	e2e_stop_clean(&e);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(recording_is_complete_and_python_reads_it),
	cmocka_unit_test(recording_refusals_and_stop),
	cmocka_unit_test(full_disk_fails_the_recording_not_the_loop),
};

WT_TEST_MAIN(tests)
