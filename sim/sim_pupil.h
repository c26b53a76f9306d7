/*
 * sim_pupil.h - the pupil sample grid the simulator computes wavefronts on.
 *
 * The sensor's n_lenslets x n_lenslets lenslet grid is divided into
 * samples x samples points per lenslet, so the grid has n = n_lenslets *
 * samples points across the square that circumscribes the pupil (the pupil
 * circle is inscribed in the lenslet grid, see wt_grid_lenslets).  Point
 * (a, b) (column a grows with x, row b with y, index b * n + a) sits at
 *   x = (a + 0.5 - n / 2) * step,  y = (b + 0.5 - n / 2) * step,
 * step = 2 / n, in pupil-radius units; lenslet (i, j) covers columns
 * i * samples .. i * samples + samples - 1 and the same rows.  A point is
 * inside the pupil when obscuration <= r <= 1.
 *
 * Every wavefront map of the simulator (mirror, sample, residual) is an
 * n * n array of doubles in micrometres of optical path, defined on the
 * whole grid (the mirror and the sample go on past the pupil's edge, so
 * that interpolation across the edge sees the true wavefront); only points
 * inside the pupil carry light and count in the truth.
 */
#ifndef SIM_PUPIL_H
#define SIM_PUPIL_H

#include <stdint.h>

#include "wt_error.h"

/** The sample grid and its pupil mask (read-only after creation). */
typedef struct sim_pupil {
	int n_lenslets;	    /**< lenslets across */
	int samples;	    /**< samples across one lenslet */
	int n;		    /**< samples across the grid */
	double step;	    /**< sample spacing, pupil-radius units */
	double obscuration; /**< inner / outer diameter */
	uint8_t *mask;	    /**< n * n: 1 inside the pupil */
	int n_inside;	    /**< points inside the pupil */
	int *inside;	    /**< n_inside: grid index of each point inside */
} sim_pupil;

/**
 * Make the grid.  Refuses (-EINVAL) n_lenslets < 1, samples < 1, an
 * obscuration outside [0, 1) and a grid of more than 4096 points across.
 */
int sim_pupil_create(int n_lenslets, int samples, double obscuration,
		     sim_pupil **out, wt_error *err);

/** Free the grid (NULL allowed). */
void sim_pupil_destroy(sim_pupil *p);

/** Pupil coordinate of grid column (or row) a. */
static inline double sim_pupil_coord(const sim_pupil *p, int a)
{
	return (a + 0.5 - 0.5 * p->n) * p->step;
}

#endif /* SIM_PUPIL_H */
