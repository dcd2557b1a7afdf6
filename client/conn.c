/* SPDX-License-Identifier: ISC */
/*
 * conn: the client's connection to coefd over a Unix socket or TCP:
 * connect (with a plain message naming the socket when nobody answers),
 * optional .auth, request lines checked by the daemon's own protocol
 * parser before they are sent, and reply lines read back with a timeout.
 * Writing also drains replies, so a long pipelined feed never deadlocks
 * against the daemon's own back-pressure. It does not interpret replies
 * beyond the error object.
 */
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/un.h>

#include <errno.h>
#include <fcntl.h>
#include <netdb.h>
#include <poll.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "coefctl.h"
#include "proto.h"

#define CONN_READ	65536

static double
mono_now(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* "host:port" or "[v6]:port" with a decimal port: 1 and the parts. */
static int
split_hostport(const char *s, char *host, size_t hlen, char *port,
    size_t plen)
{
	const char *colon, *h = s, *he;
	size_t n;

	if (strchr(s, '/') != NULL)
		return 0;
	if (s[0] == '[') {
		if ((he = strchr(s, ']')) == NULL || he[1] != ':')
			return 0;
		h = s + 1;
		colon = he + 1;
	} else {
		if ((colon = strrchr(s, ':')) == NULL ||
		    memchr(s, ':', (size_t)(colon - s)) != NULL)
			return 0;
		he = colon;
	}
	n = strlen(colon + 1);
	if (n == 0 || n >= plen || strspn(colon + 1, "0123456789") != n ||
	    he == h || (size_t)(he - h) >= hlen)
		return 0;
	memcpy(host, h, (size_t)(he - h));
	host[he - h] = '\0';
	memcpy(port, colon + 1, n + 1);
	return 1;
}

static void
unreachable_hint(const struct ctl *c, const char *path, int err)
{
	struct stat sb;

	if (err == EACCES || err == EPERM) {
		ctl_err("you may not use %s: ask for access to it (its group) "
		    "or run as its owner", path);
		return;
	}
	if (err == ECONNREFUSED && stat(path, &sb) == 0)
		ctl_err("the socket file exists but nothing listens on it: "
		    "coefd is not running (the file is left over)");
	else if (strcmp(c->socket_from, "-s") == 0)
		ctl_err("is coefd running, and is -s the socket it listens "
		    "on? Start it (for example 'systemctl start coefd').");
	else if (strcmp(c->socket_from, CTL_SOCKET_ENV) == 0)
		ctl_err("is coefd running, and does %s name its socket? "
		    "Start it (for example 'systemctl start coefd').",
		    CTL_SOCKET_ENV);
	else
		ctl_err("is coefd running? Start it (for example "
		    "'systemctl start coefd'), or name its socket with "
		    "-s PATH or %s.", CTL_SOCKET_ENV);
}

static int
open_unix(struct conn *k, const struct ctl *c, const char *path)
{
	struct sockaddr_un sun;
	int fd, e;

	snprintf(k->where, sizeof(k->where), "%s", path);
	memset(&sun, 0, sizeof(sun));
	sun.sun_family = AF_UNIX;
	if (strlen(path) >= sizeof(sun.sun_path)) {
		ctl_err("socket path too long (%zu bytes, at most %zu): %s",
		    strlen(path), sizeof(sun.sun_path) - 1, path);
		return CTL_EXIT_USAGE;
	}
	memcpy(sun.sun_path, path, strlen(path) + 1);
	if ((fd = socket(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0)) < 0) {
		ctl_err("socket: %s", strerror(errno));
		return CTL_EXIT_UNREACHABLE;
	}
	if (connect(fd, (struct sockaddr *)&sun, sizeof(sun)) != 0) {
		e = errno;
		close(fd);
		ctl_err("cannot reach coefd at %s (socket from %s): %s", path,
		    c->socket_from, strerror(e));
		unreachable_hint(c, path, e);
		return CTL_EXIT_UNREACHABLE;
	}
	k->fd = fd;
	return 0;
}

static int
open_tcp(struct conn *k, const struct ctl *c, const char *host,
    const char *port)
{
	struct addrinfo hints, *res = NULL, *ai;
	int fd = -1, e = 0, rc;

	snprintf(k->where, sizeof(k->where), "%s", c->socket);
	memset(&hints, 0, sizeof(hints));
	hints.ai_family = AF_UNSPEC;
	hints.ai_socktype = SOCK_STREAM;
	if ((rc = getaddrinfo(host, port, &hints, &res)) != 0) {
		ctl_err("cannot reach coefd at %s: %s", c->socket,
		    gai_strerror(rc));
		return CTL_EXIT_UNREACHABLE;
	}
	for (ai = res; ai != NULL; ai = ai->ai_next) {
		fd = socket(ai->ai_family, ai->ai_socktype | SOCK_CLOEXEC,
		    ai->ai_protocol);
		if (fd < 0) {
			e = errno;
			continue;
		}
		if (connect(fd, ai->ai_addr, ai->ai_addrlen) == 0)
			break;
		e = errno;
		close(fd);
		fd = -1;
	}
	freeaddrinfo(res);
	if (fd < 0) {
		ctl_err("cannot reach coefd at %s (TCP, from %s): %s",
		    c->socket, c->socket_from, strerror(e));
		ctl_err("is coefd running with 'tcp = %s' in its "
		    "configuration? Use -s PATH for its Unix socket.",
		    c->socket);
		return CTL_EXIT_UNREACHABLE;
	}
	k->fd = fd;
	k->tcp = 1;
	return 0;
}

/* Read the token file: one token, trailing white space removed. */
static int
read_token(const char *path, char *tok, size_t len)
{
	FILE *fp;
	size_t n;

	if ((fp = fopen(path, "r")) == NULL) {
		ctl_err("%s: %s", path, strerror(errno));
		return CTL_EXIT_DATA;
	}
	n = fread(tok, 1, len - 1, fp);
	fclose(fp);
	tok[n] = '\0';
	while (n > 0 && (tok[n - 1] == '\n' || tok[n - 1] == '\r' ||
	    tok[n - 1] == ' ' || tok[n - 1] == '\t'))
		tok[--n] = '\0';
	if (n == 0 || n == len - 1) {
		ctl_err("%s: %s", path, n == 0 ? "empty token" :
		    "token too long");
		return CTL_EXIT_DATA;
	}
	return 0;
}

/*
 * conn_open: connect to the daemon named by c->socket, else $COEFD_SOCKET,
 * else the default socket; then present c->token_file's token, if any.
 * Returns 0 with k open, or an exit status after printing why:
 * CTL_EXIT_UNREACHABLE (with what to try next), CTL_EXIT_PROTO (token
 * refused), CTL_EXIT_DATA (token file unreadable), CTL_EXIT_USAGE.
 */
int
conn_open(struct conn *k, const struct ctl *c)
{
	struct ctl cc = *c;
	char host[256], port[16], tok[4096], line[4200];
	struct jr *r = NULL;
	const char *env;
	int rc, fl;

	memset(k, 0, sizeof(*k));
	k->fd = -1;
	k->timeout = c->timeout;
	if (cc.socket == NULL) {
		env = getenv(CTL_SOCKET_ENV);
		if (env != NULL && env[0] != '\0') {
			cc.socket = env;
			cc.socket_from = CTL_SOCKET_ENV;
		} else {
			cc.socket = CTL_DEFAULT_SOCKET;
			cc.socket_from = "the default";
		}
	}
	if (split_hostport(cc.socket, host, sizeof(host), port, sizeof(port)))
		rc = open_tcp(k, &cc, host, port);
	else
		rc = open_unix(k, &cc, cc.socket);
	if (rc != 0)
		return rc;
	if ((fl = fcntl(k->fd, F_GETFL)) < 0 ||
	    fcntl(k->fd, F_SETFL, fl | O_NONBLOCK) < 0) {
		ctl_err("fcntl: %s", strerror(errno));
		conn_close(k);
		return CTL_EXIT_UNREACHABLE;
	}
	if ((k->msg = malloc(sizeof(*k->msg))) == NULL) {
		ctl_err("out of memory");
		conn_close(k);
		return CTL_EXIT_UNREACHABLE;
	}
	if (c->token_file == NULL)
		return 0;
	if ((rc = read_token(c->token_file, tok, sizeof(tok))) != 0) {
		conn_close(k);
		return rc;
	}
	snprintf(line, sizeof(line), ".auth %s", tok);
	if ((rc = conn_request(k, line, &r)) != 0) {
		ctl_err("the token in %s was not accepted", c->token_file);
		conn_close(k);
		return rc;
	}
	jr_free(r);
	return 0;
}

/* conn_close: close the socket and free the buffers; idempotent. */
void
conn_close(struct conn *k)
{
	if (k->fd >= 0)
		close(k->fd);
	k->fd = -1;
	free(k->buf);
	k->buf = NULL;
	k->len = k->cap = k->off = k->scan = 0;
	free(k->msg);
	k->msg = NULL;
}

/* Read what is available into the buffer: >0 bytes, 0 EOF, -1 error
 * (printed), -2 nothing yet. */
static int
fill(struct conn *k)
{
	ssize_t n;
	size_t nc;
	char *nb;

	if (k->off > 0 && k->off == k->len)
		k->off = k->len = k->scan = 0;
	if (k->cap - k->len < CONN_READ) {
		if (k->off > 0) {
			memmove(k->buf, k->buf + k->off, k->len - k->off);
			k->len -= k->off;
			k->scan = k->scan > k->off ? k->scan - k->off : 0;
			k->off = 0;
		}
		if (k->cap - k->len < CONN_READ) {
			/* Geometric growth: long replies (a big .history)
			 * are read in linear time. */
			nc = k->cap * 2 > k->cap + 2 * CONN_READ ? k->cap * 2 :
			    k->cap + 2 * CONN_READ;
			if ((nb = realloc(k->buf, nc)) == NULL) {
				ctl_err("out of memory");
				return -1;
			}
			k->buf = nb;
			k->cap = nc;
		}
	}
	n = read(k->fd, k->buf + k->len, k->cap - k->len - 1);
	if (n < 0) {
		if (errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR)
			return -2;
		ctl_err("reading from %s: %s", k->where, strerror(errno));
		return -1;
	}
	k->len += (size_t)n;
	return n > 0 ? 1 : 0;
}

/*
 * conn_write: send buf[0..len) in full. While the socket is full, replies
 * are read into the buffer so the daemon is never blocked on us. Returns
 * 0, or -1 after printing the error (the daemon went away).
 */
int
conn_write(struct conn *k, const char *buf, size_t len)
{
	struct pollfd pfd;
	ssize_t n;
	int rc;

	while (len > 0) {
		n = write(k->fd, buf, len);
		if (n > 0) {
			buf += n;
			len -= (size_t)n;
			continue;
		}
		if (n < 0 && errno != EAGAIN && errno != EWOULDBLOCK &&
		    errno != EINTR) {
			ctl_err("writing to %s: %s", k->where, strerror(errno));
			return -1;
		}
		pfd.fd = k->fd;
		pfd.events = POLLIN | POLLOUT;
		if (poll(&pfd, 1, -1) < 0 && errno != EINTR) {
			ctl_err("poll: %s", strerror(errno));
			return -1;
		}
		if (pfd.revents & (POLLIN | POLLHUP)) {
			if ((rc = fill(k)) == -1)
				return -1;
			if (rc == 0 && !(pfd.revents & POLLOUT)) {
				ctl_err("%s closed the connection", k->where);
				return -1;
			}
		}
	}
	return 0;
}

/*
 * conn_check: run line[0..len) through the protocol parser as line number
 * lineno of this connection. Returns 0 when it parses, else the
 * proto_reason + 1 with the parser's detail in detail.
 */
int
conn_check(struct conn *k, const char *line, size_t len, char *detail,
    size_t dlen)
{
	if (proto_parse_line(line, len, k->line + 1, k->msg) == PROTO_ERROR) {
		snprintf(detail, dlen, "%s: %s",
		    proto_reason_str(k->msg->reason), k->msg->detail);
		return (int)k->msg->reason + 1;
	}
	return 0;
}

/*
 * conn_send: check line (no LF) with the protocol parser, then send it
 * with its LF. Returns 0, CTL_EXIT_USAGE when the parser rejects it (the
 * reason printed; nothing sent), or CTL_EXIT_UNREACHABLE when writing
 * fails.
 */
int
conn_send(struct conn *k, const char *line)
{
	char detail[PROTO_DETAIL_MAX + 40];
	size_t len = strlen(line);

	if (conn_check(k, line, len, detail, sizeof(detail)) != 0) {
		ctl_err("request not sent: %s", detail);
		return CTL_EXIT_USAGE;
	}
	if (conn_write(k, line, len) != 0 || conn_write(k, "\n", 1) != 0)
		return CTL_EXIT_UNREACHABLE;
	k->line++;
	return 0;
}

/*
 * conn_line: the next reply line without its LF, NUL-terminated, valid
 * until the next call on k. wait_ms: < 0 wait up to k->timeout (for ever
 * when that is <= 0), 0 do not wait, > 0 at most that long. Returns 1 for
 * a line, 0 at end of stream, -1 after printing an error or a timeout,
 * 2 when nothing came (wait_ms 0) or a signal interrupted the wait.
 */
int
conn_line(struct conn *k, char **line, size_t *len, int wait_ms)
{
	struct pollfd pfd;
	double deadline = 0, left;
	char *nl;
	int rc, ms;

	if (wait_ms < 0 && k->timeout > 0)
		deadline = mono_now() + k->timeout;
	else if (wait_ms > 0)
		deadline = mono_now() + wait_ms / 1000.0;
	for (;;) {
		/* k->scan: bytes from k->off already known to hold no LF. */
		if (k->scan < k->off)
			k->scan = k->off;
		if (k->len > k->scan &&
		    (nl = memchr(k->buf + k->scan, '\n', k->len - k->scan)) !=
		    NULL) {
			*nl = '\0';
			*line = k->buf + k->off;
			*len = (size_t)(nl - *line);
			k->off = k->scan = (size_t)(nl - k->buf) + 1;
			return 1;
		}
		k->scan = k->len;
		if ((rc = fill(k)) == 1)
			continue;
		if (rc == -1)
			return -1;
		if (rc == 0)
			return 0;
		if (wait_ms == 0)
			return 2;
		ms = -1;
		if (deadline > 0) {
			left = deadline - mono_now();
			if (left <= 0) {
				ctl_err("no reply from %s within %g s", k->where,
				    wait_ms > 0 ? wait_ms / 1000.0 :
				    k->timeout);
				return -1;
			}
			ms = (int)(left * 1000) + 1;
		}
		pfd.fd = k->fd;
		pfd.events = POLLIN;
		if (poll(&pfd, 1, ms) < 0) {
			if (errno == EINTR)
				return 2;
			ctl_err("poll: %s", strerror(errno));
			return -1;
		}
	}
}

/*
 * conn_reply: read the next reply line and parse it. Returns 0 with *out
 * (the caller frees it with jr_free), or CTL_EXIT_PROTO after printing why
 * (end of stream, timeout, not JSON). *out is NULL on failure.
 */
int
conn_reply(struct conn *k, struct jr **out)
{
	char err[160], *line;
	size_t len;
	int rc;

	*out = NULL;
	do
		rc = conn_line(k, &line, &len, -1);
	while (rc == 2);
	if (rc == 0) {
		ctl_err("%s closed the connection before replying", k->where);
		return CTL_EXIT_PROTO;
	}
	if (rc < 0)
		return CTL_EXIT_PROTO;
	if (jr_parse(line, len, out, err, sizeof(err)) != 0) {
		ctl_err("unreadable reply from %s: %s", k->where, err);
		return CTL_EXIT_PROTO;
	}
	return 0;
}

/* conn_is_error: the "error" reason of a reply, or NULL for others. */
const char *
conn_is_error(const struct jr *reply)
{
	return jr_str(jr_find(reply, "error"));
}

/*
 * conn_error_exit: the exit status for a daemon error reason: 5 for
 * unknown_model, 4 (refused or protocol error) for every other reason.
 */
int
conn_error_exit(const char *reason)
{
	return strcmp(reason, "unknown_model") == 0 ? CTL_EXIT_NOTFOUND :
	    CTL_EXIT_PROTO;
}

/* conn_print_error: "coefctl: DETAIL (REASON)" for an error reply. */
void
conn_print_error(const struct jr *reply)
{
	const char *why = conn_is_error(reply), *d;

	d = jr_str(jr_find(reply, "detail"));
	ctl_err("%s (%s)", d != NULL && d[0] ? d : "refused",
	    why != NULL ? why : "?");
}

/*
 * conn_request: send line and read its one reply. Returns 0 with *out the
 * reply; for an error reply the reason and detail are printed, *out is
 * NULL and the status is conn_error_exit's; other failures as conn_send
 * and conn_reply.
 */
int
conn_request(struct conn *k, const char *line, struct jr **out)
{
	const char *why;
	int rc;

	*out = NULL;
	if ((rc = conn_send(k, line)) != 0)
		return rc;
	if ((rc = conn_reply(k, out)) != 0)
		return rc;
	if ((why = conn_is_error(*out)) != NULL) {
		conn_print_error(*out);
		rc = conn_error_exit(why);
		jr_free(*out);
		*out = NULL;
		return rc;
	}
	return 0;
}

/*
 * conn_ask: connect as c says, send one request line, read its reply and
 * disconnect. Returns 0 with *out the reply (free with jr_free), or an
 * exit status after printing why (as conn_open and conn_request).
 */
int
conn_ask(const struct ctl *c, const char *line, struct jr **out)
{
	struct conn k;
	int rc;

	*out = NULL;
	if ((rc = conn_open(&k, c)) != 0)
		return rc;
	rc = conn_request(&k, line, out);
	conn_close(&k);
	return rc;
}
