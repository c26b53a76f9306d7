/*
 * test_request.c - control request parser, reply writer and JSON writer
 * (lib/wt_request.c, lib/wt_json.c).
 *
 * Sources of truth: the protocol as defined in lib/wt_request.h (words,
 * argument counts, refusals), RFC 8259 "The JavaScript Object Notation
 * (JSON) Data Interchange Format" (section 6 numbers, section 7 strings,
 * section 8.1 UTF-8) and RFC 3629 "UTF-8" (section 3 and 4: what a
 * well-formed sequence is; section 10 lists overlong forms and surrogates
 * as ill-formed).  The expected JSON texts below are written by hand from
 * those grammars, not produced by our code.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#include "wt_config.h"
#include "wt_json.h"
#include "wt_jsonparse.h"
#include "wt_request.h"

static int parse(const char *line, wt_request *req, wt_error *err)
{
	return wt_request_parse(line, strlen(line), req, err);
}

/* The request must be refused and the reason must contain `reason`. */
static void refused(const char *line, const char *reason)
{
	wt_request req;
	wt_error err;
	int rc = parse(line, &req, &err);

	if (rc >= 0 || !strstr(err.msg, reason)) {
		print_error("request '%s': rc %d, message '%s', expected a "
			    "refusal containing '%s'\n",
			    line, rc, rc < 0 ? err.msg : "", reason);
		fail();
	}
}

static void parses_every_word(void **state)
{
	static const struct {
		const char *line;
		enum wt_req_word word;
	} cases[] = {
		{"status", WT_REQ_STATUS},
		{"ping", WT_REQ_PING},
		{"open", WT_REQ_OPEN},
		{"close", WT_REQ_CLOSE},
		{"hold", WT_REQ_HOLD},
		{"flat", WT_REQ_FLAT},
		{"reference", WT_REQ_REFERENCE},
		{"calibrate", WT_REQ_CALIBRATE},
		{"set control.gain 0.25", WT_REQ_SET},
		{"get sensor.lenslets", WT_REQ_GET},
		{"config", WT_REQ_CONFIG},
		{"save /tmp/a.h5", WT_REQ_SAVE},
		{"load /tmp/a.h5", WT_REQ_LOAD},
		{"shutdown", WT_REQ_SHUTDOWN},
		{"help", WT_REQ_HELP},
		{"reload", WT_REQ_RELOAD},
		{"offset", WT_REQ_OFFSET},
		{"shape zernike 4 50", WT_REQ_SHAPE},
		{"record 100 /tmp/r.h5", WT_REQ_RECORD},
		{"autogain 1024", WT_REQ_AUTOGAIN},
	};
	wt_request req;
	wt_error err;
	size_t i;

	(void)state;
	/* Every word of the protocol table (wt_request.h, section 1). */
	assert_int_equal(sizeof(cases) / sizeof(cases[0]), WT_REQ_COUNT);
	for (i = 0; i < sizeof(cases) / sizeof(cases[0]); i++) {
		assert_int_equal(parse(cases[i].line, &req, &err), 0);
		assert_int_equal(req.word, cases[i].word);
		assert_string_equal(
			wt_request_word_name(req.word),
			strtok(strcpy((char[64]){0}, cases[i].line), " "));
	}
}

static void parses_arguments_into_fields(void **state)
{
	wt_request req;
	wt_error err;

	(void)state;
	assert_int_equal(parse("set control.gain 0.25", &req, &err), 0);
	assert_string_equal(req.key, "control.gain");
	assert_string_equal(req.value, "0.25");
	assert_non_null(req.option);
	assert_int_equal(req.option->id, WT_OPT_CONTROL_GAIN);

	assert_int_equal(parse("get mirror.layout", &req, &err), 0);
	assert_int_equal(req.option->id, WT_OPT_MIRROR_LAYOUT);
	/* get is allowed on structural options too. */
	assert_int_equal(parse("get sensor.lenslets", &req, &err), 0);

	assert_int_equal(parse("reference 64", &req, &err), 0);
	assert_int_equal(req.frames, 64);
	assert_int_equal(parse("reference", &req, &err), 0);
	assert_int_equal(req.frames, 0);

	assert_int_equal(parse("flat capture", &req, &err), 0);
	assert_true(req.capture);
	assert_int_equal(parse("flat", &req, &err), 0);
	assert_false(req.capture);

	assert_int_equal(parse("save /data/cal 1.h5", &req, &err) < 0, 1);
	assert_int_equal(parse("save \"/data/cal 1.h5\"", &req, &err), 0);
	assert_string_equal(req.path, "/data/cal 1.h5");
}

static void parses_record_and_autogain(void **state)
{
	wt_request req;
	wt_error err;

	(void)state;
	assert_int_equal(parse("record 5000 \"/tmp/a b.h5\"", &req, &err), 0);
	assert_int_equal(req.frames, 5000);
	assert_string_equal(req.path, "/tmp/a b.h5");
	assert_false(req.stop);
	assert_int_equal(parse("record stop", &req, &err), 0);
	assert_true(req.stop);
	assert_int_equal(parse("autogain 2048 apply", &req, &err), 0);
	assert_int_equal(req.frames, 2048);
	assert_true(req.apply);
	assert_int_equal(parse("autogain 64", &req, &err), 0);
	assert_false(req.apply);
	assert_false(req.status);
	assert_int_equal(parse("autogain status", &req, &err), 0);
	assert_true(req.status);
	refused("record", "usage: record N FILE");
	refused("record 10", "usage");
	refused("record 0 /tmp/x.h5", "N");
	refused("record 10x /tmp/x.h5", "N");
	refused("record 10 \"\"", "empty file name");
	refused("record 1 2 3", "too many");
	refused("autogain", "usage: autogain FRAMES");
	refused("autogain 32", "FRAMES");
	refused("autogain 100000", "FRAMES");
	refused("autogain 1024 now", "unknown argument 'now'");
}

static void refuses_unknown_words(void **state)
{
	(void)state;
	refused("frobnicate", "unknown word 'frobnicate'");
	/* Words are lower case only. */
	refused("STATUS", "unknown word 'STATUS'");
	refused("\"\"", "unknown word ''");
}

static void refuses_extra_arguments(void **state)
{
	(void)state;
	refused("status now", "'status' takes no arguments");
	refused("close 1", "'close' takes no arguments");
	refused("shutdown now", "'shutdown' takes no arguments");
	refused("set control.gain 0.3 0.4", "too many arguments; usage: set "
					    "SECTION.KEY VALUE");
	refused("get control.gain x", "too many arguments; usage: get");
	refused("reference 10 20", "too many arguments; usage: reference");
	refused("flat now", "unknown argument 'now'; usage: flat [capture]");
	refused("save a b", "too many arguments; usage: save FILE");
}

static void refuses_missing_arguments(void **state)
{
	(void)state;
	refused("set", "missing argument; usage: set SECTION.KEY VALUE");
	refused("set control.gain", "missing argument; usage: set");
	refused("get", "missing argument; usage: get SECTION.KEY");
	refused("save", "missing argument; usage: save FILE");
	refused("load", "missing argument; usage: load FILE");
	refused("load \"\"", "empty file name");
}

static void refuses_bad_numbers(void **state)
{
	(void)state;
	refused("reference abc", "FRAMES: 'abc' is not a whole number");
	refused("reference 1.5", "FRAMES: '1.5' is not a whole number");
	refused("reference -3", "FRAMES: '-3' is not a whole number");
	refused("reference +3", "FRAMES: '+3' is not a whole number");
	refused("reference 1e3", "FRAMES: '1e3' is not a whole number");
	refused("reference 0", "FRAMES: 0 is out of range [1, 100000]");
	refused("reference 100001", "out of range [1, 100000]");
	refused("reference 99999999999999999999999999", "out of range");
	refused("reference \"\"", "FRAMES: empty");
	/* Values of set are checked as the INI loader checks them. */
	refused("set control.gain abc", "control.gain:");
	refused("set control.gain nan", "control.gain:");
	refused("set control.gain 5", "control.gain:");
	refused("set control.modes 1.5", "control.modes:");
	refused("set safety.safe_command maybe", "safety.safe_command:");
}

static void refuses_structural_and_unknown_options(void **state)
{
	(void)state;
	refused("set sensor.lenslets 20", "sensor.lenslets needs a restart");
	refused("set driver.frames ipc:///x", "driver.frames needs a restart");
	refused("set mirror.layout square", "mirror.layout needs a restart");
	refused("set control.gian 0.3", "unknown option 'control.gian'");
	refused("get nothing.here", "unknown option 'nothing.here'");
	refused("get gain", "'gain' is not SECTION.KEY");
}

static void accepts_every_live_option_default(void **state)
{
	wt_request req;
	wt_error err;
	char line[WT_REQUEST_LINE_MAX + 1];
	size_t i, live = 0;

	(void)state;
	/* Each live option's own default is a valid value for it. */
	for (i = 0; i < wt_option_count(); i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		snprintf(line, sizeof(line), "set %s.%s \"%s\"", o->section,
			 o->key, o->def);
		if (o->live) {
			live++;
			assert_int_equal(parse(line, &req, &err), 0);
			assert_ptr_equal(req.option, o);
			assert_string_equal(req.value, o->def);
		} else {
			assert_int_equal(parse(line, &req, &err), -EINVAL);
			assert_non_null(strstr(err.msg, "needs a restart"));
		}
	}
	assert_true(live > 0);
}

static void refuses_overlong_requests(void **state)
{
	char *line = malloc(WT_REQUEST_LINE_MAX + 8);
	wt_request req;
	wt_error err;

	(void)state;
	assert_non_null(line);
	/* "load " + a name filling the limit exactly: accepted. */
	memset(line, 'a', WT_REQUEST_LINE_MAX + 8);
	memcpy(line, "load ", 5);
	assert_int_equal(
		wt_request_parse(line, WT_REQUEST_LINE_MAX, &req, &err), 0);
	assert_int_equal(strlen(req.path), WT_REQUEST_LINE_MAX - 5);
	/* The same plus a line end: the line end does not count. */
	line[WT_REQUEST_LINE_MAX] = '\n';
	assert_int_equal(
		wt_request_parse(line, WT_REQUEST_LINE_MAX + 1, &req, &err), 0);
	line[WT_REQUEST_LINE_MAX] = '\r';
	line[WT_REQUEST_LINE_MAX + 1] = '\n';
	assert_int_equal(
		wt_request_parse(line, WT_REQUEST_LINE_MAX + 2, &req, &err), 0);
	/* One byte more: refused, with the limit in the reason. */
	memset(line, 'a', WT_REQUEST_LINE_MAX + 8);
	memcpy(line, "load ", 5);
	assert_int_equal(
		wt_request_parse(line, WT_REQUEST_LINE_MAX + 1, &req, &err),
		-EMSGSIZE);
	assert_non_null(strstr(err.msg, "longer than 1024 bytes"));
	/* A huge length is refused before anything is read past it. */
	assert_int_equal(
		wt_request_parse(line, WT_REQUEST_LINE_MAX + 8, &req, &err),
		-EMSGSIZE);
	free(line);
}

static void handles_blanks_quotes_and_line_ends(void **state)
{
	wt_request req;
	wt_error err;

	(void)state;
	assert_int_equal(parse("  \tstatus \t ", &req, &err), 0);
	assert_int_equal(req.word, WT_REQ_STATUS);
	assert_int_equal(parse("close\n", &req, &err), 0);
	assert_int_equal(parse("close\r\n", &req, &err), 0);
	assert_int_equal(parse("set\tcontrol.leak\t0.05", &req, &err), 0);
	assert_string_equal(req.value, "0.05");
	/* Quotes hold blanks; \" and \\ are the only escapes. */
	assert_int_equal(parse("load \"/a b/c\\\"d\\\\e\"", &req, &err), 0);
	assert_string_equal(req.path, "/a b/c\"d\\e");
	refused("load \"/abc", "quote opened at byte 6 is not closed");
	refused("load \"a\\nb\"", "bad escape");
	refused("load \"a\"b", "blank expected after the quoted word");
	refused("load a\"b\"", "quote inside a word");
	/* Only one line end is allowed, and only at the end. */
	refused("close\n\n", "control character 0x0a");
}

static void refuses_control_characters(void **state)
{
	static const char with_nul[] = {'o', 'p', '\0', 'e', 'n'};
	wt_request req;
	wt_error err;

	(void)state;
	assert_int_equal(
		wt_request_parse(with_nul, sizeof(with_nul), &req, &err),
		-EINVAL);
	assert_non_null(strstr(err.msg, "control character 0x00 at byte 3"));
	refused("status\x01", "control character 0x01 at byte 7");
	refused("load a\x7f", "control character 0x7f");
	refused("open\rx", "control character 0x0d");
}

static void refuses_empty_requests(void **state)
{
	wt_request req;
	wt_error err;

	(void)state;
	refused("", "empty request");
	refused("   \t ", "empty request");
	refused("\n", "empty request");
	assert_int_equal(wt_request_parse(NULL, 0, &req, &err), -EINVAL);
	assert_int_equal(wt_request_parse(NULL, 5, &req, &err), -EINVAL);
}

static void survives_random_bytes(void **state)
{
	unsigned long seed = wt_test_seed(20240611);
	uint64_t x = seed * 2654435761u + 1;
	char line[64];
	wt_request req;
	wt_error err;
	int t, i;

	(void)state;
	/* Random lines of words, quotes, blanks and junk: every call
	 * returns, and every refusal says why. */
	for (t = 0; t < 20000; t++) {
		static const char alphabet[] =
			"setgo.ab \t\"\\0159xyz\x01\x80\xff\n";
		int n;

		x ^= x << 13;
		x ^= x >> 7;
		x ^= x << 17;
		n = (int)(x % sizeof(line));
		for (i = 0; i < n; i++) {
			x ^= x << 13;
			x ^= x >> 7;
			x ^= x << 17;
			line[i] = alphabet[x % (sizeof(alphabet) - 1)];
		}
		if (wt_request_parse(line, (size_t)n, &req, &err) < 0) {
			assert_true(strlen(err.msg) > 0);
		}
	}
}

static void reply_ok_and_error_are_exact_json(void **state)
{
	char buf[256];

	(void)state;
	/* RFC 8259 section 4 (object) and 3 (literal names). */
	assert_int_equal(wt_request_reply_ok(buf, sizeof(buf), "\"pong\""),
			 (int)strlen("{\"ok\":true,\"result\":\"pong\"}"));
	assert_string_equal(buf, "{\"ok\":true,\"result\":\"pong\"}");
	wt_request_reply_ok(buf, sizeof(buf), NULL);
	assert_string_equal(buf, "{\"ok\":true,\"result\":null}");
	wt_request_reply_ok(buf, sizeof(buf), "{\"state\":\"open\"}");
	assert_string_equal(buf,
			    "{\"ok\":true,\"result\":{\"state\":\"open\"}}");
	wt_request_reply_error(buf, sizeof(buf), "no control matrix");
	assert_string_equal(buf,
			    "{\"ok\":false,\"error\":\"no control matrix\"}");
}

static void reply_too_long_is_an_error(void **state)
{
	char buf[48];
	char big[200];

	(void)state;
	memset(big, 'x', sizeof(big));
	big[0] = '"';
	big[sizeof(big) - 2] = '"';
	big[sizeof(big) - 1] = '\0';
	assert_int_equal(wt_request_reply_ok(buf, sizeof(buf), big), -ENOSPC);
	assert_string_equal(buf, "{\"ok\":false,\"error\":\"reply too long\"}");
	assert_int_equal(wt_request_reply_error(buf, 8, "anything"), -ENOSPC);
}

/* The string s (n bytes) escaped must read exactly `expected`. */
static void escapes_to(const char *s, size_t n, const char *expected)
{
	char out[128];
	int rc = wt_json_escape(s, n, out, sizeof(out));

	assert_int_equal(rc, (int)strlen(expected));
	assert_memory_equal(out, expected, strlen(expected) + 1);
}

static void json_strings_follow_rfc8259(void **state)
{
	(void)state;
	/* RFC 8259 section 7: quotation mark and reverse solidus must be
	 * escaped. */
	escapes_to("a\"b", 3, "a\\\"b");
	escapes_to("a\\b", 3, "a\\\\b");
	/* Section 7: U+0000..U+001F must be escaped; the two-character
	 * forms exist for b f n r t, the others use \u00XX (lower-case hex
	 * is allowed: HEXDIG is case-insensitive, RFC 5234 section 2.3). */
	escapes_to("\b\f\n\r\t", 5, "\\b\\f\\n\\r\\t");
	escapes_to("\x01\x1f", 2, "\\u0001\\u001f");
	escapes_to("a\0b", 3, "a\\u0000b");
	/* Solidus and DEL need no escape (section 7: unescaped = %x20-21 /
	 * %x23-5B / %x5D-10FFFF). */
	escapes_to("a/b\x7f", 4, "a/b\x7f");
	/* Well-formed UTF-8 passes as it is (section 8.1): U+00E9, U+20AC,
	 * U+1F600. */
	escapes_to("\xc3\xa9\xe2\x82\xac\xf0\x9f\x98\x80", 9,
		   "\xc3\xa9\xe2\x82\xac\xf0\x9f\x98\x80");
}

static void json_strings_replace_ill_formed_utf8(void **state)
{
	(void)state;
	/* RFC 3629 section 3/10: these are ill-formed; each offending byte
	 * becomes U+FFFD (EF BF BD) so the text stays valid UTF-8 as RFC
	 * 8259 section 8.1 requires. */
	/* Lone continuation byte and a byte that never occurs (0xFF). */
	escapes_to("a\x80z", 3, "a\xef\xbf\xbdz");
	escapes_to("\xff", 1, "\xef\xbf\xbd");
	/* Overlong "/" (C0 AF), from RFC 3629 section 10. */
	escapes_to("\xc0\xaf", 2, "\xef\xbf\xbd\xef\xbf\xbd");
	/* UTF-16 surrogate U+D800 encoded as ED A0 80. */
	escapes_to("\xed\xa0\x80", 3, "\xef\xbf\xbd\xef\xbf\xbd\xef\xbf\xbd");
	/* Above U+10FFFF: F4 90 80 80. */
	escapes_to("\xf4\x90\x80\x80", 4,
		   "\xef\xbf\xbd\xef\xbf\xbd\xef\xbf\xbd\xef\xbf\xbd");
	/* A sequence cut by the end of the string. */
	escapes_to("\xe2\x82", 2, "\xef\xbf\xbd\xef\xbf\xbd");
}

static void json_error_reply_escapes_its_text(void **state)
{
	char buf[256];

	(void)state;
	wt_request_reply_error(buf, sizeof(buf), "bad \"x\"\n\\ \x01");
	assert_string_equal(buf, "{\"ok\":false,\"error\":"
				 "\"bad \\\"x\\\"\\n\\\\ \\u0001\"}");
}

static void json_numbers_follow_rfc8259(void **state)
{
	char buf[256];
	wt_json j;

	(void)state;
	wt_json_init(&j, buf, sizeof(buf));
	wt_json_array_begin(&j);
	wt_json_int(&j, -42);
	wt_json_uint(&j, 18446744073709551615ull);
	wt_json_double(&j, 0.5);
	wt_json_double(&j, -0.0);
	wt_json_double(&j, 1e300);
	wt_json_double(&j, NAN);
	wt_json_double(&j, -INFINITY);
	wt_json_double_prec(&j, 1.0 / 3.0, 3);
	wt_json_bool(&j, true);
	wt_json_bool(&j, false);
	wt_json_null(&j);
	wt_json_array_end(&j);
	assert_true(wt_json_finish(&j) > 0);
	/* Section 6: "-0" and "1e+300" are numbers (minus, int, exp with a
	 * sign); NaN and infinities are not permitted, so they are null. */
	assert_string_equal(buf, "[-42,18446744073709551615,0.5,-0,1e+300,"
				 "null,null,0.333,true,false,null]");
}

static void json_nesting_and_commas(void **state)
{
	static const double sv[] = {3.0, 2.0, 0.5};
	char buf[256];
	wt_jtok tok[32];
	wt_json j;
	int n, k;

	(void)state;
	wt_json_init(&j, buf, sizeof(buf));
	wt_json_object_begin(&j);
	wt_json_key(&j, "a");
	wt_json_object_begin(&j);
	wt_json_object_end(&j);
	wt_json_key(&j, "b");
	wt_json_array_begin(&j);
	wt_json_array_end(&j);
	wt_json_key(&j, "c\"");
	wt_json_double_array(&j, sv, 3, 6);
	wt_json_key(&j, "sv");
	wt_json_double_array(&j, sv, 2, 6);
	wt_json_key(&j, "d");
	wt_json_raw(&j, "{\"x\":1}");
	wt_json_object_end(&j);
	assert_int_equal(wt_json_finish(&j), (int)strlen(buf));
	/* Hand-written from the grammar of RFC 8259 sections 4 and 5. */
	assert_string_equal(buf, "{\"a\":{},\"b\":[],\"c\\\"\":[3,2,0.5],"
				 "\"sv\":[3,2],\"d\":{\"x\":1}}");
	/* And a strict RFC 8259 reader agrees it is one object of 5. */
	n = wt_jsonp_parse(buf, strlen(buf), tok, 32, NULL);
	assert_true(n > 0);
	assert_int_equal(tok[0].type, WT_JSON_OBJECT);
	assert_int_equal(tok[0].size, 5);
	k = wt_jsonp_member(buf, tok, 0, "sv");
	assert_true(k > 0);
	assert_int_equal(tok[k].type, WT_JSON_ARRAY);
	assert_int_equal(tok[k].size, 2);
}

static void json_writer_reports_overflow_and_misuse(void **state)
{
	char buf[8];
	char big[64];
	wt_json j;
	int d;

	(void)state;
	wt_json_init(&j, buf, sizeof(buf));
	wt_json_string(&j, "0123456789");
	assert_int_equal(wt_json_finish(&j), -ENOSPC);
	/* Always terminated, never past the buffer. */
	assert_true(strlen(buf) < sizeof(buf));

	wt_json_init(&j, big, sizeof(big));
	wt_json_object_begin(&j);
	wt_json_int(&j, 1); /* a value without a key in an object */
	wt_json_object_end(&j);
	assert_int_equal(wt_json_finish(&j), -EINVAL);

	wt_json_init(&j, big, sizeof(big));
	wt_json_array_begin(&j);
	assert_int_equal(wt_json_finish(&j), -EINVAL); /* still open */
	wt_json_object_end(&j);			       /* wrong closer */
	assert_int_equal(wt_json_finish(&j), -EINVAL);

	wt_json_init(&j, big, sizeof(big));
	for (d = 0; d < WT_JSONW_DEPTH + 2; d++) {
		wt_json_array_begin(&j);
	}
	assert_true(wt_json_finish(&j) < 0);
}

/* offset and shape: the Zernike arguments into fields; every bad one is
 * refused with its reason. */
static void parses_offsets_and_shapes(void **state)
{
	wt_request req;
	wt_error err;

	(void)state;
	assert_int_equal(parse("offset", &req, &err), 0);
	assert_int_equal(req.offset_op, WT_OFFSET_SHOW);
	assert_int_equal(parse("offset clear", &req, &err), 0);
	assert_int_equal(req.offset_op, WT_OFFSET_CLEAR);
	assert_int_equal(parse("offset zernike 4 -37.5", &req, &err), 0);
	assert_int_equal(req.word, WT_REQ_OFFSET);
	assert_int_equal(req.offset_op, WT_OFFSET_ADD);
	assert_int_equal(req.noll, 4);
	assert_true(req.amount_nm == -37.5);
	assert_int_equal(parse("shape zernike 11 1e2", &req, &err), 0);
	assert_int_equal(req.word, WT_REQ_SHAPE);
	assert_int_equal(req.noll, 11);
	assert_true(req.amount_nm == 100);
	refused("offset clean", "unknown argument 'clean'");
	refused("offset zernike 4", "unknown argument 'zernike'");
	refused("offset clear 4", "unknown argument 'clear'");
	refused("offset zernike 4 5 6", "too many arguments");
	refused("offset tilt 4 5", "unknown argument 'tilt'");
	refused("offset zernike 1 50", "J (Noll index): 1 is out of range");
	refused("offset zernike 1001 50", "out of range");
	refused("offset zernike x 50", "is not a whole number");
	refused("offset zernike 4 fifty", "AMOUNT_NM: 'fifty' is not a number");
	refused("offset zernike 4 nan", "is not a number");
	refused("offset zernike 4 inf", "is not a number");
	refused("offset zernike 4 1e400", "is not a number");
	refused("offset zernike 4 \"\"", "is not a number");
	refused("offset zernike 4 2e5", "out of range");
	refused("shape", "missing argument");
	refused("shape zernike 4", "missing argument");
	refused("shape zernike 4 nan", "is not a number");
	refused("reload now", "'reload' takes no arguments");
}

static void help_covers_every_word(void **state)
{
	unsigned w;

	(void)state;
	for (w = 0; w < WT_REQ_COUNT; w++) {
		const char *name = wt_request_word_name((enum wt_req_word)w);

		assert_string_not_equal(name, "?");
		/* A usage line starts with its word. */
		assert_memory_equal(wt_request_usage((enum wt_req_word)w), name,
				    strlen(name));
		assert_true(strlen(wt_request_help((enum wt_req_word)w)) > 4);
	}
	assert_string_equal(wt_request_word_name(WT_REQ_COUNT), "?");
	assert_string_equal(wt_state_name(WT_STATE_FAULT), "fault");
	assert_string_equal(wt_state_name(-1), "?");
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(parses_every_word),
	cmocka_unit_test(parses_arguments_into_fields),
	cmocka_unit_test(parses_record_and_autogain),
	cmocka_unit_test(refuses_unknown_words),
	cmocka_unit_test(refuses_extra_arguments),
	cmocka_unit_test(refuses_missing_arguments),
	cmocka_unit_test(refuses_bad_numbers),
	cmocka_unit_test(refuses_structural_and_unknown_options),
	cmocka_unit_test(accepts_every_live_option_default),
	cmocka_unit_test(refuses_overlong_requests),
	cmocka_unit_test(handles_blanks_quotes_and_line_ends),
	cmocka_unit_test(refuses_control_characters),
	cmocka_unit_test(refuses_empty_requests),
	cmocka_unit_test(survives_random_bytes),
	cmocka_unit_test(reply_ok_and_error_are_exact_json),
	cmocka_unit_test(reply_too_long_is_an_error),
	cmocka_unit_test(json_strings_follow_rfc8259),
	cmocka_unit_test(json_strings_replace_ill_formed_utf8),
	cmocka_unit_test(json_error_reply_escapes_its_text),
	cmocka_unit_test(json_numbers_follow_rfc8259),
	cmocka_unit_test(json_nesting_and_commas),
	cmocka_unit_test(json_writer_reports_overflow_and_misuse),
	cmocka_unit_test(parses_offsets_and_shapes),
	cmocka_unit_test(help_covers_every_word),
};

WT_TEST_MAIN(tests)
