/* SPDX-License-Identifier: ISC */
/*
 * terms: a model's regressors. Parses a term list written over named input
 * fields ("raw, raw^2, raw*temp, prev(raw)"), canonicalises it, and turns a
 * record's raw field values into the regressor vector phi, formed from
 * centred and scaled fields. Maps coefficients and their covariance back to
 * the user's original terms. Pure: no I/O, no globals, no logging; it does
 * not fit anything and does not keep previous records (the model does).
 * The grammar and the rules are documented in daemon/TERMS.md.
 */
#ifndef COEFD_TERMS_H
#define COEFD_TERMS_H

#include <stddef.h>

#include "limits.h"

#define TERMS_POWER_MAX	9	/* largest power of a field in a term */

/*
 * A compiled term set. Owner: the caller of terms_parse or terms_clone (in
 * the daemon, the model), released with terms_free. Holds the scaling
 * constants once set. Its compiled form (terms, field names, the structure
 * of the back-map) is immutable and shared by reference count between a
 * set and its clones, so many models of one configuration section hold one
 * copy; a clone stays valid after the set it came from is freed. Term sets
 * are not thread-safe: sets sharing a form share its scratch space.
 */
struct terms;

/* Parsing and lifetime. */

/* terms_parse: compile a term list over declared fields into *out. */
int terms_parse(const char *text, const char *const *fields, int nfields,
    int target, int intercept, struct terms **out, char *errbuf,
    size_t errlen);
/* terms_clone: a set sharing t's compiled form, with t's constants. */
struct terms *terms_clone(const struct terms *t, int room);
/* terms_free: release t (the form with its last set); NULL is a no-op. */
void terms_free(struct terms *t);
/* terms_same: 1 when a and b have equal compiled forms. */
int terms_same(const struct terms *a, const struct terms *b);
/* terms_shares: 1 when a and b use one compiled form in memory. */
int terms_shares(const struct terms *a, const struct terms *b);

/* Shape. */

/* terms_p: number of coefficients (intercept included). */
int terms_p(const struct terms *t);
/* terms_text: display text of coefficient j ("intercept", "raw^2", ...). */
const char *terms_text(const struct terms *t, int j);
/* terms_list: canonical term list without the intercept, and its length. */
const char *terms_list(const struct terms *t, size_t *len);
/* terms_fields: the declared field names (nfields, shared, read-only). */
const char (*terms_fields(const struct terms *t))[FIELD_NAME_MAX + 1];
/* terms_nfields: number of declared fields (length of x, xprev, centre). */
int terms_nfields(const struct terms *t);
/* terms_has_intercept: 1 when coefficient 0 is the constant 1. */
int terms_has_intercept(const struct terms *t);
/* terms_uses_prev: 1 when some term contains prev(). */
int terms_uses_prev(const struct terms *t);
/* terms_field_used: 1 when field f appears in some term. */
int terms_field_used(const struct terms *t, int f);
/* terms_field_centrable: 1 when centring field f is exact (closure rule). */
int terms_field_centrable(const struct terms *t, int f);

/* Scaling constants (state: set once, saved by persistence). */

/* terms_set_scaling: fix centre[f], scale[f] for every field; once only. */
int terms_set_scaling(struct terms *t, const double *centre,
    const double *scale);
/* terms_scaling_auto: fix the constants from the first n records. */
int terms_scaling_auto(struct terms *t, const double *X, int n);
/* terms_scaling_is_set: 1 once constants were fixed. */
int terms_scaling_is_set(const struct terms *t);
/* terms_get_scaling: copy the constants in force (identity until set). */
void terms_get_scaling(const struct terms *t, double *centre, double *scale);

/* Evaluation (no allocation). */

/* terms_eval: regressors phi (scaled) for record x with previous xprev. */
int terms_eval(const struct terms *t, const double *x, const double *xprev,
    double *phi);
/* terms_ingest: terms_eval plus the acceptance rule for a model's record. */
int terms_ingest(const struct terms *t, const double *x, const double *xprev,
    double *phi);
/* terms_eval_original: regressors in original units (raw products). */
int terms_eval_original(const struct terms *t, const double *x,
    const double *xprev, double *phi);

/* Back to the user's terms. */

/* terms_map: the p x p matrix M with phi_scaled = M phi_original. */
void terms_map(const struct terms *t, double *M);
/* terms_to_original: theta_o = M' theta_s, cov_o = M' cov_s M. */
void terms_to_original(const struct terms *t, const double *theta_s,
    const double *cov_s, double *theta_o, double *cov_o);

#endif
