/* log.c: timestamped, levelled lines on stderr (see log.h).  The level is
 * the only process-wide state besides the signal flags: it is set once from
 * the command line before any work starts. */
#include "log.h"

#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

static int log_level = QW_LOG_INFO;

static const char *const log_names[] = {"error", "warn", "info", "debug"};

void qw_log_set_level(int level)
{
	log_level = level;
}

int qw_log_get_level(void)
{
	return log_level;
}

double qw_log_monotonic(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void log_v(int level, int err, const char *fmt, va_list ap)
{
	char stamp[32];
	struct timespec ts;
	struct tm tm;

	if (level > log_level)
		return;
	clock_gettime(CLOCK_REALTIME, &ts);
	gmtime_r(&ts.tv_sec, &tm);
	strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%S", &tm);
	fprintf(stderr, "%s.%03ldZ %s: ", stamp, ts.tv_nsec / 1000000L,
		log_names[level < 0 ? 0 : level > 3 ? 3 : level]);
	vfprintf(stderr, fmt, ap);
	if (err)
		fprintf(stderr, ": %s", strerror(err));
	fputc('\n', stderr);
}

void qw_log(int level, const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	log_v(level, 0, fmt, ap);
	va_end(ap);
}

void qw_log_errno(int level, const char *fmt, ...)
{
	int err = errno;
	va_list ap;

	va_start(ap, fmt);
	log_v(level, err, fmt, ap);
	va_end(ap);
}

void qw_log_limited(struct qw_log_limit *lim, int level, const char *fmt,
		    ...)
{
	double now = qw_log_monotonic();
	va_list ap;

	if (lim->last >= 0 && now - lim->last < lim->interval) {
		lim->suppressed++;
		return;
	}
	if (lim->suppressed > 0)
		qw_log(level, "(%llu similar messages suppressed)",
		       (unsigned long long)lim->suppressed);
	lim->suppressed = 0;
	lim->last = now;
	va_start(ap, fmt);
	log_v(level, 0, fmt, ap);
	va_end(ap);
}

void qw_errbuf(char *err, size_t errlen, const char *fmt, ...)
{
	va_list ap;

	if (err == NULL || errlen == 0)
		return;
	va_start(ap, fmt);
	vsnprintf(err, errlen, fmt, ap);
	va_end(ap);
}
