/* mqtt.c: the one file that talks to libmosquitto (see mqtt.h).
 *
 * The client runs in the caller's poll loop, not in a thread of the
 * library's: the daemon is single-threaded, and this way a message is
 * decoded straight out of the library's buffer during qw_mqtt_service
 * with no queue, no lock and no copy between threads.  The pieces:
 *  - connect: mosquitto_connect_async / mosquitto_reconnect_async start a
 *    non-blocking TCP connect (and TLS handshake), so an absent broker
 *    never stalls the ZeroMQ inputs; the host should be a numeric address
 *    or a name the resolver answers at once (getaddrinfo blocks);
 *  - service: mosquitto_loop_read while the socket is readable, one MQTT
 *    packet per call, up to MQTT_READ_MAX packets per wake-up so a busy
 *    broker cannot starve the rest of the loop (and while a call still
 *    delivers: TLS may hold a message poll cannot see); mosquitto_loop_write when
 *    the library has bytes queued; mosquitto_loop_misc for the keepalive;
 *  - back-off: after a failed attempt or a lost session the next attempt
 *    waits reconnect_min, doubling on each failure up to reconnect_max,
 *    and a session accepted by the broker resets it (exponential back-off
 *    as in RFC 8085 3.1.3 advice for retrying senders);
 *  - a session is up when the broker's CONNACK accepts it: then every
 *    input filter is subscribed with the configured QoS.  A CONNACK that
 *    refuses (bad user name or password, not authorised) counts as a
 *    refusal and as a failed attempt; the attempts go on, backing off, so
 *    a credentials fix at the broker takes effect without a restart.
 * Group names: a received topic is matched against each filter
 * (mosquitto_topic_matches_sub) and the level at the filter's '+' index
 * is the group.
 *
 * Workload: one connection; tens of thousands of messages a second at
 * most (one reading or one binary batch each); no allocation of ours per
 * message (the library allocates each packet it reads). */
#include "mqtt.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <mosquitto.h>

#include "log.h"
#include "quadwatch.h"

#define MQTT_READ_MAX 256      /* packets read per service call */
#define MQTT_IDLE_READS 2      /* reads in a row with no message that end
				  a service call's reading */
#define MQTT_CONNECT_TIMEOUT 10.0 /* s: an attempt with no CONNACK by then
				     is abandoned (a silent host) */
#define MQTT_SYSTEM_CA "/etc/ssl/certs" /* Debian's CA directory, used for
					   mqtts:// without ca_file */
#define MQTT_WHY_MAX 160       /* bytes: the last failure's text */

enum mqtt_state {
	MQTT_IDLE = 0,       /* no socket; next attempt at next_try */
	MQTT_CONNECTING = 1, /* socket open, waiting for the CONNACK */
	MQTT_UP = 2          /* session accepted */
};

struct qw_mqtt {
	struct mosquitto *mosq;
	struct qw_mqtt_conf c;     /* a copy: the config may be replaced */
	qw_mqtt_on_message cb;
	void *arg;
	int state;                 /* enum mqtt_state */
	int tried;                 /* an attempt was made (reconnect next) */
	int counted;               /* this attempt's failure is counted */
	double next_try;           /* monotonic s; 0 = at once */
	double attempt_at;         /* monotonic s the attempt began */
	double delay;              /* s: the next back-off */
	uint64_t secret_sig;       /* qw_mqtt_credentials_sig when made */
	uint64_t delivered;        /* messages in the current read */
	size_t subscribed;         /* filters the broker acknowledged in this
				      session */
	struct qw_mqtt_counts n;
	char why[MQTT_WHY_MAX];
};

static void mqtt_why(qw_mqtt *m, const char *what, const char *detail)
{
	snprintf(m->why, sizeof m->why, "%s%s%s", what,
		 detail != NULL ? ": " : "", detail != NULL ? detail : "");
}

/* The next attempt after a failure: now + delay, delay doubled. */
static void mqtt_backoff(qw_mqtt *m, double now)
{
	m->state = MQTT_IDLE;
	m->next_try = now + m->delay;
	m->delay *= 2; /* exponential back-off */
	if (m->delay > m->c.reconnect_max)
		m->delay = m->c.reconnect_max;
}

/* The attempt failed before a session: counted once. */
static void mqtt_attempt_failed(qw_mqtt *m)
{
	if (!m->counted)
		m->n.connect_failures++;
	m->counted = 1;
}

/* The session or attempt ended (detail: why): counted once, then the
 * back-off.  Idle already: nothing (the end was handled). */
static void mqtt_down(qw_mqtt *m, double now, const char *detail)
{
	if (m->state == MQTT_IDLE)
		return;
	if (m->state == MQTT_UP) {
		m->n.disconnects++;
		mqtt_why(m, "connection lost", detail);
	} else if (!m->counted) {
		mqtt_attempt_failed(m);
		mqtt_why(m, "connection failed", detail);
	}
	mqtt_backoff(m, now);
}

/* The text of a libmosquitto return code. */
static const char *mqtt_rc_text(int rc)
{
	return rc == MOSQ_ERR_ERRNO ? strerror(errno) : mosquitto_strerror(rc);
}

static void mqtt_on_connect(struct mosquitto *mosq, void *obj, int rc)
{
	qw_mqtt *m = obj;
	size_t i;

	if (rc != 0) {
		m->n.refused++;
		mqtt_attempt_failed(m);
		mqtt_why(m, "broker refused the connection",
			 mosquitto_connack_string(rc));
		return; /* the library closes the socket: on_disconnect */
	}
	m->state = MQTT_UP;
	m->subscribed = 0;
	m->n.connects++;
	m->delay = m->c.reconnect_min;
	for (i = 0; i < m->c.ninputs; i++) {
		int s = mosquitto_subscribe(mosq, NULL, m->c.inputs[i].topic,
					    m->c.qos);

		if (s != MOSQ_ERR_SUCCESS)
			mqtt_why(m, "subscribe", mosquitto_strerror(s));
	}
}

static void mqtt_on_subscribe(struct mosquitto *mosq, void *obj, int mid,
			      int qos_count, const int *granted_qos)
{
	qw_mqtt *m = obj;

	(void)mosq;
	(void)mid;
	/* 0x80 in granted_qos: the broker refused the filter (MQTT 3.1.1,
	 * 3.9.3); one filter per SUBSCRIBE here */
	if (qos_count == 1 && granted_qos[0] != 0x80)
		m->subscribed++;
	else
		mqtt_why(m, "subscribe", "refused by the broker");
}

static void mqtt_on_disconnect(struct mosquitto *mosq, void *obj, int rc)
{
	qw_mqtt *m = obj;

	(void)mosq;
	mqtt_down(m, qw_log_monotonic(), rc == 0 ? "closed"
		  : mosquitto_strerror(rc));
}

/* The level of topic at index level: [*at, *at + *len). */
static int mqtt_level(const char *topic, unsigned level, size_t *at,
		      size_t *len)
{
	const char *s = topic, *e;
	unsigned i;

	for (i = 0; i < level; i++) {
		s = strchr(s, '/');
		if (s == NULL)
			return -1;
		s++;
	}
	e = strchr(s, '/');
	*at = (size_t)(s - topic);
	*len = e != NULL ? (size_t)(e - s) : strlen(s);
	return 0;
}

static void mqtt_on_message(struct mosquitto *mosq, void *obj,
			    const struct mosquitto_message *msg)
{
	qw_mqtt *m = obj;
	size_t i, at = 0, len = 0;
	bool match;

	(void)mosq;
	m->n.received++;
	m->delivered++;
	for (i = 0; i < m->c.ninputs; i++) {
		match = false;
		if (mosquitto_topic_matches_sub(m->c.inputs[i].topic,
						msg->topic, &match) ==
		    MOSQ_ERR_SUCCESS && match &&
		    mqtt_level(msg->topic, m->c.inputs[i].level, &at, &len) ==
		    0)
			break;
	}
	if (i == m->c.ninputs)
		len = 0; /* no filter matched: no group */
	m->cb(m->arg, msg->topic + at, len, msg->payload,
	      msg->payloadlen > 0 ? (size_t)msg->payloadlen : 0);
}

/* FNV-1a 64 over user, a 0 byte, pass; never 0. */
static uint64_t mqtt_sig(const char *user, const char *pass)
{
	uint64_t h = 14695981039346656037ULL; /* FNV-1a 64 offset basis */
	const char *s;

	for (s = user; *s; s++)
		h = (h ^ (unsigned char)*s) * 1099511628211ULL; /* FNV prime */
	h *= 1099511628211ULL; /* the 0 byte */
	for (s = pass; *s; s++)
		h = (h ^ (unsigned char)*s) * 1099511628211ULL;
	return h | 1;
}

uint64_t qw_mqtt_credentials_sig(const char *path)
{
	char user[QW_CONFIG_SECRET_MAX], pass[QW_CONFIG_SECRET_MAX];
	uint64_t h = 0;

	if (path[0] != '\0' &&
	    qw_config_mqtt_credentials(path, user, sizeof user, pass,
				       sizeof pass, NULL, 0) == 0)
		h = mqtt_sig(user, pass);
	explicit_bzero(user, sizeof user);
	explicit_bzero(pass, sizeof pass);
	return h;
}

uint64_t qw_mqtt_secret_sig(const qw_mqtt *m)
{
	return m->secret_sig;
}

/* OpenSSL's passphrase callback: none.  Without it OpenSSL would prompt
 * on the terminal for an encrypted key and the daemon's loop would wait;
 * with it such a key fails to load, a counted and logged failure. */
static int mqtt_no_passphrase(char *buf, int size, int rwflag, void *user)
{
	(void)buf;
	(void)size;
	(void)rwflag;
	(void)user;
	return 0;
}

/* TLS and credentials on a new client. */
static int mqtt_secure(qw_mqtt *m, char *err, size_t errlen)
{
	const struct qw_mqtt_conf *c = &m->c;
	char user[QW_CONFIG_SECRET_MAX], pass[QW_CONFIG_SECRET_MAX];
	int tls = c->ninputs > 0 ? c->inputs[0].tls : c->alerts.tls, rc;

	if (tls) {
		rc = mosquitto_tls_set(m->mosq,
				       c->ca_file[0] ? c->ca_file : NULL,
				       c->ca_file[0] ? NULL : MQTT_SYSTEM_CA,
				       c->cert_file[0] ? c->cert_file : NULL,
				       c->key_file[0] ? c->key_file : NULL,
				       mqtt_no_passphrase);
		if (rc != MOSQ_ERR_SUCCESS) {
			qw_errbuf(err, errlen, "TLS files refused: %s",
				  mosquitto_strerror(rc));
			return QW_ERROR(QW_EFORMAT);
		}
	}
	if (c->credentials[0] == '\0')
		return 0;
	rc = qw_config_mqtt_credentials(c->credentials, user, sizeof user,
					pass, sizeof pass, err, errlen);
	if (rc == 0)
		m->secret_sig = mqtt_sig(user, pass);
	if (rc == 0 &&
	    mosquitto_username_pw_set(m->mosq, user, pass) != MOSQ_ERR_SUCCESS) {
		qw_errbuf(err, errlen, "%s: out of memory", c->credentials);
		rc = QW_ERROR(QW_ENOMEM);
	}
	explicit_bzero(user, sizeof user);
	explicit_bzero(pass, sizeof pass);
	return rc;
}

qw_mqtt *qw_mqtt_alloc(const struct qw_mqtt_conf *c, qw_mqtt_on_message cb,
		       void *arg, char *err, size_t errlen)
{
	qw_mqtt *m = calloc(1, sizeof *m);

	if (m == NULL) {
		qw_errbuf(err, errlen, "out of memory");
		return NULL;
	}
	mosquitto_lib_init(); /* counted: paired with cleanup in free */
	m->c = *c;
	m->cb = cb;
	m->arg = arg;
	m->delay = c->reconnect_min;
	/* A client id asks the broker to keep the session (subscriptions,
	 * QoS 1 messages) while the daemon is away: clean session off. */
	m->mosq = mosquitto_new(c->client_id[0] ? c->client_id : NULL,
				c->client_id[0] == '\0', m);
	if (m->mosq == NULL) {
		qw_errbuf(err, errlen, "mosquitto_new: %s", strerror(errno));
		goto fail;
	}
	mosquitto_int_option(m->mosq, MOSQ_OPT_PROTOCOL_VERSION,
			     MQTT_PROTOCOL_V311);
	mosquitto_connect_callback_set(m->mosq, mqtt_on_connect);
	mosquitto_disconnect_callback_set(m->mosq, mqtt_on_disconnect);
	mosquitto_message_callback_set(m->mosq, mqtt_on_message);
	mosquitto_subscribe_callback_set(m->mosq, mqtt_on_subscribe);
	if (mqtt_secure(m, err, errlen) != 0)
		goto fail;
	return m;
fail:
	qw_mqtt_free(m);
	return NULL;
}

void qw_mqtt_free(qw_mqtt *m)
{
	if (m == NULL)
		return;
	if (m->mosq != NULL) {
		if (m->state == MQTT_UP) {
			mosquitto_disconnect(m->mosq);
			mosquitto_loop_write(m->mosq, 1); /* the DISCONNECT */
		}
		mosquitto_destroy(m->mosq);
	}
	mosquitto_lib_cleanup();
	free(m);
}

int qw_mqtt_fd(const qw_mqtt *m, int *want_write)
{
	/* idle: a socket left over from an abandoned attempt is not read;
	 * the next attempt closes it */
	int fd = m->state != MQTT_IDLE ? mosquitto_socket(m->mosq) : -1;

	*want_write = fd >= 0 && mosquitto_want_write(m->mosq);
	return fd;
}

/* Starts an attempt; a failure to even start backs off at once. */
static void mqtt_attempt(qw_mqtt *m, double now)
{
	const struct qw_mqtt_url *u = m->c.ninputs > 0 ? &m->c.inputs[0]
						       : &m->c.alerts;
	int rc;

	m->n.attempts++;
	m->counted = 0;
	m->attempt_at = now;
	m->state = MQTT_CONNECTING;
	if (!m->tried)
		rc = mosquitto_connect_async(m->mosq, u->host, u->port,
					     (int)m->c.keepalive);
	else
		rc = mosquitto_reconnect_async(m->mosq);
	m->tried = 1;
	if (rc != MOSQ_ERR_SUCCESS) {
		mqtt_down(m, now, mqtt_rc_text(rc));
		mosquitto_disconnect(m->mosq); /* a half-open socket */
	}
}

/* Reads up to MQTT_READ_MAX packets, one per call, until MQTT_IDLE_READS
 * calls in a row deliver no message (nothing more waiting, or only
 * control packets).  More than one: under TLS a whole message may wait in
 * the library's TLS buffer, where poll cannot see it, behind a control
 * packet such as a PINGRESP. */
static int mqtt_read(qw_mqtt *m)
{
	int k, idle = 0, rc = MOSQ_ERR_SUCCESS;

	for (k = 0; k < MQTT_READ_MAX && idle < MQTT_IDLE_READS; k++) {
		m->delivered = 0;
		rc = mosquitto_loop_read(m->mosq, 1);
		if (rc != MOSQ_ERR_SUCCESS || mosquitto_socket(m->mosq) < 0)
			break;
		idle = m->delivered == 0 ? idle + 1 : 0;
	}
	return rc;
}

void qw_mqtt_service(qw_mqtt *m, int readable, int writable, double now)
{
	int rc = MOSQ_ERR_SUCCESS;

	if (m->state != MQTT_IDLE && mosquitto_socket(m->mosq) < 0)
		mqtt_down(m, now, "socket closed"); /* closed under us */
	if (m->state == MQTT_IDLE) {
		if (now >= m->next_try)
			mqtt_attempt(m, now);
		return;
	}
	if (readable)
		rc = mqtt_read(m);
	if (rc == MOSQ_ERR_SUCCESS && mosquitto_socket(m->mosq) >= 0 &&
	    (writable || mosquitto_want_write(m->mosq)))
		rc = mosquitto_loop_write(m->mosq, 1);
	if (rc == MOSQ_ERR_SUCCESS && mosquitto_socket(m->mosq) >= 0)
		rc = mosquitto_loop_misc(m->mosq);
	if (rc != MOSQ_ERR_SUCCESS || mosquitto_socket(m->mosq) < 0) {
		/* an end the disconnect callback did not report */
		mqtt_down(m, now, rc != MOSQ_ERR_SUCCESS ? mqtt_rc_text(rc)
			  : "socket closed");
	} else if (m->state == MQTT_CONNECTING &&
		   now - m->attempt_at > MQTT_CONNECT_TIMEOUT) {
		mqtt_down(m, now, "no answer from the broker");
		mosquitto_disconnect(m->mosq);
	}
}

int qw_mqtt_publish(qw_mqtt *m, const char *group, const void *payload,
		    size_t len)
{
	char topic[QW_CONFIG_TOPIC_MAX + QW_CONFIG_NAME_MAX];
	const char *t = m->c.alerts.topic;
	size_t at = 0, plus = 0;
	int n, rc;

	if (!m->c.has_alerts || m->state != MQTT_UP) {
		m->n.publish_failed++;
		return 1;
	}
	if (mqtt_level(t, m->c.alerts.level, &at, &plus) != 0 ||
	    len > (size_t)INT32_MAX)
		return QW_ERROR(QW_EINVAL);
	n = snprintf(topic, sizeof topic, "%.*s%s%s", (int)at, t, group,
		     t + at + plus);
	if (n < 0 || (size_t)n >= sizeof topic)
		return QW_ERROR(QW_EINVAL);
	rc = mosquitto_publish(m->mosq, NULL, topic, (int)len, payload,
			       m->c.qos, false);
	if (rc == MOSQ_ERR_SUCCESS) {
		m->n.published++;
		return 0;
	}
	m->n.publish_failed++;
	return rc == MOSQ_ERR_NO_CONN ? 1 : QW_ERROR(QW_EIO);
}

int qw_mqtt_connected(const qw_mqtt *m)
{
	return m->state == MQTT_UP;
}

size_t qw_mqtt_subscribed(const qw_mqtt *m)
{
	return m->state == MQTT_UP ? m->subscribed : 0;
}

const struct qw_mqtt_counts *qw_mqtt_counts(const qw_mqtt *m)
{
	return &m->n;
}

const struct qw_mqtt_conf *qw_mqtt_conf(const qw_mqtt *m)
{
	return &m->c;
}

const char *qw_mqtt_why(const qw_mqtt *m)
{
	return m->why;
}

const char *qw_mqtt_version(char *buf, size_t cap)
{
	int a = 0, b = 0, c = 0;

	mosquitto_lib_version(&a, &b, &c);
	snprintf(buf, cap, "%d.%d.%d", a, b, c);
	return buf;
}
