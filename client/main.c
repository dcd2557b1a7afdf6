/* SPDX-License-Identifier: ISC */
/*
 * coefctl: the client. argv -> command table -> one handler -> exit code.
 * Data goes to stdout, diagnostics to stderr. `fit` works offline through
 * the engine library; the daemon subcommands speak the documented line
 * protocol (daemon/PROTOCOL.md).
 */
#include <math.h>
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
	int		(*fn)(int, char **);
	const char	*summary;
};

static const struct ctl_cmd ctl_cmds[] = {
	{ "fit", cmd_fit, "fit a CSV file offline through the engine" },
};

/* ctl_err: "coefctl: message" on stderr. */
void
ctl_err(const char *fmt, ...)
{
	va_list ap;

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

static void
usage(FILE *fp)
{
	size_t i;

	fprintf(fp, "usage: coefctl [--version] [--help] COMMAND [ARGS]\n\n"
	    "commands:\n");
	for (i = 0; i < sizeof(ctl_cmds) / sizeof(ctl_cmds[0]); i++)
		fprintf(fp, "  %-10s %s\n", ctl_cmds[i].name,
		    ctl_cmds[i].summary);
	fprintf(fp, "\n'coefctl COMMAND --help' describes one command.\n"
	    "exit status: 0 ok, 1 alarm active (check), 2 usage, 3 daemon "
	    "unreachable,\n4 protocol error or refused, 5 no such model, "
	    "6 unusable input\n");
}

int
main(int argc, char **argv)
{
	size_t i;

	/* Matrices are small: OpenBLAS must not start worker threads. It
	 * reads the variable when the library loads, so re-execute once. */
	if (getenv("OPENBLAS_NUM_THREADS") == NULL &&
	    setenv("OPENBLAS_NUM_THREADS", "1", 1) == 0)
		execv("/proc/self/exe", argv);
	if (argc < 2) {
		usage(stderr);
		return CTL_EXIT_USAGE;
	}
	if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0) {
		usage(stdout);
		return 0;
	}
	if (strcmp(argv[1], "--version") == 0) {
		printf("coefctl %s (protocol %d)\n", COEFCTL_VERSION,
		    PROTO_VERSION);
		return 0;
	}
	for (i = 0; i < sizeof(ctl_cmds) / sizeof(ctl_cmds[0]); i++)
		if (strcmp(argv[1], ctl_cmds[i].name) == 0)
			return ctl_cmds[i].fn(argc - 1, argv + 1);
	ctl_err("unknown command '%s'", argv[1]);
	usage(stderr);
	return CTL_EXIT_USAGE;
}
