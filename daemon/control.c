/*
 * control.c - wavetrimd's control thread: one request line in, one JSON
 * reply out (the protocol of lib/wt_request.h).
 *
 * This thread owns the running configuration, the calibration's master
 * copies (interaction matrix, its SVD, control matrix, singular values,
 * reference slopes, flat) and every HDF5 call (save, load): HDF5 is not
 * thread-safe, so no other thread of the daemon touches it.  It also turns
 * a finished interaction-matrix measurement into a control matrix (SVD,
 * truncation) - never the loop thread.
 *
 * Changes reach the loop through the mailbox, one at a time: post() writes
 * the message, publishes its sequence number and waits until the loop has
 * applied it between two frames (at most one poll slice plus one frame
 * later), then reads the loop's answer and the pointers it handed back.
 */
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_offset.h"
#include "wt_modalgain.h"
#include "wt_recon.h"
#include "wtd.h"

/* How long a request waits for the loop to apply its change. */
#define MB_TIMEOUT_NS (3 * WT_NS_PER_S)

struct wtd_ctl {
	struct wtd *d;
	wt_config *scratch;
	char *reply, *result;
	size_t reply_cap, result_cap;
	bool shutdown;

	/* calibration master copies */
	double *D; /* n_slopes x n_act */
	bool have_D;
	wt_svd *svd; /* of D, computed when needed */
	double *sv;  /* n_sv */
	int n_sv;
	bool have_sv;
	float *R;     /* installed control matrix, or NULL */
	bool R_stale; /* R was not made from the current D */
	int modes, recommended;
	double condition;
	long missing; /* measurements missing in the last matrix run */
	float *ref;   /* installed reference slopes */
	bool have_ref;
	float *flat;   /* installed flat */
	double *norms; /* n_act scratch */
	wt_calreport *report; /* of D: measured, or read from its file */
	char created[32];
	char source[16];
	char file[WT_REQUEST_LINE_MAX + 1];

	/* Zernike offsets the closed loop holds, and their slopes */
	int n_offsets;
	int offset_noll[WTD_OFFSETS_MAX];
	double offset_nm[WTD_OFFSETS_MAX];
	float *offset; /* installed in the loop, or NULL */
	struct wtd_ag *ag; /* automatic gain choice */
};

/* Sections whose options wavetrimd reads (the others are the simulator's). */
static bool daemon_section(const char *section)
{
	static const char *const mine[] = {
		"sensor", "mirror", "control", "calibration",
		"driver", "daemon", "safety",
	};
	size_t i;

	for (i = 0; i < sizeof(mine) / sizeof(mine[0]); i++) {
		if (strcmp(section, mine[i]) == 0) {
			return true;
		}
	}
	return false;
}

/* --- status shared with the telemetry thread ------------------------------ */

static void publish_slow(struct wtd_ctl *ctl)
{
	struct wtd *d = ctl->d;

	pthread_mutex_lock(&d->slow_mu);
	d->slow.gain = wt_config_double(d->cfg, WT_OPT_CONTROL_GAIN);
	d->slow.leak = wt_config_double(d->cfg, WT_OPT_CONTROL_LEAK);
	d->slow.modes = ctl->R ? ctl->modes : 0;
	d->slow.recommended = ctl->recommended;
	d->slow.condition = ctl->condition;
	d->slow.have_interaction = ctl->have_D;
	d->slow.have_matrix = ctl->R != NULL;
	d->slow.have_reference = ctl->have_ref;
	snprintf(d->slow.source, sizeof(d->slow.source), "%s", ctl->source);
	snprintf(d->slow.file, sizeof(d->slow.file), "%s", ctl->file);
	snprintf(d->slow.created, sizeof(d->slow.created), "%s", ctl->created);
	d->slow.n_offsets = ctl->n_offsets;
	memcpy(d->slow.offset_noll, ctl->offset_noll, sizeof(ctl->offset_noll));
	memcpy(d->slow.offset_nm, ctl->offset_nm, sizeof(ctl->offset_nm));
	pthread_mutex_unlock(&d->slow_mu);
	atomic_store(&d->driver_timeout_ns,
		     (unsigned long long)wt_config_int(
			     d->cfg, WT_OPT_DRIVER_TIMEOUT_MS) *
			     WT_NS_PER_MS);
	atomic_store(
		&d->image_period_ns,
		wt_config_double(d->cfg, WT_OPT_DAEMON_IMAGE_HZ) > 0
			? (unsigned long long)(1e9 /
					       wt_config_double(
						       d->cfg,
						       WT_OPT_DAEMON_IMAGE_HZ))
			: 0);
	atomic_store(
		&d->status_period_ns,
		(unsigned long long)(1e9 /
				     wt_config_double(
					     d->cfg, WT_OPT_DAEMON_STATUS_HZ)));
}

/* An event from this thread: {"event":name,"t_ns":..,"frame":..,<body>}. */
static void post_event(struct wtd_ctl *ctl, const char *name,
		       void (*body)(struct wtd_ctl *, wt_json *, const void *),
		       const void *arg)
{
	struct wtd *d = ctl->d;
	size_t cap = 4096 + 32 * ((size_t)ctl->n_sv + (size_t)d->n_act) +
		     wt_calreport_json_size(ctl->report);
	char *buf = malloc(cap);
	wt_json j;

	if (!buf) {
		return;
	}
	wt_json_init(&j, buf, cap);
	wt_json_object_begin(&j);
	wt_json_key(&j, "event");
	wt_json_string(&j, name);
	wt_json_key(&j, "t_ns");
	wt_json_uint(&j, wt_clock_ns());
	wt_json_key(&j, "frame");
	if (atomic_load(&d->c.have_frame)) {
		wt_json_uint(&j, atomic_load(&d->c.last_frame));
	} else {
		wt_json_null(&j);
	}
	if (body) {
		body(ctl, &j, arg);
	}
	wt_json_object_end(&j);
	if (wt_json_finish(&j) > 0) {
		wtd_event_post(d, buf);
	}
	free(buf);
}

static void body_file(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	(void)ctl;
	wt_json_key(j, "file");
	wt_json_string(j, arg);
}

static void body_warning(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	(void)ctl;
	wt_json_key(j, "what");
	wt_json_string(j, arg);
	wt_json_key(j, "count");
	wt_json_int(j, 1);
}

/* --- the mailbox ---------------------------------------------------------- */

/*
 * Hand m to the loop and wait until it is applied.  Returns the loop's
 * answer, or -ETIMEDOUT.  The loop's handed-back pointers are in d->mb.
 */
static int post(struct wtd_ctl *ctl, const struct wtd_mb_msg *m)
{
	struct wtd_mailbox *mb = &ctl->d->mb;
	unsigned seq =
		atomic_load_explicit(&mb->posted, memory_order_relaxed) + 1;
	uint64_t t0 = wt_clock_ns();

	/* The previous message (if one timed out) must be taken first. */
	while (atomic_load_explicit(&mb->done, memory_order_acquire) !=
	       seq - 1) {
		if (wt_clock_ns() - t0 > MB_TIMEOUT_NS ||
		    atomic_load(&ctl->d->stop)) {
			return -ETIMEDOUT;
		}
		wt_clock_sleep_ns(200 * WT_NS_PER_US);
	}
	mb->msg = *m;
	atomic_store_explicit(&mb->posted, seq, memory_order_release);
	t0 = wt_clock_ns();
	while (atomic_load_explicit(&mb->done, memory_order_acquire) != seq) {
		if (wt_clock_ns() - t0 > MB_TIMEOUT_NS) {
			wt_log_err(ctl->d->log,
				   "the loop did not take a "
				   "change within %llu ms",
				   (unsigned long long)(MB_TIMEOUT_NS /
							WT_NS_PER_MS));
			return -ETIMEDOUT;
		}
		wt_clock_sleep_ns(100 * WT_NS_PER_US);
	}
	return mb->result;
}

/* --- building and installing a control matrix ----------------------------- */

/* The recommended count: singular values with sigma_i / sigma_1 >= ratio. */
static int count_by_ratio(const double *sv, int n, double ratio)
{
	int k = 0;

	while (k < n && sv[0] > 0 && sv[k] / sv[0] >= ratio) {
		k++;
	}
	return k;
}

/* The SVD of the interaction matrix, computed once per matrix. */
static int ensure_svd(struct wtd_ctl *ctl, wt_error *err)
{
	struct wtd *d = ctl->d;
	int rc;

	if (!ctl->have_D) {
		return wt_error_set(err, -ENOENT, "no interaction matrix");
	}
	if (ctl->svd) {
		return 0;
	}
	rc = wt_svd_compute(ctl->D, d->n_slopes, d->n_act, &ctl->svd, err);
	if (rc < 0) {
		return rc;
	}
	ctl->n_sv = wt_svd_count(ctl->svd);
	memcpy(ctl->sv, wt_svd_values(ctl->svd),
	       sizeof(double) * (size_t)ctl->n_sv);
	ctl->have_sv = true;
	return 0;
}

/*
 * The gain of each of the first n modes from control.mode_gains: entry i
 * for mode i, the last entry repeated for the modes past the list, all 1
 * when the list is empty.
 */
static void mode_gains(const wt_config *cfg, double *g, int n)
{
	double list[WT_CONFIG_LIST_MAX];
	int len = wt_config_dlist(cfg, WT_OPT_CONTROL_MODE_GAINS, list,
				  WT_CONFIG_LIST_MAX);

	for (int i = 0; i < n; i++) {
		g[i] = len > 0 ? list[i < len ? i : len - 1] : 1.0;
	}
}

/*
 * Control matrix from the interaction matrix with the modes of cfg; install
 * it.  0, or a negative code with the reason in *err.
 */
static int build_matrix(struct wtd_ctl *ctl, const wt_config *cfg,
			wt_error *err)
{
	struct wtd *d = ctl->d;
	int modes_opt = (int)wt_config_int(cfg, WT_OPT_CONTROL_MODES);
	double ratio = wt_config_double(cfg, WT_OPT_CONTROL_MIN_SV_RATIO);
	struct wtd_mb_msg m = {.type = WTD_MB_INSTALL};
	float *R;
	double *mg;
	int kept, rc;
	double cond;

	rc = ensure_svd(ctl, err);
	if (rc < 0) {
		return rc;
	}
	kept = wt_recon_modes(ctl->svd, modes_opt, ratio);
	if (kept < 1) {
		return wt_error_set(err, -ERANGE,
				    "no mode kept: every singular value is "
				    "below control.min_sv_ratio %g of the "
				    "largest",
				    ratio);
	}
	R = malloc(sizeof(float) * (size_t)d->n_act * (size_t)d->n_slopes);
	mg = malloc(sizeof(double) * (size_t)kept);
	if (!R || !mg) {
		free(R);
		free(mg);
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	mode_gains(cfg, mg, kept);
	rc = wt_recon_pinv_float(ctl->svd, kept, mg, R);
	free(mg);
	if (rc < 0) {
		free(R);
		return wt_error_set(err, rc, "control matrix: %s",
				    wt_strerror(rc));
	}
	cond = wt_recon_condition(ctl->svd, kept);
	m.matrix = R;
	m.i = kept;
	m.d[0] = cond;
	rc = post(ctl, &m);
	if (rc < 0) {
		if (rc != -ETIMEDOUT) {
			free(R);
		}
		return wt_error_set(err, rc, "%s",
				    rc == -EBUSY
					    ? "a calibration is in progress"
					    : "the loop did not answer");
	}
	free((void *)d->mb.old_matrix);
	ctl->R = R;
	ctl->R_stale = false;
	ctl->modes = kept;
	ctl->condition = cond;
	ctl->recommended = count_by_ratio(ctl->sv, ctl->n_sv, ratio);
	return 0;
}

static void body_report(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	struct wtd *d = ctl->d;
	int k;

	(void)arg;
	wt_json_key(j, "modes");
	wt_json_int(j, ctl->modes);
	wt_json_key(j, "recommended");
	wt_json_int(j, ctl->recommended);
	wt_json_key(j, "condition");
	wt_json_double_prec(j, ctl->condition, 6);
	wt_json_key(j, "singular_values");
	wt_json_double_array(j, ctl->sv, (size_t)ctl->n_sv, 8);
	wt_json_key(j, "missing");
	wt_json_int(j, ctl->missing);
	/* Actuators the report finds dead or weak (lib/wt_diag.h). */
	wt_json_key(j, "weak_actuators");
	wt_json_array_begin(j);
	for (k = 0; ctl->report && k < d->n_act; k++) {
		if (ctl->report->diag->act[k].flags &
		    (WT_DIAG_DEAD | WT_DIAG_WEAK)) {
			wt_json_int(j, k);
		}
	}
	wt_json_array_end(j);
	wt_json_key(j, "report");
	if (ctl->report) {
		wt_calreport_json(j, ctl->report);
	} else {
		wt_json_null(j);
	}
}

/* The current UTC time as "YYYY-MM-DDTHH:MM:SSZ". */
static void utc_now(char *buf, size_t len)
{
	time_t now = time(NULL);
	struct tm tm;

	buf[0] = '\0';
	if (gmtime_r(&now, &tm)) {
		strftime(buf, len, "%Y-%m-%dT%H:%M:%SZ", &tm);
	}
}

/*
 * The report of the matrix just measured (its noise and parameters read
 * from the calibrator, which the caller still holds).  Without one (out of
 * memory, or no SVD) the event carries "report":null.
 */
static void take_report(struct wtd_ctl *ctl, const wt_calib *cal)
{
	struct wtd *d = ctl->d;
	double *rms = malloc(sizeof(double) * (size_t)d->n_slopes);
	double noise = NAN;
	wt_calib_params p;
	wt_error err;

	wt_calreport_destroy(ctl->report);
	ctl->report = NULL;
	if (!rms || wt_calib_matrix_params(cal, &p) < 0) {
		free(rms);
		return;
	}
	if (wt_calib_noise(cal, rms, &noise) < 0) {
		noise = NAN;
	}
	free(rms);
	if (wt_calreport_compute(ctl->D, d->lenslets, d->actuators, &p,
				 ctl->missing, noise, &ctl->report,
				 &err) < 0) {
		wt_log_err(d->log, "calibration report not made: %s", err.msg);
		ctl->report = NULL;
	}
}

/* A finished measurement in the loop: take it and act on it. */
static void pick_up_calibration(struct wtd_ctl *ctl)
{
	struct wtd *d = ctl->d;
	int kind =
		atomic_load_explicit(&d->c.calib_ready, memory_order_acquire);
	const wt_calib *cal = wtd_loop_calib(d);
	struct wtd_mb_msg m = {.type = WTD_MB_INSTALL};
	wt_error err;
	int rc, k;

	if (kind == WT_CALIB_NONE) {
		return;
	}
	if (kind == WT_CALIB_REFERENCE) {
		const double *ref = wt_calib_reference(cal);
		float *nref = malloc(sizeof(float) * (size_t)d->n_slopes);

		if (!nref || !ref) {
			free(nref);
			atomic_store_explicit(&d->c.calib_ready, 0,
					      memory_order_release);
			return;
		}
		for (k = 0; k < d->n_slopes; k++) {
			nref[k] = (float)ref[k];
		}
		atomic_store_explicit(&d->c.calib_ready, 0,
				      memory_order_release);
		m.reference = nref;
		rc = post(ctl, &m);
		if (rc < 0) {
			if (rc != -ETIMEDOUT) {
				free(nref);
			}
			wt_log_err(d->log, "reference slopes not installed: %s",
				   wt_strerror(rc));
			return;
		}
		free((void *)d->mb.old_reference);
		ctl->ref = nref;
		ctl->have_ref = true;
		wt_log_notice(d->log,
			      "reference slopes measured and installed");
		publish_slow(ctl);
		return;
	}

	/* The interaction matrix: copy it, release the calibrator, build. */
	memcpy(ctl->D, wt_calib_interaction(cal),
	       sizeof(double) * (size_t)d->n_slopes * (size_t)d->n_act);
	ctl->missing = wt_calib_missing(cal);
	take_report(ctl, cal);
	atomic_store_explicit(&d->c.calib_ready, 0, memory_order_release);
	ctl->have_D = true;
	wt_svd_destroy(ctl->svd);
	ctl->svd = NULL;
	utc_now(ctl->created, sizeof(ctl->created));
	snprintf(ctl->source, sizeof(ctl->source), "measured");
	ctl->file[0] = '\0';
	rc = build_matrix(ctl, d->cfg, &err);
	if (rc < 0) {
		/* The loop keeps the old matrix; it is not saved with D. */
		ctl->R_stale = ctl->R != NULL;
		wt_log_err(d->log, "control matrix not built: %s", err.msg);
		post_event(ctl, "warning", body_warning, err.msg);
		publish_slow(ctl);
		return;
	}
	wt_log_notice(d->log,
		      "interaction matrix measured: %d modes kept of %d, "
		      "condition number %.3g",
		      ctl->modes, ctl->n_sv, ctl->condition);
	post_event(ctl, "calibration", body_report, NULL);
	publish_slow(ctl);
}

/* --- requests ------------------------------------------------------------- */

/* A request's outcome: the result JSON (in ctl->result) or an error. */
struct outcome {
	bool ok;
	char error[WT_ERROR_MAX];
};

static void fail(struct outcome *o, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

static void fail(struct outcome *o, const char *fmt, ...)
{
	va_list ap;

	o->ok = false;
	va_start(ap, fmt);
	vsnprintf(o->error, sizeof(o->error), fmt, ap);
	va_end(ap);
}

/* Start a result object in ctl->result. */
static void result_begin(struct wtd_ctl *ctl, wt_json *j)
{
	wt_json_init(j, ctl->result, ctl->result_cap);
}

static void result_end(struct wtd_ctl *ctl, wt_json *j, struct outcome *o)
{
	(void)ctl;
	if (wt_json_finish(j) < 0) {
		fail(o, "reply too long");
		return;
	}
	o->ok = true;
}

static void result_state(struct wtd_ctl *ctl, struct outcome *o)
{
	wt_json j;

	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "state");
	wt_json_string(&j, wt_state_name(atomic_load(&ctl->d->c.state)));
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

static const char *busy_reason(struct wtd_ctl *ctl)
{
	if (atomic_load(&ctl->d->c.calib_ready)) {
		return "the last calibration is still being processed";
	}
	return "calibration in progress (open stops it)";
}

/* The reason for a loop refusal of a state request. */
static void state_failure(struct wtd_ctl *ctl, struct outcome *o, int rc,
			  const char *word)
{
	switch (rc) {
	case -EBUSY:
		fail(o, "%s", busy_reason(ctl));
		break;
	case -ENOENT:
		fail(o, "no control matrix: calibrate or load a calibration "
			"first");
		break;
	case -EPERM:
		fail(o, "the loop is in fault: open or close first");
		break;
	case -ETIMEDOUT:
		fail(o, "the loop did not answer");
		break;
	default:
		fail(o, "%s refused: %s", word, wt_strerror(rc));
		break;
	}
}

static void do_state(struct wtd_ctl *ctl, int to, const char *word,
		     struct outcome *o)
{
	struct wtd_mb_msg m = {.type = WTD_MB_STATE, .i = to};
	int rc;

	if (to == WT_STATE_CLOSED && !ctl->R) {
		fail(o, "no control matrix: calibrate or load a calibration "
			"first");
		return;
	}
	rc = post(ctl, &m);
	if (rc < 0) {
		state_failure(ctl, o, rc, word);
		return;
	}
	result_state(ctl, o);
}

static void do_flat(struct wtd_ctl *ctl, bool capture, struct outcome *o)
{
	struct wtd_mb_msg m = {.type = capture ? WTD_MB_FLAT_CAPTURE
					       : WTD_MB_FLAT};
	float *nflat = NULL;
	int rc;

	if (capture) {
		nflat = calloc((size_t)ctl->d->n_act, sizeof(float));
		if (!nflat) {
			fail(o, "out of memory");
			return;
		}
		m.out = nflat;
	}
	rc = post(ctl, &m);
	if (rc < 0) {
		if (rc != -ETIMEDOUT) {
			free(nflat);
		}
		state_failure(ctl, o, rc, "flat");
		return;
	}
	if (capture) {
		free((void *)ctl->d->mb.old_flat);
		ctl->flat = nflat;
	}
	result_state(ctl, o);
}

static void do_calibrate(struct wtd_ctl *ctl, enum wt_calib_kind kind,
			 long frames, int patterns, struct outcome *o)
{
	const wt_config *cfg = ctl->d->cfg;
	struct wtd_mb_msg m = {.type = WTD_MB_CALIBRATE, .i = (int)kind};
	double lo = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_LOW);
	double hi = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_HIGH);
	wt_json j;
	long total;
	int rc, a;

	m.cp.amplitude = wt_config_double(cfg, WT_OPT_CALIB_AMPLITUDE);
	m.cp.settle = (int)wt_config_int(cfg, WT_OPT_CALIB_SETTLE);
	m.cp.average = (int)wt_config_int(cfg, WT_OPT_CALIB_AVERAGE);
	m.cp.patterns = patterns >= 0 ? patterns
				      : wt_config_enum(cfg, WT_OPT_CALIB_PATTERNS);
	m.cp.reference_frames =
		frames > 0 ? (int)frames
			   : (int)wt_config_int(cfg,
						WT_OPT_CALIB_REFERENCE_FRAMES);
	if (kind == WT_CALIB_MATRIX) {
		/* The same test as wt_calib_start(), with words. */
		for (a = 0; a < ctl->d->n_act; a++) {
			float up =
				(float)((double)ctl->flat[a] + m.cp.amplitude);
			float down =
				(float)((double)ctl->flat[a] - m.cp.amplitude);

			if (up > (float)hi || down < (float)lo) {
				fail(o,
				     "actuator %d: flat %g +- "
				     "calibration.amplitude %g leaves the "
				     "limits [%g, %g] (every %s pattern puts "
				     "each actuator at flat +- amplitude)",
				     a, (double)ctl->flat[a], m.cp.amplitude,
				     lo, hi,
				     wt_calib_patterns_name(m.cp.patterns));
				return;
			}
		}
	}
	rc = post(ctl, &m);
	if (rc < 0) {
		if (rc == -EPERM) {
			fail(o, "calibrations start from open: send open "
				"first");
		} else if (rc == -ERANGE) {
			fail(o, "the pokes would leave the mirror's limits");
		} else {
			state_failure(ctl, o, rc, "calibrate");
		}
		return;
	}
	total = wt_calib_frames(kind, &m.cp, ctl->d->n_act);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "state");
	wt_json_string(&j, wt_state_name(WT_STATE_CALIBRATING));
	wt_json_key(&j, "kind");
	wt_json_string(&j, wt_calib_kind_name(kind));
	if (kind == WT_CALIB_MATRIX) {
		wt_json_key(&j, "patterns");
		wt_json_string(&j, wt_calib_patterns_name(m.cp.patterns));
	}
	wt_json_key(&j, "frames");
	wt_json_int(&j, total);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/* An option's value, typed as get and config show it. */
static void option_value(wt_json *j, const wt_config *cfg, const wt_option *o)
{
	char text[WT_CONFIG_TEXT_MAX];

	switch (o->type) {
	case WT_TYPE_INT:
		wt_json_int(j, wt_config_int(cfg, o->id));
		break;
	case WT_TYPE_DOUBLE:
		wt_json_double(j, wt_config_double(cfg, o->id));
		break;
	case WT_TYPE_BOOL:
		wt_json_bool(j, wt_config_bool(cfg, o->id));
		break;
	case WT_TYPE_STRING:
	case WT_TYPE_ENUM:
		wt_json_string(j, wt_config_string(cfg, o->id));
		break;
	default:
		if (wt_config_format(cfg, o->id, text, sizeof(text)) < 0) {
			text[0] = '\0';
		}
		wt_json_string(j, text);
		break;
	}
}

static void body_config(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	const wt_option *o = arg;
	char key[128];

	snprintf(key, sizeof(key), "%s.%s", o->section, o->key);
	wt_json_key(j, "key");
	wt_json_string(j, key);
	wt_json_key(j, "value");
	option_value(j, ctl->d->cfg, o);
}

/* Hand a changed live option to whoever uses it. */
static int apply_option(struct wtd_ctl *ctl, const wt_config *cfg,
			const wt_option *o, wt_error *err)
{
	struct wtd_mb_msg m = {0};
	int rc;

	switch (o->id) {
	case WT_OPT_CONTROL_GAIN:
		m.type = WTD_MB_GAIN;
		m.d[0] = wt_config_double(cfg, o->id);
		break;
	case WT_OPT_CONTROL_LEAK:
		m.type = WTD_MB_LEAK;
		m.d[0] = wt_config_double(cfg, o->id);
		break;
	case WT_OPT_MIRROR_LIMIT_LOW:
	case WT_OPT_MIRROR_LIMIT_HIGH:
		m.type = WTD_MB_LIMITS;
		m.d[0] = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_LOW);
		m.d[1] = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_HIGH);
		break;
	case WT_OPT_MIRROR_SLEW_LIMIT:
		m.type = WTD_MB_SLEW;
		m.d[0] = wt_config_double(cfg, o->id);
		break;
	case WT_OPT_SENSOR_BACKGROUND:
	case WT_OPT_SENSOR_THRESHOLD:
	case WT_OPT_SENSOR_MIN_FLUX:
		m.type = WTD_MB_LEVELS;
		m.d[0] = wt_config_double(cfg, WT_OPT_SENSOR_BACKGROUND);
		m.d[1] = wt_config_double(cfg, WT_OPT_SENSOR_THRESHOLD);
		m.d[2] = wt_config_double(cfg, WT_OPT_SENSOR_MIN_FLUX);
		break;
	case WT_OPT_DRIVER_TIMEOUT_MS:
		m.type = WTD_MB_TIMEOUT;
		m.i = (int)wt_config_int(cfg, o->id);
		break;
	case WT_OPT_SAFETY_SAFE_COMMAND:
	case WT_OPT_SAFETY_MAX_BAD_FRAMES:
		m.type = WTD_MB_SAFETY;
		m.i = strcmp(wt_config_string(cfg, WT_OPT_SAFETY_SAFE_COMMAND),
			     "hold") == 0;
		m.i2 = (int)wt_config_int(cfg, WT_OPT_SAFETY_MAX_BAD_FRAMES);
		break;
	case WT_OPT_DAEMON_FRAME_DECIMATION:
		m.type = WTD_MB_DECIMATION;
		m.i = (int)wt_config_int(cfg, o->id);
		break;
	case WT_OPT_CONTROL_MODES:
	case WT_OPT_CONTROL_MIN_SV_RATIO:
	case WT_OPT_CONTROL_MODE_GAINS:
		if (!ctl->have_D) {
			return 0; /* used at the next calibration */
		}
		return build_matrix(ctl, cfg, err);
	default:
		/* Read when used (calibration.*, daemon.status_hz). */
		return 0;
	}
	rc = post(ctl, &m);
	if (rc < 0) {
		return wt_error_set(err, rc, "the loop refused it: %s",
				    wt_strerror(rc));
	}
	return 0;
}

static void do_set(struct wtd_ctl *ctl, const wt_request *req,
		   struct outcome *o)
{
	struct wtd *d = ctl->d;
	const wt_option *opt = req->option;
	wt_error err;
	wt_json j;
	double lo, hi;

	if (!daemon_section(opt->section)) {
		fail(o, "%s is read by wavetrim-sim, not by wavetrimd",
		     req->key);
		return;
	}
	wt_config_copy(ctl->scratch, d->cfg);
	if (wt_config_set(ctl->scratch, req->key, req->value, &err) < 0) {
		fail(o, "%s", err.msg);
		return;
	}
	lo = wt_config_double(ctl->scratch, WT_OPT_MIRROR_LIMIT_LOW);
	hi = wt_config_double(ctl->scratch, WT_OPT_MIRROR_LIMIT_HIGH);
	if (!(lo < hi)) {
		fail(o,
		     "mirror.limit_low (%g) must be below mirror.limit_high "
		     "(%g)",
		     lo, hi);
		return;
	}
	if (apply_option(ctl, ctl->scratch, opt, &err) < 0) {
		fail(o, "%s: %s", req->key, err.msg);
		return;
	}
	wt_config_copy(d->cfg, ctl->scratch);
	publish_slow(ctl);
	post_event(ctl, "config", body_config, opt);
	wt_log_info(d->log, "set %s = %s", req->key, req->value);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	body_config(ctl, &j, opt);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

static void do_get(struct wtd_ctl *ctl, const wt_request *req,
		   struct outcome *o)
{
	wt_json j;

	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	body_config(ctl, &j, req->option);
	wt_json_key(&j, "live");
	wt_json_bool(&j, req->option->live);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

static void do_config(struct wtd_ctl *ctl, struct outcome *o)
{
	char key[128];
	wt_json j;
	size_t i;

	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	for (i = 0; i < wt_option_count(); i++) {
		const wt_option *opt = wt_option_get((wt_opt_id)i);

		snprintf(key, sizeof(key), "%s.%s", opt->section, opt->key);
		wt_json_key(&j, key);
		option_value(&j, ctl->d->cfg, opt);
	}
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

static void do_help(struct wtd_ctl *ctl, struct outcome *o)
{
	wt_json j;
	unsigned w;

	result_begin(ctl, &j);
	wt_json_array_begin(&j);
	for (w = 0; w < WT_REQ_COUNT; w++) {
		wt_json_object_begin(&j);
		wt_json_key(&j, "word");
		wt_json_string(&j, wt_request_word_name((enum wt_req_word)w));
		wt_json_key(&j, "usage");
		wt_json_string(&j, wt_request_usage((enum wt_req_word)w));
		wt_json_key(&j, "help");
		wt_json_string(&j, wt_request_help((enum wt_req_word)w));
		wt_json_object_end(&j);
	}
	wt_json_array_end(&j);
	result_end(ctl, &j, o);
}

static void do_status(struct wtd_ctl *ctl, struct outcome *o)
{
	wt_json j;

	result_begin(ctl, &j);
	wtd_status_json(ctl->d, &j, ctl->have_sv ? ctl->sv : NULL, ctl->n_sv);
	result_end(ctl, &j, o);
}

/* The configuration as INI text (new buffer). */
static char *config_text(const wt_config *cfg)
{
	char *text = NULL;
	size_t len = 0;
	FILE *fp = open_memstream(&text, &len);

	if (!fp) {
		return NULL;
	}
	wt_config_write_ini(cfg, fp, NULL);
	if (fclose(fp) != 0) {
		free(text);
		return NULL;
	}
	return text;
}

static void do_save(struct wtd_ctl *ctl, const char *path, struct outcome *o)
{
	struct wtd *d = ctl->d;
	wt_calibration *c = NULL;
	size_t nm = (size_t)d->n_slopes * (size_t)d->n_act;
	char *text;
	wt_error err;
	wt_json j;
	int rc;

	if (!ctl->have_D) {
		fail(o, "no interaction matrix to save: calibrate first");
		return;
	}
	if (!ctl->R || ctl->R_stale) {
		fail(o, "no control matrix made from this interaction matrix "
			"(see control.modes and control.min_sv_ratio)");
		return;
	}
	if (wt_calibration_create(d->lenslets, d->actuators, d->ppl, &c, &err) <
	    0) {
		fail(o, "%s", err.msg);
		return;
	}
	memcpy(c->interaction, ctl->D, nm * sizeof(double));
	memcpy(c->control, ctl->R, nm * sizeof(float));
	if (ctl->have_sv) {
		memcpy(c->singular_values, ctl->sv,
		       sizeof(double) * (size_t)c->n_sv);
	}
	memcpy(c->reference, ctl->ref, sizeof(float) * (size_t)d->n_slopes);
	memcpy(c->flat, ctl->flat, sizeof(float) * (size_t)d->n_act);
	c->modes = ctl->modes;
	text = config_text(d->cfg);
	if (!text || wt_calibration_set_config(c, text) < 0) {
		free(text);
		wt_calibration_destroy(c);
		fail(o, "out of memory");
		return;
	}
	free(text);
	snprintf(c->created, sizeof(c->created), "%s", ctl->created);
	if (!c->created[0]) {
		wt_calibration_stamp(c);
	}
	c->report = ctl->report; /* lent for the save */
	rc = wt_store_save(path, c, &err);
	c->report = NULL;
	if (rc < 0) {
		wt_calibration_destroy(c);
		fail(o, "%s", err.msg);
		return;
	}
	wt_calibration_destroy(c);
	snprintf(ctl->file, sizeof(ctl->file), "%s", path);
	publish_slow(ctl);
	post_event(ctl, "saved", body_file, path);
	wt_log_notice(d->log, "calibration saved to %s", path);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "file");
	wt_json_string(&j, path);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/*
 * Take a loaded (checked) calibration: install its control matrix,
 * reference and flat (through the mailbox when the loop runs) and keep its
 * interaction matrix.  On success the arrays move out of c.
 */
static int adopt(struct wtd_ctl *ctl, wt_calibration *c, bool running,
		 wt_error *err)
{
	struct wtd *d = ctl->d;
	struct wtd_mb_msg m = {.type = WTD_MB_INSTALL};
	double ratio = wt_config_double(d->cfg, WT_OPT_CONTROL_MIN_SV_RATIO);
	double cond = NAN;
	int rc;

	if (c->modes < 1) {
		return wt_error_set(err, -EINVAL,
				    "the calibration's control matrix keeps no "
				    "mode");
	}
	if (c->singular_values[c->modes - 1] > 0) {
		cond = c->singular_values[0] / c->singular_values[c->modes - 1];
	}
	if (running) {
		m.matrix = c->control;
		m.reference = c->reference;
		m.flat = c->flat;
		m.i = c->modes;
		m.d[0] = cond;
		rc = post(ctl, &m);
		if (rc == -ETIMEDOUT) {
			/* The loop may still take them: never free them. */
			c->control = NULL;
			c->reference = NULL;
			c->flat = NULL;
		}
		if (rc < 0) {
			return wt_error_set(
				err, rc, "%s",
				rc == -EBUSY ? busy_reason(ctl)
					     : "the loop did not answer");
		}
		free((void *)d->mb.old_matrix);
		free((void *)d->mb.old_reference);
		free((void *)d->mb.old_flat);
	} else {
		free(ctl->R);
		free(ctl->ref);
		free(ctl->flat);
	}
	ctl->R = c->control;
	ctl->R_stale = false;
	c->control = NULL;
	ctl->ref = c->reference;
	c->reference = NULL;
	ctl->flat = c->flat;
	c->flat = NULL;
	ctl->have_ref = true;
	memcpy(ctl->D, c->interaction,
	       sizeof(double) * (size_t)d->n_slopes * (size_t)d->n_act);
	ctl->have_D = true;
	wt_svd_destroy(ctl->svd);
	ctl->svd = NULL;
	memcpy(ctl->sv, c->singular_values, sizeof(double) * (size_t)c->n_sv);
	ctl->n_sv = c->n_sv;
	ctl->have_sv = true;
	ctl->modes = c->modes;
	ctl->condition = cond;
	ctl->recommended = count_by_ratio(ctl->sv, ctl->n_sv, ratio);
	snprintf(ctl->created, sizeof(ctl->created), "%s", c->created);
	snprintf(ctl->source, sizeof(ctl->source), "file");
	wt_calreport_destroy(ctl->report);
	ctl->report = c->report; /* NULL for files without one */
	c->report = NULL;
	return 0;
}

static void do_load(struct wtd_ctl *ctl, const char *path, struct outcome *o)
{
	struct wtd *d = ctl->d;
	wt_calibration *c = NULL;
	wt_error err;
	wt_json j;

	if (atomic_load(&d->c.state) == WT_STATE_CALIBRATING ||
	    atomic_load(&d->c.calib_ready)) {
		fail(o, "%s", busy_reason(ctl));
		return;
	}
	if (wt_store_load(path, d->lenslets, d->actuators, d->ppl, &c, &err) <
	    0) {
		fail(o, "%s", err.msg);
		return;
	}
	if (adopt(ctl, c, true, &err) < 0) {
		wt_calibration_destroy(c);
		fail(o, "%s", err.msg);
		return;
	}
	wt_calibration_destroy(c);
	snprintf(ctl->file, sizeof(ctl->file), "%s", path);
	publish_slow(ctl);
	post_event(ctl, "loaded", body_file, path);
	wt_log_notice(d->log, "calibration loaded from %s (%d modes)", path,
		      ctl->modes);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "file");
	wt_json_string(&j, path);
	wt_json_key(&j, "modes");
	wt_json_int(&j, ctl->modes);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/* Words a read-only client may send (they change nothing). */
static bool read_only_word(int word)
{
	return word == WT_REQ_STATUS || word == WT_REQ_PING ||
	       word == WT_REQ_GET || word == WT_REQ_CONFIG ||
	       word == WT_REQ_HELP;
}

/*
 * May the sender of msg change the mirror?  Without daemon.writers every
 * client let in may; with it, only a CURVE client whose key (the User-Id
 * the ZAP handler gave it) is listed.  A message without a User-Id came
 * over ipc or loopback tcp without CURVE: that client is local.
 */
static bool sender_may_write(const struct wtd *d, zmq_msg_t *msg)
{
	const char *user;

	if (!d->writers) {
		return true;
	}
	user = zmq_msg_gets(msg, "User-Id");
	return !user || wt_keylist_has(d->writers, user);
}

/* --- offsets and shapes --------------------------------------------------- */

/* The sensor's optics for wt_offset. */
static void sensor_optics(const struct wtd *d, wt_sensor_optics *so)
{
	so->pixels_per_lenslet = d->ppl;
	so->pixel_um = wt_config_double(d->cfg, WT_OPT_SENSOR_PIXEL_PITCH_UM);
	so->focal_mm = wt_config_double(d->cfg, WT_OPT_SENSOR_FOCAL_LENGTH_MM);
}

/* The slopes (pixels) of n Zernike terms, added into s (n_slopes, zeroed
 * first).  0 or a negative code with the reason. */
static int zernike_slopes(struct wtd_ctl *ctl, int n, const int *noll,
			  const double *nm, double *s, wt_error *err)
{
	struct wtd *d = ctl->d;
	wt_sensor_optics so;
	int k, rc;

	sensor_optics(d, &so);
	memset(s, 0, sizeof(double) * (size_t)d->n_slopes);
	for (k = 0; k < n; k++) {
		rc = wt_offset_add_zernike(d->lenslets, &so, noll[k], nm[k], s,
					   err);
		if (rc < 0) {
			return rc;
		}
	}
	return 0;
}

static void body_offsets(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	(void)arg;
	wt_json_key(j, "offsets");
	wtd_offsets_json(j, ctl->n_offsets, ctl->offset_noll, ctl->offset_nm);
}

/*
 * Install the offsets noll[n], nm[n] (n = 0: none) in the loop and make
 * them ctl's.  0 or a negative code with the reason.
 */
static int install_offsets(struct wtd_ctl *ctl, int n, const int *noll,
			   const double *nm, wt_error *err)
{
	struct wtd *d = ctl->d;
	struct wtd_mb_msg m = {.type = WTD_MB_OFFSET};
	double *s = NULL;
	float *f = NULL;
	int k, rc;

	if (n > 0) {
		s = malloc(sizeof(double) * (size_t)d->n_slopes);
		f = malloc(sizeof(float) * (size_t)d->n_slopes);
		if (!s || !f) {
			free(s);
			free(f);
			return wt_error_set(err, -ENOMEM, "out of memory");
		}
		rc = zernike_slopes(ctl, n, noll, nm, s, err);
		for (k = 0; rc == 0 && k < d->n_slopes; k++) {
			f[k] = (float)s[k];
		}
		free(s);
		if (rc < 0) {
			free(f);
			return rc;
		}
	}
	m.offset = f;
	rc = post(ctl, &m);
	if (rc < 0) {
		if (rc != -ETIMEDOUT) {
			free(f);
		}
		return wt_error_set(err, rc, "the loop did not answer");
	}
	free((void *)d->mb.old_offset);
	ctl->offset = f;
	if (noll != ctl->offset_noll) {
		memcpy(ctl->offset_noll, noll, sizeof(int) * (size_t)n);
		memcpy(ctl->offset_nm, nm, sizeof(double) * (size_t)n);
	}
	ctl->n_offsets = n;
	return 0;
}

static void do_offset(struct wtd_ctl *ctl, const wt_request *req,
		      struct outcome *o)
{
	int noll[WTD_OFFSETS_MAX];
	double nm[WTD_OFFSETS_MAX];
	int n = ctl->n_offsets, k;
	wt_error err;
	wt_json j;

	if (req->offset_op != WT_OFFSET_SHOW) {
		memcpy(noll, ctl->offset_noll, sizeof(noll));
		memcpy(nm, ctl->offset_nm, sizeof(nm));
		if (req->offset_op == WT_OFFSET_CLEAR) {
			n = 0;
		} else {
			/* Offsets add: the same mode's amounts sum. */
			for (k = 0; k < n && noll[k] != req->noll; k++) {
			}
			if (k == n && n == WTD_OFFSETS_MAX) {
				fail(o,
				     "at most %d modes may be offset at once "
				     "(offset clear first)",
				     WTD_OFFSETS_MAX);
				return;
			}
			if (k == n) {
				noll[n] = req->noll;
				nm[n++] = 0;
			}
			nm[k] += req->amount_nm;
			if (nm[k] == 0) {
				noll[k] = noll[n - 1];
				nm[k] = nm[n - 1];
				n--;
			}
		}
		if (install_offsets(ctl, n, noll, nm, &err) < 0) {
			fail(o, "offset: %s", err.msg);
			return;
		}
		publish_slow(ctl);
		post_event(ctl, "offsets", body_offsets, NULL);
		wt_log_info(ctl->d->log, "%d offset mode(s) held", n);
	}
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	body_offsets(ctl, &j, NULL);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/*
 * shape zernike J AMOUNT: command = flat + R p, p the mode's slopes and R
 * the pseudo-inverse of the interaction matrix over the installed modes
 * (without control.mode_gains, which are loop tuning), so that D (command
 * - flat) = p to the extent the mirror can make it.
 */
static void do_shape(struct wtd_ctl *ctl, const wt_request *req,
		     struct outcome *o)
{
	struct wtd *d = ctl->d;
	struct wtd_mb_msg m = {.type = WTD_MB_SHAPE};
	double lo = wt_config_double(d->cfg, WT_OPT_MIRROR_LIMIT_LOW);
	double hi = wt_config_double(d->cfg, WT_OPT_MIRROR_LIMIT_HIGH);
	int state = atomic_load(&d->c.state);
	size_t ns = (size_t)d->n_slopes, na = (size_t)d->n_act;
	double *p = NULL, *R = NULL, peak = 0;
	float *cmd = NULL;
	wt_error err;
	wt_json j;
	size_t a, k;
	int rc;

	if (state == WT_STATE_CLOSED) {
		fail(o, "shape is for the open loop: open first (in closed "
			"loop use offset)");
		return;
	}
	if (state == WT_STATE_CALIBRATING || atomic_load(&d->c.calib_ready)) {
		fail(o, "%s", busy_reason(ctl));
		return;
	}
	if (state == WT_STATE_FAULT) {
		fail(o, "the loop is in fault: open or close first");
		return;
	}
	if (!ctl->R || ctl->modes < 1) {
		fail(o, "no control matrix: calibrate or load a calibration "
			"first");
		return;
	}
	if (ensure_svd(ctl, &err) < 0) {
		fail(o, "shape: %s", err.msg);
		return;
	}
	p = malloc(sizeof(double) * ns);
	R = malloc(sizeof(double) * ns * na);
	cmd = malloc(sizeof(float) * na);
	if (!p || !R || !cmd) {
		fail(o, "out of memory");
		goto out;
	}
	rc = zernike_slopes(ctl, 1, &req->noll, &req->amount_nm, p, &err);
	if (rc == 0) {
		rc = wt_recon_pinv(ctl->svd, ctl->modes, NULL, R);
		if (rc < 0) {
			wt_error_set(&err, rc, "%s", wt_strerror(rc));
		}
	}
	if (rc < 0) {
		fail(o, "shape: %s", err.msg);
		goto out;
	}
	for (a = 0; a < na; a++) {
		double v = 0;

		for (k = 0; k < ns; k++) {
			v += R[a * ns + k] * p[k];
		}
		if (fabs(v) > peak) {
			peak = fabs(v);
		}
		v += ctl->flat[a];
		if (!(v >= lo && v <= hi)) {
			fail(o,
			     "actuator %zu would be at %.4g, outside the "
			     "limits [%g, %g]: ask for less",
			     a, v, lo, hi);
			goto out;
		}
		cmd[a] = (float)v;
	}
	m.command = cmd;
	rc = post(ctl, &m);
	if (rc < 0) {
		if (rc == -ETIMEDOUT) {
			cmd = NULL; /* the loop may still read it */
		}
		state_failure(ctl, o, rc, "shape");
		goto out;
	}
	wt_log_info(d->log, "shape: Noll %d, %g nm, largest stroke %.3g",
		    req->noll, req->amount_nm, peak);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "state");
	wt_json_string(&j, wt_state_name(WT_STATE_HELD));
	wt_json_key(&j, "noll");
	wt_json_int(&j, req->noll);
	wt_json_key(&j, "nm");
	wt_json_double(&j, req->amount_nm);
	wt_json_key(&j, "largest_stroke");
	wt_json_double_prec(&j, peak, 6);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
out:
	free(p);
	free(R);
	free(cmd);
}

/* --- reload --------------------------------------------------------------- */

struct reload_report {
	const char *file;
	const int *changed;
	int n_changed;
	const char *error; /* NULL: applied */
};

static void body_reload(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	const struct reload_report *r = arg;
	char key[128];
	int k;

	(void)ctl;
	wt_json_key(j, "ok");
	wt_json_bool(j, r->error == NULL);
	wt_json_key(j, "file");
	wt_json_string(j, r->file);
	wt_json_key(j, "changed");
	wt_json_array_begin(j);
	for (k = 0; k < r->n_changed; k++) {
		const wt_option *opt = wt_option_get((wt_opt_id)r->changed[k]);

		snprintf(key, sizeof(key), "%s.%s", opt->section, opt->key);
		wt_json_string(j, key);
	}
	wt_json_array_end(j);
	wt_json_key(j, "error");
	wt_json_string(j, r->error);
}

/* Do two configurations hold the same value of opt? */
static bool same_value(const wt_config *a, const wt_config *b,
		       const wt_option *opt)
{
	char ta[WT_CONFIG_TEXT_MAX], tb[WT_CONFIG_TEXT_MAX];

	if (wt_config_format(a, opt->id, ta, sizeof(ta)) < 0 ||
	    wt_config_format(b, opt->id, tb, sizeof(tb)) < 0) {
		return false;
	}
	return strcmp(ta, tb) == 0;
}

/*
 * Re-read d->config_path over the defaults; refuse the whole of it when it
 * does not read or changes an option that needs a restart; else apply each
 * changed live option (each a `config` event), undoing those applied
 * before one the loop refuses.  Options of the simulator's sections are
 * not ours and are left alone.  Reports by a `reload` event either way.
 */
static void do_reload(struct wtd_ctl *ctl, struct outcome *o)
{
	struct wtd *d = ctl->d;
	size_t n_opt = wt_option_count(), i;
	wt_config *fresh = NULL;
	int *changed = calloc(n_opt, sizeof(int));
	char why[WT_ERROR_MAX] = "";
	struct reload_report rep = {.file = d->config_path};
	int n_changed = 0, k, done = 0;
	size_t used = 0;
	wt_error err;
	wt_json j;
	double lo, hi;

	if (!changed || wt_config_create(&fresh, &err) < 0) {
		fail(o, "out of memory");
		goto out;
	}
	if (!d->config_path) {
		fail(o, "the daemon was started without a configuration file");
		goto out;
	}
	if (wt_config_load(fresh, d->config_path, &err) < 0) {
		fail(o, "reload refused: %s", err.msg);
		goto out;
	}
	for (i = 0; i < n_opt; i++) {
		const wt_option *opt = wt_option_get((wt_opt_id)i);

		if (!daemon_section(opt->section) ||
		    same_value(fresh, d->cfg, opt)) {
			continue;
		}
		if (!opt->live) {
			int w = snprintf(why + used, sizeof(why) - used,
					 "%s%s.%s needs a restart",
					 used ? ", " : "", opt->section,
					 opt->key);

			if (w > 0 && (size_t)w < sizeof(why) - used) {
				used += (size_t)w;
			}
			continue;
		}
		changed[n_changed++] = (int)i;
	}
	if (used) {
		fail(o, "reload refused: %s", why);
		goto out;
	}
	lo = wt_config_double(fresh, WT_OPT_MIRROR_LIMIT_LOW);
	hi = wt_config_double(fresh, WT_OPT_MIRROR_LIMIT_HIGH);
	if (!(lo < hi)) {
		fail(o,
		     "reload refused: %s: mirror.limit_low (%g) must be below "
		     "mirror.limit_high (%g)",
		     d->config_path, lo, hi);
		goto out;
	}
	/* The running configuration with the file's live values. */
	wt_config_copy(ctl->scratch, d->cfg);
	for (k = 0; k < n_changed; k++) {
		const wt_option *opt = wt_option_get((wt_opt_id)changed[k]);
		char key[128], text[WT_CONFIG_TEXT_MAX];

		snprintf(key, sizeof(key), "%s.%s", opt->section, opt->key);
		if (wt_config_format(fresh, opt->id, text, sizeof(text)) < 0 ||
		    wt_config_set(ctl->scratch, key, text, &err) < 0) {
			fail(o, "reload refused: %s", key);
			goto out;
		}
	}
	for (done = 0; done < n_changed; done++) {
		const wt_option *opt = wt_option_get((wt_opt_id)changed[done]);

		if (apply_option(ctl, ctl->scratch, opt, &err) < 0) {
			fail(o, "reload refused: %s.%s: %s", opt->section,
			     opt->key, err.msg);
			break;
		}
	}
	if (done < n_changed) {
		/* Undo, so that nothing changed. */
		for (k = 0; k < done; k++) {
			apply_option(ctl, d->cfg,
				     wt_option_get((wt_opt_id)changed[k]),
				     &err);
		}
		goto out;
	}
	wt_config_copy(d->cfg, ctl->scratch);
	publish_slow(ctl);
	for (k = 0; k < n_changed; k++) {
		post_event(ctl, "config", body_config,
			   wt_option_get((wt_opt_id)changed[k]));
	}
	rep.changed = changed;
	rep.n_changed = n_changed;
	wt_log_notice(d->log, "reloaded %s: %d option(s) changed",
		      d->config_path, n_changed);
	post_event(ctl, "reload", body_reload, &rep);
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	body_reload(ctl, &j, &rep);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
out:
	if (!o->ok) {
		rep.error = o->error;
		wt_log_warning(d->log, "%s", o->error);
		post_event(ctl, "reload", body_reload, &rep);
	}
	wt_config_destroy(fresh);
	free(changed);
}

/* --- recording ------------------------------------------------------------ */

static void do_record(struct wtd_ctl *ctl, const wt_request *req,
		      struct outcome *o)
{
	struct wtd *d = ctl->d;
	wt_error err;
	wt_json j;
	char *ini;
	int rc;

	if (req->stop) {
		if (wtd_record_stop(d, &err) < 0) {
			fail(o, "%s", err.msg);
			return;
		}
		result_begin(ctl, &j);
		wtd_record_json(d, &j);
		result_end(ctl, &j, o);
		return;
	}
	ini = config_text(d->cfg);
	rc = wtd_record_start(d, req->path, req->frames, ini, &err);
	free(ini);
	if (rc < 0) {
		fail(o, "%s", err.msg);
		return;
	}
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	wt_json_key(&j, "file");
	wt_json_string(&j, req->path);
	wt_json_key(&j, "frames");
	wt_json_int(&j, req->frames);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/* --- automatic gain choice ------------------------------------------------ */

/*
 * `autogain` runs in steps in this thread, between requests (the loop never
 * waits, and neither does a client): capture FRAMES frames, optimise, and
 * with apply install the gains and capture FRAMES more to measure them.
 * The outcome is the "autogain" event and `autogain status`.
 */
enum ag_stage { AG_IDLE, AG_BEFORE, AG_AFTER, AG_DONE, AG_FAILED };

static const char *const ag_stage_names[] = {
	[AG_IDLE] = "none",	    [AG_BEFORE] = "recording",
	[AG_AFTER] = "measuring", [AG_DONE] = "done",
	[AG_FAILED] = "failed",
};

struct wtd_ag {
	int stage;
	bool apply, applied;
	long frames;
	uint64_t deadline;
	struct wtd_capture c;
	int k, delay, state;
	wt_modalgain_result *res;
	double *cur, *mg, *y, *psd;
	double pred_cur, pred_opt, measured, achieved, gain;
	double noise; /* sum of the modes' noise variances */
	char error[WT_ERROR_MAX];
};

/* Change one live option from this thread, as `set` does. */
static int set_live(struct wtd_ctl *ctl, wt_opt_id id, const char *value,
		    wt_error *err)
{
	struct wtd *d = ctl->d;
	const wt_option *opt = wt_option_get(id);
	char key[128];
	int rc;

	snprintf(key, sizeof(key), "%s.%s", opt->section, opt->key);
	wt_config_copy(ctl->scratch, d->cfg);
	rc = wt_config_set(ctl->scratch, key, value, err);
	if (rc < 0) {
		return rc;
	}
	rc = apply_option(ctl, ctl->scratch, opt, err);
	if (rc < 0) {
		return rc;
	}
	wt_config_copy(d->cfg, ctl->scratch);
	publish_slow(ctl);
	post_event(ctl, "config", body_config, opt);
	wt_log_info(d->log, "autogain: %s = %s", key, value);
	return 0;
}

static void ag_free(struct wtd_ag *a)
{
	free(a->c.slopes);
	free(a->c.commands);
	free(a->c.ids);
	free(a->c.states);
	free(a->res);
	free(a->cur);
	free(a->mg);
	free(a->y);
	free(a->psd);
	memset(a, 0, sizeof(*a));
}

/* Start a capture of a->frames frames with a deadline. */
static int ag_capture(struct wtd_ctl *ctl, struct wtd_ag *a, wt_error *err)
{
	struct wtd *d = ctl->d;
	double rate;

	pthread_mutex_lock(&d->period_mu);
	rate = d->period.valid ? d->period.frame_rate_hz : 0;
	pthread_mutex_unlock(&d->period_mu);
	/* Four times the time the frames should take, and 10 s more. */
	a->deadline = wt_clock_ns() + 10 * WT_NS_PER_S +
		      (rate >= 1 ? (uint64_t)(4e9 * (double)a->frames / rate)
				 : 60 * WT_NS_PER_S);
	return wtd_capture_start(d, &a->c, err);
}

/*
 * Modal record of a capture: y[t * k + i] = u_i . s_t (slope space,
 * pixels) and, when pol, the pseudo-open-loop y - sigma_i a_i(t - delay)
 * with a_i = v_i . (c - flat), for t from delay on (got - delay rows).
 */
static void modal_record(struct wtd_ctl *ctl, const struct wtd_capture *c,
			 int k, int delay, bool pol, double *y)
{
	struct wtd *d = ctl->d;
	const double *u = wt_svd_u(ctl->svd), *vt = wt_svd_vt(ctl->svd);
	const double *sv = wt_svd_values(ctl->svd);
	int count = wt_svd_count(ctl->svd);
	long t, rows = c->got - delay;
	int i, j;

	for (t = 0; t < rows; t++) {
		const float *s = c->slopes + (size_t)(t + delay) * d->n_slopes;
		const float *cm = c->commands + (size_t)t * d->n_act;

		for (i = 0; i < k; i++) {
			double acc = 0, am = 0;

			for (j = 0; j < d->n_slopes; j++) {
				acc += u[(size_t)j * count + i] * s[j];
			}
			if (pol) {
				for (j = 0; j < d->n_act; j++) {
					am += vt[(size_t)i * d->n_act + j] *
					      (cm[j] - ctl->flat[j]);
				}
				acc -= sv[i] * am;
			}
			y[t * k + i] = acc;
		}
	}
}

/* Sum over the modes of the variance (mean removed) of a modal record. */
static double modal_variance(const double *y, long rows, int k)
{
	double total = 0;
	long t;
	int i;

	for (i = 0; i < k; i++) {
		double m = 0, v = 0;

		for (t = 0; t < rows; t++) {
			m += y[t * k + i];
		}
		m /= (double)rows;
		for (t = 0; t < rows; t++) {
			v += (y[t * k + i] - m) * (y[t * k + i] - m);
		}
		total += v / (double)rows;
	}
	return total;
}

static void json_number_or_null(wt_json *j, double v)
{
	if (isfinite(v)) {
		wt_json_double_prec(j, v, 6);
	} else {
		wt_json_null(j);
	}
}

/* The members of the autogain outcome (event and `autogain status`). */
static void body_autogain(struct wtd_ctl *ctl, wt_json *j, const void *arg)
{
	struct wtd_ag *a = ctl->ag;
	bool have = a->stage == AG_DONE || (a->stage == AG_AFTER && a->res);

	(void)arg;
	wt_json_key(j, "stage");
	wt_json_string(j, ag_stage_names[a->stage]);
	wt_json_key(j, "frames");
	wt_json_int(j, a->frames);
	wt_json_key(j, "frames_done");
	wt_json_int(j, a->c.got);
	if (a->stage == AG_FAILED) {
		wt_json_key(j, "error");
		wt_json_string(j, a->error);
	}
	if (!have) {
		return;
	}
	wt_json_key(j, "modes");
	wt_json_int(j, a->k);
	wt_json_key(j, "delay");
	wt_json_int(j, a->delay);
	wt_json_key(j, "state");
	wt_json_string(j, wt_state_name(a->state));
	wt_json_key(j, "loop_gains");
	wt_json_array_begin(j);
	for (int i = 0; i < a->k; i++) {
		wt_json_double_prec(j, a->res[i].gain, 4);
	}
	wt_json_array_end(j);
	wt_json_key(j, "current_loop_gains");
	wt_json_double_array(j, a->cur, (size_t)a->k, 4);
	wt_json_key(j, "predicted");
	wt_json_object_begin(j);
	wt_json_key(j, "current");
	json_number_or_null(j, a->pred_cur);
	wt_json_key(j, "optimised");
	json_number_or_null(j, a->pred_opt);
	wt_json_object_end(j);
	wt_json_key(j, "measured");
	json_number_or_null(j, a->measured);
	wt_json_key(j, "applied");
	wt_json_bool(j, a->applied);
	if (a->applied) {
		wt_json_key(j, "gain");
		wt_json_double_prec(j, a->gain, 6);
		wt_json_key(j, "mode_gains");
		wt_json_double_array(j, a->mg, (size_t)a->k, 4);
	}
	wt_json_key(j, "achieved");
	json_number_or_null(j, a->achieved);
	wt_json_key(j, "noise");
	json_number_or_null(j, a->noise);
}

static void ag_fail(struct wtd_ctl *ctl, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

static void ag_fail(struct wtd_ctl *ctl, const char *fmt, ...)
{
	struct wtd_ag *a = ctl->ag;
	va_list ap;

	wtd_capture_cancel(ctl->d, &a->c);
	va_start(ap, fmt);
	vsnprintf(a->error, sizeof(a->error), fmt, ap);
	va_end(ap);
	a->stage = AG_FAILED;
	wt_log_err(ctl->d->log, "autogain: %s", a->error);
	post_event(ctl, "autogain", body_autogain, NULL);
}

/* The first record is in: optimise; 0 or -1 (failed, reported). */
static int ag_optimise(struct wtd_ctl *ctl)
{
	struct wtd *d = ctl->d;
	struct wtd_ag *a = ctl->ag;
	const struct wtd_capture *c = &a->c;
	int seg = 256, i;
	long rows, t;
	bool closed = true;
	wt_modalgain_params p;
	wt_error err;
	double g0 = wt_config_double(d->cfg, WT_OPT_CONTROL_GAIN);

	a->state = c->states[0];
	for (t = 0; t < c->got; t++) {
		if (c->states[t] != c->states[0]) {
			ag_fail(ctl, "the loop changed state during the "
				     "record");
			return -1;
		}
		closed = closed && c->states[t] == WT_STATE_CLOSED;
	}
	if (a->state != WT_STATE_OPEN && a->state != WT_STATE_CLOSED &&
	    a->state != WT_STATE_HELD) {
		ag_fail(ctl, "the loop was %s", wt_state_name(a->state));
		return -1;
	}
	if (!ctl->R || ensure_svd(ctl, &err) < 0) {
		ag_fail(ctl, "the control matrix went away");
		return -1;
	}
	rows = c->got - a->delay;
	while (seg > WT_MODALGAIN_MIN_SEGMENT && seg > rows / 4) {
		seg /= 2;
	}
	a->psd = malloc(sizeof(double) * (size_t)seg);
	if (!a->psd) {
		ag_fail(ctl, "out of memory");
		return -1;
	}
	a->measured = NAN;
	if (closed) {
		/* What the loop achieved in the record, as measured. */
		modal_record(ctl, c, a->k, 0, false, a->y);
		a->measured = modal_variance(a->y, c->got, a->k);
	}
	modal_record(ctl, c, a->k, a->delay, true, a->y);
	wt_modalgain_params_default(&p);
	p.delay = a->delay;
	p.segment = seg;
	if (wt_modalgain_optimize(a->y, rows, a->k, NULL, &p, a->res, &err) <
	    0) {
		ag_fail(ctl, "%s", err.msg);
		return -1;
	}
	mode_gains(d->cfg, a->mg, a->k);
	a->pred_cur = a->pred_opt = 0;
	a->noise = 0;
	for (i = 0; i < a->k; i++) {
		a->noise += a->res[i].noise_var;
	}
	/* y = r + n with r independent of the current n (d >= 1): the
	 * residual is var(y) - noise_var, comparable with J. */
	a->measured -= a->noise;
	for (i = 0; i < a->k; i++) {
		a->cur[i] = g0 * a->mg[i];
		a->pred_opt += a->res[i].predicted;
		if (wt_modalgain_psd(a->y + i, rows, a->k, seg, a->psd, &err) <
		    0) {
			ag_fail(ctl, "%s", err.msg);
			return -1;
		}
		a->pred_cur += wt_modalgain_predict(a->psd, seg,
						    a->res[i].noise_var,
						    a->cur[i], a->delay);
	}
	return 0;
}

/* Install the chosen gains; 0 or -1 (failed, reported). */
static int ag_apply(struct wtd_ctl *ctl)
{
	struct wtd *d = ctl->d;
	struct wtd_ag *a = ctl->ag;
	double g0 = wt_config_double(d->cfg, WT_OPT_CONTROL_GAIN), gmax = 0;
	size_t cap = 24 * (size_t)a->k + 1, len = 0;
	char num[32], *text = malloc(cap);
	wt_error err;
	int i, rc;

	if (!text) {
		ag_fail(ctl, "out of memory");
		return -1;
	}
	for (i = 0; i < a->k; i++) {
		gmax = a->res[i].gain > gmax ? a->res[i].gain : gmax;
	}
	/* control.mode_gains are factors of control.gain, at most 2. */
	a->gain = g0 <= 0 || gmax > 2 * g0 ? gmax : g0;
	text[0] = '\0';
	for (i = 0; i < a->k; i++) {
		a->mg[i] = a->res[i].gain / a->gain;
		len += (size_t)snprintf(text + len, cap - len, "%s%.4f",
					i ? " " : "", a->mg[i]);
	}
	snprintf(num, sizeof(num), "%.6g", a->gain);
	rc = set_live(ctl, WT_OPT_CONTROL_MODE_GAINS, text, &err);
	if (rc == 0) {
		rc = set_live(ctl, WT_OPT_CONTROL_GAIN, num, &err);
	}
	free(text);
	if (rc < 0) {
		ag_fail(ctl, "applying: %s", err.msg);
		return -1;
	}
	a->applied = true;
	return 0;
}

static void ag_done(struct wtd_ctl *ctl)
{
	struct wtd_ag *a = ctl->ag;

	a->stage = AG_DONE;
	wt_log_notice(ctl->d->log,
		      "autogain: %d modes, predicted %.4g (current gains) -> "
		      "%.4g, measured %.4g, achieved %.4g",
		      a->k, a->pred_cur, a->pred_opt, a->measured,
		      a->achieved);
	post_event(ctl, "autogain", body_autogain, NULL);
}

/* One step of a running autogain (every turn of the control thread). */
static void autogain_step(struct wtd_ctl *ctl)
{
	struct wtd_ag *a = ctl->ag;
	wt_error err;
	bool full;
	long t;

	if (a->stage != AG_BEFORE && a->stage != AG_AFTER) {
		return;
	}
	wtd_capture_done(ctl->d, &a->c, &full);
	if (!full) {
		if (wt_clock_ns() > a->deadline) {
			ag_fail(ctl, "only %ld of %ld frames came in time",
				a->c.got, a->c.want);
		}
		return;
	}
	if (a->stage == AG_AFTER) {
		a->achieved = NAN;
		for (t = 0; t < a->c.got &&
			    a->c.states[t] == WT_STATE_CLOSED;
		     t++) {
		}
		if (t == a->c.got) {
			modal_record(ctl, &a->c, a->k, 0, false, a->y);
			a->achieved = modal_variance(a->y, a->c.got, a->k) -
				      a->noise;
		}
		ag_done(ctl);
		return;
	}
	if (ag_optimise(ctl) < 0) {
		return;
	}
	a->achieved = NAN;
	if (!a->apply) {
		ag_done(ctl);
		return;
	}
	if (ag_apply(ctl) < 0) {
		return;
	}
	a->stage = AG_AFTER;
	if (ag_capture(ctl, a, &err) < 0) {
		ag_fail(ctl, "%s", err.msg);
	}
}

static void do_autogain(struct wtd_ctl *ctl, const wt_request *req,
			struct outcome *o)
{
	struct wtd *d = ctl->d;
	struct wtd_ag *a = ctl->ag;
	size_t n = (size_t)req->frames;
	wt_error err;
	wt_json j;

	if (req->status) {
		result_begin(ctl, &j);
		wt_json_object_begin(&j);
		body_autogain(ctl, &j, NULL);
		wt_json_object_end(&j);
		result_end(ctl, &j, o);
		return;
	}
	if (a->stage == AG_BEFORE || a->stage == AG_AFTER) {
		fail(o, "an autogain is in progress (autogain status)");
		return;
	}
	if (!ctl->R || ctl->R_stale || ensure_svd(ctl, &err) < 0 ||
	    ctl->modes < 1) {
		fail(o, "no control matrix made from an interaction matrix: "
			"calibrate or load a calibration first");
		return;
	}
	if (req->apply && ctl->modes > WT_CONFIG_LIST_MAX) {
		fail(o, "%d modes: control.mode_gains holds at most %d",
		     ctl->modes, WT_CONFIG_LIST_MAX);
		return;
	}
	ag_free(a);
	a->k = ctl->modes;
	a->delay = (int)wt_config_int(d->cfg, WT_OPT_CONTROL_LOOP_DELAY);
	a->frames = req->frames;
	a->apply = req->apply;
	a->c.want = req->frames;
	a->c.slopes = malloc(sizeof(float) * n * (size_t)d->n_slopes);
	a->c.commands = malloc(sizeof(float) * n * (size_t)d->n_act);
	a->c.ids = malloc(sizeof(uint64_t) * n);
	a->c.states = malloc(sizeof(uint16_t) * n);
	a->y = malloc(sizeof(double) * n * (size_t)a->k);
	a->res = malloc(sizeof(*a->res) * (size_t)a->k);
	a->cur = malloc(sizeof(double) * (size_t)a->k);
	a->mg = malloc(sizeof(double) * (size_t)a->k);
	if (!a->c.slopes || !a->c.commands || !a->c.ids || !a->c.states ||
	    !a->y || !a->res || !a->cur || !a->mg) {
		ag_free(a);
		fail(o, "out of memory for %ld frames", req->frames);
		return;
	}
	if (ag_capture(ctl, a, &err) < 0) {
		ag_free(a);
		fail(o, "%s", err.msg);
		return;
	}
	a->stage = AG_BEFORE;
	result_begin(ctl, &j);
	wt_json_object_begin(&j);
	body_autogain(ctl, &j, NULL);
	wt_json_key(&j, "apply");
	wt_json_bool(&j, a->apply);
	wt_json_object_end(&j);
	result_end(ctl, &j, o);
}

/* One request: the reply text into ctl->reply; returns its length. */
static int handle(struct wtd_ctl *ctl, const char *line, size_t len,
		  bool writer)
{
	struct outcome o = {.ok = false};
	wt_request *req = malloc(sizeof(*req));
	wt_error err;
	int n;

	if (!req) {
		return wt_request_reply_error(ctl->reply, ctl->reply_cap,
					      "out of memory");
	}
	if (wt_request_parse(line, len, req, &err) < 0) {
		free(req);
		wt_log_debug(ctl->d->log, "request refused: %s", err.msg);
		return wt_request_reply_error(ctl->reply, ctl->reply_cap,
					      err.msg);
	}
	wt_log_debug(ctl->d->log, "request: %s",
		     wt_request_word_name(req->word));
	if (!writer && !read_only_word(req->word)) {
		atomic_fetch_add(&ctl->d->read_only_refused, 1);
		fail(&o, "read-only client");
		goto done;
	}
	switch (req->word) {
	case WT_REQ_STATUS:
		do_status(ctl, &o);
		break;
	case WT_REQ_PING:
		snprintf(ctl->result, ctl->result_cap, "\"pong\"");
		o.ok = true;
		break;
	case WT_REQ_OPEN:
		do_state(ctl, WT_STATE_OPEN, "open", &o);
		break;
	case WT_REQ_CLOSE:
		do_state(ctl, WT_STATE_CLOSED, "close", &o);
		break;
	case WT_REQ_HOLD:
		do_state(ctl, WT_STATE_HELD, "hold", &o);
		break;
	case WT_REQ_FLAT:
		do_flat(ctl, req->capture, &o);
		break;
	case WT_REQ_REFERENCE:
		do_calibrate(ctl, WT_CALIB_REFERENCE, req->frames, -1, &o);
		break;
	case WT_REQ_CALIBRATE:
		do_calibrate(ctl, WT_CALIB_MATRIX, 0, req->patterns, &o);
		break;
	case WT_REQ_SET:
		do_set(ctl, req, &o);
		break;
	case WT_REQ_GET:
		do_get(ctl, req, &o);
		break;
	case WT_REQ_CONFIG:
		do_config(ctl, &o);
		break;
	case WT_REQ_SAVE:
		do_save(ctl, req->path, &o);
		break;
	case WT_REQ_LOAD:
		do_load(ctl, req->path, &o);
		break;
	case WT_REQ_SHUTDOWN:
		snprintf(ctl->result, ctl->result_cap, "\"stopping\"");
		o.ok = true;
		ctl->shutdown = true;
		break;
	case WT_REQ_HELP:
		do_help(ctl, &o);
		break;
	case WT_REQ_RELOAD:
		do_reload(ctl, &o);
		break;
	case WT_REQ_OFFSET:
		do_offset(ctl, req, &o);
		break;
	case WT_REQ_SHAPE:
		do_shape(ctl, req, &o);
		break;
	case WT_REQ_RECORD:
		do_record(ctl, req, &o);
		break;
	case WT_REQ_AUTOGAIN:
		do_autogain(ctl, req, &o);
		break;
	default:
		fail(&o, "not implemented");
		break;
	}
done:
	free(req);
	if (!o.ok) {
		wt_log_info(ctl->d->log, "%.*s: %s", (int)(len < 60 ? len : 60),
			    line, o.error);
		return wt_request_reply_error(ctl->reply, ctl->reply_cap,
					      o.error);
	}
	n = wt_request_reply_ok(ctl->reply, ctl->reply_cap, ctl->result);
	return n;
}

void *wtd_control_main(void *arg)
{
	struct wtd *d = arg;
	struct wtd_ctl *ctl = d->ctl;
	zmq_pollitem_t item = {.socket = d->s_control, .events = ZMQ_POLLIN};

	while (!atomic_load(&d->stop)) {
		zmq_msg_t msg;
		int rc, n, more = 0;
		size_t more_len = sizeof(more);

		pick_up_calibration(ctl);
		if (atomic_exchange(&d->reload_requested, false)) {
			struct outcome ro = {.ok = false};

			wt_log_notice(d->log, "SIGHUP: reloading %s",
				      d->config_path ? d->config_path : "?");
			do_reload(ctl, &ro);
		}
		autogain_step(ctl);
		rc = zmq_poll(&item, 1, 20);
		if (rc < 0) {
			if (zmq_errno() == ETERM) {
				break;
			}
			continue;
		}
		if (rc == 0) {
			continue;
		}
		zmq_msg_init(&msg);
		if (zmq_msg_recv(&msg, d->s_control, ZMQ_DONTWAIT) < 0) {
			zmq_msg_close(&msg);
			continue;
		}
		zmq_getsockopt(d->s_control, ZMQ_RCVMORE, &more, &more_len);
		if (more) {
			/* Read the rest of a multi-part request, refuse it. */
			while (more) {
				zmq_msg_t part;

				zmq_msg_init(&part);
				zmq_msg_recv(&part, d->s_control, 0);
				zmq_msg_close(&part);
				more_len = sizeof(more);
				zmq_getsockopt(d->s_control, ZMQ_RCVMORE, &more,
					       &more_len);
			}
			n = wt_request_reply_error(ctl->reply, ctl->reply_cap,
						   "a request is one message "
						   "part");
		} else {
			/* A measurement that just finished is taken first, so
			 * a reply never shows it half done. */
			pick_up_calibration(ctl);
			n = handle(ctl, zmq_msg_data(&msg), zmq_msg_size(&msg),
				   sender_may_write(d, &msg));
		}
		zmq_msg_close(&msg);
		if (n < 0) {
			n = wt_request_reply_error(ctl->reply, ctl->reply_cap,
						   "reply too long");
		}
		while (zmq_send(d->s_control, ctl->reply,
				(size_t)(n > 0 ? n : 0), 0) < 0 &&
		       zmq_errno() == EINTR) {
		}
		if (ctl->shutdown) {
			wt_log_notice(d->log, "shutdown requested");
			atomic_store(&d->stop, true);
		}
	}
	/* The telemetry thread must not fill a capture that goes away. */
	wtd_capture_cancel(d, &ctl->ag->c);
	zmq_close(d->s_control);
	d->s_control = NULL;
	return NULL;
}

/* --- set-up --------------------------------------------------------------- */

int wtd_control_create(struct wtd *d, wt_calibration *initial,
		       const char *initial_file, wt_error *err)
{
	struct wtd_ctl *ctl = calloc(1, sizeof(*ctl));
	size_t nm = (size_t)d->n_slopes * (size_t)d->n_act;
	int rc;

	if (!ctl) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	d->ctl = ctl;
	ctl->d = d;
	rc = wt_config_create(&ctl->scratch, err);
	if (rc < 0) {
		return rc;
	}
	ctl->n_sv = d->n_slopes < d->n_act ? d->n_slopes : d->n_act;
	ctl->result_cap = 256 * 1024 + 32 * (size_t)ctl->n_sv;
	ctl->reply_cap = ctl->result_cap + 64;
	ctl->result = malloc(ctl->result_cap);
	ctl->reply = malloc(ctl->reply_cap);
	ctl->D = calloc(nm, sizeof(double));
	ctl->sv = calloc((size_t)ctl->n_sv, sizeof(double));
	ctl->norms = calloc((size_t)d->n_act, sizeof(double));
	ctl->ref = calloc((size_t)d->n_slopes, sizeof(float));
	ctl->flat = calloc((size_t)d->n_act, sizeof(float));
	ctl->ag = calloc(1, sizeof(*ctl->ag));
	if (!ctl->ag || !ctl->result || !ctl->reply || !ctl->D || !ctl->sv || !ctl->norms ||
	    !ctl->ref || !ctl->flat) {
		return wt_error_set(err, -ENOMEM,
				    "out of memory for a %d x %d "
				    "calibration",
				    d->n_slopes, d->n_act);
	}
	if (initial) {
		rc = adopt(ctl, initial, false, err);
		if (rc < 0) {
			return rc;
		}
		snprintf(ctl->file, sizeof(ctl->file), "%s",
			 initial_file ? initial_file : "");
	}
	wtd_loop_install_initial(d, ctl->R, ctl->modes, ctl->ref, ctl->flat);
	publish_slow(ctl);
	return 0;
}

void wtd_control_destroy(struct wtd *d)
{
	struct wtd_ctl *ctl = d->ctl;

	if (!ctl) {
		return;
	}
	wt_config_destroy(ctl->scratch);
	wt_svd_destroy(ctl->svd);
	free(ctl->result);
	free(ctl->reply);
	free(ctl->D);
	free(ctl->sv);
	free(ctl->norms);
	wt_calreport_destroy(ctl->report);
	free(ctl->R);
	free(ctl->ref);
	free(ctl->flat);
	free(ctl->offset);
	if (ctl->ag) {
		ag_free(ctl->ag);
		free(ctl->ag);
	}
	free(ctl);
	d->ctl = NULL;
}
