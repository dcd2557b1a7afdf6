#!/bin/sh
# SPDX-License-Identifier: ISC
# coefd as a service: the notification datagrams a real run sends (READY,
# STATUS, RELOADING, STOPPING, WATCHDOG) as seen by a receiver bound where
# NOTIFY_SOCKET points (the protocol of sd_notify(3)); sockets handed over
# by systemd-socket-activate (LISTEN_FDS, sd_listen_fds(3)); the hardening
# of the binaries (readelf); make install/uninstall into a DESTDIR; the
# manual pages (mandoc -Tlint); the units (systemd-analyze verify and
# security). A check that cannot run here is skipped with the reason.
. tests/integration/lib.sh

skip() {
	echo "  SKIP $1"
}

# send_to PATH: like send, to another Unix socket.
send_to() {
	SOCK_SAVE=$SOCK
	SOCK=$1
	send
	SOCK=$SOCK_SAVE
}

# A datagram receiver: one line per message (JSON string) in file $2.
start_receiver() {
	"$PY" -c '
import json, socket, sys
addr = sys.argv[1]
s = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
s.bind("\0" + addr[1:] if addr.startswith("@") else addr)
open(sys.argv[3], "w").close()
with open(sys.argv[2], "w") as out:
    while True:
        d = s.recv(4096)
        out.write(json.dumps(d.decode()) + "\n")
        out.flush()
' "$1" "$2" "$2.up" &
	RPID=$!
	i=0
	while [ ! -e "$2.up" ] && [ $i -lt 100 ]; do sleep 0.05; i=$((i + 1)); done
}

stop_receiver() {
	kill "$RPID" 2>/dev/null
	wait "$RPID" 2>/dev/null
	RPID=
}
RPID=
cleanup_service() {
	[ -n "$RPID" ] && kill "$RPID" 2>/dev/null
	[ -n "${APID:-}" ] && kill -KILL "$APID" 2>/dev/null
	cleanup
}
trap cleanup_service EXIT INT TERM

# msgs FILE: the messages, one per line, newlines inside shown as '|'.
msgs() {
	"$PY" -c '
import json, sys
for l in open(sys.argv[1]):
    print(json.loads(l).replace("\n", "|"))
' "$1"
}

cat >"$TMP/s.conf" <<'EOF'
[daemon]
log_level = info
[model line]
fields = x
target = y
memory = 1
EOF
cp "$TMP/s.conf" "$TMP/good.conf"

echo "t_service: notifications from a real run"
start_receiver "$TMP/notify.sock" "$TMP/n.log"
# A 200 ms watchdog: pings expected every 100 ms.
export NOTIFY_SOCKET="$TMP/notify.sock" WATCHDOG_USEC=200000
start_daemon "$TMP/s.conf"
unset NOTIFY_SOCKET WATCHDOG_USEC
sleep 0.3
msgs "$TMP/n.log" >"$TMP/n.txt"
check "READY=1 with a STATUS line after start" \
    grep -q '^READY=1|STATUS=0 models, 0 records/s, 0 alarms raised$' "$TMP/n.txt"
"$PY" -c '
import random
random.seed(3)
for i in range(1000):
    x = random.uniform(0, 10)
    print("line %r %r" % (1.0 + 2.0 * x + random.gauss(0, 0.1), x))
print(".sync")' | send >"$TMP/feed.out"
check "1000 records accepted" grep -q '"accepted":1000' "$TMP/feed.out"
# The STATUS refresh runs every 2 s; the first after the records counts
# 1000 records over about 2 s.
sleep 2.2
msgs "$TMP/n.log" >"$TMP/n.txt"
rate=$(sed -n 's/^STATUS=1 model, \([0-9.e+]*\) records\/s, [0-9]* alarms\{0,1\} raised$/\1/p' "$TMP/n.txt" | head -n 1)
check "periodic STATUS reports 1 model and records/s ($rate)" \
    "$PY" -c 'import sys; r = float(sys.argv[1]); sys.exit(not 300 < r < 700)' "${rate:-0}"
kill -HUP "$DPID"
sleep 0.2
printf '[daemon]\nno_such_key = 1\n' >"$TMP/s.conf"
printf '.reload\n' | send >"$TMP/reload.out"
check "a refused .reload is an error reply" grep -q '"error"' "$TMP/reload.out"
sleep 0.2
cp "$TMP/good.conf" "$TMP/s.conf"
stop_daemon
check "SIGTERM: exit 0" [ $? -eq 0 ]
sleep 0.1
stop_receiver
msgs "$TMP/n.log" | grep -v '^WATCHDOG=1$' >"$TMP/n.txt"
nwd=$(msgs "$TMP/n.log" | grep -c '^WATCHDOG=1$')
check "WATCHDOG=1 pinged at half the interval ($nwd pings in ~3 s, about 30 expected)" \
    [ "$nwd" -ge 15 -a "$nwd" -le 45 ]
check "first message is READY=1" \
    [ "$(head -n 1 "$TMP/n.txt" | cut -c1-8)" = "READY=1|" ]
check "SIGHUP: RELOADING=1 then READY=1 with STATUS" \
    grep -A1 '^RELOADING=1$' "$TMP/n.txt" | grep -q '^READY=1|STATUS=1 model'
check "refused reload: RELOADING=1, READY=1, STATUS names the failure" \
    grep -q '^READY=1|STATUS=1 model, .*; last reload failed: .*no_such_key' "$TMP/n.txt"
check "two reloads, two RELOADING=1" [ "$(grep -c '^RELOADING=1$' "$TMP/n.txt")" -eq 2 ]
check "STOPPING=1 is the last message" \
    [ "$(tail -n 1 "$TMP/n.txt")" = "STOPPING=1|STATUS=shutting down" ]
check "log lines carry syslog priority prefixes" \
    grep -q '^<5>coefd .* ready: ' "$TMP/coefd.log"

echo "t_service: abstract NOTIFY_SOCKET, watchdog for another pid"
start_receiver "@coefd-test-$$" "$TMP/a.log"
export NOTIFY_SOCKET="@coefd-test-$$" WATCHDOG_USEC=100000 WATCHDOG_PID=1
start_daemon "$TMP/s.conf"
unset NOTIFY_SOCKET WATCHDOG_USEC WATCHDOG_PID
sleep 0.4
stop_daemon
sleep 0.1
stop_receiver
msgs "$TMP/a.log" >"$TMP/a.txt"
check "READY=1 through the abstract namespace" grep -q '^READY=1|' "$TMP/a.txt"
check "no WATCHDOG=1 when WATCHDOG_PID names another process" \
    [ "$(grep -c '^WATCHDOG=1$' "$TMP/a.txt")" -eq 0 ]

echo "t_service: socket activation"
if command -v systemd-socket-activate >/dev/null 2>&1; then
	port=$("$PY" -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
	rm -f "$TMP/act.sock"
	systemd-socket-activate -l "$TMP/act.sock" -l "127.0.0.1:$port" \
	    --fdname=ctl:net -E OPENBLAS_NUM_THREADS=1 \
	    "$COEFD" -c "$TMP/s.conf" -s "$TMP/unused.sock" \
	    >"$TMP/act.log" 2>&1 &
	APID=$!
	i=0
	while [ ! -S "$TMP/act.sock" ] && [ $i -lt 100 ]; do sleep 0.05; i=$((i + 1)); done
	printf 'line 3 1\nline 5 2\n.sync\n.list\n' | send_to "$TMP/act.sock" >"$TMP/act.out"
	check "a client is served through the inherited Unix socket" \
	    grep -q '"accepted":2' "$TMP/act.out"
	"$PY" -c '
import socket, sys
s = socket.create_connection(("127.0.0.1", int(sys.argv[1])))
s.sendall(b".version\n"); s.shutdown(socket.SHUT_WR)
out = b""
while True:
    d = s.recv(4096)
    if not d:
        break
    out += d
sys.stdout.write(out.decode())' "$port" >"$TMP/tcp.out"
	check "and through the inherited TCP socket" grep -q '"version"' "$TMP/tcp.out"
	check "the configured socket was not bound" [ ! -e "$TMP/unused.sock" ]
	check "LISTEN_FDNAMES names logged" \
	    grep -q 'inherited fd 3 (ctl): unix listener' "$TMP/act.log"
	check "LISTEN_FDNAMES names logged (tcp)" \
	    grep -q 'inherited fd 4 (net): tcp listener' "$TMP/act.log"
	kill -TERM "$APID"
	wait "$APID"
	check "socket-activated coefd exits 0 on SIGTERM" [ $? -eq 0 ]
	APID=
	check "the inherited socket file is left to its owner" [ -S "$TMP/act.sock" ]
else
	skip "systemd-socket-activate not installed (Debian package systemd)"
fi
# An inherited socket coefd cannot use is a setup error: exit 78.
"$PY" -c '
import os, socket, sys
s = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
os.dup2(s.fileno(), 3)
os.environ["LISTEN_PID"] = str(os.getpid())
os.environ["LISTEN_FDS"] = "1"
os.execv(sys.argv[1], [sys.argv[1], "-c", sys.argv[2], "-s", sys.argv[3]])
' "$COEFD" "$TMP/s.conf" "$TMP/x.sock" >"$TMP/bad.log" 2>&1
check "an inherited datagram socket: exit 78" [ $? -eq 78 ]

echo "t_service: hardened binaries (readelf)"
if command -v readelf >/dev/null 2>&1; then
	for b in "$COEFD" "$COEFCTL"; do
		n=$(basename "$b")
		check "$n: PIE (ELF type DYN, FLAGS_1 PIE)" \
		    sh -c "readelf -h '$b' | grep -q 'Type: *DYN' &&
		    readelf -d '$b' | grep -q 'FLAGS_1.*PIE'"
		check "$n: full RELRO (GNU_RELRO and BIND_NOW)" \
		    sh -c "readelf -lW '$b' | grep -q GNU_RELRO &&
		    readelf -d '$b' | grep -Eq 'BIND_NOW|FLAGS.*NOW'"
		check "$n: stack protector (__stack_chk_fail)" \
		    sh -c "readelf --dyn-syms -W '$b' | grep -q __stack_chk_fail"
		check "$n: no executable stack" \
		    sh -c "readelf -lW '$b' | grep GNU_STACK | grep -qv RWE"
	done
	check "coefd: _FORTIFY_SOURCE checked calls (__*_chk)" \
	    sh -c "readelf --dyn-syms -W '$COEFD' | grep -Eq '__[a-z]+_chk'"
else
	skip "readelf not installed (Debian package binutils)"
fi

echo "t_service: make install / uninstall"
D=$TMP/dest
mk() {
	make -s --no-print-directory BUILD="$BUILD" "$@"
}
mk install DESTDIR="$D" >"$TMP/install.log" 2>&1
check "make install DESTDIR succeeds" [ $? -eq 0 ]
{
	echo etc/coefd/coefd.conf
	echo usr/local/bin/coefctl
	echo usr/local/lib/systemd/system/coefd.service
	echo usr/local/lib/systemd/system/coefd.socket
	echo usr/local/lib/sysusers.d/coefd.conf
	echo usr/local/sbin/coefd
	echo usr/local/share/bash-completion/completions/coefd
	[ -e client/coefctl.bash ] &&
	    echo usr/local/share/bash-completion/completions/coefctl
	[ -e client/coefctl.1 ] && echo usr/local/share/man/man1/coefctl.1
	echo usr/local/share/man/man5/coefd.conf.5
	echo usr/local/share/man/man8/coefd.8
} | sort >"$TMP/expected"
(cd "$D" && find . \( -type f -o -type l \) | sed 's|^\./||' | sort) >"$TMP/got"
check "installed files are the expected list ($(wc -l <"$TMP/got") files)" \
    cmp -s "$TMP/expected" "$TMP/got"
cmp -s "$TMP/expected" "$TMP/got" || diff "$TMP/expected" "$TMP/got"
check "no installed file contains DESTDIR" sh -c "! grep -rqF '$D' '$D'"
check "the unit runs the installed paths" \
    grep -q '^ExecStart=/usr/local/sbin/coefd -c ${CONFIGURATION_DIRECTORY}/coefd.conf$' \
    "$D/usr/local/lib/systemd/system/coefd.service"
check "ExecReload runs the synchronous client reload" \
    grep -q '^ExecReload=/usr/local/bin/coefctl -s %t/coefd/coefd.sock reload$' \
    "$D/usr/local/lib/systemd/system/coefd.service"
check "the installed coefd was built for /etc/coefd/coefd.conf" \
    sh -c "'$D/usr/local/sbin/coefd' -h | grep -qF /etc/coefd/coefd.conf"
check "the installed example configuration is valid" \
    sh -c "'$D/usr/local/sbin/coefd' -n -c '$D/etc/coefd/coefd.conf' >/dev/null"
echo "# local change" >>"$D/etc/coefd/coefd.conf"
mk install DESTDIR="$D" >"$TMP/install2.log" 2>&1
check "a second install keeps an existing configuration" \
    grep -q '^# local change$' "$D/etc/coefd/coefd.conf"
mk uninstall DESTDIR="$D" >"$TMP/uninstall.log" 2>&1
check "uninstall keeps a modified configuration" \
    [ "$( (cd "$D" && find . -type f) )" = "./etc/coefd/coefd.conf" ]
rm "$D/etc/coefd/coefd.conf"
mk install DESTDIR="$D" >/dev/null 2>&1
mk uninstall DESTDIR="$D" >/dev/null 2>&1
check "make uninstall removes every installed file" \
    [ -z "$( (cd "$D" && find . \( -type f -o -type l \)) )" ]
# Other directories: only the generated unit is built (sed, no compiling).
make -s --no-print-directory BUILD="$TMP/b" sysconfdir=/opt/etc \
    localstatedir=/srv "$TMP/b/dist/coefd.service" >/dev/null 2>&1
check "sysconfdir=/opt/etc: the unit passes -c /opt/etc/coefd/coefd.conf" \
    grep -q '^ExecStart=/usr/local/sbin/coefd -c /opt/etc/coefd/coefd.conf$' \
    "$TMP/b/dist/coefd.service"
check "and drops ConfigurationDirectory=; localstatedir=/srv: ReadWritePaths=" \
    sh -c "! grep -q '^ConfigurationDirectory=' '$TMP/b/dist/coefd.service' &&
    grep -q '^ReadWritePaths=/srv/lib/coefd$' '$TMP/b/dist/coefd.service'"

echo "t_service: manual pages"
if command -v mandoc >/dev/null 2>&1; then
	for m in daemon/coefd.8 daemon/coefd.conf.5 client/coefctl.1; do
		[ -e "$m" ] || continue
		check "mandoc -Tlint -Wwarning $m: clean" \
		    sh -c "mandoc -Tlint -Wwarning '$m' >'$TMP/lint' 2>&1 ||
		    { cat '$TMP/lint'; false; }"
	done
else
	skip "mandoc not installed (Debian package mandoc)"
fi

echo "t_service: systemd-analyze verify and security"
if ! command -v systemd-analyze >/dev/null 2>&1; then
	skip "systemd-analyze not installed (Debian package systemd)"
elif [ ! -e /lib/systemd/system/sysinit.target ]; then
	skip "systemd-analyze: no /lib/systemd/system to verify against"
else
	# An image of the installed tree: the units, the binaries they name
	# (verify checks they are executable) and the system's own units
	# they depend on. systemd as PID 1 is not needed.
	R=$TMP/root
	mk install DESTDIR="$R" >/dev/null 2>&1
	mkdir -p "$R/usr/lib/systemd"
	cp -R /lib/systemd/system "$R/usr/lib/systemd/"
	U=$R/usr/local/lib/systemd/system
	# verify runs man(1) for each Documentation= page: found through
	# MANPATH in the image; without man(1) that one check is left out.
	manopt=
	if ! command -v man >/dev/null 2>&1; then
		skip "verify of Documentation= pages: man not installed (Debian package man-db)"
		manopt=--man=no
	fi
	MANPATH=$R/usr/local/share/man systemd-analyze verify $manopt \
	    --root="$R" "$U/coefd.service" "$U/coefd.socket" >"$TMP/verify" 2>&1
	rc=$?
	check "systemd-analyze verify: exit 0, no warnings" \
	    [ $rc -eq 0 -a ! -s "$TMP/verify" ]
	cat "$TMP/verify"
	# --threshold is in tenths in systemd 252: 20 is an exposure of 2.0.
	systemd-analyze security --offline=true --threshold=20 --root="$R" \
	    "$U/coefd.service" >"$TMP/security" 2>&1
	rc=$?
	score=$(sed -n 's/.*Overall exposure level for coefd.service: \([0-9.]*\).*/\1/p' "$TMP/security")
	check "systemd-analyze security: exposure $score <= 2.0" [ $rc -eq 0 ]
	[ $rc -eq 0 ] || grep -E '✗|Overall' "$TMP/security"
fi

finish
