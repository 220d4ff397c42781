/* replay_human.c: the human summary of a replay (the default output):
 * per group the readings, the alarms raised and per day against the
 * configured rate, the lag-1 autocorrelation of the scores and the
 * warnings about persistence on dependent readings, the channels that
 * drove the alarms, tuning help and a calibration figure, refusals by
 * cause, and the caution about autocorrelated data.  Numbers as in
 * replay_out.c (same struct). */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "log.h"
#include "replay.h"

#define RP_TOP_SHOWN 5 /* channels listed under "top channels" */

static void rp_h_top(FILE *f, const struct replay_group *g)
{
	unsigned char shown[QW_MAX_P] = {0};
	size_t n, i, best;

	fprintf(f, "  top channels (alarms led): ");
	for (n = 0; n < RP_TOP_SHOWN; n++) {
		best = g->conf->p;
		for (i = 0; i < g->conf->p; i++)
			if (!shown[i] && g->top_count[i] > 0 &&
			    (best == g->conf->p ||
			     g->top_count[i] > g->top_count[best]))
				best = i;
		if (best == g->conf->p)
			break;
		shown[best] = 1;
		fprintf(f, "%s%s %llu", n ? ", " : "", g->conf->channels[best],
			(unsigned long long)g->top_count[best]);
	}
	fprintf(f, "%s\n", n == 0 ? "none" : "");
}

static void rp_h_tuning(FILE *f, const struct replay_group *g,
			const struct replay_stats *st)
{
	double need = 1.0 / st->alpha;

	if (st->tune_n == 0) {
		fprintf(f, "  tuning: no scores after warm-up\n");
		return;
	}
	if ((double)st->tune_n < need)
		fprintf(f, "  tuning: too short to estimate the configured "
			"rate: %zu full scores after warm-up, %.0f needed "
			"(1/alpha); largest score %.4g\n", st->tune_n, need,
			st->tune_limit);
	else
		fprintf(f, "  tuning: on this recording limit %.4g (alpha "
			"%.3g, about alarms_per_day = %.3g) would have given "
			"the configured %.3g per day\n", st->tune_limit,
			st->tune_alpha, st->tune_apd,
			g->conf->params.alarms_per_day);
	if (st->tune_limit_res > 0 || st->tune_alpha_res > 0)
		fprintf(f, "  (tuning figures from a histogram, to %.2g%%: "
			"alpha times the readings exceeds the %u kept "
			"exactly)\n", 100 * fmax(st->tune_limit_res,
						  st->tune_alpha_res),
			QW_EXTREME_KEEP);
	fprintf(f, "  calibration: KS distance of %zu p-values from uniform "
		"%.4f (5%% critical value %.4f)%s\n", st->ks_n, st->ks,
		st->ks_crit, st->ks > st->ks_crit
		? ": p-values are not uniform" : "");
	if (st->ks_res > 0)
		fprintf(f, "  (KS distance from %u bins, to %.2g)\n",
			QW_KS_BINS, st->ks_res);
}

/* Delivered alarms per day, lag-1 autocorrelation, warnings. */
static void rp_h_dependence(FILE *f, const struct replay_stats *st)
{
	size_t i;

	if (isfinite(st->alarms_per_day))
		fprintf(f, "  alarms per day: %.4g delivered over %.6g s of "
			"data time after warm-up, %g configured\n",
			st->alarms_per_day, st->guard_s, st->conf_apd);
	else
		fprintf(f, "  alarms per day: not known (no data time after "
			"warm-up), %g configured\n", st->conf_apd);
	if (isfinite(st->lag1))
		fprintf(f, "  scores: lag-1 autocorrelation %.3f over %zu "
			"after warm-up\n", st->lag1, st->lag1_n);
	else
		fprintf(f, "  scores: lag-1 autocorrelation not known (%zu "
			"after warm-up)\n", st->lag1_n);
	for (i = 0; i < st->nwarn; i++)
		fprintf(f, "  warning: %s\n", st->warnings[i]);
}

static void rp_h_rejected(FILE *f, const struct replay_stats *st)
{
	size_t i, n = 0;

	fprintf(f, "  rejected: ");
	for (i = 0; i < RP_NCAUSES; i++)
		if (st->rejected[i] > 0)
			fprintf(f, "%s%s %llu", n++ ? ", " : "",
				qw_replay_cause_names[i],
				(unsigned long long)st->rejected[i]);
	fprintf(f, "%s\n", n == 0 ? "none" : "");
}

static void rp_h_labels(FILE *f, const struct replay_group *g,
			const struct replay_stats *st)
{
	const struct qw_label_metrics *m = &st->lm;

	fprintf(f, "  labels: %llu events, detection rate %.3g, false "
		"alarm rate %.3g (of %llu label-0 readings), precision %.3g, "
		"F1 %.3g, mean delay %.3g readings\n",
		(unsigned long long)g->labels.events, m->detection_rate,
		m->false_alarm_rate, (unsigned long long)g->labels.negatives,
		m->precision, m->f1, m->mean_delay);
}

static void rp_h_group(FILE *f, const struct replay *rp,
		       const struct replay_group *g,
		       const struct replay_stats *st)
{
	const struct qw_params *par = &g->conf->params;

	fprintf(f, "group %s: %llu readings (%llu scored after warm-up, "
		"%.4g days at %g/s), data span %.6g s\n", g->conf->name,
		(unsigned long long)st->readings,
		(unsigned long long)st->eligible, st->days, par->rate,
		st->span_s);
	fprintf(f, "  alarms raised: %llu; expected %.3g (%g per day "
		"configured)\n", (unsigned long long)st->alarms, st->expected,
		par->alarms_per_day);
	rp_h_dependence(f, st);
	fprintf(f, "  readings over the limit: %llu; limit %.4g on %u dof "
		"(steady), alpha %.3g per reading\n",
		(unsigned long long)st->exceedances, st->limit, st->dof,
		st->alpha);
	rp_h_top(f, g);
	rp_h_tuning(f, g, st);
	rp_h_rejected(f, st);
	if (rp->o.labels != NULL && g->has_labels)
		rp_h_labels(f, g, st);
}

int qw_replay_human(const struct replay *rp, FILE *f)
{
	struct replay_stats st;
	size_t i, n = 0;
	int rc;

	for (i = 0; i < rp->cfg.ngroups; i++) {
		const struct replay_group *g = &rp->groups[i];

		if (!g->played)
			continue;
		rc = qw_replay_stats(rp, g, &st);
		if (rc != 0) {
			qw_log(QW_LOG_ERROR, "summary: %s", qw_strerror(rc));
			return rc;
		}
		rp_h_group(f, rp, g, &st);
		n++;
	}
	if (n == 0)
		fprintf(f, "no group was played\n");
	if (rp->unknown_topic > 0)
		fprintf(f, "messages for no configured group: %llu\n",
			(unsigned long long)rp->unknown_topic);
	if (rp->events_dropped > 0)
		fprintf(f, "alerts not listed: %llu\n",
			(unsigned long long)rp->events_dropped);
	if (rp->interrupted != 0)
		fprintf(f, "interrupted: the figures above cover only the "
			"readings played before the signal\n");
	fprintf(f, "caution: readings that are correlated in time (slow "
		"processes, oversampling)\n  raise more alarms than the "
		"configured rate; the tuning figures above include\n  that "
		"effect for this recording.  quadwatch fit on a healthy "
		"recording\n  measures each group's own limit from it "
		"(quadwatch-fit(1)).\n");
	return 0;
}
