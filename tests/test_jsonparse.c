/* test_jsonparse.c - the strict JSON reader against RFC 8259's grammar. */
#include "wt_test.h"

#include <errno.h>
#include <string.h>

#include "wt_jsonparse.h"

#define MAXTOK 128

static int parse(const char *s, wt_jtok *t)
{
	return wt_jsonp_parse(s, strlen(s), t, MAXTOK, NULL);
}

/* RFC 8259 section 13, first example (the "Image" object), verbatim. */
static const char rfc_image[] =
	"{\n"
	"  \"Image\": {\n"
	"    \"Width\":  800,\n"
	"    \"Height\": 600,\n"
	"    \"Title\":  \"View from 15th Floor\",\n"
	"    \"Thumbnail\": {\n"
	"      \"Url\":    \"http://www.example.com/image/481989943\",\n"
	"      \"Height\": 125,\n"
	"      \"Width\":  100\n"
	"    },\n"
	"    \"Animated\" : false,\n"
	"    \"IDs\": [116, 943, 234, 38793]\n"
	"  }\n"
	"}";

static void rfc8259_image_example_is_read_member_by_member(void **state)
{
	wt_jtok t[MAXTOK];
	char buf[64];
	int ok;
	int n = parse(rfc_image, t);
	int img, thumb, ids;

	(void)state;
	assert_true(n > 0);
	img = wt_jsonp_member(rfc_image, t, 0, "Image");
	assert_int_equal(t[img].type, WT_JSON_OBJECT);
	assert_int_equal(t[img].size, 6);
	assert_int_equal(wt_jsonp_number(rfc_image,
					 &t[wt_jsonp_member(rfc_image, t, img,
							    "Width")],
					 &ok),
			 800);
	assert_int_equal(ok, 0);
	thumb = wt_jsonp_member(rfc_image, t, img, "Thumbnail");
	assert_int_equal(wt_jsonp_number(rfc_image,
					 &t[wt_jsonp_member(rfc_image, t, thumb,
							    "Height")],
					 NULL),
			 125);
	assert_true(wt_jsonp_string(rfc_image,
				    &t[wt_jsonp_member(rfc_image, t, img,
						       "Title")],
				    buf, sizeof(buf)) > 0);
	assert_string_equal(buf, "View from 15th Floor");
	assert_false(wt_jsonp_true(
		&t[wt_jsonp_member(rfc_image, t, img, "Animated")]));
	ids = wt_jsonp_member(rfc_image, t, img, "IDs");
	assert_int_equal(t[ids].size, 4);
	assert_int_equal(wt_jsonp_number(rfc_image,
					 &t[wt_jsonp_element(t, ids, 3)], NULL),
			 38793);
	assert_int_equal(wt_jsonp_member(rfc_image, t, img, "Missing"), -1);
	assert_int_equal(wt_jsonp_element(t, ids, 4), -1);
}

/* RFC 8259 section 13, second example: an array of two objects. */
static void rfc8259_array_example_walks_elements(void **state)
{
	static const char js[] =
		"[{\"precision\": \"zip\", \"Latitude\": 37.7668, "
		"\"Longitude\": -122.3959, \"Address\": \"\", "
		"\"City\": \"SAN FRANCISCO\", \"State\": \"CA\", "
		"\"Zip\": \"94107\", \"Country\": \"US\"}, "
		"{\"precision\": \"zip\", \"Latitude\": 37.371991, "
		"\"Longitude\": -122.026020, \"Address\": \"\", "
		"\"City\": \"SUNNYVALE\", \"State\": \"CA\", "
		"\"Zip\": \"94085\", \"Country\": \"US\"}]";
	wt_jtok t[MAXTOK];
	char buf[32];
	int second;

	(void)state;
	assert_true(parse(js, t) > 0);
	assert_int_equal(t[0].size, 2);
	second = wt_jsonp_element(t, 0, 1);
	assert_int_equal(t[second].type, WT_JSON_OBJECT);
	assert_int_equal(wt_jsonp_string(js,
					 &t[wt_jsonp_member(js, t, second,
							    "City")],
					 buf, sizeof(buf)),
			 9);
	assert_string_equal(buf, "SUNNYVALE");
	assert_float_equal(
		wt_jsonp_number(js,
				&t[wt_jsonp_member(js, t, second, "Longitude")],
				NULL),
		-122.026020, 1e-9);
	assert_int_equal(wt_jsonp_string(js,
					 &t[wt_jsonp_member(js, t, second,
							    "Address")],
					 buf, sizeof(buf)),
			 0);
}

/* Escapes of RFC 8259 section 7, including a surrogate pair (U+1D11E, the
 * RFC's own example, is F0 9D 84 9E in UTF-8). */
static void string_escapes_decode_to_utf8(void **state)
{
	static const char js[] =
		"\"a\\\"b\\\\c\\/d\\b\\f\\n\\r\\t\\u00e9\\uD834\\uDD1E\"";
	static const char want[] = "a\"b\\c/d\b\f\n\r\t\xc3\xa9\xf0\x9d\x84\x9e";
	wt_jtok t[4];
	char buf[64];

	(void)state;
	assert_int_equal(wt_jsonp_parse(js, strlen(js), t, 4, NULL), 1);
	assert_int_equal(wt_jsonp_string(js, &t[0], buf, sizeof(buf)),
			 (int)strlen(want));
	assert_string_equal(buf, want);
	assert_int_equal(wt_jsonp_string(js, &t[0], buf, 4), -ENOSPC);
}

static void numbers_follow_the_grammar(void **state)
{
	static const char *good[] = {"0", "-0", "12", "-3.25", "1e3",
				     "2.5E-2", "6.02e+23"};
	static const double val[] = {0, 0, 12, -3.25, 1000, 0.025, 6.02e23};
	/* RFC 8259 section 6: no leading zeros, no bare '.', no '+' sign,
	 * no hex, no NaN or Infinity. */
	static const char *bad[] = {"01", ".5", "1.", "+1", "0x10", "1e",
				    "-", "NaN", "Infinity", "1.e2"};
	wt_jtok t[4];

	(void)state;
	for (size_t k = 0; k < sizeof(good) / sizeof(good[0]); k++) {
		int ok = -1;

		assert_int_equal(parse(good[k], t), 1);
		assert_float_equal(wt_jsonp_number(good[k], &t[0], &ok), val[k],
				   1e-12 * (1 + val[k]));
		assert_int_equal(ok, 0);
	}
	for (size_t k = 0; k < sizeof(bad) / sizeof(bad[0]); k++) {
		assert_int_equal(parse(bad[k], t), -EINVAL);
	}
}

static void malformed_documents_are_refused_with_the_offset(void **state)
{
	static const char *bad[] = {
		"",		"{",	      "}",	     "[1,]",
		"{\"a\":1,}",	"{\"a\" 1}",  "{a:1}",	     "[1 2]",
		"\"open",	"\"tab\there\"", "\"\\x\"", "\"\\u12G4\"",
		"tru",		"nul",	      "[1] [2]",     "{\"a\":}",
		"'single'",
	};
	wt_jtok t[MAXTOK];
	wt_error err;

	(void)state;
	for (size_t k = 0; k < sizeof(bad) / sizeof(bad[0]); k++) {
		wt_error_clear(&err);
		assert_int_equal(wt_jsonp_parse(bad[k], strlen(bad[k]), t,
						MAXTOK, &err),
				 -EINVAL);
		assert_non_null(strstr(err.msg, "byte "));
	}
}

static void literals_and_whitespace_are_accepted(void **state)
{
	static const char js[] = " \t\r\n[true, false, null, {}, []] \n";
	wt_jtok t[8];

	(void)state;
	assert_int_equal(parse(js, t), 6);
	assert_int_equal(t[1].type, WT_JSON_TRUE);
	assert_true(wt_jsonp_true(&t[1]));
	assert_int_equal(t[2].type, WT_JSON_FALSE);
	assert_int_equal(t[3].type, WT_JSON_NULL);
	assert_int_equal(t[4].type, WT_JSON_OBJECT);
	assert_int_equal(t[4].size, 0);
	assert_int_equal(t[5].type, WT_JSON_ARRAY);
}

static void token_budget_and_depth_are_bounded(void **state)
{
	char deep[2 * WT_JSON_MAX_DEPTH + 8];
	wt_jtok t[4];
	wt_jtok big[2 * WT_JSON_MAX_DEPTH + 8];
	size_t n = 0;

	(void)state;
	assert_int_equal(wt_jsonp_parse("[1,2,3,4]", 9, t, 4, NULL), -ENOSPC);
	for (int k = 0; k < WT_JSON_MAX_DEPTH + 2; k++) {
		deep[n++] = '[';
	}
	for (int k = 0; k < WT_JSON_MAX_DEPTH + 2; k++) {
		deep[n++] = ']';
	}
	assert_int_equal(wt_jsonp_parse(deep, n, big,
					(int)(sizeof(big) / sizeof(big[0])),
					NULL),
			 -EINVAL);
}

static void nested_members_skip_whole_subtrees(void **state)
{
	static const char js[] =
		"{\"a\":{\"x\":[1,{\"y\":2}],\"z\":3},\"b\":[[],[4]],\"c\":5}";
	wt_jtok t[MAXTOK];

	(void)state;
	assert_true(parse(js, t) > 0);
	assert_int_equal(
		wt_jsonp_number(js, &t[wt_jsonp_member(js, t, 0, "c")], NULL),
		5);
	assert_int_equal(wt_jsonp_number(
				 js,
				 &t[wt_jsonp_member(
					 js, t, wt_jsonp_member(js, t, 0, "a"),
					 "z")],
				 NULL),
			 3);
	assert_int_equal(wt_jsonp_number(
				 js,
				 &t[wt_jsonp_element(
					 t,
					 wt_jsonp_element(
						 t, wt_jsonp_member(js, t, 0,
								    "b"),
						 1),
					 0)],
				 NULL),
			 4);
}

static void random_bytes_never_crash_the_reader(void **state)
{
	unsigned long seed = wt_test_seed(20261201);
	static const char alphabet[] = "{}[]\":,0123456789.eE+-truefalsn \\u";
	char buf[48];
	wt_jtok t[32];

	(void)state;
	srand((unsigned)seed);
	for (int it = 0; it < 200000; it++) {
		size_t n = (size_t)(rand() % (int)sizeof(buf));

		for (size_t k = 0; k < n; k++) {
			buf[k] = alphabet[rand() % (int)(sizeof(alphabet) - 1)];
		}
		int rc = wt_jsonp_parse(buf, n, t, 32, NULL);

		assert_true(rc > 0 || rc == -EINVAL || rc == -ENOSPC);
		if (rc > 0) {
			assert_true(t[0].next == rc);
		}
	}
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(rfc8259_image_example_is_read_member_by_member),
	cmocka_unit_test(rfc8259_array_example_walks_elements),
	cmocka_unit_test(string_escapes_decode_to_utf8),
	cmocka_unit_test(numbers_follow_the_grammar),
	cmocka_unit_test(malformed_documents_are_refused_with_the_offset),
	cmocka_unit_test(literals_and_whitespace_are_accepted),
	cmocka_unit_test(token_budget_and_depth_are_bounded),
	cmocka_unit_test(nested_members_skip_whole_subtrees),
	cmocka_unit_test(random_bytes_never_crash_the_reader),
};

WT_TEST_MAIN(tests)
