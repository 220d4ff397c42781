/* bench_pub.c: the publisher of the bus benchmark (tools/bench_bus.py).
 *
 *   bench_pub ENDPOINT P BATCH READINGS SUBSCRIBERS [GROUPS]
 *
 * Binds an XPUB socket on ENDPOINT, waits until SUBSCRIBERS distinct
 * subscriptions have arrived, then sends READINGS readings of P channels
 * on topic "bench" (or, with GROUPS > 1, round robin over the topics
 * "bench000", "bench001", ..., one frame each in turn, each topic with
 * its own seq) as binary frames of BATCH readings, as fast as the
 * slowest subscriber takes them (ZMQ_XPUB_NODROP: nothing is dropped, a
 * full queue makes the send wait).  Frames are encoded once (a pool of BENCH_POOL frames of
 * Gaussian data with a fixed seed); only the seq field changes per frame,
 * so the publisher costs one zmq_send per frame.  Prints what it sent and
 * how fast.  No verdicts: numbers only. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "bus.h"
#include "log.h"
#include "num.h"
#include "quadwatch.h"
#include "wire.h"

#define BENCH_POOL 64          /* distinct frames cycled */
#define BENCH_SEQ_OFF 16       /* bytes: offset of seq in the QWB1 header */
#define BENCH_SETTLE_S 0.3     /* s after the last subscription, so every
				  connection is up before the clock starts */
#define BENCH_WAIT_MS 30000    /* ms: longest wait for subscribers */
#define BENCH_GROUPS_MAX 1000  /* topics: "bench%03u" stays 8 bytes */
#define BENCH_SUBS_MAX 4096    /* subscriptions waited for: a daemon
				  sends one per group */

/* Standard normal by Box-Muller from a 64-bit LCG (Knuth's MMIX
 * constants): fixed, portable, good enough for load generation. */
static double bench_normal(uint64_t *s)
{
	double u1, u2;

	*s = *s * 6364136223846793005ULL + 1442695040888963407ULL;
	u1 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0; /* 2^53 */
	*s = *s * 6364136223846793005ULL + 1442695040888963407ULL;
	u2 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
	return sqrt(-2.0 * log(u1)) * cos(6.283185307179586 * u2);
}

/* The seq field, little endian as the wire format says. */
static void bench_put_seq(unsigned char *frame, uint64_t seq)
{
	int i;

	for (i = 0; i < 8; i++)
		frame[BENCH_SEQ_OFF + i] = (unsigned char)(seq >> (8 * i));
}

static int bench_pool(unsigned char **pool, size_t len, size_t p, size_t n)
{
	double *t = malloc(n * sizeof *t), *x = malloc(n * p * sizeof *x);
	uint64_t s = 2385;
	size_t f, i, j;
	int rc = 0;

	for (f = 0; rc == 0 && t != NULL && x != NULL && f < BENCH_POOL; f++) {
		for (i = 0; i < n; i++) {
			double load = bench_normal(&s);

			t[i] = 1.7e9 + 0.001 * (double)(f * n + i);
			for (j = 0; j < p; j++)
				x[i * p + j] = 10.0 + (double)j + load *
					       (0.5 + 0.1 * (double)j) +
					       0.05 * bench_normal(&s);
		}
		pool[f] = malloc(len);
		if (pool[f] == NULL ||
		    qw_wire_encode_binary(pool[f], len, p, n, 0, t, x) != len)
			rc = -1;
	}
	if (t == NULL || x == NULL)
		rc = -1;
	free(t);
	free(x);
	return rc;
}

static int bench_wait_subs(qw_bus_sock *s, unsigned want)
{
	unsigned char body[1];
	struct qw_bus_msg m;
	unsigned got = 0;
	double end = qw_log_monotonic() + BENCH_WAIT_MS / 1e3;

	memset(&m, 0, sizeof m);
	m.body = body;
	m.body_cap = sizeof body;
	while (got < want && qw_log_monotonic() < end)
		if (qw_bus_recv(s, &m, 0) == 0 && m.head_len > 0 &&
		    m.head[0] == 1)
			got++;
	return got == want ? 0 : -1;
}

static int bench_send(qw_bus_sock *s, unsigned char **pool, size_t len,
		      size_t n, uint64_t readings, unsigned groups)
{
	static uint64_t gseq[BENCH_GROUPS_MAX]; /* next seq per topic */
	char topic[16] = "bench";
	double t0, secs;
	uint64_t seq;
	size_t f = 0, tlen = 5;
	unsigned g = 0;
	struct timespec settle = {0, (long)(BENCH_SETTLE_S * 1e9)};

	nanosleep(&settle, NULL);
	t0 = qw_log_monotonic();
	for (seq = 0; seq + n <= readings; seq += n) {
		if (groups > 1)
			tlen = (size_t)snprintf(topic, sizeof topic,
						"bench%03u", g);
		bench_put_seq(pool[f], gseq[g]);
		if (qw_bus_send(s, topic, tlen, pool[f], len, 0) != 0)
			return -1;
		gseq[g] += n;
		g = (g + 1) % groups;
		f = (f + 1) % BENCH_POOL;
	}
	secs = qw_log_monotonic() - t0;
	printf("sent %llu readings in %.3f s: %.0f readings/s\n",
	       (unsigned long long)seq, secs, (double)seq / secs);
	return 0;
}

int main(int argc, char **argv)
{
	uint64_t p, n, readings, subs, groups = 1;
	struct qw_endpoint ep;
	struct qw_bus_opts o;
	unsigned char *pool[BENCH_POOL] = {0};
	qw_bus *bus = NULL;
	qw_bus_sock *s = NULL;
	size_t len, i;
	int rc = 1;

	if (argc < 6 || argc > 7 || qw_bus_endpoint_parse(argv[1], 1, &ep) ||
	    qw_num_u64(argv[2], (size_t)-1, 1, QW_MAX_P, &p) ||
	    qw_num_u64(argv[3], (size_t)-1, 1, 1u << 16, &n) ||
	    qw_num_u64(argv[4], (size_t)-1, 1, UINT64_MAX / 2, &readings) ||
	    qw_num_u64(argv[5], (size_t)-1, 1, BENCH_SUBS_MAX, &subs) ||
	    (argc == 7 && qw_num_u64(argv[6], (size_t)-1, 1, BENCH_GROUPS_MAX,
				     &groups))) {
		fprintf(stderr, "usage: bench_pub ENDPOINT P BATCH READINGS "
			"SUBSCRIBERS [GROUPS]\n");
		return 2;
	}
	len = qw_wire_binary_len(p, n);
	bus = qw_bus_alloc();
	qw_bus_opts_default(&o);
	o.linger_ms = 2000; /* let the last frames leave */
	o.xpub_nodrop = 1;  /* lossless: send waits for the subscriber */
	if (bus == NULL || bench_pool(pool, len, p, n) != 0 ||
	    qw_bus_open(bus, QW_BUS_XPUB, &ep, &o, &s) != 0)
		fprintf(stderr, "bench_pub: %s\n", qw_bus_strerror());
	else if (bench_wait_subs(s, (unsigned)subs) != 0)
		fprintf(stderr, "bench_pub: subscribers did not come\n");
	else
		rc = bench_send(s, pool, len, n, readings,
				(unsigned)groups) == 0 ? 0 : 1;
	qw_bus_close(s);
	qw_bus_free(bus);
	for (i = 0; i < BENCH_POOL; i++)
		free(pool[i]);
	return rc;
}
