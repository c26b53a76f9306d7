/* wt_geometry.c - lenslet and actuator grids and their valid points. */
#include "wt_geometry.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>

/* Tolerance of the CIRCLE layout's radius test, in pitches. */
#define WT_CIRCLE_TOL 1e-9

/* Antiderivative of sqrt(r^2 - x^2) for 0 <= x <= r. */
static double wt_circle_prim(double r, double x)
{
	double s = r * r - x * x;
	double t = x / r;

	if (s < 0.0) {
		s = 0.0;
	}
	if (t > 1.0) {
		t = 1.0;
	}
	return 0.5 * (x * sqrt(s) + r * r * asin(t));
}

/*
 * Area of the disk of radius r (centred at the origin) inside the rectangle
 * [0, a] x [0, b], a, b >= 0: the integral over 0 <= x <= min(a, r) of
 * min(b, sqrt(r^2 - x^2)).  Up to xc = sqrt(r^2 - b^2) the rectangle's top
 * edge is the lower of the two.
 */
static double wt_quadrant_area(double r, double a, double b)
{
	double xa = a < r ? a : r;
	double xc = b < r ? sqrt(r * r - b * b) : 0.0;
	double x1 = xa < xc ? xa : xc;

	return b * x1 + (wt_circle_prim(r, xa) - wt_circle_prim(r, x1));
}

/* Signed quadrant area: the disk's symmetry extends it to any sign of x, y,
 * so that rectangles follow by inclusion-exclusion. */
static double wt_signed_area(double r, double x, double y)
{
	double s = (x < 0.0) != (y < 0.0) ? -1.0 : 1.0;

	return s * wt_quadrant_area(r, fabs(x), fabs(y));
}

/* Area of the disk of radius r inside [x0, x1] x [y0, y1]. */
static double wt_disk_rect_area(double r, double x0, double x1, double y0,
				double y1)
{
	double a;

	if (r <= 0.0) {
		return 0.0;
	}
	a = wt_signed_area(r, x1, y1) - wt_signed_area(r, x0, y1) -
	    wt_signed_area(r, x1, y0) + wt_signed_area(r, x0, y0);
	return a > 0.0 ? a : 0.0;
}

/* Nearest and farthest distance from the origin of [x0, x1] x [y0, y1]. */
static void wt_rect_distances(double x0, double x1, double y0, double y1,
			      double *near, double *far)
{
	double fx = fmax(fabs(x0), fabs(x1)), fy = fmax(fabs(y0), fabs(y1));
	double nx = x0 <= 0.0 && x1 >= 0.0 ? 0.0 : fmin(fabs(x0), fabs(x1));
	double ny = y0 <= 0.0 && y1 >= 0.0 ? 0.0 : fmin(fabs(y0), fabs(y1));

	*near = sqrt(nx * nx + ny * ny);
	*far = sqrt(fx * fx + fy * fy);
}

/*
 * Fraction of [x0, x1] x [y0, y1] inside the annulus r_in <= r <= 1.  A cell
 * wholly inside (or outside) gets exactly 1 (or 0), so that min_fill = 1
 * keeps every whole cell whatever the rounding of the area sums.
 */
static double wt_annulus_fill(double r_in, double x0, double x1, double y0,
			      double y1)
{
	double near, far, area, fill;

	wt_rect_distances(x0, x1, y0, y1, &near, &far);
	if (far <= 1.0 && near >= r_in) {
		return 1.0;
	}
	if (near >= 1.0 || far <= r_in) {
		return 0.0;
	}
	area = wt_disk_rect_area(1.0, x0, x1, y0, y1) -
	       wt_disk_rect_area(r_in, x0, x1, y0, y1);
	fill = area / ((x1 - x0) * (y1 - y0));
	if (fill < 0.0) {
		return 0.0;
	}
	return fill > 1.0 ? 1.0 : fill;
}

/* Allocate a grid of n x n points with room for every point to be valid. */
static int wt_grid_alloc(int n, wt_grid **out, wt_error *err)
{
	size_t nn = (size_t)n * (size_t)n;
	wt_grid *g = calloc(1, sizeof(*g));

	if (!g) {
		return wt_error_set(err, -ENOMEM, "grid: out of memory");
	}
	g->n = n;
	g->index = malloc(nn * sizeof(*g->index));
	g->col = malloc(nn * sizeof(*g->col));
	g->row = malloc(nn * sizeof(*g->row));
	g->x = malloc(nn * sizeof(*g->x));
	g->y = malloc(nn * sizeof(*g->y));
	g->fill = malloc(nn * sizeof(*g->fill));
	if (!g->index || !g->col || !g->row || !g->x || !g->y || !g->fill) {
		wt_grid_destroy(g);
		return wt_error_set(err, -ENOMEM,
				    "grid: out of memory for %d x %d points", n,
				    n);
	}
	*out = g;
	return 0;
}

/* Append point (i, j) as the next valid point. */
static void wt_grid_keep(wt_grid *g, int i, int j, double x, double y,
			 double fill)
{
	int k = g->n_valid++;

	g->index[j * g->n + i] = k;
	g->col[k] = i;
	g->row[k] = j;
	g->x[k] = x;
	g->y[k] = y;
	g->fill[k] = fill;
}

/* Largest n accepted: keeps n * n and its byte counts far from overflow. */
#define WT_GRID_MAX_N 16384

int wt_grid_lenslets(int n, double obscuration, double min_fill, wt_grid **out,
		     wt_error *err)
{
	wt_grid *g;
	int i, j, rc;

	if (!out) {
		return wt_error_set(err, -EINVAL,
				    "lenslets: no output pointer");
	}
	*out = NULL;
	if (n < 1 || n > WT_GRID_MAX_N) {
		return wt_error_set(err, -EINVAL,
				    "lenslets: %d across is outside 1..%d", n,
				    WT_GRID_MAX_N);
	}
	if (!(obscuration >= 0.0 && obscuration < 1.0)) {
		return wt_error_set(
			err, -EINVAL,
			"lenslets: obscuration %g is outside [0, 1)",
			obscuration);
	}
	if (!(min_fill > 0.0 && min_fill <= 1.0)) {
		return wt_error_set(err, -EINVAL,
				    "lenslets: min_fill %g is outside (0, 1]",
				    min_fill);
	}
	rc = wt_grid_alloc(n, &g, err);
	if (rc) {
		return rc;
	}
	g->pitch = 2.0 / n;
	for (j = 0; j < n; j++) {
		double y0 = (j - 0.5 * n) * g->pitch;
		double y1 = (j + 1 - 0.5 * n) * g->pitch;

		for (i = 0; i < n; i++) {
			double x0 = (i - 0.5 * n) * g->pitch;
			double x1 = (i + 1 - 0.5 * n) * g->pitch;
			double fill;

			fill = wt_annulus_fill(obscuration, x0, x1, y0, y1);
			g->index[j * n + i] = -1;
			if (fill >= min_fill) {
				wt_grid_keep(
					g, i, j, (i + 0.5 - 0.5 * n) * g->pitch,
					(j + 0.5 - 0.5 * n) * g->pitch, fill);
			}
		}
	}
	if (g->n_valid == 0) {
		wt_grid_destroy(g);
		return wt_error_set(err, -EINVAL,
				    "lenslets: no cell of %d x %d has fill >= "
				    "min_fill %g (obscuration %g)",
				    n, n, min_fill, obscuration);
	}
	*out = g;
	return 0;
}

const char *wt_layout_name(enum wt_layout layout)
{
	switch (layout) {
	case WT_LAYOUT_SQUARE:
		return "square";
	case WT_LAYOUT_CORNERS:
		return "corners";
	case WT_LAYOUT_CIRCLE:
		return "circle";
	}
	return "unknown";
}

int wt_grid_actuators(int n, enum wt_layout layout, double pupil_pitches,
		      double margin_pitches, wt_grid **out, wt_error *err)
{
	wt_grid *g;
	double centre, radius;
	int i, j, rc;

	if (!out) {
		return wt_error_set(err, -EINVAL,
				    "actuators: no output pointer");
	}
	*out = NULL;
	if (n < 1 || n > WT_GRID_MAX_N) {
		return wt_error_set(err, -EINVAL,
				    "actuators: %d across is outside 1..%d", n,
				    WT_GRID_MAX_N);
	}
	if (layout != WT_LAYOUT_SQUARE && layout != WT_LAYOUT_CORNERS &&
	    layout != WT_LAYOUT_CIRCLE) {
		return wt_error_set(err, -EINVAL,
				    "actuators: layout %d is not square (0), "
				    "corners (1) or circle (2)",
				    (int)layout);
	}
	if (!(pupil_pitches > 0.0) || !isfinite(pupil_pitches)) {
		return wt_error_set(err, -EINVAL,
				    "actuators: pupil_pitches %g must be a "
				    "finite number > 0",
				    pupil_pitches);
	}
	if (!isfinite(margin_pitches)) {
		return wt_error_set(
			err, -EINVAL,
			"actuators: margin_pitches %g is not finite",
			margin_pitches);
	}
	rc = wt_grid_alloc(n, &g, err);
	if (rc) {
		return rc;
	}
	g->pitch = 2.0 / pupil_pitches;
	centre = (n - 1) / 2.0;
	radius = pupil_pitches / 2.0 + margin_pitches;
	for (j = 0; j < n; j++) {
		for (i = 0; i < n; i++) {
			double u = i - centre, v = j - centre;
			int keep = 1;

			g->index[j * n + i] = -1;
			if (layout == WT_LAYOUT_CORNERS) {
				keep = !((i == 0 || i == n - 1) &&
					 (j == 0 || j == n - 1));
			} else if (layout == WT_LAYOUT_CIRCLE) {
				keep = sqrt(u * u + v * v) <=
				       radius + WT_CIRCLE_TOL;
			}
			if (keep) {
				wt_grid_keep(g, i, j, u * g->pitch,
					     v * g->pitch, 1.0);
			}
		}
	}
	if (g->n_valid == 0) {
		wt_grid_destroy(g);
		return wt_error_set(err, -EINVAL,
				    "actuators: layout %s keeps no point of "
				    "%d x %d (pupil_pitches %g, margin %g)",
				    wt_layout_name(layout), n, n, pupil_pitches,
				    margin_pitches);
	}
	*out = g;
	return 0;
}

void wt_grid_destroy(wt_grid *g)
{
	if (!g) {
		return;
	}
	free(g->index);
	free(g->col);
	free(g->row);
	free(g->x);
	free(g->y);
	free(g->fill);
	free(g);
}
