/*
 * wt_draw.h - pictures of the loop: colour maps, the panels of the live view
 * and of `wavetrim snapshot`, drawn to an RGB raster (PNG) or to SVG.
 *
 * Colour maps
 *   WT_CMAP_VIRIDIS   perceptually uniform sequential map for magnitudes
 *                     (flux): the published 256-entry table of van der Walt
 *                     and Smith, "A better default colormap for
 *                     Matplotlib", SciPy 2015 (the table in matplotlib's
 *                     _cm_listed.py, released CC0).
 *   WT_CMAP_COOLWARM  diverging map for signed values (wavefront, mirror
 *                     command): K. Moreland, "Diverging Color Maps for
 *                     Scientific Visualization", ISVC 2009, computed as the
 *                     paper says: sRGB (59, 76, 192) to (180, 4, 38)
 *                     interpolated in its Msh space through a white point
 *                     M = 88, hue spun near the unsaturated middle.
 *
 * The scene: geometry from the configuration (lenslets, actuators, the
 * optics that turn slopes in pixels into wavefront), fed with what the
 * daemon publishes (lib/wt_request.h: frame records, the status object,
 * events) and the simulator's truth.  From the newest frame record it
 * fits Zernike modes 2..J to the residual slopes of the subapertures valid
 * in that frame (least squares, wt_zernike_fit) and derives the residual
 * wavefront RMS sigma and the Marechal estimate of the Strehl ratio,
 * exp(-(2 pi sigma / lambda)^2) (Mahajan, J. Opt. Soc. Am. 72, 1258 (1982)
 * for its range of validity: good above about 0.3).
 *
 * Optics of the conversion (the simulator's camera model, sim_optics.h): a
 * slope s pixels is a mean wavefront gradient s * pixel_um / focal_um; the
 * lenslet pitch is pixels_per_lenslet * pixel_um, so the pupil radius is
 * lenslets * pitch / 2 and the gradient per pupil radius, which the
 * Zernike slope matrix uses, is s * pixel_um / focal_um * radius_um.
 *
 * Orientation: every panel is drawn as a camera image, column i (x) to the
 * right and row j (y) downwards, row 0 at the top.
 *
 * A scene belongs to one thread at a time (the caller locks).  Nothing here
 * keeps global state.  The fits call LAPACK: with OpenBLAS, a program should
 * call openblas_set_num_threads(1) in main (its threads spin against
 * everything else on a small machine; wavetrim-view does so).
 */
#ifndef WT_DRAW_H
#define WT_DRAW_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "wt_config.h"
#include "wt_error.h"
#include "wt_geometry.h"

/* --- colour maps ---------------------------------------------------------- */

/** The two colour maps. */
enum wt_cmap {
	WT_CMAP_VIRIDIS = 0,
	WT_CMAP_COOLWARM = 1,
};

/** Entries of a colour map table. */
#define WT_CMAP_SIZE 256

/**
 * Colour of t in [0, 1] (clamped; NaN gives mid grey) as sRGB components
 * (gamma-encoded, as the tables are published) in [0, 1].  Viridis returns
 * table entry round(t * 255) exactly as published (no interpolation);
 * cool-warm is computed for t itself.
 */
void wt_draw_cmap(enum wt_cmap map, double t, double rgb[3]);

/** The map as WT_CMAP_SIZE entries of 8-bit sRGB (entry k is t = k/255). */
void wt_draw_cmap_table(enum wt_cmap map, uint8_t table[WT_CMAP_SIZE][3]);

/** The smallest 1, 2, 2.5 or 5 times a power of ten that is >= v: the
 * full scale of colour bars and axes (1 for v <= 0 or not finite). */
double wt_draw_nice_ceil(double v);

/* --- checksums and PNG ---------------------------------------------------- */

/**
 * CRC-32 of ISO 3309 / ITU-T V.42 as PNG uses it (reflected polynomial
 * 0xEDB88320, pre- and post-inverted): pass crc = 0 to start, or the
 * previous result to continue.
 */
uint32_t wt_draw_crc32(uint32_t crc, const void *buf, size_t len);

/** Adler-32 of RFC 1950: pass adler = 1 to start, or the previous result. */
uint32_t wt_draw_adler32(uint32_t adler, const void *buf, size_t len);

/**
 * Base64 (RFC 4648 section 4, with padding) of in[0 .. n) into out, which
 * must hold 4 * ceil(n / 3) + 1 bytes; NUL-terminated.  Returns the length.
 */
size_t wt_draw_base64(const uint8_t *in, size_t n, char *out);

/**
 * Encode a width x height image of 8-bit samples, channels 3 (RGB) or 4
 * (RGBA), rows top to bottom, as a PNG file (ISO/IEC 15948) in a malloc'ed
 * buffer: one IDAT whose zlib stream holds stored (uncompressed) deflate
 * blocks (RFC 1951 section 3.2.4), filter type 0 on every row.  The caller
 * frees *out.  Returns 0, -EINVAL for bad sizes, -ENOMEM.
 */
int wt_draw_png_encode(const uint8_t *pixels, int width, int height,
		       int channels, uint8_t **out, size_t *out_len,
		       wt_error *err);

/** wt_draw_png_encode() into the file at path (replaced).  Returns 0 or a
 * negative code with the message in *err. */
int wt_draw_png_write(const uint8_t *pixels, int width, int height,
		      int channels, const char *path, wt_error *err);

/* --- the scene ------------------------------------------------------------ */

/** One point of the history; NaN where a value was not known. */
typedef struct wt_draw_point {
	double t_s;	     /**< the caller's clock, seconds */
	double rms_nm;	     /**< estimated residual wavefront RMS */
	double strehl;	     /**< its Marechal Strehl estimate */
	double truth_rms_nm; /**< simulator truth (piston removed) */
	double truth_strehl; /**< simulator truth */
} wt_draw_point;

/** Points kept in the history (the oldest are dropped). */
#define WT_DRAW_HISTORY_MAX 1200

/** What the status object said last (section 3 of wt_request.h). */
typedef struct wt_draw_status {
	bool known;	/**< a status object has been read */
	char state[16]; /**< "open", "closed" ... */
	char fault[32]; /**< "" when none */
	double frame_rate_hz, latency_median_us,
		latency_max_us;		    /**< NaN: n/a */
	double residual_rms_px, gain, leak; /**< NaN: n/a */
	long long frames, dropped, refused, stale, bad_dimensions, rejected;
	long long send_failed, telemetry_dropped, clipped_frames;
	long long received, wrong_kind, faults;
	int modes, recommended, invalid_subapertures, clipped_actuators;
	double condition; /**< NaN when none */
} wt_draw_status;

/** Latency histogram: bin k holds 10^(k/10) <= us < 10^((k+1)/10), ten
 * bins a decade from 1 us (below: bin 0) to 1 s (above: the last bin). */
#define WT_DRAW_LAT_BINS 60
/** Frame records the latency histogram covers (the newest). */
#define WT_DRAW_LAT_WINDOW 2048
/** Kinds of per-actuator flags kept (the first ones reported). */
#define WT_DRAW_FLAG_KINDS 6

/** Everything the panels show; pointers stay valid until the next call
 * that feeds the scene. */
typedef struct wt_draw_info {
	const wt_grid *lenslets;  /**< N = lenslets->n_valid */
	const wt_grid *actuators; /**< A = actuators->n_valid */
	double wavelength_nm;	  /**< sensor.wavelength_nm */
	double obscuration;	  /**< sensor.obscuration */
	double um_per_px;	  /**< wavefront gradient per pupil radius, um,
				       of one pixel of slope */
	int j_first, n_modes;	  /**< Zernike modes fitted: Noll j_first on */

	/* The newest frame record. */
	bool have_frame;
	uint64_t records, bad_records; /**< accepted, refused (size, magic) */
	uint64_t frame_id;
	int state;	   /**< enum wt_loop_state */
	double latency_us; /**< send - receive of that frame */
	uint32_t n_invalid, n_clipped, flags;
	double rms_px;		 /**< residual slope RMS from the record */
	const float *slopes;	 /**< 2N: x then y, pixels */
	const float *flux;	 /**< N, counts */
	const float *command;	 /**< A, normalised stroke */
	const uint8_t *valid;	 /**< N: 1 when used in this frame */
	const uint8_t *at_limit; /**< A: 1 when at mirror.limit_low/high */
	int n_at_limit;
	bool fit_ok;	       /**< the Zernike fit succeeded */
	const double *coef_um; /**< n_modes coefficients, um RMS each */
	double rms_nm, strehl; /**< NaN when the fit failed */

	wt_draw_status status;
	int n_sv;	  /**< singular values of the calibration */
	const double *sv; /**< descending, as the daemon sent them */

	bool have_truth;
	uint64_t truth_frame;
	double truth_rms_nm, truth_strehl;

	int n_hist; /**< oldest first */
	const wt_draw_point *hist;

	/* The newest sensor image (topic "image ", wt_image.h). */
	bool have_image;
	uint64_t image_frame;
	int image_w, image_h, image_bin;
	int sensor_w, sensor_h;
	const uint16_t *image; /**< image_w x image_h, counts, rows down */
	double image_max;      /**< largest value, counts */
	double pixel_um;       /**< sensor.pixel_pitch_um */

	/* Latency, receive -> send, of the last lat_n frame records seen
	 * (wt_draw_scene_timing); the statistics are brought up to date by
	 * wt_draw_scene_sample(). */
	int lat_n;
	uint32_t lat_counts[WT_DRAW_LAT_BINS];
	double lat_median_us, lat_p99_us, lat_max_us; /**< NaN: none */

	/* Per-actuator flags of the calibration, from the newest
	 * "calibration" event (or status) that had any: every member named
	 * KIND_actuators holding an array of actuator indices gives one kind
	 * ("weak" ...); other members are ignored. */
	bool have_flags;
	int n_flag_kinds;
	char flag_names[WT_DRAW_FLAG_KINDS][24];
	int flag_counts[WT_DRAW_FLAG_KINDS];
	const uint8_t *act_flags; /**< A: bit k set = flag kind k */
} wt_draw_info;

typedef struct wt_draw_scene wt_draw_scene;

/**
 * Build a scene for the configuration: lenslet and actuator grids, the
 * Zernike slope matrix (radial orders up to 8, fewer on small grids so
 * that the 2N equations keep at least twice as many rows as modes),
 * the optics factor.  Returns 0 or a negative code with *err.  Allocates.
 */
int wt_draw_scene_create(const wt_config *cfg, wt_draw_scene **out,
			 wt_error *err);

/** Free a scene (NULL allowed). */
void wt_draw_scene_destroy(wt_draw_scene *s);

/**
 * Read one frame record (the bytes after the topic "frame ", len of them)
 * and fit it.  A record whose magic, version or length does not match this
 * geometry is refused (-EPROTO, counted in bad_records) and changes
 * nothing else.  A subaperture counts as valid unless the record reports
 * invalid ones and its flux is under sensor.min_flux (the file's value,
 * updated by "config" events).  Returns 0 even when the fit fails
 * (fit_ok false).
 */
int wt_draw_scene_frame(wt_draw_scene *s, const void *rec, size_t len,
			wt_error *err);

/**
 * Read a status object: the telemetry body, the control reply
 * {"ok":true,"result":{...}}, or the result itself.  Its
 * calibration.singular_values, when present, replace the stored ones.
 * Returns 0, or -EINVAL (not JSON, not a status object) with *err.
 */
int wt_draw_scene_status(wt_draw_scene *s, const char *json, size_t len,
			 wt_error *err);

/**
 * Read an event (section 4 of wt_request.h): "config" events for
 * sensor.min_flux, mirror.limit_low and mirror.limit_high update the
 * thresholds; a "calibration" event replaces the singular values.  Others
 * are ignored.  Returns 0 or -EINVAL for text that is not an event.
 */
int wt_draw_scene_event(wt_draw_scene *s, const char *json, size_t len);

/**
 * Read one image record (the bytes after the topic "image ", len of them,
 * section 6 of wt_request.h) and keep it as the newest image.  A record
 * wt_image_decode() refuses, or one larger than this sensor, is refused
 * (-EPROTO, counted in bad_records).
 */
int wt_draw_scene_image(wt_draw_scene *s, const void *rec, size_t len,
			wt_error *err);

/**
 * Add the latency (send - receive) of a frame record to the histogram;
 * only its header is read (len >= WT_FRAME_HEADER_BYTES, magic and version
 * right, else ignored).  Cheap: call it for every record, also those not
 * drawn.
 */
void wt_draw_scene_timing(wt_draw_scene *s, const void *rec, size_t len);

/** The simulator's truth for one frame. */
void wt_draw_scene_truth(wt_draw_scene *s, uint64_t frame, double rms_nm,
			 double strehl);

/** Append a history point at time t_s with the newest estimate and truth. */
void wt_draw_scene_sample(wt_draw_scene *s, double t_s);

/** The panels' data. */
const wt_draw_info *wt_draw_scene_info(const wt_draw_scene *s);

/**
 * The fitted residual wavefront of the newest frame, nm, sampled at the
 * centres of an m x m grid over the square [-1, 1]^2 (sample (i, j) at
 * x = -1 + (2 i + 1) / m, y likewise; out[j * m + i]).  Samples outside the
 * pupil (r > 1 or r < obscuration) are NaN unless extend is true (then the
 * polynomials are continued, for drawing under a smooth clip).  *max_abs
 * (may be NULL) gets the largest |value| inside the pupil.  Returns 0,
 * -ENODATA without a fitted frame, -EINVAL for m < 2 or m > 1024.
 */
int wt_draw_scene_map(const wt_draw_scene *s, int m, bool extend, float *out,
		      double *max_abs);

/** Size of a rendered picture, pixels. */
#define WT_DRAW_WIDTH  1672
#define WT_DRAW_HEIGHT 848
/** The SVG group ids of the panels, in drawing order. */
#define WT_DRAW_PANEL_IDS                                                      \
	"image", "slopes", "wavefront", "command", "history", "latency", "sv", \
		"actuators"

/** Output formats. */
enum wt_draw_format {
	WT_DRAW_PNG = 0,
	WT_DRAW_SVG = 1,
};

/**
 * Draw every panel (sensor image with the subaperture grid, or the flux
 * per subaperture when there is no image; residual slopes; residual
 * wavefront; mirror command; history; latency histogram and counters;
 * singular values; per-actuator flags; and a header line with the loop
 * state and counters) as one WT_DRAW_WIDTH x WT_DRAW_HEIGHT picture.  In
 * SVG each panel is a <g> whose id is listed in WT_DRAW_PANEL_IDS.  A PNG
 * file or an SVG document in a
 * malloc'ed buffer (*out, *len; SVG is NUL-terminated, the terminator not
 * counted).  title may be NULL.  Returns 0, -ENOMEM.
 */
int wt_draw_scene_render(const wt_draw_scene *s, enum wt_draw_format format,
			 const char *title, uint8_t **out, size_t *len,
			 wt_error *err);

/** Render into the file at path, PNG for a name ending ".png", SVG for
 * ".svg" (case-insensitive); other names are refused with -EINVAL. */
int wt_draw_scene_save(const wt_draw_scene *s, const char *path,
		       const char *title, wt_error *err);

/**
 * Bytes of one frame record (after the topic) for the geometry of cfg,
 * wt_frame_record_bytes(N, A): a client keeps only records of this size.
 * Returns 0 or a negative code with *err.
 */
int wt_draw_record_size(const wt_config *cfg, size_t *bytes, wt_error *err);

/**
 * `wavetrim snapshot FILE.png|.svg` in one call: a scene for cfg, fed with
 * status_json (the `status` control reply or a telemetry status body;
 * NULL allowed) and with the frame records in records[0 .. records_len),
 * each wt_frame_record_bytes(N, A) long, back to back, oldest first (each
 * feeds one history point, the last one is drawn; records_len 0 draws the
 * panels empty), saved to path as wt_draw_scene_save() does.  Returns 0
 * or a negative code with *err.
 */
int wt_draw_snapshot(const wt_config *cfg, const char *status_json,
		     const void *records, size_t records_len, const char *path,
		     wt_error *err);

/** wt_draw_snapshot() with a sensor image too: image[0 .. image_len) is
 * one image record (after the topic "image "); NULL draws the flux per
 * subaperture in its place.  A record the scene refuses is an error. */
int wt_draw_snapshot_image(const wt_config *cfg, const char *status_json,
			   const void *records, size_t records_len,
			   const void *image, size_t image_len,
			   const char *path, wt_error *err);

/* --- charts --------------------------------------------------------------- */

/** One data series of a chart: n points (x[k], y[k]); NaN points (and
 * points <= 0 on a log axis) break the line. */
typedef struct wt_draw_series {
	const double *x, *y;
	int n;
	const char *label; /**< legend text */
} wt_draw_series;

/** An x-y chart in the panels' style (axes, grid, legend). */
typedef struct wt_draw_chart {
	const char *title, *xlabel, *ylabel;
	bool log_x, log_y;
	const wt_draw_series *series;
	int n_series; /**< at most 4 have distinct colours */
} wt_draw_chart;

/**
 * n charts side by side as one SVG document in a malloc'ed buffer (*out,
 * *len, NUL-terminated, the terminator not counted).  -EINVAL for no
 * chart, -ENOMEM.
 */
int wt_draw_charts_svg(const wt_draw_chart *charts, int n, uint8_t **out,
		       size_t *len, wt_error *err);

#endif /* WT_DRAW_H */
