/* fmt.c: printf's %.Pg and %.6f, exactly, without printf (see fmt.h).
 *
 * printf rounds the exact binary value to P significant digits (C11
 * 7.21.6.1; glibc rounds a tie to even).  The fast path gets those digits
 * as the integer nearest m = |v| * 10^k, where k puts m in [10^(P-1),
 * 10^P) and 10^|k| <= 10^22 is an exact double: the one multiply or divide
 * rounds once, so m is within half an ulp of the true product, and for
 * P <= 12 (m < 2^40) that half ulp is below 2^-13.  The nearest integer is then certain
 * unless m's fraction lies within FMT_TIE_TOL of one half; those values
 * (exact ties among them), and every value whose k is out of the table,
 * zero, subnormals, Inf and NaN, go to snprintf.  %.6f splits |v| into its integer
 * part and its fraction (both exact below 2^52) and rounds fraction *
 * 10^6 the same way.  The digits are then laid out by C's %g rule: style
 * f when -4 <= X < P (X the decimal exponent after rounding), else style
 * e with at least two exponent digits; trailing zeros dropped.
 * tests/test_fmt.c compares every function with snprintf on random and
 * edge values.
 *
 * Workload: four numbers per --scores row (the limit's text is mostly
 * reused, replay_play.c); 30-45 ns each on the machine measured, where
 * snprintf took ~400 ns.  The digits come in groups of four from two
 * levels of division (eight or sixteen digits, whichever holds the
 * number), two per table lookup, and are moved FMT_RUN bytes at a time:
 * a chain of divisions by 100 and byte loops had been most of the time
 * (a row's three numbers 143 -> 119 ns, interleaved A/B, 2026-12-03). */
#include "fmt.h"

#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#define FMT_POW_MAX 22         /* 10^22: the largest exact power of ten */
#define FMT_TIE_TOL 1e-3       /* |frac(m) - 1/2| below this: snprintf
				  (m's error is below 2^-13 for P <= 12,
				  2^-33 for %.6f's fraction) */
#define FMT_F_DIGITS 6         /* decimals of qw_fmt_f6 */
#define FMT_F_SCALE 1e6        /* 10^FMT_F_DIGITS */
#define FMT_F_FRAC_SKIP 2      /* fmt_digits8's 8 digits: the 6 after 2 */
#define FMT_F_INT_MAX 4.5e15   /* |v| below 2^52: floor and fraction exact */
#define FMT_F_WHOLE_MAX 16     /* digits of a whole part below 4.5e15 + 1 */
#define FMT_MANT_BITS 52       /* binary64: stored significand bits */
#define FMT_EXP_BIAS 1023      /* binary64: exponent bias */
#define FMT_HALF_SCALE 100000000u /* 10^8: fmt_digits16's first split */
#define FMT_QUAD_SCALE 10000u  /* 10^4: its second */
#define FMT_RUN 16             /* digits of fmt_digits16; bytes per move */
/* floor(e log10 2) = (e * 78913) >> 18 for |e| <= 1650 (78913 / 2^18 =
 * 0.3010292 from below; the identity of Ryu's log10Pow2, Adams 2018;
 * a guess one too high only sends the value to snprintf) */
#define FMT_LOG10_2_NUM 78913
#define FMT_LOG10_2_SHIFT 18
#define FMT_LOG10_2_NUM12 1233 /* the same to 2^12, for bit lengths */
#define FMT_LOG10_2_SHIFT12 12

_Static_assert(QW_FMT_WHOLE_MAX >= FMT_RUN,
	       "a memo's digits are copied FMT_RUN bytes at a time");

static const double fmt_pow10[FMT_POW_MAX + 1] = {
	1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11,
	1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
};

/* 10^0 .. 10^16 as integers: the whole part's digit count in qw_fmt_f6 */
static const uint64_t fmt_pow10_u[FMT_F_WHOLE_MAX + 1] = {
	1ull, 10ull, 100ull, 1000ull, 10000ull, 100000ull, 1000000ull,
	10000000ull, 100000000ull, 1000000000ull, 10000000000ull,
	100000000000ull, 1000000000000ull, 10000000000000ull,
	100000000000000ull, 1000000000000000ull, 10000000000000000ull,
};

/* a * 10^k for |k| <= FMT_POW_MAX, one rounding. */
static double fmt_scale(double a, int k)
{
	return k >= 0 ? a * fmt_pow10[k] : a / fmt_pow10[-k];
}

/* Nearest integer to m >= 0 into *r: 1, or 0 when m is too near a tie to
 * be sure of it. */
static int fmt_round(double m, uint64_t *r)
{
	double fl = (double)(uint64_t)m, fr = m - fl; /* exact: m < 2^53 */

	if (fabs(fr - 0.5) < FMT_TIE_TOL)
		return 0;
	*r = (uint64_t)fl + (fr > 0.5);
	return 1;
}

/* "00" to "99": two digits per division (the divisions are the chain) */
static const char fmt_pairs[200] =
	"00010203040506070809101112131415161718192021222324252627282930313233"
	"34353637383940414243444546474849505152535455565758596061626364656667"
	"6869707172737475767778798081828384858687888990919293949596979899";

/* The four digits of x < 10^4 to d: two pairs, one division apart. */
static void fmt_four(char *d, uint32_t x)
{
	uint32_t hi = x / 100;

	memcpy(d, fmt_pairs + 2 * hi, 2);
	memcpy(d + 2, fmt_pairs + 2 * (x - hi * 100), 2);
}

/* The sixteen digits of r < 10^16, leading zeros kept, to d[0..16): four
 * groups of four from two levels of division, so the chain is three
 * divisions deep (not one per pair); the caller takes the last n. */
static void fmt_digits16(char *d, uint64_t r)
{
	uint32_t hi = (uint32_t)(r / FMT_HALF_SCALE);
	uint32_t lo = (uint32_t)(r - (uint64_t)hi * FMT_HALF_SCALE);
	uint32_t h1 = hi / FMT_QUAD_SCALE, l1 = lo / FMT_QUAD_SCALE;

	fmt_four(d, h1);
	fmt_four(d + 4, hi - h1 * FMT_QUAD_SCALE);
	fmt_four(d + 8, l1);
	fmt_four(d + 12, lo - l1 * FMT_QUAD_SCALE);
}

/* The eight digits of x < 10^8, leading zeros kept, to d[0..8). */
static void fmt_digits8(char *d, uint32_t x)
{
	uint32_t hi = x / FMT_QUAD_SCALE;

	fmt_four(d, hi);
	fmt_four(d + 4, x - hi * FMT_QUAD_SCALE);
}

/* The n <= 16 digits of r < 10^n, ending at d + FMT_RUN (leading zeros
 * from d + FMT_RUN - 8 or from d): eight or sixteen digits' work. */
static void fmt_digits(char *d, uint64_t r, int n)
{
	if (n <= FMT_RUN / 2)
		fmt_digits8(d + FMT_RUN / 2, (uint32_t)r);
	else
		fmt_digits16(d, r);
}

/* Decimal digits of w < 2^53 (1 for 0): floor(bits log10 2) = (bits *
 * 1233) >> 12 for bits <= 64, one short or exact, settled by the table. */
static int fmt_count_digits(uint64_t w)
{
	int bits = w != 0 ? 64 - __builtin_clzll(w) : 0;
	int t = (bits * FMT_LOG10_2_NUM12) >> FMT_LOG10_2_SHIFT12;

	t += w >= fmt_pow10_u[t];
	return t > 0 ? t : 1;
}

/* Lays out P digits d with decimal exponent x in %g style into buf at o.
 * Runs of digits are moved FMT_RUN bytes at a time whatever their length
 * (d has FMT_RUN readable bytes past any run, buf QW_FMT_MAX bytes): no
 * byte loop and no call; the bytes past a run are overwritten after. */
static size_t fmt_layout(char *buf, size_t o, const char *d, int prec, int x)
{
	int n = prec;

	while (n > 1 && d[n - 1] == '0')
		n--; /* %g drops trailing zeros */
	if (x >= -4 && x < prec) {
		if (x >= 0) {
			/* x + 1 <= P integer digits, the dropped zeros among
			 * them still in d */
			memcpy(buf + o, d, FMT_RUN);
			o += (size_t)x + 1;
			if (n > x + 1) {
				buf[o++] = '.';
				memcpy(buf + o, d + x + 1, FMT_RUN);
				o += (size_t)(n - x - 1);
			}
		} else {
			memcpy(buf + o, "0.000", 5);
			o += (size_t)(1 - x); /* "0." and -x-1 zeros */
			memcpy(buf + o, d, FMT_RUN);
			o += (size_t)n;
		}
	} else {
		int ax = x < 0 ? -x : x;

		buf[o++] = d[0];
		if (n > 1) {
			buf[o++] = '.';
			memcpy(buf + o, d + 1, FMT_RUN);
			o += (size_t)(n - 1);
		}
		buf[o++] = 'e';
		buf[o++] = x < 0 ? '-' : '+';
		if (ax >= 100)
			buf[o++] = (char)('0' + ax / 100);
		buf[o++] = (char)('0' + ax / 10 % 10);
		buf[o++] = (char)('0' + ax % 10);
	}
	buf[o] = '\0';
	return o;
}

static size_t fmt_slow_g(char *buf, int prec, double v)
{
	int n = snprintf(buf, QW_FMT_MAX, "%.*g", prec, v);

	return n > 0 ? (size_t)n : 0;
}

static size_t fmt_slow_f6(char *buf, double v)
{
	int n = snprintf(buf, QW_FMT_MAX, "%.6f", v);

	return n > 0 ? (size_t)n : 0;
}

size_t qw_fmt_g(char *buf, double v, int prec)
{
	double a = fabs(v), m, lo, hi;
	char dig[2 * FMT_RUN] = {0};
	uint64_t r, bits;
	int e2, x, k;
	size_t o = 0;

	if (!(a >= DBL_MIN) || !isfinite(a) || prec < 1 || prec > QW_FMT_G_PREC_MAX)
		return fmt_slow_g(buf, prec, v);
	memcpy(&bits, &a, sizeof bits);
	e2 = (int)(bits >> FMT_MANT_BITS) - FMT_EXP_BIAS; /* 2^e2 <= a */
	/* floor(e2 log10 2): 10^x <= a, or 10^(x+1) <= a */
	x = (e2 * FMT_LOG10_2_NUM) >> FMT_LOG10_2_SHIFT;
	lo = fmt_pow10[prec - 1];
	hi = fmt_pow10[prec];
	k = prec - 1 - x;
	if (k < -FMT_POW_MAX || k > FMT_POW_MAX)
		return fmt_slow_g(buf, prec, v);
	m = fmt_scale(a, k);
	if (m >= hi) { /* the guess was one low */
		x++;
		k--;
		if (k < -FMT_POW_MAX)
			return fmt_slow_g(buf, prec, v);
		m = fmt_scale(a, k);
	}
	/* m may sit a rounding below 10^(P-1) after the step up: it then
	 * rounds to 10^(P-1) itself; anything further off is not ours */
	if (m < lo - 0.5 || m >= hi || !fmt_round(m, &r) || r < (uint64_t)lo)
		return fmt_slow_g(buf, prec, v);
	if (r >= (uint64_t)hi) { /* carry: 9.99..95 -> 10.0 */
		r /= 10;
		x++;
	}
	fmt_digits(dig, r, prec);
	if (signbit(v))
		buf[o++] = '-';
	return fmt_layout(buf, o, dig + FMT_RUN - prec, prec, x);
}

size_t qw_fmt_f6_memo(char *buf, double v, struct qw_fmt_whole *memo)
{
	double a = fabs(v), ip, m;
	char dig[2 * FMT_RUN] = {0};
	uint64_t r, whole;
	size_t o = 0;
	int n;

	if (!(a < FMT_F_INT_MAX))
		return fmt_slow_f6(buf, v);
	ip = floor(a);
	m = (a - ip) * FMT_F_SCALE; /* exact difference, one rounding */
	if (!fmt_round(m, &r))
		return fmt_slow_f6(buf, v);
	whole = (uint64_t)ip;
	if (r >= (uint64_t)FMT_F_SCALE) {
		r -= (uint64_t)FMT_F_SCALE;
		whole++;
	}
	if (signbit(v))
		buf[o++] = '-';
	if (memo != NULL && memo->len > 0 && memo->whole == whole) {
		/* the digits were stored long ago: this copy does not wait
		 * on the small stores of fmt_digits */
		memcpy(buf + o, memo->txt, FMT_RUN);
		o += memo->len;
	} else {
		n = fmt_count_digits(whole);
		fmt_digits(dig, whole, n);
		memcpy(buf + o, dig + FMT_RUN - n, FMT_RUN);
		o += (size_t)n;
		if (memo != NULL) {
			memcpy(memo->txt, dig + FMT_RUN - n, FMT_RUN);
			memo->len = (size_t)n;
			memo->whole = whole;
		}
	}
	buf[o++] = '.';
	fmt_digits8(dig, (uint32_t)r);
	memcpy(buf + o, dig + FMT_F_FRAC_SKIP, FMT_RUN);
	o += FMT_F_DIGITS;
	buf[o] = '\0';
	return o;
}

size_t qw_fmt_f6(char *buf, double v)
{
	return qw_fmt_f6_memo(buf, v, NULL);
}
