/* test_ring.c - lock-free SPSC record ring (lib/wt_ring). */
#include "wt_test.h"

#include <errno.h>
#include <pthread.h>
#include <sched.h>
#include <stdalign.h>
#include <stdatomic.h>
#include <stdbool.h>
#include <string.h>
#include <time.h>

#include "wt_ring.h"

/* splitmix64 (Steele, Lea, Flood 2014): small, seedable, deterministic. */
static uint64_t next_rand(uint64_t *state)
{
	uint64_t z = (*state += 0x9e3779b97f4a7c15ull);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
	return z ^ (z >> 31);
}

/* A small record whose content is a function of its sequence number. */
struct small_rec {
	uint32_t seq;
	uint8_t tag[9]; /* odd total size: slots are padded, records not */
};

static void fill_small(struct small_rec *r, uint32_t seq)
{
	int i;

	memset(r, 0, sizeof(*r));
	r->seq = seq;
	for (i = 0; i < 9; i++) {
		r->tag[i] = (uint8_t)(seq * 31u + (uint32_t)i);
	}
}

static void check_small(const struct small_rec *r, uint32_t seq)
{
	struct small_rec want;

	fill_small(&want, seq);
	assert_int_equal(r->seq, seq);
	assert_memory_equal(r->tag, want.tag, sizeof(want.tag));
}

static void starts_empty_and_refuses_when_full(void **state)
{
	struct small_rec rec, out;
	wt_ring *r = NULL;
	uint32_t i;

	(void)state;
	assert_int_equal(wt_ring_create(sizeof(rec), 8, &r, NULL), 0);
	assert_non_null(r);

	/* empty: nothing to pop or peek, release does nothing */
	assert_int_equal(wt_ring_count(r), 0);
	assert_int_equal(wt_ring_pop(r, &out), -EAGAIN);
	assert_null(wt_ring_peek(r));
	wt_ring_release(r);
	assert_int_equal(wt_ring_count(r), 0);
	assert_int_equal(wt_ring_pop(r, &out), -EAGAIN);

	/* fill exactly to the capacity */
	for (i = 0; i < 8; i++) {
		fill_small(&rec, 100 + i);
		assert_int_equal(wt_ring_push(r, &rec), 0);
		assert_int_equal(wt_ring_count(r), i + 1);
	}
	/* full: push and claim refused, publish without a claim does
	 * nothing, nothing already in is disturbed */
	fill_small(&rec, 999);
	assert_int_equal(wt_ring_push(r, &rec), -EAGAIN);
	assert_null(wt_ring_claim(r));
	wt_ring_publish(r);
	assert_int_equal(wt_ring_count(r), 8);

	/* one out makes room for exactly one in */
	assert_int_equal(wt_ring_pop(r, &out), 0);
	check_small(&out, 100);
	fill_small(&rec, 108);
	assert_int_equal(wt_ring_push(r, &rec), 0);
	assert_int_equal(wt_ring_push(r, &rec), -EAGAIN);

	for (i = 1; i <= 8; i++) {
		assert_int_equal(wt_ring_pop(r, &out), 0);
		check_small(&out, 100 + i);
	}
	assert_int_equal(wt_ring_pop(r, &out), -EAGAIN);
	assert_int_equal(wt_ring_count(r), 0);
	wt_ring_destroy(r);

	/* capacity 1 is a power of two too (2^0) */
	assert_int_equal(wt_ring_create(sizeof(rec), 1, &r, NULL), 0);
	fill_small(&rec, 7);
	assert_int_equal(wt_ring_push(r, &rec), 0);
	assert_int_equal(wt_ring_push(r, &rec), -EAGAIN);
	assert_int_equal(wt_ring_count(r), 1);
	assert_int_equal(wt_ring_pop(r, &out), 0);
	check_small(&out, 7);
	assert_int_equal(wt_ring_pop(r, &out), -EAGAIN);
	wt_ring_destroy(r);
	wt_ring_destroy(NULL);
}

static void keeps_order_over_many_wrap_arounds(void **state)
{
	const size_t cap = 4;
	uint64_t rng = wt_test_seed(77);
	struct small_rec rec, out;
	uint32_t next_in = 0, next_out = 0;
	wt_ring *r = NULL;
	int round;

	(void)state;
	assert_int_equal(wt_ring_create(sizeof(rec), cap, &r, NULL), 0);
	/* random bursts in and out, checked against a plain counter model
	 * of a FIFO of at most cap entries */
	for (round = 0; round < 40000; round++) {
		int k = (int)(next_rand(&rng) % (cap + 2));
		int j = (int)(next_rand(&rng) % (cap + 2));

		while (k-- > 0) {
			int rc;

			fill_small(&rec, next_in);
			rc = wt_ring_push(r, &rec);
			if (next_in - next_out == cap) {
				assert_int_equal(rc, -EAGAIN);
			} else {
				assert_int_equal(rc, 0);
				next_in++;
			}
		}
		assert_int_equal(wt_ring_count(r), next_in - next_out);
		while (j-- > 0) {
			int rc = wt_ring_pop(r, &out);

			if (next_in == next_out) {
				assert_int_equal(rc, -EAGAIN);
			} else {
				assert_int_equal(rc, 0);
				check_small(&out, next_out);
				next_out++;
			}
		}
		assert_int_equal(wt_ring_count(r), next_in - next_out);
	}
	/* each of the 4 slots was reused over ten thousand times */
	print_message("%u records through %zu slots\n", next_out, cap);
	assert_true(next_out > 10 * 1000 * cap);
	wt_ring_destroy(r);
}

static void claim_publish_peek_release_work_in_place(void **state)
{
	const size_t align = alignof(max_align_t);
	struct small_rec rec, out;
	void *slots[4];
	wt_ring *r = NULL;
	const void *seen;
	void *slot;
	int i, k;

	(void)state;
	assert_int_equal(wt_ring_create(sizeof(rec), 4, &r, NULL), 0);

	/* a claimed slot is invisible to the consumer until published */
	slot = wt_ring_claim(r);
	assert_non_null(slot);
	assert_true((uintptr_t)slot % align == 0);
	assert_ptr_equal(wt_ring_claim(r), slot);
	fill_small(slot, 5);
	assert_int_equal(wt_ring_count(r), 0);
	assert_null(wt_ring_peek(r));
	assert_int_equal(wt_ring_pop(r, &out), -EAGAIN);
	wt_ring_publish(r);
	assert_int_equal(wt_ring_count(r), 1);
	/* a second publish without a claim publishes nothing */
	wt_ring_publish(r);
	assert_int_equal(wt_ring_count(r), 1);

	/* the consumer sees the very bytes the producer wrote: no copy */
	seen = wt_ring_peek(r);
	assert_ptr_equal(seen, slot);
	check_small(seen, 5);
	assert_ptr_equal(wt_ring_peek(r), seen);
	assert_int_equal(wt_ring_count(r), 1);
	wt_ring_release(r);
	assert_int_equal(wt_ring_count(r), 0);
	wt_ring_release(r); /* nothing peeked: no effect */
	assert_int_equal(wt_ring_count(r), 0);
	assert_null(wt_ring_peek(r));

	/* copy and zero-copy calls mix freely */
	fill_small(&rec, 6);
	assert_int_equal(wt_ring_push(r, &rec), 0);
	seen = wt_ring_peek(r);
	assert_non_null(seen);
	check_small(seen, 6);
	wt_ring_release(r);
	slot = wt_ring_claim(r);
	assert_non_null(slot);
	fill_small(slot, 7);
	wt_ring_publish(r);
	assert_int_equal(wt_ring_pop(r, &out), 0);
	check_small(&out, 7);

	/* claiming until full hands out cap distinct aligned slots that do
	 * not overlap */
	for (i = 0; i < 4; i++) {
		slots[i] = wt_ring_claim(r);
		assert_non_null(slots[i]);
		assert_true((uintptr_t)slots[i] % align == 0);
		for (k = 0; k < i; k++) {
			uintptr_t a = (uintptr_t)slots[i];
			uintptr_t b = (uintptr_t)slots[k];

			assert_true(a >= b + sizeof(rec) ||
				    b >= a + sizeof(rec));
		}
		fill_small(slots[i], 10 + (uint32_t)i);
		wt_ring_publish(r);
	}
	assert_null(wt_ring_claim(r));
	for (i = 0; i < 4; i++) {
		seen = wt_ring_peek(r);
		assert_ptr_equal(seen, slots[i]);
		check_small(seen, 10 + (uint32_t)i);
		wt_ring_release(r);
	}
	assert_null(wt_ring_peek(r));
	wt_ring_destroy(r);
}

static void refuses_bad_sizes(void **state)
{
	static const size_t bad_caps[] = {
		0, 3, 5, 6, 7, 12, 100, 1000, (SIZE_MAX >> 1) + 2};
	static char dummy;
	wt_ring *sentinel = (wt_ring *)&dummy;
	wt_ring *r;
	wt_error err;
	size_t i;

	(void)state;
	for (i = 0; i < sizeof(bad_caps) / sizeof(bad_caps[0]); i++) {
		r = sentinel;
		wt_error_clear(&err);
		assert_int_equal(wt_ring_create(16, bad_caps[i], &r, &err),
				 -EINVAL);
		assert_int_equal(err.code, -EINVAL);
		assert_true(strlen(err.msg) > 0);
		assert_ptr_equal(r, sentinel);
	}
	r = sentinel;
	assert_int_equal(wt_ring_create(0, 8, &r, &err), -EINVAL);
	assert_ptr_equal(r, sentinel);
	/* sizes whose product does not fit in size_t */
	assert_int_equal(wt_ring_create(SIZE_MAX, 2, &r, &err), -EINVAL);
	assert_int_equal(wt_ring_create(SIZE_MAX / 4, 8, &r, &err), -EINVAL);
	assert_int_equal(
		wt_ring_create((size_t)1 << 40, (size_t)1 << 30, &r, &err),
		-EINVAL);
	assert_ptr_equal(r, sentinel);
	/* no out, and err may be NULL */
	assert_int_equal(wt_ring_create(16, 8, NULL, NULL), -EINVAL);
	assert_int_equal(wt_ring_create(16, 6, &r, NULL), -EINVAL);
	/* the smallest legal sizes */
	assert_int_equal(wt_ring_create(1, 1, &r, &err), 0);
	wt_ring_destroy(r);
	assert_int_equal(wt_ring_create(1, 2, &r, &err), 0);
	wt_ring_destroy(r);
}

/*
 * Two threads.  Each record carries its sequence number, a payload that is
 * a function of that number, and a checksum of the payload; the consumer
 * checks all three, so a lost, duplicated, reordered, torn or stale record
 * is counted.  The producer uses push and claim/publish in turn, the
 * consumer pop and peek/release, so both paths run under contention.
 */
#define WORDS 13

struct thread_rec {
	uint64_t seq;
	uint32_t words[WORDS];
	uint32_t check;
};

struct run {
	wt_ring *ring;
	size_t capacity;
	uint64_t n;
	struct timespec deadline;
	atomic_int timed_out;
	/* producer */
	uint64_t full_hits;
	/* consumer */
	uint64_t received, bad_seq, bad_payload, bad_check, bad_count;
	uint64_t empty_hits;
};

static uint32_t word_of(uint64_t seq, int i)
{
	uint64_t s = seq * 0x9e3779b97f4a7c15ull + (uint64_t)i;

	return (uint32_t)(next_rand(&s) >> 16);
}

/* FNV-1a, 32 bit (Fowler, Noll, Vo): the checksum of the payload. */
static uint32_t checksum(const uint32_t *words)
{
	const uint8_t *p = (const uint8_t *)words;
	uint32_t h = 2166136261u;
	size_t i;

	for (i = 0; i < WORDS * sizeof(uint32_t); i++) {
		h = (h ^ p[i]) * 16777619u;
	}
	return h;
}

static void make_thread_rec(struct thread_rec *r, uint64_t seq)
{
	int i;

	r->seq = seq;
	for (i = 0; i < WORDS; i++) {
		r->words[i] = word_of(seq, i);
	}
	r->check = checksum(r->words);
}

/* True (and flags the run) once the deadline has passed. */
static bool past_deadline(struct run *run)
{
	struct timespec now;

	if (atomic_load(&run->timed_out)) {
		return true;
	}
	clock_gettime(CLOCK_MONOTONIC, &now);
	if (now.tv_sec > run->deadline.tv_sec ||
	    (now.tv_sec == run->deadline.tv_sec &&
	     now.tv_nsec >= run->deadline.tv_nsec)) {
		atomic_store(&run->timed_out, 1);
		return true;
	}
	return false;
}

static void *producer(void *arg)
{
	struct run *run = arg;
	struct thread_rec rec;
	uint64_t seq = 0, misses = 0;

	while (seq < run->n) {
		int ok;

		if (seq % 2 == 0) {
			make_thread_rec(&rec, seq);
			ok = wt_ring_push(run->ring, &rec) == 0;
		} else {
			struct thread_rec *slot = wt_ring_claim(run->ring);

			ok = slot != NULL;
			if (ok) {
				make_thread_rec(slot, seq);
				wt_ring_publish(run->ring);
			}
		}
		if (ok) {
			seq++;
			continue;
		}
		/* full: retry, never drop */
		run->full_hits++;
		if (++misses % 1024 == 0 && past_deadline(run)) {
			break;
		}
		sched_yield();
	}
	return NULL;
}

static void check_thread_rec(struct run *run, const struct thread_rec *rec,
			     uint64_t expect)
{
	int i;

	if (rec->seq != expect) {
		run->bad_seq++;
	}
	if (checksum(rec->words) != rec->check) {
		run->bad_check++;
	}
	for (i = 0; i < WORDS; i++) {
		if (rec->words[i] != word_of(rec->seq, i)) {
			run->bad_payload++;
			break;
		}
	}
}

static void *consumer(void *arg)
{
	struct run *run = arg;
	uint64_t expect = 0, misses = 0;

	while (run->received < run->n) {
		struct thread_rec rec;
		const struct thread_rec *seen;
		uint64_t seq_got;

		if (wt_ring_count(run->ring) > run->capacity) {
			run->bad_count++;
		}
		if (expect % 2 == 0) {
			if (wt_ring_pop(run->ring, &rec) != 0) {
				goto empty;
			}
			check_thread_rec(run, &rec, expect);
			seq_got = rec.seq;
		} else {
			seen = wt_ring_peek(run->ring);
			if (!seen) {
				goto empty;
			}
			check_thread_rec(run, seen, expect);
			seq_got = seen->seq;
			wt_ring_release(run->ring);
		}
		/* resynchronise after a bad one so each fault counts once */
		expect = seq_got + 1;
		run->received++;
		continue;
	empty:
		run->empty_hits++;
		if (++misses % 1024 == 0 && past_deadline(run)) {
			break;
		}
		sched_yield();
	}
	return NULL;
}

static void run_two_threads(size_t capacity, uint64_t n)
{
	struct run run;
	pthread_t prod, cons;
	struct timespec t0, t1;

	memset(&run, 0, sizeof(run));
	atomic_init(&run.timed_out, 0);
	run.n = n;
	run.capacity = capacity;
	assert_int_equal(wt_ring_create(sizeof(struct thread_rec), capacity,
					&run.ring, NULL),
			 0);
	clock_gettime(CLOCK_MONOTONIC, &t0);
	/* generous for 2 busy cores under sanitizers; a correct run of a
	 * million records takes about a second */
	run.deadline = t0;
	run.deadline.tv_sec += 20;

	assert_int_equal(pthread_create(&cons, NULL, consumer, &run), 0);
	assert_int_equal(pthread_create(&prod, NULL, producer, &run), 0);
	assert_int_equal(pthread_join(prod, NULL), 0);
	assert_int_equal(pthread_join(cons, NULL), 0);
	clock_gettime(CLOCK_MONOTONIC, &t1);

	print_message("capacity %zu: %llu records in %.2f s, producer saw "
		      "full %llu times, consumer saw empty %llu times\n",
		      capacity, (unsigned long long)run.received,
		      (double)(t1.tv_sec - t0.tv_sec) +
			      1e-9 * (double)(t1.tv_nsec - t0.tv_nsec),
		      (unsigned long long)run.full_hits,
		      (unsigned long long)run.empty_hits);
	assert_int_equal(atomic_load(&run.timed_out), 0);
	assert_true(run.received == n);
	assert_true(run.bad_seq == 0);
	assert_true(run.bad_check == 0);
	assert_true(run.bad_payload == 0);
	assert_true(run.bad_count == 0);
	/* nothing left over, nothing extra */
	assert_int_equal(wt_ring_count(run.ring), 0);
	assert_null(wt_ring_peek(run.ring));
	if (capacity <= 4) {
		/* a tiny ring must have run into both edges many times */
		assert_true(run.full_hits > 0);
		assert_true(run.empty_hits > 0);
	}
	wt_ring_destroy(run.ring);
}

static void two_threads_move_a_million_records(void **state)
{
	(void)state;
	run_two_threads(1024, 1000000);
}

static void two_threads_through_a_tiny_ring(void **state)
{
	(void)state;
	/* Every record meets a full or an empty ring here, so each costs a
	 * yield: 200,000 keep it to seconds even on a loaded machine. */
	run_two_threads(4, 200000);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(starts_empty_and_refuses_when_full),
	cmocka_unit_test(keeps_order_over_many_wrap_arounds),
	cmocka_unit_test(claim_publish_peek_release_work_in_place),
	cmocka_unit_test(refuses_bad_sizes),
	cmocka_unit_test(two_threads_move_a_million_records),
	cmocka_unit_test(two_threads_through_a_tiny_ring),
};

WT_TEST_MAIN(tests)
