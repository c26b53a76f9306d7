/*
 * main.c - wavetrimd: the real-time daemon that owns the adaptive-optics
 * loop.
 *
 *   wavetrimd -c FILE [--calibration FILE] [--log-level LEVEL]
 *   wavetrimd --help | --help-config
 *
 * Start-up, in order: arguments, configuration, geometry, the calibration
 * file (if any), the ZeroMQ sockets (control and telemetry are bound here,
 * so a taken endpoint is refused before anything runs), the three threads.
 * Anything refused at start-up prints one line on stderr and exits with
 * status 2.  SIGTERM and SIGINT stop the daemon cleanly: the loop sends the
 * flat, every thread finishes, exit status 0.  SIGHUP re-reads the
 * configuration file as the `reload` request does (lib/wt_request.h) and
 * reports by a `reload` event and the log.
 *
 * The protocol the daemon speaks is defined in lib/wt_request.h.
 */
#include <errno.h>
#include <getopt.h>
#include <malloc.h>
#include <pthread.h>
#include <sched.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/un.h>
#include <unistd.h>

#include <cblas.h>
#include <zmq.h>

#include "wt_clock.h"
#include "wt_config.h"
#include "wt_geometry.h"
#include "wt_store.h"
#include "wt_recording.h"
#include "wtd.h"

/* The only global mutable state of the program, as signals need it. */
static volatile sig_atomic_t got_signal, got_hup;

static void on_signal(int sig)
{
	if (sig == SIGHUP) {
		got_hup = 1;
		return;
	}
	got_signal = sig;
}

static void usage(FILE *out)
{
	fprintf(out,
		"usage: wavetrimd -c FILE [--calibration FILE] "
		"[--log-level LEVEL]\n"
		"       wavetrimd --help | --help-config | --write-config\n"
		"\n"
		"  -c, --config FILE       the INI configuration (required)\n"
		"      --calibration FILE  install this calibration at start "
		"(HDF5, made by save)\n"
		"      --log-level LEVEL   emerg alert crit err warning notice "
		"info debug\n"
		"                          (default notice); logs go to "
		"stderr\n"
		"  -h, --help              this text\n"
		"      --help-config       every option: type, default, range, "
		"help\n"
		"      --write-config      a commented INI of the daemon's "
		"options at their\n"
		"                          defaults (config/rig-template.ini)\n"
		"\n"
		"Control it with `wavetrim help`; the protocol is described "
		"in lib/wt_request.h.\n");
}

/* The sections a real rig's daemon reads (the rest are the simulator's). */
#define WTD_SECTIONS "sensor,mirror,control,calibration,driver,daemon,safety"

/* --write-config: the template for a real rig, from the option table. */
static int write_template(FILE *out)
{
	wt_config *cfg;
	wt_error err;

	if (wt_config_create(&cfg, &err) != 0) {
		fprintf(stderr, "wavetrimd: %s\n", err.msg);
		return 2;
	}
	fprintf(out,
		"; wavetrimd configuration template for a real rig.\n"
		";\n"
		"; Every option of the daemon at its default, with its help.  "
		"Copy this file,\n"
		"; set the sensor and mirror geometry of your rig, the "
		"endpoints your driver\n"
		"; binds, and the mirror's limits (never beyond the maker's).  "
		"Written by\n"
		"; `wavetrimd --write-config` from the option table; a test "
		"checks it is current.\n\n");
	wt_config_write_ini(cfg, out, WTD_SECTIONS);
	wt_config_destroy(cfg);
	return ferror(out) ? 1 : 0;
}

/* Refuse start-up: one line on stderr, exit status 2. */
static void __attribute__((noreturn, format(printf, 1, 2)))
refuse(const char *fmt, ...)
{
	va_list ap;

	fputs("wavetrimd: ", stderr);
	va_start(ap, fmt);
	vfprintf(stderr, fmt, ap);
	va_end(ap);
	fputc('\n', stderr);
	exit(2);
}

/* --- endpoints ------------------------------------------------------------ */

/*
 * Is something listening on this ipc endpoint?  ZeroMQ would silently
 * take over the socket file of a running daemon, so look first: a
 * connect(2) that succeeds means a live listener.
 */
static bool ipc_listener(const char *path)
{
	struct sockaddr_un sa = {.sun_family = AF_UNIX};
	socklen_t len;
	size_t n = strlen(path);
	int fd, rc;

	if (n == 0 || n >= sizeof(sa.sun_path)) {
		return false;
	}
	if (path[0] == '@') {
		/* Linux abstract namespace */
		memcpy(sa.sun_path + 1, path + 1, n - 1);
		len = (socklen_t)(offsetof(struct sockaddr_un, sun_path) + n);
	} else {
		memcpy(sa.sun_path, path, n);
		len = (socklen_t)sizeof(sa);
	}
	fd = socket(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0);
	if (fd < 0) {
		return false;
	}
	rc = connect(fd, (struct sockaddr *)&sa, len);
	close(fd);
	return rc == 0;
}

/* Does a wavetrimd answer `ping` there (within 500 ms)? */
static bool daemon_answers(void *zctx, const char *endpoint)
{
	void *s = zmq_socket(zctx, ZMQ_REQ);
	int linger = 0, timeout = 500;
	char buf[128];
	bool yes = false;
	int n;

	if (!s) {
		return false;
	}
	zmq_setsockopt(s, ZMQ_LINGER, &linger, sizeof(linger));
	zmq_setsockopt(s, ZMQ_RCVTIMEO, &timeout, sizeof(timeout));
	zmq_setsockopt(s, ZMQ_SNDTIMEO, &timeout, sizeof(timeout));
	if (zmq_connect(s, endpoint) == 0 && zmq_send(s, "ping", 4, 0) == 4) {
		n = zmq_recv(s, buf, sizeof(buf) - 1, 0);
		if (n > 0) {
			buf[n < (int)sizeof(buf) - 1 ? n
						     : (int)sizeof(buf) - 1] =
				'\0';
			yes = strstr(buf, "\"ok\":true") != NULL;
		}
	}
	zmq_close(s);
	return yes;
}

static void *bind_socket(struct wtd *d, int type, const char *option,
			 const char *endpoint, bool is_control, int sndhwm)
{
	void *zctx = d->zctx;
	bool curve = d->curve && wt_endpoint_wants_curve(endpoint);
	int linger = 0;
	wt_error err;
	void *s;

	if (wt_endpoint_check(option, endpoint, true, d->curve, &err) < 0) {
		refuse("%s%s", err.msg,
		       d->curve || strncmp(endpoint, "ipc://", 6) == 0
			       ? ""
			       : " (to serve other hosts, set "
				 "daemon.secret_key and daemon.clients: see "
				 "`wavetrim keygen`)");
	}
	if (strncmp(endpoint, "ipc://", 6) == 0) {
		const char *path = endpoint + 6;

		if (ipc_listener(path)) {
			if (is_control && daemon_answers(zctx, endpoint)) {
				refuse("%s %s: in use: a wavetrimd is "
				       "running there",
				       option, endpoint);
			}
			refuse("%s %s: in use by another program", option,
			       endpoint);
		}
	}
	s = zmq_socket(zctx, type);
	if (!s) {
		refuse("%s: %s", option, zmq_strerror(zmq_errno()));
	}
	zmq_setsockopt(s, ZMQ_LINGER, &linger, sizeof(linger));
	if (curve && wt_curve_server(s, &d->keys, &err) < 0) {
		refuse("%s %s: %s", option, endpoint, err.msg);
	}
	if (sndhwm > 0) {
		/* Before the bind: accepted connections take the options
		 * the socket had then. */
		zmq_setsockopt(s, ZMQ_SNDHWM, &sndhwm, sizeof(sndhwm));
	}
	if (zmq_bind(s, endpoint) != 0) {
		int e = zmq_errno();

		refuse("%s %s: %s", option, endpoint, zmq_strerror(e));
	}
	return s;
}

static void *connect_socket(struct wtd *d, int type, const char *option,
			    const char *endpoint, const char *driver_public)
{
	int zero = 0, hwm = WTD_LINK_HWM;
	void *s = zmq_socket(d->zctx, type);
	wt_error err;

	if (!s) {
		refuse("%s: %s", option, zmq_strerror(zmq_errno()));
	}
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	if (wt_endpoint_check(option, endpoint, false, driver_public != NULL,
			      &err) < 0) {
		refuse("%s (to reach a driver on another host, set "
		       "driver.public_key and daemon.secret_key)",
		       err.msg);
	}
	if (driver_public && wt_endpoint_wants_curve(endpoint) &&
	    wt_curve_client(s, driver_public, &d->keys, &err) < 0) {
		refuse("%s %s: %s", option, endpoint, err.msg);
	}
	if (type == ZMQ_PULL) {
		/*
		 * No ZMQ_CONFLATE: in libzmq 4.3.4 a conflating pipe
		 * publishes a message only if its writer wins a try_lock
		 * against the reader (dbuffer_t::write), so the last frame
		 * can sit unseen until the next one comes - a stall in
		 * lockstep.  A short queue bounds staleness instead, and
		 * frame ids tell gaps and stale frames apart.
		 */
		zmq_setsockopt(s, ZMQ_RCVHWM, &hwm, sizeof(hwm));
	} else {
		/*
		 * No ZMQ_IMMEDIATE: with it, the answer to the first frame
		 * of a driver that has just (re)started is dropped whenever
		 * the frames link comes up before the commands link, and a
		 * lockstep driver then waits for it.  Without it a command
		 * waits in the short queue until the link is up; the few
		 * that may queue while a driver is gone carry frame ids the
		 * new driver has not sent, so it refuses them.
		 */
		zmq_setsockopt(s, ZMQ_SNDHWM, &hwm, sizeof(hwm));
	}
	if (zmq_connect(s, endpoint) != 0) {
		refuse("%s %s: %s", option, endpoint,
		       zmq_strerror(zmq_errno()));
	}
	return s;
}

/* --- access (lib/wt_secure.h) ------------------------------------------ */

/*
 * Keys and allow-lists from the configuration; the ZAP handler when the
 * daemon has a secret key.  Every problem refuses start-up.  The driver's
 * public key, when given, goes to driver_public.
 */
static void set_up_access(struct wtd *d, char driver_public[WT_KEY_TEXT],
			  bool *have_driver_key)
{
	const char *secret = wt_config_string(d->cfg, WT_OPT_DAEMON_SECRET_KEY);
	const char *clients = wt_config_string(d->cfg, WT_OPT_DAEMON_CLIENTS);
	const char *writers = wt_config_string(d->cfg, WT_OPT_DAEMON_WRITERS);
	const char *driver = wt_config_string(d->cfg, WT_OPT_DRIVER_PUBLIC_KEY);
	wt_error err;

	*have_driver_key = false;
	if (!secret[0]) {
		if (clients[0] || writers[0] || driver[0]) {
			refuse("%s needs daemon.secret_key (the daemon's own "
			       "CURVE key pair, see `wavetrim keygen`)",
			       clients[0]   ? "daemon.clients"
			       : writers[0] ? "daemon.writers"
					    : "driver.public_key");
		}
		return;
	}
	if (!zmq_has("curve")) {
		refuse("daemon.secret_key: this libzmq has no CURVE");
	}
	if (!clients[0]) {
		refuse("daemon.secret_key needs daemon.clients: CURVE without "
		       "an allow-list would let in anyone who has the "
		       "daemon's public key");
	}
	if (wt_key_read_secret(secret, &d->keys, &err) < 0) {
		refuse("daemon.secret_key %s", err.msg);
	}
	if (wt_keylist_load(clients, &d->clients, &err) < 0) {
		refuse("daemon.clients %s", err.msg);
	}
	if (writers[0] && wt_keylist_load(writers, &d->writers, &err) < 0) {
		refuse("daemon.writers %s", err.msg);
	}
	if (driver[0]) {
		if (wt_key_read_public(driver, driver_public, &err) < 0) {
			refuse("driver.public_key %s", err.msg);
		}
		*have_driver_key = true;
	}
	d->curve = true;
	if (wt_zap_start(d->zctx, d->clients, d->writers, d->log, &d->zap,
			 &err) < 0) {
		refuse("%s", err.msg);
	}
	wt_log_notice(
		d->log,
		"CURVE: public key %s; %zu keys listed, %s may change the "
		"mirror",
		d->keys.public_key,
		wt_keylist_count(d->clients) + wt_keylist_count(d->writers),
		d->writers ? "only daemon.writers" : "all of them");
}

/* --- the loop thread's scheduling
 * --------------------------------------------- */

/* The loop thread on CPU cpu (-1: any) at SCHED_FIFO prio (0: normal). */
static int spawn_loop(struct wtd *d, pthread_t *th, long cpu, long prio)
{
	pthread_attr_t attr;
	int rc;

	pthread_attr_init(&attr);
	if (cpu >= 0) {
		cpu_set_t set;

		CPU_ZERO(&set);
		CPU_SET((int)cpu, &set);
		pthread_attr_setaffinity_np(&attr, sizeof(set), &set);
	} else if (d->split_cpu >= 0) {
		/* not pinned, but never on the split worker's CPU: it would
		 * then wait on a worker it keeps from running */
		cpu_set_t set;

		if (sched_getaffinity(0, sizeof(set), &set) == 0) {
			CPU_CLR(d->split_cpu, &set);
			pthread_attr_setaffinity_np(&attr, sizeof(set), &set);
		}
	}
	if (prio > 0) {
		struct sched_param sp = {.sched_priority = (int)prio};

		pthread_attr_setinheritsched(&attr, PTHREAD_EXPLICIT_SCHED);
		pthread_attr_setschedpolicy(&attr, SCHED_FIFO);
		pthread_attr_setschedparam(&attr, &sp);
	}
	rc = pthread_create(th, &attr, wtd_loop_main, d);
	pthread_attr_destroy(&attr);
	if (rc == 0) {
		/* for top -H, ps -L and the tests */
		pthread_setname_np(*th, "wtd-loop");
	}
	return rc;
}

/*
 * The loop thread with daemon.cpu and daemon.realtime_priority.  What is
 * not granted is dropped with one warning saying what and why: first the
 * priority (most often refused: no CAP_SYS_NICE), then the pinning (a CPU
 * outside the allowed set), then both.
 */
static int start_loop(struct wtd *d, pthread_t *th)
{
	long cpu = wt_config_int(d->cfg, WT_OPT_DAEMON_CPU);
	long prio = wt_config_int(d->cfg, WT_OPT_DAEMON_REALTIME_PRIORITY);
	int rc = spawn_loop(d, th, cpu, prio);

	if (rc == 0 || (cpu < 0 && prio <= 0)) {
		return rc;
	}
	if (prio > 0 && spawn_loop(d, th, cpu, 0) == 0) {
		wt_log_warning(d->log,
			       "loop thread: SCHED_FIFO priority %ld not "
			       "granted (%s); normal scheduling",
			       prio, strerror(rc));
		return 0;
	}
	if (cpu >= 0 && spawn_loop(d, th, -1, prio) == 0) {
		wt_log_warning(d->log,
			       "loop thread: CPU %ld not granted (%s); not "
			       "pinned",
			       cpu, strerror(rc));
		return 0;
	}
	wt_log_warning(d->log,
		       "loop thread: neither CPU %ld nor SCHED_FIFO priority "
		       "%ld granted (%s); running without",
		       cpu, prio, strerror(rc));
	return spawn_loop(d, th, -1, 0);
}

/* --- main
 * ------------------------------------------------------------------------ */

int main(int argc, char **argv)
{
	static const struct option longopts[] = {
		{"config", required_argument, NULL, 'c'},
		{"calibration", required_argument, NULL, 'C'},
		{"log-level", required_argument, NULL, 'L'},
		{"help", no_argument, NULL, 'h'},
		{"help-config", no_argument, NULL, 'H'},
		{"write-config", no_argument, NULL, 'W'},
		{NULL, 0, NULL, 0},
	};
	const char *config_path = NULL, *calib_path = NULL;
	int level = LOG_NOTICE, opt;
	struct wtd d;
	wt_log log;
	wt_error err;
	wt_grid *lenslets = NULL, *actuators = NULL;
	wt_calibration *cal = NULL;
	pthread_t th_loop, th_ctl, th_tm;
	struct sigaction sa;
	sigset_t block, old;
	double lo, hi;
	char driver_public[WT_KEY_TEXT];
	bool have_driver_key;

	/* Before any HDF5 call: see wt_recording_process_init(). */
	wt_recording_process_init();
	/* First of all, so that a signal during start-up stops us cleanly
	 * too (no SA_RESTART: blocking calls return EINTR and look at the
	 * flag). */
	memset(&sa, 0, sizeof(sa));
	sa.sa_handler = on_signal;
	sigemptyset(&sa.sa_mask);
	sigaction(SIGINT, &sa, NULL);
	sigaction(SIGTERM, &sa, NULL);
	sigaction(SIGHUP, &sa, NULL);
	sa.sa_handler = SIG_IGN;
	sigaction(SIGPIPE, &sa, NULL);

	while ((opt = getopt_long(argc, argv, "c:h", longopts, NULL)) != -1) {
		switch (opt) {
		case 'c':
			config_path = optarg;
			break;
		case 'C':
			calib_path = optarg;
			break;
		case 'L':
			level = wt_log_level_parse(optarg);
			if (level < 0) {
				refuse("--log-level %s: not one of emerg alert "
				       "crit err warning notice info debug",
				       optarg);
			}
			break;
		case 'h':
			usage(stdout);
			return 0;
		case 'H':
			wt_config_print_help(stdout);
			return 0;
		case 'W':
			return write_template(stdout);
		default:
			refuse("bad arguments (see wavetrimd --help)");
		}
	}
	if (optind < argc) {
		refuse("unexpected argument '%s' (see wavetrimd --help)",
		       argv[optind]);
	}
	if (!config_path) {
		refuse("-c FILE is required (see wavetrimd --help)");
	}

	/* Big frame buffers stay in the heap: no mmap/munmap (and page
	 * faults) per frame inside ZeroMQ (STYLE.md, the VM pitfall). */
	mallopt(M_MMAP_THRESHOLD, 32 * 1024 * 1024);
	mallopt(M_TRIM_THRESHOLD, 256 * 1024 * 1024);
	/* One BLAS thread: OpenBLAS threads fight the loop thread. */
	openblas_set_num_threads(1);

	wt_log_init(&log, "wavetrimd", level, WT_LOG_STREAM, stderr);
	memset(&d, 0, sizeof(d));
	d.log = &log;
	d.config_path = config_path;
	pthread_mutex_init(&d.slow_mu, NULL);
	pthread_mutex_init(&d.period_mu, NULL);
	pthread_mutex_init(&d.evq_mu, NULL);

	if (wt_config_create(&d.cfg, &err) < 0) {
		refuse("%s", err.msg);
	}
	if (wt_config_load(d.cfg, config_path, &err) < 0) {
		refuse("%s", err.msg);
	}
	lo = wt_config_double(d.cfg, WT_OPT_MIRROR_LIMIT_LOW);
	hi = wt_config_double(d.cfg, WT_OPT_MIRROR_LIMIT_HIGH);
	if (!(lo < hi)) {
		refuse("%s: mirror.limit_low (%g) must be below "
		       "mirror.limit_high (%g)",
		       config_path, lo, hi);
	}
	if (wt_grid_lenslets((int)wt_config_int(d.cfg, WT_OPT_SENSOR_LENSLETS),
			     wt_config_double(d.cfg, WT_OPT_SENSOR_OBSCURATION),
			     wt_config_double(d.cfg, WT_OPT_SENSOR_MIN_FILL),
			     &lenslets, &err) < 0) {
		refuse("%s: [sensor]: %s", config_path, err.msg);
	}
	if (wt_grid_actuators(
		    (int)wt_config_int(d.cfg, WT_OPT_MIRROR_ACTUATORS),
		    (enum wt_layout)wt_config_enum(d.cfg, WT_OPT_MIRROR_LAYOUT),
		    wt_config_double(d.cfg, WT_OPT_MIRROR_PUPIL_PITCHES),
		    wt_config_double(d.cfg, WT_OPT_MIRROR_MARGIN_PITCHES),
		    &actuators, &err) < 0) {
		refuse("%s: [mirror]: %s", config_path, err.msg);
	}
	d.lenslets = lenslets;
	d.actuators = actuators;
	d.n_subaps = lenslets->n_valid;
	d.n_slopes = 2 * lenslets->n_valid;
	d.n_act = actuators->n_valid;
	d.ppl = (int)wt_config_int(d.cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	d.frame_side = lenslets->n * d.ppl;
	if (calib_path && wt_store_load(calib_path, lenslets, actuators, d.ppl,
					&cal, &err) < 0) {
		refuse("--calibration %s", err.msg);
	}

	d.zctx = zmq_ctx_new();
	if (!d.zctx) {
		refuse("ZeroMQ: %s", zmq_strerror(zmq_errno()));
	}
	set_up_access(&d, driver_public, &have_driver_key);
	d.s_control = bind_socket(
		&d, ZMQ_REP, "daemon.control",
		wt_config_string(d.cfg, WT_OPT_DAEMON_CONTROL), true, 0);
	d.s_telemetry = bind_socket(
		&d, ZMQ_PUB, "daemon.telemetry",
		wt_config_string(d.cfg, WT_OPT_DAEMON_TELEMETRY), false,
		/* PUB never blocks: past this queue a subscriber loses
		 * records (ZeroMQ's send high-water mark, per subscriber). */
		(int)wt_config_int(d.cfg, WT_OPT_DAEMON_TELEMETRY_QUEUE));
	d.s_frames =
		connect_socket(&d, ZMQ_PULL, "driver.frames",
			       wt_config_string(d.cfg, WT_OPT_DRIVER_FRAMES),
			       have_driver_key ? driver_public : NULL);
	d.s_commands =
		connect_socket(&d, ZMQ_PUSH, "driver.commands",
			       wt_config_string(d.cfg, WT_OPT_DRIVER_COMMANDS),
			       have_driver_key ? driver_public : NULL);

	d.slot_bytes = sizeof(struct wtd_slot) +
		       4 * (3 * (size_t)d.n_subaps + (size_t)d.n_act);
	if (wt_ring_create(d.slot_bytes, WTD_RING_RECORDS, &d.ring, &err) < 0 ||
	    wtd_loop_create(&d, &err) < 0 ||
	    wtd_control_create(&d, cal, calib_path, &err) < 0 ||
	    wtd_telemetry_create(&d, &err) < 0) {
		refuse("%s", err.msg);
	}
	wt_calibration_destroy(cal);
	cal = NULL;

	if (wt_config_bool(d.cfg, WT_OPT_DAEMON_LOCK_MEMORY) &&
	    mlockall(MCL_CURRENT | MCL_FUTURE) != 0) {
		wt_log_warning(&log, "mlockall: %s; memory stays pageable",
			       strerror(errno));
	}

	/* Threads get no signals; main takes them. */
	sigemptyset(&block);
	sigaddset(&block, SIGINT);
	sigaddset(&block, SIGTERM);
	sigaddset(&block, SIGHUP);
	sigaddset(&block, SIGPIPE);
	pthread_sigmask(SIG_BLOCK, &block, &old);
	d.start_ns = wt_clock_ns();
	if (start_loop(&d, &th_loop) != 0 ||
	    pthread_create(&th_ctl, NULL, wtd_control_main, &d) != 0 ||
	    pthread_create(&th_tm, NULL, wtd_telemetry_main, &d) != 0) {
		refuse("cannot start threads");
	}
	pthread_sigmask(SIG_SETMASK, &old, NULL);

	wt_log_notice(&log,
		      "running: %d subapertures, %d actuators, control %s, "
		      "telemetry %s%s%s",
		      d.n_subaps, d.n_act,
		      wt_config_string(d.cfg, WT_OPT_DAEMON_CONTROL),
		      wt_config_string(d.cfg, WT_OPT_DAEMON_TELEMETRY),
		      calib_path ? ", calibration " : "",
		      calib_path ? calib_path : "");

	while (!got_signal && !atomic_load(&d.stop)) {
		wt_clock_sleep_ns(20 * WT_NS_PER_MS);
		if (got_hup) {
			got_hup = 0;
			atomic_store(&d.reload_requested, true);
		}
	}
	if (got_signal) {
		wt_log_notice(&log, "signal %d: stopping", (int)got_signal);
	}
	atomic_store(&d.stop, true);
	pthread_join(th_loop, NULL);
	pthread_join(th_ctl, NULL);
	atomic_store(&d.tm_stop, true);
	pthread_join(th_tm, NULL);

	wtd_telemetry_destroy(&d);
	wtd_control_destroy(&d);
	wt_ring_destroy(d.ring);
	wt_zap_stop(d.zap);
	zmq_ctx_term(d.zctx);
	/* After the context: the last commands are sent from its buffers. */
	wtd_loop_destroy(&d);
	wt_keylist_destroy(d.clients);
	wt_keylist_destroy(d.writers);
	memset(&d.keys, 0, sizeof(d.keys));
	for (int k = 0; k < d.evq_count; k++) {
		free(d.evq[(d.evq_head + k) % WTD_EVQ]);
	}
	wt_grid_destroy(lenslets);
	wt_grid_destroy(actuators);
	wt_config_destroy(d.cfg);
	pthread_mutex_destroy(&d.slow_mu);
	pthread_mutex_destroy(&d.period_mu);
	pthread_mutex_destroy(&d.evq_mu);
	wt_log_notice(&log, "stopped");
	wt_log_close(&log);
	return 0;
}
