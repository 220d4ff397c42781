/* config.h: the ini configuration (inih) as a struct; see quadwatch.ini(5).
 * Every error names the file, the line and the key and says what was
 * expected; unknown sections and keys are errors. */
#ifndef QW_CONFIG_H
#define QW_CONFIG_H

#include <stddef.h>
#include <stdint.h>

#include "quadwatch.h"

#define QW_CONFIG_MAX_INPUTS 16   /* input endpoints in [bus] */
#define QW_CONFIG_MAX_GROUPS 4096 /* [group NAME] sections: 10^4 channels
				     at p = 16 is 625 (docs/operations.md);
				     the daemon finds a topic by hash
				     (run_setup.c), replay by binary search */
#define QW_CONFIG_NAME_MAX 64     /* bytes in a group or channel name */
#define QW_CONFIG_ENDPOINT_MAX 256/* bytes in an endpoint */
#define QW_CONFIG_ERR_MAX 512     /* bytes in an error message */
#define QW_CONFIG_MAX_MQTT 8      /* mqtt:// inputs in [bus] input */
#define QW_CONFIG_TOPIC_MAX 256   /* bytes in an MQTT topic filter */
#define QW_CONFIG_SECRET_MAX 256  /* bytes in an MQTT user name or password */

/* An endpoint as written: '@' binds, '>' connects, bare takes the socket's
 * default (inputs connect; alerts and control bind). */
struct qw_endpoint {
	char addr[QW_CONFIG_ENDPOINT_MAX]; /* without the @ or > */
	int bind;                          /* 1 bind, 0 connect */
};

/* An MQTT address as written: mqtt://HOST[:PORT]/TOPIC, or mqtts:// for
 * TLS.  TOPIC has exactly one level that is '+': in an input filter it
 * matches the group name, in the alerts topic the group name replaces it
 * (see quadwatch.ini(5) and docs/wire-format.md "MQTT"). */
struct qw_mqtt_url {
	int tls;                           /* 1: mqtts:// */
	char host[QW_CONFIG_ENDPOINT_MAX]; /* name or address, no brackets */
	int port;                          /* 1..65535 */
	char topic[QW_CONFIG_TOPIC_MAX];   /* filter or alert topic */
	unsigned level;                    /* index of the '+' level, from 0 */
};

/* MQTT inputs and the [mqtt] section; ninputs 0 and has_alerts 0 = no
 * broker.  Every URL names the same broker (one connection). */
struct qw_mqtt_conf {
	struct qw_mqtt_url inputs[QW_CONFIG_MAX_MQTT];
	size_t ninputs;
	struct qw_mqtt_url alerts;         /* alerts published per group */
	int has_alerts;
	int qos;                           /* 0 or 1: subscriptions, alerts */
	char client_id[QW_CONFIG_NAME_MAX]; /* "" = random, clean session;
					     set = the broker keeps the
					     session across reconnects */
	double keepalive;                  /* s between pings when idle */
	double reconnect_min, reconnect_max; /* s: back-off, doubling */
	char ca_file[1024];                /* TLS: CA certificates (PEM);
					      "" = the system's store */
	char cert_file[1024], key_file[1024]; /* TLS client certificate */
	char credentials[1024];            /* file: user name, password */
	/* lines where keys were set, for errors found at the end; 0 = not
	   set */
	int line;                          /* of the first MQTT address */
	int input_line, alerts_line, ca_line, cert_line, key_line;
	int credentials_line;
	int reconnect_line;
};

/* model_use: how a group uses the model file of `quadwatch fit`. */
enum qw_model_use {
	QW_MODEL_FIXED = 0, /* frozen: Phase II against a fixed reference */
	QW_MODEL_WARM = 1   /* the adaptive model starts from it */
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
	char model[1024];               /* model file of quadwatch fit;
					   "" = learn from nothing */
	int model_use;                  /* enum qw_model_use */
};

struct qw_config {
	char path[1024];                /* the file read */
	struct qw_endpoint inputs[QW_CONFIG_MAX_INPUTS];
	size_t ninputs;                 /* ZeroMQ inputs: >= 1, or 0 when
					   every input is MQTT (mqtt.ninputs
					   >= 1) */
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
	struct qw_mqtt_conf mqtt;       /* mqtt:// inputs and [mqtt] */
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
/* Checks the files of [mqtt] as the daemon will read them: ca_file,
 * cert_file, key_file exist and are readable regular files, key_file and
 * credentials are open to their owner only, credentials has its two lines.
 * 0, or QW_EFORMAT/QW_EIO with "FILE:LINE: [mqtt] KEY: why" in err.  The
 * daemon (at start and reload) and check call it; the parse does not, so
 * the other verbs need no access to these files. */
int qw_config_mqtt_files(const struct qw_config *cfg, char *err,
			 size_t errlen);
/* Reads an MQTT credentials file: the user name on its first line, the
 * password on the second (config_mqtt.c).  The file must be a regular file
 * readable by its owner only (mode 0600 or 0400).  0, or QW_EFORMAT/QW_EIO
 * with the reason in err; user and pass are wiped on error. */
int qw_config_mqtt_credentials(const char *path, char *user, size_t ucap,
			       char *pass, size_t pcap, char *err,
			       size_t errlen);

#endif
