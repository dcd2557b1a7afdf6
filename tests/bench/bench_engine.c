/* SPDX-License-Identifier: ISC */
/*
 * bench_engine: in-process timings of the pure engine for `make bench`:
 * rls_update alone and the full model_step, the core's floating-point
 * peak (FMA throughput), model_step over many models, the protocol reader
 * and the whole record path without sockets (proto_next + cmd_handle)
 * over a file of records, and heap bytes per model. It prints one
 * "key=value" line per measurement run; tests/bench/run.py takes medians
 * and builds the table. Not a test: nothing here asserts a speed.
 */
#define _GNU_SOURCE
#include <errno.h>
#include <malloc.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "benchutil.h"
#include "cmd.h"
#include "conf.h"
#include "model.h"
#include "proto.h"
#include "registry.h"
#include "rls.h"
#include "terms.h"

#define NDATA		4096	/* distinct records cycled through */
#define RUN_SEC		0.08	/* target length of one timed run */




/* Regressors (intercept first) and targets of a well-excited linear
 * model with a little noise: y = sum_j 0.1 (j + 1) phi_j + e. */
static void
make_data(int p, double *phi, double *y, uint64_t seed)
{
	int i, j;

	for (i = 0; i < NDATA; i++) {
		double acc = 0;

		for (j = 0; j < p; j++) {
			double v = j == 0 ? 1.0 : 20 * unif(&seed) - 10;

			phi[(size_t)i * (size_t)p + (size_t)j] = v;
			acc += 0.1 * (j + 1) * v;
		}
		y[i] = acc + 0.01 * (unif(&seed) - 0.5);
	}
}

/*
 * Flops of the update in model_step (rls_update_ap) averaged over K
 * records (K = rls_reg_block), counted from the loops in daemon/rls.c.
 * K - 1 records take the fast path: at column k 10 (prefix sum, square
 * root, reciprocal, c, s, the new pivot) + 5 (n - k - 1) (2 multiplies
 * and 3 adds or subtractions per remaining entry). One record in K adds
 * a regularisation row and takes the sequential rotations: a rotation at
 * column j costs 3 (radius) + 2 (c, s) + 6 (n - j - 1) (4 multiplies and
 * 2 adds per entry), for the record row and for the regularisation row
 * from column c (averaged over c). Either way the radius of rho 3, the
 * incoming row p + 1 scalings, d[] p.
 */
static double
flops_update(int p, int k)
{
	double fast = 0, seq = 0, reg = 0;
	int j, c, n = p + 1;

	for (j = 0; j < p; j++) {
		fast += 10 + 5.0 * (n - j - 1);
		seq += 5 + 6.0 * (n - j - 1);
	}
	for (c = 0; c < p; c++) {
		double g = 3;

		for (j = c; j < p; j++)
			g += 5 + 6.0 * (n - j - 1);
		reg += g;
	}
	return 3 + (p + 1) + p + ((k - 1) * fast + seq + reg / p) / k;
}

/* Flops of rls_apriori: forward substitution (p divides, p(p-1)
 * multiply-adds) and the two dot products. */
static double
flops_apriori(int p)
{
	return p + (double)p * (p - 1) + 4.0 * p;
}

/* Run fn for n records and return seconds. */
typedef void (*work_fn)(void *ctx, long n);

struct rls_ctx {
	struct rls	*r;
	const double	*phi, *y;
	int		 p;
	long		 i;
};

/* Forgetting factor of the engine runs: 0.99, or BENCH_LAMBDA (read
 * once: getenv in the timed loop cost 4% of a record). */
static double
bench_lambda(void)
{
	static double l;

	if (l == 0) {
		const char *s = getenv("BENCH_LAMBDA");

		l = s != NULL ? atof(s) : 0;
		if (!(l > 0 && l <= 1))
			l = 0.99;
	}
	return l;
}

static void
work_rls(void *arg, long n)
{
	struct rls_ctx *c = arg;
	long k;

	for (k = 0; k < n; k++) {
		int i = (int)(c->i++ & (NDATA - 1));

		rls_update(c->r, c->phi + (size_t)i * (size_t)c->p, c->y[i],
		    1.0, bench_lambda());
	}
}

struct model_ctx {
	struct model	**m;
	long		 nm;
	const double	*phi, *y;
	int		 p;
	long		 i;
};

static void
work_model(void *arg, long n)
{
	struct model_ctx *c = arg;
	struct model_step_out out;
	long k;

	for (k = 0; k < n; k++) {
		long i = c->i++;
		int d = (int)(i & (NDATA - 1));

		model_step(c->m[c->nm > 1 ? i % c->nm : 0],
		    c->phi + (size_t)d * (size_t)c->p, c->y[d], 1.0,
		    (double)i, &out);
	}
}

/* Calibrate a count that takes about RUN_SEC, warm up, then time `runs`
 * runs; prints one line per run: "<tag> ns=<per record>". */
static void
timed(const char *tag, work_fn fn, void *ctx, int runs)
{
	double t0, dt, ns;
	long n = 1000;
	int r;

	for (;;) {
		t0 = now_sec();
		fn(ctx, n);
		dt = now_sec() - t0;
		if (dt > RUN_SEC / 4 || n > (1L << 40))
			break;
		n *= 4;
	}
	n = (long)(n * RUN_SEC / dt) + 1;
	fn(ctx, n);		/* warm-up at full length */
	for (r = 0; r < runs; r++) {
		t0 = now_sec();
		fn(ctx, n);
		dt = now_sec() - t0;
		ns = dt * 1e9 / (double)n;
		printf("%s ns=%.4f n=%ld\n", tag, ns, n);
		fflush(stdout);
	}
}

static struct model *
bench_model(int p)
{
	struct model_opts o;

	/* The daemon's defaults (regularised forgetting delta = 1e-6,
	 * detectors on) with lambda 0.99 unless BENCH_LAMBDA says. */
	model_opts_default(&o, p, 1);
	o.lambda = bench_lambda();
	return model_new(&o);
}

static int
cmd_engine(int argc, char **argv, int runs)
{
	int a;

	for (a = 0; a < argc; a++) {
		int p = atoi(argv[a]);
		double *phi, *y;
		struct rls_opts ro;
		struct rls_ctx rc;
		struct model_ctx mc;
		struct model *m;
		char tag[64];

		if (p < 1 || p > RLS_MAX_P)
			return 2;
		phi = malloc(sizeof(double) * NDATA * (size_t)p);
		y = malloc(sizeof(double) * NDATA);
		if (phi == NULL || y == NULL)
			return 1;
		make_data(p, phi, y, 42 + (uint64_t)p);
		printf("flops p=%d update=%.0f apriori=%.0f\n", p,
		    flops_update(p, rls_reg_block(p, bench_lambda())),
		    flops_apriori(p));

		memset(&ro, 0, sizeof(ro));
		ro.p = p;
		ro.delta = 1e-6;
		ro.reg_block = rls_reg_block(p, bench_lambda());
		memset(&rc, 0, sizeof(rc));
		if ((rc.r = rls_new(&ro)) == NULL)
			return 1;
		rc.phi = phi;
		rc.y = y;
		rc.p = p;
		snprintf(tag, sizeof(tag), "rls_update p=%d", p);
		timed(tag, work_rls, &rc, runs);
		rls_free(rc.r);

		if ((m = bench_model(p)) == NULL)
			return 1;
		memset(&mc, 0, sizeof(mc));
		mc.m = &m;
		mc.nm = 1;
		mc.phi = phi;
		mc.y = y;
		mc.p = p;
		snprintf(tag, sizeof(tag), "model_step p=%d", p);
		timed(tag, work_model, &mc, runs);
		model_free(m);
		free(phi);
		free(y);
	}
	return 0;
}

/* model_step round-robin over N models of p coefficients. */
static int
cmd_models(int argc, char **argv, int runs)
{
	int a, p = 4;

	for (a = 0; a < argc; a++) {
		long nm = atol(argv[a]), i;
		struct model_ctx mc;
		double *phi, *y;
		char tag[64];

		if (nm < 1)
			return 2;
		phi = malloc(sizeof(double) * NDATA * (size_t)p);
		y = malloc(sizeof(double) * NDATA);
		memset(&mc, 0, sizeof(mc));
		mc.m = calloc((size_t)nm, sizeof(*mc.m));
		if (phi == NULL || y == NULL || mc.m == NULL)
			return 1;
		make_data(p, phi, y, 7);
		for (i = 0; i < nm; i++)
			if ((mc.m[i] = bench_model(p)) == NULL)
				return 1;
		mc.nm = nm;
		mc.phi = phi;
		mc.y = y;
		mc.p = p;
		snprintf(tag, sizeof(tag), "models p=%d count=%ld", p, nm);
		timed(tag, work_model, &mc, runs);
		for (i = 0; i < nm; i++)
			model_free(mc.m[i]);
		free(mc.m);
		free(phi);
		free(y);
	}
	return 0;
}

/*
 * Peak double-precision FMA throughput of one core: 12 independent
 * accumulators (enough to cover 2 FMA ports x 4-5 cycles latency) in a
 * loop of fused multiply-adds. The portable build uses SSE2 (no FMA);
 * the AVX2 and AVX-512 kernels are compiled for their targets and run only
 * when the CPU has them.
 */
#define PEAK_ACC	12
#define PEAK_ITERS	4000000L

typedef double v2d __attribute__((vector_size(16)));
typedef double v4d __attribute__((vector_size(32)));
typedef double v8d __attribute__((vector_size(64)));

#define PEAK_KERNEL(name, vt, attr)					\
static double attr							\
name(long iters, double seed)						\
{									\
	vt acc[PEAK_ACC], m, a, s;					\
	int k;								\
	long i;								\
									\
	m = (vt){ 0 } + 0.999999;					\
	a = (vt){ 0 } + 1e-7 * seed;					\
	for (k = 0; k < PEAK_ACC; k++)					\
		acc[k] = (vt){ 0 } + seed + k;				\
	for (i = 0; i < iters; i++) {					\
		_Pragma("GCC unroll 16")				\
		for (k = 0; k < PEAK_ACC; k++)				\
			acc[k] = acc[k] * m + a;			\
		__asm__ volatile("" : "+x"(m));				\
	}								\
	s = acc[0];							\
	for (k = 1; k < PEAK_ACC; k++)					\
		s += acc[k];						\
	return s[0];							\
}

PEAK_KERNEL(peak_sse2, v2d, )
PEAK_KERNEL(peak_avx2, v4d, __attribute__((target("avx2,fma"))))
PEAK_KERNEL(peak_avx512, v8d, __attribute__((target("avx512f"))))

static int
cmd_peak(int runs)
{
	static const struct {
		const char	*name;
		double		(*fn)(long, double);
		int		 width;	/* doubles per vector */
		int		 fma;	/* 2 flops per lane per op */
		const char	*feature;
	} k[] = {
		{ "sse2", peak_sse2, 2, 0, NULL },
		{ "avx2", peak_avx2, 4, 1, "avx2" },
		{ "avx512", peak_avx512, 8, 1, "avx512f" },
	};
	size_t i;
	int r;
	double sink = 0;

	__builtin_cpu_init();
	/* The clone of rls.c's rotation loops the loader picks here. */
	printf("clone level=%s\n", __builtin_cpu_supports("x86-64-v3") ?
	    "x86-64-v3" : "baseline");
	for (i = 0; i < sizeof(k) / sizeof(k[0]); i++) {
		/* Without FMA a multiply and an add are 2 instructions:
		 * still 2 flops per lane per accumulator update. */
		double flops = 2.0 * k[i].width * PEAK_ACC * (double)PEAK_ITERS;

		if ((k[i].feature != NULL && strcmp(k[i].feature, "avx2") == 0 &&
		    !(__builtin_cpu_supports("avx2") &&
		    __builtin_cpu_supports("fma"))) ||
		    (k[i].feature != NULL &&
		    strcmp(k[i].feature, "avx512f") == 0 &&
		    !__builtin_cpu_supports("avx512f"))) {
			printf("peak isa=%s absent\n", k[i].name);
			continue;
		}
		sink += k[i].fn(PEAK_ITERS / 4, 1.0);	/* warm-up */
		for (r = 0; r < runs; r++) {
			double t0 = now_sec(), dt;

			sink += k[i].fn(PEAK_ITERS, 1.0 + r);
			dt = now_sec() - t0;
			printf("peak isa=%s gflops=%.3f fma=%d\n", k[i].name,
			    flops / dt * 1e-9, k[i].fma);
		}
	}
	fflush(stdout);
	return sink == 12345.0;	/* keeps the results alive */
}

/*
 * Latency of one Givens step as rls.c chains them: the radius
 * sqrt(a^2 + b^2), the cosine and sine (divisions), and the next element
 * of the row (c x - s t), which the next rotation starts from. An update
 * of p coefficients is a chain of about p + 2 such steps (p rotations,
 * rho, and the regularisation row one step behind), whatever the vector
 * width: the bound at small p.
 */
static int
cmd_chain(int runs)
{
	const long n = 2000000;
	volatile double va = 1.0, vx = 0.6, vt = 0.8;
	double a = va, x = vx, t = vt, b = 0.5, sink = 0;
	long i;
	int r;

	for (r = 0; r <= runs; r++) {
		double t0 = now_sec(), dt;

		for (i = 0; i < n; i++) {
			double rad = sqrt(a * a + b * b), c = a / rad;
			double sn = b / rad;

			b = c * x - sn * t;
		}
		dt = now_sec() - t0;
		sink += b;
		if (r > 0)	/* run 0 is the warm-up */
			printf("chain ns=%.4f\n", dt * 1e9 / (double)n);
	}
	fflush(stdout);
	return sink == 12345.0;
}

static char *
slurp(const char *path, size_t *len)
{
	FILE *fp;
	char *buf;
	long sz;

	if ((fp = fopen(path, "rb")) == NULL)
		return NULL;
	if (fseek(fp, 0, SEEK_END) != 0 || (sz = ftell(fp)) < 0 ||
	    fseek(fp, 0, SEEK_SET) != 0 ||
	    (buf = malloc((size_t)sz + 1)) == NULL) {
		fclose(fp);
		return NULL;
	}
	*len = fread(buf, 1, (size_t)sz, fp);
	fclose(fp);
	buf[*len] = '\0';
	return buf;
}

static struct conf *
load_conf(const char *path)
{
	struct conf_error ce;
	struct conf *c = NULL;
	size_t len;
	char *text;

	if ((text = slurp(path, &len)) == NULL)
		return NULL;
	memset(&ce, 0, sizeof(ce));
	if (conf_parse(text, len, &c, &ce) != 0) {
		fprintf(stderr, "%s:%d: %s\n", path, ce.line, ce.msg);
		c = NULL;
	}
	free(text);
	return c;
}

/* Count the numbers of buf whose parse differs from strtod by one bit:
 * every token after the model name (the @time excluded). */
static long
exactness(const char *buf, size_t len, long *nnum)
{
	const char *p = buf, *end = buf + len;
	long bad = 0;

	*nnum = 0;
	while (p < end) {
		const char *nl = memchr(p, '\n', (size_t)(end - p));
		const char *t = p;
		int tok = 0;

		if (nl == NULL)
			nl = end;
		while (t < nl) {
			const char *s = t;
			char tmp[64], *ep;
			double a, b;

			while (t < nl && *t != ' ')
				t++;
			if (tok++ > 0 && *s != '@' && (size_t)(t - s) < 64) {
				memcpy(tmp, s, (size_t)(t - s));
				tmp[t - s] = '\0';
				a = strtod(tmp, &ep);
				if (proto_parse_number(s, (size_t)(t - s),
				    &b) != 0 || memcmp(&a, &b, sizeof(a)) != 0)
					bad++;
				(*nnum)++;
			}
			while (t < nl && *t == ' ')
				t++;
		}
		p = nl + 1;
	}
	return bad;
}

struct parse_ctx {
	const char		*buf;
	size_t			 len;
	struct proto_reader	*rd;
	struct proto_msg	*msg;
	struct cmd_ctx		*cmd;	/* NULL: parse only */
	struct session		 sess;
	char			*jbuf;
	long			 lines, errors;
};

/* One pass over the buffer in 64 KiB pieces, as the daemon reads it. */
static void
parse_pass(struct parse_ctx *c)
{
	size_t off = 0;

	while (off < c->len) {
		size_t chunk = c->len - off > 65536 ? 65536 : c->len - off;
		size_t pos = 0, used;

		while (pos < chunk) {
			int st = proto_next(c->rd, c->buf + off + pos,
			    chunk - pos, &used, c->msg);
			struct json j;

			pos += used;
			if (st == PROTO_NEED_MORE)
				break;
			c->lines++;
			if (st == PROTO_ERROR)
				c->errors++;
			if (c->cmd == NULL || c->msg->kind == PROTO_EMPTY)
				continue;
			json_init(&j, c->jbuf, 1 << 16);
			if (cmd_handle(c->cmd, &c->sess, c->msg,
			    1764640000.0, &j))
				c->errors++;
		}
		off += chunk;
	}
}

/* parse FILE CONF: proto_next alone, then proto_next + cmd_handle, over
 * the exact bytes the load generator sends. */
static int
cmd_parse(const char *file, const char *confpath, int runs)
{
	struct parse_ctx pc;
	struct conf *conf;
	struct cmd_ctx cc;
	size_t len;
	char *buf;
	long nnum, bad, lines;
	int pass, r;

	if ((buf = slurp(file, &len)) == NULL ||
	    (conf = load_conf(confpath)) == NULL)
		return 1;
	for (lines = 0, r = 0; (size_t)r < len; r++)
		lines += buf[r] == '\n';
	bad = exactness(buf, len, &nnum);
	printf("exact numbers=%ld mismatches=%ld\n", nnum, bad);
	memset(&cc, 0, sizeof(cc));
	if ((cc.reg = registry_new(conf)) == NULL)
		return 1;
	for (pass = 0; pass < 2; pass++) {
		memset(&pc, 0, sizeof(pc));
		pc.buf = buf;
		pc.len = len;
		pc.rd = proto_reader_new(65536);
		pc.msg = malloc(sizeof(*pc.msg));
		pc.jbuf = malloc(1 << 16);
		pc.cmd = pass ? &cc : NULL;
		pc.sess.kind = SESSION_UNIX;
		pc.sess.admin = 1;
		if (pc.rd == NULL || pc.msg == NULL || pc.jbuf == NULL)
			return 1;
		parse_pass(&pc);	/* warm-up; creates the models */
		for (r = 0; r < runs; r++) {
			double t0 = now_sec(), dt;
			struct timespec c0, c1;

			clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c0);
			pc.lines = pc.errors = 0;
			parse_pass(&pc);
			dt = now_sec() - t0;
			clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c1);
			printf("%s records=%ld bytes=%zu errors=%ld ns=%.3f "
			    "cpu_ns=%.3f\n", pass ? "inproc" : "parse", lines,
			    len, pc.errors, dt * 1e9 / (double)lines,
			    ((double)(c1.tv_sec - c0.tv_sec) * 1e9 +
			    (double)(c1.tv_nsec - c0.tv_nsec)) /
			    (double)lines);
		}
		proto_reader_free(pc.rd);
		free(pc.msg);
		free(pc.jbuf);
	}
	fflush(stdout);
	registry_free(cc.reg);
	conf_free(conf);
	free(buf);
	return 0;
}

static size_t
heap_used(void)
{
	struct mallinfo2 mi = mallinfo2();

	return mi.uordblks;
}

/* memory CONF P...: heap bytes (glibc's count, chunk headers included) of
 * one registry entry for model "b<p>_x" and of its parts. */
static int
cmd_memory(const char *confpath, int argc, char **argv)
{
	struct conf *conf;
	struct registry *reg;
	int a;

	if ((conf = load_conf(confpath)) == NULL ||
	    (reg = registry_new(conf)) == NULL)
		return 1;
	for (a = 0; a < argc; a++) {
		const struct conf_model *cm;
		struct reg_entry *e;
		struct terms *t = NULL;
		struct model_opts mo;
		struct model *m;
		char name[32], err[200];
		size_t h0, h1, h2, h3;
		int p = atoi(argv[a]);

		snprintf(name, sizeof(name), "b%d_x", p);
		if ((cm = conf_find_model(conf, name)) == NULL)
			return 1;
		/* A model's own part of the terms: the compiled form is
		 * shared with its section (terms_clone). */
		h0 = heap_used();
		if ((t = terms_clone(cm->terms, cm->scale_mode ==
		    CONF_SCALE_AUTO)) == NULL)
			return 1;
		h1 = heap_used();
		mo = cm->mo;
		mo.p = p;
		if ((m = model_new(&mo)) == NULL)
			return 1;
		h2 = heap_used();
		model_free(m);
		terms_free(t);
		h3 = heap_used();
		if ((e = registry_entry_new(reg, cm, name, err,
		    sizeof(err))) == NULL)
			return 1;
		printf("memory p=%d entry=%zu terms=%zu model_rls=%zu "
		    "rls=%zu other=%zu\n", p, heap_used() - h3, h1 - h0,
		    h2 - h1, sizeof(struct rls) + sizeof(double) *
		    ((size_t)(p + 1) * (size_t)(p + 1) + 2 * (size_t)p),
		    heap_used() - h3 - (h2 - h0));
		registry_entry_free(e);
	}
	registry_free(reg);
	conf_free(conf);
	return 0;
}

static void
usage(void)
{
	fprintf(stderr, "usage: bench_engine [-r RUNS] engine P...\n"
	    "       bench_engine [-r RUNS] models N...\n"
	    "       bench_engine [-r RUNS] peak\n"
	    "       bench_engine [-r RUNS] chain\n"
	    "       bench_engine memory CONF P...\n"
	    "       bench_engine [-r RUNS] parse FILE CONF\n");
}

int
main(int argc, char **argv)
{
	int runs = 5;

	if (argc > 2 && strcmp(argv[1], "-r") == 0) {
		runs = atoi(argv[2]);
		argc -= 2;
		argv += 2;
	}
	if (argc < 2 || runs < 1) {
		usage();
		return 2;
	}
	if (strcmp(argv[1], "engine") == 0)
		return cmd_engine(argc - 2, argv + 2, runs);
	if (strcmp(argv[1], "models") == 0)
		return cmd_models(argc - 2, argv + 2, runs);
	if (strcmp(argv[1], "peak") == 0)
		return cmd_peak(runs);
	if (strcmp(argv[1], "chain") == 0)
		return cmd_chain(runs);
	if (strcmp(argv[1], "memory") == 0 && argc >= 4)
		return cmd_memory(argv[2], argc - 3, argv + 3);
	if (strcmp(argv[1], "parse") == 0 && argc == 4)
		return cmd_parse(argv[2], argv[3], runs);
	usage();
	return 2;
}
