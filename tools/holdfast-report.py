#!/usr/bin/env python3
"""Renders the page of `holdfast report` (host-sim/src/cmd_report.cc).

Inputs: the segment geometry the command compiled from the site (SI), the
CSV rows of `holdfast balance`, optionally the alarm events (JSON Lines) and
a truth.json (`holdfast sim`'s "holdfast-sim-truth/1" with "leaks", or the
demo's with one "leak"). Output: one self-contained HTML file, every plot an
inline PNG (data: URI), so the page can be mailed or archived as one file.

Per segment:
  1. imbalance per window with its +/- MDL band (the minimum detectable leak
     at the segment's confidence), alarms and the true onset marked;
  2. the leading detector's statistic against its threshold;
  3. line pack and tank inventory over time (and the truth's, if given);
  4. the line: elevation profile, transmitters, meters, landmarks, the
     location estimate with its band, and the true leak.
"""
import argparse
import base64
import csv
import datetime as dt
import html
import io
import json
import math
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.dates as mdates  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402


def parse_time(s):
    return dt.datetime.fromisoformat(s.replace("Z", "+00:00"))


def num(s):
    if s is None or s == "" or s == "null":
        return math.nan
    try:
        return float(s)
    except ValueError:
        return math.nan


def png(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    plt.close(fig)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def read_rows(path):
    rows = {}
    with open(path, newline="") as f:
        reader = csv.DictReader(f)
        for r in reader:
            rows.setdefault(r["segment"], []).append(r)
        fields = reader.fieldnames or []
    windows = sorted({int(f[len("imbalance_"):-len("s_kg_s")]) for f in fields
                      if f.startswith("imbalance_") and f.endswith("s_kg_s")})
    return rows, windows


def read_events(path):
    if not path:
        return []
    out = []
    with open(path) as f:
        for line in f:
            line = line.strip()
            if line:
                out.append(json.loads(line))
    return out


def truth_leaks(truth):
    """[(onset datetime, chainage_m, rate_kg_s)] from either truth format."""
    if not truth:
        return []
    leaks = []
    if isinstance(truth.get("leak"), dict):
        lk = truth["leak"]
        leaks.append((parse_time(lk["start"]), lk.get("chainage_m"), lk.get("rate_kg_s")))
    for lk in truth.get("leaks", []) or []:
        leaks.append((parse_time(lk["onset"]), lk.get("node_chainage_m", lk.get("chainage_m")),
                      lk.get("rate_when_open_kg_s")))
    return leaks


def mark(ax, alarms, leaks):
    for t in alarms:
        ax.axvline(t, color="tab:red", lw=1.2, ls="-", alpha=0.8)
    for onset, _, _ in leaks:
        ax.axvline(onset, color="black", lw=1.0, ls="--")


def time_axis(ax):
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=dt.timezone.utc))
    ax.set_xlabel("time (UTC)")
    ax.grid(alpha=0.3)


def segment_section(seg_id, all_rows, windows, geo, events, truth, leaks):
    # Rows without a balance (starting, unavailable) hold partial sums: not drawn.
    rows = [r for r in all_rows if r["status"] in ("normal", "degraded")] or all_rows
    t = [parse_time(r["time"]) for r in rows]
    seg_events = [e for e in events if e.get("segment") == seg_id]
    raised = [e for e in seg_events if e.get("cause") == "condition_raised"]
    alarm_times = [parse_time(e["time"]) for e in raised if e.get("type") in ("leak", "rupture")]
    figs = []

    # 1. Imbalance per window with the +/- MDL band.
    shown = [w for w in windows if w <= 6 * 3600] or windows[:1]
    fig, axes = plt.subplots(len(shown), 1, figsize=(10, 2.6 * len(shown)), sharex=True, squeeze=False)
    for ax, w in zip(axes[:, 0], shown):
        imb = [num(r["imbalance_%ds_kg_s" % w]) for r in rows]
        mdl = [num(r["mdl_%ds_kg_s" % w]) for r in rows]
        ax.fill_between(t, [-m for m in mdl], mdl, color="tab:blue", alpha=0.15, lw=0, label="±MDL")
        ax.plot(t, imb, color="tab:blue", lw=1.0, label="imbalance")
        for onset, _, rate in leaks:
            if rate:
                ax.hlines(rate, onset, t[-1], colors="black", lw=0.8, ls=":", label="true leak rate")
        mark(ax, alarm_times, leaks)
        ax.set_ylabel("%g s window\nkg/s" % w)
        ax.legend(loc="upper left", fontsize=8)
    time_axis(axes[-1, 0])
    axes[0, 0].set_title("Imbalance (in - out - dM/dt) per window, with the minimum detectable leak band")
    figs.append(("Imbalance and minimum detectable leak", png(fig),
                 "Black dashes: true leak onset; red lines: leak or rupture alarms raised."))

    # 2. The leading detector's statistic against its threshold.
    stat = [num(r.get("leak_statistic")) for r in rows]
    thr = [num(r.get("leak_threshold")) for r in rows]
    if any(math.isfinite(v) for v in stat):
        fig, ax = plt.subplots(figsize=(10, 3))
        ax.plot(t, stat, color="tab:purple", lw=1.0, label="leading detector statistic")
        ax.plot(t, thr, color="tab:red", lw=1.0, ls="--", label="its threshold")
        mark(ax, alarm_times, leaks)
        ax.set_ylabel("statistic (dimensionless)")
        ax.legend(loc="upper left", fontsize=8)
        time_axis(ax)
        ax.set_title("Decision stage: the leading CUSUM statistic (standardised block residuals) and its threshold")
        figs.append(("Detector", png(fig), "Empty while the decision stage learns (no leading detector)."))

    # 3. Line pack and tank inventory.
    fig, axes = plt.subplots(2, 1, figsize=(10, 4.6), sharex=True)
    axes[0].plot(t, [num(r["linepack_kg"]) / 1000 for r in rows], color="tab:green", lw=1.0, label="line pack")
    axes[1].plot(t, [num(r["tank_kg"]) / 1000 for r in rows], color="tab:orange", lw=1.0, label="tanks")
    series = (truth or {}).get("series") or []
    if series:
        ts = [parse_time(s["time"]) for s in series]
        axes[0].plot(ts, [s["linepack_kg"] / 1000 for s in series], color="black", lw=0.8, ls=":", label="truth")
        axes[1].plot(ts, [s["tank_kg"] / 1000 for s in series], color="black", lw=0.8, ls=":", label="truth")
    axes[0].set_ylabel("line pack, t")
    axes[1].set_ylabel("tanks, t")
    for ax in axes:
        mark(ax, alarm_times, leaks)
        ax.legend(loc="upper left", fontsize=8)
        ax.grid(alpha=0.3)
    time_axis(axes[1])
    axes[0].set_title("Inventory")
    figs.append(("Line pack and tank inventory", png(fig), ""))

    # 4. Along the line.
    if geo:
        fig, ax = plt.subplots(figsize=(10, 3.8))
        prof = geo["profile"]
        length_km = geo["length_m"] / 1000
        xs = [p[0] / 1000 for p in prof]
        zs = [p[1] for p in prof]
        if xs[0] > 0:
            xs, zs = [0.0] + xs, [zs[0]] + zs
        if xs[-1] < length_km:
            xs, zs = xs + [length_km], zs + [zs[-1]]
        ax.plot(xs, zs, color="dimgray", lw=1.5, label="elevation profile")
        zmin, zmax = min(zs), max(zs)
        span = max(zmax - zmin, 1.0)

        def z_at(x_km):
            for i in range(1, len(xs)):
                if x_km <= xs[i]:
                    w = (x_km - xs[i - 1]) / (xs[i] - xs[i - 1]) if xs[i] > xs[i - 1] else 0
                    return zs[i - 1] + w * (zs[i] - zs[i - 1])
            return zs[-1]

        for key, marker, color, label in (("pressure_points", "v", "tab:blue", "pressure transmitter"),
                                          ("temperature_points", "^", "tab:orange", "temperature transmitter")):
            pts = geo.get(key, [])
            ax.scatter([p["chainage_m"] / 1000 for p in pts], [z_at(p["chainage_m"] / 1000) for p in pts],
                       marker=marker, color=color, s=40, zorder=3, label=label)
        meters = geo.get("meters", [])
        ax.scatter([m["chainage_m"] / 1000 for m in meters], [z_at(m["chainage_m"] / 1000) for m in meters],
                   marker="s", color="tab:green", s=40, zorder=3, label="flow meter")
        for lm in geo.get("landmarks", []):
            x = lm["chainage_m"] / 1000
            ax.axvline(x, color="gray", lw=0.5, ls=":")
            ax.text(x, zmax + 0.08 * span, lm["name"], rotation=90, fontsize=7, va="bottom", ha="center")
        # The estimate: the last row with a location (its band), else the first leak alarm's.
        est = None
        for r in reversed(rows):
            x = num(r.get("location_m"))
            if math.isfinite(x):
                est = (x, num(r.get("location_low_m")), num(r.get("location_high_m")), r["time"])
                break
        if est is None:
            for e in raised:
                if e.get("type") == "leak" and isinstance(e.get("location_m"), (int, float)):
                    est = (e["location_m"], math.nan, math.nan, e["time"])
                    break
        if est is not None:
            x, lo, hi, when = est
            if math.isfinite(lo) and math.isfinite(hi):
                ax.axvspan(lo / 1000, hi / 1000, color="tab:red", alpha=0.15, label="estimate band")
            ax.axvline(x / 1000, color="tab:red", lw=1.5, label="estimate (%s)" % when[11:19])
        for _, x, _ in leaks:
            if x is not None:
                ax.axvline(x / 1000, color="black", lw=1.5, ls="--", label="true leak")
        ax.set_xlim(0, length_km)
        ax.set_ylim(zmin - 0.15 * span, zmax + 0.9 * span)
        ax.set_xlabel("chainage, km")
        ax.set_ylabel("elevation, m")
        ax.grid(alpha=0.3)
        ax.legend(loc="upper right", fontsize=7, ncol=2)
        ax.set_title("Along the line")
        figs.append(("Along the line", png(fig), ""))

    # Events table.
    ev_rows = []
    for e in seg_events:
        rate = e.get("leak_rate_kg_s")
        loc = e.get("location_m")
        ev_rows.append("<tr><td>%s</td><td>%s</td><td>%s &rarr; %s</td><td>%s</td><td>%s</td><td>%s</td></tr>" % (
            html.escape(e.get("time", "")), html.escape(e.get("type", "")), html.escape(e.get("from", "")),
            html.escape(e.get("state", "")), html.escape(e.get("cause", "")),
            "%.2f kg/s" % rate if isinstance(rate, (int, float)) else "",
            "km %.1f" % (loc / 1000) if isinstance(loc, (int, float)) else ""))
    parts = ["<h2>Segment %s%s</h2>" % (html.escape(seg_id),
                                        (" &mdash; " + html.escape(geo["name"])) if geo else "")]
    parts.append("<p>%d rows from %s to %s (%d with a balance, drawn); %d alarm event(s).</p>" % (
        len(all_rows), all_rows[0]["time"], all_rows[-1]["time"], len(rows), len(seg_events)))
    for onset, x, rate in leaks:
        parts.append("<p>Truth: a leak of %s kg/s at km %s from %s.</p>" % (
            "%.2f" % rate if rate else "?", "%.1f" % (x / 1000) if x is not None else "?", onset.isoformat()))
    if ev_rows:
        parts.append("<table><tr><th>time</th><th>alarm</th><th>state</th><th>cause</th><th>leak rate</th>"
                     "<th>location</th></tr>%s</table>" % "".join(ev_rows))
    for title, uri, note in figs:
        parts.append("<h3>%s</h3><img alt=\"%s\" src=\"%s\">%s" % (
            html.escape(title), html.escape(title), uri, ("<p class=note>%s</p>" % html.escape(note)) if note else ""))
    return "\n".join(parts)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--geometry", required=True)
    ap.add_argument("--balance", required=True)
    ap.add_argument("--events")
    ap.add_argument("--truth")
    ap.add_argument("--segment")
    ap.add_argument("--title", default="Holdfast report")
    ap.add_argument("--out", required=True)
    a = ap.parse_args()
    geometry = json.load(open(a.geometry))
    geos = {s["id"]: s for s in geometry["segments"]}
    rows, windows = read_rows(a.balance)
    if not rows:
        print("%s: no balance rows" % a.balance, file=sys.stderr)
        return 2
    events = read_events(a.events)
    truth = json.load(open(a.truth)) if a.truth else None
    leaks = truth_leaks(truth)
    sections = []
    for seg_id, seg_rows in rows.items():
        if a.segment and seg_id != a.segment:
            continue
        sections.append(segment_section(seg_id, seg_rows, windows, geos.get(seg_id), events, truth, leaks))
    page = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>%(title)s</title>
<style>
body { font-family: sans-serif; max-width: 1000px; margin: 1em auto; color: #222; }
img { max-width: 100%%; }
table { border-collapse: collapse; font-size: 90%%; }
td, th { border: 1px solid #ccc; padding: 2px 6px; text-align: left; }
.note { color: #555; font-size: 90%%; }
</style></head><body>
<h1>%(title)s</h1>
<p>From <code>%(balance)s</code>%(events)s%(truth)s. All values SI (kg, kg/s, m); times UTC.</p>
%(sections)s
</body></html>
""" % {"title": html.escape(a.title), "balance": html.escape(a.balance),
       "events": (", events <code>%s</code>" % html.escape(a.events)) if a.events else "",
       "truth": (", truth <code>%s</code>" % html.escape(a.truth)) if a.truth else "",
       "sections": "\n".join(sections)}
    with open(a.out, "w") as f:
        f.write(page)
    return 0


if __name__ == "__main__":
    sys.exit(main())
