/*
 * wt_mvm.h - the control matrix times the slope vector: u = R s, float32.
 *
 * R is rows x cols, row-major, float; s has cols floats, u rows floats.
 * Two kernels compute it:
 *
 * - our own (wt_mvm_own()): four rows at a time, so each load of s serves
 *   four rows, with eight partial sums per row in a GCC/Clang vector type
 *   (no -ffast-math needed: the order of the additions is fixed by the
 *   code, not left to the compiler).  s is at most a few tens of KiB for
 *   the sizes we run (6456 floats = 25 KiB for a 64 x 64 lenslet sensor),
 *   so it stays in L1 while R streams past once; no further blocking pays.
 *   It comes in ISA variants chosen at run time on x86 (an SSE2 build
 *   that runs anywhere, and AVX2, which is faster in cache); every variant
 *   does the same operations in the same order, so all give bit-identical
 *   results, and u[i] does not depend on where row i falls in a block of
 *   four, so any split of the rows gives the same u as the whole product.
 * - single-threaded OpenBLAS, cblas_sgemv.  OpenBLAS's thread count is a
 *   process-wide setting: call openblas_set_num_threads(1) in main()
 *   before wt_mvm_create() and before the loop starts (this library never
 *   changes it).
 *
 * A wt_mvm remembers which kernel to use for one size; wt_mvm_create()
 * can time both on that size and keep the faster (WT_MVM_AUTO) or obey a
 * forced choice.  The apply calls allocate nothing, take no lock and keep
 * no state, so one wt_mvm may serve several threads, each on its own rows.
 *
 * Accuracy: both kernels accumulate in float; each u[i] is within the
 * dot-product bound |u[i] - (R s)[i]| <= gamma_cols * (|R| |s|)[i],
 * gamma_n = n u / (1 - n u), u = 2^-24 (Higham, Accuracy and Stability of
 * Numerical Algorithms, 2nd ed., section 3.1), which holds for any order of
 * summation; tests/test_mvm.c checks it against a double-precision product.
 */
#ifndef WT_MVM_H
#define WT_MVM_H

#include "wt_error.h"

/** Which kernel computes u = R s. */
enum wt_mvm_kind {
	WT_MVM_AUTO = 0, /**< wt_mvm_create() times both and keeps the faster */
	WT_MVM_OWN = 1,	 /**< wt_mvm_own() */
	WT_MVM_BLAS = 2, /**< cblas_sgemv (OpenBLAS) */
};

/** Instruction-set variants of our own kernel. */
enum wt_mvm_isa {
	WT_MVM_ISA_PORTABLE = 0, /**< 16-byte vectors: SSE2 on x86-64 */
	WT_MVM_ISA_AVX2 = 1,	 /**< 32-byte vectors (x86 with AVX2 only) */
	WT_MVM_ISA_COUNT
};

/** "auto", "own", "blas" (NULL for a value outside the enum). */
const char *wt_mvm_kind_name(enum wt_mvm_kind kind);

/** Parse "auto", "own" or "blas" into *kind; -EINVAL for anything else. */
int wt_mvm_kind_parse(const char *text, enum wt_mvm_kind *kind);

/** "portable", "avx2" (NULL for a value outside the enum). */
const char *wt_mvm_isa_name(enum wt_mvm_isa isa);

/** 1 if this CPU runs that variant, else 0. */
int wt_mvm_isa_supported(enum wt_mvm_isa isa);

/** The variant wt_mvm_own() uses on this CPU (the widest supported). */
enum wt_mvm_isa wt_mvm_isa_best(void);

/**
 * u = R s with our own kernel, best variant for this CPU.  rows, cols >= 0
 * (cols = 0 gives u = 0); u must not overlap R or s.
 */
void wt_mvm_own(const float *R, const float *s, float *u, int rows, int cols);

/**
 * The same with a chosen variant (for tests and the benchmark).  Returns 0,
 * or -ENOTSUP (u untouched) when this CPU cannot run it, -EINVAL for an
 * unknown variant.
 */
int wt_mvm_own_isa(enum wt_mvm_isa isa, const float *R, const float *s,
		   float *u, int rows, int cols);

/** u = R s with cblas_sgemv; same conventions as wt_mvm_own(). */
void wt_mvm_blas(const float *R, const float *s, float *u, int rows, int cols);

/** The kernel chosen for one rows x cols size. */
typedef struct wt_mvm wt_mvm;

/**
 * Choose the kernel for rows x cols products.  WT_MVM_OWN and WT_MVM_BLAS
 * are obeyed as they are.  WT_MVM_AUTO times both on a scratch matrix of
 * that size (filled, so that its pages are real; allocated and freed here,
 * so creation is set-up, not real-time work): they run alternately, as
 * many times as fit in about 50 ms (an odd number, at least 5 and at most
 * 201 each), and the one with the smaller median wins (a tie goes to our
 * own kernel).  The timing is only as good as the machine is quiet, and
 * where the two are close the choice can differ from run to run: create
 * once, in the thread and on the CPU that will run the loop, after the
 * BLAS thread count is set.
 *
 * Returns 0; -EINVAL (message in *err) for rows or cols < 1, a product
 * above 2^28 elements, an unknown kind or a NULL out; -ENOMEM.
 */
int wt_mvm_create(int rows, int cols, enum wt_mvm_kind want, wt_mvm **out,
		  wt_error *err);

/** Free (NULL is fine). */
void wt_mvm_destroy(wt_mvm *m);

/** The kernel in use: WT_MVM_OWN or WT_MVM_BLAS, never WT_MVM_AUTO. */
enum wt_mvm_kind wt_mvm_kind_of(const wt_mvm *m);

/** What was asked for at creation (may be WT_MVM_AUTO). */
enum wt_mvm_kind wt_mvm_requested(const wt_mvm *m);

/** rows and cols given at creation. */
int wt_mvm_rows(const wt_mvm *m);
int wt_mvm_cols(const wt_mvm *m);

/**
 * Medians of the selector's timing, in nanoseconds per product, and the
 * number of runs of each; all 0 when the kind was forced.  Any pointer may
 * be NULL.
 */
void wt_mvm_timing(const wt_mvm *m, double *own_ns, double *blas_ns, int *runs);

/**
 * u = R s with the chosen kernel; R is rows x cols as given at creation.
 * No allocation.
 */
void wt_mvm_apply(const wt_mvm *m, const float *R, const float *s, float *u);

/**
 * Rows row0 .. row0 + n_rows - 1 only: u[row0 + i] = (R s)[row0 + i], the
 * other entries of u untouched; for splitting one product over threads.
 * Returns 0, or -EINVAL (nothing done) when the range is outside
 * 0 .. rows.  No allocation.
 */
int wt_mvm_apply_rows(const wt_mvm *m, const float *R, const float *s, float *u,
		      int row0, int n_rows);

#endif /* WT_MVM_H */
