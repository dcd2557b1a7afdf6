/* SPDX-License-Identifier: ISC */
/*
 * rls: recursive least squares with exponential forgetting, kept in
 * square-root information form and updated by Givens rotations.
 * PURE: no I/O, no clocks, no globals; allocates only in rls_new. The
 * per-record path (rls_apriori, rls_update) uses plain loops, no BLAS call
 * overhead and no allocation. LAPACK is used for on-demand queries only.
 *
 * Equations (symbols as in the code):
 *   cost  J_n(theta) = sum_i w_i lam^(n-i) (y_i - phi_i'theta)^2
 *                      + lam^n (theta-theta0)' P0^-1 (theta-theta0)
 *                      + regularisation rows (below)
 *   information R_n = lam R_{n-1} + w phi phi',   R_0 = P0^-1
 *   state T = [U z; 0 rho], U'U = R, U theta = z, rho^2 = J_n(theta_n).
 * Per record: T <- sqrt(lam) T, then the row sqrt(w) [phi' y] is annihilated
 * into T with p+1 Givens rotations (square-root information filter:
 * Bierman 1977, "Factorization Methods for Discrete Sequential Estimation";
 * QR-RLS, McWhirter 1983; Golub & Van Loan, "Matrix Computations", updating
 * the QR factorisation). The rotations are orthogonal, so the update is
 * backward stable, and T stays triangular: positive definiteness and
 * symmetry of P = R^-1 cannot be lost. U0 = 0 is allowed (diffuse start):
 * once the records determine theta it equals their least-squares solution,
 * with no bias from an arbitrary initial covariance.
 *
 * Scale folding: instead of multiplying the triangle by sqrt(lam) every
 * record (p^2/2 multiplies), the code keeps T = s * Tst and only updates
 * the scalar s; incoming rows are divided by s. When s falls below
 * RESCALE_MIN the stored triangle is multiplied out and s reset to 1.
 *
 * Windup: with lam < 1 and poor excitation, information in unexcited
 * directions decays as lam^n and P explodes. Remedy: regularised
 * ("stabilised") forgetting, R_n = lam R_{n-1} + (1-lam) D + w phi phi',
 * D = delta I, pulling toward theta_ref (Kulhavy & Zarrop 1993; Gunnarsson
 * 1996). It is applied in a cyclic, blocked form: every K-th record adds
 * one pseudo-row sqrt(p delta (1 - lam^K)) [e_j' theta_ref_j] for the next
 * coordinate j in turn. For a constant lam this is exactly the
 * information the p K records of one cycle owe coordinate j
 * (sum_{i<K} p (1-lam) delta lam^i = p delta (1 - lam^K)), lumped into
 * one row: rows with the same regressor e_j and target add, so the state
 * at each such record is that of the per-record schedule run coordinate by
 * coordinate in blocks of K, and the batch equivalent stays exact (these
 * rows are ordinary weighted rows). K = 1 is the plain cyclic form; the
 * model picks K with rls_reg_block so a cycle (p K records) stays within a
 * quarter of the memory 1/(1-lam), and the rows cost O(p^2 / K) per record
 * instead of O(p^2). In steady state coordinate j holds between
 * c_min delta and c_max delta with
 *   c_min = p (1 - lam^K) lam^(pK-1) / (1 - lam^(pK)),
 * so R >= c_min delta I and trace(P) <= p / (c_min delta) once the
 * pseudo-rows have accumulated (see rls_windup_bound in the tests).
 *
 * Overflow: inputs are bounded by RLS_VALUE_MAX = 1e100 and 1/s by
 * 1/RESCALE_MIN = 1e30, so every stored entry stays far below DBL_MAX; the
 * Givens radius uses hypot() only when the operands leave [1e-150, 1e150].
 */
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <lapacke.h>

#include "err.h"
#include "limits.h"
#include "rls.h"

#define RESCALE_MIN	1e-30
/* Largest q_p = 1 + |Ust^-T x|^2 the fast path accepts (see rotate_fast). */
#define FAST_QMAX	1e100
/*
 * Runtime dispatch of the rotation loops: gcc builds rotate_in for the
 * baseline x86-64 (SSE2) and for x86-64-v3 (AVX2) and the loader picks one
 * for the CPU (target_clones, an ifunc); the default build stays portable.
 * rls.o is compiled with -ffp-contract=off (no fused multiply-add), so
 * both clones do the same arithmetic and the results are bit for bit
 * those of the baseline. Gain (tests/bench, minimum of 6 alternating
 * runs): rls_update at p = 64 2.14 -> 1.74 us, p = 32 0.85 -> 0.79 us,
 * none at p <= 16, where the chain of square roots and divisions, not
 * the vector width, bounds an update. An x86-64-v4 (AVX-512) clone was
 * slower than AVX2 at every p up to 64 on the same machine (the loops
 * are short), so there is none.
 */
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    __GNUC__ >= 12
#define CLONES	__attribute__((target_clones("default", "arch=x86-64-v3")))
#else
#define CLONES
#endif
#define TT(r, i, j)	((r)->T[(size_t)(i) * (size_t)(r)->n + (size_t)(j)])

static int
finite_bounded(double v)
{
	return isfinite(v) && fabs(v) <= RLS_VALUE_MAX;
}

/* sqrt(a^2 + b^2) without overflow or harmful underflow. The maximum is
 * a plain comparison: the operands are never NaN here, and fmax() is a
 * libm call at -O2 (it was 30% of rls_update at p = 4). */
static inline double
radius(double a, double b)
{
	double fa = fabs(a), fb = fabs(b), m = fa > fb ? fa : fb;

	if (m > 1e150 || m < 1e-150)
		return hypot(a, b);
	return sqrt(a * a + b * b);
}

/* Is coefficient j determined? Compares |U_jj| with the column norm
 * sqrt(R_jj) (both in the stored scale): the sine test of RLS_RANK_TOL. */
static int
col_determined(const struct rls *r, int j)
{
	double u = TT(r, j, j);

	return u != 0.0 && u * u > RLS_RANK_TOL * RLS_RANK_TOL * r->d[j];
}

/*
 * Rotation of row into triangle row tj at column j: when row[j] != 0 sets
 * tj[j] to the new radius, (*c, *sn) to the rotation and returns 1; else
 * returns 0 (nothing to annihilate).
 */
static inline int
givens(double *tj, const double *row, int j, double *c, double *sn)
{
	double a, b = row[j], rad;

	if (b == 0.0)
		return 0;
	a = tj[j];
	rad = radius(a, b);
	*c = a / rad;
	*sn = b / rad;
	tj[j] = rad;
	return 1;
}

/* Apply rotation (c, sn) to the pair (tj[k], row[k]) for k in [k0, n). */
static inline void
apply1(double *restrict tj, double *restrict row, int k0, int n, double c,
    double sn)
{
	int k;

	for (k = k0; k < n; k++) {
		double t = tj[k];

		tj[k] = c * t + sn * row[k];
		row[k] = c * row[k] - sn * t;
	}
}

/* Rotation (c1, s1) with row, then (c2, s2) with reg, in one pass over tj:
 * per element the same operations in the same order as two passes. */
static inline void
apply2(double *restrict tj, double *restrict row, double *restrict reg,
    int k0, int n, double c1, double s1, double c2, double s2)
{
	int k;

	for (k = k0; k < n; k++) {
		double t = tj[k], u;

		u = c1 * t + s1 * row[k];
		row[k] = c1 * row[k] - s1 * t;
		tj[k] = c2 * u + s2 * reg[k];
		reg[k] = c2 * reg[k] - s2 * u;
	}
}

/*
 * Annihilate row and then reg (each length n, stored scale, either may be
 * NULL; reg is zero before column c0) into the triangle; rho last. Both
 * rows go through the triangle in one pass: the rotation of reg into
 * triangle row j needs only that row after row's rotation j, so this is
 * bit for bit the result of rotating row in completely and then reg, but
 * the two chains of square roots and divisions overlap (row j's rotation
 * waits for rotation j-1 of the same row) and each triangle row is read
 * once.
 */
CLONES static void
rotate_in(struct rls *r, double *row, double *reg, int c0)
{
	int n = r->n, p = r->p, j;

	for (j = 0; j < p; j++) {
		double c1 = 0, s1 = 0, c2 = 0, s2 = 0;
		double *tj = &r->T[(size_t)j * (size_t)n];
		int a, b;

		a = row != NULL && givens(tj, row, j, &c1, &s1);
		b = reg != NULL && j >= c0 && givens(tj, reg, j, &c2, &s2);
		if (a && b)
			apply2(tj, row, reg, j + 1, n, c1, s1, c2, s2);
		else if (a)
			apply1(tj, row, j + 1, n, c1, s1);
		else if (b)
			apply1(tj, reg, j + 1, n, c2, s2);
	}
	if (row != NULL)
		TT(r, p, p) = radius(TT(r, p, p), row[p]);
	if (reg != NULL)
		TT(r, p, p) = radius(TT(r, p, p), reg[p]);
}

/*
 * The fast path of an update. For a row x (stored scale, length n) and
 * u = Ust^-T x (forward substitution), the Givens
 * rotation that annihilates x into triangle row k is known in advance:
 * with q_k = 1 + sum_{i<k} u_i^2 and rho_k = sqrt(q_k),
 *   c_k = rho_k / rho_{k+1},   s_k = u_k / rho_{k+1},
 * and the part of the row still to be annihilated at step k is
 * g^(k) / rho_k, where g^(k)_j = x_j - sum_{i<k} u_i T_ij are exactly the
 * partial sums of the forward substitution. (Both follow by induction
 * from the rotation formulas: after rotation k the row holds
 * (g^(k) - u_k T_k.) / rho_{k+1}; the relation is the one behind the
 * a-priori/a-posteriori error ratio of QR-RLS, Haykin, "Adaptive Filter
 * Theory", QR-decomposition-based RLS.) Per entry the update is then
 *   T_kj <- c_k T_kj + u_k g^(k)_j / (rho_k rho_{k+1}),
 *   g^(k+1)_j = g^(k)_j - u_k T_kj (old T),
 *   T_kk <- T_kk rho_{k+1} / rho_k,  rho' = radius(rho, g^(p)_p / rho_p).
 * The chain of square roots and divisions that bounds the sequential
 * rotations becomes a chain of additions (the prefix sums q); the square
 * roots and reciprocals are independent of each other and pipeline, and
 * the entry loop has no dependency between k steps except through g.
 * c_k^2 + s_k^2 = 1 up to the rounding of q, so each step is still an
 * orthogonal rotation to working precision (backward stable, as the
 * sequential form). Used only when every pivot T_kk is nonzero
 * and q_p < FAST_QMAX, which keeps every intermediate far below DBL_MAX
 * (|g| <= rho_p times the row norm); otherwise the sequential rotations
 * (rotate_in) run, which handle a zero pivot (a coefficient not yet
 * determined) and any range the inputs allow.
 *
 * rotate_fast folds row x (length n, stored scale; overwritten) into the
 * triangle given u = Ust^-T x[0..p); returns 0 when done, 1 when the fast
 * path does not apply (nothing changed).
 */
/*
 * The kernels (rls_kern.h), built twice: vectorised, with the AVX2
 * clone, for p > SMALL_P, and with plain scalar loops up to SMALL_P,
 * where setting up the vector loops costs more than they save
 * (model_step at lambda 0.999, p = 4: 155 -> 132 ns; at p = 16 and 64
 * the vector loops win). Both do the same operations in the same order
 * on every entry, so they give the same bits.
 */
#define SMALL_P		8
#define KERN(f)		f##_vec
#define KERN_ATTR	CLONES
#include "rls_kern.h"
#undef KERN
#undef KERN_ATTR
#define KERN(f)		f##_small
#if defined(__GNUC__) && !defined(__clang__)
#define KERN_ATTR	__attribute__((optimize("no-tree-vectorize")))
#else
#define KERN_ATTR
#endif
#include "rls_kern.h"
#undef KERN
#undef KERN_ATTR

static int
rotate_fast(struct rls *r, double *x, const double *u)
{
	return r->p <= SMALL_P ? rotate_fast_small(r, x, u) :
	    rotate_fast_vec(r, x, u);
}

static void
forward(const struct rls *r, const double *x, double *v)
{
	if (r->p <= SMALL_P)
		forward_small(r, x, v);
	else
		forward_vec(r, x, v);
}

static int
check_opts(const struct rls_opts *o)
{
	int j;

	if (o == NULL || o->p < 1 || o->p > RLS_MAX_P)
		return E_ARG;
	if (!isfinite(o->delta) || o->delta < 0)
		return E_ARG;
	if (o->reg_block < 0 || o->reg_block > RLS_REG_BLOCK_MAX)
		return E_ARG;
	if (o->theta0 != NULL) {
		if (o->prior_sd == NULL)
			return E_ARG;
		for (j = 0; j < o->p; j++) {
			if (!finite_bounded(o->theta0[j]))
				return E_ARG;
			if (!(o->prior_sd[j] > 0) || isnan(o->prior_sd[j]))
				return E_ARG;
			if (isfinite(o->prior_sd[j]) &&
			    !(1.0 / o->prior_sd[j] <= RLS_VALUE_MAX))
				return E_ARG;
		}
	}
	if (o->theta_ref != NULL)
		for (j = 0; j < o->p; j++)
			if (!finite_bounded(o->theta_ref[j]))
				return E_ARG;
	return 0;
}

static void
start_state(struct rls *r, const struct rls_opts *o)
{
	int j, p = r->p;

	r->s = 1.0;
	r->lampow = 1.0;
	r->delta = o->delta;
	r->regk = o->reg_block > 0 ? o->reg_block : 1;
	r->nupd = 0;
	r->regpos = 0;
	r->regpos_at = 0;
	r->cyc = 0;
	memset(r->T, 0, sizeof(double) * (size_t)r->n * (size_t)r->n);
	memset(r->d, 0, sizeof(double) * (size_t)p);
	for (j = 0; j < p; j++) {
		if (o->theta_ref != NULL)
			r->theta_ref[j] = o->theta_ref[j];
		else if (o->theta0 != NULL)
			r->theta_ref[j] = o->theta0[j];
		else
			r->theta_ref[j] = 0.0;
	}
	if (o->theta0 == NULL)
		return;
	/* Prior: U0 = diag(1/sd), z0 = U0 theta0 (P0 diagonal). */
	for (j = 0; j < p; j++) {
		double u;

		if (isinf(o->prior_sd[j]))
			continue;
		u = 1.0 / o->prior_sd[j];
		TT(r, j, j) = u;
		TT(r, j, p) = u * o->theta0[j];
		r->d[j] = u * u;
	}
}

/*
 * rls_new: allocate a model with o->p coefficients and set its start state:
 * diffuse (o->theta0 == NULL) or the prior theta0 with per-coefficient
 * standard deviations prior_sd (an infinite SD leaves that coefficient
 * diffuse). Returns NULL on bad options or out of memory. The caller owns
 * the result and releases it with rls_free.
 */
struct rls *
rls_new(const struct rls_opts *o)
{
	struct rls *r;
	size_t n, bytes;

	if (check_opts(o) != 0)
		return NULL;
	n = (size_t)o->p + 1;
	bytes = sizeof(*r) + sizeof(double) * (n * n + 2 * (size_t)o->p);
	if ((r = calloc(1, bytes)) == NULL)
		return NULL;
	r->p = o->p;
	r->n = (int)n;
	r->T = (double *)(r + 1);
	r->d = r->T + n * n;
	r->theta_ref = r->d + o->p;
	start_state(r, o);
	return r;
}

/* rls_free: release r; NULL is a no-op. */
void
rls_free(struct rls *r)
{
	free(r);
}

/*
 * rls_reset: return r to the start state described by o, which must have
 * the same p. Returns E_ARG (state unchanged) on bad options.
 */
int
rls_reset(struct rls *r, const struct rls_opts *o)
{
	int rc;

	if (r == NULL || (rc = check_opts(o)) != 0 || o->p != r->p)
		return E_ARG;
	start_state(r, o);
	return 0;
}

/*
 * rls_copy: make dst an exact copy of src's state (same p required).
 * Returns E_ARG when the sizes differ; dst is then unchanged.
 */
int
rls_copy(struct rls *dst, const struct rls *src)
{
	size_t n;

	if (dst == NULL || src == NULL || dst->p != src->p)
		return E_ARG;
	n = (size_t)src->n;
	dst->s = src->s;
	dst->lampow = src->lampow;
	dst->delta = src->delta;
	dst->regk = src->regk;
	dst->regpos = src->regpos;
	dst->regpos_at = src->regpos_at;
	dst->nupd = src->nupd;
	dst->cyc = src->cyc;
	memcpy(dst->T, src->T, sizeof(double) * n * n);
	memcpy(dst->d, src->d, sizeof(double) * (size_t)src->p);
	memcpy(dst->theta_ref, src->theta_ref, sizeof(double) * (size_t)src->p);
	return 0;
}

/*
 * rls_rank: the number of determined coefficients (RLS_RANK_TOL test).
 */
int
rls_rank(const struct rls *r)
{
	int j, k = 0;

	for (j = 0; j < r->p; j++)
		k += col_determined(r, j);
	return k;
}

/*
 * rls_apriori: the one-step-ahead quantities for regressor phi without
 * changing state: yhat = phi' theta_{n-1} and r = phi' P_{n-1} phi, where
 * P_{n-1} = R_{n-1}^-1 (before the next record's forgetting). When some
 * coefficient is not yet determined, a->determined = 0 and yhat, r are NAN.
 * Keeps v = Ust^-T phi in a for rls_update_ap. Returns E_NUMERIC for a
 * non-finite or out-of-range phi.
 * Cost: p^2/2 multiply-adds, p divisions that do not wait for each other.
 */
int
rls_apriori(const struct rls *r, const double *phi, struct rls_apriori *a)
{
	double yhat = 0, ss = 0, *v = a->v;
	int j, p = r->p;

	a->of = NULL;
	for (j = 0; j < p; j++)
		if (!finite_bounded(phi[j]))
			return E_NUMERIC;
	a->rank = rls_rank(r);
	a->determined = a->rank == p;
	if (!a->determined) {
		a->yhat = NAN;
		a->r = NAN;
		return 0;
	}
	forward(r, phi, v);
	for (j = 0; j < p; j++) {
		yhat += v[j] * TT(r, j, p);
		ss += v[j] * v[j];
	}
	a->yhat = yhat;
	a->r = ss / (r->s * r->s);
	a->of = r;
	a->nupd = r->nupd;
	return 0;
}

/*
 * rls_reg_block: the K for regularised forgetting at a constant lambda
 * (rls.c, top): the largest K with p K <= 1 / (4 (1 - lambda)), at least
 * 1 and at most RLS_REG_BLOCK_MAX; 1 for lambda = 1 or out of range.
 */
int
rls_reg_block(int p, double lambda)
{
	double k;

	if (p < 1 || !(lambda > 0) || !(lambda < 1))
		return 1;
	k = floor(1.0 / (4.0 * (1.0 - lambda) * (double)p));
	if (!(k >= 1))
		return 1;
	return k > RLS_REG_BLOCK_MAX ? RLS_REG_BLOCK_MAX : (int)k;
}

/*
 * The update behind rls_update and rls_update_ap; vap = Ust^-T phi of the
 * current state (from rls_apriori) or NULL.
 */
static int
update(struct rls *r, const double *phi, double y, double w, double lambda,
    const double *vap)
{
	double row[RLS_MAX_P + 1], reg[RLS_MAX_P + 1], u[RLS_MAX_P];
	double s, inv;
	int j, c = 0, p = r->p, n = r->n, have_reg;

	/* rls_apriori checked this phi already when it gave vap. */
	for (j = 0; vap == NULL && j < p; j++)
		if (!finite_bounded(phi[j]))
			return E_NUMERIC;
	if (!finite_bounded(y))
		return E_NUMERIC;
	if (!(w >= 0) || !(w <= RLS_VALUE_MAX))
		return E_ARG;
	if (!(lambda > 0) || !(lambda <= 1))
		return E_ARG;

	/* Forget: true T <- sqrt(lambda) T, folded into s. */
	s = r->s * sqrt(lambda);
	if (s < RESCALE_MIN) {
		size_t i, nn = (size_t)n * (size_t)n;

		for (i = 0; i < nn; i++)
			r->T[i] *= s;
		for (j = 0; j < p; j++)
			r->d[j] *= s * s;
		s = 1.0;
		vap = NULL;	/* the stored triangle changed */
	}
	r->s = s;
	r->lampow *= lambda;
	inv = 1.0 / s;

	/* The regularisation row of this record, if it is a K-th one.
	 * regpos = nupd mod K is kept up to date without a 64-bit division
	 * per record, recomputed only when nupd moved otherwise (a restore,
	 * a reset). */
	if (r->regpos_at != r->nupd)
		r->regpos = (int)(r->nupd % (uint64_t)r->regk);
	have_reg = r->delta > 0 && lambda < 1 && r->regpos == r->regk - 1;
	r->regpos = r->regpos + 1 == r->regk ? 0 : r->regpos + 1;
	r->regpos_at = r->nupd + 1;
	if (have_reg) {
		double wk = 1 - lambda, g;
		int i;

		if (r->regk > 1) {
			double lk = lambda;

			for (i = 1; i < r->regk; i++)
				lk *= lambda;
			wk = 1 - lk;
		}
		c = r->cyc;
		g = sqrt((double)p * wk * r->delta) * inv;
		memset(reg, 0, sizeof(double) * (size_t)n);
		reg[c] = g;
		reg[p] = g * r->theta_ref[c];
		r->d[c] += g * g;
		r->cyc = c + 1 == p ? 0 : c + 1;
	}
	if (w > 0) {
		double sw = sqrt(w) * inv;

		for (j = 0; j < p; j++) {
			row[j] = sw * phi[j];
			r->d[j] += row[j] * row[j];
		}
		row[p] = sw * y;
		/* The fast path when rls_apriori gave v (it does so only
		 * when every pivot is nonzero; v of the scaled row is sw v):
		 * computing v here would cost as much as it saves. A record
		 * with a regularisation row takes the sequential rotations,
		 * both rows in one pass over the triangle (two passes cost
		 * more at p >= 16). */
		if (have_reg) {
			vap = NULL;
		} else if (vap != NULL) {
			for (j = 0; j < p; j++)
				u[j] = sw * vap[j];
		}
		if (vap == NULL || rotate_fast(r, row, u) != 0)
			rotate_in(r, row, have_reg ? reg : NULL, c);
	} else if (have_reg) {
		rotate_in(r, NULL, reg, c);
	}
	r->nupd++;
	return 0;
}

/*
 * rls_update: apply forgetting factor lambda in (0, 1] to the past, then
 * add the record (phi, y) with weight w >= 0 (w = 0 adds no information;
 * the forgetting still applies). When delta > 0 and lambda < 1, every
 * K-th update also adds a regularisation row as described at the top of
 * this file. Returns E_NUMERIC for non-finite or out-of-range values and
 * E_ARG for a bad weight or lambda; on error the state is bit-for-bit
 * unchanged. Cost: p + 1 sequential Givens rotations, about 2p^2
 * multiply-adds and a chain of p + 1 square roots and divisions (the
 * regularisation row, when due, in the same pass); no allocation.
 * rls_update_ap after rls_apriori takes the fast path instead.
 */
int
rls_update(struct rls *r, const double *phi, double y, double w,
    double lambda)
{
	return update(r, phi, y, w, lambda, NULL);
}

/*
 * rls_update_ap: rls_update for the phi that a came from, reusing the
 * forward substitution (and the range check of phi) rls_apriori(r, phi, a)
 * did. a must have been taken on r, with this phi, and no state change
 * since (it records r and its update count and is ignored otherwise).
 * Same results and errors as rls_update.
 */
int
rls_update_ap(struct rls *r, const struct rls_apriori *a, const double *phi,
    double y, double w, double lambda)
{
	const double *vap = NULL;

	if (a != NULL && a->of == r && a->nupd == r->nupd)
		vap = a->v;
	return update(r, phi, y, w, lambda, vap);
}

/*
 * rls_theta: the current coefficients theta = U^-1 z by back substitution
 * (p^2/2 multiply-adds). A coefficient that is not determined yet is
 * reported as 0 and excluded from the others (a basic solution); check
 * rls_rank. Always returns 0.
 */
int
rls_theta(const struct rls *r, double *theta)
{
	int i, k, p = r->p;

	for (i = p - 1; i >= 0; i--) {
		const double *ti = &r->T[(size_t)i * (size_t)r->n];
		double acc;

		if (!col_determined(r, i)) {
			theta[i] = 0.0;
			continue;
		}
		acc = ti[p];
		for (k = i + 1; k < p; k++)
			acc -= ti[k] * theta[k];
		theta[i] = acc / ti[i];
	}
	return 0;
}

/* rls_rss: J = rho^2, the weighted residual sum of squares of the current
 * fit, including the (decayed) prior and regularisation penalty. */
double
rls_rss(const struct rls *r)
{
	double rho = r->s * TT(r, r->p, r->p);

	return rho * rho;
}

/*
 * rls_cov_unscaled: P = R^-1 = U^-1 U^-T into P (p*p row-major, caller's
 * storage), computed with LAPACK dtrtri + dlauum. Returns E_STATE when a
 * coefficient is not determined (P would be unbounded) and E_NUMERIC when
 * LAPACK reports a singular factor.
 */
int
rls_cov_unscaled(const struct rls *r, double *P)
{
	int i, j, p = r->p;
	double s2 = r->s * r->s;

	if (rls_rank(r) < p)
		return E_STATE;
	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++)
			P[i * p + j] = j >= i ? TT(r, i, j) : 0.0;
	if (LAPACKE_dtrtri(LAPACK_ROW_MAJOR, 'U', 'N', p, P, p) != 0)
		return E_NUMERIC;
	if (LAPACKE_dlauum(LAPACK_ROW_MAJOR, 'U', p, P, p) != 0)
		return E_NUMERIC;
	for (i = 0; i < p; i++)
		for (j = i; j < p; j++) {
			P[i * p + j] /= s2;
			P[j * p + i] = P[i * p + j];
		}
	return 0;
}

/*
 * rls_xpx: *q = x' P x = ||U^-T x||^2 for the current state (no forgetting
 * of the next record applied). E_STATE when not determined, E_NUMERIC for
 * a non-finite x.
 */
int
rls_xpx(const struct rls *r, const double *x, double *q)
{
	struct rls_apriori a;
	int rc;

	if ((rc = rls_apriori(r, x, &a)) != 0)
		return rc;
	if (!a.determined)
		return E_STATE;
	*q = a.r;
	return 0;
}

/*
 * rls_cond: *kappa = an estimate of the 1-norm condition number of P,
 * computed as (1/rcond(U))^2 with LAPACK dtrcon (Hager 1984; Higham 1988)
 * in O(p^2). E_STATE when not determined.
 */
int
rls_cond(const struct rls *r, double *kappa)
{
	double rcond = 0;

	if (rls_rank(r) < r->p)
		return E_STATE;
	if (LAPACKE_dtrcon(LAPACK_ROW_MAJOR, '1', 'U', 'N', r->p, r->T, r->n,
	    &rcond) != 0)
		return E_NUMERIC;
	*kappa = rcond > 0 ? 1.0 / (rcond * rcond) : INFINITY;
	return 0;
}

/*
 * rls_mahal: *d2 = (theta - ref)' R (theta - ref) = ||z - U ref||^2, the
 * distance of ref from the current estimate in the metric of the
 * information matrix, in O(p^2/2) without forming theta or P.
 */
int
rls_mahal(const struct rls *r, const double *ref, double *d2)
{
	double acc = 0;
	int i, k, p = r->p;

	for (i = 0; i < p; i++) {
		const double *ti = &r->T[(size_t)i * (size_t)r->n];
		double e = ti[p];

		for (k = i; k < p; k++)
			e -= ti[k] * ref[k];
		acc += e * e;
	}
	*d2 = acc * r->s * r->s;
	return 0;
}

/*
 * rls_diag_p: diag(P) into dp (p values): P_jj is the squared norm of row j
 * of U^-1, accumulated column by column by back substitution; O(p^3/6), no
 * allocation. E_STATE when not determined.
 */
int
rls_diag_p(const struct rls *r, double *dp)
{
	double x[RLS_MAX_P];
	int i, k, c, p = r->p;
	double s2 = r->s * r->s;

	if (rls_rank(r) < p)
		return E_STATE;
	memset(dp, 0, sizeof(double) * (size_t)p);
	for (c = 0; c < p; c++) {
		/* Solve Ust x = e_c; x_i = 0 for i > c. */
		for (i = c; i >= 0; i--) {
			const double *ti = &r->T[(size_t)i * (size_t)r->n];
			double acc = i == c ? 1.0 : 0.0;

			for (k = i + 1; k <= c; k++)
				acc -= ti[k] * x[k];
			x[i] = acc / ti[i];
			dp[i] += x[i] * x[i];
		}
	}
	for (i = 0; i < p; i++)
		dp[i] /= s2;
	return 0;
}

/* rls_trace_p: *tr = trace(P); E_STATE when not determined. */
int
rls_trace_p(const struct rls *r, double *tr)
{
	double dp[RLS_MAX_P];
	int j, rc;

	if ((rc = rls_diag_p(r, dp)) != 0)
		return rc;
	*tr = 0;
	for (j = 0; j < r->p; j++)
		*tr += dp[j];
	return 0;
}
