/* quadwatch.h: the detection core, the one public header of libquadwatch.a.
 *
 * The core turns a stream of p-channel readings into Mahalanobis scores and
 * raised/cleared alarms.  It does no I/O, keeps no globals, never logs, exits
 * or aborts; every allocation happens in an _alloc call, none per reading.
 * An acquisition program can embed it without the bus: link libquadwatch.a,
 * GSL and libm.
 *
 * Prototypes are grouped by the file that defines them. */
#ifndef QUADWATCH_H
#define QUADWATCH_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---- error.c ----------------------------------------------------------- */

/* Every function that can fail returns 0 or one of these. */
enum qw_err {
	QW_OK = 0,         /* success */
	QW_ENOMEM = -1,    /* an allocation failed */
	QW_EINVAL = -2,    /* an argument is outside its documented range */
	QW_ERANGE = -3,    /* a value is +-Inf, or so large its square overflows */
	QW_ENUMERIC = -4,  /* the factor lost positive definiteness */
	QW_ETIME = -5,     /* time went backwards under a half-life in seconds */
	QW_ENODATA = -6,   /* every channel of the reading is missing */
	QW_EFORMAT = -7,   /* bytes that do not follow the format */
	QW_ETRUNC = -8,    /* input shorter than its header promises */
	QW_EOVERSIZE = -9, /* input longer than the configured bound */
	QW_ECOUNT = -10,   /* wrong number of channels or values */
	QW_ENUMBER = -11,  /* text that is not a number, or out of range */
	QW_EIO = -12,      /* a system call failed; errno tells why */
	QW_EVERSION = -13, /* a saved state from another format version */
	QW_ECHECKSUM = -14,/* a saved state whose checksum does not match */
	QW_EMISMATCH = -15,/* a saved state for another configuration */
	QW_ESTATE = -16    /* call not valid in the object's current state */
};

/* The one place every error passes through: records nothing, returns code.
 * Put a breakpoint on qw_error to catch any failure at its origin. */
int qw_error(int code, const char *file, int line);
#define QW_ERROR(code) qw_error((code), __FILE__, __LINE__)

/* A short English description of an enum qw_err value. */
const char *qw_strerror(int code);

/* ---- ewcov.c: exponentially weighted mean and Cholesky factor ------------ */

/* The model S + f*F, S the EW covariance, F = diag(floor^2), f in [1/2, 1],
 * kept as its lower Cholesky factor L; see ewcov.c for the update. */
typedef struct qw_ewcov qw_ewcov;

/* floor: p noise floors (std dev, channel units), each >= 0 (0: chosen
 * from the first reading, see ewcov.c).  Copied. */
qw_ewcov *qw_ewcov_alloc(size_t p, const double *floor);
void qw_ewcov_free(qw_ewcov *ew);
/* Forget everything learned (count 0, factor back to the floor). */
void qw_ewcov_reset(qw_ewcov *ew);
size_t qw_ewcov_p(const qw_ewcov *ew);
uint64_t qw_ewcov_count(const qw_ewcov *ew);
const double *qw_ewcov_mean(const qw_ewcov *ew);
/* Learning weight for the next reading, given the steady EW weight lam in
 * (0, 1): max(lam, 1/(n+1)), so warm-up is an ordinary mean and covariance. */
double qw_ewcov_weight(const qw_ewcov *ew, double lam);
/* Score x (all channels finite) before learning: r = x - mu, y = L^-1 r,
 * *q = y'y.  Then, in the same sweep over L, prepare the factor of
 * (1-w)(S + w r r') without installing it.  w in (0, 1].  Returns QW_ERANGE
 * when q overflows, QW_ENUMERIC on a non-finite pivot; the model is untouched
 * either way.  Requires count >= 1. */
int qw_ewcov_score(qw_ewcov *ew, const double *x, double w, double *q);
/* Install what the last qw_ewcov_score prepared, scaling the learned step by
 * gain in (0, 1] (1 = learn as is; < 1 clips: redoes the sweep with r scaled
 * by gain).  Updates the mean, the effective-size bookkeeping and tops the
 * floor back up when due. */
int qw_ewcov_learn(qw_ewcov *ew, double gain);
/* First reading: sets the mean to x (finite), count to 1. */
void qw_ewcov_first(qw_ewcov *ew, const double *x);
/* Score a reading whose missing channels are NaN against the marginal model
 * of the observed ones; *dof = number observed.  Does not learn (see
 * qw_ewcov_learn_partial). */
int qw_ewcov_score_subset(qw_ewcov *ew, const double *x, double *q,
			  unsigned *dof);
/* Learn a reading whose missing channels are NaN (at least one observed),
 * with weight w and gain as qw_ewcov_learn: the expected step under the
 * model given what was observed (the E-step of EM), so the observed part
 * is learned as it is and the missing part neither moves the model nor
 * freezes it.  With r_M the conditional mean of the missing residual and
 * C its conditional covariance, mu' = mu + w r and
 *   Sigma' = (1-w)(Sigma + w r r' + w C_M),
 * one sweep for r and one per missing channel for C, O(k p^2) for k
 * missing; needs no prepared score.  QW_ESTATE (w or gain out of range),
 * QW_ENODATA (every channel missing), QW_ENUMERIC when the missing block is
 * numerically singular, QW_ERANGE on overflow; the model is then
 * untouched. */
int qw_ewcov_learn_partial(qw_ewcov *ew, const double *x, double w,
			   double gain);
/* Distribution of the next score: q ~ scale * T2(p, nu) (see limit.c). */
double qw_ewcov_nu(const qw_ewcov *ew);
double qw_ewcov_scale(const qw_ewcov *ew);
/* The factor, packed by columns: column j holds L[j..p-1][j]. */
const double *qw_ewcov_factor(const qw_ewcov *ew);
/* Checks every element of L finite and every pivot > 0; QW_ENUMERIC if not,
 * after rebuilding the factor from the floor (the mean is kept). */
int qw_ewcov_verify(qw_ewcov *ew);

/* Serialised state for checkpoints: qw_ewcov_state_len() bytes in host
 * order (the checkpoint file adds version, size and checksum).  _set checks
 * every value (finite, pivots > 0, shares in range): QW_EMISMATCH when len
 * or p differ, QW_EFORMAT when a value is impossible; the model is then
 * unchanged. */
size_t qw_ewcov_state_len(const qw_ewcov *ew);
void qw_ewcov_state_get(const qw_ewcov *ew, void *buf);
int qw_ewcov_state_set(qw_ewcov *ew, const void *buf, size_t len);

/* ---- limit.c: false-alarm rate to control limit ----------------------- */

#define QW_SECONDS_PER_DAY 86400.0

/* Per-reading exceedance probability alpha such that the rate of raised
 * alarms under a k-of-m rule equals alarms_per_day at rate readings/s. */
int qw_limit_alpha(double alarms_per_day, double rate, unsigned k,
		   unsigned m, double *alpha);
/* Upper chi-square quantile: P(chi2(dof) > limit) = alpha (known
 * parameters; no finite-sample correction). */
double qw_limit_chisq(double alpha, unsigned dof);
/* Limit corrected for an estimated mean and covariance of effective size
 * nu: scale * nu*dof/(nu-dof+1) * F^-1(1-alpha; dof, nu-dof+1).  +Inf when
 * nu <= dof - 1 + QW_LIMIT_NU_MARGIN (too little data to score). */
double qw_limit_corrected(double alpha, unsigned dof, double nu, double scale);
/* Upper-tail probability of q under the same corrected distribution
 * (pvalue.c). */
double qw_limit_pvalue(double q, unsigned dof, double nu, double scale);
/* The same, keeping ln B of the last (dof, nu - dof + 1) in memo for the
 * next call (odd dof; even dof needs none): a replay's per-reading
 * p-value.  A memo starts as QW_PVALUE_MEMO_INIT; the figure never
 * depends on the memo. */
struct qw_pvalue_memo {
	unsigned dof; /* 0: empty */
	double d2, lnbeta;
};
#define QW_PVALUE_MEMO_INIT {0u, 0.0, 0.0}
double qw_limit_pvalue_memo(struct qw_pvalue_memo *memo, double q,
			    unsigned dof, double nu, double scale);
#define QW_LIMIT_NU_MARGIN 1.0 /* readings of slack before F's 2nd dof > 1 */

/* ---- alarm.c: persistence (k of last m) and hysteresis ---------------- */

#define QW_ALARM_MAX_M 64 /* window fits one uint64_t of bits */

enum qw_event {
	QW_EVENT_NONE = 0, /* no change of alarm state */
	QW_EVENT_RAISE = 1,/* the group went into alarm on this reading */
	QW_EVENT_CLEAR = 2 /* the group left alarm on this reading */
};

struct qw_alarm {
	uint64_t window;   /* bit i: reading i back was over the limit */
	unsigned count;    /* bits set in window */
	unsigned k, m;     /* raise when >= k of the last m are over */
	unsigned clear_n;  /* clear after clear_n consecutive readings under */
	unsigned under;    /* consecutive readings under, while in alarm */
	int in_alarm;      /* 1 while raised */
};

int qw_alarm_init(struct qw_alarm *a, unsigned k, unsigned m,
		  unsigned clear_n);
void qw_alarm_reset(struct qw_alarm *a);
/* Feed one scored reading; returns an enum qw_event. */
int qw_alarm_add(struct qw_alarm *a, int over);

/* ---- explain.c: which channels drove a score --------------------------- */

struct qw_contrib {
	unsigned channel;  /* index into the group's channels */
	double drop;       /* q minus q without this channel: w_i^2/(S^-1)_ii */
	double z;          /* r_i / sqrt(S_ii): the channel's own deviation */
};

/* ---- detector.c: one sensor group ------------------------------------- */

enum qw_learn {
	QW_LEARN_SKIP = 0, /* readings over the limit teach nothing */
	QW_LEARN_CLIP = 1, /* they teach a step shrunk to the limit's edge */
	QW_LEARN_ALL = 2   /* everything is learned (no contamination guard) */
};

/* Readings with channels missing (NaN): always scored on the observed
 * channels; once the model is warm, learned by their expected step under
 * the model (qw_ewcov_learn_partial), or held out. */
enum qw_partial {
	QW_PARTIAL_HOLD = 0,  /* scored, never learned */
	QW_PARTIAL_LEARN = 1  /* learned when warm (default) */
};

/* Temporal whitening (dynamics.c): what is scored. */
enum qw_dynamics {
	QW_DYN_NONE = 0,  /* the reading itself against the EW mean */
	QW_DYN_AR1 = 1,   /* per-channel AR(1) innovations */
	QW_DYN_VAR1 = 2   /* first-order vector autoregression innovations:
			     x_t given x_{t-1} under the EW joint model */
};

/* What the alarm rule watches (mewma.c). */
enum qw_mode {
	QW_MODE_PLAIN = 0, /* each reading's score */
	QW_MODE_MEWMA = 1  /* an EWMA of the standardised residuals (Lowry,
			      Woodall, Champ & Rigdon 1992) */
};

struct qw_params {
	size_t p;               /* channels, 1..QW_MAX_P */
	double half_life;       /* readings, or seconds when time_based */
	int time_based;         /* 1: half_life in seconds, weight follows dt */
	double rate;            /* nominal readings per second, > 0 */
	double alarms_per_day;  /* raised-alarm rate to deliver, > 0 */
	uint64_t warmup;        /* readings learned before any alarm */
	unsigned persist_k;     /* raise when persist_k ... */
	unsigned persist_m;     /* ... of the last persist_m are over */
	unsigned clear_n;       /* consecutive readings under to clear */
	const double *floor;    /* p floors (std dev, units); NULL/0 = auto */
	enum qw_learn learn;    /* contamination guard */
	enum qw_partial partial; /* readings with channels missing */
	uint64_t relearn_after; /* readings in alarm before automatic
				   re-baseline; 0 = only on request */
	int correct;            /* 1: finite-sample corrected limit (default);
				   0: plain chi-square (for comparison) */
	enum qw_dynamics dynamics; /* temporal whitening; default none */
	double max_gap;         /* seconds: consecutive readings further apart
				   do not form a lag pair; 0 =
				   QW_GAP_INTERVALS / rate */
	enum qw_mode mode;      /* plain (default) or mewma */
	double smoothing;       /* mewma weight rho in (0, 1]; default 0.1 */
	double fixed_limit;     /* > 0: use this limit (full dof) instead of
				   the one from alarms_per_day; 0 = derive */
	double limit_factor;    /* every derived limit times this (an
				   empirical tail correction from a fit);
				   default 1 */
};

#define QW_MAX_P 4096 /* channels per group; the factor is p^2/2 doubles */
/* Lag pairs: the longest step, in nominal reading intervals, when
 * max_gap is not configured: timing jitter of up to half an interval
 * still pairs, a lost reading does not (x_t given x_{t-2} is not the
 * one-step prediction the model learns). */
#define QW_GAP_INTERVALS 1.5

/* half_life = QW_HALF_LIFE_NONE: no forgetting, weights 1/n (an ordinary
 * mean and covariance: what a fit from a recording estimates). */
#define QW_HALF_LIFE_NONE INFINITY

/* Defaults for everything but p (see detector.c for values and why). */
void qw_params_default(struct qw_params *par, size_t p);
int qw_params_check(const struct qw_params *par);
/* The longest step of a lag pair in force: max_gap, or its default
 * QW_GAP_INTERVALS / rate (seconds). */
double qw_params_max_gap(const struct qw_params *par);

struct qw_result {
	double q;          /* squared Mahalanobis distance before learning */
	double limit;      /* control limit for this reading: Inf while the
			      model is too young to score; during the rest
			      of warm-up finite, but over stays 0 */
	double nu;         /* effective size behind the limit (for p-value) */
	double scale;      /* scale behind the limit (for p-value) */
	unsigned dof;      /* channels observed */
	int scored;        /* 1 when q is meaningful (count >= 1) */
	int over;          /* q > limit and warm-up done */
	int event;         /* enum qw_event */
	int in_alarm;      /* alarm state after this reading */
	int learned;       /* the reading updated the model */
	size_t ncontrib;   /* entries in contrib (0 unless over) */
	const struct qw_contrib *contrib; /* ranked by drop, owned by the
					     detector, valid until next add */
};

struct qw_counters {
	uint64_t readings;    /* readings offered to qw_detector_add */
	uint64_t scored;      /* readings with a score */
	uint64_t learned;     /* readings that updated the model */
	uint64_t exceedances; /* scored readings over the limit (post warm-up) */
	uint64_t alarms;      /* raise events */
	uint64_t partial;     /* readings with some channels missing */
	uint64_t rej_nonfinite; /* rejected: a channel +-Inf */
	uint64_t rej_overflow;  /* rejected: score overflowed */
	uint64_t rej_time;      /* rejected: time went backwards */
	uint64_t rej_empty;     /* rejected: every channel missing */
	uint64_t numeric;       /* factor rebuilt after a numeric fault */
	uint64_t rebaselines;   /* re-baselines, requested or automatic */
	uint64_t unlagged;      /* whitening: readings with no usable previous
				   reading (first, after a gap or a missing
				   channel): scored without it, not learned */
};

typedef struct qw_detector qw_detector;

qw_detector *qw_detector_alloc(const struct qw_params *par);
void qw_detector_free(qw_detector *d);
/* One reading: t in seconds (only differences matter), x[p] with NaN for a
 * missing channel.  Rejections return their code, are counted, and leave
 * the model untouched; res is always filled. */
int qw_detector_add(qw_detector *d, double t, const double *x,
		    struct qw_result *res);
/* The same with flags: QW_ADD_NOLEARN scores and raises as usual but never
 * learns the reading (a fit's trimming passes, held-out scoring). */
#define QW_ADD_NOLEARN 1u
int qw_detector_add_flags(qw_detector *d, double t, const double *x,
			  unsigned flags, struct qw_result *res);
/* Frozen (on = 1): nothing is learned from now on; the model and the limit
 * stay as they are (Phase II monitoring against a fixed reference).
 * Re-baselining a frozen group unfreezes it. */
void qw_detector_freeze(qw_detector *d, int on);
int qw_detector_frozen(const qw_detector *d);
/* Zeroes the counters and the alarm state, forgets the time and the
 * previous reading of the stream, and keeps the learned model: a model
 * loaded from a fit starts a stream of its own (any time may come next;
 * the first reading has no lag pair). */
void qw_detector_counters_reset(qw_detector *d);
/* Multiplies the learned covariance by s > 0 (a consistency factor for a
 * trimmed fit).  QW_EINVAL for s not finite and positive. */
int qw_detector_scale_model(qw_detector *d, double s);
/* Readings learned (the model's count) and the dimension of the model
 * vector (p, or 2p with VAR(1) whitening). */
uint64_t qw_detector_count(const qw_detector *d);
/* Restart learning from nothing (operator command).  Returns 1 when the
 * group was in alarm (the alarm is cleared: publish a clear), else 0. */
int qw_detector_rebaseline(qw_detector *d);
const struct qw_counters *qw_detector_counters(const qw_detector *d);
const struct qw_params *qw_detector_params(const qw_detector *d);
const qw_ewcov *qw_detector_model(const qw_detector *d);
int qw_detector_in_alarm(const qw_detector *d);
/* Per-reading alpha and the limit once the model is at full effective
 * size (what `check` prints). */
double qw_detector_alpha(const qw_detector *d);
double qw_detector_steady_limit(const qw_detector *d);
/* What that limit is made of: steady limit = scale * nu p/(nu-p+1) *
 * F^-1(1 - alpha; p, nu-p+1).  nu = (2-lam)/lam, scale = 1/(kappa (1-lam))
 * (kappa: the guard's bias, detector.c); Inf and 1 when not corrected. */
double qw_detector_steady_nu(const qw_detector *d);
double qw_detector_steady_scale(const qw_detector *d);
/* The limit in force for the next full reading. */
double qw_detector_limit(const qw_detector *d);

/* Serialised state for checkpoints (model, counters, alarm state), as for
 * qw_ewcov_state_*: bytes in host order, checked on _set. */
size_t qw_detector_state_len(const qw_detector *d);
void qw_detector_state_get(const qw_detector *d, void *buf);
int qw_detector_state_set(qw_detector *d, const void *buf, size_t len);

/* ---- mewma.c: the MEWMA statistic and its limit ------------------------ */

/* Steady-state rate of upcrossings per reading of the MEWMA statistic
 * T2 = |z|^2 (2-rho)/rho, z' = (1-rho) z + rho y, y ~ N(0, I_dof) iid:
 * P(T2_{t-1} <= h < T2_t).  Deterministic quadrature (mewma.c). */
double qw_mewma_uprate(double h, unsigned dof, double rho);
/* The h with qw_mewma_uprate(h) = rate (per reading, in (0, 0.5)); NaN
 * when no h in range gives it.  A few thousand CDF calls. */
double qw_mewma_limit(double rate, unsigned dof, double rho);

/* ---- tail.c: score tails (peaks over threshold), Hotelling limits ------ */

#define QW_TAIL_MIN_EXCESS 30 /* excesses below which no GPD is fitted */

/* Generalised Pareto excess model P(Y > y) = (1 + xi y/sigma)^(-1/xi). */
struct qw_gpd {
	double xi;         /* shape (> 0: heavy tail, 0: exponential) */
	double sigma;      /* scale, score units */
	double loglik;     /* log-likelihood at (xi, sigma) */
	size_t n;          /* excesses fitted */
};

/* Maximum-likelihood GPD fit of the n >= QW_TAIL_MIN_EXCESS excesses
 * y[i] >= 0 (not all 0), location 0.  QW_EINVAL otherwise. */
int qw_tail_gpd_fit(const double *y, size_t n, struct qw_gpd *out);
/* Log-likelihood of y under GPD(xi, sigma), location 0; -Inf outside. */
double qw_tail_gpd_loglik(const double *y, size_t n, double xi,
			  double sigma);

/* A tail model of n scores: the fraction above the threshold u is GPD. */
struct qw_tail {
	size_t n;          /* scores */
	size_t nu;         /* of them above u, fitted */
	double u;          /* threshold: the (n - nu)-th smallest score */
	struct qw_gpd gpd; /* of the excesses over u */
	const double *sorted; /* the caller's scores, sorted ascending */
};

/* Sorts s[0..n) ascending in place (all finite, >= 0) and fits a GPD to
 * the floor(fraction n) largest over the next one.  s must outlive t.
 * QW_EINVAL for bad scores, fraction outside (0, 1) or too few excesses. */
int qw_tail_fit(double *s, size_t n, double fraction, struct qw_tail *t);
/* Upper alpha quantile: the GPD beyond the threshold's share, the
 * empirical quantile within it.  NaN when t holds no fit. */
double qw_tail_quantile(const struct qw_tail *t, double alpha);
/* P(score > q) under the GPD, for q above u (NaN below u). */
double qw_tail_sf(const struct qw_tail *t, double q);
/* Ascending sort of n doubles (no NaN), in place, no allocation
 * (introsort: O(n log n) on any input). */
void qw_tail_sort(double *a, size_t n);
/* Consistency factor of a Gaussian covariance estimated from the readings
 * kept when q <= chi2_p^-1(keep): keep / P(chi2_{p+2} <= that). */
double qw_tail_consistency(double keep, unsigned p);
/* Hotelling T-squared limits from n readings (S with divisor n-1):
 * Phase I (the readings themselves), beta form, and Phase II (a new
 * reading), F form; see tail.c.  NaN outside their ranges. */
double qw_tail_phase1_limit(double alpha, unsigned p, double n);
double qw_tail_phase2_limit(double alpha, unsigned p, double n);

/* ---- fit.c: a model from a healthy recording -------------------------- */

/* Scores expected beyond the limit (alpha times the scores behind a tail
 * fit) below which the tail is shallow: the rate the fitted limit
 * delivers has a relative error of about 1/sqrt of this depth
 * (tests/test_fit.c: 100 gave 4%, 20 gave 22%), and a limit within a few
 * per cent moves a light-tailed rate by a factor of two or more.  A
 * shallow tail may raise a limit above the Gaussian one but not lower it
 * (fit.c). */
#define QW_FIT_DEPTH_MIN 30.0

struct qw_fit_opts {
	double cstep_keep;  /* share kept by each concentration step (C-step,
			       FAST-MCD); 1 = none.  Default 0.75 */
	double trim_alpha;  /* reweighting: a reading whose chi-square
			       p-value is below this is trimmed; 0 = no
			       trimming at all.  Default 0.025 */
	unsigned max_iter;  /* passes per stage before giving up on a fixed
			       point.  Default 20 */
	double tail_fraction; /* share of held-out scores in the GPD fit.
			       Default 0.05 */
	/* When not NULL, called before each pass over the readings, with
	 * what the pass is for ("trimming", "held-out halves", "adaptive
	 * chart") and the passes so far (1, 2, ...): the caller shows
	 * progress (the core does no I/O).  Default NULL. */
	void (*progress)(void *ctx, const char *stage, unsigned pass);
	void *progress_ctx;
};

void qw_fit_opts_default(struct qw_fit_opts *o);

struct qw_fit_result {
	uint64_t readings;    /* offered */
	uint64_t used;        /* learned by the final model */
	uint64_t trimmed;     /* left out as far out */
	unsigned csteps;      /* C-step passes of the final fit */
	unsigned reweights;   /* reweighting passes of the final fit */
	int converged;        /* both stages reached a fixed point */
	double consistency;   /* factor applied to the final covariance */
	double alpha;         /* per-reading alpha of the group */
	double limit_gauss;   /* the fixed model's limit (Gaussian theory) */
	double limit_factor;  /* empirical / Gaussian (1 when no tail) */
	double limit_tail;    /* what the tail fit gave (NaN: none); the
				 factor is 1 instead when it is below 1 and
				 the tail shallow (QW_FIT_DEPTH_MIN) */
	double limit_emp;     /* limit_gauss * limit_factor */
	int tail_ok;          /* held-out scores sufficed for a tail fit */
	struct qw_gpd gpd;    /* of held-out scores / their Gaussian limit */
	double tail_u;        /* the threshold of that fit (limit units) */
	uint64_t heldout;     /* held-out readings scored on all channels */
	uint64_t bad_stretch; /* readings in runs of trimmed readings, kept
				 out of the held-out scores (fit.c) */
	double heldout_days;  /* heldout / rate / 86400 */
	uint64_t ex_gauss, ex_emp;   /* held-out exceedances of each limit */
	uint64_t alarms_gauss, alarms_emp; /* raised under the group's rule */
	/* The group's adaptive chart (its own forgetting, learn policy and
	 * warm-up) run over the whole recording from nothing: each reading
	 * is scored before it is learned, so its scores are out of sample
	 * (fit.c).  What a group loading the model warm multiplies its
	 * limits by. */
	double adapt_factor;  /* empirical / Gaussian (1 when no tail) */
	double adapt_tail;    /* what the last run's tail gave: the factor
				 within FIT_ADAPT_TOL once converged, or
				 below 1 where a shallow tail left the
				 factor at 1; NaN when none */
	int adapt_tail_ok;    /* enough scores for a tail fit */
	struct qw_gpd adapt_gpd; /* of its scores / their limit */
	double adapt_tail_u;  /* the threshold of that fit (limit units) */
	uint64_t adapt_scored; /* its scores behind the tail: after
				  warm-up, all channels, outside faults */
	uint64_t adapt_faults; /* readings of bad stretches that it too
				  found far out, left out (fit.c) */
	double adapt_days;    /* adapt_scored / rate / 86400 */
	uint64_t adapt_ex_gauss, adapt_ex_emp; /* its exceedances */
	uint64_t adapt_alarms_gauss, adapt_alarms_emp; /* its raises, the
				  second from the run with the factor */
	unsigned adapt_passes; /* runs of the chart over the recording */
	int adapt_converged;  /* the last run's tail agreed with its factor */
};

/* Fits the group par (any dynamics and mode) to the n readings t[i]
 * (seconds, non-decreasing), x[i*p .. i*p+p) (NaN = missing), which the
 * engineer calls healthy: a detector built from par with no forgetting
 * and learn = all learns them, iteratively trimming readings the fit finds
 * far out; two-fold held-out scores give the empirical limit of the fixed
 * model, and the group's adaptive chart run over the recording gives its
 * own (adapt_*).  *model gets the final detector (frozen; the caller
 * frees it), its limit factor still 1.  QW_EINVAL for bad arguments,
 * QW_ENODATA when too few readings are learnable, QW_ENOMEM. */
int qw_fit_run(const struct qw_params *par, const double *t, const double *x,
	       size_t n, const struct qw_fit_opts *o, struct qw_fit_result *res,
	       qw_detector **model);

/* ---- batch.c: a frame of readings ---------------------------------------- */

/* Readings k = 0..n-1 (time t[k], channels x + k*p) through
 * qw_detector_add in order, with identical results; stops after the first
 * reading that raises or clears an alarm, so its res (and res->contrib) is
 * valid on return.  res[k] and, when rc is not NULL, rc[k] (the reading's
 * return code) are filled for the readings taken.  Returns how many were
 * taken: n, or fewer when an event stopped the call (0 only for n = 0). */
size_t qw_detector_add_batch(qw_detector *d, size_t n, const double *t,
			     const double *x, struct qw_result *res, int *rc);

/* ---- explain.c --------------------------------------------------------- */

/* Attribution of r = x - mu against the factor L (packed by columns, p x p)
 * for the channels with mask[i] != 0 (NULL = all): fills out[0..n-1] ranked
 * by drop, n = channels used.  work: 2*p*p + 4*p doubles.  O(p^3). */
size_t qw_explain(const double *L, size_t p, const double *r,
		  const unsigned char *mask, double *work,
		  struct qw_contrib *out);
size_t qw_explain_work_len(size_t p);

#ifdef __cplusplus
}
#endif
#endif /* QUADWATCH_H */
