/* wt_request.c - control request parser and reply writer (see wt_request.h). */
#include "wt_request.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "wt_json.h"
#include "wt_offset.h"

/** Most words in one request (the longest request has three). */
#define MAX_WORDS 16

/** Longest piece of user text echoed in an error message. */
#define ECHO "%.64s"

static const char *const state_names[WT_STATE_COUNT] = {
	[WT_STATE_OPEN] = "open",     [WT_STATE_CALIBRATING] = "calibrating",
	[WT_STATE_CLOSED] = "closed", [WT_STATE_HELD] = "held",
	[WT_STATE_FAULT] = "fault",
};

const char *wt_state_name(int state)
{
	if (state < 0 || state >= WT_STATE_COUNT) {
		return "?";
	}
	return state_names[state];
}

struct word_def {
	const char *name;
	int min_args, max_args;
	const char *usage;
	const char *help;
};

static const struct word_def words[WT_REQ_COUNT] = {
	[WT_REQ_STATUS] = {"status", 0, 0, "status",
			   "state, counters, rates, latency and calibration"},
	[WT_REQ_PING] = {"ping", 0, 0, "ping", "answers \"pong\""},
	[WT_REQ_OPEN] = {"open", 0, 0, "open",
			 "open the loop: mirror to its flat (stops a "
			 "calibration, leaves a fault)"},
	[WT_REQ_CLOSE] = {"close", 0, 0, "close",
			  "close the loop (needs a control matrix)"},
	[WT_REQ_HOLD] = {"hold", 0, 0, "hold",
			 "freeze the command sent to the mirror"},
	[WT_REQ_FLAT] = {"flat", 0, 1, "flat [capture]",
			 "mirror back to its flat; with capture: the last "
			 "command becomes the flat"},
	[WT_REQ_REFERENCE] = {"reference", 0, 1, "reference [FRAMES]",
			      "measure the reference slopes with the mirror "
			      "flat (from open)"},
	[WT_REQ_CALIBRATE] = {"calibrate", 0, 1, "calibrate [single|hadamard]",
			      "measure the interaction matrix and build the "
			      "control matrix (from open)"},
	[WT_REQ_SET] = {"set", 2, 2, "set SECTION.KEY VALUE",
			"change a live option"},
	[WT_REQ_GET] = {"get", 1, 1, "get SECTION.KEY",
			"the value of an option"},
	[WT_REQ_CONFIG] = {"config", 0, 0, "config",
			   "every option and its value"},
	[WT_REQ_SAVE] = {"save", 1, 1, "save FILE",
			 "write the calibration to an HDF5 file"},
	[WT_REQ_LOAD] = {"load", 1, 1, "load FILE",
			 "read and install a calibration file"},
	[WT_REQ_SHUTDOWN] = {"shutdown", 0, 0, "shutdown",
			     "send the flat and stop the daemon"},
	[WT_REQ_HELP] = {"help", 0, 0, "help", "this list"},
	[WT_REQ_RELOAD] = {"reload", 0, 0, "reload",
			   "re-read the configuration file, apply changed "
			   "live options"},
	[WT_REQ_OFFSET] = {"offset", 0, 3,
			   "offset [clear | zernike J AMOUNT_NM]",
			   "show, clear or add to the aberration the closed "
			   "loop holds"},
	[WT_REQ_SHAPE] = {"shape", 3, 3, "shape zernike J AMOUNT_NM",
			  "open loop: put the mirror in that shape (held)"},
	[WT_REQ_RECORD] = {"record", 1, 2, "record N FILE | record stop",
			   "record the next N frames to an HDF5 file"},
	[WT_REQ_AUTOGAIN] = {"autogain", 1, 2,
			     "autogain FRAMES [apply] | autogain status",
			     "choose per-mode gains from FRAMES frames "
			     "(apply: install them)"},
};

const char *wt_request_word_name(enum wt_req_word word)
{
	if ((unsigned)word >= WT_REQ_COUNT) {
		return "?";
	}
	return words[word].name;
}

const char *wt_request_usage(enum wt_req_word word)
{
	if ((unsigned)word >= WT_REQ_COUNT) {
		return "?";
	}
	return words[word].usage;
}

const char *wt_request_help(enum wt_req_word word)
{
	if ((unsigned)word >= WT_REQ_COUNT) {
		return "?";
	}
	return words[word].help;
}

/*
 * Split line[0..len) into words, unescaped into store (len + MAX_WORDS
 * bytes at least), one terminated string each.  Returns the number of
 * words or a negative code with the reason in *err.
 */
static int split_words(const char *line, size_t len, char *store, char **word,
		       wt_error *err)
{
	size_t i = 0, out = 0;
	int n = 0;

	while (i < len) {
		char c = line[i];

		if (c == ' ' || c == '\t') {
			i++;
			continue;
		}
		if (n == MAX_WORDS) {
			return wt_error_set(err, -EINVAL,
					    "too many words (at most %d)",
					    MAX_WORDS);
		}
		word[n++] = store + out;
		if (c == '"') {
			size_t start = i++;
			bool closed = false;

			while (i < len) {
				c = line[i];
				if (c == '"') {
					closed = true;
					i++;
					break;
				}
				if (c == '\\') {
					if (i + 1 < len &&
					    (line[i + 1] == '"' ||
					     line[i + 1] == '\\')) {
						store[out++] = line[i + 1];
						i += 2;
						continue;
					}
					return wt_error_set(
						err, -EINVAL,
						"bad escape in the quoted word "
						"at "
						"byte %zu (only \\\" and \\\\)",
						i + 1);
				}
				store[out++] = c;
				i++;
			}
			if (!closed) {
				return wt_error_set(err, -EINVAL,
						    "quote opened at byte %zu "
						    "is not closed",
						    start + 1);
			}
			if (i < len && line[i] != ' ' && line[i] != '\t') {
				return wt_error_set(err, -EINVAL,
						    "blank expected after the "
						    "quoted word at byte %zu",
						    i + 1);
			}
		} else {
			while (i < len && line[i] != ' ' && line[i] != '\t') {
				if (line[i] == '"') {
					return wt_error_set(
						err, -EINVAL,
						"quote inside a word at byte "
						"%zu",
						i + 1);
				}
				store[out++] = line[i++];
			}
		}
		store[out++] = '\0';
	}
	return n;
}

/* A whole decimal number in [lo, hi] (digits only, no sign). */
static int parse_count(const char *what, const char *s, double lo, double hi,
		       long *out, wt_error *err)
{
	long v = 0;
	size_t i;

	if (s[0] == '\0') {
		return wt_error_set(err, -EINVAL,
				    "%s: empty, a whole number "
				    "is needed",
				    what);
	}
	for (i = 0; s[i]; i++) {
		if (s[i] < '0' || s[i] > '9') {
			return wt_error_set(err, -EINVAL,
					    "%s: '" ECHO "' is not a whole "
					    "number",
					    what, s);
		}
		if (v > (1L << 40)) {
			return wt_error_set(err, -EINVAL,
					    "%s: " ECHO " is out of range "
					    "[%.0f, %.0f]",
					    what, s, lo, hi);
		}
		v = v * 10 + (s[i] - '0');
	}
	if ((double)v < lo || (double)v > hi) {
		return wt_error_set(err, -EINVAL,
				    "%s: %ld is out of range [%.0f, %.0f]",
				    what, v, lo, hi);
	}
	*out = v;
	return 0;
}

/* "zernike J AMOUNT_NM" at word[0..2] into req->noll, req->amount_nm. */
static int parse_zernike(char **word, const char *usage, wt_request *req,
			 wt_error *err)
{
	char *end = NULL;
	long j;
	double v;
	int rc;

	if (strcmp(word[0], "zernike") != 0) {
		return wt_error_set(err, -EINVAL,
				    "unknown argument '" ECHO "'; usage: %s",
				    word[0], usage);
	}
	rc = parse_count("J (Noll index)", word[1], 2, WT_OFFSET_NOLL_MAX, &j,
			 err);
	if (rc < 0) {
		return rc;
	}
	errno = 0;
	v = strtod(word[2], &end);
	if (word[2][0] == '\0' || *end != '\0' || errno == ERANGE ||
	    !isfinite(v)) {
		return wt_error_set(err, -EINVAL,
				    "AMOUNT_NM: '" ECHO "' is not a number",
				    word[2]);
	}
	if (fabs(v) > WT_REQUEST_AMOUNT_MAX_NM) {
		return wt_error_set(
			err, -EINVAL, "AMOUNT_NM: %g is out of range [%g, %g]",
			v, -WT_REQUEST_AMOUNT_MAX_NM, WT_REQUEST_AMOUNT_MAX_NM);
	}
	req->noll = (int)j;
	req->amount_nm = v;
	return 0;
}

static int find_option(const char *key, const wt_option **out, wt_error *err)
{
	const wt_option *o = NULL;

	if (!strchr(key, '.')) {
		return wt_error_set(err, -EINVAL,
				    "'" ECHO "' is not SECTION.KEY", key);
	}
	o = wt_option_find(key);
	if (!o) {
		return wt_error_set(err, -EINVAL, "unknown option '" ECHO "'",
				    key);
	}
	*out = o;
	return 0;
}

static int copy_arg(char *dst, size_t cap, const char *src, const char *what,
		    wt_error *err)
{
	size_t n = strlen(src);

	if (n + 1 > cap) {
		return wt_error_set(err, -EINVAL, "%s is too long", what);
	}
	memcpy(dst, src, n + 1);
	return 0;
}

int wt_request_parse(const char *line, size_t len, wt_request *req,
		     wt_error *err)
{
	char store[WT_REQUEST_LINE_MAX + MAX_WORDS + 1];
	char *word[MAX_WORDS];
	const struct word_def *def = NULL;
	const wt_option *o = NULL;
	int n, nargs, rc;
	size_t i;
	unsigned w;

	if (!req || (!line && len > 0)) {
		return wt_error_set(err, -EINVAL, "no request");
	}
	memset(req, 0, sizeof(*req));
	if (len > 0 && line[len - 1] == '\n') {
		len--;
		if (len > 0 && line[len - 1] == '\r') {
			len--;
		}
	}
	if (len > WT_REQUEST_LINE_MAX) {
		return wt_error_set(err, -EMSGSIZE,
				    "request of %zu bytes is longer than %d "
				    "bytes",
				    len, WT_REQUEST_LINE_MAX);
	}
	for (i = 0; i < len; i++) {
		unsigned char c = (unsigned char)line[i];

		if ((c < 0x20 && c != '\t') || c == 0x7f) {
			return wt_error_set(err, -EINVAL,
					    "control character 0x%02x at byte "
					    "%zu",
					    c, i + 1);
		}
	}
	n = split_words(line, len, store, word, err);
	if (n < 0) {
		return n;
	}
	if (n == 0) {
		return wt_error_set(err, -EINVAL, "empty request (try help)");
	}
	for (w = 0; w < WT_REQ_COUNT; w++) {
		if (strcmp(word[0], words[w].name) == 0) {
			def = &words[w];
			break;
		}
	}
	if (!def) {
		return wt_error_set(err, -EINVAL,
				    "unknown word '" ECHO "' (try help)",
				    word[0]);
	}
	req->word = (enum wt_req_word)w;
	nargs = n - 1;
	if (nargs > def->max_args) {
		if (def->max_args == 0) {
			return wt_error_set(err, -EINVAL,
					    "'%s' takes no arguments",
					    def->name);
		}
		return wt_error_set(err, -EINVAL,
				    "too many arguments; usage: %s",
				    def->usage);
	}
	if (nargs < def->min_args) {
		return wt_error_set(err, -EINVAL, "missing argument; usage: %s",
				    def->usage);
	}

	switch (req->word) {
	case WT_REQ_FLAT:
		if (nargs == 1) {
			if (strcmp(word[1], "capture") != 0) {
				return wt_error_set(err, -EINVAL,
						    "unknown argument '" ECHO
						    "'; usage: %s",
						    word[1], def->usage);
			}
			req->capture = true;
		}
		break;
	case WT_REQ_CALIBRATE:
		req->patterns = -1;
		if (nargs == 1) {
			o = wt_option_get(WT_OPT_CALIB_PATTERNS);
			if (wt_option_check(o, word[1], NULL) < 0) {
				return wt_error_set(err, -EINVAL,
						    "unknown patterns '" ECHO
						    "'; usage: %s",
						    word[1], def->usage);
			}
			req->patterns = strcasecmp(word[1], "hadamard") == 0;
		}
		break;
	case WT_REQ_REFERENCE:
		if (nargs == 1) {
			o = wt_option_get(WT_OPT_CALIB_REFERENCE_FRAMES);
			rc = parse_count("FRAMES", word[1], o->min, o->max,
					 &req->frames, err);
			if (rc < 0) {
				return rc;
			}
		}
		break;
	case WT_REQ_SET:
	case WT_REQ_GET:
		rc = copy_arg(req->key, sizeof(req->key), word[1], "the key",
			      err);
		if (rc < 0) {
			return rc;
		}
		rc = find_option(req->key, &o, err);
		if (rc < 0) {
			return rc;
		}
		req->option = o;
		if (req->word == WT_REQ_GET) {
			break;
		}
		if (!o->live) {
			return wt_error_set(err, -EINVAL,
					    "%s.%s needs a restart", o->section,
					    o->key);
		}
		rc = copy_arg(req->value, sizeof(req->value), word[2],
			      "the value", err);
		if (rc < 0) {
			return rc;
		}
		rc = wt_option_check(o, req->value, err);
		if (rc < 0) {
			/* Keep the config module's reason, under our code. */
			if (err) {
				err->code = -EINVAL;
			}
			return -EINVAL;
		}
		break;
	case WT_REQ_OFFSET:
		if (nargs == 0) {
			req->offset_op = WT_OFFSET_SHOW;
		} else if (nargs == 1 && strcmp(word[1], "clear") == 0) {
			req->offset_op = WT_OFFSET_CLEAR;
		} else if (nargs == 3) {
			req->offset_op = WT_OFFSET_ADD;
			rc = parse_zernike(word + 1, def->usage, req, err);
			if (rc < 0) {
				return rc;
			}
		} else {
			return wt_error_set(err, -EINVAL,
					    "unknown argument '" ECHO
					    "'; usage: %s",
					    word[1], def->usage);
		}
		break;
	case WT_REQ_SHAPE:
		rc = parse_zernike(word + 1, def->usage, req, err);
		if (rc < 0) {
			return rc;
		}
		break;
	case WT_REQ_SAVE:
	case WT_REQ_LOAD:
		if (word[1][0] == '\0') {
			return wt_error_set(err, -EINVAL, "empty file name");
		}
		rc = copy_arg(req->path, sizeof(req->path), word[1],
			      "the file name", err);
		if (rc < 0) {
			return rc;
		}
		break;
	case WT_REQ_RECORD:
		if (nargs == 1) {
			if (strcmp(word[1], "stop") != 0) {
				return wt_error_set(err, -EINVAL,
						    "missing argument; usage: "
						    "%s",
						    def->usage);
			}
			req->stop = true;
			break;
		}
		rc = parse_count("N", word[1], 1, 100000000, &req->frames,
				 err);
		if (rc < 0) {
			return rc;
		}
		if (word[2][0] == '\0') {
			return wt_error_set(err, -EINVAL, "empty file name");
		}
		rc = copy_arg(req->path, sizeof(req->path), word[2],
			      "the file name", err);
		if (rc < 0) {
			return rc;
		}
		break;
	case WT_REQ_AUTOGAIN:
		if (nargs == 1 && strcmp(word[1], "status") == 0) {
			req->status = true;
			break;
		}
		rc = parse_count("FRAMES", word[1], 64, 65536, &req->frames,
				 err);
		if (rc < 0) {
			return rc;
		}
		if (nargs == 2) {
			if (strcmp(word[2], "apply") != 0) {
				return wt_error_set(err, -EINVAL,
						    "unknown argument '" ECHO
						    "'; usage: %s",
						    word[2], def->usage);
			}
			req->apply = true;
		}
		break;
	default:
		break;
	}
	wt_error_clear(err);
	return 0;
}

int wt_request_reply_ok(char *buf, size_t len, const char *result_json)
{
	wt_json j;
	int rc;

	wt_json_init(&j, buf, len);
	wt_json_object_begin(&j);
	wt_json_key(&j, "ok");
	wt_json_bool(&j, true);
	wt_json_key(&j, "result");
	wt_json_raw(&j, result_json);
	wt_json_object_end(&j);
	rc = wt_json_finish(&j);
	if (rc < 0) {
		wt_request_reply_error(buf, len, "reply too long");
		return -ENOSPC;
	}
	return rc;
}

int wt_request_reply_error(char *buf, size_t len, const char *msg)
{
	wt_json j;
	int rc;

	wt_json_init(&j, buf, len);
	wt_json_object_begin(&j);
	wt_json_key(&j, "ok");
	wt_json_bool(&j, false);
	wt_json_key(&j, "error");
	wt_json_string(&j, msg ? msg : "");
	wt_json_object_end(&j);
	rc = wt_json_finish(&j);
	return rc < 0 ? -ENOSPC : rc;
}
