/* SPDX-License-Identifier: ISC */
/*
 * rls_kern.h: the two loops of the engine's per-record fast path, the
 * forward substitution and the rotations from its prefix sums (rls.c
 * explains both). Not a header to include anywhere else: rls.c includes
 * it twice, with KERN(f) naming the copy and KERN_ATTR its attributes,
 * once vectorised (with the AVX2 clone) and once with plain scalar
 * loops for small p. No include guard, on purpose.
 */

/*
 * Forward substitution v = Ust^-T x (stored scale), axpy form so each row
 * of T is read contiguously. The pivots are inverted first, all at once
 * (the divisions do not wait for each other), so the chain from one v_i
 * to the next is multiplies and a subtraction, not a division: 25%
 * faster than dividing in the loop at p = 4 and p = 64 (tests/bench).
 * Requires every diagonal nonzero. Used by rls_apriori.
 */
KERN_ATTR static void
KERN(forward)(const struct rls *r, const double *x, double *v)
{
	double ri[RLS_MAX_P];
	int i, j, p = r->p;

	for (i = 0; i < p; i++)
		ri[i] = 1.0 / TT(r, i, i);
	memcpy(v, x, sizeof(double) * (size_t)p);
	for (i = 0; i < p; i++) {
		const double *ti = &r->T[(size_t)i * (size_t)r->n];
		double vi = v[i] * ri[i];

		v[i] = vi;
		for (j = i + 1; j < p; j++)
			v[j] -= ti[j] * vi;
	}
}

KERN_ATTR static int
KERN(rotate_fast)(struct rls *r, double *x, const double *u)
{
	double rho[RLS_MAX_P + 1], irho[RLS_MAX_P + 1], q = 1;
	int j, k, n = r->n, p = r->p;

	rho[0] = 1;
	irho[0] = 1;
	for (k = 0; k < p; k++) {
		q += u[k] * u[k];
		rho[k + 1] = q;
	}
	if (!(q < FAST_QMAX))
		return 1;
	for (k = 1; k <= p; k++) {
		rho[k] = sqrt(rho[k]);
		irho[k] = 1.0 / rho[k];
	}
	for (k = 0; k < p; k++) {
		double *restrict tk = &r->T[(size_t)k * (size_t)n];
		double *restrict xr = x;
		double uk = u[k], ck, sk;

		if (uk == 0.0)
			continue;
		ck = rho[k] * irho[k + 1];
		sk = uk * irho[k] * irho[k + 1];
		tk[k] *= rho[k + 1] * irho[k];
		for (j = k + 1; j < n; j++) {
			double old = xr[j], t = tk[j];

			xr[j] = old - uk * t;
			tk[j] = ck * t + sk * old;
		}
	}
	TT(r, p, p) = radius(TT(r, p, p), x[p] * irho[p]);
	return 0;
}
