/* SPDX-License-Identifier: ISC */
/*
 * cmd: the command layer. Records go to the registry (no reply unless
 * rejected: pipelined); predictions and commands get one JSON line each.
 * Access rules: state-changing commands need an admin session (on the
 * Unix socket root, the daemon's user and admin_users, as net decides
 * from SO_PEERCRED; on TCP every peer when admin_from_tcp is set); when a
 * token is configured, TCP peers must present it with .auth before
 * writing records or running admin commands; UDP peers may only send
 * records. PURE apart from the hooks: no libuv, no I/O, no clocks.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "err.h"
#include "render.h"
#include "terms.h"

typedef int (*cmd_fn)(struct cmd_ctx *, struct session *,
    const struct proto_msg *, double, struct json *);

static void
str_arg(const struct proto_str *a, char *buf, size_t len)
{
	size_t n = a->len < len - 1 ? a->len : len - 1;

	memcpy(buf, a->ptr, n);
	buf[n] = '\0';
}

static int
reject(struct cmd_ctx *c, struct json *j, uint64_t line,
    enum proto_reason why, const char *detail)
{
	c->st.rejected[why < PROTO_NREASONS ? why : PROTO_NREASONS]++;
	proto_format_error(j, line, why, detail);
	return 1;
}

static int
ok_reply(struct json *j, const char *what, const struct reg_entry *e,
    uint64_t line)
{
	json_obj_begin(j);
	json_key(j, "ok");
	json_str(j, what);
	json_key(j, "line");
	json_uint(j, line);
	if (e != NULL) {
		json_key(j, "model");
		json_str(j, e->name);
	}
	return 0;
}

/* The model named by a command's first argument, or a reply. */
static struct reg_entry *
need_model(struct cmd_ctx *c, const struct proto_msg *msg, struct json *j)
{
	struct reg_entry *e;
	char nm[MODEL_NAME_MAX + 1], d[PROTO_DETAIL_MAX];

	e = registry_find(c->reg, msg->model.ptr, msg->model.len);
	if (e == NULL) {
		str_arg(&msg->model, nm, sizeof(nm));
		err_printf(d, sizeof(d), "no model \"%s\" (a model exists once "
		    "its first record arrived or it is configured by name "
		    "and was fed)", nm);
		reject(c, j, msg->line, PROTO_R_UNKNOWN_MODEL, d);
	}
	return e;
}

static void
alarm_events(struct cmd_ctx *c, const struct reg_entry *e, unsigned ev,
    double t)
{
	char buf[512], ts[40];
	struct json j;
	int d;

	for (d = 0; d < ALARM_NDET; d++) {
		int on = (ev & ALARM_EV_ON(d)) != 0;

		if (!on && !(ev & ALARM_EV_OFF(d)))
			continue;
		if (on)
			c->st.alarms_raised++;
		if (c->hooks.broadcast == NULL || c->st.watchers == 0)
			continue;
		json_init(&j, buf, sizeof(buf));
		json_obj_begin(&j);
		json_key(&j, "event");
		json_str(&j, "alarm");
		json_key(&j, "model");
		json_str(&j, e->name);
		json_key(&j, "detector");
		json_str(&j, alarm_name((enum alarm_det)d));
		json_key(&j, "on");
		json_bool(&j, on);
		json_key(&j, "t");
		if (render_time(t, ts, sizeof(ts)) == 0)
			json_str(&j, ts);
		else
			json_num(&j, t);
		json_key(&j, "value");
		json_num(&j, e->m->al.st[d].value);
		json_obj_end(&j);
		if (json_finish(&j) == 0)
			c->hooks.broadcast(c->hooks.arg, e, 0, j.buf, j.len);
	}
}

static void
update_event(struct cmd_ctx *c, const struct reg_entry *e, double t)
{
	struct model_report rep;
	double theta[RLS_MAX_P];
	char buf[8192], ts[40];
	struct json j;
	int k;

	memset(&rep, 0, sizeof(rep));
	rep.theta = theta;
	model_report_fast(e->m, &rep);
	json_init(&j, buf, sizeof(buf));
	json_obj_begin(&j);
	json_key(&j, "event");
	json_str(&j, "update");
	json_key(&j, "model");
	json_str(&j, e->name);
	json_key(&j, "t");
	if (render_time(t, ts, sizeof(ts)) == 0)
		json_str(&j, ts);
	else
		json_num(&j, t);
	json_key(&j, "n");
	json_uint(&j, e->m->n_used);
	json_key(&j, "coef");
	json_arr_begin(&j);
	for (k = 0; k < rep.p; k++)
		json_num(&j, theta[k]);
	json_arr_end(&j);
	json_key(&j, "r2_pred");
	json_num(&j, rep.s.r2_pred);
	json_obj_end(&j);
	if (json_finish(&j) == 0)
		c->hooks.broadcast(c->hooks.arg, e, 1, j.buf, j.len);
}

/* Take s off / put s on the list of sessions that asked for update
 * events (.watch every=N). */
static void
upd_unlink(struct cmd_ctx *c, struct session *s)
{
	if (s->watch_every == 0)
		return;
	if (s->upd_prev != NULL)
		s->upd_prev->upd_next = s->upd_next;
	else
		c->upd_watch = s->upd_next;
	if (s->upd_next != NULL)
		s->upd_next->upd_prev = s->upd_prev;
	s->upd_prev = s->upd_next = NULL;
}

static void
upd_link(struct cmd_ctx *c, struct session *s)
{
	if (s->watch_every == 0)
		return;
	s->upd_prev = NULL;
	s->upd_next = c->upd_watch;
	if (c->upd_watch != NULL)
		c->upd_watch->upd_prev = s;
	c->upd_watch = s;
}

/*
 * Does any session want an update event for e now (its model or all, and
 * e's used-record count a multiple of its every=N)? Only then is one
 * rendered: a watcher of one model no longer makes every record of every
 * model pay for a report and a JSON line.
 */
static int
upd_wanted(const struct cmd_ctx *c, const struct reg_entry *e)
{
	const struct session *s;

	for (s = c->upd_watch; s != NULL; s = s->upd_next)
		if ((s->watch_model[0] == '\0' ||
		    strcmp(s->watch_model, e->name) == 0) &&
		    e->n_updates % s->watch_every == 0)
			return 1;
	return 0;
}

static int
do_record(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_result res;

	if (s->need_token && !s->authed) {
		s->sync_rejected++;
		return reject(c, j, msg->line, PROTO_R_AUTH_REQUIRED,
		    "records need .auth TOKEN first on this connection");
	}
	if (registry_record(c->reg, msg, now, &res) != 0) {
		s->sync_rejected++;
		return reject(c, j, msg->line, res.reason, res.detail);
	}
	s->sync_accepted++;
	switch (res.kind) {
	case REG_USED:
		c->st.used++;
		break;
	case REG_GATED:
		c->st.gated++;
		break;
	case REG_PRIMED:
		c->st.primed++;
		break;
	case REG_FROZEN:
		c->st.frozen++;
		break;
	case REG_PREDICTION:
		break;
	}
	if (res.events != 0)
		alarm_events(c, res.entry, res.events, res.t);
	if (res.kind == REG_USED && c->upd_watch != NULL &&
	    c->hooks.broadcast != NULL && upd_wanted(c, res.entry))
		update_event(c, res.entry, res.t);
	return 0;
}

static int
do_predict(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_result res;

	(void)s;
	if (registry_record(c->reg, msg, now, &res) != 0)
		return reject(c, j, msg->line, res.reason, res.detail);
	c->st.predictions++;
	json_obj_begin(j);
	json_key(j, "line");
	json_uint(j, msg->line);
	json_key(j, "model");
	json_str(j, res.entry->name);
	json_key(j, "yhat");
	json_num(j, res.yhat);
	json_key(j, "se");
	json_num(j, res.se);
	json_key(j, "lo");
	json_num(j, res.lo);
	json_key(j, "hi");
	json_num(j, res.hi);
	json_key(j, "level");
	json_num(j, res.entry->m->o.level);
	json_obj_end(j);
	return 1;
}

static int
sync_reply(struct session *s, uint64_t line, struct json *j)
{
	json_obj_begin(j);
	json_key(j, "sync");
	json_obj_begin(j);
	json_key(j, "accepted");
	json_uint(j, s->sync_accepted);
	json_key(j, "rejected");
	json_uint(j, s->sync_rejected);
	json_obj_end(j);
	json_key(j, "line");
	json_uint(j, line);
	json_obj_end(j);
	s->sync_accepted = s->sync_rejected = 0;
	return CMD_REPLY;
}

/* .sync: with the every-record journal, the reply waits until every record
 * accepted so far is on disk (cmd_deferred sends it). */
static int
cmd_sync(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	uint64_t t;

	(void)now;
	if (c->hooks.sync_ticket != NULL && c->hooks.wait != NULL &&
	    (t = c->hooks.sync_ticket(c->hooks.arg)) != 0) {
		s->wait_kind = CMD_WAIT_SYNC;
		s->wait_ticket = t;
		s->wait_line = msg->line;
		return cmd_deferred(c, s, j);
	}
	return sync_reply(s, msg->line, j);
}

static int
cmd_list(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry **ents;
	struct model_report rep;
	size_t i, n, total = registry_count(c->reg);

	(void)s;
	(void)now;
	if ((ents = malloc(sizeof(*ents) * (total ? total : 1))) == NULL)
		return reject(c, j, msg->line, PROTO_R_INTERNAL,
		    "out of memory");
	n = registry_list(c->reg, ents, total);
	json_obj_begin(j);
	json_key(j, "line");
	json_uint(j, msg->line);
	json_key(j, "count");
	json_uint(j, total);
	json_key(j, "models");
	json_arr_begin(j);
	for (i = 0; i < n; i++) {
		const struct model *m = ents[i]->m;

		memset(&rep, 0, sizeof(rep));
		model_report_fast(m, &rep);
		json_obj_begin(j);
		json_key(j, "model");
		json_str(j, ents[i]->name);
		json_key(j, "n");
		json_uint(j, m->n_used);
		json_key(j, "r2");
		json_num(j, rep.s.r2);
		json_key(j, "r2_pred");
		json_num(j, rep.s.r2_pred);
		json_key(j, "sigma");
		json_num(j, rep.s.sigma);
		render_alarms(j, m);
		json_key(j, "frozen");
		json_bool(j, m->frozen);
		json_key(j, "stale");
		json_bool(j, ents[i]->stale);
		json_key(j, "orphan");
		json_bool(j, ents[i]->orphan);
		json_obj_end(j);
	}
	json_arr_end(j);
	json_obj_end(j);
	free(ents);
	return 1;
}

static int
cmd_get(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;
	struct model_report rep;
	struct render_model rm;
	const char *names[RLS_MAX_P];
	double th[RLS_MAX_P], se[RLS_MAX_P], lo[RLS_MAX_P], hi[RLS_MAX_P];
	double ref[RLS_MAX_P];
	const char *fields[PROTO_MAX_VALUES];
	int f;

	(void)s;
	(void)now;
	if ((e = need_model(c, msg, j)) == NULL)
		return 1;
	for (f = 0; f < e->nfields && f < PROTO_MAX_VALUES; f++)
		fields[f] = e->fields[f];
	memset(&rep, 0, sizeof(rep));
	rep.theta = th;
	rep.se = se;
	rep.ci_lo = lo;
	rep.ci_hi = hi;
	rep.ref = ref;
	if (model_report(e->m, &rep) != 0)
		return reject(c, j, msg->line, PROTO_R_INTERNAL,
		    "cannot compute the report (out of memory?)");
	registry_coef_names(e, names);
	memset(&rm, 0, sizeof(rm));
	rm.name = e->name;
	rm.features = names;
	rm.m = e->m;
	rm.rep = &rep;
	rm.reference = ref;
	rm.epoch_times = 1;
	rm.fields = fields;
	rm.nfields = f;
	rm.target = e->fields[e->nfields];
	render_model(j, &rm);
	return 1;
}

static int
cmd_pin(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;

	(void)s;
	if ((e = need_model(c, msg, j)) == NULL)
		return 1;
	if (registry_pin(c->reg, e, now) != 0)
		return reject(c, j, msg->line, PROTO_R_NOT_READY,
		    "not every coefficient is determined yet; nothing pinned");
	ok_reply(j, "pin", e, msg->line);
	json_obj_end(j);
	return 1;
}

static int
cmd_freeze(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;
	int on = msg->cmd == PROTO_CMD_FREEZE;

	(void)s;
	(void)now;
	if ((e = need_model(c, msg, j)) == NULL)
		return 1;
	registry_freeze(c->reg, e, on);
	ok_reply(j, on ? "freeze" : "thaw", e, msg->line);
	json_key(j, "frozen");
	json_bool(j, on);
	json_obj_end(j);
	return 1;
}

static int
cmd_reset(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;
	char err[160];
	int was_stale;

	(void)s;
	(void)now;
	if ((e = need_model(c, msg, j)) == NULL)
		return 1;
	was_stale = e->stale;
	if (registry_rebuild(c->reg, e, err, sizeof(err)) != 0)
		return reject(c, j, msg->line, PROTO_R_INTERNAL, err);
	ok_reply(j, "reset", e, msg->line);
	json_key(j, "rebuilt");
	json_bool(j, was_stale);
	json_obj_end(j);
	return 1;
}

static int
cmd_history(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;
	const char *names[RLS_MAX_P];
	uint32_t i, n, first;
	int k, p;
	char ts[40];

	(void)s;
	(void)now;
	if ((e = need_model(c, msg, j)) == NULL)
		return 1;
	p = e->m->o.p;
	n = e->hist_len;
	if (msg->count > 0 && msg->count < n)
		n = msg->count;
	first = e->hist_len - n;
	registry_coef_names(e, names);
	json_obj_begin(j);
	json_key(j, "line");
	json_uint(j, msg->line);
	json_key(j, "model");
	json_str(j, e->name);
	json_key(j, "features");
	json_arr_begin(j);
	for (k = 0; k < p; k++)
		json_str(j, names[k]);
	json_arr_end(j);
	json_key(j, "every");
	json_uint(j, e->hist_every);
	json_key(j, "history");
	json_arr_begin(j);
	for (i = first; i < e->hist_len; i++) {
		const double *row = registry_hist_get(e, i);

		json_obj_begin(j);
		json_key(j, "t");
		if (render_time(row[0], ts, sizeof(ts)) == 0)
			json_str(j, ts);
		else
			json_num(j, row[0]);
		json_key(j, "n");
		json_uint(j, (uint64_t)row[1]);
		json_key(j, "r2_pred");
		json_num(j, row[2]);
		json_key(j, "coef");
		json_arr_begin(j);
		for (k = 0; k < p; k++)
			json_num(j, row[3 + k]);
		json_arr_end(j);
		json_obj_end(j);
	}
	json_arr_end(j);
	json_obj_end(j);
	return 1;
}

static int
cmd_stats(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	uint64_t total = 0;
	int r;

	(void)s;
	json_obj_begin(j);
	json_key(j, "line");
	json_uint(j, msg->line);
	json_key(j, "version");
	json_str(j, c->version != NULL ? c->version : "");
	json_key(j, "uptime");
	json_num(j, now - c->started);
	json_key(j, "models");
	json_uint(j, registry_count(c->reg));
	json_key(j, "records");
	json_obj_begin(j);
	json_key(j, "used");
	json_uint(j, c->st.used);
	json_key(j, "gated");
	json_uint(j, c->st.gated);
	json_key(j, "primed");
	json_uint(j, c->st.primed);
	json_key(j, "frozen");
	json_uint(j, c->st.frozen);
	json_key(j, "predictions");
	json_uint(j, c->st.predictions);
	json_obj_end(j);
	json_key(j, "rejected");
	json_obj_begin(j);
	for (r = 0; r < PROTO_NREASONS; r++) {
		if (c->st.rejected[r] == 0)
			continue;
		json_key(j, proto_reason_str((enum proto_reason)r));
		json_uint(j, c->st.rejected[r]);
		total += c->st.rejected[r];
	}
	json_obj_end(j);
	json_key(j, "rejected_total");
	json_uint(j, total);
	json_key(j, "alarms_raised");
	json_uint(j, c->st.alarms_raised);
	json_key(j, "watchers");
	json_uint(j, c->st.watchers);
	if (c->hooks.stats != NULL)
		c->hooks.stats(c->hooks.arg, j);
	json_obj_end(j);
	return 1;
}

static int
cmd_watch(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	(void)now;
	if (s->kind == SESSION_UDP)
		return 0;
	if (!s->watching)
		c->st.watchers++;
	else
		upd_unlink(c, s);
	s->watching = 1;
	s->watch_every = msg->every;
	s->watch_model[0] = '\0';
	if (msg->model.len > 0)
		str_arg(&msg->model, s->watch_model, sizeof(s->watch_model));
	upd_link(c, s);
	ok_reply(j, "watch", NULL, msg->line);
	json_key(j, "model");
	json_str(j, s->watch_model[0] ? s->watch_model : "*");
	json_key(j, "every");
	json_uint(j, s->watch_every);
	json_obj_end(j);
	return 1;
}

/* .save: checkpoint now; the reply waits until the checkpoint is on disk
 * (or failed). */
static int
cmd_save(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	char err[PROTO_DETAIL_MAX] = "";
	uint64_t t = 0;

	(void)now;
	if (c->hooks.save == NULL || c->hooks.wait == NULL)
		return reject(c, j, msg->line, PROTO_R_INTERNAL,
		    "no state directory is in use");
	if (c->hooks.save(c->hooks.arg, &t, err, sizeof(err)) != 0)
		return reject(c, j, msg->line, PROTO_R_BUSY, err);
	s->wait_kind = CMD_WAIT_SAVE;
	s->wait_ticket = t;
	s->wait_line = msg->line;
	return cmd_deferred(c, s, j);
}

static int
cmd_reload(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	char err[PROTO_DETAIL_MAX] = "";
	int kept = 0, stale = 0, orphan = 0;

	(void)s;
	(void)now;
	if (c->hooks.reload == NULL)
		return reject(c, j, msg->line, PROTO_R_INTERNAL,
		    "reload is not available");
	if (c->hooks.reload(c->hooks.arg, err, sizeof(err), &kept, &stale,
	    &orphan) != 0)
		return reject(c, j, msg->line, PROTO_R_BAD_ARGUMENTS, err);
	ok_reply(j, "reload", NULL, msg->line);
	json_key(j, "kept");
	json_int(j, kept);
	json_key(j, "stale");
	json_int(j, stale);
	json_key(j, "orphan");
	json_int(j, orphan);
	json_obj_end(j);
	return 1;
}

/*
 * cmd_const_eq: 1 when a[0..alen) equals b[0..blen), in time that depends
 * only on the lengths (no early exit on the first differing byte).
 */
int
cmd_const_eq(const char *a, size_t alen, const char *b, size_t blen)
{
	unsigned char d = alen != blen;
	size_t i, n = alen < blen ? alen : blen;

	for (i = 0; i < n; i++)
		d |= (unsigned char)(a[i] ^ b[i]);
	return d == 0;
}

static int
cmd_auth(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	(void)now;
	if (c->token == NULL || c->token[0] == '\0') {
		s->authed = 1;
	} else if (!cmd_const_eq(msg->args[0].ptr, msg->args[0].len, c->token,
	    strlen(c->token))) {
		return reject(c, j, msg->line, PROTO_R_DENIED,
		    "wrong token");
	} else {
		s->authed = 1;
	}
	ok_reply(j, "auth", NULL, msg->line);
	json_obj_end(j);
	return 1;
}

static int
cmd_version(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	(void)s;
	(void)now;
	json_obj_begin(j);
	json_key(j, "line");
	json_uint(j, msg->line);
	json_key(j, "version");
	json_str(j, c->version != NULL ? c->version : "");
	json_key(j, "protocol");
	json_int(j, PROTO_VERSION);
	json_obj_end(j);
	return 1;
}

/* .open NAME: .get, after creating the model from its configuration
 * section if it does not exist yet (as its first record would). Lets a
 * client learn a configured model's fields before sending records. */
static int
cmd_open(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	struct reg_entry *e;
	struct reg_result res;

	memset(&res, 0, sizeof(res));
	if (registry_get(c->reg, msg->model.ptr, msg->model.len, &e, &res) != 0)
		return reject(c, j, msg->line, res.reason, res.detail);
	return cmd_get(c, s, msg, now, j);
}

static int
cmd_bye(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	(void)c;
	(void)now;
	s->close_after = 1;
	ok_reply(j, "bye", NULL, msg->line);
	json_obj_end(j);
	return 1;
}

static const struct {
	enum proto_cmd	 cmd;
	cmd_fn		 fn;
} cmd_table[] = {
	{ PROTO_CMD_SYNC, cmd_sync },
	{ PROTO_CMD_LIST, cmd_list },
	{ PROTO_CMD_GET, cmd_get },
	{ PROTO_CMD_PIN, cmd_pin },
	{ PROTO_CMD_FREEZE, cmd_freeze },
	{ PROTO_CMD_THAW, cmd_freeze },
	{ PROTO_CMD_RESET, cmd_reset },
	{ PROTO_CMD_HISTORY, cmd_history },
	{ PROTO_CMD_STATS, cmd_stats },
	{ PROTO_CMD_WATCH, cmd_watch },
	{ PROTO_CMD_SAVE, cmd_save },
	{ PROTO_CMD_RELOAD, cmd_reload },
	{ PROTO_CMD_AUTH, cmd_auth },
	{ PROTO_CMD_VERSION, cmd_version },
	{ PROTO_CMD_BYE, cmd_bye },
	{ PROTO_CMD_OPEN, cmd_open },
};

/*
 * cmd_handle: apply one line from session s at Unix time now. A line the
 * parser rejected (msg->reason < PROTO_NREASONS) is counted and answered
 * with its error. Returns CMD_REPLY (1) when a reply was written to j (one
 * JSON object, no newline), CMD_NOREPLY (0) when there is none (accepted
 * records, anything from UDP), CMD_DEFER (2) when the reply must wait
 * (.sync with the every-record journal, .save): see cmd_deferred.
 */
int
cmd_handle(struct cmd_ctx *c, struct session *s, const struct proto_msg *msg,
    double now, struct json *j)
{
	const struct proto_cmd_info *ci;
	size_t i;
	int r;

	if (msg->reason < PROTO_NREASONS) {
		s->sync_rejected++;
		if (msg->model.len > 0) {
			struct reg_entry *e = registry_find(c->reg,
			    msg->model.ptr, msg->model.len);

			if (e != NULL)
				registry_count_reject(c->reg, e);
		}
		r = reject(c, j, msg->line, msg->reason, msg->detail);
		return s->kind == SESSION_UDP ? 0 : r;
	}
	if (msg->kind == PROTO_RECORD)
		return do_record(c, s, msg, now, j) && s->kind != SESSION_UDP;
	if (s->kind == SESSION_UDP) {
		/* Fire-and-forget peers cannot read replies. */
		c->st.rejected[PROTO_R_DENIED]++;
		return 0;
	}
	if (msg->kind == PROTO_PREDICT)
		return do_predict(c, s, msg, now, j);
	if (msg->kind != PROTO_COMMAND)
		return 0;
	ci = proto_cmd_info(msg->cmd);
	if (ci != NULL && (ci->flags & PROTO_CMD_ADMIN)) {
		if (!s->admin)
			return reject(c, j, msg->line, PROTO_R_DENIED,
			    "state-changing commands need an admin peer (on "
			    "the Unix socket: root, the daemon's user or "
			    "admin_users; on TCP: admin_from_tcp)");
		if (s->need_token && !s->authed)
			return reject(c, j, msg->line, PROTO_R_AUTH_REQUIRED,
			    "send .auth TOKEN first");
	}
	for (i = 0; i < sizeof(cmd_table) / sizeof(cmd_table[0]); i++)
		if (cmd_table[i].cmd == msg->cmd)
			return cmd_table[i].fn(c, s, msg, now, j);
	return reject(c, j, msg->line, PROTO_R_UNKNOWN_COMMAND,
	    "command not implemented");
}

/*
 * cmd_deferred: session s has a deferred reply (cmd_handle returned
 * CMD_DEFER). Returns CMD_DEFER while what it waits for is pending, else
 * writes the reply into j and returns CMD_REPLY: the .sync counts, or for
 * a journal that failed a `busy` error (the records stay applied in
 * memory and counted for the next .sync); the .save result.
 */
int
cmd_deferred(struct cmd_ctx *c, struct session *s, struct json *j)
{
	char err[120] = "", d[PROTO_DETAIL_MAX];
	int kind = s->wait_kind, rc;

	if (kind == 0 || c->hooks.wait == NULL)
		return CMD_NOREPLY;
	rc = c->hooks.wait(c->hooks.arg, kind, s->wait_ticket, err,
	    sizeof(err));
	if (rc > 0)
		return CMD_DEFER;
	s->wait_kind = 0;
	if (kind == CMD_WAIT_SYNC) {
		if (rc == 0)
			return sync_reply(s, s->wait_line, j);
		err_printf(d, sizeof(d), "not on disk yet: %s; the records are "
		    "applied in memory; send .sync again later", err);
		return reject(c, j, s->wait_line, PROTO_R_BUSY, d);
	}
	if (rc != 0) {
		err_printf(d, sizeof(d), "checkpoint not written: %s", err);
		return reject(c, j, s->wait_line, PROTO_R_BUSY, d);
	}
	ok_reply(j, "save", NULL, s->wait_line);
	json_obj_end(j);
	return CMD_REPLY;
}

/* cmd_session_closed: a session ends; drop its watch from the count. */
void
cmd_session_closed(struct cmd_ctx *c, struct session *s)
{
	if (s->watching && c->st.watchers > 0)
		c->st.watchers--;
	if (s->watching)
		upd_unlink(c, s);
	s->watching = 0;
	s->watch_every = 0;
}
