/* SPDX-License-Identifier: ISC */
/*
 * jread: a strict JSON reader (RFC 8259) for the daemon's replies, into a
 * small tree, plus a writer that re-emits a tree through daemon/json.c.
 * PURE: no I/O, no globals; the tree is the only allocation. It does not
 * stream, keep number text, or accept extensions (comments, NaN, trailing
 * commas, duplicate keys).
 */
#ifndef COEFCTL_JREAD_H
#define COEFCTL_JREAD_H

#include <stddef.h>

#include "json.h"

#define JR_MAX_DEPTH	64	/* nesting of arrays and objects */

enum jr_type {
	JR_NULL = 0,
	JR_BOOL,
	JR_NUM,
	JR_STR,
	JR_ARR,
	JR_OBJ
};

/*
 * One value. The root returned by jr_parse owns everything below it.
 *   b      JR_BOOL: 0 or 1.
 *   num    JR_NUM: the double strtod gives for the text (always finite).
 *   str    JR_STR: the decoded UTF-8 bytes, NUL-terminated (it may hold
 *          NUL bytes from \u0000; len is authoritative).
 *   len    JR_STR: bytes; JR_ARR / JR_OBJ: members.
 *   kids   JR_ARR / JR_OBJ: len values in document order.
 *   keys, klen   JR_OBJ: the member names (decoded, NUL-terminated).
 */
struct jr {
	enum jr_type	 type;
	int		 b;
	double		 num;
	char		*str;
	size_t		 len;
	struct jr	*kids;
	char		**keys;
	size_t		*klen;
};

/* jr_parse: text[0..len) must be exactly one JSON value (white space
 * around it allowed); *out is a new tree. */
int		 jr_parse(const char *text, size_t len, struct jr **out,
		    char *err, size_t errlen);
/* jr_free: the tree; NULL is a no-op. */
void		 jr_free(struct jr *v);
/* jr_find: member key of object v, or NULL. */
const struct jr	*jr_find(const struct jr *v, const char *key);
/* jr_at: element i of array v, or NULL. */
const struct jr	*jr_at(const struct jr *v, size_t i);
/* jr_len: members of an array or object, bytes of a string; else 0. */
size_t		 jr_len(const struct jr *v);
/* jr_num: the number, or NaN when v is NULL, null or not a number. */
double		 jr_num(const struct jr *v);
/* jr_str: the string, or NULL when v is not a string. */
const char	*jr_str(const struct jr *v);
/* jr_true: 1 when v is the literal true, else 0. */
int		 jr_true(const struct jr *v);
/* jr_write: re-emit v into j, leaving out top-level member omit. */
int		 jr_write(struct json *j, const struct jr *v, const char *omit);

#endif
