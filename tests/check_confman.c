/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for the configuration's documentation: the keys that
 * coefd.conf(5) describes (".It Ic KEY" entries under DAEMON SECTION and
 * MODEL SECTIONS) must be exactly the keys conf_keys() says the parser
 * accepts, and the example configuration must show every one of them.
 * The files are read from $COEFD_SRCDIR (default: the current directory,
 * the top of the source tree when run by make).
 */
#include <check.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "suites.h"

#define NKEYS_MAX	64
#define KEY_MAX		40

struct keyset {
	int	 n;
	char	 k[NKEYS_MAX][KEY_MAX];
};

static FILE *
open_src(const char *rel)
{
	const char *dir = getenv("COEFD_SRCDIR");
	char path[1024];
	FILE *fp;

	snprintf(path, sizeof(path), "%s/%s", dir != NULL ? dir : ".", rel);
	fp = fopen(path, "r");
	ck_assert_msg(fp != NULL, "cannot open %s", path);
	return fp;
}

static int
has(const struct keyset *s, const char *k)
{
	int i;

	for (i = 0; i < s->n; i++)
		if (strcmp(s->k[i], k) == 0)
			return 1;
	return 0;
}

/* The ".It Ic KEY" entries under the man page section named sh. */
static void
man_keys(const char *sh, struct keyset *out)
{
	char line[1024], key[KEY_MAX];
	int in = 0;
	FILE *fp = open_src("daemon/coefd.conf.5");

	out->n = 0;
	while (fgets(line, sizeof(line), fp) != NULL) {
		line[strcspn(line, "\n")] = '\0';
		if (strncmp(line, ".Sh ", 4) == 0) {
			in = strcmp(line + 4, sh) == 0;
			continue;
		}
		if (!in || sscanf(line, ".It Ic %39s", key) != 1)
			continue;
		ck_assert_msg(!has(out, key), "%s documented twice", key);
		ck_assert_int_lt(out->n, NKEYS_MAX);
		strcpy(out->k[out->n++], key);
	}
	fclose(fp);
}

static void
same_keys(const char *section, const char *sh)
{
	const char *const *keys = conf_keys(section);
	struct keyset doc;
	int i, n = 0;

	ck_assert_ptr_nonnull(keys);
	man_keys(sh, &doc);
	for (i = 0; keys[i] != NULL; i++, n++)
		ck_assert_msg(has(&doc, keys[i]), "[%s] key %s is not in "
		    "coefd.conf(5) under %s", section, keys[i], sh);
	for (i = 0; i < doc.n; i++) {
		int j, found = 0;

		for (j = 0; keys[j] != NULL; j++)
			found |= strcmp(keys[j], doc.k[i]) == 0;
		ck_assert_msg(found, "coefd.conf(5) documents %s under %s, "
		    "which the parser does not accept", doc.k[i], sh);
	}
	ck_assert_int_eq(doc.n, n);
}

START_TEST(test_confman_daemon_keys)
{
	same_keys("daemon", "DAEMON SECTION");
}
END_TEST

START_TEST(test_confman_model_keys)
{
	same_keys("model", "MODEL SECTIONS");
	/* Templates take the same keys, as the page says. */
	ck_assert_ptr_eq(conf_keys("template"), conf_keys("model"));
}
END_TEST

/* Every key appears in the example file as "key =" or "#key =". */
START_TEST(test_confman_example_shows_every_key)
{
	static const char *const sections[] = { "daemon", "model" };
	char line[1024], key[KEY_MAX];
	struct keyset seen = { 0, { { 0 } } };
	const char *const *keys;
	const char *p;
	size_t i, j;
	FILE *fp = open_src("conf/coefd.conf");

	while (fgets(line, sizeof(line), fp) != NULL) {
		p = line[0] == '#' ? line + 1 : line;
		if (sscanf(p, "%39[a-z0-9_] =", key) == 1 &&
		    strstr(p, " =") != NULL && !has(&seen, key) &&
		    seen.n < NKEYS_MAX)
			strcpy(seen.k[seen.n++], key);
	}
	fclose(fp);
	for (i = 0; i < sizeof(sections) / sizeof(sections[0]); i++) {
		keys = conf_keys(sections[i]);
		for (j = 0; keys[j] != NULL; j++)
			ck_assert_msg(has(&seen, keys[j]), "conf/coefd.conf "
			    "does not show [%s] key %s", sections[i], keys[j]);
	}
}
END_TEST

Suite *
confman_suite(void)
{
	Suite *s = suite_create("confman");
	TCase *tc = tcase_create("keys");

	tcase_add_test(tc, test_confman_daemon_keys);
	tcase_add_test(tc, test_confman_model_keys);
	tcase_add_test(tc, test_confman_example_shows_every_key);
	suite_add_tcase(s, tc);
	return s;
}
