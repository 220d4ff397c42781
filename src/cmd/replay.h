/* replay.h: the context of `quadwatch replay`, shared by its files:
 *   replay.c         command line, setup, the order of the work, exit code
 *   replay_input.c   CSV files and captures -> readings per group
 *   replay_play.c    one reading through the detector (as the daemon),
 *                    alerts, per-reading records, --scores rows, progress
 *   replay_out.c     statistics and the --json object
 *   replay_human.c   the human summary
 *   replay_report.c  the --report HTML page (replay_svg.c draws the plots)
 * Private to src/cmd/replay*.c. */
#ifndef QW_REPLAY_H
#define QW_REPLAY_H

#include <stdint.h>
#include <stdio.h>

#include <jansson.h>

#include "alert.h"
#include "config.h"
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
#define RP_PROGRESS_EVERY 1.0 /* s between progress lines */
#define RP_PROGRESS_CHECK 4096 /* readings between clock reads */

/* One scored reading, kept for the statistics and the report. */
struct replay_point {
	double t;          /* s */
	double q;          /* score */
	double limit;      /* limit in force (Inf in warm-up) */
	double pvalue;     /* qw_limit_pvalue (NaN when undefined) */
	unsigned dof;      /* channels observed */
	unsigned char over;     /* q > limit after warm-up */
	unsigned char in_alarm; /* group in alarm after the reading */
	unsigned char warm;     /* warm-up was over: alarms possible */
};

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
	int mapped;            /* the current CSV feeds it */
	size_t *idx;           /* p CSV column indices (current file) */
	int own_label;         /* the current CSV has COLUMN_<group> */
	size_t label_idx;      /* its index, when own_label */
	double *x;             /* p values of the reading being played */
	uint64_t rejected[RP_NCAUSES]; /* before the core */
	uint64_t *top_count;   /* p: alarms where the channel ranked first */
	struct qw_labels labels;
	int has_labels;        /* some reading carried a label */
	struct replay_point *pts; /* scored readings */
	size_t npts, cap;
	int pts_full;          /* memory ran out: later points not kept */
	double t_first, t_last;   /* s, of readings offered */
	/* report only: the last RP_TRACE_PRE readings (ring), alarm traces */
	double *ring_t;        /* RP_TRACE_PRE */
	double *ring_x;        /* RP_TRACE_PRE * p */
	size_t ring_n, ring_head;
	struct replay_trace *traces; /* RP_TRACE_ALARMS */
	long open_trace;       /* slot still collecting, or -1 */
};

struct replay_opts {
	const char *config;
	const char *group;     /* --group, or NULL */
	const char *scores;    /* --scores path */
	const char *report;    /* --report path */
	const char *labels;    /* --labels column */
	int json;
	int quiet;
	char **inputs;
	int ninputs;
};

struct replay {
	struct replay_opts o;
	struct qw_config cfg;
	struct replay_group *groups; /* cfg.ngroups */
	FILE *scores;
	json_t *events;              /* alerts as the daemon encodes them */
	uint64_t events_dropped;
	char *alert_buf;             /* RP_ALERT_MAX bytes */
	double *batch;               /* capture decode buffer */
	size_t batch_len;            /* doubles */
	uint64_t csv_bad;            /* malformed CSV rows in all files */
	uint64_t unknown_topic;
	uint64_t readings;           /* offered to detectors, all groups */
	/* progress */
	int progress;                /* stderr is a terminal and not -q */
	double started, next_progress;
	int progress_shown;          /* a progress line is on screen */
	const char *cur_name;
	uint64_t cur_done, cur_total;
};

#define RP_WARN_MAX 3    /* warnings per group (enum qw_summary_warn) */
#define RP_WARN_LEN 512  /* bytes per warning text */
#define RP_ALERT_MAX 8192 /* bytes: as the daemon's alert buffer */

/* replay_input.c: plays one input (CSV or capture).  0, or an exit code
 * (QW_EXIT_USAGE, QW_EXIT_FAIL) after printing why. */
int qw_replay_input(struct replay *rp, const char *path);

/* replay_play.c */
void qw_replay_reading(struct replay *rp, struct replay_group *g, double t,
		       const double *x, int label);
int qw_replay_scores_open(struct replay *rp);
void qw_replay_progress(struct replay *rp, int last);
void qw_replay_finish(struct replay *rp);

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
	double ks, ks_crit;      /* KS distance of p-values from uniform */
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

#endif
