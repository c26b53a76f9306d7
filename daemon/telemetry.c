/*
 * telemetry.c - wavetrimd's telemetry thread and the status object.
 *
 * Drains the loop's ring: every frame record feeds the period statistics
 * (frame rate, latency median and maximum, residual RMS); the records that
 * carry arrays (one in daemon.frame_decimation) are published on topic
 * "frame "; event records become "event " JSON.  Events queued by the
 * control thread are published as they are.  daemon.status_hz times a
 * second it publishes "status " JSON, and one "warning" event per counter
 * that grew during the period (the rate limit of every per-frame problem).
 * See lib/wt_request.h for the exact messages.
 */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_image.h"
#include "wt_recording.h"
#include "wtd.h"

/* Latencies kept per period for the median (the maximum sees them all). */
#define LAT_SAMPLES 65536

/* Counters watched for warnings: name in the event, pointer offset. */
struct watched {
	const char *what;
	size_t offset;
};

#define W(field, text)                                                         \
	{                                                                      \
		text, offsetof(struct wtd_counters, field)                     \
	}
static const struct watched watched[] = {
	W(dropped, "frames dropped (gap in frame ids)"),
	W(stale, "stale frames skipped"),
	W(refused, "frame messages refused"),
	W(bad_dims, "frames of the wrong dimensions"),
	W(wrong_kind, "command messages received as frames"),
	W(rejected, "integrator updates rejected (NaN/Inf)"),
	W(send_failed, "commands not sent"),
	W(tm_dropped, "telemetry records dropped (ring full)"),
	W(saturated_frames, "frames with saturated subapertures"),
	W(dark_frames, "dark frames (no valid subaperture)"),
};
#undef W
#define N_WATCHED (sizeof(watched) / sizeof(watched[0]))

struct wtd_tm {
	double *lat; /* LAT_SAMPLES, microseconds */
	size_t n_lat;
	double lat_max;
	uint64_t frames;
	double rms_sum;
	uint64_t rms_n;
	uint64_t period_start_ns;
	unsigned long long seen[N_WATCHED];
	char *json; /* status / event text */
	size_t json_cap;
	uint8_t *msg; /* frame message */
	size_t msg_cap;
	uint8_t *img; /* image message */
	size_t img_cap;
	struct wtd_rec *rec; /* recordings and captures */
};

struct wtd_rec;
static int rec_create(struct wtd *d, wt_error *err);
static void rec_destroy(struct wtd_rec *r);

static const char *const why_names[] = {
	[WTD_WHY_REQUEST] = "request",
	[WTD_WHY_CALIB_DONE] = "calibration done",
	[WTD_WHY_FAULT] = "fault",
	[WTD_WHY_START] = "start",
};

static const char *const fault_names[] = {
	[WTD_FAULT_NONE] = "none",
	[WTD_FAULT_SILENT] = "driver silent",
	[WTD_FAULT_BAD] = "bad frames",
	[WTD_FAULT_STALE] = "stale frames",
};

const char *wtd_fault_name(int fault)
{
	if (fault < 0 || fault > WTD_FAULT_STALE) {
		return "?";
	}
	return fault_names[fault];
}

/*
 * The loop's image slots and our message buffer.  Every slot is touched
 * once here, before the threads start, so that the loop's first copy into
 * it does not pay for fresh pages.
 */
static int image_ring_create(struct wtd *d, wt_error *err)
{
	struct wtd_tm *t = d->tm;
	size_t side = (size_t)d->frame_side;
	size_t bytes = sizeof(struct wtd_image_slot) + 2 * side * side;
	int rc, k;

	rc = wt_ring_create(bytes, WTD_IMAGE_SLOTS, &d->image_ring, err);
	if (rc < 0) {
		return rc;
	}
	for (k = 0; k < WTD_IMAGE_SLOTS; k++) {
		memset(wt_ring_claim(d->image_ring), 0, bytes);
		wt_ring_publish(d->image_ring);
	}
	while (wt_ring_peek(d->image_ring)) {
		wt_ring_release(d->image_ring);
	}
	t->img_cap = 6 + wt_image_record_bytes((unsigned)side, (unsigned)side);
	t->img = malloc(t->img_cap);
	if (!t->img) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	return 0;
}

int wtd_telemetry_create(struct wtd *d, wt_error *err)
{
	struct wtd_tm *t = calloc(1, sizeof(*t));
	int rc;

	if (!t) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	d->tm = t;
	t->lat = malloc(sizeof(double) * LAT_SAMPLES);
	/* Status text: fixed part plus room for the counters. */
	t->json_cap = 64 * 1024;
	t->json = malloc(t->json_cap);
	t->msg_cap = 6 + wt_frame_record_bytes((size_t)d->n_subaps,
					       (size_t)d->n_act);
	t->msg = malloc(t->msg_cap);
	if (!t->lat || !t->json || !t->msg) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	rc = image_ring_create(d, err);
	return rc < 0 ? rc : rec_create(d, err);
}

void wtd_telemetry_destroy(struct wtd *d)
{
	struct wtd_tm *t = d->tm;

	if (!t) {
		return;
	}
	free(t->lat);
	free(t->json);
	free(t->msg);
	free(t->img);
	rec_destroy(t->rec);
	free(t);
	d->tm = NULL;
	wt_ring_destroy(d->image_ring);
	d->image_ring = NULL;
}

/* --- status --------------------------------------------------------------- */

static unsigned long long get(atomic_ullong *c)
{
	return atomic_load_explicit(c, memory_order_relaxed);
}

void wtd_status_json(struct wtd *d, wt_json *j, const double *sv, int n_sv)
{
	static const char *const refused_names[WTD_N_REFUSED] = {
		"short", "magic",   "version", "kind",
		"dims",	 "payload", "length",
	};
	struct wtd_counters *c = &d->c;
	struct wtd_period p;
	struct wtd_slow s;
	uint64_t now = wt_clock_ns();
	int state = atomic_load(&c->state), fault = atomic_load(&c->fault);
	int kind = atomic_load(&c->calib_kind);
	bool have_frame = atomic_load(&c->have_frame);
	uint64_t timeout_ns;
	int k;

	pthread_mutex_lock(&d->period_mu);
	p = d->period;
	pthread_mutex_unlock(&d->period_mu);
	pthread_mutex_lock(&d->slow_mu);
	s = d->slow;
	pthread_mutex_unlock(&d->slow_mu);
	timeout_ns = atomic_load(&d->driver_timeout_ns);

	wt_json_object_begin(j);
	wt_json_key(j, "state");
	wt_json_string(j, wt_state_name(state));
	wt_json_key(j, "fault");
	if (state == WT_STATE_FAULT) {
		wt_json_string(j, wtd_fault_name(fault));
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "uptime_s");
	wt_json_double_prec(j, (double)(now - d->start_ns) / 1e9, 6);
	wt_json_key(j, "frames");
	wt_json_uint(j, get(&c->answered));
	wt_json_key(j, "last_frame");
	if (have_frame) {
		wt_json_uint(j, get(&c->last_frame));
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "driver_seen");
	{
		uint64_t seen = get(&c->last_frame_ns);

		/* the loop may stamp a frame after `now` was read */
		wt_json_bool(j, have_frame && (seen >= now ||
					       now - seen <= timeout_ns));
	}
	wt_json_key(j, "frame_rate_hz");
	wt_json_double_prec(j, p.valid ? p.frame_rate_hz : 0.0, 6);
	wt_json_key(j, "latency_us");
	if (p.have_latency) {
		wt_json_object_begin(j);
		wt_json_key(j, "median");
		wt_json_double_prec(j, p.latency_median_us, 4);
		wt_json_key(j, "max");
		wt_json_double_prec(j, p.latency_max_us, 4);
		wt_json_object_end(j);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "residual_rms");
	if (p.have_rms) {
		wt_json_double_prec(j, p.residual_rms, 6);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "clipped_actuators");
	wt_json_int(j, atomic_load(&c->last_clipped));
	wt_json_key(j, "invalid_subapertures");
	wt_json_int(j, atomic_load(&c->last_invalid));

	wt_json_key(j, "counts");
	wt_json_object_begin(j);
	wt_json_key(j, "received");
	wt_json_uint(j, get(&c->received));
	wt_json_key(j, "dropped");
	wt_json_uint(j, get(&c->dropped));
	wt_json_key(j, "stale");
	wt_json_uint(j, get(&c->stale));
	wt_json_key(j, "refused");
	wt_json_uint(j, get(&c->refused));
	wt_json_key(j, "bad_dimensions");
	wt_json_uint(j, get(&c->bad_dims));
	wt_json_key(j, "wrong_kind");
	wt_json_uint(j, get(&c->wrong_kind));
	wt_json_key(j, "rejected_updates");
	wt_json_uint(j, get(&c->rejected));
	wt_json_key(j, "clipped_frames");
	wt_json_uint(j, get(&c->clipped_frames));
	wt_json_key(j, "send_failed");
	wt_json_uint(j, get(&c->send_failed));
	wt_json_key(j, "telemetry_dropped");
	wt_json_uint(j, get(&c->tm_dropped));
	wt_json_key(j, "faults");
	wt_json_uint(j, get(&c->faults));
	wt_json_key(j, "duplicates");
	wt_json_uint(j, get(&c->duplicates));
	wt_json_key(j, "saturated_frames");
	wt_json_uint(j, get(&c->saturated_frames));
	wt_json_key(j, "saturated_subapertures");
	wt_json_uint(j, get(&c->saturated_subaps));
	wt_json_key(j, "dark_frames");
	wt_json_uint(j, get(&c->dark_frames));
	wt_json_object_end(j);

	wt_json_key(j, "refused");
	wt_json_object_begin(j);
	for (k = 0; k < WTD_N_REFUSED; k++) {
		wt_json_key(j, refused_names[k]);
		wt_json_uint(j, get(&c->refused_by[k]));
	}
	wt_json_object_end(j);

	wt_json_key(j, "access");
	wt_json_object_begin(j);
	{
		uint64_t let_in, refused;

		wt_zap_counts(d->zap, &let_in, &refused);
		wt_json_key(j, "curve");
		wt_json_bool(j, d->curve);
		wt_json_key(j, "let_in");
		wt_json_uint(j, let_in);
		wt_json_key(j, "refused");
		wt_json_uint(j, refused);
		wt_json_key(j, "read_only_refused");
		wt_json_uint(j, get(&d->read_only_refused));
	}
	wt_json_object_end(j);

	wt_json_key(j, "gain");
	wt_json_double(j, s.gain);
	wt_json_key(j, "leak");
	wt_json_double(j, s.leak);
	wt_json_key(j, "modes");
	wt_json_int(j,
		    atomic_load(&c->have_matrix) ? atomic_load(&c->modes) : 0);
	/* set before the threads start, constant after */
	wt_json_key(j, "mvm_split");
	if (d->split_cpu >= 0) {
		wt_json_object_begin(j);
		wt_json_key(j, "cpu");
		wt_json_int(j, d->split_cpu);
		wt_json_key(j, "row");
		wt_json_int(j, d->split_row);
		wt_json_object_end(j);
	} else {
		wt_json_null(j);
	}

	wt_json_key(j, "calibration");
	wt_json_object_begin(j);
	wt_json_key(j, "matrix");
	wt_json_bool(j, s.have_matrix);
	wt_json_key(j, "reference");
	wt_json_bool(j, s.have_reference);
	wt_json_key(j, "source");
	wt_json_string(j, s.source[0] ? s.source : NULL);
	wt_json_key(j, "file");
	wt_json_string(j, s.file[0] ? s.file : NULL);
	wt_json_key(j, "created");
	wt_json_string(j, s.created[0] ? s.created : NULL);
	wt_json_key(j, "modes");
	wt_json_int(j, s.have_matrix ? s.modes : 0);
	wt_json_key(j, "recommended");
	wt_json_int(j, s.have_interaction ? s.recommended : 0);
	wt_json_key(j, "condition");
	if (s.have_matrix) {
		wt_json_double_prec(j, s.condition, 6);
	} else {
		wt_json_null(j);
	}
	if (sv) {
		wt_json_key(j, "singular_values");
		wt_json_double_array(j, sv, (size_t)n_sv, 8);
	}
	wt_json_object_end(j);

	wt_json_key(j, "calibrating");
	if (kind != WT_CALIB_NONE && state == WT_STATE_CALIBRATING) {
		wt_json_object_begin(j);
		wt_json_key(j, "kind");
		wt_json_string(j, wt_calib_kind_name((enum wt_calib_kind)kind));
		wt_json_key(j, "frames_done");
		wt_json_int(j, atomic_load(&c->calib_done));
		wt_json_key(j, "frames_total");
		wt_json_int(j, atomic_load(&c->calib_total));
		wt_json_object_end(j);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "offsets");
	wtd_offsets_json(j, s.n_offsets, s.offset_noll, s.offset_nm);
	wt_json_key(j, "recording");
	wtd_record_json(d, j);
	wt_json_object_end(j);
}

void wtd_offsets_json(wt_json *j, int n, const int *noll, const double *nm)
{
	int k;

	wt_json_array_begin(j);
	for (k = 0; k < n; k++) {
		wt_json_object_begin(j);
		wt_json_key(j, "noll");
		wt_json_int(j, noll[k]);
		wt_json_key(j, "nm");
		wt_json_double(j, nm[k]);
		wt_json_object_end(j);
	}
	wt_json_array_end(j);
}

/* --- publishing
 * --------------------------------------------------------------- */

static void publish(struct wtd *d, const char *topic, const void *body,
		    size_t len)
{
	size_t tl = strlen(topic);
	zmq_msg_t m;

	if (zmq_msg_init_size(&m, tl + len) != 0) {
		return;
	}
	memcpy(zmq_msg_data(&m), topic, tl);
	memcpy((char *)zmq_msg_data(&m) + tl, body, len);
	/* PUB never blocks: a slow subscriber loses messages, not us. */
	if (zmq_msg_send(&m, d->s_telemetry, ZMQ_DONTWAIT) < 0) {
		zmq_msg_close(&m);
	}
}

void wtd_event_post(struct wtd *d, const char *json)
{
	char *copy = strdup(json);

	if (!copy) {
		return;
	}
	pthread_mutex_lock(&d->evq_mu);
	if (d->evq_count == WTD_EVQ) {
		/* Full: the oldest goes. */
		free(d->evq[d->evq_head]);
		d->evq_head = (d->evq_head + 1) % WTD_EVQ;
		d->evq_count--;
	}
	d->evq[(d->evq_head + d->evq_count) % WTD_EVQ] = copy;
	d->evq_count++;
	pthread_mutex_unlock(&d->evq_mu);
}

static void drain_evq(struct wtd *d)
{
	for (;;) {
		char *e = NULL;

		pthread_mutex_lock(&d->evq_mu);
		if (d->evq_count > 0) {
			e = d->evq[d->evq_head];
			d->evq_head = (d->evq_head + 1) % WTD_EVQ;
			d->evq_count--;
		}
		pthread_mutex_unlock(&d->evq_mu);
		if (!e) {
			return;
		}
		publish(d, "event ", e, strlen(e));
		free(e);
	}
}

static void event_head(wt_json *j, const char *name, const struct wtd_event *e)
{
	wt_json_object_begin(j);
	wt_json_key(j, "event");
	wt_json_string(j, name);
	wt_json_key(j, "t_ns");
	wt_json_uint(j, e->t_ns);
	wt_json_key(j, "frame");
	if (e->frame == UINT64_MAX) {
		wt_json_null(j);
	} else {
		wt_json_uint(j, e->frame);
	}
}

static void publish_event(struct wtd *d, const struct wtd_event *e)
{
	struct wtd_tm *t = d->tm;
	wt_json j;
	int n;

	wt_json_init(&j, t->json, t->json_cap);
	switch (e->code) {
	case WTD_EV_STATE:
		event_head(&j, "state", e);
		wt_json_key(&j, "from");
		wt_json_string(&j, e->a < 0 ? NULL : wt_state_name(e->a));
		wt_json_key(&j, "to");
		wt_json_string(&j, wt_state_name(e->b));
		wt_json_key(&j, "why");
		wt_json_string(&j, e->n >= 0 && e->n <= WTD_WHY_START
					   ? why_names[e->n]
					   : "?");
		break;
	case WTD_EV_FAULT:
		event_head(&j, "fault", e);
		wt_json_key(&j, "reason");
		wt_json_string(&j, wtd_fault_name(e->a));
		wt_json_key(&j, "count");
		wt_json_int(&j, e->n);
		break;
	case WTD_EV_CALIB_STARTED:
		event_head(&j, "calibration_started", e);
		wt_json_key(&j, "kind");
		wt_json_string(&j,
			       wt_calib_kind_name((enum wt_calib_kind)e->a));
		wt_json_key(&j, "frames");
		wt_json_int(&j, e->n);
		break;
	case WTD_EV_CALIB_DONE:
		event_head(&j, "calibration_done", e);
		wt_json_key(&j, "kind");
		wt_json_string(&j,
			       wt_calib_kind_name((enum wt_calib_kind)e->a));
		break;
	case WTD_EV_CALIB_ABORTED:
		event_head(&j, "calibration_aborted", e);
		wt_json_key(&j, "kind");
		wt_json_string(&j,
			       wt_calib_kind_name((enum wt_calib_kind)e->a));
		wt_json_key(&j, "why");
		wt_json_string(&j,
			       e->b == WTD_ABORT_FAULT ? "fault" : "request");
		break;
	case WTD_EV_MATRIX_INSTALLED:
		event_head(&j, "matrix_installed", e);
		wt_json_key(&j, "modes");
		wt_json_int(&j, e->a);
		wt_json_key(&j, "condition");
		wt_json_double_prec(&j, e->x, 6);
		break;
	case WTD_EV_REFERENCE_INSTALLED:
		event_head(&j, "reference_installed", e);
		break;
	case WTD_EV_FLAT_CHANGED:
		event_head(&j, "flat_changed", e);
		break;
	case WTD_EV_DRIVER:
		event_head(&j, "driver", e);
		wt_json_key(&j, "what");
		wt_json_string(&j, e->a == WTD_DRIVER_FIRST ? "first frame"
							    : "resync");
		wt_json_key(&j, "id");
		wt_json_int(&j, e->n);
		break;
	case WTD_EV_STOPPING:
		event_head(&j, "stopping", e);
		break;
	default:
		event_head(&j, "unknown", e);
		wt_json_key(&j, "code");
		wt_json_uint(&j, e->code);
		break;
	}
	wt_json_object_end(&j);
	n = wt_json_finish(&j);
	if (n > 0) {
		publish(d, "event ", t->json, (size_t)n);
	}
	if (e->code == WTD_EV_FAULT || e->code == WTD_EV_STATE) {
		if (e->code == WTD_EV_FAULT) {
			wt_log_warning(d->log, "fault: %s (%lld)",
				       wtd_fault_name(e->a), (long long)e->n);
		} else {
			wt_log_info(d->log, "state %s -> %s",
				    e->a < 0 ? "-" : wt_state_name(e->a),
				    wt_state_name(e->b));
		}
	}
}

/* --- recordings and captures ---------------------------------------------- */

/*
 * A recording: the telemetry thread copies every frame record (with its
 * arrays) into buffers of REC_CHUNK records and queues each full one for
 * the writer thread, which appends it to the HDF5 file (lib/wt_recording.h)
 * and hands it back.  Neither the loop nor the telemetry thread ever waits
 * for the disk: when the writer falls behind and no buffer is free, the
 * frame is counted as lost to the recording and nothing else is affected.
 * When an append fails (disk full), the recording ends at once as
 * "failed", with an event and the reason in the status.
 */
#define REC_CHUNK  128
#define REC_CHUNKS 32

enum rec_state {
	REC_NONE,
	REC_RUNNING,
	REC_DONE,
	REC_STOPPED,
	REC_FAILED,
};

static const char *const rec_state_names[] = {
	[REC_NONE] = "none",	   [REC_RUNNING] = "recording",
	[REC_DONE] = "done",	   [REC_STOPPED] = "stopped",
	[REC_FAILED] = "failed",
};

struct rec_buf {
	int n;
	uint8_t *data; /* REC_CHUNK x stride */
};

struct wtd_rec {
	pthread_mutex_t mu;
	pthread_cond_t cv;
	pthread_t thread;
	bool have_thread, quit;
	size_t stride; /* bytes of one frame record with arrays */
	struct rec_buf buf[REC_CHUNKS];
	int full[REC_CHUNKS], n_full, full_head; /* queue for the writer */
	int free_list[REC_CHUNKS], n_free;
	int cur; /* buffer being filled, -1: none */
	/* the recording */
	int state;
	bool finishing;	  /* the last buffer is queued */
	bool arrays_held; /* it counts in d->want_arrays */
	bool stop_asked;
	wt_recording *file;
	char path[WT_REQUEST_LINE_MAX + 1];
	char error[WT_ERROR_MAX];
	long long wanted, seen, taken, written, lost;
	unsigned long long tm_dropped0, tm_dropped;
	/* a capture in progress, or NULL */
	struct wtd_capture *cap;
};

static void arrays_release(struct wtd *d, struct wtd_rec *r)
{
	if (r->arrays_held) {
		atomic_fetch_sub(&d->want_arrays, 1);
		r->arrays_held = false;
	}
}

/* Queue the buffer being filled (under mu). */
static void rec_queue_cur(struct wtd_rec *r)
{
	if (r->cur >= 0 && r->buf[r->cur].n > 0) {
		r->full[(r->full_head + r->n_full) % REC_CHUNKS] = r->cur;
		r->n_full++;
	} else if (r->cur >= 0) {
		r->free_list[r->n_free++] = r->cur;
	}
	r->cur = -1;
}

/* End the frames' flow into the recording (under mu). */
static void rec_finish(struct wtd *d, struct wtd_rec *r)
{
	rec_queue_cur(r);
	r->finishing = true;
	r->tm_dropped = get(&d->c.tm_dropped) - r->tm_dropped0;
	arrays_release(d, r);
	pthread_cond_signal(&r->cv);
}

/* The telemetry thread: one frame record for the recording/capture. */
static void rec_on_frame(struct wtd *d, const struct wtd_slot *s)
{
	struct wtd_rec *r = d->tm->rec;
	const float *a = (const float *)(s + 1);
	struct wtd_capture *c;

	pthread_mutex_lock(&r->mu);
	c = r->cap;
	if (c && (s->has_arrays & WTD_ARRAYS_RECORD) && c->got < c->want) {
		size_t k = (size_t)c->got;

		memcpy(c->slopes + k * (size_t)d->n_slopes, a,
		       sizeof(float) * (size_t)d->n_slopes);
		memcpy(c->commands + k * (size_t)d->n_act,
		       a + d->n_slopes + d->n_subaps,
		       sizeof(float) * (size_t)d->n_act);
		c->ids[k] = s->fr.frame_id;
		c->states[k] = s->fr.state;
		c->got++;
		if (c->got == c->want) {
			r->cap = NULL;
			atomic_fetch_sub(&d->want_arrays, 1);
		}
	}
	if (r->state != REC_RUNNING || r->finishing) {
		pthread_mutex_unlock(&r->mu);
		return;
	}
	if (!(s->has_arrays & WTD_ARRAYS_RECORD)) {
		/* Before the loop saw the request: not started yet. */
		if (r->taken > 0) {
			r->lost++;
			r->seen++;
		}
	} else {
		if (r->cur < 0 && r->n_free > 0) {
			r->cur = r->free_list[--r->n_free];
			r->buf[r->cur].n = 0;
		}
		if (r->cur < 0) {
			r->lost++; /* the writer is behind */
		} else {
			struct rec_buf *b = &r->buf[r->cur];
			size_t body = wt_frame_record_bytes(s->fr.n_subaps,
							    s->fr.n_act);

			memcpy(b->data + (size_t)b->n * r->stride, &s->fr,
			       body);
			b->n++;
			r->taken++;
			if (b->n == REC_CHUNK) {
				rec_queue_cur(r);
				pthread_cond_signal(&r->cv);
			}
		}
		r->seen++;
	}
	if (r->seen >= r->wanted) {
		rec_finish(d, r);
	}
	pthread_mutex_unlock(&r->mu);
}

/* An event about the recording (any thread but the loop). */
static void rec_event(struct wtd *d, const char *name, const struct wtd_rec *r,
		      const char *error)
{
	char buf[2 * WT_REQUEST_LINE_MAX + 512];
	struct wtd_event e = {.t_ns = wt_clock_ns(), .frame = UINT64_MAX};
	wt_json j;

	if (atomic_load(&d->c.have_frame)) {
		e.frame = get(&d->c.last_frame);
	}
	wt_json_init(&j, buf, sizeof(buf));
	event_head(&j, name, &e);
	wt_json_key(&j, "file");
	wt_json_string(&j, r->path);
	wt_json_key(&j, "frames");
	wt_json_int(&j, r->written);
	wt_json_key(&j, "frames_lost");
	wt_json_int(&j, r->lost);
	wt_json_key(&j, "telemetry_dropped");
	wt_json_uint(&j, r->tm_dropped);
	if (error) {
		wt_json_key(&j, "error");
		wt_json_string(&j, error);
	}
	wt_json_object_end(&j);
	if (wt_json_finish(&j) > 0) {
		wtd_event_post(d, buf);
	}
}

/* The writer thread: appends queued buffers, closes finished recordings. */
static void *rec_main(void *arg)
{
	struct wtd *d = arg;
	struct wtd_rec *r = d->tm->rec;
	wt_error err;

	pthread_mutex_lock(&r->mu);
	for (;;) {
		if (r->n_full > 0) {
			int i = r->full[r->full_head];
			bool ok = r->state == REC_RUNNING;
			int rc = 0;

			r->full_head = (r->full_head + 1) % REC_CHUNKS;
			r->n_full--;
			pthread_mutex_unlock(&r->mu);
			if (ok) {
				rc = wt_recording_append(r->file, r->buf[i].data,
							 r->stride,
							 r->buf[i].n, &err);
			}
			pthread_mutex_lock(&r->mu);
			if (ok && rc == 0) {
				r->written += r->buf[i].n;
			}
			r->free_list[r->n_free++] = i;
			if (ok && rc < 0) {
				/* Failed: no more frames go to it. */
				r->state = REC_FAILED;
				snprintf(r->error, sizeof(r->error), "%s",
					 err.msg);
				if (!r->finishing) {
					rec_finish(d, r);
				}
			}
			continue;
		}
		if (r->finishing) {
			wt_recording *f = r->file;
			int rc;

			if (r->state == REC_RUNNING) {
				r->state = r->stop_asked ? REC_STOPPED
							 : REC_DONE;
			}
			r->file = NULL;
			pthread_mutex_unlock(&r->mu);
			rc = wt_recording_close(f, r->lost,
						(long long)r->tm_dropped,
						r->error, &err);
			pthread_mutex_lock(&r->mu);
			if (rc < 0 && r->state != REC_FAILED) {
				r->state = REC_FAILED;
				snprintf(r->error, sizeof(r->error), "%s",
					 err.msg);
			}
			r->finishing = false;
			if (r->state == REC_FAILED) {
				wt_log_err(d->log, "recording failed: %s",
					   r->error);
				rec_event(d, "recording_failed", r, r->error);
			} else {
				wt_log_notice(d->log,
					      "recording %s: %lld frames",
					      r->path, r->written);
				rec_event(d, "recording_done", r, NULL);
			}
			continue;
		}
		if (r->quit) {
			break;
		}
		pthread_cond_wait(&r->cv, &r->mu);
	}
	pthread_mutex_unlock(&r->mu);
	return NULL;
}

static int rec_create(struct wtd *d, wt_error *err)
{
	struct wtd_rec *r = calloc(1, sizeof(*r));

	if (!r) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	d->tm->rec = r;
	pthread_mutex_init(&r->mu, NULL);
	pthread_cond_init(&r->cv, NULL);
	r->cur = -1;
	r->stride = wt_frame_record_bytes((size_t)d->n_subaps,
					  (size_t)d->n_act);
	/* Keep records aligned for the header's 64-bit fields. */
	r->stride = (r->stride + 7) & ~(size_t)7;
	return 0;
}

static void rec_destroy(struct wtd_rec *r)
{
	int k;

	if (!r) {
		return;
	}
	for (k = 0; k < REC_CHUNKS; k++) {
		free(r->buf[k].data);
	}
	pthread_mutex_destroy(&r->mu);
	pthread_cond_destroy(&r->cv);
	free(r);
}

int wtd_record_start(struct wtd *d, const char *path, long long frames,
		     const char *config_ini, wt_error *err)
{
	struct wtd_rec *r = d->tm->rec;
	wt_recording *f;
	int k, rc;

	pthread_mutex_lock(&r->mu);
	if (r->state == REC_RUNNING || r->finishing) {
		pthread_mutex_unlock(&r->mu);
		return wt_error_set(err, -EBUSY,
				    "a recording is in progress (%s): "
				    "record stop ends it",
				    r->path);
	}
	for (k = 0; k < REC_CHUNKS; k++) {
		if (!r->buf[k].data) {
			r->buf[k].data = malloc(REC_CHUNK * r->stride);
		}
		if (!r->buf[k].data) {
			pthread_mutex_unlock(&r->mu);
			return wt_error_set(err, -ENOMEM, "out of memory");
		}
	}
	pthread_mutex_unlock(&r->mu);
	/* Made here, so a bad name is the request's answer. */
	rc = wt_recording_create(path, d->n_subaps, d->n_act, frames,
				 config_ini, &f, err);
	if (rc < 0) {
		return rc;
	}
	pthread_mutex_lock(&r->mu);
	r->file = f;
	snprintf(r->path, sizeof(r->path), "%s", path);
	r->error[0] = '\0';
	r->wanted = frames;
	r->seen = r->taken = r->written = r->lost = 0;
	r->tm_dropped = 0;
	r->tm_dropped0 = get(&d->c.tm_dropped);
	r->stop_asked = false;
	r->n_full = r->full_head = 0;
	r->cur = -1;
	r->n_free = REC_CHUNKS;
	for (k = 0; k < REC_CHUNKS; k++) {
		r->free_list[k] = k;
	}
	atomic_fetch_add(&d->want_arrays, 1);
	r->arrays_held = true;
	r->state = REC_RUNNING;
	pthread_mutex_unlock(&r->mu);
	wt_log_notice(d->log, "recording %lld frames to %s", frames, path);
	return 0;
}

int wtd_record_stop(struct wtd *d, wt_error *err)
{
	struct wtd_rec *r = d->tm->rec;

	pthread_mutex_lock(&r->mu);
	if (r->state != REC_RUNNING || r->finishing) {
		pthread_mutex_unlock(&r->mu);
		return wt_error_set(err, -ENOENT, "no recording in progress");
	}
	r->stop_asked = true;
	rec_finish(d, r);
	pthread_mutex_unlock(&r->mu);
	return 0;
}

void wtd_record_json(struct wtd *d, wt_json *j)
{
	struct wtd_rec *r = d->tm->rec;

	pthread_mutex_lock(&r->mu);
	if (r->state == REC_NONE) {
		pthread_mutex_unlock(&r->mu);
		wt_json_null(j);
		return;
	}
	wt_json_object_begin(j);
	wt_json_key(j, "file");
	wt_json_string(j, r->path);
	wt_json_key(j, "state");
	/* running until the writer has closed the file */
	wt_json_string(j, r->finishing && r->state != REC_FAILED
				  ? "finishing"
				  : rec_state_names[r->state]);
	wt_json_key(j, "frames_requested");
	wt_json_int(j, r->wanted);
	wt_json_key(j, "frames_taken");
	wt_json_int(j, r->taken);
	wt_json_key(j, "frames");
	wt_json_int(j, r->written);
	wt_json_key(j, "frames_lost");
	wt_json_int(j, r->lost);
	wt_json_key(j, "telemetry_dropped");
	wt_json_uint(j, r->state == REC_RUNNING && !r->finishing
				? get(&d->c.tm_dropped) - r->tm_dropped0
				: r->tm_dropped);
	wt_json_key(j, "error");
	wt_json_string(j, r->error[0] ? r->error : NULL);
	wt_json_object_end(j);
	pthread_mutex_unlock(&r->mu);
}

int wtd_capture_start(struct wtd *d, struct wtd_capture *c, wt_error *err)
{
	struct wtd_rec *r = d->tm->rec;

	pthread_mutex_lock(&r->mu);
	if (r->cap) {
		pthread_mutex_unlock(&r->mu);
		return wt_error_set(err, -EBUSY, "a capture is in progress");
	}
	c->got = 0;
	r->cap = c;
	atomic_fetch_add(&d->want_arrays, 1);
	pthread_mutex_unlock(&r->mu);
	return 0;
}

long wtd_capture_done(struct wtd *d, struct wtd_capture *c, bool *full)
{
	struct wtd_rec *r = d->tm->rec;
	long got;

	pthread_mutex_lock(&r->mu);
	*full = r->cap != c;
	got = c->got;
	pthread_mutex_unlock(&r->mu);
	return got;
}

void wtd_capture_cancel(struct wtd *d, struct wtd_capture *c)
{
	struct wtd_rec *r = d->tm->rec;

	pthread_mutex_lock(&r->mu);
	if (r->cap == c) {
		r->cap = NULL;
		atomic_fetch_sub(&d->want_arrays, 1);
	}
	pthread_mutex_unlock(&r->mu);
}

static void on_frame(struct wtd *d, const struct wtd_slot *s)
{
	struct wtd_tm *t = d->tm;
	double lat_us = (double)(s->fr.send_ns - s->fr.recv_ns) / 1e3;

	t->frames++;
	if (t->n_lat < LAT_SAMPLES) {
		t->lat[t->n_lat++] = lat_us;
	}
	if (lat_us > t->lat_max) {
		t->lat_max = lat_us;
	}
	if (isfinite(s->fr.residual_rms)) {
		t->rms_sum += s->fr.residual_rms;
		t->rms_n++;
	}
	if ((s->has_arrays & WTD_ARRAYS_RECORD) ||
	    atomic_load_explicit(&d->want_arrays, memory_order_relaxed) > 0) {
		rec_on_frame(d, s);
	}
	if (s->has_arrays & WTD_ARRAYS_PUBLISH) {
		size_t body =
			wt_frame_record_bytes(s->fr.n_subaps, s->fr.n_act);

		memcpy(t->msg, WT_FRAME_TOPIC, 6);
		memcpy(t->msg + 6, &s->fr, WT_FRAME_HEADER_BYTES);
		memcpy(t->msg + 6 + WT_FRAME_HEADER_BYTES, s + 1,
		       body - WT_FRAME_HEADER_BYTES);
		publish(d, "", t->msg, 6 + body);
	}
}

static int cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return (x > y) - (x < y);
}

static void end_period(struct wtd *d, uint64_t now)
{
	struct wtd_tm *t = d->tm;
	struct wtd_period p = {.valid = true};
	double secs = (double)(now - t->period_start_ns) / 1e9;
	char buf[256];
	size_t k;
	wt_json j;
	int n;

	p.frame_rate_hz = secs > 0 ? (double)t->frames / secs : 0;
	if (t->n_lat > 0) {
		qsort(t->lat, t->n_lat, sizeof(double), cmp_double);
		p.have_latency = true;
		p.latency_median_us =
			t->n_lat % 2 ? t->lat[t->n_lat / 2]
				     : 0.5 * (t->lat[t->n_lat / 2 - 1] +
					      t->lat[t->n_lat / 2]);
		p.latency_max_us = t->lat_max;
	}
	if (t->rms_n > 0) {
		p.have_rms = true;
		p.residual_rms = t->rms_sum / (double)t->rms_n;
	}
	pthread_mutex_lock(&d->period_mu);
	d->period = p;
	pthread_mutex_unlock(&d->period_mu);
	t->frames = 0;
	t->n_lat = 0;
	t->lat_max = 0;
	t->rms_sum = 0;
	t->rms_n = 0;
	t->period_start_ns = now;

	wt_json_init(&j, t->json, t->json_cap);
	wtd_status_json(d, &j, NULL, 0);
	n = wt_json_finish(&j);
	if (n > 0) {
		publish(d, "status ", t->json, (size_t)n);
	}

	/* One warning per counter that grew, at most once a period. */
	for (k = 0; k < N_WATCHED; k++) {
		atomic_ullong *c =
			(atomic_ullong *)((char *)&d->c + watched[k].offset);
		unsigned long long v = get(c);

		if (v > t->seen[k]) {
			wt_json_init(&j, buf, sizeof(buf));
			wt_json_object_begin(&j);
			wt_json_key(&j, "event");
			wt_json_string(&j, "warning");
			wt_json_key(&j, "t_ns");
			wt_json_uint(&j, now);
			wt_json_key(&j, "frame");
			if (atomic_load(&d->c.have_frame)) {
				wt_json_uint(&j, get(&d->c.last_frame));
			} else {
				wt_json_null(&j);
			}
			wt_json_key(&j, "what");
			wt_json_string(&j, watched[k].what);
			wt_json_key(&j, "count");
			wt_json_uint(&j, v - t->seen[k]);
			wt_json_object_end(&j);
			n = wt_json_finish(&j);
			if (n > 0) {
				publish(d, "event ", buf, (size_t)n);
			}
			wt_log_notice(d->log, "%s: %llu in the last period",
				      watched[k].what, v - t->seen[k]);
			t->seen[k] = v;
		}
	}
}

/* Bin and publish the images the loop left; returns how many. */
static int drain_images(struct wtd *d)
{
	struct wtd_tm *t = d->tm;
	const struct wtd_image_slot *s;
	int n = 0;

	while ((s = wt_ring_peek(d->image_ring))) {
		int len = wt_image_encode(
			(const uint16_t *)(s + 1), (unsigned)d->frame_side,
			(unsigned)d->frame_side, s->frame_id, s->recv_ns,
			s->state, t->img + 6, t->img_cap - 6);

		if (len > 0) {
			memcpy(t->img, WT_IMAGE_TOPIC, 6);
			publish(d, "", t->img, 6 + (size_t)len);
		}
		wt_ring_release(d->image_ring);
		n++;
	}
	return n;
}

/* Drain what the ring holds now; returns the records handled. */
static int drain_ring(struct wtd *d)
{
	const struct wtd_slot *s;
	int n = 0;

	while (n < 4096 && (s = wt_ring_peek(d->ring))) {
		if (s->type == WTD_SLOT_FRAME) {
			on_frame(d, s);
		} else if (s->type == WTD_SLOT_EVENT) {
			publish_event(d, &s->ev);
		}
		wt_ring_release(d->ring);
		n++;
	}
	return n;
}

void *wtd_telemetry_main(void *arg)
{
	struct wtd *d = arg;
	struct wtd_tm *t = d->tm;
	int linger = 200;
	uint64_t next;

	t->rec->have_thread =
		pthread_create(&t->rec->thread, NULL, rec_main, d) == 0;
	if (!t->rec->have_thread) {
		wt_log_err(d->log, "no recorder thread: recordings will fail");
	}
	t->period_start_ns = wt_clock_ns();
	next = t->period_start_ns + atomic_load(&d->status_period_ns);
	while (!atomic_load_explicit(&d->tm_stop, memory_order_acquire)) {
		uint64_t now;
		int n = drain_ring(d) + drain_images(d);

		drain_evq(d);
		now = wt_clock_ns();
		if (now >= next) {
			end_period(d, now);
			next += atomic_load(&d->status_period_ns);
			if (next < now) {
				next = now + atomic_load(&d->status_period_ns);
			}
		}
		if (n == 0) {
			wt_clock_sleep_ns(WT_NS_PER_MS);
		}
	}
	/* The loop has stopped: publish what it left, and give the last
	 * messages a moment to leave. */
	drain_ring(d);
	pthread_mutex_lock(&t->rec->mu);
	if (t->rec->state == REC_RUNNING && !t->rec->finishing) {
		t->rec->stop_asked = true;
		rec_finish(d, t->rec);
	}
	t->rec->quit = true;
	pthread_cond_signal(&t->rec->cv);
	pthread_mutex_unlock(&t->rec->mu);
	if (t->rec->have_thread) {
		pthread_join(t->rec->thread, NULL);
	}
	drain_evq(d);
	zmq_setsockopt(d->s_telemetry, ZMQ_LINGER, &linger, sizeof(linger));
	zmq_close(d->s_telemetry);
	d->s_telemetry = NULL;
	return NULL;
}
