/* SPDX-License-Identifier: ISC */
/*
 * jsoncheck: a strict RFC 8259 checker for one reply line, for the fuzz
 * targets (the daemon only writes JSON; nothing in it parses JSON). Static
 * functions in a header so that each target stays one object file.
 */
#ifndef COEFD_FUZZ_JSONCHECK_H
#define COEFD_FUZZ_JSONCHECK_H

#include <string.h>

struct jp {
	const char	*p, *end;
	int		 depth;
};

static int jvalue(struct jp *j);

static void
jws(struct jp *j)
{
	while (j->p < j->end && (*j->p == ' ' || *j->p == '\t' ||
	    *j->p == '\n' || *j->p == '\r'))
		j->p++;
}

static int
jstring(struct jp *j)
{
	if (j->p >= j->end || *j->p != '"')
		return -1;
	j->p++;
	while (j->p < j->end) {
		unsigned char c = (unsigned char)*j->p++;

		if (c == '"')
			return 0;
		if (c < 0x20)
			return -1;	/* control characters must be escaped */
		if (c >= 0x80) {	/* well-formed UTF-8 (RFC 3629) */
			size_t k, n = c >= 0xf0 ? 3 : c >= 0xe0 ? 2 : 1;
			unsigned char c1;

			if (c < 0xc2 || c > 0xf4 ||
			    (size_t)(j->end - j->p) < n)
				return -1;
			c1 = (unsigned char)j->p[0];
			if ((c == 0xe0 && c1 < 0xa0) ||
			    (c == 0xed && c1 > 0x9f) ||
			    (c == 0xf0 && c1 < 0x90) ||
			    (c == 0xf4 && c1 > 0x8f))
				return -1;
			for (k = 0; k < n; k++)
				if (((unsigned char)j->p[k] & 0xc0) != 0x80)
					return -1;
			j->p += n;
		}
		if (c == '\\') {
			if (j->p >= j->end)
				return -1;
			c = (unsigned char)*j->p++;
			if (c == 'u') {
				int k;

				for (k = 0; k < 4; k++, j->p++)
					if (j->p >= j->end ||
					    !strchr("0123456789abcdefABCDEF",
					    *j->p) || *j->p == '\0')
						return -1;
			} else if (!strchr("\"\\/bfnrt", c) || c == '\0')
				return -1;
		}
	}
	return -1;
}

static int
jnumber(struct jp *j)
{
	const char *s = j->p;

	if (j->p < j->end && *j->p == '-')
		j->p++;
	if (j->p < j->end && *j->p == '0')
		j->p++;
	else if (j->p < j->end && *j->p >= '1' && *j->p <= '9')
		while (j->p < j->end && *j->p >= '0' && *j->p <= '9')
			j->p++;
	else
		return -1;
	if (j->p < j->end && *j->p == '.') {
		j->p++;
		if (j->p >= j->end || *j->p < '0' || *j->p > '9')
			return -1;
		while (j->p < j->end && *j->p >= '0' && *j->p <= '9')
			j->p++;
	}
	if (j->p < j->end && (*j->p == 'e' || *j->p == 'E')) {
		j->p++;
		if (j->p < j->end && (*j->p == '+' || *j->p == '-'))
			j->p++;
		if (j->p >= j->end || *j->p < '0' || *j->p > '9')
			return -1;
		while (j->p < j->end && *j->p >= '0' && *j->p <= '9')
			j->p++;
	}
	return j->p > s ? 0 : -1;
}

static int
jlit(struct jp *j, const char *w)
{
	size_t n = strlen(w);

	if ((size_t)(j->end - j->p) < n || memcmp(j->p, w, n) != 0)
		return -1;
	j->p += n;
	return 0;
}

static int
jcontainer(struct jp *j, char open, char close)
{
	if (++j->depth > 64)
		return -1;
	j->p++;		/* the opening bracket */
	(void)open;
	jws(j);
	if (j->p < j->end && *j->p == close) {
		j->p++;
		j->depth--;
		return 0;
	}
	for (;;) {
		jws(j);
		if (close == '}') {
			if (jstring(j) != 0)
				return -1;
			jws(j);
			if (j->p >= j->end || *j->p++ != ':')
				return -1;
		}
		if (jvalue(j) != 0)
			return -1;
		jws(j);
		if (j->p >= j->end)
			return -1;
		if (*j->p == ',') {
			j->p++;
			continue;
		}
		if (*j->p++ != close)
			return -1;
		j->depth--;
		return 0;
	}
}

static int
jvalue(struct jp *j)
{
	jws(j);
	if (j->p >= j->end)
		return -1;
	switch (*j->p) {
	case '{':
		return jcontainer(j, '{', '}');
	case '[':
		return jcontainer(j, '[', ']');
	case '"':
		return jstring(j);
	case 't':
		return jlit(j, "true");
	case 'f':
		return jlit(j, "false");
	case 'n':
		return jlit(j, "null");
	default:
		return jnumber(j);
	}
}

/* 1 if s[0..n) is exactly one JSON object, no newline inside. */
static int
json_valid_object(const char *s, size_t n)
{
	struct jp j = { s, s + n, 0 };

	if (n == 0 || s[0] != '{' || memchr(s, '\n', n) != NULL)
		return 0;
	if (jvalue(&j) != 0)
		return 0;
	jws(&j);
	return j.p == j.end;
}

#endif
