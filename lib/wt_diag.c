/* wt_diag.c - calibration report (see wt_diag.h). */
#include "wt_diag.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "wt_recon.h"

/* Least coverage of an actuator flagged displaced on its own. */
#define WT_DIAG_POSITION_COVERAGE 0.9

/* Passes of outlier rejection. */
#define FIT_PASSES 10
/* Template bins per lenslet pitch. */
#define BINS_PER_PITCH 4
/* Passes of the windowed centroid. */
#define CENTROID_PASSES 50

const char *wt_diag_flag_name(unsigned int flag)
{
	switch (flag) {
	case WT_DIAG_DEAD:
		return "dead";
	case WT_DIAG_WEAK:
		return "weak";
	case WT_DIAG_SWAPPED:
		return "swapped";
	case WT_DIAG_DISPLACED:
		return "displaced";
	case WT_DIAG_UNSEEN:
		return "unseen";
	}
	return "?";
}

void wt_diag_params_default(wt_diag_params *p)
{
	if (!p) {
		return;
	}
	p->dead_fraction = 0.1;
	p->weak_fraction = 0.5;
	p->interior_pitches = 1.5;
	p->min_coverage = 0.1;
	p->swap_tolerance = 0.5;
	p->shift_tolerance = 0.25;
	p->rotation_tolerance_deg = 1.0;
	p->matrix_noise = 0.0;
	p->floor_factor = 2.0;
	p->gap_ratio = 10.0;
	p->min_ratio = 1e-3;
}

static bool params_ok(const wt_diag_params *p)
{
	return p->dead_fraction >= 0 && p->weak_fraction >= p->dead_fraction &&
	       p->weak_fraction <= 1 && p->interior_pitches > 0 &&
	       isfinite(p->interior_pitches) && p->min_coverage >= 0 &&
	       p->min_coverage <= 1 && p->swap_tolerance > 0 &&
	       isfinite(p->swap_tolerance) && p->shift_tolerance >= 0 &&
	       p->rotation_tolerance_deg >= 0 && !isnan(p->matrix_noise) &&
	       p->floor_factor > 0 && isfinite(p->floor_factor) &&
	       p->gap_ratio > 1 && p->min_ratio >= 0 && p->min_ratio <= 1;
}

void wt_diag_report_destroy(wt_diag_report *r)
{
	if (!r) {
		return;
	}
	free(r->act);
	free(r->sv);
	free(r);
}

static int cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return (x > y) - (x < y);
}

/* Median of the n values v[idx[i]] (n >= 1); scratch holds n doubles. */
static double median_of(const double *v, const int *idx, int n, double *scratch)
{
	int i;

	for (i = 0; i < n; i++) {
		scratch[i] = v[idx[i]];
	}
	qsort(scratch, (size_t)n, sizeof(*scratch), cmp_double);
	return n % 2 ? scratch[n / 2]
		     : 0.5 * (scratch[n / 2 - 1] + scratch[n / 2]);
}

/* --- geometry ------------------------------------------------------------- */

/* The lenslet lattice: centre of cell (i, j) is (x0 + i h, y0 + j h). */
struct lattice {
	const wt_grid *g;
	double x0, y0, h;
};

static void lattice_init(struct lattice *lat, const wt_grid *g)
{
	lat->g = g;
	lat->h = g->pitch;
	lat->x0 = g->x[0] - g->col[0] * g->pitch;
	lat->y0 = g->y[0] - g->row[0] * g->pitch;
}

/* Every lattice cell whose centre is within radius of (px, py) is a valid
 * lenslet. */
static bool all_valid_within(const struct lattice *lat, double px, double py,
			     double radius)
{
	int n = lat->g->n;
	int i_lo = (int)floor((px - radius - lat->x0) / lat->h) - 1;
	int i_hi = (int)ceil((px + radius - lat->x0) / lat->h) + 1;
	int j_lo = (int)floor((py - radius - lat->y0) / lat->h) - 1;
	int j_hi = (int)ceil((py + radius - lat->y0) / lat->h) + 1;
	int i, j;

	for (j = j_lo; j <= j_hi; j++) {
		for (i = i_lo; i <= i_hi; i++) {
			double dx = lat->x0 + i * lat->h - px;
			double dy = lat->y0 + j * lat->h - py;

			if (dx * dx + dy * dy > radius * radius) {
				continue;
			}
			if (i < 0 || i >= n || j < 0 || j >= n ||
			    lat->g->index[j * n + i] < 0) {
				return false;
			}
		}
	}
	return true;
}

/*
 * Windowed centroid of the weights wl (one per valid lenslet): start at
 * (sx, sy), or at the lenslet of largest weight when sx is NaN, then take
 * the weighted mean of the lenslets within radius of the last estimate
 * until it moves by less than 1e-9 radius (at most CENTROID_PASSES).  The
 * window keeps the noise of the far lenslets out: without it, noise
 * spread over the whole pupil drags a small edge response towards the
 * pupil's centre.  Returns false when the window holds no weight.
 */
static bool windowed_centroid(const wt_grid *L, const double *wl, double radius,
			      double sx, double sy, double *cx, double *cy)
{
	double x = sx, y = sy;
	int l, pass;

	if (isnan(sx)) {
		double best = -1;

		for (l = 0; l < L->n_valid; l++) {
			if (wl[l] > best) {
				best = wl[l];
				x = L->x[l];
				y = L->y[l];
			}
		}
	}
	for (pass = 0; pass < CENTROID_PASSES; pass++) {
		double s = 0, swx = 0, swy = 0, nx, ny;

		for (l = 0; l < L->n_valid; l++) {
			double dx = L->x[l] - x, dy = L->y[l] - y;

			if (dx * dx + dy * dy > radius * radius) {
				continue;
			}
			s += wl[l];
			swx += wl[l] * L->x[l];
			swy += wl[l] * L->y[l];
		}
		if (!(s > 0)) {
			return false;
		}
		nx = swx / s;
		ny = swy / s;
		if (hypot(nx - x, ny - y) < 1e-9 * radius) {
			x = nx;
			y = ny;
			break;
		}
		x = nx;
		y = ny;
	}
	*cx = x;
	*cy = y;
	return true;
}

/* --- rigid fit c = R(theta) p + t ----------------------------------------- */

struct rigid {
	double theta, tx, ty;
};

static void rigid_apply(const struct rigid *t, double px, double py, double *qx,
			double *qy)
{
	double c = cos(t->theta), s = sin(t->theta);

	*qx = c * px - s * py + t->tx;
	*qy = s * px + c * py + t->ty;
}

/* Least squares over the n points idx of (px, py) -> (cx, cy): orthogonal
 * Procrustes in 2-D (Schoenemann 1966).  n >= 1; one point gives a pure
 * shift. */
static void rigid_fit(const double *px, const double *py, const double *cx,
		      const double *cy, const int *idx, int n,
		      struct rigid *out)
{
	double pmx = 0, pmy = 0, cmx = 0, cmy = 0, sdot = 0, scross = 0;
	double c, s;
	int i;

	for (i = 0; i < n; i++) {
		pmx += px[idx[i]];
		pmy += py[idx[i]];
		cmx += cx[idx[i]];
		cmy += cy[idx[i]];
	}
	pmx /= n;
	pmy /= n;
	cmx /= n;
	cmy /= n;
	for (i = 0; i < n; i++) {
		double ax = px[idx[i]] - pmx, ay = py[idx[i]] - pmy;
		double bx = cx[idx[i]] - cmx, by = cy[idx[i]] - cmy;

		sdot += ax * bx + ay * by;
		scross += ax * by - ay * bx;
	}
	out->theta = (sdot == 0 && scross == 0) ? 0.0 : atan2(scross, sdot);
	c = cos(out->theta);
	s = sin(out->theta);
	out->tx = cmx - (c * pmx - s * pmy);
	out->ty = cmy - (s * pmx + c * pmy);
}

/* --- radial template of one whole response -------------------------------- */

struct template
{
	int nb;	       /* bins */
	double hb;     /* bin width */
	double radius; /* W = 0 beyond */
	double *w;     /* nb values */
};

static double template_eval(const struct template *t, double r)
{
	double u;
	int b;

	if (r >= t->radius) {
		return 0.0;
	}
	u = r / t->hb - 0.5;
	if (u <= 0) {
		return t->w[0];
	}
	b = (int)u;
	if (b >= t->nb - 1) {
		return t->w[t->nb - 1];
	}
	return t->w[b] + (u - b) * (t->w[b + 1] - t->w[b]);
}

/* Average normalised weight against distance from the centroid, over the
 * actuators idx; empty bins are interpolated.  Returns false when no bin
 * got a sample. */
static bool template_build(struct template *t, const double *D, int n_act,
			   const wt_grid *L, const double *norm,
			   const double *cx, const double *cy, const int *idx,
			   int n_idx, int *count)
{
	int N = L->n_valid;
	int b, i, l, last;

	memset(t->w, 0, (size_t)t->nb * sizeof(*t->w));
	memset(count, 0, (size_t)t->nb * sizeof(*count));
	for (i = 0; i < n_idx; i++) {
		int k = idx[i];
		double s2 = norm[k] * norm[k];

		for (l = 0; l < N; l++) {
			double dx = L->x[l] - cx[k], dy = L->y[l] - cy[k];
			double r = sqrt(dx * dx + dy * dy);
			double vx = D[(size_t)l * n_act + k];
			double vy = D[(size_t)(N + l) * n_act + k];

			if (r >= t->radius) {
				continue;
			}
			b = (int)(r / t->hb);
			if (b >= t->nb) {
				continue;
			}
			t->w[b] += (vx * vx + vy * vy) / s2;
			count[b]++;
		}
	}
	last = -1;
	for (b = 0; b < t->nb; b++) {
		if (!count[b]) {
			continue;
		}
		t->w[b] /= count[b];
		if (last < 0) {
			for (i = 0; i < b; i++) {
				t->w[i] = t->w[b];
			}
		} else {
			for (i = last + 1; i < b; i++) {
				t->w[i] = t->w[last] + (t->w[b] - t->w[last]) *
							       (i - last) /
							       (b - last);
			}
		}
		last = b;
	}
	if (last < 0) {
		return false;
	}
	for (i = last + 1; i < t->nb; i++) {
		t->w[i] = t->w[last];
	}
	return true;
}

/* Expected centroid (windowed as the measured one) and coverage of a whole
 * response centred at (qx, qy); wl is scratch for one weight per valid
 * lenslet. */
static void template_expect(const struct template *t, const struct lattice *lat,
			    double qx, double qy, double *wl, double *ex,
			    double *ey, double *coverage)
{
	const wt_grid *L = lat->g;
	double sw = 0, sall = 0;
	int i_lo = (int)floor((qx - t->radius - lat->x0) / lat->h) - 1;
	int i_hi = (int)ceil((qx + t->radius - lat->x0) / lat->h) + 1;
	int j_lo = (int)floor((qy - t->radius - lat->y0) / lat->h) - 1;
	int j_hi = (int)ceil((qy + t->radius - lat->y0) / lat->h) + 1;
	int i, j, l;

	for (l = 0; l < L->n_valid; l++) {
		double dx = L->x[l] - qx, dy = L->y[l] - qy;

		wl[l] = template_eval(t, sqrt(dx * dx + dy * dy));
		sw += wl[l];
	}
	for (j = j_lo; j <= j_hi; j++) {
		for (i = i_lo; i <= i_hi; i++) {
			double dx = lat->x0 + i * lat->h - qx;
			double dy = lat->y0 + j * lat->h - qy;

			sall += template_eval(t, sqrt(dx * dx + dy * dy));
		}
	}
	if (sw > 0 && sall > 0 &&
	    windowed_centroid(L, wl, t->radius, NAN, NAN, ex, ey)) {
		*coverage = fmin(1.0, sw / sall);
	} else {
		*ex = qx;
		*ey = qy;
		*coverage = 0.0;
	}
}

/* --- spectrum ------------------------------------------------------------- */

int wt_diag_recommend_modes(const double *sv, int count, int m, int n,
			    const wt_diag_params *p, int *modes,
			    double *floor_out, char *reason, size_t reason_len)
{
	wt_diag_params def;
	double best = 0;
	int i, k, at = -1;

	if (!p) {
		wt_diag_params_default(&def);
		p = &def;
	}
	if (!sv || !modes || count < 1 || m < 1 || n < 1 || !params_ok(p)) {
		return -EINVAL;
	}
	if (floor_out) {
		*floor_out = 0;
	}
	if (p->matrix_noise > 0 && isfinite(p->matrix_noise)) {
		double fl = p->floor_factor * p->matrix_noise *
			    (sqrt((double)m) + sqrt((double)n));

		for (k = 0; k < count && sv[k] > fl; k++) {
		}
		*modes = k;
		if (floor_out) {
			*floor_out = fl;
		}
		if (reason) {
			snprintf(reason, reason_len,
				 "noise floor: %d of %d singular values exceed "
				 "%g x matrix noise %.3g x (sqrt(%d) + "
				 "sqrt(%d)) = %.3g",
				 k, count, p->floor_factor, p->matrix_noise, m,
				 n, fl);
		}
		return 0;
	}
	for (i = 0; i + 1 < count; i++) {
		double r;

		if (!(sv[i] > 0)) {
			break;
		}
		r = sv[i + 1] > 0 ? sv[i] / sv[i + 1] : INFINITY;
		if (r > best) {
			best = r;
			at = i;
		}
	}
	if (at >= 0 && best >= p->gap_ratio) {
		*modes = at + 1;
		if (reason) {
			snprintf(reason, reason_len,
				 "largest gap: sigma_%d / sigma_%d = %.3g >= "
				 "%g (matrix noise unknown)",
				 at + 1, at + 2, best, p->gap_ratio);
		}
		return 0;
	}
	k = 0;
	if (sv[0] > 0) {
		for (k = 0; k < count && sv[k] / sv[0] >= p->min_ratio; k++) {
		}
	}
	*modes = k;
	if (reason) {
		snprintf(reason, reason_len,
			 "ratio: %d of %d singular values have sigma_i / "
			 "sigma_1 >= %g (matrix noise unknown, largest gap "
			 "%.3g < %g)",
			 k, count, p->min_ratio, best, p->gap_ratio);
	}
	return 0;
}

double wt_diag_matrix_noise(double slope_noise, double amplitude,
			    int frames_per_sign, int patterns)
{
	if (!(slope_noise >= 0) || !isfinite(slope_noise) || !(amplitude > 0) ||
	    !isfinite(amplitude) || frames_per_sign < 1 || patterns < 1) {
		return NAN;
	}
	/* (s+ - s-) / (2a) of means of f frames: s sqrt(2 / f) / (2a);
	 * decoding averages `patterns` such values (wt_hadamard.h). */
	return slope_noise /
	       (amplitude * sqrt(2.0 * frames_per_sign * (double)patterns));
}

/* --- the report ----------------------------------------------------------- */

struct work {
	double *cx, *cy, *px, *py, *norms, *scratch, *wl;
	int *idx, *cand, *tmp, *count;
	struct template tpl;
};

static void work_free(struct work *w)
{
	free(w->cx);
	free(w->cy);
	free(w->px);
	free(w->py);
	free(w->norms);
	free(w->tmp);
	free(w->scratch);
	free(w->wl);
	free(w->idx);
	free(w->cand);
	free(w->count);
	free(w->tpl.w);
}

static int work_alloc(struct work *w, int n, int n_lens, int nb)
{
	size_t sz = (size_t)n;

	memset(w, 0, sizeof(*w));
	w->cx = malloc(sz * sizeof(double));
	w->cy = malloc(sz * sizeof(double));
	w->px = malloc(sz * sizeof(double));
	w->py = malloc(sz * sizeof(double));
	w->norms = malloc(sz * sizeof(double));
	w->tmp = malloc(sz * sizeof(int));
	w->scratch = malloc(sz * sizeof(double));
	w->wl = malloc((size_t)n_lens * sizeof(double));
	w->idx = malloc(sz * sizeof(int));
	w->cand = malloc(sz * sizeof(int));
	w->count = malloc((size_t)nb * sizeof(int));
	w->tpl.w = malloc((size_t)nb * sizeof(double));
	w->tpl.nb = nb;
	if (!w->cx || !w->cy || !w->px || !w->py || !w->norms || !w->tmp ||
	    !w->scratch || !w->wl || !w->idx || !w->cand || !w->count ||
	    !w->tpl.w) {
		return -ENOMEM;
	}
	return 0;
}

/* Fit over the candidates, dropping those farther than tol from their
 * fitted position, until the inlier set is stable.  Inliers end in w->idx;
 * returns their count (0 if fewer than one candidate remains). */
static int robust_fit(struct work *w, int n_cand, double tol, struct rigid *t)
{
	int n_in = n_cand, pass, i;

	memcpy(w->idx, w->cand, (size_t)n_cand * sizeof(int));
	t->theta = t->tx = t->ty = 0;
	for (pass = 0; pass < FIT_PASSES && n_in > 0; pass++) {
		int n_new = 0;
		bool same = true;

		rigid_fit(w->px, w->py, w->cx, w->cy, w->idx, n_in, t);
		for (i = 0; i < n_cand; i++) {
			int k = w->cand[i];
			double qx, qy;

			rigid_apply(t, w->px[k], w->py[k], &qx, &qy);
			if (hypot(w->cx[k] - qx, w->cy[k] - qy) <= tol) {
				if (n_new >= n_in || w->idx[n_new] != k) {
					same = false;
				}
				w->tmp[n_new++] = k;
			}
		}
		if (n_new != n_in) {
			same = false;
		}
		for (i = 0; i < n_new; i++) {
			w->idx[i] = w->tmp[i];
		}
		n_in = n_new;
		if (same) {
			break;
		}
	}
	if (n_in > 0) {
		rigid_fit(w->px, w->py, w->cx, w->cy, w->idx, n_in, t);
	}
	return n_in;
}

int wt_diag_compute(const double *D, const wt_grid *lenslets,
		    const wt_grid *actuators, const wt_diag_params *p,
		    wt_diag_report **out, wt_error *err)
{
	wt_diag_params def;
	wt_diag_report *r = NULL;
	wt_svd *svd = NULL;
	struct work w;
	struct lattice lat;
	struct rigid fit = {0, 0, 0};
	double hl, ha, reach, tol;
	int N, m, n, k, l, i, n_int = 0, n_cand = 0, n_in = 0, ret;

	if (out) {
		*out = NULL;
	}
	if (!p) {
		wt_diag_params_default(&def);
		p = &def;
	}
	if (!D || !lenslets || !actuators || !out) {
		return wt_error_set(err, -EINVAL, "diag: NULL argument");
	}
	if (!params_ok(p)) {
		return wt_error_set(err, -EINVAL,
				    "diag: thresholds out of range");
	}
	N = lenslets->n_valid;
	m = 2 * N;
	n = actuators->n_valid;
	hl = lenslets->pitch;
	ha = actuators->pitch;
	if (N < 1 || n < 1 || !(hl > 0) || !(ha > 0)) {
		return wt_error_set(err, -EINVAL, "diag: empty grid");
	}
	for (i = 0; i < m; i++) {
		for (k = 0; k < n; k++) {
			if (!isfinite(D[(size_t)i * n + k])) {
				return wt_error_set(err, -EINVAL,
						    "diag: D(%d, %d) is not "
						    "finite",
						    i, k);
			}
		}
	}
	reach = p->interior_pitches * ha;
	tol = p->swap_tolerance * ha;

	if (work_alloc(&w, n, N, (int)ceil(reach / hl * BINS_PER_PITCH) + 1)) {
		work_free(&w);
		return wt_error_set(err, -ENOMEM, "diag: out of memory");
	}
	w.tpl.hb = hl / BINS_PER_PITCH;
	w.tpl.radius = reach;
	r = calloc(1, sizeof(*r));
	if (r) {
		r->act = calloc((size_t)n, sizeof(*r->act));
	}
	if (!r || !r->act) {
		ret = wt_error_set(err, -ENOMEM, "diag: out of memory");
		goto fail;
	}
	r->n_act = n;
	r->n_slopes = m;
	lattice_init(&lat, lenslets);

	/* Norms and (windowed) centroids. */
	for (k = 0; k < n; k++) {
		wt_diag_actuator *a = &r->act[k];
		double s = 0;

		for (l = 0; l < N; l++) {
			double vx = D[(size_t)l * n + k];
			double vy = D[(size_t)(N + l) * n + k];

			w.wl[l] = vx * vx + vy * vy;
			s += w.wl[l];
		}
		a->norm = sqrt(s);
		if (!(s > 0) || !windowed_centroid(lenslets, w.wl, reach, NAN,
						   NAN, &a->cx, &a->cy)) {
			a->cx = NAN;
			a->cy = NAN;
		}
		a->partner = -1;
		a->offset_pitches = NAN;
		a->interior = all_valid_within(&lat, actuators->x[k],
					       actuators->y[k], reach);
		w.cx[k] = a->cx;
		w.cy[k] = a->cy;
		w.px[k] = actuators->x[k];
		w.py[k] = actuators->y[k];
		if (a->interior) {
			w.idx[n_int++] = k;
		}
	}

	/* Reference norm and the healthy interior candidates. */
	{
		double *norms = w.norms;
		double med;

		for (k = 0; k < n; k++) {
			norms[k] = r->act[k].norm;
		}
		if (n_int > 0) {
			med = median_of(norms, w.idx, n_int, w.scratch);
		} else {
			for (k = 0; k < n; k++) {
				w.idx[k] = k;
			}
			med = median_of(norms, w.idx, n, w.scratch);
		}
		for (i = 0; i < n_int; i++) {
			k = w.idx[i];
			if (med > 0 &&
			    r->act[k].norm >= p->weak_fraction * med) {
				w.cand[n_cand++] = k;
			}
		}
		r->reference_norm = med;
	}

	/* Misregistration: robust rigid fit, then the template from the
	 * inliers. */
	if (n_cand > 0) {
		n_in = robust_fit(&w, n_cand, tol, &fit);
	}
	if (n_in > 0) {
		double *norms = w.norms;

		r->have_template =
			template_build(&w.tpl, D, n, lenslets, norms, w.cx,
				       w.cy, w.idx, n_in, w.count);
		r->reference_norm = median_of(norms, w.idx, n_in, w.scratch);
	}
	r->n_fit = n_in;
	r->shift_x = fit.tx / hl;
	r->shift_y = fit.ty / hl;
	r->rotation_deg = fit.theta * 180.0 / M_PI;
	if (n_in > 0) {
		double ss = 0;

		for (i = 0; i < n_in; i++) {
			double qx, qy;

			k = w.idx[i];
			rigid_apply(&fit, w.px[k], w.py[k], &qx, &qy);
			ss += (w.cx[k] - qx) * (w.cx[k] - qx) +
			      (w.cy[k] - qy) * (w.cy[k] - qy);
			r->act[k].in_fit = true;
		}
		r->fit_rms = sqrt(ss / n_in) / hl;
	}
	r->misregistered =
		n_in >= 3 &&
		(hypot(r->shift_x, r->shift_y) > p->shift_tolerance ||
		 fabs(r->rotation_deg) > p->rotation_tolerance_deg);

	/* Expectations and per-actuator flags.  A sensor coarser than the
	 * actuator grid cannot place one actuator's response to better than
	 * about a lenslet: no position test there. */
	r->position_checked = hl <= ha * (1 + 1e-9);
	for (k = 0; k < n; k++) {
		wt_diag_actuator *a = &r->act[k];
		double qx, qy;

		rigid_apply(&fit, w.px[k], w.py[k], &qx, &qy);
		if (r->have_template) {
			template_expect(&w.tpl, &lat, qx, qy, w.wl, &a->ex,
					&a->ey, &a->coverage);
		} else {
			a->ex = qx;
			a->ey = qy;
			a->coverage = 1.0;
		}
		a->expected_norm = r->reference_norm * sqrt(a->coverage);
		if (a->coverage < p->min_coverage &&
		    a->norm < p->weak_fraction * r->reference_norm) {
			a->flags |= WT_DIAG_UNSEEN;
			r->n_unseen++;
			continue;
		}
		if (a->coverage >= p->min_coverage) {
			if (a->norm < p->dead_fraction * a->expected_norm ||
			    a->norm == 0) {
				a->flags |= WT_DIAG_DEAD;
				r->n_dead++;
				continue;
			}
			if (a->norm < p->weak_fraction * a->expected_norm) {
				a->flags |= WT_DIAG_WEAK;
				r->n_weak++;
			}
		}
		if (r->position_checked) {
			a->offset_pitches =
				hypot(a->cx - a->ex, a->cy - a->ey) / ha;
		}
	}

	/* Swapped pairs among the displaced. */
	for (k = 0; k < n; k++) {
		wt_diag_actuator *a = &r->act[k];
		double best = INFINITY;
		int b, pick = -1;

		if (!(a->offset_pitches > p->swap_tolerance) ||
		    a->partner >= 0) {
			continue;
		}
		for (b = k + 1; b < n; b++) {
			wt_diag_actuator *o = &r->act[b];
			double d;

			if (!(o->offset_pitches > p->swap_tolerance) ||
			    o->partner >= 0) {
				continue;
			}
			d = fmax(hypot(a->cx - o->ex, a->cy - o->ey),
				 hypot(o->cx - a->ex, o->cy - a->ey));
			if (d < best) {
				best = d;
				pick = b;
			}
		}
		if (pick >= 0 && best <= tol) {
			a->partner = pick;
			r->act[pick].partner = k;
			a->flags |= WT_DIAG_SWAPPED;
			r->act[pick].flags |= WT_DIAG_SWAPPED;
			r->n_swapped += 2;
		}
	}
	for (k = 0; k < n; k++) {
		wt_diag_actuator *a = &r->act[k];

		/* A response the pupil's edge cuts (coverage under
		 * WT_DIAG_POSITION_COVERAGE) is placed only to about half a
		 * pitch (its centroid moves inward by an amount the template
		 * predicts roughly): alone, its offset is no evidence. */
		if (a->offset_pitches > p->swap_tolerance && a->partner < 0 &&
		    a->coverage >= WT_DIAG_POSITION_COVERAGE) {
			a->flags |= WT_DIAG_DISPLACED;
			r->n_displaced++;
		}
	}

	/* Spectrum. */
	ret = wt_svd_compute(D, m, n, &svd, err);
	if (ret < 0) {
		goto fail;
	}
	r->n_sv = wt_svd_count(svd);
	r->sv = malloc((size_t)r->n_sv * sizeof(*r->sv));
	if (!r->sv) {
		ret = wt_error_set(err, -ENOMEM, "diag: out of memory");
		goto fail;
	}
	memcpy(r->sv, wt_svd_values(svd), (size_t)r->n_sv * sizeof(*r->sv));
	ret = wt_diag_recommend_modes(r->sv, r->n_sv, m, n, p, &r->modes,
				      &r->sv_floor, r->modes_reason,
				      sizeof(r->modes_reason));
	if (ret < 0) {
		wt_error_set(err, ret, "diag: no mode recommendation");
		goto fail;
	}
	wt_svd_destroy(svd);
	work_free(&w);
	*out = r;
	wt_error_clear(err);
	return 0;

fail:
	wt_svd_destroy(svd);
	work_free(&w);
	wt_diag_report_destroy(r);
	return ret;
}

/* --- measurement noise ---------------------------------------------------- */

int wt_diag_noise(const float *frames, int n_frames, int n_slopes,
		  enum wt_diag_noise_method method, double *rms,
		  double *rms_all)
{
	double total = 0;
	int used = 0, i, f;

	if (!frames || !rms || n_frames < 2 || n_slopes < 1 ||
	    (method != WT_DIAG_NOISE_SAMPLE && method != WT_DIAG_NOISE_DIFF)) {
		return -EINVAL;
	}
	for (i = 0; i < n_slopes; i++) {
		double var = NAN;
		long cnt = 0;

		if (method == WT_DIAG_NOISE_SAMPLE) {
			/* Welford's update: no cancellation for a large mean
			 * (Welford 1962, Technometrics 4, 419). */
			double mean = 0, m2 = 0;

			for (f = 0; f < n_frames; f++) {
				double v = frames[(size_t)f * n_slopes + i];
				double d;

				if (!isfinite(v)) {
					continue;
				}
				cnt++;
				d = v - mean;
				mean += d / cnt;
				m2 += d * (v - mean);
			}
			if (cnt >= 2) {
				var = m2 / (cnt - 1);
			}
		} else {
			double ss = 0;

			for (f = 1; f < n_frames; f++) {
				double a =
					frames[(size_t)(f - 1) * n_slopes + i];
				double b = frames[(size_t)f * n_slopes + i];

				if (!isfinite(a) || !isfinite(b)) {
					continue;
				}
				ss += (b - a) * (b - a);
				cnt++;
			}
			if (cnt >= 1) {
				var = ss / (2.0 * cnt);
			}
		}
		rms[i] = sqrt(var);
		if (!isnan(var)) {
			total += var;
			used++;
		}
	}
	if (rms_all) {
		*rms_all = used ? sqrt(total / used) : NAN;
	}
	return 0;
}
