/*
 * wt_calreport.h - the calibration report of one interaction matrix: how
 * it was measured, its measurement noise, and what wt_diag says about the
 * corrector (per-actuator response norm and centroid, dead / weak /
 * swapped / displaced / misregistration flags with their evidence, the
 * singular-value spectrum with a recommended number of modes and why).
 *
 * wavetrimd computes one for every matrix run (its control thread) and
 * sends it as the "report" member of the `calibration` event; the HDF5
 * calibration file keeps it under /report (lib/wt_store.h); `wavetrim
 * calibrate` and `wavetrim calibration show FILE` print it.  One JSON form
 * (wt_calreport_json()) is what the event carries, what `show --json`
 * prints, and what the text printer (wt_calreport_print()) reads, so the
 * three never disagree.
 *
 * The JSON object:
 *   {"patterns":"single"|"hadamard","amplitude":A,"settle":N,
 *    "average":N,"missing":N,
 *    "noise":{"slope_rms":PIX|null,      one frame, per slope, pixels
 *             "matrix_entry":X|null},    per entry of D (wt_diag.h)
 *    "reference_norm":X,                 median healthy interior norm
 *    "counts":{"dead":N,"weak":N,"swapped":N,"displaced":N,"unseen":N},
 *    "position_checked":BOOL,
 *    "misregistration":{"flagged":BOOL,"shift_x":L,"shift_y":L,
 *                       "rotation_deg":DEG,"fit_rms":L,"fitted":N},
 *                                        L in lenslet pitches
 *    "spectrum":{"singular_values":[...],"recommended":K,
 *                "floor":X|null,"reason":TEXT},
 *    "flags":[{"actuator":K,"flag":NAME,"partner":K|null,
 *              "evidence":TEXT}, ...],  one entry per flag raised
 *    "actuators":{"norm":[...],"expected_norm":[...],
 *                 "centroid_x":[...],"centroid_y":[...],   pupil units
 *                 "coverage":[...],"offset_pitches":[...],
 *                 "flags":[...],"partner":[...]}}
 */
#ifndef WT_CALREPORT_H
#define WT_CALREPORT_H

#include <stdio.h>

#include "wt_calib.h"
#include "wt_diag.h"
#include "wt_error.h"
#include "wt_geometry.h"
#include "wt_json.h"

/** A report (owns diag). */
typedef struct wt_calreport {
	int patterns;	     /**< enum wt_calib_patterns */
	double amplitude;    /**< poke amplitude, normalised stroke */
	int settle, average; /**< frames per state */
	long missing;	     /**< (subaperture, actuator) pairs missing */
	double noise_rms;    /**< slope noise of one frame; NaN unknown */
	double matrix_noise; /**< per-entry noise of D; NaN unknown */
	wt_diag_report *diag;
} wt_calreport;

/**
 * The report of D (2 x lenslets->n_valid rows, actuators->n_valid columns)
 * measured with p; noise_rms the frame noise (wt_calib_noise(), NaN when
 * unknown) sets wt_diag's matrix_noise through wt_diag_matrix_noise().
 * 0 and *out, or a wt_diag_compute() error.
 */
int wt_calreport_compute(const double *D, const wt_grid *lenslets,
			 const wt_grid *actuators, const wt_calib_params *p,
			 long missing, double noise_rms, wt_calreport **out,
			 wt_error *err);

/** Free (NULL is fine). */
void wt_calreport_destroy(wt_calreport *r);

/**
 * Check a report read from somewhere else (a file): sizes, finite numbers
 * where they must be, known flag bits, partners that name each other, the
 * recommended modes within the spectrum, and recount n_dead ... n_unseen
 * from the flags.  0, or -EINVAL with the first problem in *err.
 */
int wt_calreport_check(wt_calreport *r, wt_error *err);

/** Bytes that wt_calreport_json() needs at most for this report. */
size_t wt_calreport_json_size(const wt_calreport *r);

/** Write the report as one JSON object (above) into j. */
void wt_calreport_json(wt_json *j, const wt_calreport *r);

/**
 * Print the report object held in JSON text (len bytes; the form of
 * wt_calreport_json()) as readable text to out: settings and noise, the
 * counts, one line per flag with its evidence, misregistration, the
 * spectrum and the recommendation.  0, or -EINVAL when the text is no
 * report (reason in *err).
 */
int wt_calreport_print(FILE *out, const char *json, size_t len, wt_error *err);

#endif /* WT_CALREPORT_H */
