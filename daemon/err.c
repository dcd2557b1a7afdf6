/* SPDX-License-Identifier: ISC */
/*
 * err: text for the project's error codes. Pure, no state.
 */
#include <stdarg.h>
#include <stdio.h>

#include "err.h"

/*
 * err_str: return the text for an error code. Update this switch whenever a
 * value is added to enum err (tests/check_err.c checks every value).
 */
const char *
err_str(int code)
{
	switch ((enum err)code) {
	case E_OK:		return "success";
	case E_ARG:		return "invalid argument";
	case E_NOMEM:		return "out of memory";
	case E_NUMERIC:		return "numerical error";
	case E_PROTO:		return "protocol error";
	case E_NOTFOUND:	return "not found";
	case E_LIMIT:		return "limit reached";
	case E_IO:		return "input/output error";
	case E_STATE:		return "invalid in current state";
	case E_EXISTS:		return "already exists";
	case E_DENIED:		return "permission denied";
	case E_CORRUPT:		return "corrupt data";
	case E_VERSION:		return "unsupported format version";
	}
	return "unknown error";
}

/*
 * err_printf: vsnprintf into buf[0..len): detail texts are cut to fit on
 * purpose (they go into fixed-size reply and log fields).
 */
void
err_printf(char *buf, size_t len, const char *fmt, ...)
{
	va_list ap;

	if (len == 0)
		return;
	va_start(ap, fmt);
	vsnprintf(buf, len, fmt, ap);
	va_end(ap);
}
