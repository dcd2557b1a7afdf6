/* SPDX-License-Identifier: ISC */
/*
 * state: the state directory (daemon/STATE.md). Restores the models at
 * start (checkpoint, then journal replay, with damage kept aside and
 * reported), takes checkpoints without stopping ingest (a copy-before-write
 * snapshot encoded in short slices on the loop and written by a worker
 * thread: temporary file, fsync, rename, fsync of the directory), keeps
 * the journal of state changes under its durability policy, and raises a
 * daemon-level alarm when the disk fails, retrying meanwhile. Not pure:
 * libuv, files, clocks, logging. The byte formats are persist.c's. Owns
 * its files, buffers and handles; borrows the registry and the config.
 */
#ifndef COEFD_STATE_H
#define COEFD_STATE_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include <uv.h>

#include "conf.h"
#include "json.h"
#include "registry.h"

struct state_opts {
	const char	*dir;		/* the state directory */
	enum conf_journal journal;	/* durability policy */
	double		 journal_every;	/* s, with CONF_JOURNAL_INTERVAL */
	double		 checkpoint_every;	/* s between checkpoints */
};

struct state_hooks {
	void	*arg;
	/* A journal write or a checkpoint finished (well or not): deferred
	 * replies may be ready. */
	void	(*progress)(void *arg);
};

/* What a restore found (also printed by --verify-state). */
struct state_report {
	uint64_t	 models;	/* models restored from the checkpoint */
	uint64_t	 damaged;	/* model blocks that could not be */
	uint64_t	 segments;	/* journal segments replayed */
	uint64_t	 entries;	/* journal entries applied */
	uint64_t	 skipped;	/* journal entries not applied */
	uint64_t	 torn;		/* torn journal tails cut */
	int		 damage;	/* something was damaged or lost */
	uint64_t	 next_seq;	/* the journal segment this run starts */
	double		 ms;		/* time taken */
	int		 kept, stale, orphan;	/* against the current config */
};

struct state;

/* state_open: lock the directory, restore into reg, set up the handles. */
int	 state_open(uv_loop_t *loop, const struct state_opts *o,
	    struct registry *reg, const struct conf *conf,
	    const struct state_hooks *h, struct state **out,
	    struct state_report *rep, char *errbuf, size_t errlen);
/* state_start: open the journal and take the first checkpoint. */
int	 state_start(struct state *st, const char *conf_text, size_t len);
/* state_reload: the config was reloaded; journal it (text copied). */
void	 state_reload(struct state *st, const struct state_opts *o,
	    const char *conf_text, size_t len);
/* state_save: start a checkpoint (.save); *ticket for state_wait. */
int	 state_save(struct state *st, uint64_t *ticket, char *msg,
	    size_t len);
/* state_sync_ticket: what a .sync waits for; 0 when nothing. */
uint64_t state_sync_ticket(struct state *st);
/* state_wait: 1 pending, 0 done, <0 failed (kind CMD_WAIT_*). */
int	 state_wait(struct state *st, int kind, uint64_t ticket, char *msg,
	    size_t len);
/* state_stats: the "state" object of .stats (key included). */
void	 state_stats(const struct state *st, struct json *j);
/* state_shutdown: flush the journal, final checkpoint, close handles. */
void	 state_shutdown(struct state *st, void (*cb)(void *), void *arg);
/* state_final_ok: 1 when the final checkpoint was written. */
int	 state_final_ok(const struct state *st);
/* state_free: release after state_shutdown completed; NULL no-op. */
void	 state_free(struct state *st);
/* state_verify: check a state directory offline; 0 clean, 1 damaged. */
int	 state_verify(const char *dir, FILE *out);

#endif
