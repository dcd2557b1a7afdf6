/* SPDX-License-Identifier: ISC */
/*
 * json: a small streaming JSON writer (RFC 8259) over a caller-provided
 * buffer, used for every reply. It inserts commas itself and never writes
 * past the buffer: running out of room sets a sticky overflow flag. It does
 * not allocate, parse JSON, or do I/O.
 */
#ifndef COEFD_JSON_H
#define COEFD_JSON_H

#include <stddef.h>
#include <stdint.h>

#include "limits.h"

/*
 * Writer state. The caller owns buf (cap bytes) and the struct; both must
 * outlive the writer. Fields are read-only for callers:
 *   buf, cap   the output buffer; text is kept NUL-terminated, so at most
 *              cap - 1 bytes of JSON fit.
 *   len        bytes of JSON written so far (excluding the NUL).
 *   overflow   set once a write did not fit; sticky until json_init. After
 *              an overflow buf holds the output of the calls that fitted,
 *              which is not a complete JSON text: do not send it.
 *   depth      open objects/arrays.
 * The remaining fields are private bookkeeping.
 */
struct json {
	char		*buf;
	size_t		 cap;
	size_t		 len;
	int		 overflow;
	int		 depth;
	uint32_t	 isobj;		/* bit d: level d+1 is an object */
	uint32_t	 nonempty;	/* bit d: level d+1 has a member */
	int		 afterkey;	/* a key was written, its value is due */
	int		 ntop;		/* values written at depth 0 */
};

/* Set up a writer over buf[0..cap); cap >= 1. */
void	json_init(struct json *j, char *buf, size_t cap);
/* 0 when the text is one complete value and nothing overflowed. */
int	json_finish(const struct json *j);

/* Containers. */
int	json_obj_begin(struct json *j);
int	json_obj_end(struct json *j);
int	json_arr_begin(struct json *j);
int	json_arr_end(struct json *j);

/* Object member name; the next call writes its value. */
int	json_key(struct json *j, const char *key);
int	json_keyn(struct json *j, const char *key, size_t len);

/* Scalars. */
int	json_str(struct json *j, const char *s);
int	json_strn(struct json *j, const char *s, size_t len);
int	json_int(struct json *j, int64_t v);
int	json_uint(struct json *j, uint64_t v);
int	json_num(struct json *j, double v);
int	json_bool(struct json *j, int v);
int	json_null(struct json *j);

/* Length of the valid UTF-8 sequence at s[0..n), or 0 (RFC 3629). */
size_t	json_utf8_seq(const unsigned char *s, size_t n);

/* Shortest "%.{15,16,17}g" text that reads back to v; NUL-terminated. */
int	json_format_double(char *out, size_t outlen, double v);

#endif
