/* run_ingest.c: one bus message through the daemon.
 *
 * Steps per message: look the topic up (hash table, run_setup.c), check the
 * frame count and size, decode into the shared preallocated batch
 * (qw_wire_decode), account sequence gaps, then pass the readings to the
 * group's detector a frame at a time (qw_detector_add_batch); a raise or
 * clear goes out on the alert socket at once.
 * Every refusal is counted by cause and logged at a bounded rate.
 *
 * Sequence accounting is per group: the seq expected next is the last
 * batch's seq + n.  A forward jump counts one gap and (jump) lost readings;
 * a backward jump is a publisher restart, counted apart (it is not a loss
 * of 2^64 readings).  Several publishers on one topic look like restarts.
 *
 * Workload: at full rate ~45,000 binary batches of 64 readings a second;
 * no allocation here, alerts encode into the daemon's fixed buffer. */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "run.h"
#include "verdict.h"

const char *const qw_run_cause_names[RUN_NCAUSES] = {
	[RUN_UNKNOWN_TOPIC] = "unknown_topic",
	[RUN_WRONG_COUNT] = "wrong_count",
	[RUN_TRUNCATED] = "truncated",
	[RUN_BAD_NUMBER] = "bad_number",
	[RUN_NONFINITE] = "nonfinite",
	[RUN_OVERSIZE] = "oversize",
	[RUN_MALFORMED] = "malformed",
	[RUN_TIME] = "time",
	[RUN_OVERFLOW] = "overflow",
	[RUN_EMPTY] = "empty",
};

/* The cause of a qw_wire_decode failure. */
static int run_wire_cause(int rc)
{
	switch (rc) {
	case QW_ECOUNT: return RUN_WRONG_COUNT;
	case QW_ETRUNC: return RUN_TRUNCATED;
	case QW_ENUMBER: return RUN_BAD_NUMBER;
	case QW_ERANGE: return RUN_NONFINITE;
	case QW_EOVERSIZE: return RUN_OVERSIZE;
	default: return RUN_MALFORMED;
	}
}

/* Counts a refused message (g NULL: no group) and logs it, rate-limited. */
static void run_reject(struct run_daemon *dm, struct run_group *g,
		       int cause, const struct qw_bus_msg *m)
{
	if (g != NULL)
		g->rejected[cause]++;
	else
		dm->tot.unknown_topic++;
	qw_log_limited(&dm->reject_log, QW_LOG_WARN,
		       "rejected a %zu-byte message on topic '%.64s': %s",
		       m->body_len, m->head, qw_run_cause_names[cause]);
}

static void run_seq(struct run_group *g, uint64_t seq, size_t n)
{
	if (g->has_seq && seq != g->next_seq) {
		if (seq > g->next_seq) {
			g->gaps++;
			g->lost += seq - g->next_seq;
		} else {
			g->restarts++;
		}
	}
	g->next_seq = seq + n;
	g->has_seq = 1;
}

static void run_send_alert(struct run_daemon *dm, struct run_group *g,
			   const struct qw_alert *a)
{
	char topic[QW_BUS_TOPIC_MAX];
	size_t len = qw_alert_encode(dm->alert, RUN_ALERT_MAX, a);
	int n = snprintf(topic, sizeof topic, "%s%s", QW_ALERT_TOPIC_PREFIX,
			 a->group);
	int rc;

	if (len == 0 || n < 0 || (size_t)n >= sizeof topic) {
		qw_log(QW_LOG_ERROR, "group %s: alert does not fit its buffer",
		       a->group);
		return;
	}
	qw_log(QW_LOG_INFO, "group %s: %s, score %.4g, limit %.4g%s%s",
	       a->group, a->event == QW_EVENT_RAISE ? "raise" : "clear",
	       a->score, a->limit, a->ncontrib > 0 ? ", top " : "",
	       a->ncontrib > 0 ? a->names[a->contrib[0].channel] : "");
	qw_run_mqtt_alert(dm, a->group, dm->alert, len);
	rc = qw_bus_send(dm->alerts, topic, (size_t)n, dm->alert, len, 1);
	if (rc == 0) {
		dm->tot.alerts_sent++;
	} else {
		g->dropped++;
		dm->tot.alerts_dropped++;
		if (rc < 0)
			dm->tot.bus_errors++;
		qw_log_limited(&dm->reject_log, QW_LOG_WARN,
			       "group %s: alert dropped: %s", a->group,
			       rc < 0 ? qw_bus_strerror() : "would block");
	}
}

void qw_run_alert(struct run_daemon *dm, struct run_group *g, double t,
		  const struct qw_result *res)
{
	struct qw_alert a;

	/* The same result -> alert step as replay (verdict.c). */
	qw_verdict_fill(&a, g->conf, t, res);
	run_send_alert(dm, g, &a);
}

void qw_run_alert_rebaseline(struct run_daemon *dm, struct run_group *g)
{
	struct qw_alert a;

	memset(&a, 0, sizeof a);
	a.group = g->conf->name;
	a.time = g->last_t;
	a.event = QW_EVENT_CLEAR;
	a.score = NAN; /* no reading behind this clear */
	a.limit = qw_detector_limit(g->det);
	a.pvalue = NAN;
	a.dof = (unsigned)g->conf->p;
	a.names = (const char (*)[QW_CONFIG_NAME_MAX])g->conf->channels;
	run_send_alert(dm, g, &a);
}

/* Readings scored per qw_detector_add_batch call (results on the stack). */
#define RUN_FRAME_CHUNK 64

/* The decoded frame b through the group's detector, a chunk per call; a
 * call stops early at a raise or clear, published before going on. */
static void run_readings(struct run_daemon *dm, struct run_group *g,
			 const struct qw_wire_batch *b)
{
	struct qw_result res[RUN_FRAME_CHUNK];
	int rc[RUN_FRAME_CHUNK];
	size_t k = 0, m, i;

	while (k < b->n) {
		m = b->n - k < RUN_FRAME_CHUNK ? b->n - k : RUN_FRAME_CHUNK;
		m = qw_detector_add_batch(g->det, m, b->t + k, b->x + k * b->p,
					  res, rc);
		dm->tot.readings += m;
		for (i = 0; i < m; i++)
			if (rc[i] != 0)
				qw_log_limited(&dm->reject_log, QW_LOG_WARN,
					       "group %s: reading at %.3f "
					       "refused: %s", g->conf->name,
					       b->t[k + i], qw_strerror(rc[i]));
		g->last_t = b->t[k + m - 1];
		if (res[m - 1].event != QW_EVENT_NONE)
			qw_run_alert(dm, g, b->t[k + m - 1], &res[m - 1]);
		k += m;
	}
}

/* Message m: topic, frames, decode, readings. */
int qw_run_message(struct run_daemon *dm, const struct qw_bus_msg *m)
{
	struct qw_wire_batch b;
	struct run_group *g;
	long gi = -1;
	int rc;

	dm->tot.received++;
	if (m->head_len < QW_BUS_TOPIC_MAX)
		gi = qw_run_topic_find(dm, m->head, m->head_len);
	if (gi < 0) {
		run_reject(dm, NULL, RUN_UNKNOWN_TOPIC, m);
		return RUN_UNKNOWN_TOPIC;
	}
	g = &dm->groups[gi];
	g->received++;
	if (m->nframes != 2) {
		run_reject(dm, g, RUN_MALFORMED, m);
		return RUN_MALFORMED;
	}
	if (m->body_len > m->body_cap) {
		run_reject(dm, g, RUN_OVERSIZE, m);
		return RUN_OVERSIZE;
	}
	qw_wire_batch_init(&b, g->conf->p, dm->batch, dm->batch_len);
	rc = qw_wire_decode(m->body, m->body_len, &b);
	if (rc != 0) {
		run_reject(dm, g, run_wire_cause(rc), m);
		return run_wire_cause(rc);
	}
	g->decoded++;
	dm->tot.decoded++;
	if (b.has_seq)
		run_seq(g, b.seq, b.n);
	run_readings(dm, g, &b);
	return -1;
}

void qw_run_ingest(struct run_daemon *dm, qw_bus_sock *s)
{
	int k, rc;

	for (k = 0; k < RUN_BATCH_MAX_MSGS; k++) {
		rc = qw_bus_recv(s, &dm->msg, 1);
		if (rc == 1)
			return;
		if (rc < 0) {
			dm->tot.bus_errors++;
			qw_log_limited(&dm->reject_log, QW_LOG_ERROR,
				       "receive: %s", qw_bus_strerror());
			return;
		}
		qw_run_message(dm, &dm->msg);
	}
}
