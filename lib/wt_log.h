/*
 * wt_log.h - levelled, rate-limited logging through a logger object.
 *
 * There is no global logger: whoever logs holds a wt_log (the daemon's main
 * makes one and hands a pointer to each thread).  Levels are syslog's
 * (LOG_EMERG 0 .. LOG_DEBUG 7); a message is written when its level is at
 * or below the logger's.  The WT_LOG* macros test the level first, so the
 * arguments of a message below the level are never evaluated.
 *
 * Output: one line per message, written with a single stdio call so lines
 * of different threads never interleave:
 *   "IDENT[PID]: LEVEL: message" on the stream given (stderr usually), or
 *   through syslog(3) when the logger was made with WT_LOG_SYSLOG.
 *
 * Rate limiting: a wt_ratelimit lets `burst` messages through per
 * `interval_ns`, and counts the others; the first message let through after
 * a suppression says how many were suppressed.  Anything that can fire per
 * frame must go through one (the loop thread does not log at all: it counts
 * and pushes events, the telemetry thread turns them into words).
 *
 * A wt_log may be used from several threads at once (its fields are only
 * read after set-up); a wt_ratelimit belongs to one thread.
 */
#ifndef WT_LOG_H
#define WT_LOG_H

#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>
#include <syslog.h>

/** Where messages go. */
enum wt_log_sink {
	WT_LOG_STREAM = 0, /**< the FILE * given (e.g. stderr) */
	WT_LOG_SYSLOG = 1, /**< syslog(3), facility LOG_DAEMON */
};

/** A logger.  Plain data: set it up with wt_log_init(). */
typedef struct wt_log {
	int level; /**< highest level written (LOG_DEBUG = all) */
	enum wt_log_sink sink;
	FILE *stream;	/**< WT_LOG_STREAM */
	char ident[32]; /**< program name at the start of each line */
} wt_log;

/**
 * Set up lg: level, sink, stream (used with WT_LOG_STREAM; NULL = stderr)
 * and ident (cut to 31 characters).  With WT_LOG_SYSLOG this calls
 * openlog(3).
 */
void wt_log_init(wt_log *lg, const char *ident, int level,
		 enum wt_log_sink sink, FILE *stream);

/** Undo wt_log_init() (closelog(3) for the syslog sink). */
void wt_log_close(wt_log *lg);

/**
 * Level from its name: the syslog names "emerg", "alert", "crit", "err",
 * "warning", "notice", "info", "debug", also "error" and "warn", or a digit
 * 0..7.  Returns the level, or -EINVAL for anything else.
 */
int wt_log_level_parse(const char *name);

/** Name of a level ("err", "warning", ...); "?" when out of range. */
const char *wt_log_level_name(int level);

/** True when a message at level would be written (NULL lg: false). */
static inline bool wt_log_enabled(const wt_log *lg, int level)
{
	return lg && level <= lg->level;
}

/** Write one message (no level test: use the macros). */
void wt_log_write(const wt_log *lg, int level, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));

/** Log at level; the arguments are evaluated only when it is enabled. */
#define WT_LOG(lg, level, ...)                                                 \
	do {                                                                   \
		if (wt_log_enabled((lg), (level))) {                           \
			wt_log_write((lg), (level), __VA_ARGS__);              \
		}                                                              \
	} while (0)

#define wt_log_err(lg, ...)	WT_LOG(lg, LOG_ERR, __VA_ARGS__)
#define wt_log_warning(lg, ...) WT_LOG(lg, LOG_WARNING, __VA_ARGS__)
#define wt_log_notice(lg, ...)	WT_LOG(lg, LOG_NOTICE, __VA_ARGS__)
#define wt_log_info(lg, ...)	WT_LOG(lg, LOG_INFO, __VA_ARGS__)
#define wt_log_debug(lg, ...)	WT_LOG(lg, LOG_DEBUG, __VA_ARGS__)

/** At most burst messages per interval_ns; the rest are counted. */
typedef struct wt_ratelimit {
	uint64_t interval_ns;
	unsigned burst;
	uint64_t window_start_ns; /**< start of the current window */
	unsigned passed;	  /**< messages let through in this window */
	unsigned long suppressed; /**< messages held back since the last one */
} wt_ratelimit;

/** A rate limit of burst messages per interval_ns, nothing counted yet. */
void wt_ratelimit_init(wt_ratelimit *rl, uint64_t interval_ns, unsigned burst);

/**
 * May a message go out at time now_ns?  true: yes (then *suppressed, when
 * not NULL, receives how many were held back before it, and the count
 * restarts); false: counted as suppressed.
 */
bool wt_ratelimit_pass(wt_ratelimit *rl, uint64_t now_ns,
		       unsigned long *suppressed);

/**
 * Log at level through the rate limit rl (uses CLOCK_MONOTONIC).  The
 * level is tested first, the limit second, the arguments last; a message
 * after a suppression gets " (N similar messages suppressed)" appended.
 */
#define WT_LOG_RATELIMITED(lg, rl, level, ...)                                 \
	do {                                                                   \
		unsigned long wt_rl_held_;                                     \
		if (wt_log_enabled((lg), (level)) &&                           \
		    wt_ratelimit_pass((rl), wt_log_now_ns(), &wt_rl_held_)) {  \
			wt_log_write_suppressed((lg), (level), wt_rl_held_,    \
						__VA_ARGS__);                  \
		}                                                              \
	} while (0)

/** CLOCK_MONOTONIC in ns (for the macro above). */
uint64_t wt_log_now_ns(void);

/** wt_log_write() with a note of held-back messages when held > 0. */
void wt_log_write_suppressed(const wt_log *lg, int level, unsigned long held,
			     const char *fmt, ...)
	__attribute__((format(printf, 4, 5)));

#endif /* WT_LOG_H */
