/* test_config.c: the configuration reader (src/io/config*.c).
 *
 * - The example of DESIGN.md "Configuration keys that outside checks use",
 *   verbatim, from a string and from a file, gives the values it states.
 * - Every error path, table-driven: the message must begin with the exact
 *   "FILE:LINE: [section] key: " and the config must come back empty.
 * - Defaults, duration units, endpoints (@ binds, > connects), list
 *   continuation, floors, the fingerprint (against an independent FNV-1a).
 * - The groups owned ([bus] groups, or -g through qw_config_load_owned):
 *   the others dropped, the kept ones whole and in file order.
 * - MQTT: addresses in [bus] input beside ZeroMQ endpoints, the [mqtt]
 *   keys and their defaults, the credentials file and its mode. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "config.h"
#include "qwtest.h"

/* Allocation failure, at each allocation in turn: malloc, calloc, realloc
 * and free are interposed (glibc lets a program replace them; the real
 * ones are __libc_*).  Not under AddressSanitizer, which owns the heap. */
#ifndef __SANITIZE_ADDRESS__
#define TEST_ALLOC_FAIL 1
extern void *__libc_malloc(size_t n);
extern void *__libc_calloc(size_t n, size_t size);
extern void *__libc_realloc(void *p, size_t n);
extern void __libc_free(void *p);

static long alloc_countdown = -1; /* allocations left before one fails */
static long alloc_live;           /* blocks allocated and not freed */

static int alloc_fails(void)
{
	if (alloc_countdown < 0 || alloc_countdown-- > 0)
		return 0;
	errno = ENOMEM; /* as the real ones do */
	return 1;
}

void *malloc(size_t n)
{
	void *p = alloc_fails() ? NULL : __libc_malloc(n);

	alloc_live += p != NULL;
	return p;
}

void *calloc(size_t n, size_t size)
{
	void *p = alloc_fails() ? NULL : __libc_calloc(n, size);

	alloc_live += p != NULL;
	return p;
}

void *realloc(void *old, size_t n)
{
	void *p = alloc_fails() ? NULL : __libc_realloc(old, n);

	alloc_live += old == NULL && p != NULL;
	return p;
}

void free(void *p)
{
	alloc_live -= p != NULL;
	__libc_free(p);
}
#endif

/* Values written in decimal in the file are parsed by strtod: exact up to
 * one rounding, and unit products add one more. */
#define TOL_PARSE 1e-15

static const char design_example[] =
	"[bus]\n"
	"input   = >tcp://127.0.0.1:5601     ; several, comma separated\n"
	"alerts  = @tcp://127.0.0.1:5602\n"
	"control = @tcp://127.0.0.1:5603\n"
	"\n"
	"[group rig]                          ; one section per group; topic = name\n"
	"channels       = supply_t, return_t, flow, pump_amps   ; required\n"
	"half_life      = 2000                ; readings; or 30s, 10min, 2h\n"
	"alarms_per_day = 1                   ; the false-alarm rate to deliver\n"
	"rate           = 10                  ; nominal readings per second\n"
	"warmup         = 500                 ; readings before any alarm\n"
	"persist        = 1/1                 ; k/m: k of the last m over the limit\n"
	"floor          = 0.01, 0.01, 0.1, 0.05   ; per-channel noise floor (std dev, channel units)\n"
	"\n"
	"[state]\n"
	"dir   = /var/lib/quadwatch           ; checkpoints; none kept when absent\n"
	"every = 10s                          ; checkpoint interval\n";

/* Loads text as "t.ini"; fails the test with the message if it errs. */
static void load_ok(const char *text, struct qw_config *cfg)
{
	char err[QW_CONFIG_ERR_MAX] = "";
	int rc = qw_config_load_string(text, "t.ini", cfg, err, sizeof err);

	if (rc != 0)
		fail_msg("unexpected error %d: %s", rc, err);
}

static void check_design(const struct qw_config *c)
{
	static const char *const names[] = {"supply_t", "return_t", "flow",
					    "pump_amps"};
	static const double floors[] = {0.01, 0.01, 0.1, 0.05};
	const struct qw_group_conf *g;
	size_t i;

	assert_int_equal(c->ninputs, 1);
	assert_string_equal(c->inputs[0].addr, "tcp://127.0.0.1:5601");
	assert_int_equal(c->inputs[0].bind, 0);
	assert_string_equal(c->alerts.addr, "tcp://127.0.0.1:5602");
	assert_int_equal(c->alerts.bind, 1);
	assert_string_equal(c->control.addr, "tcp://127.0.0.1:5603");
	assert_int_equal(c->control.bind, 1);
	assert_string_equal(c->state_dir, "/var/lib/quadwatch");
	assert_true(c->state_every == 10.0);
	assert_int_equal(c->ngroups, 1);
	g = &c->groups[0];
	assert_string_equal(g->name, "rig");
	assert_int_equal(g->line, 6);
	assert_int_equal(g->half_life_line, 8);
	assert_int_equal(g->p, 4);
	for (i = 0; i < 4; i++) {
		assert_string_equal(g->channels[i], names[i]);
		assert_true(qwt_reldiff(g->floor[i], floors[i], 0) <= TOL_PARSE);
	}
	assert_int_equal(g->params.p, 4);
	assert_true(g->params.half_life == 2000.0);
	assert_int_equal(g->params.time_based, 0);
	assert_true(g->params.alarms_per_day == 1.0);
	assert_true(g->params.rate == 10.0);
	assert_int_equal(g->params.warmup, 500);
	assert_int_equal(g->params.persist_k, 1);
	assert_int_equal(g->params.persist_m, 1);
	assert_ptr_equal(g->params.floor, g->floor);
	assert_ptr_equal(qw_config_group(c, "rig"), g);
	assert_null(qw_config_group(c, "ri"));
}

static void test_design_example_string(void **state)
{
	struct qw_config c;

	(void)state;
	load_ok(design_example, &c);
	assert_string_equal(c.path, "t.ini");
	check_design(&c);
	qw_config_free(&c);
	qw_config_free(&c); /* a freed config is empty: freeing again is safe */
}

/* Writes text (len bytes) to a new temporary file; returns its name. */
static char *temp_file(const char *text, size_t len)
{
	static char name[64];
	int fd;

	snprintf(name, sizeof name, "/tmp/qw_test_config_XXXXXX");
	fd = mkstemp(name);
	assert_true(fd >= 0);
	assert_int_equal(write(fd, text, len), (ssize_t)len);
	close(fd);
	return name;
}

static void test_design_example_file(void **state)
{
	struct qw_config c;
	char err[QW_CONFIG_ERR_MAX];
	char *name = temp_file(design_example, strlen(design_example));

	(void)state;
	assert_int_equal(qw_config_load(name, &c, err, sizeof err), 0);
	assert_string_equal(c.path, name);
	check_design(&c);
	qw_config_free(&c);
	unlink(name);
}

static void test_defaults(void **state)
{
	struct qw_config c;
	struct qw_params def;
	const struct qw_params *p;

	(void)state;
	load_ok("[group g]\nchannels = a, b, c\n", &c);
	assert_int_equal(c.ninputs, 1);
	assert_string_equal(c.inputs[0].addr, "tcp://127.0.0.1:5601");
	assert_int_equal(c.inputs[0].bind, 0);
	assert_string_equal(c.alerts.addr, "tcp://127.0.0.1:5602");
	assert_int_equal(c.alerts.bind, 1);
	assert_string_equal(c.control.addr, "tcp://127.0.0.1:5603");
	assert_int_equal(c.control.bind, 1);
	assert_true(c.stats_every == 10.0);
	assert_int_equal(c.max_frame, 4u << 20);
	assert_string_equal(c.state_dir, "");
	assert_true(c.state_every == 10.0);
	assert_string_equal(c.server_key, "");
	assert_string_equal(c.client_keys, "");
	qw_params_default(&def, 3);
	p = &c.groups[0].params;
	assert_int_equal(p->p, 3);
	assert_true(p->half_life == def.half_life);
	assert_int_equal(p->time_based, 0);
	assert_true(p->rate == def.rate);
	assert_true(p->alarms_per_day == def.alarms_per_day);
	assert_int_equal(p->warmup, def.warmup);
	assert_int_equal(p->persist_k, def.persist_k);
	assert_int_equal(p->persist_m, def.persist_m);
	assert_int_equal(p->clear_n, def.clear_n);
	assert_int_equal(p->learn, def.learn);
	assert_int_equal(p->partial, QW_PARTIAL_LEARN);
	assert_int_equal(p->relearn_after, 0);
	assert_int_equal(p->correct, 1);
	assert_true(c.groups[0].floor[0] == 0 && c.groups[0].floor[2] == 0);
	assert_int_equal(c.groups[0].half_life_line, 0);
	qw_config_free(&c);
}

/* The half_life of "[group g]\nchannels = a\nhalf_life = TEXT\n". */
static void half_life_is(const char *text, double want, int time_based)
{
	char buf[256];
	struct qw_config c;

	snprintf(buf, sizeof buf, "[group g]\nchannels = a\nhalf_life = %s\n",
		 text);
	load_ok(buf, &c);
	if (qwt_reldiff(c.groups[0].params.half_life, want, 0) > TOL_PARSE ||
	    c.groups[0].params.time_based != time_based)
		fail_msg("half_life = %s: got %.17g (time_based %d), want "
			 "%.17g (%d)", text, c.groups[0].params.half_life,
			 c.groups[0].params.time_based, want, time_based);
	qw_config_free(&c);
}

static void test_durations(void **state)
{
	struct qw_config c;
	const struct qw_params *p;

	(void)state;
	half_life_is("2385", 2385.0, 0);
	half_life_is("2.385e3", 2385.0, 0);
	half_life_is("30s", 30.0, 1);
	half_life_is("2.385 s", 2.385, 1);
	half_life_is("10min", 600.0, 1);
	half_life_is("2h", 7200.0, 1);
	half_life_is("1.5d", 129600.0, 1);
	half_life_is("250ms", 0.25, 1);
	load_ok("[bus]\nstats_every = 2min\n[state]\nevery = 1.5h\n"
		"[group g]\nchannels = a\nrate = 2.385\nwarmup = 2.5min\n"
		"relearn_after = 1h\n", &c);
	assert_true(c.stats_every == 120.0);
	assert_true(c.state_every == 5400.0);
	p = &c.groups[0].params;
	/* 150 s at 2.385/s = 357.75 readings, rounded up to cover 150 s */
	assert_int_equal(p->warmup, 358);
	assert_int_equal(p->relearn_after, 8586);
	qw_config_free(&c);
	load_ok("[bus]\nstats_every = 0\n[group g]\nchannels = a\n"
		"warmup = 0\nrelearn_after = 2385\n", &c);
	assert_true(c.stats_every == 0.0); /* 0 = no stats */
	p = &c.groups[0].params;
	{
		struct qw_params def;

		qw_params_default(&def, 1);
		assert_int_equal(p->warmup, def.warmup); /* 0: the default */
	}
	assert_int_equal(p->relearn_after, 2385);
	qw_config_free(&c);
}

static void test_endpoints(void **state)
{
	struct qw_config c;

	(void)state;
	load_ok("[bus]\n"
		"input = @tcp://*:5601, >ipc:///tmp/qw.in ,inproc://bare\n"
		"alerts = >tcp://relay.example:5700\n"
		"control = none\n"
		"[group g]\nchannels = a\n", &c);
	assert_int_equal(c.ninputs, 3);
	assert_string_equal(c.inputs[0].addr, "tcp://*:5601");
	assert_int_equal(c.inputs[0].bind, 1);
	assert_string_equal(c.inputs[1].addr, "ipc:///tmp/qw.in");
	assert_int_equal(c.inputs[1].bind, 0);
	assert_string_equal(c.inputs[2].addr, "inproc://bare");
	assert_int_equal(c.inputs[2].bind, 0); /* inputs connect by default */
	assert_string_equal(c.alerts.addr, "tcp://relay.example:5700");
	assert_int_equal(c.alerts.bind, 0);
	assert_string_equal(c.control.addr, ""); /* no control socket */
	qw_config_free(&c);
	load_ok("[bus]\nalerts = tcp://127.0.0.1:6602\ncontrol =\n"
		"[group g]\nchannels = a\n", &c);
	assert_int_equal(c.alerts.bind, 1); /* alerts bind by default */
	assert_string_equal(c.control.addr, "");
	qw_config_free(&c);
	load_ok("[bus]\ncontrol = >ipc:///run/qw.ctl\nmax_frame = 64KiB\n"
		"[group g]\nchannels = a\n", &c);
	assert_string_equal(c.control.addr, "ipc:///run/qw.ctl");
	assert_int_equal(c.control.bind, 0);
	assert_int_equal(c.max_frame, 65536);
	qw_config_free(&c);
}

static void test_group_keys(void **state)
{
	struct qw_config c;
	const struct qw_group_conf *g;

	(void)state;
	load_ok("[group pump_skid.2-a]\n"
		"channels = speed, flow, dp\n"
		"floor = 2.385\n"
		"persist = 3/5\nclear = 17\nlearn = clip\ncorrect = no\n"
		"partial = HOLD\n"
		"mode = plain\nalarms_per_day = 0.73\n"
		"[group b]\nchannels = x:1, y/2\nfloor = 0, 0.5\nlearn = ALL\n"
		"dynamics = VAR1\nmax_gap = 2.385s\nmode = mewma\n"
		"smoothing = 0.15\n",
		&c);
	assert_int_equal(c.ngroups, 2);
	g = &c.groups[0];
	assert_string_equal(g->name, "pump_skid.2-a");
	assert_true(g->floor[0] == 2.385 && g->floor[1] == 2.385 &&
		    g->floor[2] == 2.385);
	assert_int_equal(g->params.persist_k, 3);
	assert_int_equal(g->params.persist_m, 5);
	assert_int_equal(g->params.clear_n, 17);
	assert_int_equal(g->params.learn, QW_LEARN_CLIP);
	assert_int_equal(g->params.partial, QW_PARTIAL_HOLD);
	assert_int_equal(g->params.correct, 0);
	assert_true(g->params.alarms_per_day == 0.73);
	g = &c.groups[1];
	assert_int_equal(g->line, 11);
	assert_string_equal(g->channels[0], "x:1");
	assert_string_equal(g->channels[1], "y/2");
	assert_true(g->floor[0] == 0 && g->floor[1] == 0.5);
	assert_int_equal(g->params.learn, QW_LEARN_ALL);
	assert_int_equal(g->params.dynamics, QW_DYN_VAR1);
	assert_true(g->params.max_gap == 2.385);
	assert_int_equal(g->params.mode, QW_MODE_MEWMA);
	assert_true(g->params.smoothing == 0.15);
	/* Defaults where the keys are absent. */
	g = &c.groups[0];
	assert_int_equal(g->params.dynamics, QW_DYN_NONE);
	assert_true(g->params.max_gap == 0);
	assert_int_equal(g->params.mode, QW_MODE_PLAIN);
	qw_config_free(&c);
}

/* Long lists continue on indented lines; indented keys stay keys; CRLF,
 * a UTF-8 byte order mark, '#' comments and ':' separators are read. */
static void test_layout(void **state)
{
	struct qw_config c;
	const struct qw_group_conf *g;

	(void)state;
	load_ok("\xEF\xBB\xBF# plant\r\n"
		"[bus]\r\n"
		"input = >tcp://10.0.0.1:5601,\r\n"
		"        >tcp://10.0.0.2:5601\r\n"
		"  [ group g ]  ; indented header\r\n"
		"  channels = a, b\r\n"
		"      c\r\n"
		"   ; a comment between continuation lines\r\n"
		"      d,\r\n"
		"      e\r\n"
		"  floor = 0.1, 0.2,\r\n"
		"    0.3, 0.4, 0.5\r\n"
		"rate: 2.385\r\n", &c);
	assert_int_equal(c.ninputs, 2);
	assert_string_equal(c.inputs[1].addr, "tcp://10.0.0.2:5601");
	g = &c.groups[0];
	assert_string_equal(g->name, "g");
	assert_int_equal(g->line, 5);
	assert_int_equal(g->p, 5);
	assert_string_equal(g->channels[2], "c");
	assert_string_equal(g->channels[4], "e");
	assert_true(g->floor[4] == 0.5);
	assert_true(g->params.rate == 2.385);
	qw_config_free(&c);
}

/* An independent FNV-1a 64 (offset basis and prime from the FNV
 * reference) over the bytes the fingerprint is defined on. */
static uint64_t fnv1a(uint64_t h, const void *data, size_t n)
{
	const unsigned char *s = data;
	size_t i;

	for (i = 0; i < n; i++) {
		h ^= s[i];
		h *= 0x100000001b3ULL;
	}
	return h;
}

static void test_fingerprint(void **state)
{
	static const unsigned char p3[8] = {3, 0, 0, 0, 0, 0, 0, 0};
	struct qw_config c;
	uint64_t want, f[4];

	(void)state;
	/* published test vector of FNV-1a 64: "a" -> af63dc4c8601ec8c */
	assert_true(fnv1a(0xcbf29ce484222325ULL, "a", 1) ==
		    0xaf63dc4c8601ec8cULL);
	want = fnv1a(0xcbf29ce484222325ULL, p3, 8);
	want = fnv1a(want, "ab\0c\0d", 7);
	load_ok("[group g1]\nchannels = ab, c, d\n"
		"[group g2]\nchannels = a, bc, d\nfloor = 2.385\nrate = 7\n"
		"[group g3]\nchannels = ab, c, d\nhalf_life = 30s\n"
		"[group g4]\nchannels = c, ab, d\n", &c);
	for (size_t i = 0; i < 4; i++)
		f[i] = qw_config_fingerprint(&c.groups[i]);
	assert_true(f[0] == want);
	assert_true(f[0] != f[1]); /* name boundaries count */
	assert_true(f[0] == f[2]); /* settings do not */
	assert_true(f[0] != f[3]); /* order does */
	qw_config_free(&c);
}

#include "config_err_cases.h"

static void test_errors(void **state)
{
	char err[QW_CONFIG_ERR_MAX];
	struct qw_config c;
	size_t i;
	int rc;

	(void)state;
	for (i = 0; i < sizeof err_cases / sizeof err_cases[0]; i++) {
		const struct err_case *e = &err_cases[i];

		err[0] = '\0';
		rc = qw_config_load_string(e->text, "t.ini", &c, err,
					   sizeof err);
		if (rc != QW_EFORMAT ||
		    strncmp(err, e->want, strlen(e->want)) != 0)
			fail_msg("case %zu: rc %d\n  got:  %s\n  want: %s...",
				 i, rc, err, e->want);
		assert_int_equal(c.ngroups, 0); /* empty after an error */
		assert_null(c.groups);
		qw_config_free(&c);
	}
}

/* Errors that need text too long for the table: a line past inih's buffer,
 * too many groups, channels and inputs. */
static void test_error_limits(void **state)
{
	size_t cap = 300000, off = 0, i;
	char *t = malloc(cap), err[QW_CONFIG_ERR_MAX];
	struct qw_config c;

	(void)state;
	assert_non_null(t);
	off = (size_t)snprintf(t, cap, "[group a]\nchannels = x\nfloor = 0");
	for (i = 0; i < 70; i++)
		off += (size_t)snprintf(t + off, cap - off, ", 0");
	snprintf(t + off, cap - off, "\n");
	assert_int_equal(qw_config_load_string(t, "t.ini", &c, err,
					       sizeof err), QW_EFORMAT);
	assert_string_equal(err, "t.ini:3: expected lines of at most 198 "
				 "bytes; continue a long list on indented "
				 "lines");
	for (off = 0, i = 0; i <= QW_CONFIG_MAX_GROUPS; i++)
		off += (size_t)snprintf(t + off, cap - off,
					"[group g%zu]\nchannels = x\n", i);
	assert_int_equal(qw_config_load_string(t, "t.ini", &c, err,
					       sizeof err), QW_EFORMAT);
	{
		char want[QW_CONFIG_ERR_MAX];

		snprintf(want, sizeof want, "t.ini:%d: [group g%d]: expected "
			 "at most %d groups", 2 * QW_CONFIG_MAX_GROUPS + 1,
			 QW_CONFIG_MAX_GROUPS, QW_CONFIG_MAX_GROUPS);
		assert_string_equal(err, want);
	}
	off = (size_t)snprintf(t, cap, "[group a]\nchannels = c0");
	for (i = 1; i <= QW_MAX_P; i++)
		off += (size_t)snprintf(t + off, cap - off, "%s c%zu",
					i % 10 == 0 ? "\n  " : ",", i);
	snprintf(t + off, cap - off, "\n");
	assert_int_equal(qw_config_load_string(t, "t.ini", &c, err,
					       sizeof err), QW_EFORMAT);
	assert_string_equal(err, "t.ini:2: [group a] channels: expected at "
				 "most 4096 channels, got 4097");
	off = (size_t)snprintf(t, cap, "[bus]\ninput = inproc://i0");
	for (i = 1; i <= QW_CONFIG_MAX_INPUTS; i++)
		off += (size_t)snprintf(t + off, cap - off, ",\n  inproc://i%zu",
					i);
	snprintf(t + off, cap - off, "\n" G);
	assert_int_equal(qw_config_load_string(t, "t.ini", &c, err,
					       sizeof err), QW_EFORMAT);
	assert_string_equal(err, "t.ini:2: [bus] input: expected at most 16 "
				 "endpoints, got 17");
	free(t);
}

/* The largest group: QW_MAX_P channels over continuation lines. */
static void test_max_channels(void **state)
{
	size_t cap = 300000, off, i;
	char *t = malloc(cap);
	struct qw_config c;

	(void)state;
	assert_non_null(t);
	off = (size_t)snprintf(t, cap, "[group a]\nchannels = c0");
	for (i = 1; i < QW_MAX_P; i++)
		off += (size_t)snprintf(t + off, cap - off, "%s c%zu",
					i % 10 == 0 ? "\n  " : ",", i);
	snprintf(t + off, cap - off, "\nhalf_life = 1e6\n");
	load_ok(t, &c);
	assert_int_equal(c.groups[0].p, QW_MAX_P);
	assert_string_equal(c.groups[0].channels[QW_MAX_P - 1], "c4095");
	qw_config_free(&c);
	free(t);
}

static void test_file_errors(void **state)
{
	static const char nul[] = "[group a]\nchannels = x\nrate = 1\0 0\n";
	char err[QW_CONFIG_ERR_MAX], longpath[2048];
	struct qw_config c;
	char *name;

	(void)state;
	assert_int_equal(qw_config_load("/nonexistent/qw.ini", &c, err,
					sizeof err), QW_EIO);
	assert_string_equal(err, "/nonexistent/qw.ini: cannot open: No such "
				 "file or directory");
	assert_int_equal(c.ngroups, 0);
	assert_int_equal(qw_config_load("/tmp", &c, err, sizeof err), QW_EIO);
	assert_string_equal(err, "/tmp: cannot read: Is a directory");
	name = temp_file(nul, sizeof nul - 1);
	assert_int_equal(qw_config_load(name, &c, err, sizeof err),
			 QW_EFORMAT);
	assert_non_null(strstr(err, ":3: expected text, found a NUL byte"));
	unlink(name);
	memset(longpath, 'a', sizeof longpath - 1);
	longpath[sizeof longpath - 1] = '\0';
	assert_int_equal(qw_config_load(longpath, &c, err, sizeof err),
			 QW_EIO);
	assert_non_null(strstr(err, "path longer than 1023 bytes"));
	/* no message buffer, or a tiny one: still the code, no overflow */
	assert_int_equal(qw_config_load_string("[bux]\n", "t.ini", &c, NULL,
					       0), QW_EFORMAT);
	assert_int_equal(qw_config_load("/nonexistent/qw.ini", &c, NULL, 0),
			 QW_EIO);
	err[12] = 'Z';
	assert_int_equal(qw_config_load_string("[bux]\n", "t.ini", &c, err,
					       8), QW_EFORMAT);
	assert_string_equal(err, "t.ini:1");
	assert_int_equal(err[12], 'Z');
}

/* [bus] groups and -g: a daemon owns only the groups named. */
static const char shard_text[] =
	"[bus]\n"
	"groups = c,\n"
	"  a\n"
	"[group a]\nchannels = x\n"
	"[group b]\nchannels = y, z\n"
	"[group c]\nchannels = u, v, w\nfloor = 2.385, 0, 0.5\n";

static void test_owned(void **state)
{
	char err[QW_CONFIG_ERR_MAX], want[QW_CONFIG_ERR_MAX];
	struct qw_config c;
	char *name = temp_file(shard_text, strlen(shard_text));

	(void)state;
	load_ok(shard_text, &c);
	assert_int_equal(c.ngroups, 2);       /* file order, not list order */
	assert_string_equal(c.groups[0].name, "a");
	assert_string_equal(c.groups[1].name, "c");
	assert_int_equal(c.ngroups_file, 3);
	assert_int_equal(c.groups_line, 2);
	assert_int_equal(c.groups_cli, 0);
	assert_int_equal(c.groups[1].p, 3);
	assert_string_equal(c.groups[1].channels[2], "w");
	assert_ptr_equal(c.groups[1].params.floor, c.groups[1].floor);
	assert_true(c.groups[1].floor[0] == 2.385);
	assert_non_null(qw_config_group(&c, "c"));
	assert_null(qw_config_group(&c, "b"));
	qw_config_free(&c);
	/* -g replaces the file's list */
	assert_int_equal(qw_config_load_owned(name, "b", &c, err, sizeof err),
			 0);
	assert_int_equal(c.ngroups, 1);
	assert_string_equal(c.groups[0].name, "b");
	assert_int_equal(c.ngroups_file, 3);
	assert_int_equal(c.groups_line, 0);
	assert_int_equal(c.groups_cli, 1);
	qw_config_free(&c);
	assert_int_equal(qw_config_load_owned(name, "b,q", &c, err,
					      sizeof err), QW_EFORMAT);
	snprintf(want, sizeof want, "%s: -g: expected names of [group NAME] "
		 "sections of this file; 'q' is not one (groups: a, b, c)",
		 name);
	assert_string_equal(err, want);
	assert_null(c.groups);
	assert_int_equal(qw_config_load_owned(name, " ", &c, err, sizeof err),
			 QW_EFORMAT);
	assert_non_null(strstr(err, ": -g: expected a comma-separated list"));
	/* no selection: every group, ngroups_file == ngroups */
	load_ok("[group a]\nchannels = x\n[group b]\nchannels = y\n", &c);
	assert_int_equal(c.ngroups, 2);
	assert_int_equal(c.ngroups_file, 2);
	assert_int_equal(c.groups_line, 0);
	qw_config_free(&c);
#ifdef TEST_ALLOC_FAIL
	{
		long n, live, left;
		int rc;

		for (n = 0;; n++) {
			live = alloc_live;
			alloc_countdown = n;
			rc = qw_config_load_owned(name, "c", &c, err,
						  sizeof err);
			left = alloc_countdown;
			alloc_countdown = -1;
			if (rc == 0)
				assert_int_equal(c.ngroups, 1);
			else if (rc != QW_ENOMEM || c.groups != NULL)
				fail_msg("allocation %ld failing: rc %d, %s",
					 n, rc, err);
			qw_config_free(&c);
			if (alloc_live != live)
				fail_msg("allocation %ld failing: %ld blocks "
					 "leaked", n, alloc_live - live);
			if (left >= 0)
				break;
		}
	}
#endif
	unlink(name);
}

/* mqtt:// items of [bus] input go to cfg.mqtt, ZeroMQ items stay inputs;
 * the [mqtt] keys; defaults; the URL's parts and its '+' level. */
static void test_mqtt(void **state)
{
	char text[1024], err[QW_CONFIG_ERR_MAX];
	char *cred = temp_file("plant-reader\r\ns3cret pass\n", 26);
	char credpath[64];
	struct qw_config c;
	const struct qw_mqtt_conf *m = &c.mqtt;

	(void)state;
	snprintf(credpath, sizeof credpath, "%s", cred);
	snprintf(text, sizeof text,
		 "[bus]\ninput = >tcp://127.0.0.1:5601, "
		 "mqtts://[::1]:18883/site/plant/+/readings,\n"
		 "  mqtts://[::1]:18883/+/v\n"
		 "[mqtt]\nalerts = mqtts://[::1]:18883/site/+/alerts\n"
		 "qos = 1\nclient_id = qw-plant\nkeepalive = 2min\n"
		 "reconnect_min = 0.25\nreconnect_max = 1min\n"
		 "ca_file = /etc/passwd\ncredentials = %s\n"
		 "[group chiller1]\nchannels = x, y\n", credpath);
	assert_int_equal(qw_config_load_string(text, "t.ini", &c, err,
					       sizeof err), 0);
	assert_int_equal(c.ninputs, 1);
	assert_string_equal(c.inputs[0].addr, "tcp://127.0.0.1:5601");
	assert_int_equal(m->ninputs, 2);
	assert_int_equal(m->inputs[0].tls, 1);
	assert_string_equal(m->inputs[0].host, "::1");
	assert_int_equal(m->inputs[0].port, 18883);
	assert_string_equal(m->inputs[0].topic, "site/plant/+/readings");
	assert_int_equal(m->inputs[0].level, 2);
	assert_string_equal(m->inputs[1].topic, "+/v");
	assert_int_equal(m->inputs[1].level, 0);
	assert_int_equal(m->has_alerts, 1);
	assert_int_equal(m->alerts.level, 1);
	assert_int_equal(m->qos, 1);
	assert_string_equal(m->client_id, "qw-plant");
	assert_true(m->keepalive == 120.0);
	assert_true(m->reconnect_min == 0.25 && m->reconnect_max == 60.0);
	assert_string_equal(m->ca_file, "/etc/passwd");
	assert_string_equal(m->credentials, credpath);
	assert_int_equal(m->line, 2);
	qw_config_free(&c);
	/* only MQTT: no default ZeroMQ input is added; defaults */
	load_ok("[bus]\ninput = mqtt://broker.plant/p/+\n"
		"[group g]\nchannels = x\n", &c);
	assert_int_equal(c.ninputs, 0);
	assert_int_equal(m->ninputs, 1);
	assert_int_equal(m->inputs[0].port, 1883);
	assert_int_equal(m->inputs[0].tls, 0);
	assert_string_equal(m->inputs[0].host, "broker.plant");
	assert_int_equal(m->qos, 0);
	assert_int_equal(m->has_alerts, 0);
	assert_true(m->keepalive == 30.0);
	assert_true(m->reconnect_min == 0.5 && m->reconnect_max == 30.0);
	qw_config_free(&c);
	load_ok("[bus]\ninput = mqtts://h/p/+\n[group g]\nchannels = x\n",
		&c);
	assert_int_equal(m->inputs[0].port, 8883);
	qw_config_free(&c);
	/* no MQTT at all: nothing set, the ZeroMQ default input */
	load_ok("[group g]\nchannels = x\n", &c);
	assert_int_equal(m->ninputs, 0);
	assert_int_equal(c.ninputs, 1);
	qw_config_free(&c);
	unlink(credpath);
}

/* The files of [mqtt], checked apart from the parse as the daemon reads
 * them: each error names the file, the line of its key and the key. */
static void test_mqtt_files(void **state)
{
	static const char head[] = "[bus]\ninput = mqtts://127.0.0.1/p/+\n"
				   "[mqtt]\n";
	char text[512], err[QW_CONFIG_ERR_MAX], cred[64];
	struct qw_config c;
	const struct {
		const char *keys, *want;
	} bad[] = {
		{"ca_file = /nonexistent/ca.pem\n", "t.ini:4: [mqtt] ca_file: "
		 "/nonexistent/ca.pem: No such file or directory"},
		{"qos = 1\nca_file = /etc\n", "t.ini:5: [mqtt] ca_file: /etc: "
		 "expected a regular file"},
		{"cert_file = /etc/passwd\nkey_file = /etc/passwd\n",
		 "t.ini:5: [mqtt] key_file: /etc/passwd: secret file is open to "
		 "group or others (mode 0644); refusing it: chmod 600 "
		 "/etc/passwd"},
		{"credentials = /nonexistent/qw.cred\n", "t.ini:4: [mqtt] "
		 "credentials: /nonexistent/qw.cred: No such file or directory"},
	};
	size_t i;

	(void)state;
	for (i = 0; i < sizeof bad / sizeof bad[0]; i++) {
		snprintf(text, sizeof text, "%s%s[group g]\nchannels = x\n",
			 head, bad[i].keys);
		/* the parse takes the paths as they are... */
		assert_int_equal(qw_config_load_string(text, "t.ini", &c, err,
						       sizeof err), 0);
		/* ...the check refuses them */
		assert_int_equal(qw_config_mqtt_files(&c, err, sizeof err),
				 QW_EFORMAT);
		if (strcmp(err, bad[i].want) != 0)
			fail_msg("case %zu:\n  got:  %s\n  want: %s", i, err,
				 bad[i].want);
		qw_config_free(&c);
	}
	/* a credentials file open to others, then fixed */
	snprintf(cred, sizeof cred, "%s", temp_file("u\np\n", 4));
	assert_int_equal(chmod(cred, 0644), 0);
	snprintf(text, sizeof text, "%scredentials = %s\n[group g]\n"
		 "channels = x\n", head, cred);
	load_ok(text, &c);
	assert_int_equal(qw_config_mqtt_files(&c, err, sizeof err),
			 QW_EFORMAT);
	assert_non_null(strstr(err, "t.ini:4: [mqtt] credentials: "));
	assert_non_null(strstr(err, "(mode 0644); refusing it: chmod 600"));
	assert_int_equal(chmod(cred, 0600), 0);
	assert_int_equal(qw_config_mqtt_files(&c, err, sizeof err), 0);
	qw_config_free(&c);
	unlink(cred);
	/* no MQTT, nothing to check */
	load_ok("[group g]\nchannels = x\n", &c);
	assert_int_equal(qw_config_mqtt_files(&c, err, sizeof err), 0);
	qw_config_free(&c);
}

/* The credentials file: two lines (CRLF too), owner-only mode. */
static void test_mqtt_credentials(void **state)
{
	char user[QW_CONFIG_SECRET_MAX], pass[QW_CONFIG_SECRET_MAX];
	char err[QW_CONFIG_ERR_MAX], path[64];

	(void)state;
	snprintf(path, sizeof path, "%s", temp_file("u1\r\np w\r\n", 9));
	assert_int_equal(qw_config_mqtt_credentials(path, user, sizeof user,
						    pass, sizeof pass, err,
						    sizeof err), 0);
	assert_string_equal(user, "u1");
	assert_string_equal(pass, "p w");
	assert_int_equal(chmod(path, 0640), 0);
	assert_int_equal(qw_config_mqtt_credentials(path, user, sizeof user,
						    pass, sizeof pass, err,
						    sizeof err), QW_EFORMAT);
	assert_non_null(strstr(err, "credentials file is open to group or "
				    "others (mode 0640); refusing it"));
	assert_int_equal(user[0], '\0'); /* wiped */
	unlink(path);
	snprintf(path, sizeof path, "%s", temp_file("only-a-user\n", 12));
	assert_int_equal(qw_config_mqtt_credentials(path, user, sizeof user,
						    pass, sizeof pass, err,
						    sizeof err), QW_EFORMAT);
	assert_non_null(strstr(err, "expected a user name on line 1 and a "
				    "password on line 2"));
	unlink(path);
	assert_int_equal(qw_config_mqtt_credentials("/nonexistent/c", user,
						    sizeof user, pass,
						    sizeof pass, err,
						    sizeof err), QW_EFORMAT);
	assert_string_equal(err, "/nonexistent/c: No such file or directory");
}

#ifdef TEST_ALLOC_FAIL
/* Every allocation of a load fails in turn: QW_ENOMEM with "out of memory"
 * (or, for the parts that degrade, a clean result), nothing leaked. */
static void test_alloc_failure(void **state)
{
	char err[QW_CONFIG_ERR_MAX];
	struct qw_config c;
	char *name = temp_file(design_example, strlen(design_example));
	long n, live, left, nomem = 0;
	int rc;

	(void)state;
	for (n = 0;; n++) {
		live = alloc_live;
		alloc_countdown = n;
		rc = qw_config_load(name, &c, err, sizeof err);
		left = alloc_countdown; /* >= 0: the load made fewer than n+1 */
		alloc_countdown = -1;
		if (rc == 0) {
			check_design(&c);
			qw_config_free(&c);
		} else if (rc != QW_ENOMEM ||
			   strstr(err, "out of memory") == NULL ||
			   c.groups != NULL) {
			fail_msg("allocation %ld failing: rc %d, %s", n, rc, err);
		}
		if (alloc_live != live)
			fail_msg("allocation %ld failing: %ld blocks leaked", n,
				 alloc_live - live);
		nomem += rc == QW_ENOMEM;
		if (left >= 0 && n == 0) {
			unlink(name); /* a tool such as valgrind replaced the */
			skip();       /* allocator: nothing can be injected */
		}
		if (left >= 0)
			break;
	}
	print_message("  alloc: %ld allocations, each failed in turn\n", n);
	assert_true(nomem >= 5); /* file, value, channels, floor, groups... */
	unlink(name);
}
#endif

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_design_example_string),
		cmocka_unit_test(test_design_example_file),
		cmocka_unit_test(test_defaults),
		cmocka_unit_test(test_durations),
		cmocka_unit_test(test_endpoints),
		cmocka_unit_test(test_group_keys),
		cmocka_unit_test(test_layout),
		cmocka_unit_test(test_fingerprint),
		cmocka_unit_test(test_errors),
		cmocka_unit_test(test_error_limits),
		cmocka_unit_test(test_max_channels),
		cmocka_unit_test(test_file_errors),
		cmocka_unit_test(test_owned),
		cmocka_unit_test(test_mqtt),
		cmocka_unit_test(test_mqtt_credentials),
		cmocka_unit_test(test_mqtt_files),
#ifdef TEST_ALLOC_FAIL
		cmocka_unit_test(test_alloc_failure),
#endif
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
