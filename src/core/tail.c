/* tail.c: the upper tail of a recording's scores, and the textbook
 * Hotelling T-squared limits a fit from a recording is measured against.
 *
 * Peaks over threshold.  Above a high threshold u the excesses y = s - u
 * of a score s are modelled as generalised Pareto (Pickands 1975; Davison
 * & Smith 1990):  P(Y > y | Y > 0) = (1 + xi y / sigma)^(-1/xi)  (xi = 0:
 * exp(-y/sigma)).  With n scores of which n_u exceed u, the upper alpha
 * quantile for alpha < n_u/n is
 *     u + sigma/xi ((n_u/(n alpha))^xi - 1)          (xi = 0: u + sigma
 * log(n_u/(n alpha))), and for larger alpha the empirical quantile is used
 * directly.
 *
 * Maximum likelihood as in Grimshaw (1993, Technometrics 35, "Computing
 * maximum likelihood estimates for the generalized Pareto distribution";
 * the reduction is cited from memory): with theta = xi/sigma, for fixed
 * theta the likelihood is maximised by xi(theta) = mean log(1 + theta y),
 * leaving the profile
 *     l*(theta) = -n log(xi(theta)/theta) - n xi(theta) - n
 * to maximise over theta > -1/max(y), theta = 0 being the exponential
 * fit (sigma = mean y).  The profile is searched on a grid in theta *
 * mean(y) (TAIL_GRID_* below), then refined by golden-section search
 * between the best point's neighbours.  xi is kept >= TAIL_XI_MIN: for
 * xi < -1 the likelihood is unbounded at the sample maximum, and scores
 * of a detector (sums of squares) have no such short tail.
 *
 * Hotelling limits for a mean and covariance S (divisor n-1) estimated
 * from n readings of p channels (Tracy, Young & Mason 1992, J. Quality
 * Technology 24; Montgomery, Introduction to Statistical Quality Control,
 * the chapter on multivariate charts; both from memory):
 *   Phase I (the n readings themselves):
 *       (n-1)^2/n  B^-1(1 - alpha; p/2, (n-p-1)/2)
 *   Phase II (a new, independent reading):
 *       p (n+1)(n-1) / (n (n-p))  F^-1(1 - alpha; p, n-p).
 *
 * Consistency factor of a covariance from Gaussian readings kept when
 * their squared distance is at most c = chi2_p^-1(keep) (hard
 * rejection): E[x x' ; x'x <= c] = P(chi2_{p+2} <= c) I for x ~ N(0, I),
 * so the kept readings' covariance is short by P(chi2_{p+2} <= c)/keep
 * and is multiplied back by  keep / P(chi2_{p+2} <= c)  (Croux &
 * Haesbroeck 1999, J. Multivariate Analysis 71, the MCD consistency
 * factor; the form is from memory and checked by simulation in
 * tests/test_tail.c).
 *
 * Workload: one fit per group per `quadwatch fit`, n_u up to a few 10^5
 * excesses, about 10^3 profile evaluations.  No allocation. */
#include <math.h>

#include <gsl/gsl_cdf.h>

#include "internal.h"
#include "quadwatch.h"
#include "sort.h"

#define TAIL_GRID_NEG 48     /* grid points with theta < 0 */
#define TAIL_GRID_POS 81     /* grid points with theta > 0 */
#define TAIL_NEG_STEP 0.25   /* theta = -(1 - e^(-k step))/max y */
#define TAIL_POS_LO -4.0     /* log10 theta*mean(y), smallest > 0 */
#define TAIL_POS_STEP 0.1    /* log10 steps, up to 10^4 */
#define TAIL_GOLDEN_STEPS 100 /* golden-section steps: 0.618^100 ~ 1e-21 */
#define TAIL_XI_MIN -1.0     /* below: likelihood unbounded (see top) */

/* xi(theta) = mean log(1 + theta y); NaN when some 1 + theta y <= 0. */
static double tail_xi(const double *y, size_t n, double theta)
{
	double s = 0.0;
	size_t i;

	for (i = 0; i < n; i++) {
		double a = theta * y[i];

		if (!(a > -1.0))
			return NAN;
		s += log1p(a);
	}
	return s / (double)n;
}

/* Profile log-likelihood l*(theta); -Inf outside the parameter space. */
static double tail_profile(const double *y, size_t n, double ybar,
			   double theta)
{
	double xi, dn = (double)n;

	if (theta == 0.0)
		return -dn * log(ybar) - dn;
	xi = tail_xi(y, n, theta);
	if (!(xi >= TAIL_XI_MIN) || !(xi / theta > 0))
		return -INFINITY;
	return -dn * log(xi / theta) - dn * xi - dn;
}

double qw_tail_gpd_loglik(const double *y, size_t n, double xi,
			  double sigma)
{
	double s = 0.0;
	size_t i;

	if (!(sigma > 0) || !isfinite(xi))
		return -INFINITY;
	for (i = 0; i < n; i++) {
		double z = y[i] / sigma;

		if (!(y[i] >= 0))
			return -INFINITY;
		if (xi == 0.0) {
			s -= z;
			continue;
		}
		if (!(1.0 + xi * z > 0))
			return -INFINITY;
		s -= (1.0 + 1.0 / xi) * log1p(xi * z);
	}
	return s - (double)n * log(sigma);
}

/* theta at grid point k of TAIL_GRID_NEG + 1 + TAIL_GRID_POS. */
static double tail_grid(size_t k, double ybar, double ymax)
{
	if (k < TAIL_GRID_NEG)
		return -(1.0 - exp(-(double)(TAIL_GRID_NEG - k) *
				   TAIL_NEG_STEP)) / ymax;
	if (k == TAIL_GRID_NEG)
		return 0.0;
	k -= TAIL_GRID_NEG + 1;
	return pow(10.0, TAIL_POS_LO + (double)k * TAIL_POS_STEP) / ybar;
}

/* Golden-section search for the maximum of the profile on [a, b]. */
static double tail_golden(const double *y, size_t n, double ybar, double a,
			  double b)
{
	const double g = 0.5 * (sqrt(5.0) - 1.0);
	double c = b - g * (b - a), d = a + g * (b - a);
	double fc = tail_profile(y, n, ybar, c), fd = tail_profile(y, n, ybar, d);
	int i;

	for (i = 0; i < TAIL_GOLDEN_STEPS && c != d; i++) {
		if (fc >= fd) {
			b = d, d = c, fd = fc;
			c = b - g * (b - a);
			fc = tail_profile(y, n, ybar, c);
		} else {
			a = c, c = d, fc = fd;
			d = a + g * (b - a);
			fd = tail_profile(y, n, ybar, d);
		}
	}
	return fc >= fd ? c : d;
}

int qw_tail_gpd_fit(const double *y, size_t n, struct qw_gpd *out)
{
	const size_t ngrid = TAIL_GRID_NEG + 1 + TAIL_GRID_POS;
	double ybar = 0.0, ymax = 0.0, best = -INFINITY, theta, xi, l;
	size_t i, kbest = TAIL_GRID_NEG;

	out->n = n;
	out->xi = out->sigma = out->loglik = NAN;
	if (n < QW_TAIL_MIN_EXCESS)
		return QW_ERROR(QW_EINVAL);
	for (i = 0; i < n; i++) {
		if (!(y[i] >= 0) || !isfinite(y[i]))
			return QW_ERROR(QW_EINVAL);
		ybar += y[i];
		ymax = fmax(ymax, y[i]);
	}
	ybar /= (double)n;
	if (!(ybar > 0))
		return QW_ERROR(QW_EINVAL); /* all excesses zero: no tail */
	for (i = 0; i < ngrid; i++) {
		l = tail_profile(y, n, ybar, tail_grid(i, ybar, ymax));
		if (l > best)
			best = l, kbest = i;
	}
	theta = tail_golden(y, n, ybar,
			    tail_grid(kbest > 0 ? kbest - 1 : 0, ybar, ymax),
			    tail_grid(kbest + 1 < ngrid ? kbest + 1 : kbest,
				      ybar, ymax));
	if (tail_profile(y, n, ybar, theta) < best)
		theta = tail_grid(kbest, ybar, ymax);
	if (theta == 0.0) {
		out->xi = 0.0;
		out->sigma = ybar;
	} else {
		xi = tail_xi(y, n, theta);
		out->xi = xi;
		out->sigma = xi / theta;
	}
	out->loglik = qw_tail_gpd_loglik(y, n, out->xi, out->sigma);
	return 0;
}

void qw_tail_sort(double *a, size_t n)
{
	qw_sort_double_inplace(a, n);
}

int qw_tail_fit(double *s, size_t n, double fraction, struct qw_tail *t)
{
	size_t nu, i;
	double *y;
	int rc;

	t->n = n;
	t->nu = 0;
	t->u = NAN;
	t->sorted = s;
	t->gpd.xi = t->gpd.sigma = t->gpd.loglik = NAN;
	t->gpd.n = 0;
	for (i = 0; i < n; i++)
		if (!(s[i] >= 0) || !isfinite(s[i]))
			return QW_ERROR(QW_EINVAL);
	if (!(fraction > 0 && fraction < 1))
		return QW_ERROR(QW_EINVAL);
	nu = (size_t)floor(fraction * (double)n);
	if (nu < QW_TAIL_MIN_EXCESS || nu >= n)
		return QW_ERROR(QW_EINVAL);
	qw_tail_sort(s, n);
	t->u = s[n - nu - 1];
	t->nu = nu;
	/* the excesses over u, in place of the top scores; restored below */
	y = s + (n - nu);
	for (i = 0; i < nu; i++)
		y[i] -= t->u;
	rc = qw_tail_gpd_fit(y, nu, &t->gpd);
	for (i = 0; i < nu; i++)
		y[i] += t->u;
	return rc;
}

/* Empirical upper alpha quantile of the sorted s[0..n): linear between
 * order statistics at position (1 - alpha)(n - 1). */
static double tail_empirical(const double *s, size_t n, double alpha)
{
	double pos = (1.0 - alpha) * (double)(n - 1), f = floor(pos);
	size_t k = (size_t)f;

	if (k + 1 >= n)
		return s[n - 1];
	return s[k] + (pos - f) * (s[k + 1] - s[k]);
}

double qw_tail_quantile(const struct qw_tail *t, double alpha)
{
	double r, xi = t->gpd.xi, sigma = t->gpd.sigma;

	if (!(alpha > 0 && alpha < 1) || t->nu == 0 || isnan(xi))
		return NAN;
	r = (double)t->nu / ((double)t->n * alpha);
	if (r <= 1.0)
		return tail_empirical(t->sorted, t->n, alpha);
	if (xi == 0.0)
		return t->u + sigma * log(r);
	return t->u + sigma / xi * expm1(xi * log(r));
}

double qw_tail_sf(const struct qw_tail *t, double q)
{
	double xi = t->gpd.xi, sigma = t->gpd.sigma, share, z;

	if (t->nu == 0 || isnan(xi))
		return NAN;
	share = (double)t->nu / (double)t->n;
	if (q <= t->u)
		return NAN; /* below the tail: use the scores themselves */
	z = (q - t->u) / sigma;
	if (xi == 0.0)
		return share * exp(-z);
	if (!(1.0 + xi * z > 0))
		return 0.0;
	return share * exp(-log1p(xi * z) / xi);
}

double qw_chisq_q(double x, unsigned k)
{
	double h = 0.5 * x, t, s;
	unsigned i;

	if (k == 0 || k > QW_CHISQ_KMAX || !(x >= 0) || !(h <= QW_CHISQ_HMAX))
		return gsl_cdf_chisq_Q(x, (double)k);
	if (k % 2 == 0) {
		/* e^-h sum_{i < k/2} h^i / i! */
		t = exp(-h);
		s = t;
		for (i = 1; i < k / 2; i++) {
			t *= h / (double)i;
			s += t;
		}
		return s;
	}
	/* erfc(sqrt h) + e^-h sum_{i = 1}^{(k-1)/2} h^(i-1/2) / Gamma(i+1/2),
	 * Gamma(3/2) = sqrt(pi)/2 */
	s = erfc(sqrt(h));
	t = exp(-h) * sqrt(h) * M_2_SQRTPI;
	for (i = 1; i <= (k - 1) / 2; i++) {
		s += t;
		t *= h / ((double)i + 0.5);
	}
	return s;
}

double qw_tail_consistency(double keep, unsigned p)
{
	double c;

	if (!(keep > 0 && keep <= 1) || p == 0)
		return NAN;
	if (keep == 1.0)
		return 1.0;
	c = gsl_cdf_chisq_Pinv(keep, (double)p);
	return keep / gsl_cdf_chisq_P(c, (double)(p + 2));
}

double qw_tail_phase1_limit(double alpha, unsigned p, double n)
{
	double d = (double)p;

	if (!(alpha > 0 && alpha < 1) || p == 0 || !(n > d + 1))
		return NAN;
	return (n - 1) * (n - 1) / n *
	       gsl_cdf_beta_Qinv(alpha, d / 2, (n - d - 1) / 2);
}

double qw_tail_phase2_limit(double alpha, unsigned p, double n)
{
	double d = (double)p;

	if (!(alpha > 0 && alpha < 1) || p == 0 || !(n > d))
		return NAN;
	/* p(n+1)(n-1)/(n(n-p)) F = (n+1)/n * nu p/(nu-p+1) F, nu = n-1 */
	return qw_limit_corrected(alpha, p, n - 1, (n + 1) / n);
}
