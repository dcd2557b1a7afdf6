/* SPDX-License-Identifier: ISC */
/*
 * check_conf: the configuration parser. Every key's bounds (min, max, just
 * outside), every error path with its line, the line syntax (comments,
 * continuation, CRLF), templates, durations and sizes, the example
 * configuration, the defaults, and robustness on truncated and mutated
 * input.
 */
#include <check.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "dist.h"
#include "err.h"
#include "model.h"
#include "suites.h"
#include "terms.h"
#include "testutil.h"

#ifndef LOCALSTATEDIR
#define LOCALSTATEDIR	"/var"	/* as daemon/conf.c; make passes both */
#endif

/* ---- helpers ---- */

static struct conf *
parse_ok_len(const char *text, size_t len)
{
	struct conf_error e;
	struct conf *c = NULL;
	int rc;

	rc = conf_parse(text, len, &c, &e);
	ck_assert_msg(rc == 0, "unexpected error at line %d: %s\n--\n%s",
	    e.line, e.msg, text);
	ck_assert_ptr_nonnull(c);
	return c;
}

static struct conf *
parse_ok(const char *text)
{
	return parse_ok_len(text, strlen(text));
}

/* The text must fail at `line` with a message containing `what`; the
 * message must be one line and start in lower case. */
static void
parse_err(const char *text, size_t len, int line, const char *what)
{
	struct conf_error e;
	struct conf *c = (struct conf *)1;
	int rc;

	rc = conf_parse(text, len, &c, &e);
	ck_assert_msg(rc == E_ARG, "expected an error (%s), got %d\n--\n%s",
	    what, rc, text);
	ck_assert_ptr_null(c);
	ck_assert_msg(e.line == line, "line %d, expected %d: %s", e.line,
	    line, e.msg);
	ck_assert_msg(strstr(e.msg, what) != NULL, "message '%s' lacks '%s'",
	    e.msg, what);
	ck_assert_msg(strchr(e.msg, '\n') == NULL, "multi-line: %s", e.msg);
	ck_assert_msg(!(e.msg[0] >= 'A' && e.msg[0] <= 'Z'),
	    "not lower case: %s", e.msg);
}

static void
parse_err_s(const char *text, int line, const char *what)
{
	parse_err(text, strlen(text), line, what);
}

/* Read a whole file (tests only; the parser itself takes a buffer). */
static char *
slurp(const char *path, size_t *len)
{
	FILE *f;
	char *buf;
	long n;

	if ((f = fopen(path, "rb")) == NULL)
		return NULL;
	fseek(f, 0, SEEK_END);
	n = ftell(f);
	fseek(f, 0, SEEK_SET);
	buf = malloc((size_t)n + 1);
	if (buf != NULL && fread(buf, 1, (size_t)n, f) != (size_t)n) {
		free(buf);
		buf = NULL;
	}
	fclose(f);
	if (buf != NULL) {
		buf[n] = '\0';
		*len = (size_t)n;
	}
	return buf;
}

/* conf/coefd.conf, found from COEFD_TESTDATA (tests/data) or the cwd. */
static char *
example(size_t *len)
{
	const char *td = getenv("COEFD_TESTDATA");
	char path[4096];
	char *buf;

	if (td != NULL) {
		snprintf(path, sizeof(path), "%s/../../conf/coefd.conf", td);
		if ((buf = slurp(path, len)) != NULL)
			return buf;
	}
	buf = slurp("conf/coefd.conf", len);
	ck_assert_msg(buf != NULL, "cannot read conf/coefd.conf");
	return buf;
}

/* ---- the example configuration ---- */

START_TEST(test_conf_example_parses)
{
	const struct conf_model *m, *t;
	struct conf_error e;
	struct conf *c;
	struct model *mod;
	size_t len;
	char *text = example(&len);
	int rc;

	rc = conf_parse(text, len, &c, &e);
	ck_assert_msg(rc == 0, "conf/coefd.conf:%d: %s", e.line, e.msg);
	ck_assert_int_eq(c->nmodels, 2);

	m = conf_find_model(c, "boiler_flow");
	ck_assert_ptr_nonnull(m);
	ck_assert_int_eq(m->is_template, 0);
	ck_assert_int_eq(m->nfields, 2);
	ck_assert_str_eq(m->fields[0], "clamp");
	ck_assert_str_eq(m->fields[1], "temp");
	ck_assert_str_eq(m->target, "master");
	ck_assert_int_eq(m->mo.p, 4);
	ck_assert_str_eq(terms_text(m->terms, 0), "intercept");
	ck_assert_str_eq(terms_text(m->terms, 3), "clamp*temp");
	ck_assert_double_eq(m->mo.tau, 7 * 86400.0);
	ck_assert_int_eq(m->scale_mode, CONF_SCALE_NONE);
	ck_assert_ptr_eq(m->mo.theta0, m->prior);
	ck_assert_double_eq(m->prior[1], 1);
	ck_assert_double_eq(m->prior_sd[3], 0.001);
	ck_assert_double_eq(m->reference[2], -0.0004);
	/* tolerance = - 1% 0.002 - */
	ck_assert(isnan(m->tol_abs[0]) && isnan(m->tol_pct[0]));
	ck_assert(isnan(m->tol_abs[1]) && m->tol_pct[1] == 1);
	ck_assert(m->tol_abs[2] == 0.002 && isnan(m->tol_pct[2]));
	ck_assert(isnan(m->tol_abs[3]) && isnan(m->tol_pct[3]));
	ck_assert_double_eq(m->mo.alarm.r2_floor, 0.9);
	ck_assert_ptr_nonnull(mod = model_new(&m->mo));
	model_free(mod);

	t = conf_find_model(c, "co2_kitchen");
	ck_assert_ptr_nonnull(t);
	ck_assert_int_eq(t->is_template, 1);
	ck_assert_str_eq(t->name, "co2_*");
	ck_assert_int_eq(t->mo.p, 5);
	ck_assert_double_eq(t->mo.lambda, 0.995);
	ck_assert_double_eq(t->mo.alarm.gate_z, 4);
	ck_assert_ptr_null(t->tol_abs);
	ck_assert_double_eq(t->tol_pct[4], 5);
	ck_assert_ptr_nonnull(mod = model_new(&t->mo));
	model_free(mod);
	ck_assert_ptr_null(conf_find_model(c, "co3_kitchen"));
	conf_free(c);
	free(text);
}
END_TEST

/* The example documents every key (as `key =` or `#key =`). */
START_TEST(test_conf_example_documents_every_key)
{
	static const char *const sections[] = { "daemon", "model", NULL };
	const char *const *keys;
	char pat[64];
	size_t len;
	char *text = example(&len);
	int s, i;

	for (s = 0; sections[s] != NULL; s++) {
		keys = conf_keys(sections[s]);
		ck_assert_ptr_nonnull(keys);
		for (i = 0; keys[i] != NULL; i++) {
			snprintf(pat, sizeof(pat), "\n%s = ", keys[i]);
			if (strstr(text, pat) != NULL)
				continue;
			snprintf(pat, sizeof(pat), "\n#%s =", keys[i]);
			ck_assert_msg(strstr(text, pat) != NULL,
			    "conf/coefd.conf does not show key '%s'", keys[i]);
		}
	}
	free(text);
}
END_TEST

START_TEST(test_conf_keys_lists)
{
	const char *const *d = conf_keys("daemon"), *const *m;
	int i, n;

	m = conf_keys("model");
	ck_assert_ptr_eq(m, conf_keys("template"));
	ck_assert_ptr_null(conf_keys("models"));
	ck_assert_ptr_null(conf_keys(NULL));
	for (n = 0; d[n] != NULL; n++)
		;
	ck_assert_int_eq(n, 22);	/* the [daemon] table of the spec,
					 * plus admin_users */
	for (n = 0; m[n] != NULL; n++)
		;
	ck_assert_int_eq(n, 24);	/* the [model] table of the spec */
	ck_assert_str_eq(d[0], "socket");
	ck_assert_str_eq(m[0], "fields");
	for (i = 0; i < n; i++)
		ck_assert_msg(strspn(m[i], "abcdefghijklmnopqrstuvwxyz_0123456789")
		    == strlen(m[i]), "key %s", m[i]);
}
END_TEST

/* ---- defaults ---- */

START_TEST(test_conf_defaults_roundtrip)
{
	struct conf_daemon d;
	struct model_opts o;
	const struct conf_model *m;
	struct conf *c;
	double h;

	c = parse_ok("");
	conf_daemon_default(&d);
	ck_assert_int_eq(memcmp(&d, &c->d, sizeof(d)), 0);
	ck_assert_int_eq(c->nmodels, 0);
	ck_assert_ptr_null(conf_find_model(c, "x"));
	conf_free(c);

	/* the documented default values themselves */
	ck_assert_str_eq(d.socket, "/run/coefd/coefd.sock");
	ck_assert_uint_eq(d.socket_mode, 0660);
	ck_assert_int_eq(d.tcp.on, 0);
	ck_assert_int_eq(d.udp.on, 0);
	ck_assert_str_eq(d.state_dir, LOCALSTATEDIR "/lib/coefd");
	ck_assert_str_eq(d.token_file, "");
	ck_assert_double_eq(d.checkpoint_every, 300);
	ck_assert_int_eq(d.journal, CONF_JOURNAL_INTERVAL);
	ck_assert_double_eq(d.journal_every, 0.2);
	ck_assert_uint_eq(d.max_line, 65536);
	ck_assert_int_eq(d.max_connections, 1024);
	ck_assert_int_eq(d.max_connections_per_uid, 256);
	ck_assert_int_eq(d.max_models, 10000);
	ck_assert_int_eq(d.max_features, 64);
	ck_assert_uint_eq(d.output_buffer, 1048576);
	ck_assert_double_eq(d.stuck_timeout, 30);
	ck_assert_double_eq(d.idle_timeout, 3600);
	ck_assert_int_eq(d.log_level, CONF_LOG_INFO);
	ck_assert_int_eq(d.history, 256);
	ck_assert_uint_eq(d.history_every, 60);

	/* Writing every default explicitly gives the same struct. */
	c = parse_ok("[daemon]\nsocket = /run/coefd/coefd.sock\n"
	    "socket_mode = 0660\ntcp = off\nudp = off\nallow_remote = no\n"
	    "admin_from_tcp = no\nadmin_users =\ntoken_file =\n"
	    "state_dir = /var/lib/coefd\n"
	    "checkpoint_every = 5m\njournal = 200ms\nmax_line = 64k\n"
	    "max_connections = 1024\nmax_connections_per_uid = 256\n"
	    "max_models = 10000\nmax_features = 64\noutput_buffer = 1M\n"
	    "stuck_timeout = 30s\nidle_timeout = 1h\nlog_level = info\n"
	    "history = 256\nhistory_every = 60\n");
	ck_assert_int_eq(memcmp(&d, &c->d, sizeof(d)), 0);
	conf_free(c);

	/* A model with only fields: model_opts_default plus the derived h. */
	c = parse_ok("[model m]\nfields = x\n");
	m = conf_find_model(c, "m");
	ck_assert_ptr_nonnull(m);
	model_opts_default(&o, 2, 1);
	ck_assert_int_eq(m->mo.p, 2);
	ck_assert_int_eq(m->mo.intercept, 1);
	ck_assert_double_eq(m->mo.lambda, o.lambda);
	ck_assert_double_eq(m->mo.tau, o.tau);
	ck_assert_double_eq(m->mo.delta, o.delta);
	ck_assert_double_eq(m->mo.sigma_memory, o.sigma_memory);
	ck_assert_double_eq(m->mo.drift_alpha, o.drift_alpha);
	ck_assert_double_eq(m->mo.level, o.level);
	ck_assert_ptr_null(m->mo.theta0);
	ck_assert_ptr_null(m->mo.prior_sd);
	ck_assert_ptr_null(m->mo.reference);
	ck_assert_ptr_null(m->mo.tol_abs);
	ck_assert_ptr_null(m->mo.tol_pct);
	ck_assert_double_eq(m->mo.alarm.cusum_k, o.alarm.cusum_k);
	ck_assert_uint_eq(m->mo.alarm.dwell, o.alarm.dwell);
	ck_assert(isnan(m->mo.alarm.r2_floor));
	ck_assert_double_eq(m->mo.alarm.r2_hyst, o.alarm.r2_hyst);
	ck_assert_double_eq(m->mo.alarm.r2_min_neff, o.alarm.r2_min_neff);
	ck_assert_double_eq(m->mo.alarm.gate_z, o.alarm.gate_z);
	ck_assert_uint_eq(m->mo.alarm.gate_run, o.alarm.gate_run);
	ck_assert_double_eq(m->mo.alarm.drift_q, o.alarm.drift_q);
	ck_assert_double_eq(m->mo.alarm.drift_clear, o.alarm.drift_clear);
	ck_assert_uint_eq(m->mo.alarm.warmup, o.alarm.warmup);
	ck_assert_double_eq(m->cusum_arl, 10000);
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, 10000, &h), 0);
	ck_assert_double_eq(m->mo.alarm.cusum_h, h);
	/* alarm_opts_default's h for ARL 1e4 (rounded to 4 digits there) */
	ck_assert_double_eq_tol(m->mo.alarm.cusum_h, o.alarm.cusum_h, 1e-3);
	ck_assert_str_eq(m->target, "y");
	ck_assert_ptr_null(m->terms_text);
	ck_assert_int_eq(m->scale_mode, CONF_SCALE_AUTO);
	ck_assert_ptr_null(m->centre);
	ck_assert_int_eq(model_opts_check(&m->mo, NULL, 0), 0);
	conf_free(c);
}
END_TEST

/*
 * cusum_arl -> h against an outside value. Two-sided in-control ARL of the
 * tabular CUSUM with k = 0.5: h = 4 gives 168, h = 5 gives 465
 * (Montgomery, Introduction to Statistical Quality Control, the k = 1/2
 * ARL table; from memory). A Brook & Evans (1972) Markov chain in numpy
 * (1200 states, one-sided ARL halved for the two-sided chart) gives
 * 167.683 and 465.442; those are the targets used here.
 */
START_TEST(test_conf_cusum_arl_reference)
{
	struct conf *c;

	c = parse_ok("[model a]\nfields = x\ncusum_arl = 465.442\n"
	    "[model b]\nfields = x\ncusum_arl = 167.683\n"
	    "[model h]\nfields = x\ncusum_h = 3\n");
	ck_assert_double_eq_tol(conf_find_model(c, "a")->mo.alarm.cusum_h,
	    5, 2e-3);
	ck_assert_double_eq_tol(conf_find_model(c, "b")->mo.alarm.cusum_h,
	    4, 2e-3);
	ck_assert_double_eq(conf_find_model(c, "h")->mo.alarm.cusum_h, 3);
	ck_assert(isnan(conf_find_model(c, "h")->cusum_arl));
	conf_free(c);
}
END_TEST

/* ---- bounds, table-driven ---- */

/* want: 'd' double, 'i' int, 'u' uint32, 'U' uint64, 'x' = an error. */
struct bcase {
	const char	*line;
	size_t		 off;
	char		 type;
	double		 want;
};

#define DO(f)	offsetof(struct conf_daemon, f)
#define MO(f)	offsetof(struct conf_model, f)
#define BAD	0, 'x', 0

static const struct bcase dcases[] = {
	{ "socket_mode = 0600", DO(socket_mode), 'o', 0600 },
	{ "socket_mode = 0777", DO(socket_mode), 'o', 0777 },
	{ "socket_mode = 640", DO(socket_mode), 'o', 0640 },
	{ "socket_mode = 0577", BAD },
	{ "socket_mode = 1000", BAD },
	{ "socket_mode = 0680", BAD },
	{ "socket_mode = 0o660", BAD },
	{ "allow_remote = yes", DO(allow_remote), 'i', 1 },
	{ "allow_remote = true", DO(allow_remote), 'i', 1 },
	{ "allow_remote = on", DO(allow_remote), 'i', 1 },
	{ "allow_remote = false", DO(allow_remote), 'i', 0 },
	{ "allow_remote = maybe", BAD },
	{ "allow_remote = Yes", BAD },
	{ "admin_from_tcp = yes", DO(admin_from_tcp), 'i', 1 },
	{ "admin_from_tcp = 1", BAD },
	{ "checkpoint_every = 1s", DO(checkpoint_every), 'd', 1 },
	{ "checkpoint_every = 1d", DO(checkpoint_every), 'd', 86400 },
	{ "checkpoint_every = 1.5h", DO(checkpoint_every), 'd', 5400 },
	{ "checkpoint_every = 999ms", BAD },
	{ "checkpoint_every = 86401", BAD },
	{ "journal = 1ms", DO(journal_every), 'd', 0.001 },
	{ "journal = 10s", DO(journal_every), 'd', 10 },
	{ "journal = 0.9ms", BAD },
	{ "journal = 10001ms", BAD },
	{ "journal = every_record", BAD },
	{ "max_line = 256", DO(max_line), 'U', 256 },
	{ "max_line = 1M", DO(max_line), 'U', 1048576 },
	{ "max_line = 255", BAD },
	{ "max_line = 1025k", BAD },
	{ "max_connections = 1", DO(max_connections), 'i', 1 },
	{ "max_connections = 100000", DO(max_connections), 'i', 100000 },
	{ "max_connections = 0", BAD },
	{ "max_connections = 100001", BAD },
	{ "max_connections = 1.5", BAD },
	{ "max_connections_per_uid = 1", DO(max_connections_per_uid), 'i', 1 },
	{ "max_connections_per_uid = 100000", DO(max_connections_per_uid),
	    'i', 100000 },
	{ "max_connections_per_uid = 0", BAD },
	{ "max_connections_per_uid = 100001", BAD },
	{ "max_models = 1", DO(max_models), 'i', 1 },
	{ "max_models = 1e7", DO(max_models), 'i', 10000000 },
	{ "max_models = 0", BAD },
	{ "max_models = 10000001", BAD },
	{ "max_features = 1", DO(max_features), 'i', 1 },
	{ "max_features = 255", DO(max_features), 'i', 255 },
	{ "max_features = 0", BAD },
	{ "max_features = 256", BAD },
	{ "output_buffer = 4k", DO(output_buffer), 'U', 4096 },
	{ "output_buffer = 1G", DO(output_buffer), 'U', 1073741824 },
	{ "output_buffer = 4095", BAD },
	{ "output_buffer = 1025M", BAD },
	{ "stuck_timeout = 1s", DO(stuck_timeout), 'd', 1 },
	{ "stuck_timeout = 1h", DO(stuck_timeout), 'd', 3600 },
	{ "stuck_timeout = 0.5s", BAD },
	{ "stuck_timeout = 3601s", BAD },
	{ "idle_timeout = off", DO(idle_timeout), 'd', 0 },
	{ "idle_timeout = 1s", DO(idle_timeout), 'd', 1 },
	{ "idle_timeout = 1w", DO(idle_timeout), 'd', 604800 },
	{ "idle_timeout = 0s", BAD },
	{ "idle_timeout = 8d", BAD },
	{ "log_level = error", DO(log_level), 'i', CONF_LOG_ERROR },
	{ "log_level = warning", DO(log_level), 'i', CONF_LOG_WARNING },
	{ "log_level = notice", DO(log_level), 'i', CONF_LOG_NOTICE },
	{ "log_level = info", DO(log_level), 'i', CONF_LOG_INFO },
	{ "log_level = debug", DO(log_level), 'i', CONF_LOG_DEBUG },
	{ "log_level = warn", BAD },
	{ "log_level = Info", BAD },
	{ "history = 0", DO(history), 'i', 0 },
	{ "history = 100000", DO(history), 'i', 100000 },
	{ "history = -1", BAD },
	{ "history = 100001", BAD },
	{ "history_every = 1", DO(history_every), 'u', 1 },
	{ "history_every = 1000000000", DO(history_every), 'u', 1e9 },
	{ "history_every = 0", BAD },
	{ "history_every = 1000000001", BAD },
};

/* Keys with a derived default are given after the case line, so that the
 * cases do not each pay for deriving h from cusum_arl. */
static const struct bcase mcases[] = {
	{ "intercept = no", MO(mo.intercept), 'i', 0 },
	{ "intercept = 2", BAD },
	{ "memory = 1", MO(mo.lambda), 'd', 1 },
	{ "memory = 1e-9", MO(mo.lambda), 'd', 1e-9 },
	{ "memory = 0", BAD },
	{ "memory = 1.5", BAD },
	{ "memory = -0.5", BAD },
	{ "memory = 7d", MO(mo.tau), 'd', 604800 },
	{ "memory = 1ms", MO(mo.tau), 'd', 0.001 },
	{ "memory = 90s", MO(mo.tau), 'd', 90 },
	{ "memory = 0s", BAD },
	{ "memory = 7days", BAD },
	{ "regularise = 0", MO(mo.delta), 'd', 0 },
	{ "regularise = 1e6", MO(mo.delta), 'd', 1e6 },
	{ "regularise = -1e-9", BAD },
	{ "drift_alpha = 1e-9", MO(mo.drift_alpha), 'd', 1e-9 },
	{ "drift_alpha = 0.999", MO(mo.drift_alpha), 'd', 0.999 },
	{ "drift_alpha = 0", BAD },
	{ "drift_alpha = 1", BAD },
	{ "cusum_k = 0", MO(mo.alarm.cusum_k), 'd', 0 },
	{ "cusum_k = 2.5", MO(mo.alarm.cusum_k), 'd', 2.5 },
	{ "cusum_k = -0.1", BAD },
	{ "cusum_arl = 10", MO(cusum_arl), 'd', 10 },
	{ "cusum_arl = 1e10", MO(cusum_arl), 'd', 1e10 },
	{ "cusum_arl = 9.99", BAD },
	{ "cusum_arl = 1.1e10", BAD },
	{ "cusum_h = 0.001", MO(mo.alarm.cusum_h), 'd', 0.001 },
	{ "cusum_h = off", MO(mo.alarm.cusum_h), 'd', INFINITY },
	{ "cusum_h = 0", BAD },
	{ "cusum_h = -1", BAD },
	{ "cusum_h = inf", BAD },
	{ "r2_floor = 0.999", MO(mo.alarm.r2_floor), 'd', 0.999 },
	{ "r2_floor = -5", MO(mo.alarm.r2_floor), 'd', -5 },
	{ "r2_floor = off", MO(mo.alarm.r2_floor), 'd', NAN },
	{ "r2_floor = 1", BAD },
	{ "r2_floor = nan", BAD },
	{ "r2_hysteresis = 0", MO(mo.alarm.r2_hyst), 'd', 0 },
	{ "r2_hysteresis = 0.5", MO(mo.alarm.r2_hyst), 'd', 0.5 },
	{ "r2_hysteresis = -0.01", BAD },
	{ "r2_min_records = 0", MO(mo.alarm.r2_min_neff), 'd', 0 },
	{ "r2_min_records = 1e9", MO(mo.alarm.r2_min_neff), 'd', 1e9 },
	{ "r2_min_records = -1", BAD },
	{ "r2_min_records = 1.1e9", BAD },
	{ "gate = 0.1", MO(mo.alarm.gate_z), 'd', 0.1 },
	{ "gate = off", MO(mo.alarm.gate_z), 'd', INFINITY },
	{ "gate = 0", BAD },
	{ "gate_run = 1", MO(mo.alarm.gate_run), 'u', 1 },
	{ "gate_run = 1000000000", MO(mo.alarm.gate_run), 'u', 1e9 },
	{ "gate_run = 0", BAD },
	{ "gate_run = 2.5", BAD },
	{ "dwell = 1", MO(mo.alarm.dwell), 'u', 1 },
	{ "dwell = 1000000000", MO(mo.alarm.dwell), 'u', 1e9 },
	{ "dwell = 0", BAD },
	{ "dwell = 1000000001", BAD },
	{ "warmup = 0", MO(mo.alarm.warmup), 'u', 0 },
	{ "warmup = 1000000000", MO(mo.alarm.warmup), 'u', 1e9 },
	{ "warmup = -1", BAD },
	{ "warmup = 1000000001", BAD },
	{ "sigma_memory = 1", MO(mo.sigma_memory), 'd', 1 },
	{ "sigma_memory = 1e6", MO(mo.sigma_memory), 'd', 1e6 },
	{ "sigma_memory = 0.999", BAD },
	{ "level = 0.5", MO(mo.level), 'd', 0.5 },
	{ "level = 0.999999", MO(mo.level), 'd', 0.999999 },
	{ "level = 0", BAD },
	{ "level = 1", BAD },
	{ "target = t", 0, 's', 0 },
	{ "target = prev", BAD },
	{ "target = 1x", BAD },
	{ "target = a-b", BAD },
};

static void
check_case(const struct bcase *bc, const void *base)
{
	const char *p = (const char *)base + bc->off;
	double got;

	switch (bc->type) {
	case 'd':
		got = *(const double *)(const void *)p;
		break;
	case 'i':
		got = *(const int *)(const void *)p;
		break;
	case 'o':
		got = *(const unsigned *)(const void *)p;
		break;
	case 'u':
		got = *(const uint32_t *)(const void *)p;
		break;
	case 'U':
		got = (double)*(const uint64_t *)(const void *)p;
		break;
	default:
		return;
	}
	if (isnan(bc->want))
		ck_assert_msg(isnan(got), "%s: got %g", bc->line, got);
	else
		ck_assert_msg(got == bc->want, "%s: got %.17g", bc->line, got);
}

START_TEST(test_conf_daemon_bounds)
{
	char text[512], key[64];
	struct conf *c;
	size_t i;

	for (i = 0; i < sizeof(dcases) / sizeof(dcases[0]); i++) {
		snprintf(text, sizeof(text), "# bounds\n[daemon]\n%s\n",
		    dcases[i].line);
		if (dcases[i].type == 'x') {
			snprintf(key, sizeof(key), "%.*s: expected ",
			    (int)strcspn(dcases[i].line, " "), dcases[i].line);
			parse_err_s(text, 3, key);
			continue;
		}
		c = parse_ok(text);
		check_case(&dcases[i], &c->d);
		conf_free(c);
	}
}
END_TEST

START_TEST(test_conf_model_bounds)
{
	char text[512], key[64];
	const struct conf_model *m;
	struct conf *c;
	const char *tail;
	size_t i;

	for (i = 0; i < sizeof(mcases) / sizeof(mcases[0]); i++) {
		tail = strncmp(mcases[i].line, "cusum_h", 7) == 0 ||
		    strncmp(mcases[i].line, "cusum_arl", 9) == 0 ? "" :
		    "cusum_h = 5\n";
		snprintf(text, sizeof(text), "[model m]\nfields = a b\n%s\n%s",
		    mcases[i].line, tail);
		if (mcases[i].type == 'x') {
			snprintf(key, sizeof(key), "%.*s: expected ",
			    (int)strcspn(mcases[i].line, " "), mcases[i].line);
			parse_err_s(text, 3, key);
			continue;
		}
		c = parse_ok(text);
		m = conf_find_model(c, "m");
		check_case(&mcases[i], m);
		ck_assert_int_eq(model_opts_check(&m->mo, NULL, 0), 0);
		conf_free(c);
	}
}
END_TEST

/* The message format the daemon's users see, spelled out once. */
START_TEST(test_conf_message_format)
{
	struct conf_error e;
	struct conf *c;
	const char *t = "[model m]\nfields = x\nmemory = 1.5\n";

	ck_assert_int_eq(conf_parse(t, strlen(t), &c, &e), E_ARG);
	ck_assert_int_eq(e.line, 3);
	ck_assert_str_eq(e.msg, "memory: expected a forgetting factor in "
	    "(0, 1] or a duration such as 7d, got '1.5'");
	/* a long value is cut in the message */
	t = "[daemon]\nstate_dir = xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx"
	    "xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx\n";
	ck_assert_int_eq(conf_parse(t, strlen(t), &c, &e), E_ARG);
	ck_assert_ptr_nonnull(strstr(e.msg, "xxx...'"));
	ck_assert_uint_lt(strlen(e.msg), 150);
}
END_TEST

/* admin_users (issue 9, security checks): user names or uids, nothing that
 * could be read as a path or an option. */
START_TEST(test_conf_admin_users)
{
	static const char *const bad[] = {
		"admin_users = -root", "admin_users = ../x",
		"admin_users = /etc/passwd", "admin_users = a,,b",
		"admin_users = al:ice",
		"admin_users = caf\xc3\xa9",
		"admin_users = abcdefghijabcdefghijabcdefghijabc", /* 33 */
		NULL
	};
	struct conf *c;
	char text[1024], line[600];
	size_t i;
	int k;

	c = parse_ok("");
	ck_assert_int_eq(c->d.nadmin_users, 0);
	conf_free(c);
	c = parse_ok("[daemon]\nadmin_users = alice, 1000 bob.smith_2-x "
	    "abcdefghijabcdefghijabcdefghijab\n");
	ck_assert_int_eq(c->d.nadmin_users, 4);
	ck_assert_str_eq(c->d.admin_users[0], "alice");
	ck_assert_str_eq(c->d.admin_users[1], "1000");
	ck_assert_str_eq(c->d.admin_users[2], "bob.smith_2-x");
	ck_assert_uint_eq(strlen(c->d.admin_users[3]), CONF_USER_NAME_MAX);
	conf_free(c);
	for (i = 0; bad[i] != NULL; i++) {
		snprintf(text, sizeof(text), "[daemon]\n%s\n", bad[i]);
		parse_err_s(text, 2, "admin_users: expected");
	}
	/* A control character is refused before the key is looked at. */
	parse_err_s("[daemon]\nadmin_users = ali\x01" "ce\n", 2,
	    "control byte");
	/* CONF_ADMIN_USERS_MAX entries fit, one more does not. */
	strcpy(line, "admin_users =");
	for (k = 0; k < CONF_ADMIN_USERS_MAX; k++)
		snprintf(line + strlen(line), sizeof(line) - strlen(line),
		    " u%d", k);
	snprintf(text, sizeof(text), "[daemon]\n%s\n", line);
	c = parse_ok(text);
	ck_assert_int_eq(c->d.nadmin_users, CONF_ADMIN_USERS_MAX);
	conf_free(c);
	snprintf(text, sizeof(text), "[daemon]\n%s u99\n", line);
	parse_err_s(text, 2, "admin_users: expected");
}
END_TEST

START_TEST(test_conf_paths)
{
	char text[1400], path[1100];
	struct conf *c;

	c = parse_ok("[daemon]\nsocket = /tmp/a b/c.sock # comment\n"
	    "token_file = /etc/coefd/token#1\nstate_dir = /srv/coefd\n");
	ck_assert_str_eq(c->d.socket, "/tmp/a b/c.sock");
	ck_assert_str_eq(c->d.token_file, "/etc/coefd/token#1");
	ck_assert_str_eq(c->d.state_dir, "/srv/coefd");
	conf_free(c);

	/* socket: 107 bytes fit sun_path with its NUL, 108 do not */
	memset(path, 'a', sizeof(path));
	path[0] = '/';
	snprintf(text, sizeof(text), "[daemon]\nsocket = %.107s\n", path);
	c = parse_ok(text);
	ck_assert_uint_eq(strlen(c->d.socket), 107);
	conf_free(c);
	snprintf(text, sizeof(text), "[daemon]\nsocket = %.108s\n", path);
	parse_err_s(text, 2, "socket: expected an absolute path of at most "
	    "107 bytes");
	snprintf(text, sizeof(text), "[daemon]\nstate_dir = %.1023s\n", path);
	c = parse_ok(text);
	conf_free(c);
	snprintf(text, sizeof(text), "[daemon]\nstate_dir = %.1024s\n", path);
	parse_err_s(text, 2, "state_dir: expected an absolute path");
	parse_err_s("[daemon]\nsocket = run/coefd.sock\n", 2, "socket: "
	    "expected");
	parse_err_s("[daemon]\ntoken_file = token\n", 2, "token_file: "
	    "expected");
	parse_err_s("[daemon]\nstate_dir =\n", 2, "state_dir: missing value");
}
END_TEST

START_TEST(test_conf_listen)
{
	struct conf *c;

	c = parse_ok("[daemon]\ntcp = 127.0.0.1:7878\nudp = [::1]:7879\n");
	ck_assert_int_eq(c->d.tcp.on, 1);
	ck_assert_int_eq(c->d.tcp.family, 4);
	ck_assert_int_eq(c->d.tcp.loopback, 1);
	ck_assert_str_eq(c->d.tcp.host, "127.0.0.1");
	ck_assert_uint_eq(c->d.tcp.port, 7878);
	ck_assert_int_eq(c->d.udp.family, 6);
	ck_assert_int_eq(c->d.udp.loopback, 1);
	ck_assert_str_eq(c->d.udp.host, "::1");
	ck_assert_uint_eq(c->d.udp.port, 7879);
	conf_free(c);

	c = parse_ok("[daemon]\ntcp = localhost:1\nudp = 127.9.9.9:65535\n");
	ck_assert_int_eq(c->d.tcp.family, 0);
	ck_assert_int_eq(c->d.tcp.loopback, 1);
	ck_assert_uint_eq(c->d.udp.port, 65535);
	conf_free(c);

	c = parse_ok("[daemon]\ntcp = 0.0.0.0:7878\nudp = [::]:7878\n"
	    "allow_remote = yes\n");
	ck_assert_int_eq(c->d.tcp.loopback, 0);
	ck_assert_int_eq(c->d.udp.loopback, 0);
	conf_free(c);

	parse_err_s("[daemon]\ntcp = 0.0.0.0:7878\n", 2, "tcp: '0.0.0.0' is "
	    "not a loopback address; set allow_remote = yes");
	parse_err_s("[daemon]\nallow_remote = no\n\nudp = [fe80::1]:9\n", 4,
	    "udp: 'fe80::1' is not a loopback");
	parse_err_s("[daemon]\ntcp = ::1:7878\n", 2, "tcp: expected off or "
	    "host:port");
	parse_err_s("[daemon]\ntcp = 127.0.0.1\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = 127.0.0.1:0\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = 127.0.0.1:65536\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = :7878\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = [::1]7878\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = [::1]:\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = example.org:80\n", 2, "tcp: expected");
	parse_err_s("[daemon]\ntcp = 1.2.3:80\n", 2, "tcp: expected");
	parse_err_s("[daemon]\nudp = [127.0.0.1]:80\n", 2, "udp: expected");
	parse_err_s("[daemon]\nudp = on\n", 2, "udp: expected");
}
END_TEST

START_TEST(test_conf_durations_sizes)
{
	static const struct {
		const char	*s;
		double		 want;	/* < 0: an error */
	} dur[] = {
		{ "250ms", 0.25 }, { "90s", 90 }, { "15m", 900 },
		{ "6h", 21600 }, { "7d", 604800 }, { "2w", 1209600 },
		{ "10", 10 }, { "1.5h", 5400 }, { "1e3ms", 1 }, { "0", 0 },
		{ "+5s", 5 }, { "", -1 }, { "ms", -1 }, { "5 m", -1 },
		{ "-1s", -1 }, { "5x", -1 }, { "5S", -1 }, { "5M", -1 },
		{ "nan", -1 }, { "infs", -1 }, { "1e400s", -1 }, { "5e", -1 },
		{ "s5", -1 },
	};
	static const struct {
		const char	*s;
		double		 want;	/* < 0: an error */
	} sz[] = {
		{ "512", 512 }, { "64k", 65536 }, { "64K", 65536 },
		{ "16M", 16777216 }, { "1G", 1073741824 }, { "1.5k", 1536 },
		{ "0", 0 }, { "8388608G", 9007199254740992.0 },
		{ "", -1 }, { "k", -1 }, { "0.3k", -1 }, { "-1", -1 },
		{ "1T", -1 }, { "1m", -1 }, { "1 k", -1 }, { "1.5", -1 },
		{ "8388609G", -1 },
	};
	uint64_t b;
	double s;
	size_t i;
	int rc;

	for (i = 0; i < sizeof(dur) / sizeof(dur[0]); i++) {
		s = -7;
		rc = conf_parse_duration(dur[i].s, strlen(dur[i].s), &s);
		if (dur[i].want < 0) {
			ck_assert_msg(rc != 0, "'%s' accepted", dur[i].s);
			ck_assert_double_eq(s, -7);
		} else {
			ck_assert_msg(rc == 0, "'%s' refused", dur[i].s);
			ck_assert_msg(s == dur[i].want, "'%s' = %.17g",
			    dur[i].s, s);
		}
	}
	for (i = 0; i < sizeof(sz) / sizeof(sz[0]); i++) {
		b = 7;
		rc = conf_parse_size(sz[i].s, strlen(sz[i].s), &b);
		if (sz[i].want < 0) {
			ck_assert_msg(rc != 0, "'%s' accepted", sz[i].s);
			ck_assert_uint_eq(b, 7);
		} else {
			ck_assert_msg(rc == 0, "'%s' refused", sz[i].s);
			ck_assert_msg((double)b == sz[i].want, "'%s'", sz[i].s);
		}
	}
	/* a duration is read without a NUL: only len bytes count */
	ck_assert_int_eq(conf_parse_duration("15mx", 3, &s), 0);
	ck_assert_double_eq(s, 900);
}
END_TEST

/* ---- model sections ---- */

START_TEST(test_conf_fields)
{
	struct conf *c;
	const struct conf_model *m;
	char text[4096], *p;
	size_t pos;
	int i;

	c = parse_ok("[model m]\nfields =  raw,temp  rh ,\t_x9\n");
	m = conf_find_model(c, "m");
	ck_assert_int_eq(m->nfields, 4);
	ck_assert_str_eq(m->fields[0], "raw");
	ck_assert_str_eq(m->fields[1], "temp");
	ck_assert_str_eq(m->fields[2], "rh");
	ck_assert_str_eq(m->fields[3], "_x9");
	ck_assert_int_eq(m->mo.p, 5);
	conf_free(c);

	parse_err_s("[model m]\nfields = a,,b\n", 2, "fields: empty item");
	parse_err_s("[model m]\nfields = a,\n", 2, "fields: empty item");
	parse_err_s("[model m]\nfields = ,a\n", 2, "fields: empty item");
	parse_err_s("[model m]\nfields = a 9b\n", 2, "fields: bad field name "
	    "'9b'");
	parse_err_s("[model m]\nfields = a prev\n", 2, "fields: 'prev' is "
	    "reserved");
	parse_err_s("[model m]\nfields = a b a\n", 2, "fields: 'a' is listed "
	    "twice");
	parse_err_s("[model m]\nfields = "
	    "abcdefghijabcdefghijabcdefghijabc\n", 2, "fields: bad field");
	parse_err_s("[model m]\nfields = a y\n", 2, "fields: 'y' is the "
	    "target");
	parse_err_s("[model m]\nfields = a b\ntarget = b\n", 3, "target: 'b' "
	    "is also listed in fields");
	parse_err_s("[model m]\n\nintercept = no\n", 1, "[model m] has no "
	    "'fields' key");
	parse_err_s("[model m]\nfields = a\n[template t*]\ngate = 3\n", 3,
	    "[template t*] has no 'fields' key");

	/* 255 fields are accepted, 256 are not (a record carries at most
	 * 256 values with its target) */
	pos = (size_t)snprintf(text, sizeof(text), "[daemon]\nmax_features "
	    "= 255\n[model m]\nintercept = no\nfields =");
	for (i = 0; i < 256; i++)
		pos += (size_t)snprintf(text + pos, sizeof(text) - pos,
		    " f%d", i);
	snprintf(text + pos, sizeof(text) - pos, "\n");
	parse_err_s(text, 5, "fields: 256 fields, at most 255");
	p = strrchr(text, ' ');
	p[0] = '\n';
	p[1] = '\0';
	c = parse_ok(text);
	ck_assert_int_eq(c->models[0].nfields, 255);
	ck_assert_int_eq(c->models[0].mo.p, 255);
	conf_free(c);
}
END_TEST

START_TEST(test_conf_terms)
{
	struct conf *c;
	const struct conf_model *m;
	struct terms *t;
	char eb[100];

	c = parse_ok("[model m]\nfields = raw temp\ntarget = out\n"
	    "terms = raw, raw^2, temp*raw, prev(out)\nintercept = no\n");
	m = conf_find_model(c, "m");
	ck_assert_int_eq(m->mo.p, 4);
	ck_assert_int_eq(m->mo.intercept, 0);
	ck_assert_str_eq(terms_text(m->terms, 2), "raw*temp");
	ck_assert_str_eq(terms_text(m->terms, 3), "prev(out)");
	ck_assert_int_eq(terms_nfields(m->terms), 3);
	ck_assert_int_eq(conf_model_terms(m, &t, eb, sizeof(eb)), 0);
	ck_assert_int_eq(terms_p(t), 4);
	ck_assert_int_eq(terms_scaling_is_set(t), 0);
	terms_free(t);
	conf_free(c);

	parse_err_s("[model m]\nfields = raw temp\nterms = raw, foo\n", 3,
	    "terms: column 6: unknown field 'foo'");
	parse_err_s("[model m]\nfields = raw\nterms = raw, y\n", 3,
	    "terms: column 6: target field 'y' may appear only inside "
	    "prev()");
	parse_err_s("[model m]\nfields = raw\nterms = raw, raw\n", 3,
	    "terms: column 6: duplicate term 'raw'");

	/* max_features counts terms without the intercept, also when the
	 * [daemon] section comes after the model */
	c = parse_ok("[model m]\nfields = a b c\n[daemon]\nmax_features = 3\n");
	conf_free(c);
	parse_err_s("[model m]\nfields = a b c\n[daemon]\nmax_features = 2\n",
	    2, "fields: 3 terms, more than max_features = 2");
	parse_err_s("[daemon]\nmax_features = 2\n[model m]\nfields = a\n"
	    "terms = a, a^2, a^3\n", 5, "terms: 3 terms, more than "
	    "max_features = 2");
}
END_TEST

START_TEST(test_conf_scale)
{
	struct conf *c;
	const struct conf_model *m;
	struct terms *t;
	double cen[3], sc[3];

	c = parse_ok("[model m]\nfields = raw temp\n"
	    "terms = raw, raw^2, temp\nscale = raw:1500:512, temp:20:8\n");
	m = conf_find_model(c, "m");
	ck_assert_int_eq(m->scale_mode, CONF_SCALE_EXPLICIT);
	ck_assert_double_eq(m->centre[0], 1500);
	ck_assert_double_eq(m->scale[0], 512);
	ck_assert_double_eq(m->centre[2], 0);	/* the target, unlisted */
	ck_assert_double_eq(m->scale[2], 1);
	ck_assert_int_eq(conf_model_terms(m, &t, NULL, 0), 0);
	ck_assert_int_eq(terms_scaling_is_set(t), 1);
	terms_get_scaling(t, cen, sc);
	ck_assert_double_eq(cen[1], 20);
	ck_assert_double_eq(sc[1], 8);
	terms_free(t);
	conf_free(c);

	c = parse_ok("[model m]\nfields = raw\nscale = none\n");
	ck_assert_int_eq(c->models[0].scale_mode, CONF_SCALE_NONE);
	conf_free(c);
	c = parse_ok("[model m]\nfields = raw\nscale = auto\n");
	ck_assert_int_eq(c->models[0].scale_mode, CONF_SCALE_AUTO);
	conf_free(c);

	parse_err_s("[model m]\nfields = raw\nscale = raw:0:0\n", 3,
	    "scale: expected auto, none, or field:centre:scale items with "
	    "scale > 0, got 'raw:0:0'");
	parse_err_s("[model m]\nfields = raw\nscale = raw:0\n", 3,
	    "scale: expected");
	parse_err_s("[model m]\nfields = raw\nscale = raw:0:1:2\n", 3,
	    "scale: expected");
	parse_err_s("[model m]\nfields = raw\nscale = raw:x:1\n", 3,
	    "scale: expected");
	parse_err_s("[model m]\nfields = raw\nscale = foo:0:1\n", 3,
	    "scale: 'foo' is neither a field nor the target");
	parse_err_s("[model m]\nfields = raw\nscale = raw:0:1 raw:0:2\n", 3,
	    "scale: 'raw' is given twice");
	/* raw^2 alone is not closed under lowering the power (TERMS.md) */
	parse_err_s("[model m]\nfields = raw\nscale = raw:5:1\n"
	    "terms = raw^2\n", 3, "scale: 'raw' cannot be centred");
	/* a centre of 0 is scaling only, always allowed */
	c = parse_ok("[model m]\nfields = raw\nscale = raw:0:4\n"
	    "terms = raw^2\n");
	conf_free(c);
}
END_TEST

START_TEST(test_conf_prior_reference_tolerance)
{
	struct conf *c;
	const struct conf_model *m;
	struct model *mod;

	c = parse_ok("[model m]\nfields = a b\nscale = none\n"
	    "prior = 1, 2, 3\nprior_sd = 0.5\nreference = -1 0 1e-3\n"
	    "tolerance = 0.1\n");
	m = conf_find_model(c, "m");
	ck_assert_double_eq(m->prior_sd[0], 0.5);
	ck_assert_double_eq(m->prior_sd[2], 0.5);
	ck_assert_double_eq(m->prior[2], 3);
	ck_assert_double_eq(m->reference[2], 1e-3);
	ck_assert_double_eq(m->tol_abs[1], 0.1);
	ck_assert_ptr_null(m->tol_pct);
	ck_assert_ptr_eq(m->mo.prior_sd, m->prior_sd);
	ck_assert_ptr_eq(m->mo.reference, m->reference);
	ck_assert_ptr_eq(m->mo.tol_abs, m->tol_abs);
	ck_assert_ptr_nonnull(mod = model_new(&m->mo));
	model_free(mod);
	conf_free(c);

	/* counts: p = terms + intercept = 3 */
	parse_err_s("[model m]\nfields = a b\nscale = none\nprior = 1 2\n"
	    "prior_sd = 1\n", 4, "prior: 2 values for 3 coefficients "
	    "(intercept, a, b)");
	parse_err_s("[model m]\nfields = a b\nscale = none\nprior = 1 2 3\n"
	    "prior_sd = 1 1\n", 5, "prior_sd: 2 values for 3 coefficients "
	    "(intercept, a, b); or give one value for all");
	parse_err_s("[model m]\nfields = a b\nintercept = no\nscale = none\n"
	    "reference = 1 2 3\n", 5, "reference: 3 values for 2 "
	    "coefficients (a, b)");
	parse_err_s("[model m]\nfields = a b\ntolerance = 1% 2%\n", 3,
	    "tolerance: 2 values for 3 coefficients");
	parse_err_s("[model m]\nfields = a b\nprior = 1 2 3\n"
	    "prior_sd = 1\n", 3, "prior: needs scale = none");
	parse_err_s("[model m]\nfields = a b\nscale = a:0:1\n"
	    "reference = 1 2 3\n", 4, "reference: needs scale = none");
	parse_err_s("[model m]\nfields = a b\nscale = none\n"
	    "prior = 1 2 3\n", 4, "prior: needs prior_sd");
	parse_err_s("[model m]\nfields = a b\nscale = none\n"
	    "prior_sd = 1\n", 4, "prior_sd: needs prior");
	parse_err_s("[model m]\nfields = a\nscale = none\nprior = 1 x\n"
	    "prior_sd = 1\n", 4, "prior: expected numbers, one per "
	    "coefficient, got 'x'");
	parse_err_s("[model m]\nfields = a\nscale = none\nprior = 1 1e101\n"
	    "prior_sd = 1\n", 4, "prior: expected");
	parse_err_s("[model m]\nfields = a\nscale = none\nprior = 1 2\n"
	    "prior_sd = 1 0\n", 5, "prior_sd: expected numbers > 0");
	parse_err_s("[model m]\nfields = a\ntolerance = 1 0%\n", 3,
	    "tolerance: expected numbers > 0 or percentages");
	parse_err_s("[model m]\nfields = a\ntolerance = 1 %\n", 3,
	    "tolerance: expected");
	parse_err_s("[model m]\nfields = a\ntolerance = 1,\n", 3,
	    "tolerance: expected");
	c = parse_ok("[model m]\nfields = a\ntolerance = - -\n");
	ck_assert_ptr_null(c->models[0].tol_abs);
	ck_assert_ptr_null(c->models[0].tol_pct);
	conf_free(c);
}
END_TEST

START_TEST(test_conf_cusum_rules)
{
	/* both given: reported at the later of the two lines */
	parse_err_s("[model m]\nfields = a\ncusum_h = 4\ncusum_arl = 500\n", 4,
	    "cusum_h and cusum_arl exclude each other");
	parse_err_s("[model m]\nfields = a\ncusum_arl = 500\ncusum_h = 4\n", 4,
	    "cusum_h and cusum_arl exclude each other");
	/* with k = 3 the two-sided ARL is at least 1/(2 Phi(-3)) = 370.4
	 * even as h -> 0 (normal tail, textbook), so 100 is unreachable */
	parse_err_s("[model m]\nfields = a\ncusum_k = 3\ncusum_arl = 100\n", 4,
	    "cusum_arl: no decision interval gives an in-control run length "
	    "of 100 with cusum_k = 3 (it must exceed 370.4)");
	/* with k = 0 the in-control ARL grows only like h^2: Siegmund's
	 * approximation at zero drift gives (h + 1.166)^2 one-sided, about
	 * 850 two-sided at h = 40 (textbook closed form), so 1e4 is out of
	 * reach */
	parse_err_s("[model m]\nfields = a\ncusum_k = 0\ncusum_arl = 1e4\n", 4,
	    "cusum_arl: an in-control run length of 10000 with cusum_k = 0 "
	    "needs a decision interval above 40; lower cusum_arl, raise "
	    "cusum_k or give cusum_h");
	/* 1/(2 Phi(-5)) = 1.74e6 > the default 10000: reported at cusum_k */
	parse_err_s("[model m]\nfields = a\ncusum_k = 5\n", 3,
	    "cusum_arl: no decision interval");
}
END_TEST

/* ---- line syntax ---- */

START_TEST(test_conf_comments)
{
	struct conf *c;

	c = parse_ok("# top\n; also a comment\n   # indented\n\n"
	    "[daemon] # trailing\n"
	    "token_file = /etc/coefd/a#b   # the # in the path stays\n"
	    "state_dir = /srv/x;y ; not a comment marker here\n"
	    "log_level = debug\t# tab before the comment\n"
	    "\t;comment = after a tab\n");
	ck_assert_str_eq(c->d.token_file, "/etc/coefd/a#b");
	ck_assert_str_eq(c->d.state_dir, "/srv/x;y ; not a comment marker "
	    "here");
	ck_assert_int_eq(c->d.log_level, CONF_LOG_DEBUG);
	conf_free(c);
	/* a value that is only a comment is empty */
	parse_err_s("[daemon]\nlog_level = # none\n", 2, "log_level: missing "
	    "value; expected error, warning");
}
END_TEST

START_TEST(test_conf_continuation)
{
	struct conf *c;
	const struct conf_model *m;

	c = parse_ok("[model m]\n"
	    "fields = a, \\\n"
	    "   b \\\n"
	    "\n"
	    "terms = a, b, \\   # first two\n"
	    "        a*b     \\\n"
	    "        # a comment line inside a continued line\n"
	    "memory = 0.5\n");
	m = conf_find_model(c, "m");
	ck_assert_int_eq(m->nfields, 2);
	ck_assert_int_eq(m->mo.p, 4);
	ck_assert_str_eq(m->terms_text, "a, b,          a*b");
	ck_assert_double_eq(m->mo.lambda, 0.5);
	conf_free(c);
	/* the backslash becomes a blank: no joining of words */
	parse_err_s("[model m]\nfields = ab\\\ncd\nterms = abcd\n", 4,
	    "terms: column 1: unknown field 'abcd'");
	/* errors name the first line of a continued line, and lines after
	 * it keep their numbers */
	parse_err_s("[model m]\nfields = a \\\n b \\\n c\nmemory = 2\n", 5,
	    "memory: expected");
	parse_err_s("[model m]\nfields = a \\\n b \\\n 9c\n", 2,
	    "fields: bad field name '9c'");
	parse_err_s("[model m]\nfields = a \\\n", 2, "the file ends inside a "
	    "line continued");
	parse_err_s("[model m]\nfields = a \\", 2, "the file ends inside");
	/* a comment line does not continue */
	c = parse_ok("# note \\\n[model m]\nfields = a\n");
	conf_free(c);
}
END_TEST

START_TEST(test_conf_crlf_bom)
{
	const char *lf = "[daemon]\nlog_level = debug\n[model m]\n"
	    "fields = a b \\\n c\nterms = a, b*c\n";
	const char *crlf = "\xef\xbb\xbf[daemon]\r\nlog_level = debug\r\n"
	    "[model m]\r\nfields = a b \\\r\n c\r\nterms = a, b*c\r\n";
	struct conf *c1, *c2;

	c1 = parse_ok(lf);
	c2 = parse_ok(crlf);
	ck_assert_int_eq(memcmp(&c1->d, &c2->d, sizeof(c1->d)), 0);
	ck_assert_int_eq(c2->models[0].nfields, 3);
	ck_assert_int_eq(c2->models[0].mo.p, c1->models[0].mo.p);
	ck_assert_str_eq(c1->models[0].terms_text,
	    c2->models[0].terms_text);
	conf_free(c1);
	conf_free(c2);
	/* CRLF line numbers */
	parse_err_s("[daemon]\r\n\r\nlog_level = loud\r\n", 3, "log_level: "
	    "expected");
	/* a lone CR inside a line is a control byte */
	parse_err_s("[daemon]\nlog_level = info\rx\n", 2, "unexpected control "
	    "byte 0x0d");
}
END_TEST

START_TEST(test_conf_bytes)
{
	char big[CONF_LINE_MAX + 40];
	char *huge;
	size_t n;
	static const char nul[] = "[daemon]\nlog_level = in\0fo\n";

	parse_err(nul, sizeof(nul) - 1, 2, "nul byte");
	parse_err_s("# caf\xc3\xa9 ok\n# bad \xc3\x28\n", 2, "invalid utf-8 "
	    "(byte 0xc3)");
	parse_err_s("# overlong \xc0\xaf\n", 1, "invalid utf-8");
	parse_err_s("\n# surrogate \xed\xa0\x80\n", 2, "invalid utf-8");
	parse_err_s("\n\n# truncated \xe2\x82", 3, "invalid utf-8");
	parse_err_s("[daemon]\nlog_level = \x01info\n", 2, "unexpected control "
	    "byte 0x01");
	parse_err_s("[daemon]\nlog_level = in\x7f\n", 2, "unexpected control "
	    "byte 0x7f");

	/* CONF_LINE_MAX bytes on a line are fine, one more is not */
	memset(big, '#', sizeof(big));
	memcpy(big, "[daemon]\n", 9);
	big[9 + CONF_LINE_MAX] = '\n';
	big[9 + CONF_LINE_MAX + 1] = '\0';
	conf_free(parse_ok(big));
	big[9 + CONF_LINE_MAX] = '#';
	big[9 + CONF_LINE_MAX + 1] = '\n';
	big[9 + CONF_LINE_MAX + 2] = '\0';
	parse_err_s(big, 2, "line longer than 8192 bytes");

	/* CONF_FILE_MAX bytes are fine, one more is not (line 0) */
	n = CONF_FILE_MAX + 1;
	huge = malloc(n);
	ck_assert_ptr_nonnull(huge);
	memset(huge, '\n', n);
	conf_free(parse_ok_len(huge, n - 1));
	parse_err(huge, n, 0, "the file is larger than 1048576 bytes");
	free(huge);
}
END_TEST

START_TEST(test_conf_structure_errors)
{
	parse_err_s("log_level = info\n", 1, "key 'log_level' outside a "
	    "section");
	parse_err_s("[daemon]\nlog_level\n", 2, "expected 'key = value', "
	    "'[section]' or a comment");
	parse_err_s("[daemon]\n= info\n", 2, "missing key before '='");
	parse_err_s("[daemon\n", 1, "a section header ends with ']'");
	parse_err_s("[daemon] x\n", 1, "a section header ends with ']'");
	parse_err_s("[daemon x]\n", 1, "[daemon] takes no name");
	parse_err_s("[daemon]\n[ daemon ]\n", 2, "duplicate [daemon] section "
	    "(first at line 1)");
	parse_err_s("[deamon]\n", 1, "unknown section 'deamon' (did you mean "
	    "'daemon'?)");
	parse_err_s("[models m]\n", 1, "unknown section 'models' (did you "
	    "mean 'model'?)");
	parse_err_s("[global]\n", 1, "unknown section 'global' (sections "
	    "are [daemon]");
	parse_err_s("[model]\n", 1, "[model] needs a name: [model NAME]");
	parse_err_s("[template]\n", 1, "[template] needs a pattern");
	parse_err_s("[model a b]\n", 1, "bad model name 'a b'");
	parse_err_s("[model -a]\n", 1, "bad model name '-a'");
	parse_err_s("[model a/b]\n", 1, "bad model name");
	parse_err_s("[template *a/]\n", 1, "bad template pattern '*a/'");
	parse_err_s("[model m]\nfields = a\n[model n]\nfields = a\n"
	    "[model m]\nfields = b\n", 5, "duplicate [model m] (first at "
	    "line 1)");
	parse_err_s("[template m*]\nfields = a\n[template m*]\nfields = a\n",
	    3, "duplicate [template m*] (first at line 1)");
	parse_err_s("[daemon]\nlog_level = info\nlog_level = debug\n", 3,
	    "duplicate key 'log_level' (first at line 2)");
	parse_err_s("[model m]\nfields = a\nfields = b\n", 3, "duplicate key "
	    "'fields' (first at line 2)");
	parse_err_s("[daemon]\nlog_levle = info\n", 2, "unknown key "
	    "'log_levle' in [daemon] (did you mean 'log_level'?)");
	parse_err_s("[model m]\nfields = a\nmemroy = 0.9\n", 3, "unknown key "
	    "'memroy' in a [model] section (did you mean 'memory'?)");
	parse_err_s("[template m*]\nfields = a\nregularize = 0\n", 3,
	    "unknown key 'regularize' in a [template] section (did you mean "
	    "'regularise'?)");
	parse_err_s("[daemon]\ncolour = blue\n", 2, "unknown key 'colour' in "
	    "[daemon]");
	parse_err_s("[daemon]\nmemory = 0.9\n", 2, "key 'memory' belongs in "
	    "a [model] or [template] section, not in [daemon]");
	parse_err_s("[model m]\nlog_level = info\n", 2, "key 'log_level' "
	    "belongs in [daemon], not in a [model] section");
	parse_err_s("[daemon]\nlog_level =\n", 2, "log_level: missing value");
	/* the model-count limit, counted over [model] sections only */
	parse_err_s("[daemon]\nmax_models = 1\n[template t*]\nfields = a\n"
	    "[model a]\nfields = a\n[model b]\nfields = a\n", 7,
	    "more than max_models = 1 [model] sections");
}
END_TEST

/* ---- templates ---- */

START_TEST(test_conf_pattern_match)
{
	static const struct {
		const char	*pat, *name;
		int		 want;
	} cases[] = {
		{ "co2_*", "co2_kitchen", 1 }, { "co2_*", "co2_", 1 },
		{ "co2_*", "co2", 0 }, { "co2_*", "xco2_a", 0 },
		{ "*", "", 1 }, { "*", "anything", 1 }, { "", "", 1 },
		{ "", "a", 0 }, { "a?c", "abc", 1 }, { "a?c", "ac", 0 },
		{ "a?c", "abbc", 0 }, { "*a*b*c*", "xxaxxbxxcxx", 1 },
		{ "*a*b*c", "abcabx", 0 }, { "a*a*a*a*b", "aaaaaaaaaaaaaaaa", 0 },
		{ "*.north", "pump-3.north", 1 }, { "*.north", "north", 0 },
		{ "??", "ab", 1 }, { "??", "a", 0 }, { "a**b", "ab", 1 },
		{ "line?_*", "line4_flow", 1 }, { "line?_*", "line44_flow", 0 },
	};
	size_t i;

	for (i = 0; i < sizeof(cases) / sizeof(cases[0]); i++)
		ck_assert_msg(conf_pattern_match(cases[i].pat, cases[i].name)
		    == cases[i].want, "'%s' vs '%s'", cases[i].pat,
		    cases[i].name);
}
END_TEST

START_TEST(test_conf_template_precedence)
{
	struct conf *c;
	const struct conf_model *m;

	c = parse_ok("[template pump*]\nfields = a\ngate = 2\n"
	    "[template pump_?]\nfields = a\ngate = 3\n"
	    "[model pump_7]\nfields = a\ngate = 4\n"
	    "[template *]\nfields = z\ngate = 6\n");
	/* an explicit model beats an earlier matching template */
	m = conf_find_model(c, "pump_7");
	ck_assert_int_eq(m->is_template, 0);
	ck_assert_double_eq(m->mo.alarm.gate_z, 4);
	/* the first template in file order wins */
	ck_assert_double_eq(conf_find_model(c, "pump_8")->mo.alarm.gate_z, 2);
	ck_assert_double_eq(conf_find_model(c, "valve")->mo.alarm.gate_z, 6);
	ck_assert_str_eq(conf_find_model(c, "valve")->fields[0], "z");
	conf_free(c);
}
END_TEST

/* Many models: the name index (duplicates and lookups) at scale. */
START_TEST(test_conf_many_models)
{
	enum { N = 3000 };
	char *text, name[32];
	size_t cap = (size_t)N * 64, pos = 0;
	struct conf *c;
	int i;

	text = malloc(cap);
	ck_assert_ptr_nonnull(text);
	for (i = 0; i < N; i++)
		pos += (size_t)snprintf(text + pos, cap - pos,
		    "[model m%d]\nfields = a b\ncusum_h = 5\n", i);
	c = parse_ok(text);
	ck_assert_int_eq(c->nmodels, N);
	for (i = 0; i < N; i++) {
		snprintf(name, sizeof(name), "m%d", i);
		ck_assert_ptr_eq(conf_find_model(c, name), &c->models[i]);
	}
	ck_assert_ptr_null(conf_find_model(c, "m3000"));
	conf_free(c);
	/* a duplicate far down the file */
	pos += (size_t)snprintf(text + pos, cap - pos,
	    "[model m1234]\nfields = a\n");
	parse_err(text, pos, 3 * N + 1, "duplicate [model m1234] (first at "
	    "line 3703)");
	free(text);
}
END_TEST

/*
 * Robustness: every prefix of a small configuration and seeded random
 * byte mutations either parse or fail with a line inside the text; no
 * crash, no leak (run under `make san`).
 */
START_TEST(test_conf_truncated_and_mutated)
{
	static const char base[] =
	    "[daemon]\ntcp = [::1]:7878\nmax_line = 64k\n"
	    "journal = every-record\n"
	    "[model boiler_flow]  # a comment\ncusum_h = 5\n"
	    "fields = clamp, temp\n"
	    "target = master\nterms = clamp, temp, \\\n clamp*temp\n"
	    "memory = 7d\nscale = none\nprior = 0 1 0 0\nprior_sd = 1\n"
	    "tolerance = - 1% 0.002 -\n"
	    "[template co2_*]\ncusum_h = off\nfields = raw temp\n"
	    "scale = raw:0:512\n";
	struct conf_error e;
	struct conf *c;
	struct rng g;
	char buf[sizeof(base)];
	size_t n = sizeof(base) - 1, i, k, nmut;
	int rc, lines;

	for (lines = 0, i = 0; i < n; i++)
		lines += base[i] == '\n';
	for (i = 0; i <= n; i++) {
		rc = conf_parse(base, i, &c, &e);
		ck_assert(rc == 0 || rc == E_ARG);
		ck_assert(rc == 0 || (e.line >= 1 && e.line <= lines + 1));
		conf_free(c);
	}
	rng_seed(&g, 1);
	for (i = 0; i < 1500; i++) {
		memcpy(buf, base, n);
		nmut = 1 + rng_next(&g) % 3;
		for (k = 0; k < nmut; k++)
			buf[rng_next(&g) % n] = (char)(rng_next(&g) % 256);
		rc = conf_parse(buf, n, &c, &e);
		ck_assert(rc == 0 || rc == E_ARG);
		ck_assert(rc == 0 || (e.line >= 1 && e.line <= lines + 1));
		ck_assert(rc != 0 || c->nmodels <= 2);
		conf_free(c);
	}
}
END_TEST

START_TEST(test_conf_null_and_free)
{
	struct conf_error e;
	struct conf *c;

	conf_free(NULL);
	ck_assert_int_eq(conf_parse(NULL, 0, &c, &e), 0);
	ck_assert_int_eq(c->nmodels, 0);
	conf_free(c);
}
END_TEST

Suite *
conf_suite(void)
{
	Suite *s = suite_create("conf");
	TCase *tc;

	tc = tcase_create("example");
	tcase_add_test(tc, test_conf_example_parses);
	tcase_add_test(tc, test_conf_example_documents_every_key);
	tcase_add_test(tc, test_conf_keys_lists);
	tcase_add_test(tc, test_conf_defaults_roundtrip);
	tcase_add_test(tc, test_conf_cusum_arl_reference);
	suite_add_tcase(s, tc);

	tc = tcase_create("values");
	tcase_add_test(tc, test_conf_daemon_bounds);
	tcase_add_test(tc, test_conf_model_bounds);
	tcase_add_test(tc, test_conf_message_format);
	tcase_add_test(tc, test_conf_paths);
	tcase_add_test(tc, test_conf_admin_users);
	tcase_add_test(tc, test_conf_listen);
	tcase_add_test(tc, test_conf_durations_sizes);
	suite_add_tcase(s, tc);

	tc = tcase_create("models");
	tcase_add_test(tc, test_conf_fields);
	tcase_add_test(tc, test_conf_terms);
	tcase_add_test(tc, test_conf_scale);
	tcase_add_test(tc, test_conf_prior_reference_tolerance);
	tcase_add_test(tc, test_conf_cusum_rules);
	suite_add_tcase(s, tc);

	tc = tcase_create("syntax");
	tcase_add_test(tc, test_conf_comments);
	tcase_add_test(tc, test_conf_continuation);
	tcase_add_test(tc, test_conf_crlf_bom);
	tcase_add_test(tc, test_conf_bytes);
	tcase_add_test(tc, test_conf_structure_errors);
	tcase_add_test(tc, test_conf_truncated_and_mutated);
	tcase_add_test(tc, test_conf_null_and_free);
	suite_add_tcase(s, tc);

	tc = tcase_create("templates");
	tcase_add_test(tc, test_conf_pattern_match);
	tcase_add_test(tc, test_conf_template_precedence);
	tcase_add_test(tc, test_conf_many_models);
	suite_add_tcase(s, tc);
	return s;
}
