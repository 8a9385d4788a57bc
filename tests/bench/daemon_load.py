"""Load bench for holdfastd (a bench, not a timed test).

One daemon monitors N copies of the demo segment (9 points each: the demo
segment's flows, pressures, temperatures and tank level), fed at 1 Hz per
point by a load generator over loopback through a private mosquitto. Every
tenth segment sees a sudden rupture-like step (inlet flow +15 %, outlet flow
-30 %, both end pressures down) part-way through, which raises its rupture alarm.

Reported:
  CPU share   holdfastd's user+system CPU time over the measured wall time
              (100 % = one core), from /proc/<pid>/stat
  RSS         resident memory, current and peak (VmRSS, VmHWM)
  latency     reading-to-alarm: from the moment the load generator hands over
              the first reading that lets the daemon compute the alarm's tick
              (data time >= tick + tick_lateness_s) to the moment a
              subscriber receives the event. This is the daemon's and the
              broker's share on top of the decision itself (whose delay is
              in data time).

Usage: daemon_load.py HOLDFASTD SITE READINGS WORKDIR [--segments 200] [--seconds 180]
                      [--pace 1] [--step-at 70]
--pace N feeds N data seconds per wall second (the smoke run in ctest uses a
few segments at a high pace: it checks that the bench works, not the figures).
"""
import argparse, copy, csv, json, os, re, signal, shutil, subprocess, sys, threading, time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "daemon"))
from harness import PASSWORDS, PREFIX, Broker, Daemon, spawn, wait_for  # noqa: E402

ap = argparse.ArgumentParser()
ap.add_argument("holdfastd")
ap.add_argument("site")
ap.add_argument("readings")
ap.add_argument("work")
ap.add_argument("--segments", type=int, default=200)
ap.add_argument("--seconds", type=int, default=180, help="data seconds to feed")
ap.add_argument("--pace", type=float, default=1.0, help="data seconds per wall second")
ap.add_argument("--step-at", type=int, default=70, help="data second of the first rupture step")
args = ap.parse_args()
shutil.rmtree(args.work, ignore_errors=True)
os.makedirs(args.work)

# ---- the site: N copies of the demo segment, points renamed per segment
base = json.load(open(args.site))
seg0 = base["segments"][0]
points0 = base["points"]
site = copy.deepcopy(base)
site["site"]["name"] = "load bench: %d copies of the demo segment" % args.segments
site["points"] = {}
site["segments"] = []
def sid(i):
    return "S%03d" % i
for i in range(args.segments):
    text = json.dumps(seg0)
    for p in list(points0) + [t["id"] for t in seg0.get("tanks", [])]:
        text = text.replace('"%s"' % p, '"%s-%s"' % (sid(i), p))
    seg = json.loads(text)
    seg["id"] = sid(i)
    seg["name"] = "copy %d" % i
    site["segments"].append(seg)
    for p, spec in points0.items():
        site["points"]["%s-%s" % (sid(i), p)] = spec
site_path = os.path.join(args.work, "site.json")
json.dump(site, open(site_path, "w"))

import calendar
def epoch(text):
    return calendar.timegm(time.strptime(text[:19], "%Y-%m-%dT%H:%M:%S")) + (
        float("0" + text[19:-1]) if len(text) > 20 else 0.0)

def iso(t):
    return time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(int(t))) + (".%03dZ" % int(round((t - int(t)) * 1000)))

# ---- the data: every point once per second (1 Hz), holding the demo readings' latest values
latest, seconds = {}, []
rows = csv.DictReader(open(args.readings))
first = None
pending = None
for row in rows:
    try:
        v = float(row["value"])
    except ValueError:
        continue
    t = epoch(row["time"])
    if first is None:
        first = int(t)
    while t >= first + len(seconds) + 1 and len(seconds) < args.seconds:
        base_s = first + len(seconds)
        seconds.append([(p, iso(base_s + 0.01 * j), latest[p]) for j, p in enumerate(sorted(latest))])
    if len(seconds) >= args.seconds:
        break
    latest[row["point"]] = v

def step(point, v):
    # A rupture as the meters see it: the pump runs out on its curve (inlet
    # flow up), the outlet meter reads less, both end pressures fall. The
    # rupture path wants the metered shortfall to grow, not only the
    # pressures to fall (RuptureOptions::metered_share).
    if point == "CF-FT-101":
        return v * 1.15
    if point == "MB-FT-302":
        return v * 0.7
    if point == "CF-PT-101":
        return v - 3.0
    if point == "MB-PT-301":
        return v - 1.2
    return v


# ---- broker, daemon, subscriber
broker = Broker(os.path.join(args.work, "broker"))
daemon = Daemon(args.holdfastd, os.path.join(args.work, "daemon"), broker, site_path,
                extra={"status_period_s": 10.0, "heartbeat_period_s": 2.0, "checkpoint_period_s": 60.0})
daemon.start()
def online():
    if daemon.proc.poll() is not None:
        sys.exit("holdfastd exited: " + daemon.log_text()[-2000:])
    return (broker.get_retained("watcher", PREFIX + "/daemon", timeout=2) or {}).get("state") == "online"
wait_for(online, 300, "the daemon online")
events_path = os.path.join(args.work, "events.txt")
sub = spawn(["mosquitto_sub"] + broker.client_args("watcher") + ["-q", "1", "-t", PREFIX + "/events/#",
                                                                  "-F", "%U %p"],
            stdout=open(events_path, "w"), stderr=subprocess.DEVNULL)
# A second subscriber sees the readings as the broker delivers them (to it and to the daemon).
readings_seen_path = os.path.join(args.work, "readings-seen.txt")
sub_r = spawn(["mosquitto_sub"] + broker.client_args("holdfastd") + ["-q", "1", "-t", PREFIX + "/readings", "-F", "%U %p",
                                                                    "-i", "bench-readings-tap"],
              stdout=open(readings_seen_path, "w"), stderr=subprocess.DEVNULL)
time.sleep(1.0)
pub = spawn(["mosquitto_pub"] + broker.client_args("feeder") + ["-q", "1", "-t", PREFIX + "/readings", "-l"],
            stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, text=True)

def cpu_ticks(pid):
    f = open("/proc/%d/stat" % pid).read().rsplit(")", 1)[1].split()
    return int(f[11]) + int(f[12])

def mem(pid):
    d = {}
    for line in open("/proc/%d/status" % pid):
        k, _, v = line.partition(":")
        d[k] = v.strip()
    return int(d["VmRSS"].split()[0]) / 1024.0, int(d["VmHWM"].split()[0]) / 1024.0

hz = os.sysconf("SC_CLK_TCK")
handed = {}  # data second index -> wall time the first batch of that second was handed over
start_wall = time.time()
measure_from = None
cpu0 = None
rss_max = 0.0
for k, sec in enumerate(seconds):
    due = start_wall + k / args.pace
    now = time.time()
    if due > now:
        time.sleep(due - now)
    if k == 10:  # measure after the start-up (site compile, first ticks)
        measure_from, cpu0 = time.time(), cpu_ticks(daemon.proc.pid)
    lines = []
    for i in range(args.segments):
        stepped = i % 10 == 0 and k >= args.step_at + 3 * (i // 10)  # staggered: one alarm tick each
        lines.append(json.dumps([{"point": "%s-%s" % (sid(i), p), "time": t, "value": step(p, v) if stepped else v}
                                 for p, t, v in sec], separators=(",", ":")))
    handed[k] = time.time()
    pub.stdin.write("\n".join(lines) + "\n")
    pub.stdin.flush()
    if k % 5 == 0:
        rss_max = max(rss_max, mem(daemon.proc.pid)[0])
measure_to = time.time()
cpu1 = cpu_ticks(daemon.proc.pid)
rss, hwm = mem(daemon.proc.pid)
pub.stdin.close()
pub.wait(timeout=120)
expected = len([i for i in range(args.segments) if i % 10 == 0])
def rupture_events():
    res = []
    for line in open(events_path):
        parts = line.split(" ", 1)
        if len(parts) == 2:
            try:
                e = json.loads(parts[1])
            except ValueError:
                continue
            if e["type"] == "rupture" and e["cause"] == "condition_raised":
                res.append((float(parts[0]), e))
    return res
try:
    wait_for(lambda: len(rupture_events()) >= expected, 120, "%d rupture alarms" % expected, 0.5)
except AssertionError as e:
    print("WARNING: %s (got %d)" % (e, len(rupture_events())))
status = broker.get_retained("watcher", PREFIX + "/daemon") or {}
sub.terminate()
sub_r.terminate()
daemon.stop()

# Latency: the tick T of the event is computed when a reading with time >= T + lateness arrives,
# i.e. with the first batch of data second index ceil(T + lateness - t0).
lateness = 2.0
# When the broker delivered the first reading with a time >= t (seen by the tap subscriber).
delivered = []  # (wall, newest reading time in the message), in arrival order
for line in open(readings_seen_path):
    parts = line.split(" ", 1)
    try:
        items = json.loads(parts[1])
        delivered.append((float(parts[0]), max(epoch(x["time"]) for x in items)))
    except (ValueError, IndexError, KeyError):
        continue
def first_delivery(t):
    for wall, newest in delivered:
        if newest >= t:
            return wall
    return None
lat, lat_broker = [], []
for recv, e in rupture_events():
    T = epoch(e["time"])
    k = 0
    while k < len(seconds) and epoch(seconds[k][-1][1]) < T + lateness:
        k += 1
    if k in handed:
        lat.append((recv - handed[k]) * 1000.0)
    d = first_delivery(T + lateness)
    if d is not None:
        lat_broker.append((recv - d) * 1000.0)
lat.sort()
lat_broker.sort()
def pct(p, v=None):
    v = lat if v is None else v
    return v[min(len(v) - 1, int(round(p / 100.0 * (len(v) - 1))))] if v else float("nan")
wall = measure_to - measure_from
cpu = (cpu1 - cpu0) / hz / wall * 100.0
readings_per_s = args.segments * sum(len(s) for s in seconds) / len(seconds) * args.pace
print("holdfastd load bench: %d segments x %d points, %.0f readings/s (%.0f data s per wall s), %.0f s measured"
      % (args.segments, len(points0), readings_per_s, args.pace, wall))
print("  CPU share        %.1f %% of one core" % cpu)
print("  resident memory  %.1f MB now, %.1f MB peak (target <= 32 MB)" % (rss, hwm))
print("  rupture alarms   %d of %d expected" % (len(lat), expected))
print("  one tick of all segments (the decision itself)  mean %.2f ms  max %.2f ms" % (
    status.get("tick_ms_mean", float("nan")), status.get("tick_ms_max", float("nan"))))
print("  reading-to-alarm latency, from the generator's hand-over:   p50 %.1f ms  p99 %.1f ms  max %.1f ms"
      % (pct(50), pct(99), lat[-1] if lat else float("nan")))
print("  reading-to-alarm latency, from the broker's delivery:      p50 %.1f ms  p99 %.1f ms  max %.1f ms"
      " (target p99 <= 20 ms)" % (pct(50, lat_broker), pct(99, lat_broker), lat_broker[-1] if lat_broker else float("nan")))
ok = len(lat) == expected
sys.exit(0 if ok else 1)
