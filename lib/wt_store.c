/* wt_store.c - a calibration and its HDF5 file (see wt_store.h). */
#include "wt_store.h"

#include <errno.h>
#include <math.h>
#include <stddef.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include <hdf5.h>

/* Chunks of at most this many elements (HDF5 wants chunks under 4 GiB). */
#define CHUNK_ELEMENTS ((hsize_t)1 << 20)

/* --- the in-memory calibration -------------------------------------------- */

static void *xcalloc(size_t n, size_t size)
{
	return calloc(n ? n : 1, size);
}

/* Allocate every array for these sizes (geometry left zero). */
static int alloc_arrays(wt_calibration *c, int n_subaps, int n_act)
{
	size_t ns = 2 * (size_t)n_subaps, na = (size_t)n_act;

	c->n_subaps = n_subaps;
	c->n_slopes = 2 * n_subaps;
	c->n_act = n_act;
	c->n_sv = c->n_slopes < n_act ? c->n_slopes : n_act;
	c->interaction = xcalloc(ns * na, sizeof(double));
	c->control = xcalloc(ns * na, sizeof(float));
	c->singular_values = xcalloc((size_t)c->n_sv, sizeof(double));
	c->reference = xcalloc(ns, sizeof(float));
	c->flat = xcalloc(na, sizeof(float));
	c->subap_col = xcalloc((size_t)n_subaps, sizeof(int));
	c->subap_row = xcalloc((size_t)n_subaps, sizeof(int));
	c->act_col = xcalloc(na, sizeof(int));
	c->act_row = xcalloc(na, sizeof(int));
	c->config_ini = xcalloc(1, 1);
	if (!c->interaction || !c->control || !c->singular_values ||
	    !c->reference || !c->flat || !c->subap_col || !c->subap_row ||
	    !c->act_col || !c->act_row || !c->config_ini) {
		return -ENOMEM;
	}
	return 0;
}

void wt_calibration_destroy(wt_calibration *c)
{
	if (!c) {
		return;
	}
	free(c->interaction);
	free(c->control);
	free(c->singular_values);
	free(c->reference);
	free(c->flat);
	free(c->subap_col);
	free(c->subap_row);
	free(c->act_col);
	free(c->act_row);
	free(c->config_ini);
	wt_calreport_destroy(c->report);
	free(c);
}

int wt_calibration_create(const wt_grid *lenslets, const wt_grid *actuators,
			  int pixels_per_lenslet, wt_calibration **out,
			  wt_error *err)
{
	wt_calibration *c;
	int k;

	if (!lenslets || !actuators || !out || pixels_per_lenslet < 1 ||
	    lenslets->n_valid < 1 || actuators->n_valid < 1 ||
	    lenslets->n_valid > (1 << 24) || actuators->n_valid > (1 << 24)) {
		return wt_error_set(err, -EINVAL, "calibration: bad geometry");
	}
	c = calloc(1, sizeof(*c));
	if (!c || alloc_arrays(c, lenslets->n_valid, actuators->n_valid) < 0) {
		wt_calibration_destroy(c);
		return wt_error_set(err, -ENOMEM, "calibration: out of memory");
	}
	c->lenslets_n = lenslets->n;
	c->actuators_n = actuators->n;
	c->pixels_per_lenslet = pixels_per_lenslet;
	for (k = 0; k < lenslets->n_valid; k++) {
		c->subap_col[k] = lenslets->col[k];
		c->subap_row[k] = lenslets->row[k];
	}
	for (k = 0; k < actuators->n_valid; k++) {
		c->act_col[k] = actuators->col[k];
		c->act_row[k] = actuators->row[k];
	}
	*out = c;
	return 0;
}

int wt_calibration_set_config(wt_calibration *c, const char *text)
{
	char *copy = strdup(text ? text : "");

	if (!copy) {
		return -ENOMEM;
	}
	free(c->config_ini);
	c->config_ini = copy;
	return 0;
}

void wt_calibration_stamp(wt_calibration *c)
{
	time_t now = time(NULL);
	struct tm tm;

	if (gmtime_r(&now, &tm)) {
		strftime(c->created, sizeof(c->created), "%Y-%m-%dT%H:%M:%SZ",
			 &tm);
	}
}

int wt_calibration_check(const wt_calibration *c, const wt_grid *lenslets,
			 const wt_grid *actuators, int pixels_per_lenslet,
			 wt_error *err)
{
	int k;

	if (!c || !lenslets || !actuators) {
		return wt_error_set(err, -EINVAL,
				    "calibration: nothing to "
				    "check");
	}
	if (c->lenslets_n != lenslets->n) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "lenslet grid is %d across, the "
				    "configuration has %d (sensor.lenslets)",
				    c->lenslets_n, lenslets->n);
	}
	if (c->pixels_per_lenslet != pixels_per_lenslet) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "%d pixels per lenslet, the configuration "
				    "has %d (sensor.pixels_per_lenslet)",
				    c->pixels_per_lenslet, pixels_per_lenslet);
	}
	if (c->n_subaps != lenslets->n_valid) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "%d valid subapertures, the configuration "
				    "has %d (sensor.obscuration, "
				    "sensor.min_fill)",
				    c->n_subaps, lenslets->n_valid);
	}
	for (k = 0; k < c->n_subaps; k++) {
		if (c->subap_col[k] != lenslets->col[k] ||
		    c->subap_row[k] != lenslets->row[k]) {
			return wt_error_set(
				err, -WT_EMISMATCH,
				"valid subaperture %d is at (%d, %d), the "
				"configuration has it at (%d, %d) "
				"(sensor.obscuration, sensor.min_fill)",
				k, c->subap_col[k], c->subap_row[k],
				lenslets->col[k], lenslets->row[k]);
		}
	}
	if (c->actuators_n != actuators->n) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "actuator grid is %d across, the "
				    "configuration has %d (mirror.actuators)",
				    c->actuators_n, actuators->n);
	}
	if (c->n_act != actuators->n_valid) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "%d valid actuators, the configuration "
				    "has %d (mirror.layout, "
				    "mirror.pupil_pitches, "
				    "mirror.margin_pitches)",
				    c->n_act, actuators->n_valid);
	}
	for (k = 0; k < c->n_act; k++) {
		if (c->act_col[k] != actuators->col[k] ||
		    c->act_row[k] != actuators->row[k]) {
			return wt_error_set(
				err, -WT_EMISMATCH,
				"valid actuator %d is at (%d, %d), the "
				"configuration has it at (%d, %d) "
				"(mirror.layout)",
				k, c->act_col[k], c->act_row[k],
				actuators->col[k], actuators->row[k]);
		}
	}
	if (c->n_slopes != 2 * c->n_subaps) {
		return wt_error_set(err, -WT_EMISMATCH,
				    "%d slopes for %d subapertures",
				    c->n_slopes, c->n_subaps);
	}
	return 0;
}

/* --- HDF5 helpers --------------------------------------------------------- */

static int all_finite_d(const double *v, size_t n)
{
	size_t i;

	for (i = 0; i < n; i++) {
		if (!isfinite(v[i])) {
			return 0;
		}
	}
	return 1;
}

static int all_finite_f(const float *v, size_t n)
{
	size_t i;

	for (i = 0; i < n; i++) {
		if (!isfinite(v[i])) {
			return 0;
		}
	}
	return 1;
}

/* A scalar attribute of file type ftype from *value of memory type mtype. */
static int write_attr_scalar(hid_t obj, const char *name, hid_t ftype,
			     hid_t mtype, const void *value)
{
	hid_t space = H5Screate(H5S_SCALAR);
	hid_t attr = -1;
	int rc = -1;

	if (space >= 0) {
		attr = H5Acreate2(obj, name, ftype, space, H5P_DEFAULT,
				  H5P_DEFAULT);
	}
	if (attr >= 0 && H5Awrite(attr, mtype, value) >= 0) {
		rc = 0;
	}
	if (attr >= 0) {
		H5Aclose(attr);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return rc;
}

static int write_attr_int(hid_t obj, const char *name, int value)
{
	return write_attr_scalar(obj, name, H5T_STD_I32LE, H5T_NATIVE_INT,
				 &value);
}

static int write_attr_double(hid_t obj, const char *name, double value)
{
	return write_attr_scalar(obj, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE,
				 &value);
}

static hid_t string_type(size_t len)
{
	hid_t t = H5Tcopy(H5T_C_S1);

	if (t < 0) {
		return t;
	}
	if (H5Tset_size(t, len + 1) < 0 ||
	    H5Tset_strpad(t, H5T_STR_NULLTERM) < 0 ||
	    H5Tset_cset(t, H5T_CSET_UTF8) < 0) {
		H5Tclose(t);
		return -1;
	}
	return t;
}

static int write_attr_string(hid_t obj, const char *name, const char *text)
{
	hid_t space = H5Screate(H5S_SCALAR);
	hid_t type = string_type(strlen(text));
	hid_t attr = -1;
	int rc = -1;

	if (space >= 0 && type >= 0) {
		attr = H5Acreate2(obj, name, type, space, H5P_DEFAULT,
				  H5P_DEFAULT);
	}
	if (attr >= 0 && H5Awrite(attr, type, text) >= 0) {
		rc = 0;
	}
	if (attr >= 0) {
		H5Aclose(attr);
	}
	if (type >= 0) {
		H5Tclose(type);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return rc;
}

static int write_string_dataset(hid_t loc, const char *name, const char *text)
{
	hid_t space = H5Screate(H5S_SCALAR);
	hid_t type = string_type(strlen(text));
	hid_t ds = -1;
	int rc = -1;

	if (space >= 0 && type >= 0) {
		ds = H5Dcreate2(loc, name, type, space, H5P_DEFAULT,
				H5P_DEFAULT, H5P_DEFAULT);
	}
	if (ds >= 0 &&
	    H5Dwrite(ds, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, text) >= 0) {
		rc = 0;
	}
	if (ds >= 0) {
		H5Dclose(ds);
	}
	if (type >= 0) {
		H5Tclose(type);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return rc;
}

/*
 * A chunked, Fletcher-32-checked dataset of rank 1 or 2, written from
 * memory of mem_type.  Returns the dataset (to add attributes) or < 0.
 */
static hid_t write_dataset(hid_t loc, const char *name, hid_t file_type,
			   hid_t mem_type, int rank, const hsize_t *dims,
			   const void *data)
{
	hsize_t chunk[2];
	hid_t space, dcpl, ds = -1;

	chunk[0] = dims[0];
	if (rank == 2) {
		hsize_t rows = CHUNK_ELEMENTS / (dims[1] ? dims[1] : 1);

		chunk[1] = dims[1];
		chunk[0] = rows < 1 ? 1 : rows < dims[0] ? rows : dims[0];
	} else if (chunk[0] > CHUNK_ELEMENTS) {
		chunk[0] = CHUNK_ELEMENTS;
	}
	space = H5Screate_simple(rank, dims, NULL);
	dcpl = H5Pcreate(H5P_DATASET_CREATE);
	if (space >= 0 && dcpl >= 0 && H5Pset_chunk(dcpl, rank, chunk) >= 0 &&
	    H5Pset_fletcher32(dcpl) >= 0) {
		ds = H5Dcreate2(loc, name, file_type, space, H5P_DEFAULT, dcpl,
				H5P_DEFAULT);
	}
	if (ds >= 0 &&
	    H5Dwrite(ds, mem_type, H5S_ALL, H5S_ALL, H5P_DEFAULT, data) < 0) {
		H5Dclose(ds);
		ds = -1;
	}
	if (dcpl >= 0) {
		H5Pclose(dcpl);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return ds;
}

/* Write n (col, row) pairs as int32 [n][2]. */
static hid_t write_positions(hid_t loc, const char *name, const int *col,
			     const int *row, int n)
{
	hsize_t dims[2] = {(hsize_t)n, 2};
	int *pairs = malloc(sizeof(int) * 2 * (size_t)n);
	hid_t ds;
	int k;

	if (!pairs) {
		return -1;
	}
	for (k = 0; k < n; k++) {
		pairs[2 * k] = col[k];
		pairs[2 * k + 1] = row[k];
	}
	ds = write_dataset(loc, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2, dims,
			   pairs);
	free(pairs);
	return ds;
}

static int check_for_save(const wt_calibration *c, wt_error *err)
{
	size_t nm;

	if (!c || !c->interaction || !c->control || !c->singular_values ||
	    !c->reference || !c->flat || !c->subap_col || !c->subap_row ||
	    !c->act_col || !c->act_row) {
		return wt_error_set(err, -EINVAL, "calibration incomplete");
	}
	if (c->n_subaps < 1 || c->n_act < 1 || c->n_slopes != 2 * c->n_subaps ||
	    c->n_sv != (c->n_slopes < c->n_act ? c->n_slopes : c->n_act) ||
	    c->modes < 0 || c->modes > c->n_sv || c->lenslets_n < 1 ||
	    c->actuators_n < 1 || c->pixels_per_lenslet < 1) {
		return wt_error_set(err, -EINVAL,
				    "calibration has inconsistent sizes");
	}
	nm = (size_t)c->n_slopes * (size_t)c->n_act;
	if (!all_finite_d(c->interaction, nm) ||
	    !all_finite_f(c->control, nm) ||
	    !all_finite_d(c->singular_values, (size_t)c->n_sv) ||
	    !all_finite_f(c->reference, (size_t)c->n_slopes) ||
	    !all_finite_f(c->flat, (size_t)c->n_act)) {
		return wt_error_set(err, -EINVAL,
				    "calibration holds values that are not "
				    "finite");
	}
	if (c->report &&
	    (!c->report->diag || !c->report->diag->act ||
	     !c->report->diag->sv || c->report->diag->n_act != c->n_act ||
	     c->report->diag->n_slopes != c->n_slopes ||
	     c->report->diag->n_sv != c->n_sv)) {
		return wt_error_set(err, -EINVAL,
				    "calibration report does not fit the "
				    "calibration's sizes");
	}
	return 0;
}

/* One column of the per-actuator table as a dataset of n values (double
 * when is_int is 0, int32 otherwise), gathered from the struct array. */
static int write_act_column(hid_t g, const char *name,
			    const wt_diag_report *d, size_t offset, int kind)
{
	hsize_t dims[2] = {(hsize_t)d->n_act, 2};
	size_t n = (size_t)d->n_act, k;
	double *v = malloc(sizeof(double) * 2 * n);
	int *iv = malloc(sizeof(int) * n);
	hid_t ds = -1;

	if (v && iv) {
		for (k = 0; k < n; k++) {
			const char *base = (const char *)&d->act[k];
			const wt_diag_actuator *a = &d->act[k];

			switch (kind) {
			case 0: /* double member */
				memcpy(&v[k], base + offset, sizeof(double));
				break;
			case 1: /* pair of doubles */
				memcpy(&v[2 * k], base + offset,
				       sizeof(double));
				memcpy(&v[2 * k + 1],
				       base + offset + sizeof(double),
				       sizeof(double));
				break;
			default: /* int member */
				iv[k] = offset == offsetof(wt_diag_actuator,
							   flags)
						? (int)a->flags
					: offset == offsetof(wt_diag_actuator,
							     partner)
						? a->partner
					: offset == offsetof(wt_diag_actuator,
							     interior)
						? (int)a->interior
						: (int)a->in_fit;
				break;
			}
		}
		if (kind == 2) {
			ds = write_dataset(g, name, H5T_STD_I32LE,
					   H5T_NATIVE_INT, 1, dims, iv);
		} else {
			ds = write_dataset(g, name, H5T_IEEE_F64LE,
					   H5T_NATIVE_DOUBLE, kind == 1 ? 2 : 1,
					   dims, v);
		}
	}
	free(v);
	free(iv);
	if (ds < 0) {
		return -1;
	}
	H5Dclose(ds);
	return 0;
}

static int save_report(hid_t f, const wt_calreport *r)
{
	const wt_diag_report *d = r->diag;
	hsize_t dims[1];
	hid_t g, ds;
	int rc = -1;

	if (!d) {
		return -1;
	}
	g = H5Gcreate2(f, "report", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
	if (g < 0) {
		return -1;
	}
	dims[0] = (hsize_t)d->n_sv;
	ds = write_dataset(g, "singular_values", H5T_IEEE_F64LE,
			   H5T_NATIVE_DOUBLE, 1, dims, d->sv);
	if (ds >= 0) {
		H5Dclose(ds);
	}
	if (ds >= 0 &&
	    write_attr_string(g, "patterns",
			      wt_calib_patterns_name(r->patterns)) == 0 &&
	    write_attr_string(g, "modes_reason", d->modes_reason) == 0 &&
	    write_attr_double(g, "amplitude", r->amplitude) == 0 &&
	    write_attr_double(g, "noise_rms", r->noise_rms) == 0 &&
	    write_attr_double(g, "matrix_noise", r->matrix_noise) == 0 &&
	    write_attr_double(g, "reference_norm", d->reference_norm) == 0 &&
	    write_attr_double(g, "shift_x", d->shift_x) == 0 &&
	    write_attr_double(g, "shift_y", d->shift_y) == 0 &&
	    write_attr_double(g, "rotation_deg", d->rotation_deg) == 0 &&
	    write_attr_double(g, "fit_rms", d->fit_rms) == 0 &&
	    write_attr_double(g, "sv_floor", d->sv_floor) == 0 &&
	    write_attr_int(g, "settle", r->settle) == 0 &&
	    write_attr_int(g, "average", r->average) == 0 &&
	    write_attr_int(g, "missing",
			   r->missing > 2147483647L ? 2147483647
						    : (int)r->missing) == 0 &&
	    write_attr_int(g, "modes", d->modes) == 0 &&
	    write_attr_int(g, "n_fit", d->n_fit) == 0 &&
	    write_attr_int(g, "misregistered", d->misregistered) == 0 &&
	    write_attr_int(g, "position_checked", d->position_checked) == 0 &&
	    write_attr_int(g, "have_template", d->have_template) == 0 &&
	    write_act_column(g, "norm", d, offsetof(wt_diag_actuator, norm),
			     0) == 0 &&
	    write_act_column(g, "expected_norm", d,
			     offsetof(wt_diag_actuator, expected_norm),
			     0) == 0 &&
	    write_act_column(g, "coverage", d,
			     offsetof(wt_diag_actuator, coverage), 0) == 0 &&
	    write_act_column(g, "offset_pitches", d,
			     offsetof(wt_diag_actuator, offset_pitches),
			     0) == 0 &&
	    write_act_column(g, "centroid", d, offsetof(wt_diag_actuator, cx),
			     1) == 0 &&
	    write_act_column(g, "expected_centroid", d,
			     offsetof(wt_diag_actuator, ex), 1) == 0 &&
	    write_act_column(g, "flags", d, offsetof(wt_diag_actuator, flags),
			     2) == 0 &&
	    write_act_column(g, "partner", d,
			     offsetof(wt_diag_actuator, partner), 2) == 0 &&
	    write_act_column(g, "interior", d,
			     offsetof(wt_diag_actuator, interior), 2) == 0 &&
	    write_act_column(g, "in_fit", d,
			     offsetof(wt_diag_actuator, in_fit), 2) == 0) {
		rc = 0;
	}
	H5Gclose(g);
	return rc;
}

static int save_body(hid_t f, const wt_calibration *c, const char **step)
{
	hsize_t dims[2];
	hid_t ds, g = -1, geo = -1;
	int rc = -1;

	*step = "root attributes";
	if (write_attr_string(f, "format", WT_STORE_FORMAT) < 0 ||
	    write_attr_int(f, "format_version", WT_STORE_FORMAT_VERSION) < 0 ||
	    write_attr_string(f, "created", c->created) < 0) {
		return -1;
	}
	*step = "interaction_matrix";
	dims[0] = (hsize_t)c->n_slopes;
	dims[1] = (hsize_t)c->n_act;
	ds = write_dataset(f, "interaction_matrix", H5T_IEEE_F64LE,
			   H5T_NATIVE_DOUBLE, 2, dims, c->interaction);
	if (ds < 0) {
		return -1;
	}
	H5Dclose(ds);
	*step = "control_matrix";
	dims[0] = (hsize_t)c->n_act;
	dims[1] = (hsize_t)c->n_slopes;
	ds = write_dataset(f, "control_matrix", H5T_IEEE_F32LE,
			   H5T_NATIVE_FLOAT, 2, dims, c->control);
	if (ds < 0) {
		return -1;
	}
	rc = write_attr_int(ds, "modes", c->modes);
	H5Dclose(ds);
	if (rc < 0) {
		return -1;
	}
	*step = "singular_values";
	dims[0] = (hsize_t)c->n_sv;
	ds = write_dataset(f, "singular_values", H5T_IEEE_F64LE,
			   H5T_NATIVE_DOUBLE, 1, dims, c->singular_values);
	if (ds < 0) {
		return -1;
	}
	H5Dclose(ds);
	*step = "reference_slopes";
	dims[0] = (hsize_t)c->n_slopes;
	ds = write_dataset(f, "reference_slopes", H5T_IEEE_F32LE,
			   H5T_NATIVE_FLOAT, 1, dims, c->reference);
	if (ds < 0) {
		return -1;
	}
	H5Dclose(ds);
	*step = "flat";
	dims[0] = (hsize_t)c->n_act;
	ds = write_dataset(f, "flat", H5T_IEEE_F32LE, H5T_NATIVE_FLOAT, 1, dims,
			   c->flat);
	if (ds < 0) {
		return -1;
	}
	H5Dclose(ds);
	*step = "geometry";
	rc = -1;
	geo = H5Gcreate2(f, "geometry", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
	if (geo < 0) {
		return -1;
	}
	g = write_positions(geo, "lenslets", c->subap_col, c->subap_row,
			    c->n_subaps);
	if (g >= 0 && write_attr_int(g, "n", c->lenslets_n) >= 0 &&
	    write_attr_int(g, "pixels_per_lenslet", c->pixels_per_lenslet) >=
		    0) {
		rc = 0;
	}
	if (g >= 0) {
		H5Dclose(g);
	}
	if (rc == 0) {
		rc = -1;
		g = write_positions(geo, "actuators", c->act_col, c->act_row,
				    c->n_act);
		if (g >= 0 && write_attr_int(g, "n", c->actuators_n) >= 0) {
			rc = 0;
		}
		if (g >= 0) {
			H5Dclose(g);
		}
	}
	H5Gclose(geo);
	if (rc < 0) {
		return -1;
	}
	*step = "config";
	if (write_string_dataset(f, "config",
				 c->config_ini ? c->config_ini : "") < 0) {
		return -1;
	}
	if (c->report) {
		*step = "report";
		return save_report(f, c->report);
	}
	return 0;
}

int wt_store_save(const char *path, const wt_calibration *c, wt_error *err)
{
	const char *step = "create";
	char *tmp;
	size_t len;
	hid_t f = -1;
	int rc;

	if (!path || !path[0]) {
		return wt_error_set(err, -EINVAL, "no file name");
	}
	rc = check_for_save(c, err);
	if (rc < 0) {
		return rc;
	}
	len = strlen(path) + 32;
	tmp = malloc(len);
	if (!tmp) {
		return wt_error_set(err, -ENOMEM, "%s: out of memory", path);
	}
	snprintf(tmp, len, "%s.tmp.%ld", path, (long)getpid());
	H5E_BEGIN_TRY
	{
		f = H5Fcreate(tmp, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
		rc = f < 0 ? -1 : save_body(f, c, &step);
		if (f >= 0 && H5Fclose(f) < 0) {
			step = "close";
			rc = -1;
		}
	}
	H5E_END_TRY;
	if (rc < 0) {
		int e = errno;

		unlink(tmp);
		free(tmp);
		if (f < 0) {
			return wt_error_set(err, -EIO,
					    "%s: cannot create the "
					    "file (%s)",
					    path,
					    e ? strerror(e) : "HDF5 error");
		}
		return wt_error_set(err, -EIO, "%s: writing %s failed", path,
				    step);
	}
	if (rename(tmp, path) < 0) {
		int e = errno;

		unlink(tmp);
		free(tmp);
		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	free(tmp);
	return 0;
}

/* --- loading -------------------------------------------------------------- */

struct reader {
	hid_t f;
	const char *path;
	wt_error *err;
};

/* Does the object at name (relative to the file root, "a/b") exist? */
static int object_exists(hid_t f, const char *name)
{
	char part[256];
	const char *slash = name;

	while ((slash = strchr(slash, '/'))) {
		size_t n = (size_t)(slash - name);

		if (n >= sizeof(part)) {
			return 0;
		}
		memcpy(part, name, n);
		part[n] = '\0';
		if (H5Lexists(f, part, H5P_DEFAULT) <= 0) {
			return 0;
		}
		slash++;
	}
	return H5Lexists(f, name, H5P_DEFAULT) > 0;
}

/*
 * Open dataset name, check it is of class cls and rank `rank`, and return
 * it with its dimensions in dims.  < 0 with the reason set otherwise.
 */
static hid_t open_dataset(struct reader *r, const char *name, H5T_class_t cls,
			  int rank, hsize_t *dims)
{
	hid_t ds, space, type;
	int got_rank;
	H5T_class_t got_cls;

	if (!object_exists(r->f, name)) {
		wt_error_set(r->err, -EINVAL, "%s: dataset '%s' is missing",
			     r->path, name);
		return -1;
	}
	ds = H5Dopen2(r->f, name, H5P_DEFAULT);
	if (ds < 0) {
		wt_error_set(r->err, -EIO,
			     "%s: dataset '%s' cannot be opened "
			     "(damaged file?)",
			     r->path, name);
		return -1;
	}
	type = H5Dget_type(ds);
	got_cls = type >= 0 ? H5Tget_class(type) : H5T_NO_CLASS;
	if (type >= 0) {
		H5Tclose(type);
	}
	if (got_cls != cls) {
		H5Dclose(ds);
		wt_error_set(r->err, -EINVAL,
			     "%s: dataset '%s' has the wrong type (%s "
			     "expected)",
			     r->path, name,
			     cls == H5T_FLOAT	  ? "floating point"
			     : cls == H5T_INTEGER ? "integer"
						  : "string");
		return -1;
	}
	space = H5Dget_space(ds);
	got_rank = space >= 0 ? H5Sget_simple_extent_ndims(space) : -1;
	if (got_rank != rank ||
	    (rank > 0 && H5Sget_simple_extent_dims(space, dims, NULL) < 0)) {
		if (space >= 0) {
			H5Sclose(space);
		}
		H5Dclose(ds);
		wt_error_set(r->err, -EINVAL,
			     "%s: dataset '%s' has %d dimensions, %d expected",
			     r->path, name, got_rank, rank);
		return -1;
	}
	H5Sclose(space);
	return ds;
}

static int read_all(struct reader *r, hid_t ds, const char *name,
		    hid_t mem_type, void *buf)
{
	herr_t st = H5Dread(ds, mem_type, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf);

	H5Dclose(ds);
	if (st < 0) {
		return wt_error_set(r->err, -EIO,
				    "%s: dataset '%s' cannot be read "
				    "(checksum failure or damaged file)",
				    r->path, name);
	}
	return 0;
}

/*
 * Read a float dataset of the given shape (rank 1: d0; rank 2: d0 x d1)
 * into buf as mem_type; a shape mismatch is -WT_EMISMATCH against the
 * configuration.
 */
static int read_matrix(struct reader *r, const char *name, int rank, hsize_t d0,
		       hsize_t d1, hid_t mem_type, void *buf)
{
	hsize_t dims[2] = {0, 0};
	hid_t ds = open_dataset(r, name, H5T_FLOAT, rank, dims);

	if (ds < 0) {
		return r->err ? r->err->code : -EINVAL;
	}
	if (dims[0] != d0 || (rank == 2 && dims[1] != d1)) {
		H5Dclose(ds);
		if (rank == 2) {
			return wt_error_set(
				r->err, -WT_EMISMATCH,
				"%s: %s is %llu x %llu, the "
				"configuration needs %llu x %llu",
				r->path, name, (unsigned long long)dims[0],
				(unsigned long long)dims[1],
				(unsigned long long)d0, (unsigned long long)d1);
		}
		return wt_error_set(r->err, -WT_EMISMATCH,
				    "%s: %s has %llu values, the "
				    "configuration needs %llu",
				    r->path, name, (unsigned long long)dims[0],
				    (unsigned long long)d0);
	}
	return read_all(r, ds, name, mem_type, buf);
}

/* Does this attribute or dataset hold exactly one element? */
static bool holds_one(hid_t h, bool is_attr)
{
	hid_t space = is_attr ? H5Aget_space(h) : H5Dget_space(h);
	hssize_t n;

	if (space < 0) {
		return false;
	}
	n = H5Sget_simple_extent_npoints(space);
	H5Sclose(space);
	return n == 1;
}

static int read_attr_int(struct reader *r, hid_t obj, const char *obj_name,
			 const char *name, int *value)
{
	hid_t a, type;
	H5T_class_t cls;
	herr_t st;

	if (H5Aexists(obj, name) <= 0) {
		return wt_error_set(r->err, -EINVAL,
				    "%s: attribute '%s' of '%s' is missing",
				    r->path, name, obj_name);
	}
	a = H5Aopen(obj, name, H5P_DEFAULT);
	if (a < 0) {
		return wt_error_set(r->err, -EIO,
				    "%s: attribute '%s' of '%s' cannot be "
				    "opened",
				    r->path, name, obj_name);
	}
	type = H5Aget_type(a);
	cls = type >= 0 ? H5Tget_class(type) : H5T_NO_CLASS;
	if (type >= 0) {
		H5Tclose(type);
	}
	if (cls != H5T_INTEGER || !holds_one(a, true)) {
		H5Aclose(a);
		return wt_error_set(r->err, -EINVAL,
				    "%s: attribute '%s' of '%s' is not one "
				    "integer",
				    r->path, name, obj_name);
	}
	st = H5Aread(a, H5T_NATIVE_INT, value);
	H5Aclose(a);
	if (st < 0) {
		return wt_error_set(r->err, -EIO,
				    "%s: attribute '%s' of '%s' cannot be "
				    "read",
				    r->path, name, obj_name);
	}
	return 0;
}

static int read_attr_double(struct reader *r, hid_t obj, const char *name,
			    double *value)
{
	hid_t a, type;
	H5T_class_t cls;
	herr_t st;

	if (H5Aexists(obj, name) <= 0) {
		return wt_error_set(r->err, -EINVAL, "attribute '%s' is missing",
				    name);
	}
	a = H5Aopen(obj, name, H5P_DEFAULT);
	if (a < 0) {
		return wt_error_set(r->err, -EIO,
				    "attribute '%s' cannot be opened", name);
	}
	type = H5Aget_type(a);
	cls = type >= 0 ? H5Tget_class(type) : H5T_NO_CLASS;
	if (type >= 0) {
		H5Tclose(type);
	}
	if (cls != H5T_FLOAT || !holds_one(a, true)) {
		H5Aclose(a);
		return wt_error_set(r->err, -EINVAL,
				    "attribute '%s' is not one number", name);
	}
	st = H5Aread(a, H5T_NATIVE_DOUBLE, value);
	H5Aclose(a);
	if (st < 0) {
		return wt_error_set(r->err, -EIO,
				    "attribute '%s' cannot be read", name);
	}
	return 0;
}

/* A fixed-length string (attribute when is_attr, else scalar dataset),
 * returned in a new buffer. */
static int read_string(struct reader *r, hid_t obj, const char *name,
		       bool is_attr, char **out)
{
	hid_t h, type, mem;
	size_t size;
	char *buf;
	herr_t st;

	if (is_attr) {
		if (H5Aexists(obj, name) <= 0) {
			return wt_error_set(r->err, -EINVAL,
					    "%s: attribute '%s' is missing",
					    r->path, name);
		}
		h = H5Aopen(obj, name, H5P_DEFAULT);
		type = h >= 0 ? H5Aget_type(h) : -1;
	} else {
		if (!object_exists(obj, name)) {
			return wt_error_set(r->err, -EINVAL,
					    "%s: dataset '%s' is missing",
					    r->path, name);
		}
		h = H5Dopen2(obj, name, H5P_DEFAULT);
		type = h >= 0 ? H5Dget_type(h) : -1;
	}
	if (h < 0 || type < 0 || H5Tget_class(type) != H5T_STRING ||
	    H5Tis_variable_str(type) != 0 || !holds_one(h, is_attr)) {
		if (type >= 0) {
			H5Tclose(type);
		}
		if (h >= 0) {
			if (is_attr) {
				H5Aclose(h);
			} else {
				H5Dclose(h);
			}
		}
		return wt_error_set(r->err, -EINVAL,
				    "%s: '%s' is not one fixed-length string",
				    r->path, name);
	}
	/* Read with the file's own string type (any character set: HDF5
	 * does not convert between ASCII and UTF-8 strings). */
	size = H5Tget_size(type);
	mem = type;
	buf = calloc(size + 1, 1);
	if (!buf) {
		free(buf);
		if (mem >= 0) {
			H5Tclose(mem);
		}
		if (is_attr) {
			H5Aclose(h);
		} else {
			H5Dclose(h);
		}
		return wt_error_set(r->err, -ENOMEM, "%s: out of memory",
				    r->path);
	}
	if (is_attr) {
		st = H5Aread(h, mem, buf);
		H5Aclose(h);
	} else {
		st = H5Dread(h, mem, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf);
		H5Dclose(h);
	}
	H5Tclose(mem);
	if (st < 0) {
		free(buf);
		return wt_error_set(r->err, -EIO, "%s: '%s' cannot be read",
				    r->path, name);
	}
	buf[size] = '\0';
	*out = buf;
	return 0;
}

/* Read int32 [n][2] positions; *n receives the count, arrays allocated. */
static int read_positions(struct reader *r, const char *name, int *n, int **col,
			  int **row, hid_t *ds_out)
{
	hsize_t dims[2] = {0, 0};
	hid_t ds = open_dataset(r, name, H5T_INTEGER, 2, dims);
	int *pairs, k, rc;

	if (ds < 0) {
		return r->err ? r->err->code : -EINVAL;
	}
	if (dims[1] != 2 || dims[0] < 1 || dims[0] > (1 << 24)) {
		H5Dclose(ds);
		return wt_error_set(r->err, -EINVAL,
				    "%s: '%s' is %llu x %llu, N x 2 expected",
				    r->path, name, (unsigned long long)dims[0],
				    (unsigned long long)dims[1]);
	}
	pairs = malloc(sizeof(int) * 2 * (size_t)dims[0]);
	*col = malloc(sizeof(int) * (size_t)dims[0]);
	*row = malloc(sizeof(int) * (size_t)dims[0]);
	if (!pairs || !*col || !*row) {
		free(pairs);
		H5Dclose(ds);
		return wt_error_set(r->err, -ENOMEM, "%s: out of memory",
				    r->path);
	}
	if (H5Dread(ds, H5T_NATIVE_INT, H5S_ALL, H5S_ALL, H5P_DEFAULT, pairs) <
	    0) {
		free(pairs);
		H5Dclose(ds);
		return wt_error_set(r->err, -EIO,
				    "%s: dataset '%s' cannot be read "
				    "(checksum failure or damaged file)",
				    r->path, name);
	}
	*n = (int)dims[0];
	for (k = 0; k < *n; k++) {
		(*col)[k] = pairs[2 * k];
		(*row)[k] = pairs[2 * k + 1];
	}
	free(pairs);
	*ds_out = ds; /* kept open for its attributes */
	rc = 0;
	return rc;
}

/* Dataset report/NAME of n x cols values of class cls into buf. */
static int read_report_array(struct reader *r, const char *name,
			     H5T_class_t cls, int n, int cols, hid_t mem,
			     void *buf)
{
	char path[64];
	hsize_t dims[2] = {0, 0};
	hid_t ds;

	snprintf(path, sizeof(path), "report/%s", name);
	ds = open_dataset(r, path, cls, cols > 1 ? 2 : 1, dims);
	if (ds < 0) {
		return r->err ? r->err->code : -EINVAL;
	}
	if (dims[0] != (hsize_t)n || (cols > 1 && dims[1] != (hsize_t)cols)) {
		H5Dclose(ds);
		return wt_error_set(r->err, -EINVAL,
				    "'%s' has %llu rows, %d expected", path,
				    (unsigned long long)dims[0], n);
	}
	return read_all(r, ds, path, mem, buf);
}

/* The /report group into c->report (left NULL when there is none). */
static int load_report_group(struct reader *r, wt_calibration *c)
{
	static const struct {
		const char *name;
		size_t offset;
		int kind; /* 0 double, 1 pair, 2 int */
	} cols[] = {
		{"norm", offsetof(wt_diag_actuator, norm), 0},
		{"expected_norm", offsetof(wt_diag_actuator, expected_norm), 0},
		{"coverage", offsetof(wt_diag_actuator, coverage), 0},
		{"offset_pitches", offsetof(wt_diag_actuator, offset_pitches),
		 0},
		{"centroid", offsetof(wt_diag_actuator, cx), 1},
		{"expected_centroid", offsetof(wt_diag_actuator, ex), 1},
		{"flags", offsetof(wt_diag_actuator, flags), 2},
		{"partner", offsetof(wt_diag_actuator, partner), 2},
		{"interior", offsetof(wt_diag_actuator, interior), 2},
		{"in_fit", offsetof(wt_diag_actuator, in_fit), 2},
	};
	int na = c->n_act, k, rc = 0, iv[10];
	size_t i;
	wt_calreport *rep;
	wt_diag_report *d;
	double *v = NULL;
	int *ints = NULL;
	char *text = NULL;
	hid_t g;

	if (!object_exists(r->f, "report")) {
		return 0;
	}
	rep = calloc(1, sizeof(*rep));
	d = calloc(1, sizeof(*d));
	if (rep) {
		rep->diag = d;
	}
	if (d) {
		d->n_act = na;
		d->n_slopes = c->n_slopes;
		d->n_sv = c->n_sv;
		d->act = calloc((size_t)na, sizeof(*d->act));
		d->sv = calloc((size_t)c->n_sv, sizeof(*d->sv));
	}
	v = malloc(sizeof(double) * 2 * (size_t)na);
	ints = malloc(sizeof(int) * (size_t)na);
	g = H5Gopen2(r->f, "report", H5P_DEFAULT);
	if (!rep || !d || !d->act || !d->sv || !v || !ints || g < 0) {
		rc = g < 0 ? wt_error_set(r->err, -EIO, "cannot be opened")
			   : wt_error_set(r->err, -ENOMEM, "out of memory");
		goto out;
	}
	rc = read_string(r, g, "patterns", true, &text);
	if (rc == 0) {
		rep->patterns = strcmp(text, "single") == 0	? WT_CALIB_SINGLE
				: strcmp(text, "hadamard") == 0 ? WT_CALIB_HADAMARD
								: -1;
		free(text);
		text = NULL;
		rc = read_string(r, g, "modes_reason", true, &text);
	}
	if (rc == 0) {
		snprintf(d->modes_reason, sizeof(d->modes_reason), "%s", text);
	}
	if (rc == 0 &&
	    ((rc = read_attr_double(r, g, "amplitude", &rep->amplitude)) ||
	     (rc = read_attr_double(r, g, "noise_rms", &rep->noise_rms)) ||
	     (rc = read_attr_double(r, g, "matrix_noise",
				    &rep->matrix_noise)) ||
	     (rc = read_attr_double(r, g, "reference_norm",
				    &d->reference_norm)) ||
	     (rc = read_attr_double(r, g, "shift_x", &d->shift_x)) ||
	     (rc = read_attr_double(r, g, "shift_y", &d->shift_y)) ||
	     (rc = read_attr_double(r, g, "rotation_deg", &d->rotation_deg)) ||
	     (rc = read_attr_double(r, g, "fit_rms", &d->fit_rms)) ||
	     (rc = read_attr_double(r, g, "sv_floor", &d->sv_floor)))) {
		goto out;
	}
	if (rc < 0) {
		goto out;
	}
	{
		static const char *const names[] = {
			"settle",	 "average",	  "missing",
			"modes",	 "n_fit",	  "misregistered",
			"position_checked", "have_template",
		};

		for (i = 0; i < sizeof(names) / sizeof(names[0]); i++) {
			rc = read_attr_int(r, g, "report", names[i], &iv[i]);
			if (rc < 0) {
				goto out;
			}
		}
	}
	rep->settle = iv[0];
	rep->average = iv[1];
	rep->missing = iv[2];
	d->modes = iv[3];
	d->n_fit = iv[4];
	d->misregistered = iv[5] != 0;
	d->position_checked = iv[6] != 0;
	d->have_template = iv[7] != 0;
	rc = read_report_array(r, "singular_values", H5T_FLOAT, c->n_sv, 1,
			       H5T_NATIVE_DOUBLE, d->sv);
	for (i = 0; rc == 0 && i < sizeof(cols) / sizeof(cols[0]); i++) {
		if (cols[i].kind == 2) {
			rc = read_report_array(r, cols[i].name, H5T_INTEGER, na,
					       1, H5T_NATIVE_INT, ints);
		} else {
			rc = read_report_array(r, cols[i].name, H5T_FLOAT, na,
					       cols[i].kind == 1 ? 2 : 1,
					       H5T_NATIVE_DOUBLE, v);
		}
		for (k = 0; rc == 0 && k < na; k++) {
			char *base = (char *)&d->act[k];
			wt_diag_actuator *a = &d->act[k];

			if (cols[i].kind == 0) {
				memcpy(base + cols[i].offset, &v[k],
				       sizeof(double));
			} else if (cols[i].kind == 1) {
				memcpy(base + cols[i].offset, &v[2 * k],
				       2 * sizeof(double));
			} else if (cols[i].offset ==
				   offsetof(wt_diag_actuator, flags)) {
				a->flags = (unsigned int)ints[k];
			} else if (cols[i].offset ==
				   offsetof(wt_diag_actuator, partner)) {
				a->partner = ints[k];
			} else if (cols[i].offset ==
				   offsetof(wt_diag_actuator, interior)) {
				a->interior = ints[k] != 0;
			} else {
				a->in_fit = ints[k] != 0;
			}
		}
	}
	if (rc == 0) {
		rc = wt_calreport_check(rep, r->err);
	}
out:
	if (g >= 0) {
		H5Gclose(g);
	}
	free(text);
	free(v);
	free(ints);
	if (rc < 0) {
		char why[WT_ERROR_MAX];

		snprintf(why, sizeof(why), "%s", r->err ? r->err->msg : "");
		wt_calreport_destroy(rep);
		return wt_error_set(r->err, -EINVAL, "%s: damaged report (%s)",
				    r->path, why);
	}
	c->report = rep;
	return 0;
}

static int load_body(struct reader *r, const wt_grid *lenslets,
		     const wt_grid *actuators, int ppl, wt_calibration **out)
{
	wt_calibration *c = NULL;
	int *scol = NULL, *srow = NULL, *acol = NULL, *arow = NULL;
	int n_sub = 0, n_act = 0, version = 0, rc;
	char *text = NULL;
	hid_t g = -1;
	size_t nm;

	rc = read_string(r, r->f, "format", true, &text);
	if (rc < 0) {
		return wt_error_set(r->err, -EINVAL,
				    "%s: not a wavetrim calibration file (no "
				    "'format' attribute)",
				    r->path);
	}
	if (strcmp(text, WT_STORE_FORMAT) != 0) {
		free(text);
		return wt_error_set(r->err, -EINVAL,
				    "%s: not a wavetrim calibration file",
				    r->path);
	}
	free(text);
	text = NULL;
	rc = read_attr_int(r, r->f, "/", "format_version", &version);
	if (rc < 0) {
		return rc;
	}
	if (version != WT_STORE_FORMAT_VERSION) {
		return wt_error_set(r->err, -EINVAL,
				    "%s: format_version %d, this wavetrim "
				    "reads %d",
				    r->path, version, WT_STORE_FORMAT_VERSION);
	}

	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(r->err, -ENOMEM, "%s: out of memory",
				    r->path);
	}
	rc = read_positions(r, "geometry/lenslets", &n_sub, &scol, &srow, &g);
	if (rc < 0) {
		goto fail;
	}
	rc = read_attr_int(r, g, "geometry/lenslets", "n", &c->lenslets_n);
	if (rc == 0) {
		rc = read_attr_int(r, g, "geometry/lenslets",
				   "pixels_per_lenslet",
				   &c->pixels_per_lenslet);
	}
	H5Dclose(g);
	if (rc < 0) {
		goto fail;
	}
	rc = read_positions(r, "geometry/actuators", &n_act, &acol, &arow, &g);
	if (rc < 0) {
		goto fail;
	}
	rc = read_attr_int(r, g, "geometry/actuators", "n", &c->actuators_n);
	H5Dclose(g);
	if (rc < 0) {
		goto fail;
	}
	if (alloc_arrays(c, n_sub, n_act) < 0) {
		rc = wt_error_set(r->err, -ENOMEM, "%s: out of memory",
				  r->path);
		goto fail;
	}
	memcpy(c->subap_col, scol, sizeof(int) * (size_t)n_sub);
	memcpy(c->subap_row, srow, sizeof(int) * (size_t)n_sub);
	memcpy(c->act_col, acol, sizeof(int) * (size_t)n_act);
	memcpy(c->act_row, arow, sizeof(int) * (size_t)n_act);

	rc = lenslets ? wt_calibration_check(c, lenslets, actuators, ppl,
					     r->err)
		      : 0;
	if (rc < 0) {
		char why[WT_ERROR_MAX];

		snprintf(why, sizeof(why), "%s", r->err ? r->err->msg : "");
		wt_error_set(r->err, rc, "%s: %s", r->path, why);
		goto fail;
	}

	nm = (size_t)c->n_slopes * (size_t)c->n_act;
	rc = read_matrix(r, "interaction_matrix", 2, (hsize_t)c->n_slopes,
			 (hsize_t)c->n_act, H5T_NATIVE_DOUBLE, c->interaction);
	if (rc == 0) {
		rc = read_matrix(r, "control_matrix", 2, (hsize_t)c->n_act,
				 (hsize_t)c->n_slopes, H5T_NATIVE_FLOAT,
				 c->control);
	}
	if (rc == 0) {
		rc = read_matrix(r, "singular_values", 1, (hsize_t)c->n_sv, 0,
				 H5T_NATIVE_DOUBLE, c->singular_values);
	}
	if (rc == 0) {
		rc = read_matrix(r, "reference_slopes", 1, (hsize_t)c->n_slopes,
				 0, H5T_NATIVE_FLOAT, c->reference);
	}
	if (rc == 0) {
		rc = read_matrix(r, "flat", 1, (hsize_t)c->n_act, 0,
				 H5T_NATIVE_FLOAT, c->flat);
	}
	if (rc < 0) {
		goto fail;
	}
	g = H5Dopen2(r->f, "control_matrix", H5P_DEFAULT);
	rc = g < 0 ? -EIO
		   : read_attr_int(r, g, "control_matrix", "modes", &c->modes);
	if (g >= 0) {
		H5Dclose(g);
	}
	if (rc < 0) {
		goto fail;
	}
	if (c->modes < 0 || c->modes > c->n_sv) {
		rc = wt_error_set(r->err, -EINVAL,
				  "%s: control_matrix keeps %d modes, outside "
				  "[0, %d]",
				  r->path, c->modes, c->n_sv);
		goto fail;
	}
	if (!all_finite_d(c->interaction, nm) ||
	    !all_finite_f(c->control, nm) ||
	    !all_finite_d(c->singular_values, (size_t)c->n_sv) ||
	    !all_finite_f(c->reference, (size_t)c->n_slopes) ||
	    !all_finite_f(c->flat, (size_t)c->n_act)) {
		rc = wt_error_set(r->err, -EINVAL,
				  "%s: holds values that are not finite",
				  r->path);
		goto fail;
	}
	rc = read_string(r, r->f, "config", false, &text);
	if (rc < 0) {
		goto fail;
	}
	free(c->config_ini);
	c->config_ini = text;
	text = NULL;
	rc = read_string(r, r->f, "created", true, &text);
	if (rc < 0) {
		goto fail;
	}
	snprintf(c->created, sizeof(c->created), "%s", text);
	free(text);
	rc = load_report_group(r, c);
	if (rc < 0) {
		goto fail;
	}
	free(scol);
	free(srow);
	free(acol);
	free(arow);
	*out = c;
	return 0;
fail:
	free(scol);
	free(srow);
	free(acol);
	free(arow);
	wt_calibration_destroy(c);
	return rc < 0 ? rc : -EINVAL;
}

/* Load, checking against the grids when lenslets is not NULL. */
static int load_file(const char *path, const wt_grid *lenslets,
		     const wt_grid *actuators, int pixels_per_lenslet,
		     wt_calibration **out, wt_error *err)
{
	struct reader r = {.path = path, .err = err};
	wt_error local;
	struct stat st;
	htri_t is;
	int rc;

	if (!err) {
		r.err = &local;
	}
	if (stat(path, &st) < 0) {
		int e = errno;

		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	if (!S_ISREG(st.st_mode)) {
		return wt_error_set(err, -EINVAL, "%s: not a regular file",
				    path);
	}
	H5E_BEGIN_TRY
	{
		is = H5Fis_hdf5(path);
		r.f = is > 0 ? H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT) : -1;
		if (is <= 0) {
			rc = wt_error_set(r.err, -EIO, "%s: not an HDF5 file",
					  path);
		} else if (r.f < 0) {
			rc = wt_error_set(r.err, -EIO,
					  "%s: cannot be opened as HDF5 "
					  "(truncated or damaged)",
					  path);
		} else {
			rc = load_body(&r, lenslets, actuators,
				       pixels_per_lenslet, out);
			H5Fclose(r.f);
		}
	}
	H5E_END_TRY;
	return rc;
}

int wt_store_load(const char *path, const wt_grid *lenslets,
		  const wt_grid *actuators, int pixels_per_lenslet,
		  wt_calibration **out, wt_error *err)
{
	if (!path || !lenslets || !actuators || !out) {
		return wt_error_set(err, -EINVAL, "load: missing argument");
	}
	return load_file(path, lenslets, actuators, pixels_per_lenslet, out,
			 err);
}

int wt_store_read(const char *path, wt_calibration **out, wt_error *err)
{
	if (!path || !out) {
		return wt_error_set(err, -EINVAL, "read: missing argument");
	}
	return load_file(path, NULL, NULL, 0, out, err);
}
