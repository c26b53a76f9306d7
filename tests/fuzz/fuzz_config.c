/*
 * fuzz_config.c - libFuzzer target for the INI loader and `set`
 * (lib/wt_config.h).
 *
 * The input is written to an in-memory file (memfd, or a temporary file
 * where memfd is missing) and loaded, then its lines are also read as
 * "section.key value" pairs (a key under a [section] line gets that
 * section) and applied with wt_config_set().  Properties checked, all from
 * wt_config.h:
 *
 * - a refused load leaves the config exactly as it was (compared through
 *   wt_config_format() of every option), says "path:line: ..." with a line
 *   of the file, and does not depend on the config's earlier values;
 * - an accepted load gives the same values whatever the config held before
 *   (for the options the file names), and every value it holds is valid:
 *   in range, formats into WT_CONFIG_TEXT_MAX bytes, reads back through
 *   wt_config_set() to the same text, and wt_config_write_ini() writes a
 *   file that loads back to the same values;
 * - a refused set leaves the option unchanged and names the option first;
 *   set and wt_option_check() agree; an accepted value is valid as above.
 */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>

#include "fuzz_util.h"
#include "wt_config.h"

/* Lines of one input applied with wt_config_set(), at most. */
#define MAX_SETS 64

static struct {
	int fd[2];	  /* the input file, the written-back file */
	char path[2][96]; /* their names */
	wt_config *defaults;
	char (*def_text)[WT_CONFIG_TEXT_MAX]; /* formatted defaults */
} g;

static void remove_scratch(void)
{
	for (int k = 0; k < 2; k++) {
		if (strncmp(g.path[k], "/proc/", 6) != 0) {
			unlink(g.path[k]);
		}
	}
}

/*
 * A file fopen() can open by name: a memfd seen through /proc/self/fd
 * (nothing touches a disk), else a temporary file removed at exit.
 */
static void open_scratch(int k)
{
	const char *dir = getenv("WT_FUZZ_TMP");
	char tmpl[96];

	g.fd[k] = memfd_create(k ? "wt_fuzz_ini_out" : "wt_fuzz_ini",
			       MFD_CLOEXEC);
	if (g.fd[k] >= 0) {
		snprintf(g.path[k], sizeof(g.path[k]), "/proc/self/fd/%d",
			 g.fd[k]);
		if (access(g.path[k], R_OK | W_OK) == 0) {
			return;
		}
		close(g.fd[k]);
	}
	snprintf(tmpl, sizeof(tmpl), "%.60s/wt_fuzz_config_XXXXXX",
		 dir && dir[0] ? dir : "/tmp");
	g.fd[k] = mkstemp(tmpl);
	if (g.fd[k] < 0) {
		perror("fuzz_config: mkstemp");
		abort();
	}
	snprintf(g.path[k], sizeof(g.path[k]), "%s", tmpl);
	atexit(remove_scratch);
}

static void write_scratch(int k, const uint8_t *data, size_t size)
{
	size_t done = 0;

	if (ftruncate(g.fd[k], 0) != 0) {
		abort();
	}
	while (done < size) {
		ssize_t n =
			pwrite(g.fd[k], data + done, size - done, (off_t)done);

		if (n <= 0) {
			abort();
		}
		done += (size_t)n;
	}
}

int LLVMFuzzerInitialize(int *argc, char ***argv);

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
	wt_error err;

	(void)argc;
	(void)argv;
	open_scratch(0);
	open_scratch(1);
	if (wt_config_create(&g.defaults, &err) != 0) {
		fprintf(stderr, "fuzz_config: defaults: %s\n", err.msg);
		abort();
	}
	g.def_text = calloc(wt_option_count(), sizeof(*g.def_text));
	if (!g.def_text) {
		abort();
	}
	for (size_t i = 0; i < wt_option_count(); i++) {
		int n = wt_config_format(g.defaults, (wt_opt_id)i,
					 g.def_text[i], WT_CONFIG_TEXT_MAX);

		FUZZ_CHECK(n >= 0, "default of option %zu: format %d", i, n);
	}
	return 0;
}

static const char *name_of(const wt_option *o)
{
	static char name[160];

	snprintf(name, sizeof(name), "%s.%s", o->section, o->key);
	return name;
}

/* Every option's text: text[i] for option i. */
static void format_all(const wt_config *c, char (*text)[WT_CONFIG_TEXT_MAX])
{
	for (size_t i = 0; i < wt_option_count(); i++) {
		int n = wt_config_format(c, (wt_opt_id)i, text[i],
					 WT_CONFIG_TEXT_MAX);

		FUZZ_CHECK(n >= 0 && (size_t)n == strlen(text[i]),
			   "%s: format gave %d (WT_CONFIG_TEXT_MAX is meant to "
			   "hold any value)",
			   name_of(wt_option_get((wt_opt_id)i)), n);
	}
}

/* The value c holds for option o is one the table allows. */
static void check_valid(const wt_config *c, const wt_option *o,
			const char *text)
{
	static int j[WT_CONFIG_LIST_MAX];
	static double v[WT_CONFIG_LIST_MAX];
	const char *choice, *s;
	double d;
	long i;
	int n, e;

	switch (o->type) {
	case WT_TYPE_INT:
		i = wt_config_int(c, o->id);
		FUZZ_CHECK(i >= o->min && i <= o->max, "%s = %ld outside range",
			   name_of(o), i);
		break;
	case WT_TYPE_DOUBLE:
		d = wt_config_double(c, o->id);
		FUZZ_CHECK(isfinite(d) && d >= o->min && d <= o->max,
			   "%s = %g outside range", name_of(o), d);
		break;
	case WT_TYPE_BOOL:
		FUZZ_CHECK(!strcmp(text, "true") || !strcmp(text, "false"),
			   "%s = '%s'", name_of(o), text);
		break;
	case WT_TYPE_STRING:
		s = wt_config_string(c, o->id);
		FUZZ_CHECK(
			strlen(s) <= WT_CONFIG_STRING_MAX && !strcmp(s, text),
			"%s: string of %zu characters", name_of(o), strlen(s));
		for (size_t k = 0; s[k]; k++) {
			FUZZ_CHECK((unsigned char)s[k] >= 0x20 && s[k] != 0x7f,
				   "%s: control character kept", name_of(o));
		}
		break;
	case WT_TYPE_ENUM:
		e = wt_config_enum(c, o->id);
		s = wt_config_string(c, o->id);
		choice = o->choices;
		for (n = 0; n < e && choice; n++) {
			choice = strchr(choice, '|');
			choice = choice ? choice + 1 : NULL;
		}
		FUZZ_CHECK(e >= 0 && choice && !strncmp(choice, s, strlen(s)) &&
				   (choice[strlen(s)] == '|' ||
				    choice[strlen(s)] == '\0'),
			   "%s: enum %d '%s' is not choice %d of %s",
			   name_of(o), e, s, e, o->choices);
		break;
	case WT_TYPE_ZLIST:
		n = wt_config_zlist(c, o->id, j, v, WT_CONFIG_LIST_MAX);
		FUZZ_CHECK(
			n >= 0 && n <= WT_CONFIG_LIST_MAX &&
				n == wt_config_zlist(c, o->id, NULL, NULL, 0),
			"%s: %d entries", name_of(o), n);
		for (int k = 0; k < n; k++) {
			FUZZ_CHECK(j[k] >= 1 && j[k] <= WT_CONFIG_NOLL_MAX &&
					   isfinite(v[k]) && v[k] >= o->min &&
					   v[k] <= o->max,
				   "%s: entry %d is %d:%g", name_of(o), k, j[k],
				   v[k]);
			for (int q = 0; q < k; q++) {
				FUZZ_CHECK(j[q] != j[k],
					   "%s: Noll index %d "
					   "twice",
					   name_of(o), j[k]);
			}
		}
		break;
	case WT_TYPE_DLIST:
		n = wt_config_dlist(c, o->id, v, WT_CONFIG_LIST_MAX);
		FUZZ_CHECK(n >= 0 && n <= WT_CONFIG_LIST_MAX &&
				   n == wt_config_dlist(c, o->id, NULL, 0),
			   "%s: %d entries", name_of(o), n);
		for (int k = 0; k < n; k++) {
			FUZZ_CHECK(isfinite(v[k]) && v[k] >= o->min &&
					   v[k] <= o->max,
				   "%s: entry %d is %g", name_of(o), k, v[k]);
		}
		break;
	}
}

/*
 * Every value of c is valid, and its text reads back to itself through
 * wt_option_check() and wt_config_set() on a scratch config.
 */
static void check_values(const wt_config *c, char (*text)[WT_CONFIG_TEXT_MAX],
			 wt_config *scratch, char *buf)
{
	wt_error err;

	for (size_t i = 0; i < wt_option_count(); i++) {
		const wt_option *o = wt_option_get((wt_opt_id)i);
		int rc;

		check_valid(c, o, text[i]);
		rc = wt_option_check(o, text[i], &err);
		FUZZ_CHECK(rc == 0, "%s: own text '%.80s' refused: %s",
			   name_of(o), text[i], err.msg);
		rc = wt_config_set(scratch, name_of(o), text[i], &err);
		FUZZ_CHECK(rc == 0, "%s: set of own text '%.80s' refused: %s",
			   name_of(o), text[i], err.msg);
		wt_config_format(scratch, (wt_opt_id)i, buf,
				 WT_CONFIG_TEXT_MAX);
		FUZZ_CHECK(!strcmp(buf, text[i]),
			   "%s: '%.80s' reads back as '%.80s'", name_of(o),
			   text[i], buf);
	}
}

/* The file wt_config_write_ini() writes loads back to the same values. */
static void check_write_ini(const wt_config *c,
			    char (*text)[WT_CONFIG_TEXT_MAX],
			    char (*back)[WT_CONFIG_TEXT_MAX])
{
	wt_config *again;
	wt_error err;
	FILE *f = fopen(g.path[1], "w");
	int rc;

	if (!f) {
		abort();
	}
	wt_config_write_ini(c, f, NULL);
	if (fclose(f) != 0) {
		abort();
	}
	if (wt_config_create(&again, &err) != 0) {
		abort();
	}
	rc = wt_config_load(again, g.path[1], &err);
	FUZZ_CHECK(rc == 0, "written INI refused: %s", err.msg);
	format_all(again, back);
	for (size_t i = 0; i < wt_option_count(); i++) {
		FUZZ_CHECK(!strcmp(back[i], text[i]),
			   "%s: '%.80s' written, '%.80s' read back",
			   name_of(wt_option_get((wt_opt_id)i)), text[i],
			   back[i]);
	}
	wt_config_destroy(again);
}

/* "path:LINE: reason" with LINE a line of the file (1..lines). */
static void check_load_message(const wt_error *err, int rc, size_t lines)
{
	size_t plen = strlen(g.path[0]);
	const char *p = err->msg + plen;
	char *end;
	long line;

	FUZZ_CHECK(rc == -WT_ECONFIG && err->code == rc,
		   "load refused with %d (code %d): %s", rc, err->code,
		   err->msg);
	FUZZ_CHECK(!strncmp(err->msg, g.path[0], plen) && p[0] == ':',
		   "message does not start with the path: %s", err->msg);
	line = strtol(p + 1, &end, 10);
	FUZZ_CHECK(end > p + 1 && end[0] == ':' && end[1] == ' ' &&
			   end[2] != '\0',
		   "message is not path:line: reason: %s", err->msg);
	FUZZ_CHECK(line >= 1 && (size_t)line <= lines,
		   "line %ld of a file of %zu lines: %s", line, lines,
		   err->msg);
}

/*
 * The input's lines as set pairs: "[section]" sets the section; otherwise
 * NAME is the text up to the first blank, '=' or ':', VALUE the rest after
 * one '=' or ':' and blanks; a NAME without '.' gets the section.
 */
static void apply_sets(wt_config *c, const uint8_t *data, size_t size,
		       char *before, char *after)
{
	char section[64] = "", name[256];
	size_t pos = 0;
	int sets = 0;

	while (pos < size && sets < MAX_SETS) {
		const uint8_t *nl = memchr(data + pos, '\n', size - pos);
		size_t end = nl ? (size_t)(nl - data) : size;
		char *line = fuzz_strndup(data + pos, end - pos);
		char *s = line, *value;
		const wt_option *o;
		size_t n;
		wt_error err;
		int rc, check;

		pos = end + 1;
		s += strspn(s, " \t");
		if (s[0] == '[') {
			n = strcspn(s + 1, "]");
			snprintf(section, sizeof(section), "%.*s", (int)n,
				 s + 1);
			free(line);
			continue;
		}
		n = strcspn(s, " \t=:");
		if (n == 0 || strlen(s) - n > 4096) {
			free(line);
			continue;
		}
		value = s + n;
		value += strspn(value, " \t");
		if (*value == '=' || *value == ':') {
			value++;
		}
		s[n] = '\0';
		if (strchr(s, '.')) {
			snprintf(name, sizeof(name), "%s", s);
		} else {
			snprintf(name, sizeof(name), "%s.%s", section, s);
		}
		sets++;
		o = wt_option_find(name);
		if (o) {
			wt_config_format(c, o->id, before, WT_CONFIG_TEXT_MAX);
		}
		rc = wt_config_set(c, name, value, &err);
		if (rc != 0) {
			FUZZ_CHECK(rc == -WT_ECONFIG && err.code == rc &&
					   !strncmp(err.msg, name,
						    strlen(name) < 60
							    ? strlen(name)
							    : 60),
				   "set '%s' refused with %d: %s", name, rc,
				   err.msg);
		}
		if (!o) {
			FUZZ_CHECK(rc != 0, "unknown option '%s' accepted",
				   name);
			free(line);
			continue;
		}
		check = wt_option_check(o, value, NULL);
		FUZZ_CHECK(check == rc, "set '%s' gave %d, check gave %d", name,
			   rc, check);
		wt_config_format(c, o->id, after, WT_CONFIG_TEXT_MAX);
		if (rc != 0) {
			FUZZ_CHECK(!strcmp(before, after),
				   "refused set changed %s from '%.80s' to "
				   "'%.80s'",
				   name, before, after);
		} else {
			check_valid(c, o, after);
		}
		free(line);
	}
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static char text[3][WT_OPT_COUNT][WT_CONFIG_TEXT_MAX];
	static char buf[2][WT_CONFIG_TEXT_MAX];
	char(*loaded)[WT_CONFIG_TEXT_MAX] = text[0];
	char(*mixed_before)[WT_CONFIG_TEXT_MAX] = text[1];
	char(*mixed_after)[WT_CONFIG_TEXT_MAX] = text[2];
	wt_config *c, *mixed;
	wt_error err, err2;
	size_t lines = 0;
	int rc, rc2;

	if (size > 65536) {
		return 0; /* config files are small; keep runs quick */
	}
	for (size_t i = 0; i < size; i++) {
		lines += data[i] == '\n';
	}
	lines += size > 0 && data[size - 1] != '\n';
	write_scratch(0, data, size);

	/* 1. load over the defaults */
	if (wt_config_create(&c, &err) != 0) {
		abort();
	}
	rc = wt_config_load(c, g.path[0], &err);
	format_all(c, loaded);
	if (rc != 0) {
		check_load_message(&err, rc, lines);
		for (size_t i = 0; i < wt_option_count(); i++) {
			FUZZ_CHECK(!strcmp(loaded[i], g.def_text[i]),
				   "refused load changed %s from '%.80s' to "
				   "'%.80s'",
				   name_of(wt_option_get((wt_opt_id)i)),
				   g.def_text[i], loaded[i]);
		}
	} else {
		FUZZ_CHECK(err.code == 0 && err.msg[0] == '\0',
			   "accepted load left an error: %d %s", err.code,
			   err.msg);
		if (wt_config_create(&mixed, &err2) != 0) {
			abort();
		}
		check_values(c, loaded, mixed, buf[0]);
		wt_config_destroy(mixed);
		check_write_ini(c, loaded, mixed_after);
	}

	/* 2. the same lines as set pairs, on another config */
	if (wt_config_create(&mixed, &err2) != 0) {
		abort();
	}
	apply_sets(mixed, data, size, buf[0], buf[1]);

	/* 3. load over those values: same verdict, same message */
	format_all(mixed, mixed_before);
	rc2 = wt_config_load(mixed, g.path[0], &err2);
	format_all(mixed, mixed_after);
	FUZZ_CHECK(rc2 == rc && (rc == 0 || !strcmp(err.msg, err2.msg)),
		   "load over defaults gave %d (%s), over other values %d (%s)",
		   rc, err.msg, rc2, err2.msg);
	for (size_t i = 0; i < wt_option_count(); i++) {
		const char *name = name_of(wt_option_get((wt_opt_id)i));

		if (rc != 0 || !strcmp(loaded[i], g.def_text[i])) {
			/* refused, or the file does not change it from its
			 * default: either the old value or the default */
			FUZZ_CHECK(!strcmp(mixed_after[i], mixed_before[i]) ||
					   (rc == 0 && !strcmp(mixed_after[i],
							       g.def_text[i])),
				   "%s: '%.80s' became '%.80s' (load %d)", name,
				   mixed_before[i], mixed_after[i], rc);
		} else {
			FUZZ_CHECK(!strcmp(mixed_after[i], loaded[i]),
				   "%s: the file gives '%.80s' over the "
				   "defaults, '%.80s' over other values",
				   name, loaded[i], mixed_after[i]);
		}
	}
	wt_config_destroy(mixed);
	wt_config_destroy(c);
	return 0;
}
