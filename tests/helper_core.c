/* helper_core.c: prints core results for the Python reference checks
 * (tests/ref_core.py, run by tests/t_ref_scipy.sh and t_ref_numpy.sh).
 *   helper_core limits            grid of alpha, chi-square, corrected
 *                                 limits and p-values
 *   helper_core scores P N H SEED [time] [hold]
 *                                 a generated stream and its scores; with
 *                                 "time", H is in seconds and the readings
 *                                 come at irregular times; with "hold",
 *                                 partial readings are not learned
 *   helper_core dyn P N H SEED none|ar1|var1
 *                                 a VAR(1) stream with missing channels and
 *                                 gaps in time, scored with that whitening
 *                                 (tests/ref_dynamics.py)
 * It computes; the Python side holds the expectations. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_errno.h>

#include "quadwatch.h"
#include "qwtest.h"

static int limits(void)
{
	const double alphas[] = {0.1, 0.01, 1e-3, 2.385e-5, 1e-7};
	const unsigned dofs[] = {1, 2, 3, 7, 16, 64, 200};
	const double nus[] = {40, 577.3, 5770, 1e5};
	const double apd[] = {0.5, 1, 24, 2.385};
	const double rates[] = {1, 10, 250};
	const unsigned km[][2] = {{1, 1}, {2, 3}, {3, 5}, {5, 10}};
	size_t a, d, n, i, j;
	double al;

	for (a = 0; a < 5; a++)
		for (d = 0; d < 7; d++) {
			printf("chisq %.17g %u %.17g\n", alphas[a], dofs[d],
			       qw_limit_chisq(alphas[a], dofs[d]));
			for (n = 0; n < 4; n++) {
				double l = qw_limit_corrected(alphas[a], dofs[d],
							      nus[n], 1.25);

				if (isfinite(l))
					printf("corrected %.17g %u %.17g 1.25 "
					       "%.17g\n", alphas[a], dofs[d],
					       nus[n], l);
			}
		}
	for (a = 0; a < 4; a++)
		for (i = 0; i < 3; i++)
			for (j = 0; j < 4; j++) {
				if (qw_limit_alpha(apd[a], rates[i], km[j][0],
						   km[j][1], &al) != 0)
					return 1;
				printf("alpha %.17g %.17g %u %u %.17g\n", apd[a],
				       rates[i], km[j][0], km[j][1], al);
			}
	/* p-values over the bulk and both tails, odd and even dof (the two
	 * paths of pvalue.c), with and without a memo, at each nu */
	for (d = 0; d < 7; d++)
		for (n = 0; n < 4; n++) {
			struct qw_pvalue_memo memo = QW_PVALUE_MEMO_INIT;
			const double mult[] = {1e-3, 0.3, 1, 1.7, 4, 12};

			for (i = 0; i < 6; i++) {
				double qv = mult[i] * dofs[d] + (i == 5 ? 60 : 0);
				double pv = qw_limit_pvalue(qv, dofs[d], nus[n],
							    1.1);

				if (dofs[d] >= nus[n])
					continue;
				if (qw_limit_pvalue_memo(&memo, qv, dofs[d],
							 nus[n], 1.1) != pv)
					return 1; /* the memo changed a figure */
				printf("pvalue %.17g %u %.17g 1.1 %.17g\n", qv,
				       dofs[d], nus[n], pv);
			}
		}
	return 0;
}

/* Mean and long-gap time steps of the irregular stream, seconds. */
#define SCORES_DT_MEAN 0.1
#define SCORES_GAP 30.0
#define SCORES_GAP_PROB 0.002

/* A correlated stream with some missing channels and outliers; learn =
 * all, so the reference needs no limit to know what was learned (partial
 * readings once warm, unless hold).  With time_based, steps are
 * exponential (mean SCORES_DT_MEAN) with rare long gaps and repeated
 * times, and the half-life is in seconds.  The header line gives p, n, h,
 * time_based, the floors, the warm-up and 1 if partial readings learn. */
static int scores(size_t p, size_t n, double h, unsigned long seed,
		  int time_based, int hold)
{
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *A = malloc(p * p * 8), *z = malloc(p * 8), *x = malloc(p * 8);
	double *mean = malloc(p * 8), *floor = malloc(p * 8), t = 0;
	size_t i, k;

	gsl_rng_set(rng, seed);
	qwt_mixing(rng, p, A);
	for (i = 0; i < p; i++) {
		mean[i] = 100.0 * gsl_rng_uniform(rng);
		floor[i] = 0.02 + 0.01 * (double)i;
	}
	qw_params_default(&par, p);
	par.half_life = h;
	par.floor = floor;
	par.learn = QW_LEARN_ALL;
	par.time_based = time_based;
	par.rate = 1.0 / SCORES_DT_MEAN;
	par.partial = hold ? QW_PARTIAL_HOLD : QW_PARTIAL_LEARN;
	d = qw_detector_alloc(&par);
	if (d == NULL)
		return 1;
	printf("# %zu %zu %.17g %d", p, n, h, time_based);
	for (i = 0; i < p; i++)
		printf(" %.17g", floor[i]);
	printf(" %llu %d\n", (unsigned long long)par.warmup, !hold);
	for (k = 0; k < n; k++) {
		qwt_draw(rng, p, A, mean, z, x);
		if (k > 10 && gsl_rng_uniform(rng) < 0.02)
			x[gsl_rng_uniform_int(rng, p)] = NAN;
		if (gsl_rng_uniform(rng) < 0.005)
			x[0] += 25.0; /* outliers: large q, learned anyway */
		if (time_based) {
			double u = gsl_rng_uniform(rng);

			t += u < SCORES_GAP_PROB ? SCORES_GAP
			     : u < 2 * SCORES_GAP_PROB ? 0.0 /* same time */
			     : gsl_ran_exponential(rng, SCORES_DT_MEAN);
		} else {
			t = (double)k;
		}
		qw_detector_add(d, t, x, &res);
		printf("%.17g,", t);
		for (i = 0; i < p; i++)
			printf("%.17g,", x[i]);
		printf("%.17g,%u,%d\n", res.q, res.dof, res.scored);
	}
	qw_detector_free(d);
	gsl_rng_free(rng);
	free(A), free(z), free(x), free(mean), free(floor);
	return 0;
}

/* Readings of the whitening stream: 10 per second, with rare gaps longer
 * than the lag pair's max_gap (1.5 nominal intervals). */
#define DYN_RATE 10.0
#define DYN_GAP_S 2.0
#define DYN_GAP_PROB 0.003
#define DYN_MISSING_PROB 0.02

static int dyn(size_t p, size_t n, double h, unsigned long seed,
	       const char *kind)
{
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *A = calloc(p * p, 8), *x = malloc(p * 8), *mean = malloc(p * 8);
	double *floor = malloc(p * 8), *st = calloc(p, 8), *z = malloc(p * 8);
	double *nx = malloc(p * 8), t = 0;
	struct qwt_var1 v = {p, 0.9, 0.05, A, mean, st, z, nx};
	size_t i, k;

	gsl_rng_set(rng, seed);
	qwt_mixing(rng, p, A);
	for (i = 0; i < p; i++) {
		mean[i] = 50.0 * gsl_rng_uniform(rng) - 10.0;
		floor[i] = 0.01 + 0.005 * (double)i;
	}
	qw_params_default(&par, p);
	par.half_life = h;
	par.floor = floor;
	par.learn = QW_LEARN_ALL;
	par.rate = DYN_RATE;
	par.dynamics = strcmp(kind, "var1") == 0  ? QW_DYN_VAR1
		       : strcmp(kind, "ar1") == 0 ? QW_DYN_AR1
						  : QW_DYN_NONE;
	d = qw_detector_alloc(&par);
	if (d == NULL)
		return 1;
	printf("# %zu %zu %.17g %s %.17g", p, n, h, kind, 1.5 / DYN_RATE);
	for (i = 0; i < p; i++)
		printf(" %.17g", floor[i]);
	printf(" %llu\n", (unsigned long long)par.warmup);
	for (k = 0; k < n; k++) {
		qwt_var1_step(rng, &v, x);
		if (k > 10 && gsl_rng_uniform(rng) < DYN_MISSING_PROB)
			x[gsl_rng_uniform_int(rng, p)] = NAN;
		t += gsl_rng_uniform(rng) < DYN_GAP_PROB ? DYN_GAP_S
							  : 1.0 / DYN_RATE;
		qw_detector_add(d, t, x, &res);
		printf("%.17g,", t);
		for (i = 0; i < p; i++)
			printf("%.17g,", x[i]);
		printf("%.17g,%u,%d,%d\n", res.q, res.dof, res.scored,
		       res.learned);
	}
	qw_detector_free(d);
	gsl_rng_free(rng);
	free(A), free(x), free(mean), free(floor), free(st), free(z), free(nx);
	return 0;
}

int main(int argc, char **argv)
{
	gsl_set_error_handler_off();
	if (argc == 2 && strcmp(argv[1], "limits") == 0)
		return limits();
	if (argc >= 6 && argc <= 8 && strcmp(argv[1], "scores") == 0) {
		int i, timed = 0, hold = 0;

		for (i = 6; i < argc; i++) {
			if (strcmp(argv[i], "time") == 0)
				timed = 1;
			else if (strcmp(argv[i], "hold") == 0)
				hold = 1;
			else
				goto usage;
		}
		return scores(strtoul(argv[2], NULL, 10),
			      strtoul(argv[3], NULL, 10), strtod(argv[4], NULL),
			      strtoul(argv[5], NULL, 10), timed, hold);
	}
	if (argc == 7 && strcmp(argv[1], "dyn") == 0)
		return dyn(strtoul(argv[2], NULL, 10),
			   strtoul(argv[3], NULL, 10), strtod(argv[4], NULL),
			   strtoul(argv[5], NULL, 10), argv[6]);
usage:
	fprintf(stderr, "usage: helper_core limits | scores P N H SEED "
		"[time] [hold] | dyn P N H SEED none|ar1|var1\n");
	return 2;
}
