#!/usr/bin/env python3
"""No config that `holdfast check-config` accepts may crash a command.

Each case bends the demo site towards a limit (config/FORMAT.md, "Limits").
A case check-config rejects must exit 2 and name the bound; a case it accepts
is run through `holdfast balance` on the first minutes of the demo readings,
which must exit 0 (no signal, no std::bad_alloc, no abort).

Usage: nasty_configs.py HOLDFAST SITE READINGS WORKDIR
"""
import copy
import json
import os
import subprocess
import sys
import time

holdfast, site_path, readings, work = sys.argv[1:5]
os.makedirs(work, exist_ok=True)
base = json.load(open(site_path))
failures = []

# About 20 s of the demo readings (10 points at about 1 Hz).
slice_path = os.path.join(work, "slice.csv")
with open(readings) as src, open(slice_path, "w") as dst:
    for i, line in enumerate(src):
        if i > 200:
            break
        dst.write(line)


def seg(d):
    return d["segments"][0]


def stretch(d, length_m):
    """Makes the demo segment length_m long (the second section takes up the rest)."""
    s = seg(d)
    s["sections"][1]["length_m"] = length_m - s["sections"][0]["length_m"]
    s["elevation_profile"][-1]["chainage_m"] = length_m
    for key in ("meters", "pressure_points", "temperature_points", "landmarks"):
        for e in s.get(key, []):
            if e.get("chainage_m") == 48000:
                e["chainage_m"] = length_m


def many_meters(n):
    """n meters: the demo's three and deliveries on points no reading names (stale, so unavailable)."""
    def f(d):
        s = seg(d)
        for i in range(n - len(s["meters"])):
            pid = "XX-FT-%03d" % i
            d["points"][pid] = {"kind": "flow", "unit": "kg/s", "staleness_s": 30}
            s["meters"].append({"point": pid, "role": "delivery", "type": "mass", "chainage_m": 22000})
    return f


# name, mutation, expected: None = accepted, else a text the rejection must contain
CASES = [
    ("reach 0.001 m", lambda d: seg(d).update(reach_length_m=0.001), "must be at least 1 m"),
    ("reach 1 m", lambda d: seg(d).update(reach_length_m=1), "at most 20000 per segment (use a reach of at least 3 m)"),
    ("reach 3 m", lambda d: seg(d).update(reach_length_m=3), None),
    ("section 1e300 m", lambda d: seg(d)["sections"][1].update(length_m=1e300), "at most 2000000 m per segment"),
    ("segment 2000 km", lambda d: stretch(d, 2.0e6), None),
    ("segment 2000 km at 1 m reaches", lambda d: (stretch(d, 2.0e6), seg(d).update(reach_length_m=1)),
     "at most 20000 per segment"),
    ("64 meters", many_meters(64), None),
    ("65 meters", many_meters(65), "at most 64 meters per segment"),
    ("tick 1e-6 s", lambda d: d["site"].update(tick_s=1e-6), "must be between 0.01 and 3600 s"),
    ("tick 3600 s", lambda d: (d["site"].update(tick_s=3600),
                                        seg(d)["balance"].update(windows_s=[216000, 432000])), None),
    ("one-year window", lambda d: seg(d)["balance"].update(windows_s=[300, 366 * 86400]), None),
    ("window 1e12 s", lambda d: seg(d)["balance"].update(windows_s=[300, 1e12]), "at most 31622400 s"),
    ("elevation 1e6 m", lambda d: seg(d)["elevation_profile"][1].update(elevation_m=1e6), None),
    ("huge strapping volume", lambda d: seg(d)["tanks"][0]["strapping_table"]["rows"].append([19.0, 1e15]), None),
    ("1000 buckets", lambda d: seg(d)["balance"].update(buckets_per_window=1000, windows_s=[1000, 3600]), None),
]

for name, mutate, expected in CASES:
    doc = copy.deepcopy(base)
    mutate(doc)
    path = os.path.join(work, name.replace(" ", "_").replace("/", "_") + ".json")
    with open(path, "w") as f:
        json.dump(doc, f)
    cc = subprocess.run([holdfast, "check-config", path], capture_output=True, text=True, timeout=60)
    if expected is not None:
        if cc.returncode != 2 or expected not in cc.stdout + cc.stderr:
            failures.append("%s: check-config exit %d, expected 2 with %r; got:\n%s%s" %
                            (name, cc.returncode, expected, cc.stdout, cc.stderr))
        else:
            print("ok   %-32s rejected: %s" % (name, expected))
        continue
    if cc.returncode != 0:
        failures.append("%s: check-config rejected a case meant to pass:\n%s%s" % (name, cc.stdout, cc.stderr))
        continue
    t0 = time.time()
    try:
        run = subprocess.run([holdfast, "balance", "--config", path, "--data", slice_path, "--every", "60",
                              "--out", os.path.join(work, "out.csv")], capture_output=True, text=True, timeout=120)
    except subprocess.TimeoutExpired:
        failures.append("%s: balance did not finish within 120 s" % name)
        continue
    if run.returncode != 0 or "bad_alloc" in run.stderr or "terminate" in run.stderr:
        failures.append("%s: balance exit %d:\n%s" % (name, run.returncode, run.stderr[-2000:]))
    else:
        print("ok   %-32s accepted, balance ran (%.1f s)" % (name, time.time() - t0))

for f in failures:
    print("FAIL: " + f)
sys.exit(1 if failures else 0)
