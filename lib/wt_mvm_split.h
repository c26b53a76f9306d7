/*
 * wt_mvm_split.h - u = R s split by rows over two CPUs.
 *
 * The calling thread (the loop thread) computes rows 0 .. split_row - 1,
 * a worker thread pinned to another CPU computes split_row .. rows - 1,
 * both with the kernel of one wt_mvm (wt_mvm_apply_rows()).  With our own
 * kernel every u[i] is the same bits whatever the split (wt_mvm.h), so the
 * split product equals the one-CPU product exactly.
 *
 * The hand-off is two sequence numbers on their own cache lines: the
 * caller publishes R, s and u and bumps `go` (release); the worker, which
 * spins on `go`, claims the job, computes its rows and stores the number
 * in `done`; the caller computes its own rows and spins on `done`.  No
 * lock, no allocation, no system call while the worker is awake.
 *
 * Claiming: the job's rows go to whichever thread first moves `claim` from
 * n - 1 to n (one compare-and-swap each).  A worker that is awake claims
 * within a cache-line transfer of `go`.  A worker that sleeps, or that the
 * scheduler has put aside, has not claimed by the time the caller ends its
 * own rows: the caller then computes the worker's rows too (it "takes the
 * job back").  So a frame never waits on a worker that is not running; it
 * costs at worst about one-CPU time.  Only a worker descheduled in the
 * middle of its rows can delay a frame beyond that.
 *
 * Idle: after each job the worker spins for at most spin_ns waiting for
 * the next; then it sleeps on a futex until the next wt_mvm_split_apply()
 * (which then makes one FUTEX_WAKE system call and, the worker being slow
 * to wake, usually takes that job back).  wt_mvm_split_park() puts it to
 * sleep at once (e.g. when the loop opens).  At a frame period below
 * spin_ns the worker never sleeps and the caller makes no system call.
 *
 * The matrix is an argument of each apply, not a property of the split:
 * the worker reads R only for a job it has claimed, and apply returns only
 * when that job is finished, so after wt_mvm_split_apply() returns the
 * worker holds no pointer to R, s or u.  Swapping the control matrix
 * between two applies (and freeing the old one) is therefore safe without
 * stopping the worker; it always uses the caller's matrix of that frame.
 *
 * One caller thread per split.  The caller is not pinned here; pin it to a
 * CPU other than the worker's, or the two share one CPU (results stay
 * right: the caller takes the jobs back).
 */
#ifndef WT_MVM_SPLIT_H
#define WT_MVM_SPLIT_H

#include <stdint.h>

#include "wt_error.h"
#include "wt_mvm.h"

/** A worker thread and its share of the rows. */
typedef struct wt_mvm_split wt_mvm_split;

/** Default worker spin before it sleeps: 2 ms, two frames at 1 kHz. */
#define WT_MVM_SPLIT_SPIN_NS_DEFAULT 2000000ull

/**
 * The default split row for a product of `rows` rows: half, rounded down
 * to a multiple of 16 (four blocks of the kernel's four rows, and 16
 * floats = one 64-byte cache line of u, so the two threads do not write
 * the same line of u); rows / 2 rounded down to a multiple of 4 below 32
 * rows.  The caller's share is never the larger one: it also does the
 * hand-off.  0 for rows < 1.
 */
int wt_mvm_split_default_row(int rows);

/**
 * Another CPU this process may run on than `avoid` (-1: avoid none): the
 * highest allowed one.  Returns the CPU number, or -ENODEV when there is
 * no other (only one CPU allowed), or a negative errno when the allowed
 * set cannot be read.
 */
int wt_mvm_split_other_cpu(int avoid);

/** How to start the worker. */
typedef struct wt_mvm_split_params {
	int split_row;	  /**< first row of the worker's share, 0 .. rows
			   *   (0: the worker does all rows; rows: the caller
			   *   does all); -1: wt_mvm_split_default_row() */
	int cpu;	  /**< the worker's CPU (>= 0); it pins itself */
	int priority;	  /**< > 0: SCHED_FIFO at this priority; 0: normal */
	uint64_t spin_ns; /**< idle spin before it sleeps (0: sleeps after
			   *   each job) */
} wt_mvm_split_params;

/**
 * Start the worker for products with m's kernel and size (m must outlive
 * the split); it is pinned to p->cpu before this returns.
 *
 * Returns 0; -EINVAL (message in *err) for a bad split row, a CPU < 0,
 * a priority outside SCHED_FIFO's range or NULL arguments; the error of
 * pthread_setaffinity_np (e.g. -EINVAL for a CPU not allowed) when
 * pinning fails, the worker then already stopped; -EPERM when SCHED_FIFO
 * is not permitted; -ENOMEM or -EAGAIN from thread creation.
 */
int wt_mvm_split_create(const wt_mvm *m, const wt_mvm_split_params *p,
			wt_mvm_split **out, wt_error *err);

/** Stop the worker (wake it, join it) and free (NULL is fine). */
void wt_mvm_split_destroy(wt_mvm_split *sp);

/**
 * u = R s over both CPUs; R is rows x cols as m at creation, u must not
 * overlap R or s.  Returns when every row of u is written and the worker
 * no longer uses R, s or u.  No allocation; no system call unless the
 * worker sleeps.  From one thread only.
 */
void wt_mvm_split_apply(wt_mvm_split *sp, const float *R, const float *s,
			float *u);

/**
 * Ask the worker to sleep now instead of spinning out its spin_ns (for a
 * loop that stops computing products: open, held, fault).  The next
 * apply wakes it.  No system call.
 */
void wt_mvm_split_park(wt_mvm_split *sp);

/** The first row of the worker's share, and the worker's CPU. */
int wt_mvm_split_row(const wt_mvm_split *sp);
int wt_mvm_split_cpu(const wt_mvm_split *sp);

/** The product's size (that of the wt_mvm given at creation). */
int wt_mvm_split_rows(const wt_mvm_split *sp);
int wt_mvm_split_cols(const wt_mvm_split *sp);

/** What the applies did so far (read from the calling thread). */
typedef struct wt_mvm_split_stats {
	uint64_t applies; /**< wt_mvm_split_apply() calls */
	uint64_t shared;  /**< of them, the worker computed its rows */
	uint64_t taken;	  /**< the caller took the worker's rows back */
	uint64_t wakes;	  /**< the caller woke a sleeping worker */
} wt_mvm_split_stats;

void wt_mvm_split_get_stats(const wt_mvm_split *sp, wt_mvm_split_stats *st);

#endif /* WT_MVM_SPLIT_H */
