/* e2e_harness.c - simulator + daemon as processes for end-to-end tests. */
#include "e2e_harness.h"

#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <poll.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_jsonparse.h"

#define TOKENS_MAX 8192

/* Endpoints every test moves into its own folder. */
static const char *const moved[] = {"driver.frames", "driver.commands",
				    "daemon.control", "daemon.telemetry",
				    "sim.truth", NULL};

static int listed(const char *const *list, const char *name, size_t n)
{
	for (; list && *list; list++) {
		if (strncmp(*list, name, n) == 0 &&
		    ((*list)[n] == '=' || (*list)[n] == '\0')) {
			return 1;
		}
	}
	return 0;
}

static char *trim(char *s)
{
	char *end;

	while (*s == ' ' || *s == '\t') {
		s++;
	}
	end = s + strlen(s);
	while (end > s && (end[-1] == ' ' || end[-1] == '\t' ||
			   end[-1] == '\n' || end[-1] == '\r')) {
		*--end = '\0';
	}
	return s;
}

/* Copy the demo INI without the lines the test replaces. */
static int copy_scenario(FILE *out, const char *const *overrides)
{
	char path[512];
	char line[512];
	char section[64] = "";
	FILE *in;

	snprintf(path, sizeof(path), "%s/config/demo.ini", WT_SOURCE_DIR);
	in = fopen(path, "r");
	if (!in) {
		fprintf(stderr, "e2e: cannot read %s: %s\n", path,
			strerror(errno));
		return -1;
	}
	while (fgets(line, sizeof(line), in)) {
		char copy[512];
		char *s, *eq;

		snprintf(copy, sizeof(copy), "%s", line);
		s = trim(copy);
		if (s[0] == '[') {
			char *close = strchr(s, ']');

			if (close) {
				*close = '\0';
				snprintf(section, sizeof(section), "%s", s + 1);
			}
		} else if (s[0] != ';' && s[0] != '#' &&
			   (eq = strchr(s, '=')) != NULL) {
			char name[192];

			*eq = '\0';
			snprintf(name, sizeof(name), "%s.%s", section,
				 trim(s));
			if (listed(moved, name, strlen(name)) ||
			    listed(overrides, name, strlen(name))) {
				continue;
			}
		}
		fputs(line, out);
	}
	fclose(in);
	return 0;
}

static void put_option(FILE *out, const char *name, const char *value)
{
	const char *dot = strchr(name, '.');

	fprintf(out, "\n[%.*s]\n%s = %s\n", (int)(dot - name), name, dot + 1,
		value);
}

/* The scenario with the test's endpoints and overrides, into path. */
static int write_ini(const e2e *e, const char *path, const char *frames,
		     const char *commands, const char *const *overrides)
{
	FILE *f = fopen(path, "w");

	if (!f) {
		return -1;
	}
	if (copy_scenario(f, overrides) != 0) {
		fclose(f);
		return -1;
	}
	if (!listed(overrides, "driver.frames", 13)) {
		put_option(f, "driver.frames", frames);
	}
	if (!listed(overrides, "driver.commands", 15)) {
		put_option(f, "driver.commands", commands);
	}
	if (!listed(overrides, "daemon.control", 14)) {
		put_option(f, "daemon.control", e->control);
	}
	if (!listed(overrides, "daemon.telemetry", 16)) {
		put_option(f, "daemon.telemetry", e->telemetry);
	}
	if (!listed(overrides, "sim.truth", 9)) {
		put_option(f, "sim.truth", e->truth);
	}
	for (const char *const *o = overrides; o && *o; o++) {
		char name[192];
		const char *eq = strchr(*o, '=');

		if (!eq || !strchr(*o, '.')) {
			fclose(f);
			return -1;
		}
		snprintf(name, sizeof(name), "%.*s", (int)(eq - *o), *o);
		put_option(f, name, eq + 1);
	}
	return fclose(f) == 0 ? 0 : -1;
}

/* An override of a moved endpoint is the endpoint (into a and b, 256). */
static void take_endpoint(const char *const *overrides, const char *name,
			  char *a, char *b)
{
	size_t n = strlen(name);

	for (const char *const *o = overrides; o && *o; o++) {
		if (strncmp(*o, name, n) == 0 && (*o)[n] == '=') {
			snprintf(a, 256, "%s", *o + n + 1);
			if (b) {
				snprintf(b, 256, "%s", *o + n + 1);
			}
		}
	}
}

/* Folder, endpoint names and the simulator's INI. */
static int setup_common(e2e *e, const char *const *overrides)
{
	memset(e, 0, sizeof(*e));
	snprintf(e->dir, sizeof(e->dir), "/tmp/wt-e2e-XXXXXX");
	if (!mkdtemp(e->dir)) {
		e->dir[0] = '\0';
		return -1;
	}
	snprintf(e->ini, sizeof(e->ini), "%s/test.ini", e->dir);
	snprintf(e->control, sizeof(e->control), "ipc://%s/control", e->dir);
	snprintf(e->telemetry, sizeof(e->telemetry), "ipc://%s/telemetry",
		 e->dir);
	snprintf(e->truth, sizeof(e->truth), "ipc://%s/truth", e->dir);
	snprintf(e->frames, sizeof(e->frames), "ipc://%s/frames", e->dir);
	snprintf(e->commands, sizeof(e->commands), "ipc://%s/commands",
		 e->dir);
	snprintf(e->daemon_frames, sizeof(e->daemon_frames), "%s", e->frames);
	snprintf(e->daemon_commands, sizeof(e->daemon_commands), "%s",
		 e->commands);
	take_endpoint(overrides, "driver.frames", e->frames, e->daemon_frames);
	take_endpoint(overrides, "driver.commands", e->commands,
		      e->daemon_commands);
	take_endpoint(overrides, "daemon.control", e->control, NULL);
	take_endpoint(overrides, "daemon.telemetry", e->telemetry, NULL);
	take_endpoint(overrides, "sim.truth", e->truth, NULL);
	return write_ini(e, e->ini, e->frames, e->commands, overrides);
}

static int subscribe_truth(e2e *e)
{
	int zero = 0;

	e->ctx = zmq_ctx_new();
	e->truth_sub = zmq_socket(e->ctx, ZMQ_SUB);
	zmq_setsockopt(e->truth_sub, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(e->truth_sub, ZMQ_SUBSCRIBE, SIM_TRUTH_TOPIC,
		       strlen(SIM_TRUTH_TOPIC));
	return zmq_connect(e->truth_sub, e->truth) == 0 ? 0 : -1;
}

int e2e_setup(e2e *e, const char *const *overrides)
{
	if (setup_common(e, overrides) != 0) {
		return -1;
	}
	return subscribe_truth(e);
}

int e2e_setup_split(e2e *e, const char *const *overrides)
{
	if (setup_common(e, overrides) != 0) {
		return -1;
	}
	snprintf(e->daemon_ini, sizeof(e->daemon_ini), "%s/daemon.ini",
		 e->dir);
	snprintf(e->daemon_frames, sizeof(e->daemon_frames),
		 "ipc://%s/daemon-frames", e->dir);
	snprintf(e->daemon_commands, sizeof(e->daemon_commands),
		 "ipc://%s/daemon-commands", e->dir);
	if (write_ini(e, e->daemon_ini, e->daemon_frames, e->daemon_commands,
		      overrides) != 0) {
		return -1;
	}
	return subscribe_truth(e);
}

int e2e_rewrite_daemon_ini(e2e *e, const char *const *overrides)
{
	char tmp[256];

	if (e->daemon_ini[0]) {
		snprintf(tmp, sizeof(tmp), "%s.new", e->daemon_ini);
		if (write_ini(e, tmp, e->daemon_frames, e->daemon_commands,
			      overrides) != 0) {
			return -1;
		}
		return rename(tmp, e->daemon_ini);
	}
	snprintf(tmp, sizeof(tmp), "%s.new", e->ini);
	if (write_ini(e, tmp, e->frames, e->commands, overrides) != 0) {
		return -1;
	}
	return rename(tmp, e->ini);
}

int e2e_rewrite_sim_ini(e2e *e, const char *const *overrides)
{
	return write_ini(e, e->ini, e->frames, e->commands, overrides);
}

static pid_t spawn(const e2e *e, const char *log_name, char *const argv[])
{
	char log[256];
	pid_t pid;

	snprintf(log, sizeof(log), "%s/%s", e->dir, log_name);
	pid = fork();
	if (pid == 0) {
		int fd = open(log, O_WRONLY | O_CREAT | O_APPEND, 0600);

		/* A failed assertion skips the teardown: never leave a
		 * simulator and daemon running on after the test. */
		prctl(PR_SET_PDEATHSIG, SIGKILL);

		if (fd >= 0) {
			dup2(fd, STDOUT_FILENO);
			dup2(fd, STDERR_FILENO);
			close(fd);
		}
		execv(argv[0], argv);
		_exit(127);
	}
	return pid;
}

static void sleep_ms(int ms)
{
	struct timespec ts = {ms / 1000, (long)(ms % 1000) * 1000000L};

	while (nanosleep(&ts, &ts) != 0 && errno == EINTR) {
	}
}

static void show_log(const e2e *e, const char *name)
{
	char path[256];
	char line[512];
	FILE *f;

	snprintf(path, sizeof(path), "%s/%s", e->dir, name);
	f = fopen(path, "r");
	if (!f) {
		return;
	}
	fprintf(stderr, "---- %s ----\n", name);
	while (fgets(line, sizeof(line), f)) {
		fputs(line, stderr);
	}
	fclose(f);
}

int e2e_start_sim(e2e *e)
{
	char path[256];
	char *argv[] = {(char *)WT_SIM_BIN, "-c", e->ini, NULL};
	uint64_t deadline = wt_clock_ns() + 10000000000ull;
	struct stat st;

	e->sim = spawn(e, "sim.log", argv);
	if (e->sim < 0) {
		return -1;
	}
	snprintf(path, sizeof(path), "%s/truth", e->dir);
	while (stat(path, &st) != 0) {
		if (wt_clock_ns() > deadline ||
		    waitpid(e->sim, NULL, WNOHANG) == e->sim) {
			show_log(e, "sim.log");
			e->sim = 0;
			return -1;
		}
		sleep_ms(10);
	}
	sleep_ms(50); /* let the truth subscription reach the new socket */
	return 0;
}

int e2e_start_daemon(e2e *e, const char *const *extra_args)
{
	char *argv[16] = {(char *)WT_DAEMON_BIN, "-c",
			  e->daemon_ini[0] ? e->daemon_ini : e->ini};
	int n = 3;
	uint64_t deadline = wt_clock_ns() + 10000000000ull;

	for (const char *const *a = extra_args; a && *a && n < 15; a++) {
		argv[n++] = (char *)*a;
	}
	argv[n] = NULL;
	e->daemon = spawn(e, "daemon.log", argv);
	if (e->daemon < 0) {
		return -1;
	}
	while (e2e_request(e, "ping") != 1) {
		if (wt_clock_ns() > deadline ||
		    waitpid(e->daemon, NULL, WNOHANG) == e->daemon) {
			show_log(e, "daemon.log");
			e->daemon = 0;
			return -1;
		}
		sleep_ms(20);
	}
	return 0;
}

void e2e_kill_sim(e2e *e)
{
	if (e->sim > 0) {
		kill(e->sim, SIGKILL);
		waitpid(e->sim, NULL, 0);
		e->sim = 0;
	}
}

int e2e_request(e2e *e, const char *fmt, ...)
{
	char line[2048];
	va_list ap;
	void *req = zmq_socket(e->ctx, ZMQ_REQ);
	int zero = 0;
	int timeout = 10000;
	int len, rc = -1;
	wt_jtok *t = NULL;

	va_start(ap, fmt);
	vsnprintf(line, sizeof(line), fmt, ap);
	va_end(ap);
	e->reply[0] = '\0';
	zmq_setsockopt(req, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(req, ZMQ_RCVTIMEO, &timeout, sizeof(timeout));
	if (e->server_key[0] && wt_endpoint_wants_curve(e->control) &&
	    wt_curve_client(req, e->server_key, &e->client, NULL) < 0) {
		goto out;
	}
	if (zmq_connect(req, e->control) != 0 ||
	    zmq_send(req, line, strlen(line), 0) < 0) {
		goto out;
	}
	len = zmq_recv(req, e->reply, sizeof(e->reply) - 1, 0);
	if (len < 0 || len >= (int)sizeof(e->reply)) {
		e->reply[0] = '\0';
		goto out;
	}
	e->reply[len] = '\0';
	t = malloc(sizeof(*t) * TOKENS_MAX);
	if (t && wt_jsonp_parse(e->reply, (size_t)len, t, TOKENS_MAX, NULL) >
			 0) {
		int ok = wt_jsonp_member(e->reply, t, 0, "ok");

		rc = ok >= 0 && wt_jsonp_true(&t[ok]) ? 1 : 0;
	}
out:
	free(t);
	zmq_close(req);
	return rc;
}

/* Token index at a dotted path of the last reply, or -1. */
static int find_path(const e2e *e, wt_jtok *t, const char *path)
{
	char part[128];
	int i = 0;

	if (wt_jsonp_parse(e->reply, strlen(e->reply), t, TOKENS_MAX, NULL) <=
	    0) {
		return -1;
	}
	while (*path && i >= 0) {
		const char *dot = strchr(path, '.');
		size_t n = dot ? (size_t)(dot - path) : strlen(path);

		snprintf(part, sizeof(part), "%.*s", (int)n, path);
		i = wt_jsonp_member(e->reply, t, i, part);
		path += n + (dot ? 1 : 0);
	}
	return i;
}

double e2e_reply_number(const e2e *e, const char *path)
{
	wt_jtok *t = malloc(sizeof(*t) * TOKENS_MAX);
	double v = NAN;
	int i, ok;

	if (t && (i = find_path(e, t, path)) >= 0) {
		v = wt_jsonp_number(e->reply, &t[i], &ok);
		if (ok != 0) {
			v = NAN;
		}
	}
	free(t);
	return v;
}

int e2e_reply_string(const e2e *e, const char *path, char *out, size_t len)
{
	wt_jtok *t = malloc(sizeof(*t) * TOKENS_MAX);
	int i, rc = -1;

	if (t && (i = find_path(e, t, path)) >= 0 &&
	    wt_jsonp_string(e->reply, &t[i], out, len) >= 0) {
		rc = 0;
	}
	free(t);
	return rc;
}

int e2e_wait_state(e2e *e, const char *state, int timeout_ms)
{
	uint64_t deadline = wt_clock_ns() + (uint64_t)timeout_ms * 1000000ull;
	char now[32];

	do {
		if (e2e_request(e, "status") == 1 &&
		    e2e_reply_string(e, "result.state", now, sizeof(now)) ==
			    0 &&
		    strcmp(now, state) == 0) {
			return 0;
		}
		sleep_ms(20);
	} while (wt_clock_ns() < deadline);
	fprintf(stderr, "e2e: state %s not reached; last reply %s\n", state,
		e->reply);
	return -1;
}

int e2e_truth(e2e *e, sim_truth *t, int timeout_ms)
{
	uint8_t msg[SIM_TRUTH_BYTES + 1];
	zmq_pollitem_t item = {e->truth_sub, 0, ZMQ_POLLIN, 0};
	int len;

	if (zmq_poll(&item, 1, timeout_ms) <= 0) {
		return -1;
	}
	len = zmq_recv(e->truth_sub, msg, sizeof(msg), 0);
	if (len < 0 || sim_truth_decode(msg, (size_t)len, t) != 0) {
		return -1;
	}
	return 0;
}

int e2e_sync(e2e *e, int timeout_ms)
{
	uint64_t deadline = wt_clock_ns() + (uint64_t)timeout_ms * 1000000ull;
	sim_truth t;
	double last;

	/* A daemon that has not answered a frame yet (just started, or the
	 * driver is between frames) says null: ask again until it has one. */
	for (;;) {
		if (e2e_request(e, "status") != 1) {
			return -1;
		}
		last = e2e_reply_number(e, "result.last_frame");
		if (!isnan(last)) {
			break;
		}
		if (wt_clock_ns() > deadline) {
			return -1;
		}
		sleep_ms(20);
	}
	do {
		if (e2e_truth(e, &t, timeout_ms) != 0) {
			return -1;
		}
	} while ((double)t.frame <= last);
	return 0;
}

int e2e_truth_skip(e2e *e, int n, sim_truth *t, int timeout_ms)
{
	for (int k = 0; k < n; k++) {
		if (e2e_truth(e, t, timeout_ms) != 0) {
			return -1;
		}
	}
	return 0;
}

static int reap(pid_t pid, int timeout_ms)
{
	uint64_t deadline = wt_clock_ns() + (uint64_t)timeout_ms * 1000000ull;
	int status;

	while (waitpid(pid, &status, WNOHANG) != pid) {
		if (wt_clock_ns() > deadline) {
			kill(pid, SIGKILL);
			waitpid(pid, &status, 0);
			return -1;
		}
		sleep_ms(10);
	}
	return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
}

static int rm_entry(const char *path, const struct stat *sb, int flag,
		    struct FTW *ftw)
{
	(void)sb;
	(void)flag;
	(void)ftw;
	return remove(path);
}

void e2e_teardown(e2e *e, int *daemon_status, int *sim_status)
{
	int ds = -1, ss = -1;

	if (e->daemon > 0) {
		e2e_request(e, "shutdown");
		ds = reap(e->daemon, 5000);
		if (ds != 0) {
			show_log(e, "daemon.log");
		}
	}
	if (e->sim > 0) {
		kill(e->sim, SIGTERM);
		ss = reap(e->sim, 5000);
		if (ss != 0) {
			show_log(e, "sim.log");
		}
	}
	if (daemon_status) {
		*daemon_status = ds;
	}
	if (sim_status) {
		*sim_status = ss;
	}
	if (e->truth_sub) {
		zmq_close(e->truth_sub);
	}
	if (e->ctx) {
		zmq_ctx_term(e->ctx);
	}
	if (e->dir[0] && !getenv("WT_E2E_KEEP")) {
		nftw(e->dir, rm_entry, 8, FTW_DEPTH | FTW_PHYS);
	}
	e->daemon = e->sim = 0;
}

/* Append what fd holds now to buf (kept terminated, the rest dropped);
 * 0 at end of file, 1 otherwise. */
static int drain(int fd, char *buf, size_t cap, size_t *len)
{
	char chunk[4096];
	ssize_t n = read(fd, chunk, sizeof(chunk));

	if (n < 0) {
		return errno == EINTR || errno == EAGAIN ? 1 : 0;
	}
	if (n == 0) {
		return 0;
	}
	if (*len + 1 < cap) {
		size_t room = cap - 1 - *len;
		size_t k = (size_t)n < room ? (size_t)n : room;

		memcpy(buf + *len, chunk, k);
		*len += k;
		buf[*len] = '\0';
	}
	return 1;
}

int e2e_run(char *const argv[], int timeout_ms, e2e_run_result *r)
{
	uint64_t start = wt_clock_ns();
	uint64_t deadline = start + (uint64_t)timeout_ms * 1000000ull;
	int out[2], err[2];
	size_t n_out = 0, n_err = 0;
	int open_out = 1, open_err = 1, status = 0;
	pid_t pid;

	memset(r, 0, sizeof(*r));
	r->status = -1;
	if (pipe(out) != 0) {
		return -1;
	}
	if (pipe(err) != 0) {
		close(out[0]);
		close(out[1]);
		return -1;
	}
	pid = fork();
	if (pid == 0) {
		int null = open("/dev/null", O_RDONLY);

		prctl(PR_SET_PDEATHSIG, SIGKILL);
		if (null >= 0) {
			dup2(null, STDIN_FILENO);
			close(null);
		}
		dup2(out[1], STDOUT_FILENO);
		dup2(err[1], STDERR_FILENO);
		close(out[0]);
		close(out[1]);
		close(err[0]);
		close(err[1]);
		execv(argv[0], argv);
		_exit(127);
	}
	close(out[1]);
	close(err[1]);
	if (pid < 0) {
		close(out[0]);
		close(err[0]);
		return -1;
	}
	while (open_out || open_err) {
		struct pollfd p[2] = {{out[0], POLLIN, 0}, {err[0], POLLIN, 0}};
		uint64_t now = wt_clock_ns();
		int left;

		if (now >= deadline) {
			kill(pid, SIGKILL);
			break;
		}
		left = (int)((deadline - now) / 1000000ull) + 1;
		p[0].fd = open_out ? out[0] : -1;
		p[1].fd = open_err ? err[0] : -1;
		if (poll(p, 2, left) < 0) {
			if (errno == EINTR) {
				continue;
			}
			kill(pid, SIGKILL);
			break;
		}
		if (open_out && (p[0].revents & (POLLIN | POLLHUP | POLLERR))) {
			open_out = drain(out[0], r->out, sizeof(r->out), &n_out);
		}
		if (open_err && (p[1].revents & (POLLIN | POLLHUP | POLLERR))) {
			open_err = drain(err[0], r->err, sizeof(r->err), &n_err);
		}
	}
	close(out[0]);
	close(err[0]);
	/* Both pipes closed: the program is exiting (or was killed above). */
	while (waitpid(pid, &status, WNOHANG) != pid) {
		if (wt_clock_ns() > deadline) {
			kill(pid, SIGKILL);
			while (waitpid(pid, &status, 0) < 0 && errno == EINTR) {
			}
			break;
		}
		sleep_ms(2);
	}
	r->elapsed_ms = (int)((wt_clock_ns() - start) / 1000000ull);
	r->status = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
	return 0;
}
