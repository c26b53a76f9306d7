/*
 * wavetrim-replay - a driver for wavetrimd that streams pre-rendered
 * synthetic frames and times the commands that answer them (replay.h).
 *
 *   wavetrim-replay -c rig.ini [--frames N] [--lockstep | --rate HZ]
 *                   [--timeout-ms MS] [--warmup N] [--prerender K]
 *                   [--cpu N] [--seed N]
 *
 * Binds driver.frames and driver.commands of the INI (the geometry from
 * its sensor and mirror sections), as tools/driver_template.c does.
 * Prints one line of counters and the send -> command latency; exits 0
 * when every frame sent was answered, 3 when some were not, 1 on error,
 * 2 on bad arguments.  SIGINT or SIGTERM ends the run early.
 */
#include <errno.h>
#include <getopt.h>
#include <limits.h>
#include <malloc.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "replay.h"
#include "wt_config.h"

#define NAME "wavetrim-replay"

static volatile sig_atomic_t stop_flag;

static void on_signal(int sig)
{
	(void)sig;
	stop_flag = 1;
}

static void usage(FILE *out)
{
	fprintf(out,
		"usage: " NAME " -c FILE [OPTIONS]\n"
		"\n"
		"Streams pre-rendered synthetic frames for the INI's geometry "
		"on driver.frames\nand times the commands on driver.commands "
		"(frame sent -> command received).\n"
		"\n"
		"  -c, --config FILE    rig INI (sensor, mirror, driver "
		"sections)\n"
		"  -n, --frames N       frames to stream (default 10000)\n"
		"      --lockstep       next frame when the previous is "
		"answered (default)\n"
		"  -r, --rate HZ        free-running at HZ, never waiting\n"
		"  -t, --timeout-ms MS  lockstep: wait this long for an "
		"answer (default 1000)\n"
		"      --warmup N       lockstep frames first, not counted "
		"(default 100)\n"
		"      --prerender K    distinct frames (default 16, at "
		"least %d)\n"
		"      --cpu N          pin to this CPU\n"
		"      --seed N         seed of the spots (default 1)\n"
		"      --first-id N     id of the first frame (default 0; "
		"above the daemon's\n"
		"                       last_frame, or it skips frames as "
		"stale)\n"
		"  -h, --help           this text\n",
		REPLAY_MIN_PRERENDER);
}

static int parse_long(const char *s, long min, long max, long *out)
{
	char *end;
	long v;

	errno = 0;
	v = strtol(s, &end, 10);
	if (errno || end == s || *end != '\0' || v < min || v > max) {
		return -EINVAL;
	}
	*out = v;
	return 0;
}

static void print_result(const char *what, const struct replay_result *r)
{
	printf(NAME ": %s: frames_sent=%ld send_failed=%ld "
		    "commands_received=%ld commands_missing=%ld timeouts=%ld "
		    "duplicates=%ld foreign=%ld refused=%ld rate_hz=%.1f\n",
	       what, r->sent, r->send_failed, r->received, r->missing,
	       r->timeouts, r->duplicates, r->foreign, r->refused, r->rate_hz);
	printf(NAME ": %s: latency_us p50=%.2f p99=%.2f p99.9=%.2f "
		    "max=%.2f\n",
	       what, r->latency.p50 / 1e3, r->latency.p99 / 1e3,
	       r->latency.p999 / 1e3, r->latency.max / 1e3);
}

int main(int argc, char **argv)
{
	enum {
		OPT_LOCKSTEP = 256,
		OPT_WARMUP,
		OPT_PRERENDER,
		OPT_CPU,
		OPT_SEED,
		OPT_FIRST_ID
	};
	static const struct option longopts[] = {
		{"config", required_argument, NULL, 'c'},
		{"frames", required_argument, NULL, 'n'},
		{"lockstep", no_argument, NULL, OPT_LOCKSTEP},
		{"rate", required_argument, NULL, 'r'},
		{"timeout-ms", required_argument, NULL, 't'},
		{"warmup", required_argument, NULL, OPT_WARMUP},
		{"prerender", required_argument, NULL, OPT_PRERENDER},
		{"cpu", required_argument, NULL, OPT_CPU},
		{"seed", required_argument, NULL, OPT_SEED},
		{"first-id", required_argument, NULL, OPT_FIRST_ID},
		{"help", no_argument, NULL, 'h'},
		{NULL, 0, NULL, 0},
	};
	struct sigaction sa = {.sa_handler = on_signal}; /* no SA_RESTART */
	long frames = 10000, timeout_ms = 1000, warmup = 100, prerender = 16;
	long cpu = -1, seed = 1, first_id = 0;
	double rate_hz = 0.0;
	const char *ini = NULL;
	wt_config *cfg = NULL;
	wt_grid *lens = NULL, *act = NULL;
	void *zctx = NULL;
	replay *r = NULL;
	struct replay_config rc = {0};
	struct replay_result res;
	wt_error err = {0};
	int c, status = 1, ret;
	char *end;

	while ((c = getopt_long(argc, argv, "c:n:r:t:h", longopts, NULL)) !=
	       -1) {
		switch (c) {
		case 'c':
			ini = optarg;
			break;
		case 'n':
			if (parse_long(optarg, 1, 100000000, &frames)) {
				fprintf(stderr, NAME ": --frames: 1 .. 1e8\n");
				return 2;
			}
			break;
		case OPT_LOCKSTEP:
			rate_hz = 0.0;
			break;
		case 'r':
			errno = 0;
			rate_hz = strtod(optarg, &end);
			if (errno || end == optarg || *end != '\0' ||
			    !(rate_hz > 0.0 && rate_hz <= 1e6)) {
				fprintf(stderr, NAME ": --rate: (0, 1e6] Hz\n");
				return 2;
			}
			break;
		case 't':
			if (parse_long(optarg, 1, 600000, &timeout_ms)) {
				fprintf(stderr,
					NAME ": --timeout-ms: 1 .. 600000\n");
				return 2;
			}
			break;
		case OPT_WARMUP:
			if (parse_long(optarg, 0, 100000000, &warmup)) {
				fprintf(stderr, NAME ": --warmup: 0 .. 1e8\n");
				return 2;
			}
			break;
		case OPT_PRERENDER:
			if (parse_long(optarg, REPLAY_MIN_PRERENDER, 4096,
				       &prerender)) {
				fprintf(stderr,
					NAME ": --prerender: %d .. "
					     "4096\n",
					REPLAY_MIN_PRERENDER);
				return 2;
			}
			break;
		case OPT_CPU:
			if (parse_long(optarg, 0, CPU_SETSIZE - 1, &cpu)) {
				fprintf(stderr, NAME ": --cpu: a CPU number\n");
				return 2;
			}
			break;
		case OPT_SEED:
			if (parse_long(optarg, 0, LONG_MAX, &seed)) {
				fprintf(stderr, NAME ": --seed: >= 0\n");
				return 2;
			}
			break;
		case OPT_FIRST_ID:
			if (parse_long(optarg, 0, LONG_MAX, &first_id)) {
				fprintf(stderr, NAME ": --first-id: >= 0\n");
				return 2;
			}
			break;
		case 'h':
			usage(stdout);
			return 0;
		default:
			usage(stderr);
			return 2;
		}
	}
	if (optind < argc || !ini) {
		fprintf(stderr, NAME ": %s (see --help)\n",
			ini ? "unexpected argument" : "-c FILE is required");
		return 2;
	}
	if (cpu >= 0 && (ret = pin_thread(pthread_self(), (int)cpu)) < 0) {
		fprintf(stderr, NAME ": cannot pin to CPU %ld: %s\n", cpu,
			strerror(-ret));
		return 1;
	}
	if (wt_config_create(&cfg, &err) < 0 ||
	    wt_config_load(cfg, ini, &err) < 0) {
		goto out;
	}
	/* the same grids as the daemon's, from the same options */
	if (wt_grid_lenslets(wt_config_int(cfg, WT_OPT_SENSOR_LENSLETS),
			     wt_config_double(cfg, WT_OPT_SENSOR_OBSCURATION),
			     wt_config_double(cfg, WT_OPT_SENSOR_MIN_FILL),
			     &lens, &err) < 0 ||
	    wt_grid_actuators(
		    wt_config_int(cfg, WT_OPT_MIRROR_ACTUATORS),
		    wt_config_enum(cfg, WT_OPT_MIRROR_LAYOUT),
		    wt_config_double(cfg, WT_OPT_MIRROR_PUPIL_PITCHES),
		    wt_config_double(cfg, WT_OPT_MIRROR_MARGIN_PITCHES), &act,
		    &err) < 0) {
		goto out;
	}
	/* a received command lands in a block that is reused, not in fresh
	 * pages (STYLE.md, large messages on this class of machine) */
	mallopt(M_MMAP_THRESHOLD, 16 << 20);
	mallopt(M_TRIM_THRESHOLD, 64 << 20);
	sigaction(SIGINT, &sa, NULL);
	sigaction(SIGTERM, &sa, NULL);
	zctx = zmq_ctx_new();
	rc.frames_endpoint = wt_config_string(cfg, WT_OPT_DRIVER_FRAMES);
	rc.commands_endpoint = wt_config_string(cfg, WT_OPT_DRIVER_COMMANDS);
	rc.lenslets = lens;
	rc.pixels_per_lenslet =
		(int)wt_config_int(cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	rc.n_act = act->n_valid;
	rc.max_frames = frames > warmup ? frames : (warmup > 0 ? warmup : 1);
	rc.prerender = (int)prerender;
	rc.seed = (uint64_t)seed;
	rc.first_id = (uint64_t)first_id;
	rc.stop = &stop_flag;
	if (!zctx || replay_create(zctx, &rc, &r, &err) < 0) {
		if (!err.code) {
			wt_error_set(&err, -EIO, "no ZeroMQ context");
		}
		goto out;
	}
	printf(NAME ": ready: %d x %d pixels, %d actuators, %ld frames %s\n",
	       lens->n * rc.pixels_per_lenslet, lens->n * rc.pixels_per_lenslet,
	       rc.n_act, frames, rate_hz > 0.0 ? "free-running" : "lockstep");
	fflush(stdout);
	if (warmup > 0) {
		ret = replay_lockstep(r, warmup, (int)timeout_ms, &res);
		if (ret < 0) {
			wt_error_set(&err, ret, "warm-up: %s",
				     wt_strerror(ret));
			goto out;
		}
		print_result("warm-up", &res);
	}
	if (rate_hz > 0.0) {
		ret = replay_free(r, frames, rate_hz, (int)timeout_ms, &res);
	} else {
		ret = replay_lockstep(r, frames, (int)timeout_ms, &res);
	}
	if (ret < 0) {
		wt_error_set(&err, ret, "run: %s", wt_strerror(ret));
		goto out;
	}
	print_result(rate_hz > 0.0 ? "free" : "lockstep", &res);
	status = res.missing > 0 || res.send_failed > 0 ? 3 : 0;
out:
	if (err.code) {
		fprintf(stderr, NAME ": %s\n", err.msg);
	}
	replay_destroy(r);
	if (zctx) {
		zmq_ctx_term(zctx);
	}
	wt_grid_destroy(act);
	wt_grid_destroy(lens);
	wt_config_destroy(cfg);
	return status;
}
