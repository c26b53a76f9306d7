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
};

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
	return image_ring_create(d, err);
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
	if (s->has_arrays) {
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
	drain_evq(d);
	zmq_setsockopt(d->s_telemetry, ZMQ_LINGER, &linger, sizeof(linger));
	zmq_close(d->s_telemetry);
	d->s_telemetry = NULL;
	return NULL;
}
