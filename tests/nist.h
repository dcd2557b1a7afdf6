/* SPDX-License-Identifier: ISC */
/*
 * nist: test helper that reads a NIST StRD linear least-squares file
 * (https://www.itl.nist.gov/div898/strd/): the certified parameter values
 * B_i and their standard deviations, the residual SD, R-squared, and the
 * data block (y first, then any number of x columns). Test code only: it
 * does file I/O and is not part of libcore.
 */
#ifndef COEFD_TEST_NIST_H
#define COEFD_TEST_NIST_H

#include <stddef.h>

#define NIST_MAX_B	16	/* certified parameters per file */

struct nist {
	char	 name[64];		/* "Dataset Name:" value */
	int	 nb;			/* certified parameters */
	int	 b_num[NIST_MAX_B];	/* i of B_i, in file order */
	double	 b[NIST_MAX_B];		/* certified estimates */
	double	 sd_b[NIST_MAX_B];	/* their certified SDs */
	double	 resid_sd;		/* certified residual SD */
	double	 r2;			/* certified R-squared */
	int	 n;			/* observations */
	int	 nx;			/* predictor columns */
	double	*y;			/* n responses */
	double	*x;			/* n x nx, row-major */
};

/* nist_load: read file path into *ds (caller frees with nist_free). */
int nist_load(const char *path, struct nist *ds, char *errbuf, size_t errlen);
/* nist_free: release ds's arrays; the struct itself is the caller's. */
void nist_free(struct nist *ds);
/* nist_path: "$COEFD_TESTDATA/file" (default tests/data) into buf. */
const char *nist_path(const char *file, char *buf, size_t len);
/* nist_lre: log relative error -log10(|est-cert|/|cert|), capped at 15. */
double nist_lre(double est, double cert);

#endif
