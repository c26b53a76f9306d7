/*
 * fuzz_json.c - libFuzzer target for the JSON reader (lib/wt_jsonparse.h).
 *
 * Every input is parsed twice: by wt_jsonp_parse() and by a small reference
 * reader written here from the grammar of RFC 8259 (sections 2 to 7), which
 * records the same tokens.  The two must agree on acceptance and on every
 * token.  On top of that the token tree must be consistent on its own
 * (next > index, every child inside its parent's bytes and subtree, sizes
 * that count the children), and the accessors (member, element, string,
 * number, true) must agree with the tree.
 *
 * The reference, like the library, does not check that the text is UTF-8
 * (RFC 8259 section 8.1 asks senders for UTF-8; a reader may take any
 * bytes) and stops nesting at WT_JSON_MAX_DEPTH containers (section 9 lets
 * a reader limit depth).
 */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "fuzz_util.h"
#include "wt_jsonparse.h"

/* ------------------------------------------------------------------ */
/* Reference reader (RFC 8259)                                         */

struct ref {
	const unsigned char *s;
	size_t len, pos;
	wt_jtok *t;
	int n;
};

static void ref_ws(struct ref *r)
{
	/* ws = *( %x20 / %x09 / %x0A / %x0D ) */
	while (r->pos < r->len &&
	       (r->s[r->pos] == 0x20 || r->s[r->pos] == 0x09 ||
		r->s[r->pos] == 0x0a || r->s[r->pos] == 0x0d)) {
		r->pos++;
	}
}

static bool ref_at(const struct ref *r, unsigned char c)
{
	return r->pos < r->len && r->s[r->pos] == c;
}

static bool ref_digit(const struct ref *r)
{
	return r->pos < r->len && r->s[r->pos] >= '0' && r->s[r->pos] <= '9';
}

static bool ref_hex(unsigned char c)
{
	return (c >= '0' && c <= '9') || (c >= 'a' && c <= 'f') ||
	       (c >= 'A' && c <= 'F');
}

static int ref_token(struct ref *r, wt_jtype type, size_t start, int parent)
{
	wt_jtok *t = &r->t[r->n];

	t->type = type;
	t->start = start;
	t->end = start;
	t->size = 0;
	t->parent = parent;
	t->next = r->n + 1;
	return r->n++;
}

/* string = quotation-mark *char quotation-mark (section 7) */
static bool ref_string(struct ref *r, int parent)
{
	int idx;

	r->pos++;
	idx = ref_token(r, WT_JSON_STRING, r->pos, parent);
	while (r->pos < r->len) {
		unsigned char c = r->s[r->pos];

		if (c == '"') {
			r->t[idx].end = r->pos++;
			return true;
		}
		if (c < 0x20) {
			return false; /* unescaped = %x20-21 / %x23-5B / ... */
		}
		if (c != '\\') {
			r->pos++;
			continue;
		}
		if (r->pos + 1 >= r->len) {
			return false;
		}
		c = r->s[r->pos + 1];
		if (c == 'u') {
			if (r->len - r->pos < 6) {
				return false;
			}
			for (int k = 2; k < 6; k++) {
				if (!ref_hex(r->s[r->pos + k])) {
					return false;
				}
			}
			r->pos += 6;
		} else if (c == '"' || c == '\\' || c == '/' || c == 'b' ||
			   c == 'f' || c == 'n' || c == 'r' || c == 't') {
			r->pos += 2;
		} else {
			return false;
		}
	}
	return false;
}

/* number = [ minus ] int [ frac ] [ exp ] (section 6) */
static bool ref_number(struct ref *r, int parent)
{
	int idx = ref_token(r, WT_JSON_NUMBER, r->pos, parent);

	if (ref_at(r, '-')) {
		r->pos++;
	}
	if (ref_at(r, '0')) {
		r->pos++;
	} else if (ref_digit(r)) {
		while (ref_digit(r)) {
			r->pos++;
		}
	} else {
		return false;
	}
	if (ref_at(r, '.')) {
		r->pos++;
		if (!ref_digit(r)) {
			return false;
		}
		while (ref_digit(r)) {
			r->pos++;
		}
	}
	if (ref_at(r, 'e') || ref_at(r, 'E')) {
		r->pos++;
		if (ref_at(r, '+') || ref_at(r, '-')) {
			r->pos++;
		}
		if (!ref_digit(r)) {
			return false;
		}
		while (ref_digit(r)) {
			r->pos++;
		}
	}
	r->t[idx].end = r->pos;
	return true;
}

static bool ref_literal(struct ref *r, int parent, const char *word,
			wt_jtype type)
{
	size_t n = strlen(word);
	int idx;

	if (r->len - r->pos < n || memcmp(r->s + r->pos, word, n) != 0) {
		return false;
	}
	idx = ref_token(r, type, r->pos, parent);
	r->pos += n;
	r->t[idx].end = r->pos;
	return true;
}

static bool ref_value(struct ref *r, int parent, int depth);

/* object and array (sections 4 and 5) */
static bool ref_container(struct ref *r, int parent, int depth, bool obj)
{
	unsigned char close = obj ? '}' : ']';
	int idx;

	if (depth >= WT_JSON_MAX_DEPTH) {
		return false;
	}
	idx = ref_token(r, obj ? WT_JSON_OBJECT : WT_JSON_ARRAY, r->pos,
			parent);
	r->pos++;
	ref_ws(r);
	if (!ref_at(r, close)) {
		for (;;) {
			ref_ws(r);
			if (obj) {
				if (!ref_at(r, '"') || !ref_string(r, idx)) {
					return false;
				}
				ref_ws(r);
				if (!ref_at(r, ':')) {
					return false;
				}
				r->pos++;
			}
			if (!ref_value(r, idx, depth + 1)) {
				return false;
			}
			r->t[idx].size++;
			ref_ws(r);
			if (ref_at(r, ',')) {
				r->pos++;
				continue;
			}
			if (!ref_at(r, close)) {
				return false;
			}
			break;
		}
	}
	r->pos++;
	r->t[idx].end = r->pos;
	r->t[idx].next = r->n;
	return true;
}

static bool ref_value(struct ref *r, int parent, int depth)
{
	ref_ws(r);
	if (r->pos >= r->len) {
		return false;
	}
	switch (r->s[r->pos]) {
	case '{':
		return ref_container(r, parent, depth, true);
	case '[':
		return ref_container(r, parent, depth, false);
	case '"':
		return ref_string(r, parent);
	case 't':
		return ref_literal(r, parent, "true", WT_JSON_TRUE);
	case 'f':
		return ref_literal(r, parent, "false", WT_JSON_FALSE);
	case 'n':
		return ref_literal(r, parent, "null", WT_JSON_NULL);
	default:
		return ref_number(r, parent);
	}
}

/* JSON-text = ws value ws (section 2); returns tokens or -1. */
static int ref_parse(const uint8_t *s, size_t len, wt_jtok *t)
{
	struct ref r = {s, len, 0, t, 0};

	if (!ref_value(&r, -1, 0)) {
		return -1;
	}
	ref_ws(&r);
	return r.pos == len ? r.n : -1;
}

/* Unescape as section 7 describes; a \uD8xx\uDCxx pair is one code point,
 * a lone surrogate is written as its 3-byte form, as the library does. */
static size_t ref_unescape(const char *js, const wt_jtok *t, char *out)
{
	size_t i = t->start, o = 0;

	while (i < t->end) {
		unsigned long cp;
		char c = js[i];

		if (c != '\\') {
			out[o++] = c;
			i++;
			continue;
		}
		c = js[i + 1];
		i += 2;
		switch (c) {
		case 'b':
			out[o++] = '\b';
			continue;
		case 'f':
			out[o++] = '\f';
			continue;
		case 'n':
			out[o++] = '\n';
			continue;
		case 'r':
			out[o++] = '\r';
			continue;
		case 't':
			out[o++] = '\t';
			continue;
		case 'u':
			break;
		default:
			out[o++] = c;
			continue;
		}
		cp = strtoul(
			(char[5]){js[i], js[i + 1], js[i + 2], js[i + 3], 0},
			NULL, 16);
		i += 4;
		if (cp >= 0xd800 && cp <= 0xdbff && t->end - i >= 6 &&
		    js[i] == '\\' && js[i + 1] == 'u') {
			unsigned long lo =
				strtoul((char[5]){js[i + 2], js[i + 3],
						  js[i + 4], js[i + 5], 0},
					NULL, 16);

			if (lo >= 0xdc00 && lo <= 0xdfff) {
				cp = 0x10000 + ((cp - 0xd800) << 10) +
				     (lo - 0xdc00);
				i += 6;
			}
		}
		/* RFC 3629 section 3 */
		if (cp < 0x80) {
			out[o++] = (char)cp;
		} else if (cp < 0x800) {
			out[o++] = (char)(0xc0 | cp >> 6);
			out[o++] = (char)(0x80 | (cp & 0x3f));
		} else if (cp < 0x10000) {
			out[o++] = (char)(0xe0 | cp >> 12);
			out[o++] = (char)(0x80 | ((cp >> 6) & 0x3f));
			out[o++] = (char)(0x80 | (cp & 0x3f));
		} else {
			out[o++] = (char)(0xf0 | cp >> 18);
			out[o++] = (char)(0x80 | ((cp >> 12) & 0x3f));
			out[o++] = (char)(0x80 | ((cp >> 6) & 0x3f));
			out[o++] = (char)(0x80 | (cp & 0x3f));
		}
	}
	return o;
}

/* ------------------------------------------------------------------ */
/* Checks of the library's tokens                                      */

static bool is_container(const wt_jtok *t)
{
	return t->type == WT_JSON_OBJECT || t->type == WT_JSON_ARRAY;
}

/* The tree on its own: indexes, byte ranges, sizes. */
static void check_tree(const wt_jtok *t, int n, size_t len)
{
	FUZZ_CHECK(t[0].parent == -1 && t[0].next == n,
		   "top token: parent %d next %d of %d", t[0].parent, t[0].next,
		   n);
	for (int i = 0; i < n; i++) {
		const wt_jtok *p;
		int k, prev = -1, children = 0;

		FUZZ_CHECK(t[i].next > i && t[i].next <= n,
			   "token %d: next %d of %d", i, t[i].next, n);
		FUZZ_CHECK(t[i].start <= t[i].end && t[i].end <= len,
			   "token %d: bytes %zu..%zu of %zu", i, t[i].start,
			   t[i].end, len);
		if (i > 0) {
			FUZZ_CHECK(t[i].parent >= 0 && t[i].parent < i,
				   "token %d: parent %d", i, t[i].parent);
			p = &t[t[i].parent];
			FUZZ_CHECK(is_container(p),
				   "token %d: parent %d is "
				   "no container",
				   i, t[i].parent);
			FUZZ_CHECK(t[i].next <= p->next,
				   "token %d: subtree ends at %d, after its "
				   "parent's at %d",
				   i, t[i].next, p->next);
			/* a child lies strictly inside its parent's brackets
			 * (a string's bytes start after its quote) */
			FUZZ_CHECK(t[i].start > p->start && t[i].end < p->end,
				   "token %d: bytes %zu..%zu outside parent "
				   "%d's %zu..%zu",
				   i, t[i].start, t[i].end, t[i].parent,
				   p->start, p->end);
		}
		if (!is_container(&t[i])) {
			FUZZ_CHECK(t[i].next == i + 1 && t[i].size == 0,
				   "scalar %d: next %d size %d", i, t[i].next,
				   t[i].size);
			continue;
		}
		for (k = i + 1; k < t[i].next; k = t[k].next) {
			FUZZ_CHECK(t[k].parent == i,
				   "token %d in %d's subtree has parent %d", k,
				   i, t[k].parent);
			if (t[i].type == WT_JSON_OBJECT && children % 2 == 0) {
				FUZZ_CHECK(t[k].type == WT_JSON_STRING,
					   "member name %d is no string", k);
			}
			/* siblings in order, a separator apart */
			FUZZ_CHECK(prev < 0 || t[prev].end < t[k].start,
				   "token %d starts at %zu, before sibling "
				   "%d ends at %zu",
				   k, t[k].start, prev, t[prev].end);
			prev = k;
			children++;
		}
		FUZZ_CHECK(k == t[i].next, "children of %d end at %d, not %d",
			   i, k, t[i].next);
		FUZZ_CHECK(children == (t[i].type == WT_JSON_OBJECT
						? 2 * t[i].size
						: t[i].size),
			   "container %d: size %d, %d children", i, t[i].size,
			   children);
	}
}

/* Accessors against the tree. */
static void check_access(const char *js, const wt_jtok *t, int n)
{
	for (int i = 0; i < n; i++) {
		int ok = 1;
		double v;

		FUZZ_CHECK(wt_jsonp_true(&t[i]) == (t[i].type == WT_JSON_TRUE),
			   "wt_jsonp_true(%d)", i);
		v = wt_jsonp_number(js, &t[i], &ok);
		if (t[i].type != WT_JSON_NUMBER) {
			FUZZ_CHECK(ok == -EINVAL && v == 0,
				   "number of non-number %d", i);
		} else if (t[i].end - t[i].start < 64) {
			/*
			 * Longer numbers are valid JSON but the reader gives
			 * up on them (its buffer is 64 bytes): reported to
			 * the module's owner, not checked here.
			 */
			char buf[64];
			size_t len = t[i].end - t[i].start;

			memcpy(buf, js + t[i].start, len);
			buf[len] = '\0';
			FUZZ_CHECK(ok == 0 && v == strtod(buf, NULL),
				   "number %d '%s': ok %d value %g", i, buf, ok,
				   v);
		}
		if (t[i].type == WT_JSON_ARRAY) {
			int k = i + 1;

			for (int e = 0; e < t[i].size; e++, k = t[k].next) {
				FUZZ_CHECK(wt_jsonp_element(t, i, e) == k,
					   "element %d of %d", e, i);
			}
			FUZZ_CHECK(wt_jsonp_element(t, i, t[i].size) == -1 &&
					   wt_jsonp_element(t, i, -1) == -1,
				   "element out of range of %d", i);
		} else {
			FUZZ_CHECK(wt_jsonp_element(t, i, 0) == -1,
				   "element of non-array %d", i);
		}
		if (t[i].type == WT_JSON_OBJECT) {
			int k = i + 1;

			for (int m = 0; m < t[i].size; m++, k = t[k + 1].next) {
				size_t klen = t[k].end - t[k].start;
				char *key = fuzz_strndup(
					(const uint8_t *)js + t[k].start, klen);
				int first = k;

				/* the first member with this name wins */
				for (int q = i + 1; q < k; q = t[q + 1].next) {
					if (t[q].end - t[q].start == klen &&
					    !memcmp(js + t[q].start, key,
						    klen)) {
						first = q;
						break;
					}
				}
				FUZZ_CHECK(wt_jsonp_member(js, t, i, key) ==
						   first + 1,
					   "member '%s' of %d", key, i);
				free(key);
			}
			/* a raw control character is never a member name */
			FUZZ_CHECK(wt_jsonp_member(js, t, i, "\x01") == -1,
				   "member of an impossible name in %d", i);
		} else {
			FUZZ_CHECK(wt_jsonp_member(js, t, i, "") == -1,
				   "member of non-object %d", i);
		}
		if (t[i].type == WT_JSON_STRING) {
			/* unescaping never lengthens a string */
			size_t room = t[i].end - t[i].start + 1;
			char *out = malloc(room), *want = malloc(room);
			size_t want_len;
			int got;

			if (!out || !want) {
				abort();
			}
			want_len = ref_unescape(js, &t[i], want);
			got = wt_jsonp_string(js, &t[i], out, room);
			FUZZ_CHECK(got >= 0 && (size_t)got == want_len &&
					   !memcmp(out, want, want_len) &&
					   out[got] == '\0',
				   "string %d: got %d, want %zu bytes", i, got,
				   want_len);
			/* one byte too few for the terminator */
			got = wt_jsonp_string(js, &t[i], out, want_len);
			FUZZ_CHECK(got == -ENOSPC, "string %d in %zu bytes: %d",
				   i, want_len, got);
			free(out);
			free(want);
		} else {
			char out[8];

			FUZZ_CHECK(wt_jsonp_string(js, &t[i], out,
						   sizeof(out)) == -EINVAL,
				   "string of non-string %d", i);
		}
	}
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	/* every value takes at least one byte: size + 1 tokens always do */
	int max = (int)size + 1;
	wt_jtok *toks = calloc((size_t)max, sizeof(*toks));
	wt_jtok *want = calloc((size_t)max, sizeof(*want));
	const char *js = (const char *)data;
	wt_error err;
	size_t at;
	int n, ref_n, again;

	if (!toks || !want || size > (1u << 24)) {
		abort();
	}
	wt_error_clear(&err);
	n = wt_jsonp_parse(js, size, toks, max, &err);
	ref_n = ref_parse(data, size, want);
	if (ref_n < 0) {
		FUZZ_CHECK(n == -EINVAL, "refused by RFC 8259, parse gave %d",
			   n);
		FUZZ_CHECK(err.code == n &&
				   sscanf(err.msg, "JSON: byte %zu:", &at) ==
					   1 &&
				   at <= size,
			   "error message '%s' (code %d)", err.msg, err.code);
		goto out;
	}
	FUZZ_CHECK(n == ref_n,
		   "valid by RFC 8259 with %d values, parse "
		   "gave %d (%s)",
		   ref_n, n, err.msg);
	for (int i = 0; i < n; i++) {
		FUZZ_CHECK(toks[i].type == want[i].type &&
				   toks[i].start == want[i].start &&
				   toks[i].end == want[i].end &&
				   toks[i].size == want[i].size &&
				   toks[i].parent == want[i].parent &&
				   toks[i].next == want[i].next,
			   "token %d: type %d bytes %zu..%zu size %d parent %d "
			   "next %d; want type %d bytes %zu..%zu size %d "
			   "parent %d next %d",
			   i, toks[i].type, toks[i].start, toks[i].end,
			   toks[i].size, toks[i].parent, toks[i].next,
			   want[i].type, want[i].start, want[i].end,
			   want[i].size, want[i].parent, want[i].next);
	}
	check_tree(toks, n, size);
	check_access(js, toks, n);

	/* exactly n tokens are enough, one fewer is -ENOSPC */
	again = wt_jsonp_parse(js, size, want, n, &err);
	FUZZ_CHECK(again == n && !memcmp(want, toks, (size_t)n * sizeof(*toks)),
		   "parse with %d tokens gave %d", n, again);
	if (n > 1) {
		again = wt_jsonp_parse(js, size, want, n - 1, &err);
		FUZZ_CHECK(again == -ENOSPC && err.code == -ENOSPC,
			   "parse with %d tokens for %d gave %d", n - 1, n,
			   again);
	}
out:
	free(toks);
	free(want);
	return 0;
}
