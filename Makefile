# SPDX-License-Identifier: ISC
# coefd: one GNU Makefile. CC, CFLAGS, LDFLAGS, OPT may be overridden; the
# project's own flags are composed into FINAL_CFLAGS / FINAL_LDFLAGS.
#
# Public targets: all (default), check, san, integration, demo, bench,
# clean, deps. The top-level targets first run the dependency step
# (.ci/deps), then re-enter make so pkg-config sees the installed packages.

CC      ?= cc
OPT     ?= -O2
CFLAGS  ?= -g
LDFLAGS ?=
BUILD   ?= build

WARN = -Wall -Wextra -Wstrict-prototypes -Wmissing-prototypes \
       -Wmissing-declarations -Wshadow -Wpointer-arith -Wcast-qual \
       -Wsign-compare -Wformat=2
HARDEN = -D_FORTIFY_SOURCE=2 -fstack-protector-strong \
         -fstack-clash-protection -fPIE
HARDEN_LD = -pie -Wl,-z,relro,-z,now

PKGS_CORE = lapacke openblas
PKGS_NET  = libuv
PKGS_TEST = check

# Evaluated lazily (at recipe time), after the dependency step ran.
CORE_CFLAGS = $(shell pkg-config --cflags $(PKGS_CORE))
CORE_LIBS   = $(shell pkg-config --libs $(PKGS_CORE)) -lm
NET_CFLAGS  = $(shell pkg-config --cflags $(PKGS_NET))
NET_LIBS    = $(shell pkg-config --libs $(PKGS_NET))
TEST_CFLAGS = $(shell pkg-config --cflags $(PKGS_TEST))
TEST_LIBS   = $(shell pkg-config --libs $(PKGS_TEST))

FINAL_CFLAGS  = -std=gnu11 $(OPT) $(WARN) $(HARDEN) -MMD -MP -Idaemon \
                $(CFLAGS) $(SAN)
FINAL_LDFLAGS = $(HARDEN_LD) $(LDFLAGS) $(SAN)

# The pure engine: no I/O, no libuv, no globals. Built into libcore.a, which
# the daemon, the client and the unit tests link. Add new pure modules here.
CORE_SRC = \
	daemon/alarm.c \
	daemon/cmd.c \
	daemon/conf.c \
	daemon/registry.c \
	daemon/dist.c \
	daemon/err.c \
	daemon/json.c \
	daemon/model.c \
	daemon/persist.c \
	daemon/proto.c \
	daemon/render.c \
	daemon/rls.c \
	daemon/stats.c \
	daemon/terms.c
# Daemon-only modules (may use libuv and I/O).
DAEMON_SRC = \
	daemon/log.c \
	daemon/main.c \
	daemon/net.c \
	daemon/state.c
CLIENT_SRC = \
	client/csv.c \
	client/fit.c \
	client/main.c
# Unit tests: one check_<module>.c per pure module plus the runner.
TEST_SRC = \
	tests/check_alarm.c \
	tests/check_conf.c \
	tests/check_dist.c \
	tests/check_err.c \
	tests/check_json.c \
	tests/check_main.c \
	tests/check_model.c \
	tests/check_nist.c \
	tests/check_persist.c \
	tests/check_proto.c \
	tests/check_recursive.c \
	tests/check_rls.c \
	tests/check_stats.c \
	tests/check_terms.c \
	tests/nist.c \
	tests/testutil.c

CORE_OBJ   = $(CORE_SRC:%.c=$(BUILD)/%.o)
DAEMON_OBJ = $(DAEMON_SRC:%.c=$(BUILD)/%.o)
CLIENT_OBJ = $(CLIENT_SRC:%.c=$(BUILD)/%.o)
TEST_OBJ   = $(TEST_SRC:%.c=$(BUILD)/%.o)

LIBCORE = $(BUILD)/libcore.a
COEFD   = $(BUILD)/coefd
COEFCTL = $(BUILD)/coefctl
UNITS   = $(BUILD)/check_unit

export OPENBLAS_NUM_THREADS = 1

.PHONY: all check san integration demo bench clean deps \
        _all _check _unit _integration

all: deps
	@$(MAKE) --no-print-directory _all

check: deps
	@$(MAKE) --no-print-directory _check

# The same tests under AddressSanitizer + UndefinedBehaviorSanitizer, in a
# separate build tree so the normal objects are not mixed with these.
san: deps
	@$(MAKE) --no-print-directory BUILD=build-san OPT=-O1 \
	    SAN="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all" \
	    _check

integration: deps
	@$(MAKE) --no-print-directory _integration

deps:
	@sh .ci/deps

_all: $(COEFD) $(COEFCTL)

_check: _all $(UNITS)
	@$(MAKE) --no-print-directory _unit
	@$(MAKE) --no-print-directory _integration

_unit: $(UNITS)
	CK_DEFAULT_TIMEOUT=600 COEFD_TESTDATA=tests/data $(UNITS)

_integration: _all
	@sh tests/integration/run.sh $(BUILD)

$(LIBCORE): $(CORE_OBJ)
	@rm -f $@
	ar rcs $@ $^

$(COEFD): $(DAEMON_OBJ) $(LIBCORE)
	$(CC) $(FINAL_LDFLAGS) -o $@ $(DAEMON_OBJ) $(LIBCORE) $(NET_LIBS) $(CORE_LIBS)

$(COEFCTL): $(CLIENT_OBJ) $(LIBCORE)
	$(CC) $(FINAL_LDFLAGS) -o $@ $(CLIENT_OBJ) $(LIBCORE) $(CORE_LIBS)

# Unit tests link libcore.a with only LAPACKE/OpenBLAS, Check and libm: a
# stray libuv or daemon dependency in a pure module fails this link.
$(UNITS): $(TEST_OBJ) $(LIBCORE)
	$(CC) $(FINAL_LDFLAGS) -o $@ $(TEST_OBJ) $(LIBCORE) $(TEST_LIBS) $(CORE_LIBS)

$(BUILD)/daemon/%.o: daemon/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) $(CORE_CFLAGS) $(NET_CFLAGS) -c -o $@ $<

$(BUILD)/client/%.o: client/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) $(CORE_CFLAGS) -c -o $@ $<

$(BUILD)/tests/%.o: tests/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) $(CORE_CFLAGS) $(TEST_CFLAGS) -c -o $@ $<

clean:
	rm -rf build build-san

-include $(CORE_OBJ:.o=.d) $(DAEMON_OBJ:.o=.d) $(CLIENT_OBJ:.o=.d) $(TEST_OBJ:.o=.d)
