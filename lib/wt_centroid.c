/* wt_centroid.c - thresholded centre of gravity per subaperture. */
#include "wt_centroid.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>

/* Columns summed side by side: a block of this many columns has a constant
 * trip count, so gcc vectorises it even with -O2's cheap cost model. */
#define WT_CENTROID_BLOCK 8

/* Largest frame side n * p accepted. */
#define WT_CENTROID_MAX_SIDE 65535

struct wt_centroider {
	int n_valid;	  /* windows */
	int p;		  /* window side in pixels */
	size_t stride;	  /* frame row length in pixels, n * p */
	size_t *start;	  /* n_valid: offset of each window's first pixel */
	float background; /* subtracted from every pixel */
	float threshold;  /* subtracted after the background */
	float min_flux;	  /* window flux below this is invalid */
};

static int wt_levels_ok(float background, float threshold, float min_flux)
{
	return isfinite(background) && isfinite(threshold) &&
	       isfinite(min_flux) && threshold >= 0.0f && min_flux >= 0.0f;
}

int wt_centroid_create(const wt_grid *lenslets, const wt_centroid_params *p,
		       wt_centroider **out, wt_error *err)
{
	wt_centroider *c;
	int k;

	if (!out) {
		return wt_error_set(err, -EINVAL,
				    "centroid: no output pointer");
	}
	*out = NULL;
	if (!lenslets || !p) {
		return wt_error_set(err, -EINVAL,
				    "centroid: no lenslet grid or parameters");
	}
	if (lenslets->n < 1 || lenslets->n_valid < 1 || !lenslets->col ||
	    !lenslets->row) {
		return wt_error_set(err, -EINVAL,
				    "centroid: the lenslet grid has no valid "
				    "subaperture");
	}
	if (p->pixels_per_lenslet < 2 ||
	    p->pixels_per_lenslet > WT_CENTROID_MAX_PIXELS) {
		return wt_error_set(
			err, -EINVAL,
			"centroid: pixels_per_lenslet %d is outside "
			"2..%d",
			p->pixels_per_lenslet, WT_CENTROID_MAX_PIXELS);
	}
	if ((long)lenslets->n * p->pixels_per_lenslet > WT_CENTROID_MAX_SIDE) {
		return wt_error_set(err, -EINVAL,
				    "centroid: frame side %d x %d pixels "
				    "exceeds %d",
				    lenslets->n, p->pixels_per_lenslet,
				    WT_CENTROID_MAX_SIDE);
	}
	if (!wt_levels_ok(p->background, p->threshold, p->min_flux)) {
		return wt_error_set(
			err, -EINVAL,
			"centroid: levels must be finite with "
			"threshold >= 0 and min_flux >= 0 "
			"(background %g, threshold %g, min_flux %g)",
			(double)p->background, (double)p->threshold,
			(double)p->min_flux);
	}
	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(err, -ENOMEM, "centroid: out of memory");
	}
	c->start = malloc((size_t)lenslets->n_valid * sizeof(*c->start));
	if (!c->start) {
		free(c);
		return wt_error_set(err, -ENOMEM,
				    "centroid: out of memory for %d windows",
				    lenslets->n_valid);
	}
	c->n_valid = lenslets->n_valid;
	c->p = p->pixels_per_lenslet;
	c->stride = (size_t)lenslets->n * (size_t)c->p;
	for (k = 0; k < c->n_valid; k++) {
		int i = lenslets->col[k], j = lenslets->row[k];

		if (i < 0 || i >= lenslets->n || j < 0 || j >= lenslets->n) {
			wt_centroid_destroy(c);
			return wt_error_set(err, -EINVAL,
					    "centroid: valid point %d at (%d, "
					    "%d) is outside the %d x %d grid",
					    k, i, j, lenslets->n, lenslets->n);
		}
		c->start[k] = (size_t)j * (size_t)c->p * c->stride +
			      (size_t)i * (size_t)c->p;
	}
	c->background = p->background;
	c->threshold = p->threshold;
	c->min_flux = p->min_flux;
	*out = c;
	return 0;
}

void wt_centroid_destroy(wt_centroider *c)
{
	if (!c) {
		return;
	}
	free(c->start);
	free(c);
}

int wt_centroid_set_levels(wt_centroider *c, float background, float threshold,
			   float min_flux)
{
	if (!c || !wt_levels_ok(background, threshold, min_flux)) {
		return -EINVAL;
	}
	c->background = background;
	c->threshold = threshold;
	c->min_flux = min_flux;
	return 0;
}

/*
 * Sums of one window in a single pass over its pixels.  The window is
 * walked in blocks of WT_CENTROID_BLOCK columns; inside a block each column
 * keeps its own running sum of w and of w * row in a small fixed-size array
 * that lives in vector registers, so the row loop is a plain element-wise
 * update (no reduction across columns, no reassociation of float sums)
 * that gcc vectorises at -O2.  The column sums are folded into flux,
 * sum w * i and sum w * j once per block.  Columns left over at the right
 * (p not a multiple of the block) take the same path one at a time.
 */
static void wt_window_sums(const uint16_t *win, size_t stride, int p,
			   float level, float *sum, float *sum_x, float *sum_y)
{
	float s = 0.0f, sx = 0.0f, sy = 0.0f;
	int c0, r, q;

	for (c0 = 0; c0 + WT_CENTROID_BLOCK <= p; c0 += WT_CENTROID_BLOCK) {
		float col_w[WT_CENTROID_BLOCK] = {0.0f};
		float col_wy[WT_CENTROID_BLOCK] = {0.0f};

		for (r = 0; r < p; r++) {
			const uint16_t *px = win + (size_t)r * stride + c0;
			float fr = (float)r;

			for (q = 0; q < WT_CENTROID_BLOCK; q++) {
				float v = (float)px[q] - level;

				v = v > 0.0f ? v : 0.0f;
				col_w[q] += v;
				col_wy[q] += v * fr;
			}
		}
		for (q = 0; q < WT_CENTROID_BLOCK; q++) {
			s += col_w[q];
			sx += col_w[q] * (float)(c0 + q);
			sy += col_wy[q];
		}
	}
	for (; c0 < p; c0++) {
		float col_w = 0.0f, col_wy = 0.0f;

		for (r = 0; r < p; r++) {
			float v = (float)win[(size_t)r * stride + c0] - level;

			v = v > 0.0f ? v : 0.0f;
			col_w += v;
			col_wy += v * (float)r;
		}
		s += col_w;
		sx += col_w * (float)c0;
		sy += col_wy;
	}
	*sum = s;
	*sum_x = sx;
	*sum_y = sy;
}

int wt_centroid_frame(const wt_centroider *c, const uint16_t *frame,
		      float *slopes, float *flux, uint8_t *valid)
{
	float level, centre;
	int k, n, n_invalid = 0;

	if (!c || !frame || !slopes) {
		return -EINVAL;
	}
	n = c->n_valid;
	level = c->background + c->threshold;
	centre = 0.5f * (float)(c->p - 1);
	for (k = 0; k < n; k++) {
		float s, sx, sy;
		int ok;

		wt_window_sums(frame + c->start[k], c->stride, c->p, level, &s,
			       &sx, &sy);
		ok = s > 0.0f && s >= c->min_flux;
		if (ok) {
			slopes[k] = sx / s - centre;
			slopes[n + k] = sy / s - centre;
		} else {
			slopes[k] = 0.0f;
			slopes[n + k] = 0.0f;
			n_invalid++;
		}
		if (flux) {
			flux[k] = s;
		}
		if (valid) {
			valid[k] = (uint8_t)ok;
		}
	}
	return n_invalid;
}

int wt_centroid_saturated(const wt_centroider *c, const uint16_t *frame,
			  uint16_t full_scale, uint8_t *valid)
{
	int k, r, q, n = 0;

	if (!c || !frame || !valid) {
		return -EINVAL;
	}
	for (k = 0; k < c->n_valid; k++) {
		const uint16_t *win = frame + c->start[k];
		int hit = 0;

		for (r = 0; r < c->p && !hit; r++) {
			const uint16_t *px = win + (size_t)r * c->stride;

			for (q = 0; q < c->p; q++) {
				hit |= px[q] >= full_scale;
			}
		}
		if (hit) {
			valid[k] = 0;
			n++;
		}
	}
	return n;
}
