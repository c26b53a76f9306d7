/*
 * fuzz_store.c - libFuzzer target for the calibration-file loader
 * (lib/wt_store.h).
 *
 * Random bytes are almost never an HDF5 file, and mutating a whole file
 * mostly exercises the HDF5 library rather than our reader.  So the input
 * here is a list of decisions: for each object of the layout in
 * wt_store.h (root attributes, the five matrices, the geometry datasets and
 * their attributes, the config text) one byte picks the correct form or a
 * deviation (missing, wrong class, wrong rank or shape, not scalar,
 * non-finite values, values out of range, variable-length strings, ...),
 * an optional byte in [200, 224) adds the /report group (copied from a
 * file wt_store_save() wrote at start-up) whole or with one deviation (an
 * unknown flag bit, a one-sided partner, an attribute or dataset missing,
 * a dataset of the wrong length, modes beyond the spectrum, a NaN norm:
 * all refused), and a last byte may damage the written file (flip bytes,
 * truncate).  No report at all is allowed (files written before reports).  The
 * file is written with the plain HDF5 API to a temporary folder (tmpfs
 * where there is one) and read with wt_store_load().
 *
 * Each deviation is either refused by the header's rules (then the load
 * must fail), allowed (a fully allowed file must load), or not decided by
 * the header (either verdict; memory errors are still caught by ASan).
 * Properties checked:
 * - a refused load returns a documented code, names the file first and
 *   leaves *out alone; an accepted one fits the grids, holds finite values
 *   and the modes, config and creation time that were written, and equals
 *   what was written, value for value (also after damage: the numeric
 *   datasets are checksummed, so damaged numbers must be refused);
 * - a loaded calibration saves and loads back identical;
 * - no HDF5 object is left open by the loader.
 */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <hdf5.h>

#include "fuzz_util.h"
#include "wt_geometry.h"
#include "wt_store.h"

#define PPL 8

enum verdict { ALLOWED = 0, EITHER = 1, REFUSED = 2 };

static struct {
	char dir[64], path[96], path2[96], report_src[96];
	wt_grid *lenslets, *actuators;
	wt_calibration *base; /* the correct content */
	wt_calreport *report; /* the correct /report of report_src */
} g;

/* The decisions, and what the builder wrote. */
struct build {
	const uint8_t *d;
	size_t n, i;
	enum verdict verdict;
	bool damaged;
	/* what a correct load gives (NAN-free), when known */
	double *interaction;
	float *control;
	double *sv;
	float *reference, *flat;
	bool known[5]; /* the five matrices above */
	int modes;
	bool modes_known;
	char *config; /* written config text, up to a NUL */
	char created[32];
	bool strings_known;
	int report_form; /* -1 none, 0 whole, 1.. a deviation */
};

static unsigned byte(struct build *b)
{
	return b->i < b->n ? b->d[b->i++] : 0;
}

/* Mostly 0 (the correct form), else one of 1..k-1. */
static unsigned pick(struct build *b, unsigned k)
{
	unsigned v = byte(b);

	return v < 128 ? 0 : 1 + (v - 128) % (k - 1);
}

static void judge(struct build *b, enum verdict v)
{
	if (v > b->verdict) {
		b->verdict = v;
	}
}

static void remove_dir(void)
{
	unlink(g.path);
	rmdir(g.path); /* when a run put a folder there */
	unlink(g.path2);
	unlink(g.report_src);
	rmdir(g.dir);
}

int LLVMFuzzerInitialize(int *argc, char ***argv);

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
	wt_calibration *c;
	const char *tmp;
	wt_error err;
	size_t nm;

	(void)argc;
	(void)argv;
	/* HDF5 prints its error stack by default; wt_store silences its own
	 * calls, the builder's deliberate failures are silenced here */
	H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
	/* tools/fuzz.sh gives a scratch folder it removes afterwards */
	tmp = getenv("WT_FUZZ_TMP");
	if (!tmp || !tmp[0]) {
		tmp = access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp";
	}
	snprintf(g.dir, sizeof(g.dir), "%.40s/wt_fuzz_store.XXXXXX", tmp);
	if (!mkdtemp(g.dir)) {
		perror("fuzz_store: mkdtemp");
		abort();
	}
	snprintf(g.path, sizeof(g.path), "%s/cal.h5", g.dir);
	snprintf(g.path2, sizeof(g.path2), "%s/again.h5", g.dir);
	atexit(remove_dir);
	/* small grids keep a run quick: 12 subapertures, 9 actuators */
	if (wt_grid_lenslets(4, 0, 0.5, &g.lenslets, &err) ||
	    wt_grid_actuators(3, WT_LAYOUT_SQUARE, 2, 0, &g.actuators, &err) ||
	    wt_calibration_create(g.lenslets, g.actuators, PPL, &c, &err)) {
		fprintf(stderr, "fuzz_store: set-up: %s\n", err.msg);
		abort();
	}
	nm = (size_t)c->n_slopes * (size_t)c->n_act;
	for (size_t k = 0; k < nm; k++) {
		c->interaction[k] = 0.25 * (double)(k % 7) - 0.5;
		c->control[k] = (float)(k % 5) * 0.125f - 0.25f;
	}
	for (int k = 0; k < c->n_sv; k++) {
		c->singular_values[k] = 10.0 / (k + 1);
	}
	for (int k = 0; k < c->n_slopes; k++) {
		c->reference[k] = 0.01f * (float)k;
	}
	for (int k = 0; k < c->n_act; k++) {
		c->flat[k] = -0.05f * (float)k;
	}
	c->modes = c->n_sv / 2;
	if (wt_calibration_set_config(c, "[control]\ngain = 0.3\n")) {
		abort();
	}
	snprintf(c->created, sizeof(c->created), "2024-05-06T07:08:09Z");
	g.base = c;
	/* A report of the base matrix, with a crossed pair so that partners
	 * are written, saved once: the builder copies its /report group. */
	{
		wt_calib_params p = {.amplitude = 0.1,
				     .settle = 1,
				     .average = 2,
				     .patterns = WT_CALIB_HADAMARD};

		snprintf(g.report_src, sizeof(g.report_src), "%s/report.h5",
			 g.dir);
		if (wt_calreport_compute(c->interaction, g.lenslets,
					 g.actuators, &p, 0, 0.01, &g.report,
					 &err)) {
			fprintf(stderr, "fuzz_store: report: %s\n", err.msg);
			abort();
		}
		g.report->diag->act[0].flags = WT_DIAG_SWAPPED;
		g.report->diag->act[0].partner = 2;
		g.report->diag->act[2].flags = WT_DIAG_SWAPPED;
		g.report->diag->act[2].partner = 0;
		c->report = g.report;
		if (wt_store_save(g.report_src, c, &err)) {
			fprintf(stderr, "fuzz_store: %s\n", err.msg);
			abort();
		}
		c->report = NULL;
	}
	return 0;
}

/* ------------------------------------------------------------------ */
/* Writing objects of any shape                                        */

/* A dataspace: rank 0 is scalar. */
static hid_t space_of(int rank, const hsize_t *dims)
{
	return rank == 0 ? H5Screate(H5S_SCALAR)
			 : H5Screate_simple(rank, dims, NULL);
}

static hid_t fixed_string(size_t size, H5T_str_t pad, H5T_cset_t cset)
{
	hid_t t = H5Tcopy(H5T_C_S1);

	H5Tset_size(t, size);
	H5Tset_strpad(t, pad);
	H5Tset_cset(t, cset);
	return t;
}

static void put_attr(hid_t obj, const char *name, hid_t ftype, hid_t mtype,
		     int rank, const hsize_t *dims, const void *buf)
{
	hid_t s = space_of(rank, dims);
	hid_t a = H5Acreate2(obj, name, ftype, s, H5P_DEFAULT, H5P_DEFAULT);

	if (a >= 0) {
		H5Awrite(a, mtype, buf);
		H5Aclose(a);
	}
	H5Sclose(s);
}

/* An int attribute in one of several forms; `good` is the correct value. */
static void int_attr(struct build *b, hid_t obj, const char *name, int good,
		     bool is_modes)
{
	hsize_t three = 3;
	int v3[3] = {good, good, good};
	long long big;
	double d = good;
	short s = (short)good;
	int v = good;

	switch (pick(b, 8)) {
	case 0:
		put_attr(obj, name, H5T_STD_I32LE, H5T_NATIVE_INT, 0, NULL, &v);
		break;
	case 1:
		judge(b, REFUSED); /* missing */
		break;
	case 2:
		/* another value: out of range (modes) or a mismatch */
		v = is_modes ? (byte(b) & 1 ? -1 : g.base->n_sv + 1)
			     : good + 1 + (int)(byte(b) % 3);
		judge(b, REFUSED);
		put_attr(obj, name, H5T_STD_I32LE, H5T_NATIVE_INT, 0, NULL, &v);
		break;
	case 3:
		judge(b, REFUSED); /* not an integer */
		put_attr(obj, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 0, NULL,
			 &d);
		break;
	case 4:
		judge(b, EITHER); /* three values, not one */
		put_attr(obj, name, H5T_STD_I32LE, H5T_NATIVE_INT, 1, &three,
			 v3);
		break;
	case 5:
		put_attr(obj, name, H5T_STD_I16LE, H5T_NATIVE_SHORT, 0, NULL,
			 &s);
		break;
	case 6:
		/* 64-bit, beyond int: HDF5 clips it to INT_MAX */
		big = (1ll << 32) + good;
		judge(b, REFUSED);
		put_attr(obj, name, H5T_STD_I64LE, H5T_NATIVE_LLONG, 0, NULL,
			 &big);
		break;
	default:
		judge(b, REFUSED); /* a string */
		{
			hid_t t = fixed_string(2, H5T_STR_NULLTERM,
					       H5T_CSET_ASCII);

			put_attr(obj, name, t, t, 0, NULL, "1");
			H5Tclose(t);
		}
		break;
	}
}

/*
 * A string attribute or dataset (as_dataset) of text in one of several
 * forms; if_missing: the verdict on leaving it out.  Returns true when the
 * text is written so that it reads back as itself.
 */
static bool string_obj(struct build *b, hid_t loc, const char *name,
		       const char *text, bool as_dataset,
		       enum verdict if_missing)
{
	size_t len = strlen(text);
	hsize_t two = 2;
	hid_t t, s, o;
	char *pair;
	bool exact = true;
	unsigned form = pick(b, 7);
	const char *vtext[2] = {text, text};

	switch (form) {
	case 1:
		judge(b, if_missing);
		return false;
	case 2:
		/* two strings, not one */
		judge(b, EITHER);
		t = fixed_string(len + 1, H5T_STR_NULLTERM, H5T_CSET_UTF8);
		pair = calloc(2, len + 1);
		if (!pair) {
			abort();
		}
		memcpy(pair, text, len);
		memcpy(pair + len + 1, text, len);
		s = space_of(1, &two);
		o = as_dataset ? H5Dcreate2(loc, name, t, s, H5P_DEFAULT,
					    H5P_DEFAULT, H5P_DEFAULT)
			       : H5Acreate2(loc, name, t, s, H5P_DEFAULT,
					    H5P_DEFAULT);
		if (o >= 0) {
			if (as_dataset) {
				H5Dwrite(o, t, H5S_ALL, H5S_ALL, H5P_DEFAULT,
					 pair);
				H5Dclose(o);
			} else {
				H5Awrite(o, t, pair);
				H5Aclose(o);
			}
		}
		free(pair);
		H5Sclose(s);
		H5Tclose(t);
		return false;
	case 3:
		/* variable-length: the layout says fixed-length */
		judge(b, REFUSED);
		t = H5Tcopy(H5T_C_S1);
		H5Tset_size(t, H5T_VARIABLE);
		s = space_of(0, NULL);
		o = as_dataset ? H5Dcreate2(loc, name, t, s, H5P_DEFAULT,
					    H5P_DEFAULT, H5P_DEFAULT)
			       : H5Acreate2(loc, name, t, s, H5P_DEFAULT,
					    H5P_DEFAULT);
		if (o >= 0) {
			if (as_dataset) {
				H5Dwrite(o, t, H5S_ALL, H5S_ALL, H5P_DEFAULT,
					 vtext);
				H5Dclose(o);
			} else {
				H5Awrite(o, t, vtext);
				H5Aclose(o);
			}
		}
		H5Sclose(s);
		H5Tclose(t);
		return false;
	case 4:
		/* an integer */
		judge(b, REFUSED);
		if (as_dataset) {
			s = space_of(0, NULL);
			o = H5Dcreate2(loc, name, H5T_STD_I32LE, s, H5P_DEFAULT,
				       H5P_DEFAULT, H5P_DEFAULT);
			if (o >= 0) {
				H5Dclose(o);
			}
			H5Sclose(s);
		} else {
			int one = 1;

			put_attr(loc, name, H5T_STD_I32LE, H5T_NATIVE_INT, 0,
				 NULL, &one);
		}
		return false;
	case 5:
		/* ASCII, null-padded to its exact length: same text */
		t = fixed_string(len ? len : 1, H5T_STR_NULLPAD,
				 H5T_CSET_ASCII);
		break;
	case 6:
		/* space-padded: the reader may or may not strip */
		judge(b, EITHER);
		exact = false;
		t = fixed_string(len + 3, H5T_STR_SPACEPAD, H5T_CSET_UTF8);
		break;
	default:
		t = fixed_string(len + 1, H5T_STR_NULLTERM, H5T_CSET_UTF8);
		break;
	}
	/* one fixed-length string, scalar */
	pair = calloc(1, len + 4);
	if (!pair) {
		abort();
	}
	memcpy(pair, text, len);
	if (form == 6) {
		memset(pair + len, ' ', 3);
	}
	s = space_of(0, NULL);
	if (as_dataset) {
		o = H5Dcreate2(loc, name, t, s, H5P_DEFAULT, H5P_DEFAULT,
			       H5P_DEFAULT);
		if (o >= 0) {
			H5Dwrite(o, t, H5S_ALL, H5S_ALL, H5P_DEFAULT, pair);
			H5Dclose(o);
		}
	} else {
		put_attr(loc, name, t, t, 0, NULL, pair);
	}
	free(pair);
	H5Sclose(s);
	H5Tclose(t);
	return exact;
}

/* A numeric dataset; returns it open (for attributes) or -1. */
static hid_t put_dataset(hid_t loc, const char *name, hid_t ftype, hid_t mtype,
			 int rank, const hsize_t *dims, const void *buf,
			 bool checksum)
{
	hid_t s = space_of(rank, dims), dcpl = H5Pcreate(H5P_DATASET_CREATE);
	hid_t ds;
	bool empty = false;

	for (int k = 0; k < rank; k++) {
		empty |= dims[k] == 0;
	}
	if (checksum && rank > 0 && !empty) {
		H5Pset_chunk(dcpl, rank, dims);
		H5Pset_fletcher32(dcpl);
	}
	ds = H5Dcreate2(loc, name, ftype, s, H5P_DEFAULT, dcpl, H5P_DEFAULT);
	if (ds >= 0 && buf && !empty) {
		H5Dwrite(ds, mtype, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf);
	}
	H5Pclose(dcpl);
	H5Sclose(s);
	return ds;
}

/*
 * One of the five matrices.  rank/dims: the correct shape; is_double: the
 * element type in memory and on file; src: the correct values; want: what a
 * load must then give (filled here); *known: whether it is known.
 */
static hid_t matrix(struct build *b, hid_t f, const char *name, int rank,
		    const hsize_t *dims, bool is_double, const void *src,
		    void *want, bool *known)
{
	size_t count = rank == 2 ? dims[0] * dims[1] : dims[0];
	size_t esize = is_double ? sizeof(double) : sizeof(float);
	hid_t ftype = is_double ? H5T_IEEE_F64LE : H5T_IEEE_F32LE;
	hid_t mtype = is_double ? H5T_NATIVE_DOUBLE : H5T_NATIVE_FLOAT;
	hsize_t alt[3] = {dims[0], rank == 2 ? dims[1] : 1, 1};
	unsigned char *vals = malloc(count * esize + 8);
	hid_t ds = -1;
	size_t at;

	if (!vals) {
		abort();
	}
	memcpy(vals, src, count * esize);
	*known = false;
	switch (pick(b, 10)) {
	case 1:
		judge(b, REFUSED); /* missing */
		break;
	case 2:
		judge(b, REFUSED); /* integers */
		ds = put_dataset(f, name, H5T_STD_I32LE, H5T_NATIVE_INT, rank,
				 dims, NULL, true);
		break;
	case 3:
		/* the same values in the other rank */
		judge(b, REFUSED);
		if (rank == 2) {
			alt[0] = count;
			ds = put_dataset(f, name, ftype, mtype, 1, alt, vals,
					 true);
		} else {
			ds = put_dataset(f, name, ftype, mtype, 2, alt, vals,
					 true);
		}
		break;
	case 4:
		/* one dimension off (or empty) */
		judge(b, REFUSED);
		at = rank == 2 ? byte(b) & 1 : 0;
		switch (byte(b) % 3) {
		case 0:
			alt[at] = 0;
			break;
		case 1:
			alt[at] = dims[at] + 1;
			break;
		default:
			alt[at] = dims[at] > 1 ? dims[at] - 1 : 2;
			break;
		}
		free(vals);
		vals = calloc(alt[0] * alt[1] + 1, esize);
		if (!vals) {
			abort();
		}
		ds = put_dataset(f, name, ftype, mtype, rank, alt, vals, true);
		break;
	case 5:
		/* a value that is not finite */
		judge(b, REFUSED);
		at = byte(b) % count;
		if (is_double) {
			((double *)vals)[at] = byte(b) & 1 ? NAN : -INFINITY;
		} else {
			((float *)vals)[at] = byte(b) & 1 ? NAN : INFINITY;
		}
		ds = put_dataset(f, name, ftype, mtype, rank, dims, vals, true);
		break;
	case 6:
		/* not chunked, no checksum: the header does not say */
		judge(b, EITHER);
		ds = put_dataset(f, name, ftype, mtype, rank, dims, vals,
				 false);
		memcpy(want, vals, count * esize);
		*known = true;
		break;
	case 7:
		/* values from the input (refused if one is not finite) */
		for (size_t k = 0; k < count * esize && b->i < b->n; k++) {
			vals[k] = (unsigned char)byte(b);
		}
		for (size_t k = 0; k < count; k++) {
			double v = is_double ? ((double *)vals)[k]
					     : ((float *)vals)[k];

			if (!isfinite(v)) {
				judge(b, REFUSED);
			}
		}
		ds = put_dataset(f, name, ftype, mtype, rank, dims, vals, true);
		memcpy(want, vals, count * esize);
		*known = true;
		break;
	case 8:
		judge(b, REFUSED); /* a group, not a dataset */
		H5Gclose(H5Gcreate2(f, name, H5P_DEFAULT, H5P_DEFAULT,
				    H5P_DEFAULT));
		break;
	case 9:
		/* stored in the other float width: converted on reading */
		ds = put_dataset(f, name,
				 is_double ? H5T_IEEE_F32LE : H5T_IEEE_F64LE,
				 mtype, rank, dims, vals, true);
		for (size_t k = 0; k < count && is_double; k++) {
			((double *)vals)[k] = (float)((double *)vals)[k];
		}
		memcpy(want, vals, count * esize);
		*known = true;
		break;
	default:
		ds = put_dataset(f, name, ftype, mtype, rank, dims, vals, true);
		memcpy(want, vals, count * esize);
		*known = true;
		break;
	}
	free(vals);
	return ds;
}

/* geometry/lenslets or geometry/actuators: int32 [n][2]. */
static hid_t positions(struct build *b, hid_t geo, const char *name,
		       const int *col, const int *row, int n)
{
	hsize_t dims[2] = {(hsize_t)n, 2}, one = (hsize_t)n * 2;
	int *pairs = calloc(2 * (size_t)n + 8, sizeof(int));
	double *dpairs;
	hid_t ds = -1;

	if (!pairs) {
		abort();
	}
	for (int k = 0; k < n; k++) {
		pairs[2 * k] = col[k];
		pairs[2 * k + 1] = row[k];
	}
	switch (pick(b, 9)) {
	case 1:
		judge(b, REFUSED); /* missing */
		break;
	case 2:
		/* one position moved: not the running grid */
		judge(b, REFUSED);
		pairs[byte(b) % (2 * (size_t)n)] += 1 + (int)(byte(b) % 5);
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2,
				 dims, pairs, true);
		break;
	case 3:
		judge(b, REFUSED); /* N x 3 */
		dims[1] = 3;
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2,
				 dims, NULL, true);
		break;
	case 4:
		judge(b, REFUSED); /* one position more */
		dims[0] = (hsize_t)n + 1;
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2,
				 dims, pairs, true);
		break;
	case 5:
		judge(b, REFUSED); /* floating point */
		dpairs = calloc(2 * (size_t)n, sizeof(double));
		if (!dpairs) {
			abort();
		}
		for (int k = 0; k < 2 * n; k++) {
			dpairs[k] = pairs[k];
		}
		ds = put_dataset(geo, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE,
				 2, dims, dpairs, true);
		free(dpairs);
		break;
	case 6:
		judge(b, REFUSED); /* no positions at all: 0 x 2 */
		dims[0] = 0;
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2,
				 dims, NULL, true);
		break;
	case 7:
		judge(b, REFUSED); /* rank 1 */
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 1,
				 &one, pairs, true);
		break;
	case 8:
		/* 16-bit integers: converted on reading */
		{
			short *s16 = calloc(2 * (size_t)n, sizeof(short));

			if (!s16) {
				abort();
			}
			for (int k = 0; k < 2 * n; k++) {
				s16[k] = (short)pairs[k];
			}
			ds = put_dataset(geo, name, H5T_STD_I16LE,
					 H5T_NATIVE_SHORT, 2, dims, s16, true);
			free(s16);
		}
		break;
	default:
		ds = put_dataset(geo, name, H5T_STD_I32LE, H5T_NATIVE_INT, 2,
				 dims, pairs, true);
		break;
	}
	free(pairs);
	return ds;
}

/* Write the whole file as the decisions say. */
/* The /report group, copied whole, then one deviation by b->report_form. */
static void report_group(struct build *b, hid_t f)
{
	hid_t src = H5Fopen(g.report_src, H5F_ACC_RDONLY, H5P_DEFAULT);
	int n = g.report->diag->n_act, ints[64];
	double v[64];
	hsize_t dims[1] = {(hsize_t)n - 1};
	hid_t ds;

	if (src < 0 || n > 64 ||
	    H5Ocopy(src, "report", f, "report", H5P_DEFAULT, H5P_DEFAULT) <
		    0) {
		abort();
	}
	H5Fclose(src);
	if (b->report_form != 0) {
		judge(b, REFUSED); /* every deviation below is refused */
	}
	switch (b->report_form) {
	case 1: /* a flag bit no version knows */
		for (int k = 0; k < n; k++) {
			ints[k] = (int)g.report->diag->act[k].flags;
		}
		ints[n - 1] |= 1 << 9;
		ds = H5Dopen2(f, "report/flags", H5P_DEFAULT);
		H5Dwrite(ds, H5T_NATIVE_INT, H5S_ALL, H5S_ALL, H5P_DEFAULT,
			 ints);
		H5Dclose(ds);
		break;
	case 2: /* 0 swapped with 2, but 2 names 1 */
		for (int k = 0; k < n; k++) {
			ints[k] = g.report->diag->act[k].partner;
		}
		ints[2] = 1;
		ds = H5Dopen2(f, "report/partner", H5P_DEFAULT);
		H5Dwrite(ds, H5T_NATIVE_INT, H5S_ALL, H5S_ALL, H5P_DEFAULT,
			 ints);
		H5Dclose(ds);
		break;
	case 3:
		H5Adelete_by_name(f, "report", "noise_rms", H5P_DEFAULT);
		break;
	case 4:
		H5Ldelete(f, "report/expected_centroid", H5P_DEFAULT);
		break;
	case 5: /* one actuator short */
		H5Ldelete(f, "report/norm", H5P_DEFAULT);
		for (int k = 0; k < n; k++) {
			v[k] = g.report->diag->act[k].norm;
		}
		ds = put_dataset(f, "report/norm", H5T_IEEE_F64LE,
				 H5T_NATIVE_DOUBLE, 1, dims, v, true);
		if (ds >= 0) {
			H5Dclose(ds);
		}
		break;
	case 6: {
		hid_t grp = H5Gopen2(f, "report", H5P_DEFAULT);
		int modes = g.report->diag->n_sv + 1;

		H5Adelete(grp, "modes");
		put_attr(grp, "modes", H5T_STD_I32LE, H5T_NATIVE_INT, 0, NULL,
			 &modes);
		H5Gclose(grp);
		break;
	}
	case 7: /* a norm that is no number */
		for (int k = 0; k < n; k++) {
			v[k] = g.report->diag->act[k].norm;
		}
		v[1] = NAN;
		ds = H5Dopen2(f, "report/norm", H5P_DEFAULT);
		H5Dwrite(ds, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT,
			 v);
		H5Dclose(ds);
		break;
	}
}

static void build_file(struct build *b)
{
	const wt_calibration *c = g.base;
	hsize_t d[2];
	hid_t f, ds, geo;
	int ppl = PPL;

	f = H5Fcreate(g.path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
	if (f < 0) {
		abort();
	}
	/* root attributes */
	if (!string_obj(b, f, "format", WT_STORE_FORMAT, false, REFUSED)) {
		judge(b, EITHER);
	}
	if (b->i < b->n && b->d[b->i] >= 250) {
		/* another file format altogether */
		b->i++;
		judge(b, REFUSED);
		H5Adelete(f, "format");
		string_obj(b, f, "format", "wavetrim calibratio", false,
			   REFUSED);
	}
	int_attr(b, f, "format_version", WT_STORE_FORMAT_VERSION, false);
	/* the layout lists it; a reader could also do without */
	b->strings_known =
		string_obj(b, f, "created", c->created, false, EITHER);

	d[0] = (hsize_t)c->n_slopes;
	d[1] = (hsize_t)c->n_act;
	ds = matrix(b, f, "interaction_matrix", 2, d, true, c->interaction,
		    b->interaction, &b->known[0]);
	if (ds >= 0) {
		H5Dclose(ds);
	}
	d[0] = (hsize_t)c->n_act;
	d[1] = (hsize_t)c->n_slopes;
	ds = matrix(b, f, "control_matrix", 2, d, false, c->control, b->control,
		    &b->known[1]);
	b->modes = c->modes;
	b->modes_known = ds >= 0;
	if (ds >= 0) {
		if (b->i < b->n && b->d[b->i] < 64) {
			/* another modes value in range */
			b->modes = (int)(byte(b) % (unsigned)(c->n_sv + 1));
		}
		int_attr(b, ds, "modes", b->modes, true);
		H5Dclose(ds);
	} else {
		judge(b, EITHER); /* refused already unless it is a group */
	}
	d[0] = (hsize_t)c->n_sv;
	ds = matrix(b, f, "singular_values", 1, d, true, c->singular_values,
		    b->sv, &b->known[2]);
	if (ds >= 0) {
		H5Dclose(ds);
	}
	d[0] = (hsize_t)c->n_slopes;
	ds = matrix(b, f, "reference_slopes", 1, d, false, c->reference,
		    b->reference, &b->known[3]);
	if (ds >= 0) {
		H5Dclose(ds);
	}
	d[0] = (hsize_t)c->n_act;
	ds = matrix(b, f, "flat", 1, d, false, c->flat, b->flat, &b->known[4]);
	if (ds >= 0) {
		H5Dclose(ds);
	}

	if (pick(b, 8) == 7) {
		judge(b, REFUSED); /* no geometry group */
	} else {
		geo = H5Gcreate2(f, "geometry", H5P_DEFAULT, H5P_DEFAULT,
				 H5P_DEFAULT);
		ds = positions(b, geo, "lenslets", c->subap_col, c->subap_row,
			       c->n_subaps);
		if (ds >= 0) {
			int_attr(b, ds, "n", c->lenslets_n, false);
			int_attr(b, ds, "pixels_per_lenslet", ppl, false);
			H5Dclose(ds);
		}
		ds = positions(b, geo, "actuators", c->act_col, c->act_row,
			       c->n_act);
		if (ds >= 0) {
			int_attr(b, ds, "n", c->actuators_n, false);
			H5Dclose(ds);
		}
		H5Gclose(geo);
	}

	/* the config text: the base one, or text from the input */
	free(b->config);
	if (b->i < b->n && b->d[b->i] >= 224) {
		size_t len = (b->d[b->i++] - 224u) * 64;

		b->config = calloc(len + 1, 1);
		if (!b->config) {
			abort();
		}
		for (size_t k = 0; k < len; k++) {
			b->config[k] = (char)(byte(b) | 1);
		}
	} else {
		b->config = strdup(c->config_ini);
	}
	if (!string_obj(b, f, "config", b->config, true, REFUSED)) {
		b->strings_known = false;
	}
	b->report_form = -1;
	if (b->i < b->n && b->d[b->i] >= 200 && b->d[b->i] < 224) {
		b->report_form = (byte(b) - 200) % 8;
		report_group(b, f);
	}
	if (H5Fclose(f) < 0) {
		abort();
	}
	FUZZ_CHECK(H5Fget_obj_count(H5F_OBJ_ALL, H5F_OBJ_ALL) == 0,
		   "the builder left HDF5 objects open");
}

/*
 * Damage the written file: flip bytes, or cut it; or take it away, or put
 * a folder in its place.  Returns the code the load must give, or 0 when
 * the load may do either.
 */
static int damage(struct build *b)
{
	unsigned mode = byte(b);
	struct stat st;
	int fd;

	if (mode < 224) {
		return 0;
	}
	if (mode >= 252) {
		b->damaged = true;
		judge(b, REFUSED);
		if (unlink(g.path) != 0) {
			abort();
		}
		if (mode < 254) {
			return -ENOENT; /* "no such file" */
		}
		if (mkdir(g.path, 0700) != 0) {
			abort();
		}
		return -EINVAL; /* not a regular file */
	}
	fd = open(g.path, O_RDWR);
	if (fd < 0 || fstat(fd, &st) != 0 || st.st_size < 1) {
		abort();
	}
	b->damaged = true;
	judge(b, EITHER);
	if (mode < 248) {
		/* flip 1..4 bytes at offsets from the input */
		for (unsigned k = 0; k <= mode % 4; k++) {
			off_t at = (off_t)((byte(b) << 8 | byte(b)) %
					   (unsigned)st.st_size);
			unsigned char c;

			if (pread(fd, &c, 1, at) != 1) {
				abort();
			}
			c ^= (unsigned char)(byte(b) | 1);
			if (pwrite(fd, &c, 1, at) != 1) {
				abort();
			}
		}
	} else if (ftruncate(fd, (off_t)((byte(b) << 8 | byte(b)) %
					 (unsigned)st.st_size)) != 0) {
		abort();
	}
	close(fd);
	return 0;
}

/* ------------------------------------------------------------------ */
/* Checks                                                              */

static bool all_finite(const wt_calibration *c)
{
	size_t nm = (size_t)c->n_slopes * (size_t)c->n_act;

	for (size_t k = 0; k < nm; k++) {
		if (!isfinite(c->interaction[k]) || !isfinite(c->control[k])) {
			return false;
		}
	}
	for (int k = 0; k < c->n_sv; k++) {
		if (!isfinite(c->singular_values[k])) {
			return false;
		}
	}
	for (int k = 0; k < c->n_slopes; k++) {
		if (!isfinite(c->reference[k])) {
			return false;
		}
	}
	for (int k = 0; k < c->n_act; k++) {
		if (!isfinite(c->flat[k])) {
			return false;
		}
	}
	return true;
}

static bool same_calibration(const wt_calibration *a, const wt_calibration *b)
{
	size_t nm = (size_t)a->n_slopes * (size_t)a->n_act;

	return a->n_slopes == b->n_slopes && a->n_act == b->n_act &&
	       a->n_sv == b->n_sv && a->modes == b->modes &&
	       !memcmp(a->interaction, b->interaction, nm * sizeof(double)) &&
	       !memcmp(a->control, b->control, nm * sizeof(float)) &&
	       !memcmp(a->singular_values, b->singular_values,
		       (size_t)a->n_sv * sizeof(double)) &&
	       !memcmp(a->reference, b->reference,
		       (size_t)a->n_slopes * sizeof(float)) &&
	       !memcmp(a->flat, b->flat, (size_t)a->n_act * sizeof(float)) &&
	       a->lenslets_n == b->lenslets_n &&
	       a->actuators_n == b->actuators_n &&
	       a->pixels_per_lenslet == b->pixels_per_lenslet &&
	       !strcmp(a->config_ini, b->config_ini) &&
	       !strcmp(a->created, b->created);
}

/* A refusal: documented code, "path: reason", *out untouched. */
static void check_refusal(int rc, const wt_error *err, const char *path,
			  wt_calibration *out, wt_calibration *sentinel)
{
	size_t plen = strlen(path);

	FUZZ_CHECK(rc == -ENOENT || rc == -EIO || rc == -EINVAL ||
			   rc == -WT_EMISMATCH,
		   "load refused with undocumented code %d: %s", rc, err->msg);
	FUZZ_CHECK(err->code == rc && !strncmp(err->msg, path, plen) &&
			   err->msg[plen] == ':' && err->msg[plen + 1] == ' ' &&
			   err->msg[plen + 2] != '\0',
		   "message is not 'path: reason' (code %d): %s", err->code,
		   err->msg);
	FUZZ_CHECK(out == sentinel, "refused load returned a calibration");
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static struct build b;
	const wt_calibration *c = g.base;
	size_t nm = (size_t)c->n_slopes * (size_t)c->n_act;
	wt_calibration sentinel, *out = &sentinel, *again = &sentinel;
	wt_error err;
	int rc, want;

	if (!b.interaction) {
		b.interaction = calloc(nm, sizeof(double));
		b.control = calloc(nm, sizeof(float));
		b.sv = calloc((size_t)c->n_sv, sizeof(double));
		b.reference = calloc((size_t)c->n_slopes, sizeof(float));
		b.flat = calloc((size_t)c->n_act, sizeof(float));
	}
	b.d = data;
	b.n = size;
	b.i = 0;
	b.verdict = ALLOWED;
	b.damaged = false;
	build_file(&b);
	want = damage(&b);

	rc = wt_store_load(g.path, g.lenslets, g.actuators, PPL, &out, &err);
	if (want == -EINVAL) {
		rmdir(g.path);
	}
	FUZZ_CHECK(want == 0 || rc == want, "load gave %d, want %d: %s", rc,
		   want, err.msg);
	FUZZ_CHECK(H5Fget_obj_count(H5F_OBJ_ALL, H5F_OBJ_ALL) == 0,
		   "wt_store_load left %ld HDF5 objects open (rc %d)",
		   (long)H5Fget_obj_count(H5F_OBJ_ALL, H5F_OBJ_ALL), rc);
	if (rc != 0) {
		check_refusal(rc, &err, g.path, out, &sentinel);
		FUZZ_CHECK(b.verdict != ALLOWED,
			   "a file the layout allows was refused: %s", err.msg);
		return 0;
	}
	FUZZ_CHECK(b.verdict != REFUSED,
		   "a file the layout refuses was loaded");
	FUZZ_CHECK(out && out != &sentinel &&
			   wt_calibration_check(out, g.lenslets, g.actuators,
						PPL, &err) == 0,
		   "loaded calibration does not fit the grids: %s", err.msg);
	FUZZ_CHECK(all_finite(out) && out->modes >= 0 &&
			   out->modes <= out->n_sv &&
			   strlen(out->created) < sizeof(out->created),
		   "loaded calibration holds invalid values");
	/* value for value what was written (numbers are checksummed, so
	 * this holds after damage too) */
	FUZZ_CHECK(!b.known[0] || !memcmp(out->interaction, b.interaction,
					  nm * sizeof(double)),
		   "interaction matrix differs from the file's%s",
		   b.damaged ? " (damaged file)" : "");
	FUZZ_CHECK(!b.known[1] ||
			   !memcmp(out->control, b.control, nm * sizeof(float)),
		   "control matrix differs from the file's%s",
		   b.damaged ? " (damaged file)" : "");
	FUZZ_CHECK(!b.known[2] || !memcmp(out->singular_values, b.sv,
					  (size_t)c->n_sv * sizeof(double)),
		   "singular values differ from the file's%s",
		   b.damaged ? " (damaged file)" : "");
	FUZZ_CHECK(!b.known[3] || !memcmp(out->reference, b.reference,
					  (size_t)c->n_slopes * sizeof(float)),
		   "reference slopes differ from the file's%s",
		   b.damaged ? " (damaged file)" : "");
	FUZZ_CHECK(!b.known[4] || !memcmp(out->flat, b.flat,
					  (size_t)c->n_act * sizeof(float)),
		   "flat differs from the file's%s",
		   b.damaged ? " (damaged file)" : "");
	/* the report: there exactly when one was written (a damaged one
	 * is refused, not dropped), the one written when the file is whole */
	FUZZ_CHECK((out->report != NULL) == (b.report_form == 0),
		   "report %s, the builder wrote form %d",
		   out->report ? "loaded" : "absent", b.report_form);
	if (out->report && !b.damaged) {
		for (int k = 0; k < out->n_act; k++) {
			FUZZ_CHECK(out->report->diag->act[k].flags ==
						   g.report->diag->act[k].flags &&
					   out->report->diag->act[k].partner ==
						   g.report->diag->act[k]
							   .partner,
				   "report of actuator %d differs", k);
		}
	}
	if (!b.damaged) {
		/* attributes and strings carry no checksum: compared only
		 * when the file is whole */
		FUZZ_CHECK(!b.modes_known || out->modes == b.modes,
			   "modes %d, the file has %d", out->modes, b.modes);
		if (b.strings_known) {
			FUZZ_CHECK(!strcmp(out->config_ini, b.config),
				   "config text differs from the file's");
			FUZZ_CHECK(!strncmp(out->created, c->created,
					    sizeof(out->created) - 1),
				   "created '%s', the file has '%s'",
				   out->created, c->created);
		}
	}

	/* save and load again: the same calibration */
	rc = wt_store_save(g.path2, out, &err);
	FUZZ_CHECK(rc == 0, "a loaded calibration does not save: %s", err.msg);
	rc = wt_store_load(g.path2, g.lenslets, g.actuators, PPL, &again, &err);
	FUZZ_CHECK(rc == 0 && same_calibration(out, again) &&
			   (again->report != NULL) == (out->report != NULL),
		   "saved calibration loads back different (%d: %s)", rc,
		   err.msg);
	FUZZ_CHECK(H5Fget_obj_count(H5F_OBJ_ALL, H5F_OBJ_ALL) == 0,
		   "save or load left HDF5 objects open");
	wt_calibration_destroy(out);
	wt_calibration_destroy(again);
	return 0;
}
