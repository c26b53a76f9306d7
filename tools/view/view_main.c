/*
 * wavetrim-view - a live view of the loop in the browser.
 *
 *   wavetrim-view -c FILE [--listen 127.0.0.1:8080]
 *                 [--allow-remote --token-file FILE] [--rate HZ]
 *                 [--www DIR] [--no-truth]
 *                 [--server-key FILE --client-key PREFIX]
 *
 * Subscribes to wavetrimd's telemetry (and to the simulator's truth) like
 * any other subscriber, keeps the newest of everything, and rate_hz times a
 * second turns it into one compact JSON "tick" that the page receives as
 * server-sent events.  The loop never waits for us: our SUB sockets have a
 * small receive high-water mark, the daemon's PUB drops what we do not
 * take, and only the newest frame record is analysed at each tick.
 */
#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <arpa/inet.h>
#include <cblas.h>
#include <zmq.h>

#include "view.h"
#include "wt_clock.h"
#include "wt_image.h"
#include "wt_json.h"
#include "wt_request.h"
#include "wt_secure.h"

/* Receive high-water mark of our subscriptions: a few periods at most. */
#define SUB_HWM 16
/* Largest telemetry message taken. */
#define MSG_MAX (64u << 20)
/* Status request: give up after this long, repeat this often. */
#define REQ_TIMEOUT_NS (2 * WT_NS_PER_S)
#define REQ_PERIOD_NS  (10 * WT_NS_PER_S)
/* Values per tick above which the arrays go out on fewer ticks. */
#define TICK_VALUES 4000

static volatile sig_atomic_t stop_flag;

static void on_signal(int sig)
{
	(void)sig;
	stop_flag = 1;
}

int view_text_set(struct view_text *t, const char *s, size_t n)
{
	if (n + 1 > t->cap) {
		size_t cap = n + 1 + n / 2;
		char *p = realloc(t->buf, cap);

		if (!p) {
			return -ENOMEM;
		}
		t->buf = p;
		t->cap = cap;
	}
	memcpy(t->buf, s, n);
	t->buf[n] = '\0';
	t->len = n;
	return 0;
}

void view_text_free(struct view_text *t)
{
	free(t->buf);
	t->buf = NULL;
	t->len = t->cap = 0;
}

static const char usage_text[] =
	"usage: wavetrim-view -c FILE [OPTIONS]\n"
	"\n"
	"Serve a live view of wavetrimd's loop to a web browser.\n"
	"\n"
	"  -c, --config FILE    the INI file wavetrimd runs with\n"
	"                       (endpoints, sensor and mirror geometry)\n"
	"  -l, --listen ADDR    HOST:PORT to serve on, a numeric address\n"
	"                       (default 127.0.0.1:8080; IPv6 [::1]:8080)\n"
	"      --allow-remote   accept a listen address that is not\n"
	"                       loopback; needs --token-file.  Whoever\n"
	"                       has the token can open, close and hold the\n"
	"                       loop and change gain and leak (unless the\n"
	"                       daemon takes our key as read-only).  Plain\n"
	"                       HTTP: on an untrusted network use an SSH\n"
	"                       tunnel or a TLS proxy instead\n"
	"      --token-file FILE  the access token (one line, at least 16\n"
	"                       characters, file mode 0600); a browser\n"
	"                       opens http://HOST:PORT/?token=TOKEN once\n"
	"                       (a cookie keeps it), scripts send the\n"
	"                       header Authorization: Bearer TOKEN\n"
	"      --server-key FILE  wavetrimd's CURVE public key (tcp)\n"
	"      --client-key PREFIX  our CURVE key pair (PREFIX.key)\n"
	"  -r, --rate HZ        ticks per second sent to the page\n"
	"                       (default 10, 1 to 30)\n"
	"      --www DIR        serve index.html, view.css and view.js\n"
	"                       from DIR, not the copies built in\n"
	"      --no-truth       do not subscribe to the simulator's truth\n"
	"  -h, --help           this text\n";

static void usage(FILE *out)
{
	fputs(usage_text, out);
}

/* --- listen address ------------------------------------------------------- */

static int parse_listen(const char *s, char *host, size_t host_len, int *port,
			bool *loopback)
{
	const char *colon;
	size_t n;
	char *end;
	long p;
	struct in_addr a4;
	struct in6_addr a6;

	if (s[0] == '[') {
		const char *close = strchr(s, ']');

		if (!close || close[1] != ':') {
			return -EINVAL;
		}
		n = (size_t)(close - s - 1);
		colon = close + 1;
		if (n + 1 > host_len) {
			return -EINVAL;
		}
		memcpy(host, s + 1, n);
	} else {
		colon = strrchr(s, ':');
		if (!colon) {
			return -EINVAL;
		}
		n = (size_t)(colon - s);
		if (n + 1 > host_len) {
			return -EINVAL;
		}
		memcpy(host, s, n);
	}
	host[n] = '\0';
	errno = 0;
	p = strtol(colon + 1, &end, 10);
	if (errno || *end || end == colon + 1 || p < 1 || p > 65535) {
		return -EINVAL;
	}
	*port = (int)p;
	if (strcmp(host, "localhost") == 0) {
		snprintf(host, host_len, "127.0.0.1");
	}
	if (inet_pton(AF_INET, host, &a4) == 1) {
		*loopback = (ntohl(a4.s_addr) >> 24) == 127;
	} else if (inet_pton(AF_INET6, host, &a6) == 1) {
		*loopback = IN6_IS_ADDR_LOOPBACK(&a6);
	} else {
		return -EINVAL; /* numeric addresses only */
	}
	return 0;
}

/* --- JSON ----------------------------------------------------------------- */

int view_text_build(struct view_text *t, size_t guess,
		    void (*fn)(wt_json *j, const void *arg), const void *arg)
{
	size_t cap = guess;

	for (;;) {
		wt_json j;
		int n;

		if (cap > t->cap) {
			char *p = realloc(t->buf, cap);

			if (!p) {
				return -ENOMEM;
			}
			t->buf = p;
			t->cap = cap;
		}
		wt_json_init(&j, t->buf, t->cap);
		fn(&j, arg);
		n = wt_json_finish(&j);
		if (n >= 0) {
			t->len = (size_t)n;
			return 0;
		}
		if (n != -ENOSPC || cap > ((size_t)1 << 28)) {
			return n;
		}
		cap *= 2;
	}
}

/* Insert JSON text from a peer, as it is but on one line (SSE data). */
static void raw_one_line(wt_json *j, char *text)
{
	for (char *p = text; *p; p++) {
		if (*p == '\n' || *p == '\r') {
			*p = ' ';
		}
	}
	wt_json_raw(j, text);
}

static void grid_json(wt_json *j, const char *name, const wt_grid *g)
{
	wt_json_key(j, name);
	wt_json_object_begin(j);
	wt_json_key(j, "n");
	wt_json_int(j, g->n);
	wt_json_key(j, "pitch");
	wt_json_double(j, g->pitch);
	wt_json_key(j, "x");
	wt_json_double_array(j, g->x, (size_t)g->n_valid, 6);
	wt_json_key(j, "y");
	wt_json_double_array(j, g->y, (size_t)g->n_valid, 6);
	wt_json_object_end(j);
}

static void cmap_json(wt_json *j, const char *name, enum wt_cmap map)
{
	uint8_t t[WT_CMAP_SIZE][3];
	char hex[WT_CMAP_SIZE * 6 + 1];

	wt_draw_cmap_table(map, t);
	for (int k = 0; k < WT_CMAP_SIZE; k++) {
		snprintf(hex + 6 * k, 7, "%02x%02x%02x", t[k][0], t[k][1],
			 t[k][2]);
	}
	wt_json_key(j, name);
	wt_json_string(j, hex);
}

struct setup_arg {
	struct view *v;
	const wt_config *cfg;
};

static void setup_json(wt_json *j, const void *arg)
{
	const struct setup_arg *a = arg;
	const wt_draw_info *in = wt_draw_scene_info(a->v->scene);

	wt_json_object_begin(j);
	wt_json_key(j, "config");
	wt_json_string(j, a->v->config_path);
	wt_json_key(j, "rate_hz");
	wt_json_double(j, a->v->rate_hz);
	wt_json_key(j, "map");
	wt_json_int(j, VIEW_MAP);
	grid_json(j, "lenslets", in->lenslets);
	grid_json(j, "actuators", in->actuators);
	wt_json_key(j, "obscuration");
	wt_json_double(j, in->obscuration);
	wt_json_key(j, "wavelength_nm");
	wt_json_double(j, in->wavelength_nm);
	wt_json_key(j, "um_per_px");
	wt_json_double(j, in->um_per_px);
	wt_json_key(j, "pixel_um");
	wt_json_double(j, in->pixel_um);
	wt_json_key(j, "sensor_px");
	wt_json_int(j, (int)(wt_config_int(a->cfg, WT_OPT_SENSOR_LENSLETS) *
			     wt_config_int(a->cfg,
					   WT_OPT_SENSOR_PIXELS_PER_LENSLET)));
	wt_json_key(j, "image_hz");
	wt_json_double(j, wt_config_double(a->cfg, WT_OPT_DAEMON_IMAGE_HZ));
	wt_json_key(j, "lat_bins");
	wt_json_int(j, WT_DRAW_LAT_BINS);
	wt_json_key(j, "modes");
	wt_json_array_begin(j);
	wt_json_int(j, in->j_first);
	wt_json_int(j, in->j_first + in->n_modes - 1);
	wt_json_array_end(j);
	wt_json_key(j, "min_flux");
	wt_json_double(j, wt_config_double(a->cfg, WT_OPT_SENSOR_MIN_FLUX));
	wt_json_key(j, "limits");
	wt_json_array_begin(j);
	wt_json_double(j, wt_config_double(a->cfg, WT_OPT_MIRROR_LIMIT_LOW));
	wt_json_double(j, wt_config_double(a->cfg, WT_OPT_MIRROR_LIMIT_HIGH));
	wt_json_array_end(j);
	wt_json_key(j, "telemetry");
	wt_json_string(j, a->v->telemetry_ep);
	wt_json_key(j, "truth");
	wt_json_string(j, a->v->truth_ep[0] ? a->v->truth_ep : NULL);
	wt_json_key(j, "colormaps");
	wt_json_object_begin(j);
	cmap_json(j, "viridis", WT_CMAP_VIRIDIS);
	cmap_json(j, "coolwarm", WT_CMAP_COOLWARM);
	wt_json_object_end(j);
	wt_json_object_end(j);
}

/* --- the tick ------------------------------------------------------------- */

struct tick_arg {
	struct view *v;
	double t_s;
	char *status;	     /* newest status text, or NULL */
	double status_age_s; /* NaN: never */
	bool arrays;	     /* send the frame's arrays this time */
	bool image;	     /* a new sensor image goes with this tick */
	float *map;    /* VIEW_MAP x VIEW_MAP scratch for the wavefront map */
	uint8_t *img8; /* WT_IMAGE_SIDE_MAX^2 scratch: the image in 8 bits */
	char *img64;   /* its base64 */
};

static void bits_json(wt_json *j, const uint8_t *b, size_t n)
{
	char *s = malloc(n + 1);

	if (!s) {
		wt_json_null(j);
		return;
	}
	for (size_t k = 0; k < n; k++) {
		s[k] = b[k] ? '1' : '0';
	}
	s[n] = '\0';
	wt_json_string(j, s);
	free(s);
}

static void frame_json(wt_json *j, const struct tick_arg *a)
{
	const wt_draw_info *in = wt_draw_scene_info(a->v->scene);
	size_t n = (size_t)in->lenslets->n_valid;
	double big = 0;

	wt_json_object_begin(j);
	wt_json_key(j, "id");
	wt_json_uint(j, in->frame_id);
	wt_json_key(j, "state");
	wt_json_string(j, wt_state_name(in->state));
	wt_json_key(j, "latency_us");
	wt_json_double_prec(j, in->latency_us, 4);
	wt_json_key(j, "invalid");
	wt_json_uint(j, in->n_invalid);
	wt_json_key(j, "clipped");
	wt_json_uint(j, in->n_clipped);
	wt_json_key(j, "flags");
	wt_json_uint(j, in->flags);
	wt_json_key(j, "rms_px");
	wt_json_double_prec(j, in->rms_px, 4);
	wt_json_key(j, "rms_nm");
	wt_json_double_prec(j, in->rms_nm, 4);
	wt_json_key(j, "strehl");
	wt_json_double_prec(j, in->strehl, 4);
	wt_json_key(j, "at_limit");
	wt_json_int(j, in->n_at_limit);
	if (!a->arrays) {
		wt_json_object_end(j);
		return;
	}
	wt_json_key(j, "sx");
	wt_json_float_array(j, in->slopes, n, 3);
	wt_json_key(j, "sy");
	wt_json_float_array(j, in->slopes + n, n, 3);
	wt_json_key(j, "flux");
	wt_json_float_array(j, in->flux, n, 4);
	wt_json_key(j, "valid");
	bits_json(j, in->valid, n);
	wt_json_key(j, "cmd");
	wt_json_float_array(j, in->command, (size_t)in->actuators->n_valid, 3);
	wt_json_key(j, "limit");
	bits_json(j, in->at_limit, (size_t)in->actuators->n_valid);
	wt_json_key(j, "map");
	if (wt_draw_scene_map(a->v->scene, VIEW_MAP, true, a->map, &big) < 0) {
		wt_json_null(j);
	} else {
		/* 255 levels of the largest |value| inside the pupil: as
		 * fine as the 256-entry colour map. */
		wt_json_object_begin(j);
		wt_json_key(j, "max_nm");
		wt_json_double_prec(j, big, 4);
		wt_json_key(j, "q");
		wt_json_array_begin(j);
		for (int k = 0; k < VIEW_MAP * VIEW_MAP; k++) {
			double q = big > 0 ? a->map[k] / big * 127 : 0;

			wt_json_int(j, lround(fmax(-127, fmin(127, q))));
		}
		wt_json_array_end(j);
		wt_json_object_end(j);
	}
	wt_json_object_end(j);
}

/*
 * The newest sensor image for the page: 8 bits of a full scale that is a
 * "nice" number of counts at or above its largest value (the page's colour
 * bar), as base64, about 22 KB for 128 x 128.
 */
static void image_json(wt_json *j, const struct tick_arg *a)
{
	const wt_draw_info *in = wt_draw_scene_info(a->v->scene);
	size_t n = (size_t)in->image_w * (size_t)in->image_h;
	double top = wt_draw_nice_ceil(in->image_max > 0 ? in->image_max : 1);

	for (size_t k = 0; k < n; k++) {
		a->img8[k] =
			(uint8_t)lround(fmin(255, in->image[k] * 255.0 / top));
	}
	wt_draw_base64(a->img8, n, a->img64);
	wt_json_object_begin(j);
	wt_json_key(j, "frame");
	wt_json_uint(j, in->image_frame);
	wt_json_key(j, "w");
	wt_json_int(j, in->image_w);
	wt_json_key(j, "h");
	wt_json_int(j, in->image_h);
	wt_json_key(j, "bin");
	wt_json_int(j, in->image_bin);
	wt_json_key(j, "sensor");
	wt_json_array_begin(j);
	wt_json_int(j, in->sensor_w);
	wt_json_int(j, in->sensor_h);
	wt_json_array_end(j);
	wt_json_key(j, "max");
	wt_json_double(j, in->image_max);
	wt_json_key(j, "full_scale");
	wt_json_double(j, top);
	wt_json_key(j, "b64");
	wt_json_string(j, a->img64);
	wt_json_object_end(j);
}

static void latency_json(wt_json *j, const wt_draw_info *in)
{
	wt_json_object_begin(j);
	wt_json_key(j, "n");
	wt_json_int(j, in->lat_n);
	wt_json_key(j, "median");
	wt_json_double_prec(j, in->lat_median_us, 4);
	wt_json_key(j, "p99");
	wt_json_double_prec(j, in->lat_p99_us, 4);
	wt_json_key(j, "max");
	wt_json_double_prec(j, in->lat_max_us, 4);
	wt_json_key(j, "counts");
	wt_json_array_begin(j);
	for (int k = 0; k < WT_DRAW_LAT_BINS; k++) {
		wt_json_uint(j, in->lat_counts[k]);
	}
	wt_json_array_end(j);
	wt_json_object_end(j);
}

static void tick_json(wt_json *j, const void *arg)
{
	const struct tick_arg *a = arg;
	struct view *v = a->v;
	const wt_draw_info *in = wt_draw_scene_info(v->scene);
	const wt_draw_point *p = in->n_hist ? &in->hist[in->n_hist - 1] : NULL;

	wt_json_object_begin(j);
	wt_json_key(j, "seq");
	wt_json_uint(j, v->tick_seq + 1);
	wt_json_key(j, "t");
	wt_json_double_prec(j, a->t_s, 7);
	wt_json_key(j, "status_age_s");
	wt_json_double_prec(j, a->status_age_s, 3);
	wt_json_key(j, "status");
	if (a->status) {
		raw_one_line(j, a->status);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "frame");
	if (in->have_frame) {
		frame_json(j, a);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "truth");
	if (in->have_truth) {
		wt_json_object_begin(j);
		wt_json_key(j, "frame");
		wt_json_uint(j, in->truth_frame);
		wt_json_key(j, "rms_nm");
		wt_json_double_prec(j, in->truth_rms_nm, 4);
		wt_json_key(j, "strehl");
		wt_json_double_prec(j, in->truth_strehl, 4);
		wt_json_object_end(j);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "hist_n");
	wt_json_int(j, in->n_hist);
	wt_json_key(j, "hist");
	if (p) {
		wt_json_array_begin(j);
		wt_json_double_prec(j, p->t_s, 7);
		wt_json_double_prec(j, p->rms_nm, 4);
		wt_json_double_prec(j, p->strehl, 4);
		wt_json_double_prec(j, p->truth_rms_nm, 4);
		wt_json_double_prec(j, p->truth_strehl, 4);
		wt_json_array_end(j);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "image");
	if (a->image) {
		image_json(j, a);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "latency");
	latency_json(j, in);
	wt_json_key(j, "calib_seq");
	wt_json_uint(j, v->calib_seq);
	wt_json_key(j, "view");
	wt_json_object_begin(j);
	wt_json_key(j, "records");
	wt_json_uint(j, in->records);
	wt_json_key(j, "bad_records");
	wt_json_uint(j, in->bad_records);
	wt_json_key(j, "streams");
	wt_json_int(j, v->streams);
	wt_json_key(j, "requests");
	wt_json_uint(j, v->forwarded_requests);
	wt_json_key(j, "refused_requests");
	wt_json_uint(j, v->refused_requests);
	wt_json_object_end(j);
	wt_json_object_end(j);
}

/* --- subscriptions
 * ------------------------------------------------------------ */

struct feed {
	struct view *v;
	void *sub, *truth, *req;
	uint64_t req_deadline, req_next;
	bool want_status;
	zmq_msg_t msg;
	uint8_t *frame; /* newest frame record */
	size_t frame_len, frame_cap;
	bool frame_new;
	uint8_t *image; /* newest image record, WT_IMAGE_BYTES_MAX */
	size_t image_len;
	bool image_new;
	struct view_text status; /* newest status text */
	bool status_new;
	uint64_t status_ns; /* when it came, 0: never */
	uint64_t ticks;
};

static void *sub_socket(void *ctx, const char *ep, const char *const *topics,
			const struct view *keys)
{
	void *s = zmq_socket(ctx, ZMQ_SUB);
	int hwm = SUB_HWM, linger = 0;
	wt_error err;

	if (!s) {
		return NULL;
	}
	if (keys && wt_curve_client_files(s, ep, keys->server_key_file,
					  keys->client_key_prefix, &err) < 0) {
		fprintf(stderr, "wavetrim-view: %s\n", err.msg);
		zmq_close(s);
		return NULL;
	}
	zmq_setsockopt(s, ZMQ_RCVHWM, &hwm, sizeof(hwm));
	zmq_setsockopt(s, ZMQ_LINGER, &linger, sizeof(linger));
	for (; *topics; topics++) {
		zmq_setsockopt(s, ZMQ_SUBSCRIBE, *topics, strlen(*topics));
	}
	if (zmq_connect(s, ep) != 0) {
		fprintf(stderr, "wavetrim-view: %s: %s\n", ep,
			zmq_strerror(zmq_errno()));
		zmq_close(s);
		return NULL;
	}
	return s;
}

static bool starts(const void *data, size_t len, const char *topic)
{
	size_t n = strlen(topic);

	return len >= n && memcmp(data, topic, n) == 0;
}

static void take_event(struct feed *f, const char *body, size_t len)
{
	struct view *v = f->v;
	struct view_text *slot;

	pthread_mutex_lock(&v->lock);
	wt_draw_scene_event(v->scene, body, len);
	slot = &v->events[v->event_seq % VIEW_EVENTS];
	if (view_text_set(slot, body, len) == 0) {
		for (size_t k = 0; k < slot->len; k++) {
			if (slot->buf[k] == '\n' || slot->buf[k] == '\r') {
				slot->buf[k] = ' ';
			}
		}
		v->event_seq++;
		pthread_cond_broadcast(&v->cond);
	}
	pthread_mutex_unlock(&v->lock);
	/* These change the calibration: ask for its singular values. */
	if (strstr(body, "\"event\":\"calibration\"") ||
	    strstr(body, "\"event\":\"matrix_installed\"") ||
	    strstr(body, "\"event\":\"loaded\"")) {
		f->want_status = true;
	}
}

static void drain_telemetry(struct feed *f)
{
	for (int k = 0; k < 1000; k++) {
		const char *d;
		size_t len;

		if (zmq_msg_recv(&f->msg, f->sub, ZMQ_DONTWAIT) < 0) {
			return;
		}
		d = zmq_msg_data(&f->msg);
		len = zmq_msg_size(&f->msg);
		if (len > MSG_MAX) {
			continue;
		}
		if (starts(d, len, WT_FRAME_TOPIC)) {
			size_t n = len - strlen(WT_FRAME_TOPIC);

			if (n > f->frame_cap) {
				uint8_t *p = realloc(f->frame, n);

				if (!p) {
					continue;
				}
				f->frame = p;
				f->frame_cap = n;
			}
			memcpy(f->frame, d + strlen(WT_FRAME_TOPIC), n);
			f->frame_len = n;
			f->frame_new = true;
			/* Every record counts in the latency histogram, also
			 * those a tick never draws. */
			pthread_mutex_lock(&f->v->lock);
			wt_draw_scene_timing(f->v->scene, f->frame, n);
			pthread_mutex_unlock(&f->v->lock);
		} else if (starts(d, len, WT_IMAGE_TOPIC)) {
			size_t n = len - strlen(WT_IMAGE_TOPIC);

			if (n <= WT_IMAGE_BYTES_MAX) {
				memcpy(f->image, d + strlen(WT_IMAGE_TOPIC), n);
				f->image_len = n;
				f->image_new = true;
			}
		} else if (starts(d, len, "status ")) {
			if (view_text_set(&f->status, d + 7, len - 7) == 0) {
				f->status_new = true;
				f->status_ns = wt_clock_ns();
			}
		} else if (starts(d, len, "event ")) {
			take_event(f, d + 6, len - 6);
		}
	}
}

static uint64_t rd64(const uint8_t *p)
{
	uint64_t v = 0;

	for (int k = 7; k >= 0; k--) {
		v = v << 8 | p[k];
	}
	return v;
}

static double rdf64(const uint8_t *p)
{
	uint64_t u = rd64(p);
	double d;

	memcpy(&d, &u, sizeof(d));
	return d;
}

/* The simulator's truth (sim/sim_driver.h): "truth", version 1 (95 bytes)
 * or 2 (207 bytes, the same first 95 then Zernike coefficients); only the
 * newest is kept. */
static void drain_truth(struct feed *f)
{
	for (int k = 0; k < 100000; k++) {
		const uint8_t *d;

		if (zmq_msg_recv(&f->msg, f->truth, ZMQ_DONTWAIT) < 0) {
			return;
		}
		d = zmq_msg_data(&f->msg);
		size_t len = zmq_msg_size(&f->msg);
		unsigned ver;

		if (len < 95 || memcmp(d, "truth", 5) != 0) {
			continue;
		}
		ver = (unsigned)(d[5] | d[6] << 8);
		if (!(ver == 1 && len == 95) && !(ver == 2 && len == 207)) {
			continue;
		}
		pthread_mutex_lock(&f->v->lock);
		wt_draw_scene_truth(f->v->scene, rd64(d + 7), rdf64(d + 31),
				    rdf64(d + 47));
		pthread_mutex_unlock(&f->v->lock);
	}
}

static void close_req(struct feed *f)
{
	if (f->req) {
		zmq_close(f->req);
		f->req = NULL;
	}
}

/* A `status` request for what telemetry leaves out: the singular values. */
static void poll_status_request(struct feed *f, bool readable)
{
	struct view *v = f->v;
	uint64_t now = wt_clock_ns();

	if (f->req && readable) {
		if (zmq_msg_recv(&f->msg, f->req, ZMQ_DONTWAIT) >= 0) {
			pthread_mutex_lock(&v->lock);
			if (wt_draw_scene_status(
				    v->scene, zmq_msg_data(&f->msg),
				    zmq_msg_size(&f->msg), NULL) == 0) {
				v->calib_seq++; /* the page fetches it again */
			}
			pthread_mutex_unlock(&v->lock);
			close_req(f);
		}
	}
	if (f->req && now > f->req_deadline) {
		close_req(f); /* the daemon is away; try again later */
	}
	if (!f->req && (f->want_status || now >= f->req_next)) {
		int linger = 0;

		f->req = zmq_socket(v->zctx, ZMQ_REQ);
		if (!f->req) {
			return;
		}
		zmq_setsockopt(f->req, ZMQ_LINGER, &linger, sizeof(linger));
		if (wt_curve_client_files(f->req, v->control_ep,
					  v->server_key_file,
					  v->client_key_prefix, NULL) < 0 ||
		    zmq_connect(f->req, v->control_ep) != 0 ||
		    zmq_send(f->req, "status", 6, ZMQ_DONTWAIT) < 0) {
			close_req(f);
		}
		f->req_deadline = now + REQ_TIMEOUT_NS;
		f->req_next = now + REQ_PERIOD_NS;
		f->want_status = false;
	}
}

static void tick(struct feed *f, uint64_t start_ns, struct tick_arg *a)
{
	struct view *v = f->v;
	const wt_draw_info *in;
	size_t values;
	uint64_t now = wt_clock_ns();
	int every;

	pthread_mutex_lock(&v->lock);
	in = wt_draw_scene_info(v->scene);
	if (f->frame_new) {
		wt_draw_scene_frame(v->scene, f->frame, f->frame_len, NULL);
		f->frame_new = false;
	}
	if (f->status_new) {
		wt_draw_scene_status(v->scene, f->status.buf, f->status.len,
				     NULL);
		f->status_new = false;
	}
	a->image = false;
	if (f->image_new) {
		a->image = wt_draw_scene_image(v->scene, f->image, f->image_len,
					       NULL) == 0;
		f->image_new = false;
	}
	a->t_s = (double)(now - start_ns) / 1e9;
	wt_draw_scene_sample(v->scene, a->t_s);
	a->v = v;
	a->status = f->status.len ? f->status.buf : NULL;
	a->status_age_s =
		f->status_ns ? (double)(now - f->status_ns) / 1e9 : (double)NAN;
	/* Bounded bandwidth: big geometries send their arrays less often. */
	values = 3 * (size_t)in->lenslets->n_valid +
		 (size_t)in->actuators->n_valid + VIEW_MAP * VIEW_MAP;
	every = 1 + (int)(values / TICK_VALUES);
	a->arrays = f->ticks % (uint64_t)every == 0;
	f->ticks++;
	if (view_text_build(&v->tick,
			    16384 + 12 * values + f->status.len +
				    (a->image ? 4 * WT_IMAGE_BYTES_MAX / 5 : 0),
			    tick_json, a) == 0) {
		v->tick_seq++;
		pthread_cond_broadcast(&v->cond);
	}
	pthread_mutex_unlock(&v->lock);
}

static int run(struct view *v, bool no_truth)
{
	static const char *const topics[] = {
		"status ", "event ", WT_FRAME_TOPIC, WT_IMAGE_TOPIC, NULL};
	static const char *const truth_topics[] = {"truth", NULL};
	struct feed f = {.v = v};
	struct tick_arg *a = calloc(1, sizeof(*a));
	uint64_t start = wt_clock_ns(), period, next;
	int rc = 0;

	if (a) {
		a->map = calloc(VIEW_MAP * VIEW_MAP, sizeof(*a->map));
		a->img8 = malloc(WT_IMAGE_SIDE_MAX * WT_IMAGE_SIDE_MAX);
		a->img64 = malloc(
			WT_IMAGE_SIDE_MAX * WT_IMAGE_SIDE_MAX / 3 * 4 + 8);
	}
	f.image = malloc(WT_IMAGE_BYTES_MAX);
	if (!a || !a->map || !a->img8 || !a->img64 || !f.image) {
		if (a) {
			free(a->map);
			free(a->img8);
			free(a->img64);
		}
		free(a);
		free(f.image);
		return -ENOMEM;
	}
	period = (uint64_t)(1e9 / v->rate_hz);
	next = start + period;
	zmq_msg_init(&f.msg);
	f.sub = sub_socket(v->zctx, v->telemetry_ep, topics, v);
	if (!f.sub) {
		rc = -EINVAL;
		goto out;
	}
	if (!no_truth && v->truth_ep[0]) {
		/* the simulator's stream: no daemon keys */
		f.truth = sub_socket(v->zctx, v->truth_ep, truth_topics, NULL);
	}
	f.want_status = true;
	while (!stop_flag) {
		zmq_pollitem_t it[3];
		uint64_t now = wt_clock_ns();
		long wait_ms = next > now ? (long)((next - now) / 1000000) : 0;
		int n = 0, i_truth = -1, i_req = -1;

		it[n++] =
			(zmq_pollitem_t){.socket = f.sub, .events = ZMQ_POLLIN};
		if (f.truth) {
			i_truth = n;
			it[n++] = (zmq_pollitem_t){.socket = f.truth,
						   .events = ZMQ_POLLIN};
		}
		if (f.req) {
			i_req = n;
			it[n++] = (zmq_pollitem_t){.socket = f.req,
						   .events = ZMQ_POLLIN};
		}
		if (zmq_poll(it, n, wait_ms) < 0) {
			if (zmq_errno() == EINTR) {
				continue;
			}
			rc = -zmq_errno();
			break;
		}
		if (it[0].revents & ZMQ_POLLIN) {
			drain_telemetry(&f);
		}
		if (i_truth >= 0 && (it[i_truth].revents & ZMQ_POLLIN)) {
			drain_truth(&f);
		}
		poll_status_request(
			&f, i_req >= 0 && (it[i_req].revents & ZMQ_POLLIN));
		now = wt_clock_ns();
		if (now >= next) {
			tick(&f, start, a);
			next += period;
			/* Late ticks are made up at once (the rate holds on
			 * average); after a long stall start afresh. */
			if (now > next + WT_NS_PER_S) {
				next = now + period;
			}
		}
	}
out:
	close_req(&f);
	if (f.sub) {
		zmq_close(f.sub);
	}
	if (f.truth) {
		zmq_close(f.truth);
	}
	zmq_msg_close(&f.msg);
	free(f.frame);
	free(f.image);
	view_text_free(&f.status);
	free(a->map);
	free(a->img8);
	free(a->img64);
	free(a);
	return rc;
}

/* --- main ----------------------------------------------------------------- */

int main(int argc, char **argv)
{
	static const struct option opts[] = {
		{"config", required_argument, NULL, 'c'},
		{"listen", required_argument, NULL, 'l'},
		{"allow-remote", no_argument, NULL, 'A'},
		{"rate", required_argument, NULL, 'r'},
		{"www", required_argument, NULL, 'W'},
		{"no-truth", no_argument, NULL, 'T'},
		{"token-file", required_argument, NULL, 'k'},
		{"server-key", required_argument, NULL, 'S'},
		{"client-key", required_argument, NULL, 'K'},
		{"help", no_argument, NULL, 'h'},
		{NULL, 0, NULL, 0},
	};
	struct view v = {.rate_hz = 10, .stop = &stop_flag};
	const char *listen = "127.0.0.1:8080";
	struct MHD_Daemon *httpd = NULL;
	struct setup_arg sa;
	wt_config *cfg = NULL;
	wt_error err = {0};
	bool loopback = false, no_truth = false;
	const char *token_file = NULL;
	int c, rc = 2;

	while ((c = getopt_long(argc, argv, "c:l:r:h", opts, NULL)) != -1) {
		switch (c) {
		case 'c':
			v.config_path = optarg;
			break;
		case 'l':
			listen = optarg;
			break;
		case 'A':
			v.allow_remote = true;
			break;
		case 'r':
			v.rate_hz = strtod(optarg, NULL);
			if (!(v.rate_hz >= 1 && v.rate_hz <= 30)) {
				fprintf(stderr, "wavetrim-view: --rate: 1 to "
						"30 per second\n");
				return 2;
			}
			break;
		case 'W':
			v.www_dir = optarg;
			break;
		case 'T':
			no_truth = true;
			break;
		case 'k':
			token_file = optarg;
			break;
		case 'S':
			v.server_key_file = optarg;
			break;
		case 'K':
			v.client_key_prefix = optarg;
			break;
		case 'h':
			usage(stdout);
			return 0;
		default:
			usage(stderr);
			return 2;
		}
	}
	if (!v.config_path || optind != argc) {
		usage(stderr);
		return 2;
	}
	if (parse_listen(listen, v.listen_host, sizeof(v.listen_host), &v.port,
			 &loopback) < 0) {
		fprintf(stderr,
			"wavetrim-view: --listen %s: want HOST:PORT with a "
			"numeric address, e.g. 127.0.0.1:8080 or [::1]:8080\n",
			listen);
		return 2;
	}
	if (!loopback && (!v.allow_remote || !token_file)) {
		fprintf(stderr,
			"wavetrim-view: %s is not a loopback address: serving "
			"other hosts needs --allow-remote and --token-file "
			"FILE (an access token every request must show)\n",
			v.listen_host);
		return 2;
	}
	if (token_file &&
	    wt_secret_read(token_file, v.token, sizeof(v.token), &err) < 0) {
		fprintf(stderr, "wavetrim-view: --token-file %s\n", err.msg);
		return 2;
	}
	/* Key files are read now (an inproc endpoint uses no CURVE, so no
	 * socket is needed), not at the first connection. */
	if (wt_curve_client_files(NULL, "inproc://check", v.server_key_file,
				  v.client_key_prefix, &err) < 0) {
		fprintf(stderr, "wavetrim-view: %s\n", err.msg);
		return 2;
	}
	/* One BLAS thread: the fits are small, and OpenBLAS threads spin
	 * against everything else on a 2-core machine. */
	openblas_set_num_threads(1);
	if (wt_config_create(&cfg, &err) < 0 ||
	    wt_config_load(cfg, v.config_path, &err) < 0) {
		fprintf(stderr, "wavetrim-view: %s\n", err.msg);
		goto out;
	}
	snprintf(v.control_ep, sizeof(v.control_ep), "%s",
		 wt_config_string(cfg, WT_OPT_DAEMON_CONTROL));
	snprintf(v.telemetry_ep, sizeof(v.telemetry_ep), "%s",
		 wt_config_string(cfg, WT_OPT_DAEMON_TELEMETRY));
	if (!no_truth) {
		snprintf(v.truth_ep, sizeof(v.truth_ep), "%s",
			 wt_config_string(cfg, WT_OPT_SIM_TRUTH));
	}
	if (wt_draw_scene_create(cfg, &v.scene, &err) < 0) {
		fprintf(stderr, "wavetrim-view: %s\n", err.msg);
		goto out;
	}
	sa = (struct setup_arg){.v = &v, .cfg = cfg};
	if (view_text_build(&v.setup, 65536, setup_json, &sa) < 0) {
		fprintf(stderr, "wavetrim-view: out of memory\n");
		goto out;
	}
	pthread_mutex_init(&v.lock, NULL);
	pthread_cond_init(&v.cond, NULL);
	v.zctx = zmq_ctx_new();
	if (!v.zctx) {
		fprintf(stderr, "wavetrim-view: no ZeroMQ context\n");
		goto out_sync;
	}
	signal(SIGINT, on_signal);
	signal(SIGTERM, on_signal);
	signal(SIGPIPE, SIG_IGN);
	if (view_http_start(&v, &httpd) < 0) {
		goto out_zmq;
	}
	printf("wavetrim-view: http://%s%s%s:%d/ (telemetry %s)\n",
	       strchr(v.listen_host, ':') ? "[" : "", v.listen_host,
	       strchr(v.listen_host, ':') ? "]" : "", v.port, v.telemetry_ep);
	fflush(stdout);
	rc = run(&v, no_truth) < 0 ? 1 : 0;
	stop_flag = 1; /* also when run() failed: the streams end */
	pthread_mutex_lock(&v.lock);
	pthread_cond_broadcast(&v.cond);
	pthread_mutex_unlock(&v.lock);
	view_http_stop(httpd);
out_zmq:
	zmq_ctx_term(v.zctx);
out_sync:
	pthread_cond_destroy(&v.cond);
	pthread_mutex_destroy(&v.lock);
out:
	for (int k = 0; k < VIEW_EVENTS; k++) {
		view_text_free(&v.events[k]);
	}
	view_text_free(&v.tick);
	view_text_free(&v.setup);
	wt_draw_scene_destroy(v.scene);
	wt_config_destroy(cfg);
	return rc;
}
