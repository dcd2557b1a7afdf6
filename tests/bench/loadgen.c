/* SPDX-License-Identifier: ISC */
/*
 * loadgen: the load generator of `make bench`. Generates deterministic
 * record lines, writes them pipelined to coefd over the Unix socket or TCP
 * loopback from one or more connections, confirms them with .sync, and
 * measures query round trips (.get, .predict) while a paced ingest runs.
 * Prints "key=value" lines for tests/bench/run.py. Loopback only; every
 * loop is bounded by a record or query count and a deadline.
 */
#define _GNU_SOURCE
#include <arpa/inet.h>
#include <errno.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <pthread.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/un.h>
#include <time.h>
#include <unistd.h>

#include "benchutil.h"

#define MAX_CONNS	64
#define WRITE_CHUNK	65536
#define DEADLINE_SEC	60.0	/* no single phase runs longer */

struct opts {
	const char	*unix_path;
	const char	*tcp;		/* "127.0.0.1:PORT" */
	int		 p;		/* coefficients (intercept + p-1 fields) */
	int		 conns;
	long		 records;	/* in all */
	long		 models;	/* distinct models per connection */
	double		 rate;		/* paced ingest, records/s (query) */
	long		 queries;	/* per kind (query) */
};




/*
 * The records of connection c: n lines "b<p>_<k> @<time> y x1 .. x<p-1>"
 * for models k = c * models + (i mod models), values with 4 to 7
 * significant digits, y linear in the x plus noise. Returns a malloc'd
 * buffer and its length.
 */
static char *
gen(const struct opts *o, int c, long n, size_t *len)
{
	size_t cap = (size_t)n * (size_t)(40 + 12 * o->p) + 64, pos = 0;
	uint64_t seed = 1000u * (uint64_t)o->p + (uint64_t)c;
	char *buf;
	long i;
	int j;

	if ((buf = malloc(cap)) == NULL)
		return NULL;
	for (i = 0; i < n; i++) {
		double x[256], y = 0.5;
		long k = (long)c * o->models + i % o->models;

		for (j = 1; j < o->p; j++) {
			x[j] = 20 * unif(&seed) - 10;
			y += 0.1 * j * x[j];
		}
		y += 0.01 * (unif(&seed) - 0.5);
		pos += (size_t)snprintf(buf + pos, cap - pos,
		    "b%d_%ld @%.3f %.*g", o->p, k, 1764640000.0 + 0.001 *
		    (double)i, 4 + (int)(mix(&seed) & 3), y);
		for (j = 1; j < o->p; j++)
			pos += (size_t)snprintf(buf + pos, cap - pos, " %.*g",
			    4 + (int)(mix(&seed) & 3), x[j]);
		buf[pos++] = '\n';
	}
	*len = pos;
	return buf;
}

static int
dial(const struct opts *o)
{
	int fd;

	if (o->unix_path != NULL) {
		struct sockaddr_un sa;

		memset(&sa, 0, sizeof(sa));
		sa.sun_family = AF_UNIX;
		snprintf(sa.sun_path, sizeof(sa.sun_path), "%s", o->unix_path);
		if ((fd = socket(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0)) < 0)
			return -1;
		if (connect(fd, (struct sockaddr *)&sa, sizeof(sa)) != 0) {
			close(fd);
			return -1;
		}
	} else {
		struct sockaddr_in sa;
		char host[64];
		const char *colon = strrchr(o->tcp, ':');
		int one = 1;

		if (colon == NULL || (size_t)(colon - o->tcp) >= sizeof(host))
			return -1;
		memcpy(host, o->tcp, (size_t)(colon - o->tcp));
		host[colon - o->tcp] = '\0';
		memset(&sa, 0, sizeof(sa));
		sa.sin_family = AF_INET;
		sa.sin_port = htons((uint16_t)atoi(colon + 1));
		/* Loopback only: refuse anything else. */
		if (inet_pton(AF_INET, host, &sa.sin_addr) != 1 ||
		    (ntohl(sa.sin_addr.s_addr) >> 24) != 127)
			return -1;
		if ((fd = socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0)) < 0)
			return -1;
		if (connect(fd, (struct sockaddr *)&sa, sizeof(sa)) != 0) {
			close(fd);
			return -1;
		}
		setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof(one));
	}
	return fd;
}

/* Read until a whole line is in buf (NUL-terminated); 0 or -1. Bytes of
 * later lines are not expected (one request in flight). */
static int
read_line(int fd, char *buf, size_t cap, double deadline)
{
	size_t len = 0;

	while (len + 1 < cap) {
		struct pollfd pf = { fd, POLLIN, 0 };
		ssize_t n;

		if (now_sec() > deadline)
			return -1;
		if (poll(&pf, 1, 1000) <= 0)
			continue;
		if ((n = read(fd, buf + len, cap - 1 - len)) <= 0)
			return -1;
		len += (size_t)n;
		if (memchr(buf, '\n', len) != NULL) {
			buf[len] = '\0';
			return 0;
		}
	}
	return -1;
}

static int
write_all(int fd, const char *p, size_t len)
{
	while (len > 0) {
		ssize_t n = write(fd, p, len);

		if (n < 0 && errno == EINTR)
			continue;
		if (n <= 0)
			return -1;
		p += n;
		len -= (size_t)n;
	}
	return 0;
}

/* ---- pipelined ingest ---- */

struct ingest {
	const struct opts *o;
	pthread_barrier_t *bar;
	char		*buf;
	size_t		 len;
	int		 fd;
	long		 accepted, rejected, errlines;
	double		 t_done;
	int		 failed;
};

/* Count reply lines in got[0..n); find the sync reply. */
static int
scan_replies(struct ingest *g, char *acc, size_t *alen)
{
	char *p = acc, *nl;

	while ((nl = memchr(p, '\n', (size_t)(acc + *alen - p))) != NULL) {
		*nl = '\0';
		if (strncmp(p, "{\"sync\":", 8) == 0) {
			char *a = strstr(p, "\"accepted\":");
			char *r = strstr(p, "\"rejected\":");

			g->accepted = a ? atol(a + 11) : -1;
			g->rejected = r ? atol(r + 11) : -1;
			return 1;
		}
		g->errlines++;
		if (g->errlines <= 3)
			fprintf(stderr, "loadgen: reply: %s\n", p);
		p = nl + 1;
	}
	*alen = (size_t)(acc + *alen - p);
	memmove(acc, p, *alen);
	return 0;
}

static void *
ingest_thread(void *arg)
{
	struct ingest *g = arg;
	static const char sync_line[] = ".sync\n";
	char acc[8192];
	size_t off = 0, alen = 0, synced = 0;
	double deadline;
	int done = 0;

	pthread_barrier_wait(g->bar);
	deadline = now_sec() + DEADLINE_SEC;
	while (!done) {
		struct pollfd pf = { g->fd, POLLIN, 0 };
		ssize_t n;

		if (synced < sizeof(sync_line) - 1)
			pf.events |= POLLOUT;
		if (now_sec() > deadline || poll(&pf, 1, 1000) < 0) {
			g->failed = 1;
			break;
		}
		if (pf.revents & POLLOUT) {
			if (off < g->len) {
				size_t k = g->len - off;

				n = write(g->fd, g->buf + off,
				    k > WRITE_CHUNK ? WRITE_CHUNK : k);
				if (n > 0)
					off += (size_t)n;
			} else {
				n = write(g->fd, sync_line + synced,
				    sizeof(sync_line) - 1 - synced);
				if (n > 0)
					synced += (size_t)n;
			}
			if (n < 0 && errno != EAGAIN && errno != EINTR) {
				g->failed = 1;
				break;
			}
		}
		if (pf.revents & (POLLIN | POLLHUP | POLLERR)) {
			n = read(g->fd, acc + alen, sizeof(acc) - alen);
			if (n <= 0) {
				g->failed = 1;
				break;
			}
			alen += (size_t)n;
			done = scan_replies(g, acc, &alen);
			if (!done && alen == sizeof(acc))
				alen = 0;	/* a huge line: drop it */
		}
	}
	g->t_done = now_sec();
	return NULL;
}

static int
run_ingest(const struct opts *o)
{
	struct ingest g[MAX_CONNS];
	pthread_t th[MAX_CONNS];
	pthread_barrier_t bar;
	long per = o->records / o->conns, acc = 0, rej = 0, errl = 0;
	size_t bytes = 0;
	double t0, t1 = 0;
	int c, failed = 0;

	pthread_barrier_init(&bar, NULL, (unsigned)o->conns + 1);
	for (c = 0; c < o->conns; c++) {
		memset(&g[c], 0, sizeof(g[c]));
		g[c].o = o;
		g[c].bar = &bar;
		if ((g[c].buf = gen(o, c, per, &g[c].len)) == NULL ||
		    (g[c].fd = dial(o)) < 0) {
			fprintf(stderr, "loadgen: cannot connect: %s\n",
			    strerror(errno));
			return 1;
		}
		bytes += g[c].len;
		pthread_create(&th[c], NULL, ingest_thread, &g[c]);
	}
	pthread_barrier_wait(&bar);
	t0 = now_sec();
	for (c = 0; c < o->conns; c++) {
		pthread_join(th[c], NULL);
		if (g[c].t_done > t1)
			t1 = g[c].t_done;
		acc += g[c].accepted;
		rej += g[c].rejected;
		errl += g[c].errlines;
		failed |= g[c].failed;
		close(g[c].fd);
		free(g[c].buf);
	}
	pthread_barrier_destroy(&bar);
	printf("ingest transport=%s conns=%d p=%d models=%ld records=%ld "
	    "bytes=%zu secs=%.6f accepted=%ld rejected=%ld errors=%ld "
	    "failed=%d\n", o->unix_path ? "unix" : "tcp", o->conns, o->p,
	    o->models, per * o->conns, bytes, t1 - t0, acc, rej, errl, failed);
	return failed || acc != per * o->conns;
}

/* ---- query latency under paced ingest ---- */

struct paced {
	const struct opts *o;
	volatile int	*stop;
	long		 sent;
	double		 secs;
	int		 failed;
};

static void *
paced_thread(void *arg)
{
	struct paced *pc = arg;
	const long chunk = 64;
	size_t len, *cut;
	long n = 65536, i, k = 0, ncut = 0;
	char *buf, line[4096];
	double t0, t_begin, deadline;
	int fd;

	if ((buf = gen(pc->o, 0, n, &len)) == NULL ||
	    (cut = malloc(sizeof(*cut) * (size_t)(n / chunk + 2))) == NULL ||
	    (fd = dial(pc->o)) < 0) {
		pc->failed = 1;
		return NULL;
	}
	/* Offsets of every chunk-th line end, so writes are whole lines. */
	cut[ncut++] = 0;
	for (i = 0; i < (long)len; i++)
		if (buf[i] == '\n' && ++k % chunk == 0)
			cut[ncut++] = (size_t)i + 1;
	t0 = t_begin = now_sec();
	deadline = t0 + DEADLINE_SEC;
	for (i = 0; !*pc->stop && now_sec() < deadline; i++) {
		size_t a = cut[i % (ncut - 1)], b = cut[i % (ncut - 1) + 1];
		double due = t0 + (double)pc->sent / pc->o->rate, t;

		if ((t = now_sec()) < due) {
			struct timespec ts;
			double w = due - t;

			ts.tv_sec = (time_t)w;
			ts.tv_nsec = (long)((w - (double)ts.tv_sec) * 1e9);
			nanosleep(&ts, NULL);
		} else if (t - due > 1e-3) {
			/* Descheduled for a while: a steady source at this
			 * rate would not make up for it in one burst. Drop
			 * the debt; the achieved rate is reported. */
			t0 += t - due;
		}
		if (write_all(fd, buf + a, b - a) != 0) {
			pc->failed = 1;
			break;
		}
		pc->sent += chunk;
	}
	pc->secs = now_sec() - t_begin;
	if (write_all(fd, ".sync\n", 6) != 0 ||
	    read_line(fd, line, sizeof(line), now_sec() + 10) != 0 ||
	    strncmp(line, "{\"sync\":", 8) != 0)
		pc->failed = 1;
	close(fd);
	free(cut);
	free(buf);
	return NULL;
}

static int
cmp_dbl(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return x < y ? -1 : x > y;
}

static double
pct(const double *v, long n, double q)
{
	long i = (long)(q * (double)(n - 1) + 0.5);

	return v[i < n ? i : n - 1];
}

static int
run_query(const struct opts *o)
{
	static const char *kinds[2] = { "get", "predict" };
	volatile int stop = 0;
	struct paced pc;
	pthread_t th;
	double *rtt[2], deadline;
	char req[2][512], line[65536];
	long q, k;
	int fd, j, failed = 0;
	size_t len;

	memset(&pc, 0, sizeof(pc));
	pc.o = o;
	pc.stop = &stop;
	if ((rtt[0] = calloc((size_t)o->queries, sizeof(double))) == NULL ||
	    (rtt[1] = calloc((size_t)o->queries, sizeof(double))) == NULL ||
	    (fd = dial(o)) < 0)
		return 1;
	snprintf(req[0], sizeof(req[0]), ".get b%d_0\n", o->p);
	len = (size_t)snprintf(req[1], sizeof(req[1]), ".predict b%d_0",
	    o->p);
	for (j = 1; j < o->p; j++)
		len += (size_t)snprintf(req[1] + len, sizeof(req[1]) - len,
		    " %.3f", 0.5 * j);
	snprintf(req[1] + len, sizeof(req[1]) - len, "\n");
	if (o->rate > 0) {
		pthread_create(&th, NULL, paced_thread, &pc);
		usleep(100000);		/* let the ingest reach its pace */
	}
	deadline = now_sec() + DEADLINE_SEC;
	for (q = 0; q < o->queries && !failed; q++) {
		for (k = 0; k < 2; k++) {
			double t0 = now_sec();

			if (write_all(fd, req[k], strlen(req[k])) != 0 ||
			    read_line(fd, line, sizeof(line), deadline) != 0 ||
			    strstr(line, "\"error\"") != NULL) {
				fprintf(stderr, "loadgen: %s failed: %.200s\n",
				    kinds[k], line);
				failed = 1;
				break;
			}
			rtt[k][q] = (now_sec() - t0) * 1e6;
		}
		/* Requests are spaced so they sample the ingest at random
		 * phases instead of queueing back to back. */
		usleep(200 + (useconds_t)(q * 7919 % 300));
	}
	stop = 1;
	if (o->rate > 0) {
		pthread_join(th, NULL);
		failed |= pc.failed;
	}
	close(fd);
	for (k = 0; k < 2 && !failed; k++) {
		qsort(rtt[k], (size_t)o->queries, sizeof(double), cmp_dbl);
		printf("query kind=%s p=%d rate=%.0f achieved=%.0f n=%ld "
		    "p50_us=%.2f p99_us=%.2f max_us=%.2f\n", kinds[k], o->p,
		    o->rate, pc.secs > 0 ? (double)pc.sent / pc.secs : 0,
		    o->queries, pct(rtt[k], o->queries, 0.5),
		    pct(rtt[k], o->queries, 0.99), rtt[k][o->queries - 1]);
	}
	free(rtt[0]);
	free(rtt[1]);
	return failed;
}

static void
usage(void)
{
	fprintf(stderr,
	    "usage: loadgen gen -p P [-c CONNS] -n RECORDS [-m MODELS]\n"
	    "       loadgen ingest (-u PATH | -t 127.0.0.1:PORT) -p P "
	    "[-c CONNS] -n RECORDS [-m MODELS]\n"
	    "       loadgen query -u PATH -p P -r RATE -q QUERIES\n");
	exit(2);
}

int
main(int argc, char **argv)
{
	struct opts o;
	const char *mode;
	int ch;

	if (argc < 2)
		usage();
	mode = argv[1];
	memset(&o, 0, sizeof(o));
	o.p = 4;
	o.conns = 1;
	o.models = 1;
	o.queries = 1000;
	optind = 2;
	while ((ch = getopt(argc, argv, "u:t:p:c:n:m:r:q:")) != -1) {
		switch (ch) {
		case 'u': o.unix_path = optarg; break;
		case 't': o.tcp = optarg; break;
		case 'p': o.p = atoi(optarg); break;
		case 'c': o.conns = atoi(optarg); break;
		case 'n': o.records = atol(optarg); break;
		case 'm': o.models = atol(optarg); break;
		case 'r': o.rate = atof(optarg); break;
		case 'q': o.queries = atol(optarg); break;
		default: usage();
		}
	}
	if (o.p < 2 || o.p > 256 || o.conns < 1 || o.conns > MAX_CONNS ||
	    o.models < 1 || o.queries < 1 || o.rate < 0)
		usage();
	if (strcmp(mode, "gen") == 0) {
		size_t len;
		char *buf;
		int c;

		for (c = 0; c < o.conns; c++) {
			if ((buf = gen(&o, c, o.records / o.conns, &len)) ==
			    NULL || fwrite(buf, 1, len, stdout) != len)
				return 1;
			free(buf);
		}
		return fflush(stdout) != 0;
	}
	if ((o.unix_path == NULL) == (o.tcp == NULL))
		usage();
	if (strcmp(mode, "ingest") == 0 && o.records >= o.conns)
		return run_ingest(&o);
	if (strcmp(mode, "query") == 0 && o.unix_path != NULL)
		return run_query(&o);
	usage();
	return 2;
}
