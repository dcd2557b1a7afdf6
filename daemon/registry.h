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
	char		(*fields)[FIELD_NAME_MAX + 1];	/* nfields + target */
	uint64_t	 n_rejected;	/* lines for this model rejected */
	uint64_t	 n_updates;	/* used records (for watch every=N) */
	/* History ring: hist_cap snapshots of 3 + p doubles each:
	 * time, records used, one-step-ahead R^2, coefficients (user's
	 * terms). */
	uint32_t	 hist_cap, hist_len, hist_next, hist_every;
	double		*hist;
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

#endif
