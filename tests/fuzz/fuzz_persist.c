/* SPDX-License-Identifier: ISC */
/*
 * libFuzzer target for the state decoders (daemon/persist.c): model
 * blocks, journal entries, checkpoint and journal headers, the trailer
 * and resynchronisation. The first input byte picks the mode. Framed
 * modes wrap the rest of the input in valid framing (magic, length,
 * CRC-32C), so the fuzzer reaches the payload parsers instead of stopping
 * at the checksum; the raw mode feeds bytes unframed. A decoded model
 * block must re-encode, decode again and re-encode to the same bytes; a
 * decoded journal entry must re-encode to exactly the bytes it came from.
 * Built with clang -fsanitize=fuzzer by `make fuzz`. With the environment
 * variable FUZZ_PERSIST_SEEDS=DIR it first writes its seed inputs (real
 * blocks and entries from the current encoder) into DIR; that is how
 * tests/fuzz/persist/ was made.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "conf.h"
#include "err.h"
#include "persist.h"
#include "proto.h"
#include "registry.h"

int	LLVMFuzzerInitialize(int *argc, char ***argv);
int	LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

#define CHECK(cond)	do { if (!(cond)) abort(); } while (0)

static void
put_u32(uint8_t *p, uint32_t v)
{
	p[0] = (uint8_t)v;
	p[1] = (uint8_t)(v >> 8);
	p[2] = (uint8_t)(v >> 16);
	p[3] = (uint8_t)(v >> 24);
}

/* Encode e into a new buffer; *len its size. */
static uint8_t *
encode(const struct reg_entry *e, size_t *len)
{
	uint8_t *b;

	if (persist_model_size(e, len) != 0)
		return NULL;
	CHECK((b = malloc(*len)) != NULL);
	CHECK(persist_model_encode(e, b, *len, len) == 0);
	return b;
}

/* A model block with payload p[0..n): the block magic, the length, the
 * CRC over the first 8 bytes and the payload. */
static void
model_mode(const uint8_t *p, size_t n)
{
	static const uint8_t magic[4] = { 'M', 'O', 'D', 'L' };	/* STATE.md */
	struct reg_entry *e = NULL, *e2 = NULL;
	uint8_t *b, *b1, *b2;
	size_t len1, len2, bl;
	char err[200], name[MODEL_NAME_MAX + 1];
	uint32_t crc;

	if (n > UINT32_MAX - PERSIST_BLOCK_HDR_LEN)
		return;
	CHECK((b = malloc(PERSIST_BLOCK_HDR_LEN + n + 1)) != NULL);
	memcpy(b, magic, 4);
	put_u32(b + 4, (uint32_t)n);
	if (n > 0)
		memcpy(b + PERSIST_BLOCK_HDR_LEN, p, n);
	crc = persist_crc32c(0, b, 8);
	crc = persist_crc32c(crc, b + PERSIST_BLOCK_HDR_LEN, n);
	put_u32(b + 8, crc);
	if (persist_model_check(b, PERSIST_BLOCK_HDR_LEN + n, &bl) != 0) {
		/* Only a different magic can fail the framing built here. */
		free(b);
		return;
	}
	CHECK(bl == PERSIST_BLOCK_HDR_LEN + n);
	(void)persist_model_peek_name(b, bl, name);
	if (persist_model_decode(b, bl, &e, err, sizeof(err)) == 0) {
		CHECK(e != NULL);
		if ((b1 = encode(e, &len1)) != NULL) {
			CHECK(persist_model_decode(b1, len1, &e2, err,
			    sizeof(err)) == 0);
			CHECK((b2 = encode(e2, &len2)) != NULL);
			CHECK(len1 == len2 && memcmp(b1, b2, len1) == 0);
			free(b1);
			free(b2);
			registry_entry_free(e2);
		}
		registry_entry_free(e);
	} else {
		CHECK(e == NULL);
		CHECK(memchr(err, '\0', sizeof(err)) != NULL);
	}
	free(b);
}

/* Journal entries: the input is a list of (u16 length, payload); each is
 * framed (length, CRC) and the stream decoded as the replay reads it. */
static void
journal_mode(const uint8_t *p, size_t n)
{
	static double xbuf[PROTO_MAX_VALUES + 1];
	struct persist_jentry je;
	uint8_t *s, *re;
	size_t off = 0, slen = 0, used, k;
	uint32_t crc;
	int rc;

	CHECK((s = malloc(n / 2 * 10 + 16)) != NULL);
	while (off + 2 <= n) {
		k = (size_t)p[off] | (size_t)p[off + 1] << 8;
		off += 2;
		if (k > n - off)
			k = n - off;
		put_u32(s + slen, (uint32_t)k);
		memcpy(s + slen + PERSIST_JENT_HDR_LEN, p + off, k);
		crc = persist_crc32c(0, s + slen, 4);
		crc = persist_crc32c(crc, s + slen + PERSIST_JENT_HDR_LEN, k);
		put_u32(s + slen + 4, crc);
		slen += PERSIST_JENT_HDR_LEN + k;
		off += k;
	}
	for (off = 0; off < slen; off += used) {
		rc = persist_jentry_decode(s + off, slen - off, &used, &je,
		    xbuf);
		if (rc != 0) {
			CHECK(rc == E_CORRUPT || rc == PERSIST_SHORT);
			/* Skip the frame, as every frame here is whole. */
			used = PERSIST_JENT_HDR_LEN + (size_t)(s[off] |
			    s[off + 1] << 8 | s[off + 2] << 16 |
			    (uint32_t)s[off + 3] << 24);
			continue;
		}
		CHECK(used >= PERSIST_JENT_HDR_LEN && used <= slen - off);
		k = persist_jentry_size(&je);
		CHECK(k == used);
		CHECK((re = malloc(k)) != NULL);
		CHECK(persist_jentry_encode(&je, re, k) == 0);
		CHECK(memcmp(re, s + off, k) == 0);
		free(re);
	}
	free(s);
}

/* Unframed bytes through every decoder. */
static void
raw_mode(const uint8_t *p, size_t n)
{
	static double xbuf[PROTO_MAX_VALUES + 1];
	struct persist_ckpt_hdr ch;
	struct persist_jnl_hdr jh;
	struct persist_jentry je;
	struct reg_entry *e = NULL;
	char err[200], name[MODEL_NAME_MAX + 1];
	uint64_t nm;
	size_t bl, used, at;

	(void)persist_ckpt_hdr_decode(p, n, &ch);
	(void)persist_jnl_hdr_decode(p, n, &jh);
	(void)persist_ckpt_end_decode(p, n, &nm);
	(void)persist_ckpt_is_end(p, n);
	(void)persist_model_check(p, n, &bl);
	(void)persist_model_peek_name(p, n, name);
	if (persist_model_decode(p, n, &e, err, sizeof(err)) == 0)
		registry_entry_free(e);
	(void)persist_jentry_decode(p, n, &used, &je, xbuf);
	at = persist_resync(p, n, 0);
	CHECK(at <= n);
	CHECK(persist_crc32c(0, p, n) == persist_crc32c_sw(0, p, n));
}

/* ---- seed writer (FUZZ_PERSIST_SEEDS=DIR) ---- */

static void
seed_write(const char *dir, const char *name, uint8_t mode,
    const uint8_t *p, size_t n)
{
	char path[1024];
	FILE *f;

	snprintf(path, sizeof(path), "%s/%s", dir, name);
	CHECK((f = fopen(path, "wb")) != NULL);
	CHECK(fwrite(&mode, 1, 1, f) == 1);
	CHECK(n == 0 || fwrite(p, 1, n, f) == n);
	CHECK(fclose(f) == 0);
}

/* Models from a configuration, fed records through the registry as the
 * daemon does, then encoded: each block's payload is one model seed; a
 * whole checkpoint (header, blocks, trailer) is the raw seed. */
static void
seed_models(const char *dir)
{
	static const char cfg[] =
	    "[daemon]\nhistory = 4\nhistory_every = 3\n"
	    "[model m]\nfields = a b\ntarget = y\n"
	    "terms = a, b, a*b, a^2, prev(a), prev(y)\nmemory = 0.9\n"
	    "r2_floor = 0.5\ntolerance = - 1% 0.5 - - - -\n"
	    "[model p]\nfields = x\nscale = none\nprior = 1 2\n"
	    "prior_sd = 0.5\nreference = 1 2\nmemory = 10s\n"
	    "[model s]\nfields = u v\nscale = u:10:2 v:0:0.001\n";
	static const char *const lines[] = {
	    "m 1 2 3", "m 2 3 1", "m 3 1 2", "m 5 2 2", "m 4 4 1",
	    "m 7 1 5", "m 6 3 3", "m 9 2 6", "p @1700000000 3 1",
	    "p @1700000005 5 2", "p @1700000009 6.9 3", "s 1 2 3",
	    "s 2 3 5", "s 3 4 4", "s 4 1 2", ".x", NULL };
	static struct proto_msg msg;
	struct conf *c;
	struct conf_error ce;
	struct registry *r;
	struct reg_result res;
	struct reg_entry *e;
	struct persist_ckpt_hdr h;
	uint8_t *ck, *b;
	size_t cklen, len, i;
	char name[32];

	CHECK(conf_parse(cfg, sizeof(cfg) - 1, &c, &ce) == 0);
	CHECK((r = registry_new(c)) != NULL);
	for (i = 0; lines[i + 1] != NULL; i++) {
		CHECK(proto_parse_line(lines[i], strlen(lines[i]), i + 1,
		    &msg) == PROTO_MSG);
		CHECK(registry_record(r, &msg, 1.7e9 + (double)i, &res) == 0);
	}
	CHECK((ck = malloc(1 << 20)) != NULL);
	memset(&h, 0, sizeof(h));
	h.version = PERSIST_VERSION;
	h.seq = 7;
	h.nmodels = 3;
	h.created = 1.7e9;
	persist_ckpt_hdr_encode(&h, ck);
	cklen = PERSIST_CKPT_HDR_LEN;
	for (i = 0; i < 3; i++) {
		e = registry_find(r, &"mps"[i], 1);
		CHECK(e != NULL);
		b = encode(e, &len);
		CHECK(b != NULL && cklen + len < (1 << 20) - 64);
		snprintf(name, sizeof(name), "model-%c", "mps"[i]);
		seed_write(dir, name, 0, b + PERSIST_BLOCK_HDR_LEN,
		    len - PERSIST_BLOCK_HDR_LEN);
		memcpy(ck + cklen, b, len);
		cklen += len;
		free(b);
	}
	persist_ckpt_end_encode(3, ck + cklen);
	cklen += PERSIST_CKPT_END_LEN;
	seed_write(dir, "raw-checkpoint", 2, ck, cklen);
	free(ck);
	registry_free(r);
	conf_free(c);
}

/* One journal seed with an entry of every type. */
static void
seed_journal(const char *dir)
{
	static const char text[] = "[model m]\nfields = x\n";
	static const double x[3] = { 1.5, -2.25, 3 };
	struct persist_jentry je[6];
	struct persist_jnl_hdr h;
	uint8_t out[4096], frame[512];
	size_t n = 0, k, i;

	memset(je, 0, sizeof(je));
	je[0].type = PERSIST_J_CONF;
	je[0].text = text;
	je[0].textlen = sizeof(text) - 1;
	je[1] = je[0];
	je[1].type = PERSIST_J_RELOAD;
	for (i = 2; i < 6; i++) {
		je[i].name = "m";
		je[i].namelen = 1;
		je[i].t = 1.7e9;
	}
	je[2].type = PERSIST_J_RECORD;
	je[2].nx = 3;
	je[2].x = x;
	je[3].type = PERSIST_J_PIN;
	je[4].type = PERSIST_J_FREEZE;
	je[4].on = 1;
	je[5].type = PERSIST_J_RESET;
	for (i = 0; i < 6; i++) {
		k = persist_jentry_size(&je[i]);
		CHECK(k > 0 && k <= sizeof(frame));
		CHECK(persist_jentry_encode(&je[i], frame, k) == 0);
		k -= PERSIST_JENT_HDR_LEN;
		out[n++] = (uint8_t)k;
		out[n++] = (uint8_t)(k >> 8);
		memcpy(out + n, frame + PERSIST_JENT_HDR_LEN, k);
		n += k;
	}
	seed_write(dir, "journal-all-types", 1, out, n);
	memset(&h, 0, sizeof(h));
	h.version = PERSIST_VERSION;
	h.seq = 3;
	h.flags = PERSIST_JNL_AFTER_GAP;
	persist_jnl_hdr_encode(&h, out);
	seed_write(dir, "raw-journal-header", 2, out, PERSIST_JNL_HDR_LEN);
}

int
LLVMFuzzerInitialize(int *argc, char ***argv)
{
	const char *dir = getenv("FUZZ_PERSIST_SEEDS");

	(void)argc;
	(void)argv;
	if (dir != NULL) {
		seed_models(dir);
		seed_journal(dir);
	}
	return 0;
}

int
LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	if (size < 1)
		return 0;
	switch (data[0] % 3) {
	case 0:
		model_mode(data + 1, size - 1);
		break;
	case 1:
		journal_mode(data + 1, size - 1);
		break;
	default:
		raw_mode(data + 1, size - 1);
		break;
	}
	return 0;
}
