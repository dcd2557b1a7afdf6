/* SPDX-License-Identifier: ISC */
/*
 * jread: recursive-descent JSON reader (RFC 8259) into a tree, and the
 * reverse through the daemon's JSON writer. Strict: one value, no comments,
 * no trailing commas, no leading zeros, no NaN, valid UTF-8 only, paired
 * surrogate escapes only, no duplicate keys, nesting at most JR_MAX_DEPTH.
 * PURE: no I/O; allocation only for the tree.
 */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "jread.h"

struct jr_parser {
	const unsigned char *s;
	size_t		 len;
	size_t		 pos;
	char		*err;
	size_t		 errlen;
	int		 rc;
};

static int
perr(struct jr_parser *p, int rc, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static int
perr(struct jr_parser *p, int rc, const char *fmt, ...)
{
	va_list ap;
	char msg[120];

	if (p->rc != 0)
		return p->rc;
	va_start(ap, fmt);
	vsnprintf(msg, sizeof(msg), fmt, ap);
	va_end(ap);
	if (p->errlen > 0)
		snprintf(p->err, p->errlen, "byte %zu: %s", p->pos + 1, msg);
	p->rc = rc;
	return rc;
}

static void
skip_ws(struct jr_parser *p)
{
	while (p->pos < p->len && (p->s[p->pos] == ' ' ||
	    p->s[p->pos] == '\t' || p->s[p->pos] == '\n' ||
	    p->s[p->pos] == '\r'))
		p->pos++;
}

/* Release what v owns (not v itself). */
static void
jr_clear(struct jr *v)
{
	size_t i;

	if (v->type == JR_ARR || v->type == JR_OBJ) {
		for (i = 0; i < v->len; i++) {
			jr_clear(&v->kids[i]);
			if (v->type == JR_OBJ)
				free(v->keys[i]);
		}
		free(v->kids);
		free(v->keys);
		free(v->klen);
	}
	free(v->str);
	memset(v, 0, sizeof(*v));
}

static int
is_digit(unsigned char c)
{
	return c >= '0' && c <= '9';
}

static int
hex4(struct jr_parser *p, unsigned *out)
{
	unsigned v = 0;
	int i;

	if (p->len - p->pos < 4)
		return perr(p, E_PROTO, "\\u needs four hex digits");
	for (i = 0; i < 4; i++) {
		unsigned char c = p->s[p->pos + (size_t)i];

		v <<= 4;
		if (is_digit(c))
			v |= (unsigned)(c - '0');
		else if (c >= 'a' && c <= 'f')
			v |= (unsigned)(c - 'a' + 10);
		else if (c >= 'A' && c <= 'F')
			v |= (unsigned)(c - 'A' + 10);
		else
			return perr(p, E_PROTO, "\\u needs four hex digits");
	}
	p->pos += 4;
	*out = v;
	return 0;
}

/* Length of a valid UTF-8 sequence at s[0..n) (RFC 3629), or 0. */
static size_t
utf8_len(const unsigned char *s, size_t n)
{
	unsigned char c = s[0];

	if (c < 0x80)
		return 1;
	if (c >= 0xc2 && c <= 0xdf)
		return n >= 2 && (s[1] & 0xc0) == 0x80 ? 2 : 0;
	if (c >= 0xe0 && c <= 0xef) {
		if (n < 3 || (s[1] & 0xc0) != 0x80 || (s[2] & 0xc0) != 0x80 ||
		    (c == 0xe0 && s[1] < 0xa0) || (c == 0xed && s[1] > 0x9f))
			return 0;
		return 3;
	}
	if (c >= 0xf0 && c <= 0xf4) {
		if (n < 4 || (s[1] & 0xc0) != 0x80 || (s[2] & 0xc0) != 0x80 ||
		    (s[3] & 0xc0) != 0x80 || (c == 0xf0 && s[1] < 0x90) ||
		    (c == 0xf4 && s[1] > 0x8f))
			return 0;
		return 4;
	}
	return 0;
}

static size_t
put_utf8(char *o, unsigned cp)
{
	if (cp < 0x80) {
		o[0] = (char)cp;
		return 1;
	}
	if (cp < 0x800) {
		o[0] = (char)(0xc0 | cp >> 6);
		o[1] = (char)(0x80 | (cp & 0x3f));
		return 2;
	}
	if (cp < 0x10000) {
		o[0] = (char)(0xe0 | cp >> 12);
		o[1] = (char)(0x80 | (cp >> 6 & 0x3f));
		o[2] = (char)(0x80 | (cp & 0x3f));
		return 3;
	}
	o[0] = (char)(0xf0 | cp >> 18);
	o[1] = (char)(0x80 | (cp >> 12 & 0x3f));
	o[2] = (char)(0x80 | (cp >> 6 & 0x3f));
	o[3] = (char)(0x80 | (cp & 0x3f));
	return 4;
}

/*
 * A string at p->pos (on the opening quote) into a new buffer. The
 * decoded text is never longer than the source, so one allocation of the
 * source's length suffices.
 */
static int
parse_string(struct jr_parser *p, char **out, size_t *olen)
{
	size_t start = ++p->pos, end, n = 0, k;
	char *o;

	/* Find the closing quote first to size the buffer. */
	for (end = start; end < p->len && p->s[end] != '"'; end++)
		if (p->s[end] == '\\')
			end++;
	if (end >= p->len) {
		p->pos = start - 1;
		return perr(p, E_PROTO, "unterminated string");
	}
	if ((o = malloc(end - start + 1)) == NULL)
		return perr(p, E_NOMEM, "out of memory");
	while (p->pos < end) {
		unsigned char c = p->s[p->pos];
		unsigned cp, lo;

		if (c < 0x20) {
			free(o);
			return perr(p, E_PROTO, "control character 0x%02x in "
			    "a string", c);
		}
		if (c != '\\') {
			if ((k = utf8_len(p->s + p->pos, end - p->pos)) == 0) {
				free(o);
				return perr(p, E_PROTO, "invalid UTF-8");
			}
			memcpy(o + n, p->s + p->pos, k);
			n += k;
			p->pos += k;
			continue;
		}
		p->pos++;
		switch (p->s[p->pos++]) {
		case '"': o[n++] = '"'; break;
		case '\\': o[n++] = '\\'; break;
		case '/': o[n++] = '/'; break;
		case 'b': o[n++] = '\b'; break;
		case 'f': o[n++] = '\f'; break;
		case 'n': o[n++] = '\n'; break;
		case 'r': o[n++] = '\r'; break;
		case 't': o[n++] = '\t'; break;
		case 'u':
			if (hex4(p, &cp) != 0)
				goto fail;
			if (cp >= 0xdc00 && cp <= 0xdfff) {
				perr(p, E_PROTO, "unpaired low surrogate");
				goto fail;
			}
			if (cp >= 0xd800 && cp <= 0xdbff) {
				if (p->pos + 2 > end || p->s[p->pos] != '\\' ||
				    p->s[p->pos + 1] != 'u') {
					perr(p, E_PROTO, "unpaired high "
					    "surrogate");
					goto fail;
				}
				p->pos += 2;
				if (hex4(p, &lo) != 0)
					goto fail;
				if (lo < 0xdc00 || lo > 0xdfff) {
					perr(p, E_PROTO, "unpaired high "
					    "surrogate");
					goto fail;
				}
				cp = 0x10000 + ((cp - 0xd800) << 10) +
				    (lo - 0xdc00);
			}
			n += put_utf8(o + n, cp);
			break;
		default:
			p->pos--;
			perr(p, E_PROTO, "bad escape");
			goto fail;
		}
	}
	p->pos = end + 1;
	o[n] = '\0';
	*out = o;
	*olen = n;
	return 0;
fail:
	free(o);
	return p->rc;
}

/* RFC 8259 §6: -? (0 | [1-9][0-9]*) (. [0-9]+)? ([eE] [+-]? [0-9]+)? */
static int
parse_number(struct jr_parser *p, struct jr *v)
{
	size_t start = p->pos, n;
	char small[64], *buf = small, *end;
	double d;

	if (p->pos < p->len && p->s[p->pos] == '-')
		p->pos++;
	if (p->pos < p->len && p->s[p->pos] == '0')
		p->pos++;
	else if (p->pos < p->len && p->s[p->pos] >= '1' &&
	    p->s[p->pos] <= '9')
		while (p->pos < p->len && is_digit(p->s[p->pos]))
			p->pos++;
	else
		return perr(p, E_PROTO, "expected a value");
	if (p->pos < p->len && p->s[p->pos] == '.') {
		p->pos++;
		if (p->pos >= p->len || !is_digit(p->s[p->pos]))
			return perr(p, E_PROTO, "digit expected after '.'");
		while (p->pos < p->len && is_digit(p->s[p->pos]))
			p->pos++;
	}
	if (p->pos < p->len && (p->s[p->pos] == 'e' || p->s[p->pos] == 'E')) {
		p->pos++;
		if (p->pos < p->len && (p->s[p->pos] == '+' ||
		    p->s[p->pos] == '-'))
			p->pos++;
		if (p->pos >= p->len || !is_digit(p->s[p->pos]))
			return perr(p, E_PROTO, "digit expected in exponent");
		while (p->pos < p->len && is_digit(p->s[p->pos]))
			p->pos++;
	}
	n = p->pos - start;
	if (n >= sizeof(small) && (buf = malloc(n + 1)) == NULL)
		return perr(p, E_NOMEM, "out of memory");
	memcpy(buf, p->s + start, n);
	buf[n] = '\0';
	d = strtod(buf, &end);
	if (buf != small)
		free(buf);
	if (!isfinite(d)) {
		p->pos = start;
		return perr(p, E_PROTO, "number out of range");
	}
	v->type = JR_NUM;
	v->num = d;
	return 0;
}

static int
literal(struct jr_parser *p, const char *word)
{
	size_t n = strlen(word);

	if (p->len - p->pos < n || memcmp(p->s + p->pos, word, n) != 0)
		return perr(p, E_PROTO, "expected a value");
	p->pos += n;
	return 0;
}

static int parse_value(struct jr_parser *p, struct jr *v, int depth);

/* Append a zeroed slot to v's members (growing by doubling). */
static struct jr *
grow(struct jr_parser *p, struct jr *v, size_t *cap)
{
	struct jr *k;
	char **keys;
	size_t *klen, nc;

	if (v->len == *cap) {
		nc = *cap ? *cap * 2 : 4;
		if ((k = realloc(v->kids, nc * sizeof(*k))) == NULL) {
			perr(p, E_NOMEM, "out of memory");
			return NULL;
		}
		v->kids = k;
		if (v->type == JR_OBJ) {
			if ((keys = realloc(v->keys, nc * sizeof(*keys))) ==
			    NULL) {
				perr(p, E_NOMEM, "out of memory");
				return NULL;
			}
			v->keys = keys;
			if ((klen = realloc(v->klen, nc * sizeof(*klen))) ==
			    NULL) {
				perr(p, E_NOMEM, "out of memory");
				return NULL;
			}
			v->klen = klen;
		}
		*cap = nc;
	}
	memset(&v->kids[v->len], 0, sizeof(v->kids[0]));
	return &v->kids[v->len];
}

static int
parse_container(struct jr_parser *p, struct jr *v, int depth)
{
	int obj = p->s[p->pos] == '{';
	char close = obj ? '}' : ']';
	size_t cap = 0, i, klen = 0;
	struct jr *slot;
	char *key = NULL;

	if (depth >= JR_MAX_DEPTH)
		return perr(p, E_PROTO, "nested deeper than %d", JR_MAX_DEPTH);
	v->type = obj ? JR_OBJ : JR_ARR;
	p->pos++;
	skip_ws(p);
	if (p->pos < p->len && p->s[p->pos] == close) {
		p->pos++;
		return 0;
	}
	for (;;) {
		skip_ws(p);
		if (obj) {
			if (p->pos >= p->len || p->s[p->pos] != '"')
				return perr(p, E_PROTO, "expected a member "
				    "name");
			if (parse_string(p, &key, &klen) != 0)
				return p->rc;
			for (i = 0; i < v->len; i++)
				if (v->klen[i] == klen &&
				    memcmp(v->keys[i], key, klen) == 0) {
					free(key);
					return perr(p, E_PROTO, "duplicate "
					    "member name");
				}
			skip_ws(p);
			if (p->pos >= p->len || p->s[p->pos] != ':') {
				free(key);
				return perr(p, E_PROTO, "expected ':'");
			}
			p->pos++;
		}
		if ((slot = grow(p, v, &cap)) == NULL) {
			free(key);
			return p->rc;
		}
		if (obj) {
			v->keys[v->len] = key;
			v->klen[v->len] = klen;
			key = NULL;
		}
		v->len++;
		if (parse_value(p, slot, depth + 1) != 0)
			return p->rc;
		skip_ws(p);
		if (p->pos >= p->len)
			return perr(p, E_PROTO, "unexpected end of input");
		if (p->s[p->pos] == ',') {
			p->pos++;
			continue;
		}
		if (p->s[p->pos] == close) {
			p->pos++;
			return 0;
		}
		return perr(p, E_PROTO, "expected ',' or '%c'", close);
	}
}

static int
parse_value(struct jr_parser *p, struct jr *v, int depth)
{
	skip_ws(p);
	if (p->pos >= p->len)
		return perr(p, E_PROTO, "unexpected end of input");
	switch (p->s[p->pos]) {
	case '{':
	case '[':
		return parse_container(p, v, depth);
	case '"':
		if (parse_string(p, &v->str, &v->len) != 0)
			return p->rc;
		v->type = JR_STR;
		return 0;
	case 't':
		v->type = JR_BOOL;
		v->b = 1;
		return literal(p, "true");
	case 'f':
		v->type = JR_BOOL;
		return literal(p, "false");
	case 'n':
		v->type = JR_NULL;
		return literal(p, "null");
	default:
		return parse_number(p, v);
	}
}

/*
 * jr_parse: parse text[0..len) (not necessarily NUL-terminated) as one
 * JSON value with optional white space around it. Returns 0 with *out a
 * new tree the caller frees with jr_free; E_PROTO for malformed input or
 * E_NOMEM, with "byte N: what" in err (N counts from 1) and *out NULL.
 */
int
jr_parse(const char *text, size_t len, struct jr **out, char *err,
    size_t errlen)
{
	struct jr_parser p;
	struct jr *v;

	*out = NULL;
	if (errlen > 0)
		err[0] = '\0';
	memset(&p, 0, sizeof(p));
	p.s = (const unsigned char *)text;
	p.len = text != NULL ? len : 0;
	p.err = err;
	p.errlen = errlen;
	if ((v = calloc(1, sizeof(*v))) == NULL)
		return perr(&p, E_NOMEM, "out of memory");
	if (parse_value(&p, v, 0) == 0) {
		skip_ws(&p);
		if (p.pos != p.len)
			perr(&p, E_PROTO, "text after the value");
	}
	if (p.rc != 0) {
		jr_free(v);
		return p.rc;
	}
	*out = v;
	return 0;
}

/* jr_free: release a tree from jr_parse; NULL is a no-op. */
void
jr_free(struct jr *v)
{
	if (v == NULL)
		return;
	jr_clear(v);
	free(v);
}

/* jr_find: the value of member key in object v; NULL when v is NULL, not
 * an object, or has no such member. */
const struct jr *
jr_find(const struct jr *v, const char *key)
{
	size_t i, n = strlen(key);

	if (v == NULL || v->type != JR_OBJ)
		return NULL;
	for (i = 0; i < v->len; i++)
		if (v->klen[i] == n && memcmp(v->keys[i], key, n) == 0)
			return &v->kids[i];
	return NULL;
}

/* jr_at: element i of array v; NULL when v is not an array or i is out of
 * range. */
const struct jr *
jr_at(const struct jr *v, size_t i)
{
	if (v == NULL || v->type != JR_ARR || i >= v->len)
		return NULL;
	return &v->kids[i];
}

/* jr_len: members of an array or object, bytes of a string, else 0. */
size_t
jr_len(const struct jr *v)
{
	if (v == NULL || (v->type != JR_ARR && v->type != JR_OBJ &&
	    v->type != JR_STR))
		return 0;
	return v->len;
}

/* jr_num: the number in v; NaN for NULL, null (the daemon's non-finite)
 * and anything that is not a number. */
double
jr_num(const struct jr *v)
{
	return v != NULL && v->type == JR_NUM ? v->num : NAN;
}

/* jr_str: the string in v, or NULL when v is NULL or not a string. */
const char *
jr_str(const struct jr *v)
{
	return v != NULL && v->type == JR_STR ? v->str : NULL;
}

/* jr_true: 1 for the literal true, else 0. */
int
jr_true(const struct jr *v)
{
	return v != NULL && v->type == JR_BOOL && v->b;
}

static int
write_value(struct json *j, const struct jr *v, const char *omit)
{
	size_t i;

	switch (v->type) {
	case JR_NULL:
		return json_null(j);
	case JR_BOOL:
		return json_bool(j, v->b);
	case JR_NUM:
		return json_num(j, v->num);
	case JR_STR:
		return json_strn(j, v->str, v->len);
	case JR_ARR:
		json_arr_begin(j);
		for (i = 0; i < v->len; i++)
			write_value(j, &v->kids[i], NULL);
		return json_arr_end(j);
	case JR_OBJ:
		json_obj_begin(j);
		for (i = 0; i < v->len; i++) {
			if (omit != NULL && strlen(omit) == v->klen[i] &&
			    memcmp(omit, v->keys[i], v->klen[i]) == 0)
				continue;
			json_keyn(j, v->keys[i], v->klen[i]);
			write_value(j, &v->kids[i], NULL);
		}
		return json_obj_end(j);
	}
	return E_ARG;
}

/*
 * jr_write: write v into j as JSON (numbers in the writer's shortest
 * round-trip form), leaving out the top-level member named omit when v is
 * an object (omit NULL: none). Returns 0, or the writer's error (E_LIMIT
 * when j's buffer is full: the output is then incomplete).
 */
int
jr_write(struct json *j, const struct jr *v, const char *omit)
{
	write_value(j, v, omit);
	return j->overflow ? E_LIMIT : 0;
}
