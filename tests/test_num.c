/* test_num.c: the one number parser (src/io/num.c).
 *
 * Tables of text against the value or refusal num.h documents: blanks,
 * junk, nan and inf under each flag, overflow and underflow, lengths, u64
 * ranges and durations.  A seeded round trip checks that every double
 * printed with %.17g comes back bit for bit (C11 7.21.6.1: 17 significant
 * digits identify a binary64). */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <string.h>

#include <gsl/gsl_rng.h>

#include "num.h"
#include "quadwatch.h"

#define NUM_ROUNDTRIPS 100000 /* random doubles: a second of work */
#define NUM_SEED 2385         /* fixed seed: failures reproduce */
#define NUM_TEXT_MAX 63       /* longest text num.c accepts (NUM_MAX_TEXT-1) */

#define ALL ((size_t)-1)

struct dbl_case {
	const char *text;
	size_t len;      /* ALL: up to the NUL */
	int nan_ok, inf_ok;
	int rc;          /* 0 or QW_ENUMBER */
	double want;     /* when rc == 0; NaN: any NaN */
};

static const struct dbl_case dbl_cases[] = {
	{"2.385", ALL, 0, 0, 0, 2.385},
	{" \t2.385\n", ALL, 0, 0, 0, 2.385},
	{"-2.385e-3", ALL, 0, 0, 0, -2.385e-3},
	{"+2.385E+3", ALL, 0, 0, 0, 2385.0},
	{".5", ALL, 0, 0, 0, 0.5},
	{"5.", ALL, 0, 0, 0, 5.0},
	{"2.385xyz", 5, 0, 0, 0, 2.385},  /* only len bytes are read */
	{"2.385 7", 5, 0, 0, 0, 2.385},
	{"4.9e-324", ALL, 0, 0, 0, 4.9e-324}, /* smallest subnormal */
	{"1e-400", ALL, 0, 0, 0, 0.0},    /* underflow to zero is a value */
	{"1.7976931348623157e308", ALL, 0, 0, 0, 1.7976931348623157e308},
	/* blanks and junk */
	{"", ALL, 1, 1, QW_ENUMBER, 0},
	{"   \t ", ALL, 1, 1, QW_ENUMBER, 0},
	{"2.385", 0, 1, 1, QW_ENUMBER, 0},
	{"2.385x", ALL, 1, 1, QW_ENUMBER, 0},
	{"2 385", ALL, 1, 1, QW_ENUMBER, 0},
	{"2,385", ALL, 1, 1, QW_ENUMBER, 0},
	{"2.3.4", ALL, 1, 1, QW_ENUMBER, 0},
	{"--1", ALL, 1, 1, QW_ENUMBER, 0},
	{"1e", ALL, 1, 1, QW_ENUMBER, 0},
	{"e5", ALL, 1, 1, QW_ENUMBER, 0},
	{"abc", ALL, 1, 1, QW_ENUMBER, 0},
	{"0x10", ALL, 1, 1, QW_ENUMBER, 0},   /* hex floats refused */
	{"0x1p3", ALL, 1, 1, QW_ENUMBER, 0},
	{"nan(0x1)", ALL, 1, 1, QW_ENUMBER, 0},
	{"2.385\0" "1", 7, 1, 1, QW_ENUMBER, 0}, /* a NUL inside len */
	/* nan */
	{"nan", ALL, 1, 0, 0, NAN},
	{" NaN ", ALL, 1, 0, 0, NAN},
	{"NAN", ALL, 1, 1, 0, NAN},
	{"nan", ALL, 0, 1, QW_ENUMBER, 0},
	{"nanx", ALL, 1, 1, QW_ENUMBER, 0},
	/* inf and overflow */
	{"inf", ALL, 0, 1, 0, INFINITY},
	{"-Infinity", ALL, 0, 1, 0, -INFINITY},
	{"1e999", ALL, 0, 1, 0, INFINITY},
	{"-1e999", ALL, 0, 1, 0, -INFINITY},
	{"inf", ALL, 1, 0, QW_ENUMBER, 0},
	{"-inf", ALL, 1, 0, QW_ENUMBER, 0},
	{"1e999", ALL, 1, 0, QW_ENUMBER, 0},
	{"-1.8e308", ALL, 1, 0, QW_ENUMBER, 0},
};

static void check_dbl(size_t i, const struct dbl_case *c)
{
	double v = -12345.678;
	int rc = qw_num_double(c->text, c->len, c->nan_ok, c->inf_ok, &v);
	int same = rc == c->rc;

	if (same && rc == 0)
		same = isnan(c->want) ? isnan(v) : v == c->want;
	if (same && rc != 0)
		same = v == -12345.678; /* *out untouched on error */
	if (!same)
		fail_msg("case %zu '%s' (nan %d inf %d): rc %d value %.17g, "
			 "want rc %d value %.17g", i, c->text, c->nan_ok,
			 c->inf_ok, rc, v, c->rc, c->want);
}

static void test_double_table(void **state)
{
	size_t i;

	(void)state;
	for (i = 0; i < sizeof dbl_cases / sizeof dbl_cases[0]; i++)
		check_dbl(i, &dbl_cases[i]);
}

/* Texts up to NUM_TEXT_MAX characters (blanks not counted) are read. */
static void test_double_length(void **state)
{
	char buf[200];
	double v;

	(void)state;
	memset(buf, '0', NUM_TEXT_MAX);
	buf[0] = '2';
	buf[1] = '.';
	buf[NUM_TEXT_MAX] = '\0';
	assert_int_equal(qw_num_double(buf, ALL, 0, 0, &v), 0);
	assert_true(v == 2.0);
	memset(buf, '0', NUM_TEXT_MAX + 1);
	buf[0] = '2';
	buf[1] = '.';
	buf[NUM_TEXT_MAX + 1] = '\0';
	assert_int_equal(qw_num_double(buf, ALL, 0, 0, &v), QW_ENUMBER);
	memset(buf, ' ', 150);
	strcpy(buf + 150, "2.385");
	assert_int_equal(qw_num_double(buf, ALL, 0, 0, &v), 0);
	assert_true(v == 2.385);
}

/* Random doubles over many magnitudes, printed %.17g, parse back exactly;
 * so does the shortest form %g when it round-trips. */
static void test_double_roundtrip(void **state)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	char buf[64];
	double x, v;
	size_t i;

	(void)state;
	assert_non_null(rng);
	gsl_rng_set(rng, NUM_SEED);
	for (i = 0; i < NUM_ROUNDTRIPS; i++) {
		x = (gsl_rng_uniform(rng) - 0.5) *
		    pow(10.0, (double)gsl_rng_uniform_int(rng, 600) - 300.0);
		snprintf(buf, sizeof buf, "%.17g", x);
		if (qw_num_double(buf, ALL, 0, 0, &v) != 0 ||
		    memcmp(&v, &x, sizeof v) != 0)
			fail_msg("round trip of %s gave %.17g", buf, v);
	}
	gsl_rng_free(rng);
}

/* printf prints a NaN whose sign bit is set (0.0/0.0 on x86) as "-nan":
 * a producer writing missing values that way must be understood. */
static void test_double_negative_nan(void **state)
{
	double v = 0;

	(void)state;
	assert_int_equal(qw_num_double("-nan", ALL, 1, 0, &v), 0);
	assert_true(isnan(v));
	assert_int_equal(qw_num_double("-nan", ALL, 0, 1, &v), QW_ENUMBER);
}

struct u64_case {
	const char *text;
	size_t len;
	uint64_t lo, hi;
	int rc;
	uint64_t want;
};

static const struct u64_case u64_cases[] = {
	{"0", ALL, 0, 10, 0, 0},
	{"10", ALL, 0, 10, 0, 10},
	{" 7\t", ALL, 0, 10, 0, 7},
	{"010", ALL, 0, 100, 0, 10},           /* decimal, never octal */
	{"123456", 3, 0, 1000, 0, 123},
	{"18446744073709551615", ALL, 0, UINT64_MAX, 0, UINT64_MAX},
	{"11", ALL, 0, 10, QW_ENUMBER, 0},
	{"4", ALL, 5, 10, QW_ENUMBER, 0},
	{"18446744073709551616", ALL, 0, UINT64_MAX, QW_ENUMBER, 0},
	{"99999999999999999999999", ALL, 0, UINT64_MAX, QW_ENUMBER, 0},
	{"-1", ALL, 0, UINT64_MAX, QW_ENUMBER, 0},
	{"+1", ALL, 0, 10, QW_ENUMBER, 0},
	{"4 2", ALL, 0, 100, QW_ENUMBER, 0},
	{"0x10", ALL, 0, 100, QW_ENUMBER, 0},
	{"1e3", ALL, 0, 10000, QW_ENUMBER, 0},
	{"1.0", ALL, 0, 10, QW_ENUMBER, 0},
	{"", ALL, 0, 10, QW_ENUMBER, 0},
	{"  ", ALL, 0, 10, QW_ENUMBER, 0},
	{"nan", ALL, 0, 10, QW_ENUMBER, 0},
};

static void test_u64_table(void **state)
{
	size_t i;
	uint64_t v;
	int rc;

	(void)state;
	for (i = 0; i < sizeof u64_cases / sizeof u64_cases[0]; i++) {
		const struct u64_case *c = &u64_cases[i];

		v = 12345;
		rc = qw_num_u64(c->text, c->len, c->lo, c->hi, &v);
		if (rc != c->rc || (rc == 0 && v != c->want) ||
		    (rc != 0 && v != 12345))
			fail_msg("case %zu '%s' [%llu, %llu]: rc %d value %llu",
				 i, c->text, (unsigned long long)c->lo,
				 (unsigned long long)c->hi, rc,
				 (unsigned long long)v);
	}
}

struct dur_case {
	const char *text;
	int rc;
	double want;   /* seconds */
	int unit;      /* had_unit */
};

static const struct dur_case dur_cases[] = {
	{"30", 0, 30.0, 0},
	{"2.385", 0, 2.385, 0},
	{"0", 0, 0.0, 0},
	{"30s", 0, 30.0, 1},
	{"0s", 0, 0.0, 1},
	{"250ms", 0, 0.25, 1},
	{"1.5min", 0, 90.0, 1},
	{" 10 min ", 0, 600.0, 1},
	{"2h", 0, 7200.0, 1},
	{"1d", 0, 86400.0, 1},
	{"2.385e2s", 0, 238.5, 1},
	{"-1", QW_ENUMBER, 0, 0},
	{"-1s", QW_ENUMBER, 0, 0},
	{"5m", QW_ENUMBER, 0, 0},     /* minutes or metres: refused */
	{"5S", QW_ENUMBER, 0, 0},
	{"5 sec", QW_ENUMBER, 0, 0},
	{"5ss", QW_ENUMBER, 0, 0},
	{"s", QW_ENUMBER, 0, 0},
	{"min", QW_ENUMBER, 0, 0},
	{"", QW_ENUMBER, 0, 0},
	{"nan", QW_ENUMBER, 0, 0},
	{"inf", QW_ENUMBER, 0, 0},
	{"infs", QW_ENUMBER, 0, 0},
	{"1e", QW_ENUMBER, 0, 0},
	{"0x5s", QW_ENUMBER, 0, 0},
	{"1e400", QW_ENUMBER, 0, 0},
	{"1e400s", QW_ENUMBER, 0, 0},
};

static void test_duration_table(void **state)
{
	size_t i;
	double v;
	int rc, unit;

	(void)state;
	for (i = 0; i < sizeof dur_cases / sizeof dur_cases[0]; i++) {
		const struct dur_case *c = &dur_cases[i];

		v = -1;
		unit = -1;
		rc = qw_num_duration(c->text, &unit, &v);
		if (rc != c->rc || (rc == 0 && (v != c->want ||
						unit != c->unit)))
			fail_msg("case %zu '%s': rc %d value %.17g unit %d", i,
				 c->text, rc, v, unit);
	}
}

/* A finite number times a unit can overflow: 1e304 days is 8.64e308 s,
 * past DBL_MAX; that is out of range, not infinitely long. */
static void test_duration_overflow(void **state)
{
	double v = -1;
	int unit;

	(void)state;
	assert_int_equal(qw_num_duration("1e303d", &unit, &v), 0);
	assert_true(isfinite(v));
	v = -1;
	if (qw_num_duration("1e304d", &unit, &v) != QW_ENUMBER)
		fail_msg("1e304d gave %g s, want QW_ENUMBER", v);
}

/* ---- the fast path against strtod ---------------------------------------- */

#define NUM_FAST_CASES 400000 /* random decimals: about a second */
#define NUM_FAST_MIN_SHARE 0.5 /* of them the fast path must take */

/* A random decimal of the shapes sensor logs and configs hold: sign,
 * 1..24 digits (leading zeros sometimes), a point anywhere or none, an
 * exponent sometimes; blanks around sometimes. */
static void rand_decimal(gsl_rng *r, char *buf, size_t cap)
{
	size_t n = 0, nd = 1 + gsl_rng_uniform_int(r, 24), i;
	size_t point = gsl_rng_uniform_int(r, nd + 2);
	int lead0 = gsl_rng_uniform_int(r, 4) == 0;

	if (gsl_rng_uniform_int(r, 8) == 0)
		buf[n++] = ' ';
	if (gsl_rng_uniform_int(r, 3) == 0)
		buf[n++] = gsl_rng_uniform_int(r, 4) ? '-' : '+';
	for (i = 0; i < nd; i++) {
		if (i == point)
			buf[n++] = '.';
		buf[n++] = (char)('0' + (i == 0 && lead0 ? 0 :
				  gsl_rng_uniform_int(r, 10)));
	}
	if (point == nd)
		buf[n++] = '.';
	if (gsl_rng_uniform_int(r, 3) == 0)
		n += (size_t)snprintf(buf + n, cap - n, "%c%d",
				      gsl_rng_uniform_int(r, 2) ? 'e' : 'E',
				      (int)gsl_rng_uniform_int(r, 61) - 30);
	if (gsl_rng_uniform_int(r, 8) == 0)
		buf[n++] = '\t';
	buf[n] = '\0';
}

/* 1 when a and b are the same binary64, bit for bit. */
static int same_bits(double a, double b)
{
	return memcmp(&a, &b, sizeof a) == 0;
}

/* Every input the fast path takes gives strtod's double bit for bit, and
 * qw_num_double (fast path or not) agrees with strtod everywhere. */
static void test_double_fast_vs_strtod(void **state)
{
	static const char *const edges[] = {
		"9007199254740992", "9007199254740993", "9007199254740991",
		"1e22", "1e23", "9007199254740992e22", "9007199254740992e-22",
		"1e-22", "0.1", "0.3", "2.385", "-0", "-0.0", "+0e5", "0e-400",
		"4.9e-324", "2.2250738585072014e-308", "123456789012345678",
		"1234567890123456789", "12345678901234567890", "0.000000001",
		"00000000000000000000000000001", "1.7976931348623157e308",
		"1700000000.1", "1700000000.123456", "48.9029", "-291.29",
		"5.", ".5", "3.14159265358979323846", "7e-10", "8.5e+21",
	};
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	char buf[96], *end;
	size_t i, nfast = 0;
	double v, w;

	(void)state;
	gsl_rng_set(r, NUM_SEED);
	for (i = 0; i < sizeof edges / sizeof edges[0] + NUM_FAST_CASES;
	     i++) {
		if (i < sizeof edges / sizeof edges[0])
			snprintf(buf, sizeof buf, "%s", edges[i]);
		else
			rand_decimal(r, buf, sizeof buf);
		w = strtod(buf, &end);
		v = -1.5;
		if (qw_num_double_fast(buf, strlen(buf), &v)) {
			nfast++;
			if (!same_bits(v, w))
				fail_msg("fast path '%s': %a, strtod %a", buf,
					 v, w);
		}
		v = -1.5;
		if (qw_num_double(buf, ALL, 0, 0, &v) != 0 ||
		    !same_bits(v, w))
			fail_msg("'%s': %a, strtod %a", buf, v, w);
	}
	print_message("# fast path took %zu of %zu inputs\n", nfast, i);
	assert_true((double)nfast >= NUM_FAST_MIN_SHARE * NUM_FAST_CASES);
	gsl_rng_free(r);
}

/* The checker can fail: scaling by an inexact 0.1^k instead of dividing
 * by the exact 10^k misses strtod's double for some of these inputs. */
static void test_double_fast_broken(void **state)
{
	gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
	size_t i, differ = 0;
	double w, naive;

	(void)state;
	gsl_rng_set(r, NUM_SEED);
	for (i = 0; i < 10000; i++) {
		char buf[64];
		unsigned long m = gsl_rng_get(r) % 100000000ul;
		int k = 1 + (int)gsl_rng_uniform_int(r, 15);

		snprintf(buf, sizeof buf, "%lue-%d", m, k);
		w = strtod(buf, NULL);
		naive = (double)m * pow(0.1, k);
		differ += !same_bits(w, naive);
	}
	assert_true(differ > 0);
	gsl_rng_free(r);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_double_table),
		cmocka_unit_test(test_double_length),
		cmocka_unit_test(test_double_roundtrip),
		cmocka_unit_test(test_double_negative_nan),
		cmocka_unit_test(test_double_fast_vs_strtod),
		cmocka_unit_test(test_double_fast_broken),
		cmocka_unit_test(test_u64_table),
		cmocka_unit_test(test_duration_table),
		cmocka_unit_test(test_duration_overflow),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
