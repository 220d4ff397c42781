/* capture.c: capture files written by `quadwatch record` and read by
 * `quadwatch replay` (format and rotation in capture.h).
 *
 * Writer: records go through a stdio buffer of CAPTURE_BUF bytes; a part
 * is fsync'ed when it is closed (on rotation and at the end), so a crash
 * loses at most the open part's unflushed tail, which the reader then
 * reports as a cut last record.  Reader: reads sequentially with every
 * length checked against the bytes left before anything is read or copied.
 *
 * Workload: the recorder sees the daemon's input rate, up to some 10^5
 * frames a second of a few kB; per record four small fwrites, no
 * allocation.  Byte order is converted only here. */
#include "capture.h"

#include <endian.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "bytes.h"
#include "input.h"
#include "quadwatch.h"

#define CAPTURE_BUF (64u << 10) /* bytes of stdio buffer per writer */
#define CAPTURE_MODE 0644       /* new files: rw-r--r-- before umask */
#define CAPTURE_OFF_VERSION 6u  /* header offsets, bytes (capture.h) */
#define CAPTURE_OFF_PART 8u
#define CAPTURE_OFF_FLAGS 12u
#define CAPTURE_TIME_BYTES 8u   /* record fields, bytes */
#define CAPTURE_TLEN_BYTES 2u
#define CAPTURE_PLEN_BYTES 4u

/* ---- writer -------------------------------------------------------------- */

struct qw_capture_writer {
	char base[QW_CAPTURE_NAME_MAX]; /* OUT as given */
	char path[QW_CAPTURE_NAME_MAX]; /* the part being written */
	FILE *fp;                       /* NULL after a failed rotation */
	int exclusive;
	uint64_t rotate;                /* bytes; 0 = never */
	uint64_t size;                  /* bytes in the current part */
	uint64_t in_part, records;      /* records in this part, in all */
	unsigned part;                  /* current part number */
};

int qw_capture_part_name(char *buf, size_t cap, const char *base,
			 unsigned k)
{
	int n = k == 0 ? snprintf(buf, cap, "%s", base)
		       : snprintf(buf, cap, "%s.%04u", base, k);

	if (n < 0 || (size_t)n >= cap)
		return QW_ERROR(QW_EINVAL);
	return 0;
}

/* Opens part w->part and writes its header. */
static int capture_part_open(struct qw_capture_writer *w)
{
	unsigned char h[QW_CAPTURE_HEADER] = {0};
	int fd, flags = O_WRONLY | O_CREAT | O_CLOEXEC;

	if (qw_capture_part_name(w->path, sizeof w->path, w->base, w->part))
		return QW_ERROR(QW_EINVAL);
	flags |= w->exclusive ? O_EXCL : O_TRUNC;
	fd = open(w->path, flags, CAPTURE_MODE);
	if (fd < 0)
		return QW_ERROR(QW_EIO);
	w->fp = fdopen(fd, "wb");
	if (w->fp == NULL) {
		close(fd);
		return QW_ERROR(QW_EIO);
	}
	setvbuf(w->fp, NULL, _IOFBF, CAPTURE_BUF);
	memcpy(h, QW_CAPTURE_MAGIC, QW_CAPTURE_MAGIC_LEN);
	qw_le_put16(h + CAPTURE_OFF_VERSION, QW_CAPTURE_VERSION);
	qw_le_put32(h + CAPTURE_OFF_PART, w->part);
	qw_le_put32(h + CAPTURE_OFF_FLAGS, 0);
	if (fwrite(h, sizeof h, 1, w->fp) != 1)
		return QW_ERROR(QW_EIO);
	w->size = QW_CAPTURE_HEADER;
	w->in_part = 0;
	return 0;
}

/* Flush, fsync, close the current part; 0 or QW_EIO (errno kept). */
static int capture_part_close(struct qw_capture_writer *w)
{
	int rc = 0, err = 0;

	if (w->fp == NULL)
		return 0;
	if (fflush(w->fp) != 0 || fsync(fileno(w->fp)) != 0) {
		rc = QW_ERROR(QW_EIO);
		err = errno;
	}
	if (fclose(w->fp) != 0 && rc == 0) {
		rc = QW_ERROR(QW_EIO);
		err = errno;
	}
	w->fp = NULL;
	if (rc != 0)
		errno = err;
	return rc;
}

int qw_capture_writer_open(const char *path, uint64_t rotate_bytes,
			   int exclusive, struct qw_capture_writer **out)
{
	struct qw_capture_writer *w;
	int rc, err;

	*out = NULL;
	if (strlen(path) + sizeof ".4294967295" > QW_CAPTURE_NAME_MAX ||
	    (rotate_bytes > 0 && rotate_bytes < QW_CAPTURE_HEADER))
		return QW_ERROR(QW_EINVAL);
	w = calloc(1, sizeof *w);
	if (w == NULL)
		return QW_ERROR(QW_ENOMEM);
	memcpy(w->base, path, strlen(path) + 1);
	w->exclusive = exclusive;
	w->rotate = rotate_bytes;
	rc = capture_part_open(w);
	if (rc != 0) {
		err = errno;
		if (w->fp != NULL)
			fclose(w->fp);
		free(w);
		errno = err;
		return rc;
	}
	*out = w;
	return 0;
}

int qw_capture_writer_put(struct qw_capture_writer *w, double time,
			  const void *topic, size_t tlen,
			  const void *payload, size_t plen)
{
	unsigned char head[CAPTURE_TIME_BYTES + CAPTURE_TLEN_BYTES];
	unsigned char plen_le[CAPTURE_PLEN_BYTES];
	uint64_t bits, rec;
	int rc;

	if (!isfinite(time) || tlen > QW_CAPTURE_TOPIC_MAX ||
	    plen > UINT32_MAX)
		return QW_ERROR(QW_EINVAL);
	rec = QW_CAPTURE_REC_FIXED + (uint64_t)tlen + (uint64_t)plen;
	if (w->rotate > 0 && w->in_part > 0 && w->size + rec > w->rotate) {
		rc = capture_part_close(w);
		w->part++;
		if (rc == 0)
			rc = capture_part_open(w);
		if (rc != 0)
			return rc;
	}
	if (w->fp == NULL)
		return QW_ERROR(QW_EIO); /* an earlier rotation failed */
	memcpy(&bits, &time, sizeof bits);
	qw_le_put64(head, bits);
	qw_le_put16(head + CAPTURE_TIME_BYTES, (uint16_t)tlen);
	qw_le_put32(plen_le, (uint32_t)plen);
	if (fwrite(head, sizeof head, 1, w->fp) != 1 ||
	    (tlen > 0 && fwrite(topic, tlen, 1, w->fp) != 1) ||
	    fwrite(plen_le, sizeof plen_le, 1, w->fp) != 1 ||
	    (plen > 0 && fwrite(payload, plen, 1, w->fp) != 1))
		return QW_ERROR(QW_EIO);
	w->size += rec;
	w->in_part++;
	w->records++;
	return 0;
}

int qw_capture_writer_flush(struct qw_capture_writer *w)
{
	if (w->fp == NULL || fflush(w->fp) != 0)
		return QW_ERROR(QW_EIO);
	return 0;
}

int qw_capture_writer_close(struct qw_capture_writer *w)
{
	int rc;

	if (w == NULL)
		return 0;
	rc = capture_part_close(w);
	free(w);
	return rc;
}

const char *qw_capture_writer_path(const struct qw_capture_writer *w)
{
	return w->path;
}

unsigned qw_capture_writer_parts(const struct qw_capture_writer *w)
{
	return w->part + 1;
}

uint64_t qw_capture_writer_records(const struct qw_capture_writer *w)
{
	return w->records;
}

/* ---- reader -------------------------------------------------------------- */

struct qw_capture_reader {
	FILE *fp;
	struct qw_input *own_in; /* opened by path: closed at close */
	uint64_t size, off;      /* file size (or QW_CAPTURE_SIZE_UNKNOWN),
				    bytes consumed */
	size_t max_payload;
	unsigned part;           /* from the header */
	uint64_t count;          /* good records */
	int err;                 /* sticky error, 0 if none */
	char topic[QW_CAPTURE_TOPIC_MAX + 1];
	unsigned char *payload;  /* max_payload bytes (at least 1) */
	struct qw_capture_rec rec;
};

/* Reads exactly n bytes (already checked against the size): a short read
 * means the file shrank (QW_ETRUNC) or failed (QW_EIO). */
static int capture_read(struct qw_capture_reader *r, void *buf, size_t n)
{
	if (n > 0 && fread(buf, n, 1, r->fp) != 1)
		return ferror(r->fp) ? QW_ERROR(QW_EIO) : QW_ERROR(QW_ETRUNC);
	r->off += n;
	return 0;
}

static int capture_header(struct qw_capture_reader *r)
{
	unsigned char h[QW_CAPTURE_HEADER];
	size_t have = r->size < QW_CAPTURE_HEADER ? (size_t)r->size
						  : QW_CAPTURE_HEADER;
	int rc = capture_read(r, h, have);

	if (rc != 0)
		return rc;
	if (!qw_capture_detect(h, have)) {
		/* too short for the magic, but what there is matches it */
		if (have < QW_CAPTURE_MAGIC_LEN && have > 0 &&
		    memcmp(h, QW_CAPTURE_MAGIC, have) == 0)
			return QW_ERROR(QW_ETRUNC);
		return QW_ERROR(QW_EFORMAT);
	}
	if (have < QW_CAPTURE_HEADER)
		return QW_ERROR(QW_ETRUNC);
	if (qw_le_get16(h + CAPTURE_OFF_VERSION) != QW_CAPTURE_VERSION)
		return QW_ERROR(QW_EVERSION);
	if (qw_le_get32(h + CAPTURE_OFF_FLAGS) != 0)
		return QW_ERROR(QW_EFORMAT);
	r->part = qw_le_get32(h + CAPTURE_OFF_PART);
	return 0;
}

int qw_capture_reader_open_stream(FILE *fp, uint64_t size,
				  size_t max_payload,
				  struct qw_capture_reader **out)
{
	struct qw_capture_reader *r = calloc(1, sizeof *r);
	int rc;

	*out = NULL;
	if (r == NULL)
		return QW_ERROR(QW_ENOMEM);
	r->fp = fp;
	r->size = size;
	r->max_payload = max_payload;
	r->payload = malloc(max_payload > 0 ? max_payload : 1);
	if (r->payload == NULL) {
		free(r);
		return QW_ERROR(QW_ENOMEM);
	}
	rc = capture_header(r);
	if (rc != 0) {
		qw_capture_reader_close(r);
		return rc;
	}
	*out = r;
	return 0;
}

int qw_capture_reader_open(const char *path, size_t max_payload,
			   struct qw_capture_reader **out)
{
	struct qw_input *in;
	int rc;

	*out = NULL;
	rc = qw_input_new(path, &in);
	if (rc != 0)
		return rc;
	rc = qw_capture_reader_open_stream(in->fp, in->regular ? in->size
					   : QW_CAPTURE_SIZE_UNKNOWN,
					   max_payload, out);
	if (rc != 0)
		qw_input_free(in);
	else
		(*out)->own_in = in;
	return rc;
}

/* One record; every length is checked against what is left first. */
static int capture_record(struct qw_capture_reader *r)
{
	unsigned char head[CAPTURE_TIME_BYTES + CAPTURE_TLEN_BYTES];
	unsigned char plen_le[CAPTURE_PLEN_BYTES];
	uint64_t left = r->size - r->off, bits;
	size_t tlen, plen;
	int rc;

	r->rec.offset = r->off;
	if (left < sizeof head)
		return QW_ERROR(QW_ETRUNC);
	if ((rc = capture_read(r, head, sizeof head)) != 0)
		return rc;
	bits = qw_le_get64(head);
	memcpy(&r->rec.time, &bits, sizeof bits);
	tlen = qw_le_get16(head + CAPTURE_TIME_BYTES);
	if (!isfinite(r->rec.time) || tlen > QW_CAPTURE_TOPIC_MAX)
		return QW_ERROR(QW_EFORMAT);
	if (left - sizeof head < tlen + CAPTURE_PLEN_BYTES)
		return QW_ERROR(QW_ETRUNC);
	if ((rc = capture_read(r, r->topic, tlen)) != 0 ||
	    (rc = capture_read(r, plen_le, sizeof plen_le)) != 0)
		return rc;
	r->topic[tlen] = '\0';
	plen = qw_le_get32(plen_le);
	if (plen > r->max_payload)
		return QW_ERROR(QW_EOVERSIZE);
	if (r->size - r->off < plen)
		return QW_ERROR(QW_ETRUNC);
	if ((rc = capture_read(r, r->payload, plen)) != 0)
		return rc;
	r->rec.topic = r->topic;
	r->rec.tlen = tlen;
	r->rec.payload = r->payload;
	r->rec.plen = plen;
	return 0;
}

int qw_capture_reader_next(struct qw_capture_reader *r,
			   const struct qw_capture_rec **rec)
{
	if (r->err != 0)
		return r->err;
	if (r->off == r->size)
		return 0;
	if (r->size == QW_CAPTURE_SIZE_UNKNOWN) {
		/* a stream ends where a record would begin */
		int c = getc(r->fp);

		if (c == EOF)
			return ferror(r->fp) ? (r->err = QW_ERROR(QW_EIO)) : 0;
		ungetc(c, r->fp);
	}
	r->err = capture_record(r);
	if (r->err != 0)
		return r->err;
	r->count++;
	*rec = &r->rec;
	return 1;
}

uint64_t qw_capture_reader_count(const struct qw_capture_reader *r)
{
	return r->count;
}

unsigned qw_capture_reader_part(const struct qw_capture_reader *r)
{
	return r->part;
}

void qw_capture_reader_progress(const struct qw_capture_reader *r,
				uint64_t *done, uint64_t *total)
{
	*done = r->off;
	*total = r->size == QW_CAPTURE_SIZE_UNKNOWN ? 0 : r->size;
}

void qw_capture_reader_close(struct qw_capture_reader *r)
{
	if (r == NULL)
		return;
	qw_input_free(r->own_in);
	free(r->payload);
	free(r);
}

int qw_capture_detect(const void *buf, size_t len)
{
	return len >= QW_CAPTURE_MAGIC_LEN &&
	       memcmp(buf, QW_CAPTURE_MAGIC, QW_CAPTURE_MAGIC_LEN) == 0;
}
