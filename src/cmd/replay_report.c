/* replay_report.c: `quadwatch replay --report OUT.html`, one
 * self-contained page (XHTML, valid XML, inline SVG, no script, nothing
 * fetched) per replay.  Per group, one section per plot:
 *   - the score q against the limit on a log scale, alarm spans shaded,
 *     readings in order on x (labelled with their UTC time), min/max of
 *     each pixel column drawn so that 10^6 readings stay a few kB;
 *   - for each kept alarm (the RP_TRACE_ALARMS highest raise scores), its
 *     top channels around the raise, each as standard deviations from
 *     its own mean over the readings before the raise;
 *   - the histogram of post-warm-up p-values against the flat line that
 *     calibrated p-values follow;
 * and a section with the summary table.
 *
 * Workload: O(scored readings) once, plus O(columns) output per plot. */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "log.h"
#include "replay.h"
#include "replay_svg.h"

#define RP_COLS 870        /* columns of the score plot: its width in px */
#define RP_HIST_BINS QW_DIGEST_HIST /* p-value histogram bins */
#define RP_SCORE_H 340.0   /* px: heights of the plots */
#define RP_TRACE_H 280.0
#define RP_HIST_H 260.0

static const char *const rp_colors[] = {"#1f5fa8", "#d9730d", "#2a8a3e",
					"#8e44ad", "#b03030"};

static void rp_utc(double t, int date, char *buf, size_t cap)
{
	time_t s = (time_t)floor(t);
	struct tm tm;

	if (!isfinite(t) || gmtime_r(&s, &tm) == NULL) {
		snprintf(buf, cap, "?");
		return;
	}
	strftime(buf, cap, date ? "%Y-%m-%d %H:%M:%S" : "%H:%M:%S", &tm);
}

/* x ticks of the score plot: index -> the reading's time. */
static void rp_tick_time(const void *ctx, double x, char *buf, size_t cap)
{
	const struct replay_group *g = ctx;
	double i = floor(x + 0.5);

	if (i < 0 || i >= (double)g->strip.n)
		snprintf(buf, cap, " ");
	else
		rp_utc(qw_strip_time(&g->strip, (uint64_t)i), 0, buf, cap);
}

/* Score range, log10 decades, over the readings after warm-up when
 * there are any (the first few scores of a young model are huge). */
static void rp_score_range(const struct replay_group *g, struct rp_plot *pl)
{
	int warm = g->strip.nwarm > 0;
	double lo = g->strip.lo[warm], hi = g->strip.hi[warm];
	uint64_t n = g->strip.n;

	if (!isfinite(lo))
		lo = RP_Q_FLOOR;
	if (!(hi > lo))
		hi = lo * 10;
	pl->y0 = floor(log10(lo));
	pl->y1 = ceil(log10(hi) + 0.05);
	pl->x0 = 0;
	pl->x1 = n > 1 ? (double)(n - 1) : 1.0;
	pl->logy = 1;
}

/* Shaded alarm spans: runs of columns holding an in-alarm reading. */
static void rp_spans(const struct rp_plot *pl, const int *alarm, uint64_t n)
{
	size_t c, start = 0;
	int open = 0;

	for (c = 0; c <= RP_COLS; c++) {
		int on = c < RP_COLS && alarm[c];

		if (on && !open)
			start = c;
		if (!on && open) {
			double xa = rp_px(pl, (double)(start * n / RP_COLS));
			double xb = rp_px(pl, (double)(c * n / RP_COLS));

			fprintf(pl->f, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\""
				" height=\"%.1f\" fill=\"#f6c6bf\"/>\n", xa,
				RP_SVG_MT, xb - xa > 1.5 ? xb - xa : 1.5,
				pl->h - RP_SVG_MT - RP_SVG_MB);
		}
		open = on;
	}
}

/* One min/max path per series: a vertical stroke per column. */
static void rp_bands(const struct rp_plot *pl, const double *lo,
		     const double *hi, uint64_t npts, const char *style)
{
	size_t c;

	fprintf(pl->f, "<path %s d=\"", style);
	for (c = 0; c < RP_COLS; c++) {
		double x, ya, yb;

		if (isnan(lo[c]))
			continue;
		x = rp_px(pl, (double)((c * npts + npts / 2) / RP_COLS));
		ya = rp_py(pl, lo[c] > RP_Q_FLOOR ? lo[c] : RP_Q_FLOOR);
		yb = rp_py(pl, hi[c] > RP_Q_FLOOR ? hi[c] : RP_Q_FLOOR);
		fprintf(pl->f, "M%.1f %.1fV%.1f", x, ya + 0.5, yb - 0.5);
	}
	fputs("\"/>\n", pl->f);
}

static void rp_legend(FILE *f, double x, double y, const char *color,
		      const char *dash, const char *name)
{
	fprintf(f, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" "
		"stroke=\"%s\" stroke-width=\"2.5\"%s/><text x=\"%.1f\" "
		"y=\"%.1f\" font-family=\"sans-serif\" font-size=\"12\">", x, y,
		x + 22, y, color, dash, x + 27, y + 4);
	rp_xml_text(f, name);
	fputs("</text>\n", f);
}

/* The score plot.  0 or QW_ENOMEM. */
static int rp_score_plot(FILE *f, const struct replay_group *g)
{
	const struct qw_strip *s = &g->strip;
	double *lo = malloc(4 * RP_COLS * sizeof *lo);
	int *alarm = malloc(RP_COLS * sizeof *alarm);
	struct rp_plot pl = {.f = f};
	char first[32], xl[96];

	if (alarm == NULL || lo == NULL) {
		free(alarm);
		free(lo);
		return QW_ERROR(QW_ENOMEM);
	}
	qw_strip_columns(s, RP_COLS, lo, lo + RP_COLS, lo + 2 * RP_COLS,
			 lo + 3 * RP_COLS, alarm);
	rp_score_range(g, &pl);
	rp_utc(s->n ? qw_strip_time(s, 0) : NAN, 1, first, sizeof first);
	snprintf(xl, sizeof xl, "time (UTC), readings in order from %s", first);
	rp_svg_begin(&pl, RP_SCORE_H, "score q against the limit, log scale");
	rp_spans(&pl, alarm, s->n);
	rp_svg_axes(&pl, xl, "score q (log scale)", rp_tick_time, g);
	rp_bands(&pl, lo, lo + RP_COLS, s->n,
		 "fill=\"none\" stroke=\"#1f5fa8\" stroke-width=\"1.2\"");
	rp_bands(&pl, lo + 2 * RP_COLS, lo + 3 * RP_COLS, s->n,
		 "fill=\"none\" stroke=\"#c0392b\" stroke-width=\"2\"");
	rp_legend(f, pl.w - 330, 30, "#1f5fa8", "", "score q");
	rp_legend(f, pl.w - 240, 30, "#c0392b", "", "limit");
	fprintf(f, "<rect x=\"%.1f\" y=\"24\" width=\"22\" height=\"12\" "
		"fill=\"#f6c6bf\"/><text x=\"%.1f\" y=\"34\" font-family="
		"\"sans-serif\" font-size=\"12\">in alarm</text>\n",
		pl.w - 160, pl.w - 133);
	rp_svg_end(&pl);
	free(alarm);
	free(lo);
	return 0;
}

/* Mean and standard deviation of channel k over the readings before the
 * raise (all of the trace when there are fewer than two). */
static void rp_norm(const struct replay_trace *tr, size_t k, double *m,
		    double *s)
{
	size_t i, n = 0, end = tr->at >= 2 ? tr->at : tr->n;
	double sum = 0, ss = 0;

	for (i = 0; i < end; i++)
		if (isfinite(tr->x[k][i])) {
			sum += tr->x[k][i];
			n++;
		}
	*m = n ? sum / (double)n : 0.0;
	for (i = 0; i < end; i++)
		if (isfinite(tr->x[k][i]))
			ss += (tr->x[k][i] - *m) * (tr->x[k][i] - *m);
	*s = n > 1 ? sqrt(ss / (double)(n - 1)) : 0.0;
	if (!(*s > 0))
		*s = 1.0;
}

static void rp_trace_lines(const struct rp_plot *pl,
			   const struct replay_trace *tr, const double *m,
			   const double *s)
{
	size_t k, i;

	for (k = 0; k < tr->nchan; k++) {
		int pen = 0;

		fprintf(pl->f, "<path fill=\"none\" stroke=\"%s\" "
			"stroke-width=\"1.6\" d=\"", rp_colors[k]);
		for (i = 0; i < tr->n; i++) {
			double z = (tr->x[k][i] - m[k]) / s[k];

			if (!isfinite(z)) {
				pen = 0;
				continue;
			}
			fprintf(pl->f, "%c%.1f %.1f", pen ? 'L' : 'M',
				rp_px(pl, (double)i - (double)tr->at),
				rp_py(pl, z));
			pen = 1;
		}
		fputs("\"/>\n", pl->f);
	}
}

static void rp_trace_plot(FILE *f, const struct replay_group *g,
			  const struct replay_trace *tr)
{
	struct rp_plot pl = {.f = f};
	double m[RP_TRACE_CHANNELS], s[RP_TRACE_CHANNELS], lo = -3, hi = 3;
	size_t k, i;

	for (k = 0; k < tr->nchan; k++) {
		rp_norm(tr, k, &m[k], &s[k]);
		for (i = 0; i < tr->n; i++) {
			double z = (tr->x[k][i] - m[k]) / s[k];

			if (isfinite(z) && z < lo)
				lo = z;
			if (isfinite(z) && z > hi)
				hi = z;
		}
	}
	pl.x0 = -(double)tr->at;
	pl.x1 = (double)RP_TRACE_POST;
	pl.y0 = lo - 0.05 * (hi - lo);
	pl.y1 = hi + 0.05 * (hi - lo);
	rp_svg_begin(&pl, RP_TRACE_H, "top channels around the alarm");
	rp_svg_axes(&pl, "readings from the raise",
		    "std devs from pre-alarm mean", NULL, NULL);
	fprintf(f, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" "
		"stroke=\"#c0392b\" stroke-dasharray=\"5 4\"/>\n",
		rp_px(&pl, 0), RP_SVG_MT, rp_px(&pl, 0), pl.h - RP_SVG_MB);
	rp_trace_lines(&pl, tr, m, s);
	for (k = 0; k < tr->nchan; k++)
		rp_legend(f, RP_SVG_ML + 12 + 170.0 * (double)k, 30,
			  rp_colors[k], "", g->conf->channels[tr->chan[k]]);
	rp_svg_end(&pl);
}

static void rp_hist_plot(FILE *f, const struct replay_group *g)
{
	struct rp_plot pl = {.f = f};
	const uint64_t *bin = g->dg.hist;
	uint64_t n = g->dg.pv.n, top = 1;
	size_t i;

	for (i = 0; i < RP_HIST_BINS; i++)
		if (bin[i] > top)
			top = bin[i];
	pl.x0 = 0;
	pl.x1 = 1;
	pl.y0 = 0;
	pl.y1 = 1.1 * (double)top;
	rp_svg_begin(&pl, RP_HIST_H, "histogram of p-values after warm-up");
	rp_svg_axes(&pl, "p-value (flat when the model is calibrated)",
		    "readings", NULL, NULL);
	for (i = 0; i < RP_HIST_BINS; i++) {
		double xa = rp_px(&pl, (double)i / RP_HIST_BINS);
		double xb = rp_px(&pl, (double)(i + 1) / RP_HIST_BINS);
		double y = rp_py(&pl, (double)bin[i]);

		fprintf(f, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
			"height=\"%.1f\" fill=\"#7fa7d6\" stroke=\"#fff\"/>\n",
			xa, y, xb - xa, pl.h - RP_SVG_MB - y);
	}
	fprintf(f, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" "
		"stroke=\"#c0392b\" stroke-width=\"2\" stroke-dasharray=\"6 4\""
		"/>\n", rp_px(&pl, 0), rp_py(&pl, (double)n / RP_HIST_BINS),
		rp_px(&pl, 1), rp_py(&pl, (double)n / RP_HIST_BINS));
	rp_legend(f, pl.w - 250, 30, "#c0392b", " stroke-dasharray=\"6 4\"",
		  "uniform (calibrated)");
	rp_svg_end(&pl);
}

/* A table row; v at `digits` significant digits (20: whole counts). */
static void rp_row(FILE *f, const char *key, int digits, double v)
{
	fputs("<tr><th>", f);
	rp_xml_text(f, key);
	fputs("</th><td>", f);
	if (isfinite(v))
		fprintf(f, "%.*g", digits, v);
	else
		fputs("&#8211;", f);
	fputs("</td></tr>\n", f);
}

static void rp_table(FILE *f, const struct replay *rp,
		     const struct replay_group *g,
		     const struct replay_stats *st)
{
	size_t i;

	fputs("<section class=\"table\"><h3>Summary</h3><table>\n", f);
	rp_row(f, "readings", 20, (double)st->readings);
	rp_row(f, "scored after warm-up", 20, (double)st->eligible);
	rp_row(f, "alarms raised", 20, (double)st->alarms);
	rp_row(f, "alarms per day (delivered, data time after warm-up)", 4,
	       st->alarms_per_day);
	rp_row(f, "alarms expected", 4, st->expected);
	rp_row(f, "alarms per day (configured)", 4,
	       g->conf->params.alarms_per_day);
	rp_row(f, "data time after warm-up (s)", 6, st->guard_s);
	rp_row(f, "lag-1 autocorrelation of the scores", 3, st->lag1);
	rp_row(f, "readings over the limit", 20, (double)st->exceedances);
	rp_row(f, "limit (steady)", 5, st->limit);
	rp_row(f, "alpha per reading", 4, st->alpha);
	rp_row(f, "degrees of freedom", 20, (double)st->dof);
	rp_row(f, "limit giving the configured rate here", 5,
	       (double)st->tune_n * st->alpha >= 1 ? st->tune_limit : NAN);
	rp_row(f, "alpha giving the configured rate here", 4,
	       (double)st->tune_n * st->alpha >= 1 ? st->tune_alpha : NAN);
	rp_row(f, "KS distance of p-values from uniform", 4, st->ks);
	rp_row(f, "KS 5% critical value", 4, st->ks_crit);
	for (i = 0; i < RP_NCAUSES; i++)
		if (st->rejected[i] > 0)
			rp_row(f, qw_replay_cause_names[i], 20,
			       (double)st->rejected[i]);
	if (rp->o.labels != NULL && g->has_labels) {
		rp_row(f, "detection rate", 4, st->lm.detection_rate);
		rp_row(f, "false alarm rate", 4, st->lm.false_alarm_rate);
		rp_row(f, "precision", 4, st->lm.precision);
		rp_row(f, "F1", 4, st->lm.f1);
		rp_row(f, "mean delay (readings)", 4, st->lm.mean_delay);
	}
	fputs("</table>\n", f);
	for (i = 0; i < st->nwarn; i++) {
		fputs("<p class=\"warn\">Warning: ", f);
		rp_xml_text(f, st->warnings[i]);
		fputs("</p>\n", f);
	}
	fputs("<p class=\"note\">Readings correlated in time raise "
	      "more alarms than the configured rate; the tuning rows include "
	      "that effect for this recording.</p></section>\n", f);
}

static int rp_trace_cmp(const void *a, const void *b)
{
	const struct replay_trace *x = a, *y = b;

	if (x->used != y->used)
		return y->used - x->used;
	return (x->t_raise > y->t_raise) - (x->t_raise < y->t_raise);
}

static int rp_group_page(FILE *f, const struct replay *rp,
			 const struct replay_group *g)
{
	struct replay_stats st;
	char when[32];
	size_t i;
	int rc = qw_replay_stats(rp, g, &st);

	if (rc != 0)
		return rc;
	fputs("<h2>Group ", f);
	rp_xml_text(f, g->conf->name);
	fputs("</h2>\n<section class=\"plot\"><h3>Score against the limit"
	      "</h3>\n", f);
	if ((rc = rp_score_plot(f, g)) != 0)
		return rc;
	fputs("</section>\n", f);
	/* in time order: the slots are filled by score */
	qsort(g->traces, RP_TRACE_ALARMS, sizeof *g->traces, rp_trace_cmp);
	for (i = 0; i < RP_TRACE_ALARMS && g->traces[i].used; i++) {
		const struct replay_trace *tr = &g->traces[i];

		rp_utc(tr->t_raise, 1, when, sizeof when);
		fprintf(f, "<section class=\"plot\"><h3>Alarm at %s UTC: "
			"score %.4g, led by ", when, tr->score);
		rp_xml_text(f, g->conf->channels[tr->chan[0]]);
		fputs("</h3>\n", f);
		rp_trace_plot(f, g, tr);
		fputs("</section>\n", f);
	}
	fputs("<section class=\"plot\"><h3>P-values after warm-up</h3>\n", f);
	rp_hist_plot(f, g);
	fputs("</section>\n", f);
	rp_table(f, rp, g, &st);
	return 0;
}

static const char rp_style[] =
	"body{font-family:sans-serif;max-width:1000px;margin:1em auto;"
	"color:#222;padding:0 1em}h1{font-size:1.5em}h2{border-bottom:2px "
	"solid #1f5fa8;margin-top:1.6em}h3{font-size:1.05em;margin:.8em 0 "
	".3em}section{margin-bottom:1em}table{border-collapse:collapse}"
	"th,td{padding:3px 12px;border-bottom:1px solid #ddd}th{text-align:"
	"left;font-weight:normal;color:#555}td{text-align:right;font-"
	"variant-numeric:tabular-nums}.note{color:#666;font-size:.9em}"
	".warn{color:#8a4b00;background:#fff4e0;padding:.4em .6em}";

static void rp_head(FILE *f, const struct replay *rp)
{
	int i;

	fprintf(f, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
		"<!DOCTYPE html>\n<html xmlns=\"http://www.w3.org/1999/xhtml\""
		" lang=\"en\"><head><meta charset=\"UTF-8\"/>"
		"<title>quadwatch replay report</title><style>%s</style>"
		"</head>\n<body>\n<h1>quadwatch replay report</h1>\n<p>"
		"Configuration <code>", rp_style);
	rp_xml_text(f, rp->o.config);
	fputs("</code>; input", f);
	for (i = 0; i < rp->o.ninputs; i++) {
		fputs(i ? ", <code>" : " <code>", f);
		rp_xml_text(f, rp->o.inputs[i]);
		fputs("</code>", f);
	}
	fputs(".</p>\n", f);
	if (rp->interrupted != 0)
		fputs("<p class=\"warn\">Interrupted: this report covers only "
		      "the readings played before the replay was stopped.</p>\n",
		      f);
	fputs("<p class=\"note\">quadwatch is an advisory monitor, "
	      "not a safety instrumented system: act on its alarms according "
	      "to local codes and licensed practice.</p>\n", f);
}

int qw_replay_report(const struct replay *rp, const char *path)
{
	FILE *f = fopen(path, "w");
	size_t i;
	int rc = 0;

	if (f == NULL) {
		qw_log_errno(QW_LOG_ERROR, "--report %s", path);
		return QW_ERROR(QW_EIO);
	}
	rp_head(f, rp);
	for (i = 0; i < rp->cfg.ngroups && rc == 0; i++)
		if (rp->groups[i].played)
			rc = rp_group_page(f, rp, &rp->groups[i]);
	fputs("</body>\n</html>\n", f);
	if (fclose(f) != 0 && rc == 0) {
		qw_log_errno(QW_LOG_ERROR, "--report %s", path);
		rc = QW_ERROR(QW_EIO);
	} else if (rc != 0) {
		qw_log(QW_LOG_ERROR, "--report %s: %s", path, qw_strerror(rc));
	}
	return rc;
}
