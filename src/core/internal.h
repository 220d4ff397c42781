/* internal.h: helpers shared by the core's files, not part of the public
 * API.  Tests include it to reach the textbook reference forms. */
#ifndef QW_INTERNAL_H
#define QW_INTERNAL_H

#include <stddef.h>

#include "quadwatch.h"

/* Offset of column j in a packed-by-columns lower factor of order p:
 * columns 0..j-1 hold p + (p-1) + ... + (p-j+1) elements. */
static inline size_t qw_packed_col(size_t p, size_t j)
{
	return j * p - j * (j - 1) / 2;
}

/* Elements in a packed lower factor of order p. */
static inline size_t qw_packed_len(size_t p)
{
	return p * (p + 1) / 2;
}

/* Sigma_oo = (L L')[idx, idx] for the m indices idx (ascending), from the
 * packed factor L of order p, into out (m x m row-major, full).  O(m^2 p). */
void qw_marginal_cov(const double *L, size_t p, const size_t *idx, size_t m,
		     double *out);
/* In-place lower Cholesky of the m x m row-major a (lower triangle used,
 * upper left as is).  QW_ENUMERIC on a pivot <= 0 or non-finite. */
int qw_dense_cholesky(double *a, size_t m);
/* Solves the lower-triangular dense system L y = b in place (b -> y). */
void qw_dense_forward(const double *l, size_t m, double *b);

/* r = x - mu of the last reading scored by ew (0 for missing channels). */
const double *qw_ewcov_residual(const qw_ewcov *ew);
/* y = L^-1 r of the last complete reading scored by qw_ewcov_score (the
 * standardised residual, q = y'y), valid until the next qw_ewcov_learn. */
const double *qw_ewcov_solved(const qw_ewcov *ew);

#endif
