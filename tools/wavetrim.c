/*
 * wavetrim - command-line client of wavetrimd.
 *
 *   wavetrim [OPTIONS] WORD...        send one control request, print reply
 *   wavetrim [OPTIONS] watch [-n N]   print a line per status message
 *   wavetrim [OPTIONS] snapshot FILE  draw the live panels to FILE.png|.svg
 *   wavetrim [OPTIONS] calibrate [single|hadamard]
 *                                     calibrate, wait, print the report
 *                                     (--no-wait: print the reply only)
 *   wavetrim [--json] calibration show FILE
 *                                     print a calibration file's report
 *                                     (no daemon needed)
 *   wavetrim keygen PREFIX            write a CURVE key pair, PREFIX.key
 *                                     (secret, mode 0600) and PREFIX.pub
 *
 * The request is the words joined by spaces (a word holding a space or a
 * quote is sent double-quoted); the reply is one JSON object.  By default the
 * result is printed as "name: value" lines; --json prints the reply as it
 * came.  Exit status: 0 when the daemon said ok, 1 when it refused (the
 * reason goes to stderr), 2 when it could not be reached or the command line
 * is wrong.
 */
#include <errno.h>
#include <getopt.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cblas.h>
#include <zmq.h>

#include "wt_calreport.h"
#include "wt_config.h"
#include "wt_draw.h"
#include "wt_image.h"
#include "wt_jsonparse.h"
#include "wt_store.h"
#include "wt_secure.h"

#define REQUEST_MAX 4096
#define REPLY_MAX   (1 << 20)
#define TOKENS_MAX  16384

static volatile sig_atomic_t stop_flag;

/* --server-key and --client-key (NULL: no CURVE), set once by main. */
static const char *server_key_file, *client_key_prefix;

/* Make sock a CURVE client when keys were given and endpoint is tcp. */
static int use_keys(void *sock, const char *endpoint)
{
	wt_error err;

	if (wt_curve_client_files(sock, endpoint, server_key_file,
				  client_key_prefix, &err) < 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		return -1;
	}
	return 0;
}

/* keygen PREFIX */
static int do_keygen(const char *prefix)
{
	wt_keypair kp;
	wt_error err;

	if (wt_key_generate(prefix, &kp, &err) < 0) {
		fprintf(stderr, "wavetrim: keygen: %s\n", err.msg);
		return 2;
	}
	printf("%s.key: secret key (mode 0600, keep it private)\n"
	       "%s.pub: public key %s\n",
	       prefix, prefix, kp.public_key);
	memset(&kp, 0, sizeof(kp));
	return 0;
}

static void on_signal(int sig)
{
	(void)sig;
	stop_flag = 1;
}

static void usage(FILE *out)
{
	fprintf(out,
		"usage: wavetrim [OPTIONS] WORD...      send one control "
		"request\n"
		"       wavetrim [OPTIONS] watch [-n N] print a line per "
		"status message\n"
		"       wavetrim [OPTIONS] snapshot FILE.png|FILE.svg\n"
		"                                       draw the live panels "
		"to a file\n"
		"       wavetrim [OPTIONS] calibrate [single|hadamard]\n"
		"                                       calibrate, wait for "
		"it, print the report\n"
		"       wavetrim [--json] calibration show FILE\n"
		"                                       print the report and "
		"summary of a file\n"
		"       wavetrim keygen PREFIX          write a CURVE key "
		"pair: "
		"PREFIX.key\n"
		"                                       (secret, 0600) and "
		"PREFIX.pub\n"
		"\n"
		"options:\n"
		"  -c, --config FILE       read the daemon's endpoints from "
		"FILE\n"
		"  -e, --control ENDPOINT  control endpoint (default from the "
		"option table)\n"
		"  -t, --telemetry ENDPOINT telemetry endpoint (for watch)\n"
		"      --json              print the daemon's JSON reply "
		"unchanged\n"
		"      --no-wait           calibrate: print the reply, do not "
		"wait for the report\n"
		"  -w, --timeout MS        give up after MS milliseconds "
		"(default 5000)\n"
		"      --server-key FILE   the daemon's CURVE public key "
		"(tcp endpoints)\n"
		"      --client-key PREFIX our CURVE key pair (PREFIX.key), "
		"listed in the\n"
		"                          daemon's daemon.clients or "
		"daemon.writers\n"
		"  -h, --help              this text\n"
		"\n"
		"Ask the daemon for its words with `wavetrim help`.\n");
}

/* Append word w to buf, quoting it when it holds blanks or quotes. */
static int append_word(char *buf, size_t cap, size_t *len, const char *w)
{
	int quote = w[0] == '\0' || strpbrk(w, " \t\"\\") != NULL;
	size_t n = *len;

	if (n > 0) {
		if (n + 1 >= cap) {
			return -ENOSPC;
		}
		buf[n++] = ' ';
	}
	if (quote) {
		if (n + 1 >= cap) {
			return -ENOSPC;
		}
		buf[n++] = '"';
	}
	for (const char *p = w; *p; p++) {
		if (*p == '\n' || *p == '\r') {
			return -EINVAL;
		}
		if (quote && (*p == '"' || *p == '\\')) {
			if (n + 1 >= cap) {
				return -ENOSPC;
			}
			buf[n++] = '\\';
		}
		if (n + 1 >= cap) {
			return -ENOSPC;
		}
		buf[n++] = *p;
	}
	if (quote) {
		if (n + 1 >= cap) {
			return -ENOSPC;
		}
		buf[n++] = '"';
	}
	buf[n] = '\0';
	*len = n;
	return 0;
}

/* Print one JSON value as text: strings unquoted, arrays space-separated. */
static void print_value(FILE *out, const char *js, const wt_jtok *t, int i)
{
	char s[1024];

	switch (t[i].type) {
	case WT_JSON_STRING:
		if (wt_jsonp_string(js, &t[i], s, sizeof(s)) >= 0) {
			fputs(s, out);
		}
		break;
	case WT_JSON_ARRAY:
		for (int k = 0; k < t[i].size; k++) {
			if (k > 0) {
				fputc(' ', out);
			}
			print_value(out, js, t, wt_jsonp_element(t, i, k));
		}
		break;
	default:
		fwrite(js + t[i].start, 1, t[i].end - t[i].start, out);
		break;
	}
}

/* Print an object as "prefix.name: value" lines, recursing into objects. */
static void print_members(FILE *out, const char *js, const wt_jtok *t, int obj,
			  const char *prefix)
{
	int i = obj + 1;

	for (int m = 0; m < t[obj].size; m++) {
		char key[256];
		char name[512];
		int v = i + 1;

		if (wt_jsonp_string(js, &t[i], key, sizeof(key)) < 0) {
			snprintf(key, sizeof(key), "?");
		}
		snprintf(name, sizeof(name), "%s%s%s", prefix,
			 prefix[0] ? "." : "", key);
		if (t[v].type == WT_JSON_OBJECT && t[v].size > 0) {
			print_members(out, js, t, v, name);
		} else {
			fprintf(out, "%s: ", name);
			print_value(out, js, t, v);
			fputc('\n', out);
		}
		i = t[v].next;
	}
}

/* One line of "name=value" for a status message. */
static void print_status_line(const char *js, size_t len, wt_jtok *t)
{
	int n = wt_jsonp_parse(js, len, t, TOKENS_MAX, NULL);
	int i = 1;

	if (n <= 0 || t[0].type != WT_JSON_OBJECT) {
		printf("(unreadable status message)\n");
		return;
	}
	for (int m = 0; m < t[0].size; m++) {
		char key[128];
		int v = i + 1;

		if (t[v].type != WT_JSON_OBJECT && t[v].type != WT_JSON_ARRAY &&
		    wt_jsonp_string(js, &t[i], key, sizeof(key)) >= 0) {
			printf("%s%s=", m ? " " : "", key);
			print_value(stdout, js, t, v);
		}
		i = t[v].next;
	}
	putchar('\n');
	fflush(stdout);
}

/* Print mode of do_request: human lines, the JSON as it came, or nothing
 * (the caller keeps the reply text). */
enum reply_out { OUT_HUMAN, OUT_JSON, OUT_KEEP };

static int do_request(void *ctx, const char *endpoint, const char *line,
		      int timeout_ms, enum reply_out mode, char **keep)
{
	void *sock = zmq_socket(ctx, ZMQ_REQ);
	int zero = 0;
	int rc = 2;
	char *reply = NULL;
	wt_jtok *t = NULL;
	int len, n, ok_i, res_i, err_i;

	if (!sock) {
		fprintf(stderr, "wavetrim: zmq_socket: %s\n",
			zmq_strerror(errno));
		return 2;
	}
	zmq_setsockopt(sock, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(sock, ZMQ_RCVTIMEO, &timeout_ms, sizeof(timeout_ms));
	zmq_setsockopt(sock, ZMQ_SNDTIMEO, &timeout_ms, sizeof(timeout_ms));
	if (use_keys(sock, endpoint) < 0) {
		goto out;
	}
	if (zmq_connect(sock, endpoint) != 0) {
		fprintf(stderr, "wavetrim: cannot connect to %s: %s\n",
			endpoint, zmq_strerror(errno));
		goto out;
	}
	if (zmq_send(sock, line, strlen(line), 0) < 0) {
		fprintf(stderr, "wavetrim: cannot send to %s: %s\n", endpoint,
			zmq_strerror(errno));
		goto out;
	}
	reply = malloc(REPLY_MAX + 1);
	t = malloc(sizeof(*t) * TOKENS_MAX);
	if (!reply || !t) {
		fprintf(stderr, "wavetrim: out of memory\n");
		goto out;
	}
	do {
		len = zmq_recv(sock, reply, REPLY_MAX, 0);
	} while (len < 0 && errno == EINTR && !stop_flag);
	if (len < 0) {
		fprintf(stderr,
			"wavetrim: no reply from %s within %d ms (is wavetrimd "
			"running?)\n",
			endpoint, timeout_ms);
		goto out;
	}
	if (len > REPLY_MAX) {
		fprintf(stderr, "wavetrim: reply longer than %d bytes\n",
			REPLY_MAX);
		goto out;
	}
	reply[len] = '\0';
	n = wt_jsonp_parse(reply, (size_t)len, t, TOKENS_MAX, NULL);
	ok_i = n > 0 ? wt_jsonp_member(reply, t, 0, "ok") : -1;
	if (ok_i < 0) {
		fprintf(stderr, "wavetrim: malformed reply: %s\n", reply);
		goto out;
	}
	rc = wt_jsonp_true(&t[ok_i]) ? 0 : 1;
	if (mode == OUT_KEEP && rc == 0) {
		*keep = reply;
		reply = NULL;
		goto out;
	}
	if (mode == OUT_JSON) {
		puts(reply);
		goto out;
	}
	if (rc != 0) {
		char msg[1024] = "refused";

		err_i = wt_jsonp_member(reply, t, 0, "error");
		if (err_i >= 0) {
			wt_jsonp_string(reply, &t[err_i], msg, sizeof(msg));
		}
		fprintf(stderr, "wavetrim: %s\n", msg);
		goto out;
	}
	res_i = wt_jsonp_member(reply, t, 0, "result");
	if (res_i >= 0) {
		if (t[res_i].type == WT_JSON_OBJECT) {
			print_members(stdout, reply, t, res_i, "");
		} else {
			print_value(stdout, reply, t, res_i);
			putchar('\n');
		}
	} else {
		puts("ok");
	}
out:
	free(t);
	free(reply);
	zmq_close(sock);
	return rc;
}

/* snapshot: the status reply plus ~2 s of frame records and the newest
 * sensor image, drawn to path. */
static int do_snapshot(void *ctx, const wt_config *cfg, const char *control,
		       const char *telemetry, const char *path, int timeout_ms)
{
	static const char topic[] = "frame ";
	const size_t skip = sizeof(topic) - 1;
	const int max_records = 100;
	void *sock = NULL;
	char *status = NULL;
	char *records = NULL;
	char *msg = NULL;
	size_t rec = 0, have = 0, msg_cap, image_len = 0;
	char *image = NULL;
	int zero = 0, slice = 100, rc = 2;
	wt_error err;

	/* The drawing code fits Zernike modes with LAPACK: one BLAS thread. */
	openblas_set_num_threads(1);
	if (wt_draw_record_size(cfg, &rec, &err) != 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		return 2;
	}
	rc = do_request(ctx, control, "status", timeout_ms, OUT_KEEP, &status);
	if (rc != 0) {
		return rc;
	}
	rc = 2;
	records = malloc(rec * (size_t)max_records);
	msg_cap = skip + (rec > WT_IMAGE_BYTES_MAX ? rec : WT_IMAGE_BYTES_MAX) +
		  1;
	msg = malloc(msg_cap);
	image = malloc(WT_IMAGE_BYTES_MAX);
	sock = zmq_socket(ctx, ZMQ_SUB);
	if (!records || !msg || !image || !sock) {
		fprintf(stderr, "wavetrim: out of memory\n");
		goto out;
	}
	zmq_setsockopt(sock, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(sock, ZMQ_RCVTIMEO, &slice, sizeof(slice));
	zmq_setsockopt(sock, ZMQ_SUBSCRIBE, topic, skip);
	zmq_setsockopt(sock, ZMQ_SUBSCRIBE, WT_IMAGE_TOPIC, skip);
	if (use_keys(sock, telemetry) < 0) {
		goto out;
	}
	if (zmq_connect(sock, telemetry) != 0) {
		fprintf(stderr, "wavetrim: cannot connect to %s: %s\n",
			telemetry, zmq_strerror(errno));
		goto out;
	}
	/* Frame records come every daemon.frame_decimation frames; keep the
	 * newest max_records of what arrives in about two seconds. */
	for (int waited = 0; waited < 2000 && !stop_flag; waited += slice) {
		int len = zmq_recv(sock, msg, msg_cap, 0);

		if (len > (int)skip && (size_t)len < msg_cap &&
		    memcmp(msg, WT_IMAGE_TOPIC, skip) == 0) {
			image_len = (size_t)len - skip;
			memcpy(image, msg + skip, image_len);
			continue;
		}
		if (len < 0 || (size_t)len != skip + rec ||
		    memcmp(msg, topic, skip) != 0) {
			continue;
		}
		if (have == (size_t)max_records) {
			memmove(records, records + rec, rec * (have - 1));
			have--;
		}
		memcpy(records + rec * have++, msg + skip, rec);
	}
	if (wt_draw_snapshot_image(cfg, status, records, rec * have,
				   image_len ? image : NULL, image_len, path,
				   &err) != 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		goto out;
	}
	printf("%s: %zu frame records%s drawn%s\n", path, have,
	       image_len ? " and a sensor image" : "",
	       have ? "" : " (no frame telemetry arrived: panels are empty)");
	rc = 0;
out:
	if (sock) {
		zmq_close(sock);
	}
	free(msg);
	free(image);
	free(records);
	free(status);
	return rc;
}

static int do_watch(void *ctx, const char *endpoint, long count, int json,
		    int timeout_ms)
{
	void *sock = zmq_socket(ctx, ZMQ_SUB);
	int zero = 0;
	int rc = 2;
	char *msg = malloc(REPLY_MAX + 1);
	wt_jtok *t = malloc(sizeof(*t) * TOKENS_MAX);
	static const char topic[] = "status ";
	long seen = 0;

	if (!sock || !msg || !t) {
		fprintf(stderr, "wavetrim: cannot set up watch\n");
		goto out;
	}
	zmq_setsockopt(sock, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(sock, ZMQ_RCVTIMEO, &timeout_ms, sizeof(timeout_ms));
	zmq_setsockopt(sock, ZMQ_SUBSCRIBE, topic, strlen(topic));
	if (use_keys(sock, endpoint) < 0) {
		goto out;
	}
	if (zmq_connect(sock, endpoint) != 0) {
		fprintf(stderr, "wavetrim: cannot connect to %s: %s\n",
			endpoint, zmq_strerror(errno));
		goto out;
	}
	rc = 0;
	while (!stop_flag && (count <= 0 || seen < count)) {
		int len = zmq_recv(sock, msg, REPLY_MAX, 0);
		size_t skip = strlen(topic);

		if (len < 0) {
			if (errno == EINTR) {
				continue;
			}
			fprintf(stderr,
				"wavetrim: no status from %s within %d ms\n",
				endpoint, timeout_ms);
			rc = 2;
			break;
		}
		if (len > REPLY_MAX || (size_t)len < skip) {
			continue;
		}
		msg[len] = '\0';
		if (json) {
			puts(msg + skip);
			fflush(stdout);
		} else {
			print_status_line(msg + skip, (size_t)len - skip, t);
		}
		seen++;
	}
out:
	free(t);
	free(msg);
	if (sock) {
		zmq_close(sock);
	}
	return rc;
}

/*
 * calibrate: subscribe to events first (so the report cannot be missed),
 * send the request, then wait for the `calibration` event and print its
 * report.  Any telemetry message restarts the timeout, so a long
 * calibration is waited for as long as the daemon is alive.
 */
static int do_calibrate_wait(void *ctx, const char *control,
			     const char *telemetry, const char *line, int json,
			     int timeout_ms)
{
	static const char ev[] = "event ", st[] = "status ";
	void *sock = zmq_socket(ctx, ZMQ_SUB);
	char *msg = malloc(REPLY_MAX + 1), *reply = NULL;
	wt_jtok *t = malloc(sizeof(*t) * TOKENS_MAX);
	int zero = 0, slice = 100, idle = 0, rc = 2;

	if (!sock || !msg || !t) {
		fprintf(stderr, "wavetrim: out of memory\n");
		goto out;
	}
	zmq_setsockopt(sock, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(sock, ZMQ_RCVTIMEO, &slice, sizeof(slice));
	zmq_setsockopt(sock, ZMQ_SUBSCRIBE, ev, strlen(ev));
	zmq_setsockopt(sock, ZMQ_SUBSCRIBE, st, strlen(st));
	if (use_keys(sock, telemetry) < 0) {
		goto out;
	}
	if (zmq_connect(sock, telemetry) != 0) {
		fprintf(stderr, "wavetrim: cannot connect to %s: %s\n",
			telemetry, zmq_strerror(errno));
		goto out;
	}
	/* A SUB connection takes a moment before it receives anything:
	 * wait for the first status message before asking. */
	while (!stop_flag && idle < timeout_ms) {
		int len = zmq_recv(sock, msg, REPLY_MAX, 0);

		if (len >= (int)strlen(st) &&
		    strncmp(msg, st, strlen(st)) == 0) {
			break;
		}
		idle += len < 0 ? slice : 0;
	}
	rc = do_request(ctx, control, line, timeout_ms, OUT_KEEP, &reply);
	if (rc != 0) {
		if (rc == 1) {
			/* Refused: print the reason as a plain request
			 * would. */
			rc = do_request(ctx, control, line, timeout_ms,
					json ? OUT_JSON : OUT_HUMAN, NULL);
		}
		goto out;
	}
	if (!json) {
		printf("calibrating...\n");
		fflush(stdout);
	}
	rc = 2;
	idle = 0;
	while (!stop_flag && idle < timeout_ms) {
		int len = zmq_recv(sock, msg, REPLY_MAX, 0), n, name, rep;
		char what[64] = "";
		const char *body = msg + strlen(ev);

		if (len < 0) {
			idle += slice;
			continue;
		}
		idle = 0;
		if (len > REPLY_MAX || (size_t)len < strlen(ev) ||
		    strncmp(msg, ev, strlen(ev)) != 0) {
			continue;
		}
		msg[len] = '\0';
		n = wt_jsonp_parse(body, strlen(body), t, TOKENS_MAX, NULL);
		name = n > 0 ? wt_jsonp_member(body, t, 0, "event") : -1;
		if (name < 0 ||
		    wt_jsonp_string(body, &t[name], what, sizeof(what)) < 0) {
			continue;
		}
		if (strcmp(what, "calibration_aborted") == 0 ||
		    strcmp(what, "warning") == 0) {
			fprintf(stderr, "wavetrim: %s\n", body);
			if (strcmp(what, "calibration_aborted") == 0) {
				rc = 1;
				goto out;
			}
			continue;
		}
		if (strcmp(what, "calibration") != 0) {
			continue;
		}
		if (json) {
			puts(body);
			rc = 0;
			goto out;
		}
		rep = wt_jsonp_member(body, t, 0, "report");
		if (rep < 0 || t[rep].type != WT_JSON_OBJECT) {
			printf("calibration done (no report)\n");
			rc = 0;
			goto out;
		}
		rc = wt_calreport_print(stdout, body + t[rep].start,
					(size_t)(t[rep].end - t[rep].start),
					NULL) == 0
			     ? 0
			     : 2;
		goto out;
	}
	fprintf(stderr,
		"wavetrim: no calibration report from %s (nothing heard for "
		"%d ms)\n",
		telemetry, timeout_ms);
out:
	free(reply);
	free(t);
	free(msg);
	if (sock) {
		zmq_close(sock);
	}
	return rc;
}

/* calibration show FILE: the file's summary and report, no daemon. */
static int do_show(const char *path, int json)
{
	wt_calibration *c = NULL;
	wt_error err;
	char *buf = NULL;
	size_t cap;
	wt_json j;
	int rc = 2, n;

	if (wt_store_read(path, &c, &err) < 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		return 2;
	}
	cap = 8192 + 32 * (size_t)c->n_sv + wt_calreport_json_size(c->report);
	buf = malloc(cap);
	if (!buf) {
		fprintf(stderr, "wavetrim: out of memory\n");
		goto out;
	}
	wt_json_init(&j, buf, cap);
	wt_json_object_begin(&j);
	wt_json_key(&j, "file");
	wt_json_string(&j, path);
	wt_json_key(&j, "created");
	wt_json_string(&j, c->created);
	wt_json_key(&j, "slopes");
	wt_json_int(&j, c->n_slopes);
	wt_json_key(&j, "actuators");
	wt_json_int(&j, c->n_act);
	wt_json_key(&j, "modes");
	wt_json_int(&j, c->modes);
	wt_json_key(&j, "singular_values");
	wt_json_double_array(&j, c->singular_values, (size_t)c->n_sv, 8);
	wt_json_key(&j, "report");
	if (c->report) {
		wt_calreport_json(&j, c->report);
	} else {
		wt_json_null(&j);
	}
	wt_json_object_end(&j);
	n = wt_json_finish(&j);
	if (n < 0) {
		fprintf(stderr, "wavetrim: report too long\n");
		goto out;
	}
	if (json) {
		puts(buf);
		rc = 0;
		goto out;
	}
	printf("file:        %s\n", path);
	printf("created:     %s\n", c->created[0] ? c->created : "?");
	printf("size:        %d slopes x %d actuators, %d modes in the "
	       "control matrix\n",
	       c->n_slopes, c->n_act, c->modes);
	if (!c->report) {
		printf("report:      none (the file was written before "
		       "calibration reports)\n");
		rc = 0;
		goto out;
	}
	wt_json_init(&j, buf, cap);
	wt_calreport_json(&j, c->report);
	n = wt_json_finish(&j);
	rc = n > 0 && wt_calreport_print(stdout, buf, (size_t)n, &err) == 0
		     ? 0
		     : 2;
out:
	free(buf);
	wt_calibration_destroy(c);
	return rc;
}

int main(int argc, char **argv)
{
	static const struct option longopts[] = {
		{"config", required_argument, NULL, 'c'},
		{"control", required_argument, NULL, 'e'},
		{"telemetry", required_argument, NULL, 't'},
		{"json", no_argument, NULL, 'j'},
		{"no-wait", no_argument, NULL, 'n'},
		{"timeout", required_argument, NULL, 'w'},
		{"help", no_argument, NULL, 'h'},
		{"server-key", required_argument, NULL, 'S'},
		{"client-key", required_argument, NULL, 'K'},
		{NULL, 0, NULL, 0},
	};
	wt_config *cfg = NULL;
	wt_error err;
	const char *control = NULL;
	const char *telemetry = NULL;
	const char *config_path = NULL;
	int json = 0;
	int no_wait = 0;
	int timeout_ms = 5000;
	int rc = 2;
	int opt;
	void *ctx = NULL;
	char line[REQUEST_MAX];
	size_t len = 0;

	/* Options stop at the first word, so request words may begin with '-'.
	 */
	while ((opt = getopt_long(argc, argv, "+c:e:t:w:h", longopts, NULL)) !=
	       -1) {
		switch (opt) {
		case 'c':
			config_path = optarg;
			break;
		case 'e':
			control = optarg;
			break;
		case 't':
			telemetry = optarg;
			break;
		case 'j':
			json = 1;
			break;
		case 'n':
			no_wait = 1;
			break;
		case 'w':
			timeout_ms = atoi(optarg);
			if (timeout_ms <= 0) {
				fprintf(stderr, "wavetrim: bad timeout %s\n",
					optarg);
				return 2;
			}
			break;
		case 'S':
			server_key_file = optarg;
			break;
		case 'K':
			client_key_prefix = optarg;
			break;
		case 'h':
			usage(stdout);
			return 0;
		default:
			usage(stderr);
			return 2;
		}
	}
	if (optind >= argc) {
		usage(stderr);
		return 2;
	}
	if (strcmp(argv[optind], "calibration") == 0) {
		if (argc - optind != 3 ||
		    strcmp(argv[optind + 1], "show") != 0) {
			fprintf(stderr,
				"wavetrim: usage: calibration show FILE\n");
			return 2;
		}
		return do_show(argv[optind + 2], json);
	}
	if (strcmp(argv[optind], "keygen") == 0) {
		if (argc - optind != 2) {
			fprintf(stderr, "wavetrim: usage: keygen PREFIX\n");
			return 2;
		}
		return do_keygen(argv[optind + 1]);
	}
	if (wt_config_create(&cfg, &err) != 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		return 2;
	}
	if (config_path && wt_config_load(cfg, config_path, &err) != 0) {
		fprintf(stderr, "wavetrim: %s\n", err.msg);
		goto out;
	}
	if (!control) {
		control = wt_config_string(cfg, WT_OPT_DAEMON_CONTROL);
	}
	if (!telemetry) {
		telemetry = wt_config_string(cfg, WT_OPT_DAEMON_TELEMETRY);
	}
	signal(SIGINT, on_signal);
	signal(SIGTERM, on_signal);
	ctx = zmq_ctx_new();
	if (!ctx) {
		fprintf(stderr, "wavetrim: zmq_ctx_new failed\n");
		goto out;
	}
	if (strcmp(argv[optind], "watch") == 0) {
		long count = 0;

		for (int k = optind + 1; k < argc; k++) {
			if (strcmp(argv[k], "-n") == 0 && k + 1 < argc) {
				count = atol(argv[++k]);
			} else {
				fprintf(stderr,
					"wavetrim: watch takes only -n N\n");
				goto out;
			}
		}
		rc = do_watch(ctx, telemetry, count, json, timeout_ms);
		goto out;
	}
	if (strcmp(argv[optind], "snapshot") == 0) {
		if (argc - optind != 2) {
			fprintf(stderr,
				"wavetrim: usage: snapshot FILE.png|.svg\n");
			goto out;
		}
		rc = do_snapshot(ctx, cfg, control, telemetry, argv[optind + 1],
				 timeout_ms);
		goto out;
	}
	line[0] = '\0';
	for (int k = optind; k < argc; k++) {
		int e = append_word(line, sizeof(line), &len, argv[k]);

		if (e != 0) {
			fprintf(stderr, "wavetrim: request %s\n",
				e == -EINVAL ? "holds a line break"
					     : "too long");
			goto out;
		}
	}
	if (strcmp(argv[optind], "calibrate") == 0 && !no_wait) {
		rc = do_calibrate_wait(ctx, control, telemetry, line, json,
				       timeout_ms);
		goto out;
	}
	rc = do_request(ctx, control, line, timeout_ms,
			json ? OUT_JSON : OUT_HUMAN, NULL);
out:
	if (ctx) {
		zmq_ctx_term(ctx);
	}
	wt_config_destroy(cfg);
	return rc;
}
