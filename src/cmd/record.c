/* record.c: `quadwatch record -c FILE -o OUT [--rotate BYTES] [--count N]
 * [--seconds S] [-q]` (quadwatch-record(1)).
 *
 * Subscribes like the daemon (each [bus] input, one subscription per
 * group topic) and writes every two-frame message it receives to a
 * capture file (capture.h: receive time, topic, payload), rotating to
 * OUT.0001, ... past --rotate bytes.  `quadwatch replay OUT*` then decodes
 * the payloads as the daemon would.  Stops on SIGINT/SIGTERM, after
 * --count messages or --seconds (monotonic clock), flushing and closing
 * the capture (fsync).  Messages the daemon would refuse before decoding
 * (not two frames, or longer than max_frame) are counted, not written.
 *
 * Workload: as the daemon's input side; one buffered write per message,
 * a flush every RC_FLUSH_EVERY seconds. */
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "auth.h"
#include "bus.h"
#include "capture.h"
#include "cmd.h"
#include "config.h"
#include "log.h"
#include "num.h"

#define RC_TICK_MS 250        /* longest poll: bounds signal latency */
#define RC_FLUSH_EVERY 1.0    /* s between flushes to the kernel */
#define RC_INPUT_HWM 10000    /* messages queued per input, as the daemon */
#define RC_MAXMSG_FACTOR 4    /* as the daemon: larger frames disconnect */

static volatile sig_atomic_t rc_stop;

static void rc_on_stop(int sig)
{
	(void)sig;
	rc_stop = 1;
}

struct rc_opts {
	const char *config, *out;
	const char *key, *server_key; /* CURVE: --key, --server-key files */
	uint64_t rotate, count;
	double seconds;     /* 0 = no limit */
};

struct rc_ctx {
	struct qw_config cfg;
	qw_bus *bus;
	qw_bus_sock *in[QW_CONFIG_MAX_INPUTS];
	qw_bus_poller *poller;
	struct qw_bus_msg msg;
	struct qw_capture_writer *w;
	uint64_t written, skipped;
};

static int rc_usage(void)
{
	fprintf(stderr, "usage: quadwatch record -c FILE -o OUT [--rotate "
		"BYTES] [--count N] [--seconds S] [-q]\n"
		"         [--key FILE] [--server-key FILE]\n");
	return QW_EXIT_USAGE;
}

static int rc_args(int argc, char **argv, struct rc_opts *o)
{
	int i, unit;

	memset(o, 0, sizeof *o);
	for (i = 1; i < argc; i++) {
		const char *a = argv[i], *v = i + 1 < argc ? argv[i + 1] : NULL;

		if (strcmp(a, "-q") == 0) {
			qw_log_set_level(QW_LOG_ERROR);
			continue;
		}
		if (v == NULL)
			return rc_usage();
		i++;
		if (strcmp(a, "-c") == 0)
			o->config = v;
		else if (strcmp(a, "-o") == 0)
			o->out = v;
		else if (strcmp(a, "--key") == 0)
			o->key = v;
		else if (strcmp(a, "--server-key") == 0)
			o->server_key = v;
		else if (strcmp(a, "--rotate") == 0 ?
			 qw_num_u64(v, (size_t)-1, QW_CAPTURE_HEADER,
				    UINT64_MAX, &o->rotate) != 0 :
			 strcmp(a, "--count") == 0 ?
			 qw_num_u64(v, (size_t)-1, 1, UINT64_MAX,
				    &o->count) != 0 :
			 strcmp(a, "--seconds") == 0 ?
			 qw_num_duration(v, &unit, &o->seconds) != 0 ||
			 !(o->seconds > 0) : 1) {
			fprintf(stderr, "quadwatch record: %s %s: not a valid "
				"value\n", a, v);
			return rc_usage();
		}
	}
	return o->config == NULL || o->out == NULL ? rc_usage() : 0;
}

/* One input socket; with --key or --server-key a CURVE server (bound) or
 * client (connecting).  0, QW_EXIT_USAGE (bad keys) or QW_EXIT_FAIL. */
static int rc_open_input(struct rc_ctx *c, const struct rc_opts *ro,
			 struct qw_bus_opts *o, size_t i)
{
	const struct qw_endpoint *ep = &c->cfg.inputs[i];
	struct qw_bus_curve curve;
	char err[QW_AUTH_ERR_MAX];
	size_t j;
	int rc;

	o->security = NULL;
	if (ro->key != NULL || ro->server_key != NULL) {
		if (qw_auth_endpoint(ro->key, ro->server_key, ep->bind, &curve,
				     err, sizeof err) != 0) {
			qw_log(QW_LOG_ERROR, "input %s: %s", ep->addr, err);
			return QW_EXIT_USAGE;
		}
		o->security = &curve;
	}
	rc = qw_bus_open(c->bus, QW_BUS_SUB, ep, o, &c->in[i]);
	if (o->security != NULL)
		explicit_bzero(&curve, sizeof curve);
	for (j = 0; rc == 0 && j < c->cfg.ngroups; j++)
		rc = qw_bus_subscribe(c->in[i], c->cfg.groups[j].name, 1);
	if (rc == 0)
		rc = qw_bus_poller_add(c->poller, c->in[i]);
	if (rc != 0) {
		qw_log(QW_LOG_ERROR, "input %s%s: %s", ep->bind ? "@" : ">",
		       ep->addr, qw_bus_strerror());
		return QW_EXIT_FAIL;
	}
	return 0;
}

/* Sockets as the daemon's inputs.  0 or an exit code (logged). */
static int rc_open(struct rc_ctx *c, const struct rc_opts *ro)
{
	struct qw_bus_opts o;
	size_t i;
	int rc;

	if (c->cfg.mqtt.ninputs > 0)
		qw_log(QW_LOG_WARN, "%s: mqtt:// inputs are not recorded; "
		       "record captures the ZeroMQ inputs", c->cfg.path);
	if (c->cfg.ninputs == 0) {
		qw_log(QW_LOG_ERROR, "%s: no ZeroMQ input to record",
		       c->cfg.path);
		return QW_EXIT_USAGE;
	}
	c->bus = qw_bus_alloc();
	c->poller = qw_bus_poller_alloc(c->cfg.ninputs);
	c->msg.body_cap = c->cfg.max_frame;
	c->msg.body = malloc(c->cfg.max_frame);
	if (c->bus == NULL || c->poller == NULL || c->msg.body == NULL) {
		qw_log(QW_LOG_ERROR, "out of memory");
		return QW_EXIT_FAIL;
	}
	qw_bus_opts_default(&o);
	o.max_msg = (int64_t)(c->cfg.max_frame * RC_MAXMSG_FACTOR);
	o.rcvhwm = RC_INPUT_HWM;
	for (i = 0; i < c->cfg.ninputs; i++)
		if ((rc = rc_open_input(c, ro, &o, i)) != 0)
			return rc;
	return 0;
}

static double rc_now(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_REALTIME, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* Drains socket s.  0, or QW_EXIT_FAIL when the capture cannot be written. */
static int rc_drain(struct rc_ctx *c, qw_bus_sock *s, uint64_t count)
{
	struct qw_bus_msg *m = &c->msg;

	while (!(count > 0 && c->written >= count)) {
		int rc = qw_bus_recv(s, m, 1);

		if (rc == 1)
			return 0;
		if (rc < 0) {
			qw_log(QW_LOG_ERROR, "receive: %s", qw_bus_strerror());
			return 0;
		}
		if (m->nframes != 2 || m->body_len > m->body_cap ||
		    m->head_len >= QW_BUS_TOPIC_MAX) {
			c->skipped++;
			continue;
		}
		if (qw_capture_writer_put(c->w, rc_now(), m->head, m->head_len,
					  m->body, m->body_len) != 0) {
			qw_log_errno(QW_LOG_ERROR, "%s",
				     qw_capture_writer_path(c->w));
			return QW_EXIT_FAIL;
		}
		c->written++;
	}
	return 0;
}

static int rc_loop(struct rc_ctx *c, const struct rc_opts *o)
{
	double start = qw_log_monotonic(), next_flush = start + RC_FLUSH_EVERY;
	size_t i;
	int rc = 0;

	while (!rc_stop && rc == 0 && !(o->count && c->written >= o->count)) {
		double now = qw_log_monotonic();

		if (o->seconds > 0 && now - start >= o->seconds)
			break;
		if (now >= next_flush) {
			if (qw_capture_writer_flush(c->w) != 0)
				return QW_EXIT_FAIL;
			next_flush = now + RC_FLUSH_EVERY;
		}
		if (qw_bus_poll(c->poller, RC_TICK_MS) != 0)
			continue;
		for (i = 0; i < c->cfg.ninputs && rc == 0; i++)
			if (qw_bus_poller_ready(c->poller, i))
				rc = rc_drain(c, c->in[i], o->count);
	}
	return rc;
}

static void rc_close(struct rc_ctx *c)
{
	size_t i;

	for (i = 0; i < c->cfg.ninputs; i++)
		qw_bus_close(c->in[i]);
	qw_bus_poller_free(c->poller);
	qw_bus_free(c->bus);
	free(c->msg.body);
	qw_config_free(&c->cfg);
}

int qw_cmd_record(int argc, char **argv)
{
	char err[QW_CONFIG_ERR_MAX];
	struct sigaction sa;
	struct rc_opts o;
	struct rc_ctx c;
	int rc = rc_args(argc, argv, &o);

	if (rc != 0)
		return rc;
	memset(&c, 0, sizeof c);
	if (qw_config_load(o.config, &c.cfg, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch record: %s\n", err);
		return QW_EXIT_USAGE;
	}
	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = rc_on_stop;
	sigaction(SIGTERM, &sa, NULL);
	sigaction(SIGINT, &sa, NULL);
	rc = rc_open(&c, &o);
	if (rc == 0 && qw_capture_writer_open(o.out, o.rotate, 1, &c.w) != 0) {
		qw_log_errno(QW_LOG_ERROR, "%s (it must not exist)", o.out);
		rc = QW_EXIT_FAIL;
	}
	if (rc == 0)
		rc = rc_loop(&c, &o);
	if (c.w != NULL) {
		unsigned parts = qw_capture_writer_parts(c.w);

		if (qw_capture_writer_close(c.w) != 0) {
			qw_log_errno(QW_LOG_ERROR, "closing %s", o.out);
			rc = QW_EXIT_FAIL;
		}
		qw_log(QW_LOG_INFO, "recorded %llu messages in %u file%s from "
		       "%s; %llu not recorded (not 2 frames, or over "
		       "max_frame)", (unsigned long long)c.written, parts,
		       parts == 1 ? "" : "s", o.out,
		       (unsigned long long)c.skipped);
	}
	rc_close(&c);
	return rc;
}
