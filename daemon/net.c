/* SPDX-License-Identifier: ISC */
/*
 * net: listeners and connections on one libuv loop. Bytes are parsed with
 * proto (incrementally, zero-copy when a line sits in one read) and every
 * line goes to the handler, whose one-line replies are queued in the
 * connection's output buffer and written once per read. A peer that does
 * not read its replies is throttled: once its queued output passes the cap
 * we stop reading from it (the unparsed rest of the current read is kept),
 * resume below half the cap, and close it if it stays over the cap for
 * stuck_ms. Handle memory is freed only in close callbacks (libuv's rule);
 * a connection is never freed inside its own read callback. Fairness: after
 * every NET_READ_BUDGET bytes a connection stops reading until the check
 * phase of the current loop iteration, so a pipelined writer cannot hold
 * the loop (libuv would otherwise read up to 32 buffers in a row from it,
 * 2 MiB, tens of milliseconds of records) while a query waits on another
 * connection. Likewise at most NET_ACCEPT_BUDGET connections are accepted
 * per turn; the next waits in its listener for the check phase.
 */
#define _GNU_SOURCE	/* struct ucred, SO_PEERCRED */
#include <arpa/inet.h>
#include <errno.h>
#include <netinet/in.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/un.h>
#include <unistd.h>

#include "err.h"
#include "log.h"
#include "net.h"

#define NET_READ_BUF	65536
#define NET_REPLY_BUF	(8u << 20)	/* largest single reply line */
#define NET_TICK_MS	1000
/* Pending connects the kernel may queue for us (it caps the value at
 * net.core.somaxconn): a burst of clients (many workers restarting at
 * once) must not be turned away with EAGAIN while we are under
 * max_connections; 128 refused most of a burst of 1000. */
#define NET_BACKLOG	4096
#define NET_READ_BUDGET	NET_READ_BUF	/* bytes per connection per loop turn */
/* Connections accepted per loop turn before the listeners wait for the
 * check phase: libuv accepts until the backlog is empty, and a client
 * opening thousands of connections kept it there (a query stalled 0.4 to
 * 1.8 s in t_adversarial's connection flood). */
#define NET_ACCEPT_BUDGET	64

struct conn;

struct wreq {
	uv_write_t	 req;
	struct conn	*c;
	size_t		 len;
	char		 data[];
};

struct conn {
	struct net	*net;
	union {
		uv_handle_t	h;
		uv_stream_t	s;
		uv_pipe_t	pipe;
		uv_tcp_t	tcp;
	} u;
	uv_timer_t	 timer;
	int		 nhandles;	/* open handles left to close */
	struct proto_reader *rd;
	struct proto_msg *msg;
	struct session	 sess;
	char		*out;		/* queued, not yet written */
	size_t		 outlen, outcap;
	size_t		 inflight;	/* bytes inside uv_write requests */
	char		*pend;		/* unparsed input kept while paused */
	size_t		 pendlen, pendoff;
	int		 paused;	/* reading stopped: output over cap */
	int		 yielded;	/* reading stopped: budget used this turn */
	size_t		 turn_bytes;	/* read since it last yielded */
	int		 deferred;	/* reading stopped: a reply waits */
	int		 drain;		/* close once the output is written */
	int		 closing;
	int		 eof;
	int		 uid_counted;	/* counted in net's per-uid table */
	uint64_t	 last_ms;	/* last input */
	uint64_t	 over_ms;	/* when the output went over the cap */
	struct log_rate	 lr;
	struct conn	*prev, *next;
};

struct uid_count {
	uid_t		 uid;
	unsigned	 n;
};

struct net {
	uv_loop_t	*loop;
	struct net_opts	 o;
	uid_t		 admin_uids[CONF_ADMIN_USERS_MAX];	/* o's copy */
	uid_t		 self_uid;	/* the daemon's effective uid */
	char		*unix_path;	/* owned copy, unlinked at close */
	struct net_handler h;
	uv_pipe_t	 upipe;
	uv_tcp_t	 tcp;
	uv_udp_t	 udp;
	int		 have_unix, have_tcp, have_udp;
	int		 listeners_open;
	struct conn	*conns;
	struct uid_count *uids;		/* open Unix connections per peer
					 * uid, sorted by uid */
	size_t		 nuids, capuids;
	uv_check_t	 resume;	/* restarts yielded connections and
					 * held listeners */
	unsigned	 nyielded;
	unsigned	 accepts;	/* since the last check phase */
	uv_stream_t	*held[2];	/* listeners with a connection waiting
					 * for the check phase */
	struct net_stats st;
	char		 rbuf[NET_READ_BUF];
	char		 ubuf[NET_READ_BUF];
	struct proto_msg *umsg;
	struct session	 usess;
	uint64_t	 ulines;
	char		*jbuf;
	/* shutdown */
	int		 shutting;
	uv_timer_t	 deadline;
	int		 deadline_open;
	void		(*done_cb)(void *);
	void		*done_arg;
};

static void conn_close(struct conn *c);
static void uid_remove(struct net *n, uid_t uid);
static void conn_process(struct conn *c, const char *buf, size_t len);
static void conn_resume(struct conn *c);
static void read_cb(uv_stream_t *s, ssize_t nread, const uv_buf_t *buf);
static void alloc_cb(uv_handle_t *h, size_t suggested, uv_buf_t *buf);
static void maybe_done(struct net *n);
static void resume_cb(uv_check_t *h);
static void on_connection(uv_stream_t *server, int status);

static uint64_t
now_ms(const struct net *n)
{
	return uv_now(n->loop);
}

static void
conn_log(struct conn *c, const char *what, int err)
{
	if (!log_rate_allow(&c->lr, now_ms(c->net)))
		return;
	if (err != 0)
		log_warnx("peer %s: %s: %s", c->sess.peer, what,
		    uv_strerror(err));
	else
		log_info("peer %s: %s", c->sess.peer, what);
}

/* Append bytes to the connection's queued output. */
static int
out_append(struct conn *c, const char *p, size_t len)
{
	if (c->outlen + len > c->outcap) {
		size_t cap = c->outcap ? c->outcap : 4096;
		char *nb;

		while (cap < c->outlen + len)
			cap *= 2;
		if ((nb = realloc(c->out, cap)) == NULL)
			return E_NOMEM;
		c->out = nb;
		c->outcap = cap;
	}
	memcpy(c->out + c->outlen, p, len);
	c->outlen += len;
	return 0;
}

static size_t
queued(const struct conn *c)
{
	return c->inflight + c->outlen;
}

static void
write_cb(uv_write_t *req, int status)
{
	struct wreq *w = (struct wreq *)req;
	struct conn *c = w->c;

	c->inflight -= w->len;
	c->net->st.out_buffered -= w->len;
	free(w);
	if (status < 0) {
		if (status != UV_ECANCELED)
			conn_log(c, "write failed", status);
		conn_close(c);
		return;
	}
	if (c->closing)
		return;
	if (c->paused && queued(c) <= c->net->o.out_cap / 2 &&
	    !c->net->shutting) {
		c->paused = 0;
		c->over_ms = 0;
		conn_resume(c);
	}
	if (c->drain && queued(c) == 0 && !c->deferred)
		conn_close(c);
}

/* Hand the queued output to libuv in one write. */
static void
conn_flush(struct conn *c)
{
	struct wreq *w;
	uv_buf_t b;
	int rc;

	if (c->outlen == 0 || c->closing)
		return;
	if ((w = malloc(sizeof(*w) + c->outlen)) == NULL) {
		conn_log(c, "out of memory for a reply; closing", 0);
		conn_close(c);
		return;
	}
	w->c = c;
	w->len = c->outlen;
	memcpy(w->data, c->out, c->outlen);
	b = uv_buf_init(w->data, (unsigned)w->len);
	if ((rc = uv_write(&w->req, &c->u.s, &b, 1, write_cb)) != 0) {
		free(w);
		conn_log(c, "write failed", rc);
		conn_close(c);
		return;
	}
	c->inflight += w->len;
	c->net->st.out_buffered += w->len;
	c->net->st.bytes_out += w->len;
	c->outlen = 0;
}

/* Queue the reply in j (for line) plus a newline. */
static void
conn_reply(struct conn *c, struct json *j, uint64_t line)
{
	if (json_finish(j) != 0) {
		json_init(j, c->net->jbuf, NET_REPLY_BUF);
		proto_format_error(j, line, PROTO_R_INTERNAL,
		    "reply too large");
	}
	/* Every rejection is answered and counted; the log gets them too,
	 * rate-limited per connection so a bad feeder cannot flood it. */
	if (j->len > 9 && memcmp(j->buf, "{\"error\":", 9) == 0 &&
	    log_rate_allow(&c->lr, now_ms(c->net)))
		log_info("peer %s: rejected %.*s", c->sess.peer,
		    (int)(j->len > 300 ? 300 : j->len), j->buf);
	if (out_append(c, j->buf, j->len) != 0 || out_append(c, "\n", 1) != 0) {
		conn_log(c, "out of memory for a reply; closing", 0);
		conn_close(c);
	}
}

/* Run the handler on one message and queue its reply. */
static void
conn_dispatch(struct conn *c, const struct proto_msg *msg)
{
	struct net *n = c->net;
	struct json j;
	int r;

	json_init(&j, n->jbuf, NET_REPLY_BUF);
	r = n->h.on_msg(n->h.arg, &c->sess, msg, &j);
	if (r == NET_DEFER) {
		c->deferred = 1;
		return;
	}
	if (r == NET_REPLY)
		conn_reply(c, &j, msg->line);
}

/* Keep buf[0..len) for later: reading is paused. */
static void
conn_keep(struct conn *c, const char *buf, size_t len)
{
	char *nb;

	if (len == 0)
		return;
	if ((nb = malloc(len)) == NULL) {
		conn_log(c, "out of memory; closing", 0);
		conn_close(c);
		return;
	}
	memcpy(nb, buf, len);
	free(c->pend);
	c->pend = nb;
	c->pendlen = len;
	c->pendoff = 0;
}

/* Parse and dispatch every complete line of buf; pause when over cap. */
static void
conn_process(struct conn *c, const char *buf, size_t len)
{
	size_t off = 0, used;
	int st;

	while (off < len && !c->closing && !c->drain) {
		st = proto_next(c->rd, buf + off, len - off, &used, c->msg);
		off += used;
		if (st == PROTO_NEED_MORE)
			break;
		if (st == PROTO_MSG && c->msg->kind == PROTO_EMPTY)
			continue;
		conn_dispatch(c, c->msg);
		if (c->sess.close_after)
			c->drain = 1;
		if (c->deferred) {
			/* Later lines wait for the deferred reply. */
			uv_read_stop(&c->u.s);
			conn_keep(c, buf + off, len - off);
			break;
		}
		if (queued(c) > c->net->o.out_cap && !c->drain) {
			if (!c->paused) {
				uv_read_stop(&c->u.s);
				c->paused = 1;
				c->over_ms = now_ms(c->net);
			}
			conn_keep(c, buf + off, len - off);
			break;
		}
	}
	conn_flush(c);
	if (c->drain && queued(c) == 0 && !c->deferred)
		conn_close(c);
}

/* Continue a connection that was paused (output over the cap) or had a
 * deferred reply: parse the input kept aside, then read again. */
static void
conn_resume(struct conn *c)
{
	if (c->paused || c->deferred || c->closing)
		return;
	if (c->pendlen > c->pendoff) {
		size_t off = c->pendoff, len = c->pendlen - off;

		/* conn_process may stop again and re-fill pend. */
		c->pendoff = c->pendlen = 0;
		conn_process(c, c->pend + off, len);
	}
	if (!c->paused && !c->deferred && !c->drain && !c->eof &&
	    !c->closing && uv_read_start(&c->u.s, alloc_cb, read_cb) != 0)
		conn_close(c);
}

static void
alloc_cb(uv_handle_t *h, size_t suggested, uv_buf_t *buf)
{
	struct conn *c = h->data;

	(void)suggested;
	*buf = uv_buf_init(c->net->rbuf, sizeof(c->net->rbuf));
}

static void
read_cb(uv_stream_t *s, ssize_t nread, const uv_buf_t *buf)
{
	struct conn *c = s->data;

	if (nread == 0)
		return;
	if (nread < 0) {
		if (nread != UV_EOF)
			conn_log(c, "read failed", (int)nread);
		uv_read_stop(s);
		c->eof = 1;
		/* A last line without a newline is still a line. */
		if (nread == UV_EOF && !c->closing &&
		    proto_finish(c->rd, c->msg) != PROTO_NEED_MORE &&
		    !(c->msg->kind == PROTO_EMPTY &&
		    c->msg->reason == PROTO_NREASONS))
			conn_dispatch(c, c->msg);
		conn_flush(c);
		c->drain = 1;
		if (queued(c) == 0 && !c->deferred)
			conn_close(c);
		return;
	}
	c->last_ms = now_ms(c->net);
	c->net->st.bytes_in += (uint64_t)nread;
	conn_process(c, buf->base, (size_t)nread);
	c->turn_bytes += (size_t)nread;
	if (c->turn_bytes >= NET_READ_BUDGET && !c->paused && !c->deferred &&
	    !c->drain && !c->closing && !c->eof) {
		uv_read_stop(s);
		c->yielded = 1;
		c->turn_bytes = 0;
		if (c->net->nyielded++ == 0)
			uv_check_start(&c->net->resume, resume_cb);
	}
}

/* Check phase: every connection that used its budget reads again. */
static void
resume_cb(uv_check_t *h)
{
	struct net *n = h->data;
	struct conn *c;
	int i, rc;

	for (c = n->conns; c != NULL; c = c->next) {
		if (!c->yielded)
			continue;
		c->yielded = 0;
		/* Paused and deferred connections resume through conn_resume,
		 * after the input they kept aside. */
		if (c->paused || c->deferred || c->drain || c->closing || c->eof)
			continue;
		if ((rc = uv_read_start(&c->u.s, alloc_cb, read_cb)) != 0 &&
		    rc != UV_EALREADY) {
			conn_log(c, "cannot resume reading", rc);
			conn_close(c);
		}
	}
	n->nyielded = 0;
	n->accepts = 0;
	for (i = 0; i < 2; i++) {
		uv_stream_t *l = n->held[i];

		n->held[i] = NULL;
		/* Accepting the waiting connection restarts the listener. */
		if (l != NULL && !uv_is_closing((uv_handle_t *)l))
			on_connection(l, 0);
	}
	uv_check_stop(h);
}

static void
conn_free(struct conn *c)
{
	struct net *n = c->net;

	if (c->prev != NULL)
		c->prev->next = c->next;
	else if (n->conns == c)
		n->conns = c->next;
	if (c->next != NULL)
		c->next->prev = c->prev;
	if (c->rd != NULL) {
		n->st.conns--;
		if (n->h.on_conn != NULL)
			n->h.on_conn(n->h.arg, &c->sess, 0);
	}
	proto_reader_free(c->rd);
	free(c->msg);
	free(c->out);
	free(c->pend);
	free(c);
	maybe_done(n);
}

static void
conn_close_cb(uv_handle_t *h)
{
	struct conn *c = h->data;

	if (--c->nhandles == 0)
		conn_free(c);
}

static void
conn_close(struct conn *c)
{
	if (c->closing)
		return;
	c->closing = 1;
	if (c->uid_counted) {
		uid_remove(c->net, c->sess.uid);
		c->uid_counted = 0;
	}
	uv_read_stop(&c->u.s);
	uv_close(&c->u.h, conn_close_cb);
	uv_close((uv_handle_t *)&c->timer, conn_close_cb);
}

static void
tick_cb(uv_timer_t *t)
{
	struct conn *c = t->data;
	struct net *n = c->net;
	uint64_t now = now_ms(n);

	if (c->closing)
		return;
	if (queued(c) > n->o.out_cap) {
		if (c->over_ms == 0)
			c->over_ms = now;
		else if (now - c->over_ms >= n->o.stuck_ms) {
			log_warnx("peer %s: not reading its replies for %llu "
			    "ms; closing", c->sess.peer,
			    (unsigned long long)(now - c->over_ms));
			n->st.dropped_stuck++;
			if (n->h.on_refused != NULL)
				n->h.on_refused(n->h.arg, PROTO_R_BUSY);
			conn_close(c);
			return;
		}
	} else if (!c->paused) {
		c->over_ms = 0;
	}
	if (n->o.idle_ms > 0 && !c->sess.watching && !c->deferred &&
	    now - c->last_ms >= n->o.idle_ms && queued(c) == 0) {
		log_info("peer %s: idle for %llu s; closing", c->sess.peer,
		    (unsigned long long)((now - c->last_ms) / 1000));
		n->st.dropped_idle++;
		conn_close(c);
	}
}

/*
 * Open Unix connections per peer uid, for max_connections_per_uid: a
 * sorted array, binary-searched (O(log k) per accept, k distinct uids;
 * scanning every connection made a burst of N connects cost O(N^2) and
 * stalled the loop for seconds at N = 9000). Returns the slot of uid or
 * where it would go.
 */
static size_t
uid_slot(const struct net *n, uid_t uid)
{
	size_t lo = 0, hi = n->nuids, mid;

	while (lo < hi) {
		mid = lo + (hi - lo) / 2;
		if (n->uids[mid].uid < uid)
			lo = mid + 1;
		else
			hi = mid;
	}
	return lo;
}

static unsigned
conns_of_uid(const struct net *n, uid_t uid)
{
	size_t i = uid_slot(n, uid);

	return i < n->nuids && n->uids[i].uid == uid ? n->uids[i].n : 0;
}

/* Count one more connection of uid; E_NOMEM when the table cannot grow. */
static int
uid_add(struct net *n, uid_t uid)
{
	size_t i = uid_slot(n, uid);
	struct uid_count *nu;

	if (i < n->nuids && n->uids[i].uid == uid) {
		n->uids[i].n++;
		return 0;
	}
	if (n->nuids == n->capuids) {
		size_t cap = n->capuids ? 2 * n->capuids : 16;

		if ((nu = realloc(n->uids, cap * sizeof(*nu))) == NULL)
			return E_NOMEM;
		n->uids = nu;
		n->capuids = cap;
	}
	memmove(n->uids + i + 1, n->uids + i,
	    (n->nuids - i) * sizeof(*n->uids));
	n->uids[i].uid = uid;
	n->uids[i].n = 1;
	n->nuids++;
	return 0;
}

static void
uid_remove(struct net *n, uid_t uid)
{
	size_t i = uid_slot(n, uid);

	if (i >= n->nuids || n->uids[i].uid != uid)
		return;
	if (--n->uids[i].n == 0) {
		memmove(n->uids + i, n->uids + i + 1,
		    (n->nuids - i - 1) * sizeof(*n->uids));
		n->nuids--;
	}
}

static void
peer_name(struct conn *c)
{
	struct sockaddr_storage ss;
	int len = sizeof(ss);
	char host[INET6_ADDRSTRLEN] = "?";
	int port = 0;

	if (c->sess.kind == SESSION_UNIX) {
		struct ucred uc;
		socklen_t ul = sizeof(uc);
		uv_os_fd_t fd;

		c->sess.uid = (uid_t)-1;
		if (uv_fileno(&c->u.h, &fd) == 0 &&
		    getsockopt(fd, SOL_SOCKET, SO_PEERCRED, &uc, &ul) == 0) {
			c->sess.uid = uc.uid;
			c->sess.pid = uc.pid;
		}
		snprintf(c->sess.peer, sizeof(c->sess.peer), "uid %ld pid %ld",
		    (long)(int)c->sess.uid, (long)c->sess.pid);
		return;
	}
	if (uv_tcp_getpeername(&c->u.tcp, (struct sockaddr *)&ss, &len) == 0) {
		if (ss.ss_family == AF_INET) {
			struct sockaddr_in *a = (struct sockaddr_in *)&ss;

			uv_ip4_name(a, host, sizeof(host));
			port = ntohs(a->sin_port);
		} else if (ss.ss_family == AF_INET6) {
			struct sockaddr_in6 *a = (struct sockaddr_in6 *)&ss;

			uv_ip6_name(a, host, sizeof(host));
			port = ntohs(a->sin6_port);
		}
	}
	snprintf(c->sess.peer, sizeof(c->sess.peer), "%s:%d", host, port);
}

/*
 * The admin rule for Unix peers: root, the daemon's own user and the
 * configured admin_users may change state; any other user who can open
 * the socket (its mode decides) may send records and queries. A peer
 * whose credentials could not be read is not an admin.
 */
static int
unix_admin(const struct net *n, uid_t uid)
{
	size_t i;

	if (uid == (uid_t)-1)
		return 0;
	if (uid == 0 || uid == n->self_uid)
		return 1;
	for (i = 0; i < n->o.nadmin_uids; i++)
		if (n->admin_uids[i] == uid)
			return 1;
	return 0;
}

static void
set_admins(struct net *n, const struct net_opts *o)
{
	size_t k = o->nadmin_uids;

	if (k > CONF_ADMIN_USERS_MAX)
		k = CONF_ADMIN_USERS_MAX;
	if (k > 0)
		memcpy(n->admin_uids, o->admin_uids, k * sizeof(uid_t));
	n->o.admin_uids = NULL;
	n->o.nadmin_uids = k;
}

/* Refuse a connection that is over a limit: one error line, then close. */
static void
conn_refuse(struct conn *c, enum proto_reason why, const char *detail)
{
	struct net *n = c->net;
	char buf[256];
	struct json j;

	n->st.refused++;
	if (n->h.on_refused != NULL)
		n->h.on_refused(n->h.arg, why);
	log_warnx("peer %s: refused: %s", c->sess.peer, detail);
	json_init(&j, buf, sizeof(buf));
	proto_format_error(&j, 0, why, detail);
	out_append(c, j.buf, j.len);
	out_append(c, "\n", 1);
	c->drain = 1;
	conn_flush(c);
	if (queued(c) == 0)
		conn_close(c);
}

static void
on_connection(uv_stream_t *server, int status)
{
	struct net *n = server->data;
	struct conn *c;
	int rc, is_unix = server == (uv_stream_t *)&n->upipe;

	if (status < 0) {
		log_warnx("accept: %s", uv_strerror(status));
		return;
	}
	/* Over this turn's budget: leave the connection in the listener
	 * (libuv stops polling it until it is accepted) and accept it in
	 * the check phase, after the other connections' input. */
	if (n->accepts >= NET_ACCEPT_BUDGET) {
		n->held[is_unix ? 0 : 1] = server;
		if (n->nyielded == 0)
			uv_check_start(&n->resume, resume_cb);
		return;
	}
	n->accepts++;
	if ((c = calloc(1, sizeof(*c))) == NULL) {
		log_warnx("accept: out of memory");
		return;
	}
	c->net = n;
	c->sess.kind = is_unix ? SESSION_UNIX : SESSION_TCP;
	rc = is_unix ? uv_pipe_init(n->loop, &c->u.pipe, 0) :
	    uv_tcp_init(n->loop, &c->u.tcp);
	if (rc != 0) {
		log_warnx("accept: %s", uv_strerror(rc));
		free(c);
		return;
	}
	c->u.h.data = c;
	c->timer.data = c;
	c->nhandles = 2;
	uv_timer_init(n->loop, &c->timer);
	c->next = n->conns;
	if (n->conns != NULL)
		n->conns->prev = c;
	n->conns = c;
	c->last_ms = now_ms(n);
	if ((rc = uv_accept(server, &c->u.s)) != 0) {
		log_warnx("accept: %s", uv_strerror(rc));
		conn_close(c);
		return;
	}
	peer_name(c);
	c->sess.admin = is_unix ? unix_admin(n, c->sess.uid) :
	    n->o.admin_from_tcp;
	c->sess.need_token = !is_unix && n->o.tcp_token;
	if (n->shutting) {
		conn_refuse(c, PROTO_R_BUSY, "shutting down");
		return;
	}
	if (n->st.conns >= n->o.max_conns) {
		conn_refuse(c, PROTO_R_CONNECTION_LIMIT,
		    "too many connections");
		return;
	}
	if (is_unix && conns_of_uid(n, c->sess.uid) >=
	    n->o.max_conns_per_uid) {
		conn_refuse(c, PROTO_R_CONNECTION_LIMIT,
		    "too many connections for this user");
		return;
	}
	if ((c->rd = proto_reader_new(n->o.max_line)) == NULL ||
	    (c->msg = malloc(sizeof(*c->msg))) == NULL ||
	    (is_unix && uid_add(n, c->sess.uid) != 0)) {
		/* Not counted as open: conn_free must not count it closed. */
		proto_reader_free(c->rd);
		c->rd = NULL;
		conn_refuse(c, PROTO_R_INTERNAL, "out of memory");
		return;
	}
	c->uid_counted = is_unix;
	n->st.conns++;
	n->st.conns_total++;
	if (n->h.on_conn != NULL)
		n->h.on_conn(n->h.arg, &c->sess, 1);
	log_debug("%s: peer %s connected", __func__, c->sess.peer);
	if ((rc = uv_read_start(&c->u.s, alloc_cb, read_cb)) != 0 ||
	    (rc = uv_timer_start(&c->timer, tick_cb, NET_TICK_MS,
	    NET_TICK_MS)) != 0) {
		conn_log(c, "cannot start reading", rc);
		conn_close(c);
	}
}

static void
udp_alloc_cb(uv_handle_t *h, size_t suggested, uv_buf_t *buf)
{
	struct net *n = h->data;

	(void)suggested;
	*buf = uv_buf_init(n->ubuf, sizeof(n->ubuf));
}

/* One datagram: one or more lines; no replies (errors are counted). */
static void
udp_recv_cb(uv_udp_t *u, ssize_t nread, const uv_buf_t *buf,
    const struct sockaddr *addr, unsigned flags)
{
	struct net *n = u->data;
	const char *p, *end, *nl;
	char rbuf[64];
	struct json j;

	if (nread <= 0 || addr == NULL)
		return;
	n->st.datagrams++;
	n->st.bytes_in += (uint64_t)nread;
	if (addr->sa_family == AF_INET)
		uv_ip4_name((const struct sockaddr_in *)addr, n->usess.peer,
		    sizeof(n->usess.peer));
	else if (addr->sa_family == AF_INET6)
		uv_ip6_name((const struct sockaddr_in6 *)addr, n->usess.peer,
		    sizeof(n->usess.peer));
	if (flags & UV_UDP_PARTIAL) {
		memset(n->umsg, 0, sizeof(*n->umsg));
		n->umsg->line = ++n->ulines;
		n->umsg->reason = PROTO_R_LINE_TOO_LONG;
		json_init(&j, rbuf, sizeof(rbuf));
		n->h.on_msg(n->h.arg, &n->usess, n->umsg, &j);
		return;
	}
	for (p = buf->base, end = p + nread; p < end; p = nl + 1) {
		size_t len;

		if ((nl = memchr(p, '\n', (size_t)(end - p))) == NULL)
			nl = end;
		len = (size_t)(nl - p);
		if (len > 0 && p[len - 1] == '\r')
			len--;
		if (proto_parse_line(p, len, ++n->ulines, n->umsg) ==
		    PROTO_MSG && n->umsg->kind == PROTO_EMPTY)
			continue;
		json_init(&j, n->jbuf, NET_REPLY_BUF);
		n->h.on_msg(n->h.arg, &n->usess, n->umsg, &j);
	}
}

/* Remove a stale Unix socket; refuse when a daemon answers on it. */
static int
unix_prepare(const char *path, char *errbuf, size_t errlen)
{
	struct sockaddr_un sa;
	struct stat sb;
	int fd, rc;

	if (strlen(path) >= sizeof(sa.sun_path)) {
		snprintf(errbuf, errlen, "%s: socket path too long", path);
		return E_ARG;
	}
	if (lstat(path, &sb) != 0)
		return 0;
	if (!S_ISSOCK(sb.st_mode)) {
		snprintf(errbuf, errlen, "%s: exists and is not a socket",
		    path);
		return E_IO;
	}
	memset(&sa, 0, sizeof(sa));
	sa.sun_family = AF_UNIX;
	memcpy(sa.sun_path, path, strlen(path) + 1);
	if ((fd = socket(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0)) < 0) {
		snprintf(errbuf, errlen, "socket: %s", strerror(errno));
		return E_IO;
	}
	rc = connect(fd, (struct sockaddr *)&sa, sizeof(sa));
	close(fd);
	if (rc == 0) {
		snprintf(errbuf, errlen, "%s: another daemon is listening",
		    path);
		return E_EXISTS;
	}
	if (unlink(path) != 0) {
		snprintf(errbuf, errlen, "%s: cannot remove stale socket: %s",
		    path, strerror(errno));
		return E_IO;
	}
	return 0;
}

static int
resolve(const char *host, int port, struct sockaddr_storage *ss)
{
	memset(ss, 0, sizeof(*ss));
	if (strcmp(host, "localhost") == 0)
		host = "127.0.0.1";
	if (uv_ip4_addr(host, port, (struct sockaddr_in *)ss) == 0)
		return 0;
	if (uv_ip6_addr(host, port, (struct sockaddr_in6 *)ss) == 0)
		return 0;
	return E_ARG;
}

static int
start_unix(struct net *n, char *errbuf, size_t errlen)
{
	mode_t old;
	int rc;

	if ((rc = uv_pipe_init(n->loop, &n->upipe, 0)) != 0)
		goto uverr;
	n->upipe.data = n;
	n->have_unix = 1;
	if (n->o.fd_unix >= 0) {
		if ((rc = uv_pipe_open(&n->upipe, n->o.fd_unix)) != 0)
			goto uverr;
	} else {
		if ((rc = unix_prepare(n->unix_path, errbuf, errlen)) != 0)
			return rc;
		/* Tight umask while the socket file is created, then the
		 * configured mode: there is no window with wider access. */
		old = umask(0177);
		rc = uv_pipe_bind(&n->upipe, n->unix_path);
		umask(old);
		if (rc != 0)
			goto uverr;
		if (chmod(n->unix_path, (mode_t)n->o.unix_mode) != 0) {
			snprintf(errbuf, errlen, "%s: chmod: %s", n->unix_path,
			    strerror(errno));
			return E_IO;
		}
	}
	if ((rc = uv_listen((uv_stream_t *)&n->upipe, NET_BACKLOG,
	    on_connection)) != 0)
		goto uverr;
	return 0;
uverr:
	snprintf(errbuf, errlen, "unix socket %s: %s",
	    n->unix_path ? n->unix_path : "(inherited)", uv_strerror(rc));
	return E_IO;
}

static int
start_tcp(struct net *n, char *errbuf, size_t errlen)
{
	struct sockaddr_storage ss;
	int rc;

	if ((rc = uv_tcp_init(n->loop, &n->tcp)) != 0)
		goto uverr;
	n->tcp.data = n;
	n->have_tcp = 1;
	if (n->o.fd_tcp >= 0) {
		if ((rc = uv_tcp_open(&n->tcp, n->o.fd_tcp)) != 0)
			goto uverr;
	} else {
		if (resolve(n->o.tcp_host, n->o.tcp_port, &ss) != 0) {
			snprintf(errbuf, errlen, "tcp: bad address %s",
			    n->o.tcp_host);
			return E_ARG;
		}
		if ((rc = uv_tcp_bind(&n->tcp, (struct sockaddr *)&ss, 0)) != 0)
			goto uverr;
	}
	if ((rc = uv_listen((uv_stream_t *)&n->tcp, NET_BACKLOG,
	    on_connection)) != 0)
		goto uverr;
	return 0;
uverr:
	snprintf(errbuf, errlen, "tcp %s:%d: %s",
	    n->o.tcp_host ? n->o.tcp_host : "(inherited)", n->o.tcp_port,
	    uv_strerror(rc));
	return E_IO;
}

static int
start_udp(struct net *n, char *errbuf, size_t errlen)
{
	struct sockaddr_storage ss;
	int rc;

	if (resolve(n->o.udp_host, n->o.udp_port, &ss) != 0) {
		snprintf(errbuf, errlen, "udp: bad address %s", n->o.udp_host);
		return E_ARG;
	}
	if ((rc = uv_udp_init(n->loop, &n->udp)) != 0)
		goto uverr;
	n->udp.data = n;
	n->have_udp = 1;
	n->usess.kind = SESSION_UDP;
	snprintf(n->usess.peer, sizeof(n->usess.peer), "udp");
	if ((rc = uv_udp_bind(&n->udp, (struct sockaddr *)&ss, 0)) != 0 ||
	    (rc = uv_udp_recv_start(&n->udp, udp_alloc_cb, udp_recv_cb)) != 0)
		goto uverr;
	return 0;
uverr:
	snprintf(errbuf, errlen, "udp %s:%d: %s", n->o.udp_host, n->o.udp_port,
	    uv_strerror(rc));
	return E_IO;
}

/*
 * net_start: create the listeners described by o on loop and start
 * accepting; lines go to h. On failure returns a negative error with a
 * message in errbuf; listeners already opened are closed through the loop
 * (run the loop to finish closing before freeing with net_free).
 */
int
net_start(uv_loop_t *loop, const struct net_opts *o,
    const struct net_handler *h, struct net **out, char *errbuf,
    size_t errlen)
{
	struct net *n;
	int rc = 0;

	*out = NULL;
	if ((n = calloc(1, sizeof(*n))) == NULL ||
	    (n->jbuf = malloc(NET_REPLY_BUF)) == NULL ||
	    (n->umsg = malloc(sizeof(*n->umsg))) == NULL) {
		if (n != NULL) {
			free(n->jbuf);
			free(n);
		}
		snprintf(errbuf, errlen, "out of memory");
		return E_NOMEM;
	}
	n->loop = loop;
	n->o = *o;
	n->h = *h;
	n->self_uid = geteuid();
	set_admins(n, o);
	/* Never fails on Unix; closed by the owner's final uv_walk. */
	uv_check_init(loop, &n->resume);
	n->resume.data = n;
	uv_unref((uv_handle_t *)&n->resume);
	n->o.unix_path = NULL;
	n->o.tcp_host = n->o.udp_host = NULL;
	if (o->unix_path != NULL)
		n->unix_path = strdup(o->unix_path);
	*out = n;
	if (o->unix_path != NULL || o->fd_unix >= 0)
		rc = start_unix(n, errbuf, errlen);
	if (rc == 0 && (o->tcp_host != NULL || o->fd_tcp >= 0)) {
		n->o.tcp_host = o->tcp_host;
		rc = start_tcp(n, errbuf, errlen);
		n->o.tcp_host = NULL;
	}
	if (rc == 0 && o->udp_host != NULL) {
		n->o.udp_host = o->udp_host;
		rc = start_udp(n, errbuf, errlen);
		n->o.udp_host = NULL;
	}
	n->listeners_open = 1;
	if (rc != 0)
		net_stop_listening(n);
	return rc;
}

/* net_apply_opts: limits, timeouts and admin users from a reloaded
 * config; connections already open keep their admin status. */
void
net_apply_opts(struct net *n, const struct net_opts *o)
{
	n->o.max_line = o->max_line;
	n->o.out_cap = o->out_cap;
	n->o.max_conns = o->max_conns;
	n->o.max_conns_per_uid = o->max_conns_per_uid;
	n->o.idle_ms = o->idle_ms;
	n->o.stuck_ms = o->stuck_ms;
	n->o.admin_from_tcp = o->admin_from_tcp;
	n->o.tcp_token = o->tcp_token;
	set_admins(n, o);
}

static void
listener_close_cb(uv_handle_t *h)
{
	struct net *n = h->data;

	if (h == (uv_handle_t *)&n->upipe) {
		n->have_unix = 0;
		if (n->unix_path != NULL && n->o.fd_unix < 0)
			unlink(n->unix_path);
	} else if (h == (uv_handle_t *)&n->tcp) {
		n->have_tcp = 0;
	} else if (h == (uv_handle_t *)&n->udp) {
		n->have_udp = 0;
	}
	maybe_done(n);
}

/*
 * net_stop_listening: close every listener (the Unix socket file is
 * removed once closed, unless it was inherited). Open connections stay.
 */
void
net_stop_listening(struct net *n)
{
	if (!n->listeners_open)
		return;
	n->listeners_open = 0;
	if (n->have_unix)
		uv_close((uv_handle_t *)&n->upipe, listener_close_cb);
	if (n->have_tcp)
		uv_close((uv_handle_t *)&n->tcp, listener_close_cb);
	if (n->have_udp)
		uv_close((uv_handle_t *)&n->udp, listener_close_cb);
}

static void
deadline_close_cb(uv_handle_t *h)
{
	struct net *n = h->data;

	n->deadline_open = 0;
	maybe_done(n);
}

static void
maybe_done(struct net *n)
{
	void (*cb)(void *);

	if (!n->shutting || n->conns != NULL || n->have_unix || n->have_tcp ||
	    n->have_udp)
		return;
	if (n->deadline_open == 1) {
		n->deadline_open = 2;
		uv_close((uv_handle_t *)&n->deadline, deadline_close_cb);
		return;
	}
	if (n->deadline_open != 0 || n->done_cb == NULL)
		return;
	cb = n->done_cb;
	n->done_cb = NULL;
	cb(n->done_arg);
}

static void
deadline_cb(uv_timer_t *t)
{
	struct net *n = t->data;
	struct conn *c, *next;

	for (c = n->conns; c != NULL; c = next) {
		next = c->next;
		if (!c->closing)
			log_warnx("peer %s: closing with %zu bytes unsent",
			    c->sess.peer, queued(c));
		conn_close(c);
	}
}

/*
 * net_close_all: shutdown: stop reading from every peer, let queued replies
 * go out until deadline_ms, then close everything; cb(arg) runs once every
 * connection, listener and timer is closed. Call net_stop_listening first.
 */
void
net_close_all(struct net *n, uint64_t deadline_ms, void (*cb)(void *),
    void *arg)
{
	struct conn *c, *next;

	n->shutting = 1;
	n->done_cb = cb;
	n->done_arg = arg;
	if (uv_timer_init(n->loop, &n->deadline) == 0) {
		n->deadline.data = n;
		n->deadline_open = 1;
		uv_timer_start(&n->deadline, deadline_cb, deadline_ms, 0);
	}
	for (c = n->conns; c != NULL; c = next) {
		next = c->next;
		if (c->closing)
			continue;
		uv_read_stop(&c->u.s);
		c->paused = 1;
		c->drain = 1;
		conn_flush(c);
		/* A deferred reply is still sent (net_poll_deferred). */
		if (queued(c) == 0 && !c->deferred)
			conn_close(c);
	}
	maybe_done(n);
}

/*
 * net_poll_deferred: for every connection with a deferred reply, ask the
 * handler (on_deferred) whether it is ready; queue and send the ready
 * ones and let those connections parse their waiting input and read
 * again (during shutdown they only drain and close).
 */
void
net_poll_deferred(struct net *n)
{
	struct conn *c, *next;
	struct json j;
	int r;

	if (n->h.on_deferred == NULL)
		return;
	for (c = n->conns; c != NULL; c = next) {
		next = c->next;
		if (!c->deferred || c->closing)
			continue;
		json_init(&j, n->jbuf, NET_REPLY_BUF);
		r = n->h.on_deferred(n->h.arg, &c->sess, &j);
		if (r == NET_DEFER)
			continue;
		c->deferred = 0;
		if (r == NET_REPLY)
			conn_reply(c, &j, c->sess.wait_line);
		conn_flush(c);
		conn_resume(c);
		if (c->drain && queued(c) == 0 && !c->deferred)
			conn_close(c);
	}
}

/*
 * net_broadcast: queue line + newline to every open stream session that
 * is watching and that match(session, marg) accepts (NULL: all watchers).
 * A watcher over its output cap skips the line (counted as dropped by the
 * stuck logic only when it stays over).
 */
void
net_broadcast(struct net *n, int (*match)(const struct session *, void *),
    void *marg, const char *line, size_t len)
{
	struct conn *c;

	for (c = n->conns; c != NULL; c = c->next) {
		if (c->closing || c->drain || !c->sess.watching)
			continue;
		if (match != NULL && !match(&c->sess, marg))
			continue;
		if (queued(c) > n->o.out_cap)
			continue;
		if (out_append(c, line, len) == 0 &&
		    out_append(c, "\n", 1) == 0)
			conn_flush(c);
	}
}

/* net_get_stats: copy the counters. */
void
net_get_stats(const struct net *n, struct net_stats *st)
{
	*st = n->st;
}

/* net_free: release n; every handle must already be closed. */
void
net_free(struct net *n)
{
	if (n == NULL)
		return;
	free(n->unix_path);
	free(n->jbuf);
	free(n->umsg);
	free(n->uids);
	free(n);
}
