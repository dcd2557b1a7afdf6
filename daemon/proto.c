/* SPDX-License-Identifier: ISC */
/*
 * proto: incremental reader and parser for the coefd line protocol v1
 * (grammar in daemon/PROTOCOL.md) plus the JSON error reply. Pure: no I/O,
 * no globals, no clock, no logging; the only allocation is the reader's
 * line buffer in proto_reader_new. It checks syntax only: whether a model
 * exists, or which field is the target, is for the registry to decide.
 */
#include <assert.h>
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#ifdef __SSE2__
#include <emmintrin.h>	/* baseline on x86-64 */
#endif

#include "err.h"
#include "json.h"
#include "proto.h"

/*
 * The reader. buf holds the start of a line that has not been completed
 * yet (len bytes); lines that arrive whole are parsed in place.
 */
struct proto_reader {
	char		*buf;		/* cap bytes, allocated once */
	size_t		 cap;		/* maxline: longest line, LF excluded */
	size_t		 len;		/* bytes of the pending partial line */
	uint64_t	 line;		/* number of the last line started */
	int		 skipping;	/* dropping the rest of an over-long line */
};

/* A position in the line being parsed. */
struct cursor {
	const char	*p;	/* next byte */
	const char	*end;	/* end of line (CR already stripped) */
	const char	*lim;	/* end of the readable bytes, >= end */
};

/* ---------------------------------------------------------------------
 * Tables.
 */

/*
 * Keep in the order of enum proto_reason; tests/check_proto.c checks that
 * every value has its own string. Update it whenever a reason is added.
 */
static const char *const reason_str[PROTO_NREASONS] = {
	[PROTO_R_LINE_TOO_LONG] = "line_too_long",
	[PROTO_R_NUL_BYTE] = "nul_byte",
	[PROTO_R_BAD_UTF8] = "bad_utf8",
	[PROTO_R_BAD_MODEL_NAME] = "bad_model_name",
	[PROTO_R_BAD_TIME] = "bad_time",
	[PROTO_R_NOT_A_NUMBER] = "not_a_number",
	[PROTO_R_NON_FINITE] = "non_finite",
	[PROTO_R_NO_VALUES] = "no_values",
	[PROTO_R_TOO_MANY_VALUES] = "too_many_values",
	[PROTO_R_MIXED_FORMS] = "mixed_forms",
	[PROTO_R_BAD_FIELD_NAME] = "bad_field_name",
	[PROTO_R_DUPLICATE_FIELD] = "duplicate_field",
	[PROTO_R_UNKNOWN_COMMAND] = "unknown_command",
	[PROTO_R_BAD_ARGUMENTS] = "bad_arguments",
	[PROTO_R_UNKNOWN_MODEL] = "unknown_model",
	[PROTO_R_WRONG_COUNT] = "wrong_count",
	[PROTO_R_UNKNOWN_FIELD] = "unknown_field",
	[PROTO_R_MISSING_FIELD] = "missing_field",
	[PROTO_R_TERM_NON_FINITE] = "term_non_finite",
	[PROTO_R_MODEL_LIMIT] = "model_limit",
	[PROTO_R_CONNECTION_LIMIT] = "connection_limit",
	[PROTO_R_DENIED] = "denied",
	[PROTO_R_AUTH_REQUIRED] = "auth_required",
	[PROTO_R_FROZEN] = "frozen",
	[PROTO_R_BUSY] = "busy",
	[PROTO_R_INTERNAL] = "internal",
	[PROTO_R_NOT_READY] = "not_ready",
};

/*
 * proto_reason_str: the stable snake_case wire name of r, or "unknown" for
 * a value outside 0..PROTO_NREASONS-1. Never NULL.
 */
const char *
proto_reason_str(enum proto_reason r)
{
	if ((unsigned)r >= PROTO_NREASONS || reason_str[r] == NULL)
		return "unknown";
	return reason_str[r];
}

#define ANY	(-1)

/*
 * The command table, indexed by enum proto_cmd. One row per command; the
 * arity check and the per-argument checks in parse_command are driven by
 * it. Adding a command: add the enum value, a row here, a case in
 * parse_command if it has arguments beyond NAME, and a PROTOCOL.md entry.
 */
static const struct proto_cmd_info cmd_table[PROTO_NCMDS] = {
	[PROTO_CMD_SYNC] = { ".sync", PROTO_CMD_SYNC, 0, 0, 0 },
	[PROTO_CMD_LIST] = { ".list", PROTO_CMD_LIST, 0, 0, 0 },
	[PROTO_CMD_GET] = { ".get", PROTO_CMD_GET, 1, 1, PROTO_CMD_NAME },
	[PROTO_CMD_PREDICT] = { ".predict", PROTO_CMD_PREDICT, 1, ANY,
	    PROTO_CMD_NAME | PROTO_CMD_VALUES },
	[PROTO_CMD_PIN] = { ".pin", PROTO_CMD_PIN, 1, 1,
	    PROTO_CMD_NAME | PROTO_CMD_ADMIN },
	[PROTO_CMD_FREEZE] = { ".freeze", PROTO_CMD_FREEZE, 1, 1,
	    PROTO_CMD_NAME | PROTO_CMD_ADMIN },
	[PROTO_CMD_THAW] = { ".thaw", PROTO_CMD_THAW, 1, 1,
	    PROTO_CMD_NAME | PROTO_CMD_ADMIN },
	[PROTO_CMD_RESET] = { ".reset", PROTO_CMD_RESET, 1, 1,
	    PROTO_CMD_NAME | PROTO_CMD_ADMIN },
	[PROTO_CMD_HISTORY] = { ".history", PROTO_CMD_HISTORY, 1, 2,
	    PROTO_CMD_NAME },
	[PROTO_CMD_STATS] = { ".stats", PROTO_CMD_STATS, 0, 0, 0 },
	[PROTO_CMD_WATCH] = { ".watch", PROTO_CMD_WATCH, 0, 2, 0 },
	[PROTO_CMD_SAVE] = { ".save", PROTO_CMD_SAVE, 0, 0, PROTO_CMD_ADMIN },
	[PROTO_CMD_RELOAD] = { ".reload", PROTO_CMD_RELOAD, 0, 0,
	    PROTO_CMD_ADMIN },
	[PROTO_CMD_AUTH] = { ".auth", PROTO_CMD_AUTH, 1, 1, PROTO_CMD_SECRET },
	[PROTO_CMD_VERSION] = { ".version", PROTO_CMD_VERSION, 0, 0, 0 },
	[PROTO_CMD_BYE] = { ".bye", PROTO_CMD_BYE, 0, 0, 0 },
	[PROTO_CMD_OPEN] = { ".open", PROTO_CMD_OPEN, 1, 1, PROTO_CMD_NAME },
};

/*
 * proto_cmd_info: the table row of cmd, or NULL for PROTO_CMD_NONE and
 * values out of range. The row is static and read-only.
 */
const struct proto_cmd_info *
proto_cmd_info(enum proto_cmd cmd)
{
	if ((unsigned)cmd >= PROTO_NCMDS || cmd_table[cmd].name == NULL)
		return NULL;
	return &cmd_table[cmd];
}

/*
 * proto_cmd_find: the row whose name (dot included, case-sensitive) is
 * word[0..len), or NULL.
 */
const struct proto_cmd_info *
proto_cmd_find(const char *word, size_t len)
{
	int i;

	for (i = 1; i < PROTO_NCMDS; i++)
		if (strlen(cmd_table[i].name) == len &&
		    memcmp(cmd_table[i].name, word, len) == 0)
			return &cmd_table[i];
	return NULL;
}

/* Character classes, one bit each, for the names in the grammar. */
#define C_MODEL		0x01	/* [A-Za-z0-9_.-] */
#define C_ALNUM		0x02	/* [A-Za-z0-9] */
#define C_FIELD0	0x04	/* [A-Za-z_] */
#define C_FIELD		0x08	/* [A-Za-z0-9_] */
#define C_DIGIT		0x10	/* [0-9] */
#define C_BLANK		0x20	/* space, tab */

#define R_DIG	(C_MODEL | C_ALNUM | C_FIELD | C_DIGIT)
#define R_LET	(C_MODEL | C_ALNUM | C_FIELD0 | C_FIELD)

static const unsigned char cclass[256] = {
	['\t'] = C_BLANK, [' '] = C_BLANK,
	['-'] = C_MODEL, ['.'] = C_MODEL,
	['_'] = C_MODEL | C_FIELD0 | C_FIELD,
	['0'] = R_DIG, ['1'] = R_DIG, ['2'] = R_DIG, ['3'] = R_DIG,
	['4'] = R_DIG, ['5'] = R_DIG, ['6'] = R_DIG, ['7'] = R_DIG,
	['8'] = R_DIG, ['9'] = R_DIG,
	['A'] = R_LET, ['B'] = R_LET, ['C'] = R_LET, ['D'] = R_LET,
	['E'] = R_LET, ['F'] = R_LET, ['G'] = R_LET, ['H'] = R_LET,
	['I'] = R_LET, ['J'] = R_LET, ['K'] = R_LET, ['L'] = R_LET,
	['M'] = R_LET, ['N'] = R_LET, ['O'] = R_LET, ['P'] = R_LET,
	['Q'] = R_LET, ['R'] = R_LET, ['S'] = R_LET, ['T'] = R_LET,
	['U'] = R_LET, ['V'] = R_LET, ['W'] = R_LET, ['X'] = R_LET,
	['Y'] = R_LET, ['Z'] = R_LET,
	['a'] = R_LET, ['b'] = R_LET, ['c'] = R_LET, ['d'] = R_LET,
	['e'] = R_LET, ['f'] = R_LET, ['g'] = R_LET, ['h'] = R_LET,
	['i'] = R_LET, ['j'] = R_LET, ['k'] = R_LET, ['l'] = R_LET,
	['m'] = R_LET, ['n'] = R_LET, ['o'] = R_LET, ['p'] = R_LET,
	['q'] = R_LET, ['r'] = R_LET, ['s'] = R_LET, ['t'] = R_LET,
	['u'] = R_LET, ['v'] = R_LET, ['w'] = R_LET, ['x'] = R_LET,
	['y'] = R_LET, ['z'] = R_LET,
};

#define IS(c, cl)	(cclass[(unsigned char)(c)] & (cl))

/* ---------------------------------------------------------------------
 * Names.
 */

/*
 * proto_check_model_name: 0 if s[0..len) is a valid model name (1 to
 * MODEL_NAME_MAX bytes of [A-Za-z0-9_.-], the first alphanumeric, which
 * makes it safe as a file name), else E_ARG.
 */
int
proto_check_model_name(const char *s, size_t len)
{
	size_t i;

	if (len == 0 || len > MODEL_NAME_MAX || !IS(s[0], C_ALNUM))
		return E_ARG;
	for (i = 1; i < len; i++)
		if (!IS(s[i], C_MODEL))
			return E_ARG;
	return 0;
}

/*
 * proto_check_field_name: 0 if s[0..len) is a valid field name (1 to
 * FIELD_NAME_MAX bytes, [A-Za-z_][A-Za-z0-9_]*), else E_ARG.
 */
int
proto_check_field_name(const char *s, size_t len)
{
	size_t i;

	if (len == 0 || len > FIELD_NAME_MAX || !IS(s[0], C_FIELD0))
		return E_ARG;
	for (i = 1; i < len; i++)
		if (!IS(s[i], C_FIELD))
			return E_ARG;
	return 0;
}

/* ---------------------------------------------------------------------
 * Numbers.
 *
 * Grammar: [+-]?(D+(\.D*)?|\.D+)([eE][+-]?D+)?  and nothing else.
 *
 * Fast path (W. D. Clinger, "How to read floating point numbers
 * accurately", PLDI 1990): if the digits form an integer m <= 2^53 and the
 * value is m * 10^e with |e| <= 22, then m and 10^e are both exact doubles
 * and one IEEE multiply or divide rounds the exact value correctly, which
 * is what strtod returns. The extension for 22 < e <= 22+15 moves part of
 * the power into m when m * 10^(e-22) is still an exact integer <= 2^53.
 * This needs every double operation rounded once to double, i.e.
 * FLT_EVAL_METHOD == 0 (x86-64 SSE2, aarch64); otherwise we always use
 * strtod.
 *
 * Everything else goes to glibc strtod, which rounds correctly for any
 * length, on a NUL-terminated stack copy: the token itself when short,
 * else an equivalent normalised form (see slow_number).
 */

#define TWO53		9007199254740992ULL
#define FAST_DIGITS	19	/* 10^19 - 1 < 2^64 */
#define SLOW_COPY	128	/* tokens shorter than this are copied as is */
/*
 * Significant digits kept in the normalised form. A double has at most
 * 767 significant decimal digits and a point halfway between two adjacent
 * doubles at most 768: the widest is (2^54 - 1) * 2^-1075, whose digits are
 * those of (2^54 - 1) * 5^1075 (counted with Python 3.11:
 * len(str((2**54-1)*5**1075).rstrip('0')) == 768). All such points lie on
 * the grid of the 800th digit, so cutting the digits after the 800th and
 * appending a sticky '1' when a nonzero one was cut keeps the value
 * strictly between the same two grid points: strtod rounds it the same.
 */
#define SLOW_DIGITS	800
/*
 * Exponents saturate at EXP_SAT while they are read: far beyond any
 * token length, so e10 (at most the token length in size) + exponent is
 * still exact enough to decide 0 or inf. The normalised form then prints
 * at most +-EXP_CAP, where every 801-digit mantissa is already 0 or inf.
 */
#define EXP_SAT		1000000000000000LL
#define EXP_CAP		100000

static const double pow10_exact[23] = {
	1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11,
	1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22
};

static const uint64_t pow10_u64[16] = {
	1ULL, 10ULL, 100ULL, 1000ULL, 10000ULL, 100000ULL, 1000000ULL,
	10000000ULL, 100000000ULL, 1000000000ULL, 10000000000ULL,
	100000000000ULL, 1000000000000ULL, 10000000000000ULL,
	100000000000000ULL, 1000000000000000ULL
};

/* Case-insensitive: is s[0..len) exactly the lower-case word w? */
static int
word_ieq(const char *s, size_t len, const char *w)
{
	size_t i;

	for (i = 0; i < len && w[i] != '\0'; i++)
		if ((s[i] | 0x20) != w[i])
			return 0;
	return i == len && w[i] == '\0';
}

/*
 * strtod on a bounded stack copy. s[0..len) already matched the grammar;
 * neg is its sign, exp its exponent (saturated at +-EXP_SAT).
 */
static double
slow_number(const char *s, size_t len, int neg, long long exp)
{
	char tmp[SLOW_DIGITS + 32], *q;
	const char *p = s, *end = s + len;
	long long e10 = 0;
	size_t nd = 0;
	int nonzero = 0, sticky = 0, frac = 0;
	char ebuf[12];
	int ne = 0;

	if (len < SLOW_COPY) {
		memcpy(tmp, s, len);
		tmp[len] = '\0';
		return strtod(tmp, NULL);
	}
	/* Rewrite as [-]0.DDDD[1]e<E>: value = 0.DDDD * 10^E. */
	q = tmp;
	if (neg)
		*q++ = '-';
	*q++ = '0';
	*q++ = '.';
	if (p < end && (*p == '+' || *p == '-'))
		p++;
	for (; p < end && (IS(*p, C_DIGIT) || *p == '.'); p++) {
		if (*p == '.') {
			frac = 1;
			continue;
		}
		if (!nonzero && *p == '0') {
			if (frac)
				e10--;
			continue;
		}
		nonzero = 1;
		if (!frac)
			e10++;
		if (nd < SLOW_DIGITS) {
			*q++ = *p;
			nd++;
		} else if (*p != '0')
			sticky = 1;
	}
	if (!nonzero)
		return neg ? -0.0 : 0.0;
	if (sticky)
		*q++ = '1';
	e10 += exp;
	if (e10 > EXP_CAP)
		e10 = EXP_CAP;
	if (e10 < -EXP_CAP)
		e10 = -EXP_CAP;
	*q++ = 'e';
	if (e10 < 0) {
		*q++ = '-';
		e10 = -e10;
	}
	do {
		ebuf[ne++] = (char)('0' + e10 % 10);
		e10 /= 10;
	} while (e10 != 0);
	while (ne > 0)
		*q++ = ebuf[--ne];
	*q = '\0';
	return strtod(tmp, NULL);
}

/* What num_scan learnt about a number: value = (-1)^neg m 10^(e10+exp). */
struct numscan {
	uint64_t	 m;	/* first FAST_DIGITS significant digits */
	long long	 e10;	/* minus the fraction digits kept in m */
	long long	 exp;	/* the exponent part, saturated at EXP_SAT */
	int		 neg;
	int		 many;	/* digits were dropped from m */
	const char	*stop;	/* first byte after the number */
};

#define ISDIGIT(c)	((unsigned char)((c) - '0') < 10)

/*
 * Match the longest prefix of p[0..end) that is a number of the grammar
 * (an 'e' without digits after it is not part of it). Returns 0 and fills
 * *ns, or E_ARG when no digit starts there. Leading zeros are skipped, so
 * m holds the significant digits; past FAST_DIGITS of them m wraps
 * (harmless: many is set and m is not used).
 */
static inline int
num_scan(const char *p, const char *end, struct numscan *ns)
{
	const char *d0, *s0, *q;
	uint64_t m = 0;
	long long e10 = 0, exp = 0;
	size_t nsig, ndig;
	int eneg = 0;

	ns->neg = 0;
	if (p < end && (*p == '+' || *p == '-')) {
		ns->neg = *p == '-';
		p++;
	}
	d0 = p;
	while (p < end && *p == '0')
		p++;
	s0 = p;
	for (; p < end && ISDIGIT(*p); p++)
		m = m * 10 + (uint64_t)(*p - '0');
	nsig = (size_t)(p - s0);
	ndig = (size_t)(p - d0);
	if (p < end && *p == '.') {
		q = ++p;
		if (nsig == 0) {
			/* 0.000ddd: the zeros only scale. */
			while (p < end && *p == '0')
				p++;
			e10 = -(long long)(p - q);
		}
		s0 = p;
		for (; p < end && ISDIGIT(*p); p++)
			m = m * 10 + (uint64_t)(*p - '0');
		e10 -= (long long)(p - s0);
		nsig += (size_t)(p - s0);
		ndig += (size_t)(p - q);
	}
	if (ndig == 0)
		return E_ARG;
	if (p < end && (*p == 'e' || *p == 'E')) {
		q = p + 1;
		if (q < end && (*q == '+' || *q == '-')) {
			eneg = *q == '-';
			q++;
		}
		if (q < end && ISDIGIT(*q)) {
			for (p = q; p < end && ISDIGIT(*p); p++)
				if (exp < EXP_SAT)
					exp = exp * 10 + (*p - '0');
			if (eneg)
				exp = -exp;
		}
	}
	ns->m = m;
	ns->e10 = e10;
	ns->exp = exp;
	ns->many = nsig > FAST_DIGITS;
	ns->stop = p;
	return 0;
}

/*
 * The value of the number s[0..ns->stop) scanned into *ns: 0 and *out, or
 * E_NUMERIC when it overflows to infinity.
 */
static inline int
num_value(const char *s, const struct numscan *ns, double *out)
{
	double d;

#if FLT_EVAL_METHOD == 0
	if (!ns->many) {
		long long e = ns->e10 + ns->exp;
		uint64_t m = ns->m;

		if (m == 0) {
			*out = ns->neg ? -0.0 : 0.0;
			return 0;
		}
		if (m <= TWO53 && e >= -22 && e <= 22) {
			d = (double)m;
			d = e < 0 ? d / pow10_exact[-e] : d * pow10_exact[e];
			*out = ns->neg ? -d : d;
			return 0;
		}
		if (m <= TWO53 && e > 22 && e <= 22 + 15 &&
		    m <= TWO53 / pow10_u64[e - 22]) {
			d = (double)(m * pow10_u64[e - 22]) * 1e22;
			*out = ns->neg ? -d : d;
			return 0;
		}
	}
#endif
	d = slow_number(s, (size_t)(ns->stop - s), ns->neg, ns->exp);
	if (!isfinite(d))
		return E_NUMERIC;
	*out = d;
	return 0;
}

/*
 * The common case in one pass: [-+]?D*(.D*)? with 1 to FAST_DIGITS digits
 * (leading zeros counted, to stay simple) forming m <= 2^53, ending at a
 * blank or at end. Then m / 10^(fraction digits) is Clinger's exact case.
 * Returns 1 with *out and *stop set, or 0 (nothing written) to leave the
 * token to num_scan/num_value, which give the same value for everything
 * this accepts.
 */
static inline int
quick_number(const char *p, const char *end, const char **stop, double *out)
{
	const char *q = p, *d0, *f0;
	uint64_t m = 0;
	size_t nd, nf = 0;
	int neg = 0;
	double d;

	if (q < end && (*q == '-' || *q == '+'))
		neg = *q++ == '-';
	for (d0 = q; q < end && ISDIGIT(*q); q++)
		m = m * 10 + (uint64_t)(*q - '0');
	nd = (size_t)(q - d0);
	if (q < end && *q == '.') {
		for (f0 = ++q; q < end && ISDIGIT(*q); q++)
			m = m * 10 + (uint64_t)(*q - '0');
		nf = (size_t)(q - f0);
		nd += nf;
	}
	if (nd == 0 || nd > FAST_DIGITS || m > TWO53 ||
	    (q < end && !IS(*q, C_BLANK)))
		return 0;
#if FLT_EVAL_METHOD == 0
	d = (double)m;
	if (nf > 0)
		d /= pow10_exact[nf];	/* nf <= 19 */
	*out = neg ? -d : d;
	*stop = q;
	return 1;
#else
	(void)d;
	(void)neg;
	return 0;
#endif
}

/*
 * The word-at-a-time fast path for the tokens of a feed: [+-]?D*(.D*)?
 * with 1 to 15 digits in at most 15 bytes after the sign, ending at a
 * blank or at the end of the line. It classifies 16 bytes at once (SSE2
 * on x86-64, else 8-byte words) instead of looping over them, so a
 * token's sign and length cost no data-dependent branch: on a feed whose
 * numbers vary in sign and length the byte loops mispredicted about once
 * per number (measured: 180 ns per 53-byte record against 110 ns with
 * the same loops on numbers of one fixed shape). It may therefore read
 * up to SWAR_READ bytes from a token: the caller passes lim, the end of
 * the readable buffer, and bytes in [end, lim) are loaded but never used.
 * 15 digits give m < 10^15 < 2^53 and at most 15 fraction digits, so the
 * value is m / 10^nf, Clinger's exact case as in quick_number (one
 * correctly rounded IEEE division of two exact doubles: the same double
 * as strtod). It needs little-endian words (x86-64, aarch64); elsewhere
 * it declines and the byte loops above do the work.
 */
#define SWAR_READ	32
#define ONES8		0x0101010101010101ULL
#define HIGHS8		0x8080808080808080ULL

#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__ && \
    FLT_EVAL_METHOD == 0
#define HAVE_SWAR	1

static inline uint64_t
load8(const char *p)
{
	uint64_t w;

	memcpy(&w, p, sizeof(w));
	return w;
}

#ifndef __SSE2__
/*
 * One bit per byte of w (bit k for byte k, the k-th in memory) that is
 * not an ASCII digit. x = w ^ '0' maps the digits to 0..9; (x & 0x7f) +
 * 0x76 reaches 0x80 exactly when the low seven bits are 10 or more (no
 * carry leaves a byte: at most 0x7f + 0x76), and x itself has the high
 * bit for bytes >= 0x80. The multiply gathers the eight high bits into
 * the top byte: bit 8k lands on bit 56 + k, and no two partial products
 * meet (8k - 7j = 8k' - 7j' forces k = k' for k, j in 0..7), so nothing
 * carries.
 */
static inline unsigned
nondigits(uint64_t w)
{
	uint64_t x = w ^ (0x30 * ONES8);

	x = ((((x & (0x7f * ONES8)) + 0x76 * ONES8) | x) & HIGHS8) >> 7;
	return (unsigned)((x * 0x0102040810204080ULL) >> 56);
}
#endif

/* Bit k: s[k] is not an ASCII digit (k < 16; 16 bytes readable at s). */
static inline unsigned
nondigits16(const char *s)
{
#ifdef __SSE2__
	/* Bytes minus '0' that stay themselves under min(., 9) are digits. */
	__m128i v = _mm_loadu_si128((const __m128i *)(const void *)s);
	__m128i d;

	v = _mm_sub_epi8(v, _mm_set1_epi8('0'));
	d = _mm_cmpeq_epi8(_mm_min_epu8(v, _mm_set1_epi8(9)), v);
	return ~(unsigned)_mm_movemask_epi8(d) & 0xffffu;
#else
	return nondigits(load8(s)) | nondigits(load8(s + 8)) << 8;
#endif
}

/*
 * The value of the n digits in the first n bytes of x (the first in
 * memory in the low byte; 1 <= n <= 8). Subtracting '0' from every byte
 * first keeps the borrows of the bytes past the n digits out of the
 * digits; shifting left then drops those bytes and puts the n digits
 * behind 8 - n leading zeros. The two combining steps pair neighbouring
 * digits (10 a + b), then pairs into 4 and 4 into 8 digits with one
 * multiply each: the eight-digit SWAR method D. Lemire described
 * ("Quickly parsing eight digits", 2018; recalled from memory), checked
 * against strtod on every token shape in tests/check_proto.c.
 */
static inline uint64_t
word8(uint64_t x, size_t n)
{
	x = (x - 0x30 * ONES8) << (8 * (8 - n));
	x = x * 10 + (x >> 8);
	x = (((x & 0x000000ff000000ffULL) * (100 + (1000000ULL << 32))) +
	    (((x >> 16) & 0x000000ff000000ffULL) * (1 + (10000ULL << 32))))
	    >> 32;
	return x & 0xffffffffULL;
}

/* The value of the n digits (1 <= n <= 15) in the 16 bytes lo, hi. */
static inline uint64_t
word16(uint64_t lo, uint64_t hi, size_t n)
{
	size_t o = n - 8;	/* 1..7 when n > 8 */

	if (n <= 8)
		return word8(lo, n);
	return word8(lo, o) * 100000000ULL +
	    word8(lo >> (8 * o) | hi << (64 - 8 * o), 8);
}
#else
#define HAVE_SWAR	0
#endif

#if HAVE_SWAR
#ifndef __SSE2__
/*
 * One bit per byte of w (bit k for the k-th byte) that is a blank (space
 * or tab). y = w ^ c has a zero byte where w has c; ((y & 0x7f) + 0x7f)
 * | y sets the high bit of every nonzero byte and of no zero byte (no
 * carry leaves a byte), so its complement flags the bytes equal to c.
 */
static inline unsigned
blanks8(uint64_t w)
{
	uint64_t s = w ^ (0x20 * ONES8), t = w ^ (0x09 * ONES8), x;

	s = ((s & (0x7f * ONES8)) + 0x7f * ONES8) | s;
	t = ((t & (0x7f * ONES8)) + 0x7f * ONES8) | t;
	x = (~(s & t) & HIGHS8) >> 7;
	return (unsigned)((x * 0x0102040810204080ULL) >> 56);
}
#endif

/* Bit k: p[k] is a blank (k < 16; 16 bytes readable at p). */
static inline unsigned
blanks16(const char *p)
{
#ifdef __SSE2__
	__m128i v = _mm_loadu_si128((const __m128i *)(const void *)p);

	return (unsigned)_mm_movemask_epi8(_mm_or_si128(_mm_cmpeq_epi8(v,
	    _mm_set1_epi8(' ')), _mm_cmpeq_epi8(v, _mm_set1_epi8('\t'))));
#else
	return blanks8(load8(p)) | blanks8(load8(p + 8)) << 8;
#endif
}

/* Bit k: p[k] is a blank, or k >= len (k < 64; 64 bytes readable). */
static inline uint64_t
blanks64(const char *p, size_t len)
{
	uint64_t bits = 0;
	int k;

#ifdef __SSE2__
	for (k = 0; k < 4; k++) {
		__m128i v = _mm_loadu_si128((const __m128i *)(const void *)
		    (p + 16 * k));
		__m128i b = _mm_or_si128(_mm_cmpeq_epi8(v, _mm_set1_epi8(' ')),
		    _mm_cmpeq_epi8(v, _mm_set1_epi8('\t')));

		bits |= (uint64_t)(unsigned)_mm_movemask_epi8(b) << (16 * k);
	}
#else
	for (k = 0; k < 8; k++)
		bits |= (uint64_t)blanks8(load8(p + 8 * k)) << (8 * k);
#endif
	if (len < 64)
		bits |= ~0ULL << len;
	return bits;
}

/*
 * The number token s[0..n) (1 <= n; 16 bytes readable at s) when it is
 * [+-]?D*(.D*)? with 1 to 15 digits: 1 with *out, else 0. As swar_number,
 * but the token's end is already known, so nothing here decides where
 * the next token starts.
 */
static inline __attribute__((always_inline)) int
tok_number(const char *s, size_t n, double *out)
{
	int neg = *s == '-';
	size_t sg = (size_t)(neg | (*s == '+')), i;
	unsigned nd;
	uint64_t lo, hi, keep;
	double d;

	s += sg;
	n -= sg;
	if (n - 1 >= 15)
		return 0;	/* empty after the sign, or over 15 bytes */
	lo = load8(s);
	hi = load8(s + 8);
	nd = nondigits16(s) & ((1u << n) - 1);
	if (nd == 0) {
		d = (double)word16(lo, hi, n);
	} else {
		i = (size_t)__builtin_ctz(nd);
		if ((nd & (nd - 1)) != 0 || s[i] != '.' || n == 1)
			return 0;	/* a second non-digit, not a point */
		/* Squeeze the point out (the bytes after it move down one
		 * place), then read the n - 1 digits at once. */
		if (i < 8) {
			keep = (1ULL << (8 * i)) - 1;
			lo = (lo & keep) | ((lo >> 8 | hi << 56) & ~keep);
			hi >>= 8;
		} else {
			keep = (1ULL << (8 * (i - 8))) - 1;
			hi = (hi & keep) | ((hi >> 8) & ~keep);
		}
		d = (double)word16(lo, hi, n - 1) / pow10_exact[n - i - 1];
	}
	*out = neg ? -d : d;
	return 1;
}

#define LINE_WIN	64	/* bytes of a line classified at once */

/*
 * The rest of a record line after its model name, c->p[0..end), when it
 * is an optional epoch @TIME (D+ or D+.D+) and 1 to PROTO_MAX_VALUES
 * positional numbers of the swar shape. The blanks of 64 bytes are found
 * at once and the tokens taken from that bitmap, so where a token starts
 * never waits for the previous number to be read: the numbers are
 * independent work the processor overlaps. Returns 1 with msg's time,
 * target and values set, or 0 when any token is of another kind; then
 * msg's has_time, time, has_target, target and nvalues may be changed
 * and must be reset by the caller, which parses the rest the general
 * way. c is not moved.
 */
/* The 64 bytes of a line fast_record is looking at. */
struct window {
	const char	*base;	/* first byte */
	uint64_t	 bits;	/* blanks64(base, ...) */
	size_t		 pos;	/* next byte to look at, from base */
};

/*
 * The next token of the line for fast_record: 1 with *tok and *n, 0 at
 * the end of the line, -1 when it is not ours (64 bytes or more, or too
 * near the end of the readable bytes).
 */
static inline int
win_next(const struct cursor *c, struct window *w, const char **tok,
    size_t *n)
{
	uint64_t b;
	size_t st;

	for (;;) {
		b = w->pos < LINE_WIN ? ~w->bits & ~0ULL << w->pos : 0;
		if (b == 0) {
			/* No token starts in the rest of this window. */
			if (c->end - w->base <= LINE_WIN)
				return 0;
			w->base += LINE_WIN;
		} else {
			st = (size_t)__builtin_ctzll(b);
			b = w->bits & ~0ULL << st;
			if (b != 0) {
				w->pos = (size_t)__builtin_ctzll(b);
				*tok = w->base + st;
				*n = w->pos - st;
				return 1;
			}
			/* The token runs past the window: move the window
			 * to it (a token of 64 bytes or more is not ours). */
			if (st == 0)
				return -1;
			w->base += st;
		}
		w->pos = 0;
		if (c->lim - w->base < LINE_WIN + SWAR_READ)
			return -1;
		w->bits = blanks64(w->base, (size_t)(c->end - w->base));
	}
}

static int
fast_record(const struct cursor *c, struct proto_msg *msg)
{
	struct window w;
	struct proto_value *val = msg->values;
	const char *tok;
	size_t n, k = 1;
	int r;

	w.base = c->p;
	w.pos = 0;
	if (c->lim - w.base < LINE_WIN + SWAR_READ)
		return 0;
	w.bits = blanks64(w.base, (size_t)(c->end - w.base));
	if (win_next(c, &w, &tok, &n) <= 0)
		return 0;
	if (*tok == '@') {
		/* Epoch seconds: no sign, a digit first, and digits after a
		 * point; the value is proto_parse_time's. */
		if (n < 2 || !ISDIGIT(tok[1]) ||
		    !tok_number(tok + 1, n - 1, &msg->time) ||
		    tok[n - 1] == '.')
			return 0;
		msg->has_time = 1;
		if (win_next(c, &w, &tok, &n) <= 0)
			return 0;
	}
	if (!tok_number(tok, n, &msg->target))
		return 0;
	msg->has_target = 1;
	while ((r = win_next(c, &w, &tok, &n)) > 0) {
		if (++k > PROTO_MAX_VALUES || !tok_number(tok, n, &val->v))
			return 0;
		val->name.ptr = NULL;
		val->name.len = 0;
		val++;
	}
	if (r < 0)
		return 0;
	msg->nvalues = (size_t)(val - msg->values);
	return 1;
}
#endif

/*
 * A number token at p (p < end, p + SWAR_READ <= lim) by tok_number,
 * after finding its end among the next 16 bytes: 1 with *out and *stop,
 * or 0 (nothing written) to leave it to the byte loops.
 */
static inline __attribute__((always_inline)) int
swar_number(const char *p, const char *end, const char *lim,
    const char **stop, double *out)
{
#if HAVE_SWAR
	size_t len = (size_t)(end - p), n;

	if ((size_t)(lim - p) < SWAR_READ)
		return 0;
	n = (size_t)__builtin_ctz(blanks16(p) | (len < 16 ? ~0u << len : 0) |
	    1u << 16);
	if (n == 16 && len > 16)
		return 0;
	if (!tok_number(p, n, out))
		return 0;
	*stop = p + n;
	return 1;
#else
	(void)p;
	(void)end;
	(void)lim;
	(void)stop;
	(void)out;
	return 0;
#endif
}

/*
 * proto_parse_number: read the decimal number s[0..len) (grammar above).
 * On success stores the value, bit-identical to glibc strtod in the "C"
 * locale, in *out and returns 0; underflow to a subnormal or to +-0 is
 * accepted, "-0" gives -0.0. Returns E_NUMERIC for "nan", "inf" and
 * "infinity" (any case, optional sign) and for values that overflow, E_ARG
 * for anything else not matching the grammar. *out is untouched on error.
 */
int
proto_parse_number(const char *s, size_t len, double *out)
{
	const char *p = s, *end = s + len, *stop;
	struct numscan ns;
	double v;

	if (quick_number(s, end, &stop, &v) && stop == end) {
		*out = v;
		return 0;
	}
	if (num_scan(s, end, &ns) == 0 && ns.stop == end)
		return num_value(s, &ns, out);
	if (p < end && (*p == '+' || *p == '-'))
		p++;
	if (word_ieq(p, (size_t)(end - p), "nan") ||
	    word_ieq(p, (size_t)(end - p), "inf") ||
	    word_ieq(p, (size_t)(end - p), "infinity"))
		return E_NUMERIC;
	return E_ARG;
}

/* ---------------------------------------------------------------------
 * Times.
 */

/*
 * Days from 1970-01-01 to the proleptic Gregorian date y-m-d. The
 * era/day-of-era method of H. Hinnant, "chrono-Compatible Low-Level Date
 * Algorithms" (days_from_civil): years are counted from March so the leap
 * day is the last day of the shifted year.
 */
static long
days_from_civil(long y, unsigned m, unsigned d)
{
	long era;
	unsigned yoe, doy, doe;

	y -= m <= 2;
	era = (y >= 0 ? y : y - 399) / 400;
	yoe = (unsigned)(y - era * 400);
	doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
	doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
	return era * 146097 + (long)doe - 719468;
}

static int
days_in_month(long y, unsigned m)
{
	static const unsigned char mdays[12] = {
		31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31
	};

	if (m == 2 && (y % 4 == 0 && (y % 100 != 0 || y % 400 == 0)))
		return 29;
	return mdays[m - 1];
}

/* n decimal digits at s as an integer, or -1 if any is not a digit. */
static long
digits(const char *s, int n)
{
	long v = 0;
	int i;

	for (i = 0; i < n; i++) {
		if (!IS(s[i], C_DIGIT))
			return -1;
		v = v * 10 + (s[i] - '0');
	}
	return v;
}

#define FRAC_MAX	60	/* fraction digits accepted in RFC 3339 */

/*
 * Seconds (integer, may be negative) plus the fraction 0.f[0..nf) as the
 * correctly rounded double: the exact decimal is written out and read
 * with proto_parse_number, so 1.1 becomes the double nearest to 1.1, not
 * 1 + (double)0.1.
 */
static int
exact_seconds(long long secs, const char *f, size_t nf, double *out)
{
	char tmp[32 + FRAC_MAX], dig[FRAC_MAX];
	unsigned long long u;
	size_t i, n = 0, k;
	int allzero = 1;

	for (i = 0; i < nf; i++)
		allzero &= f[i] == '0';
	if (secs < 0 && !allzero) {
		/* -S + 0.f = -((S - 1) + (1 - 0.f)); 1 - 0.f = 0.g below. */
		secs = -secs - 1;
		memcpy(dig, f, nf);
		/*
		 * g = 10^nf - f, the ten's complement: trailing zeros stay,
		 * the last nonzero digit d becomes 10 - d, every digit left
		 * of it 9 - d.
		 */
		k = nf;
		while (k > 0 && dig[k - 1] == '0')
			k--;
		if (k > 0) {	/* always: some digit is nonzero */
			dig[k - 1] = (char)('0' + 10 - (dig[k - 1] - '0'));
			while (--k > 0)
				dig[k - 1] = (char)('0' + 9 -
				    (dig[k - 1] - '0'));
		}
		tmp[n++] = '-';
		f = dig;
	} else if (secs < 0) {
		tmp[n++] = '-';
		secs = -secs;
	}
	u = (unsigned long long)secs;
	{
		char rev[24];
		int r = 0;

		do {
			rev[r++] = (char)('0' + u % 10);
			u /= 10;
		} while (u != 0);
		while (r > 0)
			tmp[n++] = rev[--r];
	}
	if (nf > 0) {
		tmp[n++] = '.';
		memcpy(tmp + n, f, nf);
		n += nf;
	}
	return proto_parse_number(tmp, n, out);
}

/*
 * proto_parse_time: read a TIME token without its '@': either epoch
 * seconds as D+ or D+.D+ (no sign, no exponent), or RFC 3339 date-time
 * YYYY-MM-DDTHH:MM:SS[.F+](Z|+HH:MM|-HH:MM) with 'T' and 'Z' in either
 * case, years 0000-9999, real calendar days (leap years per the Gregorian
 * rule), seconds 00-59 (no leap second 60: POSIX time has none) and 1 to
 * FRAC_MAX fraction digits. Stores seconds since 1970-01-01T00:00:00Z,
 * correctly rounded, in *out and returns 0; E_ARG otherwise (*out
 * untouched).
 */
int
proto_parse_time(const char *s, size_t len, double *out)
{
	long y, mo, d, h, mi, sec, oh, om;
	long long secs;
	size_t i, nf = 0;
	const char *f = NULL;
	int sign;

	if (len >= 5 && s[4] == '-') {
		if (len < 20 || s[7] != '-' || (s[10] != 'T' && s[10] != 't') ||
		    s[13] != ':' || s[16] != ':')
			return E_ARG;
		y = digits(s, 4);
		mo = digits(s + 5, 2);
		d = digits(s + 8, 2);
		h = digits(s + 11, 2);
		mi = digits(s + 14, 2);
		sec = digits(s + 17, 2);
		if (y < 0 || mo < 1 || mo > 12 || d < 1 ||
		    d > days_in_month(y, (unsigned)mo) || h < 0 || h > 23 ||
		    mi < 0 || mi > 59 || sec < 0 || sec > 59)
			return E_ARG;
		i = 19;
		if (s[i] == '.') {
			f = s + ++i;
			while (i < len && IS(s[i], C_DIGIT))
				i++;
			nf = (size_t)(s + i - f);
			if (nf == 0 || nf > FRAC_MAX)
				return E_ARG;
		}
		if (i == len - 1 && (s[i] == 'Z' || s[i] == 'z')) {
			sign = 0;
			oh = om = 0;
		} else if (i == len - 6 && (s[i] == '+' || s[i] == '-') &&
		    s[i + 3] == ':') {
			sign = s[i] == '-' ? -1 : 1;
			oh = digits(s + i + 1, 2);
			om = digits(s + i + 4, 2);
			if (oh < 0 || oh > 23 || om < 0 || om > 59)
				return E_ARG;
		} else
			return E_ARG;
		secs = (long long)days_from_civil(y, (unsigned)mo,
		    (unsigned)d) * 86400 + h * 3600 + mi * 60 + sec;
		/* Local time = UTC + offset, so UTC = local - offset. */
		secs -= (long long)sign * (oh * 3600 + om * 60);
		return exact_seconds(secs, f, nf, out);
	}
	/* Epoch seconds. */
	for (i = 0; i < len && IS(s[i], C_DIGIT); i++)
		;
	if (i == 0)
		return E_ARG;
	if (i < len) {
		if (s[i] != '.' || i + 1 == len)
			return E_ARG;
		for (i++; i < len && IS(s[i], C_DIGIT); i++)
			;
		if (i < len)
			return E_ARG;
	}
	return proto_parse_number(s, len, out) == 0 ? 0 : E_ARG;
}

/* ---------------------------------------------------------------------
 * Error detail text. Writes into msg->detail, truncating at its size.
 */

#define TOKEN_SHOW	48	/* bytes of a token quoted in detail text */

static void
d_put(struct proto_msg *msg, size_t *n, const char *s, size_t len)
{
	size_t room = sizeof(msg->detail) - 1 - *n;

	if (len > room) {
		len = room;
		/* Do not end inside a UTF-8 character. */
		while (len > 0 && ((unsigned char)s[len] & 0xc0) == 0x80)
			len--;
	}
	memcpy(msg->detail + *n, s, len);
	*n += len;
	msg->detail[*n] = '\0';
}

static void
d_str(struct proto_msg *msg, size_t *n, const char *s)
{
	d_put(msg, n, s, strlen(s));
}

/* The token in double quotes, shortened with "..." when long. */
static void
d_tok(struct proto_msg *msg, size_t *n, const char *s, size_t len)
{
	size_t k = len;

	d_put(msg, n, "\"", 1);
	if (k > TOKEN_SHOW) {
		k = TOKEN_SHOW;
		while (k > 0 && ((unsigned char)s[k] & 0xc0) == 0x80)
			k--;
	}
	d_put(msg, n, s, k);
	if (k < len)
		d_put(msg, n, "...", 3);
	d_put(msg, n, "\"", 1);
}

static void
d_uint(struct proto_msg *msg, size_t *n, uint64_t v)
{
	char tmp[24];
	size_t i = sizeof(tmp);

	do {
		tmp[--i] = (char)('0' + v % 10);
		v /= 10;
	} while (v != 0);
	d_put(msg, n, tmp + i, sizeof(tmp) - i);
}

/*
 * Fill the error fields: reason, and detail as a sequence of pieces:
 * pre, then the quoted token (if tok != NULL), then post. Returns
 * PROTO_ERROR for the caller to pass on.
 */
static int
reject(struct proto_msg *msg, enum proto_reason r, const char *pre,
    const char *tok, size_t toklen, const char *post)
{
	size_t n = 0;

	msg->kind = PROTO_EMPTY;
	msg->reason = r;
	msg->detail[0] = '\0';
	if (pre != NULL)
		d_str(msg, &n, pre);
	if (tok != NULL)
		d_tok(msg, &n, tok, toklen);
	if (post != NULL)
		d_str(msg, &n, post);
	return PROTO_ERROR;
}

/* "value K " + token + post: for errors about the K-th VALUES token. */
static int
reject_value(struct proto_msg *msg, enum proto_reason r, size_t k,
    const char *tok, size_t toklen, const char *post)
{
	size_t n = 0;

	msg->kind = PROTO_EMPTY;
	msg->reason = r;
	msg->detail[0] = '\0';
	d_str(msg, &n, "value ");
	d_uint(msg, &n, k);
	d_str(msg, &n, " ");
	d_tok(msg, &n, tok, toklen);
	d_str(msg, &n, post);
	return PROTO_ERROR;
}

/* ---------------------------------------------------------------------
 * Line checks: NUL bytes and UTF-8 (RFC 3629; Unicode 15 table 3-7).
 */


/*
 * Check s[0..n) for NUL bytes and invalid UTF-8 (bytes up to lim may be
 * read). Sixteen bytes at a time with SSE2, else eight while they are
 * all in 0x01-0x7f: (v - 0x01..01) | v has a high bit set
 * in some byte iff some byte is 0x00 or >= 0x80 (a borrow only starts at a
 * zero byte). Returns PROTO_MSG or the PROTO_ERROR from reject().
 */
static int
check_bytes(const char *s, size_t n, const char *lim, struct proto_msg *msg)
{
	const unsigned char *p = (const unsigned char *)s;
	const uint64_t ones = 0x0101010101010101ULL;
	const uint64_t highs = 0x8080808080808080ULL;
	size_t i = 0, k;
	uint64_t v;

#ifdef __SSE2__
	/*
	 * 16 bytes at a time, the last block masked when 16 bytes can be
	 * read there (lim): the sign bits are the bytes >= 0x80, cmpeq
	 * finds the NULs. Any hit goes to the loop below for its message.
	 */
	for (;;) {
		__m128i b;
		unsigned bad;

		if (n - i < 16 && (size_t)(lim - (s + i)) < 16)
			break;
		b = _mm_loadu_si128((const __m128i *)(const void *)(p + i));
		bad = (unsigned)(_mm_movemask_epi8(b) |
		    _mm_movemask_epi8(_mm_cmpeq_epi8(b, _mm_setzero_si128())));
		if (n - i < 16)
			bad &= (1u << (n - i)) - 1;
		if (bad != 0)
			break;
		if (n - i <= 16)
			return PROTO_MSG;
		i += 16;
	}
#else
	(void)lim;
#endif
	while (i < n) {
		if (n - i >= 8) {
			memcpy(&v, p + i, 8);
			if ((((v - ones) | v) & highs) == 0) {
				i += 8;
				continue;
			}
		}
		if (p[i] == 0) {
			size_t dn = 0;

			msg->kind = PROTO_EMPTY;
			msg->reason = PROTO_R_NUL_BYTE;
			d_str(msg, &dn, "NUL byte at byte ");
			d_uint(msg, &dn, i + 1);
			return PROTO_ERROR;
		}
		if (p[i] < 0x80) {
			i++;
			continue;
		}
		k = json_utf8_seq(p + i, n - i);
		if (k == 0) {
			size_t dn = 0;

			msg->kind = PROTO_EMPTY;
			msg->reason = PROTO_R_BAD_UTF8;
			d_str(msg, &dn, "invalid UTF-8 at byte ");
			d_uint(msg, &dn, i + 1);
			return PROTO_ERROR;
		}
		i += k;
	}
	return PROTO_MSG;
}

/* ---------------------------------------------------------------------
 * Tokens and line forms.
 */


/*
 * Next token into *t (blank-separated); returns 0 at end of line. *eq is
 * set to the first '=' in the token or NULL.
 */
static int
next_token(struct cursor *c, struct proto_str *t, const char **eq)
{
	const char *p = c->p, *start;

	while (p < c->end && IS(*p, C_BLANK))
		p++;
	if (p == c->end) {
		c->p = p;
		return 0;
	}
	start = p;
	*eq = NULL;
	for (; p < c->end && !IS(*p, C_BLANK); p++)
		if (*p == '=' && *eq == NULL)
			*eq = p;
	t->ptr = start;
	t->len = (size_t)(p - start);
	c->p = p;
	return 1;
}

/* Number token to *v, or the matching reject for the K-th value. */
static int
value_number(struct proto_msg *msg, size_t k, const char *tok,
    size_t toklen, const char *num, size_t numlen, double *v)
{
	int rc = proto_parse_number(num, numlen, v);

	if (rc == 0)
		return PROTO_MSG;
	if (rc == E_NUMERIC)
		return reject_value(msg, PROTO_R_NON_FINITE, k, tok, toklen,
		    " is not a finite number");
	return reject_value(msg, PROTO_R_NOT_A_NUMBER, k, tok, toklen,
	    " is not a decimal number");
}

#define DUP_LINEAR	16	/* up to this many names: pairwise compare */
#define DUP_SLOTS	512	/* hash slots (> 2 * PROTO_MAX_VALUES) */

/* FNV-1a (Fowler, Noll, Vo), 32-bit; constants from memory (any hash
 * would do: collisions only cost a comparison). */
static uint32_t
name_hash(const char *s, size_t len)
{
	uint32_t h = 2166136261u;
	size_t i;

	for (i = 0; i < len; i++) {
		h ^= (unsigned char)s[i];
		h *= 16777619u;
	}
	return h;
}

static int
same_name(const struct proto_str *a, const char *s, size_t len)
{
	return a->len == len && a->ptr[0] == s[0] &&
	    memcmp(a->ptr, s, len) == 0;
}

/*
 * Insert values[idx].name into the open-addressing table slots (entries
 * are index + 1, 0 = empty); returns 1 if an equal name was there.
 */
static int
dup_insert(uint16_t *slots, const struct proto_value *values, size_t idx)
{
	const struct proto_str *nm = &values[idx].name;
	uint32_t h = name_hash(nm->ptr, nm->len) & (DUP_SLOTS - 1);

	while (slots[h] != 0) {
		if (same_name(&values[slots[h] - 1].name, nm->ptr, nm->len))
			return 1;
		h = (h + 1) & (DUP_SLOTS - 1);
	}
	slots[h] = (uint16_t)(idx + 1);
	return 0;
}

/*
 * Is the name just stored at msg->values[msg->nvalues] already among the
 * earlier ones? Pairwise for a few names, then an open-addressing table
 * built on first use (*hashed), so a line of 256 names costs O(n).
 */
static int
is_dup(struct proto_msg *msg, uint16_t *slots, int *hashed)
{
	const struct proto_str *nm = &msg->values[msg->nvalues].name;
	size_t i;

	if (msg->nvalues < DUP_LINEAR) {
		for (i = 0; i < msg->nvalues; i++)
			if (same_name(&msg->values[i].name, nm->ptr, nm->len))
				return 1;
		return 0;
	}
	if (!*hashed) {
		memset(slots, 0, DUP_SLOTS * sizeof(*slots));
		for (i = 0; i < msg->nvalues; i++)
			(void)dup_insert(slots, msg->values, i);
		*hashed = 1;
	}
	return dup_insert(slots, msg->values, msg->nvalues);
}

static int
too_many(struct proto_msg *msg)
{
	size_t n = 0;

	msg->kind = PROTO_EMPTY;
	msg->reason = PROTO_R_TOO_MANY_VALUES;
	d_str(msg, &n, "more than ");
	d_uint(msg, &n, PROTO_MAX_VALUES);
	d_str(msg, &n, " values");
	return PROTO_ERROR;
}

/* Does the number scanned end its token? */
#define ENDS_TOKEN(c, ns) \
	((ns).stop == (c)->end || IS(*(ns).stop, C_BLANK))

/*
 * VALUES after the model (and time): positional or named. target: 1 on a
 * record line, where the first positional token is the target or `?`;
 * 0 for .predict, where every positional token is a regressor.
 *
 * Two fast paths read a plain number or NAME=number in one pass over the
 * token; anything else (the `?` target, and every error) takes the
 * general path, which reads the whole token first and gives the same
 * results for the tokens the fast paths take.
 */
static int
parse_values(struct cursor *c, struct proto_msg *msg, int target)
{
	struct proto_str t;
	struct numscan ns;
	struct proto_value *val;
	const char *eq = NULL, *p, *q;
	size_t k = 0, nlen;
	uint16_t slots[DUP_SLOTS];
	int hashed = 0, rc;
	double v = 0.0;

	for (;;) {
		q = NULL;
		for (p = c->p; p < c->end && IS(*p, C_BLANK); p++)
			;
		c->p = p;
		if (p == c->end)
			break;
		if (++k > PROTO_MAX_VALUES)
			return too_many(msg);
		val = &msg->values[msg->nvalues];

		/* Fast path: a positional number. */
		if (!msg->named && (swar_number(p, c->end, c->lim, &q, &v) ||
		    quick_number(p, c->end, &q, &v) ||
		    (num_scan(p, c->end, &ns) == 0 && ENDS_TOKEN(c, ns)))) {
			if (q == NULL) {	/* not the quick case */
				if (num_value(p, &ns, &v) != 0)
					return reject_value(msg,
					    PROTO_R_NON_FINITE, k, p,
					    (size_t)(ns.stop - p),
					    " is not a finite number");
				q = ns.stop;
			}
			c->p = q;
			if (target && k == 1) {
				msg->target = v;
				msg->has_target = 1;
			} else {
				val->name.ptr = NULL;
				val->name.len = 0;
				val->v = v;
				msg->nvalues++;
			}
			continue;
		}

		/* Fast path: NAME=number. */
		if (k == 1 || msg->named) {
			for (q = p; q < c->end && IS(*q, C_FIELD); q++)
				;
			nlen = (size_t)(q - p);
			if (q < c->end && *q == '=' && nlen > 0 &&
			    nlen <= FIELD_NAME_MAX && IS(*p, C_FIELD0)) {
				const char *num = q + 1, *stop = NULL;
				int quick = num < c->end &&
				    (swar_number(num, c->end, c->lim, &stop,
				    &val->v) || quick_number(num, c->end, &stop,
				    &val->v));

				if (!quick && (num_scan(num, c->end, &ns) != 0 ||
				    !ENDS_TOKEN(c, ns)))
					goto general;
				if (!quick)
					stop = ns.stop;
				msg->named = 1;
				val->name.ptr = p;
				val->name.len = nlen;
				if (is_dup(msg, slots, &hashed))
					return reject_value(msg,
					    PROTO_R_DUPLICATE_FIELD, k, p,
					    (size_t)(stop - p),
					    ": field name already given on "
					    "this line");
				if (!quick && num_value(num, &ns, &val->v) != 0)
					return reject_value(msg,
					    PROTO_R_NON_FINITE, k, p,
					    (size_t)(stop - p),
					    " is not a finite number");
				msg->nvalues++;
				c->p = stop;
				continue;
			}
		}

general:
		/* General path. */
		(void)next_token(c, &t, &eq);
		if (k == 1)
			msg->named = eq != NULL;
		else if ((eq != NULL) != msg->named)
			return reject_value(msg, PROTO_R_MIXED_FORMS, k, t.ptr,
			    t.len, msg->named ? " is positional after "
			    "NAME=VALUE values" : " is NAME=VALUE after "
			    "positional values");
		if (!msg->named) {
			if (target && k == 1 && t.len == 1 && t.ptr[0] == '?') {
				msg->kind = PROTO_PREDICT;
				continue;
			}
			rc = value_number(msg, k, t.ptr, t.len, t.ptr, t.len,
			    &val->v);
			if (rc != PROTO_MSG)
				return rc;
			/* Valid numbers normally take the fast path. */
			if (target && k == 1) {
				msg->target = val->v;
				msg->has_target = 1;
			} else {
				val->name.ptr = NULL;
				val->name.len = 0;
				msg->nvalues++;
			}
			continue;
		}
		nlen = (size_t)(eq - t.ptr);
		if (proto_check_field_name(t.ptr, nlen) != 0)
			return reject_value(msg, PROTO_R_BAD_FIELD_NAME, k,
			    t.ptr, t.len, ": bad field name (1-32 of "
			    "[A-Za-z0-9_], not starting with a digit)");
		val->name.ptr = t.ptr;
		val->name.len = nlen;
		if (is_dup(msg, slots, &hashed))
			return reject_value(msg, PROTO_R_DUPLICATE_FIELD, k,
			    t.ptr, t.len, ": field name already given on "
			    "this line");
		rc = value_number(msg, k, t.ptr, t.len, eq + 1,
		    (size_t)(t.ptr + t.len - eq - 1), &val->v);
		if (rc != PROTO_MSG)
			return rc;
		msg->nvalues++;		/* normally the fast path's job */
	}
	if (k == 0) {
		size_t n = 0;

		msg->kind = PROTO_EMPTY;
		msg->reason = PROTO_R_NO_VALUES;
		d_str(msg, &n, "no values after model ");
		d_tok(msg, &n, msg->model.ptr, msg->model.len);
		return PROTO_ERROR;
	}
	return PROTO_MSG;
}

/* A positive decimal count 1..PROTO_COUNT_MAX, or E_ARG. */
static int
parse_count(const char *s, size_t len, uint32_t *out)
{
	uint64_t v = 0;
	size_t i;

	if (len == 0 || len > 10)
		return E_ARG;
	for (i = 0; i < len; i++) {
		if (!IS(s[i], C_DIGIT))
			return E_ARG;
		v = v * 10 + (uint64_t)(s[i] - '0');
	}
	if (v < 1 || v > PROTO_COUNT_MAX)
		return E_ARG;
	*out = (uint32_t)v;
	return 0;
}

#define EVERY		"every="
#define EVERY_LEN	(sizeof(EVERY) - 1)

static int
is_every(const struct proto_str *a)
{
	return a->len >= EVERY_LEN && memcmp(a->ptr, EVERY, EVERY_LEN) == 0;
}

static int
bad_count(struct proto_msg *msg, const struct proto_str *a)
{
	size_t n;

	reject(msg, PROTO_R_BAD_ARGUMENTS, NULL, a->ptr, a->len,
	    ": N must be an integer from 1 to ");
	n = strlen(msg->detail);
	d_uint(msg, &n, PROTO_COUNT_MAX);
	return PROTO_ERROR;
}

static int
bad_name(struct proto_msg *msg, const struct proto_str *a)
{
	return reject(msg, PROTO_R_BAD_MODEL_NAME, NULL, a->ptr, a->len,
	    " is not a valid model name (1-64 of [A-Za-z0-9_.-], "
	    "starting with a letter or digit)");
}

/* Arity message: ".get takes 1 argument, got 0". */
static int
bad_arity(struct proto_msg *msg, const struct proto_cmd_info *ci,
    size_t got)
{
	size_t n = 0;

	msg->kind = PROTO_EMPTY;
	msg->reason = PROTO_R_BAD_ARGUMENTS;
	d_str(msg, &n, ci->name);
	if (ci->max_args == 0)
		d_str(msg, &n, " takes no arguments");
	else if (ci->max_args == ANY) {
		d_str(msg, &n, " takes at least ");
		d_uint(msg, &n, (uint64_t)ci->min_args);
		d_str(msg, &n, ci->min_args == 1 ? " argument" : " arguments");
	} else if (ci->min_args == ci->max_args) {
		d_str(msg, &n, " takes ");
		d_uint(msg, &n, (uint64_t)ci->min_args);
		d_str(msg, &n, ci->min_args == 1 ? " argument" : " arguments");
	} else {
		d_str(msg, &n, " takes ");
		d_uint(msg, &n, (uint64_t)ci->min_args);
		d_str(msg, &n, " to ");
		d_uint(msg, &n, (uint64_t)ci->max_args);
		d_str(msg, &n, " arguments");
	}
	d_str(msg, &n, ", got ");
	d_uint(msg, &n, got);
	return PROTO_ERROR;
}

/* A line whose first token, word, starts with '.'. */
static int
parse_command(struct cursor *c, struct proto_msg *msg,
    const struct proto_str *word)
{
	const struct proto_cmd_info *ci;
	struct proto_str t, *a = msg->args;
	const char *eq;
	size_t got = 0;

	ci = proto_cmd_find(word->ptr, word->len);
	if (ci == NULL)
		return reject(msg, PROTO_R_UNKNOWN_COMMAND, NULL, word->ptr,
		    word->len, " is not a command");
	msg->cmd = ci->cmd;
	msg->kind = PROTO_COMMAND;

	if (ci->flags & PROTO_CMD_VALUES) {
		/* .predict NAME VALUES...: NAME here, the rest as values. */
		if (!next_token(c, &t, &eq))
			return bad_arity(msg, ci, 0);
		msg->nargs = 1;
		a[0] = t;
		if (proto_check_model_name(t.ptr, t.len) != 0)
			return bad_name(msg, &t);
		msg->model = t;
		msg->kind = PROTO_PREDICT;
		return parse_values(c, msg, 0);
	}

	while (next_token(c, &t, &eq)) {
		if (got < PROTO_MAX_ARGS)
			a[got] = t;
		got++;
	}
	msg->nargs = got < PROTO_MAX_ARGS ? got : PROTO_MAX_ARGS;
	if (got < (size_t)ci->min_args ||
	    (ci->max_args != ANY && got > (size_t)ci->max_args))
		return bad_arity(msg, ci, got);

	if (ci->flags & PROTO_CMD_NAME) {
		if (proto_check_model_name(a[0].ptr, a[0].len) != 0)
			return bad_name(msg, &a[0]);
		msg->model = a[0];
	}
	switch (ci->cmd) {
	case PROTO_CMD_HISTORY:
		if (got == 2 && parse_count(a[1].ptr, a[1].len,
		    &msg->count) != 0)
			return bad_count(msg, &a[1]);
		break;
	case PROTO_CMD_WATCH:
		/* .watch [NAME|*] [every=N] */
		if (got >= 1 && !is_every(&a[0])) {
			if (!(a[0].len == 1 && a[0].ptr[0] == '*')) {
				if (proto_check_model_name(a[0].ptr,
				    a[0].len) != 0)
					return bad_name(msg, &a[0]);
				msg->model = a[0];
			}
			if (got == 2 && !is_every(&a[1]))
				return reject(msg, PROTO_R_BAD_ARGUMENTS,
				    NULL, a[1].ptr, a[1].len,
				    ": expected every=N");
			if (got == 2 && parse_count(a[1].ptr + EVERY_LEN,
			    a[1].len - EVERY_LEN, &msg->every) != 0)
				return bad_count(msg, &a[1]);
		} else if (got >= 1) {
			if (got == 2)
				return reject(msg, PROTO_R_BAD_ARGUMENTS,
				    NULL, a[1].ptr, a[1].len,
				    ": every=N must come last");
			if (parse_count(a[0].ptr + EVERY_LEN,
			    a[0].len - EVERY_LEN, &msg->every) != 0)
				return bad_count(msg, &a[0]);
		}
		break;
	default:
		break;
	}
	return PROTO_MSG;
}

/*
 * The line s[0..len) as proto_parse_line; the bytes up to lim (>= s +
 * len) may be read too (never used), which lets the number fast path
 * load whole words near the end of the line.
 */
static int
parse_line(const char *s, size_t len, const char *lim, uint64_t lineno,
    struct proto_msg *msg)
{
	struct cursor c;
	struct proto_str t;
	const char *eq;
	int rc;

	/* Set only the small fields; values[] is filled as far as used. */
	msg->kind = PROTO_EMPTY;
	msg->line = lineno;
	msg->cmd = PROTO_CMD_NONE;
	msg->model.ptr = NULL;
	msg->model.len = 0;
	msg->has_time = 0;
	msg->time = 0.0;
	msg->has_target = 0;
	msg->target = 0.0;
	msg->named = 0;
	msg->nargs = 0;
	msg->count = 0;
	msg->every = 0;
	msg->reason = PROTO_NREASONS;
	msg->detail[0] = '\0';
	msg->nvalues = 0;

	if (len > 0 && s[len - 1] == '\r')
		len--;
	c.p = s;
	c.end = s + len;
	c.lim = lim;
	while (c.p < c.end && IS(*c.p, C_BLANK))
		c.p++;
#if HAVE_SWAR
	/*
	 * A feed record first. A line fast_record takes is made of blanks,
	 * model name bytes, digits, points, signs and one '@', each looked
	 * at, so check_bytes would find nothing in it; any other line is
	 * checked and parsed below as if this had not been tried.
	 */
	if (c.p < c.end && IS(*c.p, C_ALNUM)) {
		const char *p = c.p;

		while (p < c.end && IS(*p, C_MODEL))
			p++;
		if ((p == c.end || IS(*p, C_BLANK)) &&
		    (size_t)(p - c.p) <= MODEL_NAME_MAX) {
			struct cursor fc = { p, c.end, lim };

			msg->model.ptr = c.p;
			msg->model.len = (size_t)(p - c.p);
			if (fast_record(&fc, msg)) {
				msg->kind = PROTO_RECORD;
				return PROTO_MSG;
			}
			msg->model.ptr = NULL;
			msg->model.len = 0;
			msg->has_time = msg->has_target = 0;
			msg->time = msg->target = 0.0;
			msg->nvalues = 0;
		}
	}
#endif
	if ((rc = check_bytes(s, len, lim, msg)) != PROTO_MSG)
		return rc;
	if (c.p == c.end || *c.p == '#')
		return PROTO_MSG;	/* PROTO_EMPTY */
	if (*c.p == '.') {
		(void)next_token(&c, &t, &eq);
		return parse_command(&c, msg, &t);
	}

	/* The model name, checked as it is scanned. */
	{
		const char *p = c.p;

		while (p < c.end && IS(*p, C_MODEL))
			p++;
		if ((p < c.end && !IS(*p, C_BLANK)) || !IS(*c.p, C_ALNUM) ||
		    (size_t)(p - c.p) > MODEL_NAME_MAX) {
			(void)next_token(&c, &t, &eq);
			return bad_name(msg, &t);
		}
		msg->model.ptr = c.p;
		msg->model.len = (size_t)(p - c.p);
		c.p = p;
	}
	msg->kind = PROTO_RECORD;

	/* Optional @TIME right after the model. */
	while (c.p < c.end && IS(*c.p, C_BLANK))
		c.p++;
	if (c.p < c.end && *c.p == '@') {
		(void)next_token(&c, &t, &eq);
		if (proto_parse_time(t.ptr + 1, t.len - 1, &msg->time) != 0)
			return reject(msg, PROTO_R_BAD_TIME, NULL, t.ptr,
			    t.len, " is not a valid time (epoch seconds or "
			    "RFC 3339 date-time)");
		msg->has_time = 1;
	}
	return parse_values(&c, msg, 1);
}

/*
 * proto_parse_line: parse one complete line s[0..len) without its LF; a
 * final CR is dropped. lineno is copied to msg->line. Does not apply a
 * length cap (the reader does). Returns PROTO_MSG with msg filled, or
 * PROTO_ERROR with msg->reason and msg->detail set (see struct proto_msg
 * for which fields are then meaningful). Pointers in msg point into s.
 * Reads no byte outside s[0..len).
 */
int
proto_parse_line(const char *s, size_t len, uint64_t lineno,
    struct proto_msg *msg)
{
	return parse_line(s, len, s + len, lineno, msg);
}

/* ---------------------------------------------------------------------
 * The incremental reader.
 */

/* Spare bytes after a line assembled in the reader: what the feed fast
 * path may read past a line's end (a window and a word). */
#define RD_PAD		(LINE_WIN + SWAR_READ)

/* Parse the n-byte line assembled in rd->buf; the RD_PAD bytes after it
 * are zeroed and are all the parser may read past it. */
static int
rd_parse(struct proto_reader *rd, size_t n, struct proto_msg *msg)
{
	memset(rd->buf + n, 0, RD_PAD);
	return parse_line(rd->buf, n, rd->buf + n + RD_PAD, rd->line, msg);
}

/*
 * proto_reader_new: a reader for lines of at most maxline bytes (LF
 * excluded, a CR before it included), 1 <= maxline <= PROTO_LINE_MAX.
 * Allocates its line buffer once. Returns NULL on a bad maxline or when
 * out of memory. The caller owns the reader; free with proto_reader_free.
 */
struct proto_reader *
proto_reader_new(size_t maxline)
{
	struct proto_reader *rd;

	if (maxline == 0 || maxline > PROTO_LINE_MAX)
		return NULL;
	if ((rd = calloc(1, sizeof(*rd))) == NULL)
		return NULL;
	/* RD_PAD spare bytes, so a line assembled here can be read a word
	 * at a time up to its end like one parsed in place (rd_parse zeroes
	 * the RD_PAD bytes after the line). malloc, not calloc: a
	 * connection's buffer stays out of memory until lines fill it
	 * (calloc made 9,000 idle connections resident at 64 KiB each). */
	if ((rd->buf = malloc(maxline + RD_PAD)) == NULL)
		goto fail;
	rd->cap = maxline;
	return rd;
fail:
	free(rd);
	return NULL;
}

/* proto_reader_free: release rd and its buffer. NULL is a no-op. */
void
proto_reader_free(struct proto_reader *rd)
{
	if (rd == NULL)
		return;
	free(rd->buf);
	free(rd);
}

/*
 * proto_reader_reset: forget any partial line and restart line numbering
 * at 1, as for a new connection. Invalidates pointers in earlier messages.
 */
void
proto_reader_reset(struct proto_reader *rd)
{
	rd->len = 0;
	rd->line = 0;
	rd->skipping = 0;
}

static int
too_long(struct proto_reader *rd, struct proto_msg *msg)
{
	size_t n = 0;

	msg->kind = PROTO_EMPTY;
	msg->line = rd->line;
	msg->cmd = PROTO_CMD_NONE;
	msg->model.ptr = NULL;
	msg->model.len = 0;
	msg->has_time = msg->has_target = msg->named = 0;
	msg->time = msg->target = 0.0;
	msg->nargs = msg->nvalues = 0;
	msg->count = msg->every = 0;
	msg->reason = PROTO_R_LINE_TOO_LONG;
	msg->detail[0] = '\0';
	d_str(msg, &n, "line is longer than ");
	d_uint(msg, &n, rd->cap);
	d_str(msg, &n, " bytes");
	return PROTO_ERROR;
}

/*
 * proto_next: consume bytes from buf[0..len) until one line is complete,
 * set *used to the number of bytes consumed, and report that line:
 *   PROTO_MSG        *msg holds the parsed line.
 *   PROTO_ERROR      the line was rejected: msg->line, msg->reason,
 *                    msg->detail (and msg->model when known) are set.
 *   PROTO_NEED_MORE  all of buf was consumed (*used == len) and no line
 *                    was completed; a partial line is kept in the reader.
 * Call again with the unconsumed rest (buf + *used) until NEED_MORE. A
 * line that lies wholly in buf is parsed in place (msg points into buf);
 * otherwise it is assembled in the reader's buffer. A line longer than
 * maxline gives one line_too_long error as soon as the cap is exceeded and
 * the rest of it, up to its LF, is skipped silently.
 */
int
proto_next(struct proto_reader *rd, const char *buf, size_t len,
    size_t *used, struct proto_msg *msg)
{
	const char *nl;
	size_t off = 0, n;

	if (len == 0) {		/* buf may be NULL then */
		*used = 0;
		return PROTO_NEED_MORE;
	}
	for (;;) {
		nl = off < len ? memchr(buf + off, '\n', len - off) : NULL;
		if (rd->skipping) {
			if (nl == NULL) {
				*used = len;
				return PROTO_NEED_MORE;
			}
			rd->skipping = 0;
			off = (size_t)(nl - buf) + 1;
			continue;
		}
		n = nl != NULL ? (size_t)(nl - buf) - off : len - off;
		if (n > rd->cap - rd->len) {
			rd->line++;
			rd->len = 0;
			if (nl != NULL)
				*used = (size_t)(nl - buf) + 1;
			else {
				*used = len;
				rd->skipping = 1;
			}
			return too_long(rd, msg);
		}
		if (nl == NULL) {
			if (n > 0)
				memcpy(rd->buf + rd->len, buf + off, n);
			rd->len += n;
			*used = len;
			return PROTO_NEED_MORE;
		}
		*used = (size_t)(nl - buf) + 1;
		rd->line++;
		if (rd->len == 0)
			return parse_line(buf + off, n, buf + len, rd->line,
			    msg);
		memcpy(rd->buf + rd->len, buf + off, n);
		n += rd->len;
		rd->len = 0;
		return rd_parse(rd, n, msg);
	}
}

/*
 * proto_finish: at end of input, parse a pending final line that had no
 * LF (a CR at its end is dropped, as before an LF). Returns PROTO_MSG or
 * PROTO_ERROR as proto_next does, or PROTO_NEED_MORE when nothing was
 * pending (including the tail of an over-long line, already reported).
 * The reader is then empty; line numbering continues.
 */
int
proto_finish(struct proto_reader *rd, struct proto_msg *msg)
{
	size_t n;

	if (rd->skipping) {
		rd->skipping = 0;
		return PROTO_NEED_MORE;
	}
	if (rd->len == 0)
		return PROTO_NEED_MORE;
	rd->line++;
	n = rd->len;
	rd->len = 0;
	return rd_parse(rd, n, msg);
}

/* ---------------------------------------------------------------------
 * Replies.
 */

/*
 * proto_format_error: write {"error":"<reason>","line":N,"detail":"..."}
 * as one JSON value into j (line 0 when the error is not about a line;
 * detail NULL writes ""). Returns 0, or E_LIMIT when j overflowed.
 */
int
proto_format_error(struct json *j, uint64_t line, enum proto_reason r,
    const char *detail)
{
	json_obj_begin(j);
	json_key(j, "error");
	json_str(j, proto_reason_str(r));
	json_key(j, "line");
	json_uint(j, line);
	json_key(j, "detail");
	json_str(j, detail != NULL ? detail : "");
	return json_obj_end(j);
}
