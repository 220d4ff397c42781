/* replay.c: `quadwatch replay -c FILE [--group G] [--json] [--scores OUT]
 * [--report OUT.html] [--labels COLUMN] [-j N] [-q] INPUT...`
 * (quadwatch-replay(1)).
 *
 * Builds one detector per configured group from the same configuration
 * the daemon reads (qw_detector_alloc on each group's params, no
 * checkpoint), plays every input in the order given as one stream
 * (replay_input.c; with -j N the groups are shared out over N threads,
 * replay_jobs.c, with the same results), then writes the summary
 * (replay_out.c) and the report (replay_report.c).  Deterministic: no
 * clock enters the results.
 *
 * SIGINT or SIGTERM stops the inputs at the next record or row; the
 * summary, report and --scores rows of what was played are still written,
 * marked as interrupted, and the exit status is 128 + the signal.  A
 * second signal ends the process at once (the handler is reset).
 *
 * Workload: about 0.7 M readings/s of a 16-channel group from CSV and
 * 2-3 M/s from a capture on one core (README "Measured"); memory bounded
 * by the summary's digests (digest.c), not by the stream's length. */
#include <math.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "cmd.h"
#include "input.h"
#include "log.h"
#include "model.h"
#include "num.h"
#include "replay.h"
#include "verdict.h"
#include "wire.h"

/* The signal that stopped the replay: a lock-free atomic, so the handler
 * may store it and every thread read it. */
static atomic_int rp_signal;

/* Stores the signal and gives SIGINT and SIGTERM their default action
 * back, so that a second of either ends the process (sigaction is
 * async-signal-safe). */
static void rp_on_signal(int sig)
{
	struct sigaction dfl;

	atomic_store_explicit(&rp_signal, sig, memory_order_relaxed);
	memset(&dfl, 0, sizeof dfl);
	sigemptyset(&dfl.sa_mask);
	dfl.sa_handler = SIG_DFL;
	sigaction(SIGINT, &dfl, NULL);
	sigaction(SIGTERM, &dfl, NULL);
}

int qw_replay_interrupted(void)
{
	return atomic_load_explicit(&rp_signal, memory_order_relaxed);
}

/* SIGINT and SIGTERM stop the inputs; the handler runs once (a second
 * signal takes its default action), blocking the other signal while it
 * runs, and interrupted reads and writes restart (an input blocked on an
 * idle pipe stops at its next record or its end). */
static int rp_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sigaddset(&sa.sa_mask, SIGINT);
	sigaddset(&sa.sa_mask, SIGTERM);
	sa.sa_handler = rp_on_signal;
	sa.sa_flags = SA_RESTART;
	return sigaction(SIGINT, &sa, NULL) || sigaction(SIGTERM, &sa, NULL);
}

static void rp_usage(FILE *f)
{
	fprintf(f,
		"usage: quadwatch replay -c FILE [--group G] [--json] "
		"[--scores OUT.csv]\n"
		"                        [--report OUT.html] [--labels COLUMN] "
		"[-j N] [-q] INPUT...\n"
		"  -c FILE           configuration (quadwatch.ini(5))\n"
		"  --group G         play only group G\n"
		"  --json            one JSON summary object on stdout\n"
		"  --scores OUT.csv  one row per scored reading\n"
		"  --report OUT.html self-contained HTML report\n"
		"  --labels COLUMN   0/1 truth column of the CSV inputs\n"
		"  -j N              play the groups on N threads (same "
		"results)\n"
		"  -q                no progress, errors only\n"
		"INPUT: CSV files or captures from quadwatch record.\n");
}

/* The value after option argv[*i]; NULL (usage printed) when absent. */
static const char *rp_value(int argc, char **argv, int *i)
{
	if (*i + 1 >= argc) {
		fprintf(stderr, "quadwatch replay: %s needs a value\n",
			argv[*i]);
		return NULL;
	}
	return argv[++*i];
}

/* Options may come before, between or after the inputs ("--" ends the
 * options).  o->inputs is allocated (argc entries); 0 or an exit code. */
static int rp_args(int argc, char **argv, struct replay_opts *o)
{
	int i, opts = 1;

	memset(o, 0, sizeof *o);
	o->jobs = 1;
	o->inputs = calloc((size_t)argc, sizeof *o->inputs);
	if (o->inputs == NULL)
		return QW_EXIT_FAIL;
	for (i = 1; i < argc; i++) {
		const char *a = argv[i];
		const char **dst = NULL;

		if (!opts || a[0] != '-' || a[1] == '\0') {
			o->inputs[o->ninputs++] = argv[i];
			continue;
		}
		if (strcmp(a, "--") == 0) {
			opts = 0;
		} else if (strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0) {
			rp_usage(stdout);
			return -1;
		} else if (strcmp(a, "--json") == 0) {
			o->json = 1;
		} else if (strcmp(a, "-q") == 0) {
			o->quiet = 1;
		} else if (strcmp(a, "-c") == 0) {
			dst = &o->config;
		} else if (strcmp(a, "--group") == 0) {
			dst = &o->group;
		} else if (strcmp(a, "--scores") == 0) {
			dst = &o->scores;
		} else if (strcmp(a, "--report") == 0) {
			dst = &o->report;
		} else if (strcmp(a, "--labels") == 0) {
			dst = &o->labels;
		} else if (strncmp(a, "-j", 2) == 0) {
			/* -j N or -jN */
			const char *v = a[2] != '\0' ? a + 2
					: rp_value(argc, argv, &i);
			uint64_t n;

			if (v == NULL)
				return QW_EXIT_USAGE;
			if (qw_num_u64(v, (size_t)-1, 1, RP_JOBS_MAX, &n) != 0) {
				fprintf(stderr, "quadwatch replay: -j %s: not a "
					"thread count from 1 to %u\n", v,
					RP_JOBS_MAX);
				return QW_EXIT_USAGE;
			}
			o->jobs = (unsigned)n;
		} else {
			fprintf(stderr, "quadwatch replay: unknown option "
				"'%s'\n", a);
			rp_usage(stderr);
			return QW_EXIT_USAGE;
		}
		if (dst != NULL && (*dst = rp_value(argc, argv, &i)) == NULL)
			return QW_EXIT_USAGE;
	}
	if (o->config == NULL || o->ninputs < 1) {
		fprintf(stderr, "quadwatch replay: %s\n", o->config == NULL
			? "-c FILE is required" : "no INPUT given");
		rp_usage(stderr);
		return QW_EXIT_USAGE;
	}
	return 0;
}

static int rp_group_alloc(struct replay *rp, struct replay_group *g,
			  const struct qw_group_conf *gc)
{
	char err[QW_CONFIG_ERR_MAX];
	size_t p = gc->p;
	int rc;

	g->conf = gc;
	g->open_trace = -1;
	g->pv_memo = (struct qw_pvalue_memo)QW_PVALUE_MEMO_INIT;
	g->wanted = rp->o.group == NULL || strcmp(rp->o.group, gc->name) == 0;
	if (g->wanted) {
		rc = qw_model_detector(gc, &g->det, NULL, err, sizeof err);
		if (rc != 0 && rc != QW_ENOMEM) {
			fprintf(stderr, "quadwatch replay: %s\n", err);
			return QW_ERROR(QW_EFORMAT);
		}
	} else {
		g->det = qw_detector_alloc(&gc->params);
	}
	g->idx = calloc(p, sizeof *g->idx);
	g->x = calloc(p, sizeof *g->x);
	g->top_count = calloc(p, sizeof *g->top_count);
	if (g->det == NULL || g->idx == NULL || g->x == NULL ||
	    g->top_count == NULL)
		return QW_ERROR(QW_ENOMEM);
	qw_labels_reset(&g->labels);
	qw_digest_reset(&g->dg);
	if (rp->o.report == NULL)
		return 0;
	g->ring_t = calloc(RP_TRACE_PRE, sizeof *g->ring_t);
	g->ring_x = calloc(RP_TRACE_PRE * p, sizeof *g->ring_x);
	g->traces = calloc(RP_TRACE_ALARMS, sizeof *g->traces);
	if (g->ring_t == NULL || g->ring_x == NULL || g->traces == NULL ||
	    qw_strip_alloc(&g->strip, RP_Q_FLOOR) != 0)
		return QW_ERROR(QW_ENOMEM);
	return 0;
}

static void rp_teardown(struct replay *rp)
{
	size_t i;

	for (i = 0; rp->groups != NULL && i < rp->cfg.ngroups; i++) {
		struct replay_group *g = &rp->groups[i];

		qw_detector_free(g->det);
		free(g->idx);
		free(g->x);
		free(g->top_count);
		qw_digest_free(&g->dg);
		qw_strip_free(&g->strip);
		free(g->ring_t);
		free(g->ring_x);
		free(g->traces);
	}
	free(rp->groups);
	qw_replay_input_free(rp);
	free(rp->batch);
	free(rp->alert_buf);
	json_decref(rp->events);
	if (rp->scores != NULL)
		fclose(rp->scores);
	qw_config_free(&rp->cfg);
	free(rp->o.inputs);
}

/* Config, groups, buffers.  0 or an exit code (message printed). */
static int rp_setup(struct replay *rp)
{
	char err[QW_CONFIG_ERR_MAX];
	size_t i;

	if (qw_config_load(rp->o.config, &rp->cfg, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch replay: %s\n", err);
		return QW_EXIT_USAGE;
	}
	if (rp->o.group != NULL && qw_config_group(&rp->cfg, rp->o.group)
	    == NULL) {
		fprintf(stderr, "quadwatch replay: --group %s: no [group %s] "
			"in %s\n", rp->o.group, rp->o.group, rp->o.config);
		return QW_EXIT_USAGE;
	}
	rp->groups = calloc(rp->cfg.ngroups, sizeof *rp->groups);
	rp->batch_len = qw_verdict_buffer_len(&rp->cfg);
	rp->batch = malloc(rp->batch_len * sizeof *rp->batch);
	rp->alert_buf = malloc(RP_ALERT_MAX);
	rp->events = json_array();
	if (rp->groups == NULL || rp->batch == NULL ||
	    rp->alert_buf == NULL || rp->events == NULL)
		goto nomem;
	for (i = 0; i < rp->cfg.ngroups; i++) {
		int rc = rp_group_alloc(rp, &rp->groups[i], &rp->cfg.groups[i]);

		if (rc == QW_EFORMAT)
			return QW_EXIT_USAGE; /* a model file refused */
		if (rc != 0)
			goto nomem;
	}
	if (qw_replay_input_alloc(rp) != 0)
		goto nomem;
	return 0;
nomem:
	fprintf(stderr, "quadwatch replay: out of memory\n");
	return QW_EXIT_FAIL;
}

/* Outputs after the stream: scores flushed, JSON or human summary,
 * report.  0 or QW_EXIT_FAIL. */
static int rp_outputs(struct replay *rp)
{
	int rc = 0;

	if (rp->scores != NULL) {
		if (fflush(rp->scores) != 0 || ferror(rp->scores)) {
			qw_log_errno(QW_LOG_ERROR, "%s", rp->o.scores);
			rc = QW_EXIT_FAIL;
		}
	}
	if (rp->o.json ? qw_replay_json(rp) : qw_replay_human(rp, stdout))
		rc = QW_EXIT_FAIL;
	if (rp->o.report != NULL && qw_replay_report(rp, rp->o.report))
		rc = QW_EXIT_FAIL;
	if (fflush(stdout) != 0) {
		qw_log_errno(QW_LOG_ERROR, "standard output");
		rc = QW_EXIT_FAIL;
	}
	return rc;
}

/* Groups that --group (or its absence) selects. */
static size_t rp_wanted(const struct replay *rp)
{
	size_t i, n = 0;

	for (i = 0; i < rp->cfg.ngroups; i++)
		n += rp->groups[i].wanted != 0;
	return n;
}

/* Bytes of all inputs that are regular files, for the time left. */
static uint64_t rp_input_bytes(const struct replay_opts *o)
{
	struct stat st;
	uint64_t sum = 0;
	int i;

	for (i = 0; i < o->ninputs; i++)
		if (strcmp(o->inputs[i], "-") != 0 &&
		    stat(o->inputs[i], &st) == 0 && S_ISREG(st.st_mode))
			sum += (uint64_t)st.st_size;
	return sum;
}

/* 1 when every input can be read by each -j worker in turn: regular
 * files; else 0, said once (the groups then play on one reader, with the
 * second thread on the p-values and rows: the same results). */
static int rp_inputs_twice(const struct replay_opts *o)
{
	int i;

	for (i = 0; i < o->ninputs; i++)
		if (qw_input_once(o->inputs[i]) == 1) {
			qw_log(QW_LOG_INFO, "-j %u: %s is not a regular file "
			       "(it can be read only once): one thread reads "
			       "it and plays every group", o->jobs,
			       strcmp(o->inputs[i], "-") == 0 ? "standard input"
			       : o->inputs[i]);
			return 0;
		}
	return 1;
}

int qw_cmd_replay(int argc, char **argv)
{
	struct replay rp;
	int i, rc, share;

	memset(&rp, 0, sizeof rp);
	rc = rp_args(argc, argv, &rp.o);
	if (rc != 0) {
		free(rp.o.inputs);
		return rc < 0 ? QW_EXIT_OK : rc;
	}
	if (rp.o.quiet)
		qw_log_set_level(QW_LOG_ERROR);
	rp.progress = !rp.o.quiet && isatty(STDERR_FILENO);
	if (rp_signals() != 0) {
		qw_log_errno(QW_LOG_ERROR, "signal handlers");
		free(rp.o.inputs);
		return QW_EXIT_FAIL;
	}
	rp.started = qw_log_monotonic();
	rp.next_progress = rp.started + RP_PROGRESS_EVERY;
	rc = rp_setup(&rp);
	if (rc == 0 && rp.o.scores != NULL)
		rc = qw_replay_scores_open(&rp);
	rp.bytes_total = rp_input_bytes(&rp.o);
	/* -j: several groups are shared out; one group gets a second
	 * thread for its p-values and rows */
	share = rc == 0 && rp.o.jobs > 1 && rp_wanted(&rp) > 1 &&
		rp_inputs_twice(&rp.o);
	if (share)
		rc = qw_replay_jobs(&rp);
	else if (rc == 0 && rp.o.jobs > 1 && qw_replay_tail_start(&rp) != 0)
		rc = QW_EXIT_FAIL;
	for (i = 0; rc == 0 && !share && i < rp.o.ninputs &&
		    !qw_replay_interrupted(); i++) {
		rp.input = (unsigned)i;
		rc = qw_replay_input(&rp, rp.o.inputs[i]);
	}
	qw_replay_tail_finish(&rp);
	if (rc == 0) {
		qw_replay_progress(&rp, 1);
		rp.interrupted = qw_replay_interrupted();
		if (rp.interrupted != 0)
			qw_log(QW_LOG_WARN, "interrupted by %s: the summary "
			       "covers the readings played before it",
			       rp.interrupted == SIGINT ? "SIGINT" : "SIGTERM");
		qw_replay_finish(&rp);
		rc = rp_outputs(&rp);
		if (rc == 0 && rp.interrupted != 0)
			rc = 128 + rp.interrupted;
	}
	rp_teardown(&rp);
	return rc;
}
