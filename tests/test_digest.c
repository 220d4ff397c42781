/* test_digest.c: the bounded-memory figures of `quadwatch replay`
 * (src/io/digest.c) against the exact ones over the whole array
 * (summary.c, sort.c, which test_summary and test_sort check by hand and
 * against GSL): equal while exact, within the stated resolution after.
 * The hand examples of qw_summary_lag1 repeat for the one-pass form. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "digest.h"
#include "quadwatch.h"
#include "sort.h"
#include "summary.h"

#define LAG1_TOL 1e-10  /* absolute, on r in [-1, 1]: at 1e3 from zero
			   with a spread down to ~1e-2, the deviations
			   themselves hold ~1e-11 of rounding (eps 1e3 / 1e-2)
			   in either estimator */

/* xorshift64*: a reproducible stream of uniforms in (0, 1) */
static uint64_t rng_state = 88172645463325252ull;
static double uniform(void)
{
	rng_state ^= rng_state >> 12;
	rng_state ^= rng_state << 25;
	rng_state ^= rng_state >> 27;
	return ((double)((rng_state * 2685821657736338717ull) >> 11) + 0.5)
	       / 9007199254740992.0;
}

/* a chi-square-like positive score with a heavy right tail */
static double score(void)
{
	double u = uniform();

	return -4.0 * log(u) + (uniform() < 0.01 ? 50.0 / u : 0.0);
}

static double lag1_stream(const double *v, size_t n)
{
	struct qw_lag1 l;
	size_t i;

	qw_lag1_reset(&l);
	for (i = 0; i < n; i++)
		qw_lag1_add(&l, v[i]);
	return qw_lag1_get(&l);
}

/* The hand examples of test_summary's lag1_hand. */
static void lag1_hand(void **state)
{
	const double v[] = {2.5, 0.5, 4.5, 0.5}, ramp[] = {1, 2, 3, 4, 5};
	const double flat[] = {2.385, 2.385, 2.385}, inf[] = {1, INFINITY, 2};

	(void)state;
	assert_true(fabs(lag1_stream(v, 4) - -0.75) < LAG1_TOL);
	assert_true(fabs(lag1_stream(ramp, 5) - 0.4) < LAG1_TOL);
	assert_true(isnan(lag1_stream(v, 1)));
	assert_true(isnan(lag1_stream(v, 0)));
	assert_true(isnan(lag1_stream(flat, 3)));
	assert_true(isnan(lag1_stream(inf, 3)));
}

/* Against GSL's two-pass estimator, on AR(1) series far from zero (the
 * one-pass sums must not cancel) and on independent ones. */
static void lag1_vs_gsl(void **state)
{
	static const size_t sizes[] = {2, 3, 17, 1000, 100000};
	static const double phis[] = {0.0, 0.5, 0.95, -0.7};
	double *v = malloc(100000 * sizeof *v);
	size_t a, b, i;

	(void)state;
	assert_non_null(v);
	for (a = 0; a < sizeof sizes / sizeof *sizes; a++)
		for (b = 0; b < sizeof phis / sizeof *phis; b++) {
			double z = 0.0, want, got;

			for (i = 0; i < sizes[a]; i++) {
				z = phis[b] * z + uniform() - 0.5;
				v[i] = 1e3 + z;
			}
			want = qw_summary_lag1(v, sizes[a]);
			got = lag1_stream(v, sizes[a]);
			assert_true(fabs(got - want) < LAG1_TOL);
		}
	free(v);
}

/* qw_extreme_get equals qw_quantile_select bit for bit while the ranks
 * it needs are kept, and says so (res 0); else it is within its stated
 * relative resolution of the exact value, twice that for ties. */
static void extreme_case(int upper, size_t n, double prob, int ties)
{
	struct qw_extreme t;
	double *all = malloc(n * sizeof *all), want, got, res;
	size_t i;

	assert_non_null(all);
	qw_extreme_reset(&t, upper, -30, 90);
	for (i = 0; i < n; i++) {
		all[i] = ties ? floor(score()) : score();
		if (!upper)
			all[i] = exp(-all[i]); /* p-value-like, in (0, 1] */
		assert_int_equal(qw_extreme_add(&t, all[i]), 0);
	}
	want = qw_quantile_select(all, n, prob);
	got = qw_extreme_get(&t, prob, &res);
	if (res == 0.0)
		assert_true(got == want);
	else
		assert_true(fabs(got - want) <= res * fabs(want));
	free(all);
	qw_extreme_free(&t);
}

static void extreme_vs_select(void **state)
{
	static const size_t sizes[] = {1, 2, 5, 1000, 16384, 16385, 50000,
				       300000};
	size_t a;

	(void)state;
	for (a = 0; a < sizeof sizes / sizeof *sizes; a++) {
		size_t n = sizes[a];

		extreme_case(1, n, 1.0 - 1e-3, 0);
		extreme_case(1, n, 1.0 - 1e-3, 1);
		extreme_case(1, n, 1.0, 0);
		extreme_case(0, n, 1e-3, 0);
		extreme_case(0, n, 0.0, 1);
		extreme_case(1, n, 0.5, 0);  /* histogram once n > 16384 */
		extreme_case(0, n, 0.3, 0);
	}
}

/* Beyond keep, the figure comes from the histogram and says so. */
static void extreme_resolution(void **state)
{
	struct qw_extreme t;
	double res;
	size_t i;

	(void)state;
	qw_extreme_reset(&t, 1, -30, 90);
	for (i = 0; i < 4 * QW_EXTREME_KEEP; i++)
		assert_int_equal(qw_extreme_add(&t, (double)i), 0);
	assert_true(t.pruned);
	assert_true(t.nkeep <= 2 * QW_EXTREME_KEEP);
	(void)qw_extreme_get(&t, 0.99, &res);
	assert_true(res == 0.0);
	(void)qw_extreme_get(&t, 0.5, &res);
	assert_true(res == 1.0 / QW_EXTREME_SUB);
	/* rank 0 is the value 0: below the histogram's range, no figure */
	assert_true(isnan(qw_extreme_get(&t, 0.0, &res)));
	qw_extreme_free(&t);
	qw_extreme_reset(&t, 1, -30, 90);
	assert_true(isnan(qw_extreme_get(&t, 0.5, &res)));
	qw_extreme_free(&t);
}

/* The KS distance: exact up to 2 QW_EXTREME_KEEP p-values, then at most
 * 1/QW_KS_BINS below the exact one, never above it. */
static void digest_ks(void **state)
{
	static const size_t sizes[] = {1, 10, 2 * QW_EXTREME_KEEP,
				       2 * QW_EXTREME_KEEP + 1, 200000};
	size_t a, i;

	(void)state;
	for (a = 0; a < sizeof sizes / sizeof *sizes; a++) {
		size_t n = sizes[a];
		double *v = malloc(2 * n * sizeof *v), want, got, res;
		struct qw_digest d;

		assert_non_null(v);
		qw_digest_reset(&d);
		for (i = 0; i < n; i++) {
			/* slightly off uniform: a real distance to find */
			v[i] = pow(uniform(), 1.02);
			assert_int_equal(qw_digest_add(&d, (double)i, 1.0,
						       v[i], 1), 0);
		}
		qw_sort_double(v, v + n, n);
		want = qw_summary_ks_uniform(v, n);
		got = qw_digest_ks(&d, &res);
		if (n <= 2 * QW_EXTREME_KEEP) {
			assert_true(res == 0.0);
			assert_true(got == want);
		} else {
			assert_true(res == 1.0 / QW_KS_BINS);
			assert_true(got <= want + 1e-15);
			assert_true(got >= want - res);
		}
		assert_int_equal(d.eligible, n);
		free(v);
		qw_digest_free(&d);
	}
}

/* The digest's other figures: time range, histogram, scores with and
 * without all channels, p-values outside [0, 1] not counted. */
static void digest_counts(void **state)
{
	struct qw_digest d;
	double res;

	(void)state;
	qw_digest_reset(&d);
	assert_int_equal(qw_digest_add(&d, 5.0, 2.0, 0.01, 1), 0);
	assert_int_equal(qw_digest_add(&d, 3.0, 4.0, 1.0, 0), 0);
	assert_int_equal(qw_digest_add(&d, 9.0, INFINITY, NAN, 1), 0);
	assert_int_equal(qw_digest_add(&d, 7.0, 8.0, 0.55, 1), 0);
	assert_int_equal(d.eligible, 4);
	assert_true(d.t_lo == 3.0 && d.t_hi == 9.0);
	assert_int_equal(d.score.n, 2);   /* 2 and 8: full and finite */
	assert_int_equal(d.pv.n, 3);
	assert_int_equal(d.hist[0], 1);
	assert_int_equal(d.hist[11], 1);
	assert_int_equal(d.hist[QW_DIGEST_HIST - 1], 1);
	assert_true(qw_extreme_get(&d.score, 0.5, &res) == 5.0);
	assert_true(isnan(qw_lag1_get(&d.lag1))); /* an infinite score */
	qw_digest_free(&d);
}

/* With at most QW_STRIP_MAX points the columns are qw_summary_minmax's;
 * beyond, each column is exactly the min and max over the runs that
 * begin in it, and the time of a point is its run's first. */
static void strip_columns(void **state)
{
	static const size_t sizes[] = {0, 1, 7, 870, QW_STRIP_MAX,
				       QW_STRIP_MAX + 1, 100000};
	enum { COLS = 870 };
	double lo[4][COLS], want_lo[COLS], want_hi[COLS];
	int alarm[COLS];
	size_t a, i, c;

	(void)state;
	for (a = 0; a < sizeof sizes / sizeof *sizes; a++) {
		size_t n = sizes[a];
		double *q = malloc((n + 1) * sizeof *q);
		int *al = malloc((n + 1) * sizeof *al);
		struct qw_strip s;

		assert_non_null(q);
		assert_non_null(al);
		assert_int_equal(qw_strip_alloc(&s, 1e-3), 0);
		for (i = 0; i < n; i++) {
			q[i] = i % 97 == 3 ? INFINITY : score();
			al[i] = i % 1013 == 5;
			qw_strip_add(&s, 10.0 + (double)i, q[i], 2.0 * q[i],
				     al[i], i > 10);
		}
		qw_strip_columns(&s, COLS, lo[0], lo[1], lo[2], lo[3], alarm);
		if (n <= QW_STRIP_MAX) {
			qw_summary_minmax(q, n, COLS, want_lo, want_hi);
			for (c = 0; c < COLS; c++) {
				assert_memory_equal(&lo[0][c], &want_lo[c],
						    sizeof *want_lo);
				assert_memory_equal(&lo[1][c], &want_hi[c],
						    sizeof *want_hi);
			}
		}
		for (c = 0, i = 0; c < COLS; c++) {
			uint64_t b = (uint64_t)(c + 1) * n / COLS;
			double mn = NAN, mx = NAN;
			int on = 0;

			for (; i < n && (i / s.w) * s.w < b; i++) {
				if (isfinite(q[i])) {
					mn = fmin(mn, q[i]);
					mx = fmax(mx, q[i]);
				}
				on |= al[i];
			}
			assert_memory_equal(&lo[0][c], &mn, sizeof mn);
			assert_memory_equal(&lo[1][c], &mx, sizeof mx);
			assert_int_equal(alarm[c], on);
			if (!isnan(mn))
				assert_true(lo[3][c] == 2.0 * mx);
		}
		for (i = 0; i < n; i += 1 + i / 3)
			assert_true(qw_strip_time(&s, i) ==
				    10.0 + (double)(i / s.w * s.w));
		free(q);
		free(al);
		qw_strip_free(&s);
	}
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(lag1_hand),
		cmocka_unit_test(lag1_vs_gsl),
		cmocka_unit_test(extreme_vs_select),
		cmocka_unit_test(extreme_resolution),
		cmocka_unit_test(digest_ks),
		cmocka_unit_test(digest_counts),
		cmocka_unit_test(strip_columns),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
