/* run_notify.h: what `quadwatch run` tells its service manager
 * (run_notify.c over src/io/notify.c): READY=1 once set up, RELOADING=1
 * and READY=1 around a SIGHUP reload, STOPPING=1, a STATUS= line refreshed
 * every RUN_NOTIFY_STATUS_EVERY, and WATCHDOG=1 at half of WATCHDOG_USEC.
 * Everything here is a no-op when NOTIFY_SOCKET is unset.  Private to
 * src/cmd/run*.c. */
#ifndef QW_RUN_NOTIFY_H
#define QW_RUN_NOTIFY_H

#include <stdint.h>

#include "notify.h"

struct run_daemon;

#define RUN_NOTIFY_STATUS_EVERY 5.0 /* s between STATUS= refreshes: often
				       enough for `systemctl status`, one
				       datagram; readings/s is averaged
				       over this window */
#define RUN_NOTIFY_WATCHDOG_SHARE 0.5 /* ping at this share of
					 WATCHDOG_USEC, as sd_notify(3)
					 advises (half) */

struct run_notify {
	struct qw_notify n;
	double ping_every;        /* s between WATCHDOG=1; 0: no watchdog */
	double next_ping;         /* monotonic s; 0: none */
	double next_status;       /* monotonic s; 0: none */
	double status_t;          /* monotonic s of the last rate sample */
	uint64_t status_readings; /* the daemon's readings then */
	int logged;               /* a failed send has been logged */
};

/* Opens the socket from the environment; an unusable one is logged and
 * left off.  Never fails. */
void qw_run_notify_open(struct run_notify *rn);
/* READY=1 with a first STATUS= line; starts the watchdog and status
 * timers.  Call once every socket is bound and every checkpoint loaded. */
void qw_run_notify_ready(struct run_notify *rn, const struct run_daemon *dm);
/* RELOADING=1 with MONOTONIC_USEC, before a reload starts. */
void qw_run_notify_reloading(struct run_notify *rn);
/* READY=1 after a reload; rc is qw_run_reload's (a refused reload says so
 * in STATUS=: the old configuration runs on). */
void qw_run_notify_reloaded(struct run_notify *rn, const struct run_daemon *dm,
			    int rc);
/* STOPPING=1, as the loop ends. */
void qw_run_notify_stopping(struct run_notify *rn);
/* The watchdog ping and the status refresh, each when due. */
void qw_run_notify_tick(struct run_notify *rn, const struct run_daemon *dm);
/* The earlier of next (monotonic s, 0: none) and rn's next deadline. */
double qw_run_notify_next(const struct run_notify *rn, double next);
/* Logs the failure count, if any, and closes the socket. */
void qw_run_notify_close(struct run_notify *rn);

#endif
