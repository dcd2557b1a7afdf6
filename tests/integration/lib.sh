# SPDX-License-Identifier: ISC
# Shared helpers for the integration tests: a private temp dir, starting and
# stopping coefd on a socket inside it, a plain-socket client, assertions.
# Sourced by tests/integration/t_*.sh with the build directory as $1.

BUILD=${1:-build}
COEFD=$BUILD/coefd
COEFCTL=$BUILD/coefctl
PY=/usr/bin/python3
[ -x "$PY" ] || PY=python3
TMP=$(mktemp -d "${TMPDIR:-/tmp}/coefd-it.XXXXXX")
SOCK=$TMP/coefd.sock
STATE=$TMP/state
DPID=
FAILS=0
CHECKS=0
export OPENBLAS_NUM_THREADS=1

cleanup() {
	if [ -n "$DPID" ] && kill -0 "$DPID" 2>/dev/null; then
		kill -KILL "$DPID" 2>/dev/null
	fi
	# KEEP_TMP=1 keeps the directory (logs, state) for a post-mortem.
	[ -n "${KEEP_TMP:-}" ] || rm -rf "$TMP"
}
trap cleanup EXIT INT TERM

# start_daemon CONF: start coefd in the background (state in $STATE), wait
# for its socket; the log is appended to $TMP/coefd.log. COEFD_WRAP, if
# set, is a command to run it under (make valgrind).
start_daemon() {
	# A daemon killed with SIGKILL leaves its socket file behind: without
	# this the wait below could see it before the new daemon binds.
	rm -f "$SOCK"
	${COEFD_WRAP:-} "$COEFD" -c "$1" -s "$SOCK" --state-dir "$STATE" \
	    >>"$TMP/coefd.log" 2>&1 &
	DPID=$!
	i=0
	while [ ! -S "$SOCK" ] && [ $i -lt 400 ]; do
		sleep 0.05
		i=$((i + 1))
	done
	[ -S "$SOCK" ] || { echo "coefd did not start:"; cat "$TMP/coefd.log"; exit 1; }
}

# stop_daemon: SIGTERM and wait; returns coefd's exit status.
stop_daemon() {
	kill -TERM "$DPID"
	wait "$DPID"
	rc=$?
	DPID=
	return $rc
}

# The one plain-socket client of the tests (inline, so it also runs as
# another user who cannot read this tree): argv unix PATH or tcp PORT;
# stdin is sent, the sending side closed, every reply printed. A refused
# connection prints "connect: REASON" and exits 0.
SEND_PY='
import socket, sys
try:
    if sys.argv[1] == "unix":
        s = socket.socket(socket.AF_UNIX)
        s.connect(sys.argv[2])
    else:
        s = socket.create_connection(("127.0.0.1", int(sys.argv[2])))
except OSError as e:
    print("connect: %s" % e.strerror)
    sys.exit(0)
s.sendall(sys.stdin.buffer.read())
s.shutdown(socket.SHUT_WR)
out = b""
while True:
    d = s.recv(1 << 16)
    if not d:
        break
    out += d
sys.stdout.buffer.write(out)
'

# send: stdin lines to the socket, replies to stdout (half-close at EOF).
send() {
	"$PY" -c "$SEND_PY" unix "$SOCK"
}

# jget JSON-LINE EXPR: evaluate a Python expression on the parsed line (d).
jget() {
	"$PY" -c 'import json, sys; d = json.loads(sys.argv[1]); print(eval(sys.argv[2]))' "$1" "$2"
}

ok() {
	CHECKS=$((CHECKS + 1))
	echo "  ok   $1"
}

fail() {
	CHECKS=$((CHECKS + 1))
	FAILS=$((FAILS + 1))
	echo "  FAIL $1"
}

# check DESCRIPTION COMMAND...: run the command, ok if it succeeds.
check() {
	d=$1
	shift
	if "$@"; then ok "$d"; else fail "$d"; fi
}

finish() {
	echo "  $((CHECKS - FAILS)) passed, $FAILS failed"
	[ "$FAILS" -eq 0 ]
}
