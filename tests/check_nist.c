/* SPDX-License-Identifier: ISC */
/*
 * NIST StRD linear least-squares datasets with certified values (copies in
 * tests/data/nist-strd, origin in SOURCE.md there), fitted through the
 * engine record by record with lambda = 1 and no prior. Requirement: at
 * least 9 correct significant digits (LRE) on every coefficient, its
 * standard deviation, the residual SD and R^2. For models without an
 * intercept R^2 is the uncentred one, as NIST defines it.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "model.h"
#include "nist.h"
#include "suites.h"
#include "terms.h"

#define MIN_LRE	9.0

/* Build phi for record i: [1,] x_1..x_nx, or the powers x, x^2 (Pontius). */
static void
make_phi(const struct nist *ds, int i, int intercept, int quad, double *phi)
{
	int j, k = 0;

	if (intercept)
		phi[k++] = 1;
	if (quad) {
		double x = ds->x[i];

		phi[k++] = x;
		phi[k++] = x * x;
		return;
	}
	for (j = 0; j < ds->nx; j++)
		phi[k++] = ds->x[i * ds->nx + j];
}

/* Assert every certified value (coefficients, their SDs, residual SD, R²)
 * to MIN_LRE digits; print and return the smallest LRE. */
static double
check_certified(const struct nist *ds, const char *what,
    const struct model_report *rep)
{
	double worst = 99, l;
	int j;

	for (j = 0; j < ds->nb; j++) {
		l = nist_lre(rep->theta[j], ds->b[j]);
		ck_assert_msg(l >= MIN_LRE, "%s B%d: %.17g vs %.17g (LRE %.1f)",
		    what, ds->b_num[j], rep->theta[j], ds->b[j], l);
		worst = fmin(worst, l);
		l = nist_lre(rep->se[j], ds->sd_b[j]);
		ck_assert_msg(l >= MIN_LRE, "%s sd(B%d): %.17g vs %.17g "
		    "(LRE %.1f)", what, ds->b_num[j], rep->se[j], ds->sd_b[j], l);
		worst = fmin(worst, l);
	}
	l = nist_lre(rep->s.sigma, ds->resid_sd);
	ck_assert_msg(l >= MIN_LRE, "%s residual SD %.17g vs %.17g", what,
	    rep->s.sigma, ds->resid_sd);
	worst = fmin(worst, l);
	l = nist_lre(rep->s.r2, ds->r2);
	ck_assert_msg(l >= MIN_LRE, "%s R2 %.17g vs %.17g", what, rep->s.r2,
	    ds->r2);
	worst = fmin(worst, l);
	fprintf(stderr, "nist %-8s %s: minimum LRE %.1f over coef, sd, "
	    "residual SD, R2; cond(P) %.3g\n", ds->name, what, worst,
	    rep->cond);
	return worst;
}

static void
check_dataset(const char *file, int intercept, int quad)
{
	struct nist ds;
	struct model_opts o;
	struct model *m;
	struct model_report rep;
	double phi[16], th[16], se[16];
	char path[256], err[160];
	int i, p;

	ck_assert_msg(nist_load(nist_path(file, path, sizeof(path)), &ds, err,
	    sizeof(err)) == 0, "%s: %s", file, err);
	p = ds.nb;
	model_opts_default(&o, p, intercept);
	o.lambda = 1;
	o.alarm.gate_z = INFINITY;	/* plain least squares: no gating */
	m = model_new(&o);
	ck_assert_ptr_nonnull(m);
	for (i = 0; i < ds.n; i++) {
		make_phi(&ds, i, intercept, quad, phi);
		ck_assert_int_eq(model_step(m, phi, ds.y[i], 1, i, NULL), 0);
	}
	memset(&rep, 0, sizeof(rep));
	rep.theta = th;
	rep.se = se;
	model_report(m, &rep);
	check_certified(&ds, quad ? "x, x^2 formed here" : "as given", &rep);
	model_free(m);
	nist_free(&ds);
}

START_TEST(test_nist_norris)
{
	check_dataset("nist-strd/Norris.dat", 1, 0);
}
END_TEST

/* Pontius with the powers formed here (x, x^2); the derived-terms path
 * (centred and scaled) is tested in check_terms.c. */
START_TEST(test_nist_pontius)
{
	check_dataset("nist-strd/Pontius.dat", 1, 1);
}
END_TEST

START_TEST(test_nist_noint1)
{
	check_dataset("nist-strd/NoInt1.dat", 0, 0);
}
END_TEST

START_TEST(test_nist_noint2)
{
	check_dataset("nist-strd/NoInt2.dat", 0, 0);
}
END_TEST

START_TEST(test_nist_longley)
{
	check_dataset("nist-strd/Longley.dat", 1, 0);
}
END_TEST


/*
 * Pontius from its raw x through derived terms (issue: calibration
 * curves): the model is declared on the field x with terms "x, x^2",
 * centred and scaled internally from the first record, and reports in the
 * user's terms. Certified values as above; at least 9 digits.
 */
START_TEST(test_nist_pontius_terms)
{
	static const char *const fields[] = { "x", "y" };
	struct nist ds;
	struct model_opts o;
	struct model *m;
	struct model_report rep;
	struct terms *t;
	double th[3], se[3], x[2];
	char path[256], err[160];
	int i;

	ck_assert_int_eq(nist_load(nist_path("nist-strd/Pontius.dat", path,
	    sizeof(path)), &ds, err, sizeof(err)), 0);
	ck_assert_int_eq(terms_parse("x, x^2", fields, 2, 1, 1, &t, err,
	    sizeof(err)), 0);
	model_opts_default(&o, 3, 1);
	o.lambda = 1;
	o.alarm.gate_z = INFINITY;
	m = model_new(&o);
	ck_assert_int_eq(model_set_terms(m, t, 1), 0);
	for (i = 0; i < ds.n; i++) {
		x[0] = ds.x[i];
		x[1] = ds.y[i];
		ck_assert_int_eq(model_ingest(m, x, ds.y[i], 1, i, NULL), 0);
	}
	memset(&rep, 0, sizeof(rep));
	rep.theta = th;
	rep.se = se;
	ck_assert_int_eq(model_report(m, &rep), 0);
	check_certified(&ds, "terms x, x^2 (centred, scaled)", &rep);
	/* Conditioning bought by centring and scaling: cond(P) of the
	 * engine's factor, versus about 3e26 for raw powers (TERMS.md). */
	ck_assert_double_lt(rep.cond, 1e6);
	model_free(m);
	nist_free(&ds);
}
END_TEST

Suite *
nist_suite(void)
{
	Suite *s = suite_create("nist");
	TCase *tc = tcase_create("strd");

	tcase_add_test(tc, test_nist_norris);
	tcase_add_test(tc, test_nist_pontius);
	tcase_add_test(tc, test_nist_noint1);
	tcase_add_test(tc, test_nist_noint2);
	tcase_add_test(tc, test_nist_longley);
	tcase_add_test(tc, test_nist_pontius_terms);
	suite_add_tcase(s, tc);
	return s;
}
