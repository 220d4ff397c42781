/* bus.h: the ZeroMQ sockets of the daemon and its tools.  bus.c is the only
 * file that includes zmq.h; everything above it sees opaque sockets, plain
 * buffers and enum qw_err codes.
 *
 * Conventions: functions return 0 when done, 1 when they could not proceed
 * without blocking (nothing to receive, send would block, interrupted by a
 * signal), or a negative enum qw_err (QW_EIO: a libzmq call failed;
 * qw_bus_strerror() says why).  Endpoints follow struct qw_endpoint:
 * bind = 1 binds, 0 connects. */
#ifndef QW_BUS_H
#define QW_BUS_H

#include <signal.h>
#include <stddef.h>
#include <stdint.h>

#include "config.h"

#define QW_BUS_TOPIC_MAX 256 /* bytes of frame 1 kept (topics, commands) */

#define QW_BUS_KEY_BYTES 32 /* a Curve25519 key in binary (RFC 26) */
#define QW_BUS_ZAP_ENDPOINT "inproc://zeromq.zap.01" /* RFC 27: ZAP */
#define QW_BUS_PARTS_MAX 8      /* frames kept by qw_bus_recv_parts; a ZAP
				   request for CURVE has 7 */
#define QW_BUS_PART_BYTES 256   /* bytes kept per frame: ZAP frames are
				   short strings and a 32-byte key */

typedef struct qw_bus qw_bus;           /* one libzmq context */
typedef struct qw_bus_sock qw_bus_sock; /* one socket and its endpoint */
typedef struct qw_bus_poller qw_bus_poller;

enum qw_bus_kind {
	QW_BUS_SUB = 0,  /* readings in, alerts in (tail) */
	QW_BUS_PUB = 1,  /* alerts and stats out */
	QW_BUS_REP = 2,  /* control server */
	QW_BUS_REQ = 3,  /* control client (ctl) */
	QW_BUS_XSUB = 4, /* relay frontend */
	QW_BUS_XPUB = 5  /* relay backend */
};

/* Socket options applied before bind/connect; zero fields take libzmq's
 * defaults (see qw_bus_opts_default). */
struct qw_bus_opts {
	int64_t max_msg;  /* ZMQ_MAXMSGSIZE, bytes; a peer sending more is
			     disconnected by libzmq; 0 = no limit */
	int sndhwm;       /* ZMQ_SNDHWM, messages; 0 = libzmq default */
	int rcvhwm;       /* ZMQ_RCVHWM, messages; 0 = libzmq default */
	int sndtimeo_ms;  /* ZMQ_SNDTIMEO; -1 blocks */
	int rcvtimeo_ms;  /* ZMQ_RCVTIMEO; -1 blocks */
	int linger_ms;    /* ZMQ_LINGER at close */
	int xpub_nodrop;  /* XPUB: ZMQ_XPUB_NODROP, a full subscriber makes
			     sends wait (or return 1) instead of dropping;
			     for lossless benchmarks, never the daemon */
	/* CURVE (RFC 26) for this socket; NULL = in the clear. */
	const struct qw_bus_curve *security;
};

/* CURVE keys of one socket.  A server (bound sockets of the daemon) has
 * its own key pair and asks the context's ZAP handler about each client;
 * a client has its own key pair (long-term or made for the session) and
 * must know the server's public key, so it cannot talk to an impostor. */
struct qw_bus_curve {
	int server;                                  /* 1 server, 0 client */
	unsigned char public_key[QW_BUS_KEY_BYTES];  /* own */
	unsigned char secret_key[QW_BUS_KEY_BYTES];  /* own */
	unsigned char server_key[QW_BUS_KEY_BYTES];  /* client: the server's
							public key */
};

/* max_msg 0, HWMs 0, timeouts -1, linger 0, no security. */
void qw_bus_opts_default(struct qw_bus_opts *o);

qw_bus *qw_bus_alloc(void);
/* Closes nothing: close every socket first.  NULL is a no-op. */
void qw_bus_free(qw_bus *bus);
/* The message of the last failing libzmq call (zmq_strerror). */
const char *qw_bus_strerror(void);

/* Parses a command-line endpoint: "@addr" binds, ">addr" connects, a bare
 * addr takes default_bind.  0 or QW_EINVAL (empty or too long). */
int qw_bus_endpoint_parse(const char *s, int default_bind,
			  struct qw_endpoint *ep);
/* Equal address and direction. */
int qw_bus_endpoint_equal(const struct qw_endpoint *a,
			  const struct qw_endpoint *b);

/* Opens a socket of kind (enum qw_bus_kind), applies o (NULL: defaults),
 * binds or connects to ep.  0 or QW_EIO/QW_ENOMEM/QW_EINVAL; *out NULL on
 * error.  The socket remembers ep (qw_bus_sock_endpoint). */
int qw_bus_open(qw_bus *bus, int kind, const struct qw_endpoint *ep,
		const struct qw_bus_opts *o, qw_bus_sock **out);
/* NULL is a no-op. */
void qw_bus_close(qw_bus_sock *s);
/* Binds or connects s to one more endpoint (a relay's frontend reaching
 * several daemons).  security, when not NULL, replaces the socket's CURVE
 * keys for this and later endpoints (libzmq reads them when a connection
 * starts, so each daemon can have its own server key); NULL keeps what
 * the socket has.  qw_bus_sock_endpoint still names the first endpoint.
 * 0 or QW_EIO/QW_EINVAL. */
int qw_bus_attach(qw_bus_sock *s, const struct qw_endpoint *ep,
		  const struct qw_bus_curve *security);

const struct qw_endpoint *qw_bus_sock_endpoint(const qw_bus_sock *s);
/* The address actually bound (resolves tcp port "*"); "" when unknown. */
int qw_bus_sock_last_endpoint(qw_bus_sock *s, char *buf, size_t cap);
/* SUB: start (on = 1) or stop (on = 0) receiving messages whose frame 1
 * begins with topic (libzmq matches by prefix). */
int qw_bus_subscribe(qw_bus_sock *s, const char *topic, int on);

/* A received message: frame 1 into head (NUL-terminated, truncated to
 * QW_BUS_TOPIC_MAX - 1 bytes), frame 2 into the caller's body buffer of
 * body_cap bytes, further frames discarded.  Lengths are the lengths on the
 * wire, so head_len >= QW_BUS_TOPIC_MAX or body_len > body_cap tell the
 * caller the frame was cut. */
struct qw_bus_msg {
	char head[QW_BUS_TOPIC_MAX];
	size_t head_len;          /* frame 1 bytes on the wire */
	unsigned char *body;      /* caller-owned, body_cap bytes */
	size_t body_cap;
	size_t body_len;          /* frame 2 bytes on the wire, 0 if absent */
	unsigned nframes;         /* frames in the message */
};

/* Receives one whole multipart message without blocking (dontwait = 1)
 * or with the socket's receive timeout.  0 received, 1 nothing there
 * (or interrupted), QW_EIO. */
int qw_bus_recv(qw_bus_sock *s, struct qw_bus_msg *m, int dontwait);
/* Receives one whole message and keeps only frame 1, in buf[0..cap);
 * *len is its length on the wire (> cap: cut).  For single-frame replies
 * larger than a topic (ctl).  0, 1 or QW_EIO as qw_bus_recv. */
int qw_bus_recv_frame(qw_bus_sock *s, void *buf, size_t cap, size_t *len,
		      int dontwait);
/* Sends head (and body when body != NULL) as one message.  With dontwait
 * a send that would block returns 1 and the message is dropped (the
 * caller counts it).  0, 1 or QW_EIO. */
int qw_bus_send(qw_bus_sock *s, const void *head, size_t head_len,
		const void *body, size_t body_len, int dontwait);

/* Several frames, each cut to QW_BUS_PART_BYTES (len: on the wire). */
struct qw_bus_parts {
	unsigned char data[QW_BUS_PARTS_MAX][QW_BUS_PART_BYTES];
	size_t len[QW_BUS_PARTS_MAX];  /* bytes on the wire */
	unsigned n;                    /* frames in the message, all counted */
};
/* Receives one whole message into p (frames past QW_BUS_PARTS_MAX are
 * counted in p->n and dropped).  0, 1 or QW_EIO as qw_bus_recv. */
int qw_bus_recv_parts(qw_bus_sock *s, struct qw_bus_parts *p, int dontwait);
/* Sends p->n frames (each len <= QW_BUS_PART_BYTES).  0, 1, QW_EIO or
 * QW_EINVAL. */
int qw_bus_send_parts(qw_bus_sock *s, const struct qw_bus_parts *p,
		      int dontwait);

/* CURVE support.  1 when libzmq was built with CURVE (libsodium). */
int qw_bus_has_curve(void);
/* A fresh key pair (binary).  0 or QW_EIO (no CURVE in libzmq). */
int qw_bus_curve_keypair(unsigned char pub[QW_BUS_KEY_BYTES],
			 unsigned char sec[QW_BUS_KEY_BYTES]);
/* The public key of a secret key.  0 or QW_EIO. */
int qw_bus_curve_public(const unsigned char sec[QW_BUS_KEY_BYTES],
			unsigned char pub[QW_BUS_KEY_BYTES]);

/* Polling: a fixed set of sockets, readable events only. */
qw_bus_poller *qw_bus_poller_alloc(size_t cap);
void qw_bus_poller_free(qw_bus_poller *p);
void qw_bus_poller_clear(qw_bus_poller *p);
/* Adds s; its index is the number of sockets added before.  QW_EINVAL when
 * full. */
int qw_bus_poller_add(qw_bus_poller *p, qw_bus_sock *s);
/* Waits up to timeout_ms (-1 forever) for any socket to be readable.  0
 * some are ready, 1 timeout or interrupted by a signal, QW_EIO. */
int qw_bus_poll(qw_bus_poller *p, long timeout_ms);
/* After qw_bus_poll: 1 when socket i is readable. */
int qw_bus_poller_ready(const qw_bus_poller *p, size_t i);
/* One plain file descriptor polled after the sockets (an MQTT
 * connection): fd < 0 = none; readable always, writable too when
 * want_write.  Kept across qw_bus_poller_clear; set it before each poll. */
void qw_bus_poller_set_fd(qw_bus_poller *p, int fd, int want_write);
/* After qw_bus_poll: the fd's readiness (0 and 0 when none). */
void qw_bus_poller_fd_ready(const qw_bus_poller *p, int *readable,
			    int *writable);

/* Forwards whole messages both ways between frontend and backend (as
 * zmq_proxy does) until *stop is set: it is looked at after every poll,
 * which a signal interrupts and which waits at most tick_ms, so a stop
 * set by a signal handler is seen at once or within tick_ms.  1 when
 * stopped (or the context ended), QW_EIO when a socket fails. */
int qw_bus_proxy(qw_bus_sock *frontend, qw_bus_sock *backend,
		 const volatile sig_atomic_t *stop, long tick_ms);

#endif
