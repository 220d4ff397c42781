/* config.c: the ini configuration file into struct qw_config (see config.h
 * and quadwatch.ini(5)).  This file reads the lines and sections and hands
 * each key to its section's table: config_bus.c has [bus], [state] and
 * [security], config_group.c has [group NAME], config_mqtt.c has [mqtt],
 * config_shard.c keeps the groups [bus] groups (or -g) selects once the
 * file is read.
 *
 * inih does the key = value splitting and comments.  The Debian build of
 * inih passes no line numbers to the handler, so the file is handed to
 * ini_parse_stream through our own reader, which counts physical lines and
 * also
 *  - reads the [section] headers itself (inih reports no empty section and
 *    truncates long names),
 *  - refuses lines longer than inih's buffer (inih would silently split
 *    them), and NUL bytes,
 *  - treats an indented line holding '=' as a key (inih would take it as a
 *    continuation of the previous value), so only indented lines without
 *    '=' continue a list.
 * Each key is processed once its last continuation line has been read.
 * Workload: one file of a few hundred lines at start and on reload. */
#include "config.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include <ini.h>

#include "config_int.h"
#include "num.h"

#define CFG_FILE_MAX (8u << 20)      /* bytes: far above any real config */
#define CFG_READ_CHUNK 65536         /* bytes per fread */
#define CFG_STATS_EVERY 10.0         /* s: default [bus] stats_every */
#define CFG_STATE_EVERY 10.0         /* s: default [state] every */
#define CFG_UTF8_BOM "\xEF\xBB\xBF"  /* skipped at the start of line 1 */

/* FNV-1a 64 (Fowler, Noll, Vo; IETF draft-eastlake-fnv). */
#define CFG_FNV_OFFSET 0xcbf29ce484222325ULL
#define CFG_FNV_PRIME 0x100000001b3ULL

/* ---- messages and lists ------------------------------------------------ */

/* Records the first error: "FILE:LINE: [sec] key: message" (sec ""
 * leaves out the section), the message from fmt and ap.  Returns code. */
static int cfg_vrecord(struct cfg_parse *ps, int code, int line,
		       const char *sec, const char *key, const char *fmt,
		       va_list ap)
{
	char msg[QW_CONFIG_ERR_MAX];

	if (ps->rc != 0)
		return code;
	ps->rc = code;
	ps->err_line = line;
	if (ps->err == NULL || ps->errlen == 0)
		return code;
	vsnprintf(msg, sizeof msg, fmt, ap);
	if (sec[0] != '\0')
		snprintf(ps->err, ps->errlen, "%s:%d: [%s]%s%s: %s", ps->file,
			 line, sec, key ? " " : "", key ? key : "", msg);
	else
		snprintf(ps->err, ps->errlen, "%s:%d: %s%s%s", ps->file, line,
			 key ? key : "", key ? ": " : "", msg);
	return code;
}

int cfg_fail(struct cfg_parse *ps, int code, int line, const char *key,
	     const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	code = cfg_vrecord(ps, code, line, ps->secname, key, fmt, ap);
	va_end(ap);
	return code;
}

/* An error about the file itself, not a section: "FILE:LINE: message". */
static int cfg_fail_file(struct cfg_parse *ps, int code, int line,
			 const char *fmt, ...)
	__attribute__((format(printf, 4, 5)));
static int cfg_fail_file(struct cfg_parse *ps, int code, int line,
			 const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	code = cfg_vrecord(ps, code, line, "", NULL, fmt, ap);
	va_end(ap);
	return code;
}

int cfg_bad(struct cfg_parse *ps, const char *fmt, ...)
{
	va_list ap;
	int code;

	va_start(ap, fmt);
	code = cfg_vrecord(ps, QW_ERROR(QW_EFORMAT), ps->key_at, ps->secname,
			   ps->key, fmt, ap);
	va_end(ap);
	return code;
}

static int cfg_blank(char c)
{
	return c == ' ' || c == '\t' || c == '\r' || c == '\n';
}

int cfg_item(const char **s, const char **item, size_t *len)
{
	const char *p = *s, *end;

	if (p == NULL)
		return 0;
	end = strchr(p, ',');
	if (end == NULL) {
		end = p + strlen(p);
		*s = NULL; /* this was the last item */
	} else {
		*s = end + 1;
	}
	while (p < end && cfg_blank(*p))
		p++;
	while (end > p && cfg_blank(end[-1]))
		end--;
	*item = p;
	*len = (size_t)(end - p);
	return 1;
}

size_t cfg_count(const char *s)
{
	const char *p = s, *item;
	size_t n = 0, len;

	while (*p != '\0' && cfg_blank(*p))
		p++;
	if (*p == '\0')
		return 0;
	while (cfg_item(&s, &item, &len))
		n++;
	return n;
}

/* ---- keys and sections ----------------------------------------------------- */

static const struct cfg_key *cfg_table(int section)
{
	switch (section) {
	case CFG_SEC_BUS: return cfg_bus_keys;
	case CFG_SEC_STATE: return cfg_state_keys;
	case CFG_SEC_SECURITY: return cfg_security_keys;
	case CFG_SEC_GROUP: return cfg_group_keys;
	case CFG_SEC_MQTT: return cfg_mqtt_keys;
	default: return NULL;
	}
}

/* Processes the key read (with all its continuation lines). */
static void cfg_flush(struct cfg_parse *ps)
{
	const struct cfg_key *tab = cfg_table(ps->section);
	char names[QW_CONFIG_ERR_MAX / 2];
	size_t i, off = 0;

	if (!ps->have_key || ps->rc != 0 || ps->section == CFG_SEC_BAD)
		return;
	ps->have_key = 0;
	if (tab == NULL) {
		cfg_bad(ps, "expected a [section] header before the first key");
		return;
	}
	if (ps->key[0] == '\0') {
		cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->key_at, NULL,
			 "expected a key name before '='");
		return;
	}
	for (i = 0; tab[i].name != NULL; i++)
		if (strcmp(tab[i].name, ps->key) == 0)
			break;
	if (tab[i].name == NULL) {
		for (i = 0; tab[i].name != NULL && off < sizeof names; i++)
			off += (size_t)snprintf(names + off, sizeof names - off,
						"%s%s", i ? ", " : "",
						tab[i].name);
		cfg_bad(ps, "unknown key; expected one of %s", names);
		return;
	}
	if (ps->key_line[i] != 0) {
		cfg_bad(ps, "expected each key once per section; first set "
			    "on line %d", ps->key_line[i]);
		return;
	}
	ps->key_line[i] = ps->key_at;
	if (ps->key_cont && !tab[i].list) {
		cfg_bad(ps, "expected one value on one line (only lists "
			    "continue on indented lines)");
		return;
	}
	tab[i].set(ps, ps->value);
}

/* Appends text to the value of the key being read; a continuation line is
 * joined with ", " unless the value so far already ends in a comma. */
static void cfg_append(struct cfg_parse *ps, const char *text, int cont)
{
	size_t n = strlen(text), need;
	char *v;

	if (cont && ps->vlen > 0 && ps->value[ps->vlen - 1] != ',')
		cfg_append(ps, ",", 0);
	need = ps->vlen + n + 1;
	if (need > ps->vcap) {
		v = realloc(ps->value, need * 2);
		if (v == NULL) {
			cfg_fail(ps, QW_ERROR(QW_ENOMEM), ps->line, NULL,
				 "out of memory");
			return;
		}
		ps->value = v;
		ps->vcap = need * 2;
	}
	memcpy(ps->value + ps->vlen, text, n + 1);
	ps->vlen += n;
}

static void cfg_section_end(struct cfg_parse *ps)
{
	cfg_flush(ps);
	if (ps->section == CFG_SEC_GROUP)
		cfg_group_end(ps);
	ps->section = CFG_SEC_BAD;
	memset(ps->key_line, 0, sizeof ps->key_line);
}

/* Starts the section named in[0..n) (blanks trimmed) at the current line. */
static void cfg_section_begin(struct cfg_parse *ps, const char *in, size_t n)
{
	static const char *const fixed[] = {"bus", "state", "security",
					    "mqtt"};
	static const int ids[] = {CFG_SEC_BUS, CFG_SEC_STATE, CFG_SEC_SECURITY,
				  CFG_SEC_MQTT};
	size_t i;

	if (n >= sizeof ps->secname) {
		cfg_fail_file(ps, QW_ERROR(QW_EFORMAT), ps->line,
			      "expected a section name shorter than %zu bytes",
			      sizeof ps->secname);
		return;
	}
	memcpy(ps->secname, in, n);
	ps->secname[n] = '\0';
	for (i = 0; i < sizeof ids / sizeof ids[0]; i++) {
		if (strcmp(ps->secname, fixed[i]) != 0)
			continue;
		if (ps->sec_line[i] != 0) {
			cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->line, NULL,
				 "expected each section once; first on line %d",
				 ps->sec_line[i]);
			return;
		}
		ps->sec_line[i] = ps->line;
		ps->section = ids[i];
		return;
	}
	if (n > 5 && memcmp(in, "group", 5) == 0 && cfg_blank(in[5])) {
		for (i = 5; cfg_blank(in[i]); i++)
			;
		if (cfg_group_begin(ps, ps->secname + i, ps->line) == 0)
			ps->section = CFG_SEC_GROUP;
		return;
	}
	if (strcmp(ps->secname, "group") == 0)
		cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->line, NULL,
			 "expected [group NAME], with the group's name");
	else
		cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->line, NULL,
			 "unknown section; expected [bus], [group NAME], "
			 "[state], [security] or [mqtt]");
}

/* A header line s[0..n) beginning with '['. */
static void cfg_header(struct cfg_parse *ps, const char *s, size_t n)
{
	const char *close = memchr(s, ']', n), *in = s + 1, *e, *r;

	cfg_section_end(ps);
	ps->secname[0] = '\0';
	if (ps->rc != 0)
		return;
	if (close == NULL) {
		cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->line, NULL,
			 "expected ']' to close the section header");
		return;
	}
	for (r = close + 1; r < s + n && cfg_blank(*r); r++)
		;
	if (r < s + n && *r != ';' && *r != '#') {
		cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->line, NULL,
			 "expected only a comment after ']'");
		return;
	}
	for (e = close; e > in && cfg_blank(e[-1]); e--)
		;
	while (in < e && cfg_blank(*in))
		in++;
	cfg_section_begin(ps, in, (size_t)(e - in));
}

/* ---- inih callbacks -------------------------------------------------------- */

/* fgets-style: hands inih the next physical line (see the file comment). */
static char *cfg_reader(char *buf, int num, void *stream)
{
	struct cfg_parse *ps = stream;
	const char *s = ps->text + ps->pos, *nl;
	size_t n, lead = 0;

	if (ps->rc != 0 || ps->pos >= ps->len)
		return NULL;
	nl = memchr(s, '\n', ps->len - ps->pos);
	n = nl != NULL ? (size_t)(nl - s) + 1 : ps->len - ps->pos;
	ps->pos += n;
	ps->line++;
	ps->indented = 0;
	if (ps->line == 1 && n >= 3 && memcmp(s, CFG_UTF8_BOM, 3) == 0) {
		s += 3;
		n -= 3;
	}
	while (lead < n && (s[lead] == ' ' || s[lead] == '\t'))
		lead++;
	if (memchr(s, '\0', n) != NULL) {
		cfg_fail_file(ps, QW_ERROR(QW_EFORMAT), ps->line,
			      "expected text, found a NUL byte");
		n = 0;
	} else if (n + 1 > (size_t)num) {
		cfg_fail_file(ps, QW_ERROR(QW_EFORMAT), ps->line,
			      "expected lines of at most %d bytes; continue a "
			      "long list on indented lines", num - 2);
		n = 0;
	} else if (lead < n && s[lead] == '[') {
		s += lead;
		n -= lead;
		cfg_header(ps, s, n);
	} else if (lead > 0 && lead < n && !cfg_blank(s[lead]) &&
		   s[lead] != ';' && s[lead] != '#') {
		if (memchr(s + lead, '=', n - lead) != NULL) {
			s += lead; /* an indented key, not a continuation */
			n -= lead;
		} else {
			ps->indented = 1;
		}
	}
	memcpy(buf, s, n);
	buf[n] = '\0';
	return buf;
}

static int cfg_handler(void *user, const char *section, const char *name,
		       const char *value)
{
	struct cfg_parse *ps = user;

	(void)section; /* ours, from cfg_header, is the one used */
	if (ps->rc != 0)
		return 1;
	if (ps->indented && ps->have_key && strcmp(name, ps->key) == 0) {
		ps->key_cont = 1;
		cfg_append(ps, value, 1);
		return 1;
	}
	cfg_flush(ps);
	ps->have_key = 1;
	ps->key_cont = 0;
	ps->key_at = ps->line;
	snprintf(ps->key, sizeof ps->key, "%s", name);
	ps->vlen = 0;
	cfg_append(ps, "", 0);
	cfg_append(ps, value, 0);
	return 1; /* errors are ours to report, with their line */
}

/* ---- load, free, look up --------------------------------------------------- */

static void cfg_default_endpoint(struct qw_endpoint *ep, const char *s)
{
	ep->bind = s[0] == '@';
	snprintf(ep->addr, sizeof ep->addr, "%s", s + 1);
}

static void cfg_defaults(struct qw_config *cfg)
{
	cfg_default_endpoint(&cfg->alerts, QW_CONFIG_DEFAULT_ALERTS);
	cfg_default_endpoint(&cfg->control, QW_CONFIG_DEFAULT_CONTROL);
	cfg->stats_every = CFG_STATS_EVERY;
	cfg->max_frame = QW_CONFIG_DEFAULT_MAX_FRAME;
	cfg->state_every = CFG_STATE_EVERY;
}

/* Parses text[0..len) as the file named name; owned: as
 * qw_config_load_owned. */
static int cfg_parse_text(const char *text, size_t len, const char *name,
			  const char *owned, struct qw_config *cfg, char *err,
			  size_t errlen)
{
	struct cfg_parse ps;
	int at;

	memset(&ps, 0, sizeof ps);
	ps.cfg = cfg;
	ps.file = name;
	ps.text = text;
	ps.len = len;
	ps.err = err;
	ps.errlen = errlen;
	ps.owned_cli = owned;
	at = ini_parse_stream(cfg_reader, &ps, cfg_handler, &ps);
	cfg_section_end(&ps);
	ps.secname[0] = '\0';
	if (at < 0)
		cfg_fail(&ps, QW_ERROR(QW_ENOMEM), ps.line, NULL,
			 "out of memory");
	if (at > 0 && (ps.rc == 0 || at < ps.err_line)) {
		ps.rc = 0;
		cfg_fail(&ps, QW_ERROR(QW_EFORMAT), at, NULL, "expected "
			 "'key = value', a [section] header or a comment");
	}
	if (ps.rc == 0 && cfg->ngroups == 0)
		cfg_fail(&ps, QW_ERROR(QW_EFORMAT), ps.line > 0 ? ps.line : 1,
			 NULL, "expected at least one [group NAME] section");
	if (ps.rc == 0)
		cfg_owned_apply(&ps);
	if (ps.rc == 0)
		cfg_mqtt_finish(&ps, ps.sec_line[3]); /* [mqtt] */
	if (ps.rc == 0 && cfg->ninputs == 0 && cfg->mqtt.ninputs == 0) {
		cfg->ninputs = 1;
		cfg_default_endpoint(&cfg->inputs[0], QW_CONFIG_DEFAULT_INPUT);
	}
	cfg_group_drop(&ps);
	free(ps.value);
	free(ps.owned);
	if (ps.rc != 0)
		qw_config_free(cfg);
	return ps.rc;
}

/* Starts *cfg; copies name into cfg->path. */
static int cfg_start(const char *name, struct qw_config *cfg, char *err,
		     size_t errlen)
{
	memset(cfg, 0, sizeof *cfg);
	if (err != NULL && errlen > 0)
		err[0] = '\0';
	if (strlen(name) >= sizeof cfg->path) {
		if (err != NULL && errlen > 0)
			snprintf(err, errlen, "%.64s...: path longer than %zu "
				 "bytes", name, sizeof cfg->path - 1);
		return QW_ERROR(QW_EIO); /* as open() would: ENAMETOOLONG */
	}
	strcpy(cfg->path, name);
	cfg_defaults(cfg);
	return 0;
}

int qw_config_load_string(const char *text, const char *name,
			  struct qw_config *cfg, char *err, size_t errlen)
{
	int rc = cfg_start(name, cfg, err, errlen);

	if (rc != 0)
		return rc;
	return cfg_parse_text(text, strlen(text), name, NULL, cfg, err, errlen);
}

/* Reads the whole file into a new buffer; QW_EIO or QW_EFORMAT (too big)
 * with a message in err. */
static int cfg_slurp(const char *path, char **text, size_t *len, char *err,
		     size_t errlen)
{
	FILE *f = fopen(path, "rb");
	char *buf = NULL, *nb;
	size_t n = 0, got;
	int rc = 0;

	if (f == NULL && errno == ENOMEM) {
		snprintf(err, errlen, "%s: out of memory", path);
		return QW_ERROR(QW_ENOMEM);
	}
	if (f == NULL) {
		snprintf(err, errlen, "%s: cannot open: %s", path,
			 strerror(errno));
		return QW_ERROR(QW_EIO);
	}
	do {
		nb = realloc(buf, n + CFG_READ_CHUNK);
		if (nb == NULL) {
			rc = QW_ERROR(QW_ENOMEM);
			snprintf(err, errlen, "%s: out of memory", path);
			break;
		}
		buf = nb;
		got = fread(buf + n, 1, CFG_READ_CHUNK, f);
		n += got;
	} while (got == CFG_READ_CHUNK && n <= CFG_FILE_MAX);
	if (rc == 0 && ferror(f)) {
		snprintf(err, errlen, "%s: cannot read: %s", path,
			 strerror(errno));
		rc = QW_ERROR(QW_EIO);
	} else if (rc == 0 && n > CFG_FILE_MAX) {
		snprintf(err, errlen, "%s: expected a file of at most %u bytes",
			 path, CFG_FILE_MAX);
		rc = QW_ERROR(QW_EFORMAT);
	}
	fclose(f);
	if (rc != 0)
		free(buf);
	*text = rc == 0 ? buf : NULL;
	*len = n;
	return rc;
}

int qw_config_load(const char *path, struct qw_config *cfg, char *err,
		   size_t errlen)
{
	return qw_config_load_owned(path, NULL, cfg, err, errlen);
}

int qw_config_load_owned(const char *path, const char *owned,
			 struct qw_config *cfg, char *err, size_t errlen)
{
	char scratch[QW_CONFIG_ERR_MAX];
	char *text = NULL;
	size_t len = 0;
	int rc = cfg_start(path, cfg, err, errlen);

	if (rc != 0)
		return rc;
	if (err == NULL || errlen == 0) {
		err = scratch;
		errlen = sizeof scratch;
	}
	rc = cfg_slurp(path, &text, &len, err, errlen);
	if (rc != 0) {
		qw_config_free(cfg);
		return rc;
	}
	rc = cfg_parse_text(text, len, path, owned, cfg, err, errlen);
	free(text);
	return rc;
}

void qw_config_free(struct qw_config *cfg)
{
	size_t i;

	if (cfg == NULL)
		return;
	for (i = 0; i < cfg->ngroups; i++) {
		free(cfg->groups[i].channels);
		free(cfg->groups[i].floor);
	}
	free(cfg->groups);
	memset(cfg, 0, sizeof *cfg);
}

const struct qw_group_conf *qw_config_group(const struct qw_config *cfg,
					    const char *name)
{
	size_t i;

	for (i = 0; i < cfg->ngroups; i++)
		if (strcmp(cfg->groups[i].name, name) == 0)
			return &cfg->groups[i];
	return NULL;
}

/* Over p as 8 bytes little endian, then each name and a 0 byte (so that
 * "ab","c" and "a","bc" differ). */
uint64_t qw_config_fingerprint(const struct qw_group_conf *g)
{
	uint64_t h = CFG_FNV_OFFSET, p = g->p;
	const unsigned char *s;
	size_t i;

	for (i = 0; i < 8; i++) {
		h ^= (p >> (8 * i)) & 0xffu;
		h *= CFG_FNV_PRIME;
	}
	for (i = 0; i < g->p; i++) {
		for (s = (const unsigned char *)g->channels[i]; *s; s++) {
			h ^= *s;
			h *= CFG_FNV_PRIME;
		}
		h *= CFG_FNV_PRIME; /* the 0 byte: h ^= 0 is a no-op */
	}
	return h;
}
