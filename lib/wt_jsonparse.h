/*
 * wt_jsonparse.h - a small strict JSON reader (RFC 8259) for the replies and
 * telemetry that wavetrim's own tools read.
 *
 * The parser does not allocate: it fills a caller-provided array of tokens,
 * one per value, in document order.  A container's token is followed by its
 * children (for an object: key, value, key, value ...).  Strings are left in
 * the source text; wt_jsonp_string() unescapes one into a caller buffer.
 */
#ifndef WT_JSONPARSE_H
#define WT_JSONPARSE_H

#include <stdbool.h>
#include <stddef.h>

#include "wt_error.h"

/** Kind of one JSON value. */
typedef enum wt_jtype {
	WT_JSON_OBJECT,
	WT_JSON_ARRAY,
	WT_JSON_STRING,
	WT_JSON_NUMBER,
	WT_JSON_TRUE,
	WT_JSON_FALSE,
	WT_JSON_NULL,
} wt_jtype;

/** One value: its kind, where it lies in the text, its size and parent. */
typedef struct wt_jtok {
	wt_jtype type;
	size_t start; /**< first byte (for strings: after the quote) */
	size_t end;   /**< one past the last byte (strings: the closing quote) */
	int size;     /**< objects: members; arrays: elements; else 0 */
	int parent;   /**< token index of the enclosing container, -1 at top */
	int next;     /**< index of the token after this value's subtree */
} wt_jtok;

/** Deepest nesting accepted. */
#define WT_JSON_MAX_DEPTH 64

/**
 * Parse exactly one JSON value (surrounding whitespace allowed) from js[0..len).
 * Returns the number of tokens written, or -EINVAL (malformed, with the byte
 * offset and reason in *err) or -ENOSPC (more than max_tokens values).
 */
int wt_jsonp_parse(const char *js, size_t len, wt_jtok *toks, int max_tokens,
		   wt_error *err);

/**
 * In the object at token index obj, the token index of the value of member
 * key, or -1 when the object has no such member (or obj is no object).
 */
int wt_jsonp_member(const char *js, const wt_jtok *toks, int obj,
		    const char *key);

/** Token index of element k of the array at token index arr, or -1. */
int wt_jsonp_element(const wt_jtok *toks, int arr, int k);

/**
 * Unescape the string token t into out (at most out_len bytes including the
 * terminator). Returns its length, or -ENOSPC if it does not fit, -EINVAL if
 * t is no string.
 */
int wt_jsonp_string(const char *js, const wt_jtok *t, char *out, size_t out_len);

/** The number in token t (0 and -EINVAL in *ok if t is no number). */
double wt_jsonp_number(const char *js, const wt_jtok *t, int *ok);

/** True for a `true` token, false otherwise. */
bool wt_jsonp_true(const wt_jtok *t);

#endif /* WT_JSONPARSE_H */
