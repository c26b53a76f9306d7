/*
 * driver_template.c - a camera-and-mirror driver for wavetrimd: copy me.
 *
 * A driver owns the camera and the mirror and binds two ZeroMQ sockets that
 * wavetrimd connects to (either side may start first, or restart):
 *   driver.frames    PUSH  one message per exposure, kind PIXELS_U16
 *   driver.commands  PULL  one message per mirror command, kind COMMAND_F32
 * Every message is one part, laid out as the first comment of
 * lib/wt_proto.h says (the whole wire format, for a driver in any language).
 *
 * The contract:
 * - Frame ids count up by one per exposure from 0.  When the camera loses
 *   an exposure, skip its id: the gap tells the daemon frames were lost.
 * - A driver may send the next frame without waiting for a command: the
 *   daemon keeps only the newest frame, so a slow daemon costs skipped
 *   frames, never a stalled camera.
 * - A command carries the id of the frame it answers.  This template waits
 *   up to -w ms (default one frame period) for the answer to the frame it
 *   just sent, then grabs the next; a triggered camera would trigger its
 *   next exposure as soon as the answer is written.
 * - A command is normalised stroke in [-1, 1] per valid actuator, in the
 *   order of the actuator grid's valid list (lib/wt_geometry.h).  The driver
 *   is the last program between a bug and the mirror: it checks every
 *   command and refuses (and counts) anything not exactly right, and it
 *   never goes back to a command older than one it has applied.
 *
 * Edit camera_open(), camera_grab() and mirror_write(); as shipped the camera
 * is synthetic and the mirror imaginary, so it runs as is:
 *   wavetrim-driver-template -c rig.ini [-r RATE_HZ] [-w WAIT_MS]
 * SIGINT or SIGTERM: flat to the mirror, counters on stdout, exit 0.
 */
#include <errno.h>
#include <malloc.h>
#include <math.h>
#include <signal.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_config.h"
#include "wt_geometry.h"
#include "wt_proto.h"
#include "wt_secure.h"

#define NAME	   "driver_template"
#define REPORT_MAX 10 /* refusals described on stderr; the rest counted */

struct driver {
	const wt_grid *lenslets;
	int ppl, n_px, n_act; /* pixels per lenslet, pixels across, actuators */
	uint64_t period_ns, due_ns; /* synthetic camera's clock */
	uint64_t next_id;	    /* id the next frame gets */
	int64_t last_cmd;  /* sequence of the newest accepted command, or -1 */
	bool in_multipart; /* the previous part said more parts follow */
	float *check, *good, *flat; /* being checked, newest good, flat */
	unsigned long long sent, dropped, applied, skipped, stale, refused;
	unsigned long long clamped;
};

static volatile sig_atomic_t stop_flag;

static void on_signal(int sig)
{
	(void)sig;
	stop_flag = 1;
}

/*
 * ==== THIS IS WHERE YOUR CAMERA SDK GOES (1 of 2): open the camera ====
 * Open it, set the region of interest to n_px x n_px, exposure and gain,
 * start acquisition.  The synthetic camera draws its only image here: one
 * Gaussian spot per valid subaperture, symmetric about the window centre
 * (p - 1) / 2 that lib/wt_centroid.h measures from, so slopes read zero.
 */
static int camera_open(struct driver *d, uint16_t *pixels)
{
	const double c = (d->ppl - 1) / 2.0, s = d->ppl / 6.0;
	double g[128]; /* sensor.pixels_per_lenslet is at most 128 */

	for (int x = 0; x < d->ppl; x++) {
		g[x] = exp(-(x - c) * (x - c) / (2 * s * s));
	}
	memset(pixels, 0, sizeof(*pixels) * d->n_px * d->n_px);
	for (int k = 0; k < d->lenslets->n_valid; k++) {
		uint16_t *win = pixels + d->lenslets->col[k] * d->ppl +
				d->lenslets->row[k] * d->ppl * d->n_px;

		for (int y = 0; y < d->ppl; y++) {
			for (int x = 0; x < d->ppl; x++) {
				win[y * d->n_px + x] =
					(uint16_t)lround(4000.0 * g[x] * g[y]);
			}
		}
	}
	return 0;
}

/*
 * ==== THIS IS WHERE YOUR CAMERA SDK GOES (2 of 2): grab a frame ====
 * Block until the next exposure is read out into pixels: n_px x n_px
 * uint16, row-major, row 0 first, x growing with the column index as in the
 * lenslet grid (flip or rotate here if the camera is mounted otherwise).
 * Take *id from the camera's frame counter if it has one (a frame lost in
 * the camera then shows as a gap) and *stamp_ns from CLOCK_MONOTONIC at the
 * middle of the exposure (SDKs often stamp its start: add half the
 * exposure).  Return 0, -EINTR when a signal cut the wait short, or another
 * negative code.  The synthetic image never changes; only the clock ticks.
 */
static int camera_grab(struct driver *d, uint16_t *pixels, uint64_t *id,
		       uint64_t *stamp_ns)
{
	struct timespec due = {.tv_sec = (time_t)(d->due_ns / WT_NS_PER_S),
			       .tv_nsec = (long)(d->due_ns % WT_NS_PER_S)};

	(void)pixels;
	if (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &due, NULL) != 0) {
		return -EINTR;
	}
	*stamp_ns = wt_clock_ns();
	d->due_ns += d->period_ns;
	if (d->due_ns < *stamp_ns) {
		d->due_ns = *stamp_ns + d->period_ns; /* late: start again */
	}
	*id = d->next_id++;
	return 0;
}

/*
 * ==== THIS IS WHERE YOUR MIRROR SDK GOES ====
 * cmd holds n_act values, checked and clamped to [-1, 1], in the order of
 * the actuator grid's valid list.  Map them to the maker's channels (a
 * wiring table) and units: a linear driver (piezo, most voice coils) wants
 * mid + u * half_range from its data sheet; an electrostatic membrane moves
 * with the square of the voltage, so V = V_max * sqrt((u + 1) / 2) keeps
 * stroke linear in u (from memory: check the maker's notes).  Then clip
 * again to the maker's limits in its units (voltage, and a neighbour
 * difference limit if it has one): wavetrim's limits are configuration,
 * the maker's keep the mirror whole.  Return 0 or a negative code.
 */
static int mirror_write(struct driver *d, const float *cmd)
{
	(void)d;
	(void)cmd;
	return 0;
}

/* Why one command message is refused, or NULL: values land in d->check. */
static const char *check_command(struct driver *d, zmq_msg_t *msg,
				 uint64_t *seq)
{
	bool part = d->in_multipart || zmq_msg_more(msg);
	const void *payload;
	wt_header h;
	int rc;

	d->in_multipart = zmq_msg_more(msg);
	if (part) {
		return "part of a multi-part message";
	}
	rc = wt_proto_decode(zmq_msg_data(msg), zmq_msg_size(msg), &h,
			     &payload);
	if (rc < 0) {
		return wt_strerror(rc);
	}
	if (h.kind != WT_KIND_COMMAND_F32 || h.width != (uint32_t)d->n_act) {
		return "not a command for this mirror's actuator count";
	}
	if (h.sequence >= d->next_id) {
		return "answers a frame not grabbed yet";
	}
	memcpy(d->check, payload, sizeof(float) * d->n_act); /* unaligned */
	for (int i = 0; i < d->n_act; i++) {
		if (!isfinite(d->check[i])) {
			return "holds a NaN or an infinity";
		}
	}
	*seq = h.sequence;
	return NULL;
}

/*
 * Poll for commands until the newest frame is answered or wait_ns passes.
 * Of the commands waiting at once only the newest good one reaches the
 * mirror: the older ones are already out of date.
 */
static int serve_commands(struct driver *d, void *sock, zmq_msg_t *msg,
			  uint64_t wait_ns)
{
	uint64_t now = wt_clock_ns(), deadline = now + wait_ns;

	while (!stop_flag && d->last_cmd + 1 < (int64_t)d->next_id) {
		zmq_pollitem_t item = {.socket = sock, .events = ZMQ_POLLIN};
		long ms = now < deadline
				  ? (long)((deadline - now) / WT_NS_PER_MS + 1)
				  : 0;
		bool have = false;

		if (zmq_poll(&item, 1, ms) < 0 && errno != EINTR) {
			return -errno;
		}
		while (zmq_msg_recv(msg, sock, ZMQ_DONTWAIT) >= 0) {
			uint64_t seq = 0;
			const char *why = check_command(d, msg, &seq);
			float *t = d->good;

			if (why) {
				if (d->refused++ < REPORT_MAX) {
					fprintf(stderr, NAME ": refused: %s\n",
						why);
				}
			} else if ((int64_t)seq < d->last_cmd) {
				/* out of order; a second answer to the same
				 * frame replaces the first (the daemon's flat
				 * when it stops, its safe command in fault) */
				d->stale++;
			} else {
				d->skipped += have;
				have = true;
				d->good = d->check;
				d->check = t;
				d->last_cmd = (int64_t)seq;
			}
		}
		for (int i = 0; have && i < d->n_act; i++) {
			float u = d->good[i]; /* last line of defence */

			d->good[i] = u > 1.0f ? 1.0f : u < -1.0f ? -1.0f : u;
			d->clamped += d->good[i] != u;
		}
		if (have && mirror_write(d, d->good) < 0) {
			return -EIO;
		}
		d->applied += have;
		if ((now = wt_clock_ns()) >= deadline) {
			break;
		}
	}
	return 0;
}

static void *bind_socket(void *ctx, int type, const char *endpoint)
{
	void *s;
	int zero = 0, hwm = 4;
	wt_error err;

	/* ipc only in a folder of mode 0700, tcp only on loopback: for
	 * another host, add CURVE as sim/sim_driver.c does (sim_access) */
	if (wt_endpoint_check(type == ZMQ_PUSH ? "driver.frames"
					       : "driver.commands",
			      endpoint, true, false, &err) < 0) {
		fprintf(stderr, NAME ": %s\n", err.msg);
		return NULL;
	}
	s = zmq_socket(ctx, type);
	/* Without LINGER 0, zmq_ctx_term waits for unsent frames forever;
	 * a short queue drops frames when the daemon lags, not queue old. */
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(s, ZMQ_SNDHWM, &hwm, sizeof(hwm));
	if (zmq_bind(s, endpoint) != 0) {
		fprintf(stderr, NAME ": cannot bind %s: %s\n", endpoint,
			zmq_strerror(errno));
		zmq_close(s);
		return NULL;
	}
	return s;
}

int main(int argc, char **argv)
{
	struct driver d = {.last_cmd = -1};
	struct sigaction sa = {.sa_handler = on_signal}; /* no SA_RESTART */
	double rate_hz = 100;
	long wait_ms = -1;
	wt_config *cfg = NULL;
	wt_grid *lens = NULL, *act = NULL;
	void *ctx = zmq_ctx_new(), *frames = NULL, *commands = NULL;
	uint8_t *frame = NULL;
	float *vectors = NULL;
	uint16_t *pixels;
	size_t frame_bytes;
	zmq_msg_t msg;
	wt_error err = {0};
	int opt, rc = 2;

	if (wt_config_create(&cfg, &err) < 0) {
		goto out;
	}
	while ((opt = getopt(argc, argv, "c:r:w:")) != -1) {
		if (opt == 'c' && wt_config_load(cfg, optarg, &err) < 0) {
			goto out;
		} else if (opt == 'r') {
			rate_hz = atof(optarg);
		} else if (opt == 'w') {
			wait_ms = atol(optarg);
		} else if (opt != 'c') {
			fprintf(stderr, "usage: %s [-c FILE] [-r HZ] [-w MS]\n",
				argv[0]);
			goto out;
		}
	}
	/* The same grids as the daemon's, from the same options. */
	if (wt_grid_lenslets(wt_config_int(cfg, WT_OPT_SENSOR_LENSLETS),
			     wt_config_double(cfg, WT_OPT_SENSOR_OBSCURATION),
			     wt_config_double(cfg, WT_OPT_SENSOR_MIN_FILL),
			     &lens, &err) < 0 ||
	    wt_grid_actuators(
		    wt_config_int(cfg, WT_OPT_MIRROR_ACTUATORS),
		    wt_config_enum(cfg, WT_OPT_MIRROR_LAYOUT),
		    wt_config_double(cfg, WT_OPT_MIRROR_PUPIL_PITCHES),
		    wt_config_double(cfg, WT_OPT_MIRROR_MARGIN_PITCHES), &act,
		    &err) < 0) {
		goto out;
	}
	if (!(rate_hz > 0 && rate_hz <= 1e5) || wait_ms > 60000) {
		wt_error_set(&err, -EINVAL,
			     "-r wants (0, 1e5] Hz, -w <= 60000");
		goto out;
	}
	d.lenslets = lens;
	d.ppl = (int)wt_config_int(cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	d.n_px = lens->n * d.ppl;
	d.n_act = act->n_valid;
	d.period_ns = (uint64_t)(1e9 / rate_hz);
	d.due_ns = wt_clock_ns();
	/* zmq_send copies every frame into a new block: keep blocks up to
	 * 16 MiB on the heap, where they are reused, rather than in fresh
	 * mmap pages that each fault in on first touch. */
	mallopt(M_MMAP_THRESHOLD, 16 << 20);
	mallopt(M_TRIM_THRESHOLD, 64 << 20);
	frame_bytes = WT_PROTO_HEADER_BYTES + 2u * d.n_px * d.n_px;
	frame = malloc(frame_bytes);
	vectors = calloc(3 * (size_t)d.n_act, sizeof(float));
	if (!frame || !vectors) {
		wt_error_set(&err, -ENOMEM, "out of memory");
		goto out;
	}
	d.check = vectors; /* check and good swap as commands pass */
	d.good = vectors + d.n_act;
	d.flat = d.good + d.n_act; /* 0 is mid-stroke: or your measured flat */
	pixels = (uint16_t *)(frame + WT_PROTO_HEADER_BYTES);
	sigaction(SIGINT, &sa, NULL);
	sigaction(SIGTERM, &sa, NULL);
	frames = bind_socket(ctx, ZMQ_PUSH,
			     wt_config_string(cfg, WT_OPT_DRIVER_FRAMES));
	commands = bind_socket(ctx, ZMQ_PULL,
			       wt_config_string(cfg, WT_OPT_DRIVER_COMMANDS));
	/* Open your mirror SDK here too, then start the mirror flat. */
	if (!frames || !commands || camera_open(&d, pixels) < 0 ||
	    mirror_write(&d, d.flat) < 0) {
		goto out;
	}
	printf(NAME ": ready: %d x %d pixels, %d actuators\n", d.n_px, d.n_px,
	       d.n_act);
	fflush(stdout);
	zmq_msg_init(&msg);
	for (rc = 0; !stop_flag && rc == 0;) {
		wt_header h = {.version = WT_PROTO_VERSION,
			       .kind = WT_KIND_PIXELS_U16,
			       .width = (uint32_t)d.n_px,
			       .height = (uint32_t)d.n_px,
			       .payload_bytes = 2u * d.n_px * d.n_px};
		int len;

		rc = camera_grab(&d, pixels, &h.sequence, &h.timestamp_ns);
		if (rc == -EINTR) {
			rc = 0;
			continue;
		} else if (rc < 0) {
			break;
		}
		/* The pixels already sit after the header: nothing is copied.
		 * No daemon yet, or a full queue, drops the frame: never wait.
		 */
		len = wt_proto_encode(&h, pixels, frame, frame_bytes);
		if (len > 0 &&
		    zmq_send(frames, frame, len, ZMQ_DONTWAIT) == len) {
			d.sent++;
		} else {
			d.dropped++;
		}
		rc = serve_commands(&d, commands, &msg,
				    wait_ms < 0 ? d.period_ns
						: wait_ms * WT_NS_PER_MS);
	}
	zmq_msg_close(&msg);
	if (rc < 0) {
		fprintf(stderr, NAME ": stopping: %s\n", wt_strerror(rc));
	}
	opt = mirror_write(&d, d.flat); /* whatever happened before */
	printf(NAME ": mirror %s\n", opt < 0 ? "NOT set flat!" : "set flat");
	rc = rc < 0 || opt < 0;
	printf(NAME ": frames_sent=%llu frames_dropped=%llu "
		    "commands_applied=%llu commands_skipped=%llu "
		    "commands_stale=%llu commands_refused=%llu "
		    "values_clamped=%llu\n",
	       d.sent, d.dropped, d.applied, d.skipped, d.stale, d.refused,
	       d.clamped);
out: /* close your camera and mirror SDK handles here */
	if (err.code) {
		fprintf(stderr, NAME ": %s\n", err.msg);
	}
	zmq_close(frames); /* NULL is refused harmlessly */
	zmq_close(commands);
	zmq_ctx_term(ctx);
	free(vectors);
	free(frame);
	wt_grid_destroy(act);
	wt_grid_destroy(lens);
	wt_config_destroy(cfg);
	return rc;
}
