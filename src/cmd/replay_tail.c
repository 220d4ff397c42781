/* replay_tail.c: `quadwatch replay -j N` with one group, on two threads.
 *
 * One group's readings depend on each other, so they cannot be shared
 * out (replay_jobs.c shares groups); but after the detector has scored a
 * reading, its p-value (a GSL F tail, the larger half of the cost per
 * reading), the point kept for the summary and the --scores row depend
 * on that reading alone.  The playing thread hands them over in blocks of
 * TAIL_BLOCK readings through a ring of TAIL_BLOCKS blocks (a mutex and
 * two condition variables, one hand-over per block); the tail thread
 * takes the blocks in order and does exactly what qw_replay_scored_block
 * does in a serial run, so the points and rows are the same, in the same
 * order.  The playing thread waits when the ring is full.
 *
 * Memory: TAIL_BLOCKS * TAIL_BLOCK struct replay_scored (~5 MB). */
#include <pthread.h>
#include <stdlib.h>

#include "replay.h"

#define TAIL_BLOCK 4096  /* readings per hand-over */
#define TAIL_BLOCKS 16   /* blocks in the ring */

struct replay_tail {
	struct replay *rp;
	pthread_t th;
	pthread_mutex_t mu;
	pthread_cond_t filled, emptied;
	struct replay_scored *ring; /* TAIL_BLOCKS * TAIL_BLOCK */
	size_t len[TAIL_BLOCKS];    /* readings in each handed-over block */
	size_t head, tail;          /* blocks handed over, blocks done */
	size_t fill;                /* readings in the block being filled */
	int done;                   /* no more blocks will come */
};

static void *tail_run(void *arg)
{
	struct replay_tail *tl = arg;

	for (;;) {
		struct replay_scored *b;
		size_t n;

		pthread_mutex_lock(&tl->mu);
		while (tl->tail == tl->head && !tl->done)
			pthread_cond_wait(&tl->filled, &tl->mu);
		if (tl->tail == tl->head) {
			pthread_mutex_unlock(&tl->mu);
			return NULL;
		}
		b = tl->ring + (tl->tail % TAIL_BLOCKS) * TAIL_BLOCK;
		n = tl->len[tl->tail % TAIL_BLOCKS];
		pthread_mutex_unlock(&tl->mu);
		qw_replay_scored_block(tl->rp, b, n);
		pthread_mutex_lock(&tl->mu);
		tl->tail++;
		pthread_cond_signal(&tl->emptied);
		pthread_mutex_unlock(&tl->mu);
	}
}

int qw_replay_tail_start(struct replay *rp)
{
	struct replay_tail *tl = calloc(1, sizeof *tl);

	if (tl == NULL)
		return QW_ERROR(QW_ENOMEM);
	tl->rp = rp;
	tl->ring = malloc((size_t)TAIL_BLOCKS * TAIL_BLOCK * sizeof *tl->ring);
	if (tl->ring == NULL)
		goto fail;
	if (pthread_mutex_init(&tl->mu, NULL) != 0)
		goto fail;
	if (pthread_cond_init(&tl->filled, NULL) != 0)
		goto fail_mu;
	if (pthread_cond_init(&tl->emptied, NULL) != 0)
		goto fail_filled;
	if (pthread_create(&tl->th, NULL, tail_run, tl) != 0)
		goto fail_emptied;
	rp->tail = tl;
	return 0;
fail_emptied:
	pthread_cond_destroy(&tl->emptied);
fail_filled:
	pthread_cond_destroy(&tl->filled);
fail_mu:
	pthread_mutex_destroy(&tl->mu);
fail:
	free(tl->ring);
	free(tl);
	return QW_ERROR(QW_ENOMEM);
}

/* Hands the block being filled over to the tail thread. */
static void tail_hand_over(struct replay_tail *tl)
{
	pthread_mutex_lock(&tl->mu);
	tl->len[tl->head % TAIL_BLOCKS] = tl->fill;
	tl->head++;
	tl->fill = 0;
	pthread_cond_signal(&tl->filled);
	while (tl->head - tl->tail == TAIL_BLOCKS) /* ring full: wait */
		pthread_cond_wait(&tl->emptied, &tl->mu);
	pthread_mutex_unlock(&tl->mu);
}

void qw_replay_tail_put(struct replay_tail *tl, const struct replay_scored *r)
{
	/* the block at head is ours alone until it is handed over */
	tl->ring[(tl->head % TAIL_BLOCKS) * TAIL_BLOCK + tl->fill++] = *r;
	if (tl->fill == TAIL_BLOCK)
		tail_hand_over(tl);
}

void qw_replay_tail_finish(struct replay *rp)
{
	struct replay_tail *tl = rp->tail;

	if (tl == NULL)
		return;
	if (tl->fill > 0)
		tail_hand_over(tl);
	pthread_mutex_lock(&tl->mu);
	tl->done = 1;
	pthread_cond_signal(&tl->filled);
	pthread_mutex_unlock(&tl->mu);
	pthread_join(tl->th, NULL);
	pthread_cond_destroy(&tl->filled);
	pthread_cond_destroy(&tl->emptied);
	pthread_mutex_destroy(&tl->mu);
	free(tl->ring);
	free(tl);
	rp->tail = NULL;
}
