#!/usr/bin/python3
"""Renders gyre's HTML reports in headless Chromium and checks their layout (ctest label `browser`).

    tools/check_report_layout.py GYRE_BINARY WORK_DIR

Trains a tiny comparison (2 cells x 1 size x 2 seeds, 2 epochs) on an invented corpus written here,
then renders the run report of one run and the comparison report, each at three window widths
(1280, 1024 and 700 px; wide tables may scroll sideways inside their own box, nothing else may).
Each page gets a checking script appended; it reports:
  - every element whose content overflows its box (scrollWidth/scrollHeight beyond clientWidth/
    clientHeight where overflow is not scrollable), and a page wider than the window;
  - every chart (<svg>) with no drawn mark (rect, circle, polyline, path, line of non-zero size), or
    with a text label or mark reaching outside the chart's own box (clipped).
Exit 0 when both pages are clean, 1 with the problems listed, 77 (ctest SKIP_RETURN_CODE) when no
Chromium is installed (tools/install-deps.sh installs Debian's `chromium`).
"""

import html
import json
import os
import random
import re
import shutil
import subprocess
import sys

CHECK_JS = r"""
<script>
(function () {
  const problems = [];
  const describe = (el) => el.tagName.toLowerCase() + (el.id ? '#' + el.id : '') +
      (el.className && typeof el.className === 'string' ? '.' + el.className.split(' ').join('.') : '') +
      ' "' + (el.textContent || '').trim().slice(0, 50) + '"';
  for (const el of document.querySelectorAll('body *')) {
    if (el.closest('svg') || el.id === 'gyre-layout-check') continue;
    const cs = getComputedStyle(el);
    if (cs.display === 'inline' || cs.display === 'none') continue;
    const scrollX = cs.overflowX === 'auto' || cs.overflowX === 'scroll';
    const scrollY = cs.overflowY === 'auto' || cs.overflowY === 'scroll';
    if (!scrollX && el.scrollWidth > el.clientWidth + 1)
      problems.push('overflows its box horizontally (' + el.scrollWidth + ' > ' + el.clientWidth + '): ' + describe(el));
    if (!scrollY && el.scrollHeight > el.clientHeight + 1)
      problems.push('overflows its box vertically (' + el.scrollHeight + ' > ' + el.clientHeight + '): ' + describe(el));
  }
  if (document.documentElement.scrollWidth > window.innerWidth + 1)
    problems.push('page wider than the window: ' + document.documentElement.scrollWidth + ' > ' + window.innerWidth);
  const charts = document.querySelectorAll('svg');
  let drawn = 0;
  for (const svg of charts) {
    const box = svg.getBoundingClientRect();
    const title = (svg.querySelector('.title') || svg).textContent.trim().slice(0, 60);
    if (box.width < 10 || box.height < 10) { problems.push('chart has no size: ' + title); continue; }
    let marks = 0;
    for (const m of svg.querySelectorAll('rect,circle,polyline,path,line,polygon')) {
      const r = m.getBoundingClientRect();
      if (r.width <= 0 && r.height <= 0) continue;
      if (!m.classList.contains('grid') && !m.classList.contains('axis') && !m.classList.contains('frame')) ++marks;
      if (r.left < box.left - 1 || r.top < box.top - 1 || r.right > box.right + 1 || r.bottom > box.bottom + 1)
        problems.push('chart mark outside its chart: ' + title);
    }
    for (const t of svg.querySelectorAll('text')) {
      const r = t.getBoundingClientRect();
      if (r.left < box.left - 1 || r.top < box.top - 1 || r.right > box.right + 1 || r.bottom > box.bottom + 1)
        problems.push('chart text clipped: "' + t.textContent.trim() + '" in ' + title);
    }
    if (marks === 0) problems.push('chart draws nothing: ' + title); else ++drawn;
  }
  const out = document.createElement('pre');
  out.id = 'gyre-layout-check';
  out.style.display = 'none';
  out.textContent = 'GYRE-LAYOUT ' + JSON.stringify({charts: charts.length, drawn: drawn, problems: problems}) + ' END';
  document.body.appendChild(out);
})();
</script>
"""


def find_chromium():
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def write_corpus(path, n, rng):
    # Invented words; the label follows one cue word.
    cues = {"kettle": ["boil", "spout", "lid"], "oven": ["tray", "grill", "door"]}
    filler = ["please", "the", "my", "is", "not", "working", "since", "monday", "again", "today"]
    with open(path, "w") as f:
        for _ in range(n):
            label = rng.choice(sorted(cues))
            words = [rng.choice(filler) for _ in range(rng.randint(3, 9))]
            words.insert(rng.randint(0, len(words)), rng.choice(cues[label]))
            f.write(label + "\t" + " ".join(words) + "\n")


def render(chromium, html_path, width):
    cmd = [chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
           "--hide-scrollbars", "--window-size=%d,900" % width, "--dump-dom", "file://" + html_path]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    # The result is the text of the <pre> the script appended (the script's own source also holds
    # the marker, but not followed by a JSON object).
    m = re.search(r"GYRE-LAYOUT (\{.*?\}) END", done.stdout, re.S)
    if not m:
        raise RuntimeError("no result from %s (exit %d): %s" % (" ".join(cmd), done.returncode, done.stderr[-2000:]))
    return json.loads(html.unescape(m.group(1)))


def main():
    if len(sys.argv) != 3:
        print(__doc__)
        return 2
    gyre, work = sys.argv[1], os.path.abspath(sys.argv[2])
    chromium = find_chromium()
    if not chromium:
        print("SKIPPED: no Chromium found (install Debian's `chromium`: bash tools/install-deps.sh)")
        return 77
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    rng = random.Random(14)
    for name, n in (("train", 120), ("dev", 40), ("test", 40)):
        write_corpus(os.path.join(work, name + ".tsv"), n, rng)
    out = os.path.join(work, "cmp")
    subprocess.run([gyre, "compare", "--train", os.path.join(work, "train.tsv"), "--dev",
                    os.path.join(work, "dev.tsv"), "--test", os.path.join(work, "test.tsv"), "--cells", "lstm,gru",
                    "--hidden-sizes", "8", "--seeds", "2", "--epochs", "2", "--embedding-size", "8", "--out", out,
                    "--quiet"], check=True, stdout=subprocess.DEVNULL)
    subprocess.run([gyre, "report", os.path.join(out, "lstm-h8-s1")], check=True, stdout=subprocess.DEVNULL)
    pages = {"run report": os.path.join(out, "lstm-h8-s1", "report.html"),
             "comparison report": os.path.join(out, "report.html")}
    failed = False
    for what, path in pages.items():
        with open(path) as f:
            page = f.read()
        checked = os.path.join(work, os.path.basename(os.path.dirname(path)) + "-checked.html")
        with open(checked, "w") as f:
            f.write(page.replace("</body>", CHECK_JS + "</body>") if "</body>" in page else page + CHECK_JS)
        for width in (1280, 1024, 700):
            r = render(chromium, checked, width)
            print("%s at %d px: %d chart(s), %d drawn, %d problem(s)" % (what, width, r["charts"], r["drawn"],
                                                                       len(r["problems"])))
            for p in r["problems"]:
                print("  " + p)
            if r["problems"] or r["charts"] == 0:
                failed = True
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
