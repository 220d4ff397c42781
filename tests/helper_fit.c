/* helper_fit.c: prints what `quadwatch fit` computes, for the Python
 * reference checks (tests/ref_fit.py, run by tests/t_fit_scipy.sh).
 *   helper_fit gpd XI SIGMA N SEED   a GPD sample (inverse CDF, GSL's
 *                                     Mersenne twister) and its fit
 *   helper_fit hotelling             Phase I (beta) and Phase II (F)
 *                                     limits on a grid of alpha, p, n
 *   helper_fit phase2 P N SEED       a fixed model fitted from N Gaussian
 *                                     readings: its limit, alpha and n
 * It computes; the Python side holds the expectations. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>

#include "quadwatch.h"
#include "qwtest.h"

static int gpd(double xi, double sigma, size_t n, unsigned long seed)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *y = malloc(n * sizeof *y);
	struct qw_gpd g;
	size_t i;
	int rc;

	if (rng == NULL || y == NULL)
		return 1;
	gsl_rng_set(rng, seed);
	for (i = 0; i < n; i++) {
		double u = gsl_rng_uniform_pos(rng);

		/* inverse of 1 - (1 + xi y/sigma)^(-1/xi) */
		y[i] = xi == 0 ? -sigma * log(u) : sigma / xi * expm1(-xi * log(u));
	}
	rc = qw_tail_gpd_fit(y, n, &g);
	printf("fit %d %.17g %.17g %.17g\n", rc, g.xi, g.sigma, g.loglik);
	for (i = 0; i < n; i++)
		printf("y %.17g\n", y[i]);
	free(y);
	gsl_rng_free(rng);
	return rc != 0;
}

static int hotelling(void)
{
	const double alphas[] = {0.05, 0.0027, 2.385e-4, 1e-6};
	const unsigned ps[] = {1, 2, 4, 10};
	const double ns[] = {20, 50, 213, 2000};
	size_t a, i, j;

	for (a = 0; a < 4; a++)
		for (i = 0; i < 4; i++)
			for (j = 0; j < 4; j++)
				printf("hotelling %.17g %u %.17g %.17g %.17g\n",
				       alphas[a], ps[i], ns[j],
				       qw_tail_phase1_limit(alphas[a], ps[i],
							    ns[j]),
				       qw_tail_phase2_limit(alphas[a], ps[i],
							    ns[j]));
	return 0;
}

/* A fixed model fitted, untrimmed, from n Gaussian readings of p
 * channels (floors far below the spread): its limit. */
static int phase2(size_t p, size_t n, unsigned long seed)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *t = malloc(n * sizeof *t), *x = malloc(n * p * sizeof *x);
	double *A = malloc(p * p * sizeof *A), *z = malloc(p * sizeof *z);
	double *floor = malloc(p * sizeof *floor);
	struct qw_params par;
	struct qw_fit_opts o;
	struct qw_fit_result r;
	qw_detector *m = NULL;
	size_t i;
	int rc = 1;

	if (!rng || !t || !x || !A || !z || !floor)
		goto out;
	gsl_rng_set(rng, seed);
	qwt_mixing(rng, p, A);
	qw_params_default(&par, p);
	par.rate = 1.0;
	par.alarms_per_day = 100.0;
	for (i = 0; i < p; i++)
		floor[i] = 1e-6;
	par.floor = floor;
	for (i = 0; i < n; i++) {
		t[i] = (double)i;
		qwt_draw(rng, p, A, NULL, z, x + i * p);
	}
	qw_fit_opts_default(&o);
	o.trim_alpha = 0;
	if (qw_fit_run(&par, t, x, n, &o, &r, &m) != 0)
		goto out;
	printf("phase2 %zu %llu %.17g %.17g\n", p,
	       (unsigned long long)r.used, r.alpha, qw_detector_limit(m));
	rc = 0;
out:
	qw_detector_free(m);
	free(t);
	free(x);
	free(A);
	free(z);
	free(floor);
	gsl_rng_free(rng);
	return rc;
}

int main(int argc, char **argv)
{
	gsl_set_error_handler_off();
	if (argc == 6 && strcmp(argv[1], "gpd") == 0)
		return gpd(strtod(argv[2], NULL), strtod(argv[3], NULL),
			   strtoul(argv[4], NULL, 10),
			   strtoul(argv[5], NULL, 10));
	if (argc == 2 && strcmp(argv[1], "hotelling") == 0)
		return hotelling();
	if (argc == 5 && strcmp(argv[1], "phase2") == 0)
		return phase2(strtoul(argv[2], NULL, 10),
			      strtoul(argv[3], NULL, 10),
			      strtoul(argv[4], NULL, 10));
	fprintf(stderr, "usage: helper_fit gpd XI SIGMA N SEED | hotelling | "
		"phase2 P N SEED\n");
	return 2;
}
