/* SPDX-License-Identifier: ISC */
/*
 * rls: exponentially weighted recursive least squares in square-root
 * information form (QR-RLS / SRIF). PURE: no I/O, no clocks, no globals,
 * no allocation after rls_new. Owns only its own state block.
 *
 * Model: y = theta' phi. State: the (p+1)x(p+1) upper triangle
 * T = [U z; 0 rho] with U'U = R (information matrix), U theta = z and
 * rho^2 = J (the minimum of the weighted cost, i.e. the weighted RSS).
 * See rls.c for the equations and references.
 */
#ifndef COEFD_RLS_H
#define COEFD_RLS_H

#include <stdint.h>

#include "limits.h"

/* Largest absolute value accepted in a regressor or target. Bounding the
 * inputs makes overflow inside the rotations impossible (see rls.c). */
#define RLS_VALUE_MAX	1e100
/* A coefficient j counts as determined when the sine of the angle between
 * column j of the weighted design and the span of columns 0..j-1 exceeds
 * this (scale-invariant rank test; exact collinearity gives ~1e-16). */
#define RLS_RANK_TOL	1e-12
/* Largest K of the regularisation rows (rls_opts.reg_block). */
#define RLS_REG_BLOCK_MAX	4096

struct rls_opts {
	int		 p;		/* coefficients, 1..RLS_MAX_P */
	double		 delta;		/* regularised-forgetting strength
					 * (0 = off); pseudo-information per
					 * coefficient, see rls.c */
	const double	*theta_ref;	/* regularisation target (p); NULL =
					 * theta0 if given, else zeros */
	const double	*theta0;	/* prior mean (p); NULL = no prior */
	const double	*prior_sd;	/* prior SD per coefficient (p); an
					 * infinite SD = no prior on that one */
	int		 reg_block;	/* K: one regularisation row every K
					 * updates (0 = 1); see rls_reg_block */
};

/*
 * The engine state. Fields are public so persistence can save and restore
 * them bit for bit; only rls.c changes them. T is stored scaled: the true
 * triangle is s * T.
 */
struct rls {
	int		 p;		/* number of coefficients */
	int		 n;		/* p + 1, the row stride of T */
	double		 s;		/* running scale, true T = s * T */
	double		 lampow;	/* product of all lambdas applied */
	double		 delta;		/* regularisation strength */
	int		 regk;		/* K of the regularisation rows (from
					 * rls_opts, not part of the saved
					 * state) */
	uint64_t	 nupd;		/* updates applied */
	int		 regpos;	/* nupd mod regk when regpos_at == nupd
					 * (a cache, not saved) */
	uint64_t	 regpos_at;
	int		 cyc;		/* next regularised coordinate */
	double		*T;		/* n*n row-major, upper triangle used */
	double		*d;		/* p: diag of R, scaled like T^2 */
	double		*theta_ref;	/* p: regularisation target */
};

/* A-priori quantities for a record, before it is used. */
struct rls_apriori {
	int	 determined;	/* 1 when every coefficient is determined */
	int	 rank;		/* number of determined coefficients */
	double	 yhat;		/* phi' theta_{n-1} (NAN if !determined) */
	double	 r;		/* phi' P_{n-1} phi (NAN if !determined) */
	/* For rls_update_ap: the state v belongs to. */
	const struct rls *of;	/* NULL when v is not set */
	uint64_t nupd;		/* of->nupd when v was computed */
	double	 v[RLS_MAX_P];	/* Ust^-T phi (stored scale) */
};

/* rls_new: allocate and start a model (diffuse or with a prior). */
struct rls	*rls_new(const struct rls_opts *o);
/* rls_free: release; NULL is a no-op. */
void		 rls_free(struct rls *r);
/* rls_reset: back to the start state given by o (same p). */
int		 rls_reset(struct rls *r, const struct rls_opts *o);
/* rls_copy: copy state of src into dst (same p), for snapshots. */
int		 rls_copy(struct rls *dst, const struct rls *src);
/* rls_apriori: one-step-ahead prediction and r for phi; no state change. */
int		 rls_apriori(const struct rls *r, const double *phi,
		    struct rls_apriori *a);
/* rls_update: forget by lambda, then add the record (phi, y, weight w). */
int		 rls_update(struct rls *r, const double *phi, double y,
		    double w, double lambda);
/* rls_update_ap: rls_update reusing a = rls_apriori(r, phi, a) taken
 * just before (no state change in between); same results and errors. */
int		 rls_update_ap(struct rls *r, const struct rls_apriori *a,
		    const double *phi, double y, double w, double lambda);
/* rls_reg_block: K for regularisation rows at a constant lambda. */
int		 rls_reg_block(int p, double lambda);
/* rls_theta: current coefficients (undetermined ones reported as 0). */
int		 rls_theta(const struct rls *r, double *theta);
/* rls_rss: J, the weighted residual sum of squares incl. prior/penalty. */
double		 rls_rss(const struct rls *r);
/* rls_rank: number of determined coefficients. */
int		 rls_rank(const struct rls *r);
/* rls_cov_unscaled: P = R^-1 (p*p, row-major), via LAPACK dtrtri. */
int		 rls_cov_unscaled(const struct rls *r, double *P);
/* rls_xpx: x' P x for a vector x (forward substitution). */
int		 rls_xpx(const struct rls *r, const double *x, double *q);
/* rls_cond: 1-norm condition estimate of P (= kappa(U)^2), via dtrcon. */
int		 rls_cond(const struct rls *r, double *kappa);
/* rls_mahal: ||U (theta - ref)||^2, the information-metric distance. */
int		 rls_mahal(const struct rls *r, const double *ref, double *d2);
/* rls_diag_p: diag(P) without LAPACK or allocation; O(p^3/6). */
int		 rls_diag_p(const struct rls *r, double *dp);
/* rls_trace_p: trace of P (for windup bounds); O(p^3/6). */
int		 rls_trace_p(const struct rls *r, double *tr);

#endif
