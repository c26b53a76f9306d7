/* sim_rng.c - xoshiro256**, normal and Poisson deviates. */
#include "sim_rng.h"

#include <math.h>

static uint64_t splitmix64(uint64_t *x)
{
	uint64_t z = (*x += 0x9e3779b97f4a7c15ULL);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
	return z ^ (z >> 31);
}

static inline uint64_t rotl(uint64_t x, int k)
{
	return (x << k) | (x >> (64 - k));
}

void sim_rng_seed(sim_rng *r, uint64_t seed)
{
	uint64_t x = seed;
	int i;

	for (i = 0; i < 4; i++) {
		r->s[i] = splitmix64(&x);
	}
	/* splitmix64 is a bijection of its counter, so four zero outputs
	 * cannot happen; keep the guard for copied-in states anyway. */
	if (!(r->s[0] | r->s[1] | r->s[2] | r->s[3])) {
		r->s[0] = 1;
	}
}

uint64_t sim_rng_next(sim_rng *r)
{
	uint64_t *s = r->s;
	uint64_t result = rotl(s[1] * 5, 7) * 9;
	uint64_t t = s[1] << 17;

	s[2] ^= s[0];
	s[3] ^= s[1];
	s[1] ^= s[2];
	s[0] ^= s[3];
	s[2] ^= t;
	s[3] = rotl(s[3], 45);
	return result;
}

double sim_rng_uniform(sim_rng *r)
{
	return (double)(sim_rng_next(r) >> 11) * 0x1.0p-53;
}

double sim_rng_normal(sim_rng *r)
{
	double u, v, q;

	do {
		u = 2.0 * sim_rng_uniform(r) - 1.0;
		v = 2.0 * sim_rng_uniform(r) - 1.0;
		q = u * u + v * v;
	} while (q >= 1.0 || q == 0.0);
	return u * sqrt(-2.0 * log(q) / q);
}

/* Knuth, TAOCP vol. 2, 3.4.1: count uniforms until their product drops
 * below exp(-mean).  Exact; about mean + 1 uniforms. */
static unsigned poisson_knuth(sim_rng *r, double mean)
{
	double limit = exp(-mean);
	double prod = sim_rng_uniform(r);
	unsigned k = 0;

	while (prod > limit) {
		k++;
		prod *= sim_rng_uniform(r);
	}
	return k;
}

/* PTRS, Hormann 1993, with the constants of the paper's Table 1. */
static unsigned poisson_ptrs(sim_rng *r, double mean)
{
	double slam = sqrt(mean);
	double loglam = log(mean);
	double b = 0.931 + 2.53 * slam;
	double a = -0.059 + 0.02483 * b;
	double invalpha = 1.1239 + 1.1328 / (b - 3.4);
	double vr = 0.9277 - 3.6224 / (b - 2.0);
	double u, v, us, k;

	for (;;) {
		u = sim_rng_uniform(r) - 0.5;
		v = sim_rng_uniform(r);
		us = 0.5 - fabs(u);
		k = floor((2.0 * a / us + b) * u + mean + 0.43);
		if (us >= 0.07 && v <= vr) {
			return (unsigned)k;
		}
		if (k < 0.0 || (us < 0.013 && v > us)) {
			continue;
		}
		if (log(v) + log(invalpha) - log(a / (us * us) + b) <=
		    -mean + k * loglam - lgamma(k + 1.0)) {
			return (unsigned)k;
		}
	}
}

unsigned sim_rng_poisson(sim_rng *r, double mean)
{
	double x;

	if (!(mean > 0.0)) {
		return 0;
	}
	if (mean < 30.0) {
		return poisson_knuth(r, mean);
	}
	if (mean <= 1e9) {
		return poisson_ptrs(r, mean);
	}
	/* Far beyond any detector's full well: normal approximation. */
	x = floor(mean + sqrt(mean) * sim_rng_normal(r) + 0.5);
	if (x < 0.0) {
		return 0;
	}
	if (x > 4294967295.0) {
		return 4294967295u;
	}
	return (unsigned)x;
}
