"""How calibration should choose its thresholds, and where its training plots should be.

Calibration chooses blob thresholds (and the crown split's and centre peaks' settings) from
a grid, fold by fold. This script measures, on scenes used for tuning only, two things:

* **the choice rule**: every grid that calibration cross-validates is also cross-validated
  with other rules (the plain argmax of F1, width 1, and the F1 of counts pooled over 3 or
  5 neighbouring threshold cells, :func:`ecoscan.detect.calibration._smoothed_f1`). The
  held-out F1 of a rule is an honest estimate of how well it chooses (the choice is made on
  the other folds), and all rules are scored on the same counts, so they cost nothing
  extra. Printed: the mean held-out F1 per rule over every grid of a scene.
* **test F1** of the detector actually learnt, on the rest of the scene.

Scenes: ``benchmarks/tuning_scenes.py`` (``--tuning STYLES``, seeds 100-103, 1000 px) and
the suite's development seeds 0, 7, 11 (``--suite STYLES``; no other suite seed is
accepted). ``--train-plots N --train-fraction F`` place N training plots covering F of
the scene (at most 0.15).

Run: ``nice python benchmarks/calibrate_choice.py --tuning canopy,stand --seeds 100,101``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))

DEV_SEEDS = (0, 7, 11)
WIDTHS = (1, 3, 5)


class ChoiceLog:
    """Wraps ``calibration._cross_validate`` to also score the other rules."""

    def __init__(self):
        import ecoscan.detect.calibration as cal

        self.cal = cal
        self.orig = cal._cross_validate
        self.rows: list[dict[int, float]] = []

    def __enter__(self):
        def wrapped(counts, ordered=(0, 1), width=None):
            import inspect

            row = {"grid": inspect.stack()[1].function}
            for w in WIDTHS:
                pooled = self.orig(counts, ordered, w)[0]
                row[w] = self.cal._f1(*pooled)
            self.rows.append(row)
            return self.orig(counts, ordered, width)

        self.cal._cross_validate = wrapped
        return self

    def __exit__(self, *exc):
        self.cal._cross_validate = self.orig


def tuning_case(style: str, seed: int, folder: Path, n: int, fraction: float, size: int):
    """Calibrate a tuning scene on spread plots; test F1 on the rest (tolerance 0.3 m)."""
    import shapely
    from calibrate_speed import MAX_TRAIN_FRACTION
    from tuning_scenes import write_tuning_scene

    from ecoscan.analysis.validation.compute import validate_points
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.detect.calibration import band_names_for, calibrate_detector
    from ecoscan.detect.detector_file import write_detector
    from ecoscan.detect.settings import parse_band_spec
    from ecoscan.io.raster import open_raster
    from ecoscan.model.plots import Plot, PlotLayer
    from ecoscan.model.points import PointSet

    assert fraction <= MAX_TRAIN_FRACTION
    path, truth = write_tuning_scene(folder, style, seed, size)
    info = open_raster(path)
    ref = PointSet(truth.x, truth.y, {}, truth.crs)
    x0, y0 = info.transform.c, info.transform.f
    side = info.width * info.pixel_size_m
    k = int(np.ceil(np.sqrt(n)))
    t = side * np.sqrt(fraction / n)
    boxes = []
    for c in np.round(np.linspace(0, k * k - 1, n)).astype(int):
        cx, cy = x0 + (c % k + 0.5) * side / k, y0 - (c // k + 0.5) * side / k
        boxes.append(shapely.box(cx - t / 2, cy - t / 2, cx + t / 2, cy + t / 2))
    if n == 1:
        boxes = [shapely.box(x0, y0 - side * np.sqrt(fraction), x0 + side * np.sqrt(fraction), y0)]
    train = PlotLayer([Plot(f"t{i}", b, {}) for i, b in enumerate(boxes)], truth.crs)
    rest = shapely.box(x0, y0 - side, x0 + side, y0).difference(shapely.union_all(boxes))
    test = PlotLayer([Plot("test", rest, {})], truth.crs)
    bands = "blue=1,green=2,red=3,nir=4" if style == "nir" else ""
    c0 = time.process_time()
    res = calibrate_detector(
        info, ref, train, band_names=band_names_for(info, parse_band_spec(bands))
    )
    cpu = time.process_time() - c0
    toml = folder / f"{style}_{seed}.toml"
    write_detector(toml, res.detector)
    det = detect_raster(path, DetectionSettings(detector=str(toml)), plots=test)
    row = validate_points(det.points, ref, 0.3, plots=test)[-1]
    return res, row, cpu


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tuning", default="", help="tuning-scene styles")
    ap.add_argument("--suite", default="", help="scene-suite styles (development seeds only)")
    ap.add_argument("--seeds", default="", help="seeds (tuning: 100-199; suite: 0, 7, 11)")
    ap.add_argument("--size", type=int, default=800)
    ap.add_argument("--train-plots", type=int, default=1)
    ap.add_argument("--train-fraction", type=float, default=0.12)
    args = ap.parse_args(argv)
    if not 0 < args.train_fraction <= 0.15:
        ap.error("--train-fraction is at most 0.15")
    cases = []
    for style in filter(None, args.tuning.split(",")):
        seeds = [int(s) for s in (args.seeds or "100,101,102").split(",")]
        if not all(100 <= s <= 199 for s in seeds):
            ap.error("tuning seeds are 100-199")
        cases += [("tuning", style, s) for s in seeds]
    for style in filter(None, args.suite.split(",")):
        seeds = [int(s) for s in (args.seeds or "0,7,11").split(",")]
        if not set(seeds) <= set(DEV_SEEDS):
            ap.error("only the suite's development seeds 0, 7, 11 are for tuning")
        cases += [("suite", style, s) for s in seeds]
    from calibrate_speed import calibrate_and_score
    from scene_suite import CALIBRATED_MIN_SIZE

    from ecoscan.errors import InputError
    from ecoscan.synthetic import make_scene

    allrows, tests = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for kind, style, seed in cases:
            with ChoiceLog() as log:
                try:
                    if kind == "tuning":
                        res, row, cpu = tuning_case(
                            style,
                            seed,
                            Path(tmp),
                            args.train_plots,
                            args.train_fraction,
                            args.size,
                        )
                    else:
                        size = max(args.size, CALIBRATED_MIN_SIZE.get(style, 0))
                        got = calibrate_and_score(
                            make_scene(style, size, seed),
                            Path(tmp),
                            f"{style}_{seed}",
                            train_plots=args.train_plots,
                            train_fraction=args.train_fraction,
                        )
                        res, row, cpu = got["result"], got["row"], got["calibrate_cpu_s"]
                except InputError as exc:
                    print(f"{kind} {style} {seed}: not calibrated: {exc}", flush=True)
                    continue
            mean = {w: np.nanmean([r[w] for r in log.rows]) for w in WIDTHS}
            allrows += log.rows
            tests.append(row.f1)
            d = res.detector
            route = d.layer + (" split" if d.split else "")
            print(
                f"{kind} {style:16s} {seed:4d}: {route:18s} plants "
                f"{d.training['plants']:4d} cv {res.chosen.f1:.3f} | held-out F1 by rule "
                + " ".join(f"w{w} {mean[w]:.3f}" for w in WIDTHS)
                + f" | test P {row.precision:.3f} R {row.recall:.3f} F1 {row.f1:.3f} "
                f"| {cpu:.0f} s",
                flush=True,
            )
            print(
                "    grids (w1/w3/w5): "
                + "; ".join(
                    f"{r['grid'].strip('_')} " + "/".join(f"{r[w]:.3f}" for w in WIDTHS)
                    for r in log.rows
                ),
                flush=True,
            )
    if allrows:
        print(
            f"\nall {len(allrows)} grids, mean held-out F1 by rule: "
            + " ".join(f"w{w} {np.nanmean([r[w] for r in allrows]):.4f}" for w in WIDTHS)
            + f"; test F1 mean {np.mean(tests):.3f} (lowest {np.min(tests):.3f})"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
