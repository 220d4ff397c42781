/* test_tail.c: tail.c, the score-tail maths of `quadwatch fit`.
 * The comparisons with scipy (genpareto.fit, beta and F quantiles) are
 * tests/t_fit_scipy.sh; here the properties that need no outside library:
 * the consistency factor against a direct simulation of trimmed Gaussian
 * readings, the GPD fit recovering known parameters, the tail quantile
 * against the exact GPD quantile, the sort (and sort.c's selection)
 * against the C library's qsort on inputs of every shape, the chi-square tail sums
 * against GSL, and the argument errors. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>

#include "internal.h"
#include "quadwatch.h"
#include "qwtest.h"
#include "sort.h"

#define SIM_N 400000     /* Gaussian draws per consistency check */
/* The kept share of the variance is estimated from ~SIM_N readings; its
 * relative standard error is about sqrt(2/SIM_N) ~ 0.2%: 1% is 4-5 of
 * them. */
#define TOL_SIM 0.01
#define GPD_N 20000      /* sample of the parameter-recovery check */
/* Standard errors at n = 20000 (Smith 1985 asymptotics, from memory):
 * xi about (1 + xi)/sqrt(n) ~ 0.009, sigma ~ sqrt(2(1+xi)/n) ~ 1.1%:
 * four of them. */
#define TOL_XI 0.04
#define TOL_SIGMA 0.045

/* Gaussian readings in p dims with identity covariance, kept when
 * |x|^2 <= chi2_p^-1(keep): their mean variance per channel, times the
 * factor, must be 1. */
static double trimmed_variance(gsl_rng *rng, unsigned p, double keep)
{
	double c = gsl_cdf_chisq_Pinv(keep, p), s = 0.0, z[16], q;
	size_t i, j, kept = 0;

	for (i = 0; i < SIM_N; i++) {
		q = 0.0;
		for (j = 0; j < p; j++) {
			z[j] = gsl_ran_gaussian(rng, 1.0);
			q += z[j] * z[j];
		}
		if (q > c)
			continue;
		kept++;
		s += q / p;
	}
	return s / (double)kept;
}

static void consistency_vs_simulation(void **st)
{
	const unsigned ps[] = {1, 3, 8};
	const double keeps[] = {0.975, 0.75, 0.5};
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	size_t i, j;

	(void)st;
	gsl_rng_set(rng, 2385);
	for (i = 0; i < 3; i++)
		for (j = 0; j < 3; j++) {
			double v = trimmed_variance(rng, ps[i], keeps[j]);
			double c = qw_tail_consistency(keeps[j], ps[i]);

			printf("# consistency p=%u keep=%.3f: factor %.5f, "
			       "simulated 1/variance %.5f\n", ps[i], keeps[j],
			       c, 1.0 / v);
			assert_true(qwt_reldiff(c * v, 1.0, 0) < TOL_SIM);
			/* the broken case: without the factor it fails */
			assert_false(qwt_reldiff(v, 1.0, 0) < TOL_SIM);
		}
	assert_true(qw_tail_consistency(1.0, 4) == 1.0);
	assert_true(isnan(qw_tail_consistency(0.0, 4)));
	assert_true(isnan(qw_tail_consistency(0.9, 0)));
	gsl_rng_free(rng);
}

static void gpd_sample(gsl_rng *rng, double xi, double sigma, double *y,
		       size_t n)
{
	size_t i;

	for (i = 0; i < n; i++) {
		double u = gsl_rng_uniform_pos(rng);

		y[i] = xi == 0 ? -sigma * log(u)
			       : sigma / xi * expm1(-xi * log(u));
	}
}

static void gpd_recovers_parameters(void **st)
{
	const double xis[] = {0.3, 0.0, -0.2};
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *y = malloc(GPD_N * sizeof *y);
	struct qw_gpd g;
	size_t i;

	(void)st;
	assert_non_null(y);
	gsl_rng_set(rng, 7);
	for (i = 0; i < 3; i++) {
		gpd_sample(rng, xis[i], 2.385, y, GPD_N);
		assert_int_equal(qw_tail_gpd_fit(y, GPD_N, &g), 0);
		printf("# GPD xi=%.2f sigma=2.385: fitted xi %.4f sigma %.4f\n",
		       xis[i], g.xi, g.sigma);
		assert_true(fabs(g.xi - xis[i]) < TOL_XI);
		assert_true(qwt_reldiff(g.sigma, 2.385, 0) < TOL_SIGMA);
		/* the maximum: nearby parameters are no better */
		assert_true(g.loglik >= qw_tail_gpd_loglik(y, GPD_N,
				g.xi + 0.01, g.sigma));
		assert_true(g.loglik >= qw_tail_gpd_loglik(y, GPD_N,
				g.xi - 0.01, g.sigma * 1.01));
	}
	free(y);
	gsl_rng_free(rng);
}

/* Scores whose whole law is known: s = 5 + GPD(0.25, 1.5) above the 90%
 * point, uniform on [0, 5] below.  The fitted quantile at alpha 1e-4
 * (beyond every sample but a few) against the exact one. */
static void tail_quantile_vs_exact(void **st)
{
	const size_t n = 200000;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *s = malloc(n * sizeof *s), want, got;
	struct qw_tail t;
	size_t i;

	(void)st;
	assert_non_null(s);
	gsl_rng_set(rng, 11);
	for (i = 0; i < n; i++) {
		if (gsl_rng_uniform(rng) < 0.9) {
			s[i] = 5.0 * gsl_rng_uniform(rng);
		} else {
			gpd_sample(rng, 0.25, 1.5, s + i, 1);
			s[i] += 5.0;
		}
	}
	assert_int_equal(qw_tail_fit(s, n, 0.05, &t), 0);
	for (i = 1; i < n; i++)
		assert_true(s[i - 1] <= s[i]);
	/* P(S > 5 + y) = 0.1 (1 + 0.25 y/1.5)^-4 = 1e-4 */
	want = 5.0 + 1.5 / 0.25 * (pow(1e-4 / 0.1, -0.25) - 1.0);
	got = qw_tail_quantile(&t, 1e-4);
	printf("# tail quantile at 1e-4: %.4f, exact %.4f (xi %.3f)\n", got,
	       want, t.gpd.xi);
	/* GPD extrapolation 10 exceedances deep: 5% */
	assert_true(qwt_reldiff(got, want, 0) < 0.05);
	/* inside the fitted share, the empirical quantile */
	assert_true(qwt_reldiff(qw_tail_quantile(&t, 0.2), 5.0 * 0.8 / 0.9,
				0) < 0.01);
	/* the survival function inverts the quantile */
	assert_true(qwt_reldiff(qw_tail_sf(&t, got), 1e-4, 0) < 1e-9);
	free(s);
	gsl_rng_free(rng);
}

static int cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return (x > y) - (x < y);
}

/* Input shapes a partition sort can stumble on: random, sorted, reversed,
 * all equal, few distinct values, organ pipe, sorted with a few swaps. */
static void sort_input(gsl_rng *rng, int shape, double *a, size_t n)
{
	size_t i;

	for (i = 0; i < n; i++) {
		switch (shape) {
		case 0: a[i] = gsl_rng_uniform(rng); break;
		case 1: a[i] = (double)i; break;
		case 2: a[i] = (double)(n - i); break;
		case 3: a[i] = 7.0; break;
		case 4: a[i] = (double)gsl_rng_uniform_int(rng, 3); break;
		case 5: a[i] = (double)(i < n / 2 ? i : n - i); break;
		default: a[i] = (double)i; break;
		}
	}
	if (shape == 6)
		for (i = 0; i + 1 < n && i < 5; i++) {
			size_t j = gsl_rng_uniform_int(rng, n);
			double t = a[i * 7 % n];

			a[i * 7 % n] = a[j];
			a[j] = t;
		}
}

/* qw_tail_sort gives what the C library's qsort does, element for
 * element, on every shape and many sizes (around the insertion-sort
 * cut-off too); so does the selection a fit's C-steps take their cut from
 * (qw_select_double, sort.c), at four ranks of each. */
static void sort_and_select(void **st)
{
	static const size_t sizes[] = {1, 2, 3, 15, 16, 17, 18, 33, 100, 1000,
				       4097, 200000};
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	size_t nmax = 200000, si, i, k;
	double *a = malloc(nmax * sizeof *a), *ref = malloc(nmax * sizeof *a);
	double *b = malloc(nmax * sizeof *a);
	int shape;

	(void)st;
	assert_non_null(a);
	assert_non_null(ref);
	assert_non_null(b);
	gsl_rng_set(rng, 77);
	for (si = 0; si < sizeof sizes / sizeof *sizes; si++) {
		size_t n = sizes[si];

		for (shape = 0; shape < 7; shape++) {
			sort_input(rng, shape, a, n);
			memcpy(ref, a, n * sizeof *a);
			memcpy(b, a, n * sizeof *a);
			qsort(ref, n, sizeof *ref, cmp_double);
			qw_tail_sort(a, n);
			assert_memory_equal(a, ref, n * sizeof *a);
			for (i = 0; i < 4; i++) {
				k = i == 0 ? 0 : i == 1 ? n - 1 : i == 2
				    ? n / 2 : gsl_rng_uniform_int(rng, n);
				memcpy(a, b, n * sizeof *a);
				assert_true(qw_select_double(a, n, k) == ref[k]);
			}
		}
	}
	free(a);
	free(b);
	free(ref);
	gsl_rng_free(rng);
}

/* qw_chisq_q (the finite sums behind a fit's trimming p-values) against
 * GSL's gsl_cdf_chisq_Q, which the fit used before: every integer dof up
 * to QW_CHISQ_KMAX, from the bulk to tails of 1e-300; beyond its range it
 * is GSL's own figure. */
#define TOL_CHISQ 5e-13

static void chisq_q_vs_gsl(void **st)
{
	double x, a, b, worst = 0.0, wx = 0.0;
	unsigned k, wk = 0;

	(void)st;
	for (k = 1; k <= QW_CHISQ_KMAX; k++) {
		assert_true(qw_chisq_q(0.0, k) == 1.0);
		for (x = 0.005; x <= 2.0 * QW_CHISQ_HMAX;
		     x += x < 60 ? 0.01 : 0.7) {
			a = qw_chisq_q(x, k);
			b = gsl_cdf_chisq_Q(x, (double)k);
			if (b < 1e-300)
				continue;
			if (fabs(a - b) / b > worst) {
				worst = fabs(a - b) / b;
				wx = x;
				wk = k;
			}
		}
	}
	printf("# chi-square tail, dof 1..%u: worst relative gap to GSL %.3g "
	       "(x %.4g, dof %u)\n", QW_CHISQ_KMAX, worst, wx, wk);
	assert_true(worst < TOL_CHISQ);
	/* outside the sums' range: GSL's figure, bit for bit */
	assert_true(qw_chisq_q(1500.0, 3) == gsl_cdf_chisq_Q(1500.0, 3.0));
	assert_true(qw_chisq_q(80.0, QW_CHISQ_KMAX + 1) ==
		    gsl_cdf_chisq_Q(80.0, (double)(QW_CHISQ_KMAX + 1)));
}

static void tail_argument_errors(void **st)
{
	double s[100], y[100];
	struct qw_tail t;
	struct qw_gpd g;
	size_t i;

	(void)st;
	for (i = 0; i < 100; i++)
		s[i] = y[i] = (double)i * 0.5;
	assert_int_equal(qw_tail_gpd_fit(y, QW_TAIL_MIN_EXCESS - 1, &g),
			 QW_EINVAL);
	y[3] = -1.0;
	assert_int_equal(qw_tail_gpd_fit(y, 100, &g), QW_EINVAL);
	y[3] = NAN;
	assert_int_equal(qw_tail_gpd_fit(y, 100, &g), QW_EINVAL);
	for (i = 0; i < 100; i++)
		y[i] = 0.0;
	assert_int_equal(qw_tail_gpd_fit(y, 100, &g), QW_EINVAL);
	assert_int_equal(qw_tail_fit(s, 100, 0.05, &t), QW_EINVAL);
	assert_true(isnan(qw_tail_quantile(&t, 0.01)));
	assert_int_equal(qw_tail_fit(s, 100, 1.5, &t), QW_EINVAL);
	assert_true(isnan(qw_tail_phase1_limit(0.01, 3, 4)));
	assert_true(isnan(qw_tail_phase2_limit(0.01, 3, 3)));
	assert_true(isnan(qw_tail_phase2_limit(0.0, 3, 30)));
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(consistency_vs_simulation),
		cmocka_unit_test(gpd_recovers_parameters),
		cmocka_unit_test(tail_quantile_vs_exact),
		cmocka_unit_test(sort_and_select),
		cmocka_unit_test(chisq_q_vs_gsl),
		cmocka_unit_test(tail_argument_errors),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
