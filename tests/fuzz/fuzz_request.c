/*
 * fuzz_request.c - libFuzzer target for the control-request parser and the
 * reply writer (lib/wt_request.h).
 *
 * wt_request_parse() on the input must agree with a reference reading of
 * the "Request line syntax" and "Words" parts of wt_request.h, written here:
 * same verdict, and on success the same word and arguments.  Where that
 * text is silent (a quote inside an unquoted word, text straight after a
 * closing quote, more than 16 words) the reference refuses, as the parser
 * does; every such line is refused by the word rules anyway.
 *
 * Replies: the parser's error message, and the input itself, go through
 * wt_request_reply_error(); the reply must read back with the project's
 * JSON reader as {"ok":false,"error":TEXT}, be valid UTF-8, and give back
 * the text itself whenever that was valid UTF-8.  When the input is a JSON
 * value, wt_request_reply_ok() must wrap it into a readable reply.  Buffers
 * one byte too short give -ENOSPC and stay terminated.
 */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "fuzz_util.h"
#include "wt_config.h"
#include "wt_jsonparse.h"
#include "wt_offset.h"
#include "wt_request.h"

#define REPLY_MAX 8192

/* ------------------------------------------------------------------ */
/* Reference reading of a request line                                 */

struct ref_req {
	int word;      /* enum wt_req_word, -1 when refused */
	int n;	       /* words */
	char *w[1100]; /* the words, unescaped */
	char store[2200];
	long frames;
	bool capture;
};

static const char *const ref_names[] = {
	"status",    "ping",	  "open", "close",  "hold",   "flat",
	"reference", "calibrate", "set",  "get",    "config", "save",
	"load",	     "shutdown",  "help", "reload", "offset", "shape",
	"record", "autogain",
};

/* "zernike J AMOUNT_NM" at w[0..2]: J whole in [2, WT_OFFSET_NOLL_MAX],
 * AMOUNT a finite number within WT_REQUEST_AMOUNT_MAX_NM. */
static int ref_zernike(char **w)
{
	char *end;
	double v;
	long j = 0;

	if (strcmp(w[0], "zernike") || !w[1][0]) {
		return -EINVAL;
	}
	for (const char *p = w[1]; *p; p++) {
		if (*p < '0' || *p > '9') {
			return -EINVAL;
		}
		j = j > 100000000 ? j : j * 10 + (*p - '0');
	}
	if (j < 2 || j > WT_OFFSET_NOLL_MAX) {
		return -EINVAL;
	}
	v = strtod(w[2], &end);
	if (!w[2][0] || *end || !(fabs(v) <= WT_REQUEST_AMOUNT_MAX_NM)) {
		return -EINVAL;
	}
	return 0;
}
_Static_assert(sizeof(ref_names) / sizeof(ref_names[0]) == WT_REQ_COUNT,
	       "one name per word of wt_request.h");

/* Syntax only: line end, length, control characters, words.  0, -EINVAL
 * or -EMSGSIZE. */
static int ref_split(const uint8_t *s, size_t len, struct ref_req *r)
{
	size_t i = 0, out = 0;

	r->n = 0;
	if (len > 0 && s[len - 1] == '\n') {
		len--;
		if (len > 0 && s[len - 1] == '\r') {
			len--;
		}
	}
	if (len > WT_REQUEST_LINE_MAX) {
		return -EMSGSIZE;
	}
	for (i = 0; i < len; i++) {
		if ((s[i] < 0x20 && s[i] != '\t') || s[i] == 0x7f) {
			return -EINVAL;
		}
	}
	i = 0;
	for (;;) {
		while (i < len && (s[i] == ' ' || s[i] == '\t')) {
			i++;
		}
		if (i == len) {
			break;
		}
		r->w[r->n++] = r->store + out;
		if (s[i] == '"') {
			for (i++;; i++) {
				if (i == len) {
					return -EINVAL; /* not closed */
				}
				if (s[i] == '"') {
					i++;
					break;
				}
				if (s[i] == '\\') {
					if (i + 1 == len ||
					    (s[i + 1] != '"' &&
					     s[i + 1] != '\\')) {
						return -EINVAL;
					}
					i++;
				}
				r->store[out++] = (char)s[i];
			}
			if (i < len && s[i] != ' ' && s[i] != '\t') {
				return -EINVAL;
			}
		} else {
			for (; i < len && s[i] != ' ' && s[i] != '\t'; i++) {
				if (s[i] == '"') {
					return -EINVAL;
				}
				r->store[out++] = (char)s[i];
			}
		}
		r->store[out++] = '\0';
	}
	return r->n > 16 ? -EINVAL : 0;
}

/* A whole number in [lo, hi]: 0 or -EINVAL. */
static int ref_count(const char *s, long lo, long hi, long *out)
{
	long v = 0;

	if (!s[0]) {
		return -EINVAL;
	}
	for (const char *p = s; *p; p++) {
		if (*p < '0' || *p > '9') {
			return -EINVAL;
		}
		v = v > 100000000 ? v : v * 10 + (*p - '0');
	}
	*out = v;
	return v < lo || v > hi ? -EINVAL : 0;
}

/* The word rules; 0 or -EINVAL, with r->word, frames, capture set. */
static int ref_words(struct ref_req *r)
{
	const wt_option *o, *frames_opt;
	int args = r->n - 1;
	long v = 0;

	r->word = -1;
	r->frames = 0;
	r->capture = false;
	if (r->n == 0) {
		return -EINVAL;
	}
	for (int k = 0; k < WT_REQ_COUNT; k++) {
		if (!strcmp(r->w[0], ref_names[k])) {
			r->word = k;
		}
	}
	switch (r->word) {
	case -1:
		return -EINVAL;
	case WT_REQ_FLAT:
		if (args == 1 && strcmp(r->w[1], "capture")) {
			return -EINVAL;
		}
		r->capture = args == 1;
		return args <= 1 ? 0 : -EINVAL;
	case WT_REQ_REFERENCE:
		if (args == 0) {
			return 0;
		}
		if (args > 1 || !r->w[1][0]) {
			return -EINVAL;
		}
		for (const char *p = r->w[1]; *p; p++) {
			if (*p < '0' || *p > '9') {
				return -EINVAL;
			}
			v = v > 100000000 ? v : v * 10 + (*p - '0');
		}
		frames_opt = wt_option_get(WT_OPT_CALIB_REFERENCE_FRAMES);
		if (v < frames_opt->min || v > frames_opt->max) {
			return -EINVAL;
		}
		r->frames = v;
		return 0;
	case WT_REQ_SET:
	case WT_REQ_GET:
		if (args != (r->word == WT_REQ_SET ? 2 : 1)) {
			return -EINVAL;
		}
		o = wt_option_find(r->w[1]);
		if (!o) {
			return -EINVAL;
		}
		if (r->word == WT_REQ_GET) {
			return 0;
		}
		/* live options only; the value as config checks it */
		return o->live && !wt_option_check(o, r->w[2], NULL) ? 0
								     : -EINVAL;
	case WT_REQ_SAVE:
	case WT_REQ_LOAD:
		return args == 1 && r->w[1][0] ? 0 : -EINVAL;
	case WT_REQ_OFFSET:
		if (args == 0) {
			return 0;
		}
		if (args == 1) {
			return strcmp(r->w[1], "clear") ? -EINVAL : 0;
		}
		return args == 3 ? ref_zernike(r->w + 1) : -EINVAL;
	case WT_REQ_SHAPE:
		return args == 3 ? ref_zernike(r->w + 1) : -EINVAL;
	case WT_REQ_RECORD:
		if (args == 1) {
			return strcmp(r->w[1], "stop") ? -EINVAL : 0;
		}
		if (args != 2 || !r->w[2][0]) {
			return -EINVAL;
		}
		return ref_count(r->w[1], 1, 100000000, &r->frames);
	case WT_REQ_AUTOGAIN:
		if (args == 1 && !strcmp(r->w[1], "status")) {
			return 0;
		}
		if (args < 1 || args > 2 ||
		    (args == 2 && strcmp(r->w[2], "apply"))) {
			return -EINVAL;
		}
		return ref_count(r->w[1], 64, 65536, &r->frames);
	default:
		return args == 0 ? 0 : -EINVAL;
	}
}

/* ------------------------------------------------------------------ */
/* Replies                                                             */

/*
 * reply holds {"ok":false,"error":TEXT}: check it, and that TEXT is msg
 * when msg is valid UTF-8.
 */
static void check_error_reply(const char *reply, int len, const char *msg)
{
	static wt_jtok t[16];
	static char text[REPLY_MAX];
	int n, ok, err;

	FUZZ_CHECK(len > 0 && (size_t)len == strlen(reply),
		   "error reply length %d", len);
	FUZZ_CHECK(fuzz_utf8_valid((const unsigned char *)reply, (size_t)len),
		   "error reply is not UTF-8: %s", reply);
	n = wt_jsonp_parse(reply, (size_t)len, t, 16, NULL);
	FUZZ_CHECK(n == 5 && t[0].type == WT_JSON_OBJECT && t[0].size == 2,
		   "error reply is not a 2-member object (%d): %s", n, reply);
	ok = wt_jsonp_member(reply, t, 0, "ok");
	err = wt_jsonp_member(reply, t, 0, "error");
	FUZZ_CHECK(ok > 0 && t[ok].type == WT_JSON_FALSE && err > 0 &&
			   t[err].type == WT_JSON_STRING,
		   "error reply members: %s", reply);
	n = wt_jsonp_string(reply, &t[err], text, sizeof(text));
	FUZZ_CHECK(n >= 0, "error text does not unescape: %s", reply);
	if (fuzz_utf8_valid((const unsigned char *)msg, strlen(msg))) {
		FUZZ_CHECK((size_t)n == strlen(msg) && !strcmp(text, msg),
			   "error text '%s' came back as '%s'", msg, text);
	}
}

/* Write an error reply of msg, check it, and the too-short buffers. */
static void check_reply_error(const char *msg)
{
	static char buf[REPLY_MAX];
	int n, m;

	n = wt_request_reply_error(buf, sizeof(buf), msg);
	if (n == -ENOSPC) {
		/* {"ok":false,"error":""} is 23 bytes; escaping turns one
		 * byte into at most 6 (\u00XX) */
		FUZZ_CHECK(23 + 6 * strlen(msg) + 1 > sizeof(buf),
			   "reply of a %zu-byte text does not fit in %zu",
			   strlen(msg), sizeof(buf));
		return;
	}
	check_error_reply(buf, n, msg);
	/* exactly enough, and one byte short */
	m = wt_request_reply_error(buf, (size_t)n + 1, msg);
	FUZZ_CHECK(m == n, "reply in %d bytes gave %d", n + 1, m);
	m = wt_request_reply_error(buf, (size_t)n, msg);
	FUZZ_CHECK(m == -ENOSPC && strlen(buf) < (size_t)n,
		   "reply in %d bytes gave %d", n, m);
}

/* When text is one JSON value, the ok reply wraps it readably. */
static void check_reply_ok(const char *text, size_t len)
{
	static const char too_long[] = "{\"ok\":false,\"error\":\"reply too "
				       "long\"}";
	static wt_jtok t[REPLY_MAX];
	static char buf[REPLY_MAX];
	int n, res, ok;

	if (len + 32 > sizeof(buf) || strlen(text) != len ||
	    wt_jsonp_parse(text, len, t, REPLY_MAX, NULL) < 1) {
		return;
	}
	n = wt_request_reply_ok(buf, sizeof(buf), text);
	FUZZ_CHECK(n > 0 && (size_t)n == strlen(buf), "ok reply gave %d", n);
	FUZZ_CHECK(wt_jsonp_parse(buf, (size_t)n, t, REPLY_MAX, NULL) >= 3 &&
			   t[0].type == WT_JSON_OBJECT && t[0].size == 2,
		   "ok reply does not read back: %s", buf);
	ok = wt_jsonp_member(buf, t, 0, "ok");
	res = wt_jsonp_member(buf, t, 0, "result");
	FUZZ_CHECK(ok > 0 && t[ok].type == WT_JSON_TRUE && res > 0,
		   "ok reply members: %s", buf);
	/* one byte short: -ENOSPC and, when it fits, the fallback error */
	res = wt_request_reply_ok(buf, (size_t)n, text);
	FUZZ_CHECK(res == -ENOSPC, "ok reply in %d bytes gave %d", n, res);
	if ((size_t)n > sizeof(too_long) - 1) {
		FUZZ_CHECK(!strcmp(buf, too_long), "fallback reply: %s", buf);
	}
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static struct ref_req r;
	static wt_request req;
	const char *line = (const char *)data;
	wt_error err;
	char *text;
	int rc, want;

	if (size > 4 * WT_REQUEST_LINE_MAX) {
		return 0;
	}
	memset(&err, 0x5a, sizeof(err));
	err.msg[sizeof(err.msg) - 1] = '\0';
	rc = wt_request_parse(line, size, &req, &err);
	want = ref_split(data, size, &r);
	if (want == 0) {
		want = ref_words(&r);
	}
	FUZZ_CHECK(rc == want, "parse gave %d (%s), the syntax says %d", rc,
		   rc ? err.msg : "", want);
	if (rc != 0) {
		FUZZ_CHECK(err.code == rc && err.msg[0] != '\0',
			   "refusal %d without its reason (code %d)", rc,
			   err.code);
		check_reply_error(err.msg);
	} else {
		FUZZ_CHECK(err.code == 0, "accepted with error code %d",
			   err.code);
		FUZZ_CHECK(
			(int)req.word == r.word &&
				!strcmp(wt_request_word_name(req.word), r.w[0]),
			"word %d, want %d '%s'", req.word, r.word, r.w[0]);
		FUZZ_CHECK(req.frames == r.frames && req.capture == r.capture,
			   "frames %ld capture %d, want %ld %d", req.frames,
			   req.capture, r.frames, r.capture);
		if (req.word == WT_REQ_SET || req.word == WT_REQ_GET) {
			FUZZ_CHECK(req.option == wt_option_find(r.w[1]) &&
					   !strcmp(req.key, r.w[1]),
				   "option '%s', want '%s'", req.key, r.w[1]);
		} else {
			FUZZ_CHECK(req.option == NULL && req.key[0] == '\0',
				   "option set for word %d", req.word);
		}
		if (req.word == WT_REQ_SET) {
			FUZZ_CHECK(!strcmp(req.value, r.w[2]),
				   "value '%s', want '%s'", req.value, r.w[2]);
		} else {
			FUZZ_CHECK(req.value[0] == '\0', "value for word %d",
				   req.word);
		}
		if (req.word == WT_REQ_SAVE || req.word == WT_REQ_LOAD) {
			FUZZ_CHECK(!strcmp(req.path, r.w[1]),
				   "path '%s', want '%s'", req.path, r.w[1]);
		} else if (req.word == WT_REQ_RECORD && r.n == 3) {
			/* record N FILE: the file is the second argument */
			FUZZ_CHECK(!strcmp(req.path, r.w[2]),
				   "record path '%s', want '%s'", req.path,
				   r.w[2]);
		} else {
			FUZZ_CHECK(req.path[0] == '\0', "path for word %d",
				   req.word);
		}
	}

	/* the input itself as an error text, and as a result */
	text = fuzz_strndup(data, size);
	check_reply_error(text);
	check_reply_ok(text, size);
	free(text);
	return 0;
}
