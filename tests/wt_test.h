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

#include <cmocka.h>

/** Seed for a test's random numbers: WT_TEST_SEED from the environment, or
 * the default; printed so that a failure can be replayed. */
static inline unsigned long wt_test_seed(unsigned long fallback)
{
	const char *env = getenv("WT_TEST_SEED");
	unsigned long seed = env ? strtoul(env, NULL, 0) : fallback;

	print_message("seed %lu (set WT_TEST_SEED to replay)\n", seed);
	return seed;
}

#define WT_TEST_MAIN(tests)                                                  \
	int main(int argc, char **argv)                                      \
	{                                                                    \
		if (argc > 1) {                                              \
			cmocka_set_test_filter(argv[1]);                     \
		}                                                            \
		return cmocka_run_group_tests(tests, NULL, NULL);            \
	}

#endif /* WT_TEST_H */
