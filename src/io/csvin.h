/* csvin.h: the replay CSV reader (DESIGN.md, "Replay input").
 *
 * A header row names the columns; the first column is the time, as epoch
 * seconds or ISO 8601 (YYYY-MM-DDTHH:MM:SS[.frac][Z|+hh:mm|-hh:mm], a space
 * allowed for the T, no zone = UTC).  Other columns are matched to a
 * group's channels by name; columns nobody maps are never parsed, so they
 * may hold anything.  Empty cells and nan are missing (NaN).  Quoting and
 * CRLF follow RFC 4180 (libcsv); a UTF-8 byte order mark is skipped.
 *
 * The file is streamed in QW_CSVIN_CHUNK pieces, at most one completed row
 * held at a time, so memory does not grow with the file.  A malformed row
 * (wrong number of fields, bad number, bad time, bad label) is reported as
 * "FILE:LINE: reason", counted and skipped; it is never half-read.
 *
 * Use: open, map each group's channels (and the label column), then call
 * qw_csvin_next until it returns 0 (end) or < 0 (fatal: I/O error, or a
 * field longer than QW_CSVIN_FIELD_MAX).  Several files: open each in turn. */
#ifndef QW_CSVIN_H
#define QW_CSVIN_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "config.h"

#define QW_CSVIN_CHUNK (64u << 10)    /* bytes read per fread */
#define QW_CSVIN_FIELD_MAX (1u << 20) /* bytes in one field: a longer one
					 is a runaway quote, fatal */
#define QW_CSVIN_MAX_COLS 65536u      /* columns in the header */
#define QW_CSVIN_REPORT_MAX 20        /* malformed rows the default
					 reporter logs before it only counts */
#define QW_CSVIN_ERR_MAX 512          /* bytes in a message */

struct qw_csvin;

/* One row, valid until the next call of qw_csvin_next or qw_csvin_close. */
struct qw_csvin_row {
	double time;     /* epoch seconds (UTC) */
	const double *x; /* ncols values by column index; x[0] = time; NaN =
			    missing, or a column that nobody mapped */
	int label;       /* label column: 0 or 1; -1 empty or no label column */
	uint64_t line;   /* line (1-based) where the row ends */
};

/* Receives each malformed-row message "FILE:LINE: reason" (no newline).
 * NULL at open: qw_log warns of the first QW_CSVIN_REPORT_MAX. */
typedef void qw_csvin_report_fn(void *ctx, const char *msg);

/* Opens path through qw_input_open (input.h; "-" = standard input) and
 * reads its header row.  0, or QW_EIO (err says why, with the path),
 * QW_EFORMAT (no header row, or too many columns), QW_EOVERSIZE (a field
 * too long), QW_ENOMEM. */
int qw_csvin_open(const char *path, qw_csvin_report_fn *report, void *ctx,
		  struct qw_csvin **out, char *err, size_t errlen);
/* The same over an open stream (not closed by qw_csvin_close); name is
 * used in messages; size in bytes for progress (0 = unknown). */
int qw_csvin_open_stream(FILE *fp, const char *name, uint64_t size,
			 qw_csvin_report_fn *report, void *ctx,
			 struct qw_csvin **out, char *err, size_t errlen);
void qw_csvin_close(struct qw_csvin *c);

/* The header: ncols columns (>= 1), names by index, column 0 the time. */
size_t qw_csvin_ncols(const struct qw_csvin *c);
const char *qw_csvin_column(const struct qw_csvin *c, size_t j);

/* Finds each of the n channel names among columns 1..ncols-1 and writes
 * their indices to idx[n]; those columns will be parsed.  QW_EFORMAT with
 * "FILE: no column 'flow' for group 'rig'" (or "... appears twice") in err
 * on the first channel that is missing or ambiguous.  Call before the first
 * qw_csvin_next (QW_ESTATE after). */
int qw_csvin_map(struct qw_csvin *c, const char *group,
		 const char (*names)[QW_CONFIG_NAME_MAX], size_t n,
		 size_t *idx, char *err, size_t errlen);
/* Makes column `name` the 0/1 truth label of every row.  Same errors. */
int qw_csvin_label(struct qw_csvin *c, const char *name, char *err,
		   size_t errlen);

/* The next good row: 1 and *row set, 0 at the end of the file, or < 0 on
 * a fatal error (qw_csvin_error says what).  Malformed rows are reported
 * and skipped inside this call. */
int qw_csvin_next(struct qw_csvin *c, const struct qw_csvin_row **row);
/* "FILE: reason" of the last fatal error, "" if none. */
const char *qw_csvin_error(const struct qw_csvin *c);
/* Rows returned, and malformed rows skipped, so far. */
uint64_t qw_csvin_rows(const struct qw_csvin *c);
uint64_t qw_csvin_bad(const struct qw_csvin *c);
/* Bytes read so far and the file size (0 when unknown: a pipe). */
void qw_csvin_progress(const struct qw_csvin *c, uint64_t *done,
		       uint64_t *total);

/* The time parser of the first column, on s[0..len): epoch seconds (a
 * finite number) or ISO 8601 as above, ranges checked (month 1-12, the
 * month's days with leap years, hour 0-23, minute and second 0-59, zone
 * offset up to 23:59).  0 or QW_ENUMBER. */
int qw_csvin_time(const char *s, size_t len, double *t);

#endif
