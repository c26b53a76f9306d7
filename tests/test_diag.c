/*
 * test_diag.c - calibration report (lib/wt_diag.c).
 *
 * The interaction matrices come from a linear model built here: Gaussian
 * influence functions on the actuator grid, IF_k = exp(-r_k^2 / (2 s^2))
 * with IF(pitch) = coupling (a common model of continuous facesheets, from
 * memory), and a Shack-Hartmann that measures each lenslet's mean gradient
 * (common practice).  The mean over a square lenslet of dIF/dx is the
 * finite difference of IF across the lenslet averaged along y, which for a
 * Gaussian is closed form (erf; Abramowitz & Stegun 7.1.1).  Faults are
 * put in by hand (column zeroed, scaled, swapped; actuator positions
 * shifted or rotated before the matrix is built), so the truth is known.
 *
 * Other sources: the largest singular value of an m x n Gaussian matrix is
 * about s (sqrt(m) + sqrt(n)) (S. Geman 1980, Ann. Probab. 8, 252; Davidson
 * & Szarek 2001, Handbook of the Geometry of Banach Spaces, thm. II.13, from
 * memory), Weyl's inequality |sigma_i(A + E) - sigma_i(A)| <= ||E|| (H. Weyl
 * 1912, Math. Ann. 71, 441), the distribution of the sample variance
 * (chi-square with K - 1 degrees of freedom, any statistics handbook) and the
 * mean square successive difference (von Neumann et al. 1941, Ann. Math. Stat.
 * 12, 153).
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include <cblas.h>

#include "wt_diag.h"
#include "wt_geometry.h"
#include "wt_recon.h"

/* --- the synthetic corrector ---------------------------------------------- */

struct bench {
	wt_grid *lens, *act;
	double coupling;
};

/* The rigs: FINE has 20 lenslets and 11 actuators over 10 pitches (circle
 * layout with half a pitch of margin: 2 lenslets per actuator pitch);
 * DEFAULT is the project's default (16 lenslets, 12 x 12 corners over 11
 * pitches, 1.45 lenslets per pitch, some actuators well outside the
 * pupil); FRIED has 10 lenslets under the same 11 x 11 circle, an actuator
 * at every lenslet corner. */
enum rig { FINE = 0, DEFAULT = 1, FRIED = 2 };

static void bench_make(struct bench *b, int rig)
{
	const int lenslets[] = {20, 16, 10};
	wt_error err;

	b->coupling = 0.15;
	assert_int_equal(
		wt_grid_lenslets(lenslets[rig], 0, 0.5, &b->lens, &err), 0);
	if (rig == DEFAULT) {
		assert_int_equal(wt_grid_actuators(12, WT_LAYOUT_CORNERS, 11,
						   0.5, &b->act, &err),
				 0);
	} else {
		assert_int_equal(wt_grid_actuators(11, WT_LAYOUT_CIRCLE, 10,
						   0.5, &b->act, &err),
				 0);
	}
}

static void bench_free(struct bench *b)
{
	wt_grid_destroy(b->lens);
	wt_grid_destroy(b->act);
}

/* Integral of exp(-(t - c)^2 / (2 s^2)) over [a0, a1]. */
static double gauss_integral(double a0, double a1, double c, double s)
{
	double k = s * sqrt(2.0);

	return s * sqrt(M_PI / 2.0) * (erf((a1 - c) / k) - erf((a0 - c) / k));
}

/*
 * D (2N x n) for actuators at the grid's positions rotated by rot_deg
 * about the pupil centre and then shifted by (sx, sy) lenslet pitches.
 * Lenslet-mean gradient of IF_k over the square of side h centred at
 * (X, Y):
 *   d/dx: [g(X + h/2) - g(X - h/2)] G(Y) / h^2, with g the Gaussian along x
 *   and G its integral along y over the lenslet (and likewise d/dy).
 */
static double *bench_matrix(const struct bench *b, double sx, double sy,
			    double rot_deg)
{
	const wt_grid *L = b->lens, *A = b->act;
	int N = L->n_valid, n = A->n_valid;
	double s = A->pitch / sqrt(-2.0 * log(b->coupling));
	double h = L->pitch, th = rot_deg * M_PI / 180.0;
	double *D = malloc(2 * (size_t)N * n * sizeof(*D));
	int k, l;

	assert_non_null(D);
	for (k = 0; k < n; k++) {
		double xk = cos(th) * A->x[k] - sin(th) * A->y[k] + sx * h;
		double yk = sin(th) * A->x[k] + cos(th) * A->y[k] + sy * h;

		for (l = 0; l < N; l++) {
			double X = L->x[l], Y = L->y[l];
			double gx1 = exp(-(X + h / 2 - xk) * (X + h / 2 - xk) /
					 (2 * s * s));
			double gx0 = exp(-(X - h / 2 - xk) * (X - h / 2 - xk) /
					 (2 * s * s));
			double gy1 = exp(-(Y + h / 2 - yk) * (Y + h / 2 - yk) /
					 (2 * s * s));
			double gy0 = exp(-(Y - h / 2 - yk) * (Y - h / 2 - yk) /
					 (2 * s * s));
			double Gy = gauss_integral(Y - h / 2, Y + h / 2, yk, s);
			double Gx = gauss_integral(X - h / 2, X + h / 2, xk, s);

			D[(size_t)l * n + k] = (gx1 - gx0) * Gy / (h * h);
			D[(size_t)(N + l) * n + k] = (gy1 - gy0) * Gx / (h * h);
		}
	}
	return D;
}

static void scale_column(double *D, int m, int n, int k, double f)
{
	int i;

	for (i = 0; i < m; i++) {
		D[(size_t)i * n + k] *= f;
	}
}

static void swap_columns(double *D, int m, int n, int a, int b)
{
	int i;

	for (i = 0; i < m; i++) {
		double t = D[(size_t)i * n + a];

		D[(size_t)i * n + a] = D[(size_t)i * n + b];
		D[(size_t)i * n + b] = t;
	}
}

/* The valid actuator nearest to (x, y). */
static int nearest_actuator(const wt_grid *A, double x, double y)
{
	double best = INFINITY;
	int k, pick = -1;

	for (k = 0; k < A->n_valid; k++) {
		double d = hypot(A->x[k] - x, A->y[k] - y);

		if (d < best) {
			best = d;
			pick = k;
		}
	}
	return pick;
}

static wt_diag_report *diagnose(const struct bench *b, const double *D,
				const wt_diag_params *p)
{
	wt_diag_report *r = NULL;
	wt_error err;
	int ret = wt_diag_compute(D, b->lens, b->act, p, &r, &err);

	if (ret) {
		print_message("diag: %s\n", err.msg);
	}
	assert_int_equal(ret, 0);
	assert_non_null(r);
	return r;
}

static void print_report(const wt_diag_report *r)
{
	int k;

	print_message("fit %d: shift (%.3f, %.3f) lenslets, rot %.3f deg, "
		      "rms %.3f; ref norm %.3g; dead %d weak %d swapped %d "
		      "displaced %d unseen %d; modes %d (%s)\n",
		      r->n_fit, r->shift_x, r->shift_y, r->rotation_deg,
		      r->fit_rms, r->reference_norm, r->n_dead, r->n_weak,
		      r->n_swapped, r->n_displaced, r->n_unseen, r->modes,
		      r->modes_reason);
	for (k = 0; k < r->n_act; k++) {
		const wt_diag_actuator *a = &r->act[k];

		if (a->flags & ~(unsigned int)WT_DIAG_UNSEEN) {
			print_message("  act %d flags 0x%x norm %.3g/%.3g "
				      "cov %.2f off %.2f partner %d\n",
				      k, a->flags, a->norm, a->expected_norm,
				      a->coverage, a->offset_pitches,
				      a->partner);
		}
	}
}

/* Only the listed actuators carry the given flag. */
static void assert_flagged_exactly(const wt_diag_report *r, unsigned int flag,
				   const int *which, int count)
{
	int k, i;

	for (k = 0; k < r->n_act; k++) {
		bool listed = false;

		for (i = 0; i < count; i++) {
			listed |= which[i] == k;
		}
		if (listed != !!(r->act[k].flags & flag)) {
			print_message("actuator %d: flag %s %s\n", k,
				      wt_diag_flag_name(flag),
				      listed ? "missing" : "unexpected");
		}
		assert_int_equal(listed, !!(r->act[k].flags & flag));
	}
}

static void assert_no_fault(const wt_diag_report *r)
{
	const unsigned int faults = WT_DIAG_DEAD | WT_DIAG_WEAK |
				    WT_DIAG_SWAPPED | WT_DIAG_DISPLACED;
	int k;

	for (k = 0; k < r->n_act; k++) {
		assert_int_equal(r->act[k].flags & faults, 0);
	}
	assert_int_equal(r->n_dead + r->n_weak + r->n_swapped + r->n_displaced,
			 0);
	assert_false(r->misregistered);
}

/* --- tests ---------------------------------------------------------------- */

static void healthy_matrix_raises_no_flag(void **state)
{
	int rig;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		struct bench b;
		wt_diag_report *r;
		double *D;
		int k, n_int = 0;

		bench_make(&b, rig);
		D = bench_matrix(&b, 0, 0, 0);
		r = diagnose(&b, D, NULL);
		print_report(r);
		/* the model has no fault (built that way) */
		assert_no_fault(r);
		/* symmetric responses on a symmetric rig: the fit finds no
		 * misregistration (symmetry of the model) */
		assert_true(hypot(r->shift_x, r->shift_y) < 0.05);
		assert_true(fabs(r->rotation_deg) < 0.2);
		assert_true(r->have_template);
		assert_true(r->position_checked);
		for (k = 0; k < r->n_act; k++) {
			n_int += r->act[k].interior;
			/* a whole response is centred on its actuator
			 * (symmetry); edge ones match the template's
			 * expectation */
			if (!(r->act[k].flags & WT_DIAG_UNSEEN)) {
				assert_true(r->act[k].offset_pitches < 0.25);
			}
		}
		assert_true(n_int >= 9);
		assert_true(r->n_fit == n_int);
		/* noise-free model: every actuator whose response reaches the
		 * lenslets is a sensed mode; without a noise estimate the gap
		 * rule or the ratio rule decides.  Except in the Fried
		 * geometry, whose lenslets do not see the waffle pattern
		 * (-1)^(i + j) (common practice): exactly one mode less */
		if (rig == FRIED) {
			assert_int_equal(r->modes, r->n_act - 1);
		} else {
			assert_true(r->modes >= r->n_act - r->n_unseen);
		}
		wt_diag_report_destroy(r);
		free(D);
		bench_free(&b);
	}
	/* the default rig has actuators outside the pupil: they are unseen,
	 * not dead (checked in the loop above) */
}

static void healthy_noisy_matrix_raises_no_flag(void **state)
{
	struct bench b;
	wt_diag_params p;
	wt_diag_report *r;
	double *D, peak = 0;
	int m, n, e, rig;

	(void)state;
	wt_rng_seed(wt_test_seed(337));
	for (rig = FINE; rig <= FRIED; rig++) {
		bench_make(&b, rig);
		m = 2 * b.lens->n_valid;
		n = b.act->n_valid;
		D = bench_matrix(&b, 0, 0, 0);
		for (e = 0; e < m * n; e++) {
			peak = fmax(peak, fabs(D[e]));
		}
		/* 2 % of the largest entry: a modest calibration */
		wt_diag_params_default(&p);
		p.matrix_noise = 0.02 * peak;
		for (e = 0; e < m * n; e++) {
			D[e] += p.matrix_noise * wt_rng_gauss();
		}
		r = diagnose(&b, D, &p);
		print_report(r);
		assert_no_fault(r);
		/* the noise floor removes modes, never adds any (Weyl 1912) */
		assert_true(r->modes <= r->n_sv);
		assert_true(r->sv_floor > 0);
		wt_diag_report_destroy(r);
		free(D);
		bench_free(&b);
	}
}

static void zeroed_column_is_dead(void **state)
{
	int rig;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		struct bench b;
		wt_diag_report *r;
		double *D;
		int dead[2];

		bench_make(&b, rig);
		D = bench_matrix(&b, 0, 0, 0);
		/* one in the middle, one at the pupil's edge (still seen) */
		dead[0] = nearest_actuator(b.act, 0.1, 0.05);
		dead[1] = nearest_actuator(b.act, 0.0, -0.95);
		scale_column(D, 2 * b.lens->n_valid, b.act->n_valid, dead[0],
			     0.0);
		scale_column(D, 2 * b.lens->n_valid, b.act->n_valid, dead[1],
			     0.0);
		r = diagnose(&b, D, NULL);
		print_report(r);
		/* zero response: dead by definition */
		assert_flagged_exactly(r, WT_DIAG_DEAD, dead, 2);
		assert_int_equal(r->n_dead, 2);
		assert_int_equal(r->n_weak + r->n_swapped + r->n_displaced, 0);
		assert_false(r->misregistered);
		wt_diag_report_destroy(r);
		free(D);
		bench_free(&b);
	}
}

static void scaled_column_is_weak(void **state)
{
	int rig;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		struct bench b;
		wt_diag_report *r;
		double *D;
		int weak[2];

		bench_make(&b, rig);
		D = bench_matrix(&b, 0, 0, 0);
		weak[0] = nearest_actuator(b.act, -0.3, 0.2);
		weak[1] = nearest_actuator(b.act, 0.95, 0.0);
		scale_column(D, 2 * b.lens->n_valid, b.act->n_valid, weak[0],
			     0.3);
		scale_column(D, 2 * b.lens->n_valid, b.act->n_valid, weak[1],
			     0.3);
		r = diagnose(&b, D, NULL);
		print_report(r);
		/* 0.3 of the response it should have: between the dead (0.1)
		 * and weak (0.5) thresholds, by construction */
		assert_flagged_exactly(r, WT_DIAG_WEAK, weak, 2);
		assert_int_equal(r->n_weak, 2);
		assert_int_equal(r->n_dead + r->n_swapped + r->n_displaced, 0);
		assert_true(fabs(r->act[weak[0]].norm /
					 r->act[weak[0]].expected_norm -
				 0.3) < 0.05);
		wt_diag_report_destroy(r);
		free(D);
		bench_free(&b);
	}
}

static void swapped_columns_are_paired(void **state)
{
	/* neighbours in the middle, a distant pair, an interior actuator
	 * with one at the edge */
	const double pos[3][4] = {{0.0, 0.0, 0.2, 0.0},
				  {-0.5, -0.4, 0.6, 0.5},
				  {-0.2, 0.1, -0.95, 0.0}};
	int rig, c;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		for (c = 0; c < 3; c++) {
			struct bench b;
			wt_diag_report *r;
			double *D;
			int pair[2];

			bench_make(&b, rig);
			D = bench_matrix(&b, 0, 0, 0);
			pair[0] = nearest_actuator(b.act, pos[c][0], pos[c][1]);
			pair[1] = nearest_actuator(b.act, pos[c][2], pos[c][3]);
			assert_int_not_equal(pair[0], pair[1]);
			swap_columns(D, 2 * b.lens->n_valid, b.act->n_valid,
				     pair[0], pair[1]);
			r = diagnose(&b, D, NULL);
			print_report(r);
			/* crossed by construction */
			assert_flagged_exactly(r, WT_DIAG_SWAPPED, pair, 2);
			assert_int_equal(r->act[pair[0]].partner, pair[1]);
			assert_int_equal(r->act[pair[1]].partner, pair[0]);
			assert_int_equal(r->n_swapped, 2);
			assert_int_equal(r->n_dead + r->n_weak + r->n_displaced,
					 0);
			assert_false(r->misregistered);
			wt_diag_report_destroy(r);
			free(D);
			bench_free(&b);
		}
	}
}

/*
 * The actuator positions are moved by construction, so the report must
 * flag a misregistration.  strict: the fitted shift and rotation within
 * 20 % of the truth.  Otherwise (the Fried rig, whose lenslet-corner
 * actuators' centroids move less than the actuators for sub-lenslet moves,
 * see wt_diag.h) they must read between 0.4 and 1.2 of the truth along
 * it.
 */
static void check_misregistration(int rig, double sx, double sy, double rot,
				  bool strict)
{
	struct bench b;
	wt_diag_report *r;
	double *D, mag = hypot(sx, sy);

	bench_make(&b, rig);
	D = bench_matrix(&b, sx, sy, rot);
	r = diagnose(&b, D, NULL);
	print_report(r);
	assert_true(r->misregistered);
	if (mag == 0) {
		assert_true(hypot(r->shift_x, r->shift_y) <= 0.05);
	} else if (strict) {
		assert_true(hypot(r->shift_x - sx, r->shift_y - sy) <=
			    0.2 * mag);
	} else {
		double along = (r->shift_x * sx + r->shift_y * sy) / mag;

		assert_true(along >= 0.4 * mag && along <= 1.2 * mag);
	}
	if (rot == 0) {
		assert_true(fabs(r->rotation_deg) <= 0.2);
	} else if (strict) {
		assert_true(fabs(r->rotation_deg - rot) <= 0.2 * fabs(rot));
	} else {
		assert_true(r->rotation_deg / rot >= 0.4 &&
			    r->rotation_deg / rot <= 1.2);
	}
	/* a rigid move of the whole mirror is not a fault of any one
	 * actuator */
	assert_int_equal(r->n_dead + r->n_weak + r->n_swapped + r->n_displaced,
			 0);
	wt_diag_report_destroy(r);
	free(D);
	bench_free(&b);
}

static void shifted_grid_is_misregistered(void **state)
{
	int rig;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		check_misregistration(rig, 0.5, 0.0, 0, rig != FRIED);
		check_misregistration(rig, 0.0, -0.5, 0, rig != FRIED);
		check_misregistration(rig, 0.35, 0.35, 0, rig != FRIED);
	}
}

static void rotated_grid_is_misregistered(void **state)
{
	int rig;

	(void)state;
	for (rig = FINE; rig <= FRIED; rig++) {
		check_misregistration(rig, 0, 0, 3.0, rig != FRIED);
		check_misregistration(rig, 0, 0, -3.0, rig != FRIED);
	}
}

static void small_misregistration_is_tolerated(void **state)
{
	struct bench b;
	wt_diag_report *r;
	double *D;

	(void)state;
	bench_make(&b, FINE);
	D = bench_matrix(&b, 0.1, 0.0, 0.5);
	r = diagnose(&b, D, NULL);
	print_report(r);
	/* below the default tolerances (0.25 lenslet pitch, 1 degree) but
	 * still measured (fit within 20 %, by construction) */
	assert_false(r->misregistered);
	assert_true(fabs(r->shift_x - 0.1) <= 0.02);
	assert_true(fabs(r->rotation_deg - 0.5) <= 0.1);
	wt_diag_report_destroy(r);
	free(D);
	bench_free(&b);
}

/* --- spectrum ------------------------------------------------------------- */

/* A = U diag(s) V^T with orthonormal U (m x r) and V (n x r) made from
 * Gaussian columns, so that its singular values are exactly s (the SVD is
 * unique up to signs: Golub & Van Loan, Matrix Computations, ch. 2). */
static double *low_rank(int m, int n, int rank, const double *s)
{
	double *A = calloc((size_t)m * n, sizeof(*A));
	double *u = malloc((size_t)m * rank * sizeof(*u));
	double *v = malloc((size_t)n * rank * sizeof(*v));
	int i, j, c, e;

	assert_true(A && u && v);
	/* modified Gram-Schmidt on Gaussian columns, of U (e = 0) and of V
	 * (e = 1) (common practice) */
	for (c = 0; c < rank; c++) {
		for (e = 0; e < 2; e++) {
			double *q = e ? v : u;
			int len = e ? n : m, prev;
			double nrm;

			for (i = 0; i < len; i++) {
				q[i * rank + c] = wt_rng_gauss();
			}
			for (prev = 0; prev < c; prev++) {
				double d = 0;

				for (i = 0; i < len; i++) {
					d += q[i * rank + c] *
					     q[i * rank + prev];
				}
				for (i = 0; i < len; i++) {
					q[i * rank + c] -=
						d * q[i * rank + prev];
				}
			}
			nrm = 0;
			for (i = 0; i < len; i++) {
				nrm += q[i * rank + c] * q[i * rank + c];
			}
			nrm = sqrt(nrm);
			for (i = 0; i < len; i++) {
				q[i * rank + c] /= nrm;
			}
		}
	}
	for (i = 0; i < m; i++) {
		for (j = 0; j < n; j++) {
			double acc = 0;

			for (c = 0; c < rank; c++) {
				acc += u[i * rank + c] * s[c] * v[j * rank + c];
			}
			A[(size_t)i * n + j] = acc;
		}
	}
	free(u);
	free(v);
	return A;
}

static const double *svd_of(const double *A, int m, int n, wt_svd **svd)
{
	wt_error err;

	assert_int_equal(wt_svd_compute(A, m, n, svd, &err), 0);
	return wt_svd_values(*svd);
}

static void noise_floor_matches_random_matrix_theory(void **state)
{
	const int m = 400, n = 100;
	const double s = 0.01;
	double *E = malloc((size_t)m * n * sizeof(*E));
	wt_diag_params p;
	wt_svd *svd;
	const double *sv;
	double fl;
	int e, modes;

	(void)state;
	assert_non_null(E);
	wt_rng_seed(wt_test_seed(1980));
	for (e = 0; e < m * n; e++) {
		E[e] = s * wt_rng_gauss();
	}
	sv = svd_of(E, m, n, &svd);
	/* sigma_1 of pure noise ~ s (sqrt(m) + sqrt(n)) (Geman 1980), the
	 * smallest ~ s (sqrt(m) - sqrt(n)) (Silverstein 1985, Ann. Probab.
	 * 13, 1364); finite-size fluctuations are a few per cent here */
	print_message("sigma_1 %.4f vs %.4f, sigma_n %.4f vs %.4f\n", sv[0],
		      s * (sqrt(m) + sqrt(n)), sv[n - 1],
		      s * (sqrt(m) - sqrt(n)));
	assert_true(fabs(sv[0] / (s * (sqrt(m) + sqrt(n))) - 1) < 0.05);
	assert_true(fabs(sv[n - 1] / (s * (sqrt(m) - sqrt(n))) - 1) < 0.1);
	/* so with the noise known, pure noise recommends no mode */
	wt_diag_params_default(&p);
	p.matrix_noise = s;
	assert_int_equal(
		wt_diag_recommend_modes(sv, n, m, n, &p, &modes, &fl, NULL, 0),
		0);
	assert_int_equal(modes, 0);
	assert_true(fabs(fl - 2 * s * (sqrt(m) + sqrt(n))) < 1e-12);
	wt_svd_destroy(svd);
	free(E);
}

static void recommended_modes_find_the_signal_rank(void **state)
{
	const int m = 160, n = 60, rank = 25;
	const double noise = 1e-3;
	double s[25], *A;
	wt_diag_params p;
	wt_svd *svd;
	const double *sv;
	char reason[WT_DIAG_REASON_MAX];
	int i, e, modes;

	(void)state;
	wt_rng_seed(wt_test_seed(1912));
	for (i = 0; i < rank; i++) {
		s[i] = 10.0 * pow(0.1, (double)i / (rank - 1)); /* 10 .. 1 */
	}
	A = low_rank(m, n, rank, s);
	for (e = 0; e < m * n; e++) {
		A[e] += noise * wt_rng_gauss();
	}
	sv = svd_of(A, m, n, &svd);
	/* Weyl 1912: the signal values stay within ||E|| ~ noise (sqrt(m) +
	 * sqrt(n)) = 0.02 of 1..10, the noise ones below it; the floor
	 * (twice that) separates them */
	wt_diag_params_default(&p);
	p.matrix_noise = noise;
	assert_int_equal(wt_diag_recommend_modes(sv, n, m, n, &p, &modes, NULL,
						 reason, sizeof(reason)),
			 0);
	print_message("%s\n", reason);
	assert_int_equal(modes, rank);
	assert_non_null(strstr(reason, "noise floor"));
	/* without the noise: the gap sigma_25 / sigma_26 >= 1 / 0.02 */
	p.matrix_noise = 0;
	assert_int_equal(wt_diag_recommend_modes(sv, n, m, n, &p, &modes, NULL,
						 reason, sizeof(reason)),
			 0);
	print_message("%s\n", reason);
	assert_int_equal(modes, rank);
	assert_non_null(strstr(reason, "gap"));
	/* no gap that large: the ratio rule keeps sigma_i >= 0.05 sigma_1,
	 * which here are the values >= 0.5 (all 25 signal ones) */
	p.gap_ratio = 1e6;
	p.min_ratio = 0.05;
	assert_int_equal(wt_diag_recommend_modes(sv, n, m, n, &p, &modes, NULL,
						 reason, sizeof(reason)),
			 0);
	print_message("%s\n", reason);
	assert_int_equal(modes, rank);
	assert_non_null(strstr(reason, "ratio"));
	/* exact rank deficiency is an infinite gap (sigma = 0 beyond) */
	{
		const double exact[5] = {3, 2, 1, 0, 0};

		p.gap_ratio = 10;
		assert_int_equal(wt_diag_recommend_modes(exact, 5, 8, 5, &p,
							 &modes, NULL, NULL, 0),
				 0);
		assert_int_equal(modes, 3);
	}
	wt_svd_destroy(svd);
	free(A);
}

static void matrix_noise_follows_push_pull_averaging(void **state)
{
	(void)state;
	/* (s+ - s-) / (2a), each a mean of f frames: s sqrt(2/f) / (2a) =
	 * s / (a sqrt(2 f)) (standard error of a mean); Hadamard decoding
	 * divides the variance by N more (Hotelling 1944) */
	assert_true(fabs(wt_diag_matrix_noise(0.3, 0.05, 6, 1) -
			 0.3 / (0.05 * sqrt(12.0))) < 1e-12);
	assert_true(fabs(wt_diag_matrix_noise(0.3, 0.05, 6, 16) -
			 0.3 / (0.05 * sqrt(12.0 * 16))) < 1e-12);
	assert_true(isnan(wt_diag_matrix_noise(0.3, 0, 6, 1)));
	assert_true(isnan(wt_diag_matrix_noise(0.3, 0.05, 0, 1)));
	assert_true(isnan(wt_diag_matrix_noise(-1, 0.05, 6, 1)));
}

/* --- measurement noise ---------------------------------------------------- */

static void noise_from_repeated_frames(void **state)
{
	const int K = 400, n = 64;
	float *frames = malloc((size_t)K * n * sizeof(*frames));
	double rms[64], rms_d[64], all, truth_var = 0;
	int f, i;

	(void)state;
	assert_non_null(frames);
	wt_rng_seed(wt_test_seed(1941));
	for (f = 0; f < K; f++) {
		for (i = 0; i < n; i++) {
			double sd = 0.02 + 0.001 * i;

			/* a static offset plus white noise */
			frames[f * n + i] =
				(float)(1.5 + 0.01 * i + sd * wt_rng_gauss());
		}
	}
	assert_int_equal(
		wt_diag_noise(frames, K, n, WT_DIAG_NOISE_SAMPLE, rms, &all),
		0);
	assert_int_equal(
		wt_diag_noise(frames, K, n, WT_DIAG_NOISE_DIFF, rms_d, NULL),
		0);
	for (i = 0; i < n; i++) {
		double sd = 0.02 + 0.001 * i;

		truth_var += sd * sd;
		/* sample sd: relative standard error 1 / sqrt(2 (K - 1)) =
		 * 3.5 % (chi-square); 5 sigma */
		assert_true(fabs(rms[i] / sd - 1) < 0.18);
		/* successive differences: efficiency ~ 2/3 of the sample
		 * variance for white noise (von Neumann et al. 1941) */
		assert_true(fabs(rms_d[i] / sd - 1) < 0.22);
	}
	/* the pooled value averages 64 such estimates */
	assert_true(fabs(all / sqrt(truth_var / n) - 1) < 0.03);
	free(frames);
}

static void successive_differences_ignore_drift(void **state)
{
	const int K = 400, n = 16;
	float *frames = malloc((size_t)K * n * sizeof(*frames));
	double rms[16], rms_d[16];
	int f, i;

	(void)state;
	assert_non_null(frames);
	wt_rng_seed(wt_test_seed(153));
	for (f = 0; f < K; f++) {
		for (i = 0; i < n; i++) {
			/* a drift of 10 noise sigmas over the record */
			frames[f * n + i] = (float)(0.01 * (10.0 * f / K) +
						    0.01 * wt_rng_gauss());
		}
	}
	frames[5 * n + 3] = NAN; /* skipped, not propagated */
	assert_int_equal(
		wt_diag_noise(frames, K, n, WT_DIAG_NOISE_SAMPLE, rms, NULL),
		0);
	assert_int_equal(
		wt_diag_noise(frames, K, n, WT_DIAG_NOISE_DIFF, rms_d, NULL),
		0);
	for (i = 0; i < n; i++) {
		/* sample sd sees the ramp: sqrt(1 + 100 / 12) ~ 3 sigma (the
		 * variance of a uniform ramp is range^2 / 12) */
		assert_true(rms[i] > 2.5 * 0.01);
		/* the ramp adds (0.1 / K)^2 / 2 per difference: negligible
		 * (von Neumann et al. 1941) */
		assert_true(fabs(rms_d[i] / 0.01 - 1) < 0.22);
	}
	assert_true(isfinite(rms[3]) && isfinite(rms_d[3]));
	free(frames);
}

static void bad_arguments_are_refused(void **state)
{
	struct bench b;
	wt_diag_report *r = (wt_diag_report *)&r;
	wt_diag_params p;
	double *D;
	float fr[4] = {0};
	double rms[2];
	int modes;
	const double sv[2] = {1, 0.5};

	(void)state;
	bench_make(&b, FINE);
	D = bench_matrix(&b, 0, 0, 0);
	assert_int_equal(wt_diag_compute(NULL, b.lens, b.act, NULL, &r, NULL),
			 -EINVAL);
	assert_null(r);
	assert_int_equal(wt_diag_compute(D, NULL, b.act, NULL, &r, NULL),
			 -EINVAL);
	assert_int_equal(wt_diag_compute(D, b.lens, b.act, NULL, NULL, NULL),
			 -EINVAL);
	wt_diag_params_default(&p);
	p.weak_fraction = 0.05; /* below dead_fraction */
	assert_int_equal(wt_diag_compute(D, b.lens, b.act, &p, &r, NULL),
			 -EINVAL);
	D[7] = NAN;
	assert_int_equal(wt_diag_compute(D, b.lens, b.act, NULL, &r, NULL),
			 -EINVAL);
	assert_int_equal(
		wt_diag_noise(fr, 1, 2, WT_DIAG_NOISE_SAMPLE, rms, NULL),
		-EINVAL);
	assert_int_equal(wt_diag_noise(fr, 2, 2, (enum wt_diag_noise_method)7,
				       rms, NULL),
			 -EINVAL);
	assert_int_equal(wt_diag_recommend_modes(sv, 0, 2, 2, NULL, &modes,
						 NULL, NULL, 0),
			 -EINVAL);
	assert_string_equal(wt_diag_flag_name(WT_DIAG_SWAPPED), "swapped");
	assert_string_equal(wt_diag_flag_name(0), "?");
	wt_diag_report_destroy(NULL);
	free(D);
	bench_free(&b);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(healthy_matrix_raises_no_flag),
	cmocka_unit_test(healthy_noisy_matrix_raises_no_flag),
	cmocka_unit_test(zeroed_column_is_dead),
	cmocka_unit_test(scaled_column_is_weak),
	cmocka_unit_test(swapped_columns_are_paired),
	cmocka_unit_test(shifted_grid_is_misregistered),
	cmocka_unit_test(rotated_grid_is_misregistered),
	cmocka_unit_test(small_misregistration_is_tolerated),
	cmocka_unit_test(noise_floor_matches_random_matrix_theory),
	cmocka_unit_test(recommended_modes_find_the_signal_rank),
	cmocka_unit_test(matrix_noise_follows_push_pull_averaging),
	cmocka_unit_test(noise_from_repeated_frames),
	cmocka_unit_test(successive_differences_ignore_drift),
	cmocka_unit_test(bad_arguments_are_refused),
};

WT_TEST_MAIN(tests)
