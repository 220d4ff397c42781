/* run_mqtt.c: the daemon's MQTT connection (see quadwatch.ini(5) "MQTT",
 * docs/wire-format.md "MQTT", docs/operations.md "MQTT").
 *
 * The mqtt:// inputs of [bus] and the [mqtt] section make one client
 * (mqtt.c) that lives in the poll loop beside the ZeroMQ sockets: its
 * socket is put into the poller before each poll (qw_run_mqtt_arm) and
 * serviced after it (qw_run_mqtt_step), so the daemon stays one thread.
 * Each MQTT message becomes a two-frame message for the same path the
 * ZeroMQ inputs take (qw_run_message): frame 1 the group the topic names,
 * frame 2 the payload, so the three payload formats, the size limit, the
 * rejection causes and the per-group counters are the same.  Alerts go
 * out on MQTT too when [mqtt] alerts is set, on the group's own topic.
 *
 * Reload keeps the connection when the MQTT settings and the credentials
 * file's contents are unchanged, and otherwise replaces the client (its
 * connection counters are carried over); TLS files changed in place take
 * a restart.  Changes of state are logged: connected, lost, refused (bad
 * credentials), and failed attempts at a bounded rate.
 *
 * Workload: one callback per MQTT message; no allocation of ours. */
#include <jansson.h>
#include <string.h>

#include "run.h"

#define RUN_MQTT_LOG_EVERY 30.0 /* s between lines about failed attempts */

/* The settings that make a client, without the lines they stood on. */
static int run_mqtt_same(const struct qw_mqtt_conf *a,
			 const struct qw_mqtt_conf *b)
{
	struct qw_mqtt_conf x = *a, y = *b;

	x.line = x.input_line = x.alerts_line = x.ca_line = 0;
	x.cert_line = x.key_line = x.reconnect_line = x.credentials_line = 0;
	y.line = y.input_line = y.alerts_line = y.ca_line = 0;
	y.cert_line = y.key_line = y.reconnect_line = y.credentials_line = 0;
	return memcmp(&x, &y, sizeof x) == 0;
}

static void run_mqtt_message(void *arg, const char *group, size_t glen,
			     const void *payload, size_t len)
{
	struct run_daemon *dm = arg;
	struct qw_bus_msg m;
	size_t keep = glen < QW_BUS_TOPIC_MAX ? glen : QW_BUS_TOPIC_MAX - 1;
	int cause;

	memcpy(m.head, group, keep);
	m.head[keep] = '\0';
	m.head_len = glen;
	m.body = (unsigned char *)payload; /* only read */
	m.body_cap = dm->cfg.max_frame;
	m.body_len = len;
	m.nframes = 2; /* an MQTT message is always topic + payload */
	dm->mqtt.received++;
	cause = qw_run_message(dm, &m);
	if (cause < 0)
		dm->mqtt.decoded++;
	else
		dm->mqtt.rejected[cause]++;
}

int qw_run_mqtt_build(struct run_daemon *dm, const struct qw_config *cfg,
		      qw_mqtt **out, int *reused)
{
	const struct qw_mqtt_conf *c = &cfg->mqtt;
	char err[QW_CONFIG_ERR_MAX];

	*out = NULL;
	*reused = 0;
	if (c->ninputs == 0 && !c->has_alerts)
		return 0;
	if (qw_config_mqtt_files(cfg, err, sizeof err) != 0) {
		qw_log(QW_LOG_ERROR, "%s", err); /* exit 2 at start */
		return QW_ERROR(QW_EFORMAT);
	}
	/* the same settings and the same user name and password (a changed
	 * credentials file under the same name takes effect on reload) */
	if (dm->mqtt.client != NULL && run_mqtt_same(qw_mqtt_conf(dm->mqtt.client), c) &&
	    qw_mqtt_credentials_sig(c->credentials) ==
	    qw_mqtt_secret_sig(dm->mqtt.client)) {
		*out = dm->mqtt.client;
		*reused = 1;
		return 0;
	}
	*out = qw_mqtt_alloc(c, run_mqtt_message, dm, err, sizeof err);
	if (*out == NULL) {
		qw_log(QW_LOG_ERROR, "%s:%d: [mqtt]: %s", cfg->path, c->line,
		       err);
		return QW_ERROR(QW_EFORMAT);
	}
	return 0;
}

/* a += b, counter by counter. */
static void run_mqtt_add(struct qw_mqtt_counts *a,
			 const struct qw_mqtt_counts *b)
{
	a->attempts += b->attempts;
	a->connects += b->connects;
	a->disconnects += b->disconnects;
	a->connect_failures += b->connect_failures;
	a->refused += b->refused;
	a->received += b->received;
	a->published += b->published;
	a->publish_failed += b->publish_failed;
}

/* The broker of client, for log lines. */
static const struct qw_mqtt_url *run_mqtt_broker(const qw_mqtt *client)
{
	const struct qw_mqtt_conf *c = qw_mqtt_conf(client);

	return c->ninputs > 0 ? &c->inputs[0] : &c->alerts;
}

void qw_run_mqtt_commit(struct run_daemon *dm, qw_mqtt *client, int reused)
{
	struct run_mqtt *r = &dm->mqtt;

	r->log.interval = RUN_MQTT_LOG_EVERY;
	if (reused)
		return;
	if (r->client != NULL) {
		run_mqtt_add(&r->base, qw_mqtt_counts(r->client));
		qw_mqtt_free(r->client);
		qw_log(QW_LOG_INFO, "mqtt: connection closed for the new "
		       "settings");
	}
	r->client = client;
	memset(&r->seen, 0, sizeof r->seen);
	r->log.last = -1;
	if (client != NULL) {
		const struct qw_mqtt_url *u = run_mqtt_broker(client);
		char v[32];

		qw_log(QW_LOG_INFO, "mqtt %s:%d: connecting (libmosquitto %s)",
		       u->host, u->port, qw_mqtt_version(v, sizeof v));
	}
}

void qw_run_mqtt_arm(struct run_daemon *dm)
{
	int ww = 0, fd = -1;

	if (dm->mqtt.client != NULL)
		fd = qw_mqtt_fd(dm->mqtt.client, &ww);
	qw_bus_poller_set_fd(dm->poller, fd, ww);
}

/* Logs what changed since the last step. */
static void run_mqtt_log(struct run_daemon *dm)
{
	struct run_mqtt *r = &dm->mqtt;
	const struct qw_mqtt_counts *n = qw_mqtt_counts(r->client);
	const struct qw_mqtt_url *u = run_mqtt_broker(r->client);

	if (n->refused > r->seen.refused)
		qw_log_limited(&r->log, QW_LOG_ERROR, "mqtt %s:%d: %s (refusals: "
			       "%llu; check [mqtt] credentials)", u->host,
			       u->port, qw_mqtt_why(r->client),
			       (unsigned long long)n->refused);
	else if (n->connect_failures > r->seen.connect_failures)
		qw_log_limited(&r->log, QW_LOG_WARN, "mqtt %s:%d: %s (failed "
			       "attempts: %llu; retrying)", u->host, u->port,
			       qw_mqtt_why(r->client),
			       (unsigned long long)n->connect_failures);
	if (n->disconnects > r->seen.disconnects)
		qw_log(QW_LOG_WARN, "mqtt %s:%d: %s (reconnecting)", u->host,
		       u->port, qw_mqtt_why(r->client));
	if (n->connects > r->seen.connects)
		qw_log(QW_LOG_INFO, "mqtt %s:%d: connected%s, %zu topics, "
		       "qos %d", u->host, u->port, u->tls ? " (TLS)" : "",
		       qw_mqtt_conf(r->client)->ninputs,
		       qw_mqtt_conf(r->client)->qos);
	r->seen = *n;
}

void qw_run_mqtt_step(struct run_daemon *dm)
{
	int rd = 0, wr = 0;

	if (dm->mqtt.client == NULL)
		return;
	qw_bus_poller_fd_ready(dm->poller, &rd, &wr);
	qw_mqtt_service(dm->mqtt.client, rd, wr, qw_log_monotonic());
	run_mqtt_log(dm);
}

void qw_run_mqtt_alert(struct run_daemon *dm, const char *group,
		       const char *body, size_t len)
{
	int rc;

	if (dm->mqtt.client == NULL || !dm->cfg.mqtt.has_alerts)
		return;
	rc = qw_mqtt_publish(dm->mqtt.client, group, body, len);
	if (rc != 0)
		qw_log_limited(&dm->reject_log, QW_LOG_WARN, "group %s: MQTT "
			       "alert dropped: %s", group, rc > 0
			       ? "not connected" : "publish failed");
}

void qw_run_mqtt_report(const struct run_daemon *dm, json_t *o)
{
	const struct run_mqtt *r = &dm->mqtt;
	struct qw_mqtt_counts n;
	json_t *m, *rej;
	size_t i;

	if (r->client == NULL)
		return;
	n = r->base;
	run_mqtt_add(&n, qw_mqtt_counts(r->client));
	m = json_object();
	rej = json_object();
	for (i = 0; i < RUN_WIRE_CAUSES; i++)
		json_object_set_new(rej, qw_run_cause_names[i],
				    json_integer((json_int_t)r->rejected[i]));
	json_object_set_new(m, "connected",
			    json_boolean(qw_mqtt_connected(r->client)));
	json_object_set_new(m, "subscribed", json_integer((json_int_t)
			    qw_mqtt_subscribed(r->client)));
	json_object_set_new(m, "received", json_integer((json_int_t)r->received));
	json_object_set_new(m, "decoded", json_integer((json_int_t)r->decoded));
	json_object_set_new(m, "rejected", rej);
	json_object_set_new(m, "attempts", json_integer((json_int_t)n.attempts));
	json_object_set_new(m, "connects", json_integer((json_int_t)n.connects));
	json_object_set_new(m, "disconnects",
			    json_integer((json_int_t)n.disconnects));
	json_object_set_new(m, "connect_failures",
			    json_integer((json_int_t)n.connect_failures));
	json_object_set_new(m, "refused", json_integer((json_int_t)n.refused));
	json_object_set_new(m, "alerts_sent",
			    json_integer((json_int_t)n.published));
	json_object_set_new(m, "alerts_dropped",
			    json_integer((json_int_t)n.publish_failed));
	json_object_set_new(o, "mqtt", m);
}
