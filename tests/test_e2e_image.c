/*
 * test_e2e_image.c - the daemon's "image " telemetry (section 6 of
 * wt_request.h) against the real simulator: images come, decode, have the
 * sensor's binned size and show the simulator's spots; daemon.image_hz 0
 * stops them and a rate brings them back, live.
 */
#include "wt_test.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "e2e_harness.h"
#include "wt_clock.h"
#include "wt_image.h"

static void *image_sub(e2e *e)
{
	void *s = zmq_socket(e->ctx, ZMQ_SUB);
	int zero = 0;

	assert_non_null(s);
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(s, ZMQ_SUBSCRIBE, WT_IMAGE_TOPIC,
		       strlen(WT_IMAGE_TOPIC));
	assert_int_equal(zmq_connect(s, e->telemetry), 0);
	return s;
}

/* The next image record into msg (6 + WT_IMAGE_BYTES_MAX); its length
 * after the topic, or -1 when none came within timeout_ms. */
static int next_image(void *sub, uint8_t *msg, int timeout_ms)
{
	zmq_pollitem_t it = {sub, 0, ZMQ_POLLIN, 0};
	int len;

	if (zmq_poll(&it, 1, timeout_ms) <= 0) {
		return -1;
	}
	len = zmq_recv(sub, msg, 6 + WT_IMAGE_BYTES_MAX, 0);
	if (len < 6 || len > 6 + WT_IMAGE_BYTES_MAX) {
		return -1;
	}
	return len - 6;
}

static int cmp_u16(const void *a, const void *b)
{
	return (int)*(const uint16_t *)a - (int)*(const uint16_t *)b;
}

static void images_show_the_spots_and_follow_image_hz(void **state)
{
	static const char *const ov[] = {"daemon.image_hz=10", NULL};
	static uint8_t msg[6 + WT_IMAGE_BYTES_MAX];
	static uint16_t px[WT_IMAGE_SIDE_MAX * WT_IMAGE_SIDE_MAX];
	const uint8_t *p;
	wt_image_record h;
	wt_error err = {0};
	int len, bright = 0, cells = 0;
	uint16_t med;
	void *sub;
	e2e e;

	(void)state;
	assert_int_equal(e2e_setup(&e, ov), 0);
	sub = image_sub(&e);
	assert_int_equal(e2e_start_sim(&e), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);

	len = next_image(sub, msg, 10000);
	assert_true(len > 0);
	assert_int_equal(wt_image_decode(msg + 6, (size_t)len, &h, &p, &err),
			 0);
	/* The demo sensor: 16 lenslets of 16 pixels, 256 x 256, binned by 2
	 * to 128 x 128 (section 6: the smallest b with 256 / b <= 128). */
	assert_int_equal(h.sensor_width, 256);
	assert_int_equal(h.sensor_height, 256);
	assert_int_equal(h.bin, 2);
	assert_int_equal(h.width, 128);
	assert_int_equal(h.height, 128);
	assert_int_equal(h.state, 0); /* open */
	memcpy(px, p, 2 * 128 * 128);

	/* A Shack-Hartmann image is a dark field with one spot per lit
	 * lenslet (common practice): in the 8 x 8 image pixels of most cells
	 * of the inner 8 x 8 lenslets the brightest pixel stands far above
	 * the image's median (the background). */
	{
		static uint16_t sorted[128 * 128];

		memcpy(sorted, px, sizeof(sorted));
		qsort(sorted, 128 * 128, 2, cmp_u16);
		med = sorted[128 * 64];
	}
	for (int cy = 4; cy < 12; cy++) {
		for (int cx = 4; cx < 12; cx++) {
			uint16_t top = 0;

			for (int y = 8 * cy; y < 8 * cy + 8; y++) {
				for (int x = 8 * cx; x < 8 * cx + 8; x++) {
					uint16_t v = px[y * 128 + x];

					top = v > top ? v : top;
				}
			}
			cells++;
			bright += top > 4 * med + 20;
		}
	}
	print_message("image: median %u, %d of %d inner cells with a spot\n",
		      med, bright, cells);
	assert_true(bright >= cells * 3 / 4);

	/* Off, live: after what was on its way, nothing more comes. */
	assert_int_equal(e2e_request(&e, "set daemon.image_hz 0"), 1);
	wt_clock_sleep_ns(500 * WT_NS_PER_MS);
	while (next_image(sub, msg, 0) >= 0) {
	}
	assert_int_equal(next_image(sub, msg, 1500), -1);
	/* And on again. */
	assert_int_equal(e2e_request(&e, "set daemon.image_hz 2"), 1);
	len = next_image(sub, msg, 10000);
	assert_true(len > 0);
	assert_int_equal(wt_image_decode(msg + 6, (size_t)len, &h, &p, &err),
			 0);

	zmq_close(sub);
	e2e_teardown(&e, NULL, NULL);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(images_show_the_spots_and_follow_image_hz),
};

WT_TEST_MAIN(tests)
