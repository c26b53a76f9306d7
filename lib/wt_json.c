/* wt_json.c - a small JSON writer (RFC 8259) into a caller's buffer. */
#include "wt_json.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void wt_json_init(wt_json *j, char *buf, size_t cap)
{
	memset(j, 0, sizeof(*j));
	j->buf = buf;
	j->cap = cap;
	j->first[0] = true;
	if (!buf || cap == 0) {
		j->overflow = true;
		j->cap = 0;
		return;
	}
	buf[0] = '\0';
}

static void put(wt_json *j, const char *s, size_t n)
{
	if (j->overflow) {
		return;
	}
	if (j->len + n + 1 > j->cap) {
		j->overflow = true;
		return;
	}
	memcpy(j->buf + j->len, s, n);
	j->len += n;
	j->buf[j->len] = '\0';
}

static void putc1(wt_json *j, char c)
{
	put(j, &c, 1);
}

/*
 * Length of the well-formed UTF-8 sequence at s (at most n bytes), or 0 if
 * the bytes there are not one (RFC 3629, section 4, the UTF8-octets
 * grammar).
 */
static size_t utf8_seq(const unsigned char *s, size_t n)
{
	unsigned char c = s[0], lo = 0x80, hi = 0xbf;

	if (c < 0x80) {
		return 1;
	}
	if (c >= 0xc2 && c <= 0xdf) {
		return n >= 2 && (s[1] & 0xc0) == 0x80 ? 2 : 0;
	}
	if (c >= 0xe0 && c <= 0xef) {
		if (c == 0xe0) {
			lo = 0xa0; /* no overlong forms */
		} else if (c == 0xed) {
			hi = 0x9f; /* no UTF-16 surrogates */
		}
		if (n < 3 || s[1] < lo || s[1] > hi || (s[2] & 0xc0) != 0x80) {
			return 0;
		}
		return 3;
	}
	if (c >= 0xf0 && c <= 0xf4) {
		if (c == 0xf0) {
			lo = 0x90; /* no overlong forms */
		} else if (c == 0xf4) {
			hi = 0x8f; /* nothing above U+10FFFF */
		}
		if (n < 4 || s[1] < lo || s[1] > hi || (s[2] & 0xc0) != 0x80 ||
		    (s[3] & 0xc0) != 0x80) {
			return 0;
		}
		return 4;
	}
	return 0;
}

/*
 * Escape s[0..n) into out[0..cap) after *len bytes already there; whole
 * pieces only, always terminated.  0, or -ENOSPC when a piece did not fit.
 */
static int escape_into(const char *s, size_t n, char *out, size_t cap,
		       size_t *len)
{
	static const char short_esc[0x20] = {
		['\b'] = 'b', ['\f'] = 'f', ['\n'] = 'n',
		['\r'] = 'r', ['\t'] = 't',
	};
	const unsigned char *p = (const unsigned char *)s;
	size_t i = 0;

	while (i < n) {
		char esc[8];
		const char *piece = esc;
		size_t k = 1, plen;
		unsigned char c = p[i];

		if (c == '"' || c == '\\') {
			esc[0] = '\\';
			esc[1] = (char)c;
			plen = 2;
		} else if (c < 0x20) {
			if (short_esc[c]) {
				esc[0] = '\\';
				esc[1] = short_esc[c];
				plen = 2;
			} else {
				snprintf(esc, sizeof(esc), "\\u%04x", c);
				plen = 6;
			}
		} else {
			k = utf8_seq(p + i, n - i);
			if (k == 0) {
				piece = "\xef\xbf\xbd"; /* U+FFFD */
				plen = 3;
				k = 1;
			} else {
				piece = (const char *)p + i;
				plen = k;
			}
		}
		if (*len + plen + 1 > cap) {
			out[*len] = '\0';
			return -ENOSPC;
		}
		memcpy(out + *len, piece, plen);
		*len += plen;
		i += k;
	}
	out[*len] = '\0';
	return 0;
}

int wt_json_escape(const char *s, size_t n, char *out, size_t out_len)
{
	size_t len = 0;
	int rc;

	if (!out || out_len == 0) {
		return -ENOSPC;
	}
	if (!s) {
		n = 0;
	}
	rc = escape_into(s, n, out, out_len, &len);
	return rc < 0 ? rc : (int)len;
}

/* Before any value: the comma, and the check that objects get keys. */
static void before_value(wt_json *j)
{
	if (j->after_key) {
		j->after_key = false;
		return;
	}
	if (j->kind[j->depth] == 'o') {
		j->misuse = true; /* a value in an object needs its key */
	}
	if (j->depth == 0 && !j->first[0]) {
		j->misuse = true; /* one value at the top */
	}
	if (!j->first[j->depth]) {
		putc1(j, ',');
	}
	j->first[j->depth] = false;
}

static void quoted(wt_json *j, const char *s, size_t n)
{
	putc1(j, '"');
	if (!j->overflow && escape_into(s, n, j->buf, j->cap, &j->len) < 0) {
		j->overflow = true;
	}
	putc1(j, '"');
}

static void open_container(wt_json *j, char kind, char c)
{
	before_value(j);
	putc1(j, c);
	if (j->depth >= WT_JSONW_DEPTH) {
		j->misuse = true;
		return;
	}
	j->depth++;
	j->first[j->depth] = true;
	j->kind[j->depth] = kind;
}

static void close_container(wt_json *j, char kind, char c)
{
	if (j->depth == 0 || j->kind[j->depth] != kind || j->after_key) {
		j->misuse = true;
		return;
	}
	j->depth--;
	putc1(j, c);
}

void wt_json_object_begin(wt_json *j)
{
	open_container(j, 'o', '{');
}

void wt_json_object_end(wt_json *j)
{
	close_container(j, 'o', '}');
}

void wt_json_array_begin(wt_json *j)
{
	open_container(j, 'a', '[');
}

void wt_json_array_end(wt_json *j)
{
	close_container(j, 'a', ']');
}

void wt_json_key(wt_json *j, const char *key)
{
	if (j->kind[j->depth] != 'o' || j->after_key) {
		j->misuse = true;
		return;
	}
	if (!j->first[j->depth]) {
		putc1(j, ',');
	}
	j->first[j->depth] = false;
	quoted(j, key ? key : "", key ? strlen(key) : 0);
	putc1(j, ':');
	j->after_key = true;
}

void wt_json_string_n(wt_json *j, const char *s, size_t n)
{
	before_value(j);
	if (!s) {
		put(j, "null", 4);
		return;
	}
	quoted(j, s, n);
}

void wt_json_string(wt_json *j, const char *s)
{
	wt_json_string_n(j, s, s ? strlen(s) : 0);
}

void wt_json_int(wt_json *j, long long v)
{
	char tmp[32];
	int n = snprintf(tmp, sizeof(tmp), "%lld", v);

	before_value(j);
	put(j, tmp, (size_t)n);
}

void wt_json_uint(wt_json *j, unsigned long long v)
{
	char tmp[32];
	int n = snprintf(tmp, sizeof(tmp), "%llu", v);

	before_value(j);
	put(j, tmp, (size_t)n);
}

void wt_json_double_prec(wt_json *j, double v, int digits)
{
	char tmp[40];
	int n;

	before_value(j);
	if (!isfinite(v)) {
		put(j, "null", 4);
		return;
	}
	if (digits < 1) {
		digits = 1;
	} else if (digits > 17) {
		digits = 17;
	}
	/*
	 * %g gives "1e+20", "-0.5", "3": all inside RFC 8259's number grammar
	 * (no leading '+', no bare '.', exponent digits present).  The daemon
	 * never calls setlocale(), so the decimal point is '.'.
	 */
	n = snprintf(tmp, sizeof(tmp), "%.*g", digits, v);
	put(j, tmp, (size_t)n);
}

/* The shortest of %.15g, %.16g, %.17g that reads back to v. */
static int shortest(double v, char *tmp, size_t len)
{
	int digits, n = 0;

	for (digits = 15; digits <= 17; digits++) {
		n = snprintf(tmp, len, "%.*g", digits, v);
		if (strtod(tmp, NULL) == v) {
			break;
		}
	}
	return n;
}

void wt_json_double(wt_json *j, double v)
{
	char tmp[40];
	int n;

	if (!isfinite(v)) {
		wt_json_null(j);
		return;
	}
	before_value(j);
	n = shortest(v, tmp, sizeof(tmp));
	put(j, tmp, (size_t)n);
}

void wt_json_bool(wt_json *j, bool v)
{
	before_value(j);
	if (v) {
		put(j, "true", 4);
	} else {
		put(j, "false", 5);
	}
}

void wt_json_null(wt_json *j)
{
	before_value(j);
	put(j, "null", 4);
}

void wt_json_raw(wt_json *j, const char *json)
{
	before_value(j);
	if (!json) {
		put(j, "null", 4);
		return;
	}
	put(j, json, strlen(json));
}

void wt_json_double_array(wt_json *j, const double *v, size_t n, int digits)
{
	size_t i;

	wt_json_array_begin(j);
	for (i = 0; i < n && v && !j->overflow; i++) {
		wt_json_double_prec(j, v[i], digits);
	}
	wt_json_array_end(j);
}

void wt_json_float_array(wt_json *j, const float *v, size_t n, int digits)
{
	size_t i;

	wt_json_array_begin(j);
	for (i = 0; i < n && v && !j->overflow; i++) {
		wt_json_double_prec(j, v[i], digits);
	}
	wt_json_array_end(j);
}

int wt_json_finish(const wt_json *j)
{
	if (j->overflow) {
		return -ENOSPC;
	}
	if (j->misuse || j->depth != 0 || j->after_key) {
		return -EINVAL;
	}
	return (int)j->len;
}
