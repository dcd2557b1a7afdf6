/* SPDX-License-Identifier: ISC */
/*
 * nist: reader for NIST StRD linear least-squares reference files, for the
 * unit tests. The header names the line ranges of the certified values and
 * of the data ("Certified Values (lines 31 to 47)", "Data (lines 61 to
 * 100)"); the reader trusts those ranges and nothing else of the layout.
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "err.h"
#include "nist.h"

#define LINE_MAX_NIST	1024

/* "... (lines A to B)" anywhere in line: store A, B and return 1. */
static int
line_range(const char *line, int *a, int *b)
{
	const char *r = strstr(line, "(lines");

	return r != NULL && sscanf(r, "(lines %d to %d)", a, b) == 2 &&
	    *a > 0 && *b >= *a;
}

/* Parse every number in s; returns the count, at most max. */
static int
numbers(const char *s, double *v, int max)
{
	char *end;
	int n = 0;

	for (;;) {
		while (*s == ' ' || *s == '\t' || *s == '\r' || *s == '\n')
			s++;
		if (*s == '\0')
			return n;
		errno = 0;
		v[n < max ? n : max - 1] = strtod(s, &end);
		if (end == s || errno != 0)
			return -1;
		n++;
		s = end;
	}
}

/*
 * nist_load: read the StRD linear-regression file at path into *ds, which
 * is zeroed first. Returns 0; E_IO when the file cannot be read; E_CORRUPT
 * with a message in errbuf when the layout is not as expected (no line
 * ranges, no B_i, ragged data rows, counts off). On failure *ds holds no
 * allocation.
 */
int
nist_load(const char *path, struct nist *ds, char *errbuf, size_t errlen)
{
	char line[LINE_MAX_NIST], *s;
	double v[NIST_MAX_B + 2];
	FILE *fp;
	int lineno = 0, ca = 0, cb = 0, da = 0, db = 0, k, cap = 0, bi;
	int rc = E_CORRUPT;

	memset(ds, 0, sizeof(*ds));
	ds->resid_sd = ds->r2 = NAN;
	if ((fp = fopen(path, "r")) == NULL) {
		snprintf(errbuf, errlen, "%s: %s", path, strerror(errno));
		return E_IO;
	}
	while (fgets(line, sizeof(line), fp) != NULL) {
		lineno++;
		if (strstr(line, "Dataset Name:") != NULL) {
			s = strstr(line, ":") + 1;
			while (*s == ' ')
				s++;
			snprintf(ds->name, sizeof(ds->name), "%.*s",
			    (int)strcspn(s, " \r\n"), s);
		}
		if (ca == 0 && strstr(line, "Certified Values") != NULL &&
		    line_range(line, &ca, &cb))
			continue;
		if (da == 0 && strstr(line, "Data") != NULL &&
		    line_range(line, &da, &db))
			continue;
		if (ca > 0 && lineno >= ca && lineno <= cb) {
			s = line + strspn(line, " \t");
			if (s[0] == 'B' && sscanf(s + 1, "%d", &bi) == 1) {
				s += 1 + strspn(s + 1, "0123456789");
				if (ds->nb == NIST_MAX_B ||
				    numbers(s, v, 2) != 2) {
					snprintf(errbuf, errlen, "%s:%d: bad "
					    "parameter line", path, lineno);
					goto fail;
				}
				ds->b_num[ds->nb] = bi;
				ds->b[ds->nb] = v[0];
				ds->sd_b[ds->nb] = v[1];
				ds->nb++;
			} else if (strncmp(s, "Standard Deviation", 18) == 0) {
				if (numbers(s + 18, v, 1) != 1)
					goto badcert;
				ds->resid_sd = v[0];
			} else if (strncmp(s, "R-Squared", 9) == 0) {
				if (numbers(s + 9, v, 1) != 1)
					goto badcert;
				ds->r2 = v[0];
			}
			continue;
		}
		if (da > 0 && lineno >= da && lineno <= db) {
			k = numbers(line, v, NIST_MAX_B + 2);
			if (k < 2 || k > NIST_MAX_B + 1 ||
			    (ds->n > 0 && k != ds->nx + 1)) {
				snprintf(errbuf, errlen, "%s:%d: bad data "
				    "row", path, lineno);
				goto fail;
			}
			if (ds->n == 0) {
				ds->nx = k - 1;
				cap = db - da + 1;
				ds->y = calloc((size_t)cap, sizeof(double));
				ds->x = calloc((size_t)cap * (size_t)ds->nx,
				    sizeof(double));
				if (ds->y == NULL || ds->x == NULL) {
					snprintf(errbuf, errlen, "out of "
					    "memory");
					rc = E_NOMEM;
					goto fail;
				}
			}
			ds->y[ds->n] = v[0];
			memcpy(ds->x + (size_t)ds->n * (size_t)ds->nx, v + 1,
			    (size_t)ds->nx * sizeof(double));
			ds->n++;
		}
	}
	if (ferror(fp)) {
		snprintf(errbuf, errlen, "%s: read error", path);
		rc = E_IO;
		goto fail;
	}
	if (ca == 0 || da == 0 || ds->nb == 0 || ds->n != db - da + 1 ||
	    isnan(ds->resid_sd) || isnan(ds->r2)) {
		snprintf(errbuf, errlen, "%s: missing line ranges, "
		    "certified values or data rows", path);
		goto fail;
	}
	fclose(fp);
	return 0;

badcert:
	snprintf(errbuf, errlen, "%s:%d: bad certified value", path, lineno);
fail:
	fclose(fp);
	nist_free(ds);
	return rc;
}

/* nist_free: free the data arrays of ds (not ds itself). NULL-safe. */
void
nist_free(struct nist *ds)
{
	if (ds == NULL)
		return;
	free(ds->y);
	free(ds->x);
	ds->y = ds->x = NULL;
	ds->n = 0;
}

/*
 * nist_path: the path of test data file `file`: the directory comes from
 * COEFD_TESTDATA (set by the Makefile) or defaults to tests/data. Returns
 * buf.
 */
const char *
nist_path(const char *file, char *buf, size_t len)
{
	const char *dir = getenv("COEFD_TESTDATA");

	snprintf(buf, len, "%s/%s", dir != NULL ? dir : "tests/data", file);
	return buf;
}

/*
 * nist_lre: the log relative error used with StRD (McCullough 1998,
 * "Assessing the reliability of statistical software", Am. Statistician
 * 52; value from memory): LRE = -log10(|est - cert| / |cert|), or
 * -log10|est| when cert = 0. Capped at 15, the digits NIST certifies;
 * a non-finite estimate gives 0.
 */
double
nist_lre(double est, double cert)
{
	double d = fabs(est - cert), lre;

	if (!isfinite(est))
		return 0.0;
	if (d == 0.0)
		return 15.0;
	lre = cert == 0.0 ? -log10(d) : -log10(d / fabs(cert));
	return lre > 15.0 ? 15.0 : (lre < 0.0 ? 0.0 : lre);
}
