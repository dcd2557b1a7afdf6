/* SPDX-License-Identifier: ISC */
/*
 * fit: `coefctl fit`, the offline fit of a CSV file through the same engine
 * the daemon runs (model_step, one record at a time, in file order), so a
 * backtest here reproduces what the daemon would have served. Prints the
 * model as a table or as the daemon's JSON shape; --trace writes the
 * per-record path as CSV. No daemon is needed.
 */
#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "coefctl.h"
#include "csv.h"
#include "err.h"
#include "json.h"
#include "limits.h"
#include "model.h"
#include "proto.h"
#include "render.h"
#include "terms.h"

struct fit_args {
	const char	*file;
	const char	*target;
	const char	*timecol;
	const char	*weightcol;
	const char	*name;
	const char	*trace;
	const char	*terms;
	double		 lambda;
	double		 gate;
	double		 tau;
	double		 delta;
	int		 intercept;
	int		 json;
	int		 delta_set;
};

struct fit_cols {
	int	 ncol;
	char	*names[CSV_MAX_FIELDS];
	int	 target, timec, weightc;
	int	 k;			/* features */
	int	 feat[RLS_MAX_P];	/* column index of each feature */
	const char *coef_names[RLS_MAX_P];
	const char *fields[RLS_MAX_P + 1];	/* features, then target */
};

static const char fit_usage[] =
"usage: coefctl fit [--lambda L | --tau DURATION --time COLUMN]\n"
"                   [--target COLUMN] [--weight COLUMN] [--no-intercept]\n"
"                   [--terms LIST] [--delta D] [--gate Z] [--name NAME]\n"
"                   [--json] [--trace OUT.csv]\n"
"                   FILE.csv | -\n"
"\n"
"Fit a linear model to a CSV file with a header row, one record at a time\n"
"through coefd's engine (no daemon needed). The target is the first column\n"
"unless --target names one; every other numeric column is a feature.\n"
"\n"
"  --lambda L       forgetting factor per record, 0 < L <= 1 (default 1:\n"
"                   ordinary least squares over the whole file)\n"
"  --tau DURATION   memory as a time constant (e.g. 90s, 6h, 7d); needs\n"
"                   --time; lambda = exp(-dt/tau) per record\n"
"  --time COLUMN    record times: Unix seconds or RFC 3339\n"
"  --weight COLUMN  per-record weights (>= 0)\n"
"  --no-intercept   fit through the origin\n"
"  --terms LIST     derived terms of the feature columns, e.g.\n"
"                   \"raw, raw^2, raw*temp, prev(raw)\" (see TERMS.md)\n"
"  --gate Z         gate records whose standardised one-step-ahead error\n"
"                   exceeds Z (default off: plain least squares; the\n"
"                   daemon's default is 5, use it to backtest)\n"
"  --delta D        regularised-forgetting strength (default 1e-6)\n"
"  --name NAME      model name shown in the output (default: file name)\n"
"  --json           print one JSON object (the daemon's model keys)\n"
"  --trace FILE     write the per-record path (coefficients, one-step-ahead\n"
"                   error, R^2, detector states) as CSV\n";

static int
parse_args(int argc, char **argv, struct fit_args *a)
{
	static const struct option lo[] = {
		{ "lambda", required_argument, NULL, 'l' },
		{ "tau", required_argument, NULL, 'T' },
		{ "time", required_argument, NULL, 't' },
		{ "weight", required_argument, NULL, 'w' },
		{ "target", required_argument, NULL, 'y' },
		{ "no-intercept", no_argument, NULL, 'N' },
		{ "delta", required_argument, NULL, 'd' },
		{ "name", required_argument, NULL, 'n' },
		{ "json", no_argument, NULL, 'j' },
		{ "trace", required_argument, NULL, 'r' },
		{ "terms", required_argument, NULL, 'x' },
		{ "gate", required_argument, NULL, 'g' },
		{ "help", no_argument, NULL, 'h' },
		{ NULL, 0, NULL, 0 }
	};
	int ch;

	memset(a, 0, sizeof(*a));
	a->lambda = 1;
	a->intercept = 1;
	a->gate = INFINITY;
	optind = 0;	/* glibc: re-initialise (argument order too) */
	while ((ch = getopt_long(argc, argv, "h", lo, NULL)) != -1) {
		switch (ch) {
		case 'l':
			if (ctl_number(optarg, &a->lambda) != 0 ||
			    !(a->lambda > 0 && a->lambda <= 1))
				return ctl_usage_error(fit_usage,
				    "--lambda must be a number in (0, 1]");
			break;
		case 'T':
			if (ctl_duration(optarg, &a->tau) != 0)
				return ctl_usage_error(fit_usage,
				    "--tau must be a duration like 90s, 6h, 7d");
			break;
		case 't':
			a->timecol = optarg;
			break;
		case 'w':
			a->weightcol = optarg;
			break;
		case 'y':
			a->target = optarg;
			break;
		case 'N':
			a->intercept = 0;
			break;
		case 'd':
			if (ctl_number(optarg, &a->delta) != 0 ||
			    !(a->delta >= 0))
				return ctl_usage_error(fit_usage,
				    "--delta must be a number >= 0");
			a->delta_set = 1;
			break;
		case 'n':
			a->name = optarg;
			break;
		case 'j':
			a->json = 1;
			break;
		case 'r':
			a->trace = optarg;
			break;
		case 'x':
			a->terms = optarg;
			break;
		case 'g':
			if (ctl_number(optarg, &a->gate) != 0 || !(a->gate > 0))
				return ctl_usage_error(fit_usage,
				    "--gate must be a number > 0");
			break;
		case 'h':
			fputs(fit_usage, stdout);
			return -1;
		default:
			return ctl_usage_error(fit_usage, NULL);
		}
	}
	if (argc - optind != 1)
		return ctl_usage_error(fit_usage, "give exactly one FILE (or -)");
	a->file = argv[optind];
	if (a->tau > 0 && a->timecol == NULL)
		return ctl_usage_error(fit_usage, "--tau needs --time COLUMN");
	if (a->name == NULL) {
		const char *s = strrchr(a->file, '/');

		a->name = strcmp(a->file, "-") == 0 ? "stdin" :
		    s != NULL ? s + 1 : a->file;
	}
	return 0;
}

static int
find_col(const struct fit_cols *c, const char *name)
{
	int i;

	for (i = 0; i < c->ncol; i++)
		if (strcmp(c->names[i], name) == 0)
			return i;
	return -1;
}

/* Header: names must be present and unique; resolve the special columns. */
static int
read_header(struct csv *cv, const struct fit_args *a, struct fit_cols *c)
{
	char err[160];
	int i, k, rc;

	if ((rc = csv_next(cv, err, sizeof(err))) <= 0) {
		ctl_err("%s:%lu: %s", a->file, cv->lineno,
		    rc == 0 ? "no header row" : err);
		return -1;
	}
	memset(c, 0, sizeof(*c));
	c->ncol = cv->nf;
	for (i = 0; i < cv->nf; i++) {
		if (cv->f[i][0] == '\0') {
			ctl_err("%s:%lu: column %d has no name", a->file,
			    cv->lineno, i + 1);
			return -1;
		}
		for (k = 0; k < i; k++)
			if (strcmp(c->names[k], cv->f[i]) == 0) {
				ctl_err("%s:%lu: duplicate column name '%s'",
				    a->file, cv->lineno, cv->f[i]);
				return -1;
			}
		if ((c->names[i] = strdup(cv->f[i])) == NULL)
			return -1;
	}
	c->target = a->target != NULL ? find_col(c, a->target) : 0;
	c->timec = a->timecol != NULL ? find_col(c, a->timecol) : -1;
	c->weightc = a->weightcol != NULL ? find_col(c, a->weightcol) : -1;
	if (c->target < 0 || (a->timecol && c->timec < 0) ||
	    (a->weightcol && c->weightc < 0)) {
		ctl_err("%s: no column named '%s'", a->file,
		    c->target < 0 ? a->target :
		    (a->timecol && c->timec < 0) ? a->timecol : a->weightcol);
		return -1;
	}
	if (c->timec == c->target || c->weightc == c->target ||
	    (c->timec >= 0 && c->timec == c->weightc)) {
		ctl_err("%s: target, time and weight must be different columns",
		    a->file);
		return -1;
	}
	return 0;
}

/* Features: every other column whose first-row value is a number. */
static int
pick_features(struct csv *cv, const struct fit_args *a, struct fit_cols *c)
{
	double v;
	int i;

	c->k = 0;
	if (a->intercept)
		c->coef_names[0] = "intercept";
	for (i = 0; i < c->ncol && i < cv->nf; i++) {
		if (i == c->target || i == c->timec || i == c->weightc)
			continue;
		if (ctl_number(cv->f[i], &v) != 0 &&
		    proto_parse_number(cv->f[i], strlen(cv->f[i]), &v) != 0) {
			ctl_warn("%s:%lu: column '%s' is not numeric; ignored",
			    a->file, cv->lineno, c->names[i]);
			continue;
		}
		if (c->k + a->intercept >= RLS_MAX_P) {
			ctl_err("%s: more than %d features", a->file,
			    RLS_MAX_P - 1);
			return -1;
		}
		c->coef_names[c->k + a->intercept] = c->names[i];
		c->feat[c->k++] = i;
	}
	if (c->k + a->intercept == 0) {
		ctl_err("%s: no feature columns and no intercept", a->file);
		return -1;
	}
	return 0;
}

/*
 * With --terms: compile the list over the feature columns plus the target
 * (usable inside prev()), attach it to a new model. Returns the model or
 * NULL after printing the error.
 */
static struct model *
new_terms_model(const struct fit_args *a, struct fit_cols *c,
    struct model_opts *mo)
{
	struct terms *t;
	struct model *m;
	char err[200];
	int i, p;

	for (i = 0; i < c->k; i++)
		c->fields[i] = c->names[c->feat[i]];
	c->fields[c->k] = c->names[c->target];
	if (terms_parse(a->terms, c->fields, c->k + 1, c->k, a->intercept, &t,
	    err, sizeof(err)) != 0) {
		ctl_err("--terms: %s", err);
		return NULL;
	}
	p = terms_p(t);
	for (i = 0; i < p; i++)
		c->coef_names[i] = terms_text(t, i);
	mo->p = p;
	if ((m = model_new(mo)) == NULL || model_set_terms(m, t, 1) != 0) {
		ctl_err("cannot create the model");
		model_free(m);
		return NULL;
	}
	return m;
}

/* One data row to (phi, y, w, t). Returns 0, or 1 with a message. */
static int
row_values(const struct csv *cv, const struct fit_cols *c, int intercept,
    double *phi, double *y, double *w, double *t, char *err, size_t len)
{
	const char *what;
	int i, col;

	if (cv->nf != c->ncol) {
		snprintf(err, len, "%d fields, header has %d", cv->nf, c->ncol);
		return 1;
	}
	if (intercept)
		phi[0] = 1;
	for (i = -3; i < c->k; i++) {
		double v;
		int rc;

		col = i == -3 ? c->target : i == -2 ? c->timec :
		    i == -1 ? c->weightc : c->feat[i];
		if (col < 0)
			continue;
		what = cv->f[col];
		if (i == -2)
			rc = proto_parse_time(what, strlen(what), &v);
		else
			rc = proto_parse_number(what, strlen(what), &v);
		if (rc != 0) {
			snprintf(err, len, "column '%s': %s: '%.40s'",
			    c->names[col], what[0] == '\0' ? "empty value" :
			    rc == E_NUMERIC ? "not a finite number" :
			    i == -2 ? "not a time" : "not a number", what);
			return 1;
		}
		if (i == -3)
			*y = v;
		else if (i == -2)
			*t = v;
		else if (i == -1)
			*w = v;
		else
			phi[i + intercept] = v;
	}
	return 0;
}

static void
trace_header(FILE *fp, const struct fit_cols *c, int p)
{
	int j, d;

	fprintf(fp, "record,line,t,y,yhat,e,z,used,gated,lambda");
	for (j = 0; j < p; j++)
		fprintf(fp, ",coef_%s", c->coef_names[j]);
	fprintf(fp, ",r2,r2_pred,sigma,cusum");
	for (d = 0; d < ALARM_NDET; d++)
		fprintf(fp, ",alarm_%s", alarm_name((enum alarm_det)d));
	fputc('\n', fp);
}

static void
trace_num(FILE *fp, double v)
{
	if (isfinite(v))
		fprintf(fp, ",%.17g", v);
	else
		fputc(',', fp);
}

static void
trace_row(FILE *fp, unsigned long rec, unsigned long line, double t, double y,
    const struct model_step_out *so, const struct model *m)
{
	struct model_report rep;
	double theta[RLS_MAX_P];
	int j, d;

	memset(&rep, 0, sizeof(rep));
	rep.theta = theta;
	model_report_fast(m, &rep);
	fprintf(fp, "%lu,%lu", rec, line);
	trace_num(fp, t);
	trace_num(fp, y);
	trace_num(fp, so->yhat);
	trace_num(fp, so->e);
	trace_num(fp, so->z);
	fprintf(fp, ",%d,%d", so->used, so->gate == ALARM_GATE_OUTLIER);
	trace_num(fp, so->lambda);
	for (j = 0; j < m->o.p; j++)
		trace_num(fp, theta[j]);
	trace_num(fp, rep.s.r2);
	trace_num(fp, rep.s.r2_pred);
	trace_num(fp, rep.s.sigma);
	trace_num(fp, m->al.st[ALARM_CUSUM].value);
	for (d = 0; d < ALARM_NDET; d++)
		fprintf(fp, ",%d", m->al.st[d].on);
	fputc('\n', fp);
}

static void
print_table(const struct fit_args *a, const struct fit_cols *c,
    const struct model *m, const struct model_report *rep,
    unsigned long rejected)
{
	int j, d, any = 0, w = 9;

	for (j = 0; j < rep->p; j++)
		if ((int)strlen(c->coef_names[j]) > w)
			w = (int)strlen(c->coef_names[j]);
	printf("model     %s\n", a->name);
	printf("records   %llu used, %llu gated, %llu primed, %lu rejected\n",
	    (unsigned long long)m->n_used,
	    (unsigned long long)m->al.n_gated,
	    (unsigned long long)m->n_primed, rejected);
	if (a->tau > 0)
		printf("memory    tau %g s\n", a->tau);
	else if (a->lambda < 1)
		printf("memory    lambda %g (%.6g records)\n", a->lambda,
		    model_memory(a->lambda));
	else
		printf("memory    lambda 1 (all records)\n");
	printf("\n%-*s  %20s  %14s  %20s  %20s\n", w, "term", "coef", "stderr",
	    "95% low", "95% high");
	for (j = 0; j < rep->p; j++)
		printf("%-*s  %20.12g  %14.6g  %20.12g  %20.12g\n", w,
		    c->coef_names[j], rep->theta[j], rep->se[j],
		    rep->ci_lo[j], rep->ci_hi[j]);
	printf("\nrss       %.12g\n", rep->s.rss);
	printf("mse       %.12g\n", rep->s.mse);
	printf("nrss      %.12g\n", rep->s.nrss);
	printf("sigma     %.12g\n", rep->s.sigma);
	printf("r2        %.12g\n", rep->s.r2);
	printf("r2_pred   %.12g\n", rep->s.r2_pred);
	printf("n_eff     %.6g\n", rep->s.n_eff);
	printf("cond      %.3g\n", rep->cond);
	printf("alarms   ");
	for (d = 0; d < ALARM_NDET; d++)
		if (m->al.st[d].on) {
			printf(" %s", alarm_name((enum alarm_det)d));
			any = 1;
		}
	printf("%s\n", any ? "" : " none");
}

/*
 * cmd_fit: entry point of `coefctl fit`. Returns the process exit status:
 * 0 done (rejected rows are reported on stderr and counted in the output),
 * CTL_EXIT_USAGE for bad arguments, CTL_EXIT_DATA for an unreadable file,
 * a bad header or no usable record.
 */
int
cmd_fit(int argc, char **argv)
{
	struct fit_args a;
	struct fit_cols c;
	struct model_opts mo;
	struct model *m = NULL;
	struct model_report rep;
	struct model_step_out so;
	struct csv cv;
	FILE *fp = NULL, *tr = NULL;
	double phi[RLS_MAX_P], theta[RLS_MAX_P], se[RLS_MAX_P];
	double lo[RLS_MAX_P], hi[RLS_MAX_P], ref[RLS_MAX_P];
	double y = 0, w = 1, t = 0;
	unsigned long rec = 0, rejected = 0;
	char err[200], jbuf[65536];
	int rc, status = CTL_EXIT_DATA, first = 1, i;

	memset(&c, 0, sizeof(c));
	if ((rc = parse_args(argc, argv, &a)) != 0)
		return rc < 0 ? 0 : rc;
	fp = strcmp(a.file, "-") == 0 ? stdin : fopen(a.file, "r");
	if (fp == NULL) {
		ctl_err("%s: %s", a.file, strerror(errno));
		return CTL_EXIT_DATA;
	}
	csv_open(&cv, fp);
	if (read_header(&cv, &a, &c) != 0)
		goto done;
	if (a.trace != NULL && (tr = fopen(a.trace, "w")) == NULL) {
		ctl_err("%s: %s", a.trace, strerror(errno));
		goto done;
	}
	for (;;) {
		if ((rc = csv_next(&cv, err, sizeof(err))) == 0)
			break;
		if (rc < 0) {
			ctl_err("%s:%lu: %s; row not used", a.file, cv.lineno,
			    err);
			rejected++;
			if (ferror(fp))
				goto done;
			continue;
		}
		if (first) {
			if (pick_features(&cv, &a, &c) != 0)
				goto done;
			model_opts_default(&mo, c.k + a.intercept, a.intercept);
			mo.lambda = a.lambda;
			mo.tau = a.tau;
			mo.alarm.gate_z = a.gate;
			if (a.delta_set)
				mo.delta = a.delta;
			if (a.terms != NULL)
				m = new_terms_model(&a, &c, &mo);
			else if ((m = model_new(&mo)) == NULL)
				ctl_err("cannot create the model");
			if (m == NULL)
				goto done;
			if (tr != NULL)
				trace_header(tr, &c, mo.p);
			first = 0;
		}
		w = 1;
		t = (double)(rec + 1);
		rc = row_values(&cv, &c, a.terms == NULL && a.intercept, phi,
		    &y, &w, &t, err, sizeof(err));
		if (rc == 0 && a.terms != NULL) {
			phi[c.k] = y;	/* the target, for prev(target) */
			rc = model_ingest(m, phi, y, w, t, &so);
		} else if (rc == 0) {
			rc = model_step(m, phi, y, w, t, &so);
		}
		if (rc == MODEL_PRIMED) {
			rec++;
			continue;
		}
		if (rc != 0) {
			if (rc < 0)
				snprintf(err, sizeof(err), "%s",
				    rc == E_NUMERIC ? "a value or derived term is "
				    "not finite or out of range (|v| > 1e100)" :
				    "bad weight or time");
			ctl_err("%s:%lu: %s; row not used", a.file, cv.lineno,
			    err);
			rejected++;
			rc = 0;
			continue;
		}
		rec++;
		if (tr != NULL)
			trace_row(tr, rec, cv.lineno, t, y, &so, m);
	}
	if (m == NULL) {
		ctl_err("%s: no data rows", a.file);
		goto done;
	}
	memset(&rep, 0, sizeof(rep));
	rep.theta = theta;
	rep.se = se;
	rep.ci_lo = lo;
	rep.ci_hi = hi;
	rep.ref = ref;
	if (model_report(m, &rep) != 0) {
		ctl_err("cannot compute the report");
		goto done;
	}
	if (a.json) {
		struct render_model rm;
		struct json j;

		memset(&rm, 0, sizeof(rm));
		rm.name = a.name;
		rm.features = c.coef_names;
		rm.m = m;
		rm.rep = &rep;
		rm.reference = ref;
		rm.epoch_times = a.timecol != NULL;
		json_init(&j, jbuf, sizeof(jbuf));
		if (render_model(&j, &rm) != 0) {
			ctl_err("output too large");
			goto done;
		}
		/* "rejected" is a fit-only key, added before the brace. */
		jbuf[j.len - 1] = '\0';
		printf("%s,\"rejected\":%lu}\n", jbuf, rejected);
	} else {
		print_table(&a, &c, m, &rep, rejected);
	}
	status = 0;
done:
	if (tr != NULL && fclose(tr) != 0) {
		ctl_err("%s: %s", a.trace, strerror(errno));
		status = CTL_EXIT_DATA;
	}
	if (fp != stdin)
		fclose(fp);
	csv_close(&cv);
	model_free(m);
	for (i = 0; i < c.ncol; i++)
		free(c.names[i]);
	return status;
}
