/* SPDX-License-Identifier: ISC */
/*
 * testutil: PRNG, normal variates, LRE, the LAPACK least-squares oracle
 * and a configuration-parsing wrapper used by the unit tests. Tests may
 * allocate; the engine may not.
 */
#include <check.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <lapacke.h>

#include "conf.h"
#include "testutil.h"

/* test_conf: parse text; fails the running test if it is refused. */
struct conf *
test_conf(const char *text)
{
	struct conf_error ce;
	struct conf *c = NULL;

	memset(&ce, 0, sizeof(ce));
	ck_assert_msg(conf_parse(text, strlen(text), &c, &ce) == 0,
	    "config line %d: %s", ce.line, ce.msg);
	return c;
}

static uint64_t
rotl(uint64_t x, int k)
{
	return (x << k) | (x >> (64 - k));
}

/* rng_seed: splitmix64 expansion of one seed into the xoshiro state. */
void
rng_seed(struct rng *g, uint64_t seed)
{
	int i;

	for (i = 0; i < 4; i++) {
		uint64_t z = (seed += 0x9e3779b97f4a7c15ULL);

		z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
		z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
		g->s[i] = z ^ (z >> 31);
	}
}

/* rng_next: xoshiro256** step. */
uint64_t
rng_next(struct rng *g)
{
	uint64_t *s = g->s, r = rotl(s[1] * 5, 7) * 9, t = s[1] << 17;

	s[2] ^= s[0];
	s[3] ^= s[1];
	s[1] ^= s[2];
	s[0] ^= s[3];
	s[2] ^= t;
	s[3] = rotl(s[3], 45);
	return r;
}

/* rng_unif: uniform in [0, 1) with 53 random bits. */
double
rng_unif(struct rng *g)
{
	return (double)(rng_next(g) >> 11) * 0x1.0p-53;
}

/* rng_norm: standard normal by Marsaglia's polar method. */
double
rng_norm(struct rng *g)
{
	double u, v, s;

	do {
		u = 2 * rng_unif(g) - 1;
		v = 2 * rng_unif(g) - 1;
		s = u * u + v * v;
	} while (s >= 1 || s == 0);
	return u * sqrt(-2 * log(s) / s);
}

/* lre: log relative error, capped at 15 digits. */
double
lre(double est, double cert)
{
	double d = cert != 0 ? fabs(est - cert) / fabs(cert) : fabs(est);

	if (d == 0)
		return 15;
	d = -log10(d);
	return d > 15 ? 15 : d;
}

/* relerr: ||a - b||_2 / ||b||_2 (absolute when b = 0). */
double
relerr(const double *a, const double *b, int n)
{
	double num = 0, den = 0;
	int i;

	for (i = 0; i < n; i++) {
		num += (a[i] - b[i]) * (a[i] - b[i]);
		den += b[i] * b[i];
	}
	return den > 0 ? sqrt(num / den) : sqrt(num);
}

/*
 * ols_oracle: the batch closed form of the weighted problem, solved by
 * LAPACK dgels on A = diag(sqrt w) X, c = diag(sqrt w) y. rss is ||A theta
 * - c||^2 from the tail of the solution vector; P from the R factor via
 * dtrtri + dlauum.
 */
int
ols_oracle(const struct ols_row *rows, int nrows, int p, double *theta,
    double *rss, double *P)
{
	double *A, *c;
	int i, j, rc = -1;

	if (nrows < p)
		return -1;
	A = malloc(sizeof(double) * (size_t)nrows * (size_t)p);
	c = malloc(sizeof(double) * (size_t)nrows);
	if (A == NULL || c == NULL)
		goto fail;
	for (i = 0; i < nrows; i++) {
		double sw = sqrt(rows[i].w);

		for (j = 0; j < p; j++)
			A[(size_t)i * (size_t)p + (size_t)j] = sw * rows[i].x[j];
		c[i] = sw * rows[i].y;
	}
	if (LAPACKE_dgels(LAPACK_ROW_MAJOR, 'N', nrows, p, 1, A, p, c, 1) != 0)
		goto fail;
	memcpy(theta, c, sizeof(double) * (size_t)p);
	if (rss != NULL) {
		*rss = 0;
		for (i = p; i < nrows; i++)
			*rss += c[i] * c[i];
	}
	if (P != NULL) {
		for (i = 0; i < p; i++)
			for (j = 0; j < p; j++)
				P[i * p + j] = j >= i ? A[i * p + j] : 0;
		if (LAPACKE_dtrtri(LAPACK_ROW_MAJOR, 'U', 'N', p, P, p) != 0 ||
		    LAPACKE_dlauum(LAPACK_ROW_MAJOR, 'U', p, P, p) != 0)
			goto fail;
		for (i = 0; i < p; i++)
			for (j = 0; j < i; j++)
				P[i * p + j] = P[j * p + i];
	}
	rc = 0;
fail:
	free(A);
	free(c);
	return rc;
}
