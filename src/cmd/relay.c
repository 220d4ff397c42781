/* relay.c: `quadwatch relay FRONTEND BACKEND`, the fan-in of many daemons'
 * alerts into one endpoint (see quadwatch-relay(1)).  An XSUB socket on
 * FRONTEND (bound unless written ">addr": the daemons' alert sockets
 * connect to it, so their config says alerts = >tcp://relay:port) and an
 * XPUB socket on BACKEND (bound unless ">addr") that tail and other
 * subscribers connect to; zmq_proxy forwards messages one way and
 * subscriptions the other.  SIGINT/SIGTERM interrupt the proxy; the relay
 * exits 0.  Workload: alerts and stats of a few daemons; the proxy copies
 * nothing itself. */
#include <signal.h>
#include <stdio.h>
#include <string.h>

#include "bus.h"
#include "cmd.h"
#include "log.h"
#include "quadwatch.h"

#define RELAY_HWM 100000 /* messages queued per peer: bursts of alerts and
			    stats from many daemons */

static volatile sig_atomic_t relay_stop;

static void relay_on_stop(int sig)
{
	(void)sig;
	relay_stop = 1;
}

static int relay_usage(void)
{
	fprintf(stderr, "usage: quadwatch relay FRONTEND BACKEND\n");
	return QW_EXIT_USAGE;
}

/* No SA_RESTART: a signal makes zmq_proxy return EINTR. */
static int relay_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = relay_on_stop;
	return sigaction(SIGINT, &sa, NULL) || sigaction(SIGTERM, &sa, NULL);
}

static int relay_open(qw_bus *bus, int kind, const struct qw_endpoint *ep,
		      qw_bus_sock **s)
{
	struct qw_bus_opts o;

	qw_bus_opts_default(&o);
	o.sndhwm = RELAY_HWM;
	o.rcvhwm = RELAY_HWM;
	if (qw_bus_open(bus, kind, ep, &o, s) != 0) {
		qw_log(QW_LOG_ERROR, "relay %s%s: %s", ep->bind ? "@" : ">",
		       ep->addr, qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	return 0;
}

int qw_cmd_relay(int argc, char **argv)
{
	struct qw_endpoint fe, be;
	qw_bus *bus;
	qw_bus_sock *front = NULL, *back = NULL;
	int rc;

	if (argc != 3 || qw_bus_endpoint_parse(argv[1], 1, &fe) != 0 ||
	    qw_bus_endpoint_parse(argv[2], 1, &be) != 0)
		return relay_usage();
	if (relay_signals() != 0)
		return QW_EXIT_FAIL;
	bus = qw_bus_alloc();
	if (bus == NULL)
		return QW_EXIT_FAIL;
	rc = relay_open(bus, QW_BUS_XSUB, &fe, &front);
	if (rc == 0)
		rc = relay_open(bus, QW_BUS_XPUB, &be, &back);
	if (rc == 0) {
		qw_log(QW_LOG_INFO, "relaying %s to %s", fe.addr, be.addr);
		while (!relay_stop && rc == 0)
			if (qw_bus_proxy(front, back) < 0) {
				qw_log(QW_LOG_ERROR, "proxy: %s",
				       qw_bus_strerror());
				rc = QW_EXIT_FAIL;
			}
		if (rc == 0)
			qw_log(QW_LOG_INFO, "relay stopping");
	}
	qw_bus_close(front);
	qw_bus_close(back);
	qw_bus_free(bus);
	return rc;
}
