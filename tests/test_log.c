/*
 * test_log.c - levelled, rate-limited logging (lib/wt_log.c).
 *
 * Sources of truth: the severity numbers of RFC 5424 section 6.2.1 (0
 * emergency .. 7 debug, as <syslog.h> defines them) and the behaviour
 * stated in lib/wt_log.h.
 */
#include "wt_test.h"

#include <errno.h>
#include <string.h>

#include "wt_log.h"

static int evaluated;

static int count_evaluation(void)
{
	evaluated++;
	return 42;
}

/* Log into a memory stream; the text written, in a new buffer. */
static char *capture(int level, int msg_level)
{
	char *text = NULL;
	size_t len = 0;
	FILE *fp = open_memstream(&text, &len);
	wt_log lg;

	assert_non_null(fp);
	wt_log_init(&lg, "unit", level, WT_LOG_STREAM, fp);
	WT_LOG(&lg, msg_level, "value %d", count_evaluation());
	wt_log_close(&lg);
	fclose(fp);
	return text;
}

static void arguments_below_the_level_are_not_evaluated(void **state)
{
	char *text;

	(void)state;
	evaluated = 0;
	text = capture(LOG_WARNING, LOG_DEBUG);
	assert_int_equal(evaluated, 0);
	assert_string_equal(text, "");
	free(text);
	text = capture(LOG_WARNING, LOG_ERR);
	assert_int_equal(evaluated, 1);
	/* One line: ident[pid]: level: message. */
	assert_non_null(strstr(text, "unit["));
	assert_non_null(strstr(text, "]: err: value 42\n"));
	assert_ptr_equal(strchr(text, '\n'), text + strlen(text) - 1);
	free(text);
}

static void level_names_follow_syslog(void **state)
{
	(void)state;
	/* RFC 5424 section 6.2.1: 0 Emergency ... 7 Debug. */
	assert_int_equal(wt_log_level_parse("emerg"), 0);
	assert_int_equal(wt_log_level_parse("err"), 3);
	assert_int_equal(wt_log_level_parse("error"), 3);
	assert_int_equal(wt_log_level_parse("WARNING"), 4);
	assert_int_equal(wt_log_level_parse("warn"), 4);
	assert_int_equal(wt_log_level_parse("notice"), 5);
	assert_int_equal(wt_log_level_parse("debug"), 7);
	assert_int_equal(wt_log_level_parse("6"), 6);
	assert_int_equal(wt_log_level_parse("8"), -EINVAL);
	assert_int_equal(wt_log_level_parse("loud"), -EINVAL);
	assert_int_equal(wt_log_level_parse(""), -EINVAL);
	assert_int_equal(wt_log_level_parse(NULL), -EINVAL);
	assert_string_equal(wt_log_level_name(LOG_INFO), "info");
	assert_string_equal(wt_log_level_name(9), "?");
}

static void rate_limit_passes_a_burst_per_interval(void **state)
{
	wt_ratelimit rl;
	unsigned long held = 99;
	int k, passed = 0;

	(void)state;
	wt_ratelimit_init(&rl, 1000, 3);
	/* 10 messages in one interval: 3 pass, 7 are held back. */
	for (k = 0; k < 10; k++) {
		passed += wt_ratelimit_pass(&rl, 5000 + (uint64_t)k, &held);
	}
	assert_int_equal(passed, 3);
	/* The first one of the next interval says how many were held. */
	assert_true(wt_ratelimit_pass(&rl, 6000, &held));
	assert_int_equal(held, 7);
	assert_true(wt_ratelimit_pass(&rl, 6001, &held));
	assert_int_equal(held, 0);
}

static void rate_limited_macro_notes_suppressed_messages(void **state)
{
	char *text = NULL;
	size_t len = 0;
	FILE *fp = open_memstream(&text, &len);
	wt_ratelimit rl;
	wt_log lg;
	int k;

	(void)state;
	assert_non_null(fp);
	wt_log_init(&lg, "unit", LOG_DEBUG, WT_LOG_STREAM, fp);
	/* A long interval: one message passes, the rest are held. */
	wt_ratelimit_init(&rl, 3600ull * 1000000000ull, 1);
	evaluated = 0;
	for (k = 0; k < 5; k++) {
		WT_LOG_RATELIMITED(&lg, &rl, LOG_NOTICE, "n %d",
				   count_evaluation());
	}
	fclose(fp);
	/* The arguments of held-back messages are not evaluated either. */
	assert_int_equal(evaluated, 1);
	assert_int_equal(rl.suppressed, 4);
	assert_non_null(strstr(text, "notice: n 42\n"));
	free(text);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(arguments_below_the_level_are_not_evaluated),
	cmocka_unit_test(level_names_follow_syslog),
	cmocka_unit_test(rate_limit_passes_a_burst_per_interval),
	cmocka_unit_test(rate_limited_macro_notes_suppressed_messages),
};

WT_TEST_MAIN(tests)
