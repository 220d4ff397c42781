/* replay_play.c: one reading through the detector, as in the daemon.
 *
 * qw_replay_reading is the replay twin of the daemon's run_reading:
 * qw_detector_add, then on a raise or clear the alert from
 * qw_verdict_fill, encoded by qw_alert_encode (the bytes the daemon would
 * publish) and kept for --json.  Around that it keeps what the summary
 * and report need: the digest of the eligible readings (digest.h), the label
 * state machine, the count of alarms by top channel, the --scores row,
 * and (with --report) the traces of the top channels around the alarms
 * with the highest raise scores.
 *
 * Workload: per reading O(p) besides the detector, plus one p-value
 * (pvalue.c, 0.05-0.5 us) and O(1) for the summary (digest.h, bounded
 * memory). */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fmt.h"
#include "log.h"
#include "replay.h"
#include "verdict.h"

#define RP_ROWS_BUF 65536 /* bytes of --scores rows per fwrite */

int qw_replay_scores_open(struct replay *rp)
{
	rp->scores = fopen(rp->o.scores, "w");
	if (rp->scores == NULL) {
		qw_log_errno(QW_LOG_ERROR, "--scores %s", rp->o.scores);
		return 1;
	}
	setvbuf(rp->scores, NULL, _IOFBF, RP_SCORES_BUF);
	fputs("time,group,score,limit,pvalue,alarm,top\n", rp->scores);
	return 0;
}

static void rp_event(struct replay *rp, struct replay_group *g, double t,
		     const struct qw_result *res)
{
	struct qw_alert a;
	size_t len;
	json_t *obj;

	qw_verdict_fill(&a, g->conf, t, res);
	if (res->event == QW_EVENT_RAISE && a.ncontrib > 0)
		g->top_count[a.contrib[0].channel]++;
	if (json_array_size(rp->events) >= RP_EVENTS_MAX) {
		rp->events_dropped++;
		return;
	}
	len = qw_alert_encode(rp->alert_buf, RP_ALERT_MAX, &a);
	obj = len > 0 ? json_loadb(rp->alert_buf, len, 0, NULL) : NULL;
	if (obj == NULL || json_array_append_new(rp->events, obj) != 0)
		rp->events_dropped++;
	else if (rp->ev_keys != NULL)
		rp->ev_keys[json_array_size(rp->events) - 1] = rp->key;
}

/* The summary's and the report's share of one scored reading (its
 * p-value done). */
static void rp_point(const struct replay_scored *r)
{
	struct replay_group *g = r->g;

	if (g->strip.run != NULL)
		qw_strip_add(&g->strip, r->t, r->q, r->limit, r->in_alarm,
			     r->warm);
	if (!r->warm || g->dg_failed)
		return;
	if (qw_digest_add(&g->dg, r->t, r->q, r->pv, r->dof == g->conf->p)
	    != 0) {
		g->dg_failed = 1;
		qw_log(QW_LOG_ERROR, "group %s: out of memory: no tuning "
		       "figures", g->conf->name);
	}
}

/* The limit's --scores text into buf: the group's last one when the
 * limit has the same bits (so -0 and NaN payloads stay printf's). */
static size_t rp_limit_text(struct replay_group *g, char *buf, double limit)
{
	uint64_t bits;

	memcpy(&bits, &limit, sizeof bits);
	if (g->lim_len == 0 || bits != g->lim_bits) {
		g->lim_len = qw_fmt_g(g->lim_txt, limit, RP_SCORE_DIGITS);
		g->lim_bits = bits;
	}
	memcpy(buf, g->lim_txt, g->lim_len);
	return g->lim_len;
}

/* One --scores row, "%.6f,%s,%.10g,%.10g,%.6g,%d,%s\n" as printf would
 * write it, built with fmt.h (the same bytes, a tenth of the time), into
 * row (RP_SCORES_ROW_MAX bytes); its length. */
static size_t rp_scores_row(char *row, const struct replay_scored *r)
{
	const char *name = r->g->conf->name;
	size_t n, ln = strlen(name), lt = strlen(r->top);

	n = qw_fmt_f6_memo(row, r->t, &r->g->t_whole);
	row[n++] = ',';
	memcpy(row + n, name, ln);
	n += ln;
	row[n++] = ',';
	n += qw_fmt_g(row + n, r->q, RP_SCORE_DIGITS);
	row[n++] = ',';
	n += rp_limit_text(r->g, row + n, r->limit);
	row[n++] = ',';
	n += qw_fmt_g(row + n, r->pv, RP_PVALUE_DIGITS);
	row[n++] = ',';
	row[n++] = r->in_alarm ? '1' : '0';
	row[n++] = ',';
	memcpy(row + n, r->top, lt);
	n += lt;
	row[n++] = '\n';
	return n;
}

/* The --scores rows of n readings: gathered in buf and written a buffer
 * at a time (one fwrite per row had been a tenth of a row's cost); a -j
 * worker tags each row for the merge. */
static void rp_scores_rows(struct replay *rp, const struct replay_scored *r,
			   size_t n)
{
	char buf[RP_ROWS_BUF];
	size_t i, len = 0;

	for (i = 0; i < n; i++) {
		size_t k = rp_scores_row(buf + len, &r[i]);

		if (rp->jobs != NULL) {
			qw_replay_jobs_row(rp, &r[i].key, buf, k);
			continue;
		}
		len += k;
		if (sizeof buf - len < RP_SCORES_ROW_MAX) {
			fwrite(buf, 1, len, rp->scores);
			len = 0;
		}
	}
	if (len > 0)
		fwrite(buf, 1, len, rp->scores);
}

/* Three passes, so that the first is a loop of independent p-values
 * (each a chain of divisions, log1p and exp) that the CPU overlaps, and
 * the last one of independent rows: a replay of 10^6 readings at p = 16
 * 14% faster with --scores and 12% without than one reading at a time,
 * the same bytes (medians of 11 interleaved runs, 2026-12-03). */
void qw_replay_scored_block(struct replay *rp, struct replay_scored *r,
			    size_t n)
{
	size_t i;

	for (i = 0; i < n; i++)
		r[i].pv = qw_limit_pvalue_memo(&r[i].g->pv_memo, r[i].q,
					       r[i].dof, r[i].nu, r[i].scale);
	for (i = 0; i < n; i++)
		rp_point(&r[i]);
	if (rp->scores != NULL)
		rp_scores_rows(rp, r, n);
}

void qw_replay_held_flush(struct replay *rp)
{
	qw_replay_scored_block(rp, rp->held, rp->nheld);
	rp->nheld = 0;
}

/* Report traces: a raise opens the slot of the lowest-scoring alarm kept
 * (when this one scores higher), filled with the ring's readings before
 * it; later readings fill it up to RP_TRACE_LEN. */
static void rp_trace_open(struct replay_group *g, double t,
			  const struct qw_result *res)
{
	struct replay_trace *tr = NULL;
	size_t i, k, lo = 0;

	for (i = 0; i < RP_TRACE_ALARMS; i++) {
		if (!g->traces[i].used) {
			tr = &g->traces[i];
			break;
		}
		if (g->traces[i].score < g->traces[lo].score)
			lo = i;
	}
	if (tr == NULL && res->q > g->traces[lo].score)
		tr = &g->traces[lo];
	g->open_trace = -1;
	if (tr == NULL || res->ncontrib == 0)
		return;
	memset(tr, 0, sizeof *tr);
	tr->used = 1;
	tr->score = res->q;
	tr->t_raise = t;
	tr->nchan = res->ncontrib < RP_TRACE_CHANNELS ? res->ncontrib
		    : RP_TRACE_CHANNELS;
	for (k = 0; k < tr->nchan; k++)
		tr->chan[k] = res->contrib[k].channel;
	for (i = 0; i < g->ring_n; i++) {
		size_t j = (g->ring_head + RP_TRACE_PRE - g->ring_n + i)
			   % RP_TRACE_PRE;

		tr->t[i] = g->ring_t[j];
		for (k = 0; k < tr->nchan; k++)
			tr->x[k][i] = g->ring_x[j * g->conf->p + tr->chan[k]];
	}
	tr->n = tr->at = g->ring_n;
	g->open_trace = (long)(tr - g->traces);
}

static void rp_trace_feed(struct replay_group *g, double t, const double *x,
			  const struct qw_result *res)
{
	size_t k, p = g->conf->p;

	if (res->event == QW_EVENT_RAISE)
		rp_trace_open(g, t, res);
	if (g->open_trace >= 0) {
		struct replay_trace *tr = &g->traces[g->open_trace];

		tr->t[tr->n] = t;
		for (k = 0; k < tr->nchan; k++)
			tr->x[k][tr->n] = x[tr->chan[k]];
		if (++tr->n == RP_TRACE_LEN)
			g->open_trace = -1;
	}
	g->ring_t[g->ring_head] = t;
	memcpy(g->ring_x + g->ring_head * p, x, p * sizeof *x);
	g->ring_head = (g->ring_head + 1) % RP_TRACE_PRE;
	if (g->ring_n < RP_TRACE_PRE)
		g->ring_n++;
}

void qw_replay_reading(struct replay *rp, struct replay_group *g, double t,
		       const double *x, int label)
{
	struct qw_result res;
	struct replay_scored tmp;
	int warm;

	if (rp->sink != NULL) {
		rp->readings++;
		rp->sink(rp, g, t, x);
		return;
	}
	/* the core's warm-up test, taken before the reading is learned */
	warm = qw_ewcov_count(qw_detector_model(g->det)) >=
	       g->conf->params.warmup;
	(void)qw_detector_add(g->det, t, x, &res); /* refusals: counted */
	rp->readings++;
	if (qw_detector_counters(g->det)->readings == 1)
		g->t_first = t;
	g->t_last = t;
	if (res.event != QW_EVENT_NONE)
		rp_event(rp, g, t, &res);
	if (res.scored) {
		struct replay_scored *r = rp->tail != NULL ? &tmp
					  : &rp->held[rp->nheld++];

		r->g = g;
		r->t = t;
		r->q = res.q;
		r->limit = res.limit;
		r->nu = res.nu;
		r->scale = res.scale;
		r->dof = res.dof;
		r->over = (unsigned char)(res.over != 0);
		r->in_alarm = (unsigned char)(res.in_alarm != 0);
		r->warm = (unsigned char)(warm != 0);
		r->top = res.over && res.ncontrib > 0
			? g->conf->channels[res.contrib[0].channel] : "";
		r->pv = NAN;
		r->key = rp->key;
		if (rp->tail != NULL)
			qw_replay_tail_put(rp->tail, r);
		else if (rp->nheld == RP_HELD)
			qw_replay_held_flush(rp);
	}
	if (label >= 0)
		g->has_labels = 1;
	/* the label metrics count exactly the readings --scores lists: a
	 * refused reading, or the first one (it becomes the mean), has no
	 * score, no row and no alarm state of its own */
	if (res.scored)
		qw_labels_add(&g->labels, label, res.event, res.in_alarm);
	if (g->traces != NULL)
		rp_trace_feed(g, t, x, &res);
}

/* Seconds as "1h02m", "3m05s" or "42s" into buf. */
static void rp_duration(char *buf, size_t cap, double s)
{
	unsigned long t = (unsigned long)(s + 0.5);

	if (t >= 3600)
		snprintf(buf, cap, "%luh%02lum", t / 3600, t / 60 % 60);
	else if (t >= 60)
		snprintf(buf, cap, "%lum%02lus", t / 60, t % 60);
	else
		snprintf(buf, cap, "%lus", t);
}

/* The progress line on a terminal (stderr), at most every
 * RP_PROGRESS_EVERY s: the input, its share read, readings played in
 * all, their rate, and the time left from the bytes still to read (the
 * sizes of all inputs, known at the start; none from a pipe).  With -j
 * the first worker writes it for all. */
void qw_replay_progress(struct replay *rp, int last)
{
	double now, secs, rate;
	uint64_t readings, done;
	char left[32];

	if (rp->jobs != NULL)
		qw_replay_jobs_publish(rp);
	if (!rp->progress || rp->wid != 0)
		return;
	if (last) {
		if (rp->progress_shown)
			fputs("\r\033[K", stderr);
		rp->progress_shown = 0;
		return;
	}
	now = qw_log_monotonic();
	if (now < rp->next_progress)
		return;
	rp->next_progress = now + RP_PROGRESS_EVERY;
	secs = now - rp->started;
	readings = rp->jobs != NULL ? qw_replay_jobs_readings(rp)
		   : rp->readings;
	rate = secs > 0 ? (double)readings / secs : 0.0;
	fprintf(stderr, "\r\033[Kreplay: %s", rp->cur_name);
	if (rp->cur_total > 0)
		fprintf(stderr, " %3.0f%%",
			100.0 * (double)rp->cur_done / (double)rp->cur_total);
	fprintf(stderr, ", %llu readings, %.3g M readings/s",
		(unsigned long long)readings, rate / 1e6);
	done = rp->bytes_before + rp->cur_done;
	if (rp->bytes_total > done && done > 0 && secs > 0) {
		rp_duration(left, sizeof left, (double)(rp->bytes_total - done)
			    * secs / (double)done);
		fprintf(stderr, ", %s left", left);
	}
	rp->progress_shown = 1;
}

void qw_replay_finish(struct replay *rp)
{
	size_t i;

	for (i = 0; i < rp->cfg.ngroups; i++)
		qw_labels_finish(&rp->groups[i].labels);
}
