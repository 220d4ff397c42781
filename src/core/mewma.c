/* mewma.c: the limit of the MEWMA chart for a raised-alarm rate.
 *
 * The multivariate EWMA of Lowry, Woodall, Champ and Rigdon, "A
 * multivariate exponentially weighted moving average control chart",
 * Technometrics 34 (1992) 46-53, smooths standardised residuals y_t
 * (N(0, I_p) in control) as
 *   z_t = (1 - rho) z_{t-1} + rho y_t
 * and charts T2_t = z_t' Sigma_z^-1 z_t with Sigma_z = rho/(2-rho) I, the
 * asymptotic covariance.  Its limit has no closed form; published tables
 * (Lowry et al.; Prabhu and Runger, J. Quality Technology 29 (1997)) give h
 * for an average run length from z_0 = 0.  A daemon runs for months, so
 * what the engineer's "alarms per day" fixes is the steady-state rate of
 * raised alarms, and in steady state z_t is exactly Gaussian with
 * covariance Sigma_z: T2_{t-1} ~ chi-square(p), and given z_{t-1},
 * z_t / rho ~ N((1-rho) z_{t-1} / rho, I).  So the rate of upcrossings,
 *   u(h) = P(T2_{t-1} <= h < T2_t)
 *        = int_0^h f_chi2(a; p) Q_nc(h / (rho (2-rho)); p,
 *                                  (1-rho)^2 a / (rho (2-rho))) da,
 * with Q_nc the upper tail of the noncentral chi-square (a Poisson
 * mixture of central ones: Johnson, Kotz and Balakrishnan, Continuous
 * Univariate Distributions vol. 2, ch. 29; cited from memory), is a
 * one-dimensional integral: computed here by GSL's adaptive Gauss-Kronrod
 * quadrature, and solved for h by bisection.  rho = 1 gives
 * u = (1 - alpha) alpha, the plain chart's 1-of-1 raise rate.
 *
 * A raise also needs the group out of alarm (hysteresis: clear_n readings
 * under the limit), so an upcrossing soon after a clear is not a new raise;
 * the tests measure how far the raise rate falls below u (a few percent at
 * the default clear count).  Workload: one limit per detector at alloc,
 * a few thousand noncentral tail evaluations, about 10 ms. */
#include <math.h>
#include <stdlib.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_sf_gamma.h>

#include "internal.h"

#define MEWMA_QUAD_INTERVALS 200   /* workspace of the adaptive rule */
#define MEWMA_QUAD_RTOL 1e-8       /* relative error of u(h) */
#define MEWMA_POISSON_SDS 12.0     /* Poisson terms kept: mean +- 12 sd */
#define MEWMA_BISECT_STEPS 80      /* halvings of the bracket of h */
#define MEWMA_BISECT_RTOL 1e-10    /* relative width at which to stop */
#define MEWMA_LOG_TINY -745.0      /* log of the smallest subnormal */

/* Upper tail of the noncentral chi-square with k dof and noncentrality
 * lam at x: sum_j Pois(j; lam/2) Q_chi2(x; k + 2j), with
 * Q(x; k+2j+2) = Q(x; k+2j) + e^{-x/2} (x/2)^{k/2+j} / Gamma(k/2+j+1). */
static double mewma_ncx2_q(double x, double k, double lam)
{
	double hl = 0.5 * lam, hx = 0.5 * x, q, sum = 0.0, lp, lt;
	double jmax = hl + MEWMA_POISSON_SDS * sqrt(hl + 1.0) + 20.0;
	double j;

	q = gsl_cdf_chisq_Q(x, k);
	for (j = 0.0; j <= jmax; j += 1.0) {
		lp = hl > 0 ? -hl + j * log(hl) - gsl_sf_lngamma(j + 1.0)
			    : (j == 0.0 ? 0.0 : MEWMA_LOG_TINY - 1.0);
		if (lp > MEWMA_LOG_TINY)
			sum += exp(lp) * q;
		else if (j > hl)
			break; /* past the mode and negligible from here on */
		lt = -hx + (0.5 * k + j) * log(hx) -
		     gsl_sf_lngamma(0.5 * k + j + 1.0);
		q += exp(lt);
		if (q > 1.0)
			q = 1.0;
	}
	return sum;
}

struct mewma_arg {
	double h, k, rho;
};

/* Integrand in t = sqrt(a / h), which removes the a^{-1/2} of p = 1:
 * f_chi2(h t^2) 2 h t Q_nc(...). */
static double mewma_integrand(double t, void *vp)
{
	const struct mewma_arg *a = vp;
	double s = a->rho * (2.0 - a->rho), av = a->h * t * t;
	double one = 1.0 - a->rho, f;

	if (t <= 0.0)
		return 0.0;
	/* log of the chi-square density at av */
	f = (0.5 * a->k - 1.0) * log(av) - 0.5 * av - 0.5 * a->k * M_LN2 -
	    gsl_sf_lngamma(0.5 * a->k);
	return exp(f) * 2.0 * a->h * t *
	       mewma_ncx2_q(a->h / s, a->k, one * one * av / s);
}

/* u(h) with the quadrature's workspace ws (NULL: rho = 1 only). */
static double mewma_uprate_ws(double h, unsigned dof, double rho,
			      gsl_integration_workspace *ws)
{
	struct mewma_arg arg = {h, (double)dof, rho};
	gsl_function fn = {mewma_integrand, &arg};
	double res = NAN, err;

	if (!(h > 0) || !isfinite(h) || dof < 1 || !(rho > 0 && rho <= 1))
		return NAN;
	if (rho == 1.0) {
		double a = gsl_cdf_chisq_Q(h, (double)dof);
		return (1.0 - a) * a;
	}
	if (ws == NULL ||
	    gsl_integration_qag(&fn, 0.0, 1.0, 0.0, MEWMA_QUAD_RTOL,
				MEWMA_QUAD_INTERVALS, GSL_INTEG_GAUSS31, ws,
				&res, &err) != 0)
		return NAN;
	return res;
}

double qw_mewma_uprate(double h, unsigned dof, double rho)
{
	gsl_integration_workspace *ws =
		gsl_integration_workspace_alloc(MEWMA_QUAD_INTERVALS);
	double u = mewma_uprate_ws(h, dof, rho, ws);

	gsl_integration_workspace_free(ws);
	return u;
}

double qw_mewma_step(double *z, size_t p, double rho, const double *y,
		     double ys)
{
	double t2 = 0.0;
	size_t i;

	for (i = 0; i < p; i++) {
		z[i] = (1.0 - rho) * z[i] + rho * y[i] * ys;
		t2 += z[i] * z[i];
	}
	return t2 * (2.0 - rho) / rho;
}

/* The bisection of qw_mewma_limit with the quadrature's workspace. */
static double mewma_limit_ws(double rate, unsigned dof, double rho,
			     gsl_integration_workspace *ws)
{
	double hi, lo, mid, u;
	int i;

	/* T2_t ~ chi-square(dof) in steady state and u(h) <= P(T2_t > h),
	 * so the root lies below the chi-square point of rate; u rises from
	 * 0 at h = 0 to a maximum near the mean dof, then falls. */
	hi = gsl_cdf_chisq_Qinv(rate, (double)dof);
	lo = (double)dof;
	u = mewma_uprate_ws(lo, dof, rho, ws);
	if (!(u > rate) || !(hi > lo))
		return NAN;
	for (i = 0; i < MEWMA_BISECT_STEPS && hi - lo > MEWMA_BISECT_RTOL * hi;
	     i++) {
		mid = 0.5 * (lo + hi);
		u = mewma_uprate_ws(mid, dof, rho, ws);
		if (isnan(u))
			return NAN;
		if (u > rate)
			lo = mid;
		else
			hi = mid;
	}
	return 0.5 * (lo + hi);
}

double qw_mewma_limit(double rate, unsigned dof, double rho)
{
	gsl_integration_workspace *ws;
	double h;

	if (!(rate > 0 && rate < 0.5) || dof < 1 || !(rho > 0 && rho <= 1))
		return NAN;
	ws = gsl_integration_workspace_alloc(MEWMA_QUAD_INTERVALS);
	h = ws != NULL || rho == 1.0 ? mewma_limit_ws(rate, dof, rho, ws) : NAN;
	gsl_integration_workspace_free(ws);
	return h;
}
