/* test_notify.c: the sd_notify(3) protocol (src/io/notify.c).
 *
 * The test is the service manager: it binds a datagram socket (a path in a
 * private directory, and an abstract name) and checks that what arrives is
 * byte for byte what was sent, one datagram per message.  The environment
 * rules of sd_notify(3) and sd_watchdog_enabled(3) are checked case by
 * case: NOTIFY_SOCKET unset or empty (off, sends are no-ops), relative or
 * too long (refused, off), WATCHDOG_USEC with and without WATCHDOG_PID
 * naming this process, and malformed numbers.  A socket nobody listens on
 * makes each send fail and be counted, never crash. */
#include <errno.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/un.h>
#include <unistd.h>

#include <cmocka.h>

#include "notify.h"
#include "quadwatch.h"

#define NT_BUF 2048 /* bytes received per datagram: twice QW_NOTIFY_MSG_MAX */

static void env_clear(void)
{
	unsetenv("NOTIFY_SOCKET");
	unsetenv("WATCHDOG_USEC");
	unsetenv("WATCHDOG_PID");
}

/* A bound datagram socket at name ("/path" or "@abstract"); the fd. */
static int manager_bind(const char *name)
{
	struct sockaddr_un a;
	size_t len = strlen(name);
	int fd = socket(AF_UNIX, SOCK_DGRAM, 0);

	assert_true(fd >= 0);
	memset(&a, 0, sizeof a);
	a.sun_family = AF_UNIX;
	memcpy(a.sun_path, name, len);
	if (name[0] == '@')
		a.sun_path[0] = '\0';
	assert_int_equal(bind(fd, (struct sockaddr *)&a,
			      (socklen_t)(offsetof(struct sockaddr_un, sun_path)
					  + len + (name[0] == '/'))), 0);
	return fd;
}

/* The next datagram on fd, NUL-terminated, or "" when none is waiting. */
static void manager_recv(int fd, char *buf)
{
	ssize_t n = recv(fd, buf, NT_BUF - 1, MSG_DONTWAIT);

	buf[n > 0 ? n : 0] = '\0';
}

static void test_unset_is_off(void **st)
{
	struct qw_notify n;
	char err[128] = "";

	(void)st;
	env_clear();
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	assert_false(qw_notify_on(&n));
	assert_int_equal(qw_notify_send(&n, "READY=1"), 0);
	assert_int_equal(n.sent, 0);
	setenv("NOTIFY_SOCKET", "", 1);
	setenv("WATCHDOG_USEC", "200000", 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	assert_false(qw_notify_on(&n));
	assert_int_equal(n.watchdog_usec, 0);
	qw_notify_close(&n);
	qw_notify_close(&n); /* twice is harmless */
	env_clear();
}

/* Sends two messages through NOTIFY_SOCKET=name; each arrives whole. */
static void roundtrip(const char *name)
{
	struct qw_notify n;
	char err[128] = "", buf[NT_BUF], big[QW_NOTIFY_MSG_MAX + 1];
	int fd = manager_bind(name);

	env_clear();
	setenv("NOTIFY_SOCKET", name, 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	assert_true(qw_notify_on(&n));
	assert_int_equal(qw_notify_send(&n, "READY=1\nSTATUS=2.385 readings/s"),
			 0);
	manager_recv(fd, buf);
	assert_string_equal(buf, "READY=1\nSTATUS=2.385 readings/s");
	/* the longest message allowed goes out as one datagram */
	memset(big, 'x', sizeof big - 1);
	memcpy(big, "STATUS=", 7);
	big[sizeof big - 1] = '\0';
	assert_int_equal(qw_notify_send(&n, big), 0);
	manager_recv(fd, buf);
	assert_string_equal(buf, big);
	manager_recv(fd, buf);
	assert_string_equal(buf, ""); /* nothing else arrived */
	assert_int_equal(n.sent, 2);
	assert_int_equal(n.failed, 0);
	qw_notify_close(&n);
	assert_false(qw_notify_on(&n));
	assert_int_equal(qw_notify_send(&n, "WATCHDOG=1"), 0); /* off now */
	close(fd);
	env_clear();
}

static void test_path_socket(void **st)
{
	char dir[] = "/tmp/qwnotify.XXXXXX", path[64];

	(void)st;
	assert_non_null(mkdtemp(dir));
	snprintf(path, sizeof path, "%s/notify", dir);
	roundtrip(path);
	unlink(path);
	rmdir(dir);
}

static void test_abstract_socket(void **st)
{
	char name[64];

	(void)st;
	snprintf(name, sizeof name, "@qwtest-notify-%ld", (long)getpid());
	roundtrip(name);
}

static void test_too_long_message(void **st)
{
	struct qw_notify n;
	char err[128] = "", name[64], big[QW_NOTIFY_MSG_MAX + 2];
	int fd;

	(void)st;
	snprintf(name, sizeof name, "@qwtest-notify-big-%ld", (long)getpid());
	fd = manager_bind(name);
	env_clear();
	setenv("NOTIFY_SOCKET", name, 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	memset(big, 'x', sizeof big - 1);
	big[sizeof big - 1] = '\0';
	assert_int_equal(qw_notify_send(&n, big), QW_EINVAL);
	assert_int_equal(n.sent, 0);
	qw_notify_close(&n);
	close(fd);
	env_clear();
}

static void test_bad_addresses(void **st)
{
	static const char *const bad[] = {"run/notify", "notify", "vsock:2:1",
					   "@", "/"};
	struct qw_notify n;
	char err[128], path[200];
	size_t i;

	(void)st;
	for (i = 0; i < sizeof bad / sizeof bad[0]; i++) {
		env_clear();
		setenv("NOTIFY_SOCKET", bad[i], 1);
		err[0] = '\0';
		assert_int_equal(qw_notify_open(&n, err, sizeof err),
				 QW_EINVAL);
		assert_false(qw_notify_on(&n));
		assert_non_null(strstr(err, bad[i]));
	}
	/* sun_path holds 108 bytes: a 107-byte path plus NUL fits, 108 not */
	memset(path, 'a', sizeof path);
	path[0] = '/';
	path[108] = '\0';
	setenv("NOTIFY_SOCKET", path, 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), QW_EINVAL);
	assert_false(qw_notify_on(&n));
	assert_non_null(strstr(err, "longer"));
	path[107] = '\0';
	setenv("NOTIFY_SOCKET", path, 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	assert_true(qw_notify_on(&n));
	qw_notify_close(&n);
	env_clear();
}

/* WATCHDOG_USEC / WATCHDOG_PID as sd_watchdog_enabled(3) reads them. */
static void test_watchdog_env(void **st)
{
	struct {
		const char *usec, *pid; /* NULL: unset; "SELF": getpid() */
		int rc;
		uint64_t want;
	} c[] = {
		{"200000", NULL, 0, 200000},
		{"200000", "SELF", 0, 200000},
		{"200000", "1", 0, 0},          /* another process's */
		{"200000", "", 0, 200000},      /* empty: unset */
		{NULL, "SELF", 0, 0},
		{"", NULL, 0, 0},
		{"0", NULL, QW_EINVAL, 0},      /* 0 is not an interval */
		{"2e5", NULL, QW_EINVAL, 0},
		{"-200000", NULL, QW_EINVAL, 0},
		{"18446744073709551616", NULL, QW_EINVAL, 0}, /* 2^64 */
		{"200000", "me", QW_EINVAL, 0},
	};
	struct qw_notify n;
	char err[128], name[64], self[32];
	size_t i;
	int fd;

	(void)st;
	snprintf(name, sizeof name, "@qwtest-notify-wd-%ld", (long)getpid());
	snprintf(self, sizeof self, "%ld", (long)getpid());
	fd = manager_bind(name);
	for (i = 0; i < sizeof c / sizeof c[0]; i++) {
		env_clear();
		setenv("NOTIFY_SOCKET", name, 1);
		if (c[i].usec != NULL)
			setenv("WATCHDOG_USEC", c[i].usec, 1);
		if (c[i].pid != NULL)
			setenv("WATCHDOG_PID", strcmp(c[i].pid, "SELF") == 0
				       ? self : c[i].pid, 1);
		err[0] = '\0';
		assert_int_equal(qw_notify_open(&n, err, sizeof err), c[i].rc);
		assert_true(qw_notify_on(&n)); /* notifications still go out */
		assert_int_equal(n.watchdog_usec, c[i].want);
		if (c[i].rc != 0)
			assert_non_null(strstr(err, "WATCHDOG_"));
		qw_notify_close(&n);
	}
	close(fd);
	env_clear();
}

/* Nobody listening: every send fails, is counted, and says why. */
static void test_nobody_listens(void **st)
{
	struct qw_notify n;
	char err[128] = "", dir[] = "/tmp/qwnotify.XXXXXX", path[64];
	int i, fd;

	(void)st;
	assert_non_null(mkdtemp(dir));
	snprintf(path, sizeof path, "%s/gone", dir);
	env_clear();
	setenv("NOTIFY_SOCKET", path, 1);
	assert_int_equal(qw_notify_open(&n, err, sizeof err), 0);
	for (i = 0; i < 3; i++)
		assert_int_equal(qw_notify_send(&n, "WATCHDOG=1"), QW_EIO);
	assert_int_equal(n.failed, 3);
	assert_int_equal(n.sent, 0);
	assert_int_equal(n.last_errno, ENOENT);
	/* a socket file whose owner closed it: refused, not lost silently */
	fd = manager_bind(path);
	close(fd);
	assert_int_equal(qw_notify_send(&n, "WATCHDOG=1"), QW_EIO);
	assert_int_equal(n.last_errno, ECONNREFUSED);
	assert_int_equal(n.failed, 4);
	qw_notify_close(&n);
	unlink(path);
	rmdir(dir);
	env_clear();
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_unset_is_off),
		cmocka_unit_test(test_path_socket),
		cmocka_unit_test(test_abstract_socket),
		cmocka_unit_test(test_too_long_message),
		cmocka_unit_test(test_bad_addresses),
		cmocka_unit_test(test_watchdog_env),
		cmocka_unit_test(test_nobody_listens),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
