/* config_bus.c: the keys of the [bus], [state] and [security] sections of
 * the configuration (config.c reads the lines; quadwatch.ini(5) documents
 * the keys).  Endpoints follow the ZeroMQ convention: '@' binds, '>'
 * connects.  Workload: a handful of keys at start and on reload. */
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <strings.h>

#include "config_int.h"
#include "num.h"

#define CFG_FRAME_MIN 64             /* bytes: one binary header + record */
#define CFG_FRAME_MAX (1u << 30)     /* bytes: 1 GiB, beyond any batch */

/* Copies a string value into a fixed field of size cap. */
static int cfg_string(struct cfg_parse *ps, const char *v, char *dst,
		      size_t cap)
{
	size_t n = strlen(v);

	if (n == 0)
		return cfg_bad(ps, "expected a path, got nothing");
	if (n >= cap)
		return cfg_bad(ps, "expected a path shorter than %zu bytes", cap);
	memcpy(dst, v, n + 1);
	return 0;
}

/* ---- [bus] --------------------------------------------------------------- */

/* Parses one endpoint s[0..n): '@' binds, '>' connects, bare takes
 * bind_default; the address must look like transport://where. */
static int cfg_endpoint(struct cfg_parse *ps, const char *s, size_t n,
			int bind_default, struct qw_endpoint *ep)
{
	static const char form[] = "expected an endpoint such as "
				   "@tcp://127.0.0.1:5602 or >ipc:///run/qw";
	size_t i, scheme = 0;

	ep->bind = bind_default;
	if (n > 0 && (s[0] == '@' || s[0] == '>')) {
		ep->bind = s[0] == '@';
		s++;
		n--;
	}
	while (scheme < n && ((s[scheme] >= 'a' && s[scheme] <= 'z') ||
			      (s[scheme] >= '0' && s[scheme] <= '9')))
		scheme++;
	if (n == 0 || scheme == 0 || n < scheme + 4 ||
	    memcmp(s + scheme, "://", 3) != 0)
		return cfg_bad(ps, "%s, got '%.*s'", form, (int)n, s);
	for (i = 0; i < n; i++)
		if ((unsigned char)s[i] <= ' ' || (unsigned char)s[i] >= 127)
			return cfg_bad(ps, "%s (no blanks or control "
					   "characters)", form);
	if (n >= sizeof ep->addr)
		return cfg_bad(ps, "expected an endpoint shorter than %zu "
				   "bytes", sizeof ep->addr);
	memcpy(ep->addr, s, n);
	ep->addr[n] = '\0';
	return 0;
}

static int bus_input(struct cfg_parse *ps, const char *v)
{
	struct qw_config *c = ps->cfg;
	const char *item;
	size_t len, i, n = cfg_count(v);
	int rc;

	if (n == 0)
		return cfg_bad(ps, "expected at least one endpoint");
	if (n > QW_CONFIG_MAX_INPUTS)
		return cfg_bad(ps, "expected at most %d endpoints, got %zu",
			       QW_CONFIG_MAX_INPUTS, n);
	c->ninputs = 0;
	while (cfg_item(&v, &item, &len)) {
		if (cfg_is_mqtt(item, len)) { /* an MQTT broker, not ZeroMQ */
			if ((rc = cfg_mqtt_input(ps, item, len)) != 0)
				return rc;
			continue;
		}
		rc = cfg_endpoint(ps, item, len, 0, &c->inputs[c->ninputs]);
		if (rc != 0)
			return rc;
		for (i = 0; i < c->ninputs; i++)
			if (strcmp(c->inputs[i].addr,
				   c->inputs[c->ninputs].addr) == 0)
				return cfg_bad(ps, "expected each endpoint "
						   "once; '%s' is listed twice",
					       c->inputs[i].addr);
		c->ninputs++;
	}
	return 0;
}

static int bus_alerts(struct cfg_parse *ps, const char *v)
{
	return cfg_endpoint(ps, v, strlen(v), 1, &ps->cfg->alerts);
}

static int bus_control(struct cfg_parse *ps, const char *v)
{
	if (v[0] == '\0' || strcasecmp(v, "none") == 0) {
		ps->cfg->control.addr[0] = '\0';
		ps->cfg->control.bind = 1;
		return 0;
	}
	return cfg_endpoint(ps, v, strlen(v), 1, &ps->cfg->control);
}

/* A duration >= 0 (min_zero) or > 0 into *out seconds. */
static int cfg_duration(struct cfg_parse *ps, const char *v, int zero_ok,
			double *out)
{
	int unit;
	double d;

	if (qw_num_duration(v, &unit, &d) != 0 || !isfinite(d) ||
	    (!zero_ok && !(d > 0)))
		return cfg_bad(ps, "expected a duration %s such as 30s, 10min, "
				   "2h or 1d (plain numbers are seconds), "
				   "got '%s'", zero_ok ? ">= 0" : "> 0", v);
	*out = d;
	return 0;
}

static int bus_stats_every(struct cfg_parse *ps, const char *v)
{
	return cfg_duration(ps, v, 1, &ps->cfg->stats_every);
}

/* Bytes, with an optional binary suffix KiB or MiB. */
static int bus_max_frame(struct cfg_parse *ps, const char *v)
{
	size_t n = strlen(v);
	uint64_t x, mult = 1;

	if (n > 3 && strcmp(v + n - 3, "KiB") == 0)
		mult = 1024;
	else if (n > 3 && strcmp(v + n - 3, "MiB") == 0)
		mult = 1024 * 1024;
	if (mult > 1)
		n -= 3;
	if (qw_num_u64(v, n, 1, CFG_FRAME_MAX, &x) != 0 ||
	    x * mult < CFG_FRAME_MIN || x * mult > CFG_FRAME_MAX)
		return cfg_bad(ps, "expected a size in bytes from %u to %u "
				   "(suffix KiB or MiB allowed), got '%s'",
			       CFG_FRAME_MIN, CFG_FRAME_MAX, v);
	ps->cfg->max_frame = (size_t)(x * mult);
	return 0;
}

const struct cfg_key cfg_bus_keys[] = {
	{"input", bus_input, 1},
	{"alerts", bus_alerts, 0},
	{"control", bus_control, 0},
	{"stats_every", bus_stats_every, 0},
	{"max_frame", bus_max_frame, 0},
	{"groups", cfg_bus_groups, 1}, /* config_shard.c */
	{NULL, NULL, 0},
};

/* ---- [state] and [security] ---------------------------------------------- */

static int state_dir(struct cfg_parse *ps, const char *v)
{
	return cfg_string(ps, v, ps->cfg->state_dir, sizeof ps->cfg->state_dir);
}

static int state_every(struct cfg_parse *ps, const char *v)
{
	return cfg_duration(ps, v, 0, &ps->cfg->state_every);
}

static int sec_server_key(struct cfg_parse *ps, const char *v)
{
	return cfg_string(ps, v, ps->cfg->server_key,
			  sizeof ps->cfg->server_key);
}

static int sec_client_keys(struct cfg_parse *ps, const char *v)
{
	return cfg_string(ps, v, ps->cfg->client_keys,
			  sizeof ps->cfg->client_keys);
}

static int sec_publisher_key(struct cfg_parse *ps, const char *v)
{
	return cfg_string(ps, v, ps->cfg->publisher_key,
			  sizeof ps->cfg->publisher_key);
}

const struct cfg_key cfg_state_keys[] = {
	{"dir", state_dir, 0},
	{"every", state_every, 0},
	{NULL, NULL, 0},
};

const struct cfg_key cfg_security_keys[] = {
	{"server_key", sec_server_key, 0},
	{"client_keys", sec_client_keys, 0},
	{"publisher_key", sec_publisher_key, 0},
	{NULL, NULL, 0},
};
