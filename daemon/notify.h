/* SPDX-License-Identifier: ISC */
/*
 * notify: our sender for the service manager's notification protocol
 * (sd_notify(3)): newline-separated KEY=VALUE assignments such as
 * "READY=1\nSTATUS=..." in one datagram to the AF_UNIX socket named by
 * $NOTIFY_SOCKET, a path or '@' + an abstract name. Also reads the
 * watchdog interval ($WATCHDOG_USEC, $WATCHDOG_PID). No libsystemd, no
 * libuv, no logging: errors come back for the caller to log. Outside a
 * service manager every send is a no-op.
 */
#ifndef COEFD_NOTIFY_H
#define COEFD_NOTIFY_H

#include <stddef.h>
#include <stdint.h>
#include <sys/socket.h>
#include <sys/un.h>

struct notify {
	int			 fd;	/* -1: nobody to notify */
	struct sockaddr_un	 sa;
	socklen_t		 salen;
};

/* notify_open: prepare to send to addr ($NOTIFY_SOCKET; NULL/"" = none). */
int	 notify_open(struct notify *n, const char *addr, char *errbuf,
	    size_t errlen);
/* notify_send: one datagram with the assignments in msg. */
int	 notify_send(const struct notify *n, const char *msg);
/* notify_close: release the socket; safe to call twice. */
void	 notify_close(struct notify *n);
/* notify_watchdog_usec: the watchdog interval meant for process self. */
int	 notify_watchdog_usec(const char *usec, const char *pid, long self,
	    uint64_t *out);

#endif
