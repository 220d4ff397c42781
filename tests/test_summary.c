/* test_summary.c: the statistics of `quadwatch replay` (src/io/summary.c)
 * against small examples computed by hand (worked in the comments), some
 * cross-checked with scipy.stats (kstest, poisson.sf). */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "quadwatch.h"
#include "summary.h"

#define TOL 1e-12 /* relative: the results are a few exact operations */

static int close_to(double got, double want)
{
	if (isnan(want))
		return isnan(got);
	return fabs(got - want) <= TOL * fabs(want) + 1e-300;
}

#define assert_close(g, w) assert_true(close_to((g), (w)))

enum { N_ = QW_EVENT_NONE, R_ = QW_EVENT_RAISE, C_ = QW_EVENT_CLEAR };

/* label, event, in_alarm after the reading; hand analysis:
 *  0-3   alarm A1 on label 0 (false), alarmed label-0 readings 1, 2
 *  4-7   event E1; A2 raised at 6: detected, delay 2 (readings 4, 5)
 *  8     E1 ends; label 0 while still alarmed (3rd alarmed negative)
 *  9     A2 clears: true (readings 6, 7 labelled 1)
 *  11-12 event E2, no alarm: missed
 *  14    unlabelled: counts nowhere
 *  15    E3 starts with raise A3: detected, delay 0; A3 true
 *  16    label 0, alarmed (4th);  17: A3 clears
 *  18    A4 raised on label 0 (5th alarmed negative), open at the end:
 *        false.
 * events 3, detected 2 -> detection rate 2/3; mean delay (2+0)/2 = 1;
 * negatives 0,1,2,3,8,9,10,13,16,17,18 = 11, alarmed 1,2,8,16,18 = 5
 * -> false alarm rate 5/11; alarms 4, true 2 -> precision 1/2;
 * F1 = 2 (1/2)(2/3) / (1/2 + 2/3) = 4/7. */
static const int seq[][3] = {
	{0, N_, 0}, {0, R_, 1}, {0, N_, 1}, {0, C_, 0}, {1, N_, 0},
	{1, N_, 0}, {1, R_, 1}, {1, N_, 1}, {0, N_, 1}, {0, C_, 0},
	{0, N_, 0}, {1, N_, 0}, {1, N_, 0}, {0, N_, 0}, {-1, N_, 0},
	{1, R_, 1}, {0, N_, 1}, {0, C_, 0}, {0, R_, 1},
};

static void labels_hand_example(void **state)
{
	struct qw_labels l;
	struct qw_label_metrics m;
	size_t i;

	(void)state;
	qw_labels_reset(&l);
	for (i = 0; i < sizeof seq / sizeof seq[0]; i++)
		qw_labels_add(&l, seq[i][0], seq[i][1], seq[i][2]);
	qw_labels_finish(&l);
	qw_labels_finish(&l); /* idempotent */
	assert_int_equal(l.events, 3);
	assert_int_equal(l.detected, 2);
	assert_int_equal(l.negatives, 11);
	assert_int_equal(l.neg_alarmed, 5);
	assert_int_equal(l.positives, 7);
	assert_int_equal(l.alarms, 4);
	assert_int_equal(l.true_alarms, 2);
	qw_labels_metrics(&l, &m);
	assert_close(m.detection_rate, 2.0 / 3.0);
	assert_close(m.false_alarm_rate, 5.0 / 11.0);
	assert_close(m.precision, 0.5);
	assert_close(m.f1, 4.0 / 7.0);
	assert_close(m.mean_delay, 1.0);
	/* the checker can fail: swapping P and R would still give 4/7, so
	 * check that the two differ as computed */
	assert_false(close_to(m.precision, m.detection_rate));
}

/* No events, no alarms: every ratio undefined (NaN); no alarms but events
 * missed: precision NaN, detection 0, F1 NaN. */
static void labels_empty(void **state)
{
	struct qw_labels l;
	struct qw_label_metrics m;

	(void)state;
	qw_labels_reset(&l);
	qw_labels_finish(&l);
	qw_labels_metrics(&l, &m);
	assert_true(isnan(m.detection_rate) && isnan(m.false_alarm_rate) &&
		    isnan(m.precision) && isnan(m.f1) && isnan(m.mean_delay));
	qw_labels_add(&l, 1, N_, 0);
	qw_labels_add(&l, 0, N_, 0);
	qw_labels_metrics(&l, &m);
	assert_close(m.detection_rate, 0.0);
	assert_close(m.false_alarm_rate, 0.0);
	assert_true(isnan(m.precision) && isnan(m.f1));
	/* one true alarm, all detected: F1 = 1; P = R = 0 gives F1 = 0 */
	qw_labels_reset(&l);
	qw_labels_add(&l, 1, R_, 1);
	qw_labels_add(&l, 0, C_, 0);
	qw_labels_finish(&l);
	qw_labels_metrics(&l, &m);
	assert_close(m.f1, 1.0);
	qw_labels_reset(&l);
	qw_labels_add(&l, 0, R_, 1);
	qw_labels_add(&l, 1, C_, 0);
	qw_labels_finish(&l);
	qw_labels_metrics(&l, &m);
	assert_close(m.precision, 0.0);
	assert_close(m.detection_rate, 0.0);
	assert_close(m.f1, 0.0);
}

/* Type 7: sorted 0.5, 2.385, 3.3, 7.1, 9.25; at 0.9, h = 4 * 0.9 = 3.6
 * -> 7.1 + 0.6 * (9.25 - 7.1) = 8.39; at 0.5 the median 3.3. */
static void quantile_type7(void **state)
{
	double v[] = {2.385, 7.1, 0.5, 9.25, 3.3};

	(void)state;
	assert_close(qw_summary_quantile(v, 5, 0.9), 8.39);
	assert_close(v[0], 0.5); /* sorted in place */
	assert_close(v[4], 9.25);
	assert_close(qw_summary_quantile_sorted(v, 5, 0.5), 3.3);
	assert_close(qw_summary_quantile_sorted(v, 5, 0.0), 0.5);
	assert_close(qw_summary_quantile_sorted(v, 5, 1.0), 9.25);
	assert_true(isnan(qw_summary_quantile(v, 0, 0.5)));
}

/* {0.1, 0.4, 0.7}: the largest gap is 1 - 0.7 = 0.3 (scipy.stats.kstest
 * gives statistic 0.3); {0.9, 0.95}: 0.9 - 0 = 0.9. */
static void ks_uniform(void **state)
{
	const double a[] = {0.1, 0.4, 0.7}, b[] = {0.9, 0.95};

	(void)state;
	assert_close(qw_summary_ks_uniform(a, 3), 0.3);
	assert_close(qw_summary_ks_uniform(b, 2), 0.9);
	assert_true(isnan(qw_summary_ks_uniform(a, 0)));
	assert_close(qw_summary_ks_crit05(100), 0.1358);
	assert_true(isnan(qw_summary_ks_crit05(0)));
}

/* 7 values into 3 columns [0,2) [2,4) [4,7): non-finite values skipped. */
static void minmax_columns(void **state)
{
	const double v[] = {1.5, 5.25, NAN, 2.385, 8.0, 3.0, INFINITY};
	double lo[4], hi[4];

	(void)state;
	qw_summary_minmax(v, 7, 3, lo, hi);
	assert_close(lo[0], 1.5);
	assert_close(hi[0], 5.25);
	assert_close(lo[1], 2.385);
	assert_close(hi[1], 2.385);
	assert_close(lo[2], 3.0);
	assert_close(hi[2], 8.0);
	qw_summary_minmax(v, 2, 4, lo, hi); /* n < cols: some empty */
	assert_true(isnan(lo[0]) && isnan(hi[2]));
	assert_close(lo[1], 1.5);
	assert_close(hi[3], 5.25);
}

/* 2.5, 0.5, 4.5, 0.5: mean 2, deviations 0.5, -1.5, 2.5, -1.5;
 * numerator 0.5(-1.5) + (-1.5)(2.5) + 2.5(-1.5) = -8.25, denominator
 * 0.25 + 2.25 + 6.25 + 2.25 = 11 -> r1 = -0.75.  A rising ramp 1..5:
 * deviations -2, -1, 0, 1, 2; numerator (-2)(-1) + (-1)(0) + (0)(1) +
 * (1)(2) = 4, denominator 10 -> 0.4. */
static void lag1_hand(void **state)
{
	const double v[] = {2.5, 0.5, 4.5, 0.5};
	const double ramp[] = {1.0, 2.0, 3.0, 4.0, 5.0};
	const double flat[] = {2.385, 2.385, 2.385};

	(void)state;
	assert_close(qw_summary_lag1(v, 4), -0.75);
	assert_close(qw_summary_lag1(ramp, 5), 0.4);
	assert_true(isnan(qw_summary_lag1(v, 1)));
	assert_true(isnan(qw_summary_lag1(v, 0)));
	assert_true(isnan(qw_summary_lag1(flat, 3))); /* 0/0 */
	/* the checker can fail: the order of the values matters */
	assert_false(close_to(qw_summary_lag1(ramp, 5),
			      qw_summary_lag1(v, 4)));
}

/* 3 alarms over 43200 s (half a day): 6 per day; no span: NaN. */
static void per_day(void **state)
{
	(void)state;
	assert_close(qw_summary_per_day(3, 43200.0), 6.0);
	assert_close(qw_summary_per_day(7, 2.385 * 86400.0), 7.0 / 2.385);
	assert_close(qw_summary_per_day(0, 10.0), 0.0);
	assert_true(isnan(qw_summary_per_day(3, 0.0)));
	assert_true(isnan(qw_summary_per_day(3, -1.0)));
	assert_true(isnan(qw_summary_per_day(3, NAN)));
	assert_true(isnan(qw_summary_per_day(3, INFINITY)));
}

/* Autocorrelation: k > 1 only, above QW_WARN_LAG1 and 4/sqrt(n).
 * Rate: scipy.stats.poisson.sf(9, 2) = 4.65e-05 (10 alarms where 2 were
 * expected: warn), poisson.sf(5, 2) = 0.0166 (6 of 2: no), sf(2, 1) =
 * 0.0803 (3 of 1: no). */
static void warn_rules(void **state)
{
	(void)state;
	assert_int_equal(qw_summary_warn(3, 0.5, 10000, 0, 1.0),
			 QW_WARN_AUTOCORR);
	assert_int_equal(qw_summary_warn(1, 0.9, 10000, 50, 1.0), 0);
	assert_int_equal(qw_summary_warn(2, 0.09, 1000000, 0, 1.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.11, 1000000, 0, 1.0),
			 QW_WARN_AUTOCORR);
	/* r1 0.5 of 25 readings: 0.5 * 5 = 2.5 standard errors, noise */
	assert_int_equal(qw_summary_warn(3, 0.5, 25, 0, 1.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.5, 100, 0, 1.0),
			 QW_WARN_AUTOCORR);
	assert_int_equal(qw_summary_warn(3, NAN, 10000, 0, 1.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 10, 2.0),
			 QW_WARN_RATE);
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 6, 2.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 3, 1.0), 0);
	/* a significant excess that is not twice the configured rate */
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 1500, 1000.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 10, 0.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.0, 10000, 10, NAN), 0);
	assert_int_equal(qw_summary_warn(1, 0.0, 10000, 10, 2.0), 0);
	assert_int_equal(qw_summary_warn(3, 0.5, 10000, 10, 2.0),
			 QW_WARN_AUTOCORR | QW_WARN_RATE);
}

/* 1001 readings over 100 s: 10/s, as configured; over 50 s 20/s (warn);
 * 140 s 7.14/s (within 1.5x); 160 s 6.25/s (warn). */
static void warn_pace(void **state)
{
	(void)state;
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, 100.0), 0);
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, 50.0),
			 QW_WARN_PACE);
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, 140.0), 0);
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, 160.0),
			 QW_WARN_PACE);
	assert_int_equal(qw_summary_warn_pace(10.0, 1, 100.0), 0);
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, 0.0), 0);
	assert_int_equal(qw_summary_warn_pace(10.0, 1001, NAN), 0);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(labels_hand_example),
		cmocka_unit_test(labels_empty),
		cmocka_unit_test(quantile_type7),
		cmocka_unit_test(ks_uniform),
		cmocka_unit_test(minmax_columns),
		cmocka_unit_test(lag1_hand),
		cmocka_unit_test(per_day),
		cmocka_unit_test(warn_rules),
		cmocka_unit_test(warn_pace),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
