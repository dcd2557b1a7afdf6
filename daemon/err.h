/* SPDX-License-Identifier: ISC */
/*
 * err: the project-wide error codes. Functions return 0 on success or a
 * negative enum err value; err_str() gives the fixed text for a code.
 * Pure: no I/O.
 */
#ifndef COEFD_ERR_H
#define COEFD_ERR_H

#include <stddef.h>

enum err {
	E_OK = 0,
	E_ARG = -1,	/* bad argument or malformed input value */
	E_NOMEM = -2,	/* allocation failed */
	E_NUMERIC = -3,	/* non-finite input or a numerical breakdown */
	E_PROTO = -4,	/* protocol violation */
	E_NOTFOUND = -5,	/* named item does not exist */
	E_LIMIT = -6,	/* a configured or compile-time limit was hit */
	E_IO = -7,	/* an operating-system I/O error */
	E_STATE = -8,	/* operation not valid in the current state */
	E_EXISTS = -9,	/* named item already exists */
	E_DENIED = -10,	/* not permitted for this peer */
	E_CORRUPT = -11,	/* stored data failed a check */
	E_VERSION = -12	/* stored data from a newer format version */
};

/* err_str: fixed English text for code (0 or negative); never NULL. */
const char *err_str(int code);
/* err_printf: format a detail message into buf (truncated to fit). */
void	err_printf(char *buf, size_t len, const char *fmt, ...)
	    __attribute__((format(printf, 3, 4)));

#endif
