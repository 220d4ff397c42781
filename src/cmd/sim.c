/* sim.c: `quadwatch sim`, the invented chilled-water plant on the bus or in
 * a CSV file (see quadwatch-sim(1)).
 *
 *   quadwatch sim -c FILE [--to ENDPOINT | -o OUT.csv] [--rate HZ]
 *                 [--count N] [--seed S] [--format binary|text|json]
 *                 [--batch N] [--start TIME] [--scenario demo|none]
 *                 [--faults FILE] [--wait SECONDS] [-q]
 *
 * Every channel of every [group] in FILE must be a channel of the plant
 * (scenario.h); readings are dt = 1/rate-of-the-first-group seconds apart
 * in data time, from a fixed start, so the same seed gives the same stream
 * whether it is published (sim_bus.c) or written here as CSV:
 * `time,<channels of every group>,label,label_<group>...`, times in epoch
 * seconds, values at each channel's resolution, missing values empty,
 * label 1 while any fault is active, label_<group> while one is active on
 * a channel of that group.
 *
 * Workload: one scenario step and one encode per reading per group; the
 * buffers are sized before the loop. */
#include <errno.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "bus.h"
#include "cmd.h"
#include "config.h"
#include "log.h"
#include "num.h"
#include "scenario.h"
#include "sim.h"
#include "wire.h"

#define SIM_COUNT 12000        /* readings per group: 20 min at 10/s */
#define SIM_SEED 20260105      /* any fixed value; the demo's */
#define SIM_START 1767592800.0 /* epoch s: 2026-01-05T06:00:00Z */
#define SIM_BATCH 10           /* readings per binary frame */
#define SIM_BATCH_MAX 100000   /* readings per binary frame, at most */
#define SIM_WAIT 5.0           /* s to wait for subscribers */
#define SIM_LINE_MAX 1024      /* bytes in a --faults line */

static volatile sig_atomic_t sim_stop;

static void sim_on_stop(int sig)
{
	(void)sig;
	sim_stop = 1;
}

static int sim_usage(void)
{
	fprintf(stderr,
		"usage: quadwatch sim -c FILE [--to ENDPOINT | -o OUT.csv] "
		"[--rate HZ] [--count N]\n"
		"         [--seed S] [--format binary|text|json] [--batch N] "
		"[--start TIME]\n"
		"         [--scenario demo|none] [--faults FILE] "
		"[--wait SECONDS] [-q]\n"
		"         [--key FILE] [--server-key FILE]\n");
	return QW_EXIT_USAGE;
}

/* --start: epoch seconds, or ISO 8601 UTC YYYY-MM-DDTHH:MM:SS[Z]. */
static int sim_parse_start(const char *s, double *out)
{
	static const size_t at[6] = {0, 5, 8, 11, 14, 17}, len[6] = {4, 2, 2,
								    2, 2, 2};
	static const uint64_t hi[6] = {9999, 12, 31, 23, 59, 60};
	uint64_t v[6];
	struct tm tm;
	size_t i, n = strlen(s);

	if (qw_num_double(s, (size_t)-1, 0, 0, out) == 0)
		return 0;
	if ((n != 19 && !(n == 20 && s[19] == 'Z')) || s[4] != '-' ||
	    s[7] != '-' || (s[10] != 'T' && s[10] != ' ') || s[13] != ':' ||
	    s[16] != ':')
		return QW_ERROR(QW_ENUMBER);
	for (i = 0; i < 6; i++)
		if (qw_num_u64(s + at[i], len[i], i == 1 || i == 2, hi[i],
			       &v[i]) != 0)
			return QW_ERROR(QW_ENUMBER);
	memset(&tm, 0, sizeof tm);
	tm.tm_year = (int)v[0] - 1900;
	tm.tm_mon = (int)v[1] - 1;
	tm.tm_mday = (int)v[2];
	tm.tm_hour = (int)v[3];
	tm.tm_min = (int)v[4];
	tm.tm_sec = (int)v[5];
	*out = (double)timegm(&tm);
	return 0;
}

static int sim_format(const char *s, int *out)
{
	static const char *const names[] = {"binary", "text", "json"};
	int i;

	for (i = 0; i < 3; i++)
		if (strcmp(s, names[i]) == 0) {
			*out = i; /* enum qw_wire_format order */
			return 0;
		}
	return QW_ERROR(QW_EINVAL);
}

/* One option with a value; 0, or QW_EINVAL for a bad or unknown one. */
static int sim_opt(struct sim_opts *o, const char *k, const char *v)
{
	if (strcmp(k, "-c") == 0)
		o->conf = v;
	else if (strcmp(k, "--to") == 0)
		o->to = v;
	else if (strcmp(k, "-o") == 0)
		o->out = v;
	else if (strcmp(k, "--faults") == 0)
		o->faults = v;
	else if (strcmp(k, "--key") == 0)
		o->key = v;
	else if (strcmp(k, "--server-key") == 0)
		o->server_key = v;
	else if (strcmp(k, "--scenario") == 0)
		o->scenario = v;
	else if (strcmp(k, "--rate") == 0)
		return qw_num_double(v, (size_t)-1, 0, 0, &o->rate) != 0 ||
		       o->rate < 0 ? QW_EINVAL : 0;
	else if (strcmp(k, "--wait") == 0)
		return qw_num_duration(v, &(int){0}, &o->wait) != 0 ? QW_EINVAL
								    : 0;
	else if (strcmp(k, "--count") == 0)
		return qw_num_u64(v, (size_t)-1, 1, (uint64_t)1 << 40,
				  &o->count) != 0 ? QW_EINVAL : 0;
	else if (strcmp(k, "--seed") == 0)
		return qw_num_u64(v, (size_t)-1, 0, UINT64_MAX, &o->seed) != 0
			       ? QW_EINVAL : 0;
	else if (strcmp(k, "--batch") == 0)
		return qw_num_u64(v, (size_t)-1, 1, SIM_BATCH_MAX, &o->batch)
			       != 0 ? QW_EINVAL : 0;
	else if (strcmp(k, "--start") == 0)
		return sim_parse_start(v, &o->start) != 0 ? QW_EINVAL : 0;
	else if (strcmp(k, "--format") == 0)
		return sim_format(v, &o->format) != 0 ? QW_EINVAL : 0;
	else
		return QW_EINVAL;
	return 0;
}

static int sim_args(int argc, char **argv, struct sim_opts *o)
{
	int i;

	memset(o, 0, sizeof *o);
	o->count = SIM_COUNT;
	o->seed = SIM_SEED;
	o->start = SIM_START;
	o->wait = SIM_WAIT;
	o->scenario = "demo";
	o->batch = 0; /* 0: SIM_BATCH for binary */
	for (i = 1; i < argc; i++) {
		if (strcmp(argv[i], "-q") == 0) {
			o->quiet = 1;
			continue;
		}
		if (i + 1 >= argc || sim_opt(o, argv[i], argv[i + 1]) != 0) {
			fprintf(stderr, "quadwatch sim: bad option or value: "
				"%s%s%s\n", argv[i], i + 1 < argc ? " " : "",
				i + 1 < argc ? argv[i + 1] : "");
			return sim_usage();
		}
		i++;
	}
	if (o->conf == NULL || (o->to != NULL && o->out != NULL) ||
	    (strcmp(o->scenario, "demo") != 0 &&
	     strcmp(o->scenario, "none") != 0) ||
	    (o->format != QW_WIRE_BINARY && o->batch > 1))
		return sim_usage();
	if (o->batch == 0)
		o->batch = o->format == QW_WIRE_BINARY ? SIM_BATCH : 1;
	return 0;
}

/* Maps every configured channel to the plant; names the first that is
 * not one.  0 or QW_EXIT_USAGE. */
static int sim_map(struct sim *sm)
{
	size_t g, j, n = 0;
	int c;

	for (g = 0; g < sm->cfg.ngroups; g++)
		n += sm->cfg.groups[g].p;
	sm->map = calloc(n, sizeof *sm->map);
	sm->off = calloc(sm->cfg.ngroups, sizeof *sm->off);
	if (sm->map == NULL || sm->off == NULL)
		return QW_EXIT_FAIL;
	sm->nch = n;
	for (g = 0, n = 0; g < sm->cfg.ngroups; g++) {
		const struct qw_group_conf *gc = &sm->cfg.groups[g];

		sm->off[g] = n;
		for (j = 0; j < gc->p; j++, n++) {
			if ((c = qw_scn_chan_find(gc->channels[j])) < 0) {
				fprintf(stderr, "quadwatch sim: %s: [group %s]"
					" channel '%s' is not a channel of the "
					"simulated plant (see quadwatch-sim(1))"
					"\n", sm->cfg.path, gc->name,
					gc->channels[j]);
				return QW_EXIT_USAGE;
			}
			sm->map[n] = (unsigned)c;
		}
	}
	return 0;
}

/* Whether group g of the config holds plant channel c. */
int qw_sim_group_has(const struct sim *sm, size_t g, unsigned c)
{
	size_t j;

	for (j = 0; j < sm->cfg.groups[g].p; j++)
		if (sm->map[sm->off[g] + j] == c)
			return 1;
	return 0;
}

/* Checks a fault line's group against the config. */
static int sim_fault_group(const struct sim *sm, const struct qw_scn_fault *f,
			   char *err, size_t errlen)
{
	size_t g;

	if (f->group[0] == '\0')
		return 0;
	for (g = 0; g < sm->cfg.ngroups; g++)
		if (strcmp(sm->cfg.groups[g].name, f->group) == 0)
			break;
	if (g == sm->cfg.ngroups)
		snprintf(err, errlen, "group: no [group %s] in %s", f->group,
			 sm->cfg.path);
	else if (!qw_sim_group_has(sm, g, f->chan))
		snprintf(err, errlen, "channel: %s is not in group %s",
			 qw_scn_chan_name(f->chan), f->group);
	else
		return 0;
	return QW_ERROR(QW_EFORMAT);
}

/* Reads --faults FILE: one fault per line.  0 or QW_EXIT_USAGE. */
static int sim_faults_file(struct sim *sm)
{
	char line[SIM_LINE_MAX], err[256];
	FILE *f = fopen(sm->o.faults, "r");
	int lineno = 0, rc = 0;

	if (f == NULL) {
		fprintf(stderr, "quadwatch sim: %s: %s\n", sm->o.faults,
			strerror(errno));
		return QW_EXIT_USAGE;
	}
	while (rc == 0 && fgets(line, sizeof line, f) != NULL) {
		struct qw_scn_fault *ft = &sm->faults[sm->nfaults];

		lineno++;
		err[0] = '\0';
		if (strchr(line, '\n') == NULL && !feof(f))
			snprintf(err, sizeof err, "line too long");
		else if (sm->nfaults == SIM_MAX_FAULTS)
			snprintf(err, sizeof err, "more than %d faults",
				 SIM_MAX_FAULTS);
		else if ((rc = qw_scn_fault_parse(line, ft, err, sizeof err))
			 == 0 && sim_fault_group(sm, ft, err, sizeof err) == 0)
			sm->nfaults++;
		rc = err[0] != '\0' ? QW_EXIT_USAGE : 0;
		if (rc != 0)
			fprintf(stderr, "quadwatch sim: %s:%d: %s\n",
				sm->o.faults, lineno, err);
	}
	fclose(f);
	return rc;
}

/* Config, channel map, faults, time step and scenario. */
static int sim_setup(struct sim *sm)
{
	char err[QW_CONFIG_ERR_MAX];
	double rate;
	size_t g;
	int rc;

	if (qw_config_load(sm->o.conf, &sm->cfg, err, sizeof err) != 0) {
		fprintf(stderr, "quadwatch sim: %s\n", err);
		return QW_EXIT_USAGE;
	}
	if ((rc = sim_map(sm)) != 0)
		return rc;
	rate = sm->cfg.groups[0].params.rate;
	for (g = 1; g < sm->cfg.ngroups; g++)
		if (sm->cfg.groups[g].params.rate != rate)
			fprintf(stderr, "quadwatch sim: warning: groups differ "
				"in rate; every group gets %g readings/s of "
				"data time\n", rate);
	sm->dt_ns = (int64_t)llround(1e9 / rate);
	sm->dt = (double)sm->dt_ns / 1e9;
	sm->start_ns = (int64_t)llround(sm->o.start * 1e9);
	if (strcmp(sm->o.scenario, "demo") == 0)
		sm->nfaults = qw_scn_demo(sm->o.count, sm->dt, sm->faults,
					  SIM_MAX_FAULTS);
	if (sm->o.faults != NULL && (rc = sim_faults_file(sm)) != 0)
		return rc;
	sm->scn = qw_scn_alloc(sm->o.seed, sm->dt, sm->o.start, sm->faults,
			       sm->nfaults);
	return sm->scn == NULL ? QW_EXIT_FAIL : 0;
}

/* Epoch ns as seconds with 3 decimals, or 9 when ms do not suffice. */
static void sim_csv_time(FILE *f, int64_t ns)
{
	int64_t s = ns / 1000000000, r = ns % 1000000000;

	if (r % 1000000 == 0)
		fprintf(f, "%lld.%03lld", (long long)s, (long long)(r / 1000000));
	else
		fprintf(f, "%lld.%09lld", (long long)s, (long long)r);
}

static void sim_csv_header(const struct sim *sm, FILE *f)
{
	size_t g, j;

	fputs("time", f);
	for (g = 0; g < sm->cfg.ngroups; g++)
		for (j = 0; j < sm->cfg.groups[g].p; j++)
			fprintf(f, ",%s", sm->cfg.groups[g].channels[j]);
	fputs(",label", f);
	for (g = 0; g < sm->cfg.ngroups; g++)
		fprintf(f, ",label_%s", sm->cfg.groups[g].name);
	fputc('\n', f);
}

/* Label of group g (1 while a fault is active on one of its channels);
 * g = ngroups: any group. */
static int sim_label(const struct sim *sm, size_t g,
		     const unsigned char *faulted)
{
	size_t j, lo = g < sm->cfg.ngroups ? sm->off[g] : 0;
	size_t hi = g < sm->cfg.ngroups ? lo + sm->cfg.groups[g].p : sm->nch;

	for (j = lo; j < hi; j++)
		if (faulted[sm->map[j]])
			return 1;
	return 0;
}

static int sim_csv(struct sim *sm)
{
	FILE *f = strcmp(sm->o.out, "-") == 0 ? stdout
					       : fopen(sm->o.out, "w");
	double x[QW_SCN_NCHAN];
	unsigned char hit[QW_SCN_NCHAN];
	uint64_t k;
	size_t j, g;

	if (f == NULL) {
		fprintf(stderr, "quadwatch sim: %s: %s\n", sm->o.out,
			strerror(errno));
		return QW_EXIT_FAIL;
	}
	sim_csv_header(sm, f);
	for (k = 0; k < sm->o.count && !*sm->stop; k++) {
		qw_scn_next(sm->scn, x, hit);
		sim_csv_time(f, sm->start_ns + (int64_t)k * sm->dt_ns);
		for (j = 0; j < sm->nch; j++) {
			unsigned c = sm->map[j];

			if (isnan(x[c]))
				fputc(',', f);
			else
				fprintf(f, ",%.*f", (int)qw_scn_chan_decimals(c),
					x[c]);
		}
		fprintf(f, ",%d", sim_label(sm, sm->cfg.ngroups, hit));
		for (g = 0; g < sm->cfg.ngroups; g++)
			fprintf(f, ",%d", sim_label(sm, g, hit));
		fputc('\n', f);
	}
	if (ferror(f) | (f != stdout ? fclose(f) : fflush(f))) {
		fprintf(stderr, "quadwatch sim: %s: write failed\n", sm->o.out);
		return QW_EXIT_FAIL;
	}
	return *sm->stop ? QW_EXIT_FAIL : QW_EXIT_OK;
}

static void sim_free(struct sim *sm)
{
	qw_scn_free(sm->scn);
	qw_config_free(&sm->cfg);
	free(sm->map);
	free(sm->off);
	free(sm->t);
	free(sm->x);
	free(sm->seq);
	free(sm->on);
	free(sm->buf);
	free(sm);
}

static int sim_signals(void)
{
	struct sigaction sa;

	memset(&sa, 0, sizeof sa);
	sigemptyset(&sa.sa_mask);
	sa.sa_handler = sim_on_stop;
	return sigaction(SIGINT, &sa, NULL) || sigaction(SIGTERM, &sa, NULL);
}

int qw_cmd_sim(int argc, char **argv)
{
	struct sim *sm = calloc(1, sizeof *sm);
	int rc;

	if (sm == NULL)
		return QW_EXIT_FAIL;
	sm->stop = &sim_stop;
	rc = sim_args(argc, argv, &sm->o);
	if (rc == 0)
		rc = sim_setup(sm);
	if (rc == 0 && sim_signals() != 0)
		rc = QW_EXIT_FAIL;
	if (rc == 0)
		rc = sm->o.out != NULL ? sim_csv(sm) : qw_sim_bus(sm);
	sim_free(sm);
	return rc;
}
