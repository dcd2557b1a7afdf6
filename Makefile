# SPDX-License-Identifier: ISC
# coefd: one GNU Makefile. CC, CFLAGS, LDFLAGS, OPT may be overridden; the
# project's own flags are composed into FINAL_CFLAGS / FINAL_LDFLAGS.
#
# Public targets: all (default), check, san, valgrind, fuzz, fuzz-ci,
# integration, demo, bench, clean, deps. The top-level targets first run the dependency step
# (.ci/deps), then re-enter make so pkg-config sees the installed packages.

CC      ?= cc
OPT     ?= -O2
CFLAGS  ?= -g
LDFLAGS ?=
BUILD   ?= build
# Records in the long constant-feature torture test (empty: 10^7); the
# sanitizer and valgrind runs use fewer.
TORTURE_N ?=

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
	daemon/proto.c \
	daemon/render.c \
	daemon/rls.c \
	daemon/stats.c \
	daemon/terms.c
# Daemon-only modules (may use libuv and I/O).
DAEMON_SRC = \
	daemon/log.c \
	daemon/main.c \
	daemon/net.c
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
	tests/check_proto.c \
	tests/check_recursive.c \
	tests/check_rls.c \
	tests/check_stats.c \
	tests/check_terms.c \
	tests/check_torture.c \
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

.PHONY: all check san valgrind fuzz fuzz-ci integration demo bench clean \
        deps _all _check _unit _integration _valgrind _fuzz

all: deps
	@$(MAKE) --no-print-directory _all

check: deps
	@$(MAKE) --no-print-directory _check

# The same tests under AddressSanitizer + UndefinedBehaviorSanitizer, in a
# separate build tree so the normal objects are not mixed with these.
san: deps
	@$(MAKE) --no-print-directory BUILD=build-san OPT=-O1 \
	    SAN="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all" \
	    TORTURE_N=1000000 _check

integration: deps
	@$(MAKE) --no-print-directory _integration

# The unit tests (CK_FORK=no, one process) and every integration test
# with the daemon under valgrind memcheck: any error or any block still
# allocated at the daemon's clean shutdown fails (each run's log must be
# empty). tests/valgrind.supp lists the C library's own allocations.
VALGRIND = valgrind -q --leak-check=full --show-leak-kinds=all \
	--errors-for-leak-kinds=all --error-exitcode=99 \
	--suppressions=$(CURDIR)/tests/valgrind.supp

valgrind: deps
	@sh .ci/deps valgrind
	@$(MAKE) --no-print-directory _valgrind

_valgrind: _all $(UNITS)
	CK_FORK=no CK_DEFAULT_TIMEOUT=6000 COEFD_TESTDATA=tests/data \
	    COEFD_TORTURE_N=100000 $(VALGRIND) $(UNITS)
	@rm -rf $(BUILD)/valgrind && mkdir -p $(BUILD)/valgrind
	COEFD_WRAP="$(VALGRIND) --log-file=$(CURDIR)/$(BUILD)/valgrind/coefd.%p.log" \
	    sh tests/integration/run.sh $(BUILD)
	@n=0; bad=0; for f in $(BUILD)/valgrind/*.log; do \
	    n=$$((n + 1)); [ -s "$$f" ] && { cat "$$f"; bad=1; }; \
	done; \
	if [ $$bad -eq 0 ]; then \
	    echo "valgrind: $$n daemon runs, no errors, no leaks"; \
	else echo "valgrind: errors or leaks (logs above)"; exit 1; fi

# Fuzzing with libFuzzer (clang): each target in FUZZ_TARGETS is
# tests/fuzz/fuzz_<name>.c with seeds in tests/fuzz/<name>/ (and an
# optional tests/fuzz/<name>.dict); run.sh prints executions and coverage.
# fuzz-ci is the short pass CI runs.
FUZZ_SECONDS ?= 60
FUZZ_CC ?= clang
FUZZ_TARGETS = \
	cmd \
	conf \
	proto
FUZZ_SAN = -fsanitize=fuzzer-no-link,address,undefined \
	-fno-omit-frame-pointer -fno-sanitize-recover=all

fuzz: deps
	@sh .ci/deps fuzz
	@$(MAKE) --no-print-directory BUILD=build-fuzz CC=$(FUZZ_CC) OPT=-O1 \
	    SAN="$(FUZZ_SAN)" FUZZ_SECONDS=$(FUZZ_SECONDS) _fuzz

fuzz-ci:
	@$(MAKE) --no-print-directory fuzz FUZZ_SECONDS=20

_fuzz: $(FUZZ_TARGETS:%=$(BUILD)/fuzz_%)
	@for t in $(FUZZ_TARGETS); do \
	    sh tests/fuzz/run.sh $(BUILD) $$t $(FUZZ_SECONDS) || exit 1; \
	done

# Keep the objects (they are intermediate in this pattern chain).
.SECONDARY: $(FUZZ_TARGETS:%=$(BUILD)/tests/fuzz/fuzz_%.o)
$(BUILD)/fuzz_%: $(BUILD)/tests/fuzz/fuzz_%.o $(LIBCORE)
	$(CC) $(FINAL_LDFLAGS) -fsanitize=fuzzer -o $@ $< $(LIBCORE) $(CORE_LIBS)

deps:
	@sh .ci/deps

_all: $(COEFD) $(COEFCTL)

_check: _all $(UNITS)
	@$(MAKE) --no-print-directory _unit
	@$(MAKE) --no-print-directory _integration

_unit: $(UNITS)
	@sh tests/purity.sh $(LIBCORE)
	CK_DEFAULT_TIMEOUT=600 COEFD_TESTDATA=tests/data \
	    COEFD_TORTURE_N=$(TORTURE_N) $(UNITS)

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
	rm -rf build build-san build-fuzz

-include $(CORE_OBJ:.o=.d) $(DAEMON_OBJ:.o=.d) $(CLIENT_OBJ:.o=.d) $(TEST_OBJ:.o=.d)
