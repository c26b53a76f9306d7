/*
 * wt_store.h - a calibration and its HDF5 file.
 *
 * One file holds everything a loop needs to close on the corrector it was
 * made for, and what is needed to check that it still fits:
 *
 *   /                      attributes: format = "wavetrim calibration",
 *                          format_version = 1 (int32), created (UTC,
 *                          "YYYY-MM-DDTHH:MM:SSZ")
 *   /interaction_matrix    float64 [n_slopes][n_act]: D, slope i of
 *                          actuator j at [i][j], slopes in pixels per unit
 *                          of normalised stroke
 *   /control_matrix        float32 [n_act][n_slopes]: R; attribute modes
 *                          (int32), the modes kept
 *   /singular_values       float64 [min(n_slopes, n_act)], descending
 *   /reference_slopes      float32 [n_slopes], pixels
 *   /flat                  float32 [n_act], normalised stroke
 *   /geometry/lenslets     int32 [N][2]: (column, row) of each valid
 *                          subaperture in valid order; attributes n (int32,
 *                          lenslets across) and pixels_per_lenslet (int32)
 *   /geometry/actuators    int32 [n_act][2]: (column, row) of each valid
 *                          actuator; attribute n (actuators across)
 *   /config                fixed-length string: the INI text of the
 *                          configuration the calibration was made with
 *   /report                group, optional (files written before it have
 *                          none and still load): the calibration report
 *                          of the measured D (lib/wt_calreport.h).
 *                          Attributes: patterns ("single"|"hadamard"),
 *                          modes_reason (strings); amplitude, noise_rms,
 *                          matrix_noise (NaN: unknown), reference_norm,
 *                          shift_x, shift_y (lenslet pitches),
 *                          rotation_deg, fit_rms, sv_floor (float64);
 *                          settle, average, missing, modes (recommended),
 *                          n_fit, misregistered, position_checked,
 *                          have_template (int32).  Datasets [n_act]:
 *                          norm, expected_norm, coverage, offset_pitches
 *                          (float64; NaN: not judged), flags (int32,
 *                          bits 1 dead, 2 weak, 4 swapped, 8 displaced,
 *                          16 unseen), partner (int32, -1: none),
 *                          interior, in_fit (int32 0/1); [n_act][2]
 *                          float64: centroid, expected_centroid (pupil
 *                          units, x then y; NaN for a zero response);
 *                          singular_values float64 [n_sv] (of the
 *                          measured D, as the report saw them).  A
 *                          report that is present but damaged or
 *                          inconsistent makes the load fail (-EINVAL,
 *                          "damaged report: ...").
 *
 * n_slopes = 2 N, x slopes of the N valid subapertures then their y slopes
 * (see lib/wt_geometry.h).  Every numeric dataset is stored chunked with
 * HDF5's Fletcher-32 checksum filter, so damaged data is refused on
 * reading rather than trusted.  Readers other than wavetrim (h5py, MATLAB)
 * read the file as it is; Fletcher-32 is built into every HDF5 library.
 *
 * wt_store_save() writes a temporary file next to the target and renames
 * it over the target, so a crash never leaves a half-written calibration.
 *
 * Threads: HDF5 1.10 as Debian builds it is not thread-safe; call these
 * functions from one thread only (wavetrimd: its control thread).
 */
#ifndef WT_STORE_H
#define WT_STORE_H

#include "wt_calreport.h"
#include "wt_error.h"
#include "wt_geometry.h"

/** The format this code writes and reads. */
#define WT_STORE_FORMAT		"wavetrim calibration"
#define WT_STORE_FORMAT_VERSION 1

/** A calibration in memory (every array owned by it). */
typedef struct wt_calibration {
	int n_slopes; /**< 2 x n_subaps */
	int n_act;
	int n_sv;		    /**< min(n_slopes, n_act) */
	int modes;		    /**< modes kept in control */
	double *interaction;	    /**< n_slopes x n_act */
	float *control;		    /**< n_act x n_slopes */
	double *singular_values;    /**< n_sv, descending */
	float *reference;	    /**< n_slopes */
	float *flat;		    /**< n_act */
	int lenslets_n;		    /**< lenslets across the grid */
	int n_subaps;		    /**< valid subapertures */
	int *subap_col, *subap_row; /**< n_subaps each */
	int pixels_per_lenslet;
	int actuators_n;	/**< actuators across the grid */
	int *act_col, *act_row; /**< n_act each */
	char *config_ini;	/**< terminated text (may be empty) */
	char created[32];	/**< "YYYY-MM-DDTHH:MM:SSZ" or "" */
	wt_calreport *report;	/**< owned; NULL: none */
} wt_calibration;

/**
 * A zeroed calibration sized and shaped for these grids (geometry copied,
 * matrices 0, reference 0, flat 0, modes 0, config "", created "").
 * -EINVAL for NULL grids or pixels_per_lenslet < 1, -ENOMEM.
 */
int wt_calibration_create(const wt_grid *lenslets, const wt_grid *actuators,
			  int pixels_per_lenslet, wt_calibration **out,
			  wt_error *err);

/** Free (NULL is fine). */
void wt_calibration_destroy(wt_calibration *c);

/** Replace c->config_ini with a copy of text.  0 or -ENOMEM. */
int wt_calibration_set_config(wt_calibration *c, const char *text);

/** Set c->created to the current UTC time. */
void wt_calibration_stamp(wt_calibration *c);

/**
 * Check that c fits these grids and window size: every dimension and
 * every valid position.  0, or -WT_EMISMATCH with the first difference in
 * *err, e.g. "lenslet grid is 16 across, the configuration has 20
 * (sensor.lenslets)".
 */
int wt_calibration_check(const wt_calibration *c, const wt_grid *lenslets,
			 const wt_grid *actuators, int pixels_per_lenslet,
			 wt_error *err);

/**
 * Write c to path (replacing it).  Refuses (-EINVAL) a calibration with
 * inconsistent sizes, NULL arrays or values that are not finite.  -EIO
 * (and the HDF5 step that failed) when writing fails.
 */
int wt_store_save(const char *path, const wt_calibration *c, wt_error *err);

/**
 * Read path into a new calibration and check it against the running
 * configuration (wt_calibration_check()).  Errors, each with "path: reason"
 * in *err:
 *   -ENOENT        no such file
 *   -EIO           not an HDF5 file, truncated, or a dataset that cannot be
 *                  read (checksum failure, damaged metadata)
 *   -EINVAL        not a wavetrim calibration, an unknown format_version,
 *                  a dataset missing or of the wrong type, rank or shape,
 *                  or non-finite values
 *   -WT_EMISMATCH  a dimension or a valid position differs from the
 *                  running configuration
 * Nothing is returned in *out on error.
 */
int wt_store_load(const char *path, const wt_grid *lenslets,
		  const wt_grid *actuators, int pixels_per_lenslet,
		  wt_calibration **out, wt_error *err);

/**
 * Read path without checking it against a configuration (to show a file):
 * the same errors as wt_store_load() except -WT_EMISMATCH.
 */
int wt_store_read(const char *path, wt_calibration **out, wt_error *err);

#endif /* WT_STORE_H */
