/* SPDX-License-Identifier: ISC */
/* One Suite constructor per module; check_main.c adds each. */
#ifndef COEFD_TEST_SUITES_H
#define COEFD_TEST_SUITES_H
#include <check.h>

Suite *err_suite(void);
Suite *dist_suite(void);

#endif
