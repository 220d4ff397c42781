/* test_log.c: line formats of src/io/log.c.
 *
 * stderr is pointed at a temporary file, and each case reads back what was
 * written.  Journal form, when JOURNAL_STREAM holds that file's
 * "DEVICE:INODE" as systemd.exec(5) describes: "<N>level: message" with the
 * syslog(3) priorities LOG_ERR 3, LOG_WARNING 4, LOG_INFO 6, LOG_DEBUG 7
 * (sd-daemon(3) prefixes) and no timestamp.  Plain form otherwise (unset,
 * another file's numbers, malformed): "YYYY-MM-DDTHH:MM:SS.mmmZ level:
 * message".  Levels above the set one print nothing in either form. */
#include <errno.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cmocka.h>

#include "log.h"

#define LG_BUF 4096 /* bytes of log read back per case */

struct lg_capture {
	char path[64];
	int saved;      /* the original stderr */
};

/* Points stderr at a fresh file; JOURNAL_STREAM is then set by the case. */
static void capture_start(struct lg_capture *c)
{
	int fd;

	snprintf(c->path, sizeof c->path, "/tmp/qwlog.XXXXXX");
	fd = mkstemp(c->path);
	assert_true(fd >= 0);
	fflush(stderr);
	c->saved = dup(STDERR_FILENO);
	assert_true(c->saved >= 0);
	assert_int_equal(dup2(fd, STDERR_FILENO), STDERR_FILENO);
	close(fd);
}

/* Restores stderr and reads what was written into buf. */
static void capture_end(struct lg_capture *c, char *buf)
{
	FILE *f;
	size_t n;

	fflush(stderr);
	assert_int_equal(dup2(c->saved, STDERR_FILENO), STDERR_FILENO);
	close(c->saved);
	f = fopen(c->path, "r");
	assert_non_null(f);
	n = fread(buf, 1, LG_BUF - 1, f);
	buf[n] = '\0';
	fclose(f);
	unlink(c->path);
	unsetenv("JOURNAL_STREAM");
	qw_log_journal_detect();
}

/* JOURNAL_STREAM naming the current stderr. */
static void journal_is_stderr(void)
{
	struct stat st;
	char v[64];

	assert_int_equal(fstat(STDERR_FILENO, &st), 0);
	snprintf(v, sizeof v, "%ju:%ju", (uintmax_t)st.st_dev,
		 (uintmax_t)st.st_ino);
	setenv("JOURNAL_STREAM", v, 1);
}

static void log_every_level(void)
{
	qw_log_set_level(QW_LOG_DEBUG);
	qw_log(QW_LOG_ERROR, "chiller %d tripped", 2);
	qw_log(QW_LOG_WARN, "flow %.3f L/s", 2.385);
	qw_log(QW_LOG_INFO, "running");
	qw_log(QW_LOG_DEBUG, "control: status");
	errno = ENOENT;
	qw_log_errno(QW_LOG_ERROR, "open %s", "/nonexistent");
	qw_log_set_level(QW_LOG_WARN);
	qw_log(QW_LOG_INFO, "hidden");
	qw_log_set_level(QW_LOG_INFO);
}

static void test_journal_form(void **st)
{
	struct lg_capture c;
	char buf[LG_BUF];

	(void)st;
	capture_start(&c);
	journal_is_stderr();
	assert_int_equal(qw_log_journal_detect(), 1);
	log_every_level();
	capture_end(&c, buf);
	assert_string_equal(buf,
			    "<3>error: chiller 2 tripped\n"
			    "<4>warn: flow 2.385 L/s\n"
			    "<6>info: running\n"
			    "<7>debug: control: status\n"
			    "<3>error: open /nonexistent: "
			    "No such file or directory\n");
}

/* One plain line: "YYYY-MM-DDTHH:MM:SS.mmmZ " then rest. */
static const char *plain_line(const char *s, const char *rest)
{
	static const char shape[] = "dddd-dd-ddTdd:dd:dd.dddZ ";
	size_t i, n = sizeof shape - 1;

	for (i = 0; i < n; i++) {
		if (shape[i] == 'd')
			assert_true(s[i] >= '0' && s[i] <= '9');
		else
			assert_int_equal(s[i], shape[i]);
	}
	assert_memory_equal(s + n, rest, strlen(rest));
	return s + n + strlen(rest);
}

static void check_plain(const char *buf)
{
	const char *s = buf;

	s = plain_line(s, "error: chiller 2 tripped\n");
	s = plain_line(s, "warn: flow 2.385 L/s\n");
	s = plain_line(s, "info: running\n");
	s = plain_line(s, "debug: control: status\n");
	s = plain_line(s, "error: open /nonexistent: "
			  "No such file or directory\n");
	assert_string_equal(s, "");
}

static void test_plain_when_unset(void **st)
{
	struct lg_capture c;
	char buf[LG_BUF];

	(void)st;
	capture_start(&c);
	unsetenv("JOURNAL_STREAM");
	assert_int_equal(qw_log_journal_detect(), 0);
	log_every_level();
	capture_end(&c, buf);
	check_plain(buf);
}

/* A journal stream inherited but no longer stderr (redirected by the
 * operator), or a value that is not DEVICE:INODE: plain lines. */
static void test_plain_when_other(void **st)
{
	static const char *const other[] = {"", "x", "1:", ":1", "0:0"};
	struct lg_capture c;
	struct stat sb;
	char buf[LG_BUF], v[64];
	size_t i;

	(void)st;
	for (i = 0; i <= sizeof other / sizeof other[0]; i++) {
		capture_start(&c);
		if (i < sizeof other / sizeof other[0]) {
			setenv("JOURNAL_STREAM", other[i], 1);
		} else { /* stderr's device, another inode */
			assert_int_equal(fstat(STDERR_FILENO, &sb), 0);
			snprintf(v, sizeof v, "%ju:%ju", (uintmax_t)sb.st_dev,
				 (uintmax_t)sb.st_ino + 1);
			setenv("JOURNAL_STREAM", v, 1);
		}
		assert_int_equal(qw_log_journal_detect(), 0);
		log_every_level();
		capture_end(&c, buf);
		check_plain(buf);
	}
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_journal_form),
		cmocka_unit_test(test_plain_when_unset),
		cmocka_unit_test(test_plain_when_other),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
