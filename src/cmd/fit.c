/* fit.c: `quadwatch fit -c FILE [--group G] [-o DIR] [--no-trim] [-q]
 * INPUT...` (quadwatch-fit(1)): a model per group from a recording the
 * engineer calls healthy, written as DIR/GROUP.qwmodel for the group keys
 * model = PATH and model_use = fixed | warm (quadwatch.ini(5)).
 *
 * The inputs are read exactly as replay reads them (replay_input.c: CSV
 * or `record` captures), each reading kept in memory per group through
 * the replay context's sink; the maths is the core's qw_fit_run (fit.c in
 * src/core: trimming, two-fold held-out tail fit).  Per group it prints
 * "key: value" lines (as check does): readings used and trimmed, the
 * Gaussian-theory limit beside the empirical one, and the alarms per day
 * each would have raised on the held-out scores; then the same for the
 * group's adaptive chart run over the recording (what a warm group
 * applies).
 *
 * Exit: 0 every selected group fitted and written; 1 a runtime failure
 * (a group with too few readings, a file not written); 2 usage or
 * configuration error.  Workload: the recording is held in memory,
 * 8 (p + 1) bytes per reading and group. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd.h"
#include "log.h"
#include "model.h"
#include "replay.h"
#include "verdict.h"

#define FIT_PROG "quadwatch fit"
#define FIT_CAP0 4096          /* readings held before the first growth */
#define FIT_PATH_MAX 1200      /* bytes of DIR/GROUP.qwmodel */

/* The readings of one group, in order. */
struct fit_rec {
	double *t;             /* n times, s */
	double *x;             /* n * p values */
	size_t n, cap;
	int nomem;             /* growth failed: the recording is cut */
};

struct fit_opts {
	const char *dir;       /* -o DIR; "." by default */
	int no_trim;
	int quiet;
	int progress;          /* a progress line on stderr (a terminal) */
};

/* The progress line of one group's fit (qw_fit_opts.progress). */
struct fit_progress {
	const char *group;
	size_t n;              /* readings */
	double started, next;  /* monotonic s */
	int shown;
};

static void fit_usage(FILE *f)
{
	fprintf(f,
		"usage: quadwatch fit -c FILE [--group G] [-o DIR] "
		"[--no-trim] [-q] INPUT...\n"
		"  -c FILE    configuration (quadwatch.ini(5))\n"
		"  --group G  fit only group G\n"
		"  -o DIR     where GROUP.qwmodel is written (default .)\n"
		"  --no-trim  learn every reading (no trimming)\n"
		"  -q         no progress, errors only\n"
		"INPUT: CSV files or captures from quadwatch record, of a "
		"period the engineer\ncalls healthy.\n");
}

static void fit_sink(struct replay *rp, struct replay_group *g, double t,
		     const double *x)
{
	struct fit_rec *r = (struct fit_rec *)rp->sink_ctx +
			    (g - rp->groups);
	size_t p = g->conf->p;

	if (r->nomem)
		return;
	if (r->n == r->cap) {
		size_t cap = r->cap ? 2 * r->cap : FIT_CAP0;
		double *nt = realloc(r->t, cap * sizeof *nt);
		double *nx = nt != NULL ? realloc(r->x, cap * p * sizeof *nx)
					: NULL;

		if (nt != NULL)
			r->t = nt;
		if (nx == NULL) {
			r->nomem = 1;
			return;
		}
		r->x = nx;
		r->cap = cap;
	}
	r->t[r->n] = t;
	memcpy(r->x + r->n * p, x, p * sizeof *x);
	r->n++;
}

/* 0, -1 (help shown) or an exit code. */
static int fit_args(int argc, char **argv, struct replay_opts *o,
		    struct fit_opts *fo)
{
	int i, opts = 1;

	memset(o, 0, sizeof *o);
	fo->dir = ".";
	o->inputs = calloc((size_t)argc, sizeof *o->inputs);
	if (o->inputs == NULL)
		return QW_EXIT_FAIL;
	for (i = 1; i < argc; i++) {
		const char *a = argv[i], **dst = NULL;

		if (!opts || a[0] != '-' || a[1] == '\0') {
			o->inputs[o->ninputs++] = argv[i];
			continue;
		}
		if (strcmp(a, "--") == 0) {
			opts = 0;
		} else if (strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0) {
			fit_usage(stdout);
			return -1;
		} else if (strcmp(a, "-q") == 0) {
			fo->quiet = 1;
		} else if (strcmp(a, "--no-trim") == 0) {
			fo->no_trim = 1;
		} else if (strcmp(a, "-c") == 0) {
			dst = &o->config;
		} else if (strcmp(a, "--group") == 0) {
			dst = &o->group;
		} else if (strcmp(a, "-o") == 0) {
			dst = &fo->dir;
		} else {
			fprintf(stderr, FIT_PROG ": unknown option '%s'\n", a);
			fit_usage(stderr);
			return QW_EXIT_USAGE;
		}
		if (dst != NULL) {
			if (i + 1 >= argc) {
				fprintf(stderr, FIT_PROG ": %s needs a value\n",
					a);
				return QW_EXIT_USAGE;
			}
			*dst = argv[++i];
		}
	}
	if (o->config == NULL || o->ninputs < 1) {
		fprintf(stderr, FIT_PROG ": %s\n", o->config == NULL
			? "-c FILE is required" : "no INPUT given");
		fit_usage(stderr);
		return QW_EXIT_USAGE;
	}
	return 0;
}

/* Config, groups, buffers.  0 or an exit code (message printed). */
static int fit_setup(struct replay *rp, struct fit_rec **recs)
{
	char err[QW_CONFIG_ERR_MAX];
	size_t i;

	if (qw_config_load(rp->o.config, &rp->cfg, err, sizeof err) != 0) {
		fprintf(stderr, FIT_PROG ": %s\n", err);
		return QW_EXIT_USAGE;
	}
	if (rp->o.group != NULL &&
	    qw_config_group(&rp->cfg, rp->o.group) == NULL) {
		fprintf(stderr, FIT_PROG ": --group %s: no [group %s] in %s\n",
			rp->o.group, rp->o.group, rp->o.config);
		return QW_EXIT_USAGE;
	}
	rp->groups = calloc(rp->cfg.ngroups, sizeof *rp->groups);
	*recs = calloc(rp->cfg.ngroups, sizeof **recs);
	rp->batch_len = qw_verdict_buffer_len(&rp->cfg);
	rp->batch = malloc(rp->batch_len * sizeof *rp->batch);
	if (rp->groups == NULL || *recs == NULL || rp->batch == NULL)
		goto nomem;
	rp->sink = fit_sink;
	rp->sink_ctx = *recs;
	rp->prog = FIT_PROG;
	for (i = 0; i < rp->cfg.ngroups; i++) {
		struct replay_group *g = &rp->groups[i];
		const struct qw_group_conf *gc = &rp->cfg.groups[i];

		g->conf = gc;
		g->wanted = rp->o.group == NULL ||
			    strcmp(rp->o.group, gc->name) == 0;
		g->idx = calloc(gc->p, sizeof *g->idx);
		g->x = calloc(gc->p, sizeof *g->x);
		if (g->idx == NULL || g->x == NULL)
			goto nomem;
	}
	if (qw_replay_input_alloc(rp) != 0)
		goto nomem;
	return 0;
nomem:
	fprintf(stderr, FIT_PROG ": out of memory\n");
	return QW_EXIT_FAIL;
}

static void fit_teardown(struct replay *rp, struct fit_rec *recs)
{
	size_t i;

	for (i = 0; rp->groups != NULL && i < rp->cfg.ngroups; i++) {
		free(rp->groups[i].idx);
		free(rp->groups[i].x);
		if (recs != NULL) {
			free(recs[i].t);
			free(recs[i].x);
		}
	}
	free(recs);
	free(rp->groups);
	qw_replay_input_free(rp);
	free(rp->batch);
	qw_config_free(&rp->cfg);
	free(rp->o.inputs);
}

static const char *fit_dyn_name(enum qw_dynamics d)
{
	return d == QW_DYN_AR1 ? "ar1" : d == QW_DYN_VAR1 ? "var1" : "none";
}

/* Tail depth: how many of the what lie beyond the limit at alpha, with
 * the warning below QW_FIT_DEPTH_MIN. */
static void fit_print_depth(const char *key, const char *what, double depth)
{
	printf("  %-22s %.6g %s beyond the limit at alpha%s\n", key, depth,
	       what, depth < QW_FIT_DEPTH_MIN
	       ? " (few: the limit is a long extrapolation, its delivered "
		 "rate uncertain; fit a longer recording)" : "");
}

/* After a factor: the note when a shallow tail below 1 left it at 1. */
static void fit_print_floor(int tail_ok, double factor, double tail)
{
	if (tail_ok && factor == 1.0 && tail < 1.0)
		printf(" (the tail gave %.6g; a shallow tail does not lower "
		       "the Gaussian limit)", tail);
}

/* Alarms per day raised over days, with the counts behind it. */
static void fit_print_apd(const char *key, uint64_t alarms, uint64_t ex,
			  double days)
{
	printf("  %-22s %.6g (%llu alarms, %llu exceedances)\n", key,
	       (double)alarms / days, (unsigned long long)alarms,
	       (unsigned long long)ex);
}

/* A GPD tail fit over threshold u (limit units). */
static void fit_print_tail(const char *key, const struct qw_gpd *g, double u)
{
	printf("  %-22s xi %.6g, sigma %.6g over %.6g (limit units), %zu "
	       "excesses\n", key, g->xi, g->sigma, u, g->n);
}

/* The adaptive chart's lines: what model_use = warm applies. */
static void fit_print_adaptive(const struct qw_params *par,
			       const struct qw_fit_result *r)
{
	double days = r->adapt_days > 0 ? r->adapt_days : NAN;

	printf("  %-22s %llu (%.6g days at %g readings/s) of the group's own "
	       "chart, after warm-up\n", "adaptive_scored:",
	       (unsigned long long)r->adapt_scored, r->adapt_days, par->rate);
	printf("  %-22s %.10g", "adaptive_factor:", r->adapt_factor);
	fit_print_floor(r->adapt_tail_ok, r->adapt_factor, r->adapt_tail);
	printf("%s\n", r->adapt_tail_ok ? " (model_use = warm applies it)"
				       : " (too few scores for a tail fit: "
					 "the Gaussian limit)");
	printf("  %-22s %llu readings of bad stretches over the chart's own "
	       "limit for most of their length, left out\n",
	       "adaptive_faults:", (unsigned long long)r->adapt_faults);
	printf("  %-22s %u runs of the chart%s\n", "adaptive_passes:",
	       r->adapt_passes, !r->adapt_tail_ok || r->adapt_converged ? ""
	       : " (stopped at the run limit before its tail agreed with "
		 "the factor)");
	if (r->adapt_tail_ok)
		fit_print_tail("adaptive_tail:", &r->adapt_gpd,
			       r->adapt_tail_u);
	fit_print_depth("adaptive_tail_depth:", "scores",
			r->alpha * (double)r->adapt_scored);
	fit_print_apd("apd_adaptive_gauss:", r->adapt_alarms_gauss,
		      r->adapt_ex_gauss, days);
	fit_print_apd("apd_adaptive_emp:", r->adapt_alarms_emp,
		      r->adapt_ex_emp, days);
}

/* What the fit found, as "key: value" lines (quadwatch-fit(1)). */
static void fit_print(const struct qw_group_conf *gc,
		      const struct qw_fit_result *r, const char *path)
{
	const struct qw_params *par = &gc->params;
	double days = r->heldout_days > 0 ? r->heldout_days : NAN;

	printf("\ngroup: %s\n", gc->name);
	printf("  %-22s %llu\n", "readings:", (unsigned long long)r->readings);
	printf("  %-22s %llu\n", "used:", (unsigned long long)r->used);
	printf("  %-22s %llu\n", "trimmed:", (unsigned long long)r->trimmed);
	printf("  %-22s %u C-steps, %u reweighting passes%s\n", "passes:",
	       r->csteps, r->reweights, r->converged ? "" :
	       " (stopped at the pass limit before a fixed point)");
	printf("  %-22s %.10g\n", "consistency:", r->consistency);
	printf("  %-22s %s, mode %s\n", "dynamics:",
	       fit_dyn_name(par->dynamics),
	       par->mode == QW_MODE_MEWMA ? "mewma" : "plain");
	printf("  %-22s %.10g per reading (%g alarms/day at %g readings/s, "
	       "persist %u/%u)\n", "alpha:", r->alpha, par->alarms_per_day,
	       par->rate, par->persist_k, par->persist_m);
	printf("  %-22s %.10g\n", "limit_gaussian:", r->limit_gauss);
	printf("  %-22s %.10g%s\n", "limit_empirical:", r->limit_emp,
	       r->tail_ok ? "" : " (too few held-out scores for a tail fit: "
				 "the Gaussian limit)");
	printf("  %-22s %.10g", "limit_factor:", r->limit_factor);
	fit_print_floor(r->tail_ok, r->limit_factor, r->limit_tail);
	printf("\n");
	if (r->tail_ok)
		fit_print_tail("tail:", &r->gpd, r->tail_u);
	printf("  %-22s %llu (%.6g days at %g readings/s)\n", "heldout:",
	       (unsigned long long)r->heldout, r->heldout_days, par->rate);
	fit_print_depth("tail_depth:", "held-out readings",
			r->alpha * (double)r->heldout);
	printf("  %-22s %llu readings in runs of trimmed readings, left "
	       "out of the held-out scores\n", "bad_stretches:",
	       (unsigned long long)r->bad_stretch);
	printf("  %-22s %.6g expected (configured %g)\n", "alarms_per_day:",
	       par->alarms_per_day, par->alarms_per_day);
	fit_print_apd("apd_gaussian:", r->alarms_gauss, r->ex_gauss, days);
	fit_print_apd("apd_empirical:", r->alarms_emp, r->ex_emp, days);
	fit_print_adaptive(par, r);
	printf("  %-22s %s\n", "model:", path);
}

/* Before each pass of the fit over the readings: at most every
 * RP_PROGRESS_EVERY, the first pass at once. */
static void fit_progress(void *ctx, const char *stage, unsigned pass)
{
	struct fit_progress *fp = ctx;
	double now = qw_log_monotonic();

	if (fp->shown && now < fp->next)
		return;
	fp->next = now + RP_PROGRESS_EVERY;
	fprintf(stderr, "\r\033[Kfit: group %s (%zu readings): %s, pass %u, "
		"%.0f s", fp->group, fp->n, stage, pass, now - fp->started);
	fp->shown = 1;
}

/* Fits and writes one group.  0 or an exit code (message printed). */
static int fit_group(const struct qw_group_conf *gc, const struct fit_rec *r,
		     const struct fit_opts *fo)
{
	char path[FIT_PATH_MAX], err[QW_CONFIG_ERR_MAX];
	struct qw_ckpt_id id = {gc->name, qw_config_fingerprint(gc),
				(uint32_t)gc->p};
	struct qw_model_meta m;
	struct qw_fit_result res;
	struct qw_fit_opts o;
	struct fit_progress fp = {gc->name, r->n, 0, 0, 0};
	qw_detector *d = NULL;
	int rc, w;

	qw_fit_opts_default(&o);
	if (fo->no_trim)
		o.trim_alpha = 0;
	if (fo->progress) {
		fp.started = qw_log_monotonic();
		o.progress = fit_progress;
		o.progress_ctx = &fp;
	}
	w = snprintf(path, sizeof path, "%s/%s%s", fo->dir, gc->name,
		     QW_MODEL_SUFFIX);
	if (w < 0 || (size_t)w >= sizeof path) {
		fprintf(stderr, FIT_PROG ": -o %s: path too long\n", fo->dir);
		return QW_EXIT_USAGE;
	}
	rc = qw_fit_run(&gc->params, r->t, r->x, r->n, &o, &res, &d);
	if (fp.shown)
		fputs("\r\033[K", stderr);
	if (rc != 0) {
		fprintf(stderr, FIT_PROG ": group %s: %s\n", gc->name,
			rc == QW_ENODATA || rc == QW_EINVAL
			? "too few learnable readings to fit a model"
			: qw_strerror(rc));
		return QW_EXIT_FAIL;
	}
	memset(&m, 0, sizeof m);
	m.dynamics = (uint32_t)gc->params.dynamics;
	m.mode = (uint32_t)gc->params.mode;
	m.smoothing = gc->params.smoothing;
	m.readings = res.readings;
	m.used = res.used;
	m.trimmed = res.trimmed;
	m.heldout = res.heldout;
	m.limit_factor = res.limit_factor;
	m.limit_gauss = res.limit_gauss;
	m.limit_emp = res.limit_emp;
	m.alpha = res.alpha;
	m.consistency = res.consistency;
	m.gpd_xi = res.tail_ok ? res.gpd.xi : NAN;
	m.gpd_sigma = res.tail_ok ? res.gpd.sigma : NAN;
	m.adapt_factor = res.adapt_factor;
	m.adapt_scored = res.adapt_scored;
	m.adapt_gpd_xi = res.adapt_tail_ok ? res.adapt_gpd.xi : NAN;
	m.adapt_gpd_sigma = res.adapt_tail_ok ? res.adapt_gpd.sigma : NAN;
	rc = qw_model_save(path, &id, &m, d, err, sizeof err);
	qw_detector_free(d);
	if (rc != 0) {
		fprintf(stderr, FIT_PROG ": group %s: %s\n", gc->name, err);
		return QW_EXIT_FAIL;
	}
	fit_print(gc, &res, path);
	return 0;
}

/* Every wanted group that has readings.  0 or the worst exit code. */
static int fit_all(struct replay *rp, const struct fit_rec *recs,
		   const struct fit_opts *fo)
{
	size_t i, fitted = 0;
	int rc = 0, r;

	for (i = 0; i < rp->cfg.ngroups; i++) {
		const struct replay_group *g = &rp->groups[i];

		if (!g->wanted)
			continue;
		if (recs[i].nomem) {
			fprintf(stderr, FIT_PROG ": group %s: out of memory "
				"after %zu readings\n", g->conf->name,
				recs[i].n);
			rc = QW_EXIT_FAIL;
			continue;
		}
		if (recs[i].n == 0) {
			if (rp->o.group != NULL) {
				fprintf(stderr, FIT_PROG ": group %s: no "
					"readings in the inputs\n",
					g->conf->name);
				rc = QW_EXIT_FAIL;
			}
			continue;
		}
		r = fit_group(g->conf, &recs[i], fo);
		if (r > rc)
			rc = r;
		fitted += r == 0;
	}
	if (fitted == 0 && rc == 0) {
		fprintf(stderr, FIT_PROG ": no group had readings in the "
			"inputs\n");
		rc = QW_EXIT_FAIL;
	}
	return rc;
}

int qw_cmd_fit(int argc, char **argv)
{
	struct replay rp;
	struct fit_opts fo;
	struct fit_rec *recs = NULL;
	int i, rc;

	memset(&rp, 0, sizeof rp);
	memset(&fo, 0, sizeof fo);
	rc = fit_args(argc, argv, &rp.o, &fo);
	if (rc != 0) {
		free(rp.o.inputs);
		return rc < 0 ? QW_EXIT_OK : rc;
	}
	rp.o.quiet = fo.quiet;
	if (fo.quiet)
		qw_log_set_level(QW_LOG_ERROR);
	rp.progress = !fo.quiet && isatty(STDERR_FILENO);
	fo.progress = rp.progress;
	rp.started = qw_log_monotonic();
	rp.next_progress = rp.started + RP_PROGRESS_EVERY;
	rc = fit_setup(&rp, &recs);
	for (i = 0; rc == 0 && i < rp.o.ninputs; i++)
		rc = qw_replay_input(&rp, rp.o.inputs[i]);
	qw_replay_progress(&rp, 1);
	if (rc == 0)
		rc = fit_all(&rp, recs, &fo);
	if (fflush(stdout) != 0 && rc == 0) {
		qw_log_errno(QW_LOG_ERROR, "standard output");
		rc = QW_EXIT_FAIL;
	}
	fit_teardown(&rp, recs);
	return rc;
}
