#!/bin/sh
# SPDX-License-Identifier: ISC
# Derived terms: a model declared on raw fields with terms gives the same
# coefficients as the same model fitted to a CSV where the terms were
# pre-computed (to round-off: the engine centres and scales the terms
# internally and maps back), at lambda = 1 and lambda < 1 (regularisation
# off, since its pseudo-rows act on the engine's scaled terms). Also the
# daemon: a prev() model primes on its first record and predicts from raw
# fields.
. tests/integration/lib.sh

echo "t_terms: derived terms vs pre-computed columns"
"$PY" - "$TMP" <<'PYEOF'
import random, sys
random.seed(11)
d = sys.argv[1]
with open(d + "/raw.csv", "w") as f, open(d + "/pre.csv", "w") as g:
    f.write("y,x,t\n")
    g.write("y,x,x2,xt\n")
    for i in range(600):
        x = random.uniform(100, 900); t = random.uniform(5, 35)
        y = 3 + 0.8 * x + 2e-4 * x * x - 0.01 * x * t + random.gauss(0, 0.5)
        f.write("%r,%r,%r\n" % (y, x, t))
        g.write("%r,%r,%r,%r\n" % (y, x, x * x, x * t))
PYEOF
for lam in 1 0.995; do
	"$COEFCTL" fit --json --lambda $lam --delta 0 --terms "x, x^2, x*t" \
	    "$TMP/raw.csv" >"$TMP/a.json"
	"$COEFCTL" fit --json --lambda $lam --delta 0 "$TMP/pre.csv" >"$TMP/b.json"
	worst=$("$PY" -c '
import json, sys
a = json.load(open(sys.argv[1])); b = json.load(open(sys.argv[2]))
assert a["features"] == ["intercept", "x", "x^2", "x*t"], a["features"]
print(max(abs(p - q) / abs(q) for p, q in zip(a["coef"], b["coef"])))
' "$TMP/a.json" "$TMP/b.json")
	check "lambda $lam: terms equal pre-computed columns, worst relative difference $worst" \
	    "$PY" -c "import sys; sys.exit(0 if $worst <= 1e-9 else 1)"
done

cat >"$TMP/t.conf" <<'CONF'
[model slow]
fields = raw
target = y
terms = raw, prev(raw)
memory = 1
gate = off
CONF
start_daemon "$TMP/t.conf"
printf 'slow 1 10\n.stats\nslow 2 11\nslow 3.5 12\nslow 4 14\nslow 5.5 15\n.predict slow raw=16\n.get slow\n' \
    | send >"$TMP/r"
st=$(sed -n 1p "$TMP/r")
check "first record primes prev(): counted as primed" [ "$(jget "$st" 'd["records"]["primed"]')" = 1 ]
g=$(sed -n 3p "$TMP/r")
check "features are the term texts" [ "$(jget "$g" 'd["features"]')" = "['intercept', 'raw', 'prev(raw)']" ]
check "four records used (the primer is not fitted)" [ "$(jget "$g" 'd["n"]')" = 4 ]
p=$(sed -n 2p "$TMP/r")
check "prediction from raw fields with prev() taken from the last record" \
    [ "$(jget "$p" 'd["model"] == "slow" and d["yhat"] is not None')" = True ]
printf 'slow 1 1e200\n' | send >"$TMP/r2"
check "a term that overflows is rejected (term_non_finite)" \
    [ "$(jget "$(cat "$TMP/r2")" 'd["error"]')" = term_non_finite ]
stop_daemon
finish
