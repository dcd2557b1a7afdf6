/* SPDX-License-Identifier: ISC */
/*
 * coefctl: shared declarations of the client: exit codes, diagnostics and
 * the subcommand entry points.
 */
#ifndef COEFCTL_H
#define COEFCTL_H

/* Exit codes (documented in coefctl --help and README.md). */
#define CTL_EXIT_OK		0
#define CTL_EXIT_ALARM		1	/* check: an alarm is active */
#define CTL_EXIT_USAGE		2	/* bad command line */
#define CTL_EXIT_UNREACHABLE	3	/* daemon not reachable */
#define CTL_EXIT_PROTO		4	/* protocol error / refused */
#define CTL_EXIT_NOTFOUND	5	/* no such model */
#define CTL_EXIT_DATA		6	/* unreadable or unusable input */

/* Diagnostics to stderr, prefixed "coefctl: ". */
void	ctl_err(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	ctl_warn(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
/* Print msg (if any) and the usage text to stderr; returns CTL_EXIT_USAGE. */
int	ctl_usage_error(const char *usage, const char *msg);
/* Strict decimal number (the protocol's grammar); 0 or -1. */
int	ctl_number(const char *s, double *out);
/* Duration "90", "90s", "15m", "6h", "7d", "2w" to seconds > 0; 0 or -1. */
int	ctl_duration(const char *s, double *out);

int	cmd_fit(int argc, char **argv);

#endif
