/*
 * alloc_probe.c - an LD_PRELOAD library for tests/test_e2e_loop.c: counts
 * the heap calls (malloc, calloc, realloc, free, posix_memalign,
 * aligned_alloc, memalign) made by wavetrimd's loop thread, its own and
 * those of the libraries it calls (libzmq, OpenBLAS), while the loop is
 * closed.
 *
 * The loop thread calls wtd_alloc_probe() after every frame (a weak symbol
 * in daemon/loop.c, resolved here).  Counting starts, in that thread only
 * (a thread-local switch), after WT_ALLOC_WARMUP closed frames in a row and
 * stops WT_ALLOC_FRAMES closed frames later; at exit the result is written
 * to the file named by WT_ALLOC_REPORT as "frames N calls M zmq Z": M made
 * by the loop and everything but libzmq, Z made by libzmq inside the loop
 * thread's zmq_* calls.  Other threads (control, telemetry, libzmq's I/O
 * thread) are not counted.
 */
#include <dlfcn.h>
#include <fcntl.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "wt_request.h"

void *__libc_malloc(size_t n);
void *__libc_calloc(size_t n, size_t size);
void *__libc_realloc(void *p, size_t n);
void __libc_free(void *p);
void *__libc_memalign(size_t align, size_t n);

static __thread int counting;
static unsigned long calls, zmq_calls, frames_counted, closed_run;
static int done;

/*
 * libzmq is C++: its heap calls come from libzmq itself or through
 * operator new/delete in libstdc++, which nothing else in the loop thread
 * uses (the daemon and libwavetrim are C).  Those are counted apart.
 */
static int from_zmq(const void *caller)
{
	Dl_info info;

	if (!dladdr(caller, &info) || !info.dli_fname) {
		return 0;
	}
	return strstr(info.dli_fname, "libzmq") != NULL ||
	       strstr(info.dli_fname, "libstdc++") != NULL;
}

#define count()                                                                \
	do {                                                                   \
		if (counting) {                                                \
			counting = 0;                                          \
			if (from_zmq(__builtin_return_address(0))) {           \
				zmq_calls++;                                   \
			} else {                                               \
				calls++;                                       \
			}                                                      \
			counting = 1;                                          \
		}                                                              \
	} while (0)

void *malloc(size_t n)
{
	count();
	return __libc_malloc(n);
}

void *calloc(size_t n, size_t size)
{
	count();
	return __libc_calloc(n, size);
}

void *realloc(void *p, size_t n)
{
	count();
	return __libc_realloc(p, n);
}

void free(void *p)
{
	count();
	__libc_free(p);
}

void *memalign(size_t align, size_t n)
{
	count();
	return __libc_memalign(align, n);
}

void *aligned_alloc(size_t align, size_t n)
{
	count();
	return __libc_memalign(align, n);
}

int posix_memalign(void **out, size_t align, size_t n)
{
	void *p;

	count();
	p = __libc_memalign(align, n);
	if (!p) {
		return 12; /* ENOMEM */
	}
	*out = p;
	return 0;
}

static unsigned long env_ulong(const char *name, unsigned long fallback)
{
	const char *s = getenv(name);

	return s && *s ? strtoul(s, NULL, 10) : fallback;
}

void wtd_alloc_probe(uint64_t answered, int state);

void wtd_alloc_probe(uint64_t answered, int state)
{
	static unsigned long warmup, frames;

	(void)answered;
	if (done) {
		return;
	}
	if (!warmup) {
		warmup = env_ulong("WT_ALLOC_WARMUP", 1000);
		frames = env_ulong("WT_ALLOC_FRAMES", 10000);
	}
	if (state != WT_STATE_CLOSED) {
		counting = 0;
		closed_run = 0;
		calls = 0;
		return;
	}
	closed_run++;
	if (closed_run == warmup) {
		calls = 0;
		zmq_calls = 0;
		counting = 1;
	} else if (closed_run == warmup + frames) {
		counting = 0;
		frames_counted = frames;
		done = 1;
	}
}

__attribute__((destructor)) static void report(void)
{
	const char *path = getenv("WT_ALLOC_REPORT");
	char line[96];
	int fd, n;

	if (!path || !done) {
		return;
	}
	n = snprintf(line, sizeof(line), "frames %lu calls %lu zmq %lu\n",
		     frames_counted, calls, zmq_calls);
	fd = open(path, O_WRONLY | O_CREAT | O_TRUNC, 0644);
	if (fd >= 0) {
		if (write(fd, line, (size_t)n) != n) {
			/* the test then finds no report */
		}
		close(fd);
	}
}
