/* run_report.c: what the daemon tells the outside: control replies on the
 * REP socket (status, rebaseline GROUP, save, reload) and the periodic
 * `stats` message on the alert socket.  Both carry the same counters, built
 * as jansson objects (allocation is fine here: a request or a timer, never a
 * reading).
 *
 * A request is frame 1 "CMD" or "CMD ARG", or frames "CMD", "ARG".  Every
 * request gets exactly one reply (REP's rule), an object with "ok"; errors
 * add "error".  Nothing a client sends can stop the daemon. */
#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "run.h"

#define REPORT_CMD_MAX 64 /* bytes of a command word */

/* Non-finite numbers (a limit of +Inf during warm-up) become null. */
static json_t *report_real(double v)
{
	return isfinite(v) ? json_real(v) : json_null();
}

static json_t *report_u64(uint64_t v)
{
	return json_integer((json_int_t)v);
}

/* rejected[] by cause for one group: the daemon's counts, then the core's. */
static void report_group_rejected(const struct run_group *g, uint64_t *r)
{
	const struct qw_counters *c = qw_detector_counters(g->det);
	size_t i;

	for (i = 0; i < RUN_WIRE_CAUSES; i++)
		r[i] = g->rejected[i];
	r[RUN_NONFINITE] += c->rej_nonfinite;
	r[RUN_TIME] = c->rej_time;
	r[RUN_OVERFLOW] = c->rej_overflow;
	r[RUN_EMPTY] = c->rej_empty;
}

static json_t *report_causes(const uint64_t *r, int with_unknown)
{
	json_t *o = json_object();
	size_t i;

	for (i = with_unknown ? 0 : 1; i < RUN_NCAUSES; i++)
		json_object_set_new(o, qw_run_cause_names[i], report_u64(r[i]));
	return o;
}

/* Checkpoint counters: saved, failed, restored, refused. */
static json_t *report_ckpt(const struct run_ckpt *c)
{
	json_t *o = json_object();

	json_object_set_new(o, "saved", report_u64(c->saved));
	json_object_set_new(o, "failed", report_u64(c->failed));
	json_object_set_new(o, "restored", report_u64(c->restored));
	json_object_set_new(o, "refused", report_u64(c->refused));
	return o;
}

static json_t *report_group(const struct run_group *g)
{
	const struct qw_counters *c = qw_detector_counters(g->det);
	uint64_t r[RUN_NCAUSES] = {0};
	json_t *o = json_object();

	report_group_rejected(g, r);
	json_object_set_new(o, "readings", report_u64(c->readings));
	json_object_set_new(o, "scored", report_u64(c->scored));
	json_object_set_new(o, "learned", report_u64(c->learned));
	json_object_set_new(o, "alarms", report_u64(c->alarms));
	json_object_set_new(o, "exceedances", report_u64(c->exceedances));
	json_object_set_new(o, "partial", report_u64(c->partial));
	json_object_set_new(o, "numeric", report_u64(c->numeric));
	json_object_set_new(o, "rebaselines", report_u64(c->rebaselines));
	json_object_set_new(o, "in_alarm",
			    json_boolean(qw_detector_in_alarm(g->det)));
	json_object_set_new(o, "limit", report_real(qw_detector_limit(g->det)));
	json_object_set_new(o, "steady_limit",
			    report_real(qw_detector_steady_limit(g->det)));
	json_object_set_new(o, "alpha", report_real(qw_detector_alpha(g->det)));
	json_object_set_new(o, "dof", report_u64(g->conf->p));
	json_object_set_new(o, "model_age", report_u64(qw_ewcov_count(
				    qw_detector_model(g->det))));
	json_object_set_new(o, "rejected", report_causes(r, 0));
	json_object_set_new(o, "received", report_u64(g->received));
	json_object_set_new(o, "decoded", report_u64(g->decoded));
	json_object_set_new(o, "gaps", report_u64(g->gaps));
	json_object_set_new(o, "lost", report_u64(g->lost));
	json_object_set_new(o, "restarts", report_u64(g->restarts));
	json_object_set_new(o, "alerts_dropped", report_u64(g->dropped));
	json_object_set_new(o, "checkpoint", report_ckpt(&g->ckpt));
	return o;
}

/* Daemon-wide sums over the groups. */
static void report_totals(const struct run_daemon *dm, json_t *o)
{
	const struct run_totals *t = &dm->tot;
	uint64_t r[RUN_NCAUSES] = {0}, gr[RUN_NCAUSES];
	uint64_t gaps = 0, lost = 0, restarts = 0, alarms = 0;
	struct run_ckpt ck = {0, 0, 0, 0};
	size_t i, k;

	r[RUN_UNKNOWN_TOPIC] = t->unknown_topic;
	for (i = 0; i < dm->cfg.ngroups; i++) {
		const struct run_group *g = &dm->groups[i];

		memset(gr, 0, sizeof gr);
		report_group_rejected(g, gr);
		for (k = 1; k < RUN_NCAUSES; k++)
			r[k] += gr[k];
		gaps += g->gaps;
		lost += g->lost;
		restarts += g->restarts;
		alarms += qw_detector_counters(g->det)->alarms;
		ck.saved += g->ckpt.saved;
		ck.failed += g->ckpt.failed;
		ck.restored += g->ckpt.restored;
		ck.refused += g->ckpt.refused;
	}
	json_object_set_new(o, "received", report_u64(t->received));
	json_object_set_new(o, "decoded", report_u64(t->decoded));
	json_object_set_new(o, "readings", report_u64(t->readings));
	json_object_set_new(o, "rejected", report_causes(r, 1));
	json_object_set_new(o, "gaps", report_u64(gaps));
	json_object_set_new(o, "lost", report_u64(lost));
	json_object_set_new(o, "restarts", report_u64(restarts));
	json_object_set_new(o, "alarms", report_u64(alarms));
	json_object_set_new(o, "alerts_sent", report_u64(t->alerts_sent));
	json_object_set_new(o, "alerts_dropped", report_u64(t->alerts_dropped));
	json_object_set_new(o, "stats_sent", report_u64(t->stats_sent));
	json_object_set_new(o, "control_requests", report_u64(t->control));
	json_object_set_new(o, "reloads", report_u64(t->reloads));
	json_object_set_new(o, "reload_failures",
			    report_u64(t->reload_failures));
	json_object_set_new(o, "bus_errors", report_u64(t->bus_errors));
	json_object_set_new(o, "auth_allowed", report_u64(t->auth_allowed));
	json_object_set_new(o, "auth_denied", report_u64(t->auth_denied));
	json_object_set_new(o, "checkpoint", report_ckpt(&ck));
	qw_run_mqtt_report(dm, o);
}

/* The status object: daemon-wide counters, uptime, groups by name. */
static json_t *report_status(const struct run_daemon *dm)
{
	json_t *o = json_object(), *groups = json_object();
	size_t i;

	json_object_set_new(o, "ok", json_true());
	json_object_set_new(o, "config", json_string(dm->path));
	json_object_set_new(o, "uptime",
			    json_real(qw_log_monotonic() - dm->started));
	report_totals(dm, o);
	for (i = 0; i < dm->cfg.ngroups; i++)
		json_object_set_new(groups, dm->cfg.groups[i].name,
				    report_group(&dm->groups[i]));
	json_object_set_new(o, "groups", groups);
	return o;
}

static json_t *report_error(const char *fmt, ...)
	__attribute__((format(printf, 1, 2)));

static json_t *report_error(const char *fmt, ...)
{
	char text[QW_BUS_TOPIC_MAX + 128];
	json_t *o = json_object();
	va_list ap;

	va_start(ap, fmt);
	vsnprintf(text, sizeof text, fmt, ap);
	va_end(ap);
	json_object_set_new(o, "ok", json_false());
	json_object_set_new(o, "error", json_string(text));
	return o;
}

static json_t *report_ok(void)
{
	json_t *o = json_object();

	json_object_set_new(o, "ok", json_true());
	return o;
}

static json_t *report_rebaseline(struct run_daemon *dm, const char *name)
{
	long gi = qw_run_topic_find(dm, name, strlen(name));
	struct run_group *g;
	json_t *o;

	if (name[0] == '\0')
		return report_error("usage: rebaseline GROUP");
	if (gi < 0)
		return report_error("no group named '%s'", name);
	g = &dm->groups[gi];
	if (qw_detector_rebaseline(g->det))
		qw_run_alert_rebaseline(dm, g);
	qw_log(QW_LOG_INFO, "group %s: re-baselined by operator", name);
	o = report_ok();
	json_object_set_new(o, "group", json_string(name));
	return o;
}

/* One request (cmd, arg) to its reply. */
static json_t *report_answer(struct run_daemon *dm, const char *cmd,
			     const char *arg)
{
	char err[QW_CONFIG_ERR_MAX];

	if (strcmp(cmd, "status") == 0)
		return report_status(dm);
	if (strcmp(cmd, "rebaseline") == 0)
		return report_rebaseline(dm, arg);
	if (strcmp(cmd, "save") == 0)
		return qw_run_save(dm, err, sizeof err) == 0
		       ? report_ok() : report_error("%s", err);
	if (strcmp(cmd, "reload") == 0)
		return qw_run_reload(dm) == 0
		       ? report_ok()
		       : report_error("%s refused; the running configuration "
				      "stays (see the daemon log)", dm->path);
	return report_error("unknown command '%.64s'; expected status, "
			    "rebaseline GROUP, save or reload", cmd);
}

/* Splits the request in m into cmd and arg (frame 2, or after a space). */
static void report_parse(const struct qw_bus_msg *m, char *cmd, char *arg)
{
	const char *sp = strchr(m->head, ' ');
	size_t n = sp != NULL ? (size_t)(sp - m->head) : strlen(m->head);
	size_t a;

	if (n >= REPORT_CMD_MAX)
		n = REPORT_CMD_MAX - 1;
	memcpy(cmd, m->head, n);
	cmd[n] = '\0';
	arg[0] = '\0';
	if (sp != NULL) {
		snprintf(arg, QW_BUS_TOPIC_MAX, "%s", sp + 1);
	} else if (m->nframes >= 2 && m->body_len <= m->body_cap) {
		a = m->body_len < QW_BUS_TOPIC_MAX ? m->body_len
						   : QW_BUS_TOPIC_MAX - 1;
		memcpy(arg, m->body, a);
		arg[a] = '\0';
	}
}

void qw_run_control(struct run_daemon *dm)
{
	qw_bus_sock *s = dm->control;
	char cmd[REPORT_CMD_MAX], arg[QW_BUS_TOPIC_MAX];
	json_t *reply;
	char *text;
	int k;

	for (k = 0; s != NULL && k < RUN_BATCH_MAX_MSGS; k++) {
		if (qw_bus_recv(s, &dm->msg, 1) != 0)
			break;
		dm->tot.control++;
		report_parse(&dm->msg, cmd, arg);
		qw_log(QW_LOG_DEBUG, "control: %s %s", cmd, arg);
		reply = report_answer(dm, cmd, arg);
		text = reply != NULL ? json_dumps(reply, JSON_COMPACT) : NULL;
		if (text == NULL || qw_bus_send(s, text, strlen(text), NULL, 0,
						1) != 0) {
			dm->tot.bus_errors++;
			qw_log(QW_LOG_WARN, "control: reply not sent");
		}
		free(text);
		json_decref(reply);
		if (s != dm->control)
			break; /* a reload replaced the socket */
	}
	qw_bus_close(dm->control_retired);
	dm->control_retired = NULL;
}

void qw_run_stats(struct run_daemon *dm)
{
	json_t *o = report_status(dm);
	char *text;
	struct timespec ts;
	int rc;

	clock_gettime(CLOCK_REALTIME, &ts);
	json_object_del(o, "ok");
	json_object_set_new(o, "time", json_real((double)ts.tv_sec +
						 1e-9 * (double)ts.tv_nsec));
	dm->tot.stats_sent++;
	text = json_dumps(o, JSON_COMPACT);
	json_decref(o);
	if (text == NULL)
		return;
	rc = qw_bus_send(dm->alerts, "stats", strlen("stats"), text,
			 strlen(text), 1);
	if (rc != 0) {
		dm->tot.stats_sent--;
		dm->tot.alerts_dropped++;
	}
	free(text);
}
