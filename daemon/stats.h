/* SPDX-License-Identifier: ISC */
/*
 * stats: exponentially weighted fit statistics that the RLS state does not
 * carry itself (weight sums, target mean and spread, one-step-ahead error
 * sums). PURE: no I/O, no globals, no allocation. Formulas in stats.c.
 */
#ifndef COEFD_STATS_H
#define COEFD_STATS_H

#include <stdint.h>

/* Public so persistence can save and restore it bit for bit. */
struct stats {
	uint64_t n;		/* records used for the fit */
	uint64_t n_prior;	/* records with a one-step-ahead error */
	double	 W;		/* sum of forgotten weights */
	double	 Q;		/* sum of squared forgotten weights */
	double	 mean;		/* weighted mean of y */
	double	 S;		/* weighted centred sum of squares of y */
	double	 Y2;		/* weighted uncentred sum of squares of y */
	double	 rss_prior;	/* weighted sum of squared a-priori errors */
	double	 tss_prior;	/* matching sum of squared deviations */
};

/* Everything served about a fit, derived on demand. NAN = undefined. */
struct stats_report {
	double n_eff;	/* Kish effective sample count W^2/Q */
	double weight;	/* W */
	double rss;	/* J */
	double mse;	/* J / W */
	double nrss;	/* J / S (centred) */
	double r2;	/* classical (intercept: centred; else uncentred) */
	double r2_pred;	/* one-step-ahead (prequential) R^2 */
	double sigma;	/* residual SD sqrt(J / (W - p_eff)) */
	double dof;	/* W - p_eff */
};

/* stats_init: zero the accumulators. */
void	stats_init(struct stats *st);
/* stats_add_prior: add a one-step-ahead error e for target y (call first). */
void	stats_add_prior(struct stats *st, double y, double e, double w,
	    double lambda, int intercept);
/* stats_add: add a record used by the fit (after stats_add_prior). */
void	stats_add(struct stats *st, double y, double w, double lambda);
/* stats_report: derive the served statistics from J and the model shape. */
void	stats_report(const struct stats *st, double J, int p, int intercept,
	    double lampow, double lambda, struct stats_report *out);
/* stats_n_eff, stats_r2_pred: the two figures the detectors need per
 * record, without the rest of stats_report. */
double	stats_n_eff(const struct stats *st);
double	stats_r2_pred(const struct stats *st);
/* stats_p_eff: effective number of parameters under forgetting. */
double	stats_p_eff(int p, double lampow, double lambda);

#endif
