/* summary.h: the statistics `quadwatch replay` reports, as pure functions
 * over numbers (no files): label metrics against a 0/1 truth column, the
 * empirical quantiles behind the tuning help, and the Kolmogorov-Smirnov
 * distance of p-values from uniform.  Definitions are those of
 * quadwatch-replay(1), section LABELS and TUNING. */
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

#endif
