/* config.h: the ini configuration (inih) as a struct; see quadwatch.ini(5).
 * Every error names the file, the line and the key and says what was
 * expected; unknown sections and keys are errors. */
#ifndef QW_CONFIG_H
#define QW_CONFIG_H

#include <stddef.h>
#include <stdint.h>

#include "quadwatch.h"

#define QW_CONFIG_MAX_INPUTS 16   /* input endpoints in [bus] */
#define QW_CONFIG_MAX_GROUPS 1024 /* [group NAME] sections: 10^4 channels
				     at p = 16 is 625 (docs/operations.md) */
#define QW_CONFIG_NAME_MAX 64     /* bytes in a group or channel name */
#define QW_CONFIG_ENDPOINT_MAX 256/* bytes in an endpoint */
#define QW_CONFIG_ERR_MAX 512     /* bytes in an error message */

/* An endpoint as written: '@' binds, '>' connects, bare takes the socket's
 * default (inputs connect; alerts and control bind). */
struct qw_endpoint {
	char addr[QW_CONFIG_ENDPOINT_MAX]; /* without the @ or > */
	int bind;                          /* 1 bind, 0 connect */
};

struct qw_group_conf {
	char name[QW_CONFIG_NAME_MAX];  /* section name = topic */
	size_t p;                       /* channels */
	char (*channels)[QW_CONFIG_NAME_MAX]; /* p names, unique */
	double *floor;                  /* p floors (std dev, channel units);
					   0 = auto */
	struct qw_params params;        /* params.floor points at floor */
	int line;                       /* line of the section header */
	int half_life_line;             /* line of half_life; 0 = default */
};

struct qw_config {
	char path[1024];                /* the file read */
	struct qw_endpoint inputs[QW_CONFIG_MAX_INPUTS];
	size_t ninputs;                 /* >= 1 */
	struct qw_endpoint alerts;      /* PUB */
	struct qw_endpoint control;     /* REP; addr "" = no control socket */
	double stats_every;             /* seconds between stats; 0 = never */
	size_t max_frame;               /* bytes; larger frames are rejected */
	struct qw_group_conf *groups;   /* ngroups, in file order */
	size_t ngroups;                 /* >= 1 */
	char state_dir[1024];           /* "" = no checkpoints */
	double state_every;             /* seconds between checkpoints */
	/* [security]: CURVE; all "" when off (see docs/operations.md) */
	char server_key[1024];          /* secret key file of this daemon */
	char client_keys[1024];         /* directory of allowed public keys */
	char publisher_key[1024];       /* public key file of the publishers
					   that connecting inputs reach */
	/* [bus] groups or the -g option: the groups this daemon owns; the
	   others were dropped after reading (config_shard.c) */
	size_t ngroups_file;            /* [group] sections in the file */
	int groups_line;                /* line of [bus] groups; 0 = unset */
	int groups_cli;                 /* 1: the selection came from -g */
};

#define QW_CONFIG_DEFAULT_INPUT ">tcp://127.0.0.1:5601"
#define QW_CONFIG_DEFAULT_ALERTS "@tcp://127.0.0.1:5602"
#define QW_CONFIG_DEFAULT_CONTROL "@tcp://127.0.0.1:5603"
#define QW_CONFIG_DEFAULT_MAX_FRAME (4u << 20) /* bytes: 4 MiB */

/* Reads path into *cfg (zeroed first).  On error returns QW_EFORMAT (or
 * QW_EIO, QW_ENOMEM) and writes "FILE:LINE: [section] key: what was
 * expected" to err; *cfg is then empty and safe to free. */
int qw_config_load(const char *path, struct qw_config *cfg, char *err,
		   size_t errlen);
/* As qw_config_load; owned, when not NULL, is a comma-separated list of
 * group names that replaces the file's [bus] groups (the -g option of run
 * and check).  Each name must be a group of the file, else QW_EFORMAT
 * with "FILE: -g: ..." in err. */
int qw_config_load_owned(const char *path, const char *owned,
			 struct qw_config *cfg, char *err, size_t errlen);
/* The same from text in memory (NUL-terminated); name stands for the file
 * in messages and in cfg->path.  For tests and fuzzing. */
int qw_config_load_string(const char *text, const char *name,
			  struct qw_config *cfg, char *err, size_t errlen);
void qw_config_free(struct qw_config *cfg);
/* The group named name, or NULL. */
const struct qw_group_conf *qw_config_group(const struct qw_config *cfg,
					    const char *name);
/* 64-bit FNV-1a over what a learned model depends on: p and the channel
 * names in order.  Equal fingerprints: the model can be kept on reload. */
uint64_t qw_config_fingerprint(const struct qw_group_conf *g);

#endif
