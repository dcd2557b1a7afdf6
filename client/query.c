/* SPDX-License-Identifier: ISC */
/*
 * query: the read-only subcommands: list, show, predict, history, stats and
 * check. Each builds one request, reads one reply and prints it as a table
 * or, with --json, as the reply's own object without the protocol's "line"
 * key. The reply keys are those of daemon/cmd.c and daemon/render.c.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "coefctl.h"
#include "limits.h"
#include "proto.h"

#define DIG_COEF	7	/* significant digits of values in tables */
#define DIG_STAT	4	/* of standard errors and statistics */

/* Parse the options of a command that takes only common ones. */
static int
plain_opts(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ NULL, 0, NULL, 0 }
	};
	int st;

	while (ctl_getopt(c, argc, argv, "", lo, &st) != -1)
		return ctl_usage_error(c->usage, NULL);
	return st;
}

/* Exactly one NAME operand: 0 with *name, or an exit status. */
static int
one_name(struct ctl *c, int argc, char **argv, const char **name)
{
	if (argc - optind != 1)
		return ctl_usage_error(c->usage, "give one model NAME");
	*name = argv[optind];
	return ctl_model_arg(c, *name);
}

/* The names of a JSON array of strings joined by sep into buf ("-" when
 * empty). */
static const char *
join_strs(const struct jr *arr, const char *sep, char *buf, size_t len)
{
	size_t i, pos = 0;
	int n;

	buf[0] = '\0';
	for (i = 0; i < jr_len(arr); i++) {
		const char *s = jr_str(jr_at(arr, i));

		n = snprintf(buf + pos, len - pos, "%s%s", i ? sep : "",
		    s != NULL ? s : "?");
		if (n < 0 || (size_t)n >= len - pos)
			break;
		pos += (size_t)n;
	}
	if (buf[0] == '\0')
		snprintf(buf, len, "-");
	return buf;
}

/* A time value from a reply: the daemon's RFC 3339 text, a number of
 * seconds when it could not format one, or "-" for null. */
static const char *
time_text(const struct jr *v, char *buf, size_t len)
{
	if (jr_str(v) != NULL)
		snprintf(buf, len, "%s", jr_str(v));
	else
		out_num(buf, len, jr_num(v), 17);
	return buf;
}

/* --- list --- */

/*
 * cmd_list: `coefctl list [--names]`: every model with n, R^2, one-step
 * R^2, sigma, active alarms and its state (frozen, stale, orphan).
 */
int
cmd_list(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "names", no_argument, NULL, 'N' },
		{ NULL, 0, NULL, 0 }
	};
	static const char *const head[] = { "MODEL", "N", "R2", "R2_PRED",
		"SIGMA", "ALARMS", "STATE" };
	struct out_table *t = NULL;
	const struct jr *ms;
	struct jr *r = NULL;
	int ch, st, rc, names = 0;
	size_t i;

	while ((ch = ctl_getopt(c, argc, argv, "", lo, &st)) != -1) {
		if (ch != 'N')
			return ctl_usage_error(c->usage, NULL);
		names = 1;
	}
	if (st != 0)
		return ctl_done(st);
	if (argc != optind)
		return ctl_usage_error(c->usage, "list takes no operands");
	if ((rc = conn_ask(c, ".list", &r)) != 0)
		return rc;
	ms = jr_find(r, "models");
	if (names && c->json) {
		struct json j;

		if (out_json_new(&j, 64 + jr_len(ms) * 140) != 0)
			goto done;
		json_arr_begin(&j);
		for (i = 0; i < jr_len(ms); i++)
			json_str(&j, jr_str(jr_find(jr_at(ms, i), "model")));
		json_arr_end(&j);
		rc = out_json_print(&j);
		goto done;
	}
	if (names) {
		for (i = 0; i < jr_len(ms); i++)
			printf("%s\n", jr_str(jr_find(jr_at(ms, i), "model")));
		goto done;
	}
	if (c->json) {
		rc = out_jr(r, "line");
		goto done;
	}
	if ((t = out_table_new(7, head, "lrrrrll")) == NULL)
		goto done;
	for (i = 0; i < jr_len(ms); i++) {
		const struct jr *m = jr_at(ms, i);
		char n[32], r2[32], r2p[32], sg[32], al[160], state[40];
		const char *cells[7];
		enum out_style sty[7] = { 0 };

		state[0] = '\0';
		if (jr_true(jr_find(m, "frozen")))
			strcat(state, "frozen");
		if (jr_true(jr_find(m, "stale")))
			strcat(state, state[0] ? ",stale" : "stale");
		if (jr_true(jr_find(m, "orphan")))
			strcat(state, state[0] ? ",orphan" : "orphan");
		if (state[0] == '\0')
			strcpy(state, "-");
		else
			sty[6] = OUT_WARN;
		cells[0] = jr_str(jr_find(m, "model"));
		cells[1] = out_num(n, sizeof(n), jr_num(jr_find(m, "n")), 20);
		cells[2] = out_num(r2, sizeof(r2), jr_num(jr_find(m, "r2")),
		    6);
		cells[3] = out_num(r2p, sizeof(r2p),
		    jr_num(jr_find(m, "r2_pred")), 6);
		cells[4] = out_num(sg, sizeof(sg), jr_num(jr_find(m, "sigma")),
		    DIG_STAT);
		cells[5] = join_strs(jr_find(m, "alarms"), ",", al, sizeof(al));
		if (jr_len(jr_find(m, "alarms")) > 0)
			sty[5] = OUT_BAD;
		cells[6] = state;
		if (out_table_add(t, cells, sty) != 0)
			goto done;
	}
	out_table_print(c, t, stdout);
done:
	out_table_free(t);
	jr_free(r);
	return rc;
}

/* --- show --- */

/* Seconds as the largest whole unit (7d, 6h, 90s), else seconds. */
static const char *
duration_text(double s, char *buf, size_t len)
{
	static const struct { double sec; const char *u; } u[] = {
		{ 604800, "w" }, { 86400, "d" }, { 3600, "h" }, { 60, "m" }
	};
	size_t i;

	for (i = 0; i < sizeof(u) / sizeof(u[0]); i++)
		if (s >= u[i].sec && fmod(s, u[i].sec) == 0) {
			snprintf(buf, len, "%g%s", s / u[i].sec, u[i].u);
			return buf;
		}
	snprintf(buf, len, "%gs", s);
	return buf;
}

static int
kv(struct out_table *t, const char *k, const char *v, enum out_style s)
{
	const char *cells[2] = { k, v };
	enum out_style sty[2] = { OUT_PLAIN, s };

	return out_table_add(t, cells, sty);
}

static void
show_head(struct ctl *c, const struct jr *r)
{
	struct out_table *t;
	char buf[2048], a[1024], b[64], d[64];
	const struct jr *al = jr_find(r, "alarms");
	double lambda = jr_num(jr_find(r, "lambda"));
	double tau = jr_num(jr_find(r, "tau"));

	if ((t = out_table_new(2, NULL, "ll")) == NULL)
		return;
	kv(t, "model", jr_str(jr_find(r, "model")), OUT_BOLD);
	if (jr_find(r, "fields") != NULL) {
		snprintf(buf, sizeof(buf), "%s -> %s",
		    join_strs(jr_find(r, "fields"), " ", a, sizeof(a)),
		    jr_str(jr_find(r, "target")));
		kv(t, "fields", buf, OUT_PLAIN);
	}
	snprintf(buf, sizeof(buf), "%s used, %s seen, %s gated; effective %s",
	    out_num(a, 64, jr_num(jr_find(r, "n")), 20),
	    out_num(a + 64, 64, jr_num(jr_find(r, "n_seen")), 20),
	    out_num(b, sizeof(b), jr_num(jr_find(r, "n_gated")), 20),
	    out_num(d, sizeof(d), jr_num(jr_find(r, "n_eff")), 6));
	kv(t, "records", buf, OUT_PLAIN);
	if (isfinite(tau))
		snprintf(buf, sizeof(buf), "tau %s (time constant)",
		    duration_text(tau, b, sizeof(b)));
	else if (lambda == 1)
		snprintf(buf, sizeof(buf), "lambda 1 (every record kept)");
	else
		snprintf(buf, sizeof(buf), "lambda %s (about %s records)",
		    out_num(b, sizeof(b), lambda, 10),
		    out_num(d, sizeof(d), jr_num(jr_find(r, "memory")), 4));
	kv(t, "memory", buf, OUT_PLAIN);
	kv(t, "last record", time_text(jr_find(r, "last_t"), b, sizeof(b)),
	    OUT_PLAIN);
	kv(t, "state", jr_true(jr_find(r, "frozen")) ? "frozen" : "updating",
	    jr_true(jr_find(r, "frozen")) ? OUT_WARN : OUT_PLAIN);
	kv(t, "alarms", jr_len(al) ? join_strs(al, ", ", a, sizeof(a)) :
	    "none", jr_len(al) ? OUT_BAD : OUT_GOOD);
	out_table_print(c, t, stdout);
	out_table_free(t);
}

static void
show_coef(struct ctl *c, const struct jr *r)
{
	const struct jr *ref = jr_find(jr_find(r, "reference"), "coef");
	const struct jr *f = jr_find(r, "features");
	struct out_table *t;
	char lo[32], hi[32], v[6][40];
	const char *head[7] = { "TERM", "COEF", "STDERR", lo, hi, "REFERENCE",
		"DRIFT" };
	double level = jr_num(jr_find(r, "level"));
	size_t i;

	snprintf(lo, sizeof(lo), "%g%% LOW", isfinite(level) ? level * 100 :
	    95.0);
	snprintf(hi, sizeof(hi), "%g%% HIGH", isfinite(level) ?
	    level * 100 : 95.0);
	if ((t = out_table_new(ref != NULL ? 7 : 5, head, "lrrrrrr")) ==
	    NULL)
		return;
	for (i = 0; i < jr_len(f); i++) {
		const char *cells[7];
		double th = jr_num(jr_at(jr_find(r, "coef"), i));
		double rv = jr_num(jr_at(ref, i));

		cells[0] = jr_str(jr_at(f, i));
		cells[1] = out_num(v[0], 40, th, DIG_COEF);
		cells[2] = out_num(v[1], 40,
		    jr_num(jr_at(jr_find(r, "stderr"), i)), DIG_STAT);
		cells[3] = out_num(v[2], 40,
		    jr_num(jr_at(jr_find(r, "ci_low"), i)), DIG_COEF);
		cells[4] = out_num(v[3], 40,
		    jr_num(jr_at(jr_find(r, "ci_high"), i)), DIG_COEF);
		cells[5] = out_num(v[4], 40, rv, DIG_COEF);
		cells[6] = out_num(v[5], 40, th - rv, DIG_STAT);
		out_table_add(t, cells, NULL);
	}
	out_table_print(c, t, stdout);
	out_table_free(t);
}

static void
show_fit(struct ctl *c, const struct jr *r)
{
	static const struct { const char *key, *label; int dig; } k[] = {
		{ "r2", "r2", 6 }, { "r2_pred", "r2_pred", 6 },
		{ "sigma", "sigma", DIG_STAT }, { "rss", "rss", DIG_STAT },
		{ "dof", "dof", 10 }, { "rank", "rank", 10 },
		{ "cond", "cond", DIG_STAT },
		{ "sigma_ref", "sigma_ref", DIG_STAT }
	};
	char buf[512], num[40];
	size_t i, pos = 0;
	struct out_table *t;

	buf[0] = '\0';
	for (i = 0; i < sizeof(k) / sizeof(k[0]); i++) {
		int n = snprintf(buf + pos, sizeof(buf) - pos, "%s%s %s",
		    i ? "  " : "", k[i].label, out_num(num, sizeof(num),
		    jr_num(jr_find(r, k[i].key)), k[i].dig));

		if (n < 0 || (size_t)n >= sizeof(buf) - pos)
			break;
		pos += (size_t)n;
	}
	if ((t = out_table_new(2, NULL, "ll")) == NULL)
		return;
	kv(t, "fit", buf, OUT_PLAIN);
	out_table_print(c, t, stdout);
	out_table_free(t);
}

static void
show_detectors(struct ctl *c, const struct jr *r)
{
	static const char *const head[] = { "DETECTOR", "STATE", "CHANGED",
		"VALUE" };
	const struct jr *d = jr_find(r, "detectors");
	struct out_table *t;
	size_t i;

	if ((t = out_table_new(4, head, "lllr")) == NULL)
		return;
	for (i = 0; i < jr_len(d); i++) {
		const struct jr *x = &d->kids[i];
		const char *cells[4];
		enum out_style sty[4] = { 0 };
		char ch[64], v[40];
		int on = jr_true(jr_find(x, "on"));

		cells[0] = d->keys[i];
		cells[1] = on ? "ALARM" : "ok";
		sty[1] = on ? OUT_BAD : OUT_GOOD;
		cells[2] = time_text(jr_find(x, "changed"), ch, sizeof(ch));
		cells[3] = out_num(v, sizeof(v), jr_num(jr_find(x, "value")),
		    DIG_STAT);
		out_table_add(t, cells, sty);
	}
	out_table_print(c, t, stdout);
	out_table_free(t);
}

static void
show_reference(struct ctl *c, const struct jr *r)
{
	const struct jr *ref = jr_find(r, "reference");
	double d2 = jr_num(jr_find(ref, "drift_d2"));
	double q = jr_num(jr_find(ref, "drift_q"));
	struct out_table *t;
	char buf[300], tm[64], a[40], b[40];

	if ((t = out_table_new(2, NULL, "ll")) == NULL)
		return;
	if (ref == NULL || ref->type != JR_OBJ) {
		kv(t, "reference", "none (pin one with 'coefctl pin')",
		    OUT_PLAIN);
	} else {
		snprintf(buf, sizeof(buf), "%s, %s",
		    jr_str(jr_find(ref, "source")) != NULL ?
		    jr_str(jr_find(ref, "source")) : "?",
		    time_text(jr_find(ref, "pinned"), tm, sizeof(tm)));
		kv(t, "reference", buf, OUT_PLAIN);
		snprintf(buf, sizeof(buf), "d2 %s, threshold %s%s",
		    out_num(a, sizeof(a), d2, DIG_STAT),
		    out_num(b, sizeof(b), q, DIG_STAT),
		    isfinite(d2) && isfinite(q) && d2 > q ? " (exceeded)" : "");
		kv(t, "drift", buf, isfinite(d2) && isfinite(q) && d2 > q ?
		    OUT_BAD : OUT_PLAIN);
	}
	out_table_print(c, t, stdout);
	out_table_free(t);
}

/*
 * cmd_show: `coefctl show NAME`: the model's header, coefficients with
 * standard errors, intervals, reference and drift, the fit statistics,
 * the detectors with the time each changed, and the reference.
 */
int
cmd_show(struct ctl *c, int argc, char **argv)
{
	char line[MODEL_NAME_MAX + 8];
	const char *name = NULL;
	struct jr *r = NULL;
	int rc;

	if ((rc = plain_opts(c, argc, argv)) != 0 ||
	    (rc = one_name(c, argc, argv, &name)) != 0)
		return ctl_done(rc);
	snprintf(line, sizeof(line), ".get %s", name);
	if ((rc = conn_ask(c, line, &r)) != 0)
		return rc;
	if (c->json) {
		rc = out_jr(r, "line");
	} else {
		show_head(c, r);
		fputc('\n', stdout);
		show_coef(c, r);
		fputc('\n', stdout);
		show_fit(c, r);
		fputc('\n', stdout);
		show_detectors(c, r);
		fputc('\n', stdout);
		show_reference(c, r);
	}
	jr_free(r);
	return rc;
}

/* --- predict --- */

/*
 * cmd_predict: `coefctl predict NAME VALUES...`: .predict with the values
 * as given (all FIELD=VALUE or all positional); prints the calibrated
 * value, its standard error and prediction interval.
 */
int
cmd_predict(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ NULL, 0, NULL, 0 }
	};
	struct out_table *t;
	struct jr *r = NULL;
	char *line, lo_h[32], hi_h[32], v[4][40];
	const char *head[5] = { "MODEL", "PREDICTED", "STDERR", lo_h, hi_h };
	const char *cells[5];
	size_t len = 16, pos;
	double level;
	int i, st, rc;

	/* '+': stop at the first operand, so "-1.5" is a value. */
	while (ctl_getopt(c, argc, argv, "+", lo, &st) != -1)
		return ctl_usage_error(c->usage, NULL);
	if (st != 0)
		return ctl_done(st);
	if (argc - optind < 2)
		return ctl_usage_error(c->usage, "give a model NAME and "
		    "its input values");
	if ((rc = ctl_model_arg(c, argv[optind])) != 0)
		return rc;
	for (i = optind; i < argc; i++) {
		if (strncmp(argv[i], "--", 2) == 0)
			return ctl_usage_error(c->usage, "options go before "
			    "NAME (values may be negative numbers)");
		len += strlen(argv[i]) + 1;
	}
	if ((line = malloc(len)) == NULL) {
		ctl_err("out of memory");
		return CTL_EXIT_DATA;
	}
	pos = (size_t)snprintf(line, len, ".predict");
	for (i = optind; i < argc; i++)
		pos += (size_t)snprintf(line + pos, len - pos, " %s", argv[i]);
	rc = conn_ask(c, line, &r);
	free(line);
	if (rc != 0)
		return rc;
	if (c->json) {
		rc = out_jr(r, "line");
		jr_free(r);
		return rc;
	}
	level = jr_num(jr_find(r, "level"));
	snprintf(lo_h, sizeof(lo_h), "%g%% LOW", level * 100);
	snprintf(hi_h, sizeof(hi_h), "%g%% HIGH", level * 100);
	if ((t = out_table_new(5, head, "lrrrr")) != NULL) {
		cells[0] = jr_str(jr_find(r, "model"));
		cells[1] = out_num(v[0], 40, jr_num(jr_find(r, "yhat")),
		    DIG_COEF);
		cells[2] = out_num(v[1], 40, jr_num(jr_find(r, "se")),
		    DIG_STAT);
		cells[3] = out_num(v[2], 40, jr_num(jr_find(r, "lo")),
		    DIG_COEF);
		cells[4] = out_num(v[3], 40, jr_num(jr_find(r, "hi")),
		    DIG_COEF);
		out_table_add(t, cells, NULL);
		out_table_print(c, t, stdout);
		out_table_free(t);
	}
	jr_free(r);
	return 0;
}

/* --- history --- */

/* A CSV field, quoted when it holds a comma, quote or line break. */
static void
csv_field(const char *s)
{
	if (strpbrk(s, ",\"\r\n") == NULL) {
		fputs(s, stdout);
		return;
	}
	fputc('"', stdout);
	for (; *s; s++) {
		if (*s == '"')
			fputc('"', stdout);
		fputc(*s, stdout);
	}
	fputc('"', stdout);
}

static void
history_csv(const struct jr *r)
{
	const struct jr *f = jr_find(r, "features"), *h = jr_find(r, "history");
	char tm[64];
	size_t i, k;

	fputs("t,n,r2_pred", stdout);
	for (k = 0; k < jr_len(f); k++) {
		fputc(',', stdout);
		csv_field(jr_str(jr_at(f, k)));
	}
	fputc('\n', stdout);
	for (i = 0; i < jr_len(h); i++) {
		const struct jr *e = jr_at(h, i);
		const struct jr *co = jr_find(e, "coef");
		double v;

		fputs(time_text(jr_find(e, "t"), tm, sizeof(tm)), stdout);
		printf(",%.17g", jr_num(jr_find(e, "n")));
		v = jr_num(jr_find(e, "r2_pred"));
		isfinite(v) ? printf(",%.17g", v) : printf(",");
		for (k = 0; k < jr_len(co); k++) {
			v = jr_num(jr_at(co, k));
			isfinite(v) ? printf(",%.17g", v) : printf(",");
		}
		fputc('\n', stdout);
	}
}

static void
history_table(struct ctl *c, const struct jr *r)
{
	const struct jr *f = jr_find(r, "features"), *h = jr_find(r, "history");
	size_t nf = jr_len(f), ncol = 3 + nf, i, k;
	const char **head, **cells;
	char (*v)[40];
	struct out_table *t = NULL;
	char *align;

	head = calloc(ncol, sizeof(*head));
	cells = calloc(ncol, sizeof(*cells));
	v = calloc(ncol, sizeof(*v));
	align = calloc(ncol + 1, 1);
	if (head == NULL || cells == NULL || v == NULL || align == NULL)
		goto done;
	head[0] = "T";
	head[1] = "N";
	head[2] = "R2_PRED";
	memset(align, 'r', ncol);
	align[0] = 'l';
	for (k = 0; k < nf; k++)
		head[3 + k] = jr_str(jr_at(f, k));
	if ((t = out_table_new((int)ncol, head, align)) == NULL)
		goto done;
	for (i = 0; i < jr_len(h); i++) {
		const struct jr *e = jr_at(h, i);

		cells[0] = time_text(jr_find(e, "t"), v[0], 40);
		cells[1] = out_num(v[1], 40, jr_num(jr_find(e, "n")), 20);
		cells[2] = out_num(v[2], 40, jr_num(jr_find(e, "r2_pred")), 6);
		for (k = 0; k < nf; k++)
			cells[3 + k] = out_num(v[3 + k], 40,
			    jr_num(jr_at(jr_find(e, "coef"), k)), DIG_COEF);
		out_table_add(t, cells, NULL);
	}
	out_table_print(c, t, stdout);
done:
	out_table_free(t);
	free(head);
	free(cells);
	free(v);
	free(align);
}

/* Read -n N: a whole number 1..PROTO_COUNT_MAX, digits only. */
int
query_count_arg(struct ctl *c, const char *arg, unsigned long *n)
{
	char *end;

	if (arg[0] < '0' || arg[0] > '9' ||
	    (*n = strtoul(arg, &end, 10), *end != '\0') || *n < 1 ||
	    *n > PROTO_COUNT_MAX)
		return ctl_usage_error(c->usage, "-n must be a whole number "
		    "from 1 to 1000000000");
	return 0;
}

/* query_history: fetch .history NAME [N] into *out; an exit status. */
int
query_history(struct ctl *c, const char *name, unsigned long n,
    struct jr **out)
{
	char line[MODEL_NAME_MAX + 32];

	if (n > 0)
		snprintf(line, sizeof(line), ".history %s %lu", name, n);
	else
		snprintf(line, sizeof(line), ".history %s", name);
	return conn_ask(c, line, out);
}

/*
 * cmd_history: `coefctl history [-n N] [--csv] NAME`: the kept snapshots
 * (time, records used, one-step-ahead R^2, coefficients), oldest first.
 */
int
cmd_history(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "count", required_argument, NULL, 'n' },
		{ "csv", no_argument, NULL, 'C' },
		{ NULL, 0, NULL, 0 }
	};
	unsigned long n = 0;
	const char *name = NULL;
	struct jr *r = NULL;
	int ch, st, rc, csv = 0;

	while ((ch = ctl_getopt(c, argc, argv, "n:", lo, &st)) != -1) {
		if (ch == 'n') {
			if ((rc = query_count_arg(c, optarg, &n)) != 0)
				return rc;
		} else if (ch == 'C') {
			csv = 1;
		} else {
			return ctl_usage_error(c->usage, NULL);
		}
	}
	if (st != 0 || (st = one_name(c, argc, argv, &name)) != 0)
		return ctl_done(st);
	if (csv && c->json)
		return ctl_usage_error(c->usage, "--csv and --json exclude "
		    "each other");
	if ((rc = query_history(c, name, n, &r)) != 0)
		return rc;
	if (c->json)
		rc = out_jr(r, "line");
	else if (csv)
		history_csv(r);
	else
		history_table(c, r);
	jr_free(r);
	return rc;
}

/* --- stats --- */

static void
stats_rows(struct out_table *t, const struct jr *v, const char *prefix)
{
	char key[160], num[40];
	size_t i;

	for (i = 0; i < jr_len(v); i++) {
		const struct jr *x = &v->kids[i];
		const char *cells[2];

		/* The protocol's line number is not a counter. */
		if (prefix[0] == '\0' && strcmp(v->keys[i], "line") == 0)
			continue;
		snprintf(key, sizeof(key), "%s%s%s", prefix, prefix[0] ?
		    "." : "", v->keys[i]);
		if (x->type == JR_OBJ) {
			stats_rows(t, x, key);
			continue;
		}
		cells[0] = key;
		cells[1] = x->type == JR_STR ? x->str :
		    out_num(num, sizeof(num), jr_num(x), 12);
		out_table_add(t, cells, NULL);
	}
}

/* cmd_stats: `coefctl stats`: the daemon's counters, nested keys dotted. */
int
cmd_stats(struct ctl *c, int argc, char **argv)
{
	static const char *const head[] = { "COUNTER", "VALUE" };
	struct out_table *t;
	struct jr *r = NULL;
	int rc;

	if ((rc = plain_opts(c, argc, argv)) != 0)
		return ctl_done(rc);
	if (argc != optind)
		return ctl_usage_error(c->usage, "stats takes no operands");
	if ((rc = conn_ask(c, ".stats", &r)) != 0)
		return rc;
	if (c->json) {
		rc = out_jr(r, "line");
	} else if ((t = out_table_new(2, head, "lr")) != NULL) {
		stats_rows(t, r, "");
		out_table_print(c, t, stdout);
		out_table_free(t);
	}
	jr_free(r);
	return rc;
}

/* --- check --- */

/* check: is model name nm among the operands (all when there are none)? */
static int
check_wanted(const char *nm, int argc, char **argv)
{
	int k;

	if (optind == argc)
		return 1;
	for (k = optind; k < argc; k++)
		if (strcmp(argv[k], nm) == 0)
			return 1;
	return 0;
}

/* check: does the .list reply have a model named nm? */
static int
check_listed(const struct jr *ms, const char *nm)
{
	size_t i;

	for (i = 0; i < jr_len(ms); i++)
		if (strcmp(nm, jr_str(jr_find(jr_at(ms, i), "model"))) == 0)
			return 1;
	return 0;
}

/* check: the daemon could not be asked; why is what conn_* printed. */
static int
check_unknown(struct ctl *c, const char *why)
{
	char line[512];
	struct json j;

	snprintf(line, sizeof(line), "%s", why != NULL && why[0] ? why :
	    "no reply");
	if (strncmp(line, "coefctl: ", 9) == 0)
		memmove(line, line + 9, strlen(line + 9) + 1);
	line[strcspn(line, "\n")] = '\0';
	if (!c->json) {
		printf("UNKNOWN: %s\n", line);
	} else if (out_json_new(&j, 2048) == 0) {
		json_obj_begin(&j);
		json_key(&j, "status");
		json_str(&j, "unknown");
		json_key(&j, "message");
		json_str(&j, line);
		json_obj_end(&j);
		out_json_print(&j);
	}
	return CTL_EXIT_CHECK_UNKNOWN;
}

/*
 * cmd_check: `coefctl check [NAME...]`: one summary line on stdout and
 * exit 0 (no alarm), 1 (an alarm is active) or 2 (a named model does not
 * exist, or the daemon cannot be reached or answers nonsense). Nothing
 * else is printed: what the connection layer would say on stderr goes
 * into the line instead (stderr is pointed at a memory stream meanwhile).
 */
int
cmd_check(struct ctl *c, int argc, char **argv)
{
	const struct jr *ms;
	struct jr *r = NULL;
	struct json j;
	char *diag = NULL, *alarms = NULL, *missing = NULL;
	size_t dlen, alen, mlen, i;
	int rc, st, k, nalarm = 0, nmissing = 0, nmodels = 0;
	FILE *saved, *af, *mf;

	if ((st = plain_opts(c, argc, argv)) != 0)
		return ctl_done(st);
	for (k = optind; k < argc; k++)
		if ((rc = ctl_model_arg(c, argv[k])) != 0)
			return rc;
	saved = stderr;
	fflush(stderr);
	if ((stderr = open_memstream(&diag, &dlen)) == NULL)
		stderr = saved;
	rc = conn_ask(c, ".list", &r);
	if (stderr != saved) {
		fclose(stderr);
		stderr = saved;
	}
	if (rc != 0) {
		rc = check_unknown(c, diag);
		free(diag);
		return rc;
	}
	free(diag);
	ms = jr_find(r, "models");
	af = open_memstream(&alarms, &alen);
	mf = open_memstream(&missing, &mlen);
	if (af == NULL || mf == NULL ||
	    out_json_new(&j, 4096 + jr_len(ms) * 160 + (size_t)argc * 80) !=
	    0) {
		if (af != NULL)
			fclose(af);
		if (mf != NULL)
			fclose(mf);
		free(alarms);
		free(missing);
		jr_free(r);
		return check_unknown(c, "out of memory");
	}
	json_obj_begin(&j);
	json_key(&j, "alarms");
	json_obj_begin(&j);
	for (i = 0; i < jr_len(ms); i++) {
		const struct jr *m = jr_at(ms, i);
		const char *nm = jr_str(jr_find(m, "model"));
		char al[200];

		if (nm == NULL || !check_wanted(nm, argc, argv))
			continue;
		nmodels++;
		if (jr_len(jr_find(m, "alarms")) == 0)
			continue;
		json_key(&j, nm);
		jr_write(&j, jr_find(m, "alarms"), NULL);
		fprintf(af, "%s%s (%s)", nalarm++ ? ", " : "", nm,
		    join_strs(jr_find(m, "alarms"), ",", al, sizeof(al)));
	}
	json_obj_end(&j);
	json_key(&j, "missing");
	json_arr_begin(&j);
	for (k = optind; k < argc; k++) {
		if (check_listed(ms, argv[k]))
			continue;
		json_str(&j, argv[k]);
		fprintf(mf, "%s%s", nmissing++ ? ", " : "", argv[k]);
	}
	json_arr_end(&j);
	json_key(&j, "status");
	json_str(&j, nmissing ? "unknown" : nalarm ? "alarm" : "ok");
	json_key(&j, "models");
	json_int(&j, nmodels);
	json_key(&j, "models_in_alarm");
	json_int(&j, nalarm);
	json_obj_end(&j);
	fclose(af);
	fclose(mf);
	if (c->json) {
		out_json_print(&j);
	} else {
		free(j.buf);
		if (nmissing)
			printf("UNKNOWN: no model %s\n", missing);
		else if (nalarm)
			printf("ALARM: %d of %d model%s: %s\n", nalarm, nmodels,
			    nmodels == 1 ? "" : "s", alarms);
		else
			printf("OK: %d model%s, no alarm\n", nmodels,
			    nmodels == 1 ? "" : "s");
	}
	free(alarms);
	free(missing);
	jr_free(r);
	return nmissing ? CTL_EXIT_CHECK_UNKNOWN : nalarm ? CTL_EXIT_ALARM :
	    CTL_EXIT_OK;
}
