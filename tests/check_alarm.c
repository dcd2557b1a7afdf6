/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for alarm: CUSUM run lengths by simulation against the
 * average-run-length table of NUMERICS.md section 7 (integral-equation
 * values, k = 0.5; they match Montgomery's published CUSUM ARL table as
 * recalled there), and the hysteresis, gate and drift logic.
 */
#include <check.h>
#include <math.h>

#include "alarm.h"
#include "suites.h"
#include "testutil.h"

static void
quiet_opts(struct alarm_opts *o, double h)
{
	alarm_opts_default(o);
	o->cusum_k = 0.5;
	o->cusum_h = h;
	o->warmup = 0;
	o->gate_z = INFINITY;
}

/* Mean run length to the first CUSUM alarm for z ~ N(delta, 1). */
static void
cusum_arl(double h, double delta, int runs, uint64_t seed, double *mean,
    double *se)
{
	struct alarm_opts o;
	struct alarm a;
	struct alarm_input in = { 0, 0, NAN, 0, NAN, 0 };
	struct rng g;
	double sum = 0, sum2 = 0;
	int i;

	quiet_opts(&o, h);
	rng_seed(&g, seed);
	for (i = 0; i < runs; i++) {
		long n = 0;

		alarm_init(&a);
		do {
			in.z = delta + rng_norm(&g);
			n++;
		} while (!(alarm_step(&a, &o, &in) & ALARM_EV_ON(ALARM_CUSUM)));
		sum += (double)n;
		sum2 += (double)n * (double)n;
	}
	*mean = sum / runs;
	*se = sqrt((sum2 / runs - *mean * *mean) / runs);
}

/*
 * In-control and 1-sigma ARLs of the two-sided CUSUM (k = 0.5), by
 * simulation, within 3.5 standard errors of the table: h = 4: 167.7 (0),
 * 8.383 (1 sigma); h = 5: 465.4 (0), 10.38 (1 sigma). (NUMERICS.md 7.)
 */
START_TEST(test_alarm_cusum_arl_table)
{
	static const struct { double h, delta, arl; int runs; } t[] = {
		{ 4, 0, 167.7, 20000 }, { 4, 1, 8.383, 20000 },
		{ 5, 0, 465.4, 6000 }, { 5, 1, 10.38, 20000 },
	};
	double mean, se;
	size_t i;

	for (i = 0; i < sizeof(t) / sizeof(t[0]); i++) {
		cusum_arl(t[i].h, t[i].delta, t[i].runs, 1234 + i, &mean, &se);
		ck_assert_msg(fabs(mean - t[i].arl) <= 3.5 * se,
		    "h=%g delta=%g: simulated ARL %.2f +- %.2f vs table %g",
		    t[i].h, t[i].delta, mean, se, t[i].arl);
	}
}
END_TEST

/* The CUSUM alarm restarts the sums and clears after `dwell` calm records;
 * the change times are the record times given. */
START_TEST(test_alarm_cusum_hysteresis)
{
	struct alarm_opts o;
	struct alarm a;
	struct alarm_input in = { 0, 0, NAN, 0, NAN, 0 };
	unsigned ev;
	int i, on_at = -1, off_at = -1;

	quiet_opts(&o, 4);
	o.dwell = 10;
	alarm_init(&a);
	for (i = 0; i < 100; i++) {
		in.t = 1000 + i;
		in.z = i < 20 ? 2.0 : 0.0;
		ev = alarm_step(&a, &o, &in);
		if (ev & ALARM_EV_ON(ALARM_CUSUM))
			on_at = i;
		if (ev & ALARM_EV_OFF(ALARM_CUSUM))
			off_at = i;
	}
	/* S+ grows by 1.5 per record: > 4 at the third record. */
	ck_assert_int_eq(on_at, 2);
	/* Restarted at records 2, 5, ..., 17; S+ is 3.0 at record 19 and
	 * decays by k = 0.5 per zero: below h/2 = 2 from record 22, so the
	 * tenth calm record is 31. */
	ck_assert_int_eq(off_at, 31);
	ck_assert(!a.st[ALARM_CUSUM].on);
	ck_assert_double_eq(a.st[ALARM_CUSUM].t_changed, 1031);
}
END_TEST

/* One spike is gated and counted, not alarmed; a run of gate_run big
 * errors is a level shift: that record is used, gating is suspended, and
 * the alarm clears after dwell calm records. */
START_TEST(test_alarm_gate_spike_vs_shift)
{
	struct alarm_opts o;
	struct alarm a;
	unsigned ev = 0;
	int i;

	alarm_opts_default(&o);
	o.warmup = 0;
	o.dwell = 5;
	alarm_init(&a);
	ck_assert_int_eq(alarm_gate(&a, &o, 0.3, 1, &ev), ALARM_GATE_PASS);
	ck_assert_int_eq(alarm_gate(&a, &o, 9, 2, &ev), ALARM_GATE_OUTLIER);
	ck_assert_int_eq(alarm_gate(&a, &o, -0.1, 3, &ev), ALARM_GATE_PASS);
	ck_assert_uint_eq(a.n_gated, 1);
	ck_assert_uint_eq(ev, 0);
	for (i = 0; i < 4; i++)
		ck_assert_int_eq(alarm_gate(&a, &o, 7, 10 + i, &ev),
		    ALARM_GATE_OUTLIER);
	ck_assert_int_eq(alarm_gate(&a, &o, 7, 14, &ev), ALARM_GATE_SHIFT);
	ck_assert(ev & ALARM_EV_ON(ALARM_SHIFT));
	ck_assert_uint_eq(a.n_shifts, 1);
	ck_assert_int_eq(alarm_gate(&a, &o, 50, 15, &ev), ALARM_GATE_PASS);
	ev = 0;
	for (i = 0; i < 5; i++)
		ck_assert_int_eq(alarm_gate(&a, &o, 0.1, 20 + i, &ev),
		    ALARM_GATE_PASS);
	ck_assert(ev & ALARM_EV_OFF(ALARM_SHIFT));
	ck_assert_double_eq(a.st[ALARM_SHIFT].t_changed, 24);
	/* NaN z (undefined, start-up) is never gated. */
	ck_assert_int_eq(alarm_gate(&a, &o, NAN, 30, &ev), ALARM_GATE_PASS);
}
END_TEST

/* Nothing fires or is gated during warm-up. */
START_TEST(test_alarm_warmup)
{
	struct alarm_opts o;
	struct alarm a;
	struct alarm_input in = { 0, 50, NAN, 0, NAN, 0 };
	unsigned ev = 0;
	int i;

	alarm_opts_default(&o);
	o.warmup = 10;
	alarm_init(&a);
	for (i = 0; i < 10; i++) {
		ck_assert_int_eq(alarm_gate(&a, &o, 50, i, &ev),
		    ALARM_GATE_PASS);
		ck_assert_uint_eq(alarm_step(&a, &o, &in), 0);
	}
	ck_assert(alarm_armed(&a, &o));
	ck_assert_int_eq(alarm_gate(&a, &o, 50, i, &ev), ALARM_GATE_OUTLIER);
}
END_TEST

/* R^2 floor with a minimum effective count and a hysteresis band. */
START_TEST(test_alarm_r2_floor)
{
	struct alarm_opts o;
	struct alarm a;
	struct alarm_input in = { 0, 0, 0.5, 10, NAN, 0 };
	int i;

	quiet_opts(&o, INFINITY);
	o.r2_floor = 0.8;
	o.r2_hyst = 0.05;
	o.r2_min_neff = 30;
	o.dwell = 3;
	alarm_init(&a);
	alarm_step(&a, &o, &in);
	ck_assert(!a.st[ALARM_R2].on);		/* too few records */
	in.n_eff = 40;
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_ON(ALARM_R2));
	in.r2_pred = 0.83;			/* inside the band */
	for (i = 0; i < 10; i++)
		alarm_step(&a, &o, &in);
	ck_assert(a.st[ALARM_R2].on);
	in.r2_pred = 0.9;
	alarm_step(&a, &o, &in);
	alarm_step(&a, &o, &in);
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_OFF(ALARM_R2));
	/* A floor near 1: the clear level is capped at (1 + floor) / 2, so
	 * the alarm can still clear (regression, 2026-12-02: floor 0.98 with
	 * hysteresis 0.05 once asked for R^2 > 1.03). */
	o.r2_floor = 0.98;
	in.r2_pred = 0.97;
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_ON(ALARM_R2));
	in.r2_pred = 0.995;
	alarm_step(&a, &o, &in);
	alarm_step(&a, &o, &in);
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_OFF(ALARM_R2));
}
END_TEST

/* Coefficient drift: on above q or on a broken tolerance, off below
 * drift_clear * q for dwell records. */
START_TEST(test_alarm_drift)
{
	struct alarm_opts o;
	struct alarm a;
	struct alarm_input in = { 0, 0, NAN, 0, 1.0, 0 };
	int i;

	quiet_opts(&o, INFINITY);
	o.drift_q = 13.82;	/* chi2_2(0.999), NUMERICS.md 6 */
	o.dwell = 2;
	alarm_init(&a);
	alarm_step(&a, &o, &in);
	ck_assert(!a.st[ALARM_DRIFT].on);
	in.drift_d2 = 14;
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_ON(ALARM_DRIFT));
	in.drift_d2 = 8;	/* above 0.5 q: stays */
	for (i = 0; i < 5; i++)
		alarm_step(&a, &o, &in);
	ck_assert(a.st[ALARM_DRIFT].on);
	in.drift_d2 = 1;
	alarm_step(&a, &o, &in);
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_OFF(ALARM_DRIFT));
	in.coef_out = 1;
	ck_assert(alarm_step(&a, &o, &in) & ALARM_EV_ON(ALARM_DRIFT));
}
END_TEST

START_TEST(test_alarm_opts_check)
{
	struct alarm_opts o;
	char buf[80];

	alarm_opts_default(&o);
	ck_assert_int_eq(alarm_opts_check(&o, buf, sizeof(buf)), 0);
	o.cusum_h = 0;
	ck_assert_int_lt(alarm_opts_check(&o, buf, sizeof(buf)), 0);
	ck_assert_str_eq(buf, "cusum h must be > 0");
	alarm_opts_default(&o);
	o.gate_run = 0;
	ck_assert_int_lt(alarm_opts_check(&o, NULL, 0), 0);
	alarm_opts_default(&o);
	o.r2_floor = 1.5;
	ck_assert_int_lt(alarm_opts_check(&o, buf, sizeof(buf)), 0);
	ck_assert_str_eq(alarm_name(ALARM_DRIFT), "drift");
}
END_TEST

Suite *
alarm_suite(void)
{
	Suite *s = suite_create("alarm");
	TCase *tc = tcase_create("detectors");

	tcase_set_timeout(tc, 120);
	tcase_add_test(tc, test_alarm_cusum_arl_table);
	tcase_add_test(tc, test_alarm_cusum_hysteresis);
	tcase_add_test(tc, test_alarm_gate_spike_vs_shift);
	tcase_add_test(tc, test_alarm_warmup);
	tcase_add_test(tc, test_alarm_r2_floor);
	tcase_add_test(tc, test_alarm_drift);
	tcase_add_test(tc, test_alarm_opts_check);
	suite_add_tcase(s, tc);
	return s;
}
