/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for model: the per-record path (gate, update, statistics,
 * detectors) and the served quantities, against the LAPACK least-squares
 * oracle and the classical OLS formulas (prediction interval
 * s sqrt(1 + x'(X'X)^-1 x) with a t quantile, e.g. Draper & Smith,
 * "Applied Regression Analysis", ch. 3).
 */
#include <check.h>
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "dist.h"
#include "err.h"
#include "model.h"
#include "suites.h"
#include "terms.h"
#include "testutil.h"

static void
rand_phi(struct rng *g, double *phi, int p)
{
	int j;

	phi[0] = 1;
	for (j = 1; j < p; j++)
		phi[j] = rng_norm(g);
}

static double
dot(const double *a, const double *b, int p)
{
	double s = 0;
	int j;

	for (j = 0; j < p; j++)
		s += a[j] * b[j];
	return s;
}

static struct model *
new_model(int p, double lambda, double gate)
{
	struct model_opts o;

	model_opts_default(&o, p, 1);
	o.lambda = lambda;
	o.alarm.gate_z = gate;
	return model_new(&o);
}

/* A bad record returns an error and leaves every byte of the state as it
 * was (engine triangle, statistics, detectors, counters). */
START_TEST(test_model_transactional)
{
	struct model *m = new_model(3, 0.99, 5), *c;
	struct model_opts o;
	struct rng g;
	double phi[3], bad[3];
	int i;

	rng_seed(&g, 1);
	for (i = 0; i < 100; i++) {
		rand_phi(&g, phi, 3);
		model_step(m, phi, dot(phi, phi, 3), 1, i, NULL);
	}
	model_opts_default(&o, 3, 1);
	o.lambda = 0.99;
	c = model_new(&o);
	rls_copy(c->rls, m->rls);
	memcpy(&c->st, &m->st, sizeof(m->st));
	memcpy(&c->al, &m->al, sizeof(m->al));
	memcpy(bad, phi, sizeof(bad));
	bad[1] = NAN;
	ck_assert_int_eq(model_step(m, bad, 1, 1, 200, NULL), E_NUMERIC);
	bad[1] = INFINITY;
	ck_assert_int_eq(model_step(m, bad, 1, 1, 200, NULL), E_NUMERIC);
	ck_assert_int_eq(model_step(m, phi, NAN, 1, 200, NULL), E_NUMERIC);
	ck_assert_int_eq(model_step(m, phi, 1e300, 1, 200, NULL), E_NUMERIC);
	ck_assert_int_eq(model_step(m, phi, 1, -2, 200, NULL), E_ARG);
	ck_assert_mem_eq(m->rls->T, c->rls->T, sizeof(double) * 16);
	ck_assert_mem_eq(&m->st, &c->st, sizeof(m->st));
	ck_assert_mem_eq(&m->al, &c->al, sizeof(m->al));
	ck_assert_uint_eq(m->n_seen, 100);
	model_free(m);
	model_free(c);
}
END_TEST

/*
 * Issue #8 (2026-12-02): the value checks of model_step and model_ingest
 * test two values at a time. Every field and regressor must still be a
 * finite number within +-1e100 (the bound of model.h; IEEE 754-2008 5.11:
 * every ordered comparison with a NaN is false). A bad value at any
 * position of 1..9 values (pairs and a lone tail) is refused and the model
 * not touched; the bounds themselves and -0.0 are accepted.
 */
START_TEST(test_model_value_bounds)
{
	static const char *const fields[] = { "a", "b", "c", "d", "e", "f",
	    "g", "h", "i", "y" };
	static const char *const lists[] = { "a", "a, b", "a, b, c",
	    "a, b, c, d", "a, b, c, d, e", "a, b, c, d, e, f",
	    "a, b, c, d, e, f, g", "a, b, c, d, e, f, g, h",
	    "a, b, c, d, e, f, g, h, i" };
	const double bad[] = { NAN, -NAN, INFINITY, -INFINITY, DBL_MAX,
	    nextafter(1e100, INFINITY), -nextafter(1e100, INFINITY) };
	const double good[] = { 1e100, -1e100, -0.0, 4.9e-324 };
	const char *fl[10];
	double v[10];
	struct terms *t;
	struct model *m;
	char eb[128];
	int n, j, k, p;

	for (n = 1; n <= 9; n++) {
		/* model_step: n regressors, intercept first. */
		p = n;
		for (k = 0; k < (int)(sizeof(bad) / sizeof(bad[0])); k++)
			for (j = 0; j < p; j++) {
				m = new_model(p, 0.99, INFINITY);
				ck_assert_ptr_nonnull(m);
				for (int i = 0; i < p; i++)
					v[i] = i + 1;
				v[j] = bad[k];
				ck_assert_int_eq(model_step(m, v, 1, 1, 0,
				    NULL), E_NUMERIC);
				ck_assert_uint_eq(m->n_seen, 0);
				model_free(m);
			}
		for (k = 0; k < (int)(sizeof(good) / sizeof(good[0])); k++) {
			m = new_model(p, 0.99, INFINITY);
			ck_assert_ptr_nonnull(m);
			for (j = 0; j < p; j++)
				v[j] = good[k];
			ck_assert_int_eq(model_step(m, v, 1, 1, 0, NULL), 0);
			ck_assert_uint_eq(m->n_seen, 1);
			model_free(m);
		}
		/* model_ingest: n raw fields, each a term, and the target y
		 * last (checked as the target, not as a field). */
		for (k = 0; k < (int)(sizeof(bad) / sizeof(bad[0])); k++)
			for (j = 0; j < n; j++) {
				memcpy(fl, fields, sizeof(fl));
				fl[n] = "y";
				ck_assert_msg(terms_parse(lists[n - 1], fl,
				    n + 1, n, 1, &t, eb, sizeof(eb)) == 0,
				    "%s", eb);
				m = new_model(terms_p(t), 0.99, INFINITY);
				ck_assert_ptr_nonnull(m);
				ck_assert_int_eq(model_set_terms(m, t, 0), 0);
				for (int i = 0; i <= n; i++)
					v[i] = i + 1;
				v[j] = bad[k];
				ck_assert_int_eq(model_ingest(m, v, 1, 1, 0,
				    NULL), E_NUMERIC);
				ck_assert_uint_eq(m->n_seen, 0);
				model_free(m);
			}
	}
}
END_TEST

/*
 * lambda = 1: coefficients equal batch OLS (LAPACK dgels), the standard
 * errors sigma sqrt(diag (X'X)^-1), the prediction ŷ = x'b with standard
 * error s sqrt(1 + x'(X'X)^-1 x), interval ŷ -+ t_{n-p, 0.975} se.
 */
START_TEST(test_model_matches_ols_and_interval)
{
	enum { N = 400, P = 4 };
	static double X[N][P];
	struct ols_row rows[N];
	struct model *m = new_model(P, 1, INFINITY);
	struct model_report rep;
	struct rng g;
	double y, b[P], th[P], se[P], lo[P], hi[P], Po[P * P], rss, s, x[P];
	double yhat, pse, plo, phi_, q = 0, tq;
	int i, j, k;

	rng_seed(&g, 2);
	for (i = 0; i < N; i++) {
		rand_phi(&g, X[i], P);
		y = 1 + 2 * X[i][1] - X[i][3] + 0.5 * rng_norm(&g);
		rows[i].x = X[i];
		rows[i].y = y;
		rows[i].w = 1;
		ck_assert_int_eq(model_step(m, X[i], y, 1, i, NULL), 0);
	}
	ck_assert_int_eq(ols_oracle(rows, N, P, b, &rss, Po), 0);
	memset(&rep, 0, sizeof(rep));
	rep.theta = th;
	rep.se = se;
	rep.ci_lo = lo;
	rep.ci_hi = hi;
	model_report(m, &rep);
	s = sqrt(rss / (N - P));
	tq = dist_t_quantile(0.975, N - P);
	ck_assert_double_le(relerr(th, b, P), 1e-12);
	ck_assert_double_eq_tol(rep.s.sigma, s, 1e-12 * s);
	for (j = 0; j < P; j++) {
		ck_assert_double_eq_tol(se[j], s * sqrt(Po[j * P + j]),
		    1e-10 * se[j]);
		ck_assert_double_eq_tol(hi[j] - th[j], tq * se[j], 1e-10);
	}
	x[0] = 1;
	x[1] = 0.3;
	x[2] = -1.2;
	x[3] = 2.5;
	for (j = 0; j < P; j++)
		for (k = 0; k < P; k++)
			q += x[j] * Po[j * P + k] * x[k];
	ck_assert_int_eq(model_predict(m, x, &yhat, &pse, &plo, &phi_), 0);
	ck_assert_double_eq_tol(yhat, dot(x, b, P), 1e-12);
	ck_assert_double_eq_tol(pse, s * sqrt(1 + q), 1e-10 * pse);
	ck_assert_double_eq_tol(phi_ - yhat, tq * pse, 1e-9);
	ck_assert_double_eq_tol(yhat - plo, tq * pse, 1e-9);
	model_free(m);
}
END_TEST

/* A frozen model keeps its coefficients, still monitors (its CUSUM fires
 * on a drift it does not follow) and counts the records it saw. */
START_TEST(test_model_frozen)
{
	struct model *m = new_model(2, 0.99, INFINITY);
	struct rng g;
	double phi[2], before[2], after[2];
	int i;

	rng_seed(&g, 3);
	for (i = 0; i < 500; i++) {
		rand_phi(&g, phi, 2);
		model_step(m, phi, 1 + phi[1] + 0.1 * rng_norm(&g), 1, i, NULL);
	}
	model_freeze(m, 1);
	rls_theta(m->rls, before);
	for (i = 0; i < 200; i++) {
		rand_phi(&g, phi, 2);
		model_step(m, phi, 3 + phi[1] + 0.1 * rng_norm(&g), 1, 500 + i,
		    NULL);
	}
	rls_theta(m->rls, after);
	ck_assert_mem_eq(before, after, sizeof(before));
	ck_assert_uint_eq(m->n_frozen, 200);
	ck_assert(m->al.st[ALARM_CUSUM].on);
	model_freeze(m, 0);
	model_step(m, phi, 3 + phi[1], 1, 700, NULL);
	rls_theta(m->rls, after);
	ck_assert(memcmp(before, after, sizeof(before)) != 0);
	model_free(m);
}
END_TEST

/* Memory as a time constant: with records exactly dt apart, tau gives
 * lambda = exp(-dt/tau) per record, so the result is bit-identical to the
 * per-record form with that lambda. The first record uses lambda = 1. */
START_TEST(test_model_time_constant)
{
	struct model_opts o;
	struct model *a, *b;
	struct model_step_out so;
	struct rng g;
	double phi[3], ta[3], tb[3], lam = exp(-60.0 / 3600);
	int i;

	model_opts_default(&o, 3, 1);
	o.delta = 0;	/* the cyclic rows would be offset by the first record */
	o.tau = 3600;
	a = model_new(&o);
	o.tau = 0;
	o.lambda = lam;
	b = model_new(&o);
	rng_seed(&g, 4);
	for (i = 0; i < 3000; i++) {
		double y;

		rand_phi(&g, phi, 3);
		y = phi[1] - phi[2] + 0.1 * rng_norm(&g);
		ck_assert_int_eq(model_step(a, phi, y, 1, 1.7e9 + 60.0 * i,
		    &so), 0);
		ck_assert_double_eq(so.lambda, i == 0 ? 1.0 : lam);
		model_step(b, phi, y, 1, 0, NULL);
	}
	rls_theta(a->rls, ta);
	rls_theta(b->rls, tb);
	/* Identical except the first record's lambda (and its regularisation
	 * row), whose weight 0.983^3000 is below round-off by now. */
	ck_assert_double_le(relerr(ta, tb, 3), 1e-12);
	/* A record with a time going backwards does not forget. */
	ck_assert_int_eq(model_step(a, phi, 0, 1, 1.0e9, &so), 0);
	ck_assert_double_eq(so.lambda, 1.0);
	ck_assert_int_eq(model_step(a, phi, 0, 1, NAN, &so), E_ARG);
	model_free(a);
	model_free(b);
}
END_TEST

/*
 * Drift against a pinned reference: lambda = 0.99, pinned after 1000
 * in-control records; the slope then moves by 0.5 (5 sigma of the noise):
 * the drift and CUSUM alarms fire within 100 records. A control run with
 * no change raises none in 3000 records.
 */
START_TEST(test_model_drift_after_pin)
{
	struct model *m = new_model(2, 0.99, 5), *ctl = new_model(2, 0.99, 5);
	struct model_step_out so;
	struct rng g;
	double phi[2];
	int i, on_at = -1;

	rng_seed(&g, 5);
	for (i = 0; i < 1000; i++) {
		rand_phi(&g, phi, 2);
		model_step(m, phi, 2 + phi[1] + 0.1 * rng_norm(&g), 1, i, NULL);
	}
	ck_assert_int_eq(model_pin(m, 1000), 0);
	ck_assert(!alarm_any(&m->al));
	for (i = 1000; i < 1200; i++) {
		rand_phi(&g, phi, 2);
		model_step(m, phi, 2 + 1.5 * phi[1] + 0.1 * rng_norm(&g), 1, i,
		    &so);
		if ((so.events & ALARM_EV_ON(ALARM_DRIFT)) && on_at < 0)
			on_at = i;
	}
	ck_assert_msg(on_at >= 1000 && on_at < 1100, "drift at %d", on_at);
	ck_assert(m->al.st[ALARM_CUSUM].t_changed >= 1000);

	rng_seed(&g, 6);
	for (i = 0; i < 3000; i++) {
		rand_phi(&g, phi, 2);
		model_step(ctl, phi, 2 + phi[1] + 0.1 * rng_norm(&g), 1, i, NULL);
		if (i == 999)
			model_pin(ctl, i);
	}
	ck_assert_msg(!alarm_any(&ctl->al), "false alarm in control run");
	ck_assert(isnan(ctl->al.st[ALARM_DRIFT].t_changed) ||
	    ctl->al.st[ALARM_DRIFT].t_changed == 999);
	model_free(m);
	model_free(ctl);
}
END_TEST

/* A target outlier of 1e12 is gated: counted, not used, no alarm, no
 * non-finite value anywhere; the coefficients stay put. */
START_TEST(test_model_gates_outlier)
{
	struct model *m = new_model(3, 0.995, 5);
	struct model_step_out so;
	struct model_report rep;
	struct rng g;
	double phi[3], before[3], after[3], se[3];
	int i, j;

	rng_seed(&g, 7);
	for (i = 0; i < 500; i++) {
		rand_phi(&g, phi, 3);
		model_step(m, phi, phi[1] + 0.1 * rng_norm(&g), 1, i, NULL);
	}
	rls_theta(m->rls, before);
	ck_assert_int_eq(model_step(m, phi, 1e12, 1, 500, &so), 0);
	ck_assert_int_eq(so.gate, ALARM_GATE_OUTLIER);
	ck_assert_int_eq(so.used, 0);
	rls_theta(m->rls, after);
	ck_assert_mem_eq(before, after, sizeof(before));
	ck_assert_uint_eq(m->al.n_gated, 1);
	ck_assert(!alarm_any(&m->al));
	memset(&rep, 0, sizeof(rep));
	rep.theta = after;
	rep.se = se;
	model_report(m, &rep);
	for (j = 0; j < 3; j++)
		ck_assert(isfinite(after[j]) && isfinite(se[j]));
	ck_assert(isfinite(rep.s.r2) && isfinite(rep.s.sigma));
	model_free(m);
}
END_TEST

/* A level shift (persistent offset of 50 sigma) is not locked out: after
 * gate_run gated records the shift alarm fires and the model follows. */
START_TEST(test_model_level_shift)
{
	struct model *m = new_model(2, 0.98, 5);
	struct model_step_out so;
	struct rng g;
	double phi[2], th[2];
	int i, shift_at = -1;

	rng_seed(&g, 8);
	for (i = 0; i < 1000; i++) {
		rand_phi(&g, phi, 2);
		model_step(m, phi, 1 + phi[1] + 0.1 * rng_norm(&g) +
		    (i >= 400 ? 5 : 0), 1, i, &so);
		if (so.gate == ALARM_GATE_SHIFT)
			shift_at = i;
	}
	ck_assert_int_eq(shift_at, 404);
	ck_assert_uint_eq(m->al.n_gated, 4);
	rls_theta(m->rls, th);
	ck_assert_double_eq_tol(th[0], 6, 0.05);
	model_free(m);
}
END_TEST

/* Reset forgets the data but keeps settings, the frozen flag and the
 * pinned reference (the user's calibration). */
START_TEST(test_model_reset_keeps_reference)
{
	struct model *m = new_model(2, 1, INFINITY);
	double phi[2] = { 1, 2 };
	int i;

	for (i = 0; i < 10; i++) {
		phi[1] = i;
		model_step(m, phi, 3 + i, 1, i, NULL);
	}
	ck_assert_int_eq(model_pin(m, 10), 0);
	model_freeze(m, 1);
	model_reset(m);
	ck_assert_uint_eq(m->n_seen, 0);
	ck_assert_int_eq(rls_rank(m->rls), 0);
	ck_assert_int_eq(m->pinned, 1);
	ck_assert_int_eq(m->frozen, 1);
	ck_assert_double_eq_tol(m->theta_pin[1], 1, 1e-12);
	/* Pinning an undetermined model is refused. */
	ck_assert_int_eq(model_pin(m, 11), E_STATE);
	model_free(m);
}
END_TEST

START_TEST(test_model_opts_check)
{
	struct model_opts o;
	char buf[80];

	model_opts_default(&o, 3, 1);
	ck_assert_int_eq(model_opts_check(&o, buf, sizeof(buf)), 0);
	o.lambda = 1.01;
	ck_assert_int_eq(model_opts_check(&o, buf, sizeof(buf)), E_ARG);
	ck_assert_str_eq(buf, "lambda must be in (0, 1]");
	ck_assert_ptr_null(model_new(&o));
	model_opts_default(&o, 0, 1);
	ck_assert_int_eq(model_opts_check(&o, NULL, 0), E_ARG);
	model_free(NULL);
}
END_TEST


/* Per-coefficient tolerances are in the user's units even when the engine
 * works on centred and scaled terms (regression, 2026-12-02: they were
 * compared in the scaled space). Slope moves by 0.2 with x around 50
 * (auto scale 64): a 0.5 absolute tolerance must not fire, 0.1 must. */
START_TEST(test_model_tolerance_in_user_units)
{
	static const char *const fields[] = { "x", "y" };
	double tols[2][2] = { { NAN, 0.5 }, { NAN, 0.1 } };
	struct model_opts o;
	struct model *m;
	struct terms *t;
	struct rng g;
	char err[100];
	double x[2];
	int k, i;

	for (k = 0; k < 2; k++) {
		ck_assert_int_eq(terms_parse("x", fields, 2, 1, 1, &t, err,
		    sizeof(err)), 0);
		model_opts_default(&o, 2, 1);
		o.lambda = 0.98;
		o.drift_alpha = 1e-300;		/* joint test out of the way */
		o.alarm.cusum_h = INFINITY;
		o.alarm.gate_z = INFINITY;
		o.tol_abs = tols[k];
		m = model_new(&o);
		ck_assert_int_eq(model_set_terms(m, t, 1), 0);
		rng_seed(&g, 9);
		for (i = 0; i < 1500; i++) {
			double b = i < 500 ? 1.0 : 1.2;

			x[0] = 50 + 10 * rng_norm(&g);
			x[1] = 2 + b * x[0] + 0.01 * rng_norm(&g);
			ck_assert_int_ge(model_ingest(m, x, x[1], 1, i, NULL), 0);
			if (i == 499)
				ck_assert_int_eq(model_pin(m, i), 0);
		}
		ck_assert_int_eq(m->al.st[ALARM_DRIFT].on, k == 1);
		model_free(m);
	}
}
END_TEST

Suite *
model_suite(void)
{
	Suite *s = suite_create("model");
	TCase *tc = tcase_create("step");

	tcase_set_timeout(tc, 60);
	tcase_add_test(tc, test_model_transactional);
	tcase_add_test(tc, test_model_value_bounds);
	tcase_add_test(tc, test_model_matches_ols_and_interval);
	tcase_add_test(tc, test_model_frozen);
	tcase_add_test(tc, test_model_time_constant);
	tcase_add_test(tc, test_model_drift_after_pin);
	tcase_add_test(tc, test_model_gates_outlier);
	tcase_add_test(tc, test_model_level_shift);
	tcase_add_test(tc, test_model_reset_keeps_reference);
	tcase_add_test(tc, test_model_opts_check);
	tcase_add_test(tc, test_model_tolerance_in_user_units);
	suite_add_tcase(s, tc);
	return s;
}
