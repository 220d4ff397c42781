/* alert.h: the alert and stats JSON objects published on the alert socket
 * (frame 1 "alert.GROUP" or "stats", frame 2 this JSON).  Alert fields:
 * group, time, event ("raise"|"clear"), score, limit, pvalue, dof,
 * channels: [{name, drop, z}] ranked by drop. */
#ifndef QW_ALERT_H
#define QW_ALERT_H

#include <stddef.h>

#include "quadwatch.h"

#define QW_ALERT_TOPIC_PREFIX "alert."
#define QW_ALERT_MAX_CHANNELS 16 /* channels listed in an alert */

struct qw_alert {
	const char *group;
	double time;         /* seconds (the reading's own time) */
	int event;           /* QW_EVENT_RAISE or QW_EVENT_CLEAR */
	double score;        /* q */
	double limit;
	double pvalue;
	unsigned dof;
	size_t ncontrib;     /* entries in contrib */
	const struct qw_contrib *contrib; /* ranked */
	const char (*names)[64]; /* the group's channel names by index */
};

/* Writes the JSON object (no newline, NUL-terminated) into buf; returns
 * its length, or 0 if cap is too small, event is not raise/clear, a name is
 * not UTF-8, or memory ran out.  Non-finite numbers are written as null;
 * at most QW_ALERT_MAX_CHANNELS channels are listed. */
size_t qw_alert_encode(char *buf, size_t cap, const struct qw_alert *a);

/* Parsed form for tail and tests; names are copied into the struct's own
 * arrays (nothing to free).  null numbers read as NaN; unknown keys are
 * ignored; channels past QW_ALERT_MAX_CHANNELS are dropped. */
struct qw_alert_parsed {
	char group[64];
	double time, score, limit, pvalue;
	unsigned dof;
	int event;
	size_t nchan;
	char chan[QW_ALERT_MAX_CHANNELS][64];
	double drop[QW_ALERT_MAX_CHANNELS], z[QW_ALERT_MAX_CHANNELS];
};
/* 0 or QW_EFORMAT. */
int qw_alert_decode(const char *json, size_t len, struct qw_alert_parsed *a);

#endif
