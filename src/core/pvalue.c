/* pvalue.c: the upper-tail probability of a score, once per reading.
 *
 * Under the corrected model (limit.c) q / scale ~ nu d/d2 F(d, d2) with
 * d2 = nu - d + 1, so with u = q/scale / nu (= d f / d2) and y = 1/(1+u):
 *   P = Q_F(f; d, d2) = I_y(a, b),  a = d2/2, b = d/2,
 * I the regularised incomplete beta function (Abramowitz & Stegun 26.6.2
 * and 26.5; the forms from memory, checked against scipy in the tests).
 *
 * Even d (b an integer): the finite sum (A&S 26.5.6 with n = b)
 *   I_y(a, b) = y^a sum_{j<b} Gamma(a+j)/(Gamma(a) j!) (1-y)^j,
 * every term positive, each from the last by one product: b terms, one
 * log1p and one exp, no gamma function.  Odd d: 1 - I_{1-y}(b, a) by
 * its hypergeometric series (pv_beta_series) over the bulk and the near
 * tail (P >= PV_SERIES_PMIN), and I_y(a, b) by the continued fraction
 * (A&S 26.5.8, by Wallis's recurrence without divisions, pv_beta_cf)
 * further out, where the series would cancel; with 1 - y above
 * PV_SERIES_XMAX (small nu) the fraction on whichever side of its
 * convergence bound the point is.  ln B(a, b) is kept in a memo between
 * calls of the same (d, d2): a replay scores millions of readings
 * against a handful of such pairs.  Cost with the series (2026-12-04,
 * AMD EPYC, chi-square(d) scores, one process, the fraction alone
 * before): d = 5, 83 ns against 116 at nu = 2885 and 84 against 194 at
 * nu = 34600 (the fraction's steps grow with nu in the near tail: 40-110
 * at q = 8-90 there); d = 15, 103 against 125 and 231; even d 22 ns.  A
 * replay of two p = 5 groups took 24-26% less CPU, the same bytes out.
 * Earlier figures against
 * GSL's gsl_cdf_fdist_Q (same figure) at nu = 2885, q about dof (one run,
 * 2026-12-03): even dof 33 ns against 478 ns; odd 340 ns against 666 ns
 * with the modified Lentz method, 255 ns against Lentz's 400 ns in a
 * later run (A/B in one process), the fraction's steps (about 12 pairs
 * here) growing with sqrt(nu) in the bulk of the distribution.  (Wallis's
 * recurrence contracted to two terms in one, c = 1 + d_odd + d_even, had
 * lost accuracy where the fraction converges slowest, nu = 3e5: 0.27% off
 * at P = 0.078; test_limit keeps that case.)
 * Far tails at huge nu (u^2 q < PV_CHISQ_TOL, or y = 1 to the last bit):
 * the chi-square tail, the limit of d F(d, d2), is then the closer figure
 * (see PV_CHISQ_TOL).
 * Known parameters (nu infinite): GSL's chi-square tail. */
#include <float.h>
#include <math.h>
#include <stdint.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_sf_gamma.h>

#include "internal.h"

#define PV_CF_STEPS 1000     /* continued-fraction steps; far more than used */
#define PV_SERIES_TERMS 100000 /* series terms; a few hundred at dof 257 */
/* Smallest P taken from the series as 1 - I_{1-y}(b, a) in the upper
 * tail: its terms are positive, so I is within some n eps of itself (n
 * terms, tens to a few hundred), but P = 1 - I carries that and the
 * prefactor's rounding times (1 - P)/P.  Against the fraction over dof
 * 1-33 and nu 2885-2e6 (one run): within 9e-12 of P at nu 2885, 1.3e-10
 * at nu 2e6, where both are 1e-9 from scipy's figure. */
#define PV_SERIES_PMIN 1e-3
#define PV_SERIES_SD 4.0     /* and q/2 within b + 1 + this sqrt(b + 1) */
/* The series' ratios fall to x = 1 - y: above this (small nu, large q)
 * it would take hundreds of terms, and the fraction is used instead. */
#define PV_SERIES_XMAX 0.5
#define PV_EXP_MIN (-700.0)  /* y^a below e^-700: GSL handles the underflow */
#define PV_CF_RTOL 4.4e-16   /* relative change of the convergent that ends
				the fraction (2 ulp) */
/* Far tail, huge nu: u^2 q below this (q = u nu, the chi-square scale).
 * The fraction in x = y near 1 then loses a relative ~20 eps nu / q (its
 * first terms cancel to the size of 1 - y) and GSL's F tail as much, while
 * the chi-square tail, the limit of d F(d, d2), is off by about q u / 4
 * (both measured at nu = 1e10..1e12 against each other): past this point
 * the chi-square figure is the closer one, within about 2 sqrt(eps q).
 * It takes nu beyond 1e10 at q = 100; below, nothing changes. */
#define PV_CHISQ_TOL (64.0 * DBL_EPSILON)
#define PV_MANT_BITS 52      /* binary64: stored significand bits */
#define PV_EXP_MASK 0x7ffu   /* binary64: exponent field */
#define PV_EXP_BIAS 1023u    /* binary64: exponent bias */

/* 2^-e for v = m 2^e (1 <= |m| < 2), exact; 1 for zero, subnormal, Inf
 * or NaN v. */
static double pv_pow2_inv(double v)
{
	uint64_t bits, e;
	double s;

	memcpy(&bits, &v, sizeof bits);
	e = (bits >> PV_MANT_BITS) & PV_EXP_MASK;
	if (e == 0 || e == PV_EXP_MASK)
		return 1.0;
	bits = (2 * PV_EXP_BIAS - e) << PV_MANT_BITS;
	memcpy(&s, &bits, sizeof s);
	return s;
}

/* The continued fraction of I_x(a, b) without its prefactor (A&S 26.5.8),
 * which converges quickly for x < (a+1)/(a+b+2), by Wallis's recurrence
 * for its convergents A_n / B_n, one pair of terms (even, odd) a step,
 * after the equivalence transformation that multiplies term n's partial
 * denominator by D_n, the denominator of its coefficient d_n = N_n / D_n,
 * so the recurrence
 *   A_n = D_{n-1} A_{n-1} + D_{n-2} N_{n-1} A_{n-2}   (B_n alike)
 * needs no division.  A and B are scaled by a power of two (exact) from
 * B one step before, so the scaling is off the chain of the recurrence;
 * the one division per step, for the convergent, is off it too.  The
 * modified Lentz method had four divisions on its chain per step: this
 * form takes 0.6 of its time, with the same accuracy against scipy (the
 * tests).  The convergents grow by about (a + 2m)^4 + (m b x)^2 a step,
 * and qw_pvalue_f sends here only a < 700 / DBL_EPSILON (6e18) and
 * b x < 700: far from overflow. */
static double pv_beta_cf(double a, double b, double x)
{
	double dp = a * (a + 1.0), a1 = 1.0, b1 = 1.0, a2 = dp;
	double b2 = dp - (a + b) * x * a, h = a2 / b2, s = pv_pow2_inv(b2);
	unsigned m;

	a1 *= s;
	b1 *= s;
	a2 *= s;
	b2 *= s;
	for (m = 1; m <= PV_CF_STEPS; m++) {
		double m2 = 2.0 * m, hn;
		double de = (a + m2 - 1.0) * (a + m2), ne = m * (b - m) * x;
		double dq = (a + m2) * (a + m2 + 1.0);
		double nq = -(a + m) * (a + b + m) * x;
		double ce = dp * ne, cq = de * nq;
		double a3 = de * a2 + ce * a1, b3 = de * b2 + ce * b1;
		double a4 = dq * a3 + cq * a2, b4 = dq * b3 + cq * b2;

		hn = a4 / b4;
		s = pv_pow2_inv(b2);
		a1 = a3 * s;
		b1 = b3 * s;
		a2 = a4 * s;
		b2 = b4 * s;
		dp = dq;
		if (fabs(hn - h) <= PV_CF_RTOL * fabs(hn))
			return hn;
		h = hn;
	}
	return h;
}

/* F(a+b, 1; b+1; x) = sum_n t_n, t_0 = 1, t_{n+1} = t_n (a+b+n) x/(b+1+n)
 * (A&S 15.1.1), the factor of I_x(b, a) beside its prefactor
 * x^b (1-x)^a / (b B(a, b)) (A&S 26.5.23 with a and b exchanged; the
 * form from memory, checked against GSL and scipy in the tests).  The
 * ratios r_n fall with n (towards x); the terms are positive, and once a
 * ratio is below 1 and t_n r_n / (1 - r_n), which then bounds all that
 * is left, is below PV_CF_RTOL of the sum, the sum is done; it also stops
 * once past smax (the caller then takes the fraction).  Below the
 * fraction's bound x <= (b+1)/(a+b+2) it takes about as many terms (some
 * 15 at dof 5, nu 2885) as the fraction takes steps, each one multiply
 * on the chain (the ratio's division is off it) against a chain of
 * products a step. */
static double pv_beta_series(double a, double b, double x, double smax)
{
	double t = 1.0, s = 1.0, ab = a + b, b1 = b + 1.0;
	unsigned n;

	for (n = 0; n < PV_SERIES_TERMS && s <= smax; n++) {
		double r = (ab + n) * x / (b1 + n);

		t *= r;
		s += t;
		if (r < 1.0 && t * r <= PV_CF_RTOL * s * (1.0 - r))
			break;
	}
	return s;
}

/* I_y(a, b) for integer b: the finite sum, from y^a up. */
static double pv_beta_even(double a, unsigned b, double lny, double y1)
{
	double t = exp(a * lny), s = t;
	unsigned j;

	for (j = 1; j < b; j++) {
		t *= (a + j - 1.0) / j * y1;
		s += t;
	}
	return s < 1.0 ? s : 1.0; /* the sum of b roundings may pass 1 */
}

double qw_pvalue_f(struct qw_pvalue_memo *memo, double u, unsigned dof,
		   double d2)
{
	double d = (double)dof, nu = d2 + d - 1.0, a, b, lny, lny1, y, y1;
	double lnb, pre, s;
	int far;

	if (!(u >= 0))
		return 1.0;
	if (!isfinite(u))
		return 0.0;
	if (u == 0.0)
		return 1.0;
	/* y = 1 to the last bit: F(d, d2) d is chi-square(d) to within a
	 * relative O(u q), below 1e-16 q (q = u nu, on the chi-square scale) */
	if (1.0 + u == 1.0)
		return gsl_cdf_chisq_Q(u * nu, d);
	a = 0.5 * d2;
	b = 0.5 * d;
	lny = -log1p(u);            /* ln y, y = 1/(1+u) */
	far = u * u * (u * nu) < PV_CHISQ_TOL;
	if (a * lny < PV_EXP_MIN)
		return far ? gsl_cdf_chisq_Q(u * nu, d)
			   : gsl_cdf_fdist_Q(u * d2 / d, d, d2);
	y1 = u / (1.0 + u);         /* 1 - y */
	if ((dof & 1u) == 0)
		return pv_beta_even(a, dof / 2u, lny, y1);
	if (memo != NULL && memo->dof == dof && memo->d2 == d2) {
		lnb = memo->lnbeta;
	} else {
		lnb = gsl_sf_lnbeta(a, b);
		if (memo != NULL) {
			memo->dof = dof;
			memo->d2 = d2;
			memo->lnbeta = lnb;
		}
	}
	lny1 = log(u) + lny;        /* ln(1-y) */
	y = 1.0 / (1.0 + u);         /* one rounding, not exp(-log1p(u)) */
	pre = exp(a * lny + b * lny1 - lnb);
	/* y < (a+1)/(a+b+2), tested on 1 - y, which is exact where y
	 * rounds near 1 */
	if (y1 > (b + 1.0) / (a + b + 2.0)) {
		if (far)
			return gsl_cdf_chisq_Q(u * nu, d);
		/* Near the bound, the series still (its terms rise, then
		 * fall, some a y1 of them), as long as P is at least
		 * PV_SERIES_PMIN; the fraction, with no cancellation,
		 * further out.  a y1 is about q/2 on the chi-square scale;
		 * the bound lies a little past the q where P(chi2(d) > q) =
		 * PV_SERIES_PMIN (q/2 = 13 against 10.3 at d = 5), so the far
		 * tail costs no terms. */
		if (y1 <= PV_SERIES_XMAX &&
		    a * y1 <= b + 1.0 + PV_SERIES_SD * sqrt(b + 1.0) + 2.0) {
			s = pv_beta_series(a, b, y1,
					   (1.0 - PV_SERIES_PMIN) * b / pre);
			if (pre * s / b <= 1.0 - PV_SERIES_PMIN)
				return 1.0 - pre * s / b;
		}
		return pre * pv_beta_cf(a, b, y) / a;
	}
	if (y1 > PV_SERIES_XMAX)
		return 1.0 - pre * pv_beta_cf(b, a, y1) / b;
	return 1.0 - pre * pv_beta_series(a, b, y1, INFINITY) / b;
}

double qw_limit_pvalue_memo(struct qw_pvalue_memo *memo, double q,
			    unsigned dof, double nu, double scale)
{
	double d = (double)dof, u;

	if (!(q >= 0))
		return 1.0;
	if (isinf(nu))
		return gsl_cdf_chisq_Q(q / scale, d);
	if (!(nu > d - 1.0 + QW_LIMIT_NU_MARGIN) || !isfinite(scale) ||
	    !(scale > 0.0))
		return 1.0;
	u = q / scale / nu; /* NaN: qw_pvalue_f gives 1 */
	return qw_pvalue_f(memo, u, dof, nu - d + 1.0);
}

double qw_limit_pvalue(double q, unsigned dof, double nu, double scale)
{
	return qw_limit_pvalue_memo(NULL, q, dof, nu, scale);
}
