/* run.h: the daemon's context, shared by the files of `quadwatch run`:
 *   run.c          command line, signals, the poll loop and its timers
 *   run_setup.c    groups, topic table, sockets; build, reload, teardown
 *   run_ingest.c   one bus message: topic, decode, gaps, score, alert
 *   run_report.c   control requests, status and stats JSON
 *   run_checkpoint.c  checkpoints: save on timer/stop/ctl, restore
 *   run_mqtt.c     the MQTT connection: inputs, alerts, counters
 * Private to src/cmd/run*.c. */
#ifndef QW_RUN_H
#define QW_RUN_H

#include <signal.h>
#include <stddef.h>
#include <stdint.h>

#include "alert.h"
#include "auth.h"
#include "bus.h"
#include "config.h"
#include "log.h"
#include "mqtt.h"
#include "quadwatch.h"
#include "wire.h"

/* Why a message or reading was refused; the first RUN_WIRE_CAUSES are
 * counted by the daemon, the rest come from the core's counters. */
enum run_cause {
	RUN_UNKNOWN_TOPIC = 0, /* no group has this topic */
	RUN_WRONG_COUNT,       /* QW_ECOUNT: p differs from the group's */
	RUN_TRUNCATED,         /* QW_ETRUNC */
	RUN_BAD_NUMBER,        /* QW_ENUMBER */
	RUN_NONFINITE,         /* QW_ERANGE on the wire; rej_nonfinite */
	RUN_OVERSIZE,          /* frame > max_frame, or n > buffer */
	RUN_MALFORMED,         /* QW_EFORMAT, empty frame, frame count */
	RUN_TIME,              /* core: time went backwards */
	RUN_OVERFLOW,          /* core: the score overflowed */
	RUN_EMPTY,             /* core: every channel missing */
	RUN_NCAUSES
};
#define RUN_WIRE_CAUSES RUN_TIME /* causes counted before the core */

extern const char *const qw_run_cause_names[RUN_NCAUSES];

/* Limits and schedules. */
#define RUN_ALERT_MAX 8192     /* bytes: an alert with 16 channels of
				  64-byte names fits with room to spare */
#define RUN_MAXMSG_FACTOR 4    /* frames up to 4 * max_frame are received
				  and counted as oversize; larger ones make
				  libzmq drop the connection */
#define RUN_CONTROL_MAXMSG 4096 /* bytes: a control request */
#define RUN_ALERT_HWM 10000    /* messages queued per alert subscriber */
#define RUN_INPUT_HWM 10000    /* messages queued per input connection:
				  ~0.2 s of full-rate binary batches */
#define RUN_TICK_MAX 0.25      /* s: longest poll, bounds signal latency */
#define RUN_REJECT_LOG_EVERY 10.0 /* s between rejection log lines */
#define RUN_BATCH_MAX_MSGS 256 /* messages drained per socket per wake-up,
				  so one busy input cannot starve control */

/* Checkpoints of one group (run_checkpoint.c). */
struct run_ckpt {
	uint64_t saved;     /* files written */
	uint64_t failed;    /* writes that failed (state dir unwritable,
			       full, ...) */
	uint64_t restored;  /* files loaded at start or reload */
	uint64_t refused;   /* files refused and set aside */
};

#define RUN_CKPT_LOG_EVERY 60.0 /* s between checkpoint failure lines */

/* One sensor group: its detector and the daemon's counters for it. */
struct run_group {
	const struct qw_group_conf *conf; /* in the daemon's config */
	qw_detector *det;
	uint64_t fingerprint;          /* qw_config_fingerprint(conf) */
	uint64_t rejected[RUN_WIRE_CAUSES]; /* by cause, before the core */
	uint64_t received;             /* messages with this topic */
	uint64_t decoded;              /* messages decoded */
	uint64_t next_seq;             /* seq expected next (binary) */
	int has_seq;                   /* next_seq is valid */
	uint64_t gaps;                 /* forward jumps in seq */
	uint64_t lost;                 /* readings skipped by those jumps */
	uint64_t restarts;             /* seq went backwards */
	uint64_t dropped;              /* alerts the PUB refused */
	double last_t;                 /* time of the last reading, s */
	struct run_ckpt ckpt;          /* checkpoint counters */
	int restore;                   /* new to the daemon: look for its
					  checkpoint once it is installed */
};

/* Daemon-wide counters (group counters are summed at report time). */
struct run_totals {
	uint64_t received;        /* messages off the inputs */
	uint64_t decoded;         /* messages decoded */
	uint64_t readings;        /* readings passed to the core */
	uint64_t unknown_topic;   /* messages for no group */
	uint64_t alerts_sent;     /* alert messages queued */
	uint64_t alerts_dropped;  /* alert messages refused (would block) */
	uint64_t stats_sent;      /* stats messages queued */
	uint64_t control;         /* control requests answered */
	uint64_t reloads;         /* reloads that took effect */
	uint64_t reload_failures; /* reloads refused (old config kept) */
	uint64_t bus_errors;      /* failed receives or sends */
	uint64_t auth_allowed;    /* CURVE clients let in (ZAP 200) */
	uint64_t auth_denied;     /* CURVE clients refused (ZAP 400) */
};

/* CURVE on the daemon's sockets (run_secure.c), from [security]. */
struct run_secure {
	struct qw_auth_setup k;      /* the keys in force (auth.h) */
	uint64_t signature;          /* FNV-1a over the keys in force */
};

/* The MQTT connection (run_mqtt.c); client NULL when no broker is set.
 * Message counters live here, beside the ZeroMQ totals in run_totals
 * (each MQTT message is counted in both); connection counters come from
 * the client, plus those of clients replaced by reloads. */
struct run_mqtt {
	qw_mqtt *client;
	uint64_t received;                  /* messages off the broker */
	uint64_t decoded;                   /* of those, decoded */
	uint64_t rejected[RUN_WIRE_CAUSES]; /* of those, refused by cause */
	struct qw_mqtt_counts base;         /* of replaced clients */
	struct qw_mqtt_counts seen;         /* of this client, logged */
	struct qw_log_limit log;            /* failed attempts */
};

/* Topic -> group index: open addressing, FNV-1a, power-of-two slots. */
struct run_topics {
	size_t *slot;   /* group index + 1; 0 = empty */
	size_t mask;    /* nslots - 1 */
};

struct run_daemon {
	const char *path;            /* the config file */
	const char *owned;           /* -g: groups owned, replacing [bus]
					groups; NULL: the file's choice */
	struct qw_config cfg;
	struct run_group *groups;    /* cfg.ngroups */
	struct run_topics topics;
	qw_bus *bus;
	qw_bus_sock *inputs[QW_CONFIG_MAX_INPUTS];
	qw_bus_sock *alerts;
	qw_bus_sock *control;        /* NULL: no control socket */
	qw_bus_sock *control_retired; /* replaced by a reload while it
					 held a request; closed after the
					 reply */
	qw_bus_poller *poller;       /* inputs, control, then zap */
	struct run_secure sec;       /* CURVE keys in force */
	qw_bus_sock *zap;            /* ZAP handler (REP), bound before the
					first CURVE server; NULL: none */
	struct qw_log_limit auth_log; /* refused clients */
	struct qw_bus_msg msg;       /* body: max_frame bytes */
	double *batch;               /* decode buffer, batch_len doubles */
	size_t batch_len;
	char *alert;                 /* RUN_ALERT_MAX bytes */
	struct run_totals tot;
	struct qw_log_limit reject_log;
	struct qw_log_limit ckpt_log; /* checkpoint write failures */
	double started;              /* monotonic s */
	double next_stats;           /* monotonic s; 0 = off */
	double next_checkpoint;      /* monotonic s; 0 = off */
	struct run_mqtt mqtt;        /* MQTT inputs and alerts */
};

/* run_setup.c */
int qw_run_setup(struct run_daemon *dm, const char *path);
void qw_run_teardown(struct run_daemon *dm);
/* Re-reads the config; on any error logs it and keeps the old one.
 * Returns 0 when the new config took effect. */
int qw_run_reload(struct run_daemon *dm);
/* Index of the group for topic (len bytes), or -1. */
long qw_run_topic_find(const struct run_daemon *dm, const char *topic,
		       size_t len);
/* Monotonic time of the next timer, or 0 when none. */
double qw_run_next_timer(const struct run_daemon *dm);

/* run_secure.c */
/* Reads the keys of cfg's [security] into sec (zeroed first), and opens
 * the ZAP handler in dm when CURVE is on and it is not open yet.  On a
 * reload (dm->sec in force) a change of this daemon's own keys or of
 * publisher_key is refused: bound sockets cannot be re-keyed in place.
 * 0, or QW_EFORMAT (exit 2 at start) with the reason logged. */
int qw_run_secure_build(struct run_daemon *dm, const struct qw_config *cfg,
			struct run_secure *sec);
/* Frees sec's allowed list and wipes its secrets; sec is then off. */
void qw_run_secure_free(struct run_secure *sec);
/* The CURVE options for a socket on ep: server for bound ones, client for
 * connecting inputs with publisher_key; NULL in the clear. */
const struct qw_bus_curve *qw_run_secure_for(const struct run_secure *sec,
					     const struct qw_endpoint *ep,
					     int is_input);
/* Answers every waiting ZAP request (non-blocking). */
void qw_run_zap(struct run_daemon *dm);

/* run_ingest.c */
/* Drains up to RUN_BATCH_MAX_MSGS messages from input socket s. */
void qw_run_ingest(struct run_daemon *dm, qw_bus_sock *s);
/* Publishes a raise/clear for group g from res (t: the reading's time). */
void qw_run_alert(struct run_daemon *dm, struct run_group *g, double t,
		  const struct qw_result *res);
/* Publishes a clear for group g after an operator re-baseline. */
void qw_run_alert_rebaseline(struct run_daemon *dm, struct run_group *g);

/* run_mqtt.c */
/* The client for cfg's broker: the running one when its settings are
 * unchanged (*reused = 1), a new one, or NULL when cfg names no broker.
 * 0, or QW_EFORMAT/QW_ENOMEM with the reason logged. */
int qw_run_mqtt_build(struct run_daemon *dm, const struct qw_config *cfg,
		      qw_mqtt **out, int *reused);
/* Installs client (from qw_run_mqtt_build); a replaced one is freed and
 * its counters kept. */
void qw_run_mqtt_commit(struct run_daemon *dm, qw_mqtt *client, int reused);
/* Before each poll: the connection's socket into the poller. */
void qw_run_mqtt_arm(struct run_daemon *dm);
/* After each poll: reads, writes, keepalive, reconnects; logs changes. */
void qw_run_mqtt_step(struct run_daemon *dm);
/* Publishes an alert of group on MQTT when [mqtt] alerts is set. */
void qw_run_mqtt_alert(struct run_daemon *dm, const char *group,
		       const char *body, size_t len);
/* Adds the "mqtt" counters object to a status or stats object (nothing
 * when no broker is set). */
struct json_t;
void qw_run_mqtt_report(const struct run_daemon *dm, struct json_t *o);

/* run_ingest.c */
/* One message m from any input (frame 1 topic, frame 2 payload):
 * counted, decoded and scored.  -1 when decoded, else the enum run_cause
 * it was refused for. */
int qw_run_message(struct run_daemon *dm, const struct qw_bus_msg *m);

/* run_report.c */
/* Answers every waiting control request. */
void qw_run_control(struct run_daemon *dm);
/* Publishes one stats message. */
void qw_run_stats(struct run_daemon *dm);

/* run_checkpoint.c */
/* Writes every group's checkpoint into [state] dir.  0 when all were
 * written; else the first error, its text in err (failures are logged,
 * rate-limited, and counted per group). */
int qw_run_save(struct run_daemon *dm, char *err, size_t errlen);
/* Loads the checkpoint of every group flagged restore (new at start or
 * on reload), then clears the flags.  A refused file is logged and set
 * aside; the group starts fresh. */
void qw_run_restore(struct run_daemon *dm);

#endif
