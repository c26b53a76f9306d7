/*
 * test_configfiles.c - the files in config/ agree with the option table.
 */
#include "wt_test.h"

#include <string.h>

#include "wt_config.h"

static char *slurp(FILE *f, size_t *len)
{
	size_t cap = 1 << 16, n = 0;
	char *buf = malloc(cap);

	while (buf && !feof(f) && !ferror(f)) {
		if (n + 4096 > cap) {
			cap *= 2;
			buf = realloc(buf, cap);
			if (!buf) {
				break;
			}
		}
		n += fread(buf + n, 1, cap - n, f);
	}
	*len = n;
	return buf;
}

/* config/rig-template.ini is what `wavetrimd --write-config` writes now:
 * regenerate it with that command when the option table changes. */
static void rig_template_is_what_the_daemon_writes(void **state)
{
	FILE *p = popen(WT_DAEMON_BIN " --write-config", "r");
	FILE *f = fopen(WT_SOURCE_DIR "/config/rig-template.ini", "r");
	size_t n_gen = 0, n_file = 0;
	char *gen, *file;

	(void)state;
	assert_non_null(p);
	assert_non_null(f);
	gen = slurp(p, &n_gen);
	file = slurp(f, &n_file);
	assert_int_equal(pclose(p), 0);
	fclose(f);
	assert_non_null(gen);
	assert_non_null(file);
	if (n_gen != n_file || memcmp(gen, file, n_gen) != 0) {
		print_error("config/rig-template.ini is stale: run "
			    "build/daemon/wavetrimd --write-config > "
			    "config/rig-template.ini\n");
		fail();
	}
	free(gen);
	free(file);
}

/* Loading the template changes nothing: every value is the default. */
static void rig_template_loads_to_the_defaults(void **state)
{
	wt_config *dflt, *cfg;
	wt_error err;
	char a[WT_CONFIG_TEXT_MAX], b[WT_CONFIG_TEXT_MAX];

	(void)state;
	assert_int_equal(wt_config_create(&dflt, &err), 0);
	assert_int_equal(wt_config_create(&cfg, &err), 0);
	assert_int_equal(wt_config_set(cfg, "control.gain", "1.5", &err), 0);
	if (wt_config_load(cfg, WT_SOURCE_DIR "/config/rig-template.ini",
			   &err) != 0) {
		print_error("%s\n", err.msg);
		fail();
	}
	for (int id = 0; id < WT_OPT_COUNT; id++) {
		const wt_option *o = wt_option_get((wt_opt_id)id);

		assert_true(wt_config_format(dflt, (wt_opt_id)id, a,
					     sizeof(a)) >= 0);
		assert_true(wt_config_format(cfg, (wt_opt_id)id, b,
					     sizeof(b)) >= 0);
		/* The simulator's sections are not in the template. */
		if (strcmp(o->section, "sim") && strcmp(o->section, "dm") &&
		    strcmp(o->section, "sample") &&
		    strcmp(o->section, "turbulence") &&
		    strcmp(o->section, "camera")) {
			assert_string_equal(a, b);
		}
	}
	wt_config_destroy(dflt);
	wt_config_destroy(cfg);
}

/* The demo scenario names only options of the table, in range. */
static void demo_ini_loads_cleanly(void **state)
{
	wt_config *cfg;
	wt_error err;

	(void)state;
	assert_int_equal(wt_config_create(&cfg, &err), 0);
	if (wt_config_load(cfg, WT_SOURCE_DIR "/config/demo.ini", &err) != 0) {
		print_error("%s\n", err.msg);
		fail();
	}
	wt_config_destroy(cfg);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(rig_template_is_what_the_daemon_writes),
	cmocka_unit_test(rig_template_loads_to_the_defaults),
	cmocka_unit_test(demo_ini_loads_cleanly),
};

WT_TEST_MAIN(tests)
