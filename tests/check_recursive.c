/* SPDX-License-Identifier: ISC */
/*
 * Step-by-step path against tests/data/recursive (copied from the shared
 * reference data; README.md there): expanding-window OLS computed in
 * 40-digit arithmetic (exact_b*, exact_resid_rec) and the general-purpose
 * statistics library statsmodels 0.13.5 RecursiveLS (p0..p3, accurate to
 * about 1e-8). From the first fully determined row (t = 4) on, the engine
 * at lambda = 1 with an exact diffuse start must match the exact columns
 * to 1e-9 relative.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "model.h"
#include "nist.h"
#include "suites.h"
#include "testutil.h"

#define NREC	200
#define NCOLS	24

/* Read a numeric CSV with a header; empty cells are NAN. */
static int
read_csv(const char *file, char names[NCOLS][24], double rows[NREC][NCOLS],
    int *ncol)
{
	char path[256], line[4096], *s, *tok;
	FILE *fp;
	int r = -1, c;

	if ((fp = fopen(nist_path(file, path, sizeof(path)), "r")) == NULL)
		return -1;
	while (fgets(line, sizeof(line), fp) != NULL && r < NREC) {
		line[strcspn(line, "\r\n")] = '\0';
		for (c = 0, s = line; c < NCOLS; c++) {
			tok = s;
			s = strchr(s, ',');
			if (s != NULL)
				*s++ = '\0';
			if (r < 0)
				snprintf(names[c], 24, "%.23s", tok);
			else
				rows[r][c] = *tok ? strtod(tok, NULL) : NAN;
			if (s == NULL)
				break;
		}
		if (r < 0)
			*ncol = c + 1;
		r++;
	}
	fclose(fp);
	return r;
}

static int
col(char names[NCOLS][24], int ncol, const char *name)
{
	int c;

	for (c = 0; c < ncol; c++)
		if (strcmp(names[c], name) == 0)
			return c;
	ck_abort_msg("no column %s", name);
	return -1;
}

static double in[NREC][NCOLS], path[NREC][NCOLS];

static void
check_path(const char *ycol, const char *pathfile)
{
	char inames[NCOLS][24], pnames[NCOLS][24], nm[32];
	struct model_opts o;
	struct model *m;
	struct model_step_out so;
	double phi[4], th[4], ex[4], dp[4], worst_b = 0, worst_r = 0;
	double worst_p = 0;
	int ni, np, t, j, cy, cb[4], cpp[4], cres;

	ck_assert_int_eq(read_csv("recursive/synthetic_inputs.csv", inames, in,
	    &ni), NREC);
	ck_assert_int_eq(read_csv(pathfile, pnames, path, &np), NREC);
	cy = col(inames, ni, ycol);
	for (j = 0; j < 4; j++) {
		snprintf(nm, sizeof(nm), "exact_b%d", j);
		cb[j] = col(pnames, np, nm);
		snprintf(nm, sizeof(nm), "p%d", j);
		cpp[j] = col(pnames, np, nm);
	}
	cres = col(pnames, np, "exact_resid_rec");
	model_opts_default(&o, 4, 1);
	o.lambda = 1;
	o.alarm.gate_z = INFINITY;
	m = model_new(&o);
	for (t = 0; t < NREC; t++) {
		phi[0] = 1;
		for (j = 1; j < 4; j++)
			phi[j] = in[t][col(inames, ni, j == 1 ? "x1" : j == 2 ?
			    "x2" : "x3")];
		ck_assert_int_eq(model_step(m, phi, in[t][cy], 1, t + 1, &so),
		    0);
		if (t + 1 < 4)
			continue;
		rls_theta(m->rls, th);
		for (j = 0; j < 4; j++)
			ex[j] = path[t][cb[j]];
		worst_b = fmax(worst_b, relerr(th, ex, 4));
		/* Recursive residual e / sqrt(1 + x'P_{t-1}x) from t = 5. */
		if (t + 1 >= 5) {
			double rr = so.e / sqrt(so.f), er = path[t][cres];

			worst_r = fmax(worst_r, fabs(rr - er) /
			    fmax(fabs(er), 1e-3));
		}
		/* diag of the unscaled P_t: the library's own columns. */
		ck_assert_int_eq(rls_diag_p(m->rls, dp), 0);
		for (j = 0; j < 4; j++)
			worst_p = fmax(worst_p, fabs(dp[j] - path[t][cpp[j]]) /
			    fabs(path[t][cpp[j]]));
	}
	fprintf(stderr, "recursive %-6s worst relative error: coef %.2g, "
	    "recursive residual %.2g, diag P %.2g\n", ycol, worst_b, worst_r,
	    worst_p);
	ck_assert_msg(worst_b <= 1e-9, "coefficients: %.3g", worst_b);
	ck_assert_msg(worst_r <= 1e-9, "recursive residuals: %.3g", worst_r);
	ck_assert_msg(worst_p <= 1e-7, "diag P: %.3g", worst_p);
	model_free(m);
}

START_TEST(test_recursive_stable_path)
{
	check_path("y_stable", "recursive/synthetic_stable_path.csv");
}
END_TEST

START_TEST(test_recursive_shift_path)
{
	check_path("y_shift", "recursive/synthetic_shift_path.csv");
}
END_TEST

Suite *
recursive_suite(void)
{
	Suite *s = suite_create("recursive");
	TCase *tc = tcase_create("path");

	tcase_add_test(tc, test_recursive_stable_path);
	tcase_add_test(tc, test_recursive_shift_path);
	suite_add_tcase(s, tc);
	return s;
}
