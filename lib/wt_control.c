/*
 * wt_control.c - leaky integrator with the mirror's safety limits.
 */
#include "wt_control.h"
#include "wt_mvm.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* Largest n_act * n_slopes accepted (a 1 GiB float matrix). */
#define WT_CONTROL_MAX_ELEMENTS ((size_t)1 << 28)

struct wt_control {
	int n_act;
	int n_slopes;
	const float *matrix; /* n_act x n_slopes, the caller's; may be NULL */
	wt_mvm_split *split; /* the caller's; NULL: one CPU */
	float gain;
	float leak;
	float max_step; /* > 0: slew limit on */
	float *cmd;	/* n_act: integrator state = command sent */
	float *next;	/* n_act: scratch for u, then the new command */
	float *lo, *hi; /* n_act each */
	long rejected;
};

int wt_control_create(int n_act, int n_slopes, wt_control **out, wt_error *err)
{
	wt_control *c;
	int a;

	if (out) {
		*out = NULL;
	}
	if (!out) {
		return wt_error_set(err, -EINVAL, "control: NULL result");
	}
	if (n_act < 1 || n_slopes < 1) {
		return wt_error_set(err, -EINVAL,
				    "control: %d actuators and %d slopes, "
				    "needs at least 1 of each",
				    n_act, n_slopes);
	}
	if ((size_t)n_act * (size_t)n_slopes > WT_CONTROL_MAX_ELEMENTS) {
		return wt_error_set(err, -EINVAL,
				    "control: %d x %d matrix is too large",
				    n_act, n_slopes);
	}
	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(err, -ENOMEM, "control: out of memory");
	}
	c->n_act = n_act;
	c->n_slopes = n_slopes;
	c->cmd = calloc((size_t)n_act, sizeof(*c->cmd));
	c->next = calloc((size_t)n_act, sizeof(*c->next));
	c->lo = malloc((size_t)n_act * sizeof(*c->lo));
	c->hi = malloc((size_t)n_act * sizeof(*c->hi));
	if (!c->cmd || !c->next || !c->lo || !c->hi) {
		wt_control_destroy(c);
		return wt_error_set(err, -ENOMEM, "control: out of memory");
	}
	for (a = 0; a < n_act; a++) {
		c->lo[a] = -1.0f;
		c->hi[a] = 1.0f;
	}
	*out = c;
	wt_error_clear(err);
	return 0;
}

void wt_control_destroy(wt_control *c)
{
	if (!c) {
		return;
	}
	free(c->cmd);
	free(c->next);
	free(c->lo);
	free(c->hi);
	free(c);
}

const float *wt_control_swap_matrix(wt_control *c, const float *R)
{
	const float *old = c->matrix;

	c->matrix = R;
	return old;
}

int wt_control_set_split(wt_control *c, wt_mvm_split *sp)
{
	if (!c) {
		return -EINVAL;
	}
	if (sp && (wt_mvm_split_rows(sp) != c->n_act ||
		   wt_mvm_split_cols(sp) != c->n_slopes)) {
		return -EINVAL;
	}
	c->split = sp;
	return 0;
}

void wt_control_set_gain(wt_control *c, float gain)
{
	c->gain = gain;
}

void wt_control_set_leak(wt_control *c, float leak)
{
	c->leak = leak;
}

int wt_control_set_limits(wt_control *c, const float *lo, const float *hi)
{
	int a;

	if (!c || !lo || !hi) {
		return -EINVAL;
	}
	for (a = 0; a < c->n_act; a++) {
		if (isnan(lo[a]) || isnan(hi[a]) || lo[a] > hi[a]) {
			return -EINVAL;
		}
	}
	memcpy(c->lo, lo, (size_t)c->n_act * sizeof(*lo));
	memcpy(c->hi, hi, (size_t)c->n_act * sizeof(*hi));
	return 0;
}

void wt_control_set_slew(wt_control *c, float max_step)
{
	/* NaN compares false: off */
	c->max_step = max_step > 0.0f ? max_step : 0.0f;
}

static inline float wt_clamp(float v, float lo, float hi)
{
	if (v < lo) {
		return lo;
	}
	if (v > hi) {
		return hi;
	}
	return v;
}

void wt_control_reset(wt_control *c, const float *cmd)
{
	int a;

	for (a = 0; a < c->n_act; a++) {
		float v = cmd && isfinite(cmd[a]) ? cmd[a] : 0.0f;

		c->cmd[a] = wt_clamp(v, c->lo[a], c->hi[a]);
	}
}

/* A float times 0 is 0 unless it is NaN or Inf, which give NaN; summing
 * the products keeps the loop branch-free. */
static int wt_all_finite(const float *v, int n)
{
	float acc = 0.0f;
	int k;

	for (k = 0; k < n; k++) {
		acc += v[k] * 0.0f;
	}
	return acc == 0.0f;
}

int wt_control_step(wt_control *c, const float *s, float *cmd,
		    wt_control_stats *st)
{
	int n_act, n_clipped = 0, n_slewed = 0, a, ret = 0;
	float *next, keep;

	if (!c || !s) {
		return -EINVAL;
	}
	keep = 1.0f - c->leak;
	n_act = c->n_act;
	next = c->next;

	/* Everything is computed in `next` first, so that a rejected update
	 * leaves the state untouched. */
	if (!wt_all_finite(s, c->n_slopes)) {
		ret = -ERANGE;
		goto out;
	}
	if (c->matrix && c->split) {
		wt_mvm_split_apply(c->split, c->matrix, s, next);
	} else if (c->matrix) {
		wt_mvm_own(c->matrix, s, next, n_act, c->n_slopes);
	} else {
		memset(next, 0, (size_t)n_act * sizeof(*next));
	}
	for (a = 0; a < n_act; a++) {
		next[a] = keep * c->cmd[a] - c->gain * next[a];
	}
	if (!wt_all_finite(next, n_act)) {
		ret = -ERANGE;
		goto out;
	}

	for (a = 0; a < n_act; a++) {
		float v = wt_clamp(next[a], c->lo[a], c->hi[a]);
		int clipped = v != next[a];

		if (c->max_step > 0.0f) {
			float w = wt_clamp(v, c->cmd[a] - c->max_step,
					   c->cmd[a] + c->max_step);

			if (w != v) {
				n_slewed++;
				/* only differs when the limits moved past
				 * the previous command */
				v = wt_clamp(w, c->lo[a], c->hi[a]);
				clipped |= v != w;
			}
		}
		n_clipped += clipped;
		c->cmd[a] = v;
	}

out:
	if (ret < 0) {
		c->rejected++;
	}
	if (cmd) {
		memcpy(cmd, c->cmd, (size_t)n_act * sizeof(*cmd));
	}
	if (st) {
		st->n_clipped = n_clipped;
		st->n_slewed = n_slewed;
		st->rejected = c->rejected;
	}
	return ret;
}

const float *wt_control_command(const wt_control *c)
{
	return c->cmd;
}
