/*
 * test_mvm.c - the control-matrix kernels: accuracy, selector, no allocation.
 *
 * Correctness only; the speed of the kernels is measured by wavetrim-bench.
 *
 * Link with -Wl,--wrap=malloc,--wrap=calloc,--wrap=realloc: the allocation
 * counter below then sees every allocation made by libwavetrim and by this
 * file (not those inside shared libraries such as libopenblas.so, which
 * --wrap cannot reach).
 */
#include "wt_test.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <string.h>

#include <cblas.h>

#include "wt_mvm.h"

/* ---- allocation counter (-Wl,--wrap=...) ------------------------------ */

/* Weak, so that the file still links without the --wrap flags; the
 * no-allocation test then fails and says why instead of passing blind. */
extern void *__real_malloc(size_t n) __attribute__((weak));
extern void *__real_calloc(size_t n, size_t size) __attribute__((weak));
extern void *__real_realloc(void *p, size_t n) __attribute__((weak));
void *__wrap_malloc(size_t n);
void *__wrap_calloc(size_t n, size_t size);
void *__wrap_realloc(void *p, size_t n);

static long n_allocations;

void *__wrap_malloc(size_t n)
{
	n_allocations++;
	return __real_malloc(n);
}

void *__wrap_calloc(size_t n, size_t size)
{
	n_allocations++;
	return __real_calloc(n, size);
}

void *__wrap_realloc(void *p, size_t n)
{
	n_allocations++;
	return __real_realloc(p, n);
}

/* ---- helpers ------------------------------------------------------------ */

/* splitmix64 (Steele, Lea and Flood, OOPSLA 2014): seeded, repeatable. */
static uint64_t rng_next(uint64_t *state)
{
	uint64_t z = (*state += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

/* Uniform in [-1, 1), 24 random bits: exactly a float. */
static float rng_float(uint64_t *state)
{
	return (float)(rng_next(state) >> 40) * (2.0f / 16777216.0f) - 1.0f;
}

static void fill_random(float *v, size_t n, uint64_t *state)
{
	size_t i;

	for (i = 0; i < n; i++) {
		v[i] = rng_float(state);
	}
}

/* gamma_n = n u / (1 - n u) (Higham, Accuracy and Stability of Numerical
 * Algorithms, 2nd ed., Lemma 3.1) with u the unit roundoff. */
static double gamma_n(int n, double unit_roundoff)
{
	double nu = (double)n * unit_roundoff;

	return nu / (1.0 - nu);
}

/* A problem and its double-precision reference. */
struct problem {
	int rows, cols;
	float *R, *s, *u;
	double *ref;   /* R s in double (cblas_dgemv) */
	double *bound; /* allowed |u - ref| per row */
};

static void problem_init(struct problem *p, int rows, int cols, uint64_t *state)
{
	size_t n_r = (size_t)rows * (size_t)cols;
	double *Rd, *sd;
	double g_float = gamma_n(cols, FLT_EPSILON / 2.0);
	double g_double = gamma_n(cols, DBL_EPSILON / 2.0);
	size_t i;

	p->rows = rows;
	p->cols = cols;
	p->R = malloc(n_r * sizeof(*p->R));
	p->s = malloc((size_t)cols * sizeof(*p->s));
	p->u = malloc((size_t)rows * sizeof(*p->u));
	p->ref = malloc((size_t)rows * sizeof(*p->ref));
	p->bound = malloc((size_t)rows * sizeof(*p->bound));
	Rd = malloc(n_r * sizeof(*Rd));
	sd = malloc((size_t)cols * sizeof(*sd));
	assert_non_null(p->R);
	assert_non_null(p->s);
	assert_non_null(p->u);
	assert_non_null(p->ref);
	assert_non_null(p->bound);
	assert_non_null(Rd);
	assert_non_null(sd);
	fill_random(p->R, n_r, state);
	fill_random(p->s, (size_t)cols, state);

	/* floats are exact in double: the reference sees the same inputs */
	for (i = 0; i < n_r; i++) {
		Rd[i] = p->R[i];
	}
	for (i = 0; i < (size_t)cols; i++) {
		sd[i] = p->s[i];
	}
	cblas_dgemv(CblasRowMajor, CblasNoTrans, rows, cols, 1.0, Rd, cols, sd,
		    1, 0.0, p->ref, 1);

	/* |R| |s|, reusing the double copies */
	for (i = 0; i < n_r; i++) {
		Rd[i] = fabs(Rd[i]);
	}
	for (i = 0; i < (size_t)cols; i++) {
		sd[i] = fabs(sd[i]);
	}
	cblas_dgemv(CblasRowMajor, CblasNoTrans, rows, cols, 1.0, Rd, cols, sd,
		    1, 0.0, p->bound, 1);
	/*
	 * Higham (2nd ed.) eq. (3.5), valid for any order of summation:
	 * |fl(x^T y) - x^T y| <= gamma_n |x|^T |y|.  The float kernel is
	 * within gamma_n(float) of the exact product, the double reference
	 * within gamma_n(double), and |R| |s| itself computed in double is
	 * within gamma_n(double) of its value: the sum of these bounds.
	 */
	for (i = 0; i < (size_t)rows; i++) {
		p->bound[i] *= (g_float + 2.0 * g_double) * (1.0 + g_double);
	}
	free(Rd);
	free(sd);
}

static void problem_free(struct problem *p)
{
	free(p->R);
	free(p->s);
	free(p->u);
	free(p->ref);
	free(p->bound);
}

/* Fill u with NaN: a kernel that reads u (BLAS with beta = 0 must not:
 * reference BLAS, "when BETA is supplied as zero then Y need not be set
 * on input") or skips a row shows up as NaN. */
static void poison(float *u, int n)
{
	int i;

	for (i = 0; i < n; i++) {
		u[i] = NAN;
	}
}

static void check_against_reference(const struct problem *p, const char *what)
{
	int i;

	for (i = 0; i < p->rows; i++) {
		double err = fabs((double)p->u[i] - p->ref[i]);

		if (!(err <= p->bound[i])) {
			fail_msg("%s, %d x %d: row %d gives %.9g, reference "
				 "%.17g, error %.3g above the bound %.3g",
				 what, p->rows, p->cols, i, (double)p->u[i],
				 p->ref[i], err, p->bound[i]);
		}
	}
}

static const int shapes[][2] = {
	{1, 1},	      {1, 7},	  {2, 3},    {3, 5},	{4, 8},	  {5, 9},
	{6, 15},      {7, 16},	  {8, 17},   {9, 23},	{13, 31}, {16, 33},
	{17, 64},     {31, 65},	  {33, 127}, {64, 129}, {100, 1}, {3, 1000},
	{37, 4099},   {140, 416}, /* S: 12x12 actuators (corners), 16x16
				     lenslets */
	{448, 1624},  /* M: 24x24 actuators (circle), 32x32 lenslets */
	{1804, 6456}, /* L: 48x48 actuators (circle), 64x64 lenslets */
};
#define N_SHAPES (sizeof(shapes) / sizeof(shapes[0]))

/* ---- tests -------------------------------------------------------------- */

static void kernels_within_dot_product_bound(void **state)
{
	uint64_t rng = wt_test_seed(20240611);
	size_t z;

	(void)state;
	openblas_set_num_threads(1);
	for (z = 0; z < N_SHAPES; z++) {
		struct problem p;
		wt_mvm *m;
		int isa, kind;

		problem_init(&p, shapes[z][0], shapes[z][1], &rng);
		for (isa = 0; isa < WT_MVM_ISA_COUNT; isa++) {
			if (!wt_mvm_isa_supported((enum wt_mvm_isa)isa)) {
				print_message(
					"variant %s not supported here\n",
					wt_mvm_isa_name((enum wt_mvm_isa)isa));
				continue;
			}
			poison(p.u, p.rows);
			assert_int_equal(wt_mvm_own_isa((enum wt_mvm_isa)isa,
							p.R, p.s, p.u, p.rows,
							p.cols),
					 0);
			check_against_reference(
				&p, wt_mvm_isa_name((enum wt_mvm_isa)isa));
		}
		poison(p.u, p.rows);
		wt_mvm_own(p.R, p.s, p.u, p.rows, p.cols);
		check_against_reference(&p, "own");
		poison(p.u, p.rows);
		wt_mvm_blas(p.R, p.s, p.u, p.rows, p.cols);
		check_against_reference(&p, "blas");

		for (kind = WT_MVM_OWN; kind <= WT_MVM_BLAS; kind++) {
			assert_int_equal(wt_mvm_create(p.rows, p.cols,
						       (enum wt_mvm_kind)kind,
						       &m, NULL),
					 0);
			poison(p.u, p.rows);
			wt_mvm_apply(m, p.R, p.s, p.u);
			check_against_reference(
				&p, wt_mvm_kind_name((enum wt_mvm_kind)kind));
			wt_mvm_destroy(m);
		}
		problem_free(&p);
	}
}

/* The header promises bit-identical results from every variant and from
 * any split of the rows (same operations in the same order, by
 * construction of the kernel). */
static void variants_and_row_splits_give_identical_bits(void **state)
{
	uint64_t rng = wt_test_seed(7);
	static const int sizes[][2] = {{13, 37}, {140, 416}, {61, 1029}};
	size_t z;

	(void)state;
	for (z = 0; z < sizeof(sizes) / sizeof(sizes[0]); z++) {
		struct problem p;
		float *whole, *part;
		wt_mvm *m;
		int isa, row0;

		problem_init(&p, sizes[z][0], sizes[z][1], &rng);
		whole = malloc((size_t)p.rows * sizeof(*whole));
		part = malloc((size_t)p.rows * sizeof(*part));
		assert_non_null(whole);
		assert_non_null(part);
		assert_int_equal(wt_mvm_own_isa(WT_MVM_ISA_PORTABLE, p.R, p.s,
						whole, p.rows, p.cols),
				 0);
		for (isa = 1; isa < WT_MVM_ISA_COUNT; isa++) {
			if (!wt_mvm_isa_supported((enum wt_mvm_isa)isa)) {
				continue;
			}
			poison(part, p.rows);
			assert_int_equal(wt_mvm_own_isa((enum wt_mvm_isa)isa,
							p.R, p.s, part, p.rows,
							p.cols),
					 0);
			assert_memory_equal(part, whole,
					    (size_t)p.rows * sizeof(*part));
		}

		assert_int_equal(
			wt_mvm_create(p.rows, p.cols, WT_MVM_OWN, &m, NULL), 0);
		/* every split point, including ones that are not a
		 * multiple of four */
		for (row0 = 0; row0 <= p.rows; row0++) {
			poison(part, p.rows);
			assert_int_equal(
				wt_mvm_apply_rows(m, p.R, p.s, part, 0, row0),
				0);
			assert_int_equal(wt_mvm_apply_rows(m, p.R, p.s, part,
							   row0, p.rows - row0),
					 0);
			assert_memory_equal(part, whole,
					    (size_t)p.rows * sizeof(*part));
		}
		wt_mvm_destroy(m);
		free(whole);
		free(part);
		problem_free(&p);
	}
}

static void apply_rows_touches_only_its_rows(void **state)
{
	uint64_t rng = wt_test_seed(11);
	struct problem p;
	wt_mvm *m;
	int kind, i;

	(void)state;
	openblas_set_num_threads(1);
	problem_init(&p, 23, 45, &rng);
	for (kind = WT_MVM_OWN; kind <= WT_MVM_BLAS; kind++) {
		assert_int_equal(wt_mvm_create(p.rows, p.cols,
					       (enum wt_mvm_kind)kind, &m,
					       NULL),
				 0);
		poison(p.u, p.rows);
		assert_int_equal(wt_mvm_apply_rows(m, p.R, p.s, p.u, 5, 9), 0);
		for (i = 0; i < p.rows; i++) {
			if (i >= 5 && i < 14) {
				/* Higham (2nd ed.) eq. (3.5) */
				assert_true(fabs((double)p.u[i] - p.ref[i]) <=
					    p.bound[i]);
			} else {
				assert_true(isnan(p.u[i]));
			}
		}
		/* out of range: refused, nothing written */
		assert_int_equal(wt_mvm_apply_rows(m, p.R, p.s, p.u, -1, 3),
				 -EINVAL);
		assert_int_equal(wt_mvm_apply_rows(m, p.R, p.s, p.u, 20, 4),
				 -EINVAL);
		assert_int_equal(wt_mvm_apply_rows(m, p.R, p.s, p.u, 0, -1),
				 -EINVAL);
		assert_true(isnan(p.u[0]));
		assert_true(isnan(p.u[22]));
		wt_mvm_destroy(m);
	}
	problem_free(&p);
}

static void empty_sum_is_zero(void **state)
{
	float R[1] = {1.0f}, s[1] = {1.0f}, u[3];
	int isa;

	(void)state;
	/* the sum of no terms is 0 (common practice) */
	for (isa = 0; isa < WT_MVM_ISA_COUNT; isa++) {
		if (!wt_mvm_isa_supported((enum wt_mvm_isa)isa)) {
			continue;
		}
		poison(u, 3);
		assert_int_equal(
			wt_mvm_own_isa((enum wt_mvm_isa)isa, R, s, u, 3, 0), 0);
		assert_true(u[0] == 0.0f && u[1] == 0.0f && u[2] == 0.0f);
	}
	poison(u, 3);
	wt_mvm_blas(R, s, u, 3, 0);
	assert_true(u[0] == 0.0f && u[1] == 0.0f && u[2] == 0.0f);
	/* no rows: nothing written */
	poison(u, 3);
	wt_mvm_own(R, s, u, 0, 1);
	wt_mvm_blas(R, s, u, 0, 1);
	assert_true(isnan(u[0]));
}

static void selector_returns_a_valid_choice(void **state)
{
	static const int sizes[][2] = {{8, 24}, {140, 416}};
	size_t z;

	(void)state;
	openblas_set_num_threads(1);
	for (z = 0; z < sizeof(sizes) / sizeof(sizes[0]); z++) {
		wt_mvm *m = NULL;
		wt_error err;
		double own_ns, blas_ns;
		enum wt_mvm_kind k;
		int runs;

		assert_int_equal(wt_mvm_create(sizes[z][0], sizes[z][1],
					       WT_MVM_AUTO, &m, &err),
				 0);
		k = wt_mvm_kind_of(m);
		assert_true(k == WT_MVM_OWN || k == WT_MVM_BLAS);
		assert_int_equal(wt_mvm_requested(m), WT_MVM_AUTO);
		assert_int_equal(wt_mvm_rows(m), sizes[z][0]);
		assert_int_equal(wt_mvm_cols(m), sizes[z][1]);
		wt_mvm_timing(m, &own_ns, &blas_ns, &runs);
		assert_true(own_ns > 0.0 && blas_ns > 0.0);
		assert_true(runs >= 5 && runs <= 201 && runs % 2 == 1);
		/* the faster median wins, a tie goes to our own kernel */
		assert_int_equal(k,
				 blas_ns < own_ns ? WT_MVM_BLAS : WT_MVM_OWN);
		print_message("%d x %d: own %.0f ns, blas %.0f ns (%d runs): "
			      "%s\n",
			      sizes[z][0], sizes[z][1], own_ns, blas_ns, runs,
			      wt_mvm_kind_name(k));
		wt_mvm_destroy(m);
	}
}

static void forced_choice_is_obeyed(void **state)
{
	int kind;

	(void)state;
	for (kind = WT_MVM_OWN; kind <= WT_MVM_BLAS; kind++) {
		wt_mvm *m = NULL;
		double own_ns = -1.0, blas_ns = -1.0;
		int runs = -1;

		assert_int_equal(wt_mvm_create(140, 416, (enum wt_mvm_kind)kind,
					       &m, NULL),
				 0);
		assert_int_equal(wt_mvm_kind_of(m), kind);
		assert_int_equal(wt_mvm_requested(m), kind);
		wt_mvm_timing(m, &own_ns, &blas_ns, &runs);
		assert_true(own_ns == 0.0 && blas_ns == 0.0 && runs == 0);
		wt_mvm_destroy(m);
	}
}

static void create_refuses_bad_arguments(void **state)
{
	wt_mvm *m = (wt_mvm *)&m;
	wt_error err;

	(void)state;
	assert_int_equal(wt_mvm_create(0, 5, WT_MVM_OWN, &m, &err), -EINVAL);
	assert_null(m);
	assert_true(strlen(err.msg) > 0);
	assert_int_equal(wt_mvm_create(5, -1, WT_MVM_OWN, &m, &err), -EINVAL);
	assert_int_equal(wt_mvm_create(1 << 15, 1 << 14, WT_MVM_OWN, &m, &err),
			 -EINVAL);
	assert_int_equal(wt_mvm_create(5, 5, (enum wt_mvm_kind)7, &m, &err),
			 -EINVAL);
	assert_null(m);
	assert_int_equal(wt_mvm_create(5, 5, WT_MVM_OWN, NULL, &err), -EINVAL);
	assert_int_equal(
		wt_mvm_own_isa(WT_MVM_ISA_COUNT, NULL, NULL, NULL, 0, 0),
		-EINVAL);
	wt_mvm_destroy(NULL);
}

static void kind_names_round_trip(void **state)
{
	enum wt_mvm_kind k;
	int i;

	(void)state;
	for (i = WT_MVM_AUTO; i <= WT_MVM_BLAS; i++) {
		assert_int_equal(
			wt_mvm_kind_parse(wt_mvm_kind_name((enum wt_mvm_kind)i),
					  &k),
			0);
		assert_int_equal(k, i);
	}
	assert_string_equal(wt_mvm_kind_name(WT_MVM_BLAS), "blas");
	assert_int_equal(wt_mvm_kind_parse("BLAS", &k), -EINVAL);
	assert_int_equal(wt_mvm_kind_parse("", &k), -EINVAL);
	assert_null(wt_mvm_kind_name((enum wt_mvm_kind)3));
	assert_string_equal(wt_mvm_isa_name(WT_MVM_ISA_PORTABLE), "portable");
	assert_null(wt_mvm_isa_name(WT_MVM_ISA_COUNT));
	assert_int_equal(wt_mvm_isa_supported(WT_MVM_ISA_PORTABLE), 1);
	assert_int_equal(wt_mvm_isa_supported(wt_mvm_isa_best()), 1);
}

static void apply_does_not_allocate(void **state)
{
	uint64_t rng = wt_test_seed(3);
	struct problem p;
	wt_mvm *own, *blas, *any;
	/* through a volatile pointer, so that the compiler cannot drop the
	 * malloc/free pair of the probe */
	void *(*volatile alloc)(size_t) = malloc;
	long before;
	void *probe;
	int isa;

	(void)state;
	openblas_set_num_threads(1);
	before = n_allocations;
	probe = alloc(16);
	free(probe);
	if (n_allocations == before) {
		fail_msg("allocation counter inactive: link test_mvm with "
			 "-Wl,--wrap=malloc,--wrap=calloc,--wrap=realloc");
	}

	problem_init(&p, 448, 1624, &rng);
	assert_int_equal(wt_mvm_create(p.rows, p.cols, WT_MVM_OWN, &own, NULL),
			 0);
	assert_int_equal(
		wt_mvm_create(p.rows, p.cols, WT_MVM_BLAS, &blas, NULL), 0);
	assert_int_equal(wt_mvm_create(p.rows, p.cols, WT_MVM_AUTO, &any, NULL),
			 0);
	/* a first BLAS call outside the count: OpenBLAS sets up its buffer
	 * pool on first use (inside libopenblas.so, invisible here anyway) */
	wt_mvm_apply(blas, p.R, p.s, p.u);

	before = n_allocations;
	wt_mvm_apply(own, p.R, p.s, p.u);
	wt_mvm_apply(blas, p.R, p.s, p.u);
	wt_mvm_apply(any, p.R, p.s, p.u);
	assert_int_equal(wt_mvm_apply_rows(own, p.R, p.s, p.u, 3, 100), 0);
	assert_int_equal(wt_mvm_apply_rows(blas, p.R, p.s, p.u, 3, 100), 0);
	wt_mvm_own(p.R, p.s, p.u, p.rows, p.cols);
	wt_mvm_blas(p.R, p.s, p.u, p.rows, p.cols);
	for (isa = 0; isa < WT_MVM_ISA_COUNT; isa++) {
		(void)wt_mvm_own_isa((enum wt_mvm_isa)isa, p.R, p.s, p.u,
				     p.rows, p.cols);
	}
	assert_int_equal(n_allocations, before);

	wt_mvm_destroy(own);
	wt_mvm_destroy(blas);
	wt_mvm_destroy(any);
	problem_free(&p);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(kernels_within_dot_product_bound),
	cmocka_unit_test(variants_and_row_splits_give_identical_bits),
	cmocka_unit_test(apply_rows_touches_only_its_rows),
	cmocka_unit_test(empty_sum_is_zero),
	cmocka_unit_test(selector_returns_a_valid_choice),
	cmocka_unit_test(forced_choice_is_obeyed),
	cmocka_unit_test(create_refuses_bad_arguments),
	cmocka_unit_test(kind_names_round_trip),
	cmocka_unit_test(apply_does_not_allocate),
};

WT_TEST_MAIN(tests)
