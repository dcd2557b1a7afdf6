#!/bin/sh
# SPDX-License-Identifier: ISC
# make demo: the greenhouse scenario end to end. Generates five days of
# one-a-minute readings from eight CO2 sensors (tests/demo/greenhouse.py),
# starts coefd on a private socket with conf/demo.conf, feeds two days
# through coefctl, pins the calibrations, feeds three more days (one sensor
# drifts, one has a stuck humidity channel, one spikes), shows what coefd
# made of it, checks the outcome (tests/demo/check.py) and stops coefd.
set -eu
BUILD=${1:-build}
OUT=$BUILD/demo
SOCK=$OUT/coefd.sock
PY=/usr/bin/python3
[ -x "$PY" ] || PY=python3
export OPENBLAS_NUM_THREADS=1
C="$BUILD/coefctl -s $SOCK"
SENSORS="gh1 gh2 gh3 gh4 gh5 gh6 gh7 gh8"
DPID=

stop() {
	if [ -n "$DPID" ] && kill -0 "$DPID" 2>/dev/null; then
		kill -TERM "$DPID"
		wait "$DPID" || true
	fi
	DPID=
}
trap stop EXIT INT TERM

step() {
	printf '\n== %s\n\n' "$*"
}

rm -rf "$OUT"
mkdir -p "$OUT"
step "1. An invented greenhouse: 8 low-cost CO2 sensors vs a reference analyser"
$PY tests/demo/greenhouse.py "$OUT"
echo "5 days, one reading a minute per sensor: raw signal, air temperature,"
echo "humidity and the reference CO2 (ppm). Unknown to coefd: gh3's span drifts"
echo "from day 3, gh5's humidity channel sticks from day 2, gh7 has a burst of"
echo "spikes on day 4. Data and truth: $OUT/"

step "2. Start coefd (conf/demo.conf) on a private socket"
# A state directory of its own (under $OUT, emptied above): the demo
# neither reads nor touches the system's state_dir.
"$BUILD/coefd" -c conf/demo.conf -s "$SOCK" --state-dir "$OUT/state" \
    2>"$OUT/coefd.log" &
DPID=$!
i=0
while [ ! -S "$SOCK" ] && [ $i -lt 100 ]; do sleep 0.05; i=$((i + 1)); done
[ -S "$SOCK" ] || { cat "$OUT/coefd.log"; exit 1; }
sed -n 's/^<[0-9]>//p' "$OUT/coefd.log"

step "3. Days 1-2: calibrate every sensor (coefctl feed maps columns by name)"
for s in $SENSORS; do
	$C feed --time time "$s" "$OUT/part1-$s.csv"
done

step "4. Pin the calibrations: drift is measured from here"
for s in $SENSORS; do
	$C pin "$s" >/dev/null
done
echo "pinned: $SENSORS"

step "5. Days 3-5: keep feeding; coefd follows and watches for drift"
for s in $SENSORS; do
	$C feed --time time "$s" "$OUT/part2-$s.csv"
done

step "6. Every model at a glance"
$C list

step "7. gh3 in full: the drifting sensor (true onset $(date -u -d @"$($PY -c 'import json,sys; print(json.load(open(sys.argv[1]))["drift_onset"])' "$OUT/truth.json")" +%Y-%m-%dT%H:%M:%SZ))"
$C show gh3

step "8. gh7's spikes were gated (counted, not used), not alarmed; gh5 stayed bounded"
for s in gh7 gh5; do
	$C --json show "$s" | $PY -c '
import json, sys
d = json.load(sys.stdin)
print("%s: %d records used, %d gated, alarms: %s, sigma %.3g, cond(P) %.3g, humidity coef %.4g +- %.2g"
      % (d["model"], d["n"], d["n_gated"], ", ".join(d["alarms"]) or "none",
         d["sigma"], d["cond"], d["coef"][3], d["stderr"][3]))'
done

step "9. A calibrated reading: gh1 says raw=850 at 22 C and 60 %RH"
$C predict gh1 raw=850 temp=22 rh=60

step "10. gh3's coefficient path and one-step-ahead R^2"
$C plot --width 76 gh3
$C plot --svg "$OUT/gh3-coefficients.svg" gh3
echo "SVG chart written to $OUT/gh3-coefficients.svg"

step "11. Checks against the truth the generator knows"
for s in $SENSORS; do
	$C --json show "$s" >"$OUT/$s.json"
done
rc=0
$PY tests/demo/check.py "$OUT" || rc=1

step "12. Stop coefd cleanly"
kill -TERM "$DPID"
if wait "$DPID"; then echo "coefd exited 0"; else echo "coefd exited $?"; rc=1; fi
DPID=
exit $rc
