"""A 100-plot survey's report: weight, height, images and the time Chromium takes to open it.

Builds a survey on the bundled demo rasters with 25 plots per site laid out on a grid (so
4 rasters x 25 plots = 100 plot surveys), runs it with few simulations (the report's size
does not depend on them), and measures report.html in headless Chromium at 1280 px. The
goal is a report under 15 MB that opens in under 3 s. As a baseline in the same process it
also opens the 12-plot report of the same rasters (``--baseline DIR`` with a demo output).

    nice python benchmarks/report_100_plots.py [--keep DIR] [--baseline DEMO_OUTPUT]
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

import shapely

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))

from browser import browser_session  # noqa: E402

from ecoscan.io.vector import plots_from_geometries, write_plots  # noqa: E402
from ecoscan.model.plots import PlotLayer  # noqa: E402
from ecoscan.survey.config import load_survey  # noqa: E402
from ecoscan.survey.runner import run_survey  # noqa: E402

DEMO = ROOT / "sample_rasters"
MEASURE_JS = """({height: document.documentElement.scrollHeight,
  width: document.documentElement.scrollWidth, images: document.images.length,
  client: document.documentElement.clientWidth})"""


def grid_plots(x0, y0, nx, ny, w, h, step_x, step_y, prefix):
    """Rectangular plots on a grid, ids PREFIX-ROW-COL."""
    out = {}
    for i in range(ny):
        for j in range(nx):
            x, y = x0 + j * step_x, y0 + i * step_y
            out[f"{prefix}{i}{j}"] = shapely.box(x, y, x + w, y + h)
    return out


def build(folder: Path) -> Path:
    """Write plots.gpkg and survey.toml for the 100-plot survey into ``folder``."""
    plots = grid_plots(431002, 5412002, 5, 5, 20, 14, 21.5, 15.5, "t")
    plots |= grid_plots(431402, 5412002, 5, 5, 18, 10, 19.5, 11.5, "m")
    from pyproj import CRS

    recs, _notes = plots_from_geometries(list(plots.values()), list(plots))
    write_plots(PlotLayer(recs, CRS.from_epsg(32631)), folder / "plots.gpkg")
    text = (DEMO / "survey.toml").read_text()
    text = text.replace('plots = "plots.gpkg"', f'plots = "{folder / "plots.gpkg"}"')
    for name in (
        "tansy_spring_rgb",
        "tansy_autumn_rgb",
        "marrow_spring_chm",
        "marrow_autumn_classes",
    ):
        text = text.replace(f'"{name}.tif"', f'"{DEMO / (name + ".tif")}"')
    text = text.replace("simulations = 999", "simulations = 199").replace(
        "simulations = 199\n\n[change]", "simulations = 39\n\n[change]"
    )
    (folder / "survey.toml").write_text(text)
    return folder / "survey.toml"


def measure(report: Path) -> dict:
    with browser_session() as s:
        t0 = time.perf_counter()
        s.open(report)
        load = time.perf_counter() - t0
        m = s.evaluate(MEASURE_JS)
    return {**m, "load_s": load, "mb": report.stat().st_size / 1e6}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--keep", type=Path, help="keep the survey output here")
    ap.add_argument("--baseline", type=Path, help="a demo output folder to open for comparison")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="ecoscan-100-"))
    try:
        cfg = load_survey(build(tmp))
        out = args.keep or tmp / "out"
        t0 = time.perf_counter()
        run = run_survey(cfg, output=out)
        print(f"plot surveys  {len(run.rows)} (survey run {time.perf_counter() - t0:.0f} s)")
        m = measure(out / "report.html")
        print(f"weight_mb     {m['mb']:.2f} (goal < 15)")
        print(f"height_px     {m['height']} at 1280 px (page width {m['width']} of {m['client']})")
        print(f"images        {m['images']}")
        print(f"load_s        {m['load_s']:.2f} (goal < 3)")
        if args.baseline:
            b = measure(args.baseline / "report.html")
            print(
                f"baseline      12-plot demo: {b['mb']:.2f} MB, load {b['load_s']:.2f} s; "
                f"ratio weight {m['mb'] / b['mb']:.1f}x, load {m['load_s'] / b['load_s']:.1f}x"
            )
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
