/* auth_zap.c: the ZAP decision for the daemon's CURVE servers (see
 * auth.h, qw_auth_zap).
 *
 * RFC 27: a request holds version "1.0", request id, domain, address,
 * routing id, mechanism and credentials (for CURVE one frame, the client's
 * 32-byte public key); the reply echoes version and request id and says
 * "200" (allowed), "400" (refused) or "500" (a broken request), then a
 * status text, the user id (the allowed key's name) and empty metadata.
 *
 * Workload: one request per connection attempt; a binary search of the
 * allowed keys, no allocation. */
#include "auth.h"

#include <string.h>

#include "quadwatch.h"

enum zap_frame {
	ZAP_VERSION = 0, ZAP_REQUEST_ID, ZAP_DOMAIN, ZAP_ADDRESS,
	ZAP_IDENTITY, ZAP_MECHANISM, ZAP_CREDENTIALS,
	ZAP_REQUEST_FRAMES        /* frames of a CURVE request */
};

static int zap_is(const struct qw_bus_parts *p, unsigned i, const char *s)
{
	size_t n = strlen(s);

	return p->len[i] == n && memcmp(p->data[i], s, n) == 0;
}

static void zap_put(struct qw_bus_parts *rep, const void *b, size_t n)
{
	memcpy(rep->data[rep->n], b, n);
	rep->len[rep->n++] = n;
}

static void zap_reply(struct qw_bus_parts *rep, const struct qw_bus_parts *req,
		      const char *code, const char *text, const char *user)
{
	rep->n = 0;
	zap_put(rep, "1.0", 3);
	zap_put(rep, req->data[ZAP_REQUEST_ID], req->len[ZAP_REQUEST_ID]);
	zap_put(rep, code, strlen(code));
	zap_put(rep, text, strlen(text));
	zap_put(rep, user, strlen(user));
	zap_put(rep, "", 0); /* metadata: none */
}

/* Why req is refused, or NULL; fills v's key and address. */
static const char *zap_check(const qw_auth *a, const struct qw_bus_parts *req,
			     struct qw_auth_verdict *v)
{
	size_t alen = req->len[ZAP_ADDRESS];

	alen = alen < sizeof v->address ? alen : sizeof v->address - 1;
	memcpy(v->address, req->data[ZAP_ADDRESS], alen);
	v->address[alen] = '\0';
	if (!zap_is(req, ZAP_MECHANISM, "CURVE"))
		return "not CURVE";
	if (req->n != ZAP_REQUEST_FRAMES ||
	    req->len[ZAP_CREDENTIALS] != QW_BUS_KEY_BYTES)
		return "malformed request";
	qw_auth_z85_encode(req->data[ZAP_CREDENTIALS], v->key);
	if (a == NULL)
		return NULL;
	{
		const struct qw_auth_key *k =
			qw_auth_find(a, req->data[ZAP_CREDENTIALS]);

		if (k == NULL)
			return "key not in client_keys";
		v->name = k->name;
	}
	return NULL;
}

int qw_auth_zap(const qw_auth *a, const struct qw_bus_parts *req,
		struct qw_bus_parts *rep, struct qw_auth_verdict *v)
{
	unsigned i;

	memset(v, 0, sizeof *v);
	rep->n = 0;
	for (i = 0; i < req->n && i < QW_BUS_PARTS_MAX; i++)
		if (req->len[i] > QW_BUS_PART_BYTES)
			break;
	if (i < req->n || req->n < ZAP_CREDENTIALS ||
	    !zap_is(req, ZAP_VERSION, "1.0")) {
		/* A REP socket must answer before its next request: a
		 * refusal, with the request id when there is one. */
		v->why = "malformed request";
		rep->n = 0;
		zap_put(rep, "1.0", 3);
		if (req->n > ZAP_REQUEST_ID &&
		    req->len[ZAP_REQUEST_ID] <= QW_BUS_PART_BYTES)
			zap_put(rep, req->data[ZAP_REQUEST_ID],
				req->len[ZAP_REQUEST_ID]);
		else
			zap_put(rep, "", 0);
		zap_put(rep, "500", 3);
		zap_put(rep, v->why, strlen(v->why));
		zap_put(rep, "", 0);
		zap_put(rep, "", 0);
		return QW_ERROR(QW_EFORMAT);
	}
	v->why = zap_check(a, req, v);
	v->allowed = v->why == NULL;
	if (v->allowed)
		zap_reply(rep, req, "200", "OK", v->name != NULL ? v->name
							       : "anonymous");
	else
		zap_reply(rep, req, "400", v->why, "");
	return 0;
}
