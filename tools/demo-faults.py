#!/usr/bin/env python3
"""Lists every instrument fault a scenario injected and what the monitor did.

Usage: demo-faults.py SCENARIO.json EVENTS.jsonl SUMMARY.json [--site SITE.json]
                      [--require-caught]

SCENARIO is the `holdfast sim` scenario (config/SCENARIO.md: `spikes`,
`flatlines`, `dropouts`, `quality` and `spike_rate_per_h` of each instrument).
EVENTS and SUMMARY are what `holdfast replay --events --summary` wrote for the
simulator's readings. One line per injected fault: point, kind, time, and what
the monitor did with it:
  - a spike: dropped by the aligner's spike check (the summary's
    `data_quality.points`: held back one reading, then dropped when the next
    reading returned);
  - a stuck transmitter, a silent one, readings flagged bad: the data-quality
    alarm raised while the fault lasted (or up to 2 minutes after it), whose
    detail names the point as frozen, stale or missing, or bad;
  - otherwise "not caught".
With --require-caught the exit status is 1 when any fault was not caught.
--site gives the points' units for the spike sizes.
"""
import argparse
import datetime as dt
import json
import sys

# A data-quality alarm raised this long after a fault ended still answers it
# (the alarm's on-delay is 60 s; the frozen verdict needs its repeats).
MARGIN_S = 120.0


def parse_iso(text):
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00"))


def clock(t):
    return t.strftime("%H:%M:%S")


def duration(s):
    s = float(s)
    if s >= 120 and s % 60 == 0:
        return "%d min" % (s // 60)
    return "%g s" % s


def faults_of(scenario):
    """(point, kind, from_s, to_s, text) for each injected fault, in time order."""
    out = []
    defaults = scenario.get("instrument_defaults", {})
    for point, spec in scenario.get("instruments", {}).items():
        for s in spec.get("spikes", []):
            out.append((point, "spike", float(s["at_s"]), float(s["at_s"]), s["size"]))
        for f in spec.get("flatlines", []):
            out.append((point, "stuck", float(f["from_s"]), float(f["to_s"]), None))
        for f in spec.get("dropouts", []):
            out.append((point, "silent", float(f["from_s"]), float(f["to_s"]), None))
        for f in spec.get("quality", []):
            out.append((point, "quality " + f["quality"], float(f["from_s"]), float(f["to_s"]), None))
        rate = spec.get("spike_rate_per_h", defaults.get("spike_rate_per_h", 0))
        if rate:
            out.append((point, "random spikes", 0.0, float(scenario["duration_s"]), rate))
    out.sort(key=lambda f: (f[2], f[0]))
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scenario")
    ap.add_argument("events")
    ap.add_argument("summary")
    ap.add_argument("--site", help="site config, for the points' units")
    ap.add_argument("--require-caught", action="store_true", help="exit 1 when a fault was not caught")
    a = ap.parse_args()

    try:
        with open(a.scenario) as f:
            scenario = json.load(f)
        with open(a.summary) as f:
            summary = json.load(f)
        events = []
        with open(a.events) as f:
            for n, line in enumerate(f, 1):
                if line.strip():
                    events.append(json.loads(line))
        units = {}
        if a.site:
            with open(a.site) as f:
                units = {p: s.get("unit", "") for p, s in json.load(f).get("points", {}).items()}
    except (OSError, ValueError) as e:
        print("demo-faults: %s" % e, file=sys.stderr)
        return 2
    if "data_quality" not in summary:
        print("demo-faults: %s has no data_quality block (a summary from an older holdfast?)" % a.summary,
              file=sys.stderr)
        return 2

    start = parse_iso(scenario["start"])
    at = lambda s: start + dt.timedelta(seconds=s)
    spikes = {p["point"]: p for p in summary["data_quality"]["points"]}
    raised = [(parse_iso(e["time"]), e) for e in events
              if e.get("type") == "data_quality" and e.get("cause") == "condition_raised"]

    faults = faults_of(scenario)
    missed = 0
    rows = []
    for point, kind, t0, t1, extra in faults:
        if kind == "spike":
            what = "spike %+g %s" % (extra, units.get(point, "")) if units else "spike %+g" % extra
            when = clock(at(t0))
        elif kind == "random spikes":
            what = "random spikes (%g/h)" % extra
            when = "whole run"
        else:
            what = "%s %s" % (kind, duration(t1 - t0))
            when = "%s-%s" % (clock(at(t0)), clock(at(t1)))
        did = None
        if kind in ("spike", "random spikes"):
            rec = spikes.get(point)
            if rec and rec["spikes"] > 0:
                first, last = parse_iso(rec["first_spike"]), parse_iso(rec["last_spike"])
                lo, hi = at(t0), at(t1 + MARGIN_S)
                if kind == "random spikes":
                    did = "%d dropped by the spike check (%s .. %s)" % (rec["spikes"], clock(first), clock(last))
                elif lo <= first <= hi or lo <= last <= hi or (rec["spikes"] > 2 and first <= lo and hi <= last):
                    hit = first if lo <= first <= hi else last
                    did = "dropped by the spike check at %s (held back one reading; the point stayed in use)" % (
                        hit.strftime("%H:%M:%S.%f")[:12])
        else:
            reasons = {"stuck": ("frozen",), "silent": ("stale", "missing")}.get(kind, ("bad",))
            for t, e in raised:
                if not (at(t0) <= t <= at(t1 + MARGIN_S)):
                    continue
                detail = e.get("detail") or ""
                if any("%s %s" % (point, r) in detail for r in reasons):
                    did = "data_quality alarm at %s, %s after the fault began: %s" % (
                        clock(t), duration(round((t - at(t0)).total_seconds())), detail)
                    break
        if did is None:
            did = "not caught"
            missed += 1
        rows.append((point, what, when, did))

    if not rows:
        print("no instrument faults in %s" % a.scenario)
        return 0
    wp = max(len(r[0]) for r in rows)
    ww = max(len(r[1]) for r in rows)
    wt = max(len(r[2]) for r in rows)
    print("Instrument faults injected (%s) and what the monitor did:" % a.scenario)
    for point, what, when, did in rows:
        print("  %-*s  %-*s  %-*s  %s" % (wp, point, ww, what, wt, when, did))
    print("  %d of %d caught" % (len(rows) - missed, len(rows)))
    return 1 if (missed and a.require_caught) else 0


if __name__ == "__main__":
    sys.exit(main())
