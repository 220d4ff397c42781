/* test_sort.c: the radix sort of doubles (src/io/sort.c).
 *
 * Oracle: qsort(3) with a total-order comparison (-0 before +0, as
 * sort.h promises) on the same data, compared bit for bit: random values
 * over the whole range, with negatives, zeros of both signs, subnormals,
 * infinities and many duplicates; p-values in [0, 1] (one shared exponent
 * range, where passes are skipped); and sizes 0, 1, 2.  Selection against
 * the sorted array, and its quantile against GSL's from sorted data. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_rng.h>
#include <gsl/gsl_statistics_double.h>

#include "sort.h"

#define SORT_N 200000   /* values per case */
#define SORT_SEED 2385  /* fixed seed: failures reproduce */

static int cmp_total(const void *pa, const void *pb)
{
	double a = *(const double *)pa, b = *(const double *)pb;

	if (a < b)
		return -1;
	if (a > b)
		return 1;
	return (signbit(b) != 0) - (signbit(a) != 0); /* -0 before +0 */
}

/* Radix sort of v[0..n) equals qsort's, bit for bit. */
static void check_sorted_like_qsort(const double *v, size_t n)
{
	double *a = malloc((n + 1) * sizeof *a), *b = malloc((n + 1) * sizeof *b);
	double *tmp = malloc((n + 1) * sizeof *tmp);

	assert_true(a && b && tmp);
	memcpy(a, v, n * sizeof *v);
	memcpy(b, v, n * sizeof *v);
	qw_sort_double(a, tmp, n);
	qsort(b, n, sizeof *b, cmp_total);
	assert_memory_equal(a, b, n * sizeof *a);
	free(a);
	free(b);
	free(tmp);
}

static double rand_any(gsl_rng *r)
{
	switch (gsl_rng_uniform_int(r, 8)) {
	case 0: return (double)gsl_rng_uniform_int(r, 50) - 25.0; /* dups */
	case 1: return gsl_rng_uniform_int(r, 2) ? 0.0 : -0.0;
	case 2: return (gsl_rng_uniform(r) - 0.5) * 1e-310;  /* subnormal */
	case 3: return gsl_rng_uniform_int(r, 2) ? INFINITY : -INFINITY;
	default: {
		uint64_t u = ((uint64_t)gsl_rng_get(r) << 32) ^ gsl_rng_get(r);
		double d;

		memcpy(&d, &u, sizeof d);
		return isnan(d) ? 2.385 : d;
	}
	}
}

static void test_sort_any(void **state)
{
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	double *v = malloc(SORT_N * sizeof *v);
	size_t i;

	(void)state;
	assert_non_null(v);
	gsl_rng_set(r, SORT_SEED);
	for (i = 0; i < SORT_N; i++)
		v[i] = rand_any(r);
	check_sorted_like_qsort(v, SORT_N);
	check_sorted_like_qsort(v, 0);
	check_sorted_like_qsort(v, 1);
	check_sorted_like_qsort(v, 2);
	check_sorted_like_qsort(v, 3);
	free(v);
	gsl_rng_free(r);
}

static void test_sort_pvalues(void **state)
{
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	double *v = malloc(SORT_N * sizeof *v);
	size_t i;

	(void)state;
	assert_non_null(v);
	gsl_rng_set(r, SORT_SEED + 1);
	for (i = 0; i < SORT_N; i++)
		v[i] = gsl_rng_uniform(r) * (i % 7 ? 1.0 : 1e-9);
	check_sorted_like_qsort(v, SORT_N);
	for (i = 0; i < SORT_N; i++)
		v[i] = 0.5; /* one key: every pass skipped */
	check_sorted_like_qsort(v, SORT_N);
	free(v);
	gsl_rng_free(r);
}

/* Selection gives the sorted array's value at every rank tried, and the
 * quantile gsl_stats_quantile_from_sorted_data gives, bit for bit. */
static void test_select_and_quantile(void **state)
{
	static const double probs[] = {0.0, 1e-6, 0.01, 0.5, 0.9, 0.99,
				       1.0 - 1e-6, 1.0};
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	size_t ns[] = {1, 2, 3, 10, 1000, SORT_N};
	size_t a, i, k;

	(void)state;
	gsl_rng_set(r, SORT_SEED + 2);
	for (a = 0; a < sizeof ns / sizeof ns[0]; a++) {
		size_t n = ns[a];
		double *v = malloc(n * sizeof *v), *s = malloc(n * sizeof *s);
		double *w = malloc(n * sizeof *w);

		assert_true(v && s && w);
		for (i = 0; i < n; i++)
			v[i] = i % 3 ? -log(gsl_rng_uniform_pos(r)) * 16.0
			       : (double)gsl_rng_uniform_int(r, 20); /* dups */
		memcpy(s, v, n * sizeof *v);
		qsort(s, n, sizeof *s, cmp_total);
		for (k = 0; k < n; k += 1 + n / 7) {
			memcpy(w, v, n * sizeof *v);
			assert_true(qw_select_double(w, n, k) == s[k]);
			for (i = 0; i < n; i++)
				assert_true(i <= k ? w[i] <= s[k] : w[i] >= s[k]);
		}
		for (k = 0; k < sizeof probs / sizeof probs[0]; k++) {
			double want = gsl_stats_quantile_from_sorted_data(
				s, 1, n, probs[k]), got;

			memcpy(w, v, n * sizeof *v);
			got = qw_quantile_select(w, n, probs[k]);
			if (memcmp(&got, &want, sizeof got) != 0)
				fail_msg("n %zu prob %g: %a, gsl %a", n,
					 probs[k], got, want);
		}
		free(v);
		free(s);
		free(w);
	}
	assert_true(isnan(qw_quantile_select(NULL, 0, 0.5)));
	gsl_rng_free(r);
}

/* The checker can fail: an array left unsorted differs from qsort's. */
static void test_sort_broken(void **state)
{
	double v[3] = {2.385, -1.0, 0.5}, w[3];

	(void)state;
	memcpy(w, v, sizeof v);
	qsort(w, 3, sizeof *w, cmp_total);
	assert_true(memcmp(v, w, sizeof v) != 0);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_sort_any),
		cmocka_unit_test(test_sort_pvalues),
		cmocka_unit_test(test_select_and_quantile),
		cmocka_unit_test(test_sort_broken),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
