/*
 * wavetrim-sim - a simulated deformable mirror, aberrating sample and
 * Shack-Hartmann camera that speaks the driver protocol to wavetrimd.
 */
#include <errno.h>
#include <getopt.h>
#include <malloc.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "sim_driver.h"
#include "sim_record.h"
#include "wt_config.h"
#include "wt_log.h"

static volatile sig_atomic_t stop_flag;

static void on_signal(int sig)
{
	(void)sig;
	stop_flag = 1;
}

static void usage(FILE *out)
{
	fputs("usage: wavetrim-sim [-c FILE] [-s section.key=value]... "
	      "[--frames N [--output FILE.h5 [--command FILE]]]\n"
	      "\n"
	      "Simulates a deformable mirror, an aberrating sample and a "
	      "Shack-Hartmann\n"
	      "camera.  Binds driver.frames (PUSH), driver.commands (PULL) "
	      "and sim.truth (PUB)\n"
	      "and serves wavetrimd until SIGINT or SIGTERM.  With --output, "
	      "writes frames\n"
	      "to HDF5 instead, without a daemon.\n"
	      "\n"
	      "flags:\n"
	      "  -c, --config FILE     INI file (options not in it keep "
	      "their defaults)\n"
	      "  -s, --set KEY=VALUE   set one option after the file, e.g. "
	      "-s sim.delay=2\n"
	      "  -n, --frames N        stop after N frames (with --output: "
	      "frames to write)\n"
	      "  -o, --output FILE     write N frames, their truth and the "
	      "command to HDF5\n"
	      "      --command FILE    with --output: hold this command "
	      "(numbers, one per\n"
	      "                        actuator; default flat)\n"
	      "  -l, --log-level L     err, warning, notice, info or debug "
	      "(default notice)\n"
	      "  -h, --help            this text and every option\n"
	      "\n"
	      "options (section.key type default range live|restart help):\n",
	      out);
	wt_config_print_help(out);
}

static int set_option(wt_config *cfg, const char *arg, wt_error *err)
{
	char key[256];
	const char *eq = strchr(arg, '=');

	if (!eq || (size_t)(eq - arg) >= sizeof(key)) {
		return wt_error_set(err, -EINVAL, "--set %s: want KEY=VALUE",
				    arg);
	}
	memcpy(key, arg, (size_t)(eq - arg));
	key[eq - arg] = '\0';
	return wt_config_set(cfg, key, eq + 1, err);
}

int main(int argc, char **argv)
{
	static const struct option longopts[] = {
		{"config", required_argument, NULL, 'c'},
		{"set", required_argument, NULL, 's'},
		{"frames", required_argument, NULL, 'n'},
		{"output", required_argument, NULL, 'o'},
		{"command", required_argument, NULL, 'C'},
		{"log-level", required_argument, NULL, 'l'},
		{"help", no_argument, NULL, 'h'},
		{NULL, 0, NULL, 0},
	};
	const char *config_path = NULL, *output = NULL, *command_path = NULL;
	unsigned long long frames = 0;
	wt_config *cfg = NULL;
	sim_driver *driver = NULL;
	sim_world *world = NULL;
	float *cmd = NULL;
	struct sigaction sa;
	wt_error err;
	wt_log log;
	int level = LOG_NOTICE, ret = 1, opt, rc;
	char *end;

	wt_error_clear(&err);
	if (wt_config_create(&cfg, &err) < 0) {
		fprintf(stderr, "wavetrim-sim: %s\n", err.msg);
		return 1;
	}
	/* set-up allocates the large buffers once; keep glibc from handing
	 * them back and forth to the kernel */
	mallopt(M_MMAP_THRESHOLD, 64 << 20);
	mallopt(M_TRIM_THRESHOLD, 256 << 20);
	while ((opt = getopt_long(argc, argv, "c:s:n:o:l:h", longopts, NULL)) !=
	       -1) {
		switch (opt) {
		case 'c':
			config_path = optarg;
			break;
		case 's':
			break; /* applied after the file, below */
		case 'n':
			errno = 0;
			frames = strtoull(optarg, &end, 10);
			if (errno || *end || end == optarg || frames == 0 ||
			    optarg[0] == '-') {
				fprintf(stderr,
					"wavetrim-sim: --frames %s: want a "
					"positive integer\n",
					optarg);
				goto out_usage;
			}
			break;
		case 'o':
			output = optarg;
			break;
		case 'C':
			command_path = optarg;
			break;
		case 'l':
			level = wt_log_level_parse(optarg);
			if (level < 0) {
				fprintf(stderr,
					"wavetrim-sim: --log-level %s: "
					"unknown level\n",
					optarg);
				goto out_usage;
			}
			break;
		case 'h':
			usage(stdout);
			ret = 0;
			goto out;
		default:
			goto out_usage;
		}
	}
	if (optind < argc) {
		fprintf(stderr, "wavetrim-sim: unexpected argument %s\n",
			argv[optind]);
		goto out_usage;
	}
	if (output && frames == 0) {
		fprintf(stderr, "wavetrim-sim: --output needs --frames N\n");
		goto out_usage;
	}
	if (command_path && !output) {
		fprintf(stderr, "wavetrim-sim: --command needs --output\n");
		goto out_usage;
	}
	if (config_path && wt_config_load(cfg, config_path, &err) < 0) {
		fprintf(stderr, "wavetrim-sim: %s\n", err.msg);
		goto out;
	}
	/* -s values override the file, in the order given */
	optind = 1;
	while ((opt = getopt_long(argc, argv, "c:s:n:o:l:h", longopts, NULL)) !=
	       -1) {
		if (opt == 's' && set_option(cfg, optarg, &err) < 0) {
			fprintf(stderr, "wavetrim-sim: %s\n", err.msg);
			goto out;
		}
	}
	wt_log_init(&log, "wavetrim-sim", level, WT_LOG_STREAM, stderr);

	memset(&sa, 0, sizeof(sa));
	sa.sa_handler = on_signal;
	sigemptyset(&sa.sa_mask);
	sa.sa_flags = 0; /* no SA_RESTART: blocking calls return EINTR */
	sigaction(SIGINT, &sa, NULL);
	sigaction(SIGTERM, &sa, NULL);

	if (output) {
		rc = sim_world_create(cfg, &world, &err);
		if (rc < 0) {
			wt_log_err(&log, "%s", err.msg);
			goto out_log;
		}
		if (command_path) {
			cmd = calloc((size_t)sim_world_actuators(world),
				     sizeof(*cmd));
			if (!cmd ||
			    sim_record_read_command(command_path, cmd,
						    sim_world_actuators(world),
						    &err) < 0) {
				wt_log_err(&log, "%s",
					   cmd ? err.msg : "out of memory");
				goto out_log;
			}
		}
		rc = sim_record_run(world, cfg, cmd, frames, output, &stop_flag,
				    &err);
		if (rc < 0) {
			wt_log_err(&log, "%s", err.msg);
			goto out_log;
		}
		wt_log_info(&log, "wrote %llu frames to %s", frames, output);
		ret = 0;
		goto out_log;
	}

	rc = sim_driver_create(cfg, &log, &driver, &err);
	if (rc < 0) {
		wt_log_err(&log, "%s", err.msg);
		goto out_log;
	}
	wt_log_notice(&log, "frames on %s, commands on %s, truth on %s",
		      wt_config_string(cfg, WT_OPT_DRIVER_FRAMES),
		      wt_config_string(cfg, WT_OPT_DRIVER_COMMANDS),
		      wt_config_string(cfg, WT_OPT_SIM_TRUTH));
	rc = sim_driver_run(driver, &stop_flag, frames);
	if (rc < 0) {
		wt_log_err(&log, "driver loop: %s", wt_strerror(rc));
	} else {
		sim_driver_stats st;

		sim_driver_stats_get(driver, &st);
		wt_log_notice(&log,
			      "%llu frames sent, %llu commands applied, "
			      "%llu refused, %llu stale, %llu dropped, "
			      "%llu timeouts",
			      (unsigned long long)st.frames,
			      (unsigned long long)st.accepted,
			      (unsigned long long)st.refused,
			      (unsigned long long)st.stale,
			      (unsigned long long)st.dropped,
			      (unsigned long long)st.timeouts);
		ret = 0;
	}
out_log:
	sim_driver_destroy(driver);
	sim_world_destroy(world);
	free(cmd);
	wt_log_close(&log);
	wt_config_destroy(cfg);
	return ret;
out_usage:
	usage(stderr);
	ret = 2;
out:
	wt_config_destroy(cfg);
	return ret;
}
