/* SPDX-License-Identifier: ISC */
/*
 * net: the only libuv user besides main.c. Listeners (Unix stream socket,
 * optional TCP and UDP), connections with their input reader and output
 * buffer, backpressure, idle and stuck timeouts, connection limits and
 * peer credentials. It parses bytes with proto and hands each message to
 * the handler; it never interprets commands itself. net owns connections;
 * a connection owns its buffers and its session.
 */
#ifndef COEFD_NET_H
#define COEFD_NET_H

#include <stddef.h>
#include <stdint.h>

#include <uv.h>

#include "json.h"
#include "proto.h"
#include "session.h"

struct net_opts {
	const char	*unix_path;	/* NULL: no Unix socket */
	int		 unix_mode;	/* e.g. 0660 */
	const char	*tcp_host;	/* NULL: no TCP */
	int		 tcp_port;
	const char	*udp_host;	/* NULL: no UDP */
	int		 udp_port;
	int		 admin_from_tcp;
	const uid_t	*admin_uids;	/* Unix peers that may run admin
					 * commands besides root and the
					 * daemon's own uid (copied) */
	size_t		 nadmin_uids;	/* <= CONF_ADMIN_USERS_MAX */
	int		 tcp_token;	/* 1: TCP writers must .auth first */
	size_t		 max_line;
	size_t		 out_cap;	/* per-connection output cap */
	unsigned	 max_conns;
	unsigned	 max_conns_per_uid;
	uint64_t	 idle_ms;	/* 0 = no idle timeout */
	uint64_t	 stuck_ms;
	int		 fd_unix;	/* inherited socket (LISTEN_FDS) or -1 */
	int		 fd_tcp;	/* inherited socket or -1 */
};

/* Handler results. */
#define NET_REPLY	1	/* reply written to the json writer */
#define NET_NOREPLY	0
#define NET_DEFER	2	/* reply later: the connection parses no
				 * further input until on_deferred gives it */

struct net_handler {
	void	*arg;
	/* One parsed line (kind != PROTO_EMPTY) or a rejected one
	 * (msg->reason < PROTO_NREASONS). Write at most one reply line into
	 * j (no newline) and return NET_REPLY, else NET_NOREPLY. If j
	 * overflows, the handler is called again with a larger buffer. */
	int	(*on_msg)(void *arg, struct session *s,
		    const struct proto_msg *msg, struct json *j);
	/* A deferred reply: write it into j and return NET_REPLY (or
	 * NET_NOREPLY) once ready, else NET_DEFER. Called from
	 * net_poll_deferred. */
	int	(*on_deferred)(void *arg, struct session *s, struct json *j);
	/* A connection opened or closed (for statistics). */
	void	(*on_conn)(void *arg, struct session *s, int opened);
	/* A connection was refused (limit) or dropped (stuck). */
	void	(*on_refused)(void *arg, enum proto_reason why);
};

struct net_stats {
	unsigned	 conns;		/* open stream connections */
	uint64_t	 conns_total;
	uint64_t	 refused;
	uint64_t	 dropped_stuck;
	uint64_t	 dropped_idle;
	uint64_t	 bytes_in;
	uint64_t	 bytes_out;
	uint64_t	 datagrams;
	size_t		 out_buffered;	/* bytes queued for all peers */
};

struct net;

/* net_start: bind the listeners and start accepting. */
int	 net_start(uv_loop_t *loop, const struct net_opts *o,
	    const struct net_handler *h, struct net **out, char *errbuf,
	    size_t errlen);
/* net_apply_opts: new limits and timeouts after a reload (listeners
 * stay as they are). */
void	 net_apply_opts(struct net *n, const struct net_opts *o);
/* net_stop_listening: close the listeners (first step of shutdown). */
void	 net_stop_listening(struct net *n);
/* net_close_all: stop reading, flush what is queued (until deadline_ms),
 * close every connection and timer; cb runs when all are closed. */
void	 net_close_all(struct net *n, uint64_t deadline_ms,
	    void (*cb)(void *), void *arg);
/* net_broadcast: queue one line (newline added) to every watching
 * session that match() accepts. */
void	 net_broadcast(struct net *n, int (*match)(const struct session *,
	    void *), void *marg, const char *line, size_t len);
/* net_poll_deferred: ask on_deferred for every deferred reply; send the
 * ready ones and resume those connections. */
void	 net_poll_deferred(struct net *n);
/* net_get_stats: current counters. */
void	 net_get_stats(const struct net *n, struct net_stats *st);
/* net_free: release after net_close_all has completed. */
void	 net_free(struct net *n);

#endif
