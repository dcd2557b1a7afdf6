/* SPDX-License-Identifier: ISC */
/*
 * model: the per-record path shared by the daemon and `coefctl fit`:
 * one-step-ahead error, outlier gate, RLS update, statistics, detectors.
 * PURE: no I/O, no clocks, no globals; allocates only in model_new, so the
 * same records in the same order give bit-identical results anywhere.
 *
 * Per record (phi, y, w, t):
 *   lambda  = o.lambda, or exp(-(t - t_last)/tau) when a time constant is
 *             set (1 for the first record or a time that goes backwards);
 *   e       = y - phi' theta_{n-1}, r = phi' P_{n-1} phi   (rls_apriori)
 *   f       = 1/w + r/lambda      (one-step-ahead variance / sigma^2)
 *   z       = e / (sigma_ref sqrt f), approximately N(0,1) in control
 *             (standardised innovation; Bar-Shalom, Li & Kirubarajan 2001)
 *   sigma_ref^2 = EW mean of e^2/f with memory sigma_memory times longer
 *             than the fit's, frozen while any alarm is on (otherwise the
 *             detector would normalise the drift away); a reference pinned
 *             from the model keeps the sigma_ref of the pin time.
 *   gate    -> the record updates the fit unless gated or frozen;
 *   D^2     = ||U (theta - theta_pin)||^2 / (c sigma_ref^2 (1 + k)),
 *             c = (1 + lambda^n)/(1 + lambda) (sandwich variance factor
 *             under forgetting), k = 1 for a reference pinned from the
 *             model's own estimate (its own error roughly doubles the
 *             variance of the difference; an approximation), 0 for a
 *             configured reference. Compared with the chi-square
 *             (1 - drift_alpha) quantile with p degrees of freedom.
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "dist.h"
#include "err.h"
#include "limits.h"
#include "model.h"
#include "terms.h"

/* Largest |one-step-ahead error| (and standardised error) added to the
 * running sums: twice the largest target, so that no error a sane
 * prediction can produce is clipped; its square, 4e200, times any memory
 * stays far below DBL_MAX. */
#define ERR_ABS_MAX	(2 * RLS_VALUE_MAX)

static int
finite_bounded(double v)
{
	return isfinite(v) && fabs(v) <= RLS_VALUE_MAX;
}

/* 1 when every v[j] (n values) is finite_bounded: |v| <= max is false for
 * a NaN and for an infinity, so one comparison per value does. */
static int
all_bounded(const double *v, int n)
{
	int j, ok = 1;

	for (j = 0; j < n; j++)
		ok &= fabs(v[j]) <= RLS_VALUE_MAX;
	return ok;
}

/* The checks every record passes before it may touch any state: n values
 * v and the target finite and within +-RLS_VALUE_MAX (E_NUMERIC), a weight
 * in [0, RLS_VALUE_MAX] and, with a time constant, a finite time (E_ARG). */
static int
check_record(const struct model *m, const double *v, int n, double y,
    double w, double t)
{
	if (!all_bounded(v, n) || !finite_bounded(y))
		return E_NUMERIC;
	if (!(w >= 0) || !(w <= RLS_VALUE_MAX))
		return E_ARG;
	if (m->o.tau > 0 && !isfinite(t))
		return E_ARG;
	return 0;
}

/*
 * model_opts_default: lambda = 0.999 (memory 1000 records), no time
 * constant, regularisation delta = 1e-6, sigma memory 10x, joint drift
 * level 0.001, 95% intervals, detector defaults from alarm_opts_default.
 */
void
model_opts_default(struct model_opts *o, int p, int intercept)
{
	memset(o, 0, sizeof(*o));
	o->p = p;
	o->intercept = intercept;
	o->lambda = 0.999;
	o->tau = 0;
	o->delta = 1e-6;
	o->sigma_memory = 10;
	o->drift_alpha = 0.001;
	o->level = 0.95;
	alarm_opts_default(&o->alarm);
}

/*
 * model_opts_check: validate every setting; on failure returns E_ARG and a
 * one-line reason in errbuf (may be NULL).
 */
int
model_opts_check(const struct model_opts *o, char *errbuf, size_t errlen)
{
	const char *why = NULL;
	int j;

	if (o->p < 1 || o->p > RLS_MAX_P)
		why = "number of coefficients out of range";
	else if (!(o->lambda > 0) || !(o->lambda <= 1))
		why = "lambda must be in (0, 1]";
	else if (!(o->tau >= 0) || !isfinite(o->tau))
		why = "time constant must be finite and >= 0";
	else if (!(o->delta >= 0) || !isfinite(o->delta))
		why = "regularisation must be finite and >= 0";
	else if (!(o->sigma_memory >= 1) || !isfinite(o->sigma_memory))
		why = "sigma memory must be >= 1";
	else if (!(o->drift_alpha > 0) || !(o->drift_alpha < 1))
		why = "drift level must be in (0, 1)";
	else if (!(o->level > 0) || !(o->level < 1))
		why = "interval level must be in (0, 1)";
	else if (o->theta0 != NULL && o->prior_sd == NULL)
		why = "a prior needs standard deviations";
	for (j = 0; why == NULL && j < o->p; j++) {
		if (o->theta0 != NULL && (!finite_bounded(o->theta0[j]) ||
		    !(o->prior_sd[j] > 0)))
			why = "prior values must be finite, SDs > 0";
		else if (o->reference != NULL &&
		    !finite_bounded(o->reference[j]))
			why = "reference values must be finite";
		else if (o->tol_abs != NULL && !(o->tol_abs[j] > 0) &&
		    !isnan(o->tol_abs[j]))
			why = "tolerances must be > 0";
		else if (o->tol_pct != NULL && !(o->tol_pct[j] > 0) &&
		    !isnan(o->tol_pct[j]))
			why = "tolerances must be > 0";
	}
	if (why != NULL) {
		if (errbuf != NULL && errlen > 0)
			snprintf(errbuf, errlen, "%s", why);
		return E_ARG;
	}
	return alarm_opts_check(&o->alarm, errbuf, errlen);
}

static void
rls_opts_of(const struct model *m, struct rls_opts *ro)
{
	memset(ro, 0, sizeof(*ro));
	ro->p = m->o.p;
	ro->delta = m->o.delta;
	ro->theta0 = m->o.theta0;
	ro->prior_sd = m->o.prior_sd;
	ro->theta_ref = m->o.reference;
	/* Blocked regularisation rows need a constant lambda (rls.c). */
	ro->reg_block = m->o.tau > 0 ? 1 : rls_reg_block(m->o.p, m->o.lambda);
}

/* Point *slot at a copy of src (p values) in dst, or NULL when absent. */
static void
copy_opt(double *dst, const double *src, int p, const double **slot)
{
	if (src == NULL) {
		*slot = NULL;
		return;
	}
	memcpy(dst, src, sizeof(double) * (size_t)p);
	*slot = dst;
}

static void
start_state(struct model *m)
{
	stats_init(&m->st);
	alarm_init(&m->al);
	m->sig_num = m->sig_w = 0;
	m->frozen = 0;
	m->last_t = 0;
	m->has_last_t = 0;
	m->n_seen = m->n_used = m->n_frozen = m->n_primed = 0;
	m->has_prev = 0;
}

static void
pin_config_reference(struct model *m)
{
	if (m->o.reference == NULL)
		return;
	memcpy(m->theta_pin, m->o.reference, sizeof(double) * (size_t)m->o.p);
	m->pinned = 2;
	m->pin_t = NAN;
	m->pin_sigma = NAN;
	m->o.alarm.drift_q = dist_chi2_quantile(1 - m->o.drift_alpha, m->o.p);
}

/*
 * model_new: allocate a model with settings o (copied, arrays included)
 * in its start state. Returns NULL for invalid settings (check them first
 * with model_opts_check for a message) or when out of memory. The caller
 * owns the model and frees it with model_free.
 */
struct model *
model_new(const struct model_opts *o)
{
	struct model *m;
	struct rls_opts ro;
	double *a;
	size_t p, n;

	if (model_opts_check(o, NULL, 0) != 0)
		return NULL;
	p = (size_t)o->p;
	/* One block: the model, theta_pin, then only the optional vectors
	 * that are configured. */
	n = 1 + (o->theta0 != NULL) + (o->prior_sd != NULL) +
	    (o->reference != NULL) + (o->tol_abs != NULL) +
	    (o->tol_pct != NULL);
	if ((m = calloc(1, sizeof(*m) + n * p * sizeof(double))) == NULL)
		return NULL;
	m->o = *o;
	a = (double *)(m + 1);
	m->theta_pin = a;
	a += p;
	if (o->theta0 != NULL)
		a += p, m->theta0 = a - p;
	if (o->prior_sd != NULL)
		a += p, m->prior_sd = a - p;
	if (o->reference != NULL)
		a += p, m->reference = a - p;
	if (o->tol_abs != NULL)
		a += p, m->tol_abs = a - p;
	if (o->tol_pct != NULL)
		m->tol_pct = a;
	copy_opt(m->theta0, o->theta0, o->p, &m->o.theta0);
	copy_opt(m->prior_sd, o->prior_sd, o->p, &m->o.prior_sd);
	copy_opt(m->reference, o->reference, o->p, &m->o.reference);
	copy_opt(m->tol_abs, o->tol_abs, o->p, &m->o.tol_abs);
	copy_opt(m->tol_pct, o->tol_pct, o->p, &m->o.tol_pct);
	rls_opts_of(m, &ro);
	if ((m->rls = rls_new(&ro)) == NULL) {
		free(m);
		return NULL;
	}
	start_state(m);
	pin_config_reference(m);
	return m;
}

/* model_free: release m, its engine and its term set; NULL is a no-op. */
void
model_free(struct model *m)
{
	if (m == NULL)
		return;
	rls_free(m->rls);
	terms_free(m->terms);
	free(m->xprev);
	free(m->tol_extra);
	free(m);
}

/*
 * model_set_tol: use per-coefficient drift tolerances tol_abs and tol_pct
 * (p values each, copied; NULL: none) from the next record on. Storage is
 * allocated when the model had none for a vector (a reload that adds
 * tolerances). Returns 0, or E_NOMEM with the tolerances unchanged.
 */
int
model_set_tol(struct model *m, const double *tol_abs, const double *tol_pct)
{
	size_t p = (size_t)m->o.p;

	if ((tol_abs != NULL && m->tol_abs == NULL) ||
	    (tol_pct != NULL && m->tol_pct == NULL)) {
		double *x;

		/* Both vectors get storage here, so this happens once. */
		assert(m->tol_extra == NULL);
		if ((x = calloc(2 * p, sizeof(double))) == NULL)
			return E_NOMEM;
		if (m->tol_abs != NULL)
			memcpy(x, m->tol_abs, sizeof(double) * p);
		if (m->tol_pct != NULL)
			memcpy(x + p, m->tol_pct, sizeof(double) * p);
		m->tol_extra = x;
		m->tol_abs = x;
		m->tol_pct = x + p;
		if (m->o.tol_abs != NULL)
			m->o.tol_abs = m->tol_abs;
		if (m->o.tol_pct != NULL)
			m->o.tol_pct = m->tol_pct;
	}
	copy_opt(m->tol_abs, tol_abs, m->o.p, &m->o.tol_abs);
	copy_opt(m->tol_pct, tol_pct, m->o.p, &m->o.tol_pct);
	return 0;
}

static double
sigma_ref(const struct model *m)
{
	if (m->pinned == 1 && isfinite(m->pin_sigma) && m->pin_sigma > 0)
		return m->pin_sigma;
	if (m->sig_w > 0 && m->sig_num > 0)
		return sqrt(m->sig_num / m->sig_w);
	return NAN;
}

static double
step_lambda(const struct model *m, double t)
{
	if (m->o.tau > 0) {
		if (!m->has_last_t || !(t > m->last_t))
			return 1.0;
		return exp(-(t - m->last_t) / m->o.tau);
	}
	return m->o.lambda;
}

/* Current lambda for statistics and intervals (1 in time-constant mode
 * before the second record). */
static double
cur_lambda(const struct model *m)
{
	return m->o.tau > 0 ? 1.0 : m->o.lambda;
}

static double
drift_stat(const struct model *m, double sref)
{
	double d2, lam = cur_lambda(m), c;

	if (!m->pinned || rls_rank(m->rls) < m->o.p || !(sref > 0))
		return NAN;
	rls_mahal(m->rls, m->theta_pin, &d2);
	c = lam < 1 ? (1 + m->rls->lampow) / (1 + lam) : 1.0;
	return d2 / (c * sref * sref * (m->pinned == 1 ? 2.0 : 1.0));
}

static int
coef_out(const struct model *m)
{
	double theta[RLS_MAX_P], th_o[RLS_MAX_P], pin_o[RLS_MAX_P];
	const double *th = theta, *pin = m->theta_pin;
	int j;

	if (!m->pinned || (m->o.tol_abs == NULL && m->o.tol_pct == NULL))
		return 0;
	rls_theta(m->rls, theta);
	/* Tolerances are in the user's terms, not the engine's scaled ones. */
	if (m->terms != NULL) {
		terms_to_original(m->terms, theta, NULL, th_o, NULL);
		terms_to_original(m->terms, m->theta_pin, NULL, pin_o, NULL);
		th = th_o;
		pin = pin_o;
	}
	for (j = 0; j < m->o.p; j++) {
		double dv = fabs(th[j] - pin[j]);

		if (m->o.tol_abs != NULL && dv > m->o.tol_abs[j])
			return 1;
		if (m->o.tol_pct != NULL &&
		    dv > m->o.tol_pct[j] / 100 * fabs(pin[j]))
			return 1;
	}
	return 0;
}

/*
 * model_step: process one record: regressors phi (p values, phi[0] = 1 for
 * an intercept model), target y, weight w >= 0, record time t (seconds;
 * required finite when a time constant is set). Fills out (may be NULL).
 * Returns E_NUMERIC for non-finite or out-of-range values (|v| > 1e100) and
 * E_ARG for a bad weight or time; on any error the model is bit-for-bit
 * unchanged. Frozen models compute errors, statistics and detectors but do
 * not change their coefficients.
 */
int
model_step(struct model *m, const double *phi, double y, double w,
    double t, struct model_step_out *out)
{
	struct model_step_out tmp;
	struct rls_apriori a;
	struct alarm_input in;
	double lam, sref, f = NAN;
	int rc;

	if (out == NULL)
		out = &tmp;
	/* rls_apriori checks phi (E_NUMERIC) and changes nothing, so it runs
	 * first and check_record takes only the rest: each value is checked
	 * once, in the order documented above. */
	if ((rc = rls_apriori(m->rls, phi, &a)) != 0 ||
	    (rc = check_record(m, NULL, 0, y, w, t)) != 0)
		return rc;

	lam = step_lambda(m, t);
	sref = sigma_ref(m);
	out->lambda = lam;
	out->yhat = a.yhat;
	out->e = a.determined ? y - a.yhat : NAN;
	out->z = NAN;
	out->events = 0;
	if (a.determined && w > 0) {
		f = 1 / w + a.r / lam;
		if (sref > 0)
			out->z = out->e / (sref * sqrt(f));
	}
	out->f = f;
	out->gate = alarm_gate(&m->al, &m->o.alarm, out->z, t, &out->events);
	out->used = !m->frozen && out->gate != ALARM_GATE_OUTLIER && w > 0;

	if (out->gate != ALARM_GATE_OUTLIER && a.determined && w > 0 &&
	    !isnan(out->e) && !isnan(f)) {
		/* The running sums below never forget an Inf or a NaN, so
		 * what they add must be finite. A prediction far outside the
		 * range of the data (features near 1e-300 next to targets
		 * near 1e100) can give |e| up to DBL_MAX, and e^2 / f can
		 * overflow even when the ratio itself is finite: form it as
		 * (e / sqrt(f))^2 and clip both squares at ERR_SQ_MAX. The
		 * statistics then say "garbage" (R^2 far below 0) while
		 * staying finite, and the detectors keep working. */
		double ec = fabs(out->e), u = ec / sqrt(f);

		/* Neither is NaN here: plain comparisons, not fmin calls. */
		ec = ec < ERR_ABS_MAX ? ec : ERR_ABS_MAX;
		u = u < ERR_ABS_MAX ? u : ERR_ABS_MAX;

		/* One-step-ahead sums start after the warm-up (a burn-in): the
		 * first errors after a diffuse start say nothing about the
		 * model's quality and would dominate a memory's worth. */
		if (alarm_armed(&m->al, &m->o.alarm))
			stats_add_prior(&m->st, y, ec, w, lam,
			    m->o.intercept);
		if (!alarm_any(&m->al)) {
			double laml = 1 - (1 - lam) / m->o.sigma_memory;

			m->sig_num = laml * m->sig_num + u * u;
			m->sig_w = laml * m->sig_w + 1;
		}
	}
	if (out->used) {
		/* Cannot fail: every argument was validated above. */
		rls_update_ap(m->rls, &a, phi, y, w, lam);
		stats_add(&m->st, y, w, lam);
		m->last_t = t;
		m->has_last_t = 1;
		m->n_used++;
	} else if (m->frozen) {
		m->n_frozen++;
	}
	m->n_seen++;

	/* Only these two of the statistics feed the detectors: the full
	 * stats_report (a square root and five divisions) cost 5% of a
	 * record at p = 4. */
	in.t = t;
	/* A gated record does not feed the detectors: a burst of isolated
	 * spikes must not read as drift; a persistent shift is caught by the
	 * gate's run rule instead. */
	in.z = out->gate == ALARM_GATE_OUTLIER ? NAN : out->z;
	in.r2_pred = stats_r2_pred(&m->st);
	in.n_eff = stats_n_eff(&m->st);
	in.drift_d2 = drift_stat(m, sigma_ref(m));
	in.coef_out = coef_out(m);
	out->events |= alarm_step(&m->al, &m->o.alarm, &in);
	return 0;
}

/* model_memory: 1/(1 - lambda) records; infinite for lambda = 1. */
double
model_memory(double lambda)
{
	return lambda < 1 ? 1 / (1 - lambda) : INFINITY;
}

/*
 * Map coefficients (and diag(P) when have_dp) from the engine's centred
 * and scaled terms to the user's terms: theta_o = M' theta_s,
 * P_o = M' P_s M (terms_to_original). Needs the full P_s, from LAPACK.
 */
static int
to_original(const struct model *m, double *theta, double *dp, int have_dp)
{
	double th[RLS_MAX_P], *Ps = NULL, *Po = NULL;
	size_t p = (size_t)m->o.p;
	int j, rc = 0;

	memcpy(th, theta, sizeof(double) * p);
	if (!have_dp) {
		terms_to_original(m->terms, th, NULL, theta, NULL);
		return 0;
	}
	Ps = malloc(sizeof(double) * p * p);
	Po = malloc(sizeof(double) * p * p);
	if (Ps == NULL || Po == NULL) {
		rc = E_NOMEM;
		goto fail;
	}
	if ((rc = rls_cov_unscaled(m->rls, Ps)) != 0)
		goto fail;
	terms_to_original(m->terms, th, Ps, theta, Po);
	for (j = 0; j < (int)p; j++)
		dp[j] = Po[(size_t)j * p + (size_t)j];
fail:
	free(Ps);
	free(Po);
	return rc;
}

/*
 * model_report: fill rep (its arrays must hold p values each; any may be
 * NULL to skip) from the current state, in the user's terms (mapped back
 * from the engine's centred and scaled terms when the model has terms).
 * Coefficients are always given (undetermined ones as 0); standard errors
 * and intervals are NAN while the model is undetermined or has no residual
 * degrees of freedom. Returns 0, or E_NOMEM / E_NUMERIC when the mapping
 * back could not be computed (rep is then incomplete).
 */
int
model_report(const struct model *m, struct model_report *rep)
{
	double dp[RLS_MAX_P], theta[RLS_MAX_P], tq = NAN;
	int j, rc, p = m->o.p, have_dp;

	rep->p = p;
	rep->rank = rls_rank(m->rls);
	rep->determined = rep->rank == p;
	rls_theta(m->rls, theta);
	stats_report(&m->st, rls_rss(m->rls), p, m->o.intercept,
	    m->rls->lampow, cur_lambda(m), &rep->s);
	rep->lambda = cur_lambda(m);
	rep->memory = m->o.tau > 0 ? NAN : model_memory(m->o.lambda);
	if (rls_cond(m->rls, &rep->cond) != 0)
		rep->cond = NAN;
	rep->sigma_ref = sigma_ref(m);
	rep->drift_d2 = drift_stat(m, rep->sigma_ref);
	rep->drift_q = m->pinned ? m->o.alarm.drift_q : NAN;
	have_dp = rls_diag_p(m->rls, dp) == 0 && isfinite(rep->s.sigma);
	if (have_dp && rep->s.dof > 0)
		tq = dist_t_quantile(0.5 + m->o.level / 2, rep->s.dof);
	if (m->terms != NULL && (rc = to_original(m, theta, dp, have_dp)) != 0)
		return rc;
	for (j = 0; j < p; j++) {
		double se = have_dp ? rep->s.sigma * sqrt(dp[j]) : NAN;

		if (rep->theta != NULL)
			rep->theta[j] = theta[j];
		if (rep->se != NULL)
			rep->se[j] = se;
		if (rep->ci_lo != NULL)
			rep->ci_lo[j] = theta[j] - tq * se;
		if (rep->ci_hi != NULL)
			rep->ci_hi[j] = theta[j] + tq * se;
	}
	if (rep->ref != NULL) {
		for (j = 0; j < p; j++)
			rep->ref[j] = m->pinned ? m->theta_pin[j] : NAN;
		if (m->pinned && m->terms != NULL)
			terms_to_original(m->terms, m->theta_pin, NULL,
			    rep->ref, NULL);
	}
	return 0;
}

/*
 * model_report_fast: like model_report but only rep->theta (if non-NULL),
 * rank and the statistics, in O(p^2): for per-record traces.
 */
void
model_report_fast(const struct model *m, struct model_report *rep)
{
	rep->p = m->o.p;
	rep->rank = rls_rank(m->rls);
	rep->determined = rep->rank == m->o.p;
	if (rep->theta != NULL) {
		rls_theta(m->rls, rep->theta);
		if (m->terms != NULL)
			to_original(m, rep->theta, NULL, 0);
	}
	stats_report(&m->st, rls_rss(m->rls), m->o.p, m->o.intercept,
	    m->rls->lampow, cur_lambda(m), &rep->s);
	rep->lambda = cur_lambda(m);
	rep->sigma_ref = sigma_ref(m);
}

/*
 * model_predict: *yhat = phi' theta and, for the next record, its standard
 * error se = sigma sqrt(1 + phi' P phi / lambda) (lambda = 1 in
 * time-constant mode: the classical 1 + x'(X'X)^-1 x at lambda = 1) and the
 * interval yhat -+ t_{dof, (1+level)/2} se. se/lo/hi are NAN while the
 * model is undetermined or has no residual degrees of freedom. Returns
 * E_NUMERIC for a non-finite phi, else 0.
 */
int
model_predict(const struct model *m, const double *phi, double *yhat,
    double *se, double *lo, double *hi)
{
	struct stats_report sr;
	struct rls_apriori a;
	double theta[RLS_MAX_P], acc = 0, s = NAN, tq;
	int j, rc;

	if ((rc = rls_apriori(m->rls, phi, &a)) != 0)
		return rc;
	rls_theta(m->rls, theta);
	for (j = 0; j < m->o.p; j++)
		acc += phi[j] * theta[j];
	stats_report(&m->st, rls_rss(m->rls), m->o.p, m->o.intercept,
	    m->rls->lampow, cur_lambda(m), &sr);
	if (a.determined && isfinite(sr.sigma))
		s = sr.sigma * sqrt(1 + a.r / cur_lambda(m));
	tq = isfinite(s) ? dist_t_quantile(0.5 + m->o.level / 2, sr.dof) : NAN;
	*yhat = acc;
	if (se != NULL)
		*se = s;
	if (lo != NULL)
		*lo = acc - tq * s;
	if (hi != NULL)
		*hi = acc + tq * s;
	return 0;
}

/*
 * model_pin: take the current coefficients as the reference calibration
 * (drift is measured from them) and keep the current sigma_ref as the
 * detector scale. E_STATE (nothing changed) while the model is not
 * determined.
 */
int
model_pin(struct model *m, double t)
{
	if (rls_rank(m->rls) < m->o.p)
		return E_STATE;
	rls_theta(m->rls, m->theta_pin);
	m->pinned = 1;
	m->pin_t = t;
	m->pin_sigma = sigma_ref(m);
	m->o.alarm.drift_q = dist_chi2_quantile(1 - m->o.drift_alpha, m->o.p);
	/* Drift is now measured from here: an active drift alarm ends. */
	if (m->al.st[ALARM_DRIFT].on) {
		m->al.st[ALARM_DRIFT].on = 0;
		m->al.st[ALARM_DRIFT].t_changed = t;
	}
	m->al.calm[ALARM_DRIFT] = 0;
	return 0;
}

/* model_freeze: on = 1 freezes the coefficients, 0 thaws them. */
void
model_freeze(struct model *m, int on)
{
	m->frozen = on != 0;
}

/*
 * model_reset: forget all data: the engine returns to its prior (or
 * diffuse) start, statistics, detectors and counters to zero. Settings,
 * the frozen flag and the pinned reference are kept: the reference is the
 * user's calibration, not data.
 */
void
model_reset(struct model *m)
{
	struct rls_opts ro;
	int frozen = m->frozen;

	rls_opts_of(m, &ro);
	rls_reset(m->rls, &ro);
	start_state(m);
	m->frozen = frozen;
}

/*
 * model_set_terms: attach the compiled term list t (ownership passes to m,
 * also on failure) so records can be given as raw field values with
 * model_ingest. terms_p(t) must equal the model's p and the model must not
 * have seen a record. scale_auto: fix the centring/scaling constants from
 * the first accepted record (terms_scaling_auto), unless t already has
 * constants. Returns 0, E_ARG (size mismatch or used model), E_NOMEM.
 */
int
model_set_terms(struct model *m, struct terms *t, int scale_auto)
{
	if (t == NULL || terms_p(t) != m->o.p || m->n_seen != 0 ||
	    m->terms != NULL) {
		terms_free(t);
		return E_ARG;
	}
	/* The previous record is only read by prev() terms. */
	if (terms_uses_prev(t) && (m->xprev = calloc((size_t)terms_nfields(t),
	    sizeof(double))) == NULL) {
		terms_free(t);
		return E_NOMEM;
	}
	m->terms = t;
	m->scale_auto = scale_auto;
	m->has_prev = 0;
	return 0;
}

/*
 * model_ingest: one record given as raw field values x (terms_nfields
 * values, declaration order), target y, weight w, time t. Every field must
 * be finite and within +-1e100 (E_NUMERIC), as must every derived term.
 * The first record of a model whose terms use prev() has no previous
 * values: it is accepted, primes them, updates nothing else and returns
 * MODEL_PRIMED. Otherwise as model_step. On any error the model, including
 * its previous values and scaling constants, is unchanged.
 */
int
model_ingest(struct model *m, const double *x, double y, double w, double t,
    struct model_step_out *out)
{
	double phi[RLS_MAX_P];
	int nf, rc;

	if (m->terms == NULL)
		return E_STATE;
	nf = terms_nfields(m->terms);
	if ((rc = check_record(m, x, nf, y, w, t)) != 0)
		return rc;
	/* Auto scaling maps this record into |u| <= 1, so its own terms
	 * cannot overflow below: the constants are never fixed by a record
	 * that is then rejected. */
	if (m->scale_auto && !terms_scaling_is_set(m->terms) &&
	    (rc = terms_scaling_auto(m->terms, x, 1)) != 0)
		return rc;
	rc = terms_ingest(m->terms, x, m->has_prev ? m->xprev : NULL, phi);
	if (rc == E_STATE) {
		if (m->xprev != NULL)
			memcpy(m->xprev, x, sizeof(double) * (size_t)nf);
		m->has_prev = 1;
		m->n_primed++;
		if (out != NULL) {
			memset(out, 0, sizeof(*out));
			out->yhat = out->e = out->z = out->f = NAN;
		}
		return MODEL_PRIMED;
	}
	if (rc != 0)
		return rc;
	if ((rc = model_step(m, phi, y, w, t, out)) != 0)
		return rc;
	if (m->xprev != NULL)
		memcpy(m->xprev, x, sizeof(double) * (size_t)nf);
	m->has_prev = 1;
	return 0;
}

/*
 * model_predict_fields: as model_predict, from raw field values x (the
 * terms are applied with the model's previous values). E_STATE when the
 * model has no terms or a prev() term has no previous record yet;
 * E_NUMERIC when a field or term is not finite.
 */
int
model_predict_fields(const struct model *m, const double *x, double *yhat,
    double *se, double *lo, double *hi)
{
	double phi[RLS_MAX_P];
	int rc;

	if (m->terms == NULL)
		return E_STATE;
	if ((rc = terms_eval(m->terms, x, m->has_prev ? m->xprev : NULL,
	    phi)) != 0)
		return rc;
	return model_predict(m, phi, yhat, se, lo, hi);
}
