/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for terms: the grammar and its error messages, canonical
 * forms, the closure rule, the map M against the binomial theorem, the
 * covariance transform against LAPACK fits in both bases, non-finite
 * rejection, prev() handling, and NIST StRD Pontius (certified values)
 * fitted from raw powers and from centred/scaled terms.
 */
#include <check.h>
#include <float.h>
#include <lapacke.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "limits.h"
#include "nist.h"
#include "suites.h"
#include "terms.h"

static const char *const F3[] = { "raw", "temp", "y" };	/* target y */

static struct terms *
parse_ok(const char *text, const char *const *fields, int nfields,
    int target, int intercept)
{
	struct terms *t = NULL;
	char eb[256];
	int rc;

	rc = terms_parse(text, fields, nfields, target, intercept, &t, eb,
	    sizeof(eb));
	ck_assert_msg(rc == 0, "parse '%s': %s", text, eb);
	ck_assert_ptr_nonnull(t);
	return t;
}

/* Uniform in [lo, hi) from the seeded C PRNG (srand(1) as SQLite does). */
static double
urand(double lo, double hi)
{
	return lo + (hi - lo) * ((double)rand() / ((double)RAND_MAX + 1.0));
}

/* ---- grammar ---- */

START_TEST(test_terms_parse_basic)
{
	struct terms *t;

	t = parse_ok("raw, raw^2, raw*temp, prev(raw)", F3, 3, 2, 1);
	ck_assert_int_eq(terms_p(t), 5);
	ck_assert_int_eq(terms_nfields(t), 3);
	ck_assert_int_eq(terms_has_intercept(t), 1);
	ck_assert_int_eq(terms_uses_prev(t), 1);
	ck_assert_str_eq(terms_text(t, 0), "intercept");
	ck_assert_str_eq(terms_text(t, 1), "raw");
	ck_assert_str_eq(terms_text(t, 2), "raw^2");
	ck_assert_str_eq(terms_text(t, 3), "raw*temp");
	ck_assert_str_eq(terms_text(t, 4), "prev(raw)");
	ck_assert_ptr_null(terms_text(t, -1));
	ck_assert_ptr_null(terms_text(t, 5));
	ck_assert_int_eq(terms_field_used(t, 0), 1);
	ck_assert_int_eq(terms_field_used(t, 2), 0);
	ck_assert_int_eq(terms_field_used(t, 3), 0);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	terms_free(t);

	/* No intercept: the terms start at 0; no prev. */
	t = parse_ok("temp", F3, 3, -1, 0);
	ck_assert_int_eq(terms_p(t), 1);
	ck_assert_int_eq(terms_has_intercept(t), 0);
	ck_assert_int_eq(terms_uses_prev(t), 0);
	ck_assert_str_eq(terms_text(t, 0), "temp");
	terms_free(t);

	/* Without a target, y is an ordinary field. */
	t = parse_ok("y", F3, 3, -1, 1);
	ck_assert_str_eq(terms_text(t, 1), "y");
	terms_free(t);
	terms_free(NULL);
}
END_TEST

START_TEST(test_terms_canonical)
{
	static const struct {
		const char *in, *out;
	} c[] = {
		{ "raw*raw", "raw^2" },
		{ "raw^2*raw^3", "raw^5" },
		{ "temp*raw", "raw*temp" },
		{ "temp*raw*raw", "raw^2*temp" },
		{ "raw^1", "raw" },
		{ "raw^01", "raw" },
		{ "prev(raw)*raw", "raw*prev(raw)" },
		{ "prev(temp)*prev(raw)", "prev(raw)*prev(temp)" },
		{ "prev(raw)^2*raw^3*temp", "raw^3*temp*prev(raw)^2" },
		{ "prev(y)", "prev(y)" },
		{ "prev(y)*prev(y)", "prev(y)^2" },
		{ " \traw  *\ttemp ^ 2 ", "raw*temp^2" },
		{ "prev ( raw ) ^ 3", "prev(raw)^3" },
		{ "raw^9", "raw^9" },
	};
	struct terms *t;
	size_t i;

	for (i = 0; i < sizeof(c) / sizeof(c[0]); i++) {
		t = parse_ok(c[i].in, F3, 3, 2, 1);
		ck_assert_int_eq(terms_p(t), 2);
		ck_assert_msg(strcmp(terms_text(t, 1), c[i].out) == 0,
		    "'%s' -> '%s', want '%s'", c[i].in, terms_text(t, 1),
		    c[i].out);
		terms_free(t);
	}
}
END_TEST

/* Every error path: the code, the column and the message. */
START_TEST(test_terms_errors)
{
	static const struct {
		const char *text;
		int col;
		const char *msg;
	} c[] = {
		/* unknown field / function */
		{ "foo", 1, "unknown field 'foo'" },
		{ "raw, foo", 6, "unknown field 'foo'" },
		{ "prev(foo)", 6, "unknown field 'foo'" },
		{ "Raw", 1, "unknown field 'Raw'" },
		{ "log(raw)", 1, "unknown function 'log' (only prev() is "
		    "defined)" },
		{ "prev", 1, "prev needs a field in parentheses" },
		{ "prev raw", 1, "prev needs a field in parentheses" },
		/* bad token */
		{ "raw+temp", 4, "unexpected character '+' (terms are "
		    "separated by ',')" },
		{ "raw/temp", 4, "unexpected character '/'" },
		{ "raw\xc3\xa9", 4, "unexpected byte 0xc3" },
		/* missing operand */
		{ "raw*", 4, "missing operand after '*'" },
		{ "raw*,temp", 4, "missing operand after '*'" },
		{ "*raw", 1, "missing operand before '*'" },
		{ "^2", 1, "missing operand before '^'" },
		{ "raw^", 5, "missing operand: '^' needs a power 1..9" },
		{ "raw^*temp", 5, "missing operand: '^' needs a power" },
		{ "prev()", 6, "missing operand: prev() needs a field name" },
		/* power out of range, not an integer, merged too high */
		{ "raw^0", 5, "power 0 out of range 1..9" },
		{ "raw^10", 5, "power 10 out of range 1..9" },
		{ "raw^999999999999999999999", 5, "power 999999999999... "
		    "out of range" },
		{ "raw^2.5", 5, "a power is an integer 1..9" },
		{ "raw^-1", 5, "a power is an integer 1..9, found '-'" },
		{ "raw^temp", 5, "a power is an integer 1..9, found 'temp'" },
		{ "raw^5*raw^5", 7, "power of 'raw' exceeds 9 after merging" },
		{ "prev(raw)^9*prev(raw)", 13, "power of 'raw' in prev() "
		    "exceeds 9" },
		/* empty term */
		{ "", 1, "empty term" },
		{ "   ", 4, "empty term" },
		{ ",raw", 1, "empty term" },
		{ "raw,,temp", 5, "empty term" },
		{ "raw,", 5, "empty term" },
		/* duplicate term */
		{ "raw^2, raw*raw", 8, "duplicate term 'raw^2' (same as "
		    "term 1)" },
		{ "temp, temp*raw, raw , raw*temp", 23, "duplicate term "
		    "'raw*temp' (same as term 2)" },
		/* bare target */
		{ "y", 1, "target field 'y' may appear only inside prev()" },
		{ "raw*y^2", 5, "target field 'y'" },
		/* trailing garbage */
		{ "raw temp", 5, "unexpected 'temp' after a factor; "
		    "expected '*', ',' or the end" },
		{ "raw 2", 5, "unexpected number '2' after a factor" },
		{ "prev(raw)(", 10, "unexpected '(' after a factor" },
		{ "2*raw", 1, "unexpected number '2': a factor is a field" },
		/* unbalanced parenthesis and other parenthesis misuse */
		{ "prev(raw", 9, "unbalanced parenthesis: prev( is not "
		    "closed" },
		{ "prev(", 6, "unbalanced parenthesis: prev( is not closed" },
		{ "prev(raw, temp)", 9, "unbalanced parenthesis" },
		{ "raw)", 4, "unbalanced parenthesis: ')' without '('" },
		{ ")", 1, "unbalanced parenthesis: ')' without '('" },
		{ "(raw)", 1, "unexpected '(': parentheses only enclose" },
		{ "prev(raw^2)", 9, "expected ')': a power goes after the "
		    "parenthesis" },
		{ "prev(raw temp)", 10, "expected ')' after the field name, "
		    "found 'temp'" },
		{ "prev(2)", 6, "expected a field name inside prev(), found "
		    "number '2'" },
		{ "prev(prev(raw))", 6, "prev() cannot be nested" },
	};
	struct terms *t;
	char eb[256], want[32];
	size_t i;
	int rc;

	for (i = 0; i < sizeof(c) / sizeof(c[0]); i++) {
		t = (struct terms *)(void *)eb;	/* must become NULL */
		rc = terms_parse(c[i].text, F3, 3, 2, 1, &t, eb, sizeof(eb));
		ck_assert_msg(rc == E_ARG, "'%s': rc %d", c[i].text, rc);
		ck_assert_ptr_null(t);
		snprintf(want, sizeof(want), "column %d: ", c[i].col);
		ck_assert_msg(strncmp(eb, want, strlen(want)) == 0 &&
		    strstr(eb, c[i].msg) != NULL,
		    "'%s': got '%s', want '%s%s...'", c[i].text, eb, want,
		    c[i].msg);
	}
}
END_TEST

START_TEST(test_terms_too_many)
{
	static char names[TERMS_MAX + 1][16];
	const char *fields[TERMS_MAX + 1];
	static char text[(TERMS_MAX + 1) * 8];
	struct terms *t;
	char eb[128], want[32];
	size_t pos = 0, col = 0;
	int f, rc;

	for (f = 0; f <= TERMS_MAX; f++) {
		snprintf(names[f], sizeof(names[f]), "f%d", f);
		fields[f] = names[f];
	}
	/* TERMS_MAX terms plus the intercept fill RLS_MAX_P exactly. */
	for (f = 0; f < TERMS_MAX; f++)
		pos += (size_t)snprintf(text + pos, sizeof(text) - pos,
		    "%sf%d", f ? "," : "", f);
	t = parse_ok(text, fields, TERMS_MAX + 1, -1, 1);
	ck_assert_int_eq(terms_p(t), RLS_MAX_P);
	ck_assert_str_eq(terms_text(t, TERMS_MAX), "f254");
	terms_free(t);
	/* One more term is refused at its first column. */
	col = pos + 2;
	snprintf(text + pos, sizeof(text) - pos, ",f%d", TERMS_MAX);
	rc = terms_parse(text, fields, TERMS_MAX + 1, -1, 0, &t, eb,
	    sizeof(eb));
	ck_assert_int_eq(rc, E_ARG);
	ck_assert_ptr_null(t);
	snprintf(want, sizeof(want), "column %zu: ", col);
	ck_assert_msg(strncmp(eb, want, strlen(want)) == 0, "%s", eb);
	ck_assert_ptr_nonnull(strstr(eb, "too many terms (at most 255)"));
}
END_TEST

START_TEST(test_terms_bad_fields)
{
	static const char *const dup[] = { "a", "b", "a" };
	static const char *const rsv[] = { "a", "prev" };
	static const char *const bad1[] = { "1x" };
	static const char *const bad2[] = { "a-b" };
	static const char *const empty[] = { "" };
	static const char *const nul[] = { "a", NULL };
	static const char *const longok[] = {
	    "abcdefghijabcdefghijabcdefghij12" };	/* 32 bytes */
	static const char *const longbad[] = {
	    "abcdefghijabcdefghijabcdefghij123" };
	struct terms *t;
	char eb[128];

	ck_assert_int_eq(terms_parse("a", dup, 3, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_str_eq(eb, "field 'a' declared twice");
	ck_assert_int_eq(terms_parse("a", rsv, 2, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_str_eq(eb, "field name 'prev' is reserved");
	ck_assert_int_eq(terms_parse("a", bad1, 1, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_str_eq(eb, "bad field name '1x'");
	ck_assert_int_eq(terms_parse("a", bad2, 1, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", empty, 1, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", nul, 2, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", longbad, 1, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", nul, 0, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", nul, 1, 1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse("a", nul, 1, -1, 2, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_int_eq(terms_parse(NULL, nul, 1, -1, 1, &t, eb,
	    sizeof(eb)), E_ARG);
	ck_assert_ptr_null(t);
	t = parse_ok(longok[0], longok, 1, -1, 1);
	terms_free(t);
}
END_TEST

/* The message is truncated, never overrun; errbuf may be absent. */
START_TEST(test_terms_errbuf_small)
{
	struct terms *t;
	char eb[12];

	memset(eb, 'X', sizeof(eb));
	ck_assert_int_eq(terms_parse("foo", F3, 3, 2, 1, &t, eb, 8), E_ARG);
	ck_assert_str_eq(eb, "column ");
	ck_assert_int_eq(eb[8], 'X');
	ck_assert_int_eq(terms_parse("foo", F3, 3, 2, 1, &t, NULL, 0), E_ARG);
	ck_assert_int_eq(terms_parse("foo", F3, 3, 2, 1, &t, eb, 0), E_ARG);
	ck_assert_int_eq(eb[0], 'c');
}
END_TEST

/* ---- closure rule ---- */

START_TEST(test_terms_closure)
{
	static const char *const ab[] = { "a", "b", "y" };
	static const struct {
		const char *text;
		int intercept, a, b, y;
	} c[] = {
		{ "a, a^2", 1, 1, 0, 0 },
		{ "a, a^2", 0, 0, 0, 0 },	/* no intercept */
		{ "a^2", 1, 0, 0, 0 },		/* a missing */
		{ "a, a^3", 1, 0, 0, 0 },	/* a^2 missing */
		{ "a, b, a*b", 1, 1, 1, 0 },
		{ "a*b, b", 1, 1, 0, 0 },	/* lowering b needs a */
		{ "a, a*b", 1, 0, 1, 0 },
		{ "a, prev(a)", 1, 1, 0, 0 },
		{ "a, a^2, prev(a)^2", 1, 0, 0, 0 },	/* no prev(a) */
		{ "prev(y), prev(y)^2", 1, 0, 0, 1 },
		{ "a, prev(y), a*prev(y)", 1, 1, 0, 1 },
		{ "a, b, a^2*b", 1, 0, 0, 0 },	/* a*b and a^2 missing */
	};
	struct terms *t;
	size_t i;

	for (i = 0; i < sizeof(c) / sizeof(c[0]); i++) {
		t = parse_ok(c[i].text, ab, 3, 2, c[i].intercept);
		ck_assert_msg(terms_field_centrable(t, 0) == c[i].a &&
		    terms_field_centrable(t, 1) == c[i].b &&
		    terms_field_centrable(t, 2) == c[i].y,
		    "'%s' (intercept %d): got %d %d %d", c[i].text,
		    c[i].intercept, terms_field_centrable(t, 0),
		    terms_field_centrable(t, 1),
		    terms_field_centrable(t, 2));
		ck_assert_int_eq(terms_field_centrable(t, -1), 0);
		ck_assert_int_eq(terms_field_centrable(t, 3), 0);
		terms_free(t);
	}
}
END_TEST

/* A centre on a field that is not centrable is refused; t unchanged. */
START_TEST(test_terms_closure_refuses_centre)
{
	static const char *const ab[] = { "a", "b" };
	double c[2] = { 1.0, 0.0 }, s[2] = { 2.0, 4.0 }, gc[2], gs[2];
	struct terms *t;

	t = parse_ok("a^2, b", ab, 2, -1, 1);
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	terms_get_scaling(t, gc, gs);
	ck_assert(gc[0] == 0.0 && gs[0] == 1.0 && gc[1] == 0.0 &&
	    gs[1] == 1.0);
	c[0] = 0.0;
	c[1] = 5.0;			/* b is centrable */
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	terms_free(t);
}
END_TEST

/* ---- the map M ---- */

/*
 * M for 1, x, x^2 and for 1, x, z, x*z against the binomial theorem
 * written out (a textbook closed form); all values are exact in binary.
 *   (x-c)/s       = x/s - c/s
 *   (x-c)^2/s^2   = x^2/s^2 - 2c x/s^2 + c^2/s^2
 *   (x-a)(z-b)/(st) = (xz - b x - a z + ab)/(st)
 */
START_TEST(test_terms_map_closed_form)
{
	static const char *const xz[] = { "x", "z" };
	double c[2] = { 3.0, -1.0 }, s[2] = { 2.0, 4.0 }, M[16];
	double want1[9] = {
		1, 0, 0,
		-1.5, 0.5, 0,
		2.25, -1.5, 0.25,
	};
	double want2[16] = {
		1, 0, 0, 0,
		-1.5, 0.5, 0, 0,
		0.25, 0, 0.25, 0,
		-0.375, 0.125, -0.375, 0.125,
	};
	struct terms *t;
	int i;

	t = parse_ok("x, x^2", xz, 2, -1, 1);
	terms_map(t, M);
	for (i = 0; i < 9; i++)		/* identity before scaling */
		ck_assert(M[i] == (i % 4 == 0 ? 1.0 : 0.0));
	/* z is unused here, so not centrable: its centre must be 0. */
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	c[1] = 0.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	ck_assert_int_eq(terms_scaling_is_set(t), 1);
	c[1] = -1.0;
	terms_map(t, M);
	for (i = 0; i < 9; i++)
		ck_assert_msg(M[i] == want1[i], "M[%d] = %g, want %g", i,
		    M[i], want1[i]);
	terms_free(t);

	/* (x - 3)(z + 1)/8 = (xz + x - 3z - 3)/8 */
	t = parse_ok("x, z, z*x", xz, 2, -1, 1);
	ck_assert_str_eq(terms_text(t, 3), "x*z");
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	terms_map(t, M);
	for (i = 0; i < 16; i++)
		ck_assert_msg(M[i] == want2[i], "M[%d] = %g, want %g", i,
		    M[i], want2[i]);
	terms_free(t);
}
END_TEST

/*
 * Random check of phi_scaled = M phi_original on a mixed term set (powers,
 * products, prev(), one field only scaled). Both sides are evaluated
 * independently (terms_eval forms ((x-c)/s)^e products, terms_eval_original
 * raw products); the tolerance is relative to sum_i |M_ji phi_o,i|, the
 * size of the terms that cancel (measured worst 5e-16).
 */
static const char *const F5[] = { "a", "b", "c", "d", "y" };
static const char *const T5 = "a, a^2, a^3, b, a*b, a^2*b, b^2, prev(y), "
    "prev(y)^2, c, a*prev(y), d^2, c*d^2";

START_TEST(test_terms_map_random)
{
	double x[5], xp[5], cen[5], sc[5], ps[14], po[14], M[14 * 14];
	double sum, mag;
	struct terms *t;
	int it, j, i, p;

	srand(1);
	t = parse_ok(T5, F5, 5, 4, 1);
	p = terms_p(t);
	ck_assert_int_eq(p, 14);
	/* a, b, c, y centrable; d only appears squared. */
	ck_assert_int_eq(terms_field_centrable(t, 0), 1);
	ck_assert_int_eq(terms_field_centrable(t, 1), 1);
	ck_assert_int_eq(terms_field_centrable(t, 2), 1);
	ck_assert_int_eq(terms_field_centrable(t, 3), 0);
	ck_assert_int_eq(terms_field_centrable(t, 4), 1);
	for (i = 0; i < 5; i++) {
		cen[i] = i == 3 ? 0.0 : urand(-5.0, 5.0);
		sc[i] = urand(0.3, 4.0);	/* not powers of two */
	}
	ck_assert_int_eq(terms_set_scaling(t, cen, sc), 0);
	terms_map(t, M);
	for (it = 0; it < 200; it++) {
		for (i = 0; i < 5; i++) {
			x[i] = urand(-6.0, 6.0);
			xp[i] = urand(-6.0, 6.0);
		}
		ck_assert_int_eq(terms_eval(t, x, xp, ps), 0);
		ck_assert_int_eq(terms_eval_original(t, x, xp, po), 0);
		for (j = 0; j < p; j++) {
			sum = mag = 0.0;
			for (i = 0; i < p; i++) {
				sum += M[j * p + i] * po[i];
				mag += fabs(M[j * p + i] * po[i]);
			}
			ck_assert_msg(fabs(ps[j] - sum) <= 1e-12 * mag,
			    "term %d: %.17g vs %.17g", j, ps[j], sum);
		}
	}
	terms_free(t);
}
END_TEST

/*
 * theta_o = M' theta_s gives the same predictions; cov_o from the sparse
 * transform equals the dense product M' C M written out.
 */
START_TEST(test_terms_to_original_dense)
{
	double x[5], xp[5], cen[5], sc[5], ps[14], po[14], M[14 * 14];
	double ts[14], to[14], C[14 * 14], A[14 * 14], Co[14 * 14];
	double ys, yo, mag, d, m;
	struct terms *t;
	int i, j, k, l, p;

	srand(2);
	t = parse_ok(T5, F5, 5, 4, 1);
	p = terms_p(t);
	for (i = 0; i < 5; i++) {
		cen[i] = i == 3 ? 0.0 : urand(-5.0, 5.0);
		sc[i] = urand(0.3, 4.0);
	}
	ck_assert_int_eq(terms_set_scaling(t, cen, sc), 0);
	terms_map(t, M);
	for (j = 0; j < p; j++)
		ts[j] = urand(-1.0, 1.0);
	/* A random symmetric positive definite C = A A' + I. */
	for (i = 0; i < p * p; i++)
		A[i] = urand(-1.0, 1.0);
	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++) {
			C[i * p + j] = i == j ? 1.0 : 0.0;
			for (k = 0; k < p; k++)
				C[i * p + j] += A[i * p + k] * A[j * p + k];
		}
	terms_to_original(t, ts, C, to, Co);
	for (i = 0; i < 5; i++) {
		x[i] = urand(-6.0, 6.0);
		xp[i] = urand(-6.0, 6.0);
	}
	ck_assert_int_eq(terms_eval(t, x, xp, ps), 0);
	ck_assert_int_eq(terms_eval_original(t, x, xp, po), 0);
	ys = yo = mag = 0.0;
	for (j = 0; j < p; j++) {
		ys += ps[j] * ts[j];
		yo += po[j] * to[j];
		for (i = 0; i < p; i++)
			mag += fabs(M[j * p + i] * po[i] * ts[j]);
	}
	ck_assert_msg(fabs(ys - yo) <= 1e-12 * mag, "%.17g vs %.17g", ys, yo);
	for (i = 0; i < p; i++)
		for (k = 0; k < p; k++) {
			d = mag = 0.0;
			for (j = 0; j < p; j++)
				for (l = 0; l < p; l++) {
					m = M[j * p + i] * C[j * p + l] *
					    M[l * p + k];
					d += m;
					mag += fabs(m);
				}
			ck_assert(Co[i * p + k] == Co[k * p + i]);
			ck_assert_msg(fabs(Co[i * p + k] - d) <= 1e-12 * mag,
			    "cov[%d][%d] %.17g vs %.17g", i, k,
			    Co[i * p + k], d);
		}
	/* theta only: NULL covariance pointers are allowed. */
	terms_to_original(t, ts, NULL, to, NULL);
	terms_free(t);
}
END_TEST

/*
 * Least squares by LAPACK dgels (Householder QR) on n x p rows X (row
 * major): theta, cov = s^2 (R'R)^-1 from the R factor with s^2 = RSS/(n-p),
 * the RSS and the 1-norm condition number of R (dtrcon). Test oracle.
 */
static void
ls_dgels(int n, int p, const double *X, const double *y, double *theta,
    double *cov, double *rss, double *kappa)
{
	double *A, *b, *R, rc, s2, v;
	int i, j, k;

	A = malloc((size_t)n * (size_t)p * sizeof(double));
	b = malloc((size_t)n * sizeof(double));
	R = calloc((size_t)p * (size_t)p, sizeof(double));
	ck_assert(A != NULL && b != NULL && R != NULL);
	memcpy(A, X, (size_t)n * (size_t)p * sizeof(double));
	memcpy(b, y, (size_t)n * sizeof(double));
	ck_assert_int_eq(LAPACKE_dgels(LAPACK_ROW_MAJOR, 'N', n, p, 1, A, p,
	    b, 1), 0);
	for (*rss = 0.0, i = p; i < n; i++)
		*rss += b[i] * b[i];
	s2 = *rss / (n - p);
	for (j = 0; j < p; j++)
		theta[j] = b[j];
	for (i = 0; i < p; i++)
		for (j = i; j < p; j++)
			R[i * p + j] = A[i * p + j];
	ck_assert_int_eq(LAPACKE_dtrcon(LAPACK_ROW_MAJOR, '1', 'U', 'N', p,
	    R, p, &rc), 0);
	*kappa = 1.0 / rc;
	ck_assert_int_eq(LAPACKE_dtrtri(LAPACK_ROW_MAJOR, 'U', 'N', p, R,
	    p), 0);
	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++) {
			for (v = 0.0, k = 0; k < p; k++)
				v += R[i * p + k] * R[j * p + k];
			cov[i * p + j] = s2 * v;
		}
	free(A);
	free(b);
	free(R);
}

/*
 * The covariance transform against LAPACK: fit the same records in the
 * scaled basis and in the original basis with dgels; M' Cov_s M must equal
 * the original-basis sigma^2 (X'X)^-1, and M' theta_s its theta. The data
 * are moderately conditioned in both bases so dgels is accurate in both
 * (measured: 3.5e-15 on theta, 1.9e-15 on cov; tolerance 1e-11).
 */
START_TEST(test_terms_cov_lapack)
{
	static const char *const fab[] = { "a", "b", "y" };
	enum { N = 60, P = 6 };
	double rec[N + 1][3], Xs[N * P], Xo[N * P], yv[N];
	double ts[P], cs[P * P], to[P], co[P * P], td[P], cd[P * P];
	double rss_s, rss_o, k_s, k_o, cmax;
	struct terms *t;
	int i, j, n, rc;

	srand(3);
	t = parse_ok("a, a^2, b, a*b, prev(y)", fab, 3, 2, 1);
	ck_assert_int_eq(terms_p(t), P);
	for (i = 0; i <= N; i++) {
		rec[i][0] = urand(1.0, 3.0);
		rec[i][1] = urand(-2.0, 2.0);
		rec[i][2] = 0.5 + 0.3 * rec[i][0] - 0.1 * rec[i][0] *
		    rec[i][0] + 0.2 * rec[i][0] * rec[i][1] +
		    (i > 0 ? 0.4 * rec[i - 1][2] : 0.0) + urand(-0.1, 0.1);
	}
	ck_assert_int_eq(terms_scaling_auto(t, &rec[0][0], 1), 0);
	for (i = 0; i < 3; i++)
		ck_assert_int_eq(terms_field_centrable(t, i), 1);
	/* Record 0 primes; records 1..N are fitted. */
	ck_assert_int_eq(terms_ingest(t, rec[0], NULL, Xs), E_STATE);
	for (n = 0, i = 1; i <= N; i++, n++) {
		rc = terms_ingest(t, rec[i], rec[i - 1], Xs + n * P);
		ck_assert_int_eq(rc, 0);
		ck_assert_int_eq(terms_eval_original(t, rec[i], rec[i - 1],
		    Xo + n * P), 0);
		yv[n] = rec[i][2];
	}
	ls_dgels(N, P, Xs, yv, ts, cs, &rss_s, &k_s);
	ls_dgels(N, P, Xo, yv, td, cd, &rss_o, &k_o);
	terms_to_original(t, ts, cs, to, co);
	ck_assert_double_eq_tol(rss_s, rss_o, 1e-12 * rss_o);
	for (j = 0; j < P; j++)
		ck_assert_msg(fabs(to[j] - td[j]) <= 1e-11 * fabs(td[j]),
		    "theta %d: %.17g vs %.17g", j, to[j], td[j]);
	for (cmax = 0.0, i = 0; i < P * P; i++)
		cmax = fabs(cd[i]) > cmax ? fabs(cd[i]) : cmax;
	for (i = 0; i < P * P; i++)
		ck_assert_msg(fabs(co[i] - cd[i]) <= 1e-11 * cmax,
		    "cov %d: %.17g vs %.17g", i, co[i], cd[i]);
	terms_free(t);
}
END_TEST

/* ---- scaling constants ---- */

START_TEST(test_terms_scaling_set_once)
{
	static const char *const fx[] = { "x", "z" };
	double c[2] = { 1.0, 0.0 }, s[2] = { 2.0, 1.0 }, gc[2], gs[2];
	double X[2] = { 5.0, 0.0 };
	struct terms *t;

	t = parse_ok("x, x^2", fx, 2, -1, 1);
	/* Invalid constants are refused and leave t unchanged. */
	s[0] = 0.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	s[0] = -2.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	s[0] = INFINITY;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	s[0] = 2.0;
	c[0] = NAN;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	s[1] = NAN;			/* even for an unused field */
	c[0] = 1.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	s[1] = 1.0;
	/* s so small that M overflows: E_NUMERIC, t unchanged. */
	c[0] = 1e300;
	s[0] = 1e-300;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_NUMERIC);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	terms_get_scaling(t, gc, gs);
	ck_assert(gc[0] == 0.0 && gs[0] == 1.0);
	c[0] = 1.0;
	s[0] = 2.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	/* Set once: neither a second set nor auto may change them. */
	c[0] = 7.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_STATE);
	ck_assert_int_eq(terms_scaling_auto(t, X, 1), E_STATE);
	terms_get_scaling(t, gc, gs);
	ck_assert(gc[0] == 1.0 && gs[0] == 2.0 && gc[1] == 0.0 &&
	    gs[1] == 1.0);
	terms_free(t);
}
END_TEST

/* The default rule of terms_scaling_auto (daemon/TERMS.md). */
START_TEST(test_terms_scaling_auto_rule)
{
	static const char *const f4[] = { "x", "w", "u", "z" };
	/* x centrable, w only scaled (no w), u unused, z centrable. */
	double X[3][4] = {
		{ 150000.0, -3.0, NAN, 0.0 },
		{ 300000.0, 5.0, 1.0, 0.0 },
		{ 450000.0, 1.0, 2.0, 0.0 },
	};
	double c[4], s[4], phi[8];
	struct terms *t;
	int i, j;

	/* One record: c = x, s = 2^k >= |x|. */
	t = parse_ok("x, x^2, w^2, z", f4, 4, -1, 1);
	ck_assert_int_eq(terms_field_centrable(t, 0), 1);
	ck_assert_int_eq(terms_field_centrable(t, 1), 0);
	ck_assert_int_eq(terms_field_centrable(t, 3), 1);
	ck_assert_int_eq(terms_scaling_auto(t, X[0], 0), E_ARG);
	ck_assert_int_eq(terms_scaling_auto(t, X[0], 1), 0);
	terms_get_scaling(t, c, s);
	ck_assert(c[0] == 150000.0 && s[0] == 262144.0);	/* 2^18 */
	ck_assert(c[1] == 0.0 && s[1] == 4.0);
	ck_assert(c[2] == 0.0 && s[2] == 1.0);	/* unused: NaN not read */
	ck_assert(c[3] == 0.0 && s[3] == 1.0);	/* zero: s = 1 */
	terms_free(t);

	/* Three records: midrange and 2^k >= half range; |u| <= 1. */
	t = parse_ok("x, x^2, w^2, z", f4, 4, -1, 1);
	ck_assert_int_eq(terms_scaling_auto(t, &X[0][0], 3), 0);
	terms_get_scaling(t, c, s);
	ck_assert(c[0] == 300000.0 && s[0] == 262144.0);	/* >= 150000 */
	ck_assert(c[1] == 0.0 && s[1] == 8.0);	/* >= max |w| = 5 */
	ck_assert(c[3] == 0.0 && s[3] == 1.0);
	for (i = 0; i < 3; i++) {
		ck_assert_int_eq(terms_eval(t, X[i], NULL, phi), 0);
		for (j = 0; j < terms_p(t); j++)
			ck_assert(fabs(phi[j]) <= 1.0);
	}
	terms_free(t);

	/* A row with a non-finite used field is ignored... */
	t = parse_ok("x, u", f4, 4, -1, 1);
	ck_assert_int_eq(terms_scaling_auto(t, &X[0][0], 3), 0);
	terms_get_scaling(t, c, s);
	ck_assert(c[0] == 375000.0 && s[0] == 131072.0);	/* >= 75000 */
	ck_assert(c[2] == 1.5 && s[2] == 0.5);
	terms_free(t);
	/* ... and with no usable row: E_NUMERIC, nothing set. */
	t = parse_ok("x, u", f4, 4, -1, 1);
	ck_assert_int_eq(terms_scaling_auto(t, &X[0][0], 1), E_NUMERIC);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	X[1][0] = INFINITY;
	ck_assert_int_eq(terms_scaling_auto(t, &X[0][0], 2), E_NUMERIC);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	terms_free(t);
}
END_TEST

/* Persistence round trip: constants read back give bit-identical phi. */
START_TEST(test_terms_scaling_roundtrip)
{
	double X[2][5] = {
		{ 1.25, -3.5, 7.0, 2.0, 0.1 },
		{ 0.75, 2.5, 6.0, -1.0, 0.3 },
	};
	double c[5], s[5], p1[14], p2[14];
	struct terms *t1, *t2;

	t1 = parse_ok(T5, F5, 5, 4, 1);
	t2 = parse_ok(T5, F5, 5, 4, 1);
	ck_assert_int_eq(terms_scaling_auto(t1, &X[0][0], 2), 0);
	terms_get_scaling(t1, c, s);
	ck_assert_int_eq(terms_set_scaling(t2, c, s), 0);
	ck_assert_int_eq(terms_eval(t1, X[1], X[0], p1), 0);
	ck_assert_int_eq(terms_eval(t2, X[1], X[0], p2), 0);
	ck_assert(memcmp(p1, p2, sizeof(p1)) == 0);
	terms_free(t1);
	terms_free(t2);
}
END_TEST

/* ---- evaluation and non-finite terms ---- */

START_TEST(test_terms_eval_values)
{
	double c[3] = { 2.0, 0.0, 0.0 }, s[3] = { 4.0, 8.0, 1.0 };
	double x[3] = { 10.0, 3.0, NAN }, phi[4], po[4];
	struct terms *t;

	/* Identity scaling: eval equals the raw products. */
	t = parse_ok("raw^2, raw*temp, temp^3", F3, 3, 2, 1);
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), 0);	/* y unused */
	ck_assert_int_eq(terms_eval_original(t, x, NULL, po), 0);
	ck_assert(phi[0] == 1.0 && phi[1] == 100.0 && phi[2] == 30.0 &&
	    phi[3] == 27.0);
	ck_assert(memcmp(phi, po, sizeof(phi)) == 0);
	/* raw is centrable? raw^2 lacks raw: no, so c must be 0. */
	ck_assert_int_eq(terms_set_scaling(t, c, s), E_ARG);
	c[0] = 0.0;
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), 0);
	/* (10/4)^2, (10/4)(3/8), (3/8)^3: exact in binary. */
	ck_assert(phi[0] == 1.0 && phi[1] == 6.25 && phi[2] == 0.9375 &&
	    phi[3] == 27.0 / 512.0);
	terms_free(t);
}
END_TEST

/* A record whose fields make a term non-finite is rejected. */
START_TEST(test_terms_nonfinite)
{
	double x[3] = { 1e40, 1.0, 0.0 }, phi[3], c[3] = { 0, 0, 0 };
	double s[3] = { 0x1p133, 1.0, 1.0 };	/* 2^133 ~ 1.1e40 */
	struct terms *t;

	t = parse_ok("raw, raw^9", F3, 3, 2, 1);
	/* (1e40)^9 overflows in raw units. */
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_NUMERIC);
	ck_assert_int_eq(terms_ingest(t, x, NULL, phi), E_NUMERIC);
	ck_assert_int_eq(terms_eval_original(t, x, NULL, phi), E_NUMERIC);
	x[0] = NAN;
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_NUMERIC);
	x[0] = INFINITY;
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_NUMERIC);
	x[0] = -INFINITY;
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_NUMERIC);
	/* An unused field is never read: NaN there is harmless. */
	x[0] = 2.0;
	x[1] = NAN;
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), 0);
	/* Scaled to u ~ 0.9, the same record is fine. */
	x[0] = 1e40;
	ck_assert_int_eq(terms_set_scaling(t, c, s), 0);
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), 0);
	ck_assert(isfinite(phi[2]) && phi[2] > 0.3 && phi[2] < 0.5);
	/* Scaling does not hide a real overflow: (DBL_MAX / 2^133)^9. */
	x[0] = DBL_MAX;
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_NUMERIC);
	terms_free(t);
}
END_TEST

/*
 * Issue #8 (2026-12-02): a term list of plain fields takes a loop without
 * factor lists. Its regressors must be the numbers of the general path
 * bit for bit (the daemon's coefficients are compared bit for bit with
 * `coefctl fit`), and the definition u = (x - c) / s of daemon/TERMS.md:
 * the same fields with one square added take the general path and are
 * the reference, over 2000 random records with and without constants,
 * overflow to infinity and NaN in a used and an unused field included.
 */
START_TEST(test_terms_linear_same_bits)
{
	double x[5], phi[6], ref[7], c[5], s[5], u;
	struct terms *lin, *gen;
	int map[6], i, j, k, rl, rg, scaled, icpt;

	srand(8);
	for (scaled = 0; scaled < 2; scaled++) {
		for (icpt = 0; icpt < 2; icpt++) {
			lin = parse_ok("d, a, c, b", F5, 5, 4, icpt);
			gen = parse_ok("a, b, c, d, a^2", F5, 5, 4, icpt);
			ck_assert_int_eq(terms_p(lin), 4 + icpt);
			for (j = 0; j < terms_p(lin); j++) {
				for (k = 0; k < terms_p(gen); k++)
					if (strcmp(terms_text(gen, k),
					    terms_text(lin, j)) == 0)
						break;
				ck_assert_int_lt(k, terms_p(gen));
				map[j] = k;
			}
			/* Centring needs the constant term (TERMS.md);
			 * the unused target keeps centre 0. */
			for (j = 0; j < 5; j++) {
				c[j] = icpt && j < 4 ? urand(-5, 5) : 0.0;
				s[j] = j == 2 ? 1e-300 : urand(0.1, 10);
			}
			if (scaled) {
				ck_assert_int_eq(terms_set_scaling(lin, c, s),
				    0);
				ck_assert_int_eq(terms_set_scaling(gen, c, s),
				    0);
			}
			for (i = 0; i < 2000; i++) {
				for (j = 0; j < 5; j++)
					x[j] = urand(-100, 100);
				if (i % 50 == 1)
					x[i % 4] = NAN;
				if (i % 50 == 2)
					x[4] = NAN;	/* the target: unused */
				if (i % 50 == 3)
					x[2] = 1e100;	/* / 1e-300: inf */
				if (i % 50 == 4)
					x[1] = -INFINITY;
				rl = terms_ingest(lin, x, NULL, phi);
				rg = terms_ingest(gen, x, NULL, ref);
				ck_assert_int_eq(rl, rg);
				ck_assert_int_eq(terms_eval(lin, x, NULL, phi),
				    rl);
				if (rl != 0)
					continue;
				for (j = 0; j < terms_p(lin); j++) {
					ck_assert(memcmp(&phi[j],
					    &ref[map[j]], 8) == 0);
					k = strcmp(terms_text(lin, j),
					    "intercept") == 0 ? -1 :
					    terms_text(lin, j)[0] - 'a';
					u = k < 0 ? 1.0 : scaled ?
					    (x[k] - c[k]) / s[k] : x[k];
					ck_assert(memcmp(&phi[j], &u, 8) == 0);
				}
			}
			terms_free(lin);
			terms_free(gen);
		}
	}
}
END_TEST

/* ---- prev() and the first record ---- */

/* The model-side rule of daemon/TERMS.md, written out for the tests. */
struct sim {
	double	prev[3];
	int	have;
	int	used, primed, rejected;
};

static int
sim_offer(const struct terms *t, struct sim *m, double raw, double temp,
    double y, double *phi)
{
	double x[3] = { raw, temp, y };
	int rc;

	rc = terms_ingest(t, x, m->have ? m->prev : NULL, phi);
	if (rc == 0 || rc == E_STATE) {
		memcpy(m->prev, x, sizeof(x));
		m->have = 1;
		if (rc == 0)
			m->used++;
		else
			m->primed++;
	} else
		m->rejected++;
	return rc;
}

START_TEST(test_terms_prev_first_record)
{
	double x[3] = { 1.0, 2.0, 3.0 }, phi[3];
	struct terms *t;

	/* With a prev() term there is nothing to read without xprev. */
	t = parse_ok("raw, prev(y)", F3, 3, 2, 1);
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), E_STATE);
	ck_assert_int_eq(terms_ingest(t, x, NULL, phi), E_STATE);
	ck_assert_int_eq(terms_eval(t, x, x, phi), 0);
	ck_assert(phi[0] == 1.0 && phi[1] == 1.0 && phi[2] == 3.0);
	terms_free(t);
	/* Without one, xprev is not needed and never read. */
	t = parse_ok("raw, temp", F3, 3, 2, 1);
	ck_assert_int_eq(terms_eval(t, x, NULL, phi), 0);
	ck_assert_int_eq(terms_ingest(t, x, NULL, phi), 0);
	terms_free(t);
}
END_TEST

START_TEST(test_terms_prev_sequence)
{
	struct sim m = { { 0, 0, 0 }, 0, 0, 0, 0 };
	double phi[3];
	struct terms *t;

	t = parse_ok("raw, prev(y)", F3, 3, 2, 1);
	/* A bad first record does not prime. */
	ck_assert_int_eq(sim_offer(t, &m, 1.0, 0.0, NAN, phi), E_NUMERIC);
	ck_assert_int_eq(sim_offer(t, &m, NAN, 0.0, 10.0, phi), E_NUMERIC);
	ck_assert_int_eq(m.have, 0);
	/* The first good record primes: accepted, not fitted. */
	ck_assert_int_eq(sim_offer(t, &m, 1.0, 0.0, 10.0, phi), E_STATE);
	ck_assert_int_eq(sim_offer(t, &m, 2.0, 0.0, 20.0, phi), 0);
	ck_assert(phi[1] == 2.0 && phi[2] == 10.0);
	/* A rejected record does not become the previous record. */
	ck_assert_int_eq(sim_offer(t, &m, NAN, 0.0, 30.0, phi), E_NUMERIC);
	ck_assert_int_eq(sim_offer(t, &m, 3.0, 0.0, 40.0, phi), 0);
	ck_assert(phi[1] == 3.0 && phi[2] == 20.0);
	/* Its own phi is finite, but as a previous record it would not be. */
	ck_assert_int_eq(sim_offer(t, &m, 4.0, 0.0, INFINITY, phi),
	    E_NUMERIC);
	ck_assert_int_eq(sim_offer(t, &m, 5.0, 0.0, 50.0, phi), 0);
	ck_assert(phi[1] == 5.0 && phi[2] == 40.0);
	ck_assert_int_eq(m.primed, 1);
	ck_assert_int_eq(m.used, 3);
	ck_assert_int_eq(m.rejected, 4);
	terms_free(t);
}
END_TEST

/* prev(raw)^9 of a huge raw overflows only in the next record's term. */
START_TEST(test_terms_prev_overflow_blocks)
{
	struct sim m = { { 0, 0, 0 }, 0, 0, 0, 0 };
	double phi[2];
	struct terms *t;

	t = parse_ok("prev(raw)^9", F3, 3, 2, 1);
	ck_assert_int_eq(sim_offer(t, &m, 1e40, 0.0, 0.0, phi), E_NUMERIC);
	ck_assert_int_eq(sim_offer(t, &m, 1.0, 0.0, 0.0, phi), E_STATE);
	ck_assert_int_eq(sim_offer(t, &m, 1e40, 0.0, 0.0, phi), E_NUMERIC);
	ck_assert_int_eq(sim_offer(t, &m, 2.0, 0.0, 0.0, phi), 0);
	ck_assert(phi[1] == 1.0);
	ck_assert_int_eq(sim_offer(t, &m, 3.0, 0.0, 0.0, phi), 0);
	ck_assert(phi[1] == 512.0);
	terms_free(t);
}
END_TEST

/* ---- NIST StRD ---- */

START_TEST(test_terms_nist_reader)
{
	struct nist ds;
	char path[512], eb[256];

	ck_assert_msg(nist_load(nist_path("nist-strd/Pontius.dat", path, sizeof(path)),
	    &ds, eb, sizeof(eb)) == 0, "%s", eb);
	/* Values as printed in Pontius.dat. */
	ck_assert_str_eq(ds.name, "Pontius");
	ck_assert_int_eq(ds.n, 40);
	ck_assert_int_eq(ds.nx, 1);
	ck_assert_int_eq(ds.nb, 3);
	ck_assert_int_eq(ds.b_num[0], 0);
	ck_assert_int_eq(ds.b_num[2], 2);
	ck_assert(ds.b[0] == 0.673565789473684E-03);
	ck_assert(ds.b[2] == -0.316081871345029E-14);
	ck_assert(ds.sd_b[1] == 0.157817399981659E-09);
	ck_assert(ds.resid_sd == 0.205177424076185E-03);
	ck_assert(ds.r2 == 0.999999900178537);
	ck_assert(ds.y[0] == .11019 && ds.x[0] == 150000.0);
	ck_assert(ds.y[39] == 2.16829 && ds.x[39] == 3000000.0);
	nist_free(&ds);
	ck_assert_int_eq(nist_load("/nonexistent/x.dat", &ds, eb, sizeof(eb)),
	    E_IO);
	ck_assert_double_eq(nist_lre(1.0, 1.0), 15.0);
	ck_assert_double_eq_tol(nist_lre(1.001, 1.0), 3.0, 1e-9);
}
END_TEST

/*
 * Row-wise Givens QR (square-root information form, lambda = 1, U0 = 0):
 * the algorithm of the RLS engine (NUMERICS.md section 1), for comparison
 * with dgels. theta, cov = s^2 (U'U)^-1, the RSS and kappa_1(U).
 */
static void
ls_givens(int n, int p, const double *X, const double *y, double *theta,
    double *cov, double *rss, double *kappa)
{
	double T[4][4], row[4], R[9], a, b, h, cs, sn, t1, rc, v;
	int r, i, j, k;

	ck_assert(p <= 3);
	memset(T, 0, sizeof(T));
	for (r = 0; r < n; r++) {
		for (j = 0; j < p; j++)
			row[j] = X[r * p + j];
		row[p] = y[r];
		for (k = 0; k < p; k++) {
			a = T[k][k];
			b = row[k];
			if (b == 0.0)
				continue;
			h = hypot(a, b);
			cs = a / h;
			sn = b / h;
			for (j = k; j <= p; j++) {
				t1 = T[k][j];
				T[k][j] = cs * t1 + sn * row[j];
				row[j] = -sn * t1 + cs * row[j];
			}
		}
		T[p][p] = hypot(T[p][p], row[p]);
	}
	for (i = p - 1; i >= 0; i--) {
		for (v = T[i][p], j = i + 1; j < p; j++)
			v -= T[i][j] * theta[j];
		theta[i] = v / T[i][i];
	}
	*rss = T[p][p] * T[p][p];
	memset(R, 0, sizeof(R));
	for (i = 0; i < p; i++)
		for (j = i; j < p; j++)
			R[i * p + j] = T[i][j];
	ck_assert_int_eq(LAPACKE_dtrcon(LAPACK_ROW_MAJOR, '1', 'U', 'N', p,
	    R, p, &rc), 0);
	*kappa = 1.0 / rc;
	ck_assert_int_eq(LAPACKE_dtrtri(LAPACK_ROW_MAJOR, 'U', 'N', p, R,
	    p), 0);
	for (i = 0; i < p; i++)
		for (j = 0; j < p; j++) {
			for (v = 0.0, k = 0; k < p; k++)
				v += R[i * p + k] * R[j * p + k];
			cov[i * p + j] = *rss / (n - p) * v;
		}
}

struct lre {
	double	b[3], sd[3], rsd, r2, pred, kappa;
};

static void
lre_of(const struct nist *ds, const double *theta, const double *cov,
    double rss, double kappa, double pred_est, struct lre *l)
{
	double ym = 0.0, tss = 0.0, xq = 1e6;
	int i;

	for (i = 0; i < ds->n; i++)
		ym += ds->y[i] / ds->n;
	for (i = 0; i < ds->n; i++)
		tss += (ds->y[i] - ym) * (ds->y[i] - ym);
	for (i = 0; i < 3; i++) {
		l->b[i] = nist_lre(theta[i], ds->b[i]);
		l->sd[i] = nist_lre(sqrt(cov[i * 3 + i]), ds->sd_b[i]);
	}
	l->rsd = nist_lre(sqrt(rss / (ds->n - 3)), ds->resid_sd);
	l->r2 = nist_lre(1.0 - rss / tss, ds->r2);
	/* Prediction at x = 1e6 against the certified polynomial. */
	l->pred = nist_lre(pred_est, ds->b[0] + ds->b[1] * xq +
	    ds->b[2] * xq * xq);
	l->kappa = kappa;
}

static void
lre_print(const char *what, const struct lre *l)
{
	if (getenv("COEFD_TEST_VERBOSE") == NULL)
		return;
	fprintf(stderr, "pontius %-22s LRE B0 %5.2f B1 %5.2f B2 %5.2f | "
	    "SD %5.2f %5.2f %5.2f | rsd %5.2f R2 %5.2f pred %5.2f | "
	    "kappa1(R) %.3g\n", what, l->b[0], l->b[1], l->b[2], l->sd[0],
	    l->sd[1], l->sd[2], l->rsd, l->r2, l->pred, l->kappa);
}

/*
 * NIST StRD Pontius (certified values, y = B0 + B1 x + B2 x^2), fitted
 * (a) from raw powers 1, x, x^2 and (b) from the terms "x, x^2" centred
 * and scaled by terms_scaling_auto (first record, and all 40 records),
 * mapped back with terms_to_original. Both with dgels and with a row-wise
 * Givens QR. (b) must reach LRE >= 9 on the coefficients, their SDs (from
 * sigma^2 (R'R)^-1 transformed), the residual SD, R-squared and a
 * prediction. LRE >= 9 is the requirement set for this module; StRD
 * itself certifies 15 digits. The condition numbers show what scaling
 * buys (measured: raw kappa_1(R) 1.7e13, scaled from the first record
 * 271). COEFD_TEST_VERBOSE=1 prints the figures.
 */
START_TEST(test_terms_pontius_lre)
{
	static const char *const fxy[] = { "x", "y" };
	struct nist ds;
	struct lre l;
	char path[512], eb[256], what[32];
	double *X, *R, th[3], cov[9], to[3], co[9], rss, kap, phi[3], q[2];
	struct terms *t;
	int i, j, warm, alg;

	ck_assert_msg(nist_load(nist_path("nist-strd/Pontius.dat", path, sizeof(path)),
	    &ds, eb, sizeof(eb)) == 0, "%s", eb);
	ck_assert(ds.nx == 1 && ds.nb == 3);
	X = malloc((size_t)ds.n * 3 * sizeof(double));
	R = malloc((size_t)ds.n * 2 * sizeof(double));
	ck_assert(X != NULL && R != NULL);
	for (i = 0; i < ds.n; i++) {
		R[2 * i] = ds.x[i];
		R[2 * i + 1] = ds.y[i];
	}

	/* (a) raw powers; x*x is exact here (x <= 3e6). */
	for (alg = 0; alg < 2; alg++) {
		for (i = 0; i < ds.n; i++) {
			X[3 * i] = 1.0;
			X[3 * i + 1] = ds.x[i];
			X[3 * i + 2] = ds.x[i] * ds.x[i];
		}
		if (alg == 0)
			ls_dgels(ds.n, 3, X, ds.y, th, cov, &rss, &kap);
		else
			ls_givens(ds.n, 3, X, ds.y, th, cov, &rss, &kap);
		lre_of(&ds, th, cov, rss, kap, th[0] + th[1] * 1e6 +
		    th[2] * 1e12, &l);
		lre_print(alg == 0 ? "(a) raw, dgels" : "(a) raw, givens", &l);
		ck_assert(kap > 1e12);
	}

	/* (b) centred and scaled terms, constants from `warm` records. */
	for (warm = 1; warm <= ds.n; warm += ds.n - 1)
		for (alg = 0; alg < 2; alg++) {
			t = parse_ok("x, x^2", fxy, 2, 1, 1);
			ck_assert_int_eq(terms_scaling_auto(t, R, warm), 0);
			for (i = 0; i < ds.n; i++)
				ck_assert_int_eq(terms_ingest(t, R + 2 * i,
				    NULL, X + 3 * i), 0);
			if (alg == 0)
				ls_dgels(ds.n, 3, X, ds.y, th, cov, &rss,
				    &kap);
			else
				ls_givens(ds.n, 3, X, ds.y, th, cov, &rss,
				    &kap);
			terms_to_original(t, th, cov, to, co);
			/* Predictions take raw fields: x = 1e6. */
			q[0] = 1e6;
			q[1] = 0.0;
			ck_assert_int_eq(terms_eval(t, q, NULL, phi), 0);
			lre_of(&ds, to, co, rss, kap, th[0] * phi[0] +
			    th[1] * phi[1] + th[2] * phi[2], &l);
			snprintf(what, sizeof(what), "(b) n=%d, %s", warm,
			    alg == 0 ? "dgels" : "givens");
			lre_print(what, &l);
			for (j = 0; j < 3; j++) {
				ck_assert_msg(l.b[j] >= 9.0, "%s B%d LRE %.2f",
				    what, j, l.b[j]);
				ck_assert_msg(l.sd[j] >= 9.0, "%s SD%d LRE "
				    "%.2f", what, j, l.sd[j]);
			}
			ck_assert(l.rsd >= 9.0 && l.r2 >= 9.0 &&
			    l.pred >= 9.0);
			ck_assert(kap < 1e3);
			terms_free(t);
		}
	free(X);
	free(R);
	nist_free(&ds);
}
END_TEST
/* A clone shares the compiled form, copies the constants, outlives its
 * source and evaluates to the same bits; without room its constants stay
 * the identity (issue 8, 2026-12). */
START_TEST(test_terms_clone_shares)
{
	static const char *const f[] = { "a", "b", "y" };
	static const double c[] = { 1.5, 0, 0 }, sc[] = { 2, 4, 1 };
	static const double x[] = { 3.25, -1.5, 7 };
	struct terms *t = parse_ok("a, b, a^2, a*b", f, 3, 2, 1), *u, *v;
	double p1[5], p2[5], p3[5];
	size_t len;

	ck_assert_int_eq(terms_set_scaling(t, c, sc), 0);
	ck_assert_ptr_nonnull(u = terms_clone(t, 0));
	ck_assert(terms_shares(t, u));
	ck_assert(terms_same(t, u));
	ck_assert(terms_scaling_is_set(u));
	ck_assert_int_eq(terms_eval(t, x, NULL, p1), 0);
	terms_free(t);
	ck_assert_int_eq(terms_eval(u, x, NULL, p2), 0);
	ck_assert_mem_eq(p1, p2, sizeof(p1));
	ck_assert_str_eq(terms_list(u, &len), "a, b, a^2, a*b");
	ck_assert_uint_eq(len, 14);
	ck_assert_str_eq(terms_fields(u)[2], "y");

	/* Unscaled clone without room: identity for good. */
	t = parse_ok("a, b, a^2, a*b", f, 3, 2, 1);
	ck_assert_ptr_nonnull(v = terms_clone(t, 0));
	ck_assert_int_eq(terms_set_scaling(v, c, sc), E_STATE);
	ck_assert_int_eq(terms_scaling_auto(v, x, 1), E_STATE);
	ck_assert_int_eq(terms_eval_original(t, x, NULL, p1), 0);
	ck_assert_int_eq(terms_eval(v, x, NULL, p3), 0);
	ck_assert_mem_eq(p1, p3, sizeof(p1));
	ck_assert(!terms_shares(u, v));
	ck_assert(terms_same(u, v));
	terms_free(t);
	terms_free(v);
	terms_free(u);
}
END_TEST


/*
 * Sets of one compiled form with different constants, used in turn: each
 * gets its own M (the form keeps the values of the last set that used its
 * scratch, and computes them again for another). Reference: M of a set
 * that never shared its form, and the closed form of TERMS.md for a:
 * u = (a - c) / s, so u^2 = (a^2 - 2 c a + c^2) / s^2.
 */
START_TEST(test_terms_map_per_set)
{
	static const char *const f[] = { "a", "b", "y" };
	static const double c1[] = { 1.5, 0, 0 }, s1[] = { 2, 4, 1 };
	static const double c2[] = { -3, 0, 0 }, s2[] = { 8, 0.5, 1 };
	struct terms *t = parse_ok("a, b, a^2", f, 3, 2, 1), *u, *r1, *r2;
	double m1[16], m2[16], mu[16], mt[16];
	int k;

	ck_assert_ptr_nonnull(u = terms_clone(t, 1));
	ck_assert_int_eq(terms_set_scaling(t, c1, s1), 0);
	ck_assert_int_eq(terms_set_scaling(u, c2, s2), 0);
	r1 = parse_ok("a, b, a^2", f, 3, 2, 1);
	r2 = parse_ok("a, b, a^2", f, 3, 2, 1);
	ck_assert_int_eq(terms_set_scaling(r1, c1, s1), 0);
	ck_assert_int_eq(terms_set_scaling(r2, c2, s2), 0);
	terms_map(r1, m1);
	terms_map(r2, m2);
	for (k = 0; k < 3; k++) {
		terms_map(t, mt);
		terms_map(t, mt);
		ck_assert_mem_eq(mt, m1, sizeof(m1));
		terms_map(u, mu);
		ck_assert_mem_eq(mu, m2, sizeof(m2));
	}
	/* Row of a^2 for t: (1/s^2) a^2 - (2c/s^2) a + (c^2/s^2) 1. */
	ck_assert_double_eq_tol(mt[3 * 4 + 3], 1 / (s1[0] * s1[0]), 1e-15);
	ck_assert_double_eq_tol(mt[3 * 4 + 1], -2 * c1[0] / (s1[0] * s1[0]),
	    1e-15);
	ck_assert_double_eq_tol(mt[3 * 4 + 0], c1[0] * c1[0] / (s1[0] * s1[0]),
	    1e-15);
	terms_free(t);
	terms_free(u);
	terms_free(r1);
	terms_free(r2);
}
END_TEST

Suite *
terms_suite(void)
{
	Suite *s = suite_create("terms");
	TCase *tc;

	tc = tcase_create("grammar");
	tcase_add_test(tc, test_terms_clone_shares);
	tcase_add_test(tc, test_terms_map_per_set);
	tcase_add_test(tc, test_terms_parse_basic);
	tcase_add_test(tc, test_terms_canonical);
	tcase_add_test(tc, test_terms_errors);
	tcase_add_test(tc, test_terms_too_many);
	tcase_add_test(tc, test_terms_bad_fields);
	tcase_add_test(tc, test_terms_errbuf_small);
	suite_add_tcase(s, tc);

	tc = tcase_create("closure");
	tcase_add_test(tc, test_terms_closure);
	tcase_add_test(tc, test_terms_closure_refuses_centre);
	suite_add_tcase(s, tc);

	tc = tcase_create("map");
	tcase_add_test(tc, test_terms_map_closed_form);
	tcase_add_test(tc, test_terms_map_random);
	tcase_add_test(tc, test_terms_to_original_dense);
	tcase_add_test(tc, test_terms_cov_lapack);
	suite_add_tcase(s, tc);

	tc = tcase_create("scaling");
	tcase_add_test(tc, test_terms_scaling_set_once);
	tcase_add_test(tc, test_terms_scaling_auto_rule);
	tcase_add_test(tc, test_terms_scaling_roundtrip);
	suite_add_tcase(s, tc);

	tc = tcase_create("eval");
	tcase_add_test(tc, test_terms_eval_values);
	tcase_add_test(tc, test_terms_nonfinite);
	tcase_add_test(tc, test_terms_linear_same_bits);
	suite_add_tcase(s, tc);

	tc = tcase_create("prev");
	tcase_add_test(tc, test_terms_prev_first_record);
	tcase_add_test(tc, test_terms_prev_sequence);
	tcase_add_test(tc, test_terms_prev_overflow_blocks);
	suite_add_tcase(s, tc);

	tc = tcase_create("nist");
	tcase_add_test(tc, test_terms_nist_reader);
	tcase_add_test(tc, test_terms_pontius_lre);
	suite_add_tcase(s, tc);
	return s;
}
