/* SPDX-License-Identifier: ISC */
/*
 * plot: `coefctl plot NAME`: the kept coefficient path and the one-step-
 * ahead R^2 from .history, one panel per series, drawn on the terminal
 * (Unicode braille, or ASCII) or written as a self-contained SVG document
 * (--svg FILE). Times on the x axis (index when a time is missing). It
 * draws what the daemon kept; it does not resample or smooth.
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "coefctl.h"
#include "proto.h"
#include "render.h"

#define PLOT_ROWS	6	/* terminal rows per panel */
#define SVG_WIDTH	800
#define SVG_PANEL	140	/* plot area height per panel, pixels */

static const char *const palette[] = {
	"#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b",
	"#e377c2", "#17becf"
};

struct series {
	const char	*name;
	double		*v;		/* n values (NaN: missing) */
	double		 lo, hi;	/* finite range of v */
	int		 nfinite;
};

struct plot {
	const char	*model;
	size_t		 n;		/* snapshots */
	double		*x;		/* time (or index) per snapshot */
	int		 timed;		/* x is Unix time */
	double		 xlo, xhi;
	int		 ns;
	struct series	*s;
};

static void
plot_free(struct plot *p)
{
	int i;

	for (i = 0; i < p->ns; i++)
		free(p->s[i].v);
	free(p->s);
	free(p->x);
}

/* History reply -> series: one per coefficient, then r2_pred. */
static int
plot_load(struct plot *p, const struct jr *r)
{
	const struct jr *f = jr_find(r, "features"), *h = jr_find(r, "history");
	size_t i;
	int k;

	memset(p, 0, sizeof(*p));
	p->model = jr_str(jr_find(r, "model"));
	p->n = jr_len(h);
	p->ns = (int)jr_len(f) + 1;
	if ((p->x = calloc(p->n + 1, sizeof(double))) == NULL ||
	    (p->s = calloc((size_t)p->ns, sizeof(*p->s))) == NULL)
		return -1;
	p->timed = 1;
	for (i = 0; i < p->n; i++) {
		const char *t = jr_str(jr_find(jr_at(h, i), "t"));

		if (t == NULL || proto_parse_time(t, strlen(t), &p->x[i]) != 0)
			p->timed = 0;
	}
	for (i = 0; i < p->n && !p->timed; i++)
		p->x[i] = (double)i;
	p->xlo = p->n ? p->x[0] : 0;
	p->xhi = p->n ? p->x[p->n - 1] : 1;
	if (!(p->xhi > p->xlo)) {
		p->xlo -= 0.5;
		p->xhi += 0.5;
	}
	for (k = 0; k < p->ns; k++) {
		struct series *s = &p->s[k];

		s->name = k < p->ns - 1 ? jr_str(jr_at(f, (size_t)k)) :
		    "r2_pred";
		if (s->name == NULL)
			s->name = "?";
		if ((s->v = calloc(p->n + 1, sizeof(double))) == NULL)
			return -1;
		s->lo = INFINITY;
		s->hi = -INFINITY;
		for (i = 0; i < p->n; i++) {
			const struct jr *e = jr_at(h, i);

			s->v[i] = k < p->ns - 1 ?
			    jr_num(jr_at(jr_find(e, "coef"), (size_t)k)) :
			    jr_num(jr_find(e, "r2_pred"));
			if (isfinite(s->v[i])) {
				s->nfinite++;
				s->lo = fmin(s->lo, s->v[i]);
				s->hi = fmax(s->hi, s->v[i]);
			}
		}
	}
	return 0;
}

/* A value range that is never empty: pad a flat series. */
static void
padded(const struct series *s, double *lo, double *hi)
{
	double pad;

	*lo = s->nfinite ? s->lo : 0;
	*hi = s->nfinite ? s->hi : 1;
	if (*hi > *lo)
		return;
	pad = fabs(*lo) > 0 ? fabs(*lo) * 1e-3 : 1e-3;
	*lo -= pad;
	*hi += pad;
}

/* --- terminal --- */

struct canvas {
	int		 cols, rows, sx, sy;	/* cells, pixels per cell */
	unsigned char	*px;			/* (cols*sx) x (rows*sy) */
};

static void
canvas_set(struct canvas *cv, long x, long y)
{
	long w = (long)cv->cols * cv->sx, h = (long)cv->rows * cv->sy;

	if (x >= 0 && x < w && y >= 0 && y < h)
		cv->px[y * w + x] = 1;
}

/* A straight line between two pixels, one pixel per step. */
static void
canvas_line(struct canvas *cv, double x0, double y0, double x1, double y1)
{
	double steps = fmax(fabs(x1 - x0), fabs(y1 - y0)), i;

	if (steps < 1)
		steps = 1;
	for (i = 0; i <= steps; i++)
		canvas_set(cv, lround(x0 + (x1 - x0) * i / steps),
		    lround(y0 + (y1 - y0) * i / steps));
}

/* Braille dot bit for the pixel (dx, dy) of a 2x4 cell (Unicode 3.0,
 * block U+2800: dots 1-3 and 7 down the left column, 4-6 and 8 right). */
static unsigned
braille_bit(int dx, int dy)
{
	static const unsigned char bit[4][2] = {
		{ 0x01, 0x08 }, { 0x02, 0x10 }, { 0x04, 0x20 }, { 0x40, 0x80 }
	};

	return bit[dy][dx];
}

/* The dots set in cell (cx, cy): braille bits, or 1 for any (ASCII). */
static unsigned
cell_bits(const struct canvas *cv, int cx, int cy, int utf8)
{
	long w = (long)cv->cols * cv->sx;
	unsigned bits = 0;
	int dx, dy;

	for (dy = 0; dy < cv->sy; dy++)
		for (dx = 0; dx < cv->sx; dx++)
			if (cv->px[((long)cy * cv->sy + dy) * w +
			    (long)cx * cv->sx + dx])
				bits |= utf8 ? braille_bit(dx, dy) : 1;
	return bits;
}

static void
put_cell(const struct canvas *cv, int cx, int cy, int utf8, FILE *fp)
{
	unsigned bits = cell_bits(cv, cx, cy, utf8), cp;

	if (!utf8) {
		fputc(bits ? '*' : ' ', fp);
		return;
	}
	cp = 0x2800 + bits;
	if (bits == 0) {
		fputc(' ', fp);
		return;
	}
	fputc((int)(0xe0 | cp >> 12), fp);
	fputc((int)(0x80 | (cp >> 6 & 0x3f)), fp);
	fputc((int)(0x80 | (cp & 0x3f)), fp);
}

static const char *
x_label(const struct plot *p, double x, char *buf, size_t len)
{
	if (p->timed && render_time(x, buf, len) == 0)
		return buf;
	snprintf(buf, len, "%.0f", x);
	return buf;
}

static int
term_panel(struct ctl *c, const struct plot *p, const struct series *s,
    int width, int rows, int utf8)
{
	struct canvas cv;
	char top[32], bot[32], last[32], a[40], b[40];
	double lo, hi, px, py, ppx = 0, ppy = 0;
	int lw, r, x, have = 0;
	size_t i;

	padded(s, &lo, &hi);
	out_num(top, sizeof(top), s->nfinite ? s->hi : NAN, 6);
	out_num(bot, sizeof(bot), s->nfinite ? s->lo : NAN, 6);
	lw = (int)(strlen(top) > strlen(bot) ? strlen(top) : strlen(bot));
	memset(&cv, 0, sizeof(cv));
	cv.cols = width - lw - 2;
	if (cv.cols < 10)
		cv.cols = 10;
	cv.rows = rows;
	cv.sx = utf8 ? 2 : 1;
	cv.sy = utf8 ? 4 : 1;
	if ((cv.px = calloc((size_t)(cv.cols * cv.sx) * (size_t)(cv.rows *
	    cv.sy), 1)) == NULL)
		return -1;
	for (i = 0; i < p->n; i++) {
		if (!isfinite(s->v[i])) {
			have = 0;
			continue;
		}
		px = (p->x[i] - p->xlo) / (p->xhi - p->xlo) *
		    (cv.cols * cv.sx - 1);
		py = (hi - s->v[i]) / (hi - lo) * (cv.rows * cv.sy - 1);
		if (have)
			canvas_line(&cv, ppx, ppy, px, py);
		else
			canvas_set(&cv, lround(px), lround(py));
		ppx = px;
		ppy = py;
		have = 1;
	}
	out_num(last, sizeof(last), p->n ? s->v[p->n - 1] : NAN, 7);
	printf("%s%s%s  last %s  min %s  max %s\n", out_style_on(c, OUT_BOLD),
	    s->name, out_style_off(c, OUT_BOLD), last, bot, top);
	for (r = 0; r < cv.rows; r++) {
		int end = cv.cols;

		/* No trailing blanks: stop after the last cell with a dot. */
		while (end > 0 && cell_bits(&cv, end - 1, r, utf8) == 0)
			end--;
		printf("%*s %s", lw, r == 0 ? top : r == cv.rows - 1 ? bot : "",
		    utf8 ? (r == 0 || r == cv.rows - 1 ? "\xe2\x94\xa4" :
		    "\xe2\x94\x82") : "|");
		for (x = 0; x < end; x++)
			put_cell(&cv, x, r, utf8, stdout);
		fputc('\n', stdout);
	}
	printf("%*s %s", lw, "", utf8 ? "\xe2\x94\x94" : "+");
	for (x = 0; x < cv.cols; x++)
		fputs(utf8 ? "\xe2\x94\x80" : "-", stdout);
	fputc('\n', stdout);
	x_label(p, p->n ? p->x[0] : 0, a, sizeof(a));
	x_label(p, p->n ? p->x[p->n - 1] : 0, b, sizeof(b));
	x = cv.cols + 1 - (int)strlen(a) - (int)strlen(b);
	if (x >= 1)
		printf("%*s %s%*s%s\n", lw, "", a, x, "", b);
	else	/* too narrow to put them at the two ends */
		printf("%*s %s to %s\n", lw, "", a, b);
	free(cv.px);
	return 0;
}

/* --- SVG --- */

/* Text with &, <, >, " escaped for XML. */
static void
xml_text(FILE *fp, const char *s)
{
	for (; *s; s++) {
		switch (*s) {
		case '&': fputs("&amp;", fp); break;
		case '<': fputs("&lt;", fp); break;
		case '>': fputs("&gt;", fp); break;
		case '"': fputs("&quot;", fp); break;
		default: fputc(*s, fp); break;
		}
	}
}

/* Tick step of 1, 2 or 5 times a power of ten giving about n ticks. */
static double
nice_step(double range, int n)
{
	double raw = range / n, mag = pow(10, floor(log10(raw))), f = raw / mag;

	return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * mag;
}

static void
svg_panel(FILE *fp, const struct plot *p, const struct series *s, int k,
    double x0, double y0, double w, double h)
{
	double lo, hi, step, t, px, py;
	char buf[48];
	size_t i;
	int first = 1, nt;

	padded(s, &lo, &hi);
	step = nice_step(hi - lo, 4);
	lo = floor(lo / step) * step;
	hi = ceil(hi / step) * step;
	fprintf(fp, "<g class=\"panel\" data-series=\"");
	xml_text(fp, s->name);
	fprintf(fp, "\">\n<text class=\"label\" x=\"%.2f\" y=\"%.2f\" "
	    "font-weight=\"bold\">", x0, y0 - 6);
	xml_text(fp, strcmp(s->name, "r2_pred") == 0 ?
	    "R\xc2\xb2 (one-step-ahead)" : s->name);
	fprintf(fp, "</text>\n<rect class=\"frame\" x=\"%.2f\" y=\"%.2f\" "
	    "width=\"%.2f\" height=\"%.2f\" fill=\"none\" stroke=\"#888\"/>\n",
	    x0, y0, w, h);
	for (nt = 0, t = lo; t <= hi + step / 2 && nt < 20; t = lo +
	    step * ++nt) {
		py = y0 + h - (t - lo) / (hi - lo) * h;
		fprintf(fp, "<line class=\"ytick\" x1=\"%.2f\" y1=\"%.2f\" "
		    "x2=\"%.2f\" y2=\"%.2f\" stroke=\"#ddd\"/>\n", x0, py,
		    x0 + w, py);
		fprintf(fp, "<text class=\"ytick\" x=\"%.2f\" y=\"%.2f\" "
		    "text-anchor=\"end\">%s</text>\n", x0 - 4, py + 4,
		    out_num(buf, sizeof(buf), fabs(t) < step * 1e-9 ? 0 : t,
		    6));
	}
	for (nt = 0; nt <= 2; nt++) {
		double xv = p->xlo + (p->xhi - p->xlo) * nt / 2;

		px = x0 + w * nt / 2;
		fprintf(fp, "<line class=\"xtick\" x1=\"%.2f\" y1=\"%.2f\" "
		    "x2=\"%.2f\" y2=\"%.2f\" stroke=\"#888\"/>\n", px, y0 + h,
		    px, y0 + h + 4);
		fprintf(fp, "<text class=\"xtick\" x=\"%.2f\" y=\"%.2f\" "
		    "text-anchor=\"%s\">%s</text>\n", px, y0 + h + 16,
		    nt == 0 ? "start" : nt == 1 ? "middle" : "end",
		    x_label(p, xv, buf, sizeof(buf)));
	}
	fprintf(fp, "<polyline class=\"series\" data-name=\"");
	xml_text(fp, s->name);
	fprintf(fp, "\" data-xmin=\"%.17g\" data-xmax=\"%.17g\" "
	    "data-ymin=\"%.17g\" data-ymax=\"%.17g\" fill=\"none\" "
	    "stroke=\"%s\" stroke-width=\"1.5\" points=\"", p->xlo, p->xhi,
	    lo, hi, palette[k % (int)(sizeof(palette) / sizeof(palette[0]))]);
	for (i = 0; i < p->n; i++) {
		if (!isfinite(s->v[i]))
			continue;
		px = x0 + (p->x[i] - p->xlo) / (p->xhi - p->xlo) * w;
		py = y0 + h - (s->v[i] - lo) / (hi - lo) * h;
		fprintf(fp, "%s%.3f,%.3f", first ? "" : " ", px, py);
		first = 0;
	}
	fprintf(fp, "\"/>\n</g>\n");
}

static int
svg_write(const struct plot *p, const char *path, int width, int ph)
{
	double left = 80, right = 24, top = 48, gap = 56;
	double w = width - left - right;
	int k, height = (int)(top + p->ns * (ph + gap));
	char a[48], b[48];
	FILE *fp;

	fp = strcmp(path, "-") == 0 ? stdout : fopen(path, "w");
	if (fp == NULL) {
		ctl_err("%s: %s", path, strerror(errno));
		return CTL_EXIT_DATA;
	}
	fprintf(fp, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
	    "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" "
	    "width=\"%d\" height=\"%d\" viewBox=\"0 0 %d %d\" "
	    "font-family=\"sans-serif\" font-size=\"11\">\n<title>", width,
	    height, width, height);
	xml_text(fp, p->model);
	fprintf(fp, ": coefficient path</title>\n<rect width=\"%d\" "
	    "height=\"%d\" fill=\"white\"/>\n<text class=\"title\" x=\"%.0f\" "
	    "y=\"22\" font-size=\"15\" font-weight=\"bold\">", width, height,
	    left);
	xml_text(fp, p->model);
	fprintf(fp, ": coefficients and one-step-ahead R\xc2\xb2 (%zu "
	    "snapshot%s, %s to %s)</text>\n", p->n, p->n == 1 ? "" : "s",
	    x_label(p, p->n ? p->x[0] : 0, a, sizeof(a)),
	    x_label(p, p->n ? p->x[p->n - 1] : 0, b, sizeof(b)));
	for (k = 0; k < p->ns; k++)
		svg_panel(fp, p, &p->s[k], k, left, top + k * (ph + gap) + 16,
		    w, ph);
	fprintf(fp, "</svg>\n");
	if (fp == stdout ? fflush(fp) != 0 : fclose(fp) != 0) {
		ctl_err("%s: %s", path, strerror(errno));
		return CTL_EXIT_DATA;
	}
	return 0;
}

/*
 * cmd_plot: `coefctl plot [-n N] [--svg FILE] [--width W] [--height H]
 * [--ascii] NAME`. Without --svg it draws on stdout; --json prints the
 * history document that would be drawn.
 */
int
cmd_plot(struct ctl *c, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "count", required_argument, NULL, 'n' },
		{ "svg", required_argument, NULL, 'S' },
		{ "width", required_argument, NULL, 'W' },
		{ "height", required_argument, NULL, 'H' },
		{ "ascii", no_argument, NULL, 'A' },
		{ NULL, 0, NULL, 0 }
	};
	unsigned long n = 0, width = 0, height = 0;
	const char *svg = NULL, *name;
	struct jr *r = NULL;
	struct plot p;
	int ch, st, rc, ascii = 0, k;

	while ((ch = ctl_getopt(c, argc, argv, "n:", lo, &st)) != -1) {
		switch (ch) {
		case 'n':
			if ((rc = query_count_arg(c, optarg, &n)) != 0)
				return rc;
			break;
		case 'S':
			svg = optarg;
			break;
		case 'W':
		case 'H':
			if ((rc = query_count_arg(c, optarg, ch == 'W' ?
			    &width : &height)) != 0)
				return rc;
			if ((ch == 'W' ? width : height) > 100000)
				return ctl_usage_error(c->usage, "--width and "
				    "--height are at most 100000");
			break;
		case 'A':
			ascii = 1;
			break;
		default:
			return ctl_usage_error(c->usage, NULL);
		}
	}
	if (st != 0)
		return ctl_done(st);
	if (argc - optind != 1)
		return ctl_usage_error(c->usage, "give one model NAME");
	name = argv[optind];
	if ((rc = ctl_model_arg(c, name)) != 0)
		return rc;
	if ((rc = query_history(c, name, n, &r)) != 0)
		return rc;
	if (c->json) {
		rc = out_jr(r, "line");
		jr_free(r);
		return rc;
	}
	if (plot_load(&p, r) != 0) {
		ctl_err("out of memory");
		rc = CTL_EXIT_DATA;
		goto done;
	}
	if (p.n == 0)
		ctl_warn("%s has no history yet (a snapshot is kept every "
		    "history_every records)", name);
	if (svg != NULL) {
		rc = svg_write(&p, svg, width ? (int)width : SVG_WIDTH,
		    height ? (int)height : SVG_PANEL);
	} else {
		for (k = 0; k < p.ns && rc == 0; k++) {
			if (k > 0)
				fputc('\n', stdout);
			if (term_panel(c, &p, &p.s[k], width ? (int)width :
			    out_term_width(STDOUT_FILENO), height ?
			    (int)height : PLOT_ROWS, c->utf8 && !ascii) != 0) {
				ctl_err("out of memory");
				rc = CTL_EXIT_DATA;
			}
		}
	}
done:
	plot_free(&p);
	jr_free(r);
	return rc;
}
