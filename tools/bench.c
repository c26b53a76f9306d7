/*
 * wavetrim-bench - how close the loop's per-frame computation is to the
 * machine's memory floor, and which matrix-vector kernel to use.
 *
 *   wavetrim-bench [--frames N] [--systems S,M,L] [--mvm auto|blas|own]
 *                  [--split S,M,L|none] [--svd S,M,L|none] [--cpu N]
 *                  [--json] [--sweep]
 *                  [--e2e S,M,L|none] [--e2e-frames N] [--rates LIST]
 *                  [--rate-frames N] [--load] [--daemon PATH]
 *
 * For each reference system it renders one synthetic Shack-Hartmann frame
 * (Gaussian spots at random sub-pixel offsets, seeded) and runs the loop's
 * computation on it frame after frame, pinned to one CPU with one BLAS
 * thread: centroiding (wt_centroid_frame), u = R s (wt_mvm_apply) and the
 * rest of the controller (wt_control_step with no matrix: leak, gain,
 * NaN checks, clipping and slew limiting).  Each part is timed with
 * CLOCK_MONOTONIC and reported as p50, p99, p99.9 and max after a warm-up.
 *
 * The memory floor of a frame is the bytes it must read (the pixels of the
 * valid windows, the control matrix, the slope vector and the controller's
 * vectors) divided by the bandwidth of the memory level a working set of
 * that size lives in, measured in the same run by a STREAM-style copy and
 * triad at that size (McCalpin, STREAM), once before and once after the
 * frames; both rates are printed and the floor uses the better triad (the
 * lower floor).  Writes are not counted.  A product that only reads can
 * beat a triad, which also writes: a ratio near or below 1 means the
 * computation runs at the memory's speed.
 *
 * The optional split runs the matrix-vector product of a system over two
 * CPUs with lib/wt_mvm_split (the daemon's control.mvm_split): this thread
 * computes the first rows, a worker pinned to another CPU the rest,
 * handed off through spin-waited sequence numbers.
 *
 * --svd times, for the systems listed (L by default), the daemon's build
 * of the control matrix from a modelled interaction matrix next to a bare
 * LAPACKE_dgesdd of the same size (tools/bench_svd.h).
 *
 * The end-to-end part (bench_e2e.c) runs the real wavetrimd per system,
 * driven by the replay driver (replay.c) in this process: lockstep
 * latency frame sent -> command received, against the ZeroMQ round trip
 * of an echo peer with the same sockets and message sizes, and the highest
 * free-running frame rate with no dropped frame.
 */
#include <errno.h>
#include <getopt.h>
#include <limits.h>
#include <math.h>
#include <pthread.h>
#include <sched.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cblas.h>

#include "bench_e2e.h"
#include "bench_stream.h"
#include "bench_svd.h"
#include "bench_util.h"
#include "wt_centroid.h"
#include "wt_clock.h"
#include "wt_config.h"
#include "wt_control.h"
#include "wt_error.h"
#include "wt_geometry.h"
#include "wt_json.h"
#include "wt_mvm.h"
#include "wt_mvm_split.h"

#define BENCH_JSON_MAX (256 * 1024)

/* Controller settings: typical values, they do not change the work done. */
#define CONTROL_GAIN 0.3f
#define CONTROL_LEAK 0.01f
#define CONTROL_SLEW 0.05f

/* STREAM: at least this many passes of each kernel and this much time. */
#define STREAM_MIN_PASSES 10
#define STREAM_BUDGET_NS  (100.0 * WT_NS_PER_MS)

/* The modelled interaction matrix: Gaussian influence of this width in
 * actuator pitches (about 15 % coupling to the next actuator: common
 * practice for continuous-facesheet mirrors), and noise of this fraction
 * of the largest entry. */
#define SVD_SIGMA_PITCHES 0.5
#define SVD_NOISE_REL	  1e-3

/* One reference system. */
struct system_def {
	const char *name;
	int lenslets;  /* across */
	int pixels;    /* per lenslet */
	int actuators; /* across */
	enum wt_layout layout;
	double pupil_pitches; /* actuator pitches across the pupil */
	double margin_pitches;
};

/*
 * S: 16 x 16 lenslets of 16 x 16 px (256 x 256 frame), 12 x 12 actuators
 *    without the corners (140);
 * M: 32 x 32 lenslets of 12 x 12 px (384 x 384), 24 x 24 actuators in a
 *    circle (448);
 * L: 64 x 64 lenslets of 8 x 8 px (512 x 512), 48 x 48 actuators in a
 *    circle (1804).
 * Lenslets: clear circular pupil, a cell kept when half of it is lit.
 */
static const struct system_def systems[] = {
	{"S", 16, 16, 12, WT_LAYOUT_CORNERS, 11.0, 0.0},
	{"M", 32, 12, 24, WT_LAYOUT_CIRCLE, 23.0, 0.5},
	{"L", 64, 8, 48, WT_LAYOUT_CIRCLE, 47.0, 0.5},
};
#define N_SYSTEMS	 ((int)(sizeof(systems) / sizeof(systems[0])))
#define LENSLET_MIN_FILL 0.5

struct options {
	long frames;
	long warmup;
	unsigned systems; /* bit i: systems[i] */
	unsigned split;	  /* bit i: also run systems[i] split over 2 CPUs */
	unsigned svd;	  /* bit i: time the control matrix of systems[i] */
	long svd_runs;
	enum wt_mvm_kind mvm;
	int cpu;	/* -1: the last CPU we may run on */
	int worker_cpu; /* -1: another CPU we may run on */
	unsigned long seed;
	bool json;
	bool sweep;
	unsigned e2e; /* bit i: systems[i] end to end (bench_e2e.c) */
	struct bench_e2e_options e2e_opt;
	char daemon_path[4096];
};

/* The timings of one run of frames: per frame, in ns. */
struct series {
	uint64_t *centroid, *mvm, *control, *total;
	long n;
};

struct result_stage {
	struct stats centroid, mvm, control, total;
};

/* Everything about one system: its set-up and its results. */
struct bench_system {
	const struct system_def *def;
	wt_grid *lenslets, *actuators;
	wt_centroider *centroider;
	wt_control *control; /* no matrix: the controller without MVM */
	wt_control *whole;   /* with the matrix: the whole step */
	wt_mvm *mvm;
	int n_sub, n_slopes, n_act, side;
	uint16_t *frame;
	float *true_dx, *true_dy;
	float *R, *slopes, *flux, *u, *u_single, *cmd;
	uint8_t *valid;

	size_t bytes_pixels, bytes_matrix, bytes_vectors, bytes_read;
	struct bench_stream stream[2]; /* before and after the frames */
	double triad_bytes_per_s;      /* the better of the two */
	double floor_ns;
	double centroid_rms_px;

	struct result_stage single;
	struct stats whole_step;
	long whole_frames;

	bool split_done;
	struct result_stage split;
	double split_max_diff;
	int split_row;
	long split_taken, split_applies; /* worker's rows done here / all */

	bool svd_done;
	struct bench_svd svd;
};

/* ---- small helpers ------------------------------------------------------ */

/* The CPUs this process may run on, highest first in cpus[]. */
static int allowed_cpus(int *cpus, int max)
{
	cpu_set_t set;
	int c, n = 0;

	if (sched_getaffinity(0, sizeof(set), &set) != 0) {
		return 0;
	}
	for (c = CPU_SETSIZE - 1; c >= 0 && n < max; c--) {
		if (CPU_ISSET(c, &set)) {
			cpus[n++] = c;
		}
	}
	return n;
}

/* Median of the gap between two back-to-back clock reads. */
static double clock_overhead_ns(void)
{
	enum { N = 20001 };
	uint64_t *d = malloc(N * sizeof(*d));
	struct stats st;
	int i;

	if (!d) {
		return NAN;
	}
	for (i = 0; i < N; i++) {
		uint64_t t0 = wt_clock_ns();

		d[i] = wt_clock_ns() - t0;
	}
	stats_of(d, N, &st); /* its p50 is the median of an odd count */
	free(d);
	return st.p50;
}

static int series_alloc(struct series *s, long n)
{
	s->n = n;
	s->centroid = calloc((size_t)n, sizeof(uint64_t));
	s->mvm = calloc((size_t)n, sizeof(uint64_t));
	s->control = calloc((size_t)n, sizeof(uint64_t));
	s->total = calloc((size_t)n, sizeof(uint64_t));
	if (!s->centroid || !s->mvm || !s->control || !s->total) {
		return -ENOMEM;
	}
	return 0;
}

static void series_free(struct series *s)
{
	free(s->centroid);
	free(s->mvm);
	free(s->control);
	free(s->total);
}

static void series_stats(struct series *s, struct result_stage *r)
{
	stats_of(s->centroid, s->n, &r->centroid);
	stats_of(s->mvm, s->n, &r->mvm);
	stats_of(s->control, s->n, &r->control);
	stats_of(s->total, s->n, &r->total);
}

/* ---- set-up ------------------------------------------------------------- */

/* One Gaussian spot per valid lenslet, at a random offset within an eighth
 * of the window of its centre; the true offsets are kept. */
static void render_frame(struct bench_system *b, uint64_t *rng)
{
	bench_render_spots(b->frame, b->side, b->lenslets, b->def->pixels, rng,
			   b->true_dx, b->true_dy);
}

static void system_free(struct bench_system *b)
{
	wt_mvm_destroy(b->mvm);
	wt_control_destroy(b->control);
	wt_control_destroy(b->whole);
	wt_centroid_destroy(b->centroider);
	wt_grid_destroy(b->lenslets);
	wt_grid_destroy(b->actuators);
	free(b->frame);
	free(b->true_dx);
	free(b->true_dy);
	free(b->R);
	free(b->slopes);
	free(b->flux);
	free(b->u);
	free(b->u_single);
	free(b->cmd);
	free(b->valid);
	memset(b, 0, sizeof(*b));
}

static int system_setup(struct bench_system *b, const struct system_def *def,
			const struct options *opt, wt_error *err)
{
	wt_centroid_params cp;
	uint64_t rng = opt->seed * 0x100000001b3ull + (uint64_t)def->lenslets;
	size_t n_r, i;
	double sum2 = 0.0;
	int ret, k;

	memset(b, 0, sizeof(*b));
	b->def = def;
	ret = wt_grid_lenslets(def->lenslets, 0.0, LENSLET_MIN_FILL,
			       &b->lenslets, err);
	if (ret < 0) {
		return ret;
	}
	ret = wt_grid_actuators(def->actuators, def->layout, def->pupil_pitches,
				def->margin_pitches, &b->actuators, err);
	if (ret < 0) {
		return ret;
	}
	b->n_sub = b->lenslets->n_valid;
	b->n_slopes = 2 * b->n_sub;
	b->n_act = b->actuators->n_valid;
	b->side = def->lenslets * def->pixels;

	cp.pixels_per_lenslet = def->pixels;
	cp.background = (float)FRAME_BACKGROUND;
	cp.threshold = 10.0f;
	cp.min_flux = 1.0f;
	ret = wt_centroid_create(b->lenslets, &cp, &b->centroider, err);
	if (ret < 0) {
		return ret;
	}
	ret = wt_control_create(b->n_act, b->n_slopes, &b->control, err);
	if (ret < 0) {
		return ret;
	}
	ret = wt_control_create(b->n_act, b->n_slopes, &b->whole, err);
	if (ret < 0) {
		return ret;
	}

	n_r = (size_t)b->n_act * (size_t)b->n_slopes;
	b->frame = malloc((size_t)b->side * b->side * sizeof(*b->frame));
	b->true_dx = malloc((size_t)b->n_sub * sizeof(float));
	b->true_dy = malloc((size_t)b->n_sub * sizeof(float));
	b->R = malloc(n_r * sizeof(*b->R));
	b->slopes = malloc((size_t)b->n_slopes * sizeof(float));
	b->flux = malloc((size_t)b->n_sub * sizeof(float));
	b->valid = malloc((size_t)b->n_sub);
	b->u = malloc((size_t)b->n_act * sizeof(float));
	b->u_single = malloc((size_t)b->n_act * sizeof(float));
	b->cmd = malloc((size_t)b->n_act * sizeof(float));
	if (!b->frame || !b->true_dx || !b->true_dy || !b->R || !b->slopes ||
	    !b->flux || !b->valid || !b->u || !b->u_single || !b->cmd) {
		return wt_error_set(err, -ENOMEM, "%s: out of memory",
				    def->name);
	}
	render_frame(b, &rng);
	/* a control matrix of the right size; its values do not change the
	 * work, only keep u of the order of the slopes */
	for (i = 0; i < n_r; i++) {
		b->R[i] =
			(float)((2.0 * rng_uniform(&rng) - 1.0) / b->n_slopes);
	}

	for (k = 0; k < 2; k++) {
		wt_control *c = k ? b->whole : b->control;

		wt_control_set_gain(c, CONTROL_GAIN);
		wt_control_set_leak(c, CONTROL_LEAK);
		wt_control_set_slew(c, CONTROL_SLEW);
	}
	wt_control_swap_matrix(b->whole, b->R);

	/* the frame is what it should be: every window lit, spots where
	 * they were put */
	ret = wt_centroid_frame(b->centroider, b->frame, b->slopes, b->flux,
				b->valid);
	if (ret != 0) {
		return wt_error_set(err, -EIO,
				    "%s: %d of %d subapertures invalid in the "
				    "synthetic frame",
				    def->name, ret, b->n_sub);
	}
	for (k = 0; k < b->n_sub; k++) {
		double ex = b->slopes[k] - b->true_dx[k];
		double ey = b->slopes[b->n_sub + k] - b->true_dy[k];

		sum2 += ex * ex + ey * ey;
	}
	b->centroid_rms_px = sqrt(sum2 / (2.0 * b->n_sub));

	b->bytes_pixels =
		(size_t)b->n_sub * def->pixels * def->pixels * sizeof(uint16_t);
	b->bytes_matrix = n_r * sizeof(float);
	/* slopes (read by the product), then u, command, lo and hi (read
	 * by the controller) */
	b->bytes_vectors =
		((size_t)b->n_slopes + 4 * (size_t)b->n_act) * sizeof(float);
	b->bytes_read = b->bytes_pixels + b->bytes_matrix + b->bytes_vectors;
	return 0;
}

/* ---- measuring ---------------------------------------------------------- */

/* warm-up frames, then s->n timed frames; sp NULL: single CPU. */
static void run_frames(struct bench_system *b, struct series *s, long warmup,
		       wt_mvm_split *sp)
{
	long f, total = warmup + s->n;

	wt_control_reset(b->control, NULL);
	for (f = 0; f < total; f++) {
		uint64_t t0, t1, t2, t3;

		t0 = wt_clock_ns();
		wt_centroid_frame(b->centroider, b->frame, b->slopes, b->flux,
				  b->valid);
		t1 = wt_clock_ns();
		if (sp) {
			wt_mvm_split_apply(sp, b->R, b->slopes, b->u);
		} else {
			wt_mvm_apply(b->mvm, b->R, b->slopes, b->u);
		}
		t2 = wt_clock_ns();
		wt_control_step(b->control, b->slopes, b->cmd, NULL);
		t3 = wt_clock_ns();
		if (f >= warmup) {
			long i = f - warmup;

			s->centroid[i] = t1 - t0;
			s->mvm[i] = t2 - t1;
			s->control[i] = t3 - t2;
			s->total[i] = t3 - t0;
		}
	}
}

/* The whole wt_control_step, matrix product included (wt_control's own
 * kernel), on the slopes of the frame. */
static void run_whole_step(struct bench_system *b, uint64_t *t, long n,
			   long warmup)
{
	long f;

	wt_control_reset(b->whole, NULL);
	for (f = 0; f < warmup + n; f++) {
		uint64_t t0 = wt_clock_ns();

		wt_control_step(b->whole, b->slopes, b->cmd, NULL);
		if (f >= warmup) {
			t[f - warmup] = wt_clock_ns() - t0;
		}
	}
}

static int system_measure(struct bench_system *b, const struct options *opt,
			  int worker_cpu, wt_error *err)
{
	struct series s;
	uint64_t *t;
	int ret, i;

	ret = wt_mvm_create(b->n_act, b->n_slopes, opt->mvm, &b->mvm, err);
	if (ret < 0) {
		return ret;
	}
	ret = bench_stream_measure(b->bytes_read, STREAM_MIN_PASSES,
				   STREAM_BUDGET_NS, &b->stream[0]);
	if (ret < 0) {
		return wt_error_set(err, ret, "%s: STREAM at %zu bytes: %s",
				    b->def->name, b->bytes_read,
				    wt_strerror(ret));
	}

	ret = series_alloc(&s, opt->frames);
	if (ret < 0) {
		series_free(&s);
		return wt_error_set(err, ret, "out of memory");
	}
	fprintf(stderr, "%s: %ld frames ...\n", b->def->name,
		opt->warmup + opt->frames);
	run_frames(b, &s, opt->warmup, NULL);
	series_stats(&s, &b->single);
	memcpy(b->u_single, b->u, (size_t)b->n_act * sizeof(float));

	/* STREAM again right after the frames; the floor takes the higher
	 * bandwidth (the lower floor), as STREAM keeps its best pass */
	ret = bench_stream_measure(b->bytes_read, STREAM_MIN_PASSES,
				   STREAM_BUDGET_NS, &b->stream[1]);
	if (ret < 0) {
		series_free(&s);
		return wt_error_set(err, ret, "%s: STREAM at %zu bytes: %s",
				    b->def->name, b->bytes_read,
				    wt_strerror(ret));
	}
	b->triad_bytes_per_s = b->stream[0].triad_bytes_per_s;
	if (b->stream[1].triad_bytes_per_s > b->triad_bytes_per_s) {
		b->triad_bytes_per_s = b->stream[1].triad_bytes_per_s;
	}
	b->floor_ns = (double)b->bytes_read / b->triad_bytes_per_s * 1e9;

	/* the whole step: a tenth of the frames is enough for its median */
	b->whole_frames = opt->frames / 10 > 100 ? opt->frames / 10 : 100;
	t = calloc((size_t)b->whole_frames, sizeof(*t));
	if (!t) {
		series_free(&s);
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	run_whole_step(b, t, b->whole_frames, opt->warmup / 10);
	stats_of(t, b->whole_frames, &b->whole_step);
	free(t);

	if ((opt->split & (1u << (b->def - systems))) && worker_cpu >= 0) {
		wt_mvm_split_params sparams = {
			.split_row = -1,
			.cpu = worker_cpu,
			.spin_ns = WT_MVM_SPLIT_SPIN_NS_DEFAULT,
		};
		wt_mvm_split *sp;
		wt_mvm_split_stats sst;

		fprintf(stderr,
			"%s: %ld frames, product split over CPUs "
			"%d and %d ...\n",
			b->def->name, opt->warmup + opt->frames, opt->cpu,
			worker_cpu);
		ret = wt_mvm_split_create(b->mvm, &sparams, &sp, err);
		if (ret < 0) {
			series_free(&s);
			return ret;
		}
		run_frames(b, &s, opt->warmup, sp);
		wt_mvm_split_get_stats(sp, &sst);
		b->split_row = wt_mvm_split_row(sp);
		wt_mvm_split_destroy(sp);
		series_stats(&s, &b->split);
		b->split_done = true;
		b->split_taken = (long)sst.taken;
		b->split_applies = (long)sst.applies;
		b->split_max_diff = 0.0;
		for (i = 0; i < b->n_act; i++) {
			double d = fabs((double)b->u[i] - b->u_single[i]);

			if (!(d <= b->split_max_diff)) {
				b->split_max_diff = d;
			}
		}
	}
	series_free(&s);
	return 0;
}

/* The control matrix from a modelled interaction matrix, as the daemon
 * builds it with its default options, and a bare SVD of it. */
static int system_svd(struct bench_system *b, const struct options *opt,
		      wt_error *err)
{
	wt_config *cfg = NULL;
	double *D;
	int ret;

	D = malloc((size_t)b->n_slopes * b->n_act * sizeof(*D));
	if (!D) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	ret = wt_config_create(&cfg, err);
	if (ret < 0) {
		free(D);
		return ret;
	}
	bench_svd_model(b->lenslets, b->actuators, SVD_SIGMA_PITCHES,
			SVD_NOISE_REL, opt->seed, D);
	fprintf(stderr,
		"%s: control matrix from a %d x %d matrix, %ld runs ...\n",
		b->def->name, b->n_slopes, b->n_act, opt->svd_runs);
	ret = bench_svd_measure(
		D, b->n_slopes, b->n_act, (int)opt->svd_runs,
		(int)wt_config_int(cfg, WT_OPT_CONTROL_MODES),
		wt_config_double(cfg, WT_OPT_CONTROL_MIN_SV_RATIO), &b->svd,
		err);
	b->svd_done = ret == 0;
	wt_config_destroy(cfg);
	free(D);
	return ret;
}

/* ---- output ------------------------------------------------------------- */

static const char *mvm_label(const wt_mvm *m, char *buf, size_t len)
{
	if (wt_mvm_kind_of(m) == WT_MVM_OWN) {
		snprintf(buf, len, "own (%s)",
			 wt_mvm_isa_name(wt_mvm_isa_best()));
	} else {
		snprintf(buf, len, "blas (OpenBLAS %s, 1 thread)",
			 openblas_get_corename());
	}
	return buf;
}

static void print_row(const char *name, const struct stats *st)
{
	printf("  %-26s %9.2f %9.2f %9.2f %9.2f\n", name, st->p50 / 1e3,
	       st->p99 / 1e3, st->p999 / 1e3, st->max / 1e3);
}

static void print_stage(const char *title, const struct result_stage *r,
			double floor_ns)
{
	char name[64];

	printf("  %-26s %9s %9s %9s %9s   (us)\n", title, "p50", "p99", "p99.9",
	       "max");
	print_row("centroid", &r->centroid);
	print_row("mvm", &r->mvm);
	print_row("controller (step - mvm)", &r->control);
	print_row("total", &r->total);
	snprintf(name, sizeof(name), "total / floor");
	printf("  %-26s %9.2f %9.2f %9.2f %9.2f\n", name,
	       r->total.p50 / floor_ns, r->total.p99 / floor_ns,
	       r->total.p999 / floor_ns, r->total.max / floor_ns);
}

static void print_table(struct bench_system *bs, int n,
			const struct options *opt, const double load[2][3],
			int worker_cpu, double clock_ns)
{
	char label[96];
	int i;

	printf("wavetrim-bench: %ld frames per system after %ld warm-up, "
	       "CPU %d, OpenBLAS %s with %d thread(s), own kernel %s\n",
	       opt->frames, opt->warmup, opt->cpu, openblas_get_corename(),
	       openblas_get_num_threads(), wt_mvm_isa_name(wt_mvm_isa_best()));
	printf("load average before %.2f %.2f %.2f, after %.2f %.2f %.2f; "
	       "clock read %.0f ns\n\n",
	       load[0][0], load[0][1], load[0][2], load[1][0], load[1][1],
	       load[1][2], clock_ns);
	for (i = 0; i < n; i++) {
		struct bench_system *b = &bs[i];
		const struct system_def *d = b->def;
		double own_ns, blas_ns;
		int runs;

		printf("%s: %dx%d lenslets x %d px (%dx%d frame), %d valid "
		       "(%d slopes); %dx%d actuators %s, %d valid\n",
		       d->name, d->lenslets, d->lenslets, d->pixels, b->side,
		       b->side, b->n_sub, b->n_slopes, d->actuators,
		       d->actuators, wt_layout_name(d->layout), b->n_act);
		wt_mvm_timing(b->mvm, &own_ns, &blas_ns, &runs);
		printf("  mvm kernel: %s",
		       mvm_label(b->mvm, label, sizeof(label)));
		if (wt_mvm_requested(b->mvm) == WT_MVM_AUTO) {
			printf(", chosen at start: own %.2f us, blas %.2f us "
			       "(medians of %d)\n",
			       own_ns / 1e3, blas_ns / 1e3, runs);
		} else {
			printf(", forced\n");
		}
		printf("  bytes read per frame: pixels %zu + matrix %zu + "
		       "vectors %zu = %zu (%.1f KiB)\n",
		       b->bytes_pixels, b->bytes_matrix, b->bytes_vectors,
		       b->bytes_read, b->bytes_read / 1024.0);
		printf("  STREAM at %.1f KiB (%s), before / after the "
		       "frames (%d / %d passes):\n"
		       "    copy %.1f / %.1f GB/s, triad %.1f / %.1f GB/s -> "
		       "floor %.2f us (best triad)\n",
		       b->stream[0].working_set_bytes / 1024.0,
		       b->stream[0].isa, b->stream[0].passes,
		       b->stream[1].passes, b->stream[0].copy_bytes_per_s / 1e9,
		       b->stream[1].copy_bytes_per_s / 1e9,
		       b->stream[0].triad_bytes_per_s / 1e9,
		       b->stream[1].triad_bytes_per_s / 1e9, b->floor_ns / 1e3);
		printf("  centroid check: rms error %.2g px against the "
		       "rendered offsets\n",
		       b->centroid_rms_px);
		print_stage("one CPU", &b->single, b->floor_ns);
		printf("  %-26s %9.2f %9.2f %9.2f %9.2f   (%ld frames)\n",
		       "wt_control_step, whole", b->whole_step.p50 / 1e3,
		       b->whole_step.p99 / 1e3, b->whole_step.p999 / 1e3,
		       b->whole_step.max / 1e3, b->whole_frames);
		printf("  %-26s %9.2f               (mvm p50 / floor of its "
		       "bytes)\n",
		       "mvm / mvm floor",
		       b->single.mvm.p50 / ((double)(b->bytes_matrix +
						     (size_t)b->n_slopes * 4) /
					    b->triad_bytes_per_s * 1e9));
		if (b->split_done) {
			printf("\n");
			snprintf(label, sizeof(label), "mvm split, CPUs %d+%d",
				 opt->cpu, worker_cpu);
			print_stage(label, &b->split, b->floor_ns);
			printf("  split at row %d; largest difference from "
			       "the one-CPU u: %g; worker's rows taken back "
			       "by this thread in %ld of %ld products\n",
			       b->split_row, b->split_max_diff, b->split_taken,
			       b->split_applies);
		}
		printf("\n");
	}
	for (i = 0; i < n; i++) {
		const struct bench_svd *v = &bs[i].svd;

		if (!bs[i].svd_done) {
			continue;
		}
		printf("%s: control matrix from the %d x %d interaction matrix "
		       "(best of %d, %d BLAS thread(s)):\n"
		       "  bare LAPACKE_dgesdd      %10.1f ms\n"
		       "  daemon: wt_svd_compute   %10.1f ms\n"
		       "          modes + pinv     %10.1f ms   (%d modes kept, "
		       "condition %.3g)\n"
		       "          total            %10.1f ms   %.2f x the bare "
		       "SVD; singular values agree to %.1e of s1\n\n",
		       bs[i].def->name, v->m, v->n, v->runs,
		       openblas_get_num_threads(), v->bare_ns / 1e6,
		       v->svd_ns / 1e6, v->pinv_ns / 1e6, v->kept, v->cond,
		       v->total_ns / 1e6, v->total_ns / v->bare_ns,
		       v->sv_max_rel);
	}
	printf("%-6s %12s %12s %12s %12s %10s %10s\n", "system", "total p50",
	       "total p99", "total max", "floor", "p50/floor", "p99/floor");
	for (i = 0; i < n; i++) {
		struct bench_system *b = &bs[i];

		printf("%-6s %9.2f us %9.2f us %9.2f us %9.2f us %10.2f "
		       "%10.2f\n",
		       b->def->name, b->single.total.p50 / 1e3,
		       b->single.total.p99 / 1e3, b->single.total.max / 1e3,
		       b->floor_ns / 1e3, b->single.total.p50 / b->floor_ns,
		       b->single.total.p99 / b->floor_ns);
	}
}

static void json_stage(wt_json *j, const char *key,
		       const struct result_stage *r, double floor_ns)
{
	wt_json_key(j, key);
	wt_json_object_begin(j);
	json_stats(j, "centroid", &r->centroid);
	json_stats(j, "mvm", &r->mvm);
	json_stats(j, "controller", &r->control);
	json_stats(j, "total", &r->total);
	wt_json_key(j, "total_over_floor");
	wt_json_object_begin(j);
	wt_json_key(j, "p50");
	wt_json_double_prec(j, r->total.p50 / floor_ns, 4);
	wt_json_key(j, "p99");
	wt_json_double_prec(j, r->total.p99 / floor_ns, 4);
	wt_json_key(j, "p99_9");
	wt_json_double_prec(j, r->total.p999 / floor_ns, 4);
	wt_json_key(j, "max");
	wt_json_double_prec(j, r->total.max / floor_ns, 4);
	wt_json_object_end(j);
	wt_json_object_end(j);
}

/* key NULL: an array element */
static void json_stream(wt_json *j, const char *key,
			const struct bench_stream *st)
{
	if (key) {
		wt_json_key(j, key);
	}
	wt_json_object_begin(j);
	wt_json_key(j, "working_set_bytes");
	wt_json_uint(j, st->working_set_bytes);
	wt_json_key(j, "isa");
	wt_json_string(j, st->isa);
	wt_json_key(j, "passes");
	wt_json_int(j, st->passes);
	wt_json_key(j, "copy_gb_s");
	wt_json_double_prec(j, st->copy_bytes_per_s / 1e9, 4);
	wt_json_key(j, "triad_gb_s");
	wt_json_double_prec(j, st->triad_bytes_per_s / 1e9, 4);
	wt_json_object_end(j);
}

static void json_loadavg(wt_json *j, const char *key, const double *l)
{
	wt_json_key(j, key);
	wt_json_double_array(j, l, 3, 3);
}

static int print_json(struct bench_system *bs, int n, const struct options *opt,
		      const double load[2][3], int worker_cpu, double clock_ns,
		      const struct bench_stream *sweep, int n_sweep,
		      const struct bench_e2e_result *e2e, int n_e2e,
		      const double *e2e_compute)
{
	char *buf = malloc(BENCH_JSON_MAX);
	wt_json j;
	int i, len;

	if (!buf) {
		return -ENOMEM;
	}
	wt_json_init(&j, buf, BENCH_JSON_MAX);
	wt_json_object_begin(&j);
	wt_json_key(&j, "tool");
	wt_json_string(&j, "wavetrim-bench");
	wt_json_key(&j, "machine");
	wt_json_object_begin(&j);
	wt_json_key(&j, "cpu");
	wt_json_int(&j, opt->cpu);
	wt_json_key(&j, "worker_cpu");
	wt_json_int(&j, worker_cpu);
	json_loadavg(&j, "loadavg_before", load[0]);
	json_loadavg(&j, "loadavg_after", load[1]);
	wt_json_key(&j, "blas_core");
	wt_json_string(&j, openblas_get_corename());
	wt_json_key(&j, "blas_threads");
	wt_json_int(&j, openblas_get_num_threads());
	wt_json_key(&j, "own_isa");
	wt_json_string(&j, wt_mvm_isa_name(wt_mvm_isa_best()));
	wt_json_key(&j, "clock_read_ns");
	wt_json_double_prec(&j, clock_ns, 4);
	wt_json_object_end(&j);

	wt_json_key(&j, "options");
	wt_json_object_begin(&j);
	wt_json_key(&j, "frames");
	wt_json_int(&j, opt->frames);
	wt_json_key(&j, "warmup");
	wt_json_int(&j, opt->warmup);
	wt_json_key(&j, "mvm");
	wt_json_string(&j, wt_mvm_kind_name(opt->mvm));
	wt_json_key(&j, "seed");
	wt_json_uint(&j, opt->seed);
	wt_json_object_end(&j);

	wt_json_key(&j, "systems");
	wt_json_array_begin(&j);
	for (i = 0; i < n; i++) {
		struct bench_system *b = &bs[i];
		const struct system_def *d = b->def;
		double own_ns, blas_ns;
		int runs;

		wt_json_object_begin(&j);
		wt_json_key(&j, "name");
		wt_json_string(&j, d->name);
		wt_json_key(&j, "lenslets");
		wt_json_int(&j, d->lenslets);
		wt_json_key(&j, "pixels_per_lenslet");
		wt_json_int(&j, d->pixels);
		wt_json_key(&j, "frame_side");
		wt_json_int(&j, b->side);
		wt_json_key(&j, "subapertures");
		wt_json_int(&j, b->n_sub);
		wt_json_key(&j, "slopes");
		wt_json_int(&j, b->n_slopes);
		wt_json_key(&j, "actuator_grid");
		wt_json_int(&j, d->actuators);
		wt_json_key(&j, "actuator_layout");
		wt_json_string(&j, wt_layout_name(d->layout));
		wt_json_key(&j, "actuators");
		wt_json_int(&j, b->n_act);

		wt_json_key(&j, "mvm_kernel");
		wt_json_object_begin(&j);
		wt_json_key(&j, "requested");
		wt_json_string(&j, wt_mvm_kind_name(wt_mvm_requested(b->mvm)));
		wt_json_key(&j, "used");
		wt_json_string(&j, wt_mvm_kind_name(wt_mvm_kind_of(b->mvm)));
		wt_json_key(&j, "own_isa");
		wt_json_string(&j, wt_mvm_isa_name(wt_mvm_isa_best()));
		wt_mvm_timing(b->mvm, &own_ns, &blas_ns, &runs);
		wt_json_key(&j, "select_own_ns");
		wt_json_double_prec(&j, own_ns, 6);
		wt_json_key(&j, "select_blas_ns");
		wt_json_double_prec(&j, blas_ns, 6);
		wt_json_key(&j, "select_runs");
		wt_json_int(&j, runs);
		wt_json_object_end(&j);

		wt_json_key(&j, "bytes_read");
		wt_json_object_begin(&j);
		wt_json_key(&j, "pixels");
		wt_json_uint(&j, b->bytes_pixels);
		wt_json_key(&j, "matrix");
		wt_json_uint(&j, b->bytes_matrix);
		wt_json_key(&j, "vectors");
		wt_json_uint(&j, b->bytes_vectors);
		wt_json_key(&j, "total");
		wt_json_uint(&j, b->bytes_read);
		wt_json_object_end(&j);

		json_stream(&j, "stream_before", &b->stream[0]);
		json_stream(&j, "stream_after", &b->stream[1]);
		wt_json_key(&j, "triad_gb_s_used");
		wt_json_double_prec(&j, b->triad_bytes_per_s / 1e9, 4);
		wt_json_key(&j, "floor_ns");
		wt_json_double_prec(&j, b->floor_ns, 6);
		wt_json_key(&j, "floor_basis");
		wt_json_string(&j, "triad");
		wt_json_key(&j, "centroid_rms_error_px");
		wt_json_double_prec(&j, b->centroid_rms_px, 4);

		json_stage(&j, "one_cpu", &b->single, b->floor_ns);
		wt_json_key(&j, "whole_step");
		wt_json_object_begin(&j);
		wt_json_key(&j, "frames");
		wt_json_int(&j, b->whole_frames);
		json_stats(&j, "step", &b->whole_step);
		wt_json_object_end(&j);
		if (b->split_done) {
			wt_json_key(&j, "split");
			wt_json_object_begin(&j);
			wt_json_key(&j, "worker_cpu");
			wt_json_int(&j, worker_cpu);
			wt_json_key(&j, "split_row");
			wt_json_int(&j, b->split_row);
			wt_json_key(&j, "split_taken_back");
			wt_json_int(&j, b->split_taken);
			wt_json_key(&j, "max_diff_from_one_cpu");
			wt_json_double(&j, b->split_max_diff);
			json_stage(&j, "timing", &b->split, b->floor_ns);
			wt_json_object_end(&j);
		}
		if (b->svd_done) {
			wt_json_key(&j, "control_matrix");
			wt_json_object_begin(&j);
			wt_json_key(&j, "rows");
			wt_json_int(&j, b->svd.m);
			wt_json_key(&j, "cols");
			wt_json_int(&j, b->svd.n);
			wt_json_key(&j, "runs");
			wt_json_int(&j, b->svd.runs);
			wt_json_key(&j, "bare_dgesdd_ns");
			wt_json_double_prec(&j, b->svd.bare_ns, 6);
			wt_json_key(&j, "svd_ns");
			wt_json_double_prec(&j, b->svd.svd_ns, 6);
			wt_json_key(&j, "pinv_ns");
			wt_json_double_prec(&j, b->svd.pinv_ns, 6);
			wt_json_key(&j, "total_ns");
			wt_json_double_prec(&j, b->svd.total_ns, 6);
			wt_json_key(&j, "total_over_bare");
			wt_json_double_prec(
				&j, b->svd.total_ns / b->svd.bare_ns, 4);
			wt_json_key(&j, "modes_kept");
			wt_json_int(&j, b->svd.kept);
			wt_json_key(&j, "condition");
			wt_json_double_prec(&j, b->svd.cond, 6);
			wt_json_key(&j, "sv_max_rel_diff");
			wt_json_double(&j, b->svd.sv_max_rel);
			wt_json_object_end(&j);
		}
		wt_json_object_end(&j);
	}
	wt_json_array_end(&j);
	if (n_sweep > 0) {
		wt_json_key(&j, "stream_sweep");
		wt_json_array_begin(&j);
		for (i = 0; i < n_sweep; i++) {
			json_stream(&j, NULL, &sweep[i]);
		}
		wt_json_array_end(&j);
	}
	if (n_e2e > 0) {
		bench_e2e_json(&j, e2e, n_e2e, e2e_compute, &opt->e2e_opt);
	}
	wt_json_object_end(&j);
	len = wt_json_finish(&j);
	if (len < 0) {
		free(buf);
		return len;
	}
	fputs(buf, stdout);
	fputc('\n', stdout);
	free(buf);
	return 0;
}

/* ---- command line ------------------------------------------------------- */

static void usage(FILE *out)
{
	fprintf(out,
		"usage: wavetrim-bench [OPTIONS]\n"
		"\n"
		"Times the loop's per-frame computation (centroid, u = R s, "
		"controller) on\nsynthetic frames and compares it with the "
		"memory floor (bytes read / STREAM\ntriad bandwidth at the "
		"working-set size).\n"
		"\n"
		"options:\n"
		"  -n, --frames N       timed frames per system (default "
		"10000)\n"
		"  -w, --warmup N       frames run first and discarded "
		"(default 500)\n"
		"  -s, --systems LIST   some of S,M,L (default S,M,L)\n"
		"  -m, --mvm KIND       auto, own or blas (default auto: "
		"time both, keep the faster)\n"
		"      --split LIST     systems whose product is also run "
		"split over two CPUs\n"
		"                       (default L; none for none)\n"
		"      --svd LIST       systems whose control-matrix build is\n"
		"                       timed against a bare LAPACKE_dgesdd\n"
		"                       (default L; none to skip)\n"
		"      --svd-runs N     runs of each, the fastest kept "
		"(default 2)\n"
		"  -c, --cpu N          CPU to pin to (default: the last one "
		"allowed)\n"
		"      --worker-cpu N   CPU of the split worker (default: "
		"another allowed one)\n"
		"      --seed N         seed of the synthetic frame and "
		"matrix (default 1)\n"
		"      --sweep          also print STREAM copy/triad from "
		"16 KiB to 256 MiB\n"
		"      --json           one JSON object instead of the "
		"tables\n"
		"\n"
		"end to end (the real wavetrimd, driven by the replay "
		"driver over ipc):\n"
		"      --e2e LIST       systems run end to end (default "
		"S,M,L; none for none)\n"
		"      --e2e-frames N   lockstep frames timed, e2e and "
		"ZeroMQ floor (default 10000)\n"
		"      --e2e-warmup N   lockstep frames first, not timed "
		"(default 500)\n"
		"      --rates LIST     free-running rates in Hz, rising "
		"(default\n"
		"                       2000,5000,10000,15000,20000,30000,"
		"50000)\n"
		"      --rate-frames N  frames at each rate (default "
		"100000)\n"
		"      --load           a busy thread on the replay's CPU "
		"meanwhile\n"
		"      --daemon PATH    wavetrimd (default: "
		"../daemon/wavetrimd from this program)\n"
		"      --replay-cpu N   CPU of the replay (default: another "
		"than --cpu, which\n"
		"                       the daemon's loop thread gets)\n"
		"      --rt-priority N  the daemon's daemon.realtime_priority "
		"(SCHED_FIFO;\n"
		"                       default 0: normal scheduling)\n"
		"      --driver-rt-priority N\n"
		"                       SCHED_FIFO of the replay driver and "
		"its "
		"ZeroMQ threads\n"
		"                       (default 0; --load stays normal)\n"
		"      --busy-poll      daemon.busy_poll = true\n"
		"  -h, --help           this text\n");
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

/* "S,M,L" into a bit set; "none" is the empty set. */
static int parse_systems(const char *s, unsigned *out)
{
	char buf[64], *tok, *save = NULL;
	unsigned set = 0;
	int i;

	if (strcmp(s, "none") == 0) {
		*out = 0;
		return 0;
	}
	if (strlen(s) >= sizeof(buf)) {
		return -EINVAL;
	}
	strcpy(buf, s);
	for (tok = strtok_r(buf, ",", &save); tok;
	     tok = strtok_r(NULL, ",", &save)) {
		for (i = 0; i < N_SYSTEMS; i++) {
			if (strcmp(tok, systems[i].name) == 0) {
				break;
			}
		}
		if (i == N_SYSTEMS) {
			return -EINVAL;
		}
		set |= 1u << i;
	}
	if (!set) {
		return -EINVAL;
	}
	*out = set;
	return 0;
}

enum {
	OPT_SPLIT = 256,
	OPT_WORKER_CPU,
	OPT_SEED,
	OPT_SWEEP,
	OPT_JSON,
	OPT_SVD,
	OPT_SVD_RUNS,
	OPT_E2E,
	OPT_E2E_FRAMES,
	OPT_E2E_WARMUP,
	OPT_RATES,
	OPT_RATE_FRAMES,
	OPT_LOAD,
	OPT_DAEMON,
	OPT_REPLAY_CPU,
	OPT_DRIVER_RT_PRIORITY,
	OPT_BUSY_POLL,
	OPT_RT_PRIORITY
};

/* ---- end to end: options and the run (bench_e2e.c) ---------------------- */

static void e2e_defaults(struct options *opt)
{
	static const double rates[] = {2000,  5000,  10000, 15000,
				       20000, 30000, 50000};
	struct bench_e2e_options *e = &opt->e2e_opt;
	size_t i;

	opt->e2e = (1u << N_SYSTEMS) - 1;
	memset(e, 0, sizeof(*e));
	e->frames = 10000;
	e->warmup = 500;
	e->rate_frames = 100000;
	for (i = 0; i < sizeof(rates) / sizeof(rates[0]); i++) {
		e->rates_hz[e->n_rates++] = rates[i];
	}
	e->daemon_cpu = -1;
	e->replay_cpu = -1;
	e->timeout_ms = 1000;
	opt->daemon_path[0] = '\0';
}

/* "2000,5000,..." in Hz, rising. */
static int parse_rates(const char *s, struct bench_e2e_options *e)
{
	const char *p = s;
	int n = 0;

	while (*p) {
		char *end;
		double v;

		errno = 0;
		v = strtod(p, &end);
		if (errno || end == p || !(v > 0.0 && v <= 1e6) ||
		    n == E2E_RATES_MAX || (n > 0 && v <= e->rates_hz[n - 1]) ||
		    (*end != ',' && *end != '\0')) {
			return -EINVAL;
		}
		e->rates_hz[n++] = v;
		p = *end ? end + 1 : end;
	}
	if (n == 0) {
		return -EINVAL;
	}
	e->n_rates = n;
	return 0;
}

static int parse_e2e_option(int c, const char *arg, struct options *opt)
{
	struct bench_e2e_options *e = &opt->e2e_opt;
	long v;

	switch (c) {
	case OPT_E2E:
		if (parse_systems(arg, &opt->e2e)) {
			fprintf(stderr, "--e2e: a list of S, M, L, or none\n");
			return -EINVAL;
		}
		return 0;
	case OPT_E2E_FRAMES:
	case OPT_E2E_WARMUP:
	case OPT_RATE_FRAMES:
		if (parse_long(arg, c == OPT_E2E_WARMUP ? 0 : 1, 10000000,
			       &v)) {
			fprintf(stderr, "--e2e-frames, --e2e-warmup, "
					"--rate-frames: 0 .. 1e7\n");
			return -EINVAL;
		}
		*(c == OPT_E2E_FRAMES	? &e->frames
		  : c == OPT_E2E_WARMUP ? &e->warmup
					: &e->rate_frames) = v;
		return 0;
	case OPT_RATES:
		if (parse_rates(arg, e)) {
			fprintf(stderr,
				"--rates: up to %d rising rates in "
				"Hz, (0, 1e6], separated by commas\n",
				E2E_RATES_MAX);
			return -EINVAL;
		}
		return 0;
	case OPT_LOAD:
		e->load = true;
		return 0;
	case OPT_DAEMON:
		if (strlen(arg) >= sizeof(opt->daemon_path)) {
			fprintf(stderr, "--daemon: path too long\n");
			return -EINVAL;
		}
		strcpy(opt->daemon_path, arg);
		return 0;
	case OPT_REPLAY_CPU:
		if (parse_long(arg, 0, CPU_SETSIZE - 1, &v)) {
			fprintf(stderr, "--replay-cpu: a CPU number\n");
			return -EINVAL;
		}
		e->replay_cpu = (int)v;
		return 0;
	case OPT_RT_PRIORITY:
	case OPT_DRIVER_RT_PRIORITY:
		if (parse_long(arg, 0, 99, &v)) {
			fprintf(stderr, "--%srt-priority: 0 .. 99\n",
				c == OPT_RT_PRIORITY ? "" : "driver-");
			return -EINVAL;
		}
		*(c == OPT_RT_PRIORITY ? &e->rt_priority
				       : &e->driver_rt_priority) = (int)v;
		return 0;
	case OPT_BUSY_POLL:
		e->busy_poll = true;
		return 0;
	}
	return -EINVAL;
}

/* wavetrimd beside this program's build folder: ../daemon/wavetrimd. */
static int find_daemon(struct options *opt)
{
	char exe[4096], *slash;
	ssize_t n;

	if (opt->daemon_path[0]) {
		return access(opt->daemon_path, X_OK) == 0 ? 0 : -errno;
	}
	n = readlink("/proc/self/exe", exe, sizeof(exe) - 1);
	if (n <= 0) {
		return -ENOENT;
	}
	exe[n] = '\0';
	slash = strrchr(exe, '/');
	if (!slash) {
		return -ENOENT;
	}
	*slash = '\0';
	if ((size_t)snprintf(opt->daemon_path, sizeof(opt->daemon_path),
			     "%s/../daemon/wavetrimd",
			     exe) >= sizeof(opt->daemon_path)) {
		return -ENAMETOOLONG;
	}
	return access(opt->daemon_path, X_OK) == 0 ? 0 : -errno;
}

/* Every system of opt->e2e end to end; the compute part's total p50 of
 * the same system (NaN if it was not measured) into compute_p50[]. */
static int run_e2e(struct bench_system *bs, int n, struct options *opt,
		   const int *cpus, int n_cpus, struct bench_e2e_result *res,
		   double *compute_p50)
{
	struct bench_e2e_options *e = &opt->e2e_opt;
	int i, k, m = 0, ret;

	ret = find_daemon(opt);
	if (ret < 0) {
		fprintf(stderr,
			"wavetrimd not found at %s (%s): build it, give "
			"--daemon PATH, or --e2e none\n",
			opt->daemon_path, strerror(-ret));
		return ret;
	}
	e->daemon_path = opt->daemon_path;
	e->daemon_cpu = opt->cpu;
	e->seed = opt->seed;
	for (i = 0; e->replay_cpu < 0 && i < n_cpus; i++) {
		if (cpus[i] != opt->cpu) {
			e->replay_cpu = cpus[i];
		}
	}
	if (e->replay_cpu < 0) {
		e->replay_cpu = opt->cpu; /* one CPU: both on it */
	}
	for (i = 0; i < N_SYSTEMS; i++) {
		const struct system_def *d = &systems[i];
		struct bench_geometry g = {d->name,	     d->lenslets,
					   d->pixels,	     d->actuators,
					   d->layout,	     d->pupil_pitches,
					   d->margin_pitches};

		if (!(opt->e2e & (1u << i))) {
			continue;
		}
		compute_p50[m] = NAN;
		for (k = 0; k < n; k++) {
			if (bs[k].def == d) {
				compute_p50[m] = bs[k].single.total.p50;
			}
		}
		if (bench_e2e_run(&g, e, &res[m]) < 0) {
			fprintf(stderr, "%s end to end: %s\n", d->name,
				res[m].error);
		}
		m++;
	}
	return m;
}

static int parse_args(int argc, char **argv, struct options *opt)
{
	static const struct option longopts[] = {
		{"frames", required_argument, NULL, 'n'},
		{"warmup", required_argument, NULL, 'w'},
		{"systems", required_argument, NULL, 's'},
		{"mvm", required_argument, NULL, 'm'},
		{"split", required_argument, NULL, OPT_SPLIT},
		{"svd", required_argument, NULL, OPT_SVD},
		{"svd-runs", required_argument, NULL, OPT_SVD_RUNS},
		{"cpu", required_argument, NULL, 'c'},
		{"worker-cpu", required_argument, NULL, OPT_WORKER_CPU},
		{"seed", required_argument, NULL, OPT_SEED},
		{"sweep", no_argument, NULL, OPT_SWEEP},
		{"json", no_argument, NULL, OPT_JSON},
		{"e2e", required_argument, NULL, OPT_E2E},
		{"e2e-frames", required_argument, NULL, OPT_E2E_FRAMES},
		{"e2e-warmup", required_argument, NULL, OPT_E2E_WARMUP},
		{"rates", required_argument, NULL, OPT_RATES},
		{"rate-frames", required_argument, NULL, OPT_RATE_FRAMES},
		{"load", no_argument, NULL, OPT_LOAD},
		{"daemon", required_argument, NULL, OPT_DAEMON},
		{"replay-cpu", required_argument, NULL, OPT_REPLAY_CPU},
		{"rt-priority", required_argument, NULL, OPT_RT_PRIORITY},
		{"driver-rt-priority", required_argument, NULL,
		 OPT_DRIVER_RT_PRIORITY},
		{"busy-poll", no_argument, NULL, OPT_BUSY_POLL},
		{"help", no_argument, NULL, 'h'},
		{NULL, 0, NULL, 0},
	};
	long v;
	int c;

	opt->frames = 10000;
	opt->warmup = 500;
	opt->systems = (1u << N_SYSTEMS) - 1;
	opt->split = 1u << 2; /* L */
	opt->svd = 1u << 2;   /* L */
	opt->svd_runs = 2;
	opt->mvm = WT_MVM_AUTO;
	opt->cpu = -1;
	opt->worker_cpu = -1;
	opt->seed = 1;
	opt->json = false;
	opt->sweep = false;
	e2e_defaults(opt);
	while ((c = getopt_long(argc, argv, "n:w:s:m:c:h", longopts, NULL)) !=
	       -1) {
		switch (c) {
		case 'n':
			if (parse_long(optarg, 1, 100000000, &opt->frames)) {
				fprintf(stderr, "--frames: 1 .. 1e8\n");
				return -EINVAL;
			}
			break;
		case 'w':
			if (parse_long(optarg, 0, 100000000, &opt->warmup)) {
				fprintf(stderr, "--warmup: 0 .. 1e8\n");
				return -EINVAL;
			}
			break;
		case 's':
			if (parse_systems(optarg, &opt->systems)) {
				fprintf(stderr, "--systems: a list of S, M, "
						"L separated by commas\n");
				return -EINVAL;
			}
			break;
		case OPT_SPLIT:
			if (parse_systems(optarg, &opt->split)) {
				fprintf(stderr, "--split: a list of S, M, L, "
						"or none\n");
				return -EINVAL;
			}
			break;
		case OPT_SVD:
			if (parse_systems(optarg, &opt->svd)) {
				fprintf(stderr, "--svd: a list of S, M, L, "
						"or none\n");
				return -EINVAL;
			}
			break;
		case OPT_SVD_RUNS:
			if (parse_long(optarg, 1, 100, &opt->svd_runs)) {
				fprintf(stderr, "--svd-runs: 1 .. 100\n");
				return -EINVAL;
			}
			break;
		case 'm':
			if (wt_mvm_kind_parse(optarg, &opt->mvm)) {
				fprintf(stderr, "--mvm: auto, own or blas\n");
				return -EINVAL;
			}
			break;
		case 'c':
		case OPT_WORKER_CPU:
			if (parse_long(optarg, 0, CPU_SETSIZE - 1, &v)) {
				fprintf(stderr, "CPU number expected\n");
				return -EINVAL;
			}
			*(c == 'c' ? &opt->cpu : &opt->worker_cpu) = (int)v;
			break;
		case OPT_SEED:
			if (parse_long(optarg, 0, LONG_MAX, &v)) {
				fprintf(stderr, "--seed: a number >= 0\n");
				return -EINVAL;
			}
			opt->seed = (unsigned long)v;
			break;
		case OPT_SWEEP:
			opt->sweep = true;
			break;
		case OPT_JSON:
			opt->json = true;
			break;
		case 'h':
			usage(stdout);
			exit(0);
		default:
			if (c >= OPT_E2E && c <= OPT_RT_PRIORITY) {
				if (parse_e2e_option(c, optarg, opt) < 0) {
					return -EINVAL;
				}
				break;
			}
			usage(stderr);
			return -EINVAL;
		}
	}
	if (optind < argc) {
		fprintf(stderr, "unexpected argument '%s'\n", argv[optind]);
		return -EINVAL;
	}
	return 0;
}

static void read_loadavg(double l[3])
{
	if (getloadavg(l, 3) != 3) {
		l[0] = l[1] = l[2] = NAN;
	}
}

#define SWEEP_MAX 16

int main(int argc, char **argv)
{
	struct bench_system bs[N_SYSTEMS];
	struct bench_stream sweep[SWEEP_MAX];
	struct bench_e2e_result e2e[N_SYSTEMS];
	double e2e_compute[N_SYSTEMS];
	int n_e2e = 0;
	struct options opt;
	double load[2][3], clock_ns;
	int cpus[CPU_SETSIZE < 1024 ? CPU_SETSIZE : 1024];
	int n_cpus, worker_cpu = -1, n = 0, n_sweep = 0, i, ret, status = 1;
	wt_error err;

	memset(bs, 0, sizeof(bs));
	if (parse_args(argc, argv, &opt) < 0) {
		return 2;
	}
	n_cpus = allowed_cpus(cpus, (int)(sizeof(cpus) / sizeof(cpus[0])));
	if (n_cpus < 1) {
		fprintf(stderr, "cannot read the CPUs allowed\n");
		return 1;
	}
	if (opt.cpu < 0) {
		opt.cpu = cpus[0];
	}
	if (opt.split) {
		worker_cpu = opt.worker_cpu >= 0
				     ? opt.worker_cpu
				     : wt_mvm_split_other_cpu(opt.cpu);
		if (worker_cpu < 0 || worker_cpu == opt.cpu) {
			fprintf(stderr, "no second CPU: the split is not "
					"run\n");
			worker_cpu = -1;
		}
	}
	ret = pin_thread(pthread_self(), opt.cpu);
	if (ret < 0) {
		fprintf(stderr, "cannot pin to CPU %d: %s\n", opt.cpu,
			strerror(-ret));
		return 1;
	}
	/* one BLAS thread: OpenBLAS threads would fight the loop thread */
	openblas_set_num_threads(1);
	read_loadavg(load[0]);
	clock_ns = clock_overhead_ns();

	for (i = 0; i < N_SYSTEMS; i++) {
		if (!(opt.systems & (1u << i))) {
			continue;
		}
		ret = system_setup(&bs[n], &systems[i], &opt, &err);
		if (ret == 0) {
			ret = system_measure(&bs[n], &opt, worker_cpu, &err);
		}
		if (ret == 0 && (opt.svd & (1u << i))) {
			ret = system_svd(&bs[n], &opt, &err);
		}
		if (ret < 0) {
			fprintf(stderr, "%s: %s\n", systems[i].name, err.msg);
			n++;
			goto out;
		}
		/* the big buffers go now, the results stay */
		free(bs[n].R);
		bs[n].R = NULL;
		wt_control_swap_matrix(bs[n].whole, NULL);
		n++;
	}
	if (opt.e2e) {
		n_e2e = run_e2e(bs, n, &opt, cpus, n_cpus, e2e, e2e_compute);
		if (n_e2e < 0) {
			n_e2e = 0;
			goto out;
		}
	}
	if (opt.sweep) {
		size_t ws;

		fprintf(stderr, "STREAM sweep ...\n");
		for (ws = (size_t)16 << 10;
		     ws <= (size_t)256 << 20 && n_sweep < SWEEP_MAX; ws *= 2) {
			ret = bench_stream_measure(ws, STREAM_MIN_PASSES,
						   STREAM_BUDGET_NS / 2,
						   &sweep[n_sweep]);
			if (ret < 0) {
				fprintf(stderr, "STREAM at %zu bytes: %s\n", ws,
					strerror(-ret));
				goto out;
			}
			n_sweep++;
		}
	}
	read_loadavg(load[1]);

	if (opt.json) {
		if (print_json(bs, n, &opt, (const double(*)[3])load,
			       worker_cpu, clock_ns, sweep, n_sweep, e2e, n_e2e,
			       e2e_compute) < 0) {
			fprintf(stderr, "JSON output too large\n");
			goto out;
		}
	} else {
		print_table(bs, n, &opt, (const double(*)[3])load, worker_cpu,
			    clock_ns);
		if (n_e2e > 0) {
			bench_e2e_print(e2e, n_e2e, e2e_compute, &opt.e2e_opt);
		}
		if (n_sweep > 0) {
			printf("\nSTREAM (%s) by working set:\n%12s %10s "
			       "%10s\n",
			       sweep[0].isa, "KiB", "copy GB/s", "triad GB/s");
			for (i = 0; i < n_sweep; i++) {
				printf("%12.0f %10.1f %10.1f\n",
				       sweep[i].working_set_bytes / 1024.0,
				       sweep[i].copy_bytes_per_s / 1e9,
				       sweep[i].triad_bytes_per_s / 1e9);
			}
		}
	}
	status = 0;
	for (i = 0; i < n_e2e; i++) {
		status |= !e2e[i].done; /* said on stderr and in the output */
	}
out:
	for (i = 0; i < n; i++) {
		system_free(&bs[i]);
	}
	return status;
}
