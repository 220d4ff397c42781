/* sim.h: what the two files of `quadwatch sim` share (sim.c: options,
 * config, scenario and CSV; sim_bus.c: publishing on the bus). */
#ifndef QW_SIM_H
#define QW_SIM_H

#include <signal.h>
#include <stddef.h>
#include <stdint.h>

#include "config.h"
#include "scenario.h"

#define SIM_MAX_FAULTS 256     /* faults in a --faults file */

struct sim_opts {
	const char *conf, *to, *out, *faults, *scenario;
	const char *key, *server_key; /* CURVE: --key, --server-key files */
	double rate, start, wait;
	uint64_t count, seed, batch;
	int format, quiet;
};

/* Everything the loop needs, allocated before it. */
struct sim {
	struct sim_opts o;
	volatile sig_atomic_t *stop; /* set by SIGINT/SIGTERM */
	struct qw_config cfg;
	unsigned *map;            /* per group, per channel: plant index */
	size_t *off;              /* per group: first index into map */
	size_t nch;               /* channels over all groups */
	size_t pmax;              /* channels of the largest group */
	struct qw_scn_fault faults[SIM_MAX_FAULTS];
	size_t nfaults;
	double dt;                /* s between readings (data time) */
	int64_t start_ns, dt_ns;  /* the same in ns, exact */
	qw_scn *scn;
	double *t, *x;            /* per group: batch times, batch x pmax */
	unsigned char *on;        /* per fault: active on the last reading */
	uint64_t *seq;            /* per group */
	unsigned char *buf;       /* encoded frame */
	size_t buf_cap;
};

/* Whether group g of the config holds plant channel c. */
int qw_sim_group_has(const struct sim *sm, size_t g, unsigned c);
/* Publishes the run on the bus (sim_bus.c); returns the exit code. */
int qw_sim_bus(struct sim *sm);

#endif
