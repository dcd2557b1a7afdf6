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
#include "model.h"
#include "proto.h"
#include "registry.h"
#include "suites.h"
#include "testutil.h"


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
	struct conf *c = test_conf("[template m*]\nfields = x\ntarget = y\n");
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

/* Feed "name x y" with x = i, y = 2 i + 1 (+ a wobble) through the
 * parser and registry_record. */
static void
feed(struct registry *r, const char *name, int from, int n)
{
	struct proto_msg msg;
	struct reg_result res;
	char line[128];
	int i;

	for (i = from; i < from + n; i++) {
		snprintf(line, sizeof(line), "%s %d %g", name, i,
		    2.0 * i + 1 + (i % 7) * 0.01);
		ck_assert_int_eq(proto_parse_line(line, strlen(line), 1, &msg),
		    PROTO_RECORD);
		memset(&res, 0, sizeof(res));
		ck_assert_int_eq(registry_record(r, &msg, 1000.0 + i, &res),
		    0);
	}
}

/*
 * History snapshots fall on every history_every-th used record (n_used a
 * multiple of it), also after a reset brings n_used back to 0 (the
 * registry finds the next multiple without a division per record).
 */
START_TEST(test_registry_history_every)
{
	struct conf *c = test_conf("[daemon]\nhistory = 64\nhistory_every = 3\n"
	    "[template h*]\nfields = x\ntarget = y\n");
	struct registry *r = registry_new(c);
	struct reg_entry *e;
	char err[160];
	uint32_t i;

	ck_assert_ptr_nonnull(r);
	feed(r, "h1", 0, 20);
	e = get(r, "h1");
	ck_assert_uint_eq(e->m->n_used, 20);
	ck_assert_uint_eq(e->hist_len, 6);	/* 3, 6, ..., 18 */
	for (i = 0; i < e->hist_len; i++)
		ck_assert_double_eq(registry_hist_get(e, i)[1], 3.0 * (i + 1));
	ck_assert_int_eq(registry_rebuild(r, e, err, sizeof(err)), 0);
	e = get(r, "h1");
	feed(r, "h1", 100, 7);
	ck_assert_uint_eq(e->m->n_used, 7);
	/* After the reset: 3 and 6 again. */
	ck_assert_double_eq(registry_hist_get(e, e->hist_len - 1)[1], 6.0);
	ck_assert_double_eq(registry_hist_get(e, e->hist_len - 2)[1], 3.0);
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
	tcase_add_test(tc, test_registry_history_every);
	suite_add_tcase(s, tc);
	return s;
}
