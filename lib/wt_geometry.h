/*
 * wt_geometry.h - lenslet and actuator grids and their valid points.
 *
 * A grid is n x n points on a square lattice over the pupil.  Some points
 * are kept ("valid"), the others are not used at all.  Valid points are
 * listed in row-major order (row j outer, column i inner), so valid index k
 * grows with j * n + i.  Slope vectors and command vectors follow that order.
 *
 * Coordinates: column i grows with x, row j grows with y, no flip; x and y
 * are in units of the pupil radius (the pupil is the unit disk), origin at
 * the pupil centre.
 */
#ifndef WT_GEOMETRY_H
#define WT_GEOMETRY_H

#include "wt_error.h"

/** A square grid and the points of it that are kept. */
typedef struct wt_grid {
	/** points across the square grid */
	int n;
	/** points kept (always >= 1) */
	int n_valid;
	/** n*n: valid index of point (i, j) at [j*n + i], or -1 */
	int *index;
	/** n_valid each: column i and row j of valid point k */
	int *col, *row;
	/** n_valid each: centre in pupil-radius units */
	double *x, *y;
	/** n_valid each: fraction of the cell inside the pupil (lenslets; 1
	 * for actuators) */
	double *fill;
	/** spacing in pupil-radius units */
	double pitch;
} wt_grid;

/**
 * Lenslet grid: n x n square cells with the pupil circle inscribed in the
 * grid (pupil diameter n cells, so pitch = 2 / n).  Cell (i, j) has its centre
 * at x = (i + 0.5 - n / 2) * pitch, y = (j + 0.5 - n / 2) * pitch.  The pupil
 * is the annulus obscuration <= r <= 1 (obscuration = inner diameter / outer
 * diameter; 0 is a clear circular pupil).
 *
 * fill is the area of the cell inside the annulus divided by the cell's
 * area, computed exactly (not sampled): the area of a disk of radius R
 * inside the rectangle [x0, x1] x [y0, y1] is split by inclusion-exclusion
 * into four signed quadrant rectangles [0, a] x [0, b], each of which is
 * integrated in closed form, integral of min(b, sqrt(R^2 - x^2)) dx with
 * the antiderivative (x sqrt(R^2 - x^2) + R^2 asin(x / R)) / 2; the
 * annulus is the outer disk minus the inner one.  Results are good to a few
 * units of double rounding.
 *
 * A cell is valid when fill >= min_fill.
 *
 * Refuses (-EINVAL, with a message in *err) n < 1, obscuration outside
 * [0, 1), min_fill outside (0, 1], NaN arguments, a NULL out, and a set of
 * arguments that keeps no cell at all.  -ENOMEM when allocation fails.
 */
int wt_grid_lenslets(int n, double obscuration, double min_fill, wt_grid **out,
		     wt_error *err);

/** Which actuators of the square grid exist. */
enum wt_layout {
	WT_LAYOUT_SQUARE = 0,  /**< all n x n */
	WT_LAYOUT_CORNERS = 1, /**< all but the 4 corner points */
	WT_LAYOUT_CIRCLE = 2,  /**< those within the pupil plus a margin */
};

/**
 * Actuator grid: n x n points, pitch = 2 / pupil_pitches (the pupil
 * diameter spans pupil_pitches actuator pitches), point (i, j) at
 * x = (i - (n - 1) / 2.0) * pitch, y = (j - (n - 1) / 2.0) * pitch.
 *
 * SQUARE keeps every point, CORNERS drops the 4 corner points, CIRCLE keeps
 * the points whose distance from the grid centre is at most
 * (pupil_pitches / 2 + margin_pitches) pitches, with a tolerance of 1e-9
 * pitches so that points exactly on that circle are kept.  margin_pitches
 * is used by CIRCLE only (it may be negative, must be finite).  fill is 1.
 *
 * Refuses (-EINVAL, with a message in *err) n < 1, an unknown layout,
 * pupil_pitches <= 0 or not finite, a margin that is not finite, a NULL out,
 * and a set of arguments that keeps no point (e.g. CORNERS with n <= 2).
 * -ENOMEM when allocation fails.
 */
int wt_grid_actuators(int n, enum wt_layout layout, double pupil_pitches,
		      double margin_pitches, wt_grid **out, wt_error *err);

/** "square", "corners", "circle" (the mirror.layout words); "unknown". */
const char *wt_layout_name(enum wt_layout layout);

/** Free a grid made by this module (NULL is allowed). */
void wt_grid_destroy(wt_grid *g);

#endif /* WT_GEOMETRY_H */
