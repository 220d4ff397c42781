/* mqtt.h: the daemon's one MQTT connection (libmosquitto).  mqtt.c is the
 * only file that includes mosquitto.h; above it are a file descriptor to
 * poll, a service call, a message callback and counters.
 *
 * The connection lives inside the daemon's single-threaded poll loop: the
 * caller polls qw_mqtt_fd (for writing too when it says so) and calls
 * qw_mqtt_service after every poll; that call reads, writes, pings and,
 * while the broker is away, reconnects with a doubling back-off.  Messages
 * arrive through the callback during qw_mqtt_service, with the group name
 * taken from the topic level that the filter's '+' matched. */
#ifndef QW_MQTT_H
#define QW_MQTT_H

#include <stddef.h>
#include <stdint.h>

#include "config.h"

typedef struct qw_mqtt qw_mqtt;

/* One message: group[0..glen) the matched level (not NUL-terminated),
 * payload[0..len) owned by the library until the callback returns. */
typedef void (*qw_mqtt_on_message)(void *arg, const char *group,
				   size_t glen, const void *payload,
				   size_t len);

/* Counters of the connection; never reset. */
struct qw_mqtt_counts {
	uint64_t attempts;         /* connection attempts started */
	uint64_t connects;         /* sessions accepted by the broker */
	uint64_t disconnects;      /* accepted sessions that ended */
	uint64_t connect_failures; /* attempts that ended without a session
				      (unreachable, TLS, refused, timeout) */
	uint64_t refused;          /* of those, refused by the broker
				      (CONNACK: bad credentials, not
				      authorised, ...) */
	uint64_t received;         /* messages delivered to the callback */
	uint64_t published;        /* alerts handed to the library */
	uint64_t publish_failed;   /* alerts not sent (not connected) */
};

/* Creates the client of c (TLS files, credentials file read here and
 * wiped once handed to the library) and schedules its first connection
 * attempt for the first qw_mqtt_service.  NULL on failure with the reason
 * in err. */
qw_mqtt *qw_mqtt_alloc(const struct qw_mqtt_conf *c, qw_mqtt_on_message cb,
		       void *arg, char *err, size_t errlen);
/* Disconnects and frees.  NULL is a no-op. */
void qw_mqtt_free(qw_mqtt *m);
/* The socket to poll, or -1 while there is none; *want_write is 1 when
 * the library has bytes to send (poll for writing too). */
int qw_mqtt_fd(const qw_mqtt *m, int *want_write);
/* Services the connection after a poll: readable/writable as the poll
 * saw them, now a monotonic time in seconds. */
void qw_mqtt_service(qw_mqtt *m, int readable, int writable, double now);
/* Publishes payload on the alerts topic of group (c->has_alerts).  0
 * queued, 1 dropped (not connected, or no alerts topic), QW_EIO. */
int qw_mqtt_publish(qw_mqtt *m, const char *group, const void *payload,
		    size_t len);
/* 1 while a session is up. */
int qw_mqtt_connected(const qw_mqtt *m);
/* Input filters the broker has acknowledged in this session. */
size_t qw_mqtt_subscribed(const qw_mqtt *m);
const struct qw_mqtt_counts *qw_mqtt_counts(const qw_mqtt *m);
/* The settings the client was made with (its own copy). */
const struct qw_mqtt_conf *qw_mqtt_conf(const qw_mqtt *m);
/* Why the last attempt or session ended ("" when none did). */
const char *qw_mqtt_why(const qw_mqtt *m);
/* A 64-bit FNV-1a signature of the user name and password in the
 * credentials file at path (0: none, or unreadable), so a reload can tell
 * that they changed without keeping them; qw_mqtt_secret_sig: the one the
 * client was made with. */
uint64_t qw_mqtt_credentials_sig(const char *path);
uint64_t qw_mqtt_secret_sig(const qw_mqtt *m);
/* The library's version, "2.0.11". */
const char *qw_mqtt_version(char *buf, size_t cap);

#endif
