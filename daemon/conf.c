/* SPDX-License-Identifier: ISC */
/*
 * conf: parse the text of a configuration file into a struct conf. PURE:
 * the caller reads the file; this module does no I/O, keeps no globals
 * (the key tables are const) and does not log. It stops at the first error
 * and reports it with its line. It checks every value and the rules
 * between keys; it does not open sockets, read the token file or create
 * models.
 */
#include <arpa/inet.h>
#include <math.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>		/* vsnprintf only: no I/O */
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "dist.h"
#include "err.h"
#include "limits.h"
#include "proto.h"
#include "rls.h"

/* make sets this from localstatedir (default /var: systemd's
 * StateDirectory= is always below /var/lib). */
#ifndef LOCALSTATEDIR
#define LOCALSTATEDIR	"/var"
#endif
_Static_assert(sizeof(LOCALSTATEDIR "/lib/coefd") <= CONF_PATH_MAX + 1,
    "localstatedir too long for state_dir");

/* The range texts below spell these limits out. */
_Static_assert(TERMS_MAX == 255, "update the max_features range text");
_Static_assert(PROTO_LINE_MAX == 1048576, "update the max_line range text");
/* A floating constant may appear in an integer constant expression only
 * as the operand of a cast (C11 6.6p6), which clang enforces. */
_Static_assert((long long)DIST_CUSUM_ARL0_MAX == 10000000000LL,
    "update the cusum_arl text");
_Static_assert(CONF_SOCKET_PATH_MAX == 107, "update the socket text");
_Static_assert(CONF_PATH_MAX == 1023, "update the path texts");
_Static_assert(PROTO_MAX_VALUES - 1 == 255, "update the fields text");

#define INT_MAX_COUNT	1e9	/* largest count-like integer setting */
#define QUOTE_MAX	48	/* bytes of a value quoted in a message */
#define HINT_DIST	2	/* "did you mean": edit distance at most */

/* A byte range of the text being parsed (not NUL-terminated). */
struct str {
	const char	*s;
	size_t		 len;
};

/* ---- key tables ---- */

enum dkey {
	DK_SOCKET, DK_SOCKET_MODE, DK_TCP, DK_UDP, DK_ALLOW_REMOTE,
	DK_ADMIN_FROM_TCP, DK_ADMIN_USERS, DK_TOKEN_FILE, DK_STATE_DIR,
	DK_CHECKPOINT_EVERY, DK_JOURNAL, DK_MAX_LINE, DK_MAX_CONNECTIONS,
	DK_MAX_CONNECTIONS_PER_UID, DK_MAX_MODELS, DK_MAX_FEATURES,
	DK_OUTPUT_BUFFER, DK_STUCK_TIMEOUT, DK_IDLE_TIMEOUT, DK_LOG_LEVEL,
	DK_HISTORY, DK_HISTORY_EVERY,
	DK_N
};

enum mkey {
	MK_FIELDS, MK_TARGET, MK_TERMS, MK_INTERCEPT, MK_MEMORY,
	MK_REGULARISE, MK_SCALE, MK_PRIOR, MK_PRIOR_SD, MK_REFERENCE,
	MK_TOLERANCE, MK_DRIFT_ALPHA, MK_CUSUM_K, MK_CUSUM_ARL, MK_CUSUM_H,
	MK_R2_FLOOR, MK_R2_HYSTERESIS, MK_R2_MIN_RECORDS, MK_GATE,
	MK_GATE_RUN, MK_DWELL, MK_WARMUP, MK_SIGMA_MEMORY, MK_LEVEL,
	MK_N
};

static const char *const dkey_names[DK_N + 1] = {
	[DK_SOCKET] = "socket",
	[DK_SOCKET_MODE] = "socket_mode",
	[DK_TCP] = "tcp",
	[DK_UDP] = "udp",
	[DK_ALLOW_REMOTE] = "allow_remote",
	[DK_ADMIN_FROM_TCP] = "admin_from_tcp",
	[DK_ADMIN_USERS] = "admin_users",
	[DK_TOKEN_FILE] = "token_file",
	[DK_STATE_DIR] = "state_dir",
	[DK_CHECKPOINT_EVERY] = "checkpoint_every",
	[DK_JOURNAL] = "journal",
	[DK_MAX_LINE] = "max_line",
	[DK_MAX_CONNECTIONS] = "max_connections",
	[DK_MAX_CONNECTIONS_PER_UID] = "max_connections_per_uid",
	[DK_MAX_MODELS] = "max_models",
	[DK_MAX_FEATURES] = "max_features",
	[DK_OUTPUT_BUFFER] = "output_buffer",
	[DK_STUCK_TIMEOUT] = "stuck_timeout",
	[DK_IDLE_TIMEOUT] = "idle_timeout",
	[DK_LOG_LEVEL] = "log_level",
	[DK_HISTORY] = "history",
	[DK_HISTORY_EVERY] = "history_every",
	[DK_N] = NULL
};

static const char *const mkey_names[MK_N + 1] = {
	[MK_FIELDS] = "fields",
	[MK_TARGET] = "target",
	[MK_TERMS] = "terms",
	[MK_INTERCEPT] = "intercept",
	[MK_MEMORY] = "memory",
	[MK_REGULARISE] = "regularise",
	[MK_SCALE] = "scale",
	[MK_PRIOR] = "prior",
	[MK_PRIOR_SD] = "prior_sd",
	[MK_REFERENCE] = "reference",
	[MK_TOLERANCE] = "tolerance",
	[MK_DRIFT_ALPHA] = "drift_alpha",
	[MK_CUSUM_K] = "cusum_k",
	[MK_CUSUM_ARL] = "cusum_arl",
	[MK_CUSUM_H] = "cusum_h",
	[MK_R2_FLOOR] = "r2_floor",
	[MK_R2_HYSTERESIS] = "r2_hysteresis",
	[MK_R2_MIN_RECORDS] = "r2_min_records",
	[MK_GATE] = "gate",
	[MK_GATE_RUN] = "gate_run",
	[MK_DWELL] = "dwell",
	[MK_WARMUP] = "warmup",
	[MK_SIGMA_MEMORY] = "sigma_memory",
	[MK_LEVEL] = "level",
	[MK_N] = NULL
};

static const char *const section_names[] = {
	"daemon", "model", "template", NULL
};

/* How a value is read. V_SPECIAL keys have their own code below. */
enum vkind { V_SPECIAL, V_INT, V_REAL, V_DUR, V_SIZE, V_BOOL };
/* Where it is stored (at `off` in struct conf_daemon / conf_model). */
enum skind { S_NONE, S_INT, S_U32, S_U64, S_DOUBLE };

#define F_LO_OPEN	0x1u	/* lo itself is outside the range */
#define F_HI_OPEN	0x2u	/* hi itself is outside the range */
#define F_OFF		0x4u	/* "off" is accepted and stores offval */

struct keydef {
	enum vkind	 kind;
	unsigned	 flags;
	double		 lo, hi, offval;
	enum skind	 st;
	size_t		 off;
	const char	*expect;	/* "expected ..." in messages */
};

#define D(f)	offsetof(struct conf_daemon, f)
#define M(f)	offsetof(struct conf_model, f)
#define XSTR(x)	STR(x)
#define STR(x)	#x
#define EXP_HOSTPORT "off or host:port with an ip address or localhost " \
	"and a port in 1..65535 ([addr]:port for ipv6)"
#define EXP_COUNT1 "an integer in 1..1000000000"

static const struct keydef dkeys[DK_N] = {
	[DK_SOCKET] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "an absolute path of at most " XSTR(CONF_SOCKET_PATH_MAX)
	    " bytes" },
	[DK_SOCKET_MODE] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "an octal mode in 0600..0777" },
	[DK_TCP] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0, EXP_HOSTPORT },
	[DK_UDP] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0, EXP_HOSTPORT },
	[DK_ALLOW_REMOTE] = { V_BOOL, 0, 0, 0, 0, S_INT, D(allow_remote),
	    "yes or no" },
	[DK_ADMIN_FROM_TCP] = { V_BOOL, 0, 0, 0, 0, S_INT,
	    D(admin_from_tcp), "yes or no" },
	[DK_ADMIN_USERS] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "at most " XSTR(CONF_ADMIN_USERS_MAX) " user names or numeric "
	    "uids (letters, digits, '.', '_' or '-', not starting with '-', "
	    "at most " XSTR(CONF_USER_NAME_MAX) " bytes), separated by "
	    "blanks or commas" },
	[DK_TOKEN_FILE] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "an absolute path of at most " XSTR(CONF_PATH_MAX)
	    " bytes, or nothing" },
	[DK_STATE_DIR] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "an absolute path of at most " XSTR(CONF_PATH_MAX) " bytes" },
	[DK_CHECKPOINT_EVERY] = { V_DUR, 0, 1, 86400, 0, S_DOUBLE,
	    D(checkpoint_every), "a duration in 1s..1d" },
	[DK_JOURNAL] = { V_SPECIAL, 0, 0.001, 10, 0, S_NONE, 0,
	    "every-record, off, or a flush interval in 1ms..10s" },
	[DK_MAX_LINE] = { V_SIZE, 0, 256, PROTO_LINE_MAX, 0, S_U64,
	    D(max_line), "a size in 256..1M" },
	[DK_MAX_CONNECTIONS] = { V_INT, 0, 1, 100000, 0, S_INT,
	    D(max_connections), "an integer in 1..100000" },
	[DK_MAX_CONNECTIONS_PER_UID] = { V_INT, 0, 1, 100000, 0, S_INT,
	    D(max_connections_per_uid), "an integer in 1..100000" },
	[DK_MAX_MODELS] = { V_INT, 0, 1, 10000000, 0, S_INT,
	    D(max_models), "an integer in 1..10000000" },
	[DK_MAX_FEATURES] = { V_INT, 0, 1, TERMS_MAX, 0, S_INT,
	    D(max_features), "an integer in 1..255" },
	[DK_OUTPUT_BUFFER] = { V_SIZE, 0, 4096, 1073741824.0, 0, S_U64,
	    D(output_buffer), "a size in 4k..1G" },
	[DK_STUCK_TIMEOUT] = { V_DUR, 0, 1, 3600, 0, S_DOUBLE,
	    D(stuck_timeout), "a duration in 1s..1h" },
	[DK_IDLE_TIMEOUT] = { V_DUR, F_OFF, 1, 604800, 0, S_DOUBLE,
	    D(idle_timeout), "off or a duration in 1s..1w" },
	[DK_LOG_LEVEL] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "error, warning, notice, info or debug" },
	[DK_HISTORY] = { V_INT, 0, 0, 100000, 0, S_INT, D(history),
	    "an integer in 0..100000" },
	[DK_HISTORY_EVERY] = { V_INT, 0, 1, INT_MAX_COUNT, 0, S_U32,
	    D(history_every), EXP_COUNT1 },
};

static const struct keydef mkeys[MK_N] = {
	[MK_FIELDS] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "distinct field names (a letter or '_', then letters, digits "
	    "or '_', at most 32 bytes), separated by blanks or commas" },
	[MK_TARGET] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "a field name (a letter or '_', then letters, digits or '_', "
	    "at most 32 bytes)" },
	[MK_TERMS] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "a term list (see TERMS.md)" },
	[MK_INTERCEPT] = { V_BOOL, 0, 0, 0, 0, S_INT, M(mo.intercept),
	    "yes or no" },
	[MK_MEMORY] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "a forgetting factor in (0, 1] or a duration such as 7d" },
	[MK_REGULARISE] = { V_REAL, 0, 0, HUGE_VAL, 0, S_DOUBLE,
	    M(mo.delta), "a number >= 0" },
	[MK_SCALE] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "auto, none, or field:centre:scale items with scale > 0" },
	[MK_PRIOR] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "numbers, one per coefficient" },
	[MK_PRIOR_SD] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "numbers > 0, one per coefficient or one for all" },
	[MK_REFERENCE] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "numbers, one per coefficient" },
	[MK_TOLERANCE] = { V_SPECIAL, 0, 0, 0, 0, S_NONE, 0,
	    "numbers > 0 or percentages such as 2%, one per coefficient or "
	    "one for all, '-' for none" },
	[MK_DRIFT_ALPHA] = { V_REAL, F_LO_OPEN | F_HI_OPEN, 0, 1, 0,
	    S_DOUBLE, M(mo.drift_alpha), "a number in (0, 1)" },
	[MK_CUSUM_K] = { V_REAL, 0, 0, HUGE_VAL, 0, S_DOUBLE,
	    M(mo.alarm.cusum_k), "a number >= 0" },
	[MK_CUSUM_ARL] = { V_REAL, 0, 10, DIST_CUSUM_ARL0_MAX, 0, S_DOUBLE,
	    M(cusum_arl), "a number in 10..1e10" },
	[MK_CUSUM_H] = { V_REAL, F_LO_OPEN | F_OFF, 0, HUGE_VAL, INFINITY,
	    S_DOUBLE, M(mo.alarm.cusum_h), "a number > 0 or off" },
	[MK_R2_FLOOR] = { V_REAL, F_HI_OPEN | F_OFF, -HUGE_VAL, 1, NAN,
	    S_DOUBLE, M(mo.alarm.r2_floor), "a number below 1 or off" },
	[MK_R2_HYSTERESIS] = { V_REAL, 0, 0, HUGE_VAL, 0, S_DOUBLE,
	    M(mo.alarm.r2_hyst), "a number >= 0" },
	[MK_R2_MIN_RECORDS] = { V_REAL, 0, 0, INT_MAX_COUNT, 0, S_DOUBLE,
	    M(mo.alarm.r2_min_neff), "a number in 0..1000000000" },
	[MK_GATE] = { V_REAL, F_LO_OPEN | F_OFF, 0, HUGE_VAL, INFINITY,
	    S_DOUBLE, M(mo.alarm.gate_z), "a number > 0 or off" },
	[MK_GATE_RUN] = { V_INT, 0, 1, INT_MAX_COUNT, 0, S_U32,
	    M(mo.alarm.gate_run), EXP_COUNT1 },
	[MK_DWELL] = { V_INT, 0, 1, INT_MAX_COUNT, 0, S_U32,
	    M(mo.alarm.dwell), EXP_COUNT1 },
	[MK_WARMUP] = { V_INT, 0, 0, INT_MAX_COUNT, 0, S_U32,
	    M(mo.alarm.warmup), "an integer in 0..1000000000" },
	[MK_SIGMA_MEMORY] = { V_REAL, 0, 1, HUGE_VAL, 0, S_DOUBLE,
	    M(mo.sigma_memory), "a number >= 1" },
	[MK_LEVEL] = { V_REAL, F_LO_OPEN | F_HI_OPEN, 0, 1, 0, S_DOUBLE,
	    M(mo.level), "a number in (0, 1)" },
};

/* ---- parser state ---- */

struct dvec {
	double	*v;
	int	 n, cap;
};

#define TOL_NONE	0
#define TOL_ABS		1
#define TOL_PCT		2

struct scale_item {
	char	 name[FIELD_NAME_MAX + 1];
	double	 centre, scale;
};

/* The model section being read; cross-key rules run when it ends. */
struct mwork {
	int		 kline[MK_N];	/* line of each key, 0 = absent */
	struct dvec	 prior, prior_sd, reference, tol;
	unsigned char	*tolkind;	/* TOL_* per tol entry */
	int		 tolkind_cap;
	struct scale_item *sc;
	int		 nsc;
};

enum sect { SECT_NONE, SECT_DAEMON, SECT_MODEL };

/* A cached h for one (k, ARL0) pair: models usually share them. */
struct hcache {
	double	 k, arl, h;
};
#define HCACHE_N	8

/* The line a model's number of terms comes from (terms, else fields). */
struct pline {
	int	 line;
	int	 is_terms;
};

struct pstate {
	struct conf		*c;
	struct conf_error	*err;
	enum sect		 sect;
	int			 daemon_line;	/* [daemon] header, 0 = none */
	int			 dline[DK_N];
	struct mwork		 mw;
	struct pline		*pline;	/* per model: where p comes from */
	int			 pline_cap;
	int			 models_cap;
	int			 nexplicit;	/* [model] sections so far */
	char			*buf;	/* the logical line */
	size_t			 len, cap;
	struct hcache		 hc[HCACHE_N];
	int			 nhc;
};

/* ---- small helpers ---- */

static int
is_blank(char ch)
{
	return ch == ' ' || ch == '\t';
}

static struct str
trim(const char *s, size_t len)
{
	struct str r;

	while (len > 0 && is_blank(*s)) {
		s++;
		len--;
	}
	while (len > 0 && is_blank(s[len - 1]))
		len--;
	r.s = s;
	r.len = len;
	return r;
}

static int
str_eq(struct str a, const char *b)
{
	return a.len == strlen(b) && memcmp(a.s, b, a.len) == 0;
}

/* Copy a into dst (size n) with a NUL; 0, or E_LIMIT when too long. */
static int
str_copy(char *dst, size_t n, struct str a)
{
	if (a.len >= n)
		return E_LIMIT;
	memcpy(dst, a.s, a.len);
	dst[a.len] = '\0';
	return 0;
}

/* A value for a message: at most QUOTE_MAX bytes, cut at a UTF-8 boundary,
 * "..." when cut. */
static const char *
quote(struct str a, char *tmp, size_t tmplen)
{
	size_t n = a.len;

	if (n > QUOTE_MAX) {
		n = QUOTE_MAX;
		while (n > 0 && ((unsigned char)a.s[n] & 0xc0) == 0x80)
			n--;
	}
	if (n + 4 > tmplen)
		n = 0;
	memcpy(tmp, a.s, n);
	if (n < a.len)
		memcpy(tmp + n, "...", 4);
	else
		tmp[n] = '\0';
	return tmp;
}

static int fail(struct pstate *ps, int line, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Record the error (line, message) and return E_ARG. */
static int
fail(struct pstate *ps, int line, const char *fmt, ...)
{
	va_list ap;

	ps->err->line = line;
	va_start(ap, fmt);
	vsnprintf(ps->err->msg, sizeof(ps->err->msg), fmt, ap);
	va_end(ap);
	return E_ARG;
}

/* "key: expected <range>, got 'value'" */
static int
fail_value(struct pstate *ps, int line, const char *key,
    const struct keydef *kd, struct str v)
{
	char q[QUOTE_MAX + 4];

	return fail(ps, line, "%s: expected %s, got '%s'", key, kd->expect,
	    quote(v, q, sizeof(q)));
}

/*
 * Optimal string alignment distance (Levenshtein with adjacent
 * transpositions), for the "did you mean" hint. Inputs are short (names
 * are capped by the caller).
 */
static int
osa_distance(const char *a, size_t la, const char *b, size_t lb)
{
	int d[40][40], cost, v;
	size_t i, j;

	if (la >= 40 || lb >= 40)
		return HINT_DIST + 1;
	for (i = 0; i <= la; i++)
		d[i][0] = (int)i;
	for (j = 0; j <= lb; j++)
		d[0][j] = (int)j;
	for (i = 1; i <= la; i++)
		for (j = 1; j <= lb; j++) {
			cost = a[i - 1] != b[j - 1];
			v = d[i - 1][j] + 1;
			if (d[i][j - 1] + 1 < v)
				v = d[i][j - 1] + 1;
			if (d[i - 1][j - 1] + cost < v)
				v = d[i - 1][j - 1] + cost;
			if (i > 1 && j > 1 && a[i - 1] == b[j - 2] &&
			    a[i - 2] == b[j - 1] && d[i - 2][j - 2] + 1 < v)
				v = d[i - 2][j - 2] + 1;
			d[i][j] = v;
		}
	return d[la][lb];
}

/* The closest name within HINT_DIST edits, or NULL. */
static const char *
closest(struct str w, const char *const *names)
{
	const char *best = NULL;
	int bd = HINT_DIST + 1, dd, i;

	for (i = 0; names[i] != NULL; i++) {
		dd = osa_distance(w.s, w.len, names[i], strlen(names[i]));
		if (dd < bd) {
			bd = dd;
			best = names[i];
		}
	}
	return best;
}

static int
find_name(struct str w, const char *const *names)
{
	int i;

	for (i = 0; names[i] != NULL; i++)
		if (str_eq(w, names[i]))
			return i;
	return -1;
}

/* Items separated by blanks and/or one comma: 1 with *item set, 0 at the
 * end, -1 for an empty item (",," or a comma at either end). */
static int
next_item(struct str v, size_t *pos, struct str *item)
{
	size_t i = *pos, start;
	int comma = 0;

	while (i < v.len && (is_blank(v.s[i]) || v.s[i] == ',')) {
		if (v.s[i] == ',') {
			if (comma || *pos == 0)
				return -1;
			comma = 1;
		}
		i++;
	}
	*pos = i;
	if (i == v.len)
		return comma ? -1 : 0;
	start = i;
	while (i < v.len && !is_blank(v.s[i]) && v.s[i] != ',')
		i++;
	item->s = v.s + start;
	item->len = i - start;
	*pos = i;
	return 1;
}

static int
dvec_push(struct dvec *d, double x)
{
	double *nv;
	int ncap;

	if (d->n == d->cap) {
		ncap = d->cap ? 2 * d->cap : 8;
		if ((nv = realloc(d->v, sizeof(*nv) * (size_t)ncap)) == NULL)
			return E_NOMEM;
		d->v = nv;
		d->cap = ncap;
	}
	d->v[d->n++] = x;
	return 0;
}

static void
mwork_clear(struct mwork *w)
{
	free(w->prior.v);
	free(w->prior_sd.v);
	free(w->reference.v);
	free(w->tol.v);
	free(w->tolkind);
	free(w->sc);
	memset(w, 0, sizeof(*w));
}

/* ---- value grammars ---- */

/*
 * conf_parse_duration: read a duration s[0..len): a non-negative number
 * (proto_parse_number grammar) followed by an optional unit ms, s, m, h,
 * d or w (lower case, no blank before it); a plain number is in seconds.
 * Stores seconds in *seconds and returns 0; E_ARG for bad syntax, an
 * unknown unit or a negative number; E_NUMERIC when the result overflows.
 * *seconds is untouched on error.
 */
int
conf_parse_duration(const char *s, size_t len, double *seconds)
{
	static const struct {
		const char	*unit;
		double		 mul, div;
	} units[] = {
		{ "", 1, 1 }, { "ms", 1, 1000 }, { "s", 1, 1 },
		{ "m", 60, 1 }, { "h", 3600, 1 }, { "d", 86400, 1 },
		{ "w", 604800, 1 },
	};
	struct str u;
	size_t n = len, i;
	double v;

	while (n > 0 && s[n - 1] >= 'a' && s[n - 1] <= 'z')
		n--;
	u.s = s + n;
	u.len = len - n;
	for (i = 0; i < sizeof(units) / sizeof(units[0]); i++)
		if (str_eq(u, units[i].unit))
			break;
	if (i == sizeof(units) / sizeof(units[0]) || n == 0 || s[0] == '-')
		return E_ARG;
	if (proto_parse_number(s, n, &v) != 0)
		return E_ARG;
	v = v * units[i].mul / units[i].div;
	if (!isfinite(v))
		return E_NUMERIC;
	*seconds = v;
	return 0;
}

/*
 * conf_parse_size: read a size s[0..len): a non-negative number
 * (proto_parse_number grammar) with an optional suffix k or K (1024), M
 * (1024^2) or G (1024^3); the result must be a whole number of bytes no
 * larger than 2^53. Stores it in *bytes and returns 0; E_ARG for bad
 * syntax, a negative or fractional result; E_LIMIT above 2^53. *bytes is
 * untouched on error.
 */
int
conf_parse_size(const char *s, size_t len, uint64_t *bytes)
{
	double v, mul = 1;
	size_t n = len;

	if (n > 0) {
		switch (s[n - 1]) {
		case 'k':
		case 'K':
			mul = 1024;
			break;
		case 'M':
			mul = 1048576;
			break;
		case 'G':
			mul = 1073741824;
			break;
		default:
			break;
		}
		if (mul != 1)
			n--;
	}
	if (n == 0 || s[0] == '-' || proto_parse_number(s, n, &v) != 0)
		return E_ARG;
	v *= mul;
	if (v > 9007199254740992.0)
		return E_LIMIT;
	if (v != floor(v))
		return E_ARG;
	*bytes = (uint64_t)v;
	return 0;
}

static int
parse_bool(struct str v, int *out)
{
	if (str_eq(v, "yes") || str_eq(v, "true") || str_eq(v, "on"))
		*out = 1;
	else if (str_eq(v, "no") || str_eq(v, "false") || str_eq(v, "off"))
		*out = 0;
	else
		return E_ARG;
	return 0;
}

static int
in_range(const struct keydef *kd, double v)
{
	if ((kd->flags & F_LO_OPEN) ? !(v > kd->lo) : !(v >= kd->lo))
		return 0;
	if ((kd->flags & F_HI_OPEN) ? !(v < kd->hi) : !(v <= kd->hi))
		return 0;
	return 1;
}

static void
store(void *base, const struct keydef *kd, double v)
{
	char *p = (char *)base + kd->off;

	switch (kd->st) {
	case S_INT:
		*(int *)(void *)p = (int)v;
		break;
	case S_U32:
		*(uint32_t *)(void *)p = (uint32_t)v;
		break;
	case S_U64:
		*(uint64_t *)(void *)p = (uint64_t)v;
		break;
	case S_DOUBLE:
		*(double *)(void *)p = v;
		break;
	case S_NONE:
		break;
	}
}

/* A table-driven value: parse, check the range, store at base + off. */
static int
set_generic(struct pstate *ps, int line, const char *key,
    const struct keydef *kd, struct str v, void *base)
{
	uint64_t sz;
	double x;
	int b;

	if ((kd->flags & F_OFF) && str_eq(v, "off")) {
		store(base, kd, kd->offval);
		return 0;
	}
	switch (kd->kind) {
	case V_BOOL:
		if (parse_bool(v, &b) != 0)
			return fail_value(ps, line, key, kd, v);
		x = b;
		break;
	case V_INT:
	case V_REAL:
		if (proto_parse_number(v.s, v.len, &x) != 0 ||
		    (kd->kind == V_INT && x != floor(x)) || !in_range(kd, x))
			return fail_value(ps, line, key, kd, v);
		break;
	case V_DUR:
		if (conf_parse_duration(v.s, v.len, &x) != 0 ||
		    !in_range(kd, x))
			return fail_value(ps, line, key, kd, v);
		break;
	case V_SIZE:
		if (conf_parse_size(v.s, v.len, &sz) != 0 ||
		    !in_range(kd, (double)sz))
			return fail_value(ps, line, key, kd, v);
		x = (double)sz;
		break;
	case V_SPECIAL:
	default:
		return fail(ps, line, "%s: internal error", key);
	}
	store(base, kd, x);
	return 0;
}

/* ---- [daemon] ---- */

/*
 * conf_daemon_default: fill d with the documented defaults (the table in
 * conf/coefd.conf): socket /run/coefd/coefd.sock mode 0660, tcp and udp
 * off, no remote or TCP admin, no token file, state in /var/lib/coefd,
 * checkpoints every 5 minutes, journal flushed every 200 ms, 64 KiB lines,
 * 1024 connections (256 per uid), 10000 models of up to 64 terms, 1 MiB
 * output per connection for at most 30 s over the cap, 1 h idle timeout,
 * log level info, 256 snapshots taken every 60 used records.
 */
void
conf_daemon_default(struct conf_daemon *d)
{
	memset(d, 0, sizeof(*d));
	strcpy(d->socket, "/run/coefd/coefd.sock");
	d->socket_mode = 0660;
	strcpy(d->state_dir, LOCALSTATEDIR "/lib/coefd");
	d->checkpoint_every = 300;
	d->journal = CONF_JOURNAL_INTERVAL;
	d->journal_every = 0.2;
	d->max_line = 65536;
	d->max_connections = 1024;
	d->max_connections_per_uid = 256;
	d->max_models = 10000;
	d->max_features = 64;
	d->output_buffer = 1048576;
	d->stuck_timeout = 30;
	d->idle_timeout = 3600;
	d->log_level = CONF_LOG_INFO;
	d->history = 256;
	d->history_every = 60;
}

static int
parse_path(struct str v, char *dst, size_t n)
{
	if (v.len == 0 || v.s[0] != '/')
		return E_ARG;
	return str_copy(dst, n, v);
}

static int
parse_mode(struct str v, unsigned *mode)
{
	unsigned m = 0;
	size_t i;

	if (v.len != 3 && !(v.len == 4 && v.s[0] == '0'))
		return E_ARG;
	for (i = 0; i < v.len; i++) {
		if (v.s[i] < '0' || v.s[i] > '7')
			return E_ARG;
		m = m * 8 + (unsigned)(v.s[i] - '0');
	}
	if (m < 0600 || m > 0777)
		return E_ARG;
	*mode = m;
	return 0;
}

/* "off", "host:port" (IPv4 literal or localhost) or "[v6]:port". */
static int
parse_listen(struct str v, struct conf_listen *l)
{
	struct conf_listen r;
	struct str host, port;
	unsigned char a[16];
	const char *colon;
	double x;

	memset(&r, 0, sizeof(r));
	if (str_eq(v, "off")) {
		*l = r;
		return 0;
	}
	if (v.len > 0 && v.s[0] == '[') {
		if ((colon = memchr(v.s, ']', v.len)) == NULL ||
		    colon + 1 == v.s + v.len || colon[1] != ':')
			return E_ARG;
		host.s = v.s + 1;
		host.len = (size_t)(colon - host.s);
		port.s = colon + 2;
		r.family = 6;
	} else {
		if ((colon = memchr(v.s, ':', v.len)) == NULL ||
		    memchr(colon + 1, ':', (size_t)(v.s + v.len - colon - 1))
		    != NULL)
			return E_ARG;
		host.s = v.s;
		host.len = (size_t)(colon - v.s);
		port.s = colon + 1;
		r.family = str_eq(host, "localhost") ? 0 : 4;
	}
	port.len = (size_t)(v.s + v.len - port.s);
	if (str_copy(r.host, sizeof(r.host), host) != 0 || host.len == 0)
		return E_ARG;
	if (r.family == 6) {
		if (inet_pton(AF_INET6, r.host, a) != 1)
			return E_ARG;
		r.loopback = memcmp(a, "\0\0\0\0\0\0\0\0\0\0\0\0\0\0\0\1",
		    16) == 0;
	} else if (r.family == 4) {
		if (inet_pton(AF_INET, r.host, a) != 1)
			return E_ARG;
		r.loopback = a[0] == 127;
	} else
		r.loopback = 1;
	if (proto_parse_number(port.s, port.len, &x) != 0 || x != floor(x) ||
	    x < 1 || x > 65535)
		return E_ARG;
	r.port = (uint16_t)x;
	r.on = 1;
	*l = r;
	return 0;
}

/* A user name (portable: [A-Za-z0-9._-], not starting with '-') or a
 * numeric uid, each item at most CONF_USER_NAME_MAX bytes. */
static int
parse_users(struct str v, struct conf_daemon *d)
{
	struct str it;
	size_t pos = 0, i;
	int r, n = 0;

	while ((r = next_item(v, &pos, &it)) != 0) {
		if (r < 0 || n == CONF_ADMIN_USERS_MAX || it.s[0] == '-')
			return E_ARG;
		for (i = 0; i < it.len; i++) {
			char ch = it.s[i];

			if (!(ch >= 'a' && ch <= 'z') &&
			    !(ch >= 'A' && ch <= 'Z') &&
			    !(ch >= '0' && ch <= '9') && ch != '.' &&
			    ch != '_' && ch != '-')
				return E_ARG;
		}
		if (str_copy(d->admin_users[n], sizeof(d->admin_users[n]),
		    it) != 0)
			return E_ARG;
		n++;
	}
	d->nadmin_users = n;
	return 0;
}

static int
daemon_key(struct pstate *ps, int k, struct str v, int line)
{
	static const char *const levels[] = {
		[CONF_LOG_ERROR] = "error", [CONF_LOG_WARNING] = "warning",
		[CONF_LOG_NOTICE] = "notice", [CONF_LOG_INFO] = "info",
		[CONF_LOG_DEBUG] = "debug", NULL
	};
	struct conf_daemon *d = &ps->c->d;
	const struct keydef *kd = &dkeys[k];
	const char *key = dkey_names[k];
	double x;
	int i, rc = 0;

	switch (k) {
	case DK_SOCKET:
		rc = parse_path(v, d->socket, sizeof(d->socket));
		break;
	case DK_STATE_DIR:
		rc = parse_path(v, d->state_dir, sizeof(d->state_dir));
		break;
	case DK_TOKEN_FILE:
		if (v.len == 0)
			d->token_file[0] = '\0';
		else
			rc = parse_path(v, d->token_file,
			    sizeof(d->token_file));
		break;
	case DK_SOCKET_MODE:
		rc = parse_mode(v, &d->socket_mode);
		break;
	case DK_ADMIN_USERS:
		rc = parse_users(v, d);
		break;
	case DK_TCP:
		rc = parse_listen(v, &d->tcp);
		break;
	case DK_UDP:
		rc = parse_listen(v, &d->udp);
		break;
	case DK_JOURNAL:
		if (str_eq(v, "every-record"))
			d->journal = CONF_JOURNAL_EVERY;
		else if (str_eq(v, "off"))
			d->journal = CONF_JOURNAL_OFF;
		else if (conf_parse_duration(v.s, v.len, &x) == 0 &&
		    in_range(kd, x)) {
			d->journal = CONF_JOURNAL_INTERVAL;
			d->journal_every = x;
		} else
			rc = E_ARG;
		break;
	case DK_LOG_LEVEL:
		if ((i = find_name(v, levels)) < 0)
			rc = E_ARG;
		else
			d->log_level = (enum conf_log_level)i;
		break;
	default:
		return set_generic(ps, line, key, kd, v, d);
	}
	return rc == 0 ? 0 : fail_value(ps, line, key, kd, v);
}

/* ---- [model] and [template] ---- */

/* The current model: the last one added. */
static struct conf_model *
cur(struct pstate *ps)
{
	return &ps->c->models[ps->c->nmodels - 1];
}

static int
is_reserved_field(struct str f)
{
	return str_eq(f, "prev");
}

static int
key_fields(struct pstate *ps, struct str v, int line)
{
	struct conf_model *m = cur(ps);
	char q[QUOTE_MAX + 4];
	struct str it;
	size_t pos = 0;
	int n = 0, r, i;

	for (;;) {
		if ((r = next_item(v, &pos, &it)) == 0)
			break;
		if (r < 0)
			return fail(ps, line, "fields: empty item in the list "
			    "(fields are separated by blanks or commas)");
		if (proto_check_field_name(it.s, it.len) != 0)
			return fail(ps, line, "fields: bad field name '%s' "
			    "(a letter or '_', then letters, digits or '_', "
			    "at most %d bytes)", quote(it, q, sizeof(q)),
			    FIELD_NAME_MAX);
		if (is_reserved_field(it))
			return fail(ps, line, "fields: 'prev' is reserved "
			    "(it reads a field's previous value in terms)");
		n++;
	}
	if (n > PROTO_MAX_VALUES - 1)
		return fail(ps, line, "fields: %d fields, at most 255 (a "
		    "record carries at most 256 values with its target)", n);
	if ((m->fields = calloc((size_t)n, sizeof(*m->fields))) == NULL)
		return E_NOMEM;
	for (pos = 0, i = 0; next_item(v, &pos, &it) == 1; i++) {
		memcpy(m->fields[i], it.s, it.len);
		m->fields[i][it.len] = '\0';
		for (r = 0; r < i; r++)
			if (strcmp(m->fields[r], m->fields[i]) == 0)
				return fail(ps, line, "fields: '%s' is listed "
				    "twice", m->fields[i]);
		m->nfields = i + 1;
	}
	return 0;
}

/* A list of numbers into d; positive = 1 requires each > 0. Values are
 * bounded by RLS_VALUE_MAX, the engine's largest accepted magnitude. */
static int
key_numbers(struct pstate *ps, const char *key, const struct keydef *kd,
    struct str v, int line, struct dvec *d, int positive)
{
	struct str it;
	size_t pos = 0;
	double x;
	int r, rc;

	while ((r = next_item(v, &pos, &it)) != 0) {
		if (r < 0 || proto_parse_number(it.s, it.len, &x) != 0 ||
		    fabs(x) > RLS_VALUE_MAX || (positive && !(x > 0)))
			return fail_value(ps, line, key, kd,
			    r < 0 ? v : it);
		if ((rc = dvec_push(d, x)) != 0)
			return rc;
	}
	return 0;
}

static int
key_tolerance(struct pstate *ps, struct str v, int line)
{
	struct mwork *w = &ps->mw;
	const struct keydef *kd = &mkeys[MK_TOLERANCE];
	unsigned char kind, *nk;
	struct str it;
	size_t pos = 0;
	double x;
	int r, rc;

	while ((r = next_item(v, &pos, &it)) != 0) {
		if (r < 0)
			return fail_value(ps, line, "tolerance", kd, v);
		kind = TOL_ABS;
		x = NAN;
		if (str_eq(it, "-"))
			kind = TOL_NONE;
		else {
			if (it.len > 1 && it.s[it.len - 1] == '%')
				kind = TOL_PCT;
			if (proto_parse_number(it.s, it.len - (kind == TOL_PCT),
			    &x) != 0 || !(x > 0) || x > RLS_VALUE_MAX)
				return fail_value(ps, line, "tolerance", kd,
				    it);
		}
		if (w->tol.n == w->tolkind_cap) {
			r = w->tolkind_cap ? 2 * w->tolkind_cap : 8;
			if ((nk = realloc(w->tolkind, (size_t)r)) == NULL)
				return E_NOMEM;
			w->tolkind = nk;
			w->tolkind_cap = r;
		}
		w->tolkind[w->tol.n] = kind;
		if ((rc = dvec_push(&w->tol, x)) != 0)
			return rc;
	}
	return 0;
}

static int
key_scale(struct pstate *ps, struct str v, int line)
{
	struct conf_model *m = cur(ps);
	struct mwork *w = &ps->mw;
	const struct keydef *kd = &mkeys[MK_SCALE];
	struct scale_item *ns, si;
	struct str it, name, cs, ss;
	const char *c1, *c2;
	size_t pos = 0;
	int r;

	if (str_eq(v, "auto")) {
		m->scale_mode = CONF_SCALE_AUTO;
		return 0;
	}
	if (str_eq(v, "none")) {
		m->scale_mode = CONF_SCALE_NONE;
		return 0;
	}
	while ((r = next_item(v, &pos, &it)) != 0) {
		if (r < 0)
			return fail_value(ps, line, "scale", kd, v);
		c1 = memchr(it.s, ':', it.len);
		c2 = c1 == NULL ? NULL :
		    memchr(c1 + 1, ':', (size_t)(it.s + it.len - c1 - 1));
		if (c2 == NULL || memchr(c2 + 1, ':',
		    (size_t)(it.s + it.len - c2 - 1)) != NULL)
			return fail_value(ps, line, "scale", kd, it);
		name.s = it.s;
		name.len = (size_t)(c1 - it.s);
		cs.s = c1 + 1;
		cs.len = (size_t)(c2 - cs.s);
		ss.s = c2 + 1;
		ss.len = (size_t)(it.s + it.len - ss.s);
		if (proto_check_field_name(name.s, name.len) != 0 ||
		    proto_parse_number(cs.s, cs.len, &si.centre) != 0 ||
		    proto_parse_number(ss.s, ss.len, &si.scale) != 0 ||
		    !(si.scale > 0) || fabs(si.centre) > RLS_VALUE_MAX ||
		    si.scale > RLS_VALUE_MAX)
			return fail_value(ps, line, "scale", kd, it);
		memcpy(si.name, name.s, name.len);
		si.name[name.len] = '\0';
		ns = realloc(w->sc, sizeof(*ns) * (size_t)(w->nsc + 1));
		if (ns == NULL)
			return E_NOMEM;
		w->sc = ns;
		w->sc[w->nsc++] = si;
	}
	m->scale_mode = CONF_SCALE_EXPLICIT;
	return 0;
}

static int
key_memory(struct pstate *ps, struct str v, int line)
{
	struct conf_model *m = cur(ps);
	double x;

	if (proto_parse_number(v.s, v.len, &x) == 0) {
		if (!(x > 0 && x <= 1))
			return fail_value(ps, line, "memory",
			    &mkeys[MK_MEMORY], v);
		m->mo.lambda = x;
		m->mo.tau = 0;
		return 0;
	}
	if (conf_parse_duration(v.s, v.len, &x) != 0 || !(x > 0))
		return fail_value(ps, line, "memory", &mkeys[MK_MEMORY], v);
	m->mo.tau = x;
	return 0;
}

static int
model_key(struct pstate *ps, int k, struct str v, int line)
{
	struct conf_model *m = cur(ps);
	struct mwork *w = &ps->mw;
	const struct keydef *kd = &mkeys[k];
	const char *key = mkey_names[k];

	switch (k) {
	case MK_FIELDS:
		return key_fields(ps, v, line);
	case MK_TARGET:
		if (proto_check_field_name(v.s, v.len) != 0 ||
		    is_reserved_field(v))
			return fail_value(ps, line, key, kd, v);
		memcpy(m->target, v.s, v.len);
		m->target[v.len] = '\0';
		return 0;
	case MK_TERMS:
		if ((m->terms_text = strndup(v.s, v.len)) == NULL)
			return E_NOMEM;
		return 0;
	case MK_MEMORY:
		return key_memory(ps, v, line);
	case MK_SCALE:
		return key_scale(ps, v, line);
	case MK_PRIOR:
		return key_numbers(ps, key, kd, v, line, &w->prior, 0);
	case MK_PRIOR_SD:
		return key_numbers(ps, key, kd, v, line, &w->prior_sd, 1);
	case MK_REFERENCE:
		return key_numbers(ps, key, kd, v, line, &w->reference, 0);
	case MK_TOLERANCE:
		return key_tolerance(ps, v, line);
	default:
		return set_generic(ps, line, key, kd, v, m);
	}
}

/* ---- compiling a model's terms ---- */

/* The term set over fields + target (index nfields), no scaling. */
static int
compile_terms(const struct conf_model *m, struct terms **out, char *errbuf,
    size_t errlen)
{
	const char **names;
	char *text = NULL, *p;
	size_t tl = 1;
	int f, rc;

	*out = NULL;
	if (m->nfields < 1)
		return E_ARG;
	names = calloc((size_t)m->nfields + 1, sizeof(*names));
	if (names == NULL)
		return E_NOMEM;
	for (f = 0; f < m->nfields; f++) {
		names[f] = m->fields[f];
		tl += strlen(m->fields[f]) + 2;
	}
	names[m->nfields] = m->target;
	if (m->terms_text == NULL) {
		if ((text = malloc(tl)) == NULL) {
			free(names);
			return E_NOMEM;
		}
		for (p = text, f = 0; f < m->nfields; f++) {
			if (f > 0) {
				*p++ = ',';
				*p++ = ' ';
			}
			strcpy(p, m->fields[f]);
			p += strlen(p);
		}
		*p = '\0';
	}
	rc = terms_parse(m->terms_text != NULL ? m->terms_text : text,
	    (const char *const *)names, m->nfields + 1, m->nfields,
	    m->mo.intercept, out, errbuf, errlen);
	free(text);
	free(names);
	return rc;
}

/*
 * conf_model_terms: compile a fresh term set for m (a model or template of
 * a parsed struct conf): its terms over fields[] then the target, with
 * the intercept option, and the explicit scaling constants set when
 * scale_mode is CONF_SCALE_EXPLICIT (auto scaling is left to the model's
 * first records). The caller owns *out (terms_free). Returns 0; E_ARG or
 * E_NUMERIC with a message in errbuf (cannot happen for a model that
 * conf_parse accepted); E_NOMEM. *out is NULL on failure.
 */
int
conf_model_terms(const struct conf_model *m, struct terms **out,
    char *errbuf, size_t errlen)
{
	int rc;

	if ((rc = compile_terms(m, out, errbuf, errlen)) != 0)
		return rc;
	if (m->scale_mode == CONF_SCALE_EXPLICIT &&
	    (rc = terms_set_scaling(*out, m->centre, m->scale)) != 0) {
		if (errbuf != NULL && errlen > 0)
			snprintf(errbuf, errlen, "scaling constants refused");
		terms_free(*out);
		*out = NULL;
	}
	return rc;
}

/* "intercept, raw, temp" for messages, cut to fit. */
static const char *
coef_list(const struct terms *t, char *buf, size_t len)
{
	size_t pos = 0, n;
	int j;

	buf[0] = '\0';
	for (j = 0; j < terms_p(t); j++) {
		n = (size_t)snprintf(buf + pos, len - pos, "%s%s",
		    j ? ", " : "", terms_text(t, j));
		if (n >= len - pos) {
			if (len >= 4)
				memcpy(buf + len - 4, "...", 4);
			break;
		}
		pos += n;
	}
	return buf;
}

static int
count_check(struct pstate *ps, int k, int n, int p, int one_ok,
    const struct terms *t)
{
	char names[100];

	if (n == p || (one_ok && n == 1))
		return 0;
	return fail(ps, ps->mw.kline[k], "%s: %d value%s for %d "
	    "coefficient%s (%s)%s", mkey_names[k], n, n == 1 ? "" : "s", p,
	    p == 1 ? "" : "s", coef_list(t, names, sizeof(names)),
	    one_ok ? "; or give one value for all" : "");
}

static double *
dup_or_fill(const struct dvec *d, int p)
{
	double *a;
	int j;

	if ((a = malloc(sizeof(*a) * (size_t)p)) == NULL)
		return NULL;
	for (j = 0; j < p; j++)
		a[j] = d->n == 1 ? d->v[0] : d->v[j];
	return a;
}

static int
field_index(const struct conf_model *m, const char *name)
{
	int f;

	for (f = 0; f < m->nfields; f++)
		if (strcmp(m->fields[f], name) == 0)
			return f;
	return strcmp(m->target, name) == 0 ? m->nfields : -1;
}

static int
resolve_scaling(struct pstate *ps, struct conf_model *m)
{
	struct mwork *w = &ps->mw;
	int line = w->kline[MK_SCALE], i, f, g, rc;

	m->centre = calloc((size_t)m->nfields + 1, sizeof(double));
	m->scale = calloc((size_t)m->nfields + 1, sizeof(double));
	if (m->centre == NULL || m->scale == NULL)
		return E_NOMEM;
	for (f = 0; f <= m->nfields; f++)
		m->scale[f] = 1;
	for (i = 0; i < w->nsc; i++) {
		if ((f = field_index(m, w->sc[i].name)) < 0)
			return fail(ps, line, "scale: '%s' is neither a field "
			    "nor the target", w->sc[i].name);
		for (g = 0; g < i; g++)
			if (strcmp(w->sc[g].name, w->sc[i].name) == 0)
				return fail(ps, line, "scale: '%s' is given "
				    "twice", w->sc[i].name);
		if (w->sc[i].centre != 0 &&
		    !terms_field_centrable(m->terms, f))
			return fail(ps, line, "scale: '%s' cannot be centred "
			    "with these terms (centring keeps the model only "
			    "when the terms are closed under lowering its "
			    "power, see TERMS.md); give it centre 0",
			    w->sc[i].name);
		m->centre[f] = w->sc[i].centre;
		m->scale[f] = w->sc[i].scale;
	}
	rc = terms_set_scaling(m->terms, m->centre, m->scale);
	if (rc == E_NUMERIC)
		return fail(ps, line, "scale: these constants make the map "
		    "back to the original terms overflow");
	if (rc != 0)
		return fail(ps, line, "scale: constants refused (%s)",
		    err_str(rc));
	return 0;
}

static int
derive_cusum_h(struct pstate *ps, struct conf_model *m)
{
	struct mwork *w = &ps->mw;
	double k = m->mo.alarm.cusum_k, arl = m->cusum_arl, h, lb;
	int i, line;

	if (w->kline[MK_CUSUM_H] != 0 && w->kline[MK_CUSUM_ARL] != 0) {
		line = w->kline[MK_CUSUM_H] > w->kline[MK_CUSUM_ARL] ?
		    w->kline[MK_CUSUM_H] : w->kline[MK_CUSUM_ARL];
		return fail(ps, line, "cusum_h and cusum_arl exclude each "
		    "other (cusum_h sets the decision interval, cusum_arl "
		    "derives it)");
	}
	if (w->kline[MK_CUSUM_H] != 0) {
		m->cusum_arl = NAN;
		return 0;
	}
	for (i = 0; i < ps->nhc; i++)
		if (ps->hc[i].k == k && ps->hc[i].arl == arl) {
			m->mo.alarm.cusum_h = ps->hc[i].h;
			return 0;
		}
	if (dist_cusum_h_for_arl(k, arl, &h) != 0) {
		line = w->kline[MK_CUSUM_ARL] ? w->kline[MK_CUSUM_ARL] :
		    w->kline[MK_CUSUM_K] ? w->kline[MK_CUSUM_K] : m->line;
		/* As h -> 0 the two-sided ARL falls to 1/(2 Phi(-k)); above
		 * that the root lies beyond DIST_CUSUM_HMAX. */
		lb = 1 / (2 * dist_norm_cdf(-k));
		if (!(arl > lb))
			return fail(ps, line, "cusum_arl: no decision interval "
			    "gives an in-control run length of %g with "
			    "cusum_k = %g (it must exceed %.4g)", arl, k, lb);
		return fail(ps, line, "cusum_arl: an in-control run length "
		    "of %g with cusum_k = %g needs a decision interval above "
		    "%g; lower cusum_arl, raise cusum_k or give cusum_h", arl,
		    k, (double)DIST_CUSUM_HMAX);
	}
	i = ps->nhc < HCACHE_N ? ps->nhc++ : HCACHE_N - 1;
	ps->hc[i].k = k;
	ps->hc[i].arl = arl;
	ps->hc[i].h = h;
	m->mo.alarm.cusum_h = h;
	return 0;
}

/* Cross-key rules and the final arrays of the model section that ends. */
static int
finish_model(struct pstate *ps)
{
	struct conf_model *m = cur(ps);
	struct mwork *w = &ps->mw;
	char msg[CONF_ERR_MAX];
	int p, j, line, f, rc;

	if (w->kline[MK_FIELDS] == 0)
		return fail(ps, m->line, "[%s %s] has no 'fields' key (it is "
		    "required)", m->is_template ? "template" : "model",
		    m->name);
	for (f = 0; f < m->nfields; f++)
		if (strcmp(m->fields[f], m->target) == 0) {
			if (w->kline[MK_TARGET] != 0)
				return fail(ps, w->kline[MK_TARGET],
				    "target: '%s' is also listed in fields",
				    m->target);
			return fail(ps, w->kline[MK_FIELDS], "fields: '%s' "
			    "is the target (the default target is 'y'; set "
			    "target = NAME to use another name)", m->target);
		}
	line = w->kline[MK_TERMS] ? w->kline[MK_TERMS] : w->kline[MK_FIELDS];
	ps->pline[ps->c->nmodels - 1].line = line;
	ps->pline[ps->c->nmodels - 1].is_terms = w->kline[MK_TERMS] != 0;
	msg[0] = '\0';
	if ((rc = compile_terms(m, &m->terms, msg, sizeof(msg))) != 0) {
		if (rc == E_NOMEM)
			return rc;
		return fail(ps, line, "%s: %s", w->kline[MK_TERMS] ? "terms" :
		    "fields", msg);
	}
	p = terms_p(m->terms);
	if (m->scale_mode == CONF_SCALE_EXPLICIT &&
	    (rc = resolve_scaling(ps, m)) != 0)
		return rc;

	for (j = MK_PRIOR; j <= MK_REFERENCE; j++)
		if (j != MK_PRIOR_SD && w->kline[j] != 0 &&
		    m->scale_mode != CONF_SCALE_NONE)
			return fail(ps, w->kline[j], "%s: needs scale = none "
			    "(the values are in the original units; on "
			    "centred or scaled terms they would mean something "
			    "else)", mkey_names[j]);
	if (w->kline[MK_PRIOR] != 0 && w->kline[MK_PRIOR_SD] == 0)
		return fail(ps, w->kline[MK_PRIOR], "prior: needs prior_sd "
		    "(the standard deviation of each prior value)");
	if (w->kline[MK_PRIOR_SD] != 0 && w->kline[MK_PRIOR] == 0)
		return fail(ps, w->kline[MK_PRIOR_SD], "prior_sd: needs prior");
	if (w->kline[MK_PRIOR] != 0) {
		if ((rc = count_check(ps, MK_PRIOR, w->prior.n, p, 0,
		    m->terms)) != 0 || (rc = count_check(ps, MK_PRIOR_SD,
		    w->prior_sd.n, p, 1, m->terms)) != 0)
			return rc;
		if ((m->prior = dup_or_fill(&w->prior, p)) == NULL ||
		    (m->prior_sd = dup_or_fill(&w->prior_sd, p)) == NULL)
			return E_NOMEM;
	}
	if (w->kline[MK_REFERENCE] != 0) {
		if ((rc = count_check(ps, MK_REFERENCE, w->reference.n, p, 0,
		    m->terms)) != 0)
			return rc;
		if ((m->reference = dup_or_fill(&w->reference, p)) == NULL)
			return E_NOMEM;
	}
	if (w->kline[MK_TOLERANCE] != 0) {
		if ((rc = count_check(ps, MK_TOLERANCE, w->tol.n, p, 1,
		    m->terms)) != 0)
			return rc;
		for (j = 0; j < w->tol.n; j++) {
			if (w->tolkind[j] == TOL_ABS && m->tol_abs == NULL)
				m->tol_abs = malloc(sizeof(double) *
				    (size_t)p);
			if (w->tolkind[j] == TOL_PCT && m->tol_pct == NULL)
				m->tol_pct = malloc(sizeof(double) *
				    (size_t)p);
			if ((w->tolkind[j] == TOL_ABS && m->tol_abs == NULL) ||
			    (w->tolkind[j] == TOL_PCT && m->tol_pct == NULL))
				return E_NOMEM;
		}
		for (j = 0; j < p; j++) {
			f = w->tol.n == 1 ? 0 : j;
			if (m->tol_abs != NULL)
				m->tol_abs[j] = w->tolkind[f] == TOL_ABS ?
				    w->tol.v[f] : NAN;
			if (m->tol_pct != NULL)
				m->tol_pct[j] = w->tolkind[f] == TOL_PCT ?
				    w->tol.v[f] : NAN;
		}
	}
	if ((rc = derive_cusum_h(ps, m)) != 0)
		return rc;

	m->mo.p = p;
	m->mo.theta0 = m->prior;
	m->mo.prior_sd = m->prior_sd;
	m->mo.reference = m->reference;
	m->mo.tol_abs = m->tol_abs;
	m->mo.tol_pct = m->tol_pct;
	if (model_opts_check(&m->mo, msg, sizeof(msg)) != 0)
		return fail(ps, m->line, "[%s %s]: %s", m->is_template ?
		    "template" : "model", m->name, msg);
	return 0;
}

static int
finish_section(struct pstate *ps)
{
	int rc = 0;

	if (ps->sect == SECT_MODEL)
		rc = finish_model(ps);
	mwork_clear(&ps->mw);
	ps->sect = SECT_NONE;
	return rc;
}

/* ---- the model name index ---- */

static size_t
name_hash(const char *s)
{
	size_t h = (size_t)14695981039346656037ULL;

	while (*s != '\0')
		h = (h ^ (unsigned char)*s++) * (size_t)1099511628211ULL;
	return h;
}

/* The slot of name in c->index: its model, or the empty slot for it. */
static size_t
index_slot(const struct conf *c, const char *name)
{
	size_t i = name_hash(name) & (c->index_cap - 1);

	while (c->index[i] != 0 &&
	    strcmp(c->models[c->index[i] - 1].name, name) != 0)
		i = (i + 1) & (c->index_cap - 1);
	return i;
}

/* Add model index mi (an explicit model) to the index, growing it so
 * that it stays at most half full. */
static int
index_add(struct conf *c, int mi, int nexplicit)
{
	size_t ncap, i;
	int *old = c->index, *nidx;
	size_t oldcap = c->index_cap;

	if ((size_t)nexplicit * 2 > c->index_cap) {
		ncap = c->index_cap ? 2 * c->index_cap : 64;
		if ((nidx = calloc(ncap, sizeof(*nidx))) == NULL)
			return E_NOMEM;
		c->index = nidx;
		c->index_cap = ncap;
		for (i = 0; i < oldcap; i++)
			if (old[i] != 0)
				c->index[index_slot(c,
				    c->models[old[i] - 1].name)] = old[i];
		free(old);
	}
	c->index[index_slot(c, c->models[mi].name)] = mi + 1;
	return 0;
}

/* ---- sections and lines ---- */

/* A pattern is a model name in which '*' and '?' may appear. */
static int
check_pattern(struct str n)
{
	char tmp[MODEL_NAME_MAX + 1];
	size_t i;

	if (n.len == 0 || n.len > MODEL_NAME_MAX)
		return E_ARG;
	for (i = 0; i < n.len; i++)
		tmp[i] = n.s[i] == '*' || n.s[i] == '?' ? 'a' : n.s[i];
	return proto_check_model_name(tmp, n.len);
}

static int
new_model(struct pstate *ps, struct str name, int is_template, int line)
{
	struct conf *c = ps->c;
	struct conf_model *nm, *m;
	struct pline *np;
	int ncap, i;

	if (c->nmodels == ps->models_cap) {
		ncap = ps->models_cap ? 2 * ps->models_cap : 16;
		nm = realloc(c->models, sizeof(*nm) * (size_t)ncap);
		if (nm == NULL)
			return E_NOMEM;
		c->models = nm;
		ps->models_cap = ncap;
		if ((np = realloc(ps->pline, sizeof(*np) * (size_t)ncap)) ==
		    NULL)
			return E_NOMEM;
		ps->pline = np;
	}
	m = &c->models[c->nmodels];
	memset(m, 0, sizeof(*m));
	memcpy(m->name, name.s, name.len);
	m->name[name.len] = '\0';
	m->is_template = is_template;
	m->line = line;
	strcpy(m->target, "y");
	m->scale_mode = CONF_SCALE_AUTO;
	m->cusum_arl = 10000;
	model_opts_default(&m->mo, 1, 1);
	ps->pline[c->nmodels].line = line;
	ps->pline[c->nmodels].is_terms = 0;
	c->nmodels++;
	if (is_template) {
		for (i = 0; i < c->nmodels - 1; i++)
			if (c->models[i].is_template &&
			    strcmp(c->models[i].name, m->name) == 0)
				return fail(ps, line, "duplicate [template "
				    "%s] (first at line %d)", m->name,
				    c->models[i].line);
		return 0;
	}
	if (c->index_cap > 0 && (i = c->index[index_slot(c, m->name)]) != 0)
		return fail(ps, line, "duplicate [model %s] (first at line "
		    "%d)", m->name, c->models[i - 1].line);
	return index_add(c, c->nmodels - 1, ++ps->nexplicit);
}

static int
header(struct pstate *ps, struct str s, int line)
{
	char q[QUOTE_MAX + 4];
	struct str in, word, rest;
	const char *hint;
	size_t i;
	int rc;

	if (s.s[s.len - 1] != ']')
		return fail(ps, line, "a section header ends with ']'");
	in = trim(s.s + 1, s.len - 2);
	for (i = 0; i < in.len && !is_blank(in.s[i]); i++)
		;
	word.s = in.s;
	word.len = i;
	rest = trim(in.s + i, in.len - i);
	if ((rc = finish_section(ps)) != 0)
		return rc;
	if (str_eq(word, "daemon")) {
		if (rest.len != 0)
			return fail(ps, line, "[daemon] takes no name");
		if (ps->daemon_line != 0)
			return fail(ps, line, "duplicate [daemon] section "
			    "(first at line %d)", ps->daemon_line);
		ps->daemon_line = line;
		ps->sect = SECT_DAEMON;
		return 0;
	}
	if (str_eq(word, "model") || str_eq(word, "template")) {
		if (rest.len == 0)
			return fail(ps, line, "[%s] needs a %s: [%s %s]",
			    word.s[0] == 'm' ? "model" : "template",
			    word.s[0] == 'm' ? "name" : "pattern",
			    word.s[0] == 'm' ? "model" : "template",
			    word.s[0] == 'm' ? "NAME" : "PATTERN");
		if (word.s[0] == 'm' &&
		    proto_check_model_name(rest.s, rest.len) != 0)
			return fail(ps, line, "bad model name '%s' (1 to %d "
			    "letters, digits, '_', '.' or '-', the first a "
			    "letter or digit)", quote(rest, q, sizeof(q)),
			    MODEL_NAME_MAX);
		if (word.s[0] == 't' && check_pattern(rest) != 0)
			return fail(ps, line, "bad template pattern '%s' (a "
			    "model name in which '*' and '?' may appear)",
			    quote(rest, q, sizeof(q)));
		if ((rc = new_model(ps, rest, word.s[0] == 't', line)) != 0)
			return rc;
		ps->sect = SECT_MODEL;
		return 0;
	}
	hint = closest(word, section_names);
	return fail(ps, line, "unknown section '%s'%s%s%s", quote(word, q,
	    sizeof(q)), hint ? " (did you mean '" : " (sections are "
	    "[daemon], [model NAME] and [template PATTERN])",
	    hint ? hint : "", hint ? "'?)" : "");
}

static int
key_line(struct pstate *ps, struct str s, int line)
{
	char q[QUOTE_MAX + 4];
	const char *const *names, *const *other, *hint, *where;
	const char *eq;
	struct str key, val;
	int k, *kline;

	if ((eq = memchr(s.s, '=', s.len)) == NULL)
		return fail(ps, line, "expected 'key = value', '[section]' "
		    "or a comment");
	key = trim(s.s, (size_t)(eq - s.s));
	val = trim(eq + 1, (size_t)(s.s + s.len - eq - 1));
	if (key.len == 0)
		return fail(ps, line, "missing key before '='");
	if (ps->sect == SECT_NONE)
		return fail(ps, line, "key '%s' outside a section (keys "
		    "follow [daemon], [model NAME] or [template PATTERN])",
		    quote(key, q, sizeof(q)));
	if (ps->sect == SECT_DAEMON) {
		names = dkey_names;
		other = mkey_names;
		kline = ps->dline;
		where = "[daemon]";
	} else {
		names = mkey_names;
		other = dkey_names;
		kline = ps->mw.kline;
		where = cur(ps)->is_template ? "a [template] section" :
		    "a [model] section";
	}
	if ((k = find_name(key, names)) < 0) {
		if (find_name(key, other) >= 0)
			return fail(ps, line, "key '%s' belongs in %s, not in "
			    "%s", quote(key, q, sizeof(q)),
			    ps->sect == SECT_DAEMON ?
			    "a [model] or [template] section" : "[daemon]",
			    where);
		if ((hint = closest(key, names)) != NULL)
			return fail(ps, line, "unknown key '%s' in %s (did "
			    "you mean '%s'?)", quote(key, q, sizeof(q)), where,
			    hint);
		return fail(ps, line, "unknown key '%s' in %s",
		    quote(key, q, sizeof(q)), where);
	}
	if (kline[k] != 0)
		return fail(ps, line, "duplicate key '%s' (first at line %d)",
		    names[k], kline[k]);
	kline[k] = line;
	if (val.len == 0 && !(ps->sect == SECT_DAEMON &&
	    (k == DK_TOKEN_FILE || k == DK_ADMIN_USERS)))
		return fail(ps, line, "%s: missing value; expected %s",
		    names[k], ps->sect == SECT_DAEMON ? dkeys[k].expect :
		    mkeys[k].expect);
	if (ps->sect == SECT_DAEMON)
		return daemon_key(ps, k, val, line);
	return model_key(ps, k, val, line);
}

static int
logical(struct pstate *ps, int line)
{
	struct str s = trim(ps->buf, ps->len);

	if (s.len == 0)
		return 0;	/* a continuation of nothing */
	if (s.s[0] == '[')
		return header(ps, s, line);
	return key_line(ps, s, line);
}

static int
buf_add(struct pstate *ps, const char *s, size_t n)
{
	size_t ncap;
	char *nb;

	if (ps->len + n + 1 > ps->cap) {
		ncap = ps->cap ? ps->cap : 256;
		while (ps->len + n + 1 > ncap)
			ncap *= 2;
		if ((nb = realloc(ps->buf, ncap)) == NULL)
			return E_NOMEM;
		ps->buf = nb;
		ps->cap = ncap;
	}
	memcpy(ps->buf + ps->len, s, n);
	ps->len += n;
	ps->buf[ps->len] = '\0';
	return 0;
}

/*
 * One physical line (no terminator). A comment or blank line is skipped
 * unless it continues a line. A trailing comment starts at a '#' after a
 * blank (or at the start of a continuation line). A line whose content
 * ends in '\' continues on the next line; the '\' becomes one space.
 */
static int
physical(struct pstate *ps, const char *s, size_t n, int lineno,
    int *cont, int *start)
{
	struct str t;
	size_t i;
	int rc;

	if (!*cont) {
		t = trim(s, n);
		if (t.len == 0 || t.s[0] == '#' || t.s[0] == ';')
			return 0;
		ps->len = 0;
		*start = lineno;
	}
	for (i = 0; i < n; i++)
		if (s[i] == '#' && (i == 0 ? *cont : is_blank(s[i - 1]))) {
			n = i;
			break;
		}
	for (i = 0; i < n; i++)
		if (((unsigned char)s[i] < 0x20 && s[i] != '\t') ||
		    s[i] == 0x7f)
			return fail(ps, lineno, "unexpected control byte "
			    "0x%02x", (unsigned char)s[i]);
	while (n > 0 && is_blank(s[n - 1]))
		n--;
	if (n > 0 && s[n - 1] == '\\') {
		*cont = 1;
		if ((rc = buf_add(ps, s, n - 1)) != 0)
			return rc;
		return buf_add(ps, " ", 1);
	}
	*cont = 0;
	if ((rc = buf_add(ps, s, n)) != 0)
		return rc;
	return logical(ps, *start);
}

/* Length of the valid UTF-8 sequence at s (RFC 3629), 0 if invalid. */
static size_t
utf8_len(const unsigned char *s, size_t n)
{
	size_t len, i;
	unsigned cp;

	if (s[0] < 0x80)
		return 1;
	if (s[0] >= 0xc2 && s[0] <= 0xdf) {
		len = 2;
		cp = s[0] & 0x1f;
	} else if (s[0] >= 0xe0 && s[0] <= 0xef) {
		len = 3;
		cp = s[0] & 0x0f;
	} else if (s[0] >= 0xf0 && s[0] <= 0xf4) {
		len = 4;
		cp = s[0] & 0x07;
	} else
		return 0;
	if (len > n)
		return 0;
	for (i = 1; i < len; i++) {
		if ((s[i] & 0xc0) != 0x80)
			return 0;
		cp = (cp << 6) | (s[i] & 0x3f);
	}
	if ((len == 3 && cp < 0x800) || (len == 4 && cp < 0x10000) ||
	    cp > 0x10ffff || (cp >= 0xd800 && cp <= 0xdfff))
		return 0;
	return len;
}

/* NUL bytes and invalid UTF-8 anywhere (comments included) are errors. */
static int
check_bytes(struct pstate *ps, const char *text, size_t len)
{
	const unsigned char *s = (const unsigned char *)text;
	size_t i = 0, k;
	int line = 1;

	while (i < len) {
		if (s[i] == '\0')
			return fail(ps, line, "nul byte in the file");
		if ((k = utf8_len(s + i, len - i)) == 0)
			return fail(ps, line, "invalid utf-8 (byte 0x%02x)",
			    s[i]);
		line += s[i] == '\n';
		i += k;
	}
	return 0;
}

static int
check_daemon(struct pstate *ps)
{
	const struct conf_daemon *d = &ps->c->d;
	const struct conf_model *m;
	int i, nexplicit = 0, nterms;

	if (d->tcp.on && !d->tcp.loopback && !d->allow_remote)
		return fail(ps, ps->dline[DK_TCP], "tcp: '%s' is not a "
		    "loopback address; set allow_remote = yes to listen on "
		    "it", d->tcp.host);
	if (d->udp.on && !d->udp.loopback && !d->allow_remote)
		return fail(ps, ps->dline[DK_UDP], "udp: '%s' is not a "
		    "loopback address; set allow_remote = yes to listen on "
		    "it", d->udp.host);
	for (i = 0; i < ps->c->nmodels; i++) {
		m = &ps->c->models[i];
		if (!m->is_template && ++nexplicit > d->max_models)
			return fail(ps, m->line, "more than max_models = %d "
			    "[model] sections", d->max_models);
		nterms = m->mo.p - m->mo.intercept;
		if (nterms > d->max_features)
			return fail(ps, ps->pline[i].line, "%s: %d terms, more "
			    "than max_features = %d", ps->pline[i].is_terms ?
			    "terms" : "fields", nterms, d->max_features);
	}
	return 0;
}

static int
parse_text(struct pstate *ps, const char *text, size_t len)
{
	size_t pos = 0, eol, n;
	int rc, lineno = 0, cont = 0, start = 0;

	if (len > CONF_FILE_MAX)
		return fail(ps, 0, "the file is larger than %d bytes",
		    CONF_FILE_MAX);
	if ((rc = check_bytes(ps, text, len)) != 0)
		return rc;
	if (len >= 3 && memcmp(text, "\xef\xbb\xbf", 3) == 0)
		pos = 3;	/* a UTF-8 byte order mark */
	while (pos < len) {
		lineno++;
		for (eol = pos; eol < len && text[eol] != '\n'; eol++)
			;
		n = eol - pos;
		if (n > 0 && text[pos + n - 1] == '\r')
			n--;
		if (n > CONF_LINE_MAX)
			return fail(ps, lineno, "line longer than %d bytes",
			    CONF_LINE_MAX);
		if ((rc = physical(ps, text + pos, n, lineno, &cont,
		    &start)) != 0)
			return rc;
		pos = eol + 1;
	}
	if (cont)
		return fail(ps, start, "the file ends inside a line continued "
		    "with '\\'");
	if ((rc = finish_section(ps)) != 0)
		return rc;
	return check_daemon(ps);
}

/*
 * conf_parse: parse the configuration text[0..len) (need not be
 * NUL-terminated; at most CONF_FILE_MAX bytes). On success stores a new
 * struct conf in *out (the caller frees it with conf_free) with defaults
 * for every absent key, model options ready for model_new and cusum_h
 * derived from cusum_arl where not given, and returns 0. On failure *out
 * is NULL, err holds the line (0 for the whole file) and a one-line
 * message, and the return is E_ARG, or E_NOMEM (then err says so).
 */
int
conf_parse(const char *text, size_t len, struct conf **out,
    struct conf_error *err)
{
	struct pstate ps;
	struct conf *c;
	int rc;

	*out = NULL;
	err->line = 0;
	err->msg[0] = '\0';
	if ((c = calloc(1, sizeof(*c))) == NULL) {
		snprintf(err->msg, sizeof(err->msg), "out of memory");
		return E_NOMEM;
	}
	conf_daemon_default(&c->d);
	memset(&ps, 0, sizeof(ps));
	ps.c = c;
	ps.err = err;
	rc = parse_text(&ps, text != NULL ? text : "", text != NULL ? len : 0);
	mwork_clear(&ps.mw);
	free(ps.buf);
	free(ps.pline);
	if (rc != 0) {
		if (rc == E_NOMEM)
			snprintf(err->msg, sizeof(err->msg), "out of memory");
		conf_free(c);
		return rc;
	}
	*out = c;
	return 0;
}

/* conf_free: release c with every model's arrays and term set; NULL is
 * a no-op. */
void
conf_free(struct conf *c)
{
	struct conf_model *m;
	int i;

	if (c == NULL)
		return;
	for (i = 0; i < c->nmodels; i++) {
		m = &c->models[i];
		free(m->fields);
		free(m->terms_text);
		terms_free(m->terms);
		free(m->centre);
		free(m->scale);
		free(m->prior);
		free(m->prior_sd);
		free(m->reference);
		free(m->tol_abs);
		free(m->tol_pct);
	}
	free(c->models);
	free(c->index);
	free(c);
}

/*
 * conf_pattern_match: 1 if the whole of name matches pattern, where '*'
 * matches any run of bytes (including none) and '?' exactly one byte;
 * other bytes match themselves. 0 otherwise. Greedy with backtracking to
 * the last '*': O(len(pattern) x len(name)) at worst, no recursion.
 */
int
conf_pattern_match(const char *pattern, const char *name)
{
	const char *p = pattern, *n = name, *star = NULL, *mark = NULL;

	while (*n != '\0') {
		if (*p == '*') {
			star = p++;
			mark = n;
		} else if (*p == '?' || (*p != '\0' && *p == *n)) {
			p++;
			n++;
		} else if (star != NULL) {
			p = star + 1;
			n = ++mark;
		} else
			return 0;
	}
	while (*p == '*')
		p++;
	return *p == '\0';
}

/*
 * conf_find_model: the settings for a model called name: the [model name]
 * section if there is one, else the first [template] (in file order) whose
 * pattern matches name, else NULL. The result belongs to c.
 */
const struct conf_model *
conf_find_model(const struct conf *c, const char *name)
{
	int i;

	if (c->index_cap > 0 && (i = c->index[index_slot(c, name)]) != 0)
		return &c->models[i - 1];
	for (i = 0; i < c->nmodels; i++)
		if (c->models[i].is_template &&
		    conf_pattern_match(c->models[i].name, name))
			return &c->models[i];
	return NULL;
}

/*
 * conf_keys: the keys accepted in a section, in the order of the example
 * configuration: "daemon", or "model" / "template" (the same keys). The
 * array is NULL-terminated and constant. NULL for any other section.
 */
const char *const *
conf_keys(const char *section)
{
	if (section == NULL)
		return NULL;
	if (strcmp(section, "daemon") == 0)
		return dkey_names;
	if (strcmp(section, "model") == 0 || strcmp(section, "template") == 0)
		return mkey_names;
	return NULL;
}
