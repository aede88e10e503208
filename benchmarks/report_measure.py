"""Measure an HTML report as a reader meets it: height at 1280 px, weight, images, load time.

Usage: python benchmarks/report_measure.py REPORT.html [--screenshot out.png] [--pdf out.pdf]

Prints the page height in CSS pixels at a 1280 px wide window, the file size in MB, the
number of images, the time from navigation to the load event (seconds), and how many tables
are wider than their container (horizontal scrolling). Drives Debian's chromium over the
DevTools protocol through tests/browser.py.
"""

from __future__ import annotations

import argparse
import base64
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from browser import browser_session

MEASURE_JS = """
(() => {
  const wide = Array.from(document.querySelectorAll('table')).filter(
    t => t.getBoundingClientRect().right > document.documentElement.clientWidth + 1).length;
  return {height: document.documentElement.scrollHeight,
          width: document.documentElement.scrollWidth,
          images: document.images.length, tables: document.querySelectorAll('table').length,
          wide_tables: wide};
})()
"""


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("report", type=Path)
    ap.add_argument("--screenshot", type=Path)
    ap.add_argument("--pdf", type=Path)
    args = ap.parse_args()
    size_mb = args.report.stat().st_size / 1e6
    with browser_session() as s:
        t0 = time.perf_counter()
        s.open(args.report)
        load_s = time.perf_counter() - t0
        m = s.evaluate(MEASURE_JS)
        if args.screenshot:
            shot = s.call("Page.captureScreenshot", format="png", captureBeyondViewport=True)
            args.screenshot.write_bytes(base64.b64decode(shot["data"]))
        if args.pdf:
            args.pdf.write_bytes(s.print_pdf())
    print(f"report        {args.report}")
    print(f"height_px     {m['height']} (at 1280 px wide; page width {m['width']} px)")
    print(f"weight_mb     {size_mb:.2f}")
    print(f"images        {m['images']}")
    print(f"tables        {m['tables']} ({m['wide_tables']} wider than the window)")
    print(f"load_s        {load_s:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
