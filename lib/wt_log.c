/* wt_log.c - levelled, rate-limited logging through a logger object. */
#include "wt_log.h"

#include <errno.h>
#include <stdarg.h>
#include <string.h>
#include <strings.h>
#include <unistd.h>

#include "wt_clock.h"

static const char *const level_names[] = {
	"emerg", "alert", "crit", "err", "warning", "notice", "info", "debug",
};

void wt_log_init(wt_log *lg, const char *ident, int level,
		 enum wt_log_sink sink, FILE *stream)
{
	if (!lg) {
		return;
	}
	memset(lg, 0, sizeof(*lg));
	lg->level = level < LOG_EMERG	? LOG_EMERG
		    : level > LOG_DEBUG ? LOG_DEBUG
					: level;
	lg->sink = sink;
	lg->stream = stream ? stream : stderr;
	snprintf(lg->ident, sizeof(lg->ident), "%s",
		 ident ? ident : "wavetrim");
	if (sink == WT_LOG_SYSLOG) {
		openlog(lg->ident, LOG_PID, LOG_DAEMON);
	}
}

void wt_log_close(wt_log *lg)
{
	if (lg && lg->sink == WT_LOG_SYSLOG) {
		closelog();
	}
}

int wt_log_level_parse(const char *name)
{
	size_t i;

	if (!name) {
		return -EINVAL;
	}
	if (name[0] >= '0' && name[0] <= '7' && name[1] == '\0') {
		return name[0] - '0';
	}
	for (i = 0; i < sizeof(level_names) / sizeof(level_names[0]); i++) {
		if (strcasecmp(name, level_names[i]) == 0) {
			return (int)i;
		}
	}
	if (strcasecmp(name, "error") == 0) {
		return LOG_ERR;
	}
	if (strcasecmp(name, "warn") == 0) {
		return LOG_WARNING;
	}
	return -EINVAL;
}

const char *wt_log_level_name(int level)
{
	if (level < LOG_EMERG || level > LOG_DEBUG) {
		return "?";
	}
	return level_names[level];
}

static void log_vwrite(const wt_log *lg, int level, unsigned long held,
		       const char *fmt, va_list ap)
{
	char line[1024];
	size_t n = 0;
	int k;

	if (lg->sink == WT_LOG_STREAM) {
		k = snprintf(line, sizeof(line), "%s[%ld]: %s: ", lg->ident,
			     (long)getpid(), wt_log_level_name(level));
		n = k > 0 ? (size_t)k : 0;
	}
	if (n < sizeof(line)) {
		k = vsnprintf(line + n, sizeof(line) - n, fmt, ap);
		n = k > 0 ? n + (size_t)k : n;
	}
	if (held > 0 && n < sizeof(line)) {
		k = snprintf(line + n, sizeof(line) - n,
			     " (%lu similar messages suppressed)", held);
		n = k > 0 ? n + (size_t)k : n;
	}
	if (n >= sizeof(line) - 1) {
		/* Cut, but keep the line a line. */
		n = sizeof(line) - 2;
	}
	if (lg->sink == WT_LOG_SYSLOG) {
		line[n] = '\0';
		syslog(level, "%s", line);
		return;
	}
	line[n] = '\n';
	line[n + 1] = '\0';
	fputs(line, lg->stream);
	fflush(lg->stream);
}

void wt_log_write(const wt_log *lg, int level, const char *fmt, ...)
{
	va_list ap;

	if (!lg) {
		return;
	}
	va_start(ap, fmt);
	log_vwrite(lg, level, 0, fmt, ap);
	va_end(ap);
}

void wt_log_write_suppressed(const wt_log *lg, int level, unsigned long held,
			     const char *fmt, ...)
{
	va_list ap;

	if (!lg) {
		return;
	}
	va_start(ap, fmt);
	log_vwrite(lg, level, held, fmt, ap);
	va_end(ap);
}

uint64_t wt_log_now_ns(void)
{
	return wt_clock_ns();
}

void wt_ratelimit_init(wt_ratelimit *rl, uint64_t interval_ns, unsigned burst)
{
	if (!rl) {
		return;
	}
	memset(rl, 0, sizeof(*rl));
	rl->interval_ns = interval_ns;
	rl->burst = burst;
}

bool wt_ratelimit_pass(wt_ratelimit *rl, uint64_t now_ns,
		       unsigned long *suppressed)
{
	if (!rl) {
		return true;
	}
	if (rl->passed == 0 ||
	    now_ns - rl->window_start_ns >= rl->interval_ns ||
	    now_ns < rl->window_start_ns) {
		rl->window_start_ns = now_ns;
		rl->passed = 0;
	}
	if (rl->passed >= rl->burst) {
		rl->suppressed++;
		return false;
	}
	rl->passed++;
	if (suppressed) {
		*suppressed = rl->suppressed;
	}
	rl->suppressed = 0;
	return true;
}
