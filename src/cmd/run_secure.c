/* run_secure.c: CURVE on the daemon's sockets ([security], see
 * quadwatch.ini(5) and docs/operations.md "Keys and rotation").
 *
 * With server_key set, every socket the daemon binds (inputs given with
 * '@', alerts, control) is a CURVE server holding that secret key; each
 * client's handshake is put to the ZAP handler (RFC 27), a REP socket at
 * QW_BUS_ZAP_ENDPOINT that the poll loop services (qw_run_zap) with
 * auth.c's decision: any client key when client_keys is absent, else only
 * the keys listed there.  A refused publisher never completes its
 * handshake, so none of its messages arrive or are counted; a refused
 * control client gets no answer.  Inputs that connect to a publisher are
 * CURVE clients when publisher_key names the publisher's public key, using
 * the daemon's own key pair, so an impostor publisher cannot complete the
 * handshake.
 *
 * Reload re-reads client_keys (new handshakes follow the new list at once)
 * but refuses a change of the daemon's own keys or of publisher_key: the
 * bound sockets keep their connections across a reload and cannot be
 * re-keyed in place, so that change needs a restart.
 *
 * Workload: keys are read at start and reload; one ZAP request per
 * connection attempt. */
#include <stdio.h>
#include <string.h>

#include "run.h"

/* ---- keys ---------------------------------------------------------------- */

static uint64_t sec_fnv(uint64_t h, const unsigned char *b, size_t n)
{
	size_t i;

	for (i = 0; i < n; i++) {
		h ^= b[i];
		h *= 1099511628211ULL; /* FNV-1a 64 prime */
	}
	return h;
}

/* The keys that fix how sockets are made: own pair, publisher key. */
static uint64_t sec_signature(const struct run_secure *sec)
{
	uint64_t h = 14695981039346656037ULL; /* FNV-1a 64 offset basis */

	if (!sec->k.on)
		return 0;
	h = sec_fnv(h, sec->k.server.public_key, QW_BUS_KEY_BYTES);
	h = sec_fnv(h, sec->k.server.secret_key, QW_BUS_KEY_BYTES);
	if (sec->k.has_client)
		h = sec_fnv(h, sec->k.client.server_key, QW_BUS_KEY_BYTES);
	return h | 1; /* never 0, the signature of "off" */
}

/* The key files of [security]; err says what is wrong. */
/* 1 when ep stays on this host: ipc, inproc, or tcp on a loopback
 * address. */
static int sec_local(const struct qw_endpoint *ep)
{
	static const char *const local[] = {
		"ipc://", "inproc://", "tcp://127.", "tcp://localhost:",
		"tcp://[::1]:", "tcp://lo:"
	};
	size_t i;

	for (i = 0; i < sizeof local / sizeof local[0]; i++)
		if (strncmp(ep->addr, local[i], strlen(local[i])) == 0)
			return 1;
	return 0;
}

/* What an operator should know about the security in force. */
static void sec_report(const struct qw_config *cfg,
		       const struct run_secure *sec)
{
	char z85[QW_AUTH_Z85_LEN + 1];
	size_t i;

	if (!sec->k.on) {
		if (cfg->control.addr[0] != '\0' && !sec_local(&cfg->control))
			qw_log(QW_LOG_WARN, "control %s is reachable from other "
			       "hosts without CURVE: anyone there can "
			       "rebaseline or reload; bind it to loopback or "
			       "set [security] server_key", cfg->control.addr);
		return;
	}
	qw_auth_z85_encode(sec->k.server.public_key, z85);
	if (sec->k.allowed != NULL)
		qw_log(QW_LOG_INFO, "CURVE on: server key %s, %zu allowed "
		       "client keys", z85, qw_auth_count(sec->k.allowed));
	else
		qw_log(QW_LOG_WARN, "CURVE on: server key %s; no client_keys, "
		       "so any client that knows the server key is let in",
		       z85);
	for (i = 0; i < cfg->ninputs; i++)
		if (!cfg->inputs[i].bind && !sec->k.has_client)
			qw_log(QW_LOG_WARN, "input >%s is in the clear (set "
			       "[security] publisher_key to authenticate the "
			       "publisher)", cfg->inputs[i].addr);
}

/* The ZAP handler: bound once, before the first CURVE server, kept for
 * the daemon's life (an inproc endpoint binds once per context). */
static int sec_zap_open(struct run_daemon *dm)
{
	struct qw_endpoint ep;
	struct qw_bus_opts o;

	if (dm->zap != NULL)
		return 0;
	memset(&ep, 0, sizeof ep);
	snprintf(ep.addr, sizeof ep.addr, "%s", QW_BUS_ZAP_ENDPOINT);
	ep.bind = 1;
	qw_bus_opts_default(&o);
	o.sndtimeo_ms = 0; /* the requester is in this process */
	if (qw_bus_open(dm->bus, QW_BUS_REP, &ep, &o, &dm->zap) != 0) {
		qw_log(QW_LOG_ERROR, "ZAP handler %s: %s", ep.addr,
		       qw_bus_strerror());
		return QW_ERROR(QW_EIO);
	}
	return 0;
}

int qw_run_secure_build(struct run_daemon *dm, const struct qw_config *cfg,
			struct run_secure *sec)
{
	char err[QW_AUTH_ERR_MAX];
	int rc;

	memset(sec, 0, sizeof *sec);
	rc = qw_auth_setup_load(cfg, &sec->k, err, sizeof err);
	if (rc != 0) {
		qw_log(QW_LOG_ERROR, "%s", err);
		qw_run_secure_free(sec);
		return QW_ERROR(QW_EFORMAT);
	}
	sec->signature = sec_signature(sec);
	if (dm->alerts != NULL && sec->signature != dm->sec.signature) {
		qw_log(QW_LOG_ERROR, "%s: [security] server_key or "
		       "publisher_key changed (or CURVE turned on or off): "
		       "restart quadwatch to apply; reload keeps the running "
		       "keys", cfg->path);
		qw_run_secure_free(sec);
		return QW_ERROR(QW_EFORMAT);
	}
	if (sec->k.on && (rc = sec_zap_open(dm)) != 0) {
		qw_run_secure_free(sec);
		return rc;
	}
	sec_report(cfg, sec);
	return 0;
}

void qw_run_secure_free(struct run_secure *sec)
{
	qw_auth_setup_free(&sec->k);
	sec->signature = 0;
}

const struct qw_bus_curve *qw_run_secure_for(const struct run_secure *sec,
					     const struct qw_endpoint *ep,
					     int is_input)
{
	if (!sec->k.on)
		return NULL;
	if (ep->bind)
		return &sec->k.server;
	if (is_input && sec->k.has_client)
		return &sec->k.client;
	return NULL;
}

/* ---- ZAP ----------------------------------------------------------------- */

static void sec_zap_log(struct run_daemon *dm, const struct qw_auth_verdict *v)
{
	if (v->allowed) {
		dm->tot.auth_allowed++;
		qw_log(QW_LOG_DEBUG, "CURVE client %s (%s) from %s let in",
		       v->key, v->name != NULL ? v->name : "any key",
		       v->address);
		return;
	}
	dm->tot.auth_denied++;
	qw_log_limited(&dm->auth_log, QW_LOG_WARN, "CURVE client %s from %s "
		       "refused: %s", v->key[0] ? v->key : "-", v->address,
		       v->why);
}

void qw_run_zap(struct run_daemon *dm)
{
	struct qw_bus_parts req, rep;
	struct qw_auth_verdict v;
	int i, rc;

	if (dm->zap == NULL)
		return;
	for (i = 0; i < RUN_BATCH_MAX_MSGS; i++) {
		rc = qw_bus_recv_parts(dm->zap, &req, 1);
		if (rc == 1)
			return;
		if (rc < 0) {
			dm->tot.bus_errors++;
			return;
		}
		qw_auth_zap(dm->sec.k.allowed, &req, &rep, &v);
		sec_zap_log(dm, &v);
		if (qw_bus_send_parts(dm->zap, &rep, 1) != 0)
			dm->tot.bus_errors++;
	}
}
