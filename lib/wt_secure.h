/*
 * wt_secure.h - who may reach wavetrim's sockets: binding rules, CURVE keys,
 * allow-lists and the ZAP handler.
 *
 * Binding rules (wt_endpoint_check), applied by every program that binds or
 * connects a wavetrim socket:
 *   ipc://PATH     the folder holding PATH must be a folder owned by us with
 *                  no permission for group or others (mode 0700); a missing
 *                  folder is made so (and its missing parents too).  The
 *                  socket file is only as safe as its folder.  Abstract
 *                  names (ipc://@name) have no permissions and are refused.
 *                  Checked when binding; a connecting side trusts the
 *                  binder's folder.
 *   tcp://HOST:P   HOST must be a loopback address (127.0.0.0/8, ::1,
 *                  localhost) unless CURVE keys are configured for the
 *                  socket, binding and connecting alike.
 *   inproc://      always allowed (never leaves the process).
 *   anything else  only with CURVE keys.
 * CURVE is applied on every transport but ipc and inproc, whose safety is
 * the folder's (ipc) or the process's (inproc).
 *
 * Keys are ZeroMQ CURVE keys (RFC 26) written as Z85 text (RFC 32), 40
 * characters.  `wavetrim keygen PREFIX` writes PREFIX.key (the secret key,
 * mode 0600) and PREFIX.pub (the public key).  Key files and allow-lists
 * are text: one key per line, blank lines and lines starting with '#'
 * ignored, a key may be followed by blanks and a '#' comment.
 *
 * The ZAP handler (RFC 27, ZeroMQ's authentication protocol) answers on
 * inproc://zeromq.zap.01 of a context: a CURVE client whose public key is
 * on an allow-list is let in and its messages carry the key (Z85) as the
 * "User-Id" property (zmq_msg_gets); any other is refused.
 */
#ifndef WT_SECURE_H
#define WT_SECURE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "wt_error.h"
#include "wt_log.h"

/** Z85 text of a 32-byte key, terminator included. */
#define WT_KEY_TEXT 41

/** ZAP domain wavetrim's CURVE servers announce. */
#define WT_ZAP_DOMAIN "wavetrim"

/** A CURVE key pair as Z85 text. */
typedef struct wt_keypair {
	char public_key[WT_KEY_TEXT];
	char secret_key[WT_KEY_TEXT];
} wt_keypair;

/**
 * Make a new key pair and write PREFIX.key (secret, mode 0600) and
 * PREFIX.pub (public, mode 0644); neither may exist yet (keys are never
 * overwritten).  The pair is returned in *kp when not NULL.  -EEXIST,
 * -errno of the file system, -ENOTSUP when libzmq lacks CURVE.
 */
int wt_key_generate(const char *prefix, wt_keypair *kp, wt_error *err);

/**
 * Read a secret key file (PREFIX.key, or PREFIX to which ".key" is added)
 * into kp (the public key derived from it).  Refused: unreadable, not
 * exactly one key, not a valid Z85 key, readable or writable by group or
 * others.  Errors say "PATH: reason".
 */
int wt_key_read_secret(const char *path, wt_keypair *kp, wt_error *err);

/** Read a public key file (exactly one key) into key. */
int wt_key_read_public(const char *path, char key[WT_KEY_TEXT], wt_error *err);

/** Is text (up to its terminator) a valid Z85 CURVE key? */
bool wt_key_valid(const char *text);

/** Shortest access token wt_secret_read() takes. */
#define WT_SECRET_MIN 16

/**
 * Read an access token (e.g. wavetrim-view's --token-file): the first line
 * that is not blank nor a '#' comment, without surrounding blanks, at
 * least WT_SECRET_MIN and less than len characters, printable ASCII.  The
 * file must be private to its owner, as a secret key file.
 */
int wt_secret_read(const char *path, char *out, size_t len, wt_error *err);

/** a equals b, in a time that depends on their lengths only. */
bool wt_secret_equal(const char *a, const char *b);

/** An allow-list of public keys. */
typedef struct wt_keylist wt_keylist;

/**
 * Read an allow-list file (one key per line, comments as above).  An empty
 * list is refused ("PATH: no keys"); so is any line that is not a key
 * ("PATH:LINE: not a Z85 CURVE key").
 */
int wt_keylist_load(const char *path, wt_keylist **out, wt_error *err);

/** Does l (NULL: an empty list) hold the Z85 key? */
bool wt_keylist_has(const wt_keylist *l, const char *key);

/** Keys in l (0 for NULL). */
size_t wt_keylist_count(const wt_keylist *l);

void wt_keylist_destroy(wt_keylist *l);

/** Is endpoint's host a loopback address?  false for non-tcp endpoints. */
bool wt_endpoint_is_loopback(const char *endpoint);

/** Would a socket on endpoint use CURVE when keys are configured?  (Every
 * transport but ipc and inproc.) */
bool wt_endpoint_wants_curve(const char *endpoint);

/**
 * Apply the binding rules above to endpoint for the option named option
 * ("daemon.control"); bind says whether we bind (ipc folders are made and
 * checked then) and keys whether CURVE keys are configured for the socket.
 * Returns 0 or -EACCES/-EINVAL with "OPTION ENDPOINT: reason".
 */
int wt_endpoint_check(const char *option, const char *endpoint, bool bind,
		      bool keys, wt_error *err);

/** Make sock a CURVE server with our key pair, in wavetrim's ZAP domain. */
int wt_curve_server(void *sock, const wt_keypair *ours, wt_error *err);

/** Make sock a CURVE client of the server whose public key is given. */
int wt_curve_client(void *sock, const char *server_public,
		    const wt_keypair *ours, wt_error *err);

/**
 * For clients (CLI, view): read server_key_file (a public key) and
 * client_prefix (our secret key, PREFIX or PREFIX.key) and make sock a
 * CURVE client, when endpoint wants CURVE (see above); with both files
 * NULL, do nothing.  One of the two without the other is refused.
 */
int wt_curve_client_files(void *sock, const char *endpoint,
			  const char *server_key_file,
			  const char *client_prefix, wt_error *err);

/** A ZAP handler running in a thread of its own. */
typedef struct wt_zap wt_zap;

/**
 * Bind inproc://zeromq.zap.01 in zctx and answer every ZAP request from a
 * thread: CURVE clients whose key is on allowed or also (either may be
 * NULL) get 200 with the key as user id, everyone else 400.  Refusals are
 * logged (rate-limited) through log, which may be NULL.  Call before any
 * CURVE server socket of zctx binds.  The lists must outlive the handler.
 */
int wt_zap_start(void *zctx, const wt_keylist *allowed, const wt_keylist *also,
		 wt_log *log, wt_zap **out, wt_error *err);

/** Clients let in and refused so far. */
void wt_zap_counts(const wt_zap *z, uint64_t *accepted, uint64_t *refused);

/** Stop the thread and close its socket (before zmq_ctx_term). */
void wt_zap_stop(wt_zap *z);

#endif /* WT_SECURE_H */
