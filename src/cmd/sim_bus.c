/* sim_bus.c: `quadwatch sim` on the bus (see sim.c and quadwatch-sim(1)).
 *
 * An XPUB socket, so the simulator can wait until every group's topic is
 * subscribed before the first reading; ZMQ_XPUB_NODROP with a send
 * timeout, so a slow subscriber slows the simulator instead of losing
 * readings, and a signal still stops it within SIM_SEND_TIMEOUT_MS.  Topic
 * = group name; binary batches carry a seq that rises by one per reading
 * per group.  Pacing: reading k is due at t0 + k / rate on
 * CLOCK_MONOTONIC (rate 0: no pacing).  Fault windows are announced on
 * stdout in data time, so they line up with the alerts tail prints.
 *
 * Workload: one scenario step per reading, one encode and send per batch
 * per group; buffers sized before the loop. */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "auth.h"
#include "bus.h"
#include "cmd.h"
#include "log.h"
#include "sim.h"
#include "wire.h"

#define SIM_TICK_MS 100        /* ms: longest blocking receive (signals) */
#define SIM_SEND_TIMEOUT_MS 250/* ms: a blocked send rechecks the flags */
#define SIM_LINGER_MS 3000     /* ms: queued frames still go out at close */
#define SIM_TEXT_MAX 4096      /* bytes: a text/JSON reading of the plant's
				  ten channels at <= 25 bytes each fits */

/* The XPUB socket on --to, or on the config's first input turned round
 * (the daemon connects there, so the simulator binds).  0 or exit code. */
static int sim_open(struct sim *sm, qw_bus *bus, qw_bus_sock **s)
{
	struct qw_endpoint ep;
	struct qw_bus_opts o;
	struct qw_bus_curve curve;
	char err[QW_AUTH_ERR_MAX];
	int rc;

	if (sm->o.to != NULL) {
		if (qw_bus_endpoint_parse(sm->o.to, 0, &ep) != 0) {
			fprintf(stderr, "quadwatch sim: --to %s: not an "
				"endpoint\n", sm->o.to);
			return QW_EXIT_USAGE;
		}
	} else if (sm->cfg.ninputs == 0) {
		fprintf(stderr, "quadwatch sim: %s has no ZeroMQ input (MQTT "
			"only); give --to ENDPOINT\n", sm->cfg.path);
		return QW_EXIT_USAGE;
	} else {
		ep = sm->cfg.inputs[0];
		ep.bind = !ep.bind;
	}
	qw_bus_opts_default(&o);
	o.xpub_nodrop = 1; /* a slow subscriber slows us, loses nothing */
	o.sndtimeo_ms = SIM_SEND_TIMEOUT_MS;
	o.rcvtimeo_ms = SIM_TICK_MS;
	o.linger_ms = SIM_LINGER_MS;
	if (sm->o.key != NULL || sm->o.server_key != NULL) {
		/* Bound: a CURVE server (the daemon's publisher_key is our
		 * .pub); connecting: a client of the daemon's input. */
		if (qw_auth_endpoint(sm->o.key, sm->o.server_key, ep.bind,
				     &curve, err, sizeof err) != 0) {
			fprintf(stderr, "quadwatch sim: %s\n", err);
			return QW_EXIT_USAGE;
		}
		o.security = &curve;
	}
	rc = qw_bus_open(bus, QW_BUS_XPUB, &ep, &o, s);
	explicit_bzero(&curve, sizeof curve);
	if (rc != 0) {
		fprintf(stderr, "quadwatch sim: %s%s: %s\n", ep.bind ? "@" : ">",
			ep.addr, qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	return 0;
}

/* Waits up to --wait seconds until every group's topic is subscribed
 * (XPUB hands us each subscription as a frame "\1PREFIX"). */
static void sim_wait(struct sim *sm, qw_bus_sock *s)
{
	char buf[QW_BUS_TOPIC_MAX];
	double end = qw_log_monotonic() + sm->o.wait;
	size_t g, len, missing = sm->cfg.ngroups;
	unsigned char *ok = calloc(sm->cfg.ngroups, 1);

	while (ok != NULL && missing > 0 && !*sm->stop &&
	       qw_log_monotonic() < end) {
		if (qw_bus_recv_frame(s, buf, sizeof buf, &len, 0) != 0 ||
		    len < 1 || len > sizeof buf || buf[0] != 1)
			continue;
		for (g = 0; g < sm->cfg.ngroups; g++)
			if (!ok[g] && len - 1 <= strlen(sm->cfg.groups[g].name)
			    && memcmp(buf + 1, sm->cfg.groups[g].name,
				      len - 1) == 0) {
				ok[g] = 1;
				missing--;
			}
	}
	for (g = 0; ok != NULL && g < sm->cfg.ngroups; g++)
		if (!ok[g] && !*sm->stop && !sm->o.quiet)
			fprintf(stderr, "quadwatch sim: nobody subscribed to "
				"%s after %g s; publishing anyway\n",
				sm->cfg.groups[g].name, sm->o.wait);
	free(ok);
}

/* Sleeps until reading k is due at --rate per second from t0. */
static void sim_pace(const struct sim *sm, double t0, uint64_t k)
{
	struct timespec ts;
	double due;

	if (sm->o.rate <= 0)
		return;
	due = t0 + (double)k / sm->o.rate;
	ts.tv_sec = (time_t)floor(due);
	ts.tv_nsec = (long)((due - floor(due)) * 1e9);
	while (!*sm->stop && clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME,
					    &ts, NULL) == EINTR)
		;
}

/* Sends one message, retrying a send that would block until it goes or
 * a signal stops us.  0, 1 (stopped) or QW_EIO. */
static int sim_send(const struct sim *sm, qw_bus_sock *s, const char *topic,
		    const void *body, size_t len)
{
	int rc;

	while ((rc = qw_bus_send(s, topic, strlen(topic), body, len, 0)) == 1
	       && !*sm->stop)
		;
	return rc;
}

/* Reading k (x: the plant's channels) of group g into its batch, sent
 * when the batch is full or the run ends. */
static int sim_put(struct sim *sm, qw_bus_sock *s, size_t g, uint64_t k,
		   const double *x)
{
	const struct qw_group_conf *gc = &sm->cfg.groups[g];
	size_t fill = (size_t)(k % sm->o.batch), j, len;
	double *rows = sm->x + g * sm->o.batch * sm->pmax;
	double *row = rows + fill * gc->p;
	double *t = sm->t + g * sm->o.batch;
	size_t n = fill + 1;

	t[fill] = (double)(sm->start_ns + (int64_t)k * sm->dt_ns) / 1e9;
	for (j = 0; j < gc->p; j++)
		row[j] = x[sm->map[sm->off[g] + j]];
	if (n < sm->o.batch && k + 1 < sm->o.count)
		return 0;
	if (sm->o.format == QW_WIRE_TEXT)
		len = qw_wire_encode_text((char *)sm->buf, sm->buf_cap, gc->p,
					  t[0], row);
	else if (sm->o.format == QW_WIRE_JSON)
		len = qw_wire_encode_json((char *)sm->buf, sm->buf_cap, gc->p,
					  t[0], row);
	else
		len = qw_wire_encode_binary(sm->buf, sm->buf_cap, gc->p, n,
					    sm->seq[g], t, rows);
	sm->seq[g] += n;
	return len == 0 ? QW_ERROR(QW_EOVERSIZE)
			: sim_send(sm, s, gc->name, sm->buf, len);
}

/* Epoch ns as HH:MM:SS UTC. */
static void sim_clock(int64_t ns, char *buf, size_t cap)
{
	time_t s = (time_t)(ns / 1000000000);
	struct tm tm;

	gmtime_r(&s, &tm);
	strftime(buf, cap, "%H:%M:%S", &tm);
}

/* Prints "HH:MM:SS  fault i/n ..." when a fault window opens or closes. */
static void sim_announce(struct sim *sm, uint64_t k)
{
	char when[16], what[96];
	size_t i, g;

	for (i = 0; i < sm->nfaults; i++) {
		const struct qw_scn_fault *f = &sm->faults[i];
		int on = qw_scn_active(f, sm->dt, k);

		if (on == sm->on[i])
			continue;
		sm->on[i] = (unsigned char)on;
		for (g = 0; g < sm->cfg.ngroups && !qw_sim_group_has(sm, g,
								  f->chan); g++)
			;
		sim_clock(sm->start_ns + (int64_t)k * sm->dt_ns, when,
			  sizeof when);
		if (f->kind == QW_SCN_BREAK)
			snprintf(what, sizeof what, "reads %.0f%% %s, the rest "
				 "of the plant as before", fabs(f->size) * 100,
				 f->size < 0 ? "low" : "high");
		else if (f->kind == QW_SCN_STEP || f->kind == QW_SCN_DRIFT)
			snprintf(what, sizeof what, "%s by %+g", f->kind ==
				 QW_SCN_STEP ? "steps" : "drifts", f->size);
		else
			snprintf(what, sizeof what, "%s", f->kind ==
				 QW_SCN_STUCK ? "sticks at its last value"
					      : "drops out (readings missing)");
		if (on)
			printf("%s  fault %zu/%zu injected (%s): %s/%s %s, "
			       "for %g s\n", when, i + 1, sm->nfaults,
			       qw_scn_kind_name(f->kind),
			       g < sm->cfg.ngroups ? sm->cfg.groups[g].name
						   : "-",
			       qw_scn_chan_name(f->chan), what, f->duration);
		else
			printf("%s  fault %zu/%zu over: %s back to normal\n",
			       when, i + 1, sm->nfaults,
			       qw_scn_chan_name(f->chan));
		fflush(stdout);
	}
}

/* Buffers for the bus loop: per group a batch, one encoded frame. */
static int sim_bus_alloc(struct sim *sm)
{
	size_t g, bin;

	for (g = 0; g < sm->cfg.ngroups; g++)
		if (sm->cfg.groups[g].p > sm->pmax)
			sm->pmax = sm->cfg.groups[g].p;
	bin = qw_wire_binary_len(sm->pmax, sm->o.batch);
	sm->buf_cap = bin > SIM_TEXT_MAX ? bin : SIM_TEXT_MAX;
	sm->buf = malloc(sm->buf_cap);
	sm->t = calloc(sm->cfg.ngroups * sm->o.batch, sizeof *sm->t);
	sm->x = calloc(sm->cfg.ngroups * sm->o.batch * sm->pmax,
		       sizeof *sm->x);
	sm->seq = calloc(sm->cfg.ngroups, sizeof *sm->seq);
	sm->on = calloc(sm->nfaults + 1, 1);
	return bin == 0 || sm->buf == NULL || sm->t == NULL || sm->x == NULL
	       || sm->seq == NULL || sm->on == NULL ? QW_EXIT_FAIL : 0;
}

static int sim_bus_loop(struct sim *sm, qw_bus_sock *s)
{
	double x[QW_SCN_NCHAN], t0 = qw_log_monotonic(), secs;
	uint64_t k;
	size_t g;
	int rc = 0;

	for (k = 0; k < sm->o.count && !*sm->stop && rc == 0; k++) {
		sim_pace(sm, t0, k);
		qw_scn_next(sm->scn, x, NULL);
		if (!sm->o.quiet)
			sim_announce(sm, k);
		for (g = 0; g < sm->cfg.ngroups && rc == 0; g++)
			rc = sim_put(sm, s, g, k, x);
	}
	secs = qw_log_monotonic() - t0;
	if (rc < 0) {
		fprintf(stderr, "quadwatch sim: send: %s\n", qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	if (!sm->o.quiet)
		fprintf(stderr, "quadwatch sim: %llu readings per group, %zu "
			"groups, in %.1f s (%.0f readings/s per group)\n",
			(unsigned long long)k, sm->cfg.ngroups, secs,
			secs > 0 ? (double)k / secs : 0.0);
	return *sm->stop ? QW_EXIT_FAIL : QW_EXIT_OK;
}

int qw_sim_bus(struct sim *sm)
{
	qw_bus *bus = qw_bus_alloc();
	qw_bus_sock *s = NULL;
	int rc;

	if (bus == NULL || sim_bus_alloc(sm) != 0)
		rc = QW_EXIT_FAIL;
	else if ((rc = sim_open(sm, bus, &s)) == 0) {
		sim_wait(sm, s);
		rc = sim_bus_loop(sm, s);
	}
	qw_bus_close(s); /* lingers until the queue is out */
	qw_bus_free(bus);
	return rc;
}

