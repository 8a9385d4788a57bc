#!/usr/bin/python3
"""HTML report of a `holdfast evaluate` run: DIR/report.html from DIR/evaluation.json
and DIR/summary.md, with plots made by matplotlib (Debian python3-matplotlib),
embedded as PNG so the file stands alone.

    tools/evaluate-report.py OUT_DIR
"""
import base64
import html
import io
import json
import math
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.ticker import FuncFormatter, NullFormatter, NullLocator  # noqa: E402
from scipy.stats import beta, chi2  # noqa: E402

CONFIDENCE = 0.95  # two-sided, for every interval on this page


def clopper_pearson(k, n, conf=CONFIDENCE):
    """Exact binomial interval for k successes in n trials: Clopper & Pearson
    (1934), Biometrika 26(4), 404-413, from the beta quantiles."""
    if n <= 0:
        return math.nan, math.nan
    a = 1.0 - conf
    lo = 0.0 if k == 0 else float(beta.ppf(a / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1 - a / 2, k + 1, n - k))
    return lo, hi


def poisson_interval(k, conf=CONFIDENCE):
    """Exact interval on a Poisson mean from k events (the chi-square form of
    Garwood 1936, Biometrika 28, 437-442)."""
    a = 1.0 - conf
    lo = 0.0 if k == 0 else float(chi2.ppf(a / 2, 2 * k)) / 2
    hi = float(chi2.ppf(1 - a / 2, 2 * k + 2)) / 2
    return lo, hi


def plain_log_axis(axis, ticks):
    """A log axis labelled with the given values in plain numbers ("0.25",
    "1", "5"), not "2x10^0"."""
    axis.set_major_locator(matplotlib.ticker.FixedLocator(ticks))
    axis.set_major_formatter(FuncFormatter(lambda v, _: "%g" % v))
    axis.set_minor_locator(NullLocator())
    axis.set_minor_formatter(NullFormatter())


def budget_per_30_days(ev):
    return 30.0 / (num(ev["tuning"]["arl0_blocks"]) * num(ev["tuning"]["block_s"]) / 86400.0)


def budget_warning(ev):
    """None, or why the leak-free run is too short to support the budget: the
    upper 95 % bound on the false-alarm rate, from the count observed, is
    above the declared budget even if the count is zero."""
    budget = budget_per_30_days(ev)
    days = num(ev["leak_free_days"])
    rows = [r for r in ev["false_alarms"] if r["method"] == "holdfast"] or ev["false_alarms"][:1]
    if not rows or not (days > 0) or not math.isfinite(budget):
        return None
    k = int(rows[0]["false_alarms"])
    hi = poisson_interval(k)[1] * 30.0 / days
    if hi <= budget:
        return None
    need = poisson_interval(0)[1] * 30.0 / budget
    return ("The leak-free run (%g days, %d false alarm%s) is too short to support the declared budget of %.2f "
            "false alarms per 30 days: the upper %d %% bound on the rate is %.2f per 30 days. Showing the budget "
            "needs at least %.0f leak-free days without a false alarm." %
            (days, k, "" if k == 1 else "s", budget, round(100 * CONFIDENCE), hi, need))

CAUTION = (
    "These figures come from simulation of a model of the line. Holdfast is a supplementary "
    "monitoring aid: it does not replace the leak detection required by regulation, the "
    "operator's procedures, local codes or licensed engineering judgement. Prove performance "
    "on the real line (for example by controlled withdrawals) before relying on it."
)


def num(v):
    if v is None:
        return math.nan
    if v == "inf":
        return math.inf
    return float(v)


def png(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def plot_detection_time(ev):
    fig, ax = plt.subplots(figsize=(7.5, 4.6))
    methods = {}
    for s in ev["sizes"]:
        pct = 100.0 * num(s["leak_fraction"])
        for r in s["rows"]:
            methods.setdefault(r["method"], []).append((pct, num(r["ttd_median_s"]), num(r["ttd_p90_s"])))
    styles = {"holdfast": dict(marker="o", lw=2.2), "bound (Lorden)": dict(marker="", ls="--", lw=1.5)}
    horizon = max((num(r["ttd_p90_s"]) for s in ev["sizes"] for r in s["rows"]
                   if math.isfinite(num(r["ttd_p90_s"]))), default=3600.0)
    for name, pts in methods.items():
        pts.sort()
        x = [p[0] for p in pts]
        y = [p[1] / 60.0 if math.isfinite(p[1]) else math.nan for p in pts]
        st = styles.get(name, dict(marker="s", lw=1.2))
        line, = ax.plot(x, y, label=name + (" (median)" if not name.startswith("bound") else ""), **st)
        if name == "holdfast":
            y90 = [p[2] / 60.0 if math.isfinite(p[2]) else math.nan for p in pts]
            ax.plot(x, y90, color=line.get_color(), ls=":", marker="o", mfc="none", label="holdfast (P90)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    plain_log_axis(ax.xaxis, sorted({100.0 * num(s["leak_fraction"]) for s in ev["sizes"]}))
    plain_log_axis(ax.yaxis, [1, 2, 5, 10, 20, 60, 120, 360, 1440])
    ax.set_xlabel("leak size, % of nominal flow")
    ax.set_ylabel("time to detect, min")
    ax.set_title("Detection time against leak size (runs not detected leave gaps)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_ylim(bottom=0.5, top=max(60.0, horizon / 60.0 * 1.5))
    return png(fig)


def plot_probability(ev):
    fig, ax = plt.subplots(figsize=(7.5, 3.8))
    methods = {}
    for s in ev["sizes"]:
        pct = 100.0 * num(s["leak_fraction"])
        for r in s["rows"]:
            if r["method"].startswith("bound"):
                continue
            lo, hi = clopper_pearson(int(r["detected"]), int(r["runs"]))
            methods.setdefault(r["method"], []).append((pct, num(r["p_detect"]), lo, hi, int(r["runs"])))
    for k, (name, pts) in enumerate(methods.items()):
        pts.sort()
        # Methods side by side at each size so that the intervals do not hide one another.
        shift = 1.0 + 0.04 * (k - (len(methods) - 1) / 2)
        x = [p[0] * shift for p in pts]
        y = [p[1] for p in pts]
        err = [[max(0.0, p[1] - p[2]) for p in pts], [max(0.0, p[3] - p[1]) for p in pts]]
        ax.errorbar(x, y, yerr=err, marker="o" if name == "holdfast" else "s", capsize=3, label=name)
    if methods:
        n_runs = sorted({p[4] for pts in methods.values() for p in pts})
        ax.text(0.01, 0.02, "bars: %d %% Clopper-Pearson intervals (Clopper & Pearson 1934), %s runs per size" %
                (round(100 * CONFIDENCE), "/".join(str(n) for n in n_runs)), transform=ax.transAxes, fontsize=7)
    ax.set_xscale("log")
    plain_log_axis(ax.xaxis, sorted({100.0 * num(s["leak_fraction"]) for s in ev["sizes"]}))
    ax.set_ylim(-0.05, 1.05)
    ax.set_xlabel("leak size, % of nominal flow")
    ax.set_ylabel("detection probability")
    ax.set_title("Detection probability within the observation")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    return png(fig)


def plot_false_alarms(ev):
    fig, ax = plt.subplots(figsize=(7.5, 3.2))
    rows = ev["false_alarms"]
    names = [r["method"] for r in rows]
    vals = [num(r["per_30_days"]) for r in rows]
    days = num(ev["leak_free_days"])
    xs = list(range(len(rows)))
    ax.bar(xs, [v if math.isfinite(v) else 0.0 for v in vals], color=["#2c6e8f"] + ["#9a9a9a"] * (len(rows) - 1))
    # Exact Poisson intervals on the rate; a count of zero still shows its upper bound.
    for x, r in zip(xs, rows):
        k = int(r["false_alarms"])
        lo, hi = (v * 30.0 / days for v in poisson_interval(k))
        rate = k * 30.0 / days
        ax.errorbar([x], [rate], yerr=[[rate - lo], [hi - rate]], color="k", capsize=4, marker="o", ms=4)
        ax.annotate("%d" % k, (x, rate), textcoords="offset points", xytext=(8, 2), fontsize=8)
    ax.set_xticks(xs)
    ax.set_xticklabels(names)
    budget = budget_per_30_days(ev)
    ax.axhline(budget, color="#b03a2e", ls="--", label="declared budget (%.2f per 30 days)" % budget)
    ax.plot([], [], color="k", marker="o", label="count (number) and its %d %% Poisson interval" % round(100 * CONFIDENCE))
    if budget_warning(ev):
        ax.text(0.01, 0.97, "too few leak-free days to support the budget (see above)", transform=ax.transAxes,
                fontsize=8, color="#b03a2e", va="top")
    ax.set_ylabel("false alarms per 30 days")
    ax.set_title("False alarms over %g leak-free days (baseline thresholds fit to match)" % num(ev["leak_free_days"]))
    ax.legend(fontsize=8)
    ax.grid(True, axis="y", alpha=0.3)
    return png(fig)


def plot_location(ev):
    fig, ax = plt.subplots(figsize=(7.5, 4.0))
    xs, ys, cs = [], [], []
    for r in ev["runs"]:
        if not r["detected"]:
            continue
        loc = num(r["location_at_end_m"])
        truth = num(r["node_chainage_m"])
        if not (math.isfinite(loc) and math.isfinite(truth)):
            continue
        xs.append(truth / 1000.0)
        ys.append((loc - truth) / 1000.0)
        cs.append(100.0 * num(r["leak_fraction"]))
    if xs:
        sc = ax.scatter(xs, ys, c=cs, cmap="viridis", norm=matplotlib.colors.LogNorm(), s=28)
        cb = fig.colorbar(sc, ax=ax, label="leak, % of nominal flow")
        cb.set_ticks(sorted(set(cs)))
        cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: "%g" % v))
        cb.ax.yaxis.set_minor_formatter(NullFormatter())
    ax.axhline(0.0, color="k", lw=0.8)
    length_km = num(ev.get("length_m")) / 1000.0 if ev.get("length_m") is not None else math.nan
    ax.set_xlim(0.0, length_km if math.isfinite(length_km) else max(xs + [1.0]) * 1.05)
    ax.set_xlabel("true leak chainage, km (from the inlet)")
    ax.set_ylabel("estimated - true, km")
    ax.set_title("Location error at the end of each detected run (pressure-gradient method)")
    ax.grid(True, alpha=0.3)
    return png(fig)


def md_table_to_html(md):
    """The summary's Markdown tables and paragraphs as simple HTML."""
    out, table = [], []

    def flush():
        if not table:
            return
        rows = [r.strip().strip("|").split("|") for r in table]
        out.append("<table>")
        out.append("<tr>" + "".join("<th>%s</th>" % html.escape(c.strip()) for c in rows[0]) + "</tr>")
        for r in rows[2:]:
            out.append("<tr>" + "".join("<td>%s</td>" % html.escape(c.strip()) for c in r) + "</tr>")
        out.append("</table>")
        table.clear()

    for line in md.splitlines():
        if line.startswith("|"):
            table.append(line)
            continue
        flush()
        if line.startswith("# "):
            continue  # the page has its own title
        if line.startswith("## "):
            out.append("<h2>%s</h2>" % html.escape(line[3:]))
        elif line.startswith("> "):
            continue  # the caution is shown once, at the top
        elif line.strip():
            out.append("<p>%s</p>" % html.escape(line).replace("`", ""))
    flush()
    return "\n".join(out)


def main():
    if len(sys.argv) != 2:
        print(__doc__, file=sys.stderr)
        return 2
    d = sys.argv[1].rstrip("/")
    with open(d + "/evaluation.json") as f:
        ev = json.load(f)
    with open(d + "/summary.md") as f:
        md = f.read()
    figs = [
        ("Detection time against leak size", plot_detection_time(ev)),
        ("Detection probability", plot_probability(ev)),
        ("False alarms", plot_false_alarms(ev)),
        ("Location error", plot_location(ev)),
    ]
    title = "Holdfast detection performance: %s, segment %s" % (ev["site"], ev["segment"])
    parts = [
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">",
        "<title>%s</title>" % html.escape(title),
        "<style>body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222}"
        "table{border-collapse:collapse;font-size:13px;margin:1em 0}td,th{border:1px solid #bbb;padding:3px 6px;"
        "text-align:right}th{background:#eef2f5}.caution{border:2px solid #b03a2e;background:#fdf2f0;padding:0.8em}"
        "img{max-width:100%}</style></head><body>",
        "<h1>%s</h1>" % html.escape(title),
        "<p class=\"caution\"><strong>Caution.</strong> %s</p>" % html.escape(CAUTION),
    ]
    warning = budget_warning(ev)
    if warning:
        parts.append("<p class=\"caution\"><strong>Batch too small.</strong> %s</p>" % html.escape(warning))
    parts.append(md_table_to_html(md))
    for name, data in figs:
        parts.append("<h2>%s</h2><img alt=\"%s\" src=\"data:image/png;base64,%s\">" % (
            html.escape(name), html.escape(name), data))
    parts.append("<p class=\"caution\"><strong>Caution.</strong> %s</p></body></html>" % html.escape(CAUTION))
    with open(d + "/report.html", "w") as f:
        f.write("\n".join(parts))
    return 0


if __name__ == "__main__":
    sys.exit(main())
