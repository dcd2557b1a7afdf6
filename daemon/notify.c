/* SPDX-License-Identifier: ISC */
/*
 * notify: the datagram sender for readiness, status, reload, stop and
 * watchdog notifications to the service manager, and the parser of the
 * watchdog variables. The protocol is sd_notify(3)'s: one AF_UNIX
 * SOCK_DGRAM message per call, sent without blocking (a stuck manager
 * must not stall the loop). No libsystemd; no logging.
 */
#include <errno.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "err.h"
#include "notify.h"

/*
 * notify_open: set n up to send to addr, the value of $NOTIFY_SOCKET: an
 * absolute path, or '@' followed by a name in the abstract namespace.
 * addr NULL or "" leaves n inert (fd -1) and returns 0. Errors, with n
 * inert and a message in errbuf: E_ARG for an address of another form or
 * too long, E_IO when no socket can be made.
 */
int
notify_open(struct notify *n, const char *addr, char *errbuf, size_t errlen)
{
	size_t len;

	memset(n, 0, sizeof(*n));
	n->fd = -1;
	if (addr == NULL || addr[0] == '\0')
		return 0;
	len = strlen(addr);
	if ((addr[0] != '/' && addr[0] != '@') ||
	    len > sizeof(n->sa.sun_path) - (addr[0] == '/') || len < 2) {
		err_printf(errbuf, errlen, "NOTIFY_SOCKET: unsupported address "
		    "%.60s", addr);
		return E_ARG;
	}
	n->sa.sun_family = AF_UNIX;
	memcpy(n->sa.sun_path, addr, len);
	if (addr[0] == '@') {
		/* Abstract: a leading NUL, and the length says where the
		 * name ends (no terminating NUL). */
		n->sa.sun_path[0] = '\0';
		n->salen = (socklen_t)(offsetof(struct sockaddr_un, sun_path) +
		    len);
	} else {
		n->salen = (socklen_t)(offsetof(struct sockaddr_un, sun_path) +
		    len + 1);
	}
	n->fd = socket(AF_UNIX, SOCK_DGRAM | SOCK_CLOEXEC | SOCK_NONBLOCK, 0);
	if (n->fd < 0) {
		err_printf(errbuf, errlen, "NOTIFY_SOCKET: socket: %s",
		    strerror(errno));
		return E_IO;
	}
	return 0;
}

/*
 * notify_send: send msg (assignments separated by '\n', at most one
 * datagram's worth) to the manager. 0 when sent or when n is inert; E_IO
 * with errno set when the send failed (the manager's queue full, the
 * socket gone). Nothing is retried.
 */
int
notify_send(const struct notify *n, const char *msg)
{
	ssize_t r;

	if (n->fd < 0)
		return 0;
	do {
		r = sendto(n->fd, msg, strlen(msg), MSG_NOSIGNAL,
		    (const struct sockaddr *)&n->sa, n->salen);
	} while (r < 0 && errno == EINTR);
	return r < 0 ? E_IO : 0;
}

/* notify_close: close the socket; n becomes inert. */
void
notify_close(struct notify *n)
{
	if (n->fd >= 0)
		close(n->fd);
	n->fd = -1;
}

/*
 * notify_watchdog_usec: from the values of $WATCHDOG_USEC and
 * $WATCHDOG_PID (NULL when unset), the watchdog interval in microseconds
 * that process self must beat, as sd_watchdog_enabled(3) defines it: 0
 * when no watchdog is set or it is meant for another pid. E_ARG (and
 * *out = 0) for a value that is not a positive decimal number.
 */
int
notify_watchdog_usec(const char *usec, const char *pid, long self,
    uint64_t *out)
{
	unsigned long long v;
	char *end;
	long p;

	*out = 0;
	if (usec == NULL)
		return 0;
	if (pid != NULL) {
		errno = 0;
		p = strtol(pid, &end, 10);
		if (errno != 0 || end == pid || *end != '\0' || p <= 0)
			return E_ARG;
		if (p != self)
			return 0;
	}
	if (*usec < '0' || *usec > '9')
		return E_ARG;
	errno = 0;
	v = strtoull(usec, &end, 10);
	if (errno != 0 || *end != '\0' || v == 0)
		return E_ARG;
	*out = (uint64_t)v;
	return 0;
}
