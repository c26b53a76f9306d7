/* sim_mirror.c - the simulated deformable mirror. */
#include "sim_mirror.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Influence functions are kept out to this many sigma. */
#define SIM_IF_RADIUS_SIGMA 4.0

struct sim_mirror {
	const sim_pupil *pupil;
	wt_grid *grid;
	int n_act;
	double stroke_um;
	double sigma;
	double *pos_x, *pos_y; /* physical actuator positions */
	int *channel_actuator; /* channel k drives actuator channel_actuator[k]
				*/
	double *channel_gain;
	/* CSR: actuator a touches samples idx[start[a] .. start[a + 1]) */
	size_t *start;
	int *idx;
	double *val;
	float *cmd;
	int clipped_last;
	long clipped_total;
};

void sim_mirror_params_default(sim_mirror_params *p)
{
	memset(p, 0, sizeof(*p));
	p->actuators = 12;
	p->layout = WT_LAYOUT_CORNERS;
	p->pupil_pitches = 11.0;
	p->margin_pitches = 0.5;
	p->stroke_um = 1.0;
	p->coupling = 0.15;
	p->dead = -1;
	p->weak = -1;
	p->weak_gain = 1.0;
	p->swap_a = -1;
	p->swap_b = -1;
}

static int sim_mirror_check(const sim_mirror_params *p, int n_act,
			    wt_error *err)
{
	if (!(p->coupling > 0.0 && p->coupling < 1.0)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: coupling %g outside (0, 1)",
				    p->coupling);
	}
	if (!(p->stroke_um > 0.0) || !isfinite(p->stroke_um)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: stroke %g um refused",
				    p->stroke_um);
	}
	if (p->dead < -1 || p->dead >= n_act) {
		return wt_error_set(err, -EINVAL,
				    "mirror: dead actuator %d not in 0..%d",
				    p->dead, n_act - 1);
	}
	if (p->weak < -1 || p->weak >= n_act) {
		return wt_error_set(err, -EINVAL,
				    "mirror: weak actuator %d not in 0..%d",
				    p->weak, n_act - 1);
	}
	if (!(p->weak_gain >= 0.0 && p->weak_gain <= 1.0)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: weak gain %g outside [0, 1]",
				    p->weak_gain);
	}
	if ((p->swap_a < 0) != (p->swap_b < 0)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: swap needs both channels (%d, %d)",
				    p->swap_a, p->swap_b);
	}
	if (p->swap_a >= 0 && (p->swap_a >= n_act || p->swap_b >= n_act ||
			       p->swap_a == p->swap_b)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: swap (%d, %d) refused (0..%d)",
				    p->swap_a, p->swap_b, n_act - 1);
	}
	if (p->swap_a < -1 || p->swap_b < -1) {
		return wt_error_set(err, -EINVAL, "mirror: swap index < -1");
	}
	if (!isfinite(p->shift_x) || !isfinite(p->shift_y) ||
	    !isfinite(p->rotation_deg)) {
		return wt_error_set(err, -EINVAL,
				    "mirror: misregistration not finite");
	}
	return 0;
}

/* Tabulate every actuator's influence function on the pupil samples. */
static int sim_mirror_tabulate(sim_mirror *m)
{
	const sim_pupil *pp = m->pupil;
	double reach = SIM_IF_RADIUS_SIGMA * m->sigma;
	double inv2s2 = 1.0 / (2.0 * m->sigma * m->sigma);
	size_t cap = 0, used = 0;
	int a;

	m->start = calloc((size_t)m->n_act + 1, sizeof(*m->start));
	if (!m->start) {
		return -ENOMEM;
	}
	for (a = 0; a < m->n_act; a++) {
		double ax = m->pos_x[a], ay = m->pos_y[a];
		int c0 = (int)floor((ax - reach) / pp->step + 0.5 * pp->n);
		int c1 = (int)ceil((ax + reach) / pp->step + 0.5 * pp->n);
		int r0 = (int)floor((ay - reach) / pp->step + 0.5 * pp->n);
		int r1 = (int)ceil((ay + reach) / pp->step + 0.5 * pp->n);
		int c, r;

		c0 = c0 < 0 ? 0 : c0;
		r0 = r0 < 0 ? 0 : r0;
		c1 = c1 > pp->n - 1 ? pp->n - 1 : c1;
		r1 = r1 > pp->n - 1 ? pp->n - 1 : r1;
		m->start[a] = used;
		for (r = r0; r <= r1; r++) {
			double dy = sim_pupil_coord(pp, r) - ay;

			for (c = c0; c <= c1; c++) {
				double dx = sim_pupil_coord(pp, c) - ax;
				double d2 = dx * dx + dy * dy;
				int s = r * pp->n + c;

				if (d2 > reach * reach) {
					continue;
				}
				if (used == cap) {
					size_t nc = cap ? 2 * cap : 4096;
					int *ni = realloc(m->idx,
							  nc * sizeof(*ni));
					double *nv;

					if (!ni) {
						return -ENOMEM;
					}
					m->idx = ni;
					nv = realloc(m->val, nc * sizeof(*nv));
					if (!nv) {
						return -ENOMEM;
					}
					m->val = nv;
					cap = nc;
				}
				m->idx[used] = s;
				m->val[used] = exp(-d2 * inv2s2);
				used++;
			}
		}
	}
	m->start[m->n_act] = used;
	return 0;
}

int sim_mirror_create(const sim_mirror_params *p, const sim_pupil *pupil,
		      sim_mirror **out, wt_error *err)
{
	sim_mirror *m;
	double rot, cr, sr, lenslet_pitch;
	int k, rc;

	if (!out || !p || !pupil) {
		return wt_error_set(err, -EINVAL, "mirror: NULL argument");
	}
	*out = NULL;
	m = calloc(1, sizeof(*m));
	if (!m) {
		return wt_error_set(err, -ENOMEM, "mirror: out of memory");
	}
	m->pupil = pupil;
	rc = wt_grid_actuators(p->actuators, p->layout, p->pupil_pitches,
			       p->margin_pitches, &m->grid, err);
	if (rc < 0) {
		free(m);
		return rc;
	}
	m->n_act = m->grid->n_valid;
	rc = sim_mirror_check(p, m->n_act, err);
	if (rc < 0) {
		sim_mirror_destroy(m);
		return rc;
	}
	m->stroke_um = p->stroke_um;
	/* IF(pitch) = w  <=>  exp(-pitch^2 / (2 sigma^2)) = w */
	m->sigma = m->grid->pitch / sqrt(-2.0 * log(p->coupling));
	m->pos_x = calloc((size_t)m->n_act, sizeof(double));
	m->pos_y = calloc((size_t)m->n_act, sizeof(double));
	m->channel_actuator = calloc((size_t)m->n_act, sizeof(int));
	m->channel_gain = calloc((size_t)m->n_act, sizeof(double));
	m->cmd = calloc((size_t)m->n_act, sizeof(float));
	if (!m->pos_x || !m->pos_y || !m->channel_actuator ||
	    !m->channel_gain || !m->cmd) {
		sim_mirror_destroy(m);
		return wt_error_set(err, -ENOMEM, "mirror: out of memory");
	}
	rot = p->rotation_deg * M_PI / 180.0;
	cr = cos(rot);
	sr = sin(rot);
	lenslet_pitch = 2.0 / pupil->n_lenslets;
	for (k = 0; k < m->n_act; k++) {
		double x = m->grid->x[k], y = m->grid->y[k];

		m->pos_x[k] = cr * x - sr * y + p->shift_x * lenslet_pitch;
		m->pos_y[k] = sr * x + cr * y + p->shift_y * lenslet_pitch;
		m->channel_actuator[k] = k;
		m->channel_gain[k] = 1.0;
	}
	if (p->swap_a >= 0) {
		m->channel_actuator[p->swap_a] = p->swap_b;
		m->channel_actuator[p->swap_b] = p->swap_a;
	}
	/* Gains belong to the channel named in the options. */
	if (p->weak >= 0) {
		m->channel_gain[p->weak] = p->weak_gain;
	}
	if (p->dead >= 0) {
		m->channel_gain[p->dead] = 0.0;
	}
	if (sim_mirror_tabulate(m) < 0) {
		sim_mirror_destroy(m);
		return wt_error_set(err, -ENOMEM, "mirror: out of memory");
	}
	*out = m;
	return 0;
}

void sim_mirror_destroy(sim_mirror *m)
{
	if (!m) {
		return;
	}
	wt_grid_destroy(m->grid);
	free(m->pos_x);
	free(m->pos_y);
	free(m->channel_actuator);
	free(m->channel_gain);
	free(m->start);
	free(m->idx);
	free(m->val);
	free(m->cmd);
	free(m);
}

int sim_mirror_count(const sim_mirror *m)
{
	return m->n_act;
}

const wt_grid *sim_mirror_grid(const sim_mirror *m)
{
	return m->grid;
}

double sim_mirror_sigma(const sim_mirror *m)
{
	return m->sigma;
}

void sim_mirror_position(const sim_mirror *m, int k, double *x, double *y)
{
	*x = m->pos_x[k];
	*y = m->pos_y[k];
}

int sim_mirror_apply(sim_mirror *m, const float *cmd)
{
	int k, clipped = 0;

	for (k = 0; k < m->n_act; k++) {
		if (!isfinite(cmd[k])) {
			return -ERANGE;
		}
	}
	for (k = 0; k < m->n_act; k++) {
		float c = cmd[k];

		if (c > 1.0f) {
			c = 1.0f;
			clipped++;
		} else if (c < -1.0f) {
			c = -1.0f;
			clipped++;
		}
		m->cmd[k] = c;
	}
	m->clipped_last = clipped;
	m->clipped_total += clipped;
	return clipped;
}

const float *sim_mirror_command(const sim_mirror *m)
{
	return m->cmd;
}

int sim_mirror_clipped_last(const sim_mirror *m)
{
	return m->clipped_last;
}

long sim_mirror_clipped_total(const sim_mirror *m)
{
	return m->clipped_total;
}

void sim_mirror_surface(const sim_mirror *m, double *surface_um)
{
	size_t nn = (size_t)m->pupil->n * m->pupil->n;
	int k;

	memset(surface_um, 0, nn * sizeof(*surface_um));
	for (k = 0; k < m->n_act; k++) {
		int a = m->channel_actuator[k];
		double amp = m->stroke_um * m->channel_gain[k] * m->cmd[k];
		size_t e;

		if (amp == 0.0) {
			continue;
		}
		for (e = m->start[a]; e < m->start[a + 1]; e++) {
			surface_um[m->idx[e]] += amp * m->val[e];
		}
	}
}

void sim_mirror_wavefront(const sim_mirror *m, double *wavefront_um)
{
	size_t nn = (size_t)m->pupil->n * m->pupil->n, s;

	sim_mirror_surface(m, wavefront_um);
	for (s = 0; s < nn; s++) {
		wavefront_um[s] *= 2.0; /* reflection doubles the path */
	}
}
