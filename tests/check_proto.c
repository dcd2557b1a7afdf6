/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for proto: every line form, every parser error reason, every
 * command and its arity errors, numbers against glibc strtod (1e6 seeded
 * random strings, bit for bit), times against Python's datetime, the
 * incremental reader fed whole / one byte at a time / in random chunks,
 * over-long lines, NUL bytes, invalid UTF-8, and the JSON error reply.
 * Attacking the reader's error paths byte by byte follows Redis
 * tests/unit/protocol.tcl (common practice for incremental parsers).
 */
#include <check.h>
#include <float.h>
#include <math.h>
#include <regex.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "json.h"
#include "proto.h"
#include "suites.h"

static struct proto_msg msg;

/* splitmix64 (S. Vigna, public domain): a seeded, portable PRNG. */
static uint64_t
rng_next(uint64_t *s)
{
	uint64_t z = (*s += 0x9e3779b97f4a7c15ULL);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
	return z ^ (z >> 31);
}

static int
parse(const char *line)
{
	return proto_parse_line(line, strlen(line), 1, &msg);
}

static int
str_eq(struct proto_str s, const char *want)
{
	return s.len == strlen(want) && memcmp(s.ptr, want, s.len) == 0;
}

static void
expect_reason(const char *line, enum proto_reason r)
{
	int rc = parse(line);

	ck_assert_msg(rc == PROTO_ERROR && msg.reason == r,
	    "line \"%s\": rc %d reason %s, want %s", line, rc,
	    rc == PROTO_ERROR ? proto_reason_str(msg.reason) : "-",
	    proto_reason_str(r));
	ck_assert_int_eq(msg.kind, PROTO_EMPTY);
	ck_assert_uint_gt(strlen(msg.detail), 0);
}

static void
expect_ok(const char *line)
{
	int rc = parse(line);

	ck_assert_msg(rc == PROTO_MSG, "line \"%s\": %s (%s)", line,
	    proto_reason_str(msg.reason), msg.detail);
	ck_assert_int_eq(msg.reason, PROTO_NREASONS);
	ck_assert_str_eq(msg.detail, "");
}

static int
same_bits(double a, double b)
{
	return memcmp(&a, &b, sizeof(a)) == 0;
}

/* ------------------------------------------------------------------ */

START_TEST(test_proto_record_positional)
{
	expect_ok("boiler 71.25 3.5 -2e3");
	ck_assert_int_eq(msg.kind, PROTO_RECORD);
	ck_assert_int_eq(msg.cmd, PROTO_CMD_NONE);
	ck_assert(str_eq(msg.model, "boiler"));
	ck_assert_int_eq(msg.has_time, 0);
	ck_assert_int_eq(msg.has_target, 1);
	ck_assert(msg.target == 71.25);
	ck_assert_int_eq(msg.named, 0);
	ck_assert_uint_eq(msg.nvalues, 2);
	ck_assert(msg.values[0].v == 3.5);
	ck_assert(msg.values[1].v == -2000.0);
	ck_assert_ptr_null(msg.values[0].name.ptr);
	ck_assert_uint_eq(msg.values[0].name.len, 0);

	/* Target only: one value is enough. */
	expect_ok("m 5");
	ck_assert_int_eq(msg.has_target, 1);
	ck_assert_uint_eq(msg.nvalues, 0);
}
END_TEST

START_TEST(test_proto_record_blanks)
{
	/* One or more spaces or tabs separate tokens; leading and trailing
	 * blanks and a CR before the LF are ignored. */
	expect_ok(" \t m\t\t1   2 \t");
	ck_assert(str_eq(msg.model, "m"));
	ck_assert(msg.target == 1.0);
	ck_assert_uint_eq(msg.nvalues, 1);
	expect_ok("m 1 2\r");
	ck_assert_uint_eq(msg.nvalues, 1);
	ck_assert(msg.values[0].v == 2.0);
	/* Only one CR is stripped; another one is part of the token. */
	expect_reason("m 1 2\r\r", PROTO_R_NOT_A_NUMBER);
	/* Other white space is not a separator. */
	expect_reason("m 1\v2", PROTO_R_NOT_A_NUMBER);
}
END_TEST

START_TEST(test_proto_record_predict)
{
	expect_ok("m ? 1 2");
	ck_assert_int_eq(msg.kind, PROTO_PREDICT);
	ck_assert_int_eq(msg.cmd, PROTO_CMD_NONE);
	ck_assert_int_eq(msg.has_target, 0);
	ck_assert_uint_eq(msg.nvalues, 2);
	ck_assert(msg.values[1].v == 2.0);
	expect_ok("m @10 ?");
	ck_assert_int_eq(msg.kind, PROTO_PREDICT);
	ck_assert_uint_eq(msg.nvalues, 0);
	/* `?` only as the target. */
	expect_reason("m 1 ?", PROTO_R_NOT_A_NUMBER);
	expect_reason("m ?? 1", PROTO_R_NOT_A_NUMBER);
}
END_TEST

START_TEST(test_proto_record_named)
{
	expect_ok("pump_2 y=1 a=2.5 b=-0 _c9=1e3");
	ck_assert_int_eq(msg.kind, PROTO_RECORD);
	ck_assert_int_eq(msg.named, 1);
	ck_assert_int_eq(msg.has_target, 0);
	ck_assert_uint_eq(msg.nvalues, 4);
	ck_assert(str_eq(msg.values[0].name, "y"));
	ck_assert(str_eq(msg.values[1].name, "a"));
	ck_assert(str_eq(msg.values[2].name, "b"));
	ck_assert(str_eq(msg.values[3].name, "_c9"));
	ck_assert(msg.values[1].v == 2.5);
	ck_assert(same_bits(msg.values[2].v, -0.0));
	ck_assert(msg.values[3].v == 1000.0);
	/* A 32-byte name is the longest. */
	expect_ok("m abcdefghijklmnopqrstuvwxyz012345=1");
	expect_reason("m abcdefghijklmnopqrstuvwxyz0123456=1",
	    PROTO_R_BAD_FIELD_NAME);
	expect_reason("m =1", PROTO_R_BAD_FIELD_NAME);
	expect_reason("m 1a=1", PROTO_R_BAD_FIELD_NAME);
	expect_reason("m a-b=1", PROTO_R_BAD_FIELD_NAME);
	expect_reason("m a.b=1", PROTO_R_BAD_FIELD_NAME);
	expect_reason("m a=", PROTO_R_NOT_A_NUMBER);
	expect_reason("m a=?", PROTO_R_NOT_A_NUMBER);
	expect_reason("m a==1", PROTO_R_NOT_A_NUMBER);
	expect_reason("m a=1 b=nan", PROTO_R_NON_FINITE);
	expect_reason("m a=1 b=2 a=3", PROTO_R_DUPLICATE_FIELD);
	ck_assert_str_eq(msg.detail, "value 3 \"a=3\": field name already "
	    "given on this line");
	/* Names are case-sensitive. */
	expect_ok("m a=1 A=2");
}
END_TEST

START_TEST(test_proto_record_mixed_forms)
{
	expect_reason("m 1 a=2", PROTO_R_MIXED_FORMS);
	ck_assert_str_eq(msg.detail, "value 2 \"a=2\" is NAME=VALUE after "
	    "positional values");
	expect_reason("m a=1 2", PROTO_R_MIXED_FORMS);
	expect_reason("m a=1 ?", PROTO_R_MIXED_FORMS);
	expect_reason("m ? a=1", PROTO_R_MIXED_FORMS);
	expect_reason(".predict m a=1 2", PROTO_R_MIXED_FORMS);
	expect_reason(".predict m 2 a=1", PROTO_R_MIXED_FORMS);
}
END_TEST

START_TEST(test_proto_empty_and_comments)
{
	static const char *const empty[] = {
		"", " ", "\t \t", "\r", "#", "# comment", "  \t#x y z",
		"#.get m", "#\xc3\xa9\xe2\x82\xac", " #",
	};
	size_t i;

	for (i = 0; i < sizeof(empty) / sizeof(empty[0]); i++) {
		expect_ok(empty[i]);
		ck_assert_int_eq(msg.kind, PROTO_EMPTY);
		ck_assert_int_eq(msg.cmd, PROTO_CMD_NONE);
		ck_assert_ptr_null(msg.model.ptr);
	}
	/* A '#' later in the line is not a comment. */
	expect_reason("m 1 # note", PROTO_R_NOT_A_NUMBER);
}
END_TEST

START_TEST(test_proto_model_names)
{
	char name[80];

	expect_ok("a 1");
	expect_ok("A.b-c_d 1");
	expect_ok("9x 1");
	expect_ok("0 1");
	ck_assert(str_eq(msg.model, "0"));
	memset(name, 'n', 64);
	strcpy(name + 64, " 1");
	expect_ok(name);			/* 64 bytes */
	ck_assert_uint_eq(msg.model.len, 64);
	memset(name, 'n', 65);
	strcpy(name + 65, " 1");
	expect_reason(name, PROTO_R_BAD_MODEL_NAME);	/* 65 bytes */
	expect_reason("-a 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("_a 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("a/b 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("a:b 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("@1 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("? 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason("a=1 b=2", PROTO_R_BAD_MODEL_NAME);
	expect_reason("caf\xc3\xa9 1", PROTO_R_BAD_MODEL_NAME);
	ck_assert_str_eq(msg.detail, "\"caf\xc3\xa9\" is not a valid model "
	    "name (1-64 of [A-Za-z0-9_.-], starting with a letter or digit)");
	/* "." and ".." start with a dot, so they are (unknown) commands. */
	expect_reason(". 1", PROTO_R_UNKNOWN_COMMAND);
	expect_reason(".. 1", PROTO_R_UNKNOWN_COMMAND);

	ck_assert_int_eq(proto_check_model_name("a", 1), 0);
	ck_assert_int_eq(proto_check_model_name("", 0), E_ARG);
	ck_assert_int_eq(proto_check_model_name("a\0b", 3), E_ARG);
	ck_assert_int_eq(proto_check_field_name("_", 1), 0);
	ck_assert_int_eq(proto_check_field_name("", 0), E_ARG);
}
END_TEST

START_TEST(test_proto_no_and_too_many_values)
{
	char line[256 * 8 + 64];
	size_t n, i;

	expect_reason("m", PROTO_R_NO_VALUES);
	ck_assert_str_eq(msg.detail, "no values after model \"m\"");
	ck_assert(str_eq(msg.model, "m"));	/* known on error */
	expect_reason("m @5", PROTO_R_NO_VALUES);
	expect_reason("m   \t", PROTO_R_NO_VALUES);
	expect_reason(".predict m", PROTO_R_NO_VALUES);

	/* Positional: 256 VALUES tokens, the target among them. */
	n = (size_t)sprintf(line, "m");
	for (i = 0; i < PROTO_MAX_VALUES; i++)
		n += (size_t)sprintf(line + n, " %zu", i);
	expect_ok(line);
	ck_assert_uint_eq(msg.nvalues, PROTO_MAX_VALUES - 1);
	ck_assert(msg.values[PROTO_MAX_VALUES - 2].v == 255.0);
	sprintf(line + n, " 1");
	expect_reason(line, PROTO_R_TOO_MANY_VALUES);
	ck_assert_str_eq(msg.detail, "more than 256 values");

	/* .predict: 256 regressors (no target token). */
	n = (size_t)sprintf(line, ".predict m");
	for (i = 0; i < PROTO_MAX_VALUES; i++)
		n += (size_t)sprintf(line + n, " %zu", i);
	expect_ok(line);
	ck_assert_uint_eq(msg.nvalues, PROTO_MAX_VALUES);
	sprintf(line + n, " 1");
	expect_reason(line, PROTO_R_TOO_MANY_VALUES);

	/* Named: 256 distinct pairs. */
	n = (size_t)sprintf(line, "m");
	for (i = 0; i < PROTO_MAX_VALUES; i++)
		n += (size_t)sprintf(line + n, " f%zu=%zu", i, i);
	expect_ok(line);
	ck_assert_uint_eq(msg.nvalues, PROTO_MAX_VALUES);
	ck_assert(str_eq(msg.values[255].name, "f255"));
	sprintf(line + n, " g=1");
	expect_reason(line, PROTO_R_TOO_MANY_VALUES);
}
END_TEST

START_TEST(test_proto_duplicates_many)
{
	char line[256 * 8 + 64];
	size_t n, i, dup;

	/* Duplicates are found on either side of the switch from pairwise
	 * comparison to the hash table (after 16 names). */
	for (dup = 1; dup < 40; dup++) {
		n = (size_t)sprintf(line, "m");
		for (i = 0; i < dup; i++)
			n += (size_t)sprintf(line + n, " f%zu=1", i);
		sprintf(line + n, " f%zu=2", dup / 2);
		expect_reason(line, PROTO_R_DUPLICATE_FIELD);
		line[n] = '\0';
		expect_ok(line);
	}
	n = (size_t)sprintf(line, "m");
	for (i = 0; i < 255; i++)
		n += (size_t)sprintf(line + n, " f%zu=1", i);
	sprintf(line + n, " f254=2");
	expect_reason(line, PROTO_R_DUPLICATE_FIELD);
	ck_assert_str_eq(msg.detail, "value 256 \"f254=2\": field name "
	    "already given on this line");
}
END_TEST

/* ------------------------------------------------------------------
 * Numbers.
 */

static void
expect_number(const char *s, double want)
{
	double v = 12345.0;
	int rc = proto_parse_number(s, strlen(s), &v);

	ck_assert_msg(rc == 0, "\"%.60s\": rc %d", s, rc);
	ck_assert_msg(same_bits(v, want), "\"%.60s\": got %a want %a", s, v,
	    want);
	/* And the same as glibc strtod. */
	ck_assert_msg(same_bits(v, strtod(s, NULL)), "\"%.60s\" != strtod",
	    s);
}

static void
expect_number_rc(const char *s, int want)
{
	double v = 12345.0;
	int rc = proto_parse_number(s, strlen(s), &v);

	ck_assert_msg(rc == want, "\"%.60s\": rc %d want %d", s, rc, want);
	ck_assert(v == 12345.0);	/* untouched */
}

START_TEST(test_proto_numbers_grammar)
{
	static const char *const bad[] = {
		"", " ", "+", "-", ".", "+.", "-.e1", "e5", "E5", "1e", "1e+",
		"1e-", "1.2.3", "1,5", "0x10", "0X1p3", "1_000", "--1", "+-1",
		"1 ", " 1", "1e1.5", "1e1e1", "1f", "1d", "1L", "..1", "1..",
		"?", "@1", "infinit", "nan(1)", "nana", "in", "+-inf", "infinityy",
		"\xc3\xa9", "1\r", "0b1", "1e 5",
	};
	static const char *const nonfinite[] = {
		"nan", "NaN", "NAN", "-nan", "+nan", "inf", "-inf", "+Inf",
		"INF", "infinity", "-Infinity", "INFINITY", "1e400", "-1e400",
		"1.8e308", "1.7976931348623159e308",
		/* 2^1024 - 2^970, halfway between DBL_MAX and 2^1024: ties to
		 * even, which is 2^1024, so it overflows (Python 3.11:
		 * float(str(2**1024 - 2**970)) == inf). */
		"179769313486231580793728971405303415079934132710037826936173"
		"778980444968292764750946649017977587207096330286416692887910"
		"946555547851940402630657488671505820681908902000708383676273"
		"854845817711531764475730270069855571366959622842914819860834"
		"936475292719074168444365510704342711559699508093042880177904"
		"174497792",
	};
	size_t i;

	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++)
		expect_number_rc(bad[i], E_ARG);
	for (i = 0; i < sizeof(nonfinite) / sizeof(nonfinite[0]); i++)
		expect_number_rc(nonfinite[i], E_NUMERIC);
	/* The same through a record line, with the wire reason. */
	expect_reason("m 0x10", PROTO_R_NOT_A_NUMBER);
	ck_assert_str_eq(msg.detail, "value 1 \"0x10\" is not a decimal "
	    "number");
	expect_reason("m 1 1e", PROTO_R_NOT_A_NUMBER);
	expect_reason("m 1 1.2.3", PROTO_R_NOT_A_NUMBER);
	expect_reason("m 1 1,5", PROTO_R_NOT_A_NUMBER);
	expect_reason("m 1e400", PROTO_R_NON_FINITE);
	ck_assert_str_eq(msg.detail, "value 1 \"1e400\" is not a finite "
	    "number");
	expect_reason("m 1 nan", PROTO_R_NON_FINITE);
	expect_reason("m 1 -nan", PROTO_R_NON_FINITE);
	expect_reason("m 1 inf", PROTO_R_NON_FINITE);
	expect_reason("m -Infinity 1", PROTO_R_NON_FINITE);
}
END_TEST

START_TEST(test_proto_numbers_values)
{
	/* Exact values: decimal arithmetic; IEEE 754 binary64 constants
	 * (min subnormal 2^-1074, min normal 2^-1022, max). */
	expect_number("0", 0.0);
	expect_number("-0", -0.0);
	expect_number("+0", 0.0);
	expect_number("-0.0e-999", -0.0);
	expect_number("0e999999999999999999999", 0.0);
	expect_number("1", 1.0);
	expect_number("+1.", 1.0);
	expect_number(".5", 0.5);
	expect_number("-.25e1", -2.5);
	expect_number("1E3", 1000.0);
	expect_number("1e+3", 1000.0);
	expect_number("00012.500", 12.5);
	expect_number("71.25", 71.25);
	expect_number("9007199254740992", 9007199254740992.0);
	/* 2^53 + 1 is halfway between 2^53 and 2^53 + 2: ties to even. */
	expect_number("9007199254740993", 9007199254740992.0);
	expect_number("9007199254740995", 9007199254740996.0);
	expect_number("1e22", 1e22);
	expect_number("1e23", 1e23);
	expect_number("4.9e-324", 0x1p-1074);
	expect_number("2.4703282292062328e-324", 0x1p-1074);
	expect_number("2.4703282292062327e-324", 0.0);	/* below half */
	expect_number("1e-400", 0.0);	/* underflow: accepted, it is finite */
	expect_number("-1e-400", -0.0);
	expect_number("2.2250738585072014e-308", 0x1p-1022);
	/* The value that hung some strtod implementations in 2011 (from
	 * memory); glibc gives the largest subnormal. */
	expect_number("2.2250738585072011e-308", 0x0.fffffffffffffp-1022);
	expect_number("1.7976931348623157e308", DBL_MAX);
	expect_number("1.7976931348623158e308", DBL_MAX);	/* below tie */
	/* 2^1024 - 2^970 - 1, just below the tie (Python 3.11: float() of
	 * it == DBL_MAX); 309 digits, so the normalised strtod path. */
	expect_number(	    "179769313486231580793728971405303415079934132710037826936173"
	    "778980444968292764750946649017977587207096330286416692887910"
	    "946555547851940402630657488671505820681908902000708383676273"
	    "854845817711531764475730270069855571366959622842914819860834"
	    "936475292719074168444365510704342711559699508093042880177904"
	    "174497791", DBL_MAX);
	expect_number("0.1", 0.1);
	expect_number("123456789012345678901234567890", 1.2345678901234568e29);
	/* Through a record line. */
	expect_ok("m -0 4.9e-324 1e-400 2.2250738585072011e-308");
	ck_assert(same_bits(msg.target, -0.0));
	ck_assert(same_bits(msg.values[0].v, 0x1p-1074));
	ck_assert(same_bits(msg.values[1].v, 0.0));
	ck_assert(same_bits(msg.values[2].v, 0x0.fffffffffffffp-1022));
}
END_TEST

/* A string of n copies of c. */
static char *
rep(char *p, char c, size_t n)
{
	memset(p, c, n);
	return p + n;
}

START_TEST(test_proto_numbers_long)
{
	/* Tokens of 128 bytes or more take the normalised strtod path. The
	 * values are checked against strtod on the same text. */
	static char s[3000];
	char *p;
	double v;

	/* Halfway 2^53 + 1 with 1000 zeros: still a tie, to even. */
	p = s;
	p += sprintf(p, "9007199254740993.");
	p = rep(p, '0', 1000);
	*p = '\0';
	expect_number(s, 9007199254740992.0);
	/* ... and with a 1 after them: just above the tie, rounds up; the
	 * 1 lies beyond the 800 digits kept, so the sticky digit decides. */
	strcpy(p, "1");
	expect_number(s, 9007199254740994.0);
	/* Leading zeros are not significant. */
	p = s;
	p += sprintf(p, "-");
	p = rep(p, '0', 1500);
	p += sprintf(p, "1.5e-3");
	*p = '\0';
	expect_number(s, -0.0015);
	/* Many fraction zeros, then digits: 1e-1200 * 1.5e1200 = 1.5. */
	p = s;
	p += sprintf(p, "0.");
	p = rep(p, '0', 1199);
	p += sprintf(p, "15e1200");
	*p = '\0';
	expect_number(s, 1.5);
	/* A million fraction zeros against an exponent of 1000005: the
	 * exponent must not saturate before the zeros are accounted for.
	 * 10^-1000001 * 10^1000005 = 1e4. */
	{
		static char big[1000100];

		p = big;
		p += sprintf(p, "0.");
		p = rep(p, '0', 1000000);
		p += sprintf(p, "1e1000005");
		*p = '\0';
		expect_number(big, 1e4);
	}
	/* 2000 nines: rounds to 1e2000 = inf. */
	p = rep(s, '9', 2000);
	*p = '\0';
	expect_number_rc(s, E_NUMERIC);
	/* 2000 nines times 1e-2000: rounds to 1. */
	strcpy(p, "e-2000");
	expect_number(s, 1.0);
	/* Huge exponents with long mantissas. */
	p = rep(s, '1', 300);
	strcpy(p, "e-999999999999999999999999");
	expect_number(s, 0.0);
	strcpy(p, "e+999999999999999999999999");
	expect_number_rc(s, E_NUMERIC);
	ck_assert_int_eq(proto_parse_number("1", 1, &v), 0);
}
END_TEST

/*
 * A random decimal string of mixed shapes into out (NUL-terminated);
 * returns its length. All match the protocol grammar.
 */
static size_t
gen_number(uint64_t *rs, char *out)
{
	uint64_t r = rng_next(rs);
	unsigned shape = (unsigned)(r % 16);
	size_t n = 0, i, nd;
	char *p = out;

	r >>= 4;
	switch (r % 4) {	/* sign */
	case 0:
		*p++ = '-';
		break;
	case 1:
		if ((r >> 2) % 4 == 0)
			*p++ = '+';
		break;
	default:
		break;
	}
	r >>= 4;
	switch (shape) {
	case 0: case 1: case 2: case 3:		/* integer, 1-25 digits */
		nd = 1 + r % 25;
		for (i = 0; i < nd; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
		break;
	case 4: case 5: case 6: case 7:		/* D+.D* */
	case 8: case 9:				/* .D+ */
		nd = shape >= 8 ? 0 : 1 + r % 12;
		for (i = 0; i < nd; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
		*p++ = '.';
		nd = (shape >= 8 ? 1 : 0) + (r >> 8) % 20;
		for (i = 0; i < nd; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
		break;
	case 10: case 11: {			/* mantissa and exponent */
		nd = 1 + r % 19;
		for (i = 0; i < nd; i++) {
			*p++ = (char)('0' + rng_next(rs) % 10);
			if (i == (r >> 8) % 4)
				*p++ = '.';
		}
		*p++ = (r >> 12) & 1 ? 'e' : 'E';
		if ((r >> 13) % 3 == 0)
			*p++ = '-';
		else if ((r >> 13) % 3 == 1)
			*p++ = '+';
		/* Mostly small exponents (the fast path), some up to 400. */
		p += sprintf(p, "%u", (unsigned)((r >> 16) % 8 == 0 ?
		    (r >> 20) % 401 : (r >> 20) % 30));
		break;
	}
	case 12: {				/* printed random double */
		uint64_t bits = rng_next(rs);
		double v;

		memcpy(&v, &bits, sizeof(v));
		if (!isfinite(v))
			v = 1.0;
		p += sprintf(p, r % 2 ? "%.*e" : "%.*g", 1 + (int)((r >> 1) %
		    20), fabs(v));
		break;
	}
	case 13: {				/* near a halfway point */
#if LDBL_MANT_DIG >= 64
		/* x87 long double holds the midpoint of two adjacent doubles
		 * exactly; printing it with 20-40 digits gives strings just
		 * around the tie. */
		uint64_t bits = (rng_next(rs) & 0x000fffffffffffffULL) |
		    ((uint64_t)(1023 - 60 + r % 120) << 52);
		double v, next;
		long double mid;

		memcpy(&v, &bits, sizeof(v));
		next = nextafter(v, INFINITY);
		mid = (long double)v + ((long double)next - v) / 2;
		p += sprintf(p, "%.*Le", 19 + (int)((r >> 8) % 22), mid);
#else
		*p++ = '1';
#endif
		break;
	}
	case 14:				/* 20-200 digits */
		nd = 20 + r % 181;
		for (i = 0; i < nd; i++) {
			*p++ = (char)('0' + rng_next(rs) % 10);
			if (i == (r >> 8) % nd)
				*p++ = '.';
		}
		if ((r >> 16) % 2)
			p += sprintf(p, "e-%u", (unsigned)((r >> 20) % 330));
		break;
	default:				/* rarely 700-1100 digits */
		nd = (r % 64 == 0) ? 700 + (r >> 6) % 401 : 1 + (r >> 6) % 5;
		if (r % 128 == 0) {
			/* Exact decimal of a double's halfway point. */
			*p++ = '1';
			*p++ = '.';
		}
		for (i = 0; i < nd; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
		p += sprintf(p, "e-%u", (unsigned)((r >> 20) % 340));
		break;
	}
	*p = '\0';
	n = (size_t)(p - out);
	return n;
}

START_TEST(test_proto_numbers_random_vs_strtod)
{
	static char s[1200];
	uint64_t seed = 20260101;
	size_t n;
	char *end;
	double v, ref;
	int i, rc;
	long mismatches = 0, nfinite = 0;

	for (i = 0; i < 1000000; i++) {
		n = gen_number(&seed, s);
		ref = strtod(s, &end);
		if (end != s + n)
			ck_abort_msg("generator made \"%s\"", s);
		v = 0.0;
		rc = proto_parse_number(s, n, &v);
		if (isinf(ref)) {
			if (rc != E_NUMERIC)
				mismatches++;
		} else {
			nfinite++;
			if (rc != 0 || !same_bits(v, ref)) {
				if (mismatches < 5)
					fprintf(stderr, "mismatch \"%s\": "
					    "%a vs strtod %a\n", s, v, ref);
				mismatches++;
			}
		}
	}
	ck_assert_msg(mismatches == 0, "%ld of 1000000 random numbers differ "
	    "from strtod", mismatches);
	ck_assert_int_gt(nfinite, 900000);
}
END_TEST

START_TEST(test_proto_numbers_in_lines_vs_strtod)
{
	/* The record parser reads numbers through its own fast paths
	 * (positional and NAME=VALUE); they must agree with strtod too. */
	static char s[1200], line[2600];
	uint64_t seed = 424242;
	size_t n;
	double ref;
	int i, rc, mismatches = 0;

	for (i = 0; i < 200000; i++) {
		n = gen_number(&seed, s);
		ref = strtod(s, NULL);
		snprintf(line, sizeof(line), i % 2 ? "m %s %s" : "m x=%s y=%s",
		    s, s);
		rc = proto_parse_line(line, strlen(line), 1, &msg);
		if (isinf(ref)) {
			if (rc != PROTO_ERROR || msg.reason != PROTO_R_NON_FINITE)
				mismatches++;
		} else if (rc != PROTO_MSG ||
		    !same_bits(msg.values[i % 2 ? 0 : 1].v, ref) ||
		    (i % 2 && !same_bits(msg.target, ref)) ||
		    (i % 2 == 0 && !same_bits(msg.values[0].v, ref))) {
			if (mismatches < 5)
				fprintf(stderr, "mismatch in line \"%.80s\"\n",
				    line);
			mismatches++;
		}
	}
	(void)n;
	ck_assert_msg(mismatches == 0, "%d lines disagree with strtod",
	    mismatches);
}
END_TEST

START_TEST(test_proto_numbers_mutated_vs_regex)
{
	/* The grammar, as a POSIX ERE: an oracle independent of our code. */
	static const char *const ere =
	    "^[+-]?([0-9]+(\\.[0-9]*)?|\\.[0-9]+)([eE][+-]?[0-9]+)?$";
	static const char alphabet[] = "0123456789+-.eExX ,_aAnNiIfF\t";
	regex_t re;
	static char s[1200];
	char *end;
	uint64_t seed = 7;
	size_t n, k;
	double v, ref;
	int i, rc, ok, nvalid = 0;

	ck_assert_int_eq(regcomp(&re, ere, REG_EXTENDED | REG_NOSUB), 0);
	for (i = 0; i < 100000; i++) {
		do
			n = gen_number(&seed, s);
		while (n > 60);
		/* One or two random edits. */
		for (k = 0; k < 1 + rng_next(&seed) % 2; k++) {
			uint64_t r = rng_next(&seed);
			size_t at = n ? (size_t)(r % (n + 1)) : 0;
			char c = alphabet[(r >> 16) % (sizeof(alphabet) - 1)];

			switch ((r >> 32) % 3) {
			case 0:		/* insert */
				memmove(s + at + 1, s + at, n - at + 1);
				s[at] = c;
				n++;
				break;
			case 1:		/* delete */
				if (at < n) {
					memmove(s + at, s + at + 1, n - at);
					n--;
				}
				break;
			default:	/* replace */
				if (at < n)
					s[at] = c;
				break;
			}
		}
		ok = regexec(&re, s, 0, NULL, 0) == 0;
		v = 0.0;
		rc = proto_parse_number(s, n, &v);
		if (ok) {
			nvalid++;
			ref = strtod(s, &end);
			if (end != s + n ||
			    (isinf(ref) && rc != E_NUMERIC) ||
			    (!isinf(ref) && (rc != 0 || !same_bits(v, ref))))
				ck_abort_msg("\"%s\": rc %d, %a vs strtod %a",
				    s, rc, v, ref);
		} else if (rc == 0)
			ck_abort_msg("\"%s\" accepted", s);
	}
	regfree(&re);
	ck_assert_int_gt(nvalid, 10000);
}
END_TEST

/*
 * Feeds: records read by proto_next from a buffer, where the parser may
 * load whole words past a token (up to the end of the bytes it was
 * given) and reads a line's blanks 64 bytes at a time. Every line must
 * give exactly what proto_parse_line gives on a copy of that line alone
 * (which reads nothing outside it), and every number the same double as
 * glibc strtod (IEEE 754 binary64, round to nearest even).
 */

/* A token for a feed: the word-at-a-time shape [+-]?D*(.D*)? with 0-16
 * digits on each side of the point, mostly short; when odd_ok, also any
 * number of gen_number or a near miss. */
static size_t
gen_feed_token(uint64_t *rs, char *out, int odd_ok)
{
	static const char *const odd[] = {
		".", "-", "+", "-.", "+.", "1.2.3", "1e5", "-1E-5", "?", "x=1",
		"1..", "@5", "1-", "--1", "+-1", "1,5", "0x1", "nan", "-inf",
		"1.5e", "5.", ".5", "-0", "+0.0", "1e400", "12345678901234567",
		"-.000000000000001", "999999999999999", "9007199254740993",
		"\xc3\xa9", "#", "1_0",
	};
	uint64_t r = rng_next(rs);
	char *p = out;
	size_t i, ni, nf;

	switch (odd_ok ? r % 10 : 0) {
	case 8:
		return gen_number(rs, out);
	case 9:
		strcpy(out, odd[(r >> 8) % (sizeof(odd) / sizeof(odd[0]))]);
		return strlen(out);
	default:
		break;
	}
	if ((r >> 4) % 3 == 1)
		*p++ = '-';
	else if ((r >> 4) % 3 == 2 && (r >> 6) % 4 == 0)
		*p++ = '+';
	ni = (size_t)((r >> 8) % 17);
	nf = (size_t)((r >> 16) % 17);
	/* Short integer parts and up to 7 fraction digits are the common
	 * case of real feeds (and of 15 digits at most: the fast path). */
	if ((r >> 24) % 16 != 0) {
		ni %= 3;
		nf %= 8;
	}
	for (i = 0; i < ni; i++)
		*p++ = (char)('0' + rng_next(rs) % 10);
	if ((r >> 28) % 4 != 0) {
		*p++ = '.';
		for (i = 0; i < nf; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
	} else if (ni == 0)
		*p++ = '7';
	*p = '\0';
	return (size_t)(p - out);
}

/* One record line (no LF) of random tokens and blanks into out. */
static size_t
gen_feed_line(uint64_t *rs, char *out)
{
	uint64_t r = rng_next(rs);
	char *p = out;
	size_t i, nv = 1 + (size_t)(r % 20), nd;
	int odd_ok = (r >> 40) % 4 == 0;	/* else the line should pass */

	p += sprintf(p, "%s", (r >> 8) % 8 ? "m" : "m.long-name_1");
	if ((r >> 12) % 2) {
		/* Epoch times D+ / D+.D+, some malformed. */
		*p++ = ' ';
		*p++ = '@';
		if (odd_ok && (r >> 13) % 4 == 0)
			*p++ = (r >> 17) % 2 ? '-' : '+';
		nd = (size_t)((r >> 20) % ((r >> 25) % 4 ? 11 : 17)) + !odd_ok;
		for (i = 0; i < nd; i++)
			*p++ = (char)('0' + rng_next(rs) % 10);
		if ((r >> 26) % 3 != 0) {
			*p++ = '.';
			nd = (size_t)((r >> 28) % ((r >> 25) % 4 ? 4 : 17)) +
			    !odd_ok;
			for (i = 0; i < nd; i++)
				*p++ = (char)('0' + rng_next(rs) % 10);
		}
	}
	for (i = 0; i < nv; i++) {
		uint64_t b = rng_next(rs);

		*p++ = b % 4 == 0 ? '\t' : ' ';
		if (b % 8 == 1)
			*p++ = ' ';
		p += gen_feed_token(rs, p, odd_ok);
	}
	if ((r >> 32) % 8 == 0)
		*p++ = ' ';
	if ((r >> 36) % 8 == 0)
		*p++ = '\r';
	*p = '\0';
	return (size_t)(p - out);
}

/* msg as read from a feed equals msg2 from proto_parse_line. */
static void
expect_same_msg(int rc, const struct proto_msg *a, int rc2,
    const struct proto_msg *b, const char *line)
{
	size_t i;

	ck_assert_msg(rc == rc2 && a->kind == b->kind &&
	    a->reason == b->reason && strcmp(a->detail, b->detail) == 0,
	    "\"%s\": feed rc %d %s \"%s\", line rc %d %s \"%s\"", line, rc,
	    proto_reason_str(a->reason), a->detail, rc2,
	    proto_reason_str(b->reason), b->detail);
	if (rc != PROTO_MSG)
		return;
	ck_assert_msg(a->has_time == b->has_time &&
	    same_bits(a->time, b->time) && a->has_target == b->has_target &&
	    same_bits(a->target, b->target) && a->named == b->named &&
	    a->nvalues == b->nvalues && a->model.len == b->model.len,
	    "\"%s\": fields differ", line);
	for (i = 0; i < a->nvalues; i++)
		ck_assert_msg(same_bits(a->values[i].v, b->values[i].v) &&
		    a->values[i].name.len == b->values[i].name.len,
		    "\"%s\": value %zu: %a vs %a", line, i, a->values[i].v,
		    b->values[i].v);
}

/* Every number of an accepted positional line against strtod, the time
 * against proto_parse_time. Returns the numbers compared. */
static long
check_line_vs_strtod(const char *line, size_t len, const struct proto_msg *m)
{
	char tok[1200];
	const char *p = line, *end = line + len, *t;
	size_t k = 0, n;
	long count = 0;
	double want;

	if (len > 0 && end[-1] == '\r')
		end--;
	while (p < end && *p != ' ' && *p != '\t')
		p++;		/* the model */
	for (;;) {
		while (p < end && (*p == ' ' || *p == '\t'))
			p++;
		if (p == end)
			break;
		for (t = p; t < end && *t != ' ' && *t != '\t'; t++)
			;
		n = (size_t)(t - p);
		ck_assert_uint_lt(n, sizeof(tok));
		memcpy(tok, p, n);
		tok[n] = '\0';
		p = t;
		if (tok[0] == '@' && k == 0 && m->has_time) {
			ck_assert_int_eq(proto_parse_time(tok + 1, n - 1,
			    &want), 0);
			ck_assert_msg(same_bits(m->time, want), "\"%s\": time "
			    "%a vs %a", tok, m->time, want);
			continue;
		}
		want = strtod(tok, NULL);
		if (k == 0 && m->has_target)
			ck_assert_msg(same_bits(m->target, want), "\"%s\": "
			    "target %a vs strtod %a", tok, m->target, want);
		else if (k < m->nvalues + (size_t)m->has_target)
			ck_assert_msg(same_bits(m->values[k -
			    (size_t)m->has_target].v, want), "\"%s\": %a vs "
			    "strtod %a", tok, m->values[k -
			    (size_t)m->has_target].v, want);
		k++;
		count++;
	}
	ck_assert_uint_eq(k, m->nvalues + (size_t)m->has_target);
	return count;
}

/*
 * Parse buf[0..len) (lines with LF) with a reader, in chunks of random
 * size when seed != 0 (lines then also get assembled in the reader's own
 * buffer), and compare every line as above. Returns the numbers compared
 * against strtod.
 */
static long
feed_and_compare(const char *buf, size_t len, uint64_t seed)
{
	static struct proto_msg m2;
	struct proto_reader *rd = proto_reader_new(PROTO_LINE_DEFAULT);
	const char *line = buf;
	size_t off = 0, used, chunk, ll;
	long count = 0;
	int rc, rc2;
	char *copy;

	ck_assert_ptr_nonnull(rd);
	while (off < len) {
		chunk = len - off;
		if (seed != 0)
			chunk = 1 + rng_next(&seed) %
			    (chunk < 300 ? chunk : 300);
		while (chunk > 0) {
			rc = proto_next(rd, buf + off, chunk, &used, &msg);
			off += used;
			chunk -= used;
			if (rc == PROTO_NEED_MORE)
				break;
			/* This line and a copy of it alone, exactly sized so
			 * the sanitizers see any read beyond it. */
			ll = (size_t)((const char *)memchr(line, '\n',
			    (size_t)(buf + len - line)) - line);
			ck_assert_ptr_nonnull(copy = malloc(ll + 1));
			memcpy(copy, line, ll);
			rc2 = proto_parse_line(copy, ll, msg.line, &m2);
			expect_same_msg(rc, &msg, rc2, &m2, copy);
			if (rc == PROTO_MSG && msg.kind == PROTO_RECORD &&
			    !msg.named)
				count += check_line_vs_strtod(copy, ll, &msg);
			free(copy);
			line += ll + 1;
		}
	}
	proto_reader_free(rd);
	return count;
}

START_TEST(test_proto_numbers_feed_vs_strtod)
{
	const size_t cap = 300000;
	char *buf = malloc(cap), *exact;
	uint64_t seed = 20261202;
	size_t len;
	long count = 0, round;

	ck_assert_ptr_nonnull(buf);
	for (round = 0; round < 16; round++) {
		len = 0;
		while (len < cap - 4000) {
			len += gen_feed_line(&seed, buf + len);
			buf[len++] = '\n';
		}
		/* A buffer that ends right after the last LF: nothing past
		 * it may be read (the sanitizer build checks). */
		ck_assert_ptr_nonnull(exact = malloc(len));
		memcpy(exact, buf, len);
		count += feed_and_compare(exact, len, round % 2 ? seed : 0);
		free(exact);
	}
	free(buf);
	/* About 32,000 lines and 230,000 numbers (the count depends only on
	 * the seed). */
	ck_assert_int_gt(count, 200000);
}
END_TEST

START_TEST(test_proto_numbers_feed_edges)
{
	/* Tokens at the edges of the word-at-a-time path: 15 and 16
	 * digits (15 is the most it takes), a point at either end, signs,
	 * tokens across the 64-byte window, lines of 63-97 bytes, and the
	 * last line ending exactly at the end of the buffer. */
	static const char *const toks[] = {
		"999999999999999", "-999999999999999", "+999999999999999",
		"9999999999999999", ".99999999999999", "99999999999999.",
		"9.99999999999999", "-.00000000000001", "0.000000000000001",
		"9007199254740993", "900719925474099.3", "-0", "+0", "0.",
		".0", "-.0", "1", "-1", "12345678", "123456789", "1234567.8",
		"12345678.9", "0.12345678", "0.123456789", "1e1", "5.e3",
		"4.9e-324", "2.2250738585072011e-308", "1.7976931348623157e308",
	};
	const size_t nt = sizeof(toks) / sizeof(toks[0]);
	char line[400], *buf;
	size_t a, b, pad, n, len;
	long count = 0;

	for (a = 0; a < nt; a++)
		for (b = 0; b < nt; b++)
			for (pad = 0; pad < 70; pad += 3) {
				n = (size_t)sprintf(line,
				    "m @1764640000.%03zu%*s %s %s", pad,
				    (int)pad, "", toks[a], toks[b]);
				len = n + 1;
				buf = malloc(len);
				ck_assert_ptr_nonnull(buf);
				memcpy(buf, line, n);
				buf[n] = '\n';
				count += feed_and_compare(buf, len, 0);
				free(buf);
			}
	ck_assert_int_eq(count, (long)(nt * nt * 24 * 2));

	/* A NUL byte or bad UTF-8 inside a long feed line: the same error
	 * (nul_byte / bad_utf8, with its byte offset) as the line alone. */
	{
		static const char *const bad[] = {
			"\0", "1\0", "\xff", "2.\xe2\x82", "\xc3\xa9", "\r",
			"\v",
		};
		const size_t bl[] = { 1, 2, 1, 4, 2, 1, 1 };
		size_t at;

		for (a = 0; a < sizeof(bad) / sizeof(bad[0]); a++)
			for (at = 0; at < 6; at++) {
				n = (size_t)sprintf(line, "m @1764640000.5");
				for (b = 0; b < 8; b++) {
					line[n++] = ' ';
					if (b == at) {
						memcpy(line + n, bad[a], bl[a]);
						n += bl[a];
					} else
						n += (size_t)sprintf(line + n,
						    "-%zu.25", b);
				}
				n += (size_t)sprintf(line + n, " %60s", "7");
				buf = malloc(n + 1);
				ck_assert_ptr_nonnull(buf);
				memcpy(buf, line, n);
				buf[n] = '\n';
				(void)feed_and_compare(buf, n + 1, 0);
				ck_assert_int_eq(msg.kind, PROTO_EMPTY);
				free(buf);
			}
	}
}
END_TEST

/* ------------------------------------------------------------------
 * Times.
 */

struct time_case {
	const char	*s;
	double		 want;
};

START_TEST(test_proto_times)
{
	/*
	 * Expected values computed with Python 3.11:
	 *   datetime.fromisoformat(s with Z -> +00:00).timestamp().hex()
	 * (aware datetimes; timestamp() is an exact integer division,
	 * correctly rounded, like our exact decimal conversion).
	 */
	static const struct time_case good[] = {
		{ "1764640000", 1764640000.0 },
		{ "1764640000.25", 1764640000.25 },
		{ "0", 0.0 },
		{ "0.5", 0.5 },
		{ "2026-12-02T03:00:00Z", 0x1.ac3e26c000000p+30 },
		{ "2026-12-02T03:00:00.5+01:00", 0x1.ac3dee8200000p+30 },
		{ "2024-02-29T12:34:56Z", 0x1.9781e7c000000p+30 },
		{ "2000-02-29T00:00:00Z", 0x1.c5d8600000000p+29 },
		{ "1900-02-28T23:59:59-05:30", -0x1.06b8d15200000p+31 },
		{ "1969-12-31T23:59:59.25Z", -0x1.8000000000000p-1 },
		{ "0001-01-01T00:00:00Z", -0x1.cef23ee000000p+35 },
		{ "9999-12-31T23:59:59Z", 0x1.d7ffa20bf8000p+37 },
		{ "2026-01-01T00:00:00.1Z", 0x1.a556e40066666p+30 },
		{ "1899-12-31T23:59:59.999999-01:00", -0x1.0754e0e000002p+31 },
		{ "2026-06-30T12:00:00-00:00", 0x1.a90ebf0000000p+30 },
		{ "2026-06-30T12:00:00+23:59", 0x1.a90979f000000p+30 },
		{ "2026-06-30t12:00:00z", 0x1.a90ebf0000000p+30 },
		{ "1970-01-01T00:00:00Z", 0.0 },
		{ "2026-03-01T00:00:00.123456+05:45", 0x1.a68cc2907e6b4p+30 },
	};
	static const char *const bad[] = {
		"", "-5", "+5", "1e9", "12.", ".5", "1.2.3", "0x10", "nan",
		"2025-02-29T00:00:00Z",		/* 2025 is not a leap year */
		"1900-02-29T00:00:00Z",		/* nor is 1900 */
		"2026-13-01T00:00:00Z", "2026-00-10T00:00:00Z",
		"2026-04-31T00:00:00Z", "2026-01-00T00:00:00Z",
		"2026-01-01T24:00:00Z", "2026-01-01T23:60:00Z",
		"2026-01-01T23:59:60Z",		/* no leap seconds */
		"2026-01-01T00:00:00",		/* offset is required */
		"2026-01-01T00:00:00.Z", "2026-01-01T00:00:00+01",
		"2026-01-01T00:00:00+01:0", "2026-01-01T00:00:00+24:00",
		"2026-01-01T00:00:00+01:60", "2026-01-01T00:00:00Zz",
		"2026-01-01", "2026-01-01T00:00Z", "2026-1-01T00:00:00Z",
		"2026-01-01X00:00:00Z", "2026-01-01T00-00-00Z",
		"20260-01-01T00:00:00Z", "2026-01-01T00:00:00+01:00x",
		"-2026-01-01T00:00:00Z", "2026-01-01T00:00:00.1.2Z",
	};
	size_t i;
	double t;
	char line[128];

	for (i = 0; i < sizeof(good) / sizeof(good[0]); i++) {
		t = -1.0;
		ck_assert_msg(proto_parse_time(good[i].s, strlen(good[i].s),
		    &t) == 0, "\"%s\" rejected", good[i].s);
		ck_assert_msg(same_bits(t, good[i].want), "\"%s\": %a want %a",
		    good[i].s, t, good[i].want);
		snprintf(line, sizeof(line), "m @%s 1", good[i].s);
		expect_ok(line);
		ck_assert_int_eq(msg.has_time, 1);
		ck_assert(same_bits(msg.time, good[i].want));
	}
	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
		t = -1.0;
		ck_assert_msg(proto_parse_time(bad[i], strlen(bad[i]), &t) ==
		    E_ARG, "\"%s\" accepted", bad[i]);
		ck_assert(t == -1.0);
		snprintf(line, sizeof(line), "m @%s 1", bad[i]);
		expect_reason(line, PROTO_R_BAD_TIME);
	}
	expect_reason("m @2025-02-29T00:00:00Z 1", PROTO_R_BAD_TIME);
	ck_assert_str_eq(msg.detail, "\"@2025-02-29T00:00:00Z\" is not a "
	    "valid time (epoch seconds or RFC 3339 date-time)");
	/* @ only right after the model. */
	expect_reason("m 1 @5", PROTO_R_NOT_A_NUMBER);
	expect_ok("m @5 1");
	ck_assert(msg.time == 5.0);
	ck_assert(msg.target == 1.0);
}
END_TEST

START_TEST(test_proto_times_every_day)
{
	/* Every day of 1900-2100 at 00:00Z is 86400 s after the one
	 * before, and 2000-01-01 is 946684800 (both: POSIX time has 86400 s
	 * days; the anchor from Python datetime as above). This catches a
	 * wrong month length or leap rule anywhere in the range. */
	static const int mdays[12] = { 31, 28, 31, 30, 31, 30, 31, 31, 30,
	    31, 30, 31 };
	char s[32];
	double t, prev = 0.0;
	int y, m, d, nd, first = 1;

	for (y = 1900; y <= 2100; y++)
		for (m = 1; m <= 12; m++) {
			nd = mdays[m - 1] + (m == 2 && y % 4 == 0 &&
			    (y % 100 != 0 || y % 400 == 0));
			for (d = 1; d <= nd + 1; d++) {
				snprintf(s, sizeof(s),
				    "%04d-%02d-%02dT00:00:00Z", y, m, d);
				if (d > nd) {
					if (proto_parse_time(s, strlen(s),
					    &t) != E_ARG)
						ck_abort_msg("%s accepted", s);
					continue;
				}
				if (proto_parse_time(s, strlen(s), &t) != 0 ||
				    (!first && t - prev != 86400.0) ||
				    (y == 2000 && m == 1 && d == 1 &&
				    t != 946684800.0))
					ck_abort_msg("%s: %a", s, t);
				prev = t;
				first = 0;
			}
		}
}
END_TEST

/* ------------------------------------------------------------------
 * Commands.
 */

struct cmd_case {
	const char	*line;
	enum proto_cmd	 cmd;
	const char	*model;		/* NULL: none */
	size_t		 nargs;
	uint32_t	 count;
	uint32_t	 every;
};

START_TEST(test_proto_commands)
{
	static const struct cmd_case ok[] = {
		{ ".sync", PROTO_CMD_SYNC, NULL, 0, 0, 0 },
		{ ".list", PROTO_CMD_LIST, NULL, 0, 0, 0 },
		{ ".get boiler", PROTO_CMD_GET, "boiler", 1, 0, 0 },
		{ ".pin m", PROTO_CMD_PIN, "m", 1, 0, 0 },
		{ ".freeze m", PROTO_CMD_FREEZE, "m", 1, 0, 0 },
		{ ".thaw m", PROTO_CMD_THAW, "m", 1, 0, 0 },
		{ ".reset m", PROTO_CMD_RESET, "m", 1, 0, 0 },
		{ ".history m", PROTO_CMD_HISTORY, "m", 1, 0, 0 },
		{ ".history m 10", PROTO_CMD_HISTORY, "m", 2, 10, 0 },
		{ ".history m 1000000000", PROTO_CMD_HISTORY, "m", 2,
		    1000000000, 0 },
		{ ".stats", PROTO_CMD_STATS, NULL, 0, 0, 0 },
		{ ".watch", PROTO_CMD_WATCH, NULL, 0, 0, 0 },
		{ ".watch *", PROTO_CMD_WATCH, NULL, 1, 0, 0 },
		{ ".watch m", PROTO_CMD_WATCH, "m", 1, 0, 0 },
		{ ".watch m every=5", PROTO_CMD_WATCH, "m", 2, 0, 5 },
		{ ".watch * every=60", PROTO_CMD_WATCH, NULL, 2, 0, 60 },
		{ ".watch every=1", PROTO_CMD_WATCH, NULL, 1, 0, 1 },
		{ ".save", PROTO_CMD_SAVE, NULL, 0, 0, 0 },
		{ ".reload", PROTO_CMD_RELOAD, NULL, 0, 0, 0 },
		{ ".auth s3cr\xc3\xa9t", PROTO_CMD_AUTH, NULL, 1, 0, 0 },
		{ ".version", PROTO_CMD_VERSION, NULL, 0, 0, 0 },
		{ ".bye", PROTO_CMD_BYE, NULL, 0, 0, 0 },
		{ "  .bye  \t", PROTO_CMD_BYE, NULL, 0, 0, 0 },
	};
	size_t i;

	for (i = 0; i < sizeof(ok) / sizeof(ok[0]); i++) {
		expect_ok(ok[i].line);
		ck_assert_int_eq(msg.kind, PROTO_COMMAND);
		ck_assert_int_eq(msg.cmd, ok[i].cmd);
		if (ok[i].model != NULL)
			ck_assert(str_eq(msg.model, ok[i].model));
		else
			ck_assert_ptr_null(msg.model.ptr);
		ck_assert_uint_eq(msg.nargs, ok[i].nargs);
		ck_assert_uint_eq(msg.count, ok[i].count);
		ck_assert_uint_eq(msg.every, ok[i].every);
	}
	expect_ok(".auth tok");
	ck_assert(str_eq(msg.args[0], "tok"));
	expect_ok(".watch * every=60");
	ck_assert(str_eq(msg.args[0], "*"));
	ck_assert(str_eq(msg.args[1], "every=60"));
}
END_TEST

START_TEST(test_proto_command_predict)
{
	expect_ok(".predict boiler 3.5 -1");
	ck_assert_int_eq(msg.kind, PROTO_PREDICT);
	ck_assert_int_eq(msg.cmd, PROTO_CMD_PREDICT);
	ck_assert(str_eq(msg.model, "boiler"));
	ck_assert_uint_eq(msg.nargs, 1);
	ck_assert(str_eq(msg.args[0], "boiler"));
	ck_assert_int_eq(msg.has_target, 0);
	ck_assert_int_eq(msg.has_time, 0);
	ck_assert_int_eq(msg.named, 0);
	ck_assert_uint_eq(msg.nvalues, 2);	/* all are regressors */
	ck_assert(msg.values[0].v == 3.5);
	expect_ok(".predict m a=1 b=2");
	ck_assert_int_eq(msg.named, 1);
	ck_assert_uint_eq(msg.nvalues, 2);
	expect_reason(".predict", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, ".predict takes at least 1 argument, "
	    "got 0");
	expect_reason(".predict m", PROTO_R_NO_VALUES);
	expect_reason(".predict m ? 1", PROTO_R_NOT_A_NUMBER);
	expect_reason(".predict m @1 2", PROTO_R_NOT_A_NUMBER);
	expect_reason(".predict -m 1", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".predict m 1 nan", PROTO_R_NON_FINITE);
	expect_reason(".predict m a=1 a=1", PROTO_R_DUPLICATE_FIELD);
}
END_TEST

START_TEST(test_proto_command_arity)
{
	char line[256];
	int c, k, n;
	const struct proto_cmd_info *ci;

	/* For every command: one argument too few and one too many. */
	for (c = 1; c < PROTO_NCMDS; c++) {
		ci = proto_cmd_info((enum proto_cmd)c);
		ck_assert_ptr_nonnull(ci);
		ck_assert_int_eq(ci->cmd, c);
		if (ci->min_args > 0) {
			n = snprintf(line, sizeof(line), "%s", ci->name);
			for (k = 0; k < ci->min_args - 1; k++)
				n += snprintf(line + n, sizeof(line) - (size_t)n,
				    " m");
			expect_reason(line, PROTO_R_BAD_ARGUMENTS);
		}
		if (ci->max_args >= 0) {
			n = snprintf(line, sizeof(line), "%s", ci->name);
			for (k = 0; k < ci->max_args + 1; k++)
				n += snprintf(line + n, sizeof(line) - (size_t)n,
				    " m");
			expect_reason(line, PROTO_R_BAD_ARGUMENTS);
		}
	}
	expect_reason(".get", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, ".get takes 1 argument, got 0");
	expect_reason(".history m 1 2", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, ".history takes 1 to 2 arguments, got 3");
	expect_reason(".sync x", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, ".sync takes no arguments, got 1");
	/* Many arguments: counted, only PROTO_MAX_ARGS kept. */
	expect_reason(".list a b c d e f g", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, ".list takes no arguments, got 7");
	ck_assert_uint_eq(msg.nargs, PROTO_MAX_ARGS);
	/* The .auth token never appears in error text. */
	expect_reason(".auth s3cr3t extra", PROTO_R_BAD_ARGUMENTS);
	ck_assert_ptr_null(strstr(msg.detail, "s3cr3t"));
	ck_assert_ptr_null(strstr(msg.detail, "extra"));
}
END_TEST

START_TEST(test_proto_command_arguments)
{
	expect_reason(".get -x", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".reset ..", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".history a/b", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".history m 0", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, "\"0\": N must be an integer from 1 to "
	    "1000000000");
	expect_reason(".history m x", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".history m -1", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".history m +1", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".history m 1.0", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".history m 1000000001", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".history m 99999999999", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch every=0", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch every=", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch m every=", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch m every=x", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch m foo", PROTO_R_BAD_ARGUMENTS);
	ck_assert_str_eq(msg.detail, "\"foo\": expected every=N");
	expect_reason(".watch every=5 m", PROTO_R_BAD_ARGUMENTS);
	expect_reason(".watch ** every=5", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".watch -m", PROTO_R_BAD_MODEL_NAME);
	expect_reason(".watch m every=5 x", PROTO_R_BAD_ARGUMENTS);
	/* Command words are case-sensitive and whole. */
	expect_reason(".Sync", PROTO_R_UNKNOWN_COMMAND);
	expect_reason(".sync2", PROTO_R_UNKNOWN_COMMAND);
	expect_reason(".syn", PROTO_R_UNKNOWN_COMMAND);
	expect_reason(".", PROTO_R_UNKNOWN_COMMAND);
	expect_reason(".foo bar", PROTO_R_UNKNOWN_COMMAND);
	ck_assert_str_eq(msg.detail, "\".foo\" is not a command");
}
END_TEST

START_TEST(test_proto_command_table)
{
	int c, admin;
	const struct proto_cmd_info *ci;

	ck_assert_ptr_null(proto_cmd_info(PROTO_CMD_NONE));
	ck_assert_ptr_null(proto_cmd_info(PROTO_NCMDS));
	for (c = 1; c < PROTO_NCMDS; c++) {
		ci = proto_cmd_info((enum proto_cmd)c);
		ck_assert_ptr_eq(proto_cmd_find(ci->name, strlen(ci->name)),
		    ci);
		admin = c == PROTO_CMD_PIN || c == PROTO_CMD_FREEZE ||
		    c == PROTO_CMD_THAW || c == PROTO_CMD_RESET ||
		    c == PROTO_CMD_SAVE || c == PROTO_CMD_RELOAD;
		ck_assert_int_eq(!!(ci->flags & PROTO_CMD_ADMIN), admin);
	}
	ck_assert_ptr_null(proto_cmd_find(".get", 3));
	ck_assert(proto_cmd_info(PROTO_CMD_AUTH)->flags & PROTO_CMD_SECRET);
}
END_TEST

/* ------------------------------------------------------------------
 * Reasons and replies.
 */

START_TEST(test_proto_reason_strings)
{
	static const char *const want[PROTO_NREASONS] = {
		"line_too_long", "nul_byte", "bad_utf8", "bad_model_name",
		"bad_time", "not_a_number", "non_finite", "no_values",
		"too_many_values", "mixed_forms", "bad_field_name",
		"duplicate_field", "unknown_command", "bad_arguments",
		"unknown_model", "wrong_count", "unknown_field",
		"missing_field", "term_non_finite", "model_limit",
		"connection_limit", "denied", "auth_required", "frozen",
		"busy", "internal", "not_ready",
	};
	int r;

	ck_assert_int_eq(PROTO_NREASONS, 27);
	for (r = 0; r < PROTO_NREASONS; r++)
		ck_assert_str_eq(proto_reason_str((enum proto_reason)r),
		    want[r]);
	ck_assert_str_eq(proto_reason_str(PROTO_NREASONS), "unknown");
	ck_assert_str_eq(proto_reason_str((enum proto_reason)-1), "unknown");
}
END_TEST

START_TEST(test_proto_format_error)
{
	char buf[256];
	struct json j;

	ck_assert_int_eq(parse("m 1 0x10"), PROTO_ERROR);
	json_init(&j, buf, sizeof(buf));
	ck_assert_int_eq(proto_format_error(&j, 3, msg.reason, msg.detail), 0);
	ck_assert_int_eq(json_finish(&j), 0);
	ck_assert_str_eq(buf, "{\"error\":\"not_a_number\",\"line\":3,"
	    "\"detail\":\"value 2 \\\"0x10\\\" is not a decimal number\"}");

	json_init(&j, buf, sizeof(buf));
	ck_assert_int_eq(proto_format_error(&j, 0, PROTO_R_BUSY, NULL), 0);
	ck_assert_str_eq(buf, "{\"error\":\"busy\",\"line\":0,\"detail\":\"\"}");

	json_init(&j, buf, 20);
	ck_assert_int_eq(proto_format_error(&j, 1, PROTO_R_BUSY, "x"),
	    E_LIMIT);
	ck_assert_int_eq(json_finish(&j), E_LIMIT);
}
END_TEST

START_TEST(test_proto_detail_truncation)
{
	static char line[400];
	char *q, *dots;
	size_t i, n;

	/* 'x' and 40 two-byte characters: shortened, not split. */
	n = (size_t)sprintf(line, "x");
	for (i = 0; i < 40; i++)
		n += (size_t)sprintf(line + n, "\xc3\xa9");
	strcpy(line + n, " 1");
	expect_reason(line, PROTO_R_BAD_MODEL_NAME);
	ck_assert_uint_lt(strlen(msg.detail), PROTO_DETAIL_MAX);
	q = msg.detail;
	ck_assert_int_eq(q[0], '"');
	dots = strstr(q, "...\"");
	ck_assert_ptr_nonnull(dots);
	n = (size_t)(dots - q - 1);
	ck_assert_uint_le(n, 48);
	ck_assert_uint_eq(n % 2, 1);	/* 'x' + whole characters */
	/* A very long token still fits the fixed detail buffer. */
	memset(line, 'a', 300);
	strcpy(line + 300, "=1");
	ck_assert_int_eq(parse(line), PROTO_ERROR);	/* no model: a=... */
	ck_assert_uint_lt(strlen(msg.detail), PROTO_DETAIL_MAX);
}
END_TEST

/* ------------------------------------------------------------------
 * Lines: NUL bytes and UTF-8.
 */

struct bytes_case {
	const char	*s;
	size_t		 len;
	int		 ok;
};

#define B(lit, ok)	{ lit, sizeof(lit) - 1, ok }

START_TEST(test_proto_utf8)
{
	/* Well-formed byte sequences per Unicode 15 table 3-7 / RFC 3629
	 * section 4 (UTF8-octets ABNF), each after a comment marker. */
	static const struct bytes_case cases[] = {
		B("# \xc2\xa9", 1),		/* U+00A9 */
		B("# \xdf\xbf", 1),		/* U+07FF */
		B("# \xe0\xa0\x80", 1),		/* U+0800 */
		B("# \xe2\x82\xac", 1),		/* U+20AC */
		B("# \xed\x9f\xbf", 1),		/* U+D7FF */
		B("# \xee\x80\x80", 1),		/* U+E000 */
		B("# \xef\xbf\xbf", 1),		/* U+FFFF */
		B("# \xf0\x90\x80\x80", 1),	/* U+10000 */
		B("# \xf0\x9f\x98\x80", 1),	/* U+1F600 */
		B("# \xf4\x8f\xbf\xbf", 1),	/* U+10FFFF */
		B("# \xc0\x80", 0),		/* overlong U+0000 */
		B("# \xc1\xbf", 0),		/* overlong U+007F */
		B("# \xe0\x80\x80", 0),		/* overlong 3-byte */
		B("# \xe0\x9f\xbf", 0),		/* overlong U+07FF */
		B("# \xf0\x80\x80\x80", 0),	/* overlong 4-byte */
		B("# \xf0\x8f\xbf\xbf", 0),	/* overlong U+FFFF */
		B("# \xed\xa0\x80", 0),		/* surrogate U+D800 */
		B("# \xed\xbf\xbf", 0),		/* surrogate U+DFFF */
		B("# \xf4\x90\x80\x80", 0),	/* U+110000 */
		B("# \xf5\x80\x80\x80", 0),	/* lead byte F5 */
		B("# \xf7\xbf\xbf\xbf", 0),	/* U+1FFFFF */
		B("# \xf8\x88\x80\x80\x80", 0),	/* old 5-byte form */
		B("# \xfc\x84\x80\x80\x80\x80", 0), /* old 6-byte form */
		B("# \xfe", 0),
		B("# \xff", 0),
		B("# \x80", 0),			/* lone continuation */
		B("# \xbf", 0),
		B("# \xc2", 0),			/* truncated at end */
		B("# \xe2\x82", 0),
		B("# \xf0\x9f\x98", 0),
		B("# \xe2\x82x", 0),		/* truncated before ASCII */
		B("# \xc2\xc2\xa9", 0),		/* lead, then a new lead */
	};
	size_t i;
	int rc;

	for (i = 0; i < sizeof(cases) / sizeof(cases[0]); i++) {
		rc = proto_parse_line(cases[i].s, cases[i].len, 1, &msg);
		if (cases[i].ok) {
			ck_assert_msg(rc == PROTO_MSG, "case %zu", i);
			ck_assert_int_eq(msg.kind, PROTO_EMPTY);
		} else {
			ck_assert_msg(rc == PROTO_ERROR &&
			    msg.reason == PROTO_R_BAD_UTF8, "case %zu", i);
			ck_assert_str_eq(msg.detail, "invalid UTF-8 at byte 3");
		}
	}
	/* An extra continuation byte after a complete character. */
	rc = proto_parse_line("# \xe2\x82\xac\x80", 6, 1, &msg);
	ck_assert_int_eq(msg.reason, PROTO_R_BAD_UTF8);
	ck_assert_str_eq(msg.detail, "invalid UTF-8 at byte 6");
	/* The first bad byte is reported, after 8-byte ASCII runs too. */
	rc = proto_parse_line("m 1 2 3 4 5 6 7 \xff", 17, 1, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_str_eq(msg.detail, "invalid UTF-8 at byte 17");
}
END_TEST

START_TEST(test_proto_nul_byte)
{
	int rc;

	rc = proto_parse_line("m 1\0 2", 6, 4, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_int_eq(msg.reason, PROTO_R_NUL_BYTE);
	ck_assert_str_eq(msg.detail, "NUL byte at byte 4");
	ck_assert_uint_eq(msg.line, 4);
	/* In a comment too, and the earlier of NUL and bad UTF-8 wins. */
	rc = proto_parse_line("# \0", 3, 1, &msg);
	ck_assert_int_eq(msg.reason, PROTO_R_NUL_BYTE);
	rc = proto_parse_line("# \xff\0", 4, 1, &msg);
	ck_assert_int_eq(msg.reason, PROTO_R_BAD_UTF8);
	rc = proto_parse_line("# 12345678\0\xff", 12, 1, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_int_eq(msg.reason, PROTO_R_NUL_BYTE);
	ck_assert_str_eq(msg.detail, "NUL byte at byte 11");
}
END_TEST

/* ------------------------------------------------------------------
 * The reader.
 */

/* One line of text per message, exact (doubles in %a). */
static size_t
summarize(int rc, const struct proto_msg *m, char *out, size_t cap)
{
	size_t n = 0, i;

#define P(...) do {							\
	int k_ = snprintf(out + n, cap - n, __VA_ARGS__);		\
	if (k_ < 0 || (size_t)k_ >= cap - n)				\
		ck_abort_msg("summary buffer too small");		\
	n += (size_t)k_;						\
} while (0)
	if (rc == PROTO_ERROR) {
		P("E%llu %s [%s] %.*s\n", (unsigned long long)m->line,
		    proto_reason_str(m->reason), m->detail,
		    (int)m->model.len, m->model.ptr ? m->model.ptr : "");
		return n;
	}
	if (rc != PROTO_MSG)
		ck_abort_msg("unexpected status %d", rc);
	P("M%llu k%d c%d %.*s", (unsigned long long)m->line, m->kind, m->cmd,
	    (int)m->model.len, m->model.ptr ? m->model.ptr : "");
	if (m->has_time)
		P(" @%a", m->time);
	if (m->has_target)
		P(" t=%a", m->target);
	P(" n%d", m->named);
	for (i = 0; i < m->nvalues; i++)
		P(" %.*s=%a", (int)m->values[i].name.len,
		    m->values[i].name.ptr ? m->values[i].name.ptr : "",
		    m->values[i].v);
	P(" a%zu", m->nargs);
	for (i = 0; i < m->nargs; i++)
		P(" [%.*s]", (int)m->args[i].len, m->args[i].ptr);
	P(" #%u/%u\n", m->count, m->every);
#undef P
	return n;
}

enum { FEED_WHOLE, FEED_BYTES, FEED_RANDOM };

/*
 * Feed data through a fresh reader in chunks (each chunk in its own heap
 * copy so ASan sees any read past it) and return the summaries of all
 * messages, including proto_finish's; the caller frees the result.
 */
static char *
feed(const char *data, size_t len, size_t maxline, int mode, uint64_t seed)
{
	struct proto_reader *rd = proto_reader_new(maxline);
	size_t cap = 1 << 20, n = 0, off = 0, chunk, coff, used;
	char *out = malloc(cap), *c;
	int rc, bad = 0;

	ck_assert_ptr_nonnull(rd);
	ck_assert_ptr_nonnull(out);
	out[0] = '\0';
	while (off < len) {
		if (mode == FEED_WHOLE)
			chunk = len - off;
		else if (mode == FEED_BYTES)
			chunk = 1;
		else {
			uint64_t r = rng_next(&seed);

			chunk = r % 8 == 0 ? 1 + (r >> 8) % 200 :
			    1 + (r >> 8) % 12;
		}
		if (chunk > len - off)
			chunk = len - off;
		if ((c = malloc(chunk)) == NULL)
			ck_abort_msg("out of memory");
		memcpy(c, data + off, chunk);
		coff = 0;
		for (;;) {
			used = (size_t)-1;
			rc = proto_next(rd, c + coff, chunk - coff, &used,
			    &msg);
			if (used > chunk - coff) {
				bad++;
				break;
			}
			coff += used;
			if (rc == PROTO_NEED_MORE) {
				bad += coff != chunk;
				break;
			}
			n += summarize(rc, &msg, out + n, cap - n);
		}
		free(c);
		off += chunk;
	}
	rc = proto_finish(rd, &msg);
	if (rc != PROTO_NEED_MORE)
		n += summarize(rc, &msg, out + n, cap - n);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_NEED_MORE);
	ck_assert_msg(bad == 0, "%d calls broke the used/NEED_MORE contract",
	    bad);
	proto_reader_free(rd);
	return out;
}

/* Build the reader corpus: every line form and error, maxline 40. */
static size_t
corpus(char *buf)
{
	static const struct bytes_case lines[] = {
		B("boiler 71.25 3.5 -2e3\n", 1),
		B("\n", 1),
		B("# comment\n", 1),
		B("  \t \n", 1),
		B("pump_2 @1764640000.25 y=1 a=2 b=-0\r\n", 1),
		B("m ? 1 2\n", 1),
		B(".get boiler\n", 1),
		B(".watch * every=10\n", 1),
		B(".history m 5\r\n", 1),
		B("this line is far too long for a forty byte cap, and more\n",
		    0),
		B("m 1 0x10\n", 0),
		B("m 1\0 2\n", 0),
		B("m 1 \xc3\x28\n", 0),
		B("# caf\xc3\xa9 ok\n", 1),
		B("x@ 1\n", 0),
		B("m @2025-02-29T00:00:00Z 1\n", 0),
		B(".predict m a=1 b=2\r\n", 1),
		B("m a=1 a=2\n", 0),
		B(".nope\n", 0),
		B("m 1 a=2\n", 0),
		B("m\n", 0),
		B(".get\n", 0),
		B("m 1 nan\n", 0),
		B("m 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16\n", 1), /* 40 */
		B("m 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 167\n", 0), /* 41 */
		B("m 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16\r\n", 0),
		B("\r\n", 1),
		B("a_very_long_line_without_any_blank_at_all_0123456789\n", 0),
		B("m 2 3\n", 1),
		B("last 7 8", 1),	/* no final LF: proto_finish */
	};
	size_t i, n = 0;

	for (i = 0; i < sizeof(lines) / sizeof(lines[0]); i++) {
		memcpy(buf + n, lines[i].s, lines[i].len);
		n += lines[i].len;
	}
	return n;
}

START_TEST(test_proto_reader_chunking)
{
	static char data[4096];
	size_t len = corpus(data);
	char *whole, *bytes, *rnd;
	uint64_t seed;

	whole = feed(data, len, 40, FEED_WHOLE, 0);
	bytes = feed(data, len, 40, FEED_BYTES, 0);
	ck_assert_str_eq(whole, bytes);
	for (seed = 1; seed <= 50; seed++) {
		rnd = feed(data, len, 40, FEED_RANDOM, seed);
		ck_assert_str_eq(whole, rnd);
		free(rnd);
	}
	/* Spot checks of the summary itself. */
	ck_assert_ptr_nonnull(strstr(whole, "E10 line_too_long [line is "
	    "longer than 40 bytes]"));
	ck_assert_ptr_nonnull(strstr(whole, "E25 line_too_long"));
	ck_assert_ptr_nonnull(strstr(whole, "E26 line_too_long"));
	ck_assert_ptr_nonnull(strstr(whole, "M24 k1 c0 m t=0x1p+0"));
	ck_assert_ptr_nonnull(strstr(whole, "M30 k1 c0 last t=0x1.cp+2"));
	ck_assert_ptr_nonnull(strstr(whole, "E12 nul_byte [NUL byte at byte "
	    "4] \n"));
	ck_assert_ptr_nonnull(strstr(whole, "E13 bad_utf8"));
	ck_assert_ptr_nonnull(strstr(whole, "M29 k1 c0 m t=0x1p+1"));
	free(whole);
	free(bytes);
}
END_TEST

START_TEST(test_proto_reader_random_lines)
{
	/* Random lines from a small alphabet, including CR, NUL, UTF-8
	 * pieces and LFs, at a small cap: whole vs byte vs random chunks. */
	static const char *const pieces[] = {
		"m", " ", "\t", "1", "2.5", "-0", "a=", "b=", "?", "@5", ".get",
		".watch", "*", "#", "\r", "\n", "\n", "\n", "\xc3\xa9", "\xff",
		"e9", "x", "every=3", ".predict", "nan",
	};
	static char data[20000];
	size_t len = 0, k;
	uint64_t seed = 99, r;
	char *whole, *other;
	int round;

	for (round = 0; round < 10; round++) {
		len = 0;
		while (len < sizeof(data) - 16) {
			r = rng_next(&seed);
			if (r % 97 == 0) {
				data[len++] = '\0';
				continue;
			}
			k = strlen(pieces[r % (sizeof(pieces) /
			    sizeof(pieces[0]))]);
			memcpy(data + len, pieces[r % (sizeof(pieces) /
			    sizeof(pieces[0]))], k);
			len += k;
		}
		whole = feed(data, len, 24, FEED_WHOLE, 0);
		other = feed(data, len, 24, FEED_BYTES, 0);
		ck_assert_str_eq(whole, other);
		free(other);
		other = feed(data, len, 24, FEED_RANDOM, seed);
		ck_assert_str_eq(whole, other);
		free(other);
		free(whole);
	}
}
END_TEST

START_TEST(test_proto_reader_too_long_early)
{
	struct proto_reader *rd = proto_reader_new(8);
	size_t used;
	int i, rc;

	ck_assert_ptr_nonnull(rd);
	/* Byte by byte: the 9th byte without LF triggers the error at once. */
	for (i = 0; i < 8; i++) {
		rc = proto_next(rd, "abcdefgh" + i, 1, &used, &msg);
		ck_assert_int_eq(rc, PROTO_NEED_MORE);
		ck_assert_uint_eq(used, 1);
	}
	rc = proto_next(rd, "i", 1, &used, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_int_eq(msg.reason, PROTO_R_LINE_TOO_LONG);
	ck_assert_uint_eq(msg.line, 1);
	ck_assert_uint_eq(used, 1);
	/* The rest of the line is skipped silently, however long. */
	for (i = 0; i < 1000; i++) {
		rc = proto_next(rd, "zzzzzzzzzz", 10, &used, &msg);
		ck_assert_int_eq(rc, PROTO_NEED_MORE);
		ck_assert_uint_eq(used, 10);
	}
	rc = proto_next(rd, "zz\nm 1\n", 7, &used, &msg);
	ck_assert_int_eq(rc, PROTO_MSG);
	ck_assert_uint_eq(used, 7);
	ck_assert_uint_eq(msg.line, 2);
	ck_assert(str_eq(msg.model, "m"));

	/* In one buffer, without LF: error and all input consumed. */
	proto_reader_reset(rd);
	rc = proto_next(rd, "0123456789", 10, &used, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_uint_eq(used, 10);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_NEED_MORE);
	/* Exactly 8 bytes is fine; 8 + CR is not (the CR counts). */
	proto_reader_reset(rd);
	rc = proto_next(rd, "m 1 2 34\nm 1 2 34\r\n", 19, &used, &msg);
	ck_assert_int_eq(rc, PROTO_MSG);
	ck_assert_uint_eq(used, 9);
	rc = proto_next(rd, "m 1 2 34\r\n", 10, &used, &msg);
	ck_assert_int_eq(rc, PROTO_ERROR);
	ck_assert_int_eq(msg.reason, PROTO_R_LINE_TOO_LONG);
	ck_assert_uint_eq(msg.line, 2);
	ck_assert_uint_eq(used, 10);
	proto_reader_free(rd);
}
END_TEST

START_TEST(test_proto_reader_line_numbers)
{
	static const char data[] = "a 1\n\n#c\nbad! 1\nb 2\n.sync\n";
	struct proto_reader *rd = proto_reader_new(64);
	const char *p = data;
	size_t len = sizeof(data) - 1, used;
	uint64_t want = 1;
	int rc;

	while ((rc = proto_next(rd, p, len, &used, &msg)) != PROTO_NEED_MORE) {
		ck_assert_uint_eq(msg.line, want);
		ck_assert_int_eq(rc, want == 4 ? PROTO_ERROR : PROTO_MSG);
		want++;
		p += used;
		len -= used;
	}
	ck_assert_uint_eq(want, 7);
	/* Reset restarts numbering. */
	proto_reader_reset(rd);
	rc = proto_next(rd, "a 1\n", 4, &used, &msg);
	ck_assert_uint_eq(msg.line, 1);
	proto_reader_free(rd);
}
END_TEST

START_TEST(test_proto_reader_zero_copy)
{
	struct proto_reader *rd = proto_reader_new(64);
	static const char whole[] = "m 1\n";
	static const char part1[] = "mm ", part2[] = "2\n";
	size_t used;

	ck_assert_int_eq(proto_next(rd, whole, 4, &used, &msg), PROTO_MSG);
	ck_assert_ptr_eq(msg.model.ptr, whole);	/* parsed in place */
	ck_assert_int_eq(proto_next(rd, part1, 3, &used, &msg),
	    PROTO_NEED_MORE);
	ck_assert_int_eq(proto_next(rd, part2, 2, &used, &msg), PROTO_MSG);
	ck_assert(str_eq(msg.model, "mm"));
	ck_assert(msg.model.ptr != part1);	/* in the reader's buffer */
	ck_assert(msg.target == 2.0);
	proto_reader_free(rd);
}
END_TEST

START_TEST(test_proto_reader_finish)
{
	struct proto_reader *rd = proto_reader_new(64);
	size_t used;

	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_NEED_MORE);
	ck_assert_int_eq(proto_next(rd, "a 1\nm 1 2", 9, &used, &msg),
	    PROTO_MSG);
	ck_assert_int_eq(proto_next(rd, "a 1\nm 1 2" + used, 9 - used, &used,
	    &msg), PROTO_NEED_MORE);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_MSG);
	ck_assert_uint_eq(msg.line, 2);
	ck_assert(str_eq(msg.model, "m"));
	ck_assert_uint_eq(msg.nvalues, 1);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_NEED_MORE);
	/* A final CR is dropped at EOF as before an LF. */
	ck_assert_int_eq(proto_next(rd, "z 5\r", 4, &used, &msg),
	    PROTO_NEED_MORE);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_MSG);
	ck_assert(msg.target == 5.0);
	ck_assert_uint_eq(msg.line, 3);
	/* A bad final line is an error, with its number. */
	ck_assert_int_eq(proto_next(rd, "z", 1, &used, &msg),
	    PROTO_NEED_MORE);
	ck_assert_int_eq(proto_finish(rd, &msg), PROTO_ERROR);
	ck_assert_int_eq(msg.reason, PROTO_R_NO_VALUES);
	ck_assert_uint_eq(msg.line, 4);
	proto_reader_free(rd);
}
END_TEST

START_TEST(test_proto_reader_new_bounds)
{
	struct proto_reader *rd;
	size_t used;

	ck_assert_ptr_null(proto_reader_new(0));
	rd = proto_reader_new(8);
	used = 99;
	ck_assert_int_eq(proto_next(rd, NULL, 0, &used, &msg),
	    PROTO_NEED_MORE);
	ck_assert_uint_eq(used, 0);
	proto_reader_free(rd);
	ck_assert_ptr_null(proto_reader_new(PROTO_LINE_MAX + 1));
	rd = proto_reader_new(PROTO_LINE_MAX);
	ck_assert_ptr_nonnull(rd);
	proto_reader_free(rd);
	proto_reader_free(NULL);
}
END_TEST

/*
 * Issue 9 (security): no command takes a file path from a client. Every
 * argument a command accepts is a model name (checked: no '/', no leading
 * '.'), a count, `every=N`, `*` or the .auth token; .save and .reload take
 * none. A new command with a free-form argument must be looked at here.
 */
START_TEST(test_proto_no_path_arguments)
{
	static const char *const paths[] = { "/etc/passwd", "../x", "./x",
	    "x/y", "..", NULL };
	const struct proto_cmd_info *ci;
	char line[64];
	int c, i;

	for (c = PROTO_CMD_NONE + 1; c < PROTO_NCMDS; c++) {
		ci = proto_cmd_info((enum proto_cmd)c);
		ck_assert_ptr_nonnull(ci);
		if (ci->max_args == 0)
			continue;
		ck_assert_msg((ci->flags & PROTO_CMD_NAME) ||
		    c == PROTO_CMD_WATCH || c == PROTO_CMD_AUTH,
		    "%s takes a free-form argument", ci->name);
		if (c == PROTO_CMD_AUTH)
			continue;
		for (i = 0; paths[i] != NULL; i++) {
			snprintf(line, sizeof(line), "%s %s", ci->name,
			    paths[i]);
			ck_assert_msg(parse(line) == PROTO_ERROR,
			    "\"%s\" accepted", line);
		}
	}
	ck_assert_int_eq(proto_cmd_info(PROTO_CMD_SAVE)->max_args, 0);
	ck_assert_int_eq(proto_cmd_info(PROTO_CMD_RELOAD)->max_args, 0);
	for (i = 0; paths[i] != NULL; i++)
		ck_assert_int_ne(proto_check_model_name(paths[i],
		    strlen(paths[i])), 0);
}
END_TEST

Suite *
proto_suite(void)
{
	Suite *s = suite_create("proto");
	TCase *tc;

	tc = tcase_create("lines");
	tcase_add_test(tc, test_proto_record_positional);
	tcase_add_test(tc, test_proto_record_blanks);
	tcase_add_test(tc, test_proto_record_predict);
	tcase_add_test(tc, test_proto_record_named);
	tcase_add_test(tc, test_proto_record_mixed_forms);
	tcase_add_test(tc, test_proto_empty_and_comments);
	tcase_add_test(tc, test_proto_model_names);
	tcase_add_test(tc, test_proto_no_and_too_many_values);
	tcase_add_test(tc, test_proto_duplicates_many);
	tcase_add_test(tc, test_proto_utf8);
	tcase_add_test(tc, test_proto_nul_byte);
	tcase_add_test(tc, test_proto_detail_truncation);
	suite_add_tcase(s, tc);

	tc = tcase_create("numbers");
	tcase_add_test(tc, test_proto_numbers_grammar);
	tcase_add_test(tc, test_proto_numbers_values);
	tcase_add_test(tc, test_proto_numbers_long);
	tcase_add_test(tc, test_proto_numbers_random_vs_strtod);
	tcase_add_test(tc, test_proto_numbers_in_lines_vs_strtod);
	tcase_add_test(tc, test_proto_numbers_mutated_vs_regex);
	tcase_add_test(tc, test_proto_numbers_feed_vs_strtod);
	tcase_add_test(tc, test_proto_numbers_feed_edges);
	suite_add_tcase(s, tc);

	tc = tcase_create("times");
	tcase_add_test(tc, test_proto_times);
	tcase_add_test(tc, test_proto_times_every_day);
	suite_add_tcase(s, tc);

	tc = tcase_create("commands");
	tcase_add_test(tc, test_proto_commands);
	tcase_add_test(tc, test_proto_command_predict);
	tcase_add_test(tc, test_proto_command_arity);
	tcase_add_test(tc, test_proto_command_arguments);
	tcase_add_test(tc, test_proto_command_table);
	suite_add_tcase(s, tc);

	tc = tcase_create("replies");
	tcase_add_test(tc, test_proto_reason_strings);
	tcase_add_test(tc, test_proto_format_error);
	suite_add_tcase(s, tc);

	tc = tcase_create("reader");
	tcase_add_test(tc, test_proto_reader_chunking);
	tcase_add_test(tc, test_proto_reader_random_lines);
	tcase_add_test(tc, test_proto_reader_too_long_early);
	tcase_add_test(tc, test_proto_reader_line_numbers);
	tcase_add_test(tc, test_proto_reader_zero_copy);
	tcase_add_test(tc, test_proto_reader_finish);
	tcase_add_test(tc, test_proto_reader_new_bounds);
	tcase_add_test(tc, test_proto_no_path_arguments);
	suite_add_tcase(s, tc);
	return s;
}
