/* SPDX-License-Identifier: ISC */
/*
 * terms: parse a model's term list, evaluate regressors from centred and
 * scaled fields, and map coefficients and covariances back to the user's
 * original terms. Pure: no I/O (not even stdio formatting), no globals, no
 * logging, no libuv. Allocation happens in terms_parse and terms_clone only;
 * evaluation and the back-mapping use storage owned by the term set's
 * compiled form, which clones share.
 */
#include <assert.h>
#include <math.h>
#include <stdint.h>
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
 *
 * A term set is two objects. The compiled form (struct terms_form) depends
 * only on the fields, the target, the intercept and the term list; it is
 * immutable once compiled and shared, with a reference count, by every
 * term set cloned from it (terms_clone), so that many models of one
 * configuration section hold one copy. The term set itself (struct terms)
 * holds only what differs per model: the scaling constants.
 */
struct terms_form {
	unsigned	 refs;		/* term sets using this form */
	int		 nfields;
	int		 nvars;		/* 2 nfields */
	int		 target;	/* field index, or -1 */
	int		 intercept;	/* 1: coefficient 0 is 1 */
	int		 p;		/* coefficients */
	int		 uses_prev;
	/* 1 when every term is the constant or one plain field to the
	 * power 1 (no prev()): then lin[j] is term j's field, or -1 for
	 * the constant, and eval takes a loop without factor lists. */
	int		 linear;
	int		*lin;		/* p */
	unsigned char	*exps;		/* p x nvars exponent rows */
	int		*fac_off;	/* p + 1: term j has factors */
	int		*fac_var;	/*   fac_off[j] .. fac_off[j+1]-1 */
	int		*fac_exp;
	char		**text;		/* p display texts */
	char		*textbuf;
	char		*list;		/* "t1, t2, ..." without intercept */
	size_t		 listlen;
	char		(*names)[FIELD_NAME_MAX + 1];	/* nfields */
	unsigned char	*used;		/* nfields: in some term */
	unsigned char	*centrable;	/* nfields: closure holds */
	/*
	 * M (phi_s = M phi_o) as the list of its possible nonzero entries,
	 * row-major: entry n is row m_row[n], column m_col[n], and its value
	 * is the product over the factors q of row m_row[n] of the binomial
	 * expansion's term for power m_k[m_koff[n] + q] (see map_values).
	 * The values depend on a term set's constants and are computed when
	 * needed; entries that come out 0 are skipped.
	 */
	int		 nnz;
	int		*m_row;
	int		*m_col;
	int		*m_koff;
	int		*m_k;
	int		*col_off;	/* p + 1; column i's entries: */
	int		*col_idx;	/* col_idx[col_off[i]..] */
	/* Scratch, owned here so that the hot paths do not allocate (not
	 * for concurrent use: the daemon uses term sets from one thread). */
	unsigned char	*rowbuf;	/* nvars */
	int		*kbuf;		/* max(nvars, p) */
	double		*work;		/* max(p, 2 nfields) */
	double		*m_val;		/* nnz */
	uint64_t	 val_stamp;	/* the set m_val was computed for */
	uint64_t	 stamps;	/* the last stamp handed out */
};

struct terms {
	struct terms_form *fm;		/* shared, reference counted */
	/* Unique among the sets of fm, renewed when the constants are
	 * fixed: m_val holds this set's values when fm->val_stamp equals
	 * it (a stamp is never handed out twice, so a freed set's cannot
	 * match a new one). */
	uint64_t	 stamp;
	int		 scaling_set;
	/* nfields each, in the same allocation as the struct; NULL when
	 * the set has no room for constants (identity for good). */
	double		*centre;	/* c_f */
	double		*scale;		/* s_f */
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
row_find(const struct terms_form *fm, const unsigned char *row)
{
	int i;

	for (i = 0; i < fm->p; i++)
		if (memcmp(fm->exps + (size_t)i * (size_t)fm->nvars, row,
		    (size_t)fm->nvars) == 0)
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
closed_in(struct terms_form *fm, int f)
{
	int j, k, l, v;

	if (!fm->intercept || !fm->used[f])
		return 0;
	for (j = 0; j < fm->p; j++)
		for (k = 0; k < 2; k++) {
			v = f + k * fm->nfields;
			for (l = 0; l < fm->exps[(size_t)j * (size_t)fm->nvars +
			    (size_t)v]; l++) {
				memcpy(fm->rowbuf, fm->exps + (size_t)j *
				    (size_t)fm->nvars, (size_t)fm->nvars);
				fm->rowbuf[v] = (unsigned char)l;
				if (row_find(fm, fm->rowbuf) < 0)
					return 0;
			}
		}
	return 1;
}

static int
field_of(const struct terms_form *fm, int v)
{
	return v < fm->nfields ? v : v - fm->nfields;
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
 * The possible nonzero entries of M, from the structure alone. Row j of M
 * expands
 * phi_s[j] = prod_v ((x_v - c_f)/s_f)^e_v
 *          = prod_v sum_{k=0..e_v} C(e_v,k) (-c_f/s_f)^(e_v-k) s_f^-k x_v^k,
 * (binomial theorem); each multi-index k is a term of the set by the
 * closure rule. Uncentred fields contribute only k = e_v. The multi-indices
 * of a row are enumerated as an odometer over its centred factors, lowest
 * factor first. fm->nnz must hold the count; fills m_row, m_col, m_koff,
 * m_k and the column index.
 */
static void
build_map(struct terms_form *fm)
{
	int j, q, nq, i, n, kq, *fv, *fe;

	for (j = 0, n = 0, kq = 0; j < fm->p; j++) {
		fv = fm->fac_var + fm->fac_off[j];
		fe = fm->fac_exp + fm->fac_off[j];
		nq = fm->fac_off[j + 1] - fm->fac_off[j];
		for (q = 0; q < nq; q++)
			fm->kbuf[q] = fm->centrable[field_of(fm, fv[q])] ?
			    0 : fe[q];
		for (;;) {
			memset(fm->rowbuf, 0, (size_t)fm->nvars);
			for (q = 0; q < nq; q++)
				fm->rowbuf[fv[q]] = (unsigned char)fm->kbuf[q];
			i = row_find(fm, fm->rowbuf);
			assert(i >= 0 && n < fm->nnz);
			fm->m_row[n] = j;
			fm->m_col[n] = i;
			fm->m_koff[n] = kq;
			for (q = 0; q < nq; q++)
				fm->m_k[kq++] = fm->kbuf[q];
			n++;
			for (q = 0; q < nq; q++) {
				if (fm->centrable[field_of(fm, fv[q])] &&
				    fm->kbuf[q] < fe[q]) {
					fm->kbuf[q]++;
					break;
				}
				fm->kbuf[q] = fm->centrable[field_of(fm,
				    fv[q])] ? 0 : fe[q];
			}
			if (q == nq)
				break;
		}
	}
	assert(n == fm->nnz);
	/* Column index (counting sort) for the covariance transform. */
	memset(fm->col_off, 0, (size_t)(fm->p + 1) * sizeof(int));
	for (i = 0; i < fm->nnz; i++)
		fm->col_off[fm->m_col[i] + 1]++;
	for (i = 0; i < fm->p; i++)
		fm->col_off[i + 1] += fm->col_off[i];
	for (i = 0; i < fm->p; i++)
		fm->kbuf[i] = fm->col_off[i];	/* next free slot */
	for (i = 0; i < fm->nnz; i++)
		fm->col_idx[fm->kbuf[fm->m_col[i]]++] = i;
}

/*
 * The values of M's entries into val[0..nnz) for the constants centre[]
 * and scale[] (NULL for both: identity, c = 0 and s = 1). Returns E_NUMERIC
 * if an entry is not finite.
 */
static int
map_values(const struct terms_form *fm, const double *centre,
    const double *scale, double *val)
{
	const int *fv, *fe, *kk;
	double v, c, s;
	int n, q, nq, j, f, e, k;

	for (n = 0; n < fm->nnz; n++) {
		j = fm->m_row[n];
		fv = fm->fac_var + fm->fac_off[j];
		fe = fm->fac_exp + fm->fac_off[j];
		nq = fm->fac_off[j + 1] - fm->fac_off[j];
		kk = fm->m_k + fm->m_koff[n];
		v = 1.0;
		for (q = 0; q < nq; q++) {
			e = fe[q];
			k = kk[q];
			f = field_of(fm, fv[q]);
			c = centre != NULL ? centre[f] : 0.0;
			s = scale != NULL ? scale[f] : 1.0;
			v *= binom(e, k) * ipow(-c / s, e - k) / ipow(s, k);
		}
		if (!isfinite(v))
			return E_NUMERIC;
		val[n] = v;
	}
	return 0;
}

static void
form_free(struct terms_form *fm)
{
	if (fm == NULL)
		return;
	free(fm->exps);
	free(fm->lin);
	free(fm->fac_off);
	free(fm->fac_var);
	free(fm->fac_exp);
	free(fm->text);
	free(fm->textbuf);
	free(fm->list);
	free(fm->names);
	free(fm->used);
	free(fm->centrable);
	free(fm->m_row);
	free(fm->m_col);
	free(fm->m_koff);
	free(fm->m_k);
	free(fm->col_off);
	free(fm->col_idx);
	free(fm->rowbuf);
	free(fm->kbuf);
	free(fm->work);
	free(fm->m_val);
	free(fm);
}

/* A term set over fm (one more reference), identity constants not yet
 * fixed; room: allocate space for constants. NULL when out of memory. */
static struct terms *
set_new(struct terms_form *fm, int room)
{
	struct terms *t;
	size_t nf = room ? (size_t)fm->nfields : 0;

	if ((t = calloc(1, sizeof(*t) + 2 * nf * sizeof(double))) == NULL)
		return NULL;
	t->fm = fm;
	fm->refs++;
	t->stamp = ++fm->stamps;
	if (room) {
		t->centre = (double *)(t + 1);
		t->scale = t->centre + nf;
		for (nf = 0; nf < (size_t)fm->nfields; nf++)
			t->scale[nf] = 1.0;
	}
	return t;
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
	struct terms_form *fm = NULL;
	struct msg tm;
	unsigned char *rows = NULL, *row;
	size_t ncomma, maxterms, i, len, nv, nk;
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
	if ((fm = calloc(1, sizeof(*fm))) == NULL)
		goto fail;
	fm->nfields = nfields;
	fm->nvars = (int)nv;
	fm->target = target;
	fm->intercept = intercept;
	fm->p = intercept + nterms;
	fm->exps = rows;
	rows = NULL;

	/* Factor lists, in canonical (increasing variable) order. */
	if ((fm->fac_off = calloc((size_t)fm->p + 1, sizeof(int))) == NULL)
		goto fail;
	for (j = 0, q = 0; j < fm->p; j++)
		for (v = 0; v < fm->nvars; v++)
			q += fm->exps[(size_t)j * nv + (size_t)v] != 0;
	if ((fm->fac_var = calloc((size_t)q + 1, sizeof(int))) == NULL ||
	    (fm->fac_exp = calloc((size_t)q + 1, sizeof(int))) == NULL ||
	    (fm->names = calloc((size_t)nfields,
	    sizeof(*fm->names))) == NULL ||
	    (fm->used = calloc((size_t)nfields, 1)) == NULL ||
	    (fm->centrable = calloc((size_t)nfields, 1)) == NULL ||
	    (fm->rowbuf = calloc(nv, 1)) == NULL ||
	    (fm->kbuf = calloc(nv > (size_t)fm->p ? nv : (size_t)fm->p,
	    sizeof(int))) == NULL ||
	    (fm->work = calloc(nv > (size_t)fm->p ? nv : (size_t)fm->p,
	    sizeof(double))) == NULL ||
	    (fm->text = calloc((size_t)fm->p, sizeof(char *))) == NULL ||
	    (fm->col_off = calloc((size_t)fm->p + 1, sizeof(int))) == NULL ||
	    (fm->lin = calloc((size_t)fm->p, sizeof(int))) == NULL)
		goto fail;
	for (f = 0; f < nfields; f++)
		memcpy(fm->names[f], fields[f], strlen(fields[f]) + 1);
	for (j = 0, q = 0; j < fm->p; j++) {
		fm->fac_off[j] = q;
		for (v = 0; v < fm->nvars; v++) {
			k = fm->exps[(size_t)j * nv + (size_t)v];
			if (k == 0)
				continue;
			fm->fac_var[q] = v;
			fm->fac_exp[q] = k;
			q++;
			fm->used[field_of(fm, v)] = 1;
			if (v >= nfields)
				fm->uses_prev = 1;
		}
	}
	fm->fac_off[fm->p] = q;
	fm->linear = 1;
	for (j = 0; j < fm->p; j++) {
		q = fm->fac_off[j];
		if (fm->fac_off[j + 1] == q)
			fm->lin[j] = -1;
		else if (fm->fac_off[j + 1] == q + 1 && fm->fac_exp[q] == 1 &&
		    fm->fac_var[q] < nfields)
			fm->lin[j] = fm->fac_var[q];
		else
			fm->linear = 0;
	}

	/* Display texts in one buffer, and the list without the intercept
	 * ("t1, t2, ..."), which terms_parse reads back as the same set. */
	for (j = 0, len = 0; j < fm->p; j++)
		len += term_text_len(fm->exps + (size_t)j * nv, nfields,
		    fields) + 1;
	if ((fm->textbuf = malloc(len)) == NULL ||
	    (fm->list = malloc(len + 2 * (size_t)fm->p)) == NULL)
		goto fail;
	for (j = 0, i = 0; j < fm->p; j++) {
		fm->text[j] = fm->textbuf + i;
		k = (int)term_text_len(fm->exps + (size_t)j * nv, nfields,
		    fields) + 1;
		msg_init(&tm, fm->textbuf + i, (size_t)k);
		emit_term(&tm, fm->exps + (size_t)j * nv, nfields, fields);
		i += (size_t)k;
	}
	msg_init(&tm, fm->list, len + 2 * (size_t)fm->p);
	for (j = intercept; j < fm->p; j++) {
		if (j > intercept)
			msg_s(&tm, ", ");
		msg_s(&tm, fm->text[j]);
	}
	fm->listlen = strlen(fm->list);

	/* Closure rule, then M's possible entries (at most p per row). */
	for (f = 0; f < nfields; f++)
		fm->centrable[f] = (unsigned char)closed_in(fm, f);
	for (j = 0, fm->nnz = 0, nk = 0; j < fm->p; j++) {
		for (q = fm->fac_off[j], prod = 1; q < fm->fac_off[j + 1]; q++)
			if (fm->centrable[field_of(fm, fm->fac_var[q])])
				prod *= fm->fac_exp[q] + 1;
		fm->nnz += prod;
		nk += (size_t)prod * (size_t)(fm->fac_off[j + 1] -
		    fm->fac_off[j]);
	}
	if ((fm->m_row = calloc((size_t)fm->nnz, sizeof(int))) == NULL ||
	    (fm->m_col = calloc((size_t)fm->nnz, sizeof(int))) == NULL ||
	    (fm->m_koff = calloc((size_t)fm->nnz, sizeof(int))) == NULL ||
	    (fm->m_k = calloc(nk + 1, sizeof(int))) == NULL ||
	    (fm->m_val = calloc((size_t)fm->nnz, sizeof(double))) == NULL ||
	    (fm->col_idx = calloc((size_t)fm->nnz, sizeof(int))) == NULL)
		goto fail;
	build_map(fm);
	if ((*out = set_new(fm, 1)) == NULL)
		goto fail;
	return 0;

fail:
	free(rows);
	form_free(fm);
	if (rc == E_NOMEM) {
		msg_init(&ps.m, errbuf, errlen);
		msg_s(&ps.m, "out of memory");
	}
	return rc;
}

/*
 * terms_clone: a new term set sharing t's compiled form (not copied: the
 * form is reference counted and freed with the last set using it) and
 * with a copy of t's scaling constants when they are set. room = 0 gives a
 * set without storage for constants when t has none set: its constants
 * are the identity for good (terms_set_scaling and terms_scaling_auto
 * return E_STATE); room = 1 lets them be fixed later. The caller owns the
 * set (terms_free). NULL when out of memory. Costs one allocation.
 */
struct terms *
terms_clone(const struct terms *t, int room)
{
	struct terms *n;
	int f;

	if ((n = set_new(t->fm, room || t->scaling_set)) == NULL)
		return NULL;
	if (t->scaling_set) {
		for (f = 0; f < t->fm->nfields; f++) {
			n->centre[f] = t->centre[f];
			n->scale[f] = t->scale[f];
		}
		n->scaling_set = 1;
	}
	return n;
}

/* terms_free: release t, and its compiled form when no other term set
 * uses it. NULL is a no-op. */
void
terms_free(struct terms *t)
{
	if (t == NULL)
		return;
	assert(t->fm->refs > 0);
	if (--t->fm->refs == 0)
		form_free(t->fm);
	free(t);
}

/*
 * terms_same: 1 when a and b have the same compiled form: the same field
 * names in the same order, target, intercept and canonical terms (a set
 * and its clones always do); 0 otherwise. Scaling constants are not
 * compared.
 */
int
terms_same(const struct terms *a, const struct terms *b)
{
	const struct terms_form *x = a->fm, *y = b->fm;
	int f;

	if (x == y)
		return 1;
	if (x->nfields != y->nfields || x->target != y->target ||
	    x->intercept != y->intercept || x->p != y->p ||
	    x->listlen != y->listlen || memcmp(x->list, y->list,
	    x->listlen) != 0)
		return 0;
	for (f = 0; f < x->nfields; f++)
		if (strcmp(x->names[f], y->names[f]) != 0)
			return 0;
	return 1;
}

/* terms_shares: 1 when a and b use one compiled form in memory. */
int
terms_shares(const struct terms *a, const struct terms *b)
{
	return a->fm == b->fm;
}

/* terms_p: number of coefficients p (intercept included), 1..RLS_MAX_P. */
int
terms_p(const struct terms *t)
{
	return t->fm->p;
}

/*
 * terms_text: display text of coefficient j: "intercept" for the constant,
 * else the canonical term text. Owned by t's compiled form, valid until
 * the last set using it is freed. NULL when j is out of range.
 */
const char *
terms_text(const struct terms *t, int j)
{
	if (j < 0 || j >= t->fm->p)
		return NULL;
	return t->fm->text[j];
}

/*
 * terms_list: the canonical term list without the intercept, "t1, t2, ..."
 * (terms_parse gives the same set back from it), with its length in *len
 * (may be NULL). Owned as terms_text.
 */
const char *
terms_list(const struct terms *t, size_t *len)
{
	if (len != NULL)
		*len = t->fm->listlen;
	return t->fm->list;
}

/*
 * terms_fields: the declared field names, nfields of them in declaration
 * order, each NUL-terminated in FIELD_NAME_MAX + 1 bytes. Owned as
 * terms_text.
 */
const char (*terms_fields(const struct terms *t))[FIELD_NAME_MAX + 1]
{
	return (const char (*)[FIELD_NAME_MAX + 1])t->fm->names;
}

/* terms_nfields: the number of declared fields. */
int
terms_nfields(const struct terms *t)
{
	return t->fm->nfields;
}

/* terms_has_intercept: 1 when coefficient 0 is the constant 1, else 0. */
int
terms_has_intercept(const struct terms *t)
{
	return t->fm->intercept;
}

/* terms_uses_prev: 1 when some term contains prev(), else 0. */
int
terms_uses_prev(const struct terms *t)
{
	return t->fm->uses_prev;
}

/* terms_field_used: 1 when field f appears in some term; 0 otherwise or
 * when f is out of range. */
int
terms_field_used(const struct terms *t, int f)
{
	if (f < 0 || f >= t->fm->nfields)
		return 0;
	return t->fm->used[f];
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
	if (f < 0 || f >= t->fm->nfields)
		return 0;
	return t->fm->centrable[f];
}

/*
 * terms_set_scaling: fix the centre c_f and scale s_f of every field
 * (arrays of terms_nfields(t)); regressors are then formed from
 * u_f = (x_f - c_f) / s_f. Once only: the constants are model state.
 * Returns 0; E_STATE if already set or t has no room for constants
 * (terms_clone with room = 0); E_ARG if a value is not finite, a scale is
 * not > 0, or centre[f] != 0 for a field that is not centrable; E_NUMERIC
 * if the map M would overflow. On failure t is unchanged.
 */
int
terms_set_scaling(struct terms *t, const double *centre, const double *scale)
{
	struct terms_form *fm = t->fm;
	int f;

	if (t->scaling_set || t->centre == NULL)
		return E_STATE;
	for (f = 0; f < fm->nfields; f++) {
		if (!isfinite(centre[f]) || !isfinite(scale[f]) ||
		    !(scale[f] > 0.0))
			return E_ARG;
		if (centre[f] != 0.0 && !fm->centrable[f])
			return E_ARG;
	}
	fm->val_stamp = 0;	/* the scratch is overwritten (no set has 0) */
	if (map_values(fm, centre, scale, fm->m_val) != 0)
		return E_NUMERIC;
	for (f = 0; f < fm->nfields; f++) {
		t->centre[f] = centre[f];
		t->scale[f] = scale[f];
	}
	t->scaling_set = 1;
	t->stamp = ++fm->stamps;
	fm->val_stamp = t->stamp;	/* m_val holds them now */
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
 * n < 1; E_STATE if already set or there is no room for constants;
 * E_NUMERIC if no row is usable or M would overflow. On failure t is
 * unchanged.
 */
int
terms_scaling_auto(struct terms *t, const double *X, int n)
{
	struct terms_form *fm = t->fm;
	double *c = fm->work, *s = fm->work + fm->nfields, lo, hi, v, m;
	const double *row;
	size_t nf = (size_t)fm->nfields;
	int f, i, nuse, ok;

	if (n < 1)
		return E_ARG;
	if (t->scaling_set || t->centre == NULL)
		return E_STATE;
	for (f = 0; f < fm->nfields; f++) {
		c[f] = 0.0;
		s[f] = 1.0;
	}
	for (i = 0, nuse = 0; i < n; i++) {
		row = X + (size_t)i * nf;
		for (f = 0, ok = 1; f < fm->nfields && ok; f++)
			ok = !fm->used[f] || isfinite(row[f]);
		if (!ok)
			continue;
		for (f = 0; f < fm->nfields; f++) {
			if (!fm->used[f])
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
	for (f = 0; f < fm->nfields; f++) {
		if (!fm->used[f])
			continue;
		lo = c[f];
		hi = s[f];
		/* Halve before adding or subtracting: no overflow. */
		if (fm->centrable[f]) {
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

	for (f = 0; f < t->fm->nfields; f++) {
		centre[f] = t->centre != NULL ? t->centre[f] : 0.0;
		scale[f] = t->scale != NULL ? t->scale[f] : 1.0;
	}
}

/*
 * Product of term j's factors of one kind: plain fields (prev = 0) read
 * from x, or prev() fields (prev = 1) read from x as the previous record.
 * Powers by repeated multiplication: at most 8 roundings for a power 9.
 * With c = NULL the raw values are used: the same numbers as the identity
 * constants give, since (x - 0) / 1 is x exactly.
 */
static double
part(const struct terms_form *fm, const double *c, const double *s, int j,
    const double *x, int prev)
{
	double r = 1.0, u, pw;
	int q, v, f, k;

	for (q = fm->fac_off[j]; q < fm->fac_off[j + 1]; q++) {
		v = fm->fac_var[q];
		if ((v >= fm->nfields) != prev)
			continue;
		f = field_of(fm, v);
		u = c != NULL ? (x[f] - c[f]) / s[f] : x[f];
		pw = u;
		for (k = 1; k < fm->fac_exp[q]; k++)
			pw *= u;
		r *= pw;
	}
	return r;
}

/*
 * eval for a linear form (fm->linear): phi_j = u_f for term j's field f,
 * or 1 for the constant. The numbers are part()'s: its product 1.0 * u
 * is u exactly, and u is the same (x - c) / s, or x without constants.
 * The sum of u * 0 is 0 while every u is finite and NaN once one is
 * infinite or NaN: one test at the end instead of one per term.
 */
static int
eval_linear(const struct terms_form *fm, const double *c, const double *s,
    const double *x, double *phi)
{
	const int *lin = fm->lin;
	double u, z = 0.0;
	int j, f;

	for (j = 0; j < fm->p; j++) {
		f = lin[j];
		if (f < 0)
			u = 1.0;
		else if (c == NULL)
			u = x[f];
		else
			u = (x[f] - c[f]) / s[f];
		phi[j] = u;
		z += u * 0.0;
	}
	return z == 0.0 ? 0 : E_NUMERIC;
}

static int
eval(const struct terms *t, const double *x, const double *xprev,
    double *phi, int scaled)
{
	const struct terms_form *fm = t->fm;
	const double *c = scaled && t->scaling_set ? t->centre : NULL;
	const double *s = t->scale;
	int j;

	if (fm->linear)
		return eval_linear(fm, c, s, x, phi);
	if (fm->uses_prev && xprev == NULL)
		return E_STATE;
	for (j = 0; j < fm->p; j++) {
		phi[j] = part(fm, c, s, j, x, 0);
		if (fm->uses_prev)
			phi[j] *= part(fm, c, s, j, xprev, 1);
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
	const struct terms_form *fm = t->fm;
	const double *c = t->scaling_set ? t->centre : NULL, *s = t->scale;
	int j, rc;

	if (fm->linear)
		return eval_linear(fm, c, s, x, phi);
	if (!fm->uses_prev)
		return eval(t, x, xprev, phi, 1);
	if (xprev == NULL) {
		for (j = 0; j < fm->p; j++)
			if (!isfinite(part(fm, c, s, j, x, 0)) ||
			    !isfinite(part(fm, c, s, j, x, 1)))
				return E_NUMERIC;
		return E_STATE;
	}
	if ((rc = eval(t, x, xprev, phi, 1)) != 0)
		return rc;
	for (j = 0; j < fm->p; j++)
		if (!isfinite(part(fm, c, s, j, x, 1)))
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

/* M's entry values for t's constants, in the form's scratch; computed
 * again only when another set of the form used the scratch since (a
 * model's tolerance check converts two vectors per record). They were
 * checked finite when the constants were fixed. */
static const double *
cur_values(const struct terms *t)
{
	struct terms_form *fm = t->fm;
	int rc;

	if (fm->val_stamp != t->stamp) {
		rc = map_values(fm, t->centre, t->scale, fm->m_val);
		assert(rc == 0);
		(void)rc;
		fm->val_stamp = t->stamp;
	}
	return fm->m_val;
}

/*
 * terms_map: write the p x p matrix M (row-major, M[j*p+i]) with
 * phi_scaled = M phi_original for the constants in force. M is the
 * identity until constants are set, and when nothing is centred it is
 * diagonal with entries prod s_f^-e. Uses scratch of t's compiled form
 * (see terms_to_original).
 */
void
terms_map(const struct terms *t, double *M)
{
	const struct terms_form *fm = t->fm;
	const double *val = cur_values(t);
	int n;

	memset(M, 0, (size_t)fm->p * (size_t)fm->p * sizeof(double));
	for (n = 0; n < fm->nnz; n++)
		if (val[n] != 0.0)
			M[(size_t)fm->m_row[n] * (size_t)fm->p +
			    (size_t)fm->m_col[n]] = val[n];
}

/*
 * terms_to_original: coefficients of the user's original terms from the
 * scaled fit. Since y = theta_s' phi_s = theta_s' M phi_o,
 * theta_o = M' theta_s and, for a covariance (e.g. sigma^2 P),
 * cov_o = M' cov_s M. theta_s, theta_o have p entries; cov_s, cov_o are
 * p x p, symmetric; pass NULL for both to skip the covariance. Outputs must
 * not alias inputs. cov_o is returned exactly symmetric. Uses scratch owned
 * by t's compiled form, which its clones share (so calls on term sets of
 * one form must not run concurrently), and does not allocate. Cost
 * O(p * nnz(M)), plus O(nnz(M)) to form M's values.
 */
void
terms_to_original(const struct terms *t, const double *theta_s,
    const double *cov_s, double *theta_o, double *cov_o)
{
	const struct terms_form *fm = t->fm;
	const double *val = cur_values(t);
	double *w = fm->work, a;
	size_t p = (size_t)fm->p;
	int i, k, n, e, j, l;

	for (i = 0; i < fm->p; i++)
		theta_o[i] = 0.0;
	for (n = 0; n < fm->nnz; n++)
		if (val[n] != 0.0)
			theta_o[fm->m_col[n]] += val[n] * theta_s[fm->m_row[n]];
	if (cov_s == NULL || cov_o == NULL)
		return;
	for (k = 0; k < fm->p; k++) {
		/* w = cov_s M[:,k], from the entries of column k. */
		for (j = 0; j < fm->p; j++)
			w[j] = 0.0;
		for (e = fm->col_off[k]; e < fm->col_off[k + 1]; e++) {
			n = fm->col_idx[e];
			if (val[n] == 0.0)
				continue;
			l = fm->m_row[n];
			for (j = 0; j < fm->p; j++)
				w[j] += cov_s[(size_t)j * p + (size_t)l] *
				    val[n];
		}
		/* cov_o[:,k] = M' w */
		for (i = 0; i < fm->p; i++)
			cov_o[(size_t)i * p + (size_t)k] = 0.0;
		for (n = 0; n < fm->nnz; n++)
			if (val[n] != 0.0)
				cov_o[(size_t)fm->m_col[n] * p + (size_t)k] +=
				    val[n] * w[fm->m_row[n]];
	}
	for (i = 0; i < fm->p; i++)
		for (k = i + 1; k < fm->p; k++) {
			a = 0.5 * (cov_o[(size_t)i * p + (size_t)k] +
			    cov_o[(size_t)k * p + (size_t)i]);
			cov_o[(size_t)i * p + (size_t)k] = a;
			cov_o[(size_t)k * p + (size_t)i] = a;
		}
}
