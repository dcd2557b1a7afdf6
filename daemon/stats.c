/* SPDX-License-Identifier: ISC */
/*
 * stats: exponentially weighted fit statistics served next to the RLS fit.
 * PURE: no I/O, no globals, no allocation. The weighted residual sum of
 * squares J itself comes from the RLS state (rho^2); this module keeps what
 * J is compared with.
 *
 * With forgetting lambda and record weight w (statistics memory = the fit's
 * memory):
 *   W_n = lambda W + w                     (weight sum; 1/(1-lambda) limit)
 *   Q_n = lambda^2 Q + w^2                 (Kish: n_eff = W^2 / Q)
 *   m_n = m + w (y - m) / W_n              (weighted mean)
 *   S_n = lambda S + w (y - m_{n-1})(y - m_n)
 * the exponentially weighted form of West's (1979, Comm. ACM 22) update;
 * Y2_n = lambda Y2 + w y^2. One-step-ahead (prequential, Dawid 1984):
 *   RSS_prior = lambda RSS_prior + w e^2,  e = y - phi' theta_{n-1}
 *   TSS_prior = lambda TSS_prior + w (y - m_{n-1})^2   (y^2 without intercept)
 * Served: r2 = 1 - J/S (with intercept; without one the uncentred
 * 1 - J/Y2, as NIST StRD defines R^2 for models through the origin),
 * r2_pred = 1 - RSS_prior/TSS_prior, mse = J/W, nrss = J/S,
 * sigma^2 = J/(W - p_eff), p_eff = p (1 + lambda^n)/(1 + lambda) (-> p at
 * lambda = 1, so sigma is then the classical residual SD).
 */
#include <math.h>
#include <string.h>

#include "stats.h"

/* A spread below this fraction of the mean square is "no variance". */
#define STATS_VAR_FLOOR	1e-12

/* stats_init: set every accumulator to zero. */
void
stats_init(struct stats *st)
{
	memset(st, 0, sizeof(*st));
}

/*
 * stats_add_prior: account a one-step-ahead error e of target y with weight
 * w under forgetting lambda. Must be called before stats_add for the same
 * record (it uses the mean before the record). Inputs are assumed finite
 * (the caller validated the record).
 */
void
stats_add_prior(struct stats *st, double y, double e, double w,
    double lambda, int intercept)
{
	double dev = intercept ? y - st->mean : y;

	st->rss_prior = lambda * st->rss_prior + w * e * e;
	st->tss_prior = lambda * st->tss_prior + w * dev * dev;
	st->n_prior++;
}

/*
 * stats_add: account target y with weight w, used by the fit under
 * forgetting lambda. A zero weight only applies the forgetting.
 */
void
stats_add(struct stats *st, double y, double w, double lambda)
{
	double m0 = st->mean;

	st->W = lambda * st->W + w;
	st->Q = lambda * lambda * st->Q + w * w;
	st->Y2 = lambda * st->Y2 + w * y * y;
	if (st->W > 0) {
		st->mean = m0 + w * (y - m0) / st->W;
		st->S = lambda * st->S + w * (y - m0) * (y - st->mean);
	} else {
		st->S = lambda * st->S;
	}
	st->n++;
}

/* stats_n_eff: Kish's effective count W^2 / Q; 0 before any weight. */
double
stats_n_eff(const struct stats *st)
{
	return st->Q > 0 ? st->W * st->W / st->Q : 0;
}

/* stats_r2_pred: one-step-ahead R^2, 1 - RSS_prior / TSS_prior; NAN
 * until two one-step-ahead errors with some spread were seen. */
double
stats_r2_pred(const struct stats *st)
{
	return st->tss_prior > 0 && st->n_prior > 1 ?
	    1 - st->rss_prior / st->tss_prior : NAN;
}

/* stats_p_eff: p (1 + lambda^n) / (1 + lambda); p when lambda = 1. */
double
stats_p_eff(int p, double lampow, double lambda)
{
	if (lambda >= 1)
		return p;
	return p * (1 + lampow) / (1 + lambda);
}

/*
 * stats_report: fill out from the accumulators, J (the RLS weighted RSS),
 * the number of coefficients p, whether the model has an intercept, the
 * product of lambdas so far and the current lambda. Quantities without
 * enough data or without spread are NAN.
 */
void
stats_report(const struct stats *st, double J, int p, int intercept,
    double lampow, double lambda, struct stats_report *out)
{
	double tss = intercept ? st->S : st->Y2;

	out->weight = st->W;
	out->n_eff = stats_n_eff(st);
	out->rss = J;
	out->mse = st->W > 0 ? J / st->W : NAN;
	out->nrss = st->S > STATS_VAR_FLOOR * st->Y2 && st->S > 0 ?
	    J / st->S : NAN;
	out->r2 = tss > STATS_VAR_FLOOR * st->Y2 && tss > 0 ?
	    1 - J / tss : NAN;
	out->r2_pred = stats_r2_pred(st);
	out->dof = st->W - stats_p_eff(p, lampow, lambda);
	out->sigma = out->dof > 0 ? sqrt(J / out->dof) : NAN;
}
