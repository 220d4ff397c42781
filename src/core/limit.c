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
 * Control, section 11.3), via gsl_cdf_fdist_Qinv.  Workload: a few calls
 * per effective-size change, not per reading. */
#include <math.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_sf_gamma.h>

#include "quadwatch.h"

#define LIMIT_BISECT_STEPS 200 /* halvings of log(a): far below 1 ulp */

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

double qw_limit_chisq(double alpha, unsigned dof)
{
	return gsl_cdf_chisq_Qinv(alpha, (double)dof);
}

double qw_limit_corrected(double alpha, unsigned dof, double nu, double scale)
{
	double d = (double)dof, d2;

	if (isinf(nu))
		return scale * gsl_cdf_chisq_Qinv(alpha, d);
	if (!(nu > d - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale))
		return INFINITY;
	d2 = nu - d + 1.0;
	return scale * nu * d / d2 * gsl_cdf_fdist_Qinv(alpha, d, d2);
}

double qw_limit_pvalue(double q, unsigned dof, double nu, double scale)
{
	double d = (double)dof, d2;

	if (!(q >= 0))
		return 1.0;
	if (isinf(nu))
		return gsl_cdf_chisq_Q(q / scale, d);
	if (!(nu > d - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale))
		return 1.0;
	d2 = nu - d + 1.0;
	return gsl_cdf_fdist_Q(q / scale * d2 / (nu * d), d, d2);
}
