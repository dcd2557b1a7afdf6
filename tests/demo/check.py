#!/usr/bin/python3
# SPDX-License-Identifier: ISC
"""Checks on the greenhouse demo's outcome (run by `make demo`, in CI).

Reads DIR/truth.json (from greenhouse.py) and DIR/gh1.json .. gh8.json (the
daemon's model objects at the end of the demo) and asserts:
  - gh3 (span drift from day 3) raised its drift alarm after the true onset
    and within DRIFT_BOUND of it;
  - no other sensor raised any alarm at any time (every detector's change
    time is null);
  - gh7's spikes were gated (counted, not used) and raised no alarm;
  - gh5's model (humidity channel stuck) stayed finite and bounded;
  - the well-behaved sensors' coefficients are within 4 standard errors of
    the true ones, and the span within 0.5 %.
Prints one line per check and a closing "N passed, N failed" line.
"""
import datetime
import json
import math
import os
import sys

DRIFT_BOUND = 12 * 3600     # the drift alarm must fire within 12 h of onset
COND_BOUND = 1e8            # condition of P for the stuck-channel model


def when(s):
    return datetime.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def main():
    d = sys.argv[1]
    truth = json.load(open(os.path.join(d, "truth.json")))
    models = {}
    for k in range(1, 9):
        models["gh%d" % k] = json.load(open(os.path.join(d, "gh%d.json" % k)))
    results = []

    def check(ok, what):
        results.append(ok)
        print("  %s %s" % ("ok  " if ok else "FAIL", what))

    onset = truth["drift_onset"]
    g3 = models["gh3"]
    ch = g3["detectors"]["drift"]["changed"]
    t = when(ch) if ch else None
    check(t is not None and onset <= t <= onset + DRIFT_BOUND,
          "gh3 drift alarm %s, %.1f h after the true onset (bound %d h)"
          % (ch, (t - onset) / 3600 if t else float("nan"), DRIFT_BOUND // 3600))

    for name, m in sorted(models.items()):
        if name == "gh3":
            continue
        changed = {k: v["changed"] for k, v in m["detectors"].items()
                   if v["changed"] is not None}
        check(not changed and not m["alarms"],
              "%s raised no alarm%s" % (name, "" if not changed else
                                        " (changed: %s)" % changed))

    g7 = models["gh7"]
    check(truth["spikes"] <= g7["n_gated"] <= truth["spikes"] + 5,
          "gh7: %d of %d spikes gated (counted, not used)"
          % (g7["n_gated"], truth["spikes"]))

    g5 = models["gh5"]
    finite = all(v is not None and math.isfinite(v)
                 for v in g5["coef"] + g5["stderr"])
    check(finite and g5["cond"] is not None and g5["cond"] < COND_BOUND,
          "gh5 (stuck humidity channel): finite, cond(P) = %.3g < %.0e"
          % (g5["cond"] or float("nan"), COND_BOUND))

    names = ["intercept", "raw", "temp", "rh"]
    for name in ("gh1", "gh2", "gh4", "gh6", "gh7", "gh8"):
        m = models[name]
        tv = [truth["coef"][name][n] for n in names]
        z = [abs(c - v) / s for c, v, s in zip(m["coef"], tv, m["stderr"])]
        span = abs(m["coef"][1] / tv[1] - 1)
        check(max(z) <= 4 and span <= 0.005,
              "%s coefficients within %.1f SE of the truth, span off by %.3f %%"
              % (name, max(z), 100 * span))

    nf = results.count(False)
    print("demo checks: %d passed, %d failed" % (len(results) - nf, nf))
    return 1 if nf else 0


if __name__ == "__main__":
    sys.exit(main())
