/* wt_offset.c - Zernike slopes in sensor pixels (see wt_offset.h). */
#include "wt_offset.h"

#include <errno.h>
#include <math.h>
#include <stdbool.h>
#include <stdlib.h>

#include "wt_zernike.h"

static bool positive(double v)
{
	return isfinite(v) && v > 0;
}

int wt_offset_add_zernike(const wt_grid *lenslets, const wt_sensor_optics *o,
			  int j, double amount_nm, double *out, wt_error *err)
{
	double *G, radius_um, scale;
	int n, k, rc;

	if (!lenslets || !o || !out) {
		return wt_error_set(err, -EINVAL, "offset: NULL argument");
	}
	if (j < 2 || j > WT_OFFSET_NOLL_MAX) {
		return wt_error_set(err, -EINVAL,
				    "Noll index %d: use 2 .. %d (1 is piston, "
				    "which has no slope)",
				    j, WT_OFFSET_NOLL_MAX);
	}
	if (!isfinite(amount_nm)) {
		return wt_error_set(err, -EINVAL,
				    "the amount is not a finite number");
	}
	if (o->pixels_per_lenslet < 1 || !positive(o->pixel_um) ||
	    !positive(o->focal_mm)) {
		return wt_error_set(err, -EINVAL,
				    "offset: the sensor's pixel pitch, focal "
				    "length and pixels per lenslet must be "
				    "positive");
	}
	n = lenslets->n_valid;
	G = malloc(sizeof(double) * 2 * (size_t)n);
	if (!G) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	rc = wt_zernike_slope_matrix(lenslets->x, lenslets->y, n,
				     0.5 * lenslets->pitch, j, 1, G, err);
	if (rc < 0) {
		free(G);
		return rc;
	}
	radius_um = 0.5 * lenslets->n * o->pixels_per_lenslet * o->pixel_um;
	/* f a / (R p): um * um / (um * um) per unit of G */
	scale = (1e3 * o->focal_mm) * (1e-3 * amount_nm) /
		(radius_um * o->pixel_um);
	for (k = 0; k < 2 * n; k++) {
		out[k] += scale * G[k];
	}
	free(G);
	return 0;
}
