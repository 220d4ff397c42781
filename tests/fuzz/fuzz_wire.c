/* fuzz_wire.c: libFuzzer harness for the bus payload decoder
 * (src/io/wire.c).
 *
 * The bytes are one frame.  They are decoded for p = 1, 3 and 64 and, when
 * they look binary, for the p their header claims (up to FZ_PMAX), so the
 * record loop is reached for any p.  On success the batch must respect
 * wire.h (1 <= n <= cap, no +-Inf, a binary frame exactly as long as its
 * header says) and must survive a round trip: re-encoded as binary, text
 * and JSON and decoded again, every value comes back identical (NaN as NaN)
 * and every time equal (binary: to the nearest ns when the time came from
 * text or JSON).  On error n must be 0 and the code one wire.h documents.
 * Any violation aborts, which libFuzzer reports as a crash.
 * Seeds: tests/fuzz/corpus/wire/.  Run through tools/fuzz. */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "quadwatch.h"
#include "wire.h"

#define FZ_CAP 8     /* readings per batch */
#define FZ_PMAX 64   /* largest p tried */
#define FZ_TEXT 4096 /* bytes: one reading of FZ_PMAX values as text */
#define FZ_HALF_NS 0.5e-9 /* seconds: binary time rounding */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

struct fz_buf {
	double t[FZ_CAP], x[FZ_CAP * FZ_PMAX];
};

static void fz_batch(struct qw_wire_batch *b, struct fz_buf *o, size_t p)
{
	memset(b, 0, sizeof *b);
	b->p = p;
	b->cap = FZ_CAP;
	b->t = o->t;
	b->x = o->x;
}

static int fz_same(double a, double b)
{
	if (isnan(a) || isnan(b))
		return isnan(a) && isnan(b);
	return memcmp(&a, &b, sizeof a) == 0;
}

/* b's readings against a's from reading first on.  Times within tol
 * seconds plus two ulp (tol 0: equal as numbers, so -0 s may come back as
 * 0 s); values identical. */
static void fz_compare(const struct qw_wire_batch *a,
		       const struct qw_wire_batch *b, size_t first, double tol)
{
	size_t i, j;
	double ta, tb;

	for (i = 0; i < b->n; i++) {
		ta = a->t[first + i];
		tb = b->t[i];
		if (ta != tb && (tol == 0 || !(fabs(ta - tb) <=
					       tol + fabs(ta) * 0x1p-51)))
			abort();
		for (j = 0; j < a->p; j++)
			if (!fz_same(a->x[(first + i) * a->p + j],
				     b->x[i * a->p + j]))
				abort();
	}
}

/* Re-encodes what was decoded three ways and checks it comes back. */
static void fz_roundtrip(const struct qw_wire_batch *b)
{
	static unsigned char frame[QW_WIRE_HEADER +
				   FZ_CAP * (8 + 8 * FZ_PMAX)];
	char text[FZ_TEXT];
	struct qw_wire_batch c;
	struct fz_buf o;
	size_t len, i;

	len = qw_wire_encode_binary(frame, sizeof frame, b->p, b->n, b->seq,
				    b->t, b->x);
	if (len != qw_wire_binary_len(b->p, b->n))
		abort(); /* every decoded time fits int64 ns again */
	fz_batch(&c, &o, b->p);
	if (qw_wire_decode(frame, len, &c) != 0 || c.n != b->n)
		abort();
	/* binary times are whole ns: at most half a ns off, and exact when
	 * they came from binary (or their ulp is over a ns) */
	fz_compare(b, &c, 0, b->format == QW_WIRE_BINARY ? 0 : FZ_HALF_NS);
	for (i = 0; i < b->n; i++) {
		len = qw_wire_encode_text(text, sizeof text, b->p, b->t[i],
					  b->x + i * b->p);
		if (len == 0 || qw_wire_decode(text, len, &c) != 0)
			abort();
		fz_compare(b, &c, i, 0);
		len = qw_wire_encode_json(text, sizeof text, b->p, b->t[i],
					  b->x + i * b->p);
		if (len == 0 || qw_wire_decode(text, len, &c) != 0)
			abort();
		fz_compare(b, &c, i, 0);
	}
}

static void fz_one(const uint8_t *data, size_t size, size_t p)
{
	struct qw_wire_batch b;
	struct fz_buf o;
	size_t i;
	int rc;

	fz_batch(&b, &o, p);
	rc = qw_wire_decode(data, size, &b);
	if (rc != 0) {
		if (b.n != 0 || (rc != QW_ETRUNC && rc != QW_EOVERSIZE &&
				 rc != QW_ECOUNT && rc != QW_ENUMBER &&
				 rc != QW_ERANGE && rc != QW_EFORMAT))
			abort();
		return;
	}
	if (b.n < 1 || b.n > b.cap || (b.format != QW_WIRE_BINARY &&
				       b.n != 1))
		abort();
	if (b.format == QW_WIRE_BINARY &&
	    (!b.has_seq || size != qw_wire_binary_len(p, b.n)))
		abort();
	for (i = 0; i < b.n * p; i++)
		if (isinf(b.x[i]))
			abort();
	for (i = 0; i < b.n; i++)
		if (!isfinite(b.t[i]))
			abort();
	fz_roundtrip(&b);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	uint32_t hp;

	fz_one(data, size, 1);
	fz_one(data, size, 3);
	fz_one(data, size, FZ_PMAX);
	if (size >= 8 && memcmp(data, QW_WIRE_MAGIC, 4) == 0) {
		hp = (uint32_t)data[4] | (uint32_t)data[5] << 8 |
		     (uint32_t)data[6] << 16 | (uint32_t)data[7] << 24;
		if (hp >= 1 && hp <= FZ_PMAX)
			fz_one(data, size, hp);
	}
	return 0;
}
