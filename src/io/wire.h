/* wire.h: the bus payloads, bytes <-> readings (no sockets here).
 *
 * Frame 1 is the topic (group name); frame 2 one of:
 *  binary  "QWB1", uint32 p, uint32 n, uint32 flags (0), uint64 seq of the
 *          first reading, then n records {int64 time ns, float64 x[p]};
 *          little endian; 24-byte header.
 *  text    "time,v1,...,vp" (one reading, ASCII; empty or nan = missing;
 *          one optional trailing \n or \r\n, no other line break)
 *  JSON    {"t": seconds, "v": [v1, ..., vp]} (null = missing; exactly
 *          these two keys, duplicates refused)
 * Told apart by the first bytes: "QWB1" (or a prefix of it, a cut frame)
 * binary, a first non-blank '{' JSON, anything else text.
 * Byte order is converted only here.  Lengths are checked against the
 * header before any copy. */
#ifndef QW_WIRE_H
#define QW_WIRE_H

#include <stddef.h>
#include <stdint.h>

#define QW_WIRE_MAGIC "QWB1"
#define QW_WIRE_HEADER 24u /* bytes: magic, p, n, flags, seq */
#define QW_WIRE_TIME_MAX 9.2e9 /* seconds: |time| limit of every format
				  (year 2261; int64 ns reach 9.22e9) */

enum qw_wire_format {
	QW_WIRE_BINARY = 0, /* QWB1 batches */
	QW_WIRE_TEXT = 1,   /* one CSV-style line */
	QW_WIRE_JSON = 2    /* one JSON object */
};

/* Decoded readings land in caller-owned buffers sized for cap readings:
 * t[cap] (seconds) and x[cap * p] (row-major, NaN = missing). */
struct qw_wire_batch {
	size_t p;          /* channels expected (the group's p) */
	size_t cap;        /* readings the buffers hold */
	double *t;         /* out: time of each reading, seconds */
	double *x;         /* out: values */
	size_t n;          /* out: readings decoded */
	uint64_t seq;      /* out: seq of the first (binary), else 0 */
	int has_seq;       /* out: 1 for binary */
	int format;        /* out: enum qw_wire_format detected */
};

/* Detects the format of buf[0..len) and decodes it.  Returns 0 or:
 * QW_ETRUNC (shorter than the header says), QW_EOVERSIZE (n > cap),
 * QW_ECOUNT (p differs from b->p), QW_ENUMBER (a bad number),
 * QW_ERANGE (+-Inf, or |time| > QW_WIRE_TIME_MAX), QW_EFORMAT (anything
 * else malformed, including an empty frame, and a JSON frame the parser
 * had no memory for; binary and text never allocate).  On error b->n = 0. */
int qw_wire_decode(const void *buf, size_t len, struct qw_wire_batch *b);

/* Encoders, for the simulator, record tests and benchmarks.  Each writes at
 * most cap bytes and returns the length, or 0 if cap is too small, a time
 * is not finite or beyond QW_WIRE_TIME_MAX, or a value is +-Inf (which the
 * decoder refuses).  NaN is written as missing (binary: as is; text: an empty
 * field; JSON: null).  Text and JSON use %.17g (exact round trip), carry no
 * newline and are NUL-terminated (so they need cap > length). */
size_t qw_wire_encode_binary(void *buf, size_t cap, size_t p, size_t n,
			     uint64_t seq, const double *t, const double *x);
size_t qw_wire_encode_text(char *buf, size_t cap, size_t p, double t,
			   const double *x);
size_t qw_wire_encode_json(char *buf, size_t cap, size_t p, double t,
			   const double *x);
/* Doubles of a decode buffer for any binary frame of up to max_frame bytes
 * of p channels: the times and values of as many readings as fit (>= 1). */
size_t qw_wire_buffer_len(size_t max_frame, size_t p);
/* Empties b and points it at buf (len doubles) for readings of p
 * channels: cap = len / (1 + p) readings, times first, then values. */
void qw_wire_batch_init(struct qw_wire_batch *b, size_t p, double *buf,
			size_t len);

/* Bytes a binary frame of n readings of p channels needs, 0 on overflow. */
size_t qw_wire_binary_len(size_t p, size_t n);

#endif
