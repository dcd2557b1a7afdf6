# SPDX-License-Identifier: ISC
# coefd: one GNU Makefile. CC, CFLAGS, LDFLAGS, OPT may be overridden; the
# project's own flags are composed into FINAL_CFLAGS / FINAL_LDFLAGS.
#
# Public targets: all (default), check, san, valgrind, fuzz, fuzz-ci,
# integration, demo, bench, install, uninstall, clean, deps. The top-level targets first run the dependency step
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
                $(PATH_DEFS) $(CFLAGS) $(SAN)
# The per-record engine (rls.c): gcc vectorises its rotation loops only at
# -O3; -ffp-contract=off keeps the arithmetic the same on every target (no
# fused multiply-add in the wider clones), so results stay bit for bit.
# Measured in tests/bench (README, Performance).
HOT_OPT ?= -O3
HOT_CFLAGS = $(HOT_OPT) -ffp-contract=off
FINAL_LDFLAGS = $(HARDEN_LD) $(LDFLAGS) $(SAN)

# The pure engine: no I/O, no libuv, no globals. Built into libcore.a, which
# the daemon, the client and the unit tests link. Add new pure modules here.
CORE_SRC = \
	daemon/activate.c \
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
	daemon/notify.c \
	daemon/state.c
CLIENT_SRC = \
	client/admin.c \
	client/conn.c \
	client/csv.c \
	client/feed.c \
	client/fit.c \
	client/jread.c \
	client/main.c \
	client/out.c \
	client/plot.c \
	client/query.c \
	client/watch.c
# Unit tests: one check_<module>.c per pure module plus the runner. The
# client's pure JSON reader is compiled in here too (it is not daemon code,
# so it stays out of libcore.a).
TEST_SRC = \
	client/jread.c \
	tests/check_activate.c \
	tests/check_alarm.c \
	tests/check_conf.c \
	tests/check_confman.c \
	tests/check_dist.c \
	tests/check_err.c \
	tests/check_jread.c \
	tests/check_json.c \
	tests/check_main.c \
	tests/check_model.c \
	tests/check_nist.c \
	tests/check_persist.c \
	tests/check_proto.c \
	tests/check_recursive.c \
	tests/check_registry.c \
	tests/check_rls.c \
	tests/check_stats.c \
	tests/check_terms.c \
	tests/check_torture.c \
	tests/nist.c \
	tests/testutil.c

# Benchmarks (make bench only; not part of check or CI).
BENCH_SRC = \
	tests/bench/bench_engine.c \
	tests/bench/loadgen.c

CORE_OBJ   = $(CORE_SRC:%.c=$(BUILD)/%.o)
DAEMON_OBJ = $(DAEMON_SRC:%.c=$(BUILD)/%.o)
CLIENT_OBJ = $(CLIENT_SRC:%.c=$(BUILD)/%.o)
TEST_OBJ   = $(TEST_SRC:%.c=$(BUILD)/%.o)
BENCH_OBJ  = $(BENCH_SRC:%.c=$(BUILD)/%.o)

LIBCORE = $(BUILD)/libcore.a
COEFD   = $(BUILD)/coefd
COEFCTL = $(BUILD)/coefctl
UNITS   = $(BUILD)/check_unit
BENCH_ENGINE = $(BUILD)/bench_engine
LOADGEN = $(BUILD)/loadgen
PYTHON  ?= /usr/bin/python3

export OPENBLAS_NUM_THREADS = 1

# Installation directories (GNU names). sysconfdir and localstatedir
# default to /etc and /var, not under PREFIX: the unit's
# ConfigurationDirectory= and StateDirectory= are always /etc/coefd and
# /var/lib/coefd, and the daemon's built-in defaults must agree with them.
# Both are compiled in (the default config path, the default state_dir)
# and written into the unit, the man pages and the example config; DESTDIR
# is used only when copying and never ends up in a file.
PREFIX        ?= /usr/local
prefix        ?= $(PREFIX)
exec_prefix   ?= $(prefix)
bindir        ?= $(exec_prefix)/bin
sbindir       ?= $(exec_prefix)/sbin
sysconfdir    ?= /etc
localstatedir ?= /var
datarootdir   ?= $(prefix)/share
mandir        ?= $(datarootdir)/man
bashcompdir   ?= $(datarootdir)/bash-completion/completions
# $(prefix)/lib/... is on systemd's search paths for /usr and /usr/local.
systemdsystemunitdir ?= $(prefix)/lib/systemd/system
sysusersdir   ?= $(prefix)/lib/sysusers.d
INSTALL       ?= install

.PHONY: all check san valgrind fuzz fuzz-ci integration demo bench clean \
        deps install uninstall _all _check _unit _integration _dist \
        _valgrind _fuzz _bench FORCE

all: deps
	@$(MAKE) --no-print-directory _all

check: deps
	@$(MAKE) --no-print-directory _check

# The same tests under AddressSanitizer + UndefinedBehaviorSanitizer, in a
# separate build tree so the normal objects are not mixed with these.
san: deps
	@$(MAKE) --no-print-directory BUILD=build-san OPT=-O1 HOT_OPT= \
	    SAN="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all" \
	    TORTURE_N=1000000 _check

integration: deps
	@$(MAKE) --no-print-directory _integration

# The unit tests (CK_FORK=no, one process) and every integration test
# with the daemon under valgrind memcheck: any memory error or any lost
# block fails (each run's log must be empty). A block main forgot to free
# at a clean shutdown shows as lost, since main's frame is gone when the
# leak check runs; "still reachable" blocks are allowed, because a second
# SIGTERM exits at once (by design) from inside the loop.
VALGRIND = valgrind -q --leak-check=full \
	--show-leak-kinds=definite,indirect,possible \
	--errors-for-leak-kinds=definite,indirect,possible --error-exitcode=99

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
	persist \
	proto
FUZZ_SAN = -fsanitize=fuzzer-no-link,address,undefined \
	-fno-omit-frame-pointer -fno-sanitize-recover=all

fuzz: deps
	@sh .ci/deps fuzz
	@$(MAKE) --no-print-directory BUILD=build-fuzz CC=$(FUZZ_CC) OPT=-O1 HOT_OPT= \
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

# The greenhouse demo (tests/demo/run.sh): builds, runs, checks its outcome.
demo: deps
	@$(MAKE) --no-print-directory _all
	@sh tests/demo/run.sh $(BUILD)
# Benchmarks and performance targets: prints one table (tests/bench/run.py),
# about 2-3 minutes, loopback only. Never gates anything on speed.
bench: deps
	@$(MAKE) --no-print-directory _bench

deps:
	@sh .ci/deps

_all: $(COEFD) $(COEFCTL) _dist

_check: _all $(UNITS)
	@$(MAKE) --no-print-directory _unit
	@$(MAKE) --no-print-directory _integration

_unit: $(UNITS)
	@sh tests/purity.sh $(LIBCORE)
	CK_DEFAULT_TIMEOUT=600 COEFD_TESTDATA=tests/data \
	    COEFD_TORTURE_N=$(TORTURE_N) $(UNITS)

_integration: _all
	@sh tests/integration/run.sh $(BUILD)

_bench: _all $(BENCH_ENGINE) $(LOADGEN)
	$(PYTHON) tests/bench/run.py $(BUILD) \
	    "OPT=$(OPT); rls.c adds $(HOT_CFLAGS); CFLAGS=$(CFLAGS)"

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

$(BENCH_ENGINE): $(BUILD)/tests/bench/bench_engine.o $(LIBCORE)
	$(CC) $(FINAL_LDFLAGS) -o $@ $(BUILD)/tests/bench/bench_engine.o \
	    $(LIBCORE) $(CORE_LIBS)

$(LOADGEN): $(BUILD)/tests/bench/loadgen.o
	$(CC) $(FINAL_LDFLAGS) -o $@ $(BUILD)/tests/bench/loadgen.o -lpthread

$(BUILD)/daemon/rls.o: FINAL_CFLAGS += $(HOT_CFLAGS)

$(BUILD)/daemon/%.o: daemon/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) $(CORE_CFLAGS) $(NET_CFLAGS) -c -o $@ $<

$(BUILD)/client/%.o: client/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) $(CORE_CFLAGS) -c -o $@ $<

$(BUILD)/tests/%.o: tests/%.c
	@mkdir -p $(@D)
	$(CC) $(FINAL_CFLAGS) -Iclient $(CORE_CFLAGS) $(TEST_CFLAGS) -c -o $@ $<

# --- paths compiled in and generated files ---

# The objects that embed a path are rebuilt when a path changes: the stamp
# is rewritten only when its content differs.
PATHS_STAMP = $(BUILD)/paths.stamp
PATH_OBJ = $(BUILD)/daemon/main.o $(BUILD)/daemon/conf.o \
           $(BUILD)/tests/check_conf.o
$(PATH_OBJ): PATH_DEFS = -DSYSCONFDIR='"$(sysconfdir)"' \
                         -DLOCALSTATEDIR='"$(localstatedir)"'
$(PATH_OBJ): $(PATHS_STAMP)

$(PATHS_STAMP): FORCE
	@mkdir -p $(@D)
	@printf '%s\n' '$(bindir)' '$(sbindir)' '$(sysconfdir)' \
	    '$(localstatedir)' >$@.tmp
	@if cmp -s $@.tmp $@; then rm -f $@.tmp; else mv $@.tmp $@; fi

# Default paths in the sources become the configured ones.
PATH_SED = sed -e 's|/etc/coefd|$(sysconfdir)/coefd|g' \
               -e 's|/var/lib/coefd|$(localstatedir)/lib/coefd|g'
ifeq ($(sysconfdir),/etc)
UNIT_CONF = -e 's|@CONFFILE@|$${CONFIGURATION_DIRECTORY}/coefd.conf|'
else
UNIT_CONF = -e 's|@CONFFILE@|$(sysconfdir)/coefd/coefd.conf|' \
            -e '/^ConfigurationDirectory=/d'
endif
ifeq ($(localstatedir),/var)
UNIT_STATE =
else
UNIT_STATE = -e 's|^StateDirectory=coefd$$|ReadWritePaths=$(localstatedir)/lib/coefd|' \
             -e '/^StateDirectoryMode=/d'
endif

DIST = $(BUILD)/dist
DIST_FILES = $(DIST)/coefd.service $(DIST)/coefd.socket \
             $(DIST)/coefd.sysusers $(DIST)/coefd.conf $(DIST)/coefd.8 \
             $(DIST)/coefd.conf.5
_dist: $(DIST_FILES)

$(DIST)/coefd.service: systemd/coefd.service.in $(PATHS_STAMP)
	@mkdir -p $(@D)
	sed -e 's|@SBINDIR@|$(sbindir)|g' -e 's|@BINDIR@|$(bindir)|g' \
	    $(UNIT_CONF) $(UNIT_STATE) systemd/coefd.service.in >$@
$(DIST)/coefd.socket: systemd/coefd.socket
	@mkdir -p $(@D)
	cp systemd/coefd.socket $@
$(DIST)/coefd.sysusers: systemd/coefd.sysusers
	@mkdir -p $(@D)
	cp systemd/coefd.sysusers $@
$(DIST)/coefd.conf: conf/coefd.conf $(PATHS_STAMP)
	@mkdir -p $(@D)
	$(PATH_SED) conf/coefd.conf >$@
$(DIST)/coefd.8: daemon/coefd.8 $(PATHS_STAMP)
	@mkdir -p $(@D)
	$(PATH_SED) daemon/coefd.8 >$@
$(DIST)/coefd.conf.5: daemon/coefd.conf.5 $(PATHS_STAMP)
	@mkdir -p $(@D)
	$(PATH_SED) daemon/coefd.conf.5 >$@

# --- install / uninstall ---

# The client's manual page and completion are installed when present.
CLIENT_MAN  = $(wildcard client/coefctl.1)
CLIENT_COMP = $(wildcard client/coefctl.bash)

install: all
	$(INSTALL) -d $(DESTDIR)$(sbindir) $(DESTDIR)$(bindir) \
	    $(DESTDIR)$(sysconfdir)/coefd $(DESTDIR)$(mandir)/man8 \
	    $(DESTDIR)$(mandir)/man5 $(DESTDIR)$(systemdsystemunitdir) \
	    $(DESTDIR)$(sysusersdir) $(DESTDIR)$(bashcompdir)
	$(INSTALL) -m 0755 $(COEFD) $(DESTDIR)$(sbindir)/coefd
	$(INSTALL) -m 0755 $(COEFCTL) $(DESTDIR)$(bindir)/coefctl
	@# An existing configuration is the administrator's: never replaced.
	@if [ -e $(DESTDIR)$(sysconfdir)/coefd/coefd.conf ]; then \
	    echo "keeping existing $(DESTDIR)$(sysconfdir)/coefd/coefd.conf"; \
	else \
	    echo "$(INSTALL) -m 0644 $(DIST)/coefd.conf $(DESTDIR)$(sysconfdir)/coefd/coefd.conf"; \
	    $(INSTALL) -m 0644 $(DIST)/coefd.conf \
	        $(DESTDIR)$(sysconfdir)/coefd/coefd.conf; \
	fi
	$(INSTALL) -m 0644 $(DIST)/coefd.8 $(DESTDIR)$(mandir)/man8/coefd.8
	$(INSTALL) -m 0644 $(DIST)/coefd.conf.5 \
	    $(DESTDIR)$(mandir)/man5/coefd.conf.5
	$(INSTALL) -m 0644 $(DIST)/coefd.service $(DIST)/coefd.socket \
	    $(DESTDIR)$(systemdsystemunitdir)
	$(INSTALL) -m 0644 $(DIST)/coefd.sysusers \
	    $(DESTDIR)$(sysusersdir)/coefd.conf
	$(INSTALL) -m 0644 daemon/coefd.bash $(DESTDIR)$(bashcompdir)/coefd
ifneq ($(CLIENT_MAN),)
	$(INSTALL) -d $(DESTDIR)$(mandir)/man1
	$(INSTALL) -m 0644 $(CLIENT_MAN) $(DESTDIR)$(mandir)/man1/coefctl.1
endif
ifneq ($(CLIENT_COMP),)
	$(INSTALL) -m 0644 $(CLIENT_COMP) $(DESTDIR)$(bashcompdir)/coefctl
endif
ifneq ($(localstatedir),/var)
	$(INSTALL) -d -m 0750 $(DESTDIR)$(localstatedir)/lib/coefd
endif

# Removes what install put there. The configuration goes only when it is
# still the unmodified example; the state directory is never removed.
uninstall:
	rm -f $(DESTDIR)$(sbindir)/coefd $(DESTDIR)$(bindir)/coefctl \
	    $(DESTDIR)$(mandir)/man8/coefd.8 \
	    $(DESTDIR)$(mandir)/man5/coefd.conf.5 \
	    $(DESTDIR)$(mandir)/man1/coefctl.1 \
	    $(DESTDIR)$(systemdsystemunitdir)/coefd.service \
	    $(DESTDIR)$(systemdsystemunitdir)/coefd.socket \
	    $(DESTDIR)$(sysusersdir)/coefd.conf \
	    $(DESTDIR)$(bashcompdir)/coefd $(DESTDIR)$(bashcompdir)/coefctl
	@f=$(DESTDIR)$(sysconfdir)/coefd/coefd.conf; \
	if [ -e "$$f" ] && ! $(PATH_SED) conf/coefd.conf | cmp -s - "$$f"; then \
	    echo "keeping modified $$f"; \
	else \
	    rm -f "$$f"; rmdir $(DESTDIR)$(sysconfdir)/coefd 2>/dev/null || :; \
	fi

clean:
	rm -rf build build-san build-fuzz

-include $(CORE_OBJ:.o=.d) $(DAEMON_OBJ:.o=.d) $(CLIENT_OBJ:.o=.d) $(TEST_OBJ:.o=.d) \
    $(BENCH_OBJ:.o=.d)
-include $(FUZZ_TARGETS:%=$(BUILD)/tests/fuzz/fuzz_%.d)
