/*
 * wt_recording.c - write telemetry recordings to HDF5 (layout in
 * wt_recording.h).
 */
#include "wt_recording.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <hdf5.h>

#include "wt_request.h"

/* Frames per HDF5 chunk. */
#define CHUNK_FRAMES 256

enum col {
	C_FRAME_ID,
	C_DRIVER_NS,
	C_RECV_NS,
	C_SEND_NS,
	C_LATENCY,
	C_STATE,
	C_FLAGS,
	C_INVALID,
	C_CLIPPED,
	C_RMS,
	C_SLOPES,
	C_FLUX,
	C_COMMANDS,
	N_COLS
};

static const struct {
	const char *name;
	int width; /* 0: scalar per frame, else 1 = 2N, 2 = N, 3 = A */
} cols[N_COLS] = {
	[C_FRAME_ID] = {"frame_id", 0},	  [C_DRIVER_NS] = {"driver_ns", 0},
	[C_RECV_NS] = {"recv_ns", 0},	  [C_SEND_NS] = {"send_ns", 0},
	[C_LATENCY] = {"latency_us", 0},  [C_STATE] = {"state", 0},
	[C_FLAGS] = {"flags", 0},	  [C_INVALID] = {"n_invalid", 0},
	[C_CLIPPED] = {"n_clipped", 0},	  [C_RMS] = {"residual_rms", 0},
	[C_SLOPES] = {"slopes", 1},	  [C_FLUX] = {"flux", 2},
	[C_COMMANDS] = {"commands", 3},
};

struct wt_recording {
	hid_t f;
	hid_t ds[N_COLS];
	int n_subaps, n_act;
	long long frames, requested;
};

static hid_t file_type(enum col c)
{
	switch (c) {
	case C_FRAME_ID:
	case C_DRIVER_NS:
	case C_RECV_NS:
	case C_SEND_NS:
		return H5T_STD_U64LE;
	case C_LATENCY:
		return H5T_IEEE_F64LE;
	case C_STATE:
		return H5T_STD_U16LE;
	case C_FLAGS:
	case C_INVALID:
	case C_CLIPPED:
		return H5T_STD_U32LE;
	default:
		return H5T_IEEE_F32LE;
	}
}

static hid_t mem_type(enum col c)
{
	switch (c) {
	case C_FRAME_ID:
	case C_DRIVER_NS:
	case C_RECV_NS:
	case C_SEND_NS:
		return H5T_NATIVE_UINT64;
	case C_LATENCY:
		return H5T_NATIVE_DOUBLE;
	case C_STATE:
		return H5T_NATIVE_UINT16;
	case C_FLAGS:
	case C_INVALID:
	case C_CLIPPED:
		return H5T_NATIVE_UINT32;
	default:
		return H5T_NATIVE_FLOAT;
	}
}

static size_t elem_bytes(enum col c)
{
	return H5Tget_size(mem_type(c));
}

static hsize_t width_of(const wt_recording *r, enum col c)
{
	switch (cols[c].width) {
	case 1:
		return 2 * (hsize_t)r->n_subaps;
	case 2:
		return (hsize_t)r->n_subaps;
	case 3:
		return (hsize_t)r->n_act;
	default:
		return 1;
	}
}

/* A scalar attribute of an HDF5 type, from memory of mem. */
static int attr_scalar(hid_t obj, const char *name, hid_t ftype, hid_t mtype,
		       const void *v)
{
	hid_t space = H5Screate(H5S_SCALAR), a = -1;
	int rc = -1;

	if (H5Aexists(obj, name) > 0) {
		H5Adelete(obj, name);
	}
	if (space >= 0) {
		a = H5Acreate2(obj, name, ftype, space, H5P_DEFAULT,
			       H5P_DEFAULT);
	}
	if (a >= 0 && H5Awrite(a, mtype, v) >= 0) {
		rc = 0;
	}
	if (a >= 0) {
		H5Aclose(a);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return rc;
}

static int attr_i64(hid_t obj, const char *name, long long v)
{
	int64_t x = v;

	return attr_scalar(obj, name, H5T_STD_I64LE, H5T_NATIVE_INT64, &x);
}

static int attr_i32(hid_t obj, const char *name, int v)
{
	return attr_scalar(obj, name, H5T_STD_I32LE, H5T_NATIVE_INT, &v);
}

static int attr_string(hid_t obj, const char *name, const char *text)
{
	hid_t t = H5Tcopy(H5T_C_S1);
	int rc = -1;

	if (t >= 0 && H5Tset_size(t, strlen(text) + 1) >= 0 &&
	    H5Tset_strpad(t, H5T_STR_NULLTERM) >= 0 &&
	    H5Tset_cset(t, H5T_CSET_UTF8) >= 0) {
		rc = attr_scalar(obj, name, t, t, text);
	}
	if (t >= 0) {
		H5Tclose(t);
	}
	return rc;
}

static int string_dataset(hid_t loc, const char *name, const char *text)
{
	hid_t t = H5Tcopy(H5T_C_S1), space = H5Screate(H5S_SCALAR), ds = -1;
	int rc = -1;

	if (t >= 0 && space >= 0 && H5Tset_size(t, strlen(text) + 1) >= 0 &&
	    H5Tset_cset(t, H5T_CSET_UTF8) >= 0) {
		ds = H5Dcreate2(loc, name, t, space, H5P_DEFAULT, H5P_DEFAULT,
				H5P_DEFAULT);
	}
	if (ds >= 0 &&
	    H5Dwrite(ds, t, H5S_ALL, H5S_ALL, H5P_DEFAULT, text) >= 0) {
		rc = 0;
	}
	if (ds >= 0) {
		H5Dclose(ds);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	if (t >= 0) {
		H5Tclose(t);
	}
	return rc;
}

/* An empty extendible dataset [0] or [0][w]. */
static hid_t make_column(wt_recording *r, enum col c)
{
	hsize_t w = width_of(r, c);
	int rank = cols[c].width ? 2 : 1;
	hsize_t dims[2] = {0, w}, max[2] = {H5S_UNLIMITED, w};
	hsize_t chunk[2] = {CHUNK_FRAMES, w};
	hid_t space = H5Screate_simple(rank, dims, max);
	hid_t dcpl = H5Pcreate(H5P_DATASET_CREATE), ds = -1;

	if (space >= 0 && dcpl >= 0 && H5Pset_chunk(dcpl, rank, chunk) >= 0) {
		ds = H5Dcreate2(r->f, cols[c].name, file_type(c), space,
				H5P_DEFAULT, dcpl, H5P_DEFAULT);
	}
	if (dcpl >= 0) {
		H5Pclose(dcpl);
	}
	if (space >= 0) {
		H5Sclose(space);
	}
	return ds;
}

static void utc_now(char *buf, size_t len)
{
	time_t now = time(NULL);
	struct tm tm;

	if (!gmtime_r(&now, &tm) ||
	    strftime(buf, len, "%Y-%m-%dT%H:%M:%SZ", &tm) == 0) {
		buf[0] = '\0';
	}
}

/* Close everything of r that is open; free r. */
static int drop(wt_recording *r)
{
	int rc = 0, c;

	for (c = 0; c < N_COLS; c++) {
		if (r->ds[c] >= 0 && H5Dclose(r->ds[c]) < 0) {
			rc = -1;
		}
	}
	if (r->f >= 0 && H5Fclose(r->f) < 0) {
		rc = -1;
	}
	free(r);
	return rc;
}

int wt_recording_create(const char *path, int n_subaps, int n_act,
			long long frames_requested, const char *config_ini,
			wt_recording **out, wt_error *err)
{
	wt_recording *r;
	char created[32];
	int c, bad = 0, sys = 0;

	if (!path || !out || !path[0]) {
		return wt_error_set(err, -EINVAL, "no file name");
	}
	if (n_subaps < 1 || n_act < 1 || frames_requested < 1) {
		return wt_error_set(err, -EINVAL,
				    "recording of %d subapertures, %d "
				    "actuators, %lld frames",
				    n_subaps, n_act, frames_requested);
	}
	r = calloc(1, sizeof(*r));
	if (!r) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	r->n_subaps = n_subaps;
	r->n_act = n_act;
	r->requested = frames_requested;
	for (c = 0; c < N_COLS; c++) {
		r->ds[c] = -1;
	}
	utc_now(created, sizeof(created));
	errno = 0;
	H5E_BEGIN_TRY
	{
		r->f = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT,
				 H5P_DEFAULT);
		if (r->f < 0) {
			bad = 1;
			sys = errno;
		}
		for (c = 0; c < N_COLS && !bad; c++) {
			r->ds[c] = make_column(r, (enum col)c);
			bad = r->ds[c] < 0;
		}
		if (!bad) {
			bad = attr_string(r->f, "format",
					  WT_RECORDING_FORMAT) < 0 ||
			      attr_i32(r->f, "format_version",
				       WT_RECORDING_FORMAT_VERSION) < 0 ||
			      attr_string(r->f, "created", created) < 0 ||
			      attr_i32(r->f, "n_subaps", n_subaps) < 0 ||
			      attr_i32(r->f, "n_act", n_act) < 0 ||
			      attr_i64(r->f, "frames_requested",
				       frames_requested) < 0 ||
			      attr_string(r->ds[C_STATE], "names",
					  "open calibrating closed held "
					  "fault") < 0 ||
			      string_dataset(r->f, "config",
					     config_ini ? config_ini : "") <
				      0 ||
			      H5Fflush(r->f, H5F_SCOPE_LOCAL) < 0;
		}
		if (bad) {
			drop(r);
		}
	}
	H5E_END_TRY;
	if (bad) {
		if (!sys) {
			sys = errno;
		}
		return wt_error_set(err, -EIO,
				    "%s: cannot create the recording%s%s", path,
				    sys ? ": " : "", sys ? strerror(sys) : "");
	}
	*out = r;
	return 0;
}

void wt_recording_process_init(void)
{
	H5dont_atexit();
}

long long wt_recording_frames(const wt_recording *r)
{
	return r ? r->frames : 0;
}

/* Gather column c of count records into buf. */
static void gather(const wt_recording *r, enum col c, const void *records,
		   size_t stride, int count, void *buf)
{
	size_t n2 = 2 * (size_t)r->n_subaps;
	int k;

	for (k = 0; k < count; k++) {
		const uint8_t *p = (const uint8_t *)records + (size_t)k * stride;
		const float *a = (const float *)(p + WT_FRAME_HEADER_BYTES);
		wt_frame_record h;

		memcpy(&h, p, sizeof(h));
		switch (c) {
		case C_FRAME_ID:
			((uint64_t *)buf)[k] = h.frame_id;
			break;
		case C_DRIVER_NS:
			((uint64_t *)buf)[k] = h.driver_ns;
			break;
		case C_RECV_NS:
			((uint64_t *)buf)[k] = h.recv_ns;
			break;
		case C_SEND_NS:
			((uint64_t *)buf)[k] = h.send_ns;
			break;
		case C_LATENCY:
			((double *)buf)[k] =
				(double)(int64_t)(h.send_ns - h.recv_ns) / 1e3;
			break;
		case C_STATE:
			((uint16_t *)buf)[k] = h.state;
			break;
		case C_FLAGS:
			((uint32_t *)buf)[k] = h.flags;
			break;
		case C_INVALID:
			((uint32_t *)buf)[k] = h.n_invalid;
			break;
		case C_CLIPPED:
			((uint32_t *)buf)[k] = h.n_clipped;
			break;
		case C_RMS:
			((float *)buf)[k] = h.residual_rms;
			break;
		case C_SLOPES:
			memcpy((float *)buf + (size_t)k * n2, a,
			       sizeof(float) * n2);
			break;
		case C_FLUX:
			memcpy((float *)buf + (size_t)k * (size_t)r->n_subaps,
			       a + n2, sizeof(float) * (size_t)r->n_subaps);
			break;
		case C_COMMANDS:
			memcpy((float *)buf + (size_t)k * (size_t)r->n_act,
			       a + n2 + r->n_subaps,
			       sizeof(float) * (size_t)r->n_act);
			break;
		default:
			break;
		}
	}
}

static int append_column(wt_recording *r, enum col c, const void *records,
			 size_t stride, int count, void *buf)
{
	hsize_t w = width_of(r, c);
	int rank = cols[c].width ? 2 : 1;
	hsize_t size[2] = {(hsize_t)r->frames + (hsize_t)count, w};
	hsize_t start[2] = {(hsize_t)r->frames, 0};
	hsize_t n[2] = {(hsize_t)count, w};
	hid_t fs = -1, ms = -1;
	int rc = -1;

	gather(r, c, records, stride, count, buf);
	if (H5Dset_extent(r->ds[c], size) < 0) {
		return -1;
	}
	fs = H5Dget_space(r->ds[c]);
	ms = H5Screate_simple(rank, n, NULL);
	if (fs >= 0 && ms >= 0 &&
	    H5Sselect_hyperslab(fs, H5S_SELECT_SET, start, NULL, n, NULL) >=
		    0 &&
	    H5Dwrite(r->ds[c], mem_type(c), ms, fs, H5P_DEFAULT, buf) >= 0) {
		rc = 0;
	}
	if (ms >= 0) {
		H5Sclose(ms);
	}
	if (fs >= 0) {
		H5Sclose(fs);
	}
	return rc;
}

int wt_recording_append(wt_recording *r, const void *records, size_t stride,
			int count, wt_error *err)
{
	size_t most = 0, need = wt_frame_record_bytes((size_t)r->n_subaps,
						      (size_t)r->n_act);
	void *buf;
	int c, k, bad = 0, sys;

	if (!r || (!records && count > 0) || count < 0 || stride < need) {
		return wt_error_set(err, -EINVAL, "bad append");
	}
	for (k = 0; k < count; k++) {
		wt_frame_record h;

		memcpy(&h, (const uint8_t *)records + (size_t)k * stride,
		       sizeof(h));
		if (h.n_subaps != (uint32_t)r->n_subaps ||
		    h.n_act != (uint32_t)r->n_act) {
			return wt_error_set(err, -EINVAL,
					    "frame record of %u subapertures "
					    "and %u actuators in a recording "
					    "of %d and %d",
					    h.n_subaps, h.n_act, r->n_subaps,
					    r->n_act);
		}
	}
	if (count == 0) {
		return 0;
	}
	for (c = 0; c < N_COLS; c++) {
		size_t b = elem_bytes((enum col)c) * width_of(r, (enum col)c);

		most = b > most ? b : most;
	}
	buf = malloc(most * (size_t)count);
	if (!buf) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	errno = 0;
	H5E_BEGIN_TRY
	{
		for (c = 0; c < N_COLS && !bad; c++) {
			bad = append_column(r, (enum col)c, records, stride,
					    count, buf) < 0;
		}
		if (!bad) {
			bad = H5Fflush(r->f, H5F_SCOPE_LOCAL) < 0;
		}
	}
	H5E_END_TRY;
	sys = errno;
	free(buf);
	if (bad) {
		return wt_error_set(err, -EIO,
				    "writing frames %lld..%lld failed: %s",
				    r->frames, r->frames + count - 1,
				    sys ? strerror(sys)
					: "disk full or failing?");
	}
	r->frames += count;
	return 0;
}

int wt_recording_close(wt_recording *r, long long frames_lost,
		       long long telemetry_dropped, const char *error,
		       wt_error *err)
{
	int bad;

	if (!r) {
		return 0;
	}
	H5E_BEGIN_TRY
	{
		bad = attr_i64(r->f, "frames", r->frames) < 0 ||
		      attr_i64(r->f, "frames_lost", frames_lost) < 0 ||
		      attr_i64(r->f, "telemetry_dropped", telemetry_dropped) <
			      0 ||
		      attr_i32(r->f, "complete",
			       r->frames == r->requested && frames_lost == 0 &&
				       telemetry_dropped == 0 &&
				       (!error || !error[0])) < 0 ||
		      attr_string(r->f, "error", error ? error : "") < 0;
		bad = drop(r) < 0 || bad;
	}
	H5E_END_TRY;
	if (bad) {
		return wt_error_set(err, -EIO,
				    "closing the recording failed (disk full "
				    "or failing?)");
	}
	return 0;
}
