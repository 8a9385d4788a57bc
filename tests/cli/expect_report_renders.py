#!/usr/bin/env python3
"""`holdfast report` writes a page that renders in headless Chromium with
every image loaded.

Runs balance on the demo readings (every 30th tick row), the report
with the demo truth, then loads a copy of the page in headless Chromium with
a one-line script that counts the images decoded (complete, naturalWidth > 0)
and reads that count back from --dump-dom. With EVALDIR (evaluation.json and
summary.md of `holdfast evaluate`; tests/cli/evaluate-fixture holds the quick
demo batch's), tools/evaluate-report.py renders its page, checked the same way.

Usage: expect_report_renders.py HOLDFAST SITE READINGS TRUTH WORKDIR [EVALDIR]
"""
import os
import re
import shutil
import subprocess
import sys

holdfast, site, data, truth, work = sys.argv[1:6]
evaldir = sys.argv[6] if len(sys.argv) > 6 else None
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

# One Chromium start for every page (it takes most of the test's time): a
# wrapper holds each page in an iframe and, once all have loaded, writes each
# page's count of decoded images (complete, naturalWidth > 0) into its DOM.
PROBE = """<!DOCTYPE html><html><body>%s<script>
window.addEventListener('load', function () {
  var out = [];
  var frames = document.getElementsByTagName('iframe');
  for (var f = 0; f < frames.length; f++) {
    var d = frames[f].contentDocument, ok = 0, n = -1;
    if (d) { n = d.images.length; for (var i = 0; i < n; i++) { var im = d.images[i];
      if (im.complete && im.naturalWidth > 0) ok++; } }
    out.push(ok + '/' + n);
  }
  document.body.setAttribute('data-images-loaded', out.join(';'));
});</script></body></html>"""

pages = [(page, 4)]
if evaldir:
    ev_work = os.path.join(work, "evaluate")
    os.makedirs(ev_work, exist_ok=True)
    for name in ("evaluation.json", "summary.md"):
        shutil.copy(os.path.join(evaldir, name), ev_work)
    script = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "tools", "evaluate-report.py")
    r = subprocess.run(["/usr/bin/python3", script, ev_work], capture_output=True, text=True, timeout=120)
    if r.returncode != 0:
        failures.append("evaluate-report.py: exit %d: %s" % (r.returncode, r.stderr[-1500:]))
    else:
        pages.append((os.path.join(ev_work, "report.html"), 4))

wrapper = os.path.join(work, "probe.html")
with open(wrapper, "w", encoding="utf-8") as f:
    f.write(PROBE % "".join('<iframe src="file://%s" width="1000" height="800"></iframe>' % os.path.abspath(p)
                            for p, _ in pages))
try:
    d = subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--allow-file-access-from-files",
                        "--dump-dom", "file://" + os.path.abspath(wrapper)], capture_output=True, text=True,
                       timeout=90)
    m = re.search(r'data-images-loaded="([^"]*)"', d.stdout)
    if not m:
        failures.append("the pages did not render (no load event); chromium exit %d: %s" %
                        (d.returncode, d.stderr[-800:]))
    else:
        for (path, least), got in zip(pages, m.group(1).split(";")):
            loaded, total = (int(v) for v in got.split("/"))
            expected = len(re.findall(r"<img\b", open(path, encoding="utf-8").read()))
            print("%s: %d of %d images loaded" % (path, loaded, total))
            if total != expected or loaded != total or total < least:
                failures.append("%s: %d of %d images loaded (%d <img> in the file, at least %d expected)" %
                                (path, loaded, total, expected, least))
except subprocess.TimeoutExpired:
    failures.append("chromium did not finish within 90 s")

for f in failures:
    print("FAIL: " + f)
sys.exit(1 if failures else 0)
