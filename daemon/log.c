/* SPDX-License-Identifier: ISC */
/*
 * log: the OpenBSD-style logging API on stderr with syslog priority
 * prefixes for journald. The only state is the level and whether stderr is
 * a terminal, set by log_init before the loop starts.
 */
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <unistd.h>

#include "log.h"

static int log_level = LOG_LVL_INFO;
static int log_tty;

/* log_init: set the level and detect a terminal on stderr. */
void
log_init(int level)
{
	log_level = level;
	log_tty = isatty(STDERR_FILENO);
}

/* log_set_level: change the level (on reload). */
void
log_set_level(int level)
{
	log_level = level;
}

/* log_get_level: the current level. */
int
log_get_level(void)
{
	return log_level;
}

/* log_level_parse: "error".."debug" to a level; 0 or -1. */
int
log_level_parse(const char *s, int *level)
{
	static const struct { const char *name; int level; } t[] = {
		{ "error", LOG_LVL_ERR }, { "warning", LOG_LVL_WARNING },
		{ "notice", LOG_LVL_NOTICE }, { "info", LOG_LVL_INFO },
		{ "debug", LOG_LVL_DEBUG },
	};
	size_t i;

	for (i = 0; i < sizeof(t) / sizeof(t[0]); i++)
		if (strcasecmp(s, t[i].name) == 0) {
			*level = t[i].level;
			return 0;
		}
	return -1;
}

static void
vlog(int pri, int with_errno, const char *fmt, va_list ap)
{
	static const char *const words[] = { "", "", "", "error: ",
	    "warning: ", "notice: ", "", "debug: " };
	char buf[1024];
	int saved = errno, n;

	if (pri > log_level)
		return;
	n = vsnprintf(buf, sizeof(buf), fmt, ap);
	if (n < 0)
		return;
	if (with_errno && (size_t)n < sizeof(buf))
		snprintf(buf + n, sizeof(buf) - (size_t)n, ": %s",
		    strerror(saved));
	/* One line per event: fold any newline a value smuggled in. */
	for (n = 0; buf[n] != '\0'; n++)
		if (buf[n] == '\n' || buf[n] == '\r')
			buf[n] = ' ';
	if (log_tty)
		fprintf(stderr, "coefd: %s%s\n", words[pri], buf);
	else
		fprintf(stderr, "<%d>%s\n", pri, buf);
	errno = saved;
}

#define LOGFN(name, pri, en)				\
void							\
name(const char *fmt, ...)				\
{							\
	va_list ap;					\
							\
	va_start(ap, fmt);				\
	vlog(pri, en, fmt, ap);				\
	va_end(ap);					\
}

LOGFN(log_err, LOG_LVL_ERR, 1)
LOGFN(log_errx, LOG_LVL_ERR, 0)
LOGFN(log_warn, LOG_LVL_WARNING, 1)
LOGFN(log_warnx, LOG_LVL_WARNING, 0)
LOGFN(log_notice, LOG_LVL_NOTICE, 0)
LOGFN(log_info, LOG_LVL_INFO, 0)
LOGFN(log_debug, LOG_LVL_DEBUG, 0)

/* fatal: log with strerror(errno) and exit 1. */
void
fatal(const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	vlog(LOG_LVL_ERR, 1, fmt, ap);
	va_end(ap);
	exit(1);
}

/* fatalx: log and exit 1. */
void
fatalx(const char *fmt, ...)
{
	va_list ap;

	va_start(ap, fmt);
	vlog(LOG_LVL_ERR, 0, fmt, ap);
	va_end(ap);
	exit(1);
}

/*
 * log_rate_allow: token bucket, 10 messages at once then 1 per second per
 * source. Returns 1 when a message may be logged; otherwise counts it in
 * r->suppressed and returns 0.
 */
int
log_rate_allow(struct log_rate *r, uint64_t now_ms)
{
	const double burst = 10, per_ms = 1.0 / 1000;

	if (r->last_ms == 0 && r->tokens == 0)
		r->tokens = burst;
	else if (now_ms > r->last_ms)
		r->tokens += (double)(now_ms - r->last_ms) * per_ms;
	if (r->tokens > burst)
		r->tokens = burst;
	r->last_ms = now_ms;
	if (r->tokens >= 1) {
		r->tokens -= 1;
		return 1;
	}
	r->suppressed++;
	return 0;
}
