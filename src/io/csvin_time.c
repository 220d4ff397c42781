/* csvin_time.c: the time column of replay CSV files (see qw_csvin_time in
 * csvin.h): epoch seconds, or ISO 8601 date and time with an optional
 * fraction and zone, checked field by field and converted with the civil
 * calendar (no time zone database, no locale, no struct tm).
 *
 * Workload: one call per CSV row. */
#include "csvin.h"

#include <ctype.h>
#include <stdint.h>

#include "num.h"
#include "quadwatch.h"

#define CSVIN_ISO_LEN 19 /* chars of "YYYY-MM-DDTHH:MM:SS" */
#define CSVIN_DAY_S 86400 /* seconds per day (UTC, no leap seconds) */
#define CSVIN_HOUR_S 3600
#define CSVIN_MIN_S 60

/* ---- time ---------------------------------------------------------------- */

/* Exactly n decimal digits at s into *out; 0 or -1. */
static int csvin_digits(const char *s, size_t n, int *out)
{
	size_t i;
	int v = 0;

	for (i = 0; i < n; i++) {
		if (!isdigit((unsigned char)s[i]))
			return -1;
		v = v * 10 + (s[i] - '0');
	}
	*out = v;
	return 0;
}

/* Days from 1970-01-01 to y-m-d in the proleptic Gregorian calendar
 * (H. Hinnant, "chrono-compatible low-level date algorithms",
 * days_from_civil).  Years start in March, so January and February of
 * year 0 belong to year -1: the era division must floor. */
static int64_t csvin_days(int y, int m, int d)
{
	int era, yoe, doy, doe;

	y -= m <= 2;
	era = (y >= 0 ? y : y - 399) / 400;
	yoe = y - era * 400;
	doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
	doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
	return (int64_t)era * 146097 + doe - 719468;
}

static int csvin_mdays(int y, int m)
{
	static const int days[12] = {31, 28, 31, 30, 31, 30,
				     31, 31, 30, 31, 30, 31};
	int leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;

	return days[m - 1] + (m == 2 && leap);
}

/* [Z|+hh:mm|-hh:mm|+hhmm|-hhmm] at s[0..len): *off in seconds east. */
static int csvin_zone(const char *s, size_t len, int *off)
{
	int sign, zh, zm;
	size_t i = 3;

	*off = 0;
	if (len == 0)
		return 0;
	if (len == 1 && (s[0] == 'Z' || s[0] == 'z'))
		return 0;
	if (s[0] != '+' && s[0] != '-')
		return -1;
	sign = s[0] == '-' ? -1 : 1;
	if (len < 5 || csvin_digits(s + 1, 2, &zh) != 0)
		return -1;
	if (s[i] == ':')
		i++;
	if (len != i + 2 || csvin_digits(s + i, 2, &zm) != 0 || zh > 23 ||
	    zm > 59)
		return -1;
	*off = sign * (zh * CSVIN_HOUR_S + zm * CSVIN_MIN_S);
	return 0;
}

/* YYYY-MM-DD(T| )HH:MM:SS[.frac][zone] -> epoch seconds. */
static int csvin_iso(const char *s, size_t len, double *t)
{
	int y, mo, d, h, mi, sec, off;
	size_t i = CSVIN_ISO_LEN, j;
	double frac = 0;

	if (len < CSVIN_ISO_LEN || csvin_digits(s, 4, &y) || s[4] != '-' ||
	    csvin_digits(s + 5, 2, &mo) || s[7] != '-' ||
	    csvin_digits(s + 8, 2, &d) ||
	    (s[10] != 'T' && s[10] != 't' && s[10] != ' ') ||
	    csvin_digits(s + 11, 2, &h) || s[13] != ':' ||
	    csvin_digits(s + 14, 2, &mi) || s[16] != ':' ||
	    csvin_digits(s + 17, 2, &sec))
		return QW_ERROR(QW_ENUMBER);
	if (i < len && s[i] == '.') {
		for (j = i + 1; j < len && isdigit((unsigned char)s[j]); j++)
			;
		if (j == i + 1 || qw_num_double(s + i, j - i, 0, 0, &frac))
			return QW_ERROR(QW_ENUMBER);
		i = j;
	}
	if (csvin_zone(s + i, len - i, &off) != 0 || mo < 1 || mo > 12 ||
	    d < 1 || d > csvin_mdays(y, mo) || h > 23 || mi > 59 || sec > 59)
		return QW_ERROR(QW_ENUMBER);
	*t = (double)(csvin_days(y, mo, d) * CSVIN_DAY_S + h * CSVIN_HOUR_S +
		      mi * CSVIN_MIN_S + sec - off) + frac;
	return 0;
}

int qw_csvin_time(const char *s, size_t len, double *t)
{
	while (len > 0 && isspace((unsigned char)*s)) {
		s++;
		len--;
	}
	while (len > 0 && isspace((unsigned char)s[len - 1]))
		len--;
	/* Four digits and a dash: a date ("1.2e-5" is a number). */
	if (len >= 5 && s[4] == '-' && isdigit((unsigned char)s[0]) &&
	    isdigit((unsigned char)s[1]) && isdigit((unsigned char)s[2]) &&
	    isdigit((unsigned char)s[3]))
		return csvin_iso(s, len, t);
	if (qw_num_double(s, len, 0, 0, t) != 0)
		return QW_ENUMBER;
	return 0;
}
