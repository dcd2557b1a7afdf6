/* SPDX-License-Identifier: ISC */
/* coefd: placeholder entry point until the daemon lands (issue 3). */
#include <stdio.h>

int
main(void)
{
	fprintf(stderr, "coefd: the daemon is not built yet\n");
	return 1;
}
