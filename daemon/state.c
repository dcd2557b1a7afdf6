/* SPDX-License-Identifier: ISC */
/*
 * state: the state directory; layouts, rules and figures in daemon/STATE.md.
 * Restore at start (checkpoint, journal replay through the registry,
 * damage kept aside), checkpoints that never hold the loop for long (a
 * copy-before-write snapshot encoded in ~1 ms slices, written by a worker:
 * tmp file, fsync, rename, directory fsync), the journal with its
 * durability policy (batched writes by a worker, one at a time), and the
 * daemon-level alarm with retries on disk errors. Not pure (libuv, files,
 * clocks, logging); the byte formats are persist.c's.
 */
#define _GNU_SOURCE	/* flock, fdatasync, O_DIRECTORY, gettid */
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <inttypes.h>
#include <math.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/file.h>
#include <sys/mman.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "cmd.h"
#include "err.h"
#include "log.h"
#include "persist.h"
#include "state.h"

#define CKPT_NAME	"models.ckpt"
#define CKPT_TMP	"models.ckpt.tmp"
#define JNL_PREFIX	"journal."
#define JNL_NAME_LEN	(sizeof(JNL_PREFIX) - 1 + 16)
#define ASIDE_DIR	"damaged"
#define CHUNK_SIZE	(4u << 20)	/* checkpoint write unit */
#define CHUNKS_AHEAD	4u	/* unwritten chunks before encoding waits;
				 * also the chunks kept for the next one */
#define SLICE_NS	1000000u	/* encode budget per loop turn */
#define JBUF_SIZE	65536u		/* first journal buffer */
#define JSPARE_MAX	2		/* written buffers kept for reuse */
#define JSPARE_CAP_MAX	(8u << 20)	/* larger ones are freed */
#define JOURNAL_BACKLOG_MAX (64u << 20)	/* unwritten journal bytes kept */
#define RETRY_MIN_MS	250u
#define RETRY_MAX_MS	5000u	/* a full disk is retried at least every 5 s */
#define WARN_ENTRIES	5		/* per-entry replay warnings logged */

/* Encoded checkpoint bytes waiting for the writer. */
struct chunk {
	struct chunk	*next;
	size_t		 len, cap;
	uint8_t		 data[];
};

/* Journal bytes for one segment, waiting for the writer. */
#define JB_OPEN		0x1u	/* create the segment file first */
#define JB_CLOSE	0x2u	/* then sync and close it */
#define JB_GAP		0x4u	/* header carries PERSIST_JNL_AFTER_GAP */

struct jbuf {
	struct jbuf	*next;
	uint64_t	 seq;
	unsigned	 flags;
	uint64_t	 upto;		/* ticket of its last entry (0: none) */
	size_t		 len, cap;
	uint8_t		*data;
};

struct jwork {
	uv_work_t	 req;
	struct state	*st;
	struct jbuf	*list;		/* one segment's buffers */
	uint64_t	 upto;
	size_t		 bytes;
	int		 err;		/* errno of the failing step */
	const char	*what;
	uint64_t	 seq;
};

struct cwork {
	uv_work_t	 req;		/* on the pool (final checkpoint only) */
	struct state	*st;
	struct chunk	*list;
	int		 first, last, abort;
	int		 pool;		/* runs on the pool, not the writer */
	uint64_t	 del_lo, del_hi;	/* segments to delete after */
	size_t		 bytes;
	int		 err;
	const char	*what;
	uint64_t	 ns;		/* time spent in the worker */
};

#define WRITER_NICE	10	/* see writer_lower */

/*
 * The checkpoint writer: a thread of its own at a low CPU priority
 * (nice 10), so that the loop thread, woken by a client, takes the CPU
 * from it. Not the libuv pool: a pool thread cannot
 * get its priority back without CAP_SYS_NICE, and journal writes run
 * there. One job at a time (struct cwork); completion comes back to the
 * loop through async. The final checkpoint at shutdown goes to the pool
 * at normal priority instead: nothing is served then, and a busy machine
 * must not hold the stop for long.
 */
struct cwriter {
	pthread_t	 thr;
	int		 started;	/* thr must be joined */
	pthread_mutex_t	 mu;
	pthread_cond_t	 cv;
	struct cwork	*job;		/* handed over, not taken yet */
	struct cwork	*done;		/* finished, not collected yet */
	int		 quit;
	const char	*prio;		/* the priority it got (set by it) */
	uv_async_t	 async;
};

/* The checkpoint being taken. */
struct ckpt {
	int		 active;	/* between start and finish */
	int		 encoding;	/* entries left to encode */
	int		 writing;	/* a cwork in flight */
	int		 opened;	/* the tmp file exists */
	int		 failed;
	int		 final;		/* the shutdown checkpoint */
	char		 err[200];
	int		 nospace;	/* it failed with ENOSPC or EDQUOT */
	uint64_t	 gen;		/* checkpoint number (.save ticket) */
	uint64_t	 epoch;		/* registry snapshot epoch */
	uint64_t	 seq;		/* first journal segment after it */
	uint64_t	 jticket;	/* journal entries it covers */
	uint64_t	 changes;	/* registry_changes at the start */
	uint64_t	 seg_lo;	/* segments [seg_lo, seq) to delete */
	struct reg_entry **ents;
	size_t		 nents, next;
	uint64_t	 nenc;
	size_t		 bytes;
	struct chunk	*head, *tail;	/* not yet handed to the writer */
	unsigned	 nchunks;	/* chunks not written yet */
	int		 waiting;	/* encoding waits for the writer */
	unsigned	 waits;
	uint64_t	 t0, stall_ns, slice_max_ns, encode_ns, write_ns;
	uint64_t	 slice_cpu_max_ns;	/* the same in thread CPU time */
	unsigned	 slices;
};

struct ckpt_stats {
	double		 at;		/* Unix time it finished */
	uint64_t	 models;
	size_t		 bytes;
	double		 ms, stall_ms, slice_max_ms, encode_ms, write_ms;
	double		 slice_cpu_max_ms;
	unsigned	 slices, waits;
	const char	*writer;	/* where it was written */
};

struct state {
	uv_loop_t	*loop;
	struct state_opts o;
	char		*dir;
	int		 dirfd;
	struct registry	*reg;
	struct state_hooks h;
	char		*conf_text;
	size_t		 conf_len;
	struct state_report rep;

	/* Journal (loop side). */
	int		 jon;		/* policy is not off */
	uint64_t	 jseq;		/* segment receiving entries */
	int		 jsuspended;	/* dropping entries until a checkpoint */
	int		 jgap;		/* the next segment follows a gap */
	struct jbuf	*jhead, *jtail;
	size_t		 jqueued;	/* bytes in jhead.. */
	struct jbuf	*jspare;	/* written buffers to reuse */
	unsigned	 njspare;
	uint64_t	 appended;	/* tickets handed out */
	uint64_t	 durable;	/* tickets safe: see set_durable */
	uint64_t	 written;	/* tickets whose journal write succeeded */
	uint64_t	 covered;	/* tickets in a written checkpoint */
	uint64_t	 gap_seq;	/* a segment after a gap, not yet closed
					 * by a checkpoint (0: none) */
	uint64_t	 gap_from;	/* its first ticket */
	uint64_t	 failed;	/* tickets whose write failed */
	int		 jbusy;
	int		 jfailing;
	char		 jerr[200];
	unsigned	 jretry_ms;
	int		 jretry_armed;
	uint64_t	 jseg_lo;	/* oldest segment that may exist */
	uint64_t	 jbytes, jwrites, jentries;
	struct jwork	 jw;
	/* Journal (worker side; only one job runs at a time). */
	int		 jfd;
	uint64_t	 jfd_seq;
	off_t		 joff;

	/* Checkpoints. */
	struct ckpt	 ck;
	struct cwork	 cw;
	struct cwriter	 wr;
	struct chunk	*spare;		/* chunks kept for reuse */
	unsigned	 nspare;
	int		 ck_fd;		/* worker side */
	uint64_t	 ck_gen;	/* last generation started */
	uint64_t	 ck_done_gen;	/* last finished, well or not */
	uint64_t	 ck_ok_gen;	/* last written */
	uint64_t	 saved_changes;	/* registry_changes it covered */
	int		 ck_pending;	/* another was asked for meanwhile */
	int		 cfailing;
	int		 cnospace;	/* the last checkpoint found no space */
	char		 cerr[200];
	unsigned	 cretry_ms;
	uint64_t	 ck_count, ck_failures;
	struct ckpt_stats last;

	double		 alarm_since;	/* 0 = no alarm */

	uv_timer_t	 ck_timer, ck_retry, j_timer, j_retry;
	uv_idle_t	 idle;
	uv_check_t	 check;
	int		 handles;	/* open handles */
	int		 shutting, shut_stage, shut_tries, closed;
	void		(*done_cb)(void *);
	void		*done_arg;
};

static double
now_real(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_REALTIME, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* CPU time of the calling thread in ns: a slice's own work, apart from
 * the time the machine gave to other threads meanwhile. */
static uint64_t
thread_ns(void)
{
	struct timespec ts;

	if (clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts) != 0)
		return 0;
	return (uint64_t)ts.tv_sec * 1000000000u + (uint64_t)ts.tv_nsec;
}

static void
seg_name(char *buf, size_t len, uint64_t seq)
{
	snprintf(buf, len, JNL_PREFIX "%016" PRIx64, seq);
}

/* "journal.<16 hex>" -> seq; 0 when name is not a segment name. */
static uint64_t
seg_parse(const char *name)
{
	uint64_t v = 0;
	size_t i;

	if (strlen(name) != JNL_NAME_LEN ||
	    strncmp(name, JNL_PREFIX, sizeof(JNL_PREFIX) - 1) != 0)
		return 0;
	for (i = sizeof(JNL_PREFIX) - 1; i < JNL_NAME_LEN; i++) {
		char c = name[i];

		if (c >= '0' && c <= '9')
			v = v << 4 | (uint64_t)(c - '0');
		else if (c >= 'a' && c <= 'f')
			v = v << 4 | (uint64_t)(c - 'a' + 10);
		else
			return 0;
	}
	return v;
}

static int
write_all(int fd, const uint8_t *p, size_t len)
{
	ssize_t n;

	while (len > 0) {
		if ((n = write(fd, p, len)) < 0) {
			if (errno == EINTR)
				continue;
			return -1;
		}
		p += n;
		len -= (size_t)n;
	}
	return 0;
}

static int
pwrite_all(int fd, const uint8_t *p, size_t len, off_t off)
{
	ssize_t n;

	while (len > 0) {
		if ((n = pwrite(fd, p, len, off)) < 0) {
			if (errno == EINTR)
				continue;
			return -1;
		}
		p += n;
		len -= (size_t)n;
		off += n;
	}
	return 0;
}

/* ---- restore ---- */

/* A file mapped read-only (len 0: nothing mapped). */
struct mapped {
	const uint8_t	*p;
	size_t		 len;
};

static int
map_file(int dirfd, const char *name, struct mapped *m)
{
	struct stat sb;
	void *p;
	int fd, saved;

	m->p = NULL;
	m->len = 0;
	if ((fd = openat(dirfd, name, O_RDONLY | O_CLOEXEC)) < 0)
		return -1;
	if (fstat(fd, &sb) != 0)
		goto fail;
	if (sb.st_size > 0) {
		p = mmap(NULL, (size_t)sb.st_size, PROT_READ, MAP_PRIVATE, fd,
		    0);
		if (p == MAP_FAILED)
			goto fail;
		m->p = p;
		m->len = (size_t)sb.st_size;
	}
	close(fd);
	return 0;
fail:
	saved = errno;
	close(fd);
	errno = saved;
	return -1;
}

static void
unmap_file(struct mapped *m)
{
	if (m->len > 0)
		munmap((void *)(uintptr_t)m->p, m->len);
	m->p = NULL;
	m->len = 0;
}

struct rctx {
	struct state_report *rep;
	struct registry	*reg;
	const struct conf *conf;	/* the daemon's, or NULL (verify) */
	int		 dirfd;
	const char	*dir;
	int		 dry;		/* verify: change nothing */
	void		(*say)(void *arg, int level, const char *msg);
	void		*sarg;
	struct conf	**confs;	/* configs from the journal */
	size_t		 nconfs;
	int		 have_ckpt;	/* models.ckpt exists */
	int		 hdr_ok;	/* and its header is good */
	int		 ckpt_bad;	/* some model may be missing */
	uint64_t	 ckpt_seq;
	uint64_t	*segs;		/* segment numbers, sorted */
	size_t		 nsegs;
	int		 have_tmp;
	int		 jstop;		/* replay stopped early (damage) */
	int		 last_gone;	/* the last segment was removed */
	unsigned	 warned;
	double		 xbuf[PROTO_MAX_VALUES + 1];
};

static void say(struct rctx *rc, int level, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static void
say(struct rctx *rc, int level, const char *fmt, ...)
{
	char buf[600];
	va_list ap;

	va_start(ap, fmt);
	vsnprintf(buf, sizeof(buf), fmt, ap);
	va_end(ap);
	rc->say(rc->sarg, level, buf);
}

/* Keep a damaged file: a hard link damaged/NAME.<UTC time>[.k]. */
static void
aside(struct rctx *rc, const char *name)
{
	char stamp[32], to[128];
	struct tm tm;
	time_t now = time(NULL);
	int k;

	if (rc->dry)
		return;
	if (mkdirat(rc->dirfd, ASIDE_DIR, 0700) != 0 && errno != EEXIST) {
		say(rc, LOG_LVL_ERR, "%s/%s: cannot create: %s; %s stays as it "
		    "is", rc->dir, ASIDE_DIR, strerror(errno), name);
		return;
	}
	gmtime_r(&now, &tm);
	strftime(stamp, sizeof(stamp), "%Y%m%dT%H%M%SZ", &tm);
	for (k = 0; k < 100; k++) {
		if (k == 0)
			snprintf(to, sizeof(to), ASIDE_DIR "/%s.%s", name,
			    stamp);
		else
			snprintf(to, sizeof(to), ASIDE_DIR "/%s.%s.%d", name,
			    stamp, k);
		if (linkat(rc->dirfd, name, rc->dirfd, to, 0) == 0) {
			say(rc, LOG_LVL_WARNING, "%s/%s: kept aside as %s/%s",
			    rc->dir, name, rc->dir, to);
			return;
		}
		if (errno != EEXIST)
			break;
	}
	say(rc, LOG_LVL_ERR, "%s/%s: cannot keep it aside: %s", rc->dir, name,
	    strerror(errno));
}

static int
cmp_u64(const void *a, const void *b)
{
	uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;

	return x < y ? -1 : x > y;
}

/* List the directory: checkpoint, leftover tmp, journal segments. */
static int
scan_dir(struct rctx *rc, char *errbuf, size_t errlen)
{
	struct dirent *de;
	uint64_t *nv, seq;
	size_t cap = 0;
	DIR *d;
	int fd;

	if ((fd = dup(rc->dirfd)) < 0 || (d = fdopendir(fd)) == NULL) {
		err_printf(errbuf, errlen, "%s: cannot list: %s", rc->dir,
		    strerror(errno));
		if (fd >= 0)
			close(fd);
		return E_IO;
	}
	rewinddir(d);
	errno = 0;
	while ((de = readdir(d)) != NULL) {
		if (strcmp(de->d_name, CKPT_NAME) == 0)
			rc->have_ckpt = 1;
		else if (strcmp(de->d_name, CKPT_TMP) == 0)
			rc->have_tmp = 1;
		else if ((seq = seg_parse(de->d_name)) != 0) {
			if (rc->nsegs == cap) {
				cap = cap ? cap * 2 : 16;
				if ((nv = realloc(rc->segs, cap *
				    sizeof(*nv))) == NULL) {
					closedir(d);
					err_printf(errbuf, errlen, "out of "
					    "memory");
					return E_NOMEM;
				}
				rc->segs = nv;
			}
			rc->segs[rc->nsegs++] = seq;
		}
		errno = 0;
	}
	if (errno != 0) {
		err_printf(errbuf, errlen, "%s: cannot list: %s", rc->dir,
		    strerror(errno));
		closedir(d);
		return E_IO;
	}
	closedir(d);
	if (rc->nsegs > 0)
		qsort(rc->segs, rc->nsegs, sizeof(*rc->segs), cmp_u64);
	return 0;
}

/* " (model \"NAME\")" when a damaged block still shows a plausible name,
 * so the log says which model was lost; else "". */
static const char *
block_name(const uint8_t *b, size_t len, char *buf, size_t blen)
{
	char nm[MODEL_NAME_MAX + 1];

	buf[0] = '\0';
	if (persist_model_peek_name(b, len, nm) == 0)
		snprintf(buf, blen, " (model \"%s\", not restored)", nm);
	return buf;
}

/* Read models.ckpt into the registry. Fatal only for a newer format, an
 * unreadable file or no memory; damage is reported and set aside. */
static int
load_blocks(struct rctx *rc, struct persist_cache *pc, char *errbuf,
    size_t errlen)
{
	struct persist_ckpt_hdr h;
	struct reg_entry *e;
	struct mapped mf;
	char err[200], who[MODEL_NAME_MAX + 40];
	size_t off, bl;
	uint64_t nblocks = 0, n;
	int r, ended = 0, damage = 0, truncated = 0;
	const char *path = CKPT_NAME;

	if (!rc->have_ckpt)
		return 0;
	if (map_file(rc->dirfd, path, &mf) != 0) {
		err_printf(errbuf, errlen, "%s/%s: cannot read: %s", rc->dir,
		    path, strerror(errno));
		return E_IO;
	}
	r = persist_ckpt_hdr_decode(mf.p, mf.len, &h);
	if (r == E_VERSION) {
		err_printf(errbuf, errlen, "%s/%s: format version %" PRIu32
		    " is newer than this coefd reads (%d); refusing to start "
		    "(run the newer coefd, or move the directory away)",
		    rc->dir, path, h.version, PERSIST_VERSION);
		unmap_file(&mf);
		return E_VERSION;
	}
	if (r != 0) {
		say(rc, LOG_LVL_ERR, "%s/%s: offset 0: %s; scanning for "
		    "intact model blocks, the journal cannot be replayed",
		    rc->dir, path, mf.len == 0 ? "the file is empty" :
		    r == PERSIST_SHORT ? "the file is shorter than its header" :
		    "the file header is damaged (magic or checksum)");
		damage = 1;
		off = persist_resync(mf.p, mf.len, 0);
	} else {
		rc->hdr_ok = 1;
		rc->ckpt_seq = h.seq;
		off = PERSIST_CKPT_HDR_LEN;
	}
	while (off < mf.len) {
		const uint8_t *b = mf.p + off;
		size_t left = mf.len - off;

		if (persist_ckpt_is_end(b, left)) {
			if (persist_ckpt_end_decode(b, left, &n) == 0) {
				ended = 1;
				if (rc->hdr_ok && n != h.nmodels) {
					say(rc, LOG_LVL_ERR, "%s/%s: offset "
					    "%zu: trailer counts %" PRIu64
					    " models, the header %" PRIu64,
					    rc->dir, path, off, n, h.nmodels);
					damage = 1;
				}
				break;
			}
			say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: the trailer "
			    "is damaged or not at the end", rc->dir, path,
			    off);
			damage = 1;
			off = persist_resync(mf.p, mf.len, off + 1);
			continue;
		}
		r = persist_model_check(b, left, &bl);
		if (r == 0) {
			nblocks++;
			r = persist_model_decode_checked(b, bl, pc, &e, err,
			    sizeof(err));
			if (r == E_NOMEM) {
				unmap_file(&mf);
				err_printf(errbuf, errlen, "out of memory "
				    "restoring %s", path);
				return E_NOMEM;
			}
			if (r != 0) {
				say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: model "
				    "block cannot be restored: %s%s", rc->dir,
				    path, off, err, block_name(b, bl, who,
				    sizeof(who)));
				rc->rep->damaged++;
				damage = 1;
			} else if (registry_adopt(rc->reg, e) != 0) {
				say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: model "
				    "\"%s\" appears twice; the second copy is "
				    "ignored", rc->dir, path, off, e->name);
				registry_entry_free(e);
				damage = 1;
			} else {
				rc->rep->models++;
			}
			off += bl;
			continue;
		}
		if (r == PERSIST_SHORT) {
			say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: the file ends "
			    "inside a model block (truncated)", rc->dir, path,
			    off);
			truncated = 1;
			rc->rep->damaged++;
			damage = 1;
			break;
		}
		say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: model block is "
		    "damaged (magic, length or checksum); skipped%s", rc->dir,
		    path, off, block_name(b, left, who, sizeof(who)));
		rc->rep->damaged++;
		damage = 1;
		off = persist_resync(mf.p, mf.len, off + 1);
	}
	if (!ended && !truncated && mf.len > 0) {
		say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: no trailer: the file "
		    "is truncated", rc->dir, path, mf.len);
		damage = 1;
	}
	if (rc->hdr_ok && nblocks != h.nmodels) {
		say(rc, LOG_LVL_ERR, "%s/%s: the header lists %" PRIu64
		    " models, %" PRIu64 " intact blocks were found", rc->dir,
		    path, h.nmodels, nblocks);
		if (h.nmodels > nblocks && rc->rep->damaged <
		    h.nmodels - nblocks)
			rc->rep->damaged = h.nmodels - nblocks;
		damage = 1;
	}
	unmap_file(&mf);
	if (damage) {
		rc->ckpt_bad = 1;
		rc->rep->damage = 1;
		aside(rc, path);
	}
	return 0;
}

/* Restore the checkpoint's models; the models of one term list share its
 * compiled form, compiled once (persist_cache). */
static int
load_ckpt(struct rctx *rc, char *errbuf, size_t errlen)
{
	struct persist_cache *pc;
	int r;

	if ((pc = persist_cache_new()) == NULL) {
		err_printf(errbuf, errlen, "out of memory restoring %s",
		    CKPT_NAME);
		return E_NOMEM;
	}
	r = load_blocks(rc, pc, errbuf, errlen);
	persist_cache_free(pc);
	return r;
}

static int
all_zero(const uint8_t *p, size_t len)
{
	while (len > 0 && *p == 0) {
		p++;
		len--;
	}
	return len == 0;
}

static void
warn_entry(struct rctx *rc, const char *seg, size_t off, const char *why)
{
	if (rc->warned++ < WARN_ENTRIES)
		say(rc, LOG_LVL_WARNING, "%s/%s: offset %zu: entry not "
		    "applied: %s", rc->dir, seg, off, why);
}

/* Apply one journal entry through the registry. */
static int
apply_entry(struct rctx *rc, const char *seg, size_t off,
    const struct persist_jentry *je)
{
	struct conf_error ce;
	struct reg_result res;
	struct reg_entry *e = NULL;
	struct conf *c, **nc;
	char err[PROTO_DETAIL_MAX];

	rc->rep->entries++;
	if (je->type == PERSIST_J_CONF || je->type == PERSIST_J_RELOAD) {
		memset(&ce, 0, sizeof(ce));
		if (conf_parse(je->text, je->textlen, &c, &ce) != 0) {
			err_printf(err, sizeof(err), "the saved configuration "
			    "does not parse (line %d: %s); the previous one "
			    "stays", ce.line, ce.msg);
			warn_entry(rc, seg, off, err);
			rc->rep->skipped++;
			return 0;
		}
		if ((nc = realloc(rc->confs, (rc->nconfs + 1) *
		    sizeof(*nc))) == NULL) {
			conf_free(c);
			return E_NOMEM;
		}
		rc->confs = nc;
		rc->confs[rc->nconfs++] = c;
		registry_set_conf(rc->reg, c, NULL, NULL, NULL);
		return 0;
	}
	e = registry_find(rc->reg, je->name, je->namelen);
	if (e == NULL && (rc->ckpt_bad || je->type != PERSIST_J_RECORD)) {
		/* The model may be one the checkpoint lost: applying its
		 * later records to a fresh model would be garbage. */
		warn_entry(rc, seg, off, "the model is not in the restored "
		    "state");
		rc->rep->skipped++;
		return 0;
	}
	switch (je->type) {
	case PERSIST_J_RECORD:
		if (registry_apply(rc->reg, je->name, je->namelen, je->x,
		    je->nx, je->t, &res) != 0) {
			warn_entry(rc, seg, off, res.detail);
			rc->rep->skipped++;
		}
		break;
	case PERSIST_J_PIN:
		if (registry_pin(rc->reg, e, je->t) != 0) {
			warn_entry(rc, seg, off, "the model cannot be pinned");
			rc->rep->skipped++;
		}
		break;
	case PERSIST_J_FREEZE:
		registry_freeze(rc->reg, e, je->on);
		break;
	case PERSIST_J_RESET:
		if (registry_rebuild(rc->reg, e, err, sizeof(err)) != 0) {
			warn_entry(rc, seg, off, err);
			rc->rep->skipped++;
		}
		break;
	default:
		break;
	}
	return 0;
}

/* Cut a torn tail: the segment keeps its first len bytes. */
static void
cut_tail(struct rctx *rc, const char *name, size_t len)
{
	int fd;

	if (rc->dry)
		return;
	if ((fd = openat(rc->dirfd, name, O_WRONLY | O_CLOEXEC)) < 0 ||
	    ftruncate(fd, (off_t)len) != 0 || fsync(fd) != 0)
		say(rc, LOG_LVL_WARNING, "%s/%s: cannot cut the torn tail: %s",
		    rc->dir, name, strerror(errno));
	if (fd >= 0)
		close(fd);
}

/* Replay one segment. 0 = replayed (maybe a torn tail cut), 1 = damage
 * (stop replaying), < 0 fatal. */
static int
replay_segment(struct rctx *rc, uint64_t seq, int last, char *errbuf,
    size_t errlen)
{
	struct persist_jnl_hdr h;
	struct persist_jentry je;
	struct mapped mf;
	char name[JNL_NAME_LEN + 1];
	size_t off, used;
	int r;

	seg_name(name, sizeof(name), seq);
	if (map_file(rc->dirfd, name, &mf) != 0) {
		err_printf(errbuf, errlen, "%s/%s: cannot read: %s", rc->dir,
		    name, strerror(errno));
		return E_IO;
	}
	r = persist_jnl_hdr_decode(mf.p, mf.len, &h);
	if (r == E_VERSION) {
		err_printf(errbuf, errlen, "%s/%s: format version %" PRIu32
		    " is newer than this coefd reads (%d); refusing to start",
		    rc->dir, name, h.version, PERSIST_VERSION);
		unmap_file(&mf);
		return E_VERSION;
	}
	if (r == PERSIST_SHORT && last) {
		/* Created, header not (all) written: a crash at its start.
		 * Removed, and its number used again, so the numbering has
		 * no hole. */
		say(rc, LOG_LVL_NOTICE, "%s/%s: segment cut inside its header "
		    "(torn at creation); %s", rc->dir, name, rc->dry ?
		    "ignored" : "removed");
		rc->rep->torn++;
		unmap_file(&mf);
		if (!rc->dry && unlinkat(rc->dirfd, name, 0) == 0)
			rc->last_gone = 1;
		return 0;
	}
	if (r != 0 || h.seq != seq) {
		say(rc, LOG_LVL_ERR, "%s/%s: offset 0: %s; it and later "
		    "segments are not replayed", rc->dir, name, r != 0 ?
		    "segment header is damaged" : "segment header names "
		    "another segment");
		unmap_file(&mf);
		return 1;
	}
	if ((h.flags & PERSIST_JNL_AFTER_GAP) &&
	    !(rc->hdr_ok && rc->ckpt_seq == seq)) {
		say(rc, LOG_LVL_ERR, "%s/%s: the segment follows a journal "
		    "gap (entries were lost while the disk failed) and the "
		    "checkpoint that closed the gap is not here; it and later "
		    "segments are not replayed", rc->dir, name);
		unmap_file(&mf);
		return 1;
	}
	rc->rep->segments++;
	off = PERSIST_JNL_HDR_LEN;
	while (off < mf.len) {
		r = persist_jentry_decode(mf.p + off, mf.len - off, &used, &je,
		    rc->xbuf);
		if (r == 0) {
			if ((r = apply_entry(rc, name, off, &je)) != 0) {
				unmap_file(&mf);
				err_printf(errbuf, errlen, "out of memory");
				return r;
			}
			off += used;
			continue;
		}
		if (last && (r == PERSIST_SHORT ||
		    all_zero(mf.p + off, mf.len - off))) {
			say(rc, LOG_LVL_NOTICE, "%s/%s: offset %zu: torn tail "
			    "of %zu bytes (an interrupted write)%s", rc->dir,
			    name, off, mf.len - off, rc->dry ? "" : "; cut");
			rc->rep->torn++;
			unmap_file(&mf);
			cut_tail(rc, name, off);
			return 0;
		}
		say(rc, LOG_LVL_ERR, "%s/%s: offset %zu: %s; this and later "
		    "entries are not replayed", rc->dir, name, off,
		    r == PERSIST_SHORT ? "entry cut short in a segment that "
		    "is not the last" : "entry is damaged (length or "
		    "checksum)");
		unmap_file(&mf);
		return 1;
	}
	unmap_file(&mf);
	return 0;
}

/* Replay the segments that follow the checkpoint. */
static int
replay(struct rctx *rc, char *errbuf, size_t errlen)
{
	char name[JNL_NAME_LEN + 1];
	uint64_t start, expect;
	size_t i, first;
	int r, stop = 0;

	if (rc->nsegs == 0)
		return 0;
	if (rc->have_ckpt && !rc->hdr_ok) {
		say(rc, LOG_LVL_ERR, "%s: the checkpoint header is damaged, "
		    "so the journal cannot be placed after it; no segment "
		    "is replayed", rc->dir);
		first = 0;
		stop = 1;
		goto aside_rest;
	}
	start = rc->hdr_ok ? rc->ckpt_seq : rc->segs[0];
	if (!rc->have_ckpt && start != 1) {
		say(rc, LOG_LVL_ERR, "%s: the journal starts at segment %"
		    PRIu64 " but there is no checkpoint: the state before it "
		    "is lost; no segment is replayed", rc->dir, start);
		first = 0;
		stop = 1;
		goto aside_rest;
	}
	for (first = 0; first < rc->nsegs && rc->segs[first] < start; first++)
		;
	expect = start;
	for (i = first; i < rc->nsegs; i++) {
		if (rc->segs[i] != expect) {
			seg_name(name, sizeof(name), expect);
			say(rc, LOG_LVL_ERR, "%s/%s: missing; later segments "
			    "are not replayed", rc->dir, name);
			stop = 1;
			first = i;
			goto aside_rest;
		}
		r = replay_segment(rc, rc->segs[i], i + 1 == rc->nsegs, errbuf,
		    errlen);
		if (r < 0)
			return r;
		if (r > 0) {
			stop = 1;
			first = i;
			goto aside_rest;
		}
		expect++;
	}
	return 0;
aside_rest:
	if (stop) {
		rc->rep->damage = 1;
		rc->jstop = 1;
		for (i = first; i < rc->nsegs; i++) {
			seg_name(name, sizeof(name), rc->segs[i]);
			aside(rc, name);
		}
	}
	return 0;
}

/*
 * Restore the directory into rc->reg: checkpoint, journal, then the
 * current config applied (as a reload would). Fills rc->rep. Returns 0
 * (damage included: reported and set aside), E_VERSION, E_IO or E_NOMEM
 * with a message.
 */
static int
restore(struct rctx *rc, char *errbuf, size_t errlen)
{
	uint64_t t0 = uv_hrtime(), last;
	size_t i;
	int r;

	if ((r = scan_dir(rc, errbuf, errlen)) != 0)
		return r;
	if (rc->have_tmp) {
		say(rc, LOG_LVL_NOTICE, "%s/%s: an interrupted checkpoint; %s",
		    rc->dir, CKPT_TMP, rc->dry ? "ignored" : "removed");
		if (!rc->dry)
			unlinkat(rc->dirfd, CKPT_TMP, 0);
	}
	if ((r = load_ckpt(rc, errbuf, errlen)) != 0)
		goto out;
	if ((r = replay(rc, errbuf, errlen)) != 0)
		goto out;
	if (rc->conf != NULL)
		registry_set_conf(rc->reg, rc->conf, &rc->rep->kept,
		    &rc->rep->stale, &rc->rep->orphan);
	last = rc->nsegs > 0 ? rc->segs[rc->nsegs - 1] : 0;
	rc->rep->next_seq = rc->last_gone ? last : last + 1;
	if (rc->hdr_ok && rc->ckpt_seq > rc->rep->next_seq)
		rc->rep->next_seq = rc->ckpt_seq;
	if (rc->rep->next_seq == 0)
		rc->rep->next_seq = 1;
out:
	/* The registry no longer points at the journal's configs once the
	 * current one is in (verify keeps them: its registry is freed
	 * first by the caller). */
	if (rc->conf != NULL) {
		if (r != 0)
			registry_use_conf(rc->reg, rc->conf);
		for (i = 0; i < rc->nconfs; i++)
			conf_free(rc->confs[i]);
		free(rc->confs);
		rc->confs = NULL;
		rc->nconfs = 0;
	}
	rc->rep->ms = (double)(uv_hrtime() - t0) / 1e6;
	return r;
}

static void
say_log(void *arg, int level, const char *msg)
{
	(void)arg;
	switch (level) {
	case LOG_LVL_ERR:
		log_errx("%s", msg);
		break;
	case LOG_LVL_WARNING:
		log_warnx("%s", msg);
		break;
	case LOG_LVL_NOTICE:
		log_notice("%s", msg);
		break;
	default:
		log_info("%s", msg);
		break;
	}
}

static void
say_file(void *arg, int level, const char *msg)
{
	fprintf(arg, "%s: %s\n", level <= LOG_LVL_ERR ? "damage" :
	    level == LOG_LVL_WARNING ? "warning" : "note", msg);
}

/*
 * state_verify: check the state directory dir without changing it: read
 * the checkpoint and replay the journal into a scratch registry exactly as
 * a start would, printing every finding (file and offset) and a summary to
 * out. Returns 0 when everything is intact (a torn journal tail, normal
 * after a crash, is only noted), 1 on damage or when the directory cannot
 * be read, 2 for a format newer than this build reads.
 */
int
state_verify(const char *dir, FILE *out)
{
	struct state_report rep;
	struct registry *reg;
	struct rctx rc;
	char err[400];
	size_t i;
	int r, dirfd;

	memset(&rep, 0, sizeof(rep));
	if ((dirfd = open(dir, O_RDONLY | O_DIRECTORY | O_CLOEXEC)) < 0) {
		fprintf(out, "damage: %s: cannot open: %s\n", dir,
		    strerror(errno));
		return 1;
	}
	if ((reg = registry_new(NULL)) == NULL) {
		close(dirfd);
		fprintf(out, "damage: out of memory\n");
		return 1;
	}
	memset(&rc, 0, sizeof(rc));
	rc.rep = &rep;
	rc.reg = reg;
	rc.dirfd = dirfd;
	rc.dir = dir;
	rc.dry = 1;
	rc.say = say_file;
	rc.sarg = out;
	r = restore(&rc, err, sizeof(err));
	registry_free(reg);
	for (i = 0; i < rc.nconfs; i++)
		conf_free(rc.confs[i]);
	free(rc.confs);
	free(rc.segs);
	close(dirfd);
	if (r != 0) {
		fprintf(out, "damage: %s\n", err);
		return r == E_VERSION ? 2 : 1;
	}
	fprintf(out, "%s: %s: %" PRIu64 " models restored, %" PRIu64
	    " damaged; %" PRIu64 " journal segments, %" PRIu64 " entries "
	    "replayed, %" PRIu64 " not applied, %" PRIu64 " torn tails\n",
	    dir, rep.damage ? "DAMAGED" : "ok", rep.models, rep.damaged,
	    rep.segments, rep.entries, rep.skipped, rep.torn);
	return rep.damage ? 1 : 0;
}

/* ---- the state alarm ---- */

static void ckpt_start_soon(struct state *st);
static void shutdown_step(struct state *st);

static void
update_alarm(struct state *st)
{
	int bad = st->jfailing || st->jsuspended || st->cfailing;

	if (bad && st->alarm_since == 0) {
		st->alarm_since = now_real();
	} else if (!bad && st->alarm_since != 0) {
		st->alarm_since = 0;
		log_notice("state %s: writes succeed again; state alarm "
		    "cleared", st->dir);
	}
}

static void
progress(struct state *st)
{
	if (st->h.progress != NULL)
		st->h.progress(st->h.arg);
}

static unsigned
backoff(unsigned cur)
{
	if (cur == 0)
		return RETRY_MIN_MS;
	return cur >= RETRY_MAX_MS / 2 ? RETRY_MAX_MS : cur * 2;
}

/* ---- journal ---- */

/*
 * What is safe: entries in a written checkpoint, and entries written to
 * the journal, except those in a segment that follows a gap while no
 * checkpoint has closed the gap (a replay would stop at that segment).
 */
static void
set_durable(struct state *st)
{
	uint64_t w = st->written;

	if (st->gap_seq != 0 && w >= st->gap_from)
		w = st->gap_from - 1;
	st->durable = w > st->covered ? w : st->covered;
}

static struct jbuf *
jbuf_new(uint64_t seq, unsigned flags, size_t cap)
{
	struct jbuf *b;

	if ((b = calloc(1, sizeof(*b))) == NULL)
		return NULL;
	if (cap > 0 && (b->data = malloc(cap)) == NULL) {
		free(b);
		return NULL;
	}
	b->seq = seq;
	b->flags = flags;
	b->cap = cap;
	return b;
}

static void
jbuf_free(struct jbuf *b)
{
	free(b->data);
	free(b);
}

/*
 * A buffer for segment seq with room for n bytes: a spare one when one is
 * large enough, else a new one of at least JBUF_SIZE. Reusing the written
 * buffers keeps their pages mapped: freeing and allocating them again
 * costs a page fault per page on both threads at every write.
 */
static struct jbuf *
jbuf_get(struct state *st, uint64_t seq, unsigned flags, size_t n)
{
	struct jbuf *b, **pp;

	for (pp = &st->jspare; (b = *pp) != NULL; pp = &b->next)
		if (b->cap >= n)
			break;
	if (b == NULL)
		return jbuf_new(seq, flags, n > JBUF_SIZE ? n : JBUF_SIZE);
	*pp = b->next;
	st->njspare--;
	b->next = NULL;
	b->seq = seq;
	b->flags = flags;
	b->upto = 0;
	b->len = 0;
	return b;
}

/* Done with b: keep it as a spare (the JSPARE_MAX largest) or free it. */
static void
jbuf_put(struct state *st, struct jbuf *b)
{
	struct jbuf *s, **pp, **small;

	if (b->cap < JBUF_SIZE || b->cap > JSPARE_CAP_MAX) {
		jbuf_free(b);
		return;
	}
	if (st->njspare >= JSPARE_MAX) {
		small = &st->jspare;
		for (pp = &st->jspare; *pp != NULL; pp = &(*pp)->next)
			if ((*pp)->cap < (*small)->cap)
				small = pp;
		if ((*small)->cap >= b->cap) {
			jbuf_free(b);
			return;
		}
		s = *small;
		*small = s->next;
		jbuf_free(s);
		st->njspare--;
	}
	b->next = st->jspare;
	st->jspare = b;
	st->njspare++;
}

static void
jqueue(struct state *st, struct jbuf *b)
{
	if (st->jtail != NULL)
		st->jtail->next = b;
	else
		st->jhead = b;
	st->jtail = b;
	st->jqueued += b->len;
}

/* Drop queued buffers of segments a checkpoint covers (seq < jseg_lo). */
static void
jprune(struct state *st)
{
	struct jbuf *b, *prev = NULL, *next;

	for (b = st->jhead; b != NULL; b = next) {
		next = b->next;
		if (b->seq >= st->jseg_lo) {
			prev = b;
			continue;
		}
		if (prev != NULL)
			prev->next = next;
		else
			st->jhead = next;
		st->jqueued -= b->len;
		jbuf_put(st, b);
	}
	st->jtail = prev;
	if (st->jhead == NULL) {
		st->jtail = NULL;
		if (st->jfailing && !st->jbusy) {
			/* Nothing left to retry: a checkpoint holds it all. */
			st->jfailing = 0;
			uv_timer_stop(&st->j_retry);
		}
	}
}

/* Drop every queued buffer and stop journaling until the next checkpoint
 * (whose segment is then marked as following a gap). */
static void
jdrop(struct state *st, const char *why)
{
	struct jbuf *b, *next;

	for (b = st->jhead; b != NULL; b = next) {
		next = b->next;
		jbuf_put(st, b);
	}
	st->jhead = st->jtail = NULL;
	st->jqueued = 0;
	/* Nothing is left to retry; the alarm stays up while suspended. */
	st->jfailing = 0;
	uv_timer_stop(&st->j_retry);
	if (!st->jsuspended)
		log_errx("state %s: journal suspended until the next "
		    "checkpoint: %s; records are applied in memory but not "
		    "journaled", st->dir, why);
	st->jsuspended = 1;
	st->jgap = 1;
	st->failed = st->appended;
	update_alarm(st);
	ckpt_start_soon(st);
}

/* A buffer of the current segment with room for n more bytes. */
static struct jbuf *
jroom(struct state *st, size_t n)
{
	struct jbuf *b = st->jtail;
	uint8_t *nd;
	size_t cap;

	if (b == NULL || b->seq != st->jseq || (b->flags & JB_CLOSE)) {
		if ((b = jbuf_get(st, st->jseq, 0, n)) == NULL)
			return NULL;
		jqueue(st, b);
		return b;
	}
	if (b->cap - b->len >= n)
		return b;
	for (cap = b->cap; cap - b->len < n; cap *= 2)
		;
	if ((nd = realloc(b->data, cap)) == NULL)
		return NULL;
	b->data = nd;
	b->cap = cap;
	return b;
}

/* Append one entry to the current segment's queue; it gets the next
 * ticket. */
static void
jappend(struct state *st, const struct persist_jentry *je)
{
	struct jbuf *b;
	size_t n;

	if (!st->jon)
		return;
	st->appended++;
	if (st->jsuspended) {
		st->failed = st->appended;
		return;
	}
	if ((n = persist_jentry_size(je)) == 0 || (b = jroom(st, n)) == NULL ||
	    persist_jentry_encode(je, b->data + b->len, n) != 0) {
		jdrop(st, n == 0 ? "an entry cannot be encoded" :
		    "out of memory");
		return;
	}
	b->len += n;
	b->upto = st->appended;
	st->jqueued += n;
	st->jentries++;
	if (st->jqueued > JOURNAL_BACKLOG_MAX)
		jdrop(st, st->jfailing ? "more than 64 MiB could not be "
		    "written" : "more than 64 MiB waits for the disk");
}

/* Worker: write one segment's buffers (creating the file first when the
 * segment starts), fdatasync, close it when it ends. On failure the next
 * attempt rewrites the same bytes at the same offset. */
static void
jwork_cb(uv_work_t *req)
{
	struct jwork *w = req->data;
	struct state *st = w->st;
	char name[JNL_NAME_LEN + 1];
	struct jbuf *b;
	off_t off0 = st->joff;
	int opened = 0, fd, closing = 0;

	for (b = w->list; b != NULL; b = b->next) {
		if (b->flags & JB_OPEN) {
			if (st->jfd >= 0) {
				/* Whatever a dropped backlog left beyond the
				 * good length goes. */
				if (ftruncate(st->jfd, st->joff) != 0)
					(void)0;
				close(st->jfd);
				st->jfd = -1;
			}
			seg_name(name, sizeof(name), b->seq);
			fd = openat(st->dirfd, name, O_WRONLY | O_CREAT |
			    O_TRUNC | O_CLOEXEC, 0600);
			if (fd < 0) {
				w->what = "create";
				goto fail;
			}
			st->jfd = fd;
			st->jfd_seq = b->seq;
			st->joff = 0;
			off0 = 0;
			opened = 1;
		}
		closing |= (b->flags & JB_CLOSE) != 0;
		if (b->len == 0)
			continue;
		if (st->jfd < 0 || st->jfd_seq != b->seq) {
			errno = EBADF;
			w->what = "write (segment not open)";
			goto fail;
		}
		if (pwrite_all(st->jfd, b->data, b->len, st->joff) != 0) {
			w->what = "write";
			goto fail;
		}
		st->joff += (off_t)b->len;
	}
	if (st->jfd >= 0 && st->jfd_seq == w->seq) {
		if (closing && ftruncate(st->jfd, st->joff) != 0) {
			w->what = "truncate";
			goto fail;
		}
		if (fdatasync(st->jfd) != 0) {
			w->what = "fsync";
			goto fail;
		}
	}
	if (opened && fsync(st->dirfd) != 0) {
		w->what = "fsync of the directory";
		goto fail;
	}
	if (closing && st->jfd >= 0 && st->jfd_seq == w->seq) {
		close(st->jfd);
		st->jfd = -1;
	}
	return;
fail:
	w->err = errno != 0 ? errno : EIO;
	if (opened && st->jfd >= 0) {
		/* The next attempt creates the segment again. */
		close(st->jfd);
		st->jfd = -1;
	} else {
		/* Give back what a short write took: on a full disk those
		 * bytes are the room a checkpoint needs. */
		st->joff = off0;
		if (st->jfd >= 0 && ftruncate(st->jfd, off0) != 0)
			(void)0;
	}
}

static void jwork_after(uv_work_t *req, int status);

/* Hand the first queued segment's buffers to the worker. */
static void
jsubmit(struct state *st)
{
	struct jwork *w = &st->jw;
	struct jbuf *b, *end;
	int rc;

	if (st->jbusy || st->jhead == NULL || st->closed)
		return;
	for (end = st->jhead; end->next != NULL &&
	    end->next->seq == st->jhead->seq && !(end->flags & JB_CLOSE);
	    end = end->next)
		;
	memset(w, 0, sizeof(*w));
	w->st = st;
	w->list = st->jhead;
	w->seq = st->jhead->seq;
	st->jhead = end->next;
	if (st->jhead == NULL)
		st->jtail = NULL;
	end->next = NULL;
	for (b = w->list; b != NULL; b = b->next) {
		w->bytes += b->len;
		if (b->upto != 0)
			w->upto = b->upto;
	}
	st->jqueued -= w->bytes;
	w->req.data = w;
	if ((rc = uv_queue_work(st->loop, &w->req, jwork_cb,
	    jwork_after)) != 0) {
		log_warnx("state %s: journal: uv_queue_work: %s", st->dir,
		    uv_strerror(rc));
		end->next = st->jhead;
		st->jhead = w->list;
		if (st->jtail == NULL)
			st->jtail = end;
		st->jqueued += w->bytes;
		return;
	}
	st->jbusy = 1;
}

static void
jretry_cb(uv_timer_t *t)
{
	struct state *st = t->data;

	st->jretry_armed = 0;
	/* Both failing for lack of space: the checkpoint goes first. It
	 * covers every record applied so far, so once it is written the
	 * journal backlog of the segments before it is moot (jprune), and
	 * a journal retry that fills the room freed on the disk would keep
	 * it from ever being written. */
	if (st->cfailing && st->cnospace && !st->shutting) {
		uv_timer_start(&st->j_retry, jretry_cb, st->jretry_ms, 0);
		st->jretry_armed = 1;
		return;
	}
	jsubmit(st);
}

static void
jwork_after(uv_work_t *req, int status)
{
	struct jwork *w = req->data;
	struct state *st = w->st;
	char name[JNL_NAME_LEN + 1];
	struct jbuf *b, *next;

	st->jbusy = 0;
	if (status == 0 && w->err == 0) {
		for (b = w->list; b != NULL; b = next) {
			next = b->next;
			jbuf_put(st, b);
		}
		if (w->upto > st->written)
			st->written = w->upto;
		set_durable(st);
		st->jbytes += w->bytes;
		st->jwrites++;
		st->jretry_ms = 0;
		if (st->jfailing) {
			st->jfailing = 0;
			log_notice("state %s: journal writes succeed again",
			    st->dir);
			update_alarm(st);
		}
	} else {
		seg_name(name, sizeof(name), w->seq);
		snprintf(st->jerr, sizeof(st->jerr), "%s (journal %s %s/%s)",
		    strerror(w->err != 0 ? w->err : ECANCELED),
		    w->what != NULL ? w->what : "write", st->dir, name);
		/* The journal is written in order: nothing behind the failed
		 * write can be on disk before it. */
		st->failed = st->appended;
		for (b = w->list; b->next != NULL; b = b->next)
			;
		b->next = st->jhead;
		st->jhead = w->list;
		if (st->jtail == NULL)
			st->jtail = b;
		st->jqueued += w->bytes;
		st->jretry_ms = backoff(st->jretry_ms);
		st->jfailing = 1;
		jprune(st);
		if (st->jfailing) {
			log_warnx("state: %s; records stay applied in memory; "
			    "retrying in %u ms", st->jerr, st->jretry_ms);
			if (!st->shutting) {
				uv_timer_start(&st->j_retry, jretry_cb,
				    st->jretry_ms, 0);
				st->jretry_armed = 1;
			}
		}
		update_alarm(st);
	}
	progress(st);
	if (!st->jfailing && st->jhead != NULL &&
	    (st->o.journal == CONF_JOURNAL_EVERY || st->shutting))
		jsubmit(st);
	shutdown_step(st);
}

/*
 * Entries from now on go to a new segment (final: none, the daemon stops);
 * returns the new segment's number. The current segment is closed once
 * its data is written; the new one starts with its header and the
 * configuration in force.
 */
static uint64_t
jrotate(struct state *st, int final)
{
	struct persist_jnl_hdr h;
	struct persist_jentry je;
	struct jbuf *b;
	uint64_t seq = st->jseq + 1;
	size_t n;

	if (!st->jon) {
		st->jseq = seq;
		return seq;
	}
	if (st->jtail != NULL && st->jtail->seq == st->jseq)
		st->jtail->flags |= JB_CLOSE;
	else if ((b = jbuf_new(st->jseq, JB_CLOSE, 0)) != NULL)
		jqueue(st, b);
	st->jseq = seq;
	if (final)
		return seq;
	memset(&h, 0, sizeof(h));
	h.version = PERSIST_VERSION;
	h.flags = st->jgap ? PERSIST_JNL_AFTER_GAP : 0;
	h.seq = seq;
	h.created = now_real();
	memset(&je, 0, sizeof(je));
	je.type = PERSIST_J_CONF;
	je.text = st->conf_text != NULL ? st->conf_text : "";
	je.textlen = st->conf_len;
	n = PERSIST_JNL_HDR_LEN + persist_jentry_size(&je);
	/* The records that follow fill the same buffer. */
	if ((b = jbuf_get(st, seq, JB_OPEN | (st->jgap ? JB_GAP : 0), n)) ==
	    NULL) {
		jdrop(st, "out of memory");
		return seq;
	}
	persist_jnl_hdr_encode(&h, b->data);
	persist_jentry_encode(&je, b->data + PERSIST_JNL_HDR_LEN,
	    n - PERSIST_JNL_HDR_LEN);
	b->len = n;
	b->upto = ++st->appended;
	jqueue(st, b);
	st->jentries++;
	if (st->jgap) {
		/* Not safe until a checkpoint at or after this segment: the
		 * newest gap segment, the oldest first ticket. */
		if (st->gap_seq == 0)
			st->gap_from = b->upto;
		st->gap_seq = seq;
	}
	st->jgap = 0;
	if (st->jsuspended) {
		st->jsuspended = 0;
		log_notice("state %s: journal resumes in segment %" PRIu64,
		    st->dir, seq);
		update_alarm(st);
	}
	return seq;
}

/* ---- checkpoints ---- */

static struct chunk *
chunk_new(size_t cap)
{
	struct chunk *c;

	if ((c = malloc(sizeof(*c) + cap)) == NULL)
		return NULL;
	c->next = NULL;
	c->len = 0;
	c->cap = cap;
	return c;
}

static void
chunks_free(struct chunk *c)
{
	struct chunk *next;

	for (; c != NULL; c = next) {
		next = c->next;
		free(c);
	}
}

/* A chunk of at least cap bytes: a kept one when it is big enough (its
 * pages are already mapped: no page faults on the loop), else a new one. */
static struct chunk *
chunk_get(struct state *st, size_t cap)
{
	struct chunk *c = st->spare;

	if (c != NULL && c->cap >= cap) {
		st->spare = c->next;
		st->nspare--;
		c->next = NULL;
		c->len = 0;
		return c;
	}
	return chunk_new(cap > CHUNK_SIZE ? cap : CHUNK_SIZE);
}

/* The chunks of list are written or dropped: keep up to CHUNKS_AHEAD of
 * the standard size for the next checkpoint, free the rest. */
static void
chunks_put(struct state *st, struct chunk *list)
{
	struct chunk *c, *next;

	for (c = list; c != NULL; c = next) {
		next = c->next;
		if (st->ck.nchunks > 0)
			st->ck.nchunks--;
		if (c->cap == CHUNK_SIZE && st->nspare < CHUNKS_AHEAD) {
			c->next = st->spare;
			st->spare = c;
			st->nspare++;
		} else {
			free(c);
		}
	}
}

/* Room for n bytes at the end of the checkpoint's chunk list. */
static uint8_t *
ck_room(struct state *st, size_t n)
{
	struct chunk *c = st->ck.tail;

	if (c == NULL || c->cap - c->len < n) {
		if ((c = chunk_get(st, n)) == NULL)
			return NULL;
		if (st->ck.tail != NULL)
			st->ck.tail->next = c;
		else
			st->ck.head = c;
		st->ck.tail = c;
		st->ck.nchunks++;
	}
	return c->data + c->len;
}

/* Encode e at the end of the chunk list: in place when it fits (one
 * pass), else into a new chunk big enough. */
static int
encode_one(struct state *st, struct reg_entry *e)
{
	struct chunk *c = st->ck.tail;
	uint8_t *p;
	size_t n = 0;
	int rc;

	if (c != NULL)
		rc = persist_model_encode(e, c->data + c->len, c->cap - c->len,
		    &n);
	else if ((rc = persist_model_size(e, &n)) == 0)
		rc = E_LIMIT;
	if (rc == E_LIMIT) {
		if ((p = ck_room(st, n)) == NULL)
			rc = E_NOMEM;
		else
			rc = persist_model_encode(e, p, st->ck.tail->cap -
			    st->ck.tail->len, &n);
	}
	if (rc != 0) {
		snprintf(st->ck.err, sizeof(st->ck.err), "model \"%s\" cannot "
		    "be encoded: %s", e->name, err_str(rc));
		return -1;
	}
	st->ck.tail->len += n;
	st->ck.bytes += n;
	st->ck.nenc++;
	e->snap_epoch = st->ck.epoch;
	return 0;
}

static void
stop_encoding(struct state *st)
{
	if (!st->ck.encoding)
		return;
	st->ck.encoding = 0;
	st->ck.waiting = 0;
	registry_snap_end(st->reg);
	free(st->ck.ents);
	st->ck.ents = NULL;
	uv_idle_stop(&st->idle);
}

static void ckpt_finish(struct state *st, int ok);
static void cwork_after(uv_work_t *req, int status);
static void idle_cb(uv_idle_t *h);
static int writer_submit(struct state *st, struct cwork *w);

/* Worker: append chunks to models.ckpt.tmp; at the end fsync, rename over
 * models.ckpt, fsync the directory, delete the covered segments. */
static void
cwork_cb(uv_work_t *req)
{
	struct cwork *w = req->data;
	struct state *st = w->st;
	char name[JNL_NAME_LEN + 1];
	struct chunk *c;
	uint64_t t0 = uv_hrtime(), s;

	if (w->abort)
		goto cleanup;
	if (w->first) {
		st->ck_fd = openat(st->dirfd, CKPT_TMP, O_WRONLY | O_CREAT |
		    O_TRUNC | O_CLOEXEC, 0600);
		if (st->ck_fd < 0) {
			w->what = "create";
			goto fail;
		}
	}
	for (c = w->list; c != NULL; c = c->next) {
		if (write_all(st->ck_fd, c->data, c->len) != 0) {
			w->what = "write";
			goto fail;
		}
		w->bytes += c->len;
	}
	if (w->last) {
		if (fsync(st->ck_fd) != 0) {
			w->what = "fsync";
			goto fail;
		}
		if (close(st->ck_fd) != 0) {
			st->ck_fd = -1;
			w->what = "close";
			goto fail;
		}
		st->ck_fd = -1;
		if (renameat(st->dirfd, CKPT_TMP, st->dirfd, CKPT_NAME) != 0) {
			w->what = "rename";
			goto fail;
		}
		/* Renamed: if this fsync fails the rename may not last, so
		 * the old segments are kept (the old checkpoint needs them). */
		if (fsync(st->dirfd) != 0) {
			w->err = errno;
			w->what = "fsync of the directory";
			goto out;
		}
		for (s = w->del_lo; s < w->del_hi; s++) {
			seg_name(name, sizeof(name), s);
			unlinkat(st->dirfd, name, 0);
		}
	}
	goto out;
fail:
	w->err = errno != 0 ? errno : EIO;
cleanup:
	if (st->ck_fd >= 0)
		close(st->ck_fd);
	st->ck_fd = -1;
	unlinkat(st->dirfd, CKPT_TMP, 0);
out:
	w->ns = uv_hrtime() - t0;
}

/* The writer thread's priority: nice 10 on this thread alone (Linux:
 * setpriority on a thread id); NULL when that was refused (it then runs
 * at the daemon's priority). Not SCHED_IDLE nor nice 19: on a machine
 * kept busy by other work an idle-class thread may not run at all and
 * checkpoints would stop; at nice 10 it still gets about a tenth of a
 * busy CPU against a nice-0 thread (CFS weights 110 and 1024). */
static const char *
writer_lower(void)
{
	if (setpriority(PRIO_PROCESS, (id_t)gettid(), WRITER_NICE) == 0)
		return "nice 10";
	return NULL;
}

static void *
writer_main(void *arg)
{
	struct cwriter *wr = arg;
	struct cwork *w;
	const char *prio = writer_lower();

	pthread_mutex_lock(&wr->mu);
	wr->prio = prio;
	for (;;) {
		while (wr->job == NULL && !wr->quit)
			pthread_cond_wait(&wr->cv, &wr->mu);
		if (wr->job == NULL)
			break;
		w = wr->job;
		wr->job = NULL;
		pthread_mutex_unlock(&wr->mu);
		cwork_cb(&w->req);
		pthread_mutex_lock(&wr->mu);
		wr->done = w;
		/* Cannot fail on an open handle; the loop closes it only
		 * after joining this thread. */
		uv_async_send(&wr->async);
	}
	pthread_mutex_unlock(&wr->mu);
	return NULL;
}

/* The loop side: a finished job comes back. */
static void
writer_async_cb(uv_async_t *h)
{
	struct state *st = h->data;
	struct cwork *w;

	pthread_mutex_lock(&st->wr.mu);
	w = st->wr.done;
	st->wr.done = NULL;
	pthread_mutex_unlock(&st->wr.mu);
	if (w != NULL)
		cwork_after(&w->req, 0);
}

/* Hand w to the writer thread (one job at a time: st->ck.writing). */
static int
writer_submit(struct state *st, struct cwork *w)
{
	if (!st->wr.started)
		return UV_EINVAL;
	pthread_mutex_lock(&st->wr.mu);
	st->wr.job = w;
	pthread_cond_signal(&st->wr.cv);
	pthread_mutex_unlock(&st->wr.mu);
	return 0;
}

/* Start the writer thread (its async handle is already initialised).
 * 0, or an errno value. */
static int
writer_start(struct state *st)
{
	int rc;

	if ((rc = pthread_mutex_init(&st->wr.mu, NULL)) != 0)
		return rc;
	if ((rc = pthread_cond_init(&st->wr.cv, NULL)) != 0) {
		pthread_mutex_destroy(&st->wr.mu);
		return rc;
	}
	if ((rc = pthread_create(&st->wr.thr, NULL, writer_main,
	    &st->wr)) != 0) {
		pthread_cond_destroy(&st->wr.cv);
		pthread_mutex_destroy(&st->wr.mu);
		return rc;
	}
	st->wr.started = 1;
	return 0;
}

/* Stop and join the writer thread; a job it is running is finished first
 * (a write cannot be cut in the middle), one not taken yet is not run. */
static void
writer_stop(struct state *st)
{
	if (!st->wr.started)
		return;
	pthread_mutex_lock(&st->wr.mu);
	st->wr.quit = 1;
	st->wr.job = NULL;
	pthread_cond_signal(&st->wr.cv);
	pthread_mutex_unlock(&st->wr.mu);
	pthread_join(st->wr.thr, NULL);
	pthread_cond_destroy(&st->wr.cv);
	pthread_mutex_destroy(&st->wr.mu);
	st->wr.started = 0;
}

/* Give the writer what is ready: full chunks while encoding, the rest at
 * the end; or clean up after a failure. */
static void
ckpt_kick(struct state *st)
{
	struct cwork *w = &st->cw;
	struct chunk *list = NULL, *c;
	int rc, abort = 0;

	if (!st->ck.active || st->ck.writing)
		return;
	if (st->ck.failed) {
		if (!st->ck.opened) {
			ckpt_finish(st, 0);
			return;
		}
		abort = 1;
	} else if (st->ck.encoding) {
		if (st->ck.head == NULL || st->ck.head == st->ck.tail)
			return;
		list = st->ck.head;
		for (c = list; c->next != st->ck.tail; c = c->next)
			;
		c->next = NULL;
		st->ck.head = st->ck.tail;
	} else {
		list = st->ck.head;
		st->ck.head = st->ck.tail = NULL;
	}
	memset(w, 0, sizeof(*w));
	w->st = st;
	w->list = list;
	w->abort = abort;
	w->first = !st->ck.opened;
	w->last = !st->ck.encoding;
	w->del_lo = st->ck.seg_lo;
	w->del_hi = st->ck.seq;
	w->req.data = w;
	w->pool = st->ck.final;
	if (w->pool)
		rc = uv_queue_work(st->loop, &w->req, cwork_cb, cwork_after);
	else
		rc = writer_submit(st, w);
	if (rc != 0) {
		w->list = NULL;
		chunks_put(st, list);
		snprintf(st->ck.err, sizeof(st->ck.err), "%s: %s", w->pool ?
		    "uv_queue_work" : "checkpoint writer", uv_strerror(rc));
		st->ck.failed = 1;
		stop_encoding(st);
		ckpt_finish(st, 0);
		return;
	}
	st->ck.writing = 1;
	st->ck.opened = 1;
}

static void
ckpt_abort(struct state *st)
{
	st->ck.failed = 1;
	stop_encoding(st);
	chunks_put(st, st->ck.head);
	st->ck.head = st->ck.tail = NULL;
	ckpt_kick(st);
}

static void
cwork_after(uv_work_t *req, int status)
{
	struct cwork *w = req->data;
	struct state *st = w->st;

	st->ck.writing = 0;
	chunks_put(st, w->list);
	w->list = NULL;
	st->ck.write_ns += w->ns;
	if (status != 0 && w->err == 0) {
		w->err = ECANCELED;
		w->what = "write";
	}
	if (w->err != 0 || w->abort)
		st->ck.opened = 0;
	if (w->err != 0 && !st->ck.failed) {
		st->ck.failed = 1;
		st->ck.nospace = w->err == ENOSPC || w->err == EDQUOT;
		snprintf(st->ck.err, sizeof(st->ck.err), "%s (checkpoint %s "
		    "%s/%s)", strerror(w->err), w->what, st->dir, w->last &&
		    strcmp(w->what, "fsync of the directory") == 0 ?
		    CKPT_NAME : CKPT_TMP);
	}
	if (st->ck.failed) {
		stop_encoding(st);
		chunks_put(st, st->ck.head);
		st->ck.head = st->ck.tail = NULL;
		ckpt_kick(st);
		return;
	}
	if (w->last) {
		ckpt_finish(st, 1);
		return;
	}
	/* Room again: encoding goes on. */
	if (st->ck.waiting && st->ck.nchunks <= CHUNKS_AHEAD) {
		st->ck.waiting = 0;
		uv_idle_start(&st->idle, idle_cb);
	}
	ckpt_kick(st);
}

/* The snapshot has every entry: append the trailer, end the epoch. */
static void
encode_finish(struct state *st)
{
	uint8_t *p;

	if ((p = ck_room(st, PERSIST_CKPT_END_LEN)) == NULL) {
		snprintf(st->ck.err, sizeof(st->ck.err), "out of memory");
		ckpt_abort(st);
		return;
	}
	persist_ckpt_end_encode(st->ck.nents, p);
	st->ck.tail->len += PERSIST_CKPT_END_LEN;
	stop_encoding(st);
}

/*
 * One slice of encoding per loop turn, about SLICE_NS long. When more than
 * CHUNKS_AHEAD chunks wait for the writer, encoding waits too (the idle
 * handle stops; cwork_after starts it again): the encoder would only run
 * ahead of the disk into memory, and the kept chunks are reused.
 */
static void
idle_cb(uv_idle_t *h)
{
	struct state *st = h->data;
	struct reg_entry *e;
	uint64_t t0 = uv_hrtime(), c0 = thread_ns(), dt;
	unsigned k = 0;

	while (st->ck.encoding && st->ck.next < st->ck.nents) {
		e = st->ck.ents[st->ck.next++];
		if (e->snap_epoch != st->ck.epoch && encode_one(st, e) != 0) {
			ckpt_abort(st);
			return;
		}
		if ((++k & 31) == 0 && (uv_hrtime() - t0 >= SLICE_NS ||
		    st->ck.nchunks > CHUNKS_AHEAD))
			break;
	}
	if (st->ck.encoding && st->ck.next == st->ck.nents)
		encode_finish(st);
	dt = uv_hrtime() - t0;
	st->ck.encode_ns += dt;
	st->ck.slices++;
	if (dt > st->ck.slice_max_ns)
		st->ck.slice_max_ns = dt;
	dt = thread_ns() - c0;
	if (dt > st->ck.slice_cpu_max_ns)
		st->ck.slice_cpu_max_ns = dt;
	ckpt_kick(st);
	if (st->ck.encoding && st->ck.writing &&
	    st->ck.nchunks > CHUNKS_AHEAD) {
		st->ck.waiting = 1;
		st->ck.waits++;
		uv_idle_stop(&st->idle);
	}
}

/*
 * Start a checkpoint now (or, when one is running, right after it).
 * Returns the generation that will cover everything done so far.
 */
static uint64_t
ckpt_start(struct state *st)
{
	struct persist_ckpt_hdr h;
	uint64_t t0 = uv_hrtime();
	uint8_t *p;
	size_t n;

	if (st->ck.active) {
		st->ck_pending = 1;
		return st->ck_gen + 1;
	}
	memset(&st->ck, 0, sizeof(st->ck));
	st->ck.active = 1;
	st->ck.gen = ++st->ck_gen;
	st->ck.final = st->shutting;
	st->ck.t0 = t0;
	st->ck.jticket = st->appended;
	st->ck.seg_lo = st->jseg_lo;
	st->ck.seq = jrotate(st, st->ck.final);
	st->ck.changes = registry_changes(st->reg);
	n = registry_count(st->reg);
	if ((st->ck.ents = malloc((n > 0 ? n : 1) *
	    sizeof(*st->ck.ents))) == NULL) {
		snprintf(st->ck.err, sizeof(st->ck.err), "out of memory");
		st->ck.failed = 1;
		ckpt_finish(st, 0);
		return st->ck_gen;
	}
	st->ck.nents = registry_entries(st->reg, st->ck.ents, n);
	st->ck.epoch = registry_snap_begin(st->reg);
	st->ck.encoding = 1;
	memset(&h, 0, sizeof(h));
	h.version = PERSIST_VERSION;
	h.seq = st->ck.seq;
	h.nmodels = st->ck.nents;
	h.created = now_real();
	if ((p = ck_room(st, PERSIST_CKPT_HDR_LEN)) == NULL) {
		snprintf(st->ck.err, sizeof(st->ck.err), "out of memory");
		ckpt_abort(st);
		return st->ck_gen;
	}
	persist_ckpt_hdr_encode(&h, p);
	st->ck.tail->len += PERSIST_CKPT_HDR_LEN;
	uv_idle_start(&st->idle, idle_cb);
	st->ck.stall_ns = uv_hrtime() - t0;
	return st->ck.gen;
}

static void
ckretry_cb(uv_timer_t *t)
{
	ckpt_start(t->data);
}

/* A checkpoint as soon as the loop turns (not from inside a registry
 * call). */
static void
ckpt_start_soon(struct state *st)
{
	if (st->closed || st->shutting)
		return;
	if (st->ck.active)
		st->ck_pending = 1;
	else
		uv_timer_start(&st->ck_retry, ckretry_cb, 0, 0);
}

static void
ckpt_finish(struct state *st, int ok)
{
	struct ckpt_stats *ls = &st->last;

	stop_encoding(st);
	chunks_put(st, st->ck.head);
	st->ck.head = st->ck.tail = NULL;
	st->ck.active = 0;
	st->ck_done_gen = st->ck.gen;
	if (ok) {
		st->ck_ok_gen = st->ck.gen;
		st->ck_count++;
		st->saved_changes = st->ck.changes;
		if (st->ck.jticket > st->covered)
			st->covered = st->ck.jticket;
		if (st->gap_seq != 0 && st->ck.seq >= st->gap_seq)
			st->gap_seq = 0;
		set_durable(st);
		if (st->ck.seq > st->jseg_lo)
			st->jseg_lo = st->ck.seq;
		/* Queued bytes of segments the checkpoint covers are moot. */
		jprune(st);
		ls->at = now_real();
		ls->models = st->ck.nenc;
		ls->bytes = st->ck.bytes;
		ls->ms = (double)(uv_hrtime() - st->ck.t0) / 1e6;
		ls->stall_ms = (double)st->ck.stall_ns / 1e6;
		ls->slice_max_ms = (double)st->ck.slice_max_ns / 1e6;
		ls->slice_cpu_max_ms = (double)st->ck.slice_cpu_max_ns / 1e6;
		ls->encode_ms = (double)st->ck.encode_ns / 1e6;
		ls->write_ms = (double)st->ck.write_ns / 1e6;
		ls->slices = st->ck.slices;
		ls->waits = st->ck.waits;
		ls->writer = st->ck.final ? "pool" : st->wr.prio != NULL ?
		    st->wr.prio : "normal";
		log_info("state %s: checkpoint %" PRIu64 " written: %" PRIu64
		    " models, %zu bytes, %.1f ms (start %.3f ms, %u slices, "
		    "longest %.3f ms, writer %.1f ms)", st->dir, st->ck.gen,
		    ls->models, ls->bytes, ls->ms, ls->stall_ms, ls->slices,
		    ls->slice_max_ms, ls->write_ms);
		st->cretry_ms = 0;
		st->cnospace = 0;
		if (st->cfailing) {
			st->cfailing = 0;
			log_notice("state %s: checkpoints succeed again",
			    st->dir);
		}
	} else {
		st->ck_failures++;
		snprintf(st->cerr, sizeof(st->cerr), "%s", st->ck.err);
		st->cretry_ms = backoff(st->cretry_ms);
		st->cfailing = 1;
		st->cnospace = st->ck.nospace;
		if (st->shutting)
			log_warnx("state: %s; the last good checkpoint and the "
			    "journal are kept", st->cerr);
		else
			log_warnx("state: %s; the last good checkpoint and the "
			    "journal are kept; retrying in %u ms", st->cerr,
			    st->cretry_ms);
		if (!st->shutting && !st->ck_pending)
			uv_timer_start(&st->ck_retry, ckretry_cb,
			    st->cretry_ms, 0);
	}
	update_alarm(st);
	progress(st);
	if (st->ck_pending && !st->closed) {
		st->ck_pending = 0;
		ckpt_start(st);
	}
	shutdown_step(st);
}

static void
ck_timer_cb(uv_timer_t *t)
{
	struct state *st = t->data;

	if (st->ck.active || uv_is_active((uv_handle_t *)&st->ck_retry))
		return;
	if (registry_changes(st->reg) != st->saved_changes || st->cfailing ||
	    st->jsuspended)
		ckpt_start(st);
}

static void
j_timer_cb(uv_timer_t *t)
{
	struct state *st = t->data;

	if (!st->jfailing)
		jsubmit(st);
}

/* Every loop turn, after I/O: the every-record policy writes what the
 * turn's records appended (group commit). */
static void
check_cb(uv_check_t *h)
{
	struct state *st = h->data;

	if (st->o.journal == CONF_JOURNAL_EVERY && !st->jfailing)
		jsubmit(st);
}

/* ---- registry hooks ---- */

static void
hook_touch(void *arg, struct reg_entry *e)
{
	struct state *st = arg;

	if (st->ck.encoding && e->snap_epoch != st->ck.epoch &&
	    encode_one(st, e) != 0)
		ckpt_abort(st);
}

static void
hook_journal(void *arg, const struct reg_op *op)
{
	struct state *st = arg;
	struct persist_jentry je;

	memset(&je, 0, sizeof(je));
	je.name = op->e->name;
	je.namelen = strlen(op->e->name);
	switch (op->kind) {
	case REG_OP_RECORD:
		je.type = PERSIST_J_RECORD;
		je.t = op->t;
		je.nx = op->nx;
		je.x = op->x;
		break;
	case REG_OP_PIN:
		je.type = PERSIST_J_PIN;
		je.t = op->t;
		break;
	case REG_OP_FREEZE:
		je.type = PERSIST_J_FREEZE;
		je.on = op->on;
		break;
	case REG_OP_RESET:
		je.type = PERSIST_J_RESET;
		break;
	}
	jappend(st, &je);
}

/* ---- public interface ---- */

static int
init_handles(struct state *st)
{
	int rc;

	if ((rc = uv_timer_init(st->loop, &st->ck_timer)) != 0 ||
	    (rc = uv_timer_init(st->loop, &st->ck_retry)) != 0 ||
	    (rc = uv_timer_init(st->loop, &st->j_timer)) != 0 ||
	    (rc = uv_timer_init(st->loop, &st->j_retry)) != 0 ||
	    (rc = uv_idle_init(st->loop, &st->idle)) != 0 ||
	    (rc = uv_check_init(st->loop, &st->check)) != 0 ||
	    (rc = uv_async_init(st->loop, &st->wr.async,
	    writer_async_cb)) != 0)
		return rc;
	st->ck_timer.data = st->ck_retry.data = st;
	st->j_timer.data = st->j_retry.data = st;
	st->idle.data = st;
	st->check.data = st;
	st->wr.async.data = st;
	st->handles = 7;
	return 0;
}

/*
 * state_open: use the directory o->dir (created with mode 0700 when it does
 * not exist; its parent must), lock it against a second daemon, and
 * restore its content into reg (whose config is conf): the checkpoint, the
 * journal replayed, then conf applied as a reload would (models whose
 * section changed shape are kept and marked stale, those without a section
 * kept as orphans). Damage is logged with file and offset, kept aside and
 * counted in *rep; the daemon starts with everything that is valid.
 * Returns 0 with *out (call state_start next); E_VERSION when a file has a
 * newer format (refuse to start); E_EXISTS when another daemon holds the
 * directory; E_IO when it cannot be created, opened or read; E_NOMEM. A
 * message is in errbuf. On failure reg may hold part of the state (free
 * it).
 */
int
state_open(uv_loop_t *loop, const struct state_opts *o, struct registry *reg,
    const struct conf *conf, const struct state_hooks *h, struct state **out,
    struct state_report *rep, char *errbuf, size_t errlen)
{
	struct registry_hooks rh;
	struct state *st;
	struct rctx rc;
	int r;

	*out = NULL;
	if ((st = calloc(1, sizeof(*st))) == NULL ||
	    (st->dir = strdup(o->dir)) == NULL) {
		free(st);
		err_printf(errbuf, errlen, "out of memory");
		return E_NOMEM;
	}
	st->loop = loop;
	st->o = *o;
	st->o.dir = st->dir;
	st->reg = reg;
	if (h != NULL)
		st->h = *h;
	st->dirfd = st->jfd = st->ck_fd = -1;
	st->jon = o->journal != CONF_JOURNAL_OFF;
	if (mkdir(st->dir, 0700) != 0 && errno != EEXIST) {
		err_printf(errbuf, errlen, "state directory %s: cannot create: "
		    "%s", st->dir, strerror(errno));
		r = E_IO;
		goto fail;
	}
	if ((st->dirfd = open(st->dir, O_RDONLY | O_DIRECTORY |
	    O_CLOEXEC)) < 0) {
		err_printf(errbuf, errlen, "state directory %s: cannot open: "
		    "%s", st->dir, strerror(errno));
		r = E_IO;
		goto fail;
	}
	if (flock(st->dirfd, LOCK_EX | LOCK_NB) != 0) {
		err_printf(errbuf, errlen, "state directory %s: %s", st->dir,
		    errno == EWOULDBLOCK ? "in use by another coefd" :
		    strerror(errno));
		r = errno == EWOULDBLOCK ? E_EXISTS : E_IO;
		goto fail;
	}
	memset(&rc, 0, sizeof(rc));
	rc.rep = &st->rep;
	rc.reg = reg;
	rc.conf = conf;
	rc.dirfd = st->dirfd;
	rc.dir = st->dir;
	rc.say = say_log;
	r = restore(&rc, errbuf, errlen);
	st->jseg_lo = rc.nsegs > 0 ? rc.segs[0] : st->rep.next_seq;
	free(rc.segs);
	if (r != 0)
		goto fail;
	/* The first checkpoint rotates to next_seq. */
	st->jseq = st->rep.next_seq - 1;
	/* Segments could not all be replayed: this run's first segment must
	 * not be replayed on top of the old checkpoint either. */
	st->jgap = rc.jstop;
	if ((r = writer_start(st)) != 0) {
		err_printf(errbuf, errlen, "state: cannot start the checkpoint "
		    "writer: %s", strerror(r));
		r = r == ENOMEM || r == EAGAIN ? E_NOMEM : E_IO;
		goto fail;
	}
	if ((r = init_handles(st)) != 0) {
		err_printf(errbuf, errlen, "state: %s", uv_strerror(r));
		r = E_IO;
		goto fail;
	}
	memset(&rh, 0, sizeof(rh));
	rh.arg = st;
	rh.touch = hook_touch;
	rh.journal = hook_journal;
	registry_set_hooks(reg, &rh);
	if (rep != NULL)
		*rep = st->rep;
	*out = st;
	return 0;
fail:
	writer_stop(st);
	if (st->dirfd >= 0)
		close(st->dirfd);
	free(st->dir);
	free(st);
	return r;
}

static int
set_text(struct state *st, const char *text, size_t len)
{
	char *t;

	if ((t = malloc(len + 1)) == NULL)
		return E_NOMEM;
	memcpy(t, text, len);
	t[len] = '\0';
	free(st->conf_text);
	st->conf_text = t;
	st->conf_len = len;
	return 0;
}

static void
start_timers(struct state *st)
{
	uint64_t ms;

	ms = (uint64_t)(st->o.checkpoint_every * 1000);
	uv_timer_start(&st->ck_timer, ck_timer_cb, ms > 0 ? ms : 1000,
	    ms > 0 ? ms : 1000);
	uv_timer_stop(&st->j_timer);
	uv_check_stop(&st->check);
	if (st->jon && st->o.journal == CONF_JOURNAL_INTERVAL) {
		ms = (uint64_t)(st->o.journal_every * 1000);
		ms = ms > 0 ? ms : 1;
		uv_timer_start(&st->j_timer, j_timer_cb, ms, ms);
	} else if (st->jon) {
		uv_check_start(&st->check, check_cb);
	}
}

/*
 * state_start: the daemon is about to serve: keep the config text (it
 * opens every journal segment), start the timers and take the first
 * checkpoint, which also opens this run's journal segment. E_NOMEM.
 */
int
state_start(struct state *st, const char *conf_text, size_t len)
{
	if (set_text(st, conf_text, len) != 0)
		return E_NOMEM;
	start_timers(st);
	ckpt_start(st);
	return 0;
}

/*
 * state_reload: the daemon applied a new config (text conf_text): journal
 * it so a replay applies it at the same point, and take the new timer
 * settings. A changed journal policy or directory applies at the next
 * start.
 */
void
state_reload(struct state *st, const struct state_opts *o,
    const char *conf_text, size_t len)
{
	struct persist_jentry je;

	if (set_text(st, conf_text, len) != 0)
		jdrop(st, "out of memory");
	memset(&je, 0, sizeof(je));
	je.type = PERSIST_J_RELOAD;
	je.text = st->conf_text;
	je.textlen = st->conf_len;
	jappend(st, &je);
	if (o->journal != st->o.journal || strcmp(o->dir, st->dir) != 0)
		log_notice("state: a changed state_dir or journal policy "
		    "applies at the next start");
	st->o.checkpoint_every = o->checkpoint_every;
	st->o.journal_every = o->journal_every;
	if (!st->shutting)
		start_timers(st);
}

/*
 * state_save: start a checkpoint (.save); *ticket is the generation to
 * wait for with state_wait(CMD_WAIT_SAVE). E_STATE while shutting down.
 */
int
state_save(struct state *st, uint64_t *ticket, char *msg, size_t len)
{
	if (st->shutting) {
		err_printf(msg, len, "the daemon is shutting down (it saves "
		    "on the way out)");
		return E_STATE;
	}
	*ticket = ckpt_start(st);
	return 0;
}

/* state_sync_ticket: with the every-record policy, the ticket of the
 * last entry appended when it is not on disk yet; else 0. */
uint64_t
state_sync_ticket(struct state *st)
{
	if (!st->jon || st->o.journal != CONF_JOURNAL_EVERY)
		return 0;
	return st->appended > st->durable ? st->appended : 0;
}

/*
 * state_wait: where a ticket stands: 0 done (journal entries on disk, or
 * covered by a checkpoint; the checkpoint written), 1 pending, E_IO with
 * the reason in msg when the write failed or the journal is failing (a
 * later success makes the same ticket done).
 */
int
state_wait(struct state *st, int kind, uint64_t ticket, char *msg,
    size_t len)
{
	if (kind == CMD_WAIT_SYNC) {
		if (st->durable >= ticket)
			return 0;
		if (st->failed >= ticket || st->jfailing || st->jsuspended ||
		    (st->gap_seq != 0 && st->cfailing)) {
			err_printf(msg, len, "%s", st->jsuspended ?
			    "journal suspended after write failures until "
			    "the next checkpoint" : st->jfailing ? st->jerr :
			    st->gap_seq != 0 && st->cfailing ? st->cerr :
			    st->jerr);
			return E_IO;
		}
		return 1;
	}
	if (st->ck_ok_gen >= ticket)
		return 0;
	if (st->ck_done_gen >= ticket) {
		err_printf(msg, len, "%s", st->cerr);
		return E_IO;
	}
	return 1;
}

static void
json_time_or_null(struct json *j, double t)
{
	if (t > 0)
		json_num(j, t);
	else
		json_null(j);
}

/* state_stats: write "state": {...} into the open .stats object. */
void
state_stats(const struct state *st, struct json *j)
{
	const struct ckpt_stats *ls = &st->last;
	char pol[32];

	json_key(j, "state");
	json_obj_begin(j);
	json_key(j, "dir");
	json_str(j, st->dir);
	json_key(j, "ok");
	json_bool(j, st->alarm_since == 0);
	json_key(j, "error");
	if (st->alarm_since == 0)
		json_null(j);
	else
		json_str(j, st->jsuspended ? "journal suspended after write "
		    "failures until the next checkpoint" : st->jfailing ?
		    st->jerr : st->cerr);
	json_key(j, "since");
	json_time_or_null(j, st->alarm_since);
	json_key(j, "journal");
	if (st->o.journal == CONF_JOURNAL_EVERY)
		json_str(j, "every-record");
	else if (st->o.journal == CONF_JOURNAL_OFF)
		json_str(j, "off");
	else {
		snprintf(pol, sizeof(pol), "%gms", st->o.journal_every * 1000);
		json_str(j, pol);
	}
	json_key(j, "journal_segment");
	json_uint(j, st->jseq);
	json_key(j, "journal_entries");
	json_uint(j, st->jentries);
	json_key(j, "journal_bytes");
	json_uint(j, st->jbytes);
	json_key(j, "journal_writes");
	json_uint(j, st->jwrites);
	json_key(j, "journal_unsynced");
	json_uint(j, st->appended - (st->durable < st->appended ?
	    st->durable : st->appended));
	json_key(j, "checkpoints");
	json_uint(j, st->ck_count);
	json_key(j, "checkpoint_failures");
	json_uint(j, st->ck_failures);
	json_key(j, "last_checkpoint");
	if (st->ck_count == 0) {
		json_null(j);
	} else {
		json_obj_begin(j);
		json_key(j, "at");
		json_num(j, ls->at);
		json_key(j, "models");
		json_uint(j, ls->models);
		json_key(j, "bytes");
		json_uint(j, ls->bytes);
		json_key(j, "ms");
		json_num(j, ls->ms);
		json_key(j, "start_ms");
		json_num(j, ls->stall_ms);
		json_key(j, "slices");
		json_uint(j, ls->slices);
		json_key(j, "slice_max_ms");
		json_num(j, ls->slice_max_ms);
		json_key(j, "slice_cpu_max_ms");
		json_num(j, ls->slice_cpu_max_ms);
		json_key(j, "encode_ms");
		json_num(j, ls->encode_ms);
		json_key(j, "write_ms");
		json_num(j, ls->write_ms);
		json_key(j, "writer_waits");
		json_uint(j, ls->waits);
		json_key(j, "writer");
		json_str(j, ls->writer);
		json_obj_end(j);
	}
	json_key(j, "restore");
	json_obj_begin(j);
	json_key(j, "models");
	json_uint(j, st->rep.models);
	json_key(j, "damaged");
	json_uint(j, st->rep.damaged);
	json_key(j, "journal_entries");
	json_uint(j, st->rep.entries);
	json_key(j, "not_applied");
	json_uint(j, st->rep.skipped);
	json_key(j, "torn_tails");
	json_uint(j, st->rep.torn);
	json_key(j, "damage");
	json_bool(j, st->rep.damage);
	json_key(j, "ms");
	json_num(j, st->rep.ms);
	json_obj_end(j);
	json_obj_end(j);
}

static void
handle_closed(uv_handle_t *h)
{
	struct state *st = h->data;

	if (--st->handles > 0)
		return;
	if (st->jfd >= 0) {
		if (ftruncate(st->jfd, st->joff) != 0 || fdatasync(st->jfd) != 0)
			log_warn("state %s: closing the journal", st->dir);
		close(st->jfd);
		st->jfd = -1;
	}
	st->closed = 1;
	if (st->done_cb != NULL)
		st->done_cb(st->done_arg);
}

/* Shutdown: journal flushed, final checkpoint, journal idle, handles. */
static void
shutdown_step(struct state *st)
{
	int flush;

	if (!st->shutting || st->shut_stage == 2)
		return;
	if (st->jbusy || (st->shut_stage == 1 && (st->ck.active ||
	    st->ck_pending)))
		return;
	flush = st->jhead != NULL && !(st->jfailing && st->shut_tries >= 2);
	if (flush) {
		if (st->jfailing)
			st->shut_tries++;
		jsubmit(st);
		if (st->jbusy)
			return;
	}
	if (st->shut_stage == 0) {
		st->shut_stage = 1;
		ckpt_start(st);
		return;
	}
	st->shut_stage = 2;
	if (st->jhead != NULL)
		log_errx("state %s: %zu journal bytes could not be written "
		    "at shutdown", st->dir, st->jqueued);
	uv_close((uv_handle_t *)&st->ck_timer, handle_closed);
	uv_close((uv_handle_t *)&st->ck_retry, handle_closed);
	uv_close((uv_handle_t *)&st->j_timer, handle_closed);
	uv_close((uv_handle_t *)&st->j_retry, handle_closed);
	uv_close((uv_handle_t *)&st->idle, handle_closed);
	uv_close((uv_handle_t *)&st->check, handle_closed);
	/* No checkpoint is running: the writer waits idle. */
	writer_stop(st);
	uv_close((uv_handle_t *)&st->wr.async, handle_closed);
}

/*
 * state_shutdown: the daemon stops (no more lines are applied): write the
 * journal's backlog, take the final checkpoint, close the handles; then
 * cb(arg). Whether the final checkpoint was written: state_final_ok.
 */
void
state_shutdown(struct state *st, void (*cb)(void *), void *arg)
{
	st->shutting = 1;
	st->done_cb = cb;
	st->done_arg = arg;
	uv_timer_stop(&st->ck_timer);
	uv_timer_stop(&st->ck_retry);
	uv_timer_stop(&st->j_timer);
	uv_timer_stop(&st->j_retry);
	shutdown_step(st);
}

/* state_final_ok: 1 when the last checkpoint taken was written. */
int
state_final_ok(const struct state *st)
{
	return st->ck_ok_gen == st->ck_gen && st->ck_gen > 0;
}

/* state_free: release st (after state_shutdown finished, or before the
 * loop ran); NULL is a no-op. The directory lock goes with it. */
void
state_free(struct state *st)
{
	struct jbuf *b, *next;

	if (st == NULL)
		return;
	for (b = st->jhead; b != NULL; b = next) {
		next = b->next;
		jbuf_free(b);
	}
	for (b = st->jspare; b != NULL; b = next) {
		next = b->next;
		jbuf_free(b);
	}
	/* Joined here when the daemon stops without state_shutdown (a
	 * start that failed); a job in flight then ends first. */
	writer_stop(st);
	chunks_free(st->cw.list);
	chunks_free(st->ck.head);
	chunks_free(st->spare);
	free(st->ck.ents);
	if (st->jfd >= 0)
		close(st->jfd);
	if (st->ck_fd >= 0)
		close(st->ck_fd);
	if (st->dirfd >= 0)
		close(st->dirfd);
	free(st->conf_text);
	free(st->dir);
	free(st);
}
