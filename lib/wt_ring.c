/*
 * wt_ring.c - lock-free SPSC ring of fixed-size records (see wt_ring.h).
 *
 * head counts records published by the producer, tail records consumed by
 * the consumer.  Both only grow and wrap modulo 2^N (size_t); since the
 * capacity is a power of two, slot = index & mask stays right across that
 * wrap and head - tail is the fill level.  Each side keeps a private copy
 * of the other side's index and reloads it only when the ring looks full
 * (producer) or empty (consumer), so the cache line of the other index is
 * touched once per burst rather than once per record.
 */
#include "wt_ring.h"

#include <errno.h>
#include <limits.h>
#include <stdalign.h>
#include <stdatomic.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define WT_RING_LINE 64

#if SIZE_MAX == ULONG_MAX
_Static_assert(ATOMIC_LONG_LOCK_FREE == 2, "size_t atomics must be lock-free");
#endif

struct wt_ring {
	/* Read-only after creation, shared by both sides. */
	alignas(WT_RING_LINE) unsigned char *slots;
	size_t record_bytes;
	size_t stride; /* record_bytes rounded up to alignof(max_align_t) */
	size_t mask;   /* capacity - 1 */

	/* Producer's line: head is stored by the producer only. */
	alignas(WT_RING_LINE) atomic_size_t head;
	size_t tail_seen; /* producer's last look at tail */
	bool claimed;

	/* Consumer's line: tail is stored by the consumer only. */
	alignas(WT_RING_LINE) atomic_size_t tail;
	size_t head_seen; /* consumer's last look at head */
	bool peeked;
};

_Static_assert(sizeof(struct wt_ring) % WT_RING_LINE == 0,
	       "slots start on a cache line");

int wt_ring_create(size_t record_bytes, size_t capacity, wt_ring **out,
		   wt_error *err)
{
	const size_t align = alignof(max_align_t);
	size_t stride, bytes;
	wt_ring *r;

	if (!out) {
		return wt_error_set(err, -EINVAL, "ring: NULL out");
	}
	if (record_bytes == 0) {
		return wt_error_set(err, -EINVAL, "ring: record size 0");
	}
	if (capacity == 0 || (capacity & (capacity - 1)) != 0) {
		return wt_error_set(err, -EINVAL,
				    "ring: capacity %zu is not a power of two",
				    capacity);
	}
	if (record_bytes > SIZE_MAX - (align - 1)) {
		return wt_error_set(err, -EINVAL,
				    "ring: record size %zu too large",
				    record_bytes);
	}
	stride = (record_bytes + align - 1) / align * align;
	if (stride > (SIZE_MAX - sizeof(*r) - WT_RING_LINE) / capacity) {
		return wt_error_set(err, -EINVAL,
				    "ring: %zu records of %zu bytes do not "
				    "fit in memory",
				    capacity, record_bytes);
	}
	bytes = sizeof(*r) + stride * capacity;
	/* aligned_alloc wants a multiple of the alignment */
	bytes = (bytes + WT_RING_LINE - 1) / WT_RING_LINE * WT_RING_LINE;
	r = aligned_alloc(WT_RING_LINE, bytes);
	if (!r) {
		return wt_error_set(err, -ENOMEM,
				    "ring: cannot allocate %zu bytes", bytes);
	}
	memset(r, 0, sizeof(*r));
	r->slots = (unsigned char *)r + sizeof(*r);
	r->record_bytes = record_bytes;
	r->stride = stride;
	r->mask = capacity - 1;
	atomic_init(&r->head, 0);
	atomic_init(&r->tail, 0);
	r->tail_seen = 0;
	r->head_seen = 0;
	r->claimed = false;
	r->peeked = false;
	*out = r;
	return 0;
}

void wt_ring_destroy(wt_ring *r)
{
	free(r);
}

static inline unsigned char *slot_of(const wt_ring *r, size_t index)
{
	return r->slots + (index & r->mask) * r->stride;
}

/* Producer: the index of a free slot, or false when the ring is full. */
static inline bool producer_room(wt_ring *r, size_t *head)
{
	size_t h = atomic_load_explicit(&r->head, memory_order_relaxed);

	if (h - r->tail_seen > r->mask) {
		/* acquire: the consumer is done reading the slot we reuse */
		r->tail_seen =
			atomic_load_explicit(&r->tail, memory_order_acquire);
		if (h - r->tail_seen > r->mask) {
			return false;
		}
	}
	*head = h;
	return true;
}

/* Consumer: the index of the oldest record, or false when empty. */
static inline bool consumer_ready(wt_ring *r, size_t *tail)
{
	size_t t = atomic_load_explicit(&r->tail, memory_order_relaxed);

	if (r->head_seen == t) {
		/* acquire: the producer's writes to the slot are visible */
		r->head_seen =
			atomic_load_explicit(&r->head, memory_order_acquire);
		if (r->head_seen == t) {
			return false;
		}
	}
	*tail = t;
	return true;
}

int wt_ring_push(wt_ring *r, const void *rec)
{
	size_t h;

	if (!producer_room(r, &h)) {
		return -EAGAIN;
	}
	memcpy(slot_of(r, h), rec, r->record_bytes);
	atomic_store_explicit(&r->head, h + 1, memory_order_release);
	return 0;
}

int wt_ring_pop(wt_ring *r, void *rec)
{
	size_t t;

	if (!consumer_ready(r, &t)) {
		return -EAGAIN;
	}
	memcpy(rec, slot_of(r, t), r->record_bytes);
	atomic_store_explicit(&r->tail, t + 1, memory_order_release);
	return 0;
}

void *wt_ring_claim(wt_ring *r)
{
	size_t h;

	if (!producer_room(r, &h)) {
		return NULL;
	}
	r->claimed = true;
	return slot_of(r, h);
}

void wt_ring_publish(wt_ring *r)
{
	size_t h;

	if (!r->claimed) {
		return;
	}
	r->claimed = false;
	h = atomic_load_explicit(&r->head, memory_order_relaxed);
	atomic_store_explicit(&r->head, h + 1, memory_order_release);
}

const void *wt_ring_peek(wt_ring *r)
{
	size_t t;

	if (!consumer_ready(r, &t)) {
		return NULL;
	}
	r->peeked = true;
	return slot_of(r, t);
}

void wt_ring_release(wt_ring *r)
{
	size_t t;

	if (!r->peeked) {
		return;
	}
	r->peeked = false;
	t = atomic_load_explicit(&r->tail, memory_order_relaxed);
	atomic_store_explicit(&r->tail, t + 1, memory_order_release);
}

size_t wt_ring_count(const wt_ring *r)
{
	/* tail first: both indices only grow and head >= tail always, so
	 * the head loaded second is at least the tail loaded first; the clamp
	 * covers both sides moving between the two loads. */
	size_t t = atomic_load_explicit(&r->tail, memory_order_acquire);
	size_t h = atomic_load_explicit(&r->head, memory_order_acquire);
	size_t n = h - t;

	return n > r->mask + 1 ? r->mask + 1 : n;
}
