/* SPDX-License-Identifier: ISC */
/*
 * watch: `coefctl watch [NAME] [--every N]`: follow the daemon's alarm
 * transitions (and every Nth coefficient update) until SIGINT or SIGTERM.
 * One line per event: a table line, or the event object as NDJSON with
 * --json. Coefficient names for update lines come from .get replies on the
 * same connection (replies carry no "event" key, events do).
 */
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "coefctl.h"
#include "limits.h"

#define WATCH_PREFETCH	256	/* models whose names are asked up front */

/* Set by the signal handler; the only state outside a stack frame. */
static volatile sig_atomic_t watch_stop;

static void
watch_sig(int sig)
{
	(void)sig;
	watch_stop = 1;
}

struct names {
	char		  model[MODEL_NAME_MAX + 1];
	struct jr	 *features;	/* a .get reply (owned) */
	int		  asked;
	struct names	 *next;
};

static struct names *
names_find(struct names *l, const char *model)
{
	for (; l != NULL; l = l->next)
		if (strcmp(l->model, model) == 0)
			return l;
	return NULL;
}

static struct names *
names_add(struct names **l, const char *model)
{
	struct names *n;

	if ((n = calloc(1, sizeof(*n))) == NULL)
		return NULL;
	snprintf(n->model, sizeof(n->model), "%s", model);
	n->next = *l;
	*l = n;
	return n;
}

static void
names_free(struct names *l)
{
	struct names *n;

	while (l != NULL) {
		n = l->next;
		jr_free(l->features);
		free(l);
		l = n;
	}
}

/* A .get reply: keep it as the model's names if they were asked for;
 * otherwise free it. Takes r. */
static void
keep_names(struct names *l, struct jr *r)
{
	const char *model = jr_str(jr_find(r, "model"));
	struct names *nm;

	if (model != NULL && jr_find(r, "features") != NULL &&
	    (nm = names_find(l, model)) != NULL && nm->features == NULL) {
		nm->features = r;
		return;
	}
	jr_free(r);
}

/*
 * Ask for the coefficient names before watching: of the named model (which
 * must exist), or of the first WATCH_PREFETCH models listed. Models that
 * appear later are asked for when their first update arrives. The .get
 * requests are pipelined; their replies are read with the .watch reply.
 */
static int
prefetch(struct conn *k, const char *name, struct names **names)
{
	char line[MODEL_NAME_MAX + 8];
	const struct jr *ms;
	struct names *nm;
	struct jr *r = NULL;
	size_t i;
	int rc;

	if (name != NULL) {
		snprintf(line, sizeof(line), ".get %s", name);
		if ((rc = conn_request(k, line, &r)) != 0)
			return rc;
		if ((nm = names_add(names, name)) == NULL) {
			jr_free(r);
			return CTL_EXIT_DATA;
		}
		nm->features = r;
		nm->asked = 1;
		return 0;
	}
	if ((rc = conn_request(k, ".list", &r)) != 0)
		return rc;
	ms = jr_find(r, "models");
	for (i = 0; i < jr_len(ms) && i < WATCH_PREFETCH; i++) {
		const char *m = jr_str(jr_find(jr_at(ms, i), "model"));

		if (m == NULL || (nm = names_add(names, m)) == NULL)
			continue;
		nm->asked = 1;
		snprintf(line, sizeof(line), ".get %s", m);
		if ((rc = conn_send(k, line)) != 0)
			break;
	}
	jr_free(r);
	return rc;
}

static void
print_alarm(struct ctl *c, const struct jr *ev)
{
	int on = jr_true(jr_find(ev, "on"));
	char v[40];

	printf("%s  %s  %s%s %s%s  value %s\n", jr_str(jr_find(ev, "t")) ?
	    jr_str(jr_find(ev, "t")) : "-", jr_str(jr_find(ev, "model")),
	    out_style_on(c, on ? OUT_BAD : OUT_GOOD),
	    jr_str(jr_find(ev, "detector")), on ? "ALARM" : "clear",
	    out_style_off(c, on ? OUT_BAD : OUT_GOOD),
	    out_num(v, sizeof(v), jr_num(jr_find(ev, "value")), 4));
}

static void
print_update(const struct jr *ev, const struct names *nm)
{
	const struct jr *co = jr_find(ev, "coef"), *f = NULL;
	char v[40];
	size_t i;

	if (nm != NULL && nm->features != NULL)
		f = jr_find(nm->features, "features");
	printf("%s  %s  update n %s  r2_pred %s", jr_str(jr_find(ev, "t")) ?
	    jr_str(jr_find(ev, "t")) : "-", jr_str(jr_find(ev, "model")),
	    out_num(v, sizeof(v), jr_num(jr_find(ev, "n")), 20),
	    out_num(v + 20, 20, jr_num(jr_find(ev, "r2_pred")), 6));
	for (i = 0; i < jr_len(co); i++) {
		const char *n = jr_str(jr_at(f, i));

		if (n != NULL)
			printf("  %s %s", n, out_num(v, sizeof(v),
			    jr_num(jr_at(co, i)), 7));
		else
			printf("  b%zu %s", i, out_num(v, sizeof(v),
			    jr_num(jr_at(co, i)), 7));
	}
	fputc('\n', stdout);
}

/*
 * cmd_watch: `coefctl watch [--every N] [NAME]`. A named model must exist
 * (exit 5). Runs until SIGINT or SIGTERM (exit 0) or until the daemon
 * closes the connection (exit 3).
 */
int
cmd_watch(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "every", required_argument, NULL, 'e' },
		{ NULL, 0, NULL, 0 }
	};
	struct sigaction sa;
	struct names *names = NULL, *nm;
	unsigned long every = 0;
	const char *name = NULL, *model;
	char line[MODEL_NAME_MAX + 40], err[160], *text;
	struct jr *r = NULL;
	struct conn k;
	size_t len;
	int ch, st, rc;

	while ((ch = ctl_getopt(c, argc, argv, "", lo, &st)) != -1) {
		if (ch != 'e')
			return ctl_usage_error(c->usage, NULL);
		if ((rc = query_count_arg(c, optarg, &every)) != 0)
			return rc;
	}
	if (st != 0)
		return ctl_done(st);
	if (argc - optind > 1)
		return ctl_usage_error(c->usage, "give at most one NAME");
	if (argc - optind == 1) {
		name = argv[optind];
		if (strcmp(name, "*") == 0)
			name = NULL;
		else if ((rc = ctl_model_arg(c, name)) != 0)
			return rc;
	}
	if ((rc = conn_open(&k, c)) != 0)
		return rc;
	if ((rc = prefetch(&k, name, &names)) != 0)
		goto done;
	snprintf(line, sizeof(line), ".watch %s", name != NULL ? name : "*");
	if (every > 0)
		snprintf(line + strlen(line), sizeof(line) - strlen(line),
		    " every=%lu", every);
	if ((rc = conn_send(&k, line)) != 0)
		goto done;
	/* The .get replies come first, then the one to .watch. */
	for (;;) {
		if ((rc = conn_reply(&k, &r)) != 0)
			goto done;
		if (conn_is_error(r) != NULL &&
		    jr_num(jr_find(r, "line")) == (double)k.line) {
			conn_print_error(r);
			rc = conn_error_exit(conn_is_error(r));
			goto done;
		}
		if (jr_str(jr_find(r, "ok")) != NULL &&
		    strcmp(jr_str(jr_find(r, "ok")), "watch") == 0)
			break;
		keep_names(names, r);
		r = NULL;
	}
	jr_free(r);
	r = NULL;

	memset(&sa, 0, sizeof(sa));
	sa.sa_handler = watch_sig;
	sigemptyset(&sa.sa_mask);
	sigaction(SIGINT, &sa, NULL);	/* no SA_RESTART: poll returns */
	sigaction(SIGTERM, &sa, NULL);
	k.timeout = 0;
	while (!watch_stop) {
		rc = conn_line(&k, &text, &len, -1);
		if (rc == 2)
			continue;
		if (rc <= 0) {
			if (rc == 0)
				ctl_err("%s closed the connection", k.where);
			rc = CTL_EXIT_UNREACHABLE;
			goto done;
		}
		if (jr_parse(text, len, &r, err, sizeof(err)) != 0) {
			ctl_err("unreadable line from %s: %s", k.where, err);
			rc = CTL_EXIT_PROTO;
			goto done;
		}
		model = jr_str(jr_find(r, "model"));
		if (jr_find(r, "event") == NULL) {
			/* A reply to one of our .get requests. */
			keep_names(names, r);
			r = NULL;
		} else if (c->json) {
			out_jr(r, NULL);
		} else if (strcmp(jr_str(jr_find(r, "event")) != NULL ?
		    jr_str(jr_find(r, "event")) : "", "alarm") == 0) {
			print_alarm(c, r);
		} else if (model != NULL) {
			nm = names_find(names, model);
			if (nm == NULL && (nm = names_add(&names, model)) !=
			    NULL && !nm->asked) {
				nm->asked = 1;
				snprintf(line, sizeof(line), ".get %s", model);
				if (conn_send(&k, line) != 0) {
					rc = CTL_EXIT_UNREACHABLE;
					goto done;
				}
			}
			print_update(r, nm);
		}
		fflush(stdout);
		jr_free(r);
		r = NULL;
	}
	rc = 0;
done:
	jr_free(r);
	names_free(names);
	conn_close(&k);
	return rc;
}
