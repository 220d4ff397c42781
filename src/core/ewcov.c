/* ewcov.c: exponentially weighted mean and covariance of p channels, kept
 * as the lower Cholesky factor L of Sigma = S + f F, where
 *   mu' = mu + w r,   S' = (1-w)(S + w r r'),   r = x - mu,
 * F = diag(floor^2) is the noise floor and f in [1/2, 1] the share of it
 * still in the factor (the scale by 1-w shrinks it too).  It is topped back
 * up to f = 1 by p rank-one updates, O(p^3), when f < 1/2, or when f < 9/10
 * and p readings have passed since the last top-up: at most every p
 * readings, so O(p^2) amortised, and with a long half-life only every
 * ~0.15/lam readings.
 *
 * One sweep over L scores and updates (the fused form).  The score is
 * q = y'y with L y = r (forward substitution, column by column), and the
 * rank-one update of L L' + w r r' is Method C1 of Gill, Golub, Murray and
 * Saunders, "Methods for modifying matrix factorizations", Math. Comp. 28
 * (1974), 505-535, which works from that same solved vector: written for
 * the non-unit factor and fused with the scale by c = sqrt(1-w), column j
 * with pivot l = L_jj and y_j = u_j / l (u the running residual) becomes
 *   g   = sqrt(1 + a_j y_j^2)             (step 2: d'_j = d_j g^2)
 *   L'_jj = c l g
 *   u_i  -= y_j L_ij                      (forward substitution)
 *   L'_ij = c g L_ij + (c a_j y_j / g) u_i  (step 3: l' = l + beta u)
 *   a_{j+1} = a_j / g^2,  a_1 = w.
 * Coded with b_j = 1/a_j, so the recurrence is b_{j+1} = b_j + y_j^2 (an
 * addition, not a division, on the sweep's dependency chain), g =
 * sqrt(b_{j+1}/b_j) and c a_j y_j / g = c y_j / sqrt(b_j b_{j+1}); the
 * inverse pivots 1/L_jj are kept beside the factor, so y_j is a product.
 * The new factor goes to a second buffer, installed by qw_ewcov_learn only
 * when the caller decides the reading may be learned: a reading that is
 * not learned costs one sweep and leaves the model bit for bit as it was.
 *
 * Storage: both factors packed by columns, so the inner loop runs over
 * contiguous memory and vectorises.  The sweep itself is in sweep.c:
 * blocks of four columns, built for AVX-512, AVX2 and baseline x86-64
 * (chosen at load time); ISO C mode keeps GCC from contracting a*b+c into
 * FMA, and every element sees the same operations in the same order on
 * every path, so all give the same bits: a model moves between machines
 * and a replay matches the daemon exactly.  Workload: one sweep of p(p+1)/2
 * elements per reading, p from 1 to a few hundred.
 *
 * A reading with channels M missing is learned by its expected step under
 * the model (the E-step of EM for the multivariate normal): with P =
 * Sigma^-1, the missing residual is its conditional mean r_M = -P_MM^-1
 * P_MO r_O and its conditional covariance C = P_MM^-1 is added, so
 * Sigma' = (1-w)(Sigma + w r r' + w C_M): one sweep for r, then one with
 * a = 1, c = 1 per column of a factor of w(1-w) C (qw_ewcov_learn_partial;
 * P's columns for M by two triangular solves each, O(k p^2)).  If the
 * model were the truth, r r' + C_M would average to Sigma, as r r' does
 * for a complete reading.
 * The effective size behind the limit is tracked by scalar recursions for
 * stationary Gaussian data: V = Var(mu)/Sigma, and the Satterthwaite sums
 * W1 = sum a_k, W2 = sum a_k^2 over the weights a_k = c_k (1 + V_{k-1}) of
 * the terms r_k r_k' in S.  The next r has covariance (1+V) Sigma and S is
 * close to W1 Sigma Wishart(nu)/nu with nu = W1^2/W2, so
 *   q ~ scale * nu p/(nu-p+1) F(p, nu-p+1),  scale = (1+V)/W1.
 * With weights 1/n this is exact (nu = n-1, the Phase II Hotelling form);
 * at steady state nu -> (2-lam)/lam and scale -> 1/(1-lam). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "internal.h"
#include "quadwatch.h"

/* Auto floor, for channels configured without one: a relative resolution
 * of 1e-7 of the first value (about float32's 6e-8), never below 1e-12 in
 * channel units.  A numerical guard only; the real sensor resolution
 * belongs in the configuration. */
#define EWCOV_AUTO_FLOOR_REL 1e-7
#define EWCOV_AUTO_FLOOR_MIN 1e-12
/* Top the floor back up when its share in the factor falls below MIN, or
 * below TOPUP once p readings have passed since the last top-up. */
#define EWCOV_FLOOR_MIN_SHARE 0.5
#define EWCOV_FLOOR_TOPUP_SHARE 0.9

struct qw_ewcov {
	size_t p;
	uint64_t n;          /* readings learned */
	double *mu;          /* p: EW mean */
	double *L;           /* packed factor of Sigma = S + f F */
	double *Ln;          /* packed factor prepared by the last score */
	double *iL;          /* p: 1/L_jj of L */
	double *iLn;         /* p: 1/L_jj of Ln */
	double *floor;       /* p: configured floors, 0 = auto (std dev) */
	double *floorsq;     /* p: F_ii, resolved at the first reading */
	double *r;           /* p: x - mu of the last scored reading */
	double *y;           /* p: L^-1 r of the last complete score (valid
				until the next learn) */
	double *u;           /* p: forward-substitution residual (work) */
	double *sub;         /* p*p: marginal factor for partial readings */
	size_t *idx;         /* p: observed channels of a partial reading */
	double f;            /* share of F in the factor, [1/2, 1] */
	size_t since_topup;  /* readings learned since the last top-up */
	double w;            /* weight the pending factor was made with */
	double cw, cc;       /* cc = sqrt(1 - cw) for the last weight cw
				(NaN: none), so a steady weight costs no
				square root per reading */
	int pending;         /* Ln holds the update for r and w */
	double V;            /* Var(mu)/Sigma */
	double W1, W2;       /* Satterthwaite sums of S's term weights */
};

void qw_ewcov_free(qw_ewcov *ew)
{
	if (ew == NULL)
		return;
	free(ew->mu);
	free(ew->L);
	free(ew->Ln);
	free(ew->iL);
	free(ew->iLn);
	free(ew->floor);
	free(ew->floorsq);
	free(ew->r);
	free(ew->y);
	free(ew->u);
	free(ew->sub);
	free(ew->idx);
	free(ew);
}

qw_ewcov *qw_ewcov_alloc(size_t p, const double *floor)
{
	qw_ewcov *ew;
	size_t i;

	if (p < 1 || p > QW_MAX_P || floor == NULL)
		return NULL;
	for (i = 0; i < p; i++)
		if (!(floor[i] >= 0) || !isfinite(floor[i]))
			return NULL;
	ew = calloc(1, sizeof *ew);
	if (ew == NULL)
		goto fail;
	ew->p = p;
	ew->mu = malloc(p * sizeof *ew->mu);
	ew->L = malloc(qw_packed_len(p) * sizeof *ew->L);
	ew->Ln = malloc(qw_packed_len(p) * sizeof *ew->Ln);
	ew->iL = malloc(p * sizeof *ew->iL);
	ew->iLn = malloc(p * sizeof *ew->iLn);
	ew->floor = malloc(p * sizeof *ew->floor);
	ew->floorsq = malloc(p * sizeof *ew->floorsq);
	ew->r = malloc(p * sizeof *ew->r);
	ew->y = malloc(p * sizeof *ew->y);
	ew->u = malloc(p * sizeof *ew->u);
	ew->sub = malloc(p * p * sizeof *ew->sub);
	ew->idx = malloc(p * sizeof *ew->idx);
	if (!ew->mu || !ew->L || !ew->Ln || !ew->iL || !ew->iLn ||
	    !ew->floor || !ew->floorsq ||
	    !ew->r || !ew->y || !ew->u || !ew->sub || !ew->idx)
		goto fail;
	memcpy(ew->floor, floor, p * sizeof *floor);
	ew->cw = NAN;
	qw_ewcov_reset(ew);
	return ew;
fail:
	qw_ewcov_free(ew);
	return NULL;
}

/* L = sqrt(F) on the diagonal, zero elsewhere; f = 1. */
static void ewcov_factor_from_floor(qw_ewcov *ew)
{
	size_t j, p = ew->p;

	memset(ew->L, 0, qw_packed_len(p) * sizeof *ew->L);
	for (j = 0; j < p; j++) {
		ew->L[qw_packed_col(p, j)] = sqrt(ew->floorsq[j]);
		ew->iL[j] = 1.0 / ew->L[qw_packed_col(p, j)];
	}
	ew->f = 1.0;
	ew->since_topup = 0;
	ew->pending = 0;
}

void qw_ewcov_reset(qw_ewcov *ew)
{
	size_t i;

	ew->n = 0;
	for (i = 0; i < ew->p; i++) {
		ew->mu[i] = 0.0;
		/* An auto floor is resolved again at the next first reading. */
		ew->floorsq[i] = ew->floor[i] > 0 ? ew->floor[i] * ew->floor[i]
						  : 1.0;
	}
	ewcov_factor_from_floor(ew);
	ew->V = 1.0;
	ew->W1 = 0.0;
	ew->W2 = 0.0;
}

size_t qw_ewcov_p(const qw_ewcov *ew)
{
	return ew->p;
}

uint64_t qw_ewcov_count(const qw_ewcov *ew)
{
	return ew->n;
}

const double *qw_ewcov_mean(const qw_ewcov *ew)
{
	return ew->mu;
}

const double *qw_ewcov_factor(const qw_ewcov *ew)
{
	return ew->L;
}

double qw_ewcov_weight(const qw_ewcov *ew, double lam)
{
	double run = 1.0 / ((double)ew->n + 1.0);

	return lam > run ? lam : run;
}

void qw_ewcov_first(qw_ewcov *ew, const double *x)
{
	size_t i;
	double fl;

	for (i = 0; i < ew->p; i++) {
		ew->mu[i] = x[i];
		if (ew->floor[i] > 0)
			continue;
		fl = EWCOV_AUTO_FLOOR_REL * fabs(x[i]);
		if (fl < EWCOV_AUTO_FLOOR_MIN)
			fl = EWCOV_AUTO_FLOOR_MIN;
		ew->floorsq[i] = fl * fl;
	}
	ewcov_factor_from_floor(ew);
	ew->n = 1;
	ew->V = 1.0; /* the mean is one reading */
	ew->W1 = 0.0;
	ew->W2 = 0.0;
}

/* c = sqrt(1 - w), the sweep's scale, for weight w. */
static double ewcov_scale_root(qw_ewcov *ew, double w)
{
	if (w != ew->cw) {
		ew->cc = sqrt(1.0 - w);
		ew->cw = w;
	}
	return ew->cc;
}

/* Installs the factor in Ln as the current one. */
static void ewcov_swap(qw_ewcov *ew)
{
	double *t = ew->L, *ti = ew->iL;

	ew->L = ew->Ln;
	ew->iL = ew->iLn;
	ew->Ln = t;
	ew->iLn = ti;
}

int qw_ewcov_score(qw_ewcov *ew, const double *x, double w, double *q)
{
	size_t i, p = ew->p;
	double qq;

	ew->pending = 0;
	if (ew->n < 1 || !(w > 0.0 && w <= 1.0))
		return QW_ERROR(QW_ESTATE);
	for (i = 0; i < p; i++) {
		ew->r[i] = x[i] - ew->mu[i];
		ew->u[i] = ew->r[i];
	}
	qq = qw_sweep(ew->L, ew->iL, ew->Ln, ew->iLn, p, ew->u, ew->y, w,
		      ewcov_scale_root(ew, w), 0);
	/* q finite implies every y_j, g and so every new element finite. */
	if (!isfinite(qq))
		return QW_ERROR(QW_ERANGE);
	*q = qq;
	ew->w = w;
	ew->pending = 1;
	return 0;
}

/* Adds (1 - f) F back into the factor: p rank-one updates with vectors
 * sqrt((1-f) F_ii) e_i, each starting at column i (through the second
 * buffer, so the sweep never works in place).  Update i leaves columns
 * before i as they are, so after it both buffers agree on columns < i:
 * the next update needs only column i copied across, not the whole
 * prefix. */
static void ewcov_topup(qw_ewcov *ew)
{
	size_t i, p = ew->p;
	double add = 1.0 - ew->f;

	if (add > 0.0) {
		for (i = 0; i < p; i++) {
			if (i > 0) {
				size_t o = qw_packed_col(p, i - 1);

				memcpy(ew->Ln + o, ew->L + o,
				       (p - i + 1) * sizeof *ew->L);
				ew->iLn[i - 1] = ew->iL[i - 1];
			}
			memset(ew->u, 0, p * sizeof *ew->u);
			ew->u[i] = sqrt(add * ew->floorsq[i]);
			qw_sweep(ew->L, ew->iL, ew->Ln, ew->iLn, p, ew->u, ew->y,
				 1.0, 1.0, i);
			ewcov_swap(ew);
		}
	}
	ew->f = 1.0;
	ew->since_topup = 0;
}

/* The rest of a learned step, once the factor is installed: the mean by
 * w r (r as learned), the effective-size recursions (file top; V before
 * its own update), the floor's share, and the top-up when due. */
static inline void ewcov_learned(qw_ewcov *ew, double w)
{
	size_t i, p = ew->p;
	double a;

	for (i = 0; i < p; i++)
		ew->mu[i] += w * ew->r[i];
	a = (1.0 - w) * w * (1.0 + ew->V);
	ew->W1 = (1.0 - w) * ew->W1 + a;
	ew->W2 = (1.0 - w) * (1.0 - w) * ew->W2 + a * a;
	ew->V = (1.0 - w) * (1.0 - w) * ew->V + w * w;
	ew->n++;
	ew->f *= 1.0 - w;
	ew->since_topup++;
	if (ew->f < EWCOV_FLOOR_MIN_SHARE ||
	    (ew->since_topup >= p && ew->f < EWCOV_FLOOR_TOPUP_SHARE))
		ewcov_topup(ew);
}

int qw_ewcov_learn(qw_ewcov *ew, double gain)
{
	size_t i, p = ew->p;
	double w = ew->w;

	if (!ew->pending || !(gain > 0.0 && gain <= 1.0))
		return QW_ERROR(QW_ESTATE);
	ew->pending = 0;
	if (gain < 1.0) {
		/* Clipped step: the reading replaced by mu + gain r. */
		for (i = 0; i < p; i++) {
			ew->r[i] *= gain;
			ew->u[i] = ew->r[i];
		}
		qw_sweep(ew->L, ew->iL, ew->Ln, ew->iLn, p, ew->u, ew->y, w,
			 ewcov_scale_root(ew, w), 0);
	}
	ewcov_swap(ew);
	ewcov_learned(ew, w);
	return 0;
}

int qw_ewcov_score_subset(qw_ewcov *ew, const double *x, double *q,
			  unsigned *dof)
{
	size_t i, m = 0, p = ew->p;
	double qq = 0.0;

	ew->pending = 0;
	if (ew->n < 1)
		return QW_ERROR(QW_ESTATE);
	for (i = 0; i < p; i++) {
		if (isnan(x[i]))
			continue;
		ew->idx[m] = i;
		ew->u[m] = x[i] - ew->mu[i];
		m++;
	}
	if (m == 0)
		return QW_ERROR(QW_ENODATA);
	qw_marginal_cov(ew->L, p, ew->idx, m, ew->sub);
	if (qw_dense_cholesky(ew->sub, m) != 0)
		return QW_ERROR(QW_ENUMERIC);
	qw_dense_forward(ew->sub, m, ew->u);
	for (i = 0; i < m; i++)
		qq += ew->u[i] * ew->u[i];
	if (!isfinite(qq))
		return QW_ERROR(QW_ERANGE);
	/* r for attribution: missing channels as 0 (masked out there). */
	for (i = 0; i < p; i++)
		ew->r[i] = isnan(x[i]) ? 0.0 : x[i] - ew->mu[i];
	*q = qq;
	*dof = (unsigned)m;
	return 0;
}

/* Column i of P = Sigma^-1: col = P e_i, by L z = e_i (z is 0 above row
 * i) and L' col = z, both on the packed columns.  O(p^2). */
static void ewcov_inverse_col(const qw_ewcov *ew, size_t i, double *col)
{
	size_t j, k, p = ew->p;

	memset(col, 0, p * sizeof *col);
	col[i] = 1.0;
	for (k = i; k < p; k++) {
		const double *c = ew->L + qw_packed_col(p, k) - k;

		col[k] *= ew->iL[k];
		for (j = k + 1; j < p; j++)
			col[j] -= c[j] * col[k];
	}
	for (k = p; k-- > 0;) {
		const double *c = ew->L + qw_packed_col(p, k) - k;
		double s = col[k];

		for (j = k + 1; j < p; j++)
			s -= c[j] * col[j];
		col[k] = s * ew->iL[k];
	}
}

/* Installs the factor of c^2 (L L' + a u u') for u = ew->u, zero above
 * j0: the sweep from column j0, the columns before it copied across (the
 * sweep never works in place).  0, or QW_ERANGE, nothing installed, on a
 * non-finite sweep. */
static int ewcov_add_from(qw_ewcov *ew, double a, double c, size_t j0)
{
	size_t p = ew->p, o = qw_packed_col(p, j0);
	double qq;

	memcpy(ew->Ln, ew->L, o * sizeof *ew->L);
	memcpy(ew->iLn, ew->iL, j0 * sizeof *ew->iL);
	qq = qw_sweep(ew->L, ew->iL, ew->Ln, ew->iLn, p, ew->u, ew->y, a, c,
		      j0);
	if (!isfinite(qq))
		return QW_ERROR(QW_ERANGE);
	ewcov_swap(ew);
	return 0;
}

int qw_ewcov_learn_partial(qw_ewcov *ew, const double *x, double w,
			   double gain)
{
	size_t i, t, s, k = 0, p = ew->p;
	double *pmm = ew->sub, *b, *g, sc;
	int rc;

	ew->pending = 0;
	if (ew->n < 1 || !(w > 0.0 && w <= 1.0) ||
	    !(gain > 0.0 && gain <= 1.0))
		return QW_ERROR(QW_ESTATE);
	for (i = 0; i < p; i++) {
		if (isnan(x[i]))
			ew->idx[k++] = i;
		ew->r[i] = isnan(x[i]) ? 0.0 : x[i] - ew->mu[i];
	}
	if (k == p)
		return QW_ERROR(QW_ENODATA);
	/* P_MM and b = P_M. r0 (r0: the observed residual, 0 at M). */
	b = pmm + k * k;
	for (t = 0; t < k; t++) {
		ewcov_inverse_col(ew, ew->idx[t], ew->u);
		for (s = 0; s < k; s++)
			pmm[t * k + s] = ew->u[ew->idx[s]];
		b[t] = 0.0;
		for (i = 0; i < p; i++)
			b[t] += ew->u[i] * ew->r[i];
	}
	if (qw_dense_cholesky(pmm, k) != 0) /* P_MM = R R' */
		return QW_ERROR(QW_ENUMERIC);
	/* r_M = -P_MM^-1 b: the conditional mean of the missing part. */
	qw_dense_forward(pmm, k, b);
	qw_dense_backward(pmm, k, b);
	for (t = 0; t < k; t++)
		ew->r[ew->idx[t]] = -gain * b[t];
	for (i = 0; i < p; i++) {
		if (!isnan(x[i]))
			ew->r[i] *= gain;
		if (!isfinite(ew->r[i]))
			return QW_ERROR(QW_ERANGE);
	}
	/* (1-w)(Sigma + w r r'), then + w(1-w) C_M, C = P_MM^-1 = G G' with
	 * G = R'^-1 (upper): one rank-one step per column of G.  A step that
	 * overflows (only a near-singular block can) is left out: the factor
	 * stays a valid one, with less added. */
	memcpy(ew->u, ew->r, p * sizeof *ew->u);
	if ((rc = ewcov_add_from(ew, w, ewcov_scale_root(ew, w), 0)) != 0)
		return rc;
	sc = sqrt(w * (1.0 - w));
	g = pmm + k * k;
	for (t = 0; t < k && sc > 0.0; t++) {
		memset(g, 0, k * sizeof *g);
		g[t] = 1.0;
		qw_dense_backward(pmm, k, g);
		memset(ew->u, 0, p * sizeof *ew->u);
		for (s = 0; s <= t; s++)
			ew->u[ew->idx[s]] = sc * g[s];
		if (ewcov_add_from(ew, 1.0, 1.0, ew->idx[0]) != 0)
			break;
	}
	ewcov_learned(ew, w);
	return 0;
}

const double *qw_ewcov_residual(const qw_ewcov *ew)
{
	return ew->r;
}

const double *qw_ewcov_solved(const qw_ewcov *ew)
{
	return ew->y;
}

double qw_ewcov_nu(const qw_ewcov *ew)
{
	return ew->W2 > 0.0 ? ew->W1 * ew->W1 / ew->W2 : 0.0;
}

double qw_ewcov_scale(const qw_ewcov *ew)
{
	return ew->W1 > 0.0 ? (1.0 + ew->V) / ew->W1 : INFINITY;
}

void qw_ewcov_rescale(qw_ewcov *ew, double s)
{
	size_t i, n = qw_packed_len(ew->p);
	double r = sqrt(s), ir = 1.0 / r;

	for (i = 0; i < n; i++)
		ew->L[i] *= r;
	for (i = 0; i < ew->p; i++)
		ew->iL[i] *= ir;
	ew->pending = 0;
}

int qw_ewcov_verify(qw_ewcov *ew)
{
	size_t j, i, off = 0, p = ew->p;
	int bad = 0;

	for (j = 0; j < p && !bad; j++) {
		if (!(ew->L[off] > 0.0))
			bad = 1;
		for (i = 0; i < p - j; i++)
			if (!isfinite(ew->L[off + i]))
				bad = 1;
		off += p - j;
	}
	for (i = 0; i < p; i++)
		if (!isfinite(ew->mu[i]))
			bad = 1;
	if (!bad)
		return 0;
	/* Keep a finite mean; the covariance restarts from the floor and
	 * its effective size from nothing, so the limit stays honest. */
	for (i = 0; i < p; i++)
		if (!isfinite(ew->mu[i]))
			ew->mu[i] = 0.0;
	ewcov_factor_from_floor(ew);
	ew->n = ew->n > 0 ? 1 : 0;
	ew->V = 1.0;
	ew->W1 = 0.0;
	ew->W2 = 0.0;
	return QW_ERROR(QW_ENUMERIC);
}

/* State layout: a fixed header of scalars, then mu[p], floorsq[p] and the
 * packed factor.  Host order: a checkpoint is read back on the same host. */
/* since_topup is bounded by the top-up rule; anything above this is not a
 * state this code wrote (the count for f to fall from 1 to 1/2 at the
 * smallest useful weight is far below it). */
#define QW_MAX_READINGS_SINCE (UINT64_C(1) << 40)

struct ewcov_state_head {
	uint64_t p, n, since_topup;
	double f, V, W1, W2;
};

size_t qw_ewcov_state_len(const qw_ewcov *ew)
{
	return sizeof(struct ewcov_state_head) +
	       (2 * ew->p + qw_packed_len(ew->p)) * sizeof(double);
}

void qw_ewcov_state_get(const qw_ewcov *ew, void *buf)
{
	struct ewcov_state_head h;
	unsigned char *b = buf;
	size_t p = ew->p;

	memset(&h, 0, sizeof h);
	h.p = p;
	h.n = ew->n;
	h.since_topup = ew->since_topup;
	h.f = ew->f;
	h.V = ew->V;
	h.W1 = ew->W1;
	h.W2 = ew->W2;
	memcpy(b, &h, sizeof h);
	b += sizeof h;
	memcpy(b, ew->mu, p * sizeof(double));
	b += p * sizeof(double);
	memcpy(b, ew->floorsq, p * sizeof(double));
	b += p * sizeof(double);
	memcpy(b, ew->L, qw_packed_len(p) * sizeof(double));
}

/* 1 when every value of a state is possible for a model of order p. */
static int ewcov_state_sane(const struct ewcov_state_head *h,
			    const double *mu, const double *fsq,
			    const double *L, size_t p)
{
	size_t j, i, off = 0;

	if (!(h->f >= 0.0 && h->f <= 1.0) || !(h->V >= 0.0 && h->V <= 1.0) ||
	    !(h->W1 >= 0.0) || !(h->W2 >= 0.0) || !isfinite(h->W1) ||
	    !isfinite(h->W2) || h->since_topup > QW_MAX_READINGS_SINCE)
		return 0;
	for (i = 0; i < p; i++)
		if (!isfinite(mu[i]) || !(fsq[i] > 0.0) || !isfinite(fsq[i]))
			return 0;
	for (j = 0; j < p; j++) {
		if (!(L[off] > 0.0))
			return 0;
		for (i = 0; i < p - j; i++)
			if (!isfinite(L[off + i]))
				return 0;
		off += p - j;
	}
	return 1;
}

/* Copies a state's doubles to aligned scratch (sub, Ln: at least the
 * needed size) and checks them; 0, QW_EMISMATCH or QW_EFORMAT. */
static int ewcov_state_load(qw_ewcov *ew, const void *buf, size_t len,
			    struct ewcov_state_head *h)
{
	const unsigned char *b = buf;
	size_t p = ew->p;

	if (len != qw_ewcov_state_len(ew))
		return QW_ERROR(QW_EMISMATCH);
	memcpy(h, b, sizeof *h);
	if (h->p != p)
		return QW_ERROR(QW_EMISMATCH);
	memcpy(ew->sub, b + sizeof *h, 2 * p * sizeof(double));
	memcpy(ew->Ln, b + sizeof *h + 2 * p * sizeof(double),
	       qw_packed_len(p) * sizeof(double));
	ew->pending = 0; /* Ln is overwritten */
	if (!ewcov_state_sane(h, ew->sub, ew->sub + p, ew->Ln, p))
		return QW_ERROR(QW_EFORMAT);
	return 0;
}

int qw_ewcov_state_check(qw_ewcov *ew, const void *buf, size_t len)
{
	struct ewcov_state_head h;

	return ewcov_state_load(ew, buf, len, &h);
}

int qw_ewcov_state_set(qw_ewcov *ew, const void *buf, size_t len)
{
	struct ewcov_state_head h;
	size_t p = ew->p, j;
	int rc;

	if ((rc = ewcov_state_load(ew, buf, len, &h)) != 0)
		return rc;
	memcpy(ew->mu, ew->sub, p * sizeof(double));
	memcpy(ew->floorsq, ew->sub + p, p * sizeof(double));
	memcpy(ew->L, ew->Ln, qw_packed_len(p) * sizeof(double));
	for (j = 0; j < p; j++)
		ew->iL[j] = 1.0 / ew->L[qw_packed_col(p, j)];
	ew->n = h.n;
	ew->since_topup = (size_t)h.since_topup;
	ew->f = h.f;
	ew->V = h.V;
	ew->W1 = h.W1;
	ew->W2 = h.W2;
	return 0;
}
