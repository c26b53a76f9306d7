/* sim_world.c - pupil, mirror, sample and camera together, and the truth. */
#include "sim_world.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "sim_optics.h"
#include "wt_recon.h"
#include "wt_zernike.h"

/* Modes fitted together for the truth: Noll 1 .. ZFIT_MODES. */
#define ZFIT_MODES (SIM_WORLD_ZERNIKE_FIRST - 1 + SIM_WORLD_ZERNIKES)

struct sim_world {
	sim_pupil *pupil;
	sim_mirror *mirror;
	sim_sample *sample;
	sim_camera *camera;
	double dt_s;
	double rad_per_um;
	double *w_sample, *w_mirror, *w_resid; /* n * n */
	double *phase;			       /* n_inside */
	double *px, *py;		       /* n_inside coordinates */
	double plane_inv[3][3]; /* inverse normal matrix of 1, x, y */
	double *zfit;  /* ZFIT_MODES x n_inside: pseudo-inverse of the modes */
	double *w_ncp; /* n * n: sensor arm's own aberration, or NULL */
	double *w_sensor; /* n * n: residual + w_ncp, what the camera sees */
};

static void mirror_params(const wt_config *cfg, sim_mirror_params *p)
{
	sim_mirror_params_default(p);
	p->actuators = (int)wt_config_int(cfg, WT_OPT_MIRROR_ACTUATORS);
	p->layout = (enum wt_layout)wt_config_enum(cfg, WT_OPT_MIRROR_LAYOUT);
	p->pupil_pitches = wt_config_double(cfg, WT_OPT_MIRROR_PUPIL_PITCHES);
	p->margin_pitches = wt_config_double(cfg, WT_OPT_MIRROR_MARGIN_PITCHES);
	p->stroke_um = wt_config_double(cfg, WT_OPT_DM_STROKE_UM);
	p->coupling = wt_config_double(cfg, WT_OPT_DM_COUPLING);
	p->dead = (int)wt_config_int(cfg, WT_OPT_DM_DEAD);
	p->weak = (int)wt_config_int(cfg, WT_OPT_DM_WEAK);
	p->weak_gain = wt_config_double(cfg, WT_OPT_DM_WEAK_GAIN);
	p->swap_a = (int)wt_config_int(cfg, WT_OPT_DM_SWAP_A);
	p->swap_b = (int)wt_config_int(cfg, WT_OPT_DM_SWAP_B);
	p->shift_x = wt_config_double(cfg, WT_OPT_DM_SHIFT_X);
	p->shift_y = wt_config_double(cfg, WT_OPT_DM_SHIFT_Y);
	p->rotation_deg = wt_config_double(cfg, WT_OPT_DM_ROTATION_DEG);
}

static void camera_params(const wt_config *cfg, sim_camera_params *p,
			  uint64_t seed)
{
	sim_camera_params_default(p);
	p->n_lenslets = (int)wt_config_int(cfg, WT_OPT_SENSOR_LENSLETS);
	p->pixels_per_lenslet =
		(int)wt_config_int(cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	p->pixel_um = wt_config_double(cfg, WT_OPT_SENSOR_PIXEL_PITCH_UM);
	p->focal_mm = wt_config_double(cfg, WT_OPT_SENSOR_FOCAL_LENGTH_MM);
	p->wavelength_nm = wt_config_double(cfg, WT_OPT_SENSOR_WAVELENGTH_NM);
	/* choices "geometric|diffraction" */
	p->model = wt_config_enum(cfg, WT_OPT_CAMERA_SPOT_MODEL) == 0
			   ? SIM_SPOT_GAUSSIAN
			   : SIM_SPOT_DIFFRACTION;
	p->photons = wt_config_double(cfg, WT_OPT_CAMERA_PHOTONS);
	p->photon_noise = wt_config_bool(cfg, WT_OPT_CAMERA_PHOTON_NOISE);
	p->read_noise_e = wt_config_double(cfg, WT_OPT_CAMERA_READ_NOISE_E);
	p->background_e = wt_config_double(cfg, WT_OPT_CAMERA_BACKGROUND_E);
	p->offset_counts = wt_config_double(cfg, WT_OPT_CAMERA_OFFSET_COUNTS);
	p->gain = wt_config_double(cfg, WT_OPT_CAMERA_GAIN);
	p->bit_depth = (int)wt_config_int(cfg, WT_OPT_CAMERA_BIT_DEPTH);
	p->seed = seed;
}

static int sample_create(const wt_config *cfg, const sim_pupil *pupil,
			 uint64_t seed, sim_sample **out, wt_error *err)
{
	int noll[WT_CONFIG_LIST_MAX];
	double coef[WT_CONFIG_LIST_MAX];
	sim_sample_params p;
	int n;

	n = wt_config_zlist(cfg, WT_OPT_SAMPLE_ZERNIKE, noll, coef,
			    WT_CONFIG_LIST_MAX);
	if (n < 0) {
		return wt_error_set(err, n, "sample.zernike: not readable");
	}
	sim_sample_params_default(&p);
	p.n_modes = n;
	p.noll = noll;
	p.coef_um = coef;
	p.drift_nm_per_sqrt_s =
		wt_config_double(cfg, WT_OPT_SAMPLE_DRIFT_NM_PER_SQRT_S);
	p.drift_max_noll =
		(int)wt_config_int(cfg, WT_OPT_SAMPLE_DRIFT_MAX_NOLL);
	p.seed = seed;
	p.turbulence = wt_config_bool(cfg, WT_OPT_TURBULENCE_ENABLED);
	p.d_over_r0 = wt_config_double(cfg, WT_OPT_TURBULENCE_D_OVER_R0);
	p.outer_scale_pupils =
		wt_config_double(cfg, WT_OPT_TURBULENCE_OUTER_SCALE_PUPILS);
	p.wind_pupils_per_s =
		wt_config_double(cfg, WT_OPT_TURBULENCE_WIND_PUPILS_PER_S);
	p.wind_angle_deg =
		wt_config_double(cfg, WT_OPT_TURBULENCE_WIND_ANGLE_DEG);
	p.wavelength_nm = wt_config_double(cfg, WT_OPT_SENSOR_WAVELENGTH_NM);
	return sim_sample_create(&p, pupil, out, err);
}

/* Invert the symmetric 3 x 3 normal matrix of the plane fit (cofactors). */
static int invert3(const double m[3][3], double inv[3][3])
{
	double det = m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) -
		     m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0]) +
		     m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]);
	int i, j;

	if (!(fabs(det) > 0.0)) {
		return -EDOM;
	}
	for (i = 0; i < 3; i++) {
		for (j = 0; j < 3; j++) {
			int r0 = (j + 1) % 3, r1 = (j + 2) % 3;
			int c0 = (i + 1) % 3, c1 = (i + 2) % 3;

			inv[i][j] = (m[r0][c0] * m[r1][c1] -
				     m[r0][c1] * m[r1][c0]) /
				    det;
		}
	}
	return 0;
}

/*
 * The least-squares fit of Noll 1 .. ZFIT_MODES over the pupil's samples:
 * the pseudo-inverse of A (n_inside x modes, A[q][c] = Z_{c+1} at sample
 * q) by the SVD (lib/wt_recon), so the coefficients are zfit . w.
 */
static int zernike_fit_create(sim_world *w)
{
	const sim_pupil *pp = w->pupil;
	int n = pp->n_inside, q, c, rc;
	double *A = malloc(sizeof(double) * (size_t)n * ZFIT_MODES);
	wt_svd *svd = NULL;

	w->zfit = malloc(sizeof(double) * (size_t)n * ZFIT_MODES);
	if (!A || !w->zfit || n < ZFIT_MODES) {
		free(A);
		return -ENOMEM;
	}
	for (q = 0; q < n; q++) {
		for (c = 0; c < ZFIT_MODES; c++) {
			A[(size_t)q * ZFIT_MODES + (size_t)c] =
				wt_zernike_xy(c + 1, w->px[q], w->py[q]);
		}
	}
	rc = wt_svd_compute(A, n, ZFIT_MODES, &svd, NULL);
	if (rc == 0) {
		rc = wt_recon_pinv(svd, ZFIT_MODES, NULL, w->zfit);
	}
	wt_svd_destroy(svd);
	free(A);
	return rc;
}

void sim_world_zernikes(const sim_world *w, const double *wavefront_um,
			double *nm)
{
	const sim_pupil *pp = w->pupil;
	int i, q;

	for (i = 0; i < SIM_WORLD_ZERNIKES; i++) {
		const double *row =
			w->zfit + (size_t)(SIM_WORLD_ZERNIKE_FIRST - 1 + i) *
					  (size_t)pp->n_inside;
		double a = 0;

		for (q = 0; q < pp->n_inside; q++) {
			a += row[q] * wavefront_um[pp->inside[q]];
		}
		nm[i] = 1e3 * a;
	}
}

static int sim_world_buffers(sim_world *w)
{
	const sim_pupil *pp = w->pupil;
	size_t nn = (size_t)pp->n * pp->n;
	double m[3][3] = {{0}};
	int q;

	w->w_sample = calloc(nn, sizeof(double));
	w->w_mirror = calloc(nn, sizeof(double));
	w->w_resid = calloc(nn, sizeof(double));
	w->phase = calloc((size_t)pp->n_inside, sizeof(double));
	w->px = calloc((size_t)pp->n_inside, sizeof(double));
	w->py = calloc((size_t)pp->n_inside, sizeof(double));
	if (!w->w_sample || !w->w_mirror || !w->w_resid || !w->phase ||
	    !w->px || !w->py) {
		return -ENOMEM;
	}
	for (q = 0; q < pp->n_inside; q++) {
		double x = sim_pupil_coord(pp, pp->inside[q] % pp->n);
		double y = sim_pupil_coord(pp, pp->inside[q] / pp->n);

		w->px[q] = x;
		w->py[q] = y;
		m[0][0] += 1.0;
		m[0][1] += x;
		m[0][2] += y;
		m[1][1] += x * x;
		m[1][2] += x * y;
		m[2][2] += y * y;
	}
	m[1][0] = m[0][1];
	m[2][0] = m[0][2];
	m[2][1] = m[1][2];
	if (zernike_fit_create(w) < 0) {
		return -ENOMEM;
	}
	return invert3(m, w->plane_inv);
}

/* sim.ncp_zernike as a map over the whole grid (none: w->w_ncp NULL). */
static int ncp_create(sim_world *w, const wt_config *cfg, wt_error *err)
{
	const sim_pupil *pp = w->pupil;
	int noll[WT_CONFIG_LIST_MAX];
	double coef[WT_CONFIG_LIST_MAX];
	int n = wt_config_zlist(cfg, WT_OPT_SIM_NCP_ZERNIKE, noll, coef,
				WT_CONFIG_LIST_MAX);
	size_t nn = (size_t)pp->n * pp->n;
	int a, b, k;

	if (n < 0) {
		return wt_error_set(err, n, "sim.ncp_zernike: not readable");
	}
	if (n == 0) {
		return 0;
	}
	w->w_ncp = calloc(nn, sizeof(double));
	w->w_sensor = calloc(nn, sizeof(double));
	if (!w->w_ncp || !w->w_sensor) {
		return wt_error_set(err, -ENOMEM, "sim: out of memory");
	}
	for (b = 0; b < pp->n; b++) {
		for (a = 0; a < pp->n; a++) {
			double x = sim_pupil_coord(pp, a);
			double y = sim_pupil_coord(pp, b);

			for (k = 0; k < n; k++) {
				w->w_ncp[b * pp->n + a] +=
					coef[k] * wt_zernike_xy(noll[k], x, y);
			}
		}
	}
	return 0;
}

int sim_world_create(const wt_config *cfg, sim_world **out, wt_error *err)
{
	sim_mirror_params mp;
	sim_camera_params cp;
	sim_world *w;
	uint64_t seed;
	int rc;

	if (!cfg || !out) {
		return wt_error_set(err, -EINVAL, "sim: NULL argument");
	}
	*out = NULL;
	w = calloc(1, sizeof(*w));
	if (!w) {
		return wt_error_set(err, -ENOMEM, "sim: out of memory");
	}
	seed = (uint64_t)wt_config_int(cfg, WT_OPT_SIM_SEED);
	w->dt_s = 1.0 / wt_config_double(cfg, WT_OPT_SIM_FRAME_RATE_HZ);
	w->rad_per_um =
		2.0 * M_PI /
		(1e-3 * wt_config_double(cfg, WT_OPT_SENSOR_WAVELENGTH_NM));
	rc = sim_pupil_create(
		(int)wt_config_int(cfg, WT_OPT_SENSOR_LENSLETS),
		(int)wt_config_int(cfg, WT_OPT_SIM_SAMPLES_PER_LENSLET),
		wt_config_double(cfg, WT_OPT_SENSOR_OBSCURATION), &w->pupil,
		err);
	if (rc < 0) {
		goto fail;
	}
	mirror_params(cfg, &mp);
	rc = sim_mirror_create(&mp, w->pupil, &w->mirror, err);
	if (rc < 0) {
		goto fail;
	}
	/* independent streams for the sample and the camera */
	rc = sample_create(cfg, w->pupil, seed * 2 + 1, &w->sample, err);
	if (rc < 0) {
		goto fail;
	}
	camera_params(cfg, &cp, seed * 2 + 2);
	rc = sim_camera_create(&cp, w->pupil, &w->camera, err);
	if (rc < 0) {
		goto fail;
	}
	rc = sim_world_buffers(w);
	if (rc < 0) {
		wt_error_set(err, rc, "sim: out of memory or empty pupil");
		goto fail;
	}
	rc = ncp_create(w, cfg, err);
	if (rc < 0) {
		goto fail;
	}
	*out = w;
	return 0;
fail:
	sim_world_destroy(w);
	return rc;
}

void sim_world_destroy(sim_world *w)
{
	if (!w) {
		return;
	}
	sim_camera_destroy(w->camera);
	sim_sample_destroy(w->sample);
	sim_mirror_destroy(w->mirror);
	sim_pupil_destroy(w->pupil);
	free(w->w_sample);
	free(w->w_mirror);
	free(w->w_resid);
	free(w->phase);
	free(w->px);
	free(w->py);
	free(w->zfit);
	free(w->w_ncp);
	free(w->w_sensor);
	free(w);
}

const sim_pupil *sim_world_pupil(const sim_world *w)
{
	return w->pupil;
}

sim_mirror *sim_world_mirror(sim_world *w)
{
	return w->mirror;
}

sim_sample *sim_world_sample(sim_world *w)
{
	return w->sample;
}

sim_camera *sim_world_camera(sim_world *w)
{
	return w->camera;
}

int sim_world_width(const sim_world *w)
{
	return sim_camera_width(w->camera);
}

int sim_world_actuators(const sim_world *w)
{
	return sim_mirror_count(w->mirror);
}

double sim_world_dt(const sim_world *w)
{
	return w->dt_s;
}

void sim_world_figures(sim_world *w, const double *wavefront_um, double *rms_nm,
		       double *rms_tt_removed_nm, double *strehl)
{
	const sim_pupil *pp = w->pupil;
	double s0 = 0, sx = 0, sy = 0, s2 = 0, mean, c[3], r2 = 0;
	int q, i;

	for (q = 0; q < pp->n_inside; q++) {
		double v = wavefront_um[pp->inside[q]];

		s0 += v;
		sx += v * w->px[q];
		sy += v * w->py[q];
		w->phase[q] = v * w->rad_per_um;
	}
	mean = s0 / pp->n_inside;
	for (i = 0; i < 3; i++) {
		c[i] = w->plane_inv[i][0] * s0 + w->plane_inv[i][1] * sx +
		       w->plane_inv[i][2] * sy;
	}
	for (q = 0; q < pp->n_inside; q++) {
		double v = wavefront_um[pp->inside[q]];
		double d = v - mean;
		double e = v - c[0] - c[1] * w->px[q] - c[2] * w->py[q];

		s2 += d * d;
		r2 += e * e;
	}
	if (rms_nm) {
		*rms_nm = 1e3 * sqrt(s2 / pp->n_inside);
	}
	if (rms_tt_removed_nm) {
		*rms_tt_removed_nm = 1e3 * sqrt(r2 / pp->n_inside);
	}
	if (strehl) {
		*strehl =
			sim_optics_strehl((size_t)pp->n_inside, w->phase, NULL);
	}
}

/* residual = sample - mirror wavefront, into w->w_resid */
static void sim_world_residual(sim_world *w)
{
	const sim_pupil *pp = w->pupil;
	size_t nn = (size_t)pp->n * pp->n, s;

	sim_sample_wavefront(w->sample, w->w_sample);
	sim_mirror_wavefront(w->mirror, w->w_mirror);
	for (s = 0; s < nn; s++) {
		w->w_resid[s] = w->w_sample[s] - w->w_mirror[s];
	}
}

void sim_world_truth_now(sim_world *w, sim_world_truth *truth)
{
	sim_world_residual(w);
	truth->time_s = sim_sample_time(w->sample);
	truth->saturated = 0;
	sim_world_figures(w, w->w_resid, &truth->rms_nm,
			  &truth->rms_tt_removed_nm, &truth->strehl);
	sim_world_zernikes(w, w->w_resid, truth->zernike_nm);
}

int sim_world_expose(sim_world *w, uint16_t *frame, sim_world_truth *truth)
{
	sim_world_truth t;
	int rc;

	sim_world_residual(w);
	t.time_s = sim_sample_time(w->sample);
	sim_world_figures(w, w->w_resid, &t.rms_nm, &t.rms_tt_removed_nm,
			  &t.strehl);
	sim_world_zernikes(w, w->w_resid, t.zernike_nm);
	if (w->w_ncp) {
		size_t nn = (size_t)w->pupil->n * w->pupil->n, s;

		for (s = 0; s < nn; s++) {
			w->w_sensor[s] = w->w_resid[s] + w->w_ncp[s];
		}
	}
	rc = sim_camera_expose(w->camera, w->w_ncp ? w->w_sensor : w->w_resid,
			       frame);
	if (rc < 0) {
		return rc;
	}
	t.saturated = rc;
	sim_sample_advance(w->sample, w->dt_s);
	if (truth) {
		*truth = t;
	}
	return 0;
}
