/* detector.c: one sensor group, reading by reading.
 *
 * Per reading: check it (Inf rejected, NaN = missing, time order under a
 * half-life in seconds); score it before learning (ewcov.c: one fused
 * sweep for a complete reading, the marginal model for a partial one);
 * compare q with the limit for its degrees of freedom and the model's
 * current effective size (limit.c, cached per dof on a grid of nu, see
 * QW_DET_NU_RTOL); feed the alarm state (alarm.c);
 * explain readings over the limit (explain.c); then learn or not:
 *  - during warm-up everything complete is learned;
 *  - after it, a reading over the limit is skipped, clipped to the limit's
 *    edge, or learned, as configured; while the group is in alarm nothing
 *    is learned (the guard: a fault must not become the new normal), unless
 *    the policy is "all";
 *  - partial readings are scored on the observed channels; once the model
 *    is warm they are learned by the same rules, by their expected step
 *    under the model (qw_ewcov_learn_partial, the E-step of EM), so a
 *    channel that drops out for hours neither freezes the model while the
 *    plant moves on nor teaches it a value it never saw (partial = hold
 *    keeps them out); in warm-up, with too little model to impute from,
 *    only complete readings are learned;
 *  - relearn_after readings spent in alarm re-baseline the group (the
 *    configured policy for a lasting change of normal).
 * Guard bias: a model that learns only readings with q < c (skip) learns
 * the truncated Gaussian, whose covariance is kappa Sigma with
 *   kappa = P(chi2(p+2) < c) / P(chi2(p) < c)
 * (the second moment of x 1{x' Sigma^-1 x < c} is Sigma P(chi2(p+2) < c));
 * under clip, kappa = P(chi2(p+2) < c) + (c/p) P(chi2(p) > c).  The scores
 * come out 1/kappa too large, so the limit is divided by
 * 1 - (1 - kappa) t, t the share of the model learned under the guard
 * (tracked like the EW weights).  Tiny at alpha 1e-6, but 3-7% of the
 * scale at the alpha of 1-3% that k-of-m rules need, and a raise rate goes
 * as alpha^k.
 * Whitening (dynamics.c) changes what the model scores: the stacked
 * [x_{t-1}; x_t] under var1 (scored on its innovation part, with the
 * effective size reduced by the p conditioning channels: a regression on
 * k regressors leaves nu - k degrees of freedom), per-channel AR(1)
 * innovations under ar1.  MEWMA mode (mewma.c) charts an EWMA z of the
 * standardised residual y = L^-1 r that the sweep leaves behind (rescaled
 * by the mean of the F form, scale nu/(nu-p-1) per channel, so estimated
 * parameters do not inflate it), scored against z's own EW covariance
 * (det_mewma), against a limit for the raise rate; the guard then uses
 * each reading's own score against the plain limit.
 * Workload: the per-reading path is the ewcov sweep plus O(p); no
 * allocation after qw_detector_alloc. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>

#include "detector_int.h"

/* Limit cache: the F quantile is computed at nu rounded down to a
 * geometric grid of this relative step, so the limit is a pure function of
 * the model (identical after a restore) and recomputed ~ln(nu)/step times
 * in a model's life; the rounding moves the limit by well under 1e-4. */
#define QW_DET_NU_RTOL 1e-3
/* IEEE 754 binary64: the exponent field, and one in its lowest bit. */
#define DET_EXP_BITS UINT64_C(0x7ff0000000000000)
#define DET_EXP_ONE (UINT64_C(1) << 52)
/* Readings learned between full self-checks of the factor. */
#define QW_DET_VERIFY_EVERY 1024
/* Defaults (our choices, documented in quadwatch.ini(5)). */
#define QW_DEF_HALF_LIFE 2000.0 /* readings: ~ 3.3 min at 10 Hz */
#define QW_DEF_RATE 1.0         /* readings per second */
#define QW_DEF_ALARMS_PER_DAY 1.0
#define QW_DEF_WARMUP_PER_P 10  /* readings per channel, at least ... */
#define QW_DEF_WARMUP_MIN 100   /* ... this many, so nu >> p at the start */
#define QW_DEF_CLEAR_N 5        /* readings under the limit to clear */


void qw_params_default(struct qw_params *par, size_t p)
{
	uint64_t warm = (uint64_t)p * QW_DEF_WARMUP_PER_P;

	memset(par, 0, sizeof *par);
	par->p = p;
	par->half_life = QW_DEF_HALF_LIFE;
	par->time_based = 0;
	par->rate = QW_DEF_RATE;
	par->alarms_per_day = QW_DEF_ALARMS_PER_DAY;
	par->warmup = warm > QW_DEF_WARMUP_MIN ? warm : QW_DEF_WARMUP_MIN;
	par->persist_k = 1;
	par->persist_m = 1;
	par->clear_n = QW_DEF_CLEAR_N;
	par->floor = NULL;
	par->learn = QW_LEARN_SKIP;
	par->partial = QW_PARTIAL_LEARN;
	par->relearn_after = 0;
	par->correct = 1;
	par->dynamics = QW_DYN_NONE;
	par->max_gap = 0.0;
	par->mode = QW_MODE_PLAIN;
	par->smoothing = QW_DEF_SMOOTHING;
	par->fixed_limit = 0.0;
	par->limit_factor = 1.0;
}

int qw_params_check(const struct qw_params *par)
{
	double alpha;
	size_t i;

	if (par->p < 1 || par->p > QW_MAX_P)
		return QW_ERROR(QW_EINVAL);
	if ((par->dynamics == QW_DYN_VAR1 && 2 * par->p > QW_MAX_P) ||
	    (unsigned)par->dynamics > QW_DYN_VAR1 ||
	    (unsigned)par->mode > QW_MODE_MEWMA)
		return QW_ERROR(QW_EINVAL);
	/* Infinite: no forgetting (QW_HALF_LIFE_NONE). */
	if (!(par->half_life > 0) || isnan(par->half_life))
		return QW_ERROR(QW_EINVAL);
	if (par->clear_n < 1 || (unsigned)par->learn > QW_LEARN_ALL ||
	    (unsigned)par->partial > QW_PARTIAL_LEARN)
		return QW_ERROR(QW_EINVAL);
	if (!(par->max_gap >= 0) || !(par->fixed_limit >= 0) ||
	    !isfinite(par->fixed_limit) || !(par->limit_factor > 0) ||
	    !isfinite(par->limit_factor))
		return QW_ERROR(QW_EINVAL);
	/* MEWMA smooths already; its limit is solved for 1-of-1 raises. */
	if (par->mode == QW_MODE_MEWMA &&
	    (!(par->smoothing > 0 && par->smoothing <= 1) ||
	     par->persist_k != 1 || par->persist_m != 1))
		return QW_ERROR(QW_EINVAL);
	if (par->floor != NULL)
		for (i = 0; i < par->p; i++)
			if (!(par->floor[i] >= 0) || !isfinite(par->floor[i]))
				return QW_ERROR(QW_EINVAL);
	return qw_limit_alpha(par->alarms_per_day, par->rate, par->persist_k,
			      par->persist_m, &alpha);
}

double qw_params_max_gap(const struct qw_params *par)
{
	return par->max_gap > 0 ? par->max_gap : QW_GAP_INTERVALS / par->rate;
}

void qw_detector_free(qw_detector *d)
{
	if (d == NULL)
		return;
	qw_ewcov_free(d->ew);
	qw_ewcov_free(d->zew);
	qw_dyn_free(d->dyn);
	free(d->floor);
	free(d->vfloor);
	free(d->lim_f);
	free(d->lim_nu);
	free(d->lim_hi);
	free(d->lim_chi);
	free(d->z);
	free(d->work);
	free(d->vlag);
	free(d->mask);
	free(d->contrib);
	free(d);
}

/* EW weight per step of one reading (half_life in readings) or of dt
 * seconds: lam = 1 - 2^(-steps/h), via expm1 for small steps; 0 (weights
 * 1/n) without forgetting. */
static double det_lam(double steps, double half_life)
{
	return -expm1(-M_LN2 * steps / half_life);
}

/* The EW weight of the next reading in time mode, dt seconds after the
 * last learned one: det_lam, recomputed only when dt changes (regular
 * sampling repeats it). */
static double det_lam_dt(qw_detector *d, double dt)
{
	if (dt != d->lam_dt) {
		d->lam_dt_w = det_lam(dt, d->par.half_life);
		d->lam_dt = dt;
	}
	return d->lam_dt_w;
}

/* qw_ewcov_weight(ew, lam) = max(lam, 1/(n+1)), without its division once
 * lam has won: 1/(n+1) only falls as n grows, so lam wins for every n at
 * or above the count where it last won with the same lam. */
static double det_weight(qw_detector *d, double lam)
{
	uint64_t n = qw_ewcov_count(d->ew);
	double w;

	if (lam == d->w_lam && n >= d->w_from)
		return lam;
	w = qw_ewcov_weight(d->ew, lam);
	if (w == lam) {
		d->w_lam = lam;
		d->w_from = n;
	}
	return w;
}

/* kappa of the file top for a guard at the chi-square alpha point. */
static double det_kappa(double alpha, size_t p, enum qw_learn learn)
{
	double dp = (double)p, c = gsl_cdf_chisq_Qinv(alpha, dp);
	double in2 = gsl_cdf_chisq_P(c, dp + 2.0);

	if (learn == QW_LEARN_SKIP)
		return in2 / (1.0 - alpha);
	if (learn == QW_LEARN_CLIP)
		return in2 + c / dp * alpha;
	return 1.0;
}

/* The parts sized by p and the model's dimension; 0 or QW_ENOMEM. */
static int det_alloc_parts(qw_detector *d, const struct qw_params *par)
{
	size_t p = par->p, dim, i;
	double gap = qw_params_max_gap(par);

	d->floor = calloc(p, sizeof *d->floor);
	d->dyn = d->floor ? qw_dyn_alloc(par->dynamics, p, gap, d->floor)
			  : NULL;
	if (d->dyn == NULL)
		return QW_ERROR(QW_ENOMEM);
	dim = d->dim = d->dyn->dim;
	d->vfloor = calloc(dim, sizeof *d->vfloor);
	d->lim_f = calloc(p + 1, sizeof *d->lim_f);
	d->lim_nu = calloc(p + 1, sizeof *d->lim_nu);
	d->lim_hi = calloc(p + 1, sizeof *d->lim_hi);
	d->lim_chi = calloc(p + 1, sizeof *d->lim_chi);
	d->z = calloc(p, sizeof *d->z);
	d->work = malloc(qw_explain_work_len(dim) * sizeof *d->work);
	d->vlag = malloc(dim * sizeof *d->vlag);
	d->mask = malloc(dim);
	d->contrib = malloc(dim * sizeof *d->contrib);
	if (!d->vfloor || !d->lim_f || !d->lim_nu || !d->lim_hi ||
	    !d->lim_chi || !d->z ||
	    !d->work || !d->vlag || !d->mask || !d->contrib)
		return QW_ERROR(QW_ENOMEM);
	if (par->floor != NULL)
		memcpy(d->floor, par->floor, p * sizeof *d->floor);
	/* var1: both halves of [x_{t-1}; x_t] are the same channels. */
	for (i = 0; i < dim; i++)
		d->vfloor[i] = d->floor[i % p];
	d->ew = qw_ewcov_alloc(dim, d->vfloor);
	if (d->ew == NULL)
		return QW_ERROR(QW_ENOMEM);
	if (par->mode == QW_MODE_MEWMA) {
		/* G's floor: a small share of z's iid standard deviation. */
		for (i = 0; i < p; i++)
			d->z[i] = QW_MEWMA_Z_FLOOR *
				  sqrt(par->smoothing / (2.0 - par->smoothing));
		d->zew = qw_ewcov_alloc(p, d->z);
		memset(d->z, 0, p * sizeof *d->z);
		if (d->zew == NULL)
			return QW_ERROR(QW_ENOMEM);
	}
	return 0;
}

qw_detector *qw_detector_alloc(const struct qw_params *par)
{
	qw_detector *d;

	gsl_set_error_handler_off(); /* GSL's default handler aborts */
	if (par == NULL || qw_params_check(par) != 0)
		return NULL;
	d = calloc(1, sizeof *d);
	if (d == NULL)
		goto fail;
	d->par = *par;
	if (det_alloc_parts(d, par) != 0)
		goto fail;
	d->par.floor = d->floor;
	qw_limit_alpha(par->alarms_per_day, par->rate, par->persist_k,
		       par->persist_m, &d->alpha);
	d->lam = det_lam(par->time_based ? 1.0 / par->rate : 1.0,
			 par->half_life);
	d->lam_dt = NAN; /* no dt cached */
	d->w_lam = NAN;
	qw_alarm_init(&d->alarm, par->persist_k, par->persist_m, par->clear_n);
	d->kappa = det_kappa(d->alpha, par->p, par->learn);
	if (par->mode == QW_MODE_MEWMA) {
		d->mewma_h = qw_mewma_limit(par->alarms_per_day /
						    (par->rate *
						     QW_SECONDS_PER_DAY),
					    (unsigned)par->p, par->smoothing);
		if (!(d->mewma_h > 0))
			goto fail;
	}
	return d;
fail:
	qw_detector_free(d);
	return NULL;
}

int qw_detector_rebaseline(qw_detector *d)
{
	int was = d->alarm.in_alarm;

	qw_ewcov_reset(d->ew);
	qw_dyn_reset(d->dyn);
	qw_alarm_reset(&d->alarm);
	memset(d->lim_nu, 0, (d->par.p + 1) * sizeof *d->lim_nu);
	memset(d->lim_hi, 0, (d->par.p + 1) * sizeof *d->lim_hi);
	memset(d->z, 0, d->par.p * sizeof *d->z);
	if (d->zew != NULL)
		qw_ewcov_reset(d->zew);
	d->alarm_run = 0;
	d->tshare = 0.0;
	d->frozen = 0;
	d->cnt.rebaselines++;
	return was;
}

/* The plain limit for dof channels at effective size nu (the model's,
 * less its conditioning components). */
static double det_limit(qw_detector *d, unsigned dof, double nu,
			double *nu_out, double *scale_out)
{
	double scale = qw_det_scale(d), f = d->par.limit_factor;

	if (d->par.fixed_limit > 0 && dof == d->par.p) {
		*nu_out = INFINITY;
		*scale_out = 1.0;
		return d->par.fixed_limit;
	}
	if (!d->par.correct) {
		nu = INFINITY;
		scale = 1.0;
	}
	*scale_out = scale;
	if (!(nu > dof - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale)) {
		*nu_out = nu;
		return INFINITY;
	}
	if (nu >= d->lim_nu[dof] && nu < d->lim_hi[dof]) {
		*nu_out = d->lim_nu[dof]; /* same grid cell as last time */
		return f * scale * d->lim_f[dof];
	}
	if (isfinite(nu)) {
		double step = log1p(QW_DET_NU_RTOL), k = floor(log(nu) / step);
		double grid = exp(k * step);

		/* Never round below the usable range. */
		if (grid > dof - 1.0 + QW_LIMIT_NU_MARGIN) {
			d->lim_hi[dof] = exp((k + 1.0) * step);
			nu = grid;
		} else {
			d->lim_hi[dof] = nu; /* not cached */
		}
	}
	*nu_out = nu; /* the p-value uses the limit's own nu */
	if (d->lim_nu[dof] != nu) {
		if (!(d->lim_chi[dof] > 0)) /* once per dof: alpha is fixed */
			d->lim_chi[dof] = qw_limit_chisq(d->alpha, dof);
		d->lim_f[dof] = qw_limit_corrected_chi(d->alpha, dof, nu, 1.0,
						       d->lim_chi[dof]);
		d->lim_nu[dof] = nu;
	}
	return f * scale * d->lim_f[dof];
}

/* Screens x: marks observed channels (the x part of mask); 0, or a
 * rejection. */
static int det_screen(qw_detector *d, const double *x, size_t *nobs)
{
	size_t i, m = 0, p = d->par.p;
	uint64_t odd = 0, bits;

	/* The common case in one branch-free (vectorisable) pass over the
	 * bits: the exponent field plus one carries into the sign bit only
	 * when it is all ones (Inf or NaN). */
	for (i = 0; i < p; i++) {
		memcpy(&bits, x + i, sizeof bits);
		odd |= (bits & DET_EXP_BITS) + DET_EXP_ONE;
	}
	if (!(odd >> 63)) {
		*nobs = p;
		return 0;
	}
	for (i = 0; i < p; i++) {
		if (isinf(x[i])) {
			d->cnt.rej_nonfinite++;
			return QW_ERROR(QW_ERANGE);
		}
		m += isnan(x[i]) ? 0u : 1u;
	}
	if (m == 0) {
		d->cnt.rej_empty++;
		return QW_ERROR(QW_ENODATA);
	}
	*nobs = m;
	return 0;
}

/* Score of a partial model vector v: its observed part against the
 * marginal model, less (var1) the score of the observed lags alone, the
 * conditional score of x_t given x_{t-1}.  *k: conditioning components. */
static int det_score_partial(qw_detector *d, const double *v, double *q,
			     unsigned *dof, double *k)
{
	size_t i, p = d->par.p;
	double ql = 0.0, qv;
	unsigned dl = 0, dv;
	int rc;

	*k = 0.0;
	if (d->par.dynamics == QW_DYN_VAR1) {
		for (i = 0; i < p; i++) {
			d->vlag[i] = v[i];
			d->vlag[p + i] = NAN;
			dl += isnan(v[i]) ? 0u : 1u;
		}
		/* First: the residual left behind is then v's own. */
		if (dl > 0 && (rc = qw_ewcov_score_subset(d->ew, d->vlag, &ql,
							  &dl)) != 0)
			return rc;
		*k = (double)dl;
	}
	if ((rc = qw_ewcov_score_subset(d->ew, v, &qv, &dv)) != 0)
		return rc;
	*q = qv > ql ? qv - ql : 0.0;
	*dof = dv - dl;
	return 0;
}

/* Scores the model vector into res (before learning); 0 or a counted
 * rejection.  *k: the conditioning components behind res->q. */
static int det_score(qw_detector *d, const double *v, int complete,
		     double w, struct qw_result *res, double *k)
{
	const double *y;
	size_t j;
	int rc;

	if (complete) {
		rc = qw_ewcov_score(d->ew, v, w, &res->q);
		res->dof = (unsigned)d->par.p;
		*k = qw_det_k(d);
		if (rc == 0 && *k > 0) {
			/* var1: the innovation's part of y = L^-1 r. */
			y = qw_ewcov_solved(d->ew);
			res->q = 0.0;
			for (j = d->par.p; j < d->dim; j++)
				res->q += y[j] * y[j];
		}
	} else {
		rc = det_score_partial(d, v, &res->q, &res->dof, k);
	}
	if (rc == QW_ERANGE) {
		/* A non-finite score: the reading overflowed, or the factor
		 * itself is corrupt (then rebuilt from the floor). */
		if (qw_ewcov_verify(d->ew) != 0) {
			d->cnt.numeric++;
			return QW_ERROR(QW_ENUMERIC);
		}
		d->cnt.rej_overflow++;
		return rc;
	}
	if (rc != 0) {
		/* A factor that cannot be factored on a subset is corrupt. */
		d->cnt.numeric++;
		qw_ewcov_verify(d->ew);
		return rc;
	}
	res->limit = det_limit(d, res->dof, qw_det_nu(d, *k), &res->nu,
			       &res->scale);
	return 0;
}

/* MEWMA step (file top) on the complete reading just scored:
 *   z' = (1-rho) z + rho y / sqrt(c),   res->q = z' G^-1 z'
 * with G the EW covariance of z itself (its own model, zew).  For iid
 * residuals G = rho/(2-rho) I and this is the chart of Lowry et al.; but a
 * residual that keeps some memory (a plant no first-order model whitens
 * fully: quantised or slow channels, a load that drives several channels
 * with a lag) makes z wander wider and its components move together, by
 * 1 + 2 sum_k (1-rho)^k r_k for residual autocorrelations r_k, and a limit
 * for iid residuals then alarms all day (150 a day instead of 1 on the
 * demo plant's pump skid).  Learning G from the readings the chart accepts
 * keeps T2 ~ chi-square(p) in steady state, which is what the limit
 * assumes.  Before G has readings the iid form stands in (warm-up). */
static void det_mewma(qw_detector *d, double k, struct qw_result *res)
{
	double nu = qw_det_nu(d, k), dp = (double)d->par.p, c, t2, q;

	c = d->par.correct ? qw_det_scale(d) * nu / (nu - dp - 1.0) : 1.0;
	/* Too little data for the mean of F: nothing enters z yet. */
	t2 = qw_mewma_step(d->z, d->par.p, d->par.smoothing,
			   qw_ewcov_solved(d->ew) + (size_t)k,
			   nu > dp + 1.0 && isfinite(c) ? 1.0 / sqrt(c) : 0.0);
	res->q = t2;
	if (qw_ewcov_count(d->zew) > 0 &&
	    qw_ewcov_score(d->zew, d->z, qw_ewcov_weight(d->zew, d->lam),
			   &q) == 0)
		res->q = q;
	res->limit = d->par.fixed_limit > 0
			     ? d->par.fixed_limit
			     : d->par.limit_factor * d->mewma_h;
	res->nu = INFINITY;
	res->scale = 1.0;
}

/* Learns G from a reading the chart accepts, once the model has learned
 * half its warm-up or QW_MEWMA_SETTLE readings, whichever is fewer
 * (before that, z carries the model's own settling; a fit, which never
 * leaves warm-up, learns G too). */
static void det_mewma_learn(qw_detector *d, const struct qw_result *res)
{
	if (res->over || d->alarm.in_alarm || res->event == QW_EVENT_CLEAR ||
	    qw_ewcov_count(d->ew) <
		    (d->par.warmup < QW_MEWMA_SETTLE ? d->par.warmup
						      : QW_MEWMA_SETTLE) / 2)
		return;
	if (qw_ewcov_count(d->zew) == 0)
		qw_ewcov_first(d->zew, d->z);
	else
		qw_ewcov_learn(d->zew, 1.0);
}

/* Learning decision and step (file top).  over, q, limit: the reading's
 * own score against its plain limit; v its model vector, complete or (once
 * warm) partial.  Returns 1 if learned. */
static int det_learn(qw_detector *d, const double *x, const double *v,
		     int complete, int warm, double w, int over, double q,
		     double limit, int event)
{
	int rc;

	double gain = 1.0;

	if (warm && d->par.learn != QW_LEARN_ALL) {
		if (over && d->par.learn == QW_LEARN_SKIP)
			return 0;
		if (d->alarm.in_alarm || event == QW_EVENT_CLEAR)
			return 0;
		if (over)
			gain = sqrt(limit / q);
	}
	rc = complete ? qw_ewcov_learn(d->ew, gain)
		      : qw_ewcov_learn_partial(d->ew, v, w, gain);
	if (rc != 0)
		return 0;
	qw_dyn_learn(d->dyn, x, w);
	d->tshare = (1.0 - w) * d->tshare + (warm ? w : 0.0);
	d->cnt.learned++;
	/* Self-check of the whole factor now and then: every installed
	 * factor is finite by construction (the double buffer), so this
	 * guards against corruption from outside, at O(p^2) per
	 * QW_DET_VERIFY_EVERY readings. */
	if (d->cnt.learned % QW_DET_VERIFY_EVERY == 0 &&
	    qw_ewcov_verify(d->ew) != 0)
		d->cnt.numeric++;
	return 1;
}

/* Attribution of the reading over the limit: the MYT conditional terms
 * of the model vector's observed components; under var1 only the x_t
 * channels are ranked (removing x_t,i from the joint score leaves the
 * lag's score as it is, so its drop is the innovation's own). */
static void det_explain(qw_detector *d, const double *v,
			struct qw_result *res)
{
	size_t i, n, m = 0, off = d->dim - d->par.p;

	for (i = 0; i < d->dim; i++)
		d->mask[i] = (unsigned char)!isnan(v[i]);
	n = qw_explain(qw_ewcov_factor(d->ew), d->dim,
		       qw_ewcov_residual(d->ew), d->mask, d->work, d->contrib);
	for (i = 0; i < n; i++) {
		if (d->contrib[i].channel < off)
			continue;
		d->contrib[m] = d->contrib[i];
		d->contrib[m++].channel -= (unsigned)off;
	}
	res->ncontrib = m;
	res->contrib = d->contrib;
}

/* The first reading that fills the model vector: the mean, nothing to
 * score. */
static void det_first(qw_detector *d, double t, const double *x,
		      const double *v, struct qw_result *res)
{
	qw_ewcov_first(d->ew, v);
	qw_dyn_learn(d->dyn, x, 1.0);
	d->last_t = t;
	d->cnt.learned++;
	res->learned = 1;
}

/* Alarm rule, attribution and learning for a scored reading (x the
 * reading, v its model vector). */
static void det_decide(qw_detector *d, double t, const double *x,
		       const double *v, int complete, int learn, double w,
		       struct qw_result *res, double k)
{
	double q = res->q, limit = res->limit;
	int warm, over;

	if (d->par.mode == QW_MODE_MEWMA)
		det_mewma(d, k, res);
	warm = qw_ewcov_count(d->ew) >= d->par.warmup;
	res->over = warm && res->q > res->limit;
	if (warm) {
		d->cnt.exceedances += (uint64_t)res->over;
		res->event = qw_alarm_add(&d->alarm, res->over);
		d->cnt.alarms += res->event == QW_EVENT_RAISE;
	}
	if (res->over)
		det_explain(d, v, res);
	/* Under MEWMA the guard watches each reading at its plain limit. */
	over = d->par.mode == QW_MODE_MEWMA ? warm && q > limit : res->over;
	if (learn && (complete ||
		      (warm && d->par.partial == QW_PARTIAL_LEARN)))
		res->learned = det_learn(d, x, v, complete, warm, w, over, q,
					 limit, res->event);
	if (res->learned && d->par.mode == QW_MODE_MEWMA)
		det_mewma_learn(d, res);
	if (res->learned)
		d->last_t = t;
}

int qw_detector_add_flags(qw_detector *d, double t, const double *x,
			  unsigned flags, struct qw_result *res)
{
	size_t nobs = 0;
	double w, lam = d->lam, k = 0.0;
	const double *v = x;
	int rc, complete, lag = 1, learn;

	memset(res, 0, sizeof *res);
	res->limit = INFINITY;
	res->in_alarm = d->alarm.in_alarm;
	d->cnt.readings++;
	if ((rc = det_screen(d, x, &nobs)) != 0) {
		qw_dyn_break(d->dyn); /* no lag pair across a rejection */
		return rc;
	}
	if (d->par.time_based && qw_ewcov_count(d->ew) > 0) {
		if (!(t >= d->last_t)) {
			d->cnt.rej_time++;
			return QW_ERROR(QW_ETIME);
		}
		/* After qw_detector_counters_reset no time is known: the
		 * nominal step. */
		lam = isfinite(d->last_t) ? det_lam_dt(d, t - d->last_t)
					  : d->lam;
	}
	if (nobs < d->par.p)
		d->cnt.partial++;
	/* Without whitening the model vector is the reading itself. */
	if (d->par.dynamics == QW_DYN_NONE) {
		complete = nobs == d->par.p;
	} else {
		lag = qw_dyn_vector(d->dyn, t, x, &complete);
		v = d->dyn->v;
	}
	if (!lag)
		d->cnt.unlagged++;
	learn = !d->frozen && !(flags & QW_ADD_NOLEARN);
	if (!lag && d->par.dynamics == QW_DYN_AR1)
		goto done; /* no innovation without the previous reading */
	if (qw_ewcov_count(d->ew) == 0) {
		if (complete && learn)
			det_first(d, t, x, v, res);
		goto done;
	}
	/* MEWMA charts complete readings only: z holds over a partial one. */
	if (!complete && d->par.mode == QW_MODE_MEWMA)
		goto done;
	w = det_weight(d, lam);
	if ((rc = det_score(d, v, complete, w, res, &k)) != 0) {
		qw_dyn_break(d->dyn);
		return rc;
	}
	res->scored = 1;
	d->cnt.scored++;
	det_decide(d, t, x, v, complete, learn, w, res, k);
	d->alarm_run = d->alarm.in_alarm ? d->alarm_run + 1 : 0;
	if (d->par.relearn_after > 0 && d->alarm_run >= d->par.relearn_after) {
		qw_detector_rebaseline(d);
		res->event = QW_EVENT_CLEAR;
	}
done:
	qw_dyn_step(d->dyn, t, x);
	res->in_alarm = d->alarm.in_alarm;
	return 0;
}

int qw_detector_add(qw_detector *d, double t, const double *x,
		    struct qw_result *res)
{
	return qw_detector_add_flags(d, t, x, 0, res);
}
