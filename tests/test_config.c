/*
 * test_config.c - the option table, INI loading, set, help and INI output.
 *
 * References: numbers are checked against the C library's strtol/strtod of
 * the same text, messages against the formats the module promises in
 * wt_config.h ("file:line: section.key: reason"), strerror() for system
 * errors.
 */
#include "wt_test.h"

#include <errno.h>
#include <limits.h>
#include <stdbool.h>
#include <string.h>
#include <unistd.h>

#include "wt_config.h"
#include "wt_error.h"

#ifndef WT_SOURCE_DIR
#define WT_SOURCE_DIR "."
#endif
#define FIXTURES WT_SOURCE_DIR "/tests/data/config/"

/* ---------------------------------------------------------------- */
/* helpers                                                           */

/* A temporary folder holding one INI file. */
struct tmp_ini {
	char dir[64];
	char path[128];
};

static void tmp_ini_write(struct tmp_ini *t, const char *text, size_t len)
{
	FILE *f;

	snprintf(t->dir, sizeof(t->dir), "/tmp/wt_config_XXXXXX");
	assert_non_null(mkdtemp(t->dir));
	snprintf(t->path, sizeof(t->path), "%s/demo.ini", t->dir);
	f = fopen(t->path, "wb");
	assert_non_null(f);
	assert_int_equal(fwrite(text, 1, len, f), len);
	assert_int_equal(fclose(f), 0);
}

static void tmp_ini_remove(struct tmp_ini *t)
{
	unlink(t->path);
	rmdir(t->dir);
}

/* Load text as an INI file into c; the file's path goes to path. */
static int load_text(wt_config *c, const char *text, wt_error *err, char *path,
		     size_t path_len)
{
	struct tmp_ini t;
	int ret;

	tmp_ini_write(&t, text, strlen(text));
	ret = wt_config_load(c, t.path, err);
	snprintf(path, path_len, "%s", t.path);
	tmp_ini_remove(&t);
	return ret;
}

/* The message must be "<path>:<rest>" exactly. */
static void assert_load_msg(const wt_error *err, const char *path,
			    const char *rest)
{
	char want[WT_ERROR_MAX];

	snprintf(want, sizeof(want), "%s:%s", path, rest);
	assert_string_equal(err->msg, want);
}

/* Loading text must fail with -WT_ECONFIG and "<file>:<rest>". */
static void assert_load_refused(const char *text, const char *rest)
{
	char path[128];
	wt_config *c;
	wt_error err;

	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(load_text(c, text, &err, path, sizeof(path)),
			 -WT_ECONFIG);
	assert_int_equal(err.code, -WT_ECONFIG);
	assert_load_msg(&err, path, rest);
	wt_config_destroy(c);
}

/* Every option's text, one buffer per option. */
struct snapshot {
	char text[WT_OPT_COUNT][WT_CONFIG_TEXT_MAX];
};

static struct snapshot *snapshot_take(const wt_config *c)
{
	struct snapshot *s = calloc(1, sizeof(*s));
	size_t i;

	assert_non_null(s);
	for (i = 0; i < WT_OPT_COUNT; i++) {
		assert_true(wt_config_format(c, (wt_opt_id)i, s->text[i],
					     sizeof(s->text[i])) >= 0);
	}
	return s;
}

/* Same value for every option: formatted text (doubles in round-trip
 * form, so equal text means equal numbers) and the typed readers. */
static void assert_configs_equal(const wt_config *a, const wt_config *b)
{
	struct snapshot *sa = snapshot_take(a), *sb = snapshot_take(b);
	size_t i;

	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		assert_string_equal(sa->text[i], sb->text[i]);
		assert_true(wt_config_int(a, o->id) == wt_config_int(b, o->id));
		assert_true(wt_config_double(a, o->id) ==
			    wt_config_double(b, o->id));
		assert_true(wt_config_bool(a, o->id) ==
			    wt_config_bool(b, o->id));
		assert_int_equal(wt_config_enum(a, o->id),
				 wt_config_enum(b, o->id));
	}
	free(sa);
	free(sb);
}

/* A described option that is not in the table, for types the table does
 * not use yet. */
static wt_option described(wt_opt_type type, double min, double max)
{
	wt_option o = {
		.id = WT_OPT_COUNT,
		.section = "test",
		.key = "values",
		.type = type,
		.def = "",
		.min = min,
		.max = max,
		.choices = "",
		.live = true,
		.help = "an option described by the test",
	};

	return o;
}

static void assert_check_refused(const wt_option *o, const char *value,
				 const char *msg)
{
	wt_error err;

	assert_int_equal(wt_option_check(o, value, &err), -WT_ECONFIG);
	assert_string_equal(err.msg, msg);
}

static void assert_check_accepted(const wt_option *o, const char *value)
{
	wt_error err;

	wt_error_clear(&err);
	if (wt_option_check(o, value, &err)) {
		fail_msg("\"%s\" refused: %s", value, err.msg);
	}
}

/* The table's first option of a type (the tests of that type need one). */
static const wt_option *first_of_type(wt_opt_type type)
{
	size_t i;

	for (i = 0; i < WT_OPT_COUNT; i++) {
		if (wt_option_get((wt_opt_id)i)->type == type) {
			return wt_option_get((wt_opt_id)i);
		}
	}
	fail_msg("the option table has no option of type %d", (int)type);
	return NULL;
}

/* "[section]\nkey = value\n..." for option o. */
static void option_ini(const wt_option *o, const char *value_lines, char *buf,
		       size_t len)
{
	snprintf(buf, len, "[%s]\n%s = %s\n", o->section, o->key, value_lines);
}

/* "gain, leak, ..." of a section, from the table. */
static void section_keys(const char *section, char *buf, size_t len)
{
	size_t i;

	buf[0] = '\0';
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		if (!strcmp(o->section, section)) {
			snprintf(buf + strlen(buf), len - strlen(buf), "%s%s",
				 buf[0] ? ", " : "", o->key);
		}
	}
}

/* ---------------------------------------------------------------- */
/* the table                                                         */

static void table_defaults_validate_and_lie_in_range(void **state)
{
	size_t i;

	(void)state;
	assert_int_equal(wt_option_count(), WT_OPT_COUNT);
	for (i = 0; i < wt_option_count(); i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);
		char *end;
		double v;

		assert_check_accepted(o, o->def);
		if (o->type == WT_TYPE_INT || o->type == WT_TYPE_DOUBLE) {
			/* reference: the C library's own reading */
			v = strtod(o->def, &end);
			assert_true(*end == '\0');
			assert_true(o->min <= o->max);
			assert_true(o->min <= v && v <= o->max);
		}
		if (o->type == WT_TYPE_ZLIST || o->type == WT_TYPE_DLIST) {
			assert_true(o->min <= o->max);
		}
		if (o->type == WT_TYPE_ENUM) {
			assert_true(o->choices[0] != '\0');
		}
	}
}

static void table_names_are_unique_and_sections_contiguous(void **state)
{
	size_t i, k;

	(void)state;
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *a = wt_option_get((wt_opt_id)i);

		assert_int_equal(a->id, i);
		assert_true(a->section[0] && a->key[0] && a->help[0]);
		assert_null(strchr(a->key, '.'));
		assert_null(strchr(a->help, '\n'));
		for (k = i + 1; k < WT_OPT_COUNT; k++) {
			const wt_option *b = wt_option_get((wt_opt_id)k);

			assert_false(!strcmp(a->section, b->section) &&
				     !strcmp(a->key, b->key));
			/* once a section ends it does not come back */
			if (k > i + 1 && !strcmp(a->section, b->section)) {
				assert_string_equal(
					wt_option_get((wt_opt_id)(k - 1))
						->section,
					a->section);
			}
		}
	}
}

static void option_find_and_get_agree_with_table(void **state)
{
	char name[128];
	size_t i;

	(void)state;
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		snprintf(name, sizeof(name), "%s.%s", o->section, o->key);
		assert_ptr_equal(wt_option_find(name), o);
	}
	assert_null(wt_option_get(WT_OPT_COUNT));
	assert_null(wt_option_find("control.gian"));
	assert_null(wt_option_find("gain"));
	assert_null(wt_option_find("nosuch.gain"));
	assert_null(wt_option_find(".gain"));
	assert_null(wt_option_find(NULL));
	assert_string_equal(wt_option_find("control.gain")->key, "gain");
}

static void create_sets_every_option_to_its_default(void **state)
{
	wt_config *c;
	wt_error err;
	size_t i;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		/* reference: strtol/strtod of the table's default text */
		switch (o->type) {
		case WT_TYPE_INT:
			assert_int_equal(wt_config_int(c, o->id),
					 strtol(o->def, NULL, 10));
			break;
		case WT_TYPE_DOUBLE:
			assert_true(wt_config_double(c, o->id) ==
				    strtod(o->def, NULL));
			break;
		case WT_TYPE_STRING:
		case WT_TYPE_ENUM:
			assert_string_equal(wt_config_string(c, o->id), o->def);
			break;
		default:
			break;
		}
	}
	assert_string_equal(wt_config_string(c, WT_OPT_MIRROR_LAYOUT),
			    "corners");
	assert_int_equal(wt_config_enum(c, WT_OPT_MIRROR_LAYOUT), 1);
	wt_config_destroy(c);
}

/* ---------------------------------------------------------------- */
/* loading                                                           */

static void load_reads_values_and_syntax_of_fixture(void **state)
{
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	if (wt_config_load(c, FIXTURES "valid.ini", &err)) {
		fail_msg("%s", err.msg);
	}
	assert_int_equal(wt_config_int(c, WT_OPT_SENSOR_LENSLETS), 20);
	assert_int_equal(wt_config_int(c, WT_OPT_SENSOR_PIXELS_PER_LENSLET), 8);
	assert_true(wt_config_double(c, WT_OPT_SENSOR_PIXEL_PITCH_UM) == 5.5);
	assert_true(wt_config_double(c, WT_OPT_SENSOR_WAVELENGTH_NM) == 1064);
	assert_string_equal(wt_config_string(c, WT_OPT_MIRROR_LAYOUT),
			    "circle");
	assert_int_equal(wt_config_enum(c, WT_OPT_MIRROR_LAYOUT), 2);
	assert_true(wt_config_double(c, WT_OPT_MIRROR_LIMIT_LOW) == -0.8);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_GAIN) == 0.25);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_LEAK) == 1e-3);
	assert_int_equal(wt_config_int(c, WT_OPT_CONTROL_MODES), 40);
	assert_string_equal(wt_config_string(c, WT_OPT_DRIVER_FRAMES),
			    "tcp://127.0.0.1:6000");
	/* not in the file: still the default */
	assert_int_equal(wt_config_int(c, WT_OPT_MIRROR_ACTUATORS), 12);
	wt_config_destroy(c);
}

static void load_overlays_file_on_current_values(void **state)
{
	char path[128];
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "control.gain", "0.5", &err), 0);
	assert_int_equal(load_text(c, "[control]\nleak = 0.2\n", &err, path,
				   sizeof(path)),
			 0);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_GAIN) == 0.5);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_LEAK) == 0.2);
	wt_config_destroy(c);
}

static void load_counts_lines_through_comments_blanks_and_crlf(void **state)
{
	char comment[200];
	char text[1024];

	(void)state;
	/* a comment of exactly 199 characters is the longest line taken */
	memset(comment, 'c', 198);
	comment[0] = ';';
	comment[198] = '\0';
	snprintf(text, sizeof(text),
		 "; first\r\n\r\n[control]\r\n%sc\r\n# hash\r\n"
		 "  gain = 0.2 ; fine\r\n\r\nleak = 7\r\n",
		 comment);
	assert_load_refused(text, "8: control.leak: 7 is above the maximum 1");
}

static void load_refuses_value_above_maximum(void **state)
{
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_load(c, FIXTURES "demo.ini", &err),
			 -WT_ECONFIG);
	assert_string_equal(err.msg, FIXTURES "demo.ini:12: control.gain: "
					      "2.5 is above the maximum 2");
	wt_config_destroy(c);
}

static void load_refuses_value_below_minimum(void **state)
{
	(void)state;
	assert_load_refused("[sensor]\nlenslets = 1\n",
			    "2: sensor.lenslets: 1 is below the minimum 2");
	assert_load_refused("[sensor]\nmin_fill = 0.001\n",
			    "2: sensor.min_fill: 0.001 is below the minimum "
			    "0.01");
	assert_load_refused("[mirror]\nlimit_low = -1.5\n",
			    "2: mirror.limit_low: -1.5 is below the minimum "
			    "-1");
}

static void load_refuses_number_with_trailing_junk(void **state)
{
	(void)state;
	assert_load_refused("[control]\ngain = 0.3x\n",
			    "2: control.gain: \"0.3x\" is not a number");
	assert_load_refused("[control]\ngain = 0.3 # note\n",
			    "2: control.gain: \"0.3 # note\" is not a number");
	assert_load_refused("[control]\ngain = 0x1p-2\n",
			    "2: control.gain: \"0x1p-2\" is not a number");
	assert_load_refused("[control]\nmodes = 12abc\n",
			    "2: control.modes: \"12abc\" is not an integer");
}

static void load_refuses_empty_number(void **state)
{
	(void)state;
	assert_load_refused("[control]\ngain =\n",
			    "2: control.gain: empty value, expected a number");
	assert_load_refused("[control]\nmodes = ; none\n",
			    "2: control.modes: empty value, expected an "
			    "integer");
}

static void load_refuses_nan_and_inf(void **state)
{
	(void)state;
	assert_load_refused("[control]\ngain = nan\n",
			    "2: control.gain: \"nan\" is not a finite number");
	assert_load_refused("[control]\ngain = -inf\n",
			    "2: control.gain: \"-inf\" is not a finite "
			    "number");
	assert_load_refused("[sensor]\nmin_flux = Infinity\n",
			    "2: sensor.min_flux: \"Infinity\" is not a finite "
			    "number");
}

static void load_refuses_integer_and_double_overflow(void **state)
{
	char rest[256];

	(void)state;
	snprintf(rest, sizeof(rest),
		 "2: control.modes: \"99999999999999999999\" does not fit in "
		 "an integer (%ld to %ld)",
		 LONG_MIN, LONG_MAX);
	assert_load_refused("[control]\nmodes = 99999999999999999999\n", rest);
	assert_load_refused("[sensor]\nmin_flux = 1e999\n",
			    "2: sensor.min_flux: \"1e999\" is too large for a "
			    "double");
}

static void load_refuses_double_for_int(void **state)
{
	(void)state;
	assert_load_refused("[control]\nmodes = 2.5\n",
			    "2: control.modes: \"2.5\" is not an integer");
	assert_load_refused("[calibration]\naverage = 1e3\n",
			    "2: calibration.average: \"1e3\" is not an "
			    "integer");
}

static void load_refuses_enum_not_in_choices_listing_them(void **state)
{
	(void)state;
	assert_load_refused("[mirror]\nlayout = hexagon\n",
			    "2: mirror.layout: \"hexagon\" is not one of "
			    "square, corners, circle");
}

static void load_refuses_unknown_section(void **state)
{
	char path[128], want[256];
	const char *prev = "";
	wt_config *c;
	wt_error err;
	size_t i;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	/* refused at its header, even with no keys under it */
	assert_int_equal(load_text(c, "[control]\ngain = 0.2\n[shutter]\n",
				   &err, path, sizeof(path)),
			 -WT_ECONFIG);
	snprintf(want, sizeof(want), "%s:3: [shutter]: unknown section; ",
		 path);
	assert_memory_equal(err.msg, want, strlen(want));
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		if (strcmp(prev, o->section)) {
			assert_non_null(strstr(err.msg, o->section));
		}
		prev = o->section;
	}
	/* inih keeps blanks inside brackets: so do we, and refuse */
	assert_int_equal(load_text(c, "[ control ]\ngain = 0.2\n", &err, path,
				   sizeof(path)),
			 -WT_ECONFIG);
	snprintf(want, sizeof(want), "%s:1: [ control ]: unknown section",
		 path);
	assert_memory_equal(err.msg, want, strlen(want));
	assert_true(wt_config_double(c, WT_OPT_CONTROL_GAIN) == 0.3);
	wt_config_destroy(c);
}

static void load_refuses_unknown_key_naming_section_keys(void **state)
{
	char keys[512], rest[600];

	(void)state;
	section_keys("control", keys, sizeof(keys));
	assert_non_null(strstr(keys, "gain, leak"));
	snprintf(rest, sizeof(rest),
		 "3: control.gian: unknown key; [control] has %s", keys);
	assert_load_refused("[control]\ngain = 0.2\ngian = 0.2\n", rest);
}

static void load_refuses_key_outside_any_section(void **state)
{
	(void)state;
	assert_load_refused("gain = 0.2\n[control]\n",
			    "1: gain: key outside any section (it belongs "
			    "under [control])");
	assert_load_refused("; nothing yet\nfocus = 1\n",
			    "2: focus: key outside any section");
}

static void load_refuses_duplicated_key_naming_first_line(void **state)
{
	(void)state;
	assert_load_refused("[control]\ngain = 0.2\nleak = 0.1\n\n"
			    "[sensor]\nlenslets = 8\n[control]\ngain = 0.4\n",
			    "8: control.gain: given twice, first at line 2");
}

static void load_refuses_line_longer_than_inih_limit(void **state)
{
	char text[600], value[256], path[128];
	wt_config *c;
	wt_error err;

	(void)state;
	/* "control = " + 189 characters: a 199-character line, read whole */
	memset(value, 'a', 189);
	memcpy(value, "ipc:///", 7);
	value[189] = '\0';
	snprintf(text, sizeof(text), "[daemon]\ncontrol = %s\n", value);
	assert_int_equal(wt_config_create(&c, &err), 0);
	if (load_text(c, text, &err, path, sizeof(path))) {
		fail_msg("%s", err.msg);
	}
	assert_string_equal(wt_config_string(c, WT_OPT_DAEMON_CONTROL), value);
	/* one more character: inih would cut it, we refuse it */
	snprintf(text, sizeof(text), "[daemon]\ncontrol = %sb\n", value);
	assert_int_equal(load_text(c, text, &err, path, sizeof(path)),
			 -WT_ECONFIG);
	assert_load_msg(&err, path,
			"2: line is 200 characters long; inih "
			"reads at most 199");
	/* a long comment counts too, and the tail is never parsed */
	memset(value, 'x', 250);
	value[0] = ';';
	value[250] = '\0';
	snprintf(text, sizeof(text), "[control]\n%s gain = 1.5\n", value);
	assert_int_equal(load_text(c, text, &err, path, sizeof(path)),
			 -WT_ECONFIG);
	assert_load_msg(&err, path,
			"2: line is 261 characters long; inih "
			"reads at most 199");
	wt_config_destroy(c);
}

static void load_refuses_lines_that_are_not_sections_or_keys(void **state)
{
	(void)state;
	assert_load_refused("[control]\njust words\n",
			    "2: \"just words\" is not a [section], a key = "
			    "value or a comment");
	assert_load_refused("[control\ngain = 0.2\n",
			    "1: section header without ']'");
	assert_load_refused("[control] gain = 0.2\n",
			    "1: [control]: text after the section header");
}

static void load_refuses_missing_file_with_strerror(void **state)
{
	char path[128], want[256];
	struct tmp_ini t;
	wt_config *c;
	wt_error err;

	(void)state;
	tmp_ini_write(&t, "", 0);
	tmp_ini_remove(&t);
	snprintf(path, sizeof(path), "%s", t.path);
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_load(c, path, &err), -ENOENT);
	/* reference: the C library's text for ENOENT */
	snprintf(want, sizeof(want), "%s: %s", path, strerror(ENOENT));
	assert_string_equal(err.msg, want);
	wt_config_destroy(c);
}

static void load_failure_leaves_config_unchanged(void **state)
{
	struct snapshot *before, *after;
	char path[128];
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "control.gain", "0.7", &err), 0);
	assert_int_equal(wt_config_set(c, "mirror.layout", "square", &err), 0);
	before = snapshot_take(c);
	/* good values first, then one bad line: nothing may stick */
	assert_int_equal(load_text(c,
				   "[control]\ngain = 0.1\nleak = 0.5\n"
				   "[mirror]\nlayout = circle\n"
				   "[sensor]\nlenslets = 999\n",
				   &err, path, sizeof(path)),
			 -WT_ECONFIG);
	after = snapshot_take(c);
	assert_memory_equal(before, after, sizeof(*before));
	assert_true(wt_config_double(c, WT_OPT_CONTROL_GAIN) == 0.7);
	free(before);
	free(after);
	wt_config_destroy(c);
}

static void load_reads_bool_in_every_spelling(void **state)
{
	static const struct {
		const char *word;
		bool value;
	} words[] = {
		{"true", true}, {"yes", true},	  {"on", true},	 {"1", true},
		{"TRUE", true}, {"false", false}, {"no", false}, {"off", false},
		{"0", false},	{"Off", false},
	};
	const wt_option *o = first_of_type(WT_TYPE_BOOL);
	char text[256], path[128], rest[256];
	wt_config *c;
	wt_error err;
	size_t i;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	for (i = 0; i < sizeof(words) / sizeof(words[0]); i++) {
		option_ini(o, words[i].word, text, sizeof(text));
		if (load_text(c, text, &err, path, sizeof(path))) {
			fail_msg("%s", err.msg);
		}
		assert_true(wt_config_bool(c, o->id) == words[i].value);
	}
	option_ini(o, "enabled", text, sizeof(text));
	assert_int_equal(load_text(c, text, &err, path, sizeof(path)),
			 -WT_ECONFIG);
	snprintf(rest, sizeof(rest),
		 "2: %s.%s: \"enabled\" is not a boolean (use true/false, "
		 "yes/no, on/off or 1/0)",
		 o->section, o->key);
	assert_load_msg(&err, path, rest);
	wt_config_destroy(c);
}

static void load_reads_zlist_continued_on_indented_lines(void **state)
{
	const wt_option *o = first_of_type(WT_TYPE_ZLIST);
	char text[512], path[128], value[256];
	double v[8], lo = o->min, hi = o->max;
	wt_config *c;
	wt_error err;
	int j[8];

	(void)state;
	/* five in-range values; the list runs over three lines */
	snprintf(value, sizeof(value),
		 "4:%.17g, 11:%.17g,\n    22:%.17g 5:%.17g ; note\n\t6:%.17g",
		 lo, hi, lo + (hi - lo) / 4, lo + (hi - lo) / 2, hi - 1e-3);
	option_ini(o, value, text, sizeof(text));
	assert_int_equal(wt_config_create(&c, &err), 0);
	if (load_text(c, text, &err, path, sizeof(path))) {
		fail_msg("%s", err.msg);
	}
	assert_int_equal(wt_config_zlist(c, o->id, NULL, NULL, 0), 5);
	assert_int_equal(wt_config_zlist(c, o->id, j, v, 8), 5);
	assert_int_equal(j[0], 4);
	assert_int_equal(j[1], 11);
	assert_int_equal(j[2], 22);
	assert_int_equal(j[3], 5);
	assert_int_equal(j[4], 6);
	assert_true(v[0] == lo && v[1] == hi);
	assert_true(v[2] == lo + (hi - lo) / 4 && v[3] == lo + (hi - lo) / 2);
	assert_true(v[4] == hi - 1e-3);
	/* a short buffer gets the first pairs only */
	assert_int_equal(wt_config_zlist(c, o->id, j, v, 2), 2);
	/* an empty value empties the list */
	option_ini(o, "", text, sizeof(text));
	assert_int_equal(load_text(c, text, &err, path, sizeof(path)), 0);
	assert_int_equal(wt_config_zlist(c, o->id, j, v, 8), 0);
	wt_config_destroy(c);
}

static void load_refuses_bad_zlist_at_the_line_holding_it(void **state)
{
	const wt_option *o = first_of_type(WT_TYPE_ZLIST);
	char text[512], rest[256], mid[40], above[40];

	(void)state;
	snprintf(mid, sizeof(mid), "%.17g", (o->min + o->max) / 2);
	/* a duplicate on a continuation line: its own line number */
	snprintf(rest, sizeof(rest), "4:%s, 5:%s,\n  6:%s 4:%s", mid, mid, mid,
		 mid);
	option_ini(o, rest, text, sizeof(text));
	snprintf(rest, sizeof(rest), "3: %s.%s: Noll index 4 appears twice",
		 o->section, o->key);
	assert_load_refused(text, rest);
	/* out of range and bad index on the key's line */
	snprintf(above, sizeof(above), "%.17g", o->max * 2 + 1);
	snprintf(rest, sizeof(rest), "4:%s", above);
	option_ini(o, rest, text, sizeof(text));
	snprintf(rest, sizeof(rest),
		 "2: %s.%s: Noll index 4: %s is above the maximum %.15g",
		 o->section, o->key, above, o->max);
	assert_load_refused(text, rest);
	snprintf(rest, sizeof(rest), "0:%s", mid);
	option_ini(o, rest, text, sizeof(text));
	snprintf(rest, sizeof(rest),
		 "2: %s.%s: Noll index 0 is outside "
		 "1..1000",
		 o->section, o->key);
	assert_load_refused(text, rest);
}

/* ---------------------------------------------------------------- */
/* set                                                               */

static void set_validates_like_load_without_file_line(void **state)
{
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "control.gain", " 0.45 ", &err), 0);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_GAIN) == 0.45);
	assert_int_equal(wt_config_set(c, "control.gain", "2.5", &err),
			 -WT_ECONFIG);
	assert_string_equal(err.msg,
			    "control.gain: 2.5 is above the maximum 2");
	assert_int_equal(wt_config_set(c, "mirror.layout", "Square", &err), 0);
	assert_string_equal(wt_config_string(c, WT_OPT_MIRROR_LAYOUT),
			    "square");
	assert_int_equal(wt_config_set(c, "control.modes", "1.5", &err),
			 -WT_ECONFIG);
	assert_string_equal(err.msg,
			    "control.modes: \"1.5\" is not an integer");
	/* structural options are set too; refusing them live is policy */
	assert_int_equal(wt_config_set(c, "sensor.lenslets", "32", &err), 0);
	assert_int_equal(wt_config_int(c, WT_OPT_SENSOR_LENSLETS), 32);
	wt_config_destroy(c);
}

static void set_refuses_unknown_option(void **state)
{
	char want[WT_ERROR_MAX], keys[400];
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "control.gian", "0.2", &err),
			 -WT_ECONFIG);
	section_keys("control", keys, sizeof(keys));
	snprintf(want, sizeof(want),
		 "control.gian: unknown key; [control] has %s", keys);
	assert_string_equal(err.msg, want);
	assert_int_equal(wt_config_set(c, "gain", "0.2", &err), -WT_ECONFIG);
	assert_string_equal(err.msg,
			    "gain: unknown option (expected section.key)");
	assert_int_equal(wt_config_set(c, "nosuch.gain", "0.2", &err),
			 -WT_ECONFIG);
	snprintf(want, sizeof(want),
		 "nosuch.gain: unknown section [nosuch]; "
		 "sections are %s",
		 "sensor");
	assert_memory_equal(err.msg, want, strlen(want));
	wt_config_destroy(c);
}

static void set_failure_leaves_value_unchanged(void **state)
{
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "driver.frames", "tcp://a:1", &err),
			 0);
	assert_int_equal(
		wt_config_set(c, "driver.frames", "tcp://a:1 ;x", &err),
		-WT_ECONFIG);
	assert_string_equal(err.msg, "driver.frames: ';' after a blank would "
				     "start a comment");
	assert_string_equal(wt_config_string(c, WT_OPT_DRIVER_FRAMES),
			    "tcp://a:1");
	assert_int_equal(wt_config_set(c, "control.leak", "-0.1", &err),
			 -WT_ECONFIG);
	assert_true(wt_config_double(c, WT_OPT_CONTROL_LEAK) == 0.01);
	assert_int_equal(wt_config_set(c, "mirror.layout", "round", &err),
			 -WT_ECONFIG);
	assert_int_equal(wt_config_enum(c, WT_OPT_MIRROR_LAYOUT), 1);
	wt_config_destroy(c);
}

/* ---------------------------------------------------------------- */
/* value types not yet used by the table, checked on described options */

static void bool_accepts_the_eight_spellings_in_any_case(void **state)
{
	static const char *const yes[] = {"true", "yes", "on", "1",
					  "TRUE", "Yes", "On"};
	static const char *const no[] = {"false", "no", "off", "0",
					 "False", "NO", "oFF"};
	wt_option o = described(WT_TYPE_BOOL, 0, 0);
	size_t i;

	(void)state;
	for (i = 0; i < sizeof(yes) / sizeof(yes[0]); i++) {
		assert_check_accepted(&o, yes[i]);
		assert_check_accepted(&o, no[i]);
	}
	assert_check_refused(&o, "maybe",
			     "test.values: \"maybe\" is not a boolean (use "
			     "true/false, yes/no, on/off or 1/0)");
	assert_check_refused(&o, "2",
			     "test.values: \"2\" is not a boolean (use "
			     "true/false, yes/no, on/off or 1/0)");
	assert_check_refused(&o, "",
			     "test.values: \"\" is not a boolean (use "
			     "true/false, yes/no, on/off or 1/0)");
}

static void string_is_refused_beyond_its_limits(void **state)
{
	wt_option o = described(WT_TYPE_STRING, 0, 0);
	char text[256];

	(void)state;
	/*
	 * "key = value" must fit on one line inih reads whole (199
	 * characters), which binds before the 200-character storage cap:
	 * key "k" leaves 195, key "values" 190.
	 */
	o.key = "k";
	memset(text, 's', sizeof(text));
	text[195] = '\0';
	assert_check_accepted(&o, text);
	text[195] = 's';
	text[196] = '\0';
	assert_check_refused(&o, text,
			     "test.k: text is 196 characters long; at most 195 "
			     "fit");
	o.key = "values";
	text[190] = '\0';
	assert_check_accepted(&o, text);
	text[190] = 's';
	text[191] = '\0';
	assert_check_refused(&o, text,
			     "test.values: text is 191 characters "
			     "long; at most 190 fit");
	/* past the storage cap, refused too (and a NULL err is fine) */
	memset(text, 's', WT_CONFIG_STRING_MAX + 1);
	text[WT_CONFIG_STRING_MAX + 1] = '\0';
	assert_int_equal(wt_option_check(&o, text, NULL), -WT_ECONFIG);
	/* nothing that would break the INI line it is written on */
	assert_check_refused(&o, "a\tb",
			     "test.values: control character at position 2");
	assert_check_refused(&o, "a ;b",
			     "test.values: ';' after a blank would "
			     "start a comment");
	assert_check_accepted(&o, "a;b");
}

static void zlist_accepts_pairs_separated_by_commas_and_blanks(void **state)
{
	wt_option o = described(WT_TYPE_ZLIST, -1, 1);

	(void)state;
	assert_check_accepted(&o, "4:0.05, 11:-0.12");
	assert_check_accepted(&o, "4:0.05 11:-0.12,5:1e-3");
	assert_check_accepted(&o, "  4 : 0.05 ,  1000:-1  ");
	assert_check_accepted(&o, "");
	assert_check_accepted(&o, "1:1, 2:-1");
}

static void zlist_refuses_bad_noll_index(void **state)
{
	wt_option o = described(WT_TYPE_ZLIST, -1, 1);

	(void)state;
	assert_check_refused(&o, "0:0.1",
			     "test.values: Noll index 0 is outside 1..1000");
	assert_check_refused(&o, "4:0.1, 1001:0.1",
			     "test.values: Noll index 1001 is outside 1..1000");
	assert_check_refused(&o, "x:0.1",
			     "test.values: Noll index: \"x\" is not an "
			     "integer");
	assert_check_refused(&o, "4.5:0.1",
			     "test.values: Noll index: \"4.5\" is not an "
			     "integer");
}

static void zlist_refuses_duplicate_index_in_one_list(void **state)
{
	wt_option o = described(WT_TYPE_ZLIST, -1, 1);

	(void)state;
	assert_check_refused(&o, "4:0.1, 11:0.2, 4:0.3",
			     "test.values: Noll index 4 appears twice");
}

static void zlist_refuses_value_out_of_range(void **state)
{
	wt_option o = described(WT_TYPE_ZLIST, -0.5, 0.5);

	(void)state;
	assert_check_refused(&o, "4:0.1, 5:0.75",
			     "test.values: Noll index 5: 0.75 is above the "
			     "maximum 0.5");
	assert_check_refused(&o, "6:-0.6",
			     "test.values: Noll index 6: -0.6 is below the "
			     "minimum -0.5");
	assert_check_refused(&o, "6:nan",
			     "test.values: Noll index 6: \"nan\" is not a "
			     "finite number");
}

static void zlist_refuses_malformed_pair(void **state)
{
	wt_option o = described(WT_TYPE_ZLIST, -1, 1);

	(void)state;
	assert_check_refused(&o, "4",
			     "test.values: \"4\" is not an index:value pair");
	assert_check_refused(&o, "4-0.1",
			     "test.values: \"4-0.1\" is not an index:value "
			     "pair");
	assert_check_refused(
		&o, "4:", "test.values: \"4:\" is not an index:value pair");
	assert_check_refused(&o, ":0.1",
			     "test.values: \":0.1\" is not an index:value "
			     "pair");
	assert_check_refused(&o, "4:0.1x",
			     "test.values: Noll index 4: \"0.1x\" is not a "
			     "number");
	assert_check_refused(&o, "4::0.1",
			     "test.values: Noll index 4: \":0.1\" is not a "
			     "number");
	assert_check_refused(&o, "4:0.1,,5:0.2",
			     "test.values: empty list entry");
	assert_check_refused(&o, ", 4:0.1", "test.values: empty list entry");
}

static void lists_refuse_more_than_list_max_entries(void **state)
{
	wt_option z = described(WT_TYPE_ZLIST, -1, 1);
	wt_option d = described(WT_TYPE_DLIST, -1, 1);
	char *text = malloc(16 * (WT_CONFIG_LIST_MAX + 2));
	char msg[64];
	size_t used;
	int k;

	(void)state;
	assert_non_null(text);
	snprintf(msg, sizeof(msg), "test.values: more than %d entries",
		 WT_CONFIG_LIST_MAX);
	for (used = 0, k = 1; k <= WT_CONFIG_LIST_MAX; k++) {
		used += (size_t)sprintf(text + used, "%d:0.5, ", k);
	}
	assert_check_accepted(&z, text);
	sprintf(text + used, "%d:0.5", WT_CONFIG_LIST_MAX + 1);
	assert_check_refused(&z, text, msg);
	for (used = 0, k = 1; k <= WT_CONFIG_LIST_MAX; k++) {
		used += (size_t)sprintf(text + used, "0.25 ");
	}
	assert_check_accepted(&d, text);
	sprintf(text + used, "0.25");
	assert_check_refused(&d, text, msg);
	free(text);
}

static void dlist_refuses_malformed_and_out_of_range_entries(void **state)
{
	wt_option o = described(WT_TYPE_DLIST, 0, 2);

	(void)state;
	assert_check_accepted(&o, "0.5 0.5, 0.3");
	assert_check_accepted(&o, "2,0,1e-3");
	assert_check_refused(&o, "0.5 0.5, 2.5",
			     "test.values: entry 3: 2.5 is above the maximum "
			     "2");
	assert_check_refused(&o, "0.5 -0.1",
			     "test.values: entry 2: -0.1 is below the minimum "
			     "0");
	assert_check_refused(&o, "0.5 0.3x",
			     "test.values: entry 2: \"0.3x\" is not a number");
	assert_check_refused(&o, "0.5 inf",
			     "test.values: entry 2: \"inf\" is not a finite "
			     "number");
	assert_check_refused(&o, "0.5,,0.3", "test.values: empty list entry");
}

/* ---------------------------------------------------------------- */
/* output                                                            */

static void print_help_lists_every_option_on_one_line(void **state)
{
	char *text = NULL, *line, *save = NULL, name[128];
	size_t len = 0, i = 0;
	FILE *f = open_memstream(&text, &len);

	(void)state;
	assert_non_null(f);
	wt_config_print_help(f);
	assert_int_equal(fclose(f), 0);
	for (line = strtok_r(text, "\n", &save); line;
	     line = strtok_r(NULL, "\n", &save), i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);
		const char *type_name[] = {"int",  "double", "bool", "string",
					   "enum", "zlist",  "dlist"};
		char *p;

		assert_non_null(o);
		snprintf(name, sizeof(name), "%s.%s ", o->section, o->key);
		assert_memory_equal(line, name, strlen(name));
		p = line + strlen(name);
		p += strspn(p, " ");
		assert_memory_equal(p, type_name[o->type],
				    strlen(type_name[o->type]));
		p += strlen(type_name[o->type]);
		p += strspn(p, " ");
		if (o->def[0]) {
			assert_memory_equal(p, o->def, strlen(o->def));
		}
		if (o->type == WT_TYPE_ENUM) {
			assert_non_null(strstr(p, o->choices));
		}
		if (o->type == WT_TYPE_INT) {
			/* integer limits in full, never 1e+06 */
			snprintf(name, sizeof(name), "  [%.0f, %.0f]  ", o->min,
				 o->max);
			assert_non_null(strstr(p, name));
		}
		assert_non_null(strstr(p, o->live ? "  live " : "  restart "));
		/* the help closes the line */
		assert_string_equal(line + strlen(line) - strlen(o->help),
				    o->help);
	}
	assert_int_equal(i, WT_OPT_COUNT);
	assert_non_null(strstr(text, "[2, 256]"));
	free(text);
}

/* Write c as INI and read it back into a fresh config. */
static wt_config *round_trip(const wt_config *c, const char *only, char **ini)
{
	size_t len = 0;
	struct tmp_ini t;
	wt_config *back;
	wt_error err;
	FILE *f;

	*ini = NULL;
	f = open_memstream(ini, &len);
	assert_non_null(f);
	wt_config_write_ini(c, f, only);
	assert_int_equal(fclose(f), 0);
	tmp_ini_write(&t, *ini, len);
	assert_int_equal(wt_config_create(&back, &err), 0);
	if (wt_config_load(back, t.path, &err)) {
		fail_msg("%s\n%s", err.msg, *ini);
	}
	tmp_ini_remove(&t);
	return back;
}

static void write_ini_round_trips_defaults(void **state)
{
	wt_config *c, *back;
	wt_error err;
	char *ini;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	back = round_trip(c, NULL, &ini);
	assert_configs_equal(c, back);
	free(ini);
	wt_config_destroy(back);
	wt_config_destroy(c);
}

/* A valid value for o different from its default where possible. */
static void changed_value(const wt_option *o, char *buf, size_t len)
{
	size_t used = 0;
	int k;

	switch (o->type) {
	case WT_TYPE_INT:
		snprintf(buf, len, "%ld",
			 (long)(o->min + (o->max - o->min) / 3));
		break;
	case WT_TYPE_DOUBLE:
		/* a third of the range needs all 17 digits to read back */
		snprintf(buf, len, "%.17g", o->min + (o->max - o->min) / 3);
		break;
	case WT_TYPE_BOOL:
		snprintf(buf, len, "%s",
			 strcmp(o->def, "true") ? "yes" : "off");
		break;
	case WT_TYPE_STRING:
		snprintf(buf, len, "tcp://192.168.1.%d:5%03d=x", (int)o->id,
			 (int)o->id);
		break;
	case WT_TYPE_ENUM:
		snprintf(buf, len, "%s", strrchr(o->choices, '|') + 1);
		break;
	case WT_TYPE_ZLIST:
	case WT_TYPE_DLIST:
		/* the longest list: its INI text spans many lines */
		for (k = 0; k < WT_CONFIG_LIST_MAX; k++) {
			double v = o->min + (o->max - o->min) * k /
						    (WT_CONFIG_LIST_MAX - 1);

			if (o->type == WT_TYPE_ZLIST) {
				used += (size_t)snprintf(buf + used, len - used,
							 "%d:%.17g ", 1000 - k,
							 v);
			} else {
				used += (size_t)snprintf(buf + used, len - used,
							 "%.17g, ", v);
			}
		}
		break;
	}
}

static void write_ini_round_trips_after_several_sets(void **state)
{
	char *value = malloc(WT_CONFIG_TEXT_MAX * 2), name[128];
	wt_config *c, *back;
	wt_error err;
	size_t i;
	char *ini;

	(void)state;
	assert_non_null(value);
	assert_int_equal(wt_config_create(&c, &err), 0);
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);

		changed_value(o, value, WT_CONFIG_TEXT_MAX * 2);
		snprintf(name, sizeof(name), "%s.%s", o->section, o->key);
		if (wt_config_set(c, name, value, &err)) {
			fail_msg("%s", err.msg);
		}
	}
	assert_int_equal(wt_config_set(c, "control.gain", "0.1", &err), 0);
	assert_int_equal(
		wt_config_set(c, "control.gain", "0.30000000000000004", &err),
		0);
	back = round_trip(c, NULL, &ini);
	assert_configs_equal(c, back);
	/* the values really moved away from the defaults */
	assert_true(wt_config_double(back, WT_OPT_CONTROL_GAIN) == 0.1 + 0.2);
	assert_int_equal(wt_config_enum(back, WT_OPT_MIRROR_LAYOUT), 2);
	assert_int_equal(wt_config_int(back, WT_OPT_SENSOR_LENSLETS),
			 2 + (256 - 2) / 3);
	free(ini);
	free(value);
	wt_config_destroy(back);
	wt_config_destroy(c);
}

static void write_ini_comments_each_option(void **state)
{
	static const char *const type_name[] = {
		"int", "double", "bool", "string", "enum", "zlist", "dlist"};
	char *ini, *line, *save = NULL, comment[1024], want[512];
	const char *section = "";
	wt_config *c, *back;
	wt_error err;
	int seen = 0;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	back = round_trip(c, NULL, &ini);
	comment[0] = '\0';
	for (line = strtok_r(ini, "\n", &save); line;
	     line = strtok_r(NULL, "\n", &save)) {
		const char *live;
		const wt_option *o;
		char name[128], *eq;

		assert_true(strlen(line) <= 80);
		if (line[0] == '[') {
			section = line + 1;
			continue;
		}
		if (line[0] == ';') {
			/* the comment above a key, its lines joined */
			assert_memory_equal(line, "; ", 2);
			snprintf(comment + strlen(comment),
				 sizeof(comment) - strlen(comment), "%s%s",
				 comment[0] ? " " : "", line + 2);
			continue;
		}
		if (line[0] == '\t') {
			continue; /* a list's continuation */
		}
		eq = strstr(line, " =");
		assert_non_null(eq);
		snprintf(name, sizeof(name), "%.*s.%.*s",
			 (int)strcspn(section, "]"), section, (int)(eq - line),
			 line);
		o = wt_option_find(name);
		assert_non_null(o);
		assert_int_equal(o->id, seen);
		live = o->live ? "live" : "restart";
		snprintf(want, sizeof(want), "%s (%s, ", o->help,
			 type_name[o->type]);
		assert_memory_equal(comment, want, strlen(want));
		snprintf(want, sizeof(want), ", %s)", live);
		if (o->type == WT_TYPE_STRING) {
			snprintf(want, sizeof(want), "(string, %s)", live);
		}
		if (o->type == WT_TYPE_ENUM) {
			snprintf(want, sizeof(want), "(enum, {%s}, %s)",
				 o->choices, live);
		}
		assert_string_equal(comment + strlen(comment) - strlen(want),
				    want);
		comment[0] = '\0';
		seen++;
	}
	assert_int_equal(seen, WT_OPT_COUNT);
	free(ini);
	wt_config_destroy(back);
	wt_config_destroy(c);
}

static void write_ini_writes_only_requested_sections(void **state)
{
	wt_config *c, *back;
	wt_error err;
	char *ini;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(wt_config_set(c, "mirror.actuators", "9", &err), 0);
	assert_int_equal(wt_config_set(c, "control.gain", "0.9", &err), 0);
	back = round_trip(c, "sensor, mirror", &ini);
	assert_non_null(strstr(ini, "[sensor]\n"));
	assert_non_null(strstr(ini, "[mirror]\n"));
	assert_null(strstr(ini, "[control]"));
	assert_null(strstr(ini, "[daemon]"));
	assert_int_equal(wt_config_int(back, WT_OPT_MIRROR_ACTUATORS), 9);
	assert_true(wt_config_double(back, WT_OPT_CONTROL_GAIN) == 0.3);
	free(ini);
	wt_config_destroy(back);
	wt_config_destroy(c);
}

static void copy_is_a_plain_independent_copy(void **state)
{
	wt_config *a, *b;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&a, &err), 0);
	assert_int_equal(wt_config_create(&b, &err), 0);
	assert_int_equal(wt_config_set(a, "driver.frames", "tcp://x:1", &err),
			 0);
	assert_int_equal(wt_config_set(a, "control.modes", "17", &err), 0);
	assert_int_equal(wt_config_copy(b, a), 0);
	assert_configs_equal(a, b);
	assert_int_equal(wt_config_set(a, "driver.frames", "tcp://y:2", &err),
			 0);
	assert_string_equal(wt_config_string(b, WT_OPT_DRIVER_FRAMES),
			    "tcp://x:1");
	assert_int_equal(wt_config_int(b, WT_OPT_CONTROL_MODES), 17);
	assert_int_equal(wt_config_copy(NULL, a), -EINVAL);
	wt_config_destroy(a);
	wt_config_destroy(b);
}

static void format_and_readers_refuse_misuse(void **state)
{
	char buf[8];
	double v[4];
	int j[4];
	wt_config *c;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&c, &err), 0);
	assert_int_equal(
		wt_config_format(c, WT_OPT_CONTROL_GAIN, buf, sizeof(buf)), 3);
	assert_string_equal(buf, "0.3");
	assert_int_equal(
		wt_config_format(c, WT_OPT_DRIVER_FRAMES, buf, sizeof(buf)),
		-ENOSPC);
	assert_int_equal(wt_config_format(c, WT_OPT_COUNT, buf, sizeof(buf)),
			 -EINVAL);
	/* a reader of another type gives its neutral value */
	assert_int_equal(wt_config_int(c, WT_OPT_CONTROL_GAIN), 0);
	assert_true(wt_config_double(c, WT_OPT_SENSOR_LENSLETS) == 0);
	assert_int_equal(wt_config_enum(c, WT_OPT_CONTROL_GAIN), -1);
	assert_string_equal(wt_config_string(c, WT_OPT_CONTROL_GAIN), "");
	assert_int_equal(wt_config_zlist(c, WT_OPT_CONTROL_GAIN, j, v, 4),
			 -EINVAL);
	assert_int_equal(wt_config_dlist(c, WT_OPT_CONTROL_GAIN, v, 4),
			 -EINVAL);
	wt_config_destroy(c);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(table_defaults_validate_and_lie_in_range),
	cmocka_unit_test(table_names_are_unique_and_sections_contiguous),
	cmocka_unit_test(option_find_and_get_agree_with_table),
	cmocka_unit_test(create_sets_every_option_to_its_default),
	cmocka_unit_test(load_reads_values_and_syntax_of_fixture),
	cmocka_unit_test(load_overlays_file_on_current_values),
	cmocka_unit_test(load_counts_lines_through_comments_blanks_and_crlf),
	cmocka_unit_test(load_refuses_value_above_maximum),
	cmocka_unit_test(load_refuses_value_below_minimum),
	cmocka_unit_test(load_refuses_number_with_trailing_junk),
	cmocka_unit_test(load_refuses_empty_number),
	cmocka_unit_test(load_refuses_nan_and_inf),
	cmocka_unit_test(load_refuses_integer_and_double_overflow),
	cmocka_unit_test(load_refuses_double_for_int),
	cmocka_unit_test(load_refuses_enum_not_in_choices_listing_them),
	cmocka_unit_test(load_refuses_unknown_section),
	cmocka_unit_test(load_refuses_unknown_key_naming_section_keys),
	cmocka_unit_test(load_refuses_key_outside_any_section),
	cmocka_unit_test(load_refuses_duplicated_key_naming_first_line),
	cmocka_unit_test(load_refuses_line_longer_than_inih_limit),
	cmocka_unit_test(load_refuses_lines_that_are_not_sections_or_keys),
	cmocka_unit_test(load_refuses_missing_file_with_strerror),
	cmocka_unit_test(load_failure_leaves_config_unchanged),
	cmocka_unit_test(load_reads_bool_in_every_spelling),
	cmocka_unit_test(load_reads_zlist_continued_on_indented_lines),
	cmocka_unit_test(load_refuses_bad_zlist_at_the_line_holding_it),
	cmocka_unit_test(set_validates_like_load_without_file_line),
	cmocka_unit_test(set_refuses_unknown_option),
	cmocka_unit_test(set_failure_leaves_value_unchanged),
	cmocka_unit_test(bool_accepts_the_eight_spellings_in_any_case),
	cmocka_unit_test(string_is_refused_beyond_its_limits),
	cmocka_unit_test(zlist_accepts_pairs_separated_by_commas_and_blanks),
	cmocka_unit_test(zlist_refuses_bad_noll_index),
	cmocka_unit_test(zlist_refuses_duplicate_index_in_one_list),
	cmocka_unit_test(zlist_refuses_value_out_of_range),
	cmocka_unit_test(zlist_refuses_malformed_pair),
	cmocka_unit_test(lists_refuse_more_than_list_max_entries),
	cmocka_unit_test(dlist_refuses_malformed_and_out_of_range_entries),
	cmocka_unit_test(print_help_lists_every_option_on_one_line),
	cmocka_unit_test(write_ini_round_trips_defaults),
	cmocka_unit_test(write_ini_round_trips_after_several_sets),
	cmocka_unit_test(write_ini_comments_each_option),
	cmocka_unit_test(write_ini_writes_only_requested_sections),
	cmocka_unit_test(copy_is_a_plain_independent_copy),
	cmocka_unit_test(format_and_readers_refuse_misuse),
};

WT_TEST_MAIN(tests)
