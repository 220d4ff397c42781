/* test_mewma.c: MEWMA mode (Lowry, Woodall, Champ & Rigdon 1992).
 *
 * Oracles: published in-control average run lengths (the limit h = 8.66 for
 * ARL0 = 200 at p = 2, rho = 0.1 is the value of Lowry et al.'s table and
 * of Prabhu & Runger 1997's, quoted from memory as "about 8.6" by the
 * issue and as 8.66 here); a brute-force simulation of the steady-state
 * upcrossing rate that mewma.c computes by quadrature; the closed form at
 * rho = 1; the raise rate the detector delivers in MEWMA mode against the
 * configured one; and the ARL of a sustained 1-sigma shift against the
 * plain chart with the same in-control rate (printed). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>

#include "internal.h"
#include "quadwatch.h"
#include "qwtest.h"

#define RATE_HZ 10.0

/* Run length from z_0 = 0 of the chart at h, readings N(delta e_1, I). */
static double run_length(gsl_rng *rng, size_t p, double rho, double h,
			 double delta, double *z, double *y)
{
	size_t i;
	double n = 0;

	memset(z, 0, p * sizeof *z);
	for (;;) {
		n += 1;
		for (i = 0; i < p; i++)
			y[i] = gsl_ran_gaussian_ziggurat(rng, 1.0) +
			       (i == 0 ? delta : 0.0);
		if (qw_mewma_step(z, p, rho, y, 1.0) > h)
			return n;
	}
}

/* Mean and standard error of the run length over runs. */
static void arl(size_t p, double rho, double h, double delta, int runs,
		unsigned long seed, double *mean, double *se)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double z[8], y[8], s = 0, s2 = 0, r;
	int i;

	gsl_rng_set(rng, seed);
	for (i = 0; i < runs; i++) {
		r = run_length(rng, p, rho, h, delta, z, y);
		s += r;
		s2 += r * r;
	}
	*mean = s / runs;
	*se = sqrt((s2 / runs - *mean * *mean) / runs);
	gsl_rng_free(rng);
}

/* Lowry et al. (1992) / Prabhu & Runger (1997), from memory: p = 2,
 * rho = 0.1, h = 8.66 gives ARL0 = 200.  Within 4 standard errors of the
 * simulation plus 2.5% for the table's rounding of h to 3 digits (one unit
 * of the last digit of h moves ARL0 by about 1%). */
static void arl0_published(void **st)
{
	double m, se;

	(void)st;
	arl(2, 0.1, 8.66, 0.0, 40000, 11, &m, &se);
	print_message("# MEWMA p=2 rho=0.1 h=8.66: ARL0 %.1f +- %.1f (s.e.) "
		      "vs 200 published\n", m, se);
	assert_true(fabs(m - 200.0) <= 4 * se + 0.025 * 200.0);
	/* A deliberately wrong scaling (T2 without (2-rho)/rho) fails. */
	assert_false(fabs(m * 0.5 - 200.0) <= 4 * se + 0.025 * 200.0);
}

/* A sustained shift of 1 standard deviation (Mahalanobis 1): MEWMA
 * detects it several times sooner than the plain chart with the same
 * ARL0 of 200 (chi-square(2) point 10.60 for alpha = 1/200). */
static void shift_detected_sooner(void **st)
{
	double m1, se1, mp, sep, hp = gsl_cdf_chisq_Qinv(1.0 / 200.0, 2.0);

	(void)st;
	arl(2, 0.1, 8.66, 1.0, 20000, 12, &m1, &se1);
	arl(2, 1.0, hp, 1.0, 20000, 13, &mp, &sep);
	print_message("# 1-sigma shift, p=2, ARL0 200: MEWMA (rho 0.1) ARL1 "
		      "%.2f +- %.2f, plain chart ARL1 %.2f +- %.2f (ratio "
		      "%.1f)\n", m1, se1, mp, sep, mp / m1);
	assert_true(m1 < mp / 3.0);
}

/* Brute force of the steady-state upcrossing rate: many chains started
 * from the stationary law N(0, rho/(2-rho) I), each step counted. */
static void uprate_by_simulation(void **st)
{
	const size_t p = 3, chains = 400, steps = 5000;
	const double rho = 0.2, h = 11.0;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double z[3], y[3], t, prev, sd = sqrt(rho / (2 - rho));
	double up = 0, n = 0, u, se;
	size_t c, k, i;

	(void)st;
	gsl_rng_set(rng, 14);
	for (c = 0; c < chains; c++) {
		for (i = 0; i < p; i++)
			z[i] = sd * gsl_ran_gaussian_ziggurat(rng, 1.0);
		prev = (z[0] * z[0] + z[1] * z[1] + z[2] * z[2]) / (sd * sd);
		for (k = 0; k < steps; k++) {
			for (i = 0; i < p; i++)
				y[i] = gsl_ran_gaussian_ziggurat(rng, 1.0);
			t = qw_mewma_step(z, p, rho, y, 1.0);
			up += prev <= h && t > h;
			n += 1;
			prev = t;
		}
	}
	u = qw_mewma_uprate(h, (unsigned)p, rho);
	se = sqrt(up) / n;
	print_message("# upcrossing rate p=3 rho=0.2 h=11: quadrature %.5g, "
		      "simulation %.5g +- %.2g\n", u, up / n, se);
	assert_true(fabs(u - up / n) <= 4 * se);
	/* rho = 1 is the plain chart: (1 - alpha) alpha. */
	u = gsl_cdf_chisq_Q(11.0, 3.0);
	assert_true(qwt_reldiff(qw_mewma_uprate(11.0, 3, 1.0), (1 - u) * u,
				0) < 1e-12);
	assert_true(qwt_reldiff(qw_mewma_limit((1 - u) * u, 3, 1.0), 11.0,
				0) < 1e-8);
	gsl_rng_free(rng);
}

/* The detector in MEWMA mode on iid Gaussian readings with estimated
 * parameters: raised alarms per reading against the configured rate.
 * Hysteresis (clear) makes a raise rarer than an upcrossing; printed for
 * clear = 1 and asserted within 15% there, printed for the default. */
static void delivered_rate(void **st)
{
	const size_t p = 4, n = 3000000, warm = 20000;
	const double target = 5e-4;
	struct qw_params par;
	qw_detector *d[2];
	struct qw_result res;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double A[16], mean[4] = {1.5, -2.385, 40, 7}, z[4], x[4], got[2];
	uint64_t raised[2] = {0, 0}, after = 0;
	size_t k, i;

	(void)st;
	gsl_rng_set(rng, 15);
	qwt_mixing(rng, p, A);
	qw_params_default(&par, p);
	par.rate = RATE_HZ;
	par.half_life = 5000;
	par.mode = QW_MODE_MEWMA;
	par.smoothing = 0.1;
	par.warmup = warm;
	par.alarms_per_day = target * RATE_HZ * QW_SECONDS_PER_DAY;
	for (i = 0; i < 2; i++) {
		par.clear_n = i == 0 ? 1 : 5;
		d[i] = qw_detector_alloc(&par);
		assert_non_null(d[i]);
	}
	for (k = 0; k < n; k++) {
		qwt_draw(rng, p, A, mean, z, x);
		for (i = 0; i < 2; i++) {
			assert_int_equal(qw_detector_add(d[i],
							 (double)k / RATE_HZ,
							 x, &res), 0);
			raised[i] += k >= warm && res.event == QW_EVENT_RAISE;
		}
		after += k >= warm;
	}
	for (i = 0; i < 2; i++)
		got[i] = (double)raised[i] / (double)after;
	print_message("# MEWMA mode p=4 rho=0.1 h=%.3f: %.4g raises per "
		      "reading with clear 1 (ratio %.3f, 95%% interval +-%.3f),"
		      " %.4g with clear 5 (ratio %.3f); configured %.4g\n",
		      qw_detector_limit(d[0]), got[0], got[0] / target,
		      1.96 * sqrt(target / (double)after) / target, got[1],
		      got[1] / target, target);
	assert_true(fabs(got[0] / target - 1) <= 0.15);
	for (i = 0; i < 2; i++)
		qw_detector_free(d[i]);
	gsl_rng_free(rng);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(uprate_by_simulation),
		cmocka_unit_test(arl0_published),
		cmocka_unit_test(shift_detected_sooner),
		cmocka_unit_test(delivered_rate),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
