/* wt_secure.c - binding rules, CURVE keys, allow-lists, the ZAP handler. */
#include "wt_secure.h"

#include <arpa/inet.h>
#include <errno.h>
#include <fcntl.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

#include <zmq.h>

#include "wt_clock.h"

/* Largest key or allow-list file read. */
#define KEYFILE_MAX (1 << 20)
/* How often the ZAP thread looks at its stop flag. */
#define ZAP_POLL_MS 100

/* --- key text ------------------------------------------------------------- */

bool wt_key_valid(const char *text)
{
	uint8_t bin[32];

	return text && strlen(text) == WT_KEY_TEXT - 1 &&
	       zmq_z85_decode(bin, text) != NULL;
}

/* The whole of a small text file into a new buffer (terminated). */
static int slurp(const char *path, char **out, mode_t *mode, wt_error *err)
{
	struct stat st;
	char *buf;
	ssize_t n;
	size_t len = 0;
	int fd = open(path, O_RDONLY | O_CLOEXEC);

	if (fd < 0) {
		int e = errno;

		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
		close(fd);
		return wt_error_set(err, -EINVAL, "%s: not a regular file",
				    path);
	}
	if (st.st_size > KEYFILE_MAX) {
		close(fd);
		return wt_error_set(err, -EFBIG, "%s: larger than %d bytes",
				    path, KEYFILE_MAX);
	}
	buf = malloc((size_t)st.st_size + 1);
	if (!buf) {
		close(fd);
		return wt_error_set(err, -ENOMEM, "%s: out of memory", path);
	}
	while ((n = read(fd, buf + len, (size_t)st.st_size - len)) > 0) {
		len += (size_t)n;
	}
	if (n < 0) {
		int e = errno;

		close(fd);
		free(buf);
		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	close(fd);
	buf[len] = '\0';
	if (strlen(buf) != len) {
		free(buf);
		return wt_error_set(err, -EINVAL, "%s: holds a NUL byte", path);
	}
	*out = buf;
	if (mode) {
		*mode = st.st_mode;
	}
	return 0;
}

/*
 * The next line of text at *p: 1 with the key in key (a line whose first
 * word is a Z85 key), 0 for a blank or comment line, -1 for anything
 * else; -2 at the end.  *p moves past the line.
 */
static int next_line(char **p, char key[WT_KEY_TEXT])
{
	char *s = *p, *end, *w;
	size_t n;

	if (!*s) {
		return -2;
	}
	end = strchr(s, '\n');
	*p = end ? end + 1 : s + strlen(s);
	if (end) {
		*end = '\0';
	}
	n = strlen(s);
	if (n > 0 && s[n - 1] == '\r') {
		s[--n] = '\0';
	}
	while (*s == ' ' || *s == '\t') {
		s++;
	}
	if (!*s) {
		return 0;
	}
	/* '#' is a Z85 letter too: a first word that is a key wins. */
	for (w = s; *w && *w != ' ' && *w != '\t'; w++) {
	}
	if (w - s == WT_KEY_TEXT - 1) {
		memcpy(key, s, WT_KEY_TEXT - 1);
		key[WT_KEY_TEXT - 1] = '\0';
		while (*w == ' ' || *w == '\t') {
			w++;
		}
		if (wt_key_valid(key) && (*w == '\0' || *w == '#')) {
			return 1;
		}
	}
	return s[0] == '#' ? 0 : -1;
}

/* Exactly one key in the file at path. */
static int read_one_key(const char *path, char key[WT_KEY_TEXT], mode_t *mode,
			wt_error *err)
{
	char *text, *p, k[WT_KEY_TEXT];
	int rc, line = 0, keys = 0;

	rc = slurp(path, &text, mode, err);
	if (rc < 0) {
		return rc;
	}
	p = text;
	while ((rc = next_line(&p, k)) != -2) {
		line++;
		if (rc < 0) {
			free(text);
			return wt_error_set(err, -EINVAL,
					    "%s:%d: not a Z85 CURVE key (40 "
					    "characters) nor a # comment",
					    path, line);
		}
		if (rc == 1 && keys++ == 0) {
			memcpy(key, k, WT_KEY_TEXT);
		}
	}
	free(text);
	if (keys != 1) {
		return wt_error_set(err, -EINVAL,
				    "%s: holds %d keys, a key file holds one",
				    path, keys);
	}
	return 0;
}

int wt_key_read_public(const char *path, char key[WT_KEY_TEXT], wt_error *err)
{
	if (!path || !key) {
		return wt_error_set(err, -EINVAL, "key file: NULL argument");
	}
	return read_one_key(path, key, NULL, err);
}

/* PREFIX -> PREFIX.key (PREFIX.key stays as it is). */
static void secret_path(const char *prefix, char *out, size_t len)
{
	size_t n = strlen(prefix);

	if (n >= 4 && strcmp(prefix + n - 4, ".key") == 0) {
		snprintf(out, len, "%s", prefix);
	} else {
		snprintf(out, len, "%s.key", prefix);
	}
}

int wt_key_read_secret(const char *path, wt_keypair *kp, wt_error *err)
{
	char file[4096];
	mode_t mode = 0;
	int rc;

	if (!path || !kp) {
		return wt_error_set(err, -EINVAL, "key file: NULL argument");
	}
	secret_path(path, file, sizeof(file));
	rc = read_one_key(file, kp->secret_key, &mode, err);
	if (rc < 0) {
		return rc;
	}
	if (mode & 077) {
		return wt_error_set(err, -EACCES,
				    "%s: a secret key must be private to its "
				    "owner, but its mode is %04o (chmod 600 "
				    "%s)",
				    file, (unsigned)(mode & 07777), file);
	}
	if (zmq_curve_public(kp->public_key, kp->secret_key) != 0) {
		return wt_error_set(err, -ENOTSUP,
				    "%s: cannot derive the public key: %s",
				    file, zmq_strerror(zmq_errno()));
	}
	return 0;
}

static int write_file(const char *path, mode_t mode, const char *text,
		      wt_error *err)
{
	size_t len = strlen(text), off = 0;
	int fd = open(path, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, mode);

	if (fd < 0) {
		int e = errno;

		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	while (off < len) {
		ssize_t n = write(fd, text + off, len - off);

		if (n < 0) {
			int e = errno;

			close(fd);
			unlink(path);
			return wt_error_set(err, -e, "%s: %s", path,
					    strerror(e));
		}
		off += (size_t)n;
	}
	if (fchmod(fd, mode) != 0 || close(fd) != 0) {
		int e = errno;

		unlink(path);
		return wt_error_set(err, -e, "%s: %s", path, strerror(e));
	}
	return 0;
}

int wt_key_generate(const char *prefix, wt_keypair *kp, wt_error *err)
{
	char key_path[4096], pub_path[4096], text[512];
	wt_keypair pair;
	int rc;

	if (!prefix || !prefix[0]) {
		return wt_error_set(err, -EINVAL, "keygen: no file prefix");
	}
	if (!zmq_has("curve")) {
		return wt_error_set(err, -ENOTSUP,
				    "keygen: this libzmq has no CURVE");
	}
	snprintf(key_path, sizeof(key_path), "%s.key", prefix);
	snprintf(pub_path, sizeof(pub_path), "%s.pub", prefix);
	if (access(key_path, F_OK) == 0 || access(pub_path, F_OK) == 0) {
		return wt_error_set(err, -EEXIST,
				    "%s.key or %s.pub exists already (keys "
				    "are never overwritten)",
				    prefix, prefix);
	}
	if (zmq_curve_keypair(pair.public_key, pair.secret_key) != 0) {
		return wt_error_set(err, -zmq_errno(), "keygen: %s",
				    zmq_strerror(zmq_errno()));
	}
	snprintf(text, sizeof(text),
		 "# wavetrim CURVE secret key: keep it private (mode 0600)\n"
		 "# its public key: %s\n%s\n",
		 pair.public_key, pair.secret_key);
	rc = write_file(key_path, 0600, text, err);
	if (rc < 0) {
		return rc;
	}
	snprintf(text, sizeof(text),
		 "# wavetrim CURVE public key (wavetrim keygen)\n%s\n",
		 pair.public_key);
	rc = write_file(pub_path, 0644, text, err);
	if (rc < 0) {
		unlink(key_path);
		return rc;
	}
	if (kp) {
		*kp = pair;
	}
	return 0;
}

int wt_secret_read(const char *path, char *out, size_t len, wt_error *err)
{
	char *text, *line, *save = NULL;
	mode_t mode = 0;
	int rc;

	if (!path || !out || len == 0) {
		return wt_error_set(err, -EINVAL, "token file: NULL argument");
	}
	out[0] = '\0';
	rc = slurp(path, &text, &mode, err);
	if (rc < 0) {
		return rc;
	}
	if (mode & 077) {
		free(text);
		return wt_error_set(err, -EACCES,
				    "%s: a token file must be private to its "
				    "owner, but its mode is %04o (chmod 600 "
				    "%s)",
				    path, (unsigned)(mode & 07777), path);
	}
	rc = wt_error_set(err, -EINVAL,
			  "%s: no token (one line of at "
			  "least %d characters)",
			  path, WT_SECRET_MIN);
	for (line = strtok_r(text, "\r\n", &save); line;
	     line = strtok_r(NULL, "\r\n", &save)) {
		char *end;
		size_t n;

		while (*line == ' ' || *line == '\t') {
			line++;
		}
		if (!*line || *line == '#') {
			continue;
		}
		end = line + strlen(line);
		while (end > line && (end[-1] == ' ' || end[-1] == '\t')) {
			*--end = '\0';
		}
		n = strlen(line);
		for (size_t k = 0; k < n; k++) {
			if (line[k] < 0x21 || line[k] > 0x7e) {
				n = 0;
			}
		}
		if (n >= WT_SECRET_MIN && n < len) {
			memcpy(out, line, n + 1);
			rc = 0;
			wt_error_clear(err);
		}
		break;
	}
	free(text);
	return rc;
}

bool wt_secret_equal(const char *a, const char *b)
{
	size_t na = strlen(a), nb = strlen(b);
	unsigned char diff = na != nb;

	for (size_t k = 0; k < na; k++) {
		diff |= (unsigned char)a[k] ^ (unsigned char)b[k < nb ? k : 0];
	}
	return diff == 0;
}

/* --- allow-lists ---------------------------------------------------------- */

struct wt_keylist {
	size_t n;
	char (*keys)[WT_KEY_TEXT];
};

int wt_keylist_load(const char *path, wt_keylist **out, wt_error *err)
{
	char *text, *p, k[WT_KEY_TEXT];
	wt_keylist *l;
	int rc, line = 0;
	size_t cap = 0;

	if (!path || !out) {
		return wt_error_set(err, -EINVAL, "allow-list: NULL argument");
	}
	*out = NULL;
	rc = slurp(path, &text, NULL, err);
	if (rc < 0) {
		return rc;
	}
	l = calloc(1, sizeof(*l));
	if (!l) {
		free(text);
		return wt_error_set(err, -ENOMEM, "%s: out of memory", path);
	}
	p = text;
	while ((rc = next_line(&p, k)) != -2) {
		line++;
		if (rc < 0) {
			wt_error_set(err, -EINVAL,
				     "%s:%d: not a Z85 CURVE public key (40 "
				     "characters) nor a # comment",
				     path, line);
			goto fail;
		}
		if (rc == 0 || wt_keylist_has(l, k)) {
			continue;
		}
		if (l->n == cap) {
			size_t c = cap ? 2 * cap : 8;
			void *q = realloc(l->keys, c * sizeof(*l->keys));

			if (!q) {
				wt_error_set(err, -ENOMEM, "%s: out of memory",
					     path);
				goto fail;
			}
			l->keys = q;
			cap = c;
		}
		memcpy(l->keys[l->n++], k, WT_KEY_TEXT);
	}
	if (l->n == 0) {
		wt_error_set(err, -EINVAL,
			     "%s: no keys (one public key per "
			     "line)",
			     path);
		goto fail;
	}
	free(text);
	*out = l;
	return 0;
fail:
	free(text);
	wt_keylist_destroy(l);
	return -EINVAL;
}

bool wt_keylist_has(const wt_keylist *l, const char *key)
{
	if (!l || !key) {
		return false;
	}
	for (size_t i = 0; i < l->n; i++) {
		if (strcmp(l->keys[i], key) == 0) {
			return true;
		}
	}
	return false;
}

size_t wt_keylist_count(const wt_keylist *l)
{
	return l ? l->n : 0;
}

void wt_keylist_destroy(wt_keylist *l)
{
	if (l) {
		free(l->keys);
		free(l);
	}
}

/* --- binding rules -------------------------------------------------------- */

/* The host of a tcp endpoint (the peer's, after any "source;") into host. */
static int tcp_host(const char *endpoint, char *host, size_t len)
{
	const char *s = endpoint + 6, *semi = strchr(s, ';'), *end;
	size_t n;

	if (semi) {
		s = semi + 1;
	}
	if (s[0] == '[') {
		end = strchr(s, ']');
		if (!end) {
			return -1;
		}
		s++;
	} else {
		end = strrchr(s, ':');
		if (!end) {
			return -1;
		}
	}
	n = (size_t)(end - s);
	if (n + 1 > len) {
		return -1;
	}
	memcpy(host, s, n);
	host[n] = '\0';
	return 0;
}

static bool host_is_loopback(const char *host)
{
	struct in_addr a4;
	struct in6_addr a6;

	if (strcmp(host, "localhost") == 0) {
		return true;
	}
	if (inet_pton(AF_INET, host, &a4) == 1) {
		return (ntohl(a4.s_addr) >> 24) == 127;
	}
	if (inet_pton(AF_INET6, host, &a6) == 1) {
		return IN6_IS_ADDR_LOOPBACK(&a6);
	}
	return false;
}

bool wt_endpoint_is_loopback(const char *endpoint)
{
	char host[256];

	return endpoint && strncmp(endpoint, "tcp://", 6) == 0 &&
	       tcp_host(endpoint, host, sizeof(host)) == 0 &&
	       host_is_loopback(host);
}

bool wt_endpoint_wants_curve(const char *endpoint)
{
	return endpoint && strncmp(endpoint, "ipc://", 6) != 0 &&
	       strncmp(endpoint, "inproc://", 9) != 0;
}

/* mkdir -p dir with mode 0700 for every folder made. */
static void make_private_dirs(char *dir)
{
	for (char *p = dir + 1; *p; p++) {
		if (*p == '/') {
			*p = '\0';
			(void)mkdir(dir, 0700);
			*p = '/';
		}
	}
	(void)mkdir(dir, 0700);
}

static int check_ipc(const char *option, const char *endpoint, bool bind,
		     wt_error *err)
{
	const char *path = endpoint + 6;
	char dir[4096], *slash;
	struct stat st;

	if (path[0] == '@') {
		return wt_error_set(err, -EACCES,
				    "%s %s: an abstract ipc name has no file "
				    "permissions, anyone on this host could "
				    "connect; use a path in a folder of mode "
				    "0700",
				    option, endpoint);
	}
	if (!bind) {
		return 0;
	}
	if (!path[0] || strlen(path) >= sizeof(dir)) {
		return wt_error_set(err, -EINVAL, "%s %s: bad ipc path", option,
				    endpoint);
	}
	strcpy(dir, path);
	slash = strrchr(dir, '/');
	if (!slash) {
		strcpy(dir, ".");
	} else if (slash == dir) {
		strcpy(dir, "/");
	} else {
		*slash = '\0';
		make_private_dirs(dir);
	}
	if (stat(dir, &st) != 0) {
		int e = errno;

		return wt_error_set(err, -e, "%s %s: folder %s: %s", option,
				    endpoint, dir, strerror(e));
	}
	if (!S_ISDIR(st.st_mode)) {
		return wt_error_set(err, -ENOTDIR, "%s %s: %s is not a folder",
				    option, endpoint, dir);
	}
	if (st.st_uid != geteuid()) {
		return wt_error_set(err, -EACCES,
				    "%s %s: folder %s belongs to uid %u, not "
				    "to us (uid %u); an ipc socket must be in "
				    "a folder of our own with mode 0700",
				    option, endpoint, dir, (unsigned)st.st_uid,
				    (unsigned)geteuid());
	}
	if (st.st_mode & 077) {
		return wt_error_set(err, -EACCES,
				    "%s %s: folder %s has mode %04o, so other "
				    "users could reach the socket; it must be "
				    "0700 (chmod 700 %s)",
				    option, endpoint, dir,
				    (unsigned)(st.st_mode & 07777), dir);
	}
	return 0;
}

int wt_endpoint_check(const char *option, const char *endpoint, bool bind,
		      bool keys, wt_error *err)
{
	char host[256];

	if (!option || !endpoint) {
		return wt_error_set(err, -EINVAL, "endpoint: NULL argument");
	}
	if (strncmp(endpoint, "ipc://", 6) == 0) {
		return check_ipc(option, endpoint, bind, err);
	}
	if (strncmp(endpoint, "inproc://", 9) == 0) {
		return 0;
	}
	if (keys) {
		return 0;
	}
	if (strncmp(endpoint, "tcp://", 6) == 0) {
		if (tcp_host(endpoint, host, sizeof(host)) != 0) {
			return wt_error_set(err, -EINVAL,
					    "%s %s: want tcp://HOST:PORT",
					    option, endpoint);
		}
		if (host_is_loopback(host)) {
			return 0;
		}
		return wt_error_set(err, -EACCES,
				    "%s %s: %s is not a loopback address, and "
				    "no CURVE keys are configured: without "
				    "keys only 127.0.0.1, ::1 or localhost "
				    "may be used",
				    option, endpoint, host);
	}
	return wt_error_set(err, -EACCES,
			    "%s %s: without CURVE keys only ipc:// (in a "
			    "folder of mode 0700) and tcp:// on a loopback "
			    "address may be used",
			    option, endpoint);
}

/* --- CURVE sockets -------------------------------------------------------- */

static int sockopt(void *sock, int opt, const void *v, size_t len,
		   const char *what, wt_error *err)
{
	if (zmq_setsockopt(sock, opt, v, len) != 0) {
		return wt_error_set(err, -zmq_errno(), "CURVE %s: %s", what,
				    zmq_strerror(zmq_errno()));
	}
	return 0;
}

int wt_curve_server(void *sock, const wt_keypair *ours, wt_error *err)
{
	int one = 1, rc;

	if (!zmq_has("curve")) {
		return wt_error_set(err, -ENOTSUP, "this libzmq has no CURVE");
	}
	if ((rc = sockopt(sock, ZMQ_CURVE_SERVER, &one, sizeof(one), "server",
			  err)) < 0 ||
	    (rc = sockopt(sock, ZMQ_CURVE_SECRETKEY, ours->secret_key,
			  WT_KEY_TEXT - 1, "secret key", err)) < 0 ||
	    (rc = sockopt(sock, ZMQ_ZAP_DOMAIN, WT_ZAP_DOMAIN,
			  strlen(WT_ZAP_DOMAIN), "ZAP domain", err)) < 0) {
		return rc;
	}
	return 0;
}

int wt_curve_client(void *sock, const char *server_public,
		    const wt_keypair *ours, wt_error *err)
{
	int rc;

	if (!zmq_has("curve")) {
		return wt_error_set(err, -ENOTSUP, "this libzmq has no CURVE");
	}
	if ((rc = sockopt(sock, ZMQ_CURVE_SERVERKEY, server_public,
			  WT_KEY_TEXT - 1, "server key", err)) < 0 ||
	    (rc = sockopt(sock, ZMQ_CURVE_PUBLICKEY, ours->public_key,
			  WT_KEY_TEXT - 1, "public key", err)) < 0 ||
	    (rc = sockopt(sock, ZMQ_CURVE_SECRETKEY, ours->secret_key,
			  WT_KEY_TEXT - 1, "secret key", err)) < 0) {
		return rc;
	}
	return 0;
}

int wt_curve_client_files(void *sock, const char *endpoint,
			  const char *server_key_file,
			  const char *client_prefix, wt_error *err)
{
	char server[WT_KEY_TEXT];
	wt_keypair ours;
	int rc;

	if (!server_key_file && !client_prefix) {
		return 0;
	}
	if (!server_key_file || !client_prefix) {
		return wt_error_set(err, -EINVAL,
				    "CURVE needs both the server's public key "
				    "(--server-key FILE) and our own key "
				    "(--client-key PREFIX)");
	}
	rc = wt_key_read_public(server_key_file, server, err);
	if (rc == 0) {
		rc = wt_key_read_secret(client_prefix, &ours, err);
	}
	if (rc == 0 && wt_endpoint_wants_curve(endpoint)) {
		rc = wt_curve_client(sock, server, &ours, err);
	}
	memset(&ours, 0, sizeof(ours));
	return rc;
}

/* --- the ZAP handler (RFC 27) --------------------------------------------- */

struct wt_zap {
	void *sock;
	const wt_keylist *allowed, *also;
	wt_log *log;
	wt_ratelimit rl;
	pthread_t thread;
	bool running;
	atomic_bool stop;
	atomic_ullong accepted, refused;
};

#define ZAP_PARTS 8

static void zap_reply(void *sock, const zmq_msg_t *request_id, const char *code,
		      const char *text, const char *user)
{
	zmq_msg_t id;

	zmq_send(sock, "1.0", 3, ZMQ_SNDMORE);
	zmq_msg_init(&id);
	zmq_msg_copy(&id, (zmq_msg_t *)request_id);
	zmq_msg_send(&id, sock, ZMQ_SNDMORE);
	zmq_msg_close(&id);
	zmq_send(sock, code, strlen(code), ZMQ_SNDMORE);
	zmq_send(sock, text, strlen(text), ZMQ_SNDMORE);
	zmq_send(sock, user, strlen(user), ZMQ_SNDMORE);
	zmq_send(sock, "", 0, 0);
}

static bool part_is(const zmq_msg_t *m, const char *s)
{
	size_t n = strlen(s);

	return zmq_msg_size((zmq_msg_t *)m) == n &&
	       memcmp(zmq_msg_data((zmq_msg_t *)m), s, n) == 0;
}

/* One request: version, request id, domain, address, routing id,
 * mechanism, credentials... */
static void zap_answer(struct wt_zap *z)
{
	zmq_msg_t part[ZAP_PARTS];
	int n = 0, more = 1;
	size_t more_len;
	char key[WT_KEY_TEXT] = "", addr[64] = "?";

	while (more) {
		zmq_msg_t scratch, *m = n < ZAP_PARTS ? &part[n] : &scratch;

		zmq_msg_init(m);
		if (zmq_msg_recv(m, z->sock, 0) < 0) {
			zmq_msg_close(m);
			break;
		}
		more_len = sizeof(more);
		zmq_getsockopt(z->sock, ZMQ_RCVMORE, &more, &more_len);
		if (m == &scratch) {
			zmq_msg_close(m);
		} else {
			n++;
		}
	}
	if (n < 2) {
		/* Not even a request id to answer with: an empty reply keeps
		 * the REP socket's turn. */
		zmq_send(z->sock, "", 0, 0);
		goto out;
	}
	if (n >= 4) {
		size_t len = zmq_msg_size(&part[3]);

		if (len >= sizeof(addr)) {
			len = sizeof(addr) - 1;
		}
		memcpy(addr, zmq_msg_data(&part[3]), len);
		addr[len] = '\0';
	}
	if (n < 7 || !part_is(&part[0], "1.0")) {
		atomic_fetch_add(&z->refused, 1);
		zap_reply(z->sock, &part[1], "500", "malformed ZAP request",
			  "");
		goto out;
	}
	if (part_is(&part[5], "CURVE") && zmq_msg_size(&part[6]) == 32) {
		zmq_z85_encode(key, zmq_msg_data(&part[6]), 32);
	}
	if (key[0] &&
	    (wt_keylist_has(z->allowed, key) || wt_keylist_has(z->also, key))) {
		atomic_fetch_add(&z->accepted, 1);
		if (z->log) {
			wt_log_info(z->log, "CURVE client %s from %s let in",
				    key, addr);
		}
		zap_reply(z->sock, &part[1], "200", "OK", key);
	} else {
		atomic_fetch_add(&z->refused, 1);
		if (z->log) {
			WT_LOG_RATELIMITED(z->log, &z->rl, LOG_WARNING,
					   "refused %s client %s from %s: not "
					   "on the allow-list",
					   key[0] ? "CURVE" : "a non-CURVE",
					   key[0] ? key : "", addr);
		}
		zap_reply(z->sock, &part[1], "400", "not on the allow-list",
			  "");
	}
out:
	for (int k = 0; k < n && k < ZAP_PARTS; k++) {
		zmq_msg_close(&part[k]);
	}
}

static void *zap_main(void *arg)
{
	struct wt_zap *z = arg;
	zmq_pollitem_t item = {.socket = z->sock, .events = ZMQ_POLLIN};

	while (!atomic_load(&z->stop)) {
		int rc = zmq_poll(&item, 1, ZAP_POLL_MS);

		if (rc < 0) {
			if (zmq_errno() == ETERM) {
				break;
			}
			continue;
		}
		if (rc > 0) {
			zap_answer(z);
		}
	}
	return NULL;
}

int wt_zap_start(void *zctx, const wt_keylist *allowed, const wt_keylist *also,
		 wt_log *log, wt_zap **out, wt_error *err)
{
	struct wt_zap *z;
	int linger = 0, rc;

	if (!zctx || !out) {
		return wt_error_set(err, -EINVAL, "ZAP: NULL argument");
	}
	*out = NULL;
	z = calloc(1, sizeof(*z));
	if (!z) {
		return wt_error_set(err, -ENOMEM, "ZAP: out of memory");
	}
	z->allowed = allowed;
	z->also = also;
	z->log = log;
	wt_ratelimit_init(&z->rl, 10 * WT_NS_PER_S, 5);
	atomic_init(&z->stop, false);
	atomic_init(&z->accepted, 0);
	atomic_init(&z->refused, 0);
	z->sock = zmq_socket(zctx, ZMQ_REP);
	if (!z->sock) {
		rc = wt_error_set(err, -zmq_errno(), "ZAP: %s",
				  zmq_strerror(zmq_errno()));
		free(z);
		return rc;
	}
	zmq_setsockopt(z->sock, ZMQ_LINGER, &linger, sizeof(linger));
	if (zmq_bind(z->sock, "inproc://zeromq.zap.01") != 0) {
		rc = wt_error_set(err, -zmq_errno(),
				  "ZAP: inproc://zeromq.zap.01: %s",
				  zmq_strerror(zmq_errno()));
		zmq_close(z->sock);
		free(z);
		return rc;
	}
	rc = pthread_create(&z->thread, NULL, zap_main, z);
	if (rc != 0) {
		zmq_close(z->sock);
		free(z);
		return wt_error_set(err, -rc, "ZAP: thread: %s", strerror(rc));
	}
	z->running = true;
	*out = z;
	return 0;
}

void wt_zap_counts(const wt_zap *z, uint64_t *accepted, uint64_t *refused)
{
	if (accepted) {
		*accepted = z ? atomic_load(&z->accepted) : 0;
	}
	if (refused) {
		*refused = z ? atomic_load(&z->refused) : 0;
	}
}

void wt_zap_stop(wt_zap *z)
{
	if (!z) {
		return;
	}
	atomic_store(&z->stop, true);
	if (z->running) {
		pthread_join(z->thread, NULL);
	}
	zmq_close(z->sock);
	free(z);
}
