/* SPDX-License-Identifier: ISC */
/* Unit tests for err: every code has its own, non-default text. */
#include <check.h>
#include <string.h>

#include "err.h"
#include "suites.h"

START_TEST(test_err_every_code_has_text)
{
	int c;

	for (c = E_OK; c >= E_VERSION; c--) {
		ck_assert_ptr_nonnull(err_str(c));
		ck_assert_str_ne(err_str(c), "unknown error");
	}
	ck_assert_str_eq(err_str(-1000), "unknown error");
}
END_TEST

Suite *
err_suite(void)
{
	Suite *s = suite_create("err");
	TCase *tc = tcase_create("text");

	tcase_add_test(tc, test_err_every_code_has_text);
	suite_add_tcase(s, tc);
	return s;
}
