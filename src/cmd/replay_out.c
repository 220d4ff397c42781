/* replay_out.c: the figures of a replay, as one JSON object (--json) or
 * as the human summary (default), per group and in total.
 *
 * Definitions (quadwatch-replay(1) documents them): "eligible" readings
 * are scored readings after warm-up (the model had learned `warmup`
 * readings, so an alarm was possible); days =
 * eligible / rate / 86400 at the configured nominal rate; expected_alarms
 * = alarms_per_day * days.  Tuning help: the empirical (1 - alpha)
 * quantile of the eligible full-channel scores is the limit that this
 * recording would have exceeded at the configured per-reading alpha; the
 * empirical alpha quantile of the eligible p-values is the alpha the model
 * should have used for that.  Calibration: the Kolmogorov-Smirnov distance
 * of the eligible p-values from uniform.  Delivered alarms per day: the
 * alarms raised over the data time from the first to the last eligible
 * reading; the lag-1 autocorrelation of the eligible scores in stream
 * order; with persist k > 1 the warnings of qw_summary_warn.
 *
 * Workload: once per replay and group; the figures the digest keeps
 * (digest.h): selections over its kept tails, one pass over its
 * histograms. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "log.h"
#include "replay.h"

#define RP_ADVICE "whiten the readings (dynamics = var1 or dynamics = " \
	"ar1 in the [group %s] section) or fit the model from a healthy " \
	"recording (quadwatch fit)"

/* The texts of st->warn, one sentence each, into st->warnings. */
static void rp_warnings(const struct replay_group *g, struct replay_stats *st)
{
	const struct qw_params *par = &g->conf->params;

	st->nwarn = 0;
	if (st->warn & QW_WARN_AUTOCORR)
		snprintf(st->warnings[st->nwarn++], RP_WARN_LEN,
			 "the scores are strongly autocorrelated (lag-1 "
			 "%.3g, above %.2g): persist %u/%u assumes "
			 "independent readings, so alarms come faster than "
			 "configured; " RP_ADVICE, st->lag1, QW_WARN_LAG1,
			 par->persist_k, par->persist_m, g->conf->name);
	if (st->warn & QW_WARN_RATE)
		snprintf(st->warnings[st->nwarn++], RP_WARN_LEN,
			 "%.4g alarms per day delivered, far above the %g "
			 "configured, with persist %u/%u: if this recording "
			 "is of normal operation, its readings are not "
			 "independent; " RP_ADVICE, st->alarms_per_day,
			 st->conf_apd, par->persist_k, par->persist_m,
			 g->conf->name);
	if (st->warn & QW_WARN_PACE)
		snprintf(st->warnings[st->nwarn++], RP_WARN_LEN,
			 "readings came at %.4g per second of data time "
			 "after warm-up, not the configured rate = %g: the "
			 "limit is solved per reading for that rate, so the "
			 "delivered alarms per day differ from the configured "
			 "by about that factor; set rate in the [group %s] "
			 "section to the data's own", (double)(st->lag1_n - 1)
			 / st->guard_s, par->rate, g->conf->name);
}

static void rp_rejected(const struct replay_group *g, struct replay_stats *st)
{
	const struct qw_counters *c = qw_detector_counters(g->det);

	memcpy(st->rejected, g->rejected, sizeof st->rejected);
	st->rejected[RP_NONFINITE] += c->rej_nonfinite;
	st->rejected[RP_TIME] += c->rej_time;
	st->rejected[RP_OVERFLOW] += c->rej_overflow;
	st->rejected[RP_EMPTY] += c->rej_empty;
}

/* Delivered alarms per day, lag-1 autocorrelation of the eligible scores
 * (every dof, stream order) and the warnings. */
static void rp_dependence(const struct replay_group *g,
			  struct replay_stats *st)
{
	const struct qw_params *par = &g->conf->params;
	uint64_t n = g->dg.eligible;

	st->guard_s = n > 0 ? g->dg.t_hi - g->dg.t_lo : 0.0;
	st->alarms_per_day = qw_summary_per_day(st->alarms, st->guard_s);
	st->conf_apd = par->alarms_per_day;
	st->lag1 = qw_lag1_get(&g->dg.lag1);
	st->lag1_n = (size_t)n;
	st->warn = qw_summary_warn(par->persist_k, st->lag1, (size_t)n,
				   st->alarms, st->conf_apd * st->guard_s
				   / QW_SECONDS_PER_DAY);
	st->warn |= qw_summary_warn_pace(par->rate, (size_t)n, st->guard_s);
	rp_warnings(g, st);
}

/* Tuning and calibration from the digest (exact, or to the resolution
 * it says). */
static void rp_tuning(const struct replay_group *g, struct replay_stats *st)
{
	const struct qw_digest *dg = &g->dg;

	st->tune_n = (size_t)dg->score.n;
	st->tune_limit = dg->failed ? NAN
			 : qw_extreme_get(&dg->score, 1.0 - st->alpha,
				       &st->tune_limit_res);
	st->tune_alpha = dg->failed ? NAN
			 : qw_extreme_get(&dg->pv, st->alpha,
				       &st->tune_alpha_res);
	st->tune_apd = g->conf->params.alarms_per_day * st->tune_alpha
		       / st->alpha;
	st->ks = qw_digest_ks(dg, &st->ks_res);
	st->ks_n = (size_t)dg->pv.n;
	st->ks_crit = qw_summary_ks_crit05(st->ks_n);
}

int qw_replay_stats(const struct replay *rp, const struct replay_group *g,
		    struct replay_stats *st)
{
	const struct qw_counters *c = qw_detector_counters(g->det);
	const struct qw_params *par = &g->conf->params;

	(void)rp;
	memset(st, 0, sizeof *st);
	st->readings = c->readings;
	st->scored = c->scored;
	st->exceedances = c->exceedances;
	st->alarms = c->alarms;
	st->eligible = g->dg.eligible;
	st->span_s = c->readings > 0 ? g->t_last - g->t_first : 0.0;
	st->days = (double)st->eligible / par->rate / QW_SECONDS_PER_DAY;
	st->expected = par->alarms_per_day * st->days;
	st->alpha = qw_detector_alpha(g->det);
	st->limit = qw_detector_steady_limit(g->det);
	st->limit_end = qw_detector_limit(g->det);
	st->dof = (unsigned)g->conf->p;
	rp_rejected(g, st);
	qw_labels_metrics(&g->labels, &st->lm);
	rp_dependence(g, st);
	rp_tuning(g, st);
	return 0;
}

/* ---- JSON ---------------------------------------------------------------- */

static json_t *jnum(double v)
{
	return isfinite(v) ? json_real(v) : json_null();
}

static void jset_u(json_t *o, const char *k, uint64_t v)
{
	json_object_set_new(o, k, json_integer((json_int_t)v));
}

static void rp_json_labels(json_t *o, const struct qw_label_metrics *m)
{
	json_object_set_new(o, "detection_rate", jnum(m->detection_rate));
	json_object_set_new(o, "false_alarm_rate", jnum(m->false_alarm_rate));
	json_object_set_new(o, "precision", jnum(m->precision));
	json_object_set_new(o, "f1", jnum(m->f1));
	json_object_set_new(o, "mean_delay", jnum(m->mean_delay));
}

static json_t *rp_json_group(const struct replay *rp,
			     const struct replay_group *g,
			     const struct replay_stats *st)
{
	json_t *o = json_object(), *tune = json_object();
	json_t *top = json_object(), *rej = json_object();
	json_t *warn = json_array();
	size_t i;

	jset_u(o, "readings", st->readings);
	jset_u(o, "scored", st->scored);
	jset_u(o, "eligible", st->eligible);
	jset_u(o, "alarms", st->alarms);
	jset_u(o, "exceedances", st->exceedances);
	json_object_set_new(o, "limit", jnum(st->limit));
	json_object_set_new(o, "limit_end", jnum(st->limit_end));
	json_object_set_new(o, "alpha", jnum(st->alpha));
	jset_u(o, "dof", st->dof);
	json_object_set_new(o, "expected_alarms", jnum(st->expected));
	json_object_set_new(o, "days", jnum(st->days));
	json_object_set_new(o, "alarms_per_day", jnum(st->alarms_per_day));
	json_object_set_new(o, "configured_alarms_per_day",
			    jnum(st->conf_apd));
	json_object_set_new(o, "guard_span_s", jnum(st->guard_s));
	json_object_set_new(o, "score_lag1_autocorr", jnum(st->lag1));
	jset_u(o, "score_lag1_n", st->lag1_n);
	json_object_set_new(o, "warnings", warn);
	for (i = 0; i < st->nwarn; i++)
		json_array_append_new(warn, json_string(st->warnings[i]));
	json_object_set_new(o, "span_s", jnum(st->span_s));
	json_object_set_new(tune, "limit", jnum(st->tune_limit));
	json_object_set_new(tune, "alpha", jnum(st->tune_alpha));
	json_object_set_new(tune, "alarms_per_day", jnum(st->tune_apd));
	jset_u(tune, "n", st->tune_n);
	/* at least 1/alpha scores: the quantile lies inside the data */
	json_object_set_new(tune, "sufficient",
			    json_boolean((double)st->tune_n * st->alpha >= 1));
	json_object_set_new(tune, "limit_resolution",
			    jnum(st->tune_limit_res));
	json_object_set_new(tune, "alpha_resolution",
			    jnum(st->tune_alpha_res));
	json_object_set_new(tune, "ks", jnum(st->ks));
	json_object_set_new(tune, "ks_resolution", jnum(st->ks_res));
	json_object_set_new(tune, "ks_crit05", jnum(st->ks_crit));
	jset_u(tune, "ks_n", st->ks_n);
	json_object_set_new(o, "tuning", tune);
	for (i = 0; i < g->conf->p; i++)
		if (g->top_count[i] > 0)
			jset_u(top, g->conf->channels[i], g->top_count[i]);
	json_object_set_new(o, "top_channels", top);
	for (i = 0; i < RP_NCAUSES; i++)
		jset_u(rej, qw_replay_cause_names[i], st->rejected[i]);
	json_object_set_new(o, "rejected", rej);
	if (rp->o.labels != NULL)
		rp_json_labels(o, &st->lm);
	return o;
}

/* Sums the label counters of the played groups into *sum. */
static void rp_labels_sum(const struct replay *rp, struct qw_labels *sum)
{
	size_t i;

	qw_labels_reset(sum);
	for (i = 0; i < rp->cfg.ngroups; i++) {
		const struct qw_labels *l = &rp->groups[i].labels;

		sum->events += l->events;
		sum->detected += l->detected;
		sum->delay_sum += l->delay_sum;
		sum->negatives += l->negatives;
		sum->neg_alarmed += l->neg_alarmed;
		sum->positives += l->positives;
		sum->alarms += l->alarms;
		sum->true_alarms += l->true_alarms;
	}
}

/* Folds group st into the top-level totals: counts and alarm rates add
 * up (the rates of groups with a span), the lag-1 autocorrelation is the
 * highest, the warnings are listed with their group. */
static void rp_json_total(const struct replay_group *g,
			  const struct replay_stats *st,
			  struct replay_stats *tot, json_t *warn)
{
	char buf[RP_WARN_LEN + QW_CONFIG_NAME_MAX + 16];
	size_t i;

	tot->readings += st->readings;
	tot->scored += st->scored;
	tot->eligible += st->eligible;
	tot->alarms += st->alarms;
	tot->exceedances += st->exceedances;
	tot->expected += st->expected;
	tot->conf_apd += st->conf_apd;
	if (isfinite(st->alarms_per_day))
		tot->alarms_per_day = isfinite(tot->alarms_per_day)
				      ? tot->alarms_per_day
					+ st->alarms_per_day
				      : st->alarms_per_day;
	if (isfinite(st->lag1) && !(tot->lag1 >= st->lag1))
		tot->lag1 = st->lag1;
	for (i = 0; i < st->nwarn; i++) {
		snprintf(buf, sizeof buf, "group %s: %s", g->conf->name,
			 st->warnings[i]);
		json_array_append_new(warn, json_string(buf));
	}
}

/* Top level: totals over groups; limit, alpha and dof of the first
 * played group. */
static void rp_json_top(const struct replay *rp, json_t *o,
			const struct replay_stats *tot, int first_set)
{
	struct qw_labels sum;
	struct qw_label_metrics m;

	jset_u(o, "readings", tot->readings);
	jset_u(o, "scored", tot->scored);
	jset_u(o, "eligible", tot->eligible);
	jset_u(o, "alarms", tot->alarms);
	jset_u(o, "exceedances", tot->exceedances);
	json_object_set_new(o, "limit", first_set ? jnum(tot->limit)
			    : json_null());
	json_object_set_new(o, "alpha", first_set ? jnum(tot->alpha)
			    : json_null());
	json_object_set_new(o, "dof", first_set ? json_integer(tot->dof)
			    : json_null());
	json_object_set_new(o, "expected_alarms", jnum(tot->expected));
	json_object_set_new(o, "alarms_per_day", jnum(tot->alarms_per_day));
	json_object_set_new(o, "configured_alarms_per_day",
			    first_set ? jnum(tot->conf_apd) : json_null());
	json_object_set_new(o, "score_lag1_autocorr", jnum(tot->lag1));
	jset_u(o, "malformed_rows", rp->csv_bad);
	jset_u(o, "unknown_topic", rp->unknown_topic);
	jset_u(o, "events_dropped", rp->events_dropped);
	json_object_set_new(o, "interrupted",
			    json_boolean(rp->interrupted != 0));
	if (rp->o.labels != NULL) {
		rp_labels_sum(rp, &sum);
		qw_labels_metrics(&sum, &m);
		rp_json_labels(o, &m);
	}
}

int qw_replay_json(const struct replay *rp)
{
	json_t *o = json_object(), *groups = json_object();
	json_t *warn = json_array();
	struct replay_stats st, tot;
	int first = 0, rc = 0;
	size_t i;

	memset(&tot, 0, sizeof tot);
	tot.alarms_per_day = NAN;
	tot.lag1 = NAN;
	for (i = 0; i < rp->cfg.ngroups && rc == 0; i++) {
		const struct replay_group *g = &rp->groups[i];

		if (!g->played)
			continue;
		rc = qw_replay_stats(rp, g, &st);
		if (!first) {
			tot.limit = st.limit;
			tot.alpha = st.alpha;
			tot.dof = st.dof;
			first = 1;
		}
		rp_json_total(g, &st, &tot, warn);
		json_object_set_new(groups, g->conf->name,
				    rp_json_group(rp, g, &st));
	}
	rp_json_top(rp, o, &tot, first);
	json_object_set_new(o, "warnings", warn);
	json_object_set_new(o, "groups", groups);
	json_object_set(o, "events", rp->events);
	if (rc == 0 && json_dumpf(o, stdout,
				  JSON_INDENT(2) | JSON_REAL_PRECISION(17)) != 0)
		rc = QW_ERROR(QW_EIO);
	if (rc == 0)
		putchar('\n');
	json_decref(o);
	if (rc != 0)
		qw_log(QW_LOG_ERROR, "summary: %s", qw_strerror(rc));
	return rc;
}
