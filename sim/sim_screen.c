/* sim_screen.c - FFT + subharmonic von Karman phase screens. */
#include "sim_screen.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <fftw3.h>

#define SH_PER_LEVEL  8
#define SH_MAX_LEVELS 8

struct sim_screen {
	sim_screen_params p;
	int n;
	double df;     /* FFT grid frequency step, 1 / (n dx) */
	double *sigma; /* n * n: sqrt(2 Phi df^2) per FFT point, 0 at f = 0 */
	fftw_complex *buf; /* n * n spectrum, transformed in place */
	fftw_plan plan;	   /* backward: sum c_k exp(+2 pi i k.x) */
	double *periodic;  /* n * n FFT part (period n dx) */
	double *phase;	   /* n * n FFT part + subharmonics */
	int n_sh;	   /* subharmonic points */
	double *sh_fx, *sh_fy, *sh_sigma; /* n_sh each */
	double *sh_re, *sh_im;		  /* n_sh: current amplitudes */
};

double sim_screen_psd_constant(void)
{
	/* Kolmogorov phase PSD constant in cycles per unit length, e.g.
	 * Schmidt 2010 eq. 9.42 with kappa = 2 pi f. */
	return tgamma(11.0 / 6.0) * tgamma(11.0 / 6.0) /
	       (2.0 * pow(M_PI, 11.0 / 3.0)) *
	       pow(24.0 / 5.0 * tgamma(6.0 / 5.0), 5.0 / 6.0);
}

static int is_kolmogorov(double L0)
{
	return !(L0 > 0.0) || isinf(L0);
}

double sim_screen_psd(double f, double r0, double L0)
{
	double f0sq = is_kolmogorov(L0) ? 0.0 : 1.0 / (L0 * L0);

	return sim_screen_psd_constant() * pow(r0, -5.0 / 3.0) *
	       pow(f * f + f0sq, -11.0 / 6.0);
}

static double fft_freq(int k, int n, double df)
{
	return (k < n / 2 ? k : k - n) * df;
}

int sim_screen_create(const sim_screen_params *p, sim_screen **out,
		      wt_error *err)
{
	sim_screen *s;
	size_t nn;
	int n, a, b, l, i, j, k;
	double f, cell;

	if (!p || !out) {
		return wt_error_set(err, -EINVAL, "screen: NULL argument");
	}
	if (p->n < 8 || p->n > 8192 || (p->n & 1)) {
		return wt_error_set(err, -EINVAL,
				    "screen: n = %d (even, 8 ... 8192)", p->n);
	}
	if (!(p->dx > 0.0) || !isfinite(p->dx)) {
		return wt_error_set(err, -EINVAL, "screen: dx %g not > 0",
				    p->dx);
	}
	if (!(p->r0 > 0.0) || !isfinite(p->r0)) {
		return wt_error_set(err, -EINVAL, "screen: r0 %g not > 0",
				    p->r0);
	}
	if (isnan(p->L0)) {
		return wt_error_set(err, -EINVAL, "screen: L0 is NaN");
	}
	if (p->subharmonic_levels < 0 ||
	    p->subharmonic_levels > SH_MAX_LEVELS) {
		return wt_error_set(err, -EINVAL,
				    "screen: subharmonic levels %d (0 ... %d)",
				    p->subharmonic_levels, SH_MAX_LEVELS);
	}

	n = p->n;
	nn = (size_t)n * n;
	s = calloc(1, sizeof(*s));
	if (!s) {
		return wt_error_set(err, -ENOMEM, "screen: out of memory");
	}
	s->p = *p;
	s->n = n;
	s->df = 1.0 / (n * p->dx);
	s->n_sh = SH_PER_LEVEL * p->subharmonic_levels;
	s->sigma = malloc(nn * sizeof(*s->sigma));
	s->periodic = calloc(nn, sizeof(*s->periodic));
	s->phase = calloc(nn, sizeof(*s->phase));
	s->buf = fftw_malloc(nn * sizeof(*s->buf));
	if (s->n_sh > 0) {
		s->sh_fx = malloc(s->n_sh * sizeof(double));
		s->sh_fy = malloc(s->n_sh * sizeof(double));
		s->sh_sigma = malloc(s->n_sh * sizeof(double));
		s->sh_re = calloc(s->n_sh, sizeof(double));
		s->sh_im = calloc(s->n_sh, sizeof(double));
	}
	if (!s->sigma || !s->periodic || !s->phase || !s->buf ||
	    (s->n_sh > 0 && (!s->sh_fx || !s->sh_fy || !s->sh_sigma ||
			     !s->sh_re || !s->sh_im))) {
		sim_screen_destroy(s);
		return wt_error_set(err, -ENOMEM, "screen: out of memory");
	}
	/* Plan before the buffer is filled (planning may overwrite it). */
	s->plan = fftw_plan_dft_2d(n, n, s->buf, s->buf, FFTW_BACKWARD,
				   FFTW_ESTIMATE);
	if (!s->plan) {
		sim_screen_destroy(s);
		return wt_error_set(err, -ENOMEM, "screen: FFTW plan failed");
	}

	cell = s->df * s->df;
	for (b = 0; b < n; b++) {
		double fy = fft_freq(b, n, s->df);

		for (a = 0; a < n; a++) {
			double fx = fft_freq(a, n, s->df);

			f = hypot(fx, fy);
			s->sigma[(size_t)b * n + a] =
				(a == 0 && b == 0)
					? 0.0
					: sqrt(2.0 * cell *
					       sim_screen_psd(f, p->r0, p->L0));
		}
	}
	/* Lane et al. 1992: level l splits the cell around f = 0 of the
	 * level above into 3 x 3 cells of side df / 3^l, keeps the 8 outer
	 * ones and leaves the centre to the next level. */
	k = 0;
	for (l = 1; l <= p->subharmonic_levels; l++) {
		double dfl = s->df / pow(3.0, l);

		for (j = -1; j <= 1; j++) {
			for (i = -1; i <= 1; i++) {
				if (i == 0 && j == 0) {
					continue;
				}
				s->sh_fx[k] = i * dfl;
				s->sh_fy[k] = j * dfl;
				s->sh_sigma[k] =
					sqrt(2.0 * dfl * dfl *
					     sim_screen_psd(hypot(i, j) * dfl,
							    p->r0, p->L0));
				k++;
			}
		}
	}
	*out = s;
	return 0;
}

void sim_screen_destroy(sim_screen *s)
{
	if (!s) {
		return;
	}
	if (s->plan) {
		fftw_destroy_plan(s->plan);
	}
	fftw_free(s->buf);
	free(s->sigma);
	free(s->periodic);
	free(s->phase);
	free(s->sh_fx);
	free(s->sh_fy);
	free(s->sh_sigma);
	free(s->sh_re);
	free(s->sh_im);
	free(s);
}

const sim_screen_params *sim_screen_params_of(const sim_screen *s)
{
	return &s->p;
}

const double *sim_screen_phase(const sim_screen *s)
{
	return s->phase;
}

/* Re(c exp(2 pi i (fx x + fy y))) summed over the subharmonics, added to
 * out[j * m + i] at x = x0 + i step, y = y0 + j step.  The x factor is
 * advanced by a rotation recurrence (drift ~ m * 1e-16, harmless). */
static void add_subharmonics(const sim_screen *s, double x0, double y0,
			     double step, int m, int stride, double *out)
{
	int k, i, j;

	for (k = 0; k < s->n_sh; k++) {
		double ax = 2.0 * M_PI * s->sh_fx[k];
		double ay = 2.0 * M_PI * s->sh_fy[k];
		double rot_re = cos(ax * step), rot_im = sin(ax * step);
		double cre = s->sh_re[k], cim = s->sh_im[k];

		for (j = 0; j < m; j++) {
			double ph = ax * x0 + ay * (y0 + j * step);
			double er = cos(ph), ei = sin(ph);
			double zr = cre * er - cim * ei;
			double zi = cre * ei + cim * er;
			double *row = out + (size_t)j * stride;

			for (i = 0; i < m; i++) {
				double t;

				row[i] += zr;
				t = zr * rot_re - zi * rot_im;
				zi = zr * rot_im + zi * rot_re;
				zr = t;
			}
		}
	}
}

int sim_screen_generate(sim_screen *s, sim_rng *rng)
{
	size_t nn = (size_t)s->n * s->n, q;
	int k;

	/* E|c|^2 = sigma^2: real and imaginary parts N(0, sigma^2 / 2). */
	for (q = 0; q < nn; q++) {
		double g = s->sigma[q] * M_SQRT1_2;

		s->buf[q][0] = g * sim_rng_normal(rng);
		s->buf[q][1] = g * sim_rng_normal(rng);
	}
	fftw_execute(s->plan);
	for (q = 0; q < nn; q++) {
		s->periodic[q] = s->buf[q][0];
	}
	for (k = 0; k < s->n_sh; k++) {
		double g = s->sh_sigma[k] * M_SQRT1_2;

		s->sh_re[k] = g * sim_rng_normal(rng);
		s->sh_im[k] = g * sim_rng_normal(rng);
	}
	memcpy(s->phase, s->periodic, nn * sizeof(*s->phase));
	add_subharmonics(s, 0.0, 0.0, s->p.dx, s->n, s->n, s->phase);
	return 0;
}

int sim_screen_sample(const sim_screen *s, double x0, double y0, double step,
		      int m, double *out)
{
	int n = s->n, i, j;
	double inv = 1.0 / s->p.dx;

	if (!out || m < 1 || !(step > 0.0) || !isfinite(step) ||
	    !isfinite(x0) || !isfinite(y0)) {
		return -EINVAL;
	}
	for (j = 0; j < m; j++) {
		double v = (y0 + j * step) * inv;
		double fv = floor(v);
		double ty = v - fv;
		int b0 = (int)fmod(fv, n);
		int b1;

		if (b0 < 0) {
			b0 += n;
		}
		b1 = b0 + 1 == n ? 0 : b0 + 1;
		for (i = 0; i < m; i++) {
			double u = (x0 + i * step) * inv;
			double fu = floor(u);
			double tx = u - fu;
			int a0 = (int)fmod(fu, n);
			int a1;
			const double *r0, *r1;

			if (a0 < 0) {
				a0 += n;
			}
			a1 = a0 + 1 == n ? 0 : a0 + 1;
			r0 = s->periodic + (size_t)b0 * n;
			r1 = s->periodic + (size_t)b1 * n;
			out[(size_t)j * m + i] =
				(1.0 - ty) *
					((1.0 - tx) * r0[a0] + tx * r0[a1]) +
				ty * ((1.0 - tx) * r1[a0] + tx * r1[a1]);
		}
	}
	add_subharmonics(s, x0, y0, step, m, m, out);
	return 0;
}

double sim_screen_structure_expected(const sim_screen *s, double rx, double ry)
{
	int n = s->n, a, b, k;
	double sum = 0.0;

	for (b = 0; b < n; b++) {
		double py = fft_freq(b, n, s->df) * ry;
		const double *sg = s->sigma + (size_t)b * n;

		for (a = 0; a < n; a++) {
			double ph =
				2.0 * M_PI * (fft_freq(a, n, s->df) * rx + py);

			sum += sg[a] * sg[a] * (1.0 - cos(ph));
		}
	}
	for (k = 0; k < s->n_sh; k++) {
		double ph = 2.0 * M_PI * (s->sh_fx[k] * rx + s->sh_fy[k] * ry);

		sum += s->sh_sigma[k] * s->sh_sigma[k] * (1.0 - cos(ph));
	}
	return sum;
}

double sim_screen_structure_vk(double r, double r0, double L0)
{
	double c = sim_screen_psd_constant();
	double x;

	if (!(r > 0.0)) {
		return 0.0;
	}
	if (is_kolmogorov(L0)) {
		/* Fried 1965: 2 (24/5 Gamma(6/5))^(5/6) = 6.8839 */
		return 2.0 * pow(24.0 / 5.0 * tgamma(6.0 / 5.0), 5.0 / 6.0) *
		       pow(r / r0, 5.0 / 3.0);
	}
	x = 2.0 * M_PI * r / L0;
	return 2.4 * M_PI * c * pow(L0 / r0, 5.0 / 3.0) *
	       (1.0 - 2.0 * pow(M_PI, 5.0 / 6.0) / tgamma(5.0 / 6.0) *
			      pow(r / L0, 5.0 / 6.0) *
			      sim_bessel_k(5.0 / 6.0, x));
}

double sim_bessel_k(double nu, double x)
{
	/* Scaled integrand exp(-x (cosh t - 1)) cosh(nu t): even, analytic
	 * in the strip |Im t| < pi / 2, so the trapezoidal rule converges
	 * like exp(-pi^2 / h); near t = 0 it is a Gaussian of width
	 * 1 / sqrt(x), which h must resolve at large x. */
	double h, sum, t, term;
	int i;

	if (!(x > 0.0) || !isfinite(x) || !isfinite(nu)) {
		return NAN;
	}
	h = 0.05;
	if (h > 0.25 / sqrt(x)) {
		h = 0.25 / sqrt(x);
	}
	sum = 0.5;
	for (i = 1; i < 100000; i++) {
		t = i * h;
		term = exp(-x * (cosh(t) - 1.0)) * cosh(nu * t);
		sum += term;
		/* past the maximum of cosh(nu t) exp(-x cosh t), terms only
		 * shrink (faster than geometrically) */
		if (term < 1e-18 * sum && x * sinh(t) > fabs(nu)) {
			break;
		}
	}
	return h * sum * exp(-x);
}
