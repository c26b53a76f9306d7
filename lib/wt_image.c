/*
 * wt_image.c - decimated sensor images (see wt_image.h).
 */
#include "wt_image.h"

#include <errno.h>
#include <math.h>
#include <string.h>

#if !defined(__BYTE_ORDER__) || __BYTE_ORDER__ != __ORDER_LITTLE_ENDIAN__
#error "image records are written in host order: little-endian hosts only"
#endif

unsigned wt_image_bin_for(unsigned side)
{
	unsigned b = 1;

	while ((side + b - 1) / b > WT_IMAGE_SIDE_MAX) {
		b++;
	}
	return b;
}

size_t wt_image_record_bytes(unsigned sensor_width, unsigned sensor_height)
{
	unsigned b = wt_image_bin_for(
		sensor_width > sensor_height ? sensor_width : sensor_height);
	size_t w = (sensor_width + b - 1) / b, h = (sensor_height + b - 1) / b;

	return WT_IMAGE_HEADER_BYTES + 2 * w * h;
}

int wt_image_encode(const uint16_t *pix, unsigned width, unsigned height,
		    uint64_t frame_id, uint64_t recv_ns, unsigned state,
		    void *out, size_t out_len)
{
	wt_image_record h = {0};
	uint8_t *o = out;
	unsigned b, w, ht;
	size_t need;

	if (width == 0 || height == 0) {
		return -EINVAL;
	}
	b = wt_image_bin_for(width > height ? width : height);
	w = (width + b - 1) / b;
	ht = (height + b - 1) / b;
	need = WT_IMAGE_HEADER_BYTES + 2 * (size_t)w * ht;
	if (out_len < need) {
		return -ENOSPC;
	}
	memcpy(h.magic, WT_IMAGE_MAGIC, 4);
	h.version = WT_IMAGE_VERSION;
	h.state = (uint16_t)state;
	h.frame_id = frame_id;
	h.recv_ns = recv_ns;
	h.width = w;
	h.height = ht;
	h.bin = b;
	h.sensor_width = width;
	h.sensor_height = height;
	h.scale = 1.0f;
	memcpy(o, &h, sizeof(h));
	o += WT_IMAGE_HEADER_BYTES;
	for (unsigned j = 0; j < ht; j++) {
		unsigned y0 = j * b, y1 = y0 + b < height ? y0 + b : height;

		for (unsigned i = 0; i < w; i++) {
			unsigned x0 = i * b,
				 x1 = x0 + b < width ? x0 + b : width;
			uint64_t sum = 0, n = (uint64_t)(x1 - x0) * (y1 - y0);
			uint16_t v;

			for (unsigned y = y0; y < y1; y++) {
				const uint16_t *row = pix + (size_t)y * width;

				for (unsigned x = x0; x < x1; x++) {
					sum += row[x];
				}
			}
			v = (uint16_t)((sum + n / 2) / n);
			memcpy(o, &v, 2);
			o += 2;
		}
	}
	return (int)need;
}

int wt_image_decode(const void *rec, size_t len, wt_image_record *h,
		    const uint8_t **pixels, wt_error *err)
{
	wt_image_record r;
	size_t need;

	if (len < WT_IMAGE_HEADER_BYTES) {
		return wt_error_set(err, -EPROTO, "image record: %zu bytes",
				    len);
	}
	memcpy(&r, rec, sizeof(r));
	if (memcmp(r.magic, WT_IMAGE_MAGIC, 4) != 0) {
		return wt_error_set(err, -EPROTO, "image record: bad magic");
	}
	if (r.version != WT_IMAGE_VERSION) {
		return wt_error_set(err, -EPROTO,
				    "image record: version %u unknown",
				    r.version);
	}
	if (r.width == 0 || r.height == 0 || r.width > WT_IMAGE_SIDE_MAX ||
	    r.height > WT_IMAGE_SIDE_MAX || r.bin == 0 ||
	    (r.sensor_width + (uint64_t)r.bin - 1) / r.bin != r.width ||
	    (r.sensor_height + (uint64_t)r.bin - 1) / r.bin != r.height) {
		return wt_error_set(err, -EPROTO,
				    "image record: size %ux%u, bin %u, sensor "
				    "%ux%u do not agree",
				    r.width, r.height, r.bin, r.sensor_width,
				    r.sensor_height);
	}
	if (!isfinite(r.scale) || !(r.scale > 0)) {
		return wt_error_set(err, -EPROTO, "image record: bad scale");
	}
	need = WT_IMAGE_HEADER_BYTES + 2 * (size_t)r.width * r.height;
	if (len != need) {
		return wt_error_set(err, -EPROTO,
				    "image record: %zu bytes, %ux%u needs %zu",
				    len, r.width, r.height, need);
	}
	*h = r;
	*pixels = (const uint8_t *)rec + WT_IMAGE_HEADER_BYTES;
	return 0;
}
