/* run_setup.c: everything `quadwatch run` allocates, binds and connects
 * before its loop, and the same again on reload.
 *
 * A start and a reload share one path: build a complete new set (config,
 * groups with their detectors, topic table, buffers, sockets) beside the
 * running one, then commit it in steps that cannot fail.  Any failure while
 * building frees the new set and leaves the daemon exactly as it was, so a
 * broken file or an endpoint that will not bind never stops monitoring.
 *
 * Reload keeps what the operator did not change: a group whose fingerprint
 * (p and channel names) is unchanged keeps its learned model (the detector
 * itself when its parameters are unchanged too, else its state copied into
 * a new detector), and a socket whose endpoint is unchanged is kept with
 * its connections (inputs only adjust their subscriptions).
 *
 * Workload: runs at start and on SIGHUP; allocation is fine here. */
#include <stdlib.h>
#include <string.h>

#include "model.h"
#include "run.h"
#include "verdict.h"

/* What a build produces: the daemon's parts, new or carried over. */
struct run_build {
	struct qw_config cfg;
	struct run_group *groups;
	long *keep;                  /* per new group: old index whose
					detector moves over, or -1 */
	struct run_topics topics;
	qw_bus_sock *inputs[QW_CONFIG_MAX_INPUTS];
	int input_reused[QW_CONFIG_MAX_INPUTS];
	qw_bus_sock *alerts, *control;
	int alerts_reused, control_reused;
	unsigned char *body;         /* max_frame bytes */
	double *batch;
	size_t batch_len;
	struct run_secure sec;       /* [security] keys (run_secure.c) */
	qw_mqtt *mqtt;               /* MQTT client (run_mqtt.c) */
	int mqtt_reused;
};

#define RUN_TOPIC_LOAD 2 /* slots per group, at least: short probes */

static uint64_t run_hash(const char *s, size_t len)
{
	uint64_t h = 14695981039346656037ULL; /* FNV-1a 64 offset basis */
	size_t i;

	for (i = 0; i < len; i++) {
		h ^= (unsigned char)s[i];
		h *= 1099511628211ULL; /* FNV-1a 64 prime */
	}
	return h;
}

static int run_topics_build(struct run_topics *t, const struct qw_config *c)
{
	size_t n = 1, i, h;

	while (n < RUN_TOPIC_LOAD * c->ngroups)
		n <<= 1;
	t->slot = calloc(n, sizeof *t->slot);
	if (t->slot == NULL)
		return QW_ERROR(QW_ENOMEM);
	t->mask = n - 1;
	for (i = 0; i < c->ngroups; i++) {
		const char *name = c->groups[i].name;

		h = (size_t)run_hash(name, strlen(name)) & t->mask;
		while (t->slot[h] != 0)
			h = (h + 1) & t->mask;
		t->slot[h] = i + 1;
	}
	return 0;
}

long qw_run_topic_find(const struct run_daemon *dm, const char *topic,
		       size_t len)
{
	const struct run_topics *t = &dm->topics;
	size_t h = (size_t)run_hash(topic, len) & t->mask, g;

	while ((g = t->slot[h]) != 0) {
		const char *name = dm->cfg.groups[g - 1].name;

		if (strlen(name) == len && memcmp(name, topic, len) == 0)
			return (long)(g - 1);
		h = (h + 1) & t->mask;
	}
	return -1;
}

static int run_params_equal(const struct qw_group_conf *a,
			    const struct qw_group_conf *b)
{
	const struct qw_params *x = &a->params, *y = &b->params;

	if (a->p != b->p || x->half_life != y->half_life ||
	    x->time_based != y->time_based || x->rate != y->rate ||
	    x->alarms_per_day != y->alarms_per_day ||
	    x->warmup != y->warmup || x->persist_k != y->persist_k ||
	    x->persist_m != y->persist_m || x->clear_n != y->clear_n ||
	    x->learn != y->learn || x->relearn_after != y->relearn_after ||
	    x->correct != y->correct)
		return 0;
	if (strcmp(a->model, b->model) != 0 || a->model_use != b->model_use)
		return 0;
	return memcmp(a->floor, b->floor, a->p * sizeof *a->floor) == 0;
}

/* Copies the learned state of old into the fresh detector nd.  A failure
 * only loses the model (logged); the group still runs. */
static void run_transfer(const struct run_group *old, qw_detector *nd,
			 const char *name)
{
	size_t len = qw_detector_state_len(old->det);
	void *buf;
	int rc;

	if (len != qw_detector_state_len(nd)) {
		qw_log(QW_LOG_WARN, "group %s: model not kept (state size "
		       "changed)", name);
		return;
	}
	buf = malloc(len);
	if (buf == NULL) {
		qw_log(QW_LOG_WARN, "group %s: model not kept (no memory)",
		       name);
		return;
	}
	qw_detector_state_get(old->det, buf);
	rc = qw_detector_state_set(nd, buf, len);
	if (rc != 0)
		qw_log(QW_LOG_WARN, "group %s: model not kept: %s", name,
		       qw_strerror(rc));
	free(buf);
}

/* Group i of the new config: keeps, copies or starts its model. */
static int run_group_build(const struct run_daemon *dm, struct run_build *b,
			   size_t i)
{
	const struct qw_group_conf *gc = &b->cfg.groups[i];
	struct run_group *g = &b->groups[i];
	long o = dm->groups != NULL
		 ? qw_run_topic_find(dm, gc->name, strlen(gc->name)) : -1;
	const struct run_group *old = o >= 0 ? &dm->groups[o] : NULL;
	char err[QW_CONFIG_ERR_MAX];
	int rc;

	b->keep[i] = -1;
	g->conf = gc;
	g->fingerprint = qw_config_fingerprint(gc);
	g->restore = old == NULL; /* new here: its checkpoint, if any */
	if (old != NULL && old->fingerprint == g->fingerprint) {
		*g = *old;          /* counters, sequence tracking */
		g->conf = gc;
		g->det = NULL;
		if (run_params_equal(old->conf, gc)) {
			b->keep[i] = o;
			return 0;
		}
	}
	/* a fixed model is the reference: no checkpoint replaces it */
	if (gc->model[0] != '\0' && gc->model_use == QW_MODEL_FIXED)
		g->restore = 0;
	if ((rc = qw_model_detector(gc, &g->det, NULL, err, sizeof err))) {
		qw_log(QW_LOG_ERROR, "%s", err);
		return rc == QW_ENOMEM ? rc : QW_ERROR(QW_EFORMAT);
	}
	if (gc->model[0] != '\0' && (old == NULL ||
	    strcmp(old->conf->model, gc->model) != 0 ||
	    old->conf->model_use != gc->model_use))
		qw_log(QW_LOG_INFO, "group %s: model from %s (%s)", gc->name,
		       gc->model, gc->model_use == QW_MODEL_FIXED ? "fixed"
		       : "warm start");
	else if (old != NULL && old->fingerprint == g->fingerprint)
		run_transfer(old, g->det, gc->name);
	else if (old != NULL)
		qw_log(QW_LOG_INFO, "group %s: channels changed, learning "
		       "from nothing", gc->name);
	return 0;
}

static int run_open(struct run_daemon *dm, int kind,
		    const struct qw_endpoint *ep, const struct qw_bus_opts *o,
		    qw_bus_sock **out, const char *what)
{
	int rc = qw_bus_open(dm->bus, kind, ep, o, out);

	if (rc != 0)
		qw_log(QW_LOG_ERROR, "%s %s%s: %s", what, ep->bind ? "@" : ">",
		       ep->addr, qw_bus_strerror());
	return rc;
}

/* Input i: the running socket on the same endpoint (same max_frame), or a
 * new one subscribed to every topic of the new config. */
static int run_input_build(struct run_daemon *dm, struct run_build *b,
			   size_t i, int *claimed)
{
	const struct qw_endpoint *ep = &b->cfg.inputs[i];
	struct qw_bus_opts o;
	size_t j;
	int rc;

	for (j = 0; j < dm->cfg.ninputs; j++)
		if (!claimed[j] && dm->inputs[j] != NULL &&
		    dm->cfg.max_frame == b->cfg.max_frame &&
		    qw_bus_endpoint_equal(&dm->cfg.inputs[j], ep)) {
			claimed[j] = 1;
			b->inputs[i] = dm->inputs[j];
			b->input_reused[i] = 1;
			return 0;
		}
	qw_bus_opts_default(&o);
	o.max_msg = (int64_t)(b->cfg.max_frame * RUN_MAXMSG_FACTOR);
	o.rcvhwm = RUN_INPUT_HWM;
	o.security = qw_run_secure_for(&b->sec, ep, 1);
	rc = run_open(dm, QW_BUS_SUB, ep, &o, &b->inputs[i], "input");
	for (j = 0; rc == 0 && j < b->cfg.ngroups; j++)
		rc = qw_bus_subscribe(b->inputs[i], b->cfg.groups[j].name, 1);
	return rc;
}

static int run_sockets_build(struct run_daemon *dm, struct run_build *b)
{
	int claimed[QW_CONFIG_MAX_INPUTS] = {0};
	struct qw_bus_opts o;
	size_t i;
	int rc;

	for (i = 0; i < b->cfg.ninputs; i++)
		if ((rc = run_input_build(dm, b, i, claimed)) != 0)
			return rc;
	if (dm->alerts != NULL &&
	    qw_bus_endpoint_equal(&dm->cfg.alerts, &b->cfg.alerts)) {
		b->alerts = dm->alerts;
		b->alerts_reused = 1;
	} else {
		qw_bus_opts_default(&o);
		o.sndhwm = RUN_ALERT_HWM;
		o.max_msg = RUN_CONTROL_MAXMSG; /* only subscriptions come in */
		o.security = qw_run_secure_for(&b->sec, &b->cfg.alerts, 0);
		if ((rc = run_open(dm, QW_BUS_PUB, &b->cfg.alerts, &o,
				   &b->alerts, "alerts")) != 0)
			return rc;
	}
	if (b->cfg.control.addr[0] == '\0')
		return 0;
	if (dm->control != NULL &&
	    qw_bus_endpoint_equal(&dm->cfg.control, &b->cfg.control)) {
		b->control = dm->control;
		b->control_reused = 1;
		return 0;
	}
	qw_bus_opts_default(&o);
	o.max_msg = RUN_CONTROL_MAXMSG;
	o.sndtimeo_ms = 0; /* a reply never waits on a vanished client */
	o.security = qw_run_secure_for(&b->sec, &b->cfg.control, 0);
	return run_open(dm, QW_BUS_REP, &b->cfg.control, &o, &b->control,
			"control");
}

/* Frees what b owns that the daemon does not (rollback). */
static void run_build_free(struct run_build *b)
{
	size_t i;

	if (b->groups != NULL)
		for (i = 0; i < b->cfg.ngroups; i++)
			qw_detector_free(b->groups[i].det);
	for (i = 0; i < QW_CONFIG_MAX_INPUTS; i++)
		if (!b->input_reused[i])
			qw_bus_close(b->inputs[i]);
	if (!b->alerts_reused)
		qw_bus_close(b->alerts);
	if (!b->control_reused)
		qw_bus_close(b->control);
	if (!b->mqtt_reused)
		qw_mqtt_free(b->mqtt);
	free(b->groups);
	free(b->keep);
	free(b->topics.slot);
	free(b->body);
	free(b->batch);
	qw_run_secure_free(&b->sec);
	qw_config_free(&b->cfg);
	memset(b, 0, sizeof *b);
}

/* Everything but the config (already loaded into b->cfg). */
static int run_build(struct run_daemon *dm, struct run_build *b)
{
	size_t i, n = b->cfg.ngroups;
	int rc;

	b->groups = calloc(n, sizeof *b->groups);
	b->keep = calloc(n, sizeof *b->keep);
	b->batch_len = qw_verdict_buffer_len(&b->cfg);
	b->batch = malloc(b->batch_len * sizeof *b->batch);
	b->body = malloc(b->cfg.max_frame > 0 ? b->cfg.max_frame : 1);
	if (b->groups == NULL || b->keep == NULL || b->batch == NULL ||
	    b->body == NULL)
		return QW_ERROR(QW_ENOMEM);
	if ((rc = run_topics_build(&b->topics, &b->cfg)) != 0)
		return rc;
	for (i = 0; i < n; i++)
		if ((rc = run_group_build(dm, b, i)) != 0) {
			qw_log(QW_LOG_ERROR, "group %s: %s",
			       b->cfg.groups[i].name, qw_strerror(rc));
			return rc;
		}
	/* keys first: the ZAP handler must be bound before any CURVE
	 * server socket, or libzmq lets every client in */
	if ((rc = qw_run_secure_build(dm, &b->cfg, &b->sec)) != 0)
		return rc;
	if ((rc = qw_run_mqtt_build(dm, &b->cfg, &b->mqtt,
				    &b->mqtt_reused)) != 0)
		return rc;
	return run_sockets_build(dm, b);
}

/* A reused input follows the new topic set. */
static void run_resubscribe(struct run_daemon *dm, struct run_build *b,
			    qw_bus_sock *s)
{
	size_t i;

	for (i = 0; i < b->cfg.ngroups; i++)
		if (qw_config_group(&dm->cfg, b->cfg.groups[i].name) == NULL &&
		    qw_bus_subscribe(s, b->cfg.groups[i].name, 1) != 0)
			qw_log(QW_LOG_ERROR, "subscribe %s: %s",
			       b->cfg.groups[i].name, qw_bus_strerror());
	for (i = 0; i < dm->cfg.ngroups; i++)
		if (qw_config_group(&b->cfg, dm->cfg.groups[i].name) == NULL &&
		    qw_bus_subscribe(s, dm->cfg.groups[i].name, 0) != 0)
			qw_log(QW_LOG_ERROR, "unsubscribe %s: %s",
			       dm->cfg.groups[i].name, qw_bus_strerror());
}

static void run_sockets_commit(struct run_daemon *dm, struct run_build *b)
{
	size_t i, j;

	for (i = 0; i < b->cfg.ninputs; i++)
		if (b->input_reused[i])
			run_resubscribe(dm, b, b->inputs[i]);
	for (j = 0; j < QW_CONFIG_MAX_INPUTS; j++) {
		int kept = 0;

		for (i = 0; i < b->cfg.ninputs; i++)
			kept |= b->inputs[i] == dm->inputs[j];
		if (!kept)
			qw_bus_close(dm->inputs[j]);
		dm->inputs[j] = b->inputs[j];
	}
	if (!b->alerts_reused)
		qw_bus_close(dm->alerts);
	dm->alerts = b->alerts;
	/* A replaced control socket may hold the request that asked for this
	 * reload: it is retired, and closed after the reply is sent. */
	if (!b->control_reused && dm->control != NULL) {
		qw_bus_close(dm->control_retired);
		dm->control_retired = dm->control;
	}
	dm->control = b->control;
}

/* Frees what a configuration built: keys, groups and their detectors, the
 * topic table, the receive and decode buffers, the config itself.  The
 * pointers are left dangling: the caller installs new ones or stops. */
static void run_free_config_state(struct run_daemon *dm)
{
	size_t i;

	qw_run_secure_free(&dm->sec);
	if (dm->groups != NULL)
		for (i = 0; i < dm->cfg.ngroups; i++)
			qw_detector_free(dm->groups[i].det);
	free(dm->groups);
	free(dm->topics.slot);
	free(dm->msg.body);
	free(dm->batch);
	qw_config_free(&dm->cfg);
}

/* Installs b; nothing here can fail.  b is left empty. */
static void run_commit(struct run_daemon *dm, struct run_build *b)
{
	size_t i;

	for (i = 0; i < b->cfg.ngroups; i++)
		if (b->keep[i] >= 0) {
			b->groups[i].det = dm->groups[b->keep[i]].det;
			dm->groups[b->keep[i]].det = NULL;
		}
	run_sockets_commit(dm, b);
	qw_run_mqtt_commit(dm, b->mqtt, b->mqtt_reused);
	run_free_config_state(dm);
	dm->sec = b->sec;
	dm->cfg = b->cfg;
	for (i = 0; i < dm->cfg.ngroups; i++)
		b->groups[i].conf = &dm->cfg.groups[i]; /* cfg moved */
	dm->groups = b->groups;
	dm->topics = b->topics;
	dm->msg.body = b->body;
	dm->msg.body_cap = dm->cfg.max_frame;
	dm->batch = b->batch;
	dm->batch_len = b->batch_len;
	free(b->keep);
	memset(b, 0, sizeof *b);
}

/* The poller watches the inputs, then the control socket. */
static int run_poller_fill(struct run_daemon *dm)
{
	size_t i;
	int rc = 0;

	qw_bus_poller_clear(dm->poller);
	for (i = 0; rc == 0 && i < dm->cfg.ninputs; i++)
		rc = qw_bus_poller_add(dm->poller, dm->inputs[i]);
	if (rc == 0 && dm->control != NULL)
		rc = qw_bus_poller_add(dm->poller, dm->control);
	if (rc == 0 && dm->zap != NULL)
		rc = qw_bus_poller_add(dm->poller, dm->zap);
	return rc;
}

static void run_timers(struct run_daemon *dm)
{
	double now = qw_log_monotonic();

	dm->next_stats = dm->cfg.stats_every > 0 ? now + dm->cfg.stats_every
						 : 0;
	dm->next_checkpoint = dm->cfg.state_dir[0] != '\0' &&
			      dm->cfg.state_every > 0
			      ? now + dm->cfg.state_every : 0;
}

static int run_load(const struct run_daemon *dm, struct qw_config *cfg)
{
	char err[QW_CONFIG_ERR_MAX];
	int rc = qw_config_load_owned(dm->path, dm->owned, cfg, err,
				      sizeof err);

	if (rc != 0)
		qw_log(QW_LOG_ERROR, "%s", err);
	return rc;
}

int qw_run_setup(struct run_daemon *dm, const char *path)
{
	struct run_build b;
	int rc = 0;

	memset(&b, 0, sizeof b);
	dm->path = path;
	dm->reject_log.interval = RUN_REJECT_LOG_EVERY;
	dm->reject_log.last = -1;
	dm->auth_log.interval = RUN_REJECT_LOG_EVERY;
	dm->auth_log.last = -1;
	dm->started = qw_log_monotonic();
	if (run_load(dm, &b.cfg) != 0)
		return QW_ERROR(QW_EFORMAT); /* exit 2: the message is logged */
	dm->bus = qw_bus_alloc();
	/* inputs, control and the ZAP handler */
	dm->poller = qw_bus_poller_alloc(QW_CONFIG_MAX_INPUTS + 2);
	dm->alert = malloc(RUN_ALERT_MAX);
	if (dm->bus == NULL || dm->poller == NULL || dm->alert == NULL)
		rc = QW_ERROR(QW_ENOMEM);
	if (rc == 0)
		rc = run_build(dm, &b);
	if (rc != 0) {
		run_build_free(&b);
		return rc;
	}
	run_commit(dm, &b);
	qw_run_restore(dm);
	run_timers(dm);
	return run_poller_fill(dm);
}

int qw_run_reload(struct run_daemon *dm)
{
	struct run_build b;
	int rc;

	memset(&b, 0, sizeof b);
	qw_log(QW_LOG_INFO, "reloading %s", dm->path);
	rc = run_load(dm, &b.cfg);
	if (rc == 0)
		rc = run_build(dm, &b);
	if (rc != 0) {
		run_build_free(&b);
		dm->tot.reload_failures++;
		qw_log(QW_LOG_ERROR, "reload refused; the running "
		       "configuration stays in force");
		return rc;
	}
	run_commit(dm, &b);
	qw_run_restore(dm);
	run_timers(dm);
	rc = run_poller_fill(dm);
	dm->tot.reloads++;
	qw_log(QW_LOG_INFO, "reloaded: %zu groups", dm->cfg.ngroups);
	return rc;
}

void qw_run_teardown(struct run_daemon *dm)
{
	size_t i;

	for (i = 0; i < QW_CONFIG_MAX_INPUTS; i++)
		qw_bus_close(dm->inputs[i]);
	qw_bus_close(dm->alerts);
	qw_bus_close(dm->control);
	qw_bus_close(dm->control_retired);
	qw_bus_close(dm->zap);
	qw_mqtt_free(dm->mqtt.client);
	run_free_config_state(dm);
	free(dm->alert);
	qw_bus_poller_free(dm->poller);
	qw_bus_free(dm->bus);
	memset(dm, 0, sizeof *dm);
}

double qw_run_next_timer(const struct run_daemon *dm)
{
	double t = dm->next_stats;

	if (dm->next_checkpoint > 0 && (t == 0 || dm->next_checkpoint < t))
		t = dm->next_checkpoint;
	return t;
}
