#!/usr/bin/env python3
"""Output formats and exit status of `holdfast` (issue 13).

* `balance --format csv` is RFC 4180 CSV: Python's csv module (an independent
  RFC 4180 reader) finds as many fields in every row as in the header, and the
  flags of a tick are joined with '|';
* `balance --format jsonl`: every line is one JSON object;
* exit status 2 for every usage error (CLI11's own codes are 100 and up), 1
  for a runtime failure (`alarms` without a broker), 0 for --help, which
  documents the codes.

Usage: expect_formats.py HOLDFAST SITE READINGS WORKDIR
"""
import csv
import json
import os
import subprocess
import sys

holdfast, site, data, work = sys.argv[1:5]
os.makedirs(work, exist_ok=True)
failures = []


def run(args, timeout=60):
    return subprocess.run([holdfast] + args, capture_output=True, text=True, timeout=timeout)


# --- CSV ---------------------------------------------------------------------
out_csv = os.path.join(work, "balance.csv")
r = run(["balance", "--config", site, "--data", data, "--every", "30", "--out", out_csv])
if r.returncode != 0:
    failures.append("balance csv: exit %d: %s" % (r.returncode, r.stderr))
else:
    with open(out_csv, newline="") as f:
        rows = list(csv.reader(f, strict=True))
    header = rows[0]
    if len(header) != 38:
        failures.append("balance csv: %d columns in the header, expected 38" % len(header))
    bad = [(i + 1, len(row)) for i, row in enumerate(rows) if len(row) != len(header)]
    if bad:
        failures.append("balance csv: %d rows with a field count unlike the header's %d, first %s" %
                        (len(bad), len(header), bad[:3]))
    flags = [row[header.index("flags")] for row in rows[1:]]
    multi = [f for f in flags if "|" in f]
    if not multi:
        failures.append("balance csv: no tick with several flags joined by '|' (the demo starts unavailable)")
    if any("," in f for f in flags):
        failures.append("balance csv: a flags field holds a comma")
    print("csv: %d rows of %d fields; e.g. flags %s" % (len(rows) - 1, len(header), multi[:1]))

# --- JSON Lines ---------------------------------------------------------------
r = run(["balance", "--config", site, "--data", data, "--every", "600", "--format", "jsonl"])
try:
    objs = [json.loads(line) for line in r.stdout.splitlines()]
    if r.returncode != 0 or not objs or not all(isinstance(o, dict) for o in objs):
        failures.append("balance jsonl: exit %d, %d objects" % (r.returncode, len(objs)))
except ValueError as e:
    failures.append("balance jsonl: a line is not JSON: %s" % e)

# --- Exit status ----------------------------------------------------------------
cred = os.path.join(work, "cred")
with open(cred, "w") as f:
    f.write("user\npassword\n")
os.chmod(cred, 0o600)
CASES = [
    ("no subcommand", [], 2, ""),
    ("unknown subcommand", ["balanse"], 2, ""),
    ("missing required option", ["balance", "--data", data], 2, "--config is required"),
    ("unknown option", ["balance", "--config", site, "--data", data, "--evry", "3"], 2, ""),
    ("invalid option value", ["balance", "--config", site, "--data", data, "--every", "0"], 2, ""),
    ("bad choice", ["balance", "--config", site, "--data", data, "--format", "xml"], 2, ""),
    ("alarms without --alarm", ["alarms", "remove", "--segment", "QS-1", "--credentials", cred], 2,
     "--alarm is required"),
    ("alarms unknown alarm", ["alarms", "ack", "--segment", "QS-1", "--alarm", "lek", "--credentials", cred], 2,
     "unknown alarm 'lek'"),
    ("alarms shelve too long", ["alarms", "shelve", "--segment", "QS-1", "--alarm", "leak", "--for", "1e9",
                                "--credentials", cred], 2, "at most 2592000"),
    ("alarms shelve not positive", ["alarms", "shelve", "--segment", "QS-1", "--alarm", "leak", "--for", "-5",
                                    "--credentials", cred], 2, "above 0"),
    # Port 1 on the loopback: nothing listens, the connection is refused at once.
    ("alarms no broker", ["alarms", "watch", "--broker", "tcp://127.0.0.1:1", "--count", "1", "--timeout", "2"], 1,
     "cannot connect"),
    ("alarms ack no broker", ["alarms", "ack", "--segment", "QS-1", "--alarm", "leak", "--credentials", cred,
                              "--broker", "tcp://127.0.0.1:1"], 1, "cannot connect"),
    ("help", ["--help"], 0, "Exit status: 0 success; 1 runtime failure"),
    ("subcommand help", ["balance", "--help"], 0, "2 usage error"),
]
for name, args, code, text in CASES:
    r = run(args)
    both = r.stdout + r.stderr
    if r.returncode != code or text not in both:
        failures.append("%s: exit %d (expected %d)%s; output:\n%s" %
                        (name, r.returncode, code, " with %r" % text if text else "", both[-1500:]))
    else:
        print("ok   %-28s exit %d" % (name, code))

for f in failures:
    print("FAIL: " + f)
sys.exit(1 if failures else 0)
