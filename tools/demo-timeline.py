#!/usr/bin/python3
"""Prints the alarm timeline of a replay beside what the simulator really did.

    tools/demo-timeline.py EVENTS.jsonl TRUTH.json SUMMARY.json

EVENTS.jsonl: `holdfast replay --events`; TRUTH.json: `holdfast sim`'s truth
file; SUMMARY.json: `holdfast replay --summary`.
"""
import json
import sys
from datetime import datetime


def when(text):
    return datetime.strptime(text[:19], "%Y-%m-%dT%H:%M:%S")


def fmt(value, spec, unit):
    return "-" if value is None else (spec % value) + unit


def main():
    if len(sys.argv) != 4:
        print(__doc__, file=sys.stderr)
        return 2
    events = [json.loads(line) for line in open(sys.argv[1]) if line.strip()]
    truth = json.load(open(sys.argv[2]))
    summary = json.load(open(sys.argv[3]))
    leaks = truth.get("leaks", [])
    print("What the simulator did (truth.json):")
    for leak in leaks:
        print("  leak from %s at %.0f m, %.2f kg/s when open (%s)" % (
            leak["onset"][11:19], leak["node_chainage_m"], leak["rate_when_open_kg_s"], leak["size"]))
    for op in truth.get("operations", []):
        print("  operation: %s" % op)
    print()
    print("Alarm timeline (holdfast replay --events):")
    print("  %-8s  %-20s %-15s %-18s %12s %12s" % ("time", "alarm", "state", "cause", "leak kg/s", "chainage"))
    for e in events:
        print("  %-8s  %-20s %-15s %-18s %12s %12s" % (
            e["time"][11:19], e["segment"] + " " + e["type"], e["state"], e["cause"],
            fmt(e.get("leak_rate_kg_s"), "%.2f", ""), fmt(e.get("location_m"), "%.0f", " m")))
    first = [e for e in events if e["type"] in ("leak", "rupture") and e["state"] == "unack_active"]
    if leaks and first:
        delay = (when(first[0]["time"]) - when(leaks[0]["onset"])).total_seconds()
        print("\n  first leak alarm %.0f s after the leak opened" % delay)
    elif leaks:
        print("\n  no leak alarm")
    print()
    print("At the end of the data (holdfast replay --summary):")
    for s in summary.get("segments", []):
        print("  %s: decision %s, leak estimate %s at %s (band %s .. %s)" % (
            s["id"], s.get("decision"), fmt(s.get("leak_rate_kg_s"), "%.2f", " kg/s"),
            fmt(s.get("location_m"), "%.0f", " m"), fmt(s.get("location_low_m"), "%.0f", " m"),
            fmt(s.get("location_high_m"), "%.0f", " m")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
