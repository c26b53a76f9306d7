/* wt_calib.c - calibration state machine (see wt_calib.h). */
#include "wt_calib.h"

#include "wt_hadamard.h"

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
	double *acc;		/* n_slopes: running mean of the pattern */
	double *m2;		/* n_slopes: its sum of squared deviations */
	int *cnt;		/* n_subaps: frames it was valid in */
	double *pool;		/* n_slopes: m2 pooled over the patterns */
	long *pool_dof;		/* n_subaps: sum of (cnt - 1) pooled */
	int order;		/* Hadamard order N */
	double *M;		/* n_slopes x N: Hadamard measurements */
	double *work;		/* N: decoding scratch */
	unsigned char *row_lost; /* n_subaps: a Hadamard pattern missed it */
	double *plus;		/* n_slopes: average of the push */
	unsigned char *plus_ok; /* n_subaps: the push had valid frames */
	double *D;		/* n_slopes x n_act */
	double *ref;		/* n_slopes */
	bool have_matrix, have_ref, have_noise;
	wt_calib_params matrix_p; /* of the last matrix run */
	/* position in the run */
	bool started; /* the first frame was seen */
	int pattern;  /* current pattern index */
	int n_patterns;
	int seen;  /* frames of this pattern seen */
	int n_acc; /* frames of this pattern accumulated */
	long done, total, skipped, missing;
};

const char *wt_calib_patterns_name(int patterns)
{
	switch (patterns) {
	case WT_CALIB_SINGLE:
		return "single";
	case WT_CALIB_HADAMARD:
		return "hadamard";
	}
	return "?";
}

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
	c->order = wt_hadamard_order(n_act);
	if (c->order < 1) {
		free(c);
		return wt_error_set(err, -EINVAL,
				    "calibration: too many actuators (%d)",
				    n_act);
	}
	c->flat = calloc((size_t)n_act, sizeof(*c->flat));
	c->cnt = calloc((size_t)c->n_subaps, sizeof(*c->cnt));
	c->plus_ok = calloc((size_t)c->n_subaps, sizeof(*c->plus_ok));
	c->acc = calloc((size_t)n_slopes, sizeof(*c->acc));
	c->plus = calloc((size_t)n_slopes, sizeof(*c->plus));
	c->ref = calloc((size_t)n_slopes, sizeof(*c->ref));
	c->D = calloc((size_t)n_slopes * (size_t)n_act, sizeof(*c->D));
	c->m2 = calloc((size_t)n_slopes, sizeof(*c->m2));
	c->pool = calloc((size_t)n_slopes, sizeof(*c->pool));
	c->pool_dof = calloc((size_t)c->n_subaps, sizeof(*c->pool_dof));
	c->M = calloc((size_t)n_slopes * (size_t)c->order, sizeof(*c->M));
	c->work = calloc((size_t)c->order, sizeof(*c->work));
	c->row_lost = calloc((size_t)c->n_subaps, sizeof(*c->row_lost));
	if (!c->flat || !c->acc || !c->plus || !c->ref || !c->D || !c->cnt ||
	    !c->plus_ok || !c->m2 || !c->pool || !c->pool_dof || !c->M ||
	    !c->work || !c->row_lost) {
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
	free(c->m2);
	free(c->pool);
	free(c->pool_dof);
	free(c->M);
	free(c->work);
	free(c->row_lost);
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
		if (p->patterns != WT_CALIB_SINGLE &&
		    p->patterns != WT_CALIB_HADAMARD) {
			return wt_error_set(err, -EINVAL,
					    "calibration: unknown patterns %d",
					    p->patterns);
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
	if (p->patterns == WT_CALIB_HADAMARD) {
		int order = wt_hadamard_order(n_act);

		if (order < 1) {
			return -EINVAL;
		}
		return 1 + 2L * order * ((long)p->settle + p->average);
	}
	return 1 + 2L * n_act * ((long)p->settle + p->average);
}

/* Empty the accumulators of the current pattern. */
static void reset_pattern(wt_calib *c)
{
	memset(c->acc, 0, (size_t)c->n_slopes * sizeof(*c->acc));
	memset(c->m2, 0, (size_t)c->n_slopes * sizeof(*c->m2));
	memset(c->cnt, 0, (size_t)c->n_subaps * sizeof(*c->cnt));
	c->n_acc = 0;
	c->seen = 0;
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
					"%g] (%s patterns)",
					j, (double)flat[j], p->amplitude,
					(double)lo[j], (double)hi[j],
					wt_calib_patterns_name(p->patterns));
			}
		}
	}
	memcpy(c->flat, flat, (size_t)c->n_act * sizeof(*flat));
	c->p = *p;
	c->kind = kind;
	c->started = false;
	c->pattern = 0;
	c->n_patterns = kind == WT_CALIB_REFERENCE	     ? 1
			: p->patterns == WT_CALIB_HADAMARD ? 2 * c->order
							   : 2 * c->n_act;
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
		c->have_noise = false;
		c->matrix_p = *p;
		memset(c->pool, 0, (size_t)c->n_slopes * sizeof(*c->pool));
		memset(c->pool_dof, 0,
		       (size_t)c->n_subaps * sizeof(*c->pool_dof));
		memset(c->row_lost, 0,
		       (size_t)c->n_subaps * sizeof(*c->row_lost));
	}
	reset_pattern(c);
	return 0;
}

/* Actuator j at flat + a (sign > 0) or flat - a, as sent: float. */
static float poked(const wt_calib *c, int j, int sign)
{
	double a = sign > 0 ? c->p.amplitude : -c->p.amplitude;

	return (float)((double)c->flat[j] + a);
}

/* The command of state k: flat, flat +- a on one actuator (single), or
 * flat +- a h_(k/2) (Hadamard); even k push, odd k pull. */
static void pattern_command(const wt_calib *c, int k, float *cmd)
{
	int sign = k % 2 == 0 ? 1 : -1, j;

	memcpy(cmd, c->flat, (size_t)c->n_act * sizeof(*cmd));
	if (c->kind != WT_CALIB_MATRIX || k >= c->n_patterns) {
		return;
	}
	if (c->p.patterns == WT_CALIB_HADAMARD) {
		for (j = 0; j < c->n_act; j++) {
			cmd[j] = poked(c, j, sign * wt_hadamard_sign(k / 2, j));
		}
		return;
	}
	cmd[k / 2] = poked(c, k / 2, sign);
}

/* Pool the spread of the pattern just finished (matrix runs). */
static void pool_pattern(wt_calib *c)
{
	int n = c->n_subaps, i;

	for (i = 0; i < n; i++) {
		if (c->cnt[i] < 2) {
			continue;
		}
		c->pool[i] += c->m2[i];
		c->pool[n + i] += c->m2[n + i];
		c->pool_dof[i] += c->cnt[i] - 1;
	}
}

/* Hadamard pull k finished: column k / 2 of M, (s+ - s-) / (2 a). */
static void finish_hadamard(wt_calib *c, int k)
{
	int n = c->n_subaps, p = k / 2, i;
	size_t N = (size_t)c->order;
	double a2 = 2 * c->p.amplitude;

	for (i = 0; i < n; i++) {
		double *mx = &c->M[(size_t)i * N + p];
		double *my = &c->M[(size_t)(n + i) * N + p];

		if (c->plus_ok[i] && c->cnt[i] > 0) {
			*mx = (c->plus[i] - c->acc[i]) / a2;
			*my = (c->plus[n + i] - c->acc[n + i]) / a2;
		} else {
			*mx = 0;
			*my = 0;
			c->row_lost[i] = 1;
		}
	}
}

/*
 * Every Hadamard pattern measured: D = M H_n / N, then column j scaled by
 * 2a / (the amplitude actually sent to j, float-rounded flat +- a), and the
 * rows of subapertures some pattern missed cleared.
 */
static void decode_hadamard(wt_calib *c)
{
	int n = c->n_subaps, na = c->n_act, i, j;

	wt_hadamard_decode(c->M, c->n_slopes, na, c->D, c->work);
	for (j = 0; j < na; j++) {
		double sent = (double)poked(c, j, 1) - (double)poked(c, j, -1);
		double scale = 2 * c->p.amplitude / sent;

		for (i = 0; i < c->n_slopes; i++) {
			c->D[(size_t)i * (size_t)na + j] *= scale;
		}
	}
	for (i = 0; i < n; i++) {
		if (!c->row_lost[i]) {
			continue;
		}
		memset(&c->D[(size_t)i * (size_t)na], 0,
		       (size_t)na * sizeof(*c->D));
		memset(&c->D[(size_t)(n + i) * (size_t)na], 0,
		       (size_t)na * sizeof(*c->D));
		c->missing += na;
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
				c->ref[i] = c->acc[i];
				c->ref[n + i] = c->acc[n + i];
			} else {
				c->ref[i] = 0;
				c->ref[n + i] = 0;
				c->missing++;
			}
		}
		return;
	}
	pool_pattern(c);
	if (k % 2 == 0) {
		for (i = 0; i < n; i++) {
			c->plus_ok[i] = c->cnt[i] > 0;
			if (c->cnt[i] > 0) {
				c->plus[i] = c->acc[i];
				c->plus[n + i] = c->acc[n + i];
			}
		}
		return;
	}
	if (c->p.patterns == WT_CALIB_HADAMARD) {
		finish_hadamard(c, k);
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
				*dx = (c->plus[i] - c->acc[i]) / a2;
				*dy = (c->plus[n + i] - c->acc[n + i]) / a2;
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
			int h;

			if (valid && !valid[i]) {
				continue;
			}
			c->cnt[i]++;
			/* Welford's running mean and squared deviations
			 * (Welford 1962, Technometrics 4, 419). */
			for (h = i; h < c->n_slopes; h += n) {
				double dv = slopes[h] - c->acc[h];

				c->acc[h] += dv / c->cnt[i];
				c->m2[h] += dv * (slopes[h] - c->acc[h]);
			}
		}
		c->n_acc++;
	}
	if (c->n_acc == (c->kind == WT_CALIB_REFERENCE ? c->p.reference_frames
						       : c->p.average)) {
		finish_pattern(c, c->pattern);
		reset_pattern(c);
		c->pattern++;
		if (c->pattern == c->n_patterns) {
			if (c->kind == WT_CALIB_REFERENCE) {
				c->have_ref = true;
			} else {
				if (c->p.patterns == WT_CALIB_HADAMARD) {
					decode_hadamard(c);
				}
				c->have_matrix = true;
				c->have_noise = true;
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

int wt_calib_noise(const wt_calib *c, double *rms, double *rms_all)
{
	int n, i, have = 0;
	double sum = 0;

	if (!c || !rms) {
		return -EINVAL;
	}
	if (!c->have_noise) {
		return -ENODATA;
	}
	n = c->n_subaps;
	for (i = 0; i < c->n_slopes; i++) {
		long dof = c->pool_dof[i % n];

		if (dof < 1) {
			rms[i] = NAN;
			continue;
		}
		rms[i] = sqrt(c->pool[i] / (double)dof);
		sum += rms[i] * rms[i];
		have++;
	}
	if (have == 0) {
		return -ENODATA;
	}
	if (rms_all) {
		*rms_all = sqrt(sum / have);
	}
	return 0;
}

int wt_calib_matrix_params(const wt_calib *c, wt_calib_params *p)
{
	if (!c || !p || !c->have_matrix) {
		return -ENODATA;
	}
	*p = c->matrix_p;
	return 0;
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
