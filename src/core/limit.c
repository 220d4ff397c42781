/* limit.c: from the engineer's false-alarm rate to a control limit.
 *
 * Per-reading alpha: under a k-of-m rule with independent exceedances of
 * probability a, a raise happens at a reading when it exceeds, the reading
 * leaving the window did not, and exactly k-1 of the m-1 between exceed:
 *   P(raise) = C(m-1, k-1) a^k (1-a)^(m-k+1),
 * (for 1-of-1, a(1-a): a raise needs the previous reading under).  alpha
 * solves P(raise) = alarms_per_day / (rate * 86400) by bisection on the
 * increasing branch a < k/(m+1).
 *
 * Limit: for known parameters q ~ chi-square(p) (GSL gsl_cdf_chisq_Qinv).
 * With the mean and covariance estimated from an effective size nu (see
 * ewcov.c), q ~ scale * nu p/(nu-p+1) F(p, nu-p+1): the Phase II Hotelling
 * T-squared form (e.g. Montgomery, Introduction to Statistical Quality
 * Control, the chapter on multivariate control charts; cited from memory),
 * via root finding on the F tail of pvalue.c (qw_pvalue_f).  Workload:
 * one root per change of the effective size's 1e-3 grid cell (detector.c),
 * so once per reading for the first ~1000 readings of a model: ~1 us for
 * even dof, ~5 us for odd (10-15 us before, on GSL's F tail and a fresh
 * chi-square quantile each time; the detector now keeps the latter). */
#include <math.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_sf_gamma.h>

#include "internal.h"

#define LIMIT_BISECT_STEPS 200 /* halvings of log(a): far below 1 ulp */
/* F quantile by root finding: GSL's gsl_cdf_fdist_Qinv fails to converge
 * (betainv.c) for second dof in the thousands, exactly where an EW model
 * with a long half-life lives, so solve Q(x) = alpha on log x instead. */
#define LIMIT_ROOT_STEPS 200  /* Illinois steps; ~10 are used */
#define LIMIT_ROOT_RTOL 1e-14 /* relative width of the final bracket */

/* log P(raise) for per-reading probability a under k of m. */
static double limit_log_raise(double a, unsigned k, unsigned m)
{
	double lc = gsl_sf_lnchoose(m - 1, k - 1);

	return lc + k * log(a) + (m - k + 1) * log1p(-a);
}

int qw_limit_alpha(double alarms_per_day, double rate, unsigned k,
		   unsigned m, double *alpha)
{
	double target, lt, lo, hi, mid;
	int i;

	if (!(alarms_per_day > 0) || !(rate > 0) || !isfinite(rate) ||
	    !isfinite(alarms_per_day) || k < 1 || k > m ||
	    m > QW_ALARM_MAX_M)
		return QW_ERROR(QW_EINVAL);
	target = alarms_per_day / (rate * QW_SECONDS_PER_DAY);
	lt = log(target);
	/* Bisection on log a over (tiny, k/(m+1)], where P rises with a. */
	hi = log((double)k / (m + 1.0));
	if (limit_log_raise(exp(hi), k, m) < lt)
		return QW_ERROR(QW_EINVAL); /* rate too high to deliver */
	lo = -745.0; /* log of the smallest subnormal double */
	for (i = 0; i < LIMIT_BISECT_STEPS; i++) {
		mid = 0.5 * (lo + hi);
		if (limit_log_raise(exp(mid), k, m) < lt)
			lo = mid;
		else
			hi = mid;
	}
	*alpha = exp(0.5 * (lo + hi));
	return 0;
}

/* log Q_F(e^lx; d1, d2) - log alpha (qw_pvalue_f: Q_F at u = d1 x/d2). */
static double limit_f_gap(struct qw_pvalue_memo *memo, double lx,
			  unsigned d1, double d2, double la)
{
	return log(qw_pvalue_f(memo, (double)d1 * exp(lx) / d2, d1, d2)) - la;
}

/* Upper quantile of F(d1, d2): Q(x) = alpha, bracketed around the
 * chi-square value chi/d1, then Illinois (regula falsi) on log x. */
static double limit_f_qinv(double alpha, unsigned d1, double d2, double chi)
{
	struct qw_pvalue_memo memo = QW_PVALUE_MEMO_INIT;
	double la = log(alpha), x0 = chi / (double)d1;
	double lo = log(x0), hi = lo, glo, ghi, m, gm;
	int i, side = 0;

	glo = limit_f_gap(&memo, lo, d1, d2, la);
	while (glo < 0 && lo > -700) /* Q(lo) < alpha: lo is too high */
		glo = limit_f_gap(&memo, lo -= 1.0, d1, d2, la);
	ghi = limit_f_gap(&memo, hi, d1, d2, la);
	while (ghi > 0 && hi < 700)
		ghi = limit_f_gap(&memo, hi += 1.0, d1, d2, la);
	if (!(glo >= 0) || !(ghi <= 0))
		return NAN;
	for (i = 0; i < LIMIT_ROOT_STEPS && hi - lo > LIMIT_ROOT_RTOL; i++) {
		m = (glo - ghi) != 0 ? lo + glo * (hi - lo) / (glo - ghi)
				     : 0.5 * (lo + hi);
		if (!(m > lo && m < hi))
			m = 0.5 * (lo + hi);
		gm = limit_f_gap(&memo, m, d1, d2, la);
		if (gm == 0)
			return exp(m);
		if (gm > 0) {
			lo = m, glo = gm;
			if (side == 1)
				ghi *= 0.5; /* Illinois: halve the stale end */
			side = 1;
		} else {
			hi = m, ghi = gm;
			if (side == -1)
				glo *= 0.5;
			side = -1;
		}
	}
	return exp(0.5 * (lo + hi));
}

double qw_limit_chisq(double alpha, unsigned dof)
{
	return gsl_cdf_chisq_Qinv(alpha, (double)dof);
}

double qw_limit_corrected_chi(double alpha, unsigned dof, double nu,
			      double scale, double chi)
{
	double d = (double)dof, d2;

	if (isinf(nu))
		return scale * chi;
	if (!(nu > d - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale))
		return INFINITY;
	d2 = nu - d + 1.0;
	return scale * nu * d / d2 * limit_f_qinv(alpha, dof, d2, chi);
}

double qw_limit_corrected(double alpha, unsigned dof, double nu, double scale)
{
	return qw_limit_corrected_chi(alpha, dof, nu, scale,
				      gsl_cdf_chisq_Qinv(alpha, (double)dof));
}
