/* SPDX-License-Identifier: ISC */
/*
 * coefctl: shared declarations of the client: exit codes, the options every
 * subcommand takes, the connection to the daemon, output helpers and the
 * subcommand entry points.
 */
#ifndef COEFCTL_H
#define COEFCTL_H

#include <getopt.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "jread.h"
#include "json.h"

/* Exit codes (documented in coefctl --help and coefctl(1)). */
#define CTL_EXIT_OK		0
#define CTL_EXIT_ALARM		1	/* check: an alarm is active */
#define CTL_EXIT_USAGE		2	/* bad command line */
#define CTL_EXIT_UNREACHABLE	3	/* daemon not reachable */
#define CTL_EXIT_PROTO		4	/* protocol error / refused */
#define CTL_EXIT_NOTFOUND	5	/* no such model */
#define CTL_EXIT_DATA		6	/* unreadable or unusable input */
/* check only: 2 means "unknown" (no such model, daemon unreachable). */
#define CTL_EXIT_CHECK_UNKNOWN	2

#define CTL_DEFAULT_SOCKET	"/run/coefd/coefd.sock"
#define CTL_SOCKET_ENV		"COEFD_SOCKET"
#define CTL_TIMEOUT_DEFAULT	30.0	/* seconds to wait for a reply */

/* Options every subcommand accepts (before or after its name). */
struct ctl {
	const char	*socket;	/* -s: path or host:port */
	const char	*socket_from;	/* "-s", CTL_SOCKET_ENV or "default" */
	const char	*token_file;	/* --token-file */
	double		 timeout;	/* --timeout, seconds */
	int		 json;		/* --json */
	int		 out_tty;	/* stdout is a terminal */
	int		 err_tty;	/* stderr is a terminal */
	int		 colour;	/* stdout tty, NO_COLOR unset, not dumb */
	int		 utf8;		/* the locale's character set is UTF-8 */
	const char	*cmd;		/* subcommand name */
	const char	*usage;		/* its usage text */
};

/* Long options shared by every subcommand; their getopt codes. */
#define CTL_OPT_SOCKET		's'
#define CTL_OPT_TOKEN		1001
#define CTL_OPT_JSON		1002
#define CTL_OPT_TIMEOUT		1003
#define CTL_OPT_HELP		'h'
#define CTL_COMMON_LONGOPTS \
	{ "socket", required_argument, NULL, CTL_OPT_SOCKET }, \
	{ "token-file", required_argument, NULL, CTL_OPT_TOKEN }, \
	{ "json", no_argument, NULL, CTL_OPT_JSON }, \
	{ "timeout", required_argument, NULL, CTL_OPT_TIMEOUT }, \
	{ "help", no_argument, NULL, CTL_OPT_HELP }

/* Diagnostics to stderr, prefixed "coefctl: ". */
void	ctl_err(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	ctl_warn(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
/* Print msg (if any) and the usage text to stderr; returns CTL_EXIT_USAGE. */
int	ctl_usage_error(const char *usage, const char *msg);
/* Strict decimal number (the protocol's grammar); 0 or -1. */
int	ctl_number(const char *s, double *out);
/* Duration "90", "90s", "15m", "6h", "7d", "2w" to seconds > 0; 0 or -1. */
int	ctl_duration(const char *s, double *out);
/* A common option: 0 handled, 1 not common, -1 --help printed, or an
 * exit status > 0 (usage error). */
int	ctl_common_opt(struct ctl *c, int ch, const char *arg);
/* getopt_long over the common options plus the subcommand's; returns the
 * next subcommand option, or -1 with *status 0 (done), -1 (--help printed)
 * or CTL_EXIT_USAGE (printed). */
int	ctl_getopt(struct ctl *c, int argc, char **argv, const char *shortopts,
	    const struct option *longopts, int *status);
/* ctl_done: the exit status for a ctl_getopt *status. */
int	ctl_done(int status);
/* Check that a model name has the protocol's form; 0 or usage error. */
int	ctl_model_arg(struct ctl *c, const char *name);

/* A connection to the daemon (conn.c). */
struct proto_msg;
struct conn {
	int		 fd;
	int		 tcp;
	char		 where[300];	/* for messages */
	char		*buf;		/* received bytes not yet returned */
	size_t		 len, cap, off, scan;
	uint64_t	 line;		/* lines sent on this connection */
	double		 timeout;	/* seconds; <= 0: wait for ever */
	struct proto_msg *msg;		/* for conn_check */
};

/* conn_open: connect as c says (and send .auth); 0 or an exit status,
 * with the reason already printed. */
int	conn_open(struct conn *k, const struct ctl *c);
/* conn_close: close and free; safe on a closed or zeroed conn. */
void	conn_close(struct conn *k);
/* conn_write: all of buf[0..len); 0, or -1 with the error printed. */
int	conn_write(struct conn *k, const char *buf, size_t len);
/* conn_check: 0 when line parses, else reason + 1 and the detail. */
int	conn_check(struct conn *k, const char *line, size_t len, char *detail,
	    size_t dlen);
/* conn_send: one request line (no LF) checked by the protocol parser. */
int	conn_send(struct conn *k, const char *line);
/* conn_line: next reply line (NUL-terminated, valid until the next call);
 * 1 line, 0 end of stream, -1 error or timeout (printed); wait_ms < 0
 * uses k->timeout, 0 does not block. */
int	conn_line(struct conn *k, char **line, size_t *len, int wait_ms);
/* conn_reply: the next reply line parsed; 0, or an exit status. */
int	conn_reply(struct conn *k, struct jr **out);
/* conn_request: send line, read its reply; a daemon error is printed and
 * mapped to an exit status (unknown_model 5, others 4). */
int	conn_request(struct conn *k, const char *line, struct jr **out);
/* conn_ask: open, one request, close; 0 with *out, or an exit status. */
int	conn_ask(const struct ctl *c, const char *line, struct jr **out);
/* conn_error_exit: exit status for an error reply's reason. */
int	conn_error_exit(const char *reason);
/* conn_is_error: the reply's "error" string, or NULL. */
const char *conn_is_error(const struct jr *reply);
/* conn_print_error: an error reply's detail and reason on stderr. */
void	conn_print_error(const struct jr *reply);

/* Output (out.c). */
enum out_style { OUT_PLAIN = 0, OUT_BAD, OUT_WARN, OUT_GOOD, OUT_BOLD };
struct out_table;
struct out_table *out_table_new(int ncol, const char *const *head,
	    const char *align);
void	out_table_free(struct out_table *t);
int	out_table_add(struct out_table *t, const char *const *cells,
	    const enum out_style *style);
void	out_table_print(const struct ctl *c, const struct out_table *t,
	    FILE *fp);
/* out_num: %.*g of v, or "-" when v is not finite (JSON null). */
const char *out_num(char *buf, size_t len, double v, int digits);
/* out_style_on / off: colour escape for s when c->colour, else "". */
const char *out_style_on(const struct ctl *c, enum out_style s);
const char *out_style_off(const struct ctl *c, enum out_style s);
/* out_jr: write v as one JSON line to stdout, without member omit. */
int	out_jr(const struct jr *v, const char *omit);
/* out_json_new / out_json_print: a large writer buffer; print + LF. */
int	out_json_new(struct json *j, size_t cap);
int	out_json_print(struct json *j);
/* out_term_width: columns of the terminal on fd, or 80. */
int	out_term_width(int fd);

/* Shared by history and plot (query.c). */
int	query_count_arg(struct ctl *c, const char *arg, unsigned long *n);
int	query_history(struct ctl *c, const char *name, unsigned long n,
	    struct jr **out);

/* Subcommands. */
int	cmd_fit(int argc, char **argv);
int	cmd_list(struct ctl *c, int argc, char **argv);
int	cmd_show(struct ctl *c, int argc, char **argv);
int	cmd_predict(struct ctl *c, int argc, char **argv);
int	cmd_history(struct ctl *c, int argc, char **argv);
int	cmd_stats(struct ctl *c, int argc, char **argv);
int	cmd_check(struct ctl *c, int argc, char **argv);
int	cmd_pin(struct ctl *c, int argc, char **argv);
int	cmd_freeze(struct ctl *c, int argc, char **argv);
int	cmd_thaw(struct ctl *c, int argc, char **argv);
int	cmd_reset(struct ctl *c, int argc, char **argv);
int	cmd_save(struct ctl *c, int argc, char **argv);
int	cmd_reload(struct ctl *c, int argc, char **argv);
int	cmd_watch(struct ctl *c, int argc, char **argv);
int	cmd_feed(struct ctl *c, int argc, char **argv);
int	cmd_plot(struct ctl *c, int argc, char **argv);

#endif
