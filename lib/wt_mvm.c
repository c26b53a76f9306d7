/*
 * wt_mvm.c - the control matrix times the slope vector: u = R s, float32.
 */
#include "wt_mvm.h"

#include <errno.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cblas.h>

#include "wt_clock.h"

/* Largest rows * cols accepted (a 1 GiB float matrix), as wt_control. */
#define WT_MVM_MAX_ELEMENTS ((size_t)1 << 28)

/* The selector's measuring time, and its bounds on the runs per kernel. */
#define WT_MVM_SELECT_NS       (50 * WT_NS_PER_MS)
#define WT_MVM_SELECT_MIN_RUNS 5
#define WT_MVM_SELECT_MAX_RUNS 201

#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#define WT_MVM_HAVE_AVX2 1
#else
#define WT_MVM_HAVE_AVX2 0
#endif

typedef void (*wt_mvm_fn)(const float *restrict r, const float *restrict s,
			  float *restrict u, int rows, int cols);

struct wt_mvm {
	int rows;
	int cols;
	enum wt_mvm_kind requested;
	enum wt_mvm_kind kind; /* OWN or BLAS */
	wt_mvm_fn fn;
	double own_ns, blas_ns; /* selector medians; 0 when forced */
	int runs;
};

/*
 * Every variant keeps eight partial sums per row, lane l summing the
 * products of columns k with k % 8 == l over the first cols & ~7 columns;
 * the lanes are then added pairwise and the last cols % 8 products one by
 * one.  This function is that last part, shared by all variants, so they
 * give the same bits.
 */
static inline float wt_mvm_finish(const float lanes[8], const float *restrict r,
				  const float *restrict s, int k, int cols)
{
	float t = ((lanes[0] + lanes[1]) + (lanes[2] + lanes[3])) +
		  ((lanes[4] + lanes[5]) + (lanes[6] + lanes[7]));

	for (; k < cols; k++) {
		t += r[k] * s[k];
	}
	return t;
}

/*
 * The kernel, for a type T that holds eight float lanes and its four
 * operations: ZERO(), LOAD(p) (eight floats, no alignment needed),
 * MADD(acc, r, x) (acc + r * x, lane by lane, rounded twice: no fused
 * multiply-add, so that every variant rounds alike) and STORE(out, v).
 * Four rows share each load of s; rows left over go one at a time through
 * the same per-row arithmetic.
 */
#define WT_MVM_KERNEL(name, attr, T, ZERO, LOAD, MADD, STORE)                  \
	attr static void name(const float *restrict r,                         \
			      const float *restrict s, float *restrict u,      \
			      int rows, int cols)                              \
	{                                                                      \
		size_t stride = (size_t)(cols > 0 ? cols : 0);                 \
		int cols8 = cols > 0 ? cols & ~7 : 0;                          \
		int row = 0, k;                                                \
		float t0[8], t1[8], t2[8], t3[8];                              \
                                                                               \
		for (; row + 4 <= rows; row += 4) {                            \
			const float *r0 = r + (size_t)row * stride;            \
			const float *r1 = r0 + stride;                         \
			const float *r2 = r1 + stride;                         \
			const float *r3 = r2 + stride;                         \
			T a0 = ZERO(), a1 = ZERO(), a2 = ZERO(), a3 = ZERO();  \
                                                                               \
			for (k = 0; k < cols8; k += 8) {                       \
				T x = LOAD(s + k);                             \
                                                                               \
				a0 = MADD(a0, LOAD(r0 + k), x);                \
				a1 = MADD(a1, LOAD(r1 + k), x);                \
				a2 = MADD(a2, LOAD(r2 + k), x);                \
				a3 = MADD(a3, LOAD(r3 + k), x);                \
			}                                                      \
			STORE(t0, a0);                                         \
			STORE(t1, a1);                                         \
			STORE(t2, a2);                                         \
			STORE(t3, a3);                                         \
			u[row] = wt_mvm_finish(t0, r0, s, cols8, cols);        \
			u[row + 1] = wt_mvm_finish(t1, r1, s, cols8, cols);    \
			u[row + 2] = wt_mvm_finish(t2, r2, s, cols8, cols);    \
			u[row + 3] = wt_mvm_finish(t3, r3, s, cols8, cols);    \
		}                                                              \
		for (; row < rows; row++) {                                    \
			const float *r0 = r + (size_t)row * stride;            \
			T a0 = ZERO();                                         \
                                                                               \
			for (k = 0; k < cols8; k += 8) {                       \
				a0 = MADD(a0, LOAD(r0 + k), LOAD(s + k));      \
			}                                                      \
			STORE(t0, a0);                                         \
			u[row] = wt_mvm_finish(t0, r0, s, cols8, cols);        \
		}                                                              \
	}

/* Portable: eight lanes as two 16-byte vectors, which every target GCC
 * and Clang vectorise for has (SSE2 on x86-64, NEON, ...); a plain
 * 32-byte vector type would be split by the compiler through memory. */
typedef float wt_f4 __attribute__((vector_size(16)));
typedef struct wt_p8 {
	wt_f4 lo, hi;
} wt_p8;

static inline wt_p8 wt_p8_zero(void)
{
	wt_p8 v;

	memset(&v, 0, sizeof(v));
	return v;
}

static inline wt_p8 wt_p8_load(const float *p)
{
	wt_p8 v;

	memcpy(&v.lo, p, sizeof(v.lo));
	memcpy(&v.hi, p + 4, sizeof(v.hi));
	return v;
}

static inline wt_p8 wt_p8_madd(wt_p8 acc, wt_p8 r, wt_p8 x)
{
	acc.lo += r.lo * x.lo;
	acc.hi += r.hi * x.hi;
	return acc;
}

static inline void wt_p8_store(float *out, wt_p8 v)
{
	memcpy(out, &v.lo, sizeof(v.lo));
	memcpy(out + 4, &v.hi, sizeof(v.hi));
}

WT_MVM_KERNEL(wt_mvm_portable, , wt_p8, wt_p8_zero, wt_p8_load, wt_p8_madd,
	      wt_p8_store)

#if WT_MVM_HAVE_AVX2
/* AVX2: eight lanes in one 32-byte register.  Compiled for AVX2 here only
 * (the rest of the library stays baseline x86-64) and called only after
 * the CPU said it has it. */
#define WT_AVX2 __attribute__((target("avx2")))
typedef float wt_f8 __attribute__((vector_size(32)));

WT_AVX2 static inline wt_f8 wt_x8_zero(void)
{
	wt_f8 v = {0.0f, 0.0f, 0.0f, 0.0f, 0.0f, 0.0f, 0.0f, 0.0f};

	return v;
}

WT_AVX2 static inline wt_f8 wt_x8_load(const float *p)
{
	wt_f8 v;

	memcpy(&v, p, sizeof(v));
	return v;
}

WT_AVX2 static inline wt_f8 wt_x8_madd(wt_f8 acc, wt_f8 r, wt_f8 x)
{
	return acc + r * x;
}

WT_AVX2 static inline void wt_x8_store(float *out, wt_f8 v)
{
	memcpy(out, &v, sizeof(v));
}

WT_MVM_KERNEL(wt_mvm_avx2, WT_AVX2, wt_f8, wt_x8_zero, wt_x8_load, wt_x8_madd,
	      wt_x8_store)
#endif

static const char *const wt_mvm_kind_names[] = {
	[WT_MVM_AUTO] = "auto",
	[WT_MVM_OWN] = "own",
	[WT_MVM_BLAS] = "blas",
};

static const char *const wt_mvm_isa_names[] = {
	[WT_MVM_ISA_PORTABLE] = "portable",
	[WT_MVM_ISA_AVX2] = "avx2",
};

const char *wt_mvm_kind_name(enum wt_mvm_kind kind)
{
	if ((unsigned)kind > WT_MVM_BLAS) {
		return NULL;
	}
	return wt_mvm_kind_names[kind];
}

int wt_mvm_kind_parse(const char *text, enum wt_mvm_kind *kind)
{
	int k;

	if (!text || !kind) {
		return -EINVAL;
	}
	for (k = WT_MVM_AUTO; k <= WT_MVM_BLAS; k++) {
		if (strcmp(text, wt_mvm_kind_names[k]) == 0) {
			*kind = (enum wt_mvm_kind)k;
			return 0;
		}
	}
	return -EINVAL;
}

const char *wt_mvm_isa_name(enum wt_mvm_isa isa)
{
	if ((unsigned)isa >= WT_MVM_ISA_COUNT) {
		return NULL;
	}
	return wt_mvm_isa_names[isa];
}

int wt_mvm_isa_supported(enum wt_mvm_isa isa)
{
	switch (isa) {
	case WT_MVM_ISA_PORTABLE:
		return 1;
	case WT_MVM_ISA_AVX2:
#if WT_MVM_HAVE_AVX2
		/* libgcc's check includes the OS saving the YMM state */
		return __builtin_cpu_supports("avx2") ? 1 : 0;
#else
		return 0;
#endif
	default:
		return 0;
	}
}

enum wt_mvm_isa wt_mvm_isa_best(void)
{
	return wt_mvm_isa_supported(WT_MVM_ISA_AVX2) ? WT_MVM_ISA_AVX2
						     : WT_MVM_ISA_PORTABLE;
}

static wt_mvm_fn wt_mvm_isa_fn(enum wt_mvm_isa isa)
{
#if WT_MVM_HAVE_AVX2
	if (isa == WT_MVM_ISA_AVX2) {
		return wt_mvm_avx2;
	}
#else
	(void)isa;
#endif
	return wt_mvm_portable;
}

void wt_mvm_own(const float *R, const float *s, float *u, int rows, int cols)
{
	wt_mvm_isa_fn(wt_mvm_isa_best())(R, s, u, rows, cols);
}

int wt_mvm_own_isa(enum wt_mvm_isa isa, const float *R, const float *s,
		   float *u, int rows, int cols)
{
	if ((unsigned)isa >= WT_MVM_ISA_COUNT) {
		return -EINVAL;
	}
	if (!wt_mvm_isa_supported(isa)) {
		return -ENOTSUP;
	}
	wt_mvm_isa_fn(isa)(R, s, u, rows, cols);
	return 0;
}

void wt_mvm_blas(const float *R, const float *s, float *u, int rows, int cols)
{
	if (rows <= 0) {
		return;
	}
	if (cols <= 0) {
		/* BLAS refuses lda < 1; the empty sum is 0 */
		memset(u, 0, (size_t)rows * sizeof(*u));
		return;
	}
	/* beta = 0: u is written, never read (BLAS: y need not be set) */
	cblas_sgemv(CblasRowMajor, CblasNoTrans, rows, cols, 1.0f, R, cols, s,
		    1, 0.0f, u, 1);
}

static void wt_mvm_blas_fn(const float *restrict r, const float *restrict s,
			   float *restrict u, int rows, int cols)
{
	wt_mvm_blas(r, s, u, rows, cols);
}

/* Values in [-0.5, 0.5) from an integer hash (Knuth's multiplicative
 * constant): deterministic, and every page of the scratch matrix written. */
static void wt_mvm_fill(float *v, size_t n, uint32_t salt)
{
	size_t i;

	for (i = 0; i < n; i++) {
		uint32_t h = ((uint32_t)i + salt) * 2654435761u;

		v[i] = (float)(h >> 8) * (1.0f / 16777216.0f) - 0.5f;
	}
}

static int wt_mvm_cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return (x > y) - (x < y);
}

static double wt_mvm_run_ns(wt_mvm_fn fn, const float *R, const float *s,
			    float *u, int rows, int cols)
{
	uint64_t t0 = wt_clock_ns();

	fn(R, s, u, rows, cols);
	return (double)(wt_clock_ns() - t0);
}

/* Time both kernels on a scratch problem of the size of m; fills in
 * own_ns, blas_ns and runs.  0 or -ENOMEM. */
static int wt_mvm_select(wt_mvm *m, wt_mvm_fn own)
{
	size_t n_r = (size_t)m->rows * (size_t)m->cols;
	float *R, *s, *u;
	double *t_own = NULL, *t_blas = NULL, pair_ns;
	int i, runs, ret = -ENOMEM;

	R = malloc(n_r * sizeof(*R));
	s = malloc((size_t)m->cols * sizeof(*s));
	u = malloc((size_t)m->rows * sizeof(*u));
	t_own = malloc(WT_MVM_SELECT_MAX_RUNS * sizeof(*t_own));
	t_blas = malloc(WT_MVM_SELECT_MAX_RUNS * sizeof(*t_blas));
	if (!R || !s || !u || !t_own || !t_blas) {
		goto out;
	}
	wt_mvm_fill(R, n_r, 1);
	wt_mvm_fill(s, (size_t)m->cols, 7);

	/* first calls warm caches and let BLAS set up its buffers */
	own(R, s, u, m->rows, m->cols);
	wt_mvm_blas_fn(R, s, u, m->rows, m->cols);
	pair_ns = wt_mvm_run_ns(own, R, s, u, m->rows, m->cols) +
		  wt_mvm_run_ns(wt_mvm_blas_fn, R, s, u, m->rows, m->cols);
	if (pair_ns < 1.0) {
		pair_ns = 1.0;
	}
	runs = (double)WT_MVM_SELECT_NS / pair_ns > WT_MVM_SELECT_MAX_RUNS
		       ? WT_MVM_SELECT_MAX_RUNS
		       : (int)((double)WT_MVM_SELECT_NS / pair_ns);
	if (runs < WT_MVM_SELECT_MIN_RUNS) {
		runs = WT_MVM_SELECT_MIN_RUNS;
	}
	runs |= 1; /* odd: the median is one of the runs */
	if (runs > WT_MVM_SELECT_MAX_RUNS) {
		runs = WT_MVM_SELECT_MAX_RUNS;
	}

	/* alternate which goes first, so neither always finds the other's
	 * cache state */
	for (i = 0; i < runs; i++) {
		if (i % 2 == 0) {
			t_own[i] =
				wt_mvm_run_ns(own, R, s, u, m->rows, m->cols);
			t_blas[i] = wt_mvm_run_ns(wt_mvm_blas_fn, R, s, u,
						  m->rows, m->cols);
		} else {
			t_blas[i] = wt_mvm_run_ns(wt_mvm_blas_fn, R, s, u,
						  m->rows, m->cols);
			t_own[i] =
				wt_mvm_run_ns(own, R, s, u, m->rows, m->cols);
		}
	}
	qsort(t_own, (size_t)runs, sizeof(*t_own), wt_mvm_cmp_double);
	qsort(t_blas, (size_t)runs, sizeof(*t_blas), wt_mvm_cmp_double);
	m->own_ns = t_own[runs / 2];
	m->blas_ns = t_blas[runs / 2];
	m->runs = runs;
	ret = 0;
out:
	free(R);
	free(s);
	free(u);
	free(t_own);
	free(t_blas);
	return ret;
}

int wt_mvm_create(int rows, int cols, enum wt_mvm_kind want, wt_mvm **out,
		  wt_error *err)
{
	wt_mvm *m;
	wt_mvm_fn own;

	if (out) {
		*out = NULL;
	}
	if (!out) {
		return wt_error_set(err, -EINVAL, "mvm: NULL result");
	}
	if (rows < 1 || cols < 1) {
		return wt_error_set(err, -EINVAL,
				    "mvm: %d x %d matrix, needs at least 1 x 1",
				    rows, cols);
	}
	if ((size_t)rows * (size_t)cols > WT_MVM_MAX_ELEMENTS) {
		return wt_error_set(err, -EINVAL,
				    "mvm: %d x %d matrix is too large", rows,
				    cols);
	}
	if (!wt_mvm_kind_name(want)) {
		return wt_error_set(err, -EINVAL, "mvm: unknown kernel kind %d",
				    (int)want);
	}
	m = calloc(1, sizeof(*m));
	if (!m) {
		return wt_error_set(err, -ENOMEM, "mvm: out of memory");
	}
	m->rows = rows;
	m->cols = cols;
	m->requested = want;
	own = wt_mvm_isa_fn(wt_mvm_isa_best());
	if (want == WT_MVM_AUTO) {
		if (wt_mvm_select(m, own) < 0) {
			free(m);
			return wt_error_set(err, -ENOMEM,
					    "mvm: out of memory for the "
					    "%d x %d timing problem",
					    rows, cols);
		}
		m->kind = m->blas_ns < m->own_ns ? WT_MVM_BLAS : WT_MVM_OWN;
	} else {
		m->kind = want;
	}
	m->fn = m->kind == WT_MVM_BLAS ? wt_mvm_blas_fn : own;
	*out = m;
	wt_error_clear(err);
	return 0;
}

void wt_mvm_destroy(wt_mvm *m)
{
	free(m);
}

enum wt_mvm_kind wt_mvm_kind_of(const wt_mvm *m)
{
	return m->kind;
}

enum wt_mvm_kind wt_mvm_requested(const wt_mvm *m)
{
	return m->requested;
}

int wt_mvm_rows(const wt_mvm *m)
{
	return m->rows;
}

int wt_mvm_cols(const wt_mvm *m)
{
	return m->cols;
}

void wt_mvm_timing(const wt_mvm *m, double *own_ns, double *blas_ns, int *runs)
{
	if (own_ns) {
		*own_ns = m->own_ns;
	}
	if (blas_ns) {
		*blas_ns = m->blas_ns;
	}
	if (runs) {
		*runs = m->runs;
	}
}

void wt_mvm_apply(const wt_mvm *m, const float *R, const float *s, float *u)
{
	m->fn(R, s, u, m->rows, m->cols);
}

int wt_mvm_apply_rows(const wt_mvm *m, const float *R, const float *s, float *u,
		      int row0, int n_rows)
{
	if (row0 < 0 || n_rows < 0 || row0 > m->rows - n_rows) {
		return -EINVAL;
	}
	m->fn(R + (size_t)row0 * (size_t)m->cols, s, u + row0, n_rows, m->cols);
	return 0;
}
