/* csvin.c: the replay CSV reader (see csvin.h).
 *
 * libcsv does the quoting; this file feeds it and turns fields into
 * numbers.  To hold at most one completed row, the chunk just read is fed
 * to csv_parse in slices that end at the next CR or LF: libcsv ends a row
 * only at such a byte, so a slice completes at most one row, and the next
 * slice is fed only after the caller has taken it.  The slices also give
 * the line count (LF, CR LF and a lone CR each end a line) that messages
 * carry.  A whole line without a quote, met between rows, is split
 * here without libcsv (csvin_line, the same fields): most files quote
 * nothing, and libcsv's byte-at-a-time copy was a third of their cost.
 * Fields of columns nobody mapped are skipped unread.  The time
 * column's parser is in csvin_time.c.
 *
 * Workload: replay of recordings of up to millions of rows and tens to
 * hundreds of columns; per row, one libcsv pass over the bytes and one
 * qw_num_double per mapped cell.  Memory: the chunk, the header names, one
 * row of doubles, and libcsv's field buffer (bounded by
 * QW_CSVIN_FIELD_MAX). */
#include "csvin.h"

#include <csv.h>
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include "input.h"
#include "log.h"
#include "num.h"
#include "quadwatch.h"

#define CSVIN_BOM "\xEF\xBB\xBF" /* UTF-8 byte order mark */
#define CSVIN_BOM_LEN 3u
#define CSVIN_SHOW_MAX 40  /* bytes of a bad field quoted in a message */
#define CSVIN_NO_COL SIZE_MAX
/* libcsv.c's parser states (struct csv_parser.pstate, stable since 3.0) */
#define CSVIN_LIBCSV_ROW_NOT_BEGUN 0 /* between rows */
#define CSVIN_LIBCSV_FIELD_BEGUN 2   /* inside a field */

struct qw_csvin {
	FILE *fp;
	struct qw_input *own_in; /* opened by path: closed at close */
	char *name;              /* path, for messages */
	struct csv_parser csv;
	int csv_live;            /* csv_init succeeded */
	unsigned char *chunk;    /* QW_CSVIN_CHUNK bytes */
	size_t len, pos;         /* bytes in chunk, bytes fed */
	int finished;            /* EOF reached and csv_fini done */
	uint64_t done, total;    /* bytes read, file size (0 unknown) */
	uint64_t line;           /* line of the bytes being fed, 1-based */
	int prev_cr;             /* last slice ended with CR */
	uint64_t row_start;      /* line where the row being read began */

	char **cols;             /* ncols header names */
	size_t ncols, cols_cap;
	int header_done;
	unsigned char *use;      /* per column: 1 mapped (parsed), 0 not */
	size_t label_col;        /* CSVIN_NO_COL when none */

	double *x;               /* ncols values of the row being built */
	size_t field;            /* fields seen in this row */
	int first_empty;         /* field 0 was empty (blank line test) */
	int row_bad;             /* a field failed; why says how */
	char why[QW_CSVIN_ERR_MAX];
	int ready;               /* row holds a completed, good row */
	struct qw_csvin_row row;

	uint64_t rows, bad;      /* returned, skipped */
	int fatal;               /* enum qw_err of a fatal error, else 0 */
	char error[QW_CSVIN_ERR_MAX];
	qw_csvin_report_fn *report;
	void *ctx;
};

/* ---- messages ------------------------------------------------------------ */

static void csvin_fatal(struct qw_csvin *c, int code, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));
static void csvin_fatal(struct qw_csvin *c, int code, const char *fmt, ...)
{
	va_list ap;
	int k;

	if (c->fatal != 0)
		return;
	c->fatal = code;
	k = snprintf(c->error, sizeof c->error, "%s: ", c->name);
	va_start(ap, fmt);
	if (k > 0 && (size_t)k < sizeof c->error)
		vsnprintf(c->error + k, sizeof c->error - (size_t)k, fmt, ap);
	va_end(ap);
}

/* Records the first reason this row is bad. */
static void csvin_bad_field(struct qw_csvin *c, const char *what,
			    const char *s, size_t len)
{
	char show[CSVIN_SHOW_MAX + 1];
	size_t i, n = len < CSVIN_SHOW_MAX ? len : CSVIN_SHOW_MAX;

	if (c->row_bad)
		return;
	c->row_bad = 1;
	for (i = 0; i < n; i++)
		show[i] = isprint((unsigned char)s[i]) ? s[i] : '?';
	show[n] = '\0';
	snprintf(c->why, sizeof c->why, "%s '%s%s'", what, show,
		 len > n ? "..." : "");
}

/* Counts and reports a malformed row at line. */
static void csvin_report(struct qw_csvin *c, uint64_t line, const char *why)
{
	char msg[QW_CSVIN_ERR_MAX + 64];

	c->bad++;
	snprintf(msg, sizeof msg, "%s:%llu: %s", c->name,
		 (unsigned long long)line, why);
	if (c->report != NULL)
		c->report(c->ctx, msg);
	else if (c->bad <= QW_CSVIN_REPORT_MAX)
		qw_log(QW_LOG_WARN, "%s%s", msg,
		       c->bad == QW_CSVIN_REPORT_MAX
			       ? " (further malformed rows are counted only)"
			       : "");
}

/* ---- libcsv callbacks ---------------------------------------------------- */

static void csvin_header_field(struct qw_csvin *c, const char *s,
			       size_t len)
{
	char **cols;
	size_t cap;

	if (c->ncols >= QW_CSVIN_MAX_COLS) {
		csvin_fatal(c, QW_EFORMAT, "more than %u columns",
			    QW_CSVIN_MAX_COLS);
		return;
	}
	if (c->ncols == c->cols_cap) {
		cap = c->cols_cap ? 2 * c->cols_cap : 16;
		cols = realloc(c->cols, cap * sizeof *cols);
		if (cols == NULL) {
			csvin_fatal(c, QW_ENOMEM, "out of memory");
			return;
		}
		c->cols = cols;
		c->cols_cap = cap;
	}
	c->cols[c->ncols] = strndup(s, len);
	if (c->cols[c->ncols] == NULL) {
		csvin_fatal(c, QW_ENOMEM, "out of memory");
		return;
	}
	c->ncols++;
}

/* One cell of a data row, parsed only if its column is used. */
static void csvin_cell(struct qw_csvin *c, size_t j, const char *s,
		       size_t len)
{
	double v;
	size_t i;

	if (j == 0) {
		c->first_empty = len == 0;
		if (qw_csvin_time(s, len, &c->row.time) != 0)
			csvin_bad_field(c, "time is neither epoch seconds nor "
					"ISO 8601:", s, len);
		return;
	}
	for (i = 0; i < len && isspace((unsigned char)s[i]); i++)
		;
	if (j == c->label_col) {
		if (i == len)
			c->row.label = -1;
		else if (qw_num_double(s, len, 0, 0, &v) == 0 &&
			 (v == 0.0 || v == 1.0))
			c->row.label = (int)v;
		else
			csvin_bad_field(c, "label is not 0 or 1:", s, len);
	}
	if (!c->use[j])
		return;
	if (i == len) {
		c->x[j] = NAN;
	} else if (qw_num_double(s, len, 1, 1, &v) != 0 || isinf(v)) {
		char what[QW_CONFIG_NAME_MAX + 64];

		snprintf(what, sizeof what, "column '%.*s': not a finite "
			 "number:", QW_CONFIG_NAME_MAX, c->cols[j]);
		csvin_bad_field(c, what, s, len);
	} else {
		c->x[j] = v;
	}
}

static void csvin_on_field(void *s, size_t len, void *data)
{
	struct qw_csvin *c = data;

	if (c->fatal != 0)
		return;
	if (!c->header_done)
		csvin_header_field(c, s, len);
	else if (c->field < c->ncols)
		csvin_cell(c, c->field, s, len);
	c->field++;
}

static void csvin_header_end(struct qw_csvin *c)
{
	size_t j;

	c->header_done = 1;
	c->x = malloc(c->ncols * sizeof *c->x);
	c->use = calloc(c->ncols, 1);
	if (c->x == NULL || c->use == NULL) {
		csvin_fatal(c, QW_ENOMEM, "out of memory");
		return;
	}
	for (j = 0; j < c->ncols; j++)
		c->x[j] = NAN;
	c->row.x = c->x;
}

static void csvin_on_row(int term, void *data)
{
	struct qw_csvin *c = data;
	char why[QW_CSVIN_ERR_MAX];

	(void)term;
	if (c->fatal != 0)
		return;
	if (!c->header_done) {
		csvin_header_end(c);
	} else if (c->field == 1 && c->first_empty && c->ncols > 1) {
		/* a blank or whitespace-only line: not a row */
	} else if (c->field != c->ncols) {
		snprintf(why, sizeof why, "%zu fields, the header has %zu",
			 c->field, c->ncols);
		csvin_report(c, c->line, why);
	} else if (c->row_bad) {
		csvin_report(c, c->line, c->why);
	} else {
		c->x[0] = c->row.time;
		c->row.line = c->line;
		c->ready = 1;
	}
	c->field = 0;
	c->row_bad = 0;
	c->first_empty = 0;
}

/* ---- feeding ------------------------------------------------------------- */

/* The fast path for a whole line s[0..k) (its CR or LF last) that holds
 * no quote, met between rows: the fields libcsv would hand over, without
 * it.  Unquoted, libcsv (non-strict, default options) splits at every
 * comma, drops spaces and tabs around each field, ends the row at the CR
 * or LF, and submits nothing for a line of only spaces and tabs; this
 * does the same, so both paths give the same rows (tests/test_csvin.c
 * reads files both ways). */
static void csvin_line(struct qw_csvin *c, const unsigned char *s, size_t k)
{
	const unsigned char *p = s, *end = s + k - 1, *a, *b;

	while (p < end && (*p == ' ' || *p == '\t'))
		p++;
	if (p == end)
		return; /* blank: no row, as libcsv */
	for (;;) {
		for (a = p; a < end && (*a == ' ' || *a == '\t'); a++)
			;
		b = a < end ? memchr(a, ',', (size_t)(end - a)) : NULL;
		if (b == NULL)
			b = end;
		p = b;
		while (b > a && (b[-1] == ' ' || b[-1] == '\t'))
			b--;
		csvin_on_field((void *)(uintptr_t)a, (size_t)(b - a), c);
		if (p == end)
			break;
		p++; /* past the comma */
	}
	csvin_on_row(*end, c);
}

/* Feeds chunk[pos..] up to and including the next CR or LF. */
static void csvin_feed(struct qw_csvin *c)
{
	const unsigned char *s = c->chunk + c->pos, *e;
	size_t k, n = c->len - c->pos;
	int quote;

	/* the slice ends at the first LF or CR (memchr: the library's
	 * word-at-a-time scan, the bytes are many) */
	e = memchr(s, '\n', n);
	k = e != NULL ? (size_t)(e - s) : n;
	e = memchr(s, '\r', k);
	if (e != NULL)
		k = (size_t)(e - s);
	quote = memchr(s, '"', k) != NULL;
	if (k < n)
		k++; /* the terminator ends this slice */
	if (c->csv.pstate == CSVIN_LIBCSV_ROW_NOT_BEGUN)
		c->row_start = c->line; /* a row may begin in this slice */
	if (!quote && c->csv.pstate == CSVIN_LIBCSV_ROW_NOT_BEGUN &&
	    (s[k - 1] == '\n' || s[k - 1] == '\r')) {
		csvin_line(c, s, k);
	} else if (csv_parse(&c->csv, s, k, csvin_on_field, csvin_on_row,
			     c) != k) {
		csvin_fatal(c, QW_ENOMEM, "%s", csv_strerror(csv_error(&c->csv)));
		return;
	}
	if (csv_get_buffer_size(&c->csv) > QW_CSVIN_FIELD_MAX)
		csvin_fatal(c, QW_EOVERSIZE, "line %llu: a field longer than "
			    "%u bytes (an unterminated quote?)",
			    (unsigned long long)c->line, QW_CSVIN_FIELD_MAX);
	c->pos += k;
	/* Line count: CR and LF end a line, except the LF of a CR LF. */
	if (s[k - 1] == '\r') {
		c->line++;
		c->prev_cr = 1;
	} else if (s[k - 1] == '\n') {
		if (!(k == 1 && c->prev_cr))
			c->line++;
		c->prev_cr = 0;
	} else {
		c->prev_cr = 0;
	}
}

/* Reads the next chunk; at EOF flushes the last row from libcsv. */
static void csvin_fill(struct qw_csvin *c)
{
	size_t n = fread(c->chunk, 1, QW_CSVIN_CHUNK, c->fp);

	c->pos = 0;
	c->len = n;
	if (c->done == 0 && n >= CSVIN_BOM_LEN &&
	    memcmp(c->chunk, CSVIN_BOM, CSVIN_BOM_LEN) == 0)
		c->pos = CSVIN_BOM_LEN;
	c->done += n;
	if (n > 0)
		return;
	if (ferror(c->fp)) {
		csvin_fatal(c, QW_EIO, "read error: %s", strerror(errno));
		return;
	}
	c->finished = 1;
	/* Non-strict libcsv would hand over a quoted field still open at the
	 * end as if it were closed, swallowing the lines after its quote. */
	if (c->csv.quoted && c->csv.pstate == CSVIN_LIBCSV_FIELD_BEGUN) {
		csvin_report(c, c->row_start, "unterminated quoted field: "
			     "its quote runs to the end of the file");
		return;
	}
	csv_fini(&c->csv, csvin_on_field, csvin_on_row, c);
}

/* One unit of work: feed a slice, or read a chunk.  1 once the file is
 * exhausted, else 0. */
static int csvin_step(struct qw_csvin *c)
{
	if (c->pos < c->len) {
		csvin_feed(c);
		return 0;
	}
	if (c->finished)
		return 1;
	csvin_fill(c);
	return 0;
}

/* ---- open and close ------------------------------------------------------ */

static int csvin_begin(struct qw_csvin *c, char *err, size_t errlen)
{
	/* libcsv, not strict: a stray quote inside a field is kept as a
	 * character (a mapped cell then fails as a number, an unmapped one
	 * does not matter), so one odd cell never stops the file. */
	if (csv_init(&c->csv, 0) != 0)
		csvin_fatal(c, QW_ENOMEM, "out of memory");
	else
		c->csv_live = 1;
	while (!c->header_done && c->fatal == 0 && csvin_step(c) == 0)
		;
	if (c->fatal == 0 && !c->header_done)
		csvin_fatal(c, QW_EFORMAT, "empty file: no header row");
	if (c->fatal != 0 && errlen > 0)
		snprintf(err, errlen, "%s", c->error);
	return c->fatal;
}

int qw_csvin_open_stream(FILE *fp, const char *name, uint64_t size,
			 qw_csvin_report_fn *report, void *ctx,
			 struct qw_csvin **out, char *err, size_t errlen)
{
	struct qw_csvin *c = calloc(1, sizeof *c);
	int rc;

	*out = NULL;
	if (c == NULL)
		goto nomem;
	c->fp = fp;
	c->total = size;
	c->line = 1;
	c->label_col = CSVIN_NO_COL;
	c->row.label = -1;
	c->report = report;
	c->ctx = ctx;
	c->name = strdup(name);
	c->chunk = malloc(QW_CSVIN_CHUNK);
	if (c->name == NULL || c->chunk == NULL)
		goto nomem;
	rc = csvin_begin(c, err, errlen);
	if (rc != 0) {
		qw_csvin_close(c);
		return rc;
	}
	*out = c;
	return 0;
nomem:
	qw_csvin_close(c);
	if (errlen > 0)
		snprintf(err, errlen, "%s: out of memory", name);
	return QW_ERROR(QW_ENOMEM);
}

int qw_csvin_open(const char *path, qw_csvin_report_fn *report, void *ctx,
		  struct qw_csvin **out, char *err, size_t errlen)
{
	struct qw_input *in;
	int rc;

	*out = NULL;
	rc = qw_input_new(path, &in);
	if (rc != 0) {
		if (errlen > 0)
			snprintf(err, errlen, "%s: %s", path,
				 rc == QW_ENOMEM ? "out of memory"
				 : strerror(errno));
		return rc;
	}
	rc = qw_csvin_open_stream(in->fp, in->name, in->size, report, ctx,
				  out, err, errlen);
	if (rc != 0)
		qw_input_free(in);
	else
		(*out)->own_in = in;
	return rc;
}

void qw_csvin_close(struct qw_csvin *c)
{
	size_t j;

	if (c == NULL)
		return;
	qw_input_free(c->own_in);
	if (c->csv_live)
		csv_free(&c->csv);
	for (j = 0; j < c->ncols; j++)
		free(c->cols[j]);
	free(c->cols);
	free(c->use);
	free(c->x);
	free(c->chunk);
	free(c->name);
	free(c);
}

/* ---- columns ------------------------------------------------------------- */

size_t qw_csvin_ncols(const struct qw_csvin *c)
{
	return c->ncols;
}

const char *qw_csvin_column(const struct qw_csvin *c, size_t j)
{
	return j < c->ncols ? c->cols[j] : NULL;
}

/* The one column 1..ncols-1 called name: 0 and *col, or QW_EFORMAT with
 * the message in err. */
static int csvin_find(const struct qw_csvin *c, const char *name,
		      const char *whose, size_t *col, char *err,
		      size_t errlen)
{
	size_t j, found = CSVIN_NO_COL;

	for (j = 1; j < c->ncols; j++) {
		if (strcmp(c->cols[j], name) != 0)
			continue;
		if (found != CSVIN_NO_COL) {
			if (errlen > 0)
				snprintf(err, errlen, "%s: column '%s' %s "
					 "appears twice (columns %zu and "
					 "%zu)", c->name, name, whose,
					 found + 1, j + 1);
			return QW_ERROR(QW_EFORMAT);
		}
		found = j;
	}
	if (found == CSVIN_NO_COL) {
		if (errlen > 0)
			snprintf(err, errlen, "%s: no column '%s' %s", c->name,
				 name, whose);
		return QW_ERROR(QW_EFORMAT);
	}
	*col = found;
	return 0;
}

int qw_csvin_map(struct qw_csvin *c, const char *group,
		 const char (*names)[QW_CONFIG_NAME_MAX], size_t n,
		 size_t *idx, char *err, size_t errlen)
{
	char whose[QW_CONFIG_NAME_MAX + 16];
	size_t i;
	int rc;

	if (c->rows > 0 || c->bad > 0)
		return QW_ERROR(QW_ESTATE);
	snprintf(whose, sizeof whose, "for group '%s'", group);
	for (i = 0; i < n; i++) {
		rc = csvin_find(c, names[i], whose, &idx[i], err, errlen);
		if (rc != 0)
			return rc;
	}
	for (i = 0; i < n; i++)
		c->use[idx[i]] = 1;
	return 0;
}

int qw_csvin_label(struct qw_csvin *c, const char *name, char *err,
		   size_t errlen)
{
	if (c->rows > 0 || c->bad > 0)
		return QW_ERROR(QW_ESTATE);
	return csvin_find(c, name, "for the labels", &c->label_col, err,
			  errlen);
}

/* ---- rows ---------------------------------------------------------------- */

int qw_csvin_next(struct qw_csvin *c, const struct qw_csvin_row **row)
{
	c->ready = 0;
	while (!c->ready && c->fatal == 0 && csvin_step(c) == 0)
		;
	if (c->fatal != 0)
		return c->fatal;
	if (!c->ready)
		return 0;
	c->rows++;
	*row = &c->row;
	return 1;
}

const char *qw_csvin_error(const struct qw_csvin *c)
{
	return c->error;
}

uint64_t qw_csvin_rows(const struct qw_csvin *c)
{
	return c->rows;
}

uint64_t qw_csvin_bad(const struct qw_csvin *c)
{
	return c->bad;
}

void qw_csvin_progress(const struct qw_csvin *c, uint64_t *done,
		       uint64_t *total)
{
	*done = c->done;
	*total = c->total;
}
