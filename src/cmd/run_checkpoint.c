/* run_checkpoint.c: the daemon's side of checkpoints (src/io/checkpoint.c
 * does the files): every group's state into [state] dir on the timer, on
 * `ctl save` and on a graceful stop; restored for each group when it
 * first appears (start, or a reload that adds it).
 *
 * A checkpoint that cannot be written (directory missing, read-only,
 * full) is counted and logged at most once per RUN_CKPT_LOG_EVERY; the
 * daemon goes on scoring.  A file refused on restore is logged with the
 * reason and the name it was set aside under; the group starts fresh.
 *
 * Workload: one file per group per [state] every (10 s by default);
 * the buffer of one file is allocated per save, never per reading. */
#include <stdio.h>
#include <time.h>

#include "checkpoint.h"
#include "run.h"

static void run_ckpt_id(const struct run_group *g, struct qw_ckpt_id *id)
{
	id->group = g->conf->name;
	id->fingerprint = g->fingerprint;
	id->p = (uint32_t)g->conf->p;
}

int qw_run_save(struct run_daemon *dm, char *err, size_t errlen)
{
	char e[QW_CONFIG_ERR_MAX];
	struct qw_ckpt_id id;
	size_t i;
	int rc, first = 0;

	if (dm->ckpt_log.interval <= 0) {
		dm->ckpt_log.interval = RUN_CKPT_LOG_EVERY;
		dm->ckpt_log.last = -1;
	}
	if (dm->cfg.state_dir[0] == '\0') {
		snprintf(err, errlen, "no state dir"); /* as documented */
		return QW_ERROR(QW_ESTATE);
	}
	for (i = 0; i < dm->cfg.ngroups; i++) {
		struct run_group *g = &dm->groups[i];

		run_ckpt_id(g, &id);
		rc = qw_ckpt_save(dm->cfg.state_dir, &id, g->det, e, sizeof e);
		if (rc == 0) {
			g->ckpt.saved++;
			continue;
		}
		g->ckpt.failed++;
		qw_log_limited(&dm->ckpt_log, QW_LOG_ERROR, "group %s: "
			       "checkpoint not written (scoring goes on): %s",
			       g->conf->name, e);
		if (first == 0) {
			first = rc;
			snprintf(err, errlen, "group %s: %s", g->conf->name, e);
		}
	}
	return first;
}

/* Seconds since a save at saved_ns (wall clock), for the log. */
static double run_ckpt_age(int64_t saved_ns)
{
	struct timespec ts;

	clock_gettime(CLOCK_REALTIME, &ts);
	return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec -
	       1e-9 * (double)saved_ns;
}

static void run_restore_one(struct run_daemon *dm, struct run_group *g)
{
	char e[QW_CONFIG_ERR_MAX];
	struct qw_ckpt_id id;
	int64_t saved = 0;
	int rc;

	run_ckpt_id(g, &id);
	rc = qw_ckpt_restore(dm->cfg.state_dir, &id, g->det, &saved, e,
			     sizeof e);
	if (rc == 0) {
		g->ckpt.restored++;
		qw_log(QW_LOG_INFO, "group %s: restored %llu readings from "
		       "%s (saved %.1f s ago)", g->conf->name,
		       (unsigned long long)qw_detector_counters(g->det)->
			       readings, e, run_ckpt_age(saved));
	} else if (rc == QW_ENODATA) {
		qw_log(QW_LOG_INFO, "group %s: no checkpoint in %s; learning "
		       "from nothing", g->conf->name, dm->cfg.state_dir);
	} else if (rc == QW_EIO || rc == QW_ENOMEM || rc == QW_EINVAL) {
		qw_log(QW_LOG_ERROR, "group %s: checkpoint not loaded, "
		       "learning from nothing: %s", g->conf->name, e);
	} else {
		g->ckpt.refused++;
		qw_log(QW_LOG_ERROR, "group %s: checkpoint %s (%s); learning "
		       "from nothing", g->conf->name, e, qw_strerror(rc));
	}
}

void qw_run_restore(struct run_daemon *dm)
{
	size_t i;

	for (i = 0; i < dm->cfg.ngroups; i++) {
		struct run_group *g = &dm->groups[i];

		if (g->restore && dm->cfg.state_dir[0] != '\0')
			run_restore_one(dm, g);
		g->restore = 0;
	}
}
