/* SPDX-License-Identifier: ISC */
/*
 * conf: the configuration parser. Turns the text of a coefd.conf (our own
 * INI dialect, documented in conf/coefd.conf and CONF_SPEC) into a struct
 * conf with every value checked, or one error with its line. PURE: no file
 * I/O (the caller reads the file into a buffer), no logging, no globals;
 * it does not apply anything, it only describes.
 */
#ifndef COEFD_CONF_H
#define COEFD_CONF_H

#include <stddef.h>
#include <stdint.h>

#include "limits.h"
#include "model.h"
#include "terms.h"

/* One error: the caller prints it as `file:line: msg`. line 0 = the whole
 * file (for example, too large). msg is lower-case and one line. */
#define CONF_ERR_MAX	200
struct conf_error {
	int	 line;
	char	 msg[CONF_ERR_MAX];
};

/* A tcp/udp listening address. */
struct conf_listen {
	int	 on;			/* 0 = off */
	int	 family;		/* 4, 6, or 0 for "localhost" */
	int	 loopback;		/* 1 for 127.0.0.0/8, ::1, localhost */
	char	 host[CONF_HOST_MAX + 1];	/* without brackets */
	uint16_t port;			/* 1..65535 when on */
};

enum conf_journal {
	CONF_JOURNAL_OFF = 0,		/* no journal */
	CONF_JOURNAL_EVERY = 1,		/* flush after every record */
	CONF_JOURNAL_INTERVAL = 2	/* flush every journal_every seconds */
};

/* Levels in increasing verbosity. */
enum conf_log_level {
	CONF_LOG_ERROR = 0,
	CONF_LOG_WARNING = 1,
	CONF_LOG_NOTICE = 2,
	CONF_LOG_INFO = 3,
	CONF_LOG_DEBUG = 4
};

/* The [daemon] section; conf_parse fills the defaults for absent keys.
 * Durations are in seconds, sizes in bytes. */
struct conf_daemon {
	char		 socket[CONF_SOCKET_PATH_MAX + 1];
	unsigned	 socket_mode;		/* 0600..0777 */
	struct conf_listen tcp, udp;
	int		 allow_remote;		/* bool */
	int		 admin_from_tcp;	/* bool */
	int		 nadmin_users;
	char		 admin_users[CONF_ADMIN_USERS_MAX]
			    [CONF_USER_NAME_MAX + 1];	/* names or uids, as
						 * written; main resolves */
	char		 token_file[CONF_PATH_MAX + 1];	/* "" = none */
	char		 state_dir[CONF_PATH_MAX + 1];
	double		 checkpoint_every;
	enum conf_journal journal;
	double		 journal_every;		/* with CONF_JOURNAL_INTERVAL */
	uint64_t	 max_line;
	int		 max_connections;
	int		 max_connections_per_uid;
	int		 max_models;
	int		 max_features;		/* terms per model, intercept
						 * not counted */
	uint64_t	 output_buffer;
	double		 stuck_timeout;
	double		 idle_timeout;		/* 0 = off */
	enum conf_log_level log_level;
	int		 history;		/* snapshots kept per model */
	uint32_t	 history_every;		/* used records per snapshot */
};

#define CONF_SCALE_AUTO		0	/* from the model's first record */
#define CONF_SCALE_NONE		1	/* identity: centre 0, scale 1 */
#define CONF_SCALE_EXPLICIT	2	/* centre[] and scale[] below */

/*
 * A [model NAME] or [template PATTERN] section. The term set is compiled
 * over nfields + 1 variables: fields[0..nfields) in order, then the target
 * (index nfields), so that prev(target) can be a term; vectors of raw
 * values handed to terms_* have nfields + 1 entries, the target last.
 * Everything is owned by the struct conf that holds this model.
 */
struct conf_model {
	char		 name[MODEL_NAME_MAX + 1];	/* or pattern */
	int		 is_template;
	int		 line;			/* section header line */
	int		 nfields;
	char		(*fields)[FIELD_NAME_MAX + 1];	/* nfields */
	char		 target[FIELD_NAME_MAX + 1];
	char		*terms_text;		/* NULL = linear in every field */
	struct terms	*terms;			/* compiled, explicit scaling
						 * applied; for validation and
						 * coefficient names */
	int		 scale_mode;		/* CONF_SCALE_* */
	double		*centre, *scale;	/* nfields + 1, when explicit
						 * (unlisted: 0 and 1) */
	double		 cusum_arl;		/* the ARL cusum_h came from;
						 * NAN when cusum_h was given */
	struct model_opts mo;			/* ready for model_new: its
						 * pointers point at the arrays
						 * below; alarm.cusum_h is set */
	double		*prior, *prior_sd, *reference, *tol_abs, *tol_pct;
						/* mo.p each, or NULL */
};

struct conf {
	struct conf_daemon d;
	int		 nmodels;
	struct conf_model *models;		/* models and templates, in
						 * file order */
	/* Private to conf.c: open-addressing index of the [model] names
	 * (slot = model index + 1, 0 = empty), capacity a power of two. */
	size_t		 index_cap;
	int		*index;
};

/* Parsing and lifetime. */

/* conf_parse: text[0..len) -> a new struct conf, or one error. */
int	 conf_parse(const char *text, size_t len, struct conf **out,
	    struct conf_error *err);
/* conf_free: release c; NULL is a no-op. */
void	 conf_free(struct conf *c);
/* conf_daemon_default: the [daemon] defaults. */
void	 conf_daemon_default(struct conf_daemon *d);

/* Lookup. */

/* conf_find_model: the [model] named name, else the first matching
 * [template] in file order; NULL if none. */
const struct conf_model *conf_find_model(const struct conf *c,
	    const char *name);
/* conf_pattern_match: 1 if name matches pattern ('*' any run, '?' one
 * byte), else 0. */
int	 conf_pattern_match(const char *pattern, const char *name);
/* conf_model_terms: a fresh term set for model m (explicit scaling set). */
int	 conf_model_terms(const struct conf_model *m, struct terms **out,
	    char *errbuf, size_t errlen);

/* Value grammars shared with other parts of the daemon. */

/* conf_parse_duration: "250ms" "90s" "15m" "6h" "7d" "2w"; plain = s. */
int	 conf_parse_duration(const char *s, size_t len, double *seconds);
/* conf_parse_size: "512", "64k", "16M", "1G" (1024-based). */
int	 conf_parse_size(const char *s, size_t len, uint64_t *bytes);

/* Documentation support. */

/* conf_keys: every key of a section ("daemon", "model" or "template"),
 * NULL-terminated, in documentation order; NULL for another section. */
const char *const *conf_keys(const char *section);

#endif
