/* verdict.h: one detector result -> the alert the daemon publishes.
 *
 * The daemon (`quadwatch run`) and `quadwatch replay` both turn a
 * qw_detector_add result into a struct qw_alert through this one function,
 * so the p-value, the channel cap and the names of an alert cannot differ
 * between the live run and a replay of the same readings.  Both also size
 * their decode buffers here. */
#ifndef QW_VERDICT_H
#define QW_VERDICT_H

#include "alert.h"
#include "config.h"
#include "quadwatch.h"

/* Fills *a from group g's configuration, the reading's time t (seconds)
 * and the detector's result res for that reading: group name, time,
 * event, score q, limit, pvalue (qw_limit_pvalue on q, dof, nu, scale),
 * dof, and at most QW_ALERT_MAX_CHANNELS ranked channels.  *a then points
 * into g (names) and res (contrib): valid until the next qw_detector_add
 * on that group or until g is freed.  Nothing is allocated. */
void qw_verdict_fill(struct qw_alert *a, const struct qw_group_conf *g,
		     double t, const struct qw_result *res);

/* Doubles of the one decode buffer that holds any binary frame (up to
 * max_frame) for any group of c: qw_wire_buffer_len maximised over the
 * groups.  The daemon and replay size their buffers with it. */
size_t qw_verdict_buffer_len(const struct qw_config *c);

#endif
