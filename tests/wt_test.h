/*
 * wt_test.h - common set-up for wavetrim's cmocka tests.
 *
 * Every test file ends with WT_TEST_MAIN(tests).  Run without arguments the
 * executable runs all its cases; with one argument it runs only the case of
 * that name (ctest registers each case this way, see tests/CMakeLists.txt).
 */
#ifndef WT_TEST_H
#define WT_TEST_H

/* cmocka 1.1.5 needs these before cmocka.h. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include <math.h>

/** Seed for a test's random numbers: WT_TEST_SEED from the environment, or
 * the default; printed so that a failure can be replayed. */
static inline unsigned long wt_test_seed(unsigned long fallback)
{
	const char *env = getenv("WT_TEST_SEED");
	unsigned long seed = env ? strtoul(env, NULL, 0) : fallback;

	print_message("seed %lu (set WT_TEST_SEED to replay)\n", seed);
	return seed;
}

/*
 * Seeded random numbers for tests (splitmix64, Steele, Lea & Flood 2014;
 * normals by Box-Muller).  One stream per test executable: seed it with
 * wt_rng_seed(wt_test_seed(N)) at the start of each case that draws.
 */
static inline uint64_t *wt_test_rng_state(void)
{
	static uint64_t state;

	return &state;
}

static inline void wt_rng_seed(uint64_t seed)
{
	*wt_test_rng_state() = seed;
}

static inline uint64_t wt_rng_next(void)
{
	uint64_t z = (*wt_test_rng_state() += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

/** Uniform in (0, 1): never 0, so log() of it is finite. */
static inline double wt_rng_uniform(void)
{
	return ((double)(wt_rng_next() >> 11) + 0.5) / 9007199254740992.0;
}

/** Standard normal (Box-Muller). */
static inline double wt_rng_gauss(void)
{
	double r = sqrt(-2.0 * log(wt_rng_uniform()));

	return r * cos(2.0 * M_PI * wt_rng_uniform());
}

/* A name that is no case of this file (a stale binary, a renamed case) is
 * a failure, not "0 tests passed". */
#define WT_TEST_MAIN(tests)                                                  \
	int main(int argc, char **argv)                                      \
	{                                                                    \
		if (argc > 1) {                                              \
			size_t k, n = sizeof(tests) / sizeof(tests[0]);      \
                                                                             \
			for (k = 0; k < n; k++) {                            \
				if (!strcmp(tests[k].name, argv[1])) {       \
					break;                               \
				}                                            \
			}                                                    \
			if (k == n) {                                        \
				fprintf(stderr, "no case named %s\n",       \
					argv[1]);                            \
				return 1;                                    \
			}                                                    \
			cmocka_set_test_filter(argv[1]);                     \
		}                                                            \
		return cmocka_run_group_tests(tests, NULL, NULL);            \
	}

#endif /* WT_TEST_H */
