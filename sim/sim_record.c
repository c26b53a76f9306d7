/* sim_record.c - frames and truth to HDF5. */
#include "sim_record.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <hdf5.h>

/* One row of /truth. */
struct sim_record_row {
	uint64_t frame;
	double time_s;
	double rms_nm;
	double rms_tt_removed_nm;
	double strehl;
	uint32_t saturated;
	uint32_t clipped;
};

int sim_record_read_command(const char *path, float *cmd, int n, wt_error *err)
{
	char line[4096];
	FILE *f = fopen(path, "r");
	int count = 0, lineno = 0;

	if (!f) {
		return wt_error_set(err, -errno, "%s: %s", path,
				    strerror(errno));
	}
	while (fgets(line, sizeof(line), f)) {
		char *p = line, *hash = strchr(line, '#');

		lineno++;
		if (hash) {
			*hash = '\0';
		}
		for (;;) {
			char *end;
			double v;

			while (*p &&
			       (isspace((unsigned char)*p) || *p == ',')) {
				p++;
			}
			if (!*p) {
				break;
			}
			errno = 0;
			v = strtod(p, &end);
			if (end == p || errno || !isfinite(v)) {
				fclose(f);
				return wt_error_set(err, -EINVAL,
						    "%s:%d: not a number", path,
						    lineno);
			}
			if (count >= n) {
				fclose(f);
				return wt_error_set(err, -EINVAL,
						    "%s: more than %d values",
						    path, n);
			}
			cmd[count++] = (float)v;
			p = end;
		}
	}
	fclose(f);
	if (count != n) {
		return wt_error_set(
			err, -EINVAL,
			"%s: %d values, the mirror has %d actuators", path,
			count, n);
	}
	return 0;
}

static hid_t sim_record_row_type(void)
{
	hid_t t = H5Tcreate(H5T_COMPOUND, sizeof(struct sim_record_row));

	H5Tinsert(t, "frame", HOFFSET(struct sim_record_row, frame),
		  H5T_STD_U64LE);
	H5Tinsert(t, "time_s", HOFFSET(struct sim_record_row, time_s),
		  H5T_IEEE_F64LE);
	H5Tinsert(t, "rms_nm", HOFFSET(struct sim_record_row, rms_nm),
		  H5T_IEEE_F64LE);
	H5Tinsert(t, "rms_tt_removed_nm",
		  HOFFSET(struct sim_record_row, rms_tt_removed_nm),
		  H5T_IEEE_F64LE);
	H5Tinsert(t, "strehl", HOFFSET(struct sim_record_row, strehl),
		  H5T_IEEE_F64LE);
	H5Tinsert(t, "saturated", HOFFSET(struct sim_record_row, saturated),
		  H5T_STD_U32LE);
	H5Tinsert(t, "clipped", HOFFSET(struct sim_record_row, clipped),
		  H5T_STD_U32LE);
	return t;
}

static int sim_record_attr_string(hid_t loc, const char *name, const char *text)
{
	hid_t t = H5Tcopy(H5T_C_S1), s = -1, a = -1;
	int rc = -EIO;

	if (t < 0) {
		return rc;
	}
	H5Tset_size(t, strlen(text) + 1);
	H5Tset_strpad(t, H5T_STR_NULLTERM);
	s = H5Screate(H5S_SCALAR);
	if (s >= 0) {
		a = H5Acreate2(loc, name, t, s, H5P_DEFAULT, H5P_DEFAULT);
	}
	if (a >= 0 && H5Awrite(a, t, text) >= 0) {
		rc = 0;
	}
	if (a >= 0) {
		H5Aclose(a);
	}
	if (s >= 0) {
		H5Sclose(s);
	}
	H5Tclose(t);
	return rc;
}

static int sim_record_attr_double(hid_t loc, const char *name, double v)
{
	hid_t s = H5Screate(H5S_SCALAR), a = -1;
	int rc = -EIO;

	if (s >= 0) {
		a = H5Acreate2(loc, name, H5T_IEEE_F64LE, s, H5P_DEFAULT,
			       H5P_DEFAULT);
	}
	if (a >= 0 && H5Awrite(a, H5T_NATIVE_DOUBLE, &v) >= 0) {
		rc = 0;
	}
	if (a >= 0) {
		H5Aclose(a);
	}
	if (s >= 0) {
		H5Sclose(s);
	}
	return rc;
}

/* Write a 1-D dataset of n elements in one go. */
static int sim_record_vector(hid_t file, const char *name, hid_t file_type,
			     hid_t mem_type, hsize_t n, const void *data)
{
	hid_t s = H5Screate_simple(1, &n, NULL), d = -1;
	int rc = -EIO;

	if (s >= 0) {
		d = H5Dcreate2(file, name, file_type, s, H5P_DEFAULT,
			       H5P_DEFAULT, H5P_DEFAULT);
	}
	if (d >= 0 && (n == 0 || H5Dwrite(d, mem_type, H5S_ALL, H5S_ALL,
					  H5P_DEFAULT, data) >= 0)) {
		rc = 0;
	}
	if (d >= 0) {
		H5Dclose(d);
	}
	if (s >= 0) {
		H5Sclose(s);
	}
	return rc;
}

/* The configuration as INI text (malloc'd), or NULL. */
static char *sim_record_config_text(const wt_config *cfg)
{
	char *buf = NULL;
	size_t len = 0;
	FILE *f = open_memstream(&buf, &len);

	if (!f) {
		return NULL;
	}
	wt_config_write_ini(cfg, f, NULL);
	if (fclose(f) != 0) {
		free(buf);
		return NULL;
	}
	return buf;
}

int sim_record_run(sim_world *w, const wt_config *cfg, const float *cmd,
		   uint64_t n_frames, const char *path,
		   volatile sig_atomic_t *stop, wt_error *err)
{
	sim_mirror *m = sim_world_mirror(w);
	int width = sim_world_width(w), n_act = sim_world_actuators(w);
	struct sim_record_row *rows = NULL;
	uint16_t *frame = NULL;
	float *flat = NULL;
	char *config_text = NULL;
	hid_t file = -1, space = -1, plist = -1, dset = -1, mspace = -1;
	hid_t row_type = -1;
	hsize_t dims[3], chunk[3], start[3] = {0, 0, 0}, count[3];
	uint64_t k, done = 0;
	int rc = 0, clipped;

	if (n_frames < 1) {
		return wt_error_set(err, -EINVAL, "record: no frames asked");
	}
	rows = calloc(n_frames, sizeof(*rows));
	frame = calloc((size_t)width * width, sizeof(*frame));
	flat = calloc((size_t)n_act, sizeof(*flat));
	if (!rows || !frame || !flat) {
		rc = wt_error_set(err, -ENOMEM, "record: out of memory");
		goto out;
	}
	clipped = sim_mirror_apply(m, cmd ? cmd : flat);
	if (clipped < 0) {
		rc = wt_error_set(err, clipped,
				  "record: command holds a NaN or infinity");
		goto out;
	}
	file = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
	if (file < 0) {
		rc = wt_error_set(err, -EIO, "%s: cannot create HDF5 file",
				  path);
		goto out;
	}
	dims[0] = n_frames;
	dims[1] = dims[2] = (hsize_t)width;
	chunk[0] = 1;
	chunk[1] = chunk[2] = (hsize_t)width;
	count[0] = 1;
	count[1] = count[2] = (hsize_t)width;
	space = H5Screate_simple(3, dims, NULL);
	plist = H5Pcreate(H5P_DATASET_CREATE);
	mspace = H5Screate_simple(3, count, NULL);
	if (space < 0 || plist < 0 || mspace < 0 ||
	    H5Pset_chunk(plist, 3, chunk) < 0) {
		rc = wt_error_set(err, -EIO, "%s: HDF5 set-up failed", path);
		goto out;
	}
	dset = H5Dcreate2(file, "frames", H5T_STD_U16LE, space, H5P_DEFAULT,
			  plist, H5P_DEFAULT);
	if (dset < 0) {
		rc = wt_error_set(err, -EIO, "%s: cannot create /frames", path);
		goto out;
	}
	for (k = 0; k < n_frames && !(stop && *stop); k++) {
		sim_world_truth t;

		rc = sim_world_expose(w, frame, &t);
		if (rc < 0) {
			wt_error_set(err, rc, "record: exposure failed");
			goto out;
		}
		start[0] = k;
		if (H5Sselect_hyperslab(space, H5S_SELECT_SET, start, NULL,
					count, NULL) < 0 ||
		    H5Dwrite(dset, H5T_NATIVE_UINT16, mspace, space,
			     H5P_DEFAULT, frame) < 0) {
			rc = wt_error_set(err, -EIO, "%s: writing frame %llu",
					  path, (unsigned long long)k);
			goto out;
		}
		rows[k].frame = k;
		rows[k].time_s = t.time_s;
		rows[k].rms_nm = t.rms_nm;
		rows[k].rms_tt_removed_nm = t.rms_tt_removed_nm;
		rows[k].strehl = t.strehl;
		rows[k].saturated = (uint32_t)t.saturated;
		rows[k].clipped = (uint32_t)clipped;
		done++;
	}
	row_type = sim_record_row_type();
	config_text = sim_record_config_text(cfg);
	if (row_type < 0 ||
	    sim_record_vector(file, "truth", row_type, row_type, done, rows) <
		    0 ||
	    sim_record_vector(file, "command", H5T_IEEE_F32LE, H5T_NATIVE_FLOAT,
			      (hsize_t)n_act, sim_mirror_command(m)) < 0 ||
	    sim_record_attr_string(file, "program", "wavetrim-sim") < 0 ||
	    sim_record_attr_string(file, "config",
				   config_text ? config_text : "") < 0 ||
	    sim_record_attr_double(file, "frames", (double)done) < 0 ||
	    sim_record_attr_double(
		    file, "wavelength_nm",
		    wt_config_double(cfg, WT_OPT_SENSOR_WAVELENGTH_NM)) < 0) {
		rc = wt_error_set(err, -EIO, "%s: writing the truth", path);
		goto out;
	}
	rc = 0;
out:
	if (row_type >= 0) {
		H5Tclose(row_type);
	}
	if (dset >= 0) {
		H5Dclose(dset);
	}
	if (mspace >= 0) {
		H5Sclose(mspace);
	}
	if (plist >= 0) {
		H5Pclose(plist);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	if (file >= 0 && H5Fclose(file) < 0 && rc == 0) {
		rc = wt_error_set(err, -EIO, "%s: closing failed", path);
	}
	free(config_text);
	free(rows);
	free(frame);
	free(flat);
	return rc;
}
