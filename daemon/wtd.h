/*
 * wtd.h - wavetrimd's state shared by main and its three threads.
 *
 * Threads and what each owns (DESIGN.md, "Threads inside wavetrimd"):
 *
 *   loop       the driver sockets (frames PULL, commands PUSH), the
 *              centroider, the controller, the calibrator and every
 *              per-frame buffer.  Never allocates, never blocks on anything
 *              but zmq_poll of the frames socket (10 ms slices), never
 *              formats text: it sets counters (atomics below) and pushes
 *              fixed-size records (frames and events) into `ring`.
 *   control    the REP socket, the running wt_config, the calibration
 *              master copies (interaction matrix, SVD, control matrix,
 *              reference, flat), all HDF5 work (save/load: HDF5 is not
 *              thread-safe, so it lives in this one thread) and the SVD.
 *              It hands changes to the loop through `mb`, one at a time,
 *              and waits for the loop to apply them between two frames.
 *   telemetry  the PUB socket: drains `ring`, publishes frames, events and
 *              status, computes the per-period statistics, and publishes
 *              the control thread's events (queued in `evq`).
 *
 * Pointers handed to the loop through the mailbox (control matrix,
 * reference slopes, flat) are owned by the control thread and immutable
 * while installed; the loop hands the previous pointer back in the same
 * mailbox exchange and the control thread frees it.
 */
#ifndef WTD_H
#define WTD_H

#include <pthread.h>
#include <stdatomic.h>
#include <stdbool.h>
#include <stdint.h>

#include "wt_calib.h"
#include "wt_config.h"
#include "wt_error.h"
#include "wt_geometry.h"
#include "wt_json.h"
#include "wt_log.h"
#include "wt_request.h"
#include "wt_ring.h"
#include "wt_secure.h"
#include "wt_store.h"

/** zmq_poll slice of the loop thread: how quickly it notices the mailbox,
 * the stop flag and driver silence when no frame comes. */
#define WTD_POLL_MS 10
/* Stopping: frames answered with the flat after it went out (loop.c). */
#define WTD_STOP_DRAIN_MS     50
#define WTD_STOP_DRAIN_FRAMES 20

/* Queue length of the frames and commands links (ZMQ_RCVHWM, ZMQ_SNDHWM). */
#define WTD_LINK_HWM 4

/*
 * Command buffers the loop sends from in turn, without copying.  libzmq
 * holds at most WTD_LINK_HWM queued commands plus the one its I/O thread is
 * writing, so a buffer is free again long before its turn comes back.
 */
#define WTD_SEND_BUFFERS (2 * WTD_LINK_HWM)

/** Telemetry ring capacity in records (a power of two). */
#define WTD_RING_RECORDS 1024

/** Events the loop pushes (numbers only; telemetry.c names them). */
enum wtd_ev {
	WTD_EV_STATE = 1,	 /* a from, b to, n why */
	WTD_EV_FAULT,		 /* a reason, n count */
	WTD_EV_CALIB_STARTED,	 /* a kind, n frames */
	WTD_EV_CALIB_DONE,	 /* a kind */
	WTD_EV_CALIB_ABORTED,	 /* a kind, b why */
	WTD_EV_MATRIX_INSTALLED, /* a modes, x condition */
	WTD_EV_REFERENCE_INSTALLED,
	WTD_EV_FLAT_CHANGED,
	WTD_EV_DRIVER, /* a what, n id */
	WTD_EV_STOPPING,
};

enum wtd_why {
	WTD_WHY_REQUEST,
	WTD_WHY_CALIB_DONE,
	WTD_WHY_FAULT,
	WTD_WHY_START
};
enum wtd_fault {
	WTD_FAULT_NONE,
	WTD_FAULT_SILENT,
	WTD_FAULT_BAD,
	WTD_FAULT_STALE
};
enum wtd_abort { WTD_ABORT_REQUEST, WTD_ABORT_FAULT };
enum wtd_driver { WTD_DRIVER_FIRST, WTD_DRIVER_RESYNC };

/** One event record. */
struct wtd_event {
	uint32_t code;
	int32_t a, b;
	uint32_t pad;
	uint64_t t_ns;
	uint64_t frame; /* UINT64_MAX: no frame yet */
	int64_t n;
	double x;
};

enum { WTD_SLOT_FRAME = 1, WTD_SLOT_EVENT = 2 };

/** has_arrays bits of a frame slot: published on "frame " (one in
 * daemon.frame_decimation), and for a recording or capture (every frame
 * while d->want_arrays > 0). */
enum { WTD_ARRAYS_PUBLISH = 1, WTD_ARRAYS_RECORD = 2 };

/** A ring record: a frame (header, then 3N + A floats when has_arrays)
 * or an event. */
struct wtd_slot {
	uint32_t type;
	uint32_t has_arrays;
	struct wtd_event ev;
	wt_frame_record fr;
};

/** An image slot (ring `image_ring`): the frame's pixels follow, as the
 * driver sent them (frame_side x frame_side uint16). */
struct wtd_image_slot {
	uint64_t frame_id, recv_ns;
	uint32_t state, pad;
};

/** Image slots: the loop skips an image while both are taken. */
#define WTD_IMAGE_SLOTS 2

/** Refusal reasons of wt_proto_decode(), WT_EPROTO_SHORT .. LENGTH. */
#define WTD_N_REFUSED (WT_EPROTO_LENGTH - WT_EPROTO_SHORT + 1)

/** Counters and state the loop publishes (single writer: the loop). */
struct wtd_counters {
	atomic_ullong received, answered, dropped, stale, refused, bad_dims,
		wrong_kind, rejected, clipped_frames, send_failed, tm_dropped,
		faults, duplicates, saturated_frames, saturated_subaps,
		dark_frames;
	atomic_ullong refused_by[WTD_N_REFUSED];
	atomic_ullong last_frame;    /* valid when have_frame */
	atomic_ullong last_frame_ns; /* CLOCK_MONOTONIC of its receipt */
	atomic_bool have_frame;
	atomic_int state, fault;
	atomic_int last_clipped, last_invalid;
	atomic_int calib_kind; /* run in progress */
	atomic_long calib_done, calib_total;
	atomic_int calib_ready; /* finished run waiting for control */
	atomic_int modes;	/* of the installed matrix */
	atomic_bool have_matrix;
};

/** Mailbox messages, control -> loop. */
enum wtd_mb {
	WTD_MB_STATE = 1,    /* i: target state (open, closed, held) */
	WTD_MB_FLAT,	     /* back to the flat */
	WTD_MB_FLAT_CAPTURE, /* out: new flat buffer, filled by the loop */
	WTD_MB_CALIBRATE,    /* i: kind, cp */
	WTD_MB_GAIN,	     /* d[0] */
	WTD_MB_LEAK,	     /* d[0] */
	WTD_MB_LIMITS,	     /* d[0] low, d[1] high */
	WTD_MB_SLEW,	     /* d[0] */
	WTD_MB_LEVELS,	     /* d[0] background, d[1] threshold, d[2] min */
	WTD_MB_TIMEOUT,	     /* i: ms */
	WTD_MB_SAFETY,	     /* i: 1 = hold, i2: max bad frames */
	WTD_MB_DECIMATION,   /* i */
	WTD_MB_INSTALL,	     /* matrix (i modes, d[0] condition), reference,
			      * flat: NULL keeps the installed one */
	WTD_MB_OFFSET,	     /* offset: new offset slopes (NULL = none) */
	WTD_MB_SHAPE,	     /* command: held from now (from open or held) */
};

struct wtd_mb_msg {
	int type;
	int i, i2;
	double d[3];
	const float *matrix, *reference, *flat;
	float *out;
	wt_calib_params cp;
	const float *offset;  /* WTD_MB_OFFSET, control-owned like reference */
	const float *command; /* WTD_MB_SHAPE, copied by the loop */
};

struct wtd_mailbox {
	atomic_uint posted; /* sequence of the message in msg */
	atomic_uint done;   /* sequence the loop has applied */
	struct wtd_mb_msg msg;
	int result; /* the loop's answer to `done` */
	const float *old_matrix, *old_reference, *old_flat;
	const float *old_offset;
};

/** Most Zernike offsets held at once (distinct Noll indices). */
#define WTD_OFFSETS_MAX 32

/** What the control thread publishes for status (under slow_mu). */
struct wtd_slow {
	double gain, leak;
	int modes, recommended;
	double condition;
	bool have_interaction, have_matrix, have_reference;
	char source[16]; /* "measured", "file" or "" */
	char file[WT_REQUEST_LINE_MAX + 1];
	char created[32];
	int n_offsets; /* offsets the closed loop holds */
	int offset_noll[WTD_OFFSETS_MAX];
	double offset_nm[WTD_OFFSETS_MAX];
};

/** Statistics of the last status period (under period_mu). */
struct wtd_period {
	bool valid;
	double frame_rate_hz;
	bool have_latency;
	double latency_median_us, latency_max_us;
	bool have_rms;
	double residual_rms;
};

#define WTD_EVQ 64

struct wtd_loop;
struct wtd_ctl;
struct wtd_tm;

/** What wtd_capture() fills: the next `want` frames' residual slopes
 * (want x n_slopes), commands (want x n_act), frame ids and states. */
struct wtd_capture {
	long want, got;
	float *slopes, *commands;
	uint64_t *ids;
	uint16_t *states;
};

/** The daemon. */
struct wtd {
	wt_log *log;
	wt_config *cfg; /* the control thread's once threads run */
	const wt_grid *lenslets, *actuators;
	int n_subaps, n_slopes, n_act, ppl, frame_side;
	uint64_t start_ns;

	void *zctx;
	void *s_frames, *s_commands, *s_control, *s_telemetry;

	wt_ring *ring;
	size_t slot_bytes;

	const char *config_path;      /* the INI file read at start (reload) */
	atomic_bool reload_requested; /* SIGHUP: the control thread reloads */

	struct wtd_counters c;
	struct wtd_mailbox mb;
	atomic_bool stop;    /* loop and control stop */
	atomic_bool tm_stop; /* telemetry stops (after the loop) */
	atomic_ullong status_period_ns;
	atomic_ullong driver_timeout_ns; /* for status; the loop has its own */
	atomic_ullong image_period_ns;	 /* daemon.image_hz; 0: no images */
	wt_ring *image_ring;		 /* loop -> telemetry; telemetry.c */
	atomic_int want_arrays; /* > 0: every frame record carries arrays */

	int split_cpu; /* the split worker's CPU (loop.c); -1: none */
	int split_row; /* its first row of u = R s */

	struct wtd_loop *loop;
	struct wtd_ctl *ctl;
	struct wtd_tm *tm;

	pthread_mutex_t slow_mu;
	struct wtd_slow slow;
	pthread_mutex_t period_mu;
	struct wtd_period period;
	pthread_mutex_t evq_mu;
	char *evq[WTD_EVQ];
	int evq_head, evq_count;

	/* Access (lib/wt_secure.h), set before the threads start. */
	bool curve;	     /* daemon.secret_key given */
	wt_keypair keys;     /* the daemon's key pair when curve */
	wt_keylist *clients; /* daemon.clients */
	wt_keylist *writers; /* daemon.writers, NULL: every client */
	wt_zap *zap;	     /* NULL without curve */
	atomic_ullong read_only_refused; /* requests refused to readers */
};

/* loop.c */
int wtd_loop_create(struct wtd *d, wt_error *err);
void wtd_loop_destroy(struct wtd *d);
/** Before the thread starts: install the initial matrix (may be NULL),
 * reference and flat (control-owned). */
void wtd_loop_install_initial(struct wtd *d, const float *matrix, int modes,
			      const float *reference, const float *flat);
void *wtd_loop_main(void *arg);
/** The loop's calibrator: read its results only while c.calib_ready is
 * set (the loop leaves it alone then). */
const wt_calib *wtd_loop_calib(const struct wtd *d);

/* control.c */
int wtd_control_create(struct wtd *d, wt_calibration *initial,
		       const char *initial_file, wt_error *err);
void wtd_control_destroy(struct wtd *d);
void *wtd_control_main(void *arg);

/* telemetry.c */
int wtd_telemetry_create(struct wtd *d, wt_error *err);
void wtd_telemetry_destroy(struct wtd *d);
void *wtd_telemetry_main(void *arg);
/** Write the status object (section 3 of wt_request.h); sv may be NULL
 * (then no singular values). */
void wtd_status_json(struct wtd *d, wt_json *j, const double *sv, int n_sv);
/** [{"noll":J,"nm":AMOUNT}, ...] of n offsets. */
void wtd_offsets_json(wt_json *j, int n, const int *noll, const double *nm);
/** Queue a JSON event text (copied) for the telemetry thread. */
void wtd_event_post(struct wtd *d, const char *json);
/** Names used in JSON. */
const char *wtd_fault_name(int fault);
/**
 * Start recording the next `frames` frames into a new HDF5 file at path
 * (control thread; the file is created here, the telemetry thread hands
 * frames to a writer thread).  -EBUSY while a recording runs, -EIO etc.
 * when the file cannot be made.
 */
int wtd_record_start(struct wtd *d, const char *path, long long frames,
		     const char *config_ini, wt_error *err);
/** Stop the recording in progress (its file keeps the frames so far);
 * -ENOENT when none runs. */
int wtd_record_stop(struct wtd *d, wt_error *err);
/** The status object's "recording" value (null before the first). */
void wtd_record_json(struct wtd *d, wt_json *j);
/** Start filling c (c->want frames, buffers allocated by the caller) from
 * the next frames the loop answers.  Control thread.  -EBUSY when a
 * capture runs.  c must stay valid until full or cancelled. */
int wtd_capture_start(struct wtd *d, struct wtd_capture *c, wt_error *err);
/** Frames in c so far; *full when all c->want have come. */
long wtd_capture_done(struct wtd *d, struct wtd_capture *c, bool *full);
/** Stop filling c (nothing happens when it is already full). */
void wtd_capture_cancel(struct wtd *d, struct wtd_capture *c);

#endif /* WTD_H */
