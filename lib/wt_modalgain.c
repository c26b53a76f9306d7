/* wt_modalgain.c - modal gain optimisation (see wt_modalgain.h). */
#include "wt_modalgain.h"

#include <errno.h>
#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

/* The impulse response of N is summed until its last d + 1 terms carry
 * less than this share of the sum, or this many terms. */
#define NOISE_GAIN_TOL	     1e-17
#define NOISE_GAIN_MAX_TERMS 50000000L

void wt_modalgain_params_default(wt_modalgain_params *p)
{
	if (!p) {
		return;
	}
	p->delay = 2;
	p->segment = 256;
	p->gain_min = 0.01;
	p->gain_step = 0.01;
	p->gain_max = 0;
	p->stability_margin = 0.95;
	p->plateau_fraction = 0.2;
}

static bool delay_ok(int delay)
{
	return delay >= 1 && delay <= WT_MODALGAIN_MAX_DELAY;
}

static bool segment_ok(int segment)
{
	return segment >= WT_MODALGAIN_MIN_SEGMENT &&
	       segment <= WT_MODALGAIN_MAX_SEGMENT &&
	       (segment & (segment - 1)) == 0;
}

double wt_modalgain_stability_limit(int delay)
{
	if (!delay_ok(delay)) {
		return NAN;
	}
	return 2.0 * sin(M_PI / (2.0 * (2 * delay - 1)));
}

/* |E|^2 and |N|^2 at angular frequency w from the precomputed
 * a = 1 - exp(-i w) and b = exp(-i w d): E = a / (a + g b),
 * N = -g b / (a + g b). */
static void transfer2(double g, double ar, double ai, double br, double bi,
		      double *e2, double *n2)
{
	double dr = ar + g * br, di = ai + g * bi;
	double den = dr * dr + di * di;

	*e2 = (ar * ar + ai * ai) / den;
	if (n2) {
		*n2 = g * g * (br * br + bi * bi) / den;
	}
}

/* |E|^2 at bin k of L. */
static double e2_at(double g, int delay, int k, int L)
{
	double w = 2.0 * M_PI * k / L, e2;

	transfer2(g, 1.0 - cos(w), sin(w), cos(w * delay), -sin(w * delay), &e2,
		  NULL);
	return e2;
}

/*
 * Weight of bin k from |E|^2 at bins k - 1, k, k + 1.  The expected Welch
 * estimate is the PSD smoothed by the Hann window's spectral kernel, whose
 * samples on the bins are (1/6, 2/3, 1/6) and whose second moment is 1/3
 * bin^2 (Harris 1978).  Summing |E|^2 against the smoothed PSD adds about
 * (1/6) sum S d2(|E|^2), which for a disturbance concentrated at low
 * frequency (|E|^2 ~ (2 pi f / g)^2) overstates the residual by
 * (2 pi / g)^2 var / (3 L^2).  Weights w = |E|^2 - (1/6) d2(|E|^2) undo
 * the smoothing to second order (the kernel applied to w gives back
 * |E|^2 up to a fourth difference).  Their sum equals that of |E|^2, so
 * the white-noise part is unchanged.
 */
static double weight_of(double em, double e0, double ep)
{
	return e0 - (ep - 2.0 * e0 + em) / 6.0;
}

int wt_modalgain_transfer(double gain, int delay, double f, double rej[2],
			  double noise[2])
{
	double w = 2.0 * M_PI * f;
	double ar, ai, br, bi, dr, di, den;

	if (!delay_ok(delay) || !isfinite(gain) || !isfinite(f)) {
		return -EINVAL;
	}
	ar = 1.0 - cos(w);
	ai = sin(w);
	br = cos(w * delay);
	bi = -sin(w * delay);
	dr = ar + gain * br;
	di = ai + gain * bi;
	den = dr * dr + di * di;
	if (rej) {
		/* a / d = a conj(d) / |d|^2 */
		rej[0] = (ar * dr + ai * di) / den;
		rej[1] = (ai * dr - ar * di) / den;
	}
	if (noise) {
		noise[0] = -gain * (br * dr + bi * di) / den;
		noise[1] = -gain * (bi * dr - br * di) / den;
	}
	return 0;
}

double wt_modalgain_noise_gain(double gain, int delay)
{
	/* h_t = h_(t-1) - g h_(t-d) - g [t == d], t >= 0, h_t = 0 before;
	 * kept in a ring of the last d + 1 values. */
	double ring[WT_MODALGAIN_MAX_DELAY + 1] = {0};
	double sum = 0;
	long t;
	int size, i;

	if (!delay_ok(delay) || !(gain > 0) ||
	    !(gain < wt_modalgain_stability_limit(delay))) {
		return NAN;
	}
	size = delay + 1;
	for (t = 0; t < NOISE_GAIN_MAX_TERMS; t++) {
		double prev = t >= 1 ? ring[(t - 1) % size] : 0.0;
		double back = t >= delay ? ring[(t - delay) % size] : 0.0;
		double h = prev - gain * back - (t == delay ? gain : 0.0);
		double tail = 0;

		ring[t % size] = h;
		sum += h * h;
		if (t <= 4 * (long)delay) {
			continue;
		}
		/* the last d + 1 terms: once they are negligible, so is the
		 * rest (the recursion only looks d back) */
		for (i = 0; i < size; i++) {
			tail += ring[i] * ring[i];
		}
		if (tail <= NOISE_GAIN_TOL * sum) {
			return sum;
		}
	}
	return NAN;
}

/* --- PSD ------------------------------------------------------------------ */

/* In-place radix-2 decimation-in-time FFT of n complex values (re, im
 * interleaved); tw holds exp(-i 2 pi k / n) for k < n / 2. */
static void fft(double *x, int n, const double *tw)
{
	int i, j, len;

	for (i = 1, j = 0; i < n; i++) {
		int bit = n >> 1;

		for (; j & bit; bit >>= 1) {
			j ^= bit;
		}
		j |= bit;
		if (i < j) {
			double tr = x[2 * i], ti = x[2 * i + 1];

			x[2 * i] = x[2 * j];
			x[2 * i + 1] = x[2 * j + 1];
			x[2 * j] = tr;
			x[2 * j + 1] = ti;
		}
	}
	for (len = 2; len <= n; len <<= 1) {
		int half = len >> 1, step = n / len;

		for (i = 0; i < n; i += len) {
			for (j = 0; j < half; j++) {
				double wr = tw[2 * j * step];
				double wi = tw[2 * j * step + 1];
				double *a = x + 2 * (i + j);
				double *b = x + 2 * (i + j + half);
				double br = b[0] * wr - b[1] * wi;
				double bi = b[0] * wi + b[1] * wr;

				b[0] = a[0] - br;
				b[1] = a[1] - bi;
				a[0] += br;
				a[1] += bi;
			}
		}
	}
}

/* Welch estimate with scratch buf (2 L), tw (L), win (L) supplied. */
static void welch(const double *x, long n_frames, long stride, int L,
		  double *psd, double *buf, const double *tw, const double *win,
		  double win_ss)
{
	long start, n_seg = 0;
	int k;

	memset(psd, 0, (size_t)L * sizeof(*psd));
	for (start = 0; start + L <= n_frames; start += L / 2) {
		double mean = 0;

		for (k = 0; k < L; k++) {
			mean += x[(start + k) * stride];
		}
		mean /= L;
		for (k = 0; k < L; k++) {
			buf[2 * k] = (x[(start + k) * stride] - mean) * win[k];
			buf[2 * k + 1] = 0.0;
		}
		fft(buf, L, tw);
		for (k = 0; k < L; k++) {
			psd[k] += buf[2 * k] * buf[2 * k] +
				  buf[2 * k + 1] * buf[2 * k + 1];
		}
		n_seg++;
	}
	for (k = 0; k < L; k++) {
		psd[k] /= n_seg * win_ss;
	}
}

struct psd_work {
	double *buf, *tw, *win;
	double win_ss;
};

static void psd_work_free(struct psd_work *w)
{
	free(w->buf);
	free(w->tw);
	free(w->win);
	w->buf = w->tw = w->win = NULL;
}

static int psd_work_init(struct psd_work *w, int L)
{
	int k;

	w->buf = malloc(2 * (size_t)L * sizeof(double));
	w->tw = malloc((size_t)L * sizeof(double));
	w->win = malloc((size_t)L * sizeof(double));
	if (!w->buf || !w->tw || !w->win) {
		psd_work_free(w);
		return -ENOMEM;
	}
	for (k = 0; k < L / 2; k++) {
		w->tw[2 * k] = cos(2.0 * M_PI * k / L);
		w->tw[2 * k + 1] = -sin(2.0 * M_PI * k / L);
	}
	w->win_ss = 0;
	for (k = 0; k < L; k++) {
		/* periodic Hann (Harris 1978) */
		w->win[k] = 0.5 * (1.0 - cos(2.0 * M_PI * k / L));
		w->win_ss += w->win[k] * w->win[k];
	}
	return 0;
}

static int check_record(const double *x, long n_frames, long stride,
			int segment, wt_error *err)
{
	long t;

	if (!x || stride < 1) {
		return wt_error_set(err, -EINVAL,
				    "psd: NULL record or stride < 1");
	}
	if (!segment_ok(segment)) {
		return wt_error_set(err, -EINVAL,
				    "psd: segment %d is not a power of two in "
				    "[%d, %d]",
				    segment, WT_MODALGAIN_MIN_SEGMENT,
				    WT_MODALGAIN_MAX_SEGMENT);
	}
	if (n_frames < segment) {
		return wt_error_set(err, -EINVAL,
				    "psd: %ld frames, fewer than one segment "
				    "of %d",
				    n_frames, segment);
	}
	for (t = 0; t < n_frames; t++) {
		if (!isfinite(x[t * stride])) {
			return wt_error_set(err, -EINVAL,
					    "psd: sample %ld is not finite", t);
		}
	}
	return 0;
}

int wt_modalgain_psd(const double *x, long n_frames, long stride, int segment,
		     double *psd, wt_error *err)
{
	struct psd_work w;
	int ret;

	if (!psd) {
		return wt_error_set(err, -EINVAL, "psd: NULL output");
	}
	ret = check_record(x, n_frames, stride, segment, err);
	if (ret) {
		return ret;
	}
	if (psd_work_init(&w, segment)) {
		return wt_error_set(err, -ENOMEM, "psd: out of memory");
	}
	welch(x, n_frames, stride, segment, psd, w.buf, w.tw, w.win, w.win_ss);
	psd_work_free(&w);
	wt_error_clear(err);
	return 0;
}

/* |f| of bin k of L. */
static double bin_freq(int k, int L)
{
	return (double)(k <= L / 2 ? k : L - k) / L;
}

double wt_modalgain_plateau(const double *psd, int segment, double fraction)
{
	double lo, sum = 0;
	int k, n = 0;

	if (!psd || !segment_ok(segment) || !(fraction > 0) ||
	    !(fraction < 1)) {
		return NAN;
	}
	lo = 0.5 * (1.0 - fraction);
	for (k = 0; k < segment; k++) {
		if (bin_freq(k, segment) >= lo - 1e-12) {
			sum += psd[k];
			n++;
		}
	}
	return n ? sum / n : NAN;
}

double wt_modalgain_predict(const double *psd, int segment, double noise_var,
			    double gain, int delay)
{
	double ng, sum = 0;
	int k;

	if (!psd || !segment_ok(segment) || !isfinite(noise_var) ||
	    noise_var < 0) {
		return NAN;
	}
	ng = wt_modalgain_noise_gain(gain, delay);
	if (isnan(ng)) {
		return NAN;
	}
	for (k = 0; k < segment; k++) {
		double wk = weight_of(e2_at(gain, delay, k - 1, segment),
				      e2_at(gain, delay, k, segment),
				      e2_at(gain, delay, k + 1, segment));

		sum += wk * (psd[k] - noise_var);
	}
	return sum / segment + noise_var * ng;
}

int wt_modalgain_grid(const wt_modalgain_params *p, double *gains, int max)
{
	double top;
	long k, count;

	if (!p || !delay_ok(p->delay) || !(p->gain_min > 0) ||
	    !(p->gain_step > 0) || !isfinite(p->gain_min) ||
	    !isfinite(p->gain_step) || isnan(p->gain_max) ||
	    !(p->stability_margin > 0) || !(p->stability_margin < 1) ||
	    max < 0) {
		return -EINVAL;
	}
	top = p->stability_margin * wt_modalgain_stability_limit(p->delay);
	if (p->gain_max > 0 && p->gain_max < top) {
		top = p->gain_max;
	}
	if (p->gain_min > top) {
		return -EINVAL;
	}
	/* the 1e-9 keeps a top that is a whole number of steps */
	count = (long)floor((top - p->gain_min) / p->gain_step + 1e-9) + 1;
	if (count > 1000000) {
		return -EINVAL;
	}
	for (k = 0; gains && k < count && k < max; k++) {
		gains[k] = p->gain_min + k * p->gain_step;
	}
	return (int)count;
}

int wt_modalgain_optimize(const double *record, long n_frames, int n_modes,
			  const double *noise_var, const wt_modalgain_params *p,
			  wt_modalgain_result *out, wt_error *err)
{
	wt_modalgain_params def;
	struct psd_work w = {0};
	double *gains = NULL, *ng = NULL, *e2 = NULL, *psd = NULL;
	int n_grid, L, i, k, m, ret = 0;

	if (!p) {
		wt_modalgain_params_default(&def);
		p = &def;
	}
	if (!record || !out || n_modes < 1) {
		return wt_error_set(err, -EINVAL,
				    "modal gain: NULL record or no modes");
	}
	n_grid = wt_modalgain_grid(p, NULL, 0);
	if (n_grid < 0 || !(p->plateau_fraction > 0) ||
	    !(p->plateau_fraction < 1)) {
		return wt_error_set(err, -EINVAL, "modal gain: bad parameters");
	}
	L = p->segment;
	for (m = 0; m < n_modes; m++) {
		ret = check_record(record + m, n_frames, n_modes, L, err);
		if (ret) {
			return ret;
		}
		if (noise_var && !isfinite(noise_var[m])) {
			return wt_error_set(err, -EINVAL,
					    "modal gain: noise variance of "
					    "mode %d is not finite",
					    m);
		}
	}

	gains = malloc((size_t)n_grid * sizeof(*gains));
	ng = malloc((size_t)n_grid * sizeof(*ng));
	/* the weights of every grid gain at bins 0 .. L/2 (even in f) */
	e2 = malloc((size_t)n_grid * (L / 2 + 1) * sizeof(*e2));
	psd = malloc((size_t)L * sizeof(*psd));
	if (!gains || !ng || !e2 || !psd || psd_work_init(&w, L)) {
		ret = wt_error_set(err, -ENOMEM, "modal gain: out of memory");
		goto out;
	}
	wt_modalgain_grid(p, gains, n_grid);
	for (i = 0; i < n_grid; i++) {
		ng[i] = wt_modalgain_noise_gain(gains[i], p->delay);
		if (isnan(ng[i])) {
			ret = wt_error_set(err, -EINVAL,
					   "modal gain: gain %g is not stable "
					   "with delay %d",
					   gains[i], p->delay);
			goto out;
		}
		for (k = 0; k <= L / 2; k++) {
			e2[(size_t)i * (L / 2 + 1) + k] =
				weight_of(e2_at(gains[i], p->delay, k - 1, L),
					  e2_at(gains[i], p->delay, k, L),
					  e2_at(gains[i], p->delay, k + 1, L));
		}
	}

	for (m = 0; m < n_modes; m++) {
		wt_modalgain_result *res = &out[m];
		double nv, var = 0;

		welch(record + m, n_frames, n_modes, L, psd, w.buf, w.tw, w.win,
		      w.win_ss);
		for (k = 0; k < L; k++) {
			var += psd[k];
		}
		if (noise_var && noise_var[m] >= 0) {
			nv = noise_var[m];
		} else {
			nv = wt_modalgain_plateau(psd, L, p->plateau_fraction);
		}
		res->noise_var = nv;
		res->open_loop = var / L;
		res->gain = gains[0];
		res->predicted = INFINITY;
		for (i = 0; i < n_grid; i++) {
			const double *row = &e2[(size_t)i * (L / 2 + 1)];
			double sum = 0, J;

			for (k = 0; k < L; k++) {
				int kk = k <= L / 2 ? k : L - k;

				sum += row[kk] * (psd[k] - nv);
			}
			J = sum / L + nv * ng[i];
			if (J < res->predicted) {
				res->predicted = J;
				res->gain = gains[i];
			}
		}
	}
	wt_error_clear(err);

out:
	psd_work_free(&w);
	free(gains);
	free(ng);
	free(e2);
	free(psd);
	return ret;
}
