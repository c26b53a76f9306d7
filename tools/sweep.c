/*
 * sweep.c - wavetrim-sweep: close the loop at each gain of a list, measure
 * the residual, print a table and draw residual vs gain and the residual's
 * temporal power spectrum (SVG, lib/wt_draw charts).
 *
 *   wavetrim-sweep -c FILE [--truth ENDPOINT] [-n FRAMES] [-s SETTLE]
 *                  [-o PLOT.svg] GAIN...
 *
 * With --truth (the simulator's truth endpoint, sim.truth) the residual is
 * the simulator's wavefront RMS in nm; without, the daemon's residual slope
 * RMS in pixels from its "frame " records (one in daemon.frame_decimation).
 * Everything goes through the control protocol; the loop is opened and
 * the original gain restored at the end.
 */
#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "sim_driver.h"
#include "wt_config.h"
#include "wt_draw.h"
#include "wt_modalgain.h"
#include "wt_request.h"

#define MAX_GAINS 64
#define REPLY_MAX 65536
#define WAIT_MS	  20000

struct sweep {
	void *ctx, *req, *sub;
	const char *control;
	bool truth;
	char reply[REPLY_MAX];
};

/* One request; 1 ok, 0 refused, -1 no answer. */
static int request(struct sweep *w, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

static int request(struct sweep *w, const char *fmt, ...)
{
	char line[WT_REQUEST_LINE_MAX + 1];
	va_list ap;
	int n, timeout = WAIT_MS, linger = 0;

	va_start(ap, fmt);
	vsnprintf(line, sizeof(line), fmt, ap);
	va_end(ap);
	if (!w->req) {
		w->req = zmq_socket(w->ctx, ZMQ_REQ);
		zmq_setsockopt(w->req, ZMQ_RCVTIMEO, &timeout, sizeof(timeout));
		zmq_setsockopt(w->req, ZMQ_LINGER, &linger, sizeof(linger));
		if (zmq_connect(w->req, w->control) != 0) {
			return -1;
		}
	}
	if (zmq_send(w->req, line, strlen(line), 0) < 0) {
		return -1;
	}
	n = zmq_recv(w->req, w->reply, sizeof(w->reply) - 1, 0);
	if (n < 0) {
		zmq_close(w->req); /* a REQ socket without answer is stuck */
		w->req = NULL;
		return -1;
	}
	w->reply[n < (int)sizeof(w->reply) ? n : (int)sizeof(w->reply) - 1] =
		'\0';
	return strncmp(w->reply, "{\"ok\":true", 10) == 0;
}

/* Next residual sample: truth rms_nm or the frame record's slope RMS;
 * its frame id in *frame.  0, or -1 after WAIT_MS. */
static int sample(struct sweep *w, double *v, uint64_t *frame)
{
	uint8_t buf[1 << 16];
	zmq_pollitem_t it = {.socket = w->sub, .events = ZMQ_POLLIN};

	for (;;) {
		int n;

		if (zmq_poll(&it, 1, WAIT_MS) != 1) {
			return -1;
		}
		n = zmq_recv(w->sub, buf, sizeof(buf), 0);
		if (n < 0) {
			return -1;
		}
		if (w->truth) {
			sim_truth t;

			if (sim_truth_decode(buf, (size_t)n, &t) == 0) {
				*v = t.rms_nm;
				*frame = t.frame;
				return 0;
			}
		} else if (n >= 6 + WT_FRAME_HEADER_BYTES) {
			wt_frame_record h;

			memcpy(&h, buf + 6, sizeof(h));
			*v = h.residual_rms;
			*frame = h.frame_id;
			return 0;
		}
	}
}

/* Samples of frames answered after every request so far. */
static int sync_frames(struct sweep *w)
{
	const char *p;
	uint64_t last, f;
	double v;

	if (request(w, "status") != 1 ||
	    !(p = strstr(w->reply, "\"last_frame\":"))) {
		return -1;
	}
	last = strtoull(p + 13, NULL, 10);
	do {
		if (sample(w, &v, &f) < 0) {
			return -1;
		}
	} while (f <= last);
	return 0;
}

static void usage(FILE *fp)
{
	fprintf(fp,
		"usage: wavetrim-sweep -c FILE [--truth ENDPOINT] [-n FRAMES] "
		"[-s SETTLE] [-o PLOT.svg] GAIN...\n"
		"  -c, --config FILE    the daemon's INI (its endpoints)\n"
		"      --truth ENDPOINT the simulator's truth stream: judge "
		"by its residual (nm)\n"
		"  -n, --frames N       residual samples per gain (default "
		"256)\n"
		"  -s, --settle N       samples skipped after closing "
		"(default 50)\n"
		"  -o, --plot FILE      write the SVG plot there\n");
}

int main(int argc, char **argv)
{
	static const struct option longopts[] = {
		{"config", required_argument, NULL, 'c'},
		{"truth", required_argument, NULL, 'T'},
		{"frames", required_argument, NULL, 'n'},
		{"settle", required_argument, NULL, 's'},
		{"plot", required_argument, NULL, 'o'},
		{"help", no_argument, NULL, 'h'},
		{NULL, 0, NULL, 0},
	};
	struct sweep w = {0};
	const char *config = NULL, *truth = NULL, *plot = NULL;
	double gains[MAX_GAINS], mean[MAX_GAINS], sd[MAX_GAINS], g0;
	double *series[MAX_GAINS] = {0};
	int n_gains = 0, frames = 256, settle = 50, opt, best = 0, rc = 1;
	wt_config *cfg = NULL;
	wt_error err;

	while ((opt = getopt_long(argc, argv, "c:n:s:o:h", longopts, NULL)) !=
	       -1) {
		switch (opt) {
		case 'c':
			config = optarg;
			break;
		case 'T':
			truth = optarg;
			break;
		case 'n':
			frames = atoi(optarg);
			break;
		case 's':
			settle = atoi(optarg);
			break;
		case 'o':
			plot = optarg;
			break;
		case 'h':
			usage(stdout);
			return 0;
		default:
			usage(stderr);
			return 2;
		}
	}
	for (; optind < argc && n_gains < MAX_GAINS; optind++) {
		char *end;

		gains[n_gains] = strtod(argv[optind], &end);
		if (*end || !(gains[n_gains] >= 0 && gains[n_gains] <= 2)) {
			fprintf(stderr, "wavetrim-sweep: bad gain '%s'\n",
				argv[optind]);
			return 2;
		}
		n_gains++;
	}
	if (!config || n_gains == 0 || frames < 16 || settle < 0) {
		usage(stderr);
		return 2;
	}
	if (wt_config_create(&cfg, &err) < 0 ||
	    wt_config_load(cfg, config, &err) < 0) {
		fprintf(stderr, "wavetrim-sweep: %s\n", err.msg);
		return 2;
	}
	w.control = wt_config_string(cfg, WT_OPT_DAEMON_CONTROL);
	w.truth = truth != NULL;
	w.ctx = zmq_ctx_new();
	w.sub = zmq_socket(w.ctx, ZMQ_SUB);
	if (zmq_connect(w.sub,
			truth ? truth
			      : wt_config_string(cfg,
						 WT_OPT_DAEMON_TELEMETRY)) != 0 ||
	    zmq_setsockopt(w.sub, ZMQ_SUBSCRIBE, truth ? "" : "frame ",
			   truth ? 0 : 6) != 0) {
		fprintf(stderr, "wavetrim-sweep: cannot subscribe\n");
		goto out;
	}
	if (request(&w, "get control.gain") != 1) {
		fprintf(stderr, "wavetrim-sweep: no daemon at %s\n", w.control);
		goto out;
	}
	g0 = strtod(strstr(w.reply, "\"value\":") + 8, NULL);

	printf("%8s %12s %12s %8s\n", "gain", truth ? "rms_nm" : "rms_px",
	       "sd", "frames");
	for (int k = 0; k < n_gains; k++) {
		double v, s = 0, ss = 0;
		uint64_t f;

		series[k] = malloc(sizeof(double) * (size_t)frames);
		if (!series[k] ||
		    request(&w, "set control.gain %g", gains[k]) != 1 ||
		    request(&w, "close") != 1 || sync_frames(&w) < 0) {
			fprintf(stderr, "wavetrim-sweep: gain %g: %s\n",
				gains[k], w.reply);
			goto out;
		}
		for (int i = 0; i < settle + frames; i++) {
			if (sample(&w, &v, &f) < 0) {
				fprintf(stderr, "wavetrim-sweep: no data\n");
				goto out;
			}
			if (i >= settle) {
				series[k][i - settle] = v;
				s += v;
				ss += v * v;
			}
		}
		mean[k] = s / frames;
		sd[k] = sqrt(fmax(ss / frames - mean[k] * mean[k], 0));
		printf("%8.4g %12.6g %12.6g %8d\n", gains[k], mean[k], sd[k],
		       frames);
		fflush(stdout);
		if (mean[k] < mean[best]) {
			best = k;
		}
	}
	printf("best gain %.4g: %.6g\n", gains[best], mean[best]);
	request(&w, "open");
	request(&w, "set control.gain %g", g0);

	if (plot) {
		int seg = WT_MODALGAIN_MIN_SEGMENT, np = 0;
		wt_draw_series rs = {gains, mean, n_gains, "mean residual"};
		wt_draw_series ps[4];
		double *psd[4] = {0}, *fx = NULL;
		wt_draw_chart ch[2] = {
			{.title = "Residual vs gain",
			 .xlabel = "integrator gain",
			 .ylabel = truth ? "residual RMS, nm (truth)"
					 : "residual slope RMS, px",
			 .series = &rs,
			 .n_series = 1},
			{.title = "Temporal power spectrum of the residual",
			 .xlabel = "frequency, cycles per frame",
			 .ylabel = "PSD (Welch)",
			 .log_y = true,
			 .series = ps},
		};
		char labels[4][32];
		uint8_t *svg = NULL;
		size_t len;
		FILE *fp;

		while (seg * 2 <= frames / 2 && seg < 256) {
			seg *= 2;
		}
		fx = malloc(sizeof(double) * (size_t)seg);
		for (int i = 0; fx && i < seg; i++) {
			fx[i] = (double)i / seg;
		}
		/* The best gain and up to three others, spread out. */
		for (int q = 0; q < 4 && q < n_gains && fx; q++) {
			int k = q == 0 ? best
				       : (q * (n_gains - 1)) / 3 % n_gains;

			if (q > 0 && k == best) {
				continue;
			}
			psd[np] = malloc(sizeof(double) * (size_t)seg);
			if (!psd[np] ||
			    wt_modalgain_psd(series[k], frames, 1, seg, psd[np],
					     &err) < 0) {
				fprintf(stderr, "wavetrim-sweep: %s\n",
					err.msg);
				goto plot_out;
			}
			snprintf(labels[np], sizeof(labels[np]), "gain %.3g",
				 gains[k]);
			/* one side, 0 < f <= 1/2 */
			ps[np] = (wt_draw_series){fx + 1, psd[np] + 1, seg / 2,
						  labels[np]};
			np++;
		}
		ch[1].n_series = np;
		if (wt_draw_charts_svg(ch, 2, &svg, &len, &err) < 0) {
			fprintf(stderr, "wavetrim-sweep: %s\n", err.msg);
			goto plot_out;
		}
		fp = fopen(plot, "w");
		if (!fp || fwrite(svg, 1, len, fp) != len || fclose(fp) != 0) {
			fprintf(stderr, "wavetrim-sweep: %s: %s\n", plot,
				strerror(errno));
			goto plot_out;
		}
		printf("plot: %s\n", plot);
		rc = 0;
plot_out:
		free(svg);
		free(fx);
		for (int q = 0; q < 4; q++) {
			free(psd[q]);
		}
	} else {
		rc = 0;
	}
out:
	for (int k = 0; k < n_gains; k++) {
		free(series[k]);
	}
	if (w.req) {
		zmq_close(w.req);
	}
	zmq_close(w.sub);
	zmq_ctx_term(w.ctx);
	wt_config_destroy(cfg);
	return rc;
}
