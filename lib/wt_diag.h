/*
 * wt_diag.h - calibration report: what an interaction matrix says about the
 * corrector behind it.
 *
 * Input: the interaction matrix D (2N slopes x n_act, row-major; x slopes
 * of the N valid lenslets first, then the y slopes), the lenslet grid and
 * the actuator grid it was measured with (wt_geometry.h).
 *
 * Per actuator k:
 *  - norm: ||column k||, the size of its response;
 *  - centroid: the |response|^2-weighted mean of the lenslet centres,
 *    c_k = sum_l w_l (x_l, y_l) / sum_l w_l with w_l = Dx_lk^2 + Dy_lk^2,
 *    in pupil units, over a window: the lenslets within interior_pitches
 *    actuator pitches of the estimate, starting from the lenslet of
 *    largest w_l and repeated until it settles (as a spot centroid is
 *    windowed; without the window, noise spread over the whole pupil drags
 *    small edge responses towards the centre).  For a response that is
 *    symmetric about the actuator and not cut by the pupil's edge this is
 *    the actuator's position as the sensor sees it.
 *
 * Interior actuators are those whose nominal position has every lenslet
 * cell within interior_pitches actuator pitches on the valid list (their
 * response is not cut by the pupil's edge).  The healthy interior actuators
 * (norm >= weak_fraction x their median) give the reference.
 *
 * Misregistration.  A rotation theta about the pupil centre followed by a
 * shift t, c_k = R(theta) p_k + t, fitted by least squares between the
 * nominal positions p_k and the centroids c_k of the healthy interior
 * actuators (the 2-D orthogonal Procrustes problem, closed form:
 * theta = atan2(sum p~ x c~, sum p~ . c~) on centred sets, t = c_mean -
 * R p_mean; Schoenemann 1966, Psychometrika 31, 1).  Outliers (centroid
 * more than swap_tolerance actuator pitches from its fitted position, e.g.
 * a swapped pair) are dropped and the fit repeated until the set is
 * stable.  The centroids carry a small bias from sampling on the lenslet
 * grid (a few per cent of a sub-lenslet shift when the influence function
 * spans a lenslet or more; more when it is narrower than a lenslet).
 * Flagged when |t| > shift_tolerance lenslet pitches or |theta| >
 * rotation_tolerance_deg; the fitted values are always reported.
 *
 * Template and expectations.  The radial profile W(r) of the normalised
 * weights w_l / ||column||^2 against the distance r from the centroid,
 * averaged over the healthy interior actuators (bins of a quarter lenslet
 * pitch out to interior_pitches), is what one actuator's response looks
 * like when nothing cuts it.  Moved to the fitted position q_k = R p_k + t
 * of actuator k and cut to the valid lenslets it gives:
 *  - the expected centroid e_k: the windowed centroid of the weights
 *    W(|l - q_k|) on the valid lenslets, which is pulled inwards at the
 *    pupil's edge as the real one is;
 *  - the coverage, sum_valid W / (the same sum over every lattice cell,
 *    valid or not): the share of a full response the sensor can see.
 * Without interior actuators there is no template: e_k = q_k, coverage 1.
 *
 * Flags (a bit set per actuator, with the numbers that raised them):
 *  - UNSEEN: coverage < min_coverage and no more response than
 *    weak_fraction x reference; the sensor cannot judge this actuator (it
 *    sits outside the pupil).  Informational; no other flag is raised.
 *  - DEAD: norm < dead_fraction x expected norm, where the expected norm is
 *    reference x sqrt(coverage) (the median norm of the healthy interior
 *    actuators; for actuators whose response is whole, this is the plain
 *    "norm below 10 % of the median" test).
 *  - WEAK: dead_fraction <= norm / expected norm < weak_fraction.
 *  - SWAPPED (with partner): the test for a crossed pair (a, b) is that
 *    both are displaced, |c_a - e_a| and |c_b - e_b| > swap_tolerance
 *    actuator pitches, while each one's centroid lies within
 *    swap_tolerance pitches of the other's expected centroid, |c_a - e_b|
 *    and |c_b - e_a| <= swap_tolerance pitches.  A crossed cable moves each
 *    response to exactly the other's place, so both conditions hold with
 *    room to spare (the distances are then the sampling noise of the
 *    centroids); two healthy actuators cannot meet them, since each would
 *    have to be misplaced towards the other.  Candidates are paired
 *    greedily in index order, each with the partner of least
 *    max(|c_a - e_b|, |c_b - e_a|).
 *  - DISPLACED: displaced as above but no partner fits (wired to an
 *    unexpected place, or swapped with a channel that shows no response);
 *    only for actuators with coverage >= 0.9: a response cut by the
 *    pupil's edge is placed only to about half a pitch.
 * Dead actuators have no usable centroid and are not judged for
 * displacement.  The swap and displacement tests need a sensor at least as
 * fine as the actuator grid (lenslet pitch <= actuator pitch: the Fried
 * geometry or finer); on a coarser sensor a centroid cannot place one
 * actuator's response to better than about a lenslet, so they are skipped
 * there (position_checked is false).  On a Fried-geometry sensor (an
 * actuator at every lenslet corner) the centroid under-reads sub-lenslet
 * moves: in the model of tests/test_diag.c it reads 0.95 of a half-lenslet
 * shift along an axis, 0.57 of the same shift along a diagonal, 0.65 of a
 * quarter-lenslet shift and half of a 3 degree rotation.  The flag still
 * fires; the fitted values are then lower bounds.  With 1.45 or more
 * lenslets per actuator pitch the same model reads within 5 %.
 *
 * Spectrum.  The singular values of D (wt_recon.h) and a recommended
 * number of modes, by the first rule that applies:
 *  1. matrix_noise > 0 (the standard deviation of the noise of each entry
 *     of D, see wt_diag_matrix_noise()): keep the modes with
 *     sigma_i > floor_factor x matrix_noise x (sqrt(m) + sqrt(n)).  The
 *     largest singular value of an m x n matrix of independent noise of
 *     standard deviation s is s (sqrt(m) + sqrt(n)) for large sizes
 *     (Geman 1980, Ann. Probab. 8, 252), and by Weyl's inequality
 *     (Weyl 1912) noise moves every singular value by at most that much,
 *     so a mode below it cannot be told from calibration noise and its
 *     inverse amplifies noise most.  floor_factor (default 2) leaves each
 *     kept sigma known to within a factor 2 at worst.
 *  2. otherwise the largest gap: the i maximising sigma_i / sigma_(i+1),
 *     kept when that ratio is >= gap_ratio (a clear break between sensed
 *     and unsensed modes, e.g. actuators outside the pupil);
 *  3. otherwise the modes with sigma_i / sigma_1 >= min_ratio.
 * The reason is written out in the report.
 *
 * Measurement noise: wt_diag_noise() gives the per-slope noise from K
 * repeated frames taken with the mirror held still.
 *
 * Pure computation: no I/O, no threads.  wt_diag_compute() allocates (it is
 * for the control or telemetry thread, not the loop).
 */
#ifndef WT_DIAG_H
#define WT_DIAG_H

#include <stdbool.h>
#include <stddef.h>

#include "wt_error.h"
#include "wt_geometry.h"

/** Flags of one actuator (bits). */
enum wt_diag_flag {
	WT_DIAG_DEAD = 1u << 0,	     /**< no response */
	WT_DIAG_WEAK = 1u << 1,	     /**< response well below expected */
	WT_DIAG_SWAPPED = 1u << 2,   /**< crossed with `partner` */
	WT_DIAG_DISPLACED = 1u << 3, /**< response not where expected */
	WT_DIAG_UNSEEN = 1u << 4,    /**< outside what the sensor sees */
};

/** "dead", "weak", "swapped", "displaced", "unseen"; "?" for others. */
const char *wt_diag_flag_name(unsigned int flag);

/** Thresholds; wt_diag_params_default() gives the documented defaults. */
typedef struct wt_diag_params {
	double dead_fraction;	 /**< 0.1: dead below this x expected norm */
	double weak_fraction;	 /**< 0.5: weak below this x expected norm */
	double interior_pitches; /**< 1.5: reach of a response, actuator
				  *   pitches */
	double min_coverage;	 /**< 0.1: unseen below this coverage */
	double swap_tolerance;	 /**< 0.5: actuator pitches */
	double shift_tolerance;	 /**< 0.25: lenslet pitches */
	double rotation_tolerance_deg; /**< 1.0: degrees */
	double matrix_noise; /**< per-entry noise of D; <= 0: unknown */
	double floor_factor; /**< 2: noise floor multiple */
	double gap_ratio;    /**< 10: smallest ratio that counts as a gap */
	double min_ratio;    /**< 1e-3: last-resort sigma_i / sigma_1 */
} wt_diag_params;

void wt_diag_params_default(wt_diag_params *p);

/** What the report says about one actuator. */
typedef struct wt_diag_actuator {
	double norm;	       /**< ||column|| */
	double expected_norm;  /**< reference x sqrt(coverage) */
	double cx, cy;	       /**< response centroid, pupil units; NaN if the
				*   column is zero */
	double ex, ey;	       /**< expected centroid, pupil units */
	double coverage;       /**< share of a whole response seen, [0, 1] */
	double offset_pitches; /**< |c - e| in actuator pitches; NaN when not
				*   judged (dead, unseen) */
	bool interior;	       /**< response not cut by the pupil's edge */
	bool in_fit;	       /**< used for the misregistration fit */
	unsigned int flags;    /**< enum wt_diag_flag bits */
	int partner;	       /**< SWAPPED: the other channel, else -1 */
} wt_diag_actuator;

#define WT_DIAG_REASON_MAX 256

/** The calibration report. */
typedef struct wt_diag_report {
	int n_act, n_slopes;
	wt_diag_actuator *act; /**< n_act entries */
	double reference_norm; /**< median norm of healthy interior actuators
				*   (of all, when none is interior) */
	bool have_template;    /**< edge expectations from a template */
	int n_dead, n_weak, n_swapped, n_displaced, n_unseen;
	bool position_checked; /**< swap and displacement tests were run
				*   (lenslet pitch <= actuator pitch) */
	/* misregistration: c = R(rotation) p + shift */
	int n_fit;		 /**< actuators in the fit (0: no fit) */
	double shift_x, shift_y; /**< lenslet pitches */
	double rotation_deg;	 /**< counter-clockwise, +x towards +y */
	double fit_rms;		 /**< residual RMS, lenslet pitches */
	bool misregistered;
	/* spectrum */
	int n_sv;	 /**< min(n_slopes, n_act) */
	double *sv;	 /**< singular values, descending */
	int modes;	 /**< recommended number of modes */
	double sv_floor; /**< noise floor of rule 1 (0 if not used) */
	char modes_reason[WT_DIAG_REASON_MAX];
} wt_diag_report;

/**
 * Compute the report.  D has 2 x lenslets->n_valid rows and
 * actuators->n_valid columns.  p NULL means the defaults.  Returns 0 and
 * *out (free it with wt_diag_report_destroy()), or -EINVAL (NULL pointers,
 * non-finite entries, bad thresholds), -ENOMEM, or a wt_svd_compute()
 * error.
 */
int wt_diag_compute(const double *D, const wt_grid *lenslets,
		    const wt_grid *actuators, const wt_diag_params *p,
		    wt_diag_report **out, wt_error *err);

/** Free a report (NULL is fine). */
void wt_diag_report_destroy(wt_diag_report *r);

/**
 * Recommended number of modes from singular values sv (count, descending)
 * of an m x n matrix, by the rules above.  *modes gets the count;
 * *floor (may be NULL) the noise floor (0 when rule 1 does not apply);
 * reason (may be NULL) one sentence.  -EINVAL for bad arguments.
 */
int wt_diag_recommend_modes(const double *sv, int count, int m, int n,
			    const wt_diag_params *p, int *modes, double *floor,
			    char *reason, size_t reason_len);

/**
 * Standard deviation of each entry of a push-pull interaction matrix from
 * the slope noise of one frame (slope_noise), the poke amplitude, the
 * frames averaged per sign (frames_per_sign) and the number of patterns
 * whose decoding averages into each entry (1 for one actuator at a time,
 * the Hadamard order N for Hadamard patterns, see wt_hadamard.h):
 * slope_noise / (amplitude sqrt(2 frames_per_sign patterns)).  NaN for
 * bad arguments.
 */
double wt_diag_matrix_noise(double slope_noise, double amplitude,
			    int frames_per_sign, int patterns);

/** Estimators of wt_diag_noise(). */
enum wt_diag_noise_method {
	/** sample standard deviation about the mean (divisor K - 1) */
	WT_DIAG_NOISE_SAMPLE = 0,
	/** mean square successive difference / 2 (von Neumann et al. 1941,
	 * Ann. Math. Stat. 12, 153): insensitive to slow drift */
	WT_DIAG_NOISE_DIFF = 1,
};

/**
 * Per-slope RMS noise from n_frames repeated slope vectors (frames is
 * n_frames x n_slopes row-major, the mirror held still).  rms gets
 * n_slopes values (NaN where fewer than 2 finite values, or no finite
 * successive pair, were found: non-finite entries are skipped); *rms_all
 * (may be NULL) the square root of the mean variance over the slopes that
 * have one.  -EINVAL for NULL pointers, n_frames < 2, n_slopes < 1 or an
 * unknown method.
 */
int wt_diag_noise(const float *frames, int n_frames, int n_slopes,
		  enum wt_diag_noise_method method, double *rms,
		  double *rms_all);

#endif /* WT_DIAG_H */
