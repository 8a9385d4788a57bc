#!/usr/bin/python3
"""Plots of a `holdfast district` run, with matplotlib (Debian python3-matplotlib):

    tools/district-plots.py NIGHTS.csv BLOCKS.csv EVENTS.jsonl OUT_DIR

OUT_DIR/district-nights.png: night flow (MNF), night use and night leakage per
night, the detector's baseline, and the nights with a burst alarm marked.
OUT_DIR/district-profile.png: the time-of-day profile of the balance residual
(median per local hour, weekdays and weekends) with the zone flow.
"""
import csv
import json
import os
import statistics
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.dates as mdates  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
from datetime import datetime, timezone  # noqa: E402


def num(s):
    try:
        return float(s)
    except (TypeError, ValueError):
        return float("nan")


def main(nights_csv, blocks_csv, events_jsonl, out):
    os.makedirs(out, exist_ok=True)
    nights = list(csv.DictReader(open(nights_csv)))
    days = [datetime.strptime(n["date"], "%Y-%m-%d") for n in nights]
    fig, ax = plt.subplots(figsize=(10, 4.5))
    ax.plot(days, [num(n["mnf_m3_h"]) for n in nights], "o-", ms=3, label="minimum night flow")
    ax.plot(days, [num(n["legit_night_use_m3_h"]) for n in nights], "-", label="night use")
    ax.plot(days, [num(n["night_leakage_m3_h"]) for n in nights], "s-", ms=3, label="night leakage")
    base = [num(n["night_leakage_m3_h"]) - num(n["step_m3_h"]) for n in nights]
    ax.plot(days, base, "--", color="grey", label="detector baseline (leakage scale)")
    alarm_days = [d for d, n in zip(days, nights) if n["burst_alarm"] == "1"]
    for d in alarm_days:
        ax.axvline(d, color="red", alpha=0.5)
    bursts = []
    if events_jsonl and os.path.exists(events_jsonl):
        for line in open(events_jsonl):
            e = json.loads(line)
            if e.get("cause") == "condition_raised":
                bursts.append(e)
    for e in bursts:
        t = datetime.strptime(e["time"][:19], "%Y-%m-%dT%H:%M:%S")
        ax.axvline(t, color="red", ls=":", alpha=0.8)
        ax.annotate("%s %.1f m3/h" % (e.get("path", "burst"), e["burst_m3_h"]), (t, ax.get_ylim()[1]),
                    rotation=90, va="top", ha="right", fontsize=8, color="red")
    ax.set_ylabel("m3/h")
    ax.set_title("Night flow per night (local dates); burst alarms in red")
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%d %b"))
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    fig.savefig(os.path.join(out, "district-nights.png"), dpi=110, bbox_inches="tight")
    plt.close(fig)

    blocks = [b for b in csv.DictReader(open(blocks_csv)) if b["ok"] == "1"]
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(10, 6), sharex=True)
    for we, label in (("0", "weekdays"), ("1", "weekends")):
        zone, res = {}, {}
        for b in blocks:
            if b["weekend"] != we:
                continue
            h = int(b["local_start"][11:13])
            zone.setdefault(h, []).append(num(b["zone_m3_h"]))
            res.setdefault(h, []).append(num(b["residual_m3_h"]))
        hs = sorted(zone)
        a1.plot(hs, [statistics.median(zone[h]) for h in hs], "o-", ms=3, label=label)
        a2.plot(hs, [statistics.median(res[h]) for h in hs], "o-", ms=3, label=label)
    a1.set_ylabel("zone flow m3/h")
    a2.set_ylabel("residual m3/h")
    a2.set_xlabel("local hour")
    a1.set_title("Time-of-day profile (median per hour)")
    for a in (a1, a2):
        a.grid(alpha=0.3)
        a.legend(fontsize=8)
    fig.savefig(os.path.join(out, "district-profile.png"), dpi=110, bbox_inches="tight")
    plt.close(fig)
    print("wrote %s/district-nights.png and %s/district-profile.png" % (out, out))


if __name__ == "__main__":
    if len(sys.argv) != 5:
        sys.exit(__doc__)
    main(*sys.argv[1:])
