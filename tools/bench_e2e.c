/*
 * bench_e2e.c - wavetrim-bench's end-to-end part (bench_e2e.h).
 */
#include "bench_e2e.h"

#include <errno.h>
#include <fcntl.h>
#include <malloc.h>
#include <math.h>
#include <sched.h>
#include <signal.h>
#include <stdarg.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_clock.h"
#include "wt_jsonparse.h"
#include "wt_recon.h"
#include "wt_store.h"

#define E2E_REPLY_MAX	 (512 * 1024)
#define E2E_TOKENS	 16384
#define E2E_REQUEST_MS	 5000
#define E2E_START_MS	 15000
#define E2E_STOP_MS	 5000
#define E2E_DRAIN_MS	 1000
#define E2E_PRERENDER	 16
#define E2E_MIN_SV_RATIO 0.02 /* control.min_sv_ratio's default */
/* Rates up to this one are always run (a loop rate a rig is built for);
 * above it the ladder ends at the first failure. */
#define E2E_ALWAYS_HZ 10000.0

struct e2e_run {
	char dir[64];
	char ini[128], cal[128], log[128];
	char frames[128], commands[128], control[128], telemetry[128];
	char floor_frames[128], floor_commands[128];
	void *zctx;
	pid_t daemon;
	char *reply;
	wt_jtok *toks;
	int n_toks;
	pthread_t load;
	bool load_running;
	atomic_bool load_stop;
};

static int fail(struct bench_e2e_result *res, int code, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));

static int fail(struct bench_e2e_result *res, int code, const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	vsnprintf(res->error, sizeof(res->error), fmt, ap);
	va_end(ap);
	return code < 0 ? code : -EIO;
}

/* ---- the control socket ------------------------------------------------- */

/* One request line, its reply parsed into run->toks; 1 for ok:true, 0 for
 * ok:false, < 0 when there is no (good) answer.  A fresh REQ socket each
 * time: one that timed out cannot send again. */
static int request(struct e2e_run *run, int timeout_ms, const char *line)
{
	void *s = zmq_socket(run->zctx, ZMQ_REQ);
	int zero = 0, len, ok;
	wt_error err;

	if (!s) {
		return -EIO;
	}
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(s, ZMQ_RCVTIMEO, &timeout_ms, sizeof(timeout_ms));
	zmq_setsockopt(s, ZMQ_SNDTIMEO, &timeout_ms, sizeof(timeout_ms));
	if (zmq_connect(s, run->control) != 0 ||
	    zmq_send(s, line, strlen(line), 0) < 0) {
		zmq_close(s);
		return -EIO;
	}
	len = zmq_recv(s, run->reply, E2E_REPLY_MAX - 1, 0);
	zmq_close(s);
	if (len < 0 || len >= E2E_REPLY_MAX - 1) {
		return -ETIMEDOUT;
	}
	run->reply[len] = '\0';
	run->n_toks = wt_jsonp_parse(run->reply, (size_t)len, run->toks,
				     E2E_TOKENS, &err);
	if (run->n_toks <= 0) {
		return -EPROTO;
	}
	ok = wt_jsonp_member(run->reply, run->toks, 0, "ok");
	return ok >= 0 && wt_jsonp_true(&run->toks[ok]);
}

/* Token of a dotted path ("result.counts.dropped") in the last reply. */
static int reply_path(const struct e2e_run *run, const char *path)
{
	char key[64];
	int tok = 0;

	while (tok >= 0 && *path) {
		size_t n = strcspn(path, ".");

		if (n >= sizeof(key)) {
			return -1;
		}
		memcpy(key, path, n);
		key[n] = '\0';
		tok = wt_jsonp_member(run->reply, run->toks, tok, key);
		path += n + (path[n] == '.');
	}
	return tok;
}

static double reply_number(const struct e2e_run *run, const char *path)
{
	int tok = reply_path(run, path), ok = 0;
	double v;

	if (tok < 0) {
		return NAN;
	}
	v = wt_jsonp_number(run->reply, &run->toks[tok], &ok);
	return ok < 0 ? NAN : v;
}

static bool reply_state_is(const struct e2e_run *run, const char *state)
{
	char s[32];
	int tok = reply_path(run, "result.state");

	return tok >= 0 &&
	       wt_jsonp_string(run->reply, &run->toks[tok], s, sizeof(s)) >=
		       0 &&
	       strcmp(s, state) == 0;
}

/* ---- files -------------------------------------------------------------- */

static int write_ini(struct e2e_run *run, const struct bench_geometry *g,
		     const struct bench_e2e_options *o, char *text, size_t cap)
{
	FILE *f;
	int n;

	/* the compute part's centroid settings (bench.c), so the daemon
	 * does the same work per frame; no silence fault between runs */
	n = snprintf(text, cap,
		     "[sensor]\nlenslets = %d\npixels_per_lenslet = %d\n"
		     "background = %g\nthreshold = 10\nmin_flux = 1\n"
		     "[mirror]\nactuators = %d\nlayout = %s\n"
		     "pupil_pitches = %g\nmargin_pitches = %g\n"
		     "[driver]\nframes = %s\ncommands = %s\n"
		     "timeout_ms = 600000\n"
		     "[daemon]\ncontrol = %s\ntelemetry = %s\ncpu = %d\n"
		     "realtime_priority = %d\nbusy_poll = %s\n",
		     g->lenslets, g->pixels, FRAME_BACKGROUND, g->actuators,
		     wt_layout_name(g->layout), g->pupil_pitches,
		     g->margin_pitches, run->frames, run->commands,
		     run->control, run->telemetry, o->daemon_cpu,
		     o->rt_priority, o->busy_poll ? "true" : "false");
	if (n < 0 || (size_t)n >= cap) {
		return -ENOSPC;
	}
	f = fopen(run->ini, "w");
	if (!f) {
		return -errno;
	}
	fputs(text, f);
	return fclose(f) == 0 ? 0 : -EIO;
}

/* A seeded random interaction matrix and its truncated-SVD control matrix
 * (the daemon's own reconstructor, lib/wt_recon): the right sizes and a
 * well-conditioned product; the values do not change the work per frame. */
static int write_calibration(struct e2e_run *run, const wt_grid *lens,
			     const wt_grid *act, int ppl, const char *ini,
			     unsigned long seed, wt_error *err)
{
	wt_calibration *c = NULL;
	wt_svd *svd = NULL;
	uint64_t rng = seed * 0x9e3779b97f4a7c15ull + 17;
	size_t i, nm;
	int rc, kept;

	rc = wt_calibration_create(lens, act, ppl, &c, err);
	if (rc < 0) {
		return rc;
	}
	nm = (size_t)c->n_slopes * (size_t)c->n_act;
	for (i = 0; i < nm; i++) {
		c->interaction[i] = rng_uniform(&rng) - 0.5;
	}
	rc = wt_svd_compute(c->interaction, c->n_slopes, c->n_act, &svd, err);
	if (rc < 0) {
		goto out;
	}
	kept = wt_recon_modes(svd, 0, E2E_MIN_SV_RATIO);
	rc = wt_recon_pinv_float(svd, kept, NULL, c->control);
	if (rc < 0) {
		wt_error_set(err, rc, "control matrix: %s", wt_strerror(rc));
		goto out;
	}
	memcpy(c->singular_values, wt_svd_values(svd),
	       (size_t)c->n_sv * sizeof(double));
	c->modes = kept;
	rc = wt_calibration_set_config(c, ini);
	if (rc < 0) {
		wt_error_set(err, rc, "out of memory");
		goto out;
	}
	wt_calibration_stamp(c);
	rc = wt_store_save(run->cal, c, err);
out:
	wt_svd_destroy(svd);
	wt_calibration_destroy(c);
	return rc;
}

/* ---- the daemon --------------------------------------------------------- */

static int start_daemon(struct e2e_run *run, const char *path,
			struct bench_e2e_result *res)
{
	uint64_t deadline = wt_clock_ns() + E2E_START_MS * WT_NS_PER_MS;
	pid_t pid = fork();
	int status;

	if (pid < 0) {
		return fail(res, -errno, "fork: %s", strerror(errno));
	}
	if (pid == 0) {
		int fd = open(run->log, O_WRONLY | O_CREAT | O_TRUNC, 0600);
		int in = open("/dev/null", O_RDONLY);

		cpu_set_t all;
		int cpu;

		/* never outlive the bench, even if it is killed */
		prctl(PR_SET_PDEATHSIG, SIGKILL);
		/* not the replay's pinning: the daemon's threads other than
		 * the loop (pinned by daemon.cpu) go where the kernel puts
		 * them, as on a rig (the kernel keeps the CPUs allowed) */
		CPU_ZERO(&all);
		for (cpu = 0; cpu < CPU_SETSIZE; cpu++) {
			CPU_SET(cpu, &all);
		}
		sched_setaffinity(0, sizeof(all), &all);
		/* nor the replay's SCHED_FIFO (--driver-rt-priority): the
		 * daemon's own daemon.realtime_priority decides */
		{
			struct sched_param sp = {.sched_priority = 0};

			sched_setscheduler(0, SCHED_OTHER, &sp);
		}
		if (fd >= 0) {
			dup2(fd, 1);
			dup2(fd, 2);
		}
		if (in >= 0) {
			dup2(in, 0);
		}
		execl(path, path, "-c", run->ini, "--calibration", run->cal,
		      "--log-level", "notice", (char *)NULL);
		_exit(127);
	}
	run->daemon = pid;
	while (wt_clock_ns() < deadline) {
		if (waitpid(pid, &status, WNOHANG) == pid) {
			run->daemon = 0;
			return fail(res, -ECHILD,
				    "%s exited (status %d) at start; its log "
				    "is in %s (kept)",
				    path,
				    WIFEXITED(status) ? WEXITSTATUS(status)
						      : -1,
				    run->log);
		}
		if (request(run, 200, "ping") == 1) {
			return 0;
		}
	}
	return fail(res, -ETIMEDOUT, "%s did not answer ping in %d ms", path,
		    E2E_START_MS);
}

static void stop_daemon(struct e2e_run *run)
{
	uint64_t deadline = wt_clock_ns() + E2E_STOP_MS * WT_NS_PER_MS;
	int status;

	if (run->daemon <= 0) {
		return;
	}
	kill(run->daemon, SIGTERM);
	while (waitpid(run->daemon, &status, WNOHANG) == 0) {
		struct timespec ts = {0, 10 * 1000 * 1000};

		if (wt_clock_ns() > deadline) {
			kill(run->daemon, SIGKILL);
			waitpid(run->daemon, &status, 0);
			break;
		}
		nanosleep(&ts, NULL);
	}
	run->daemon = 0;
}

/* ---- the busy other core ------------------------------------------------ */

static void *load_main(void *arg)
{
	struct e2e_run *run = arg;
	volatile uint64_t x = 0;

	while (!atomic_load_explicit(&run->load_stop, memory_order_relaxed)) {
		x = x * 6364136223846793005ull + 1442695040888963407ull;
	}
	return NULL;
}

static int start_load(struct e2e_run *run, int cpu)
{
	struct sched_param sp = {.sched_priority = 0};
	pthread_attr_t attr;
	int rc;

	/* normal scheduling even when the replay runs SCHED_FIFO: the load
	 * is other work on the machine, not part of the loop */
	pthread_attr_init(&attr);
	pthread_attr_setinheritsched(&attr, PTHREAD_EXPLICIT_SCHED);
	pthread_attr_setschedpolicy(&attr, SCHED_OTHER);
	pthread_attr_setschedparam(&attr, &sp);
	atomic_init(&run->load_stop, false);
	rc = pthread_create(&run->load, &attr, load_main, run);
	pthread_attr_destroy(&attr);
	if (rc != 0) {
		return -EAGAIN;
	}
	run->load_running = true;
	if (cpu >= 0) {
		pin_thread(run->load, cpu);
	}
	return 0;
}

static void stop_load(struct e2e_run *run)
{
	if (run->load_running) {
		atomic_store(&run->load_stop, true);
		pthread_join(run->load, NULL);
		run->load_running = false;
	}
}

/* ---- the run ------------------------------------------------------------ */

static void remove_files(struct e2e_run *run, bool keep_log)
{
	const char *files[] = {run->ini,	  run->cal,
			       run->frames,	  run->commands,
			       run->control,	  run->telemetry,
			       run->floor_frames, run->floor_commands};
	size_t i;

	if (!run->dir[0]) {
		return;
	}
	for (i = 0; i < sizeof(files) / sizeof(files[0]); i++) {
		/* ipc://PATH: the socket file */
		unlink(strncmp(files[i], "ipc://", 6) == 0 ? files[i] + 6
							   : files[i]);
	}
	if (!keep_log) {
		unlink(run->log);
		rmdir(run->dir);
	}
}

static int measure_floor(struct e2e_run *run, const struct bench_e2e_options *o,
			 const wt_grid *lens, int ppl, int n_act,
			 struct bench_e2e_result *res)
{
	struct replay_config rc = {
		.frames_endpoint = run->floor_frames,
		.commands_endpoint = run->floor_commands,
		.lenslets = lens,
		.pixels_per_lenslet = ppl,
		.n_act = n_act,
		.max_frames = o->frames > o->warmup ? o->frames : o->warmup,
		.prerender = E2E_PRERENDER,
		.seed = o->seed};
	struct replay_result warm;
	replay *r = NULL;
	replay_echo *echo = NULL;
	wt_error err = {0};
	int ret;

	ret = replay_create(run->zctx, &rc, &r, &err);
	if (ret < 0) {
		return fail(res, ret, "floor: %s", err.msg);
	}
	ret = replay_echo_start(run->zctx, run->floor_frames,
				run->floor_commands, replay_frame_bytes(r),
				n_act, o->daemon_cpu, &echo, &err);
	if (ret < 0) {
		replay_destroy(r);
		return fail(res, ret, "floor: %s", err.msg);
	}
	if (o->warmup > 0) {
		ret = replay_lockstep(r, o->warmup, o->timeout_ms, &warm);
	}
	if (ret == 0) {
		ret = replay_lockstep(r, o->frames, o->timeout_ms, &res->floor);
	}
	replay_echo_stop(echo, NULL);
	replay_destroy(r);
	if (ret < 0) {
		return fail(res, ret, "floor: %s", wt_strerror(ret));
	}
	return 0;
}

/* The daemon's counters now: dropped, stale, send_failed. */
static int daemon_counts(struct e2e_run *run, double c[3])
{
	if (request(run, E2E_REQUEST_MS, "status") != 1) {
		return -EIO;
	}
	c[0] = reply_number(run, "result.counts.dropped");
	c[1] = reply_number(run, "result.counts.stale");
	c[2] = reply_number(run, "result.counts.send_failed");
	return isnan(c[0]) || isnan(c[1]) || isnan(c[2]) ? -EPROTO : 0;
}

static int measure_daemon(struct e2e_run *run,
			  const struct bench_e2e_options *o, replay *r,
			  struct bench_e2e_result *res)
{
	struct replay_result warm;
	int ret = 0, k;

	if (request(run, E2E_REQUEST_MS, "close") != 1) {
		return fail(res, -EIO, "close refused: %s", run->reply);
	}
	if (o->warmup > 0) {
		ret = replay_lockstep(r, o->warmup, o->timeout_ms, &warm);
	}
	if (ret == 0) {
		ret = replay_lockstep(r, o->frames, o->timeout_ms, &res->e2e);
	}
	if (ret < 0) {
		return fail(res, ret, "lockstep: %s", wt_strerror(ret));
	}
	if (request(run, E2E_REQUEST_MS, "status") == 1) {
		res->daemon_latency_median_us =
			reply_number(run, "result.latency_us.median");
	}
	for (k = 0; k < o->n_rates; k++) {
		struct bench_e2e_rate *rt = &res->rates[k];
		double before[3], after[3];

		rt->rate_hz = o->rates_hz[k];
		fprintf(stderr, "%s: %ld frames at %.0f Hz ...\n", res->name,
			o->rate_frames, rt->rate_hz);
		if (daemon_counts(run, before) < 0) {
			return fail(res, -EIO, "status: %s", run->reply);
		}
		ret = replay_free(r, o->rate_frames, rt->rate_hz, E2E_DRAIN_MS,
				  &rt->r);
		if (ret < 0) {
			return fail(res, ret, "free run: %s", wt_strerror(ret));
		}
		if (daemon_counts(run, after) < 0) {
			return fail(res, -EIO, "status: %s", run->reply);
		}
		rt->dropped = after[0] - before[0];
		rt->stale = after[1] - before[1];
		rt->send_failed = after[2] - before[2];
		rt->pass = rt->r.send_failed == 0 && rt->r.missing == 0 &&
			   rt->r.sent == o->rate_frames && rt->dropped == 0 &&
			   rt->stale == 0 && rt->send_failed == 0 &&
			   reply_state_is(run, "closed");
		res->n_rates = k + 1;
		if (rt->pass) {
			res->max_rate_hz = rt->rate_hz;
		}
		if (!rt->pass && rt->rate_hz >= E2E_ALWAYS_HZ) {
			break; /* past the rates always run: the first failure
				* ends the ladder */
		}
	}
	return 0;
}

int bench_e2e_run(const struct bench_geometry *g,
		  const struct bench_e2e_options *o,
		  struct bench_e2e_result *res)
{
	struct e2e_run run;
	wt_grid *lens = NULL, *act = NULL;
	replay *r = NULL;
	struct replay_config rc;
	char *ini_text = NULL;
	wt_error err = {0};
	bool keep_log = false;
	int ret;

	memset(res, 0, sizeof(*res));
	memset(&run, 0, sizeof(run));
	res->name = g->name;
	run.reply = malloc(E2E_REPLY_MAX);
	run.toks = calloc(E2E_TOKENS, sizeof(*run.toks));
	ini_text = malloc(4096);
	if (!run.reply || !run.toks || !ini_text) {
		ret = fail(res, -ENOMEM, "out of memory");
		goto out;
	}
	/* mkdtemp makes it 0700: wt_endpoint_check's rule for ipc */
	snprintf(run.dir, sizeof(run.dir), "/tmp/wt-bench-XXXXXX");
	if (!mkdtemp(run.dir)) {
		run.dir[0] = '\0';
		ret = fail(res, -errno, "mkdtemp: %s", strerror(errno));
		goto out;
	}
	snprintf(run.ini, sizeof(run.ini), "%s/rig.ini", run.dir);
	snprintf(run.cal, sizeof(run.cal), "%s/calibration.h5", run.dir);
	snprintf(run.log, sizeof(run.log), "%s/wavetrimd.log", run.dir);
	snprintf(run.frames, sizeof(run.frames), "ipc://%s/frames", run.dir);
	snprintf(run.commands, sizeof(run.commands), "ipc://%s/commands",
		 run.dir);
	snprintf(run.control, sizeof(run.control), "ipc://%s/control", run.dir);
	snprintf(run.telemetry, sizeof(run.telemetry), "ipc://%s/telemetry",
		 run.dir);
	snprintf(run.floor_frames, sizeof(run.floor_frames),
		 "ipc://%s/floor-frames", run.dir);
	snprintf(run.floor_commands, sizeof(run.floor_commands),
		 "ipc://%s/floor-commands", run.dir);

	ret = wt_grid_lenslets(g->lenslets, 0.0, 0.5, &lens, &err);
	if (ret == 0) {
		ret = wt_grid_actuators(g->actuators, g->layout,
					g->pupil_pitches, g->margin_pitches,
					&act, &err);
	}
	if (ret < 0) {
		ret = fail(res, ret, "%s", err.msg);
		goto out;
	}
	res->n_sub = lens->n_valid;
	res->n_act = act->n_valid;
	ret = write_ini(&run, g, o, ini_text, 4096);
	if (ret < 0) {
		ret = fail(res, ret, "%s: %s", run.ini, strerror(-ret));
		goto out;
	}
	ret = write_calibration(&run, lens, act, g->pixels, ini_text, o->seed,
				&err);
	if (ret < 0) {
		ret = fail(res, ret, "calibration: %s", err.msg);
		goto out;
	}
	/* received messages in reused heap blocks, not fresh pages, as the
	 * daemon has them (daemon/main.c): the echo peer's floor is then
	 * the same receive path */
	mallopt(M_MMAP_THRESHOLD, 32 * 1024 * 1024);
	mallopt(M_TRIM_THRESHOLD, 256 * 1024 * 1024);
	run.zctx = zmq_ctx_new();
	if (!run.zctx) {
		ret = fail(res, -EIO, "no ZeroMQ context");
		goto out;
	}
	if (o->replay_cpu >= 0) {
		pin_thread(pthread_self(), o->replay_cpu);
	}
	if (o->driver_rt_priority > 0) {
		/* a real-time camera driver would run so; set before the
		 * first socket, so libzmq's I/O threads inherit it */
		struct sched_param sp = {.sched_priority =
						 o->driver_rt_priority};
		int e = pthread_setschedparam(pthread_self(), SCHED_FIFO, &sp);

		if (e != 0) {
			ret = fail(res, -e, "--driver-rt-priority %d: %s",
				   o->driver_rt_priority, strerror(e));
			goto out;
		}
	}
	if (o->load && start_load(&run, o->replay_cpu) < 0) {
		ret = fail(res, -EAGAIN, "no thread for --load");
		goto out;
	}

	fprintf(stderr, "%s: ZeroMQ floor, %ld frames ...\n", g->name,
		o->warmup + o->frames);
	ret = measure_floor(&run, o, lens, g->pixels, act->n_valid, res);
	if (ret < 0) {
		goto out;
	}

	memset(&rc, 0, sizeof(rc));
	rc.frames_endpoint = run.frames;
	rc.commands_endpoint = run.commands;
	rc.lenslets = lens;
	rc.pixels_per_lenslet = g->pixels;
	rc.n_act = act->n_valid;
	rc.max_frames = o->frames;
	if (rc.max_frames < o->warmup) {
		rc.max_frames = o->warmup;
	}
	if (rc.max_frames < o->rate_frames) {
		rc.max_frames = o->rate_frames;
	}
	rc.prerender = E2E_PRERENDER;
	rc.seed = o->seed;
	ret = replay_create(run.zctx, &rc, &r, &err);
	if (ret < 0) {
		ret = fail(res, ret, "replay: %s", err.msg);
		goto out;
	}
	res->frame_bytes = replay_frame_bytes(r);
	res->command_bytes = replay_command_bytes(r);
	ret = start_daemon(&run, o->daemon_path, res);
	if (ret < 0) {
		keep_log = run.daemon == 0;
		goto out;
	}
	fprintf(stderr, "%s: wavetrimd, %ld lockstep frames ...\n", g->name,
		o->warmup + o->frames);
	ret = measure_daemon(&run, o, r, res);
	if (ret == 0) {
		res->done = true;
	}
out:
	stop_load(&run);
	stop_daemon(&run);
	replay_destroy(r);
	if (run.zctx) {
		zmq_ctx_term(run.zctx);
	}
	remove_files(&run, keep_log);
	wt_grid_destroy(lens);
	wt_grid_destroy(act);
	free(ini_text);
	free(run.reply);
	free(run.toks);
	return ret;
}

/* ---- output ------------------------------------------------------------- */

static double goal_ratio(const struct bench_e2e_result *r, double compute)
{
	return r->e2e.latency.p50 / (r->floor.latency.p50 + compute);
}

static void print_lat(const char *name, const struct replay_result *r)
{
	printf("  %-26s %9.2f %9.2f %9.2f %9.2f   (%ld sent, %ld missing)\n",
	       name, r->latency.p50 / 1e3, r->latency.p99 / 1e3,
	       r->latency.p999 / 1e3, r->latency.max / 1e3, r->sent,
	       r->missing + r->send_failed);
}

void bench_e2e_print(const struct bench_e2e_result *res, int n,
		     const double *compute_p50_ns,
		     const struct bench_e2e_options *o)
{
	int i, k;

	printf("\nend to end: wavetrimd (%s) over ipc, loop thread on CPU %d "
	       "(SCHED_FIFO %d; 0: normal)%s, replay on CPU %d (SCHED_FIFO "
	       "%d)%s\n",
	       o->daemon_path, o->daemon_cpu, o->rt_priority,
	       o->busy_poll ? " busy-polling" : "", o->replay_cpu,
	       o->driver_rt_priority,
	       o->load ? ", a busy thread on the replay's CPU (--load)" : "");
	for (i = 0; i < n; i++) {
		const struct bench_e2e_result *r = &res[i];

		printf("%s: frame %zu B, command %zu B (%d subapertures, %d "
		       "actuators)\n",
		       r->name, r->frame_bytes, r->command_bytes, r->n_sub,
		       r->n_act);
		if (!r->done) {
			printf("  not measured: %s\n", r->error);
			continue;
		}
		printf("  %-26s %9s %9s %9s %9s   (us)\n", "lockstep", "p50",
		       "p99", "p99.9", "max");
		print_lat("frame sent -> command", &r->e2e);
		print_lat("ZeroMQ floor (echo peer)", &r->floor);
		printf("  daemon's own receive -> send median: %.2f us\n",
		       r->daemon_latency_median_us);
		printf("  e2e p50 / (floor p50 + compute p50 %.2f us) = %.2f "
		       "(goal <= 1.3)\n",
		       compute_p50_ns[i] / 1e3,
		       goal_ratio(r, compute_p50_ns[i]));
		printf("  e2e p99.9 / p50 = %.2f (goal <= 3 with --load)\n",
		       r->e2e.latency.p999 / r->e2e.latency.p50);
		printf("  %-10s %10s %10s %10s %8s %8s %8s  %s\n", "rate Hz",
		       "achieved", "sent", "answered", "dropped", "stale",
		       "unsent", "");
		for (k = 0; k < r->n_rates; k++) {
			const struct bench_e2e_rate *t = &r->rates[k];

			printf("  %-10.0f %10.1f %10ld %10ld %8.0f %8.0f "
			       "%8.0f  %s\n",
			       t->rate_hz, t->r.rate_hz, t->r.sent,
			       t->r.received, t->dropped, t->stale,
			       t->send_failed + (double)t->r.send_failed,
			       t->pass ? "pass" : "FAIL");
		}
		printf("  highest rate with no drop: %.0f Hz (%ld frames "
		       "each)\n",
		       r->max_rate_hz, o->rate_frames);
	}
}

static void json_replay(wt_json *j, const char *key,
			const struct replay_result *r)
{
	wt_json_key(j, key);
	wt_json_object_begin(j);
	wt_json_key(j, "sent");
	wt_json_int(j, r->sent);
	wt_json_key(j, "send_failed");
	wt_json_int(j, r->send_failed);
	wt_json_key(j, "received");
	wt_json_int(j, r->received);
	wt_json_key(j, "missing");
	wt_json_int(j, r->missing);
	wt_json_key(j, "timeouts");
	wt_json_int(j, r->timeouts);
	wt_json_key(j, "duplicates");
	wt_json_int(j, r->duplicates);
	wt_json_key(j, "foreign");
	wt_json_int(j, r->foreign);
	wt_json_key(j, "refused");
	wt_json_int(j, r->refused);
	wt_json_key(j, "rate_hz");
	wt_json_double_prec(j, r->rate_hz, 6);
	json_stats(j, "latency", &r->latency);
	wt_json_object_end(j);
}

void bench_e2e_json(wt_json *j, const struct bench_e2e_result *res, int n,
		    const double *compute_p50_ns,
		    const struct bench_e2e_options *o)
{
	int i, k;

	wt_json_key(j, "e2e");
	wt_json_object_begin(j);
	wt_json_key(j, "daemon");
	wt_json_string(j, o->daemon_path);
	wt_json_key(j, "daemon_cpu");
	wt_json_int(j, o->daemon_cpu);
	wt_json_key(j, "replay_cpu");
	wt_json_int(j, o->replay_cpu);
	wt_json_key(j, "load");
	wt_json_bool(j, o->load);
	wt_json_key(j, "realtime_priority");
	wt_json_int(j, o->rt_priority);
	wt_json_key(j, "driver_realtime_priority");
	wt_json_int(j, o->driver_rt_priority);
	wt_json_key(j, "busy_poll");
	wt_json_bool(j, o->busy_poll);
	wt_json_key(j, "frames");
	wt_json_int(j, o->frames);
	wt_json_key(j, "warmup");
	wt_json_int(j, o->warmup);
	wt_json_key(j, "rate_frames");
	wt_json_int(j, o->rate_frames);
	wt_json_key(j, "systems");
	wt_json_array_begin(j);
	for (i = 0; i < n; i++) {
		const struct bench_e2e_result *r = &res[i];

		wt_json_object_begin(j);
		wt_json_key(j, "name");
		wt_json_string(j, r->name);
		wt_json_key(j, "done");
		wt_json_bool(j, r->done);
		wt_json_key(j, "error");
		wt_json_string(j, r->done ? NULL : r->error);
		wt_json_key(j, "frame_bytes");
		wt_json_uint(j, r->frame_bytes);
		wt_json_key(j, "command_bytes");
		wt_json_uint(j, r->command_bytes);
		if (r->done) {
			json_replay(j, "lockstep", &r->e2e);
			json_replay(j, "floor", &r->floor);
			wt_json_key(j, "daemon_latency_median_us");
			wt_json_double_prec(j, r->daemon_latency_median_us, 6);
			wt_json_key(j, "compute_total_p50_ns");
			wt_json_double_prec(j, compute_p50_ns[i], 8);
			wt_json_key(j, "p50_over_floor_plus_compute");
			wt_json_double_prec(j, goal_ratio(r, compute_p50_ns[i]),
					    4);
			wt_json_key(j, "p99_9_over_p50");
			wt_json_double_prec(
				j, r->e2e.latency.p999 / r->e2e.latency.p50, 4);
			wt_json_key(j, "rates");
			wt_json_array_begin(j);
			for (k = 0; k < r->n_rates; k++) {
				const struct bench_e2e_rate *t = &r->rates[k];

				wt_json_object_begin(j);
				wt_json_key(j, "rate_hz");
				wt_json_double_prec(j, t->rate_hz, 8);
				json_replay(j, "replay", &t->r);
				wt_json_key(j, "daemon_dropped");
				wt_json_double(j, t->dropped);
				wt_json_key(j, "daemon_stale");
				wt_json_double(j, t->stale);
				wt_json_key(j, "daemon_send_failed");
				wt_json_double(j, t->send_failed);
				wt_json_key(j, "pass");
				wt_json_bool(j, t->pass);
				wt_json_object_end(j);
			}
			wt_json_array_end(j);
			wt_json_key(j, "max_rate_hz");
			wt_json_double_prec(j, r->max_rate_hz, 8);
		}
		wt_json_object_end(j);
	}
	wt_json_array_end(j);
	wt_json_object_end(j);
}
