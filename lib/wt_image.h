/*
 * wt_image.h - decimated sensor images on the telemetry socket (topic
 * "image ", section 6 of wt_request.h): binning, encoding and decoding.
 *
 * The daemon's loop thread only copies a frame's pixels into a slot made at
 * start (at daemon.image_hz); the telemetry thread bins them with
 * wt_image_encode() and publishes the result.  Readers (wavetrim-view, the
 * snapshot, scripts) check a message with wt_image_decode().
 */
#ifndef WT_IMAGE_H
#define WT_IMAGE_H

#include <stddef.h>
#include <stdint.h>

#include "wt_error.h"

#define WT_IMAGE_MAGIC	      "WTIM"
#define WT_IMAGE_VERSION      1
#define WT_IMAGE_HEADER_BYTES 48
#define WT_IMAGE_TOPIC	      "image "
/** Largest side of a published image, in (binned) pixels. */
#define WT_IMAGE_SIDE_MAX 128
/** Largest image record (after the topic). */
#define WT_IMAGE_BYTES_MAX                                                     \
	(WT_IMAGE_HEADER_BYTES + 2 * WT_IMAGE_SIDE_MAX * WT_IMAGE_SIDE_MAX)

/** The 48-byte header of an image record; on a little-endian host this
 * struct is the wire layout byte for byte. */
typedef struct wt_image_record {
	char magic[4];
	uint16_t version;
	uint16_t state;	       /**< loop state, as in frame records */
	uint64_t frame_id;     /**< the frame the pixels came with */
	uint64_t recv_ns;      /**< its receive time, daemon CLOCK_MONOTONIC */
	uint32_t width;	       /**< W, image pixels across */
	uint32_t height;       /**< H, image pixels down */
	uint32_t bin;	       /**< sensor pixels per image pixel, each way */
	uint32_t sensor_width; /**< sensor pixels across */
	uint32_t sensor_height;
	float scale; /**< sensor counts per stored unit */
} wt_image_record;

_Static_assert(sizeof(wt_image_record) == WT_IMAGE_HEADER_BYTES,
	       "image record header is 48 bytes");

/** The bin factor for a sensor side: the smallest b with
 * ceil(side / b) <= WT_IMAGE_SIDE_MAX (1 for side <= 128; side > 0). */
unsigned wt_image_bin_for(unsigned side);

/** Bytes of an image record (after the topic) for a width x height sensor:
 * WT_IMAGE_HEADER_BYTES + 2 W H. */
size_t wt_image_record_bytes(unsigned sensor_width, unsigned sensor_height);

/**
 * Bin the sensor image pix (width x height uint16, rows top down) into an
 * image record at out (out_len bytes): each image pixel (i, j) is the mean
 * of the sensor pixels (x, y) with floor(x / bin) = i and floor(y / bin) = j,
 * rounded to the nearest whole count (a block at the right or bottom edge
 * may hold fewer pixels: the mean of those).  scale is 1.  Returns the
 * record's length, or -EINVAL (zero size) / -ENOSPC (out too small).  Does
 * not allocate.
 */
int wt_image_encode(const uint16_t *pix, unsigned width, unsigned height,
		    uint64_t frame_id, uint64_t recv_ns, unsigned state,
		    void *out, size_t out_len);

/**
 * Check an image record (the bytes after the topic): magic, version, a
 * size of at most WT_IMAGE_SIDE_MAX each way, bin and sensor size that
 * agree (W = ceil(sensor_width / bin), same for H), a finite positive
 * scale and len = 48 + 2 W H.  On success copies the header to *h and
 * points *pixels at the W x H little-endian uint16 values (not aligned).
 * Returns 0 or -EPROTO with the reason in *err.
 */
int wt_image_decode(const void *rec, size_t len, wt_image_record *h,
		    const uint8_t **pixels, wt_error *err);

#endif /* WT_IMAGE_H */
