/*
 * test_mvm_split.c - u = R s split by rows over two CPUs (wt_mvm_split):
 * the same u as one CPU, against OpenBLAS as the outside reference; odd
 * sizes and edge split rows; repeated applies; a matrix swapped between
 * applies; the worker asleep; refusals; no allocation after creation;
 * the controller with and without the split.
 *
 * Correctness only; the speed of the split is measured by wavetrim-bench
 * (--split).
 *
 * Link with -Wl,--wrap=malloc,--wrap=calloc,--wrap=realloc: the counter
 * below then sees every allocation libwavetrim makes, in any thread (the
 * worker's included).
 */
#include "wt_test.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <sched.h>
#include <stdatomic.h>
#include <string.h>
#include <time.h>

#include <cblas.h>

#include "wt_control.h"
#include "wt_mvm.h"
#include "wt_mvm_split.h"

/* ---- allocation counter (-Wl,--wrap=...) ------------------------------ */

extern void *__real_malloc(size_t n) __attribute__((weak));
extern void *__real_calloc(size_t n, size_t size) __attribute__((weak));
extern void *__real_realloc(void *p, size_t n) __attribute__((weak));
void *__wrap_malloc(size_t n);
void *__wrap_calloc(size_t n, size_t size);
void *__wrap_realloc(void *p, size_t n);

/* atomic: the worker thread would count here too */
static atomic_long n_allocations;

void *__wrap_malloc(size_t n)
{
	atomic_fetch_add(&n_allocations, 1);
	return __real_malloc(n);
}

void *__wrap_calloc(size_t n, size_t size)
{
	atomic_fetch_add(&n_allocations, 1);
	return __real_calloc(n, size);
}

void *__wrap_realloc(void *p, size_t n)
{
	atomic_fetch_add(&n_allocations, 1);
	return __real_realloc(p, n);
}

/* ---- helpers ------------------------------------------------------------ */

/* The worker's CPU: another one this process may use, else this one (the
 * results must be right either way: the caller then takes the jobs back). */
static int worker_cpu(void)
{
	int here = sched_getcpu();
	int c = wt_mvm_split_other_cpu(here);

	if (c < 0) {
		c = here >= 0 ? here : 0;
	}
	return c;
}

static float *random_floats(size_t n)
{
	float *v = malloc((n ? n : 1) * sizeof(*v));
	size_t i;

	assert_non_null(v);
	for (i = 0; i < n; i++) {
		v[i] = (float)(2.0 * wt_rng_uniform() - 1.0);
	}
	return v;
}

static wt_mvm_split *make_split(const wt_mvm *m, int row, uint64_t spin_ns)
{
	wt_mvm_split_params p = {
		.split_row = row, .cpu = worker_cpu(), .spin_ns = spin_ns};
	wt_mvm_split *sp = NULL;
	wt_error err;

	assert_int_equal(wt_mvm_split_create(m, &p, &sp, &err), 0);
	assert_non_null(sp);
	return sp;
}

/*
 * u against cblas_sgemv (OpenBLAS, the outside reference): both are
 * float dot products of the same rows, so they differ by at most twice
 * the dot-product bound gamma_cols (|R| |s|)[i], gamma_n = n u / (1 - n u),
 * u = 2^-24 (Higham, Accuracy and Stability of Numerical Algorithms,
 * 2nd ed., section 3.1); |R| |s| is summed in double here.
 */
static void check_against_blas(const float *R, const float *s, const float *u,
			       int rows, int cols)
{
	float *ref = malloc((size_t)rows * sizeof(*ref));
	double nu = (double)cols * (FLT_EPSILON / 2.0);
	double gamma = nu / (1.0 - nu);
	int i, k;

	assert_non_null(ref);
	cblas_sgemv(CblasRowMajor, CblasNoTrans, rows, cols, 1.0f, R, cols, s,
		    1, 0.0f, ref, 1);
	for (i = 0; i < rows; i++) {
		double abs_sum = 0;

		for (k = 0; k < cols; k++) {
			abs_sum += fabs((double)R[(size_t)i * cols + k] * s[k]);
		}
		if (!(fabs((double)u[i] - ref[i]) <=
		      2.0 * gamma * abs_sum + FLT_MIN)) {
			print_error("row %d of %d x %d: %.9g vs OpenBLAS "
				    "%.9g\n",
				    i, rows, cols, u[i], ref[i]);
			fail();
		}
	}
	free(ref);
}

/* ---- cases -------------------------------------------------------------- */

/*
 * Odd sizes and every kind of split row (0: the worker does all; rows:
 * the caller does all; 1, rows - 1, odd rows inside a block of four,
 * the default): u is the one-CPU product to the bit (our own kernel's
 * rows do not depend on where a block starts, wt_mvm.h) and agrees with
 * OpenBLAS within the rounding bound.
 */
static void split_equals_one_cpu_and_openblas_for_odd_sizes(void **state)
{
	static const int sizes[][2] = {{1, 1},	  {2, 3},    {5, 7},
				       {13, 31},  {37, 129}, {64, 100},
				       {101, 33}, {250, 417}};
	wt_error err;

	(void)state;
	wt_rng_seed(wt_test_seed(11));
	for (size_t z = 0; z < sizeof(sizes) / sizeof(sizes[0]); z++) {
		int rows = sizes[z][0], cols = sizes[z][1];
		int split_rows[] = {-1,	      0,	rows,	  1,
				    rows - 1, rows / 2, rows / 3, 5};
		float *R = random_floats((size_t)rows * cols);
		float *s = random_floats((size_t)cols);
		float *one = malloc((size_t)rows * sizeof(*one));
		float *u = malloc((size_t)rows * sizeof(*u));
		wt_mvm *m;

		assert_non_null(one);
		assert_non_null(u);
		assert_int_equal(
			wt_mvm_create(rows, cols, WT_MVM_OWN, &m, &err), 0);
		wt_mvm_own(R, s, one, rows, cols);
		for (size_t r = 0; r < sizeof(split_rows) / sizeof(int); r++) {
			int row = split_rows[r];
			wt_mvm_split *sp;

			if (row > rows) {
				continue;
			}
			sp = make_split(m, row, WT_MVM_SPLIT_SPIN_NS_DEFAULT);
			assert_int_equal(wt_mvm_split_rows(sp), rows);
			assert_int_equal(wt_mvm_split_cols(sp), cols);
			if (row >= 0) {
				assert_int_equal(wt_mvm_split_row(sp), row);
			}
			memset(u, 0xff, (size_t)rows * sizeof(*u)); /* NaN */
			wt_mvm_split_apply(sp, R, s, u);
			assert_memory_equal(u, one, (size_t)rows * sizeof(*u));
			check_against_blas(R, s, u, rows, cols);
			wt_mvm_split_destroy(sp);
		}
		wt_mvm_destroy(m);
		free(R);
		free(s);
		free(one);
		free(u);
	}
}

/* The default row: half, on a multiple of 16 (4 below 32 rows), never
 * more than half (the caller's share is the smaller one). */
static void default_row_is_half_on_block_boundary(void **state)
{
	(void)state;
	assert_int_equal(wt_mvm_split_default_row(0), 0);
	assert_int_equal(wt_mvm_split_default_row(1), 0);
	assert_int_equal(wt_mvm_split_default_row(9), 4);
	assert_int_equal(wt_mvm_split_default_row(31), 12);
	assert_int_equal(wt_mvm_split_default_row(32), 16);
	/* 1804 actuators (the benchmark's L system): 902 -> 896 */
	assert_int_equal(wt_mvm_split_default_row(1804), 896);
	for (int rows = 1; rows < 3000; rows++) {
		int r = wt_mvm_split_default_row(rows);

		assert_true(r >= 0 && r <= rows / 2);
		assert_int_equal(r % (rows < 32 ? 4 : 16), 0);
	}
}

/*
 * Many applies in a row, each on a new slope vector: every u is that
 * vector's product (no stale job, no mix of two frames), the worker
 * spinning (default) or sleeping after every job (spin 0: every apply
 * wakes it), and the counts add up.
 */
static void repeated_applies_each_give_that_frames_product(void **state)
{
	enum { ROWS = 203, COLS = 411, FRAMES = 3000 };
	const uint64_t spins[] = {WT_MVM_SPLIT_SPIN_NS_DEFAULT, 0};
	float *R, *s, *u, *one;
	wt_error err;
	wt_mvm *m;

	(void)state;
	wt_rng_seed(wt_test_seed(12));
	R = random_floats((size_t)ROWS * COLS);
	s = random_floats((size_t)COLS * 4);
	u = malloc(ROWS * sizeof(*u));
	one = malloc(ROWS * sizeof(*one));
	assert_non_null(u);
	assert_non_null(one);
	assert_int_equal(wt_mvm_create(ROWS, COLS, WT_MVM_OWN, &m, &err), 0);
	for (int k = 0; k < 2; k++) {
		wt_mvm_split *sp = make_split(m, -1, spins[k]);
		wt_mvm_split_stats st;

		for (int f = 0; f < FRAMES; f++) {
			const float *sf = s + (size_t)(f % 4) * COLS;

			/* a different vector each frame */
			s[(size_t)(f % 4) * COLS + f % COLS] =
				(float)(f % 17) * 0.125f - 1.0f;
			wt_mvm_split_apply(sp, R, sf, u);
			wt_mvm_own(R, sf, one, ROWS, COLS);
			assert_memory_equal(u, one, ROWS * sizeof(*u));
		}
		wt_mvm_split_get_stats(sp, &st);
		print_message("spin %llu ns: %llu applies, worker's rows "
			      "shared %llu, taken back %llu, wakes %llu\n",
			      (unsigned long long)spins[k],
			      (unsigned long long)st.applies,
			      (unsigned long long)st.shared,
			      (unsigned long long)st.taken,
			      (unsigned long long)st.wakes);
		assert_int_equal(st.applies, FRAMES);
		assert_int_equal(st.shared + st.taken, st.applies);
		wt_mvm_split_destroy(sp);
	}
	check_against_blas(R, s + 3 * COLS, one, ROWS, COLS);
	wt_mvm_destroy(m);
	free(R);
	free(s);
	free(u);
	free(one);
}

/*
 * A new matrix between two applies, the old one overwritten with NaN and
 * freed at once (what the daemon's control thread does after the
 * mailbox swap): the next product is the new matrix's, to the bit, and
 * nothing of the old one reaches u.  Also after the worker was parked.
 */
static void matrix_swapped_between_applies_is_used_at_once(void **state)
{
	enum { ROWS = 97, COLS = 255 };
	float *R1, *R2, *s, *u, *one;
	wt_mvm_split *sp;
	wt_error err;
	wt_mvm *m;

	(void)state;
	wt_rng_seed(wt_test_seed(13));
	R1 = random_floats((size_t)ROWS * COLS);
	s = random_floats(COLS);
	u = malloc(ROWS * sizeof(*u));
	one = malloc(ROWS * sizeof(*one));
	assert_non_null(u);
	assert_non_null(one);
	assert_int_equal(wt_mvm_create(ROWS, COLS, WT_MVM_OWN, &m, &err), 0);
	sp = make_split(m, -1, WT_MVM_SPLIT_SPIN_NS_DEFAULT);
	for (int swap = 0; swap < 200; swap++) {
		R2 = random_floats((size_t)ROWS * COLS);
		wt_mvm_split_apply(sp, R1, s, u);
		wt_mvm_own(R1, s, one, ROWS, COLS);
		assert_memory_equal(u, one, ROWS * sizeof(*u));
		/* swap: the old matrix is poisoned and gone */
		memset(R1, 0xff, (size_t)ROWS * COLS * sizeof(*R1));
		free(R1);
		R1 = R2;
		if (swap % 50 == 49) {
			wt_mvm_split_park(sp);
		}
		wt_mvm_split_apply(sp, R1, s, u);
		wt_mvm_own(R1, s, one, ROWS, COLS);
		assert_memory_equal(u, one, ROWS * sizeof(*u));
		for (int i = 0; i < ROWS; i++) {
			assert_true(isfinite(u[i]));
		}
	}
	check_against_blas(R1, s, u, ROWS, COLS);
	wt_mvm_split_destroy(sp);
	wt_mvm_destroy(m);
	free(R1);
	free(s);
	free(u);
	free(one);
}

/* Parked, the worker sleeps; the next apply wakes it and is right. */
static void parked_worker_is_woken_by_the_next_apply(void **state)
{
	enum { ROWS = 64, COLS = 96 };
	struct timespec ten_ms = {0, 10 * 1000 * 1000};
	float *R, *s, *u, *one;
	wt_mvm_split *sp;
	wt_error err;
	wt_mvm *m;

	(void)state;
	wt_rng_seed(wt_test_seed(14));
	R = random_floats((size_t)ROWS * COLS);
	s = random_floats(COLS);
	u = malloc(ROWS * sizeof(*u));
	one = malloc(ROWS * sizeof(*one));
	assert_non_null(u);
	assert_non_null(one);
	wt_mvm_own(R, s, one, ROWS, COLS);
	assert_int_equal(wt_mvm_create(ROWS, COLS, WT_MVM_OWN, &m, &err), 0);
	sp = make_split(m, -1, WT_MVM_SPLIT_SPIN_NS_DEFAULT);
	for (int k = 0; k < 20; k++) {
		wt_mvm_split_park(sp);
		nanosleep(&ten_ms, NULL);
		memset(u, 0xff, ROWS * sizeof(*u));
		wt_mvm_split_apply(sp, R, s, u);
		assert_memory_equal(u, one, ROWS * sizeof(*u));
	}
	wt_mvm_split_destroy(sp);
	/* and destroying a worker that sleeps (spin 0) ends it too */
	sp = make_split(m, -1, 0);
	wt_mvm_split_apply(sp, R, s, u);
	assert_memory_equal(u, one, ROWS * sizeof(*u));
	nanosleep(&ten_ms, NULL);
	wt_mvm_split_destroy(sp);
	wt_mvm_destroy(m);
	free(R);
	free(s);
	free(u);
	free(one);
}

/* Bad arguments: a clear error, nothing started. */
static void bad_arguments_are_refused_with_a_message(void **state)
{
	wt_mvm_split_params p = {.split_row = -1, .cpu = worker_cpu()};
	wt_mvm_split *sp = (wt_mvm_split *)&p;
	wt_error err;
	wt_mvm *m;
	cpu_set_t set;
	int not_allowed = -1;

	(void)state;
	assert_int_equal(wt_mvm_create(10, 20, WT_MVM_OWN, &m, &err), 0);
	assert_int_equal(wt_mvm_split_create(NULL, &p, &sp, &err), -EINVAL);
	assert_null(sp);
	assert_int_equal(wt_mvm_split_create(m, NULL, &sp, &err), -EINVAL);
	assert_int_equal(wt_mvm_split_create(m, &p, NULL, &err), -EINVAL);
	p.split_row = 11;
	assert_int_equal(wt_mvm_split_create(m, &p, &sp, &err), -EINVAL);
	assert_non_null(strstr(err.msg, "split row 11"));
	p.split_row = -2;
	assert_int_equal(wt_mvm_split_create(m, &p, &sp, &err), -EINVAL);
	p.split_row = -1;
	p.cpu = -1;
	assert_int_equal(wt_mvm_split_create(m, &p, &sp, &err), -EINVAL);
	p.cpu = worker_cpu();
	p.priority = 1000;
	assert_int_equal(wt_mvm_split_create(m, &p, &sp, &err), -EINVAL);
	assert_non_null(strstr(err.msg, "priority"));
	p.priority = 0;
	/* a CPU this process may not use: pinning fails, said so */
	assert_int_equal(sched_getaffinity(0, sizeof(set), &set), 0);
	for (int c = CPU_SETSIZE - 1; c >= 0 && not_allowed < 0; c--) {
		if (!CPU_ISSET(c, &set)) {
			not_allowed = c;
		}
	}
	if (not_allowed >= 0) {
		p.cpu = not_allowed;
		assert_true(wt_mvm_split_create(m, &p, &sp, &err) < 0);
		assert_null(sp);
		assert_non_null(strstr(err.msg, "cannot pin"));
	}
	/* the other CPU is never the one avoided */
	assert_true(wt_mvm_split_other_cpu(worker_cpu()) != worker_cpu());
	wt_mvm_destroy(m);
}

/* After creation neither thread allocates: 1000 applies, 0 calls. */
static void applies_allocate_nothing(void **state)
{
	enum { ROWS = 150, COLS = 300 };
	float *R, *s, *u;
	wt_mvm_split *sp;
	wt_error err;
	wt_mvm *m;
	long before;

	(void)state;
	if (!__real_malloc) {
		fail_msg("built without -Wl,--wrap=malloc: cannot count");
	}
	wt_rng_seed(wt_test_seed(15));
	R = random_floats((size_t)ROWS * COLS);
	s = random_floats(COLS);
	u = malloc(ROWS * sizeof(*u));
	assert_non_null(u);
	assert_int_equal(wt_mvm_create(ROWS, COLS, WT_MVM_OWN, &m, &err), 0);
	/* spin 0: the sleep and wake path is taken on every apply */
	for (int k = 0; k < 2; k++) {
		sp = make_split(m, -1, k ? 0 : WT_MVM_SPLIT_SPIN_NS_DEFAULT);
		before = atomic_load(&n_allocations);
		for (int f = 0; f < 1000; f++) {
			wt_mvm_split_apply(sp, R, s, u);
			if (f % 100 == 0) {
				wt_mvm_split_park(sp);
			}
		}
		assert_int_equal(atomic_load(&n_allocations), before);
		wt_mvm_split_destroy(sp);
	}
	wt_mvm_destroy(m);
	free(R);
	free(s);
	free(u);
}

/*
 * The controller with the split gives the same commands as without, step
 * after step (gain, leak, clipping and slew as in the daemon), across a
 * matrix swap; a split of another size is refused.
 */
static void controller_with_split_matches_one_cpu(void **state)
{
	enum { ACT = 140, SLOPES = 416, STEPS = 300 };
	wt_control *one, *two;
	float *R1, *R2, *s, c1[ACT], c2[ACT];
	wt_mvm_split *sp, *wrong;
	wt_error err;
	wt_mvm *m, *m_wrong;

	(void)state;
	wt_rng_seed(wt_test_seed(16));
	R1 = random_floats((size_t)ACT * SLOPES);
	R2 = random_floats((size_t)ACT * SLOPES);
	s = random_floats(SLOPES);
	assert_int_equal(wt_mvm_create(ACT, SLOPES, WT_MVM_OWN, &m, &err), 0);
	assert_int_equal(
		wt_mvm_create(ACT + 1, SLOPES, WT_MVM_OWN, &m_wrong, &err), 0);
	sp = make_split(m, -1, WT_MVM_SPLIT_SPIN_NS_DEFAULT);
	wrong = make_split(m_wrong, -1, 0);
	assert_int_equal(wt_control_create(ACT, SLOPES, &one, &err), 0);
	assert_int_equal(wt_control_create(ACT, SLOPES, &two, &err), 0);
	assert_int_equal(wt_control_set_split(two, wrong), -EINVAL);
	assert_int_equal(wt_control_set_split(two, sp), 0);
	for (int k = 0; k < 2; k++) {
		wt_control *c = k ? two : one;

		wt_control_set_gain(c, 0.4f);
		wt_control_set_leak(c, 0.01f);
		wt_control_set_slew(c, 0.05f);
		wt_control_swap_matrix(c, R1);
	}
	for (int f = 0; f < STEPS; f++) {
		s[f % SLOPES] = -s[f % SLOPES];
		if (f == STEPS / 2) {
			wt_control_swap_matrix(one, R2);
			wt_control_swap_matrix(two, R2);
		}
		assert_int_equal(wt_control_step(one, s, c1, NULL), 0);
		assert_int_equal(wt_control_step(two, s, c2, NULL), 0);
		assert_memory_equal(c1, c2, sizeof(c1));
	}
	wt_control_destroy(one);
	wt_control_destroy(two);
	wt_mvm_split_destroy(sp);
	wt_mvm_split_destroy(wrong);
	wt_mvm_destroy(m);
	wt_mvm_destroy(m_wrong);
	free(R1);
	free(R2);
	free(s);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(split_equals_one_cpu_and_openblas_for_odd_sizes),
	cmocka_unit_test(default_row_is_half_on_block_boundary),
	cmocka_unit_test(repeated_applies_each_give_that_frames_product),
	cmocka_unit_test(matrix_swapped_between_applies_is_used_at_once),
	cmocka_unit_test(parked_worker_is_woken_by_the_next_apply),
	cmocka_unit_test(bad_arguments_are_refused_with_a_message),
	cmocka_unit_test(applies_allocate_nothing),
	cmocka_unit_test(controller_with_split_matches_one_cpu),
};

WT_TEST_MAIN(tests)
