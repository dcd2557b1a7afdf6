/* SPDX-License-Identifier: ISC */
/*
 * coefctl: the client. argv -> command table -> one handler -> exit code.
 * Data goes to stdout, diagnostics to stderr. `fit` works offline through
 * the engine library; the other subcommands speak the documented line
 * protocol (daemon/PROTOCOL.md), building each request line and checking it
 * with the daemon's own parser (proto.c) before it is sent.
 */
#include <locale.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "coefctl.h"
#include "proto.h"

#define COEFCTL_VERSION	"0.1.0"

struct ctl_cmd {
	const char	*name;
	int		(*fn)(struct ctl *, int, char **);
	const char	*args;		/* synopsis after the name */
	const char	*summary;
	const char	*help;		/* description and own options */
};

static int run_fit(struct ctl *c, int argc, char **argv);

/* One row per subcommand, in the order `coefctl --help` lists them. */
static const struct ctl_cmd ctl_cmds[] = {
	{ "list", cmd_list, "[--names]",
	  "models at a glance: n, R², sigma, alarms, state",
	  "  --names          print only the model names, one per line\n" },
	{ "show", cmd_show, "NAME",
	  "one model in full: coefficients, intervals, fit, detectors, "
	  "reference",
	  "" },
	{ "predict", cmd_predict, "NAME (FIELD=VALUE... | VALUE...)",
	  "calibrated value and prediction interval for given inputs",
	  "Values are named (raw=12.5 temp=20) or positional, in the model's\n"
	  "field order. Numbers use the protocol's grammar (no hex, no nan).\n" },
	{ "watch", cmd_watch, "[NAME] [--every N]",
	  "follow alarm transitions and updates until interrupted",
	  "  --every N        also show every Nth coefficient update\n"
	  "Alarm transitions are always shown. Stops on SIGINT or SIGTERM\n"
	  "(exit 0). --json prints one JSON object per event (NDJSON).\n" },
	{ "pin", cmd_pin, "NAME",
	  "pin the current coefficients as the reference to measure drift "
	  "from", "" },
	{ "freeze", cmd_freeze, "NAME",
	  "stop updating a model's fit (records are still monitored)", "" },
	{ "thaw", cmd_thaw, "NAME", "resume updating a frozen model", "" },
	{ "reset", cmd_reset, "[--yes] NAME",
	  "forget what a model has learnt",
	  "  -y, --yes        do not ask (needed when stdin is not a "
	  "terminal)\n" },
	{ "history", cmd_history, "[-n N] [--csv] NAME",
	  "the recent coefficient path as a table, CSV or JSON",
	  "  -n, --count N    the last N snapshots (default: all kept)\n"
	  "  --csv            comma-separated values with a header row\n" },
	{ "plot", cmd_plot,
	  "[-n N] [--svg FILE] [--width W] [--height H] [--ascii] NAME",
	  "chart of the coefficient path and rolling R² (terminal or SVG)",
	  "  -n, --count N    the last N snapshots (default: all kept)\n"
	  "  --svg FILE       write an SVG document to FILE (- for stdout)\n"
	  "  --width W        chart width in columns (terminal: its width,\n"
	  "                   else 80) or, with --svg, in pixels (800)\n"
	  "  --height H       rows per panel (6) or, with --svg, pixels (140)\n"
	  "  --ascii          plain ASCII instead of Unicode braille\n" },
	{ "feed", cmd_feed, "[--time COLUMN] [--quiet] NAME [FILE.csv | -]",
	  "stream CSV records to a model (columns matched by header name)",
	  "  --time COLUMN    record times (Unix seconds or RFC 3339)\n"
	  "  -q, --quiet      no progress bar, no notes on ignored columns\n"
	  "Reads standard input when FILE is absent or -. The header row\n"
	  "names the columns; every field of the model and its target must\n"
	  "be there, other columns are ignored. Exit 0 when every row was\n"
	  "accepted, 6 when any was rejected or could not be read.\n" },
	{ "stats", cmd_stats, "", "daemon counters", "" },
	{ "check", cmd_check, "[NAME...]",
	  "one line for monitoring: exit 0 clear, 1 alarm, 2 unknown",
	  "Checks the named models (default: all). Exit 0: no alarm; 1: an\n"
	  "alarm is active; 2: a named model does not exist or the daemon\n"
	  "cannot be reached.\n" },
	{ "save", cmd_save, "", "write the model snapshots now", "" },
	{ "reload", cmd_reload, "",
	  "re-read the configuration; exit 0 only if it was applied", "" },
	{ "fit", run_fit, "[OPTIONS] FILE.csv",
	  "fit a CSV file offline through the engine (no daemon)", "" },
};

#define NCMDS	(sizeof(ctl_cmds) / sizeof(ctl_cmds[0]))

static const char common_help[] =
"common options (before or after the command):\n"
"  -s, --socket S     the daemon: a Unix socket path, or HOST:PORT for TCP\n"
"                     (default: $" CTL_SOCKET_ENV ", else "
    CTL_DEFAULT_SOCKET ")\n"
"  --token-file FILE  send the token in FILE with .auth first\n"
"  --json             print JSON (one document; NDJSON for streams)\n"
"  --timeout D        wait at most D for a reply (default 30s)\n"
"  -h, --help         this help\n";

static const char exit_help[] =
"exit status: 0 ok, 1 alarm active (check), 2 usage (check: unknown),\n"
"3 daemon unreachable, 4 protocol error or refused, 5 no such model,\n"
"6 unusable input\n";

static int
run_fit(struct ctl *c, int argc, char **argv)
{
	(void)c;
	return cmd_fit(argc, argv);
}

/* ctl_err: "coefctl: message" on stderr. */
void
ctl_err(const char *fmt, ...)
{
	va_list ap;

	fflush(stdout);
	fputs("coefctl: ", stderr);
	va_start(ap, fmt);
	vfprintf(stderr, fmt, ap);
	va_end(ap);
	fputc('\n', stderr);
}

/* ctl_warn: "coefctl: warning: message" on stderr. */
void
ctl_warn(const char *fmt, ...)
{
	va_list ap;

	fflush(stdout);
	fputs("coefctl: warning: ", stderr);
	va_start(ap, fmt);
	vfprintf(stderr, fmt, ap);
	va_end(ap);
	fputc('\n', stderr);
}

/* ctl_usage_error: message and usage on stderr; CTL_EXIT_USAGE. */
int
ctl_usage_error(const char *usage, const char *msg)
{
	if (msg != NULL)
		ctl_err("%s", msg);
	fputs(usage, stderr);
	return CTL_EXIT_USAGE;
}

/* ctl_number: the protocol's strict decimal grammar, finite values only. */
int
ctl_number(const char *s, double *out)
{
	return proto_parse_number(s, strlen(s), out) == 0 ? 0 : -1;
}

/*
 * ctl_duration: a positive number with an optional unit s, m, h, d or w
 * (seconds if none) to seconds. Returns 0, or -1 for anything else.
 */
int
ctl_duration(const char *s, double *out)
{
	size_t len = strlen(s);
	double mult = 1, v;

	if (len == 0)
		return -1;
	switch (s[len - 1]) {
	case 's': mult = 1; len--; break;
	case 'm': mult = 60; len--; break;
	case 'h': mult = 3600; len--; break;
	case 'd': mult = 86400; len--; break;
	case 'w': mult = 604800; len--; break;
	default: break;
	}
	if (proto_parse_number(s, len, &v) != 0 || !(v > 0) ||
	    !isfinite(v * mult))
		return -1;
	*out = v * mult;
	return 0;
}

/*
 * ctl_common_opt: apply one of the options every subcommand takes. Returns
 * 0 when ch was one (applied), 1 when it is not a common option, -1 after
 * printing the help for --help, or CTL_EXIT_USAGE after printing why.
 */
int
ctl_common_opt(struct ctl *c, int ch, const char *arg)
{
	switch (ch) {
	case CTL_OPT_SOCKET:
		if (arg[0] == '\0')
			return ctl_usage_error(c->usage, "-s needs a socket "
			    "path or HOST:PORT");
		c->socket = arg;
		c->socket_from = "-s";
		return 0;
	case CTL_OPT_TOKEN:
		c->token_file = arg;
		return 0;
	case CTL_OPT_JSON:
		c->json = 1;
		return 0;
	case CTL_OPT_TIMEOUT:
		if (ctl_duration(arg, &c->timeout) != 0)
			return ctl_usage_error(c->usage, "--timeout must be a "
			    "duration like 5, 5s, 2m");
		return 0;
	case CTL_OPT_HELP:
		fputs(c->usage, stdout);
		return -1;
	default:
		return 1;
	}
}

/*
 * ctl_getopt: getopt_long over argv with the common options and the
 * subcommand's own (shortopts, longopts; longopts must include
 * CTL_COMMON_LONGOPTS). A shortopts starting with '+' stops at the first
 * operand (for commands whose operands may look like options, such as
 * negative numbers). Returns the next subcommand option character, or -1
 * at the end with *status 0, or -1 after --help (*status -1) or a usage
 * error (*status CTL_EXIT_USAGE, printed).
 */
int
ctl_getopt(struct ctl *c, int argc, char **argv, const char *shortopts,
    const struct option *longopts, int *status)
{
	char opts[64];
	int ch, rc;

	snprintf(opts, sizeof(opts), "%ss:h%s",
	    shortopts[0] == '+' ? "+" : "",
	    shortopts + (shortopts[0] == '+'));
	*status = 0;
	for (;;) {
		ch = getopt_long(argc, argv, opts, longopts, NULL);
		if (ch == -1)
			return -1;
		if (ch == '?' || ch == ':') {
			*status = ctl_usage_error(c->usage, NULL);
			return -1;
		}
		rc = ctl_common_opt(c, ch, optarg);
		if (rc == 1)
			return ch;
		if (rc != 0) {
			*status = rc;
			return -1;
		}
	}
}

/* ctl_done: the exit status for ctl_getopt's *status (help: 0). */
int
ctl_done(int status)
{
	return status < 0 ? 0 : status;
}

/* ctl_model_arg: 0 when name is a valid model name, else a usage error. */
int
ctl_model_arg(struct ctl *c, const char *name)
{
	char msg[160];

	if (proto_check_model_name(name, strlen(name)) == 0)
		return 0;
	snprintf(msg, sizeof(msg), "'%.64s' is not a model name (1-64 of "
	    "A-Z a-z 0-9 _ . -, starting with a letter or digit)", name);
	return ctl_usage_error(c->usage, msg);
}

static void
usage(FILE *fp)
{
	size_t i;

	fprintf(fp, "usage: coefctl [-s SOCKET] [--json] COMMAND [ARGS]\n"
	    "       coefctl --version | --help\n\ncommands:\n");
	for (i = 0; i < NCMDS; i++)
		fprintf(fp, "  %-8s %s\n", ctl_cmds[i].name,
		    ctl_cmds[i].summary);
	fprintf(fp, "\n%s\n'coefctl COMMAND --help' describes one command; "
	    "coefctl(1) has the details.\n%s", common_help, exit_help);
}

static int
is_utf8_locale(void)
{
	const char *v = getenv("LC_ALL");

	if (v == NULL || *v == '\0')
		v = getenv("LC_CTYPE");
	if (v == NULL || *v == '\0')
		v = getenv("LANG");
	return v != NULL && (strstr(v, "UTF-8") != NULL ||
	    strstr(v, "utf8") != NULL || strstr(v, "UTF8") != NULL ||
	    strstr(v, "utf-8") != NULL);
}

int
main(int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "version", no_argument, NULL, 'V' },
		{ NULL, 0, NULL, 0 }
	};
	char ubuf[4096];
	const struct ctl_cmd *cmd = NULL;
	const char *nc;
	struct ctl c;
	size_t i;
	int ch, rc;

	/* Matrices are small: OpenBLAS must not start worker threads. It
	 * reads the variable when the library loads, so re-execute once. */
	if (getenv("OPENBLAS_NUM_THREADS") == NULL &&
	    setenv("OPENBLAS_NUM_THREADS", "1", 1) == 0)
		execv("/proc/self/exe", argv);
	/* Numbers are read and written in the "C" locale (the protocol's
	 * grammar); LC_NUMERIC is never set. */
	signal(SIGPIPE, SIG_IGN);

	memset(&c, 0, sizeof(c));
	c.timeout = CTL_TIMEOUT_DEFAULT;
	c.out_tty = isatty(STDOUT_FILENO);
	c.err_tty = isatty(STDERR_FILENO);
	nc = getenv("NO_COLOR");
	c.colour = c.out_tty && (nc == NULL || nc[0] == '\0') &&
	    (getenv("TERM") == NULL || strcmp(getenv("TERM"), "dumb") != 0);
	c.utf8 = is_utf8_locale();
	snprintf(ubuf, sizeof(ubuf), "usage: coefctl [-s SOCKET] [--json] "
	    "COMMAND [ARGS]\n");
	c.usage = ubuf;

	while ((ch = getopt_long(argc, argv, "+s:hV", lo, NULL)) != -1) {
		if (ch == 'V') {
			printf("coefctl %s (protocol %d)\n", COEFCTL_VERSION,
			    PROTO_VERSION);
			return 0;
		}
		if (ch == CTL_OPT_HELP) {
			usage(stdout);
			return 0;
		}
		if (ch == '?') {
			usage(stderr);
			return CTL_EXIT_USAGE;
		}
		if ((rc = ctl_common_opt(&c, ch, optarg)) != 0)
			return ctl_done(rc);
	}
	if (optind >= argc) {
		usage(stderr);
		return CTL_EXIT_USAGE;
	}
	for (i = 0; i < NCMDS; i++)
		if (strcmp(argv[optind], ctl_cmds[i].name) == 0)
			cmd = &ctl_cmds[i];
	if (cmd == NULL) {
		ctl_err("unknown command '%s'", argv[optind]);
		usage(stderr);
		return CTL_EXIT_USAGE;
	}
	c.cmd = cmd->name;
	snprintf(ubuf, sizeof(ubuf), "usage: coefctl %s [OPTIONS] %s\n  %s\n"
	    "%s%s\n%s", cmd->name, cmd->args, cmd->summary,
	    cmd->help[0] ? "\n" : "", cmd->help, common_help);
	/* Restart getopt (optind 0: a full re-initialisation in glibc) for
	 * the subcommand's own argument vector. */
	i = (size_t)optind;
	optind = 0;
	return cmd->fn(&c, argc - (int)i, argv + i);
}
