/* SPDX-License-Identifier: ISC */
/*
 * csv: a small reader for comma-separated files with a header row
 * (RFC 4180 quoting: "a, b" and "" for a quote; a quoted field may not span
 * lines). Client-side helper: it reads from a FILE.
 */
#ifndef COEFCTL_CSV_H
#define COEFCTL_CSV_H

#include <stdio.h>

#define CSV_MAX_FIELDS	512

struct csv {
	FILE		*fp;
	char		*line;		/* current physical line (owned) */
	size_t		 cap;
	unsigned long	 lineno;	/* 1-based physical line number */
	int		 nf;		/* fields in the current row */
	char		*f[CSV_MAX_FIELDS];	/* into line, NUL-terminated */
};

/* csv_open: start reading fp (not closed by csv_close). */
void	csv_open(struct csv *c, FILE *fp);
/* csv_next: read the next non-empty row; 1 = row, 0 = EOF, -1 = error
 * (message in errbuf: unbalanced quote, too many fields, read error). */
int	csv_next(struct csv *c, char *errbuf, size_t errlen);
/* csv_close: release the line buffer. */
void	csv_close(struct csv *c);

#endif
