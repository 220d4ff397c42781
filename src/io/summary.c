/* summary.c: label metrics, empirical quantiles, KS distance, min/max
 * downsampling, lag-1 autocorrelation, alarms per day and the warnings
 * about persistence on dependent readings for `quadwatch replay` (see
 * summary.h for definitions).
 *
 * Workload: the label state machine is O(1) per reading, no allocation;
 * quantiles sort the caller's array once (O(n log n), n up to ~10^7 kept
 * post-warm-up scores); the KS distance is one pass over sorted data. */
#include <limits.h>
#include <math.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#include "quadwatch.h"
#include "summary.h"

#define KS_C05 1.358 /* 5% point of the Kolmogorov distribution:
			sqrt(-ln(0.025)/2) = 1.3581 (Massey 1951) */

void qw_labels_reset(struct qw_labels *l)
{
	memset(l, 0, sizeof *l);
}

static void labels_close_event(struct qw_labels *l)
{
	if (!l->in_event)
		return;
	l->events++;
	l->detected += (uint64_t)l->ev_detected;
	l->in_event = 0;
}

static void labels_close_span(struct qw_labels *l)
{
	if (!l->in_span)
		return;
	l->true_alarms += (uint64_t)l->span_true;
	l->in_span = 0;
}

void qw_labels_add(struct qw_labels *l, int label, int event, int in_alarm)
{
	if (event == QW_EVENT_RAISE) {
		labels_close_span(l);
		l->alarms++;
		l->in_span = 1;
		l->span_true = 0;
	}
	if (label == 1) {
		if (!l->in_event) {
			l->in_event = 1;
			l->ev_len = 0;
			l->ev_detected = 0;
		}
		if (in_alarm && !l->ev_detected) {
			l->ev_detected = 1;
			l->delay_sum += l->ev_len;
		}
		l->ev_len++;
		l->positives++;
		if (in_alarm && l->in_span)
			l->span_true = 1;
	} else {
		labels_close_event(l);
		if (label == 0) {
			l->negatives++;
			l->neg_alarmed += (uint64_t)(in_alarm != 0);
		}
	}
	if (event == QW_EVENT_CLEAR)
		labels_close_span(l);
}

void qw_labels_finish(struct qw_labels *l)
{
	labels_close_event(l);
	labels_close_span(l);
}

static double ratio(uint64_t a, uint64_t b)
{
	return b == 0 ? NAN : (double)a / (double)b;
}

void qw_labels_metrics(const struct qw_labels *l, struct qw_label_metrics *m)
{
	double p, r;

	m->detection_rate = ratio(l->detected, l->events);
	m->false_alarm_rate = ratio(l->neg_alarmed, l->negatives);
	m->precision = ratio(l->true_alarms, l->alarms);
	m->mean_delay = ratio(l->delay_sum, l->detected);
	p = m->precision;
	r = m->detection_rate;
	if (isnan(p) || isnan(r))
		m->f1 = NAN;
	else
		m->f1 = p + r > 0 ? 2.0 * p * r / (p + r) : 0.0;
}

double qw_summary_quantile_sorted(const double *v, size_t n, double prob)
{
	if (n == 0)
		return NAN;
	return gsl_stats_quantile_from_sorted_data(v, 1, n, prob);
}

double qw_summary_quantile(double *v, size_t n, double prob)
{
	if (n == 0)
		return NAN;
	gsl_sort(v, 1, n);
	return qw_summary_quantile_sorted(v, n, prob);
}

double qw_summary_ks_uniform(const double *v, size_t n)
{
	double d = 0.0, fn = (double)n;
	size_t i;

	if (n == 0)
		return NAN;
	for (i = 1; i <= n; i++) {
		double above = (double)i / fn - v[i - 1];
		double below = v[i - 1] - (double)(i - 1) / fn;

		if (above > d)
			d = above;
		if (below > d)
			d = below;
	}
	return d;
}

double qw_summary_ks_crit05(size_t n)
{
	return n == 0 ? NAN : KS_C05 / sqrt((double)n);
}

void qw_summary_minmax(const double *v, size_t n, size_t cols, double *lo,
		       double *hi)
{
	size_t c, i;

	for (c = 0; c < cols; c++) {
		size_t a = (size_t)((uint64_t)c * n / cols);
		size_t b = (size_t)((uint64_t)(c + 1) * n / cols);

		lo[c] = NAN;
		hi[c] = NAN;
		for (i = a; i < b; i++) {
			if (!isfinite(v[i]))
				continue;
			if (isnan(lo[c]) || v[i] < lo[c])
				lo[c] = v[i];
			if (isnan(hi[c]) || v[i] > hi[c])
				hi[c] = v[i];
		}
	}
}

double qw_summary_lag1(const double *v, size_t n)
{
	double r;

	if (n < 2)
		return NAN;
	r = gsl_stats_lag1_autocorrelation(v, 1, n);
	return isfinite(r) ? r : NAN; /* 0/0: all values equal */
}

double qw_summary_per_day(uint64_t count, double span_s)
{
	if (!(span_s > 0.0) || !isfinite(span_s))
		return NAN;
	return (double)count * QW_SECONDS_PER_DAY / span_s;
}

int qw_summary_warn(unsigned k, double r1, size_t n, uint64_t alarms,
		    double expected)
{
	int w = 0;

	if (k <= 1)
		return 0;
	if (r1 > QW_WARN_LAG1 &&
	    r1 * sqrt((double)n) > QW_WARN_LAG1_SIGMAS)
		w |= QW_WARN_AUTOCORR;
	/* P(N >= alarms) = Q(alarms - 1) for N ~ Poisson(expected) */
	if (expected > 0.0 && isfinite(expected) && alarms > 0 &&
	    (double)alarms >= QW_WARN_RATE_FACTOR * expected &&
	    alarms - 1 <= UINT_MAX &&
	    gsl_cdf_poisson_Q((unsigned)(alarms - 1), expected)
	    < QW_WARN_RATE_PTAIL)
		w |= QW_WARN_RATE;
	return w;
}

int qw_summary_warn_pace(double rate, size_t n, double span_s)
{
	double got;

	if (n < 2 || !(span_s > 0.0) || !isfinite(span_s) || !(rate > 0.0))
		return 0;
	got = (double)(n - 1) / span_s;
	return got > QW_WARN_PACE_FACTOR * rate ||
	       got * QW_WARN_PACE_FACTOR < rate ? QW_WARN_PACE : 0;
}
