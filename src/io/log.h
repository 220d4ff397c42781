/* log.h: logging to stderr for the commands (the core never logs).
 * Lines carry a UTC timestamp and a level; qw_log_err* append strerror. */
#ifndef QW_LOG_H
#define QW_LOG_H

#include <stddef.h>
#include <stdint.h>

enum qw_log_level {
	QW_LOG_ERROR = 0, /* something failed; the program may go on */
	QW_LOG_WARN = 1,  /* suspicious input or degraded operation */
	QW_LOG_INFO = 2,  /* start, stop, reload, alarms */
	QW_LOG_DEBUG = 3  /* per-message detail, -v */
};

/* Messages above this level are dropped; -q lowers it, -v raises it. */
void qw_log_set_level(int level);
int qw_log_get_level(void);
void qw_log(int level, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));
/* The same, with ": strerror(errno)" appended. */
void qw_log_errno(int level, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

/* A repeating transient error logs once per interval, then is counted
 * quietly; the count so far is reported with the next line logged. */
struct qw_log_limit {
	double interval;   /* seconds between lines, monotonic clock */
	double last;       /* monotonic time of the last line, -1: never */
	uint64_t suppressed; /* lines dropped since */
};
void qw_log_limited(struct qw_log_limit *lim, int level, const char *fmt,
		    ...) __attribute__((format(printf, 3, 4)));

/* Formats an error message into the caller's buffer err[errlen] (nothing
 * when err is NULL or errlen 0): the io modules report "FILE: reason" to
 * their callers this way and leave logging to the commands. */
void qw_errbuf(char *err, size_t errlen, const char *fmt, ...)
	__attribute__((format(printf, 3, 4)));

/* Decides the line format from the environment: 1 when stderr is the
 * journal stream named by JOURNAL_STREAM (lines then start "<N>", the
 * syslog priority, without a timestamp), 0 otherwise (plain timestamped
 * lines).  Runs by itself before the first line; call it again only after
 * redirecting stderr. */
int qw_log_journal_detect(void);

/* Monotonic seconds (CLOCK_MONOTONIC), for schedules and rate limits. */
double qw_log_monotonic(void);

#endif
