/* config_mqtt.c: MQTT in the configuration: the mqtt:// and mqtts://
 * items of [bus] input, the keys of the [mqtt] section, the checks across
 * them once the whole file is read, and the credentials file (see
 * quadwatch.ini(5) "MQTT" and docs/wire-format.md "MQTT").
 *
 * An address is SCHEME://HOST[:PORT]/TOPIC with SCHEME mqtt (port 1883 by
 * default) or mqtts (TLS, port 8883).  TOPIC has exactly one level that is
 * '+' (the group level) and no '#': a received topic's group is the level
 * the '+' matched, and an alert's topic is the alerts TOPIC with the group
 * name in place of '+'.  Every address names the same broker: the daemon
 * holds one connection.  Secrets never stand in the ini: it names a
 * credentials file.  The files named are checked apart from the parse
 * (qw_config_mqtt_files), by the daemon and by check, as the daemon reads
 * them (existence, the secrets' modes, the credentials' two lines), so
 * replay, record and sim can read the same ini without access to them.
 *
 * Workload: a handful of keys at start and on reload. */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "config_int.h"
#include "log.h"
#include "num.h"

#define CFG_MQTT_PORT 1883        /* IANA: MQTT */
#define CFG_MQTTS_PORT 8883       /* IANA: MQTT over TLS */
#define CFG_MQTT_KEEPALIVE 30.0   /* s: default keepalive */
#define CFG_MQTT_KEEPALIVE_MIN 5.0 /* s: libmosquitto 2 refuses less */
#define CFG_MQTT_KEEPALIVE_MAX 65535.0 /* s: a 16-bit field (MQTT 3.1.1,
					   3.1.2.10) */
#define CFG_MQTT_BACKOFF_MIN 0.5  /* s: default first reconnect delay */
#define CFG_MQTT_BACKOFF_MAX 30.0 /* s: default longest reconnect delay */
#define CFG_MQTT_BACKOFF_LIMIT 3600.0 /* s: longest allowed delay */
#define CFG_MQTT_CRED_MAX 4096    /* bytes: a credentials file, at most */

int cfg_is_mqtt(const char *s, size_t n)
{
	return (n >= 7 && memcmp(s, "mqtt://", 7) == 0) ||
	       (n >= 8 && memcmp(s, "mqtts://", 8) == 0);
}

/* TOPIC of an address: levels split by '/', exactly one of them "+", no
 * '#', no '+' inside a level, no blanks or control characters. */
static int cfg_mqtt_topic(struct cfg_parse *ps, const char *s, size_t n,
			  struct qw_mqtt_url *u)
{
	size_t i, start = 0;
	unsigned level = 0, plus = 0;

	if (n == 0 || n >= sizeof u->topic)
		return cfg_bad(ps, "expected a topic of 1 to %zu bytes after "
				   "the broker", sizeof u->topic - 1);
	for (i = 0; i <= n; i++) {
		if (i < n && ((unsigned char)s[i] <= ' ' ||
			      (unsigned char)s[i] >= 127 || s[i] == '#'))
			return cfg_bad(ps, "expected a topic without '#', "
					   "blanks or control characters, got "
					   "'%.*s'", (int)n, s);
		if (i < n && s[i] != '/')
			continue;
		if (i - start == 1 && s[start] == '+') {
			plus++;
			u->level = level;
		} else if (memchr(s + start, '+', i - start) != NULL) {
			return cfg_bad(ps, "expected '+' only as a whole topic "
					   "level, got '%.*s'", (int)n, s);
		}
		level++;
		start = i + 1;
	}
	if (plus != 1)
		return cfg_bad(ps, "expected exactly one '+' level in the topic "
				   "(it stands for the group name), got '%.*s'",
			       (int)n, s);
	memcpy(u->topic, s, n);
	u->topic[n] = '\0';
	return 0;
}

/* HOST[:PORT] of an address; HOST may be a bracketed IPv6 address. */
static int cfg_mqtt_broker(struct cfg_parse *ps, const char *s, size_t n,
			   struct qw_mqtt_url *u)
{
	const char *colon = NULL, *host = s;
	size_t hlen = n;
	uint64_t port;

	u->port = u->tls ? CFG_MQTTS_PORT : CFG_MQTT_PORT;
	if (n > 0 && s[0] == '[') {
		const char *close = memchr(s, ']', n);

		if (close == NULL)
			return cfg_bad(ps, "expected ']' after an IPv6 address");
		host = s + 1;
		hlen = (size_t)(close - host);
		if (close + 1 < s + n) {
			if (close[1] != ':')
				return cfg_bad(ps, "expected ':PORT' after ']'");
			colon = close + 1;
		}
	} else if ((colon = memchr(s, ':', n)) != NULL) {
		hlen = (size_t)(colon - s);
	}
	if (hlen == 0 || hlen >= sizeof u->host)
		return cfg_bad(ps, "expected a broker host before the topic");
	if (colon != NULL &&
	    qw_num_u64(colon + 1, (size_t)(s + n - colon - 1), 1, 65535,
		       &port) != 0)
		return cfg_bad(ps, "expected a port from 1 to 65535, got "
				   "'%.*s'", (int)(s + n - colon - 1), colon + 1);
	if (colon != NULL)
		u->port = (int)port;
	memcpy(u->host, host, hlen);
	u->host[hlen] = '\0';
	return 0;
}

/* s[0..n): mqtt://HOST[:PORT]/TOPIC or mqtts://... into *u. */
static int cfg_mqtt_url(struct cfg_parse *ps, const char *s, size_t n,
			struct qw_mqtt_url *u)
{
	size_t skip;
	const char *slash;
	int rc;

	memset(u, 0, sizeof *u);
	if (!cfg_is_mqtt(s, n))
		return cfg_bad(ps, "expected mqtt://HOST[:PORT]/TOPIC or "
				   "mqtts://..., got '%.*s'", (int)n, s);
	skip = s[4] == 's' ? 8 : 7; /* n >= 7: s[4] is in the value */
	u->tls = skip == 8;
	slash = memchr(s + skip, '/', n - skip);
	if (slash == NULL)
		return cfg_bad(ps, "expected mqtt://HOST[:PORT]/TOPIC, got "
				   "'%.*s' (no topic)", (int)n, s);
	rc = cfg_mqtt_broker(ps, s + skip, (size_t)(slash - s - (long)skip), u);
	if (rc == 0)
		rc = cfg_mqtt_topic(ps, slash + 1, (size_t)(s + n - slash - 1),
				    u);
	return rc;
}

static int cfg_same_broker(const struct qw_mqtt_url *a,
			   const struct qw_mqtt_url *b)
{
	return a->tls == b->tls && a->port == b->port &&
	       strcmp(a->host, b->host) == 0;
}

int cfg_mqtt_input(struct cfg_parse *ps, const char *s, size_t n)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;
	struct qw_mqtt_url *u;
	size_t i;
	int rc;

	if (m->ninputs >= QW_CONFIG_MAX_MQTT)
		return cfg_bad(ps, "expected at most %d mqtt:// inputs",
			       QW_CONFIG_MAX_MQTT);
	u = &m->inputs[m->ninputs];
	if ((rc = cfg_mqtt_url(ps, s, n, u)) != 0)
		return rc;
	if (m->ninputs > 0 && !cfg_same_broker(&m->inputs[0], u))
		return cfg_bad(ps, "expected every mqtt:// input on one broker "
				   "(%s:%d); '%.*s' names another",
			       m->inputs[0].host, m->inputs[0].port, (int)n, s);
	for (i = 0; i < m->ninputs; i++)
		if (strcmp(m->inputs[i].topic, u->topic) == 0)
			return cfg_bad(ps, "expected each topic once; '%s' is "
					   "listed twice", u->topic);
	m->ninputs++;
	m->input_line = ps->key_at;
	return 0;
}

/* ---- files ------------------------------------------------------------- */

/* A path value into dst (checked later: qw_config_mqtt_files). */
static int cfg_path(struct cfg_parse *ps, const char *v, char *dst,
		    size_t cap, int *line)
{
	size_t n = strlen(v);

	if (n == 0 || n >= cap)
		return cfg_bad(ps, "expected a file path of 1 to %zu bytes",
			       cap - 1);
	memcpy(dst, v, n + 1);
	*line = ps->key_at;
	return 0;
}

/* A regular file we can read; secret: open to its owner only.  0, or -1
 * with the reason in why. */
static int cfg_file_ok(const char *path, int secret, char *why, size_t cap)
{
	struct stat st;

	if (stat(path, &st) != 0 || access(path, R_OK) != 0) {
		snprintf(why, cap, "%s: %s", path, strerror(errno));
		return -1;
	}
	if (!S_ISREG(st.st_mode)) {
		snprintf(why, cap, "%s: expected a regular file", path);
		return -1;
	}
	if (secret && (st.st_mode & 077) != 0) {
		snprintf(why, cap, "%s: secret file is open to group or others "
			 "(mode %04o); refusing it: chmod 600 %s", path,
			 (unsigned)(st.st_mode & 07777), path);
		return -1;
	}
	return 0;
}

/* The line of buf[*pos..len) up to '\n' (a '\r' before it dropped) into
 * dst; 0, or -1 when empty or too long. */
static int cfg_cred_line(const char *buf, size_t len, size_t *pos,
			 char *dst, size_t cap)
{
	size_t a = *pos, b = a;

	while (b < len && buf[b] != '\n')
		b++;
	*pos = b < len ? b + 1 : b;
	if (b > a && buf[b - 1] == '\r')
		b--;
	if (b == a || b - a >= cap || memchr(buf + a, '\0', b - a) != NULL)
		return -1;
	memcpy(dst, buf + a, b - a);
	dst[b - a] = '\0';
	return 0;
}

int qw_config_mqtt_credentials(const char *path, char *user, size_t ucap,
			       char *pass, size_t pcap, char *err,
			       size_t errlen)
{
	char buf[CFG_MQTT_CRED_MAX];
	struct stat st;
	size_t pos = 0, len = 0;
	ssize_t got;
	int fd = open(path, O_RDONLY | O_CLOEXEC | O_NOCTTY), rc = 0;

	if (fd < 0) {
		qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		return QW_ERROR(QW_EFORMAT);
	}
	if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
		qw_errbuf(err, errlen, "%s: expected a regular file", path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if ((st.st_mode & 077) != 0) {
		qw_errbuf(err, errlen, "%s: credentials file is open to group "
			  "or others (mode %04o); refusing it: chmod 600 %s",
			  path, (unsigned)(st.st_mode & 07777), path);
		rc = QW_ERROR(QW_EFORMAT);
	} else if ((got = read(fd, buf, sizeof buf)) < 0) {
		qw_errbuf(err, errlen, "%s: %s", path, strerror(errno));
		rc = QW_ERROR(QW_EIO);
	} else if ((len = (size_t)got) == sizeof buf) {
		qw_errbuf(err, errlen, "%s: expected at most %d bytes", path,
			  CFG_MQTT_CRED_MAX - 1);
		rc = QW_ERROR(QW_EFORMAT);
	} else if (cfg_cred_line(buf, len, &pos, user, ucap) != 0 ||
		   cfg_cred_line(buf, len, &pos, pass, pcap) != 0) {
		qw_errbuf(err, errlen, "%s: expected a user name on line 1 and "
			  "a password on line 2, each of 1 to %zu bytes",
			  path, (ucap < pcap ? ucap : pcap) - 1);
		rc = QW_ERROR(QW_EFORMAT);
	}
	close(fd);
	explicit_bzero(buf, sizeof buf);
	if (rc != 0) {
		explicit_bzero(user, ucap);
		explicit_bzero(pass, pcap);
	}
	return rc;
}

/* ---- [mqtt] ------------------------------------------------------------ */

static int mqtt_alerts(struct cfg_parse *ps, const char *v)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;
	int rc = cfg_mqtt_url(ps, v, strlen(v), &m->alerts);

	m->has_alerts = rc == 0;
	m->alerts_line = ps->key_at;
	return rc;
}

static int mqtt_qos(struct cfg_parse *ps, const char *v)
{
	uint64_t q;

	if (qw_num_u64(v, (size_t)-1, 0, 1, &q) != 0)
		return cfg_bad(ps, "expected 0 (at most once) or 1 (at least "
				   "once), got '%s'", v);
	ps->cfg->mqtt.qos = (int)q;
	return 0;
}

static int mqtt_client_id(struct cfg_parse *ps, const char *v)
{
	size_t i, n = strlen(v);

	if (n == 0 || n >= sizeof ps->cfg->mqtt.client_id)
		return cfg_bad(ps, "expected a client id of 1 to %zu characters",
			       sizeof ps->cfg->mqtt.client_id - 1);
	for (i = 0; i < n; i++)
		if ((unsigned char)v[i] <= ' ' || (unsigned char)v[i] >= 127)
			return cfg_bad(ps, "expected a client id of printable "
					   "characters, no blanks");
	memcpy(ps->cfg->mqtt.client_id, v, n + 1);
	return 0;
}

/* A duration in [lo, hi] seconds. */
static int mqtt_seconds(struct cfg_parse *ps, const char *v, double lo,
			double hi, double *out)
{
	int unit;
	double d;

	if (qw_num_duration(v, &unit, &d) != 0 || !isfinite(d) || d < lo ||
	    d > hi)
		return cfg_bad(ps, "expected a duration from %g s to %g s, such "
				   "as 0.5, 30s or 2min, got '%s'",
			       lo, hi, v);
	*out = d;
	return 0;
}

static int mqtt_keepalive(struct cfg_parse *ps, const char *v)
{
	return mqtt_seconds(ps, v, CFG_MQTT_KEEPALIVE_MIN,
			    CFG_MQTT_KEEPALIVE_MAX, &ps->cfg->mqtt.keepalive);
}

static int mqtt_reconnect_min(struct cfg_parse *ps, const char *v)
{
	ps->cfg->mqtt.reconnect_line = ps->key_at;
	return mqtt_seconds(ps, v, 0.01, CFG_MQTT_BACKOFF_LIMIT,
			    &ps->cfg->mqtt.reconnect_min);
}

static int mqtt_reconnect_max(struct cfg_parse *ps, const char *v)
{
	ps->cfg->mqtt.reconnect_line = ps->key_at;
	return mqtt_seconds(ps, v, 0.01, CFG_MQTT_BACKOFF_LIMIT,
			    &ps->cfg->mqtt.reconnect_max);
}

static int mqtt_ca_file(struct cfg_parse *ps, const char *v)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;

	return cfg_path(ps, v, m->ca_file, sizeof m->ca_file, &m->ca_line);
}

static int mqtt_cert_file(struct cfg_parse *ps, const char *v)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;

	return cfg_path(ps, v, m->cert_file, sizeof m->cert_file,
			&m->cert_line);
}

static int mqtt_key_file(struct cfg_parse *ps, const char *v)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;

	return cfg_path(ps, v, m->key_file, sizeof m->key_file, &m->key_line);
}

static int mqtt_credentials(struct cfg_parse *ps, const char *v)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;

	return cfg_path(ps, v, m->credentials, sizeof m->credentials,
			&m->credentials_line);
}

const struct cfg_key cfg_mqtt_keys[] = {
	{"alerts", mqtt_alerts, 0},
	{"qos", mqtt_qos, 0},
	{"client_id", mqtt_client_id, 0},
	{"keepalive", mqtt_keepalive, 0},
	{"reconnect_min", mqtt_reconnect_min, 0},
	{"reconnect_max", mqtt_reconnect_max, 0},
	{"ca_file", mqtt_ca_file, 0},
	{"cert_file", mqtt_cert_file, 0},
	{"key_file", mqtt_key_file, 0},
	{"credentials", mqtt_credentials, 0},
	{NULL, NULL, 0},
};

/* ---- across keys ----------------------------------------------------------- */

/* An error found after the file was read, at line, in section sec. */
static int cfg_mqtt_fail(struct cfg_parse *ps, int line, const char *sec,
			 const char *key, const char *msg)
{
	snprintf(ps->secname, sizeof ps->secname, "%s", sec);
	return cfg_fail(ps, QW_ERROR(QW_EFORMAT), line, key, "%s", msg);
}

int cfg_mqtt_finish(struct cfg_parse *ps, int section_line)
{
	struct qw_mqtt_conf *m = &ps->cfg->mqtt;
	int tls = m->ninputs > 0 ? m->inputs[0].tls : m->alerts.tls;

	if (m->keepalive == 0)
		m->keepalive = CFG_MQTT_KEEPALIVE;
	if (m->reconnect_min == 0)
		m->reconnect_min = CFG_MQTT_BACKOFF_MIN;
	if (m->reconnect_max == 0)
		m->reconnect_max = CFG_MQTT_BACKOFF_MAX;
	if (m->ninputs == 0 && !m->has_alerts) {
		if (section_line == 0)
			return 0;
		return cfg_mqtt_fail(ps, section_line, "mqtt", NULL,
				     "expected an mqtt:// item in [bus] input "
				     "or an alerts address; no broker is named");
	}
	m->line = m->ninputs > 0 ? m->input_line : m->alerts_line;
	if (m->ninputs > 0 && m->has_alerts &&
	    !cfg_same_broker(&m->inputs[0], &m->alerts))
		return cfg_mqtt_fail(ps, m->alerts_line, "mqtt", "alerts",
				     "expected the broker of the mqtt:// "
				     "inputs (one connection)");
	if (m->reconnect_min > m->reconnect_max)
		return cfg_mqtt_fail(ps, m->reconnect_line, "mqtt",
				     "reconnect_min", "expected reconnect_min "
				     "<= reconnect_max");
	if (!tls && m->ca_file[0] != '\0')
		return cfg_mqtt_fail(ps, m->ca_line, "mqtt", "ca_file",
				     "expected an mqtts:// broker (TLS); the "
				     "broker is named with mqtt://");
	if (!tls && m->cert_file[0] != '\0')
		return cfg_mqtt_fail(ps, m->cert_line, "mqtt", "cert_file",
				     "expected an mqtts:// broker (TLS)");
	if ((m->cert_file[0] != '\0') != (m->key_file[0] != '\0'))
		return cfg_mqtt_fail(ps, m->cert_file[0] ? m->cert_line
					 : m->key_line, "mqtt",
				     m->cert_file[0] ? "cert_file" : "key_file",
				     "expected cert_file and key_file together "
				     "(a client certificate and its key)");
	return 0;
}

/* ---- the files, as the daemon reads them ---------------------------------- */

int qw_config_mqtt_files(const struct qw_config *cfg, char *err,
			 size_t errlen)
{
	const struct qw_mqtt_conf *m = &cfg->mqtt;
	char user[QW_CONFIG_SECRET_MAX], pass[QW_CONFIG_SECRET_MAX];
	char why[QW_CONFIG_ERR_MAX];
	const struct {
		const char *key, *path;
		int line, secret;
	} f[] = {
		{"ca_file", m->ca_file, m->ca_line, 0},
		{"cert_file", m->cert_file, m->cert_line, 0},
		{"key_file", m->key_file, m->key_line, 1},
	};
	size_t i;
	int rc;

	for (i = 0; i < sizeof f / sizeof f[0]; i++)
		if (f[i].path[0] != '\0' &&
		    cfg_file_ok(f[i].path, f[i].secret, why, sizeof why) != 0) {
			qw_errbuf(err, errlen, "%s:%d: [mqtt] %s: %s", cfg->path,
				  f[i].line, f[i].key, why);
			return QW_ERROR(QW_EFORMAT);
		}
	if (m->credentials[0] == '\0')
		return 0;
	rc = qw_config_mqtt_credentials(m->credentials, user, sizeof user,
					pass, sizeof pass, why, sizeof why);
	explicit_bzero(user, sizeof user);
	explicit_bzero(pass, sizeof pass);
	if (rc != 0)
		qw_errbuf(err, errlen, "%s:%d: [mqtt] credentials: %s",
			  cfg->path, m->credentials_line, why);
	return rc;
}
