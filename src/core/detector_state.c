/* detector_state.c: what a detector tells about itself (counters, limits,
 * the steady-state figures `check` prints), fixed models, and its state
 * for checkpoints and model files.  The per-reading path is detector.c.
 * Workload: a few calls per group at start, on status and on save. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "detector_int.h"

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

uint64_t qw_detector_count(const qw_detector *d)
{
	return qw_ewcov_count(d->ew);
}

int qw_detector_in_alarm(const qw_detector *d)
{
	return d->alarm.in_alarm;
}

double qw_detector_alpha(const qw_detector *d)
{
	return d->alpha;
}

void qw_detector_freeze(qw_detector *d, int on)
{
	d->frozen = on != 0;
}

int qw_detector_frozen(const qw_detector *d)
{
	return d->frozen;
}

void qw_detector_counters_reset(qw_detector *d)
{
	memset(&d->cnt, 0, sizeof d->cnt);
	qw_alarm_reset(&d->alarm);
	d->alarm_run = 0;
	d->last_t = -INFINITY; /* any time may come next */
	qw_dyn_break(d->dyn);
}

int qw_detector_scale_model(qw_detector *d, double s)
{
	if (!(s > 0) || !isfinite(s))
		return QW_ERROR(QW_EINVAL);
	qw_ewcov_rescale(d->ew, s);
	return 0;
}

/* Fixed point of ewcov.c's recursions: nu = (2-lam)/lam (less var1's p
 * conditioning channels), scale = 1/(1-lam), and a model learned wholly
 * under the guard (tshare = 1).  Without forgetting nu grows without
 * bound: Inf.  A frozen (fixed) model keeps the figures it has. */
double qw_detector_steady_nu(const qw_detector *d)
{
	if (!d->par.correct)
		return INFINITY;
	if (d->frozen) /* a fixed model stays as it is */
		return qw_det_nu(d, qw_det_k(d));
	if (!(d->lam > 0))
		return INFINITY;
	return (2.0 - d->lam) / d->lam - qw_det_k(d);
}

double qw_detector_steady_scale(const qw_detector *d)
{
	if (d->par.correct && d->frozen)
		return qw_det_scale(d);
	return d->par.correct ? 1.0 / (d->kappa * (1.0 - d->lam)) : 1.0;
}

/* The limit of a complete reading at effective size nu and scale. */
static double det_full_limit(const qw_detector *d, double nu, double scale)
{
	if (d->par.fixed_limit > 0)
		return d->par.fixed_limit;
	if (d->par.mode == QW_MODE_MEWMA)
		return d->par.limit_factor * d->mewma_h;
	if (!d->par.correct)
		return d->par.limit_factor *
		       qw_limit_chisq(d->alpha, (unsigned)d->par.p);
	return d->par.limit_factor *
	       qw_limit_corrected(d->alpha, (unsigned)d->par.p, nu, scale);
}

double qw_detector_steady_limit(const qw_detector *d)
{
	return det_full_limit(d, qw_detector_steady_nu(d),
			      qw_detector_steady_scale(d));
}

double qw_detector_limit(const qw_detector *d)
{
	return det_full_limit(d, qw_det_nu(d, qw_det_k(d)), qw_det_scale(d));
}

/* Detector state: this head, the model's own state, the whitening state,
 * then (MEWMA) z. */
struct det_state_head {
	uint64_t p;
	struct qw_counters cnt;
	uint64_t window, alarm_run;
	uint32_t under, in_alarm;
	double last_t, tshare;
	uint32_t dynamics, mode, frozen, pad;
};

static size_t det_z_len(const qw_detector *d)
{
	return d->zew != NULL ? d->par.p * sizeof(double) : 0;
}

/* MEWMA: z, then its covariance model G. */
static size_t det_mewma_len(const qw_detector *d)
{
	return d->zew != NULL ? det_z_len(d) + qw_ewcov_state_len(d->zew) : 0;
}

size_t qw_detector_state_len(const qw_detector *d)
{
	return sizeof(struct det_state_head) + qw_ewcov_state_len(d->ew) +
	       qw_dyn_state_len(d->dyn) + det_mewma_len(d);
}

void qw_detector_state_get(const qw_detector *d, void *buf)
{
	struct det_state_head h;
	unsigned char *b = buf;

	memset(&h, 0, sizeof h);
	h.p = d->par.p;
	h.cnt = d->cnt;
	h.window = d->alarm.window;
	h.alarm_run = d->alarm_run;
	h.under = d->alarm.under;
	h.in_alarm = (uint32_t)d->alarm.in_alarm;
	h.last_t = d->last_t;
	h.tshare = d->tshare;
	h.dynamics = (uint32_t)d->par.dynamics;
	h.mode = (uint32_t)d->par.mode;
	h.frozen = (uint32_t)d->frozen;
	memcpy(b, &h, sizeof h);
	b += sizeof h;
	qw_ewcov_state_get(d->ew, b);
	b += qw_ewcov_state_len(d->ew);
	qw_dyn_state_get(d->dyn, b);
	b += qw_dyn_state_len(d->dyn);
	if (d->zew != NULL) {
		memcpy(b, d->z, det_z_len(d));
		qw_ewcov_state_get(d->zew, b + det_z_len(d));
	}
}

/* 1 when every value after the head is possible: checked before the
 * model is touched, so a refused state changes nothing. */
static int det_tail_sane(const qw_detector *d, const unsigned char *z)
{
	size_t i;
	double v;

	for (i = 0; i < det_z_len(d) / sizeof(double); i++) {
		memcpy(&v, z + i * sizeof v, sizeof v);
		if (!isfinite(v))
			return 0;
	}
	return 1;
}

int qw_detector_state_set(qw_detector *d, const void *buf, size_t len)
{
	struct det_state_head h;
	const unsigned char *b = buf, *dyn, *z;
	size_t elen = qw_ewcov_state_len(d->ew);
	uint64_t mask;
	int rc;

	if (len != qw_detector_state_len(d))
		return QW_ERROR(QW_EMISMATCH);
	memcpy(&h, b, sizeof h);
	if (h.p != d->par.p || h.dynamics != (uint32_t)d->par.dynamics ||
	    h.mode != (uint32_t)d->par.mode)
		return QW_ERROR(QW_EMISMATCH);
	mask = d->alarm.m == 64 ? ~(uint64_t)0
				: (((uint64_t)1 << d->alarm.m) - 1);
	dyn = b + sizeof h + elen;
	z = dyn + qw_dyn_state_len(d->dyn);
	if (h.in_alarm > 1 || h.frozen > 1 || (h.window & ~mask) != 0 ||
	    isnan(h.last_t) || !(h.tshare >= 0.0 && h.tshare <= 1.0) ||
	    !det_tail_sane(d, z))
		return QW_ERROR(QW_EFORMAT);
	/* Everything is checked before the model's _set, the last step that
	 * can fail; the rest is set after it. */
	if ((rc = qw_dyn_state_check(d->dyn, dyn)) != 0 ||
	    (d->zew != NULL &&
	     (rc = qw_ewcov_state_check(d->zew, z + det_z_len(d),
					qw_ewcov_state_len(d->zew))) != 0))
		return rc;
	rc = qw_ewcov_state_set(d->ew, b + sizeof h, elen);
	if (rc != 0)
		return rc;
	qw_dyn_state_set(d->dyn, dyn);
	if (d->zew != NULL)
		qw_ewcov_state_set(d->zew, z + det_z_len(d),
				   qw_ewcov_state_len(d->zew));
	d->cnt = h.cnt;
	d->alarm.window = h.window;
	d->alarm.count = (unsigned)__builtin_popcountll(h.window);
	d->alarm.under = h.under;
	d->alarm.in_alarm = (int)h.in_alarm;
	d->alarm_run = h.alarm_run;
	d->last_t = h.last_t;
	d->tshare = h.tshare;
	d->frozen = (int)h.frozen;
	if (d->zew != NULL)
		memcpy(d->z, z, det_z_len(d));
	memset(d->lim_nu, 0, (d->par.p + 1) * sizeof *d->lim_nu);
	memset(d->lim_hi, 0, (d->par.p + 1) * sizeof *d->lim_hi);
	return 0;
}
