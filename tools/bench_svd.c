/*
 * bench_svd.c - the control-matrix build against a bare LAPACK SVD; see
 * bench_svd.h.
 */
#include "bench_svd.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <lapacke.h>

#include "wt_clock.h"
#include "wt_recon.h"

void bench_svd_model(const wt_grid *lenslets, const wt_grid *actuators,
		     double sigma_pitches, double noise_rel, unsigned long seed,
		     double *D)
{
	const int ns = lenslets->n_valid, na = actuators->n_valid;
	const double sigma = sigma_pitches * actuators->pitch;
	const double inv2s2 = 1.0 / (2.0 * sigma * sigma);
	uint64_t state = seed * 0x9e3779b97f4a7c15ull + 1u;
	double peak = 0.0;
	size_t e, elems = (size_t)2 * ns * na;
	int s, a;

	for (s = 0; s < ns; s++) {
		for (a = 0; a < na; a++) {
			double dx = lenslets->x[s] - actuators->x[a];
			double dy = lenslets->y[s] - actuators->y[a];
			double g = exp(-(dx * dx + dy * dy) * inv2s2);

			/* d/dx exp(-r^2 / 2 s^2) = -x / s^2 exp(...) */
			D[(size_t)s * na + a] = -2.0 * dx * inv2s2 * g;
			D[(size_t)(ns + s) * na + a] = -2.0 * dy * inv2s2 * g;
		}
	}
	for (e = 0; e < elems; e++) {
		peak = fmax(peak, fabs(D[e]));
	}
	for (e = 0; e < elems; e++) {
		/* xorshift64* (Vigna 2016): seeded, repeatable */
		double u;

		state ^= state >> 12;
		state ^= state << 25;
		state ^= state >> 27;
		u = (double)((state * 0x2545f4914f6cdd1dull) >> 11) /
		    9007199254740992.0;
		D[e] += (2.0 * u - 1.0) * noise_rel * peak;
	}
}

static double elapsed_ns(uint64_t t0)
{
	return (double)(wt_clock_ns() - t0);
}

int bench_svd_measure(const double *D, int m, int n, int runs, int modes,
		      double min_sv_ratio, struct bench_svd *out, wt_error *err)
{
	const int count = m < n ? m : n;
	size_t elems = (size_t)m * n;
	double *a = NULL, *s = NULL, *u = NULL, *vt = NULL;
	float *R = NULL;
	wt_svd *svd = NULL;
	int ret = 0, r;

	memset(out, 0, sizeof(*out));
	out->m = m;
	out->n = n;
	out->runs = runs;
	out->bare_ns = out->svd_ns = out->total_ns = INFINITY;
	a = malloc(elems * sizeof(*a));
	s = malloc((size_t)count * sizeof(*s));
	u = malloc((size_t)m * count * sizeof(*u));
	vt = malloc((size_t)count * n * sizeof(*vt));
	R = malloc(elems * sizeof(*R));
	if (!a || !s || !u || !vt || !R) {
		ret = wt_error_set(err, -ENOMEM, "svd %d x %d: out of memory",
				   m, n);
		goto out;
	}
	for (r = 0; r < runs; r++) {
		uint64_t t0;
		double t_svd, t_pinv;
		lapack_int info;
		int kept, i;

		memcpy(a, D, elems * sizeof(*a));
		t0 = wt_clock_ns();
		info = LAPACKE_dgesdd(LAPACK_ROW_MAJOR, 'S', m, n, a, n, s, u,
				      count, vt, n);
		t_svd = elapsed_ns(t0);
		if (info != 0) {
			ret = wt_error_set(err, -EIO,
					   "bare dgesdd %d x %d: info %d", m, n,
					   (int)info);
			goto out;
		}
		out->bare_ns = fmin(out->bare_ns, t_svd);

		t0 = wt_clock_ns();
		ret = wt_svd_compute(D, m, n, &svd, err);
		if (ret < 0) {
			goto out;
		}
		t_svd = elapsed_ns(t0);
		t0 = wt_clock_ns();
		kept = wt_recon_modes(svd, modes, min_sv_ratio);
		ret = kept < 1 ? -ERANGE
			       : wt_recon_pinv_float(svd, kept, NULL, R);
		t_pinv = elapsed_ns(t0);
		if (ret < 0) {
			wt_error_set(err, ret, "control matrix %d x %d: %s", n,
				     m, wt_strerror(ret));
			goto out;
		}
		if (t_svd + t_pinv < out->total_ns) {
			out->svd_ns = t_svd;
			out->pinv_ns = t_pinv;
			out->total_ns = t_svd + t_pinv;
		}
		out->kept = kept;
		out->cond = wt_recon_condition(svd, kept);
		out->sv_max_rel = 0.0;
		for (i = 0; i < count; i++) {
			out->sv_max_rel =
				fmax(out->sv_max_rel,
				     fabs(wt_svd_values(svd)[i] - s[i]) / s[0]);
		}
		wt_svd_destroy(svd);
		svd = NULL;
	}
out:
	wt_svd_destroy(svd);
	free(a);
	free(s);
	free(u);
	free(vt);
	free(R);
	return ret;
}
