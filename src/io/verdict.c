/* verdict.c: the alert for one detector result, and the decode buffer
 * size, shared by the daemon and replay (see verdict.h).
 *
 * Shared by the daemon and replay so that both publish the same alert for
 * the same reading.  Workload: called once per raise or clear; the
 * p-value is one GSL F-distribution tail, a few microseconds. */
#include <string.h>

#include "verdict.h"
#include "wire.h"

void qw_verdict_fill(struct qw_alert *a, const struct qw_group_conf *g,
		     double t, const struct qw_result *res)
{
	memset(a, 0, sizeof *a);
	a->group = g->name;
	a->time = t;
	a->event = res->event;
	a->score = res->q;
	a->limit = res->limit;
	a->pvalue = qw_limit_pvalue(res->q, res->dof, res->nu, res->scale);
	a->dof = res->dof;
	a->ncontrib = res->ncontrib < QW_ALERT_MAX_CHANNELS
		      ? res->ncontrib : QW_ALERT_MAX_CHANNELS;
	a->contrib = res->contrib;
	a->names = (const char (*)[QW_CONFIG_NAME_MAX])g->channels;
}

size_t qw_verdict_buffer_len(const struct qw_config *c)
{
	size_t i, best = 0;

	for (i = 0; i < c->ngroups; i++) {
		size_t need = qw_wire_buffer_len(c->max_frame, c->groups[i].p);

		if (need > best)
			best = need;
	}
	return best;
}
