"""holdfastd --input-csv, `holdfast replay` and `holdfast balance --events` give the same alarm events on the
same file, also when the file is out of order within the reorder window and holds a row stamped in year 9999
and one stamped 5 minutes ahead (issue 11, items 2 and 6). The year-9999 row costs nothing: `balance` writes
as many rows as on the clean file.
Usage: same_events.py HOLDFASTD HOLDFAST SITE READINGS WORKDIR"""
import json, os, random, shutil, subprocess, sys

holdfastd, holdfast, site, readings, work = sys.argv[1:6]
shutil.rmtree(work, ignore_errors=True)
os.makedirs(work)
failures = []


def check(cond, msg):
    print(("ok: " if cond else "FAIL: ") + msg, flush=True)
    if not cond:
        failures.append(msg)


def run(args, out=None, timeout=120):
    r = subprocess.run(args, capture_output=True, text=True, timeout=timeout)
    if r.returncode != 0:
        check(False, "%s: exit code %d: %s" % (" ".join(args[:2]), r.returncode, r.stderr[-400:]))
    return r


def events_of_all_three(data, tag):
    d = os.path.join(work, tag)
    os.makedirs(d)
    cfg = os.path.join(d, "daemon.json")
    json.dump({"format": "holdfast-daemon/1", "site_file": site, "topic_prefix": "holdfast/v1/quillfen",
               "journal_dir": d + "/j", "state_dir": d + "/s"}, open(cfg, "w"))
    daemon = run([holdfastd, "--config", cfg, "--input-csv", data]).stdout
    replay = run([holdfast, "replay", "--config", site, "--data", data]).stdout
    bal_out = os.path.join(d, "balance.csv")
    bal_ev = os.path.join(d, "balance-events.jsonl")
    run([holdfast, "balance", "--config", site, "--data", data, "--out", bal_out, "--events", bal_ev])
    return daemon, replay, open(bal_ev).read(), sum(1 for _ in open(bal_out))


lines = open(readings).read().splitlines()
header, rows = lines[0], lines[1:]
# Out of order within 1.5 s (inside the 2 s reorder window): each row moves by a random delay.
rng = random.Random(11)
keyed = []
for r in rows:
    t = r.split(",", 1)[0]
    sec = int(t[11:13]) * 3600 + int(t[14:16]) * 60 + float(t[17:23])
    keyed.append((sec + rng.uniform(0.0, 1.5), r))
shuffled = [r for _, r in sorted(keyed, key=lambda k: k[0])]
moved = sum(1 for a, b in zip(rows, shuffled) if a != b)
i = len(shuffled) // 3
bad = shuffled[:i] + ["9999-12-31T23:59:59.000Z,CF-FT-101,907.0,good"] + shuffled[i:2 * i] + \
    ["2026-03-14T08:12:00.000Z,TJ-FT-201,500.0,good"] + shuffled[2 * i:]
path = os.path.join(work, "disordered.csv")
open(path, "w").write("\n".join([header] + bad) + "\n")
print("%d of %d rows out of file order, a year-9999 row and a row 5 minutes ahead" % (moved, len(rows)))

clean = events_of_all_three(readings, "clean")
dis = events_of_all_three(path, "disordered")
check(clean[0] != "" and clean[0] == clean[1] == clean[2], "clean file: holdfastd, replay and balance agree")
check(dis[0] == dis[1] == dis[2], "disordered file: holdfastd, replay and balance agree")
check(dis[0] == clean[0], "disordered file: the same events as the clean file: " + dis[0][:200])
check(dis[3] == clean[3], "balance rows: %d, as on the clean file (%d): the year-9999 row is quarantined" %
      (dis[3], clean[3]))
# Without the reorder window the file tools read the file in order and disagree (the old behaviour).
plain = run([holdfast, "replay", "--config", site, "--data", path, "--reorder-window-s", "-1", "--max-lead-s", "0",
             "--until", "2026-03-14T10:00:00Z"], timeout=120).stdout
print("plain file-order replay: %s" % ("the same events" if plain == clean[0] else "different events"))
sys.exit(1 if failures else 0)
