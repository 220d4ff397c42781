/* replay_jobs.c: `quadwatch replay -j N`, the groups played by N threads
 * with the results of a serial run, byte for byte.
 *
 * Groups are independent: a detector sees only its own readings, in input
 * order, whoever plays it.  So the wanted groups are shared out (largest
 * p^2 first, each to the least loaded worker: the core's cost per reading
 * is O(p^2)) and every worker reads every input in order, maps every
 * group's columns (so all parse and refuse the same rows) and plays only
 * its own groups.  Each reading carries its place in the serial order
 * (struct replay_key: input, row or record, group or batch index); the
 * workers write their --scores rows, tagged with it, to temporary files
 * and keep the key of each event, and the merge puts both back in that
 * order.  Counters that every worker sees alike (malformed rows, unknown
 * topics) come from the first; messages too.
 *
 * Interruption.  Each worker sees the signal at its own place in the
 * inputs; stopping each there would leave the groups covering different
 * spans of the stream.  So a worker that sees it parks: it posts the
 * position it reached and waits until every worker has posted one (a
 * worker that has played all its inputs posts the end); the cut is the
 * furthest, and those behind play on to it.  The merged output is then
 * the serial run's up to the cut, a row or record boundary.  So that
 * those behind are never far behind (a worker with light groups would
 * otherwise run ahead, even finish, and the cut would be the end), a
 * worker posts its position every RP_PACE_EVERY rows or records and waits
 * while it has read more than RP_PACE_BYTES of the input beyond the
 * slowest, or is in a later input: the run takes as long as its slowest
 * worker anyway, and the one behind reaches the cut within some
 * milliseconds.  Bytes, not rows or records, since a record may hold one
 * reading or thousands.
 *
 * Workload: reading and CSV parsing are done by every worker, the
 * detectors (the bulk at p >= 8) are split; the merge is one pass over
 * the tagged rows.  Memory per worker: decode and alert buffers, the
 * event keys (RP_EVENTS_MAX), and a stdio buffer. */
#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "cmd.h"
#include "log.h"
#include "replay.h"

/* A tagged row in a worker's temporary file: key, length, bytes. */
struct jobs_head {
	uint64_t pos;
	uint32_t sub;
	uint32_t len;
};

struct replay_jobs {
	struct replay *main;
	unsigned n;
	struct replay *w;              /* n worker contexts */
	_Atomic uint64_t *readings;    /* n: published by each worker */
	_Atomic uint64_t *at;          /* n: the position each has reached
					  (now and then; where it parked;
					  RP_POS_END: all its inputs done) */
	_Atomic uint64_t *bytes;       /* n: bytes each has read of its
					  input, as at was posted */
	atomic_uint parked;            /* workers parked or done */
	pthread_t *th;
	int *rc;
};

void qw_replay_jobs_row(struct replay *rp, const struct replay_key *key,
			const char *row, size_t n)
{
	struct jobs_head h;

	memset(&h, 0, sizeof h);
	h.pos = key->pos;
	h.sub = key->sub;
	h.len = (uint32_t)n;
	fwrite(&h, sizeof h, 1, rp->scores);
	fwrite(row, 1, n, rp->scores);
}

void qw_replay_jobs_publish(struct replay *rp)
{
	atomic_store_explicit(&rp->jobs->readings[rp->wid], rp->readings,
			      memory_order_relaxed);
}

uint64_t qw_replay_jobs_readings(const struct replay *rp)
{
	uint64_t sum = 0;
	unsigned i;

	for (i = 0; i < rp->jobs->n; i++)
		sum += atomic_load_explicit(&rp->jobs->readings[i],
					    memory_order_relaxed);
	return sum;
}

#define RP_POS_END UINT64_MAX
#define RP_PARK_NAP_NS 100000L /* 0.1 ms between looks at the others */
#define RP_PACE_BYTES (4u << 20) /* input a worker may read ahead */

/* 1 while worker w, at pos with done bytes of its input read, is too far
 * ahead of worker k. */
static int jobs_ahead(const struct replay_jobs *j, unsigned k, uint64_t pos,
		      uint64_t done)
{
	uint64_t at = atomic_load_explicit(&j->at[k], memory_order_acquire);
	uint64_t in = pos >> RP_KEY_INPUT_SHIFT;

	if (at == RP_POS_END)
		return 0;
	if ((at >> RP_KEY_INPUT_SHIFT) != in)
		return (at >> RP_KEY_INPUT_SHIFT) < in;
	return done > atomic_load_explicit(&j->bytes[k], memory_order_relaxed) +
		      RP_PACE_BYTES;
}

/* Posts worker w's position and waits while it leads the slowest by too
 * much (not once a signal has come: then it parks). */
static void jobs_pace(struct replay *w, uint64_t pos)
{
	struct replay_jobs *j = w->jobs;
	const struct timespec nap = {0, RP_PARK_NAP_NS};
	uint64_t done = w->cur_done;
	unsigned k;

	atomic_store_explicit(&j->bytes[w->wid], done, memory_order_relaxed);
	atomic_store_explicit(&j->at[w->wid], pos, memory_order_release);
	for (k = 0; k < j->n; k++)
		while (k != w->wid && jobs_ahead(j, k, pos, done) &&
		       !qw_replay_interrupted())
			nanosleep(&nap, NULL);
}

/* Worker w posts pos and, unless it is done (pos = RP_POS_END), waits
 * for every other worker to post, then takes the furthest as its cut. */
static void jobs_park(struct replay *w, uint64_t pos)
{
	struct replay_jobs *j = w->jobs;
	const struct timespec nap = {0, RP_PARK_NAP_NS};
	uint64_t at, cut = 0;
	unsigned k;

	atomic_store(&j->at[w->wid], pos);
	atomic_fetch_add(&j->parked, 1);
	w->parked = 1;
	if (pos == RP_POS_END)
		return;
	while (atomic_load(&j->parked) < j->n)
		nanosleep(&nap, NULL);
	for (k = 0; k < j->n; k++) {
		at = atomic_load(&j->at[k]);
		if (at > cut)
			cut = at;
	}
	w->cut = cut;
}

int qw_replay_stop(struct replay *rp, uint64_t pos)
{
	if (rp->jobs != NULL && !rp->parked && pos % RP_PACE_EVERY == 0)
		jobs_pace(rp, pos);
	if (!qw_replay_interrupted())
		return 0;
	if (rp->jobs == NULL)
		return 1;
	if (!rp->parked)
		jobs_park(rp, pos);
	return pos >= rp->cut;
}

static int key_less(const struct replay_key *a, const struct replay_key *b)
{
	return a->pos < b->pos || (a->pos == b->pos && a->sub < b->sub);
}

/* Shares the wanted groups out: largest p^2 first, to the least loaded. */
static void jobs_assign(struct replay *rp, unsigned n)
{
	uint64_t *load = calloc(n, sizeof *load);
	size_t i, done = 0, ng = rp->cfg.ngroups;
	char *given = calloc(ng + 1, 1);

	if (load == NULL || given == NULL) {
		free(load);
		free(given);
		return; /* all stay with worker 0: correct, only slower */
	}
	while (done < ng) {
		size_t best = ng;
		unsigned w, lo = 0;

		for (i = 0; i < ng; i++)
			if (!given[i] && (best == ng || rp->groups[i].conf->p >
					  rp->groups[best].conf->p))
				best = i;
		for (w = 1; w < n; w++)
			if (load[w] < load[lo])
				lo = w;
		given[best] = 1;
		done++;
		rp->groups[best].owner = 0;
		if (!rp->groups[best].wanted)
			continue;
		rp->groups[best].owner = lo;
		load[lo] += (uint64_t)rp->groups[best].conf->p *
			    rp->groups[best].conf->p;
	}
	free(load);
	free(given);
}

static void jobs_worker_free(struct replay *w)
{
	free(w->alert_buf);
	free(w->batch);
	free(w->map);
	free(w->scratch_idx);
	free(w->ev_keys);
	json_decref(w->events);
	if (w->scores != NULL)
		fclose(w->scores);
}

/* Worker k: a shallow copy of the main context (config and groups
 * shared, read-only apart from its own groups) with its own buffers. */
static int jobs_worker_init(struct replay_jobs *j, unsigned k)
{
	struct replay *m = j->main, *w = &j->w[k];
	size_t i, maxp = 1;

	*w = *m;
	w->wid = k;
	w->jobs = j;
	w->readings = w->csv_bad = w->unknown_topic = w->events_dropped = 0;
	w->parked = 0;
	w->cut = 0;
	w->progress = m->progress && k == 0;
	for (i = 0; i < m->cfg.ngroups; i++)
		if (m->cfg.groups[i].p > maxp)
			maxp = m->cfg.groups[i].p;
	w->alert_buf = malloc(RP_ALERT_MAX);
	w->batch = malloc(m->batch_len * sizeof *w->batch);
	w->map = calloc(m->cfg.ngroups + 1, sizeof *w->map);
	w->scratch_idx = calloc(maxp, sizeof *w->scratch_idx);
	w->ev_keys = calloc(RP_EVENTS_MAX, sizeof *w->ev_keys);
	w->events = json_array();
	w->scores = NULL;
	if (w->alert_buf == NULL || w->batch == NULL || w->map == NULL ||
	    w->scratch_idx == NULL || w->ev_keys == NULL || w->events == NULL)
		return QW_ERROR(QW_ENOMEM);
	if (m->scores != NULL) {
		w->scores = tmpfile();
		if (w->scores == NULL)
			return QW_ERROR(QW_EIO);
		setvbuf(w->scores, NULL, _IOFBF, RP_SCORES_BUF);
	}
	return 0;
}

static void *jobs_run(void *arg)
{
	struct replay *w = arg;
	int i, rc = 0;

	for (i = 0; rc == 0 && i < w->o.ninputs; i++) {
		w->cur_done = 0; /* of input i, for the pace */
		if (qw_replay_stop(w, (uint64_t)i << RP_KEY_INPUT_SHIFT))
			break;
		w->input = (unsigned)i;
		rc = qw_replay_input(w, w->o.inputs[i]);
	}
	/* Done (or failed): nobody waits for this worker to park. */
	if (!w->parked)
		jobs_park(w, RP_POS_END);
	qw_replay_jobs_publish(w);
	w->jobs->rc[w->wid] = rc;
	return NULL;
}

/* Reads worker k's next tagged row into buf (RP_JOBS_ROW_MAX); 1, 0 at
 * its end, -1 on a read error. */
static int jobs_next(FILE *f, struct jobs_head *h, char *buf)
{
	if (fread(h, sizeof *h, 1, f) != 1)
		return ferror(f) ? -1 : 0;
	if (h->len > RP_JOBS_ROW_MAX || fread(buf, 1, h->len, f) != h->len)
		return -1;
	return 1;
}

/* The workers' rows into the --scores file, in serial order. */
static int jobs_merge_scores(struct replay_jobs *j)
{
	struct jobs_head *h = calloc(j->n, sizeof *h);
	char *buf = malloc((size_t)j->n * RP_JOBS_ROW_MAX);
	int *live = calloc(j->n, sizeof *live), rc = 0;
	unsigned k;

	if (h == NULL || buf == NULL || live == NULL) {
		rc = QW_ERROR(QW_ENOMEM);
		goto out;
	}
	for (k = 0; k < j->n; k++) {
		if (fflush(j->w[k].scores) != 0 || ferror(j->w[k].scores))
			rc = QW_ERROR(QW_EIO);
		rewind(j->w[k].scores);
		live[k] = jobs_next(j->w[k].scores, &h[k],
				    buf + (size_t)k * RP_JOBS_ROW_MAX);
	}
	while (rc == 0) {
		unsigned best = j->n;
		struct replay_key kb = {0, 0}, kk;

		for (k = 0; k < j->n; k++) {
			if (live[k] < 0)
				rc = QW_ERROR(QW_EIO);
			if (live[k] != 1)
				continue;
			kk.pos = h[k].pos;
			kk.sub = h[k].sub;
			if (best == j->n || key_less(&kk, &kb)) {
				best = k;
				kb = kk;
			}
		}
		if (best == j->n || rc != 0)
			break;
		fwrite(buf + (size_t)best * RP_JOBS_ROW_MAX, 1, h[best].len,
		       j->main->scores);
		live[best] = jobs_next(j->w[best].scores, &h[best],
				       buf + (size_t)best * RP_JOBS_ROW_MAX);
	}
out:
	free(h);
	free(buf);
	free(live);
	return rc;
}

/* The workers' events into the main array, in serial order, the first
 * RP_EVENTS_MAX kept and the rest counted as a serial run would. */
static void jobs_merge_events(struct replay_jobs *j)
{
	struct replay *m = j->main;
	size_t *at = calloc(j->n, sizeof *at), total = 0;
	unsigned k;

	for (k = 0; k < j->n; k++)
		total += json_array_size(j->w[k].events) +
			 j->w[k].events_dropped;
	if (at == NULL) {
		m->events_dropped = total;
		return;
	}
	while (json_array_size(m->events) < RP_EVENTS_MAX) {
		unsigned best = j->n;

		for (k = 0; k < j->n; k++) {
			if (at[k] >= json_array_size(j->w[k].events))
				continue;
			if (best == j->n || key_less(&j->w[k].ev_keys[at[k]],
						     &j->w[best].ev_keys[at[best]]))
				best = k;
		}
		if (best == j->n)
			break;
		json_array_append(m->events,
				  json_array_get(j->w[best].events, at[best]));
		at[best]++;
	}
	m->events_dropped = total - json_array_size(m->events);
	free(at);
}

/* Counters and the progress state back into the main context. */
static void jobs_merge_counts(struct replay_jobs *j)
{
	struct replay *m = j->main;
	unsigned k;

	m->readings = 0;
	for (k = 0; k < j->n; k++)
		m->readings += j->w[k].readings;
	m->csv_bad = j->w[0].csv_bad;           /* every worker saw them */
	m->unknown_topic = j->w[0].unknown_topic;
	m->progress_shown = j->w[0].progress_shown;
}

int qw_replay_jobs(struct replay *rp)
{
	struct replay_jobs j;
	unsigned k, started = 0;
	int rc = 0;

	memset(&j, 0, sizeof j);
	j.main = rp;
	j.n = rp->o.jobs;
	j.w = calloc(j.n, sizeof *j.w);
	j.readings = calloc(j.n, sizeof *j.readings);
	j.at = calloc(j.n, sizeof *j.at);
	j.bytes = calloc(j.n, sizeof *j.bytes);
	j.th = calloc(j.n, sizeof *j.th);
	j.rc = calloc(j.n, sizeof *j.rc);
	atomic_init(&j.parked, 0);
	if (j.w == NULL || j.readings == NULL || j.at == NULL ||
	    j.bytes == NULL || j.th == NULL || j.rc == NULL)
		rc = QW_ERROR(QW_ENOMEM);
	if (rc == 0)
		jobs_assign(rp, j.n);
	for (k = 0; rc == 0 && k < j.n; k++)
		rc = jobs_worker_init(&j, k);
	for (k = 0; rc == 0 && k < j.n; k++, started++)
		if (pthread_create(&j.th[k], NULL, jobs_run, &j.w[k]) != 0)
			rc = QW_ERROR(QW_ENOMEM);
	/* Workers that never started count as done, so no parked one
	 * waits for them. */
	for (k = started; j.at != NULL && k < j.n; k++) {
		atomic_store(&j.at[k], RP_POS_END);
		atomic_fetch_add(&j.parked, 1);
	}
	for (k = 0; k < started; k++)
		pthread_join(j.th[k], NULL);
	if (rc != 0) {
		fprintf(stderr, "quadwatch replay: -j %u: %s\n", j.n,
			qw_strerror(rc));
		rc = QW_EXIT_FAIL;
	}
	for (k = 0; rc == 0 && k < j.n; k++)
		rc = j.rc[k]; /* the first worker's message was printed */
	if (rc == 0) {
		jobs_merge_counts(&j);
		jobs_merge_events(&j);
		if (rp->scores != NULL && jobs_merge_scores(&j) != 0) {
			qw_log_errno(QW_LOG_ERROR, "--scores %s", rp->o.scores);
			rc = QW_EXIT_FAIL;
		}
	}
	for (k = 0; j.w != NULL && k < j.n; k++)
		if (j.w[k].wid == k && j.w[k].jobs == &j)
			jobs_worker_free(&j.w[k]);
	free(j.w);
	free(j.readings);
	free(j.at);
	free(j.bytes);
	free(j.th);
	free(j.rc);
	return rc;
}
