/* SPDX-License-Identifier: ISC */
/*
 * feed: `coefctl feed NAME [FILE]`: stream CSV rows to a model as named
 * records (MODEL [@TIME] field=value ... target=value). Columns are matched
 * to the model's fields by header name, so their order does not matter.
 * Records are pipelined in large writes while error replies are read as
 * they come; a final .sync confirms the counts. A progress line goes to
 * stderr when it is a terminal. It does not retry rejected rows.
 */
#include <sys/stat.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "coefctl.h"
#include "csv.h"
#include "err.h"
#include "limits.h"
#include "proto.h"

#define FEED_FLUSH	(256 * 1024)	/* bytes per write */
#define FEED_KEEP_ERRS	5		/* errors kept per source */
#define FEED_DRAW_S	0.1		/* progress redraw interval */
/*
 * CSV line numbers are kept for the last FEED_RING records sent. A refusal
 * comes back once the daemon reached that record; the records in between
 * sit in socket buffers (a few MB at most), far fewer than FEED_RING.
 */
#define FEED_RING	((size_t)1 << 20)

struct feed_err {
	unsigned long	 line;		/* CSV line */
	char		 reason[32];
	char		 detail[200];
};

struct feed {
	struct ctl	*c;
	const char	*model;
	const char	*file;		/* for messages */
	const char	*timecol;
	int		 quiet;
	FILE		*fp;
	double		 size;		/* bytes, 0 when unknown */
	struct csv	 cv;
	int		 ncol;
	char		*col[CSV_MAX_FIELDS];
	int		 nf;		/* fields; map[nf] is the target */
	char		 field[PROTO_MAX_VALUES][FIELD_NAME_MAX + 1];
	int		 map[PROTO_MAX_VALUES];
	int		 timec;
	struct conn	 k;
	char		*ob;		/* pending output */
	size_t		 olen, ocap;
	uint64_t	 first;		/* connection line of the first record */
	unsigned long	*lmap;		/* record i -> CSV line (a ring) */
	size_t		 nmap, mapcap;
	unsigned long	 rows, sent, unparsable, rejected;
	struct feed_err	 lerr[FEED_KEEP_ERRS], derr[FEED_KEEP_ERRS];
	int		 nlerr, nderr;
	int		 synced;
	double		 acc, rej;	/* from the .sync reply */
	double		 t0, drawn;
	int		 bar;		/* progress line shown */
};

static double
now_s(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

static void
keep_err(struct feed_err *e, int *n, unsigned long line, const char *reason,
    const char *detail)
{
	if (*n >= FEED_KEEP_ERRS)
		return;
	e[*n].line = line;
	snprintf(e[*n].reason, sizeof(e[*n].reason), "%s", reason);
	snprintf(e[*n].detail, sizeof(e[*n].detail), "%s", detail);
	(*n)++;
}

static void
progress(struct feed *f, int final)
{
	double now = now_s(), el = now - f->t0, pos;
	char bar[32];
	int i, w = 20, fill;

	if (!f->c->err_tty || f->quiet)
		return;
	if (final) {
		if (f->bar)
			fputs("\r\033[K", stderr);
		f->bar = 0;
		return;
	}
	if (now - f->drawn < FEED_DRAW_S)
		return;
	f->drawn = now;
	f->bar = 1;
	fprintf(stderr, "\r\033[Kfeed %s: %lu rows  %.0f/s  %lu rejected",
	    f->model, f->rows, el > 0 ? f->rows / el : 0.0,
	    f->rejected + f->unparsable);
	if (f->size > 0 && (pos = (double)ftello(f->fp)) >= 0) {
		fill = (int)(w * pos / f->size);
		fill = fill > w ? w : fill;
		for (i = 0; i < w; i++)
			bar[i] = i < fill ? '#' : '-';
		bar[w] = '\0';
		fprintf(stderr, "  [%s] %3.0f%%", bar, fmin(100, 100 * pos /
		    f->size));
	}
	fflush(stderr);
}

/* One reply line during the stream: an error for a record, or the sync. */
static int
handle_reply(struct feed *f, const char *text, size_t len)
{
	struct jr *r;
	const char *why, *d;
	char err[160];
	double line;
	uint64_t idx;

	if (jr_parse(text, len, &r, err, sizeof(err)) != 0) {
		ctl_err("unreadable reply from %s: %s", f->k.where, err);
		return CTL_EXIT_PROTO;
	}
	if (jr_find(r, "sync") != NULL) {
		f->synced = 1;
		f->acc = jr_num(jr_find(jr_find(r, "sync"), "accepted"));
		f->rej = jr_num(jr_find(jr_find(r, "sync"), "rejected"));
	} else if ((why = conn_is_error(r)) != NULL) {
		line = jr_num(jr_find(r, "line"));
		d = jr_str(jr_find(r, "detail"));
		f->rejected++;
		idx = line >= (double)f->first ? (uint64_t)line - f->first :
		    UINT64_MAX;
		keep_err(f->derr, &f->nderr, idx < f->nmap &&
		    f->nmap - idx <= f->mapcap ? f->lmap[idx % f->mapcap] : 0,
		    why, d != NULL ? d : "");
	}
	jr_free(r);
	return 0;
}

/* Read every reply already here (wait_ms 0) or until the sync arrives. */
static int
drain(struct feed *f, int until_sync)
{
	char *text;
	size_t len;
	int rc;

	for (;;) {
		if (until_sync && f->synced)
			return 0;
		rc = conn_line(&f->k, &text, &len, until_sync ? -1 : 0);
		if (rc == 2 && !until_sync)
			return 0;
		if (rc == 2)
			continue;
		if (rc == 0) {
			ctl_err("%s closed the connection", f->k.where);
			return CTL_EXIT_PROTO;
		}
		if (rc < 0)
			return CTL_EXIT_PROTO;
		if ((rc = handle_reply(f, text, len)) != 0)
			return rc;
	}
}

static int
flush_out(struct feed *f)
{
	int rc;

	if (f->olen > 0 && conn_write(&f->k, f->ob, f->olen) != 0)
		return CTL_EXIT_UNREACHABLE;
	f->olen = 0;
	if ((rc = drain(f, 0)) != 0)
		return rc;
	progress(f, 0);
	return 0;
}

static int
out_append(struct feed *f, const char *s, size_t n)
{
	char *nb;
	size_t nc;

	if (f->ocap - f->olen < n) {
		nc = f->ocap ? f->ocap : FEED_FLUSH * 2;
		while (nc - f->olen < n)
			nc *= 2;
		if ((nb = realloc(f->ob, nc)) == NULL) {
			ctl_err("out of memory");
			return -1;
		}
		f->ob = nb;
		f->ocap = nc;
	}
	memcpy(f->ob + f->olen, s, n);
	f->olen += n;
	return 0;
}

/* Cell text without surrounding blanks (in place). */
static char *
trim(char *s)
{
	size_t n;

	while (*s == ' ' || *s == '\t')
		s++;
	n = strlen(s);
	while (n > 0 && (s[n - 1] == ' ' || s[n - 1] == '\t'))
		s[--n] = '\0';
	return s;
}

/*
 * The model's fields and target, from the reply to `.open NAME` (the
 * model object of `.get`; the daemon creates the model from its
 * configuration first if it does not exist yet).
 */
static int
get_fields(struct feed *f)
{
	char line[MODEL_NAME_MAX + 32];
	const struct jr *fl;
	struct jr *r = NULL;
	const char *why;
	size_t i;
	int rc;

	snprintf(line, sizeof(line), ".open %s", f->model);
	if ((rc = conn_send(&f->k, line)) != 0 ||
	    (rc = conn_reply(&f->k, &r)) != 0)
		return rc;
	if ((why = conn_is_error(r)) != NULL) {
		if (strcmp(why, "unknown_model") == 0) {
			ctl_err("no model %s, and no [model] or [template] "
			    "section of the daemon's configuration makes one",
			    f->model);
			jr_free(r);
			return CTL_EXIT_NOTFOUND;
		}
		conn_print_error(r);
		rc = conn_error_exit(why);
		jr_free(r);
		return rc;
	}
	fl = jr_find(r, "fields");
	if (fl == NULL || jr_str(jr_find(r, "target")) == NULL) {
		ctl_err("the daemon does not say which fields %s takes (an "
		    "older coefd?)", f->model);
		jr_free(r);
		return CTL_EXIT_PROTO;
	}
	f->nf = (int)jr_len(fl);
	if (f->nf + 1 > PROTO_MAX_VALUES) {
		jr_free(r);
		ctl_err("%s has too many fields", f->model);
		return CTL_EXIT_PROTO;
	}
	for (i = 0; i < (size_t)f->nf; i++)
		snprintf(f->field[i], sizeof(f->field[i]), "%s",
		    jr_str(jr_at(fl, i)) != NULL ? jr_str(jr_at(fl, i)) : "");
	snprintf(f->field[f->nf], sizeof(f->field[f->nf]), "%s",
	    jr_str(jr_find(r, "target")));
	jr_free(r);
	return 0;
}

static int
find_col(const struct feed *f, const char *name)
{
	int i;

	for (i = 0; i < f->ncol; i++)
		if (strcmp(f->col[i], name) == 0)
			return i;
	return -1;
}

/* Header row -> column names; fields -> columns. Exit status or 0. */
static int
map_columns(struct feed *f)
{
	char miss[2048] = "", extra[2048] = "", all[2048] = "";
	int i, k, used;

	f->timec = -1;
	if (f->timecol != NULL && (f->timec = find_col(f, f->timecol)) < 0) {
		ctl_err("%s: no column named '%s' (for --time)", f->file,
		    f->timecol);
		return CTL_EXIT_DATA;
	}
	for (k = 0; k <= f->nf; k++) {
		f->map[k] = find_col(f, f->field[k]);
		if (k < f->nf)
			snprintf(all + strlen(all), sizeof(all) - strlen(all),
			    "%s%s", k ? " " : "", f->field[k]);
		if (f->map[k] < 0)
			snprintf(miss + strlen(miss), sizeof(miss) -
			    strlen(miss), "%s%s", miss[0] ? ", " : "",
			    f->field[k]);
	}
	if (miss[0] != '\0') {
		ctl_err("%s: no column for %s (model %s takes fields %s and "
		    "target %s)", f->file, miss, f->model, all,
		    f->field[f->nf]);
		return CTL_EXIT_DATA;
	}
	for (i = 0; i < f->ncol; i++) {
		used = i == f->timec;
		for (k = 0; k <= f->nf && !used; k++)
			used = f->map[k] == i;
		if (!used)
			snprintf(extra + strlen(extra), sizeof(extra) -
			    strlen(extra), "%s%s", extra[0] ? ", " : "",
			    f->col[i]);
	}
	if (extra[0] != '\0' && !f->quiet)
		ctl_warn("%s: ignoring column%s %s (not a field of %s)",
		    f->file, strchr(extra, ',') ? "s" : "", extra, f->model);
	return 0;
}

static int
read_header(struct feed *f)
{
	char err[160];
	int i, rc;

	if ((rc = csv_next(&f->cv, err, sizeof(err))) <= 0) {
		ctl_err("%s:%lu: %s", f->file, f->cv.lineno, rc == 0 ?
		    "no header row" : err);
		return CTL_EXIT_DATA;
	}
	f->ncol = f->cv.nf;
	for (i = 0; i < f->cv.nf; i++) {
		if ((f->col[i] = strdup(trim(f->cv.f[i]))) == NULL) {
			ctl_err("out of memory");
			return CTL_EXIT_DATA;
		}
		if (f->col[i][0] == '\0' || find_col(f, f->col[i]) < i) {
			ctl_err("%s:%lu: column %d: %s", f->file, f->cv.lineno,
			    i + 1, f->col[i][0] ? "duplicate name" : "no name");
			f->ncol = i + 1;
			return CTL_EXIT_DATA;
		}
	}
	return 0;
}

/* One data row to a record line in the output buffer; 1 when the row
 * cannot be used (recorded), -1 out of memory. */
static int
add_row(struct feed *f)
{
	char line[PROTO_LINE_DEFAULT], msg[200];
	size_t pos;
	double v;
	int k, n, rc;
	const char *cell;
	unsigned long *nm;

	if (f->cv.nf != f->ncol) {
		snprintf(msg, sizeof(msg), "%d fields, the header has %d",
		    f->cv.nf, f->ncol);
		goto bad;
	}
	pos = (size_t)snprintf(line, sizeof(line), "%s", f->model);
	if (f->timec >= 0) {
		cell = trim(f->cv.f[f->timec]);
		if (proto_parse_time(cell, strlen(cell), &v) != 0) {
			snprintf(msg, sizeof(msg), "column '%s': not a time "
			    "(Unix seconds or RFC 3339): '%.40s'", f->timecol,
			    cell);
			goto bad;
		}
		pos += (size_t)snprintf(line + pos, sizeof(line) - pos, " @%s",
		    cell);
	}
	for (k = 0; k <= f->nf; k++) {
		cell = trim(f->cv.f[f->map[k]]);
		if ((rc = proto_parse_number(cell, strlen(cell), &v)) != 0) {
			snprintf(msg, sizeof(msg), "column '%s': %s: '%.40s'",
			    f->field[k], cell[0] == '\0' ? "empty" :
			    rc == E_NUMERIC ? "not a finite number" :
			    "not a number", cell);
			goto bad;
		}
		n = snprintf(line + pos, sizeof(line) - pos, " %s=%s",
		    f->field[k], cell);
		if (n < 0 || (size_t)n >= sizeof(line) - pos - 1) {
			snprintf(msg, sizeof(msg), "row longer than %d bytes",
			    PROTO_LINE_DEFAULT);
			goto bad;
		}
		pos += (size_t)n;
	}
	line[pos++] = '\n';
	/* Grow until FEED_RING, then wrap: every index below the capacity
	 * sits at its own slot, so growing never moves an entry. */
	if (f->nmap == f->mapcap && f->mapcap < FEED_RING) {
		size_t nc = f->mapcap ? f->mapcap * 2 : 4096;

		if ((nm = realloc(f->lmap, nc * sizeof(*nm))) == NULL)
			return -1;
		f->lmap = nm;
		f->mapcap = nc;
	}
	if (out_append(f, line, pos) != 0)
		return -1;
	f->lmap[f->nmap++ % f->mapcap] = f->cv.lineno;
	f->k.line++;
	f->sent++;
	return 0;
bad:
	f->unparsable++;
	keep_err(f->lerr, &f->nlerr, f->cv.lineno, "unparsable", msg);
	return 1;
}

static int
cmp_err(const void *a, const void *b)
{
	const struct feed_err *x = a, *y = b;

	return x->line < y->line ? -1 : x->line > y->line;
}

static int
summary(struct feed *f, double secs)
{
	struct feed_err all[2 * FEED_KEEP_ERRS];
	unsigned long accepted = f->sent - f->rejected;
	struct json j;
	int i, n = 0, rc = 0;

	for (i = 0; i < f->nlerr; i++)
		all[n++] = f->lerr[i];
	for (i = 0; i < f->nderr; i++)
		all[n++] = f->derr[i];
	qsort(all, (size_t)n, sizeof(all[0]), cmp_err);
	for (i = 0; i < n; i++)
		ctl_err("%s:%lu: %s (%s)", f->file, all[i].line,
		    all[i].detail, all[i].reason);
	if (f->rejected + f->unparsable > (unsigned long)n)
		ctl_err("... %lu more rows not used",
		    f->rejected + f->unparsable - (unsigned long)n);
	if (f->c->json) {
		if (out_json_new(&j, 8192) != 0)
			return CTL_EXIT_DATA;
		json_obj_begin(&j);
		json_key(&j, "model");
		json_str(&j, f->model);
		json_key(&j, "file");
		json_str(&j, f->file);
		json_key(&j, "rows");
		json_uint(&j, f->rows);
		json_key(&j, "sent");
		json_uint(&j, f->sent);
		json_key(&j, "accepted");
		json_uint(&j, accepted);
		json_key(&j, "rejected");
		json_uint(&j, f->rejected);
		json_key(&j, "unparsable");
		json_uint(&j, f->unparsable);
		json_key(&j, "seconds");
		json_num(&j, secs);
		json_key(&j, "errors");
		json_arr_begin(&j);
		for (i = 0; i < n; i++) {
			json_obj_begin(&j);
			json_key(&j, "line");
			json_uint(&j, all[i].line);
			json_key(&j, "error");
			json_str(&j, all[i].reason);
			json_key(&j, "detail");
			json_str(&j, all[i].detail);
			json_obj_end(&j);
		}
		json_arr_end(&j);
		json_obj_end(&j);
		rc = out_json_print(&j);
	} else {
		printf("%s: %lu rows, %lu accepted, %lu rejected by the daemon, "
		    "%lu unreadable (%.3g s, %.0f rows/s)\n", f->model, f->rows,
		    accepted, f->rejected, f->unparsable, secs,
		    secs > 0 ? f->rows / secs : 0.0);
	}
	if (rc == 0 && f->rejected + f->unparsable > 0)
		rc = CTL_EXIT_DATA;
	return rc;
}

static int
feed_args(struct feed *f, int argc, char **argv)
{
	static const struct option lo[] = {
		CTL_COMMON_LONGOPTS,
		{ "time", required_argument, NULL, 't' },
		{ "quiet", no_argument, NULL, 'q' },
		{ NULL, 0, NULL, 0 }
	};
	int ch, st;

	while ((ch = ctl_getopt(f->c, argc, argv, "q", lo, &st)) != -1) {
		if (ch == 't')
			f->timecol = optarg;
		else if (ch == 'q')
			f->quiet = 1;
		else
			return ctl_usage_error(f->c->usage, NULL);
	}
	if (st != 0)
		return st;
	if (argc - optind < 1 || argc - optind > 2)
		return ctl_usage_error(f->c->usage, "give a model NAME and at "
		    "most one FILE");
	f->model = argv[optind];
	f->file = argc - optind == 2 ? argv[optind + 1] : "-";
	return ctl_model_arg(f->c, f->model);
}

/*
 * cmd_feed: `coefctl feed [--time COLUMN] [-q] NAME [FILE]`. Returns 0 when
 * every row was accepted, CTL_EXIT_DATA when any row could not be read or
 * was rejected by the daemon (the first few are listed with their line
 * numbers), or the status of a connection or protocol failure.
 */
int
cmd_feed(struct ctl *c, int argc, char **argv)
{
	struct feed *f;
	struct stat sb;
	char err[160];
	int rc, i;

	if ((f = calloc(1, sizeof(*f))) == NULL) {
		ctl_err("out of memory");
		return CTL_EXIT_DATA;
	}
	f->c = c;
	f->k.fd = -1;
	if ((rc = feed_args(f, argc, argv)) != 0) {
		free(f);
		return ctl_done(rc);
	}
	if (strcmp(f->file, "-") == 0) {
		f->fp = stdin;
		f->file = "stdin";
	} else if ((f->fp = fopen(f->file, "r")) == NULL) {
		ctl_err("%s: %s", f->file, strerror(errno));
		free(f);
		return CTL_EXIT_DATA;
	}
	if (fstat(fileno(f->fp), &sb) == 0 && S_ISREG(sb.st_mode))
		f->size = (double)sb.st_size;
	csv_open(&f->cv, f->fp);
	if ((rc = read_header(f)) != 0 || (rc = conn_open(&f->k, c)) != 0 ||
	    (rc = get_fields(f)) != 0 || (rc = map_columns(f)) != 0)
		goto done;
	/* A sync first resets the connection's counters (an .auth or the
	 * probe above are not records, but keep the count exact anyway). */
	if ((rc = conn_send(&f->k, ".sync")) != 0 ||
	    (rc = drain(f, 1)) != 0)
		goto done;
	f->synced = 0;
	f->first = f->k.line + 1;
	f->t0 = now_s();
	for (;;) {
		rc = csv_next(&f->cv, err, sizeof(err));
		if (rc == 0)
			break;
		f->rows++;
		if (rc < 0) {
			if (ferror(f->fp)) {
				ctl_err("%s: %s", f->file, err);
				rc = CTL_EXIT_DATA;
				goto done;
			}
			f->unparsable++;
			keep_err(f->lerr, &f->nlerr, f->cv.lineno, "unparsable",
			    err);
			continue;
		}
		if (add_row(f) < 0) {
			ctl_err("out of memory");
			rc = CTL_EXIT_DATA;
			goto done;
		}
		if (f->olen >= FEED_FLUSH && (rc = flush_out(f)) != 0)
			goto done;
	}
	if (out_append(f, ".sync\n", 6) != 0) {
		rc = CTL_EXIT_DATA;
		goto done;
	}
	f->k.line++;
	if ((rc = flush_out(f)) != 0 || (rc = drain(f, 1)) != 0)
		goto done;
	progress(f, 1);
	if (f->acc + f->rej != (double)f->sent ||
	    f->rej != (double)f->rejected) {
		ctl_err("the daemon counted %.0f accepted and %.0f rejected, "
		    "but %lu were sent and %lu refusals seen", f->acc, f->rej,
		    f->sent, f->rejected);
		rc = CTL_EXIT_PROTO;
		goto done;
	}
	rc = summary(f, now_s() - f->t0);
done:
	progress(f, 1);
	conn_close(&f->k);
	csv_close(&f->cv);
	if (f->fp != stdin)
		fclose(f->fp);
	for (i = 0; i < f->ncol; i++)
		free(f->col[i]);
	free(f->ob);
	free(f->lmap);
	free(f);
	return rc;
}
