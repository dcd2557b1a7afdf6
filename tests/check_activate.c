/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for activate: the LISTEN_PID / LISTEN_FDS / LISTEN_FDNAMES
 * rules as sd_listen_fds(3) documents them (descriptors from 3 on; only
 * for the process LISTEN_PID names; names colon-separated, one per
 * descriptor, "unknown" when the variable is unset). The name rules
 * (printable ASCII, no ':', at most 255 bytes) follow the FileDescriptorName=
 * entry of systemd.socket(5) (from memory).
 */
#include <check.h>
#include <string.h>

#include "activate.h"
#include "err.h"
#include "suites.h"

static struct activate_fd fds[ACTIVATE_FDS_MAX];
static char msg[200];

START_TEST(test_activate_absent_or_other_pid)
{
	int n = -1;

	ck_assert_int_eq(activate_parse(NULL, NULL, NULL, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 0);
	ck_assert_int_eq(activate_parse("42", NULL, NULL, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 0);
	/* Meant for another process (a parent that did not unset them). */
	ck_assert_int_eq(activate_parse("41", "2", "a:b", 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 0);
}
END_TEST

START_TEST(test_activate_fds_and_names)
{
	int n = 0;

	ck_assert_int_eq(activate_parse("42", "2", "coefd.socket:tcp", 42,
	    fds, ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 2);
	ck_assert_int_eq(fds[0].fd, 3);
	ck_assert_int_eq(fds[1].fd, 4);
	ck_assert_str_eq(fds[0].name, "coefd.socket");
	ck_assert_str_eq(fds[1].name, "tcp");

	ck_assert_int_eq(activate_parse("42", "3", NULL, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 3);
	ck_assert_int_eq(fds[2].fd, 5);
	ck_assert_str_eq(fds[2].name, "unknown");

	ck_assert_int_eq(activate_parse("42", "0", "", 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 0);
}
END_TEST

START_TEST(test_activate_malformed)
{
	static const char *const bad[][3] = {
		{ "", "1", NULL }, { "x", "1", NULL }, { "-42", "1", NULL },
		{ "0", "1", NULL }, { "42 ", "1", NULL },
		{ "42", "", NULL }, { "42", "-1", NULL }, { "42", "1x", NULL },
		{ "42", "99999999999999999999", NULL },
		{ "42", "2", "a" },		/* too few names */
		{ "42", "1", "a:b" },		/* too many */
		{ "42", "0", "a" },
		{ "42", "2", "a:" },		/* empty name */
		{ "42", "1", "a\tb" },		/* not printable */
	};
	size_t i;
	int n;

	for (i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
		n = -1;
		msg[0] = '\0';
		ck_assert_msg(activate_parse(bad[i][0], bad[i][1], bad[i][2],
		    42, fds, ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)) == E_ARG,
		    "case %zu accepted", i);
		ck_assert_int_eq(n, 0);
		ck_assert(msg[0] != '\0');
	}
}
END_TEST

START_TEST(test_activate_limits)
{
	char name[ACTIVATE_NAME_MAX + 2];
	int n = -1;

	ck_assert_int_eq(activate_parse("42", "17", NULL, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), E_LIMIT);
	ck_assert_int_eq(n, 0);
	ck_assert_int_eq(activate_parse("42", "16", NULL, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_int_eq(n, 16);
	ck_assert_int_eq(fds[15].fd, 18);

	memset(name, 'n', ACTIVATE_NAME_MAX);
	name[ACTIVATE_NAME_MAX] = '\0';
	ck_assert_int_eq(activate_parse("42", "1", name, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), 0);
	ck_assert_uint_eq(strlen(fds[0].name), ACTIVATE_NAME_MAX);
	name[ACTIVATE_NAME_MAX] = 'n';
	name[ACTIVATE_NAME_MAX + 1] = '\0';
	ck_assert_int_eq(activate_parse("42", "1", name, 42, fds,
	    ACTIVATE_FDS_MAX, &n, msg, sizeof(msg)), E_ARG);
}
END_TEST

Suite *
activate_suite(void)
{
	Suite *s = suite_create("activate");
	TCase *tc = tcase_create("parse");

	tcase_add_test(tc, test_activate_absent_or_other_pid);
	tcase_add_test(tc, test_activate_fds_and_names);
	tcase_add_test(tc, test_activate_malformed);
	tcase_add_test(tc, test_activate_limits);
	suite_add_tcase(s, tc);
	return s;
}
