/* explain.c: which channels drove a score, and the small dense linear
 * algebra it shares with scoring of partial readings.
 *
 * For r = x - mu and Sigma (here the marginal over the observed channels),
 * w = Sigma^-1 r.  Leaving channel i out lowers q = r' Sigma^-1 r by
 *   drop_i = w_i^2 / (Sigma^-1)_ii,
 * the conditional term of the Mason-Young-Tracy decomposition of Hotelling's
 * T-squared (Mason, Tracy and Young, J. Quality Technology 27 (1995) 99).
 * z_i = r_i / sqrt(Sigma_ii) is the channel's own standardised deviation.
 * A channel that breaks its correlation with the others shows a large drop
 * with an unremarkable z.  O(p^3); run only for readings over the limit. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "internal.h"
#include "quadwatch.h"

void qw_marginal_cov(const double *L, size_t p, const size_t *idx, size_t m,
		     double *out)
{
	size_t a, b, k;

	for (a = 0; a < m; a++) {
		for (b = 0; b <= a; b++) {
			size_t ia = idx[a], ib = idx[b];
			double s = 0.0;

			/* Sigma_ab = sum over k <= min(ia, ib) of
			 * L_{ia,k} L_{ib,k}; ib <= ia as idx ascends. */
			for (k = 0; k <= ib; k++) {
				const double *col = L + qw_packed_col(p, k);
				s += col[ia - k] * col[ib - k];
			}
			out[a * m + b] = s;
			out[b * m + a] = s;
		}
	}
}

int qw_dense_cholesky(double *a, size_t m)
{
	size_t i, j, k;

	for (j = 0; j < m; j++) {
		double d = a[j * m + j];

		for (k = 0; k < j; k++)
			d -= a[j * m + k] * a[j * m + k];
		if (!(d > 0.0) || !isfinite(d))
			return QW_ERROR(QW_ENUMERIC);
		d = sqrt(d);
		a[j * m + j] = d;
		for (i = j + 1; i < m; i++) {
			double s = a[i * m + j];

			for (k = 0; k < j; k++)
				s -= a[i * m + k] * a[j * m + k];
			a[i * m + j] = s / d;
		}
	}
	return 0;
}

void qw_dense_forward(const double *l, size_t m, double *b)
{
	size_t i, k;

	for (i = 0; i < m; i++) {
		double s = b[i];

		for (k = 0; k < i; k++)
			s -= l[i * m + k] * b[k];
		b[i] = s / l[i * m + i];
	}
}

void qw_dense_backward(const double *l, size_t m, double *b)
{
	size_t i, k;

	for (i = m; i-- > 0;) {
		double s = b[i];

		for (k = i + 1; k < m; k++)
			s -= l[k * m + i] * b[k];
		b[i] = s / l[i * m + i];
	}
}

size_t qw_explain_work_len(size_t p)
{
	return 2 * p * p + 4 * p;
}

static int explain_cmp(const void *a, const void *b)
{
	const struct qw_contrib *x = a, *y = b;

	if (x->drop > y->drop)
		return -1;
	if (x->drop < y->drop)
		return 1;
	return x->channel < y->channel ? -1 : x->channel > y->channel;
}

size_t qw_explain(const double *L, size_t p, const double *r,
		  const unsigned char *mask, double *work,
		  struct qw_contrib *out)
{
	double *sig = work, *li = work + p * p, *ro = li + p * p;
	double *w = ro + p, *sdiag = w + p;
	size_t *idx = (size_t *)(void *)(sdiag + p); /* p doubles' room */
	size_t i, k, m = 0;

	for (i = 0; i < p; i++)
		if (mask == NULL || mask[i])
			idx[m++] = i;
	if (m == 0)
		return 0;
	qw_marginal_cov(L, p, idx, m, sig);
	for (i = 0; i < m; i++) {
		sdiag[i] = sig[i * m + i];
		ro[i] = r[idx[i]];
	}
	if (qw_dense_cholesky(sig, m) != 0)
		return 0;
	/* li = Lo^-1, column by column (forward substitution on e_i). */
	memset(li, 0, m * m * sizeof *li);
	for (i = 0; i < m; i++) {
		double *col = w;

		memset(col, 0, m * sizeof *col);
		col[i] = 1.0;
		qw_dense_forward(sig, m, col);
		for (k = 0; k < m; k++)
			li[k * m + i] = col[k];
	}
	/* y = Lo^-1 r, then w = Lo^-T y = Sigma^-1 r. */
	qw_dense_forward(sig, m, ro);
	for (i = 0; i < m; i++) {
		double s = 0.0, dinv = 0.0;

		for (k = i; k < m; k++) {
			s += li[k * m + i] * ro[k];
			dinv += li[k * m + i] * li[k * m + i];
		}
		out[i].channel = (unsigned)idx[i];
		out[i].drop = s * s / dinv;
		out[i].z = r[idx[i]] / sqrt(sdiag[i]);
	}
	qsort(out, m, sizeof *out, explain_cmp);
	return m;
}
