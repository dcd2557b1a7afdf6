/* SPDX-License-Identifier: ISC */
/*
 * log: one line per event on stderr. Under systemd (stderr not a TTY) each
 * line starts with a syslog priority prefix "<3>".."<7>" so journald files
 * it at the right level; on a terminal the prefix is a word. Not pure: it
 * writes to stderr and keeps the level in a file-scope variable.
 */
#ifndef COEFD_LOG_H
#define COEFD_LOG_H

#include <stdint.h>

enum log_level {
	LOG_LVL_ERR = 3,
	LOG_LVL_WARNING = 4,
	LOG_LVL_NOTICE = 5,
	LOG_LVL_INFO = 6,
	LOG_LVL_DEBUG = 7
};

/* A token bucket limiting one source (a connection) to `burst` messages
 * and then `rate` per second; suppressed messages are counted. */
struct log_rate {
	double		 tokens;
	uint64_t	 last_ms;
	uint64_t	 suppressed;
};

void	log_init(int level);
void	log_set_level(int level);
int	log_get_level(void);
int	log_level_parse(const char *s, int *level);
/* log_warn/log_err append ": strerror(errno)". */
void	log_err(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_errx(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_warn(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_warnx(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_notice(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_info(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
void	log_debug(const char *fmt, ...) __attribute__((format(printf, 1, 2)));
/* fatal/fatalx: log at error level and exit(1); only before the loop runs
 * or when an invariant is broken, never because of a client. */
void	fatal(const char *fmt, ...)
	    __attribute__((format(printf, 1, 2), noreturn));
void	fatalx(const char *fmt, ...)
	    __attribute__((format(printf, 1, 2), noreturn));
/* log_rate_allow: 1 if a message may be logged now (now_ms monotonic). */
int	log_rate_allow(struct log_rate *r, uint64_t now_ms);

#endif
