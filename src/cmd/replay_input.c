/* replay_input.c: the inputs of `quadwatch replay`, each turned into
 * readings for the groups it feeds.
 *
 * A capture (detected by its magic, capture.h) holds bus messages as
 * `quadwatch record` received them: each payload is decoded with
 * qw_wire_decode into a batch exactly as the daemon's run_message does,
 * its topic naming the group.  Any other file is CSV (csvin.h): each
 * selected group whose channels all have columns is fed every row.
 *
 * Workload: one pass per file; the only buffers are the group's x[p] and
 * the decode batch sized from max_frame, both allocated at setup. */
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "capture.h"
#include "cmd.h"
#include "csvin.h"
#include "input.h"
#include "log.h"
#include "replay.h"
#include "wire.h"

const char *const qw_replay_cause_names[RP_NCAUSES] = {
	[RP_CSV_ROW] = "malformed_row",
	[RP_UNKNOWN_TOPIC] = "unknown_topic",
	[RP_WRONG_COUNT] = "wrong_count",
	[RP_TRUNCATED] = "truncated",
	[RP_BAD_NUMBER] = "bad_number",
	[RP_NONFINITE] = "nonfinite",
	[RP_OVERSIZE] = "oversize",
	[RP_MALFORMED] = "malformed",
	[RP_TIME] = "time",
	[RP_OVERFLOW] = "overflow",
	[RP_EMPTY] = "empty",
};

/* An error of the replay on stderr, from the first worker only (the
 * others meet the same one at the same place). */
static void rp_say(const struct replay *rp, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));
static void rp_say(const struct replay *rp, const char *fmt, ...)
{
	va_list ap;

	if (rp->wid != 0)
		return;
	fprintf(stderr, "%s: ", RP_PROG(rp));
	va_start(ap, fmt);
	vfprintf(stderr, fmt, ap);
	va_end(ap);
	fputc('\n', stderr);
}

static void rp_silent(void *ctx, const char *msg)
{
	(void)ctx;
	(void)msg;
}

/* strcmp of topic[0..tlen) (not NUL-terminated) with name. */
static int rp_name_cmp(const char *topic, size_t tlen, const char *name)
{
	size_t ln = strlen(name);
	int c = memcmp(topic, name, tlen < ln ? tlen : ln);

	if (c != 0)
		return c;
	return tlen < ln ? -1 : tlen > ln;
}

static int rp_by_name(const void *a, const void *b)
{
	const struct replay_group *ga = *(const struct replay_group *const *)a;
	const struct replay_group *gb = *(const struct replay_group *const *)b;

	return strcmp(ga->conf->name, gb->conf->name);
}

int qw_replay_input_alloc(struct replay *rp)
{
	size_t i, maxp = 1;

	for (i = 0; i < rp->cfg.ngroups; i++)
		if (rp->cfg.groups[i].p > maxp)
			maxp = rp->cfg.groups[i].p;
	rp->by_name = calloc(rp->cfg.ngroups + 1, sizeof *rp->by_name);
	rp->map = calloc(rp->cfg.ngroups + 1, sizeof *rp->map);
	rp->scratch_idx = calloc(maxp, sizeof *rp->scratch_idx);
	if (rp->by_name == NULL || rp->map == NULL || rp->scratch_idx == NULL)
		return QW_ERROR(QW_ENOMEM);
	for (i = 0; i < rp->cfg.ngroups; i++)
		rp->by_name[i] = &rp->groups[i];
	qsort(rp->by_name, rp->cfg.ngroups, sizeof *rp->by_name, rp_by_name);
	return 0;
}

void qw_replay_input_free(struct replay *rp)
{
	free(rp->by_name);
	free(rp->map);
	free(rp->scratch_idx);
}

/* 1 when the CSV has a column called name. */
static int rp_has_column(const struct qw_csvin *c, const char *name)
{
	size_t j;

	for (j = 1; j < qw_csvin_ncols(c); j++)
		if (strcmp(qw_csvin_column(c, j), name) == 0)
			return 1;
	return 0;
}

/* --labels COLUMN: a group whose own column COLUMN_<group> is in the file
 * takes its truth from it (a file that records several groups can say
 * which group each fault belongs to); the others take COLUMN, which must
 * then exist.  0 or QW_EXIT_USAGE (message printed). */
static int rp_csv_labels(struct replay *rp, struct qw_csvin *c)
{
	char err[QW_CSVIN_ERR_MAX], own[1][QW_CONFIG_NAME_MAX];
	size_t i;
	int shared = 0;

	if (rp->o.labels == NULL)
		return 0;
	for (i = 0; i < rp->cfg.ngroups; i++) {
		struct replay_group *g = &rp->groups[i];
		struct replay_map *m = &rp->map[i];
		int n = snprintf(own[0], sizeof own[0], "%s_%s", rp->o.labels,
				 g->conf->name);

		m->own_label = 0;
		if (!m->mapped)
			continue;
		if (n > 0 && (size_t)n < sizeof own[0] &&
		    rp_has_column(c, own[0]) &&
		    qw_csvin_map(c, g->conf->name, own, 1, &m->label_idx, err,
				 sizeof err) == 0)
			m->own_label = 1;
		else
			shared = 1;
	}
	if (shared && qw_csvin_label(c, rp->o.labels, err, sizeof err) != 0) {
		rp_say(rp, "%s", err);
		return QW_EXIT_USAGE;
	}
	return 0;
}

/* Maps each wanted group onto the CSV's columns.  A group that lacks a
 * column is an error when it was asked for by --group, or when no group
 * at all can be played; otherwise it is noted and skipped for this file.
 * 0 or QW_EXIT_USAGE (message printed). */
static int rp_csv_map(struct replay *rp, struct qw_csvin *c,
		      const char *path)
{
	char err[QW_CSVIN_ERR_MAX], why[4 * QW_CSVIN_ERR_MAX] = "";
	size_t i, nmapped = 0, used = 0;

	for (i = 0; i < rp->cfg.ngroups; i++) {
		struct replay_group *g = &rp->groups[i];
		/* every worker maps every group, so all parse the same
		 * columns and refuse the same rows; only the owner keeps
		 * the indices */
		int ours = qw_replay_owns(rp, g);

		rp->map[i].mapped = 0;
		if (!g->wanted)
			continue;
		if (qw_csvin_map(c, g->conf->name, g->conf->channels,
				 g->conf->p, ours ? g->idx : rp->scratch_idx,
				 err, sizeof err) == 0) {
			rp->map[i].mapped = 1;
			if (ours)
				g->played = 1;
			nmapped++;
			continue;
		}
		if (rp->o.group != NULL) {
			rp_say(rp, "%s", err);
			return QW_EXIT_USAGE;
		}
		if (rp->wid == 0)
			qw_log(QW_LOG_INFO, "%s (group %s not played from "
			       "this file)", err, g->conf->name);
		if (used + 3 < sizeof why) {
			int n = snprintf(why + used, sizeof why - used,
					 "\n  %s", err);
			used += n > 0 ? (size_t)n : 0;
			if (used >= sizeof why)
				used = sizeof why - 1;
		}
	}
	if (nmapped == 0) {
		rp_say(rp, "%s: no group has all its channels in this file:%s",
		       path, why);
		return QW_EXIT_USAGE;
	}
	return rp_csv_labels(rp, c);
}

/* qw_replay_stop before the next row, with the bytes read when -j
 * workers compare their progress. */
static int rp_csv_stop(struct replay *rp, const struct qw_csvin *c)
{
	if (rp->jobs != NULL && rp->key.pos % RP_PACE_EVERY == 0)
		qw_csvin_progress(c, &rp->cur_done, &rp->cur_total);
	return qw_replay_stop(rp, rp->key.pos);
}

/* Every row to every mapped group.  0 or QW_EXIT_FAIL. */
static int rp_csv_rows(struct replay *rp, struct qw_csvin *c)
{
	const struct qw_csvin_row *row;
	uint64_t n = 0;
	size_t i, k;
	int rc = 0, label;

	rp->key.pos = (uint64_t)rp->input << RP_KEY_INPUT_SHIFT;
	while (!rp_csv_stop(rp, c) && (rc = qw_csvin_next(c, &row)) == 1) {
		for (i = 0; i < rp->cfg.ngroups; i++) {
			struct replay_group *g = &rp->groups[i];
			const struct replay_map *m = &rp->map[i];

			if (!m->mapped || !qw_replay_owns(rp, g))
				continue;
			for (k = 0; k < g->conf->p; k++)
				g->x[k] = row->x[g->idx[k]];
			label = row->label;
			if (m->own_label) {
				double v = row->x[m->label_idx];

				label = isnan(v) ? -1 : v != 0.0;
			}
			rp->key.sub = (uint32_t)i;
			qw_replay_reading(rp, g, row->time, g->x, label);
		}
		rp->key.pos++;
		if (++n % RP_PROGRESS_CHECK == 0) {
			qw_csvin_progress(c, &rp->cur_done, &rp->cur_total);
			qw_replay_progress(rp, 0);
		}
	}
	if (rc < 0) {
		qw_replay_progress(rp, 1);
		rp_say(rp, "%s", qw_csvin_error(c));
		return QW_EXIT_FAIL;
	}
	for (i = 0; i < rp->cfg.ngroups; i++)
		if (rp->map[i].mapped && qw_replay_owns(rp, &rp->groups[i]))
			rp->groups[i].rejected[RP_CSV_ROW] += qw_csvin_bad(c);
	rp->csv_bad += qw_csvin_bad(c);
	return 0;
}

static int rp_csv(struct replay *rp, const struct qw_input *in)
{
	struct qw_csvin *c = NULL;
	char err[QW_CSVIN_ERR_MAX];
	const char *path = in->name;
	/* malformed rows are logged by the first worker only */
	int rc = qw_csvin_open_stream(in->fp, in->name, in->size,
				      rp->wid == 0 ? NULL : rp_silent, NULL,
				      &c, err, sizeof err);

	if (rc != 0) {
		rp_say(rp, "%s", err);
		return rc == QW_EFORMAT ? QW_EXIT_USAGE : QW_EXIT_FAIL;
	}
	rc = rp_csv_map(rp, c, path);
	if (rc == 0)
		rc = rp_csv_rows(rp, c);
	qw_csvin_close(c);
	return rc;
}

/* The cause of a qw_wire_decode failure (as the daemon's). */
static int rp_wire_cause(int rc)
{
	switch (rc) {
	case QW_ECOUNT: return RP_WRONG_COUNT;
	case QW_ETRUNC: return RP_TRUNCATED;
	case QW_ENUMBER: return RP_BAD_NUMBER;
	case QW_ERANGE: return RP_NONFINITE;
	case QW_EOVERSIZE: return RP_OVERSIZE;
	default: return RP_MALFORMED;
	}
}

/* The group named by topic (tlen bytes), or NULL: binary search of the
 * names sorted at setup (qw_replay_input_alloc), O(log groups). */
static struct replay_group *rp_topic(struct replay *rp, const char *topic,
				     size_t tlen)
{
	size_t lo = 0, hi = rp->cfg.ngroups;

	while (lo < hi) {
		size_t mid = lo + (hi - lo) / 2;
		struct replay_group *g = rp->by_name[mid];
		int c = rp_name_cmp(topic, tlen, g->conf->name);

		if (c == 0)
			return g;
		if (c < 0)
			hi = mid;
		else
			lo = mid + 1;
	}
	return NULL;
}

/* One captured message, as run_message in the daemon. */
static void rp_message(struct replay *rp, const struct qw_capture_rec *rec)
{
	struct replay_group *g = rp_topic(rp, rec->topic, rec->tlen);
	struct qw_wire_batch b;
	size_t k;
	int rc;

	if (g == NULL) {
		rp->unknown_topic++;
		return;
	}
	if (!g->wanted || !qw_replay_owns(rp, g))
		return;
	g->played = 1;
	qw_wire_batch_init(&b, g->conf->p, rp->batch, rp->batch_len);
	rc = qw_wire_decode(rec->payload, rec->plen, &b);
	if (rc != 0) {
		g->rejected[rp_wire_cause(rc)]++;
		return;
	}
	for (k = 0; k < b.n; k++) {
		rp->key.sub = (uint32_t)k;
		qw_replay_reading(rp, g, b.t[k], b.x + k * b.p, -1);
	}
}

/* qw_replay_stop before the next record (as rp_csv_stop). */
static int rp_capture_stop(struct replay *rp,
			   const struct qw_capture_reader *r)
{
	if (rp->jobs != NULL && rp->key.pos % RP_PACE_EVERY == 0)
		qw_capture_reader_progress(r, &rp->cur_done, &rp->cur_total);
	return qw_replay_stop(rp, rp->key.pos);
}

static int rp_capture(struct replay *rp, const struct qw_input *in)
{
	struct qw_capture_reader *r = NULL;
	const struct qw_capture_rec *rec;
	const char *path = in->name;
	uint64_t n = 0;
	int rc = qw_capture_reader_open_stream(in->fp, in->regular ? in->size
					       : QW_CAPTURE_SIZE_UNKNOWN,
					       rp->cfg.max_frame, &r);

	if (rc != 0) {
		rp_say(rp, "%s: %s", path, qw_strerror(rc));
		return QW_EXIT_FAIL;
	}
	rp->key.pos = (uint64_t)rp->input << RP_KEY_INPUT_SHIFT;
	while (!rp_capture_stop(rp, r) &&
	       (rc = qw_capture_reader_next(r, &rec)) == 1) {
		rp_message(rp, rec);
		rp->key.pos++;
		if (++n % (RP_PROGRESS_CHECK / 64) == 0) {
			qw_capture_reader_progress(r, &rp->cur_done,
						   &rp->cur_total);
			qw_replay_progress(rp, 0);
		}
	}
	qw_capture_reader_close(r);
	if (rc == QW_ETRUNC) {
		/* a recording stopped hard: keep what was whole */
		if (rp->wid == 0)
			qw_log(QW_LOG_WARN, "%s: the last record is cut short; the "
		       "%llu whole records before it were played", path,
		       (unsigned long long)n);
		return 0;
	}
	if (rc < 0) {
		qw_replay_progress(rp, 1);
		rp_say(rp, "%s: after record %llu: %s", path,
		       (unsigned long long)n, qw_strerror(rc));
		return QW_EXIT_FAIL;
	}
	return 0;
}

int qw_replay_input(struct replay *rp, const char *path)
{
	struct qw_input in;
	int rc = qw_input_open(path, &in);

	rp->cur_name = path;
	rp->cur_done = 0;
	rp->cur_total = 0;
	if (rc != 0) {
		rp_say(rp, "%s: %s", path, rc == QW_ENOMEM ? qw_strerror(rc)
		       : strerror(errno));
		return QW_EXIT_FAIL;
	}
	rc = in.capture ? rp_capture(rp, &in) : rp_csv(rp, &in);
	qw_replay_held_flush(rp);
	qw_input_close(&in);
	rp->bytes_before += rp->cur_total;
	return rc;
}
