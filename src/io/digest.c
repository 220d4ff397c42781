/* digest.c: the replay summary's figures of a stream in bounded memory
 * (see digest.h for what each keeps and how exact it is).
 *
 * Workload per value: qw_lag1_add a dozen flops; qw_extreme_add one
 * comparison, once pruned one histogram increment, and every
 * QW_EXTREME_KEEP kept values one selection over 2 QW_EXTREME_KEEP (O(1)
 * amortised); qw_strip_add O(1), a merge of QW_STRIP_MAX runs each time
 * the stream doubles.  The figures: one selection over keep, one pass over
 * a histogram, or (exact KS) one sort of at most 2 QW_EXTREME_KEEP values. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "digest.h"
#include "quadwatch.h"
#include "sort.h"
#include "summary.h"

#define EXTREME_CAP0 1024   /* first keep allocation, values */

/* ---- lag-1 autocorrelation ----------------------------------------- */

void qw_lag1_reset(struct qw_lag1 *l)
{
	memset(l, 0, sizeof *l);
}

void qw_lag1_add(struct qw_lag1 *l, double x)
{
	double n1, delta, m, d;

	if (l->n == 0) {
		l->n = 1;
		l->mean = l->first = l->last = x;
		l->m2 = l->c1 = 0.0;
		return;
	}
	n1 = (double)(l->n + 1);
	delta = x - l->mean;
	m = l->mean + delta / n1;
	d = l->mean - m;
	/* the old pairs about the new mean: their deviations shift by d,
	 * and they sum to -(first - old mean) and -(last - old mean) */
	l->c1 += -d * ((l->first - l->mean) + (l->last - l->mean))
		 + (double)(l->n - 1) * d * d + (l->last - m) * (x - m);
	l->m2 += delta * (x - m);
	l->mean = m;
	l->last = x;
	l->n++;
}

double qw_lag1_get(const struct qw_lag1 *l)
{
	double r;

	if (l->n < 2)
		return NAN;
	r = l->c1 / l->m2;
	return isfinite(r) ? r : NAN;
}

/* ---- one extreme quantile ------------------------------------------- */

void qw_extreme_reset(struct qw_extreme *t, int upper, int lo_exp, int octaves)
{
	memset(t, 0, sizeof *t);
	t->upper = upper;
	t->lo_exp = lo_exp;
	t->octaves = octaves;
	t->bar = upper ? -INFINITY : INFINITY;
}

void qw_extreme_free(struct qw_extreme *t)
{
	free(t->keep);
	free(t->hist);
	t->keep = NULL;
	t->hist = NULL;
}

static size_t extreme_nbuckets(const struct qw_extreme *t)
{
	return (size_t)t->octaves * QW_EXTREME_SUB + 2;
}

/* Bucket 0: below 2^lo_exp (zero, negative, subnormal); the last: at or
 * above 2^(lo_exp + octaves).  Between, octave e and the top seven bits
 * of the mantissa (QW_EXTREME_SUB = 2^7), read off the double's bits. */
#define EXTREME_SUB_BITS 7
static size_t extreme_bucket(const struct qw_extreme *t, double v)
{
	uint64_t b;
	int e;

	if (!(v > 0.0))
		return 0;
	memcpy(&b, &v, sizeof b);
	e = (int)(b >> 52) - 1023;
	if (e < t->lo_exp)
		return 0;
	if (e >= t->lo_exp + t->octaves)
		return extreme_nbuckets(t) - 1;
	return 1 + (size_t)(e - t->lo_exp) * QW_EXTREME_SUB
	       + (size_t)((b >> (52 - EXTREME_SUB_BITS)) & (QW_EXTREME_SUB - 1));
}

/* keep is full: grow it, or drop all but the QW_EXTREME_KEEP most extreme
 * (starting the histogram from keep, which then still holds every value
 * offered).  0 or QW_ENOMEM. */
static int extreme_room(struct qw_extreme *t)
{
	size_t i, cut;

	if (t->cap < 2 * QW_EXTREME_KEEP) {
		size_t cap = t->cap ? 2 * t->cap : EXTREME_CAP0;
		double *k = realloc(t->keep, cap * sizeof *k);

		if (k == NULL)
			return QW_ERROR(QW_ENOMEM);
		t->keep = k;
		t->cap = cap;
		return 0;
	}
	if (t->hist == NULL) {
		t->hist = calloc(extreme_nbuckets(t), sizeof *t->hist);
		if (t->hist == NULL)
			return QW_ERROR(QW_ENOMEM);
		for (i = 0; i < t->nkeep; i++)
			t->hist[extreme_bucket(t, t->keep[i])]++;
	}
	/* of equal values at the cut some stay and some go: the kept ones
	 * are still the most extreme values offered, as a multiset */
	if (t->upper) {
		cut = t->nkeep - QW_EXTREME_KEEP;
		t->bar = qw_select_double(t->keep, t->nkeep, cut);
		memmove(t->keep, t->keep + cut, QW_EXTREME_KEEP * sizeof *t->keep);
	} else {
		t->bar = qw_select_double(t->keep, t->nkeep, QW_EXTREME_KEEP - 1);
	}
	t->nkeep = QW_EXTREME_KEEP;
	t->pruned = 1;
	return 0;
}

int qw_extreme_add(struct qw_extreme *t, double v)
{
	if (t->failed)
		return QW_ENOMEM;
	if (t->nkeep == t->cap && extreme_room(t) != 0) {
		t->failed = 1;
		return QW_ENOMEM;
	}
	t->n++;
	if (t->hist != NULL)
		t->hist[extreme_bucket(t, v)]++;
	if (t->upper ? v > t->bar : v < t->bar)
		t->keep[t->nkeep++] = v;
	return 0;
}

/* The value of rank r (0-based, ascending) from the histogram: linear
 * across its bucket by rank.  NaN in the under- or overflow bucket. */
static double extreme_hist_rank(const struct qw_extreme *t, uint64_t r)
{
	size_t j, nb = extreme_nbuckets(t);
	uint64_t below = 0;

	for (j = 0; j < nb && below + t->hist[j] <= r; j++)
		below += t->hist[j];
	if (j == 0 || j >= nb - 1)
		return NAN;
	{
		size_t e = (j - 1) / QW_EXTREME_SUB, s = (j - 1) % QW_EXTREME_SUB;
		double base = ldexp(1.0, t->lo_exp + (int)e);
		double lo = base * (1.0 + (double)s / QW_EXTREME_SUB);
		double w = base / QW_EXTREME_SUB;

		return lo + w * ((double)(r - below) + 0.5)
		       / (double)t->hist[j];
	}
}

double qw_extreme_get(const struct qw_extreme *t, double prob, double *res)
{
	double index, delta, a, b, *v;
	uint64_t lhs, off;
	size_t i, k;

	*res = 0.0;
	if (t->n == 0 || t->failed)
		return NAN;
	index = prob * (double)(t->n - 1);
	lhs = (uint64_t)index;
	delta = index - (double)lhs;
	/* keep holds ranks [off, off + nkeep) of all values offered */
	off = t->upper ? t->n - t->nkeep : 0;
	if (lhs < off || (lhs + 1 < t->n && lhs + 1 >= off + t->nkeep)) {
		*res = 1.0 / QW_EXTREME_SUB;
		a = extreme_hist_rank(t, lhs);
		if (lhs + 1 == t->n)
			return a;
		return (1 - delta) * a + delta * extreme_hist_rank(t, lhs + 1);
	}
	/* the selection reorders: on a copy */
	v = malloc(t->nkeep * sizeof *v);
	if (v == NULL)
		return NAN;
	memcpy(v, t->keep, t->nkeep * sizeof *v);
	k = (size_t)(lhs - off);
	a = qw_select_double(v, t->nkeep, k);
	if (lhs + 1 < t->n) {
		b = v[k + 1];
		for (i = k + 2; i < t->nkeep; i++)
			if (v[i] < b)
				b = v[i];
		a = (1 - delta) * a + delta * b;
	}
	free(v);
	return a;
}

/* ---- the eligible readings ----------------------------------------- */

/* Histogram ranges, octaves of 2: scores from 2^-30 (~1e-9) up to 2^60
 * (~1e18), p-values from 2^-100 (~8e-31) up to 2 (1 itself included). */
#define SCORE_LO_EXP (-30)
#define SCORE_OCTAVES 90
#define PV_LO_EXP (-100)
#define PV_OCTAVES 101

void qw_digest_reset(struct qw_digest *d)
{
	memset(d, 0, sizeof *d);
	d->t_lo = INFINITY;
	d->t_hi = -INFINITY;
	qw_lag1_reset(&d->lag1);
	qw_extreme_reset(&d->score, 1, SCORE_LO_EXP, SCORE_OCTAVES);
	qw_extreme_reset(&d->pv, 0, PV_LO_EXP, PV_OCTAVES);
}

void qw_digest_free(struct qw_digest *d)
{
	qw_extreme_free(&d->score);
	qw_extreme_free(&d->pv);
	free(d->ks);
	d->ks = NULL;
}

static uint32_t ks_bin(double pv)
{
	return pv >= 1.0 ? QW_KS_BINS - 1 : (uint32_t)(pv * QW_KS_BINS);
}

static void ks_count(uint64_t *ks, const uint32_t *wait, size_t n)
{
	size_t i;

	for (i = 0; i < n; i++)
		ks[wait[i]]++;
}

/* One p-value: the KS bins begin, from pv's keep (every p-value so far),
 * when pv is about to drop values. */
static int digest_pvalue(struct qw_digest *d, double pv)
{
	size_t i;

	if (d->ks == NULL && d->pv.nkeep == 2 * QW_EXTREME_KEEP) {
		d->ks = calloc(QW_KS_BINS, sizeof *d->ks);
		if (d->ks == NULL)
			return QW_ERROR(QW_ENOMEM);
		for (i = 0; i < d->pv.nkeep; i++)
			d->ks[ks_bin(d->pv.keep[i])]++;
	}
	if (d->ks != NULL) {
		d->ks_wait[d->ks_nwait++] = ks_bin(pv);
		if (d->ks_nwait == QW_KS_BATCH) {
			ks_count(d->ks, d->ks_wait, QW_KS_BATCH);
			d->ks_nwait = 0;
		}
	}
	d->hist[pv >= 1.0 ? QW_DIGEST_HIST - 1
		: (size_t)(pv * QW_DIGEST_HIST)]++;
	return qw_extreme_add(&d->pv, pv);
}

int qw_digest_add(struct qw_digest *d, double t, double q, double pv,
		  int full)
{
	if (d->failed)
		return QW_ENOMEM;
	d->eligible++;
	d->t_lo = fmin(d->t_lo, t); /* time may go backwards */
	d->t_hi = fmax(d->t_hi, t);
	qw_lag1_add(&d->lag1, q);
	if ((full && isfinite(q) && qw_extreme_add(&d->score, q) != 0) ||
	    (pv >= 0.0 && pv <= 1.0 && digest_pvalue(d, pv) != 0)) {
		d->failed = 1;
		return QW_ENOMEM;
	}
	return 0;
}

double qw_digest_ks(const struct qw_digest *d, double *res)
{
	double fn = (double)d->pv.n, dist = 0.0;
	uint64_t below = 0, *ks;
	size_t j;

	*res = 0.0;
	if (d->pv.n == 0 || d->failed)
		return NAN;
	if (d->ks == NULL) {
		/* keep holds them all: sorted, on a copy */
		size_t n = d->pv.nkeep;
		double *v = malloc(2 * n * sizeof *v);

		if (v == NULL)
			return NAN;
		memcpy(v, d->pv.keep, n * sizeof *v);
		qw_sort_double(v, v + n, n);
		dist = qw_summary_ks_uniform(v, n);
		free(v);
		return dist;
	}
	/* the bins with the p-values still waiting, on a copy */
	ks = malloc(QW_KS_BINS * sizeof *ks);
	if (ks == NULL)
		return NAN;
	memcpy(ks, d->ks, QW_KS_BINS * sizeof *ks);
	ks_count(ks, d->ks_wait, d->ks_nwait);
	/* F_n just below edge j / B is below / n: the distance there */
	for (j = 0; j <= QW_KS_BINS; j++) {
		double gap = fabs((double)below / fn - (double)j / QW_KS_BINS);

		if (gap > dist)
			dist = gap;
		if (j < QW_KS_BINS)
			below += ks[j];
	}
	free(ks);
	*res = 1.0 / QW_KS_BINS;
	return dist;
}

/* ---- the report's score plot ---------------------------------------- */

int qw_strip_alloc(struct qw_strip *s, double floor)
{
	memset(s, 0, sizeof *s);
	s->run = malloc(QW_STRIP_MAX * sizeof *s->run);
	if (s->run == NULL)
		return QW_ERROR(QW_ENOMEM);
	s->w = 1;
	s->floor = floor;
	s->lo[0] = s->lo[1] = INFINITY;
	s->hi[0] = s->hi[1] = 0.0;
	return 0;
}

void qw_strip_free(struct qw_strip *s)
{
	free(s->run);
	s->run = NULL;
}

/* fmin and fmax take NaN as missing */
static void strip_merge(struct qw_strip_run *a, const struct qw_strip_run *b)
{
	a->q_lo = fmin(a->q_lo, b->q_lo);
	a->q_hi = fmax(a->q_hi, b->q_hi);
	a->l_lo = fmin(a->l_lo, b->l_lo);
	a->l_hi = fmax(a->l_hi, b->l_hi);
	a->alarm |= b->alarm;
}

void qw_strip_add(struct qw_strip *s, double t, double q, double limit,
		  int in_alarm, int warm)
{
	struct qw_strip_run *r;
	uint64_t k = s->n / s->w;
	size_t i, j;

	if (k == QW_STRIP_MAX) {
		for (i = 0; i < QW_STRIP_MAX / 2; i++) {
			s->run[i] = s->run[2 * i];
			strip_merge(&s->run[i], &s->run[2 * i + 1]);
		}
		s->nruns = QW_STRIP_MAX / 2;
		s->w *= 2;
		k = s->n / s->w;
	}
	r = &s->run[k];
	if (k == s->nruns) {
		r->t = t;
		r->q_lo = r->q_hi = r->l_lo = r->l_hi = NAN;
		r->alarm = 0;
		s->nruns++;
	}
	if (isfinite(q)) {
		r->q_lo = fmin(r->q_lo, q);
		r->q_hi = fmax(r->q_hi, q);
	}
	if (isfinite(limit)) {
		r->l_lo = fmin(r->l_lo, limit);
		r->l_hi = fmax(r->l_hi, limit);
	}
	r->alarm |= in_alarm != 0;
	s->n++;
	s->nwarm += warm != 0;
	for (j = 0; j <= (warm != 0); j++) {
		if (isfinite(q) && q > s->floor && q < s->lo[j])
			s->lo[j] = q;
		if (isfinite(q) && q > s->hi[j])
			s->hi[j] = q;
		if (isfinite(limit) && limit > s->hi[j])
			s->hi[j] = limit;
	}
}

void qw_strip_columns(const struct qw_strip *s, size_t cols, double *q_lo,
		      double *q_hi, double *l_lo, double *l_hi, int *alarm)
{
	size_t c, k = 0;

	for (c = 0; c < cols; c++) {
		uint64_t b = (uint64_t)(c + 1) * s->n / cols;
		struct qw_strip_run col = {.q_lo = NAN, .q_hi = NAN,
					   .l_lo = NAN, .l_hi = NAN};

		for (; k < s->nruns && (uint64_t)k * s->w < b; k++)
			strip_merge(&col, &s->run[k]);
		q_lo[c] = col.q_lo;
		q_hi[c] = col.q_hi;
		l_lo[c] = col.l_lo;
		l_hi[c] = col.l_hi;
		alarm[c] = col.alarm;
	}
}

double qw_strip_time(const struct qw_strip *s, uint64_t i)
{
	uint64_t k = i / s->w;

	return k < s->nruns ? s->run[k].t : NAN;
}
