"""Calibrated detection on the scene suite, and the speed of ``ecoscan calibrate``.

For each suite style: make a scene, calibrate on its ``train`` plot (12% of the scene;
reference positions only, no crown diameters), detect on the ``test`` plot (the rest) and
score with the matching of ``ecoscan validate`` (tolerance: half the style's smallest crown
diameter). Then time calibration on one large scene against the default detector run on
the same raster in the same process (the baseline).

CPU seconds are printed beside wall-clock seconds because a shared machine inflates the
latter. Run under nice:  nice python benchmarks/calibrate_speed.py [--size 1000] [--large 4000]
"""

from __future__ import annotations

import argparse
import math
import tempfile
import time
from pathlib import Path

import numpy as np

from ecoscan.analysis.validation.compute import validate_points
from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.detect.calibration import band_names_for, calibrate_detector
from ecoscan.detect.detector_file import write_detector
from ecoscan.detect.settings import parse_band_spec
from ecoscan.errors import InputError
from ecoscan.io.raster import open_raster
from ecoscan.io.vector import read_plots, read_points
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene

#: The issue's rule: training plots cover at most this share of the scene in total.
MAX_TRAIN_FRACTION = 0.15


def spread_training_plots(sc, n: int, fraction: float) -> tuple[PlotLayer, PlotLayer]:
    """``n`` square training plots covering ``fraction`` of scene ``sc`` in total, spread
    over it, and the test plot (the rest of the scene, with holes where they are).

    The scene is cut into k × k cells (k = ceil(sqrt(n))); the plots sit at the centres of
    ``n`` cells spread evenly along the cell order (two plots: opposite corners; four: one
    per quarter; five: the corners of a 3 × 3 grid and its centre). ``n = 1`` gives the
    scene's own ``train`` plot, a square in the top-left corner.

    Examples
    --------
    >>> from ecoscan.synthetic import make_scene
    >>> train, test = spread_training_plots(make_scene("coarse", 100, 0), 4, 0.15)
    >>> len(train.plots), round(sum(p.geometry.area for p in train.plots) / 625.0, 3)
    (4, 0.15)
    """
    import shapely
    from pyproj import CRS

    from ecoscan.model.plots import Plot
    from ecoscan.synthetic.scene import SCENE_ORIGIN, training_plots

    if not 0 < fraction <= MAX_TRAIN_FRACTION:
        raise ValueError(f"training plots may cover at most {MAX_TRAIN_FRACTION:.0%} in total")
    crs = CRS.from_user_input(sc.crs)
    if n == 1:
        layer = training_plots(sc, fraction)
        return (
            PlotLayer([p for p in layer.plots if p.plot_id == "train"], layer.crs),
            PlotLayer([p for p in layer.plots if p.plot_id == "test"], layer.crs),
        )
    x0, y0 = SCENE_ORIGIN
    side = sc.size_px * sc.pixel_size_m
    k = math.ceil(math.sqrt(n))
    t = side * math.sqrt(fraction / n)
    cells = np.round(np.linspace(0, k * k - 1, n)).astype(int)
    boxes = []
    for c in cells:
        cx = x0 + (c % k + 0.5) * side / k
        cy = y0 - (c // k + 0.5) * side / k
        boxes.append(shapely.box(cx - t / 2, cy - t / 2, cx + t / 2, cy + t / 2))
    whole = shapely.box(x0, y0 - side, x0 + side, y0)
    test = whole.difference(shapely.union_all(boxes))
    train = PlotLayer([Plot(f"train{i + 1}", b, {}) for i, b in enumerate(boxes)], crs)
    return train, PlotLayer([Plot("test", test, {})], crs)


def calibrate_and_score(
    sc,
    folder: Path,
    stem: str,
    *,
    train_plots: int = 1,
    train_fraction: float = 0.12,
    diameters: bool = False,
) -> dict:
    """Write scene ``sc``, calibrate on its training plots, detect with the learnt file and
    score on the test plot (matching within half the smallest diameter, as ``ecoscan
    validate`` does). Returns the calibration result, the test row and the timings.

    By default the training plot is the scene's ``train`` plot (the top-left 12 %) and
    the reference holds positions only; ``train_plots`` and ``train_fraction`` place
    several plots instead (:func:`spread_training_plots`, at most 15 % in total), and
    ``diameters`` keeps the mapped crown diameters (``diameter_m``) in the reference."""
    paths = write_scene(sc, folder)
    info = open_raster(paths.raster)
    ref = read_points(paths.truth)
    keep = {"diameter_m": ref.attrs["diameter_m"]} if diameters else {}
    ref = PointSet(ref.x, ref.y, keep, ref.crs)  # positions only, as mapped in the field
    train, test = spread_training_plots(sc, train_plots, train_fraction)
    t0, c0 = time.perf_counter(), time.process_time()
    res = calibrate_detector(
        info, ref, train, band_names=band_names_for(info, parse_band_spec(sc.bands_option))
    )
    t1, c1 = time.perf_counter(), time.process_time()
    toml = folder / f"{stem}.toml"
    write_detector(toml, res.detector)
    det = detect_raster(paths.raster, DetectionSettings(detector=str(toml)), plots=test)
    t2, c2 = time.perf_counter(), time.process_time()
    row = validate_points(det.points, ref, 0.5 * sc.diameter_range_m[0], plots=test)[-1]
    return {
        "result": res,
        "row": row,
        "calibrate_s": t1 - t0,
        "calibrate_cpu_s": c1 - c0,
        "detect_s": t2 - t1,
        "detect_cpu_s": c2 - c1,
        "points": det.points,
        "test_plots": test,
    }


def one_style(style: str, size: int, folder: Path, seed: int = 0) -> dict:
    """Calibrate on ``train``, score on ``test``; returns a row of figures."""
    got = calibrate_and_score(make_scene(style, size, seed), folder, style)
    res, row = got["result"], got["row"]
    return {
        "style": style,
        "layer": res.detector.layer,
        "cv_f1": res.chosen.f1,
        "precision": row.precision,
        "recall": row.recall,
        "f1": row.f1,
        "calibrate_s": got["calibrate_s"],
        "calibrate_cpu_s": got["calibrate_cpu_s"],
        "detect_s": got["detect_s"],
        "plants": res.detector.training["plants"],
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--size", type=int, default=1000, help="suite scene size (px)")
    ap.add_argument("--large", type=int, default=4000, help="speed scene size (px); 0 skips")
    ap.add_argument("--styles", default=",".join(SCENE_STYLES))
    args = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="ecoscan-calibrate-"))
    print(
        f"{'style':22s} {'layer':12s} {'plants':>6s} {'cv_f1':>6s} {'P':>6s} {'R':>6s} "
        f"{'F1':>6s} {'calib_s':>8s} {'cpu_s':>6s} {'detect_s':>8s}"
    )
    for style in [s for s in args.styles.split(",") if s]:
        try:
            r = one_style(style, args.size, folder)
        except InputError as exc:
            print(f"{style:22s} not calibrated: {exc}")
            continue
        print(
            f"{r['style']:22s} {r['layer']:12s} {r['plants']:6d} {r['cv_f1']:6.3f} "
            f"{r['precision']:6.3f} {r['recall']:6.3f} {r['f1']:6.3f} "
            f"{r['calibrate_s']:8.1f} {r['calibrate_cpu_s']:6.1f} {r['detect_s']:8.1f}",
            flush=True,
        )
    if args.large:
        style = "dry-shrubs"
        sc = make_scene(style, args.large, 1)
        paths = write_scene(sc, folder, name="large")
        info = open_raster(paths.raster)
        ref = read_points(paths.truth)
        ref = PointSet(ref.x, ref.y, {}, ref.crs)
        plots = read_plots(paths.plots, target_crs=info.crs)
        train = PlotLayer([p for p in plots.plots if p.plot_id == "train"], plots.crs)
        t0 = time.perf_counter()
        detect_raster(
            paths.raster,
            DetectionSettings(
                diameter_min_m=sc.diameter_range_m[0], diameter_max_m=sc.diameter_range_m[1]
            ),
        )
        base = time.perf_counter() - t0
        t0, c0 = time.perf_counter(), time.process_time()
        res = calibrate_detector(info, ref, train, band_names=band_names_for(info))
        cal = time.perf_counter() - t0
        print(
            f"\n{args.large}² {style}: calibrate {cal:.1f} s wall, "
            f"{time.process_time() - c0:.1f} s CPU ({res.detector.layer}, "
            f"{res.detector.training['plants']} plants) vs default detection of the whole "
            f"raster {base:.1f} s (ratio {cal / base:.2f}); target ≤ 60 s"
        )


if __name__ == "__main__":
    main()
