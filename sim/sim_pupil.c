/* sim_pupil.c - the pupil sample grid. */
#include "sim_pupil.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>

int sim_pupil_create(int n_lenslets, int samples, double obscuration,
		     sim_pupil **out, wt_error *err)
{
	sim_pupil *p;
	int a, b, k;

	if (!out) {
		return wt_error_set(err, -EINVAL, "pupil: no output pointer");
	}
	*out = NULL;
	if (n_lenslets < 1 || samples < 1 ||
	    (long)n_lenslets * samples > 4096) {
		return wt_error_set(err, -EINVAL,
				    "pupil: %d lenslets x %d samples refused",
				    n_lenslets, samples);
	}
	if (!(obscuration >= 0.0 && obscuration < 1.0)) {
		return wt_error_set(err, -EINVAL,
				    "pupil: obscuration %g outside [0, 1)",
				    obscuration);
	}
	p = calloc(1, sizeof(*p));
	if (!p) {
		return wt_error_set(err, -ENOMEM, "pupil: out of memory");
	}
	p->n_lenslets = n_lenslets;
	p->samples = samples;
	p->n = n_lenslets * samples;
	p->step = 2.0 / p->n;
	p->obscuration = obscuration;
	p->mask = calloc((size_t)p->n * p->n, 1);
	p->inside = calloc((size_t)p->n * p->n, sizeof(*p->inside));
	if (!p->mask || !p->inside) {
		sim_pupil_destroy(p);
		return wt_error_set(err, -ENOMEM, "pupil: out of memory");
	}
	k = 0;
	for (b = 0; b < p->n; b++) {
		double y = sim_pupil_coord(p, b);

		for (a = 0; a < p->n; a++) {
			double x = sim_pupil_coord(p, a);
			double r = sqrt(x * x + y * y);

			if (r <= 1.0 && r >= obscuration) {
				p->mask[b * p->n + a] = 1;
				p->inside[k++] = b * p->n + a;
			}
		}
	}
	p->n_inside = k;
	*out = p;
	return 0;
}

void sim_pupil_destroy(sim_pupil *p)
{
	if (p) {
		free(p->mask);
		free(p->inside);
		free(p);
	}
}
