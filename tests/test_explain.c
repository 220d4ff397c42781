/* test_explain.c: attribution (issue 2, test 6).  Oracles: brute force
 * (q recomputed without each channel, by GSL on the explicit covariance)
 * and a constructed reading whose culprit is known by design. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>

#include "internal.h"
#include "quadwatch.h"
#include "qwtest.h"

#define TOL_EXACT 1e-9 /* issue 2, test 6: drop vs brute force */

/* A random packed factor L with a positive diagonal, and Sigma = L L'. */
static void random_model(gsl_rng *rng, size_t p, double *L, double *sig)
{
	size_t i, j;

	for (j = 0; j < p; j++)
		for (i = j; i < p; i++)
			L[qw_packed_col(p, j) + i - j] =
				i == j ? 1.5 + gsl_rng_uniform(rng)
				       : gsl_ran_gaussian(rng, 0.8);
	qwt_sigma_from_factor(L, p, sig);
}

/* drop_i = q - q without channel i, for every i, with and without a mask
 * of missing channels; z_i = r_i / sqrt(Sigma_ii). */
static void drop_vs_brute_force(void **st)
{
	const size_t sizes[] = {1, 2, 5, 17};
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	size_t t, i, j, n, p;

	(void)st;
	gsl_rng_set(rng, 2385);
	for (t = 0; t < sizeof sizes / sizeof sizes[0]; t++) {
		p = sizes[t];
		double *L = malloc(qw_packed_len(p) * sizeof(double));
		double *sig = malloc(p * p * sizeof(double));
		double *work = malloc(qw_explain_work_len(p) * sizeof(double));
		double r[17], q, qi;
		struct qw_contrib out[17];
		unsigned char mask[17];
		int keep[17];

		random_model(rng, p, L, sig);
		for (int rep = 0; rep < 4; rep++) {
			for (i = 0; i < p; i++) {
				r[i] = gsl_ran_gaussian(rng, 3.0);
				mask[i] = (unsigned char)(rep < 2 || p == 1 ||
							  i % 3 != 1);
				keep[i] = mask[i];
			}
			n = qw_explain(L, p, r, rep == 0 ? NULL : mask, work,
				       out);
			q = qwt_quad_form(sig, p, r, keep);
			for (j = 0; j < n; j++) {
				i = out[j].channel;
				assert_true(keep[i]);
				keep[i] = 0;
				qi = n > 1 ? qwt_quad_form(sig, p, r, keep) : 0.0;
				keep[i] = 1;
				assert_true(qwt_reldiff(out[j].drop, q - qi,
							q * 1e-12) <= TOL_EXACT);
				assert_true(qwt_reldiff(out[j].z,
							r[i] / sqrt(sig[i * p + i]),
							0) <= TOL_EXACT);
				if (j > 0)
					assert_true(out[j].drop <=
						    out[j - 1].drop);
			}
		}
		free(L), free(sig), free(work);
	}
	gsl_rng_free(rng);
}

/* Four channels driven by one load (flow, current, delta-T, speed) and a
 * reading where channel 2 holds its own usual value (|z| < 1.5) while the
 * others say the load is high: channel 2 broke the correlation and must
 * rank first, though another channel has the largest |z|. */
static void correlation_break_ranks_first(void **st)
{
	const size_t p = 4;
	const double gain[4] = {1.9, 0.75, 2.385, 1.2}; /* per unit load */
	const double noise[4] = {0.05, 0.02, 0.06, 0.03};
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double x[4], load, zmax = 0;
	size_t i, k;

	(void)st;
	gsl_rng_set(rng, 77);
	qw_params_default(&par, p);
	par.half_life = 3000;
	par.rate = 10;
	d = qw_detector_alloc(&par);
	for (k = 0; k < 20000; k++) {
		load = gsl_ran_gaussian(rng, 1.0);
		for (i = 0; i < p; i++)
			x[i] = 10 + gain[i] * load +
			       gsl_ran_gaussian(rng, noise[i]);
		qw_detector_add(d, (double)k / 10, x, &res);
	}
	load = 1.8; /* high but usual: 1.8 sd */
	for (i = 0; i < p; i++)
		x[i] = 10 + gain[i] * load;
	x[2] = 10 + gain[2] * 0.2; /* channel 2 reads as if the load were low */
	assert_int_equal(qw_detector_add(d, 2000.5, x, &res), 0);
	assert_true(res.over);
	assert_int_equal(res.ncontrib, p);
	assert_int_equal(res.contrib[0].channel, 2);
	for (i = 0; i < p; i++)
		if (fabs(res.contrib[i].z) > zmax)
			zmax = fabs(res.contrib[i].z);
	print_message("# correlation break: q %.4g, limit %.4g; channel 2 "
		      "drop %.4g, z %.3f; largest |z| %.3f\n", res.q, res.limit,
		      res.contrib[0].drop, res.contrib[0].z, zmax);
	assert_true(fabs(res.contrib[0].z) < 1.5);
	assert_true(zmax > fabs(res.contrib[0].z));
	qw_detector_free(d);
	gsl_rng_free(rng);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(drop_vs_brute_force),
		cmocka_unit_test(correlation_break_ranks_first),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
