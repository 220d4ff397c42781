/* bench_drain.c: the bare subscriber of the bus benchmark
 * (tools/bench_bus.py): what libzmq alone delivers, to set the daemon's
 * throughput beside.
 *
 *   bench_drain ENDPOINT BATCH IDLE_MS
 *
 * Connects a SUB socket to ENDPOINT subscribed to everything, counts
 * frames (BATCH readings each, not decoded: the bare cost of the bus) and
 * stops IDLE_MS after the last one.  Prints readings and the rate between
 * the first and the last frame. */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "bus.h"
#include "log.h"
#include "num.h"
#include "quadwatch.h"

#define DRAIN_BODY_MAX (1u << 20) /* bytes: larger than any bench frame */

int main(int argc, char **argv)
{
	uint64_t batch, idle, frames = 0;
	struct qw_endpoint ep;
	struct qw_bus_opts o;
	struct qw_bus_msg m;
	qw_bus *bus;
	qw_bus_sock *s = NULL;
	double first = 0, last = 0;

	if (argc != 4 || qw_bus_endpoint_parse(argv[1], 0, &ep) ||
	    qw_num_u64(argv[2], (size_t)-1, 1, 1u << 16, &batch) ||
	    qw_num_u64(argv[3], (size_t)-1, 1, 600000, &idle)) {
		fprintf(stderr, "usage: bench_drain ENDPOINT BATCH IDLE_MS\n");
		return 2;
	}
	memset(&m, 0, sizeof m);
	m.body_cap = DRAIN_BODY_MAX;
	m.body = malloc(m.body_cap);
	bus = qw_bus_alloc();
	qw_bus_opts_default(&o);
	o.rcvhwm = 10000; /* as the daemon's inputs (RUN_INPUT_HWM) */
	o.rcvtimeo_ms = (int)idle;
	if (m.body == NULL || bus == NULL ||
	    qw_bus_open(bus, QW_BUS_SUB, &ep, &o, &s) != 0 ||
	    qw_bus_subscribe(s, "", 1) != 0) {
		fprintf(stderr, "bench_drain: %s\n", qw_bus_strerror());
		return 1;
	}
	/* Wait as long as it takes for the first frame, then until idle. */
	while (frames == 0 || qw_log_monotonic() - last < (double)idle / 1e3) {
		if (qw_bus_recv(s, &m, 0) != 0)
			continue;
		last = qw_log_monotonic();
		if (frames++ == 0)
			first = last;
	}
	printf("drained %llu readings in %.3f s: %.0f readings/s\n",
	       (unsigned long long)(frames * batch), last - first,
	       last > first ? (double)(frames * batch) / (last - first) : 0.0);
	qw_bus_close(s);
	qw_bus_free(bus);
	free(m.body);
	return 0;
}
