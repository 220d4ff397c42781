/* ctl.c: `quadwatch ctl [--key FILE] [--server-key FILE] ENDPOINT CMD
 * [ARG]`, the control client (see quadwatch-ctl(1)).  With --server-key
 * the exchange is CURVE (the daemon's public key, and this client's key
 * pair from --key or made for the session).  Sends one request to the
 * daemon's REP socket, waits
 * up to CTL_TIMEOUT_MS for the reply, prints it (one JSON object) on stdout.
 * Exit 0 when the reply says "ok": true, 1 on an error reply or no reply,
 * 2 on usage errors.  Workload: one request per run. */
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "auth.h"
#include "bus.h"
#include "cmd.h"
#include "quadwatch.h"

#define CTL_TIMEOUT_MS 3000   /* ms: a daemon answers in well under this */
#define CTL_REPLY_MAX (1u << 24) /* bytes: status of QW_CONFIG_MAX_GROUPS
				    groups is well under 1 MiB */

static int ctl_usage(void)
{
	fprintf(stderr, "usage: quadwatch ctl [--key FILE] [--server-key FILE] "
		"ENDPOINT CMD [ARG]\n"
		"  CMD: status | rebaseline GROUP | save | reload\n");
	return QW_EXIT_USAGE;
}

/* 1 when text is a JSON object with "ok": true. */
static int ctl_ok(const char *text, size_t len)
{
	json_error_t e;
	json_t *o = json_loadb(text, len, 0, &e);
	int ok = o != NULL && json_is_true(json_object_get(o, "ok"));

	json_decref(o);
	return ok;
}

/* Sends req, receives the reply into reply[0..CTL_REPLY_MAX), prints it. */
static int ctl_exchange(qw_bus_sock *s, const char *req, char *reply)
{
	size_t len;
	int rc;

	if (qw_bus_send(s, req, strlen(req), NULL, 0, 0) != 0) {
		fprintf(stderr, "quadwatch ctl: send: %s\n", qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	rc = qw_bus_recv_frame(s, reply, CTL_REPLY_MAX, &len, 0);
	if (rc != 0) {
		fprintf(stderr, "quadwatch ctl: no reply within %d ms\n",
			CTL_TIMEOUT_MS);
		return QW_EXIT_FAIL;
	}
	if (len > CTL_REPLY_MAX) {
		fprintf(stderr, "quadwatch ctl: reply of %zu bytes is over "
			"%u\n", len, CTL_REPLY_MAX);
		return QW_EXIT_FAIL;
	}
	fwrite(reply, 1, len, stdout);
	fputc('\n', stdout);
	return ctl_ok(reply, len) ? QW_EXIT_OK : QW_EXIT_FAIL;
}

/* The arguments: options anywhere, then ENDPOINT CMD [ARG] in order.
 * CURVE keys into *curve when --server-key is given (*secure = 1).
 * 0, QW_EXIT_USAGE, or QW_EXIT_FAIL for a bad key file. */
static int ctl_args(int argc, char **argv, struct qw_endpoint *ep,
		    char *req, size_t cap, struct qw_bus_curve *curve,
		    int *secure)
{
	const char *pos[3] = {NULL, NULL, NULL}, *key = NULL, *srv = NULL;
	char err[QW_AUTH_ERR_MAX];
	int i, npos = 0, n;

	for (i = 1; i < argc; i++) {
		if (strcmp(argv[i], "--key") == 0 && i + 1 < argc)
			key = argv[++i];
		else if (strcmp(argv[i], "--server-key") == 0 && i + 1 < argc)
			srv = argv[++i];
		else if (npos < 3)
			pos[npos++] = argv[i];
		else
			return ctl_usage();
	}
	if (npos < 2 || (key != NULL && srv == NULL) ||
	    qw_bus_endpoint_parse(pos[0], 0, ep) != 0)
		return ctl_usage();
	n = snprintf(req, cap, "%s%s%s", pos[1], pos[2] ? " " : "",
		     pos[2] ? pos[2] : "");
	if (n < 0 || (size_t)n >= cap)
		return ctl_usage();
	*secure = srv != NULL;
	if (*secure && qw_auth_client(key, srv, curve, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch ctl: %s\n", err);
		return QW_EXIT_FAIL;
	}
	return 0;
}

int qw_cmd_ctl(int argc, char **argv)
{
	struct qw_endpoint ep;
	struct qw_bus_opts o;
	struct qw_bus_curve curve;
	char req[QW_BUS_TOPIC_MAX];
	qw_bus *bus;
	qw_bus_sock *s = NULL;
	char *reply;
	int rc, secure = 0;

	if ((rc = ctl_args(argc, argv, &ep, req, sizeof req, &curve,
			   &secure)) != 0)
		return rc;
	bus = qw_bus_alloc();
	reply = malloc(CTL_REPLY_MAX);
	if (bus == NULL || reply == NULL) {
		qw_bus_free(bus);
		free(reply);
		return QW_EXIT_FAIL;
	}
	qw_bus_opts_default(&o);
	o.rcvtimeo_ms = CTL_TIMEOUT_MS;
	o.sndtimeo_ms = CTL_TIMEOUT_MS;
	o.security = secure ? &curve : NULL;
	rc = qw_bus_open(bus, QW_BUS_REQ, &ep, &o, &s);
	explicit_bzero(&curve, sizeof curve);
	if (rc != 0) {
		fprintf(stderr, "quadwatch ctl: %s: %s\n", argv[1],
			qw_bus_strerror());
		rc = QW_EXIT_FAIL;
	} else {
		rc = ctl_exchange(s, req, reply);
	}
	qw_bus_close(s);
	qw_bus_free(bus);
	free(reply);
	return rc;
}
