/*
 * bench_util.h - what wavetrim-bench and wavetrim-replay share: a seeded
 * random generator, percentiles of a timing series, CPU pinning and the
 * synthetic Shack-Hartmann frame.
 */
#ifndef BENCH_UTIL_H
#define BENCH_UTIL_H

#include <pthread.h>
#include <stdint.h>

#include "wt_geometry.h"
#include "wt_json.h"

/* The synthetic frame: background level, spot peak above it, and the spot
 * width and offset range as fractions of the window side. */
#define FRAME_BACKGROUND       100.0
#define FRAME_PEAK	       3000.0
#define SPOT_SIGMA_PER_PIXELS  (1.0 / 8.0)
#define SPOT_OFFSET_PER_PIXELS 0.125

/** p50, p99, p99.9, max, min and mean of a series, in its unit (ns). */
struct stats {
	double p50, p99, p999, max, min, mean;
};

/** splitmix64 (Steele, Lea and Flood, 2014): seeded, repeatable. */
uint64_t rng_next(uint64_t *state);

/** Uniform in [0, 1). */
double rng_uniform(uint64_t *state);

/** Nearest-rank percentile of sorted v: the smallest value with at least
 * p of the samples at or below it (common practice). */
double percentile(const uint64_t *v, long n, double p);

/** Sorts v (n values) and fills *st; all 0 for n <= 0. */
void stats_of(uint64_t *v, long n, struct stats *st);

/** key: {p50_ns, p99_ns, p99_9_ns, max_ns, min_ns, mean_ns} (key NULL:
 * an array element). */
void json_stats(wt_json *j, const char *key, const struct stats *st);

/** Pin a thread to one CPU: 0 or a negative errno. */
int pin_thread(pthread_t thread, int cpu);

/**
 * Draw one frame: side x side pixels at FRAME_BACKGROUND and one Gaussian
 * spot (peak FRAME_PEAK, sigma SPOT_SIGMA_PER_PIXELS of the window) per
 * valid lenslet of the grid, at a random offset within
 * SPOT_OFFSET_PER_PIXELS of the window of its centre ((p - 1) / 2, where
 * lib/wt_centroid.h measures from).  The offsets drawn are written to
 * true_dx and true_dy (n_valid each) when they are not NULL.
 */
void bench_render_spots(uint16_t *frame, int side, const wt_grid *lenslets,
			int pixels_per_lenslet, uint64_t *rng, float *true_dx,
			float *true_dy);

#endif /* BENCH_UTIL_H */
