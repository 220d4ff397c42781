/* qwtest.h: shared helpers of the cmocka tests: the one relative-tolerance
 * comparison, seeded Gaussian data with a known covariance. */
#ifndef QW_QWTEST_H
#define QW_QWTEST_H

#include <math.h>
#include <stddef.h>

#include <gsl/gsl_rng.h>
#include <gsl/gsl_randist.h>

/* Relative difference |a-b| / max(|a|, |b|, floor); NaN == NaN and equal
 * infinities count as equal (0); a NaN against a number is +Inf. */
static inline double qwt_reldiff(double a, double b, double floor)
{
	double m;

	if (isnan(a) && isnan(b))
		return 0.0;
	if (isnan(a) || isnan(b))
		return INFINITY;
	if (isinf(a) || isinf(b))
		return a == b ? 0.0 : INFINITY;
	m = fmax(fmax(fabs(a), fabs(b)), floor);
	return m > 0 ? fabs(a - b) / m : 0.0;
}

/* A random mixing matrix A (p x p, row-major) with entries N(0,1) plus
 * 2.385 on the diagonal, so Sigma = A A' is well conditioned but dense. */
static inline void qwt_mixing(gsl_rng *rng, size_t p, double *A)
{
	size_t i, j;

	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++)
			A[i * p + j] = gsl_ran_gaussian(rng, 1.0) +
				       (i == j ? 2.385 : 0.0);
}

/* x = mean + A z, z ~ N(0, I); z is scratch of p doubles. */
static inline void qwt_draw(gsl_rng *rng, size_t p, const double *A,
			    const double *mean, double *z, double *x)
{
	size_t i, j;

	for (j = 0; j < p; j++)
		z[j] = gsl_ran_gaussian(rng, 1.0);
	for (i = 0; i < p; i++) {
		double s = mean != NULL ? mean[i] : 0.0;

		for (j = 0; j < p; j++)
			s += A[i * p + j] * z[j];
		x[i] = s;
	}
}

#endif
