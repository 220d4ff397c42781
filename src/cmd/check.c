/* check.c: `quadwatch check -c FILE [-g GROUPS]`: validates a
 * configuration and prints what it implies for the groups a daemon would
 * own (-g, else [bus] groups, else all), without touching the bus (as
 * ntpd -n does).  For each group it builds the real detector (qw_detector_alloc) and prints the
 * per-reading alpha solved from alarms_per_day, rate and persist, the plain
 * chi-square limit and the finite-sample corrected limit at full effective
 * size.  Output is one "key: value [unit]" line per fact, a blank line and
 * "group: NAME" before each group's indented lines, numbers at %.10g, so
 * that scripts can read it (see quadwatch-check(1)).
 * Exit: 0 valid, 1 out of memory, 2 usage or configuration error. */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "auth.h"
#include "cmd.h"
#include "config.h"
#include "model.h"

#define CHK_VALUE_COL 27 /* column of values: after the longest key */

static void chk_usage(FILE *f)
{
	fprintf(f, "usage: quadwatch check -c FILE [-g GROUPS] [-q]\n"
		   "  -c FILE  configuration to validate (quadwatch.ini(5))\n"
		   "  -g GROUPS  the groups a daemon run with -g would own\n"
		   "  -q       print nothing; the exit code tells\n"
		   "  -h       this help\n");
}

/* "key:" indented and padded so that values start in one column. */
static void chk_key(int indent, const char *key)
{
	int pad = CHK_VALUE_COL - indent - (int)strlen(key) - 1;

	printf("%*s%s:%*s", indent, "", key, pad > 1 ? pad : 1, "");
}

/* One aligned "key: value" line; indent 2 inside a group. */
static void chk_kv(int indent, const char *key, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));
static void chk_kv(int indent, const char *key, const char *fmt, ...)
{
	va_list ap;

	chk_key(indent, key);
	va_start(ap, fmt);
	vprintf(fmt, ap);
	va_end(ap);
	putchar('\n');
}

static void chk_endpoint(const char *key, const struct qw_endpoint *ep)
{
	if (ep->addr[0] == '\0')
		chk_kv(0, key, "none");
	else
		chk_kv(0, key, "%c%s", ep->bind ? '@' : '>', ep->addr);
}

/* The groups this daemon owns ([bus] groups or -g) and where that came
 * from; a daemon without a selection owns every group of the file. */
static void chk_owned(const struct qw_config *c)
{
	size_t i;

	chk_kv(0, "groups_in_file", "%zu", c->ngroups_file);
	chk_key(0, "owned");
	if (!c->groups_cli && c->groups_line == 0)
		printf("all");
	for (i = 0; (c->groups_cli || c->groups_line) && i < c->ngroups; i++)
		printf("%s%s", i ? ", " : "", c->groups[i].name);
	putchar('\n');
	if (c->groups_cli)
		chk_kv(0, "selection", "-g");
	else if (c->groups_line)
		chk_kv(0, "selection", "[bus] groups, line %d",
		       c->groups_line);
	else
		chk_kv(0, "selection", "none (every group)");
}

static void chk_mqtt_url(const char *key, const struct qw_mqtt_url *u)
{
	int v6 = strchr(u->host, ':') != NULL;

	chk_kv(0, key, "%s://%s%s%s:%d/%s", u->tls ? "mqtts" : "mqtt",
	       v6 ? "[" : "", u->host, v6 ? "]" : "", u->port, u->topic);
}

/* The MQTT inputs, alerts and settings, when a broker is named. */
static void chk_mqtt(const struct qw_mqtt_conf *m)
{
	size_t i;

	if (m->ninputs == 0 && !m->has_alerts)
		return;
	for (i = 0; i < m->ninputs; i++)
		chk_mqtt_url("input", &m->inputs[i]);
	if (m->has_alerts)
		chk_mqtt_url("mqtt_alerts", &m->alerts);
	chk_kv(0, "mqtt", "qos %d, keepalive %.10g s, reconnect %.10g to "
	       "%.10g s, %s session%s%s", m->qos, m->keepalive,
	       m->reconnect_min, m->reconnect_max,
	       m->client_id[0] ? "kept" : "clean",
	       m->credentials[0] ? ", credentials from a file" : "",
	       m->cert_file[0] ? ", client certificate" : "");
}

static void chk_daemon(const struct qw_config *c)
{
	size_t i;

	chk_kv(0, "config", "%s", c->path);
	for (i = 0; i < c->ninputs; i++)
		chk_endpoint("input", &c->inputs[i]);
	chk_mqtt(&c->mqtt);
	chk_endpoint("alerts", &c->alerts);
	chk_endpoint("control", &c->control);
	chk_kv(0, "stats_every", "%.10g s", c->stats_every);
	chk_kv(0, "max_frame", "%zu bytes", c->max_frame);
	chk_kv(0, "state_dir", "%s", c->state_dir[0] ? c->state_dir : "none");
	chk_kv(0, "state_every", "%.10g s", c->state_every);
	chk_kv(0, "security", "%s", c->server_key[0] || c->client_keys[0] ?
	       "curve" : "off");
	chk_kv(0, "groups", "%zu", c->ngroups);
	chk_owned(c);
}

/* A list of p channel names or floors on one line. */
static void chk_list(const struct qw_group_conf *g, int floors)
{
	size_t i;
	int auto_all = 1;

	for (i = 0; i < g->p; i++)
		auto_all &= g->floor[i] == 0;
	chk_key(2, floors ? "floor" : "channels");
	if (floors && auto_all) {
		printf("auto\n");
		return;
	}
	for (i = 0; i < g->p; i++) {
		if (floors)
			printf("%s%.10g", i ? ", " : "", g->floor[i]);
		else
			printf("%s%s", i ? ", " : "", g->channels[i]);
	}
	putchar('\n');
}

static void chk_params(const struct qw_group_conf *g)
{
	const struct qw_params *par = &g->params;
	static const char *const learn[] = {"skip", "clip", "all"};
	static const char *const dyn[] = {"none", "ar1", "var1"};

	chk_kv(2, "line", "%d", g->line);
	chk_list(g, 0);
	chk_kv(2, "p", "%zu", g->p);
	if (par->time_based)
		chk_kv(2, "half_life", "%.10g s (%.10g readings at the "
		       "nominal rate)", par->half_life,
		       par->half_life * par->rate);
	else
		chk_kv(2, "half_life", "%.10g readings (%.10g s at the "
		       "nominal rate)", par->half_life,
		       par->half_life / par->rate);
	chk_kv(2, "rate", "%.10g readings/s", par->rate);
	chk_kv(2, "alarms_per_day", "%.10g", par->alarms_per_day);
	chk_kv(2, "persist", "%u/%u", par->persist_k, par->persist_m);
	chk_kv(2, "clear", "%u readings", par->clear_n);
	chk_kv(2, "warmup", "%llu readings (%.10g s)",
	       (unsigned long long)par->warmup,
	       (double)par->warmup / par->rate);
	chk_kv(2, "learn", "%s", learn[par->learn <= QW_LEARN_ALL ?
				      par->learn : 0]);
	chk_kv(2, "partial", "%s",
	       par->mode == QW_MODE_MEWMA
		       ? "not scored, not learned (mewma charts complete "
			 "readings)"
	       : par->partial == QW_PARTIAL_LEARN
		       ? "learn (once warm: missing channels by their "
			 "expected value)"
		       : "hold (scored, never learned)");
	if (par->relearn_after > 0)
		chk_kv(2, "relearn_after", "%llu readings",
		       (unsigned long long)par->relearn_after);
	else
		chk_kv(2, "relearn_after", "never");
	chk_kv(2, "correct", "%s", par->correct ? "yes" : "no");
	chk_kv(2, "dynamics", "%s", dyn[par->dynamics <= QW_DYN_VAR1 ?
					par->dynamics : 0]);
	if (par->dynamics != QW_DYN_NONE)
		chk_kv(2, "max_gap", "%.10g s%s", qw_params_max_gap(par),
		       par->max_gap > 0 ? "" : " (the default)");
	chk_kv(2, "mode", "%s", par->mode == QW_MODE_MEWMA ? "mewma" : "plain");
	if (par->mode == QW_MODE_MEWMA)
		chk_kv(2, "smoothing", "%.10g", par->smoothing);
	chk_list(g, 1);
}

/* Builds group g's detector and prints what it derives.  0, or an exit
 * code with a message on stderr. */
static int chk_group(const struct qw_config *c, const struct qw_group_conf *g,
		     int quiet)
{
	const struct qw_params *par = &g->params;
	struct qw_model_meta meta;
	char err[QW_CONFIG_ERR_MAX];
	struct timespec t0, t1;
	qw_detector *d = NULL;
	double alpha, plain, steady, nu, scale, ms;
	int rc;

	/* Building the detector solves the limits (MEWMA: a quadrature); its
	 * time is what each start and reload of the group costs.  A group
	 * with a model file builds from it, as run does. */
	clock_gettime(CLOCK_MONOTONIC, &t0);
	rc = qw_model_detector(g, &d, &meta, err, sizeof err);
	clock_gettime(CLOCK_MONOTONIC, &t1);
	ms = (double)(t1.tv_sec - t0.tv_sec) * 1e3 +
	     (double)(t1.tv_nsec - t0.tv_nsec) / 1e6;
	if (rc != 0 && rc != QW_ENOMEM) {
		fprintf(stderr, "quadwatch check: %s:%d: [group %s] model: "
			"%s\n", c->path, g->line, g->name, err);
		return QW_EXIT_USAGE;
	}
	if (d == NULL) {
		fprintf(stderr, "quadwatch check: %s:%d: [group %s]: cannot "
			"build the detector (%zu channels): out of memory\n",
			c->path, g->line, g->name, g->p);
		return QW_EXIT_FAIL;
	}
	alpha = qw_detector_alpha(d);
	plain = qw_limit_chisq(alpha, (unsigned)g->p);
	steady = qw_detector_steady_limit(d);
	nu = qw_detector_steady_nu(d);
	scale = qw_detector_steady_scale(d);
	meta.limit_emp = qw_detector_limit(d); /* a model's limit in force */
	qw_detector_free(d);
	if (!isfinite(steady)) {
		fprintf(stderr, "quadwatch check: %s:%d: [group %s] half_life: "
			"expected a longer half-life: at %.10g the model's "
			"effective size cannot support a limit for %zu "
			"channels, so the group could never alarm\n", c->path,
			g->half_life_line ? g->half_life_line : g->line,
			g->name, par->half_life, g->p);
		return QW_EXIT_USAGE;
	}
	if (quiet)
		return 0;
	printf("\n");
	chk_kv(0, "group", "%s", g->name);
	chk_params(g);
	chk_kv(2, "alpha", "%.10g", alpha);
	chk_kv(2, "limit_chisq", "%.10g", plain);
	chk_kv(2, "limit_steady", "%.10g%s", steady,
	       par->mode == QW_MODE_MEWMA ? " (MEWMA statistic)" : "");
	if (par->mode == QW_MODE_MEWMA)
		chk_kv(2, "limit_solved_in", "%.3g ms", ms);
	chk_kv(2, "steady_nu", "%.17g", nu);
	chk_kv(2, "steady_scale", "%.17g", scale);
	chk_kv(2, "exceedances_per_day", "%.10g",
	       alpha * par->rate * QW_SECONDS_PER_DAY);
	chk_kv(2, "expected_alarms_per_day", "%.10g", par->alarms_per_day);
	chk_kv(2, "fingerprint", "%016llx",
	       (unsigned long long)qw_config_fingerprint(g));
	if (g->model[0] != '\0') {
		chk_kv(2, "model", "%s", g->model);
		chk_kv(2, "model_use", "%s", g->model_use == QW_MODEL_WARM
		       ? "warm" : "fixed");
		chk_kv(2, "model_readings", "%llu",
		       (unsigned long long)meta.used);
		chk_kv(2, "model_limit_factor", "%.10g",
		       qw_model_factor(&meta, g->model_use));
		chk_kv(2, "model_limit", "%.10g", meta.limit_emp);
	}
	return 0;
}

/* The [mqtt] files (TLS, credentials) as the daemon would read them. */
static int chk_mqtt_files(const struct qw_config *c)
{
	char err[QW_CONFIG_ERR_MAX];

	if (qw_config_mqtt_files(c, err, sizeof err) == 0)
		return 0;
	fprintf(stderr, "quadwatch check: %s\n", err);
	return QW_EXIT_USAGE;
}

/* The [security] key files load as the daemon would load them (modes,
 * formats, the allow-list), so `check` before a start catches a bad key. */
static int chk_keys(const struct qw_config *c)
{
	struct qw_auth_setup keys;
	char err[QW_AUTH_ERR_MAX];
	int rc = qw_auth_setup_load(c, &keys, err, sizeof err);

	qw_auth_setup_free(&keys);
	if (rc != 0) {
		fprintf(stderr, "quadwatch check: %s\n", err);
		return QW_EXIT_USAGE;
	}
	return chk_mqtt_files(c);
}

int qw_cmd_check(int argc, char **argv)
{
	struct qw_config cfg;
	char err[QW_CONFIG_ERR_MAX];
	const char *path = NULL, *owned = NULL;
	int c, quiet = 0, rc = 0;
	size_t i;

	optind = 1;
	while ((c = getopt(argc, argv, "c:g:qh")) != -1) {
		switch (c) {
		case 'c': path = optarg; break;
		case 'g': owned = optarg; break;
		case 'q': quiet = 1; break;
		case 'h': chk_usage(stdout); return QW_EXIT_OK;
		default: chk_usage(stderr); return QW_EXIT_USAGE;
		}
	}
	if (path == NULL || optind != argc) {
		chk_usage(stderr);
		return QW_EXIT_USAGE;
	}
	rc = qw_config_load_owned(path, owned, &cfg, err, sizeof err);
	if (rc != 0) {
		fprintf(stderr, "quadwatch check: %s\n", err);
		return rc == QW_ENOMEM ? QW_EXIT_FAIL : QW_EXIT_USAGE;
	}
	if ((rc = chk_keys(&cfg)) == 0 && !quiet)
		chk_daemon(&cfg);
	for (i = 0; rc == 0 && i < cfg.ngroups; i++)
		rc = chk_group(&cfg, &cfg.groups[i], quiet);
	qw_config_free(&cfg);
	if (rc == 0 && fflush(stdout) != 0)
		return QW_EXIT_FAIL;
	return rc;
}
