/*
 * bench_stream.c - STREAM-style copy and triad bandwidth at a chosen size.
 */
#include "bench_stream.h"

#include <errno.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "wt_clock.h"
#include "wt_mvm.h"

/* Doubles per array at least, and the unroll of the loops (n is a
 * multiple of it, so there is no tail). */
#define BENCH_STREAM_MIN_N 1024
#define BENCH_STREAM_STEP  8

/* The triad's scalar: a = b + q c with q = 0.5 keeps the values bounded
 * (a tends to 4) over any number of passes. */
#define BENCH_STREAM_Q 0.5

typedef void (*bench_copy_fn)(double *restrict c, const double *restrict a,
			      size_t n);
typedef void (*bench_triad_fn)(double *restrict a, const double *restrict b,
			       const double *restrict c, double q, size_t n);

/* GCC turns a copy loop into a call to memcpy, which may use non-temporal
 * stores or other tricks a STREAM copy does not measure: keep the loop. */
#if defined(__GNUC__) && !defined(__clang__)
#define BENCH_NO_MEMCPY                                                        \
	__attribute__((optimize("no-tree-loop-distribute-patterns")))
#else
#define BENCH_NO_MEMCPY
#endif

typedef double bench_d2 __attribute__((vector_size(16)));

BENCH_NO_MEMCPY static void copy_portable(double *restrict c,
					  const double *restrict a, size_t n)
{
	size_t j;

	for (j = 0; j < n; j += BENCH_STREAM_STEP) {
		bench_d2 x0, x1, x2, x3;

		memcpy(&x0, a + j, sizeof(x0));
		memcpy(&x1, a + j + 2, sizeof(x1));
		memcpy(&x2, a + j + 4, sizeof(x2));
		memcpy(&x3, a + j + 6, sizeof(x3));
		memcpy(c + j, &x0, sizeof(x0));
		memcpy(c + j + 2, &x1, sizeof(x1));
		memcpy(c + j + 4, &x2, sizeof(x2));
		memcpy(c + j + 6, &x3, sizeof(x3));
	}
}

static void triad_portable(double *restrict a, const double *restrict b,
			   const double *restrict c, double q, size_t n)
{
	bench_d2 qq = {q, q};
	size_t j;

	for (j = 0; j < n; j += BENCH_STREAM_STEP) {
		bench_d2 x0, x1, x2, x3, y0, y1, y2, y3;

		memcpy(&x0, b + j, sizeof(x0));
		memcpy(&x1, b + j + 2, sizeof(x1));
		memcpy(&x2, b + j + 4, sizeof(x2));
		memcpy(&x3, b + j + 6, sizeof(x3));
		memcpy(&y0, c + j, sizeof(y0));
		memcpy(&y1, c + j + 2, sizeof(y1));
		memcpy(&y2, c + j + 4, sizeof(y2));
		memcpy(&y3, c + j + 6, sizeof(y3));
		x0 += qq * y0;
		x1 += qq * y1;
		x2 += qq * y2;
		x3 += qq * y3;
		memcpy(a + j, &x0, sizeof(x0));
		memcpy(a + j + 2, &x1, sizeof(x1));
		memcpy(a + j + 4, &x2, sizeof(x2));
		memcpy(a + j + 6, &x3, sizeof(x3));
	}
}

#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#define BENCH_HAVE_AVX2 1
#define BENCH_AVX2	__attribute__((target("avx2")))
typedef double bench_d4 __attribute__((vector_size(32)));

BENCH_AVX2 BENCH_NO_MEMCPY static void
copy_avx2(double *restrict c, const double *restrict a, size_t n)
{
	size_t j;

	for (j = 0; j < n; j += BENCH_STREAM_STEP) {
		bench_d4 x, y;

		memcpy(&x, a + j, sizeof(x));
		memcpy(&y, a + j + 4, sizeof(y));
		memcpy(c + j, &x, sizeof(x));
		memcpy(c + j + 4, &y, sizeof(y));
	}
}

BENCH_AVX2 static void triad_avx2(double *restrict a, const double *restrict b,
				  const double *restrict c, double q, size_t n)
{
	bench_d4 qq = {q, q, q, q};
	size_t j;

	for (j = 0; j < n; j += BENCH_STREAM_STEP) {
		bench_d4 x0, x1, y0, y1;

		memcpy(&x0, b + j, sizeof(x0));
		memcpy(&x1, b + j + 4, sizeof(x1));
		memcpy(&y0, c + j, sizeof(y0));
		memcpy(&y1, c + j + 4, sizeof(y1));
		x0 += qq * y0;
		x1 += qq * y1;
		memcpy(a + j, &x0, sizeof(x0));
		memcpy(a + j + 4, &x1, sizeof(x1));
	}
}
#else
#define BENCH_HAVE_AVX2 0
#endif

int bench_stream_measure(size_t working_set_bytes, int min_passes,
			 double budget_ns, struct bench_stream *out)
{
	bench_copy_fn copy = copy_portable;
	bench_triad_fn triad = triad_portable;
	double *a, *b, *c, spent = 0.0;
	size_t n, j, bytes;
	int pass = 0, ret = 0;

	if (working_set_bytes == 0 || !out) {
		return -EINVAL;
	}
	memset(out, 0, sizeof(*out));
	out->isa = "portable";
#if BENCH_HAVE_AVX2
	if (wt_mvm_isa_best() == WT_MVM_ISA_AVX2) {
		copy = copy_avx2;
		triad = triad_avx2;
		out->isa = "avx2";
	}
#endif
	n = working_set_bytes / (3 * sizeof(double));
	n -= n % BENCH_STREAM_STEP;
	if (n < BENCH_STREAM_MIN_N) {
		n = BENCH_STREAM_MIN_N;
	}
	bytes = n * sizeof(double);
	/* line-aligned, so that a small working set is exactly its lines */
	a = aligned_alloc(64, bytes);
	b = aligned_alloc(64, bytes);
	c = aligned_alloc(64, bytes);
	if (!a || !b || !c) {
		ret = -ENOMEM;
		goto out;
	}
	/* STREAM's start values; writing them also maps every page */
	for (j = 0; j < n; j++) {
		a[j] = 1.0;
		b[j] = 2.0;
		c[j] = 0.0;
	}
	out->working_set_bytes = 3 * bytes;
	out->n = n;
	out->copy_best_ns = -1.0;
	out->triad_best_ns = -1.0;

	/* pass 0 warms the caches and is not counted, as in STREAM */
	copy(c, a, n);
	triad(a, b, c, BENCH_STREAM_Q, n);
	while (pass < min_passes || spent < budget_ns) {
		uint64_t t0 = wt_clock_ns(), t1, t2;
		double dc, dt;

		copy(c, a, n);
		t1 = wt_clock_ns();
		triad(a, b, c, BENCH_STREAM_Q, n);
		t2 = wt_clock_ns();
		dc = (double)(t1 - t0);
		dt = (double)(t2 - t1);
		if (out->copy_best_ns < 0.0 || dc < out->copy_best_ns) {
			out->copy_best_ns = dc;
		}
		if (out->triad_best_ns < 0.0 || dt < out->triad_best_ns) {
			out->triad_best_ns = dt;
		}
		spent += dc + dt;
		pass++;
	}
	out->passes = pass;

	/* every element went through the same passes: all of a must be
	 * equal, as STREAM checks its results */
	for (j = 1; j < n; j++) {
		if (a[j] != a[0] || c[j] != c[0]) {
			ret = -EFAULT;
			goto out;
		}
	}
	if (out->copy_best_ns < 1.0) {
		out->copy_best_ns = 1.0;
	}
	if (out->triad_best_ns < 1.0) {
		out->triad_best_ns = 1.0;
	}
	out->copy_bytes_per_s = 16.0 * (double)n / out->copy_best_ns * 1e9;
	out->triad_bytes_per_s = 24.0 * (double)n / out->triad_best_ns * 1e9;
out:
	free(a);
	free(b);
	free(c);
	return ret;
}
