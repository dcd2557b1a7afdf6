/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for jread, the client's JSON reader. Sources:
 * - RFC 8259 §13 (the two example texts, copied from the RFC) and §6/§7
 *   (number and string grammar);
 * - cases named after files of Nicolas Seriot's JSONTestSuite
 *   (github.com/nst/JSONTestSuite, test_parsing/: y_ = must accept,
 *   n_ = must reject), written out from memory of their contents;
 * - UTF-8 encodings of code points from RFC 3629 §3 and the Unicode
 *   charts (U+00E9 = C3 A9, U+20AC = E2 82 AC, U+1F600 = F0 9F 98 80).
 * Numbers must come back as the double glibc's strtod gives.
 */
#include <check.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "jread.h"
#include "suites.h"

static struct jr *
parse_ok(const char *text)
{
	struct jr *v = NULL;
	char err[160];
	int rc;

	rc = jr_parse(text, strlen(text), &v, err, sizeof(err));
	ck_assert_msg(rc == 0, "rejected %s: %s", text, err);
	ck_assert_ptr_nonnull(v);
	return v;
}

static void
parse_bad(const char *text, size_t len)
{
	struct jr *v = (struct jr *)1;
	char err[160];
	int rc;

	rc = jr_parse(text, len, &v, err, sizeof(err));
	ck_assert_msg(rc == E_PROTO, "accepted \"%.*s\"", (int)len, text);
	ck_assert_ptr_null(v);
	ck_assert_msg(strncmp(err, "byte ", 5) == 0, "message: %s", err);
}

/* RFC 8259 §13, first example (the "Image" object), verbatim. */
static const char rfc_image[] =
"{\n"
"  \"Image\": {\n"
"      \"Width\":  800,\n"
"      \"Height\": 600,\n"
"      \"Title\":  \"View from 15th Floor\",\n"
"      \"Thumbnail\": {\n"
"          \"Url\":    \"http://www.example.com/image/481989943\",\n"
"          \"Height\": 125,\n"
"          \"Width\":  100\n"
"      },\n"
"      \"Animated\" : false,\n"
"      \"IDs\": [116, 943, 234, 38793]\n"
"    }\n"
"}\n";

/* RFC 8259 §13, second example (an array of two objects), verbatim. */
static const char rfc_array[] =
"[\n"
"  {\n"
"     \"precision\": \"zip\",\n"
"     \"Latitude\":  37.7668,\n"
"     \"Longitude\": -122.3959,\n"
"     \"Address\":   \"\",\n"
"     \"City\":      \"SAN FRANCISCO\",\n"
"     \"State\":     \"CA\",\n"
"     \"Zip\":       \"94107\",\n"
"     \"Country\":   \"US\"\n"
"  },\n"
"  {\n"
"     \"precision\": \"zip\",\n"
"     \"Latitude\":  37.371991,\n"
"     \"Longitude\": -122.026020,\n"
"     \"Address\":   \"\",\n"
"     \"City\":      \"SUNNYVALE\",\n"
"     \"State\":     \"CA\",\n"
"     \"Zip\":       \"94085\",\n"
"     \"Country\":   \"US\"\n"
"  }\n"
"]\n";

START_TEST(test_jread_rfc8259_examples)
{
	struct jr *v = parse_ok(rfc_image);
	const struct jr *img = jr_find(v, "Image"), *ids;

	ck_assert_ptr_nonnull(img);
	ck_assert_double_eq(jr_num(jr_find(img, "Width")), 800);
	ck_assert_str_eq(jr_str(jr_find(img, "Title")),
	    "View from 15th Floor");
	ck_assert_double_eq(jr_num(jr_find(jr_find(img, "Thumbnail"),
	    "Height")), 125);
	ck_assert_int_eq(jr_true(jr_find(img, "Animated")), 0);
	ck_assert_int_eq(jr_find(img, "Animated")->type, JR_BOOL);
	ids = jr_find(img, "IDs");
	ck_assert_uint_eq(jr_len(ids), 4);
	ck_assert_double_eq(jr_num(jr_at(ids, 3)), 38793);
	ck_assert_ptr_null(jr_at(ids, 4));
	jr_free(v);

	v = parse_ok(rfc_array);
	ck_assert_uint_eq(jr_len(v), 2);
	ck_assert_double_eq(jr_num(jr_find(jr_at(v, 1), "Longitude")),
	    strtod("-122.026020", NULL));
	ck_assert_str_eq(jr_str(jr_find(jr_at(v, 0), "Zip")), "94107");
	ck_assert_uint_eq(jr_len(jr_find(jr_at(v, 0), "Address")), 0);
	jr_free(v);
}
END_TEST

/* RFC 8259 §2: a JSON text is any serialized value, scalars included. */
START_TEST(test_jread_scalars)
{
	struct jr *v;

	v = parse_ok(" 3 ");
	ck_assert_int_eq(v->type, JR_NUM);
	ck_assert_double_eq(jr_num(v), 3);
	jr_free(v);
	v = parse_ok("null");
	ck_assert_int_eq(v->type, JR_NULL);
	ck_assert(isnan(jr_num(v)));
	jr_free(v);
	v = parse_ok("true");
	ck_assert_int_eq(jr_true(v), 1);
	jr_free(v);
	v = parse_ok("\"\"");
	ck_assert_str_eq(jr_str(v), "");
	jr_free(v);
	v = parse_ok("{}");
	ck_assert_uint_eq(jr_len(v), 0);
	ck_assert_ptr_null(jr_find(v, "x"));
	jr_free(v);
	v = parse_ok("[]");
	ck_assert_uint_eq(jr_len(v), 0);
	jr_free(v);
}
END_TEST

/* RFC 8259 §6 numbers; values must equal glibc strtod's. */
START_TEST(test_jread_numbers)
{
	static const char *const txt[] = {
		"0", "-0", "1", "-1", "0.1", "1E+2", "1e-2", "123.456e7",
		"1.7976931348623157e308",	/* DBL_MAX */
		"2.2250738585072014e-308",	/* DBL_MIN */
		"4.9e-324",			/* smallest subnormal */
		"1e-400",			/* underflows to 0 */
		"0.30000000000000004",
		"12345678901234567890123456789012345678901234567890123456789"
		"0123456789"			/* longer than the stack copy */
	};
	size_t i;

	for (i = 0; i < sizeof(txt) / sizeof(txt[0]); i++) {
		struct jr *v = parse_ok(txt[i]);
		double want = strtod(txt[i], NULL);

		ck_assert_msg(memcmp(&v->num, &want, sizeof(want)) == 0,
		    "%s", txt[i]);
		jr_free(v);
	}
	{
		struct jr *v = parse_ok("-0");

		ck_assert(signbit(v->num));
		jr_free(v);
	}
}
END_TEST

/* RFC 8259 §7 escapes; UTF-8 per RFC 3629. */
START_TEST(test_jread_strings)
{
	struct jr *v;

	/* y_string_escaped_control_character and friends. */
	v = parse_ok("\"a\\\"b\\\\c\\/d\\b\\f\\n\\r\\t\"");
	ck_assert_str_eq(jr_str(v), "a\"b\\c/d\b\f\n\r\t");
	jr_free(v);
	/* U+00E9 and U+20AC by escape; raw UTF-8 passes through. */
	v = parse_ok("\"\\u00e9\\u20AC \xc3\xa9\"");
	ck_assert_str_eq(jr_str(v), "\xc3\xa9\xe2\x82\xac \xc3\xa9");
	jr_free(v);
	/* y_string_surrogates_U+1D11E style: a pair makes one code point;
	 * U+1F600 is F0 9F 98 80. */
	v = parse_ok("\"\\ud83d\\ude00\"");
	ck_assert_str_eq(jr_str(v), "\xf0\x9f\x98\x80");
	ck_assert_uint_eq(jr_len(v), 4);
	jr_free(v);
	/* y_string_null_escape: \u0000 is allowed, len is authoritative. */
	v = parse_ok("[\"a\\u0000b\"]");
	ck_assert_uint_eq(jr_len(jr_at(v, 0)), 3);
	ck_assert_int_eq(jr_at(v, 0)->str[1], '\0');
	jr_free(v);
	/* Keys are decoded like strings. */
	v = parse_ok("{\"k\\u00e9\":1}");
	ck_assert_double_eq(jr_num(jr_find(v, "k\xc3\xa9")), 1);
	jr_free(v);
}
END_TEST

START_TEST(test_jread_rejects)
{
	static const char *const bad[] = {
		"",			/* n_structure_no_data */
		" ",
		"[\"\",]",		/* n_array_extra_comma */
		"[,1]",			/* n_array_comma_and_number */
		"{\"id\":0,}",		/* n_object_trailing_comma */
		"{\"a\" 1}",		/* n_object_missing_colon */
		"{1:1}",		/* n_object_non_string_key */
		"{'a':1}",		/* n_object_single_quote */
		"[1 2]",		/* n_array_1_and_2_no_comma */
		"[1",			/* n_array_unclosed */
		"[1]x",			/* n_structure_trailing_garbage */
		"[1][2]",		/* n_structure_double_array */
		"[1]//c",		/* n_structure_comment */
		"[012]",		/* n_number_with_leading_zero */
		"[.2]",			/* n_number_starting_with_dot */
		"[1.]",			/* n_number_real_without_fractional_part */
		"[2.e3]",		/* n_number_2.e3 */
		"[1e]",			/* n_number_0_capital_E */
		"[-]",			/* n_number_just_minus */
		"[+1]",			/* n_number_+1 */
		"[0x1]",		/* n_number_hex_1_digit */
		"[NaN]",		/* n_number_NaN */
		"[Infinity]",		/* n_number_infinity */
		"[1e400]",		/* i_number_huge_exp: we reject */
		"[tru]",		/* n_incomplete_true */
		"[nul]",
		"[True]",		/* n_structure_capitalized_True */
		"[\"a]",		/* n_string_unterminated */
		"[\"\\a\"]",		/* n_string_escape_x-like */
		"[\"\\u00G0\"]",	/* n_string_invalid_unicode_escape */
		"[\"\\u12\"]",		/* n_string_incomplete_escaped_char */
		"[\"\\ud800\"]",	/* i_string_lone_surrogate: we reject */
		"[\"\\udc00\"]",	/* i_string_1st_valid_surrogate_2nd_invalid */
		"[\"\\ud800\\u0041\"]",
		"[\"\t\"]",		/* n_string_unescaped_tab */
		"[\"\xff\"]",		/* n_string_invalid_utf8 */
		"[\"\xc0\xaf\"]",	/* overlong '/' (RFC 3629 §10) */
		"[\"\xed\xa0\x80\"]",	/* UTF-8 encoded surrogate */
		"[\"\xf4\x90\x80\x80\"]",	/* above U+10FFFF */
		"[\"\xe2\x82\"]",	/* truncated sequence */
		"{\"a\":1,\"a\":2}",	/* duplicate key: we reject */
	};
	size_t i;

	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++)
		parse_bad(bad[i], strlen(bad[i]));
	/* n_multidigit_number_then_00: a NUL byte is not white space. */
	parse_bad("123\0", 4);
	/* NULL text of length 0 is "no value". */
	parse_bad(NULL, 0);
}
END_TEST

START_TEST(test_jread_error_position)
{
	struct jr *v;
	char err[160];

	ck_assert_int_eq(jr_parse("[1,]", 4, &v, err, sizeof(err)), E_PROTO);
	ck_assert_str_eq(err, "byte 4: expected a value");
	ck_assert_int_eq(jr_parse("{\"a\":1 x", 8, &v, err, sizeof(err)),
	    E_PROTO);
	ck_assert_str_eq(err, "byte 8: expected ',' or '}'");
	/* A zero-length error buffer is allowed. */
	ck_assert_int_eq(jr_parse("x", 1, &v, err, 0), E_PROTO);
}
END_TEST

/* Nesting: JR_MAX_DEPTH levels are fine, one more is refused (the
 * nesting cap is our limit; RFC 8259 §9 allows one). */
START_TEST(test_jread_depth)
{
	char buf[2 * JR_MAX_DEPTH + 8];
	struct jr *v;
	char err[160];
	int i;

	for (i = 0; i < JR_MAX_DEPTH; i++) {
		buf[i] = '[';
		buf[JR_MAX_DEPTH + i] = ']';
	}
	ck_assert_int_eq(jr_parse(buf, 2 * JR_MAX_DEPTH, &v, err,
	    sizeof(err)), 0);
	jr_free(v);
	memmove(buf + 1, buf, 2 * JR_MAX_DEPTH);
	buf[0] = '[';
	buf[2 * JR_MAX_DEPTH + 1] = ']';
	ck_assert_int_eq(jr_parse(buf, 2 * JR_MAX_DEPTH + 2, &v, err,
	    sizeof(err)), E_PROTO);
	ck_assert_msg(strstr(err, "nested deeper") != NULL, "%s", err);
}
END_TEST

/* A large array grows through several reallocations. */
START_TEST(test_jread_large_array)
{
	size_t n = 5000, i, pos = 0;
	char *buf = malloc(n * 8 + 4);
	struct jr *v;

	ck_assert_ptr_nonnull(buf);
	buf[pos++] = '[';
	for (i = 0; i < n; i++)
		pos += (size_t)sprintf(buf + pos, "%s%zu", i ? "," : "", i);
	buf[pos++] = ']';
	buf[pos] = '\0';
	v = parse_ok(buf);
	free(buf);
	ck_assert_uint_eq(jr_len(v), n);
	for (i = 0; i < n; i += 997)
		ck_assert_double_eq(jr_num(jr_at(v, i)), (double)i);
	jr_free(v);
}
END_TEST

/* Accessors are safe on NULL and on the wrong type. */
START_TEST(test_jread_accessors_null)
{
	struct jr *v = parse_ok("[1]");

	ck_assert_ptr_null(jr_find(NULL, "a"));
	ck_assert_ptr_null(jr_find(v, "a"));
	ck_assert_ptr_null(jr_at(NULL, 0));
	ck_assert_uint_eq(jr_len(NULL), 0);
	ck_assert(isnan(jr_num(NULL)));
	ck_assert(isnan(jr_num(v)));
	ck_assert_ptr_null(jr_str(v));
	ck_assert_int_eq(jr_true(NULL), 0);
	jr_free(v);
	jr_free(NULL);
}
END_TEST

/*
 * Writing back: numbers come out in json.c's shortest round-trip form
 * (the same text Python's repr gives: 0.1, 1e+100 -> 1e+100), the member
 * named omit is left out at the top level only.
 */
START_TEST(test_jread_write_roundtrip)
{
	static const char in[] =
	    "{ \"line\" : 7, \"a\": [1.0, 0.10, -0, null, true, false],"
	    " \"o\": {\"line\": 2}, \"s\": \"\\u00e9\\\"\" }";
	char buf[256];
	struct json j;
	struct jr *v = parse_ok(in), *w;

	json_init(&j, buf, sizeof(buf));
	ck_assert_int_eq(jr_write(&j, v, "line"), 0);
	ck_assert_int_eq(json_finish(&j), 0);
	ck_assert_str_eq(buf, "{\"a\":[1,0.1,-0,null,true,false],"
	    "\"o\":{\"line\":2},\"s\":\"\xc3\xa9\\\"\"}");
	/* And the output parses to the same tree. */
	w = parse_ok(buf);
	ck_assert_double_eq(jr_num(jr_at(jr_find(w, "a"), 1)), 0.1);
	jr_free(w);
	/* Overflow is reported. */
	json_init(&j, buf, 8);
	ck_assert_int_eq(jr_write(&j, v, NULL), E_LIMIT);
	jr_free(v);
}
END_TEST

Suite *
jread_suite(void)
{
	Suite *s = suite_create("jread");
	TCase *tc = tcase_create("parse");

	tcase_add_test(tc, test_jread_rfc8259_examples);
	tcase_add_test(tc, test_jread_scalars);
	tcase_add_test(tc, test_jread_numbers);
	tcase_add_test(tc, test_jread_strings);
	tcase_add_test(tc, test_jread_rejects);
	tcase_add_test(tc, test_jread_error_position);
	tcase_add_test(tc, test_jread_depth);
	tcase_add_test(tc, test_jread_large_array);
	tcase_add_test(tc, test_jread_accessors_null);
	suite_add_tcase(s, tc);
	tc = tcase_create("write");
	tcase_add_test(tc, test_jread_write_roundtrip);
	suite_add_tcase(s, tc);
	return s;
}
