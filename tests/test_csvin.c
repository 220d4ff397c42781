/* test_csvin.c: the replay CSV reader (src/io/csvin.c).
 *
 * Files are written to a temporary directory and read back.  Oracles: the
 * ISO 8601 parser against timegm(3) on random dates; a streamed file of
 * many chunks against the sums it was generated from; malformed rows
 * reported with the line a text editor would show. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "csvin.h"
#include "quadwatch.h"
#include "qwalloc.h"

#define T_MSGS 16 /* reports kept by the test reporter */

struct t_log {
	size_t n;
	char msg[T_MSGS][QW_CSVIN_ERR_MAX + 64];
};

static void t_report(void *ctx, const char *msg)
{
	struct t_log *log = ctx;

	if (log->n < T_MSGS)
		snprintf(log->msg[log->n], sizeof log->msg[0], "%s", msg);
	log->n++;
}

static char t_path[64];

/* Writes len bytes to a fresh temporary file named in t_path. */
static void t_write(const char *data, size_t len)
{
	int fd;

	snprintf(t_path, sizeof t_path, "/tmp/qw-csvin-XXXXXX");
	fd = mkstemp(t_path);
	assert_true(fd >= 0);
	assert_true(write(fd, data, len) == (ssize_t)len);
	close(fd);
}

static struct qw_csvin *t_open(const char *text, struct t_log *log)
{
	struct qw_csvin *c = NULL;
	char err[QW_CSVIN_ERR_MAX];

	memset(log, 0, sizeof *log);
	t_write(text, strlen(text));
	if (qw_csvin_open(t_path, t_report, log, &c, err, sizeof err) != 0)
		print_error("open: %s\n", err);
	assert_non_null(c);
	return c;
}

static void t_close(struct qw_csvin *c)
{
	qw_csvin_close(c);
	unlink(t_path);
}

static const char t_rig[4][QW_CONFIG_NAME_MAX] = {
	"supply_t", "return_t", "flow", "pump_amps",
};

/* ---- time ---------------------------------------------------------------- */

static void test_time_formats(void **state)
{
	static const struct {
		const char *s;
		double t;
	} ok[] = {
		{"1700000000", 1700000000.0},
		{" 1700000000.25 ", 1700000000.25},
		{"-2.385", -2.385},
		{"1.2e-5", 1.2e-5},
		{"1970-01-01T00:00:00Z", 0.0},
		{"2023-11-14T22:13:20Z", 1700000000.0},
		{"2023-11-14T22:13:20", 1700000000.0},
		{"2023-11-14 22:13:20", 1700000000.0},
		{"2023-11-14t22:13:20z", 1700000000.0},
		{"2023-11-14T22:13:20.25Z", 1700000000.25},
		{"2023-11-14T22:13:20.000001", 1700000000.000001},
		{"2023-11-15T03:43:20+05:30", 1700000000.0},
		{"2023-11-15T03:43:20+0530", 1700000000.0},
		{"2023-11-14T17:13:20-05:00", 1700000000.0},
		{"2024-02-29T00:00:00Z", 1709164800.0},
		{"2000-02-29T12:00:00Z", 951825600.0},
		{"1969-12-31T23:59:59Z", -1.0},
		{"0001-01-01T00:00:00Z", -62135596800.0},
		{"0000-01-01T00:00:00Z", -62167219200.0},
		{"0000-03-01T00:00:00Z", -62162035200.0},
		{"9999-12-31T23:59:59Z", 253402300799.0},
	};
	static const char *const bad[] = {
		"", "abc", "nan", "inf", "2023-13-01T00:00:00Z",
		"2023-00-10T00:00:00Z", "2023-02-29T00:00:00Z",
		"1900-02-29T00:00:00Z", "2023-04-31T00:00:00Z",
		"2023-01-00T00:00:00Z", "2023-01-01T24:00:00Z",
		"2023-01-01T00:60:00Z", "2023-01-01T00:00:60Z",
		"2023-01-01T00:00Z", "2023-01-01", "2023-01-01T00:00:00.Z",
		"2023-01-01T00:00:00+24:00", "2023-01-01T00:00:00+01:60",
		"2023-01-01T00:00:00+1", "2023-01-01T00:00:00+01:0",
		"2023-01-01T00:00:00ZZ", "2023-01-01T00:00:00 Z",
		"2023-01-01X00:00:00Z", "2023/01/01T00:00:00Z",
		"2023-1-01T00:00:00Z", "2023-01-01T0:00:00Z",
		"2023-01-01T00:00:00.5x",
	};
	size_t i;
	double t;

	(void)state;
	for (i = 0; i < sizeof ok / sizeof ok[0]; i++) {
		t = -12345;
		if (qw_csvin_time(ok[i].s, strlen(ok[i].s), &t) != 0 ||
		    fabs(t - ok[i].t) > 1e-6)
			print_error("'%s' -> %.9f\n", ok[i].s, t);
		assert_int_equal(qw_csvin_time(ok[i].s, strlen(ok[i].s), &t), 0);
		assert_true(fabs(t - ok[i].t) <= 1e-6); /* frac: a few ulp */
	}
	for (i = 0; i < sizeof bad / sizeof bad[0]; i++) {
		if (qw_csvin_time(bad[i], strlen(bad[i]), &t) == 0)
			print_error("accepted '%s'\n", bad[i]);
		assert_int_equal(qw_csvin_time(bad[i], strlen(bad[i]), &t),
				 QW_ENUMBER);
	}
}

/* The calendar against the C library's timegm on random dates. */
static void test_time_vs_timegm(void **state)
{
	char s[64];
	struct tm tm;
	uint64_t r = 2385;
	double t;
	int i;

	(void)state;
	for (i = 0; i < 20000; i++) {
		r = r * UINT64_C(6364136223846793005) + 1442695040888963407u;
		memset(&tm, 0, sizeof tm);
		tm.tm_year = (int)((r >> 33) % 10000) - 1900; /* 0000-9999 */
		tm.tm_mon = (int)((r >> 20) % 12);
		tm.tm_mday = (int)((r >> 13) % 28) + 1 + (int)((r >> 7) % 4);
		tm.tm_hour = (int)((r >> 40) % 24);
		tm.tm_min = (int)((r >> 50) % 60);
		tm.tm_sec = (int)((r >> 56) % 60);
		snprintf(s, sizeof s, "%04d-%02d-%02dT%02d:%02d:%02dZ",
			 tm.tm_year + 1900, tm.tm_mon + 1, tm.tm_mday,
			 tm.tm_hour, tm.tm_min, tm.tm_sec);
		{
			struct tm check = tm;
			time_t want = timegm(&check);
			/* timegm normalises 31 April to 1 May: such a date is
			 * invalid and must be refused. */
			int valid = check.tm_mday == tm.tm_mday;
			int rc = qw_csvin_time(s, strlen(s), &t);

			assert_int_equal(rc, valid ? 0 : QW_ENUMBER);
			if (valid)
				assert_true(t == (double)want);
		}
	}
}

/* ---- files --------------------------------------------------------------- */

static void test_basic_mapping(void **state)
{
	static const char text[] =
		"time,flow,note,supply_t,pump_amps,return_t,spare\n"
		"1700000000,2.385,pump A ok,7.1,,12.5,x\n"
		"1700000001.5,nan,\"quoted, with comma\",7.25,3.5,12.25,\n"
		"2023-11-14T22:13:22Z,\"2.5\",\"multi\nline\",\"\",3.75,NaN,y\n";
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c = t_open(text, &log);
	size_t idx[4];
	char err[QW_CSVIN_ERR_MAX];

	(void)state;
	assert_int_equal(qw_csvin_ncols(c), 7);
	assert_string_equal(qw_csvin_column(c, 0), "time");
	assert_string_equal(qw_csvin_column(c, 6), "spare");
	assert_null(qw_csvin_column(c, 7));
	assert_int_equal(qw_csvin_map(c, "rig", t_rig, 4, idx, err, sizeof err),
			 0);
	assert_true(idx[0] == 3 && idx[1] == 5 && idx[2] == 1 && idx[3] == 4);
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_true(row->time == 1700000000.0 && row->x[0] == row->time);
	assert_true(row->x[3] == 7.1 && row->x[5] == 12.5 && row->x[1] == 2.385);
	assert_true(isnan(row->x[4]));
	assert_true(isnan(row->x[2]) && isnan(row->x[6])); /* not mapped */
	assert_int_equal(row->label, -1);
	assert_int_equal(row->line, 2);
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_true(row->time == 1700000001.5 && isnan(row->x[1]));
	assert_true(row->x[4] == 3.5 && row->x[5] == 12.25);
	assert_int_equal(row->line, 3);
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_true(row->time == 1700000002.0 && row->x[1] == 2.5);
	assert_true(isnan(row->x[3]) && isnan(row->x[5]));
	assert_int_equal(row->line, 5); /* the row ends on line 5 */
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(qw_csvin_rows(c), 3);
	assert_int_equal(qw_csvin_bad(c), 0);
	assert_int_equal(log.n, 0);
	assert_int_equal(qw_csvin_map(c, "rig", t_rig, 4, idx, err, sizeof err),
			 QW_ESTATE);
	t_close(c);
}

static void test_missing_and_duplicate_column(void **state)
{
	struct t_log log;
	struct qw_csvin *c = t_open("time,supply_t,return_t,pump_amps,"
				    "supply_t\n1,2,3,4,5\n", &log);
	char err[QW_CSVIN_ERR_MAX], want[QW_CSVIN_ERR_MAX + 64];
	size_t idx[4];

	(void)state;
	assert_int_equal(qw_csvin_map(c, "rig", t_rig + 1, 3, idx, err,
				      sizeof err), QW_EFORMAT);
	snprintf(want, sizeof want, "%s: no column 'flow' for group 'rig'",
		 t_path);
	assert_string_equal(err, want);
	assert_int_equal(qw_csvin_map(c, "rig", t_rig, 1, idx, err, sizeof err),
			 QW_EFORMAT);
	snprintf(want, sizeof want, "%s: column 'supply_t' for group 'rig' "
		 "appears twice (columns 2 and 5)", t_path);
	assert_string_equal(err, want);
	assert_int_equal(qw_csvin_label(c, "fault", err, sizeof err),
			 QW_EFORMAT);
	assert_non_null(strstr(err, "no column 'fault' for the labels"));
	t_close(c);
}

static void test_malformed_rows_reported(void **state)
{
	static const char text[] =
		"time,flow,pump_amps\n"                /* 1 */
		"1700000000,1.5,2\n"                   /* 2 good */
		"\n"                                   /* 3 blank, skipped */
		"1700000001,abc,2\n"                   /* 4 bad number */
		"1700000002,1.5,2\n"                   /* 5 good */
		"1700000003,1.5\n"                     /* 6 too few */
		"yesterday,1.5,2\n"                    /* 7 bad time */
		"1700000004,1.5,2,9\n"                 /* 8 too many */
		"1700000005,inf,2\n"                   /* 9 not finite */
		"1700000006,1.5,0x10\n"                /* 10 hex */
		"1700000007,1.5,2";                    /* 11 good, no LF */
	static const char *const want[] = {
		":4: column 'flow': not a finite number: 'abc'",
		":6: 2 fields, the header has 3",
		":7: time is neither epoch seconds nor ISO 8601: 'yesterday'",
		":8: 4 fields, the header has 3",
		":9: column 'flow': not a finite number: 'inf'",
		":10: column 'pump_amps': not a finite number: '0x10'",
	};
	static const char names[2][QW_CONFIG_NAME_MAX] = {"flow", "pump_amps"};
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c = t_open(text, &log);
	char err[QW_CSVIN_ERR_MAX], full[QW_CSVIN_ERR_MAX + 64];
	size_t idx[2], i;
	uint64_t lines[3] = {2, 5, 11};

	(void)state;
	assert_int_equal(qw_csvin_map(c, "rig", names, 2, idx, err, sizeof err),
			 0);
	for (i = 0; i < 3; i++) {
		assert_int_equal(qw_csvin_next(c, &row), 1);
		assert_int_equal(row->line, lines[i]);
	}
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(qw_csvin_bad(c), 6);
	assert_int_equal(log.n, 6);
	for (i = 0; i < 6; i++) {
		snprintf(full, sizeof full, "%s%s", t_path, want[i]);
		if (strcmp(log.msg[i], full) != 0)
			print_error("got '%s'\nwant '%s'\n", log.msg[i], full);
		assert_string_equal(log.msg[i], full);
	}
	t_close(c);
}

/* ---- the unquoted fast path against libcsv -------------------------------- */

#define T_AGREE_LINES 3000  /* random lines per file */
#define T_AGREE_SEED 2385u  /* fixed seed: failures reproduce */
#define T_AGREE_COLS 4      /* time, a, b, label */

/* One random cell text: numbers, blanks around them, empty, nan, junk. */
static const char *t_cell(unsigned r)
{
	static const char *const cells[] = {
		"2.385", " 48.9029", "-291.29\t", "\t 7e-3 ", "", "  ", "nan",
		"1.5e400", "abc", "0x10", "12345678901234567890.5", "-0",
		"1", "0",
	};
	return cells[r % (sizeof cells / sizeof cells[0])];
}

/* Appends one random line to a (unquoted) and b (every field quoted, the
 * blanks around it kept outside the quotes, where libcsv drops them). */
static void t_agree_line(unsigned (*rnd)(void), char *a, char *b,
			 size_t *na, size_t *nb, size_t cap, unsigned ln)
{
	static const char *const ends[] = {"\n", "\r\n", "\r"};
	unsigned kind = rnd() % 16, nf = T_AGREE_COLS, j;
	const char *end = ends[rnd() % 3];

	if (kind == 0 || kind == 1) { /* blank, or blanks only */
		const char *bl = kind == 0 ? "" : " \t ";
		*na += (size_t)snprintf(a + *na, cap - *na, "%s%s", bl, end);
		*nb += (size_t)snprintf(b + *nb, cap - *nb, "%s%s", bl, end);
		return;
	}
	if (kind == 2)
		nf = T_AGREE_COLS - 1 + 2 * (rnd() % 2); /* one too few/many */
	for (j = 0; j < nf; j++) {
		char cell[64];
		const char *sep = j + 1 < nf ? "," : end;
		size_t lo, hi;

		if (j == 0)
			snprintf(cell, sizeof cell, " %u.5 ", 1700000000u + ln);
		else if (j == 3)
			snprintf(cell, sizeof cell, "%s", rnd() % 8 ? "0" :
				 rnd() % 2 ? " 1\t" : "");
		else
			snprintf(cell, sizeof cell, "%s", t_cell(rnd()));
		*na += (size_t)snprintf(a + *na, cap - *na, "%s%s", cell, sep);
		for (lo = 0; cell[lo] == ' ' || cell[lo] == '\t'; lo++)
			;
		for (hi = strlen(cell); hi > lo && (cell[hi - 1] == ' ' ||
						    cell[hi - 1] == '\t'); hi--)
			;
		*nb += (size_t)snprintf(b + *nb, cap - *nb, "%.*s\"%.*s\"%s%s",
					(int)lo, cell, (int)(hi - lo),
					cell + lo, cell + hi, sep);
	}
}

static unsigned t_agree_state;
static unsigned t_agree_rnd(void)
{
	/* Numerical Recipes' LCG; the high bits are the better ones */
	t_agree_state = t_agree_state * 1664525u + 1013904223u;
	return t_agree_state >> 16;
}

/* Reads text to the end: rows (time, a, b, label, line) into out, the
 * malformed-row messages into log.  Returns the rows read. */
static size_t t_agree_read(const char *text, double (*out)[5], size_t cap,
			   struct t_log *log)
{
	static const char names[2][QW_CONFIG_NAME_MAX] = {"a", "b"};
	char err[QW_CSVIN_ERR_MAX];
	const struct qw_csvin_row *row;
	struct qw_csvin *c = t_open(text, log);
	size_t idx[2], n = 0;

	assert_int_equal(qw_csvin_map(c, "g", names, 2, idx, err, sizeof err),
			 0);
	assert_int_equal(qw_csvin_label(c, "label", err, sizeof err), 0);
	while (qw_csvin_next(c, &row) == 1 && n < cap) {
		out[n][0] = row->time;
		out[n][1] = row->x[idx[0]];
		out[n][2] = row->x[idx[1]];
		out[n][3] = row->label;
		out[n][4] = (double)row->line;
		n++;
	}
	assert_int_equal(qw_csvin_bad(c), log->n);
	t_close(c);
	return n;
}

/* The same random file unquoted (whole lines split by csvin_line) and
 * with every field quoted (every line through libcsv) gives the same
 * rows, values bit for bit, the same line numbers and the same
 * malformed-row count and messages. */
static void test_fast_path_agrees(void **state)
{
	size_t cap = 64 * (T_AGREE_LINES + 2), na = 0, nb = 0, ra, rb, i;
	char *a = malloc(cap), *b = malloc(cap);
	double (*xa)[5] = calloc(T_AGREE_LINES, sizeof *xa);
	double (*xb)[5] = calloc(T_AGREE_LINES, sizeof *xb);
	struct t_log la, lb;
	unsigned ln;

	(void)state;
	assert_true(a && b && xa && xb);
	t_agree_state = T_AGREE_SEED;
	na = (size_t)snprintf(a, cap, "time,a,b,label\n");
	nb = (size_t)snprintf(b, cap, "\"time\",\"a\",b,label\n");
	for (ln = 0; ln < T_AGREE_LINES; ln++)
		t_agree_line(t_agree_rnd, a, b, &na, &nb, cap, ln);
	assert_null(strchr(a, '"'));
	ra = t_agree_read(a, xa, T_AGREE_LINES, &la);
	rb = t_agree_read(b, xb, T_AGREE_LINES, &lb);
	print_message("# %zu rows, %zu malformed, both ways\n", ra, la.n);
	assert_true(ra > T_AGREE_LINES / 4 && la.n > 0);
	assert_int_equal(ra, rb);
	assert_int_equal(la.n, lb.n);
	assert_memory_equal(xa, xb, ra * sizeof *xa);
	for (i = 0; i < la.n && i < T_MSGS; i++) {
		/* the file names differ; the rest must not */
		const char *ma = strchr(la.msg[i], ':');
		const char *mb = strchr(lb.msg[i], ':');

		assert_non_null(ma);
		assert_non_null(mb);
		assert_string_equal(ma, mb);
	}
	free(a);
	free(b);
	free(xa);
	free(xb);
}

/* A column nobody maps may hold anything; a mapped one may not. */
static void test_unmapped_not_parsed(void **state)
{
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c = t_open("time,flow,comment\n"
				    "1,2.385,not a number\n", &log);

	(void)state;
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_true(isnan(row->x[1]) && isnan(row->x[2]));
	t_close(c);
}

static void test_crlf_bom_labels(void **state)
{
	static const char text[] =
		"\xEF\xBB\xBFtime,flow,fault\r\n"
		"1700000000,1.5,0\r\n"
		"1700000001,1.75,1\r\n"
		"1700000002,,\r\n"
		"1700000003,2,1.0\r\n"
		"1700000004,2,2\r\n"
		"1700000005,2,yes\r\n"
		"\r\n"
		"1700000006,2,0\r\n";
	static const char names[1][QW_CONFIG_NAME_MAX] = {"flow"};
	static const int labels[5] = {0, 1, -1, 1, 0};
	static const uint64_t lines[5] = {2, 3, 4, 5, 9};
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c = t_open(text, &log);
	char err[QW_CSVIN_ERR_MAX];
	size_t idx[1], i;

	(void)state;
	assert_string_equal(qw_csvin_column(c, 0), "time"); /* no BOM */
	assert_int_equal(qw_csvin_map(c, "g", names, 1, idx, err, sizeof err),
			 0);
	assert_int_equal(qw_csvin_label(c, "fault", err, sizeof err), 0);
	for (i = 0; i < 5; i++) {
		assert_int_equal(qw_csvin_next(c, &row), 1);
		assert_int_equal(row->label, labels[i]);
		assert_int_equal(row->line, lines[i]);
	}
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(log.n, 2);
	assert_non_null(strstr(log.msg[0], ":6: label is not 0 or 1: '2'"));
	assert_non_null(strstr(log.msg[1], ":7: label is not 0 or 1: 'yes'"));
	t_close(c);
}

static void test_unterminated_quote(void **state)
{
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c = t_open("time,flow\n1,2\n2,\"3\n3,4\n", &log);

	(void)state;
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(qw_csvin_bad(c), 1);
	assert_int_equal(log.n, 1);
	assert_non_null(strstr(log.msg[0], ":3: unterminated quoted field"));
	t_close(c);
	/* a closed quote at the very end, without a newline, is fine */
	c = t_open("time,flow\n1,\"2\"", &log);
	assert_int_equal(qw_csvin_next(c, &row), 1);
	assert_int_equal(row->line, 2);
	assert_int_equal(qw_csvin_next(c, &row), 0);
	assert_int_equal(qw_csvin_bad(c), 0);
	t_close(c);
}

/* A runaway quote over more than QW_CSVIN_FIELD_MAX bytes is fatal. */
static void test_field_too_long(void **state)
{
	size_t n = QW_CSVIN_FIELD_MAX + 2 * QW_CSVIN_CHUNK, i;
	char *text = malloc(n + 1);
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c;

	(void)state;
	assert_non_null(text);
	memcpy(text, "time,flow\n1,\"", 13);
	for (i = 13; i < n; i++)
		text[i] = i % 80 == 0 ? '\n' : 'a';
	text[n] = '\0';
	c = t_open(text, &log);
	assert_int_equal(qw_csvin_next(c, &row), QW_EOVERSIZE);
	assert_non_null(strstr(qw_csvin_error(c), "longer than"));
	assert_int_equal(qw_csvin_next(c, &row), QW_EOVERSIZE);
	t_close(c);
	free(text);
}

static void test_open_errors(void **state)
{
	struct qw_csvin *c = (struct qw_csvin *)&c;
	char err[QW_CSVIN_ERR_MAX];

	(void)state;
	assert_int_equal(qw_csvin_open("/nonexistent/qw.csv", NULL, NULL, &c,
				       err, sizeof err), QW_EIO);
	assert_null(c);
	assert_non_null(strstr(err, "/nonexistent/qw.csv: "));
	t_write("", 0);
	assert_int_equal(qw_csvin_open(t_path, NULL, NULL, &c, err, sizeof err),
			 QW_EFORMAT);
	assert_non_null(strstr(err, "no header row"));
	unlink(t_path);
	t_write("\n\r\n\n", 4);
	assert_int_equal(qw_csvin_open(t_path, NULL, NULL, &c, err, sizeof err),
			 QW_EFORMAT);
	unlink(t_path);
	qw_csvin_close(NULL);
}

static double t_now(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* Many chunks: every row arrives once, sums match, progress reaches the
 * size, and the default reporter (qw_log) takes the malformed rows,
 * falling silent after QW_CSVIN_REPORT_MAX of them. */
static void test_streaming_large(void **state)
{
	enum { ROWS = 150000, BAD_EVERY = 5003 };
	static const char names[2][QW_CONFIG_NAME_MAX] = {"b", "a"};
	FILE *f;
	const struct qw_csvin_row *row;
	struct qw_csvin *c;
	char err[QW_CSVIN_ERR_MAX];
	double want_a = 0, want_b = 0, sum_a = 0, sum_b = 0, t0, secs;
	int lines_ok = 1;
	uint64_t done, total, nbad = 0, got = 0;
	size_t idx[2];
	int i;

	(void)state;
	snprintf(t_path, sizeof t_path, "/tmp/qw-csvin-XXXXXX");
	i = mkstemp(t_path);
	assert_true(i >= 0);
	f = fdopen(i, "w");
	fprintf(f, "time,a,\"b\",c\n");
	for (i = 0; i < ROWS; i++) {
		double a = 0.001 * i, b = 2.385 * (i % 97);

		if (i % BAD_EVERY == 0) {
			fprintf(f, "%d,oops,%g,z\n", i, b);
			nbad++;
			continue;
		}
		fprintf(f, "%d.5,%.17g,\"%.17g\",%s\n", i, a, b,
			i % 3 ? "x" : "\"long, quoted\"");
		want_a += a;
		want_b += b;
	}
	fclose(f);
	assert_int_equal(qw_csvin_open(t_path, NULL, NULL, &c, err, sizeof err),
			 0);
	assert_int_equal(qw_csvin_map(c, "g", names, 2, idx, err, sizeof err),
			 0);
	t0 = t_now();
	while (qw_csvin_next(c, &row) == 1) {
		sum_a += row->x[idx[1]];
		sum_b += row->x[idx[0]];
		/* row i (time i.5) is on line i + 2 */
		if (row->line != (uint64_t)row->time + 2)
			lines_ok = 0;
		got++;
	}
	secs = t_now() - t0;
	printf("# csvin: %.2f M rows/s (4 columns, 2 mapped)\n",
	       (double)(got + nbad) / secs / 1e6);
	assert_true(lines_ok);
	qw_csvin_progress(c, &done, &total);
	assert_true(done == total && total > 40 * QW_CSVIN_CHUNK);
	assert_int_equal(got, ROWS - nbad);
	assert_int_equal(qw_csvin_bad(c), nbad);
	assert_true(sum_a == want_a && sum_b == want_b);
	t_close(c);
}

/* Each allocation of open, map, read and close fails in turn: the error
 * is ENOMEM (EIO when fopen is the one refused) or the run completes
 * correctly, and nothing leaks. */
static void test_allocation_failures(void **state)
{
	static const char names[2][QW_CONFIG_NAME_MAX] = {"flow", "pump_amps"};
	const struct qw_csvin_row *row;
	struct t_log log;
	struct qw_csvin *c;
	char err[QW_CSVIN_ERR_MAX];
	size_t idx[2];
	long k;
	int rc, rows;

	(void)state;
	if (!QWA_ACTIVE)
		skip();
	t_write("time,flow,pump_amps,note\n1,2.385,3,\"a, b\"\n"
		"2,x,3,c\n3,4,5,d\n", 58);
	for (k = 0;; k++) {
		memset(&log, 0, sizeof log);
		rows = 0;
		qwa_start(k);
		rc = qw_csvin_open(t_path, t_report, &log, &c, err, sizeof err);
		if (rc == 0) {
			rc = qw_csvin_map(c, "rig", names, 2, idx, err,
					  sizeof err);
			while (rc == 0 && (rc = qw_csvin_next(c, &row)) == 1) {
				rows++;
				rc = 0;
			}
			qw_csvin_close(c);
		}
		qwa_stop();
		assert_int_equal(qwa.live, 0);
		/* a failure survived (stdio falls back to no buffer) must
		 * still give the whole, right answer */
		if (!qwa_injected() || rc == 0) {
			assert_int_equal(rc, 0);
			assert_int_equal(rows, 2);
			assert_int_equal(log.n, 1);
			if (!qwa_injected())
				break;
			continue;
		}
		assert_true(rc == QW_ENOMEM || rc == QW_EIO);
	}
	printf("# csvin: %ld allocations, each failed in turn\n", k);
	unlink(t_path);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_time_formats),
		cmocka_unit_test(test_time_vs_timegm),
		cmocka_unit_test(test_basic_mapping),
		cmocka_unit_test(test_missing_and_duplicate_column),
		cmocka_unit_test(test_malformed_rows_reported),
		cmocka_unit_test(test_unmapped_not_parsed),
		cmocka_unit_test(test_fast_path_agrees),
		cmocka_unit_test(test_crlf_bom_labels),
		cmocka_unit_test(test_unterminated_quote),
		cmocka_unit_test(test_field_too_long),
		cmocka_unit_test(test_open_errors),
		cmocka_unit_test(test_streaming_large),
		cmocka_unit_test(test_allocation_failures),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
