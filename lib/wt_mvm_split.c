/*
 * wt_mvm_split.c - u = R s split by rows over two CPUs.
 */
#include "wt_mvm_split.h"

#include <errno.h>
#include <linux/futex.h>
#include <pthread.h>
#include <sched.h>
#include <stdatomic.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>
#include <sys/syscall.h>
#include <unistd.h>

#include "wt_clock.h"

/* The worker reads the clock once per this many idle spins. */
#define WT_SPLIT_CLOCK_EVERY 256

/* The caller's fields, the worker's fields and each hand-off word live on
 * their own cache lines: the two spinning threads share only what they
 * must. */
struct wt_mvm_split {
	/* set at creation, read-only after */
	const wt_mvm *m;
	int row0, n_rows; /* the worker's rows */
	int cpu;
	uint64_t spin_ns;
	pthread_t thread;
	int pin_ret;

	/* the job: written by the caller before `go`, read by the worker
	 * after it claimed the job */
	_Alignas(64) const float *R;
	const float *s;
	float *u;

	/* caller-only */
	_Alignas(64) unsigned seq; /* the last job posted */
	bool parked;		   /* park asked since the last apply */
	wt_mvm_split_stats st;

	_Alignas(64) atomic_uint go;	  /* job posted (the futex word) */
	_Alignas(64) atomic_uint claim;	  /* job whose worker rows are taken */
	_Alignas(64) atomic_uint done;	  /* job the worker finished */
	_Alignas(64) atomic_int sleeping; /* worker is (about to be) asleep */
	atomic_int park;		  /* caller asks it to sleep now */
	atomic_int stop;
	atomic_int ready;
};

static inline void cpu_relax(void)
{
#if defined(__x86_64__) || defined(__i386__)
	__builtin_ia32_pause();
#elif defined(__aarch64__)
	__asm__ __volatile__("yield");
#endif
}

static void futex_wait(atomic_uint *word, unsigned expected)
{
	/* Returns at once when *word != expected (EAGAIN), on a wake, on a
	 * signal (EINTR): the caller re-checks in every case. */
	syscall(SYS_futex, (unsigned *)word, FUTEX_WAIT_PRIVATE, expected, NULL,
		NULL, 0);
}

static void futex_wake(atomic_uint *word)
{
	syscall(SYS_futex, (unsigned *)word, FUTEX_WAKE_PRIVATE, 1, NULL, NULL,
		0);
}

static int pin_self(int cpu)
{
	cpu_set_t set;

	if (cpu < 0 || cpu >= CPU_SETSIZE) {
		return -EINVAL;
	}
	CPU_ZERO(&set);
	CPU_SET(cpu, &set);
	return -pthread_setaffinity_np(pthread_self(), sizeof(set), &set);
}

int wt_mvm_split_default_row(int rows)
{
	if (rows < 1) {
		return 0;
	}
	if (rows < 32) {
		return (rows / 2) & ~3;
	}
	return (rows / 2) & ~15;
}

int wt_mvm_split_other_cpu(int avoid)
{
	cpu_set_t set;
	int c;

	if (sched_getaffinity(0, sizeof(set), &set) != 0) {
		return -errno;
	}
	for (c = CPU_SETSIZE - 1; c >= 0; c--) {
		if (c != avoid && CPU_ISSET(c, &set)) {
			return c;
		}
	}
	return -ENODEV;
}

/* Sleep until a job newer than `seen` is posted, or stop, or un-park. */
static void worker_sleep(wt_mvm_split *sp, unsigned seen)
{
	/* Dekker with the caller (both sides sequentially consistent): we
	 * store `sleeping` then read `go`; it stores `go` then reads
	 * `sleeping`.  One of us sees the other: either we see the new job
	 * and do not sleep, or it sees us asleep and wakes us (and a wake
	 * between our check and futex_wait makes futex_wait return at once,
	 * `go` no longer being `seen`). */
	atomic_store(&sp->sleeping, 1);
	while (atomic_load(&sp->go) == seen && !atomic_load(&sp->stop)) {
		futex_wait(&sp->go, seen);
	}
	atomic_store(&sp->sleeping, 0);
}

static void *worker_main(void *arg)
{
	wt_mvm_split *sp = arg;
	unsigned seen = 0;

	sp->pin_ret = pin_self(sp->cpu);
	atomic_store_explicit(&sp->ready, 1, memory_order_release);
	if (sp->pin_ret < 0) {
		return NULL;
	}
	for (;;) {
		uint64_t idle_since = wt_clock_ns();
		unsigned g, n_spin = 0, expect;

		while ((g = atomic_load_explicit(
				&sp->go, memory_order_acquire)) == seen) {
			/* destroy bumps `go` too: no stop check here */
			cpu_relax();
			if (++n_spin % WT_SPLIT_CLOCK_EVERY != 0) {
				continue;
			}
			if (atomic_load_explicit(&sp->park,
						 memory_order_relaxed) ||
			    wt_clock_ns() - idle_since >= sp->spin_ns) {
				worker_sleep(sp, seen);
				idle_since = wt_clock_ns();
			}
		}
		if (atomic_load_explicit(&sp->stop, memory_order_acquire)) {
			return NULL;
		}
		seen = g;
		expect = g - 1;
		if (!atomic_compare_exchange_strong_explicit(
			    &sp->claim, &expect, g, memory_order_acq_rel,
			    memory_order_relaxed)) {
			continue; /* the caller took this job back */
		}
		wt_mvm_apply_rows(sp->m, sp->R, sp->s, sp->u, sp->row0,
				  sp->n_rows);
		atomic_store_explicit(&sp->done, g, memory_order_release);
	}
}

int wt_mvm_split_create(const wt_mvm *m, const wt_mvm_split_params *p,
			wt_mvm_split **out, wt_error *err)
{
	pthread_attr_t attr;
	wt_mvm_split *sp;
	int rows, ret, split_row;

	if (out) {
		*out = NULL;
	}
	if (!m || !p || !out) {
		return wt_error_set(err, -EINVAL, "mvm split: NULL argument");
	}
	rows = wt_mvm_rows(m);
	split_row = p->split_row;
	if (split_row == -1) {
		split_row = wt_mvm_split_default_row(rows);
	}
	if (split_row < 0 || split_row > rows) {
		return wt_error_set(err, -EINVAL,
				    "mvm split: split row %d outside 0 .. %d",
				    split_row, rows);
	}
	if (p->cpu < 0 || p->cpu >= CPU_SETSIZE) {
		return wt_error_set(err, -EINVAL, "mvm split: CPU %d", p->cpu);
	}
	if (p->priority < 0 ||
	    (p->priority > 0 &&
	     (p->priority < sched_get_priority_min(SCHED_FIFO) ||
	      p->priority > sched_get_priority_max(SCHED_FIFO)))) {
		return wt_error_set(err, -EINVAL,
				    "mvm split: SCHED_FIFO priority %d",
				    p->priority);
	}
	sp = aligned_alloc(64, (sizeof(*sp) + 63) & ~(size_t)63);
	if (!sp) {
		return wt_error_set(err, -ENOMEM, "mvm split: out of memory");
	}
	memset(sp, 0, sizeof(*sp));
	sp->m = m;
	sp->row0 = split_row;
	sp->n_rows = rows - split_row;
	sp->cpu = p->cpu;
	sp->spin_ns = p->spin_ns;
	atomic_init(&sp->go, 0);
	atomic_init(&sp->claim, 0);
	atomic_init(&sp->done, 0);
	atomic_init(&sp->sleeping, 0);
	atomic_init(&sp->park, 0);
	atomic_init(&sp->stop, 0);
	atomic_init(&sp->ready, 0);
	pthread_attr_init(&attr);
	if (p->priority > 0) {
		struct sched_param prio = {.sched_priority = p->priority};

		pthread_attr_setinheritsched(&attr, PTHREAD_EXPLICIT_SCHED);
		pthread_attr_setschedpolicy(&attr, SCHED_FIFO);
		pthread_attr_setschedparam(&attr, &prio);
	}
	ret = -pthread_create(&sp->thread, &attr, worker_main, sp);
	pthread_attr_destroy(&attr);
	if (ret < 0) {
		free(sp);
		return wt_error_set(err, ret, "mvm split: worker thread%s: %s",
				    p->priority > 0 ? " (SCHED_FIFO)" : "",
				    wt_strerror(ret));
	}
	while (!atomic_load_explicit(&sp->ready, memory_order_acquire)) {
		cpu_relax();
	}
	if (sp->pin_ret < 0) {
		ret = sp->pin_ret;
		pthread_join(sp->thread, NULL);
		free(sp);
		return wt_error_set(err, ret,
				    "mvm split: cannot pin the worker to CPU "
				    "%d: %s",
				    p->cpu, wt_strerror(ret));
	}
	*out = sp;
	wt_error_clear(err);
	return 0;
}

void wt_mvm_split_destroy(wt_mvm_split *sp)
{
	if (!sp) {
		return;
	}
	atomic_store(&sp->stop, 1);
	/* A new `go` value, so that a sleeping worker's futex_wait cannot
	 * miss the wake; the worker checks `stop` before claiming. */
	atomic_fetch_add(&sp->go, 1);
	futex_wake(&sp->go);
	pthread_join(sp->thread, NULL);
	free(sp);
}

void wt_mvm_split_apply(wt_mvm_split *sp, const float *R, const float *s,
			float *u)
{
	unsigned n = sp->seq + 1, expect = n - 1;

	sp->R = R;
	sp->s = s;
	sp->u = u;
	sp->seq = n;
	if (sp->parked) {
		/* only now, not every frame: the worker reads this line */
		atomic_store_explicit(&sp->park, 0, memory_order_relaxed);
		sp->parked = false;
	}
	/* sequentially consistent: see worker_sleep() */
	atomic_store(&sp->go, n);
	if (atomic_load(&sp->sleeping)) {
		futex_wake(&sp->go);
		sp->st.wakes++;
	}
	wt_mvm_apply_rows(sp->m, R, s, u, 0, sp->row0);
	sp->st.applies++;
	if (atomic_compare_exchange_strong_explicit(&sp->claim, &expect, n,
						    memory_order_acq_rel,
						    memory_order_relaxed)) {
		/* The worker has not started: its rows here too. */
		wt_mvm_apply_rows(sp->m, R, s, u, sp->row0, sp->n_rows);
		sp->st.taken++;
		return;
	}
	while (atomic_load_explicit(&sp->done, memory_order_acquire) != n) {
		cpu_relax();
	}
	sp->st.shared++;
}

void wt_mvm_split_park(wt_mvm_split *sp)
{
	atomic_store_explicit(&sp->park, 1, memory_order_relaxed);
	sp->parked = true;
}

int wt_mvm_split_row(const wt_mvm_split *sp)
{
	return sp->row0;
}

int wt_mvm_split_cpu(const wt_mvm_split *sp)
{
	return sp->cpu;
}

int wt_mvm_split_rows(const wt_mvm_split *sp)
{
	return wt_mvm_rows(sp->m);
}

int wt_mvm_split_cols(const wt_mvm_split *sp)
{
	return wt_mvm_cols(sp->m);
}

void wt_mvm_split_get_stats(const wt_mvm_split *sp, wt_mvm_split_stats *st)
{
	*st = sp->st;
}
