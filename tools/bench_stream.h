/*
 * bench_stream.h - STREAM-style copy and triad bandwidth at a chosen size.
 *
 * After McCalpin's STREAM benchmark ("Memory Bandwidth and Machine Balance
 * in Current High Performance Computers", IEEE TCCA Newsletter, 1995):
 * three arrays of doubles a, b, c; copy is c[j] = a[j], triad is
 * a[j] = b[j] + q * c[j]; bytes are counted as STREAM counts them (copy 16
 * bytes per element, triad 24: the words the loop names, not the extra
 * line a write-allocate cache reads before a store), and each kernel's
 * rate is its best pass, as STREAM reports.
 *
 * Unlike STREAM, whose arrays are sized well beyond the last cache to
 * measure main memory, the three arrays here add up to a chosen working
 * set, so that the rate is that of the memory level a working set of that
 * size lives in (L2, L3 or DRAM).  The loops use the widest vector unit
 * the own matrix-vector kernel uses (AVX2 where the CPU has it, else
 * 16-byte vectors), so neither side is held back by instruction issue.
 */
#ifndef BENCH_STREAM_H
#define BENCH_STREAM_H

#include <stddef.h>

/** One measurement. */
struct bench_stream {
	size_t working_set_bytes; /**< 3 arrays together, as measured */
	size_t n;		  /**< doubles per array */
	int passes;		  /**< passes of each kernel */
	const char *isa;	  /**< "portable" or "avx2" */
	double copy_best_ns;	  /**< fastest copy pass */
	double triad_best_ns;	  /**< fastest triad pass */
	double copy_bytes_per_s;  /**< 16 n / copy_best_ns */
	double triad_bytes_per_s; /**< 24 n / triad_best_ns */
};

/**
 * Measure copy and triad with three arrays adding up to about
 * working_set_bytes (at least 3 x 1024 doubles), alternating the kernels
 * pass by pass for at least min_passes passes each and at least budget_ns
 * in all.  Returns 0, -EINVAL (working_set_bytes 0, out NULL), -ENOMEM, or
 * -EFAULT when the arrays do not hold what the passes must have left.
 */
int bench_stream_measure(size_t working_set_bytes, int min_passes,
			 double budget_ns, struct bench_stream *out);

#endif /* BENCH_STREAM_H */
