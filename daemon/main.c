/* SPDX-License-Identifier: ISC */
/*
 * coefd: argv, the configuration check (-n), loop setup, signals and the
 * shutdown order. Wires conf -> registry -> cmd <- net. Runs in the
 * foreground and logs to stderr (journald under systemd).
 */
#include <errno.h>
#include <inttypes.h>
#include <fcntl.h>
#include <getopt.h>
#include <pwd.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/un.h>
#include <time.h>
#include <unistd.h>

#include <uv.h>

#include "activate.h"
#include "cmd.h"
#include "conf.h"
#include "err.h"
#include "log.h"
#include "net.h"
#include "notify.h"
#include "registry.h"
#include "state.h"

#ifndef COEFD_VERSION
#define COEFD_VERSION	"0.1.0"
#endif
#ifndef SYSCONFDIR
#define SYSCONFDIR	"/etc"
#endif
#define DEFAULT_CONF	SYSCONFDIR "/coefd/coefd.conf"
#define EXIT_CONFIG	78	/* EX_CONFIG: systemd will not restart */
#define SHUTDOWN_MS	5000
#define STATUS_MS	2000	/* STATUS= refresh for the service manager */
#define OPT_STATE_DIR	256	/* long options without a short form */
#define OPT_VERIFY	257

struct daemon {
	uv_loop_t	 loop;
	const char	*conf_path;
	const char	*socket_override;
	struct conf	*conf;
	char		*conf_text;	/* the text conf came from */
	size_t		 conf_len;
	const char	*state_override;	/* --state-dir */
	struct state	*st;
	struct registry	*reg;
	struct net	*net;
	struct cmd_ctx	 cmd;
	char		*token;
	uid_t		 admin_uids[CONF_ADMIN_USERS_MAX];	/* resolved
						 * admin_users of conf */
	size_t		 nadmin_uids;
	uv_signal_t	 sig_hup, sig_term, sig_int;
	int		 stopping;
	int		 verbose;
	/* Service manager: notifications, watchdog, inherited sockets. */
	struct notify	 nfy;
	int		 nfy_failed;	/* a send failed (logged once) */
	uv_timer_t	 status_timer, wd_timer;
	uint64_t	 wd_usec;	/* 0: no watchdog */
	uint64_t	 rate_records;	/* records counted at rate_ms */
	uint64_t	 rate_ms;
	double		 rate;		/* records/s over the last period */
	char		 reload_err[300];	/* "" or the last failure */
	int		 fd_unix, fd_tcp;	/* inherited, or -1 */
	char		 unix_inherited[128];	/* its path, or "" */
};

struct bcast {
	const struct reg_entry *e;
	int		 every_n;
};

static double
now_real(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_REALTIME, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* Read a whole file (at most max bytes) into a new NUL-terminated buffer. */
static char *
read_file(const char *path, size_t max, size_t *len, char *err, size_t elen)
{
	struct stat sb;
	char *buf = NULL;
	ssize_t n;
	size_t got = 0;
	int fd;

	if ((fd = open(path, O_RDONLY | O_CLOEXEC)) < 0) {
		snprintf(err, elen, "%s: %s", path, strerror(errno));
		return NULL;
	}
	if (fstat(fd, &sb) != 0 || !S_ISREG(sb.st_mode)) {
		snprintf(err, elen, "%s: not a regular file", path);
		goto fail;
	}
	if ((size_t)sb.st_size > max) {
		snprintf(err, elen, "%s: larger than %zu bytes", path, max);
		goto fail;
	}
	if ((buf = malloc((size_t)sb.st_size + 1)) == NULL) {
		snprintf(err, elen, "%s: out of memory", path);
		goto fail;
	}
	while (got < (size_t)sb.st_size) {
		n = read(fd, buf + got, (size_t)sb.st_size - got);
		if (n < 0 && errno == EINTR)
			continue;
		if (n <= 0) {
			snprintf(err, elen, "%s: read: %s", path,
			    n < 0 ? strerror(errno) : "file shrank");
			goto fail;
		}
		got += (size_t)n;
	}
	buf[got] = '\0';
	*len = got;
	close(fd);
	return buf;
fail:
	free(buf);
	close(fd);
	return NULL;
}

/* Parse the config file; on error a "file:line: message" in err. The
 * text goes to *textp (the journal records it), or is freed when textp is
 * NULL. */
static struct conf *
load_conf(const char *path, char **textp, size_t *lenp, char *err,
    size_t elen)
{
	struct conf_error ce;
	struct conf *c = NULL;
	size_t len;
	char *text;

	if ((text = read_file(path, CONF_FILE_MAX, &len, err, elen)) == NULL)
		return NULL;
	memset(&ce, 0, sizeof(ce));
	if (conf_parse(text, len, &c, &ce) != 0) {
		if (ce.line > 0)
			snprintf(err, elen, "%s:%d: %s", path, ce.line, ce.msg);
		else
			snprintf(err, elen, "%s: %s", path, ce.msg);
		c = NULL;
	}
	if (c != NULL && textp != NULL) {
		*textp = text;
		*lenp = len;
	} else {
		free(text);
	}
	return c;
}

static char *
load_token(const struct conf *c, char *err, size_t elen)
{
	size_t len;
	char *t;

	if (c->d.token_file[0] == '\0')
		return NULL;
	if ((t = read_file(c->d.token_file, 4096, &len, err, elen)) == NULL)
		return NULL;
	while (len > 0 && (t[len - 1] == '\n' || t[len - 1] == '\r' ||
	    t[len - 1] == ' '))
		t[--len] = '\0';
	if (len == 0) {
		snprintf(err, elen, "%s: empty token", c->d.token_file);
		free(t);
		return NULL;
	}
	return t;
}

/*
 * admin_users -> uids: an all-digit entry is a uid, anything else a user
 * name looked up in the user database. An unknown name is an error (a
 * typo must not silently leave an administrator locked out, or let the
 * wrong account in after a new user takes the name).
 */
static int
resolve_admins(const struct conf *c, uid_t *uids, size_t *n, char *err,
    size_t elen)
{
	struct passwd pw, *res;
	char buf[4096];
	int i, rc;

	*n = 0;
	for (i = 0; i < c->d.nadmin_users; i++) {
		const char *u = c->d.admin_users[i];
		char *end;
		unsigned long v;

		if (u[strspn(u, "0123456789")] == '\0') {
			errno = 0;
			v = strtoul(u, &end, 10);
			if (errno != 0 || v >= (unsigned long)(uid_t)-1) {
				snprintf(err, elen, "admin_users: uid %s is "
				    "out of range", u);
				return E_ARG;
			}
			uids[(*n)++] = (uid_t)v;
			continue;
		}
		rc = getpwnam_r(u, &pw, buf, sizeof(buf), &res);
		if (rc != 0 || res == NULL) {
			snprintf(err, elen, "admin_users: no user '%s'%s%s", u,
			    rc != 0 ? ": " : "", rc != 0 ? strerror(rc) : "");
			return E_ARG;
		}
		uids[(*n)++] = pw.pw_uid;
	}
	return 0;
}

/*
 * One descriptor per connection: raise the soft open-file limit to the
 * hard one (systemd starts services with 1024 soft and a high hard limit,
 * expecting programs that need more to raise it themselves), and warn
 * when even that is below max_connections plus a reserve for listeners,
 * state files and logs. Past the limit libuv accepts and closes new
 * connections at once (its EMFILE fallback): the daemon keeps serving
 * the connections it has.
 */
#define NOFILE_RESERVE	64

static void
raise_nofile(int max_conns)
{
	struct rlimit rl;
	rlim_t want = (rlim_t)max_conns + NOFILE_RESERVE;

	if (getrlimit(RLIMIT_NOFILE, &rl) != 0)
		return;
	if (rl.rlim_cur < rl.rlim_max) {
		rl.rlim_cur = rl.rlim_max;
		if (setrlimit(RLIMIT_NOFILE, &rl) != 0)
			(void)getrlimit(RLIMIT_NOFILE, &rl);
	}
	if (rl.rlim_cur != RLIM_INFINITY && rl.rlim_cur < want)
		log_warnx("open files limited to %llu, below max_connections "
		    "(%d) + %d: connections past the limit are closed at once",
		    (unsigned long long)rl.rlim_cur, max_conns,
		    NOFILE_RESERVE);
}

static void
net_opts_of(const struct daemon *d, const struct conf *c, struct net_opts *o)
{
	memset(o, 0, sizeof(*o));
	o->unix_path = d->socket_override != NULL ? d->socket_override :
	    c->d.socket;
	o->unix_mode = (int)c->d.socket_mode;
	if (c->d.tcp.on) {
		o->tcp_host = c->d.tcp.host;
		o->tcp_port = c->d.tcp.port;
	}
	if (c->d.udp.on) {
		o->udp_host = c->d.udp.host;
		o->udp_port = c->d.udp.port;
	}
	o->admin_from_tcp = c->d.admin_from_tcp;
	o->admin_uids = d->admin_uids;
	o->nadmin_uids = d->nadmin_uids;
	o->tcp_token = c->d.token_file[0] != '\0';
	o->max_line = (size_t)c->d.max_line;
	o->out_cap = (size_t)c->d.output_buffer;
	o->max_conns = (unsigned)c->d.max_connections;
	o->max_conns_per_uid = (unsigned)c->d.max_connections_per_uid;
	o->idle_ms = (uint64_t)(c->d.idle_timeout * 1000);
	o->stuck_ms = (uint64_t)(c->d.stuck_timeout * 1000);
	o->fd_unix = d->fd_unix;
	o->fd_tcp = d->fd_tcp;
	if (d->fd_unix >= 0)
		o->unix_path = d->unix_inherited[0] != '\0' ?
		    d->unix_inherited : NULL;
}

static int
level_of(const struct daemon *d, const struct conf *c)
{
	return d->verbose ? LOG_LVL_DEBUG : LOG_LVL_ERR + (int)c->d.log_level;
}

/* --- hooks for the command layer --- */

static int
bcast_match(const struct session *s, void *arg)
{
	const struct bcast *b = arg;

	if (s->watch_model[0] != '\0' && strcmp(s->watch_model, b->e->name))
		return 0;
	if (b->every_n)
		return s->watch_every > 0 &&
		    b->e->n_updates % s->watch_every == 0;
	return 1;
}

static void
hook_broadcast(void *arg, const struct reg_entry *e, int every_n,
    const char *line, size_t len)
{
	struct daemon *d = arg;
	struct bcast b = { e, every_n };

	net_broadcast(d->net, bcast_match, &b, line, len);
}

static uint64_t
rss_bytes(void)
{
	unsigned long size = 0, res = 0;
	FILE *fp;

	if ((fp = fopen("/proc/self/statm", "r")) == NULL)
		return 0;
	if (fscanf(fp, "%lu %lu", &size, &res) != 2)
		res = 0;
	fclose(fp);
	return (uint64_t)res * (uint64_t)sysconf(_SC_PAGESIZE);
}

static void
hook_stats(void *arg, struct json *j)
{
	struct daemon *d = arg;
	struct net_stats st;

	net_get_stats(d->net, &st);
	json_key(j, "connections");
	json_uint(j, st.conns);
	json_key(j, "connections_total");
	json_uint(j, st.conns_total);
	json_key(j, "connections_refused");
	json_uint(j, st.refused);
	json_key(j, "dropped_stuck");
	json_uint(j, st.dropped_stuck);
	json_key(j, "dropped_idle");
	json_uint(j, st.dropped_idle);
	json_key(j, "datagrams");
	json_uint(j, st.datagrams);
	json_key(j, "bytes_in");
	json_uint(j, st.bytes_in);
	json_key(j, "bytes_out");
	json_uint(j, st.bytes_out);
	json_key(j, "output_buffered");
	json_uint(j, st.out_buffered);
	json_key(j, "memory_rss");
	json_uint(j, rss_bytes());
	if (d->st != NULL)
		state_stats(d->st, j);
}

static void
state_opts_of(const struct daemon *d, const struct conf *c,
    struct state_opts *o)
{
	memset(o, 0, sizeof(*o));
	o->dir = d->state_override != NULL ? d->state_override :
	    c->d.state_dir;
	o->journal = c->d.journal;
	o->journal_every = c->d.journal_every;
	o->checkpoint_every = c->d.checkpoint_every;
}

static int
hook_save(void *arg, uint64_t *ticket, char *msg, size_t len)
{
	struct daemon *d = arg;

	return state_save(d->st, ticket, msg, len);
}

static uint64_t
hook_sync_ticket(void *arg)
{
	struct daemon *d = arg;

	return state_sync_ticket(d->st);
}

static int
hook_wait(void *arg, int kind, uint64_t ticket, char *msg, size_t len)
{
	struct daemon *d = arg;

	return state_wait(d->st, kind, ticket, msg, len);
}

/* The state layer finished a write: answer the replies waiting for it. */
static void
state_progress(void *arg)
{
	struct daemon *d = arg;

	if (d->net != NULL)
		net_poll_deferred(d->net);
}

/* --- service manager: notifications, status, watchdog, sockets --- */

static void
svc_notify(struct daemon *d, const char *msg)
{
	if (notify_send(&d->nfy, msg) == 0 || d->nfy_failed)
		return;
	d->nfy_failed = 1;	/* once: a gone manager must not flood */
	log_warn("notify socket: cannot send (further failures not logged)");
}

static uint64_t
records_seen(const struct daemon *d)
{
	return d->cmd.st.used + d->cmd.st.gated + d->cmd.st.primed +
	    d->cmd.st.frozen;
}

/* "READY=1\n" etc. (or "") followed by STATUS= with the one-line summary. */
static void
svc_status(struct daemon *d, const char *head)
{
	char msg[512];
	size_t nm = registry_count(d->reg);

	snprintf(msg, sizeof(msg), "%sSTATUS=%zu model%s, %.4g records/s, "
	    "%llu alarm%s raised%s%s", head, nm, nm == 1 ? "" : "s", d->rate,
	    (unsigned long long)d->cmd.st.alarms_raised,
	    d->cmd.st.alarms_raised == 1 ? "" : "s",
	    d->reload_err[0] != '\0' ? "; last reload failed: " : "",
	    d->reload_err);
	svc_notify(d, msg);
}

static void
status_cb(uv_timer_t *t)
{
	struct daemon *d = t->data;
	uint64_t now = uv_now(&d->loop), rec = records_seen(d);

	if (now > d->rate_ms)
		d->rate = (double)(rec - d->rate_records) * 1000.0 /
		    (double)(now - d->rate_ms);
	d->rate_records = rec;
	d->rate_ms = now;
	if (!d->stopping)
		svc_status(d, "");
}

/* Runs on the loop: if the loop wedges, the pings stop and the manager
 * restarts us. */
static void
watchdog_cb(uv_timer_t *t)
{
	struct daemon *d = t->data;

	svc_notify(d, "WATCHDOG=1");
}

/* A repeating timer on the loop calling cb every ms; fatal on failure
 * (only called before the loop runs). */
static void
start_timer(struct daemon *d, uv_timer_t *t, uv_timer_cb cb, uint64_t first,
    uint64_t ms, const char *what)
{
	int rc;

	if ((rc = uv_timer_init(&d->loop, t)) != 0)
		fatalx("%s timer: %s", what, uv_strerror(rc));
	t->data = d;
	if ((rc = uv_timer_start(t, cb, first, ms)) != 0)
		fatalx("%s timer: %s", what, uv_strerror(rc));
}

/* Timers for STATUS= and WATCHDOG=1, then READY=1 (all no-ops when no
 * service manager listens). */
static void
svc_ready(struct daemon *d)
{
	uint64_t ms;

	if (d->nfy.fd < 0)
		return;
	d->rate_ms = uv_now(&d->loop);
	d->rate_records = records_seen(d);
	start_timer(d, &d->status_timer, status_cb, STATUS_MS, STATUS_MS,
	    "status");
	if (d->wd_usec > 0) {
		/* Half the interval, as sd_watchdog_enabled(3) advises. */
		ms = d->wd_usec / 2000;
		if (ms == 0)
			ms = 1;
		start_timer(d, &d->wd_timer, watchdog_cb, 0, ms, "watchdog");
		log_info("watchdog: pinging every %llu ms",
		    (unsigned long long)ms);
	}
	svc_status(d, "READY=1\n");
}

/*
 * Take the sockets a service manager passed (LISTEN_FDS): the first Unix
 * stream listener and the first TCP listener go to net instead of the
 * configured addresses. Anything else is a setup error (exit 78, so the
 * manager does not retry). The variables are removed from the environment.
 */
static void
adopt_sockets(struct daemon *d)
{
	struct activate_fd fds[ACTIVATE_FDS_MAX];
	struct sockaddr_un sa;
	socklen_t sl;
	char err[200];
	int i, n, dom, type, acc;

	d->fd_unix = d->fd_tcp = -1;
	if (activate_parse(getenv("LISTEN_PID"), getenv("LISTEN_FDS"),
	    getenv("LISTEN_FDNAMES"), (long)getpid(), fds, ACTIVATE_FDS_MAX, &n,
	    err, sizeof(err)) != 0) {
		log_errx("inherited sockets: %s", err);
		exit(EXIT_CONFIG);
	}
	unsetenv("LISTEN_PID");
	unsetenv("LISTEN_FDS");
	unsetenv("LISTEN_FDNAMES");
	for (i = 0; i < n; i++) {
		sl = sizeof(dom);
		if (getsockopt(fds[i].fd, SOL_SOCKET, SO_DOMAIN, &dom, &sl) ||
		    (sl = sizeof(type), getsockopt(fds[i].fd, SOL_SOCKET,
		    SO_TYPE, &type, &sl)) ||
		    (sl = sizeof(acc), getsockopt(fds[i].fd, SOL_SOCKET,
		    SO_ACCEPTCONN, &acc, &sl))) {
			log_err("inherited fd %d (%s)", fds[i].fd, fds[i].name);
			exit(EXIT_CONFIG);
		}
		(void)fcntl(fds[i].fd, F_SETFD, FD_CLOEXEC);
		if (type == SOCK_STREAM && acc && dom == AF_UNIX &&
		    d->fd_unix < 0) {
			d->fd_unix = fds[i].fd;
			memset(&sa, 0, sizeof(sa));
			sl = sizeof(sa);
			if (getsockname(fds[i].fd, (struct sockaddr *)&sa,
			    &sl) == 0 && sa.sun_path[0] == '/')
				snprintf(d->unix_inherited,
				    sizeof(d->unix_inherited), "%s",
				    sa.sun_path);
		} else if (type == SOCK_STREAM && acc && (dom == AF_INET ||
		    dom == AF_INET6) && d->fd_tcp < 0) {
			d->fd_tcp = fds[i].fd;
		} else {
			log_errx("inherited fd %d (%s): not a listening Unix "
			    "or TCP stream socket coefd can use (one of each)",
			    fds[i].fd, fds[i].name);
			exit(EXIT_CONFIG);
		}
		log_info("inherited fd %d (%s): %s listener", fds[i].fd,
		    fds[i].name, dom == AF_UNIX ? "unix" : "tcp");
	}
}

static int
do_reload(struct daemon *d, char *msg, size_t len, int *kept, int *stale,
    int *orphan)
{
	struct state_opts so;
	struct net_opts no;
	struct conf *c;
	char *tok = NULL, *text = NULL;
	size_t tlen = 0;
	uid_t uids[CONF_ADMIN_USERS_MAX];
	size_t nuids;

	/* The manager sees the reload begin and end, failed or not (not
	 * once it was told we are stopping). */
	if (!d->stopping)
		svc_notify(d, "RELOADING=1");
	if ((c = load_conf(d->conf_path, &text, &tlen, msg, len)) == NULL ||
	    resolve_admins(c, uids, &nuids, msg, len) != 0 ||
	    (c->d.token_file[0] != '\0' &&
	    (tok = load_token(c, msg, len)) == NULL)) {
		conf_free(c);
		free(text);
		snprintf(d->reload_err, sizeof(d->reload_err), "%s", msg);
		if (!d->stopping)
			svc_status(d, "READY=1\n");
		return E_ARG;
	}
	memcpy(d->admin_uids, uids, nuids * sizeof(uid_t));
	d->nadmin_uids = nuids;
	registry_set_conf(d->reg, c, kept, stale, orphan);
	state_opts_of(d, c, &so);
	state_reload(d->st, &so, text, tlen);
	conf_free(d->conf);
	d->conf = c;
	free(d->conf_text);
	d->conf_text = text;
	d->conf_len = tlen;
	free(d->token);
	d->token = tok;
	d->cmd.token = tok;
	net_opts_of(d, c, &no);
	net_apply_opts(d->net, &no);
	raise_nofile(c->d.max_connections);
	log_set_level(level_of(d, c));
	log_notice("configuration reloaded from %s: %d models kept, %d stale "
	    "(term list changed; .reset applies it), %d without a section "
	    "(kept)", d->conf_path, *kept, *stale, *orphan);
	d->reload_err[0] = '\0';
	if (!d->stopping)
		svc_status(d, "READY=1\n");
	return 0;
}

static int
hook_reload(void *arg, char *msg, size_t len, int *kept, int *stale,
    int *orphan)
{
	return do_reload(arg, msg, len, kept, stale, orphan);
}

/* --- network callbacks --- */

static int
net_result(int r)
{
	return r == CMD_DEFER ? NET_DEFER : r == CMD_REPLY ? NET_REPLY :
	    NET_NOREPLY;
}

static int
on_msg(void *arg, struct session *s, const struct proto_msg *msg,
    struct json *j)
{
	struct daemon *d = arg;
	double now;

	/* A record with its own @TIME never uses the clock (the registry
	 * takes the record's time), and reading it was 4.5% of the
	 * daemon's time per record at p = 4. */
	now = msg->kind == PROTO_RECORD && msg->has_time &&
	    msg->reason == PROTO_NREASONS ? msg->time : now_real();
	return net_result(cmd_handle(&d->cmd, s, msg, now, j));
}

static int
on_deferred(void *arg, struct session *s, struct json *j)
{
	struct daemon *d = arg;

	return net_result(cmd_deferred(&d->cmd, s, j));
}

static void
on_conn(void *arg, struct session *s, int opened)
{
	struct daemon *d = arg;

	if (!opened)
		cmd_session_closed(&d->cmd, s);
}

static void
on_refused(void *arg, enum proto_reason why)
{
	struct daemon *d = arg;

	d->cmd.st.rejected[why]++;
}

/* --- signals and shutdown --- */

static void
walk_close(uv_handle_t *h, void *arg)
{
	(void)arg;
	if (!uv_is_closing(h))
		uv_close(h, NULL);
}

static void
state_closed(void *arg)
{
	struct daemon *d = arg;

	/* Everything else (signal handles) goes now; the loop then ends. */
	uv_walk(&d->loop, walk_close, NULL);
}

static void
net_closed(void *arg)
{
	struct daemon *d = arg;

	/* Every reply is out and no line will change a model any more:
	 * flush the journal and take the final checkpoint. */
	state_shutdown(d->st, state_closed, d);
}

static void
shutdown_start(struct daemon *d, const char *why)
{
	if (d->stopping) {
		log_warnx("%s again: exiting at once", why);
		exit(1);
	}
	d->stopping = 1;
	svc_notify(d, "STOPPING=1\nSTATUS=shutting down");
	log_notice("%s: shutting down (%zu models)", why,
	    registry_count(d->reg));
	net_stop_listening(d->net);
	net_close_all(d->net, SHUTDOWN_MS, net_closed, d);
}

static void
signal_cb(uv_signal_t *h, int signum)
{
	struct daemon *d = h->data;
	char msg[300];
	int kept, stale, orphan;

	switch (signum) {
	case SIGHUP:
		if (d->stopping)
			return;
		if (do_reload(d, msg, sizeof(msg), &kept, &stale, &orphan) != 0)
			log_warnx("reload failed, keeping the running "
			    "configuration: %s", msg);
		break;
	case SIGTERM:
		shutdown_start(d, "SIGTERM");
		break;
	case SIGINT:
		shutdown_start(d, "SIGINT");
		break;
	default:
		break;
	}
}

static int
start_signal(struct daemon *d, uv_signal_t *h, int signum)
{
	int rc;

	if ((rc = uv_signal_init(&d->loop, h)) != 0)
		return rc;
	h->data = d;
	return uv_signal_start(h, signal_cb, signum);
}

static void
usage(FILE *fp)
{
	fprintf(fp, "usage: coefd [-nvV] [-c FILE] [-s SOCKET] "
	    "[--state-dir DIR]\n"
	    "       coefd --verify-state DIR\n"
	    "  -c FILE    configuration (default " DEFAULT_CONF ")\n"
	    "  -n         check the configuration and exit (0 ok, 78 bad)\n"
	    "  -s SOCKET  listen on this Unix socket instead of the "
	    "configured one\n"
	    "  --state-dir DIR\n"
	    "             keep checkpoints and the journal in DIR instead "
	    "of state_dir\n"
	    "  --verify-state DIR\n"
	    "             check a state directory and exit (0 intact, 1 "
	    "damaged,\n"
	    "             2 newer format)\n"
	    "  -v         log debug messages\n"
	    "  -V         print the version and exit\n");
}

int
main(int argc, char **argv)
{
	static const struct option lo[] = {
		{ "config", required_argument, NULL, 'c' },
		{ "check", no_argument, NULL, 'n' },
		{ "socket", required_argument, NULL, 's' },
		{ "verbose", no_argument, NULL, 'v' },
		{ "version", no_argument, NULL, 'V' },
		{ "help", no_argument, NULL, 'h' },
		{ "state-dir", required_argument, NULL, OPT_STATE_DIR },
		{ "verify-state", required_argument, NULL, OPT_VERIFY },
		{ NULL, 0, NULL, 0 }
	};
	struct daemon d;
	struct net_handler nh;
	struct net_opts no;
	struct state_opts so;
	struct state_hooks sh;
	struct state_report rep;
	char err[400], st[sizeof(err) + 32];
	const char *verify = NULL;
	int ch, check = 0, rc, i, status = 0;

	/* Matrices are small: OpenBLAS must not start worker threads. It
	 * reads the variable when the library loads, so re-execute once. */
	if (getenv("OPENBLAS_NUM_THREADS") == NULL &&
	    setenv("OPENBLAS_NUM_THREADS", "1", 1) == 0)
		execv("/proc/self/exe", argv);

	memset(&d, 0, sizeof(d));
	d.conf_path = DEFAULT_CONF;
	while ((ch = getopt_long(argc, argv, "c:ns:vVh", lo, NULL)) != -1) {
		switch (ch) {
		case 'c':
			d.conf_path = optarg;
			break;
		case 'n':
			check = 1;
			break;
		case 's':
			d.socket_override = optarg;
			break;
		case 'v':
			d.verbose = 1;
			break;
		case 'V':
			printf("coefd %s (protocol %d)\n", COEFD_VERSION,
			    PROTO_VERSION);
			return 0;
		case 'h':
			usage(stdout);
			return 0;
		case OPT_STATE_DIR:
			d.state_override = optarg;
			break;
		case OPT_VERIFY:
			verify = optarg;
			break;
		default:
			usage(stderr);
			return 2;
		}
	}
	if (optind != argc) {
		usage(stderr);
		return 2;
	}
	if (verify != NULL)
		return state_verify(verify, stdout);
	log_init(LOG_LVL_INFO);
	d.fd_unix = d.fd_tcp = -1;
	d.nfy.fd = -1;
	if (!check) {
		if (notify_open(&d.nfy, getenv("NOTIFY_SOCKET"), err,
		    sizeof(err)) != 0)
			log_warnx("%s", err);
		if (notify_watchdog_usec(getenv("WATCHDOG_USEC"),
		    getenv("WATCHDOG_PID"), (long)getpid(), &d.wd_usec) != 0)
			log_warnx("WATCHDOG_USEC/WATCHDOG_PID malformed: "
			    "watchdog off");
		adopt_sockets(&d);
	}
	if ((d.conf = load_conf(d.conf_path, &d.conf_text, &d.conf_len, err,
	    sizeof(err))) == NULL) {
		fprintf(stderr, "%s\n", err);
		snprintf(st, sizeof(st), "STATUS=bad configuration: %s", err);
		svc_notify(&d, st);
		notify_close(&d.nfy);
		return EXIT_CONFIG;
	}
	if (resolve_admins(d.conf, d.admin_uids, &d.nadmin_uids, err,
	    sizeof(err)) != 0) {
		fprintf(stderr, "%s: %s\n", d.conf_path, err);
		snprintf(st, sizeof(st), "STATUS=bad configuration: %s", err);
		svc_notify(&d, st);
		notify_close(&d.nfy);
		conf_free(d.conf);
		return EXIT_CONFIG;
	}
	if (check) {
		int nm = 0, nt = 0;

		for (i = 0; i < d.conf->nmodels; i++)
			d.conf->models[i].is_template ? nt++ : nm++;
		printf("%s: ok (%d models, %d templates)\n", d.conf_path, nm,
		    nt);
		conf_free(d.conf);
		free(d.conf_text);
		return 0;
	}
	log_init(level_of(&d, d.conf));
	raise_nofile(d.conf->d.max_connections);
	if (d.conf->d.token_file[0] != '\0' &&
	    (d.token = load_token(d.conf, err, sizeof(err))) == NULL) {
		log_errx("%s", err);
		conf_free(d.conf);
		notify_close(&d.nfy);
		free(d.conf_text);
		return EXIT_CONFIG;
	}
	signal(SIGPIPE, SIG_IGN);
	if ((rc = uv_loop_init(&d.loop)) != 0)
		fatalx("uv_loop_init: %s", uv_strerror(rc));
	if ((d.reg = registry_new(d.conf)) == NULL)
		fatalx("out of memory");
	d.cmd.reg = d.reg;
	d.cmd.token = d.token;
	d.cmd.started = now_real();
	d.cmd.version = COEFD_VERSION;
	d.cmd.hooks.arg = &d;
	d.cmd.hooks.broadcast = hook_broadcast;
	d.cmd.hooks.stats = hook_stats;
	d.cmd.hooks.reload = hook_reload;
	d.cmd.hooks.save = hook_save;
	d.cmd.hooks.sync_ticket = hook_sync_ticket;
	d.cmd.hooks.wait = hook_wait;

	/* The models come back before anyone can talk to the daemon. */
	state_opts_of(&d, d.conf, &so);
	memset(&sh, 0, sizeof(sh));
	sh.arg = &d;
	sh.progress = state_progress;
	if ((rc = state_open(&d.loop, &so, d.reg, d.conf, &sh, &d.st, &rep,
	    err, sizeof(err))) != 0) {
		log_errx("%s", err);
		uv_loop_close(&d.loop);
		registry_free(d.reg);
		conf_free(d.conf);
		free(d.conf_text);
		free(d.token);
		return rc == E_VERSION ? EXIT_CONFIG : 1;
	}
	log_notice("state %s: %" PRIu64 " models restored%s, %" PRIu64
	    " journal entries replayed (%" PRIu64 " not applied) in %.1f ms; "
	    "against the configuration: %d kept, %d stale, %d orphan",
	    so.dir, rep.models, rep.damage ? " WITH DAMAGE (see above)" : "",
	    rep.entries, rep.skipped, rep.ms, rep.kept, rep.stale, rep.orphan);

	memset(&nh, 0, sizeof(nh));
	nh.arg = &d;
	nh.on_msg = on_msg;
	nh.on_deferred = on_deferred;
	nh.on_conn = on_conn;
	nh.on_refused = on_refused;
	net_opts_of(&d, d.conf, &no);
	if ((rc = net_start(&d.loop, &no, &nh, &d.net, err, sizeof(err))) != 0) {
		log_errx("%s", err);
		if (d.net != NULL) {
			uv_walk(&d.loop, walk_close, NULL);
			uv_run(&d.loop, UV_RUN_DEFAULT);
			net_free(d.net);
		} else {
			uv_walk(&d.loop, walk_close, NULL);
			uv_run(&d.loop, UV_RUN_DEFAULT);
		}
		state_free(d.st);
		registry_free(d.reg);
		conf_free(d.conf);
		free(d.conf_text);
		free(d.token);
		notify_close(&d.nfy);
		return 1;
	}
	if (state_start(d.st, d.conf_text, d.conf_len) != 0)
		fatalx("out of memory");
	if (start_signal(&d, &d.sig_hup, SIGHUP) != 0 ||
	    start_signal(&d, &d.sig_term, SIGTERM) != 0 ||
	    start_signal(&d, &d.sig_int, SIGINT) != 0)
		fatalx("cannot install signal handlers");
	log_notice("coefd %s ready: socket %s%s%s%s, %d configured sections",
	    COEFD_VERSION, no.unix_path != NULL ? no.unix_path : "(unnamed)",
	    d.fd_unix >= 0 ? " (inherited)" : "",
	    d.fd_tcp >= 0 ? ", tcp inherited" : d.conf->d.tcp.on ?
	    ", tcp on" : "", d.conf->d.udp.on ? ", udp on" : "",
	    d.conf->nmodels);
	svc_ready(&d);

	uv_run(&d.loop, UV_RUN_DEFAULT);

	/* Every handle must be closed by now; one that is not is a shutdown
	 * bug: exit 1 so that the tests expecting a clean exit catch it. */
	if ((rc = uv_loop_close(&d.loop)) != 0) {
		log_warnx("loop close: %s", uv_strerror(rc));
		status = 1;
	}
	if (!state_final_ok(d.st)) {
		log_errx("stopped WITHOUT a final checkpoint: the state since "
		    "the last good checkpoint is only in the journal, if "
		    "anywhere");
		status = 1;
	} else {
		log_notice("stopped");
	}
	net_free(d.net);
	state_free(d.st);
	registry_free(d.reg);
	conf_free(d.conf);
	free(d.conf_text);
	free(d.token);
	notify_close(&d.nfy);
	return status;
}
