/*
 * wt_clock.h - CLOCK_MONOTONIC in nanoseconds.
 *
 * The one time base of the daemon: frame receive and send stamps, latency,
 * driver-silence timeouts and status periods.  CLOCK_MONOTONIC never jumps
 * with the wall clock, so differences are always elapsed time.
 */
#ifndef WT_CLOCK_H
#define WT_CLOCK_H

#include <stdint.h>
#include <time.h>

/** Nanoseconds per second, millisecond and microsecond. */
#define WT_NS_PER_S  1000000000ull
#define WT_NS_PER_MS 1000000ull
#define WT_NS_PER_US 1000ull

/** CLOCK_MONOTONIC now, in nanoseconds (0 if the clock cannot be read). */
static inline uint64_t wt_clock_ns(void)
{
	struct timespec ts;

	if (clock_gettime(CLOCK_MONOTONIC, &ts) != 0) {
		return 0;
	}
	return (uint64_t)ts.tv_sec * WT_NS_PER_S + (uint64_t)ts.tv_nsec;
}

/** Sleep for ns nanoseconds (returns early on a signal: callers re-check
 * their stop flag, as every blocking call in the daemon does). */
static inline void wt_clock_sleep_ns(uint64_t ns)
{
	struct timespec ts = {
		.tv_sec = (time_t)(ns / WT_NS_PER_S),
		.tv_nsec = (long)(ns % WT_NS_PER_S),
	};

	nanosleep(&ts, NULL);
}

#endif /* WT_CLOCK_H */
