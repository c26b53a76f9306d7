/*
 * view_http.c - wavetrim-view's HTTP side, on libmicrohttpd.
 *
 *   GET  /                 the page (index.html, view.css, view.js)
 *   GET  /api/setup        geometry, optics, colour maps: fetched once
 *   GET  /api/events       server-sent events: "hello" (the history so
 *                          far), then "tick" (compact JSON, rate_hz a
 *                          second) and "log" (the daemon's events)
 *   GET  /api/history      the history again, for a page that fell behind
 *   GET  /api/calibration  singular values of the installed calibration
 *   GET  /snapshot.png     the panels as `wavetrim snapshot` draws them
 *   GET  /snapshot.svg
 *   POST /api/control      one request line, only open, close, hold,
 *                          set control.gain X, set control.leak X; the
 *                          daemon's JSON reply comes back as it is
 *
 * A stream that cannot keep up skips ticks (it always gets the newest), so
 * no page slows anything down.  Cross-site requests: a POST must carry the
 * header X-Wavetrim-View (a page of another origin cannot add it without a
 * CORS preflight, which we never grant), and unless --allow-remote the Host
 * header must name the loopback address (DNS rebinding).
 *
 * With --token-file (required beyond loopback) every request must show the
 * token: the header "Authorization: Bearer TOKEN", or the cookie
 * wavetrim-view=TOKEN that GET /?token=TOKEN sets (HttpOnly, SameSite
 * Strict) before sending the browser on to / without the token in the
 * address.  Anything else gets 401.
 */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

#include <arpa/inet.h>
#include <microhttpd.h>
#include <netinet/in.h>
#include <zmq.h>

#include "view.h"
#include "wt_clock.h"
#include "wt_json.h"
#include "wt_request.h"
#include "wt_secure.h"

/* The daemon's answer to a forwarded request: wait this long. */
#define FORWARD_TIMEOUT_MS 3000
/* An idle event stream gets a comment line this often. */
#define KEEPALIVE_NS (15 * WT_NS_PER_S)
/* Largest file served from --www. */
#define WWW_MAX (1 << 20)

static int text_append(struct view_text *t, const char *s, size_t n)
{
	if (t->len + n + 1 > t->cap) {
		size_t cap = (t->len + n + 1) * 2;
		char *p = realloc(t->buf, cap);

		if (!p) {
			return -ENOMEM;
		}
		t->buf = p;
		t->cap = cap;
	}
	memcpy(t->buf + t->len, s, n);
	t->len += n;
	t->buf[t->len] = '\0';
	return 0;
}

static int text_puts(struct view_text *t, const char *s)
{
	return text_append(t, s, strlen(s));
}

/* --- the request filter --------------------------------------------------- */

int view_filter_request(const char *line, size_t len, char *out, size_t out_len,
			char *why, size_t why_len)
{
	char buf[WT_REQUEST_LINE_MAX + 1], *w[4], *save = NULL, *end;
	int n = 0;
	double x;

	while (len > 0 && (line[len - 1] == '\n' || line[len - 1] == '\r')) {
		len--;
	}
	if (len > WT_REQUEST_LINE_MAX) {
		snprintf(why, why_len, "request longer than %d bytes",
			 WT_REQUEST_LINE_MAX);
		return -EPERM;
	}
	memcpy(buf, line, len);
	buf[len] = '\0';
	for (size_t k = 0; k < len; k++) {
		unsigned char c = (unsigned char)buf[k];

		if ((c < 0x20 && c != '\t') || c >= 0x7f) {
			snprintf(why, why_len,
				 "control characters and non-ASCII bytes are "
				 "not allowed");
			return -EPERM;
		}
	}
	for (char *t = strtok_r(buf, " \t", &save); t;
	     t = strtok_r(NULL, " \t", &save)) {
		if (n == 4) {
			break;
		}
		w[n++] = t;
	}
	if (n == 1 &&
	    (strcmp(w[0], "open") == 0 || strcmp(w[0], "close") == 0 ||
	     strcmp(w[0], "hold") == 0)) {
		snprintf(out, out_len, "%s", w[0]);
		return 0;
	}
	if (n == 3 && strcmp(w[0], "set") == 0 &&
	    (strcmp(w[1], "control.gain") == 0 ||
	     strcmp(w[1], "control.leak") == 0)) {
		errno = 0;
		x = strtod(w[2], &end);
		if (errno || *end || end == w[2] || !isfinite(x) ||
		    strlen(w[2]) > 32 ||
		    strspn(w[2], "0123456789.eE+-") != strlen(w[2])) {
			snprintf(why, why_len, "%s: '%.32s' is not a number",
				 w[1], w[2]);
			return -EPERM;
		}
		snprintf(out, out_len, "set %s %s", w[1], w[2]);
		return 0;
	}
	snprintf(why, why_len,
		 "not allowed from the page (only open, close, hold, "
		 "set control.gain X, set control.leak X)");
	return -EPERM;
}

/* --- responses ------------------------------------------------------------ */

static enum MHD_Result respond(struct MHD_Connection *con, unsigned status,
			       const char *mime, const void *data, size_t len,
			       bool copy)
{
	struct MHD_Response *r;
	enum MHD_Result ret;

	r = MHD_create_response_from_buffer(len, (void *)data,
					    copy ? MHD_RESPMEM_MUST_COPY
						 : MHD_RESPMEM_PERSISTENT);
	if (!r) {
		return MHD_NO;
	}
	MHD_add_response_header(r, "Content-Type", mime);
	MHD_add_response_header(r, "Cache-Control", "no-store");
	MHD_add_response_header(r, "X-Content-Type-Options", "nosniff");
	/* Everything the page uses comes from here; nothing from outside. */
	MHD_add_response_header(r, "Content-Security-Policy",
				"default-src 'self'; img-src 'self' data:; "
				"frame-ancestors 'none'");
	ret = MHD_queue_response(con, status, r);
	MHD_destroy_response(r);
	return ret;
}

static enum MHD_Result respond_error(struct MHD_Connection *con,
				     unsigned status, const char *msg)
{
	char buf[1024];
	int n = wt_request_reply_error(buf, sizeof(buf), msg);

	if (n < 0) {
		return MHD_NO;
	}
	return respond(con, status, "application/json", buf, (size_t)n, true);
}

static enum MHD_Result respond_text(struct MHD_Connection *con,
				    struct view_text *t, const char *mime)
{
	enum MHD_Result r =
		respond(con, MHD_HTTP_OK, mime, t->buf, t->len, true);

	view_text_free(t);
	return r;
}

/* The page's files: built in, or from --www. */
static enum MHD_Result serve_asset(struct view *v, struct MHD_Connection *con,
				   const char *name)
{
	const char *mime, *data = view_asset(name, NULL, &mime);
	struct view_text t = {0};
	char path[4096], buf[8192];
	ssize_t n;
	int fd;

	if (!data) {
		return respond_error(con, MHD_HTTP_NOT_FOUND, "no such page");
	}
	if (!v->www_dir) {
		size_t len;

		data = view_asset(name, &len, &mime);
		return respond(con, MHD_HTTP_OK, mime, data, len, false);
	}
	snprintf(path, sizeof(path), "%s/%s", v->www_dir, name);
	fd = open(path, O_RDONLY | O_CLOEXEC);
	if (fd < 0) {
		return respond_error(con, MHD_HTTP_NOT_FOUND, strerror(errno));
	}
	while ((n = read(fd, buf, sizeof(buf))) > 0 && t.len < WWW_MAX) {
		if (text_append(&t, buf, (size_t)n) < 0) {
			break;
		}
	}
	close(fd);
	if (!t.buf) {
		return respond(con, MHD_HTTP_OK, mime, "", 0, false);
	}
	return respond_text(con, &t, mime);
}

/* --- JSON answers
 * ------------------------------------------------------------- */

static void history_json(wt_json *j, const void *arg)
{
	const wt_draw_info *in = arg;

	wt_json_object_begin(j);
	wt_json_key(j, "hist_n");
	wt_json_int(j, in->n_hist);
	wt_json_key(j, "hist");
	wt_json_array_begin(j);
	for (int k = 0; k < in->n_hist; k++) {
		const wt_draw_point *p = &in->hist[k];

		wt_json_array_begin(j);
		wt_json_double_prec(j, p->t_s, 7);
		wt_json_double_prec(j, p->rms_nm, 4);
		wt_json_double_prec(j, p->strehl, 4);
		wt_json_double_prec(j, p->truth_rms_nm, 4);
		wt_json_double_prec(j, p->truth_strehl, 4);
		wt_json_array_end(j);
	}
	wt_json_array_end(j);
	wt_json_object_end(j);
}

static void calibration_json(wt_json *j, const void *arg)
{
	const wt_draw_info *in = arg;

	wt_json_object_begin(j);
	wt_json_key(j, "singular_values");
	wt_json_double_array(j, in->sv, (size_t)in->n_sv, 5);
	wt_json_key(j, "modes");
	wt_json_int(j, in->status.modes);
	wt_json_key(j, "recommended");
	wt_json_int(j, in->status.recommended);
	wt_json_key(j, "condition");
	wt_json_double_prec(j, in->status.condition, 5);
	/* Per-actuator flags: act[a] has bit k set for kind k. */
	wt_json_key(j, "flags");
	if (in->have_flags) {
		wt_json_object_begin(j);
		wt_json_key(j, "names");
		wt_json_array_begin(j);
		for (int k = 0; k < in->n_flag_kinds; k++) {
			wt_json_string(j, in->flag_names[k]);
		}
		wt_json_array_end(j);
		wt_json_key(j, "counts");
		wt_json_array_begin(j);
		for (int k = 0; k < in->n_flag_kinds; k++) {
			wt_json_int(j, in->flag_counts[k]);
		}
		wt_json_array_end(j);
		wt_json_key(j, "act");
		wt_json_array_begin(j);
		for (int k = 0; k < in->actuators->n_valid; k++) {
			wt_json_int(j, in->act_flags[k]);
		}
		wt_json_array_end(j);
		wt_json_object_end(j);
	} else {
		wt_json_null(j);
	}
	wt_json_object_end(j);
}

static enum MHD_Result serve_json(struct view *v, struct MHD_Connection *con,
				  void (*fn)(wt_json *j, const void *arg))
{
	struct view_text t = {0};
	int rc;

	pthread_mutex_lock(&v->lock);
	rc = view_text_build(&t, 65536, fn, wt_draw_scene_info(v->scene));
	pthread_mutex_unlock(&v->lock);
	if (rc < 0) {
		view_text_free(&t);
		return respond_error(con, MHD_HTTP_INTERNAL_SERVER_ERROR,
				     "out of memory");
	}
	return respond_text(con, &t, "application/json");
}

static enum MHD_Result serve_snapshot(struct view *v,
				      struct MHD_Connection *con,
				      enum wt_draw_format f)
{
	struct MHD_Response *r;
	enum MHD_Result ret;
	wt_error err = {0};
	uint8_t *buf;
	size_t len;
	int rc;

	pthread_mutex_lock(&v->lock);
	rc = wt_draw_scene_render(v->scene, f, v->config_path, &buf, &len,
				  &err);
	pthread_mutex_unlock(&v->lock);
	if (rc < 0) {
		return respond_error(con, MHD_HTTP_INTERNAL_SERVER_ERROR,
				     err.msg);
	}
	r = MHD_create_response_from_buffer(len, buf, MHD_RESPMEM_MUST_FREE);
	if (!r) {
		free(buf);
		return MHD_NO;
	}
	MHD_add_response_header(r, "Content-Type",
				f == WT_DRAW_PNG ? "image/png"
						 : "image/svg+xml");
	MHD_add_response_header(r, "Cache-Control", "no-store");
	ret = MHD_queue_response(con, MHD_HTTP_OK, r);
	MHD_destroy_response(r);
	return ret;
}

/* --- event streams
 * ------------------------------------------------------------ */

struct stream {
	struct view *v;
	bool hello;
	uint64_t tick_seen, event_seen;
	uint64_t last_ns;
	struct view_text out;
	size_t off;
};

static void sse(struct view_text *t, const char *event, const char *data,
		size_t len)
{
	text_puts(t, "event: ");
	text_puts(t, event);
	text_puts(t, "\ndata: ");
	text_append(t, data, len);
	text_puts(t, "\n\n");
}

/* Compose what the stream sends next; waits (up to 1 s) when nothing is
 * new.  Called with the lock held. */
static void compose(struct stream *s)
{
	struct view *v = s->v;
	uint64_t now;

	s->out.len = 0;
	s->off = 0;
	if (!s->hello) {
		struct view_text h = {0};

		s->hello = true;
		text_puts(&s->out, "retry: 2000\n");
		if (view_text_build(&h, 65536, history_json,
				    wt_draw_scene_info(v->scene)) == 0) {
			sse(&s->out, "hello", h.buf, h.len);
		}
		view_text_free(&h);
		s->event_seen = v->event_seq > VIEW_EVENTS
					? v->event_seq - VIEW_EVENTS
					: 0;
	}
	for (int round = 0; round < 2; round++) {
		if (v->event_seq - s->event_seen > VIEW_EVENTS) {
			s->event_seen = v->event_seq - VIEW_EVENTS;
		}
		while (s->event_seen < v->event_seq) {
			const struct view_text *e =
				&v->events[s->event_seen % VIEW_EVENTS];

			sse(&s->out, "log", e->buf, e->len);
			s->event_seen++;
		}
		if (v->tick_seq > s->tick_seen && v->tick.len) {
			sse(&s->out, "tick", v->tick.buf, v->tick.len);
			s->tick_seen = v->tick_seq;
		}
		if (s->out.len > 0 || *v->stop || round == 1) {
			break;
		}
		{
			struct timespec ts;

			clock_gettime(CLOCK_REALTIME, &ts);
			ts.tv_sec += 1;
			pthread_cond_timedwait(&v->cond, &v->lock, &ts);
		}
	}
	now = wt_clock_ns();
	if (s->out.len > 0) {
		s->last_ns = now;
	} else if (now - s->last_ns > KEEPALIVE_NS) {
		text_puts(&s->out, ": keepalive\n\n");
		s->last_ns = now;
	}
}

static ssize_t stream_read(void *cls, uint64_t pos, char *buf, size_t max)
{
	struct stream *s = cls;
	struct view *v = s->v;

	(void)pos;
	for (;;) {
		if (s->off < s->out.len) {
			size_t n = s->out.len - s->off;

			if (n > max) {
				n = max;
			}
			memcpy(buf, s->out.buf + s->off, n);
			s->off += n;
			return (ssize_t)n;
		}
		if (*v->stop) {
			return MHD_CONTENT_READER_END_OF_STREAM;
		}
		pthread_mutex_lock(&v->lock);
		compose(s);
		pthread_mutex_unlock(&v->lock);
	}
}

static void stream_free(void *cls)
{
	struct stream *s = cls;

	pthread_mutex_lock(&s->v->lock);
	s->v->streams--;
	pthread_mutex_unlock(&s->v->lock);
	view_text_free(&s->out);
	free(s);
}

static enum MHD_Result serve_events(struct view *v, struct MHD_Connection *con)
{
	struct MHD_Response *r;
	struct stream *s;
	enum MHD_Result ret;
	bool full;

	pthread_mutex_lock(&v->lock);
	full = v->streams >= VIEW_MAX_STREAMS;
	if (!full) {
		v->streams++;
	}
	pthread_mutex_unlock(&v->lock);
	if (full) {
		return respond_error(con, MHD_HTTP_SERVICE_UNAVAILABLE,
				     "too many event streams open");
	}
	s = calloc(1, sizeof(*s));
	if (!s) {
		pthread_mutex_lock(&v->lock);
		v->streams--;
		pthread_mutex_unlock(&v->lock);
		return MHD_NO;
	}
	s->v = v;
	s->last_ns = wt_clock_ns();
	r = MHD_create_response_from_callback(MHD_SIZE_UNKNOWN, 32 * 1024,
					      stream_read, s, stream_free);
	if (!r) {
		stream_free(s);
		return MHD_NO;
	}
	MHD_add_response_header(r, "Content-Type", "text/event-stream");
	MHD_add_response_header(r, "Cache-Control", "no-store");
	ret = MHD_queue_response(con, MHD_HTTP_OK, r);
	MHD_destroy_response(r);
	return ret;
}

/* --- control
 * ------------------------------------------------------------------ */

struct post {
	char body[WT_REQUEST_LINE_MAX + 3];
	size_t len;
	bool too_long;
};

/* Send line to the daemon on a REQ socket of this thread's own. */
static enum MHD_Result forward(struct view *v, struct MHD_Connection *con,
			       const char *line)
{
	int linger = 0, rcv = FORWARD_TIMEOUT_MS, snd = 1000;
	void *s = zmq_socket(v->zctx, ZMQ_REQ);
	enum MHD_Result ret;
	zmq_msg_t m;

	if (!s) {
		return respond_error(con, MHD_HTTP_INTERNAL_SERVER_ERROR,
				     "no socket");
	}
	zmq_setsockopt(s, ZMQ_LINGER, &linger, sizeof(linger));
	zmq_setsockopt(s, ZMQ_RCVTIMEO, &rcv, sizeof(rcv));
	zmq_setsockopt(s, ZMQ_SNDTIMEO, &snd, sizeof(snd));
	zmq_msg_init(&m);
	if (wt_curve_client_files(s, v->control_ep, v->server_key_file,
				  v->client_key_prefix, NULL) < 0 ||
	    zmq_connect(s, v->control_ep) != 0 ||
	    zmq_send(s, line, strlen(line), 0) < 0 ||
	    zmq_msg_recv(&m, s, 0) < 0) {
		char why[512];

		snprintf(why, sizeof(why),
			 "wavetrimd did not answer on %s within %d ms",
			 v->control_ep, FORWARD_TIMEOUT_MS);
		zmq_msg_close(&m);
		zmq_close(s);
		return respond_error(con, MHD_HTTP_GATEWAY_TIMEOUT, why);
	}
	ret = respond(con, MHD_HTTP_OK, "application/json", zmq_msg_data(&m),
		      zmq_msg_size(&m), true);
	zmq_msg_close(&m);
	zmq_close(s);
	return ret;
}

static enum MHD_Result serve_control(struct view *v, struct MHD_Connection *con,
				     struct post *p)
{
	const char *mark = MHD_lookup_connection_value(con, MHD_HEADER_KIND,
						       "X-Wavetrim-View");
	char line[WT_REQUEST_LINE_MAX + 1], why[256];

	if (!mark || strcmp(mark, "1") != 0) {
		return respond_error(
			con, MHD_HTTP_FORBIDDEN,
			"requests need the header X-Wavetrim-View: "
			"1 (the view's page sends it)");
	}
	if (p->too_long ||
	    view_filter_request(p->body, p->len, line, sizeof(line), why,
				sizeof(why)) < 0) {
		pthread_mutex_lock(&v->lock);
		v->refused_requests++;
		pthread_mutex_unlock(&v->lock);
		return respond_error(con, MHD_HTTP_FORBIDDEN,
				     p->too_long ? "request too long" : why);
	}
	pthread_mutex_lock(&v->lock);
	v->forwarded_requests++;
	pthread_mutex_unlock(&v->lock);
	return forward(v, con, line);
}

/* --- dispatch
 * ----------------------------------------------------------------- */

/* Unless remote access was asked for, the Host header must be ours. */
static bool host_ok(const struct view *v, struct MHD_Connection *con)
{
	const char *host =
		MHD_lookup_connection_value(con, MHD_HEADER_KIND, "Host");
	char want[4][160];
	bool v6 = strchr(v->listen_host, ':') != NULL;

	if (v->allow_remote || !host) {
		return true;
	}
	snprintf(want[0], sizeof(want[0]), "127.0.0.1:%d", v->port);
	snprintf(want[1], sizeof(want[1]), "localhost:%d", v->port);
	snprintf(want[2], sizeof(want[2]), "[::1]:%d", v->port);
	snprintf(want[3], sizeof(want[3]), v6 ? "[%s]:%d" : "%s:%d",
		 v->listen_host, v->port);
	for (int k = 0; k < 4; k++) {
		if (strcasecmp(host, want[k]) == 0) {
			return true;
		}
	}
	return false;
}

/* The cookie's value in a Cookie header ("a=b; wavetrim-view=T; c=d"). */
static bool cookie_token(const char *cookies, char *out, size_t len)
{
	static const char name[] = "wavetrim-view=";
	const char *p = cookies;

	while (p && *p) {
		while (*p == ' ' || *p == ';') {
			p++;
		}
		if (strncmp(p, name, sizeof(name) - 1) == 0) {
			size_t n;

			p += sizeof(name) - 1;
			n = strcspn(p, ";");
			if (n >= len) {
				return false;
			}
			memcpy(out, p, n);
			out[n] = '\0';
			return true;
		}
		p = strchr(p, ';');
	}
	return false;
}

/* Does the request show the token (when one is set)? */
static bool token_ok(const struct view *v, struct MHD_Connection *con)
{
	const char *auth, *cookies;
	char shown[sizeof(v->token)];

	if (!v->token[0]) {
		return true;
	}
	auth = MHD_lookup_connection_value(con, MHD_HEADER_KIND,
					   "Authorization");
	if (auth && strncmp(auth, "Bearer ", 7) == 0) {
		return wt_secret_equal(auth + 7, v->token);
	}
	cookies = MHD_lookup_connection_value(con, MHD_HEADER_KIND, "Cookie");
	return cookie_token(cookies, shown, sizeof(shown)) &&
	       wt_secret_equal(shown, v->token);
}

/* GET /?token=TOKEN: keep it in a cookie, send the browser on to /. */
static enum MHD_Result serve_login(struct view *v, struct MHD_Connection *con,
				   const char *token)
{
	struct MHD_Response *r;
	enum MHD_Result ret;
	char cookie[sizeof(v->token) + 96];

	if (!wt_secret_equal(token, v->token)) {
		return respond_error(con, MHD_HTTP_UNAUTHORIZED,
				     "wrong access token");
	}
	snprintf(cookie, sizeof(cookie),
		 "wavetrim-view=%s; Path=/; HttpOnly; SameSite=Strict",
		 v->token);
	r = MHD_create_response_from_buffer(0, (void *)"",
					    MHD_RESPMEM_PERSISTENT);
	if (!r) {
		return MHD_NO;
	}
	MHD_add_response_header(r, "Set-Cookie", cookie);
	MHD_add_response_header(r, "Location", "/");
	MHD_add_response_header(r, "Cache-Control", "no-store");
	ret = MHD_queue_response(con, MHD_HTTP_SEE_OTHER, r);
	MHD_destroy_response(r);
	return ret;
}

static enum MHD_Result handler(void *cls, struct MHD_Connection *con,
			       const char *url, const char *method,
			       const char *version, const char *upload,
			       size_t *upload_size, void **con_cls)
{
	struct view *v = cls;
	bool get = strcmp(method, "GET") == 0 || strcmp(method, "HEAD") == 0;

	(void)version;
	if (v->token[0] && get && strcmp(url, "/") == 0) {
		const char *t = MHD_lookup_connection_value(
			con, MHD_GET_ARGUMENT_KIND, "token");

		if (t) {
			return serve_login(v, con, t);
		}
	}
	if (!token_ok(v, con)) {
		return respond_error(con, MHD_HTTP_UNAUTHORIZED,
				     "access token needed: open "
				     "/?token=TOKEN or send Authorization: "
				     "Bearer TOKEN");
	}
	if (strcmp(method, "POST") == 0 && strcmp(url, "/api/control") == 0) {
		struct post *p = *con_cls;

		if (!p) {
			p = calloc(1, sizeof(*p));
			if (!p) {
				return MHD_NO;
			}
			*con_cls = p;
			return MHD_YES;
		}
		if (*upload_size > 0) {
			if (p->len + *upload_size > sizeof(p->body) - 1) {
				p->too_long = true;
			} else {
				memcpy(p->body + p->len, upload, *upload_size);
				p->len += *upload_size;
			}
			*upload_size = 0;
			return MHD_YES;
		}
		if (!host_ok(v, con)) {
			return respond_error(con, MHD_HTTP_FORBIDDEN,
					     "unexpected Host header");
		}
		return serve_control(v, con, p);
	}
	if (!get) {
		return respond_error(con, MHD_HTTP_METHOD_NOT_ALLOWED,
				     "GET, or POST to /api/control");
	}
	if (!host_ok(v, con)) {
		return respond_error(con, MHD_HTTP_FORBIDDEN,
				     "unexpected Host header");
	}
	if (strcmp(url, "/") == 0 || strcmp(url, "/index.html") == 0) {
		return serve_asset(v, con, "index.html");
	}
	if (strcmp(url, "/view.css") == 0 || strcmp(url, "/view.js") == 0) {
		return serve_asset(v, con, url + 1);
	}
	if (strcmp(url, "/api/setup") == 0) {
		return respond(con, MHD_HTTP_OK, "application/json",
			       v->setup.buf, v->setup.len, false);
	}
	if (strcmp(url, "/api/events") == 0) {
		return serve_events(v, con);
	}
	if (strcmp(url, "/api/history") == 0) {
		return serve_json(v, con, history_json);
	}
	if (strcmp(url, "/api/calibration") == 0) {
		return serve_json(v, con, calibration_json);
	}
	if (strcmp(url, "/snapshot.png") == 0) {
		return serve_snapshot(v, con, WT_DRAW_PNG);
	}
	if (strcmp(url, "/snapshot.svg") == 0) {
		return serve_snapshot(v, con, WT_DRAW_SVG);
	}
	return respond_error(con, MHD_HTTP_NOT_FOUND, "no such page");
}

static void completed(void *cls, struct MHD_Connection *con, void **con_cls,
		      enum MHD_RequestTerminationCode why)
{
	(void)cls;
	(void)con;
	(void)why;
	free(*con_cls);
	*con_cls = NULL;
}

int view_http_start(struct view *v, struct MHD_Daemon **out)
{
	/* No MHD_USE_ERROR_LOG: it reports every page that goes away. */
	unsigned flags =
		MHD_USE_THREAD_PER_CONNECTION | MHD_USE_INTERNAL_POLLING_THREAD;
	struct sockaddr_in a4 = {0};
	struct sockaddr_in6 a6 = {0};
	const struct sockaddr *sa;

	if (inet_pton(AF_INET, v->listen_host, &a4.sin_addr) == 1) {
		a4.sin_family = AF_INET;
		a4.sin_port = htons((uint16_t)v->port);
		sa = (const struct sockaddr *)&a4;
	} else if (inet_pton(AF_INET6, v->listen_host, &a6.sin6_addr) == 1) {
		a6.sin6_family = AF_INET6;
		a6.sin6_port = htons((uint16_t)v->port);
		sa = (const struct sockaddr *)&a6;
		flags |= MHD_USE_IPv6;
	} else {
		fprintf(stderr, "wavetrim-view: bad address %s\n",
			v->listen_host);
		return -EINVAL;
	}
	*out = MHD_start_daemon(
		flags, (uint16_t)v->port, NULL, NULL, handler, v,
		MHD_OPTION_SOCK_ADDR, sa, MHD_OPTION_CONNECTION_LIMIT, 64u,
		MHD_OPTION_CONNECTION_TIMEOUT, 60u, MHD_OPTION_NOTIFY_COMPLETED,
		completed, v, MHD_OPTION_END);
	if (!*out) {
		fprintf(stderr,
			"wavetrim-view: cannot listen on %s port %d (in "
			"use?)\n",
			v->listen_host, v->port);
		return -EADDRINUSE;
	}
	return 0;
}

void view_http_stop(struct MHD_Daemon *d)
{
	if (d) {
		MHD_stop_daemon(d);
	}
}
