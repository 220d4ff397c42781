/* run.c: `quadwatch run -c FILE [-g GROUPS] [-v|-q]`, the daemon (see
 * quadwatch-run(1)).
 *
 * Parses the command line and the config, binds, connects and allocates
 * everything (run_setup.c), then loops: wait on every input and the control
 * socket up to the next timer (CLOCK_MONOTONIC, never the data's clock),
 * then run the named steps: reload if asked, ingest what arrived
 * (run_ingest.c), answer control requests and publish stats
 * (run_report.c).  Signal handlers only set flags; a poll is never longer
 * than RUN_TICK_MAX, so SIGTERM/SIGINT end the loop well within a second.
 * Under a service manager the daemon reports ready, reloading and stopping,
 * a status line, and pings the watchdog from the loop (run_notify.c).
 *
 * Workload: one thread; at full rate the loop wakes for batches of
 * messages, so its own cost is a zmq_poll per RUN_BATCH_MAX_MSGS. */
#include <signal.h>
#include <stdio.h>
#include <string.h>

#include "cmd.h"
#include "run.h"
#include "run_notify.h"

/* The only process-wide state besides the log level: signal flags. */
static volatile sig_atomic_t run_stop;
static volatile sig_atomic_t run_hup;

static void run_on_stop(int sig)
{
	(void)sig;
	run_stop = 1;
}

static void run_on_hup(int sig)
{
	(void)sig;
	run_hup = 1;
}

/* No SA_RESTART: a signal interrupts zmq_poll at once. */
static int run_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = run_on_stop;
	if (sigaction(SIGTERM, &sa, NULL) || sigaction(SIGINT, &sa, NULL))
		return QW_ERROR(QW_EIO);
	sa.sa_handler = run_on_hup;
	if (sigaction(SIGHUP, &sa, NULL))
		return QW_ERROR(QW_EIO);
	/* SIGXFSZ: a file-size limit (LimitFSIZE=) must fail the checkpoint
	 * write with EFBIG, not kill the daemon. */
	sa.sa_handler = SIG_IGN;
	return sigaction(SIGPIPE, &sa, NULL) || sigaction(SIGXFSZ, &sa, NULL)
	       ? QW_ERROR(QW_EIO) : 0;
}

static int run_usage(void)
{
	fprintf(stderr, "usage: quadwatch run -c FILE [-g GROUPS] [-v|-q]\n");
	return QW_EXIT_USAGE;
}

/* -c FILE, -g GROUPS (the groups owned, replacing [bus] groups), -v
 * (debug), -q (errors only).  0 or QW_EXIT_USAGE. */
static int run_args(int argc, char **argv, const char **path,
		    const char **owned)
{
	int i;

	*path = NULL;
	*owned = NULL;
	for (i = 1; i < argc; i++) {
		if (strcmp(argv[i], "-c") == 0 && i + 1 < argc)
			*path = argv[++i];
		else if (strcmp(argv[i], "-g") == 0 && i + 1 < argc)
			*owned = argv[++i];
		else if (strcmp(argv[i], "-v") == 0)
			qw_log_set_level(QW_LOG_DEBUG);
		else if (strcmp(argv[i], "-q") == 0)
			qw_log_set_level(QW_LOG_ERROR);
		else
			return run_usage();
	}
	return *path == NULL ? run_usage() : 0;
}

/* Milliseconds until the next timer (the watchdog ping's too), at most
 * RUN_TICK_MAX. */
static long run_timeout_ms(const struct run_daemon *dm,
			   const struct run_notify *rn)
{
	double next = qw_run_notify_next(rn, qw_run_next_timer(dm));
	double wait = RUN_TICK_MAX;
	double now = qw_log_monotonic();

	if (next > 0 && next - now < wait)
		wait = next - now;
	return wait > 0 ? (long)(wait * 1e3) + 1 : 0;
}

static void run_step_timers(struct run_daemon *dm)
{
	double now = qw_log_monotonic();
	char err[QW_CONFIG_ERR_MAX];

	if (dm->next_stats > 0 && now >= dm->next_stats) {
		qw_run_stats(dm);
		dm->next_stats = now + dm->cfg.stats_every;
	}
	if (dm->next_checkpoint > 0 && now >= dm->next_checkpoint) {
		qw_run_save(dm, err, sizeof err); /* logged and counted */
		dm->next_checkpoint = now + dm->cfg.state_every;
	}
}

/* A graceful stop saves every group, so a restart loses nothing. */
static void run_final_checkpoint(struct run_daemon *dm)
{
	char err[QW_CONFIG_ERR_MAX];

	if (dm->cfg.state_dir[0] == '\0')
		return;
	if (qw_run_save(dm, err, sizeof err) == 0)
		qw_log(QW_LOG_INFO, "checkpoints written to %s",
		       dm->cfg.state_dir);
	else
		qw_log(QW_LOG_ERROR, "final checkpoint failed: %s", err);
}

static void run_step_reload(struct run_daemon *dm, struct run_notify *rn)
{
	if (!run_hup)
		return;
	run_hup = 0;
	qw_run_notify_reloading(rn);
	qw_run_notify_reloaded(rn, dm, qw_run_reload(dm));
}

/* Inputs first, control last: a reload from control renumbers the
 * poller, and nothing reads it after that step. */
static void run_step_sockets(struct run_daemon *dm)
{
	size_t i, n = dm->cfg.ninputs;

	for (i = 0; i < n; i++)
		if (qw_bus_poller_ready(dm->poller, i))
			qw_run_ingest(dm, dm->inputs[i]);
	if (dm->control != NULL && qw_bus_poller_ready(dm->poller, n))
		qw_run_control(dm);
	qw_run_zap(dm); /* CURVE handshakes waiting on the ZAP handler */
}

static int run_loop(struct run_daemon *dm, struct run_notify *rn)
{
	int rc;

	while (!run_stop) {
		run_step_reload(dm, rn);
		qw_run_mqtt_arm(dm);
		rc = qw_bus_poll(dm->poller, run_timeout_ms(dm, rn));
		if (rc < 0) {
			qw_log(QW_LOG_ERROR, "poll: %s", qw_bus_strerror());
			return QW_EXIT_FAIL;
		}
		if (rc == 0)
			run_step_sockets(dm);
		qw_run_mqtt_step(dm);
		run_step_timers(dm);
		qw_run_notify_tick(rn, dm);
	}
	return QW_EXIT_OK;
}

int qw_cmd_run(int argc, char **argv)
{
	struct run_daemon dm;
	struct run_notify rn;
	const char *path, *owned;
	int rc;

	if ((rc = run_args(argc, argv, &path, &owned)) != 0)
		return rc;
	memset(&dm, 0, sizeof dm);
	dm.owned = owned;
	if (run_signals() != 0) {
		qw_log_errno(QW_LOG_ERROR, "sigaction");
		return QW_EXIT_FAIL;
	}
	rc = qw_run_setup(&dm, path);
	if (rc != 0) {
		qw_run_teardown(&dm);
		return rc == QW_EFORMAT ? QW_EXIT_USAGE : QW_EXIT_FAIL;
	}
	qw_log(QW_LOG_INFO, "running %s: %zu groups, %zu inputs", path,
	       dm.cfg.ngroups, dm.cfg.ninputs + dm.cfg.mqtt.ninputs);
	qw_run_notify_open(&rn);
	qw_run_notify_ready(&rn, &dm); /* bound, connected, restored */
	rc = run_loop(&dm, &rn);
	qw_run_notify_stopping(&rn);
	qw_log(QW_LOG_INFO, "stopping: %llu readings, %llu messages",
	       (unsigned long long)dm.tot.readings,
	       (unsigned long long)dm.tot.received);
	run_final_checkpoint(&dm);
	qw_run_teardown(&dm);
	qw_run_notify_close(&rn);
	return rc;
}
