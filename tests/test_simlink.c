/*
 * test_simlink.c - wavetrim-sim's driver loop over ZeroMQ: lockstep
 * ordering and delay, the truth stream, refusal of malformed commands, and
 * the effect of valid ones.
 *
 * The loop runs in a thread of this process (sim_driver_run) on ipc
 * endpoints in a fresh mkdtemp folder; the test plays the daemon with raw
 * ZeroMQ sockets and messages built by wt_proto.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include <zmq.h>

#include "sim_driver.h"
#include "wt_centroid.h"
#include "wt_clock.h"
#include "wt_config.h"
#include "wt_proto.h"

struct link {
	char dir[64];
	char frames_ep[128], commands_ep[128], truth_ep[128];
	wt_config *cfg;
	sim_driver *driver;
	pthread_t thread;
	volatile sig_atomic_t stop;
	int run_rc;
	int running;
	void *ctx, *frames, *commands, *truth;
	int n_act, width;
	const wt_grid *actuators; /* immutable after creation */
	uint8_t *rx;		  /* frame receive buffer */
	size_t rx_len;
	float cmd[512];
};

static void set(struct link *l, const char *key, const char *value)
{
	wt_error err;

	if (wt_config_set(l->cfg, key, value, &err) != 0) {
		fail_msg("%s", err.msg);
	}
}

static void *run(void *arg)
{
	struct link *l = arg;

	l->run_rc = sim_driver_run(l->driver, &l->stop, 0);
	return NULL;
}

/*
 * A small world: 8 x 8 lenslets of 8 pixels, geometric spots, a 9 x 9
 * mirror without its corners (77 actuators), a static aberration, no drift.
 * overrides: NULL-terminated "key", "value" pairs applied last.
 */
static void link_start(struct link *l, const char *const *overrides)
{
	int zero = 0, rc;
	wt_error err;

	memset(l, 0, sizeof(*l));
	strcpy(l->dir, "/tmp/wtsimlink.XXXXXX");
	assert_non_null(mkdtemp(l->dir));
	snprintf(l->frames_ep, sizeof(l->frames_ep), "ipc://%s/frames", l->dir);
	snprintf(l->commands_ep, sizeof(l->commands_ep), "ipc://%s/commands",
		 l->dir);
	snprintf(l->truth_ep, sizeof(l->truth_ep), "ipc://%s/truth", l->dir);
	assert_int_equal(wt_config_create(&l->cfg, &err), 0);
	set(l, "driver.frames", l->frames_ep);
	set(l, "driver.commands", l->commands_ep);
	set(l, "sim.truth", l->truth_ep);
	set(l, "sensor.lenslets", "8");
	set(l, "sensor.pixels_per_lenslet", "8");
	set(l, "sensor.focal_length_mm", "1.0");
	set(l, "sim.samples_per_lenslet", "4");
	set(l, "mirror.actuators", "9");
	set(l, "mirror.pupil_pitches", "8");
	set(l, "camera.spot_model", "geometric");
	set(l, "sample.zernike", "4:0.1, 6:0.05");
	set(l, "sim.timeout_ms", "60000");
	for (; overrides && overrides[0]; overrides += 2) {
		set(l, overrides[0], overrides[1]);
	}
	rc = sim_driver_create(l->cfg, NULL, &l->driver, &err);
	if (rc != 0) {
		fail_msg("%s", err.msg);
	}
	l->n_act = sim_world_actuators(sim_driver_world(l->driver));
	l->actuators =
		sim_mirror_grid(sim_world_mirror(sim_driver_world(l->driver)));
	l->width = sim_world_width(sim_driver_world(l->driver));
	assert_int_equal(l->n_act, 77);
	l->rx_len = WT_PROTO_HEADER_BYTES + 2 * (size_t)l->width * l->width;
	l->rx = malloc(l->rx_len + 16);
	assert_non_null(l->rx);

	l->ctx = zmq_ctx_new();
	l->frames = zmq_socket(l->ctx, ZMQ_PULL);
	l->commands = zmq_socket(l->ctx, ZMQ_PUSH);
	l->truth = zmq_socket(l->ctx, ZMQ_SUB);
	zmq_setsockopt(l->frames, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(l->commands, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(l->truth, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(l->truth, ZMQ_SUBSCRIBE, SIM_TRUTH_TOPIC,
		       strlen(SIM_TRUTH_TOPIC));
	assert_int_equal(zmq_connect(l->truth, l->truth_ep), 0);
	/* let the subscription reach the publisher before frame 0 */
	wt_clock_sleep_ns(300 * WT_NS_PER_MS);
	assert_int_equal(zmq_connect(l->frames, l->frames_ep), 0);
	assert_int_equal(zmq_connect(l->commands, l->commands_ep), 0);
	/* the driver's sockets move to the loop thread here (pthread_create
	 * is a full memory barrier, as ZeroMQ asks for a migration) */
	assert_int_equal(pthread_create(&l->thread, NULL, run, l), 0);
	l->running = 1;
}

static void link_stop(struct link *l)
{
	char path[192];

	if (l->running) {
		l->stop = 1;
		pthread_join(l->thread, NULL);
		assert_int_equal(l->run_rc, 0);
	}
	zmq_close(l->frames);
	zmq_close(l->commands);
	zmq_close(l->truth);
	zmq_ctx_term(l->ctx);
	sim_driver_destroy(l->driver);
	wt_config_destroy(l->cfg);
	free(l->rx);
	snprintf(path, sizeof(path), "%s/frames", l->dir);
	unlink(path);
	snprintf(path, sizeof(path), "%s/commands", l->dir);
	unlink(path);
	snprintf(path, sizeof(path), "%s/truth", l->dir);
	unlink(path);
	rmdir(l->dir);
}

/* Next frame's id within timeout_ms, or -1 when none came. */
static int64_t next_frame(struct link *l, int timeout_ms)
{
	zmq_pollitem_t it = {.socket = l->frames, .events = ZMQ_POLLIN};
	wt_header h;
	int n;

	if (zmq_poll(&it, 1, timeout_ms) <= 0) {
		return -1;
	}
	n = zmq_recv(l->frames, l->rx, l->rx_len + 16, 0);
	assert_int_equal(n, (int)l->rx_len);
	assert_int_equal(wt_proto_decode(l->rx, (size_t)n, &h, NULL), 0);
	assert_int_equal(h.kind, WT_KIND_PIXELS_U16);
	assert_int_equal(h.width, l->width);
	assert_int_equal(h.height, l->width);
	return (int64_t)h.sequence;
}

/* The truth record of frame id (older ones are skipped). */
static void truth_of(struct link *l, uint64_t id, sim_truth *t)
{
	zmq_pollitem_t it = {.socket = l->truth, .events = ZMQ_POLLIN};
	uint8_t msg[256];

	for (;;) {
		int n;

		assert_true(zmq_poll(&it, 1, 5000) == 1);
		n = zmq_recv(l->truth, msg, sizeof(msg), 0);
		assert_int_equal(n, SIM_TRUTH_BYTES);
		assert_int_equal(sim_truth_decode(msg, (size_t)n, t), 0);
		if (t->frame == id) {
			return;
		}
		assert_true(t->frame < id);
	}
}

static void send_raw(struct link *l, const void *msg, size_t len)
{
	assert_int_equal(zmq_send(l->commands, msg, len, 0), (int)len);
}

/* Encode a command of `width` values (l->cmd) answering frame seq. */
static size_t build(struct link *l, uint64_t seq, uint32_t width, uint8_t *buf,
		    size_t cap)
{
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_COMMAND_F32,
		.sequence = seq,
		.timestamp_ns = wt_clock_ns(),
		.width = width,
		.height = 1,
		.payload_bytes = width * 4,
	};
	int n = wt_proto_encode(&h, l->cmd, buf, cap);

	assert_true(n > 0);
	return (size_t)n;
}

static void send_cmd(struct link *l, uint64_t seq)
{
	uint8_t buf[4096];

	send_raw(l, buf, build(l, seq, (uint32_t)l->n_act, buf, sizeof(buf)));
}

static void lockstep_waits_for_each_command(void **state)
{
	struct link *l = malloc(sizeof(*l));
	int64_t k;

	(void)state;
	link_start(l, NULL);
	memset(l->cmd, 0, sizeof(l->cmd));
	for (k = 0; k < 5; k++) {
		assert_int_equal(next_frame(l, 5000), k);
		/* delay 1: frame k + 1 waits for the command answering k */
		assert_int_equal(next_frame(l, 250), -1);
		send_cmd(l, (uint64_t)k);
	}
	assert_int_equal(next_frame(l, 5000), 5);
	link_stop(l);
	free(l);
}

static void lockstep_delay_two_applies_command_two_frames_later(void **state)
{
	static const char *const over[] = {"sim.delay", "2", NULL};
	struct link *l = malloc(sizeof(*l));
	sim_truth t1, t2, t3;

	(void)state;
	link_start(l, over);
	/* frames 0 and 1 need no command */
	assert_int_equal(next_frame(l, 5000), 0);
	assert_int_equal(next_frame(l, 5000), 1);
	/* frame 2 needs the command answering frame 0 */
	assert_int_equal(next_frame(l, 250), -1);
	memset(l->cmd, 0, sizeof(l->cmd));
	l->cmd[38] = 0.5f; /* the centre actuator */
	send_cmd(l, 0);
	assert_int_equal(next_frame(l, 5000), 2);
	/* frame 3 needs the command answering frame 1 */
	assert_int_equal(next_frame(l, 250), -1);
	memset(l->cmd, 0, sizeof(l->cmd));
	send_cmd(l, 1);
	assert_int_equal(next_frame(l, 5000), 3);
	/* the command answering frame 0 shapes frame 2 = 0 + delay, not
	 * frame 1 */
	truth_of(l, 1, &t1);
	truth_of(l, 2, &t2);
	truth_of(l, 3, &t3);
	assert_true(t1.command == -1);
	assert_true(t2.command == 0);
	assert_true(t3.command == 1);
	assert_true(fabs(t2.rms_nm - t1.rms_nm) > 1.0);
	/* the command answering frame 1 was flat again */
	assert_true(fabs(t3.rms_nm - t1.rms_nm) < 1e-9);
	link_stop(l);
	free(l);
}

static void truth_arrives_for_every_frame(void **state)
{
	struct link *l = malloc(sizeof(*l));
	sim_truth t;
	uint64_t k;

	(void)state;
	link_start(l, NULL);
	memset(l->cmd, 0, sizeof(l->cmd));
	for (k = 0; k < 10; k++) {
		assert_int_equal(next_frame(l, 5000), (int64_t)k);
		truth_of(l, k, &t);
		assert_true(t.frame == k);
		/* static sample, flat mirror: 4:0.1 and 6:0.05 um RMS give
		 * sqrt(100^2 + 50^2) nm (RMS-1 Zernike modes are
		 * orthonormal over the disk, Noll 1976); the sampled disk
		 * makes it good to about a percent */
		assert_true(fabs(t.rms_nm - sqrt(100.0 * 100 + 50.0 * 50)) <
			    0.02 * 111.8);
		/* neither mode is a tilt */
		assert_true(fabs(t.rms_tt_removed_nm - t.rms_nm) < 0.5);
		assert_true(t.strehl > 0.0 && t.strehl < 1.0);
		assert_true(fabs(t.time_s - k / 200.0) < 1e-9);
		send_cmd(l, k);
	}
	link_stop(l);
	free(l);
}

static void malformed_commands_are_refused_and_not_applied(void **state)
{
	struct link *l = malloc(sizeof(*l));
	uint8_t buf[4096];
	sim_truth before, after;
	size_t n;
	int k;

	(void)state;
	link_start(l, NULL);
	assert_int_equal(next_frame(l, 5000), 0);
	truth_of(l, 0, &before);
	for (k = 0; k < l->n_act; k++) {
		l->cmd[k] = 0.7f; /* would change the residual a lot */
	}
	/* bad magic */
	n = build(l, 0, (uint32_t)l->n_act, buf, sizeof(buf));
	buf[0] = 'X';
	send_raw(l, buf, n);
	/* wrong width: one value short */
	n = build(l, 0, (uint32_t)l->n_act - 1, buf, sizeof(buf));
	send_raw(l, buf, n);
	/* truncated: the last value cut off */
	n = build(l, 0, (uint32_t)l->n_act, buf, sizeof(buf));
	send_raw(l, buf, n - 4);
	/* a NaN in it */
	l->cmd[5] = NAN;
	n = build(l, 0, (uint32_t)l->n_act, buf, sizeof(buf));
	send_raw(l, buf, n);
	/* answers a frame not yet sent */
	l->cmd[5] = 0.7f;
	n = build(l, 7, (uint32_t)l->n_act, buf, sizeof(buf));
	send_raw(l, buf, n);
	/* none of them counts as the answer to frame 0 */
	assert_int_equal(next_frame(l, 300), -1);
	/* a valid flat answer releases frame 1 */
	memset(l->cmd, 0, sizeof(l->cmd));
	send_cmd(l, 0);
	assert_int_equal(next_frame(l, 5000), 1);
	truth_of(l, 1, &after);
	assert_true(after.refused == 5);
	assert_true(before.refused == 0);
	/* the mirror is as flat as before: the residual did not change */
	assert_true(after.rms_nm == before.rms_nm);
	assert_true(after.strehl == before.strehl);
	assert_true(after.command == 0);
	/* a second answer to frame 0 replaces the first; the flat answer to
	 * frame 1 then wins again (applied in order) */
	for (k = 0; k < l->n_act; k++) {
		l->cmd[k] = 0.7f;
	}
	send_cmd(l, 0);
	memset(l->cmd, 0, sizeof(l->cmd));
	send_cmd(l, 1);
	assert_int_equal(next_frame(l, 5000), 2);
	truth_of(l, 2, &after);
	assert_true(after.stale == 0);
	assert_true(after.rms_nm == before.rms_nm);
	/* an answer to an older frame than one accepted is stale, not
	 * applied */
	for (k = 0; k < l->n_act; k++) {
		l->cmd[k] = 0.7f;
	}
	send_cmd(l, 0);
	memset(l->cmd, 0, sizeof(l->cmd));
	send_cmd(l, 2);
	assert_int_equal(next_frame(l, 5000), 3);
	truth_of(l, 3, &after);
	assert_true(after.stale == 1);
	assert_true(after.rms_nm == before.rms_nm);
	link_stop(l);
	free(l);
}

static void valid_command_changes_residual_and_clips(void **state)
{
	struct link *l = malloc(sizeof(*l));
	sim_truth t0, t1, t2;
	int k;

	(void)state;
	link_start(l, NULL);
	assert_int_equal(next_frame(l, 5000), 0);
	truth_of(l, 0, &t0);
	memset(l->cmd, 0, sizeof(l->cmd));
	l->cmd[38] = 0.3f;
	send_cmd(l, 0);
	assert_int_equal(next_frame(l, 5000), 1);
	truth_of(l, 1, &t1);
	assert_true(t1.command == 0);
	assert_true(fabs(t1.rms_nm - t0.rms_nm) > 1.0);
	assert_true(t1.clipped == 0);
	/* out-of-range values are clipped by the mirror and counted */
	for (k = 0; k < l->n_act; k++) {
		l->cmd[k] = 0.0f;
	}
	l->cmd[3] = 1.5f;
	l->cmd[4] = -3.0f;
	send_cmd(l, 1);
	assert_int_equal(next_frame(l, 5000), 2);
	truth_of(l, 2, &t2);
	assert_true(t2.clipped == 2);
	assert_true(t2.clipped_total == 2);
	link_stop(l);
	free(l);
}

static void silent_daemon_times_out_and_stops_on_request(void **state)
{
	static const char *const over[] = {"sim.timeout_ms", "200", NULL};
	struct link *l = malloc(sizeof(*l));
	uint64_t t0, t_stop;
	sim_truth t;

	(void)state;
	link_start(l, over);
	assert_int_equal(next_frame(l, 5000), 0);
	/* no answer: frame 1 waits for the timeout, then comes anyway */
	t0 = wt_clock_ns();
	assert_int_equal(next_frame(l, 5000), 1);
	assert_true(wt_clock_ns() - t0 >= 150 * WT_NS_PER_MS);
	truth_of(l, 1, &t);
	assert_true(t.timeouts == 1);
	assert_true(t.command == -1); /* exposed with the command in force */
	/* a late answer to frame 0 still counts and is applied */
	memset(l->cmd, 0, sizeof(l->cmd));
	l->cmd[38] = 0.5f;
	send_cmd(l, 0);
	send_cmd(l, 1);
	assert_int_equal(next_frame(l, 5000), 2);
	truth_of(l, 2, &t);
	assert_true(t.command == 1);
	assert_true(t.timeouts == 1);
	/* waiting again, the loop still sees the stop flag promptly */
	wt_clock_sleep_ns(100 * WT_NS_PER_MS);
	t_stop = wt_clock_ns();
	l->stop = 1;
	pthread_join(l->thread, NULL);
	l->running = 0;
	assert_int_equal(l->run_rc, 0);
	assert_true(wt_clock_ns() - t_stop < WT_NS_PER_S);
	link_stop(l);
	free(l);
}

static void free_running_applies_latest_command(void **state)
{
	static const char *const over[] = {"sim.mode", "free",
					   "sim.frame_rate_hz", "100", NULL};
	struct link *l = malloc(sizeof(*l));
	int64_t k, last = -1;
	sim_truth t;
	int seen = 0;

	(void)state;
	link_start(l, over);
	/* frames flow without any command */
	for (k = 0; k < 5; k++) {
		int64_t id = next_frame(l, 2000);

		assert_true(id > last);
		last = id;
	}
	memset(l->cmd, 0, sizeof(l->cmd));
	l->cmd[38] = 0.4f;
	send_cmd(l, (uint64_t)last);
	/* some later exposure carries it */
	for (k = 0; k < 50 && !seen; k++) {
		last = next_frame(l, 2000);
		assert_true(last >= 0);
		truth_of(l, (uint64_t)last, &t);
		seen = t.command >= 0;
	}
	assert_true(seen);
	link_stop(l);
	free(l);
}

/*
 * Play a one-mode pure integrator against the simulator in lockstep with
 * delay 2: the mode is a ramp in x over the actuators, the measurement the
 * mean x slope of the valid subapertures.  Calibrate the mode's response b
 * (px per unit), then c_k = c_{k-1} - g s_k / b.  With the sim's delay
 * semantics s_k = s_0 + b c_{k-2}, so the error obeys e_k = e_{k-1} -
 * g e_{k-2}: roots of z^2 - z + g, |z|^2 = g (Franklin, Powell & Workman,
 * Digital Control of Dynamic Systems, the z-plane stability criterion).
 * Returns the largest |s| seen in the loop and the last |s|, the truth's
 * tip/tilt part sqrt(rms^2 - rms_tt_removed^2) at the loop's start and
 * end, and the values clipped in all.
 */
struct loop_result {
	double s_first, s_last, s_max, tilt_first, tilt_last;
	uint64_t clipped_total;
};

static double mean_x_slope(struct link *l, const wt_centroider *cen, int n,
			   float *slopes)
{
	double sum = 0;
	int k;

	assert_int_equal(
		wt_centroid_frame(
			cen, (const uint16_t *)(l->rx + WT_PROTO_HEADER_BYTES),
			slopes, NULL, NULL),
		0);
	for (k = 0; k < n; k++) {
		sum += slopes[k];
	}
	return sum / n;
}

static double tilt_part(const sim_truth *t)
{
	double d = t->rms_nm * t->rms_nm -
		   t->rms_tt_removed_nm * t->rms_tt_removed_nm;

	return d > 0 ? sqrt(d) : 0.0;
}

static void run_integrator(double gain, struct loop_result *r)
{
	static const char *const over[] = {"sim.delay",
					   "2",
					   "sample.zernike",
					   "2:0.2",
					   "camera.photon_noise",
					   "false",
					   "camera.read_noise_e",
					   "0",
					   NULL};
	const double amp = 0.2;
	const int calib_end = 6, frames = 40;
	wt_centroid_params cp = {.pixels_per_lenslet = 8, .min_flux = 1};
	struct link *l = malloc(sizeof(*l));
	double pattern[512], s0 = 0, s_ramp = 0, b, c = amp, s;
	wt_centroider *cen;
	wt_grid *grid;
	wt_error err;
	sim_truth t;
	float slopes[256];
	int k, a, n;

	link_start(l, over);
	for (a = 0; a < l->n_act; a++) {
		pattern[a] = l->actuators->x[a]; /* a ramp in x */
	}
	assert_int_equal(wt_grid_lenslets(8, 0.0, 0.5, &grid, &err), 0);
	assert_int_equal(wt_centroid_create(grid, &cp, &cen, &err), 0);
	n = grid->n_valid;
	memset(r, 0, sizeof(*r));
	for (k = 0; k < frames; k++) {
		assert_int_equal(next_frame(l, 5000), k);
		s = mean_x_slope(l, cen, n, slopes);
		if (k == 0) {
			s0 = s; /* frames 0 and 1 see the flat mirror */
		}
		if (k < calib_end) {
			/* frames 2 .. 5 see amp x pattern */
			s_ramp = s;
			c = amp;
		} else {
			if (k == calib_end) {
				b = (s_ramp - s0) / amp;
				assert_true(fabs(b) > 0.1);
				truth_of(l, (uint64_t)k, &t);
				r->tilt_first = tilt_part(&t);
				r->s_first = fabs(s);
			}
			c -= gain * s / b;
			r->s_last = fabs(s);
			r->s_max = fmax(r->s_max, fabs(s));
		}
		for (a = 0; a < l->n_act; a++) {
			l->cmd[a] = (float)(c * pattern[a]);
		}
		send_cmd(l, (uint64_t)k);
	}
	truth_of(l, frames - 1, &t);
	r->tilt_last = tilt_part(&t);
	r->clipped_total = t.clipped_total;
	wt_centroid_destroy(cen);
	wt_grid_destroy(grid);
	link_stop(l);
	free(l);
}

static void delay_two_integrator_converges_at_gain_half(void **state)
{
	struct loop_result r;

	(void)state;
	run_integrator(0.5, &r);
	/* |z| = sqrt(0.5): 34 frames shrink the error by 0.707^34 = 8e-6,
	 * down to the floor that rounding pixels to whole counts leaves
	 * (a few 1e-4 px here).  The truth's tilt falls to what the ramp's
	 * own higher-order content leaves (~10 of ~130 nm). */
	assert_true(r.s_first > 0.05);
	assert_true(r.s_last < 1e-2 * r.s_first);
	assert_true(r.tilt_last < 0.2 * r.tilt_first);
	assert_true(r.clipped_total == 0);
}

static void delay_two_integrator_diverges_at_gain_1_2(void **state)
{
	struct loop_result r;

	(void)state;
	run_integrator(1.2, &r);
	/* |z| = sqrt(1.2) > 1: the error grows (1.095^34 = 22) until the
	 * mirror clips */
	assert_true(r.s_max > 3.0 * r.s_first);
	assert_true(r.tilt_last > r.tilt_first);
	assert_true(r.clipped_total > 0);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(lockstep_waits_for_each_command),
	cmocka_unit_test(lockstep_delay_two_applies_command_two_frames_later),
	cmocka_unit_test(truth_arrives_for_every_frame),
	cmocka_unit_test(malformed_commands_are_refused_and_not_applied),
	cmocka_unit_test(valid_command_changes_residual_and_clips),
	cmocka_unit_test(silent_daemon_times_out_and_stops_on_request),
	cmocka_unit_test(free_running_applies_latest_command),
	cmocka_unit_test(delay_two_integrator_converges_at_gain_half),
	cmocka_unit_test(delay_two_integrator_diverges_at_gain_1_2),
};

WT_TEST_MAIN(tests)
