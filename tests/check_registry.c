/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for registry lookups: the entry registry_get returns for a
 * name is always the one of that exact name, whatever was looked up
 * before (registry_get tries the last entry it returned before hashing;
 * issue #8), including names that are prefixes of each other.
 */
#include <check.h>
#include <stdio.h>
#include <string.h>

#include "conf.h"
#include "registry.h"
#include "suites.h"

static struct conf *
conf_of(const char *text)
{
	struct conf_error ce;
	struct conf *c = NULL;

	memset(&ce, 0, sizeof(ce));
	ck_assert_msg(conf_parse(text, strlen(text), &c, &ce) == 0,
	    "config line %d: %s", ce.line, ce.msg);
	return c;
}

static struct reg_entry *
get(struct registry *r, const char *name)
{
	struct reg_result res;
	struct reg_entry *e = NULL;

	memset(&res, 0, sizeof(res));
	ck_assert_int_eq(registry_get(r, name, strlen(name), &e, &res), 0);
	ck_assert_ptr_nonnull(e);
	return e;
}

START_TEST(test_registry_lookup_last_entry)
{
	static const char *const names[] = {
		"m", "ma", "mab", "m", "mab", "ma", "ma", "m-1", "m", "mb",
	};
	struct conf *c = conf_of("[template m*]\nfields = x\ntarget = y\n");
	struct registry *r = registry_new(c);
	struct reg_result res;
	struct reg_entry *e;
	char name[80];
	size_t i, j;
	int k;

	ck_assert_ptr_nonnull(r);
	for (k = 0; k < 3; k++)
		for (i = 0; i < sizeof(names) / sizeof(names[0]); i++) {
			e = get(r, names[i]);
			ck_assert_str_eq(e->name, names[i]);
			ck_assert_ptr_eq(e, registry_find(r, names[i],
			    strlen(names[i])));
			/* Every earlier name still maps to its own entry. */
			for (j = 0; j <= i; j++)
				ck_assert_str_eq(get(r, names[j])->name,
				    names[j]);
			ck_assert_ptr_eq(get(r, names[i]), e);
		}
	ck_assert_uint_eq(registry_count(r), 5);
	/* A prefix of the last name, and a name longer than any model name,
	 * right after it: neither is that entry. */
	(void)get(r, "mab");
	memset(&res, 0, sizeof(res));
	ck_assert_int_eq(registry_get(r, "ma", 2, &e, &res), 0);
	ck_assert_str_eq(e->name, "ma");
	memset(name, 'm', sizeof(name));
	ck_assert_int_ne(registry_get(r, name, MODEL_NAME_MAX + 1, &e, &res),
	    0);
	/* Many models (the table grows under the cached pointer). */
	for (k = 0; k < 2000; k++) {
		snprintf(name, sizeof(name), "m%d", k);
		ck_assert_str_eq(get(r, name)->name, name);
		ck_assert_str_eq(get(r, "ma")->name, "ma");
	}
	ck_assert_uint_eq(registry_count(r), 2005);
	registry_free(r);
	conf_free(c);
}
END_TEST

Suite *
registry_suite(void)
{
	Suite *s = suite_create("registry");
	TCase *tc = tcase_create("lookup");

	tcase_add_test(tc, test_registry_lookup_last_entry);
	suite_add_tcase(s, tc);
	return s;
}
