/*
 * test_store.c - calibration files (lib/wt_store.c).
 *
 * Sources of truth: the file layout stated in lib/wt_store.h, read back
 * through the plain HDF5 library (H5LT high-level calls, not our reader);
 * HDF5's own Fletcher-32 filter for damaged data (HDF5 User's Guide,
 * "Filters"); the geometry module for what the running configuration is.
 */
#include "wt_test.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <hdf5.h>
#include <hdf5_hl.h>

#include "wt_geometry.h"
#include "wt_store.h"

static char dir[64];

static uint64_t rng_state;

static double rng_uniform(void)
{
	uint64_t z = (rng_state += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	z ^= z >> 31;
	return ((double)(z >> 11) + 0.5) / 9007199254740992.0;
}

static void remove_dir(void)
{
	char cmd[128];

	if (dir[0]) {
		snprintf(cmd, sizeof(cmd), "rm -rf '%s'", dir);
		if (system(cmd) != 0) {
			fprintf(stderr, "could not remove %s\n", dir);
		}
	}
}

/* A file in this run's own temporary folder (made on first use, removed at
 * exit). */
static const char *file_in_dir(const char *name)
{
	static char path[128];

	if (!dir[0]) {
		snprintf(dir, sizeof(dir), "/tmp/wt_test_store.XXXXXX");
		assert_non_null(mkdtemp(dir));
		atexit(remove_dir);
	}
	snprintf(path, sizeof(path), "%s/%s", dir, name);
	return path;
}

/* The running configuration of most tests. */
struct rig {
	wt_grid *lenslets, *actuators;
	int ppl;
};

static void rig_make(struct rig *r, int n_lens, double obscuration, int n_act,
		     enum wt_layout layout, int ppl)
{
	assert_int_equal(
		wt_grid_lenslets(n_lens, obscuration, 0.5, &r->lenslets, NULL),
		0);
	assert_int_equal(wt_grid_actuators(n_act, layout, n_act - 1.0, 0.5,
					   &r->actuators, NULL),
			 0);
	r->ppl = ppl;
}

static void rig_free(struct rig *r)
{
	wt_grid_destroy(r->lenslets);
	wt_grid_destroy(r->actuators);
}

/* A calibration for rig r filled with seeded random values. */
static wt_calibration *filled(const struct rig *r)
{
	wt_calibration *c;
	size_t i, nm;

	assert_int_equal(wt_calibration_create(r->lenslets, r->actuators,
					       r->ppl, &c, NULL),
			 0);
	nm = (size_t)c->n_slopes * c->n_act;
	for (i = 0; i < nm; i++) {
		c->interaction[i] = rng_uniform() - 0.5;
		c->control[i] = (float)(rng_uniform() - 0.5);
	}
	for (i = 0; i < (size_t)c->n_sv; i++) {
		c->singular_values[i] = 10.0 / (1.0 + i);
	}
	for (i = 0; i < (size_t)c->n_slopes; i++) {
		c->reference[i] = (float)(rng_uniform() - 0.5);
	}
	for (i = 0; i < (size_t)c->n_act; i++) {
		c->flat[i] = (float)(0.1 * (rng_uniform() - 0.5));
	}
	c->modes = c->n_sv / 2;
	assert_int_equal(
		wt_calibration_set_config(c, "[control]\ngain = 0.3\n"), 0);
	wt_calibration_stamp(c);
	return c;
}

/* Save a calibration for `made`, load it into `running`: the result. */
static int save_then_load(const struct rig *made, const struct rig *running,
			  wt_error *err)
{
	wt_calibration *c = filled(made), *back = NULL;
	const char *path = file_in_dir("cal.h5");
	int rc;

	assert_int_equal(wt_store_save(path, c, NULL), 0);
	rc = wt_store_load(path, running->lenslets, running->actuators,
			   running->ppl, &back, err);
	if (rc == 0) {
		assert_non_null(back);
	} else {
		assert_null(back);
	}
	wt_calibration_destroy(back);
	wt_calibration_destroy(c);
	return rc;
}

static void round_trip_keeps_every_value(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("rt.h5");
	size_t nm;

	(void)state;
	rng_state = wt_test_seed(31);
	rig_make(&r, 10, 0.2, 9, WT_LAYOUT_CORNERS, 12);
	c = filled(&r);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, NULL),
			 0);
	nm = (size_t)c->n_slopes * c->n_act;
	assert_int_equal(back->n_slopes, c->n_slopes);
	assert_int_equal(back->n_act, c->n_act);
	assert_int_equal(back->n_sv, c->n_sv);
	assert_int_equal(back->modes, c->modes);
	assert_memory_equal(back->interaction, c->interaction,
			    nm * sizeof(double));
	assert_memory_equal(back->control, c->control, nm * sizeof(float));
	assert_memory_equal(back->singular_values, c->singular_values,
			    c->n_sv * sizeof(double));
	assert_memory_equal(back->reference, c->reference,
			    c->n_slopes * sizeof(float));
	assert_memory_equal(back->flat, c->flat, c->n_act * sizeof(float));
	assert_string_equal(back->config_ini, c->config_ini);
	assert_string_equal(back->created, c->created);
	assert_int_equal(strlen(back->created), 20); /* YYYY-MM-DDTHH:MM:SSZ */
	assert_int_equal(back->lenslets_n, 10);
	assert_int_equal(back->pixels_per_lenslet, 12);
	assert_int_equal(back->actuators_n, 9);
	assert_memory_equal(back->subap_col, r.lenslets->col,
			    r.lenslets->n_valid * sizeof(int));
	assert_memory_equal(back->act_row, r.actuators->row,
			    r.actuators->n_valid * sizeof(int));
	/* No temporary file is left next to it. */
	{
		char tmp[160];

		snprintf(tmp, sizeof(tmp), "%s.tmp.%ld", path, (long)getpid());
		assert_int_equal(access(tmp, F_OK), -1);
	}
	wt_calibration_destroy(back);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void layout_is_readable_by_plain_hdf5(void **state)
{
	struct rig r;
	wt_calibration *c;
	const char *path = file_in_dir("plain.h5");
	hsize_t dims[2];
	H5T_class_t cls;
	size_t size;
	char format[64];
	int version, modes, n;
	hid_t f;

	(void)state;
	rng_state = wt_test_seed(32);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	/* Read with the HDF5 high-level library, per wt_store.h. */
	f = H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT);
	assert_true(f >= 0);
	assert_true(H5LTget_attribute_string(f, "/", "format", format) >= 0);
	assert_string_equal(format, "wavetrim calibration");
	assert_true(H5LTget_attribute_int(f, "/", "format_version", &version) >=
		    0);
	assert_int_equal(version, 1);
	assert_true(H5LTget_dataset_info(f, "/interaction_matrix", dims, &cls,
					 &size) >= 0);
	assert_int_equal(dims[0], (hsize_t)c->n_slopes);
	assert_int_equal(dims[1], (hsize_t)c->n_act);
	assert_int_equal(cls, H5T_FLOAT);
	assert_int_equal(size, 8);
	assert_true(H5LTget_dataset_info(f, "/control_matrix", dims, &cls,
					 &size) >= 0);
	assert_int_equal(dims[0], (hsize_t)c->n_act);
	assert_int_equal(size, 4);
	assert_true(H5LTget_attribute_int(f, "/control_matrix", "modes",
					  &modes) >= 0);
	assert_int_equal(modes, c->modes);
	assert_true(H5LTget_attribute_int(f, "/geometry/lenslets", "n", &n) >=
		    0);
	assert_int_equal(n, 8);
	assert_true(H5LTget_dataset_info(f, "/geometry/actuators", dims, &cls,
					 &size) >= 0);
	assert_int_equal(dims[0], 49);
	assert_int_equal(dims[1], 2);
	H5Fclose(f);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_other_lenslet_count(void **state)
{
	struct rig made, running;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(33);
	rig_make(&made, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	rig_make(&running, 10, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	assert_int_equal(save_then_load(&made, &running, &err), -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "lenslet grid is 8 across, the "
					"configuration has 10 "
					"(sensor.lenslets)"));
	rig_free(&made);
	rig_free(&running);
}

static void refuses_other_valid_subapertures(void **state)
{
	struct rig made, running;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(34);
	/* Same grid, a central obscuration: fewer valid subapertures. */
	rig_make(&made, 10, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	rig_make(&running, 10, 0.4, 7, WT_LAYOUT_SQUARE, 8);
	assert_true(made.lenslets->n_valid != running.lenslets->n_valid);
	assert_int_equal(save_then_load(&made, &running, &err), -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "valid subapertures, the "
					"configuration has"));
	rig_free(&made);
	rig_free(&running);
}

static void refuses_moved_subaperture(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("moved.h5");
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(35);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	/* Same count, one position differs. */
	c->subap_col[3] += 1;
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "valid subaperture 3 is at"));
	assert_null(back);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_other_pixels_per_lenslet(void **state)
{
	struct rig made, running;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(36);
	rig_make(&made, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	rig_make(&running, 8, 0.0, 7, WT_LAYOUT_SQUARE, 16);
	assert_int_equal(save_then_load(&made, &running, &err), -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "sensor.pixels_per_lenslet"));
	rig_free(&made);
	rig_free(&running);
}

static void refuses_other_actuator_grid(void **state)
{
	struct rig made, running;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(37);
	rig_make(&made, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	rig_make(&running, 8, 0.0, 9, WT_LAYOUT_SQUARE, 8);
	assert_int_equal(save_then_load(&made, &running, &err), -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "actuator grid is 7 across, the "
					"configuration has 9"));
	rig_free(&made);
	rig_free(&running);
}

static void refuses_other_actuator_layout(void **state)
{
	struct rig made, running;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(38);
	rig_make(&made, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	rig_make(&running, 8, 0.0, 7, WT_LAYOUT_CORNERS, 8);
	assert_int_equal(save_then_load(&made, &running, &err), -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "49 valid actuators, the "
					"configuration has 45"));
	rig_free(&made);
	rig_free(&running);
}

static void refuses_moved_actuator(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("moved_act.h5");
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(39);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	c->act_row[10] = 6 - c->act_row[10];
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "valid actuator 10 is at"));
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_dataset_of_wrong_shape(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("shape.h5");
	wt_error err;
	hsize_t dims[1] = {5};
	float junk[5] = {0};
	hid_t f;

	(void)state;
	rng_state = wt_test_seed(40);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	/* Replace reference_slopes by 5 values, with plain HDF5. */
	f = H5Fopen(path, H5F_ACC_RDWR, H5P_DEFAULT);
	assert_true(f >= 0);
	assert_true(H5Ldelete(f, "reference_slopes", H5P_DEFAULT) >= 0);
	assert_true(H5LTmake_dataset_float(f, "reference_slopes", 1, dims,
					   junk) >= 0);
	H5Fclose(f);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -WT_EMISMATCH);
	assert_non_null(strstr(err.msg, "reference_slopes has 5 values, the "
					"configuration needs"));
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_missing_datasets(void **state)
{
	static const char *const names[] = {
		"interaction_matrix", "control_matrix", "singular_values",
		"reference_slopes",   "flat",		"config",
	};
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("missing.h5");
	char expect[96];
	wt_error err;
	size_t i;
	hid_t f;

	(void)state;
	rng_state = wt_test_seed(41);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	for (i = 0; i < sizeof(names) / sizeof(names[0]); i++) {
		assert_int_equal(wt_store_save(path, c, NULL), 0);
		f = H5Fopen(path, H5F_ACC_RDWR, H5P_DEFAULT);
		assert_true(f >= 0);
		assert_true(H5Ldelete(f, names[i], H5P_DEFAULT) >= 0);
		H5Fclose(f);
		assert_int_equal(wt_store_load(path, r.lenslets, r.actuators,
					       r.ppl, &back, &err),
				 -EINVAL);
		snprintf(expect, sizeof(expect), "dataset '%s' is missing",
			 names[i]);
		assert_non_null(strstr(err.msg, expect));
	}
	/* And the geometry group. */
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	f = H5Fopen(path, H5F_ACC_RDWR, H5P_DEFAULT);
	assert_true(H5Ldelete(f, "geometry", H5P_DEFAULT) >= 0);
	H5Fclose(f);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EINVAL);
	assert_non_null(strstr(err.msg, "'geometry/lenslets' is missing"));
	wt_calibration_destroy(c);
	rig_free(&r);
}

/* Read a whole file into memory. */
static unsigned char *slurp(const char *path, size_t *len)
{
	FILE *fp = fopen(path, "rb");
	unsigned char *buf;
	long n;

	assert_non_null(fp);
	fseek(fp, 0, SEEK_END);
	n = ftell(fp);
	fseek(fp, 0, SEEK_SET);
	buf = malloc((size_t)n);
	assert_non_null(buf);
	assert_int_equal(fread(buf, 1, (size_t)n, fp), (size_t)n);
	fclose(fp);
	*len = (size_t)n;
	return buf;
}

static void spit(const char *path, const unsigned char *buf, size_t len)
{
	FILE *fp = fopen(path, "wb");

	assert_non_null(fp);
	assert_int_equal(fwrite(buf, 1, len, fp), len);
	fclose(fp);
}

static void refuses_truncated_file(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("trunc.h5");
	unsigned char *buf;
	size_t len;
	wt_error err;
	int rc;

	(void)state;
	rng_state = wt_test_seed(42);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	buf = slurp(path, &len);
	/* Half the file, then only the first 100 bytes, then one byte. */
	spit(path, buf, len / 2);
	rc = wt_store_load(path, r.lenslets, r.actuators, r.ppl, &back, &err);
	assert_true(rc == -EIO || rc == -EINVAL);
	assert_null(back);
	assert_non_null(strstr(err.msg, path));
	spit(path, buf, 100);
	assert_true(wt_store_load(path, r.lenslets, r.actuators, r.ppl, &back,
				  &err) < 0);
	spit(path, buf, 1);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EIO);
	assert_non_null(strstr(err.msg, "not an HDF5 file"));
	free(buf);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_damaged_data(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("damaged.h5");
	unsigned char *buf;
	size_t len, i, at = 0;
	double marker = 1234.5678125;
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(43);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	c->interaction[0] = marker;
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	buf = slurp(path, &len);
	/* Find the first entry of D (little-endian double) in the file. */
	for (i = 0; i + 8 <= len; i++) {
		if (memcmp(buf + i, &marker, 8) == 0) {
			at = i;
			break;
		}
	}
	assert_true(at > 0);
	/* Flip a bit a few entries further: metadata intact, data not. */
	buf[at + 8 * 5 + 3] ^= 0x10;
	spit(path, buf, len);
	/* HDF5's Fletcher-32 filter refuses the chunk. */
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EIO);
	assert_non_null(strstr(err.msg, "'interaction_matrix' cannot be read"));
	assert_null(back);
	free(buf);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void refuses_foreign_and_missing_files(void **state)
{
	struct rig r;
	wt_calibration *back = NULL;
	const char *path;
	wt_error err;
	hid_t f;

	(void)state;
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	assert_int_equal(wt_store_load(file_in_dir("none.h5"), r.lenslets,
				       r.actuators, r.ppl, &back, &err),
			 -ENOENT);
	assert_non_null(strstr(err.msg, "No such file"));
	path = file_in_dir("text.h5");
	spit(path, (const unsigned char *)"[control]\ngain = 1\n", 19);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EIO);
	assert_non_null(strstr(err.msg, "not an HDF5 file"));
	/* A valid HDF5 file that is not ours. */
	path = file_in_dir("foreign.h5");
	f = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
	assert_true(f >= 0);
	H5Fclose(f);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EINVAL);
	assert_non_null(strstr(err.msg, "not a wavetrim calibration file"));
	/* Ours, from a future version. */
	f = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
	assert_true(H5LTset_attribute_string(f, "/", "format",
					     "wavetrim calibration") >= 0);
	{
		int v = 2;

		assert_true(H5LTset_attribute_int(f, "/", "format_version", &v,
						  1) >= 0);
	}
	H5Fclose(f);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, &err),
			 -EINVAL);
	assert_non_null(strstr(err.msg, "format_version 2"));
	assert_null(back);
	rig_free(&r);
}

static void save_refuses_what_load_would_refuse(void **state)
{
	struct rig r;
	wt_calibration *c;
	const char *path = file_in_dir("bad.h5");
	wt_error err;

	(void)state;
	rng_state = wt_test_seed(44);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_SQUARE, 8);
	c = filled(&r);
	c->control[7] = NAN;
	assert_int_equal(wt_store_save(path, c, &err), -EINVAL);
	assert_non_null(strstr(err.msg, "not finite"));
	assert_int_equal(access(path, F_OK), -1);
	c->control[7] = 0;
	c->modes = c->n_sv + 1;
	assert_int_equal(wt_store_save(path, c, &err), -EINVAL);
	c->modes = 1;
	assert_int_equal(wt_store_save("/nonexistent-dir/x.h5", c, &err), -EIO);
	assert_non_null(strstr(err.msg, "/nonexistent-dir/x.h5"));
	assert_int_equal(wt_store_save("", c, &err), -EINVAL);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void check_accepts_its_own_geometry(void **state)
{
	struct rig r, other;
	wt_calibration *c;
	wt_error err;

	(void)state;
	rig_make(&r, 12, 0.1, 11, WT_LAYOUT_CIRCLE, 10);
	rig_make(&other, 12, 0.1, 11, WT_LAYOUT_SQUARE, 10);
	assert_int_equal(
		wt_calibration_create(r.lenslets, r.actuators, r.ppl, &c, NULL),
		0);
	assert_int_equal(c->n_slopes, 2 * r.lenslets->n_valid);
	assert_int_equal(c->n_sv,
			 c->n_slopes < c->n_act ? c->n_slopes : c->n_act);
	assert_int_equal(
		wt_calibration_check(c, r.lenslets, r.actuators, r.ppl, &err),
		0);
	assert_int_equal(wt_calibration_check(c, other.lenslets,
					      other.actuators, other.ppl, &err),
			 -WT_EMISMATCH);
	wt_calibration_destroy(c);
	rig_free(&r);
	rig_free(&other);
}


/* --- the calibration report ----------------------------------------------- */

/* A calibration with a report computed from its (random) matrix, with a
 * crossed pair set by hand so that partners are stored too. */
static wt_calibration *with_report(const struct rig *r)
{
	wt_calibration *c = filled(r);
	wt_calib_params p = {.amplitude = 0.2,
			     .settle = 1,
			     .average = 3,
			     .patterns = WT_CALIB_HADAMARD};
	wt_diag_report *d;

	assert_int_equal(wt_calreport_compute(c->interaction, r->lenslets,
					      r->actuators, &p, 7, 0.02,
					      &c->report, NULL),
			 0);
	d = c->report->diag;
	d->act[1].flags = WT_DIAG_SWAPPED;
	d->act[1].partner = 4;
	d->act[4].flags = WT_DIAG_SWAPPED;
	d->act[4].partner = 1;
	d->act[2].flags = WT_DIAG_DEAD;
	d->act[3].cx = NAN; /* a zero response has no centroid */
	return c;
}

static void report_round_trip_keeps_every_value(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("report.h5");
	const wt_diag_report *a, *b;

	(void)state;
	rng_state = wt_test_seed(37);
	rig_make(&r, 10, 0.0, 9, WT_LAYOUT_CORNERS, 12);
	c = with_report(&r);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, NULL),
			 0);
	assert_non_null(back->report);
	a = c->report->diag;
	b = back->report->diag;
	assert_int_equal(back->report->patterns, WT_CALIB_HADAMARD);
	assert_true(back->report->amplitude == 0.2);
	assert_int_equal(back->report->settle, 1);
	assert_int_equal(back->report->average, 3);
	assert_int_equal(back->report->missing, 7);
	assert_true(back->report->noise_rms == 0.02);
	assert_true(back->report->matrix_noise == c->report->matrix_noise);
	assert_int_equal(b->modes, a->modes);
	assert_string_equal(b->modes_reason, a->modes_reason);
	assert_memory_equal(b->sv, a->sv, sizeof(double) * (size_t)a->n_sv);
	assert_true(b->shift_x == a->shift_x && b->rotation_deg ==
		    a->rotation_deg && b->fit_rms == a->fit_rms);
	for (int k = 0; k < a->n_act; k++) {
		assert_true(b->act[k].norm == a->act[k].norm);
		assert_true(b->act[k].expected_norm == a->act[k].expected_norm);
		assert_true(b->act[k].coverage == a->act[k].coverage);
		assert_int_equal(b->act[k].flags, a->act[k].flags);
		assert_int_equal(b->act[k].partner, a->act[k].partner);
		assert_int_equal(b->act[k].interior, a->act[k].interior);
		assert_true(b->act[k].cy == a->act[k].cy);
		assert_true(b->act[k].ex == a->act[k].ex);
	}
	assert_true(isnan(b->act[3].cx));
	/* Counts are recounted from the flags on reading. */
	assert_int_equal(b->n_swapped, 2);
	assert_int_equal(b->n_dead, 1);
	wt_calibration_destroy(back);
	wt_calibration_destroy(c);
	rig_free(&r);
}

static void file_without_report_still_loads(void **state)
{
	struct rig r;
	wt_calibration *c, *back = NULL;
	const char *path = file_in_dir("noreport.h5");

	(void)state;
	rng_state = wt_test_seed(38);
	rig_make(&r, 8, 0.0, 7, WT_LAYOUT_CORNERS, 10);
	c = filled(&r); /* as every file written before reports */
	assert_null(c->report);
	assert_int_equal(wt_store_save(path, c, NULL), 0);
	assert_int_equal(wt_store_load(path, r.lenslets, r.actuators, r.ppl,
				       &back, NULL),
			 0);
	assert_null(back->report);
	wt_calibration_destroy(back);
	assert_int_equal(wt_store_read(path, &back, NULL), 0);
	assert_null(back->report);
	assert_int_equal(back->n_act, c->n_act);
	wt_calibration_destroy(back);
	wt_calibration_destroy(c);
	rig_free(&r);
}

/* Save a report, damage it through plain HDF5, expect the reason. */
static void expect_damage(const struct rig *r, void (*damage)(hid_t f),
			  const char *why)
{
	wt_calibration *c = with_report(r), *back = NULL;
	const char *path = file_in_dir("damaged.h5");
	wt_error err;
	hid_t f;

	assert_int_equal(wt_store_save(path, c, NULL), 0);
	f = H5Fopen(path, H5F_ACC_RDWR, H5P_DEFAULT);
	assert_true(f >= 0);
	damage(f);
	H5Fclose(f);
	assert_int_equal(wt_store_load(path, r->lenslets, r->actuators, r->ppl,
				       &back, &err),
			 -EINVAL);
	assert_null(back);
	assert_non_null(strstr(err.msg, "damaged report"));
	if (!strstr(err.msg, why)) {
		fail_msg("'%s' does not say '%s'", err.msg, why);
	}
	assert_int_equal(wt_store_read(path, &back, &err), -EINVAL);
	assert_null(back);
	wt_calibration_destroy(c);
}

static void write_ints(hid_t f, const char *name, const int *v)
{
	hid_t ds = H5Dopen2(f, name, H5P_DEFAULT);

	assert_true(ds >= 0);
	assert_true(H5Dwrite(ds, H5T_NATIVE_INT, H5S_ALL, H5S_ALL, H5P_DEFAULT,
			     v) >= 0);
	H5Dclose(ds);
}

static int act_count(hid_t f)
{
	hid_t ds = H5Dopen2(f, "report/flags", H5P_DEFAULT);
	hid_t sp = H5Dget_space(ds);
	int n = (int)H5Sget_simple_extent_npoints(sp);

	H5Sclose(sp);
	H5Dclose(ds);
	return n;
}

static void unknown_flag(hid_t f)
{
	int v[256] = {0};

	assert_true(act_count(f) <= 256);
	v[0] = 64;
	write_ints(f, "report/flags", v);
}

static void one_sided_partner(hid_t f)
{
	int v[256];
	int n = act_count(f);

	for (int k = 0; k < n; k++) {
		v[k] = -1;
	}
	v[1] = 4; /* still flagged swapped, but 4 no longer names 1 */
	write_ints(f, "report/partner", v);
}

static void missing_attribute(hid_t f)
{
	assert_true(H5Adelete_by_name(f, "report", "modes", H5P_DEFAULT) >= 0);
}

static void missing_dataset(hid_t f)
{
	assert_true(H5Ldelete(f, "report/coverage", H5P_DEFAULT) >= 0);
}

static void modes_beyond_spectrum(hid_t f)
{
	int v = 100000;

	assert_true(H5LTset_attribute_int(f, "report", "modes", &v, 1) >= 0);
}

static void damaged_report_is_refused_with_a_reason(void **state)
{
	struct rig r;

	(void)state;
	rng_state = wt_test_seed(39);
	rig_make(&r, 10, 0.0, 9, WT_LAYOUT_CORNERS, 12);
	expect_damage(&r, unknown_flag, "unknown flag bits");
	expect_damage(&r, one_sided_partner, "no partner naming it back");
	expect_damage(&r, missing_attribute, "'modes'");
	expect_damage(&r, missing_dataset, "report/coverage");
	expect_damage(&r, modes_beyond_spectrum, "recommends 100000 modes");
	rig_free(&r);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(round_trip_keeps_every_value),
	cmocka_unit_test(layout_is_readable_by_plain_hdf5),
	cmocka_unit_test(refuses_other_lenslet_count),
	cmocka_unit_test(refuses_other_valid_subapertures),
	cmocka_unit_test(refuses_moved_subaperture),
	cmocka_unit_test(refuses_other_pixels_per_lenslet),
	cmocka_unit_test(refuses_other_actuator_grid),
	cmocka_unit_test(refuses_other_actuator_layout),
	cmocka_unit_test(refuses_moved_actuator),
	cmocka_unit_test(refuses_dataset_of_wrong_shape),
	cmocka_unit_test(refuses_missing_datasets),
	cmocka_unit_test(refuses_truncated_file),
	cmocka_unit_test(refuses_damaged_data),
	cmocka_unit_test(refuses_foreign_and_missing_files),
	cmocka_unit_test(save_refuses_what_load_would_refuse),
	cmocka_unit_test(check_accepts_its_own_geometry),
	cmocka_unit_test(report_round_trip_keeps_every_value),
	cmocka_unit_test(file_without_report_still_loads),
	cmocka_unit_test(damaged_report_is_refused_with_a_reason),
};

WT_TEST_MAIN(tests)
