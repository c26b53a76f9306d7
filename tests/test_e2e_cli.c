/*
 * test_e2e_cli.c - golden-output tests of the `wavetrim` CLI and of
 * tools/example_client.py against a real wavetrimd driving wavetrim-sim.
 *
 * Where the output is deterministic (a refusal's reason, the lines of
 * `set` and `get`) it is compared byte for byte with the text the protocol
 * defines (lib/wt_request.h, tools/wavetrim.c's header); where it holds
 * running figures (status, watch) its shape is checked line by line.
 * Exit statuses are the CLI's: 0 ok, 1 refused, 2 unreachable or misused.
 */
#include "wt_test.h"

#include <ctype.h>
#include <math.h>
#include <string.h>
#include <unistd.h>

#include "e2e_harness.h"
#include "wt_jsonparse.h"

#define CLI_BIN	   WT_BINARY_DIR "/tools/wavetrim"
#define CLIENT_PY  WT_SOURCE_DIR "/tools/example_client.py"
#define PYTHON	   "/usr/bin/python3" /* Debian's, with python3-zmq */
#define RUN_MS	   10000
#define NO_MATRIX  "no control matrix: calibrate or load a calibration first"
#define TOKENS_MAX 4096

/* A sim and a daemon on the demo scenario. */
static void start(e2e *e)
{
	assert_int_equal(access(CLI_BIN, X_OK), 0);
	assert_int_equal(e2e_setup(e, NULL), 0);
	assert_int_equal(e2e_start_sim(e), 0);
	assert_int_equal(e2e_start_daemon(e, NULL), 0);
}

/* Run the CLI with up to 4 words after `-e CONTROL` (NULL ends them). */
static void cli(const e2e *e, e2e_run_result *r, const char *a0, const char *a1,
		const char *a2, const char *a3)
{
	char *argv[16] = {(char *)CLI_BIN, "-e", (char *)e->control};
	const char *words[] = {a0, a1, a2, a3};
	int n = 3;

	for (int k = 0; k < 4 && words[k]; k++) {
		argv[n++] = (char *)words[k];
	}
	argv[n] = NULL;
	assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
	if (r->status != 0) {
		print_message("wavetrim %s: exit %d, stderr: %s", a0, r->status,
			      r->err);
	}
}

/* Count the lines of s (each ends with '\n'). */
static int lines(const char *s)
{
	int n = 0;

	for (; *s; s++) {
		n += *s == '\n';
	}
	return n;
}

/* Does the text hold the line `line` exactly? */
static int has_line(const char *text, const char *line)
{
	size_t n = strlen(line);

	for (const char *p = text; p && *p; p = strchr(p, '\n')) {
		if (*p == '\n') {
			p++;
		}
		if (strncmp(p, line, n) == 0 && (p[n] == '\n' || !p[n])) {
			return 1;
		}
	}
	return 0;
}

/*
 * `status`: one "name: value" line per member, nested objects as dotted
 * names (tools/wavetrim.c's header), the state "open" of a fresh daemon
 * (wt_request.h section 1: a daemon starts open).
 */
static void status_prints_name_value_lines_with_state_open(void **st)
{
	e2e e;
	e2e_run_result r;
	const char *p;
	int n = 0;

	(void)st;
	start(&e);
	cli(&e, &r, "status", NULL, NULL, NULL);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.err, "");
	assert_true(has_line(r.out, "state: open"));
	assert_true(has_line(r.out, "fault: null"));
	assert_true(has_line(r.out, "modes: 0"));
	assert_true(has_line(r.out, "calibration.matrix: false"));
	/* Every line is NAME: VALUE, NAME lower-case words joined by dots. */
	for (p = r.out; *p; n++) {
		const char *end = strchr(p, '\n');
		const char *c = p;

		assert_non_null(end);
		while (islower((unsigned char)*c) || *c == '_' || *c == '.' ||
		       isdigit((unsigned char)*c)) {
			c++;
		}
		assert_true(c > p);
		assert_true(c + 2 <= end && c[0] == ':' && c[1] == ' ');
		p = end + 1;
	}
	/* state, counts.*, refused.*, calibration.* ...: dozens of lines. */
	assert_true(n >= 30);
	e2e_stop_clean(&e);
}

/* `--json status`: the daemon's reply unchanged, one JSON object on one
 * line, "ok" true (wt_request.h section 1). */
static void json_status_is_one_object_with_ok_true(void **st)
{
	e2e e;
	e2e_run_result r;
	wt_jtok *t = malloc(sizeof(*t) * TOKENS_MAX);
	size_t len;
	int ok, res, state;
	char s[32];

	(void)st;
	assert_non_null(t);
	start(&e);
	cli(&e, &r, "--json", "status", NULL, NULL);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.err, "");
	assert_int_equal(lines(r.out), 1);
	len = strlen(r.out) - 1; /* without the line end */
	assert_true(wt_jsonp_parse(r.out, len, t, TOKENS_MAX, NULL) > 0);
	assert_int_equal(t[0].type, WT_JSON_OBJECT);
	/* the object is the whole line: '{' first, '}' last */
	assert_true(t[0].start == 0 && t[0].end == len);
	ok = wt_jsonp_member(r.out, t, 0, "ok");
	assert_true(ok > 0 && wt_jsonp_true(&t[ok]));
	res = wt_jsonp_member(r.out, t, 0, "result");
	assert_true(res > 0);
	state = wt_jsonp_member(r.out, t, res, "state");
	assert_true(state > 0);
	assert_true(wt_jsonp_string(r.out, &t[state], s, sizeof(s)) >= 0);
	assert_string_equal(s, "open");
	free(t);
	e2e_stop_clean(&e);
}

/* `close` without a control matrix: exit 1, the daemon's reason (its text
 * in wt_request.h, word `close`) on stderr, nothing on stdout. */
static void close_before_calibration_exits_1_with_daemon_reason(void **st)
{
	e2e e;
	e2e_run_result r;

	(void)st;
	start(&e);
	cli(&e, &r, "close", NULL, NULL, NULL);
	assert_int_equal(r.status, 1);
	assert_string_equal(r.out, "");
	assert_string_equal(r.err, "wavetrim: " NO_MATRIX "\n");
	/* Refused means nothing changed: still open. */
	assert_int_equal(e2e_wait_state(&e, "open", 1000), 0);
	e2e_stop_clean(&e);
}

/* Nobody at the endpoint: exit 2 once the timeout (-w 300) has passed,
 * not later than a second after it, with a message naming the endpoint. */
static void absent_daemon_exits_2_within_timeout(void **st)
{
	e2e e;
	e2e_run_result r;
	char nobody[300];
	char *argv[] = {(char *)CLI_BIN, "-e",	   nobody, "-w",
			"300",		 "status", NULL};

	(void)st;
	assert_int_equal(access(CLI_BIN, X_OK), 0);
	assert_int_equal(e2e_setup(&e, NULL), 0);
	snprintf(nobody, sizeof(nobody), "ipc://%s/nobody", e.dir);
	assert_int_equal(e2e_run(argv, RUN_MS, &r), 0);
	print_message("exit %d after %d ms: %s", r.status, r.elapsed_ms, r.err);
	assert_int_equal(r.status, 2);
	assert_string_equal(r.out, "");
	assert_true(r.elapsed_ms < 300 + 1000);
	assert_true(strncmp(r.err, "wavetrim: ", 10) == 0);
	assert_non_null(strstr(r.err, nobody));
	assert_int_equal(lines(r.err), 1);
	e2e_teardown(&e, NULL, NULL);
}

/* `set control.gain 0.4` then `get control.gain`: exact lines, the value
 * as a JSON number, a live option (wt_request.h, words set and get), and
 * the daemon's own status agrees. */
static void set_then_get_control_gain_shows_new_value(void **st)
{
	e2e e;
	e2e_run_result r;

	(void)st;
	start(&e);
	cli(&e, &r, "set", "control.gain", "0.4", NULL);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.err, "");
	assert_string_equal(r.out, "key: control.gain\nvalue: 0.4\n");
	cli(&e, &r, "get", "control.gain", NULL, NULL);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.err, "");
	assert_string_equal(r.out,
			    "key: control.gain\nvalue: 0.4\nlive: true\n");
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_true(fabs(e2e_reply_number(&e, "result.gain") - 0.4) < 1e-6);
	e2e_stop_clean(&e);
}

/* A structural option: exit 1, "SECTION.KEY needs a restart" (wt_request.h,
 * word set), and the running value stays. */
static void set_structural_option_exits_1_needs_restart(void **st)
{
	e2e e;
	e2e_run_result r;

	(void)st;
	start(&e);
	cli(&e, &r, "set", "sensor.lenslets", "8", NULL);
	assert_int_equal(r.status, 1);
	assert_string_equal(r.out, "");
	assert_string_equal(r.err,
			    "wavetrim: sensor.lenslets needs a restart\n");
	cli(&e, &r, "get", "sensor.lenslets", NULL, NULL);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.out,
			    "key: sensor.lenslets\nvalue: 16\nlive: false\n");
	e2e_stop_clean(&e);
}

/* Frames answered, from a watch line "state=open ... frames=N ...". */
static long watch_frames(const char *line)
{
	const char *f = strstr(line, " frames=");

	return f ? strtol(f + 8, NULL, 10) : -1;
}

/*
 * `watch -n 2` (endpoints from the INI, -c): exactly two lines, one per
 * status message, "key=value" words starting with the state; the frames
 * count grows from one to the next (the simulator runs in lockstep).
 */
static void watch_n_2_prints_two_status_lines(void **st)
{
	e2e e;
	e2e_run_result r;
	char *argv[] = {(char *)CLI_BIN, "-c", NULL, "watch", "-n", "2", NULL};
	const char *second;

	(void)st;
	start(&e);
	argv[2] = e.ini;
	assert_int_equal(e2e_run(argv, RUN_MS, &r), 0);
	print_message("%s", r.out);
	assert_int_equal(r.status, 0);
	assert_string_equal(r.err, "");
	assert_int_equal(lines(r.out), 2);
	second = strchr(r.out, '\n') + 1;
	assert_true(strncmp(r.out, "state=open ", 11) == 0);
	assert_true(strncmp(second, "state=open ", 11) == 0);
	assert_true(watch_frames(r.out) >= 0);
	assert_true(watch_frames(second) > watch_frames(r.out));
	/* daemon.status_hz = 5 in the demo: two messages take ~0.2-0.4 s. */
	assert_true(r.elapsed_ms < 3000);
	e2e_stop_clean(&e);
}

/* An unknown word: exit 1 with the parser's reason (wt_request.h,
 * wt_request_parse()). */
static void unknown_word_exits_1_with_reason(void **st)
{
	e2e e;
	e2e_run_result r;

	(void)st;
	start(&e);
	cli(&e, &r, "frobnicate", NULL, NULL, NULL);
	assert_int_equal(r.status, 1);
	assert_string_equal(r.out, "");
	assert_string_equal(r.err,
			    "wavetrim: unknown word 'frobnicate' (try help)\n");
	e2e_stop_clean(&e);
}

/*
 * tools/example_client.py against the real daemon (endpoints from an INI):
 * exit 0 (every reply well formed), `open` done, `close` refused with the
 * daemon's reason (no calibration in this test), three status lines.
 *
 * The client reads its INI with Python's configparser, which refuses a
 * section that appears twice (as e->ini has them: inih merges them), so it
 * gets an INI of its own with one [daemon] section.
 */
static void example_client_prints_daemon_refusal_of_close(void **st)
{
	e2e e;
	e2e_run_result r;
	char *argv[] = {(char *)PYTHON,
			(char *)CLIENT_PY,
			"-c",
			NULL,
			"-w",
			"5000",
			NULL};
	static const char status_line[] =
		"status: ok=true result={\"state\": \"open\", ";
	int n_status = 0;

	char ini[256];
	FILE *f;

	(void)st;
	start(&e);
	snprintf(ini, sizeof(ini), "%s/client.ini", e.dir);
	f = fopen(ini, "w");
	assert_non_null(f);
	fprintf(f, "[daemon]\ncontrol = %s\ntelemetry = %s\n", e.control,
		e.telemetry);
	assert_int_equal(fclose(f), 0);
	argv[3] = ini;
	assert_int_equal(e2e_run(argv, 20000, &r), 0);
	print_message("%s%s", r.out, r.err);
	assert_int_equal(r.status, 0);
	assert_true(strncmp(r.out, status_line, strlen(status_line)) == 0);
	assert_true(has_line(r.out, "open: ok=true result={\"state\": "
				    "\"open\"}"));
	assert_true(has_line(r.out, "close: ok=false error=\"" NO_MATRIX "\""));
	for (const char *p = r.out; (p = strstr(p, "\nstatus: state=open "
						   "frames="));
	     p++) {
		n_status++;
	}
	assert_int_equal(n_status, 3);
	assert_int_equal(lines(r.out), 6);
	e2e_stop_clean(&e);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(status_prints_name_value_lines_with_state_open),
	cmocka_unit_test(json_status_is_one_object_with_ok_true),
	cmocka_unit_test(close_before_calibration_exits_1_with_daemon_reason),
	cmocka_unit_test(absent_daemon_exits_2_within_timeout),
	cmocka_unit_test(set_then_get_control_gain_shows_new_value),
	cmocka_unit_test(set_structural_option_exits_1_needs_restart),
	cmocka_unit_test(watch_n_2_prints_two_status_lines),
	cmocka_unit_test(unknown_word_exits_1_with_reason),
	cmocka_unit_test(example_client_prints_daemon_refusal_of_close),
};

WT_TEST_MAIN(tests)
