#!/usr/bin/env python3
"""`holdfast report` writes a page that renders in headless Chromium with
every image loaded.

Runs balance on the demo readings (every 30th tick row), the report
with the demo truth, then loads a copy of the page in headless Chromium with
a one-line script that counts the images decoded (complete, naturalWidth > 0)
and reads that count back from --dump-dom. A page given as a further argument
(e.g. an evaluation report.html) is checked the same way.

Usage: expect_report_renders.py HOLDFAST SITE READINGS TRUTH WORKDIR [PAGE...]
"""
import os
import re
import shutil
import subprocess
import sys

holdfast, site, data, truth, work = sys.argv[1:6]
extra_pages = sys.argv[6:]
os.makedirs(work, exist_ok=True)
failures = []

chromium = shutil.which("chromium") or shutil.which("chromium-browser")
if not chromium:
    print("FAIL: chromium not installed (Debian package chromium; tools/lib/common.sh installs it)")
    sys.exit(1)

rows, events, page = (os.path.join(work, n) for n in ("rows.csv", "events.jsonl", "report.html"))
r = subprocess.run([holdfast, "balance", "--config", site, "--data", data, "--every", "30", "--out", rows,
                    "--events", events], capture_output=True, text=True, timeout=120)
if r.returncode != 0:
    print("FAIL: balance exit %d: %s" % (r.returncode, r.stderr))
    sys.exit(1)
r = subprocess.run([holdfast, "report", "--config", site, "--balance", rows, "--events", events, "--truth", truth,
                    "--out", page], capture_output=True, text=True, timeout=120)
if r.returncode != 0:
    print("FAIL: report exit %d: %s%s" % (r.returncode, r.stdout, r.stderr))
    sys.exit(1)

PROBE = ("<script>window.addEventListener('load', function () {"
         " var ok = 0; for (var i = 0; i < document.images.length; i++) {"
         " var im = document.images[i]; if (im.complete && im.naturalWidth > 0) ok++; }"
         " document.body.setAttribute('data-images-loaded', ok + '/' + document.images.length); });</script>")


def check(path, min_images):
    text = open(path, encoding="utf-8").read()
    expected = len(re.findall(r"<img\b", text))
    probe = os.path.join(work, "probe-" + os.path.basename(os.path.dirname(os.path.abspath(path))) + ".html")
    with open(probe, "w", encoding="utf-8") as f:
        f.write(text.replace("</body>", PROBE + "</body>"))
    try:
        d = subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--virtual-time-budget=5000",
                            "--dump-dom", "file://" + os.path.abspath(probe)],
                           capture_output=True, text=True, timeout=90)
    except subprocess.TimeoutExpired:
        failures.append("%s: chromium did not finish within 90 s" % path)
        return
    m = re.search(r'data-images-loaded="(\d+)/(\d+)"', d.stdout)
    if not m:
        failures.append("%s: the page did not render (no load event); chromium exit %d: %s" %
                        (path, d.returncode, d.stderr[-800:]))
        return
    loaded, total = int(m.group(1)), int(m.group(2))
    print("%s: %d of %d images loaded" % (path, loaded, total))
    if total != expected or loaded != total:
        failures.append("%s: %d of %d images loaded (%d <img> in the file)" % (path, loaded, total, expected))
    if total < min_images:
        failures.append("%s: %d images, expected at least %d" % (path, total, min_images))


check(page, 4)
for p in extra_pages:
    check(p, 1)
for f in failures:
    print("FAIL: " + f)
sys.exit(1 if failures else 0)
