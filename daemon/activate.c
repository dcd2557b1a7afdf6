/* SPDX-License-Identifier: ISC */
/*
 * activate: parsing of the socket-passing variables (LISTEN_PID,
 * LISTEN_FDS, LISTEN_FDNAMES). PURE: strings in, a descriptor list out;
 * no I/O, no environment access, no logging. main.c reads the variables,
 * checks what each descriptor is and hands the sockets to net.
 */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "activate.h"
#include "err.h"

/* A decimal number in [0, max] with nothing else around it. */
static int
parse_num(const char *s, long max, long *out)
{
	char *end;
	long v;

	if (s == NULL || *s < '0' || *s > '9')
		return E_ARG;
	errno = 0;
	v = strtol(s, &end, 10);
	if (errno != 0 || *end != '\0' || v > max)
		return E_ARG;
	*out = v;
	return 0;
}

/* A name is 1..ACTIVATE_NAME_MAX printable ASCII bytes (no ':'). */
static int
valid_name(const char *s, size_t len)
{
	size_t i;

	if (len == 0 || len > ACTIVATE_NAME_MAX)
		return 0;
	for (i = 0; i < len; i++)
		if (s[i] < 0x20 || s[i] > 0x7e || s[i] == ':')
			return 0;
	return 1;
}

/*
 * activate_parse: the descriptors a service manager passed to process
 * self. listen_pid, listen_fds and listen_fdnames are the variables'
 * values (NULL when unset). The sockets are for us only when LISTEN_PID
 * names self; otherwise, or when LISTEN_PID or LISTEN_FDS is unset, *nout
 * is 0 and the result 0. The descriptors are ACTIVATE_FD_START onwards, in
 * order; out[0..*nout) gets each with its name from LISTEN_FDNAMES (colon-
 * separated, one per descriptor), or "unknown" when that is unset.
 * Errors, with a message in errbuf and *nout = 0: E_ARG for a malformed
 * number, a name count that does not match or an invalid name; E_LIMIT
 * for more than max descriptors.
 */
int
activate_parse(const char *listen_pid, const char *listen_fds,
    const char *listen_fdnames, long self, struct activate_fd *out, int max,
    int *nout, char *errbuf, size_t errlen)
{
	const char *p, *colon;
	long pid, n;
	size_t len;
	int i;

	*nout = 0;
	if (listen_pid == NULL || listen_fds == NULL)
		return 0;
	if (parse_num(listen_pid, 0x7fffffffL, &pid) != 0 || pid == 0) {
		err_printf(errbuf, errlen, "LISTEN_PID: not a process id: %.40s",
		    listen_pid);
		return E_ARG;
	}
	if (pid != self)
		return 0;
	if (parse_num(listen_fds, 0x7fffffffL - ACTIVATE_FD_START, &n) != 0) {
		err_printf(errbuf, errlen, "LISTEN_FDS: not a count: %.40s",
		    listen_fds);
		return E_ARG;
	}
	if (n > max) {
		err_printf(errbuf, errlen, "LISTEN_FDS: %ld sockets, at most %d "
		    "accepted", n, max);
		return E_LIMIT;
	}
	p = listen_fdnames;
	for (i = 0; i < (int)n; i++) {
		out[i].fd = ACTIVATE_FD_START + i;
		if (p == NULL) {
			strcpy(out[i].name, "unknown");
			continue;
		}
		colon = strchr(p, ':');
		len = colon != NULL ? (size_t)(colon - p) : strlen(p);
		if (!valid_name(p, len)) {
			err_printf(errbuf, errlen, "LISTEN_FDNAMES: name %d is "
			    "empty, too long or not printable", i + 1);
			return E_ARG;
		}
		memcpy(out[i].name, p, len);
		out[i].name[len] = '\0';
		p = colon != NULL ? colon + 1 : NULL;
		if (p == NULL && i + 1 < (int)n) {
			err_printf(errbuf, errlen, "LISTEN_FDNAMES: %d names "
			    "for %ld sockets", i + 1, n);
			return E_ARG;
		}
	}
	if (listen_fdnames != NULL && (n == 0 ? *listen_fdnames != '\0' :
	    p != NULL)) {
		err_printf(errbuf, errlen, "LISTEN_FDNAMES: more names than "
		    "the %ld sockets", n);
		return E_ARG;
	}
	*nout = (int)n;
	return 0;
}
