/* SPDX-License-Identifier: ISC */
/*
 * json: streaming JSON writer over a caller buffer. Pure: no I/O, no
 * allocation, no globals. Misuse by the caller (a value in an object without
 * a key, unbalanced ends, two top-level values) is a programmer error and
 * trips an assert; running out of room is an expected condition and is
 * reported through the sticky overflow flag and E_LIMIT.
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "json.h"

static const char hexdig[] = "0123456789abcdef";

/*
 * json_init: point the writer at buf[0..cap) and clear all state. cap must
 * be at least 1 (room for the NUL). Never fails.
 */
void
json_init(struct json *j, char *buf, size_t cap)
{
	assert(j != NULL && buf != NULL && cap >= 1);
	j->buf = buf;
	j->cap = cap;
	j->len = 0;
	j->overflow = 0;
	j->depth = 0;
	j->isobj = 0;
	j->nonempty = 0;
	j->afterkey = 0;
	j->ntop = 0;
	buf[0] = '\0';
}

/*
 * json_finish: report whether the writer holds one complete JSON value.
 * Returns 0 if so, E_LIMIT after an overflow, E_STATE when a container is
 * still open or nothing was written. Does not change the writer.
 */
int
json_finish(const struct json *j)
{
	if (j->overflow)
		return E_LIMIT;
	if (j->depth != 0 || j->ntop != 1)
		return E_STATE;
	return 0;
}

/* Room for n more bytes plus the NUL? */
static int
room(const struct json *j, size_t n)
{
	return !j->overflow && n < j->cap - j->len;
}

static int
fail(struct json *j, size_t mark)
{
	j->len = mark;
	j->buf[mark] = '\0';
	j->overflow = 1;
	return E_LIMIT;
}

static void
put(struct json *j, const char *s, size_t n)
{
	memcpy(j->buf + j->len, s, n);
	j->len += n;
	j->buf[j->len] = '\0';
}

static int
in_obj(const struct json *j)
{
	return j->depth > 0 && (j->isobj >> (j->depth - 1)) & 1;
}

static int
level_nonempty(const struct json *j)
{
	return j->depth > 0 && (j->nonempty >> (j->depth - 1)) & 1;
}

/* Bytes of separator a value needs here: 1 for a comma, else 0. */
static size_t
value_sep(const struct json *j)
{
	if (j->depth == 0) {
		assert(j->ntop == 0);	/* one top-level value only */
		return 0;
	}
	if (in_obj(j)) {
		assert(j->afterkey);	/* json_key must come first */
		return 0;
	}
	return level_nonempty(j) ? 1 : 0;
}

/* Book-keeping once a complete value has been written. */
static void
value_done(struct json *j)
{
	if (j->depth == 0)
		j->ntop++;
	else
		j->nonempty |= 1u << (j->depth - 1);
	j->afterkey = 0;
}

/* Write a scalar token (already formatted) as one value. */
static int
scalar(struct json *j, const char *s, size_t n)
{
	size_t sep;

	if (j->overflow)
		return E_LIMIT;
	sep = value_sep(j);
	if (!room(j, sep + n))
		return fail(j, j->len);
	if (sep)
		put(j, ",", 1);
	put(j, s, n);
	value_done(j);
	return 0;
}

/*
 * json_utf8_seq: length of the valid UTF-8 sequence (RFC 3629 / Unicode
 * table 3-7) at s[0..n) (n >= 1), or 0 when the bytes there are not one.
 * Shared with the protocol reader, which rejects what this refuses.
 */
size_t
json_utf8_seq(const unsigned char *s, size_t n)
{
	unsigned char c = s[0];

	if (c < 0x80)
		return 1;
	if (c >= 0xc2 && c <= 0xdf)
		return n >= 2 && (s[1] & 0xc0) == 0x80 ? 2 : 0;
	if (c >= 0xe0 && c <= 0xef) {
		if (n < 3 || (s[1] & 0xc0) != 0x80 || (s[2] & 0xc0) != 0x80)
			return 0;
		if (c == 0xe0 && s[1] < 0xa0)
			return 0;	/* overlong */
		if (c == 0xed && s[1] > 0x9f)
			return 0;	/* surrogate */
		return 3;
	}
	if (c >= 0xf0 && c <= 0xf4) {
		if (n < 4 || (s[1] & 0xc0) != 0x80 || (s[2] & 0xc0) != 0x80 ||
		    (s[3] & 0xc0) != 0x80)
			return 0;
		if (c == 0xf0 && s[1] < 0x90)
			return 0;	/* overlong */
		if (c == 0xf4 && s[1] > 0x8f)
			return 0;	/* above U+10FFFF */
		return 4;
	}
	return 0;
}

/*
 * Write s[0..n) as a JSON string with its quotes, escaping per RFC 8259 §7:
 * '"' and '\\' get a backslash, U+0000..U+001F become \u00XX. Valid UTF-8
 * passes through unchanged; each byte that does not start a valid sequence
 * becomes U+FFFD so the output is always valid UTF-8.
 */
static int
put_string(struct json *j, const char *s, size_t n)
{
	const unsigned char *p = (const unsigned char *)s;
	size_t i = 0, k;
	char esc[6];

	if (!room(j, 1))
		return -1;
	put(j, "\"", 1);
	while (i < n) {
		/* Copy the longest run that needs no escaping in one go. */
		for (k = i; k < n && p[k] >= 0x20 && p[k] < 0x80 &&
		    p[k] != '"' && p[k] != '\\'; k++)
			;
		if (k > i) {
			if (!room(j, k - i))
				return -1;
			put(j, s + i, k - i);
			i = k;
			continue;
		}
		if (p[i] == '"' || p[i] == '\\') {
			esc[0] = '\\';
			esc[1] = (char)p[i];
			if (!room(j, 2))
				return -1;
			put(j, esc, 2);
			i++;
		} else if (p[i] < 0x20) {
			esc[0] = '\\';
			esc[1] = 'u';
			esc[2] = '0';
			esc[3] = '0';
			esc[4] = hexdig[p[i] >> 4];
			esc[5] = hexdig[p[i] & 15];
			if (!room(j, 6))
				return -1;
			put(j, esc, 6);
			i++;
		} else if ((k = json_utf8_seq(p + i, n - i)) != 0) {
			if (!room(j, k))
				return -1;
			put(j, s + i, k);
			i += k;
		} else {
			if (!room(j, 3))
				return -1;
			put(j, "\xef\xbf\xbd", 3);
			i++;
		}
	}
	if (!room(j, 1))
		return -1;
	put(j, "\"", 1);
	return 0;
}

/*
 * json_strn: write the string s[0..len) as a value (see put_string for the
 * escaping). s may contain NUL bytes (written as \u0000). Returns 0, or
 * E_LIMIT when it does not fit (nothing of it is kept; overflow is set).
 */
int
json_strn(struct json *j, const char *s, size_t len)
{
	size_t mark = j->len, sep;

	if (j->overflow)
		return E_LIMIT;
	sep = value_sep(j);
	if (sep) {
		if (!room(j, 1))
			return fail(j, mark);
		put(j, ",", 1);
	}
	if (put_string(j, s, len) < 0)
		return fail(j, mark);
	value_done(j);
	return 0;
}

/* json_str: json_strn for a NUL-terminated s. Same results. */
int
json_str(struct json *j, const char *s)
{
	return json_strn(j, s, strlen(s));
}

/*
 * json_keyn: write the member name key[0..len) and its ':' inside an
 * object (a programmer error elsewhere or twice in a row). Returns 0 or
 * E_LIMIT (overflow set, nothing kept).
 */
int
json_keyn(struct json *j, const char *key, size_t len)
{
	size_t mark = j->len;

	if (j->overflow)
		return E_LIMIT;
	assert(in_obj(j) && !j->afterkey);
	if (level_nonempty(j)) {
		if (!room(j, 1))
			return fail(j, mark);
		put(j, ",", 1);
	}
	if (put_string(j, key, len) < 0 || !room(j, 1))
		return fail(j, mark);
	put(j, ":", 1);
	j->afterkey = 1;
	return 0;
}

/* json_key: json_keyn for a NUL-terminated key. Same results. */
int
json_key(struct json *j, const char *key)
{
	return json_keyn(j, key, strlen(key));
}

static int
open_container(struct json *j, char c, int obj)
{
	size_t sep;
	char s[2];

	if (j->overflow)
		return E_LIMIT;
	sep = value_sep(j);
	if (j->depth >= JSON_MAX_DEPTH || !room(j, sep + 1))
		return fail(j, j->len);
	s[0] = ',';
	s[1] = c;
	put(j, s + 1 - sep, sep + 1);
	j->afterkey = 0;
	j->depth++;
	if (obj)
		j->isobj |= 1u << (j->depth - 1);
	else
		j->isobj &= ~(1u << (j->depth - 1));
	j->nonempty &= ~(1u << (j->depth - 1));
	return 0;
}

static int
close_container(struct json *j, char c, int obj)
{
	if (j->overflow)
		return E_LIMIT;
	assert(j->depth > 0 && in_obj(j) == obj && !j->afterkey);
	if (!room(j, 1))
		return fail(j, j->len);
	put(j, &c, 1);
	j->depth--;
	value_done(j);
	return 0;
}

/*
 * json_obj_begin / json_obj_end / json_arr_begin / json_arr_end: open or
 * close a container. Opening beyond JSON_MAX_DEPTH levels counts as an
 * overflow. Return 0 or E_LIMIT (overflow set).
 */
int
json_obj_begin(struct json *j)
{
	return open_container(j, '{', 1);
}

int
json_obj_end(struct json *j)
{
	return close_container(j, '}', 1);
}

int
json_arr_begin(struct json *j)
{
	return open_container(j, '[', 0);
}

int
json_arr_end(struct json *j)
{
	return close_container(j, ']', 0);
}

/*
 * json_uint: write v in decimal. Returns 0 or E_LIMIT (overflow set).
 */
int
json_uint(struct json *j, uint64_t v)
{
	char tmp[24];
	size_t i = sizeof(tmp);

	do {
		tmp[--i] = (char)('0' + v % 10);
		v /= 10;
	} while (v != 0);
	return scalar(j, tmp + i, sizeof(tmp) - i);
}

/*
 * json_int: write v in decimal, INT64_MIN included. Returns 0 or E_LIMIT.
 */
int
json_int(struct json *j, int64_t v)
{
	char tmp[24];
	size_t i = sizeof(tmp);
	/* Negate in unsigned arithmetic so INT64_MIN does not overflow. */
	uint64_t u = v < 0 ? 0 - (uint64_t)v : (uint64_t)v;

	do {
		tmp[--i] = (char)('0' + u % 10);
		u /= 10;
	} while (u != 0);
	if (v < 0)
		tmp[--i] = '-';
	return scalar(j, tmp + i, sizeof(tmp) - i);
}

/*
 * json_format_double: write the shortest of "%.15g", "%.16g", "%.17g" that
 * strtod reads back to the same bits of v into out (NUL-terminated), or
 * "null" when v is not finite (JSON has no NaN or infinity). 17 significant
 * digits always identify a double (IEEE 754-2008 §5.12.2, from memory;
 * tests/check_json.c checks 1e5 random doubles), so the last try cannot
 * fail. Needs the "C" numeric locale (the daemon never changes it).
 * Returns the length written, or E_ARG when outlen < 32.
 */
int
json_format_double(char *out, size_t outlen, double v)
{
	int prec, n = 0;

	if (outlen < 32)
		return E_ARG;
	if (!isfinite(v)) {
		memcpy(out, "null", 5);
		return 4;
	}
	for (prec = 15; prec <= 17; prec++) {
		n = snprintf(out, outlen, "%.*g", prec, v);
		if (prec == 17 || strtod(out, NULL) == v)
			break;
	}
	/* strtod(x) == v cannot tell -0 from 0, but %g keeps the sign. */
	return n;
}

/*
 * json_num: write v as the shortest round-tripping number (see
 * json_format_double), or null when v is NaN or infinite. Returns 0 or
 * E_LIMIT (overflow set).
 */
int
json_num(struct json *j, double v)
{
	char tmp[32];
	int n = json_format_double(tmp, sizeof(tmp), v);

	return scalar(j, tmp, (size_t)n);
}

/* json_bool: write true (v != 0) or false. Returns 0 or E_LIMIT. */
int
json_bool(struct json *j, int v)
{
	return v ? scalar(j, "true", 4) : scalar(j, "false", 5);
}

/* json_null: write null. Returns 0 or E_LIMIT. */
int
json_null(struct json *j)
{
	return scalar(j, "null", 4);
}
