/* num.c: the one number parser (see num.h).
 *
 * qw_num_double first tries an exact fast path (Clinger 1990, "How to read
 * floating point numbers accurately", PLDI, the "fast path" of section 4):
 * a plain decimal w * 10^e whose significand w has at most 19 digits and
 * fits in 2^53, with |e| <= 22, is w (exact as a double) times or divided
 * by 10^|e| (exact as a double up to 10^22), so the one IEEE multiply or
 * divide rounds the true value once, correctly: the double strtod gives.
 * Everything else (more digits, larger exponents, nan, inf, hex, junk)
 * goes to strtod, which also words every refusal.
 * tests/test_num.c compares the two bit for bit on random and edge inputs.
 *
 * Workload: a handful of calls per config line, one per channel per
 * text-format reading, and one per cell of a replayed CSV (10^7 and more
 * per file): the fast path takes ~10 ns, strtod ~100 ns. */
#include "num.h"

#include <ctype.h>
#include <errno.h>
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "quadwatch.h"

#define NUM_MAX_TEXT 64 /* chars: longer than any double printed by %.17g */

/* Copies s[0..len) without surrounding blanks into buf; 0 or QW_ENUMBER. */
static int num_trim(const char *s, size_t len, char *buf)
{
	if (len == (size_t)-1)
		len = strlen(s);
	while (len > 0 && isspace((unsigned char)*s)) {
		s++;
		len--;
	}
	while (len > 0 && isspace((unsigned char)s[len - 1]))
		len--;
	if (len == 0 || len >= NUM_MAX_TEXT || memchr(s, '\0', len))
		return QW_ERROR(QW_ENUMBER);
	memcpy(buf, s, len);
	buf[len] = '\0';
	return 0;
}

#define NUM_FAST_DIGITS 19      /* significant digits that fit a uint64 */
#define NUM_FAST_W_MAX (1ull << 53) /* significands exact in a binary64 */
#define NUM_FAST_EXP_MAX 22     /* 10^22 is the largest exact power of ten
				   (5^22 < 2^53) */
#define NUM_EXP_CAP 10000       /* exponent digits stop counting here */

/* Exact powers of ten, 10^0 .. 10^22. */
static const double num_pow10[NUM_FAST_EXP_MAX + 1] = {
	1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11,
	1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
};

static int num_blank(char c)
{
	return c == ' ' || c == '\t' || c == '\n' || c == '\r' ||
	       c == '\v' || c == '\f';
}

int qw_num_double_fast(const char *s, size_t len, double *out)
{
	const char *p = s, *e = s + len;
	const char *first;
	uint64_t w = 0;
	int nd = 0, digits = 0, neg = 0, exp10 = 0;
	double v;

#if FLT_EVAL_METHOD != 0
	return 0; /* excess precision would round twice */
#endif
	while (p < e && num_blank(*p))
		p++;
	while (e > p && num_blank(e[-1]))
		e--;
	if (e - p >= NUM_MAX_TEXT)
		return 0;
	first = p;
	if (p < e && (*p == '-' || *p == '+'))
		neg = *p++ == '-';
	for (; p < e && *p >= '0' && *p <= '9'; p++, digits++) {
		if (w == 0 && *p == '0')
			continue; /* leading zeros are not significant */
		if (++nd > NUM_FAST_DIGITS)
			return 0;
		w = w * 10 + (uint64_t)(*p - '0');
	}
	if (p < e && *p == '.') {
		for (p++; p < e && *p >= '0' && *p <= '9'; p++, digits++) {
			exp10--;
			if (w == 0 && *p == '0')
				continue;
			if (++nd > NUM_FAST_DIGITS)
				return 0;
			w = w * 10 + (uint64_t)(*p - '0');
		}
	}
	if (digits == 0)
		return 0;
	if (p < e && (*p == 'e' || *p == 'E')) {
		int eneg = 0, ex = 0, ed = 0;

		p++;
		if (p < e && (*p == '-' || *p == '+'))
			eneg = *p++ == '-';
		for (; p < e && *p >= '0' && *p <= '9'; p++, ed++)
			if (ex < NUM_EXP_CAP)
				ex = ex * 10 + (*p - '0');
		if (ed == 0)
			return 0;
		exp10 += eneg ? -ex : ex;
	}
	if (p != e || w > NUM_FAST_W_MAX || first == e)
		return 0;
	if (exp10 < -NUM_FAST_EXP_MAX || exp10 > NUM_FAST_EXP_MAX)
		return 0;
	/* step: one correctly rounded operation on exact operands */
	v = exp10 >= 0 ? (double)w * num_pow10[exp10]
		       : (double)w / num_pow10[-exp10];
	*out = neg ? -v : v;
	return 1;
}

int qw_num_double(const char *s, size_t len, int allow_nan, int allow_inf,
		  double *out)
{
	char buf[NUM_MAX_TEXT], *end;
	double v;

	if (len == (size_t)-1)
		len = strlen(s);
	if (qw_num_double_fast(s, len, out)) /* a NUL is not a digit: it falls back */
		return 0;
	if (num_trim(s, len, buf) != 0)
		return QW_ENUMBER;
	/* printf writes a NaN with its sign bit set as "-nan" */
	if (strcasecmp(buf + (buf[0] == '-' || buf[0] == '+'), "nan") == 0) {
		if (!allow_nan)
			return QW_ERROR(QW_ENUMBER);
		*out = NAN;
		return 0;
	}
	/* strtod also takes hex floats and "nan(...)"; refuse the exotic
	 * forms so a typo cannot slip through as a number. */
	if (strpbrk(buf, "xX(") != NULL)
		return QW_ERROR(QW_ENUMBER);
	errno = 0;
	v = strtod(buf, &end);
	if (end == buf || *end != '\0')
		return QW_ERROR(QW_ENUMBER);
	if (isnan(v) || (isinf(v) && !allow_inf))
		return QW_ERROR(QW_ENUMBER);
	if (errno == ERANGE && isinf(v) && !allow_inf)
		return QW_ERROR(QW_ENUMBER);
	*out = v;
	return 0;
}

int qw_num_u64(const char *s, size_t len, uint64_t lo, uint64_t hi,
	       uint64_t *out)
{
	char buf[NUM_MAX_TEXT], *end;
	unsigned long long v;

	if (num_trim(s, len, buf) != 0)
		return QW_ENUMBER;
	if (!isdigit((unsigned char)buf[0]))
		return QW_ERROR(QW_ENUMBER); /* strtoull accepts "-1" */
	errno = 0;
	v = strtoull(buf, &end, 10);
	if (*end != '\0' || errno == ERANGE || v < lo || v > hi)
		return QW_ERROR(QW_ENUMBER);
	*out = (uint64_t)v;
	return 0;
}

/* Duration units and their length in seconds. */
static const struct {
	const char *unit;
	double seconds;
} num_units[] = {
	{"ms", 1e-3}, {"s", 1.0}, {"min", 60.0}, {"h", 3600.0},
	{"d", 86400.0},
};

int qw_num_duration(const char *s, int *had_unit, double *out)
{
	char buf[NUM_MAX_TEXT];
	size_t n, u, i;
	double v;

	if (num_trim(s, (size_t)-1, buf) != 0)
		return QW_ENUMBER;
	n = strlen(buf);
	u = n;
	while (u > 0 && isalpha((unsigned char)buf[u - 1]))
		u--;
	*had_unit = u < n;
	if (u == n) {
		if (qw_num_double(buf, n, 0, 0, &v) != 0 || v < 0)
			return QW_ERROR(QW_ENUMBER);
		*out = v;
		return 0;
	}
	for (i = 0; i < sizeof num_units / sizeof num_units[0]; i++) {
		if (strcmp(buf + u, num_units[i].unit) != 0)
			continue;
		if (qw_num_double(buf, u, 0, 0, &v) != 0 || v < 0)
			return QW_ERROR(QW_ENUMBER);
		v *= num_units[i].seconds;
		if (!isfinite(v))
			return QW_ERROR(QW_ENUMBER); /* 1e304d overflows */
		*out = v;
		return 0;
	}
	return QW_ERROR(QW_ENUMBER);
}
