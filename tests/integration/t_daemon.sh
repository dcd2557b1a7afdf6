#!/bin/sh
# SPDX-License-Identifier: ISC
# coefd end to end: records over the Unix socket (positional and named),
# errors by reason with nothing lost, predictions, queries, SIGHUP with a
# changed and with a broken config, SIGTERM. The daemon's coefficients must
# equal `coefctl fit` over the same records bit for bit (same engine, same
# order; JSON numbers are shortest round-trip text, so equal text is equal
# bits).
. tests/integration/lib.sh

cat >"$TMP/a.conf" <<'EOF'
[daemon]
log_level = info
[template flow_*]
fields = raw temp
target = ref
memory = 1
[model cell_a]
fields = raw
target = ref
terms = raw, raw^2
memory = 0.99
EOF

# Seeded invented data: a flow meter's raw reading and water temperature
# against a master meter (ref = 0.4 + 1.02 raw - 0.003 temp + noise).
"$PY" - "$TMP" <<'EOF'
import random, sys
random.seed(7)
d = sys.argv[1]
with open(d + "/flow.csv", "w") as f, open(d + "/flow.txt", "w") as g:
    f.write("ref,raw,temp\n")
    for i in range(500):
        raw = random.uniform(5, 50); temp = random.uniform(10, 30)
        ref = 0.4 + 1.02 * raw - 0.003 * temp + random.gauss(0, 0.05)
        f.write("%r,%r,%r\n" % (ref, raw, temp))
        if i % 2:
            g.write("flow_1 %r %r %r\n" % (ref, raw, temp))
        else:
            g.write("flow_1 temp=%r ref=%r raw=%r\n" % (temp, ref, raw))
EOF

start_daemon "$TMP/a.conf"
echo "t_daemon: feed, query, compare with coefctl fit"
{ cat "$TMP/flow.txt"; printf '.sync\n'; } | send >"$TMP/r1"
sync_line=$(tail -n 1 "$TMP/r1")
check "sync counts 500 accepted, 0 rejected" \
    [ "$(jget "$sync_line" 'd["sync"]["accepted"], d["sync"]["rejected"]')" = "(500, 0)" ]
check "no other reply to pipelined records" [ "$(wc -l <"$TMP/r1")" -eq 1 ]

printf '.get flow_1\n' | send >"$TMP/get"
"$COEFCTL" fit --terms "raw, temp" --gate 5 --json "$TMP/flow.csv" >"$TMP/fit"
dc=$(jget "$(cat "$TMP/get")" 'json.dumps(d["coef"])')
fc=$(jget "$(cat "$TMP/fit")" 'json.dumps(d["coef"])')
check "daemon coefficients equal coefctl fit bit for bit ($dc)" [ "$dc" = "$fc" ]
ds=$(jget "$(cat "$TMP/get")" 'json.dumps([d["stderr"], d["rss"], d["r2"], d["n"]])')
fs=$(jget "$(cat "$TMP/fit")" 'json.dumps([d["stderr"], d["rss"], d["r2"], d["n"]])')
check "standard errors, rss, r2, n equal too" [ "$ds" = "$fs" ]
check "features named in coefficient order" \
    [ "$(jget "$(cat "$TMP/get")" 'd["features"]')" = "['intercept', 'raw', 'temp']" ]

# Errors: every bad line is answered with its line number and reason, and
# changes nothing.
cat >"$TMP/bad" <<'EOF'
flow_1 1 2
flow_1 1 2 nan
flow_1 1 2 0x10
nosuch 1 2 3
flow_1 ref=1 raw=2
flow_1 ref=1 raw=2 temp=3 extra=4
flow_1 1e400 2 3
.frobnicate
.sync
EOF
send <"$TMP/bad" >"$TMP/r2"
check "eight error replies plus sync" [ "$(wc -l <"$TMP/r2")" -eq 9 ]
reasons=$("$PY" -c '
import json, sys
for l in open(sys.argv[1]):
    d = json.loads(l)
    print(d.get("error", "sync"), d.get("line", ""))
' "$TMP/r2" | tr '\n' ' ')
check "reasons and line numbers: $reasons" [ "$reasons" = \
"wrong_count 1 non_finite 2 not_a_number 3 unknown_model 4 missing_field 5 unknown_field 6 non_finite 7 unknown_command 8 sync 9 " ]
printf '.get flow_1\n' | send >"$TMP/get2"
check "rejected lines changed nothing" cmp -s "$TMP/get" "$TMP/get2"

# Predictions: a record with `?` and .predict agree; interval contains yhat.
printf 'flow_1 ? 20 15\n.predict flow_1 raw=20 temp=15\n' | send >"$TMP/pred"
p1=$(head -n 1 "$TMP/pred"); p2=$(tail -n 1 "$TMP/pred")
check "prediction forms agree" [ "$(jget "$p1" 'd["yhat"]')" = "$(jget "$p2" 'd["yhat"]')" ]
check "prediction near the true value 20.755" \
    [ "$(jget "$p1" 'abs(d["yhat"] - 20.755) < 0.05 and d["lo"] < d["yhat"] < d["hi"]')" = True ]

# Statistics count the rejections by reason.
st=$(printf '.stats\n' | send)
check "stats: 500 used, 8 rejected" \
    [ "$(jget "$st" 'd["records"]["used"], d["rejected_total"]')" = "(500, 8)" ]

# .open: a configured model that has no record yet is created and shown
# (its fields, no data); an existing one is shown as .get shows it; a name
# no section makes is unknown_model, and nothing is created.
r=$(printf '.open flow_9\n' | send)
check ".open creates a template's model: fields and n = 0" \
    [ "$(jget "$r" 'd["model"], d["fields"], d["target"], d["n"]')" = "('flow_9', ['raw', 'temp'], 'ref', 0)" ]
r=$(printf '.open flow_1\n.get flow_1\n' | send)
check ".open of an existing model equals .get" \
    [ "$(printf '%s\n' "$r" | sed -n 1p)" = "$(printf '%s\n' "$r" | sed -n 2p | sed 's/"line":2/"line":1/')" ]
r=$(printf '.open nosuch\n.list\n' | send)
check ".open of a name no section makes: unknown_model" \
    [ "$(jget "$(printf '%s\n' "$r" | sed -n 1p)" 'd["error"]')" = unknown_model ]
check "  and nothing is created" \
    [ "$(jget "$(printf '%s\n' "$r" | sed -n 2p)" '"nosuch" in [m["model"] for m in d["models"]]')" = False ]

# .watch NAME every=N: update events for that model only, at multiples of
# N used records; the same connection re-watching "*" every=3 gets both
# models at multiples of 3 (the watch list is per session, replaced).
# Two fresh models of the template, records on the true line.
r=$("$PY" - "$SOCK" <<'PYEOF'
import json, socket, sys, time
def conn():
    s = socket.socket(socket.AF_UNIX); s.connect(sys.argv[1]); return s
def lines(s, t):
    s.settimeout(0.2); buf = b""; end = time.time() + t
    while time.time() < end:
        try:
            d = s.recv(65536)
        except socket.timeout:
            continue
        if not d:
            break
        buf += d
    return [json.loads(l) for l in buf.decode().splitlines() if l]
w, f = conn(), conn()
w.sendall(b".watch flow_7 every=2\n")
lines(w, 0.3)
recs = "".join("flow_%d %r %r %r\n" % (m, 0.4 + 1.02 * (9.0 + i) - 0.06
               + 0.01 * (i % 3), 9.0 + i, 20.0 + i % 5)
               for i in range(20) for m in (7, 8))
f.sendall(recs.encode() + b".sync\n")
lines(f, 0.5)
ev = [e for e in lines(w, 0.5) if e.get("event") == "update"]
a = len(ev) == 10 and all(e["model"] == "flow_7" and e["n"] % 2 == 0
                          for e in ev)
w.sendall(b".watch * every=3\n")
lines(w, 0.3)
f.sendall(recs.encode() + b".sync\n")
lines(f, 0.5)
ev = [e for e in lines(w, 0.5) if e.get("event") == "update"]
b = {e["model"] for e in ev} == {"flow_7", "flow_8"} and \
    all(e["n"] % 3 == 0 for e in ev) and len(ev) > 0
print(a, b)
PYEOF
)
check ".watch flow_7 every=2: only flow_7, at even record counts" [ "${r% *}" = True ]
check "  re-watch * every=3 on the same connection: both models, multiples of 3" [ "${r#* }" = True ]

# SIGHUP with a changed config: the model keeps its state, new settings
# apply; a broken config is logged and the old one kept.
sed 's/^memory = 1$/memory = 0.999/' "$TMP/a.conf" >"$TMP/b.conf"
cp "$TMP/b.conf" "$TMP/a.conf"
kill -HUP "$DPID"
sleep 0.3
g3=$(printf '.get flow_1\n' | send)
check "reload keeps the model's state" [ "$(jget "$g3" 'd["n"], d["lambda"]')" = "(500, 0.999)" ]
printf '[model broken\n' >>"$TMP/a.conf"
kill -HUP "$DPID"
sleep 0.3
check "broken config logged with file:line" grep -q "a.conf:[0-9]*:" "$TMP/coefd.log"
g4=$(printf '.get flow_1\n' | send)
check "daemon still serving after a broken reload" [ "$(jget "$g4" 'd["n"]')" = 500 ]

# coefd -n: exit 0 for a good file, 78 with file:line for a bad one.
"$COEFD" -n -c "$TMP/b.conf" >/dev/null 2>&1
check "coefd -n accepts a good config" [ $? -eq 0 ]
"$COEFD" -n -c "$TMP/a.conf" >"$TMP/n.out" 2>&1
rc=$?
check "coefd -n exits 78 on a bad config" [ $rc -eq 78 ]
check "and names file:line" grep -q "a.conf:[0-9]*: " "$TMP/n.out"

stop_daemon
check "SIGTERM: clean exit 0" [ $? -eq 0 ]
check "socket removed at shutdown" [ ! -e "$SOCK" ]
finish
