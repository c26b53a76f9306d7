/*
 * wt_config.c - the option table, validation, INI loading over inih, set,
 * help and INI output.
 *
 * Storage: struct wt_config has one member per option, of a type chosen by
 * the option's type token (X-macro), so it holds no pointers and copies with
 * memcpy.  A constant table of member offsets maps an id to its value.
 *
 * inih 55 (Debian's build) cuts lines longer than its 200-byte buffer
 * without a word, does not pass line numbers to the handler, and treats an
 * indented line after a key as a continuation of that key.  We therefore
 * feed ini_parse_stream() from our own reader, which reads whole lines,
 * counts them, refuses long ones, strips indentation (so inih never sees a
 * continuation) and handles the continuation of list values itself.
 */
#include "wt_config.h"

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include <ini.h>

/* Longest line inih takes: its buffer less the terminator. */
#define WT_INI_LINE_MAX (INI_MAX_LINE - 1)
/* Longest choice of an ENUM, terminator excluded. */
#define WT_ENUM_TEXT_MAX 63
/* Reasons (without "section.key: ") fit in this. */
#define WT_WHY_MAX 320
/* Written INI lines are wrapped before this column. */
#define WT_INI_WRAP 78

struct wt_string {
	char text[WT_CONFIG_STRING_MAX + 1];
};

struct wt_enum_value {
	int index;
	char text[WT_ENUM_TEXT_MAX + 1];
};

struct wt_zlist {
	int n;
	int j[WT_CONFIG_LIST_MAX];
	double v[WT_CONFIG_LIST_MAX];
};

struct wt_dlist {
	int n;
	double v[WT_CONFIG_LIST_MAX];
};

/* The C type that holds a value of each type token. */
typedef long wt_slot_INT;
typedef double wt_slot_DOUBLE;
typedef bool wt_slot_BOOL;
typedef struct wt_string wt_slot_STRING;
typedef struct wt_enum_value wt_slot_ENUM;
typedef struct wt_zlist wt_slot_ZLIST;
typedef struct wt_dlist wt_slot_DLIST;

struct wt_config {
#define WT_OPT(id, section, key, type, ...) wt_slot_##type v_##id;
#include "wt_options.def"
#undef WT_OPT
	char end; /* keeps the struct valid if the table were empty */
};

/* A value of any type, used while validating. */
union wt_value {
	long i;
	double d;
	bool b;
	struct wt_string s;
	struct wt_enum_value e;
	struct wt_zlist z;
	struct wt_dlist l;
};

#define WT_LIVE_LIVE	true
#define WT_LIVE_RESTART false

/* clang-format off */
static const wt_option wt_options[] = {
#define WT_OPT(id, section, key, type, def, min, max, choices, live, help) \
	{ WT_OPT_##id, section, key, WT_TYPE_##type, def, (min), (max),   \
	  choices, WT_LIVE_##live, help },
#include "wt_options.def"
#undef WT_OPT
};
/* clang-format on */

static const size_t wt_slot_offset[] = {
#define WT_OPT(id, ...) offsetof(struct wt_config, v_##id),
#include "wt_options.def"
#undef WT_OPT
};

static const size_t wt_type_size[] = {
	[WT_TYPE_INT] = sizeof(long),
	[WT_TYPE_DOUBLE] = sizeof(double),
	[WT_TYPE_BOOL] = sizeof(bool),
	[WT_TYPE_STRING] = sizeof(struct wt_string),
	[WT_TYPE_ENUM] = sizeof(struct wt_enum_value),
	[WT_TYPE_ZLIST] = sizeof(struct wt_zlist),
	[WT_TYPE_DLIST] = sizeof(struct wt_dlist),
};

static const char *const wt_type_name[] = {
	[WT_TYPE_INT] = "int",	   [WT_TYPE_DOUBLE] = "double",
	[WT_TYPE_BOOL] = "bool",   [WT_TYPE_STRING] = "string",
	[WT_TYPE_ENUM] = "enum",   [WT_TYPE_ZLIST] = "zlist",
	[WT_TYPE_DLIST] = "dlist",
};

static const struct {
	const char *word;
	bool value;
} wt_bool_words[] = {
	{"true", true}, {"false", false}, {"yes", true}, {"no", false},
	{"on", true},	{"off", false},	  {"1", true},	 {"0", false},
};

/* ------------------------------------------------------------------ */
/* Table look-ups                                                      */

size_t wt_option_count(void)
{
	return WT_OPT_COUNT;
}

const wt_option *wt_option_get(wt_opt_id id)
{
	if ((int)id < 0 || id >= WT_OPT_COUNT) {
		return NULL;
	}
	return &wt_options[id];
}

static const wt_option *wt_find(const char *section, size_t section_len,
				const char *key)
{
	size_t i;

	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = &wt_options[i];

		if (strlen(o->section) == section_len &&
		    !strncmp(o->section, section, section_len) &&
		    !strcmp(o->key, key)) {
			return o;
		}
	}
	return NULL;
}

const wt_option *wt_option_find(const char *section_dot_key)
{
	const char *dot;

	if (!section_dot_key) {
		return NULL;
	}
	dot = strchr(section_dot_key, '.');
	if (!dot) {
		return NULL;
	}
	return wt_find(section_dot_key, (size_t)(dot - section_dot_key),
		       dot + 1);
}

static bool wt_section_known(const char *section, size_t len)
{
	size_t i;

	for (i = 0; i < WT_OPT_COUNT; i++) {
		if (strlen(wt_options[i].section) == len &&
		    !strncmp(wt_options[i].section, section, len)) {
			return true;
		}
	}
	return false;
}

/* Append printf text to buf (of size len) after what it holds. */
__attribute__((format(printf, 3, 4))) static void
wt_append(char *buf, size_t len, const char *fmt, ...)
{
	size_t used = strlen(buf);
	va_list ap;

	if (used + 1 >= len) {
		return;
	}
	va_start(ap, fmt);
	vsnprintf(buf + used, len - used, fmt, ap);
	va_end(ap);
}

/* "sensor, mirror, ..." in table order. */
static void wt_list_sections(char *buf, size_t len)
{
	const char *prev = NULL;
	size_t i;

	buf[0] = '\0';
	for (i = 0; i < WT_OPT_COUNT; i++) {
		if (prev && !strcmp(prev, wt_options[i].section)) {
			continue;
		}
		wt_append(buf, len, "%s%s", prev ? ", " : "",
			  wt_options[i].section);
		prev = wt_options[i].section;
	}
}

/* "gain, leak, ..." for one section. */
static void wt_list_keys(const char *section, char *buf, size_t len)
{
	bool first = true;
	size_t i;

	buf[0] = '\0';
	for (i = 0; i < WT_OPT_COUNT; i++) {
		if (!strcmp(wt_options[i].section, section)) {
			wt_append(buf, len, "%s%s", first ? "" : ", ",
				  wt_options[i].key);
			first = false;
		}
	}
}

/* Why a name is not an option: "unknown key; [control] has ...". */
static void wt_explain_unknown(const char *section, const char *key, char *why,
			       size_t len)
{
	char names[WT_WHY_MAX];
	const wt_option *home = NULL;
	size_t i;

	if (!section[0]) {
		for (i = 0; i < WT_OPT_COUNT && !home; i++) {
			if (!strcmp(wt_options[i].key, key)) {
				home = &wt_options[i];
			}
		}
		if (home) {
			snprintf(why, len,
				 "key outside any section (it belongs under "
				 "[%s])",
				 home->section);
		} else {
			snprintf(why, len, "key outside any section");
		}
		return;
	}
	if (!wt_section_known(section, strlen(section))) {
		wt_list_sections(names, sizeof(names));
		snprintf(why, len, "unknown section [%s]; sections are %s",
			 section, names);
		return;
	}
	wt_list_keys(section, names, sizeof(names));
	snprintf(why, len, "unknown key; [%s] has %s", section, names);
}

/* ------------------------------------------------------------------ */
/* Values                                                              */

static inline void *wt_slot(wt_config *c, wt_opt_id id)
{
	return (char *)c + wt_slot_offset[id];
}

static inline const void *wt_cslot(const wt_config *c, wt_opt_id id)
{
	return (const char *)c + wt_slot_offset[id];
}

/* Short %g text that reads back to exactly v: %g's 6 digits when they
 * do, else the fewest of 15, 16 or 17 digits that do. */
static void wt_format_double(double v, char *buf, size_t len)
{
	int prec;

	snprintf(buf, len, "%g", v);
	if (strtod(buf, NULL) == v) {
		return;
	}
	for (prec = 15; prec <= 17; prec++) {
		snprintf(buf, len, "%.*g", prec, v);
		if (strtod(buf, NULL) == v) {
			return;
		}
	}
}

/* A range limit of o as text: integers in full for INT. */
static void wt_format_limit(const wt_option *o, double v, char *buf, size_t len)
{
	if (o->type == WT_TYPE_INT) {
		snprintf(buf, len, "%.0f", v);
	} else {
		wt_format_double(v, buf, len);
	}
}

/* Quote user text in a message, cut when long. */
static void wt_quote(const char *text, size_t n, char *buf, size_t len)
{
	if (n > 40) {
		snprintf(buf, len, "\"%.40s...\"", text);
	} else {
		snprintf(buf, len, "\"%.*s\"", (int)n, text);
	}
}

/* Strict decimal number: all of s[0..n), finite. */
static int wt_parse_double(const char *s, size_t n, double *out, char *why,
			   size_t why_len)
{
	char tmp[64], q[64];
	char *end;
	double v;

	wt_quote(s, n, q, sizeof(q));
	if (n == 0) {
		snprintf(why, why_len, "empty value, expected a number");
		return -1;
	}
	if (n >= sizeof(tmp) || isspace((unsigned char)s[0]) ||
	    memchr(s, 'x', n) || memchr(s, 'X', n)) {
		snprintf(why, why_len, "%s is not a number", q);
		return -1;
	}
	memcpy(tmp, s, n);
	tmp[n] = '\0';
	errno = 0;
	v = strtod(tmp, &end);
	if (end == tmp || *end != '\0') {
		snprintf(why, why_len, "%s is not a number", q);
		return -1;
	}
	if (isinf(v) && errno == ERANGE) {
		snprintf(why, why_len, "%s is too large for a double", q);
		return -1;
	}
	if (!isfinite(v)) {
		snprintf(why, why_len, "%s is not a finite number", q);
		return -1;
	}
	*out = v;
	return 0;
}

/* Strict decimal integer: all of s[0..n). */
static int wt_parse_long(const char *s, size_t n, long *out, char *why,
			 size_t why_len)
{
	char tmp[64], q[64];
	char *end;
	long v;

	wt_quote(s, n, q, sizeof(q));
	if (n == 0) {
		snprintf(why, why_len, "empty value, expected an integer");
		return -1;
	}
	if (n >= sizeof(tmp) ||
	    !(isdigit((unsigned char)s[0]) || s[0] == '-' || s[0] == '+')) {
		snprintf(why, why_len, "%s is not an integer", q);
		return -1;
	}
	memcpy(tmp, s, n);
	tmp[n] = '\0';
	errno = 0;
	v = strtol(tmp, &end, 10);
	if (end != tmp && *end == '\0') {
		if (errno == ERANGE) {
			snprintf(why, why_len,
				 "%s does not fit in an integer (%ld to %ld)",
				 q, LONG_MIN, LONG_MAX);
			return -1;
		}
		*out = v;
		return 0;
	}
	snprintf(why, why_len, "%s is not an integer", q);
	return -1;
}

/* Is v within [o->min, o->max]?  Message names text. */
static int wt_check_range(const wt_option *o, double v, const char *text,
			  size_t n, char *why, size_t why_len)
{
	char lim[40];

	if (v < o->min) {
		wt_format_limit(o, o->min, lim, sizeof(lim));
		snprintf(why, why_len, "%.*s is below the minimum %s", (int)n,
			 text, lim);
		return -1;
	}
	if (v > o->max) {
		wt_format_limit(o, o->max, lim, sizeof(lim));
		snprintf(why, why_len, "%.*s is above the maximum %s", (int)n,
			 text, lim);
		return -1;
	}
	return 0;
}

static int wt_parse_bool(const char *s, bool *out, char *why, size_t why_len)
{
	char q[64];
	size_t i;

	for (i = 0; i < sizeof(wt_bool_words) / sizeof(wt_bool_words[0]); i++) {
		if (!strcasecmp(s, wt_bool_words[i].word)) {
			*out = wt_bool_words[i].value;
			return 0;
		}
	}
	wt_quote(s, strlen(s), q, sizeof(q));
	snprintf(why, why_len,
		 "%s is not a boolean (use true/false, yes/no, on/off or 1/0)",
		 q);
	return -1;
}

static int wt_parse_enum(const wt_option *o, const char *s,
			 struct wt_enum_value *out, char *why, size_t why_len)
{
	const char *p = o->choices;
	char names[WT_WHY_MAX / 2], q[64];
	int index = 0;
	size_t n;

	names[0] = '\0';
	while (*p) {
		n = strcspn(p, "|");
		if (n == strlen(s) && !strncasecmp(p, s, n)) {
			if (n > WT_ENUM_TEXT_MAX) {
				snprintf(why, why_len, "choice too long");
				return -1;
			}
			out->index = index;
			memcpy(out->text, p, n);
			out->text[n] = '\0';
			return 0;
		}
		wt_append(names, sizeof(names), "%s%.*s", index ? ", " : "",
			  (int)n, p);
		index++;
		p += n;
		if (*p == '|') {
			p++;
		}
	}
	wt_quote(s, strlen(s), q, sizeof(q));
	snprintf(why, why_len, "%s is not one of %s", q, names);
	return -1;
}

static int wt_parse_string(const wt_option *o, const char *s,
			   struct wt_string *out, char *why, size_t why_len)
{
	size_t n = strlen(s), fit, i;

	/* "key = value" must fit on one line inih reads whole. */
	fit = WT_INI_LINE_MAX - strlen(o->key) - 3;
	if (fit > WT_CONFIG_STRING_MAX) {
		fit = WT_CONFIG_STRING_MAX;
	}
	if (n > fit) {
		snprintf(why, why_len,
			 "text is %zu characters long; at most %zu fit", n,
			 fit);
		return -1;
	}
	for (i = 0; i < n; i++) {
		if (iscntrl((unsigned char)s[i])) {
			snprintf(why, why_len,
				 "control character at position %zu", i + 1);
			return -1;
		}
		if (s[i] == ';' && i > 0 && isspace((unsigned char)s[i - 1])) {
			snprintf(why, why_len,
				 "';' after a blank would start a comment");
			return -1;
		}
	}
	memcpy(out->text, s, n + 1);
	return 0;
}

static bool wt_is_list_sep(char ch)
{
	return ch == ',' || isspace((unsigned char)ch);
}

/*
 * Parse the list entries of s and append them to the list (*count, jv,
 * vv); jv is NULL for a DLIST.
 * Entries are separated by blanks and/or one comma; a comma may end the
 * text (the list continues on the next line) but not start it.
 */
static int wt_parse_list(const wt_option *o, const char *s, int *count, int *jv,
			 double *vv, char *why, size_t why_len)
{
	const char *p = s, *tok, *vtok;
	char q[64], part[WT_WHY_MAX / 2];
	size_t n, vn;
	bool first = true;
	int commas, k;
	double v;
	long j;

	for (;;) {
		commas = 0;
		while (*p && wt_is_list_sep(*p)) {
			commas += *p == ',';
			p++;
		}
		if (commas > 1 || (commas == 1 && first)) {
			snprintf(why, why_len, "empty list entry");
			return -1;
		}
		if (!*p) {
			return 0;
		}
		first = false;
		if (*count >= WT_CONFIG_LIST_MAX) {
			snprintf(why, why_len, "more than %d entries",
				 WT_CONFIG_LIST_MAX);
			return -1;
		}
		tok = p;
		if (o->type == WT_TYPE_ZLIST) {
			n = 0;
			while (tok[n] && tok[n] != ':' &&
			       !wt_is_list_sep(tok[n])) {
				n++;
			}
			p = tok + n;
			while (*p == ' ' || *p == '\t') {
				p++;
			}
			if (*p != ':') {
				wt_quote(tok, n, q, sizeof(q));
				snprintf(why, why_len,
					 "%s is not an index:value pair", q);
				return -1;
			}
			p++;
			while (*p == ' ' || *p == '\t') {
				p++;
			}
			vtok = p;
			vn = 0;
			while (vtok[vn] && !wt_is_list_sep(vtok[vn])) {
				vn++;
			}
			p = vtok + vn;
			if (n == 0 || vn == 0) {
				wt_quote(tok, (size_t)(p - tok), q, sizeof(q));
				snprintf(why, why_len,
					 "%s is not an index:value pair", q);
				return -1;
			}
			if (wt_parse_long(tok, n, &j, part, sizeof(part))) {
				snprintf(why, why_len, "Noll index: %s", part);
				return -1;
			}
			if (j < 1 || j > WT_CONFIG_NOLL_MAX) {
				snprintf(why, why_len,
					 "Noll index %ld is outside 1..%d", j,
					 WT_CONFIG_NOLL_MAX);
				return -1;
			}
			for (k = 0; k < *count; k++) {
				if (jv[k] == j) {
					snprintf(why, why_len,
						 "Noll index %ld appears twice",
						 j);
					return -1;
				}
			}
			if (wt_parse_double(vtok, vn, &v, part, sizeof(part))) {
				snprintf(why, why_len, "Noll index %ld: %s", j,
					 part);
				return -1;
			}
			if (wt_check_range(o, v, vtok, vn, part,
					   sizeof(part))) {
				snprintf(why, why_len, "Noll index %ld: %s", j,
					 part);
				return -1;
			}
			jv[*count] = (int)j;
		} else {
			n = 0;
			while (tok[n] && !wt_is_list_sep(tok[n])) {
				n++;
			}
			p = tok + n;
			if (wt_parse_double(tok, n, &v, part, sizeof(part)) ||
			    wt_check_range(o, v, tok, n, part, sizeof(part))) {
				snprintf(why, why_len, "entry %d: %s",
					 *count + 1, part);
				return -1;
			}
		}
		vv[*count] = v;
		(*count)++;
	}
}

/*
 * Validate text (already trimmed) for option o into *val.  append: add to
 * the list already in *val (a continuation line) instead of starting anew.
 * Returns 0, or -1 with the reason in why.
 */
static int wt_parse_value(const wt_option *o, const char *text,
			  union wt_value *val, bool append, char *why,
			  size_t why_len)
{
	size_t n = strlen(text);

	switch (o->type) {
	case WT_TYPE_INT:
		if (wt_parse_long(text, n, &val->i, why, why_len)) {
			return -1;
		}
		return wt_check_range(o, (double)val->i, text, n, why, why_len);
	case WT_TYPE_DOUBLE:
		if (wt_parse_double(text, n, &val->d, why, why_len)) {
			return -1;
		}
		return wt_check_range(o, val->d, text, n, why, why_len);
	case WT_TYPE_BOOL:
		return wt_parse_bool(text, &val->b, why, why_len);
	case WT_TYPE_STRING:
		return wt_parse_string(o, text, &val->s, why, why_len);
	case WT_TYPE_ENUM:
		memset(&val->e, 0, sizeof(val->e));
		return wt_parse_enum(o, text, &val->e, why, why_len);
	case WT_TYPE_ZLIST:
		if (!append) {
			val->z.n = 0;
		}
		return wt_parse_list(o, text, &val->z.n, val->z.j, val->z.v,
				     why, why_len);
	case WT_TYPE_DLIST:
		if (!append) {
			val->l.n = 0;
		}
		return wt_parse_list(o, text, &val->l.n, NULL, val->l.v, why,
				     why_len);
	}
	snprintf(why, why_len, "unknown option type %d", (int)o->type);
	return -1;
}

/* Copy a validated value into c's slot, leaving no stale bytes behind. */
static void wt_store(wt_config *c, const wt_option *o,
		     const union wt_value *val)
{
	void *slot = wt_slot(c, o->id);

	memcpy(slot, val, wt_type_size[o->type]);
	if (o->type == WT_TYPE_STRING) {
		struct wt_string *s = slot;
		size_t n = strlen(s->text);

		memset(s->text + n, 0, sizeof(s->text) - n);
	}
}

/* Trimmed copy bounds of s: [*start, *start + *len). */
static void wt_trim(const char *s, const char **start, size_t *len)
{
	size_t n;

	while (isspace((unsigned char)*s)) {
		s++;
	}
	n = strlen(s);
	while (n > 0 && isspace((unsigned char)s[n - 1])) {
		n--;
	}
	*start = s;
	*len = n;
}

/* Validate untrimmed text for o; heap copy only for its trimmed text. */
static int wt_parse_text(const wt_option *o, const char *value,
			 union wt_value *val, char *why, size_t why_len)
{
	const char *start;
	char *copy;
	size_t n;
	int ret;

	wt_trim(value, &start, &n);
	copy = malloc(n + 1);
	if (!copy) {
		snprintf(why, why_len, "out of memory");
		return -ENOMEM;
	}
	memcpy(copy, start, n);
	copy[n] = '\0';
	ret = wt_parse_value(o, copy, val, false, why, why_len);
	free(copy);
	return ret ? -WT_ECONFIG : 0;
}

int wt_option_check(const wt_option *o, const char *value, wt_error *err)
{
	char why[WT_WHY_MAX];
	union wt_value *val;
	int ret;

	if (!o || !value) {
		return wt_error_set(err, -EINVAL, "no option or no value");
	}
	val = malloc(sizeof(*val));
	if (!val) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	ret = wt_parse_text(o, value, val, why, sizeof(why));
	free(val);
	if (ret) {
		return wt_error_set(err, ret, "%s.%s: %s", o->section, o->key,
				    why);
	}
	return 0;
}

/* ------------------------------------------------------------------ */
/* Create, copy, set                                                   */

int wt_config_create(wt_config **out, wt_error *err)
{
	char why[WT_WHY_MAX];
	union wt_value *val;
	wt_config *c;
	size_t i;

	*out = NULL;
	c = calloc(1, sizeof(*c));
	val = malloc(sizeof(*val));
	if (!c || !val) {
		free(c);
		free(val);
		return wt_error_set(err, -ENOMEM, "config: out of memory");
	}
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = &wt_options[i];

		if (wt_parse_text(o, o->def, val, why, sizeof(why))) {
			free(c);
			free(val);
			return wt_error_set(err, -WT_ECONFIG,
					    "built-in default of %s.%s: %s",
					    o->section, o->key, why);
		}
		wt_store(c, o, val);
	}
	free(val);
	*out = c;
	return 0;
}

void wt_config_destroy(wt_config *c)
{
	free(c);
}

int wt_config_copy(wt_config *dst, const wt_config *src)
{
	if (!dst || !src) {
		return -EINVAL;
	}
	if (dst != src) {
		memcpy(dst, src, sizeof(*dst));
	}
	return 0;
}

int wt_config_set(wt_config *c, const char *section_dot_key, const char *value,
		  wt_error *err)
{
	char why[WT_WHY_MAX], section[64];
	const wt_option *o;
	union wt_value *val;
	const char *dot;
	size_t n;
	int ret;

	if (!c || !section_dot_key || !value) {
		return wt_error_set(err, -EINVAL, "set: missing argument");
	}
	o = wt_option_find(section_dot_key);
	if (!o) {
		dot = strchr(section_dot_key, '.');
		if (!dot) {
			return wt_error_set(err, -WT_ECONFIG,
					    "%.60s: unknown option (expected "
					    "section.key)",
					    section_dot_key);
		}
		n = (size_t)(dot - section_dot_key);
		if (n >= sizeof(section)) {
			n = sizeof(section) - 1;
		}
		memcpy(section, section_dot_key, n);
		section[n] = '\0';
		if (n == 0) {
			snprintf(why, sizeof(why),
				 "unknown option (expected section.key)");
		} else {
			wt_explain_unknown(section, dot + 1, why, sizeof(why));
		}
		return wt_error_set(err, -WT_ECONFIG, "%.60s: %s",
				    section_dot_key, why);
	}
	val = malloc(sizeof(*val));
	if (!val) {
		return wt_error_set(err, -ENOMEM, "set: out of memory");
	}
	ret = wt_parse_text(o, value, val, why, sizeof(why));
	if (!ret) {
		wt_store(c, o, val);
	}
	free(val);
	if (ret) {
		return wt_error_set(err, ret, "%s.%s: %s", o->section, o->key,
				    why);
	}
	wt_error_clear(err);
	return 0;
}

/* ------------------------------------------------------------------ */
/* Loading an INI file                                                 */

struct wt_load {
	FILE *file;
	const char *path;
	wt_config *copy;    /* the file is applied here */
	union wt_value val; /* scratch */
	int line;	    /* lines read so far */
	/* line where each key was given, 0 when not yet */
	int first_line[WT_OPT_COUNT];
	/* list option the next indented line may continue, or -1 */
	int open_list;
	bool failed;
	int read_errno;
	char msg[WT_ERROR_MAX];
};

__attribute__((format(printf, 3, 4))) static void
wt_load_fail(struct wt_load *ld, int line, const char *fmt, ...)
{
	size_t used;
	va_list ap;

	if (ld->failed) {
		return;
	}
	ld->failed = true;
	snprintf(ld->msg, sizeof(ld->msg), "%s:%d: ", ld->path, line);
	used = strlen(ld->msg);
	va_start(ap, fmt);
	vsnprintf(ld->msg + used, sizeof(ld->msg) - used, fmt, ap);
	va_end(ap);
}

/* Position of the inline comment of s (';' after a blank) or its end. */
static size_t wt_comment_start(const char *s)
{
	size_t i;

	for (i = 0; s[i]; i++) {
		if (s[i] == ';' && i > 0 && isspace((unsigned char)s[i - 1])) {
			return i;
		}
	}
	return i;
}

/* A section header line: check the name is known and nothing follows. */
static int wt_check_section_line(struct wt_load *ld, const char *s)
{
	const char *end = strchr(s, ']');
	const char *rest;
	char names[WT_WHY_MAX];
	size_t n;

	if (!end) {
		wt_load_fail(ld, ld->line, "section header without ']'");
		return -1;
	}
	n = (size_t)(end - s - 1);
	rest = end + 1;
	while (isspace((unsigned char)*rest)) {
		rest++;
	}
	if (*rest && *rest != ';' && *rest != '#') {
		wt_load_fail(ld, ld->line,
			     "[%.*s]: text after the section header", (int)n,
			     s + 1);
		return -1;
	}
	if (!wt_section_known(s + 1, n)) {
		wt_list_sections(names, sizeof(names));
		wt_load_fail(ld, ld->line,
			     "[%.*s]: unknown section; sections are %s", (int)n,
			     s + 1, names);
		return -1;
	}
	return 0;
}

/* An indented line continuing the list value of the previous key. */
static void wt_continue_list(struct wt_load *ld, char *s)
{
	const wt_option *o = &wt_options[ld->open_list];
	char why[WT_WHY_MAX];

	s[wt_comment_start(s)] = '\0';
	memcpy(&ld->val, wt_slot(ld->copy, o->id), wt_type_size[o->type]);
	if (wt_parse_value(o, s, &ld->val, true, why, sizeof(why))) {
		wt_load_fail(ld, ld->line, "%s.%s: %s", o->section, o->key,
			     why);
		return;
	}
	wt_store(ld->copy, o, &ld->val);
}

/*
 * inih's reader: one whole line per call, however long the file's line,
 * so that the line count is exact and long lines are refused, not cut.
 * Indentation is stripped before inih sees the line.
 */
static char *wt_ini_reader(char *str, int num, void *stream)
{
	struct wt_load *ld = stream;
	size_t n = 0, kept = 0, cap;
	bool nul = false, indented, any = false;
	int ch, last = 0;
	char *s;

	if (ld->failed || num < 2) {
		return NULL;
	}
	cap = (size_t)num - 1;
	while ((ch = getc(ld->file)) != EOF) {
		any = true;
		if (ch == '\n') {
			break;
		}
		if (ch == '\0') {
			nul = true;
		}
		if (kept < cap) {
			str[kept++] = (char)ch;
		}
		last = ch;
		n++;
	}
	if (ferror(ld->file)) {
		ld->read_errno = errno ? errno : EIO;
		ld->failed = true;
		return NULL;
	}
	if (!any) {
		return NULL;
	}
	ld->line++;
	if (last == '\r') {
		/* CRLF line ending: the CR is not part of the line */
		n--;
		if (kept > n) {
			kept = n;
		}
	}
	if (n > cap) {
		wt_load_fail(
			ld, ld->line,
			"line is %zu characters long; inih reads at most %zu",
			n, cap);
		return NULL;
	}
	str[kept] = '\0';
	if (nul) {
		wt_load_fail(ld, ld->line, "line holds a NUL character");
		return NULL;
	}
	s = str;
	if (ld->line == 1 && !strncmp(s, "\xEF\xBB\xBF", 3)) {
		s += 3;
	}
	indented = *s == ' ' || *s == '\t';
	while (isspace((unsigned char)*s)) {
		s++;
	}
	if (indented && ld->open_list >= 0 && *s && *s != ';' && *s != '#' &&
	    *s != '[' && !strchr(s, '=')) {
		wt_continue_list(ld, s);
		str[0] = '\0';
		return ld->failed ? NULL : str;
	}
	ld->open_list = -1;
	if (*s == '[') {
		if (wt_check_section_line(ld, s)) {
			return NULL;
		}
	} else if (*s && *s != ';' && *s != '#' &&
		   strcspn(s, "=:") >= wt_comment_start(s)) {
		char q[64];

		wt_quote(s, strlen(s), q, sizeof(q));
		wt_load_fail(
			ld, ld->line,
			"%s is not a [section], a key = value or a comment", q);
		return NULL;
	}
	memmove(str, s, strlen(s) + 1);
	return str;
}

static int wt_ini_handler(void *user, const char *section, const char *name,
			  const char *value)
{
	struct wt_load *ld = user;
	char why[WT_WHY_MAX];
	const wt_option *o;

	if (ld->failed) {
		return 0;
	}
	o = wt_find(section, strlen(section), name);
	if (!o) {
		wt_explain_unknown(section, name, why, sizeof(why));
		if (section[0]) {
			wt_load_fail(ld, ld->line, "%s.%s: %s", section, name,
				     why);
		} else {
			wt_load_fail(ld, ld->line, "%s: %s", name, why);
		}
		return 0;
	}
	if (ld->first_line[o->id]) {
		wt_load_fail(ld, ld->line,
			     "%s.%s: given twice, first at line %d", o->section,
			     o->key, ld->first_line[o->id]);
		return 0;
	}
	ld->first_line[o->id] = ld->line;
	if (!value) {
		wt_load_fail(ld, ld->line, "%s.%s: no value", o->section,
			     o->key);
		return 0;
	}
	if (wt_parse_value(o, value, &ld->val, false, why, sizeof(why))) {
		wt_load_fail(ld, ld->line, "%s.%s: %s", o->section, o->key,
			     why);
		return 0;
	}
	wt_store(ld->copy, o, &ld->val);
	if (o->type == WT_TYPE_ZLIST || o->type == WT_TYPE_DLIST) {
		ld->open_list = (int)o->id;
	}
	return 1;
}

int wt_config_load(wt_config *c, const char *path, wt_error *err)
{
	struct wt_load *ld;
	int ret, e;

	if (!c || !path) {
		return wt_error_set(err, -EINVAL, "load: missing argument");
	}
	ld = calloc(1, sizeof(*ld));
	if (ld) {
		ld->copy = malloc(sizeof(*ld->copy));
	}
	if (!ld || !ld->copy) {
		free(ld);
		return wt_error_set(err, -ENOMEM, "%s: out of memory", path);
	}
	ld->file = fopen(path, "r");
	if (!ld->file) {
		e = errno;
		free(ld->copy);
		free(ld);
		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	ld->path = path;
	ld->open_list = -1;
	memcpy(ld->copy, c, sizeof(*c));
	ret = ini_parse_stream(wt_ini_reader, ld, wt_ini_handler, ld);
	fclose(ld->file);
	if (ld->read_errno) {
		e = ld->read_errno;
		ret = wt_error_set(err, -e, "%s:%d: %s", path, ld->line + 1,
				   strerror(e));
	} else if (ld->failed) {
		ret = wt_error_set(err, -WT_ECONFIG, "%s", ld->msg);
	} else if (ret == -2) {
		ret = wt_error_set(err, -ENOMEM, "%s: out of memory", path);
	} else if (ret != 0) {
		/* inih refused a line our reader let through */
		ret = wt_error_set(
			err, -WT_ECONFIG,
			"%s:%d: not a [section], a key = value or a comment",
			path, ret);
	} else {
		memcpy(c, ld->copy, sizeof(*c));
		wt_error_clear(err);
	}
	free(ld->copy);
	free(ld);
	return ret;
}

/* ------------------------------------------------------------------ */
/* Reading values                                                      */

static const wt_option *wt_typed(wt_opt_id id, wt_opt_type type)
{
	const wt_option *o = wt_option_get(id);

	return o && o->type == type ? o : NULL;
}

long wt_config_int(const wt_config *c, wt_opt_id id)
{
	if (!c || !wt_typed(id, WT_TYPE_INT)) {
		return 0;
	}
	return *(const long *)wt_cslot(c, id);
}

double wt_config_double(const wt_config *c, wt_opt_id id)
{
	if (!c || !wt_typed(id, WT_TYPE_DOUBLE)) {
		return 0;
	}
	return *(const double *)wt_cslot(c, id);
}

bool wt_config_bool(const wt_config *c, wt_opt_id id)
{
	if (!c || !wt_typed(id, WT_TYPE_BOOL)) {
		return false;
	}
	return *(const bool *)wt_cslot(c, id);
}

const char *wt_config_string(const wt_config *c, wt_opt_id id)
{
	if (c && wt_typed(id, WT_TYPE_STRING)) {
		return ((const struct wt_string *)wt_cslot(c, id))->text;
	}
	if (c && wt_typed(id, WT_TYPE_ENUM)) {
		return ((const struct wt_enum_value *)wt_cslot(c, id))->text;
	}
	return "";
}

int wt_config_enum(const wt_config *c, wt_opt_id id)
{
	if (!c || !wt_typed(id, WT_TYPE_ENUM)) {
		return -1;
	}
	return ((const struct wt_enum_value *)wt_cslot(c, id))->index;
}

int wt_config_zlist(const wt_config *c, wt_opt_id id, int *j, double *v,
		    int max)
{
	const struct wt_zlist *z;
	int n;

	if (!c || !wt_typed(id, WT_TYPE_ZLIST)) {
		return -EINVAL;
	}
	z = wt_cslot(c, id);
	if (!j || !v) {
		return z->n;
	}
	n = z->n < max ? z->n : (max > 0 ? max : 0);
	memcpy(j, z->j, (size_t)n * sizeof(*j));
	memcpy(v, z->v, (size_t)n * sizeof(*v));
	return n;
}

int wt_config_dlist(const wt_config *c, wt_opt_id id, double *v, int max)
{
	const struct wt_dlist *l;
	int n;

	if (!c || !wt_typed(id, WT_TYPE_DLIST)) {
		return -EINVAL;
	}
	l = wt_cslot(c, id);
	if (!v) {
		return l->n;
	}
	n = l->n < max ? l->n : (max > 0 ? max : 0);
	memcpy(v, l->v, (size_t)n * sizeof(*v));
	return n;
}

/* ------------------------------------------------------------------ */
/* Text output                                                         */

/* Text of list entry k of option o in c. */
static void wt_format_entry(const wt_config *c, const wt_option *o, int k,
			    char *buf, size_t len)
{
	char num[40];

	if (o->type == WT_TYPE_ZLIST) {
		const struct wt_zlist *z = wt_cslot(c, o->id);

		wt_format_double(z->v[k], num, sizeof(num));
		snprintf(buf, len, "%d:%s", z->j[k], num);
	} else {
		const struct wt_dlist *l = wt_cslot(c, o->id);

		wt_format_double(l->v[k], buf, len);
	}
}

static int wt_list_length(const wt_config *c, const wt_option *o)
{
	if (o->type == WT_TYPE_ZLIST) {
		return ((const struct wt_zlist *)wt_cslot(c, o->id))->n;
	}
	return ((const struct wt_dlist *)wt_cslot(c, o->id))->n;
}

int wt_config_format(const wt_config *c, wt_opt_id id, char *buf, size_t len)
{
	const wt_option *o = wt_option_get(id);
	char entry[64];
	size_t used = 0;
	int k, n, r;

	if (!c || !o || !buf || len == 0) {
		return -EINVAL;
	}
	switch (o->type) {
	case WT_TYPE_INT:
		r = snprintf(buf, len, "%ld", wt_config_int(c, id));
		break;
	case WT_TYPE_DOUBLE:
		wt_format_double(wt_config_double(c, id), entry, sizeof(entry));
		r = snprintf(buf, len, "%s", entry);
		break;
	case WT_TYPE_BOOL:
		r = snprintf(buf, len, "%s",
			     wt_config_bool(c, id) ? "true" : "false");
		break;
	case WT_TYPE_STRING:
	case WT_TYPE_ENUM:
		r = snprintf(buf, len, "%s", wt_config_string(c, id));
		break;
	default:
		/* lists: "e, e, e", counting what would not fit */
		buf[0] = '\0';
		n = wt_list_length(c, o);
		for (k = 0; k < n; k++) {
			wt_format_entry(c, o, k, entry, sizeof(entry));
			if (used < len) {
				snprintf(buf + used, len - used, "%s%s",
					 k ? ", " : "", entry);
			}
			used += strlen(entry) + (k ? 2 : 0);
		}
		r = (int)used;
		break;
	}
	if (r < 0 || (size_t)r >= len) {
		return -ENOSPC;
	}
	return r;
}

/* "[2, 256]", "{a|b|c}" or "-" for option o. */
static void wt_format_range(const wt_option *o, char *buf, size_t len)
{
	char lo[40], hi[40];

	switch (o->type) {
	case WT_TYPE_INT:
	case WT_TYPE_DOUBLE:
	case WT_TYPE_ZLIST:
	case WT_TYPE_DLIST:
		wt_format_limit(o, o->min, lo, sizeof(lo));
		wt_format_limit(o, o->max, hi, sizeof(hi));
		snprintf(buf, len, "[%s, %s]", lo, hi);
		break;
	case WT_TYPE_ENUM:
		snprintf(buf, len, "{%s}", o->choices);
		break;
	case WT_TYPE_BOOL:
		snprintf(buf, len, "{true|false}");
		break;
	default:
		snprintf(buf, len, "-");
		break;
	}
}

static const char *wt_shown_default(const wt_option *o)
{
	return o->def[0] ? o->def : "\"\"";
}

void wt_config_print_help(FILE *out)
{
	int w_name = 0, w_type = 0, w_def = 0, w_range = 0, len;
	char name[128], range[160];
	size_t i;

	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = &wt_options[i];

		len = snprintf(name, sizeof(name), "%s.%s", o->section, o->key);
		w_name = len > w_name ? len : w_name;
		len = (int)strlen(wt_type_name[o->type]);
		w_type = len > w_type ? len : w_type;
		len = (int)strlen(wt_shown_default(o));
		w_def = len > w_def ? len : w_def;
		wt_format_range(o, range, sizeof(range));
		len = (int)strlen(range);
		w_range = len > w_range ? len : w_range;
	}
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = &wt_options[i];

		snprintf(name, sizeof(name), "%s.%s", o->section, o->key);
		wt_format_range(o, range, sizeof(range));
		fprintf(out, "%-*s  %-*s  %-*s  %-*s  %-7s  %s\n", w_name, name,
			w_type, wt_type_name[o->type], w_def,
			wt_shown_default(o), w_range, range,
			o->live ? "live" : "restart", o->help);
	}
}

/* Is section named in the comma-separated list (NULL: every section)? */
static bool wt_section_wanted(const char *section, const char *list)
{
	const char *p = list, *start;
	size_t n;

	if (!list) {
		return true;
	}
	while (*p) {
		p += strspn(p, ", \t");
		start = p;
		p += strcspn(p, ",");
		n = (size_t)(p - start);
		while (n > 0 && isspace((unsigned char)start[n - 1])) {
			n--;
		}
		if (n > 0 && n == strlen(section) &&
		    !strncmp(start, section, n)) {
			return true;
		}
	}
	return false;
}

/* "; help (tail)" wrapped at WT_INI_WRAP columns, tail kept whole. */
static void wt_write_comment(FILE *out, const char *help, const char *tail)
{
	const char *p = help, *word;
	size_t col = 0, n;
	bool last = false;

	while (!last) {
		while (*p == ' ') {
			p++;
		}
		if (*p) {
			word = p;
			n = strcspn(p, " ");
			p += n;
		} else {
			word = tail;
			n = strlen(tail);
			last = true;
		}
		if (col > 0 && col + 1 + n > WT_INI_WRAP) {
			fputc('\n', out);
			col = 0;
		}
		if (col == 0) {
			fputc(';', out);
			col = 1;
		}
		fprintf(out, " %.*s", (int)n, word);
		col += 1 + n;
	}
	fputc('\n', out);
}

static void wt_write_value(const wt_config *c, const wt_option *o, FILE *out)
{
	char entry[64], text[WT_CONFIG_STRING_MAX + 1];
	size_t col;
	int k, n;

	if (o->type != WT_TYPE_ZLIST && o->type != WT_TYPE_DLIST) {
		wt_config_format(c, o->id, text, sizeof(text));
		fprintf(out, "%s =%s%s\n", o->key, text[0] ? " " : "", text);
		return;
	}
	/* lists wrap onto indented continuation lines */
	fprintf(out, "%s =", o->key);
	col = strlen(o->key) + 2;
	n = wt_list_length(c, o);
	for (k = 0; k < n; k++) {
		wt_format_entry(c, o, k, entry, sizeof(entry));
		if (k > 0) {
			fputc(',', out);
			col++;
		}
		if (k > 0 && col + 1 + strlen(entry) > WT_INI_WRAP) {
			fputs("\n\t", out);
			col = 8;
		} else {
			fputc(' ', out);
			col++;
		}
		fputs(entry, out);
		col += strlen(entry);
	}
	fputc('\n', out);
}

void wt_config_write_ini(const wt_config *c, FILE *out,
			 const char *only_sections)
{
	const char *section = NULL;
	char range[160], tail[256];
	size_t i;

	if (!c || !out) {
		return;
	}
	for (i = 0; i < WT_OPT_COUNT; i++) {
		const wt_option *o = &wt_options[i];
		const char *live = o->live ? "live" : "restart";

		if (!wt_section_wanted(o->section, only_sections)) {
			continue;
		}
		if (!section || strcmp(section, o->section)) {
			fprintf(out, "%s[%s]\n", section ? "\n" : "",
				o->section);
			section = o->section;
		} else {
			fputc('\n', out);
		}
		wt_format_range(o, range, sizeof(range));
		if (o->type == WT_TYPE_STRING) {
			snprintf(tail, sizeof(tail), "(%s, %s)",
				 wt_type_name[o->type], live);
		} else {
			snprintf(tail, sizeof(tail), "(%s, %s, %s)",
				 wt_type_name[o->type], range, live);
		}
		wt_write_comment(out, o->help, tail);
		wt_write_value(c, o, out);
	}
}
