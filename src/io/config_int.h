/* config_int.h: what config.c (the reader), config_bus.c ([bus], [state],
 * [security]), config_group.c ([group NAME]) and config_shard.c (the
 * groups owned) share.  Private to them. */
#ifndef QW_CONFIG_INT_H
#define QW_CONFIG_INT_H

#include <stddef.h>

#include "config.h"

#define CFG_KEYS_MAX 32       /* keys in the largest section table */
#define CFG_KEY_MAX 64        /* bytes in a key name as written */
#define CFG_SECTION_MAX 96    /* bytes in "group NAME" as written */

/* Per-group values as read, before the defaults are merged in; owned by the
 * parse until the section ends (see cfg_group_end). */
struct cfg_group_tmp {
	char name[QW_CONFIG_NAME_MAX];
	int line;                        /* of the section header */
	char (*channels)[QW_CONFIG_NAME_MAX];
	size_t p;                        /* entries in channels */
	double *floor;                   /* nfloor values as written */
	size_t nfloor;
	double half_life;                /* readings, or seconds if time_based */
	int time_based;
	double alarms_per_day, rate;
	double warmup;                   /* readings, or seconds if warmup_s */
	int warmup_s;
	unsigned k, m, clear_n;
	int learn;                       /* enum qw_learn */
	int partial;                     /* enum qw_partial */
	double relearn;                  /* readings, or seconds if relearn_s */
	int relearn_s;
	int correct;
	int dynamics;                    /* enum qw_dynamics */
	double max_gap;                  /* seconds */
	int mode;                        /* enum qw_mode */
	double smoothing;                /* MEWMA rho */
	char model[1024];                /* model file path as written */
	int model_use;                   /* enum qw_model_use */
};

struct cfg_parse {
	struct qw_config *cfg;
	const char *file;          /* name used in messages */
	const char *text;          /* the whole input */
	size_t len, pos;           /* bytes in text, next to read */
	int line;                  /* physical line last given to inih */
	int indented;              /* that line is a continuation candidate */
	int section;               /* enum cfg_section */
	char secname[CFG_SECTION_MAX]; /* as written, for messages */
	int sec_line[4];           /* first line of [bus] [state] [security]
				      [mqtt] */
	int key_line[CFG_KEYS_MAX];/* line each key of this section was set */
	/* the key being read; continuation lines append to its value */
	int have_key;
	char key[CFG_KEY_MAX];
	int key_cont;              /* continuation lines were appended */
	int key_at;                /* its first line */
	char *value;
	size_t vlen, vcap;
	struct cfg_group_tmp grp;  /* the [group NAME] being read */
	/* the groups this daemon owns (config_shard.c) */
	char *owned;               /* [bus] groups as written; NULL: unset */
	int owned_line;            /* its line */
	const char *owned_cli;     /* -g list, replaces owned; NULL: none */
	/* the first error */
	int rc;                    /* 0 or an enum qw_err */
	int err_line;
	char *err;
	size_t errlen;
};

enum cfg_section {
	CFG_SEC_NONE = 0,     /* before any header */
	CFG_SEC_BUS = 1,
	CFG_SEC_STATE = 2,
	CFG_SEC_SECURITY = 3,
	CFG_SEC_GROUP = 4,
	CFG_SEC_BAD = 5,      /* unknown header; its keys are ignored */
	CFG_SEC_MQTT = 6
};

/* A key of a section: its setter parses value and stores it. */
struct cfg_key {
	const char *name;
	int (*set)(struct cfg_parse *ps, const char *value);
	int list;             /* 1: a comma-separated list, may continue */
};

/* Records the first error as "FILE:LINE: [section] key: message" (key NULL:
 * "[section]: message"; no section: "FILE:LINE: message") and returns
 * code.  Later errors are dropped. */
int cfg_fail(struct cfg_parse *ps, int code, int line, const char *key,
	     const char *fmt, ...) __attribute__((format(printf, 5, 6)));
/* Error about the value of the key being read, at its first line. */
int cfg_bad(struct cfg_parse *ps, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));
/* Next comma-separated item of *s, blanks trimmed: 1 with *item and *len (len
 * 0 for an empty item), 0 when the list is done (*s is then NULL).  A blank
 * string is one empty item: ask cfg_count first. */
int cfg_item(const char **s, const char **item, size_t *len);
/* Counts the items of a list; 0 for a blank value. */
size_t cfg_count(const char *s);

/* config_bus.c: the key tables, ended by a NULL name */
extern const struct cfg_key cfg_bus_keys[];
extern const struct cfg_key cfg_state_keys[];
extern const struct cfg_key cfg_security_keys[];

/* config_shard.c: the [bus] groups setter (in cfg_bus_keys), and the
 * selection applied once the file is read: drops the groups not owned and
 * sets cfg->ngroups_file, groups_line, groups_cli.  0 or the error. */
int cfg_bus_groups(struct cfg_parse *ps, const char *value);
int cfg_owned_apply(struct cfg_parse *ps);

/* config_mqtt.c */
extern const struct cfg_key cfg_mqtt_keys[];
/* 1 when s[0..n) begins with mqtt:// or mqtts:// */
int cfg_is_mqtt(const char *s, size_t n);
/* One mqtt:// item of [bus] input into cfg->mqtt.inputs. */
int cfg_mqtt_input(struct cfg_parse *ps, const char *s, size_t n);
/* Defaults and checks across keys once the file is read; section_line is
 * the line of [mqtt] (0: absent). */
int cfg_mqtt_finish(struct cfg_parse *ps, int section_line);

/* config_group.c */
extern const struct cfg_key cfg_group_keys[];
/* Starts [group name] at line; checks the name and that it is new. */
int cfg_group_begin(struct cfg_parse *ps, const char *name, int line);
/* Merges the group read into cfg->groups (defaults, checks). */
int cfg_group_end(struct cfg_parse *ps);
/* Frees what a group being read holds (after an error). */
void cfg_group_drop(struct cfg_parse *ps);

#endif
