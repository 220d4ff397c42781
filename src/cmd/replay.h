/* replay.h: the context of `quadwatch replay`, shared by its files:
 *   replay.c         command line, setup, the order of the work, exit code
 *   replay_input.c   CSV files and captures -> readings per group
 *   replay_play.c    one reading through the detector (as the daemon),
 *                    alerts, per-reading records, --scores rows, progress
 *   replay_out.c     statistics and the --json object
 *   replay_human.c   the human summary
 *   replay_report.c  the --report HTML page (replay_svg.c draws the plots)
 *   replay_jobs.c    -j N: groups shared out over N threads, results merged
 *                    into the serial run's order
 *   replay_tail.c    -j N with one group: p-values and --scores rows on a
 *                    second thread
 * Private to src/cmd/replay*.c. */
#ifndef QW_REPLAY_H
#define QW_REPLAY_H

#include <stdint.h>
#include <stdio.h>

#include <jansson.h>

#include "alert.h"
#include "config.h"
#include "digest.h"
#include "fmt.h"
#include "quadwatch.h"
#include "summary.h"

/* Why a row, message or reading was refused.  The wire and core causes
 * carry the daemon's names (its status "rejected" object). */
enum replay_cause {
	RP_CSV_ROW = 0,   /* malformed CSV row (FILE:LINE reported) */
	RP_UNKNOWN_TOPIC, /* capture record for no configured group */
	RP_WRONG_COUNT,   /* QW_ECOUNT: p differs from the group's */
	RP_TRUNCATED,     /* QW_ETRUNC */
	RP_BAD_NUMBER,    /* QW_ENUMBER */
	RP_NONFINITE,     /* QW_ERANGE on the wire; core rej_nonfinite */
	RP_OVERSIZE,      /* more readings than the decode buffer holds */
	RP_MALFORMED,     /* QW_EFORMAT or an empty payload */
	RP_TIME,          /* core: time went backwards */
	RP_OVERFLOW,      /* core: the score overflowed */
	RP_EMPTY,         /* core: every channel missing */
	RP_NCAUSES
};
extern const char *const qw_replay_cause_names[RP_NCAUSES];

#define RP_EVENTS_MAX 10000   /* alerts listed in --json "events"; more are
				 counted in "events_dropped" */
#define RP_TRACE_ALARMS 6     /* alarms drawn in the report (highest
				 raise scores) */
#define RP_TRACE_CHANNELS 3   /* top channels drawn per alarm */
#define RP_TRACE_PRE 120      /* readings drawn before a raise */
#define RP_TRACE_POST 120     /* readings drawn from the raise on */
#define RP_TRACE_LEN (RP_TRACE_PRE + RP_TRACE_POST)
#define RP_SCORE_DIGITS 10    /* significant digits of score and limit in
				 --scores (%.10g) */
#define RP_PVALUE_DIGITS 6    /* of the p-value (%.6g) */
#define RP_SCORES_BUF (1u << 20) /* bytes of stdio buffer for --scores */
#define RP_SCORES_ROW_MAX (4 * QW_FMT_MAX + 2 * QW_CONFIG_NAME_MAX + 8)
			      /* bytes of one --scores row: four numbers,
				 group and channel names, commas, 0/1 */
#define RP_JOBS_ROW_MAX RP_SCORES_ROW_MAX
#define RP_JOBS_MAX 64        /* -j: most worker threads */
#define RP_PROGRESS_EVERY 0.5 /* s between progress lines */
#define RP_PROGRESS_CHECK 4096 /* readings between clock reads */
#define RP_Q_FLOOR 1e-3       /* smallest score drawn on the log axis */

/* The traces of one alarm's top channels around its raise. */
struct replay_trace {
	int used;          /* slot holds an alarm */
	double score;      /* q at the raise */
	double t_raise;    /* s */
	size_t nchan;      /* top channels kept, <= RP_TRACE_CHANNELS */
	unsigned chan[RP_TRACE_CHANNELS];
	size_t n;          /* readings filled in t[] and x[] */
	size_t at;         /* index of the raise in t[] */
	double t[RP_TRACE_LEN];
	double x[RP_TRACE_CHANNELS][RP_TRACE_LEN];
};

struct replay_group {
	const struct qw_group_conf *conf;
	qw_detector *det;
	int wanted;            /* --group selects it (or no --group) */
	int played;            /* some input fed it */
	unsigned owner;        /* the worker that plays it (-j), else 0 */
	size_t *idx;           /* p CSV column indices (current file) */
	double *x;             /* p values of the reading being played */
	uint64_t rejected[RP_NCAUSES]; /* before the core */
	uint64_t *top_count;   /* p: alarms where the channel ranked first */
	struct qw_labels labels;
	int has_labels;        /* some reading carried a label */
	struct qw_digest dg;   /* the summary's figures of the eligible */
	int dg_failed;         /* memory ran out (said once) */
	double t_first, t_last;   /* s, of readings offered */
	/* report only: the last RP_TRACE_PRE readings (ring), alarm traces */
	double *ring_t;        /* RP_TRACE_PRE */
	double *ring_x;        /* RP_TRACE_PRE * p */
	size_t ring_n, ring_head;
	struct replay_trace *traces; /* RP_TRACE_ALARMS */
	long open_trace;       /* slot still collecting, or -1 */
	struct qw_strip strip; /* the score plot */
	struct qw_pvalue_memo pv_memo; /* per-reading p-values (pvalue.c) */
	/* --scores: the text of the last limit written, for its bits (the
	 * limit changes only with the effective size); lim_len 0: none */
	uint64_t lim_bits;
	size_t lim_len;
	char lim_txt[QW_FMT_MAX];
	struct qw_fmt_whole t_whole; /* the time's seconds in the last row */
};

struct replay_opts {
	const char *config;
	const char *group;     /* --group, or NULL */
	const char *scores;    /* --scores path */
	const char *report;    /* --report path */
	const char *labels;    /* --labels column */
	int json;
	int quiet;
	unsigned jobs;         /* -j N: worker threads (1 = serial) */
	char **inputs;
	int ninputs;
};

/* How the current CSV feeds one group (per worker: each maps them all). */
struct replay_map {
	int mapped;            /* the current CSV feeds it */
	int own_label;         /* the current CSV has COLUMN_<group> */
	size_t label_idx;      /* its index, when own_label */
};

/* Where a reading stands in the serial run's order: input, CSV row or
 * capture record, then group index (CSV) or reading in the batch
 * (capture).  Workers tag their --scores rows and events with it so the
 * merge restores the serial order (replay_jobs.c). */
struct replay_key {
	uint64_t pos;          /* input << RP_KEY_INPUT_SHIFT | row or record */
	uint32_t sub;
};
#define RP_KEY_INPUT_SHIFT 40 /* rows or records per input < 2^40 */

struct replay_jobs;
struct replay_tail;

/* A scored reading on its way to the p-value, the kept point and the
 * --scores row (replay_play.c; replay_tail.c may do that part). */
struct replay_scored {
	struct replay_group *g;
	double t, q, limit;      /* s, score, limit in force */
	double nu, scale;        /* of the result, for the p-value */
	double pv;               /* the p-value, once the block's are done */
	struct replay_key key;   /* of the reading (-j: tags its row) */
	unsigned dof;
	unsigned char over, in_alarm, warm;
	const char *top;         /* channel name, or "" */
};

/* Scored readings held back in a serial run (or a -j worker) and done a
 * block at a time (qw_replay_scored_block): a loop of p-values alone
 * overlaps the independent chains of log1p and exp that, one reading at
 * a time, waited behind the sweep. */
#define RP_HELD 128

struct replay {
	struct replay_opts o;
	struct qw_config cfg;
	struct replay_group *groups; /* cfg.ngroups */
	struct replay_group **by_name; /* groups sorted by name (topics) */
	FILE *scores;
	json_t *events;              /* alerts as the daemon encodes them */
	uint64_t events_dropped;
	char *alert_buf;             /* RP_ALERT_MAX bytes */
	double *batch;               /* capture decode buffer */
	size_t batch_len;            /* doubles */
	uint64_t csv_bad;            /* malformed CSV rows in all files */
	int interrupted;             /* the signal that stopped the inputs, 0 */
	uint64_t unknown_topic;
	uint64_t readings;           /* offered to detectors, all groups */
	/* -j: the worker this is (0 in a serial run) and its bookkeeping */
	unsigned wid;
	struct replay_jobs *jobs;    /* NULL in a serial run */
	struct replay_tail *tail;    /* -j with one group: the thread that
					takes the p-values and rows */
	struct replay_scored held[RP_HELD]; /* scored, not yet done */
	size_t nheld;
	struct replay_map *map;      /* cfg.ngroups */
	size_t *scratch_idx;         /* column indices of groups not ours */
	unsigned input;              /* index of the input being played */
	struct replay_key key;       /* of the reading being played */
	struct replay_key *ev_keys;  /* -j: key of each kept event */
	int parked;                  /* -j, interrupted: the cut is known */
	uint64_t cut;                /* -j: the position every worker stops
					at once interrupted (qw_replay_stop) */
	uint64_t bytes_total;        /* all inputs, for the time left */
	uint64_t bytes_before;       /* inputs finished */
	/* progress */
	int progress;                /* stderr is a terminal and not -q */
	double started, next_progress;
	int progress_shown;          /* a progress line is on screen */
	const char *cur_name;
	uint64_t cur_done, cur_total;
	/* another verb reading the same inputs (quadwatch fit): the prefix
	 * of its messages, and where each reading goes instead of the
	 * detector (NULL: replay itself) */
	const char *prog;
	void (*sink)(struct replay *rp, struct replay_group *g, double t,
		     const double *x);
	void *sink_ctx;
};
#define RP_PROG(rp) ((rp)->prog != NULL ? (rp)->prog : "quadwatch replay")

#define RP_WARN_MAX 3    /* warnings per group (enum qw_summary_warn) */
#define RP_WARN_LEN 512  /* bytes per warning text */
#define RP_ALERT_MAX 8192 /* bytes: as the daemon's alert buffer */

/* replay_input.c: plays one input (CSV or capture).  0, or an exit code
 * (QW_EXIT_USAGE, QW_EXIT_FAIL) after printing why. */
int qw_replay_input(struct replay *rp, const char *path);
/* The input side's tables, once the groups exist: the topic index (group
 * names sorted, for the capture's topics), the CSV column map and its
 * scratch.  0 or QW_ENOMEM; qw_replay_input_free frees them (NULL-safe). */
int qw_replay_input_alloc(struct replay *rp);
void qw_replay_input_free(struct replay *rp);
/* 1 when worker rp plays group g. */
static inline int qw_replay_owns(const struct replay *rp,
				 const struct replay_group *g)
{
	return g->owner == rp->wid;
}

/* replay_jobs.c: plays every input with o.jobs workers (o.jobs > 1) and
 * merges their scores, events and counters into rp as a serial run would
 * have left them.  0 or an exit code (message printed). */
int qw_replay_jobs(struct replay *rp);
/* A worker's --scores row (n bytes), tagged with its reading's key. */
void qw_replay_jobs_row(struct replay *rp, const struct replay_key *key,
			const char *row, size_t n);
/* A worker's readings so far, made visible to the progress line; and the
 * sum over all workers. */
void qw_replay_jobs_publish(struct replay *rp);
uint64_t qw_replay_jobs_readings(const struct replay *rp);
/* 1 when the inputs stop before the row or record at position pos (a
 * replay_key's pos; rp->cur_done the bytes of that input read so far).
 * In a serial run: once a signal has come (qw_replay_interrupted).  With
 * -j the workers first agree on one cut, the furthest position any of
 * them had reached when it saw the signal, and each plays on to it: an
 * interrupted run covers the same rows of every group, the serial run's
 * first rows. */
int qw_replay_stop(struct replay *rp, uint64_t pos);
/* Rows or records between two looks at the other workers' progress (-j):
 * the input loops refresh cur_done before such a call. */
#define RP_PACE_EVERY 256

/* replay_play.c */
void qw_replay_reading(struct replay *rp, struct replay_group *g, double t,
		       const double *x, int label);
int qw_replay_scores_open(struct replay *rp);
/* The p-values, then the points, then the --scores rows of n scored
 * readings, in order (each r[i].pv is set). */
void qw_replay_scored_block(struct replay *rp, struct replay_scored *r,
			    size_t n);
/* Does the readings held back (the end of an input). */
void qw_replay_held_flush(struct replay *rp);
void qw_replay_progress(struct replay *rp, int last);
void qw_replay_finish(struct replay *rp);

/* replay_tail.c: with -j N (N > 1) and one group to play, the p-values,
 * points and --scores rows are done by a second thread, in order.
 * _start: 0 or QW_ENOMEM; _put hands one scored reading over; _finish
 * waits until all are done and frees the tail (NULL: no-op). */
int qw_replay_tail_start(struct replay *rp);
void qw_replay_tail_put(struct replay_tail *tl, const struct replay_scored *r);
void qw_replay_tail_finish(struct replay *rp);

/* replay_out.c */
/* Per-group figures of the summary, computed once at the end. */
struct replay_stats {
	uint64_t readings, scored, eligible, exceedances, alarms;
	double span_s;           /* t_last - t_first */
	double days;             /* eligible / rate / 86400 */
	double expected;         /* configured alarms_per_day * days */
	double guard_s;          /* data time from the first to the last
				    eligible reading (max - min), s */
	double alarms_per_day;   /* delivered: alarms * 86400 / guard_s
				    (NaN when guard_s is 0) */
	double conf_apd;         /* configured alarms_per_day */
	double lag1;             /* lag-1 autocorrelation of the eligible
				    scores, stream order (NaN: < 2) */
	size_t lag1_n;           /* scores behind it */
	int warn;                /* enum qw_summary_warn mask */
	size_t nwarn;            /* warning texts in warnings[] */
	char warnings[RP_WARN_MAX][RP_WARN_LEN];
	double alpha, limit, limit_end;
	unsigned dof;
	double tune_limit;       /* empirical (1-alpha) quantile, full dof */
	double tune_alpha;       /* empirical alpha quantile of p-values */
	double tune_apd;         /* alarms_per_day giving tune_alpha, approx */
	size_t tune_n;           /* scores behind tune_limit */
	double tune_limit_res;   /* 0: exact, else relative resolution */
	double tune_alpha_res;   /* 0: exact, else relative resolution */
	double ks, ks_crit;      /* KS distance of p-values from uniform */
	double ks_res;           /* 0: exact, else absolute resolution */
	size_t ks_n;
	uint64_t rejected[RP_NCAUSES];
	struct qw_label_metrics lm;
};
int qw_replay_stats(const struct replay *rp, const struct replay_group *g,
		    struct replay_stats *st);
int qw_replay_json(const struct replay *rp);
int qw_replay_human(const struct replay *rp, FILE *f);

/* replay_report.c */
int qw_replay_report(const struct replay *rp, const char *path);

/* replay.c: the number of the signal (SIGINT, SIGTERM) that asked the
 * replay to stop, or 0.  The input loops look at it between records and
 * rows (any thread); the figures then cover what was played. */
int qw_replay_interrupted(void);

#endif
