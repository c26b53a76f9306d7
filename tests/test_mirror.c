/*
 * test_mirror.c - the simulated deformable mirror: influence functions,
 * faults (dead, weak, swapped), misregistration and clipping.
 *
 * Most cases use an 11 x 11 square actuator grid over 11 pitches on an
 * 11-lenslet pupil sampled 3 times per lenslet (33 samples across): the
 * actuator pitch is then exactly 3 samples and actuator (i, j) sits on sample
 * (16 + 3 (i - 5), 16 + 3 (j - 5)), so influence values can be read at
 * actuator positions without interpolation.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "sim_mirror.h"
#include "sim_pupil.h"

/* cmocka 1.1.5 has no floating-point assertion. */
#define assert_near(a, b, tol)                                                 \
	do {                                                                   \
		double a_ = (a), b_ = (b);                                     \
		if (!(fabs(a_ - b_) <= (tol))) {                               \
			fail_msg("%s = %.12g, expected %.12g +- %g", #a, a_,   \
				 b_, (double)(tol));                           \
		}                                                              \
	} while (0)

#define NL     11 /* lenslets */
#define NS     3  /* samples per lenslet */
#define N      (NL * NS)
#define CENTRE 60 /* actuator (5, 5) */
#define RIGHT  61 /* actuator (6, 5) */

struct fixture {
	sim_pupil *pupil;
	sim_mirror *mirror;
	double surf[N * N];
	float cmd[128];
};

static void base_params(sim_mirror_params *p)
{
	sim_mirror_params_default(p);
	p->actuators = 11;
	p->layout = WT_LAYOUT_SQUARE;
	p->pupil_pitches = 11.0;
}

static void make(struct fixture *f, const sim_mirror_params *p)
{
	wt_error err;

	memset(f, 0, sizeof(*f));
	assert_int_equal(sim_pupil_create(NL, NS, 0.0, &f->pupil, &err), 0);
	if (sim_mirror_create(p, f->pupil, &f->mirror, &err) != 0) {
		fail_msg("%s", err.msg);
	}
	assert_int_equal(sim_mirror_count(f->mirror), 121);
}

static void unmake(struct fixture *f)
{
	sim_mirror_destroy(f->mirror);
	sim_pupil_destroy(f->pupil);
}

/* Surface (um) after commanding +value on one channel only. */
static void poke(struct fixture *f, int channel, float value)
{
	memset(f->cmd, 0, sizeof(f->cmd));
	f->cmd[channel] = value;
	assert_true(sim_mirror_apply(f->mirror, f->cmd) >= 0);
	sim_mirror_surface(f->mirror, f->surf);
}

static double at_actuator(const double *s, int i, int j)
{
	return s[(16 + 3 * (j - 5)) * N + 16 + 3 * (i - 5)];
}

static void centroid(const sim_pupil *p, const double *s, double *cx,
		     double *cy)
{
	double sx = 0, sy = 0, sw = 0;
	int a, b;

	for (b = 0; b < p->n; b++) {
		for (a = 0; a < p->n; a++) {
			double w = s[b * p->n + a];

			sx += w * sim_pupil_coord(p, a);
			sy += w * sim_pupil_coord(p, b);
			sw += w;
		}
	}
	*cx = sx / sw;
	*cy = sy / sw;
}

static void coupling_one_pitch_is_configured_value(void **state)
{
	static const double w_cases[] = {0.15, 0.3, 0.05};
	struct fixture *f = malloc(sizeof(*f));
	sim_mirror_params p;
	size_t c;

	(void)state;
	for (c = 0; c < sizeof(w_cases) / sizeof(w_cases[0]); c++) {
		double peak;

		base_params(&p);
		p.coupling = w_cases[c];
		p.stroke_um = 0.7;
		make(f, &p);
		poke(f, CENTRE, 1.0f);
		peak = at_actuator(f->surf, 5, 5);
		/* Definition of the stroke: command +1 lifts the surface at
		 * the actuator by stroke_um. */
		assert_near(peak, 0.7, 1e-12);
		/* Definition of the coupling: IF(one pitch) = w, in x and in
		 * y; a Gaussian then gives w^2 on the diagonal (sqrt(2)
		 * pitches: exp(-2 p^2 / (2 sigma^2)) = w^2). */
		assert_near(at_actuator(f->surf, 6, 5) / peak, w_cases[c],
			    1e-12);
		assert_near(at_actuator(f->surf, 5, 4) / peak, w_cases[c],
			    1e-12);
		assert_near(at_actuator(f->surf, 6, 6) / peak,
			    w_cases[c] * w_cases[c], 1e-12);
		unmake(f);
	}
	free(f);
}

static void wavefront_is_twice_surface(void **state)
{
	struct fixture *f = malloc(sizeof(*f));
	double *wf = malloc(sizeof(double) * N * N);
	sim_mirror_params p;
	int s;

	(void)state;
	base_params(&p);
	make(f, &p);
	poke(f, RIGHT, -0.4f);
	sim_mirror_wavefront(f->mirror, wf);
	/* Reflection at normal incidence doubles the optical path of a
	 * surface displacement (geometric optics, common practice). */
	for (s = 0; s < N * N; s++) {
		assert_near(wf[s], 2.0 * f->surf[s], 1e-15);
	}
	free(wf);
	unmake(f);
	free(f);
}

static void dead_actuator_moves_nothing(void **state)
{
	struct fixture *f = malloc(sizeof(*f));
	sim_mirror_params p;
	double sum = 0;
	int s;

	(void)state;
	base_params(&p);
	p.dead = CENTRE;
	make(f, &p);
	poke(f, CENTRE, 1.0f);
	for (s = 0; s < N * N; s++) {
		assert_true(f->surf[s] == 0.0); /* definition of "dead" */
	}
	poke(f, RIGHT, 1.0f);
	for (s = 0; s < N * N; s++) {
		sum += f->surf[s];
	}
	assert_true(sum > 1.0); /* its neighbour still works */
	unmake(f);
	free(f);
}

static void weak_actuator_scales_by_gain(void **state)
{
	struct fixture *h = malloc(sizeof(*h)), *w = malloc(sizeof(*w));
	sim_mirror_params p;
	int s, touched = 0;

	(void)state;
	base_params(&p);
	make(h, &p);
	p.weak = CENTRE;
	p.weak_gain = 0.35;
	make(w, &p);
	poke(h, CENTRE, 0.8f);
	poke(w, CENTRE, 0.8f);
	for (s = 0; s < N * N; s++) {
		/* definition of a weak actuator: gain x the healthy one */
		assert_near(w->surf[s], 0.35 * h->surf[s], 1e-14);
		touched += h->surf[s] != 0.0;
	}
	assert_true(touched > 50);
	poke(h, RIGHT, 0.8f);
	poke(w, RIGHT, 0.8f);
	assert_memory_equal(h->surf, w->surf, sizeof(h->surf));
	unmake(h);
	unmake(w);
	free(h);
	free(w);
}

static void swapped_pair_swaps_surfaces(void **state)
{
	struct fixture *h = malloc(sizeof(*h)), *x = malloc(sizeof(*x));
	sim_mirror_params p;

	(void)state;
	base_params(&p);
	make(h, &p);
	p.swap_a = CENTRE;
	p.swap_b = RIGHT;
	make(x, &p);
	/* a crossed cable: channel a moves b's actuator and vice versa */
	poke(h, RIGHT, 1.0f);
	poke(x, CENTRE, 1.0f);
	assert_memory_equal(h->surf, x->surf, sizeof(h->surf));
	poke(h, CENTRE, -0.5f);
	poke(x, RIGHT, -0.5f);
	assert_memory_equal(h->surf, x->surf, sizeof(h->surf));
	poke(h, 3, 0.5f);
	poke(x, 3, 0.5f);
	assert_memory_equal(h->surf, x->surf, sizeof(h->surf));
	unmake(h);
	unmake(x);
	free(h);
	free(x);
}

static void misregistration_shift_moves_centroid(void **state)
{
	struct fixture *h = malloc(sizeof(*h)), *m = malloc(sizeof(*m));
	sim_mirror_params p;
	double hx, hy, mx, my;

	(void)state;
	base_params(&p);
	make(h, &p);
	p.shift_x = 0.5;
	p.shift_y = -0.25;
	make(m, &p);
	poke(h, CENTRE, 1.0f);
	poke(m, CENTRE, 1.0f);
	centroid(h->pupil, h->surf, &hx, &hy);
	centroid(m->pupil, m->surf, &mx, &my);
	/* Worked by hand: one lenslet pitch is 2 / 11 pupil radii, so a
	 * shift of (0.5, -0.25) subapertures moves the poke's surface
	 * centroid by (1 / 11, -1 / 22) pupil radii.  The healthy poke sits
	 * at the pupil centre.  Tolerance: the 4-sigma cut of the sampled
	 * Gaussian is not exactly symmetric about a shifted centre. */
	assert_near(hx, 0.0, 1e-9);
	assert_near(hy, 0.0, 1e-9);
	assert_near(mx - hx, 1.0 / 11.0, 1e-4);
	assert_near(my - hy, -1.0 / 22.0, 1e-4);
	unmake(h);
	unmake(m);
	free(h);
	free(m);
}

static void misregistration_rotation_turns_positions(void **state)
{
	struct fixture *m = malloc(sizeof(*m));
	sim_mirror_params p;
	double cx, cy;

	(void)state;
	base_params(&p);
	p.rotation_deg = 90.0;
	make(m, &p);
	/* actuator (8, 5) is at (3, 0) pitches; turned by +90 degrees
	 * (x towards y) it lands at (0, 3) pitches = (0, 6 / 11) radii
	 * (worked by hand) */
	poke(m, 5 * 11 + 8, 1.0f);
	centroid(m->pupil, m->surf, &cx, &cy);
	assert_near(cx, 0.0, 1e-6);
	assert_near(cy, 6.0 / 11.0, 1e-6);
	unmake(m);
	free(m);
}

static void clipping_is_counted(void **state)
{
	struct fixture *f = malloc(sizeof(*f));
	sim_mirror_params p;
	const float *c;

	(void)state;
	base_params(&p);
	make(f, &p);
	memset(f->cmd, 0, sizeof(f->cmd));
	f->cmd[0] = 1.5f;
	f->cmd[1] = -2.0f;
	f->cmd[2] = 0.999f;
	f->cmd[3] = -1.0f;
	assert_int_equal(sim_mirror_apply(f->mirror, f->cmd), 2);
	c = sim_mirror_command(f->mirror);
	assert_true(c[0] == 1.0f && c[1] == -1.0f);
	assert_true(c[2] == 0.999f && c[3] == -1.0f);
	assert_int_equal(sim_mirror_clipped_last(f->mirror), 2);
	f->cmd[4] = 7.0f;
	assert_int_equal(sim_mirror_apply(f->mirror, f->cmd), 3);
	assert_int_equal(sim_mirror_clipped_total(f->mirror), 5);
	/* a non-finite value refuses the whole command */
	f->cmd[5] = NAN;
	assert_int_equal(sim_mirror_apply(f->mirror, f->cmd), -ERANGE);
	assert_true(sim_mirror_command(f->mirror)[5] == 0.0f);
	assert_int_equal(sim_mirror_clipped_total(f->mirror), 5);
	unmake(f);
	free(f);
}

static void bad_parameters_are_refused(void **state)
{
	sim_pupil *pupil;
	sim_mirror *m = NULL;
	sim_mirror_params p;
	wt_error err;

	(void)state;
	assert_int_equal(sim_pupil_create(NL, NS, 0.0, &pupil, &err), 0);
	base_params(&p);
	p.coupling = 1.0;
	assert_int_equal(sim_mirror_create(&p, pupil, &m, &err), -EINVAL);
	base_params(&p);
	p.dead = 121;
	assert_int_equal(sim_mirror_create(&p, pupil, &m, &err), -EINVAL);
	base_params(&p);
	p.swap_a = 4;
	assert_int_equal(sim_mirror_create(&p, pupil, &m, &err), -EINVAL);
	p.swap_b = 4;
	assert_int_equal(sim_mirror_create(&p, pupil, &m, &err), -EINVAL);
	assert_null(m);
	sim_pupil_destroy(pupil);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(coupling_one_pitch_is_configured_value),
	cmocka_unit_test(wavefront_is_twice_surface),
	cmocka_unit_test(dead_actuator_moves_nothing),
	cmocka_unit_test(weak_actuator_scales_by_gain),
	cmocka_unit_test(swapped_pair_swaps_surfaces),
	cmocka_unit_test(misregistration_shift_moves_centroid),
	cmocka_unit_test(misregistration_rotation_turns_positions),
	cmocka_unit_test(clipping_is_counted),
	cmocka_unit_test(bad_parameters_are_refused),
};

WT_TEST_MAIN(tests)
