/*
 * test_recording.c - lib/wt_recording: frames appended in blocks come back,
 * read with the HDF5 library's own calls, exactly as written; bad records
 * and unwritable files are refused with a reason.
 */
#include "wt_test.h"

#include <errno.h>
#include <string.h>
#include <unistd.h>

#include <hdf5.h>

#include "wt_recording.h"
#include "wt_request.h"

#define N 5 /* subapertures */
#define A 3 /* actuators */
#define F 300

static size_t stride(void)
{
	return wt_frame_record_bytes(N, A);
}

/* Frame record k: every field a known function of k. */
static void fill(uint8_t *p, int k)
{
	wt_frame_record h = {0};
	float *a = (float *)(p + WT_FRAME_HEADER_BYTES);

	memcpy(h.magic, WT_FRAME_MAGIC, 4);
	h.version = WT_FRAME_VERSION;
	h.state = (uint16_t)(k % 5);
	h.frame_id = 1000 + (uint64_t)k;
	h.driver_ns = 7 * (uint64_t)k;
	h.recv_ns = 1000000 + 1000 * (uint64_t)k;
	h.send_ns = h.recv_ns + 250 + (uint64_t)k;
	h.n_subaps = N;
	h.n_act = A;
	h.n_invalid = (uint32_t)(k % 3);
	h.n_clipped = (uint32_t)(k % 2);
	h.residual_rms = 0.5f * (float)k;
	h.flags = (uint32_t)(k & 7);
	memcpy(p, &h, sizeof(h));
	for (int i = 0; i < 3 * N + A; i++) {
		a[i] = (float)k + 0.01f * (float)i;
	}
}

static void read_all(hid_t f, const char *name, hid_t type, void *buf)
{
	hid_t ds = H5Dopen2(f, name, H5P_DEFAULT);

	assert_true(ds >= 0);
	assert_true(H5Dread(ds, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf) >=
		    0);
	H5Dclose(ds);
}

static long long attr_ll(hid_t f, const char *name)
{
	long long v = -1;
	hid_t a = H5Aopen(f, name, H5P_DEFAULT);

	assert_true(a >= 0);
	assert_true(H5Aread(a, H5T_NATIVE_LLONG, &v) >= 0);
	H5Aclose(a);
	return v;
}

static void frames_come_back_as_written(void **state)
{
	char path[] = "/tmp/wt-recording-XXXXXX";
	uint8_t *recs = calloc(F, stride());
	static uint64_t ids[F], send[F];
	static double lat[F];
	static uint16_t st[F];
	static float slopes[F][2 * N], flux[F][N], cmd[F][A], rms[F];
	wt_recording *r;
	wt_error err;
	hid_t f;
	int fd;

	(void)state;
	fd = mkstemp(path);
	assert_true(fd >= 0);
	close(fd);
	for (int k = 0; k < F; k++) {
		fill(recs + (size_t)k * stride(), k);
	}
	assert_int_equal(wt_recording_create(path, N, A, F, "[sensor]\n", &r,
					     &err),
			 0);
	/* Blocks of 128, 128 and 44 frames, as the daemon hands them. */
	assert_int_equal(wt_recording_append(r, recs, stride(), 128, &err), 0);
	assert_int_equal(wt_recording_append(r, recs + 128 * stride(),
					     stride(), 128, &err),
			 0);
	assert_int_equal(wt_recording_append(r, recs + 256 * stride(),
					     stride(), F - 256, &err),
			 0);
	assert_int_equal(wt_recording_frames(r), F);
	assert_int_equal(wt_recording_close(r, 0, 0, NULL, &err), 0);

	f = H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT);
	assert_true(f >= 0);
	assert_int_equal(attr_ll(f, "frames"), F);
	assert_int_equal(attr_ll(f, "complete"), 1);
	read_all(f, "frame_id", H5T_NATIVE_UINT64, ids);
	read_all(f, "send_ns", H5T_NATIVE_UINT64, send);
	read_all(f, "latency_us", H5T_NATIVE_DOUBLE, lat);
	read_all(f, "state", H5T_NATIVE_UINT16, st);
	read_all(f, "residual_rms", H5T_NATIVE_FLOAT, rms);
	read_all(f, "slopes", H5T_NATIVE_FLOAT, slopes);
	read_all(f, "flux", H5T_NATIVE_FLOAT, flux);
	read_all(f, "commands", H5T_NATIVE_FLOAT, cmd);
	for (int k = 0; k < F; k++) {
		assert_int_equal(ids[k], 1000 + k);
		assert_int_equal(send[k], 1000000 + 1000 * k + 250 + k);
		/* (send - recv) / 1000 us, as documented */
		assert_true(fabs(lat[k] - (250.0 + k) / 1e3) < 1e-12);
		assert_int_equal(st[k], k % 5);
		assert_true(rms[k] == 0.5f * (float)k);
		assert_true(slopes[k][2 * N - 1] ==
			    (float)k + 0.01f * (float)(2 * N - 1));
		assert_true(flux[k][0] == (float)k + 0.01f * (float)(2 * N));
		assert_true(cmd[k][A - 1] ==
			    (float)k + 0.01f * (float)(3 * N + A - 1));
	}
	H5Fclose(f);
	unlink(path);
	free(recs);
}

static void refuses_bad_records_and_files(void **state)
{
	char path[] = "/tmp/wt-recording-XXXXXX";
	uint8_t *rec = calloc(1, stride());
	wt_frame_record h;
	wt_recording *r;
	wt_error err;
	int fd;

	(void)state;
	fd = mkstemp(path);
	assert_true(fd >= 0);
	close(fd);
	assert_int_equal(wt_recording_create(path, 0, A, 10, NULL, &r, &err),
			 -EINVAL);
	assert_int_equal(wt_recording_create(path, N, A, 0, NULL, &r, &err),
			 -EINVAL);
	assert_int_equal(wt_recording_create("", N, A, 10, NULL, &r, &err),
			 -EINVAL);
	/* /dev/full: nothing can be written (errno ENOSPC, POSIX). */
	assert_int_equal(wt_recording_create("/dev/full", N, A, 10, NULL, &r,
					     &err),
			 -EIO);
	assert_non_null(strstr(err.msg, strerror(ENOSPC)));
	assert_int_equal(wt_recording_create("/nonexistent/dir/x.h5", N, A, 10,
					     NULL, &r, &err),
			 -EIO);
	assert_int_equal(wt_recording_create(path, N, A, 10, NULL, &r, &err),
			 0);
	fill(rec, 0);
	memcpy(&h, rec, sizeof(h));
	h.n_act = A + 1;
	memcpy(rec, &h, sizeof(h));
	assert_int_equal(wt_recording_append(r, rec, stride(), 1, &err),
			 -EINVAL);
	assert_int_equal(wt_recording_append(r, rec, stride() - 1, 1, &err),
			 -EINVAL);
	assert_int_equal(wt_recording_frames(r), 0);
	/* Incomplete: 0 of 10 frames. */
	assert_int_equal(wt_recording_close(r, 0, 0, "stopped", &err), 0);
	assert_int_equal(wt_recording_close(NULL, 0, 0, NULL, &err), 0);
	unlink(path);
	free(rec);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(frames_come_back_as_written),
	cmocka_unit_test(refuses_bad_records_and_files),
};

WT_TEST_MAIN(tests)
