/* SPDX-License-Identifier: ISC */
/* One Suite constructor per module; check_main.c adds each. */
#ifndef COEFD_TEST_SUITES_H
#define COEFD_TEST_SUITES_H
#include <check.h>

Suite *err_suite(void);
Suite *rls_suite(void);
Suite *stats_suite(void);
Suite *alarm_suite(void);
Suite *terms_suite(void);
Suite *jread_suite(void);
Suite *json_suite(void);
Suite *proto_suite(void);
Suite *model_suite(void);
Suite *nist_suite(void);
Suite *recursive_suite(void);
Suite *dist_suite(void);
Suite *conf_suite(void);
Suite *torture_suite(void);
Suite *activate_suite(void);
Suite *confman_suite(void);
Suite *persist_suite(void);
Suite *registry_suite(void);

#endif
