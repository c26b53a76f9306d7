/*
 * test_secure.c - lib/wt_secure: the binding rules as a table of endpoints,
 * and the ZAP handler with a real libzmq CURVE pair in one process (RFC 26
 * CurveZMQ, RFC 27 ZAP): listed keys get in and their messages carry the
 * key as User-Id (zmq_msg_gets(3)), unlisted ones are refused.
 */
#include "wt_test.h"

#include <string.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_secure.h"

static void binding_rules_by_endpoint(void **state)
{
	static const struct {
		const char *endpoint;
		bool bind, keys, ok;
	} cases[] = {
		{"tcp://127.0.0.1:5555", true, false, true},
		{"tcp://127.9.8.7:5555", true, false, true}, /* 127/8 */
		{"tcp://localhost:5555", true, false, true},
		{"tcp://[::1]:5555", true, false, true},
		{"tcp://0.0.0.0:5555", true, false, false},
		{"tcp://*:5555", true, false, false},
		{"tcp://[::]:5555", true, false, false},
		{"tcp://192.0.2.1:5555", false, false, false}, /* RFC 5737 */
		{"tcp://eth0:5555", true, false, false}, /* numeric only */
		{"tcp://127.0.0.1:1;192.0.2.1:5555", false, false, false},
		{"tcp://0.0.0.0:5555", true, true, true},
		{"tcp://192.0.2.1:5555", false, true, true},
		{"inproc://anything", true, false, true},
		{"ipc://@abstract", true, false, false},
		{"ipc://@abstract", true, true, false}, /* keys do not help */
		{"pgm://eth0;239.192.1.1:5555", true, false, false},
		{"ws://127.0.0.1:5555", true, false, false},
		{"ws://192.0.2.1:5555", true, true, true},
	};
	wt_error err;

	(void)state;
	for (size_t i = 0; i < sizeof(cases) / sizeof(cases[0]); i++) {
		int rc = wt_endpoint_check("daemon.control", cases[i].endpoint,
					   cases[i].bind, cases[i].keys, &err);

		if ((rc == 0) != cases[i].ok) {
			fail_msg("%s (bind %d, keys %d): rc %d, %s",
				 cases[i].endpoint, cases[i].bind,
				 cases[i].keys, rc, rc ? err.msg : "");
		}
		if (rc != 0) {
			assert_non_null(strstr(err.msg, cases[i].endpoint));
		}
	}
	assert_true(wt_endpoint_wants_curve("tcp://127.0.0.1:1"));
	assert_false(wt_endpoint_wants_curve("ipc:///tmp/x"));
	assert_false(wt_endpoint_wants_curve("inproc://x"));
}

/* Receive one message within 3 s; its User-Id into user (or ""). */
static int recv_with_user(void *s, char *buf, size_t cap, char *user,
			  size_t user_cap)
{
	zmq_pollitem_t item = {.socket = s, .events = ZMQ_POLLIN};
	zmq_msg_t m;
	const char *u;
	int n;

	if (zmq_poll(&item, 1, 3000) != 1) {
		return -1;
	}
	zmq_msg_init(&m);
	n = zmq_msg_recv(&m, s, 0);
	if (n >= 0) {
		size_t k = (size_t)n < cap - 1 ? (size_t)n : cap - 1;

		memcpy(buf, zmq_msg_data(&m), k);
		buf[k] = '\0';
		u = zmq_msg_gets(&m, "User-Id");
		snprintf(user, user_cap, "%s", u ? u : "");
	}
	zmq_msg_close(&m);
	return n;
}

/* The first handshake event of a client socket (see test_e2e_secure.c). */
static int connect_watched(void *ctx, void *s, const char *ep, int serial)
{
	char name[64];
	void *mon;
	zmq_pollitem_t item;
	uint8_t head[6];
	int event = 0, zero = 0, more = 0;
	size_t more_len = sizeof(more);

	snprintf(name, sizeof(name), "inproc://mon-%d", serial);
	assert_int_equal(zmq_socket_monitor(
				 s, name,
				 ZMQ_EVENT_HANDSHAKE_SUCCEEDED |
					 ZMQ_EVENT_HANDSHAKE_FAILED_AUTH |
					 ZMQ_EVENT_HANDSHAKE_FAILED_PROTOCOL |
					 ZMQ_EVENT_HANDSHAKE_FAILED_NO_DETAIL),
			 0);
	mon = zmq_socket(ctx, ZMQ_PAIR);
	zmq_setsockopt(mon, ZMQ_LINGER, &zero, sizeof(zero));
	assert_int_equal(zmq_connect(mon, name), 0);
	assert_int_equal(zmq_connect(s, ep), 0);
	item = (zmq_pollitem_t){.socket = mon, .events = ZMQ_POLLIN};
	if (zmq_poll(&item, 1, 5000) == 1 &&
	    zmq_recv(mon, head, sizeof(head), 0) == 6) {
		event = head[0] | head[1] << 8;
		zmq_getsockopt(mon, ZMQ_RCVMORE, &more, &more_len);
		if (more) {
			char addr[256];

			zmq_recv(mon, addr, sizeof(addr), 0);
		}
	}
	zmq_socket_monitor(s, NULL, 0);
	zmq_close(mon);
	return event;
}

static void zap_lets_in_listed_keys_with_their_user_id(void **state)
{
	char dir[] = "/tmp/wt-zap-XXXXXX", prefix[64], list[80], text[128];
	char ep[128], buf[64], user[64];
	wt_keypair server, listed, other;
	wt_keylist *allowed = NULL;
	wt_zap *zap = NULL;
	wt_error err;
	void *ctx, *rep, *a, *b;
	uint64_t in = 0, out = 0;
	int zero = 0, one = 1;
	size_t len = sizeof(ep);
	FILE *f;

	(void)state;
	assert_non_null(mkdtemp(dir));
	snprintf(prefix, sizeof(prefix), "%s/server", dir);
	assert_int_equal(wt_key_generate(prefix, &server, &err), 0);
	snprintf(prefix, sizeof(prefix), "%s/listed", dir);
	assert_int_equal(wt_key_generate(prefix, &listed, &err), 0);
	snprintf(prefix, sizeof(prefix), "%s/other", dir);
	assert_int_equal(wt_key_generate(prefix, &other, &err), 0);
	snprintf(list, sizeof(list), "%s/list", dir);
	f = fopen(list, "w");
	assert_non_null(f);
	snprintf(text, sizeof(text), "# one client\n%s # listed\n",
		 listed.public_key);
	fputs(text, f);
	fclose(f);
	assert_int_equal(wt_keylist_load(list, &allowed, &err), 0);

	ctx = zmq_ctx_new();
	assert_int_equal(wt_zap_start(ctx, allowed, NULL, NULL, &zap, &err), 0);
	rep = zmq_socket(ctx, ZMQ_PULL);
	zmq_setsockopt(rep, ZMQ_LINGER, &zero, sizeof(zero));
	assert_int_equal(wt_curve_server(rep, &server, &err), 0);
	assert_int_equal(zmq_bind(rep, "tcp://127.0.0.1:*"), 0);
	zmq_getsockopt(rep, ZMQ_LAST_ENDPOINT, ep, &len);

	a = zmq_socket(ctx, ZMQ_PUSH);
	b = zmq_socket(ctx, ZMQ_PUSH);
	zmq_setsockopt(a, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(b, ZMQ_LINGER, &zero, sizeof(zero));
	/* queue only on completed connections: b has none to send on */
	zmq_setsockopt(b, ZMQ_IMMEDIATE, &one, sizeof(one));
	assert_int_equal(wt_curve_client(a, server.public_key, &listed, &err),
			 0);
	assert_int_equal(wt_curve_client(b, server.public_key, &other, &err),
			 0);
	assert_int_equal(connect_watched(ctx, b, ep, 1),
			 ZMQ_EVENT_HANDSHAKE_FAILED_AUTH);
	assert_int_equal(connect_watched(ctx, a, ep, 2),
			 ZMQ_EVENT_HANDSHAKE_SUCCEEDED);
	/* b was refused: nowhere to send; a's message arrives with a's key */
	assert_int_equal(zmq_send(b, "from b", 6, ZMQ_DONTWAIT), -1);
	assert_int_equal(zmq_send(a, "from a", 6, 0), 6);
	assert_int_equal(
		recv_with_user(rep, buf, sizeof(buf), user, sizeof(user)), 6);
	assert_string_equal(buf, "from a");
	assert_string_equal(user, listed.public_key);
	wt_zap_counts(zap, &in, &out);
	assert_true(in == 1);
	assert_true(out >= 1);

	zmq_close(a);
	zmq_close(b);
	zmq_close(rep);
	wt_zap_stop(zap);
	zmq_ctx_term(ctx);
	wt_keylist_destroy(allowed);
	for (const char *n = "server\0listed\0other\0"; *n;
	     n += strlen(n) + 1) {
		snprintf(prefix, sizeof(prefix), "%s/%s.key", dir, n);
		unlink(prefix);
		snprintf(prefix, sizeof(prefix), "%s/%s.pub", dir, n);
		unlink(prefix);
	}
	unlink(list);
	rmdir(dir);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(binding_rules_by_endpoint),
	cmocka_unit_test(zap_lets_in_listed_keys_with_their_user_id),
};

WT_TEST_MAIN(tests)
