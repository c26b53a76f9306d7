/* test_proto.c - driver-link wire format (lib/wt_proto). */
#include "wt_test.h"

#include <errno.h>
#include <string.h>

#include "wt_proto.h"

/*
 * Offsets of the header fields, written down here from the table in
 * wt_proto.h rather than taken from the library, so that the tests below
 * poke the wire bytes independently of the encoder.
 */
#define AT_MAGIC	 0
#define AT_VERSION	 4
#define AT_KIND		 6
#define AT_SEQUENCE	 8
#define AT_TIMESTAMP	 16
#define AT_WIDTH	 24
#define AT_HEIGHT	 28
#define AT_PAYLOAD_BYTES 32
#define AT_RESERVED	 36
#define HDR		 40

/* Largest message the tests build (except the one at the payload limit). */
#define BUF_MAX 4096

static void poke16(uint8_t *m, size_t at, uint16_t v)
{
	m[at] = (uint8_t)v;
	m[at + 1] = (uint8_t)(v >> 8);
}

static void poke32(uint8_t *m, size_t at, uint32_t v)
{
	size_t i;

	for (i = 0; i < 4; i++) {
		m[at + i] = (uint8_t)(v >> (8 * i));
	}
}

/* splitmix64 (Steele, Lea, Flood 2014): small, seedable, deterministic. */
static uint64_t next_rand(uint64_t *state)
{
	uint64_t z = (*state += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

static uint32_t elem_of(uint16_t kind)
{
	return kind == WT_KIND_PIXELS_U16 ? 2 : 4;
}

/*
 * A valid message of a kind with a recognisable payload, built with the
 * encoder; returns its length.  For SLOPES and COMMAND width = count.
 */
static size_t make_msg(uint8_t *buf, uint16_t kind, uint32_t width,
		       uint32_t height)
{
	uint8_t payload[BUF_MAX];
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = kind,
		.sequence = 0x0123456789abcdefull,
		.timestamp_ns = 987654321012345ull,
		.width = width,
		.height = height,
		.payload_bytes = elem_of(kind) * width * height,
	};
	uint32_t i;
	int n;

	assert_true(h.payload_bytes + HDR <= BUF_MAX);
	for (i = 0; i < h.payload_bytes; i++) {
		payload[i] = (uint8_t)(i * 7 + 3);
	}
	n = wt_proto_encode(&h, payload, buf, BUF_MAX);
	assert_int_equal(n, HDR + h.payload_bytes);
	return (size_t)n;
}

/*
 * Decode len bytes of msg from a heap copy of exactly that size, so that
 * AddressSanitizer catches any read past the end; return the code.
 */
static int decode_exact(const uint8_t *msg, size_t len, wt_header *h,
			const void **payload, const uint8_t **copy_out)
{
	uint8_t *copy = malloc(len ? len : 1);
	int rc;

	assert_non_null(copy);
	memcpy(copy, msg, len);
	rc = wt_proto_decode(copy, len, h, payload);
	if (copy_out) {
		*copy_out = copy; /* caller frees */
	} else {
		free(copy);
	}
	return rc;
}

static void expect_refused(const uint8_t *msg, size_t len, int code)
{
	wt_header h;
	const void *payload = NULL;

	assert_int_equal(decode_exact(msg, len, &h, &payload, NULL), code);
}

/* The three kinds, for loops. */
static const uint16_t kinds[] = {WT_KIND_PIXELS_U16, WT_KIND_SLOPES_F32,
				 WT_KIND_COMMAND_F32};

static void round_trip_pixels(void **state)
{
	uint16_t pixels[7 * 5];
	uint8_t buf[BUF_MAX];
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_PIXELS_U16,
		.sequence = 42,
		.timestamp_ns = 123456789ull,
		.width = 7,
		.height = 5,
		.payload_bytes = sizeof(pixels),
	};
	wt_header got;
	const void *payload = NULL;
	int i, n;

	(void)state;
	for (i = 0; i < 7 * 5; i++) {
		pixels[i] = (uint16_t)(i * 1871 + 65000);
	}
	n = wt_proto_encode(&h, pixels, buf, sizeof(buf));
	assert_int_equal(n, HDR + 70);
	assert_int_equal(wt_proto_decode(buf, (size_t)n, &got, &payload), 0);
	assert_int_equal(got.version, 1);
	assert_int_equal(got.kind, WT_KIND_PIXELS_U16);
	assert_true(got.sequence == 42);
	assert_true(got.timestamp_ns == 123456789ull);
	assert_int_equal(got.width, 7);
	assert_int_equal(got.height, 5);
	assert_int_equal(got.payload_bytes, 70);
	assert_int_equal(got.reserved, 0);
	/* no copy: the payload is the message's own bytes after the header */
	assert_ptr_equal(payload, buf + HDR);
	assert_memory_equal(payload, pixels, sizeof(pixels));
}

static void round_trip_slopes(void **state)
{
	float slopes[10] = {0.0f,   -0.0f,  1.5f, -2.25f, 1e-30f,
			    -3e30f, 0.125f, 7.0f, -0.5f,  100.0f};
	uint8_t buf[BUF_MAX];
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_SLOPES_F32,
		.sequence = 1,
		.timestamp_ns = 0,
		.width = 10,
		.height = 1,
		.payload_bytes = sizeof(slopes),
	};
	wt_header got;
	const void *payload = NULL;
	int n;

	(void)state;
	n = wt_proto_encode(&h, slopes, buf, sizeof(buf));
	assert_int_equal(n, HDR + 40);
	assert_int_equal(wt_proto_decode(buf, (size_t)n, &got, &payload), 0);
	assert_int_equal(got.kind, WT_KIND_SLOPES_F32);
	assert_true(got.sequence == 1);
	assert_true(got.timestamp_ns == 0);
	assert_int_equal(got.width, 10);
	assert_int_equal(got.height, 1);
	assert_int_equal(got.payload_bytes, 40);
	assert_ptr_equal(payload, buf + HDR);
	assert_memory_equal(payload, slopes, sizeof(slopes));
}

static void round_trip_command(void **state)
{
	float cmd[97];
	uint8_t buf[BUF_MAX];
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_COMMAND_F32,
		.sequence = UINT64_MAX,
		.timestamp_ns = UINT64_MAX - 1,
		.width = 97,
		.height = 1,
		.payload_bytes = sizeof(cmd),
	};
	wt_header got;
	const void *payload = NULL;
	int i, n;

	(void)state;
	for (i = 0; i < 97; i++) {
		cmd[i] = -1.0f + 2.0f * (float)i / 96.0f;
	}
	n = wt_proto_encode(&h, cmd, buf, sizeof(buf));
	assert_int_equal(n, HDR + 4 * 97);
	assert_int_equal(wt_proto_decode(buf, (size_t)n, &got, &payload), 0);
	assert_int_equal(got.kind, WT_KIND_COMMAND_F32);
	/* all 64 bits survive (top bytes included) */
	assert_true(got.sequence == UINT64_MAX);
	assert_true(got.timestamp_ns == UINT64_MAX - 1);
	assert_int_equal(got.width, 97);
	assert_int_equal(got.height, 1);
	assert_ptr_equal(payload, buf + HDR);
	assert_memory_equal(payload, cmd, sizeof(cmd));
}

/*
 * Byte-exact layout against arrays worked by hand from the table in
 * wt_proto.h (little-endian: least significant byte first).
 */
static void wire_layout_matches_bytes_worked_by_hand(void **state)
{
	/* The worked example of wt_proto.h: 2 x 1 pixels 0x0102, 0xa0b0,
	 * sequence 5, timestamp 1000 ns (0x3e8). */
	static const uint8_t pixels_wire[] = {
		0x57, 0x54, 0x52, 0x4d,				/* "WTRM" */
		0x01, 0x00,					/* version 1 */
		0x01, 0x00,					/* kind 1 */
		0x05, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, /* seq 5 */
		0xe8, 0x03, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, /* 1000 ns */
		0x02, 0x00, 0x00, 0x00,				/* width 2 */
		0x01, 0x00, 0x00, 0x00,				/* height 1 */
		0x04, 0x00, 0x00, 0x00,				/* 4 bytes */
		0x00, 0x00, 0x00, 0x00,				/* reserved */
		0x02, 0x01, 0xb0, 0xa0,				/* pixels */
	};
	/* A command of 2 values 1.0f (0x3f800000) and -2.5f (0xc0200000,
	 * IEEE 754 binary32: sign 1, exponent 128, fraction 0.25), answering
	 * frame 0x0102030405060708 at time 0x1122334455667788. */
	static const uint8_t command_wire[] = {
		0x57, 0x54, 0x52, 0x4d, 0x01, 0x00, 0x03, 0x00, /* magic v k */
		0x08, 0x07, 0x06, 0x05, 0x04, 0x03, 0x02, 0x01, /* sequence */
		0x88, 0x77, 0x66, 0x55, 0x44, 0x33, 0x22, 0x11, /* time */
		0x02, 0x00, 0x00, 0x00, 0x01, 0x00, 0x00, 0x00, /* w, h */
		0x08, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, /* bytes, res */
		0x00, 0x00, 0x80, 0x3f, 0x00, 0x00, 0x20, 0xc0, /* 1, -2.5 */
	};
	const uint8_t pixel_bytes[4] = {0x02, 0x01, 0xb0, 0xa0};
	wt_header h = {
		.version = 1,
		.kind = WT_KIND_PIXELS_U16,
		.sequence = 5,
		.timestamp_ns = 1000,
		.width = 2,
		.height = 1,
		.payload_bytes = 4,
	};
	uint8_t buf[64], hdr[WT_PROTO_HEADER_BYTES];
	wt_header got;
	const void *payload;
	int n;

	(void)state;
	assert_int_equal(WT_PROTO_HEADER_BYTES, 40);
	n = wt_proto_encode(&h, pixel_bytes, buf, sizeof(buf));
	assert_int_equal(n, sizeof(pixels_wire));
	assert_memory_equal(buf, pixels_wire, sizeof(pixels_wire));
	wt_proto_encode_header(&h, hdr);
	assert_memory_equal(hdr, pixels_wire, sizeof(hdr));

	/* and the other way: the hand-made bytes decode to the fields */
	assert_int_equal(wt_proto_decode(command_wire, sizeof(command_wire),
					 &got, &payload),
			 0);
	assert_int_equal(got.version, 1);
	assert_int_equal(got.kind, WT_KIND_COMMAND_F32);
	assert_true(got.sequence == 0x0102030405060708ull);
	assert_true(got.timestamp_ns == 0x1122334455667788ull);
	assert_int_equal(got.width, 2);
	assert_int_equal(got.height, 1);
	assert_int_equal(got.payload_bytes, 8);
	assert_int_equal(got.reserved, 0);
	assert_ptr_equal(payload, command_wire + 40);
#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__
	{
		/* payload values are the host's floats on a little-endian
		 * host (wt_proto.h: payload bytes are handed over as is) */
		const float want[2] = {1.0f, -2.5f};
		float vals[2];

		memcpy(vals, payload, sizeof(vals));
		assert_memory_equal(vals, want, sizeof(want));
		n = wt_proto_encode(&got, want, buf, sizeof(buf));
		assert_int_equal(n, sizeof(command_wire));
		assert_memory_equal(buf, command_wire, sizeof(command_wire));
	}
#endif
}

static void payload_size_follows_kind_and_limit(void **state)
{
	uint32_t bytes = 0;

	(void)state;
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_PIXELS_U16, 3, 4, &bytes), 0);
	assert_int_equal(bytes, 24);
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_SLOPES_F32, 10, 1, &bytes), 0);
	assert_int_equal(bytes, 40);
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_COMMAND_F32, 1, 1, &bytes), 0);
	assert_int_equal(bytes, 4);
	assert_int_equal(wt_proto_payload_size(WT_KIND_COMMAND_F32, 1, 1, NULL),
			 0);

	/* exactly the limit is allowed, one element more is not:
	 * 4096 * 8192 * 2 = 2^26 = 64 MiB, 2^24 floats = 64 MiB */
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_PIXELS_U16, 4096, 8192, &bytes),
		0);
	assert_int_equal(bytes, 64u << 20);
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_SLOPES_F32, 1u << 24, 1, &bytes),
		0);
	assert_int_equal(bytes, 64u << 20);
	bytes = 77;
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_PIXELS_U16, 4096, 8193, &bytes),
		-WT_EPROTO_DIMS);
	assert_int_equal(wt_proto_payload_size(WT_KIND_SLOPES_F32,
					       (1u << 24) + 1, 1, &bytes),
			 -WT_EPROTO_DIMS);
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_COMMAND_F32, 5, 2, &bytes),
		-WT_EPROTO_DIMS);
	assert_int_equal(
		wt_proto_payload_size(WT_KIND_PIXELS_U16, 0, 5, &bytes),
		-WT_EPROTO_DIMS);
	assert_int_equal(wt_proto_payload_size(0, 5, 1, &bytes),
			 -WT_EPROTO_KIND);
	assert_int_equal(wt_proto_payload_size(4, 5, 1, &bytes),
			 -WT_EPROTO_KIND);
	/* failures leave *bytes alone */
	assert_int_equal(bytes, 77);
}

static void refuses_truncated_message(void **state)
{
	static const size_t shorts[] = {0, 1, 3, 4, 5, 7, 8, 23, 36, 39};
	uint8_t buf[BUF_MAX];
	size_t len, i, k;

	(void)state;
	for (k = 0; k < 3; k++) {
		len = make_msg(buf, kinds[k], 4, kinds[k] == 1 ? 3 : 1);
		/* inside the header: too short for a header */
		for (i = 0; i < sizeof(shorts) / sizeof(shorts[0]); i++) {
			expect_refused(buf, shorts[i], -WT_EPROTO_SHORT);
		}
		/* header whole, payload cut: header + payload disagree */
		expect_refused(buf, HDR, -WT_EPROTO_LENGTH);
		expect_refused(buf, HDR + 1, -WT_EPROTO_LENGTH);
		expect_refused(buf, len - 1, -WT_EPROTO_LENGTH);
		expect_refused(buf, len, 0);
	}
}

static void refuses_every_wrong_magic_byte(void **state)
{
	uint8_t buf[BUF_MAX];
	size_t len, i, v;

	(void)state;
	len = make_msg(buf, WT_KIND_PIXELS_U16, 2, 2);
	for (i = 0; i < 4; i++) {
		const uint8_t good = buf[AT_MAGIC + i];
		const uint8_t bad[] = {0x00,
				       0xff,
				       (uint8_t)(good ^ 0x20),
				       (uint8_t)(good + 1),
				       (uint8_t)(good - 1),
				       (uint8_t)(good ^ 0x80)};

		for (v = 0; v < sizeof(bad); v++) {
			buf[AT_MAGIC + i] = bad[v];
			expect_refused(buf, len, -WT_EPROTO_MAGIC);
		}
		buf[AT_MAGIC + i] = good;
		expect_refused(buf, len, 0);
	}
	/* byte order of the magic matters too */
	memcpy(buf + AT_MAGIC, "MRTW", 4);
	expect_refused(buf, len, -WT_EPROTO_MAGIC);
}

static void refuses_unknown_version(void **state)
{
	/* 0x0100 is version 1 written big-endian */
	static const uint16_t bad[] = {0, 2, 3, 0x0100, 0xffff};
	uint8_t buf[BUF_MAX];
	size_t len, i;

	(void)state;
	len = make_msg(buf, WT_KIND_SLOPES_F32, 6, 1);
	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
		poke16(buf, AT_VERSION, bad[i]);
		expect_refused(buf, len, -WT_EPROTO_VERSION);
	}
	poke16(buf, AT_VERSION, 1);
	expect_refused(buf, len, 0);
}

static void refuses_unknown_kind(void **state)
{
	/* 0x0100 is kind 1 written big-endian */
	static const uint16_t bad[] = {0, 4, 5, 0x0100, 0x0300, 0xffff};
	uint8_t buf[BUF_MAX];
	size_t len, i;

	(void)state;
	len = make_msg(buf, WT_KIND_COMMAND_F32, 6, 1);
	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
		poke16(buf, AT_KIND, bad[i]);
		expect_refused(buf, len, -WT_EPROTO_KIND);
	}
}

/* Header-only message of a kind and dimensions, payload_bytes as given. */
static void make_header(uint8_t *buf, uint16_t kind, uint32_t w, uint32_t h,
			uint32_t payload_bytes)
{
	memset(buf, 0, HDR);
	memcpy(buf + AT_MAGIC, "WTRM", 4);
	poke16(buf, AT_VERSION, 1);
	poke16(buf, AT_KIND, kind);
	poke32(buf, AT_WIDTH, w);
	poke32(buf, AT_HEIGHT, h);
	poke32(buf, AT_PAYLOAD_BYTES, payload_bytes);
}

static void refuses_zero_width_or_height(void **state)
{
	uint8_t buf[BUF_MAX];
	size_t k;

	(void)state;
	for (k = 0; k < 3; k++) {
		/* payload_bytes 0 and no payload agree with 0 x n, so only
		 * the dimension check can refuse these */
		make_header(buf, kinds[k], 0, 1, 0);
		expect_refused(buf, HDR, -WT_EPROTO_DIMS);
		make_header(buf, kinds[k], 5, 0, 0);
		expect_refused(buf, HDR, -WT_EPROTO_DIMS);
		make_header(buf, kinds[k], 0, 0, 0);
		expect_refused(buf, HDR, -WT_EPROTO_DIMS);
	}
}

static void refuses_height_other_than_one_for_vectors(void **state)
{
	uint8_t buf[BUF_MAX];

	(void)state;
	memset(buf, 0, sizeof(buf));
	/* sizes that agree with 4 x 3 x 2 = 24 bytes everywhere else */
	make_header(buf, WT_KIND_SLOPES_F32, 3, 2, 24);
	expect_refused(buf, HDR + 24, -WT_EPROTO_DIMS);
	make_header(buf, WT_KIND_COMMAND_F32, 3, 2, 24);
	expect_refused(buf, HDR + 24, -WT_EPROTO_DIMS);
	make_header(buf, WT_KIND_COMMAND_F32, 1, 0xffffffffu, 0);
	expect_refused(buf, HDR, -WT_EPROTO_DIMS);
	/* pixels may have any height */
	make_header(buf, WT_KIND_PIXELS_U16, 3, 4, 24);
	expect_refused(buf, HDR + 24, 0);
}

static void refuses_size_that_overflows_32_bits(void **state)
{
	/* Each product wraps in 32-bit arithmetic to a small value, and the
	 * message is built to agree with that wrapped value, so a decoder
	 * computing in 32 bits would accept it. */
	static const struct {
		uint16_t kind;
		uint32_t w, h, wrapped;
	} cases[] = {
		/* 2^31 * 2 * 2 = 2^33 -> 0 */
		{WT_KIND_PIXELS_U16, 0x80000000u, 2, 0},
		/* (2^32 - 1)^2 * 2 = 2 mod 2^32 */
		{WT_KIND_PIXELS_U16, 0xffffffffu, 0xffffffffu, 2},
		/* 3 * 0x55555556 = 2^32 + 2 -> 2, times 2 -> 4 */
		{WT_KIND_PIXELS_U16, 3, 0x55555556u, 4},
		/* 2^30 * 4 = 2^32 -> 0 */
		{WT_KIND_SLOPES_F32, 0x40000000u, 1, 0},
		/* (2^30 + 1) * 4 = 2^32 + 4 -> 4 */
		{WT_KIND_COMMAND_F32, 0x40000001u, 1, 4},
	};
	uint8_t buf[BUF_MAX];
	size_t i;

	(void)state;
	memset(buf, 0, sizeof(buf));
	for (i = 0; i < sizeof(cases) / sizeof(cases[0]); i++) {
		assert_true(cases[i].wrapped + HDR <= BUF_MAX);
		make_header(buf, cases[i].kind, cases[i].w, cases[i].h,
			    cases[i].wrapped);
		expect_refused(buf, HDR + cases[i].wrapped, -WT_EPROTO_DIMS);
		assert_int_equal(wt_proto_payload_size(cases[i].kind,
						       cases[i].w, cases[i].h,
						       NULL),
				 -WT_EPROTO_DIMS);
	}
}

static void refuses_payload_over_the_limit(void **state)
{
	const size_t max = WT_PROTO_MAX_PAYLOAD;
	uint8_t buf[BUF_MAX];
	uint8_t *big;
	wt_header h;
	const void *payload = NULL;

	(void)state;
	assert_true(max == 64u * 1024u * 1024u);
	/* one pixel row more than 64 MiB allows; payload_bytes as big as
	 * the product (it still fits in 32 bits) */
	make_header(buf, WT_KIND_PIXELS_U16, 4096, 8193, 4096u * 8193u * 2u);
	expect_refused(buf, HDR, -WT_EPROTO_DIMS);
	make_header(buf, WT_KIND_SLOPES_F32, (1u << 24) + 1, 1,
		    ((1u << 24) + 1) * 4u);
	expect_refused(buf, HDR, -WT_EPROTO_DIMS);

	/* exactly at the limit a whole message is accepted (calloc: the
	 * pages of the payload are never touched) */
	big = calloc(1, HDR + max);
	assert_non_null(big);
	make_header(big, WT_KIND_PIXELS_U16, 4096, 8192, (uint32_t)max);
	assert_int_equal(wt_proto_decode(big, HDR + max, &h, &payload), 0);
	assert_int_equal(h.payload_bytes, max);
	assert_ptr_equal(payload, big + HDR);
	free(big);
}

static void refuses_payload_bytes_off_by_one(void **state)
{
	uint8_t buf[BUF_MAX];
	uint32_t pb;
	size_t len, k;

	(void)state;
	for (k = 0; k < 3; k++) {
		len = make_msg(buf, kinds[k], 5, kinds[k] == 1 ? 2 : 1);
		pb = (uint32_t)(len - HDR);
		/* the message length agrees with the wrong payload_bytes, so
		 * only the kind x width x height check can refuse it */
		poke32(buf, AT_PAYLOAD_BYTES, pb + 1);
		expect_refused(buf, len + 1, -WT_EPROTO_PAYLOAD);
		poke32(buf, AT_PAYLOAD_BYTES, pb - 1);
		expect_refused(buf, len - 1, -WT_EPROTO_PAYLOAD);
		poke32(buf, AT_PAYLOAD_BYTES, 0);
		expect_refused(buf, HDR, -WT_EPROTO_PAYLOAD);
		poke32(buf, AT_PAYLOAD_BYTES, pb);
		expect_refused(buf, len, 0);
	}
}

static void refuses_trailing_or_missing_byte(void **state)
{
	uint8_t buf[BUF_MAX];
	size_t len, k;

	(void)state;
	for (k = 0; k < 3; k++) {
		len = make_msg(buf, kinds[k], 8, 1);
		buf[len] = 0xaa;
		expect_refused(buf, len + 1, -WT_EPROTO_LENGTH);
		expect_refused(buf, len - 1, -WT_EPROTO_LENGTH);
		expect_refused(buf, len, 0);
	}
}

static void checks_in_the_documented_order(void **state)
{
	uint8_t buf[BUF_MAX];
	size_t len;

	(void)state;
	memset(buf, 0, sizeof(buf));
	/* a message wrong in every way: the first check named wins */
	len = make_msg(buf, WT_KIND_PIXELS_U16, 4, 4);
	buf[AT_MAGIC] = 'X';
	poke16(buf, AT_VERSION, 9);
	poke16(buf, AT_KIND, 9);
	poke32(buf, AT_WIDTH, 0);
	poke32(buf, AT_PAYLOAD_BYTES, 1);
	expect_refused(buf, 39, -WT_EPROTO_SHORT);
	expect_refused(buf, len + 3, -WT_EPROTO_MAGIC);
	buf[AT_MAGIC] = 'W';
	expect_refused(buf, len + 3, -WT_EPROTO_VERSION);
	poke16(buf, AT_VERSION, 1);
	expect_refused(buf, len + 3, -WT_EPROTO_KIND);
	poke16(buf, AT_KIND, WT_KIND_PIXELS_U16);
	expect_refused(buf, len + 3, -WT_EPROTO_DIMS);
	poke32(buf, AT_WIDTH, 4);
	expect_refused(buf, len + 3, -WT_EPROTO_PAYLOAD);
	poke32(buf, AT_PAYLOAD_BYTES, 32);
	expect_refused(buf, len + 3, -WT_EPROTO_LENGTH);
	expect_refused(buf, len, 0);
}

static void ignores_reserved_field(void **state)
{
	uint8_t buf[BUF_MAX];
	wt_header h;
	const void *payload;
	size_t len;

	(void)state;
	/* a later version may use it: version 1 receivers accept anything */
	len = make_msg(buf, WT_KIND_SLOPES_F32, 3, 1);
	poke32(buf, AT_RESERVED, 0xdeadbeefu);
	assert_int_equal(wt_proto_decode(buf, len, &h, &payload), 0);
	assert_true(h.reserved == 0xdeadbeefu);
	assert_int_equal(h.width, 3);
}

static void failed_decode_leaves_outputs_alone(void **state)
{
	uint8_t buf[BUF_MAX];
	wt_header h, before;
	const void *payload = (const void *)&before;
	size_t len;

	(void)state;
	memset(&h, 0x5a, sizeof(h));
	before = h;
	len = make_msg(buf, WT_KIND_PIXELS_U16, 3, 3);
	assert_int_equal(wt_proto_decode(buf, len - 1, &h, &payload),
			 -WT_EPROTO_LENGTH);
	assert_memory_equal(&h, &before, sizeof(h));
	assert_ptr_equal(payload, &before);
	/* payload pointer is optional, h and msg are not */
	assert_int_equal(wt_proto_decode(buf, len, &h, NULL), 0);
	assert_int_equal(wt_proto_decode(NULL, len, &h, NULL), -EINVAL);
	assert_int_equal(wt_proto_decode(buf, len, NULL, NULL), -EINVAL);
	/* every code has its own text */
	assert_string_not_equal(wt_strerror(-WT_EPROTO_DIMS),
				wt_strerror(-WT_EPROTO_PAYLOAD));
}

static void encode_refuses_what_a_receiver_refuses(void **state)
{
	float vals[4] = {1, 2, 3, 4};
	uint8_t buf[BUF_MAX];
	wt_header good = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_COMMAND_F32,
		.sequence = 9,
		.width = 4,
		.height = 1,
		.payload_bytes = 16,
	};
	wt_header h;

	(void)state;
	h = good;
	h.version = 0;
	assert_int_equal(wt_proto_encode(&h, vals, buf, sizeof(buf)),
			 -WT_EPROTO_VERSION);
	h.version = 2;
	assert_int_equal(wt_proto_encode(&h, vals, buf, sizeof(buf)),
			 -WT_EPROTO_VERSION);
	h = good;
	h.kind = 4;
	assert_int_equal(wt_proto_encode(&h, vals, buf, sizeof(buf)),
			 -WT_EPROTO_KIND);
	h = good;
	h.height = 2;
	assert_int_equal(wt_proto_encode(&h, vals, buf, sizeof(buf)),
			 -WT_EPROTO_DIMS);
	h = good;
	h.payload_bytes = 15;
	assert_int_equal(wt_proto_encode(&h, vals, buf, sizeof(buf)),
			 -WT_EPROTO_PAYLOAD);
	/* buffer one byte short, then just long enough */
	assert_int_equal(wt_proto_encode(&good, vals, buf, HDR + 15), -ENOSPC);
	assert_int_equal(wt_proto_encode(&good, vals, buf, HDR + 16), HDR + 16);
	assert_int_equal(wt_proto_encode(NULL, vals, buf, sizeof(buf)),
			 -EINVAL);
	assert_int_equal(wt_proto_encode(&good, NULL, buf, sizeof(buf)),
			 -EINVAL);
	assert_int_equal(wt_proto_encode(&good, vals, NULL, sizeof(buf)),
			 -EINVAL);
}

static void encode_in_place_keeps_the_payload(void **state)
{
	uint8_t buf[BUF_MAX], ref[BUF_MAX];
	wt_header h = {
		.version = WT_PROTO_VERSION,
		.kind = WT_KIND_PIXELS_U16,
		.sequence = 77,
		.width = 5,
		.height = 3,
		.payload_bytes = 30,
	};
	int i, n;

	(void)state;
	for (i = 0; i < 30; i++) {
		buf[HDR + i] = (uint8_t)(200 - i);
	}
	assert_int_equal(wt_proto_encode(&h, buf + HDR, ref, sizeof(ref)),
			 HDR + 30);
	/* the payload already sits after the header: nothing to copy */
	n = wt_proto_encode(&h, buf + HDR, buf, sizeof(buf));
	assert_int_equal(n, HDR + 30);
	assert_memory_equal(buf, ref, (size_t)n);
}

/*
 * An independent statement of the rules of wt_proto.h, written as plainly
 * as possible, to judge the decoder in the random sweep.
 */
static int reference_verdict(const uint8_t *m, size_t len)
{
	uint32_t v, k, w, h, pb, elem;
	unsigned long long need;

	if (len < 40) {
		return -WT_EPROTO_SHORT;
	}
	if (m[0] != 'W' || m[1] != 'T' || m[2] != 'R' || m[3] != 'M') {
		return -WT_EPROTO_MAGIC;
	}
	v = m[4] + 256u * m[5];
	k = m[6] + 256u * m[7];
	w = m[24] + 256u * (m[25] + 256u * (m[26] + 256u * m[27]));
	h = m[28] + 256u * (m[29] + 256u * (m[30] + 256u * m[31]));
	pb = m[32] + 256u * (m[33] + 256u * (m[34] + 256u * m[35]));
	if (v != 1) {
		return -WT_EPROTO_VERSION;
	}
	if (k < 1 || k > 3) {
		return -WT_EPROTO_KIND;
	}
	elem = k == 1 ? 2 : 4;
	if (w == 0 || h == 0 || (k != 1 && h != 1)) {
		return -WT_EPROTO_DIMS;
	}
	/* divide rather than multiply: no overflow to reason about */
	if (w > 67108864u / elem / h) {
		return -WT_EPROTO_DIMS;
	}
	need = (unsigned long long)w * h * elem;
	if (pb != need) {
		return -WT_EPROTO_PAYLOAD;
	}
	if (len != 40 + need) {
		return -WT_EPROTO_LENGTH;
	}
	return 0;
}

/* A random value biased towards the edges a decoder gets wrong. */
static uint32_t edgy_u32(uint64_t *rng, uint32_t right)
{
	switch (next_rand(rng) % 8) {
	case 0:
		return 0;
	case 1:
		return 1;
	case 2:
		return right + 1;
	case 3:
		return right - 1;
	case 4:
		return (uint32_t)next_rand(rng);
	case 5:
		return (uint32_t)(next_rand(rng) % 40);
	default:
		return right;
	}
}

static void random_bytes_never_crash_or_pass_unfaithfully(void **state)
{
	const int rounds = 60000;
	uint64_t rng = wt_test_seed(20240611);
	uint8_t *work = malloc(BUF_MAX + 8);
	uint8_t *again = malloc(BUF_MAX + 8);
	long seen[8] = {0};
	int r;

	(void)state;
	assert_non_null(work);
	assert_non_null(again);
	for (r = 0; r < rounds; r++) {
		uint16_t kind = kinds[next_rand(&rng) % 3];
		size_t len, i;
		const uint8_t *copy;
		const void *payload = NULL;
		wt_header h;
		int rc, want;

		switch (r % 3) {
		case 0: /* bytes, mostly under a random header */
			len = next_rand(&rng) % 120;
			for (i = 0; i < len; i++) {
				work[i] = (uint8_t)next_rand(&rng);
			}
			if (len >= 4 && next_rand(&rng) % 2) {
				memcpy(work, "WTRM", 4);
			}
			break;
		case 1: { /* plausible header, fields near the edges */
			uint32_t w = 1 + next_rand(&rng) % 30;
			uint32_t hh = kind == 1 ? 1 + next_rand(&rng) % 20 : 1;
			uint32_t pb;

			pb = elem_of(kind) * w * hh;
			make_header(work, (uint16_t)edgy_u32(&rng, kind),
				    edgy_u32(&rng, w), edgy_u32(&rng, hh),
				    edgy_u32(&rng, pb));
			poke16(work, AT_VERSION,
			       (uint16_t)edgy_u32(&rng, WT_PROTO_VERSION));
			poke32(work, AT_RESERVED, (uint32_t)next_rand(&rng));
			len = HDR + edgy_u32(&rng, pb) % (BUF_MAX - HDR);
			for (i = HDR; i < len; i++) {
				work[i] = (uint8_t)next_rand(&rng);
			}
			break;
		}
		default: { /* a valid message with a few bytes changed */
			int flips = (int)(next_rand(&rng) % 3);

			len = make_msg(work, kind, 1 + next_rand(&rng) % 16,
				       kind == 1 ? 1 + next_rand(&rng) % 8 : 1);
			while (flips-- > 0) {
				work[next_rand(&rng) % HDR] ^=
					(uint8_t)(1u << (next_rand(&rng) % 8));
			}
			if (next_rand(&rng) % 4 == 0) {
				len += (size_t)(next_rand(&rng) % 3) - 1;
			}
			break;
		}
		}

		rc = decode_exact(work, len, &h, &payload, &copy);
		want = reference_verdict(copy, len);
		if (rc != want) {
			print_error(
				"round %d: len %zu decode %d, rules say %d\n",
				r, len, rc, want);
		}
		assert_int_equal(rc, want);
		if (rc == 0) {
			/* accepted: it must be exactly what its fields say */
			int n;

			assert_ptr_equal(payload, copy + HDR);
			n = wt_proto_encode(&h, payload, again, BUF_MAX + 8);
			assert_int_equal(n, len);
			assert_memory_equal(again, copy, len);
			seen[0]++;
		} else {
			assert_true(rc <= -WT_EPROTO_SHORT &&
				    rc >= -WT_EPROTO_LENGTH);
			seen[-rc - WT_EPROTO_SHORT + 1]++;
		}
		free((void *)copy);
	}
	/* the sweep reached every verdict, so it explored past each check */
	for (r = 0; r < 8; r++) {
		print_message("verdict %d: %ld\n", r, seen[r]);
		assert_true(seen[r] > 0);
	}
	free(work);
	free(again);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(round_trip_pixels),
	cmocka_unit_test(round_trip_slopes),
	cmocka_unit_test(round_trip_command),
	cmocka_unit_test(wire_layout_matches_bytes_worked_by_hand),
	cmocka_unit_test(payload_size_follows_kind_and_limit),
	cmocka_unit_test(refuses_truncated_message),
	cmocka_unit_test(refuses_every_wrong_magic_byte),
	cmocka_unit_test(refuses_unknown_version),
	cmocka_unit_test(refuses_unknown_kind),
	cmocka_unit_test(refuses_zero_width_or_height),
	cmocka_unit_test(refuses_height_other_than_one_for_vectors),
	cmocka_unit_test(refuses_size_that_overflows_32_bits),
	cmocka_unit_test(refuses_payload_over_the_limit),
	cmocka_unit_test(refuses_payload_bytes_off_by_one),
	cmocka_unit_test(refuses_trailing_or_missing_byte),
	cmocka_unit_test(checks_in_the_documented_order),
	cmocka_unit_test(ignores_reserved_field),
	cmocka_unit_test(failed_decode_leaves_outputs_alone),
	cmocka_unit_test(encode_refuses_what_a_receiver_refuses),
	cmocka_unit_test(encode_in_place_keeps_the_payload),
	cmocka_unit_test(random_bytes_never_crash_or_pass_unfaithfully),
};

WT_TEST_MAIN(tests)
