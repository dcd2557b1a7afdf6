/* SPDX-License-Identifier: ISC */
/*
 * registry: name -> model entries in an open-addressing hash table (linear
 * probing, FNV-1a, grown at 70% load; models are never removed while the
 * daemon runs). PURE: no I/O, no clocks, no logging; allocation happens
 * when a model is created, never per record.
 *
 * Records: positional values map to the model's declared fields in order
 * (the target comes first on the line and is parsed separately); named
 * values map by name, the target by the model's target name; a line
 * without a target is a prediction request. Raw vectors have nfields + 1
 * entries, the target last, so prev(target) terms work.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "registry.h"
#include "terms.h"

struct registry {
	struct reg_entry **slot;
	size_t		  cap;		/* power of two */
	size_t		  count;
	const struct conf *conf;
	struct registry_hooks hooks;
	uint64_t	  epoch;	/* last snapshot epoch */
	int		  snap_active;	/* a snapshot is being taken */
	uint64_t	  changes;	/* state changes so far */
	struct reg_entry *last;		/* registry_get's last answer */
};

/* Before e changes: let a running snapshot copy it first. New entries
 * carry the epoch they were created in, so they are never copied into a
 * snapshot that started before them. */
static void
touch(struct registry *r, struct reg_entry *e)
{
	if (r->snap_active && e->snap_epoch != r->epoch &&
	    r->hooks.touch != NULL)
		r->hooks.touch(r->hooks.arg, e);
}

static void
journal(struct registry *r, const struct reg_op *op)
{
	r->changes++;
	if (r->hooks.journal != NULL)
		r->hooks.journal(r->hooks.arg, op);
}

static uint64_t
hash(const char *s, size_t len)
{
	uint64_t h = 1469598103934665603ULL;
	size_t i;

	for (i = 0; i < len; i++) {
		h ^= (unsigned char)s[i];
		h *= 1099511628211ULL;
	}
	return h;
}

/*
 * registry_new: an empty registry using config c (borrowed: the caller
 * keeps c alive until registry_set_conf replaces it or registry_free).
 * Returns NULL when out of memory.
 */
struct registry *
registry_new(const struct conf *c)
{
	struct registry *r;

	if ((r = calloc(1, sizeof(*r))) == NULL)
		return NULL;
	r->cap = 64;
	if ((r->slot = calloc(r->cap, sizeof(*r->slot))) == NULL) {
		free(r);
		return NULL;
	}
	r->conf = c;
	return r;
}

/* registry_entry_free: release e and its model; NULL is a no-op. */
void
registry_entry_free(struct reg_entry *e)
{
	if (e == NULL)
		return;
	model_free(e->m);
	free(e->hist);
	free(e);
}

/* registry_free: release every entry and r; NULL is a no-op. */
void
registry_free(struct registry *r)
{
	size_t i;

	if (r == NULL)
		return;
	for (i = 0; i < r->cap; i++)
		registry_entry_free(r->slot[i]);
	free(r->slot);
	free(r);
}

static size_t
probe(const struct registry *r, const char *name, size_t len)
{
	size_t i = (size_t)hash(name, len) & (r->cap - 1);

	/* len <= MODEL_NAME_MAX, so name[len] is inside the entry's name. */
	while (r->slot[i] != NULL && (r->slot[i]->name[len] != '\0' ||
	    memcmp(r->slot[i]->name, name, len) != 0))
		i = (i + 1) & (r->cap - 1);
	return i;
}

/* registry_find: the entry named name[0..len), or NULL. */
struct reg_entry *
registry_find(const struct registry *r, const char *name, size_t len)
{
	if (len == 0 || len > MODEL_NAME_MAX)
		return NULL;
	return r->slot[probe(r, name, len)];
}

static int
grow(struct registry *r)
{
	struct reg_entry **old = r->slot;
	size_t i, oldcap = r->cap;

	if ((r->slot = calloc(oldcap * 2, sizeof(*r->slot))) == NULL) {
		r->slot = old;
		return E_NOMEM;
	}
	r->cap = oldcap * 2;
	for (i = 0; i < oldcap; i++)
		if (old[i] != NULL)
			r->slot[probe(r, old[i]->name,
			    strlen(old[i]->name))] = old[i];
	free(old);
	return 0;
}

/*
 * registry_adopt: insert e (ownership passes to r on success). E_EXISTS if
 * the name is taken, E_NOMEM when the table cannot grow (e not taken).
 */
int
registry_adopt(struct registry *r, struct reg_entry *e)
{
	size_t len = strlen(e->name), i;

	if ((r->count + 1) * 10 > r->cap * 7 && grow(r) != 0)
		return E_NOMEM;
	i = probe(r, e->name, len);
	if (r->slot[i] != NULL)
		return E_EXISTS;
	e->snap_epoch = r->epoch;
	r->slot[i] = e;
	r->count++;
	r->changes++;
	return 0;
}

/*
 * registry_entry_new: build an entry named name from the config section cm
 * (a [model] or a [template]): create the model with a clone of the
 * section's compiled terms (shared with every model of the section, and
 * kept alive by the models after a reload frees the config), point the
 * entry's field names at the terms' copy, allocate the history ring.
 * Returns NULL with a message in errbuf on failure. The caller owns the
 * entry until registry_adopt.
 */
struct reg_entry *
registry_entry_new(const struct registry *r, const struct conf_model *cm,
    const char *name, char *errbuf, size_t errlen)
{
	struct reg_entry *e;
	struct terms *t = NULL;
	struct model_opts mo;
	int p;

	if (cm->nfields > PROTO_MAX_VALUES) {
		err_printf(errbuf, errlen, "more than %d fields",
		    PROTO_MAX_VALUES);
		return NULL;
	}
	if (cm->terms == NULL) {
		err_printf(errbuf, errlen, "section has no compiled terms");
		return NULL;
	}
	if ((e = calloc(1, sizeof(*e))) == NULL)
		goto nomem;
	snprintf(e->name, sizeof(e->name), "%s", name);
	snprintf(e->section, sizeof(e->section), "%s", cm->name);
	e->from_template = cm->is_template;
	e->nfields = cm->nfields;
	if ((t = terms_clone(cm->terms, cm->scale_mode ==
	    CONF_SCALE_AUTO)) == NULL)
		goto nomem;
	p = terms_p(t);
	mo = cm->mo;
	mo.p = p;
	if ((e->m = model_new(&mo)) == NULL) {
		err_printf(errbuf, errlen, "invalid model settings");
		terms_free(t);
		goto fail;
	}
	if (model_set_terms(e->m, t, cm->scale_mode == CONF_SCALE_AUTO) != 0)
		goto nomem;
	e->fields = terms_fields(e->m->terms);
	if (r != NULL && r->conf != NULL) {
		e->hist_cap = (uint32_t)r->conf->d.history;
		e->hist_every = r->conf->d.history_every;
	}
	if (e->hist_cap > 0 && (e->hist = calloc((size_t)e->hist_cap *
	    (size_t)(3 + p), sizeof(double))) == NULL)
		goto nomem;
	return e;
nomem:
	err_printf(errbuf, errlen, "out of memory");
fail:
	registry_entry_free(e);
	return NULL;
}

/*
 * registry_get: the entry for name[0..len); when absent, create it from
 * the config ([model] of that name, else the first matching [template]).
 * On failure returns -1 with res->reason (unknown_model, also for a len
 * of 0 or over MODEL_NAME_MAX; model_limit; internal) and res->detail set.
 */
int
registry_get(struct registry *r, const char *name, size_t len,
    struct reg_entry **out, struct reg_result *res)
{
	const struct conf_model *cm;
	struct reg_entry *e;
	char nm[MODEL_NAME_MAX + 1], err[160];

	/* A feed mostly names the model of its previous line again: try
	 * that entry before hashing. Entries stay at the same address until
	 * registry_free (registry_rebuild swaps their contents in place). */
	e = r->last;
	if (e != NULL && len <= MODEL_NAME_MAX && e->name[len] == '\0' &&
	    memcmp(e->name, name, len) == 0) {
		*out = e;
		return 0;
	}
	if ((e = registry_find(r, name, len)) != NULL) {
		*out = r->last = e;
		return 0;
	}
	*out = NULL;
	if (len == 0 || len > MODEL_NAME_MAX) {
		/* Not a model name (the protocol never passes one); nm
		 * could not hold it. */
		res->reason = PROTO_R_UNKNOWN_MODEL;
		err_printf(res->detail, sizeof(res->detail), "a model name "
		    "has 1 to %d bytes, not %zu", MODEL_NAME_MAX, len);
		return -1;
	}
	memcpy(nm, name, len);
	nm[len] = '\0';
	if (r->conf == NULL || (cm = conf_find_model(r->conf, nm)) == NULL) {
		res->reason = PROTO_R_UNKNOWN_MODEL;
		err_printf(res->detail, sizeof(res->detail), "no model \"%s\" "
		    "and no template matching it in the configuration", nm);
		return -1;
	}
	if (r->count >= (size_t)r->conf->d.max_models) {
		res->reason = PROTO_R_MODEL_LIMIT;
		err_printf(res->detail, sizeof(res->detail), "model limit "
		    "(max_models = %d) reached; \"%s\" not created",
		    r->conf->d.max_models, nm);
		return -1;
	}
	if ((e = registry_entry_new(r, cm, nm, err, sizeof(err))) == NULL ||
	    registry_adopt(r, e) != 0) {
		registry_entry_free(e);
		res->reason = PROTO_R_INTERNAL;
		err_printf(res->detail, sizeof(res->detail), "cannot create "
		    "model \"%s\": %s", nm, e == NULL ? err : "out of memory");
		return -1;
	}
	*out = e;
	return 0;
}

static void
fields_list(const struct reg_entry *e, char *buf, size_t len)
{
	size_t pos = 0;
	int f, n;

	buf[0] = '\0';
	for (f = 0; f < e->nfields; f++) {
		n = snprintf(buf + pos, len - pos, "%s%s", f ? " " : "",
		    e->fields[f]);
		if (n < 0 || (size_t)n >= len - pos)
			break;
		pos += (size_t)n;
	}
}

/* Raw values of a record into x (nfields + 1, target last). Returns 1
 * when the line carries a target, 0 for a prediction request, -1 with a
 * reason when it does not fit the model. */
static int
map_values(const struct reg_entry *e, const struct proto_msg *msg, double *x,
    struct reg_result *res)
{
	uint8_t seen[PROTO_MAX_VALUES + 2];
	char list[120];
	size_t i;
	int f, nf = e->nfields, has_target = 0;

	if (!msg->named) {
		if (msg->nvalues != (size_t)nf) {
			fields_list(e, list, sizeof(list));
			res->reason = PROTO_R_WRONG_COUNT;
			err_printf(res->detail, sizeof(res->detail), "model \"%s\" "
			    "takes %d features (%s), got %zu", e->name, nf,
			    list, msg->nvalues);
			return -1;
		}
		for (f = 0; f < nf; f++)
			x[f] = msg->values[f].v;
		x[nf] = msg->has_target ? msg->target : 0;
		return msg->has_target;
	}
	memset(seen, 0, sizeof(seen));
	for (i = 0; i < msg->nvalues; i++) {
		const struct proto_str *nm = &msg->values[i].name;

		for (f = 0; f <= nf; f++)
			if (strlen(e->fields[f]) == nm->len &&
			    memcmp(e->fields[f], nm->ptr, nm->len) == 0)
				break;
		if (f > nf || (f == nf && msg->kind == PROTO_PREDICT &&
		    msg->cmd == PROTO_CMD_PREDICT)) {
			fields_list(e, list, sizeof(list));
			res->reason = PROTO_R_UNKNOWN_FIELD;
			err_printf(res->detail, sizeof(res->detail), "model \"%s\" "
			    "has no field \"%.*s\" (fields: %s; target: %s)",
			    e->name, (int)(nm->len > 32 ? 32 : nm->len),
			    nm->ptr, list, e->fields[nf]);
			return -1;
		}
		seen[f] = 1;
		x[f] = msg->values[i].v;
		if (f == nf)
			has_target = 1;
	}
	for (f = 0; f < nf; f++)
		if (!seen[f]) {
			res->reason = PROTO_R_MISSING_FIELD;
			err_printf(res->detail, sizeof(res->detail), "model \"%s\": "
			    "field \"%s\" is missing", e->name, e->fields[f]);
			return -1;
		}
	if (!has_target)
		x[nf] = 0;
	return has_target;
}

static void
history_add(struct reg_entry *e, double t)
{
	struct model_report rep;
	double *row;
	int p = e->m->o.p;
	uint64_t n = e->m->n_used, ev = e->hist_every;

	if (e->hist_cap == 0 || ev == 0)
		return;
	/* A snapshot when n_used is a multiple of hist_every, found
	 * without a 64-bit division per record: hist_due is the next
	 * multiple, recomputed only when out of step (a restore, a reset,
	 * a reload that changed history_every). */
	if (e->hist_due_every != ev || n > e->hist_due ||
	    n + ev < e->hist_due) {
		e->hist_due = n % ev == 0 ? n : n + (ev - n % ev);
		e->hist_due_every = (uint32_t)ev;
	}
	if (n != e->hist_due)
		return;
	e->hist_due = n + ev;
	row = e->hist + (size_t)e->hist_next * (size_t)(3 + p);
	memset(&rep, 0, sizeof(rep));
	rep.theta = row + 3;
	model_report_fast(e->m, &rep);
	row[0] = t;
	row[1] = (double)e->m->n_used;
	row[2] = rep.s.r2_pred;
	e->hist_next = (e->hist_next + 1) % e->hist_cap;
	if (e->hist_len < e->hist_cap)
		e->hist_len++;
}

/*
 * registry_hist_get: snapshot i of e, oldest first: a pointer to 3 + p
 * doubles (time, records used, one-step-ahead R^2, coefficients), valid
 * until the next record; NULL when i >= hist_len.
 */
const double *
registry_hist_get(const struct reg_entry *e, uint32_t i)
{
	uint32_t k;

	if (i >= e->hist_len)
		return NULL;
	k = (e->hist_next + e->hist_cap - e->hist_len + i) % e->hist_cap;
	return e->hist + (size_t)k * (size_t)(3 + e->m->o.p);
}

/*
 * registry_record: a PROTO_RECORD or PROTO_PREDICT message: find or create
 * the model, map the values, and either run the record through the model
 * (time: the record's @TIME, else now) or compute a prediction. Returns 0
 * with res->kind set, or -1 with res->reason/detail when the line is
 * rejected; a rejected line changes no model state (a model created by a
 * template for it stays, empty).
 */
/* Run raw values x (nfields + 1, target last) through e's model at time
 * res->t; journal the record when the model accepted it. */
static int
ingest(struct registry *r, struct reg_entry *e, const double *x,
    struct reg_result *res)
{
	struct model_step_out so;
	struct reg_op op;
	int rc;

	rc = model_ingest(e->m, x, x[e->nfields], 1, res->t, &so);
	if (rc != 0 && rc != MODEL_PRIMED) {
		res->reason = rc == E_NUMERIC ? PROTO_R_TERM_NON_FINITE :
		    PROTO_R_BAD_TIME;
		err_printf(res->detail, sizeof(res->detail), "%s",
		    rc == E_NUMERIC ? "a value or derived term is not finite "
		    "or beyond 1e100" : "the record time is not usable");
		e->n_rejected++;
		r->changes++;
		return -1;
	}
	if (rc == MODEL_PRIMED) {
		res->kind = REG_PRIMED;
	} else {
		res->events = so.events;
		if (so.used) {
			res->kind = REG_USED;
			e->n_updates++;
			history_add(e, res->t);
		} else {
			res->kind = so.gate == ALARM_GATE_OUTLIER ? REG_GATED :
			    REG_FROZEN;
		}
	}
	memset(&op, 0, sizeof(op));
	op.kind = REG_OP_RECORD;
	op.e = e;
	op.x = x;
	op.nx = e->nfields + 1;
	op.t = res->t;
	journal(r, &op);
	return 0;
}

int
registry_record(struct registry *r, const struct proto_msg *msg, double now,
    struct reg_result *res)
{
	struct reg_entry *e;
	double x[PROTO_MAX_VALUES + 2];
	int has_target, rc;

	/* Field by field: a record need not clear all of detail[]. */
	res->kind = REG_USED;
	res->detail[0] = '\0';
	res->entry = NULL;
	res->events = 0;
	res->yhat = res->se = res->lo = res->hi = 0.0;
	res->reason = PROTO_NREASONS;
	res->t = msg->has_time ? msg->time : now;
	if (registry_get(r, msg->model.ptr, msg->model.len, &e, res) != 0)
		return -1;
	res->entry = e;
	touch(r, e);
	if ((has_target = map_values(e, msg, x, res)) < 0)
		goto reject;
	if (!has_target) {
		rc = model_predict_fields(e->m, x, &res->yhat, &res->se,
		    &res->lo, &res->hi);
		if (rc == 0 && rls_rank(e->m->rls) < e->m->o.p)
			rc = E_STATE;
		if (rc != 0) {
			res->reason = rc == E_STATE ? PROTO_R_NOT_READY :
			    PROTO_R_TERM_NON_FINITE;
			err_printf(res->detail, sizeof(res->detail), "%s",
			    rc == E_STATE ? "the model cannot predict yet "
			    "(not enough records to determine every "
			    "coefficient)" : "a derived term is not finite or "
			    "beyond 1e100");
			goto reject;
		}
		res->kind = REG_PREDICTION;
		return 0;
	}
	return ingest(r, e, x, res);
reject:
	e->n_rejected++;
	r->changes++;
	return -1;
}

/*
 * registry_apply: replay a journaled record: raw values x[0..nx) (the
 * model's fields then its target) for the model name[0..len) at time t,
 * creating the model from the config in use if needed, exactly as
 * registry_record did when the record arrived. Returns 0 with res->kind,
 * or -1 with res->reason/detail (unknown model, nx not the model's
 * nfields + 1 (PROTO_R_WRONG_COUNT), or the model rejected the values).
 */
int
registry_apply(struct registry *r, const char *name, size_t len,
    const double *x, int nx, double t, struct reg_result *res)
{
	struct reg_entry *e;

	memset(res, 0, sizeof(*res));
	res->reason = PROTO_NREASONS;
	res->t = t;
	if (registry_get(r, name, len, &e, res) != 0)
		return -1;
	res->entry = e;
	touch(r, e);
	if (nx != e->nfields + 1) {
		res->reason = PROTO_R_WRONG_COUNT;
		err_printf(res->detail, sizeof(res->detail), "model \"%s\" "
		    "takes %d values, the journal has %d", e->name,
		    e->nfields + 1, nx);
		return -1;
	}
	return ingest(r, e, x, res);
}

/* Same term list, fields, target and intercept: settings can be swapped
 * in place without touching the state. Compares with the section's
 * compiled terms (no compile per model). */
static int
same_shape(const struct reg_entry *e, const struct conf_model *cm)
{
	return cm->terms != NULL && cm->nfields == e->nfields &&
	    cm->mo.intercept == e->m->o.intercept &&
	    terms_same(cm->terms, e->m->terms);
}

/* New settings from cm, applied from the next record on. */
static void
apply_settings(struct reg_entry *e, const struct conf_model *cm)
{
	struct model *m = e->m;
	double q = m->o.alarm.drift_q;

	m->o.lambda = cm->mo.lambda;
	m->o.tau = cm->mo.tau;
	m->o.delta = cm->mo.delta;
	m->rls->delta = cm->mo.delta;
	m->o.sigma_memory = cm->mo.sigma_memory;
	m->o.drift_alpha = cm->mo.drift_alpha;
	m->o.level = cm->mo.level;
	m->o.alarm = cm->mo.alarm;
	/* The drift threshold belongs to the pin, not the config. */
	m->o.alarm.drift_q = m->pinned ? q : m->o.alarm.drift_q;
	/* On E_NOMEM the model keeps its tolerances: the only setting a
	 * reload can fail to apply for want of memory. */
	(void)model_set_tol(m, cm->tol_abs, cm->tol_pct);
}

/*
 * registry_set_conf: use config c from now on. Every model keeps its state.
 * A model whose section still has the same shape (fields, target, terms)
 * takes the new settings from its next record; one whose shape changed
 * keeps running as it was and is marked stale (.reset rebuilds it); one
 * whose section is gone is kept and marked orphan. Counts go to the out
 * parameters (each may be NULL).
 */
void
registry_set_conf(struct registry *r, const struct conf *c, int *nkept,
    int *nstale, int *norphan)
{
	const struct conf_model *cm;
	int kept = 0, stale = 0, orphan = 0;
	size_t i;

	r->conf = c;
	for (i = 0; i < r->cap; i++) {
		struct reg_entry *e = r->slot[i];

		if (e == NULL)
			continue;
		touch(r, e);
		r->changes++;
		cm = conf_find_model(c, e->name);
		e->orphan = cm == NULL;
		e->stale = 0;
		if (cm == NULL) {
			orphan++;
		} else if (!same_shape(e, cm)) {
			e->stale = 1;
			stale++;
		} else {
			apply_settings(e, cm);
			snprintf(e->section, sizeof(e->section), "%s", cm->name);
			e->hist_every = c->d.history_every;
			kept++;
		}
	}
	if (nkept != NULL)
		*nkept = kept;
	if (nstale != NULL)
		*nstale = stale;
	if (norphan != NULL)
		*norphan = orphan;
}

/*
 * registry_rebuild: replace e's model with a fresh one built from the
 * current config section for its name (new shape and settings). The
 * frozen flag and a reference pinned by the user are kept when the shape
 * is unchanged. E_NOTFOUND when no section matches any more; other errors
 * with a message. On error e is unchanged.
 */
int
registry_rebuild(struct registry *r, struct reg_entry *e, char *errbuf,
    size_t errlen)
{
	const struct conf_model *cm;
	struct reg_entry *n;
	struct reg_op op;
	uint64_t epoch;

	touch(r, e);
	if ((cm = conf_find_model(r->conf, e->name)) == NULL) {
		err_printf(errbuf, errlen, "no configuration section for \"%s\"",
		    e->name);
		return E_NOTFOUND;
	}
	if ((n = registry_entry_new(r, cm, e->name, errbuf, errlen)) == NULL)
		return E_NOMEM;
	if (!e->stale && e->m->pinned == 1 && n->m->o.p == e->m->o.p) {
		memcpy(n->m->theta_pin, e->m->theta_pin,
		    sizeof(double) * (size_t)e->m->o.p);
		n->m->pinned = 1;
		n->m->pin_t = e->m->pin_t;
		n->m->pin_sigma = e->m->pin_sigma;
		n->m->o.alarm.drift_q = e->m->o.alarm.drift_q;
	}
	if (!e->stale)
		n->m->frozen = e->m->frozen;
	/* Swap the contents so pointers to e stay valid. */
	model_free(e->m);
	free(e->hist);
	n->n_rejected = e->n_rejected;
	epoch = e->snap_epoch;
	*e = *n;
	e->snap_epoch = epoch;
	free(n);
	memset(&op, 0, sizeof(op));
	op.kind = REG_OP_RESET;
	op.e = e;
	journal(r, &op);
	return 0;
}

/* registry_count: models in the registry. */
size_t
registry_count(const struct registry *r)
{
	return r->count;
}

static int
by_name(const void *a, const void *b)
{
	const struct reg_entry *const *x = a, *const *y = b;

	return strcmp((*x)->name, (*y)->name);
}

/*
 * registry_list: store up to max entries, sorted by name, in out; returns
 * how many were stored.
 */
size_t
registry_list(const struct registry *r, struct reg_entry **out, size_t max)
{
	size_t i, k = 0;

	for (i = 0; i < r->cap && k < max; i++)
		if (r->slot[i] != NULL)
			out[k++] = r->slot[i];
	qsort(out, k, sizeof(*out), by_name);
	return k;
}

/* registry_coef_names: the coefficient names of e into names[0..p). */
void
registry_coef_names(const struct reg_entry *e, const char **names)
{
	int j;

	for (j = 0; j < e->m->o.p; j++)
		names[j] = terms_text(e->m->terms, j);
}

/* registry_set_hooks: use h (copied) from now on; NULL clears them. */
void
registry_set_hooks(struct registry *r, const struct registry_hooks *h)
{
	if (h == NULL)
		memset(&r->hooks, 0, sizeof(r->hooks));
	else
		r->hooks = *h;
}

/*
 * registry_use_conf: use config c (borrowed as in registry_new) for models
 * created from now on, without applying it to existing models (journal
 * replay: the models already have the settings of that config).
 */
void
registry_use_conf(struct registry *r, const struct conf *c)
{
	r->conf = c;
}

/*
 * registry_pin: model_pin(e, t) through the registry (snapshot and
 * journal hooks). E_STATE, nothing changed, while e is not determined.
 */
int
registry_pin(struct registry *r, struct reg_entry *e, double t)
{
	struct reg_op op;
	int rc;

	touch(r, e);
	if ((rc = model_pin(e->m, t)) != 0)
		return rc;
	memset(&op, 0, sizeof(op));
	op.kind = REG_OP_PIN;
	op.e = e;
	op.t = t;
	journal(r, &op);
	return 0;
}

/* registry_freeze: model_freeze(e, on) through the registry. */
void
registry_freeze(struct registry *r, struct reg_entry *e, int on)
{
	struct reg_op op;

	touch(r, e);
	model_freeze(e->m, on);
	memset(&op, 0, sizeof(op));
	op.kind = REG_OP_FREEZE;
	op.e = e;
	op.on = on != 0;
	journal(r, &op);
}

/* registry_count_reject: one more line for e rejected before it reached
 * the model (a parse error naming it). Not journaled: a counter only. */
void
registry_count_reject(struct registry *r, struct reg_entry *e)
{
	touch(r, e);
	e->n_rejected++;
	r->changes++;
}

/* registry_touch: call before changing e outside the registry's own
 * functions, so a running snapshot copies e first. */
void
registry_touch(struct registry *r, struct reg_entry *e)
{
	touch(r, e);
}

/*
 * registry_snap_begin: a snapshot starts: returns its epoch. Until
 * registry_snap_end, an entry whose snap_epoch differs from it is handed
 * to hooks.touch before it changes; the snapshot taker sets snap_epoch to
 * the epoch once it has copied an entry. Entries created from now on
 * belong to the epoch already (they are not part of this snapshot).
 */
uint64_t
registry_snap_begin(struct registry *r)
{
	r->epoch++;
	r->snap_active = 1;
	return r->epoch;
}

/* registry_snap_end: the running snapshot is complete. */
void
registry_snap_end(struct registry *r)
{
	r->snap_active = 0;
}

/*
 * registry_entries: store up to max entries in out in table order (no
 * sorting: cheap for a snapshot); returns how many were stored. Entries
 * are never removed while the registry lives, so the pointers stay valid
 * until registry_free even when the table grows.
 */
size_t
registry_entries(const struct registry *r, struct reg_entry **out,
    size_t max)
{
	size_t i, k = 0;

	for (i = 0; i < r->cap && k < max; i++)
		if (r->slot[i] != NULL)
			out[k++] = r->slot[i];
	return k;
}

/* registry_changes: how many state changes the registry has seen (records
 * accepted or rejected, admin commands, new models, reloads). */
uint64_t
registry_changes(const struct registry *r)
{
	return r->changes;
}
