/* summary.h: the statistics `quadwatch replay` reports, as pure functions
 * over numbers (no files): label metrics against a 0/1 truth column, the
 * empirical quantiles behind the tuning help, and the Kolmogorov-Smirnov
 * distance of p-values from uniform, the delivered alarm rate and the
 * lag-1 autocorrelation of the scores with the warnings they raise.
 * Definitions are those of quadwatch-replay(1), sections DEFINITIONS,
 * LABELS and WARNINGS.  The figures over a whole array (quantiles, KS
 * distance, min/max columns, lag-1) are the exact references the tests
 * hold digest.h's bounded-memory forms to; replay itself uses those. */
#ifndef QW_SUMMARY_H
#define QW_SUMMARY_H

#include <stddef.h>
#include <stdint.h>

/* Label metrics, fed one reading at a time in stream order.
 *
 * An event is a maximal run of consecutive label-1 readings (a reading
 * with no label, -1, ends a run and counts nowhere).  A reading is
 * "alarmed" when the group is in alarm after it (the raise reading is,
 * the clear reading is not).  An event is detected when one of its
 * readings is alarmed; its delay is the number of its readings before the
 * first alarmed one (0: alarmed from its first reading).  An alarm (a
 * raise, to its clear or the end of data) is true when one of its alarmed
 * readings is labelled 1. */
struct qw_labels {
	uint64_t events;      /* labelled events closed */
	uint64_t detected;    /* ... with an alarmed reading */
	uint64_t delay_sum;   /* readings to the first alarm, over detected */
	uint64_t negatives;   /* label-0 readings */
	uint64_t neg_alarmed; /* ... alarmed */
	uint64_t positives;   /* label-1 readings */
	uint64_t alarms;      /* raises seen */
	uint64_t true_alarms; /* raises whose span touched a label-1 reading */
	/* state */
	int in_event;         /* inside a run of label 1 */
	uint64_t ev_len;      /* readings of the open event so far */
	int ev_detected;      /* the open event has an alarmed reading */
	int in_span;          /* an alarm raised in this stream is open */
	int span_true;        /* ... and touched a label-1 reading */
};

/* The figures; NaN when the denominator is 0 (JSON null). */
struct qw_label_metrics {
	double detection_rate;   /* detected / events */
	double false_alarm_rate; /* neg_alarmed / negatives */
	double precision;        /* true_alarms / alarms */
	double f1;               /* 2 P R / (P + R), R = detection_rate */
	double mean_delay;       /* delay_sum / detected, readings */
};

void qw_labels_reset(struct qw_labels *l);
/* One reading: label 0, 1 or -1 (none); event an enum qw_event; in_alarm
 * the group's state after the reading. */
void qw_labels_add(struct qw_labels *l, int label, int event, int in_alarm);
/* Closes an open event and an open alarm (end of data).  Idempotent. */
void qw_labels_finish(struct qw_labels *l);
void qw_labels_metrics(const struct qw_labels *l, struct qw_label_metrics *m);

/* Sorts v[0..n) ascending (NaN are not allowed) and returns its quantile
 * at prob in [0, 1] by linear interpolation between order statistics
 * (Hyndman & Fan 1996, type 7; GSL's gsl_stats_quantile_from_sorted_data).
 * NaN when n = 0. */
double qw_summary_quantile(double *v, size_t n, double prob);
/* Quantile of data already sorted ascending. */
double qw_summary_quantile_sorted(const double *v, size_t n, double prob);

/* Kolmogorov-Smirnov distance sup |F_n(u) - u| of the sample v[0..n)
 * (sorted ascending, values in [0, 1]) from the uniform distribution:
 * max over i of max(i/n - v[i-1], v[i-1] - (i-1)/n).  NaN when n = 0. */
double qw_summary_ks_uniform(const double *v, size_t n);
/* Asymptotic 5% critical value of that distance, 1.358/sqrt(n)
 * (Kolmogorov's limit law; Massey 1951, table 1).  NaN when n = 0. */
double qw_summary_ks_crit05(size_t n);

/* Min/max downsampling for plots: splits v[0..n) into cols consecutive
 * column ranges (column c holds indices [c*n/cols, (c+1)*n/cols)) and
 * writes each one's minimum and maximum over its finite values to
 * lo[c], hi[c] (NaN when the column has none).  cols >= 1; when n < cols
 * some columns are empty (NaN). */
void qw_summary_minmax(const double *v, size_t n, size_t cols, double *lo,
		       double *hi);

/* Lag-1 sample autocorrelation of v[0..n) in stream order (Box & Jenkins,
 * Time Series Analysis, 1976, eq. 2.1.12; GSL's
 * gsl_stats_lag1_autocorrelation):
 *   r1 = sum_{i=1}^{n-1} (v[i] - m)(v[i-1] - m) / sum_{i=0}^{n-1} (v[i] - m)^2
 * with m the mean of v.  NaN when n < 2 or every value is the same. */
double qw_summary_lag1(const double *v, size_t n);

/* count events over span_s seconds, per day (86400 s).  NaN when the span
 * is not positive (one reading, or all at the same time) or not finite. */
double qw_summary_per_day(uint64_t count, double span_s);

/* Warnings about a persistence rule k of m (quadwatch.ini(5) persist) on
 * readings that are not independent; a bit mask of these: */
enum qw_summary_warn {
	QW_WARN_AUTOCORR = 1, /* lag-1 autocorrelation too high for k > 1 */
	QW_WARN_RATE = 2,     /* delivered alarms far above configured, k > 1 */
	QW_WARN_PACE = 4      /* readings come at another rate than `rate` */
};

#define QW_WARN_LAG1 0.1   /* r1 above which a k-of-m rule with k > 1
			      visibly over-raises.  Replay of AR(1)
			      readings (p = 4, persist 3/5, alpha 0.018 and
			      0.04 per reading, 3e5-6e5 readings): raised
			      alarms were 1.8-3.1 times configured at r1 =
			      0.09, 2.5-4.6 at 0.16, 1.4-2.0 at 0.04, and
			      within Poisson noise of it at r1 = 0; with
			      persist 1/1 r1 up to 0.8 did not raise the
			      rate (exceedances cluster into fewer alarms) */
#define QW_WARN_LAG1_SIGMAS 4.0 /* and above 4/sqrt(n): r1 of n independent
			      readings has standard error about 1/sqrt(n)
			      (Bartlett 1946), so independent readings warn
			      about once in 3e4 replays */
#define QW_WARN_RATE_FACTOR 2.0 /* delivered at least twice configured */
#define QW_WARN_RATE_PTAIL 1e-3 /* ... and that many alarms or more has
			      probability below this for a Poisson count
			      with the configured mean */

/* The warnings for persist k, lag-1 autocorrelation r1 of n scores, and
 * alarms raised where expected (configured rate times the span) were
 * expected; NaN figures raise nothing.  Returns the enum qw_summary_warn
 * mask (0: none). */
int qw_summary_warn(unsigned k, double r1, size_t n, uint64_t alarms,
		    double expected);

#define QW_WARN_PACE_FACTOR 1.5 /* data rate vs configured `rate`: alpha
			      is solved per reading from alarms_per_day /
			      (rate 86400), so the delivered alarms per day
			      scale with the true reading rate; a factor of
			      1.5 either way is a 50% error in the delivered
			      rate, beyond jitter and short gaps */

/* QW_WARN_PACE when n readings over span_s seconds of data time come at
 * (n - 1) / span_s per second, more than QW_WARN_PACE_FACTOR away from
 * rate (either way); else 0 (also when n < 2 or the span is 0). */
int qw_summary_warn_pace(double rate, size_t n, double span_s);

#endif
