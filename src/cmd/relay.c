/* relay.c: `quadwatch relay FRONTEND BACKEND [--server-key FILE]...
 * [--key FILE] [--client-keys DIR]`, the fan-in of many daemons' alerts
 * into one endpoint (see quadwatch-relay(1)).
 *
 * An XSUB socket on FRONTEND, one endpoint or several separated by commas
 * (each bound unless written ">addr"), and an XPUB socket on BACKEND
 * (bound unless ">addr") that tail and other subscribers connect to;
 * zmq_proxy forwards messages one way and subscriptions the other.  The
 * daemons either connect their alert sockets to a bound FRONTEND (alerts
 * = >tcp://relay:port), or bind them and the relay connects to each.
 *
 * CURVE (RFC 26), each side on its own:
 *  - toward the daemons, with --server-key (a daemon's NAME.pub: once for
 *    every FRONTEND endpoint, or once per endpoint in order), the relay
 *    connects to their bound alert sockets as a CURVE client with its own
 *    pair from --key (list its .pub in each daemon's client_keys), or a
 *    session pair without --key (let in only by daemons without
 *    client_keys);
 *  - toward its subscribers, with --client-keys DIR, BACKEND is a CURVE
 *    server with the secret key of --key, and only the NAME.pub keys in
 *    DIR may subscribe.  The ZAP handler (RFC 27) that decides is auth.c's
 *    qw_auth_zap, as in the daemon; here it runs on a thread of its own,
 *    since zmq_proxy holds the main thread.  That thread owns only the ZAP
 *    socket (libzmq sockets are not shared between threads) and ends when
 *    the proxy does.
 *
 * SIGINT/SIGTERM interrupt the proxy; the relay exits 0.  Workload:
 * alerts and stats of a few daemons; the proxy copies nothing itself; one
 * ZAP request per subscriber connection. */
#include <pthread.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdio.h>
#include <string.h>

#include "auth.h"
#include "bus.h"
#include "cmd.h"
#include "log.h"
#include "quadwatch.h"

#define RELAY_HWM 100000 /* messages queued per peer: bursts of alerts and
			    stats from many daemons */
#define RELAY_FRONT_MAX 64      /* FRONTEND endpoints: daemons per relay */
#define RELAY_ZAP_TICK_MS 250   /* ms: longest ZAP wait, bounds the stop */
#define RELAY_PROXY_TICK_MS 250 /* ms: longest proxy poll, bounds the stop
				   when the signal came mid-forward */
#define RELAY_ZAP_LOG_EVERY 10.0 /* s between refused-subscriber lines */

static volatile sig_atomic_t relay_stop;

static void relay_on_stop(int sig)
{
	(void)sig;
	relay_stop = 1;
}

struct relay_opts {
	struct qw_endpoint front[RELAY_FRONT_MAX];
	size_t nfront;
	struct qw_endpoint back;
	const char *server_key[RELAY_FRONT_MAX]; /* --server-key, in order */
	size_t nserver_key;
	const char *key;          /* --key: own pair (NAME.key) */
	const char *client_keys;  /* --client-keys: backend allow-list */
};

/* The ZAP handler's thread and what it reports. */
struct relay_zap {
	qw_bus_sock *rep;            /* bound at QW_BUS_ZAP_ENDPOINT */
	qw_bus_poller *poller;
	const qw_auth *allowed;      /* the backend's allow-list */
	atomic_int stop;
	uint64_t let_in, refused;    /* read after the join */
	struct qw_log_limit log;
};

static int relay_usage(void)
{
	fprintf(stderr, "usage: quadwatch relay FRONTEND[,FRONTEND...] "
		"BACKEND [--server-key FILE]...\n"
		"                       [--key FILE] [--client-keys DIR]\n");
	return QW_EXIT_USAGE;
}

/* FRONTEND: endpoints separated by commas, each bound unless ">addr". */
static int relay_fronts(const char *s, struct relay_opts *o)
{
	char one[QW_CONFIG_ENDPOINT_MAX + 1];
	const char *end;
	size_t n = strlen(s);

	if (n == 0 || s[n - 1] == ',')
		return -1;
	for (o->nfront = 0; *s != '\0'; s = *end ? end + 1 : end) {
		end = strchr(s, ',');
		if (end == NULL)
			end = s + strlen(s);
		n = (size_t)(end - s);
		if (o->nfront == RELAY_FRONT_MAX || n >= sizeof one)
			return -1;
		memcpy(one, s, n);
		one[n] = '\0';
		if (qw_bus_endpoint_parse(one, 1, &o->front[o->nfront]) != 0)
			return -1;
		o->nfront++;
	}
	return o->nfront > 0 ? 0 : -1;
}

static int relay_args(int argc, char **argv, struct relay_opts *o)
{
	int i, npos = 0;

	memset(o, 0, sizeof *o);
	for (i = 1; i < argc; i++) {
		const char *a = argv[i];

		if (strcmp(a, "--server-key") == 0 && i + 1 < argc &&
		    o->nserver_key < RELAY_FRONT_MAX)
			o->server_key[o->nserver_key++] = argv[++i];
		else if (strcmp(a, "--key") == 0 && i + 1 < argc && !o->key)
			o->key = argv[++i];
		else if (strcmp(a, "--client-keys") == 0 && i + 1 < argc &&
			 !o->client_keys)
			o->client_keys = argv[++i];
		else if (a[0] == '-' || npos == 2)
			return relay_usage();
		else if (npos++ == 0 ? relay_fronts(a, o) != 0
			 : qw_bus_endpoint_parse(a, 1, &o->back) != 0)
			return relay_usage();
	}
	if (npos != 2)
		return relay_usage();
	return 0;
}

/* What the options imply that the parser cannot see; NULL or why not. */
static const char *relay_check(const struct relay_opts *o)
{
	size_t i;

	if (o->nserver_key > 1 && o->nserver_key != o->nfront)
		return "give --server-key once (every FRONTEND endpoint) or "
		       "once per FRONTEND endpoint, in order";
	for (i = 0; o->nserver_key > 0 && i < o->nfront; i++)
		if (o->front[i].bind)
			return "with --server-key the relay is a CURVE client: "
			       "every FRONTEND endpoint must connect (>addr) "
			       "to a daemon's bound alert socket";
	if (o->client_keys != NULL && o->key == NULL)
		return "--client-keys makes BACKEND a CURVE server: it needs "
		       "the relay's own secret key, --key FILE";
	if (o->client_keys != NULL && !o->back.bind)
		return "--client-keys makes BACKEND a CURVE server: it must "
		       "bind (@addr)";
	if (o->key != NULL && o->nserver_key == 0 && o->client_keys == NULL)
		return "--key alone does nothing: add --server-key (CURVE "
		       "toward the daemons) or --client-keys (toward the "
		       "subscribers)";
	return NULL;
}

/* No SA_RESTART: a signal interrupts the proxy's poll at once. */
static int relay_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = relay_on_stop;
	return sigaction(SIGINT, &sa, NULL) || sigaction(SIGTERM, &sa, NULL);
}

/* ---- ZAP ----------------------------------------------------------------- */

static void relay_zap_serve(struct relay_zap *z)
{
	struct qw_bus_parts req, rep;
	struct qw_auth_verdict v;

	while (qw_bus_recv_parts(z->rep, &req, 1) == 0) {
		qw_auth_zap(z->allowed, &req, &rep, &v);
		if (v.allowed) {
			z->let_in++;
			qw_log(QW_LOG_DEBUG, "subscriber %s (%s) from %s "
			       "let in", v.key, v.name != NULL ? v.name : "-",
			       v.address);
		} else {
			z->refused++;
			qw_log_limited(&z->log, QW_LOG_WARN, "subscriber %s "
				       "from %s refused: %s",
				       v.key[0] ? v.key : "-", v.address,
				       v.why);
		}
		if (qw_bus_send_parts(z->rep, &rep, 1) != 0)
			qw_log(QW_LOG_ERROR, "ZAP reply: %s",
			       qw_bus_strerror());
	}
}

static void *relay_zap_main(void *arg)
{
	struct relay_zap *z = arg;
	int rc;

	while (!atomic_load(&z->stop)) {
		rc = qw_bus_poll(z->poller, RELAY_ZAP_TICK_MS);
		if (rc < 0) {
			qw_log(QW_LOG_ERROR, "ZAP poll: %s", qw_bus_strerror());
			break;
		}
		if (rc == 0)
			relay_zap_serve(z);
	}
	return NULL;
}

/* Binds the ZAP handler and starts its thread with SIGINT and SIGTERM
 * blocked, so that they reach the proxy's thread.  0 or QW_EXIT_FAIL. */
static int relay_zap_start(qw_bus *bus, struct relay_zap *z, pthread_t *th)
{
	struct qw_endpoint ep;
	struct qw_bus_opts o;
	sigset_t block, old;
	int rc;

	memset(&ep, 0, sizeof ep);
	snprintf(ep.addr, sizeof ep.addr, "%s", QW_BUS_ZAP_ENDPOINT);
	ep.bind = 1;
	qw_bus_opts_default(&o);
	o.sndtimeo_ms = 0; /* the requester is in this process */
	z->log.interval = RELAY_ZAP_LOG_EVERY;
	z->log.last = -1;
	z->poller = qw_bus_poller_alloc(1);
	if (z->poller == NULL ||
	    qw_bus_open(bus, QW_BUS_REP, &ep, &o, &z->rep) != 0 ||
	    qw_bus_poller_add(z->poller, z->rep) != 0) {
		qw_log(QW_LOG_ERROR, "ZAP handler %s: %s", ep.addr,
		       qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	sigemptyset(&block);
	sigaddset(&block, SIGINT);
	sigaddset(&block, SIGTERM);
	pthread_sigmask(SIG_BLOCK, &block, &old);
	rc = pthread_create(th, NULL, relay_zap_main, z);
	pthread_sigmask(SIG_SETMASK, &old, NULL);
	if (rc != 0) {
		qw_log(QW_LOG_ERROR, "ZAP thread: %s", strerror(rc));
		return QW_EXIT_FAIL;
	}
	return 0;
}

/* ---- sockets ------------------------------------------------------------- */

static int relay_open(qw_bus *bus, int kind, const struct qw_endpoint *ep,
		      const struct qw_bus_curve *curve, qw_bus_sock **s)
{
	struct qw_bus_opts o;

	qw_bus_opts_default(&o);
	o.sndhwm = RELAY_HWM;
	o.rcvhwm = RELAY_HWM;
	o.security = curve;
	if (qw_bus_open(bus, kind, ep, &o, s) != 0) {
		qw_log(QW_LOG_ERROR, "relay %s%s: %s", ep->bind ? "@" : ">",
		       ep->addr, qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	return 0;
}

/* The XSUB on every FRONTEND endpoint, each with its daemon's server key
 * when CURVE is on.  0, QW_EXIT_USAGE (a bad key file) or QW_EXIT_FAIL. */
static int relay_front(qw_bus *bus, const struct relay_opts *o,
		       qw_bus_sock **s)
{
	struct qw_bus_curve curve, *c = o->nserver_key > 0 ? &curve : NULL;
	char err[QW_AUTH_ERR_MAX];
	size_t i;
	int rc = 0;

	for (i = 0; rc == 0 && i < o->nfront; i++) {
		const struct qw_endpoint *ep = &o->front[i];
		const char *server = o->server_key[o->nserver_key > 1 ? i : 0];

		if (c != NULL &&
		    qw_auth_client(o->key, server, c, err, sizeof err) != 0) {
			qw_log(QW_LOG_ERROR, "relay >%s: %s", ep->addr, err);
			rc = QW_EXIT_USAGE;
		} else if (i == 0) {
			rc = relay_open(bus, QW_BUS_XSUB, ep, c, s);
		} else if (qw_bus_attach(*s, ep, c) != 0) {
			qw_log(QW_LOG_ERROR, "relay %s%s: %s",
			       ep->bind ? "@" : ">", ep->addr,
			       qw_bus_strerror());
			rc = QW_EXIT_FAIL;
		}
	}
	explicit_bzero(&curve, sizeof curve);
	return rc;
}

static void relay_report(const struct relay_opts *o, const qw_auth *allowed)
{
	qw_log(QW_LOG_INFO, "relaying %zu frontend endpoint%s (%s) to %s (%s)",
	       o->nfront, o->nfront == 1 ? "" : "s",
	       o->nserver_key > 0 ? "CURVE client" : "in the clear",
	       o->back.addr, allowed != NULL ? "CURVE server" : "in the clear");
	if (allowed != NULL)
		qw_log(QW_LOG_INFO, "%zu allowed subscriber keys",
		       qw_auth_count(allowed));
	if (o->nserver_key > 0 && allowed == NULL &&
	    strncmp(o->back.addr, "tcp://", 6) == 0)
		qw_log(QW_LOG_WARN, "alerts that came over CURVE leave in the "
		       "clear on tcp://%s (add --key and --client-keys)",
		       o->back.addr + 6);
}

/* The XPUB on BACKEND; with --client-keys a CURVE server whose ZAP
 * handler (started here, before the socket binds: without one libzmq lets
 * every client in) checks the allow-list.  The start is logged first:
 * once the ZAP thread runs, the main thread logs nothing until it has
 * joined it, since log.c writes a line in several calls. */
static int relay_back(qw_bus *bus, const struct relay_opts *o,
		      struct relay_zap *z, qw_auth **allowed, pthread_t *th,
		      int *started, qw_bus_sock **s)
{
	struct qw_bus_curve curve;
	char err[QW_AUTH_ERR_MAX];
	int rc;

	if (o->client_keys == NULL) {
		relay_report(o, NULL);
		return relay_open(bus, QW_BUS_XPUB, &o->back, NULL, s);
	}
	if (qw_auth_endpoint(o->key, NULL, 1, &curve, err, sizeof err) != 0 ||
	    qw_auth_load(o->client_keys, allowed, err, sizeof err) != 0) {
		qw_log(QW_LOG_ERROR, "relay @%s: %s", o->back.addr, err);
		explicit_bzero(&curve, sizeof curve);
		return QW_EXIT_USAGE;
	}
	relay_report(o, *allowed);
	z->allowed = *allowed;
	rc = relay_zap_start(bus, z, th);
	*started = rc == 0;
	if (rc == 0)
		rc = relay_open(bus, QW_BUS_XPUB, &o->back, &curve, s);
	explicit_bzero(&curve, sizeof curve);
	return rc;
}

int qw_cmd_relay(int argc, char **argv)
{
	struct relay_opts o;
	struct relay_zap z;
	const char *why;
	qw_bus *bus;
	qw_bus_sock *front = NULL, *back = NULL;
	qw_auth *allowed = NULL;
	pthread_t th;
	int rc, started = 0, proxy_failed = 0;

	if ((rc = relay_args(argc, argv, &o)) != 0)
		return rc;
	if ((why = relay_check(&o)) != NULL) {
		fprintf(stderr, "quadwatch relay: %s\n", why);
		return QW_EXIT_USAGE;
	}
	if (relay_signals() != 0)
		return QW_EXIT_FAIL;
	bus = qw_bus_alloc();
	if (bus == NULL)
		return QW_EXIT_FAIL;
	memset(&z, 0, sizeof z);
	rc = relay_front(bus, &o, &front);
	if (rc == 0)
		rc = relay_back(bus, &o, &z, &allowed, &th, &started, &back);
	if (rc == 0 && qw_bus_proxy(front, back, &relay_stop,
				    RELAY_PROXY_TICK_MS) < 0) {
		proxy_failed = 1;
		rc = QW_EXIT_FAIL;
	}
	if (started) {
		atomic_store(&z.stop, 1);
		pthread_join(th, NULL);
	}
	if (proxy_failed) /* errno is this thread's: still the proxy's */
		qw_log(QW_LOG_ERROR, "proxy: %s", qw_bus_strerror());
	if (rc == 0)
		qw_log(QW_LOG_INFO, "relay stopping");
	if (allowed != NULL)
		qw_log(QW_LOG_INFO, "subscribers: %llu let in, %llu refused",
		       (unsigned long long)z.let_in,
		       (unsigned long long)z.refused);
	qw_bus_close(front);
	qw_bus_close(back);
	qw_bus_close(z.rep);
	qw_bus_poller_free(z.poller);
	qw_auth_free(allowed);
	qw_bus_free(bus);
	return rc;
}
