/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for stats: the exponentially weighted accumulators against
 * direct (two-pass) sums, and closed forms from NUMERICS.md sections 1, 5.
 */
#include <check.h>
#include <math.h>

#include "stats.h"
#include "suites.h"
#include "testutil.h"

/* West-type EW update vs direct weighted sums over the same data. */
START_TEST(test_stats_matches_direct_sums)
{
	enum { N = 3000 };
	static double y[N], w[N];
	struct stats st;
	struct stats_report rep;
	struct rng g;
	double lam = 0.997, W = 0, Q = 0, M = 0, S = 0, Y2 = 0, d;
	int i;

	rng_seed(&g, 21);
	stats_init(&st);
	for (i = 0; i < N; i++) {
		y[i] = 1e3 + 5 * rng_norm(&g);	/* large mean: cancellation */
		w[i] = 0.2 + rng_unif(&g);
		stats_add(&st, y[i], w[i], lam);
	}
	for (i = 0; i < N; i++) {
		d = w[i] * pow(lam, N - 1 - i);
		W += d;
		Q += d * d;
		M += d * y[i];
		Y2 += d * y[i] * y[i];
	}
	M /= W;
	for (i = 0; i < N; i++)
		S += w[i] * pow(lam, N - 1 - i) * (y[i] - M) * (y[i] - M);
	ck_assert_double_eq_tol(st.W, W, 1e-12 * W);
	ck_assert_double_eq_tol(st.Q, Q, 1e-12 * Q);
	ck_assert_double_eq_tol(st.mean, M, 1e-13 * M);
	ck_assert_double_eq_tol(st.S, S, 1e-9 * S);
	ck_assert_double_eq_tol(st.Y2, Y2, 1e-12 * Y2);
	stats_report(&st, 0.5 * S, 3, 1, pow(lam, N), lam, &rep);
	ck_assert_double_eq_tol(rep.r2, 0.5, 1e-9);
	ck_assert_double_eq_tol(rep.nrss, 0.5, 1e-9);
	ck_assert_double_eq_tol(rep.n_eff, W * W / Q, 1e-9 * W);
}
END_TEST

/* Kish effective size for unit weights and constant lambda:
 * (1-lambda^n)^2 (1+lambda) / ((1-lambda)(1-lambda^2n)) (NUMERICS.md 5);
 * its limit (1+lambda)/(1-lambda). */
START_TEST(test_stats_kish_closed_form)
{
	struct stats st;
	struct stats_report rep;
	double lam = 0.99, ln;
	int i, n = 250;

	stats_init(&st);
	for (i = 0; i < n; i++)
		stats_add(&st, i % 7, 1, lam);
	ln = pow(lam, n);
	stats_report(&st, 1, 2, 1, ln, lam, &rep);
	ck_assert_double_eq_tol(rep.n_eff, (1 - ln) * (1 - ln) * (1 + lam) /
	    ((1 - lam) * (1 - ln * ln)), 1e-10);
	ck_assert_double_eq_tol(rep.weight, (1 - ln) / (1 - lam), 1e-10);
}
END_TEST

/* p_eff = p (1 + lambda^n)/(1 + lambda) -> p at lambda = 1, so sigma is the
 * classical residual SD sqrt(RSS / (n - p)) there. */
START_TEST(test_stats_sigma_classical)
{
	struct stats st;
	struct stats_report rep;
	int i;

	stats_init(&st);
	for (i = 0; i < 10; i++)
		stats_add(&st, i, 1, 1);
	stats_report(&st, 14.0, 3, 1, 1, 1, &rep);
	ck_assert_double_eq_tol(rep.sigma, sqrt(14.0 / 7), 1e-15);
	ck_assert_double_eq(stats_p_eff(4, 1, 1), 4);
	ck_assert_double_eq_tol(stats_p_eff(4, 0, 0.99), 4 / 1.99, 1e-15);
	/* Without an intercept R^2 is uncentred: 1 - J / sum y^2. */
	stats_report(&st, 14.0, 3, 0, 1, 1, &rep);
	ck_assert_double_eq_tol(rep.r2, 1 - 14.0 / 285, 1e-15);
}
END_TEST

/* One-step-ahead R^2 and undefined values. */
START_TEST(test_stats_prior_and_undefined)
{
	struct stats st;
	struct stats_report rep;

	stats_init(&st);
	stats_report(&st, 0, 2, 1, 1, 1, &rep);
	ck_assert(isnan(rep.r2) && isnan(rep.r2_pred) && isnan(rep.sigma));
	stats_add(&st, 1, 1, 1);
	stats_add_prior(&st, 3, 1, 1, 1, 1);	/* dev = 2, e = 1 */
	stats_add(&st, 3, 1, 1);
	stats_add_prior(&st, 2, 0, 1, 1, 1);	/* dev = 0, e = 0 */
	stats_add(&st, 2, 1, 1);
	stats_report(&st, 0.1, 2, 1, 1, 1, &rep);
	ck_assert_double_eq_tol(rep.r2_pred, 1 - 1.0 / 4, 1e-15);
	/* Constant target: no spread, R^2 undefined rather than garbage. */
	stats_init(&st);
	stats_add(&st, 5, 1, 1);
	stats_add(&st, 5, 1, 1);
	stats_report(&st, 0, 1, 1, 1, 1, &rep);
	ck_assert(isnan(rep.r2));
}
END_TEST

Suite *
stats_suite(void)
{
	Suite *s = suite_create("stats");
	TCase *tc = tcase_create("accumulators");

	tcase_add_test(tc, test_stats_matches_direct_sums);
	tcase_add_test(tc, test_stats_kish_closed_form);
	tcase_add_test(tc, test_stats_sigma_classical);
	tcase_add_test(tc, test_stats_prior_and_undefined);
	suite_add_tcase(s, tc);
	return s;
}
