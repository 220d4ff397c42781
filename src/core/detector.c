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
 *  - partial readings are scored but never learned, so a missing channel
 *    cannot bias the model;
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
 * Workload: the per-reading path is the ewcov sweep plus O(p); no
 * allocation after qw_detector_alloc. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>

#include "internal.h"
#include "quadwatch.h"

/* Limit cache: the F quantile is computed at nu rounded down to a
 * geometric grid of this relative step, so the limit is a pure function of
 * the model (identical after a restore) and recomputed ~ln(nu)/step times
 * in a model's life; the rounding moves the limit by well under 1e-4. */
#define QW_DET_NU_RTOL 1e-3
/* Readings learned between full self-checks of the factor. */
#define QW_DET_VERIFY_EVERY 1024
/* Defaults (our choices, documented in quadwatch.ini(5)). */
#define QW_DEF_HALF_LIFE 2000.0 /* readings: ~ 3.3 min at 10 Hz */
#define QW_DEF_RATE 1.0         /* readings per second */
#define QW_DEF_ALARMS_PER_DAY 1.0
#define QW_DEF_WARMUP_PER_P 10  /* readings per channel, at least ... */
#define QW_DEF_WARMUP_MIN 100   /* ... this many, so nu >> p at the start */
#define QW_DEF_CLEAR_N 5        /* readings under the limit to clear */

struct qw_detector {
	struct qw_params par;      /* par.floor points at floor */
	double *floor;             /* p configured floors (0 = auto) */
	qw_ewcov *ew;
	struct qw_alarm alarm;
	double alpha;              /* per-reading exceedance probability */
	double lam;                /* EW weight per reading (readings mode),
				      or at the nominal rate (time mode) */
	double *lim_f;             /* p+1: cached nu d/(nu-d+1) F^-1, by dof */
	double *lim_nu;            /* p+1: grid nu each was computed at */
	double *lim_hi;            /* p+1: the next grid point: the cached
				      value holds for nu in [lim_nu, lim_hi) */
	double last_t;             /* time of the last learned reading */
	uint64_t alarm_run;        /* readings since the raise */
	double kappa;              /* guard bias of Sigma (file top) */
	double tshare;             /* share of the model learned guarded */
	struct qw_counters cnt;
	double *work;              /* explain workspace */
	unsigned char *mask;       /* p: observed channels */
	struct qw_contrib *contrib;/* p */
};

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
	par->relearn_after = 0;
	par->correct = 1;
}

int qw_params_check(const struct qw_params *par)
{
	double alpha;
	size_t i;

	if (par->p < 1 || par->p > QW_MAX_P)
		return QW_ERROR(QW_EINVAL);
	if (!(par->half_life > 0) || !isfinite(par->half_life))
		return QW_ERROR(QW_EINVAL);
	if (par->clear_n < 1 || (unsigned)par->learn > QW_LEARN_ALL)
		return QW_ERROR(QW_EINVAL);
	if (par->floor != NULL)
		for (i = 0; i < par->p; i++)
			if (!(par->floor[i] >= 0) || !isfinite(par->floor[i]))
				return QW_ERROR(QW_EINVAL);
	return qw_limit_alpha(par->alarms_per_day, par->rate, par->persist_k,
			      par->persist_m, &alpha);
}

void qw_detector_free(qw_detector *d)
{
	if (d == NULL)
		return;
	qw_ewcov_free(d->ew);
	free(d->floor);
	free(d->lim_f);
	free(d->lim_nu);
	free(d->lim_hi);
	free(d->work);
	free(d->mask);
	free(d->contrib);
	free(d);
}

/* EW weight per step of one reading (half_life in readings) or of dt
 * seconds: lam = 1 - 2^(-steps/h), via expm1 for small steps. */
static double det_lam(double steps, double half_life)
{
	return -expm1(-M_LN2 * steps / half_life);
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

qw_detector *qw_detector_alloc(const struct qw_params *par)
{
	qw_detector *d;
	size_t p;

	gsl_set_error_handler_off(); /* GSL's default handler aborts */
	if (par == NULL || qw_params_check(par) != 0)
		return NULL;
	p = par->p;
	d = calloc(1, sizeof *d);
	if (d == NULL)
		goto fail;
	d->par = *par;
	d->floor = calloc(p, sizeof *d->floor);
	d->lim_f = calloc(p + 1, sizeof *d->lim_f);
	d->lim_nu = calloc(p + 1, sizeof *d->lim_nu);
	d->lim_hi = calloc(p + 1, sizeof *d->lim_hi);
	d->work = malloc(qw_explain_work_len(p) * sizeof *d->work);
	d->mask = malloc(p);
	d->contrib = malloc(p * sizeof *d->contrib);
	if (!d->floor || !d->lim_f || !d->lim_nu || !d->lim_hi || !d->work ||
	    !d->mask ||
	    !d->contrib)
		goto fail;
	if (par->floor != NULL)
		memcpy(d->floor, par->floor, p * sizeof *d->floor);
	d->par.floor = d->floor;
	d->ew = qw_ewcov_alloc(p, d->floor);
	if (d->ew == NULL)
		goto fail;
	qw_limit_alpha(par->alarms_per_day, par->rate, par->persist_k,
		       par->persist_m, &d->alpha);
	d->lam = det_lam(par->time_based ? 1.0 / par->rate : 1.0,
			 par->half_life);
	qw_alarm_init(&d->alarm, par->persist_k, par->persist_m, par->clear_n);
	d->kappa = det_kappa(d->alpha, p, par->learn);
	return d;
fail:
	qw_detector_free(d);
	return NULL;
}

int qw_detector_rebaseline(qw_detector *d)
{
	int was = d->alarm.in_alarm;

	qw_ewcov_reset(d->ew);
	qw_alarm_reset(&d->alarm);
	memset(d->lim_nu, 0, (d->par.p + 1) * sizeof *d->lim_nu);
	memset(d->lim_hi, 0, (d->par.p + 1) * sizeof *d->lim_hi);
	d->alarm_run = 0;
	d->tshare = 0.0;
	d->cnt.rebaselines++;
	return was;
}

/* The limit for dof channels at the model's current effective size. */
static double det_limit(qw_detector *d, unsigned dof, double *nu_out,
			double *scale_out)
{
	double nu = qw_ewcov_nu(d->ew), scale = qw_ewcov_scale(d->ew);

	if (!d->par.correct) {
		nu = INFINITY;
		scale = 1.0;
	} else {
		scale /= 1.0 - (1.0 - d->kappa) * d->tshare;
	}
	*scale_out = scale;
	if (!(nu > dof - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale)) {
		*nu_out = nu;
		return INFINITY;
	}
	if (nu >= d->lim_nu[dof] && nu < d->lim_hi[dof]) {
		*nu_out = d->lim_nu[dof]; /* same grid cell as last time */
		return scale * d->lim_f[dof];
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
		d->lim_f[dof] = qw_limit_corrected(d->alpha, dof, nu, 1.0);
		d->lim_nu[dof] = nu;
	}
	return scale * d->lim_f[dof];
}

/* Screens x: counts missing channels into mask; 0, or a rejection. */
static int det_screen(qw_detector *d, const double *x, size_t *nobs)
{
	size_t i, m = 0;

	for (i = 0; i < d->par.p; i++) {
		if (isinf(x[i])) {
			d->cnt.rej_nonfinite++;
			return QW_ERROR(QW_ERANGE);
		}
		d->mask[i] = (unsigned char)(isnan(x[i]) ? 0 : 1);
		m += d->mask[i];
	}
	if (m == 0) {
		d->cnt.rej_empty++;
		return QW_ERROR(QW_ENODATA);
	}
	*nobs = m;
	return 0;
}

/* Scores x into res (before learning); 0 or a counted rejection. */
static int det_score(qw_detector *d, const double *x, size_t nobs,
		     double w, struct qw_result *res)
{
	int rc;

	if (nobs == d->par.p) {
		res->dof = (unsigned)nobs;
		rc = qw_ewcov_score(d->ew, x, w, &res->q);
	} else {
		d->cnt.partial++;
		rc = qw_ewcov_score_subset(d->ew, x, &res->q, &res->dof);
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
	res->scored = 1;
	d->cnt.scored++;
	res->limit = det_limit(d, res->dof, &res->nu, &res->scale);
	return 0;
}

/* Learning decision and step (file top).  Returns 1 if learned. */
static int det_learn(qw_detector *d, int complete, int warm, double w,
		     struct qw_result *res)
{
	double gain = 1.0;

	if (!complete)
		return 0;
	if (warm && d->par.learn != QW_LEARN_ALL) {
		if (res->over && d->par.learn == QW_LEARN_SKIP)
			return 0;
		if (d->alarm.in_alarm || res->event == QW_EVENT_CLEAR)
			return 0;
		if (res->over)
			gain = sqrt(res->limit / res->q);
	}
	if (qw_ewcov_learn(d->ew, gain) != 0)
		return 0;
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

static void det_explain(qw_detector *d, struct qw_result *res)
{
	res->ncontrib = qw_explain(qw_ewcov_factor(d->ew), d->par.p,
				   qw_ewcov_residual(d->ew), d->mask, d->work,
				   d->contrib);
	res->contrib = d->contrib;
}

int qw_detector_add(qw_detector *d, double t, const double *x,
		    struct qw_result *res)
{
	size_t nobs = 0;
	double w, lam = d->lam;
	int rc, warm;

	memset(res, 0, sizeof *res);
	res->limit = INFINITY;
	res->in_alarm = d->alarm.in_alarm;
	d->cnt.readings++;
	if ((rc = det_screen(d, x, &nobs)) != 0)
		return rc;
	if (d->par.time_based && qw_ewcov_count(d->ew) > 0) {
		if (!(t >= d->last_t)) {
			d->cnt.rej_time++;
			return QW_ERROR(QW_ETIME);
		}
		lam = det_lam(t - d->last_t, d->par.half_life);
	}
	if (qw_ewcov_count(d->ew) == 0) {
		/* The first complete reading is the mean; nothing to score. */
		if (nobs < d->par.p) {
			d->cnt.partial++;
			return 0;
		}
		qw_ewcov_first(d->ew, x);
		d->last_t = t;
		d->cnt.learned++;
		res->learned = 1;
		return 0;
	}
	w = qw_ewcov_weight(d->ew, lam);
	if ((rc = det_score(d, x, nobs, w, res)) != 0)
		return rc;
	warm = qw_ewcov_count(d->ew) >= d->par.warmup;
	res->over = warm && res->q > res->limit;
	if (warm) {
		d->cnt.exceedances += (uint64_t)res->over;
		res->event = qw_alarm_add(&d->alarm, res->over);
		d->cnt.alarms += res->event == QW_EVENT_RAISE;
	}
	if (res->over)
		det_explain(d, res);
	res->learned = det_learn(d, nobs == d->par.p, warm, w, res);
	if (res->learned)
		d->last_t = t;
	d->alarm_run = d->alarm.in_alarm ? d->alarm_run + 1 : 0;
	if (d->par.relearn_after > 0 && d->alarm_run >= d->par.relearn_after) {
		qw_detector_rebaseline(d);
		res->event = QW_EVENT_CLEAR;
	}
	res->in_alarm = d->alarm.in_alarm;
	return 0;
}

const struct qw_counters *qw_detector_counters(const qw_detector *d)
{
	return &d->cnt;
}

const struct qw_params *qw_detector_params(const qw_detector *d)
{
	return &d->par;
}

const qw_ewcov *qw_detector_model(const qw_detector *d)
{
	return d->ew;
}

int qw_detector_in_alarm(const qw_detector *d)
{
	return d->alarm.in_alarm;
}

double qw_detector_alpha(const qw_detector *d)
{
	return d->alpha;
}

/* Fixed point of ewcov.c's recursions: nu = (2-lam)/lam, scale =
 * 1/(1-lam), and a model learned wholly under the guard (tshare = 1). */
double qw_detector_steady_nu(const qw_detector *d)
{
	return d->par.correct ? (2.0 - d->lam) / d->lam : INFINITY;
}

double qw_detector_steady_scale(const qw_detector *d)
{
	return d->par.correct ? 1.0 / (d->kappa * (1.0 - d->lam)) : 1.0;
}

double qw_detector_steady_limit(const qw_detector *d)
{
	return qw_limit_corrected(d->alpha, (unsigned)d->par.p,
				  qw_detector_steady_nu(d),
				  qw_detector_steady_scale(d));
}

double qw_detector_limit(const qw_detector *d)
{
	unsigned p = (unsigned)d->par.p;

	if (!d->par.correct)
		return qw_limit_chisq(d->alpha, p);
	return qw_limit_corrected(d->alpha, p, qw_ewcov_nu(d->ew),
				  qw_ewcov_scale(d->ew) /
					  (1.0 - (1.0 - d->kappa) * d->tshare));
}

/* Detector state: this head, then the model's own state. */
struct det_state_head {
	uint64_t p;
	struct qw_counters cnt;
	uint64_t window, alarm_run;
	uint32_t under, in_alarm;
	double last_t, tshare;
};

size_t qw_detector_state_len(const qw_detector *d)
{
	return sizeof(struct det_state_head) + qw_ewcov_state_len(d->ew);
}

void qw_detector_state_get(const qw_detector *d, void *buf)
{
	struct det_state_head h;

	memset(&h, 0, sizeof h);
	h.p = d->par.p;
	h.cnt = d->cnt;
	h.window = d->alarm.window;
	h.alarm_run = d->alarm_run;
	h.under = d->alarm.under;
	h.in_alarm = (uint32_t)d->alarm.in_alarm;
	h.last_t = d->last_t;
	h.tshare = d->tshare;
	memcpy(buf, &h, sizeof h);
	qw_ewcov_state_get(d->ew, (unsigned char *)buf + sizeof h);
}

int qw_detector_state_set(qw_detector *d, const void *buf, size_t len)
{
	struct det_state_head h;
	uint64_t mask;
	int rc;

	if (len != qw_detector_state_len(d))
		return QW_ERROR(QW_EMISMATCH);
	memcpy(&h, buf, sizeof h);
	if (h.p != d->par.p)
		return QW_ERROR(QW_EMISMATCH);
	mask = d->alarm.m == 64 ? ~(uint64_t)0
				: (((uint64_t)1 << d->alarm.m) - 1);
	if (h.in_alarm > 1 || (h.window & ~mask) != 0 || isnan(h.last_t) ||
	    !(h.tshare >= 0.0 && h.tshare <= 1.0))
		return QW_ERROR(QW_EFORMAT);
	rc = qw_ewcov_state_set(d->ew, (const unsigned char *)buf + sizeof h,
				len - sizeof h);
	if (rc != 0)
		return rc;
	d->cnt = h.cnt;
	d->alarm.window = h.window;
	d->alarm.count = (unsigned)__builtin_popcountll(h.window);
	d->alarm.under = h.under;
	d->alarm.in_alarm = (int)h.in_alarm;
	d->alarm_run = h.alarm_run;
	d->last_t = h.last_t;
	d->tshare = h.tshare;
	memset(d->lim_nu, 0, (d->par.p + 1) * sizeof *d->lim_nu);
	memset(d->lim_hi, 0, (d->par.p + 1) * sizeof *d->lim_hi);
	return 0;
}
