/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for json: scalars, escaping (RFC 8259 §7), nesting and
 * commas, the depth cap, sticky overflow that never writes past the
 * buffer, and a bit-exact round trip of random doubles through json_num
 * and strtod. Expected texts are written out by hand; the number texts
 * were computed with Python 3.11 as
 *   next(s for p in (15, 16, 17) if float(s := '%.*g' % (p, v)) == v)
 * (Python's '%g' and glibc's printf both round correctly).
 */
#include <check.h>
#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "json.h"
#include "suites.h"

static char jbuf[4096];
static struct json J;

static void
setup(void)
{
	json_init(&J, jbuf, sizeof(jbuf));
}

/* Write one number as the whole document and return the text. */
static const char *
num_text(double v)
{
	setup();
	ck_assert_int_eq(json_num(&J, v), 0);
	ck_assert_int_eq(json_finish(&J), 0);
	return jbuf;
}

START_TEST(test_json_integers)
{
	setup();
	json_arr_begin(&J);
	json_int(&J, 0);
	json_int(&J, -1);
	json_int(&J, INT64_MAX);
	json_int(&J, INT64_MIN);
	json_uint(&J, 0);
	json_uint(&J, UINT64_MAX);
	json_arr_end(&J);
	ck_assert_int_eq(json_finish(&J), 0);
	ck_assert_str_eq(jbuf, "[0,-1,9223372036854775807,"
	    "-9223372036854775808,0,18446744073709551615]");
	ck_assert_uint_eq(J.len, strlen(jbuf));
}
END_TEST

START_TEST(test_json_literals)
{
	setup();
	json_arr_begin(&J);
	json_bool(&J, 1);
	json_bool(&J, 0);
	json_bool(&J, 42);
	json_null(&J);
	json_arr_end(&J);
	ck_assert_str_eq(jbuf, "[true,false,true,null]");
}
END_TEST

START_TEST(test_json_numbers_shortest)
{
	/* Expected texts: Python 3.11, see the file header. */
	ck_assert_str_eq(num_text(0.1), "0.1");
	ck_assert_str_eq(num_text(-0.0), "-0");
	ck_assert_str_eq(num_text(0.0), "0");
	ck_assert_str_eq(num_text(1e300), "1e+300");
	ck_assert_str_eq(num_text(0x1p-1074), "4.94065645841247e-324");
	ck_assert_str_eq(num_text(0.1 + 0.2), "0.30000000000000004");
	ck_assert_str_eq(num_text(1.0 / 3.0), "0.3333333333333333");
	ck_assert_str_eq(num_text(100.0), "100");
	ck_assert_str_eq(num_text(9007199254740992.0), "9007199254740992");
	ck_assert_str_eq(num_text(1e21), "1e+21");
	ck_assert_str_eq(num_text(1e-7), "1e-07");
	ck_assert_str_eq(num_text(123456789012345680.0),
	    "1.2345678901234568e+17");
	ck_assert_str_eq(num_text(DBL_MIN), "2.2250738585072014e-308");
	ck_assert_str_eq(num_text(DBL_MAX), "1.7976931348623157e+308");
	ck_assert_str_eq(num_text(-1.5), "-1.5");
}
END_TEST

START_TEST(test_json_numbers_nonfinite_null)
{
	/* RFC 8259 §6: NaN and Infinity are not permitted; we write null. */
	ck_assert_str_eq(num_text(NAN), "null");
	ck_assert_str_eq(num_text(-NAN), "null");
	ck_assert_str_eq(num_text(INFINITY), "null");
	ck_assert_str_eq(num_text(-INFINITY), "null");
}
END_TEST

/* splitmix64 (S. Vigna, public domain): a seeded, portable PRNG. */
static uint64_t
rng_next(uint64_t *s)
{
	uint64_t z = (*s += 0x9e3779b97f4a7c15ULL);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
	return z ^ (z >> 31);
}

START_TEST(test_json_numbers_roundtrip_random)
{
	uint64_t seed = 1, bits, back;
	char out[32], alt[40];
	double v, r;
	int i, n, mismatches = 0, notshortest = 0;

	for (i = 0; i < 100000; i++) {
		bits = rng_next(&seed);
		if (i % 4 == 1)	/* also values of everyday size */
			bits = (bits & 0x800fffffffffffffULL) |
			    ((uint64_t)(1023 - 30 + (int)(bits >> 52) % 60)
			    << 52);
		memcpy(&v, &bits, sizeof(v));
		if (!isfinite(v))
			continue;
		n = json_format_double(out, sizeof(out), v);
		if (n <= 0)
			ck_abort_msg("json_format_double(%a) failed", v);
		r = strtod(out, NULL);
		memcpy(&back, &r, sizeof(back));
		if (back != bits)
			mismatches++;
		/* Shortest of the three: a shorter precision must fail. */
		{
			int p = 17;

			snprintf(alt, sizeof(alt), "%.15g", v);
			if (strtod(alt, NULL) == v)
				p = 15;
			else {
				snprintf(alt, sizeof(alt), "%.16g", v);
				if (strtod(alt, NULL) == v)
					p = 16;
			}
			snprintf(alt, sizeof(alt), "%.*g", p, v);
			if (strcmp(alt, out) != 0)
				notshortest++;
		}
	}
	ck_assert_msg(mismatches == 0, "%d of 100000 doubles did not "
	    "round-trip", mismatches);
	ck_assert_int_eq(notshortest, 0);
}
END_TEST

START_TEST(test_json_string_escapes)
{
	setup();
	ck_assert_int_eq(json_str(&J, "a\"b\\c/d\n\t\r\b\f\x01\x1f\x7f"), 0);
	/* RFC 8259 §7: '"', '\\' and U+0000-U+001F must be escaped; '/' and
	 * DEL need not be. We write every control character as \u00XX. */
	ck_assert_str_eq(jbuf, "\"a\\\"b\\\\c/d\\u000a\\u0009\\u000d"
	    "\\u0008\\u000c\\u0001\\u001f\x7f\"");
}
END_TEST

START_TEST(test_json_string_nul_and_len)
{
	setup();
	ck_assert_int_eq(json_strn(&J, "a\0b", 3), 0);
	ck_assert_str_eq(jbuf, "\"a\\u0000b\"");
	setup();
	ck_assert_int_eq(json_strn(&J, "abcdef", 3), 0);
	ck_assert_str_eq(jbuf, "\"abc\"");
	setup();
	ck_assert_int_eq(json_str(&J, ""), 0);
	ck_assert_str_eq(jbuf, "\"\"");
}
END_TEST

START_TEST(test_json_string_utf8)
{
	/* Valid UTF-8 of 2, 3 and 4 bytes (U+00E9, U+20AC, U+1F600) and
	 * U+2028 pass through unchanged. */
	setup();
	ck_assert_int_eq(json_str(&J, "\xc3\xa9\xe2\x82\xac\xf0\x9f\x98\x80"
	    "\xe2\x80\xa8"), 0);
	ck_assert_str_eq(jbuf, "\"\xc3\xa9\xe2\x82\xac\xf0\x9f\x98\x80"
	    "\xe2\x80\xa8\"");
	/* Invalid bytes become U+FFFD, one per byte that cannot start a
	 * sequence: a lone continuation, an overlong C0 80, a surrogate
	 * ED A0 80, a truncated E2 82 before 'x', and FF. */
	setup();
	ck_assert_int_eq(json_str(&J, "\x80|\xc0\x80|\xed\xa0\x80|\xe2\x82x|"
	    "\xff"), 0);
	ck_assert_str_eq(jbuf, "\"\xef\xbf\xbd|\xef\xbf\xbd\xef\xbf\xbd|"
	    "\xef\xbf\xbd\xef\xbf\xbd\xef\xbf\xbd|\xef\xbf\xbd\xef\xbf\xbdx|"
	    "\xef\xbf\xbd\"");
}
END_TEST

START_TEST(test_json_nesting_commas)
{
	setup();
	json_obj_begin(&J);
	json_key(&J, "a");
	json_arr_begin(&J);
	json_int(&J, 1);
	json_num(&J, 2.5);
	json_obj_begin(&J);
	json_key(&J, "b");
	json_null(&J);
	json_obj_end(&J);
	json_arr_begin(&J);
	json_arr_end(&J);
	json_arr_end(&J);
	json_key(&J, "c");
	json_obj_begin(&J);
	json_obj_end(&J);
	json_key(&J, "k\"ey");
	json_str(&J, "v");
	json_obj_end(&J);
	ck_assert_int_eq(json_finish(&J), 0);
	ck_assert_str_eq(jbuf, "{\"a\":[1,2.5,{\"b\":null},[]],\"c\":{},"
	    "\"k\\\"ey\":\"v\"}");
	ck_assert_int_eq(J.depth, 0);
}
END_TEST

START_TEST(test_json_finish_states)
{
	setup();
	ck_assert_int_eq(json_finish(&J), E_STATE);	/* nothing yet */
	json_obj_begin(&J);
	ck_assert_int_eq(json_finish(&J), E_STATE);	/* still open */
	json_obj_end(&J);
	ck_assert_int_eq(json_finish(&J), 0);
}
END_TEST

START_TEST(test_json_depth_limit)
{
	int i;

	setup();
	for (i = 0; i < JSON_MAX_DEPTH; i++)
		ck_assert_int_eq(json_arr_begin(&J), 0);
	ck_assert_int_eq(json_arr_begin(&J), E_LIMIT);
	ck_assert_int_eq(J.overflow, 1);
	ck_assert_int_eq(json_finish(&J), E_LIMIT);
}
END_TEST

START_TEST(test_json_overflow_sticky_bounded)
{
	char small[16 + 8];
	struct json j;
	size_t cap;

	/* Every cap from 1 to 16: the document below needs 35 bytes. */
	for (cap = 1; cap <= 16; cap++) {
		memset(small, 'Z', sizeof(small));
		json_init(&j, small, cap);
		json_obj_begin(&j);
		json_key(&j, "name");
		json_str(&j, "a long string");
		json_key(&j, "n");
		json_int(&j, 12345);
		json_obj_end(&j);
		ck_assert_int_eq(j.overflow, 1);
		ck_assert_int_eq(json_finish(&j), E_LIMIT);
		ck_assert_uint_lt(j.len, cap);
		ck_assert_int_eq(small[j.len], '\0');
		/* Nothing written past cap. */
		ck_assert_int_eq(memcmp(small + cap, "ZZZZZZZZZZZZZZZZZZZZZZZZ",
		    sizeof(small) - cap), 0);
		/* Sticky: later writes fail even if they would fit. */
		ck_assert_int_eq(json_null(&j), E_LIMIT);
	}
	/* A failed string leaves the text before it intact. */
	json_init(&j, small, 12);
	json_arr_begin(&j);
	json_int(&j, 7);
	ck_assert_int_eq(json_str(&j, "too long here"), E_LIMIT);
	ck_assert_str_eq(small, "[7");
	/* Exactly fitting: 10 bytes of JSON in an 11-byte buffer. */
	json_init(&j, small, 11);
	ck_assert_int_eq(json_str(&j, "12345678"), 0);
	ck_assert_int_eq(json_finish(&j), 0);
	ck_assert_str_eq(small, "\"12345678\"");
	json_init(&j, small, 10);
	ck_assert_int_eq(json_str(&j, "12345678"), E_LIMIT);
	ck_assert_str_eq(small, "");
}
END_TEST

Suite *
json_suite(void)
{
	Suite *s = suite_create("json");
	TCase *tc;

	tc = tcase_create("scalars");
	tcase_add_test(tc, test_json_integers);
	tcase_add_test(tc, test_json_literals);
	tcase_add_test(tc, test_json_numbers_shortest);
	tcase_add_test(tc, test_json_numbers_nonfinite_null);
	tcase_add_test(tc, test_json_numbers_roundtrip_random);
	suite_add_tcase(s, tc);

	tc = tcase_create("strings");
	tcase_add_test(tc, test_json_string_escapes);
	tcase_add_test(tc, test_json_string_nul_and_len);
	tcase_add_test(tc, test_json_string_utf8);
	suite_add_tcase(s, tc);

	tc = tcase_create("structure");
	tcase_add_test(tc, test_json_nesting_commas);
	tcase_add_test(tc, test_json_finish_states);
	tcase_add_test(tc, test_json_depth_limit);
	tcase_add_test(tc, test_json_overflow_sticky_bounded);
	suite_add_tcase(s, tc);
	return s;
}
