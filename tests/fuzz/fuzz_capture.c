/* fuzz_capture.c: libFuzzer harness for the capture reader
 * (src/io/capture.c), and for the wire decoder behind it as replay uses
 * it.
 *
 * The bytes are a whole capture file, read through fmemopen.  Every
 * record returned must respect capture.h (topic <= 255 bytes and NUL
 * after it, payload within the bound, a finite time, offsets that only
 * grow and stay inside the file); the count must match the records
 * returned, an error must repeat (sticky), and progress must end at the
 * size on a clean end.  Each payload is also decoded as a frame of p = 3.
 * Any violation aborts.
 * Seeds: tests/fuzz/corpus/capture/.  Run through tools/fuzz. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "capture.h"
#include "quadwatch.h"
#include "wire.h"

#define FZ_MAX_PAYLOAD 4096 /* bytes: the reader's bound */
#define FZ_P 3              /* channels assumed for the payloads */
#define FZ_CAP 16           /* readings per decoded payload */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void fz_payload(const struct qw_capture_rec *rec)
{
	double t[FZ_CAP], x[FZ_CAP * FZ_P];
	struct qw_wire_batch b = {.p = FZ_P, .cap = FZ_CAP, .t = t, .x = x};

	if (qw_wire_decode(rec->payload, rec->plen, &b) != 0 && b.n != 0)
		abort();
}

static void fz_records(struct qw_capture_reader *r, size_t size)
{
	const struct qw_capture_rec *rec;
	uint64_t got = 0, last = 0, done, total;
	int rc, again;

	while ((rc = qw_capture_reader_next(r, &rec)) == 1) {
		got++;
		if (rec->tlen > QW_CAPTURE_TOPIC_MAX || rec->topic[rec->tlen] ||
		    rec->plen > FZ_MAX_PAYLOAD || !isfinite(rec->time) ||
		    rec->offset < last || rec->offset < QW_CAPTURE_HEADER ||
		    rec->offset + QW_CAPTURE_REC_FIXED + rec->tlen + rec->plen >
			    size)
			abort();
		last = rec->offset + 1;
		fz_payload(rec);
	}
	again = qw_capture_reader_next(r, &rec);
	if (again != rc || got != qw_capture_reader_count(r))
		abort();
	qw_capture_reader_progress(r, &done, &total);
	if (total != size || (rc == 0 && done != size))
		abort();
	if (rc < 0 && rc != QW_ETRUNC && rc != QW_EFORMAT &&
	    rc != QW_EOVERSIZE)
		abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	struct qw_capture_reader *r;
	FILE *fp;

	if (size == 0)
		return 0;
	fp = fmemopen((void *)(uintptr_t)data, size, "r");
	if (fp == NULL)
		return 0;
	if (qw_capture_reader_open_stream(fp, size, FZ_MAX_PAYLOAD, &r) == 0) {
		if (qw_capture_detect(data, size) != 1)
			abort();
		fz_records(r, size);
		qw_capture_reader_close(r);
	}
	fclose(fp);
	return 0;
}
