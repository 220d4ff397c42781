/* fit.c: a group's model from a recording the engineer calls healthy
 * (Phase I), and the limit it should be monitored with (Phase II).
 *
 * The model is whatever the group's own detector learns when it is built
 * from the group's parameters with no forgetting (half_life =
 * QW_HALF_LIFE_NONE: weights 1/n, the ordinary mean and covariance with
 * divisor n) and learn = all, so every dynamics and mode setting is
 * fitted by the same code.  Readings the fit finds far out are trimmed
 * (offered with QW_ADD_NOLEARN, so whitening still sees them as the
 * previous reading) and the model refitted:
 *
 *   1. Concentration steps (the C-step of Rousseeuw & Van Driessen 1999,
 *      "A fast algorithm for the minimum covariance determinant
 *      estimator", Technometrics 41): keep the h = ceil(keep m) of the m
 *      scored readings with the smallest scores (largest chi-square
 *      p-values: readings with a missing channel have fewer dof), refit,
 *      repeat until the kept set stops changing.  Started from the
 *      classical fit, not from FAST-MCD's many random subsets: one start
 *      suits a recording that is mostly healthy, and it is what this
 *      file does, not FAST-MCD itself.
 *   2. Reweighting (the same paper's reweighting step; iterated here to a
 *      fixed point: iterative hard rejection): trim the readings whose
 *      chi-square p-value is below trim_alpha, refit, repeat.
 * After each refit the covariance is multiplied by the Gaussian
 * consistency factor of its cut, keep / P(chi2_{p+2} <= chi2_p^-1(keep))
 * (Croux & Haesbroeck 1999; tail.c).  The distances come from the
 * detector's own score q (of a plain reading or an innovation), compared with chi-square(dof): the references'
 * setting is iid Gaussian readings, and what the detector scores is built
 * to be close to that.  Under mode = mewma the trimming runs in plain
 * mode (a reading's own score: the smoothed statistic stays high for a
 * while after one bad reading, and would trim its healthy neighbours);
 * the group's own MEWMA detector then learns the kept readings.
 *
 * The limit: Gaussian theory gives the fixed model's limit (the
 * detector's own, e.g. the Phase II F form for a plain group); a plant's
 * scores are often heavier-tailed.  Two-fold held-out scoring measures
 * by how much: fit the first half, score the second with the frozen
 * model (QW_ADD_NOLEARN), and the other way round; each held-out score is
 * divided by the limit of the model that scored it, and the upper alpha
 * quantile of these ratios (tail.c: generalised Pareto above the
 * tail_fraction quantile, maximum likelihood) is the limit factor of the
 * model fitted on the whole recording.  (Under mewma the group's limit
 * is set for a raise rate, not a per-reading exceedance probability; the
 * ratio of the held-out exceedance quantile at the group's alpha to the
 * Gaussian limit is then a proxy for the correction, not its exact
 * value.)  Readings inside a run of at
 * least FIT_BAD_RUN consecutive readings that the whole recording's fit
 * trimmed are bad stretches, left out of the held-out scores: a heavy
 * tail trims isolated readings, a fault that lasts trims a run.  Bad
 * readings that come alone stay in, and raise the factor.
 *
 * A group that loads the model warm goes on learning with its own
 * forgetting, and its scores are not the fixed model's: a plant that
 * drifts widens a model fitted over the whole recording (the fixed chart
 * needs a large factor), while the adaptive chart follows the drift but
 * estimates its covariance from a short, autocorrelated window (often a
 * small factor, above or below 1).  So the fit also runs the group's
 * adaptive chart itself over the recording from nothing, exactly as
 * replay would: every reading is scored before it is learned, so after
 * warm-up its scores are out of sample without any split.  The same tail
 * fit of those scores over the limit in force gives the factor a warm
 * group applies (adapt_factor), iterated to a fixed point since the
 * factor changes what the chart learns (fit_adaptive); the last run
 * counts the raises it gives.  Bad stretches are not simply left out
 * here: those the fixed fit trims on a healthy plant are mostly its far
 * operating points, where the adaptive chart's own tail events are (on
 * the demo plant, leaving every bad stretch out gave 10 and 35 alarms
 * over 12 fresh days where 6 and 12 were expected, against 5 and 11
 * when they were kept).  Only the bad stretches that the
 * adaptive chart also finds far out for most of their length are left
 * out, as faults (fit_mark_faults).  Both factors set a per-reading
 * exceedance probability; a run of exceedances raises one alarm, so on
 * autocorrelated scores fewer alarms than exceedances come, and the
 * configured rate is an upper bound as far as the tail fit holds.
 *
 * Workload: a recording held in memory (n readings of p channels); each
 * stage pass costs one detector pass over its readings, a handful of
 * passes per stage, and a few runs of the adaptive chart (one to find
 * the faults, then to the factor's fixed point: two or three on the demo
 * plant); memory n (2 doubles + 1 byte) beside the recording. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "internal.h"
#include "quadwatch.h"
#include "sort.h"

#define FIT_DEF_CSTEP_KEEP 0.75  /* h/n: the usual MCD choice, between
				    the 50% breakdown point and efficiency */
#define FIT_DEF_TRIM_ALPHA 0.025 /* the 0.975 chi-square quantile of the
				    FAST-MCD reweighting step */
#define FIT_DEF_MAX_ITER 20      /* passes per stage; C-steps converge in
				    a few (Rousseeuw & Van Driessen) */
/* A run of at least this many consecutive readings trimmed by the whole
 * recording's fit is taken as a bad stretch and kept out of the held-out
 * tail.  Healthy iid readings trimmed with probability t form such a run
 * with probability ~t^5 (2e-4 even at t = 0.18, a t(5) process's share),
 * so a genuine heavy tail keeps its readings; a fault that lasts is cut. */
#define FIT_BAD_RUN 5
/* The adaptive chart's factor is iterated until a run with it finds its
 * own tail within this of it (a 0.5% change of the limit moves the rate
 * by a few per cent at most), in at most FIT_ADAPT_ITER runs. */
#define FIT_ADAPT_TOL 0.005
#define FIT_ADAPT_ITER 8
/* A bad stretch is a fault for the adaptive chart when at least this
 * share of its readings are over that chart's Gaussian limit
 * (fit_mark_faults). */
#define FIT_FAULT_SHARE 0.5
#define FIT_DEF_TAIL_FRACTION 0.05 /* top 5% of held-out scores: above a
				    high quantile, yet >= 50 excesses from
				    1000 held-out readings */

struct fit_work {
	struct qw_params fp;     /* the group's params, no forgetting */
	struct qw_params tp;     /* the same in plain mode: what trims */
	const struct qw_fit_opts *o;
	const double *t, *x;
	size_t p;
	unsigned char *trim;     /* n: 1 = offered without learning */
	double *pv;              /* n: chi-square p-value of the score, NaN
				    when not scored */
	double *tmp;             /* n scratch (C-step threshold) */
	unsigned char *bad;      /* n: inside a bad stretch (FIT_BAD_RUN) */
	double *z;               /* n held-out scores / their limit */
	unsigned char *state;    /* a detector's state, saved around scoring */
	size_t state_len;
	const char *stage;       /* what the passes are for (progress) */
	unsigned passes;         /* over the readings so far */
};

/* Before each pass over the readings: the caller's progress hook. */
static void fit_tick(struct fit_work *w)
{
	w->passes++;
	if (w->o->progress != NULL)
		w->o->progress(w->o->progress_ctx, w->stage, w->passes);
}

void qw_fit_opts_default(struct qw_fit_opts *o)
{
	o->cstep_keep = FIT_DEF_CSTEP_KEEP;
	o->trim_alpha = FIT_DEF_TRIM_ALPHA;
	o->max_iter = FIT_DEF_MAX_ITER;
	o->tail_fraction = FIT_DEF_TAIL_FRACTION;
	o->progress = NULL;
	o->progress_ctx = NULL;
}

/* A detector that learned the untrimmed readings of [lo, hi), its
 * covariance times c.  NULL when out of memory. */
static qw_detector *fit_learn(struct fit_work *w, const struct qw_params *par,
			      size_t lo, size_t hi, double c)
{
	qw_detector *d = qw_detector_alloc(par);
	struct qw_result res;
	size_t i;

	if (d == NULL)
		return NULL;
	fit_tick(w);
	for (i = lo; i < hi; i++) /* rejections are counted by the core */
		(void)qw_detector_add_flags(d, w->t[i], w->x + i * w->p,
					    w->trim[i] ? QW_ADD_NOLEARN : 0,
					    &res);
	if (c != 1.0 && qw_detector_count(d) > 0 &&
	    qw_detector_scale_model(d, c) != 0) {
		qw_detector_free(d);
		return NULL;
	}
	return d;
}

/* w->state holds at least len bytes (a detector's state, saved around
 * scoring and copied into a twin).  0 or QW_ENOMEM. */
static int fit_state_buf(struct fit_work *w, size_t len)
{
	unsigned char *s;

	if (len <= w->state_len)
		return 0;
	if ((s = realloc(w->state, len)) == NULL)
		return QW_ERROR(QW_ENOMEM);
	w->state = s;
	w->state_len = len;
	return 0;
}

/* w->pv over [lo, hi) against d, without changing d.  0 or QW_ENOMEM. */
static int fit_pvalues(struct fit_work *w, qw_detector *d, size_t lo,
		       size_t hi)
{
	struct qw_result res;
	size_t len = qw_detector_state_len(d), i;

	if (fit_state_buf(w, len) != 0)
		return QW_ERROR(QW_ENOMEM);
	qw_detector_state_get(d, w->state);
	fit_tick(w);
	for (i = lo; i < hi; i++) {
		(void)qw_detector_add_flags(d, w->t[i], w->x + i * w->p,
					    QW_ADD_NOLEARN, &res);
		w->pv[i] = res.scored && res.dof > 0 && isfinite(res.q)
			   ? qw_chisq_q(res.q, res.dof) : NAN;
	}
	return qw_detector_state_set(d, w->state, len);
}

/* New trim flags from w->pv: a C-step (keep < 1: the ceil(keep m)
 * largest p-values stay) or a reweighting cut (pv < cut).  Returns the
 * number of flags that changed. */
static size_t fit_retrim(struct fit_work *w, size_t lo, size_t hi,
			 double keep, double cut)
{
	size_t i, m = 0, changed = 0;
	unsigned char t;

	if (keep < 1.0) {
		for (i = lo; i < hi; i++)
			if (!isnan(w->pv[i]))
				w->tmp[m++] = w->pv[i];
		if (m == 0)
			return 0;
		/* drop the m - h smallest p-values */
		cut = qw_select_double(w->tmp, m,
				       m - (size_t)ceil(keep * (double)m));
	}
	for (i = lo; i < hi; i++) {
		t = !isnan(w->pv[i]) && w->pv[i] < cut;
		changed += t != w->trim[i];
		w->trim[i] = t;
	}
	return changed;
}

/* One stage to a fixed point, from the model *d (NULL: the classical
 * fit of [lo, hi)): score, re-trim, refit with the stage's consistency
 * factor, until a refit changes no flag.  *d (freed and replaced) is
 * always the model learned from the final flags; *iters counts refits.
 * 0 or QW_ENOMEM; *conv = 0 when max_iter refits did not settle it. */
static int fit_stage(struct fit_work *w, size_t lo, size_t hi, double keep,
		     double cut, qw_detector **d, unsigned *iters, int *conv)
{
	double c = qw_tail_consistency(keep < 1.0 ? keep : 1.0 - cut,
				       (unsigned)w->p);
	unsigned it;
	int rc;

	*conv = 0;
	if (*d == NULL && (*d = fit_learn(w, &w->tp, lo, hi, 1.0)) == NULL)
		return QW_ERROR(QW_ENOMEM);
	for (it = 0; it < w->o->max_iter; it++) {
		if ((rc = fit_pvalues(w, *d, lo, hi)) != 0)
			return rc;
		/* after a refit of this stage, no change = fixed point */
		if (fit_retrim(w, lo, hi, keep, cut) == 0 && it > 0) {
			*conv = 1;
			return 0;
		}
		qw_detector_free(*d);
		if ((*d = fit_learn(w, &w->tp, lo, hi, c)) == NULL)
			return QW_ERROR(QW_ENOMEM);
		*iters = it + 1;
	}
	return 0;
}

/* *d (learned by the trimming passes, with their placeholder limit) as
 * the group's own detector: built from w->fp, which derives limits, with
 * the same state (the model, counters and lag, byte for byte); *d is
 * replaced, or freed and NULL on failure.  0 or QW_ENOMEM. */
static int fit_twin(struct fit_work *w, qw_detector **d)
{
	qw_detector *t = qw_detector_alloc(&w->fp);
	size_t len = qw_detector_state_len(*d);
	int rc = t != NULL && fit_state_buf(w, len) == 0
		 ? 0 : QW_ERROR(QW_ENOMEM);

	if (rc == 0) {
		qw_detector_state_get(*d, w->state);
		rc = qw_detector_state_set(t, w->state, len);
	}
	qw_detector_free(*d);
	*d = NULL;
	if (rc != 0) {
		qw_detector_free(t);
		return rc;
	}
	*d = t;
	return 0;
}

/* The trimmed fit of [lo, hi), frozen, into *d; its figures into r. */
static int fit_range(struct fit_work *w, size_t lo, size_t hi,
		     qw_detector **d, struct qw_fit_result *r)
{
	const struct qw_fit_opts *o = w->o;
	int rc = 0, c1 = 1, c2 = 1;
	size_t i;

	memset(w->trim + lo, 0, hi - lo);
	*d = NULL;
	r->csteps = r->reweights = 0;
	r->consistency = 1.0;
	if (o->trim_alpha > 0 && o->cstep_keep < 1.0)
		rc = fit_stage(w, lo, hi, o->cstep_keep, 0, d, &r->csteps, &c1);
	if (rc == 0 && o->trim_alpha > 0) {
		rc = fit_stage(w, lo, hi, 1.0, o->trim_alpha, d, &r->reweights,
			       &c2);
		r->consistency = qw_tail_consistency(1.0 - o->trim_alpha,
						     (unsigned)w->p);
	}
	/* the group's own detector learns the kept readings (under mewma
	 * the model is the plain one's, with the smoothed state beside it) */
	if (rc == 0 && (o->trim_alpha <= 0 || w->fp.mode != w->tp.mode)) {
		qw_detector_free(*d);
		if ((*d = fit_learn(w, &w->fp, lo, hi, r->consistency)) == NULL)
			rc = QW_ERROR(QW_ENOMEM);
	}
	if (rc != 0)
		return rc;
	r->converged = c1 && c2;
	r->trimmed = 0;
	for (i = lo; i < hi; i++)
		r->trimmed += w->trim[i];
	r->used = qw_detector_counters(*d)->learned;
	if (qw_detector_params(*d)->fixed_limit > 0 &&
	    (rc = fit_twin(w, d)) != 0)
		return rc;
	qw_detector_freeze(*d, 1);
	return 0;
}

/* Held-out scores of [lo, hi) on all channels against the frozen d, each
 * divided by d's limit, appended to z (*nz). */
static void fit_heldout(struct fit_work *w, qw_detector *d, size_t lo,
			size_t hi, double *z, size_t *nz)
{
	double lim = qw_detector_limit(d);
	struct qw_result res;
	size_t i;

	if (!(lim > 0) || !isfinite(lim))
		return; /* too few readings for a limit: nothing to measure */
	fit_tick(w);
	for (i = lo; i < hi; i++) {
		(void)qw_detector_add_flags(d, w->t[i], w->x + i * w->p,
					    QW_ADD_NOLEARN, &res);
		if (res.scored && res.dof == w->p && isfinite(res.q) &&
		    !w->bad[i])
			z[(*nz)++] = res.q / lim;
	}
}

/* Raised alarms and exceedances of the group's k-of-m rule over the
 * score ratios z[0..n) against ratio limit lim. */
static void fit_alarms(const struct qw_params *par, const double *z,
		       size_t n, double lim, uint64_t *alarms, uint64_t *ex)
{
	struct qw_alarm a;
	size_t i;

	*alarms = *ex = 0;
	if (qw_alarm_init(&a, par->persist_k, par->persist_m, par->clear_n))
		return;
	for (i = 0; i < n; i++) {
		int over = z[i] > lim;

		*ex += (uint64_t)over;
		*alarms += qw_alarm_add(&a, over) == QW_EVENT_RAISE;
	}
}

/* w->bad from w->trim: runs of >= FIT_BAD_RUN trimmed readings.
 * Returns the readings so marked. */
static uint64_t fit_mark_bad(struct fit_work *w, size_t n)
{
	size_t i, j, k;
	uint64_t nbad = 0;

	memset(w->bad, 0, n);
	for (i = 0; i < n; i = j) {
		for (j = i; j < n && w->trim[j]; j++)
			;
		if (j - i >= FIT_BAD_RUN)
			for (k = i; k < j; k++)
				w->bad[k] = 1, nbad++;
		if (j == i)
			j++;
	}
	return nbad;
}

/* A tail from nz scores is shallow: fewer than QW_FIT_DEPTH_MIN of them
 * expected beyond the limit at the group's alpha.  Its factor may raise
 * the limit but not lower it below the Gaussian one: the extrapolation
 * from the fitted share to alpha is then long, a limit a few per cent
 * too low raises a light-tailed rate twofold or more, and the Gaussian
 * theory is the better bet on the low side.  (On the demo plant's
 * whitened pump skid, adaptive factors of 0.85 and 0.88 from one healthy
 * day each gave 14 alarms over 6 fresh days where 6 were expected; kept
 * at 1, 2.) */
static int fit_shallow(const struct qw_fit_result *r, size_t nz)
{
	return r->alpha * (double)nz < QW_FIT_DEPTH_MIN;
}

/* Two-fold held-out ratios (z, n entries: scratch of w->pv's size) and
 * the tail fit behind the limit factor. */
static int fit_limit(struct fit_work *w, const struct qw_params *par,
		     size_t n, double *z, struct qw_fit_result *r)
{
	struct qw_fit_result part;
	qw_detector *d = NULL;
	size_t half = n / 2, nz = 0, na;
	uint64_t a1, e1, a2, e2;
	struct qw_tail tail;
	int rc;

	w->stage = "held-out halves";
	if ((rc = fit_range(w, 0, half, &d, &part)) != 0)
		return rc;
	fit_heldout(w, d, half, n, z, &nz);
	qw_detector_free(d);
	na = nz;
	if ((rc = fit_range(w, half, n, &d, &part)) != 0)
		return rc;
	fit_heldout(w, d, 0, half, z, &nz);
	qw_detector_free(d);
	r->heldout = nz;
	r->heldout_days = (double)nz / par->rate / QW_SECONDS_PER_DAY;
	r->limit_factor = 1.0;
	r->limit_tail = NAN;
	memcpy(w->tmp, z, nz * sizeof *z);
	r->tail_ok = qw_tail_fit(w->tmp, nz, w->o->tail_fraction, &tail) == 0;
	if (r->tail_ok) {
		double q = qw_tail_quantile(&tail, r->alpha);

		r->gpd = tail.gpd;
		r->tail_u = tail.u;
		r->limit_tail = q;
		if (q > 0 && isfinite(q))
			r->limit_factor = fit_shallow(r, nz) ? fmax(q, 1.0) : q;
		else
			r->tail_ok = 0;
	}
	/* the two folds are separate streams for the alarm rule */
	fit_alarms(par, z, na, 1.0, &a1, &e1);
	fit_alarms(par, z + na, nz - na, 1.0, &a2, &e2);
	r->alarms_gauss = a1 + a2, r->ex_gauss = e1 + e2;
	fit_alarms(par, z, na, r->limit_factor, &a1, &e1);
	fit_alarms(par, z + na, nz - na, r->limit_factor, &a2, &e2);
	r->alarms_emp = a1 + a2, r->ex_emp = e1 + e2;
	return 0;
}

/* One run of the group's own adaptive chart (par, limits times f) over
 * the n readings from nothing, as the group itself would run: each
 * reading is scored, then learned by the group's rule.  The scores of
 * readings on all channels after warm-up and not flagged in skip (NULL:
 * none), each divided by the limit in force for it, go to z (*nz of
 * them), and those readings' exceedances and raises to *ex and *alarms;
 * over (when not NULL) gets 1 for each reading over its limit after
 * warm-up, 0 for the others.  0 or QW_ENOMEM. */
static int fit_adaptive_pass(struct fit_work *w, const struct qw_params *par,
			     size_t n, double f, const unsigned char *skip,
			     double *z, size_t *nz, uint64_t *ex,
			     uint64_t *alarms, unsigned char *over)
{
	struct qw_params ap = *par;
	struct qw_result res;
	qw_detector *d;
	size_t i;

	ap.limit_factor = f;
	if ((d = qw_detector_alloc(&ap)) == NULL)
		return QW_ERROR(QW_ENOMEM);
	fit_tick(w);
	*nz = 0;
	*ex = *alarms = 0;
	for (i = 0; i < n; i++) {
		int warm = qw_detector_count(d) >= ap.warmup;

		(void)qw_detector_add(d, w->t[i], w->x + i * w->p, &res);
		if (over != NULL)
			over[i] = (unsigned char)res.over;
		if (!warm || !res.scored || res.dof != w->p ||
		    !isfinite(res.q) || !(res.limit > 0) ||
		    !isfinite(res.limit) || (skip != NULL && skip[i]))
			continue;
		z[(*nz)++] = res.q / res.limit;
		*ex += (uint64_t)res.over;
		*alarms += res.event == QW_EVENT_RAISE;
	}
	qw_detector_free(d);
	return 0;
}

/* Faults inside the recording, for the adaptive chart: the bad stretches
 * (w->bad) in which at least FIT_FAULT_SHARE of the readings were over
 * the adaptive chart's own Gaussian limit (over[], from a run at factor
 * 1).  A fault that lasts stays far out for both charts (a learn = skip
 * chart does not learn it); a far operating point of a healthy plant,
 * which the fixed fit trims in long runs, is mostly within the adaptive
 * chart's limit, and its brief exceedances there are the chart's own
 * tail, to be kept.  Marks them in over[] (rewritten: 1 = leave out of
 * the tail) and returns the readings marked. */
static uint64_t fit_mark_faults(const struct fit_work *w, size_t n,
				unsigned char *over)
{
	size_t i, j, nover;
	uint64_t marked = 0;
	int fault;

	for (i = 0; i < n; i = j) {
		if (!w->bad[i]) {
			over[i] = 0;
			j = i + 1;
			continue;
		}
		for (j = i, nover = 0; j < n && w->bad[j]; j++)
			nover += over[j];
		fault = (double)nover >= FIT_FAULT_SHARE * (double)(j - i);
		memset(over + i, fault, j - i);
		marked += fault ? j - i : 0;
	}
	return marked;
}

/* The adaptive chart's limit factor (r->adapt_*), to a fixed point: a
 * run at the Gaussian limit gives the scores (z: n entries of scratch)
 * and their tail, whose upper alpha quantile g rescales the factor; but
 * the factor changes what a learn = skip group learns (a higher limit
 * lets more of the tail in, widening the model), so the run is repeated
 * with f times g until its own tail agrees (|g - 1| <= FIT_ADAPT_TOL).
 * The counts are those of the run at the factor reported. */
static int fit_adaptive(struct fit_work *w, const struct qw_params *par,
			size_t n, double *z, struct qw_fit_result *r)
{
	struct qw_tail tail;
	double f = 1.0, g;
	uint64_t ex = 0, al = 0;
	unsigned it;
	size_t nz = 0;
	int rc;

	r->adapt_tail = NAN;
	w->stage = "adaptive chart";
	/* w->trim is free by now (fit_limit's folds are done): the faults */
	if (r->bad_stretch > 0) {
		if ((rc = fit_adaptive_pass(w, par, n, 1.0, NULL, z, &nz, &ex,
					    &al, w->trim)) != 0)
			return rc;
		r->adapt_faults = fit_mark_faults(w, n, w->trim);
	}
	for (it = 0; it < FIT_ADAPT_ITER; it++) {
		if ((rc = fit_adaptive_pass(w, par, n, f,
					    r->adapt_faults ? w->trim : NULL,
					    z, &nz, &ex, &al, NULL)) != 0)
			return rc;
		r->adapt_passes = it + 1;
		r->adapt_factor = f;
		r->adapt_ex_emp = ex;
		r->adapt_alarms_emp = al;
		if (it == 0) {
			r->adapt_scored = nz;
			r->adapt_days = (double)nz / par->rate /
					QW_SECONDS_PER_DAY;
			r->adapt_ex_gauss = ex;
			r->adapt_alarms_gauss = al;
		}
		if (qw_tail_fit(z, nz, w->o->tail_fraction, &tail) != 0)
			break;
		g = qw_tail_quantile(&tail, r->alpha);
		if (!(g > 0) || !isfinite(g))
			break;
		/* the tail in units of the Gaussian limit, as the factor */
		r->adapt_tail_ok = 1;
		r->adapt_gpd = tail.gpd;
		r->adapt_gpd.sigma *= f;
		r->adapt_tail_u = tail.u * f;
		r->adapt_tail = f * g;
		if (fabs(g - 1.0) <= FIT_ADAPT_TOL) {
			r->adapt_converged = 1;
			break;
		}
		if (f * g < 1.0 && fit_shallow(r, nz)) {
			if (f == 1.0) { /* this run was at the floor */
				r->adapt_converged = 1;
				break;
			}
			g = 1.0 / f; /* next run at the Gaussian limit */
		}
		f *= g;
	}
	return 0;
}

/* The fit's parameters (the group's, with no forgetting, every reading
 * learned, never out of warm-up) and buffers.  0 or QW_ENOMEM; the caller
 * frees with fit_work_free either way. */
static int fit_work_init(struct fit_work *w, const struct qw_params *par,
			 const double *t, const double *x, size_t n,
			 const struct qw_fit_opts *o)
{
	size_t m = n > 0 ? n : 1;

	memset(w, 0, sizeof *w);
	w->fp = *par;
	w->fp.half_life = QW_HALF_LIFE_NONE;
	w->fp.time_based = 0;
	w->fp.learn = QW_LEARN_ALL;
	w->fp.relearn_after = 0;
	/* never out of warm-up: the model's share learned under a guard
	 * stays 0 (a group loading it then applies no guard-bias correction
	 * to what was learned here), and the fit raises no alarm state */
	w->fp.warmup = UINT64_MAX;
	w->fp.fixed_limit = 0;
	w->fp.limit_factor = 1.0;
	w->tp = w->fp;
	w->tp.mode = QW_MODE_PLAIN;
	/* The trimming passes read scores, never limits (warm-up never ends,
	 * everything is learned): a placeholder fixed limit spares them
	 * re-solving the F quantile as the model grows, which was 30% of a
	 * fit's time.  Their models become the group's own detector
	 * (fit_twin) before any limit is taken from them. */
	w->tp.fixed_limit = 1.0;
	w->o = o;
	w->stage = "trimming";
	w->t = t;
	w->x = x;
	w->p = par->p;
	w->trim = calloc(m, 1);
	w->bad = malloc(m);
	w->pv = malloc(m * sizeof *w->pv);
	w->tmp = malloc(m * sizeof *w->tmp);
	w->z = malloc(m * sizeof *w->z);
	return w->trim && w->bad && w->pv && w->tmp && w->z
	       ? 0 : QW_ERROR(QW_ENOMEM);
}

static void fit_work_free(struct fit_work *w)
{
	free(w->trim);
	free(w->bad);
	free(w->pv);
	free(w->tmp);
	free(w->z);
	free(w->state);
}

int qw_fit_run(const struct qw_params *par, const double *t, const double *x,
	       size_t n, const struct qw_fit_opts *o, struct qw_fit_result *res,
	       qw_detector **model)
{
	struct fit_work w;
	struct qw_fit_result fin;
	qw_detector *d = NULL;
	int rc;

	memset(res, 0, sizeof *res);
	*model = NULL;
	if (qw_params_check(par) != 0 || t == NULL || x == NULL ||
	    !(o->cstep_keep > 0.5 && o->cstep_keep <= 1.0) ||
	    !(o->trim_alpha >= 0 && o->trim_alpha < 0.5) ||
	    !(o->tail_fraction > 0 && o->tail_fraction < 1))
		return QW_ERROR(QW_EINVAL);
	res->readings = n;
	rc = fit_work_init(&w, par, t, x, n, o);
	/* the model first: its trim flags mark the bad stretches that the
	 * held-out tail leaves out */
	if (rc == 0)
		rc = fit_range(&w, 0, n, &d, &fin);
	if (rc == 0 && fin.used <= par->p)
		rc = QW_ERROR(QW_ENODATA); /* no covariance to speak of */
	if (rc == 0) {
		res->alpha = qw_detector_alpha(d);
		res->bad_stretch = fit_mark_bad(&w, n);
		rc = fit_limit(&w, par, n, w.z, res);
	}
	if (rc == 0)
		rc = fit_adaptive(&w, par, n, w.z, res);
	if (rc == 0) {
		res->used = fin.used;
		res->trimmed = fin.trimmed;
		res->csteps = fin.csteps;
		res->reweights = fin.reweights;
		res->converged = fin.converged;
		res->consistency = fin.consistency;
		res->limit_gauss = qw_detector_limit(d);
		res->limit_emp = res->limit_gauss * res->limit_factor;
		*model = d;
		d = NULL;
	}
	qw_detector_free(d);
	fit_work_free(&w);
	return rc;
}
