/* SPDX-License-Identifier: ISC */
/*
 * check_persist: the state directory's byte formats. CRC-32C against the
 * RFC 3720 test vectors and a bitwise reference; bit-for-bit round trips
 * of registry entries in every state the engine can be in (fresh,
 * undetermined, determined, frozen, pinned from the model and from the
 * config, alarms on, prev() terms primed, auto and explicit scaling, time
 * constant memory, wrapped history, reset, stale and orphan), each
 * compared field by field and then fed the same further records as the
 * original; rejection of every single bit flip and every truncation;
 * journal entries; replaying a captured journal through the registry
 * gives the live state bit for bit; the registry's copy-before-write hook.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "err.h"
#include "model.h"
#include "persist.h"
#include "registry.h"
#include "suites.h"
#include "terms.h"
#include "testutil.h"

/* ---- helpers ---- */


/* Raw values (fields then target) through the registry, as a record. */
static int
feed(struct registry *r, const char *name, const double *x, int nx,
    double t)
{
	struct reg_result res;

	return registry_apply(r, name, strlen(name), x, nx, t, &res);
}

static struct reg_entry *
get(struct registry *r, const char *name)
{
	struct reg_result res;
	struct reg_entry *e = NULL;

	memset(&res, 0, sizeof(res));
	ck_assert_int_eq(registry_get(r, name, strlen(name), &e, &res), 0);
	return e;
}

/* e's block in a buffer of exactly its size (persist_model_size), also
 * checking that a buffer one byte short is refused with the size. */
static uint8_t *
encode(const struct reg_entry *e, size_t *len)
{
	uint8_t *b;
	size_t n = 0;

	ck_assert_int_eq(persist_model_size(e, len), 0);
	b = malloc(*len);
	ck_assert_ptr_nonnull(b);
	ck_assert_int_eq(persist_model_encode(e, b, *len - 1, &n), E_LIMIT);
	ck_assert_uint_eq(n, *len);
	ck_assert_int_eq(persist_model_encode(e, b, *len, &n), 0);
	ck_assert_uint_eq(n, *len);
	return b;
}

/* Bit equality of doubles (NaN payloads and signed zeros included). */
static void
same_f64s(const double *a, const double *b, size_t n, const char *what)
{
	size_t i;

	/* An absent vector (NULL) matches only an absent one. */
	ck_assert_msg((a == NULL) == (b == NULL), "%s: present in one only",
	    what);
	for (i = 0; a != NULL && i < n; i++)
		ck_assert_msg(memcmp(&a[i], &b[i], sizeof(double)) == 0,
		    "%s[%zu]: %.17g != %.17g", what, i, a[i], b[i]);
}

#define SAME(a, b, f)	ck_assert_msg(memcmp(&(a)->f, &(b)->f, \
			    sizeof((a)->f)) == 0, "field %s differs", #f)

/* Every field of two entries, bit for bit. */
static void
same_entry(const struct reg_entry *a, const struct reg_entry *b)
{
	const struct model *m = a->m, *n = b->m;
	double ca[PROTO_MAX_VALUES + 1], sa[PROTO_MAX_VALUES + 1];
	double cb[PROTO_MAX_VALUES + 1], sb[PROTO_MAX_VALUES + 1];
	size_t p = (size_t)m->o.p, tnf;
	int f, j, d;

	ck_assert_str_eq(a->name, b->name);
	ck_assert_str_eq(a->section, b->section);
	SAME(a, b, from_template);
	SAME(a, b, orphan);
	SAME(a, b, stale);
	SAME(a, b, nfields);
	for (f = 0; f <= a->nfields; f++)
		ck_assert_str_eq(a->fields[f], b->fields[f]);
	SAME(a, b, n_rejected);
	SAME(a, b, n_updates);
	SAME(a, b, hist_cap);
	SAME(a, b, hist_len);
	SAME(a, b, hist_next);
	SAME(a, b, hist_every);
	same_f64s(a->hist, b->hist, (size_t)a->hist_cap * (3 + p), "hist");

	/* Settings (pointers: presence, then the arrays). */
	SAME(m, n, o.p);
	SAME(m, n, o.intercept);
	SAME(m, n, o.lambda);
	SAME(m, n, o.tau);
	SAME(m, n, o.delta);
	SAME(m, n, o.sigma_memory);
	SAME(m, n, o.drift_alpha);
	SAME(m, n, o.level);
	SAME(m, n, o.alarm.cusum_k);
	SAME(m, n, o.alarm.cusum_h);
	SAME(m, n, o.alarm.dwell);
	SAME(m, n, o.alarm.r2_floor);
	SAME(m, n, o.alarm.r2_hyst);
	SAME(m, n, o.alarm.r2_min_neff);
	SAME(m, n, o.alarm.gate_z);
	SAME(m, n, o.alarm.gate_run);
	SAME(m, n, o.alarm.drift_q);
	SAME(m, n, o.alarm.drift_clear);
	SAME(m, n, o.alarm.warmup);
	ck_assert_int_eq(m->o.theta0 == NULL, n->o.theta0 == NULL);
	ck_assert_int_eq(m->o.prior_sd == NULL, n->o.prior_sd == NULL);
	ck_assert_int_eq(m->o.reference == NULL, n->o.reference == NULL);
	ck_assert_int_eq(m->o.tol_abs == NULL, n->o.tol_abs == NULL);
	ck_assert_int_eq(m->o.tol_pct == NULL, n->o.tol_pct == NULL);
	ck_assert(n->o.theta0 == NULL || n->o.theta0 == n->theta0);
	ck_assert(n->o.tol_pct == NULL || n->o.tol_pct == n->tol_pct);
	/* Vectors in force (a model stores only the configured ones). */
	same_f64s(m->o.theta0, n->o.theta0, p, "theta0");
	same_f64s(m->o.prior_sd, n->o.prior_sd, p, "prior_sd");
	same_f64s(m->o.reference, n->o.reference, p, "reference");
	same_f64s(m->o.tol_abs, n->o.tol_abs, p, "tol_abs");
	same_f64s(m->o.tol_pct, n->o.tol_pct, p, "tol_pct");
	same_f64s(m->theta_pin, n->theta_pin, p, "theta_pin");

	/* Engine. */
	SAME(m->rls, n->rls, p);
	SAME(m->rls, n->rls, n);
	SAME(m->rls, n->rls, s);
	SAME(m->rls, n->rls, lampow);
	SAME(m->rls, n->rls, delta);
	SAME(m->rls, n->rls, nupd);
	SAME(m->rls, n->rls, cyc);
	same_f64s(m->rls->T, n->rls->T, (p + 1) * (p + 1), "T");
	same_f64s(m->rls->d, n->rls->d, p, "d");
	same_f64s(m->rls->theta_ref, n->rls->theta_ref, p, "theta_ref");

	/* Statistics, detectors, model scalars. */
	SAME(m, n, st.n);
	SAME(m, n, st.n_prior);
	SAME(m, n, st.W);
	SAME(m, n, st.Q);
	SAME(m, n, st.mean);
	SAME(m, n, st.S);
	SAME(m, n, st.Y2);
	SAME(m, n, st.rss_prior);
	SAME(m, n, st.tss_prior);
	SAME(m, n, al.cusum_pos);
	SAME(m, n, al.cusum_neg);
	SAME(m, n, al.calm);
	SAME(m, n, al.gate_consec);
	SAME(m, n, al.n_seen);
	SAME(m, n, al.n_gated);
	SAME(m, n, al.n_shifts);
	for (d = 0; d < ALARM_NDET; d++) {
		SAME(m, n, al.st[d].on);
		SAME(m, n, al.st[d].t_changed);
		SAME(m, n, al.st[d].value);
	}
	SAME(m, n, sig_num);
	SAME(m, n, sig_w);
	SAME(m, n, frozen);
	SAME(m, n, pinned);
	SAME(m, n, pin_t);
	SAME(m, n, pin_sigma);
	SAME(m, n, last_t);
	SAME(m, n, has_last_t);
	SAME(m, n, n_seen);
	SAME(m, n, n_used);
	SAME(m, n, n_frozen);
	SAME(m, n, n_primed);
	SAME(m, n, scale_auto);
	SAME(m, n, has_prev);

	/* Terms. */
	ck_assert_int_eq(terms_p(m->terms), terms_p(n->terms));
	for (j = 0; j < terms_p(m->terms); j++)
		ck_assert_str_eq(terms_text(m->terms, j),
		    terms_text(n->terms, j));
	tnf = (size_t)terms_nfields(m->terms);
	ck_assert_int_eq(terms_nfields(n->terms), (int)tnf);
	ck_assert_int_eq(terms_scaling_is_set(m->terms),
	    terms_scaling_is_set(n->terms));
	terms_get_scaling(m->terms, ca, sa);
	terms_get_scaling(n->terms, cb, sb);
	same_f64s(ca, cb, tnf, "centre");
	same_f64s(sa, sb, tnf, "scale");
	same_f64s(m->xprev, n->xprev, tnf, "xprev");
}

/* The models and their histories: one of every kind. */
static const char conf_text[] =
"[daemon]\n"
"history = 4\n"
"history_every = 1\n"
"[template t_*]\n"
"fields = a b\n"
"target = y\n"
"memory = 0.98\n"
"gate = 3\n"
"gate_run = 4\n"
"warmup = 10\n"
"dwell = 5\n"
"[template lag_*]\n"
"fields = raw\n"
"target = ref\n"
"terms = raw, prev(raw), prev(ref)\n"
"memory = 0.97\n"
"[model timed]\n"
"fields = raw\n"
"target = ref\n"
"memory = 60s\n"
"[model calib]\n"
"fields = clamp temp\n"
"target = master\n"
"terms = clamp, temp, clamp*temp\n"
"scale = none\n"
"prior = 0 1 0 0\n"
"prior_sd = 0.5 0.1 0.01 0.001\n"
"reference = 0.02 1.003 -0.0004 0.00002\n"
"tolerance = - 1% 0.002 -\n"
"r2_floor = 0.9\n"
"[model explicit]\n"
"fields = raw\n"
"target = ref\n"
"terms = raw, raw^2\n"
"scale = raw:10:4\n";

/* y = 1 + 2a - b + noise (plus shift) for the t_* models. */
static void
feed_t(struct registry *r, const char *name, struct rng *g, int n,
    double shift, double *t)
{
	double x[3];
	int i;

	for (i = 0; i < n; i++) {
		x[0] = rng_norm(g);
		x[1] = 3 + rng_norm(g);
		x[2] = 1 + 2 * x[0] - x[1] + 0.1 * rng_norm(g) + shift;
		feed(r, name, x, 3, *t);
		*t += 1;
	}
}

static void
feed_lag(struct registry *r, const char *name, struct rng *g, int n,
    double *t)
{
	double x[2];
	int i;

	for (i = 0; i < n; i++) {
		x[0] = 20 + 5 * rng_norm(g);
		x[1] = 0.5 + 0.9 * x[0] + 0.05 * rng_norm(g);
		feed(r, name, x, 2, *t);
		*t += 1;
	}
}

/* A registry with a model in every state; returns the model names. */
static struct registry *
every_state(struct conf **cp)
{
	struct registry *r;
	struct conf *c = test_conf(conf_text);
	struct reg_entry *e;
	struct rng g;
	double t = 1.7e9, x[3];
	char err[160];
	int i;

	rng_seed(&g, 20240601);
	ck_assert_ptr_nonnull(r = registry_new(c));
	get(r, "t_fresh");
	feed_t(r, "t_undet", &g, 2, 0, &t);
	feed_t(r, "t_fit", &g, 60, 0, &t);
	feed_t(r, "t_frozen", &g, 40, 0, &t);
	registry_freeze(r, get(r, "t_frozen"), 1);
	feed_t(r, "t_frozen", &g, 10, 0, &t);
	feed_t(r, "t_pinned", &g, 60, 0, &t);
	ck_assert_int_eq(registry_pin(r, get(r, "t_pinned"), t), 0);
	feed_t(r, "t_pinned", &g, 30, 0.25, &t);
	/* A level shift: gated outliers, then the shift and CUSUM alarms. */
	feed_t(r, "t_alarm", &g, 60, 0, &t);
	feed_t(r, "t_alarm", &g, 12, 5, &t);
	e = get(r, "t_alarm");
	ck_assert_msg(alarm_any(&e->m->al), "t_alarm has no alarm on");
	ck_assert_uint_gt(e->m->al.n_gated, 0);
	feed_t(r, "t_reset", &g, 30, 0, &t);
	ck_assert_int_eq(registry_rebuild(r, get(r, "t_reset"), err,
	    sizeof(err)), 0);
	feed_t(r, "t_reset", &g, 3, 0, &t);
	feed_lag(r, "lag_primed", &g, 1, &t);
	ck_assert(get(r, "lag_primed")->m->has_prev);
	ck_assert_uint_eq(get(r, "lag_primed")->m->n_primed, 1);
	feed_lag(r, "lag_fit", &g, 40, &t);
	for (i = 0; i < 30; i++) {
		x[0] = 10 + rng_norm(&g);
		x[1] = 2 + 0.5 * x[0] + 0.1 * rng_norm(&g);
		feed(r, "timed", x, 2, t);
		t += 7.5 + i % 3;
	}
	for (i = 0; i < 30; i++) {
		x[0] = 12 + rng_norm(&g);
		x[1] = 60 + 5 * rng_norm(&g);
		x[2] = 0.02 + 1.003 * x[0] - 0.0004 * x[1] +
		    0.00002 * x[0] * x[1] + 0.01 * rng_norm(&g);
		feed(r, "calib", x, 3, t);
		t += 1;
	}
	ck_assert_int_eq(get(r, "calib")->m->pinned, 2);
	for (i = 0; i < 20; i++) {
		x[0] = 10 + 3 * rng_norm(&g);
		x[1] = 1 + x[0] + 0.01 * x[0] * x[0] + 0.1 * rng_norm(&g);
		feed(r, "explicit", x, 2, t);
		t += 1;
	}
	ck_assert(terms_scaling_is_set(get(r, "t_fit")->m->terms));
	ck_assert(terms_scaling_is_set(get(r, "explicit")->m->terms));
	ck_assert_uint_eq(get(r, "t_fit")->hist_len, 4);
	*cp = c;
	return r;
}

static const char *const state_names[] = {
	"t_fresh", "t_undet", "t_fit", "t_frozen", "t_pinned", "t_alarm",
	"t_reset", "lag_primed", "lag_fit", "timed", "calib", "explicit"
};
#define NSTATES	(sizeof(state_names) / sizeof(state_names[0]))

/* ---- CRC-32C ---- */

/* The definition, one bit at a time (reflected 0x82F63B78, init and
 * final XOR 0xFFFFFFFF). */
static uint32_t
crc_bitwise(const uint8_t *p, size_t len)
{
	uint32_t c = 0xffffffffu;
	int k;

	while (len--) {
		c ^= *p++;
		for (k = 0; k < 8; k++)
			c = c & 1 ? (c >> 1) ^ 0x82f63b78u : c >> 1;
	}
	return ~c;
}

/* RFC 3720 B.4 vectors (32 bytes of zeros, of ones, ascending and
 * descending) and the "123456789" check value 0xE3069283 (the value every
 * CRC-32C implementation quotes; also recomputed here bit by bit, and with
 * a bitwise Python implementation when the test was written). */
START_TEST(test_persist_crc32c_vectors)
{
	uint8_t b[32];
	int i;

	ck_assert_uint_eq(persist_crc32c(0, "123456789", 9), 0xe3069283u);
	memset(b, 0, sizeof(b));
	ck_assert_uint_eq(persist_crc32c(0, b, 32), 0x8a9136aau);
	memset(b, 0xff, sizeof(b));
	ck_assert_uint_eq(persist_crc32c(0, b, 32), 0x62a8ab43u);
	for (i = 0; i < 32; i++)
		b[i] = (uint8_t)i;
	ck_assert_uint_eq(persist_crc32c(0, b, 32), 0x46dd794eu);
	for (i = 0; i < 32; i++)
		b[i] = (uint8_t)(31 - i);
	ck_assert_uint_eq(persist_crc32c(0, b, 32), 0x113fdb5cu);
	ck_assert_uint_eq(persist_crc32c(0, b, 0), 0);
	ck_assert_uint_eq(persist_crc32c_sw(0, "123456789", 9), 0xe3069283u);
}
END_TEST

/* Every table entry (each single byte) and random buffers fed in pieces
 * agree with the bitwise definition; so does the CPU instruction path. */
START_TEST(test_persist_crc32c_table)
{
	uint8_t buf[1000];
	struct rng g;
	uint32_t c;
	size_t i, cut;
	int b;

	for (b = 0; b < 256; b++) {
		uint8_t one = (uint8_t)b;

		ck_assert_uint_eq(persist_crc32c_sw(0, &one, 1),
		    crc_bitwise(&one, 1));
		ck_assert_uint_eq(persist_crc32c(0, &one, 1),
		    crc_bitwise(&one, 1));
	}
	rng_seed(&g, 1);
	for (i = 0; i < sizeof(buf); i++)
		buf[i] = (uint8_t)rng_next(&g);
	for (cut = 0; cut <= sizeof(buf); cut += 37) {
		c = persist_crc32c(0, buf, cut);
		c = persist_crc32c(c, buf + cut, sizeof(buf) - cut);
		ck_assert_uint_eq(c, crc_bitwise(buf, sizeof(buf)));
		/* The table and (where present) the CPU instruction agree,
		 * at every length and alignment. */
		ck_assert_uint_eq(persist_crc32c_sw(0, buf + cut % 8,
		    sizeof(buf) - cut), persist_crc32c(0, buf + cut % 8,
		    sizeof(buf) - cut));
	}
}
END_TEST

/* ---- round trips ---- */

/* Every state: decode(encode(e)) equals e field by field, encodes to the
 * same bytes, and behaves the same on further records. */
START_TEST(test_persist_roundtrip_every_state)
{
	struct registry *r, *r2;
	struct reg_entry *e, *d;
	struct conf *c;
	struct rng g1, g2;
	uint8_t *b1, *b2;
	size_t l1, l2, i;
	double t1 = 1.8e9, t2 = 1.8e9;
	char err[200];

	r = every_state(&c);
	ck_assert_ptr_nonnull(r2 = registry_new(c));
	for (i = 0; i < NSTATES; i++) {
		e = get(r, state_names[i]);
		b1 = encode(e, &l1);
		ck_assert_msg(persist_model_decode(b1, l1, &d, err,
		    sizeof(err)) == 0, "%s: %s", state_names[i], err);
		same_entry(e, d);
		b2 = encode(d, &l2);
		ck_assert_uint_eq(l1, l2);
		ck_assert_msg(memcmp(b1, b2, l1) == 0, "%s re-encodes "
		    "differently", state_names[i]);
		ck_assert_int_eq(registry_adopt(r2, d), 0);
		free(b1);
		free(b2);
	}
	/* The same records to both: still identical. */
	rng_seed(&g1, 99);
	rng_seed(&g2, 99);
	for (i = 0; i < NSTATES; i++) {
		const char *nm = state_names[i];

		if (strncmp(nm, "t_", 2) == 0) {
			feed_t(r, nm, &g1, 15, 0.5, &t1);
			feed_t(r2, nm, &g2, 15, 0.5, &t2);
		} else if (strncmp(nm, "lag_", 4) == 0) {
			feed_lag(r, nm, &g1, 15, &t1);
			feed_lag(r2, nm, &g2, 15, &t2);
		}
		same_entry(get(r, nm), get(r2, nm));
	}
	registry_free(r2);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* Stale and orphan flags and the settings a reload left survive too. */
START_TEST(test_persist_roundtrip_stale_orphan)
{
	struct registry *r;
	struct reg_entry *d;
	struct conf *c, *c2;
	uint8_t *b;
	size_t len, i;
	char err[200];
	int kept, stale, orphan;

	r = every_state(&c);
	c2 = test_conf("[template t_*]\nfields = a b\ntarget = y\n"
	    "terms = a, b, a*b\n"
	    "[template lag_*]\nfields = raw\ntarget = ref\n"
	    "terms = raw, prev(raw), prev(ref)\nmemory = 0.5\n");
	registry_set_conf(r, c2, &kept, &stale, &orphan);
	ck_assert_int_eq(stale, 7);
	ck_assert_int_eq(kept, 2);
	ck_assert_int_eq(orphan, 3);
	for (i = 0; i < NSTATES; i++) {
		b = encode(get(r, state_names[i]), &len);
		ck_assert_int_eq(persist_model_decode(b, len, &d, err,
		    sizeof(err)), 0);
		same_entry(get(r, state_names[i]), d);
		registry_entry_free(d);
		free(b);
	}
	ck_assert(get(r, "t_fit")->stale);
	ck_assert(get(r, "timed")->orphan);
	ck_assert(get(r, "lag_fit")->m->o.lambda == 0.5);
	registry_free(r);
	conf_free(c2);
	conf_free(c);
}
END_TEST

/* ---- sharing of compiled terms (issue 8, 2026-12) ---- */

/* Two models of one section share one compiled term list and one copy of
 * the field names; a model of another section does not. */
START_TEST(test_persist_share_section)
{
	struct conf *c = test_conf("[daemon]\nhistory = 0\n"
	    "[template a_*]\nfields = u v\ntarget = y\nterms = u, v, u*v\n"
	    "[template b_*]\nfields = u v\ntarget = y\n");
	struct registry *r = registry_new(c);
	struct reg_entry *a1, *a2, *b1;

	ck_assert_ptr_nonnull(r);
	a1 = get(r, "a_1");
	a2 = get(r, "a_2");
	b1 = get(r, "b_1");
	ck_assert(terms_shares(a1->m->terms, a2->m->terms));
	ck_assert(terms_shares(a1->m->terms, c->models[0].terms));
	ck_assert_ptr_eq(a1->fields, a2->fields);
	ck_assert(!terms_shares(a1->m->terms, b1->m->terms));
	ck_assert(a1->m->terms != a2->m->terms);	/* own constants */
	ck_assert_str_eq(a2->fields[2], "y");
	registry_free(r);
	conf_free(c);
}
END_TEST

/* A reload that changes a section's terms and frees the old config: the
 * old models keep their (old) compiled terms and keep working; a reload
 * with the same shape keeps the models and adds tolerances they were
 * created without. */
START_TEST(test_persist_share_reload)
{
	struct conf *c1 = test_conf("[daemon]\nhistory = 4\n"
	    "[template a_*]\nfields = u v\ntarget = y\n");
	struct conf *c2 = test_conf("[daemon]\nhistory = 4\n"
	    "[template a_*]\nfields = u v\ntarget = y\nterms = u, v, u^2\n");
	struct conf *c3;
	struct registry *r = registry_new(c1);
	struct reg_entry *a1, *a3;
	struct model_report rep;
	double x[3], th[4];
	const char *names[4];
	int kept, stale, orphan, i;

	ck_assert_ptr_nonnull(r);
	a1 = get(r, "a_1");
	registry_set_conf(r, c2, &kept, &stale, &orphan);
	ck_assert_int_eq(stale, 1);
	conf_free(c1);
	for (i = 0; i < 10; i++) {
		x[0] = i;
		x[1] = i % 3;
		x[2] = 1 + 2 * x[0] - x[1];
		ck_assert_int_eq(feed(r, "a_1", x, 3, 1.7e9 + i), 0);
	}
	registry_coef_names(a1, names);
	ck_assert_str_eq(names[2], "v");
	memset(&rep, 0, sizeof(rep));
	rep.theta = th;
	ck_assert_int_eq(model_report(a1->m, &rep), 0);
	/* y = 1 + 2u - v exactly: the fit recovers it (closed form). */
	ck_assert_double_eq_tol(th[1], 2.0, 1e-9);
	a3 = get(r, "a_3");
	ck_assert_int_eq(a3->m->o.p, 4);
	ck_assert(!terms_shares(a1->m->terms, a3->m->terms));
	ck_assert_str_eq(a1->fields[0], "u");

	/* Same shape, new settings: kept, tolerance storage allocated. */
	c3 = test_conf("[daemon]\nhistory = 4\n"
	    "[template a_*]\nfields = u v\ntarget = y\nterms = u, v, u^2\n"
	    "tolerance = - 0.5 - 0.25\n");
	ck_assert_ptr_null(a3->m->o.tol_abs);
	registry_set_conf(r, c3, &kept, &stale, &orphan);
	ck_assert_int_eq(kept, 1);
	ck_assert_int_eq(stale, 1);
	ck_assert_ptr_nonnull(a3->m->o.tol_abs);
	ck_assert(isnan(a3->m->o.tol_abs[0]));
	ck_assert(a3->m->o.tol_abs[1] == 0.5);
	ck_assert(a3->m->o.tol_abs[3] == 0.25);
	registry_free(r);
	conf_free(c2);
	conf_free(c3);
}
END_TEST

/* Restore through a cache: models of one term list share one compiled
 * form (compiled once), each model is restored bit for bit, and the
 * models outlive the cache. */
START_TEST(test_persist_share_restore)
{
	static const char *names[] = { "t_fit", "t_pinned", "lag_fit",
	    "lag_primed", "calib", "explicit" };
	struct conf *c;
	struct registry *r = every_state(&c);
	struct persist_cache *pc;
	struct reg_entry *d[6];
	uint8_t *b;
	size_t len, i;
	char err[200];

	ck_assert_ptr_nonnull(pc = persist_cache_new());
	for (i = 0; i < 6; i++) {
		b = encode(get(r, names[i]), &len);
		ck_assert_int_eq(persist_model_decode_cached(b, len, pc, &d[i],
		    err, sizeof(err)), 0);
		free(b);
	}
	persist_cache_free(pc);
	ck_assert(terms_shares(d[0]->m->terms, d[1]->m->terms));
	ck_assert(terms_shares(d[2]->m->terms, d[3]->m->terms));
	ck_assert(!terms_shares(d[0]->m->terms, d[2]->m->terms));
	ck_assert(!terms_shares(d[4]->m->terms, d[5]->m->terms));
	for (i = 0; i < 6; i++) {
		same_entry(get(r, names[i]), d[i]);
		registry_entry_free(d[i]);
	}
	registry_free(r);
	conf_free(c);
}
END_TEST

/* A block that persist_model_check passed decodes through
 * persist_model_decode_checked bit for bit as through the decoder that
 * checks the CRC itself (issue #8, 2026-12-02: restore computed it
 * twice); a length that is not the framed one is refused, not read past. */
START_TEST(test_persist_decode_checked)
{
	static const char *names[] = { "t_fit", "lag_primed", "calib" };
	struct conf *c;
	struct registry *r = every_state(&c);
	struct persist_cache *pc;
	struct reg_entry *d;
	uint8_t *b;
	size_t len, bl, i;
	char err[200];

	ck_assert_ptr_nonnull(pc = persist_cache_new());
	for (i = 0; i < 3; i++) {
		b = encode(get(r, names[i]), &len);
		ck_assert_int_eq(persist_model_check(b, len, &bl), 0);
		ck_assert_uint_eq(bl, len);
		ck_assert_int_eq(persist_model_decode_checked(b, bl, pc, &d,
		    err, sizeof(err)), 0);
		same_entry(get(r, names[i]), d);
		registry_entry_free(d);
		ck_assert_int_eq(persist_model_decode_checked(b, bl - 1, pc,
		    &d, err, sizeof(err)), E_CORRUPT);
		ck_assert_ptr_null(d);
		ck_assert_int_eq(persist_model_decode_checked(b, 8, pc, &d,
		    err, sizeof(err)), E_CORRUPT);
		ck_assert_ptr_null(d);
		b[0] ^= 1;	/* the magic is still checked */
		ck_assert_int_eq(persist_model_decode_checked(b, bl, pc, &d,
		    err, sizeof(err)), E_CORRUPT);
		ck_assert_ptr_null(d);
		free(b);
	}
	persist_cache_free(pc);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* ---- corruption ---- */

static uint8_t *
small_block(size_t *len, struct registry **rp, struct conf **cp)
{
	struct conf *c = test_conf("[daemon]\nhistory = 0\n"
	    "[template s_*]\nfields = a\ntarget = y\n");
	struct registry *r = registry_new(c);
	double x[2];
	int i;

	for (i = 0; i < 5; i++) {
		x[0] = i;
		x[1] = 1 + 2 * i + (i % 2 ? 0.1 : -0.1);
		ck_assert_int_eq(feed(r, "s_1", x, 2, 1.7e9 + i), 0);
	}
	*rp = r;
	*cp = c;
	return encode(get(r, "s_1"), len);
}

/* CRC-32C detects every single-bit error (its generator has more than
 * one term: Castagnoli et al. 1993): no flip may decode. */
START_TEST(test_persist_every_bit_flip_detected)
{
	struct registry *r;
	struct reg_entry *d;
	struct conf *c;
	uint8_t *b;
	size_t len, bit;
	char err[200];
	int rc;

	b = small_block(&len, &r, &c);
	ck_assert_uint_lt(len, 2000);
	for (bit = 0; bit < len * 8; bit++) {
		b[bit / 8] ^= (uint8_t)(1u << (bit % 8));
		rc = persist_model_decode(b, len, &d, err, sizeof(err));
		ck_assert_msg(rc != 0, "flip of bit %zu not detected", bit);
		ck_assert_ptr_null(d);
		b[bit / 8] ^= (uint8_t)(1u << (bit % 8));
	}
	ck_assert_int_eq(persist_model_decode(b, len, &d, err, sizeof(err)),
	    0);
	registry_entry_free(d);
	/* A damaged block may still show its name (for the log). */
	b[len - 1] ^= 1;
	ck_assert_int_eq(persist_model_peek_name(b, len, err), 0);
	ck_assert_str_eq(err, "s_1");
	b[PERSIST_BLOCK_HDR_LEN + 2] = ' ';
	ck_assert_int_eq(persist_model_peek_name(b, len, err), E_CORRUPT);
	ck_assert_int_eq(persist_model_peek_name(b, 13, err), E_CORRUPT);
	free(b);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* Every truncation is reported as cut short, never decoded. */
START_TEST(test_persist_truncation_detected)
{
	struct registry *r;
	struct reg_entry *d;
	struct conf *c;
	uint8_t *b;
	size_t len, n;
	char err[200];

	b = small_block(&len, &r, &c);
	for (n = 0; n < len; n++)
		ck_assert_int_eq(persist_model_decode(b, n, &d, err,
		    sizeof(err)), PERSIST_SHORT);
	free(b);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* Recompute a block's CRC after editing its payload on purpose. */
static void
recrc(uint8_t *b, size_t len)
{
	uint32_t crc = persist_crc32c(0, b, 8);

	crc = persist_crc32c(crc, b + PERSIST_BLOCK_HDR_LEN,
	    len - PERSIST_BLOCK_HDR_LEN);
	b[8] = (uint8_t)crc;
	b[9] = (uint8_t)(crc >> 8);
	b[10] = (uint8_t)(crc >> 16);
	b[11] = (uint8_t)(crc >> 24);
}

/* With a valid checksum, values that cannot be right are still refused:
 * a term list that does not compile, a p out of range, a payload with a
 * byte too many. */
START_TEST(test_persist_semantic_checks)
{
	struct registry *r;
	struct reg_entry *d;
	struct conf *c;
	uint8_t *b, *b2, *p;
	size_t len, off;
	char err[200];

	b = small_block(&len, &r, &c);
	/* The term list "a" (u32 length 1, then 'a'): make it "?". */
	for (p = NULL, off = PERSIST_BLOCK_HDR_LEN; off + 5 <= len; off++)
		if (memcmp(b + off, "\x01\x00\x00\x00" "a", 5) == 0) {
			p = b + off + 4;
			break;
		}
	ck_assert_ptr_nonnull(p);
	*p = '?';
	recrc(b, len);
	ck_assert_int_eq(persist_model_decode(b, len, &d, err, sizeof(err)),
	    E_CORRUPT);
	ck_assert_ptr_nonnull(strstr(err, "?"));
	*p = 'a';
	/* p: after name (2+3), section (2+3), 3 flags, nfields (4), field
	 * names (1+1, 1+1) and two u64 counters. */
	off = PERSIST_BLOCK_HDR_LEN + 5 + 5 + 3 + 4 + 4 + 16;
	ck_assert_int_eq(b[off], 2);
	b[off] = 0x2c;
	b[off + 1] = 0x01;	/* 300 > RLS_MAX_P */
	recrc(b, len);
	ck_assert_int_eq(persist_model_decode(b, len, &d, err, sizeof(err)),
	    E_CORRUPT);
	b[off] = 2;
	b[off + 1] = 0;
	recrc(b, len);
	ck_assert_int_eq(persist_model_decode(b, len, &d, err, sizeof(err)),
	    0);
	registry_entry_free(d);
	/* One byte more in the payload. */
	b2 = calloc(1, len + 1);
	memcpy(b2, b, len);
	b2[4]++;
	recrc(b2, len + 1);
	ck_assert_int_eq(persist_model_decode(b2, len + 1, &d, err,
	    sizeof(err)), E_CORRUPT);
	free(b2);
	free(b);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* File headers and the trailer: round trip, no bit flip is accepted or
 * mistaken for a newer version, a newer version with a good checksum is
 * E_VERSION, short buffers are refused. */
START_TEST(test_persist_headers)
{
	struct persist_ckpt_hdr h, h2;
	struct persist_jnl_hdr jh, jh2;
	uint8_t b[PERSIST_CKPT_HDR_LEN], jb[PERSIST_JNL_HDR_LEN];
	uint8_t e[PERSIST_CKPT_END_LEN];
	uint64_t n;
	size_t bit;
	uint32_t crc;
	int rc;

	memset(&h, 0, sizeof(h));
	h.version = PERSIST_VERSION;
	h.seq = 0x0102030405060708ull;
	h.nmodels = 12345;
	h.created = 1.75e9;
	persist_ckpt_hdr_encode(&h, b);
	ck_assert_int_eq(persist_ckpt_hdr_decode(b, sizeof(b), &h2), 0);
	ck_assert(memcmp(&h, &h2, sizeof(h)) == 0);
	/* Explicit byte order: seq is little-endian at offset 16. */
	ck_assert_int_eq(b[16], 0x08);
	ck_assert_int_eq(b[23], 0x01);
	ck_assert(memcmp(b, "COEFDCKP", 8) == 0);
	for (bit = 0; bit < sizeof(b) * 8; bit++) {
		b[bit / 8] ^= (uint8_t)(1u << (bit % 8));
		rc = persist_ckpt_hdr_decode(b, sizeof(b), &h2);
		ck_assert_msg(rc != 0 && rc != E_VERSION, "bit %zu: %d", bit,
		    rc);
		b[bit / 8] ^= (uint8_t)(1u << (bit % 8));
	}
	for (n = 0; n < sizeof(b); n++)
		ck_assert_int_ne(persist_ckpt_hdr_decode(b, n, &h2), 0);
	/* A newer format: version 2, checksum made right. */
	b[8] = 2;
	crc = persist_crc32c(0, b, sizeof(b) - 4);
	b[44] = (uint8_t)crc;
	b[45] = (uint8_t)(crc >> 8);
	b[46] = (uint8_t)(crc >> 16);
	b[47] = (uint8_t)(crc >> 24);
	ck_assert_int_eq(persist_ckpt_hdr_decode(b, sizeof(b), &h2),
	    E_VERSION);
	ck_assert_uint_eq(h2.version, 2);

	memset(&jh, 0, sizeof(jh));
	jh.version = PERSIST_VERSION;
	jh.seq = 77;
	jh.flags = PERSIST_JNL_AFTER_GAP;
	jh.created = 1.75e9;
	persist_jnl_hdr_encode(&jh, jb);
	ck_assert_int_eq(persist_jnl_hdr_decode(jb, sizeof(jb), &jh2), 0);
	ck_assert(memcmp(&jh, &jh2, sizeof(jh)) == 0);
	for (bit = 0; bit < sizeof(jb) * 8; bit++) {
		jb[bit / 8] ^= (uint8_t)(1u << (bit % 8));
		rc = persist_jnl_hdr_decode(jb, sizeof(jb), &jh2);
		ck_assert_msg(rc != 0 && rc != E_VERSION, "bit %zu: %d", bit,
		    rc);
		jb[bit / 8] ^= (uint8_t)(1u << (bit % 8));
	}
	/* A checkpoint header is not a journal header. */
	persist_ckpt_hdr_encode(&h, b);
	ck_assert_int_eq(persist_jnl_hdr_decode(b, sizeof(b), &jh2),
	    E_CORRUPT);

	persist_ckpt_end_encode(12345, e);
	ck_assert(persist_ckpt_is_end(e, sizeof(e)));
	ck_assert_int_eq(persist_ckpt_end_decode(e, sizeof(e), &n), 0);
	ck_assert_uint_eq(n, 12345);
	for (bit = 0; bit < sizeof(e) * 8; bit++) {
		e[bit / 8] ^= (uint8_t)(1u << (bit % 8));
		ck_assert_int_ne(persist_ckpt_end_decode(e, sizeof(e), &n), 0);
		e[bit / 8] ^= (uint8_t)(1u << (bit % 8));
	}
}
END_TEST

/* After a damaged stretch the scan finds the next intact block. */
START_TEST(test_persist_resync)
{
	struct registry *r;
	struct conf *c;
	uint8_t *b, *file;
	size_t len, flen, off;

	b = small_block(&len, &r, &c);
	flen = 3 * len + 100 + PERSIST_CKPT_END_LEN;
	file = calloc(1, flen);
	memcpy(file, b, len);
	memset(file + len, 0x4d, 100);		/* 'M' garbage */
	memcpy(file + len + 100, b, len);
	memcpy(file + 2 * len + 100, b, len);
	persist_ckpt_end_encode(3, file + 3 * len + 100);
	file[len + 100 + 20] ^= 1;		/* damage the second copy */
	ck_assert_uint_eq(persist_resync(file, flen, 0), 0);
	off = persist_resync(file, flen, 1);
	ck_assert_uint_eq(off, 2 * len + 100);
	off = persist_resync(file, flen, off + 1);
	ck_assert_uint_eq(off, 3 * len + 100);
	ck_assert(persist_ckpt_is_end(file + off, flen - off));
	ck_assert_uint_eq(persist_resync(file, flen - 1, off), flen - 1);
	free(file);
	free(b);
	registry_free(r);
	conf_free(c);
}
END_TEST

/* ---- journal ---- */

START_TEST(test_persist_jentry_roundtrip)
{
	struct persist_jentry je[6], d;
	double x[4] = { 1.5, -0.0, NAN, 1e300 }, xb[PROTO_MAX_VALUES + 1];
	uint8_t buf[1024];
	size_t n, used, bit, k;
	int i;

	memset(je, 0, sizeof(je));
	je[0].type = PERSIST_J_CONF;
	je[0].text = "[daemon]\n";
	je[0].textlen = 9;
	je[1].type = PERSIST_J_RELOAD;
	je[1].text = "";
	je[1].textlen = 0;
	je[2].type = PERSIST_J_RECORD;
	je[2].name = "boiler";
	je[2].namelen = 6;
	je[2].t = 1.7e9 + 0.25;
	je[2].nx = 4;
	je[2].x = x;
	je[3].type = PERSIST_J_PIN;
	je[3].name = "b";
	je[3].namelen = 1;
	je[3].t = -1;
	je[4].type = PERSIST_J_FREEZE;
	je[4].name = "b";
	je[4].namelen = 1;
	je[4].on = 1;
	je[5].type = PERSIST_J_RESET;
	je[5].name = "b";
	je[5].namelen = 1;
	for (i = 0; i < 6; i++) {
		n = persist_jentry_size(&je[i]);
		ck_assert_uint_gt(n, PERSIST_JENT_HDR_LEN);
		ck_assert_int_eq(persist_jentry_encode(&je[i], buf, n), 0);
		ck_assert_int_eq(persist_jentry_decode(buf, n, &used, &d, xb),
		    0);
		ck_assert_uint_eq(used, n);
		ck_assert_int_eq(d.type, je[i].type);
		ck_assert_uint_eq(d.namelen, je[i].namelen);
		ck_assert(d.namelen == 0 || memcmp(d.name, je[i].name,
		    d.namelen) == 0);
		ck_assert(memcmp(&d.t, &je[i].t, sizeof(d.t)) == 0);
		ck_assert_int_eq(d.on, je[i].on);
		ck_assert_int_eq(d.nx, je[i].nx);
		ck_assert(d.nx == 0 || memcmp(d.x, x, sizeof(x)) == 0);
		ck_assert_uint_eq(d.textlen, je[i].textlen);
		/* Truncations are PERSIST_SHORT; bit flips never decode. */
		for (k = 0; k < n; k++)
			ck_assert_int_eq(persist_jentry_decode(buf, k, &used,
			    &d, xb), PERSIST_SHORT);
		for (bit = 0; bit < n * 8; bit++) {
			buf[bit / 8] ^= (uint8_t)(1u << (bit % 8));
			ck_assert_msg(persist_jentry_decode(buf, n, &used, &d,
			    xb) != 0, "entry %d: flip %zu", i, bit);
			buf[bit / 8] ^= (uint8_t)(1u << (bit % 8));
		}
	}
	/* Invalid entries cannot be encoded. */
	je[2].nx = PROTO_MAX_VALUES + 2;
	ck_assert_uint_eq(persist_jentry_size(&je[2]), 0);
	je[3].namelen = 0;
	ck_assert_uint_eq(persist_jentry_size(&je[3]), 0);
}
END_TEST

/*
 * The journal entry layout written out from the tables in daemon/STATE.md
 * ("Journal segments"), one byte at a time with shifts, and its CRC by
 * the bitwise definition (crc_bitwise above): the reference for
 * test_persist_jentry_layout. Returns the framed length.
 */
static size_t
ref_le(uint8_t *b, uint64_t v, int nbytes)
{
	int i;

	for (i = 0; i < nbytes; i++)
		b[i] = (uint8_t)(v >> (8 * i));
	return (size_t)nbytes;
}

static size_t
ref_jentry(const struct persist_jentry *je, uint8_t *out)
{
	uint8_t *p = out + 8, *crcin;
	uint64_t bits;
	size_t plen, i;
	int k;

	*p++ = (uint8_t)je->type;
	if (je->type == PERSIST_J_CONF || je->type == PERSIST_J_RELOAD) {
		p += ref_le(p, je->textlen, 4);
		memcpy(p, je->text, je->textlen);
		p += je->textlen;
	} else {
		*p++ = (uint8_t)je->namelen;		/* str8 */
		memcpy(p, je->name, je->namelen);
		p += je->namelen;
		if (je->type == PERSIST_J_RECORD ||
		    je->type == PERSIST_J_PIN) {
			memcpy(&bits, &je->t, 8);
			p += ref_le(p, bits, 8);
		}
		if (je->type == PERSIST_J_RECORD) {
			p += ref_le(p, (uint64_t)je->nx, 2);
			for (k = 0; k < je->nx; k++) {
				memcpy(&bits, &je->x[k], 8);
				p += ref_le(p, bits, 8);
			}
		}
		if (je->type == PERSIST_J_FREEZE)
			*p++ = je->on != 0;
	}
	plen = (size_t)(p - (out + 8));
	ref_le(out, plen, 4);
	/* CRC-32C of bytes 0..3 followed by the payload. */
	crcin = malloc(4 + plen);
	ck_assert_ptr_nonnull(crcin);
	memcpy(crcin, out, 4);
	for (i = 0; i < plen; i++)
		crcin[4 + i] = out[8 + i];
	ref_le(out + 4, crc_bitwise(crcin, 4 + plen), 4);
	free(crcin);
	return 8 + plen;
}

/* Issue #8 (2026-12-02): the journal encoder stores records field by
 * field without the generic writer and computes the CRC in one pass. Its
 * bytes must stay the documented format: 6000 random entries of every
 * type (names of 1..64 bytes, 1..257 values with random bit patterns,
 * NaNs and infinities included, texts of 0..299 bytes), at alignments
 * 0..7 of the output, against ref_jentry. */
START_TEST(test_persist_jentry_layout)
{
	static const enum persist_jtype types[] = { PERSIST_J_CONF,
	    PERSIST_J_RELOAD, PERSIST_J_RECORD, PERSIST_J_PIN,
	    PERSIST_J_FREEZE, PERSIST_J_RESET };
	static uint8_t got[8 + 2 + MODEL_NAME_MAX + 8 + 2 +
	    8 * (PROTO_MAX_VALUES + 1) + 8];
	static uint8_t want[sizeof(got)];
	double x[PROTO_MAX_VALUES + 1];
	char name[MODEL_NAME_MAX], text[300];
	struct persist_jentry je;
	struct rng g;
	uint64_t bits;
	size_t n, k, al;
	int i, j, bad;

	rng_seed(&g, 8);
	for (i = 0; i < 6000; i++) {
		memset(&je, 0, sizeof(je));
		je.type = types[i % 6];
		je.namelen = 1 + rng_next(&g) % MODEL_NAME_MAX;
		for (k = 0; k < je.namelen; k++)
			name[k] = (char)(1 + rng_next(&g) % 255);
		je.name = name;
		je.textlen = rng_next(&g) % sizeof(text);
		for (k = 0; k < je.textlen; k++)
			text[k] = (char)rng_next(&g);
		je.text = text;
		bits = rng_next(&g);
		memcpy(&je.t, &bits, 8);
		/* Small counts are the common case; the cap is reached too. */
		je.nx = i % 7 == 0 ? PROTO_MAX_VALUES + 1 :
		    1 + (int)(rng_next(&g) % (i % 2 ? 17 : PROTO_MAX_VALUES));
		for (j = 0; j < je.nx; j++) {
			bits = rng_next(&g);
			if (j % 5 == 1)
				x[j] = rng_norm(&g);
			else
				memcpy(&x[j], &bits, 8);
		}
		x[0] = i % 3 == 0 ? NAN : i % 3 == 1 ? -INFINITY : x[0];
		je.x = x;
		je.on = (int)(rng_next(&g) % 3);
		n = ref_jentry(&je, want);
		ck_assert_uint_eq(persist_jentry_size(&je), n);
		al = (size_t)i % 8;
		memset(got, 0xa5, sizeof(got));
		ck_assert_int_eq(persist_jentry_encode(&je, got + al, n), 0);
		ck_assert_msg(memcmp(got + al, want, n) == 0,
		    "entry %d (type %d, %zu bytes) differs", i, je.type, n);
		/* Nothing written outside the entry. */
		for (k = 0, bad = 0; k < sizeof(got); k++)
			bad |= (k < al || k >= al + n) && got[k] != 0xa5;
		ck_assert_msg(!bad, "entry %d: bytes outside written", i);
		/* A wrong length is refused and writes nothing. */
		memset(got, 0xa5, sizeof(got));
		ck_assert_int_eq(persist_jentry_encode(&je, got, n - 1),
		    E_ARG);
		ck_assert_int_eq(persist_jentry_encode(&je, got, n + 1),
		    E_ARG);
		for (k = 0, bad = 0; k < sizeof(got); k++)
			bad |= got[k] != 0xa5;
		ck_assert_msg(!bad, "entry %d: a refused encode wrote", i);
	}
}
END_TEST

/* A journal captured from the registry's hook, replayed into a fresh
 * registry (configs, records, pin, freeze, thaw, reset, reload) gives
 * every model bit for bit: the engine is deterministic. */
struct capture {
	uint8_t	*buf;
	size_t	 len, cap;
};

static void
cap_add(struct capture *cp, const struct persist_jentry *je)
{
	size_t n = persist_jentry_size(je);

	ck_assert_uint_gt(n, 0);
	if (cp->len + n > cp->cap) {
		cp->cap = (cp->len + n) * 2;
		cp->buf = realloc(cp->buf, cp->cap);
		ck_assert_ptr_nonnull(cp->buf);
	}
	ck_assert_int_eq(persist_jentry_encode(je, cp->buf + cp->len, n), 0);
	cp->len += n;
}

static void
cap_hook(void *arg, const struct reg_op *op)
{
	struct persist_jentry je;

	memset(&je, 0, sizeof(je));
	je.name = op->e->name;
	je.namelen = strlen(op->e->name);
	je.t = op->t;
	je.nx = op->nx;
	je.x = op->x;
	je.on = op->on;
	je.type = op->kind == REG_OP_RECORD ? PERSIST_J_RECORD :
	    op->kind == REG_OP_PIN ? PERSIST_J_PIN :
	    op->kind == REG_OP_FREEZE ? PERSIST_J_FREEZE : PERSIST_J_RESET;
	cap_add(arg, &je);
}

START_TEST(test_persist_journal_replay_exact)
{
	static const char conf2[] =
	    "[daemon]\nhistory = 4\nhistory_every = 1\n"
	    "[template t_*]\nfields = a b\ntarget = y\nmemory = 0.9\n"
	    "gate = 3\n";
	struct registry_hooks h;
	struct persist_jentry je;
	struct capture cp = { NULL, 0, 0 };
	struct registry *live, *rep;
	struct conf *c1 = test_conf(conf_text), *c2 = test_conf(conf2), *cs[4];
	struct conf_error ce;
	struct reg_entry *ents[32];
	double t = 1.7e9, xb[PROTO_MAX_VALUES + 1];
	size_t off, used, n, i, ncs = 0;
	char err[160];
	struct rng g;

	rng_seed(&g, 5);
	live = registry_new(c1);
	memset(&h, 0, sizeof(h));
	h.arg = &cp;
	h.journal = cap_hook;
	registry_set_hooks(live, &h);
	memset(&je, 0, sizeof(je));
	je.type = PERSIST_J_CONF;
	je.text = conf_text;
	je.textlen = strlen(conf_text);
	cap_add(&cp, &je);
	feed_t(live, "t_a", &g, 40, 0, &t);
	feed_t(live, "t_b", &g, 20, 0, &t);
	feed_lag(live, "lag_x", &g, 25, &t);
	ck_assert_int_eq(registry_pin(live, get(live, "t_a"), t), 0);
	feed_t(live, "t_a", &g, 20, 0.3, &t);
	registry_freeze(live, get(live, "t_b"), 1);
	feed_t(live, "t_b", &g, 5, 0, &t);
	registry_freeze(live, get(live, "t_b"), 0);
	je.type = PERSIST_J_RELOAD;
	je.text = conf2;
	je.textlen = strlen(conf2);
	registry_set_conf(live, c2, NULL, NULL, NULL);
	cap_add(&cp, &je);
	feed_t(live, "t_a", &g, 20, 0, &t);
	ck_assert_int_eq(registry_rebuild(live, get(live, "t_b"), err,
	    sizeof(err)), 0);
	feed_t(live, "t_b", &g, 10, 0, &t);
	feed_t(live, "t_new", &g, 10, 0, &t);
	feed_lag(live, "lag_x", &g, 5, &t);

	rep = registry_new(NULL);
	for (off = 0; off < cp.len; off += used) {
		struct reg_result res;

		ck_assert_int_eq(persist_jentry_decode(cp.buf + off,
		    cp.len - off, &used, &je, xb), 0);
		switch (je.type) {
		case PERSIST_J_CONF:
		case PERSIST_J_RELOAD:
			ck_assert_int_eq(conf_parse(je.text, je.textlen,
			    &cs[ncs], &ce), 0);
			registry_set_conf(rep, cs[ncs++], NULL, NULL, NULL);
			break;
		case PERSIST_J_RECORD:
			ck_assert_int_eq(registry_apply(rep, je.name,
			    je.namelen, je.x, je.nx, je.t, &res), 0);
			break;
		case PERSIST_J_PIN:
			ck_assert_int_eq(registry_pin(rep, registry_find(rep,
			    je.name, je.namelen), je.t), 0);
			break;
		case PERSIST_J_FREEZE:
			registry_freeze(rep, registry_find(rep, je.name,
			    je.namelen), je.on);
			break;
		case PERSIST_J_RESET:
			ck_assert_int_eq(registry_rebuild(rep,
			    registry_find(rep, je.name, je.namelen), err,
			    sizeof(err)), 0);
			break;
		}
	}
	n = registry_list(live, ents, 32);
	ck_assert_uint_eq(n, 4);
	ck_assert_uint_eq(registry_count(rep), n);
	for (i = 0; i < n; i++)
		same_entry(ents[i], get(rep, ents[i]->name));
	ck_assert(get(rep, "lag_x")->orphan);
	registry_free(rep);
	registry_free(live);
	for (i = 0; i < ncs; i++)
		conf_free(cs[i]);
	conf_free(c1);
	conf_free(c2);
	free(cp.buf);
}
END_TEST

/* ---- the registry's snapshot hook ---- */

struct touched {
	struct reg_entry *e[8];
	int		 n;
	uint64_t	 epoch;
	uint8_t		*copy;	/* encoding of the first one, before */
	size_t		 len;
};

static void
touch_hook(void *arg, struct reg_entry *e)
{
	struct touched *tc = arg;

	if (tc->n == 0)
		tc->copy = encode(e, &tc->len);
	tc->e[tc->n++] = e;
	e->snap_epoch = tc->epoch;
}

/* During a snapshot, an entry is handed to the hook once, before its
 * first change, with the state it had; entries created during the
 * snapshot never are; after the snapshot nothing is. */
START_TEST(test_persist_snapshot_touch)
{
	struct registry_hooks h;
	struct touched tc;
	struct registry *r;
	struct conf *c = test_conf(conf_text);
	struct reg_entry *a, *b;
	struct rng g;
	double t = 1.7e9;
	uint8_t *before;
	size_t len;

	memset(&tc, 0, sizeof(tc));
	rng_seed(&g, 3);
	r = registry_new(c);
	feed_t(r, "t_a", &g, 20, 0, &t);
	feed_t(r, "t_b", &g, 20, 0, &t);
	a = get(r, "t_a");
	b = get(r, "t_b");
	before = encode(a, &len);
	memset(&h, 0, sizeof(h));
	h.arg = &tc;
	h.touch = touch_hook;
	registry_set_hooks(r, &h);
	tc.epoch = registry_snap_begin(r);
	feed_t(r, "t_a", &g, 3, 0, &t);
	feed_t(r, "t_new", &g, 3, 0, &t);
	registry_freeze(r, b, 1);
	registry_count_reject(r, b);
	ck_assert_int_eq(tc.n, 2);
	ck_assert_ptr_eq(tc.e[0], a);
	ck_assert_ptr_eq(tc.e[1], b);
	ck_assert_uint_eq(tc.len, len);
	ck_assert(memcmp(tc.copy, before, len) == 0);
	registry_snap_end(r);
	feed_t(r, "t_b", &g, 3, 0, &t);
	tc.epoch = registry_snap_begin(r);
	feed_t(r, "t_new", &g, 1, 0, &t);
	ck_assert_int_eq(tc.n, 3);
	ck_assert_str_eq(tc.e[2]->name, "t_new");
	registry_snap_end(r);
	free(before);
	free(tc.copy);
	registry_free(r);
	conf_free(c);
}
END_TEST

Suite *
persist_suite(void)
{
	Suite *s = suite_create("persist");
	TCase *tc;

	tc = tcase_create("crc32c");
	tcase_add_test(tc, test_persist_crc32c_vectors);
	tcase_add_test(tc, test_persist_crc32c_table);
	suite_add_tcase(s, tc);
	tc = tcase_create("roundtrip");
	tcase_add_test(tc, test_persist_roundtrip_every_state);
	tcase_add_test(tc, test_persist_roundtrip_stale_orphan);
	suite_add_tcase(s, tc);
	tc = tcase_create("sharing");
	tcase_add_test(tc, test_persist_share_section);
	tcase_add_test(tc, test_persist_share_reload);
	tcase_add_test(tc, test_persist_share_restore);
	tcase_add_test(tc, test_persist_decode_checked);
	suite_add_tcase(s, tc);
	tc = tcase_create("corruption");
	tcase_add_test(tc, test_persist_every_bit_flip_detected);
	tcase_add_test(tc, test_persist_truncation_detected);
	tcase_add_test(tc, test_persist_semantic_checks);
	tcase_add_test(tc, test_persist_headers);
	tcase_add_test(tc, test_persist_resync);
	suite_add_tcase(s, tc);
	tc = tcase_create("journal");
	tcase_add_test(tc, test_persist_jentry_roundtrip);
	tcase_add_test(tc, test_persist_jentry_layout);
	tcase_add_test(tc, test_persist_journal_replay_exact);
	tcase_add_test(tc, test_persist_snapshot_touch);
	suite_add_tcase(s, tc);
	return s;
}
