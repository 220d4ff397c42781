/* dynamics.c: temporal whitening, the vector a group's model scores.
 *
 * Readings at 1-10 Hz follow each other closely; scored as if independent,
 * their Mahalanobis scores come in runs and a false-alarm rate set for
 * independent readings is exceeded many times over.  Scoring the
 * innovation of a one-step prediction instead removes that memory:
 *
 *  - var1: a first-order vector autoregression, x_t = c + A x_{t-1} + e_t.
 *    The detector's EW model is kept on the stacked vector
 *    v_t = [x_{t-1}; x_t] (dimension 2p).  Its lower Cholesky factor is
 *    [[L11, 0], [L21, L22]], so with y = L^-1 (v - mu) the last p
 *    components of y are L22^-1 (x_t - E[x_t | x_{t-1}]): the standardised
 *    innovation under the EW least-squares VAR(1) fit (the conditional
 *    Gaussian: A = S21 S11^-1, innovation covariance L22 L22' = S22 -
 *    S21 S11^-1 S12).  q = sum_{j>=p} y_j^2, which is the joint score minus
 *    the score of the lag alone.  One fused sweep of order 2p per reading,
 *    O(p^2), the noise floor, the guard and the checkpoints as for a plain
 *    model; no second estimator to keep in step.
 *  - ar1: per channel, x_i,t - m2_i = phi_i (x_i,t-1 - m1_i) + e_i,t with
 *    phi_i = s12_i / (s11_i + floor_i^2), from EW means, variance and lag
 *    covariance of the pairs (the same weights as the model); the model is
 *    kept on e (dimension p).  O(p) on top of the plain sweep; it removes
 *    each channel's own memory but not one channel's lead over another.
 *
 * A lag pair needs the previous reading to be recent: 0 <= t - t_prev <=
 * max_gap (a reading lost on the bus, a restart, time going backwards
 * break it).  var1 then scores the reading against the channels'
 * unconditional model (the x_t block of the joint) and ar1, which has
 * none, leaves it unscored.  A missing channel in either reading makes
 * the pair partial: var1 scores on the observed components (conditioning
 * on the observed lags), ar1 on the channels whose pair is complete.
 * Once the model is warm the detector learns such a model vector by its
 * expected step (qw_ewcov_learn_partial; under var1 a reading with no
 * pair too, its lags all missing), unless partial = hold; ar1's
 * coefficients learn from the channels whose pair is complete.
 * Workload: O(p) per reading besides the model's sweep; no allocation
 * after qw_dyn_alloc. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "internal.h"

void qw_dyn_free(struct qw_dyn *dy)
{
	if (dy == NULL)
		return;
	free(dy->prev);
	free(dy->ar);
	free(dy->v);
	free(dy);
}

struct qw_dyn *qw_dyn_alloc(enum qw_dynamics kind, size_t p, double max_gap,
			    const double *floor)
{
	struct qw_dyn *dy = calloc(1, sizeof *dy);

	if (dy == NULL)
		return NULL;
	dy->kind = kind;
	dy->p = p;
	dy->dim = kind == QW_DYN_VAR1 ? 2 * p : p;
	dy->max_gap = max_gap;
	dy->floor = floor;
	dy->prev = malloc(p * sizeof *dy->prev);
	dy->ar = calloc(4 * p, sizeof *dy->ar);
	dy->v = malloc(dy->dim * sizeof *dy->v);
	if (dy->prev == NULL || dy->ar == NULL || dy->v == NULL) {
		qw_dyn_free(dy);
		return NULL;
	}
	qw_dyn_reset(dy);
	return dy;
}

void qw_dyn_reset(struct qw_dyn *dy)
{
	dy->n = 0;
	memset(dy->ar, 0, 4 * dy->p * sizeof *dy->ar);
	dy->have_prev = 0;
}

/* Whether the previous reading forms a lag pair with one at time t. */
static int dyn_lagged(const struct qw_dyn *dy, double t)
{
	double dt = t - dy->prev_t;

	return dy->have_prev && dt >= 0.0 && dt <= dy->max_gap;
}

/* ar1 coefficient of channel i: s12 / (s11 + floor^2); a channel with a
 * floor of 0 (auto) uses the variance alone, 0 before any spread. */
static double dyn_phi(const struct qw_dyn *dy, size_t i)
{
	const double *a = dy->ar + 4 * i; /* m1, m2, s11, s12 */
	double fl = dy->floor != NULL ? dy->floor[i] : 0.0;
	double den = a[2] + fl * fl;

	return den > 0.0 ? a[3] / den : 0.0;
}

int qw_dyn_vector(struct qw_dyn *dy, double t, const double *x,
		  int *complete)
{
	size_t i, p = dy->p, m = 0;
	int lag = dy->kind == QW_DYN_NONE || dyn_lagged(dy, t);

	switch (dy->kind) {
	case QW_DYN_NONE:
		memcpy(dy->v, x, p * sizeof *x);
		break;
	case QW_DYN_VAR1:
		for (i = 0; i < p; i++) {
			dy->v[i] = lag ? dy->prev[i] : NAN;
			dy->v[p + i] = x[i];
		}
		break;
	case QW_DYN_AR1:
		if (!lag)
			return 0;
		for (i = 0; i < p; i++) {
			const double *a = dy->ar + 4 * i;

			if (isnan(x[i]) || isnan(dy->prev[i]))
				dy->v[i] = NAN;
			else if (dy->n == 0)
				dy->v[i] = 0.0; /* the first pair is the mean */
			else
				dy->v[i] = x[i] - a[1] -
					   dyn_phi(dy, i) * (dy->prev[i] - a[0]);
		}
		break;
	}
	for (i = 0; i < dy->dim; i++)
		m += isnan(dy->v[i]) ? 0u : 1u;
	*complete = m == dy->dim;
	return lag;
}

void qw_dyn_learn(struct qw_dyn *dy, const double *x, double w)
{
	size_t i;

	if (dy->kind != QW_DYN_AR1)
		return;
	for (i = 0; i < dy->p; i++) {
		double *a = dy->ar + 4 * i, d1, d2;

		/* A partial pair (learned only once the model is warm, so
		 * never the first): its complete channels alone. */
		if (isnan(x[i]) || isnan(dy->prev[i]))
			continue;
		if (dy->n == 0) {
			a[0] = dy->prev[i];
			a[1] = x[i];
			a[2] = a[3] = 0.0;
			continue;
		}
		/* EW means and co-moments, the update of ewcov.c in one
		 * dimension: S' = (1-w)(S + w d1 d2). */
		d1 = dy->prev[i] - a[0];
		d2 = x[i] - a[1];
		a[0] += w * d1;
		a[1] += w * d2;
		a[2] = (1.0 - w) * (a[2] + w * d1 * d1);
		a[3] = (1.0 - w) * (a[3] + w * d1 * d2);
	}
	dy->n++;
}

void qw_dyn_step(struct qw_dyn *dy, double t, const double *x)
{
	if (dy->kind == QW_DYN_NONE)
		return;
	memcpy(dy->prev, x, dy->p * sizeof *x);
	dy->prev_t = t;
	dy->have_prev = 1;
}

void qw_dyn_break(struct qw_dyn *dy)
{
	dy->have_prev = 0;
}

/* State: n, have_prev, prev_t, prev[p], ar[4p]. */
size_t qw_dyn_state_len(const struct qw_dyn *dy)
{
	if (dy->kind == QW_DYN_NONE)
		return 0;
	return 2 * sizeof(uint64_t) + (1 + 5 * dy->p) * sizeof(double);
}

void qw_dyn_state_get(const struct qw_dyn *dy, unsigned char *b)
{
	uint64_t h[2] = {dy->n, (uint64_t)dy->have_prev};

	if (dy->kind == QW_DYN_NONE)
		return;
	memcpy(b, h, sizeof h);
	b += sizeof h;
	memcpy(b, &dy->prev_t, sizeof(double));
	b += sizeof(double);
	memcpy(b, dy->prev, dy->p * sizeof(double));
	b += dy->p * sizeof(double);
	memcpy(b, dy->ar, 4 * dy->p * sizeof(double));
}

int qw_dyn_state_check(const struct qw_dyn *dy, const unsigned char *b)
{
	uint64_t h[2];
	double a;
	size_t i, p = dy->p;
	const unsigned char *vals = b + sizeof h + sizeof(double);

	if (dy->kind == QW_DYN_NONE)
		return 0;
	memcpy(h, b, sizeof h);
	memcpy(&a, b + sizeof h, sizeof a);
	if (h[1] > 1 || isnan(a))
		return QW_ERROR(QW_EFORMAT);
	for (i = 0; i < 5 * p; i++) {
		memcpy(&a, vals + i * sizeof a, sizeof a);
		/* prev may hold NaN (missing); the ar1 sums are finite and
		 * the variances not negative. */
		if (i < p ? isinf(a)
			  : (!isfinite(a) || ((i - p) % 4 == 2 && a < 0.0)))
			return QW_ERROR(QW_EFORMAT);
	}
	return 0;
}

int qw_dyn_state_set(struct qw_dyn *dy, const unsigned char *b)
{
	uint64_t h[2];
	size_t p = dy->p;
	int rc;

	if (dy->kind == QW_DYN_NONE)
		return 0;
	if ((rc = qw_dyn_state_check(dy, b)) != 0)
		return rc;
	memcpy(h, b, sizeof h);
	b += sizeof h;
	dy->n = h[0];
	dy->have_prev = (int)h[1];
	memcpy(&dy->prev_t, b, sizeof(double));
	b += sizeof(double);
	memcpy(dy->prev, b, p * sizeof(double));
	memcpy(dy->ar, b + p * sizeof(double), 4 * p * sizeof(double));
	return 0;
}
