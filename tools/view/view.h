/*
 * view.h - wavetrim-view: the live view's shared state.
 *
 * Threads: the main thread owns every ZeroMQ subscription (telemetry,
 * truth, the status requests that fetch the singular values) and builds a
 * "tick" of compact JSON rate_hz times a second.  libmicrohttpd runs one
 * thread per connection: each event stream waits on `cond` for the next
 * tick, a POST to /api/control opens a REQ socket of its own, and a
 * snapshot renders the scene.  `lock` guards the scene, the tick, the event
 * ring and the counters.
 */
#ifndef WT_VIEW_H
#define WT_VIEW_H

#include <pthread.h>
#include <signal.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "wt_config.h"
#include "wt_draw.h"
#include "wt_json.h"

/* Events kept for streams that fall behind (and for new ones). */
#define VIEW_EVENTS 32
/* Event streams served at once. */
#define VIEW_MAX_STREAMS 8
/* Side of the wavefront map sent to the page. */
#define VIEW_MAP 32

struct view_text {
	char *buf;
	size_t len, cap;
};

/* Build JSON with fn(j, arg) into t, growing the buffer until it fits. */
int view_text_build(struct view_text *t, size_t guess,
		    void (*fn)(wt_json *j, const void *arg), const void *arg);

struct view {
	/* Set before the HTTP server starts, read-only afterwards. */
	const char *config_path;
	char control_ep[256], telemetry_ep[256], truth_ep[256];
	void *zctx;
	bool allow_remote;
	/* --server-key and --client-key (NULL: no CURVE); --token-file's
	 * token, which every HTTP request must show when token[0] */
	const char *server_key_file, *client_key_prefix;
	char token[128];
	int port;
	char listen_host[128];
	const char *www_dir; /* NULL: the page built into the binary */
	double rate_hz;
	volatile sig_atomic_t *stop;
	struct view_text setup; /* GET /api/setup */

	pthread_mutex_t lock;
	pthread_cond_t cond;
	wt_draw_scene *scene;
	struct view_text tick; /* the newest tick's JSON */
	uint64_t tick_seq;
	struct view_text events[VIEW_EVENTS];
	uint64_t event_seq; /* events[(event_seq - 1) % VIEW_EVENTS] newest */
	uint64_t calib_seq; /* grows when the singular values change */
	int streams;
	uint64_t refused_requests, forwarded_requests;
};

/* Text buffer helpers (view_main.c). */
int view_text_set(struct view_text *t, const char *s, size_t n);
void view_text_free(struct view_text *t);

/* The HTTP side (view_http.c). */
struct MHD_Daemon;
int view_http_start(struct view *v, struct MHD_Daemon **out);
void view_http_stop(struct MHD_Daemon *d);

/*
 * Check a request line from the page: only "open", "close", "hold",
 * "set control.gain X" and "set control.leak X" (X a finite decimal
 * number) pass.  Writes the line to forward (canonical spacing) into out
 * and returns 0, or returns -EPERM with the reason in why.
 */
int view_filter_request(const char *line, size_t len, char *out, size_t out_len,
			char *why, size_t why_len);

/* The page's files (view_assets.c): the body of name, or NULL. */
const char *view_asset(const char *name, size_t *len, const char **mime);

#endif /* WT_VIEW_H */
