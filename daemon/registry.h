/* SPDX-License-Identifier: ISC */
/*
 * registry: the named models of the daemon. Maps a name to an entry (its
 * model, the fields records carry, a bounded history ring), creates models
 * from the configuration ([model] sections, or a matching [template] on a
 * model's first record), turns a parsed record into raw field values and
 * runs it through the model. PURE: no I/O, no clocks, no logging; the
 * caller passes the time and decides what to log. The registry owns its
 * entries; an entry owns its model.
 */
#ifndef COEFD_REGISTRY_H
#define COEFD_REGISTRY_H

#include <stddef.h>
#include <stdint.h>

#include "conf.h"
#include "limits.h"
#include "model.h"
#include "proto.h"

struct reg_entry {
	char		 name[MODEL_NAME_MAX + 1];
	char		 section[MODEL_NAME_MAX + 1];	/* its config section */
	int		 from_template;
	int		 orphan;	/* section gone after a reload: kept */
	int		 stale;		/* section's shape changed: .reset */
	struct model	*m;
	int		 nfields;	/* declared fields */
	const char	(*fields)[FIELD_NAME_MAX + 1];	/* nfields + target;
					 * the model's terms own them */
	uint64_t	 n_rejected;	/* lines for this model rejected */
	uint64_t	 n_updates;	/* used records (for watch every=N) */
	/* History ring: hist_cap snapshots of 3 + p doubles each:
	 * time, records used, one-step-ahead R^2, coefficients (user's
	 * terms). */
	uint32_t	 hist_cap, hist_len, hist_next, hist_every;
	double		*hist;
	uint64_t	 hist_due;	/* next n_used to snapshot at */
	uint32_t	 hist_due_every;	/* hist_every hist_due was for */
	uint64_t	 snap_epoch;	/* checkpoint that has this entry */
};

/* Outcome of one record or prediction request. */
enum reg_kind {
	REG_USED = 0,		/* updated the fit */
	REG_GATED,		/* outlier: counted, not used */
	REG_PRIMED,		/* primed prev() values only */
	REG_FROZEN,		/* model frozen: monitored, not used */
	REG_PREDICTION		/* a prediction was computed */
};

struct reg_result {
	enum reg_kind	 kind;
	enum proto_reason reason;	/* when rejected */
	char		 detail[PROTO_DETAIL_MAX];
	struct reg_entry *entry;	/* the model (may be set on rejects) */
	unsigned	 events;	/* ALARM_EV_* bits of this record */
	double		 t;		/* record time used */
	double		 yhat, se, lo, hi;	/* prediction */
};

/* A state change the journal must record (registry_hooks.journal). */
enum reg_op_kind {
	REG_OP_RECORD = 0,	/* a record the model accepted */
	REG_OP_PIN,		/* .pin */
	REG_OP_FREEZE,		/* .freeze / .thaw */
	REG_OP_RESET		/* .reset */
};

struct reg_op {
	enum reg_op_kind kind;
	const struct reg_entry *e;
	const double	*x;		/* RECORD: raw values, target last */
	int		 nx;		/* RECORD: nfields + 1 */
	double		 t;		/* RECORD, PIN: the time used */
	int		 on;		/* FREEZE */
};

/* Calls out of the registry (for persistence); each may be NULL. The
 * registry does no I/O itself. */
struct registry_hooks {
	void	*arg;
	/* e is about to change while a snapshot is running and the snapshot
	 * does not have e yet (copy before write); see registry_snap_begin. */
	void	(*touch)(void *arg, struct reg_entry *e);
	/* A state change happened; called after it, in order. */
	void	(*journal)(void *arg, const struct reg_op *op);
};

struct registry;

/* registry_new: empty registry configured by c (borrowed, see set_conf). */
struct registry	*registry_new(const struct conf *c);
/* registry_free: every entry and model; NULL is a no-op. */
void		 registry_free(struct registry *r);
/* registry_set_conf: switch to a reloaded config (borrowed until the next
 * call or registry_free); existing models keep their state. */
void		 registry_set_conf(struct registry *r, const struct conf *c,
		    int *nkept, int *nstale, int *norphan);
/* registry_find: the entry for name[0..len), or NULL. */
struct reg_entry *registry_find(const struct registry *r, const char *name,
		    size_t len);
/* registry_get: find, or create from the config; rejects with a reason. */
int		 registry_get(struct registry *r, const char *name, size_t len,
		    struct reg_entry **out, struct reg_result *res);
/* registry_record: run a parsed record or prediction request. */
int		 registry_record(struct registry *r, const struct proto_msg *msg,
		    double now, struct reg_result *res);
/* registry_rebuild: .reset: a fresh model from the current config. */
int		 registry_rebuild(struct registry *r, struct reg_entry *e,
		    char *errbuf, size_t errlen);
/* registry_count: number of models. */
size_t		 registry_count(const struct registry *r);
/* registry_list: up to max entries sorted by name; returns the count. */
size_t		 registry_list(const struct registry *r,
		    struct reg_entry **out, size_t max);
/* registry_coef_names: coefficient names of e (p, owned by the model). */
void		 registry_coef_names(const struct reg_entry *e,
		    const char **names);
/* registry_hist_get: snapshot i (0 = oldest) of e; NULL if out of range. */
const double	*registry_hist_get(const struct reg_entry *e, uint32_t i);
/* registry_adopt: insert an entry built elsewhere (state restore). */
int		 registry_adopt(struct registry *r, struct reg_entry *e);
/* registry_entry_new: an entry for name from conf model cm (no insert). */
struct reg_entry *registry_entry_new(const struct registry *r,
		    const struct conf_model *cm, const char *name,
		    char *errbuf, size_t errlen);
/* registry_entry_free: release an entry that is not in a registry. */
void		 registry_entry_free(struct reg_entry *e);

/* Persistence support. */

/* registry_set_hooks: install (or with NULL clear) the hooks. */
void		 registry_set_hooks(struct registry *r,
		    const struct registry_hooks *h);
/* registry_use_conf: switch the config without touching any model. */
void		 registry_use_conf(struct registry *r, const struct conf *c);
/* registry_apply: replay one journaled record (raw values, time). */
int		 registry_apply(struct registry *r, const char *name,
		    size_t len, const double *x, int nx, double t,
		    struct reg_result *res);
/* registry_pin: .pin e at time t (model_pin, journaled). */
int		 registry_pin(struct registry *r, struct reg_entry *e,
		    double t);
/* registry_freeze: .freeze (on = 1) or .thaw (journaled). */
void		 registry_freeze(struct registry *r, struct reg_entry *e,
		    int on);
/* registry_count_reject: count a line for e rejected before the model. */
void		 registry_count_reject(struct registry *r,
		    struct reg_entry *e);
/* registry_touch: e is about to change (copy-before-write hook). */
void		 registry_touch(struct registry *r, struct reg_entry *e);
/* registry_snap_begin: start a snapshot epoch; returns its number. */
uint64_t	 registry_snap_begin(struct registry *r);
/* registry_snap_end: the snapshot has every entry it needs. */
void		 registry_snap_end(struct registry *r);
/* registry_entries: up to max entries in table order (no sort). */
size_t		 registry_entries(const struct registry *r,
		    struct reg_entry **out, size_t max);
/* registry_changes: count of state changes so far (for "dirty"). */
uint64_t	 registry_changes(const struct registry *r);

#endif
