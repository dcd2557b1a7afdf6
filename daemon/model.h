/* SPDX-License-Identifier: ISC */
/*
 * model: one live regression model: the RLS engine, its statistics, its
 * drift detectors, a pinned reference calibration and counters, stepped one
 * record at a time. PURE: no I/O, no clocks (record times come in as
 * arguments), no globals; allocates only in model_new. The registry owns
 * models; a model owns its engine.
 */
#ifndef COEFD_MODEL_H
#define COEFD_MODEL_H

#include <stdint.h>

#include "alarm.h"
#include "rls.h"
#include "stats.h"

struct terms;

/* model_ingest: the record only primed previous values (prev() terms). */
#define MODEL_PRIMED	1

struct model_opts {
	int		 p;		/* coefficients (incl. intercept) */
	int		 intercept;	/* 1 if phi[0] is the constant 1 */
	double		 lambda;	/* forgetting per record, (0, 1] */
	double		 tau;		/* memory time constant in seconds;
					 * > 0 overrides lambda with
					 * exp(-dt/tau) per record */
	double		 delta;		/* regularised forgetting strength */
	double		 sigma_memory;	/* sigma_ref memory, x fit memory */
	double		 drift_alpha;	/* joint drift test level */
	double		 level;		/* interval coverage, e.g. 0.95 */
	const double	*theta0;	/* prior mean (p) or NULL */
	const double	*prior_sd;	/* prior SD (p), with theta0 */
	const double	*reference;	/* configured reference (p) or NULL */
	const double	*tol_abs;	/* per-coef drift tolerance or NULL */
	const double	*tol_pct;	/* per-coef tolerance in % or NULL */
	struct alarm_opts alarm;
};

/* What one record did; filled by model_step. */
struct model_step_out {
	double		 lambda;	/* forgetting applied */
	double		 yhat;		/* one-step-ahead prediction (NAN) */
	double		 e;		/* one-step-ahead error (NAN) */
	double		 z;		/* standardised error (NAN) */
	double		 f;		/* var(e)/sigma^2 = 1/w + r/lambda */
	int		 used;		/* 1 if it updated the fit */
	enum alarm_gate	 gate;		/* gate outcome */
	unsigned	 events;	/* ALARM_EV_* bits */
};

/* Public for persistence (bit-for-bit save/restore); only model.c and
 * the persistence codec touch the fields. */
struct model {
	struct model_opts o;		/* arrays below replace o's pointers */
	struct rls	*rls;
	struct stats	 st;
	struct alarm	 al;
	double		 sig_num;	/* EW sum of e^2/f (sigma_ref^2) */
	double		 sig_w;		/* EW count for sig_num */
	int		 frozen;
	int		 pinned;	/* 0 none, 1 from the model, 2 config */
	double		 pin_t;		/* time pinned */
	double		 pin_sigma;	/* sigma_ref when pinned */
	double		 last_t;	/* time of the last used record */
	int		 has_last_t;
	int		 scale_auto;	/* scale from the first record */
	uint64_t	 n_seen;	/* valid records stepped */
	uint64_t	 n_used;	/* records that updated the fit */
	uint64_t	 n_frozen;	/* records seen while frozen */
	/* Storage of the optional vectors (p each): NULL when the model was
	 * created without that setting; o's pointers say which are in
	 * force. */
	double		*theta0, *prior_sd, *reference, *tol_abs, *tol_pct;
	double		*tol_extra;	/* owned: tolerances added by a reload */
	double		*theta_pin;	/* p, in the engine's (scaled) terms */
	struct terms	*terms;		/* owned; NULL: callers give phi */
	int		 has_prev;	/* a previous record was seen */
	double		*xprev;		/* nfields raw values; only with
					 * prev() terms, else NULL */
	uint64_t	 n_primed;	/* records that only primed xprev */
};

/* Everything served about a model (arrays sized p, caller's storage). */
struct model_report {
	int		 p, rank, determined;
	double		*theta;		/* p */
	double		*se;		/* p; NAN when undetermined */
	double		*ci_lo, *ci_hi;	/* p; interval at o.level */
	double		*ref;		/* p; pinned reference (NAN if none) */
	struct stats_report s;
	double		 lambda;	/* configured (or last applied) */
	double		 memory;	/* effective memory 1/(1-lambda), recs */
	double		 cond;		/* condition estimate of P (NAN) */
	double		 sigma_ref;	/* detector scale (NAN until known) */
	double		 drift_d2;	/* joint drift statistic (NAN) */
	double		 drift_q;	/* its threshold (NAN when no pin) */
};

/* model_opts_default: documented defaults for p coefficients. */
void		 model_opts_default(struct model_opts *o, int p, int intercept);
/* model_opts_check: E_ARG with a message for an invalid setting. */
int		 model_opts_check(const struct model_opts *o, char *errbuf,
		    size_t errlen);
/* model_new: a model in its start state; NULL on bad options / memory. */
struct model	*model_new(const struct model_opts *o);
/* model_free: release; NULL is a no-op. */
void		 model_free(struct model *m);
/* model_step: one record (phi, y, weight w, time t); transactional. */
int		 model_step(struct model *m, const double *phi, double y,
		    double w, double t, struct model_step_out *out);
/* model_set_terms: attach derived terms (ownership passes to m). */
int		 model_set_terms(struct model *m, struct terms *t,
		    int scale_auto);
/* model_set_tol: new drift tolerances (reload); may allocate. */
int		 model_set_tol(struct model *m, const double *tol_abs,
		    const double *tol_pct);
/* model_ingest: one record of raw field values through the terms. */
int		 model_ingest(struct model *m, const double *x, double y,
		    double w, double t, struct model_step_out *out);
/* model_predict_fields: model_predict from raw field values. */
int		 model_predict_fields(const struct model *m, const double *x,
		    double *yhat, double *se, double *lo, double *hi);
/* model_report: fill rep from the current state. */
int		 model_report(const struct model *m, struct model_report *rep);
/* model_report_fast: theta and statistics only (no SEs, no LAPACK). */
void		 model_report_fast(const struct model *m,
		    struct model_report *rep);
/* model_predict: yhat with a prediction interval for regressors phi. */
int		 model_predict(const struct model *m, const double *phi,
		    double *yhat, double *se, double *lo, double *hi);
/* model_pin: pin the current coefficients as the reference calibration. */
int		 model_pin(struct model *m, double t);
/* model_freeze: freeze (1) or thaw (0) the coefficients. */
void		 model_freeze(struct model *m, int on);
/* model_reset: back to the start state, keeping settings and reference. */
void		 model_reset(struct model *m);
/* model_memory: effective memory in records for a lambda. */
double		 model_memory(double lambda);

#endif
