"""`tools/demo live`: the real thing on one machine. A private mosquitto
(generated config, passwords and ACL, on a free loopback port), holdfastd,
the simulator's output published as readings at an accelerated pace, and the
alarm stream shown as it arrives by `holdfast alarms watch`.
Usage: demo-live.py HOLDFAST HOLDFASTD OUTDIR [--pace 240]"""
import argparse, json, os, shutil, subprocess, sys, time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, os.path.join(ROOT, "tests", "daemon"))
from harness import PASSWORDS, PREFIX, Broker, Daemon, batches, spawn, wait_for  # noqa: E402

ap = argparse.ArgumentParser()
ap.add_argument("holdfast")
ap.add_argument("holdfastd")
ap.add_argument("out")
ap.add_argument("--pace", type=float, default=240.0, help="data seconds per wall second")
a = ap.parse_args()
shutil.rmtree(a.out, ignore_errors=True)
os.makedirs(a.out)
site = os.path.join(ROOT, "config", "demo", "quillfen-site.json")
scenario = os.path.join(ROOT, "config", "demo", "quillfen-scenario.json")

print("== holdfast sim: 6 h of the Quillfen Spur line, a leak at km 31 from 4 h", flush=True)
subprocess.run([a.holdfast, "sim", "--config", site, "--scenario", scenario, "--out", os.path.join(a.out, "sim")],
               check=True, stdout=subprocess.DEVNULL)
truth = json.load(open(os.path.join(a.out, "sim", "truth.json")))
leak = truth["leaks"][0]
lines = os.path.join(a.out, "readings.jsonl")
n = batches(os.path.join(a.out, "sim", "readings.csv"), lines)

broker = Broker(os.path.join(a.out, "broker"))
print("== mosquitto on 127.0.0.1:%d (passwords, ACL: config/DAEMON.md)" % broker.port, flush=True)
daemon = Daemon(a.holdfastd, os.path.join(a.out, "holdfastd"), broker, site,
                extra={"status_period_s": 1.0, "heartbeat_period_s": 5.0})
daemon.start()
wait_for(lambda: (broker.get_retained("watcher", PREFIX + "/daemon", timeout=2) or {}).get("state") == "online",
         120, "holdfastd online")
print("== holdfastd online (log: %s)" % daemon.log, flush=True)
cred = os.path.join(a.out, "alice.cred")
with open(cred, "w") as f:
    f.write("alice\n%s\n" % PASSWORDS["alice"])
os.chmod(cred, 0o600)
cli = ["--broker", broker.uri(), "--prefix", PREFIX, "--credentials", cred]
print("== holdfast alarms watch --broker %s --prefix %s --credentials ..." % (broker.uri(), PREFIX), flush=True)
watch_log = os.path.join(a.out, "watch.txt")
watch = spawn([a.holdfast, "alarms", "watch"] + cli, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
time.sleep(1.0)
print("== publishing %d batches of readings (one per data second) at %.0fx (leak opens %s)" % (n, a.pace, leak["onset"][11:19]),
      flush=True)
pub = spawn(["mosquitto_pub"] + broker.client_args("feeder") + ["-q", "1", "-t", PREFIX + "/readings", "-l"],
            stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, text=True)
import select
start = time.time()
alarm_seen_at = None
with open(lines) as f, open(watch_log, "w") as wl:
    for k, line in enumerate(f):
        due = start + k / a.pace
        while True:
            r, _, _ = select.select([watch.stdout], [], [], max(0.0, due - time.time()))
            if r:
                ev = watch.stdout.readline()
                if ev:
                    print("   ALARM  " + ev.rstrip(), flush=True)
                    wl.write(ev)
                    if " leak " in ev and "condition_raised" in ev and alarm_seen_at is None:
                        alarm_seen_at = time.time()
            if time.time() >= due:
                break
        pub.stdin.write(line)
        if k % 1800 == 0:
            pub.stdin.flush()
            st = broker.get_retained("watcher", PREFIX + "/status/QS-1", timeout=1)
            if st and st.get("windows"):
                w = {x["window_s"]: x for x in st["windows"]}
                h = w.get(3600, {})
                print("   %s  %-9s 1 h imbalance %6.2f kg/s (mdl %5.2f)  decision %s" % (
                    (st["time"] or "")[11:19], st["status"], h.get("imbalance_kg_s") or 0.0, h.get("mdl_kg_s") or 0.0,
                    (st.get("decision") or {}).get("state", "-")), flush=True)
        if alarm_seen_at and time.time() - alarm_seen_at > 2.0:
            break
pub.stdin.close()
pub.wait(timeout=30)
# Acknowledge the leak alarm as an operator would, and show the answer.
r = subprocess.run([a.holdfast, "alarms", "ack", "--segment", "QS-1", "--alarm", "leak", "--reason", "demo"] + cli,
                   capture_output=True, text=True, timeout=60)
print("== holdfast alarms ack --segment QS-1 --alarm leak:  " + (r.stdout.strip() or r.stderr.strip()), flush=True)
deadline = time.time() + 5
while time.time() < deadline:
    rr, _, _ = select.select([watch.stdout], [], [], 0.5)
    if rr:
        ev = watch.stdout.readline()
        if ev:
            print("   ALARM  " + ev.rstrip(), flush=True)
daemon.stop()
watch.terminate()
print("== the leak opened at %s (%s at km %.1f); alarm events: %s" % (
    leak["onset"][11:19], leak["size"], leak["chainage_m"] / 1000.0, watch_log))
print("   journal, checkpoint and audit log: %s" % os.path.join(a.out, "holdfastd"))
sys.exit(0 if alarm_seen_at else 1)
