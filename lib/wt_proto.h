/*
 * wt_proto.h - the driver-link wire format: one message = header + payload.
 *
 * This comment is the definitive description of the format for anyone who
 * writes a camera or mirror driver, in any language.  Every frame a driver
 * sends to wavetrimd and every command wavetrimd sends back is one
 * single-part ZeroMQ message laid out as follows.
 *
 * Header: 40 bytes, every integer little-endian, no padding.
 *
 *   offset size type     field          meaning
 *   ------ ---- -------- -------------- ------------------------------------
 *        0    4 char[4]  magic          the 4 ASCII bytes 'W' 'T' 'R' 'M'
 *                                       (0x57 0x54 0x52 0x4d), no terminator
 *        4    2 u16      version        protocol version, 1 for this format
 *        6    2 u16      kind           what the payload holds (see below)
 *        8    8 u64      sequence       frames: the frame id, counting up by
 *                                       one per frame (a gap means frames
 *                                       were lost); commands: the id of the
 *                                       frame the command answers
 *       16    8 u64      timestamp_ns   frames: time at the middle of the
 *                                       exposure; commands: time of sending;
 *                                       nanoseconds of CLOCK_MONOTONIC or of
 *                                       the driver's own clock
 *       24    4 u32      width          pixels across (PIXELS), or the count
 *                                       of float values (SLOPES, COMMAND)
 *       28    4 u32      height         pixel rows (PIXELS); 1 otherwise
 *       32    4 u32      payload_bytes  bytes after the header; must equal
 *                                       element size x width x height
 *       36    4 u32      reserved       senders write 0; receivers ignore it
 *                                       (a later version may give it a use,
 *                                       so a receiver must not refuse it)
 *       40    -          payload        payload_bytes bytes, nothing after
 *
 * Kinds:
 *
 *   value name                  element       payload
 *   ----- --------------------- ------------- -------------------------------
 *       1 WT_KIND_PIXELS_U16    u16, 2 bytes  camera image, width x height
 *                                             pixels, row-major (row 0 first,
 *                                             column index fastest), no flip
 *       2 WT_KIND_SLOPES_F32    f32, 4 bytes  slope vector, width values:
 *                                             all x slopes then all y slopes
 *                                             in the order of the lenslet
 *                                             grid's valid list; height 1
 *       3 WT_KIND_COMMAND_F32   f32, 4 bytes  mirror command, width values
 *                                             (one per actuator, normalised
 *                                             stroke in [-1, 1]); height 1
 *
 * Payload elements are little-endian too (u16 as two bytes low first, f32
 * as IEEE 754 binary32 with its four bytes low first).  This module copies
 * the payload bytes as they are and hands them back without a copy, so on a
 * big-endian host the caller swaps them (every platform wavetrim supports is
 * little-endian).
 *
 * What a receiver refuses.  wt_proto_decode() checks, in this order, and
 * stops at the first failure with its own code (lib/wt_error.h):
 *
 *   1. WT_EPROTO_SHORT    the message is shorter than the 40-byte header
 *   2. WT_EPROTO_MAGIC    any of the 4 magic bytes differs
 *   3. WT_EPROTO_VERSION  version is not 1 (a receiver refuses versions it
 *                         does not know, older or newer)
 *   4. WT_EPROTO_KIND     kind is not 1, 2 or 3
 *   5. WT_EPROTO_DIMS     width or height is 0; height is not 1 for SLOPES
 *                         or COMMAND; or element size x width x height is
 *                         above WT_PROTO_MAX_PAYLOAD (64 MiB), which also
 *                         covers any product that would overflow 32 bits
 *   6. WT_EPROTO_PAYLOAD  payload_bytes differs from element size x width x
 *                         height
 *   7. WT_EPROTO_LENGTH   the message length differs from 40 +
 *                         payload_bytes (a missing or a trailing byte)
 *
 * The reserved field is never checked.  A refused message is dropped and
 * counted; nothing in it is trusted or used.
 *
 * Alignment: the payload starts 40 bytes after the start of the message, so
 * a message buffer aligned to 8 bytes gives a payload aligned to 8 bytes
 * (enough for u16 and f32).  The decoder does not check alignment; a caller
 * that reads the payload in place as uint16_t or float must see to it (or
 * memcpy the values out).
 *
 * Worked example: a 2 x 1 pixel frame, sequence 5, timestamp 1000 ns,
 * pixels 0x0102 and 0xa0b0, is these 44 bytes (hex):
 *
 *   57 54 52 4d  01 00  01 00  05 00 00 00 00 00 00 00
 *   e8 03 00 00 00 00 00 00  02 00 00 00  01 00 00 00
 *   04 00 00 00  00 00 00 00  02 01  b0 a0
 */
#ifndef WT_PROTO_H
#define WT_PROTO_H

#include <stddef.h>
#include <stdint.h>

#include "wt_error.h"

/** The 4 magic bytes (no terminator on the wire). */
#define WT_PROTO_MAGIC "WTRM"
/** The one version this code speaks. */
#define WT_PROTO_VERSION 1
/** Bytes of the header; the payload starts at this offset. */
#define WT_PROTO_HEADER_BYTES 40
/** Largest payload accepted, in bytes (64 MiB). */
#define WT_PROTO_MAX_PAYLOAD (64u << 20)

/** What the payload of a message holds. */
enum wt_kind {
	WT_KIND_PIXELS_U16 = 1,	 /**< width x height uint16 pixels */
	WT_KIND_SLOPES_F32 = 2,	 /**< width float slopes, height 1 */
	WT_KIND_COMMAND_F32 = 3, /**< width float actuator commands, height 1 */
};

/** The header fields after the magic, in host byte order. */
typedef struct wt_header {
	uint16_t version;	/**< WT_PROTO_VERSION */
	uint16_t kind;		/**< enum wt_kind */
	uint64_t sequence;	/**< frame id, or the frame id answered */
	uint64_t timestamp_ns;	/**< exposure middle (frames) or send time */
	uint32_t width;		/**< pixels across, or count of values */
	uint32_t height;	/**< pixel rows, or 1 */
	uint32_t payload_bytes; /**< element size x width x height */
	uint32_t reserved;	/**< 0 when sending; ignored on receipt */
} wt_header;

/**
 * Payload size of a message of this kind and these dimensions, checked as
 * the decoder checks it (steps 4 and 5 above).  Writes the size to *bytes
 * when bytes is not NULL.  Returns 0, -WT_EPROTO_KIND or -WT_EPROTO_DIMS
 * (and leaves *bytes alone on failure).
 */
int wt_proto_payload_size(uint16_t kind, uint32_t width, uint32_t height,
			  uint32_t *bytes);

/**
 * Write the 40 header bytes of h (magic included) to out, field by field as
 * in the table above.  Writes every field as given, reserved included, and
 * checks nothing: wt_proto_encode() is the checked way to build a message.
 */
void wt_proto_encode_header(const wt_header *h,
			    uint8_t out[WT_PROTO_HEADER_BYTES]);

/**
 * Build a whole message in buf: the header of h, then h->payload_bytes
 * bytes copied from payload.  The payload may already sit at
 * buf + WT_PROTO_HEADER_BYTES (fill it in place, then encode: nothing is
 * copied); any other overlap with buf is not allowed.
 *
 * Refuses what a receiver would refuse: -WT_EPROTO_VERSION when h->version
 * is not WT_PROTO_VERSION, -WT_EPROTO_KIND, -WT_EPROTO_DIMS,
 * -WT_EPROTO_PAYLOAD when h->payload_bytes disagrees with the dimensions;
 * and -EINVAL for a NULL h, payload or buf, -ENOSPC when buf_len is less
 * than WT_PROTO_HEADER_BYTES + h->payload_bytes.  h->reserved is written as
 * given (leave it 0).
 *
 * Returns the message length in bytes (> 0) or a negative code.
 */
int wt_proto_encode(const wt_header *h, const void *payload, void *buf,
		    size_t buf_len);

/**
 * Check the len bytes at msg as described above and, when they pass, fill
 * *h and set *payload (if payload is not NULL) to the payload inside msg
 * (no copy; valid while msg is).  h->reserved reports the field as
 * received.
 *
 * Returns 0, or the negative WT_EPROTO_* code of the first check that fails
 * (then *h and *payload are left alone), or -EINVAL for a NULL msg or h.
 * Reads no byte outside msg[0 .. len - 1].
 */
int wt_proto_decode(const void *msg, size_t len, wt_header *h,
		    const void **payload);

#endif /* WT_PROTO_H */
