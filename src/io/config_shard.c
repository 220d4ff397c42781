/* config_shard.c: which groups of a configuration this daemon owns, so
 * that one plant's configuration can be split across several daemons
 * (see quadwatch.ini(5) "[bus] groups" and docs/operations.md "Sharding").
 *
 * The selection is a comma-separated list of group names, from the [bus]
 * key `groups` or, replacing it, from the command line (`run -g`, `check
 * -g`).  It is applied once the whole file has been read (a [group]
 * section may follow [bus]): every name must be a [group NAME] section of
 * the file, each at most once; the groups not named are then dropped from
 * cfg->groups (their memory freed), so the daemon subscribes to, allocates
 * and reports only the groups it owns.  The groups kept stay in file
 * order.  Without a selection every group is owned.
 *
 * Workload: up to QW_CONFIG_MAX_GROUPS names against as many groups, at
 * start and on reload; the quadratic lookup is about 10^6 short string
 * compares at worst, a few milliseconds. */
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "config_int.h"

#define SHARD_KEY "groups"  /* the [bus] key */
#define SHARD_OPTION "-g"   /* the command-line option, in messages */

int cfg_bus_groups(struct cfg_parse *ps, const char *v)
{
	size_t n = cfg_count(v);

	if (n == 0)
		return cfg_bad(ps, "expected a comma-separated list of group "
				   "names (leave the key out to own every "
				   "group)");
	if (n > QW_CONFIG_MAX_GROUPS)
		return cfg_bad(ps, "expected at most %d group names, got %zu",
			       QW_CONFIG_MAX_GROUPS, n);
	free(ps->owned);
	ps->owned = strdup(v);
	if (ps->owned == NULL)
		return cfg_fail(ps, QW_ERROR(QW_ENOMEM), ps->key_at, ps->key,
				"out of memory");
	ps->owned_line = ps->key_at;
	return 0;
}

/* The groups of the file, "a, b, c", cut to fit cap (with "..."). */
static void shard_names(const struct qw_config *c, char *buf, size_t cap)
{
	size_t i, off = 0;
	int n;

	buf[0] = '\0';
	for (i = 0; i < c->ngroups; i++) {
		n = snprintf(buf + off, cap - off, "%s%s", i ? ", " : "",
			     c->groups[i].name);
		if (n < 0 || (size_t)n >= cap - off) {
			if (cap > 4)
				memcpy(buf + cap - 4, "...", 4);
			return;
		}
		off += (size_t)n;
	}
}

/* Records an error about the selection: at the [bus] key's line when it
 * came from the file, else naming the command-line option. */
static int shard_fail(struct cfg_parse *ps, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));
static int shard_fail(struct cfg_parse *ps, const char *fmt, ...)
{
	char msg[QW_CONFIG_ERR_MAX / 2];
	va_list ap;

	va_start(ap, fmt);
	vsnprintf(msg, sizeof msg, fmt, ap);
	va_end(ap);
	if (ps->owned_cli == NULL) {
		snprintf(ps->secname, sizeof ps->secname, "bus");
		return cfg_fail(ps, QW_ERROR(QW_EFORMAT), ps->owned_line,
				SHARD_KEY, "%s", msg);
	}
	ps->rc = QW_ERROR(QW_EFORMAT);
	if (ps->err != NULL && ps->errlen > 0)
		snprintf(ps->err, ps->errlen, "%s: %s: %s", ps->file,
			 SHARD_OPTION, msg);
	return ps->rc;
}

/* Marks in keep[] the groups the list names; 0 or an error recorded. */
static int shard_mark(struct cfg_parse *ps, const char *list,
		      unsigned char *keep)
{
	struct qw_config *c = ps->cfg;
	char names[QW_CONFIG_ERR_MAX / 4];
	const char *item;
	size_t len, i, k = 0;

	if (cfg_count(list) == 0)
		return shard_fail(ps, "expected a comma-separated list of "
				      "group names, got nothing");
	while (cfg_item(&list, &item, &len)) {
		k++;
		if (len == 0)
			return shard_fail(ps, "expected a group name, got an "
					      "empty item (item %zu)", k);
		for (i = 0; i < c->ngroups; i++)
			if (strlen(c->groups[i].name) == len &&
			    memcmp(c->groups[i].name, item, len) == 0)
				break;
		if (i == c->ngroups) {
			shard_names(c, names, sizeof names);
			return shard_fail(ps, "expected names of [group "
					      "NAME] sections of this file; "
					      "'%.*s' is not one (groups: %s)",
					  (int)(len < QW_CONFIG_NAME_MAX
						? len : QW_CONFIG_NAME_MAX),
					  item, names);
		}
		if (keep[i])
			return shard_fail(ps, "expected each group once; '%s' "
					      "is listed twice",
					  c->groups[i].name);
		keep[i] = 1;
	}
	return 0;
}

int cfg_owned_apply(struct cfg_parse *ps)
{
	struct qw_config *c = ps->cfg;
	const char *list = ps->owned_cli != NULL ? ps->owned_cli : ps->owned;
	unsigned char *keep;
	size_t i, n = 0;
	int rc;

	c->ngroups_file = c->ngroups;
	if (list == NULL || ps->rc != 0)
		return ps->rc;
	keep = calloc(c->ngroups, 1);
	if (keep == NULL)
		return cfg_fail(ps, QW_ERROR(QW_ENOMEM), ps->line, NULL,
				"out of memory");
	rc = shard_mark(ps, list, keep);
	for (i = 0; rc == 0 && i < c->ngroups; i++) {
		if (!keep[i]) { /* what qw_config_free frees of a group */
			free(c->groups[i].channels);
			free(c->groups[i].floor);
			continue;
		}
		if (n != i)
			c->groups[n] = c->groups[i];
		n++;
	}
	if (rc == 0) {
		c->ngroups = n;
		c->groups_line = ps->owned_cli != NULL ? 0 : ps->owned_line;
		c->groups_cli = ps->owned_cli != NULL;
	}
	free(keep);
	return rc;
}
