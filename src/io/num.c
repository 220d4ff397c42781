/* num.c: the one number parser (see num.h).  Workload: a handful of calls
 * per config line, one per channel per text-format reading. */
#include "num.h"

#include <ctype.h>
#include <errno.h>
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

int qw_num_double(const char *s, size_t len, int allow_nan, int allow_inf,
		  double *out)
{
	char buf[NUM_MAX_TEXT], *end;
	double v;

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
