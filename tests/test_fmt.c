/* test_fmt.c: printf's %.Pg and %.6f without printf (src/io/fmt.c).
 *
 * Oracle: snprintf(3) itself (glibc), compared byte for byte on random
 * doubles over the whole range, on scores, limits, p-values and epoch
 * times as a replay writes them, and on edges: exact ties (0.5,
 * 1234567890.5, 2.5e-5), values next to powers of ten, carries (9.9999..),
 * the %g style switch at exponents -5/-4 and P-1/P, zeros, Inf, NaN,
 * subnormals. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include <gsl/gsl_rng.h>

#include "fmt.h"

#define FMT_CASES 300000 /* random values per precision */
#define FMT_SEED 2385    /* fixed seed: failures reproduce */

static void check_g(double v, int prec)
{
	char a[QW_FMT_MAX], b[QW_FMT_MAX];
	size_t n = qw_fmt_g(a, v, prec);

	snprintf(b, sizeof b, "%.*g", prec, v);
	if (strcmp(a, b) != 0 || n != strlen(b))
		fail_msg("%%.%dg of %a: '%s', printf '%s'", prec, v, a, b);
}

static void check_f6(double v)
{
	char a[QW_FMT_MAX], b[QW_FMT_MAX];
	size_t n = qw_fmt_f6(a, v);

	snprintf(b, sizeof b, "%.6f", v);
	if (strcmp(a, b) != 0 || n != strlen(b))
		fail_msg("%%.6f of %a: '%s', printf '%s'", v, a, b);
}

static const double edges[] = {
	0.0, -0.0, 0.5, 1.5, 2.5, 1234567890.5, 2.5e-5, 1e-5, 1e-4,
	9.99999e-5, 0.0001, 1.0, 10.0, 1e9, 1e10, 1e11, 9999999999.5,
	9.9999999995, 9.99999999949, 99999.95, 999999.5, 0.1, 0.3, 2.385,
	1e22, 1e23, 1e-22, 1e-300, 4.9e-324, DBL_MAX, -DBL_MAX, DBL_MIN,
	1700000000.1, 1700000000.0000005, 1700000000.9999995, -1.25,
	123456.5, 0.000123456789, 42.0, 26.29622, 3.125e-3,
};

static void test_fmt_edges(void **state)
{
	size_t i;
	double pw;
	int prec;

	(void)state;
	for (i = 0; i < sizeof edges / sizeof edges[0]; i++) {
		for (prec = 1; prec <= QW_FMT_G_PREC_MAX; prec++) {
			check_g(edges[i], prec);
			check_g(-edges[i], prec);
			check_g(nextafter(edges[i], 0), prec);
			check_g(nextafter(edges[i], INFINITY), prec);
		}
		check_f6(edges[i]);
		check_f6(-edges[i]);
		check_f6(nextafter(edges[i], 0));
		check_f6(nextafter(edges[i], INFINITY));
	}
	/* every digit count of %.6f's whole part, at its two ends, and the
	 * digit splits of %g */
	for (i = 0, pw = 1.0; i <= 16; i++, pw *= 10.0) {
		check_f6(pw);
		check_f6(pw - 1.0);
		check_f6(pw + 0.25);
		for (prec = 1; prec <= QW_FMT_G_PREC_MAX; prec++) {
			check_g(pw - 1.0, prec);
			check_g(pw + 1.0, prec);
		}
	}
	check_g(INFINITY, 10);
	check_g(-INFINITY, 10);
	check_g(NAN, 6);
	check_f6(INFINITY);
	check_f6(NAN);
}

/* Random values: any bit pattern, decimals of few digits (ties and near
 * ties are common there), and the replay's own shapes. */
static double rand_value(gsl_rng *r)
{
	uint64_t u;
	double d;

	switch (gsl_rng_uniform_int(r, 5)) {
	case 0:
		u = ((uint64_t)gsl_rng_get(r) << 32) ^ gsl_rng_get(r);
		memcpy(&d, &u, sizeof d);
		return d;
	case 1: /* k / 2^j: exact binary fractions, ties at some P */
		return (double)gsl_rng_uniform_int(r, 1000000) /
		       ldexp(1.0, (int)gsl_rng_uniform_int(r, 30));
	case 2: /* decimal with few digits and a random exponent */
		return (double)gsl_rng_uniform_int(r, 100000) *
		       pow(10.0, (double)gsl_rng_uniform_int(r, 40) - 20.0);
	case 3: /* epoch times at 10 readings/s, with jitter */
		return 1.7e9 + (double)gsl_rng_uniform_int(r, 100000000) * 0.1
		       + (gsl_rng_uniform_int(r, 2) ? gsl_rng_uniform(r) : 0);
	default: /* scores and p-values */
		return gsl_rng_uniform_int(r, 2) ? -log(gsl_rng_uniform_pos(r))
		       * 16.0 : exp(-40.0 * gsl_rng_uniform(r));
	}
}

static void test_fmt_random(void **state)
{
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	static const int precs[] = {6, 10, 1, 3, 8, 9, 12};
	size_t i, j;

	(void)state;
	gsl_rng_set(r, FMT_SEED);
	for (j = 0; j < sizeof precs / sizeof precs[0]; j++)
		for (i = 0; i < FMT_CASES; i++) {
			double v = rand_value(r);

			if (!isnan(v))
				check_g(v, precs[j]);
		}
	for (i = 0; i < FMT_CASES; i++) {
		double v = rand_value(r);

		if (!isnan(v))
			check_f6(v);
	}
	gsl_rng_free(r);
}

/* qw_fmt_f6_memo against printf on streams of times as a replay writes
 * them: rows 0.1 s apart (the seconds repeat ten times, then carry,
 * including a carry from the fraction: ...9999995 rounds up), jumps back
 * and forth, a sign change with the same whole part, and values that go
 * to snprintf; every row after the first may reuse the memo. */
static void check_f6_memo(struct qw_fmt_whole *m, double v)
{
	char a[QW_FMT_MAX], b[QW_FMT_MAX];
	size_t n = qw_fmt_f6_memo(a, v, m);

	snprintf(b, sizeof b, "%.6f", v);
	if (strcmp(a, b) != 0 || n != strlen(b))
		fail_msg("memo %%.6f of %a: '%s', printf '%s'", v, a, b);
}

static void test_fmt_f6_memo(void **state)
{
	static const double jumps[] = {
		1700000000.9999995, 1700000001.0, 1700000000.5, 5.5, -5.5,
		5.25, 1e300, 5.125, NAN, 5.0, -0.0, 0.0, 4.4e15, 4.4e15 + 1,
		12.0000005, 12.9999996, 13.0, 9999999999.9999995,
	};
	struct qw_fmt_whole m;
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	size_t i;

	(void)state;
	memset(&m, 0, sizeof m);
	for (i = 0; i < 100000; i++)
		check_f6_memo(&m, 1700000000.0 + 0.1 * (double)i);
	for (i = 0; i < sizeof jumps / sizeof jumps[0]; i++)
		check_f6_memo(&m, jumps[i]);
	gsl_rng_set(r, FMT_SEED);
	for (i = 0; i < FMT_CASES; i++) {
		double v = rand_value(r);

		if (!isnan(v))
			check_f6_memo(&m, v);
		check_f6_memo(&m, 1700000000.0 + 1e3 * gsl_rng_uniform(r));
	}
	gsl_rng_free(r);
}

/* The checker can fail: a naive rounding (adding one half, truncating)
 * gets printf's round-half-even wrong on an exact tie. */
static void test_fmt_broken(void **state)
{
	char b[QW_FMT_MAX], naive[QW_FMT_MAX];

	(void)state;
	snprintf(b, sizeof b, "%.0f", 2.5);
	snprintf(naive, sizeof naive, "%d", (int)(2.5 + 0.5));
	assert_string_not_equal(b, naive);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_fmt_edges),
		cmocka_unit_test(test_fmt_random),
		cmocka_unit_test(test_fmt_f6_memo),
		cmocka_unit_test(test_fmt_broken),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
