/* test_wire.c: the bus payload codecs (src/io/wire.c).
 *
 * Oracles: encode -> decode round trips must give back every value exactly
 * (17 significant digits in text and JSON, bits in binary) for random
 * readings at p = 1, 5 and 64, with missing values; every rejection class
 * of wire.h is provoked, including a binary frame cut at every byte, a
 * count whose size overflows size_t, and 10 MB of junk.  One check flips a
 * bit to prove the comparison can fail. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "quadwatch.h"
#include "qwalloc.h"
#include "wire.h"

#define T_NMAX 16       /* readings per test batch */
#define T_PMAX 64       /* channels, the largest p tested */
#define T_TEXT_MAX 4096 /* bytes: 64 values * 25 chars fits */
#define T_EPOCH 1.7e9   /* seconds: a time in 2023, ulp 2.4e-7 s */
#define T_JUNK (10u << 20) /* bytes of the junk frame */

static const size_t t_ps[] = {1, 5, 64};

/* splitmix64 (Steele, Lea, Flood 2014): a fixed-seed generator. */
static uint64_t t_next(uint64_t *s)
{
	uint64_t z = (*s += UINT64_C(0x9e3779b97f4a7c15));

	z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
	z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
	return z ^ (z >> 31);
}

static double t_unif(uint64_t *s)
{
	return (double)(t_next(s) >> 11) * 0x1p-53;
}

/* A value of random sign and magnitude 1e-12..1e12, 1 in 9 missing. */
static double t_value(uint64_t *s)
{
	double m = (t_unif(s) - 0.5) * 2.385;

	if (t_next(s) % 9 == 0)
		return NAN;
	return m * pow(10.0, floor(t_unif(s) * 24.0) - 12.0);
}

/* Same double: equal bits, or both NaN (missing). */
static int t_same(double a, double b)
{
	if (isnan(a) || isnan(b))
		return isnan(a) && isnan(b);
	return memcmp(&a, &b, sizeof a) == 0;
}

struct t_buf {
	double t[T_NMAX];
	double x[T_NMAX * T_PMAX];
};

static void t_batch(struct qw_wire_batch *b, struct t_buf *o, size_t p)
{
	memset(b, 0, sizeof *b);
	b->p = p;
	b->cap = T_NMAX;
	b->t = o->t;
	b->x = o->x;
}

static void t_fill(uint64_t *s, size_t p, size_t n, double *t, double *x)
{
	size_t i, j;

	for (i = 0; i < n; i++) {
		t[i] = T_EPOCH + 86400.0 * t_unif(s);
		for (j = 0; j < p; j++)
			x[i * p + j] = t_value(s);
	}
}

/* ---- round trips --------------------------------------------------------- */

static void test_roundtrip_binary(void **state)
{
	static unsigned char frame[T_NMAX * (8 + 8 * T_PMAX) + 24];
	double t[T_NMAX], x[T_NMAX * T_PMAX];
	struct qw_wire_batch b;
	struct t_buf o;
	uint64_t s = 2385;
	size_t k, i, n = 7, len;

	(void)state;
	for (k = 0; k < 3; k++) {
		size_t p = t_ps[k];

		t_fill(&s, p, n, t, x);
		len = qw_wire_encode_binary(frame, sizeof frame, p, n, 4099, t,
					    x);
		assert_int_equal(len, qw_wire_binary_len(p, n));
		assert_int_equal(len, 24 + n * (8 + 8 * p));
		t_batch(&b, &o, p);
		assert_int_equal(qw_wire_decode(frame, len, &b), 0);
		assert_int_equal(b.n, n);
		assert_int_equal(b.format, QW_WIRE_BINARY);
		assert_int_equal(b.has_seq, 1);
		assert_true(b.seq == 4099);
		for (i = 0; i < n; i++)
			assert_true(t_same(b.t[i], t[i]));
		for (i = 0; i < n * p; i++)
			assert_true(t_same(b.x[i], x[i]));
	}
}

static void test_roundtrip_text_json(void **state)
{
	char buf[T_TEXT_MAX];
	double t, x[T_PMAX];
	struct qw_wire_batch b;
	struct t_buf o;
	uint64_t s = 5813;
	size_t k, j, len, rep;
	int json;

	(void)state;
	for (json = 0; json < 2; json++)
		for (k = 0; k < 3; k++)
			for (rep = 0; rep < 50; rep++) {
				size_t p = t_ps[k];

				t_fill(&s, p, 1, &t, x);
				len = json ? qw_wire_encode_json(buf, sizeof buf,
								 p, t, x)
					   : qw_wire_encode_text(buf, sizeof buf,
								 p, t, x);
				assert_true(len > 0 && len == strlen(buf));
				t_batch(&b, &o, p);
				assert_int_equal(qw_wire_decode(buf, len, &b), 0);
				assert_int_equal(b.n, 1);
				assert_int_equal(b.has_seq, 0);
				assert_int_equal(b.format, json ? QW_WIRE_JSON
								: QW_WIRE_TEXT);
				assert_true(t_same(b.t[0], t));
				for (j = 0; j < p; j++)
					assert_true(t_same(b.x[j], x[j]));
			}
}

/* Extreme but finite values survive all three formats. */
static void test_roundtrip_extremes(void **state)
{
	static const double v[5] = {1.7976931348623157e308, -4.9e-324,
				    -0.0, 2.2250738585072014e-308, 0.1};
	unsigned char frame[256];
	char text[512];
	struct qw_wire_batch b;
	struct t_buf o;
	size_t len, j;
	double t = -2.385e9; /* 1894: negative epoch times work too */

	(void)state;
	len = qw_wire_encode_binary(frame, sizeof frame, 5, 1, 0, &t, v);
	t_batch(&b, &o, 5);
	assert_int_equal(qw_wire_decode(frame, len, &b), 0);
	for (j = 0; j < 5; j++)
		assert_true(t_same(b.x[j], v[j]));
	assert_true(t_same(b.t[0], t));
	len = qw_wire_encode_text(text, sizeof text, 5, t, v);
	assert_int_equal(qw_wire_decode(text, len, &b), 0);
	for (j = 0; j < 5; j++)
		assert_true(t_same(b.x[j], v[j]));
	len = qw_wire_encode_json(text, sizeof text, 5, t, v);
	assert_int_equal(qw_wire_decode(text, len, &b), 0);
	for (j = 0; j < 5; j++)
		assert_true(t_same(b.x[j], v[j]));
}

/* Binary time is int64 ns: sub-ns detail rounds to the nearest ns. */
static void test_binary_time_resolution(void **state)
{
	static const double ts[4] = {0.1234567891234, -0.0000000016,
				     2.385e-10, 9.2e9};
	unsigned char frame[64];
	struct qw_wire_batch b;
	struct t_buf o;
	double x = 2.385;
	size_t k, len;

	(void)state;
	t_batch(&b, &o, 1);
	for (k = 0; k < 4; k++) {
		len = qw_wire_encode_binary(frame, sizeof frame, 1, 1, 0, &ts[k],
					    &x);
		assert_true(len == 40);
		assert_int_equal(qw_wire_decode(frame, len, &b), 0);
		/* half a ns, plus the double's own rounding at 9.2e9 s */
		assert_true(fabs(b.t[0] - ts[k]) <= 0.5e-9 + 1e-6 * (k == 3));
	}
}

/* ---- binary rejections --------------------------------------------------- */

static size_t t_frame(unsigned char *frame, size_t cap, size_t p, size_t n)
{
	double t[T_NMAX], x[T_NMAX * T_PMAX];
	uint64_t s = 77;

	t_fill(&s, p, n, t, x);
	return qw_wire_encode_binary(frame, cap, p, n, 1, t, x);
}

static void t_put32(unsigned char *d, uint32_t v)
{
	d[0] = (unsigned char)v;
	d[1] = (unsigned char)(v >> 8);
	d[2] = (unsigned char)(v >> 16);
	d[3] = (unsigned char)(v >> 24);
}

static void test_binary_truncated_every_offset(void **state)
{
	unsigned char frame[1024];
	struct qw_wire_batch b;
	struct t_buf o;
	size_t len = t_frame(frame, sizeof frame, 5, 3), cut;

	(void)state;
	assert_int_equal(len, 24 + 3 * 48);
	t_batch(&b, &o, 5);
	assert_int_equal(qw_wire_decode(frame, 0, &b), QW_EFORMAT);
	for (cut = 1; cut < len; cut++) {
		assert_int_equal(qw_wire_decode(frame, cut, &b), QW_ETRUNC);
		assert_int_equal(b.n, 0);
	}
	assert_int_equal(qw_wire_decode(frame, len, &b), 0);
	assert_int_equal(b.n, 3);
}

static void test_binary_header_rejections(void **state)
{
	unsigned char frame[1024], bad[1024];
	struct qw_wire_batch b;
	struct t_buf o;
	size_t len = t_frame(frame, sizeof frame, 5, 2);

	(void)state;
	t_batch(&b, &o, 4); /* wrong p */
	assert_int_equal(qw_wire_decode(frame, len, &b), QW_ECOUNT);
	t_batch(&b, &o, 5);
	memcpy(bad, frame, len); /* flags != 0 */
	bad[12] = 1;
	assert_int_equal(qw_wire_decode(bad, len, &b), QW_EFORMAT);
	memcpy(bad, frame, len);
	bad[15] = 0x80;
	assert_int_equal(qw_wire_decode(bad, len, &b), QW_EFORMAT);
	memcpy(bad, frame, len); /* n = 0 */
	t_put32(bad + 8, 0);
	assert_int_equal(qw_wire_decode(bad, 24, &b), QW_EFORMAT);
	assert_int_equal(qw_wire_decode(bad, len, &b), QW_EFORMAT);
	memcpy(bad, frame, len); /* n larger than the bytes */
	t_put32(bad + 8, 3);
	assert_int_equal(qw_wire_decode(bad, len, &b), QW_ETRUNC);
	memcpy(bad, frame, len); /* trailing garbage */
	bad[len] = 0;
	assert_int_equal(qw_wire_decode(bad, len + 1, &b), QW_EFORMAT);
	memcpy(bad, frame, len); /* wrong magic: not binary at all */
	bad[3] = '2';
	assert_int_not_equal(qw_wire_decode(bad, len, &b), 0);
	b.cap = 1; /* n > cap */
	assert_int_equal(qw_wire_decode(frame, len, &b), QW_EOVERSIZE);
	assert_int_equal(b.n, 0);
	b.p = 0;
	assert_int_equal(qw_wire_decode(frame, len, &b), QW_EINVAL);
}

/* n * (8 + 8p) overflows size_t: a short frame, never a wrapped length. */
static void test_binary_count_overflow(void **state)
{
	unsigned char frame[64] = "QWB1";
	struct qw_wire_batch b;
	struct t_buf o;

	(void)state;
	assert_int_equal(qw_wire_binary_len(SIZE_MAX / 8, 1), 0);
	assert_int_equal(qw_wire_binary_len(1, SIZE_MAX / 8), 0);
	assert_int_equal(qw_wire_binary_len(UINT32_MAX, UINT32_MAX), 0);
	t_put32(frame + 4, UINT32_MAX);
	t_put32(frame + 8, UINT32_MAX);
	t_batch(&b, &o, UINT32_MAX);
	b.cap = SIZE_MAX; /* the cap must not be what stops it */
	assert_int_equal(qw_wire_decode(frame, sizeof frame, &b), QW_ETRUNC);
	/* A p that fits but an n that promises 2^35 records of 8 bytes more
	 * than the frame holds. */
	t_put32(frame + 4, 1);
	t_put32(frame + 8, 0x80000000u);
	t_batch(&b, &o, 1);
	b.cap = SIZE_MAX;
	assert_int_equal(qw_wire_decode(frame, sizeof frame, &b), QW_ETRUNC);
}

static void test_binary_inf_and_nan(void **state)
{
	static const uint64_t inf_bits[2] = {UINT64_C(0x7ff0000000000000),
					     UINT64_C(0xfff0000000000000)};
	static const uint64_t nan_bits[3] = {UINT64_C(0x7ff8000000000000),
					     UINT64_C(0xfff0000000000001),
					     UINT64_C(0x7fffffffffffffff)};
	unsigned char frame[1024], bad[1024];
	struct qw_wire_batch b;
	struct t_buf o;
	size_t len = t_frame(frame, sizeof frame, 5, 3), k, i, j;

	(void)state;
	t_batch(&b, &o, 5);
	/* +-Inf in each value of record 2: the pairs the decoder tests two
	 * at a time and the odd last value it tests alone */
	for (k = 0; k < 2; k++)
		for (j = 0; j < 5; j++) {
			memcpy(bad, frame, len);
			for (i = 0; i < 8; i++)
				bad[24 + 48 + 8 + 8 * j + i] =
					(unsigned char)(inf_bits[k] >> (8 * i));
			assert_int_equal(qw_wire_decode(bad, len, &b),
					 QW_ERANGE);
			assert_int_equal(b.n, 0);
		}
	for (k = 0; k < 3; k++) { /* any NaN is a missing value */
		memcpy(bad, frame, len);
		for (i = 0; i < 8; i++)
			bad[24 + 8 + i] = (unsigned char)(nan_bits[k] >> (8 * i));
		assert_int_equal(qw_wire_decode(bad, len, &b), 0);
		assert_true(isnan(b.x[0]));
	}
	/* The checker can fail: one flipped mantissa bit of a value that is
	 * present is seen. */
	assert_int_equal(qw_wire_decode(frame, len, &b), 0);
	for (i = 0; isnan(b.x[i]); i++)
		;
	memcpy(bad, frame, len);
	bad[24 + 8 + 8 * i] ^= 1;
	{
		double xi = b.x[i];

		assert_int_equal(qw_wire_decode(bad, len, &b), 0);
		assert_false(t_same(xi, b.x[i]));
	}
}

static void t_put64(unsigned char *d, uint64_t v)
{
	t_put32(d, (uint32_t)v);
	t_put32(d + 4, (uint32_t)(v >> 32));
}

/* Times beyond QW_WIRE_TIME_MAX (9.2e18 ns) are refused in every format,
 * so whatever decodes can be encoded again (found by fuzz_wire: a time
 * near INT64_MIN ns decoded to a double the encoder could not take). */
static void test_time_range(void **state)
{
	static const struct {
		int64_t ns;
		int rc;
	} c[] = {
		{INT64_C(9200000000000000000), 0},
		{INT64_C(-9200000000000000000), 0},
		{INT64_C(9200000000000000001), QW_ERANGE},
		{INT64_C(-9200000000000000001), QW_ERANGE},
		{INT64_MIN + 0x401c, QW_ERANGE},
		{INT64_MAX, QW_ERANGE},
	};
	unsigned char frame[1024], again[1024];
	struct qw_wire_batch b;
	struct t_buf o;
	size_t len = t_frame(frame, sizeof frame, 5, 2), k;

	(void)state;
	t_batch(&b, &o, 5);
	for (k = 0; k < sizeof c / sizeof c[0]; k++) {
		t_put64(frame + 24 + 48, (uint64_t)c[k].ns); /* record 1 */
		assert_int_equal(qw_wire_decode(frame, len, &b), c[k].rc);
		if (c[k].rc == 0)
			assert_int_equal(qw_wire_encode_binary(again,
					 sizeof again, 5, 2, 0, b.t, b.x), len);
	}
	assert_true(QW_WIRE_TIME_MAX == 9.2e9);
	assert_int_equal(qw_wire_decode("9.2e9,1,2,3,4,5", 15, &b), 0);
	assert_int_equal(qw_wire_decode("-9.2e9,1,2,3,4,5", 16, &b), 0);
	assert_int_equal(qw_wire_decode("9.2000001e9,1,2,3,4,5", 21, &b),
			 QW_ERANGE);
}

/* ---- text and JSON rejections -------------------------------------------- */

struct t_case {
	const char *frame;
	int rc;
};

static void t_cases(const struct t_case *c, size_t n, size_t p)
{
	struct qw_wire_batch b;
	struct t_buf o;
	size_t i;
	int rc;

	for (i = 0; i < n; i++) {
		t_batch(&b, &o, p);
		rc = qw_wire_decode(c[i].frame, strlen(c[i].frame), &b);
		if (rc != c[i].rc)
			print_error("frame '%s': got %d, want %d\n", c[i].frame,
				    rc, c[i].rc);
		assert_int_equal(rc, c[i].rc);
		assert_int_equal(b.n, rc == 0 ? 1u : 0u);
	}
}

static void test_text_cases(void **state)
{
	static const struct t_case c[] = {
		{"1700000000.25,2.385,-0.5,1e3", 0},
		{"1700000000.25,2.385,-0.5,1e3\n", 0},
		{"1700000000.25,2.385,-0.5,1e3\r\n", 0},
		{"1700000000, ,nan,NaN", 0},         /* missing forms */
		{"1700000000,,,", 0},
		{" 1700000000 , 2.385 ,0,0", 0},
		{"1700000000,1,2", QW_ECOUNT},        /* too few */
		{"1700000000,1,2,3,4", QW_ECOUNT},    /* too many */
		{"1700000000", QW_ECOUNT},
		{"1700000000,2.3x,0,0", QW_ENUMBER},
		{"1700000000,0x1p3,0,0", QW_ENUMBER}, /* no hex floats */
		{"1700000000,1 2,0,0", QW_ENUMBER},
		{"abc,1,2,3", QW_ENUMBER},
		{",1,2,3", QW_ENUMBER},               /* time is required */
		{"nan,1,2,3", QW_ENUMBER},
		{"1700000000,inf,0,0", QW_ERANGE},
		{"1700000000,0,-Infinity,0", QW_ERANGE},
		{"1700000000,1e999,0,0", QW_ERANGE},
		{"inf,1,2,3", QW_ERANGE},
		{"1e10,1,2,3", QW_ERANGE},            /* past QW_WIRE_TIME_MAX */
		{"-1e10,1,2,3", QW_ERANGE},
		{"1700000000,1,2,3\n1700000001,1,2,3", QW_EFORMAT},
		{"1700000000,1,2\n,3", QW_EFORMAT},   /* not glued over lines */
		{"1700000000,1,2,3\r", QW_EFORMAT},
		{"1700000000,1,2,3\n\n", QW_EFORMAT},
		{"\n", QW_EFORMAT},
		{"   \t ", QW_EFORMAT},
		{"QW", QW_ETRUNC},                    /* a cut magic */
	};
	struct qw_wire_batch b;
	struct t_buf o;

	(void)state;
	t_cases(c, sizeof c / sizeof c[0], 3);
	t_batch(&b, &o, 3);
	assert_int_equal(qw_wire_decode("1700000000.25,2.385,,nan", 24, &b),
			 0);
	assert_true(b.t[0] == 1700000000.25 && b.x[0] == 2.385);
	assert_true(isnan(b.x[1]) && isnan(b.x[2]));
	b.cap = 0;
	assert_int_equal(qw_wire_decode("1,2,3,4", 7, &b), QW_EOVERSIZE);
	b.cap = 1;
	assert_int_equal(qw_wire_decode("", 0, &b), QW_EFORMAT);
	/* an embedded NUL is not a number */
	assert_int_equal(qw_wire_decode("1,2\0003,4,5", 9, &b), QW_ENUMBER);
}

static void test_json_cases(void **state)
{
	static const struct t_case c[] = {
		{"{\"t\": 1700000000.5, \"v\": [2.385, null, -1e-3]}", 0},
		{"  \n{\"v\":[1,2,3],\"t\":1700000000}\n", 0},
		{"{\"t\": 1700000000123e-3, \"v\": [1, 2, 3]}", 0},
		{"{\"t\": 1, \"t\": 2, \"v\": [1, 2, 3]}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2, 3], \"v\": [1, 2, 3]}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2]}", QW_ECOUNT},
		{"{\"t\": 1, \"v\": [1, 2, 3, 4]}", QW_ECOUNT},
		{"{\"t\": 1, \"v\": []}", QW_ECOUNT},
		{"{\"t\": 1, \"v\": [1, \"2\", 3]}", QW_ENUMBER},
		{"{\"t\": 1, \"v\": [1, true, 3]}", QW_ENUMBER},
		{"{\"t\": 1, \"v\": [1, [2], 3]}", QW_ENUMBER},
		{"{\"t\": 1, \"v\": [1, {}, 3]}", QW_ENUMBER},
		{"{\"t\": \"now\", \"v\": [1, 2, 3]}", QW_ENUMBER},
		{"{\"t\": null, \"v\": [1, 2, 3]}", QW_ENUMBER},
		{"{\"t\": 1, \"v\": [1, 1e999, 3]}", QW_ERANGE},
		{"{\"t\": 1e999, \"v\": [1, 2, 3]}", QW_ERANGE},
		{"{\"t\": 1e10, \"v\": [1, 2, 3]}", QW_ERANGE},
		{"{\"t\": 1, \"v\": {\"a\": 1}}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": 5}", QW_EFORMAT},
		{"{\"t\": 1}", QW_EFORMAT},
		{"{\"v\": [1, 2, 3]}", QW_EFORMAT},
		{"{\"t\": 1, \"x\": [1, 2, 3]}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2, 3], \"seq\": 4}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2, 3]} x", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2, 3]}{}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, 2, 3]", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, NaN, 3]}", QW_EFORMAT},
		{"{\"t\": 1, \"v\": [1, Infinity, 3]}", QW_EFORMAT},
		{"{}", QW_EFORMAT},
		{"{", QW_EFORMAT},
	};

	(void)state;
	t_cases(c, sizeof c / sizeof c[0], 3);
}

/* 10 MB of junk of several kinds: refused, quickly, without a crash. */
static void test_junk_10mb(void **state)
{
	unsigned char *junk = malloc(T_JUNK);
	struct qw_wire_batch b;
	struct t_buf o;
	uint64_t s = 31337;
	size_t i;
	int kind;

	(void)state;
	assert_non_null(junk);
	for (kind = 0; kind < 4; kind++) {
		for (i = 0; i < T_JUNK; i++)
			junk[i] = kind == 0 ? (unsigned char)t_next(&s)
				  : kind == 1 ? (unsigned char)"{[\"1,:"[i % 6]
				  : kind == 2 ? (unsigned char)"9,"[i % 2]
					      : (unsigned char)'7';
		if (kind == 0 && junk[0] == 'Q')
			junk[0] = 'x';
		t_batch(&b, &o, 5);
		assert_int_not_equal(qw_wire_decode(junk, T_JUNK, &b), 0);
		assert_int_equal(b.n, 0);
	}
	memcpy(junk, "QWB1", 4); /* a binary header then junk */
	memset(junk + 4, 0, 20);
	junk[4] = 5;
	junk[8] = 1;
	assert_int_equal(qw_wire_decode(junk, T_JUNK, &b), QW_EFORMAT);
	free(junk);
}

/* ---- encoders ------------------------------------------------------------ */

static void test_encoders_refuse(void **state)
{
	unsigned char frame[1024];
	char text[1024];
	double x[5] = {2.385, NAN, -1.5, 0.25, 1e-7}, t = T_EPOCH;
	size_t need, cap;

	(void)state;
	need = qw_wire_encode_binary(frame, sizeof frame, 5, 1, 0, &t, x);
	for (cap = 0; cap < need; cap++)
		assert_int_equal(qw_wire_encode_binary(frame, cap, 5, 1, 0, &t, x),
				 0);
	need = qw_wire_encode_text(text, sizeof text, 5, t, x);
	for (cap = 0; cap <= need; cap++) /* the NUL needs room too */
		assert_int_equal(qw_wire_encode_text(text, cap, 5, t, x), 0);
	need = qw_wire_encode_json(text, sizeof text, 5, t, x);
	for (cap = 0; cap <= need; cap++)
		assert_int_equal(qw_wire_encode_json(text, cap, 5, t, x), 0);
	assert_int_equal(qw_wire_encode_json(text, need + 1, 5, t, x), need);
	assert_string_equal(text, "{\"t\":1700000000,\"v\":[2.3849999999999998,"
				  "null,-1.5,0.25,9.9999999999999995e-08]}");
	qw_wire_encode_text(text, sizeof text, 5, t, x);
	assert_string_equal(text, "1700000000,2.3849999999999998,,-1.5,0.25,"
				  "9.9999999999999995e-08");
	x[2] = INFINITY;
	assert_int_equal(qw_wire_encode_binary(frame, sizeof frame, 5, 1, 0, &t,
					       x), 0);
	assert_int_equal(qw_wire_encode_text(text, sizeof text, 5, t, x), 0);
	assert_int_equal(qw_wire_encode_json(text, sizeof text, 5, t, x), 0);
	x[2] = 1.0;
	t = NAN;
	assert_int_equal(qw_wire_encode_text(text, sizeof text, 5, t, x), 0);
	t = 9.3e9; /* past QW_WIRE_TIME_MAX */
	assert_int_equal(qw_wire_encode_json(text, sizeof text, 5, t, x), 0);
	assert_int_equal(qw_wire_encode_binary(frame, sizeof frame, 5, 1, 0, &t,
					       x), 0);
}

/* ---- memory -------------------------------------------------------------- */

/* Binary and text decoding never allocate (the daemon's per-frame path);
 * JSON does, through jansson, and fails cleanly at each allocation. */
static void test_allocation(void **state)
{
	static unsigned char frame[24 + T_NMAX * (8 + 8 * T_PMAX)];
	char text[T_TEXT_MAX], json[T_TEXT_MAX];
	double t[T_NMAX], x[T_NMAX * T_PMAX];
	size_t blen, tlen, jlen;
	struct qw_wire_batch b;
	struct t_buf o;
	uint64_t s = 99;
	long k, misread = 0;
	size_t j;
	int r, rc, exact;

	(void)state;
	if (!QWA_ACTIVE)
		skip();
	t_fill(&s, T_PMAX, T_NMAX, t, x);
	blen = qw_wire_encode_binary(frame, sizeof frame, T_PMAX, T_NMAX, 0, t,
				     x);
	tlen = qw_wire_encode_text(text, sizeof text, T_PMAX, t[0], x);
	jlen = qw_wire_encode_json(json, sizeof json, T_PMAX, t[0], x);
	t_batch(&b, &o, T_PMAX);
	qwa_start(-1);
	for (r = 0; r < 100; r++) {
		rc = qw_wire_decode(frame, blen, &b);
		rc |= qw_wire_decode(text, tlen, &b);
		rc |= qw_wire_decode(frame, blen - 1, &b);
	}
	qwa_stop();
	assert_int_equal(qwa.allocs, 0);
	assert_int_equal(rc, QW_ETRUNC);
	for (k = 0;; k++) {
		qwa_start(k);
		rc = qw_wire_decode(json, jlen, &b);
		qwa_stop();
		assert_int_equal(qwa.live, 0);
		if (rc != 0) { /* jansson reports no OOM code: EFORMAT */
			assert_true(rc == QW_EFORMAT && b.n == 0);
			assert_true(qwa_injected());
			continue;
		}
		assert_int_equal(b.n, 1);
		for (j = 0, exact = t_same(b.t[0], t[0]); j < T_PMAX; j++)
			exact = exact && t_same(b.x[j], x[j]);
		if (!qwa_injected()) {
			assert_true(exact);
			break;
		}
		/* jansson drops characters of a number when its token buffer
		 * cannot grow (lex_save ignores the error, upstream): an
		 * out-of-memory parse may misread; counted, see test_alert */
		misread += !exact;
	}
	printf("# wire: JSON decode of p=%d: %ld allocations, each failed in "
	       "turn; jansson misread a number under %ld of them\n", T_PMAX,
	       k, misread);
}

/* ---- throughput (a note, not a verdict) ---------------------------------- */

static double t_now(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void test_binary_throughput(void **state)
{
	enum { P = 8, N = 16, REPS = 200000 };
	static unsigned char frame[24 + N * (8 + 8 * P)];
	double t[N], x[N * P], t0, secs, sum = 0;
	struct qw_wire_batch b;
	struct t_buf o;
	uint64_t s = 1;
	size_t len, r;

	(void)state;
	t_fill(&s, P, N, t, x);
	len = qw_wire_encode_binary(frame, sizeof frame, P, N, 0, t, x);
	t_batch(&b, &o, P);
	t0 = t_now();
	for (r = 0; r < REPS; r++) {
		assert_int_equal(qw_wire_decode(frame, len, &b), 0);
		sum += b.t[N - 1];
	}
	secs = t_now() - t0;
	assert_true(sum > 0);
	printf("# wire: binary decode p=%d, %d readings/frame: %.1f M "
	       "readings/s\n", P, N, (double)REPS * N / secs / 1e6);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_roundtrip_binary),
		cmocka_unit_test(test_roundtrip_text_json),
		cmocka_unit_test(test_roundtrip_extremes),
		cmocka_unit_test(test_binary_time_resolution),
		cmocka_unit_test(test_binary_truncated_every_offset),
		cmocka_unit_test(test_binary_header_rejections),
		cmocka_unit_test(test_binary_count_overflow),
		cmocka_unit_test(test_binary_inf_and_nan),
		cmocka_unit_test(test_time_range),
		cmocka_unit_test(test_text_cases),
		cmocka_unit_test(test_json_cases),
		cmocka_unit_test(test_junk_10mb),
		cmocka_unit_test(test_encoders_refuse),
		cmocka_unit_test(test_allocation),
		cmocka_unit_test(test_binary_throughput),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
