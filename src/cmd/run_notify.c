/* run_notify.c: the daemon's side of service-manager notification (see
 * run_notify.h; the protocol is src/io/notify.c).
 *
 * The STATUS= line reads, for example,
 *     STATUS=412.5 readings/s, 1 of 3 groups in alarm: chiller_2
 * with the rate averaged since the previous line and the names of groups in
 * alarm listed while they fit in the datagram ("..." when cut).  Building
 * it walks the groups once (qw_detector_in_alarm): O(groups) every
 * RUN_NOTIFY_STATUS_EVERY seconds.  The watchdog ping is sent from the poll
 * loop (qw_run_notify_tick after each wake-up), so a loop that stops
 * turning stops the pings and the manager restarts the daemon; the poll
 * timeout honours qw_run_notify_next so an idle daemon pings on time.
 *
 * A failed send is logged once with its reason and then only counted (the
 * count is logged at stop): a manager that has gone away must not fill the
 * log or stop monitoring. */
#include "run_notify.h"

#include <errno.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include "run.h"

#define RUN_NOTIFY_ELLIPSIS ", ..." /* the group list was cut short */

static void notify_send(struct run_notify *rn, const char *msg)
{
	if (qw_notify_send(&rn->n, msg) == 0 || rn->logged)
		return;
	rn->logged = 1;
	errno = rn->n.last_errno;
	qw_log_errno(QW_LOG_WARN, "service notification failed (later "
		     "failures are counted, not logged)");
}

/* Appends "STATUS=..." to buf, which holds len bytes of cap; the rate is
 * taken since the previous call (now: monotonic s). */
static size_t notify_status(struct run_notify *rn, const struct run_daemon *dm,
			    double now, char *buf, size_t len, size_t cap)
{
	double dt = now - rn->status_t, rate = 0;
	uint64_t nr = dm->tot.readings - rn->status_readings;
	size_t i, inalarm = 0, mark;
	int w;

	if (dt > 0 && rn->status_t > 0)
		rate = (double)nr / dt;
	rn->status_t = now;
	rn->status_readings = dm->tot.readings;
	for (i = 0; i < dm->cfg.ngroups; i++)
		inalarm += qw_detector_in_alarm(dm->groups[i].det) != 0;
	w = snprintf(buf + len, cap - len, "STATUS=%.1f readings/s, %zu of "
		     "%zu groups in alarm", rate, inalarm, dm->cfg.ngroups);
	if (w < 0 || (size_t)w >= cap - len)
		return len; /* cannot happen at QW_NOTIFY_MSG_MAX */
	len += (size_t)w;
	for (i = 0, mark = 0; i < dm->cfg.ngroups; i++) {
		if (!qw_detector_in_alarm(dm->groups[i].det))
			continue;
		w = snprintf(buf + len, cap - len, "%s%s", mark++ ? ", " : ": ",
			     dm->cfg.groups[i].name);
		if (w < 0 || (size_t)w + sizeof RUN_NOTIFY_ELLIPSIS >=
			     cap - len) {
			memcpy(buf + len, RUN_NOTIFY_ELLIPSIS,
			       sizeof RUN_NOTIFY_ELLIPSIS);
			return len + sizeof RUN_NOTIFY_ELLIPSIS - 1;
		}
		len += (size_t)w;
	}
	return len;
}

void qw_run_notify_open(struct run_notify *rn)
{
	char err[256];
	int rc;

	memset(rn, 0, sizeof *rn);
	err[0] = '\0';
	rc = qw_notify_open(&rn->n, err, sizeof err);
	if (rc != 0)
		qw_log(QW_LOG_WARN, "%s", err);
	if (!qw_notify_on(&rn->n))
		return;
	rn->ping_every = RUN_NOTIFY_WATCHDOG_SHARE *
			 (double)rn->n.watchdog_usec * 1e-6;
	if (rn->ping_every > 0)
		qw_log(QW_LOG_INFO, "watchdog: a ping every %.3f s",
		       rn->ping_every);
}

void qw_run_notify_ready(struct run_notify *rn, const struct run_daemon *dm)
{
	char msg[QW_NOTIFY_MSG_MAX + 1] = "READY=1\n";
	double now = qw_log_monotonic();

	if (!qw_notify_on(&rn->n))
		return;
	/* the watchdog runs from the start: the first ping goes with READY,
	 * however long the restore took */
	if (rn->ping_every > 0)
		strcat(msg, "WATCHDOG=1\n");
	notify_status(rn, dm, now, msg, strlen(msg), sizeof msg);
	notify_send(rn, msg);
	rn->next_ping = rn->ping_every > 0 ? now + rn->ping_every : 0;
	rn->next_status = now + RUN_NOTIFY_STATUS_EVERY;
}

void qw_run_notify_reloading(struct run_notify *rn)
{
	char msg[64];
	struct timespec ts;

	if (!qw_notify_on(&rn->n))
		return;
	/* MONOTONIC_USEC: CLOCK_MONOTONIC in us when the reload began; newer
	 * managers (Type=notify-reload) match it against their own request */
	clock_gettime(CLOCK_MONOTONIC, &ts);
	snprintf(msg, sizeof msg, "RELOADING=1\nMONOTONIC_USEC=%llu",
		 (unsigned long long)ts.tv_sec * 1000000ULL +
		 (unsigned long long)ts.tv_nsec / 1000ULL);
	notify_send(rn, msg);
}

void qw_run_notify_reloaded(struct run_notify *rn, const struct run_daemon *dm,
			    int rc)
{
	char msg[QW_NOTIFY_MSG_MAX + 1] = "READY=1\n";

	if (!qw_notify_on(&rn->n))
		return;
	if (rc == 0)
		notify_status(rn, dm, qw_log_monotonic(), msg, strlen(msg),
			      sizeof msg);
	else /* until the next refresh; the log has the reason */
		strcat(msg, "STATUS=reload refused, the previous configuration "
		       "runs on");
	notify_send(rn, msg);
}

void qw_run_notify_stopping(struct run_notify *rn)
{
	notify_send(rn, "STOPPING=1\nSTATUS=stopping");
}

void qw_run_notify_tick(struct run_notify *rn, const struct run_daemon *dm)
{
	char msg[QW_NOTIFY_MSG_MAX + 1] = "";
	size_t len = 0;
	double now;

	if (rn->next_ping == 0 && rn->next_status == 0)
		return;
	now = qw_log_monotonic();
	if (rn->next_ping > 0 && now >= rn->next_ping) {
		memcpy(msg, "WATCHDOG=1", sizeof "WATCHDOG=1");
		len = sizeof "WATCHDOG=1" - 1;
		rn->next_ping = now + rn->ping_every;
	}
	if (rn->next_status > 0 && now >= rn->next_status) {
		if (len > 0) {
			msg[len++] = '\n';
			msg[len] = '\0';
		}
		len = notify_status(rn, dm, now, msg, len, sizeof msg);
		rn->next_status = now + RUN_NOTIFY_STATUS_EVERY;
	}
	if (len > 0)
		notify_send(rn, msg);
}

double qw_run_notify_next(const struct run_notify *rn, double next)
{
	if (rn->next_ping > 0 && (next == 0 || rn->next_ping < next))
		next = rn->next_ping;
	if (rn->next_status > 0 && (next == 0 || rn->next_status < next))
		next = rn->next_status;
	return next;
}

void qw_run_notify_close(struct run_notify *rn)
{
	if (rn->n.failed > 0)
		qw_log(QW_LOG_WARN, "service notification: %llu of %llu "
		       "datagrams refused",
		       (unsigned long long)rn->n.failed,
		       (unsigned long long)(rn->n.failed + rn->n.sent));
	qw_notify_close(&rn->n);
	memset(rn, 0, sizeof *rn);
}
