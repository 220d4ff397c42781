/* test_capture.c: capture files (src/io/capture.c).
 *
 * Oracles: records written are read back byte for byte, across rotated
 * parts; a file cut at every byte of its last record yields the records
 * before it and then QW_ETRUNC, read with its size known or as a stream
 * of unknown size (a pipe; also a FIFO named by its path); each corrupted
 * header field is refused with its own code; the byte layout is checked
 * against capture.h by hand. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "capture.h"
#include "input.h"
#include "quadwatch.h"
#include "qwalloc.h"

#define T_RECS 9       /* records in the round-trip file */
#define T_PAYLOAD 2000 /* bytes: the reader's bound in these tests */

struct t_dir {
	char dir[64];
	char out[128];
};

static int t_setup(void **state)
{
	struct t_dir *d = calloc(1, sizeof *d);

	if (d == NULL)
		return -1;
	snprintf(d->dir, sizeof d->dir, "/tmp/qw-capture-XXXXXX");
	if (mkdtemp(d->dir) == NULL)
		return -1;
	snprintf(d->out, sizeof d->out, "%s/bus.qwcap", d->dir);
	*state = d;
	return 0;
}

static int t_teardown(void **state)
{
	struct t_dir *d = *state;
	char cmd[160];

	snprintf(cmd, sizeof cmd, "rm -rf '%s'", d->dir);
	if (system(cmd) != 0)
		return -1;
	free(d);
	return 0;
}

/* What replay's input probe (input.c) makes of path: 1 capture, 0 not,
 * or its error. */
static int t_probe(const char *path)
{
	struct qw_input in;
	int rc = qw_input_open(path, &in);

	if (rc != 0)
		return rc;
	rc = in.capture;
	qw_input_close(&in);
	return rc;
}

/* Record k: topic and payload of varied sizes, including empty ones and
 * the longest topic. */
static void t_record(unsigned k, double *time, char *topic, size_t *tlen,
		     unsigned char *payload, size_t *plen)
{
	size_t i;

	*time = 1700000000.0 + 0.1 * k + 2.385e-4;
	*tlen = k == 3 ? 0 : k == 4 ? QW_CAPTURE_TOPIC_MAX : 3 + k;
	for (i = 0; i < *tlen; i++)
		topic[i] = (char)('a' + (i + k) % 26);
	*plen = k == 5 ? 0 : (size_t)(37 * k * k + 11) % T_PAYLOAD;
	for (i = 0; i < *plen; i++)
		payload[i] = (unsigned char)(i * 31 + k);
}

static void t_write_all(const char *path, unsigned n, uint64_t rotate)
{
	struct qw_capture_writer *w;
	char topic[QW_CAPTURE_TOPIC_MAX];
	unsigned char payload[T_PAYLOAD];
	size_t tlen, plen;
	double time;
	unsigned k;

	assert_int_equal(qw_capture_writer_open(path, rotate, 0, &w), 0);
	for (k = 0; k < n; k++) {
		t_record(k, &time, topic, &tlen, payload, &plen);
		assert_int_equal(qw_capture_writer_put(w, time, topic, tlen,
						       payload, plen), 0);
	}
	assert_int_equal(qw_capture_writer_records(w), n);
	assert_int_equal(qw_capture_writer_close(w), 0);
}

/* Reads path and checks records first..; returns the count read.  With
 * stream, through qw_capture_reader_open_stream with the size unknown (as
 * a pipe is read). */
static unsigned t_read_mode(const char *path, unsigned first, int want_end,
			    int stream)
{
	struct qw_capture_reader *r;
	const struct qw_capture_rec *rec;
	char topic[QW_CAPTURE_TOPIC_MAX];
	unsigned char payload[T_PAYLOAD];
	size_t tlen, plen;
	double time;
	unsigned k = first;
	FILE *fp = NULL;
	int rc;

	if (stream) {
		fp = fopen(path, "rb");
		assert_non_null(fp);
		assert_int_equal(qw_capture_reader_open_stream(
				 fp, QW_CAPTURE_SIZE_UNKNOWN, T_PAYLOAD, &r), 0);
	} else {
		assert_int_equal(qw_capture_reader_open(path, T_PAYLOAD, &r),
				 0);
	}
	while ((rc = qw_capture_reader_next(r, &rec)) == 1) {
		t_record(k++, &time, topic, &tlen, payload, &plen);
		assert_true(rec->time == time);
		assert_int_equal(rec->tlen, tlen);
		assert_memory_equal(rec->topic, topic, tlen);
		assert_int_equal(rec->topic[tlen], '\0');
		assert_int_equal(rec->plen, plen);
		if (plen > 0)
			assert_memory_equal(rec->payload, payload, plen);
	}
	assert_int_equal(rc, want_end);
	assert_int_equal(qw_capture_reader_next(r, &rec), want_end); /* sticky */
	assert_int_equal(qw_capture_reader_count(r), k - first);
	if (stream) { /* no size to show progress against */
		uint64_t done, total;

		qw_capture_reader_progress(r, &done, &total);
		assert_true(done > 0 && total == 0);
	}
	qw_capture_reader_close(r);
	if (fp != NULL)
		fclose(fp);
	return k - first;
}

static unsigned t_read_check(const char *path, unsigned first, int want_end)
{
	return t_read_mode(path, first, want_end, 0);
}

static void test_roundtrip(void **state)
{
	struct t_dir *d = *state;
	struct qw_capture_reader *r;
	uint64_t done, total;

	t_write_all(d->out, T_RECS, 0);
	assert_int_equal(t_read_check(d->out, 0, 0), T_RECS);
	assert_int_equal(t_probe(d->out), 1);
	assert_int_equal(qw_capture_reader_open(d->out, T_PAYLOAD, &r), 0);
	assert_int_equal(qw_capture_reader_part(r), 0);
	qw_capture_reader_progress(r, &done, &total);
	assert_true(done == QW_CAPTURE_HEADER && total > done);
	qw_capture_reader_close(r);
}

/* A capture path that names a FIFO: qw_capture_reader_open reads it as a
 * stream of unknown size (input.c), every record and then a clean end,
 * while a child copies the file into the FIFO. */
static void test_fifo_path(void **state)
{
	struct t_dir *d = *state;
	char fifo[160];
	pid_t pid;
	int st;

	t_write_all(d->out, T_RECS, 0);
	snprintf(fifo, sizeof fifo, "%s/live.fifo", d->dir);
	assert_int_equal(mkfifo(fifo, 0600), 0);
	pid = fork();
	assert_true(pid >= 0);
	if (pid == 0) {
		char buf[512];
		FILE *in = fopen(d->out, "rb"), *out = fopen(fifo, "wb");
		size_t n;

		if (in == NULL || out == NULL)
			_exit(2);
		while ((n = fread(buf, 1, sizeof buf, in)) > 0)
			if (fwrite(buf, 1, n, out) != n)
				_exit(3);
		_exit(fclose(out) == 0 ? 0 : 4);
	}
	assert_int_equal(t_read_check(fifo, 0, 0), T_RECS);
	assert_int_equal(waitpid(pid, &st, 0), pid);
	assert_true(WIFEXITED(st) && WEXITSTATUS(st) == 0);
}

/* The bytes on disk, field by field, as capture.h documents them. */
static void test_layout(void **state)
{
	static const unsigned char want[] = {
		'Q', 'W', 'C', 'A', 'P', '1', 1, 0, 0, 0, 0, 0, 0, 0, 0, 0,
		/* 2.5 as float64 little endian: 0x4004000000000000 */
		0, 0, 0, 0, 0, 0, 0x04, 0x40, 3, 0, 'r', 'i', 'g',
		2, 0, 0, 0, 0xab, 0xcd,
	};
	struct t_dir *d = *state;
	struct qw_capture_writer *w;
	unsigned char got[64];
	FILE *f;

	assert_int_equal(qw_capture_writer_open(d->out, 0, 0, &w), 0);
	assert_int_equal(qw_capture_writer_put(w, 2.5, "rig", 3, "\xab\xcd", 2),
			 0);
	assert_int_equal(qw_capture_writer_close(w), 0);
	f = fopen(d->out, "rb");
	assert_non_null(f);
	assert_int_equal(fread(got, 1, sizeof got, f), sizeof want);
	fclose(f);
	assert_memory_equal(got, want, sizeof want);
}

static void test_rotation(void **state)
{
	enum { LIMIT = 1500 };
	struct t_dir *d = *state;
	struct qw_capture_writer *w;
	struct qw_capture_reader *r;
	struct stat st;
	char name[QW_CAPTURE_NAME_MAX];
	unsigned part = 0, seen = 0, n = 40, k;

	t_write_all(d->out, n, LIMIT);
	for (;; part++) {
		assert_int_equal(qw_capture_part_name(name, sizeof name, d->out,
						      part), 0);
		if (stat(name, &st) != 0)
			break;
		assert_int_equal(qw_capture_reader_open(name, T_PAYLOAD, &r), 0);
		assert_int_equal(qw_capture_reader_part(r), part);
		qw_capture_reader_close(r);
		k = t_read_check(name, seen, 0);
		/* a part passes the limit only when one record alone does */
		assert_true(st.st_size <= LIMIT || k == 1);
		assert_true(k >= 1);
		seen += k;
	}
	assert_true(part >= 10);
	assert_int_equal(seen, n);
	assert_int_equal(qw_capture_part_name(name, sizeof name, "out", 12), 0);
	assert_string_equal(name, "out.0012");
	assert_int_equal(qw_capture_part_name(name, 6, "out", 1), QW_EINVAL);
	/* parts: counted by the writer; sizes within the limit */
	assert_int_equal(qw_capture_writer_open(d->out, 100, 0, &w), 0);
	assert_int_equal(qw_capture_writer_put(w, 1.0, "g", 1, name, 500), 0);
	assert_int_equal(qw_capture_writer_put(w, 2.0, "g", 1, name, 10), 0);
	assert_int_equal(qw_capture_writer_put(w, 3.0, "g", 1, name, 10), 0);
	assert_int_equal(qw_capture_writer_parts(w), 2);
	assert_non_null(strstr(qw_capture_writer_path(w), ".0001"));
	assert_int_equal(qw_capture_writer_flush(w), 0);
	assert_int_equal(qw_capture_writer_close(w), 0);
	assert_int_equal(stat(d->out, &st), 0);
	assert_int_equal(st.st_size, 16 + 14 + 1 + 500); /* one big record */
}

static void t_cut(const char *src, const char *dst, size_t len)
{
	unsigned char buf[32768];
	FILE *f = fopen(src, "rb");
	size_t n;

	assert_non_null(f);
	n = fread(buf, 1, sizeof buf, f);
	fclose(f);
	assert_true(len <= n);
	f = fopen(dst, "wb");
	assert_non_null(f);
	assert_int_equal(fwrite(buf, 1, len, f), len);
	fclose(f);
}

static void test_truncated_every_offset(void **state)
{
	struct t_dir *d = *state;
	struct qw_capture_reader *r;
	struct stat st;
	char cut[160], topic[QW_CAPTURE_TOPIC_MAX];
	unsigned char payload[T_PAYLOAD];
	size_t tlen, plen, last, len;
	double time;

	snprintf(cut, sizeof cut, "%s/cut", d->dir);
	t_write_all(d->out, T_RECS, 0);
	assert_int_equal(stat(d->out, &st), 0);
	t_record(T_RECS - 1, &time, topic, &tlen, payload, &plen);
	last = (size_t)st.st_size - (QW_CAPTURE_REC_FIXED + tlen + plen);
	for (len = last; len < (size_t)st.st_size; len++) {
		t_cut(d->out, cut, len);
		assert_int_equal(t_read_check(cut, 0,
					      len == last ? 0 : QW_ETRUNC),
				 T_RECS - 1);
		/* the same cut read as a stream of unknown size */
		assert_int_equal(t_read_mode(cut, 0,
					     len == last ? 0 : QW_ETRUNC, 1),
				 T_RECS - 1);
	}
	assert_int_equal(t_read_mode(d->out, 0, 0, 1), T_RECS);
	for (len = 0; len < QW_CAPTURE_HEADER; len++) { /* in the header */
		t_cut(d->out, cut, len);
		assert_int_equal(qw_capture_reader_open(cut, T_PAYLOAD, &r),
				 len == 0 ? QW_EFORMAT : QW_ETRUNC);
		assert_null(r);
		assert_int_equal(t_probe(cut),
				 len >= QW_CAPTURE_MAGIC_LEN);
	}
	t_cut(d->out, cut, QW_CAPTURE_HEADER); /* a header, no records */
	assert_int_equal(t_read_check(cut, 0, 0), 0);
}

/* Patches bytes at off in a copy of a good capture; returns the open code
 * and, when it opened, the first record's code through *next. */
static int t_patch(struct t_dir *d, size_t off, const void *bytes,
		   size_t n, int *next)
{
	struct qw_capture_reader *r;
	const struct qw_capture_rec *rec;
	unsigned char buf[4096];
	FILE *f;
	size_t len;
	int rc;

	t_write_all(d->out, 3, 0);
	f = fopen(d->out, "r+b");
	assert_non_null(f);
	len = fread(buf, 1, sizeof buf, f);
	assert_true(off + n <= len);
	memcpy(buf + off, bytes, n);
	rewind(f);
	assert_int_equal(fwrite(buf, 1, len, f), len);
	fclose(f);
	rc = qw_capture_reader_open(d->out, T_PAYLOAD, &r);
	*next = 99;
	if (rc == 0) {
		*next = qw_capture_reader_next(r, &rec);
		qw_capture_reader_close(r);
	}
	return rc;
}

static void test_corrupt(void **state)
{
	static const unsigned char nan_le[8] = {0, 0, 0, 0, 0, 0, 0xf8, 0x7f};
	static const unsigned char big16[2] = {0x00, 0x01}; /* 256 */
	static const unsigned char big32[4] = {0xd1, 0x07, 0, 0}; /* 2001 */
	struct t_dir *d = *state;
	int next;

	assert_int_equal(t_patch(d, 0, "X", 1, &next), QW_EFORMAT);
	assert_int_equal(t_patch(d, 6, "\x02", 1, &next), QW_EVERSION);
	assert_int_equal(t_patch(d, 12, "\x01", 1, &next), QW_EFORMAT);
	assert_int_equal(t_patch(d, 16, nan_le, 8, &next), 0);
	assert_int_equal(next, QW_EFORMAT);
	assert_int_equal(t_patch(d, 24, big16, 2, &next), 0);
	assert_int_equal(next, QW_EFORMAT);
	/* record 0: topic of 3 bytes at 26, then plen at 29 */
	assert_int_equal(t_patch(d, 29, big32, 4, &next), 0);
	assert_int_equal(next, QW_EOVERSIZE);
	assert_int_equal(t_patch(d, 29, "\x00\x00\x00\x01", 4, &next), 0);
	assert_int_equal(next, QW_EOVERSIZE);
}

static void test_writer_refuses(void **state)
{
	struct t_dir *d = *state;
	struct qw_capture_writer *w;
	struct qw_capture_reader *r;
	char topic[QW_CAPTURE_TOPIC_MAX + 1];

	memset(topic, 't', sizeof topic);
	assert_int_equal(qw_capture_writer_open(d->out, 15, 0, &w), QW_EINVAL);
	assert_null(w);
	assert_int_equal(qw_capture_writer_open(d->out, 0, 0, &w), 0);
	assert_int_equal(qw_capture_writer_put(w, NAN, "g", 1, "", 0),
			 QW_EINVAL);
	assert_int_equal(qw_capture_writer_put(w, INFINITY, "g", 1, "", 0),
			 QW_EINVAL);
	assert_int_equal(qw_capture_writer_put(w, 1.0, topic, sizeof topic, "",
					       0), QW_EINVAL);
	assert_int_equal(qw_capture_writer_put(w, 1.0, topic, sizeof topic - 1,
					       "", 0), 0);
	assert_int_equal(qw_capture_writer_close(w), 0);
	/* exclusive: an existing file is not overwritten */
	errno = 0;
	assert_int_equal(qw_capture_writer_open(d->out, 0, 1, &w), QW_EIO);
	assert_int_equal(errno, EEXIST);
	assert_int_equal(qw_capture_writer_open("/nonexistent/dir/out", 0, 0,
						&w), QW_EIO);
	assert_int_equal(qw_capture_writer_close(NULL), 0);
	assert_int_equal(qw_capture_reader_open("/nonexistent/x", 1, &r),
			 QW_EIO);
	assert_int_equal(qw_capture_reader_open(d->dir, 1, &r), QW_EIO);
	assert_int_equal(t_probe("/nonexistent/x"), QW_EIO);
	assert_int_equal(qw_capture_detect("QWCAP1", 6), 1);
	assert_int_equal(qw_capture_detect("QWCAP", 5), 0);
	assert_int_equal(qw_capture_detect("QWB1xx", 6), 0);
	qw_capture_reader_close(NULL);
}

/* Writes 3 records over 2 parts, then reads part 0; 0 or the first
 * error. */
static int t_alloc_run(const char *out, unsigned *got)
{
	struct qw_capture_writer *w;
	struct qw_capture_reader *r;
	const struct qw_capture_rec *rec;
	int rc, rc2;

	*got = 0;
	rc = qw_capture_writer_open(out, 60, 0, &w);
	if (rc != 0)
		return rc;
	rc = qw_capture_writer_put(w, 1.5, "rig", 3, "1,2,3,4", 7);
	if (rc == 0)
		rc = qw_capture_writer_put(w, 2.5, "rig", 3, "1,2,3,4", 7);
	if (rc == 0)
		rc = qw_capture_writer_put(w, 3.5, "rig", 3, "1,2,3,4", 7);
	rc2 = qw_capture_writer_close(w);
	if (rc != 0 || rc2 != 0)
		return rc != 0 ? rc : rc2;
	rc = qw_capture_reader_open(out, 64, &r);
	if (rc != 0)
		return rc;
	while ((rc = qw_capture_reader_next(r, &rec)) == 1)
		(*got)++;
	qw_capture_reader_close(r);
	return rc;
}

/* Each allocation of writer and reader fails in turn: a clean error
 * (ENOMEM, or EIO where stdio is refused) or the right result, and
 * nothing leaks. */
static void test_allocation_failures(void **state)
{
	struct t_dir *d = *state;
	unsigned got;
	long k;
	int rc;

	if (!QWA_ACTIVE)
		skip();
	for (k = 0;; k++) {
		qwa_start(k);
		rc = t_alloc_run(d->out, &got);
		qwa_stop();
		assert_int_equal(qwa.live, 0);
		if (!qwa_injected() || rc == 0) {
			assert_int_equal(rc, 0);
			assert_int_equal(got, 1); /* 2 and 3 went to part 1 */
			if (!qwa_injected())
				break;
			continue;
		}
		assert_true(rc == QW_ENOMEM || rc == QW_EIO);
	}
	printf("# capture: %ld allocations, each failed in turn\n", k);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test_setup_teardown(test_roundtrip, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_fifo_path, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_layout, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_rotation, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_truncated_every_offset,
						t_setup, t_teardown),
		cmocka_unit_test_setup_teardown(test_corrupt, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_writer_refuses, t_setup,
						t_teardown),
		cmocka_unit_test_setup_teardown(test_allocation_failures,
						t_setup, t_teardown),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
