/* sim_camera.c - the simulated Shack-Hartmann camera. */
#include "sim_camera.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "sim_rng.h"

struct sim_camera {
	sim_camera_params p;
	const sim_pupil *pupil;
	sim_spots *spots;
	int width;
	size_t n_pix;
	double photons_per_lenslet;
	double rad_per_um; /* phase per micrometre of path */
	double top;	   /* 2^bits - 1 */
	double *phase;	   /* pupil grid, radians */
	double *amp;	   /* pupil grid, 0 / 1 */
	float *expected;   /* width^2 electrons */
	sim_rng rng;
};

void sim_camera_params_default(sim_camera_params *p)
{
	memset(p, 0, sizeof(*p));
	p->n_lenslets = 16;
	p->pixels_per_lenslet = 16;
	p->pixel_um = 6.5;
	p->focal_mm = 5.2;
	p->wavelength_nm = 920.0;
	p->model = SIM_SPOT_DIFFRACTION;
	p->photons = 2e5;
	p->photon_noise = true;
	p->read_noise_e = 1.5;
	p->gain = 1.0;
	p->bit_depth = 12;
	p->seed = 1;
}

static int sim_camera_check(const sim_camera_params *p, const sim_pupil *pupil,
			    wt_error *err)
{
	if (p->n_lenslets != pupil->n_lenslets) {
		return wt_error_set(
			err, -EINVAL,
			"camera: %d lenslets, the pupil grid has %d",
			p->n_lenslets, pupil->n_lenslets);
	}
	if (p->pixels_per_lenslet < 2 ||
	    (long)p->pixels_per_lenslet * p->n_lenslets > 65535) {
		return wt_error_set(err, -EINVAL,
				    "camera: %d pixels per lenslet refused",
				    p->pixels_per_lenslet);
	}
	if (!(p->pixel_um > 0.0) || !(p->focal_mm > 0.0) ||
	    !(p->wavelength_nm > 0.0) || !isfinite(p->pixel_um) ||
	    !isfinite(p->focal_mm) || !isfinite(p->wavelength_nm)) {
		return wt_error_set(
			err, -EINVAL,
			"camera: pixel, focal length and wavelength "
			"must be positive");
	}
	if (!(p->photons >= 0.0) || !isfinite(p->photons) ||
	    !(p->read_noise_e >= 0.0) || !isfinite(p->read_noise_e) ||
	    !(p->background_e >= 0.0) || !isfinite(p->background_e) ||
	    !(p->offset_counts >= 0.0) || !isfinite(p->offset_counts)) {
		return wt_error_set(err, -EINVAL,
				    "camera: photons, noise, background and "
				    "offset must be finite and >= 0");
	}
	if (!(p->gain > 0.0) || !isfinite(p->gain)) {
		return wt_error_set(err, -EINVAL, "camera: gain %g refused",
				    p->gain);
	}
	if (p->bit_depth < 1 || p->bit_depth > 16) {
		return wt_error_set(err, -EINVAL,
				    "camera: bit depth %d not in 1..16",
				    p->bit_depth);
	}
	return 0;
}

/* Every lenslet cell that holds a pupil sample gets light. */
static int sim_camera_lit_cells(const sim_pupil *pp, int *col, int *row)
{
	int i, j, a, b, n = 0;

	for (j = 0; j < pp->n_lenslets; j++) {
		for (i = 0; i < pp->n_lenslets; i++) {
			int lit = 0;

			for (b = j * pp->samples;
			     b < (j + 1) * pp->samples && !lit; b++) {
				for (a = i * pp->samples;
				     a < (i + 1) * pp->samples; a++) {
					if (pp->mask[b * pp->n + a]) {
						lit = 1;
						break;
					}
				}
			}
			if (lit) {
				col[n] = i;
				row[n] = j;
				n++;
			}
		}
	}
	return n;
}

int sim_camera_create(const sim_camera_params *p, const sim_pupil *pupil,
		      sim_camera **out, wt_error *err)
{
	sim_spot_params sp;
	sim_camera *c;
	size_t nn, s;
	int *col = NULL, *row = NULL, *mem = NULL;
	float *slopes = NULL, *flux = NULL;
	double total = 0.0;
	int n_lit, k, rc;

	if (!p || !pupil || !out) {
		return wt_error_set(err, -EINVAL, "camera: NULL argument");
	}
	*out = NULL;
	rc = sim_camera_check(p, pupil, err);
	if (rc < 0) {
		return rc;
	}
	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(err, -ENOMEM, "camera: out of memory");
	}
	c->p = *p;
	c->pupil = pupil;
	c->width = p->n_lenslets * p->pixels_per_lenslet;
	c->n_pix = (size_t)c->width * c->width;
	c->rad_per_um = 2.0 * M_PI / (p->wavelength_nm * 1e-3);
	c->top = (double)((1u << p->bit_depth) - 1u);
	sim_rng_seed(&c->rng, p->seed);
	nn = (size_t)pupil->n * pupil->n;
	c->phase = calloc(nn, sizeof(*c->phase));
	c->amp = calloc(nn, sizeof(*c->amp));
	c->expected = calloc(c->n_pix, sizeof(*c->expected));
	mem = calloc(2 * (size_t)p->n_lenslets * p->n_lenslets, sizeof(int));
	if (!c->phase || !c->amp || !c->expected || !mem) {
		rc = wt_error_set(err, -ENOMEM, "camera: out of memory");
		goto out;
	}
	for (s = 0; s < nn; s++) {
		c->amp[s] = pupil->mask[s] ? 1.0 : 0.0;
	}
	col = mem;
	row = mem + p->n_lenslets * p->n_lenslets;
	n_lit = sim_camera_lit_cells(pupil, col, row);
	memset(&sp, 0, sizeof(sp));
	sp.model = p->model;
	sp.n_lenslets = p->n_lenslets;
	sp.pixels_per_lenslet = p->pixels_per_lenslet;
	sp.phase_samples = pupil->samples;
	sp.pitch_um = p->pixels_per_lenslet * p->pixel_um;
	sp.focal_um = p->focal_mm * 1e3;
	sp.wavelength_um = p->wavelength_nm * 1e-3;
	sp.pixel_um = p->pixel_um;
	rc = sim_spots_create(&sp, col, row, n_lit, &c->spots, err);
	if (rc < 0) {
		goto out;
	}
	/* Share the photons by the light each lenslet collects, as the
	 * renderer itself counts it. */
	slopes = calloc(2 * (size_t)n_lit, sizeof(*slopes));
	flux = calloc((size_t)n_lit, sizeof(*flux));
	if (!slopes || !flux) {
		rc = wt_error_set(err, -ENOMEM, "camera: out of memory");
		goto out;
	}
	rc = sim_spots_mean_slopes(c->spots, c->phase, c->amp, 1.0, slopes,
				   flux);
	if (rc < 0) {
		wt_error_set(err, rc,
			     "camera: spot renderer refused the pupil");
		goto out;
	}
	for (k = 0; k < n_lit; k++) {
		total += flux[k];
	}
	if (!(total > 0.0)) {
		rc = wt_error_set(err, -EINVAL,
				  "camera: no light in the pupil");
		goto out;
	}
	c->photons_per_lenslet = p->photons / total;
	rc = 0;
out:
	free(mem);
	free(slopes);
	free(flux);
	if (rc < 0) {
		sim_camera_destroy(c);
		return rc;
	}
	*out = c;
	return 0;
}

void sim_camera_destroy(sim_camera *c)
{
	if (!c) {
		return;
	}
	sim_spots_destroy(c->spots);
	free(c->phase);
	free(c->amp);
	free(c->expected);
	free(c);
}

int sim_camera_width(const sim_camera *c)
{
	return c->width;
}

double sim_camera_pupil_radius_um(const sim_camera *c)
{
	return 0.5 * c->p.n_lenslets * c->p.pixels_per_lenslet * c->p.pixel_um;
}

double sim_camera_photons_per_lenslet(const sim_camera *c)
{
	return c->photons_per_lenslet;
}

const float *sim_camera_expected(const sim_camera *c)
{
	return c->expected;
}

int sim_camera_expose(sim_camera *c, const double *wavefront_um,
		      uint16_t *frame)
{
	const sim_camera_params *p = &c->p;
	size_t nn = (size_t)c->pupil->n * c->pupil->n, s;
	int saturated = 0, rc;

	if (!wavefront_um || !frame) {
		return -EINVAL;
	}
	for (s = 0; s < nn; s++) {
		c->phase[s] = wavefront_um[s] * c->rad_per_um;
	}
	rc = sim_spots_render(c->spots, c->phase, c->amp,
			      c->photons_per_lenslet, c->expected);
	if (rc < 0) {
		return rc;
	}
	for (s = 0; s < c->n_pix; s++) {
		double e = c->expected[s] + p->background_e;
		double counts;

		if (e < 0.0) {
			e = 0.0; /* FFT round-off can leave -1e-17 */
		}
		if (p->photon_noise) {
			e = (double)sim_rng_poisson(&c->rng, e);
		}
		if (p->read_noise_e > 0.0) {
			e += p->read_noise_e * sim_rng_normal(&c->rng);
		}
		counts = floor(p->gain * e + p->offset_counts + 0.5);
		if (counts >= c->top) {
			counts = c->top;
			saturated++;
		} else if (counts < 0.0) {
			counts = 0.0;
		}
		frame[s] = (uint16_t)counts;
	}
	return saturated;
}
