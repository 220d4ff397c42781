/* capture.h: capture files, the bus as `quadwatch record` saw it, for
 * `quadwatch replay`.  Our own format, little endian throughout:
 *
 *   file header, 16 bytes:
 *     0  "QWCAP1"        magic (6 bytes)
 *     6  uint16 version  QW_CAPTURE_VERSION
 *     8  uint32 part     0 for OUT, k for OUT.k (see below)
 *    12  uint32 flags    0 (no flags are defined yet)
 *   then records, each:
 *     float64 time       receive time, epoch seconds (finite)
 *     uint16  tlen       topic bytes, <= QW_CAPTURE_TOPIC_MAX
 *     tlen bytes         topic (frame 1)
 *     uint32  plen       payload bytes, <= the reader's bound
 *     plen bytes         payload (frame 2)
 *
 * Rotation: the writer starts OUT; when the next record would take the
 * file past rotate_bytes (and it holds at least one record) it closes it
 * and goes on in OUT.0001, OUT.0002, ... (four digits at least, so a shell
 * glob OUT* lists the parts in order up to 9999).  Each part is a complete
 * capture with its own header; replay takes them as separate inputs.
 * Files are fsync'ed when closed.  Opened exclusive, every part must be
 * new; otherwise parts are truncated as they are reached, and parts of an
 * earlier, longer capture beyond the last one written are left alone.
 *
 * The reader checks every length against what is left of the file: a cut
 * last record is QW_ETRUNC, after the good records before it. */
#ifndef QW_CAPTURE_H
#define QW_CAPTURE_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#define QW_CAPTURE_MAGIC "QWCAP1"
#define QW_CAPTURE_MAGIC_LEN 6u
#define QW_CAPTURE_VERSION 1u
#define QW_CAPTURE_HEADER 16u    /* bytes of the file header */
#define QW_CAPTURE_REC_FIXED 14u /* bytes of a record besides topic and
				    payload: time 8, tlen 2, plen 4 */
#define QW_CAPTURE_TOPIC_MAX 255u /* bytes in a topic */
#define QW_CAPTURE_NAME_MAX 4096u /* bytes in a part's file name */

/* ---- writer -------------------------------------------------------------- */

struct qw_capture_writer;

/* Creates path (exclusive: fail if it exists, else truncate it) and writes
 * its header.  rotate_bytes: 0 = never rotate, else >= QW_CAPTURE_HEADER.
 * 0, QW_EINVAL, QW_ENOMEM or QW_EIO (errno says why). */
int qw_capture_writer_open(const char *path, uint64_t rotate_bytes,
			   int exclusive, struct qw_capture_writer **out);
/* Appends one record, rotating first if due.  time: finite epoch seconds.
 * 0, QW_EINVAL (time not finite, topic longer than QW_CAPTURE_TOPIC_MAX,
 * payload over 4 GiB) or QW_EIO. */
int qw_capture_writer_put(struct qw_capture_writer *w, double time,
			  const void *topic, size_t tlen,
			  const void *payload, size_t plen);
/* Pushes buffered records to the kernel (no fsync).  0 or QW_EIO. */
int qw_capture_writer_flush(struct qw_capture_writer *w);
/* Flushes, fsyncs and closes the current part; frees w (NULL: no-op).
 * 0 or QW_EIO (the first failure). */
int qw_capture_writer_close(struct qw_capture_writer *w);
/* The file being written, parts begun (>= 1), records written in all. */
const char *qw_capture_writer_path(const struct qw_capture_writer *w);
unsigned qw_capture_writer_parts(const struct qw_capture_writer *w);
uint64_t qw_capture_writer_records(const struct qw_capture_writer *w);

/* Name of part k of base into buf: base for k = 0, else base.%04u.
 * 0 or QW_EINVAL (too long for cap). */
int qw_capture_part_name(char *buf, size_t cap, const char *base,
			 unsigned k);

/* ---- reader -------------------------------------------------------------- */

struct qw_capture_reader;

/* One record, valid until the next call on the reader. */
struct qw_capture_rec {
	double time;         /* receive time, epoch seconds */
	const char *topic;   /* tlen bytes, NUL-terminated after them */
	size_t tlen;
	const void *payload; /* plen bytes */
	size_t plen;
	uint64_t offset;     /* byte offset of the record in the file */
};

/* Opens path through qw_input_open (input.h: "-" is standard input, and
 * a pipe or FIFO is read as a stream of unknown size, below) and checks
 * its header.  max_payload bounds plen (and sizes the reader's buffer).
 * 0, QW_EIO, QW_ENOMEM, QW_EFORMAT (not a capture, or nonzero flags),
 * QW_ETRUNC (shorter than the header), QW_EVERSION. */
int qw_capture_reader_open(const char *path, size_t max_payload,
			   struct qw_capture_reader **out);
/* The same over a stream of size bytes (not closed by the reader), or of
 * QW_CAPTURE_SIZE_UNKNOWN (a pipe): its end is then the end of the
 * stream where a record would begin, and inside a record QW_ETRUNC. */
#define QW_CAPTURE_SIZE_UNKNOWN UINT64_MAX
int qw_capture_reader_open_stream(FILE *fp, uint64_t size,
				  size_t max_payload,
				  struct qw_capture_reader **out);
/* 1 and *rec, 0 at a clean end, or < 0: QW_ETRUNC (the file ends inside a
 * record), QW_EFORMAT (topic too long, time not finite), QW_EOVERSIZE
 * (plen > max_payload), QW_EIO.  Errors are sticky. */
int qw_capture_reader_next(struct qw_capture_reader *r,
			   const struct qw_capture_rec **rec);
/* Good records read so far (before an error: the ones that were whole). */
uint64_t qw_capture_reader_count(const struct qw_capture_reader *r);
/* The header's part number. */
unsigned qw_capture_reader_part(const struct qw_capture_reader *r);
/* Bytes consumed and the stream's size (0 when unknown). */
void qw_capture_reader_progress(const struct qw_capture_reader *r,
				uint64_t *done, uint64_t *total);
void qw_capture_reader_close(struct qw_capture_reader *r);

/* 1 when buf[0..len) begins with the magic, else 0. */
int qw_capture_detect(const void *buf, size_t len);

#endif
