/* fuzz_csv.c: libFuzzer harness for the replay CSV reader
 * (src/io/csvin.c, through libcsv, the ISO 8601 parser and the number
 * parser).
 *
 * The bytes are a whole CSV file, read through fmemopen.  When the header
 * opens, up to FZ_MAP of its columns with usable names are mapped as one
 * group's channels (a duplicate name must be refused with a message) and
 * the last column becomes the label column; then every row is read.  Each
 * row must hold a finite time, no +-Inf in a mapped column, a label of -1,
 * 0 or 1, and lines that never go backwards; rows and malformed rows must
 * add up to what was counted.  The bytes also go straight to
 * qw_csvin_time, whose results must be finite.  Any violation aborts.
 * Seeds: tests/fuzz/corpus/csv/.  Run through tools/fuzz. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "csvin.h"
#include "quadwatch.h"

#define FZ_MAP 8 /* columns mapped at most */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void fz_quiet(void *ctx, const char *msg)
{
	size_t *n = ctx;

	if (msg == NULL || msg[0] == '\0')
		abort();
	(*n)++;
}

/* Maps the usable column names; 0 mapped is fine. */
static size_t fz_map(struct qw_csvin *c, size_t *idx)
{
	char names[FZ_MAP][QW_CONFIG_NAME_MAX];
	char err[QW_CSVIN_ERR_MAX];
	size_t j, n = 0, nc = qw_csvin_ncols(c);
	int rc;

	for (j = 1; j < nc && n < FZ_MAP; j++) {
		const char *s = qw_csvin_column(c, j);

		if (strlen(s) < QW_CONFIG_NAME_MAX)
			strcpy(names[n++], s);
	}
	err[0] = '\0';
	rc = qw_csvin_map(c, "fz", (const char (*)[QW_CONFIG_NAME_MAX])names,
			  n, idx, err, sizeof err);
	if (rc != 0) {
		if (rc != QW_EFORMAT || strstr(err, "appears twice") == NULL)
			abort(); /* the names came from the header */
		return 0;
	}
	if (nc > 1)
		qw_csvin_label(c, qw_csvin_column(c, nc - 1), err, sizeof err);
	return n;
}

static void fz_rows(struct qw_csvin *c, const size_t *idx, size_t n,
		    const size_t *nreports)
{
	const struct qw_csvin_row *row;
	uint64_t last = 0, got = 0;
	size_t i;
	int rc;

	while ((rc = qw_csvin_next(c, &row)) == 1) {
		got++;
		if (!isfinite(row->time) || row->x[0] != row->time ||
		    row->line < last || row->label < -1 || row->label > 1)
			abort();
		last = row->line;
		for (i = 0; i < n; i++)
			if (isinf(row->x[idx[i]]))
				abort();
	}
	if (rc < 0 && qw_csvin_error(c)[0] == '\0')
		abort();
	if (got != qw_csvin_rows(c) || qw_csvin_bad(c) != *nreports)
		abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	struct qw_csvin *c;
	char err[QW_CSVIN_ERR_MAX];
	size_t idx[FZ_MAP], n, nreports = 0;
	double t;
	FILE *fp;

	if (qw_csvin_time((const char *)data, size, &t) == 0 && !isfinite(t))
		abort();
	if (size == 0)
		return 0;
	fp = fmemopen((void *)(uintptr_t)data, size, "r");
	if (fp == NULL)
		return 0;
	if (qw_csvin_open_stream(fp, "fuzz.csv", size, fz_quiet, &nreports,
				 &c, err, sizeof err) == 0) {
		n = fz_map(c, idx);
		fz_rows(c, idx, n, &nreports);
		qw_csvin_close(c);
	} else if (strncmp(err, "fuzz.csv: ", 10) != 0) {
		abort();
	}
	fclose(fp);
	return 0;
}
