/* auth.h: CURVE key files, the allowed-clients directory and the ZAP
 * decision (RFC 27) for the daemon's CURVE servers.  No sockets here: bus.c
 * carries the ZAP frames, this module reads them and writes the reply.
 *
 * Key files are text, one "name = value" per line, '#' comments:
 *     public = <40 Z85 characters>       (NAME.pub, and in NAME.key)
 *     secret = <40 Z85 characters>       (NAME.key only)
 * A file with a secret must not be readable by group or others (mode &
 * 077 == 0), and its public line must be the public key of its secret.
 * Errors go to err as "FILE:LINE: what is wrong" (or "FILE: ..."). */
#ifndef QW_AUTH_H
#define QW_AUTH_H

#include <stddef.h>

#include "bus.h"

#define QW_AUTH_Z85_LEN 40        /* Z85 characters of a 32-byte key */
#define QW_AUTH_NAME_MAX 64       /* bytes of a key's name (file stem) */
#define QW_AUTH_FILE_MAX 4096     /* bytes: a key file is ~150 */
#define QW_AUTH_PUB_SUFFIX ".pub" /* allowed-clients entries end so */
#define QW_AUTH_MAX_KEYS 4096     /* entries in the allowed directory */
#define QW_AUTH_ERR_MAX 1280      /* bytes of an error: a path and more */

struct qw_auth_key {
	unsigned char pub[QW_BUS_KEY_BYTES];
	unsigned char sec[QW_BUS_KEY_BYTES];
	int has_secret;                       /* sec is valid */
	char name[QW_AUTH_NAME_MAX];          /* file stem, for logs */
};

/* Z85 (RFC 32) of a 32-byte key: out gets QW_AUTH_Z85_LEN characters and
 * a NUL. */
void qw_auth_z85_encode(const unsigned char key[QW_BUS_KEY_BYTES],
			char out[QW_AUTH_Z85_LEN + 1]);
/* Decodes exactly QW_AUTH_Z85_LEN characters of s.  0 or QW_EFORMAT. */
int qw_auth_z85_decode(const char *s, size_t len,
		       unsigned char key[QW_BUS_KEY_BYTES]);

/* Parses key-file text (len bytes; name: the file, for messages).  The
 * public line is required; the secret is taken when present.  0 or
 * QW_EFORMAT with err. */
int qw_auth_key_parse(const char *text, size_t len, const char *name,
		      struct qw_auth_key *k, char *err, size_t errlen);
/* Reads the key file at path.  need_secret: the file must hold a secret,
 * its mode must keep group and others out, and the public key must match
 * the secret; else (a public file) a secret in it is refused, since public
 * files get copied around.  0 or QW_EFORMAT/QW_EIO with err. */
int qw_auth_key_load(const char *path, int need_secret,
		     struct qw_auth_key *k, char *err, size_t errlen);
/* Writes k as a key file (secret: with the secret, mode 0600; else mode
 * 0644), created anew unless force (then replaced atomically through a
 * temporary file).  0, or QW_EIO with err (an existing file without force
 * says so). */
int qw_auth_key_write(const char *path, const struct qw_auth_key *k,
		      int secret, int force, char *err, size_t errlen);
/* Wipes the secret. */
void qw_auth_key_clear(struct qw_auth_key *k);

/* The CURVE options of a client tool (ctl, tail, sim, record): the
 * server's public key from server_pub (a NAME.pub file) and the client's
 * own pair from key (a NAME.key file), or, key NULL, a pair made for this
 * session (let in only by a daemon without client_keys).  0 or an error
 * with err. */
int qw_auth_client(const char *key, const char *server_pub,
		   struct qw_bus_curve *c, char *err, size_t errlen);
/* The CURVE options of a tool's socket in either role: bound (bind = 1),
 * a CURVE server with the secret key file key (required; server_pub must
 * be NULL); connecting, a client as qw_auth_client.  A bound tool has no
 * allow-list: any client that knows its public key may connect.  0 or an
 * error with err. */
int qw_auth_endpoint(const char *key, const char *server_pub, int bind,
		     struct qw_bus_curve *c, char *err, size_t errlen);

/* The allowed clients: every NAME.pub in a directory. */
typedef struct qw_auth qw_auth;

/* A configuration's [security] keys, loaded and checked: what the daemon
 * applies to its sockets, and what `check` validates. */
struct qw_auth_setup {
	int on;                      /* server_key set */
	struct qw_bus_curve server;  /* bound sockets: CURVE servers */
	int has_client;              /* publisher_key set */
	struct qw_bus_curve client;  /* connecting inputs: CURVE clients */
	qw_auth *allowed;            /* client_keys; NULL: any client key */
};
struct qw_config;
/* Loads cfg's key files into *s (zeroed first): server_key (a secret,
 * mode 0600), publisher_key (a public key), client_keys (a directory of
 * .pub files).  client_keys or publisher_key without server_key is an
 * error.  0, or an error with "FILE: ..." in err; free *s either way. */
int qw_auth_setup_load(const struct qw_config *cfg, struct qw_auth_setup *s,
		       char *err, size_t errlen);
/* Wipes the secrets and frees the allow-list. */
void qw_auth_setup_free(struct qw_auth_setup *s);
/* Loads dir; an unreadable directory or any bad .pub file is an error
 * (a typo must not silently lock out, or let in, a client).  0 or
 * QW_EFORMAT/QW_EIO/QW_ENOMEM with err; *out NULL on error. */
int qw_auth_load(const char *dir, qw_auth **out, char *err, size_t errlen);
void qw_auth_free(qw_auth *a);
size_t qw_auth_count(const qw_auth *a);
/* The entry holding pub, or NULL.  a NULL: NULL. */
const struct qw_auth_key *qw_auth_find(const qw_auth *a,
				       const unsigned char *pub);

/* What one ZAP request asked and how it was answered. */
struct qw_auth_verdict {
	int allowed;                     /* 1: status 200 */
	char key[QW_AUTH_Z85_LEN + 1];   /* client key in Z85; "" if none */
	char address[QW_AUTH_NAME_MAX];  /* peer address from the request */
	const char *name;                /* allowed entry's name, or NULL */
	const char *why;                 /* reason when refused */
};
/* Answers the ZAP request req into rep (RFC 27: version, request id,
 * status code, status text, user id, metadata).  a NULL: any CURVE client
 * key is allowed; other mechanisms, malformed requests and keys missing
 * from a are refused.  rep is always a reply to send (a REP socket must
 * answer); QW_EFORMAT when req broke RFC 27 (rep says "500"), else 0. */
int qw_auth_zap(const qw_auth *a, const struct qw_bus_parts *req,
		struct qw_bus_parts *rep, struct qw_auth_verdict *v);

#endif
