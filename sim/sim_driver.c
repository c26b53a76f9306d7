/* sim_driver.c - the simulator's driver loop over ZeroMQ (see the header). */
#include "sim_driver.h"

#include <errno.h>
#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_proto.h"
#include "wt_secure.h"

/* Frames queued in ZeroMQ at most; frame buffers in the pool. */
#define SIM_FRAME_HWM 4
#define SIM_POOL      (SIM_FRAME_HWM + 4)
/* Longest blocking slice: the stop flag is checked at least this often. */
#define SIM_SLICE_MS 50

enum { SIM_MODE_LOCKSTEP = 0, SIM_MODE_FREE = 1 };

/* A preallocated frame message; ZeroMQ hands it back through release(). */
struct sim_frame_buf {
	atomic_int busy;
	uint64_t id;
	uint8_t *data;
};

struct sim_driver {
	sim_world *world;
	wt_log *log;
	void *ctx, *frames, *commands, *truth;
	/* access (lib/wt_secure.h): sim.secret_key and sim.clients */
	bool curve;
	wt_keypair keys;
	wt_keylist *clients;
	wt_zap *zap;
	int mode, delay, timeout_ms;
	double period_s;
	int width, n_act;
	size_t msg_bytes;
	struct sim_frame_buf pool[SIM_POOL];
	/* lockstep: accepted commands waiting for their frame */
	int q_cap, q_head, q_count;
	int64_t *q_seq;
	float *q_cmd;
	/* free mode: the newest accepted command, not yet applied */
	float *latest;
	int64_t latest_seq;
	int latest_pending;
	float *scratch;
	int64_t accepted_upto; /* highest sequence accepted, -1 none */
	int64_t in_force;      /* sequence of the command applied, -1 none */
	uint64_t next_frame;   /* id of the next frame to expose */
	zmq_msg_t rx;
	int rx_open;
	wt_ratelimit refuse_rl;
	sim_driver_stats st;
};

/* ---- truth record ---------------------------------------------------- */

static void put16(uint8_t *p, uint16_t v)
{
	p[0] = (uint8_t)v;
	p[1] = (uint8_t)(v >> 8);
}

static void put32(uint8_t *p, uint32_t v)
{
	int i;

	for (i = 0; i < 4; i++) {
		p[i] = (uint8_t)(v >> (8 * i));
	}
}

static void put64(uint8_t *p, uint64_t v)
{
	int i;

	for (i = 0; i < 8; i++) {
		p[i] = (uint8_t)(v >> (8 * i));
	}
}

static void putf64(uint8_t *p, double v)
{
	uint64_t u;

	memcpy(&u, &v, sizeof(u));
	put64(p, u);
}

static uint16_t get16(const uint8_t *p)
{
	return (uint16_t)(p[0] | (p[1] << 8));
}

static uint32_t get32(const uint8_t *p)
{
	uint32_t v = 0;
	int i;

	for (i = 3; i >= 0; i--) {
		v = (v << 8) | p[i];
	}
	return v;
}

static uint64_t get64(const uint8_t *p)
{
	uint64_t v = 0;
	int i;

	for (i = 7; i >= 0; i--) {
		v = (v << 8) | p[i];
	}
	return v;
}

static double getf64(const uint8_t *p)
{
	uint64_t u = get64(p);
	double v;

	memcpy(&v, &u, sizeof(v));
	return v;
}

void sim_truth_encode(const sim_truth *t, uint8_t out[SIM_TRUTH_BYTES])
{
	memcpy(out, SIM_TRUTH_TOPIC, 5);
	put16(out + 5, SIM_TRUTH_VERSION);
	put64(out + 7, t->frame);
	put64(out + 15, (uint64_t)t->command);
	putf64(out + 23, t->time_s);
	putf64(out + 31, t->rms_nm);
	putf64(out + 39, t->rms_tt_removed_nm);
	putf64(out + 47, t->strehl);
	put32(out + 55, t->clipped);
	put32(out + 59, t->saturated);
	put64(out + 63, t->refused);
	put64(out + 71, t->stale);
	put64(out + 79, t->clipped_total);
	put64(out + 87, t->timeouts);
	for (int i = 0; i < SIM_TRUTH_ZERNIKES; i++) {
		putf64(out + SIM_TRUTH_BYTES_V1 + 8 * i, t->zernike_nm[i]);
	}
}

int sim_truth_decode(const void *msg, size_t len, sim_truth *t)
{
	const uint8_t *p = msg;

	unsigned version;

	if (!msg || !t || len < SIM_TRUTH_BYTES_V1 ||
	    memcmp(p, SIM_TRUTH_TOPIC, 5) != 0) {
		return -EINVAL;
	}
	version = get16(p + 5);
	if (!(version == 1 && len == SIM_TRUTH_BYTES_V1) &&
	    !(version == 2 && len == SIM_TRUTH_BYTES)) {
		return -EINVAL;
	}
	for (int i = 0; i < SIM_TRUTH_ZERNIKES; i++) {
		t->zernike_nm[i] =
			version == 2 ? getf64(p + SIM_TRUTH_BYTES_V1 + 8 * i)
				     : NAN;
	}
	t->frame = get64(p + 7);
	t->command = (int64_t)get64(p + 15);
	t->time_s = getf64(p + 23);
	t->rms_nm = getf64(p + 31);
	t->rms_tt_removed_nm = getf64(p + 39);
	t->strehl = getf64(p + 47);
	t->clipped = get32(p + 55);
	t->saturated = get32(p + 59);
	t->refused = get64(p + 63);
	t->stale = get64(p + 71);
	t->clipped_total = get64(p + 79);
	t->timeouts = get64(p + 87);
	return 0;
}

/* ---- set-up ------------------------------------------------------------ */

/* sim.secret_key and sim.clients: CURVE on the tcp endpoints, with a ZAP
 * handler that lets in the listed keys only. */
static int sim_access(sim_driver *d, const wt_config *cfg, wt_error *err)
{
	const char *secret = wt_config_string(cfg, WT_OPT_SIM_SECRET_KEY);
	const char *clients = wt_config_string(cfg, WT_OPT_SIM_CLIENTS);
	int rc;

	if (!secret[0]) {
		if (clients[0]) {
			return wt_error_set(err, -EINVAL,
					    "sim.clients needs sim.secret_key");
		}
		return 0;
	}
	if (!clients[0]) {
		return wt_error_set(err, -EINVAL,
				    "sim.secret_key needs sim.clients: CURVE "
				    "without an allow-list would let in "
				    "anyone");
	}
	rc = wt_key_read_secret(secret, &d->keys, err);
	if (rc < 0) {
		return rc;
	}
	rc = wt_keylist_load(clients, &d->clients, err);
	if (rc < 0) {
		return rc;
	}
	d->curve = true;
	return wt_zap_start(d->ctx, d->clients, NULL, d->log, &d->zap, err);
}

static int sim_socket(sim_driver *d, int type, const char *name,
		      const char *endpoint, void **out, wt_error *err)
{
	int zero = 0, hwm = SIM_FRAME_HWM, slice = SIM_SLICE_MS, rc;
	void *s = zmq_socket(d->ctx, type);

	if (!s) {
		return wt_error_set(err, -errno, "%s: socket: %s", name,
				    zmq_strerror(errno));
	}
	*out = s;
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	if (type == ZMQ_PUSH) {
		zmq_setsockopt(s, ZMQ_SNDHWM, &hwm, sizeof(hwm));
		zmq_setsockopt(s, ZMQ_SNDTIMEO, &slice, sizeof(slice));
	}
	rc = wt_endpoint_check(name, endpoint, true, d->curve, err);
	if (rc == 0 && d->curve && wt_endpoint_wants_curve(endpoint)) {
		rc = wt_curve_server(s, &d->keys, err);
	}
	if (rc < 0) {
		return rc;
	}
	if (zmq_bind(s, endpoint) != 0) {
		return wt_error_set(err, -errno, "%s: bind %s: %s", name,
				    endpoint, zmq_strerror(errno));
	}
	return 0;
}

int sim_driver_create(const wt_config *cfg, wt_log *log, sim_driver **out,
		      wt_error *err)
{
	sim_driver *d;
	uint32_t bytes;
	int rc, b;

	if (!cfg || !out) {
		return wt_error_set(err, -EINVAL, "sim: NULL argument");
	}
	*out = NULL;
	d = calloc(1, sizeof(*d));
	if (!d) {
		return wt_error_set(err, -ENOMEM, "sim: out of memory");
	}
	d->log = log;
	wt_ratelimit_init(&d->refuse_rl, 10 * WT_NS_PER_S, 5);
	d->accepted_upto = -1;
	d->in_force = -1;
	d->latest_seq = -1;
	for (b = 0; b < SIM_POOL; b++) {
		atomic_init(&d->pool[b].busy, 0);
	}
	rc = sim_world_create(cfg, &d->world, err);
	if (rc < 0) {
		goto fail;
	}
	d->mode = wt_config_enum(cfg, WT_OPT_SIM_MODE);
	d->delay = (int)wt_config_int(cfg, WT_OPT_SIM_DELAY);
	d->timeout_ms = (int)wt_config_int(cfg, WT_OPT_SIM_TIMEOUT_MS);
	d->period_s = 1.0 / wt_config_double(cfg, WT_OPT_SIM_FRAME_RATE_HZ);
	d->width = sim_world_width(d->world);
	d->n_act = sim_world_actuators(d->world);
	rc = wt_proto_payload_size(WT_KIND_PIXELS_U16, (uint32_t)d->width,
				   (uint32_t)d->width, &bytes);
	if (rc < 0) {
		wt_error_set(err, rc, "sim: a %d x %d frame is too large",
			     d->width, d->width);
		goto fail;
	}
	d->msg_bytes = WT_PROTO_HEADER_BYTES + (size_t)bytes;
	for (b = 0; b < SIM_POOL; b++) {
		/* 64-byte aligned: the pixels at offset 40 are 8-aligned */
		d->pool[b].data =
			aligned_alloc(64, (d->msg_bytes + 63) / 64 * 64);
		if (!d->pool[b].data) {
			rc = wt_error_set(err, -ENOMEM, "sim: out of memory");
			goto fail;
		}
		memset(d->pool[b].data, 0, d->msg_bytes);
	}
	d->q_cap = d->delay + 1;
	d->q_seq = calloc((size_t)d->q_cap, sizeof(*d->q_seq));
	d->q_cmd = calloc((size_t)d->q_cap * d->n_act, sizeof(float));
	d->latest = calloc((size_t)d->n_act, sizeof(float));
	d->scratch = calloc((size_t)d->n_act, sizeof(float));
	if (!d->q_seq || !d->q_cmd || !d->latest || !d->scratch) {
		rc = wt_error_set(err, -ENOMEM, "sim: out of memory");
		goto fail;
	}
	d->ctx = zmq_ctx_new();
	if (!d->ctx) {
		rc = wt_error_set(err, -ENOMEM, "sim: zmq_ctx_new failed");
		goto fail;
	}
	rc = sim_access(d, cfg, err);
	if (rc == 0) {
		rc = sim_socket(d, ZMQ_PUSH, "driver.frames",
				wt_config_string(cfg, WT_OPT_DRIVER_FRAMES),
				&d->frames, err);
	}
	if (rc == 0) {
		rc = sim_socket(d, ZMQ_PULL, "driver.commands",
				wt_config_string(cfg, WT_OPT_DRIVER_COMMANDS),
				&d->commands, err);
	}
	if (rc == 0) {
		rc = sim_socket(d, ZMQ_PUB, "sim.truth",
				wt_config_string(cfg, WT_OPT_SIM_TRUTH),
				&d->truth, err);
	}
	if (rc < 0) {
		goto fail;
	}
	zmq_msg_init(&d->rx);
	d->rx_open = 1;
	*out = d;
	return 0;
fail:
	sim_driver_destroy(d);
	return rc;
}

void sim_driver_destroy(sim_driver *d)
{
	int b;

	if (!d) {
		return;
	}
	if (d->rx_open) {
		zmq_msg_close(&d->rx);
	}
	if (d->frames) {
		zmq_close(d->frames);
	}
	if (d->commands) {
		zmq_close(d->commands);
	}
	if (d->truth) {
		zmq_close(d->truth);
	}
	wt_zap_stop(d->zap);
	wt_keylist_destroy(d->clients);
	if (d->ctx) {
		/* every socket has linger 0, so this returns; it also waits
		 * for the I/O thread to release the frame buffers */
		while (zmq_ctx_term(d->ctx) != 0 && errno == EINTR) {
		}
	}
	for (b = 0; b < SIM_POOL; b++) {
		free(d->pool[b].data);
	}
	free(d->q_seq);
	free(d->q_cmd);
	free(d->latest);
	free(d->scratch);
	sim_world_destroy(d->world);
	free(d);
}

void sim_driver_stats_get(const sim_driver *d, sim_driver_stats *st)
{
	*st = d->st;
}

sim_world *sim_driver_world(sim_driver *d)
{
	return d->world;
}

/* ---- commands ---------------------------------------------------------- */

static void sim_refuse(sim_driver *d, const char *why, int code)
{
	d->st.refused++;
	WT_LOG_RATELIMITED(d->log, &d->refuse_rl, LOG_WARNING,
			   "command refused: %s (%s)", why,
			   code ? wt_strerror(code) : "-");
}

static void sim_queue_push(sim_driver *d, int64_t seq, const float *cmd)
{
	int slot;

	if (d->q_count == d->q_cap) {
		/* cannot happen in lockstep (at most delay commands wait);
		 * keep the newest */
		d->q_head = (d->q_head + 1) % d->q_cap;
		d->q_count--;
		d->st.stale++;
	}
	slot = (d->q_head + d->q_count) % d->q_cap;
	d->q_seq[slot] = seq;
	memcpy(d->q_cmd + (size_t)slot * d->n_act, cmd,
	       (size_t)d->n_act * sizeof(float));
	d->q_count++;
}

static void sim_command(sim_driver *d, const void *msg, size_t len)
{
	const void *payload;
	wt_header h;
	int rc, k;

	rc = wt_proto_decode(msg, len, &h, &payload);
	if (rc < 0) {
		sim_refuse(d, "malformed message", rc);
		return;
	}
	if (h.kind != WT_KIND_COMMAND_F32) {
		sim_refuse(d, "not a command", 0);
		return;
	}
	if (h.width != (uint32_t)d->n_act) {
		sim_refuse(d, "wrong number of actuators", 0);
		return;
	}
	memcpy(d->scratch, payload, (size_t)d->n_act * sizeof(float));
	for (k = 0; k < d->n_act; k++) {
		if (!isfinite(d->scratch[k])) {
			sim_refuse(d, "NaN or infinite value", 0);
			return;
		}
	}
	if (h.sequence >= d->next_frame) {
		sim_refuse(d, "answers a frame not yet sent", 0);
		return;
	}
	/* A second answer to the same frame replaces the first (the daemon
	 * sends its flat or safe command that way when it stops or faults);
	 * only answers to older frames are stale. */
	if ((int64_t)h.sequence < d->accepted_upto) {
		d->st.stale++;
		return;
	}
	d->accepted_upto = (int64_t)h.sequence;
	d->st.accepted++;
	if (d->mode == SIM_MODE_LOCKSTEP) {
		sim_queue_push(d, (int64_t)h.sequence, d->scratch);
	} else {
		memcpy(d->latest, d->scratch, (size_t)d->n_act * sizeof(float));
		d->latest_seq = (int64_t)h.sequence;
		d->latest_pending = 1;
	}
}

/* Read every command waiting, without blocking. */
static int sim_take_commands(sim_driver *d)
{
	for (;;) {
		int n = zmq_msg_recv(&d->rx, d->commands, ZMQ_DONTWAIT);

		if (n < 0) {
			if (errno == EINTR) {
				continue;
			}
			return errno == EAGAIN ? 0 : -errno;
		}
		if (zmq_msg_more(&d->rx)) {
			/* every command is one part: refuse the whole message
			 */
			sim_refuse(d, "multipart message", 0);
			while (zmq_msg_more(&d->rx) &&
			       zmq_msg_recv(&d->rx, d->commands, 0) >= 0) {
			}
			continue;
		}
		sim_command(d, zmq_msg_data(&d->rx), zmq_msg_size(&d->rx));
	}
}

/* Wait up to timeout_ms for a command to be readable (EINTR: return). */
static int sim_poll_commands(sim_driver *d, long timeout_ms)
{
	zmq_pollitem_t it = {.socket = d->commands, .events = ZMQ_POLLIN};
	int rc = zmq_poll(&it, 1, timeout_ms);

	if (rc < 0) {
		return errno == EINTR ? 0 : -errno;
	}
	return sim_take_commands(d);
}

/* Lockstep: apply, in order, every queued command answering <= due. */
static void sim_apply_due(sim_driver *d, int64_t due)
{
	while (d->q_count > 0 && d->q_seq[d->q_head] <= due) {
		sim_mirror_apply(sim_world_mirror(d->world),
				 d->q_cmd + (size_t)d->q_head * d->n_act);
		d->in_force = d->q_seq[d->q_head];
		d->q_head = (d->q_head + 1) % d->q_cap;
		d->q_count--;
	}
}

/* ---- frames ------------------------------------------------------------ */

static void sim_release(void *data, void *hint)
{
	struct sim_frame_buf *b = hint;

	(void)data;
	atomic_store(&b->busy, 0);
}

static int sim_free_buf(sim_driver *d)
{
	int b;

	for (b = 0; b < SIM_POOL; b++) {
		if (!atomic_load(&d->pool[b].busy)) {
			return b;
		}
	}
	return -1;
}

/*
 * Send pool buffer b.  wait: block (in slices, while *stop is 0) until a
 * peer takes it; otherwise give up at once.  Returns 0, -EAGAIN (not sent)
 * or another negative code.
 */
static int sim_send_buf(sim_driver *d, int b, int wait,
			volatile sig_atomic_t *stop)
{
	struct sim_frame_buf *fb = &d->pool[b];
	zmq_msg_t msg;
	int rc = 0;

	atomic_store(&fb->busy, 1);
	if (zmq_msg_init_data(&msg, fb->data, d->msg_bytes, sim_release, fb) !=
	    0) {
		atomic_store(&fb->busy, 0);
		return -errno;
	}
	for (;;) {
		if (zmq_msg_send(&msg, d->frames, wait ? 0 : ZMQ_DONTWAIT) >=
		    0) {
			return 0; /* the message now owns the buffer */
		}
		rc = -errno;
		if ((rc == -EINTR || (rc == -EAGAIN && wait)) && !*stop) {
			continue;
		}
		break;
	}
	zmq_msg_close(&msg); /* releases the buffer */
	return rc;
}

static void sim_publish_truth(sim_driver *d, uint64_t id,
			      const sim_world_truth *wt)
{
	sim_mirror *m = sim_world_mirror(d->world);
	uint8_t rec[SIM_TRUTH_BYTES];
	sim_truth t = {
		.frame = id,
		.command = d->in_force,
		.time_s = wt->time_s,
		.rms_nm = wt->rms_nm,
		.rms_tt_removed_nm = wt->rms_tt_removed_nm,
		.strehl = wt->strehl,
		.clipped = (uint32_t)sim_mirror_clipped_last(m),
		.saturated = (uint32_t)wt->saturated,
		.refused = d->st.refused,
		.stale = d->st.stale,
		.clipped_total = (uint64_t)sim_mirror_clipped_total(m),
		.timeouts = d->st.timeouts,
	};

	memcpy(t.zernike_nm, wt->zernike_nm, sizeof(t.zernike_nm));

	sim_truth_encode(&t, rec);
	/* PUB never blocks; a subscriber too slow loses records */
	while (zmq_send(d->truth, rec, sizeof(rec), ZMQ_DONTWAIT) < 0 &&
	       errno == EINTR) {
	}
}

/*
 * Expose the next frame into a free buffer, publish its truth, send it.
 * Returns 0, 1 when the frame was dropped (free mode), or a negative code.
 */
static int sim_frame(sim_driver *d, int wait, volatile sig_atomic_t *stop)
{
	sim_world_truth wt;
	wt_header h;
	int b, rc;

	b = sim_free_buf(d);
	while (b < 0 && wait && !*stop) {
		wt_clock_sleep_ns(WT_NS_PER_MS);
		b = sim_free_buf(d);
	}
	if (b < 0) {
		if (!*stop) {
			d->st.dropped++;
		}
		return 1;
	}
	rc = sim_world_expose(
		d->world, (uint16_t *)(d->pool[b].data + WT_PROTO_HEADER_BYTES),
		&wt);
	if (rc < 0) {
		return rc;
	}
	memset(&h, 0, sizeof(h));
	h.version = WT_PROTO_VERSION;
	h.kind = WT_KIND_PIXELS_U16;
	h.sequence = d->next_frame;
	h.timestamp_ns = wt_clock_ns();
	h.width = (uint32_t)d->width;
	h.height = (uint32_t)d->width;
	h.payload_bytes = (uint32_t)(d->msg_bytes - WT_PROTO_HEADER_BYTES);
	rc = wt_proto_encode(&h, d->pool[b].data + WT_PROTO_HEADER_BYTES,
			     d->pool[b].data, d->msg_bytes);
	if (rc < 0) {
		return rc;
	}
	d->pool[b].id = d->next_frame;
	sim_publish_truth(d, d->next_frame, &wt);
	d->next_frame++;
	rc = sim_send_buf(d, b, wait, stop);
	if (rc == -EAGAIN || (rc == -EINTR && *stop)) {
		if (!*stop) {
			d->st.dropped++;
		}
		return 1;
	}
	if (rc < 0) {
		return rc;
	}
	d->st.frames++;
	return 0;
}

/* ---- loops ------------------------------------------------------------- */

static int sim_run_lockstep(sim_driver *d, volatile sig_atomic_t *stop,
			    uint64_t max_frames)
{
	uint64_t wait_start = 0;
	int waiting = 0, rc;

	while (!*stop && (max_frames == 0 || d->st.frames < max_frames)) {
		int64_t due = (int64_t)d->next_frame - d->delay;

		rc = sim_take_commands(d);
		if (rc < 0) {
			return rc;
		}
		if (due >= 0 && d->accepted_upto < due) {
			uint64_t now = wt_clock_ns();

			if (!waiting) {
				waiting = 1;
				wait_start = now;
			} else if (now - wait_start >=
				   (uint64_t)d->timeout_ms * WT_NS_PER_MS) {
				/* a lost command or a restarted daemon must
				 * not stall the loop: go on without it */
				d->st.timeouts++;
				WT_LOG(d->log, LOG_WARNING,
				       "no command for frame %lld after %d ms; "
				       "exposing frame %llu without it",
				       (long long)due, d->timeout_ms,
				       (unsigned long long)d->next_frame);
				goto expose;
			}
			rc = sim_poll_commands(d, SIM_SLICE_MS);
			if (rc < 0) {
				return rc;
			}
			continue;
		}
	expose:
		waiting = 0;
		sim_apply_due(d, due);
		rc = sim_frame(d, 1, stop);
		if (rc < 0) {
			return rc;
		}
	}
	return 0;
}

static int sim_run_free(sim_driver *d, volatile sig_atomic_t *stop,
			uint64_t max_frames)
{
	uint64_t period = (uint64_t)llround(d->period_s * 1e9);
	uint64_t next = wt_clock_ns();
	int rc;

	if (period == 0) {
		period = 1;
	}
	while (!*stop && (max_frames == 0 || d->st.frames < max_frames)) {
		uint64_t now = wt_clock_ns();

		if (now < next) {
			uint64_t left = next - now;

			if (left >= WT_NS_PER_MS) {
				long ms = (long)(left / WT_NS_PER_MS);

				rc = sim_poll_commands(
					d,
					ms < SIM_SLICE_MS ? ms : SIM_SLICE_MS);
				if (rc < 0) {
					return rc;
				}
			} else {
				wt_clock_sleep_ns(left);
			}
			continue;
		}
		rc = sim_take_commands(d);
		if (rc < 0) {
			return rc;
		}
		if (d->latest_pending) {
			sim_mirror_apply(sim_world_mirror(d->world), d->latest);
			d->in_force = d->latest_seq;
			d->latest_pending = 0;
		}
		rc = sim_frame(d, 0, stop);
		if (rc < 0) {
			return rc;
		}
		next += period;
		now = wt_clock_ns();
		if (now >= next + period) {
			next = now; /* too late: restart the schedule */
		}
	}
	return 0;
}

int sim_driver_run(sim_driver *d, volatile sig_atomic_t *stop,
		   uint64_t max_frames)
{
	if (!d || !stop) {
		return -EINVAL;
	}
	if (d->mode == SIM_MODE_FREE) {
		return sim_run_free(d, stop, max_frames);
	}
	return sim_run_lockstep(d, stop, max_frames);
}
