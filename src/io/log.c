/* log.c: timestamped, levelled lines on stderr (see log.h).  The level is
 * the only process-wide state besides the signal flags: it is set once from
 * the command line before any work starts.
 *
 * Under systemd, stderr is a stream to the journal and JOURNAL_STREAM holds
 * its "DEVICE:INODE" (systemd.exec(5)); when that matches stderr's own
 * fstat, lines start with the syslog priority "<N>" (sd-daemon(3):
 * <3> error, <4> warning, <6> info, <7> debug) and carry no timestamp, the
 * journal stamps them itself.  Any other stderr (a terminal, a file, a
 * pipe; or a journal stream inherited but since redirected) gets the plain
 * timestamped form.  The check runs once, before the first line, and is
 * cached beside the level. */
#include "log.h"

#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

static int log_level = QW_LOG_INFO;
static int log_journal = -1; /* 1: journal prefixes, 0: plain, -1: unknown */

/* syslog(3) priorities per level: LOG_ERR, LOG_WARNING, LOG_INFO,
 * LOG_DEBUG */
static const int log_priority[] = {3, 4, 6, 7};

static const char *const log_names[] = {"error", "warn", "info", "debug"};

void qw_log_set_level(int level)
{
	log_level = level;
}

int qw_log_get_level(void)
{
	return log_level;
}

int qw_log_journal_detect(void)
{
	const char *js = getenv("JOURNAL_STREAM");
	char mine[64];
	struct stat st;

	log_journal = 0;
	if (js == NULL || js[0] == '\0' || fstat(STDERR_FILENO, &st) != 0)
		return 0;
	/* compared as text: systemd writes both numbers in plain decimal */
	snprintf(mine, sizeof mine, "%ju:%ju", (uintmax_t)st.st_dev,
		 (uintmax_t)st.st_ino);
	log_journal = strcmp(js, mine) == 0;
	return log_journal;
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
	int k = level < 0 ? 0 : level > 3 ? 3 : level;

	if (level > log_level)
		return;
	if (log_journal < 0)
		qw_log_journal_detect();
	if (log_journal) {
		fprintf(stderr, "<%d>%s: ", log_priority[k], log_names[k]);
	} else {
		clock_gettime(CLOCK_REALTIME, &ts);
		gmtime_r(&ts.tv_sec, &tm);
		strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%S", &tm);
		fprintf(stderr, "%s.%03ldZ %s: ", stamp,
			ts.tv_nsec / 1000000L, log_names[k]);
	}
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
