/* SPDX-License-Identifier: ISC */
/*
 * terms: parse a model's term list, evaluate regressors from centred and
 * scaled fields, and map coefficients and covariances back to the user's
 * original terms. Pure: no I/O (not even stdio formatting), no globals, no
 * logging, no libuv. Allocation happens in terms_parse only; evaluation and
 * the back-mapping use storage owned by the term set.
 */
#include <assert.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "limits.h"
#include "terms.h"

/*
 * Variables: index v < nfields is the field v in the current record,
 * nfields <= v < 2 nfields is prev(field v - nfields). A term is a monomial,
 * stored as its exponent row over the 2 nfields variables. Increasing v is
 * the canonical factor order: plain fields in declaration order, then prev
 * fields in declaration order.
 */
struct terms {
	int		 nfields;
	int		 nvars;		/* 2 nfields */
	int		 target;	/* field index, or -1 */
	int		 intercept;	/* 1: coefficient 0 is 1 */
	int		 p;		/* coefficients */
	int		 uses_prev;
	int		 scaling_set;
	unsigned char	*exps;		/* p x nvars exponent rows */
	int		*fac_off;	/* p + 1: term j has factors */
	int		*fac_var;	/*   fac_off[j] .. fac_off[j+1]-1 */
	int		*fac_exp;
	char		**text;		/* p display texts */
	char		*textbuf;
	unsigned char	*used;		/* nfields: in some term */
	unsigned char	*centrable;	/* nfields: closure holds */
	double		*centre;	/* nfields: c_f */
	double		*scale;		/* nfields: s_f */
	/* M (phi_s = M phi_o) as a list of nonzero entries, row-major. */
	int		 nnz;
	int		 nnz_cap;
	int		*m_row;
	int		*m_col;
	double		*m_val;
	int		*col_off;	/* p + 1; column i's entries: */
	int		*col_idx;	/* col_idx[col_off[i]..] */
	/* Scratch, owned here so that the hot paths do not allocate. */
	unsigned char	*rowbuf;	/* nvars */
	int		*kbuf;		/* max(nvars, p) */
	double		*work;		/* max(p, 2 nfields) */
};

/* A bounded, always NUL-terminated message writer (no stdio here). */
struct msg {
	char	*buf;
	size_t	 len;
	size_t	 pos;
};

static void
msg_init(struct msg *m, char *buf, size_t len)
{
	m->buf = buf;
	m->len = buf == NULL ? 0 : len;
	m->pos = 0;
	if (m->len > 0)
		m->buf[0] = '\0';
}

static void
msg_c(struct msg *m, char c)
{
	if (m->len == 0 || m->pos + 1 >= m->len)
		return;
	m->buf[m->pos++] = c;
	m->buf[m->pos] = '\0';
}

static void
msg_n(struct msg *m, const char *s, size_t n)
{
	size_t i;

	for (i = 0; i < n && s[i] != '\0'; i++)
		msg_c(m, s[i]);
}

static void
msg_s(struct msg *m, const char *s)
{
	while (*s != '\0')
		msg_c(m, *s++);
}

static void
msg_u(struct msg *m, unsigned long v)
{
	char d[24];
	int n = 0;

	do {
		d[n++] = (char)('0' + v % 10);
		v /= 10;
	} while (v > 0);
	while (n > 0)
		msg_c(m, d[--n]);
}

/* Quote a piece of user text, cut at 40 bytes so messages stay short. */
static void
msg_q(struct msg *m, const char *s, size_t n)
{
	msg_c(m, '\'');
	msg_n(m, s, n > 40 ? 40 : n);
	if (n > 40)
		msg_s(m, "...");
	msg_c(m, '\'');
}

/* Canonical text of an exponent row; "intercept" for the constant. */
static void
emit_term(struct msg *m, const unsigned char *row, int nfields,
    const char *const *fields)
{
	int v, first = 1;

	for (v = 0; v < 2 * nfields; v++) {
		if (row[v] == 0)
			continue;
		if (!first)
			msg_c(m, '*');
		first = 0;
		if (v < nfields)
			msg_s(m, fields[v]);
		else {
			msg_s(m, "prev(");
			msg_s(m, fields[v - nfields]);
			msg_c(m, ')');
		}
		if (row[v] > 1) {
			msg_c(m, '^');
			msg_c(m, (char)('0' + row[v]));
		}
	}
	if (first)
		msg_s(m, "intercept");
}

/* Length of emit_term's output, without the NUL. */
static size_t
term_text_len(const unsigned char *row, int nfields,
    const char *const *fields)
{
	size_t len = 0;
	int v, nfac = 0;

	for (v = 0; v < 2 * nfields; v++) {
		if (row[v] == 0)
			continue;
		nfac++;
		len += strlen(fields[v < nfields ? v : v - nfields]);
		if (v >= nfields)
			len += 6;		/* "prev(" ")" */
		if (row[v] > 1)
			len += 2;		/* "^d" */
	}
	if (nfac == 0)
		return strlen("intercept");
	return len + (size_t)(nfac - 1);	/* '*' separators */
}

/* ---- lexer and parser ---- */

enum tok {
	T_END,
	T_IDENT,
	T_INT,
	T_STAR,
	T_CARET,
	T_COMMA,
	T_LPAREN,
	T_RPAREN,
	T_BAD
};

struct parser {
	const char		*s;
	size_t			 pos;		/* next byte */
	enum tok		 tok;		/* current token */
	size_t			 start;		/* its offset */
	size_t			 len;		/* its length */
	const char *const	*fields;
	int			 nfields;
	int			 target;
	struct msg		 m;
};

static int
is_alpha(int c)
{
	return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || c == '_';
}

static int
is_digit(int c)
{
	return c >= '0' && c <= '9';
}

static void
lex(struct parser *ps)
{
	const char *s = ps->s;
	size_t i = ps->pos;
	int c;

	while (s[i] == ' ' || s[i] == '\t')
		i++;
	ps->start = i;
	ps->len = 1;
	c = (unsigned char)s[i];
	if (c == '\0') {
		ps->tok = T_END;
		ps->len = 0;
	} else if (is_alpha(c)) {
		while (is_alpha((unsigned char)s[i + ps->len]) ||
		    is_digit((unsigned char)s[i + ps->len]))
			ps->len++;
		ps->tok = T_IDENT;
	} else if (is_digit(c)) {
		while (is_digit((unsigned char)s[i + ps->len]))
			ps->len++;
		ps->tok = T_INT;
	} else if (c == '*')
		ps->tok = T_STAR;
	else if (c == '^')
		ps->tok = T_CARET;
	else if (c == ',')
		ps->tok = T_COMMA;
	else if (c == '(')
		ps->tok = T_LPAREN;
	else if (c == ')')
		ps->tok = T_RPAREN;
	else
		ps->tok = T_BAD;
	ps->pos = ps->start + ps->len;
}

/* Kind of the token after the current one, without consuming anything. */
static enum tok
peek(const struct parser *ps)
{
	struct parser q = *ps;

	lex(&q);
	return q.tok;
}

static int
tok_is(const struct parser *ps, const char *word)
{
	return strlen(word) == ps->len &&
	    memcmp(ps->s + ps->start, word, ps->len) == 0;
}

/* Start an error message at the current token: "column N: ". */
static struct msg *
perr(struct parser *ps)
{
	msg_s(&ps->m, "column ");
	msg_u(&ps->m, (unsigned long)ps->start + 1);
	msg_s(&ps->m, ": ");
	return &ps->m;
}

/* Describe the current token for "unexpected ..." messages. */
static void
msg_tok(struct parser *ps)
{
	static const char hex[] = "0123456789abcdef";
	unsigned char c;

	switch (ps->tok) {
	case T_END:
		msg_s(&ps->m, "end of text");
		break;
	case T_IDENT:
		msg_q(&ps->m, ps->s + ps->start, ps->len);
		break;
	case T_INT:
		msg_s(&ps->m, "number ");
		msg_q(&ps->m, ps->s + ps->start, ps->len);
		break;
	default:
		c = (unsigned char)ps->s[ps->start];
		if (c >= 0x20 && c < 0x7f)
			msg_q(&ps->m, ps->s + ps->start, 1);
		else {
			msg_s(&ps->m, "byte 0x");
			msg_c(&ps->m, hex[c >> 4]);
			msg_c(&ps->m, hex[c & 15]);
		}
		break;
	}
}

/* The "bad token" error: a byte that starts no token of the grammar. */
static int
err_bad_char(struct parser *ps)
{
	unsigned char c = (unsigned char)ps->s[ps->start];
	struct msg *m = perr(ps);

	msg_s(m, "unexpected ");
	if (c >= 0x20 && c < 0x7f)
		msg_s(m, "character ");
	msg_tok(ps);
	if (c == '+' || c == '-')
		msg_s(m, " (terms are separated by ',')");
	return E_ARG;
}

static int
lookup_field(const struct parser *ps)
{
	int f;

	for (f = 0; f < ps->nfields; f++)
		if (tok_is(ps, ps->fields[f]))
			return f;
	return -1;
}

static int
err_unknown_field(struct parser *ps)
{
	struct msg *m = perr(ps);

	if (tok_is(ps, "prev"))
		msg_s(m, "prev needs a field in parentheses, as prev(x)");
	else {
		msg_s(m, "unknown field ");
		msg_q(m, ps->s + ps->start, ps->len);
	}
	return E_ARG;
}

/* The field inside prev( ... ); the current token follows '('. */
static int
parse_prev_arg(struct parser *ps, int *var)
{
	int f;

	switch (ps->tok) {
	case T_IDENT:
		if (tok_is(ps, "prev") && peek(ps) == T_LPAREN) {
			msg_s(perr(ps), "prev() cannot be nested");
			return E_ARG;
		}
		if ((f = lookup_field(ps)) < 0)
			return err_unknown_field(ps);
		break;
	case T_RPAREN:
		msg_s(perr(ps), "missing operand: prev() needs a field name");
		return E_ARG;
	case T_END:
	case T_COMMA:
		msg_s(perr(ps), "unbalanced parenthesis: prev( is not closed");
		return E_ARG;
	case T_BAD:
		return err_bad_char(ps);
	default:
		msg_s(perr(ps), "expected a field name inside prev(), found ");
		msg_tok(ps);
		return E_ARG;
	}
	lex(ps);
	switch (ps->tok) {
	case T_RPAREN:
		break;
	case T_END:
	case T_COMMA:
		msg_s(perr(ps), "unbalanced parenthesis: prev( is not closed");
		return E_ARG;
	case T_CARET:
		msg_s(perr(ps), "expected ')': a power goes after the "
		    "parenthesis, as prev(x)^2");
		return E_ARG;
	case T_BAD:
		return err_bad_char(ps);
	default:
		msg_s(perr(ps), "expected ')' after the field name, found ");
		msg_tok(ps);
		return E_ARG;
	}
	lex(ps);
	*var = ps->nfields + f;
	return 0;
}

/* factor := FIELD [ '^' POWER ] | 'prev' '(' FIELD ')' [ '^' POWER ] */
static int
parse_factor(struct parser *ps, int *var, int *power)
{
	unsigned long v;
	size_t i;
	int f, rc;
	struct msg *m;

	switch (ps->tok) {
	case T_IDENT:
		if (peek(ps) == T_LPAREN) {
			if (!tok_is(ps, "prev")) {
				m = perr(ps);
				msg_s(m, "unknown function ");
				msg_q(m, ps->s + ps->start, ps->len);
				msg_s(m, " (only prev() is defined)");
				return E_ARG;
			}
			lex(ps);	/* '(' */
			lex(ps);
			if ((rc = parse_prev_arg(ps, var)) != 0)
				return rc;
			break;
		}
		if ((f = lookup_field(ps)) < 0)
			return err_unknown_field(ps);
		if (f == ps->target) {
			m = perr(ps);
			msg_s(m, "target field ");
			msg_q(m, ps->s + ps->start, ps->len);
			msg_s(m, " may appear only inside prev()");
			return E_ARG;
		}
		*var = f;
		lex(ps);
		break;
	case T_LPAREN:
		msg_s(perr(ps), "unexpected '(': parentheses only enclose "
		    "the field of prev()");
		return E_ARG;
	case T_RPAREN:
		msg_s(perr(ps), "unbalanced parenthesis: ')' without '('");
		return E_ARG;
	case T_STAR:
	case T_CARET:
		m = perr(ps);
		msg_s(m, "missing operand before ");
		msg_tok(ps);
		return E_ARG;
	case T_INT:
		m = perr(ps);
		msg_s(m, "unexpected ");
		msg_tok(ps);
		msg_s(m, ": a factor is a field or prev(field); the constant "
		    "is the intercept option");
		return E_ARG;
	case T_BAD:
		return err_bad_char(ps);
	case T_END:
	case T_COMMA:
		/* The callers only get here after a '*'. */
		msg_s(perr(ps), "missing operand");
		return E_ARG;
	}

	*power = 1;
	if (ps->tok != T_CARET)
		return 0;
	lex(ps);
	if (ps->tok != T_INT) {
		m = perr(ps);
		if (ps->tok == T_END || ps->tok == T_COMMA ||
		    ps->tok == T_STAR)
			msg_s(m, "missing operand: '^' needs a power 1..9");
		else {
			msg_s(m, "a power is an integer 1..9, found ");
			msg_tok(ps);
		}
		return E_ARG;
	}
	for (v = 0, i = 0; i < ps->len && v <= TERMS_POWER_MAX; i++)
		v = v * 10 + (unsigned long)(ps->s[ps->start + i] - '0');
	if (ps->s[ps->pos] == '.') {
		msg_s(perr(ps), "a power is an integer 1..9");
		return E_ARG;
	}
	if (v < 1 || v > TERMS_POWER_MAX) {
		m = perr(ps);
		msg_s(m, "power ");
		msg_n(m, ps->s + ps->start, ps->len > 12 ? 12 : ps->len);
		if (ps->len > 12)
			msg_s(m, "...");
		msg_s(m, " out of range 1..9");
		return E_ARG;
	}
	*power = (int)v;
	lex(ps);
	return 0;
}

/* term := factor { '*' factor }, merged into the exponent row. */
static int
parse_term(struct parser *ps, unsigned char *row)
{
	size_t fstart;
	int var = 0, power = 0, rc;
	struct msg *m;

	memset(row, 0, (size_t)(2 * ps->nfields));
	for (;;) {
		fstart = ps->start;
		if ((rc = parse_factor(ps, &var, &power)) != 0)
			return rc;
		if (row[var] + power > TERMS_POWER_MAX) {
			ps->start = fstart;
			m = perr(ps);
			msg_s(m, "power of ");
			msg_q(m, var < ps->nfields ? ps->fields[var] :
			    ps->fields[var - ps->nfields],
			    strlen(var < ps->nfields ? ps->fields[var] :
			    ps->fields[var - ps->nfields]));
			if (var >= ps->nfields)
				msg_s(m, " in prev()");
			msg_s(m, " exceeds 9 after merging repeated factors");
			return E_ARG;
		}
		row[var] = (unsigned char)(row[var] + power);
		switch (ps->tok) {
		case T_STAR:
			if (peek(ps) == T_END || peek(ps) == T_COMMA) {
				msg_s(perr(ps), "missing operand after '*'");
				return E_ARG;
			}
			lex(ps);
			continue;
		case T_END:
		case T_COMMA:
			return 0;
		case T_RPAREN:
			msg_s(perr(ps),
			    "unbalanced parenthesis: ')' without '('");
			return E_ARG;
		case T_BAD:
			return err_bad_char(ps);
		default:
			m = perr(ps);
			msg_s(m, "unexpected ");
			msg_tok(ps);
			msg_s(m, " after a factor; expected '*', ',' or the "
			    "end");
			return E_ARG;
		}
	}
}

static int
check_fields(const char *const *fields, int nfields, int target,
    int intercept, struct msg *m)
{
	const char *name;
	size_t len, i;
	int f, g;

	if (fields == NULL || nfields < 1) {
		msg_s(m, "no fields declared");
		return E_ARG;
	}
	if (target < -1 || target >= nfields || (intercept != 0 &&
	    intercept != 1)) {
		msg_s(m, "bad target or intercept argument");
		return E_ARG;
	}
	for (f = 0; f < nfields; f++) {
		if ((name = fields[f]) == NULL) {
			msg_s(m, "field name missing");
			return E_ARG;
		}
		len = strlen(name);
		if (len == 0 || len > FIELD_NAME_MAX ||
		    !is_alpha((unsigned char)name[0])) {
			msg_s(m, "bad field name ");
			msg_q(m, name, len);
			return E_ARG;
		}
		for (i = 1; i < len; i++)
			if (!is_alpha((unsigned char)name[i]) &&
			    !is_digit((unsigned char)name[i])) {
				msg_s(m, "bad field name ");
				msg_q(m, name, len);
				return E_ARG;
			}
		if (strcmp(name, "prev") == 0) {
			msg_s(m, "field name 'prev' is reserved");
			return E_ARG;
		}
		for (g = 0; g < f; g++)
			if (strcmp(name, fields[g]) == 0) {
				msg_s(m, "field ");
				msg_q(m, name, len);
				msg_s(m, " declared twice");
				return E_ARG;
			}
	}
	return 0;
}

/* ---- structure: closure rule and the map M ---- */

static int
row_find(const struct terms *t, const unsigned char *row)
{
	int i;

	for (i = 0; i < t->p; i++)
		if (memcmp(t->exps + (size_t)i * (size_t)t->nvars, row,
		    (size_t)t->nvars) == 0)
			return i;
	return -1;
}

/*
 * Centring field f is exact only if the term set is closed under lowering
 * the power of f (in the current record and in prev()) in every term, and
 * the intercept is present: then each centred product expands, by the
 * binomial theorem, into terms of the set, and the model is the same one
 * in original terms. Otherwise f is only scaled.
 */
static int
closed_in(struct terms *t, int f)
{
	int j, k, l, v;

	if (!t->intercept || !t->used[f])
		return 0;
	for (j = 0; j < t->p; j++)
		for (k = 0; k < 2; k++) {
			v = f + k * t->nfields;
			for (l = 0; l < t->exps[(size_t)j * (size_t)t->nvars +
			    (size_t)v]; l++) {
				memcpy(t->rowbuf, t->exps + (size_t)j *
				    (size_t)t->nvars, (size_t)t->nvars);
				t->rowbuf[v] = (unsigned char)l;
				if (row_find(t, t->rowbuf) < 0)
					return 0;
			}
		}
	return 1;
}

static int
field_of(const struct terms *t, int v)
{
	return v < t->nfields ? v : v - t->nfields;
}

static double
binom(int n, int k)
{
	double r = 1.0;
	int i;

	/* Exact for n <= 9: every partial product is a small integer. */
	for (i = 1; i <= k; i++)
		r = r * (double)(n - k + i) / (double)i;
	return r;
}

static double
ipow(double u, int e)
{
	double r = 1.0;

	while (e-- > 0)
		r *= u;
	return r;
}

/*
 * Fill the entries of M from the constants in force. Row j of M expands
 * phi_s[j] = prod_v ((x_v - c_f)/s_f)^e_v
 *          = prod_v sum_{k=0..e_v} C(e_v,k) (-c_f/s_f)^(e_v-k) s_f^-k x_v^k,
 * (binomial theorem); each multi-index k is a term of the set by the
 * closure rule. Uncentred fields contribute only k = e_v. Returns E_NUMERIC
 * if an entry is not finite.
 */
static int
compute_map(struct terms *t)
{
	int j, q, nq, i, v, e, f, k, *fv, *fe;
	double val, c, s;

	t->nnz = 0;
	for (j = 0; j < t->p; j++) {
		fv = t->fac_var + t->fac_off[j];
		fe = t->fac_exp + t->fac_off[j];
		nq = t->fac_off[j + 1] - t->fac_off[j];
		for (q = 0; q < nq; q++)
			t->kbuf[q] = t->centrable[field_of(t, fv[q])] ?
			    0 : fe[q];
		for (;;) {
			val = 1.0;
			memset(t->rowbuf, 0, (size_t)t->nvars);
			for (q = 0; q < nq; q++) {
				v = fv[q];
				e = fe[q];
				k = t->kbuf[q];
				f = field_of(t, v);
				c = t->centre[f];
				s = t->scale[f];
				val *= binom(e, k) * ipow(-c / s, e - k) /
				    ipow(s, k);
				t->rowbuf[v] = (unsigned char)k;
			}
			if (!isfinite(val))
				return E_NUMERIC;
			i = row_find(t, t->rowbuf);
			assert(i >= 0);
			if (val != 0.0) {
				assert(t->nnz < t->nnz_cap);
				t->m_row[t->nnz] = j;
				t->m_col[t->nnz] = i;
				t->m_val[t->nnz] = val;
				t->nnz++;
			}
			/* Next multi-index (odometer over centred factors). */
			for (q = 0; q < nq; q++) {
				if (t->centrable[field_of(t, fv[q])] &&
				    t->kbuf[q] < fe[q]) {
					t->kbuf[q]++;
					break;
				}
				t->kbuf[q] = t->centrable[field_of(t, fv[q])] ?
				    0 : fe[q];
			}
			if (q == nq)
				break;
		}
	}
	/* Column index (counting sort) for the covariance transform. */
	memset(t->col_off, 0, (size_t)(t->p + 1) * sizeof(int));
	for (i = 0; i < t->nnz; i++)
		t->col_off[t->m_col[i] + 1]++;
	for (i = 0; i < t->p; i++)
		t->col_off[i + 1] += t->col_off[i];
	for (i = 0; i < t->p; i++)
		t->kbuf[i] = t->col_off[i];	/* next free slot */
	for (i = 0; i < t->nnz; i++)
		t->col_idx[t->kbuf[t->m_col[i]]++] = i;
	return 0;
}

/* ---- public API ---- */

/*
 * terms_parse: compile the term list `text` (grammar in daemon/TERMS.md)
 * over the nfields declared field names `fields` (identifiers, distinct,
 * at most FIELD_NAME_MAX bytes, not "prev"). `target` is the index of the
 * response field, which may appear only inside prev(), or -1. With
 * intercept = 1, coefficient 0 is the constant 1; the terms follow in the
 * order written. On success stores a new term set in *out (owned by the
 * caller, free with terms_free) with identity scaling (c = 0, s = 1) not
 * yet fixed, and returns 0. Returns E_ARG with "column N: message" in errbuf
 * (N is the 1-based byte column in text) for a bad term list, or a message
 * without a column for a bad field list or argument; E_NOMEM. On failure
 * *out is NULL. errbuf may be NULL when errlen is 0.
 */
int
terms_parse(const char *text, const char *const *fields, int nfields,
    int target, int intercept, struct terms **out, char *errbuf,
    size_t errlen)
{
	struct parser ps;
	struct terms *t = NULL;
	struct msg tm;
	unsigned char *rows = NULL, *row;
	size_t ncomma, maxterms, i, len, nv;
	int rc, nterms, j, k, v, q, f, prod;

	*out = NULL;
	msg_init(&ps.m, errbuf, errlen);
	if (text == NULL) {
		msg_s(&ps.m, "no term list");
		return E_ARG;
	}
	if ((rc = check_fields(fields, nfields, target, intercept,
	    &ps.m)) != 0)
		return rc;
	nv = 2 * (size_t)nfields;

	/* At most one term more than there are commas. */
	for (ncomma = 0, i = 0; text[i] != '\0'; i++)
		ncomma += text[i] == ',';
	maxterms = ncomma + 1 < TERMS_MAX ? ncomma + 1 : TERMS_MAX;
	if ((rows = calloc(maxterms + 1, nv)) == NULL)
		return E_NOMEM;

	ps.s = text;
	ps.pos = 0;
	ps.fields = fields;
	ps.nfields = nfields;
	ps.target = target;
	lex(&ps);
	nterms = 0;
	for (;;) {
		if (ps.tok == T_END || ps.tok == T_COMMA) {
			msg_s(perr(&ps), "empty term");
			rc = E_ARG;
			goto fail;
		}
		if (nterms == TERMS_MAX) {
			msg_s(perr(&ps), "too many terms (at most ");
			msg_u(&ps.m, TERMS_MAX);
			msg_c(&ps.m, ')');
			rc = E_ARG;
			goto fail;
		}
		row = rows + (size_t)(intercept + nterms) * nv;
		i = ps.start;
		if ((rc = parse_term(&ps, row)) != 0)
			goto fail;
		for (j = 0; j < nterms; j++)
			if (memcmp(rows + (size_t)(intercept + j) * nv, row,
			    nv) == 0) {
				ps.start = i;
				msg_s(perr(&ps), "duplicate term ");
				msg_c(&ps.m, '\'');
				emit_term(&ps.m, row, nfields, fields);
				msg_s(&ps.m, "' (same as term ");
				msg_u(&ps.m, (unsigned long)j + 1);
				msg_c(&ps.m, ')');
				rc = E_ARG;
				goto fail;
			}
		nterms++;
		if (ps.tok == T_END)
			break;
		lex(&ps);	/* ',' */
	}

	rc = E_NOMEM;
	if ((t = calloc(1, sizeof(*t))) == NULL)
		goto fail;
	t->nfields = nfields;
	t->nvars = (int)nv;
	t->target = target;
	t->intercept = intercept;
	t->p = intercept + nterms;
	t->exps = rows;
	rows = NULL;

	/* Factor lists, in canonical (increasing variable) order. */
	if ((t->fac_off = calloc((size_t)t->p + 1, sizeof(int))) == NULL)
		goto fail;
	for (j = 0, q = 0; j < t->p; j++)
		for (v = 0; v < t->nvars; v++)
			q += t->exps[(size_t)j * nv + (size_t)v] != 0;
	if ((t->fac_var = calloc((size_t)q + 1, sizeof(int))) == NULL ||
	    (t->fac_exp = calloc((size_t)q + 1, sizeof(int))) == NULL ||
	    (t->used = calloc((size_t)nfields, 1)) == NULL ||
	    (t->centrable = calloc((size_t)nfields, 1)) == NULL ||
	    (t->centre = calloc((size_t)nfields, sizeof(double))) == NULL ||
	    (t->scale = calloc((size_t)nfields, sizeof(double))) == NULL ||
	    (t->rowbuf = calloc(nv, 1)) == NULL ||
	    (t->kbuf = calloc(nv > (size_t)t->p ? nv : (size_t)t->p,
	    sizeof(int))) == NULL ||
	    (t->work = calloc(nv > (size_t)t->p ? nv : (size_t)t->p,
	    sizeof(double))) == NULL ||
	    (t->text = calloc((size_t)t->p, sizeof(char *))) == NULL ||
	    (t->col_off = calloc((size_t)t->p + 1, sizeof(int))) == NULL)
		goto fail;
	for (j = 0, q = 0; j < t->p; j++) {
		t->fac_off[j] = q;
		for (v = 0; v < t->nvars; v++) {
			k = t->exps[(size_t)j * nv + (size_t)v];
			if (k == 0)
				continue;
			t->fac_var[q] = v;
			t->fac_exp[q] = k;
			q++;
			t->used[field_of(t, v)] = 1;
			if (v >= nfields)
				t->uses_prev = 1;
		}
	}
	t->fac_off[t->p] = q;

	/* Display texts in one buffer. */
	for (j = 0, len = 0; j < t->p; j++)
		len += term_text_len(t->exps + (size_t)j * nv, nfields,
		    fields) + 1;
	if ((t->textbuf = malloc(len)) == NULL)
		goto fail;
	for (j = 0, i = 0; j < t->p; j++) {
		t->text[j] = t->textbuf + i;
		k = (int)term_text_len(t->exps + (size_t)j * nv, nfields,
		    fields) + 1;
		msg_init(&tm, t->textbuf + i, (size_t)k);
		emit_term(&tm, t->exps + (size_t)j * nv, nfields, fields);
		i += (size_t)k;
	}

	/* Closure rule, then room for M's entries (at most p per row). */
	for (f = 0; f < nfields; f++) {
		t->centrable[f] = (unsigned char)closed_in(t, f);
		t->scale[f] = 1.0;
	}
	for (j = 0, t->nnz_cap = 0; j < t->p; j++) {
		for (q = t->fac_off[j], prod = 1; q < t->fac_off[j + 1]; q++)
			if (t->centrable[field_of(t, t->fac_var[q])])
				prod *= t->fac_exp[q] + 1;
		t->nnz_cap += prod;
	}
	if ((t->m_row = calloc((size_t)t->nnz_cap, sizeof(int))) == NULL ||
	    (t->m_col = calloc((size_t)t->nnz_cap, sizeof(int))) == NULL ||
	    (t->m_val = calloc((size_t)t->nnz_cap, sizeof(double))) == NULL ||
	    (t->col_idx = calloc((size_t)t->nnz_cap, sizeof(int))) == NULL)
		goto fail;
	rc = compute_map(t);
	assert(rc == 0);	/* identity scaling is always finite */
	*out = t;
	return 0;

fail:
	free(rows);
	terms_free(t);
	if (rc == E_NOMEM) {
		msg_init(&ps.m, errbuf, errlen);
		msg_s(&ps.m, "out of memory");
	}
	return rc;
}

/* terms_free: release t and everything it owns. NULL is a no-op. */
void
terms_free(struct terms *t)
{
	if (t == NULL)
		return;
	free(t->exps);
	free(t->fac_off);
	free(t->fac_var);
	free(t->fac_exp);
	free(t->text);
	free(t->textbuf);
	free(t->used);
	free(t->centrable);
	free(t->centre);
	free(t->scale);
	free(t->m_row);
	free(t->m_col);
	free(t->m_val);
	free(t->col_off);
	free(t->col_idx);
	free(t->rowbuf);
	free(t->kbuf);
	free(t->work);
	free(t);
}

/* terms_p: number of coefficients p (intercept included), 1..RLS_MAX_P. */
int
terms_p(const struct terms *t)
{
	return t->p;
}

/*
 * terms_text: display text of coefficient j: "intercept" for the constant,
 * else the canonical term text. Owned by t, valid until terms_free. NULL
 * when j is out of range.
 */
const char *
terms_text(const struct terms *t, int j)
{
	if (j < 0 || j >= t->p)
		return NULL;
	return t->text[j];
}

/* terms_nfields: the number of declared fields. */
int
terms_nfields(const struct terms *t)
{
	return t->nfields;
}

/* terms_has_intercept: 1 when coefficient 0 is the constant 1, else 0. */
int
terms_has_intercept(const struct terms *t)
{
	return t->intercept;
}

/* terms_uses_prev: 1 when some term contains prev(), else 0. */
int
terms_uses_prev(const struct terms *t)
{
	return t->uses_prev;
}

/* terms_field_used: 1 when field f appears in some term; 0 otherwise or
 * when f is out of range. */
int
terms_field_used(const struct terms *t, int f)
{
	if (f < 0 || f >= t->nfields)
		return 0;
	return t->used[f];
}

/*
 * terms_field_centrable: 1 when field f may be centred (c_f != 0) without
 * changing the model: it is used, the intercept is present, and the term
 * set is closed under lowering f's power (plain and prev) in every term.
 * 0 otherwise (f is then only scaled) or when f is out of range.
 */
int
terms_field_centrable(const struct terms *t, int f)
{
	if (f < 0 || f >= t->nfields)
		return 0;
	return t->centrable[f];
}

/*
 * terms_set_scaling: fix the centre c_f and scale s_f of every field
 * (arrays of terms_nfields(t)); regressors are then formed from
 * u_f = (x_f - c_f) / s_f. Once only: the constants are model state.
 * Returns 0; E_STATE if already set; E_ARG if a value is not finite, a
 * scale is not > 0, or centre[f] != 0 for a field that is not centrable;
 * E_NUMERIC if the map M would overflow. On failure t is unchanged.
 */
int
terms_set_scaling(struct terms *t, const double *centre, const double *scale)
{
	int f, rc;

	if (t->scaling_set)
		return E_STATE;
	for (f = 0; f < t->nfields; f++) {
		if (!isfinite(centre[f]) || !isfinite(scale[f]) ||
		    !(scale[f] > 0.0))
			return E_ARG;
		if (centre[f] != 0.0 && !t->centrable[f])
			return E_ARG;
	}
	for (f = 0; f < t->nfields; f++) {
		t->centre[f] = centre[f];
		t->scale[f] = scale[f];
	}
	if ((rc = compute_map(t)) != 0) {
		for (f = 0; f < t->nfields; f++) {
			t->centre[f] = 0.0;
			t->scale[f] = 1.0;
		}
		rc = compute_map(t);
		assert(rc == 0);
		return E_NUMERIC;
	}
	t->scaling_set = 1;
	return 0;
}

/* The smallest power of two >= m (m > 0, finite): an exact divisor. */
static double
pow2_ceil(double m)
{
	int e;
	double f = frexp(m, &e);

	return f == 0.5 ? m : ldexp(1.0, e);
}

/*
 * terms_scaling_auto: the default rule, from the first n >= 1 records a
 * model sees (X row-major, n rows of terms_nfields(t) raw values). Rows
 * with a non-finite value in a used field are ignored (the model will
 * reject them). For a used field with range [lo, hi] over the other rows:
 *   centrable:      c = (lo + hi) / 2,  s = 2^k >= (hi - lo) / 2;
 *   not centrable:  c = 0,              s = 2^k >= max(|lo|, |hi|);
 * when hi = lo (always for n = 1) a centrable field gets c = lo and
 * s = 2^k >= |lo|; s = 1 when that bound is 0. Unused fields get c = 0,
 * s = 1. Then |u| <= 1 on these rows, so none of them can overflow a
 * term, and powers of two keep the division exact. Returns 0; E_ARG if
 * n < 1; E_STATE if already set; E_NUMERIC if no row is usable or M would
 * overflow. On failure t is unchanged.
 */
int
terms_scaling_auto(struct terms *t, const double *X, int n)
{
	double *c = t->work, *s = t->work + t->nfields, lo, hi, v, m;
	const double *row;
	size_t nf = (size_t)t->nfields;
	int f, i, nuse, ok;

	if (n < 1)
		return E_ARG;
	if (t->scaling_set)
		return E_STATE;
	for (f = 0; f < t->nfields; f++) {
		c[f] = 0.0;
		s[f] = 1.0;
	}
	for (i = 0, nuse = 0; i < n; i++) {
		row = X + (size_t)i * nf;
		for (f = 0, ok = 1; f < t->nfields && ok; f++)
			ok = !t->used[f] || isfinite(row[f]);
		if (!ok)
			continue;
		for (f = 0; f < t->nfields; f++) {
			if (!t->used[f])
				continue;
			/* Track the range in c (lo) and s (hi) for now. */
			v = row[f];
			if (nuse == 0 || v < c[f])
				c[f] = v;
			if (nuse == 0 || v > s[f])
				s[f] = v;
		}
		nuse++;
	}
	if (nuse == 0)
		return E_NUMERIC;
	for (f = 0; f < t->nfields; f++) {
		if (!t->used[f])
			continue;
		lo = c[f];
		hi = s[f];
		/* Halve before adding or subtracting: no overflow. */
		if (t->centrable[f]) {
			c[f] = hi > lo ? lo / 2 + hi / 2 : lo;
			m = hi > lo ? hi / 2 - lo / 2 : fabs(lo);
		} else {
			c[f] = 0.0;
			m = fabs(lo) > fabs(hi) ? fabs(lo) : fabs(hi);
		}
		s[f] = m > 0.0 ? pow2_ceil(m) : 1.0;
	}
	return terms_set_scaling(t, c, s);
}

/* terms_scaling_is_set: 1 once terms_set_scaling or terms_scaling_auto
 * succeeded, else 0. */
int
terms_scaling_is_set(const struct terms *t)
{
	return t->scaling_set;
}

/*
 * terms_get_scaling: copy the constants in force into centre[] and
 * scale[] (terms_nfields(t) each); identity (0, 1) until they are set.
 */
void
terms_get_scaling(const struct terms *t, double *centre, double *scale)
{
	int f;

	for (f = 0; f < t->nfields; f++) {
		centre[f] = t->centre[f];
		scale[f] = t->scale[f];
	}
}

/*
 * Product of term j's factors of one kind: plain fields (prev = 0) read
 * from x, or prev() fields (prev = 1) read from x as the previous record.
 * Powers by repeated multiplication: at most 8 roundings for a power 9.
 */
static double
part(const struct terms *t, int j, const double *x, int prev, int scaled)
{
	double r = 1.0, u, pw;
	int q, v, f, k;

	for (q = t->fac_off[j]; q < t->fac_off[j + 1]; q++) {
		v = t->fac_var[q];
		if ((v >= t->nfields) != prev)
			continue;
		f = field_of(t, v);
		u = scaled ? (x[f] - t->centre[f]) / t->scale[f] : x[f];
		pw = u;
		for (k = 1; k < t->fac_exp[q]; k++)
			pw *= u;
		r *= pw;
	}
	return r;
}

static int
eval(const struct terms *t, const double *x, const double *xprev,
    double *phi, int scaled)
{
	int j;

	if (t->uses_prev && xprev == NULL)
		return E_STATE;
	for (j = 0; j < t->p; j++) {
		phi[j] = part(t, j, x, 0, scaled);
		if (t->uses_prev)
			phi[j] *= part(t, j, xprev, 1, scaled);
		if (!isfinite(phi[j]))
			return E_NUMERIC;
	}
	return 0;
}

/*
 * terms_eval: the regressor vector phi (p values, scaled form) for record
 * x with previous record xprev (both raw values indexed by field; xprev
 * may be NULL when no prev() term exists). Fields not used by any term are
 * not read. Used for the fit and for predictions. Returns 0; E_STATE when
 * a prev() term exists and xprev is NULL; E_NUMERIC when a term is not
 * finite (phi then unspecified). Does not allocate; t is not changed.
 */
int
terms_eval(const struct terms *t, const double *x, const double *xprev,
    double *phi)
{
	return eval(t, x, xprev, phi, 1);
}

/*
 * terms_ingest: the acceptance rule for a record offered to a model. Like
 * terms_eval, and in addition, when prev() terms exist, x must be usable
 * as the next record's previous one: the prev() part of every term, read
 * from x, must be finite (otherwise one bad record would block the model
 * for good). Returns
 *   0          phi is set: fit it; x becomes the previous record;
 *   E_STATE    xprev is NULL and prev() terms exist: x primes the model
 *              (not fitted, not an error), x becomes the previous record;
 *              only returned when both parts of every term read from x
 *              are finite;
 *   E_NUMERIC  reject x; keep the previous record; phi unspecified.
 * Does not allocate; t is not changed.
 */
int
terms_ingest(const struct terms *t, const double *x, const double *xprev,
    double *phi)
{
	int j, rc;

	if (!t->uses_prev)
		return eval(t, x, xprev, phi, 1);
	if (xprev == NULL) {
		for (j = 0; j < t->p; j++)
			if (!isfinite(part(t, j, x, 0, 1)) ||
			    !isfinite(part(t, j, x, 1, 1)))
				return E_NUMERIC;
		return E_STATE;
	}
	if ((rc = eval(t, x, xprev, phi, 1)) != 0)
		return rc;
	for (j = 0; j < t->p; j++)
		if (!isfinite(part(t, j, x, 1, 1)))
			return E_NUMERIC;
	return 0;
}

/*
 * terms_eval_original: as terms_eval, but phi holds the terms formed from
 * the raw values (the user's original terms, no centring or scaling).
 * Meant for checks and offline comparison; same return codes.
 */
int
terms_eval_original(const struct terms *t, const double *x,
    const double *xprev, double *phi)
{
	return eval(t, x, xprev, phi, 0);
}

/*
 * terms_map: write the p x p matrix M (row-major, M[j*p+i]) with
 * phi_scaled = M phi_original for the constants in force. M is the
 * identity until constants are set, and when nothing is centred it is
 * diagonal with entries prod s_f^-e.
 */
void
terms_map(const struct terms *t, double *M)
{
	int n;

	memset(M, 0, (size_t)t->p * (size_t)t->p * sizeof(double));
	for (n = 0; n < t->nnz; n++)
		M[(size_t)t->m_row[n] * (size_t)t->p + (size_t)t->m_col[n]] =
		    t->m_val[n];
}

/*
 * terms_to_original: coefficients of the user's original terms from the
 * scaled fit. Since y = theta_s' phi_s = theta_s' M phi_o,
 * theta_o = M' theta_s and, for a covariance (e.g. sigma^2 P),
 * cov_o = M' cov_s M. theta_s, theta_o have p entries; cov_s, cov_o are
 * p x p, symmetric; pass NULL for both to skip the covariance. Outputs must
 * not alias inputs. cov_o is returned exactly symmetric. Uses scratch owned
 * by t (so calls on one t must not run concurrently) and does not allocate.
 * Cost O(p * nnz(M)).
 */
void
terms_to_original(const struct terms *t, const double *theta_s,
    const double *cov_s, double *theta_o, double *cov_o)
{
	double *w = t->work, a;
	size_t p = (size_t)t->p;
	int i, k, n, e, j, l;

	for (i = 0; i < t->p; i++)
		theta_o[i] = 0.0;
	for (n = 0; n < t->nnz; n++)
		theta_o[t->m_col[n]] += t->m_val[n] * theta_s[t->m_row[n]];
	if (cov_s == NULL || cov_o == NULL)
		return;
	for (k = 0; k < t->p; k++) {
		/* w = cov_s M[:,k], from the entries of column k. */
		for (j = 0; j < t->p; j++)
			w[j] = 0.0;
		for (e = t->col_off[k]; e < t->col_off[k + 1]; e++) {
			n = t->col_idx[e];
			l = t->m_row[n];
			for (j = 0; j < t->p; j++)
				w[j] += cov_s[(size_t)j * p + (size_t)l] *
				    t->m_val[n];
		}
		/* cov_o[:,k] = M' w */
		for (i = 0; i < t->p; i++)
			cov_o[(size_t)i * p + (size_t)k] = 0.0;
		for (n = 0; n < t->nnz; n++)
			cov_o[(size_t)t->m_col[n] * p + (size_t)k] +=
			    t->m_val[n] * w[t->m_row[n]];
	}
	for (i = 0; i < t->p; i++)
		for (k = i + 1; k < t->p; k++) {
			a = 0.5 * (cov_o[(size_t)i * p + (size_t)k] +
			    cov_o[(size_t)k * p + (size_t)i]);
			cov_o[(size_t)i * p + (size_t)k] = a;
			cov_o[(size_t)k * p + (size_t)i] = a;
		}
}
