/* SPDX-License-Identifier: ISC */
/*
 * session: what the command layer knows about one peer (a stream
 * connection or the UDP listener). Owned by the network layer, one per
 * connection; the command layer reads and updates it. No functions.
 */
#ifndef COEFD_SESSION_H
#define COEFD_SESSION_H

#include <stdint.h>
#include <sys/types.h>

#include "limits.h"

enum session_kind {
	SESSION_UNIX = 0,	/* Unix stream socket: peer credentials known */
	SESSION_TCP = 1,
	SESSION_UDP = 2		/* datagrams: no replies */
};

struct session {
	enum session_kind kind;
	uid_t		 uid;		/* SO_PEERCRED (Unix only) */
	pid_t		 pid;
	char		 peer[72];	/* "uid 1000 pid 42" or "127.0.0.1:5000" */
	int		 admin;		/* may run state-changing commands */
	int		 need_token;	/* writes need .auth first */
	int		 authed;	/* presented the token */
	uint64_t	 sync_accepted;	/* records accepted since last .sync */
	uint64_t	 sync_rejected;	/* lines rejected since last .sync */
	int		 watching;	/* .watch active */
	char		 watch_model[MODEL_NAME_MAX + 1];	/* "" = all */
	uint32_t	 watch_every;	/* also every Nth update (0 = off) */
	/* The command layer's list of sessions with watch_every > 0. */
	struct session	*upd_prev, *upd_next;
	int		 close_after;	/* .bye: close once replies are out */
	int		 wait_kind;	/* reply deferred: CMD_WAIT_*, 0 none */
	uint64_t	 wait_ticket;	/* what the deferred reply waits for */
	uint64_t	 wait_line;	/* the line that asked */
};

#endif
