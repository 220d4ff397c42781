/* digest.h: what `quadwatch replay` keeps of one group's scored readings
 * for its summary and report, in memory that stops growing with the
 * stream (a replay of 10^8 readings holds no more than one of 10^5).
 *
 * - qw_lag1: the lag-1 autocorrelation of the scores in one pass.
 * - qw_extreme: one extreme quantile (the tuning help's (1 - alpha) score
 *   and alpha p-value), exact while the rank it needs lies among the
 *   QW_EXTREME_KEEP most extreme values, else from a log histogram kept
 *   beside them (relative resolution 1/QW_EXTREME_SUB).
 * - qw_digest: those for the eligible readings, with the
 *   Kolmogorov-Smirnov distance of their p-values from uniform (exact up
 *   to 2 QW_EXTREME_KEEP p-values, then from QW_KS_BINS equal bins).
 * - qw_strip: the report's score plot, min and max per run of readings.
 *
 * Pure computation, no files.  Definitions are those of
 * quadwatch-replay(1), section DEFINITIONS; summary.h has the exact
 * figures over a whole array that these reproduce.  Memory grows by
 * doubling up to its bound (qw_digest: about 900 kB once past 16384
 * eligible readings; qw_strip: QW_STRIP_MAX buckets). */
#ifndef QW_DIGEST_H
#define QW_DIGEST_H

#include <stddef.h>
#include <stdint.h>

/* Lag-1 autocorrelation of x_1..x_n in stream order, as
 * gsl_stats_lag1_autocorrelation (summary.h's qw_summary_lag1) defines
 * it: sum (x_i - m)(x_{i-1} - m) / sum (x_i - m)^2, m the mean.  Kept as
 * the mean, the sum of squares and the lag-1 co-moment about the running
 * mean, updated as Welford's algorithm updates the variance (Welford
 * 1962; the pairwise merge of Chan, Golub & LeVeque 1979, one value at a
 * time). */
struct qw_lag1 {
	uint64_t n;
	double mean, m2, c1;   /* mean, sum (x - m)^2, lag-1 co-moment */
	double first, last;    /* x_1, x_n */
};
void qw_lag1_reset(struct qw_lag1 *l);
void qw_lag1_add(struct qw_lag1 *l, double x);
/* NaN when n < 2, when all values are equal, or when one is not finite. */
double qw_lag1_get(const struct qw_lag1 *l);

#define QW_EXTREME_KEEP 8192  /* values of the tail kept exactly: the
			      quantile is exact while its rank from the
			      tail is below this (alpha n < 8192) */
#define QW_EXTREME_SUB 128    /* log-histogram buckets per octave: linear
			      within it, relative width <= 1/128 (0.8%) */

struct qw_extreme {
	int upper;             /* keeps the largest values, else smallest */
	int lo_exp, octaves;   /* histogram range [2^lo_exp, 2^(lo_exp +
				  octaves)), an under- and overflow bucket
				  outside it */
	uint64_t n;            /* values offered */
	double *keep;          /* the nkeep most extreme values, unordered */
	size_t nkeep, cap;     /* cap <= 2 QW_EXTREME_KEEP */
	double bar;            /* values not beyond it are not kept */
	int pruned;            /* some values were dropped from keep */
	uint64_t *hist;        /* all values, once pruned */
	int failed;            /* an allocation failed: no figure */
};
/* upper: the tail of large values (a quantile near 1), else small;
 * [2^lo_exp, 2^(lo_exp + octaves)) the values the histogram resolves. */
void qw_extreme_reset(struct qw_extreme *t, int upper, int lo_exp, int octaves);
void qw_extreme_free(struct qw_extreme *t);
/* One value (not NaN).  0, or QW_ENOMEM (then t->failed). */
int qw_extreme_add(struct qw_extreme *t, double v);
/* The prob quantile of all values offered, as qw_quantile_select takes
 * it (linear between ranks floor((n - 1) prob) and the next).  *res is 0
 * when the figure is exact, else its relative resolution (the ranks lay
 * outside keep).  NaN when n = 0, after a failure, or when a rank falls
 * outside the histogram's range or memory for a copy of keep ran out. */
double qw_extreme_get(const struct qw_extreme *t, double prob, double *res);

#define QW_KS_BINS 65536   /* equal p-value bins once past 2 QW_EXTREME_KEEP
			      p-values: the KS distance to 1/65536 */
#define QW_KS_BATCH 512    /* p-values binned together: the bins' cache
			      misses then overlap (one at a time they cost
			      ~90 ns a reading at p = 16) */
#define QW_DIGEST_HIST 20  /* the report's p-value histogram bins */

/* The eligible readings of one group (scored after warm-up). */
struct qw_digest {
	uint64_t eligible;
	double t_lo, t_hi;     /* min and max data time, s */
	struct qw_lag1 lag1;   /* of every eligible score */
	struct qw_extreme score;  /* full-channel finite scores, upper tail */
	struct qw_extreme pv;     /* p-values in [0, 1], lower tail */
	uint64_t *ks;          /* QW_KS_BINS, once pv has pruned */
	uint32_t ks_wait[QW_KS_BATCH]; /* bins of p-values not yet counted */
	size_t ks_nwait;
	uint64_t hist[QW_DIGEST_HIST]; /* p-values, equal bins */
	int failed;            /* an allocation failed */
};
void qw_digest_reset(struct qw_digest *d);
void qw_digest_free(struct qw_digest *d);
/* One eligible reading: time, score, p-value (outside [0, 1]: none) and
 * full (all channels observed, the score counts for the tuning limit).
 * 0, or QW_ENOMEM (then d->failed; later figures are NaN). */
int qw_digest_add(struct qw_digest *d, double t, double q, double pv,
		  int full);
/* The KS distance sup |F_n(u) - u| of the p-values from uniform, as
 * qw_summary_ks_uniform; *res 0 when exact, else 1/QW_KS_BINS: the
 * distance at the bin edges, which the exact one exceeds by less than
 * that.  NaN when there are none (or no memory for a sorted copy). */
double qw_digest_ks(const struct qw_digest *d, double *res);

/* The score plot of the report: for each run of w consecutive points (w
 * a power of two, doubled by merging pairs when QW_STRIP_MAX runs are
 * full) the first time and the min and max of the finite scores and
 * limits, and whether one was in alarm.  With at most QW_STRIP_MAX
 * points every point is its own run and the plot is exact. */
#define QW_STRIP_MAX 2048  /* runs: at least QW_STRIP_MAX / 2 = 1024
			      after a merge, more than the plot's columns */
struct qw_strip_run {
	double t;
	double q_lo, q_hi, l_lo, l_hi;
	int alarm;
};
struct qw_strip {
	uint64_t n, w;         /* points, points per run */
	size_t nruns;
	struct qw_strip_run *run;  /* QW_STRIP_MAX */
	double floor;          /* scores not above it do not set the range */
	uint64_t nwarm;
	/* range of the plot: [0] every point, [1] points after warm-up:
	 * lowest score above floor, highest score or limit */
	double lo[2], hi[2];
};
/* 0 or QW_ENOMEM. */
int qw_strip_alloc(struct qw_strip *s, double floor);
void qw_strip_free(struct qw_strip *s);
void qw_strip_add(struct qw_strip *s, double t, double q, double limit,
		  int in_alarm, int warm);
/* Columns c = 0..cols-1 of points [c n / cols, (c + 1) n / cols), made
 * of the runs that begin there: min and max of score and limit (NaN:
 * none finite) and alarm.  With every point its own run, as
 * qw_summary_minmax gives them. */
void qw_strip_columns(const struct qw_strip *s, size_t cols, double *q_lo,
		      double *q_hi, double *l_lo, double *l_hi, int *alarm);
/* The time of point i (of the first point of its run). */
double qw_strip_time(const struct qw_strip *s, uint64_t i);

#endif
