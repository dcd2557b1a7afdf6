/* SPDX-License-Identifier: ISC */
/*
 * libFuzzer target for what a hostile peer reaches behind the parser: the
 * command layer (daemon/cmd.c) and the registry, models and terms under
 * it, with a fixed configuration (templates with derived terms, prev(),
 * automatic and explicit scaling, a prior, a small model limit). Each
 * input line is parsed and handled as the daemon does; the first byte
 * picks the session kind (Unix admin or not, TCP with a token, UDP).
 * Every reply must be one valid JSON object, and a session on UDP must
 * get none. Built with clang -fsanitize=fuzzer by `make fuzz`.
 */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "conf.h"
#include "json.h"
#include "jsoncheck.h"
#include "proto.h"
#include "registry.h"

int	LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

#define CHECK(cond)	do { if (!(cond)) abort(); } while (0)

static const char config[] =
    "[daemon]\n"
    "max_models = 24\n"
    "history = 8\n"
    "history_every = 2\n"
    "[model m]\n"
    "fields = a b\n"
    "target = y\n"
    "terms = a, b, a*b, a^2, prev(a), prev(y)\n"
    "memory = 0.9\n"
    "r2_floor = 0.5\n"
    "tolerance = - 1% 0.5 - - - -\n"
    "[model p]\n"
    "fields = x\n"
    "scale = none\n"
    "prior = 1 2\n"
    "prior_sd = 0.5\n"
    "reference = 1 2\n"
    "memory = 10s\n"
    "[model s]\n"
    "fields = u v\n"
    "scale = u:10:2 v:0:0.001\n"
    "gate = 2\n"
    "gate_run = 2\n"
    "warmup = 0\n"
    "dwell = 1\n"
    "[template t*]\n"
    "fields = x z\n"
    "terms = x, z, x*z, z^3\n"
    "memory = 1\n"
    "[template *]\n"
    "fields = x\n"
    "intercept = no\n";

int
LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
	static struct conf *c;
	static struct proto_msg msg;
	static char buf[1 << 20];
	struct conf_error ce;
	struct registry *r;
	struct cmd_ctx ctx;
	struct session s;
	struct json j;
	const char *p, *end, *nl;
	uint64_t line = 0;
	int st, rep;

	if (c == NULL && conf_parse(config, sizeof(config) - 1, &c, &ce) != 0)
		abort();
	if (size < 1)
		return 0;
	CHECK((r = registry_new(c)) != NULL);
	memset(&ctx, 0, sizeof(ctx));
	ctx.reg = r;
	ctx.token = (data[0] & 4) ? "tok" : NULL;
	ctx.version = "fuzz";
	memset(&s, 0, sizeof(s));
	s.kind = (enum session_kind)(data[0] % 3);
	s.admin = (data[0] & 8) != 0;
	s.need_token = s.kind == SESSION_TCP && ctx.token != NULL;

	for (p = (const char *)data + 1, end = (const char *)data + size;
	    p < end && !s.close_after; p = nl + 1) {
		if ((nl = memchr(p, '\n', (size_t)(end - p))) == NULL)
			nl = end;
		st = proto_parse_line(p, (size_t)(nl - p), ++line, &msg);
		if (st == PROTO_MSG && msg.kind == PROTO_EMPTY)
			continue;
		json_init(&j, buf, sizeof(buf));
		/* Time moves one second per line, with a jump now and then. */
		rep = cmd_handle(&ctx, &s, &msg, 1.7e9 + (double)line +
		    (line % 97 == 0 ? 1e6 : 0), &j);
		CHECK(rep == 0 || rep == 1);
		if (s.kind == SESSION_UDP)
			CHECK(rep == 0);
		if (rep == 1) {
			CHECK(json_finish(&j) == 0);
			CHECK(json_valid_object(j.buf, j.len));
		}
	}
	CHECK(registry_count(r) <= (size_t)c->d.max_models);
	cmd_session_closed(&ctx, &s);
	registry_free(r);
	return 0;
}
