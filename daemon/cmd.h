/* SPDX-License-Identifier: ISC */
/*
 * cmd: what each protocol line does. One handler per command in a table
 * (word -> handler, admin flag), records and predictions through the
 * registry, one JSON reply line per request (records: only on error).
 * PURE apart from the hooks main installs: no libuv, no I/O, no clocks
 * (time comes in as an argument). Replies are documented in PROTOCOL.md.
 */
#ifndef COEFD_CMD_H
#define COEFD_CMD_H

#include <stdint.h>

#include "json.h"
#include "proto.h"
#include "registry.h"
#include "session.h"

struct cmd_stats {
	uint64_t	 used;		/* records that updated a fit */
	uint64_t	 gated;		/* outliers: counted, not used */
	uint64_t	 primed;	/* first records of prev() models */
	uint64_t	 frozen;	/* records seen by frozen models */
	uint64_t	 predictions;
	uint64_t	 alarms_raised;	/* alarm transitions to "on" */
	uint64_t	 rejected[PROTO_NREASONS + 1];
	uint64_t	 watchers;	/* sessions with .watch active */
};

/* cmd_handle and cmd_deferred results. */
#define CMD_NOREPLY	0
#define CMD_REPLY	1	/* one reply line is in j */
#define CMD_DEFER	2	/* the reply waits on the state layer: call
				 * cmd_deferred when it reports progress; no
				 * further line of this session may be handled
				 * before the reply is out */

/* What a deferred reply waits for (session.wait_kind). */
#define CMD_WAIT_SYNC	1	/* journal durable up to a ticket */
#define CMD_WAIT_SAVE	2	/* a checkpoint written */

/* Hooks into the rest of the daemon (main.c). Any may be NULL. */
struct cmd_hooks {
	void	*arg;
	/* Re-read the configuration; 0, or an error with a message. */
	int	(*reload)(void *arg, char *msg, size_t len, int *kept,
		    int *stale, int *orphan);
	/* Checkpoint every model now: 0 with the ticket to wait for
	 * (CMD_WAIT_SAVE), or an error with a message. */
	int	(*save)(void *arg, uint64_t *ticket, char *msg, size_t len);
	/* The ticket a .sync must wait for (CMD_WAIT_SYNC), 0 for none:
	 * every record accepted so far is then on disk. */
	uint64_t (*sync_ticket)(void *arg);
	/* State of a ticket of kind CMD_WAIT_*: 1 pending, 0 done, or a
	 * negative error with a message (the wait failed). */
	int	(*wait)(void *arg, int kind, uint64_t ticket, char *msg,
		    size_t len);
	/* Send one line to watchers: of model e, or all when e == NULL;
	 * every_n = 1: only to sessions whose watch_every divides e's
	 * update count. */
	void	(*broadcast)(void *arg, const struct reg_entry *e,
		    int every_n, const char *line, size_t len);
	/* Add daemon-level keys (connections, memory, state) to .stats. */
	void	(*stats)(void *arg, struct json *j);
};

struct cmd_ctx {
	struct registry	*reg;
	struct cmd_stats st;
	struct cmd_hooks hooks;
	const char	*token;		/* shared token for TCP writers */
	double		 started;	/* Unix time the daemon started */
	struct session	*upd_watch;	/* sessions with .watch every=N */
	const char	*version;
};

/* cmd_handle: apply one line for session s at time now; reply into j. */
int	cmd_handle(struct cmd_ctx *c, struct session *s,
	    const struct proto_msg *msg, double now, struct json *j);
/* cmd_deferred: the reply of a deferred line, once it is ready. */
int	cmd_deferred(struct cmd_ctx *c, struct session *s, struct json *j);
/* cmd_session_closed: forget a session's watch (on disconnect). */
void	cmd_session_closed(struct cmd_ctx *c, struct session *s);
/* cmd_const_eq: constant-time comparison of two byte strings. */
int	cmd_const_eq(const char *a, size_t alen, const char *b, size_t blen);

#endif
