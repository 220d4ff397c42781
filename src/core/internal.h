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
/* Solves L' y = b in place, L as for qw_dense_forward. */
void qw_dense_backward(const double *l, size_t m, double *b);

/* r = x - mu of the last reading scored by ew (0 for missing channels). */
const double *qw_ewcov_residual(const qw_ewcov *ew);
/* y = L^-1 r of the last complete reading scored by qw_ewcov_score (the
 * standardised residual, q = y'y), valid until the next qw_ewcov_learn. */
const double *qw_ewcov_solved(const qw_ewcov *ew);

/* ---- dynamics.c: temporal whitening (see its top comment) ------------- */

struct qw_dyn {
	enum qw_dynamics kind;
	size_t p;            /* channels */
	size_t dim;          /* model vector: p, or 2p for var1 */
	double max_gap;      /* seconds: longest step of a lag pair */
	const double *floor; /* p floors (std dev), owned by the detector */
	double *prev;        /* p: the previous accepted reading (NaN missing) */
	double prev_t;       /* its time, seconds */
	int have_prev;       /* prev holds a reading */
	double *ar;          /* ar1: per channel m1, m2 (EW means of x_{t-1},
				x_t), s11 (EW variance of x_{t-1}), s12 (EW
				lag covariance), 4p */
	uint64_t n;          /* ar1: pairs learned */
	double *v;           /* dim: the model vector of the current reading */
};

struct qw_dyn *qw_dyn_alloc(enum qw_dynamics kind, size_t p, double max_gap,
			    const double *floor);
void qw_dyn_free(struct qw_dyn *dy);
/* Forget the ar1 coefficients and the previous reading. */
void qw_dyn_reset(struct qw_dyn *dy);
/* Fills dy->v for the reading x at t (NaN = missing) and returns 1 when it
 * forms a lag pair with the previous reading (always without dynamics);
 * *complete: no component of v is missing.  Under ar1 without a lag pair
 * v is not filled and the reading cannot be scored. */
int qw_dyn_vector(struct qw_dyn *dy, double t, const double *x,
		  int *complete);
/* The model learned the pair (prev, x) with weight w: ar1 learns it too. */
void qw_dyn_learn(struct qw_dyn *dy, const double *x, double w);
/* x (at t) becomes the previous reading; qw_dyn_break forgets it (the
 * next reading has no lag pair). */
void qw_dyn_step(struct qw_dyn *dy, double t, const double *x);
void qw_dyn_break(struct qw_dyn *dy);
/* State for checkpoints: qw_dyn_state_len bytes (0 without dynamics);
 * _check: QW_EFORMAT when a value is impossible; _set checks, then sets
 * (nothing changed on an error). */
size_t qw_dyn_state_len(const struct qw_dyn *dy);
void qw_dyn_state_get(const struct qw_dyn *dy, unsigned char *b);
int qw_dyn_state_check(const struct qw_dyn *dy, const unsigned char *b);
int qw_dyn_state_set(struct qw_dyn *dy, const unsigned char *b);

/* pvalue.c: Q_F(f; dof, d2), the F distribution's upper tail, at
 * u = dof f / d2 (u >= 0; NaN or negative gives 1, +Inf 0). */
double qw_pvalue_f(struct qw_pvalue_memo *memo, double u, unsigned dof,
		   double d2);

/* limit.c: qw_limit_corrected with the chi-square quantile of (alpha, dof)
 * given (chi = qw_limit_chisq(alpha, dof)): the same figure, bit for bit,
 * for a caller that keeps chi. */
double qw_limit_corrected_chi(double alpha, unsigned dof, double nu,
			      double scale, double chi);

/* mewma.c: one MEWMA step, z' = (1-rho) z + rho ys y (p values; ys scales
 * y to unit variance); returns T2 = |z'|^2 (2-rho)/rho. */
double qw_mewma_step(double *z, size_t p, double rho, const double *y,
		     double ys);

/* ewcov.c: the checks of qw_ewcov_state_set without setting anything (the
 * pending update is dropped: its scratch is used). */
int qw_ewcov_state_check(qw_ewcov *ew, const void *buf, size_t len);

/* ewcov.c: multiplies the model's covariance (and floor share) by s > 0. */
void qw_ewcov_rescale(qw_ewcov *ew, double s);

/* ---- sweep.c: the fused score + rank-one update (ewcov.c's maths) ---- */

/* From u = r (overwritten: the residual after the sweep), the packed
 * factor src with inverse pivots isrc (1/L_jj) and weight a (the update is
 * src src' + a r r', then scaled by c^2): writes the new factor's columns
 * j0..p-1 to dst and their inverse pivots to idst, the solved vector
 * ys[j0..p-1] = (src^-1 r)[j0..], and returns |src^-1 r|^2.  r must be zero
 * before j0; columns before j0 of dst and idst are not written.  Every
 * variant returns the same bits. */
typedef double (*qw_sweep_fn)(const double *restrict src,
			      const double *restrict isrc,
			      double *restrict dst, double *restrict idst,
			      size_t p, double *restrict u,
			      double *restrict ys, double a, double c,
			      size_t j0);
double qw_sweep(const double *restrict src, const double *restrict isrc,
		double *restrict dst, double *restrict idst, size_t p,
		double *restrict u, double *restrict ys, double a, double c,
		size_t j0);

enum qw_sweep_kind {
	QW_SWEEP_PORTABLE = 0, /* baseline x86-64 (SSE2), or plain C */
	QW_SWEEP_AVX2 = 1,     /* x86-64-v3 */
	QW_SWEEP_AVX512 = 2    /* x86-64-v4 */
};

/* The variant kind, NULL when this CPU (or build) cannot run it; for tests
 * that compare the variants.  qw_sweep is the widest one the CPU runs. */
qw_sweep_fn qw_sweep_variant(enum qw_sweep_kind kind);

/* P(chi2_k > x) for integer dof k >= 1 (tail.c): the finite sums of
 * Abramowitz & Stegun 26.4.4 (even k) and 26.4.5 (odd k; the equation
 * numbers quoted from memory, the sums checked against GSL), whose terms
 * are all positive, for k <= QW_CHISQ_KMAX and x/2 <= QW_CHISQ_HMAX (where
 * e^(-x/2) is a normal double); GSL's gsl_cdf_chisq_Q otherwise.  Within
 * 2e-13 relative of GSL over that range (test_tail), at a fraction of its
 * cost for small k: what a fit's trimming passes spend their time on. */
#define QW_CHISQ_KMAX 64u
#define QW_CHISQ_HMAX 700.0
double qw_chisq_q(double x, unsigned k);

#endif
