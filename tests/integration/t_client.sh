#!/bin/sh
# SPDX-License-Identifier: ISC
# coefctl against a live coefd: every subcommand, its exit codes, its JSON
# keys (the sets documented in coefctl(1)), table output against golden
# files, the SVG checked with a real XML parser against the data it was
# given, feed's column mapping checked against numpy's least squares, TCP
# with a token, colour only on a terminal, the man page linted by mandoc,
# and the bash completion. Regenerate the golden files with
#   COEFD_GOLDEN_UPDATE=1 sh tests/integration/t_client.sh build
. tests/integration/lib.sh

G=tests/integration/golden
unset COEFD_SOCKET NO_COLOR
LC_ALL=C
export LC_ALL
C="$COEFCTL -s $SOCK"

# run CMD...: stdout to $TMP/out, stderr to $TMP/err, status in $RC.
run() {
	"$@" >"$TMP/out" 2>"$TMP/err"
	RC=$?
}

# rc_is N DESCRIPTION: the last run exited N.
rc_is() {
	if [ "$RC" -eq "$1" ]; then ok "$2 (exit $1)"; else
		fail "$2: exit $RC, wanted $1"; sed 's/^/    /' "$TMP/err" | head -5; fi
}

# golden NAME: $TMP/out equals tests/integration/golden/NAME.
golden() {
	[ -n "${COEFD_GOLDEN_UPDATE:-}" ] && cp "$TMP/out" "$G/$1"
	if cmp -s "$TMP/out" "$G/$1"; then ok "table output matches golden/$1"
	else fail "table output differs from golden/$1"
		diff -u "$G/$1" "$TMP/out" | head -20 | sed 's/^/    /'; fi
}

# keys PYEXPR KEY...: the JSON document in $TMP/out parses (as d) and the
# object PYEXPR has exactly these keys.
keys() {
	e=$1
	shift
	got=$("$PY" -c '
import json, sys
d = json.load(open(sys.argv[1]))
o = eval(sys.argv[2])
want = set(sys.argv[3:])
have = set(o)
if have != want:
    print("missing", sorted(want - have), "extra", sorted(have - want))
' "$TMP/out" "$e" "$@" 2>&1)
	if [ -z "$got" ]; then ok "JSON keys of $e"; else fail "JSON keys of $e: $got"; fi
}

# py DESCRIPTION PYTHON-CODE [ARGS]: ok when the code exits 0.
py() {
	d=$1
	shift
	if "$PY" -c "$@" >"$TMP/py.out" 2>&1; then ok "$d"; else
		fail "$d"; sed 's/^/    /' "$TMP/py.out" | head -8; fi
}

# Terminal checks need a pseudo-terminal; a bare chroot may have no
# devpts mounted. They are then skipped, and say so.
if "$PY" -c 'import os; m, s = os.openpty()' 2>/dev/null; then HAVE_PTY=1; else HAVE_PTY=; fi
tty_py() {
	if [ -n "$HAVE_PTY" ]; then py "$@"; else
		echo "  skip $1 (no pseudo-terminal here: mount devpts on /dev/pts)"; fi
}

PORT=$("$PY" -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
printf 's3cret-token\n' >"$TMP/token"
printf 'wrong\n' >"$TMP/badtoken"
cat >"$TMP/c.conf" <<EOF
[daemon]
history = 64
history_every = 25
tcp = 127.0.0.1:$PORT
token_file = $TMP/token
[model flow]
fields = raw temp
target = ref
memory = 1
[template co2_*]
fields = raw rh
target = ref
EOF

# Seeded invented data: a flow meter's raw reading and water temperature
# against a master meter, ref = 0.4 + 1.02 raw - 0.003 temp + N(0, 0.05^2),
# one record a minute from 2026-01-05T00:00:00Z. The columns are not in
# the model's order and carry an extra one. shift.csv continues with the
# intercept 0.3 higher (a calibration shift for the detectors to find).
"$PY" - "$TMP" <<'EOF'
import datetime, random, sys
random.seed(11)
d = sys.argv[1]
t0 = datetime.datetime(2026, 1, 5, tzinfo=datetime.timezone.utc)
def rows(n, start, off):
    for i in range(n):
        raw = random.uniform(5, 50); temp = random.uniform(10, 30)
        ref = 0.4 + off + 1.02 * raw - 0.003 * temp + random.gauss(0, 0.05)
        t = t0 + datetime.timedelta(seconds=60 * (start + i))
        yield temp, t.strftime('%Y-%m-%dT%H:%M:%SZ'), ref, raw
with open(d + '/flow.csv', 'w') as f:
    f.write('temp,time,ref,raw,note\n')
    for temp, t, ref, raw in rows(400, 0, 0):
        f.write('%r,%s,%r,%r,ok\n' % (temp, t, ref, raw))
with open(d + '/shift.csv', 'w') as f:
    f.write('time,raw,temp,ref\n')
    for temp, t, ref, raw in rows(100, 400, 0.3):
        f.write('%s,%r,%r,%r\n' % (t, raw, temp, ref))
EOF

echo "t_client: usage, help, version"
run "$COEFCTL"
rc_is 2 "no command"
run "$COEFCTL" frobnicate
rc_is 2 "unknown command"
check "  and it says so" grep -q "unknown command 'frobnicate'" "$TMP/err"
run "$COEFCTL" --version
rc_is 0 "--version"
check "  prints the version and protocol" grep -q '^coefctl [0-9.]* (protocol 1)$' "$TMP/out"
run "$COEFCTL" --help
check "--help lists every command" [ "$(grep -cE '^  (list|show|predict|watch|pin|freeze|thaw|reset|history|plot|feed|stats|check|save|reload|fit) ' "$TMP/out")" -eq 16 ]
hfail=
for cmd in list show predict watch pin freeze thaw reset history plot feed stats check save reload fit; do
	"$COEFCTL" "$cmd" --help >"$TMP/out" 2>&1 || hfail="$hfail $cmd"
	grep -q "^usage: coefctl $cmd" "$TMP/out" || hfail="$hfail $cmd"
done
check "every command has --help (exit 0, its usage)${hfail:+: bad:$hfail}" [ -z "$hfail" ]
run $C show
rc_is 2 "show without NAME"
run $C show 'no/such'
rc_is 2 "show with an invalid model name"
run $C history -n 0 flow
rc_is 2 "history -n 0"
run $C list --bogus
rc_is 2 "unknown option"
run $C --timeout x list
rc_is 2 "bad --timeout"

echo "t_client: daemon not running"
run "$COEFCTL" -s "$TMP/none.sock" list
rc_is 3 "unreachable daemon"
check "  the message names the socket tried" grep -q "cannot reach coefd at $TMP/none.sock" "$TMP/err"
check "  and says what to do next" grep -q "is coefd running" "$TMP/err"
check "  nothing on stdout" [ ! -s "$TMP/out" ]
COEFD_SOCKET=$TMP/env.sock run "$COEFCTL" stats
rc_is 3 "unreachable through COEFD_SOCKET"
check "  names the socket from the environment" grep -q "$TMP/env.sock (socket from COEFD_SOCKET)" "$TMP/err"
run "$COEFCTL" -s "$TMP/none.sock" check
rc_is 2 "check with no daemon"
check "  one UNKNOWN line on stdout, nothing on stderr" \
    [ "$(wc -l <"$TMP/out")" -eq 1 -a ! -s "$TMP/err" ]
check "  naming the socket" grep -q "^UNKNOWN: cannot reach coefd at $TMP/none.sock" "$TMP/out"
run "$COEFCTL" -s "127.0.0.1:$PORT" list
rc_is 3 "unreachable TCP address"

start_daemon "$TMP/c.conf"

echo "t_client: feed"
run $C feed --time time flow "$TMP/flow.csv"
rc_is 0 "feed a CSV file with reordered columns"
check "  summary: 400 rows, 400 accepted" grep -q '^flow: 400 rows, 400 accepted, 0 rejected by the daemon, 0 unreadable' "$TMP/out"
check "  note about the ignored column on stderr" grep -q "ignoring column note" "$TMP/err"
check "  no progress bar off a terminal" sh -c "! grep -q 'rows/s\|\[#' '$TMP/err'"
run $C --json show flow
py "the columns landed right: coefficients and standard errors equal numpy lstsq (1e-7 rel)" '
import csv, json, sys
import numpy as np
rows = list(csv.DictReader(open(sys.argv[1])))
X = np.array([[1, float(r["raw"]), float(r["temp"])] for r in rows])
y = np.array([float(r["ref"]) for r in rows])
b, rss, rank, sv = np.linalg.lstsq(X, y, rcond=None)
s2 = rss[0] / (len(y) - 3)
se = np.sqrt(s2 * np.diag(np.linalg.inv(X.T @ X)))
d = json.load(open(sys.argv[2]))
assert d["n"] == 400, d["n"]
assert d["features"] == ["intercept", "raw", "temp"], d["features"]
assert np.allclose(d["coef"], b, rtol=1e-7, atol=0), (d["coef"], b)
assert np.allclose(d["stderr"], se, rtol=1e-6, atol=0), (d["stderr"], se)
assert d["last_t"] == "2026-01-05T06:39:00Z", d["last_t"]
' "$TMP/flow.csv" "$TMP/out"
keys d model features coef stderr ci_low ci_high level n n_seen n_gated \
    n_eff weight lambda tau memory rss mse nrss r2 r2_pred sigma dof rank \
    cond sigma_ref alarms detectors frozen reference last_t fields target
keys 'd["detectors"]' cusum r2 drift shift
keys 'd["detectors"]["cusum"]' on changed value
check "  .get names the raw fields and target" \
    [ "$(jget "$(cat "$TMP/out")" 'd["fields"], d["target"]')" = "(['raw', 'temp'], 'ref')" ]

printf 'ref,raw,temp\n10.6,10,20\nabc,1,2\n1,1e200,3\n10.7,10,\n5,6\n11.6,11,21\n' >"$TMP/bad.csv"
run $C feed flow "$TMP/bad.csv"
rc_is 6 "feed with bad rows"
check "  summary counts them" grep -q '^flow: 6 rows, 2 accepted, 1 rejected by the daemon, 3 unreadable' "$TMP/out"
check "  line 3: not a number" grep -q "bad.csv:3: column 'ref': not a number: 'abc'" "$TMP/err"
check "  line 4: refused by the daemon, with its reason" grep -q 'bad.csv:4: .*(term_non_finite)' "$TMP/err"
check "  line 5: empty cell" grep -q "bad.csv:5: column 'temp': empty" "$TMP/err"
check "  line 6: short row" grep -q 'bad.csv:6: 2 fields, the header has 3' "$TMP/err"
run $C --json feed flow - <"$TMP/bad.csv"
rc_is 6 "feed --json from stdin"
keys d model file rows sent accepted rejected unparsable seconds errors
keys 'd["errors"][0]' line error detail
check "  errors sorted by line, with reasons" [ "$(jget "$(cat "$TMP/out")" '[(e["line"], e["error"]) for e in d["errors"]]')" = \
    "[(3, 'unparsable'), (4, 'term_non_finite'), (5, 'unparsable'), (6, 'unparsable')]" ]
printf 'ref,raw\n1,2\n' >"$TMP/in.csv"
run $C feed flow <"$TMP/in.csv"
rc_is 6 "feed with a field's column missing"
check "  names the missing column" grep -q "no column for temp" "$TMP/err"
printf 'ref,raw,rh\n612,598,45\n600,590,44\n' >"$TMP/in.csv"
run $C feed nothing_matches "$TMP/in.csv"
rc_is 5 "feed to a model no section makes"
printf 'rh,ref,raw\n45,612,598\n44,600,590\n46,630,611\n' >"$TMP/in.csv"
run $C feed co2_kitchen - <"$TMP/in.csv"
rc_is 0 "feed creates a model from its template"
run $C --json show flow
check "  the good rows of both runs were used: 400 + 2 x 2" \
    [ "$(jget "$(cat "$TMP/out")" 'd["n"]')" = 404 ]

echo "t_client: list, show, predict, history, plot, stats"
run $C list
rc_is 0 "list"
golden list.txt
run $C list --names
check "list --names" [ "$(tr '\n' ' ' <"$TMP/out")" = "co2_kitchen flow " ]
run $C --json list
keys d count models
keys 'd["models"][0]' model n r2 r2_pred sigma alarms frozen stale orphan
run $C list --names --json
check "list --names --json is an array of names" [ "$(jget "$(cat "$TMP/out")" 'd')" = "['co2_kitchen', 'flow']" ]

# A fresh model with exactly the 400 rows, for the golden files.
"$COEFCTL" -s "$SOCK" reset --yes flow >/dev/null 2>&1
run $C feed -q --time time flow "$TMP/flow.csv"
rc_is 0 "feed -q after reset"
check "  -q: nothing on stderr" [ ! -s "$TMP/err" ]
run $C show flow
rc_is 0 "show"
golden show.txt
run $C show nosuch
rc_is 5 "show an unknown model"
check "  says so" grep -q 'no model "nosuch".*(unknown_model)' "$TMP/err"

run $C predict flow raw=20 temp=15
rc_is 0 "predict, named"
golden predict.txt
cp "$TMP/out" "$TMP/pred1"
run $C predict flow 20 15
check "predict, positional, gives the same" cmp -s "$TMP/out" "$TMP/pred1"
run $C --json predict flow temp=15 raw=20
keys d model yhat se lo hi level
py "prediction interval equals numpy/scipy: y +- t(0.975, n-3) s sqrt(1 + x'(X'X)^-1 x)" '
import csv, json, sys
import numpy as np
from scipy.stats import t as tdist
rows = list(csv.DictReader(open(sys.argv[1])))
X = np.array([[1, float(r["raw"]), float(r["temp"])] for r in rows])
y = np.array([float(r["ref"]) for r in rows])
b, rss, rank, sv = np.linalg.lstsq(X, y, rcond=None)
n, p = X.shape
s = np.sqrt(rss[0] / (n - p))
x = np.array([1, 20, 15])
se = s * np.sqrt(1 + x @ np.linalg.inv(X.T @ X) @ x)
q = tdist.ppf(0.975, n - p)
d = json.load(open(sys.argv[2]))
assert abs(d["yhat"] - x @ b) < 1e-9 * abs(x @ b), (d["yhat"], x @ b)
assert abs(d["se"] - se) < 1e-6 * se, (d["se"], se)
assert abs(d["lo"] - (x @ b - q * se)) < 1e-6, (d["lo"], x @ b - q * se)
assert abs(d["hi"] - (x @ b + q * se)) < 1e-6, (d["hi"], x @ b + q * se)
assert d["level"] == 0.95
' "$TMP/flow.csv" "$TMP/out"
run $C predict flow -1.5 15
rc_is 0 "predict with a negative value"
run $C predict flow 20
rc_is 4 "predict with the wrong number of values"
check "  the daemon's reason" grep -q '(wrong_count)' "$TMP/err"
run $C predict flow raw=0x10 temp=1
rc_is 2 "predict with a malformed number (checked before sending)"
check "  the parser's reason" grep -q 'not_a_number' "$TMP/err"
run $C predict flow 20 --json
rc_is 2 "predict: options after NAME are refused"
run $C predict nosuch 1 2
rc_is 5 "predict for an unknown model"

run $C history -n 5 flow
rc_is 0 "history"
golden history.txt
run $C history --csv -n 5 flow
golden history.csv
py "history --csv parses, with full precision" '
import csv, json, subprocess, sys
rows = list(csv.reader(open(sys.argv[1])))
assert rows[0] == ["t", "n", "r2_pred", "intercept", "raw", "temp"], rows[0]
assert len(rows) == 6
j = json.loads(subprocess.run(sys.argv[2:] + ["--json", "history", "-n", "5", "flow"], capture_output=True, check=True).stdout)
for r, h in zip(rows[1:], j["history"]):
    assert r[0] == h["t"] and int(r[1]) == h["n"]
    assert [float(v) for v in r[3:]] == h["coef"], (r, h)
' "$TMP/out" "$COEFCTL" -s "$SOCK"
run $C --json history flow
keys d model features every history
keys 'd["history"][0]' t n r2_pred coef
check "  every snapshot kept: 400/25 = 16" [ "$(jget "$(cat "$TMP/out")" 'len(d["history"]), d["every"]')" = "(16, 25)" ]
cp "$TMP/out" "$TMP/hist.json"
run $C history --csv --json flow
rc_is 2 "history --csv --json"

run $C plot --ascii --width 72 -n 16 flow
rc_is 0 "plot on the terminal"
golden plot.txt
run $C plot --svg "$TMP/flow.svg" flow
rc_is 0 "plot --svg"
py "the SVG is well-formed XML and its polylines show the history given" '
import datetime, json, sys
import xml.etree.ElementTree as ET
ns = {"s": "http://www.w3.org/2000/svg"}
root = ET.parse(sys.argv[1]).getroot()
assert root.tag == "{http://www.w3.org/2000/svg}svg", root.tag
assert "flow" in root.find("s:title", ns).text
h = json.load(open(sys.argv[2]))
ts = [datetime.datetime.fromisoformat(e["t"].replace("Z", "+00:00")).timestamp() for e in h["history"]]
series = {f: [e["coef"][i] for e in h["history"]] for i, f in enumerate(h["features"])}
series["r2_pred"] = [e["r2_pred"] for e in h["history"]]
panels = root.findall("s:g[@class=\"panel\"]", ns)
assert [p.get("data-series") for p in panels] == h["features"] + ["r2_pred"]
for p in panels:
    name = p.get("data-series")
    fr = p.find("s:rect[@class=\"frame\"]", ns)
    x0, y0, w, ht = (float(fr.get(k)) for k in ("x", "y", "width", "height"))
    pl = p.find("s:polyline", ns)
    xmin, xmax, ymin, ymax = (float(pl.get("data-" + k)) for k in ("xmin", "xmax", "ymin", "ymax"))
    pts = [tuple(map(float, s.split(","))) for s in pl.get("points").split()]
    # Undefined values (null: r2_pred during the warm-up) are not drawn.
    tv_defined = [(t, v) for t, v in zip(ts, series[name]) if v is not None]
    assert len(pts) == len(tv_defined), (name, len(pts), len(tv_defined))
    for (px, py), (t, v) in zip(pts, tv_defined):
        tv = xmin + (px - x0) / w * (xmax - xmin)
        vv = ymin + (y0 + ht - py) / ht * (ymax - ymin)
        # Points are written to 0.001 px.
        assert abs(tv - t) <= 0.002 / w * (xmax - xmin), (name, tv, t)
        assert abs(vv - v) <= 0.002 / ht * (ymax - ymin), (name, vv, v)
    labels = [t.text for t in p.findall("s:text[@class=\"ytick\"]", ns)]
    assert len(labels) >= 2 and all(l for l in labels), labels
    assert len(p.findall("s:text[@class=\"xtick\"]", ns)) == 3
' "$TMP/flow.svg" "$TMP/hist.json"
run $C plot --svg - -n 3 flow
py "plot --svg - writes the document to stdout" '
import sys
import xml.etree.ElementTree as ET
ET.parse(sys.argv[1])
' "$TMP/out"

run $C stats
rc_is 0 "stats"
check "  a counter table with dotted keys" grep -q '^records.used  *[0-9]' "$TMP/out"
run $C --json stats
keys d version uptime models records rejected rejected_total alarms_raised \
    watchers connections connections_total connections_refused \
    dropped_stuck dropped_idle datagrams bytes_in bytes_out output_buffered \
    memory_rss state
keys 'd["records"]' used gated primed frozen predictions

echo "t_client: pin, freeze, thaw, reset, save, reload"
run $C check
rc_is 0 "check, all clear"
check "  one line" [ "$(cat "$TMP/out")" = "OK: 2 models, no alarm" ]
run $C check flow nosuch
rc_is 2 "check an unknown model"
check "  names it" [ "$(cat "$TMP/out")" = "UNKNOWN: no model nosuch" ]
run $C --json check flow
keys d status models models_in_alarm alarms missing
run $C pin flow
rc_is 0 "pin"
run $C --json show flow
check "  the reference is the pin" [ "$(jget "$(cat "$TMP/out")" 'd["reference"]["source"], d["reference"]["coef"] == d["coef"]')" = "('pin', True)" ]
keys 'd["reference"]' coef source pinned drift_d2 drift_q
run $C --json pin flow
keys d ok model
run $C freeze flow
rc_is 0 "freeze"
run $C list
check "  list shows it frozen" grep -q '^flow .* frozen$' "$TMP/out"
run $C --json thaw flow
rc_is 0 "thaw"
keys d ok model frozen
check "  no longer frozen" [ "$(jget "$(cat "$TMP/out")" 'd["frozen"]')" = False ]
run $C reset co2_kitchen </dev/null
rc_is 2 "reset without --yes and no terminal"
run $C --json reset --yes co2_kitchen
rc_is 0 "reset --yes"
keys d ok model rebuilt
run $C --json show co2_kitchen
check "  the model starts afresh" [ "$(jget "$(cat "$TMP/out")" 'd["n"]')" = 0 ]
run $C reset --yes nosuch
rc_is 5 "reset an unknown model"
run $C save
if [ "$RC" -eq 0 ]; then
	ok "save (exit 0)"
else
	rc_is 4 "save without a state directory"
	check "  the daemon's reason" grep -q '(internal)' "$TMP/err"
fi
run $C reload
rc_is 0 "reload"
check "  reports what was kept" grep -q '^configuration reloaded: 2 models kept' "$TMP/out"
run $C --json reload
keys d ok kept stale orphan
cp "$TMP/c.conf" "$TMP/c.good"
printf '[model broken\n' >>"$TMP/c.conf"
run $C reload
rc_is 4 "reload with a broken configuration"
check "  prints the daemon's file:line error" grep -q "c.conf:[0-9]*: " "$TMP/err"
cp "$TMP/c.good" "$TMP/c.conf"

echo "t_client: watch, alarms, check"
$C --json watch --every 50 >"$TMP/w1" 2>"$TMP/w1.err" &
W1=$!
$C watch flow >"$TMP/w2" 2>"$TMP/w2.err" &
W2=$!
i=0
while [ "$($C --json stats | "$PY" -c 'import json,sys; print(json.load(sys.stdin)["watchers"])')" != 2 ] && [ $i -lt 100 ]; do
	sleep 0.05
	i=$((i + 1))
done
run $C feed -q --time time flow "$TMP/shift.csv"
rc_is 0 "feed the shifted data"
i=0
while ! grep -q shift "$TMP/w2" && [ $i -lt 100 ]; do sleep 0.05; i=$((i + 1)); done
kill -INT $W1
wait $W1
check "watch --json ends on SIGINT with exit 0" [ $? -eq 0 ]
kill -TERM $W2
wait $W2
check "watch ends on SIGTERM with exit 0" [ $? -eq 0 ]
py "watch --json: NDJSON, alarm and update events with the documented keys" '
import json, sys
ev = [json.loads(l) for l in open(sys.argv[1])]
al = [e for e in ev if e["event"] == "alarm"]
up = [e for e in ev if e["event"] == "update"]
assert al and up, ev
for e in al:
    assert set(e) == {"event", "model", "detector", "on", "t", "value"}, e
for e in up:
    assert set(e) == {"event", "model", "t", "n", "coef", "r2_pred"}, e
    assert e["n"] % 50 == 0
assert {e["detector"] for e in al if e["on"]} >= {"cusum", "shift"}, al
' "$TMP/w1"
check "watch (table): alarm lines with the time and detector" grep -q '^2026-01-05T[0-9:]*Z  flow  cusum ALARM  value ' "$TMP/w2"
check "watch (table): no colour off a terminal" sh -c "! grep -q \"$(printf '\033')\" '$TMP/w2'"
run $C check
rc_is 1 "check with an alarm"
check "  one ALARM line naming the model and detectors" grep -q '^ALARM: 1 of 2 models: flow (cusum,drift,shift)$' "$TMP/out"
run $C check co2_kitchen
rc_is 0 "check a model without alarms"
run $C --json check
check "  JSON: status alarm, the detectors per model" [ "$(jget "$(cat "$TMP/out")" 'd["status"], d["alarms"]["flow"]')" = "('alarm', ['cusum', 'drift', 'shift'])" ]
run $C watch nosuch
rc_is 5 "watch an unknown model"

echo "t_client: TCP and the token"
T="$COEFCTL -s 127.0.0.1:$PORT"
run $T --token-file "$TMP/token" list --names
rc_is 0 "list over TCP with the token"
run $T --token-file "$TMP/badtoken" list
rc_is 4 "a wrong token"
check "  says the token was not accepted" grep -q 'token in .*badtoken was not accepted' "$TMP/err"
run $T --token-file "$TMP/token" pin flow
rc_is 4 "admin commands over TCP are denied"
check "  with the daemon's reason" grep -q '(denied)' "$TMP/err"
printf 'ref,raw,rh\n612,598,45\n' >"$TMP/in.csv"
run $T feed co2_kitchen "$TMP/in.csv"
rc_is 6 "records over TCP without the token are refused"
check "  auth_required" grep -q '(auth_required)' "$TMP/err"
run $T --token-file "$TMP/token" feed co2_kitchen "$TMP/in.csv"
rc_is 0 "records over TCP with the token"

echo "t_client: terminal output"
tty_py "colour on a terminal, none with NO_COLOR; the same table either way" '
import os, pty, re, subprocess, sys
def on_tty(env):
    m, s = pty.openpty()
    p = subprocess.Popen(sys.argv[1:] + ["list"], stdout=s, stderr=s, env=env)
    os.close(s)
    out = b""
    while True:
        try:
            d = os.read(m, 4096)
        except OSError:
            break
        if not d:
            break
        out += d
    p.wait()
    os.close(m)
    return out.decode().replace("\r\n", "\n")
env = dict(os.environ, TERM="xterm")
env.pop("NO_COLOR", None)
col = on_tty(env)
assert "\033[1;31m" in col, col
plain = on_tty(dict(env, NO_COLOR="1"))
assert "\033" not in plain, plain
assert re.sub("\033\\[[0-9;]*m", "", col) == plain
' "$COEFCTL" -s "$SOCK"
tty_py "reset asks on a terminal; no keeps the model" '
import json, os, pty, subprocess, sys
def n():
    return json.loads(subprocess.run(sys.argv[1:] + ["--json", "show", "flow"], capture_output=True).stdout)["n"]
before = n()
m, s = pty.openpty()
p = subprocess.Popen(sys.argv[1:] + ["reset", "flow"], stdin=s, stdout=s, stderr=s)
os.close(s)
out = b""
while b"[y/N]" not in out:
    out += os.read(m, 4096)
os.write(m, b"n\n")
p.wait()
os.close(m)
assert p.returncode == 0, p.returncode
assert b"Reset flow" in out, out
assert n() == before > 0, (n(), before)
' "$COEFCTL" -s "$SOCK"

tty_py "feed on a terminal: a progress line (rows, rate, rejected) on stderr, then cleared" '
import os, pty, subprocess, sys
m, s = pty.openpty()
p = subprocess.Popen(sys.argv[2:] + ["feed", "co2_kitchen", sys.argv[1]],
                     stdout=subprocess.PIPE, stderr=s)
os.close(s)
err = b""
while True:
    try:
        d = os.read(m, 4096)
    except OSError:
        break
    if not d:
        break
    err += d
out = p.communicate()[0]
os.close(m)
assert p.returncode == 0, (p.returncode, err)
assert b"feed co2_kitchen: 1 rows" in err and b"/s  0 rejected" in err, err
assert err.endswith(b"\r\033[K"), err
assert out.startswith(b"co2_kitchen: 1 rows, 1 accepted"), out
' "$TMP/in.csv" "$COEFCTL" -s "$SOCK"
LC_ALL=C.UTF-8 run $C plot -n 4 --width 40 flow
py "plot in a UTF-8 locale draws braille (U+2800 block) and box-drawing axes" '
import sys
t = open(sys.argv[1], encoding="utf-8").read()
assert any(0x2801 <= ord(ch) <= 0x28ff for ch in t), t
assert "\u2514" in t and "\u2524" in t, t
chart = [l for l in t.splitlines() if set(l) & set("\u2502\u2524\u2514")]
assert len(chart) == 4 * 7 and all(len(l) <= 40 for l in chart), chart
' "$TMP/out"

echo "t_client: man page and completion"
if command -v mandoc >/dev/null 2>&1; then
	run mandoc -Tlint -Wwarning client/coefctl.1
	check "mandoc -Tlint -Wwarning client/coefctl.1 is clean" [ "$RC" -eq 0 -a ! -s "$TMP/out" -a ! -s "$TMP/err" ]
else
	fail "mandoc is not installed (make deps installs it)"
fi
if command -v bash >/dev/null 2>&1; then
	comp() {
		PATH="$(dirname "$COEFCTL"):$PATH" bash -c '
. client/coefctl.bash
COMP_WORDS=("$@"); COMP_CWORD=$(($# - 1)); COMPREPLY=()
_coefctl
echo "${COMPREPLY[*]}"' comp "$@"
	}
	check "completion: commands" [ "$(comp coefctl pl)" = "plot" ]
	check "completion: options" [ "$(comp coefctl history --c)" = "--count --csv" ]
	check "completion: model names from the daemon" [ "$(comp coefctl -s "$SOCK" show "")" = "co2_kitchen flow" ]
else
	fail "bash is not installed"
fi

echo "t_client: a long feed, the daemon going away"
# Many rows, several large writes, refusals far apart: the line numbers
# reported must be the CSV's.
"$PY" - "$TMP/many.csv" <<'EOF'
import random, sys
random.seed(5)
with open(sys.argv[1], "w") as f:
    f.write("raw,rh,ref\n")
    for i in range(2, 30002):
        raw = random.uniform(400, 900); rh = random.uniform(20, 80)
        ref = 5 + 0.98 * raw + 0.1 * rh + random.gauss(0, 2)
        if i in (7000, 29999):
            f.write("%r,%r,x\n" % (raw, rh))
        elif i in (15001, 15002, 28000):
            f.write("1e200,%r,%r\n" % (rh, ref))
        else:
            f.write("%r,%r,%r\n" % (raw, rh, ref))
EOF
run $C --json feed co2_many "$TMP/many.csv"
rc_is 6 "feed 30000 rows with refusals spread out"
check "  counts and CSV line numbers of every refusal" [ "$(jget "$(cat "$TMP/out")" \
    'd["rows"], d["accepted"], d["rejected"], d["unparsable"], [(e["line"], e["error"]) for e in d["errors"]]')" = \
    "(30000, 29995, 3, 2, [(7000, 'unparsable'), (15001, 'term_non_finite'), (15002, 'term_non_finite'), (28000, 'term_non_finite'), (29999, 'unparsable')])" ]

$C watch >"$TMP/w3" 2>"$TMP/w3.err" &
W3=$!
i=0
while [ "$($C --json stats | "$PY" -c 'import json,sys; print(json.load(sys.stdin)["watchers"])')" != 1 ] && [ $i -lt 100 ]; do
	sleep 0.05
	i=$((i + 1))
done
stop_daemon
wait $W3
check "watch ends with exit 3 when the daemon goes away" [ $? -eq 3 ]
check "  and says so" grep -q "closed the connection" "$TMP/w3.err"
run $C list
rc_is 3 "daemon stopped"
check "  names the socket" grep -q "cannot reach coefd at $SOCK" "$TMP/err"
finish
