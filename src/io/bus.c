/* bus.c: the one file that talks to libzmq (see bus.h).
 *
 * Thin wrappers that keep libzmq's conventions (errno, int flags, void
 * sockets) out of the commands: open-and-bind in one call, multipart
 * receive into caller-owned buffers with the true frame lengths reported
 * (zmq_recv truncates and returns the wire length, so an oversize frame is
 * detected without an allocation of ours), non-blocking sends whose drops
 * the caller counts, a poller over a fixed socket set, and zmq_proxy.
 * CURVE (RFC 26, libzmq with libsodium): keys are applied per socket from
 * struct qw_bus_curve; client authentication is the ZAP handler's (RFC 27,
 * auth.c decides, the daemon services the socket), and multi-frame
 * qw_bus_recv_parts/qw_bus_send_parts carry its requests and replies.
 * The relay's proxy is a poll loop of our own rather than zmq_proxy, which
 * returns only on an error: a stop signal that came while it was not in
 * its poll (forwarding) was lost, and the relay went on forwarding.
 *
 * Workload: the daemon receives tens of thousands of frames a second (one
 * binary batch of 64 readings each at full rate); per message this file
 * does one zmq_recv per frame and no allocation. */
#include "bus.h"

#include <errno.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>

#include <zmq.h>

#include "quadwatch.h"

#define BUS_PROXY_BURST 256 /* messages forwarded one way per poll */

struct qw_bus {
	void *ctx;
};

struct qw_bus_sock {
	void *z;                /* the libzmq socket */
	int kind;               /* enum qw_bus_kind */
	struct qw_endpoint ep;  /* as opened */
};

struct qw_bus_poller {
	zmq_pollitem_t *items;  /* cap sockets, then the fd slot */
	size_t n, cap;
	zmq_pollitem_t fd;      /* fd.fd < 0: none */
};

/* Scratch for frames beyond frame 2: their content is not kept. */
#define BUS_DISCARD_BYTES 64

void qw_bus_opts_default(struct qw_bus_opts *o)
{
	memset(o, 0, sizeof *o);
	o->sndtimeo_ms = -1;
	o->rcvtimeo_ms = -1;
	o->linger_ms = 0;
}

qw_bus *qw_bus_alloc(void)
{
	qw_bus *bus = calloc(1, sizeof *bus);

	if (bus == NULL)
		return NULL;
	bus->ctx = zmq_ctx_new();
	if (bus->ctx == NULL) {
		free(bus);
		return NULL;
	}
	return bus;
}

void qw_bus_free(qw_bus *bus)
{
	if (bus == NULL)
		return;
	zmq_ctx_term(bus->ctx);
	free(bus);
}

const char *qw_bus_strerror(void)
{
	return zmq_strerror(zmq_errno());
}

int qw_bus_endpoint_parse(const char *s, int default_bind,
			  struct qw_endpoint *ep)
{
	size_t len;

	memset(ep, 0, sizeof *ep);
	ep->bind = default_bind;
	if (s[0] == '@' || s[0] == '>') {
		ep->bind = s[0] == '@';
		s++;
	}
	len = strlen(s);
	if (len == 0 || len >= sizeof ep->addr)
		return QW_ERROR(QW_EINVAL);
	memcpy(ep->addr, s, len + 1);
	return 0;
}

int qw_bus_endpoint_equal(const struct qw_endpoint *a,
			  const struct qw_endpoint *b)
{
	return a->bind == b->bind && strcmp(a->addr, b->addr) == 0;
}

static const int bus_types[] = {
	[QW_BUS_SUB] = ZMQ_SUB, [QW_BUS_PUB] = ZMQ_PUB,
	[QW_BUS_REP] = ZMQ_REP, [QW_BUS_REQ] = ZMQ_REQ,
	[QW_BUS_XSUB] = ZMQ_XSUB, [QW_BUS_XPUB] = ZMQ_XPUB,
};

static int bus_setint(void *z, int opt, int v)
{
	return zmq_setsockopt(z, opt, &v, sizeof v);
}

/* RFC 27: the domain our CURVE servers give their ZAP requests; the
 * daemon's handler serves this one context only. */
#define BUS_ZAP_DOMAIN "quadwatch"

/* CURVE on a socket, after its other options and before bind/connect
 * (libzmq reads the mechanism when a connection starts).  A server asks
 * the ZAP handler at QW_BUS_ZAP_ENDPOINT about every client key; its
 * caller binds that handler first, or libzmq lets every key in. */
static int bus_secure(void *z, const struct qw_bus_curve *c)
{
	if (c == NULL)
		return 0;
	if (!qw_bus_has_curve()) {
		errno = ENOTSUP;
		return QW_ERROR(QW_EIO);
	}
	if (c->server) {
		if (bus_setint(z, ZMQ_CURVE_SERVER, 1) ||
		    zmq_setsockopt(z, ZMQ_ZAP_DOMAIN, BUS_ZAP_DOMAIN,
				   strlen(BUS_ZAP_DOMAIN)) ||
		    zmq_setsockopt(z, ZMQ_CURVE_SECRETKEY, c->secret_key,
				   QW_BUS_KEY_BYTES))
			return QW_ERROR(QW_EIO);
		return 0;
	}
	if (zmq_setsockopt(z, ZMQ_CURVE_SERVERKEY, c->server_key,
			   QW_BUS_KEY_BYTES) ||
	    zmq_setsockopt(z, ZMQ_CURVE_PUBLICKEY, c->public_key,
			   QW_BUS_KEY_BYTES) ||
	    zmq_setsockopt(z, ZMQ_CURVE_SECRETKEY, c->secret_key,
			   QW_BUS_KEY_BYTES))
		return QW_ERROR(QW_EIO);
	return 0;
}

int qw_bus_has_curve(void)
{
	return zmq_has("curve") != 0;
}

/* libzmq hands keys out in Z85 (40 characters and a NUL). */
#define BUS_Z85_BYTES 41

int qw_bus_curve_keypair(unsigned char pub[QW_BUS_KEY_BYTES],
			 unsigned char sec[QW_BUS_KEY_BYTES])
{
	char zp[BUS_Z85_BYTES], zs[BUS_Z85_BYTES];
	int rc = 0;

	if (zmq_curve_keypair(zp, zs) != 0 ||
	    zmq_z85_decode(pub, zp) == NULL || zmq_z85_decode(sec, zs) == NULL)
		rc = QW_ERROR(QW_EIO);
	explicit_bzero(zs, sizeof zs);
	return rc;
}

int qw_bus_curve_public(const unsigned char sec[QW_BUS_KEY_BYTES],
			unsigned char pub[QW_BUS_KEY_BYTES])
{
	char zp[BUS_Z85_BYTES], zs[BUS_Z85_BYTES];
	int rc = 0;

	if (zmq_z85_encode(zs, sec, QW_BUS_KEY_BYTES) == NULL ||
	    zmq_curve_public(zp, zs) != 0 || zmq_z85_decode(pub, zp) == NULL)
		rc = QW_ERROR(QW_EIO);
	explicit_bzero(zs, sizeof zs);
	return rc;
}

#define BUS_SUB_SNDHWM 65536 /* subscription messages a SUB may queue: one
				per topic (group), beyond QW_CONFIG_MAX_GROUPS;
				libzmq's default of 1000 lost groups past the
				1000th */

static int bus_options(void *z, int kind, const struct qw_bus_opts *o)
{
	if (o->max_msg > 0 &&
	    zmq_setsockopt(z, ZMQ_MAXMSGSIZE, &o->max_msg, sizeof o->max_msg))
		return QW_ERROR(QW_EIO);
	if (o->sndhwm > 0 && bus_setint(z, ZMQ_SNDHWM, o->sndhwm))
		return QW_ERROR(QW_EIO);
	/* a SUB sends only its subscriptions; libzmq silently drops those
	 * past the send HWM while the connection is not up yet */
	if (kind == QW_BUS_SUB && o->sndhwm <= 0 &&
	    bus_setint(z, ZMQ_SNDHWM, BUS_SUB_SNDHWM))
		return QW_ERROR(QW_EIO);
	if (o->rcvhwm > 0 && bus_setint(z, ZMQ_RCVHWM, o->rcvhwm))
		return QW_ERROR(QW_EIO);
	if (kind == QW_BUS_XPUB && o->xpub_nodrop &&
	    bus_setint(z, ZMQ_XPUB_NODROP, 1))
		return QW_ERROR(QW_EIO);
	if (bus_setint(z, ZMQ_SNDTIMEO, o->sndtimeo_ms) ||
	    bus_setint(z, ZMQ_RCVTIMEO, o->rcvtimeo_ms) ||
	    bus_setint(z, ZMQ_LINGER, o->linger_ms))
		return QW_ERROR(QW_EIO);
	return bus_secure(z, o->security);
}

int qw_bus_open(qw_bus *bus, int kind, const struct qw_endpoint *ep,
		const struct qw_bus_opts *o, qw_bus_sock **out)
{
	struct qw_bus_opts def;
	qw_bus_sock *s;
	int rc;

	*out = NULL;
	if (kind < 0 || kind > QW_BUS_XPUB || ep->addr[0] == '\0')
		return QW_ERROR(QW_EINVAL);
	if (o == NULL) {
		qw_bus_opts_default(&def);
		o = &def;
	}
	s = calloc(1, sizeof *s);
	if (s == NULL)
		return QW_ERROR(QW_ENOMEM);
	s->kind = kind;
	s->ep = *ep;
	s->z = zmq_socket(bus->ctx, bus_types[kind]);
	if (s->z == NULL) {
		free(s);
		return QW_ERROR(QW_EIO);
	}
	rc = bus_options(s->z, kind, o);
	if (rc == 0 && (ep->bind ? zmq_bind(s->z, ep->addr)
				 : zmq_connect(s->z, ep->addr)) != 0)
		rc = QW_ERROR(QW_EIO);
	if (rc != 0) {
		int err = zmq_errno();

		zmq_close(s->z);
		free(s);
		errno = err; /* keep the cause for qw_bus_strerror */
		return rc;
	}
	*out = s;
	return 0;
}

int qw_bus_attach(qw_bus_sock *s, const struct qw_endpoint *ep,
		  const struct qw_bus_curve *security)
{
	if (ep->addr[0] == '\0')
		return QW_ERROR(QW_EINVAL);
	if (security != NULL && bus_secure(s->z, security) != 0)
		return QW_ERROR(QW_EIO);
	if ((ep->bind ? zmq_bind(s->z, ep->addr)
		      : zmq_connect(s->z, ep->addr)) != 0)
		return QW_ERROR(QW_EIO);
	return 0;
}

void qw_bus_close(qw_bus_sock *s)
{
	if (s == NULL)
		return;
	zmq_close(s->z);
	free(s);
}

const struct qw_endpoint *qw_bus_sock_endpoint(const qw_bus_sock *s)
{
	return &s->ep;
}

int qw_bus_sock_last_endpoint(qw_bus_sock *s, char *buf, size_t cap)
{
	size_t len = cap;

	if (cap == 0)
		return QW_ERROR(QW_EINVAL);
	buf[0] = '\0';
	if (zmq_getsockopt(s->z, ZMQ_LAST_ENDPOINT, buf, &len) != 0)
		return QW_ERROR(QW_EIO);
	buf[cap - 1] = '\0';
	return 0;
}

int qw_bus_subscribe(qw_bus_sock *s, const char *topic, int on)
{
	if (zmq_setsockopt(s->z, on ? ZMQ_SUBSCRIBE : ZMQ_UNSUBSCRIBE, topic,
			   strlen(topic)) != 0)
		return QW_ERROR(QW_EIO);
	return 0;
}

static int bus_more(void *z)
{
	int more = 0;
	size_t len = sizeof more;

	if (zmq_getsockopt(z, ZMQ_RCVMORE, &more, &len) != 0)
		return 0;
	return more;
}

/* Frame 1 with the caller's flags; 0, 1 (nothing/interrupted), QW_EIO. */
static int bus_recv_head(qw_bus_sock *s, struct qw_bus_msg *m, int flags)
{
	int n = zmq_recv(s->z, m->head, QW_BUS_TOPIC_MAX - 1, flags);

	if (n < 0) {
		if (zmq_errno() == EAGAIN || zmq_errno() == EINTR)
			return 1;
		return QW_ERROR(QW_EIO);
	}
	m->head_len = (size_t)n;
	m->head[m->head_len < QW_BUS_TOPIC_MAX ? m->head_len
					       : QW_BUS_TOPIC_MAX - 1] = '\0';
	m->nframes = 1;
	return 0;
}

int qw_bus_recv(qw_bus_sock *s, struct qw_bus_msg *m, int dontwait)
{
	unsigned char discard[BUS_DISCARD_BYTES];
	int rc, n;

	m->head_len = 0;
	m->body_len = 0;
	m->nframes = 0;
	rc = bus_recv_head(s, m, dontwait ? ZMQ_DONTWAIT : 0);
	if (rc != 0)
		return rc;
	/* The rest of a multipart message is already here (libzmq delivers
	 * messages atomically), so these receives never wait. */
	while (bus_more(s->z)) {
		if (m->nframes == 1)
			n = zmq_recv(s->z, m->body, m->body_cap, 0);
		else
			n = zmq_recv(s->z, discard, sizeof discard, 0);
		if (n < 0)
			return QW_ERROR(QW_EIO);
		if (m->nframes == 1)
			m->body_len = (size_t)n;
		m->nframes++;
	}
	return 0;
}

int qw_bus_recv_frame(qw_bus_sock *s, void *buf, size_t cap, size_t *len,
		      int dontwait)
{
	unsigned char discard[BUS_DISCARD_BYTES];
	int n = zmq_recv(s->z, buf, cap, dontwait ? ZMQ_DONTWAIT : 0);

	*len = 0;
	if (n < 0) {
		if (zmq_errno() == EAGAIN || zmq_errno() == EINTR)
			return 1;
		return QW_ERROR(QW_EIO);
	}
	*len = (size_t)n;
	while (bus_more(s->z))
		if (zmq_recv(s->z, discard, sizeof discard, 0) < 0)
			return QW_ERROR(QW_EIO);
	return 0;
}

int qw_bus_send(qw_bus_sock *s, const void *head, size_t head_len,
		const void *body, size_t body_len, int dontwait)
{
	int flags = dontwait ? ZMQ_DONTWAIT : 0;

	if (zmq_send(s->z, head, head_len,
		     flags | (body != NULL ? ZMQ_SNDMORE : 0)) < 0)
		goto fail;
	/* Frame 1 queued means the whole message will be: libzmq checks the
	 * high-water mark at the first frame only. */
	if (body != NULL && zmq_send(s->z, body, body_len, flags) < 0)
		goto fail;
	return 0;
fail:
	if (zmq_errno() == EAGAIN || zmq_errno() == EINTR)
		return 1;
	return QW_ERROR(QW_EIO);
}

int qw_bus_recv_parts(qw_bus_sock *s, struct qw_bus_parts *p, int dontwait)
{
	unsigned char discard[BUS_DISCARD_BYTES];
	int flags = dontwait ? ZMQ_DONTWAIT : 0, n;

	p->n = 0;
	do {
		if (p->n < QW_BUS_PARTS_MAX)
			n = zmq_recv(s->z, p->data[p->n], QW_BUS_PART_BYTES,
				     flags);
		else
			n = zmq_recv(s->z, discard, sizeof discard, flags);
		if (n < 0) {
			if (p->n == 0 && (zmq_errno() == EAGAIN ||
					  zmq_errno() == EINTR))
				return 1;
			return QW_ERROR(QW_EIO);
		}
		if (p->n < QW_BUS_PARTS_MAX)
			p->len[p->n] = (size_t)n;
		p->n++;
		flags = 0; /* the rest of the message is already here */
	} while (bus_more(s->z));
	return 0;
}

int qw_bus_send_parts(qw_bus_sock *s, const struct qw_bus_parts *p,
		      int dontwait)
{
	int flags = dontwait ? ZMQ_DONTWAIT : 0;
	unsigned i;

	if (p->n == 0 || p->n > QW_BUS_PARTS_MAX)
		return QW_ERROR(QW_EINVAL);
	for (i = 0; i < p->n; i++) {
		if (p->len[i] > QW_BUS_PART_BYTES)
			return QW_ERROR(QW_EINVAL);
		if (zmq_send(s->z, p->data[i], p->len[i],
			     flags | (i + 1 < p->n ? ZMQ_SNDMORE : 0)) < 0) {
			if (i == 0 && (zmq_errno() == EAGAIN ||
				       zmq_errno() == EINTR))
				return 1;
			return QW_ERROR(QW_EIO);
		}
	}
	return 0;
}

qw_bus_poller *qw_bus_poller_alloc(size_t cap)
{
	qw_bus_poller *p = calloc(1, sizeof *p);

	if (p == NULL)
		return NULL;
	p->items = calloc(cap + 1, sizeof *p->items);
	if (p->items == NULL) {
		free(p);
		return NULL;
	}
	p->cap = cap;
	p->fd.fd = -1;
	return p;
}

void qw_bus_poller_free(qw_bus_poller *p)
{
	if (p == NULL)
		return;
	free(p->items);
	free(p);
}

void qw_bus_poller_clear(qw_bus_poller *p)
{
	p->n = 0;
}

int qw_bus_poller_add(qw_bus_poller *p, qw_bus_sock *s)
{
	if (p->n >= p->cap)
		return QW_ERROR(QW_EINVAL);
	memset(&p->items[p->n], 0, sizeof p->items[p->n]);
	p->items[p->n].socket = s->z;
	p->items[p->n].events = ZMQ_POLLIN;
	p->n++;
	return 0;
}

int qw_bus_poll(qw_bus_poller *p, long timeout_ms)
{
	int n;

	p->fd.revents = 0;
	if (p->fd.fd >= 0)
		p->items[p->n] = p->fd; /* the slot after the sockets */
	n = zmq_poll(p->items, (int)p->n + (p->fd.fd >= 0), timeout_ms);
	if (n > 0 && p->fd.fd >= 0)
		p->fd.revents = p->items[p->n].revents;

	if (n < 0) {
		if (zmq_errno() == EINTR)
			return 1;
		return QW_ERROR(QW_EIO);
	}
	return n == 0 ? 1 : 0;
}

int qw_bus_poller_ready(const qw_bus_poller *p, size_t i)
{
	return i < p->n && (p->items[i].revents & ZMQ_POLLIN) != 0;
}

void qw_bus_poller_set_fd(qw_bus_poller *p, int fd, int want_write)
{
	memset(&p->fd, 0, sizeof p->fd);
	p->fd.fd = fd;
	p->fd.events = (short)(ZMQ_POLLIN | (want_write ? ZMQ_POLLOUT : 0));
}

void qw_bus_poller_fd_ready(const qw_bus_poller *p, int *readable,
			    int *writable)
{
	*readable = p->fd.fd >= 0 && (p->fd.revents & ZMQ_POLLIN) != 0;
	*writable = p->fd.fd >= 0 && (p->fd.revents & ZMQ_POLLOUT) != 0;
	if (p->fd.fd >= 0 && (p->fd.revents & ZMQ_POLLERR) != 0)
		*readable = 1; /* the read reports the error */
}

/* Moves the messages waiting on from to to, whole (every frame of one
 * before the next), at most BUS_PROXY_BURST of them: 0, or -1 with
 * zmq_errno set (EAGAIN only between messages means none left). */
static int bus_forward(void *from, void *to)
{
	zmq_msg_t m;
	int k, more, rc = 0;
	size_t len = sizeof more;

	if (zmq_msg_init(&m) != 0)
		return -1;
	for (k = 0; k < BUS_PROXY_BURST; k++) {
		if (zmq_msg_recv(&m, from, ZMQ_DONTWAIT) < 0) {
			if (zmq_errno() != EAGAIN)
				rc = -1;
			break;
		}
		do { /* the rest of the message is already here */
			if (zmq_getsockopt(from, ZMQ_RCVMORE, &more, &len) != 0
			    || zmq_msg_send(&m, to, more ? ZMQ_SNDMORE : 0) < 0
			    || (more && zmq_msg_recv(&m, from, 0) < 0)) {
				rc = -1;
				break;
			}
		} while (more);
		if (rc != 0)
			break;
	}
	zmq_msg_close(&m);
	return rc;
}

int qw_bus_proxy(qw_bus_sock *frontend, qw_bus_sock *backend,
		 const volatile sig_atomic_t *stop, long tick_ms)
{
	zmq_pollitem_t it[2];

	memset(it, 0, sizeof it);
	it[0].socket = frontend->z;
	it[0].events = ZMQ_POLLIN;
	it[1].socket = backend->z;
	it[1].events = ZMQ_POLLIN;
	while (!*stop) {
		int rc = zmq_poll(it, 2, tick_ms);

		if (rc >= 0 && (it[0].revents & ZMQ_POLLIN) != 0)
			rc = bus_forward(frontend->z, backend->z);
		if (rc >= 0 && (it[1].revents & ZMQ_POLLIN) != 0)
			rc = bus_forward(backend->z, frontend->z);
		if (rc < 0 && zmq_errno() == EINTR)
			continue; /* the flag says whether it was ours */
		if (rc < 0)
			return zmq_errno() == ETERM ? 1 : QW_ERROR(QW_EIO);
	}
	return 1;
}
