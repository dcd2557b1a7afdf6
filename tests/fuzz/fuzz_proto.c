/* SPDX-License-Identifier: ISC */
/*
 * libFuzzer target for the protocol reader and parser (daemon/proto.c).
 * The input's first two bytes choose the reader's line cap and seed the
 * chunk sizes; the rest is the byte stream a client sends. It is read
 * twice, whole and in pseudo-random chunks, and the two message sequences
 * must agree; each line is also parsed alone with proto_parse_line; every
 * error reply must be one valid JSON object. Not part of the unit suite:
 * built with clang -fsanitize=fuzzer by `make fuzz`.
 */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "json.h"
#include "jsoncheck.h"
#include "proto.h"

int	LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

#define CHECK(cond)	do { if (!(cond)) abort(); } while (0)

/* One reader pass summarised: a running FNV-1a hash over every message. */
struct pass {
	uint64_t	 h;
	uint64_t	 nmsg;
	uint64_t	 lastline;
};

static void
hash_bytes(uint64_t *h, const void *p, size_t n)
{
	const unsigned char *b = p;
	size_t i;

	for (i = 0; i < n; i++) {
		*h ^= b[i];
		*h *= 0x100000001b3ULL;
	}
}

/* ---- invariants of one message ---- */

static void
check_msg(int st, const struct proto_msg *m)
{
	char buf[1024];
	struct json j;
	size_t i;

	CHECK(st == PROTO_MSG || st == PROTO_ERROR);
	CHECK(memchr(m->detail, '\0', sizeof(m->detail)) != NULL);
	if (st == PROTO_ERROR) {
		CHECK(m->reason < PROTO_NREASONS);
		CHECK(m->kind == PROTO_EMPTY);
		CHECK(m->detail[0] != '\0');
		json_init(&j, buf, sizeof(buf));
		CHECK(proto_format_error(&j, m->line, m->reason,
		    m->detail) == 0);
		CHECK(json_finish(&j) == 0);
		CHECK(json_valid_object(j.buf, j.len));
		if (m->model.len > 0)
			CHECK(proto_check_model_name(m->model.ptr,
			    m->model.len) == 0);
		return;
	}
	CHECK(m->reason == PROTO_NREASONS);
	CHECK(m->detail[0] == '\0');
	if (m->kind == PROTO_EMPTY)
		return;
	CHECK(m->nvalues <= PROTO_MAX_VALUES);
	CHECK(m->nargs <= PROTO_MAX_ARGS);
	for (i = 0; i < m->nvalues; i++) {
		CHECK(isfinite(m->values[i].v));
		if (m->named)
			CHECK(proto_check_field_name(m->values[i].name.ptr,
			    m->values[i].name.len) == 0);
	}
	if (m->kind == PROTO_RECORD) {
		CHECK(m->cmd == PROTO_CMD_NONE);
		CHECK(proto_check_model_name(m->model.ptr, m->model.len) == 0);
		CHECK(!m->has_target || isfinite(m->target));
		CHECK(!m->has_time || isfinite(m->time));
	}
	if (m->kind == PROTO_COMMAND)
		CHECK(m->cmd > PROTO_CMD_NONE && m->cmd < PROTO_NCMDS);
}

static void
record(struct pass *ps, int st, const struct proto_msg *m)
{
	uint64_t bits;
	size_t i;

	check_msg(st, m);
	CHECK(m->line > ps->lastline);
	ps->lastline = m->line;
	ps->nmsg++;
	hash_bytes(&ps->h, &st, sizeof(st));
	hash_bytes(&ps->h, &m->kind, sizeof(m->kind));
	hash_bytes(&ps->h, &m->line, sizeof(m->line));
	hash_bytes(&ps->h, &m->reason, sizeof(m->reason));
	hash_bytes(&ps->h, &m->cmd, sizeof(m->cmd));
	hash_bytes(&ps->h, m->detail, strlen(m->detail));
	if (m->model.len > 0)
		hash_bytes(&ps->h, m->model.ptr, m->model.len);
	if (st == PROTO_MSG && m->kind != PROTO_EMPTY) {
		hash_bytes(&ps->h, &m->nvalues, sizeof(m->nvalues));
		for (i = 0; i < m->nvalues; i++) {
			memcpy(&bits, &m->values[i].v, sizeof(bits));
			hash_bytes(&ps->h, &bits, sizeof(bits));
		}
	}
}

/* xorshift32: chunk sizes from the input's seed byte. */
static uint32_t
next_rand(uint32_t *s)
{
	*s ^= *s << 13;
	*s ^= *s >> 17;
	*s ^= *s << 5;
	return *s;
}

/* Feed s[0..n) to a fresh reader in chunks (chunk 0: all at once). */
static void
run_reader(size_t cap, const char *s, size_t n, uint32_t seed, int chunked,
    struct pass *ps, struct proto_msg *m)
{
	struct proto_reader *rd;
	size_t off = 0, k, used;
	int st;

	memset(ps, 0, sizeof(*ps));
	ps->h = 0xcbf29ce484222325ULL;
	rd = proto_reader_new(cap);
	CHECK(rd != NULL);
	while (off < n) {
		k = n - off;
		if (chunked) {
			k = 1 + next_rand(&seed) % (seed & 0x100 ? 7 : 300);
			if (k > n - off)
				k = n - off;
		}
		while (k > 0) {
			st = proto_next(rd, s + off, k, &used, m);
			CHECK(used <= k);
			off += used;
			k -= used;
			if (st == PROTO_NEED_MORE) {
				CHECK(k == 0);
				break;
			}
			record(ps, st, m);
		}
	}
	if ((st = proto_finish(rd, m)) != PROTO_NEED_MORE)
		record(ps, st, m);
	CHECK(proto_finish(rd, m) == PROTO_NEED_MORE);
	proto_reader_free(rd);
}

int
LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static const size_t caps[8] = { 1, 8, 40, 64, 256, 1000, 16384,
	    PROTO_LINE_MAX };
	static struct proto_msg m;
	struct pass whole, chunks;
	const char *s, *p, *end, *nl;
	size_t n, cap;
	uint32_t seed;
	uint64_t line = 0;

	if (size < 2)
		return 0;
	cap = caps[data[0] & 7];
	seed = 0x9e3779b9u ^ data[1] ^ ((uint32_t)data[0] << 8);
	s = (const char *)data + 2;
	n = size - 2;

	/* Whole and chunked reads give the same messages. */
	run_reader(cap, s, n, seed, 0, &whole, &m);
	run_reader(cap, s, n, seed, 1, &chunks, &m);
	CHECK(whole.nmsg == chunks.nmsg);
	CHECK(whole.h == chunks.h);

	/* Every line alone, without a reader (UDP datagrams take this
	 * path), with no length cap. */
	for (p = s, end = s + n; p < end; p = nl + 1) {
		int st;

		if ((nl = memchr(p, '\n', (size_t)(end - p))) == NULL)
			nl = end;
		st = proto_parse_line(p, (size_t)(nl - p), ++line, &m);
		check_msg(st, &m);
		CHECK(m.line == line);
	}
	return 0;
}
