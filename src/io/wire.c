/* wire.c: the bus payloads, bytes <-> readings (see wire.h and DESIGN.md,
 * "Wire format").
 *
 * Three formats share one entry point, told apart by their first bytes:
 *  "QWB1"          binary batch: 24-byte header, then n records of
 *                  {int64 time ns, float64 x[p]}, little endian;
 *  first non-blank '{'  one JSON object {"t": seconds, "v": [...]};
 *  anything else   one text line "time,v1,...,vp".
 *
 * Workload: the binary path is the daemon's hot path (about 3 million
 * readings a second through one process), so it never allocates, checks the
 * whole frame length against its header once, and then runs one tight loop
 * that copies each value and ORs together an "is infinite" test.  Text and
 * JSON carry one reading per frame and are for low-rate publishers and
 * hand-made test traffic; JSON goes through jansson, which allocates.
 * Known jansson limitation (2.14): when growing its token buffer fails, its
 * lexer drops characters of the number being read instead of failing, so
 * under memory exhaustion a JSON value can be misread (test_wire counts
 * this); the binary and text paths do not allocate and cannot.
 *
 * Byte order is converted only here, through bytes.h (no-ops on little
 * endian hosts, byte swaps elsewhere).  Times travel as int64 nanoseconds on
 * the binary wire and as double seconds everywhere else; every format
 * accepts and writes the same range, |t| <= QW_WIRE_TIME_MAX (years 1678 to
 * 2261, inside int64 ns with room for rounding), so any decoded reading can
 * be re-encoded in any format. */
#include "wire.h"

#include <endian.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "bytes.h"
#include "num.h"
#include "quadwatch.h"

#define WIRE_MAGIC_LEN 4u   /* bytes of "QWB1" */
#define WIRE_OFF_P 4u       /* header offsets, bytes (DESIGN.md layout) */
#define WIRE_OFF_N 8u
#define WIRE_OFF_FLAGS 12u
#define WIRE_OFF_SEQ 16u
#define WIRE_TIME_BYTES 8u  /* int64 ns per record */
#define WIRE_VALUE_BYTES 8u /* float64 per channel */
#define WIRE_NS_PER_S 1000000000 /* ns in a second */
#define WIRE_MAX_NS INT64_C(9200000000000000000) /* QW_WIRE_TIME_MAX in ns */
#define WIRE_NUM_MAX 32u    /* chars of one %.17g number: sign, 17 digits,
			       point, "e-308" and a separator, with room */

/* IEEE 754 binary64: the sign bit cleared, and the pattern of +Inf. */
#define WIRE_ABS_MASK UINT64_C(0x7fffffffffffffff)
#define WIRE_INF_BITS UINT64_C(0x7ff0000000000000)

/* ---- byte order ---------------------------------------------------------- */

/* ---- time ---------------------------------------------------------------- */

/* int64 ns -> seconds.  Whole seconds are exact and the remainder is one
 * correctly rounded division, so the sum is within an ulp of ns/1e9 (a
 * single (double)ns / 1e9 would first round ns itself, by up to 1 us). */
static double wire_ns_to_s(int64_t ns)
{
	int64_t sec = ns / WIRE_NS_PER_S, rem = ns % WIRE_NS_PER_S;

	return (double)sec + (double)rem / (double)WIRE_NS_PER_S;
}

/* Seconds -> int64 ns, rounded to the nearest ns.  0, or QW_ERANGE when t
 * is not finite or beyond +-QW_WIRE_TIME_MAX.  For epoch-sized t (whose
 * ulp exceeds 1 ns) wire_ns_to_s(result) == t exactly. */
static int wire_s_to_ns(double t, int64_t *ns)
{
	double sec, frac;

	if (!(fabs(t) <= QW_WIRE_TIME_MAX)) /* also refuses NaN */
		return QW_ERROR(QW_ERANGE);
	sec = floor(t);
	frac = t - sec; /* exact: t and sec share t's exponent or less */
	/* |sec| <= 9.2e9 and frac < 1: the sum stays within 9.2000000001e18,
	 * inside int64 (9.22e18). */
	*ns = (int64_t)sec * WIRE_NS_PER_S +
	      (int64_t)llround(frac * (double)WIRE_NS_PER_S);
	if (*ns > WIRE_MAX_NS || *ns < -WIRE_MAX_NS)
		return QW_ERROR(QW_ERANGE);
	return 0;
}

/* ---- binary -------------------------------------------------------------- */

size_t qw_wire_binary_len(size_t p, size_t n)
{
	size_t rec;

	if (p > (SIZE_MAX - WIRE_TIME_BYTES) / WIRE_VALUE_BYTES)
		return 0;
	rec = WIRE_TIME_BYTES + WIRE_VALUE_BYTES * p;
	if (n > (SIZE_MAX - QW_WIRE_HEADER) / rec)
		return 0;
	return QW_WIRE_HEADER + n * rec;
}

typedef double wire_v2 __attribute__((vector_size(16)));
typedef int64_t wire_m2 __attribute__((vector_size(16)));

/* p values from v to x, bit for bit (any NaN is "missing"); 1 when one of
 * them is +-Inf, tested without a branch per value.  On a little-endian
 * host two at a time in GCC's generic vectors (SSE2 on the baseline
 * x86-64: an and and a compare per pair).  The scalar loop, which GCC's
 * vectoriser does not take for its 64-bit compares, took 32-34 ns a
 * reading at p = 16 against 14-15 ns (a frame of 500, one process,
 * 2026-12-03). */
static int wire_values(const unsigned char *restrict v, double *restrict x,
		       size_t p)
{
	uint64_t u, inf = 0;
	size_t j = 0;
#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__
	const wire_m2 abs_mask = {(int64_t)WIRE_ABS_MASK,
				  (int64_t)WIRE_ABS_MASK};
	const wire_v2 inf2 = {INFINITY, INFINITY};
	wire_m2 hit = {0, 0};

	for (; j + 2 <= p; j += 2) {
		wire_m2 w;

		memcpy(&w, v + j * WIRE_VALUE_BYTES, sizeof w);
		memcpy(&x[j], &w, sizeof w);
		hit |= (wire_v2)(w & abs_mask) == inf2;
	}
	inf = (uint64_t)(hit[0] | hit[1]);
#endif
	for (; j < p; j++) {
		u = qw_le_get64(v + j * WIRE_VALUE_BYTES);
		inf |= (uint64_t)((u & WIRE_ABS_MASK) == WIRE_INF_BITS);
		memcpy(&x[j], &u, sizeof u);
	}
	return inf != 0;
}

/* The record loop: n records of p channels from s into b.  A single
 * +-Inf, or a time beyond QW_WIRE_TIME_MAX, refuses the frame. */
static int wire_binary_records(const unsigned char *s, size_t n,
			       struct qw_wire_batch *b)
{
	size_t i, p = b->p;
	int64_t ns;

	for (i = 0; i < n; i++) {
		ns = (int64_t)qw_le_get64(s);
		if (ns > WIRE_MAX_NS || ns < -WIRE_MAX_NS)
			return QW_ERROR(QW_ERANGE);
		b->t[i] = wire_ns_to_s(ns);
		s += WIRE_TIME_BYTES;
		if (wire_values(s, b->x + i * p, p))
			return QW_ERROR(QW_ERANGE);
		s += p * WIRE_VALUE_BYTES;
	}
	return 0;
}

/* Header checks in the order wire.h documents, then the records. */
static int wire_decode_binary(const unsigned char *s, size_t len,
			      struct qw_wire_batch *b)
{
	uint32_t p, n;
	size_t need;
	int rc;

	if (len < QW_WIRE_HEADER)
		return QW_ERROR(QW_ETRUNC);
	p = qw_le_get32(s + WIRE_OFF_P);
	n = qw_le_get32(s + WIRE_OFF_N);
	if ((size_t)p != b->p)
		return QW_ERROR(QW_ECOUNT);
	if (qw_le_get32(s + WIRE_OFF_FLAGS) != 0 || n == 0)
		return QW_ERROR(QW_EFORMAT);
	/* A count whose size overflows size_t promises more bytes than any
	 * frame can hold: that is a short frame, never a wrapped length. */
	need = qw_wire_binary_len(p, n);
	if (need == 0 || len < need)
		return QW_ERROR(QW_ETRUNC);
	if (len > need)
		return QW_ERROR(QW_EFORMAT);
	if ((size_t)n > b->cap)
		return QW_ERROR(QW_EOVERSIZE);
	rc = wire_binary_records(s + QW_WIRE_HEADER, n, b);
	if (rc != 0)
		return rc;
	b->seq = qw_le_get64(s + WIRE_OFF_SEQ);
	b->has_seq = 1;
	b->n = n;
	return 0;
}

size_t qw_wire_encode_binary(void *buf, size_t cap, size_t p, size_t n,
			     uint64_t seq, const double *t, const double *x)
{
	unsigned char *d = buf;
	size_t need = qw_wire_binary_len(p, n), i, j;
	uint64_t u;
	int64_t ns;

	if (need == 0 || need > cap || p > UINT32_MAX || n > UINT32_MAX)
		return 0;
	memcpy(d, QW_WIRE_MAGIC, WIRE_MAGIC_LEN);
	qw_le_put32(d + WIRE_OFF_P, (uint32_t)p);
	qw_le_put32(d + WIRE_OFF_N, (uint32_t)n);
	qw_le_put32(d + WIRE_OFF_FLAGS, 0);
	qw_le_put64(d + WIRE_OFF_SEQ, seq);
	d += QW_WIRE_HEADER;
	for (i = 0; i < n; i++) {
		if (wire_s_to_ns(t[i], &ns) != 0)
			return 0;
		qw_le_put64(d, (uint64_t)ns);
		d += WIRE_TIME_BYTES;
		for (j = 0; j < p; j++) {
			memcpy(&u, &x[i * p + j], sizeof u);
			if ((u & WIRE_ABS_MASK) == WIRE_INF_BITS)
				return 0;
			qw_le_put64(d, u);
			d += WIRE_VALUE_BYTES;
		}
	}
	return need;
}

/* ---- text ---------------------------------------------------------------- */

static int wire_blank(char c)
{
	return c == ' ' || c == '\t' || c == '\r' || c == '\n';
}

/* The reading's time from text: a number of seconds within
 * +-QW_WIRE_TIME_MAX.  QW_ENUMBER for junk or nan, QW_ERANGE for inf or
 * out of range. */
static int wire_time_text(const char *s, size_t len, double *t)
{
	int64_t ns;

	if (qw_num_double(s, len, 0, 1, t) != 0)
		return QW_ENUMBER;
	if (wire_s_to_ns(*t, &ns) != 0)
		return QW_ERROR(QW_ERANGE);
	return 0;
}

/* One value field: empty or blank -> NaN (missing), nan -> NaN, a number,
 * or QW_ENUMBER; inf (or a number beyond double) -> QW_ERANGE. */
static int wire_value_text(const char *s, size_t len, double *v)
{
	size_t i;

	for (i = 0; i < len && wire_blank(s[i]); i++)
		;
	if (i == len) {
		*v = NAN;
		return 0;
	}
	if (qw_num_double(s, len, 1, 1, v) != 0)
		return QW_ENUMBER;
	if (isinf(*v))
		return QW_ERROR(QW_ERANGE);
	return 0;
}

static int wire_decode_text(const char *s, size_t len,
			    struct qw_wire_batch *b)
{
	const char *end, *comma;
	size_t commas = 0, j;
	int rc;

	if (len > 0 && s[len - 1] == '\n') {
		len--;
		if (len > 0 && s[len - 1] == '\r')
			len--;
	}
	/* One reading per frame: a second line would otherwise be glued into
	 * a field and misread. */
	if (len == 0 || memchr(s, '\n', len) || memchr(s, '\r', len))
		return QW_ERROR(QW_EFORMAT);
	end = s + len;
	for (comma = s; (comma = memchr(comma, ',', (size_t)(end - comma)));
	     comma++)
		commas++;
	if (commas != b->p)
		return QW_ERROR(QW_ECOUNT);
	if (b->cap < 1)
		return QW_ERROR(QW_EOVERSIZE);
	comma = memchr(s, ',', len);
	rc = wire_time_text(s, (size_t)(comma - s), &b->t[0]);
	for (j = 0; rc == 0 && j < b->p; j++) {
		s = comma + 1;
		comma = memchr(s, ',', (size_t)(end - s));
		if (comma == NULL)
			comma = end;
		rc = wire_value_text(s, (size_t)(comma - s), &b->x[j]);
	}
	if (rc != 0)
		return rc;
	b->n = 1;
	return 0;
}

/* Appends sep and v (%.17g: 17 significant digits round-trip a double)
 * at *pos; 0 when it does not fit with its NUL. */
static int wire_put(char *buf, size_t cap, size_t *pos, const char *sep,
		    double v)
{
	int k;

	if (*pos >= cap)
		return 0;
	k = snprintf(buf + *pos, cap - *pos, "%s%.17g", sep, v);
	if (k < 0 || (size_t)k >= cap - *pos)
		return 0;
	*pos += (size_t)k;
	return 1;
}

/* Appends the literal s at *pos; 0 when it does not fit with its NUL. */
static int wire_puts(char *buf, size_t cap, size_t *pos, const char *s)
{
	size_t k = strlen(s);

	if (*pos >= cap || k >= cap - *pos)
		return 0;
	memcpy(buf + *pos, s, k + 1);
	*pos += k;
	return 1;
}

size_t qw_wire_encode_text(char *buf, size_t cap, size_t p, double t,
			   const double *x)
{
	size_t pos = 0, j;
	int64_t ns;

	if (wire_s_to_ns(t, &ns) != 0 || !wire_put(buf, cap, &pos, "", t))
		return 0;
	for (j = 0; j < p; j++) {
		if (isinf(x[j]))
			return 0;
		if (isnan(x[j]) ? !wire_puts(buf, cap, &pos, ",")
				: !wire_put(buf, cap, &pos, ",", x[j]))
			return 0;
	}
	return pos;
}

/* ---- JSON ---------------------------------------------------------------- */

/* The checks on a parsed JSON reading: exactly the keys t and v. */
static int wire_json_reading(json_t *root, struct qw_wire_batch *b)
{
	json_t *jt, *jv, *e;
	size_t j;
	int64_t ns;

	if (!json_is_object(root) || json_object_size(root) != 2)
		return QW_ERROR(QW_EFORMAT);
	jt = json_object_get(root, "t");
	jv = json_object_get(root, "v");
	if (jt == NULL || jv == NULL || !json_is_array(jv))
		return QW_ERROR(QW_EFORMAT);
	if (json_array_size(jv) != b->p)
		return QW_ERROR(QW_ECOUNT);
	if (!json_is_number(jt))
		return QW_ERROR(QW_ENUMBER);
	if (b->cap < 1)
		return QW_ERROR(QW_EOVERSIZE);
	b->t[0] = json_number_value(jt);
	if (wire_s_to_ns(b->t[0], &ns) != 0)
		return QW_ERROR(QW_ERANGE);
	/* jansson holds no Inf or NaN: a literal beyond double's range is
	 * refused by the parser (numeric overflow, see wire_decode_json). */
	json_array_foreach(jv, j, e) {
		if (json_is_null(e))
			b->x[j] = NAN;
		else if (json_is_number(e))
			b->x[j] = json_number_value(e);
		else
			return QW_ERROR(QW_ENUMBER);
	}
	b->n = 1;
	return 0;
}

static int wire_decode_json(const char *s, size_t len,
			    struct qw_wire_batch *b)
{
	json_error_t err;
	json_t *root;
	int rc;

	/* Integers as reals: a long integer is a number like any other, and
	 * only a value beyond double's range is a numeric overflow. */
	root = json_loadb(s, len, JSON_REJECT_DUPLICATES |
			  JSON_DECODE_INT_AS_REAL, &err);
	/* jansson does not tell running out of memory apart from bad syntax
	 * (both come back as parse errors): either way, QW_EFORMAT. */
	if (root == NULL)
		return json_error_code(&err) == json_error_numeric_overflow
			       ? QW_ERROR(QW_ERANGE)
			       : QW_ERROR(QW_EFORMAT);
	rc = wire_json_reading(root, b);
	json_decref(root);
	return rc;
}

size_t qw_wire_encode_json(char *buf, size_t cap, size_t p, double t,
			   const double *x)
{
	size_t pos = 0, j;
	int64_t ns;

	if (wire_s_to_ns(t, &ns) != 0 || !wire_puts(buf, cap, &pos, "{\"t\":") ||
	    !wire_put(buf, cap, &pos, "", t) ||
	    !wire_puts(buf, cap, &pos, ",\"v\":["))
		return 0;
	for (j = 0; j < p; j++) {
		const char *sep = j > 0 ? "," : "";

		if (isinf(x[j]))
			return 0;
		if (isnan(x[j])) {
			if (!wire_puts(buf, cap, &pos, sep) ||
			    !wire_puts(buf, cap, &pos, "null"))
				return 0;
		} else if (!wire_put(buf, cap, &pos, sep, x[j])) {
			return 0;
		}
	}
	return wire_puts(buf, cap, &pos, "]}") ? pos : 0;
}

/* ---- dispatch ------------------------------------------------------------ */

int qw_wire_decode(const void *buf, size_t len, struct qw_wire_batch *b)
{
	const char *s = buf;
	size_t i;
	int rc;

	b->n = 0;
	b->seq = 0;
	b->has_seq = 0;
	b->format = QW_WIRE_TEXT;
	if (b->p == 0)
		return QW_ERROR(QW_EINVAL);
	if (len == 0)
		return QW_ERROR(QW_EFORMAT);
	/* A frame that is a prefix of the magic is a cut binary frame. */
	if (memcmp(s, QW_WIRE_MAGIC,
		   len < WIRE_MAGIC_LEN ? len : WIRE_MAGIC_LEN) == 0) {
		b->format = QW_WIRE_BINARY;
		rc = wire_decode_binary(buf, len, b);
	} else {
		for (i = 0; i < len && wire_blank(s[i]); i++)
			;
		if (i == len)
			return QW_ERROR(QW_EFORMAT);
		if (s[i] == '{') {
			b->format = QW_WIRE_JSON;
			rc = wire_decode_json(s, len, b);
		} else {
			rc = wire_decode_text(s, len, b);
		}
	}
	if (rc != 0)
		b->n = 0;
	return rc;
}

size_t qw_wire_buffer_len(size_t max_frame, size_t p)
{
	size_t rec = sizeof(int64_t) + p * sizeof(double);
	size_t cap = max_frame > QW_WIRE_HEADER
		     ? (max_frame - QW_WIRE_HEADER) / rec : 0;

	return (cap < 1 ? 1 : cap) * (1 + p);
}

void qw_wire_batch_init(struct qw_wire_batch *b, size_t p, double *buf,
			size_t len)
{
	memset(b, 0, sizeof *b);
	b->p = p;
	b->cap = len / (1 + p);
	b->t = buf;
	b->x = buf + b->cap;
}
