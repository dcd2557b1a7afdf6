/* SPDX-License-Identifier: ISC */
/*
 * proto: the coefd line protocol, version 1 (daemon/PROTOCOL.md). An
 * incremental reader turns bytes into one parsed message or one precise
 * error at a time; helpers format error replies as JSON. It does not know
 * models, execute commands, or do I/O; the registry and net layers do.
 *
 * Changing the grammar, a command, or a reason string changes what scripts
 * see: bump PROTO_VERSION and update PROTOCOL.md in the same commit.
 */
#ifndef COEFD_PROTO_H
#define COEFD_PROTO_H

#include <stddef.h>
#include <stdint.h>

#include "json.h"
#include "limits.h"

#define PROTO_VERSION	1

/* Results of proto_next / proto_finish. */
enum proto_status {
	PROTO_NEED_MORE = 0,	/* all input consumed, no complete line */
	PROTO_MSG = 1,		/* *msg holds a parsed line */
	PROTO_ERROR = 2		/* *msg holds line, reason and detail */
};

enum proto_kind {
	PROTO_EMPTY = 0,	/* blank line or comment: nothing to do */
	PROTO_RECORD,		/* a sample for a model */
	PROTO_PREDICT,		/* record with target `?`, or .predict */
	PROTO_COMMAND		/* any other `.word` line */
};

enum proto_cmd {
	PROTO_CMD_NONE = 0,	/* not a command line */
	PROTO_CMD_SYNC,
	PROTO_CMD_LIST,
	PROTO_CMD_GET,
	PROTO_CMD_PREDICT,
	PROTO_CMD_PIN,
	PROTO_CMD_FREEZE,
	PROTO_CMD_THAW,
	PROTO_CMD_RESET,
	PROTO_CMD_HISTORY,
	PROTO_CMD_STATS,
	PROTO_CMD_WATCH,
	PROTO_CMD_SAVE,
	PROTO_CMD_RELOAD,
	PROTO_CMD_AUTH,
	PROTO_CMD_VERSION,
	PROTO_CMD_BYE,
	PROTO_CMD_OPEN,
	PROTO_NCMDS
};

/* Command flags (struct proto_cmd_info.flags). */
#define PROTO_CMD_ADMIN		0x01	/* changes state: needs an admin peer */
#define PROTO_CMD_NAME		0x02	/* first argument is a model name */
#define PROTO_CMD_VALUES	0x04	/* arguments after NAME are VALUES */
#define PROTO_CMD_SECRET	0x08	/* arguments must never be echoed or logged */

/* One row of the command table. max < 0: no upper bound on arguments. */
struct proto_cmd_info {
	const char	*name;		/* with its dot, e.g. ".get" */
	enum proto_cmd	 cmd;
	int		 min_args;
	int		 max_args;
	int		 flags;
};

/*
 * Why a line or a request was rejected. Values are 0..PROTO_NREASONS-1 so
 * callers can keep counters in an array; the strings are stable wire text.
 * Add new reasons before PROTO_NREASONS only, and update proto_reason_str.
 */
enum proto_reason {
	/* Raised by the reader/parser. */
	PROTO_R_LINE_TOO_LONG = 0,
	PROTO_R_NUL_BYTE,
	PROTO_R_BAD_UTF8,
	PROTO_R_BAD_MODEL_NAME,
	PROTO_R_BAD_TIME,
	PROTO_R_NOT_A_NUMBER,
	PROTO_R_NON_FINITE,
	PROTO_R_NO_VALUES,
	PROTO_R_TOO_MANY_VALUES,
	PROTO_R_MIXED_FORMS,
	PROTO_R_BAD_FIELD_NAME,
	PROTO_R_DUPLICATE_FIELD,
	PROTO_R_UNKNOWN_COMMAND,
	PROTO_R_BAD_ARGUMENTS,
	/* Raised later by the registry and network layers. */
	PROTO_R_UNKNOWN_MODEL,
	PROTO_R_WRONG_COUNT,
	PROTO_R_UNKNOWN_FIELD,
	PROTO_R_MISSING_FIELD,
	PROTO_R_TERM_NON_FINITE,
	PROTO_R_MODEL_LIMIT,
	PROTO_R_CONNECTION_LIMIT,
	PROTO_R_DENIED,
	PROTO_R_AUTH_REQUIRED,
	PROTO_R_FROZEN,
	PROTO_R_BUSY,
	PROTO_R_INTERNAL,
	PROTO_R_NOT_READY,
	PROTO_NREASONS
};

/* A string inside the line: ptr[0..len), not NUL-terminated. */
struct proto_str {
	const char	*ptr;
	size_t		 len;
};

/* One VALUES entry. name.len == 0 (name.ptr NULL) in positional form. */
struct proto_value {
	struct proto_str name;
	double		 v;
};

/*
 * One parsed line. The caller owns the struct (it is about 6.5 KiB: keep
 * one per connection, do not put it on a small stack). Every pointer
 * points into the caller's input buffer or the reader's own buffer and is
 * valid until the next proto_next, proto_finish or proto_reader_reset on
 * the same reader, and only while the caller's buffer is unchanged.
 * Fields not listed for a kind are unspecified.
 *
 * Always set:
 *   kind      see enum proto_kind (PROTO_EMPTY on PROTO_ERROR).
 *   line      the line's number on this reader, from 1; every line counts,
 *             empty and rejected ones included.
 *   reason    on PROTO_ERROR: why; otherwise PROTO_NREASONS.
 *   detail    on PROTO_ERROR: one line of English naming the offending
 *             token in double quotes (shortened to fit, never split inside
 *             a UTF-8 character; never quoting an .auth token); otherwise
 *             "". Always NUL-terminated.
 *   cmd       the command, PROTO_CMD_NONE for a record line; on
 *             PROTO_ERROR set when the command word itself was known.
 *   model     the model name; for a record, .predict and commands taking a
 *             NAME. {NULL, 0} when there is none (and for `.watch *`). On
 *             PROTO_ERROR it is set if the name was read and valid before
 *             the error, so rejections can be counted per model.
 * PROTO_RECORD / PROTO_PREDICT:
 *   has_time, time   1 and seconds since 1970-01-01T00:00:00Z when `@TIME`
 *             was given (records only), else 0 and 0.0.
 *   has_target, target   positional record with a numeric target: 1 and
 *             the target; positional `?` target, .predict and every named
 *             line: 0 and 0.0 (named lines carry the target among values[];
 *             the registry knows which field it is).
 *   named     1 for NAME=VALUE form, 0 for positional.
 *   nvalues, values[]   positional: the regressors X1..Xk in order (the
 *             target is not among them); named: every pair in line order.
 *             Every v is finite.
 * PROTO_COMMAND / PROTO_PREDICT from `.predict`:
 *   nargs, args[]   the argument tokens as written, at most PROTO_MAX_ARGS;
 *             for .predict only NAME (args[0]); its VALUES are in values[].
 *   count     `.history NAME N`: N; 0 when N is absent.
 *   every     `.watch ... every=N`: N; 0 when absent.
 */
struct proto_msg {
	enum proto_kind	 kind;
	uint64_t	 line;
	enum proto_cmd	 cmd;
	struct proto_str model;
	int		 has_time;
	double		 time;
	int		 has_target;
	double		 target;
	int		 named;
	size_t		 nargs;
	struct proto_str args[PROTO_MAX_ARGS];
	uint32_t	 count;
	uint32_t	 every;
	enum proto_reason reason;
	char		 detail[PROTO_DETAIL_MAX];
	size_t		 nvalues;
	struct proto_value values[PROTO_MAX_VALUES];
};

struct proto_reader;

/* Reader lifetime. */
struct proto_reader *proto_reader_new(size_t maxline);
void	proto_reader_free(struct proto_reader *rd);
void	proto_reader_reset(struct proto_reader *rd);

/* Feed bytes; at most one line is completed per call. */
int	proto_next(struct proto_reader *rd, const char *buf, size_t len,
	    size_t *used, struct proto_msg *msg);
/* At end of input: parse a final line that had no LF. */
int	proto_finish(struct proto_reader *rd, struct proto_msg *msg);

/* Parse one complete line (no LF) without a reader. */
int	proto_parse_line(const char *line, size_t len, uint64_t lineno,
	    struct proto_msg *msg);

/* Pieces of the grammar, for the registry, config and client. */
int	proto_parse_number(const char *s, size_t len, double *out);
int	proto_parse_time(const char *s, size_t len, double *out);
int	proto_check_model_name(const char *s, size_t len);
int	proto_check_field_name(const char *s, size_t len);

/* Tables. */
const char *proto_reason_str(enum proto_reason r);
const struct proto_cmd_info *proto_cmd_info(enum proto_cmd cmd);
const struct proto_cmd_info *proto_cmd_find(const char *word, size_t len);

/* Replies. */
int	proto_format_error(struct json *j, uint64_t line, enum proto_reason r,
	    const char *detail);

#endif
