/* notify.c: the sd_notify(3) protocol, written out rather than linked from
 * libsystemd.  The protocol is one datagram of newline-separated
 * KEY=VALUE lines to the AF_UNIX socket in $NOTIFY_SOCKET (a path, or an
 * abstract name when it starts with '@'); the receiver learns who sent it
 * from the kernel (SO_PASSCRED), so nothing else is needed.  The watchdog
 * interval comes from WATCHDOG_USEC, meant for this process only when
 * WATCHDOG_PID is unset or equals getpid() (sd_watchdog_enabled(3)).
 *
 * Sends never block (MSG_DONTWAIT): a manager that stops reading costs a
 * counted failure, not a stalled poll loop.  vsock addresses (systemd 253
 * and later, for virtual machines) are refused as unsupported.
 *
 * Workload: a handful of datagrams at start, reload and stop, one per
 * watchdog half-interval and one per status refresh: a few per second. */
#include "notify.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "log.h"
#include "num.h"
#include "quadwatch.h"

static void notify_off(struct qw_notify *n)
{
	memset(n, 0, sizeof *n);
	n->fd = -1;
}

/* addr from the NOTIFY_SOCKET text s; QW_EINVAL with the reason. */
static int notify_address(struct qw_notify *n, const char *s, char *err,
			  size_t errlen)
{
	size_t len = strlen(s);

	if ((s[0] != '/' && s[0] != '@') || len < 2) {
		qw_errbuf(err, errlen, "NOTIFY_SOCKET=%s: not a path or an "
			  "abstract socket name", s);
		return QW_ERROR(QW_EINVAL);
	}
	if (len > sizeof n->addr.sun_path - (s[0] == '/')) {
		qw_errbuf(err, errlen, "NOTIFY_SOCKET: %zu bytes, longer "
			  "than a socket address holds", len);
		return QW_ERROR(QW_EINVAL);
	}
	n->addr.sun_family = AF_UNIX;
	memcpy(n->addr.sun_path, s, len);
	if (s[0] == '@')
		n->addr.sun_path[0] = '\0'; /* abstract: no NUL at the end */
	n->addr_len = (socklen_t)(offsetof(struct sockaddr_un, sun_path) +
				  len + (s[0] == '/'));
	return 0;
}

/* WATCHDOG_USEC, when it is meant for this process.  QW_EINVAL (watchdog
 * left off) when either variable is not a number. */
static int notify_watchdog(struct qw_notify *n, char *err, size_t errlen)
{
	const char *us = getenv("WATCHDOG_USEC"), *pid = getenv("WATCHDOG_PID");
	uint64_t v, p;

	if (us == NULL || us[0] == '\0')
		return 0;
	if (pid != NULL && pid[0] != '\0') {
		if (qw_num_u64(pid, (size_t)-1, 1, UINT64_MAX, &p) != 0) {
			qw_errbuf(err, errlen, "WATCHDOG_PID=%s: not a "
				  "process id", pid);
			return QW_ERROR(QW_EINVAL);
		}
		if (p != (uint64_t)getpid())
			return 0; /* another process's watchdog */
	}
	if (qw_num_u64(us, (size_t)-1, 1, UINT64_MAX, &v) != 0) {
		qw_errbuf(err, errlen, "WATCHDOG_USEC=%s: not a positive "
			  "number of microseconds", us);
		return QW_ERROR(QW_EINVAL);
	}
	n->watchdog_usec = v;
	return 0;
}

int qw_notify_open(struct qw_notify *n, char *err, size_t errlen)
{
	const char *s = getenv("NOTIFY_SOCKET");
	int rc;

	notify_off(n);
	if (s == NULL || s[0] == '\0')
		return 0;
	if ((rc = notify_address(n, s, err, errlen)) != 0) {
		notify_off(n);
		return rc;
	}
	n->fd = socket(AF_UNIX, SOCK_DGRAM | SOCK_CLOEXEC, 0);
	if (n->fd < 0) {
		int e = errno;

		notify_off(n);
		qw_errbuf(err, errlen, "notify socket: %s", strerror(e));
		errno = e;
		return QW_ERROR(QW_EIO);
	}
	return notify_watchdog(n, err, errlen);
}

int qw_notify_on(const struct qw_notify *n)
{
	return n->fd >= 0;
}

int qw_notify_send(struct qw_notify *n, const char *msg)
{
	size_t len;

	if (n->fd < 0)
		return 0;
	len = strlen(msg);
	if (len > QW_NOTIFY_MSG_MAX)
		return QW_ERROR(QW_EINVAL);
	if (sendto(n->fd, msg, len, MSG_DONTWAIT | MSG_NOSIGNAL,
		   (const struct sockaddr *)&n->addr, n->addr_len) !=
	    (ssize_t)len) {
		n->last_errno = errno;
		n->failed++;
		return QW_ERROR(QW_EIO);
	}
	n->sent++;
	return 0;
}

void qw_notify_close(struct qw_notify *n)
{
	if (n->fd >= 0)
		close(n->fd);
	notify_off(n);
}
