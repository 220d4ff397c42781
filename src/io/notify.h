/* notify.h: the service manager's notification socket (sd_notify(3)
 * protocol): state lines such as READY=1, STOPPING=1 or WATCHDOG=1 sent as
 * one datagram each to the AF_UNIX socket named by $NOTIFY_SOCKET.  With
 * NOTIFY_SOCKET unset every call is a no-op.  A failed send is counted and
 * returned, never fatal: the caller logs it (once) and carries on. */
#ifndef QW_NOTIFY_H
#define QW_NOTIFY_H

#include <stddef.h>
#include <stdint.h>
#include <sys/socket.h>
#include <sys/un.h>

#define QW_NOTIFY_MSG_MAX 1024 /* bytes of one datagram: a STATUS= line and
				  a state or two; far below the AF_UNIX
				  datagram limit (net.core.wmem_default) */

struct qw_notify {
	int fd;                    /* SOCK_DGRAM, -1: off */
	struct sockaddr_un addr;   /* the manager's socket */
	socklen_t addr_len;        /* bytes of addr in use (abstract names
				      are not NUL-terminated) */
	uint64_t watchdog_usec;    /* WATCHDOG_USEC for this process, us;
				      0: no watchdog */
	uint64_t sent;             /* datagrams sent */
	uint64_t failed;           /* datagrams the kernel refused */
	int last_errno;            /* errno of the latest failure */
};

/* Reads NOTIFY_SOCKET (and WATCHDOG_USEC / WATCHDOG_PID, as
 * sd_watchdog_enabled(3) does) and opens a datagram socket.  An address
 * is a path ("/run/systemd/notify") or, when it starts with '@', an
 * abstract name.  n is always initialised: off when NOTIFY_SOCKET is unset
 * or empty (returns 0), and off with QW_EINVAL (unusable address, the
 * reason in err) or QW_EIO (socket(2) failed, errno kept) otherwise. */
int qw_notify_open(struct qw_notify *n, char *err, size_t errlen);

/* 1 when notifications go somewhere. */
int qw_notify_on(const struct qw_notify *n);

/* Sends msg (newline-separated KEY=VALUE lines) as one datagram, without
 * blocking.  0 when sent or when n is off; QW_EINVAL when msg is longer
 * than QW_NOTIFY_MSG_MAX; QW_EIO when the kernel refused it (errno and
 * n->last_errno say why: ENOENT, ECONNREFUSED, EAGAIN ...), counted in
 * n->failed. */
int qw_notify_send(struct qw_notify *n, const char *msg);

/* Closes the socket; n is then off.  Safe on an off or closed n. */
void qw_notify_close(struct qw_notify *n);

#endif
