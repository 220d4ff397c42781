/* config_group.c: the [group NAME] sections of the configuration (config.c
 * reads the lines; quadwatch.ini(5) documents the keys).  Each key is parsed
 * as it is read into struct cfg_group_tmp; when the section ends the keys
 * are checked against each other (floor count against channels, durations
 * turned into readings with rate), merged over qw_params_default() and
 * checked by the core's qw_params_check().  Workload: a few groups of up to
 * QW_MAX_P channels, at start and on reload. */
#include <limits.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "config_int.h"
#include "num.h"

/* Readings counts travel as doubles before they become uint64_t: 2^53 keeps
 * every count exact (and is about 28 years at 10^7 readings/s). */
#define GRP_READINGS_MAX 9007199254740992.0

/* Bytes a channel name may not hold: they delimit lists, start comments, or
 * would need quoting in the CSV and JSON outputs. */
#define GRP_CHANNEL_BAN ",;#\"'\\=[]"

enum grp_key {
	GK_CHANNELS, GK_HALF_LIFE, GK_ALARMS, GK_RATE, GK_WARMUP, GK_PERSIST,
	GK_CLEAR, GK_FLOOR, GK_LEARN, GK_PARTIAL, GK_RELEARN, GK_MODE,
	GK_CORRECT, GK_DYNAMICS, GK_MAX_GAP, GK_SMOOTHING,
	GK_MODEL, GK_MODEL_USE,
	GK_COUNT
};

static const char grp_durations[] = "a duration such as 30s, 10min or 2h";

/* Group names become bus topics: [A-Za-z0-9_.-]; channel names are
 * printable ASCII without blanks or GRP_CHANNEL_BAN. */
static int grp_name_ok(const char *s, size_t n, int channel)
{
	size_t i;
	unsigned char c;

	if (n == 0 || n >= QW_CONFIG_NAME_MAX)
		return 0;
	for (i = 0; i < n; i++) {
		c = (unsigned char)s[i];
		if (channel && c > ' ' && c < 127 &&
		    strchr(GRP_CHANNEL_BAN, c) == NULL)
			continue;
		if ((c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') ||
		    (c >= '0' && c <= '9') || c == '_' || c == '.' || c == '-')
			continue;
		return 0;
	}
	return 1;
}

static int grp_nomem(struct cfg_parse *ps)
{
	return cfg_fail(ps, QW_ERROR(QW_ENOMEM), ps->key_at, ps->key,
			"out of memory");
}

static int grp_channels(struct cfg_parse *ps, const char *v)
{
	struct cfg_group_tmp *t = &ps->grp;
	size_t n = cfg_count(v), i, j, len;
	const char *item;

	if (n == 0)
		return cfg_bad(ps, "expected a comma-separated list of channel "
				   "names");
	if (n > QW_MAX_P)
		return cfg_bad(ps, "expected at most %d channels, got %zu",
			       QW_MAX_P, n);
	t->channels = calloc(n, sizeof *t->channels);
	if (t->channels == NULL)
		return grp_nomem(ps);
	for (i = 0; cfg_item(&v, &item, &len); i++) {
		if (len == 0)
			return cfg_bad(ps, "expected a channel name, got an "
					   "empty item (item %zu)", i + 1);
		if (!grp_name_ok(item, len, 1))
			return cfg_bad(ps, "expected a channel name of 1 to %d "
					   "printable characters without blanks "
					   "or any of %s, got '%.*s'",
				       QW_CONFIG_NAME_MAX - 1, GRP_CHANNEL_BAN,
				       (int)len, item);
		memcpy(t->channels[i], item, len);
		t->channels[i][len] = '\0';
		for (j = 0; j < i; j++)
			if (strcmp(t->channels[j], t->channels[i]) == 0)
				return cfg_bad(ps, "expected each channel "
						   "once; '%s' is listed twice",
					       t->channels[i]);
	}
	t->p = n;
	return 0;
}

static int grp_half_life(struct cfg_parse *ps, const char *v)
{
	struct cfg_group_tmp *t = &ps->grp;
	double h;
	int unit;

	if (qw_num_duration(v, &unit, &h) != 0 || !(h > 0) || !isfinite(h))
		return cfg_bad(ps, "expected a number of readings > 0, or %s; "
				   "got '%s'", grp_durations, v);
	t->half_life = h;
	t->time_based = unit;
	return 0;
}

/* A finite number > 0. */
static int grp_positive(struct cfg_parse *ps, const char *v,
			const char *what, double *out)
{
	double x;

	if (qw_num_double(v, (size_t)-1, 0, 0, &x) != 0 || !(x > 0))
		return cfg_bad(ps, "expected %s, a number > 0; got '%s'", what,
			       v);
	*out = x;
	return 0;
}

static int grp_alarms(struct cfg_parse *ps, const char *v)
{
	return grp_positive(ps, v, "raised alarms per day",
			    &ps->grp.alarms_per_day);
}

static int grp_rate(struct cfg_parse *ps, const char *v)
{
	return grp_positive(ps, v, "readings per second", &ps->grp.rate);
}

/* A whole number of readings, or a duration with a unit (*secs = 1). */
static int grp_count(struct cfg_parse *ps, const char *v, double *out,
		     int *secs)
{
	uint64_t n;
	double d;
	int unit;

	if (qw_num_u64(v, (size_t)-1, 0, (uint64_t)GRP_READINGS_MAX, &n) == 0) {
		*out = (double)n;
		*secs = 0;
		return 0;
	}
	if (qw_num_duration(v, &unit, &d) == 0 && unit && isfinite(d)) {
		*out = d;
		*secs = 1;
		return 0;
	}
	return cfg_bad(ps, "expected a whole number of readings, or %s; "
			   "got '%s'", grp_durations, v);
}

static int grp_warmup(struct cfg_parse *ps, const char *v)
{
	return grp_count(ps, v, &ps->grp.warmup, &ps->grp.warmup_s);
}

static int grp_relearn(struct cfg_parse *ps, const char *v)
{
	return grp_count(ps, v, &ps->grp.relearn, &ps->grp.relearn_s);
}

static int grp_persist(struct cfg_parse *ps, const char *v)
{
	const char *slash = strchr(v, '/');
	uint64_t k, m;

	if (slash == NULL ||
	    qw_num_u64(v, (size_t)(slash - v), 1, QW_ALARM_MAX_M, &k) != 0 ||
	    qw_num_u64(slash + 1, (size_t)-1, 1, QW_ALARM_MAX_M, &m) != 0 ||
	    k > m)
		return cfg_bad(ps, "expected k/m with 1 <= k <= m <= %d (raise "
				   "when k of the last m readings are over the "
				   "limit); got '%s'", QW_ALARM_MAX_M, v);
	ps->grp.k = (unsigned)k;
	ps->grp.m = (unsigned)m;
	return 0;
}

static int grp_clear(struct cfg_parse *ps, const char *v)
{
	uint64_t n;

	if (qw_num_u64(v, (size_t)-1, 1, UINT_MAX, &n) != 0)
		return cfg_bad(ps, "expected a whole number of readings from 1 "
				   "to %u; got '%s'", UINT_MAX, v);
	ps->grp.clear_n = (unsigned)n;
	return 0;
}

static int grp_floor(struct cfg_parse *ps, const char *v)
{
	struct cfg_group_tmp *t = &ps->grp;
	size_t n = cfg_count(v), i, len;
	const char *item;

	if (n == 0 || n > QW_MAX_P)
		return cfg_bad(ps, "expected 1 to %d noise floors (std dev, "
				   "channel units)", QW_MAX_P);
	t->floor = calloc(n, sizeof *t->floor);
	if (t->floor == NULL)
		return grp_nomem(ps);
	for (i = 0; cfg_item(&v, &item, &len); i++)
		if (qw_num_double(item, len, 0, 0, &t->floor[i]) != 0 ||
		    !(t->floor[i] >= 0))
			return cfg_bad(ps, "expected a noise floor >= 0 (std "
					   "dev, channel units; 0 = auto), got "
					   "'%.*s' (item %zu)", (int)len, item,
				       i + 1);
	t->nfloor = n;
	return 0;
}

static int grp_learn(struct cfg_parse *ps, const char *v)
{
	static const char *const names[] = {"skip", "clip", "all"};
	static const int modes[] = {QW_LEARN_SKIP, QW_LEARN_CLIP,
				    QW_LEARN_ALL};
	size_t i;

	for (i = 0; i < 3; i++)
		if (strcasecmp(v, names[i]) == 0) {
			ps->grp.learn = modes[i];
			return 0;
		}
	return cfg_bad(ps, "expected skip, clip or all; got '%s'", v);
}

/* One of names[0..n-1] (any case) into *out; else a message listing them. */
static int grp_choice(struct cfg_parse *ps, const char *v,
		      const char *const *names, size_t n, const char *list,
		      int *out)
{
	size_t i;

	for (i = 0; i < n; i++)
		if (strcasecmp(v, names[i]) == 0) {
			*out = (int)i;
			return 0;
		}
	return cfg_bad(ps, "expected %s; got '%s'", list, v);
}

static int grp_partial(struct cfg_parse *ps, const char *v)
{
	/* index = enum qw_partial */
	static const char *const names[] = {"hold", "learn"};

	return grp_choice(ps, v, names, 2, "learn or hold", &ps->grp.partial);
}

static int grp_mode(struct cfg_parse *ps, const char *v)
{
	static const char *const names[] = {"plain", "mewma"};

	return grp_choice(ps, v, names, 2, "plain or mewma", &ps->grp.mode);
}

static int grp_dynamics(struct cfg_parse *ps, const char *v)
{
	/* index = enum qw_dynamics */
	static const char *const names[] = {"none", "ar1", "var1"};

	return grp_choice(ps, v, names, 3, "none, ar1 or var1",
			  &ps->grp.dynamics);
}

static int grp_max_gap(struct cfg_parse *ps, const char *v)
{
	double d;
	int unit;

	if (qw_num_duration(v, &unit, &d) != 0 || !unit || !(d > 0) ||
	    !isfinite(d))
		return cfg_bad(ps, "expected %s (the longest step between two "
				   "readings that still pair); got '%s'",
			       grp_durations, v);
	ps->grp.max_gap = d;
	return 0;
}

static int grp_smoothing(struct cfg_parse *ps, const char *v)
{
	double x;

	if (qw_num_double(v, (size_t)-1, 0, 0, &x) != 0 || !(x > 0) ||
	    !(x <= 1))
		return cfg_bad(ps, "expected the MEWMA weight, a number in "
				   "(0, 1]; got '%s'", v);
	ps->grp.smoothing = x;
	return 0;
}

static int grp_correct(struct cfg_parse *ps, const char *v)
{
	if (strcasecmp(v, "yes") == 0 || strcasecmp(v, "no") == 0) {
		ps->grp.correct = strcasecmp(v, "yes") == 0;
		return 0;
	}
	return cfg_bad(ps, "expected yes or no; got '%s'", v);
}

/* model = PATH: a model file of `quadwatch fit` (read when the detector
 * is built, not here: check, run and replay report a bad file). */
static int grp_model(struct cfg_parse *ps, const char *v)
{
	size_t n = strlen(v);

	if (n == 0 || n >= sizeof ps->grp.model)
		return cfg_bad(ps, "expected the path of a model file from "
				   "quadwatch fit (1 to %zu bytes)",
			       sizeof ps->grp.model - 1);
	memcpy(ps->grp.model, v, n + 1);
	return 0;
}

static int grp_model_use(struct cfg_parse *ps, const char *v)
{
	if (strcasecmp(v, "fixed") == 0 || strcasecmp(v, "warm") == 0) {
		ps->grp.model_use = strcasecmp(v, "warm") == 0
				    ? QW_MODEL_WARM : QW_MODEL_FIXED;
		return 0;
	}
	return cfg_bad(ps, "expected fixed or warm; got '%s'", v);
}

const struct cfg_key cfg_group_keys[GK_COUNT + 1] = {
	[GK_CHANNELS] = {"channels", grp_channels, 1},
	[GK_HALF_LIFE] = {"half_life", grp_half_life, 0},
	[GK_ALARMS] = {"alarms_per_day", grp_alarms, 0},
	[GK_RATE] = {"rate", grp_rate, 0},
	[GK_WARMUP] = {"warmup", grp_warmup, 0},
	[GK_PERSIST] = {"persist", grp_persist, 0},
	[GK_CLEAR] = {"clear", grp_clear, 0},
	[GK_FLOOR] = {"floor", grp_floor, 1},
	[GK_LEARN] = {"learn", grp_learn, 0},
	[GK_PARTIAL] = {"partial", grp_partial, 0},
	[GK_RELEARN] = {"relearn_after", grp_relearn, 0},
	[GK_MODE] = {"mode", grp_mode, 0},
	[GK_CORRECT] = {"correct", grp_correct, 0},
	[GK_DYNAMICS] = {"dynamics", grp_dynamics, 0},
	[GK_MAX_GAP] = {"max_gap", grp_max_gap, 0},
	[GK_SMOOTHING] = {"smoothing", grp_smoothing, 0},
	[GK_MODEL] = {"model", grp_model, 0},
	[GK_MODEL_USE] = {"model_use", grp_model_use, 0},
	[GK_COUNT] = {NULL, NULL, 0},
};

int cfg_group_begin(struct cfg_parse *ps, const char *name, int line)
{
	const struct qw_config *c = ps->cfg;
	size_t i, n = strlen(name);

	if (!grp_name_ok(name, n, 0))
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), line, NULL,
				"expected [group NAME], NAME of 1 to %d "
				"characters from A-Z a-z 0-9 _ . -",
				QW_CONFIG_NAME_MAX - 1);
	for (i = 0; i < c->ngroups; i++)
		if (strcmp(c->groups[i].name, name) == 0)
			return cfg_fail(ps, QW_ERROR(QW_EFORMAT), line, NULL,
					"expected each group once; first on "
					"line %d", c->groups[i].line);
	if (c->ngroups >= QW_CONFIG_MAX_GROUPS)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), line, NULL,
				"expected at most %d groups",
				QW_CONFIG_MAX_GROUPS);
	cfg_group_drop(ps);
	memcpy(ps->grp.name, name, n + 1);
	ps->grp.line = line;
	return 0;
}

void cfg_group_drop(struct cfg_parse *ps)
{
	free(ps->grp.channels);
	free(ps->grp.floor);
	memset(&ps->grp, 0, sizeof ps->grp);
}

/* Readings from a count (secs 0) or seconds at rate, rounded up so that a
 * duration is always covered; QW_ERANGE past GRP_READINGS_MAX. */
static int grp_readings(double v, int secs, double rate, uint64_t *out)
{
	double r = secs ? ceil(v * rate) : v;

	if (!(r <= GRP_READINGS_MAX))
		return QW_ERROR(QW_ERANGE);
	*out = (uint64_t)r;
	return 0;
}

/* The key's line, or the section's when the key was not given. */
static int grp_line(const struct cfg_parse *ps, int key)
{
	return ps->key_line[key] ? ps->key_line[key] : ps->grp.line;
}

/* Merges what was read over the core's defaults into g->params. */
static int grp_params(struct cfg_parse *ps, struct qw_group_conf *g)
{
	const struct cfg_group_tmp *t = &ps->grp;
	const int *kl = ps->key_line;
	struct qw_params *par = &g->params;
	uint64_t n = 0;
	double alpha;

	qw_params_default(par, t->p);
	if (kl[GK_HALF_LIFE]) {
		par->half_life = t->half_life;
		par->time_based = t->time_based;
	}
	if (kl[GK_RATE])
		par->rate = t->rate;
	if (kl[GK_ALARMS])
		par->alarms_per_day = t->alarms_per_day;
	if (kl[GK_PERSIST]) {
		par->persist_k = t->k;
		par->persist_m = t->m;
	}
	if (kl[GK_CLEAR])
		par->clear_n = t->clear_n;
	if (kl[GK_LEARN])
		par->learn = (enum qw_learn)t->learn;
	if (kl[GK_PARTIAL])
		par->partial = (enum qw_partial)t->partial;
	if (kl[GK_CORRECT])
		par->correct = t->correct;
	if (kl[GK_DYNAMICS])
		par->dynamics = (enum qw_dynamics)t->dynamics;
	if (kl[GK_MAX_GAP])
		par->max_gap = t->max_gap;
	if (kl[GK_MODE])
		par->mode = (enum qw_mode)t->mode;
	if (kl[GK_SMOOTHING])
		par->smoothing = t->smoothing;
	par->floor = g->floor;
	if (grp_readings(t->warmup, t->warmup_s, par->rate, &n) != 0)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), kl[GK_WARMUP],
				"warmup", "expected at most 2^53 readings");
	if (n > 0)
		par->warmup = n; /* 0 or absent: the core's default */
	if (grp_readings(t->relearn, t->relearn_s, par->rate, &n) != 0)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), kl[GK_RELEARN],
				"relearn_after", "expected at most 2^53 readings");
	par->relearn_after = n;
	if (qw_limit_alpha(par->alarms_per_day, par->rate, par->persist_k,
			   par->persist_m, &alpha) != 0)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), grp_line(ps, GK_ALARMS),
				"alarms_per_day", "expected fewer alarms per "
				"day than %g readings/s with persist %u/%u can "
				"raise", par->rate, par->persist_k,
				par->persist_m);
	if (par->mode == QW_MODE_MEWMA &&
	    (par->persist_k != 1 || par->persist_m != 1))
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), grp_line(ps, GK_PERSIST),
				"persist", "expected 1/1 with mode = mewma (the "
				"EWMA already accumulates evidence over readings; "
				"its limit is solved for the raise rate)");
	if (par->dynamics == QW_DYN_VAR1 && 2 * par->p > QW_MAX_P)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT),
				grp_line(ps, GK_DYNAMICS), "dynamics",
				"expected at most %d channels with var1 (its "
				"model holds twice the channels)", QW_MAX_P / 2);
	if (qw_params_check(par) != 0)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), t->line, NULL,
				"expected settings the detector accepts; it "
				"refused this combination");
	return 0;
}

int cfg_group_end(struct cfg_parse *ps)
{
	struct cfg_group_tmp *t = &ps->grp;
	struct qw_config *c = ps->cfg;
	struct qw_group_conf *g;
	size_t i;

	if (ps->rc != 0)
		return ps->rc;
	if (t->channels == NULL)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), t->line, "channels",
				"required key missing; expected a "
				"comma-separated list of channel names");
	if (ps->key_line[GK_MODEL_USE] && !ps->key_line[GK_MODEL])
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT),
				ps->key_line[GK_MODEL_USE], "model_use",
				"expected a model = PATH beside it (the model "
				"file of quadwatch fit)");
	if (t->nfloor > 1 && t->nfloor != t->p && t->p == 1)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT),
				ps->key_line[GK_FLOOR], "floor",
				"expected 1 value (one channel), got %zu",
				t->nfloor);
	if (t->nfloor > 1 && t->nfloor != t->p)
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT),
				ps->key_line[GK_FLOOR], "floor",
				"expected 1 value or %zu (one per channel), "
				"got %zu", t->p, t->nfloor);
	g = realloc(c->groups, (c->ngroups + 1) * sizeof *c->groups);
	if (g == NULL)
		return cfg_fail(ps, QW_ERROR(QW_ENOMEM), t->line, NULL,
				"out of memory");
	c->groups = g;
	g += c->ngroups;
	memset(g, 0, sizeof *g);
	g->floor = calloc(t->p, sizeof *g->floor);
	if (g->floor == NULL)
		return cfg_fail(ps, QW_ERROR(QW_ENOMEM), t->line, NULL,
				"out of memory");
	c->ngroups++; /* from here qw_config_free owns g */
	for (i = 0; i < t->p && t->nfloor > 0; i++)
		g->floor[i] = t->floor[t->nfloor == 1 ? 0 : i];
	memcpy(g->name, t->name, sizeof g->name);
	g->p = t->p;
	g->channels = t->channels;
	t->channels = NULL;
	g->line = t->line;
	g->half_life_line = ps->key_line[GK_HALF_LIFE];
	memcpy(g->model, t->model, sizeof g->model);
	g->model_use = t->model_use;
	return grp_params(ps, g);
}
