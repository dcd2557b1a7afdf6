/* SPDX-License-Identifier: ISC */
/*
 * csv: split comma-separated rows into fields in place. Handles RFC 4180
 * quoting within one physical line, CRLF line ends, a UTF-8 byte-order mark
 * on the first line, and skips empty lines. It does not convert values.
 */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "csv.h"

/* csv_open: reset c to read rows from fp. */
void
csv_open(struct csv *c, FILE *fp)
{
	memset(c, 0, sizeof(*c));
	c->fp = fp;
}

/* csv_close: free the line buffer; the FILE stays open. */
void
csv_close(struct csv *c)
{
	free(c->line);
	c->line = NULL;
	c->cap = 0;
}

/* Split c->line into c->f; returns 0 or -1 with a message. */
static int
split(struct csv *c, char *errbuf, size_t errlen)
{
	char *r = c->line, *w = c->line;

	c->nf = 0;
	for (;;) {
		if (c->nf == CSV_MAX_FIELDS) {
			snprintf(errbuf, errlen, "more than %d fields",
			    CSV_MAX_FIELDS);
			return -1;
		}
		c->f[c->nf++] = w;
		if (*r == '"') {
			r++;
			for (;;) {
				if (*r == '\0') {
					snprintf(errbuf, errlen,
					    "unbalanced quote in field %d",
					    c->nf);
					return -1;
				}
				if (*r == '"') {
					if (r[1] == '"') {
						*w++ = '"';
						r += 2;
						continue;
					}
					r++;
					break;
				}
				*w++ = *r++;
			}
			if (*r != ',' && *r != '\0') {
				snprintf(errbuf, errlen,
				    "text after closing quote in field %d",
				    c->nf);
				return -1;
			}
		} else {
			while (*r != ',' && *r != '\0')
				*w++ = *r++;
		}
		if (*r == '\0') {
			*w = '\0';
			return 0;
		}
		*w++ = '\0';
		r++;
	}
}

/*
 * csv_next: read the next non-empty physical line and split it. Returns 1
 * with c->nf/c->f set, 0 at end of file, -1 on a malformed row or read
 * error (errbuf says which; c->lineno names the line).
 */
int
csv_next(struct csv *c, char *errbuf, size_t errlen)
{
	ssize_t n;

	for (;;) {
		errno = 0;
		n = getline(&c->line, &c->cap, c->fp);
		if (n < 0) {
			if (errno != 0 || ferror(c->fp)) {
				snprintf(errbuf, errlen, "read error: %s",
				    strerror(errno));
				return -1;
			}
			return 0;
		}
		c->lineno++;
		while (n > 0 && (c->line[n - 1] == '\n' ||
		    c->line[n - 1] == '\r'))
			c->line[--n] = '\0';
		if (c->lineno == 1 && n >= 3 &&
		    memcmp(c->line, "\xef\xbb\xbf", 3) == 0)
			memmove(c->line, c->line + 3, (size_t)(n -= 3) + 1);
		if ((size_t)n != strlen(c->line)) {
			snprintf(errbuf, errlen, "NUL byte in line");
			return -1;
		}
		if (n == 0)
			continue;
		return split(c, errbuf, errlen) == 0 ? 1 : -1;
	}
}
