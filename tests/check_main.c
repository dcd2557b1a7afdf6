/* SPDX-License-Identifier: ISC */
/*
 * check_main: the one unit-test runner. Adds every module's suite, runs
 * them (forking per test unless CK_FORK=no) and fails when any check failed
 * or when no check ran at all.
 */
#include <check.h>
#include <stdio.h>
#include <stdlib.h>

#include "suites.h"

int
main(void)
{
	SRunner *sr;
	int nfail, nrun;

	sr = srunner_create(err_suite());
	srunner_add_suite(sr, rls_suite());
	srunner_add_suite(sr, stats_suite());
	srunner_add_suite(sr, alarm_suite());
	srunner_add_suite(sr, terms_suite());
	srunner_add_suite(sr, json_suite());
	srunner_add_suite(sr, jread_suite());
	srunner_add_suite(sr, proto_suite());
	srunner_add_suite(sr, model_suite());
	srunner_add_suite(sr, nist_suite());
	srunner_add_suite(sr, recursive_suite());
	srunner_add_suite(sr, dist_suite());
	srunner_add_suite(sr, conf_suite());
	srunner_add_suite(sr, torture_suite());
	srunner_add_suite(sr, activate_suite());
	srunner_add_suite(sr, confman_suite());
	srunner_add_suite(sr, persist_suite());
	srunner_add_suite(sr, registry_suite());
	srunner_run_all(sr, CK_NORMAL);
	nfail = srunner_ntests_failed(sr);
	nrun = srunner_ntests_run(sr);
	srunner_free(sr);
	if (nrun == 0) {
		fprintf(stderr, "check_unit: no checks ran\n");
		return EXIT_FAILURE;
	}
	return nfail == 0 ? EXIT_SUCCESS : EXIT_FAILURE;
}
