/*
 * fuzz_util.h - small helpers shared by wavetrim's libFuzzer targets.
 *
 * A target checks properties its module promises and calls FUZZ_CHECK()
 * for each: a violated property prints what was expected and aborts, which
 * libFuzzer reports as a crash and keeps as a reproducer.
 */
#ifndef WT_FUZZ_UTIL_H
#define WT_FUZZ_UTIL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

/** Abort with the failed condition and a printf-style explanation. */
#define FUZZ_CHECK(cond, ...)                                                  \
	do {                                                                   \
		if (!(cond)) {                                                 \
			fprintf(stderr, "%s:%d: property violated: %s\n  ",    \
				__FILE__, __LINE__, #cond);                    \
			fprintf(stderr, __VA_ARGS__);                          \
			fputc('\n', stderr);                                   \
			abort();                                               \
		}                                                              \
	} while (0)

/*
 * Is s[0..n) well-formed UTF-8 (RFC 3629, section 4: no overlong forms, no
 * surrogates, nothing above U+10FFFF, no cut sequence)?  Written from the
 * RFC's UTF8-octets grammar, independently of lib/wt_json.c.
 */
static inline bool fuzz_utf8_valid(const unsigned char *s, size_t n)
{
	size_t i = 0;

	while (i < n) {
		unsigned char c = s[i];
		unsigned char lo = 0x80, hi = 0xbf;
		size_t k, len;

		if (c < 0x80) {
			i++;
			continue;
		}
		if (c >= 0xc2 && c <= 0xdf) {
			len = 2;
		} else if (c >= 0xe0 && c <= 0xef) {
			len = 3;
			lo = c == 0xe0 ? 0xa0 : 0x80;
			hi = c == 0xed ? 0x9f : 0xbf;
		} else if (c >= 0xf0 && c <= 0xf4) {
			len = 4;
			lo = c == 0xf0 ? 0x90 : 0x80;
			hi = c == 0xf4 ? 0x8f : 0xbf;
		} else {
			return false;
		}
		if (n - i < len || s[i + 1] < lo || s[i + 1] > hi) {
			return false;
		}
		for (k = 2; k < len; k++) {
			if ((s[i + k] & 0xc0) != 0x80) {
				return false;
			}
		}
		i += len;
	}
	return true;
}

/** A terminated heap copy of data[0..n) (the caller frees it). */
static inline char *fuzz_strndup(const uint8_t *data, size_t n)
{
	char *s = malloc(n + 1);

	if (!s) {
		abort();
	}
	for (size_t i = 0; i < n; i++) {
		s[i] = (char)data[i];
	}
	s[n] = '\0';
	return s;
}

#endif /* WT_FUZZ_UTIL_H */
