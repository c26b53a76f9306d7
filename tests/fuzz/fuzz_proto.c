/*
 * fuzz_proto.c - libFuzzer target for the driver-link wire format
 * (lib/wt_proto.h).
 *
 * Decode direction: wt_proto_decode() on the input bytes must give the code
 * that a reference check, written here from the header comment of
 * wt_proto.h (its table and its list of refusals, in order), gives; on
 * refusal it must leave *h and *payload alone; on acceptance the payload
 * must sit 40 bytes in, its size must agree with wt_proto_payload_size() and
 * the message length, and encoding the decoded header again (copying the
 * payload, and in place) must give back the very same bytes.
 *
 * Encode direction: the input also supplies a header and payload, encoded
 * with wt_proto_encode(); whatever it accepts must decode back to the same
 * header and payload.
 */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "fuzz_util.h"
#include "wt_proto.h"

/* Little-endian fields, read here independently of lib/wt_proto.c. */
static uint64_t le(const uint8_t *p, int bytes)
{
	uint64_t v = 0;

	for (int i = bytes - 1; i >= 0; i--) {
		v = v << 8 | p[i];
	}
	return v;
}

/* The refusals of wt_proto.h, "in this order"; 0 when the message passes. */
static int ref_decode(const uint8_t *m, size_t len, wt_header *h)
{
	uint64_t elem, total;

	if (len < 40) {
		return -WT_EPROTO_SHORT;
	}
	if (m[0] != 0x57 || m[1] != 0x54 || m[2] != 0x52 || m[3] != 0x4d) {
		return -WT_EPROTO_MAGIC;
	}
	h->version = (uint16_t)le(m + 4, 2);
	h->kind = (uint16_t)le(m + 6, 2);
	h->sequence = le(m + 8, 8);
	h->timestamp_ns = le(m + 16, 8);
	h->width = (uint32_t)le(m + 24, 4);
	h->height = (uint32_t)le(m + 28, 4);
	h->payload_bytes = (uint32_t)le(m + 32, 4);
	h->reserved = (uint32_t)le(m + 36, 4);
	if (h->version != 1) {
		return -WT_EPROTO_VERSION;
	}
	if (h->kind < 1 || h->kind > 3) {
		return -WT_EPROTO_KIND;
	}
	elem = h->kind == 1 ? 2 : 4;
	if (h->width == 0 || h->height == 0 ||
	    (h->kind != 1 && h->height != 1)) {
		return -WT_EPROTO_DIMS;
	}
	/* width x height < 2^64; 64 MiB is a multiple of elem */
	if ((uint64_t)h->width * h->height > (64u << 20) / elem) {
		return -WT_EPROTO_DIMS;
	}
	total = elem * h->width * h->height;
	if (h->payload_bytes != total) {
		return -WT_EPROTO_PAYLOAD;
	}
	if (len - 40 != total) {
		return -WT_EPROTO_LENGTH;
	}
	return 0;
}

static bool same_header(const wt_header *a, const wt_header *b)
{
	return a->version == b->version && a->kind == b->kind &&
	       a->sequence == b->sequence &&
	       a->timestamp_ns == b->timestamp_ns && a->width == b->width &&
	       a->height == b->height && a->payload_bytes == b->payload_bytes &&
	       a->reserved == b->reserved;
}

static void check_decode(const uint8_t *data, size_t size)
{
	const void *payload = &payload;
	wt_header h, want, untouched;
	uint32_t bytes = 0;
	uint8_t *buf;
	int rc, ref;

	memset(&h, 0xa5, sizeof(h));
	untouched = h;
	rc = wt_proto_decode(data, size, &h, &payload);
	ref = ref_decode(data, size, &want);
	FUZZ_CHECK(rc == ref, "decode gave %d, the format says %d", rc, ref);
	if (rc < 0) {
		FUZZ_CHECK(!memcmp(&h, &untouched, sizeof(h)) &&
				   payload == &payload,
			   "refused message (%d) changed *h or *payload", rc);
		return;
	}
	FUZZ_CHECK(same_header(&h, &want), "decoded header differs from the "
					   "wire fields");
	FUZZ_CHECK(payload == data + WT_PROTO_HEADER_BYTES,
		   "payload at offset %td", (const uint8_t *)payload - data);
	FUZZ_CHECK(wt_proto_payload_size(h.kind, h.width, h.height, &bytes) ==
				   0 &&
			   bytes == h.payload_bytes &&
			   size == WT_PROTO_HEADER_BYTES + (size_t)bytes,
		   "payload size %u, header says %u, message %zu bytes", bytes,
		   h.payload_bytes, size);
	/* decoding without a payload pointer is the same check */
	FUZZ_CHECK(wt_proto_decode(data, size, &want, NULL) == 0 &&
			   same_header(&h, &want),
		   "decode without payload pointer differs");

	/* re-encode: byte for byte the same message */
	buf = malloc(size);
	if (!buf) {
		abort();
	}
	memset(buf, 0x5a, size);
	rc = wt_proto_encode(&h, payload, buf, size);
	FUZZ_CHECK(rc >= 0 && (size_t)rc == size && !memcmp(buf, data, size),
		   "re-encoding gave %d for %zu bytes", rc, size);
	/* in place: the payload already at buf + 40 */
	memset(buf, 0x5a, WT_PROTO_HEADER_BYTES);
	rc = wt_proto_encode(&h, buf + WT_PROTO_HEADER_BYTES, buf, size);
	FUZZ_CHECK(rc >= 0 && (size_t)rc == size && !memcmp(buf, data, size),
		   "re-encoding in place gave %d", rc);
	/* the bare header writer agrees */
	memset(buf, 0x5a, WT_PROTO_HEADER_BYTES);
	wt_proto_encode_header(&h, buf);
	FUZZ_CHECK(!memcmp(buf, data, WT_PROTO_HEADER_BYTES),
		   "wt_proto_encode_header differs");
	/* one byte short of room */
	rc = wt_proto_encode(&h, payload, buf, size - 1);
	FUZZ_CHECK(rc == -ENOSPC, "encoding into %zu bytes gave %d", size - 1,
		   rc);
	free(buf);
}

/*
 * Header fields taken from the input (version, kind, width, height and
 * payload_bytes small-ish so that accepted encodings happen), then encode;
 * an accepted message decodes to the same header and payload.
 */
static void check_encode(const uint8_t *data, size_t size)
{
	wt_header h, back;
	const void *payload;
	size_t room, have;
	uint8_t *buf;
	int rc;

	if (size < 24) {
		return;
	}
	h.version = (uint16_t)le(data, 2);
	h.kind = (uint16_t)le(data + 2, 2);
	h.sequence = le(data + 4, 8);
	h.timestamp_ns = le(data + 12, 8);
	/* byte 20 picks how width, height, payload_bytes come */
	if (data[20] & 1) {
		/* plausible: derived from the rest of the input */
		h.width = data[21] + 1u;
		h.height = data[20] & 2 ? 1 : data[22] + 1u;
		h.payload_bytes = (h.kind == 1 ? 2u : 4u) * h.width * h.height;
		h.payload_bytes += (data[20] & 4) ? data[23] % 3 : 0;
	} else {
		h.width = (uint32_t)le(data + 21, 1) << (data[22] & 31);
		h.height = (uint32_t)le(data + 23, 1) << (data[22] >> 3 & 31);
		h.payload_bytes = h.width * h.height * 2;
	}
	h.reserved = size > 24 ? data[24] : 0;
	have = size - 24;
	room = (data[20] & 8) ? have / 2 : 64 + have;
	if (room > (1u << 20)) {
		room = 1u << 20;
	}
	buf = malloc(WT_PROTO_HEADER_BYTES + room);
	if (!buf) {
		abort();
	}
	/* the payload is the rest of the input, cycled */
	for (size_t i = 0; i < room; i++) {
		buf[WT_PROTO_HEADER_BYTES + i] = have ? data[24 + i % have] : 0;
	}
	rc = wt_proto_encode(&h, buf + WT_PROTO_HEADER_BYTES, buf,
			     WT_PROTO_HEADER_BYTES + room);
	if (rc < 0) {
		FUZZ_CHECK(rc == -WT_EPROTO_VERSION || rc == -WT_EPROTO_KIND ||
				   rc == -WT_EPROTO_DIMS ||
				   rc == -WT_EPROTO_PAYLOAD || rc == -ENOSPC,
			   "encode refused with %d", rc);
		FUZZ_CHECK(rc != -ENOSPC || h.payload_bytes > room,
			   "-ENOSPC for %u payload bytes in room for %zu",
			   h.payload_bytes, room);
		free(buf);
		return;
	}
	FUZZ_CHECK((size_t)rc == WT_PROTO_HEADER_BYTES + h.payload_bytes,
		   "encoded %d bytes for payload %u", rc, h.payload_bytes);
	FUZZ_CHECK(wt_proto_decode(buf, (size_t)rc, &back, &payload) == 0 &&
			   same_header(&h, &back) &&
			   payload == buf + WT_PROTO_HEADER_BYTES,
		   "encoded message does not decode to its header");
	for (size_t i = 0; i < h.payload_bytes; i++) {
		FUZZ_CHECK(buf[WT_PROTO_HEADER_BYTES + i] ==
				   (have ? data[24 + i % have] : 0),
			   "payload byte %zu changed", i);
	}
	free(buf);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	check_decode(data, size);
	check_encode(data, size);
	return 0;
}
