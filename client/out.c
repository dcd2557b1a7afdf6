/* SPDX-License-Identifier: ISC */
/*
 * out: how the client prints. Aligned tables (the same layout on and off a
 * terminal, so output is deterministic; colour only on a terminal and
 * never with NO_COLOR), numbers with "-" for the daemon's null, and JSON
 * documents through the daemon's writer (shortest round-trip numbers,
 * non-finite as null). It does not decide what to print.
 */
#include <sys/ioctl.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "coefctl.h"

struct out_table {
	int		  ncol;
	char		**head;
	char		 *align;	/* 'l' or 'r' per column */
	size_t		  nrow, cap;
	char		**cell;		/* nrow * ncol */
	enum out_style	 *style;
	int		  nohead;
};

/* Display width of UTF-8 text: code points, not bytes. */
static size_t
text_width(const char *s)
{
	size_t w = 0;

	for (; *s; s++)
		if (((unsigned char)*s & 0xc0) != 0x80)
			w++;
	return w;
}

/*
 * out_table_new: a table of ncol columns with headings head[] (NULL: no
 * heading row) and alignment align ("lrr...": 'l' left, 'r' right).
 * Returns NULL when out of memory. Free with out_table_free.
 */
struct out_table *
out_table_new(int ncol, const char *const *head, const char *align)
{
	struct out_table *t;
	int i;

	if ((t = calloc(1, sizeof(*t))) == NULL)
		return NULL;
	t->ncol = ncol;
	t->head = calloc((size_t)ncol, sizeof(*t->head));
	t->align = calloc((size_t)ncol + 1, 1);
	if (t->head == NULL || t->align == NULL)
		goto fail;
	t->nohead = head == NULL;
	for (i = 0; i < ncol; i++) {
		if ((t->head[i] = strdup(head != NULL ? head[i] : "")) == NULL)
			goto fail;
		t->align[i] = align != NULL && (int)strlen(align) > i ?
		    align[i] : 'l';
	}
	return t;
fail:
	out_table_free(t);
	return NULL;
}

/* out_table_free: the table and its cells; NULL is a no-op. */
void
out_table_free(struct out_table *t)
{
	size_t i;
	int c;

	if (t == NULL)
		return;
	for (i = 0; i < t->nrow * (size_t)t->ncol; i++)
		free(t->cell[i]);
	if (t->head != NULL)
		for (c = 0; c < t->ncol; c++)
			free(t->head[c]);
	free(t->head);
	free(t->align);
	free(t->cell);
	free(t->style);
	free(t);
}

/*
 * out_table_add: append a row of ncol cells (copied; NULL prints as "")
 * with optional per-cell styles (NULL: plain). Returns 0 or -1 when out
 * of memory (the table is unchanged).
 */
int
out_table_add(struct out_table *t, const char *const *cells,
    const enum out_style *style)
{
	size_t base = t->nrow * (size_t)t->ncol, nc;
	char **ncell;
	enum out_style *nst;
	int c;

	if (t->nrow == t->cap) {
		nc = t->cap ? t->cap * 2 : 16;
		if ((ncell = realloc(t->cell, nc * (size_t)t->ncol *
		    sizeof(*ncell))) == NULL)
			return -1;
		t->cell = ncell;
		if ((nst = realloc(t->style, nc * (size_t)t->ncol *
		    sizeof(*nst))) == NULL)
			return -1;
		t->style = nst;
		t->cap = nc;
	}
	for (c = 0; c < t->ncol; c++) {
		t->cell[base + (size_t)c] = strdup(cells[c] != NULL ?
		    cells[c] : "");
		t->style[base + (size_t)c] = style != NULL ? style[c] :
		    OUT_PLAIN;
		if (t->cell[base + (size_t)c] == NULL) {
			while (c-- > 0)
				free(t->cell[base + (size_t)c]);
			return -1;
		}
	}
	t->nrow++;
	return 0;
}

static void
put_cell(const struct ctl *c, FILE *fp, const char *s, enum out_style st,
    char align, size_t w, int last)
{
	size_t pad = w - text_width(s), i;

	if (align == 'r')
		for (i = 0; i < pad; i++)
			fputc(' ', fp);
	fprintf(fp, "%s%s%s", out_style_on(c, st), s, out_style_off(c, st));
	if (align != 'r' && !last)
		for (i = 0; i < pad; i++)
			fputc(' ', fp);
}

/*
 * out_table_print: the headings and rows, columns padded to their widest
 * cell and separated by two spaces; no trailing blanks. Headings are bold
 * with colour on.
 */
void
out_table_print(const struct ctl *c, const struct out_table *t, FILE *fp)
{
	size_t *w, r, cw;
	int k;

	if ((w = calloc((size_t)t->ncol, sizeof(*w))) == NULL)
		return;
	for (k = 0; k < t->ncol; k++) {
		w[k] = text_width(t->head[k]);
		for (r = 0; r < t->nrow; r++) {
			cw = text_width(t->cell[r * (size_t)t->ncol +
			    (size_t)k]);
			if (cw > w[k])
				w[k] = cw;
		}
	}
	for (k = 0; k < t->ncol && !t->nohead; k++) {
		if (k > 0)
			fputs("  ", fp);
		put_cell(c, fp, t->head[k], OUT_BOLD, t->align[k], w[k],
		    k == t->ncol - 1);
		if (k == t->ncol - 1)
			fputc('\n', fp);
	}
	for (r = 0; r < t->nrow; r++) {
		for (k = 0; k < t->ncol; k++) {
			size_t i = r * (size_t)t->ncol + (size_t)k;

			if (k > 0)
				fputs("  ", fp);
			put_cell(c, fp, t->cell[i], t->style[i], t->align[k],
			    w[k], k == t->ncol - 1);
		}
		fputc('\n', fp);
	}
	free(w);
}

/* out_num: v with digits significant digits (%g), "-" when not finite
 * (the daemon writes non-finite values as null). Returns buf. */
const char *
out_num(char *buf, size_t len, double v, int digits)
{
	if (!isfinite(v))
		snprintf(buf, len, "-");
	else
		snprintf(buf, len, "%.*g", digits, v == 0 ? 0.0 : v);
	return buf;
}

/* out_style_on: the SGR sequence starting style s, or "" without colour. */
const char *
out_style_on(const struct ctl *c, enum out_style s)
{
	if (!c->colour)
		return "";
	switch (s) {
	case OUT_BAD: return "\033[1;31m";
	case OUT_WARN: return "\033[33m";
	case OUT_GOOD: return "\033[32m";
	case OUT_BOLD: return "\033[1m";
	case OUT_PLAIN: break;
	}
	return "";
}

/* out_style_off: the SGR reset after style s, or "". */
const char *
out_style_off(const struct ctl *c, enum out_style s)
{
	return c->colour && s != OUT_PLAIN ? "\033[0m" : "";
}

/*
 * out_json_new: point j at a new buffer of cap bytes. Returns 0 or -1
 * when out of memory. The caller frees j->buf (out_json_print does).
 */
int
out_json_new(struct json *j, size_t cap)
{
	char *b;

	if ((b = malloc(cap)) == NULL) {
		ctl_err("out of memory");
		return -1;
	}
	json_init(j, b, cap);
	return 0;
}

/*
 * out_json_print: print j's document and a newline to stdout, flush, and
 * free its buffer. Returns 0, or CTL_EXIT_DATA when the document is
 * incomplete (overflow) or stdout fails.
 */
int
out_json_print(struct json *j)
{
	int rc = 0;

	if (json_finish(j) != 0) {
		ctl_err("JSON output incomplete (too large)");
		rc = CTL_EXIT_DATA;
	} else {
		fwrite(j->buf, 1, j->len, stdout);
		fputc('\n', stdout);
		if (fflush(stdout) != 0)
			rc = CTL_EXIT_DATA;
	}
	free(j->buf);
	j->buf = NULL;
	return rc;
}

/*
 * out_jr: print reply v as one JSON line on stdout without its top-level
 * member omit (NULL: none); the buffer grows until the text fits. Returns
 * 0 or CTL_EXIT_DATA.
 */
int
out_jr(const struct jr *v, const char *omit)
{
	struct json j;
	size_t cap;

	for (cap = 65536; cap <= ((size_t)1 << 30); cap *= 4) {
		if (out_json_new(&j, cap) != 0)
			return CTL_EXIT_DATA;
		if (jr_write(&j, v, omit) == 0)
			return out_json_print(&j);
		free(j.buf);
	}
	ctl_err("JSON output too large");
	return CTL_EXIT_DATA;
}

/* out_term_width: the width of the terminal on fd, or 80 when fd is not a
 * terminal or says 0. */
int
out_term_width(int fd)
{
	struct winsize ws;

	if (isatty(fd) && ioctl(fd, TIOCGWINSZ, &ws) == 0 && ws.ws_col > 0)
		return ws.ws_col;
	return 80;
}
