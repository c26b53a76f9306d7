/* wt_jsonparse.c - strict recursive-descent JSON reader (RFC 8259). */
#include "wt_jsonparse.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>

typedef struct parser {
	const char *js;
	size_t len;
	size_t pos;
	wt_jtok *toks;
	int max;
	int n;
	wt_error *err;
} parser;

static int fail(parser *p, const char *what)
{
	return wt_error_set(p->err, -EINVAL, "JSON: byte %zu: %s", p->pos, what);
}

static void skip_ws(parser *p)
{
	while (p->pos < p->len) {
		char c = p->js[p->pos];

		if (c != ' ' && c != '\t' && c != '\n' && c != '\r') {
			break;
		}
		p->pos++;
	}
}

static int new_token(parser *p, wt_jtype type, int parent)
{
	wt_jtok *t;

	if (p->n >= p->max) {
		return wt_error_set(p->err, -ENOSPC,
				    "JSON: more than %d values", p->max);
	}
	t = &p->toks[p->n];
	t->type = type;
	t->start = p->pos;
	t->end = p->pos;
	t->size = 0;
	t->parent = parent;
	t->next = p->n + 1;
	return p->n++;
}

static int hexval(char c)
{
	if (c >= '0' && c <= '9') {
		return c - '0';
	}
	if (c >= 'a' && c <= 'f') {
		return c - 'a' + 10;
	}
	if (c >= 'A' && c <= 'F') {
		return c - 'A' + 10;
	}
	return -1;
}

static int parse_string(parser *p, int parent)
{
	int idx;

	p->pos++; /* opening quote */
	idx = new_token(p, WT_JSON_STRING, parent);
	if (idx < 0) {
		return idx;
	}
	while (p->pos < p->len) {
		unsigned char c = (unsigned char)p->js[p->pos];

		if (c == '"') {
			p->toks[idx].end = p->pos;
			p->pos++;
			return idx;
		}
		if (c < 0x20) {
			return fail(p, "control character inside a string");
		}
		if (c == '\\') {
			p->pos++;
			if (p->pos >= p->len) {
				break;
			}
			c = (unsigned char)p->js[p->pos];
			if (c == 'u') {
				for (int k = 1; k <= 4; k++) {
					if (p->pos + k >= p->len ||
					    hexval(p->js[p->pos + k]) < 0) {
						return fail(p, "bad \\u escape");
					}
				}
				p->pos += 4;
			} else if (c == '\0' || !strchr("\"\\/bfnrt", c)) {
				return fail(p, "unknown escape");
			}
		}
		p->pos++;
	}
	return fail(p, "unterminated string");
}

static int parse_number(parser *p, int parent)
{
	const char *s = p->js;
	size_t i = p->pos;
	int idx = new_token(p, WT_JSON_NUMBER, parent);

	if (idx < 0) {
		return idx;
	}
	if (i < p->len && s[i] == '-') {
		i++;
	}
	if (i < p->len && s[i] == '0') {
		i++;
	} else if (i < p->len && s[i] >= '1' && s[i] <= '9') {
		while (i < p->len && s[i] >= '0' && s[i] <= '9') {
			i++;
		}
	} else {
		p->pos = i;
		return fail(p, "malformed number");
	}
	if (i < p->len && s[i] == '.') {
		i++;
		if (i >= p->len || s[i] < '0' || s[i] > '9') {
			p->pos = i;
			return fail(p, "digit expected after '.'");
		}
		while (i < p->len && s[i] >= '0' && s[i] <= '9') {
			i++;
		}
	}
	if (i < p->len && (s[i] == 'e' || s[i] == 'E')) {
		i++;
		if (i < p->len && (s[i] == '+' || s[i] == '-')) {
			i++;
		}
		if (i >= p->len || s[i] < '0' || s[i] > '9') {
			p->pos = i;
			return fail(p, "digit expected in exponent");
		}
		while (i < p->len && s[i] >= '0' && s[i] <= '9') {
			i++;
		}
	}
	p->pos = i;
	p->toks[idx].end = i;
	return idx;
}

static int parse_literal(parser *p, int parent, const char *word,
			 wt_jtype type)
{
	size_t n = strlen(word);
	int idx;

	if (p->len - p->pos < n || memcmp(p->js + p->pos, word, n) != 0) {
		return fail(p, "unexpected character");
	}
	idx = new_token(p, type, parent);
	if (idx < 0) {
		return idx;
	}
	p->pos += n;
	p->toks[idx].end = p->pos;
	return idx;
}

static int parse_value(parser *p, int parent, int depth);

/* Objects and arrays share one loop; `close` is '}' or ']'. */
static int parse_container(parser *p, int parent, int depth, char close)
{
	int is_obj = close == '}';
	int idx = new_token(p, is_obj ? WT_JSON_OBJECT : WT_JSON_ARRAY, parent);
	int rc;

	if (idx < 0) {
		return idx;
	}
	if (depth >= WT_JSON_MAX_DEPTH) {
		return fail(p, "nested too deeply");
	}
	p->pos++;
	skip_ws(p);
	if (p->pos < p->len && p->js[p->pos] == close) {
		p->pos++;
		goto done;
	}
	for (;;) {
		skip_ws(p);
		if (is_obj) {
			if (p->pos >= p->len || p->js[p->pos] != '"') {
				return fail(p, "member name expected");
			}
			rc = parse_string(p, idx);
			if (rc < 0) {
				return rc;
			}
			skip_ws(p);
			if (p->pos >= p->len || p->js[p->pos] != ':') {
				return fail(p, "':' expected");
			}
			p->pos++;
		}
		rc = parse_value(p, idx, depth + 1);
		if (rc < 0) {
			return rc;
		}
		p->toks[idx].size++;
		skip_ws(p);
		if (p->pos < p->len && p->js[p->pos] == ',') {
			p->pos++;
			continue;
		}
		if (p->pos < p->len && p->js[p->pos] == close) {
			p->pos++;
			break;
		}
		return fail(p, is_obj ? "',' or '}' expected"
				      : "',' or ']' expected");
	}
done:
	p->toks[idx].end = p->pos;
	p->toks[idx].next = p->n;
	return idx;
}

static int parse_value(parser *p, int parent, int depth)
{
	skip_ws(p);
	if (p->pos >= p->len) {
		return fail(p, "value expected");
	}
	switch (p->js[p->pos]) {
	case '{':
		return parse_container(p, parent, depth, '}');
	case '[':
		return parse_container(p, parent, depth, ']');
	case '"':
		return parse_string(p, parent);
	case 't':
		return parse_literal(p, parent, "true", WT_JSON_TRUE);
	case 'f':
		return parse_literal(p, parent, "false", WT_JSON_FALSE);
	case 'n':
		return parse_literal(p, parent, "null", WT_JSON_NULL);
	default:
		return parse_number(p, parent);
	}
}

int wt_jsonp_parse(const char *js, size_t len, wt_jtok *toks, int max_tokens,
		   wt_error *err)
{
	parser p = {js, len, 0, toks, max_tokens, 0, err};
	int rc;

	if (!js || !toks || max_tokens < 1) {
		return wt_error_set(err, -EINVAL, "JSON: no input");
	}
	rc = parse_value(&p, -1, 0);
	if (rc < 0) {
		return rc;
	}
	skip_ws(&p);
	if (p.pos != len) {
		return fail(&p, "text after the value");
	}
	return p.n;
}

int wt_jsonp_member(const char *js, const wt_jtok *toks, int obj,
		    const char *key)
{
	size_t klen = strlen(key);
	int i;

	if (obj < 0 || toks[obj].type != WT_JSON_OBJECT) {
		return -1;
	}
	i = obj + 1;
	for (int m = 0; m < toks[obj].size; m++) {
		const wt_jtok *k = &toks[i];
		int v = i + 1;

		/* Member names with escapes never match our plain keys. */
		if (k->end - k->start == klen &&
		    memcmp(js + k->start, key, klen) == 0) {
			return v;
		}
		i = toks[v].next;
	}
	return -1;
}

int wt_jsonp_element(const wt_jtok *toks, int arr, int k)
{
	int i;

	if (arr < 0 || toks[arr].type != WT_JSON_ARRAY || k < 0 ||
	    k >= toks[arr].size) {
		return -1;
	}
	i = arr + 1;
	while (k-- > 0) {
		i = toks[i].next;
	}
	return i;
}

/* Append code point cp as UTF-8; returns bytes written or -ENOSPC. */
static int put_utf8(char *out, size_t room, unsigned long cp)
{
	unsigned char b[4];
	int n;

	if (cp < 0x80) {
		b[0] = (unsigned char)cp;
		n = 1;
	} else if (cp < 0x800) {
		b[0] = (unsigned char)(0xC0 | (cp >> 6));
		b[1] = (unsigned char)(0x80 | (cp & 0x3F));
		n = 2;
	} else if (cp < 0x10000) {
		b[0] = (unsigned char)(0xE0 | (cp >> 12));
		b[1] = (unsigned char)(0x80 | ((cp >> 6) & 0x3F));
		b[2] = (unsigned char)(0x80 | (cp & 0x3F));
		n = 3;
	} else {
		b[0] = (unsigned char)(0xF0 | (cp >> 18));
		b[1] = (unsigned char)(0x80 | ((cp >> 12) & 0x3F));
		b[2] = (unsigned char)(0x80 | ((cp >> 6) & 0x3F));
		b[3] = (unsigned char)(0x80 | (cp & 0x3F));
		n = 4;
	}
	if ((size_t)n >= room) {
		return -ENOSPC;
	}
	memcpy(out, b, (size_t)n);
	return n;
}

static unsigned long hex4(const char *s)
{
	unsigned long v = 0;

	for (int k = 0; k < 4; k++) {
		v = v * 16 + (unsigned long)hexval(s[k]);
	}
	return v;
}

int wt_jsonp_string(const char *js, const wt_jtok *t, char *out, size_t out_len)
{
	size_t o = 0;

	if (t->type != WT_JSON_STRING) {
		return -EINVAL;
	}
	if (out_len == 0) {
		return -ENOSPC;
	}
	for (size_t i = t->start; i < t->end; i++) {
		char c = js[i];
		unsigned long cp;
		int n;

		if (c != '\\') {
			if (o + 1 >= out_len) {
				return -ENOSPC;
			}
			out[o++] = c;
			continue;
		}
		c = js[++i];
		switch (c) {
		case 'b':
			c = '\b';
			break;
		case 'f':
			c = '\f';
			break;
		case 'n':
			c = '\n';
			break;
		case 'r':
			c = '\r';
			break;
		case 't':
			c = '\t';
			break;
		case 'u':
			cp = hex4(js + i + 1);
			i += 4;
			/* A surrogate pair makes one code point. */
			if (cp >= 0xD800 && cp < 0xDC00 && i + 6 < t->end &&
			    js[i + 1] == '\\' && js[i + 2] == 'u') {
				unsigned long lo = hex4(js + i + 3);

				if (lo >= 0xDC00 && lo < 0xE000) {
					cp = 0x10000 + ((cp - 0xD800) << 10) +
					     (lo - 0xDC00);
					i += 6;
				}
			}
			n = put_utf8(out + o, out_len - o, cp);
			if (n < 0) {
				return n;
			}
			o += (size_t)n;
			continue;
		default:
			break; /* '"', '\\' and '/' stand for themselves */
		}
		if (o + 1 >= out_len) {
			return -ENOSPC;
		}
		out[o++] = c;
	}
	out[o] = '\0';
	return (int)o;
}

double wt_jsonp_number(const char *js, const wt_jtok *t, int *ok)
{
	char buf[64];
	size_t n = t->end - t->start;

	if (t->type != WT_JSON_NUMBER || n >= sizeof(buf)) {
		if (ok) {
			*ok = -EINVAL;
		}
		return 0;
	}
	memcpy(buf, js + t->start, n);
	buf[n] = '\0';
	if (ok) {
		*ok = 0;
	}
	return strtod(buf, NULL);
}

bool wt_jsonp_true(const wt_jtok *t)
{
	return t->type == WT_JSON_TRUE;
}
