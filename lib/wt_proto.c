/*
 * wt_proto.c - driver-link messages: encode and validate (see wt_proto.h).
 *
 * Every field goes through the byte helpers below, so the wire stays
 * little-endian whatever the host and whatever the compiler does with
 * struct padding.
 */
#include "wt_proto.h"

#include <errno.h>
#include <string.h>

/* Byte offsets of the fields, as in the table of wt_proto.h. */
enum {
	OFF_MAGIC = 0,
	OFF_VERSION = 4,
	OFF_KIND = 6,
	OFF_SEQUENCE = 8,
	OFF_TIMESTAMP = 16,
	OFF_WIDTH = 24,
	OFF_HEIGHT = 28,
	OFF_PAYLOAD_BYTES = 32,
	OFF_RESERVED = 36,
	OFF_END = 40,
};

_Static_assert(OFF_END == WT_PROTO_HEADER_BYTES, "header layout");
_Static_assert(sizeof(WT_PROTO_MAGIC) - 1 == 4, "magic is 4 bytes");

static void put_u16(uint8_t *p, uint16_t v)
{
	p[0] = (uint8_t)(v & 0xff);
	p[1] = (uint8_t)(v >> 8);
}

static void put_u32(uint8_t *p, uint32_t v)
{
	int i;

	for (i = 0; i < 4; i++) {
		p[i] = (uint8_t)(v >> (8 * i));
	}
}

static void put_u64(uint8_t *p, uint64_t v)
{
	int i;

	for (i = 0; i < 8; i++) {
		p[i] = (uint8_t)(v >> (8 * i));
	}
}

static uint16_t get_u16(const uint8_t *p)
{
	return (uint16_t)(p[0] | (p[1] << 8));
}

static uint32_t get_u32(const uint8_t *p)
{
	return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 |
	       (uint32_t)p[3] << 24;
}

static uint64_t get_u64(const uint8_t *p)
{
	uint64_t v = 0;
	int i;

	for (i = 7; i >= 0; i--) {
		v = v << 8 | p[i];
	}
	return v;
}

/* Bytes of one payload element of a kind, 0 for an unknown kind. */
static uint32_t element_bytes(uint16_t kind)
{
	switch (kind) {
	case WT_KIND_PIXELS_U16:
		return 2;
	case WT_KIND_SLOPES_F32:
	case WT_KIND_COMMAND_F32:
		return 4;
	default:
		return 0;
	}
}

int wt_proto_payload_size(uint16_t kind, uint32_t width, uint32_t height,
			  uint32_t *bytes)
{
	uint32_t elem = element_bytes(kind);
	uint64_t total;

	if (elem == 0) {
		return -WT_EPROTO_KIND;
	}
	if (width == 0 || height == 0) {
		return -WT_EPROTO_DIMS;
	}
	if (kind != WT_KIND_PIXELS_U16 && height != 1) {
		return -WT_EPROTO_DIMS;
	}
	/* 32 x 32 x 3 bits: cannot overflow 64 bits; the limit then also
	 * keeps the size well inside 32 bits. */
	total = (uint64_t)width * height * elem;
	if (total > WT_PROTO_MAX_PAYLOAD) {
		return -WT_EPROTO_DIMS;
	}
	if (bytes) {
		*bytes = (uint32_t)total;
	}
	return 0;
}

void wt_proto_encode_header(const wt_header *h,
			    uint8_t out[WT_PROTO_HEADER_BYTES])
{
	memcpy(out + OFF_MAGIC, WT_PROTO_MAGIC, 4);
	put_u16(out + OFF_VERSION, h->version);
	put_u16(out + OFF_KIND, h->kind);
	put_u64(out + OFF_SEQUENCE, h->sequence);
	put_u64(out + OFF_TIMESTAMP, h->timestamp_ns);
	put_u32(out + OFF_WIDTH, h->width);
	put_u32(out + OFF_HEIGHT, h->height);
	put_u32(out + OFF_PAYLOAD_BYTES, h->payload_bytes);
	put_u32(out + OFF_RESERVED, h->reserved);
}

int wt_proto_encode(const wt_header *h, const void *payload, void *buf,
		    size_t buf_len)
{
	uint8_t *out = buf;
	uint32_t bytes;
	int rc;

	if (!h || !payload || !buf) {
		return -EINVAL;
	}
	if (h->version != WT_PROTO_VERSION) {
		return -WT_EPROTO_VERSION;
	}
	rc = wt_proto_payload_size(h->kind, h->width, h->height, &bytes);
	if (rc < 0) {
		return rc;
	}
	if (h->payload_bytes != bytes) {
		return -WT_EPROTO_PAYLOAD;
	}
	if (buf_len < (size_t)WT_PROTO_HEADER_BYTES + bytes) {
		return -ENOSPC;
	}
	if (payload != out + WT_PROTO_HEADER_BYTES) {
		memcpy(out + WT_PROTO_HEADER_BYTES, payload, bytes);
	}
	wt_proto_encode_header(h, out);
	return WT_PROTO_HEADER_BYTES + (int)bytes;
}

int wt_proto_decode(const void *msg, size_t len, wt_header *h,
		    const void **payload)
{
	const uint8_t *in = msg;
	wt_header got;
	uint32_t bytes;
	int rc;

	if (!msg || !h) {
		return -EINVAL;
	}
	if (len < WT_PROTO_HEADER_BYTES) {
		return -WT_EPROTO_SHORT;
	}
	if (memcmp(in + OFF_MAGIC, WT_PROTO_MAGIC, 4) != 0) {
		return -WT_EPROTO_MAGIC;
	}
	got.version = get_u16(in + OFF_VERSION);
	got.kind = get_u16(in + OFF_KIND);
	got.sequence = get_u64(in + OFF_SEQUENCE);
	got.timestamp_ns = get_u64(in + OFF_TIMESTAMP);
	got.width = get_u32(in + OFF_WIDTH);
	got.height = get_u32(in + OFF_HEIGHT);
	got.payload_bytes = get_u32(in + OFF_PAYLOAD_BYTES);
	got.reserved = get_u32(in + OFF_RESERVED);

	if (got.version != WT_PROTO_VERSION) {
		return -WT_EPROTO_VERSION;
	}
	rc = wt_proto_payload_size(got.kind, got.width, got.height, &bytes);
	if (rc < 0) {
		return rc;
	}
	if (got.payload_bytes != bytes) {
		return -WT_EPROTO_PAYLOAD;
	}
	if (len - WT_PROTO_HEADER_BYTES != bytes) {
		return -WT_EPROTO_LENGTH;
	}
	*h = got;
	if (payload) {
		*payload = in + WT_PROTO_HEADER_BYTES;
	}
	return 0;
}
