#!/usr/bin/python3
# SPDX-License-Identifier: ISC
"""Invented demo scenario: a greenhouse with eight low-cost CO2 sensors.

Each sensor reports a raw signal, air temperature and relative humidity once
a minute for five simulated days; a reference analyser gives the true CO2
concentration. The sensor's response is linear with its own span, offset
and temperature / humidity cross-sensitivities, so the calibration to learn
is

    ref = b0 + b1 * raw + b2 * temp + b3 * rh + noise.

What happens (all seeded, deterministic):
  gh3  its span drifts from the start of day 3 (a slow linear change of the
       raw coefficient, +6 % by the end of day 5);
  gh5  its humidity channel sticks at a constant from day 2 (no excitation
       in that direction: the windup case);
  gh7  a burst of 20 isolated spikes on day 4 (outliers, not drift);
  the others behave.

Writes, into the directory given as the first argument:
  greenhouse.csv   one row per reading: time,sensor,raw,temp,rh,ref
  part1-ghK.csv    sensor K, days 1-2 (calibration); part2-ghK.csv days 3-5
  truth.json       the true coefficients of every sensor, the drift onset,
                   the spike count, for the demo's checks.
Column order in the CSV files is shuffled on purpose (ref is not first):
coefctl feed maps columns by their header names.
"""
import json
import math
import os
import random
import sys

START = 1772409600          # 2026-03-02T00:00:00Z
DAYS = 5
PER_DAY = 1440              # one record a minute
N = DAYS * PER_DAY
DRIFT_ONSET = START + 2 * 86400
STUCK_FROM = START + 1 * 86400
SPIKES_AT = START + 3 * 86400 + 10 * 3600
NOISE = 3.0                 # ppm, reference-vs-sensor residual SD


def sensor_truth(rng, k):
    """Inverse response of sensor k: ref = b0 + b1 raw + b2 temp + b3 rh."""
    return {
        "intercept": rng.uniform(-25, 25),
        "raw": rng.uniform(0.92, 1.08),
        "temp": rng.uniform(-1.5, 1.5),
        "rh": rng.uniform(-0.4, 0.4) if k != 5 else 0.05,
    }


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else "."
    os.makedirs(out, exist_ok=True)
    rng = random.Random(20261202)
    sensors = ["gh%d" % k for k in range(1, 9)]
    truth = {s: sensor_truth(rng, k + 1) for k, s in enumerate(sensors)}
    spikes = {}
    rows = []
    for i in range(N):
        t = START + 60 * i
        day = (t - START) / 86400.0
        # Greenhouse climate: daily cycles plus weather noise.
        temp = 22 + 6 * math.sin(2 * math.pi * (day - 0.3)) + rng.gauss(0, 0.8)
        rh = 65 - 15 * math.sin(2 * math.pi * (day - 0.3)) + rng.gauss(0, 3)
        # CO2: enrichment in the morning, uptake at midday, vents.
        co2 = (650 + 300 * math.sin(2 * math.pi * (day + 0.1))
               + 120 * math.sin(2 * math.pi * 3 * day) + rng.gauss(0, 25))
        for k, s in enumerate(sensors):
            b = dict(truth[s])
            if s == "gh3" and t >= DRIFT_ONSET:
                b["raw"] *= 1 + 0.06 * (t - DRIFT_ONSET) / (3 * 86400)
            t_loc = temp + rng.gauss(0, 0.3)
            rh_loc = rh + rng.gauss(0, 1.5)
            ref = co2 + rng.gauss(0, 8)           # local air at sensor k
            # The sensor's raw signal: invert the calibration, add noise.
            raw = (ref - b["intercept"] - b["temp"] * t_loc
                   - b["rh"] * rh_loc + rng.gauss(0, NOISE)) / b["raw"]
            rh_rep = rh_loc
            if s == "gh5" and t >= STUCK_FROM:
                rh_rep = 100.0                     # stuck channel
            if s == "gh7" and SPIKES_AT <= t < SPIKES_AT + 60 * 60 \
                    and (t - SPIKES_AT) // 60 % 3 == 0:
                ref += rng.choice((-1, 1)) * rng.uniform(150, 300)
                spikes[s] = spikes.get(s, 0) + 1
            rows.append((s, t, ref, raw, t_loc, rh_rep))

    def write(name, sel, with_sensor):
        with open(os.path.join(out, name), "w") as f:
            f.write("time,%sraw,temp,rh,ref\n" % ("sensor," if with_sensor else ""))
            for s, t, ref, raw, tl, rh in sel:
                f.write("%d,%s%.3f,%.2f,%.1f,%.2f\n"
                        % (t, s + "," if with_sensor else "", raw, tl, rh, ref))

    write("greenhouse.csv", rows, True)
    split = START + 2 * 86400
    for s in sensors:
        write("part1-%s.csv" % s, [r for r in rows if r[0] == s and r[1] < split], False)
        write("part2-%s.csv" % s, [r for r in rows if r[0] == s and r[1] >= split], False)
    with open(os.path.join(out, "truth.json"), "w") as f:
        json.dump({"start": START, "drift_onset": DRIFT_ONSET,
                   "stuck_from": STUCK_FROM, "spikes_at": SPIKES_AT,
                   "spikes": spikes.get("gh7", 0), "noise": NOISE,
                   "coef": truth}, f, indent=1, sort_keys=True)


if __name__ == "__main__":
    main()
