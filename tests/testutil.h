/* SPDX-License-Identifier: ISC */
/*
 * testutil: shared helpers for the unit tests: a seeded PRNG, normal
 * variates, the log relative error, the batch least-squares oracle
 * (LAPACK dgels on the explicitly weighted problem) and a configuration
 * parsed or the test failed.
 */
#ifndef COEFD_TESTUTIL_H
#define COEFD_TESTUTIL_H

#include <stdint.h>

struct conf;

struct rng {
	uint64_t s[4];
};

/* Seeded xoshiro256** (Blackman & Vigna 2018). */
void	 rng_seed(struct rng *g, uint64_t seed);
uint64_t rng_next(struct rng *g);
double	 rng_unif(struct rng *g);		/* in [0, 1) */
double	 rng_norm(struct rng *g);		/* N(0,1), polar method */

/* LRE = -log10(|est - cert| / |cert|), capped at 15 (or -log10|est| when
 * cert = 0), the customary StRD accuracy measure. */
double	 lre(double est, double cert);

/* test_conf: parse a configuration text; the test fails with the
 * parser's line and message if it is refused. */
struct conf *test_conf(const char *text);

/* Relative 2-norm error ||a - b|| / ||b||. */
double	 relerr(const double *a, const double *b, int n);

/*
 * One row of a weighted least-squares problem for the oracle: the row
 * x (p values) and target y enter with weight w (i.e. sqrt(w) scales both).
 */
struct ols_row {
	const double *x;
	double	 y;
	double	 w;
};

/*
 * ols_oracle: minimise sum w_i (y_i - x_i' theta)^2 with LAPACK dgels
 * (Householder QR, row-major copy). Fills theta (p) and, if non-NULL, rss
 * and P = (A'A)^-1 (p*p). Returns 0, or -1 on allocation/LAPACK failure.
 */
int	 ols_oracle(const struct ols_row *rows, int nrows, int p,
	    double *theta, double *rss, double *P);

#endif
