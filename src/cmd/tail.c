/* tail.c: `quadwatch tail ENDPOINT [--json] [--stats] [--count N]
 * [--key FILE] [--server-key FILE]`, prints alerts as they arrive (see
 * quadwatch-tail(1)); with --server-key the subscription is CURVE.  Subscribes to "alert."
 * (and "stats" with --stats) on a daemon's or a relay's alert endpoint
 * (connects unless ENDPOINT starts with '@') and writes one line per
 * message: readable by default, the raw JSON with --json.  Stops on
 * SIGINT/SIGTERM or after N messages.  Workload: alerts are rare; stats
 * come every few seconds. */
#include <jansson.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "alert.h"
#include "auth.h"
#include "bus.h"
#include "cmd.h"
#include "num.h"
#include "quadwatch.h"

#define TAIL_MSG_MAX (4u << 20) /* bytes: a stats message of the largest
				   config fits */
#define TAIL_TICK_MS 250        /* ms: longest wait, bounds signal latency */
#define TAIL_TOP 3              /* channels shown per readable alert */

static volatile sig_atomic_t tail_stop;

static void tail_on_stop(int sig)
{
	(void)sig;
	tail_stop = 1;
}

struct tail_opts {
	struct qw_endpoint ep;
	int json, stats;
	uint64_t count; /* 0 = forever */
	const char *key, *server_key; /* CURVE key files; NULL: none */
};

static int tail_usage(void)
{
	fprintf(stderr, "usage: quadwatch tail ENDPOINT [--json] [--stats] "
		"[--count N]\n                      [--key FILE] "
		"[--server-key FILE]\n");
	return QW_EXIT_USAGE;
}

static int tail_args(int argc, char **argv, struct tail_opts *t)
{
	int i, have_ep = 0;

	memset(t, 0, sizeof *t);
	for (i = 1; i < argc; i++) {
		if (strcmp(argv[i], "--json") == 0)
			t->json = 1;
		else if (strcmp(argv[i], "--stats") == 0)
			t->stats = 1;
		else if (strcmp(argv[i], "--key") == 0 && i + 1 < argc)
			t->key = argv[++i];
		else if (strcmp(argv[i], "--server-key") == 0 && i + 1 < argc)
			t->server_key = argv[++i];
		else if (strcmp(argv[i], "--count") == 0 && i + 1 < argc) {
			if (qw_num_u64(argv[++i], (size_t)-1, 1, UINT64_MAX,
				       &t->count) != 0)
				return tail_usage();
		} else if (!have_ep && argv[i][0] != '-' &&
			   qw_bus_endpoint_parse(argv[i], 0, &t->ep) == 0)
			have_ep = 1;
		else
			return tail_usage();
	}
	return have_ep && (t->key == NULL || t->server_key != NULL)
	       ? 0 : tail_usage();
}

/* ISO 8601 UTC with milliseconds; "-" for a time that is not finite. */
static void tail_time(double t, char *buf, size_t cap)
{
	struct tm tm;
	time_t s;
	long long ms;
	char day[32];

	if (!isfinite(t) || t < 0 || t > 253402300799.0) { /* 9999-12-31 */
		snprintf(buf, cap, "-");
		return;
	}
	ms = llround(t * 1e3); /* 0.1 s steps print as .100, not .099 */
	s = (time_t)(ms / 1000);
	gmtime_r(&s, &tm);
	strftime(day, sizeof day, "%Y-%m-%dT%H:%M:%S", &tm);
	snprintf(buf, cap, "%s.%03dZ", day, (int)(ms % 1000));
}

static void tail_alert(const char *text, size_t len)
{
	struct qw_alert_parsed a;
	char when[64];
	size_t i;

	if (qw_alert_decode(text, len, &a) != 0) {
		printf("(unreadable alert: %.*s)\n", (int)len, text);
		return;
	}
	tail_time(a.time, when, sizeof when);
	printf("%s %s %s score %.4g %s limit %.4g (p %.3g, dof %u)", when,
	       a.group, a.event == QW_EVENT_RAISE ? "RAISE" : "clear",
	       a.score, a.score > a.limit ? ">" : "<=", a.limit, a.pvalue,
	       a.dof);
	for (i = 0; i < a.nchan && i < TAIL_TOP; i++)
		printf("%s%s drop %.3g z %+.2f", i == 0 ? " top: " : ", ",
		       a.chan[i], a.drop[i], a.z[i]);
	putchar('\n');
}

static uint64_t tail_count(json_t *o, const char *key)
{
	json_t *v = json_object_get(o, key);

	return json_is_integer(v) ? (uint64_t)json_integer_value(v) : 0;
}

static void tail_stats(const char *text, size_t len)
{
	json_error_t e;
	json_t *o = json_loadb(text, len, 0, &e), *rej, *v;
	uint64_t nrej = 0;
	const char *k;
	char when[64];

	if (o == NULL) {
		printf("(unreadable stats)\n");
		return;
	}
	rej = json_object_get(o, "rejected");
	json_object_foreach(rej, k, v)
		nrej += (uint64_t)json_integer_value(v);
	tail_time(json_number_value(json_object_get(o, "time")), when,
		  sizeof when);
	printf("%s stats received %llu readings %llu rejected %llu lost %llu "
	       "alarms %llu alerts_dropped %llu\n", when,
	       (unsigned long long)tail_count(o, "received"),
	       (unsigned long long)tail_count(o, "readings"),
	       (unsigned long long)nrej,
	       (unsigned long long)tail_count(o, "lost"),
	       (unsigned long long)tail_count(o, "alarms"),
	       (unsigned long long)tail_count(o, "alerts_dropped"));
	json_decref(o);
}

static void tail_print(const struct tail_opts *t, const struct qw_bus_msg *m)
{
	size_t len = m->body_len < m->body_cap ? m->body_len : m->body_cap;
	const char *text = (const char *)m->body;

	if (t->json)
		printf("%.*s\n", (int)len, text);
	else if (strncmp(m->head, QW_ALERT_TOPIC_PREFIX,
			 strlen(QW_ALERT_TOPIC_PREFIX)) == 0)
		tail_alert(text, len);
	else
		tail_stats(text, len);
	fflush(stdout);
}

static int tail_loop(const struct tail_opts *t, qw_bus_sock *s,
		     struct qw_bus_msg *m)
{
	qw_bus_poller *p = qw_bus_poller_alloc(1);
	uint64_t seen = 0;
	int rc = 0;

	if (p == NULL || qw_bus_poller_add(p, s) != 0) {
		qw_bus_poller_free(p);
		return QW_EXIT_FAIL;
	}
	while (!tail_stop && (t->count == 0 || seen < t->count)) {
		rc = qw_bus_poll(p, TAIL_TICK_MS);
		if (rc < 0)
			break;
		while (rc == 0 && (t->count == 0 || seen < t->count) &&
		       qw_bus_recv(s, m, 1) == 0) {
			if (m->nframes != 2 || m->body_len > m->body_cap)
				continue;
			tail_print(t, m);
			seen++;
		}
	}
	qw_bus_poller_free(p);
	if (rc < 0) {
		fprintf(stderr, "quadwatch tail: %s\n", qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	return QW_EXIT_OK;
}

static int tail_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = tail_on_stop;
	return sigaction(SIGINT, &sa, NULL) || sigaction(SIGTERM, &sa, NULL);
}

/* The subscriber, CURVE when --server-key was given. */
static int tail_open(qw_bus *bus, const struct tail_opts *t, qw_bus_sock **s)
{
	struct qw_bus_opts o;
	struct qw_bus_curve curve;
	char err[QW_AUTH_ERR_MAX];
	int rc;

	qw_bus_opts_default(&o);
	if (t->server_key != NULL) {
		if (qw_auth_client(t->key, t->server_key, &curve, err,
				   sizeof err) != 0) {
			fprintf(stderr, "quadwatch tail: %s\n", err);
			return QW_ERROR(QW_EFORMAT);
		}
		o.security = &curve;
	}
	rc = qw_bus_open(bus, QW_BUS_SUB, &t->ep, &o, s);
	explicit_bzero(&curve, sizeof curve);
	return rc;
}

int qw_cmd_tail(int argc, char **argv)
{
	struct tail_opts t;
	struct qw_bus_msg m;
	qw_bus *bus;
	qw_bus_sock *s = NULL;
	int rc;

	if ((rc = tail_args(argc, argv, &t)) != 0)
		return rc;
	memset(&m, 0, sizeof m);
	m.body_cap = TAIL_MSG_MAX;
	m.body = malloc(m.body_cap);
	bus = qw_bus_alloc();
	rc = m.body == NULL || bus == NULL || tail_signals() ? QW_EIO
	     : tail_open(bus, &t, &s);
	if (rc == 0)
		rc = qw_bus_subscribe(s, QW_ALERT_TOPIC_PREFIX, 1);
	if (rc == 0 && t.stats)
		rc = qw_bus_subscribe(s, "stats", 1);
	if (rc != 0) {
		if (rc != QW_EFORMAT) /* a key file error is already said */
			fprintf(stderr, "quadwatch tail: %s: %s\n", t.ep.addr,
				qw_bus_strerror());
		rc = QW_EXIT_FAIL;
	} else {
		rc = tail_loop(&t, s, &m);
	}
	qw_bus_close(s);
	qw_bus_free(bus);
	free(m.body);
	return rc;
}
