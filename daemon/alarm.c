/* SPDX-License-Identifier: ISC */
/*
 * alarm: drift detectors on the one-step-ahead (a-priori) error stream.
 * PURE: no I/O, no clocks, no globals, no allocation; returns event bits
 * and leaves logging and notification to the caller.
 *
 * Detectors (each with an ok/alarm state, hysteresis and the time of its
 * last change):
 * - CUSUM, two-sided (Page 1954, Biometrika 41): on standardised errors z,
 *   S+ = max(0, S+ + z - k), S- = max(0, S- - z - k), alarm when either
 *   exceeds h. k = 0.5 is common practice (detects a 1 sigma shift);
 *   h comes from an in-control run-length target (dist_cusum_h_for_arl).
 *   On alarm the sums restart at 0; the alarm clears after `dwell`
 *   consecutive records with both sums below h/2 (common practice).
 * - R^2 floor: one-step-ahead R^2 below r2_floor once the effective count
 *   reaches r2_min_neff; clears above min(r2_floor + r2_hyst, (1 +
 *   r2_floor) / 2) for `dwell` records (the cap keeps the clear level
 *   below 1, where R^2 can never reach).
 * - Coefficient drift: joint statistic D^2 (computed by the caller in the
 *   metric of the information matrix) above drift_q (a chi-square
 *   quantile), or a per-coefficient tolerance broken; clears below
 *   drift_clear * drift_q with no tolerance broken for `dwell` records.
 * - Outlier gate and level shift: |z| > gate_z gates the record (not used
 *   for the fit, counted); gate_run consecutive gated records are a level
 *   shift, not outliers: that record is used, the shift alarm goes on and
 *   gating is suspended until |z| <= gate_z for `dwell` records, so a real
 *   shift can never lock the model out. Gating is also suspended while the
 *   CUSUM is in alarm: during a drift, large errors are the drift, and
 *   gating them would stop the model from following it. Gated records are not fed to the
 *   detectors at all (the caller passes z = NAN for them), and the CUSUM
 *   sees z clipped to +-gate_z, so spikes cannot read as drift.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "alarm.h"
#include "err.h"

/*
 * alarm_opts_default: CUSUM k = 0.5, h = 8.05 (two-sided in-control ARL
 * about 1e4 records, NUMERICS-style table computed by dist_cusum_arl);
 * dwell 20 records; R^2 floor off; gate |z| > 5 with a run of 5 for a level
 * shift (common practice: gates of 4-5 sigma, runs of 3-5); joint drift off
 * until a reference is pinned; warm-up 100 one-step-ahead errors (the
 * detector scale sigma_ref is estimated from them: with 20 the estimate is
 * off by about 30 % and z is not yet N(0,1)).
 */
void
alarm_opts_default(struct alarm_opts *o)
{
	o->cusum_k = 0.5;
	o->cusum_h = 8.053;
	o->dwell = 20;
	o->r2_floor = NAN;
	o->r2_hyst = 0.05;
	o->r2_min_neff = 30;
	o->gate_z = 5;
	o->gate_run = 5;
	o->drift_q = INFINITY;
	o->drift_clear = 0.5;
	o->warmup = 100;
}

/*
 * alarm_opts_check: validate o; on a bad value returns E_ARG and writes a
 * one-line reason into errbuf (if non-NULL).
 */
int
alarm_opts_check(const struct alarm_opts *o, char *errbuf, size_t errlen)
{
	const char *why = NULL;

	if (!(o->cusum_k >= 0) || !isfinite(o->cusum_k))
		why = "cusum k must be finite and >= 0";
	else if (!(o->cusum_h > 0))
		why = "cusum h must be > 0";
	else if (!isnan(o->r2_floor) && !(o->r2_floor < 1))
		why = "r2 floor must be below 1";
	else if (!(o->r2_hyst >= 0) || !isfinite(o->r2_hyst))
		why = "r2 hysteresis must be finite and >= 0";
	else if (!(o->r2_min_neff >= 0) || !isfinite(o->r2_min_neff))
		why = "r2 minimum effective count must be >= 0";
	else if (!(o->gate_z > 0))
		why = "gate must be > 0";
	else if (o->gate_run < 1)
		why = "gate run must be >= 1";
	else if (!(o->drift_q > 0))
		why = "drift threshold must be > 0";
	else if (!(o->drift_clear > 0) || !(o->drift_clear <= 1))
		why = "drift clear fraction must be in (0, 1]";
	if (why == NULL)
		return 0;
	if (errbuf != NULL && errlen > 0)
		snprintf(errbuf, errlen, "%s", why);
	return E_ARG;
}

/* alarm_init: every detector ok, never changed, statistics zero. */
void
alarm_init(struct alarm *a)
{
	int d;

	memset(a, 0, sizeof(*a));
	for (d = 0; d < ALARM_NDET; d++) {
		a->st[d].t_changed = NAN;
		a->st[d].value = NAN;
	}
}

/* alarm_armed: 1 once `warmup` records with a defined z were seen. */
int
alarm_armed(const struct alarm *a, const struct alarm_opts *o)
{
	return a->n_seen >= o->warmup;
}

static unsigned
set_state(struct alarm *a, enum alarm_det d, int on, double t)
{
	if (a->st[d].on == on)
		return 0;
	a->st[d].on = on;
	a->st[d].t_changed = t;
	a->calm[d] = 0;
	return on ? ALARM_EV_ON(d) : ALARM_EV_OFF(d);
}

/* Hysteresis: count calm records while on; clear after `dwell`. */
static unsigned
calm_or_not(struct alarm *a, const struct alarm_opts *o, enum alarm_det d,
    int calm, double t)
{
	if (!a->st[d].on)
		return 0;
	if (!calm) {
		a->calm[d] = 0;
		return 0;
	}
	if (++a->calm[d] >= o->dwell)
		return set_state(a, d, 0, t);
	return 0;
}

/*
 * alarm_gate: decide whether a record with standardised error z (NAN when
 * undefined, e.g. during start-up) is used. Before warm-up ends nothing is
 * gated. Sets ALARM_EV_* bits in *events for a shift alarm change.
 */
enum alarm_gate
alarm_gate(struct alarm *a, const struct alarm_opts *o, double z, double t,
    unsigned *events)
{
	int big;

	if (isnan(z) || !alarm_armed(a, o))
		return ALARM_GATE_PASS;
	big = fabs(z) > o->gate_z;
	if (a->st[ALARM_SHIFT].on || a->st[ALARM_CUSUM].on) {
		/* Gating suspended: the model must be free to follow. */
		*events |= calm_or_not(a, o, ALARM_SHIFT, !big, t);
		return ALARM_GATE_PASS;
	}
	if (!big) {
		a->gate_consec = 0;
		return ALARM_GATE_PASS;
	}
	if (++a->gate_consec >= o->gate_run) {
		a->gate_consec = 0;
		a->n_shifts++;
		*events |= set_state(a, ALARM_SHIFT, 1, t);
		return ALARM_GATE_SHIFT;
	}
	a->n_gated++;
	return ALARM_GATE_OUTLIER;
}

/*
 * alarm_step: feed one record (after the gate) to the detectors. z is
 * clipped to +-gate_z for the CUSUM. Inputs that are NAN leave their
 * detector untouched. Returns the event bits of this record.
 */
unsigned
alarm_step(struct alarm *a, const struct alarm_opts *o,
    const struct alarm_input *in)
{
	unsigned ev = 0;
	double z, m;

	if (isnan(in->z))
		return 0;
	a->n_seen++;
	if (!alarm_armed(a, o))
		return 0;

	/* Plain comparisons, not fmin/fmax (library calls at -O2, 7% of
	 * this function's instructions): nothing here is NaN, and the
	 * clamps at 0 give +0, as fmax(0, x) does. */
	z = in->z < o->gate_z ? in->z : o->gate_z;
	z = z > -o->gate_z ? z : -o->gate_z;
	m = a->cusum_pos + z - o->cusum_k;
	a->cusum_pos = m > 0 ? m : 0;
	m = a->cusum_neg - z - o->cusum_k;
	a->cusum_neg = m > 0 ? m : 0;
	m = a->cusum_pos > a->cusum_neg ? a->cusum_pos : a->cusum_neg;
	a->st[ALARM_CUSUM].value = m;
	if (m > o->cusum_h) {
		ev |= set_state(a, ALARM_CUSUM, 1, in->t);
		a->calm[ALARM_CUSUM] = 0;
		a->cusum_pos = a->cusum_neg = 0;
	} else {
		ev |= calm_or_not(a, o, ALARM_CUSUM, m < o->cusum_h / 2, in->t);
	}

	if (!isnan(o->r2_floor) && !isnan(in->r2_pred)) {
		a->st[ALARM_R2].value = in->r2_pred;
		if (!a->st[ALARM_R2].on) {
			if (in->r2_pred < o->r2_floor &&
			    in->n_eff >= o->r2_min_neff)
				ev |= set_state(a, ALARM_R2, 1, in->t);
		} else {
			double clear = fmin(o->r2_floor + o->r2_hyst,
			    (1 + o->r2_floor) / 2);

			ev |= calm_or_not(a, o, ALARM_R2, in->r2_pred > clear,
			    in->t);
		}
	}

	if (!isnan(in->drift_d2)) {
		int out = in->drift_d2 > o->drift_q || in->coef_out;

		a->st[ALARM_DRIFT].value = in->drift_d2;
		if (!a->st[ALARM_DRIFT].on) {
			if (out)
				ev |= set_state(a, ALARM_DRIFT, 1, in->t);
		} else {
			ev |= calm_or_not(a, o, ALARM_DRIFT,
			    in->drift_d2 < o->drift_clear * o->drift_q &&
			    !in->coef_out, in->t);
		}
	}
	return ev;
}

/* alarm_any: 1 when at least one detector is in alarm. */
int
alarm_any(const struct alarm *a)
{
	int d;

	for (d = 0; d < ALARM_NDET; d++)
		if (a->st[d].on)
			return 1;
	return 0;
}

/* alarm_name: the detector's key in replies ("cusum", "r2", "drift",
 * "shift"); "?" for an unknown value. */
const char *
alarm_name(enum alarm_det d)
{
	switch (d) {
	case ALARM_CUSUM:	return "cusum";
	case ALARM_R2:		return "r2";
	case ALARM_DRIFT:	return "drift";
	case ALARM_SHIFT:	return "shift";
	case ALARM_NDET:	break;
	}
	return "?";
}

/* alarm_cusum_restart: set both CUSUM sums to head (Lucas & Crosier 1982
 * fast initial response uses head = h/2). */
void
alarm_cusum_restart(struct alarm *a, double head)
{
	a->cusum_pos = a->cusum_neg = head;
}
