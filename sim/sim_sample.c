/* sim_sample.c - static aberration, drift and turbulence of the sample. */
#include "sim_sample.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "sim_rng.h"
#include "sim_screen.h"
#include "wt_zernike.h"

/* Subharmonic levels of the screen (Lane et al. 1992: 3 is usual). */
#define SIM_SCREEN_LEVELS 3

struct sim_sample {
	const sim_pupil *pupil;
	int n_modes;
	int *noll;
	double *coef_um;
	unsigned char *drifts;
	float *basis; /* n_modes x n * n */
	double drift_um_per_sqrt_s;
	double time_s;
	sim_rng rng;
	/* turbulence */
	sim_screen *screen;
	double *screen_buf; /* n * n radians */
	double screen_um_per_rad;
	double wind_dx, wind_dy; /* pupil diameters per second */
};

void sim_sample_params_default(sim_sample_params *p)
{
	memset(p, 0, sizeof(*p));
	p->d_over_r0 = 2.0;
	p->outer_scale_pupils = 10.0;
	p->wind_pupils_per_s = 1.0;
	p->wavelength_nm = 920.0;
}

static int find_mode(const sim_sample *s, int j)
{
	int k;

	for (k = 0; k < s->n_modes; k++) {
		if (s->noll[k] == j) {
			return k;
		}
	}
	return -1;
}

static int sim_sample_modes(sim_sample *s, const sim_sample_params *p,
			    wt_error *err)
{
	int total = p->n_modes, k, j;

	if (p->n_modes < 0 || (p->n_modes > 0 && (!p->noll || !p->coef_um))) {
		return wt_error_set(err, -EINVAL, "sample: bad mode list");
	}
	if (p->drift_max_noll > 1) {
		total += p->drift_max_noll - 1;
	}
	if (total > SIM_SAMPLE_MAX_MODES) {
		return wt_error_set(err, -EINVAL,
				    "sample: %d Zernike terms, at most %d",
				    total, SIM_SAMPLE_MAX_MODES);
	}
	s->noll = calloc((size_t)total + 1, sizeof(*s->noll));
	s->coef_um = calloc((size_t)total + 1, sizeof(*s->coef_um));
	s->drifts = calloc((size_t)total + 1, 1);
	if (!s->noll || !s->coef_um || !s->drifts) {
		return wt_error_set(err, -ENOMEM, "sample: out of memory");
	}
	for (k = 0; k < p->n_modes; k++) {
		if (p->noll[k] < 1 || !isfinite(p->coef_um[k])) {
			return wt_error_set(err, -EINVAL,
					    "sample: term %d:%g refused",
					    p->noll[k], p->coef_um[k]);
		}
		if (find_mode(s, p->noll[k]) >= 0) {
			return wt_error_set(
				err, -EINVAL,
				"sample: Noll index %d listed twice",
				p->noll[k]);
		}
		s->noll[s->n_modes] = p->noll[k];
		s->coef_um[s->n_modes] = p->coef_um[k];
		s->drifts[s->n_modes] = 1;
		s->n_modes++;
	}
	for (j = 2; j <= p->drift_max_noll; j++) {
		if (find_mode(s, j) < 0) {
			s->noll[s->n_modes] = j;
			s->coef_um[s->n_modes] = 0.0;
			s->drifts[s->n_modes] = 1;
			s->n_modes++;
		}
	}
	return 0;
}

static int sim_sample_tabulate(sim_sample *s)
{
	const sim_pupil *pp = s->pupil;
	size_t nn = (size_t)pp->n * pp->n;
	int k, a, b;

	s->basis = calloc((size_t)s->n_modes * nn + 1, sizeof(*s->basis));
	if (!s->basis) {
		return -ENOMEM;
	}
	for (k = 0; k < s->n_modes; k++) {
		float *row = s->basis + (size_t)k * nn;

		for (b = 0; b < pp->n; b++) {
			double y = sim_pupil_coord(pp, b);

			for (a = 0; a < pp->n; a++) {
				double x = sim_pupil_coord(pp, a);

				row[b * pp->n + a] =
					(float)wt_zernike_xy(s->noll[k], x, y);
			}
		}
	}
	return 0;
}

static int sim_sample_screen(sim_sample *s, const sim_sample_params *p,
			     wt_error *err)
{
	sim_screen_params sp;
	double ang;
	int n = 8, rc;

	if (!(p->d_over_r0 > 0.0) || !isfinite(p->d_over_r0) ||
	    !(p->outer_scale_pupils >= 0.0) || !(p->wavelength_nm > 0.0) ||
	    !isfinite(p->wind_pupils_per_s) || !isfinite(p->wind_angle_deg)) {
		return wt_error_set(err, -EINVAL,
				    "sample: turbulence parameters refused");
	}
	/* A screen of at least 4 pupils across keeps the periodic FFT part
	 * from repeating within the pupil (the subharmonics never repeat). */
	while (n < 4 * s->pupil->n && n < 8192) {
		n *= 2;
	}
	sp.n = n;
	sp.dx = 0.5 * s->pupil->step; /* lengths in pupil diameters */
	sp.r0 = 1.0 / p->d_over_r0;
	sp.L0 = p->outer_scale_pupils;
	sp.subharmonic_levels = SIM_SCREEN_LEVELS;
	rc = sim_screen_create(&sp, &s->screen, err);
	if (rc < 0) {
		return rc;
	}
	s->screen_buf = calloc((size_t)s->pupil->n * s->pupil->n,
			       sizeof(*s->screen_buf));
	if (!s->screen_buf) {
		return wt_error_set(err, -ENOMEM, "sample: out of memory");
	}
	sim_screen_generate(s->screen, &s->rng);
	s->screen_um_per_rad = p->wavelength_nm * 1e-3 / (2.0 * M_PI);
	ang = p->wind_angle_deg * M_PI / 180.0;
	s->wind_dx = p->wind_pupils_per_s * cos(ang);
	s->wind_dy = p->wind_pupils_per_s * sin(ang);
	return 0;
}

int sim_sample_create(const sim_sample_params *p, const sim_pupil *pupil,
		      sim_sample **out, wt_error *err)
{
	sim_sample *s;
	int rc;

	if (!p || !pupil || !out) {
		return wt_error_set(err, -EINVAL, "sample: NULL argument");
	}
	*out = NULL;
	if (!(p->drift_nm_per_sqrt_s >= 0.0) ||
	    !isfinite(p->drift_nm_per_sqrt_s)) {
		return wt_error_set(err, -EINVAL,
				    "sample: drift rate %g refused",
				    p->drift_nm_per_sqrt_s);
	}
	s = calloc(1, sizeof(*s));
	if (!s) {
		return wt_error_set(err, -ENOMEM, "sample: out of memory");
	}
	s->pupil = pupil;
	s->drift_um_per_sqrt_s = p->drift_nm_per_sqrt_s * 1e-3;
	sim_rng_seed(&s->rng, p->seed);
	rc = sim_sample_modes(s, p, err);
	if (rc == 0 && sim_sample_tabulate(s) < 0) {
		rc = wt_error_set(err, -ENOMEM, "sample: out of memory");
	}
	if (rc == 0 && p->turbulence) {
		rc = sim_sample_screen(s, p, err);
	}
	if (rc < 0) {
		sim_sample_destroy(s);
		return rc;
	}
	*out = s;
	return 0;
}

void sim_sample_destroy(sim_sample *s)
{
	if (!s) {
		return;
	}
	free(s->noll);
	free(s->coef_um);
	free(s->drifts);
	free(s->basis);
	sim_screen_destroy(s->screen);
	free(s->screen_buf);
	free(s);
}

void sim_sample_advance(sim_sample *s, double dt_s)
{
	int k;

	if (!(dt_s > 0.0)) {
		return;
	}
	if (s->drift_um_per_sqrt_s > 0.0) {
		double step = s->drift_um_per_sqrt_s * sqrt(dt_s);

		for (k = 0; k < s->n_modes; k++) {
			if (s->drifts[k]) {
				s->coef_um[k] += step * sim_rng_normal(&s->rng);
			}
		}
	}
	s->time_s += dt_s;
}

double sim_sample_time(const sim_sample *s)
{
	return s->time_s;
}

void sim_sample_wavefront(sim_sample *s, double *wavefront_um)
{
	const sim_pupil *pp = s->pupil;
	size_t nn = (size_t)pp->n * pp->n, q;
	int k;

	memset(wavefront_um, 0, nn * sizeof(*wavefront_um));
	for (k = 0; k < s->n_modes; k++) {
		const float *row = s->basis + (size_t)k * nn;
		double a = s->coef_um[k];

		if (a == 0.0) {
			continue;
		}
		for (q = 0; q < nn; q++) {
			wavefront_um[q] += a * row[q];
		}
	}
	if (s->screen) {
		double step = 0.5 * pp->step;

		/* a screen moving at v shows phi0(x - v t) in the pupil */
		sim_screen_sample(s->screen, -s->wind_dx * s->time_s,
				  -s->wind_dy * s->time_s, step, pp->n,
				  s->screen_buf);
		for (q = 0; q < nn; q++) {
			wavefront_um[q] +=
				s->screen_buf[q] * s->screen_um_per_rad;
		}
	}
}

int sim_sample_coefficients(const sim_sample *s, int *noll, double *coef_um,
			    int max)
{
	int k;

	for (k = 0; k < s->n_modes && k < max; k++) {
		if (noll) {
			noll[k] = s->noll[k];
		}
		if (coef_um) {
			coef_um[k] = s->coef_um[k];
		}
	}
	return s->n_modes;
}
