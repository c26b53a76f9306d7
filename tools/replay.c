/*
 * replay.c - pre-rendered frames to wavetrimd, answers timed (replay.h).
 */
#include "replay.h"

#include <errno.h>
#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_proto.h"
#include "wt_secure.h"

/* Longest single wait in zmq_poll, so the stop flag is seen. */
#define REPLAY_POLL_SLICE_MS 50

struct replay {
	void *frames, *commands;
	int side, n_act, prerender;
	long max_frames;
	size_t frame_bytes, command_bytes;
	uint8_t *buffers;  /* prerender x frame_bytes, 64-byte aligned each */
	size_t stride;	   /* bytes between buffers */
	uint8_t *cmdbuf;   /* one command, + 1 byte to see a longer one */
	uint64_t *send_ns; /* max_frames */
	uint64_t *recv_ns; /* max_frames; 0: not answered */
	uint64_t *lat;	   /* max_frames: scratch for the stats */
	uint64_t next_id;
	unsigned next_buf; /* buffer of the next frame */
	const volatile sig_atomic_t *stop;
};

static bool stopped(const replay *r)
{
	return r->stop && *r->stop;
}

static void *bind_socket(void *zctx, int type, const char *option,
			 const char *endpoint, wt_error *err)
{
	int zero = 0, hwm = REPLAY_HWM;
	void *s;

	if (wt_endpoint_check(option, endpoint, true, false, err) < 0) {
		return NULL;
	}
	s = zmq_socket(zctx, type);
	if (!s) {
		wt_error_set(err, -EIO, "%s: %s", option,
			     zmq_strerror(zmq_errno()));
		return NULL;
	}
	/* LINGER 0 or zmq_ctx_term waits for unsent frames; a short send
	 * queue, as the daemon's (a slow peer costs frames, not a backlog).
	 * The command side keeps libzmq's receive queue, as
	 * sim/sim_driver.c does: with a short one the daemon's sends fail
	 * now and then although every command is read at once. */
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	if (type == ZMQ_PUSH) {
		zmq_setsockopt(s, ZMQ_SNDHWM, &hwm, sizeof(hwm));
	}
	if (zmq_bind(s, endpoint) != 0) {
		wt_error_set(err, -EADDRINUSE, "%s: cannot bind %s: %s", option,
			     endpoint, zmq_strerror(zmq_errno()));
		zmq_close(s);
		return NULL;
	}
	return s;
}

int replay_create(void *zctx, const struct replay_config *cfg, replay **out,
		  wt_error *err)
{
	replay *r;
	uint64_t rng;
	size_t pixels;
	int k;

	*out = NULL;
	if (!zctx || !cfg || !cfg->lenslets || cfg->pixels_per_lenslet < 1 ||
	    cfg->n_act < 1 || cfg->max_frames < 1 ||
	    cfg->prerender < REPLAY_MIN_PRERENDER) {
		return wt_error_set(err, -EINVAL,
				    "replay: bad configuration (K >= %d "
				    "frames, at least one frame and actuator)",
				    REPLAY_MIN_PRERENDER);
	}
	r = calloc(1, sizeof(*r));
	if (!r) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	r->side = cfg->lenslets->n * cfg->pixels_per_lenslet;
	r->n_act = cfg->n_act;
	r->prerender = cfg->prerender;
	r->max_frames = cfg->max_frames;
	r->stop = cfg->stop;
	r->next_id = cfg->first_id;
	pixels = (size_t)r->side * (size_t)r->side;
	r->frame_bytes = WT_PROTO_HEADER_BYTES + 2 * pixels;
	r->command_bytes =
		WT_PROTO_HEADER_BYTES + (size_t)r->n_act * sizeof(float);
	r->stride = (r->frame_bytes + 63) & ~(size_t)63;
	r->buffers = aligned_alloc(64, r->stride * (size_t)r->prerender);
	r->cmdbuf = malloc(r->command_bytes + 1);
	r->send_ns = calloc((size_t)r->max_frames, sizeof(uint64_t));
	r->recv_ns = calloc((size_t)r->max_frames, sizeof(uint64_t));
	r->lat = calloc((size_t)r->max_frames, sizeof(uint64_t));
	if (!r->buffers || !r->cmdbuf || !r->send_ns || !r->recv_ns ||
	    !r->lat) {
		replay_destroy(r);
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	rng = cfg->seed * 0x100000001b3ull + (uint64_t)r->side;
	for (k = 0; k < r->prerender; k++) {
		uint16_t *px = (uint16_t *)(r->buffers + r->stride * (size_t)k +
					    WT_PROTO_HEADER_BYTES);

		bench_render_spots(px, r->side, cfg->lenslets,
				   cfg->pixels_per_lenslet, &rng, NULL, NULL);
	}
	/* every page touched before the first frame */
	memset(r->cmdbuf, 0, r->command_bytes + 1);
	memset(r->lat, 0, (size_t)r->max_frames * sizeof(uint64_t));
	r->frames = bind_socket(zctx, ZMQ_PUSH, "driver.frames",
				cfg->frames_endpoint, err);
	if (r->frames) {
		r->commands = bind_socket(zctx, ZMQ_PULL, "driver.commands",
					  cfg->commands_endpoint, err);
	}
	if (!r->frames || !r->commands) {
		int code = err ? err->code : -EIO;

		replay_destroy(r);
		return code < 0 ? code : -EIO;
	}
	*out = r;
	return 0;
}

void replay_destroy(replay *r)
{
	if (!r) {
		return;
	}
	if (r->frames) {
		zmq_close(r->frames);
	}
	if (r->commands) {
		zmq_close(r->commands);
	}
	free(r->buffers);
	free(r->cmdbuf);
	free(r->send_ns);
	free(r->recv_ns);
	free(r->lat);
	free(r);
}

size_t replay_frame_bytes(const replay *r)
{
	return r->frame_bytes;
}

size_t replay_command_bytes(const replay *r)
{
	return r->command_bytes;
}

uint64_t replay_next_id(const replay *r)
{
	return r->next_id;
}

/*
 * libzmq 4.3.4 reads the I/O thread's "queue drained" notes at most about
 * once a millisecond on a non-blocking send, so above ~1 kHz a short queue
 * looks full although it is empty (daemon/loop.c does the same): reading
 * ZMQ_EVENTS processes them; then one more try.
 */
static bool send_retry(void *sock, zmq_msg_t *msg)
{
	int events = 0;
	size_t len = sizeof(events);

	if (zmq_getsockopt(sock, ZMQ_EVENTS, &events, &len) != 0 ||
	    !(events & ZMQ_POLLOUT)) {
		return false;
	}
	return zmq_msg_send(msg, sock, ZMQ_DONTWAIT) >= 0;
}

/* Send frame i of the run (id base + i) without a copy; 0 or -EAGAIN. */
static int send_frame(replay *r, uint64_t base, long i)
{
	/* The buffer advances only when a frame was taken: libzmq holds at
	 * most REPLAY_HWM queued frames and the one being written, so a
	 * buffer is rewritten only after prerender >= 2 x REPLAY_HWM later
	 * frames were taken, never while it may still go out. */
	uint8_t *buf = r->buffers + r->stride * (size_t)r->next_buf;
	wt_header h = {.version = WT_PROTO_VERSION,
		       .kind = WT_KIND_PIXELS_U16,
		       .sequence = base + (uint64_t)i,
		       .width = (uint32_t)r->side,
		       .height = (uint32_t)r->side,
		       .payload_bytes = (uint32_t)(r->frame_bytes -
						   WT_PROTO_HEADER_BYTES)};
	zmq_msg_t msg;
	uint64_t t;

	t = wt_clock_ns();
	h.timestamp_ns = t;
	wt_proto_encode_header(&h, buf);
	/* no free function: libzmq keeps a pointer, allocates nothing */
	zmq_msg_init_data(&msg, buf, r->frame_bytes, NULL, NULL);
	if (zmq_msg_send(&msg, r->frames, ZMQ_DONTWAIT) < 0 &&
	    !(zmq_errno() == EAGAIN && send_retry(r->frames, &msg))) {
		zmq_msg_close(&msg);
		return -EAGAIN;
	}
	r->next_buf = (r->next_buf + 1) % (unsigned)r->prerender;
	r->send_ns[i] = t;
	return 0;
}

/* Receive every command waiting; stamp the first answer to each frame of
 * the run [base, base + n). */
static void drain_commands(replay *r, uint64_t base, long n,
			   struct replay_result *res)
{
	for (;;) {
		int len = zmq_recv(r->commands, r->cmdbuf, r->command_bytes + 1,
				   ZMQ_DONTWAIT);
		uint64_t now = wt_clock_ns();
		const void *payload;
		wt_header h;
		long i;
		int k;

		if (len < 0) {
			return;
		}
		if ((size_t)len > r->command_bytes ||
		    wt_proto_decode(r->cmdbuf, (size_t)len, &h, &payload) < 0 ||
		    h.kind != WT_KIND_COMMAND_F32 ||
		    h.width != (uint32_t)r->n_act) {
			res->refused++;
			continue;
		}
		for (k = 0; k < r->n_act; k++) {
			float v;

			memcpy(&v, (const uint8_t *)payload + 4 * k, 4);
			if (!isfinite(v)) {
				break;
			}
		}
		if (k < r->n_act) {
			res->refused++;
			continue;
		}
		if (h.sequence < base || h.sequence >= base + (uint64_t)n) {
			res->foreign++;
			continue;
		}
		i = (long)(h.sequence - base);
		if (r->send_ns[i] == 0) {
			res->foreign++; /* a frame not sent: not ours */
		} else if (r->recv_ns[i] != 0) {
			res->duplicates++;
		} else {
			r->recv_ns[i] = now;
			res->received++;
		}
	}
}

static int wait_commands(replay *r, long ms)
{
	zmq_pollitem_t it = {.socket = r->commands, .events = ZMQ_POLLIN};
	int rc = zmq_poll(&it, 1, ms);

	if (rc < 0 && zmq_errno() != EINTR) {
		return -zmq_errno();
	}
	return 0;
}

static int run_begin(replay *r, long n, struct replay_result *res)
{
	memset(res, 0, sizeof(*res));
	if (n < 1 || n > r->max_frames) {
		return -EINVAL;
	}
	memset(r->send_ns, 0, (size_t)n * sizeof(uint64_t));
	memset(r->recv_ns, 0, (size_t)n * sizeof(uint64_t));
	return 0;
}

static void run_end(replay *r, uint64_t base, long n, uint64_t t_first,
		    uint64_t t_last_send, struct replay_result *res)
{
	long i, m = 0;

	for (i = 0; i < n; i++) {
		if (r->send_ns[i] && r->recv_ns[i]) {
			r->lat[m++] = r->recv_ns[i] - r->send_ns[i];
		}
	}
	stats_of(r->lat, m, &res->latency);
	res->missing = res->sent - res->received;
	res->elapsed_s = (double)(wt_clock_ns() - t_first) / 1e9;
	res->rate_hz = res->sent > 1 && t_last_send > t_first
			       ? (double)(res->sent - 1) * 1e9 /
					 (double)(t_last_send - t_first)
			       : 0.0;
	r->next_id = base + (uint64_t)n;
}

int replay_lockstep(replay *r, long n, int timeout_ms,
		    struct replay_result *res)
{
	uint64_t base = r->next_id, t_first = 0, t_last = 0;
	uint64_t timeout_ns = (uint64_t)timeout_ms * WT_NS_PER_MS;
	long i;
	int rc = run_begin(r, n, res);

	if (rc < 0) {
		return rc;
	}
	for (i = 0; i < n && !stopped(r); i++) {
		uint64_t deadline = wt_clock_ns() + timeout_ns;
		zmq_pollitem_t out = {.socket = r->frames,
				      .events = ZMQ_POLLOUT};

		/* a PUSH without a peer takes nothing: wait for one */
		while (send_frame(r, base, i) < 0) {
			uint64_t now = wt_clock_ns();

			if (now >= deadline || stopped(r)) {
				break;
			}
			zmq_poll(&out, 1, REPLAY_POLL_SLICE_MS);
		}
		if (r->send_ns[i] == 0) {
			res->send_failed++;
			continue;
		}
		res->sent++;
		t_last = r->send_ns[i];
		if (!t_first) {
			t_first = t_last;
		}
		for (;;) {
			uint64_t now;
			long ms;

			drain_commands(r, base, n, res);
			if (r->recv_ns[i] != 0 || stopped(r)) {
				break;
			}
			now = wt_clock_ns();
			if (now >= deadline) {
				res->timeouts++;
				break;
			}
			ms = (long)((deadline - now) / WT_NS_PER_MS) + 1;
			rc = wait_commands(r, ms < REPLAY_POLL_SLICE_MS
						      ? ms
						      : REPLAY_POLL_SLICE_MS);
			if (rc < 0) {
				return rc;
			}
		}
	}
	run_end(r, base, n, t_first ? t_first : wt_clock_ns(), t_last, res);
	return 0;
}

int replay_free(replay *r, long n, double rate_hz, int drain_ms,
		struct replay_result *res)
{
	uint64_t base = r->next_id, t_first, t_last = 0, due, period;
	uint64_t drain_end;
	long i;
	int rc = run_begin(r, n, res);

	if (rc < 0) {
		return rc;
	}
	if (!(rate_hz > 0.0 && rate_hz <= 1e6)) {
		return -EINVAL;
	}
	period = (uint64_t)llround(1e9 / rate_hz);
	t_first = due = wt_clock_ns();
	for (i = 0; i < n && !stopped(r); i++) {
		struct timespec ts = {.tv_sec = (time_t)(due / WT_NS_PER_S),
				      .tv_nsec = (long)(due % WT_NS_PER_S)};

		while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &ts,
				       NULL) == EINTR &&
		       !stopped(r)) {
		}
		drain_commands(r, base, n, res);
		if (send_frame(r, base, i) == 0) {
			res->sent++;
			t_last = r->send_ns[i];
		} else {
			res->send_failed++;
		}
		due += period; /* absolute: a late frame goes at once */
	}
	drain_end = wt_clock_ns() + (uint64_t)drain_ms * WT_NS_PER_MS;
	while (res->received < res->sent && !stopped(r)) {
		uint64_t now = wt_clock_ns();
		long ms;

		drain_commands(r, base, n, res);
		if (res->received >= res->sent || now >= drain_end) {
			break;
		}
		ms = (long)((drain_end - now) / WT_NS_PER_MS) + 1;
		rc = wait_commands(r, ms < REPLAY_POLL_SLICE_MS
					      ? ms
					      : REPLAY_POLL_SLICE_MS);
		if (rc < 0) {
			return rc;
		}
	}
	run_end(r, base, n, t_first, t_last, res);
	return 0;
}

/* ---- the echo peer ------------------------------------------------------ */

struct replay_echo {
	pthread_t thread;
	void *frames, *commands;
	uint8_t *recvbuf, *sendbuf; /* one frame; 2 x HWM commands */
	size_t recv_len, send_len;
	int n_act, cpu;
	atomic_bool stop;
	uint64_t answered;
};

static void *echo_main(void *arg)
{
	replay_echo *e = arg;
	zmq_pollitem_t it = {.socket = e->frames, .events = ZMQ_POLLIN};
	unsigned next = 0;

	if (e->cpu >= 0) {
		pin_thread(pthread_self(), e->cpu);
	}
	while (!atomic_load(&e->stop)) {
		int len;

		if (zmq_poll(&it, 1, REPLAY_POLL_SLICE_MS) <= 0) {
			continue;
		}
		while ((len = zmq_recv(e->frames, e->recvbuf, e->recv_len,
				       ZMQ_DONTWAIT)) >= 0) {
			uint8_t *buf = e->sendbuf + e->send_len * next;
			wt_header in, out = {.version = WT_PROTO_VERSION,
					     .kind = WT_KIND_COMMAND_F32,
					     .width = (uint32_t)e->n_act,
					     .height = 1};
			zmq_msg_t msg;

			if ((size_t)len > e->recv_len ||
			    wt_proto_decode(e->recvbuf, (size_t)len, &in,
					    NULL) < 0) {
				continue;
			}
			out.sequence = in.sequence;
			out.timestamp_ns = wt_clock_ns();
			out.payload_bytes =
				(uint32_t)(e->send_len - WT_PROTO_HEADER_BYTES);
			wt_proto_encode_header(&out, buf);
			zmq_msg_init_data(&msg, buf, e->send_len, NULL, NULL);
			if (zmq_msg_send(&msg, e->commands, ZMQ_DONTWAIT) < 0 &&
			    !(zmq_errno() == EAGAIN &&
			      send_retry(e->commands, &msg))) {
				zmq_msg_close(&msg);
				continue;
			}
			next = (next + 1) % (2 * REPLAY_HWM);
			e->answered++;
		}
	}
	return NULL;
}

static void *echo_connect(void *zctx, int type, const char *endpoint)
{
	int zero = 0, hwm = REPLAY_HWM;
	void *s = zmq_socket(zctx, type);

	if (!s) {
		return NULL;
	}
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(s, type == ZMQ_PULL ? ZMQ_RCVHWM : ZMQ_SNDHWM, &hwm,
		       sizeof(hwm));
	if (zmq_connect(s, endpoint) != 0) {
		zmq_close(s);
		return NULL;
	}
	return s;
}

int replay_echo_start(void *zctx, const char *frames_endpoint,
		      const char *commands_endpoint, size_t frame_bytes,
		      int n_act, int cpu, replay_echo **out, wt_error *err)
{
	replay_echo *e = calloc(1, sizeof(*e));
	int rc;

	*out = NULL;
	if (!e) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	e->n_act = n_act;
	e->cpu = cpu;
	e->recv_len = frame_bytes;
	e->send_len = WT_PROTO_HEADER_BYTES + (size_t)n_act * sizeof(float);
	e->recvbuf = malloc(frame_bytes);
	e->sendbuf = calloc(2 * REPLAY_HWM, e->send_len);
	e->frames = echo_connect(zctx, ZMQ_PULL, frames_endpoint);
	e->commands = echo_connect(zctx, ZMQ_PUSH, commands_endpoint);
	if (!e->recvbuf || !e->sendbuf || !e->frames || !e->commands) {
		replay_echo_stop(e, NULL);
		return wt_error_set(err, -EIO, "echo peer: cannot set up");
	}
	memset(e->recvbuf, 0, frame_bytes);
	atomic_init(&e->stop, false);
	rc = pthread_create(&e->thread, NULL, echo_main, e);
	if (rc != 0) {
		e->thread = 0;
		replay_echo_stop(e, NULL);
		return wt_error_set(err, -rc, "echo peer: no thread");
	}
	*out = e;
	return 0;
}

void replay_echo_stop(replay_echo *e, uint64_t *answered)
{
	if (!e) {
		return;
	}
	atomic_store(&e->stop, true);
	if (e->thread) {
		pthread_join(e->thread, NULL);
	}
	if (answered) {
		*answered = e->answered;
	}
	if (e->frames) {
		zmq_close(e->frames);
	}
	if (e->commands) {
		zmq_close(e->commands);
	}
	free(e->recvbuf);
	free(e->sendbuf);
	free(e);
}
