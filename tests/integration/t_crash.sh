#!/bin/sh
# SPDX-License-Identifier: ISC
# Crash test (issue 4): journal = every-record, two clients feeding two
# models in batches, each batch followed by .sync; the daemon is killed
# with SIGKILL at a random moment (a third client keeps asking for
# checkpoints with .save, so kills also land inside checkpoint writes),
# the state directory is checked offline, the daemon restarted on it.
# After each restart, for each model:
#   - nothing acknowledged is lost: restored >= records acknowledged;
#   - nothing unacknowledged is half-applied: the restored model equals,
#     bit for bit, `coefctl fit` over exactly the first `restored` records
#     of everything sent (a record journaled and on disk whose .sync reply
#     was not sent before the kill may be in: a prefix, never a part);
#   - coefd --verify-state finds no damage after the kill.
# The state carries over from trial to trial, so each restore also starts
# from a restored state. Trials are reported one per line.
. tests/integration/lib.sh

TRIALS=${COEFD_CRASH_TRIALS:-20}
cat >"$TMP/c.conf" <<'EOF'
[daemon]
log_level = notice
journal = every-record
checkpoint_every = 1s
history = 16
history_every = 5
[template m_*]
fields = raw temp
target = ref
memory = 0.995
EOF

# The feeder: batches of 1..40 records of one model, then .sync and wait
# for its reply; every record is written to the CSV before it is sent, the
# acknowledged count after each reply. Ends when the daemon dies.
cat >"$TMP/feed.py" <<'EOF'
import json, random, socket, sys
sock, model, seed, csvf, ackf = sys.argv[1:6]
rnd = random.Random(int(seed))
s = socket.socket(socket.AF_UNIX)
s.connect(sock)
csv = open(csvf, "w")
acked = 0
buf = b""
try:
    while True:
        n = rnd.randint(1, 40)
        lines = []
        for i in range(n):
            raw = rnd.uniform(5, 50)
            temp = rnd.uniform(10, 30)
            ref = 0.4 + 1.02 * raw - 0.003 * temp + rnd.gauss(0, 0.05)
            csv.write("%r,%r,%r\n" % (ref, raw, temp))
            lines.append("%s %r %r %r\n" % (model, ref, raw, temp))
        csv.flush()
        s.sendall(("".join(lines) + ".sync\n").encode())
        while b"\n" not in buf:
            d = s.recv(65536)
            if not d:
                raise EOFError
            buf += d
        line, buf = buf.split(b"\n", 1)
        r = json.loads(line)
        if "sync" not in r or r["sync"]["accepted"] != n:
            print("unexpected reply: %r" % r, file=sys.stderr)
            sys.exit(3)
        acked += n
        with open(ackf, "w") as f:
            f.write("%d\n" % acked)
except (EOFError, ConnectionResetError, BrokenPipeError):
    pass
EOF

# A third client asks for checkpoints back to back (.save waits for each),
# so kills also land in the middle of checkpoint writes and rotations.
cat >"$TMP/save.py" <<'EOF'
import socket, sys
s = socket.socket(socket.AF_UNIX)
s.connect(sys.argv[1])
n = 0
try:
    while True:
        s.sendall(b".save\n")
        buf = b""
        while b"\n" not in buf:
            d = s.recv(4096)
            if not d:
                raise EOFError
            buf += d
        if b'"ok":"save"' not in buf:
            print("save failed: %r" % buf, file=sys.stderr)
            sys.exit(3)
        n += 1
except (EOFError, ConnectionResetError, BrokenPipeError):
    pass
open(sys.argv[2], "w").write("%d\n" % n)
EOF

# The check after a restart: per model, restored count within
# [acked, sent], and the model equal to the offline fit over the records
# it holds. Appends this trial's applied records to applied_<model>.csv.
cat >"$TMP/check.py" <<'EOF'
import json, socket, subprocess, sys
tmp, sock, coefctl, trial, ms = sys.argv[1:6]
def ask(line):
    s = socket.socket(socket.AF_UNIX)
    s.connect(sock)
    s.sendall(line.encode())
    s.shutdown(socket.SHUT_WR)
    out = b""
    while True:
        d = s.recv(1 << 16)
        if not d:
            break
        out += d
    return json.loads(out)
report = ["trial %2s kill after %4s ms:" % (trial, ms)]
ok = True
for m in ("m_a", "m_b"):
    st = json.load(open("%s/base_%s.json" % (tmp, m)))
    sent = open("%s/sent_%s.csv" % (tmp, m)).read().splitlines()
    try:
        acked = int(open("%s/ack_%s" % (tmp, m)).read())
    except (OSError, ValueError):
        acked = 0
    g = ask(".get %s\n" % m)
    if "error" in g:
        seen = 0
    else:
        seen = g["n_seen"]
    k = seen - st["seen"]
    applied = "%s/applied_%s.csv" % (tmp, m)
    with open(applied, "a") as f:
        for row in sent[:max(k, 0)]:
            f.write(row + "\n")
    good = acked <= k <= len(sent)
    if seen > 0:
        fit = json.loads(subprocess.run([coefctl, "fit", "--terms",
            "raw, temp", "--gate", "5", "--lambda", "0.995", "--json",
            applied], capture_output=True, check=True).stdout)
        for key in ("coef", "n", "n_seen", "rss", "stderr"):
            if json.dumps(g[key]) != json.dumps(fit[key]):
                print("%s: %s differs: daemon %s fit %s" % (m, key,
                    json.dumps(g[key]), json.dumps(fit[key])))
                good = False
    ok = ok and good
    json.dump({"seen": seen}, open("%s/base_%s.json" % (tmp, m), "w"))
    report.append("%s acked %5d restored %5d sent %5d%s" % (m, acked, k,
        len(sent), "" if good else " FAIL"))
print("  " + "  ".join(report))
sys.exit(0 if ok else 1)
EOF

for m in m_a m_b; do
	printf 'ref,raw,temp\n' >"$TMP/applied_$m.csv"
	echo '{"seen": 0}' >"$TMP/base_$m.json"
done
echo "t_crash: $TRIALS trials of SIGKILL under sustained ingest (journal every-record)"
t=1
saves=0
fails_before=$FAILS
while [ $t -le "$TRIALS" ]; do
	start_daemon "$TMP/c.conf"
	rm -f "$TMP/ack_m_a" "$TMP/ack_m_b"
	"$PY" "$TMP/feed.py" "$SOCK" m_a $((t * 2)) "$TMP/sent_m_a.csv" \
	    "$TMP/ack_m_a" 2>>"$TMP/feed.err" &
	f1=$!
	"$PY" "$TMP/feed.py" "$SOCK" m_b $((t * 2 + 1)) "$TMP/sent_m_b.csv" \
	    "$TMP/ack_m_b" 2>>"$TMP/feed.err" &
	f2=$!
	"$PY" "$TMP/save.py" "$SOCK" "$TMP/saves" 2>>"$TMP/feed.err" &
	f3=$!
	ms=$("$PY" -c "import random; random.seed($t); print(random.randint(150, 900))")
	sleep "$(echo "$ms" | awk '{ printf "%.3f", $1 / 1000 }')"
	kill -KILL "$DPID"
	wait "$DPID" 2>/dev/null
	DPID=
	wait "$f1" "$f2" "$f3"
	saves=$((saves + $(cat "$TMP/saves" 2>/dev/null || echo 0)))
	"$COEFD" --verify-state "$STATE" >"$TMP/verify.out" 2>&1
	vrc=$?
	[ $vrc -eq 0 ] || { cat "$TMP/verify.out"; fail "trial $t: verify-state after the kill"; }
	start_daemon "$TMP/c.conf"
	if "$PY" "$TMP/check.py" "$TMP" "$SOCK" "$COEFCTL" "$t" "$ms"; then
		CHECKS=$((CHECKS + 1))
	else
		fail "trial $t: restored state"
	fi
	stop_daemon || fail "trial $t: clean stop"
	t=$((t + 1))
done
[ -s "$TMP/feed.err" ] && { cat "$TMP/feed.err"; fail "feeders reported errors"; }
check "all $TRIALS trials: nothing acknowledged lost, nothing half-applied" \
    [ "$FAILS" -eq "$fails_before" ]
echo "  $saves checkpoints completed by .save during the trials; $(grep -c "torn tail" "$TMP/coefd.log") torn journal tails cut at restarts; $(grep -c "interrupted checkpoint" "$TMP/coefd.log") interrupted checkpoints removed"
finish
