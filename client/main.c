/* SPDX-License-Identifier: ISC */
/* coefctl: placeholder entry point until `fit` lands. */
#include <stdio.h>

int
main(void)
{
	fprintf(stderr, "coefctl: not built yet\n");
	return 1;
}
