/* alert.c: the alert JSON object, struct <-> bytes (see alert.h and
 * DESIGN.md, "Wire format").
 *
 * Encoding and decoding both go through jansson, so names are escaped and
 * checked as UTF-8 and numbers print with 17 significant digits (an exact
 * round trip).  JSON has no NaN or Inf: non-finite numbers are written as
 * null and read back as NaN.  Key order on output is group, time, event,
 * score, limit, pvalue, dof, channels.
 *
 * Workload: one object per raised or cleared alarm, which is rare by
 * design (the configured alarms per day); allocation here is harmless.
 * (jansson 2.14 can misread a number when it runs out of memory mid-parse;
 * see wire.c.) */
#include "alert.h"

#include <jansson.h>
#include <limits.h>
#include <math.h>
#include <string.h>

#define ALERT_NAME_MAX 64 /* bytes in a name field, with its NUL (the
			     group and channel arrays of alert.h) */
#define ALERT_DUMP_FLAGS (JSON_COMPACT | JSON_REAL_PRECISION(17))

static const char *alert_event_name(int event)
{
	switch (event) {
	case QW_EVENT_RAISE: return "raise";
	case QW_EVENT_CLEAR: return "clear";
	}
	return NULL;
}

/* A number, or null when non-finite.  NULL only when out of memory. */
static json_t *alert_number(double v)
{
	return isfinite(v) ? json_real(v) : json_null();
}

/* Sets obj[key] = v, taking v's reference; 0 or -1 (v NULL or no memory). */
static int alert_set(json_t *obj, const char *key, json_t *v)
{
	return v == NULL ? -1 : json_object_set_new(obj, key, v);
}

/* The ranked channel list, at most QW_ALERT_MAX_CHANNELS long. */
static json_t *alert_channels(const struct qw_alert *a)
{
	json_t *arr = json_array(), *c;
	size_t i, n = a->ncontrib;

	if (arr == NULL)
		return NULL;
	if (n > QW_ALERT_MAX_CHANNELS)
		n = QW_ALERT_MAX_CHANNELS;
	for (i = 0; i < n; i++) {
		const char *name = a->names[a->contrib[i].channel];

		c = json_object();
		if (c == NULL ||
		    alert_set(c, "name", json_stringn(name, strnlen(name,
						ALERT_NAME_MAX))) != 0 ||
		    alert_set(c, "drop", alert_number(a->contrib[i].drop)) ||
		    alert_set(c, "z", alert_number(a->contrib[i].z)) ||
		    json_array_append_new(arr, c) != 0) {
			json_decref(c);
			json_decref(arr);
			return NULL;
		}
	}
	return arr;
}

static json_t *alert_object(const struct qw_alert *a)
{
	const char *event = alert_event_name(a->event);
	json_t *o;

	if (event == NULL || a->group == NULL ||
	    (a->ncontrib > 0 && (a->contrib == NULL || a->names == NULL)))
		return NULL;
	o = json_object();
	if (o == NULL)
		return NULL;
	if (alert_set(o, "group", json_string(a->group)) ||
	    alert_set(o, "time", alert_number(a->time)) ||
	    alert_set(o, "event", json_string(event)) ||
	    alert_set(o, "score", alert_number(a->score)) ||
	    alert_set(o, "limit", alert_number(a->limit)) ||
	    alert_set(o, "pvalue", alert_number(a->pvalue)) ||
	    alert_set(o, "dof", json_integer((json_int_t)a->dof)) ||
	    alert_set(o, "channels", alert_channels(a))) {
		json_decref(o);
		return NULL;
	}
	return o;
}

size_t qw_alert_encode(char *buf, size_t cap, const struct qw_alert *a)
{
	json_t *o = alert_object(a);
	size_t n;

	if (o == NULL)
		return 0;
	n = json_dumpb(o, buf, cap, ALERT_DUMP_FLAGS);
	json_decref(o);
	if (n == 0 || n >= cap)
		return 0; /* too small (json_dumpb reports the size needed) */
	buf[n] = '\0';
	return n;
}

/* ---- decode -------------------------------------------------------------- */

/* Copies a JSON string of at most ALERT_NAME_MAX - 1 bytes without NULs. */
static int alert_get_name(json_t *obj, const char *key, char *out)
{
	json_t *v = json_object_get(obj, key);
	size_t len;

	if (!json_is_string(v))
		return QW_ERROR(QW_EFORMAT);
	len = json_string_length(v);
	if (len >= ALERT_NAME_MAX || memchr(json_string_value(v), '\0', len))
		return QW_ERROR(QW_EFORMAT);
	memcpy(out, json_string_value(v), len);
	out[len] = '\0';
	return 0;
}

/* A number, or null -> NaN; anything else (or absent) is QW_EFORMAT. */
static int alert_get_number(json_t *obj, const char *key, double *out)
{
	json_t *v = json_object_get(obj, key);

	if (json_is_null(v))
		*out = NAN;
	else if (json_is_number(v))
		*out = json_number_value(v);
	else
		return QW_ERROR(QW_EFORMAT);
	return 0;
}

/* The channel list; entries past QW_ALERT_MAX_CHANNELS are ignored. */
static int alert_get_channels(json_t *obj, struct qw_alert_parsed *a)
{
	json_t *arr = json_object_get(obj, "channels"), *c;
	size_t i;

	if (!json_is_array(arr))
		return QW_ERROR(QW_EFORMAT);
	a->nchan = 0;
	json_array_foreach(arr, i, c) {
		if (i >= QW_ALERT_MAX_CHANNELS)
			break;
		if (!json_is_object(c) ||
		    alert_get_name(c, "name", a->chan[i]) != 0 ||
		    alert_get_number(c, "drop", &a->drop[i]) != 0 ||
		    alert_get_number(c, "z", &a->z[i]) != 0)
			return QW_ERROR(QW_EFORMAT);
		a->nchan = i + 1;
	}
	return 0;
}

static int alert_parse(json_t *o, struct qw_alert_parsed *a)
{
	json_t *ev, *dof;
	const char *s;

	if (!json_is_object(o) || alert_get_name(o, "group", a->group) != 0 ||
	    alert_get_number(o, "time", &a->time) != 0 ||
	    alert_get_number(o, "score", &a->score) != 0 ||
	    alert_get_number(o, "limit", &a->limit) != 0 ||
	    alert_get_number(o, "pvalue", &a->pvalue) != 0)
		return QW_ERROR(QW_EFORMAT);
	ev = json_object_get(o, "event");
	s = json_string_value(ev); /* NULL unless a string */
	if (s != NULL && strcmp(s, "raise") == 0)
		a->event = QW_EVENT_RAISE;
	else if (s != NULL && strcmp(s, "clear") == 0)
		a->event = QW_EVENT_CLEAR;
	else
		return QW_ERROR(QW_EFORMAT);
	dof = json_object_get(o, "dof");
	if (!json_is_integer(dof) || json_integer_value(dof) < 0 ||
	    json_integer_value(dof) > UINT_MAX)
		return QW_ERROR(QW_EFORMAT);
	a->dof = (unsigned)json_integer_value(dof);
	return alert_get_channels(o, a);
}

int qw_alert_decode(const char *json, size_t len, struct qw_alert_parsed *a)
{
	json_error_t err;
	json_t *o;
	int rc;

	memset(a, 0, sizeof *a);
	o = json_loadb(json, len, JSON_REJECT_DUPLICATES, &err);
	if (o == NULL)
		return QW_ERROR(QW_EFORMAT);
	rc = alert_parse(o, a);
	json_decref(o);
	if (rc != 0)
		memset(a, 0, sizeof *a);
	return rc;
}
