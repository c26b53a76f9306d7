/*
 * loop.c - wavetrimd's loop thread: one frame in, one command out.
 *
 * Per frame (DESIGN.md, "The per-frame pipeline"): receive, validate
 * (wt_proto), check the frame id, centroid (or take the driver's slopes),
 * residual = slopes - reference - offset, then by state:
 *   open         the flat
 *   calibrating  the calibrator's pattern (wt_calib)
 *   closed       flat + the leaky integrator's command (wt_control)
 *   held         the last command sent
 *   fault        the safe command (flat or the last command)
 * then clamp to [limit_low, limit_high] (NaN never leaves), send tagged
 * with the frame id, stamp the latency, push a record to the ring.
 *
 * The integrator works on the offset from the flat (command = flat + c),
 * so its leak pulls the mirror toward the flat, not toward zero stroke,
 * and its limits are the mirror's limits minus the flat.
 *
 * Nothing here allocates after wtd_loop_create(), formats text or takes a
 * lock; changes arrive through the mailbox and are applied between frames.
 * Frames are received into one buffer sized for the largest valid frame
 * (a longer message is truncated by libzmq and refused here as a length
 * error) and commands are sent without a copy from a ring of
 * WTD_SEND_BUFFERS preallocated buffers (zmq_msg_init_data without a free
 * function: libzmq allocates nothing for it in this thread).
 * tests/test_e2e_alloc.c counts this thread's heap calls through
 * wtd_alloc_probe(), a weak symbol that only that test defines.
 */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "wt_centroid.h"
#include "wt_clock.h"
#include "wt_control.h"
#include "wt_mvm_split.h"
#include "wt_proto.h"
#include "wtd.h"

#if !defined(__BYTE_ORDER__) || __BYTE_ORDER__ != __ORDER_LITTLE_ENDIAN__
#error "wavetrimd reads payloads in place: little-endian hosts only"
#endif

struct wtd_loop {
	struct wtd *d;
	wt_centroider *cen;
	wt_control *ctl;
	wt_calib *cal;
	wt_mvm *mvm;	     /* control.mvm_split: our own kernel's size */
	wt_mvm_split *split; /* NULL: u = R s on the loop thread alone */

	int state, fault;

	/* per-frame buffers */
	uint16_t *pix;		/* aligned copy of a misaligned payload */
	float *slopes;		/* n_slopes */
	float *residual;	/* n_slopes */
	float *flux;		/* n_subaps */
	uint8_t *valid;		/* n_subaps */
	const float *offset;	/* n_slopes, control-owned; NULL: none */
	float *lo, *hi;		/* n_act: the mirror's limits */
	float *lo_rel, *hi_rel; /* n_act: limits minus the flat */
	float *delta;	  /* n_act: integrator output (offset from flat) */
	float *cmd;	  /* n_act: command being built */
	float *last_cmd;  /* n_act: command sent last */
	uint8_t *sendbuf; /* WTD_SEND_BUFFERS x send_len */
	size_t send_len;
	unsigned send_next; /* buffer of the next command */
	uint8_t *recvbuf;   /* recv_len: one frame */
	size_t recv_len;

	/* installed, control-owned */
	const float *matrix, *ref, *flat;

	/* settings */
	uint64_t timeout_ns;
	bool safe_hold;
	int max_bad;
	int decimation;
	uint16_t full_scale; /* sensor.full_scale: a pixel saturates here */
	bool busy_poll;	     /* daemon.busy_poll: spin, never sleep */
	int min_valid;	     /* fewer valid subapertures: a dark frame */

	/* frame ids */
	bool have_id;
	uint64_t last_id;
	bool ever_frame;
	bool watch_silence; /* a frame came since start / leaving fault */
	uint64_t last_frame_ns;
	int bad_run, stale_run;
	uint64_t answered;
	uint64_t last_image_ns; /* valid when image_sent */
	bool image_sent;
};

/* --- set-up --------------------------------------------------------------- */

static void *zalloc(size_t n, size_t size)
{
	return calloc(n ? n : 1, size);
}

static void limits_relative(struct wtd_loop *l)
{
	int j;

	for (j = 0; j < l->d->n_act; j++) {
		l->lo_rel[j] = l->lo[j] - l->flat[j];
		l->hi_rel[j] = l->hi[j] - l->flat[j];
		if (l->lo_rel[j] > l->hi_rel[j]) {
			/* cannot happen with lo <= hi; keep the pair valid */
			l->hi_rel[j] = l->lo_rel[j];
		}
	}
	wt_control_set_limits(l->ctl, l->lo_rel, l->hi_rel);
}

static void set_limits(struct wtd_loop *l, double low, double high)
{
	int j;

	for (j = 0; j < l->d->n_act; j++) {
		l->lo[j] = (float)low;
		l->hi[j] = (float)high;
	}
	limits_relative(l);
}

/*
 * control.mvm_split: a worker pinned to another CPU computes the second
 * part of u = R s (lib/wt_mvm_split.h).  Any reason it cannot start (one
 * CPU allowed, the worker's CPU is the loop's, pinning refused) is one
 * warning and the product stays on the loop thread.  SCHED_FIFO, when
 * the loop has it, is asked for the worker too; refused, the worker runs
 * without (one more warning).  The kernel is our own, as wt_control's, so
 * u is the same to the bit either way.
 */
static void split_create(struct wtd_loop *l)
{
	struct wtd *d = l->d;
	const wt_config *cfg = d->cfg;
	long loop_cpu = wt_config_int(cfg, WT_OPT_DAEMON_CPU);
	long want = wt_config_int(cfg, WT_OPT_CONTROL_MVM_SPLIT_CPU);
	wt_mvm_split_params p = {
		.split_row = -1,
		.priority =
			(int)wt_config_int(cfg, WT_OPT_DAEMON_REALTIME_PRIORITY),
		.spin_ns = (uint64_t)wt_config_int(
				   cfg, WT_OPT_CONTROL_MVM_SPLIT_SPIN_US) *
			   1000u,
	};
	wt_error err;
	int rc;

	d->split_cpu = -1;
	if (!wt_config_bool(cfg, WT_OPT_CONTROL_MVM_SPLIT)) {
		return;
	}
	p.cpu = want >= 0 ? (int)want : wt_mvm_split_other_cpu((int)loop_cpu);
	if (p.cpu < 0) {
		wt_log_warning(d->log,
			       "control.mvm_split: no CPU other than the "
			       "loop's is allowed (%s); u = R s stays on one "
			       "CPU",
			       wt_strerror(p.cpu));
		return;
	}
	if (p.cpu == loop_cpu) {
		wt_log_warning(d->log,
			       "control.mvm_split: the worker's CPU %d is "
			       "daemon.cpu; u = R s stays on one CPU",
			       p.cpu);
		return;
	}
	rc = wt_mvm_create(d->n_act, d->n_slopes, WT_MVM_OWN, &l->mvm, &err);
	if (rc == 0) {
		rc = wt_mvm_split_create(l->mvm, &p, &l->split, &err);
	}
	if (rc == -EPERM && p.priority > 0) {
		wt_log_warning(d->log,
			       "control.mvm_split: SCHED_FIFO %d not granted "
			       "to the worker; it runs without",
			       p.priority);
		p.priority = 0;
		rc = wt_mvm_split_create(l->mvm, &p, &l->split, &err);
	}
	if (rc == 0) {
		rc = wt_control_set_split(l->ctl, l->split);
	}
	if (rc < 0) {
		wt_log_warning(d->log,
			       "control.mvm_split: %s; u = R s stays on one "
			       "CPU",
			       err.msg);
		wt_mvm_split_destroy(l->split);
		l->split = NULL;
		wt_mvm_destroy(l->mvm);
		l->mvm = NULL;
		return;
	}
	d->split_cpu = p.cpu;
	d->split_row = wt_mvm_split_row(l->split);
	wt_log_notice(d->log,
		      "control.mvm_split: rows %d .. %d of u = R s on a worker "
		      "pinned to CPU %d",
		      wt_mvm_split_row(l->split), d->n_act - 1, p.cpu);
}

int wtd_loop_create(struct wtd *d, wt_error *err)
{
	const wt_config *cfg = d->cfg;
	wt_centroid_params cp = {
		.pixels_per_lenslet = d->ppl,
		.background =
			(float)wt_config_double(cfg, WT_OPT_SENSOR_BACKGROUND),
		.threshold =
			(float)wt_config_double(cfg, WT_OPT_SENSOR_THRESHOLD),
		.min_flux =
			(float)wt_config_double(cfg, WT_OPT_SENSOR_MIN_FLUX),
	};
	struct wtd_loop *l;
	size_t ns = (size_t)d->n_slopes, na = (size_t)d->n_act;
	size_t npix = (size_t)d->frame_side * (size_t)d->frame_side;
	int rc;

	l = calloc(1, sizeof(*l));
	if (!l) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	d->loop = l;
	l->d = d;
	rc = wt_centroid_create(d->lenslets, &cp, &l->cen, err);
	if (rc < 0) {
		return rc;
	}
	rc = wt_control_create(d->n_act, d->n_slopes, &l->ctl, err);
	if (rc < 0) {
		return rc;
	}
	rc = wt_calib_create(d->n_act, d->n_slopes, &l->cal, err);
	if (rc < 0) {
		return rc;
	}
	split_create(l);
	l->pix = zalloc(npix, sizeof(uint16_t));
	l->slopes = zalloc(ns, sizeof(float));
	l->residual = zalloc(ns, sizeof(float));
	l->flux = zalloc((size_t)d->n_subaps, sizeof(float));
	l->valid = zalloc((size_t)d->n_subaps, 1);
	l->lo = zalloc(na, sizeof(float));
	l->hi = zalloc(na, sizeof(float));
	l->lo_rel = zalloc(na, sizeof(float));
	l->hi_rel = zalloc(na, sizeof(float));
	l->delta = zalloc(na, sizeof(float));
	l->cmd = zalloc(na, sizeof(float));
	l->last_cmd = zalloc(na, sizeof(float));
	l->send_len = WT_PROTO_HEADER_BYTES + 4 * na;
	l->sendbuf = zalloc(WTD_SEND_BUFFERS * l->send_len, 1);
	l->recv_len = WT_PROTO_HEADER_BYTES +
		      (npix * sizeof(uint16_t) > ns * sizeof(float)
			       ? npix * sizeof(uint16_t)
			       : ns * sizeof(float));
	l->recvbuf = zalloc(l->recv_len, 1);
	if (!l->pix || !l->slopes || !l->residual || !l->flux || !l->valid ||
	    !l->lo || !l->hi || !l->lo_rel || !l->hi_rel || !l->delta ||
	    !l->cmd || !l->last_cmd || !l->sendbuf || !l->recvbuf) {
		return wt_error_set(err, -ENOMEM, "out of memory for the loop");
	}
	wt_control_set_gain(l->ctl,
			    (float)wt_config_double(cfg, WT_OPT_CONTROL_GAIN));
	wt_control_set_leak(l->ctl,
			    (float)wt_config_double(cfg, WT_OPT_CONTROL_LEAK));
	wt_control_set_slew(
		l->ctl, (float)wt_config_double(cfg, WT_OPT_MIRROR_SLEW_LIMIT));
	l->timeout_ns = (uint64_t)wt_config_int(cfg, WT_OPT_DRIVER_TIMEOUT_MS) *
			WT_NS_PER_MS;
	l->safe_hold = strcmp(wt_config_string(cfg, WT_OPT_SAFETY_SAFE_COMMAND),
			      "hold") == 0;
	l->max_bad = (int)wt_config_int(cfg, WT_OPT_SAFETY_MAX_BAD_FRAMES);
	l->decimation = (int)wt_config_int(cfg, WT_OPT_DAEMON_FRAME_DECIMATION);
	l->full_scale = (uint16_t)wt_config_int(cfg, WT_OPT_SENSOR_FULL_SCALE);
	l->busy_poll = wt_config_bool(cfg, WT_OPT_DAEMON_BUSY_POLL);
	l->min_valid = (int)ceil(
		wt_config_double(cfg, WT_OPT_SAFETY_MIN_VALID_FRACTION) *
		d->n_subaps);
	if (l->min_valid < 1) {
		l->min_valid = 1;
	}
	l->state = WT_STATE_OPEN;
	atomic_store(&d->c.state, WT_STATE_OPEN);
	return 0;
}

void wtd_loop_install_initial(struct wtd *d, const float *matrix, int modes,
			      const float *reference, const float *flat)
{
	struct wtd_loop *l = d->loop;

	l->matrix = matrix;
	wt_control_swap_matrix(l->ctl, matrix);
	l->ref = reference;
	l->flat = flat;
	memcpy(l->last_cmd, flat, sizeof(float) * (size_t)d->n_act);
	set_limits(l, wt_config_double(d->cfg, WT_OPT_MIRROR_LIMIT_LOW),
		   wt_config_double(d->cfg, WT_OPT_MIRROR_LIMIT_HIGH));
	atomic_store(&d->c.have_matrix, matrix != NULL);
	atomic_store(&d->c.modes, matrix ? modes : 0);
}

const wt_calib *wtd_loop_calib(const struct wtd *d)
{
	return d->loop ? d->loop->cal : NULL;
}

void wtd_loop_destroy(struct wtd *d)
{
	struct wtd_loop *l = d->loop;

	if (!l) {
		return;
	}
	if (l->split) {
		wt_mvm_split_stats st;

		wt_mvm_split_get_stats(l->split, &st);
		wt_log_info(d->log,
			    "control.mvm_split: %llu products, the worker's "
			    "rows taken back by the loop in %llu",
			    (unsigned long long)st.applies,
			    (unsigned long long)st.taken);
	}
	/* the worker stops before the controller that uses it goes */
	wt_mvm_split_destroy(l->split);
	wt_mvm_destroy(l->mvm);
	wt_centroid_destroy(l->cen);
	wt_control_destroy(l->ctl);
	wt_calib_destroy(l->cal);
	free(l->pix);
	free(l->slopes);
	free(l->residual);
	free(l->flux);
	free(l->valid);
	free(l->lo);
	free(l->hi);
	free(l->lo_rel);
	free(l->hi_rel);
	free(l->delta);
	free(l->cmd);
	free(l->last_cmd);
	free(l->sendbuf);
	free(l->recvbuf);
	free(l);
	d->loop = NULL;
}

/* --- events and counters -------------------------------------------------- */

static inline void bump(atomic_ullong *c, unsigned long long by)
{
	atomic_fetch_add_explicit(c, by, memory_order_relaxed);
}

static void event(struct wtd_loop *l, uint32_t code, int a, int b, int64_t n,
		  double x)
{
	struct wtd_slot *s = wt_ring_claim(l->d->ring);

	if (!s) {
		bump(&l->d->c.tm_dropped, 1);
		return;
	}
	s->type = WTD_SLOT_EVENT;
	s->has_arrays = 0;
	s->ev.code = code;
	s->ev.a = a;
	s->ev.b = b;
	s->ev.pad = 0;
	s->ev.t_ns = wt_clock_ns();
	s->ev.frame = l->have_id ? l->last_id : UINT64_MAX;
	s->ev.n = n;
	s->ev.x = x;
	wt_ring_publish(l->d->ring);
}

static void set_state(struct wtd_loop *l, int to, int why)
{
	int from = l->state;

	if (from == to) {
		return;
	}
	l->state = to;
	if (from == WT_STATE_CLOSED && l->split) {
		/* no products until the loop closes again: let the worker
		 * sleep now rather than spin out its spin time */
		wt_mvm_split_park(l->split);
	}
	atomic_store_explicit(&l->d->c.state, to, memory_order_release);
	event(l, WTD_EV_STATE, from, to, why, 0);
}

/* --- sending -------------------------------------------------------------- */

/*
 * Clamp l->cmd to the limits (a NaN becomes the flat, clamped), send it
 * tagged with seq, and remember it as the last command.  Returns the
 * number of values clamped here, or -1 if ZeroMQ refused the message.
 */
/*
 * A send that found the queue full may only have found it full on paper:
 * libzmq 4.3.4 learns that the I/O thread has taken queued messages from
 * commands it reads at most about once a millisecond on a non-blocking
 * send (socket_base_t::process_commands throttle), so above ~1 kHz a
 * queue of WTD_LINK_HWM looks full although it is empty.  Reading
 * ZMQ_EVENTS processes those commands at once; then try once more.
 */
static bool retry_send(void *sock, zmq_msg_t *msg)
{
	int events = 0;
	size_t len = sizeof(events);

	if (zmq_getsockopt(sock, ZMQ_EVENTS, &events, &len) != 0 ||
	    !(events & ZMQ_POLLOUT)) {
		return false;
	}
	return zmq_msg_send(msg, sock, ZMQ_DONTWAIT) >= 0;
}

static int send_command(struct wtd_loop *l, uint64_t seq, int *clamped)
{
	struct wtd *d = l->d;
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_COMMAND_F32,
		.sequence = seq,
		.width = (uint32_t)d->n_act,
		.height = 1,
		.payload_bytes = (uint32_t)(4 * d->n_act),
	};
	uint8_t *buf;
	zmq_msg_t msg;
	int j, n = 0;

	for (j = 0; j < d->n_act; j++) {
		float v = l->cmd[j];

		if (isnan(v)) {
			v = l->flat[j];
			n++;
		}
		if (!(v >= l->lo[j])) {
			v = l->lo[j];
			n++;
		} else if (!(v <= l->hi[j])) {
			v = l->hi[j];
			n++;
		}
		l->cmd[j] = v;
	}
	*clamped = n;
	buf = l->sendbuf + (size_t)l->send_next * l->send_len;
	l->send_next = (l->send_next + 1) % WTD_SEND_BUFFERS;
	memcpy(buf + WT_PROTO_HEADER_BYTES, l->cmd,
	       sizeof(float) * (size_t)d->n_act);
	memcpy(l->last_cmd, l->cmd, sizeof(float) * (size_t)d->n_act);
	h.timestamp_ns = wt_clock_ns();
	if (wt_proto_encode(&h, buf + WT_PROTO_HEADER_BYTES, buf, l->send_len) <
	    0) {
		return -1;
	}
	/* No free function: a constant message, nothing allocated. */
	zmq_msg_init_data(&msg, buf, l->send_len, NULL, NULL);
	if (zmq_msg_send(&msg, d->s_commands, ZMQ_DONTWAIT) >= 0 ||
	    (zmq_errno() == EAGAIN && retry_send(d->s_commands, &msg))) {
		return 0;
	}
	zmq_msg_close(&msg);
	bump(&d->c.send_failed, 1);
	return -1;
}

static void cmd_from(struct wtd_loop *l, const float *src)
{
	memcpy(l->cmd, src, sizeof(float) * (size_t)l->d->n_act);
}

/* The integrator continues from the command sent last. */
static void control_from_last(struct wtd_loop *l)
{
	int j;

	for (j = 0; j < l->d->n_act; j++) {
		l->delta[j] = l->last_cmd[j] - l->flat[j];
	}
	wt_control_reset(l->ctl, l->delta);
}

/* --- faults --------------------------------------------------------------- */

static void abort_calibration(struct wtd_loop *l, int why)
{
	int kind = wt_calib_running(l->cal);

	if (kind == WT_CALIB_NONE) {
		return;
	}
	wt_calib_abort(l->cal);
	atomic_store(&l->d->c.calib_kind, WT_CALIB_NONE);
	event(l, WTD_EV_CALIB_ABORTED, kind, why, 0, 0);
}

static void enter_fault(struct wtd_loop *l, int reason, int64_t count)
{
	int clamped;

	if (l->state == WT_STATE_FAULT) {
		return;
	}
	abort_calibration(l, WTD_ABORT_FAULT);
	l->fault = reason;
	atomic_store(&l->d->c.fault, reason);
	bump(&l->d->c.faults, 1);
	event(l, WTD_EV_FAULT, reason, 0, count, 0);
	set_state(l, WT_STATE_FAULT, WTD_WHY_FAULT);
	/* The safe command, sent once now (answering the newest frame); it
	 * also answers every frame until the fault is left. */
	cmd_from(l, l->safe_hold ? l->last_cmd : l->flat);
	if (l->have_id) {
		send_command(l, l->last_id, &clamped);
	} else {
		memcpy(l->last_cmd, l->cmd,
		       sizeof(float) * (size_t)l->d->n_act);
	}
	l->watch_silence = false;
	l->bad_run = 0;
	l->stale_run = 0;
}

static void bad_frame(struct wtd_loop *l)
{
	l->bad_run++;
	if (l->bad_run >= l->max_bad) {
		enter_fault(l, WTD_FAULT_BAD, l->bad_run);
	}
}

static void check_silence(struct wtd_loop *l, uint64_t now)
{
	if (l->watch_silence && l->state != WT_STATE_FAULT &&
	    now - l->last_frame_ns > l->timeout_ns) {
		enter_fault(l, WTD_FAULT_SILENT,
			    (int64_t)((now - l->last_frame_ns) / WT_NS_PER_MS));
	}
}

/* --- the mailbox ---------------------------------------------------------- */

/*
 * Leaving a fault: the driver may have restarted meanwhile, with frame ids
 * from 0 again, and `close` may come before its first frame.  So the next
 * frame's id is taken whatever it is.
 */
static void leave_fault(struct wtd_loop *l)
{
	l->fault = WTD_FAULT_NONE;
	atomic_store(&l->d->c.fault, WTD_FAULT_NONE);
	l->watch_silence = false;
	l->have_id = false;
	l->bad_run = 0;
	l->stale_run = 0;
}

static int apply_state(struct wtd_loop *l, int to)
{
	switch (to) {
	case WT_STATE_OPEN:
		abort_calibration(l, WTD_ABORT_REQUEST);
		if (l->state == WT_STATE_FAULT) {
			leave_fault(l);
		}
		set_state(l, WT_STATE_OPEN, WTD_WHY_REQUEST);
		return 0;
	case WT_STATE_CLOSED:
		if (l->state == WT_STATE_CALIBRATING) {
			return -EBUSY;
		}
		if (!l->matrix) {
			return -ENOENT;
		}
		if (l->state == WT_STATE_CLOSED) {
			return 0;
		}
		control_from_last(l);
		if (l->state == WT_STATE_FAULT) {
			leave_fault(l);
		}
		set_state(l, WT_STATE_CLOSED, WTD_WHY_REQUEST);
		return 0;
	case WT_STATE_HELD:
		if (l->state == WT_STATE_CALIBRATING) {
			return -EBUSY;
		}
		if (l->state == WT_STATE_FAULT) {
			return -EPERM;
		}
		set_state(l, WT_STATE_HELD, WTD_WHY_REQUEST);
		return 0;
	}
	return -EINVAL;
}

static int apply_flat(struct wtd_loop *l, float *capture)
{
	struct wtd_mailbox *mb = &l->d->mb;

	if (l->state == WT_STATE_CALIBRATING) {
		return -EBUSY;
	}
	if (l->state == WT_STATE_FAULT) {
		return -EPERM;
	}
	if (capture) {
		memcpy(capture, l->last_cmd,
		       sizeof(float) * (size_t)l->d->n_act);
		mb->old_flat = l->flat;
		l->flat = capture;
		limits_relative(l);
		event(l, WTD_EV_FLAT_CHANGED, 0, 0, 0, 0);
	} else {
		cmd_from(l, l->flat);
		memcpy(l->last_cmd, l->flat,
		       sizeof(float) * (size_t)l->d->n_act);
	}
	if (l->state == WT_STATE_CLOSED) {
		control_from_last(l);
	}
	return 0;
}

static int apply_calibrate(struct wtd_loop *l, const struct wtd_mb_msg *m)
{
	struct wtd *d = l->d;
	long done, total;
	int rc;

	if (l->state == WT_STATE_CALIBRATING ||
	    atomic_load_explicit(&d->c.calib_ready, memory_order_acquire)) {
		return -EBUSY;
	}
	if (l->state != WT_STATE_OPEN) {
		return -EPERM;
	}
	rc = wt_calib_start(l->cal, (enum wt_calib_kind)m->i, &m->cp, l->flat,
			    l->lo, l->hi, NULL);
	if (rc < 0) {
		return rc;
	}
	wt_calib_progress(l->cal, &done, &total);
	atomic_store(&d->c.calib_done, 0);
	atomic_store(&d->c.calib_total, total);
	atomic_store(&d->c.calib_kind, m->i);
	event(l, WTD_EV_CALIB_STARTED, m->i, 0, total, 0);
	set_state(l, WT_STATE_CALIBRATING, WTD_WHY_REQUEST);
	return 0;
}

static int apply_install(struct wtd_loop *l, const struct wtd_mb_msg *m)
{
	struct wtd *d = l->d;
	struct wtd_mailbox *mb = &d->mb;

	if (l->state == WT_STATE_CALIBRATING) {
		return -EBUSY;
	}
	if (m->matrix) {
		mb->old_matrix = wt_control_swap_matrix(l->ctl, m->matrix);
		l->matrix = m->matrix;
		atomic_store(&d->c.modes, m->i);
		atomic_store(&d->c.have_matrix, true);
		event(l, WTD_EV_MATRIX_INSTALLED, m->i, 0, 0, m->d[0]);
	}
	if (m->reference) {
		mb->old_reference = l->ref;
		l->ref = m->reference;
		event(l, WTD_EV_REFERENCE_INSTALLED, 0, 0, 0, 0);
	}
	if (m->flat) {
		mb->old_flat = l->flat;
		l->flat = m->flat;
		limits_relative(l);
		if (l->state == WT_STATE_CLOSED) {
			control_from_last(l);
		}
		event(l, WTD_EV_FLAT_CHANGED, 0, 0, 0, 0);
	}
	return 0;
}

/* A shape (checked within the limits by control): held from now on. */
static int apply_shape(struct wtd_loop *l, const float *command)
{
	if (!command) {
		return -EINVAL;
	}
	if (l->state == WT_STATE_CALIBRATING) {
		return -EBUSY;
	}
	if (l->state != WT_STATE_OPEN && l->state != WT_STATE_HELD) {
		return -EPERM;
	}
	cmd_from(l, command);
	memcpy(l->last_cmd, command, sizeof(float) * (size_t)l->d->n_act);
	set_state(l, WT_STATE_HELD, WTD_WHY_REQUEST);
	return 0;
}

static int apply(struct wtd_loop *l, const struct wtd_mb_msg *m)
{
	switch (m->type) {
	case WTD_MB_STATE:
		return apply_state(l, m->i);
	case WTD_MB_FLAT:
		return apply_flat(l, NULL);
	case WTD_MB_FLAT_CAPTURE:
		return m->out ? apply_flat(l, m->out) : -EINVAL;
	case WTD_MB_CALIBRATE:
		return apply_calibrate(l, m);
	case WTD_MB_GAIN:
		wt_control_set_gain(l->ctl, (float)m->d[0]);
		return 0;
	case WTD_MB_LEAK:
		wt_control_set_leak(l->ctl, (float)m->d[0]);
		return 0;
	case WTD_MB_LIMITS:
		if (!(m->d[0] <= m->d[1])) {
			return -EINVAL;
		}
		set_limits(l, m->d[0], m->d[1]);
		return 0;
	case WTD_MB_SLEW:
		wt_control_set_slew(l->ctl, (float)m->d[0]);
		return 0;
	case WTD_MB_LEVELS:
		return wt_centroid_set_levels(l->cen, (float)m->d[0],
					      (float)m->d[1], (float)m->d[2]);
	case WTD_MB_TIMEOUT:
		l->timeout_ns = (uint64_t)m->i * WT_NS_PER_MS;
		return 0;
	case WTD_MB_SAFETY:
		l->safe_hold = m->i != 0;
		l->max_bad = m->i2 > 0 ? m->i2 : 1;
		return 0;
	case WTD_MB_DECIMATION:
		l->decimation = m->i > 0 ? m->i : 1;
		return 0;
	case WTD_MB_INSTALL:
		return apply_install(l, m);
	case WTD_MB_OFFSET:
		l->d->mb.old_offset = l->offset;
		l->offset = m->offset;
		return 0;
	case WTD_MB_SHAPE:
		return apply_shape(l, m->command);
	}
	return -EINVAL;
}

static void apply_mailbox(struct wtd_loop *l)
{
	struct wtd_mailbox *mb = &l->d->mb;
	unsigned posted =
		atomic_load_explicit(&mb->posted, memory_order_acquire);
	struct wtd_mb_msg m;

	if (posted == atomic_load_explicit(&mb->done, memory_order_relaxed)) {
		return;
	}
	m = mb->msg;
	mb->old_matrix = NULL;
	mb->old_reference = NULL;
	mb->old_flat = NULL;
	mb->old_offset = NULL;
	mb->result = apply(l, &m);
	atomic_store_explicit(&mb->done, posted, memory_order_release);
}

/* --- one frame ------------------------------------------------------------ */

static void count_refusal(struct wtd_loop *l, int rc)
{
	struct wtd *d = l->d;
	int k = -rc - WT_EPROTO_SHORT;

	bump(&d->c.refused, 1);
	if (k >= 0 && k < WTD_N_REFUSED) {
		bump(&d->c.refused_by[k], 1);
	}
}

/*
 * Count the frame's kind from l->valid (wt_request.h section 3): saturated
 * subapertures (already marked invalid), and a dark frame when fewer than
 * min_valid subapertures are valid (WT_FRAME_DARK: the closed loop holds
 * its command).
 * Zeroes the slopes of the invalid ones.  Returns the invalid count.
 */
static int classify(struct wtd_loop *l, int n_sat, uint32_t *flags)
{
	struct wtd *d = l->d;
	int k, n_invalid = 0;

	for (k = 0; k < d->n_subaps; k++) {
		if (!l->valid[k]) {
			l->slopes[k] = 0;
			l->slopes[d->n_subaps + k] = 0;
			n_invalid++;
		}
	}
	if (n_sat > 0) {
		*flags |= WT_FRAME_SATURATED;
		bump(&d->c.saturated_frames, 1);
		bump(&d->c.saturated_subaps, (unsigned long long)n_sat);
	}
	if (d->n_subaps - n_invalid < l->min_valid) {
		*flags |= WT_FRAME_DARK;
		bump(&d->c.dark_frames, 1);
	}
	return n_invalid;
}

/* Slopes from the frame; returns the invalid subapertures. */
static int measure(struct wtd_loop *l, const wt_header *h, const void *payload,
		   uint32_t *flags)
{
	struct wtd *d = l->d;
	int k;

	if (h->kind == WT_KIND_PIXELS_U16) {
		const uint16_t *pix = payload;

		if ((uintptr_t)payload % _Alignof(uint16_t) != 0) {
			memcpy(l->pix, payload, h->payload_bytes);
			pix = l->pix;
		}
		wt_centroid_frame(l->cen, pix, l->slopes, l->flux, l->valid);
		return classify(l,
				wt_centroid_saturated(l->cen, pix,
						      l->full_scale, l->valid),
				flags);
	}
	*flags |= WT_FRAME_SLOPES_IN;
	memcpy(l->slopes, payload, sizeof(float) * (size_t)d->n_slopes);
	memset(l->flux, 0, sizeof(float) * (size_t)d->n_subaps);
	for (k = 0; k < d->n_subaps; k++) {
		float *sx = &l->slopes[k], *sy = &l->slopes[d->n_subaps + k];

		/* A non-finite slope is an invalid subaperture: zero. */
		l->valid[k] = 1;
		if (!isfinite(*sx) || !isfinite(*sy)) {
			*sx = 0;
			*sy = 0;
			l->valid[k] = 0;
		}
	}
	return classify(l, 0, flags);
}

/*
 * At most daemon.image_hz times a second, a copy of the frame's pixels for
 * the telemetry thread, which bins and publishes them.  A copy, not a
 * reference: the message buffer is reused for the next frame.  Skipped when
 * both slots still wait (never waits itself).
 */
static void offer_image(struct wtd_loop *l, const wt_header *h,
			const void *payload, uint64_t t_recv)
{
	struct wtd *d = l->d;
	uint64_t period =
		atomic_load_explicit(&d->image_period_ns, memory_order_relaxed);
	struct wtd_image_slot *s;

	if (period == 0 || !d->image_ring ||
	    (l->image_sent && t_recv - l->last_image_ns < period)) {
		return;
	}
	s = wt_ring_claim(d->image_ring);
	if (!s) {
		return;
	}
	s->frame_id = h->sequence;
	s->recv_ns = t_recv;
	s->state = (uint32_t)l->state;
	s->pad = 0;
	memcpy(s + 1, payload, h->payload_bytes);
	wt_ring_publish(d->image_ring);
	l->last_image_ns = t_recv;
	l->image_sent = true;
}

static void process(struct wtd_loop *l, const void *data, size_t len,
		    uint64_t t_recv)
{
	struct wtd *d = l->d;
	wt_control_stats st = {0};
	const void *payload = NULL;
	wt_header h;
	uint32_t flags = 0;
	double ss = 0;
	float rms;
	int rc, k, n_invalid, n_clipped = 0, clamped = 0;
	struct wtd_slot *s;

	bump(&d->c.received, 1);
	rc = wt_proto_decode(data, len, &h, &payload);
	if (rc < 0) {
		count_refusal(l, rc);
		bad_frame(l);
		return;
	}
	if (h.kind == WT_KIND_COMMAND_F32) {
		bump(&d->c.wrong_kind, 1);
		bad_frame(l);
		return;
	}
	if ((h.kind == WT_KIND_PIXELS_U16 &&
	     (h.width != (uint32_t)d->frame_side ||
	      h.height != (uint32_t)d->frame_side)) ||
	    (h.kind == WT_KIND_SLOPES_F32 &&
	     h.width != (uint32_t)d->n_slopes)) {
		bump(&d->c.bad_dims, 1);
		bad_frame(l);
		return;
	}
	if (l->have_id && h.sequence <= l->last_id) {
		if (l->state != WT_STATE_FAULT) {
			bump(&d->c.stale, 1);
			if (h.sequence == l->last_id) {
				bump(&d->c.duplicates, 1);
			}
			l->stale_run++;
			if (l->stale_run >= l->max_bad) {
				enter_fault(l, WTD_FAULT_STALE, l->stale_run);
			}
			return;
		}
		/* In fault any id is taken: the driver may have restarted. */
		event(l, WTD_EV_DRIVER, WTD_DRIVER_RESYNC, 0,
		      (int64_t)h.sequence, 0);
	} else if (l->have_id && h.sequence > l->last_id + 1) {
		bump(&d->c.dropped, h.sequence - l->last_id - 1);
	}
	l->have_id = true;
	l->last_id = h.sequence;
	l->bad_run = 0;
	l->stale_run = 0;
	l->last_frame_ns = t_recv;
	l->watch_silence = true;
	atomic_store_explicit(&d->c.last_frame, h.sequence,
			      memory_order_relaxed);
	atomic_store_explicit(&d->c.last_frame_ns, t_recv,
			      memory_order_relaxed);
	atomic_store_explicit(&d->c.have_frame, true, memory_order_relaxed);
	if (!l->ever_frame) {
		l->ever_frame = true;
		event(l, WTD_EV_DRIVER, WTD_DRIVER_FIRST, 0,
		      (int64_t)h.sequence, 0);
	}

	n_invalid = measure(l, &h, payload, &flags);
	for (k = 0; k < d->n_slopes; k++) {
		/* An invalid subaperture measured nothing: zero residual, not
		 * minus the reference (which would push the mirror). */
		float r = l->valid[k % d->n_subaps]
				  ? l->slopes[k] - (l->ref ? l->ref[k] : 0) -
					    (l->offset ? l->offset[k] : 0)
				  : 0.0f;

		l->residual[k] = r;
		ss += (double)r * r;
	}
	rms = (float)sqrt(ss / d->n_slopes);

	switch (l->state) {
	case WT_STATE_OPEN:
		cmd_from(l, l->flat);
		break;
	case WT_STATE_CALIBRATING: {
		long done;

		rc = wt_calib_step(l->cal, l->slopes, l->valid, l->cmd);
		wt_calib_progress(l->cal, &done, NULL);
		atomic_store_explicit(&d->c.calib_done, done,
				      memory_order_relaxed);
		if (rc == WT_CALIB_DONE) {
			int kind = atomic_load(&d->c.calib_kind);

			atomic_store(&d->c.calib_kind, WT_CALIB_NONE);
			atomic_store_explicit(&d->c.calib_ready, kind,
					      memory_order_release);
			event(l, WTD_EV_CALIB_DONE, kind, 0, done, 0);
			set_state(l, WT_STATE_OPEN, WTD_WHY_CALIB_DONE);
		} else if (rc < 0) {
			cmd_from(l, l->flat);
		}
		break;
	}
	case WT_STATE_CLOSED:
		if (flags & WT_FRAME_DARK) {
			/* Nothing measured: no update, hold the command. */
			cmd_from(l, l->last_cmd);
			break;
		}
		rc = wt_control_step(l->ctl, l->residual, l->delta, &st);
		if (rc == -ERANGE) {
			bump(&d->c.rejected, 1);
			flags |= WT_FRAME_REJECTED;
		}
		for (k = 0; k < d->n_act; k++) {
			l->cmd[k] = l->flat[k] + l->delta[k];
		}
		n_clipped = st.n_clipped;
		break;
	case WT_STATE_HELD:
	case WT_STATE_FAULT:
	default:
		cmd_from(l, l->last_cmd);
		break;
	}

	if (send_command(l, h.sequence, &clamped) < 0) {
		flags |= WT_FRAME_SEND_FAILED;
	}
	n_clipped += clamped;
	if (n_clipped > 0) {
		bump(&d->c.clipped_frames, 1);
	}
	atomic_store_explicit(&d->c.last_clipped, n_clipped,
			      memory_order_relaxed);
	atomic_store_explicit(&d->c.last_invalid, n_invalid,
			      memory_order_relaxed);

	s = wt_ring_claim(d->ring);
	if (!s) {
		bump(&d->c.tm_dropped, 1);
	} else {
		s->type = WTD_SLOT_FRAME;
		s->has_arrays = (l->answered % (uint64_t)l->decimation == 0
					 ? WTD_ARRAYS_PUBLISH
					 : 0) |
				(atomic_load_explicit(&d->want_arrays,
						      memory_order_relaxed) > 0
					 ? WTD_ARRAYS_RECORD
					 : 0);
		memcpy(s->fr.magic, WT_FRAME_MAGIC, 4);
		s->fr.version = WT_FRAME_VERSION;
		s->fr.state = (uint16_t)l->state;
		s->fr.frame_id = h.sequence;
		s->fr.driver_ns = h.timestamp_ns;
		s->fr.recv_ns = t_recv;
		s->fr.send_ns = wt_clock_ns();
		s->fr.n_subaps = (uint32_t)d->n_subaps;
		s->fr.n_act = (uint32_t)d->n_act;
		s->fr.n_invalid = (uint32_t)(n_invalid > 0 ? n_invalid : 0);
		s->fr.n_clipped = (uint32_t)n_clipped;
		s->fr.residual_rms = rms;
		s->fr.flags = flags;
		if (s->has_arrays) {
			float *a = (float *)(s + 1);

			memcpy(a, l->residual,
			       sizeof(float) * (size_t)d->n_slopes);
			memcpy(a + d->n_slopes, l->flux,
			       sizeof(float) * (size_t)d->n_subaps);
			memcpy(a + d->n_slopes + d->n_subaps, l->last_cmd,
			       sizeof(float) * (size_t)d->n_act);
		}
		wt_ring_publish(d->ring);
	}
	if (h.kind == WT_KIND_PIXELS_U16) {
		offer_image(l, &h, payload, t_recv);
	}
	l->answered++;
	bump(&d->c.answered, 1);
}

/*
 * After the flat went out on stopping: a frame may already be on its way
 * (a lockstep driver sends the next frame as soon as it has the last
 * command, and would then wait for an answer to it).  Answer every newer
 * well-formed frame that comes within WTD_STOP_DRAIN_MS of the last with
 * the flat too, at most WTD_STOP_DRAIN_FRAMES of them, so the flat is what
 * the driver applies last whatever was in flight.
 */
static void stop_drain(struct wtd_loop *l, zmq_pollitem_t *item)
{
	const void *payload;
	wt_header h;
	int k, rc, clamped;

	for (k = 0; k < WTD_STOP_DRAIN_FRAMES; k++) {
		if (zmq_poll(item, 1, WTD_STOP_DRAIN_MS) <= 0) {
			return;
		}
		rc = zmq_recv(l->d->s_frames, l->recvbuf, l->recv_len,
			      ZMQ_DONTWAIT);
		if (rc < 0 || (size_t)rc > l->recv_len ||
		    wt_proto_decode(l->recvbuf, (size_t)rc, &h, &payload) < 0 ||
		    h.kind == WT_KIND_COMMAND_F32 ||
		    (l->have_id && h.sequence <= l->last_id)) {
			continue;
		}
		l->last_id = h.sequence;
		l->have_id = true;
		send_command(l, h.sequence, &clamped);
	}
}

/* --- the thread ----------------------------------------------------------- */

static inline void cpu_relax(void)
{
#if defined(__x86_64__) || defined(__i386__)
	__builtin_ia32_pause();
#endif
}

/*
 * The next frame into l->recvbuf: its length (which may exceed recv_len:
 * cut short), or -EAGAIN (none yet), -ETERM or -EINTR.  Normally sleeps in
 * zmq_poll up to WTD_POLL_MS; with daemon.busy_poll it only tries a
 * non-blocking receive, so the thread never sleeps and a frame is taken
 * without a wake-up (the caller spins).
 */
static int next_frame(struct wtd_loop *l, zmq_pollitem_t *item)
{
	int rc;

	if (!l->busy_poll) {
		rc = zmq_poll(item, 1, WTD_POLL_MS);
		if (rc < 0) {
			return -zmq_errno();
		}
		if (rc == 0 || !(item->revents & ZMQ_POLLIN)) {
			return -EAGAIN;
		}
	}
	rc = zmq_recv(l->d->s_frames, l->recvbuf, l->recv_len, ZMQ_DONTWAIT);
	return rc < 0 ? -zmq_errno() : rc;
}

/* Defined only by tests/alloc_probe.c, which counts heap calls. */
void wtd_alloc_probe(uint64_t answered, int state) __attribute__((weak));

void *wtd_loop_main(void *arg)
{
	struct wtd *d = arg;
	struct wtd_loop *l = d->loop;
	zmq_pollitem_t item = {.socket = d->s_frames, .events = ZMQ_POLLIN};
	int linger = 500, clamped;

	event(l, WTD_EV_STATE, -1, WT_STATE_OPEN, WTD_WHY_START, 0);
	while (!atomic_load_explicit(&d->stop, memory_order_acquire)) {
		uint64_t now;
		int rc;

		apply_mailbox(l);
		rc = next_frame(l, &item);
		now = wt_clock_ns();
		if (rc < 0) {
			if (rc == -ETERM) {
				break;
			}
			if (rc == -EAGAIN) {
				check_silence(l, now);
				if (l->busy_poll) {
					cpu_relax();
				}
			}
			continue; /* EINTR: check the stop flag */
		}
		if ((size_t)rc > l->recv_len) {
			/* longer than any valid frame: cut short */
			bump(&d->c.received, 1);
			count_refusal(l, -WT_EPROTO_LENGTH);
			bad_frame(l);
		} else {
			process(l, l->recvbuf, (size_t)rc, now);
		}
		if (wtd_alloc_probe) {
			wtd_alloc_probe(l->answered, l->state);
		}
		check_silence(l, wt_clock_ns());
	}
	/* Stopping: the mirror goes to its flat; the split worker sleeps
	 * until wtd_loop_destroy() joins it. */
	if (l->split) {
		wt_mvm_split_park(l->split);
	}
	abort_calibration(l, WTD_ABORT_REQUEST);
	cmd_from(l, l->flat);
	if (l->have_id) {
		send_command(l, l->last_id, &clamped);
	}
	stop_drain(l, &item);
	event(l, WTD_EV_STOPPING, 0, 0, 0, 0);
	/* Give the flat command time to leave before the socket goes. */
	zmq_setsockopt(d->s_commands, ZMQ_LINGER, &linger, sizeof(linger));
	zmq_close(d->s_commands);
	zmq_close(d->s_frames);
	d->s_commands = NULL;
	d->s_frames = NULL;
	return NULL;
}
