/* SPDX-License-Identifier: ISC */
/*
 * admin: the subcommands that change the daemon's state: pin, freeze,
 * thaw, reset (which asks first on a terminal), save and reload (which
 * waits for the daemon's verdict, for systemd's ExecReload). The daemon
 * allows these on its Unix socket, or over TCP only when configured.
 */
#include <ctype.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "coefctl.h"
#include "limits.h"

/* Common options, then exactly one NAME (need_name) or none. */
static int
admin_args(struct ctl *c, int argc, char **argv, int need_name,
    const char **name, int *yes)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "yes", no_argument, NULL, 'y' },
		{ NULL, 0, NULL, 0 }
	};
	int ch, st;

	while ((ch = ctl_getopt(c, argc, argv, yes != NULL ? "y" : "", lo,
	    &st)) != -1) {
		if (ch != 'y' || yes == NULL)
			return ctl_usage_error(c->usage, NULL);
		*yes = 1;
	}
	if (st != 0)
		return st;
	if (!need_name) {
		if (argc != optind)
			return ctl_usage_error(c->usage, "no operands expected");
		return 0;
	}
	if (argc - optind != 1)
		return ctl_usage_error(c->usage, "give one model NAME");
	*name = argv[optind];
	return ctl_model_arg(c, *name);
}

/* Send "WORD NAME" and print the outcome (text, or the reply as JSON). */
static int
simple(struct ctl *c, int argc, char **argv, const char *word,
    const char *done)
{
	char line[MODEL_NAME_MAX + 16];
	const char *name = NULL;
	struct jr *r = NULL;
	int rc;

	if ((rc = admin_args(c, argc, argv, 1, &name, NULL)) != 0)
		return ctl_done(rc);
	snprintf(line, sizeof(line), "%s %s", word, name);
	if ((rc = conn_ask(c, line, &r)) != 0)
		return rc;
	if (c->json)
		rc = out_jr(r, "line");
	else
		printf("%s: %s\n", name, done);
	jr_free(r);
	return rc;
}

/* cmd_pin: `coefctl pin NAME`: the current coefficients become the
 * reference drift is measured from. */
int
cmd_pin(struct ctl *c, int argc, char **argv)
{
	return simple(c, argc, argv, ".pin", "pinned the current coefficients "
	    "as the reference");
}

/* cmd_freeze: `coefctl freeze NAME`: stop updating the fit; records are
 * still counted and monitored (the daemon accepts them). */
int
cmd_freeze(struct ctl *c, int argc, char **argv)
{
	return simple(c, argc, argv, ".freeze", "frozen: its records are "
	    "still checked by the detectors but no longer change the fit");
}

/* cmd_thaw: `coefctl thaw NAME`: resume updating a frozen model. */
int
cmd_thaw(struct ctl *c, int argc, char **argv)
{
	return simple(c, argc, argv, ".thaw", "updating again");
}

/* Ask on the terminal; 1 for y/yes. */
static int
confirm(const char *name, const struct jr *model)
{
	char *ans = NULL, n[40];
	size_t cap = 0;
	ssize_t len;
	int yes;

	fprintf(stderr, "Reset %s and forget what it has learnt from %s "
	    "records? [y/N] ", name, out_num(n, sizeof(n),
	    jr_num(jr_find(model, "n")), 20));
	fflush(stderr);
	if ((len = getline(&ans, &cap, stdin)) < 0) {
		free(ans);
		fputc('\n', stderr);
		return 0;
	}
	while (len > 0 && isspace((unsigned char)ans[len - 1]))
		ans[--len] = '\0';
	yes = strcasecmp(ans, "y") == 0 || strcasecmp(ans, "yes") == 0;
	free(ans);
	return yes;
}

/*
 * cmd_reset: `coefctl reset [--yes] NAME`: the model starts afresh from
 * the configuration. Without --yes it asks on the terminal, and refuses
 * (usage error) when standard input is not one.
 */
int
cmd_reset(struct ctl *c, int argc, char **argv)
{
	char line[MODEL_NAME_MAX + 16];
	const char *name = NULL;
	struct jr *r = NULL;
	struct conn k;
	int rc, yes = 0;

	if ((rc = admin_args(c, argc, argv, 1, &name, &yes)) != 0)
		return ctl_done(rc);
	if (!yes && !isatty(STDIN_FILENO)) {
		ctl_err("reset forgets everything the model has learnt; "
		    "without a terminal to ask on, add --yes");
		return CTL_EXIT_USAGE;
	}
	if ((rc = conn_open(&k, c)) != 0)
		return rc;
	if (!yes) {
		snprintf(line, sizeof(line), ".get %s", name);
		if ((rc = conn_request(&k, line, &r)) != 0)
			goto done;
		if (!confirm(name, r)) {
			ctl_err("%s: not reset", name);
			goto done;
		}
		jr_free(r);
		r = NULL;
	}
	snprintf(line, sizeof(line), ".reset %s", name);
	if ((rc = conn_request(&k, line, &r)) != 0)
		goto done;
	if (c->json)
		rc = out_jr(r, "line");
	else
		printf("%s: reset%s; it learns again from its next record\n",
		    name, jr_true(jr_find(r, "rebuilt")) ?
		    " with its changed configuration" : "");
done:
	jr_free(r);
	conn_close(&k);
	return rc;
}

/* cmd_save: `coefctl save`: the daemon writes every model's snapshot. */
int
cmd_save(struct ctl *c, int argc, char **argv)
{
	struct jr *r = NULL;
	int rc;

	if ((rc = admin_args(c, argc, argv, 0, NULL, NULL)) != 0)
		return ctl_done(rc);
	if ((rc = conn_ask(c, ".save", &r)) != 0)
		return rc;
	if (c->json)
		rc = out_jr(r, "line");
	else
		printf("saved every model\n");
	jr_free(r);
	return rc;
}

/*
 * cmd_reload: `coefctl reload`: .reload, and wait for the answer. Exit 0
 * only when the daemon applied the new configuration; otherwise its error
 * (a file:line message for a bad configuration) is printed and the status
 * is 4 (3 when it cannot be reached).
 */
int
cmd_reload(struct ctl *c, int argc, char **argv)
{
	struct jr *r = NULL;
	char a[24], b[24], d[24];
	int rc;

	if ((rc = admin_args(c, argc, argv, 0, NULL, NULL)) != 0)
		return ctl_done(rc);
	if ((rc = conn_ask(c, ".reload", &r)) != 0) {
		if (rc != CTL_EXIT_UNREACHABLE)
			ctl_err("the configuration was not reloaded; the "
			    "daemon keeps the one it runs");
		return rc;
	}
	if (c->json) {
		rc = out_jr(r, "line");
	} else {
		printf("configuration reloaded: %s models kept, %s stale, %s "
		    "without a section\n",
		    out_num(a, sizeof(a), jr_num(jr_find(r, "kept")), 20),
		    out_num(b, sizeof(b), jr_num(jr_find(r, "stale")), 20),
		    out_num(d, sizeof(d), jr_num(jr_find(r, "orphan")), 20));
		if (jr_num(jr_find(r, "stale")) > 0)
			ctl_warn("a stale model keeps its old terms until "
			    "'coefctl reset NAME'");
	}
	jr_free(r);
	return rc;
}
