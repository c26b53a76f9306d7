/*
 * wt_config.h - wavetrim's configuration: the option table, INI files, set.
 *
 * Every option is declared once, in wt_options.def.  From that table this
 * module builds the option enum, the descriptors, validation, INI loading
 * (over inih), `set`, the --help-config listing and commented INI output.
 *
 * A wt_config holds one value for every option, stored inline (no pointers),
 * so wt_config_copy() is a plain copy that never allocates: a config may be
 * prepared in one thread and copied into another's between frames.
 *
 * Value syntax, as written in an INI file or passed to wt_config_set():
 *   INT     decimal integer, e.g. 16 or -3 (no fraction, no exponent)
 *   DOUBLE  finite decimal number, e.g. 0.3, -1, 1e-3 (no nan, no inf)
 *   BOOL    true/false, yes/no, on/off, 1/0 (any letter case)
 *   STRING  text of at most WT_CONFIG_STRING_MAX characters, and short
 *           enough that "key = text" fits on one INI line (199 characters,
 *           so 199 - strlen(key) - 3 at most); no control characters and no
 *           ';' after a blank (inih would cut it as a comment)
 *   ENUM    one of the option's choices (any letter case)
 *   ZLIST   "j:v" pairs, e.g. "4:0.05, 11:-0.12": Noll index j in
 *           1..WT_CONFIG_NOLL_MAX, each at most once, value v in [min, max]
 *   DLIST   numbers in [min, max], e.g. "0.5 0.5, 0.3"
 * List entries are separated by commas and/or blanks; a list may be empty
 * and holds at most WT_CONFIG_LIST_MAX entries.  In an INI file a list may
 * continue on the following lines when those are indented and hold no '='.
 *
 * INI files: [section] headers, "key = value" lines, comments starting with
 * ';' or '#' (and after a blank, ';' ends a value).  Lines may be indented.
 * A line holds at most the inih line limit (199 characters); longer lines
 * are refused rather than silently cut.
 */
#ifndef WT_CONFIG_H
#define WT_CONFIG_H

#include <stdbool.h>
#include <stddef.h>
#include <stdio.h>

#include "wt_error.h"

/** One constant per option, WT_OPT_<id>, in table order. */
typedef enum wt_opt_id {
#define WT_OPT(id, ...) WT_OPT_##id,
#include "wt_options.def"
#undef WT_OPT
	WT_OPT_COUNT
} wt_opt_id;

/** Value types (the bare type token of wt_options.def, prefixed). */
typedef enum wt_opt_type {
	WT_TYPE_INT,
	WT_TYPE_DOUBLE,
	WT_TYPE_BOOL,
	WT_TYPE_STRING,
	WT_TYPE_ENUM,
	WT_TYPE_ZLIST,
	WT_TYPE_DLIST
} wt_opt_type;

/** One option as declared in wt_options.def. */
typedef struct wt_option {
	wt_opt_id id;
	const char *section, *key;
	wt_opt_type type;
	const char *def;     /**< default, as INI text */
	double min, max;     /**< INT, DOUBLE, ZLIST and DLIST values */
	const char *choices; /**< ENUM: "a|b|c"; "" otherwise */
	bool live;	     /**< may change while the loop runs */
	const char *help;    /**< one line */
} wt_option;

/** Most characters in a STRING value. */
#define WT_CONFIG_STRING_MAX 200
/** Most entries in a ZLIST or DLIST value. */
#define WT_CONFIG_LIST_MAX 256
/** Largest Noll index in a ZLIST. */
#define WT_CONFIG_NOLL_MAX 1000
/** A buffer of this size holds wt_config_format() of any value. */
#define WT_CONFIG_TEXT_MAX 8192

/** Number of options in the table (WT_OPT_COUNT). */
size_t wt_option_count(void);

/** The descriptor of option id; NULL when id is out of range. */
const wt_option *wt_option_get(wt_opt_id id);

/** The option named "section.key" (e.g. "control.gain"); NULL if unknown. */
const wt_option *wt_option_find(const char *section_dot_key);

/**
 * Check that value is valid for option o (type, range, choices), exactly as
 * wt_config_load() and wt_config_set() check it; surrounding blanks are
 * ignored.  o need not come from the table.  Returns 0 or -WT_ECONFIG with
 * the message "section.key: reason".
 */
int wt_option_check(const wt_option *o, const char *value, wt_error *err);

/** A value for every option. */
typedef struct wt_config wt_config;

/** A new config with every option at its default. */
int wt_config_create(wt_config **out, wt_error *err);

/** Free c (NULL is fine). */
void wt_config_destroy(wt_config *c);

/** Copy every value of src into dst.  No allocation.  0 or -EINVAL. */
int wt_config_copy(wt_config *dst, const wt_config *src);

/**
 * Read the INI file at path and apply its values over c's current ones
 * (options the file does not name keep their value).  All or nothing: on
 * any error c is left exactly as it was.  Errors: -errno when the file
 * cannot be opened or read ("path: strerror"), -WT_ECONFIG when the file is
 * refused ("path:line: section.key: reason").  Refused: unknown sections and
 * keys, keys outside a section, a key given twice, invalid values, lines too
 * long for inih, lines that are neither a section, a key nor a comment.
 */
int wt_config_load(wt_config *c, const char *path, wt_error *err);

/**
 * Set option "section.key" from text, validated as in wt_config_load().
 * On error the value is unchanged and the message is "section.key: reason".
 * RESTART options are accepted too: refusing them while the loop runs is the
 * caller's policy (see wt_option.live).
 */
int wt_config_set(wt_config *c, const char *section_dot_key, const char *value,
		  wt_error *err);

/**
 * Write option id's value as INI text (doubles in the shortest form that
 * reads back to the same number).  Returns the text's length, -ENOSPC when
 * it does not fit in len bytes (buf then holds a cut, terminated prefix) or
 * -EINVAL for an unknown id.
 */
int wt_config_format(const wt_config *c, wt_opt_id id, char *buf, size_t len);

/*
 * Typed readers.  Each expects an option of its type and returns 0, false,
 * "" or -1 for an option of another type.
 */
long wt_config_int(const wt_config *c, wt_opt_id id);
double wt_config_double(const wt_config *c, wt_opt_id id);
bool wt_config_bool(const wt_config *c, wt_opt_id id);
/** STRING and ENUM: the text (an ENUM's choice as spelled in the table). */
const char *wt_config_string(const wt_config *c, wt_opt_id id);
/** ENUM: index of the value in the choices. */
int wt_config_enum(const wt_config *c, wt_opt_id id);

/**
 * ZLIST: copy up to max pairs (index j, value v) in the order given and
 * return how many were copied; with j or v NULL, copy nothing and return the
 * list's length.  -EINVAL for an option that is not a ZLIST.
 */
int wt_config_zlist(const wt_config *c, wt_opt_id id, int *j, double *v,
		    int max);
/** DLIST: as wt_config_zlist(), for a list of numbers. */
int wt_config_dlist(const wt_config *c, wt_opt_id id, double *v, int max);

/**
 * Print every option, one per line:
 * section.key  type  default  [min, max] or {choices}  live|restart  help
 */
void wt_config_print_help(FILE *out);

/**
 * Write c as a commented INI file that wt_config_load() reads back to the
 * same values: section headers, and before each option a comment with its
 * help, type, range and live|restart.  only_sections: comma-separated
 * section names to write ("sensor,mirror"), or NULL for all.
 */
void wt_config_write_ini(const wt_config *c, FILE *out,
			 const char *only_sections);

#endif /* WT_CONFIG_H */
