/* SPDX-License-Identifier: ISC */
/*
 * render: JSON for a model. PURE: writes into a caller's struct json; no
 * I/O, no allocation. Keys (documented for scripts in README.md):
 *   model, features, coef, stderr, ci_low, ci_high, level, n, n_seen,
 *   n_gated, n_eff, weight, lambda, tau, memory, rss, mse, nrss, r2,
 *   r2_pred, sigma, dof, rank, cond, sigma_ref, alarms (names of the
 *   detectors in alarm), detectors {name: {on, changed, value}}, frozen,
 *   reference (null or {coef, source, pinned, drift_d2, drift_q}), last_t,
 *   and, when the caller names them, fields (the raw fields records carry,
 *   in positional order) and target (the target field's name).
 * Non-finite numbers are written as null (json_num does that).
 */
#include <math.h>
#include <stdio.h>

#include "render.h"

/* Days since 1970-01-01 to a civil date (proleptic Gregorian), after
 * H. Hinnant's public-domain "chrono-compatible low-level date
 * algorithms" (civil_from_days). */
static void
civil_from_days(long long z, long long *y, unsigned *m, unsigned *d)
{
	long long era, yy;
	unsigned doe, yoe, doy, mp;

	z += 719468;
	era = (z >= 0 ? z : z - 146096) / 146097;
	doe = (unsigned)(z - era * 146097);
	yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
	yy = (long long)yoe + era * 400;
	doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
	mp = (5 * doy + 2) / 153;
	*d = doy - (153 * mp + 2) / 5 + 1;
	*m = mp < 10 ? mp + 3 : mp - 9;
	*y = yy + (*m <= 2);
}

/*
 * render_time: format Unix time t as RFC 3339 UTC, with milliseconds when
 * t has a fraction ("2026-12-02T03:00:00Z", "...00.250Z"). Writes "" and
 * returns -1 when t is not finite or outside years 0..9999.
 */
int
render_time(double t, char *buf, size_t len)
{
	long long secs, days, y;
	unsigned mo, d, sod, ms;
	double fl;

	if (len > 0)
		buf[0] = '\0';
	if (!isfinite(t) || t < -62167219200.0 || t > 253402300799.0)
		return -1;
	fl = floor(t);
	secs = (long long)fl;
	ms = (unsigned)llround((t - fl) * 1000);
	if (ms == 1000) {
		secs++;
		ms = 0;
	}
	days = secs >= 0 ? secs / 86400 : (secs - 86399) / 86400;
	sod = (unsigned)(secs - days * 86400);
	civil_from_days(days, &y, &mo, &d);
	if (ms)
		snprintf(buf, len, "%04lld-%02u-%02uT%02u:%02u:%02u.%03uZ", y,
		    mo, d, sod / 3600, sod / 60 % 60, sod % 60, ms);
	else
		snprintf(buf, len, "%04lld-%02u-%02uT%02u:%02u:%02uZ", y, mo, d,
		    sod / 3600, sod / 60 % 60, sod % 60);
	return 0;
}

static void
num_array(struct json *j, const char *key, const double *v, int n)
{
	int i;

	json_key(j, key);
	json_arr_begin(j);
	for (i = 0; i < n; i++)
		json_num(j, v != NULL ? v[i] : NAN);
	json_arr_end(j);
}

static void
time_value(struct json *j, double t, int epoch)
{
	char buf[40];

	if (epoch && render_time(t, buf, sizeof(buf)) == 0)
		json_str(j, buf);
	else
		json_num(j, t);
}

/* render_alarms: the "alarms" key: names of the detectors in alarm. */
void
render_alarms(struct json *j, const struct model *m)
{
	int d;

	json_key(j, "alarms");
	json_arr_begin(j);
	for (d = 0; d < ALARM_NDET; d++)
		if (m->al.st[d].on)
			json_str(j, alarm_name((enum alarm_det)d));
	json_arr_end(j);
}

/*
 * render_model: write one JSON object describing r->m with the report
 * r->rep (coefficients already in the user's units) and the coefficient
 * names r->features. Returns the json writer's status (0, or its overflow
 * error; the text is then incomplete and must not be sent).
 */
int
render_model(struct json *j, const struct render_model *r)
{
	const struct model *m = r->m;
	const struct model_report *rep = r->rep;
	int d, p = rep->p;

	json_obj_begin(j);
	json_key(j, "model");
	json_str(j, r->name);
	json_key(j, "features");
	json_arr_begin(j);
	for (d = 0; d < p; d++)
		json_str(j, r->features[d]);
	json_arr_end(j);
	num_array(j, "coef", rep->theta, p);
	num_array(j, "stderr", rep->se, p);
	num_array(j, "ci_low", rep->ci_lo, p);
	num_array(j, "ci_high", rep->ci_hi, p);
	json_key(j, "level");
	json_num(j, m->o.level);
	json_key(j, "n");
	json_uint(j, m->n_used);
	json_key(j, "n_seen");
	json_uint(j, m->n_seen);
	json_key(j, "n_gated");
	json_uint(j, m->al.n_gated);
	json_key(j, "n_eff");
	json_num(j, rep->s.n_eff);
	json_key(j, "weight");
	json_num(j, rep->s.weight);
	json_key(j, "lambda");
	json_num(j, rep->lambda);
	json_key(j, "tau");
	json_num(j, m->o.tau > 0 ? m->o.tau : NAN);
	json_key(j, "memory");
	json_num(j, rep->memory);
	json_key(j, "rss");
	json_num(j, rep->s.rss);
	json_key(j, "mse");
	json_num(j, rep->s.mse);
	json_key(j, "nrss");
	json_num(j, rep->s.nrss);
	json_key(j, "r2");
	json_num(j, rep->s.r2);
	json_key(j, "r2_pred");
	json_num(j, rep->s.r2_pred);
	json_key(j, "sigma");
	json_num(j, rep->s.sigma);
	json_key(j, "dof");
	json_num(j, rep->s.dof);
	json_key(j, "rank");
	json_int(j, rep->rank);
	json_key(j, "cond");
	json_num(j, rep->cond);
	json_key(j, "sigma_ref");
	json_num(j, rep->sigma_ref);
	render_alarms(j, m);
	json_key(j, "detectors");
	json_obj_begin(j);
	for (d = 0; d < ALARM_NDET; d++) {
		json_key(j, alarm_name((enum alarm_det)d));
		json_obj_begin(j);
		json_key(j, "on");
		json_bool(j, m->al.st[d].on);
		json_key(j, "changed");
		time_value(j, m->al.st[d].t_changed, r->epoch_times);
		json_key(j, "value");
		json_num(j, m->al.st[d].value);
		json_obj_end(j);
	}
	json_obj_end(j);
	json_key(j, "frozen");
	json_bool(j, m->frozen);
	json_key(j, "reference");
	if (!m->pinned) {
		json_null(j);
	} else {
		json_obj_begin(j);
		num_array(j, "coef", r->reference, p);
		json_key(j, "source");
		json_str(j, m->pinned == 1 ? "pin" : "config");
		json_key(j, "pinned");
		time_value(j, m->pin_t, r->epoch_times);
		json_key(j, "drift_d2");
		json_num(j, rep->drift_d2);
		json_key(j, "drift_q");
		json_num(j, rep->drift_q);
		json_obj_end(j);
	}
	json_key(j, "last_t");
	if (m->has_last_t)
		time_value(j, m->last_t, r->epoch_times);
	else
		json_null(j);
	if (r->fields != NULL) {
		json_key(j, "fields");
		json_arr_begin(j);
		for (d = 0; d < r->nfields; d++)
			json_str(j, r->fields[d]);
		json_arr_end(j);
		json_key(j, "target");
		json_str(j, r->target != NULL ? r->target : "");
	}
	json_obj_end(j);
	return json_finish(j);
}
