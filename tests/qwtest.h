/* qwtest.h: shared helpers of the cmocka tests: the one relative-tolerance
 * comparison, seeded Gaussian data with a known covariance. */
#ifndef QW_QWTEST_H
#define QW_QWTEST_H

#include <math.h>
#include <stddef.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_randist.h>

#include "internal.h"

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

/* The brute-force reference of the scoring tests: q = r_o' Sigma_oo^-1
 * r_o over the channels with keep[i] != 0 (keep NULL: all), Sigma (p x p,
 * row-major, full) factored and solved by GSL.  0 when none is kept. */
static inline double qwt_quad_form(const double *sig, size_t p,
				   const double *r, const int *keep)
{
	size_t o[512], m = 0, i, j;
	gsl_matrix *a;
	gsl_vector *rv, *y;
	double q = 0.0;

	for (i = 0; i < p && m < sizeof o / sizeof o[0]; i++)
		if (keep == NULL || keep[i])
			o[m++] = i;
	if (m == 0)
		return 0.0;
	a = gsl_matrix_alloc(m, m);
	rv = gsl_vector_alloc(m);
	y = gsl_vector_alloc(m);
	for (i = 0; i < m; i++) {
		gsl_vector_set(rv, i, r[o[i]]);
		for (j = 0; j < m; j++)
			gsl_matrix_set(a, i, j, sig[o[i] * p + o[j]]);
	}
	if (gsl_linalg_cholesky_decomp1(a) == 0 &&
	    gsl_linalg_cholesky_solve(a, rv, y) == 0)
		gsl_blas_ddot(rv, y, &q);
	else
		q = NAN; /* fails any comparison */
	gsl_matrix_free(a);
	gsl_vector_free(rv);
	gsl_vector_free(y);
	return q;
}

/* A strongly autocorrelated, cross-coupled VAR(1) process:
 *   x_t - mean = Phi (x_{t-1} - mean) + A e_t,  e_t ~ N(0, I),
 * Phi = phi on the diagonal, +couple above it and -couple below it
 * (eigenvalues phi +- i 2 couple cos(k pi/(p+1)), so |eig| < 1 for
 * phi = 0.9, couple = 0.05).  state: p doubles, start at 0. */
struct qwt_var1 {
	size_t p;
	double phi, couple;
	const double *A, *mean;
	double *state, *z, *next;
};

static inline void qwt_var1_step(gsl_rng *rng, struct qwt_var1 *v,
				 double *x)
{
	size_t i, p = v->p;

	qwt_draw(rng, p, v->A, NULL, v->z, v->next);
	for (i = 0; i < p; i++) {
		double s = v->phi * v->state[i];

		if (i + 1 < p)
			s += v->couple * v->state[i + 1];
		if (i > 0)
			s -= v->couple * v->state[i - 1];
		v->next[i] += s;
	}
	for (i = 0; i < p; i++) {
		v->state[i] = v->next[i];
		x[i] = v->state[i] + (v->mean != NULL ? v->mean[i] : 0.0);
	}
}

/* Sigma = L L' in full (p x p, row-major) from a packed factor. */
static inline void qwt_sigma_from_factor(const double *L, size_t p,
					 double *sig)
{
	size_t i, j, k;

	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++) {
			double s = 0.0;

			for (k = 0; k <= (i < j ? i : j); k++)
				s += L[qw_packed_col(p, k) + i - k] *
				     L[qw_packed_col(p, k) + j - k];
			sig[i * p + j] = s;
		}
}

#endif
