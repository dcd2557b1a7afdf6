/* SPDX-License-Identifier: ISC */
/*
 * libFuzzer target for the configuration parser (daemon/conf.c): the
 * input is a coefd.conf. conf_parse must either accept it or report one
 * error with a line inside the file; an accepted file must find its own
 * models by name and build every model it describes (the first few, to
 * keep executions fast), which conf_model_terms promises cannot fail for a
 * parsed file. Built with clang -fsanitize=fuzzer by `make fuzz`.
 */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "registry.h"

int	LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

#define CHECK(cond)	do { if (!(cond)) abort(); } while (0)
#define BUILD_MAX	4	/* models built per input */

int
LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	struct conf_error err;
	struct conf *c = NULL;
	struct reg_entry *e;
	char ebuf[200];
	size_t i, lines = 1;
	int k, rc;

	for (i = 0; i < size; i++)
		if (data[i] == '\n')
			lines++;
	memset(&err, 0x55, sizeof(err));
	rc = conf_parse((const char *)data, size, &c, &err);
	if (rc != 0) {
		CHECK(c == NULL);
		CHECK(err.line >= 0 && (size_t)err.line <= lines);
		CHECK(memchr(err.msg, '\0', sizeof(err.msg)) != NULL);
		CHECK(err.msg[0] != '\0');
		CHECK(strchr(err.msg, '\n') == NULL);
		return 0;
	}
	CHECK(c != NULL);
	CHECK(c->nmodels >= 0);
	for (k = 0; k < c->nmodels; k++) {
		const struct conf_model *m = &c->models[k];

		if (!m->is_template)
			CHECK(conf_find_model(c, m->name) == m);
		if (k >= BUILD_MAX)
			continue;
		e = registry_entry_new(NULL, m, m->name, ebuf, sizeof(ebuf));
		CHECK(e != NULL);
		registry_entry_free(e);
	}
	conf_free(c);
	return 0;
}
