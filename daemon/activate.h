/* SPDX-License-Identifier: ISC */
/*
 * activate: reads the socket-passing variables a service manager sets
 * (LISTEN_PID, LISTEN_FDS, LISTEN_FDNAMES, documented in sd_listen_fds(3))
 * into a list of inherited descriptors and their names. PURE: the caller
 * passes the variables' values and its own pid; it does not look at the
 * descriptors, change their flags or touch the environment.
 */
#ifndef COEFD_ACTIVATE_H
#define COEFD_ACTIVATE_H

#include <stddef.h>

#include "limits.h"

/* The first inherited descriptor; the others follow without gaps. */
#define ACTIVATE_FD_START	3

struct activate_fd {
	int	 fd;
	char	 name[ACTIVATE_NAME_MAX + 1];	/* "unknown" when unnamed */
};

/* activate_parse: the descriptors passed to process self, 0..max. */
int	 activate_parse(const char *listen_pid, const char *listen_fds,
	    const char *listen_fdnames, long self, struct activate_fd *out,
	    int max, int *nout, char *errbuf, size_t errlen);

#endif
