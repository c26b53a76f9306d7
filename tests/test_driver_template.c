/*
 * test_driver_template.c - tools/driver_template.c, run as the process a rig
 * builder would run, and driven over ZeroMQ the way wavetrimd drives it.
 *
 * The template's binary comes from WT_DRIVER_TEMPLATE (a compile definition
 * set by tests/CMakeLists.txt), else from the build tree's tools/ folder.
 * Each case starts it on ipc endpoints in a folder of its own, connects a
 * PULL socket to its frames and a PUSH socket to its commands, stops it with
 * a signal and reads the counters it prints on exit.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <poll.h>
#include <signal.h>
#include <stdbool.h>
#include <string.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_centroid.h"
#include "wt_clock.h"
#include "wt_geometry.h"
#include "wt_proto.h"

#ifndef WT_DRIVER_TEMPLATE
#define WT_DRIVER_TEMPLATE WT_BINARY_DIR "/tools/wavetrim-driver-template"
#endif

/* The rig the tests configure: small, so that every case is quick. */
#define LENSLETS  6
#define PPL	  8
#define ACTUATORS 5 /* layout corners, the option table's default */
#define N_PX	  (LENSLETS * PPL)
#define RATE_HZ	  "200"
#define OUT_MAX	  8192

struct rig {
	char dir[64], ini[96], frames_ep[112], commands_ep[112];
	pid_t pid;
	int out_fd; /* read end of the template's stdout */
	void *ctx, *frames, *commands;
	char out[OUT_MAX];
	size_t out_len;
};

/* Read the template's stdout until it holds text or closes, or 10 s pass;
 * returns false on the time limit. */
static bool read_until(struct rig *r, const char *text)
{
	uint64_t deadline = wt_clock_ns() + 10 * WT_NS_PER_S;

	while (!text || !strstr(r->out, text)) {
		struct pollfd p = {.fd = r->out_fd, .events = POLLIN};
		ssize_t n;

		if (wt_clock_ns() > deadline) {
			return false;
		}
		if (poll(&p, 1, 100) <= 0) {
			continue;
		}
		n = read(r->out_fd, r->out + r->out_len,
			 sizeof(r->out) - 1 - r->out_len);
		if (n <= 0) {
			break;
		}
		r->out_len += (size_t)n;
		r->out[r->out_len] = '\0';
	}
	return true;
}

static void write_ini(struct rig *r)
{
	FILE *f = fopen(r->ini, "w");

	assert_non_null(f);
	fprintf(f,
		"[sensor]\nlenslets = %d\npixels_per_lenslet = %d\n"
		"[mirror]\nactuators = %d\n"
		"[driver]\nframes = %s\ncommands = %s\n",
		LENSLETS, PPL, ACTUATORS, r->frames_ep, r->commands_ep);
	assert_int_equal(fclose(f), 0);
}

/* Start the template with config file ini (NULL: the rig's own). */
static void start(struct rig *r, const char *ini, bool connect)
{
	int fds[2];
	int zero = 0, timeout_ms = 5000;

	strcpy(r->dir, "/tmp/wt_drvtpl_XXXXXX");
	assert_non_null(mkdtemp(r->dir));
	snprintf(r->ini, sizeof(r->ini), "%s/rig.ini", r->dir);
	snprintf(r->frames_ep, sizeof(r->frames_ep), "ipc://%s/frames", r->dir);
	snprintf(r->commands_ep, sizeof(r->commands_ep), "ipc://%s/commands",
		 r->dir);
	write_ini(r);
	assert_int_equal(pipe(fds), 0);
	fflush(NULL);
	r->pid = fork();
	assert_true(r->pid >= 0);
	if (r->pid == 0) {
		dup2(fds[1], STDOUT_FILENO);
		close(fds[0]);
		close(fds[1]);
		execl(WT_DRIVER_TEMPLATE, WT_DRIVER_TEMPLATE, "-c",
		      ini ? ini : r->ini, "-r", RATE_HZ, (char *)NULL);
		_exit(127);
	}
	close(fds[1]);
	r->out_fd = fds[0];
	r->ctx = zmq_ctx_new();
	assert_non_null(r->ctx);
	if (!ini) {
		/* Printed once its signal handlers are in place. */
		assert_true(read_until(r, "ready"));
	}
	if (!connect) {
		return;
	}
	/* As the daemon does: connect, so the order of start-up is free. */
	r->frames = zmq_socket(r->ctx, ZMQ_PULL);
	r->commands = zmq_socket(r->ctx, ZMQ_PUSH);
	assert_non_null(r->frames);
	assert_non_null(r->commands);
	zmq_setsockopt(r->frames, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(r->commands, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(r->frames, ZMQ_RCVTIMEO, &timeout_ms, sizeof(int));
	zmq_setsockopt(r->commands, ZMQ_SNDTIMEO, &timeout_ms, sizeof(int));
	assert_int_equal(zmq_connect(r->frames, r->frames_ep), 0);
	assert_int_equal(zmq_connect(r->commands, r->commands_ep), 0);
}

/*
 * Send sig (0: none), collect the template's stdout until it closes (at
 * most 10 s, then SIGKILL) and reap it.  Returns the exit status, or -1
 * when it did not exit by itself.
 */
static int stop(struct rig *r, int sig)
{
	int status = 0;
	bool killed = false;

	if (sig) {
		kill(r->pid, sig);
	}
	if (!read_until(r, NULL)) {
		kill(r->pid, SIGKILL);
		killed = true;
	}
	waitpid(r->pid, &status, 0);
	r->pid = 0;
	print_message("template said:\n%s", r->out);
	return killed || !WIFEXITED(status) ? -1 : WEXITSTATUS(status);
}

static int setup_rig(void **state)
{
	struct rig *r = calloc(1, sizeof(*r));

	assert_non_null(r);
	r->out_fd = -1;
	*state = r;
	return 0;
}

/* Also after a failed assertion: no template left running, no files. */
static int teardown_rig(void **state)
{
	struct rig *r = *state;

	if (r->pid > 0) {
		kill(r->pid, SIGKILL);
		waitpid(r->pid, NULL, 0);
	}
	if (r->out_fd >= 0) {
		close(r->out_fd);
	}
	zmq_close(r->frames);
	zmq_close(r->commands);
	if (r->ctx) {
		zmq_ctx_term(r->ctx);
	}
	for (const char *f = "rig.ini\0frames\0commands\0"; r->dir[0] && *f;
	     f += strlen(f) + 1) {
		char path[128];

		snprintf(path, sizeof(path), "%s/%s", r->dir, f);
		unlink(path);
	}
	if (r->dir[0]) {
		rmdir(r->dir);
	}
	free(r);
	return 0;
}

/* The value of "name=" in the template's counter line, or -1. */
static long long counter(const struct rig *r, const char *name)
{
	char key[64];
	const char *at;

	snprintf(key, sizeof(key), " %s=", name);
	at = strstr(r->out, key);
	return at ? strtoll(at + strlen(key), NULL, 10) : -1;
}

/* Receive one frame message into buf; returns its length. */
static size_t recv_frame(struct rig *r, uint8_t *buf, size_t cap)
{
	int n = zmq_recv(r->frames, buf, cap, 0);

	assert_true(n > 0);	       /* a frame within 5 s */
	assert_true((size_t)n <= cap); /* not cut */
	return (size_t)n;
}

static int n_actuators(void)
{
	wt_grid *act = NULL;
	int n;

	assert_int_equal(wt_grid_actuators(ACTUATORS, WT_LAYOUT_CORNERS, 11,
					   0.5, &act, NULL),
			 0);
	n = act->n_valid;
	wt_grid_destroy(act);
	return n;
}

static size_t command(uint8_t *buf, size_t cap, uint16_t kind, int width,
		      uint64_t seq, const float *values)
{
	wt_header h = {.version = WT_PROTO_VERSION,
		       .kind = kind,
		       .sequence = seq,
		       .timestamp_ns = wt_clock_ns(),
		       .width = (uint32_t)width,
		       .height = 1,
		       .payload_bytes = 4u * (uint32_t)width};
	int n = wt_proto_encode(&h, values, buf, cap);

	assert_true(n > 0);
	return (size_t)n;
}

static void send_msg(struct rig *r, const void *m, size_t len, int flags)
{
	assert_int_equal(zmq_send(r->commands, m, len, flags), (int)len);
}

static void frames_decode_with_configured_size(void **state)
{
	static uint8_t msg[WT_PROTO_HEADER_BYTES + 2 * N_PX * N_PX + 16];
	static uint16_t pixels[N_PX * N_PX];
	wt_centroid_params cp = {.pixels_per_lenslet = PPL, .min_flux = 100};
	float slopes[2 * LENSLETS * LENSLETS], flux[LENSLETS * LENSLETS];
	uint64_t t0 = wt_clock_ns(), prev = 0;
	wt_grid *lens = NULL;
	wt_centroider *cen = NULL;
	struct rig *r = *state;

	start(r, NULL, true);
	for (int f = 0; f < 5; f++) {
		size_t len = recv_frame(r, msg, sizeof(msg));
		const void *payload;
		wt_header h;

		assert_int_equal(wt_proto_decode(msg, len, &h, &payload), 0);
		assert_int_equal(h.kind, WT_KIND_PIXELS_U16);
		assert_int_equal(h.width, N_PX);
		assert_int_equal(h.height, N_PX);
		assert_int_equal(len, WT_PROTO_HEADER_BYTES + 2 * N_PX * N_PX);
		if (f > 0) {
			assert_int_equal(h.sequence, prev + 1); /* wt_proto.h */
		}
		prev = h.sequence;
		/* Stamped with CLOCK_MONOTONIC, which is one clock for every
		 * process on the host (POSIX clock_gettime). */
		assert_true(h.timestamp_ns >= t0);
		assert_true(h.timestamp_ns <= wt_clock_ns());
		memcpy(pixels, payload, sizeof(pixels));
	}
	assert_int_equal(stop(r, SIGTERM), 0);

	/* The synthetic camera's promise: a spot centred in every valid
	 * subaperture and nothing elsewhere, so the daemon reads zero slopes
	 * (a spot symmetric about the window centre has its centre of gravity
	 * there: common practice).  Measured with lib/wt_centroid. */
	assert_int_equal(wt_grid_lenslets(LENSLETS, 0, 0.5, &lens, NULL), 0);
	assert_int_equal(wt_centroid_create(lens, &cp, &cen, NULL), 0);
	assert_int_equal(wt_centroid_frame(cen, pixels, slopes, flux, NULL), 0);
	for (int k = 0; k < 2 * lens->n_valid; k++) {
		assert_true(fabsf(slopes[k]) < 1e-4f);
	}
	for (int p = 0; p < N_PX * N_PX; p++) {
		int cell = (p / N_PX / PPL) * LENSLETS + (p % N_PX) / PPL;

		if (lens->index[cell] < 0) {
			assert_int_equal(pixels[p], 0);
		}
	}
	wt_centroid_destroy(cen);
	wt_grid_destroy(lens);
	assert_true(counter(r, "frames_sent") >= 5);
	assert_non_null(strstr(r->out, "mirror set flat"));
}

static void refuses_bad_commands_applies_good_one(void **state)
{
	static uint8_t msg[WT_PROTO_HEADER_BYTES + 2 * N_PX * N_PX + 16];
	uint8_t good[WT_PROTO_HEADER_BYTES + 4 * 64], bad[sizeof(good) + 1];
	uint8_t older[sizeof(good)];
	float v[64];
	const int n_act = n_actuators();
	wt_header h, h2;
	struct rig *r = *state;
	size_t len, older_len;
	int refused = 0;

	assert_true(n_act <= 64);
	start(r, NULL, true);
	assert_int_equal(
		wt_proto_decode(msg, recv_frame(r, msg, sizeof(msg)), &h, NULL),
		0);
	/* A later frame: the good command answers it, so an answer to the
	 * first one is out of order. */
	assert_int_equal(wt_proto_decode(msg, recv_frame(r, msg, sizeof(msg)),
					 &h2, NULL),
			 0);
	assert_true(h2.sequence > h.sequence);
	for (int i = 0; i < n_act; i++) {
		v[i] = 0.1f;
	}
	v[0] = 1.5f; /* out of range: the template clamps these two */
	v[1] = -3.0f;
	len = command(good, sizeof(good), WT_KIND_COMMAND_F32, n_act,
		      h2.sequence, v);
	older_len = command(older, sizeof(older), WT_KIND_COMMAND_F32, n_act,
			    h.sequence, v);

	send_msg(r, good, 20, 0); /* shorter than the header */
	memcpy(bad, good, len);
	bad[0] = 'X'; /* wrong magic */
	send_msg(r, bad, len, 0);
	memcpy(bad, good, len);
	bad[len] = 0; /* one trailing byte */
	send_msg(r, bad, len + 1, 0);
	send_msg(r, bad,
		 command(bad, sizeof(bad), WT_KIND_COMMAND_F32, n_act - 1,
			 h.sequence, v),
		 0);
	send_msg(r, bad,
		 command(bad, sizeof(bad), WT_KIND_SLOPES_F32, n_act,
			 h.sequence, v),
		 0);
	send_msg(r, bad,
		 command(bad, sizeof(bad), WT_KIND_COMMAND_F32, n_act,
			 h.sequence + 1000000, v),
		 0);
	v[2] = NAN;
	send_msg(r, bad,
		 command(bad, sizeof(bad), WT_KIND_COMMAND_F32, n_act,
			 h.sequence, v),
		 0);
	v[2] = INFINITY;
	send_msg(r, bad,
		 command(bad, sizeof(bad), WT_KIND_COMMAND_F32, n_act,
			 h.sequence, v),
		 0);
	refused = 8;
	/* A good command split over two parts: both parts refused. */
	send_msg(r, good, len, ZMQ_SNDMORE);
	send_msg(r, good, len, 0);
	refused += 2;
	/* The good one, then an answer to an older frame (stale: never go
	 * back). */
	send_msg(r, good, len, 0);
	send_msg(r, older, older_len, 0);

	/* ZeroMQ delivers in order on one pipe; 20 more frames (100 ms at
	 * 200 Hz) give the template ample time to have read all of it. */
	for (int f = 0; f < 20; f++) {
		recv_frame(r, msg, sizeof(msg));
	}
	assert_int_equal(stop(r, SIGTERM), 0);
	assert_int_equal(counter(r, "commands_refused"), refused);
	assert_int_equal(counter(r, "commands_applied"), 1);
	assert_int_equal(counter(r, "commands_stale"), 1);
	assert_int_equal(counter(r, "commands_skipped"), 0);
	assert_int_equal(counter(r, "values_clamped"), 2);
	assert_non_null(strstr(r->out, "mirror set flat"));
}

static void runs_without_daemon_and_stops_on_sigint(void **state)
{
	struct rig *r = *state;
	struct timespec pause = {.tv_nsec = 100 * 1000 * 1000};

	start(r, NULL, false);
	nanosleep(&pause, NULL);
	assert_int_equal(stop(r, SIGINT), 0);
	/* Nobody connected: every frame dropped, none waited for. */
	assert_int_equal(counter(r, "frames_sent"), 0);
	assert_true(counter(r, "frames_dropped") > 0);
	assert_non_null(strstr(r->out, "mirror set flat"));
}

static void refuses_missing_config(void **state)
{
	struct rig *r = *state;

	start(r, "/nonexistent/wavetrim/rig.ini", false);
	assert_int_equal(stop(r, 0), 2);
	assert_null(strstr(r->out, "ready"));
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test_setup_teardown(frames_decode_with_configured_size,
					setup_rig, teardown_rig),
	cmocka_unit_test_setup_teardown(refuses_bad_commands_applies_good_one,
					setup_rig, teardown_rig),
	cmocka_unit_test_setup_teardown(runs_without_daemon_and_stops_on_sigint,
					setup_rig, teardown_rig),
	cmocka_unit_test_setup_teardown(refuses_missing_config, setup_rig,
					teardown_rig),
};

WT_TEST_MAIN(tests)
