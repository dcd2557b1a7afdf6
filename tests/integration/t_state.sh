#!/bin/sh
# SPDX-License-Identifier: ISC
# State directory end to end (issue 4): models in many states (fitted,
# alarms on, frozen, pinned, configured reference, prev() terms primed,
# time-constant memory, history) survive a clean restart and a SIGKILL
# (journal replay, admin commands and a reload included) with every
# served value equal: .list, .get and .history of every model are
# compared as text (JSON numbers are shortest round-trip text, so equal
# text is equal bits). Also: .save with the journal off, a term list
# changed while the daemon was down (the model comes back stale, not
# reset), .stats "state", and --verify-state on a clean directory.
. tests/integration/lib.sh

cat >"$TMP/s.conf" <<'EOF'
[daemon]
log_level = info
journal = every-record
history = 8
history_every = 2
[template flow_*]
fields = raw temp
target = ref
memory = 0.99
gate = 4
gate_run = 3
warmup = 10
[template lag_*]
fields = raw
target = ref
terms = raw, prev(raw), prev(ref)
[model timed]
fields = raw
target = ref
memory = 1h
[model calib]
fields = clamp temp
target = master
terms = clamp, temp, clamp*temp
scale = none
reference = 0.02 1.003 -0.0004 0.00002
tolerance = - 1% 0.002 -
EOF

# Records with explicit times: gen.py PART SEED writes lines to stdout.
cat >"$TMP/gen.py" <<'EOF'
import random, sys
part, seed = sys.argv[1], int(sys.argv[2])
rnd = random.Random(seed)
t = 1764633600 + 10000 * seed
def flow(name, n, shift=0.0):
    global t
    for i in range(n):
        raw = rnd.uniform(5, 50); temp = rnd.uniform(10, 30)
        ref = 0.4 + 1.02 * raw - 0.003 * temp + rnd.gauss(0, 0.05) + shift
        print("%s @%d %r %r %r" % (name, t, ref, raw, temp)); t += 1
def lag(name, n):
    global t
    for i in range(n):
        raw = rnd.uniform(10, 30)
        print("%s @%d %r %r" % (name, t, 0.5 + 0.9 * raw + rnd.gauss(0, 0.05), raw)); t += 1
def timed(n):
    global t
    for i in range(n):
        raw = rnd.uniform(0, 10)
        print("timed @%d %r %r" % (t, 2 + 0.5 * raw + rnd.gauss(0, 0.1), raw)); t += rnd.randint(5, 600)
def calib(n):
    global t
    for i in range(n):
        c = rnd.uniform(8, 16); tp = rnd.uniform(40, 80)
        m = 0.02 + 1.003 * c - 0.0004 * tp + 0.00002 * c * tp + rnd.gauss(0, 0.01)
        print("calib @%d %r %r %r" % (t, m, c, tp)); t += 1
if part == "a":
    flow("flow_1", 300); flow("flow_2", 80); flow("flow_2", 12, 3.0)
    flow("flow_3", 50); flow("flow_4", 80); lag("lag_1", 60); lag("lag_2", 1)
    timed(50); calib(40)
elif part == "b":
    flow("flow_1", 50); flow("flow_3", 20); flow("flow_4", 40, 0.2)
    lag("lag_1", 20); lag("lag_2", 5); timed(10); flow("flow_6", 30)
else:
    flow("flow_1", 40); flow("flow_4", 10); lag("lag_1", 10); calib(5)
print(".sync")
EOF

# Everything served about every model, one line each.
cat >"$TMP/dump.py" <<'EOF'
import json, socket, sys
def ask(line):
    s = socket.socket(socket.AF_UNIX)
    s.connect(sys.argv[1])
    s.sendall(line.encode())
    s.shutdown(socket.SHUT_WR)
    out = b""
    while True:
        d = s.recv(1 << 16)
        if not d:
            break
        out += d
    return out.decode()
lst = ask(".list\n")
print(lst.strip())
for m in json.loads(lst)["models"]:
    print(ask(".get %s\n.history %s\n" % (m["model"], m["model"])).strip())
EOF
dump() { "$PY" "$TMP/dump.py" "$SOCK"; }
feed() {
	r=$("$PY" "$TMP/gen.py" "$1" "$2" | send | tail -n 1)
	[ "$(jget "$r" '"sync" in d')" = True ] || echo "feed $1: $r"
}

echo "t_state: restart and crash keep every model bit for bit"
start_daemon "$TMP/s.conf"
feed a 1
printf '.freeze flow_3\n.pin flow_4\n' | send >/dev/null
feed b 2
dump >"$TMP/d1"
check "the models are in the states the test wants" "$PY" -c '
import json, sys
ls = {m["model"]: m for m in json.loads(open(sys.argv[1]).readline())["models"]}
assert ls["flow_3"]["frozen"], "frozen"
assert ls["flow_2"]["alarms"], "alarms"
assert len(ls) == 9, len(ls)
' "$TMP/d1"
st=$(printf '.stats\n' | send)
check ".stats: state ok, journal every-record, a checkpoint written" \
    [ "$(jget "$st" 'd["state"]["ok"], d["state"]["journal"], d["state"]["checkpoints"] >= 1')" = "(True, 'every-record', True)" ]

stop_daemon
check "SIGTERM: clean exit" [ $? -eq 0 ]
check "after a clean stop only the checkpoint is left" \
    [ "$(ls "$STATE")" = "models.ckpt" ]
"$COEFD" --verify-state "$STATE" >"$TMP/v1"
check "--verify-state: clean directory exits 0" [ $? -eq 0 ]
check "--verify-state: summary names 9 models" grep -q "ok: 9 models restored" "$TMP/v1"
start_daemon "$TMP/s.conf"
dump >"$TMP/d2"
check "clean restart: .list/.get/.history equal" cmp -s "$TMP/d1" "$TMP/d2"

# Journal replay: records and admin commands since the checkpoint.
feed c 3
printf '.thaw flow_3\n.pin flow_1\n.reset lag_2\n.freeze calib\n' | send >/dev/null
feed b 4
dump >"$TMP/d3"
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
check "after SIGKILL the journal holds entries" \
    sh -c "ls '$STATE' | grep -q journal"
start_daemon "$TMP/s.conf"
dump >"$TMP/d4"
check "SIGKILL + replay (records, thaw, pin, reset, freeze): equal" \
    cmp -s "$TMP/d3" "$TMP/d4"
st=$(printf '.stats\n' | send)
check ".stats: restore replayed journal entries, no damage" \
    [ "$(jget "$st" 'd["state"]["restore"]["journal_entries"] > 0, d["state"]["restore"]["damage"]')" = "(True, False)" ]

# A reload between records: replay applies it at the same point.
sed 's/^memory = 0.99$/memory = 0.95/' "$TMP/s.conf" >"$TMP/s2.conf"
cp "$TMP/s2.conf" "$TMP/s.conf"
kill -HUP "$DPID"
sleep 0.3
feed c 5
dump >"$TMP/d5"
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
start_daemon "$TMP/s.conf"
dump >"$TMP/d6"
check "SIGHUP (memory 0.99 -> 0.95) then records then SIGKILL: equal" \
    cmp -s "$TMP/d5" "$TMP/d6"
stop_daemon

# journal = off: .save is the only thing that survives a SIGKILL.
sed 's/^journal = every-record$/journal = off/' "$TMP/s.conf" >"$TMP/s3.conf"
start_daemon "$TMP/s3.conf"
feed c 6
r=$(printf '.save\n' | send)
check ".save replies once written" [ "$(jget "$r" 'd["ok"]')" = save ]
dump >"$TMP/d7"
feed b 7
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
start_daemon "$TMP/s3.conf"
dump >"$TMP/d8"
check "journal off: SIGKILL restores the .save state exactly" \
    cmp -s "$TMP/d7" "$TMP/d8"
stop_daemon

# The term list changed while the daemon was down: the model comes back
# as it was, marked stale; .reset then applies the new terms.
sed 's/^terms = raw, prev(raw), prev(ref)$/terms = raw/' "$TMP/s.conf" >"$TMP/s4.conf"
start_daemon "$TMP/s4.conf"
dump >"$TMP/d9"
check "shape changed while down: coefficients kept" "$PY" -c '
import sys
a = [l for l in open(sys.argv[1]) if l.startswith("{\"model\":\"lag_1\"")]
b = [l for l in open(sys.argv[2]) if l.startswith("{\"model\":\"lag_1\"")]
assert a and a == b
' "$TMP/d8" "$TMP/d9"
check "shape changed while down: marked stale" "$PY" -c '
import json, sys
ls = {m["model"]: m for m in json.loads(open(sys.argv[1]).readline())["models"]}
assert ls["lag_1"]["stale"] and not ls["flow_1"]["stale"]
' "$TMP/d9"
check "log names the stale models" grep -q "1 stale\|2 stale" "$TMP/coefd.log"
r=$(printf '.reset lag_1\n.get lag_1\n' | send | tail -n 1)
check ".reset applies the new term list" \
    [ "$(jget "$r" 'd["features"]')" = "['intercept', 'raw']" ]
stop_daemon

# SIGTERM while a checkpoint is being written (issue #8, 2026-12-02: the
# checkpoint writer is a thread of its own, joined at shutdown). 20,000
# models of 7 fields make a checkpoint of about 38 MB; a client asks for
# .save and, 20 ms later, sends the daemon SIGTERM. Whether or not the
# write was still running then, the daemon must exit 0 with only
# models.ckpt in the directory, --verify-state must find it intact, and a
# restart must serve every model as it was.
STATE=$TMP/state_big
cat >"$TMP/big.conf" <<'EOF'
[daemon]
log_level = info
journal = 200ms
checkpoint_every = 1d
max_models = 30000
[template big_*]
fields = f1 f2 f3 f4 f5 f6 f7
target = y
EOF
start_daemon "$TMP/big.conf"
r=$(awk 'BEGIN { for (i = 0; i < 20000; i++) for (k = 0; k < 2; k++)
	printf "big_%d %d %d %d %d %d %d %d %d\n", i, i + k, k, i % 7, i % 11,
	    i % 13, k * i, i % 3, 1 + k; print ".sync" }' | send | tail -n 1)
check "20,000 models fed" [ "$(jget "$r" '"sync" in d')" = True ]
st=$(printf '.stats\n' | send)
check ".stats: where the last checkpoint was written" [ "$(jget "$st" \
    'd["state"]["last_checkpoint"]["writer"] in ("nice 10", "normal")')" = True ]
bigdump() { printf '.get big_0\n.get big_777\n.get big_19999\n' | send; }
bigdump >"$TMP/b1"
"$PY" -c '
import os, signal, socket, sys, time
s = socket.socket(socket.AF_UNIX)
s.connect(sys.argv[1])
s.sendall(b".save\n")
time.sleep(0.02)
os.kill(int(sys.argv[2]), signal.SIGTERM)
s.recv(1 << 16)
' "$SOCK" "$DPID"
wait "$DPID"
rc=$?
DPID=
check "SIGTERM during a checkpoint: clean exit" [ $rc -eq 0 ]
check "SIGTERM during a checkpoint: only models.ckpt is left" \
    [ "$(ls "$STATE")" = "models.ckpt" ]
check "SIGTERM during a checkpoint: --verify-state finds it intact" \
    "$COEFD" --verify-state "$STATE" >/dev/null
n=$(awk '/SIGTERM: shutting down/ { n = 0 }
    /checkpoint [0-9]* written/ { n++ } END { print n }' "$TMP/coefd.log")
echo "  ($n checkpoints written after SIGTERM; 2: the .save one was in flight)"
start_daemon "$TMP/big.conf"
bigdump >"$TMP/b2"
check "SIGTERM during a checkpoint: a restart serves the models as they were" \
    cmp -s "$TMP/b1" "$TMP/b2"
r=$(printf '.stats\n' | send)
check "SIGTERM during a checkpoint: all 20,000 models restored" \
    [ "$(jget "$r" 'd["state"]["restore"]["models"]')" = 20000 ]
stop_daemon
finish
