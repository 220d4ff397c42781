/* detector_int.h: the detector's own struct, shared by detector.c (the
 * per-reading path) and detector_state.c (accessors and checkpoints). */
#ifndef QW_DETECTOR_INT_H
#define QW_DETECTOR_INT_H

#include "internal.h"
#include "quadwatch.h"

/* Smoothing weight of MEWMA mode when none is configured: the value of
 * the published tables' most used column (Lowry et al. 1992). */
#define QW_DEF_SMOOTHING 0.1

/* Noise floor of the MEWMA state's own covariance G, as a share of z's
 * iid standard deviation sqrt(rho/(2-rho)): a numerical guard only. */
#define QW_MEWMA_Z_FLOOR 1e-3
/* Readings of the model's settling before G learns, at most (readings):
 * at the default smoothing z forgets its start within ~100 readings. */
#define QW_MEWMA_SETTLE 2000

struct qw_detector {
	struct qw_params par;      /* par.floor points at floor */
	double *floor;             /* p configured floors (0 = auto) */
	double *vfloor;            /* dim floors of the model vector */
	qw_ewcov *ew;              /* the EW model of the model vector */
	struct qw_dyn *dyn;        /* whitening: builds the model vector */
	size_t dim;                /* p, or 2p under var1 */
	struct qw_alarm alarm;
	double alpha;              /* per-reading exceedance probability */
	double lam;                /* EW weight per reading (readings mode),
				      or at the nominal rate (time mode) */
	double *lim_f;             /* p+1: cached nu d/(nu-d+1) F^-1, by dof */
	double *lim_nu;            /* p+1: grid nu each was computed at */
	double *lim_hi;            /* p+1: the next grid point: the cached
				      value holds for nu in [lim_nu, lim_hi) */
	double *lim_chi;           /* p+1: chi-square quantile of alpha by dof
				      (0: not yet), the root's start */
	double mewma_h;            /* MEWMA limit for the raise rate */
	double *z;                 /* p: MEWMA state z, standardised units */
	qw_ewcov *zew;             /* MEWMA: EW covariance G of z; NULL in
				      plain mode */
	double last_t;             /* time of the last learned reading */
	double lam_dt, lam_dt_w;   /* time mode: the last dt (s) det_lam was
				      asked for, NaN for none, and its lam */
	double w_lam;              /* lam that last won qw_ewcov_weight, NaN
				      for none ... */
	uint64_t w_from;           /* ... at this count (so at every later one) */
	uint64_t alarm_run;        /* readings since the raise */
	double kappa;              /* guard bias of Sigma (file top) */
	double tshare;             /* share of the model learned guarded */
	int frozen;                /* 1: learns nothing (a fixed model) */
	struct qw_counters cnt;
	double *work;              /* explain workspace (order dim) */
	double *vlag;              /* dim: the lag part of v alone (var1) */
	unsigned char *mask;       /* dim: observed components of v */
	struct qw_contrib *contrib;/* dim */
};

/* Effective size behind a score with k conditioning components. */
static inline double qw_det_nu(const qw_detector *d, double k)
{
	return qw_ewcov_nu(d->ew) - k;
}

/* The guard's correction of the model's scale (detector.c top). */
static inline double qw_det_scale(const qw_detector *d)
{
	return qw_ewcov_scale(d->ew) / (1.0 - (1.0 - d->kappa) * d->tshare);
}

/* Conditioning components of a complete reading: p under var1. */
static inline double qw_det_k(const qw_detector *d)
{
	return d->par.dynamics == QW_DYN_VAR1 ? (double)d->par.p : 0.0;
}

#endif
