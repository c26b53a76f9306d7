/*
 * wt_error.h - error codes and messages shared by every libwavetrim module.
 *
 * Functions return 0 on success or a negative code: either a negated errno
 * value (-EINVAL, -ENOMEM, ...) or one of the WT_E* codes below.  Where a
 * function takes a wt_error *, it also writes a human-readable message there
 * (the pointer may be NULL when the caller does not want one).
 */
#ifndef WT_ERROR_H
#define WT_ERROR_H

#include <stddef.h>

/** Longest message kept, terminator included. */
#define WT_ERROR_MAX 512

/** A code and the sentence that explains it. */
typedef struct wt_error {
	int code;
	char msg[WT_ERROR_MAX];
} wt_error;

/** wavetrim's own codes, all well above the errno range. */
enum wt_code {
	WT_ECONFIG = 4096, /**< configuration refused */
	WT_EPROTO_SHORT,   /**< message shorter than the header */
	WT_EPROTO_MAGIC,   /**< wrong magic bytes */
	WT_EPROTO_VERSION, /**< protocol version not known */
	WT_EPROTO_KIND,    /**< message kind not known */
	WT_EPROTO_DIMS,    /**< width/height zero, too large or wrong for kind */
	WT_EPROTO_PAYLOAD, /**< payload_bytes differs from kind x width x height */
	WT_EPROTO_LENGTH,  /**< message length differs from header + payload */
	WT_ENUMERIC,       /**< a numerical method failed (no convergence ...) */
	WT_EMISMATCH,      /**< dimensions differ from the running configuration */
	WT_ECODE_END
};

/**
 * Set *err (if not NULL) to code and a printf-style message; return code.
 * Use as `return wt_error_set(err, -EINVAL, "lenslets %d < 2", n);`.
 */
int wt_error_set(wt_error *err, int code, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));

/** Clear *err (if not NULL). */
void wt_error_clear(wt_error *err);

/** A short constant description of any code this library returns. */
const char *wt_strerror(int code);

#endif /* WT_ERROR_H */
