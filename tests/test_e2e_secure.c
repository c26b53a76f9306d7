/*
 * test_e2e_secure.c - who may reach wavetrimd and the simulator: binding
 * rules at start, CURVE keys, the ZAP allow-list and read-only clients,
 * against the real programs over tcp on 127.0.0.1 (ephemeral ports).
 *
 * Whether a handshake was refused is read from libzmq's own socket
 * monitor (ZMQ_EVENT_HANDSHAKE_*, zmq_socket_monitor(3)), not guessed
 * from a silence; a silence is checked only after the refusal was seen.
 */
#include "wt_test.h"

#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <signal.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <arpa/inet.h>
#include <netinet/in.h>
#include <zmq.h>

#include "e2e_harness.h"
#include "wt_secure.h"

#define CLI_BIN WT_BINARY_DIR "/tools/wavetrim"
#define RUN_MS	10000
/* Long enough for a handshake on a loaded 2-core machine. */
#define EVENT_MS 5000

/* Key pairs and allow-lists of every case, in a folder of their own. */
struct keys {
	char dir[64];
	wt_keypair server, writer, reader, stranger, sim;
	char server_key[128], server_pub[128], sim_key[128], sim_pub[128];
	char writer_prefix[128], reader_prefix[128], stranger_prefix[128];
	char readers[128], writers[128], sim_clients[128];
};

static int rm_entry(const char *path, const struct stat *sb, int flag,
		    struct FTW *ftw)
{
	(void)sb;
	(void)flag;
	(void)ftw;
	return remove(path);
}

static struct keys *keys_dir;

static void remove_keys(void)
{
	if (keys_dir && keys_dir->dir[0]) {
		nftw(keys_dir->dir, rm_entry, 8, FTW_DEPTH | FTW_PHYS);
	}
	free(keys_dir);
	keys_dir = NULL;
}

static void write_text(const char *path, const char *text)
{
	FILE *f = fopen(path, "w");

	assert_non_null(f);
	fputs(text, f);
	assert_int_equal(fclose(f), 0);
}

static void make_pair(struct keys *k, const char *name, wt_keypair *kp,
		      char *prefix_out)
{
	char prefix[128];
	wt_error err;

	snprintf(prefix, sizeof(prefix), "%s/%s", k->dir, name);
	if (wt_key_generate(prefix, kp, &err) < 0) {
		fail_msg("%s", err.msg);
	}
	if (prefix_out) {
		snprintf(prefix_out, 128, "%s", prefix);
	}
}

/* The keys, made once per process (each ctest case is a process). */
static const struct keys *keys(void)
{
	struct keys *k;
	char text[256];

	if (keys_dir) {
		return keys_dir;
	}
	k = calloc(1, sizeof(*k));
	assert_non_null(k);
	snprintf(k->dir, sizeof(k->dir), "/tmp/wt-keys-XXXXXX");
	assert_non_null(mkdtemp(k->dir));
	keys_dir = k;
	atexit(remove_keys);
	make_pair(k, "server", &k->server, NULL);
	make_pair(k, "writer", &k->writer, k->writer_prefix);
	make_pair(k, "reader", &k->reader, k->reader_prefix);
	make_pair(k, "stranger", &k->stranger, k->stranger_prefix);
	make_pair(k, "sim", &k->sim, NULL);
	snprintf(k->server_key, sizeof(k->server_key), "%s/server.key", k->dir);
	snprintf(k->server_pub, sizeof(k->server_pub), "%s/server.pub", k->dir);
	snprintf(k->sim_key, sizeof(k->sim_key), "%s/sim.key", k->dir);
	snprintf(k->sim_pub, sizeof(k->sim_pub), "%s/sim.pub", k->dir);
	snprintf(k->readers, sizeof(k->readers), "%s/readers", k->dir);
	snprintf(k->writers, sizeof(k->writers), "%s/writers", k->dir);
	snprintf(k->sim_clients, sizeof(k->sim_clients), "%s/sim-clients",
		 k->dir);
	snprintf(text, sizeof(text), "# who may watch\n%s  # reader\n\n",
		 k->reader.public_key);
	write_text(k->readers, text);
	snprintf(text, sizeof(text), "%s\n", k->writer.public_key);
	write_text(k->writers, text);
	snprintf(text, sizeof(text), "# the daemon\n%s\n",
		 k->server.public_key);
	write_text(k->sim_clients, text);
	return k;
}

/* A tcp port on 127.0.0.1 that was free a moment ago. */
static int free_port(void)
{
	struct sockaddr_in a = {.sin_family = AF_INET};
	socklen_t len = sizeof(a);
	int fd = socket(AF_INET, SOCK_STREAM, 0), port;

	assert_true(fd >= 0);
	a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
	assert_int_equal(bind(fd, (struct sockaddr *)&a, sizeof(a)), 0);
	assert_int_equal(getsockname(fd, (struct sockaddr *)&a, &len), 0);
	port = ntohs(a.sin_port);
	close(fd);
	return port;
}

/* Overrides "name=value" in static storage (up to 16 per case). */
struct ovr {
	char text[16][256];
	const char *list[17];
	int n;
};

static void ovr_add(struct ovr *o, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

static void ovr_add(struct ovr *o, const char *fmt, ...)
{
	va_list ap;

	assert_true(o->n < 16);
	va_start(ap, fmt);
	vsnprintf(o->text[o->n], sizeof(o->text[0]), fmt, ap);
	va_end(ap);
	o->list[o->n] = o->text[o->n];
	o->n++;
	o->list[o->n] = NULL;
}

/* The daemon's access options and tcp endpoints on 127.0.0.1. */
static void secure_daemon_options(struct ovr *o, const struct keys *k)
{
	ovr_add(o, "daemon.control=tcp://127.0.0.1:%d", free_port());
	ovr_add(o, "daemon.telemetry=tcp://127.0.0.1:%d", free_port());
	ovr_add(o, "daemon.secret_key=%s", k->server_key);
	ovr_add(o, "daemon.clients=%s", k->readers);
	ovr_add(o, "daemon.writers=%s", k->writers);
}

/* A daemon (no simulator) with CURVE; the harness speaks as the writer. */
static void start_secure_daemon(e2e *e)
{
	const struct keys *k = keys();
	struct ovr o = {0};

	secure_daemon_options(&o, k);
	assert_int_equal(e2e_setup(e, o.list), 0);
	snprintf(e->server_key, sizeof(e->server_key), "%s",
		 k->server.public_key);
	e->client = k->writer;
	assert_int_equal(e2e_start_daemon(e, NULL), 0);
}

static void stop_clean(e2e *e)
{
	int ds;

	e2e_teardown(e, &ds, NULL);
	assert_int_equal(ds, 0);
}

/* Run wavetrimd on e's INI; it must refuse with status 2 and say why. */
static void assert_daemon_refuses(e2e *e, const char *why)
{
	char *argv[] = {(char *)WT_DAEMON_BIN, "-c", e->ini, NULL};
	e2e_run_result *r = malloc(sizeof(*r));

	assert_non_null(r);
	assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
	if (r->status != 2 || !strstr(r->err, why)) {
		fail_msg("wavetrimd: exit %d, stderr: %s (want 2 and \"%s\")",
			 r->status, r->err, why);
	}
	free(r);
}

/*
 * Connect sock to endpoint and return the first handshake event its
 * monitor reports (ZMQ_EVENT_HANDSHAKE_SUCCEEDED or _FAILED_*), 0 when
 * none came within EVENT_MS.
 */
static int handshake(void *ctx, void *sock, const char *endpoint)
{
	static int serial;
	char name[64];
	void *mon;
	zmq_pollitem_t item;
	int event = 0, zero = 0;

	snprintf(name, sizeof(name), "inproc://secure-monitor-%d", serial++);
	assert_int_equal(zmq_socket_monitor(
				 sock, name,
				 ZMQ_EVENT_HANDSHAKE_SUCCEEDED |
					 ZMQ_EVENT_HANDSHAKE_FAILED_PROTOCOL |
					 ZMQ_EVENT_HANDSHAKE_FAILED_AUTH |
					 ZMQ_EVENT_HANDSHAKE_FAILED_NO_DETAIL),
			 0);
	mon = zmq_socket(ctx, ZMQ_PAIR);
	assert_non_null(mon);
	zmq_setsockopt(mon, ZMQ_LINGER, &zero, sizeof(zero));
	assert_int_equal(zmq_connect(mon, name), 0);
	assert_int_equal(zmq_connect(sock, endpoint), 0);
	item = (zmq_pollitem_t){.socket = mon, .events = ZMQ_POLLIN};
	if (zmq_poll(&item, 1, EVENT_MS) == 1) {
		uint8_t head[6];
		char addr[256];
		int more = 0;
		size_t more_len = sizeof(more);

		/* two frames: u16 event, u32 value; then the address */
		if (zmq_recv(mon, head, sizeof(head), 0) == 6) {
			event = head[0] | head[1] << 8;
		}
		zmq_getsockopt(mon, ZMQ_RCVMORE, &more, &more_len);
		if (more) {
			zmq_recv(mon, addr, sizeof(addr), 0);
		}
	}
	zmq_socket_monitor(sock, NULL, 0);
	zmq_close(mon);
	return event;
}

/* Any failed handshake (a NULL client meets a CURVE server: libzmq 4.3.4
 * reports it as FAILED_NO_DETAIL or FAILED_PROTOCOL). */
#define ANY_FAILURE (-1)

static void assert_handshake(int event, int want)
{
	if (want == ANY_FAILURE) {
		if (event != ZMQ_EVENT_HANDSHAKE_FAILED_NO_DETAIL &&
		    event != ZMQ_EVENT_HANDSHAKE_FAILED_PROTOCOL &&
		    event != ZMQ_EVENT_HANDSHAKE_FAILED_AUTH) {
			fail_msg("handshake event 0x%x, want a failure", event);
		}
		return;
	}
	assert_int_equal(event, want);
}

/* A socket of type in e's context, a CURVE client with kp (NULL: none). */
static void *client_socket(e2e *e, int type, const wt_keypair *kp)
{
	void *s = zmq_socket(e->ctx, type);
	int zero = 0, ivl = EVENT_MS;

	assert_non_null(s);
	zmq_setsockopt(s, ZMQ_LINGER, &zero, sizeof(zero));
	zmq_setsockopt(s, ZMQ_HANDSHAKE_IVL, &ivl, sizeof(ivl));
	if (kp) {
		assert_int_equal(wt_curve_client(s, e->server_key, kp, NULL),
				 0);
	}
	if (type == ZMQ_SUB) {
		zmq_setsockopt(s, ZMQ_SUBSCRIBE, "", 0);
	}
	return s;
}

/* One request on a REQ client (kp as in client_socket); the reply into
 * buf, or -1 when none came within wait_ms. */
static int ask(e2e *e, const wt_keypair *kp, const char *line, char *buf,
	       size_t cap, int want_event, int wait_ms)
{
	void *s = client_socket(e, ZMQ_REQ, kp);
	int n, t = wait_ms;

	zmq_setsockopt(s, ZMQ_RCVTIMEO, &t, sizeof(t));
	zmq_setsockopt(s, ZMQ_SNDTIMEO, &t, sizeof(t));
	assert_handshake(handshake(e->ctx, s, e->control), want_event);
	n = zmq_send(s, line, strlen(line), 0) < 0
		    ? -1
		    : zmq_recv(s, buf, cap - 1, 0);
	if (n >= 0) {
		buf[n < (int)cap - 1 ? n : (int)cap - 1] = '\0';
	}
	zmq_close(s);
	return n;
}

/* Does a SUB client (kp) see any telemetry within wait_ms? */
static bool sees_telemetry(e2e *e, const wt_keypair *kp, int want_event,
			   int wait_ms)
{
	void *s = client_socket(e, ZMQ_SUB, kp);
	zmq_pollitem_t item = {.socket = s, .events = ZMQ_POLLIN};
	char buf[8];
	bool seen = false;

	assert_handshake(handshake(e->ctx, s, e->telemetry), want_event);
	if (zmq_poll(&item, 1, wait_ms) == 1 &&
	    zmq_recv(s, buf, sizeof(buf), 0) >= 7) {
		seen = memcmp(buf, "status ", 7) == 0 ||
		       memcmp(buf, "event ", 6) == 0;
	}
	zmq_close(s);
	return seen;
}

/* --- keys ------------------------------------------------------------------
 */

/* `wavetrim keygen` writes a 0600 secret and its public key; libzmq's own
 * zmq_curve_public(3) derives the same public key from the secret. */
static void keygen_writes_private_secret_and_public(void **state)
{
	char dir[] = "/tmp/wt-keygen-XXXXXX", prefix[64], path[80];
	char secret[WT_KEY_TEXT], pub[WT_KEY_TEXT], derived[WT_KEY_TEXT];
	char line[256];
	e2e_run_result *r = malloc(sizeof(*r));
	struct stat st;
	FILE *f;
	wt_error err;

	(void)state;
	assert_non_null(r);
	assert_non_null(mkdtemp(dir));
	snprintf(prefix, sizeof(prefix), "%s/k", dir);
	{
		char *argv[] = {(char *)CLI_BIN, "keygen", prefix, NULL};

		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 0);
		snprintf(path, sizeof(path), "%s.key", prefix);
		assert_int_equal(stat(path, &st), 0);
		assert_int_equal(st.st_mode & 0777, 0600);
		/* the secret is the file's only line that is not a comment */
		f = fopen(path, "r");
		assert_non_null(f);
		secret[0] = '\0';
		while (fgets(line, sizeof(line), f)) {
			if (line[0] != '#' && strlen(line) == 41) {
				memcpy(secret, line, 40);
				secret[40] = '\0';
			}
		}
		fclose(f);
		assert_int_equal(strlen(secret), 40);
		assert_int_equal(zmq_curve_public(derived, secret), 0);
		snprintf(path, sizeof(path), "%s.pub", prefix);
		assert_int_equal(wt_key_read_public(path, pub, &err), 0);
		assert_string_equal(pub, derived);
		assert_non_null(strstr(r->out, derived));

		/* never overwritten */
		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 2);
		assert_non_null(strstr(r->err, "never overwritten"));
		assert_int_equal(wt_key_read_public(path, pub, &err), 0);
		assert_string_equal(pub, derived);
	}
	nftw(dir, rm_entry, 8, FTW_DEPTH | FTW_PHYS);
	free(r);
}

/* Unreadable, shared or malformed key files and allow-lists are refused
 * with the file and the reason; comments and blank lines are fine. */
static void key_files_unreadable_or_malformed_refused(void **state)
{
	const struct keys *k = keys();
	char path[160], text[256];
	wt_keypair kp;
	wt_keylist *l = NULL;
	wt_error err;

	(void)state;
	snprintf(path, sizeof(path), "%s/missing.key", k->dir);
	assert_int_equal(wt_key_read_secret(path, &kp, &err), -ENOENT);
	assert_non_null(strstr(err.msg, "missing.key"));

	/* the prefix works as well as PREFIX.key; the pair matches */
	assert_int_equal(wt_key_read_secret(k->writer_prefix, &kp, &err), 0);
	assert_string_equal(kp.public_key, k->writer.public_key);

	snprintf(path, sizeof(path), "%s/shared.key", k->dir);
	snprintf(text, sizeof(text), "%s\n", k->reader.secret_key);
	write_text(path, text);
	chmod(path, 0640);
	assert_int_equal(wt_key_read_secret(path, &kp, &err), -EACCES);
	assert_non_null(strstr(err.msg, "chmod 600"));

	snprintf(path, sizeof(path), "%s/two.key", k->dir);
	snprintf(text, sizeof(text), "%s\n%s\n", k->reader.secret_key,
		 k->writer.secret_key);
	write_text(path, text);
	chmod(path, 0600);
	assert_int_equal(wt_key_read_secret(path, &kp, &err), -EINVAL);
	assert_non_null(strstr(err.msg, "holds 2 keys"));

	snprintf(path, sizeof(path), "%s/list", k->dir);
	snprintf(text, sizeof(text), "# ok\n%s\nnot-a-key\n",
		 k->reader.public_key);
	write_text(path, text);
	assert_int_equal(wt_keylist_load(path, &l, &err), -EINVAL);
	assert_null(l);
	assert_non_null(strstr(err.msg, "list:3: not a Z85"));

	/* 40 characters, but '~' is no Z85 letter (RFC 32) */
	snprintf(text, sizeof(text), "%.39s~\n", k->reader.public_key);
	write_text(path, text);
	assert_int_equal(wt_keylist_load(path, &l, &err), -EINVAL);

	write_text(path, "# nobody\n\n");
	assert_int_equal(wt_keylist_load(path, &l, &err), -EINVAL);
	assert_non_null(strstr(err.msg, "no keys"));

	assert_int_equal(wt_keylist_load(k->readers, &l, &err), 0);
	assert_int_equal(wt_keylist_count(l), 1);
	assert_true(wt_keylist_has(l, k->reader.public_key));
	assert_false(wt_keylist_has(l, k->writer.public_key));
	wt_keylist_destroy(l);
}

/* --- binding rules at start ------------------------------------------------
 */

static void tcp_beyond_loopback_without_keys_refused(void **state)
{
	struct ovr o = {0};
	e2e e;

	(void)state;
	ovr_add(&o, "daemon.control=tcp://0.0.0.0:%d", free_port());
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "daemon.control tcp://0.0.0.0:");
	assert_daemon_refuses(&e, "0.0.0.0 is not a loopback address, and "
				  "no CURVE keys are configured");
	e2e_teardown(&e, NULL, NULL);

	/* the driver link too: 192.0.2.1 is TEST-NET-1 (RFC 5737) */
	o.n = 0;
	ovr_add(&o, "driver.frames=tcp://192.0.2.1:%d", free_port());
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "driver.frames tcp://192.0.2.1:");
	e2e_teardown(&e, NULL, NULL);

	/* and the simulator's binds */
	o.n = 0;
	ovr_add(&o, "driver.commands=tcp://*:%d", free_port());
	assert_int_equal(e2e_setup(&e, o.list), 0);
	{
		char *argv[] = {(char *)WT_SIM_BIN, "-c", e.ini, NULL};
		e2e_run_result *r = malloc(sizeof(*r));

		assert_non_null(r);
		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_not_equal(r->status, 0);
		assert_non_null(strstr(r->err, "* is not a loopback address"));
		free(r);
	}
	e2e_teardown(&e, NULL, NULL);
}

static void ipc_folder_open_to_others_refused(void **state)
{
	const struct keys *k = keys();
	char open_dir[128];
	struct ovr o = {0};
	struct stat st;
	e2e e;

	(void)state;
	snprintf(open_dir, sizeof(open_dir), "%s/open", k->dir);
	assert_int_equal(mkdir(open_dir, 0700), 0);
	assert_int_equal(chmod(open_dir, 0755), 0);
	ovr_add(&o, "daemon.control=ipc://%s/control", open_dir);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "has mode 0755, so other users could "
				  "reach the socket");
	e2e_teardown(&e, NULL, NULL);

	/* an abstract name has no permissions at all */
	o.n = 0;
	ovr_add(&o, "daemon.telemetry=ipc://@wt-secure-test");
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "abstract ipc name");
	e2e_teardown(&e, NULL, NULL);

	/* a missing folder is made with mode 0700 (and the daemon runs) */
	o.n = 0;
	ovr_add(&o, "daemon.telemetry=ipc://%s/made/here/telemetry", k->dir);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);
	snprintf(open_dir, sizeof(open_dir), "%s/made/here", k->dir);
	assert_int_equal(stat(open_dir, &st), 0);
	assert_int_equal(st.st_mode & 0777, 0700);
	stop_clean(&e);
}

static void bad_access_configuration_refused(void **state)
{
	const struct keys *k = keys();
	char shared[160], bad_list[160], text[128];
	struct ovr o = {0};
	e2e e;

	(void)state;
	ovr_add(&o, "daemon.secret_key=%s", k->server_key);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "daemon.secret_key needs daemon.clients");
	e2e_teardown(&e, NULL, NULL);

	snprintf(shared, sizeof(shared), "%s/shared-server.key", k->dir);
	snprintf(text, sizeof(text), "%s\n", k->server.secret_key);
	write_text(shared, text);
	chmod(shared, 0644);
	o.n = 0;
	ovr_add(&o, "daemon.secret_key=%s", shared);
	ovr_add(&o, "daemon.clients=%s", k->readers);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "its mode is 0644 (chmod 600");
	e2e_teardown(&e, NULL, NULL);

	snprintf(bad_list, sizeof(bad_list), "%s/bad-list", k->dir);
	write_text(bad_list, "this is not a key\n");
	o.n = 0;
	ovr_add(&o, "daemon.secret_key=%s", k->server_key);
	ovr_add(&o, "daemon.clients=%s", bad_list);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "bad-list:1: not a Z85 CURVE public key");
	e2e_teardown(&e, NULL, NULL);

	o.n = 0;
	ovr_add(&o, "daemon.writers=%s", k->writers);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	assert_daemon_refuses(&e, "daemon.writers needs daemon.secret_key");
	e2e_teardown(&e, NULL, NULL);
}

/* --- CURVE and the allow-list ----------------------------------------------
 */

static void keyless_or_unlisted_get_no_answer_nor_feed(void **state)
{
	const struct keys *k;
	char reply[4096];
	e2e e;

	(void)state;
	start_secure_daemon(&e);
	k = keys();
	/* no key: the mechanisms differ (NULL against CURVE, RFC 23) */
	assert_int_equal(
		ask(&e, NULL, "open", reply, sizeof(reply), ANY_FAILURE, 500),
		-1);
	/* a key the daemon has not listed: the ZAP handler says 400 */
	assert_int_equal(ask(&e, &k->stranger, "open", reply, sizeof(reply),
			     ZMQ_EVENT_HANDSHAKE_FAILED_AUTH, 500),
			 -1);
	assert_false(sees_telemetry(&e, NULL, ANY_FAILURE, 1000));
	assert_false(sees_telemetry(&e, &k->stranger,
				    ZMQ_EVENT_HANDSHAKE_FAILED_AUTH, 1000));
	/* the daemon counted both refusals of the stranger */
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_true(e2e_reply_number(&e, "result.access.refused") >= 2);
	assert_non_null(strstr(e.reply, "\"curve\":true"));
	stop_clean(&e);
}

static void listed_clients_command_and_read_telemetry(void **state)
{
	const struct keys *k;
	char reply[4096];
	e2e e;

	(void)state;
	start_secure_daemon(&e);
	k = keys();
	assert_true(ask(&e, &k->writer, "set control.gain 0.2", reply,
			sizeof(reply), ZMQ_EVENT_HANDSHAKE_SUCCEEDED,
			RUN_MS) > 0);
	assert_non_null(strstr(reply, "\"ok\":true"));
	assert_int_equal(e2e_request(&e, "get control.gain"), 1);
	assert_true(e2e_reply_number(&e, "result.value") == 0.2);
	/* status comes daemon.status_hz (5) times a second */
	assert_true(sees_telemetry(&e, &k->writer,
				   ZMQ_EVENT_HANDSHAKE_SUCCEEDED, 5000));
	assert_true(sees_telemetry(&e, &k->reader,
				   ZMQ_EVENT_HANDSHAKE_SUCCEEDED, 5000));
	stop_clean(&e);
}

static void read_only_client_cannot_change_the_mirror(void **state)
{
	static const char *const refused[] = {
		"close",
		"open",
		"hold",
		"flat",
		"set control.gain 0.9",
		"calibrate",
		"save /tmp/wt-never.h5",
		"shutdown",
	};
	static const char *const answered[] = {
		"status", "ping", "get control.gain", "config", "help",
	};
	const struct keys *k;
	char *reply = malloc(E2E_REPLY_MAX);
	size_t n_refused = sizeof(refused) / sizeof(refused[0]);
	e2e e;

	(void)state;
	assert_non_null(reply);
	start_secure_daemon(&e);
	k = keys();
	for (size_t i = 0; i < sizeof(answered) / sizeof(answered[0]); i++) {
		assert_true(ask(&e, &k->reader, answered[i], reply,
				E2E_REPLY_MAX, ZMQ_EVENT_HANDSHAKE_SUCCEEDED,
				RUN_MS) > 0);
		if (!strstr(reply, "\"ok\":true")) {
			fail_msg("%s: %s", answered[i], reply);
		}
	}
	for (size_t i = 0; i < n_refused; i++) {
		assert_true(ask(&e, &k->reader, refused[i], reply,
				E2E_REPLY_MAX, ZMQ_EVENT_HANDSHAKE_SUCCEEDED,
				RUN_MS) > 0);
		assert_string_equal(reply, "{\"ok\":false,\"error\":"
					   "\"read-only client\"}");
	}
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_true(e2e_reply_number(&e, "result.access.read_only_refused") ==
		    (double)n_refused);
	assert_true(e2e_reply_number(&e, "result.gain") == 0.5); /* demo */
	assert_int_equal(access("/tmp/wt-never.h5", F_OK), -1);
	/* the writer may: close is refused for want of a matrix only */
	assert_int_equal(e2e_request(&e, "close"), 0);
	assert_non_null(strstr(e.reply, "no control matrix"));
	free(reply);
	stop_clean(&e);
}

/* The CLI's --server-key and --client-key. */
static void cli_speaks_curve_with_key_options(void **state)
{
	const struct keys *k;
	e2e_run_result *r = malloc(sizeof(*r));
	e2e e;

	(void)state;
	assert_non_null(r);
	start_secure_daemon(&e);
	k = keys();
	{
		char *argv[] = {(char *)CLI_BIN,
				"-e",
				e.control,
				"--server-key",
				(char *)k->server_pub,
				"--client-key",
				(char *)k->reader_prefix,
				"ping",
				NULL};

		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 0);
		assert_string_equal(r->out, "pong\n");
		argv[7] = "close";
		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 1);
		assert_string_equal(r->err, "wavetrim: read-only client\n");
	}
	{
		char *argv[] = {(char *)CLI_BIN,
				"-e",
				e.control,
				"-w",
				"500",
				"--server-key",
				(char *)k->server_pub,
				"--client-key",
				(char *)k->stranger_prefix,
				"ping",
				NULL};

		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 2);
		argv[7] = "ping";
		argv[8] = NULL;
		assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
		assert_int_equal(r->status, 2);
		assert_non_null(strstr(r->err, "CURVE needs both"));
	}
	free(r);
	stop_clean(&e);
}

/* The Python example client's --server-key and --client-key: a reader
 * sees status on both sockets and is refused `open`. */
static void example_client_speaks_curve(void **state)
{
	const struct keys *k;
	e2e_run_result *r = malloc(sizeof(*r));
	e2e e;

	(void)state;
	assert_non_null(r);
	start_secure_daemon(&e);
	k = keys();
	{
		char *argv[] = {"/usr/bin/python3", /* Debian's: python3-zmq */
				WT_SOURCE_DIR "/tools/example_client.py",
				e.control,
				"-t",
				e.telemetry,
				"-n",
				"1",
				"--server-key",
				(char *)k->server_pub,
				"--client-key",
				(char *)k->reader_prefix,
				NULL};

		assert_int_equal(e2e_run(argv, 30000, r), 0);
		if (r->status != 0) {
			fail_msg("exit %d: %s %s", r->status, r->out, r->err);
		}
		assert_non_null(strstr(r->out, "status: ok=true"));
		assert_non_null(strstr(r->out, "open: ok=false error=\"read-"
					       "only client\""));
		assert_non_null(strstr(r->out, "status: state=open"));
	}
	free(r);
	stop_clean(&e);
}

/* --- the driver link -------------------------------------------------------
 */

static void driver_link_lets_in_the_listed_daemon_only(void **state)
{
	const struct keys *k = keys();
	struct ovr o = {0};
	e2e e;

	(void)state;
	secure_daemon_options(&o, k);
	ovr_add(&o, "driver.frames=tcp://127.0.0.1:%d", free_port());
	ovr_add(&o, "driver.commands=tcp://127.0.0.1:%d", free_port());
	ovr_add(&o, "driver.public_key=%s", k->sim_pub);
	ovr_add(&o, "sim.secret_key=%s", k->sim_key);
	ovr_add(&o, "sim.clients=%s", k->sim_clients);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	snprintf(e.server_key, sizeof(e.server_key), "%s",
		 k->server.public_key);
	e.client = k->writer;
	assert_int_equal(e2e_start_sim(&e), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);
	/* frames reach the daemon and its answers reach the simulator */
	assert_int_equal(e2e_sync(&e, 10000), 0);
	{
		sim_truth t;

		assert_int_equal(e2e_truth(&e, &t, 5000), 0);
		assert_true(t.frame > 0);
	}
	stop_clean(&e);

	/* a simulator that lists another key lets this daemon in nowhere */
	o.n = 0;
	secure_daemon_options(&o, k);
	ovr_add(&o, "driver.frames=tcp://127.0.0.1:%d", free_port());
	ovr_add(&o, "driver.commands=tcp://127.0.0.1:%d", free_port());
	ovr_add(&o, "driver.public_key=%s", k->sim_pub);
	ovr_add(&o, "sim.secret_key=%s", k->sim_key);
	ovr_add(&o, "sim.clients=%s", k->readers);
	assert_int_equal(e2e_setup(&e, o.list), 0);
	snprintf(e.server_key, sizeof(e.server_key), "%s",
		 k->server.public_key);
	e.client = k->writer;
	assert_int_equal(e2e_start_sim(&e), 0);
	assert_int_equal(e2e_start_daemon(&e, NULL), 0);
	{
		/* the daemon's own connection is refused like any stranger's:
		 * see it on a socket with the daemon's key, then check the
		 * daemon got nothing */
		void *s = client_socket(&e, ZMQ_PULL, NULL);

		assert_int_equal(
			wt_curve_client(s, k->sim.public_key, &k->server, NULL),
			0);
		assert_int_equal(handshake(e.ctx, s, e.frames),
				 ZMQ_EVENT_HANDSHAKE_FAILED_AUTH);
		zmq_close(s);
	}
	assert_int_equal(e2e_request(&e, "status"), 1);
	assert_true(e2e_reply_number(&e, "result.counts.received") == 0);
	stop_clean(&e);
}

/* --- wavetrim-view's HTTP side -------------------------------------------- */

#define VIEW_BIN WT_BINARY_DIR "/tools/view/wavetrim-view"

/* The status code of one HTTP/1.0 GET to 127.0.0.1:port, with an extra
 * header line (or ""); 0 when nothing answers.  The reply is in buf. */
static int http_get(int port, const char *path, const char *header, char *buf,
		    size_t cap)
{
	struct sockaddr_in a = {.sin_family = AF_INET};
	char req[512];
	size_t len = 0;
	ssize_t n;
	int fd = socket(AF_INET, SOCK_STREAM, 0), code = 0;

	assert_true(fd >= 0);
	a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
	a.sin_port = htons((uint16_t)port);
	if (connect(fd, (struct sockaddr *)&a, sizeof(a)) != 0) {
		close(fd);
		return 0;
	}
	snprintf(req, sizeof(req),
		 "GET %s HTTP/1.0\r\nHost: 127.0.0.1:%d\r\n"
		 "%s\r\n",
		 path, port, header);
	assert_int_equal(write(fd, req, strlen(req)), (ssize_t)strlen(req));
	while (len + 1 < cap && (n = read(fd, buf + len, cap - 1 - len)) > 0) {
		len += (size_t)n;
	}
	buf[len] = '\0';
	close(fd);
	sscanf(buf, "HTTP/1.%*d %d", &code);
	return code;
}

static void view_beyond_loopback_needs_its_token(void **state)
{
	const struct keys *k;
	char listen[64], token[160], *buf;
	char *argv[] = {(char *)VIEW_BIN,
			"-c",
			NULL,
			"--no-truth",
			"--listen",
			listen,
			"--allow-remote",
			"--token-file",
			token,
			NULL};
	e2e_run_result *r;
	int port = free_port(), code = 0;
	pid_t pid;
	e2e e;

	(void)state;
	if (access(VIEW_BIN, X_OK) != 0) {
		skip(); /* built only with libmicrohttpd */
	}
	k = keys();
	r = malloc(sizeof(*r));
	buf = malloc(65536);
	assert_non_null(r);
	assert_non_null(buf);
	assert_int_equal(e2e_setup(&e, NULL), 0);
	argv[2] = e.ini;
	snprintf(listen, sizeof(listen), "0.0.0.0:%d", port);
	snprintf(token, sizeof(token), "%s/view-token", k->dir);
	write_text(token, "# the view's token\nsixteen-or-more-characters\n");

	/* without the token, and with a token others may read: refused */
	argv[7] = NULL;
	assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
	assert_int_equal(r->status, 2);
	assert_non_null(strstr(r->err, "needs --allow-remote and "
				       "--token-file"));
	argv[7] = "--token-file";
	chmod(token, 0644);
	assert_int_equal(e2e_run(argv, RUN_MS, r), 0);
	assert_int_equal(r->status, 2);
	assert_non_null(strstr(r->err, "must be private to its owner"));
	chmod(token, 0600);

	pid = fork();
	if (pid == 0) {
		int null = open("/dev/null", O_WRONLY);

		prctl(PR_SET_PDEATHSIG, SIGKILL);
		dup2(null, STDOUT_FILENO);
		execv(argv[0], argv);
		_exit(127);
	}
	assert_true(pid > 0);
	/* wait until it listens (it answers 401 to anyone without the
	 * token); every try is a real request, no fixed sleep */
	for (int tries = 0; tries < 500 && code == 0; tries++) {
		code = http_get(port, "/api/setup", "", buf, 65536);
		if (code == 0) {
			usleep(10000);
		}
	}
	assert_int_equal(code, 401);
	assert_int_equal(http_get(port, "/api/setup",
				  "Authorization: Bearer wrong-but-long-"
				  "enough\r\n",
				  buf, 65536),
			 401);
	assert_int_equal(http_get(port, "/api/setup",
				  "Authorization: Bearer sixteen-or-more-"
				  "characters\r\n",
				  buf, 65536),
			 200);
	/* a browser: ?token= sets the cookie and goes on to / */
	assert_int_equal(http_get(port, "/?token=sixteen-or-more-characters",
				  "", buf, 65536),
			 303);
	assert_non_null(strstr(buf, "Set-Cookie: wavetrim-view=sixteen-or-"
				    "more-characters; Path=/; HttpOnly; "
				    "SameSite=Strict"));
	assert_int_equal(http_get(port, "/",
				  "Cookie: wavetrim-view=sixteen-"
				  "or-more-characters\r\n",
				  buf, 65536),
			 200);
	assert_int_equal(
		http_get(port, "/?token=wrong-but-long-enough", "", buf, 65536),
		401);
	kill(pid, SIGTERM);
	assert_int_equal(waitpid(pid, &code, 0), pid);
	e2e_teardown(&e, NULL, NULL);
	free(buf);
	free(r);
}

static const struct CMUnitTest tests[] = {
	cmocka_unit_test(keygen_writes_private_secret_and_public),
	cmocka_unit_test(key_files_unreadable_or_malformed_refused),
	cmocka_unit_test(tcp_beyond_loopback_without_keys_refused),
	cmocka_unit_test(ipc_folder_open_to_others_refused),
	cmocka_unit_test(bad_access_configuration_refused),
	cmocka_unit_test(keyless_or_unlisted_get_no_answer_nor_feed),
	cmocka_unit_test(listed_clients_command_and_read_telemetry),
	cmocka_unit_test(read_only_client_cannot_change_the_mirror),
	cmocka_unit_test(cli_speaks_curve_with_key_options),
	cmocka_unit_test(example_client_speaks_curve),
	cmocka_unit_test(driver_link_lets_in_the_listed_daemon_only),
	cmocka_unit_test(view_beyond_loopback_needs_its_token),
};

WT_TEST_MAIN(tests)
