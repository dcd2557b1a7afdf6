/* SPDX-License-Identifier: ISC */
/*
 * dist: distribution functions for intervals, tests and alarm limits
 * (normal, Student t, chi-square; CDFs and quantiles) and the average run
 * length of a two-sided CUSUM. Pure: no I/O, no globals, no allocation;
 * needs only libm and LAPACKE. Meant for queries and config load, not for
 * the per-record path. Full contracts (inputs, errors, accuracy) are above
 * each definition in dist.c; the CUSUM input limits DIST_CUSUM_HMAX and
 * DIST_CUSUM_ARL0_MAX are in limits.h.
 */
#ifndef COEFD_DIST_H
#define COEFD_DIST_H

/* Standard normal CDF; NAN for NAN. */
double	dist_norm_cdf(double x);
/* Standard normal quantile for p in (0,1); NAN otherwise. */
double	dist_norm_quantile(double p);
/* Student t CDF with real nu > 0 degrees of freedom; NAN for bad input. */
double	dist_t_cdf(double t, double nu);
/* Student t quantile, p in (0,1), real nu > 0; NAN for bad input. */
double	dist_t_quantile(double p, double nu);
/* Chi-square CDF with real k > 0 degrees of freedom; NAN for bad input. */
double	dist_chi2_cdf(double x, double k);
/* Chi-square quantile, p in (0,1), real k > 0; NAN for bad input. */
double	dist_chi2_quantile(double p, double k);
/* Two-sided CUSUM average run length for N(delta,1) data. */
int	dist_cusum_arl(double k, double h, double delta, double *arl);
/* Decision interval h giving a two-sided in-control ARL of arl0. */
int	dist_cusum_h_for_arl(double k, double arl0, double *h);

#endif
