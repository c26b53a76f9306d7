/*
 * test_image.c - decimated sensor images (lib/wt_image.h): the bin factor,
 * the block means against numpy, the wire layout of section 6 of
 * wt_request.h, and the decoder's refusals.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

#include "wt_image.h"

#define PYTHON "/usr/bin/python3"

static void bin_factor_keeps_images_within_128(void **state)
{
	(void)state;
	/* b is the smallest with ceil(side / b) <= 128 (section 6). */
	assert_int_equal(wt_image_bin_for(1), 1);
	assert_int_equal(wt_image_bin_for(128), 1);
	assert_int_equal(wt_image_bin_for(129), 2);
	assert_int_equal(wt_image_bin_for(256), 2);
	assert_int_equal(wt_image_bin_for(257), 3);
	assert_int_equal(wt_image_bin_for(1000), 8); /* ceil(1000/8) = 125 */
	assert_int_equal(wt_image_record_bytes(256, 256), 48 + 2 * 128 * 128);
	assert_int_equal(wt_image_record_bytes(5, 3), 48 + 2 * 5 * 3);
}

/*
 * A 260 x 259 sensor (bin 3, 87 x 87 with short edge blocks), a known
 * pattern: the block means are worked out by hand for two blocks and by
 * numpy for all.
 */
static void block_means_match_numpy(void **state)
{
	enum { W = 260, H = 259 };
	static uint16_t pix[W * H];
	static uint8_t rec[48 + 2 * 87 * 87];
	const uint8_t *px;
	wt_image_record h;
	wt_error err = {0};
	uint16_t v;
	char path[] = "/tmp/wt_test_image_XXXXXX", cmd[512];
	FILE *f;
	int fd, st;

	(void)state;
	for (int y = 0; y < H; y++) {
		for (int x = 0; x < W; x++) {
			pix[y * W + x] = (uint16_t)((x * 7 + y * 131) % 4001);
		}
	}
	assert_int_equal(
		wt_image_encode(pix, W, H, 42, 1234, 2, rec, sizeof(rec)),
		sizeof(rec));
	assert_int_equal(wt_image_decode(rec, sizeof(rec), &h, &px, &err), 0);
	assert_int_equal(h.width, 87);
	assert_int_equal(h.height, 87);
	assert_int_equal(h.bin, 3);
	assert_int_equal(h.sensor_width, W);
	assert_int_equal(h.frame_id, 42);
	assert_int_equal(h.recv_ns, 1234);
	assert_int_equal(h.state, 2);
	assert_true(h.scale == 1.0f);
	/* Byte layout of section 6: magic, then the width at offset 24. */
	assert_memory_equal(rec, "WTIM", 4);
	assert_int_equal(rec[24], 87);
	assert_int_equal(rec[32], 3);
	/* Block (0, 0): x, y in 0..2, values 7x + 131y (no wrap): mean
	 * 7 + 131 = 138 (by hand). */
	memcpy(&v, px, 2);
	assert_int_equal(v, 138);
	/* Block (86, 0): x = 258, 259 only, y = 0..2: mean of 7x is 1809.5,
	 * of 131y is 131, sum 1940.5, rounded half up: 1941 (by hand). */
	memcpy(&v, px + 2 * 86, 2);
	assert_int_equal(v, 1941);

	if (access(PYTHON, X_OK) != 0) {
		skip();
	}
	fd = mkstemp(path);
	assert_true(fd >= 0);
	f = fdopen(fd, "wb");
	assert_non_null(f);
	assert_int_equal(fwrite(rec, 1, sizeof(rec), f), sizeof(rec));
	fclose(f);
	/* numpy: pad to whole blocks with NaN, nanmean per block, round half
	 * up; compare with every stored value. */
	snprintf(cmd, sizeof(cmd),
		 PYTHON
		 " -c '"
		 "import numpy as np, sys\n"
		 "W, H, b = 260, 259, 3\n"
		 "y, x = np.mgrid[0:H, 0:W]\n"
		 "p = ((x * 7 + y * 131) %% 4001).astype(float)\n"
		 "q = np.full((87 * b, 87 * b), np.nan); q[:H, :W] = p\n"
		 "m = np.nanmean(q.reshape(87, b, 87, b), axis=(1, 3))\n"
		 "want = np.floor(m + 0.5)\n"
		 "got = np.fromfile(sys.argv[1], dtype=\"<u2\", offset=48)\n"
		 "sys.exit(0 if np.array_equal(got.reshape(87, 87), want) "
		 "else 1)' %s",
		 path);
	st = system(cmd);
	unlink(path);
	assert_true(WIFEXITED(st));
	assert_int_equal(WEXITSTATUS(st), 0);
}

static void encode_refuses_small_buffers(void **state)
{
	uint16_t pix[4] = {1, 2, 3, 4};
	uint8_t out[64];

	(void)state;
	assert_int_equal(wt_image_encode(pix, 2, 2, 0, 0, 0, out, 48 + 7),
			 -ENOSPC);
	assert_int_equal(wt_image_encode(pix, 0, 2, 0, 0, 0, out, sizeof(out)),
			 -EINVAL);
	assert_int_equal(wt_image_encode(pix, 2, 2, 0, 0, 0, out, sizeof(out)),
			 48 + 8);
}

static void decode_refuses_bad_records(void **state)
{
	uint16_t pix[16] = {0};
	uint8_t good[48 + 32], bad[48 + 34];
	const uint8_t *px;
	wt_image_record h;
	wt_error err = {0};
	float f;

	(void)state;
	assert_int_equal(
		wt_image_encode(pix, 4, 4, 1, 2, 0, good, sizeof(good)),
		sizeof(good));
	assert_int_equal(wt_image_decode(good, sizeof(good), &h, &px, &err), 0);
	/* too short for a header */
	assert_int_equal(wt_image_decode(good, 47, &h, &px, &err), -EPROTO);
	/* a pixel missing, a pixel too many */
	assert_int_equal(wt_image_decode(good, sizeof(good) - 2, &h, &px, &err),
			 -EPROTO);
	assert_non_null(strstr(err.msg, "bytes"));
	memcpy(bad, good, sizeof(good));
	assert_int_equal(wt_image_decode(bad, sizeof(bad), &h, &px, &err),
			 -EPROTO);
	/* magic */
	memcpy(bad, good, sizeof(good));
	bad[0] = 'X';
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	assert_non_null(strstr(err.msg, "magic"));
	/* version */
	memcpy(bad, good, sizeof(good));
	bad[4] = 2;
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	assert_non_null(strstr(err.msg, "version"));
	/* bin that does not agree with the sensor size */
	memcpy(bad, good, sizeof(good));
	bad[32] = 2;
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	/* bin 0 */
	memcpy(bad, good, sizeof(good));
	bad[32] = 0;
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	/* width above 128 */
	memcpy(bad, good, sizeof(good));
	bad[24] = 200;
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	/* scale NaN, and 0 */
	memcpy(bad, good, sizeof(good));
	f = (float)NAN;
	memcpy(bad + 44, &f, 4);
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	f = 0;
	memcpy(bad + 44, &f, 4);
	assert_int_equal(wt_image_decode(bad, sizeof(good), &h, &px, &err),
			 -EPROTO);
	assert_non_null(strstr(err.msg, "scale"));
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(bin_factor_keeps_images_within_128),
	cmocka_unit_test(block_means_match_numpy),
	cmocka_unit_test(encode_refuses_small_buffers),
	cmocka_unit_test(decode_refuses_bad_records),
};

WT_TEST_MAIN(tests)
