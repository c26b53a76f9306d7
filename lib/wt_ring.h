/*
 * wt_ring.h - lock-free single-producer single-consumer ring of records.
 *
 * The loop thread pushes one telemetry record per frame; the telemetry
 * thread drains them.  Records have one fixed size, chosen at creation, and
 * are stored inside the ring (no pointers to chase, no allocation after
 * wt_ring_create()).  When the ring is full the producer is told so
 * (-EAGAIN / NULL) and decides what to do: the loop drops the record and
 * counts it, it never waits for the consumer.
 *
 * Threads: exactly one thread may call the producer functions (push,
 * claim, publish) and exactly one thread the consumer functions (pop, peek,
 * release), at a time; they may be the same thread.  wt_ring_count() may be
 * called from anywhere.  create and destroy need the ring to be idle.
 *
 * Memory order: a record's bytes are written before the producer's index
 * is stored with release order, and the consumer loads that index with
 * acquire order before it reads the bytes (and the same the other way for
 * slot reuse), so a record read by the consumer is always complete.  The
 * two indices sit on separate 64-byte cache lines so the threads do not
 * contend for one line.
 */
#ifndef WT_RING_H
#define WT_RING_H

#include <stddef.h>

#include "wt_error.h"

/** The ring (opaque). */
typedef struct wt_ring wt_ring;

/**
 * Make a ring of capacity records of record_bytes bytes each.  capacity
 * must be a power of two (1, 2, 4, ...); every record slot is aligned for
 * any object type (alignof(max_align_t)).  Refuses (-EINVAL, with a message
 * in *err) record_bytes 0, a capacity that is 0 or not a power of two, a
 * total size that does not fit in size_t, and a NULL out; -ENOMEM when
 * allocation fails.  On failure *out is left alone.
 */
int wt_ring_create(size_t record_bytes, size_t capacity, wt_ring **out,
		   wt_error *err);

/** Free the ring (NULL is allowed). */
void wt_ring_destroy(wt_ring *r);

/** Producer: copy one record in.  Returns 0, or -EAGAIN when full. */
int wt_ring_push(wt_ring *r, const void *rec);

/** Consumer: copy the oldest record out.  Returns 0, or -EAGAIN when
 * empty. */
int wt_ring_pop(wt_ring *r, void *rec);

/**
 * Producer, zero-copy: the slot the next record goes to, or NULL when the
 * ring is full.  Fill it, then wt_ring_publish().  Until then the consumer
 * cannot see it; claiming again returns the same slot.  Do not push between
 * a claim and its publish.
 */
void *wt_ring_claim(wt_ring *r);

/** Producer: hand the claimed slot to the consumer.  Does nothing when no
 * slot is claimed (e.g. after wt_ring_claim() returned NULL). */
void wt_ring_publish(wt_ring *r);

/**
 * Consumer, zero-copy: the oldest record, in place, or NULL when the ring
 * is empty.  It stays valid and unchanged until wt_ring_release(); peeking
 * again returns the same record.  Do not pop between a peek and its
 * release.
 */
const void *wt_ring_peek(wt_ring *r);

/** Consumer: free the peeked record's slot for the producer.  Does nothing
 * when no record is peeked. */
void wt_ring_release(wt_ring *r);

/** Records published and not yet consumed (a snapshot when the other side
 * is running; never above the capacity). */
size_t wt_ring_count(const wt_ring *r);

#endif /* WT_RING_H */
