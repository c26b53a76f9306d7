/* wt_calib.c - calibration state machine (see wt_calib.h). */
#include "wt_calib.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* Sizes beyond which the matrix alone would not fit in memory anyway. */
#define MAX_SIZE     (1 << 20)
#define MAX_ELEMENTS ((size_t)1 << 31)

struct wt_calib {
	int n_act, n_slopes, n_subaps;
	enum wt_calib_kind kind; /* run in progress */
	wt_calib_params p;
	float *flat;		/* n_act */
	double *acc;		/* n_slopes: sum of the current pattern */
	int *cnt;		/* n_subaps: frames it was valid in */
	double *plus;		/* n_slopes: average of the push */
	unsigned char *plus_ok; /* n_subaps: the push had valid frames */
	double *D;		/* n_slopes x n_act */
	double *ref;		/* n_slopes */
	bool have_matrix, have_ref;
	/* position in the run */
	bool started; /* the first frame was seen */
	int pattern;  /* current pattern index */
	int n_patterns;
	int seen;  /* frames of this pattern seen */
	int n_acc; /* frames of this pattern accumulated */
	long done, total, skipped, missing;
};

const char *wt_calib_kind_name(enum wt_calib_kind kind)
{
	switch (kind) {
	case WT_CALIB_NONE:
		return "none";
	case WT_CALIB_REFERENCE:
		return "reference";
	case WT_CALIB_MATRIX:
		return "matrix";
	}
	return "?";
}

int wt_calib_create(int n_act, int n_slopes, wt_calib **out, wt_error *err)
{
	wt_calib *c;

	if (!out || n_act < 1 || n_slopes < 2 || n_slopes % 2 != 0 ||
	    n_act > MAX_SIZE || n_slopes > MAX_SIZE ||
	    (size_t)n_act * (size_t)n_slopes > MAX_ELEMENTS) {
		return wt_error_set(err, -EINVAL,
				    "calibration: bad sizes %d actuators x %d "
				    "slopes (an even number)",
				    n_act, n_slopes);
	}
	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(err, -ENOMEM, "calibration: out of memory");
	}
	c->n_act = n_act;
	c->n_slopes = n_slopes;
	c->n_subaps = n_slopes / 2;
	c->flat = calloc((size_t)n_act, sizeof(*c->flat));
	c->cnt = calloc((size_t)c->n_subaps, sizeof(*c->cnt));
	c->plus_ok = calloc((size_t)c->n_subaps, sizeof(*c->plus_ok));
	c->acc = calloc((size_t)n_slopes, sizeof(*c->acc));
	c->plus = calloc((size_t)n_slopes, sizeof(*c->plus));
	c->ref = calloc((size_t)n_slopes, sizeof(*c->ref));
	c->D = calloc((size_t)n_slopes * (size_t)n_act, sizeof(*c->D));
	if (!c->flat || !c->acc || !c->plus || !c->ref || !c->D || !c->cnt ||
	    !c->plus_ok) {
		wt_calib_destroy(c);
		return wt_error_set(err, -ENOMEM,
				    "calibration: out of memory for a %d x %d "
				    "interaction matrix",
				    n_slopes, n_act);
	}
	*out = c;
	return 0;
}

void wt_calib_destroy(wt_calib *c)
{
	if (!c) {
		return;
	}
	free(c->flat);
	free(c->cnt);
	free(c->plus_ok);
	free(c->acc);
	free(c->plus);
	free(c->ref);
	free(c->D);
	free(c);
}

static int check_params(enum wt_calib_kind kind, const wt_calib_params *p,
			wt_error *err)
{
	if (!p) {
		return wt_error_set(err, -EINVAL, "calibration: no parameters");
	}
	if (kind != WT_CALIB_REFERENCE && kind != WT_CALIB_MATRIX) {
		return wt_error_set(err, -EINVAL,
				    "calibration: unknown kind %d", (int)kind);
	}
	if (p->settle < 0 || p->settle > 1000000) {
		return wt_error_set(err, -EINVAL,
				    "calibration: settle %d out of range",
				    p->settle);
	}
	if (kind == WT_CALIB_REFERENCE &&
	    (p->reference_frames < 1 || p->reference_frames > 100000000)) {
		return wt_error_set(err, -EINVAL,
				    "calibration: reference_frames %d out of "
				    "range",
				    p->reference_frames);
	}
	if (kind == WT_CALIB_MATRIX) {
		if (p->average < 1 || p->average > 1000000) {
			return wt_error_set(err, -EINVAL,
					    "calibration: average %d out of "
					    "range",
					    p->average);
		}
		if (!(p->amplitude > 0) || !isfinite(p->amplitude)) {
			return wt_error_set(err, -EINVAL,
					    "calibration: amplitude must be a "
					    "positive number");
		}
	}
	return 0;
}

long wt_calib_frames(enum wt_calib_kind kind, const wt_calib_params *p,
		     int n_act)
{
	if (check_params(kind, p, NULL) < 0 || n_act < 1) {
		return -EINVAL;
	}
	if (kind == WT_CALIB_REFERENCE) {
		return 1 + (long)p->settle + p->reference_frames;
	}
	return 1 + 2L * n_act * ((long)p->settle + p->average);
}

int wt_calib_start(wt_calib *c, enum wt_calib_kind kind,
		   const wt_calib_params *p, const float *flat, const float *lo,
		   const float *hi, wt_error *err)
{
	int rc, j;

	if (!c || !flat) {
		return wt_error_set(err, -EINVAL, "calibration: no flat");
	}
	if (c->kind != WT_CALIB_NONE) {
		return wt_error_set(err, -EBUSY,
				    "calibration: a %s run is in progress",
				    wt_calib_kind_name(c->kind));
	}
	rc = check_params(kind, p, err);
	if (rc < 0) {
		return rc;
	}
	for (j = 0; j < c->n_act; j++) {
		if (!isfinite(flat[j])) {
			return wt_error_set(err, -EINVAL,
					    "calibration: flat of actuator %d "
					    "is not finite",
					    j);
		}
	}
	if (kind == WT_CALIB_MATRIX && lo && hi) {
		for (j = 0; j < c->n_act; j++) {
			/* As sent: rounded to float. */
			float up = (float)((double)flat[j] + p->amplitude);
			float down = (float)((double)flat[j] - p->amplitude);

			if (up > hi[j] || down < lo[j]) {
				return wt_error_set(
					err, -ERANGE,
					"calibration: actuator %d: flat %g +- "
					"amplitude %g leaves the limits [%g, "
					"%g]",
					j, (double)flat[j], p->amplitude,
					(double)lo[j], (double)hi[j]);
			}
		}
	}
	memcpy(c->flat, flat, (size_t)c->n_act * sizeof(*flat));
	c->p = *p;
	c->kind = kind;
	c->started = false;
	c->pattern = 0;
	c->n_patterns = kind == WT_CALIB_REFERENCE ? 1 : 2 * c->n_act;
	c->seen = 0;
	c->n_acc = 0;
	c->done = 0;
	c->skipped = 0;
	c->missing = 0;
	c->total = wt_calib_frames(kind, p, c->n_act);
	if (kind == WT_CALIB_REFERENCE) {
		c->have_ref = false;
	} else {
		c->have_matrix = false;
	}
	memset(c->acc, 0, (size_t)c->n_slopes * sizeof(*c->acc));
	memset(c->cnt, 0, (size_t)c->n_subaps * sizeof(*c->cnt));
	return 0;
}

/* The command of pattern k: flat, or flat +- a on one actuator. */
static void pattern_command(const wt_calib *c, int k, float *cmd)
{
	memcpy(cmd, c->flat, (size_t)c->n_act * sizeof(*cmd));
	if (c->kind == WT_CALIB_MATRIX && k < c->n_patterns) {
		int j = k / 2;
		double a = (k % 2 == 0) ? c->p.amplitude : -c->p.amplitude;

		cmd[j] = (float)((double)c->flat[j] + a);
	}
}

/*
 * Pattern k is complete: each subaperture's average is acc / cnt over the
 * frames it was valid in.  Store what the pattern gives.
 */
static void finish_pattern(wt_calib *c, int k)
{
	int n = c->n_subaps, i;

	if (c->kind == WT_CALIB_REFERENCE) {
		for (i = 0; i < n; i++) {
			if (c->cnt[i] > 0) {
				c->ref[i] = c->acc[i] / c->cnt[i];
				c->ref[n + i] = c->acc[n + i] / c->cnt[i];
			} else {
				c->ref[i] = 0;
				c->ref[n + i] = 0;
				c->missing++;
			}
		}
		return;
	}
	if (k % 2 == 0) {
		for (i = 0; i < n; i++) {
			c->plus_ok[i] = c->cnt[i] > 0;
			if (c->cnt[i] > 0) {
				c->plus[i] = c->acc[i] / c->cnt[i];
				c->plus[n + i] = c->acc[n + i] / c->cnt[i];
			}
		}
		return;
	}
	{
		/* Column j = (s+ - s-) / (2 a), with the amplitude actually
		 * sent: the float-rounded flat +- a. */
		int j = k / 2;
		double a2 =
			(double)(float)((double)c->flat[j] + c->p.amplitude) -
			(double)(float)((double)c->flat[j] - c->p.amplitude);
		size_t na = (size_t)c->n_act;

		for (i = 0; i < n; i++) {
			double *dx = &c->D[(size_t)i * na + j];
			double *dy = &c->D[(size_t)(n + i) * na + j];

			if (c->plus_ok[i] && c->cnt[i] > 0) {
				*dx = (c->plus[i] - c->acc[i] / c->cnt[i]) / a2;
				*dy = (c->plus[n + i] -
				       c->acc[n + i] / c->cnt[i]) /
				      a2;
			} else {
				/* No valid frame in the push or the pull:
				 * no measurement, no response. */
				*dx = 0;
				*dy = 0;
				c->missing++;
			}
		}
	}
}

int wt_calib_step(wt_calib *c, const float *slopes, const uint8_t *valid,
		  float *cmd)
{
	int i, n;

	if (!c || !slopes || !cmd || c->kind == WT_CALIB_NONE) {
		return -EINVAL;
	}
	n = c->n_subaps;
	if (!c->started) {
		c->started = true;
		c->done++;
		pattern_command(c, 0, cmd);
		return WT_CALIB_RUNNING;
	}
	for (i = 0; i < c->n_slopes; i++) {
		if (!isfinite(slopes[i])) {
			c->skipped++;
			pattern_command(c, c->pattern, cmd);
			return WT_CALIB_RUNNING;
		}
	}
	c->done++;
	c->seen++;
	if (c->seen > c->p.settle) {
		for (i = 0; i < n; i++) {
			if (valid && !valid[i]) {
				continue;
			}
			c->acc[i] += slopes[i];
			c->acc[n + i] += slopes[n + i];
			c->cnt[i]++;
		}
		c->n_acc++;
	}
	if (c->n_acc == (c->kind == WT_CALIB_REFERENCE ? c->p.reference_frames
						       : c->p.average)) {
		finish_pattern(c, c->pattern);
		memset(c->acc, 0, (size_t)c->n_slopes * sizeof(*c->acc));
		memset(c->cnt, 0, (size_t)n * sizeof(*c->cnt));
		c->n_acc = 0;
		c->seen = 0;
		c->pattern++;
		if (c->pattern == c->n_patterns) {
			if (c->kind == WT_CALIB_REFERENCE) {
				c->have_ref = true;
			} else {
				c->have_matrix = true;
			}
			c->kind = WT_CALIB_NONE;
			memcpy(cmd, c->flat, (size_t)c->n_act * sizeof(*cmd));
			return WT_CALIB_DONE;
		}
	}
	pattern_command(c, c->pattern, cmd);
	return WT_CALIB_RUNNING;
}

void wt_calib_abort(wt_calib *c)
{
	if (c) {
		c->kind = WT_CALIB_NONE;
	}
}

enum wt_calib_kind wt_calib_running(const wt_calib *c)
{
	return c ? c->kind : WT_CALIB_NONE;
}

void wt_calib_progress(const wt_calib *c, long *done, long *total)
{
	if (done) {
		*done = c ? c->done : 0;
	}
	if (total) {
		*total = c ? c->total : 0;
	}
}

long wt_calib_skipped(const wt_calib *c)
{
	return c ? c->skipped : 0;
}

long wt_calib_missing(const wt_calib *c)
{
	return c ? c->missing : 0;
}

bool wt_calib_has_result(const wt_calib *c, enum wt_calib_kind kind)
{
	if (!c) {
		return false;
	}
	return kind == WT_CALIB_MATRIX	    ? c->have_matrix
	       : kind == WT_CALIB_REFERENCE ? c->have_ref
					    : false;
}

const double *wt_calib_interaction(const wt_calib *c)
{
	return c && c->have_matrix ? c->D : NULL;
}

const double *wt_calib_reference(const wt_calib *c)
{
	return c && c->have_ref ? c->ref : NULL;
}

int wt_calib_n_act(const wt_calib *c)
{
	return c ? c->n_act : -EINVAL;
}

int wt_calib_n_slopes(const wt_calib *c)
{
	return c ? c->n_slopes : -EINVAL;
}

int wt_calib_response_norms(const double *D, int m, int n, double *norm)
{
	int i, j;

	if (!D || !norm || m < 1 || n < 1) {
		return -EINVAL;
	}
	for (j = 0; j < n; j++) {
		/* Scaled sum of squares: no overflow for huge entries. */
		double scale = 0, ssq = 1;

		for (i = 0; i < m; i++) {
			double v = fabs(D[(size_t)i * n + j]);

			if (v == 0) {
				continue;
			}
			if (scale < v) {
				ssq = 1 + ssq * (scale / v) * (scale / v);
				scale = v;
			} else {
				ssq += (v / scale) * (v / scale);
			}
		}
		norm[j] = scale * sqrt(ssq);
	}
	return 0;
}
