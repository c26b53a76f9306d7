/*
 * sim_rng.h - the simulator's seeded random numbers.
 *
 * xoshiro256** (Blackman & Vigna 2018) seeded through splitmix64, so any
 * 64-bit seed gives a well-mixed state and the same seed always gives the
 * same sequence on every platform.  One generator belongs to one thread;
 * the state is plain data and may be copied to fork a stream.
 */
#ifndef SIM_RNG_H
#define SIM_RNG_H

#include <stdint.h>

/** Generator state (four 64-bit words, never all zero once seeded). */
typedef struct sim_rng {
	uint64_t s[4];
} sim_rng;

/** Seed the generator (any value, 0 included). */
void sim_rng_seed(sim_rng *r, uint64_t seed);

/** Next raw 64-bit output. */
uint64_t sim_rng_next(sim_rng *r);

/** Uniform double in [0, 1), 53 random bits. */
double sim_rng_uniform(sim_rng *r);

/**
 * Standard normal deviate (mean 0, variance 1), Marsaglia's polar method
 * (Marsaglia & Bray 1964).  The second deviate of each pair is dropped so
 * that the state stays four words.
 */
double sim_rng_normal(sim_rng *r);

/**
 * Poisson deviate of the given mean.  mean <= 0 (or NaN) gives 0.  Below a
 * mean of 30: Knuth's multiplication of uniforms (exact).  From 30 on: the
 * transformed rejection method PTRS of Hormann, Insurance: Mathematics and
 * Economics 12, 39 (1993), also exact.  Means above 1e9 are clamped to an
 * unsigned-safe normal approximation (rounded, with continuity correction).
 */
unsigned sim_rng_poisson(sim_rng *r, double mean);

#endif /* SIM_RNG_H */
