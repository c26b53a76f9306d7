/* sim_optics.c - pupil field, Strehl, PSF and Shack-Hartmann spot images. */
#include "sim_optics.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <fftw3.h>

/* ---- pupil field, Strehl ratio, PSF --------------------------------- */

int sim_optics_disk(int n, double obscuration, double *amp)
{
	int a, b, count = 0;
	double step, x, y, r;

	if (n < 1 || !amp || !(obscuration >= 0.0 && obscuration < 1.0)) {
		return -EINVAL;
	}
	step = 2.0 / n;
	for (b = 0; b < n; b++) {
		y = (b + 0.5 - 0.5 * n) * step;
		for (a = 0; a < n; a++) {
			x = (a + 0.5 - 0.5 * n) * step;
			r = hypot(x, y);
			amp[(size_t)b * n + a] =
				(r <= 1.0 && r >= obscuration) ? 1.0 : 0.0;
			count += amp[(size_t)b * n + a] > 0.0;
		}
	}
	return count;
}

void sim_optics_field(size_t n_points, const double *phase, const double *amp,
		      double (*field)[2])
{
	size_t k;

	for (k = 0; k < n_points; k++) {
		double a = amp ? amp[k] : 1.0;

		field[k][0] = a * cos(phase[k]);
		field[k][1] = a * sin(phase[k]);
	}
}

double sim_optics_strehl(size_t n_points, const double *phase,
			 const double *amp)
{
	double re = 0.0, im = 0.0, sa = 0.0;
	size_t k;

	for (k = 0; k < n_points; k++) {
		double a = amp ? amp[k] : 1.0;

		if (a == 0.0) {
			continue;
		}
		re += a * cos(phase[k]);
		im += a * sin(phase[k]);
		sa += a;
	}
	if (!(sa > 0.0)) {
		return NAN;
	}
	return (re * re + im * im) / (sa * sa);
}

double sim_optics_rms(size_t n_points, const double *phase, const double *amp)
{
	double s0 = 0.0, s1 = 0.0, s2 = 0.0, mean;
	size_t k;

	for (k = 0; k < n_points; k++) {
		double a = amp ? amp[k] : 1.0;

		if (a == 0.0) {
			continue;
		}
		s0 += a;
		s1 += a * phase[k];
	}
	if (!(s0 > 0.0)) {
		return NAN;
	}
	mean = s1 / s0;
	for (k = 0; k < n_points; k++) {
		double a = amp ? amp[k] : 1.0;

		if (a != 0.0) {
			s2 += a * (phase[k] - mean) * (phase[k] - mean);
		}
	}
	return sqrt(s2 / s0);
}

double sim_optics_marechal(double rms_rad)
{
	return exp(-rms_rad * rms_rad);
}

struct sim_psf {
	int n_pupil, n_fft;
	fftw_complex *buf;
	fftw_plan plan;
};

int sim_psf_create(int n_pupil, int n_fft, sim_psf **out, wt_error *err)
{
	sim_psf *p;

	if (!out) {
		return wt_error_set(err, -EINVAL, "psf: NULL argument");
	}
	if (n_pupil < 2 || n_fft < 2 * n_pupil || n_fft > 16384) {
		return wt_error_set(err, -EINVAL,
				    "psf: pupil %d in transform %d (need "
				    "pupil >= 2, transform >= 2 x pupil, <= "
				    "16384)",
				    n_pupil, n_fft);
	}
	p = calloc(1, sizeof(*p));
	if (!p) {
		return wt_error_set(err, -ENOMEM, "psf: out of memory");
	}
	p->n_pupil = n_pupil;
	p->n_fft = n_fft;
	p->buf = fftw_malloc(sizeof(fftw_complex) * n_fft * n_fft);
	if (p->buf) {
		p->plan = fftw_plan_dft_2d(n_fft, n_fft, p->buf, p->buf,
					   FFTW_FORWARD, FFTW_ESTIMATE);
	}
	if (!p->buf || !p->plan) {
		sim_psf_destroy(p);
		return wt_error_set(err, -ENOMEM, "psf: out of memory");
	}
	*out = p;
	return 0;
}

void sim_psf_destroy(sim_psf *p)
{
	if (!p) {
		return;
	}
	if (p->plan) {
		fftw_destroy_plan(p->plan);
	}
	fftw_free(p->buf);
	free(p);
}

int sim_psf_size(const sim_psf *p)
{
	return p->n_fft;
}

int sim_psf_compute(sim_psf *p, const double *phase, const double *amp,
		    double *psf, double *strehl, double *peak)
{
	int np = p->n_pupil, nf = p->n_fft, a, b, h = nf / 2;
	double sa = 0.0, norm, best = 0.0;

	memset(p->buf, 0, sizeof(fftw_complex) * nf * nf);
	for (b = 0; b < np; b++) {
		for (a = 0; a < np; a++) {
			size_t k = (size_t)b * np + a;
			double am = amp ? amp[k] : 1.0;

			p->buf[(size_t)b * nf + a][0] = am * cos(phase[k]);
			p->buf[(size_t)b * nf + a][1] = am * sin(phase[k]);
			sa += am;
		}
	}
	if (!(sa > 0.0)) {
		return -EDOM;
	}
	fftw_execute(p->plan);
	/* The unaberrated peak is |sum a|^2 (zero frequency of the field). */
	norm = 1.0 / (sa * sa);
	for (b = 0; b < nf; b++) {
		for (a = 0; a < nf; a++) {
			const double *c = p->buf[(size_t)b * nf + a];
			double v = (c[0] * c[0] + c[1] * c[1]) * norm;

			if (v > best) {
				best = v;
			}
			if (psf) {
				/* centre: frequency 0 goes to (nf/2, nf/2) */
				psf[(size_t)((b + h) % nf) * nf +
				    (a + h) % nf] = v;
			}
		}
	}
	if (strehl) {
		const double *c = p->buf[0];

		*strehl = (c[0] * c[0] + c[1] * c[1]) * norm;
	}
	if (peak) {
		*peak = best;
	}
	return 0;
}

/* ---- Shack-Hartmann spots -------------------------------------------- */

/* FWHM of sinc^2 (the square lenslet's core), 0.88589 lambda f / pitch, as
 * a Gaussian sigma: / (2 sqrt(2 ln 2)). */
#define SINC2_FWHM    0.885893
#define FWHM_TO_SIGMA 0.4246609

struct sim_spots {
	sim_spot_params p;
	sim_spot_layout lay;
	int n_render;
	int *col, *row;
	int n_map;	   /* input map samples across */
	int n_frame;	   /* frame pixels across */
	int n_samp;	   /* internal pupil samples across a lenslet */
	double e_full;	   /* sum of squared weights of a full lenslet */
	double grad_scale; /* pixels per (radian per input sample) */
	/* per FFT pupil sample m (0 .. n_sub - 1): */
	double *weight;	  /* fractional overlap with the lenslet, 1-D */
	int *iu;	  /* input sample left of it, relative to the lenslet */
	double *tu;	  /* bilinear fraction */
	float (*ramp)[2]; /* half-sample tilt factor */
	fftwf_complex *buf;
	fftwf_plan plan, plan_rest;
	double *flux;	 /* n_render scratch */
	double *gx, *gy; /* Gaussian model: per-pixel erf bins */
};

/* FFT size >= n: FFTW's estimated plans are fastest for powers of two
 * (measured here: 64 beats 36 ... 60), so take the power of two when it
 * costs at most half as many samples again, else the least 2^a 3^b 5^c. */
static int fft_size(int n)
{
	int pow2 = 1, m;

	while (pow2 < n) {
		pow2 *= 2;
	}
	if (2 * pow2 <= 3 * n) {
		return pow2;
	}
	for (;; n++) {
		m = n;
		while (m % 2 == 0) {
			m /= 2;
		}
		while (m % 3 == 0) {
			m /= 3;
		}
		while (m % 5 == 0) {
			m /= 5;
		}
		if (m == 1) {
			return n;
		}
	}
}

double sim_spots_pixels_per_radian(const sim_spot_params *p)
{
	return p->focal_um * p->wavelength_um /
	       (2.0 * M_PI * p->pixel_um * p->pitch_um);
}

static int positive(double v)
{
	return v > 0.0 && isfinite(v);
}

static int check_params(const sim_spot_params *p, wt_error *err)
{
	double ratio;

	if (p->model != SIM_SPOT_DIFFRACTION && p->model != SIM_SPOT_GAUSSIAN) {
		return wt_error_set(err, -EINVAL, "spots: unknown model %d",
				    (int)p->model);
	}
	if (p->n_lenslets < 1 || p->n_lenslets > 1024) {
		return wt_error_set(err, -EINVAL,
				    "spots: n_lenslets %d (1 ... 1024)",
				    p->n_lenslets);
	}
	if (p->pixels_per_lenslet < 1 || p->pixels_per_lenslet > 1024) {
		return wt_error_set(err, -EINVAL,
				    "spots: pixels_per_lenslet %d (1 ... 1024)",
				    p->pixels_per_lenslet);
	}
	if (p->phase_samples < 1 || p->phase_samples > 1024) {
		return wt_error_set(err, -EINVAL,
				    "spots: phase_samples %d (1 ... 1024)",
				    p->phase_samples);
	}
	if (!positive(p->pitch_um) || !positive(p->focal_um) ||
	    !positive(p->wavelength_um) || !positive(p->pixel_um)) {
		return wt_error_set(
			err, -EINVAL,
			"spots: pitch, focal length, wavelength and "
			"pixel must be > 0");
	}
	ratio = p->pitch_um / p->pixel_um;
	if (fabs(ratio - p->pixels_per_lenslet) > 1e-6 * ratio) {
		return wt_error_set(err, -EINVAL,
				    "spots: pitch %g um / pixel %g um = %g, "
				    "not pixels_per_lenslet %d",
				    p->pitch_um, p->pixel_um, ratio,
				    p->pixels_per_lenslet);
	}
	if (p->oversample < 0 || p->oversample > 64) {
		return wt_error_set(err, -EINVAL,
				    "spots: oversample %d (0 ... 64)",
				    p->oversample);
	}
	if (p->fov_windows < 0 || p->fov_windows > 16) {
		return wt_error_set(err, -EINVAL,
				    "spots: fov_windows %d (0 ... 16)",
				    p->fov_windows);
	}
	if (p->min_pupil_samples < 0 || p->min_pupil_samples == 1 ||
	    p->min_pupil_samples > 1024) {
		return wt_error_set(
			err, -EINVAL,
			"spots: min_pupil_samples %d (0, 2 ... 1024)",
			p->min_pupil_samples);
	}
	return 0;
}

/* Choose the FFT layout so that one FFT sample is pixel / q on the
 * detector (see sim_spot_layout). */
static int plan_layout(sim_spots *s, wt_error *err)
{
	const sim_spot_params *p = &s->p;
	sim_spot_layout *l = &s->lay;
	double lf = p->wavelength_um * p->focal_um;
	double delta, width, s_min;
	int q, fov, m;

	q = p->oversample;
	if (q == 0) {
		q = (int)ceil(2.0 * p->pixel_um * p->pitch_um / lf - 1e-9);
		if (q < 1) {
			q = 1;
		}
	}
	delta = p->pixel_um / q;	    /* focal-plane sample, um */
	width = lf / (p->pitch_um * delta); /* lambda f / pitch in samples */
	s_min = p->min_pupil_samples;
	if (s_min == 0) {
		s_min = p->phase_samples > 16 ? p->phase_samples : 16;
	}
	fov = p->fov_windows ? p->fov_windows : 2;
	m = fov * p->pixels_per_lenslet * q;
	if (m < (int)ceil(s_min * width - 1e-9)) {
		m = (int)ceil(s_min * width - 1e-9);
	}
	if (m > 8192) {
		return wt_error_set(err, -EINVAL,
				    "spots: FFT of %d samples needed; lower "
				    "oversample, fov_windows or "
				    "min_pupil_samples",
				    m);
	}
	m = fft_size(m);
	l->n_fft = m;
	l->oversample = q;
	l->dx_um = lf / (m * delta);
	l->pupil_samples = p->pitch_um / l->dx_um;
	l->n_sub = (int)ceil(l->pupil_samples - 1e-9);
	if (l->n_sub > m) {
		return wt_error_set(err, -EINVAL,
				    "spots: lenslet of %.1f FFT samples does "
				    "not fit a %d transform (spot narrower "
				    "than a sample: raise oversample)",
				    l->pupil_samples, m);
	}
	return 0;
}

/* Internal pupil samples for n_sub points across the lenslet, spacing dx,
 * centred: weights, bilinear source indices. */
static void set_samples(sim_spots *s, int n_sub, double dx)
{
	double half = 0.5 * s->p.pitch_um;
	int m;

	s->e_full = 0.0;
	for (m = 0; m < n_sub; m++) {
		double x = (m - 0.5 * (n_sub - 1)) * dx;
		double lo = fmax(x - 0.5 * dx, -half);
		double hi = fmin(x + 0.5 * dx, half);
		double u = (0.5 + x / s->p.pitch_um) * s->p.phase_samples - 0.5;
		double fu = floor(u);

		s->weight[m] = hi > lo ? (hi - lo) / dx : 0.0;
		s->iu[m] = (int)fu;
		s->tu[m] = u - fu;
		s->e_full += s->weight[m] * s->weight[m];
	}
	s->e_full *= s->e_full; /* separable: (sum w^2)^2 in 2-D */
}

void sim_spots_destroy(sim_spots *s)
{
	if (!s) {
		return;
	}
	if (s->plan) {
		fftwf_destroy_plan(s->plan);
	}
	if (s->plan_rest) {
		fftwf_destroy_plan(s->plan_rest);
	}
	fftwf_free(s->buf);
	free(s->col);
	free(s->row);
	free(s->weight);
	free(s->iu);
	free(s->tu);
	free(s->ramp);
	free(s->flux);
	free(s->gx);
	free(s->gy);
	free(s);
}

int sim_spots_create(const sim_spot_params *p, const int *col, const int *row,
		     int n_render, sim_spots **out, wt_error *err)
{
	sim_spots *s;
	int rc, k, n_sub, nl, mm;

	if (!p || !out) {
		return wt_error_set(err, -EINVAL, "spots: NULL argument");
	}
	rc = check_params(p, err);
	if (rc) {
		return rc;
	}
	nl = p->n_lenslets;
	if ((col == NULL) != (row == NULL)) {
		return wt_error_set(err, -EINVAL,
				    "spots: give both col and row, or neither");
	}
	if (!col) {
		n_render = nl * nl;
	}
	if ((long)nl * p->pixels_per_lenslet > 16384 ||
	    (long)nl * p->phase_samples > 16384) {
		return wt_error_set(err, -EINVAL,
				    "spots: frame or phase map over 16384 "
				    "across");
	}
	if (n_render < 1 || n_render > nl * nl) {
		return wt_error_set(err, -EINVAL,
				    "spots: %d lenslets to render (1 ... %d)",
				    n_render, nl * nl);
	}
	for (k = 0; col && k < n_render; k++) {
		if (col[k] < 0 || col[k] >= nl || row[k] < 0 || row[k] >= nl) {
			return wt_error_set(err, -EINVAL,
					    "spots: lenslet %d at (%d, %d) "
					    "outside the %d x %d grid",
					    k, col[k], row[k], nl, nl);
		}
	}
	s = calloc(1, sizeof(*s));
	if (!s) {
		return wt_error_set(err, -ENOMEM, "spots: out of memory");
	}
	s->p = *p;
	s->n_render = n_render;
	s->n_map = nl * p->phase_samples;
	s->n_frame = nl * p->pixels_per_lenslet;
	s->col = malloc(sizeof(int) * n_render);
	s->row = malloc(sizeof(int) * n_render);
	s->flux = malloc(sizeof(double) * n_render);
	s->gx = malloc(sizeof(double) * s->n_frame);
	s->gy = malloc(sizeof(double) * s->n_frame);
	if (!s->col || !s->row || !s->flux || !s->gx || !s->gy) {
		goto nomem;
	}
	for (k = 0; k < n_render; k++) {
		s->col[k] = col ? col[k] : k % nl;
		s->row[k] = col ? row[k] : k / nl;
	}

	if (p->model == SIM_SPOT_DIFFRACTION) {
		rc = plan_layout(s, err);
		if (rc) {
			sim_spots_destroy(s);
			return rc;
		}
		n_sub = s->lay.n_sub;
	} else {
		/* Gradient sampling only: a grid as fine as the input. */
		n_sub = p->phase_samples > 8 ? p->phase_samples : 8;
	}
	s->weight = malloc(sizeof(double) * n_sub);
	s->iu = malloc(sizeof(int) * n_sub);
	s->tu = malloc(sizeof(double) * n_sub);
	if (!s->weight || !s->iu || !s->tu) {
		goto nomem;
	}
	s->n_samp = n_sub;
	if (p->model == SIM_SPOT_DIFFRACTION) {
		set_samples(s, n_sub, s->lay.dx_um);
	} else {
		/* n_sub cells exactly tiling the lenslet */
		set_samples(s, n_sub, p->pitch_um / n_sub);
	}
	s->grad_scale =
		p->focal_um * p->wavelength_um / (2.0 * M_PI * p->pixel_um);

	if (p->model == SIM_SPOT_DIFFRACTION) {
		int m = s->lay.n_fft, dims[2] = {m, m}, rest;
		int pq = p->pixels_per_lenslet * s->lay.oversample;
		double c = (pq % 2 == 0) ? 0.5 : 0.0;

		s->lay.batch = n_render < 32 ? n_render : 32;
		s->ramp = malloc(sizeof(*s->ramp) * n_sub);
		s->buf = fftwf_malloc(sizeof(fftwf_complex) * (size_t)m * m *
				      s->lay.batch);
		if (!s->ramp || !s->buf) {
			goto nomem;
		}
		/* exp(-2 pi i c n / M) on field index n moves output sample
		 * k to frequency k + c (sim_spot_layout). */
		for (mm = 0; mm < n_sub; mm++) {
			double ph = -2.0 * M_PI * c * mm / m;

			s->ramp[mm][0] = (float)cos(ph);
			s->ramp[mm][1] = (float)sin(ph);
		}
		s->plan = fftwf_plan_many_dft(
			2, dims, s->lay.batch, s->buf, NULL, 1, m * m, s->buf,
			NULL, 1, m * m, FFTW_FORWARD, FFTW_ESTIMATE);
		rest = n_render % s->lay.batch;
		if (rest) {
			s->plan_rest = fftwf_plan_many_dft(
				2, dims, rest, s->buf, NULL, 1, m * m, s->buf,
				NULL, 1, m * m, FFTW_FORWARD, FFTW_ESTIMATE);
		}
		if (!s->plan || (rest && !s->plan_rest)) {
			sim_spots_destroy(s);
			return wt_error_set(err, -ENOMEM,
					    "spots: FFTW plan failed");
		}
	}
	*out = s;
	return 0;

nomem:
	sim_spots_destroy(s);
	return wt_error_set(err, -ENOMEM, "spots: out of memory");
}

void sim_spots_layout(const sim_spots *s, sim_spot_layout *out)
{
	*out = s->lay;
}

/* Bilinear sample of map (n x n) at source column a0 (+1) with fraction tx,
 * row b0 (+1) with fraction ty; indices clamped to the map. */
struct tap {
	int a0, a1, b0, b1;
	double tx, ty;
};

static inline int clampi(int v, int n)
{
	return v < 0 ? 0 : (v >= n ? n - 1 : v);
}

static inline void make_tap(const sim_spots *s, int i, int j, int m, int l,
			    struct tap *t)
{
	int ns = s->p.phase_samples, n = s->n_map;
	int a = i * ns + s->iu[m], b = j * ns + s->iu[l];

	/* At the edge of the map extrapolate the last cell linearly rather
	 * than clamping, which would flatten the phase there and shorten the
	 * spot shifts of the border lenslets. */
	int ca = clampi(a, n - 1), cb = clampi(b, n - 1);

	t->a0 = ca;
	t->a1 = ca + 1;
	t->b0 = cb;
	t->b1 = cb + 1;
	t->tx = s->tu[m] + (a - ca);
	t->ty = s->tu[l] + (b - cb);
}

static inline double interp(const double *map, int n, const struct tap *t)
{
	const double *r0 = map + (size_t)t->b0 * n;
	const double *r1 = map + (size_t)t->b1 * n;

	return (1.0 - t->ty) * ((1.0 - t->tx) * r0[t->a0] + t->tx * r0[t->a1]) +
	       t->ty * ((1.0 - t->tx) * r1[t->a0] + t->tx * r1[t->a1]);
}

/* Fill one lenslet's FFT buffer; returns the lenslet's sum |a w|^2. */
static double fill_field(const sim_spots *s, int i, int j, const double *phase,
			 const double *amp, fftwf_complex *f)
{
	int m = s->lay.n_fft, n_sub = s->lay.n_sub, a, b;
	double energy = 0.0;

	memset(f, 0, sizeof(fftwf_complex) * m * m);
	for (b = 0; b < n_sub; b++) {
		for (a = 0; a < n_sub; a++) {
			struct tap t;
			double w = s->weight[a] * s->weight[b], ph, am, re, im;
			float rr, ri;

			if (w == 0.0) {
				continue;
			}
			make_tap(s, i, j, a, b, &t);
			am = w *
			     (amp ? fmin(1.0,
					 fmax(0.0, interp(amp, s->n_map, &t)))
				  : 1.0);
			if (am == 0.0) {
				continue;
			}
			energy += am * am;
			ph = interp(phase, s->n_map, &t);
			sincos(ph, &im, &re);
			re *= am;
			im *= am;
			/* separable half-sample ramp: ramp[a] * ramp[b] */
			rr = s->ramp[a][0] * s->ramp[b][0] -
			     s->ramp[a][1] * s->ramp[b][1];
			ri = s->ramp[a][0] * s->ramp[b][1] +
			     s->ramp[a][1] * s->ramp[b][0];
			f[(size_t)b * m + a][0] = (float)(re * rr - im * ri);
			f[(size_t)b * m + a][1] = (float)(re * ri + im * rr);
		}
	}
	return energy;
}

/* Add one lenslet's |F|^2 (times scale) into the frame, q x q samples per
 * pixel, the axis at the window centre. */
static void deposit(const sim_spots *s, int i, int j, const fftwf_complex *f,
		    double scale, float *frame)
{
	int m = s->lay.n_fft, q = s->lay.oversample;
	int pq = s->p.pixels_per_lenslet * q, nfq = s->n_frame * q;
	int base_x = i * pq + pq / 2, base_y = j * pq + pq / 2;
	int kx, ky;

	for (ky = 0; ky < m; ky++) {
		int ay = base_y + (ky < m / 2 ? ky : ky - m);
		float *line;

		if (ay < 0 || ay >= nfq) {
			continue;
		}
		line = frame + (size_t)(ay / q) * s->n_frame;
		for (kx = 0; kx < m; kx++) {
			int ax = base_x + (kx < m / 2 ? kx : kx - m);
			const float *c = f[(size_t)ky * m + kx];

			if (ax < 0 || ax >= nfq) {
				continue;
			}
			line[ax / q] +=
				(float)(scale * (c[0] * c[0] + c[1] * c[1]));
		}
	}
}

/* Bilinear value of map (n x n) at real index coordinates (u, v), clamped
 * to the map. */
static double interp_at(const double *map, int n, double u, double v)
{
	double fu = floor(u), fv = floor(v), tx = u - fu, ty = v - fv;
	int a0 = clampi((int)fu, n), a1 = clampi((int)fu + 1, n);
	int b0 = clampi((int)fv, n), b1 = clampi((int)fv + 1, n);
	const double *r0 = map + (size_t)b0 * n, *r1 = map + (size_t)b1 * n;

	return (1.0 - ty) * ((1.0 - tx) * r0[a0] + tx * r0[a1]) +
	       ty * ((1.0 - tx) * r1[a0] + tx * r1[a1]);
}

/*
 * Intensity-weighted mean phase gradient over lenslet (i, j), in pixels;
 * returns the lenslet's sum |a w|^2.  The gradient at each internal sample
 * is the central difference of the bilinear phase over one input sample
 * (+-1/2 on each side): on the input samples themselves this is the usual
 * central difference, and its lenslet mean is the edge-to-edge phase
 * difference to second order.  Positions outside the map are clamped.
 */
static double lenslet_slope(const sim_spots *s, int i, int j,
			    const double *phase, const double *amp, double *sx,
			    double *sy)
{
	int n_sub = s->n_samp, a, b, n = s->n_map, ns = s->p.phase_samples;
	double e = 0.0, gx = 0.0, gy = 0.0;

	for (b = 0; b < n_sub; b++) {
		double v = j * ns + s->iu[b] + s->tu[b];

		for (a = 0; a < n_sub; a++) {
			double u = i * ns + s->iu[a] + s->tu[a];
			double w = s->weight[a] * s->weight[b], am, wt, dx, dy;
			double ul = u - 0.5, ur = u + 0.5;
			double vl = v - 0.5, vr = v + 0.5;

			if (w == 0.0) {
				continue;
			}
			am = w * (amp ? interp_at(amp, n, u, v) : 1.0);
			wt = am * am;
			if (wt == 0.0) {
				continue;
			}
			/* keep the stencil on the map (clamping would bias
			 * the difference at the outer edge) */
			if (ul < 0.0) {
				ul = 0.0;
				ur = 1.0;
			} else if (ur > n - 1) {
				ur = n - 1;
				ul = n - 2;
			}
			if (vl < 0.0) {
				vl = 0.0;
				vr = 1.0;
			} else if (vr > n - 1) {
				vr = n - 1;
				vl = n - 2;
			}
			dx = n > 1 ? interp_at(phase, n, ur, v) -
					     interp_at(phase, n, ul, v)
				   : 0.0;
			dy = n > 1 ? interp_at(phase, n, u, vr) -
					     interp_at(phase, n, u, vl)
				   : 0.0;
			e += wt;
			gx += wt * dx;
			gy += wt * dy;
		}
	}
	if (e > 0.0) {
		/* per input sample -> per um -> pixels */
		double k = s->grad_scale * ns / s->p.pitch_um;

		*sx = k * gx / e;
		*sy = k * gy / e;
	} else {
		*sx = 0.0;
		*sy = 0.0;
	}
	return e;
}

int sim_spots_mean_slopes(sim_spots *s, const double *phase, const double *amp,
			  double photons, float *slopes, float *flux)
{
	int k, nr;

	if (!s || !phase || !slopes) {
		return -EINVAL;
	}
	nr = s->n_render;
	for (k = 0; k < nr; k++) {
		double sx, sy;
		double e = lenslet_slope(s, s->col[k], s->row[k], phase, amp,
					 &sx, &sy);

		slopes[k] = (float)sx;
		slopes[nr + k] = (float)sy;
		if (flux) {
			flux[k] = (float)(photons * e / s->e_full);
		}
	}
	return 0;
}

static void render_diffraction(sim_spots *s, const double *phase,
			       const double *amp, double photons, float *frame)
{
	int m = s->lay.n_fft, batch = s->lay.batch, k0, k;
	size_t plane = (size_t)m * m;
	/* Parseval: sum |F|^2 = M^2 sum |f|^2 */
	double scale = photons / (s->e_full * (double)plane);

	for (k0 = 0; k0 < s->n_render; k0 += batch) {
		int nb = s->n_render - k0 < batch ? s->n_render - k0 : batch;

		for (k = 0; k < nb; k++) {
			s->flux[k0 + k] =
				fill_field(s, s->col[k0 + k], s->row[k0 + k],
					   phase, amp, s->buf + k * plane);
		}
		fftwf_execute(nb == batch ? s->plan : s->plan_rest);
		for (k = 0; k < nb; k++) {
			if (s->flux[k0 + k] > 0.0) {
				deposit(s, s->col[k0 + k], s->row[k0 + k],
					s->buf + k * plane, scale, frame);
			}
		}
	}
}

/* Fraction of a Gaussian (centre mu, sigma) on each pixel [k, k+1) of the
 * frame, pixel coordinates measured from `origin`; returns the first and
 * last pixel touched (others are zero). */
static void erf_bins(const sim_spots *s, double origin, double mu, double sigma,
		     double *g, int *first, int *last)
{
	double reach = 6.0 * sigma + 1.0, c = origin + mu;
	double k2 = 1.0 / (M_SQRT2 * sigma), lo;
	int k;

	*first = (int)floor(c - reach);
	*last = (int)ceil(c + reach);
	if (*first < 0) {
		*first = 0;
	}
	if (*last > s->n_frame - 1) {
		*last = s->n_frame - 1;
	}
	lo = erf((*first - c) * k2);
	for (k = *first; k <= *last; k++) {
		double hi = erf((k + 1 - c) * k2);

		g[k] = 0.5 * (hi - lo);
		lo = hi;
	}
}

static void render_gaussian(sim_spots *s, const double *phase,
			    const double *amp, double photons, float *frame)
{
	int p = s->p.pixels_per_lenslet, k, a, b;
	double sigma = SINC2_FWHM * FWHM_TO_SIGMA * s->p.wavelength_um *
		       s->p.focal_um / (s->p.pitch_um * s->p.pixel_um);

	for (k = 0; k < s->n_render; k++) {
		int i = s->col[k], j = s->row[k], x0, x1, y0, y1;
		double sx, sy, e;

		e = lenslet_slope(s, i, j, phase, amp, &sx, &sy);
		if (!(e > 0.0)) {
			continue;
		}
		e *= photons / s->e_full;
		erf_bins(s, i * p + 0.5 * p, sx, sigma, s->gx, &x0, &x1);
		erf_bins(s, j * p + 0.5 * p, sy, sigma, s->gy, &y0, &y1);
		for (b = y0; b <= y1; b++) {
			float *line = frame + (size_t)b * s->n_frame;
			double gyb = e * s->gy[b];

			for (a = x0; a <= x1; a++) {
				line[a] += (float)(gyb * s->gx[a]);
			}
		}
	}
}

int sim_spots_render(sim_spots *s, const double *phase, const double *amp,
		     double photons, float *frame)
{
	if (!s || !phase || !frame) {
		return -EINVAL;
	}
	memset(frame, 0, sizeof(float) * (size_t)s->n_frame * s->n_frame);
	if (s->p.model == SIM_SPOT_DIFFRACTION) {
		render_diffraction(s, phase, amp, photons, frame);
	} else {
		render_gaussian(s, phase, amp, photons, frame);
	}
	return 0;
}
