/*
 * bench_util.c - what wavetrim-bench and wavetrim-replay share.
 */
#include "bench_util.h"

#include <math.h>
#include <sched.h>
#include <stdlib.h>
#include <string.h>

uint64_t rng_next(uint64_t *state)
{
	uint64_t z = (*state += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

double rng_uniform(uint64_t *state)
{
	return (double)(rng_next(state) >> 11) * (1.0 / 9007199254740992.0);
}

static int cmp_u64(const void *a, const void *b)
{
	uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;

	return (x > y) - (x < y);
}

double percentile(const uint64_t *v, long n, double p)
{
	long k = (long)ceil(p * (double)n) - 1;

	if (k < 0) {
		k = 0;
	}
	if (k >= n) {
		k = n - 1;
	}
	return (double)v[k];
}

void stats_of(uint64_t *v, long n, struct stats *st)
{
	double sum = 0.0;
	long i;

	memset(st, 0, sizeof(*st));
	if (n <= 0) {
		return;
	}
	qsort(v, (size_t)n, sizeof(*v), cmp_u64);
	for (i = 0; i < n; i++) {
		sum += (double)v[i];
	}
	st->p50 = percentile(v, n, 0.50);
	st->p99 = percentile(v, n, 0.99);
	st->p999 = percentile(v, n, 0.999);
	st->max = (double)v[n - 1];
	st->min = (double)v[0];
	st->mean = sum / (double)n;
}

int pin_thread(pthread_t thread, int cpu)
{
	cpu_set_t set;

	CPU_ZERO(&set);
	CPU_SET(cpu, &set);
	return -pthread_setaffinity_np(thread, sizeof(set), &set);
}

void bench_render_spots(uint16_t *frame, int side, const wt_grid *lenslets,
			int p, uint64_t *rng, float *true_dx, float *true_dy)
{
	double sigma = p * SPOT_SIGMA_PER_PIXELS;
	double centre = 0.5 * (p - 1);
	int k, i, j;

	for (i = 0; i < side * side; i++) {
		frame[i] = (uint16_t)FRAME_BACKGROUND;
	}
	for (k = 0; k < lenslets->n_valid; k++) {
		double dx = (2.0 * rng_uniform(rng) - 1.0) * p *
			    SPOT_OFFSET_PER_PIXELS;
		double dy = (2.0 * rng_uniform(rng) - 1.0) * p *
			    SPOT_OFFSET_PER_PIXELS;
		int x0 = lenslets->col[k] * p, y0 = lenslets->row[k] * p;

		if (true_dx) {
			true_dx[k] = (float)dx;
		}
		if (true_dy) {
			true_dy[k] = (float)dy;
		}
		for (j = 0; j < p; j++) {
			for (i = 0; i < p; i++) {
				double ex = i - centre - dx,
				       ey = j - centre - dy;
				double v =
					FRAME_BACKGROUND +
					FRAME_PEAK * exp(-(ex * ex + ey * ey) /
							 (2.0 * sigma * sigma));

				frame[(size_t)(y0 + j) * side + x0 + i] =
					(uint16_t)lround(v);
			}
		}
	}
}

void json_stats(wt_json *j, const char *key, const struct stats *st)
{
	if (key) {
		wt_json_key(j, key);
	}
	wt_json_object_begin(j);
	wt_json_key(j, "p50_ns");
	wt_json_double_prec(j, st->p50, 8);
	wt_json_key(j, "p99_ns");
	wt_json_double_prec(j, st->p99, 8);
	wt_json_key(j, "p99_9_ns");
	wt_json_double_prec(j, st->p999, 8);
	wt_json_key(j, "max_ns");
	wt_json_double_prec(j, st->max, 8);
	wt_json_key(j, "min_ns");
	wt_json_double_prec(j, st->min, 8);
	wt_json_key(j, "mean_ns");
	wt_json_double_prec(j, st->mean, 8);
	wt_json_object_end(j);
}
