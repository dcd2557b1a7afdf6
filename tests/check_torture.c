/* SPDX-License-Identifier: ISC */
/*
 * Numerical torture of the engine as the daemon runs it (model_step /
 * model_ingest with the configured defaults), issue 9: exactly collinear
 * features, constant features for 10^7 records, features scaled 1e-8 next
 * to 1e8, lambda = 0.9 under no excitation, target outliers of 1e12, and
 * the extremes the parser lets through (|v| up to 1e100, subnormals, -0).
 * In every case: no NaN or Inf anywhere in the state, the covariance stays
 * positive definite (LAPACK dpotrf) and under the regularised-forgetting
 * bound, and what is served says what happened (rank, wide intervals, an
 * alarm, a refused prediction) instead of confident garbage.
 */
#include <check.h>
#include <lapacke.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "err.h"
#include "model.h"
#include "registry.h"
#include "rls.h"
#include "suites.h"
#include "testutil.h"

/* An assertion for hot loops: Check writes to its pipe on every
 * ck_assert, which would dominate a run of 10^7 records. */
#define MUST(cond) do { \
	if (!(cond)) \
		ck_abort_msg("%s:%d: %s failed", __FILE__, __LINE__, #cond); \
} while (0)

/*
 * Records in the long constant-feature run. 10^7 as the issue asks (about
 * 3 s at -O2); `make san` and `make valgrind` lower it through the
 * environment (COEFD_TORTURE_N), since they check memory, not long runs.
 */
static long
torture_n(void)
{
	const char *s = getenv("COEFD_TORTURE_N");
	long n = s != NULL ? strtol(s, NULL, 10) : 0;

	return n > 0 ? n : 10000000L;
}

/* 1 when every double of the model's state is finite. */
static int
state_finite(const struct model *m)
{
	const struct rls *r = m->rls;
	int i, d;

	for (i = 0; i < r->n * r->n; i++)
		if (!isfinite(r->T[i]))
			return 0;
	for (i = 0; i < r->p; i++)
		if (!isfinite(r->d[i]) || !isfinite(r->theta_ref[i]))
			return 0;
	if (!isfinite(r->s) || !isfinite(r->lampow) || !(r->s > 0))
		return 0;
	if (!isfinite(m->st.W) || !isfinite(m->st.Q) ||
	    !isfinite(m->st.mean) || !isfinite(m->st.S) ||
	    !isfinite(m->st.Y2) || !isfinite(m->st.rss_prior) ||
	    !isfinite(m->st.tss_prior))
		return 0;
	if (!isfinite(m->sig_num) || !isfinite(m->sig_w) ||
	    !isfinite(m->al.cusum_pos) || !isfinite(m->al.cusum_neg))
		return 0;
	for (d = 0; d < ALARM_NDET; d++)
		if (isinf(m->al.st[d].value))
			return 0;
	return 1;
}

/*
 * The trace bound of regularised forgetting (Kulhavy & Zarrop 1993, in
 * the blocked cyclic form of rls.c and README "Windup"): trace(P) <=
 * p / (c_min delta), c_min = p (1-lambda^K) lambda^(pK-1) /
 * (1 - lambda^(pK)), with the K the model uses (rls_reg_block).
 */
static double
trace_bound(int p, double lambda, double delta)
{
	int k = rls_reg_block(p, lambda);
	double cmin = p * (1 - pow(lambda, k)) * pow(lambda, p * k - 1) /
	    (1 - pow(lambda, p * k));

	return p / (cmin * delta);
}

/* P = R^-1 is symmetric positive definite (LAPACK dpotrf succeeds) and
 * its trace is finite and at most bound; returns the trace. */
static double
check_cov(const struct model *m, double bound, const char *what)
{
	int p = m->o.p, i, j;
	double *P = malloc(sizeof(double) * (size_t)(p * p)), tr = 0;

	ck_assert_ptr_nonnull(P);
	ck_assert_int_eq(rls_cov_unscaled(m->rls, P), 0);
	for (i = 0; i < p; i++) {
		tr += P[i * p + i];
		for (j = 0; j < i; j++)
			ck_assert(P[i * p + j] == P[j * p + i]);
	}
	ck_assert_msg(isfinite(tr) && tr <= bound, "%s: trace P %g, bound %g",
	    what, tr, bound);
	ck_assert_msg(LAPACKE_dpotrf(LAPACK_ROW_MAJOR, 'U', p, P, p) == 0,
	    "%s: P is not positive definite", what);
	free(P);
	return tr;
}

static void
report(const struct model *m, struct model_report *rep, double *th,
    double *se)
{
	static double lo[RLS_MAX_P], hi[RLS_MAX_P], ref[RLS_MAX_P];

	memset(rep, 0, sizeof(*rep));
	rep->theta = th;
	rep->se = se;
	rep->ci_lo = lo;
	rep->ci_hi = hi;
	rep->ref = ref;
	ck_assert_int_eq(model_report(m, rep), 0);
}

/*
 * Exactly collinear features (x2 = 2 x1) for 10^5 records. With the
 * default regularisation the model is determined but says the split
 * between x1 and x2 is unknown: standard errors of tens (the true split
 * is arbitrary), a condition estimate above 1e8, a prediction off the
 * data's span with a huge interval; on the span the prediction is right
 * within the noise. The identified combination th1 + 2 th2 equals the
 * true slope (least squares identifies exactly that; any regression text,
 * e.g. Draper & Smith on rank-deficient designs). At lambda = 1 the
 * pseudo-rows have weight 0: the rank stays 2 and predictions are refused
 * upstream (registry: not_ready), never served as numbers.
 */
START_TEST(test_torture_collinear)
{
	struct model_opts o;
	struct model *m;
	struct model_report rep;
	struct rng g;
	double x[3], th[3], se[3], yh, s, lo, hi, tr;
	int i;

	model_opts_default(&o, 3, 1);
	m = model_new(&o);
	rng_seed(&g, 1);
	for (i = 0; i < 100000; i++) {
		x[0] = 1;
		x[1] = rng_norm(&g);
		x[2] = 2 * x[1];
		MUST(model_step(m, x, 1 + x[1] +
		    0.1 * rng_norm(&g), 1, i, NULL) == 0);
		if (i % 9973 == 0)
			MUST(state_finite(m));
	}
	MUST(state_finite(m));
	tr = check_cov(m, trace_bound(3, o.lambda, o.delta), "collinear");
	report(m, &rep, th, se);
	fprintf(stderr, "torture collinear: 1e5 records, th1 + 2 th2 = %.4f "
	    "(1), se %.3g %.3g, cond %.2g, trace P %.3g <= %.3g\n",
	    th[1] + 2 * th[2], se[1], se[2], rep.cond, tr,
	    trace_bound(3, o.lambda, o.delta));
	ck_assert_int_eq(rep.rank, 3);
	ck_assert_double_eq_tol(th[1] + 2 * th[2], 1.0, 0.01);
	ck_assert_double_eq_tol(th[0], 1.0, 0.01);
	ck_assert_msg(se[1] > 10 && se[2] > 5, "se %g %g: the split is "
	    "unidentified and must say so", se[1], se[2]);
	ck_assert_msg(rep.cond > 1e8, "cond %g", rep.cond);
	x[0] = 1;
	x[1] = 1;
	x[2] = 2;
	ck_assert_int_eq(model_predict(m, x, &yh, &s, &lo, &hi), 0);
	ck_assert_double_eq_tol(yh, 2.0, 0.01);
	ck_assert(s < 0.2 && lo < yh && yh < hi);
	x[2] = -2;
	ck_assert_int_eq(model_predict(m, x, &yh, &s, &lo, &hi), 0);
	ck_assert_msg(s > 50, "off-span prediction se %g", s);
	model_free(m);

	/* lambda = 1: no pseudo-rows, rank 2, undetermined, no NaN. */
	o.lambda = 1;
	m = model_new(&o);
	for (i = 0; i < 10000; i++) {
		x[0] = 1;
		x[1] = rng_norm(&g);
		x[2] = 2 * x[1];
		MUST(model_step(m, x, 1 + x[1] +
		    0.1 * rng_norm(&g), 1, i, NULL) == 0);
	}
	MUST(state_finite(m));
	report(m, &rep, th, se);
	ck_assert_int_eq(rep.rank, 2);
	ck_assert_int_eq(rep.determined, 0);
	ck_assert(isnan(se[1]) && isnan(se[2]));
	ck_assert_int_eq(model_pin(m, 0), E_STATE);
	model_free(m);
}
END_TEST

/*
 * Constant features (1, 0.5, -0.2) for 10^7 records at the default
 * lambda = 0.999 (NUMERICS.md section 3 windup test, 10x longer): the
 * state stays finite, trace(P) under the bound, P positive definite; the
 * prediction at the one point seen is right; the slopes, which the data
 * cannot identify, carry standard errors of tens rather than false
 * precision, and the condition estimate says so.
 */
START_TEST(test_torture_constant_features)
{
	const double phi[3] = { 1, 0.5, -0.2 };
	const double yc = 2 - 0.5 - 0.1;	/* theta* = (2, -1, 0.5) */
	struct model_opts o;
	struct model *m;
	struct model_report rep;
	struct rng g;
	double th[3], se[3], yh, s, lo, hi, bound, tr;
	long i, n = torture_n();

	model_opts_default(&o, 3, 1);
	m = model_new(&o);
	bound = trace_bound(3, o.lambda, o.delta);
	rng_seed(&g, 2);
	for (i = 0; i < n; i++) {
		MUST(model_step(m, phi, yc + 0.1 * rng_norm(&g), 1,
		    (double)i, NULL) == 0);
		if (i % 1000003 == 1000002) {
			MUST(state_finite(m));
			check_cov(m, bound, "constant features");
		}
	}
	MUST(state_finite(m));
	tr = check_cov(m, bound, "constant features, end");
	report(m, &rep, th, se);
	ck_assert_int_eq(model_predict(m, phi, &yh, &s, &lo, &hi), 0);
	fprintf(stderr, "torture constant features: %ld records, trace P %.3g "
	    "<= %.3g, cond %.2g, slope se %.3g %.3g, |yhat - y*| %.2g\n", n,
	    tr, bound, rep.cond, se[1], se[2], fabs(yh - yc));
	/* Memory 1000 records, noise 0.1: the mean is known to ~0.003. */
	ck_assert_double_eq_tol(yh, yc, 0.02);
	ck_assert(s > 0.09 && s < 0.12);
	ck_assert_msg(se[1] > 10 && se[2] > 10, "slope se %g %g", se[1],
	    se[2]);
	ck_assert_msg(rep.cond > 1e8, "cond %g", rep.cond);
	model_free(m);
}
END_TEST

/*
 * Features scaled 1e-8 next to 1e8, through the daemon's path: a config
 * model with automatic scaling, records as raw field values. At memory =
 * 1 the result is ordinary least squares, checked against LAPACK dgels on
 * the raw columns (testutil ols_oracle) coefficient by coefficient; the
 * internal condition stays small because the terms are scaled.
 */
START_TEST(test_torture_wild_scales)
{
	static const char text[] = "[model w]\nfields = a b\ntarget = y\n"
	    "memory = 1\n";
	enum { N = 2000 };
	static double xs[N][3];
	struct ols_row rows[N];
	struct conf_error ce;
	struct conf *c = NULL;
	struct reg_entry *e;
	struct model_report rep;
	struct rng g;
	double x[3], th[3], se[3], ref[3], rel, worst = 0;
	char err[160];
	int i, j;

	ck_assert_int_eq(conf_parse(text, sizeof(text) - 1, &c, &ce), 0);
	e = registry_entry_new(NULL, conf_find_model(c, "w"), "w", err,
	    sizeof(err));
	ck_assert_msg(e != NULL, "%s", err);
	rng_seed(&g, 3);
	for (i = 0; i < N; i++) {
		x[0] = 3e-8 + 1e-8 * rng_norm(&g);	/* a */
		x[1] = 5e8 + 1e8 * rng_norm(&g);	/* b */
		x[2] = 4 + 2e8 * x[0] - 3e-8 * x[1] + 0.01 * rng_norm(&g);
		MUST(model_ingest(e->m, x, x[2], 1, i, NULL) == 0);
		xs[i][0] = 1;
		xs[i][1] = x[0];
		xs[i][2] = x[1];
		rows[i].x = xs[i];
		rows[i].y = x[2];
		rows[i].w = 1;
	}
	MUST(state_finite(e->m));
	ck_assert_int_eq(ols_oracle(rows, N, 3, ref, NULL, NULL), 0);
	report(e->m, &rep, th, se);
	for (j = 0; j < 3; j++) {
		rel = fabs(th[j] - ref[j]) / fabs(ref[j]);
		ck_assert_msg(rel < 1e-8, "coef %d: %.17g vs dgels %.17g", j,
		    th[j], ref[j]);
		ck_assert(isfinite(se[j]) && se[j] > 0);
		worst = fmax(worst, rel);
	}
	fprintf(stderr, "torture 1e-8 next to 1e8: largest relative difference "
	    "from dgels %.1e, cond %.2g\n", worst, rep.cond);
	ck_assert_msg(rep.cond < 1e6, "scaled terms, cond %g", rep.cond);
	check_cov(e->m, INFINITY, "wild scales");
	registry_entry_free(e);
	conf_free(c);
}
END_TEST

/*
 * lambda = 0.9 (memory 10) under no excitation for 10^5 records after a
 * short exciting start. With the default regularisation trace(P) stays
 * under its bound throughout and, when excitation returns, the estimate
 * moves to the truth without a wild jump (windup would give a gain of
 * about 0.9^-n). With regularise = 0 (allowed by the config) the
 * unexcited directions lose all information: the rank falls to 1, the
 * model reports itself undetermined (predictions are refused upstream),
 * and still nothing in the state is NaN or Inf; it recovers when
 * excitation returns.
 */
START_TEST(test_torture_lambda_no_excitation)
{
	const double th_true[3] = { 2, -1, 0.5 };
	const double phi[3] = { 1, 0.5, -0.2 };
	struct model_opts o;
	struct model *m;
	struct model_report rep;
	struct rng g;
	double x[3], th[3], se[3], y, bound, big, maxtr;
	int i, j, k;

	for (k = 0; k < 2; k++) {
		model_opts_default(&o, 3, 1);
		o.lambda = 0.9;
		if (k == 1)
			o.delta = 0;
		m = model_new(&o);
		bound = k == 0 ? trace_bound(3, o.lambda, o.delta) : INFINITY;
		maxtr = 0;
		rng_seed(&g, 4);
		for (i = 0; i < 200; i++) {
			x[0] = 1;
			x[1] = rng_norm(&g);
			x[2] = rng_norm(&g);
			y = x[0] * th_true[0] + x[1] * th_true[1] +
			    x[2] * th_true[2] + 0.1 * rng_norm(&g);
			MUST(model_step(m, x, y, 1, i, NULL) == 0);
		}
		y = phi[0] * th_true[0] + phi[1] * th_true[1] +
		    phi[2] * th_true[2];
		for (i = 0; i < 100000; i++) {
			MUST(model_step(m, phi,
			    y + 0.1 * rng_norm(&g), 1, 200 + i, NULL) == 0);
			if (k == 0 && i % 4999 == 0)
				maxtr = fmax(maxtr, check_cov(m, bound,
				    "lambda 0.9"));
		}
		MUST(state_finite(m));
		report(m, &rep, th, se);
		if (k == 0) {
			ck_assert_int_eq(rep.rank, 3);
			ck_assert_msg(se[1] > 10, "se %g", se[1]);
		} else {
			ck_assert_int_eq(rep.rank, 1);
			ck_assert_int_eq(rep.determined, 0);
			ck_assert(isnan(se[1]));
		}
		/* Excitation returns: 100 records = 10 memory lengths. */
		big = 0;
		for (i = 0; i < 100; i++) {
			x[0] = 1;
			x[1] = rng_norm(&g);
			x[2] = rng_norm(&g);
			y = x[0] * th_true[0] + x[1] * th_true[1] +
			    x[2] * th_true[2] + 0.1 * rng_norm(&g);
			MUST(model_step(m, x, y, 1, 1e6 + i, NULL) == 0);
			MUST(state_finite(m));
			rls_theta(m->rls, th);
			for (j = 0; j < 3; j++)
				big = fmax(big, fabs(th[j]));
		}
		ck_assert_msg(big < 10, "largest |theta| %g on re-excitation",
		    big);
		if (k == 0)
			fprintf(stderr, "torture lambda 0.9 unexcited: rank 3, "
			    "largest trace P %.3g (bound %.3g), largest "
			    "|theta| on re-excitation %.3g\n", maxtr, bound,
			    big);
		else
			fprintf(stderr, "torture lambda 0.9 unexcited, "
			    "regularise 0: rank 1 (undetermined, predictions "
			    "refused), largest |theta| on re-excitation "
			    "%.3g\n", big);
		for (j = 0; j < 3; j++)
			ck_assert_double_eq_tol(th[j], th_true[j], 0.1);
		check_cov(m, bound, "re-excited");
		model_free(m);
	}
}
END_TEST

/*
 * Target outliers of 1e12 after 2000 good records (noise 0.1, so z is
 * about 1e13). Isolated ones are gated: not used, the coefficients bit
 * for bit unchanged. gate_run of them in a row are a level shift: the
 * shift alarm goes on. With the gate off the first outlier is used, the
 * coefficients are wrecked and the CUSUM alarm goes on at once: what is
 * served is flagged. The state stays finite in every case.
 */
START_TEST(test_torture_outliers)
{
	struct model_opts o;
	struct model *m;
	struct model_step_out out;
	struct rng g;
	double x[3], y, th0[3], th1[3];
	int i, k;

	for (k = 0; k < 2; k++) {
		model_opts_default(&o, 3, 1);
		if (k == 1)
			o.alarm.gate_z = INFINITY;
		m = model_new(&o);
		rng_seed(&g, 5);
		for (i = 0; i < 2000; i++) {
			x[0] = 1;
			x[1] = rng_norm(&g);
			x[2] = rng_norm(&g);
			y = 2 - x[1] + 0.5 * x[2] + 0.1 * rng_norm(&g);
			MUST(model_step(m, x, y, 1, i, NULL) == 0);
		}
		ck_assert(!alarm_any(&m->al));
		rls_theta(m->rls, th0);
		x[1] = 0.3;
		x[2] = -0.7;
		if (k == 0) {
			/* Isolated outliers, with good records between. */
			for (i = 0; i < 3; i++) {
				MUST(model_step(m, x, 1e12, 1,
				    3000 + 2 * i, &out) == 0);
				ck_assert_int_eq(out.used, 0);
				ck_assert_int_eq(out.gate, ALARM_GATE_OUTLIER);
				MUST(model_step(m, x, 2 - 0.3 -
				    0.35, 1, 3001 + 2 * i, NULL) == 0);
			}
			ck_assert_uint_eq(m->al.n_gated, 3);
			ck_assert(!alarm_any(&m->al));
			/* A run of gate_run outliers: a level shift. */
			for (i = 0; i < (int)o.alarm.gate_run; i++)
				MUST(model_step(m, x, 1e12, 1,
				    4000 + i, &out) == 0);
			ck_assert_int_eq(m->al.st[ALARM_SHIFT].on, 1);
		} else {
			MUST(model_step(m, x, 1e12, 1, 3000, &out) == 0);
			ck_assert_int_eq(out.used, 1);
			ck_assert_int_eq(m->al.st[ALARM_CUSUM].on, 1);
			rls_theta(m->rls, th1);
			ck_assert(fabs(th1[0] - th0[0]) > 1e6);
		}
		MUST(state_finite(m));
		check_cov(m, trace_bound(3, o.lambda, o.delta), "outliers");
		model_free(m);
	}
}
END_TEST

/*
 * The extremes the protocol accepts (|v| <= 1e100, subnormals, -0, 0),
 * mixed at random in features and target for 2 x 10^5 records at lambda
 * 0.999 and 0.9: every record is accepted, nothing in the state becomes
 * NaN or Inf, P stays positive definite. Values beyond (1e101, inf, nan)
 * are refused and leave the model bit for bit unchanged.
 * Regression (issue 9, 2026-12-02): this test found the detector scale
 * sum overflowing to Inf (e^2 / f with e near 5e199), which silently
 * disabled every detector of the model for good.
 */
START_TEST(test_torture_extreme_values)
{
	static const double vals[] = { 1e100, -1e100, 4.9406564584124654e-324,
	    -0.0, 2.2250738585072014e-308, 1e-300, 1, 0, 1e50, -1e-200 };
	static const double refused[] = { 1.0000000000000001e101, INFINITY,
	    -INFINITY, NAN };
	struct model_opts o;
	struct model *m;
	struct rng g;
	double x[3], y, *T;
	size_t tlen;
	int i, k, r;

	for (k = 0; k < 2; k++) {
		model_opts_default(&o, 3, 1);
		o.lambda = k == 0 ? 0.999 : 0.9;
		m = model_new(&o);
		rng_seed(&g, 6);
		for (i = 0; i < 200000; i++) {
			x[0] = 1;
			x[1] = vals[rng_next(&g) % 10];
			x[2] = vals[rng_next(&g) % 10];
			y = vals[rng_next(&g) % 10];
			MUST(model_step(m, x, y, 1, i, NULL) == 0);
			if (i % 20011 == 0)
				MUST(state_finite(m));
		}
		MUST(state_finite(m));
		check_cov(m, trace_bound(3, o.lambda, o.delta), "extremes");
		tlen = sizeof(double) * (size_t)(m->rls->n * m->rls->n);
		T = malloc(tlen);
		ck_assert_ptr_nonnull(T);
		memcpy(T, m->rls->T, tlen);
		for (r = 0; r < 4; r++) {
			x[1] = refused[r];
			ck_assert_int_eq(model_step(m, x, 1, 1, 1e6, NULL),
			    E_NUMERIC);
			x[1] = 1;
			ck_assert_int_eq(model_step(m, x, refused[r], 1, 1e6,
			    NULL), E_NUMERIC);
		}
		ck_assert_int_eq(memcmp(T, m->rls->T, tlen), 0);
		ck_assert_uint_eq(m->n_seen, 200000);
		fprintf(stderr, "torture extremes, lambda %g: 2e5 records of "
		    "+-1e100, subnormals, -0 all accepted, state finite, 8 "
		    "out-of-range values refused\n", o.lambda);
		free(T);
		model_free(m);
	}
}
END_TEST

Suite *
torture_suite(void)
{
	Suite *s = suite_create("torture");
	TCase *tc = tcase_create("torture");

	tcase_set_timeout(tc, 600);
	tcase_add_test(tc, test_torture_collinear);
	tcase_add_test(tc, test_torture_constant_features);
	tcase_add_test(tc, test_torture_wild_scales);
	tcase_add_test(tc, test_torture_lambda_no_excitation);
	tcase_add_test(tc, test_torture_outliers);
	tcase_add_test(tc, test_torture_extreme_values);
	suite_add_tcase(s, tc);
	return s;
}
