/*
 * wt_json.h - a small JSON writer (RFC 8259) into a caller's buffer.
 *
 * No allocation: the writer fills the buffer given to wt_json_init() and
 * always keeps it terminated.  Commas and nesting are tracked for the
 * caller; when the text does not fit, the writer remembers the overflow and
 * wt_json_finish() reports it (the buffer then holds a cut prefix that is
 * not valid JSON, so a caller must not send it).
 *
 * Output is RFC 8259 JSON text:
 * - strings are escaped as section 7 requires: '"' and '\\' with a
 *   backslash, U+0000..U+001F as \b \f \n \r \t or \u00XX; everything else
 *   is written as it is, except that bytes which are not well-formed UTF-8
 *   (RFC 3629: overlong forms, surrogates, code points above U+10FFFF, cut
 *   sequences) are each replaced by U+FFFD, so the output is always valid
 *   UTF-8 as section 8.1 requires;
 * - numbers follow the grammar of section 6; NaN and infinities, which JSON
 *   cannot express, are written as null.
 */
#ifndef WT_JSON_H
#define WT_JSON_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/** Deepest nesting of objects and arrays the writer tracks. */
#define WT_JSONW_DEPTH 32

/** Writer state (plain data, on the caller's stack). */
typedef struct wt_json {
	char *buf;
	size_t cap; /**< bytes in buf, terminator included */
	size_t len; /**< bytes written, terminator excluded */
	int depth;
	bool overflow;	/**< the text did not fit */
	bool misuse;	/**< nesting too deep, a value without its key ... */
	bool after_key; /**< a key was written, its value comes next */
	bool first[WT_JSONW_DEPTH + 1]; /**< nothing yet in this container */
	char kind[WT_JSONW_DEPTH + 1];	/**< 'o' object, 'a' array, 0 top */
} wt_json;

/** Start writing into buf (cap bytes, cap >= 1). */
void wt_json_init(wt_json *j, char *buf, size_t cap);

/** { and }.  Inside an object, every value must follow a wt_json_key(). */
void wt_json_object_begin(wt_json *j);
void wt_json_object_end(wt_json *j);
/** [ and ]. */
void wt_json_array_begin(wt_json *j);
void wt_json_array_end(wt_json *j);

/** A member name (escaped as a string) and its ':'. */
void wt_json_key(wt_json *j, const char *key);

/** Values. */
void wt_json_string(wt_json *j, const char *s); /* NULL -> null */
void wt_json_string_n(wt_json *j, const char *s, size_t n);
void wt_json_int(wt_json *j, long long v);
void wt_json_uint(wt_json *j, unsigned long long v);
/** A double in the shortest form (15 to 17 digits) that reads back to
 * the same value; NaN and infinities: null. */
void wt_json_double(wt_json *j, double v);
/** A double with `digits` significant digits (1..17). */
void wt_json_double_prec(wt_json *j, double v, int digits);
void wt_json_bool(wt_json *j, bool v);
void wt_json_null(wt_json *j);
/** A value that is already JSON text, inserted as it is (not checked). */
void wt_json_raw(wt_json *j, const char *json);

/** Array helpers: n doubles (as wt_json_double_prec) or floats. */
void wt_json_double_array(wt_json *j, const double *v, size_t n, int digits);
void wt_json_float_array(wt_json *j, const float *v, size_t n, int digits);

/**
 * Finish: the length of the text (terminator excluded), or -ENOSPC when it
 * did not fit, or -EINVAL when containers are still open or the writer was
 * misused (a value without a key inside an object, too deep nesting).
 */
int wt_json_finish(const wt_json *j);

/**
 * Escape the n bytes at s as the body of a JSON string (no quotes) into
 * out (out_len bytes including the terminator), as described above.
 * Returns the length written, or -ENOSPC (out then holds a terminated
 * prefix that never ends inside an escape).
 */
int wt_json_escape(const char *s, size_t n, char *out, size_t out_len);

#endif /* WT_JSON_H */
