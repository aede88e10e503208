"""Detection accuracy on every style of the scene suite: ecoscan's defaults against the plain
whole-image method with its threshold tuned in hindsight.

For each style of :data:`ecoscan.synthetic.SCENE_STYLES` (invented scenes with known
plants), a scene is rendered and written as a GeoTIFF, then:

* ecoscan: :func:`ecoscan.detect.detect_raster` with only the style's ``--diameter`` (and
  ``--bands`` for multispectral) given, everything else default;
* plain: what a user would write by hand: read the whole raster, compute the style's
  natural layer (Excess Green, Woebbecke et al. 1995, for RGB; NDVI, Rouse et al. 1974,
  for the four-band scene), run :func:`skimage.feature.blob_log` over the same diameter
  range (σ = r / √2, 10 scales spaced evenly, its default) and keep the threshold with the
  best F1 against the truth (60 thresholds from 0.002 to 0.5, refined around the best with
  8 more; the scale space is shared between thresholds and the best one is re-run with
  ``blob_log`` itself as a check). Tuning on the truth is hindsight no user has: the plain
  column is an upper bound for that method.

A detection matches a plant one-to-one (optimal assignment, :mod:`ecoscan.stats.matching`)
within half the smallest stated diameter. Printed: plants, precision, recall and F1 of
each method, the tuned threshold, and seconds. ``--markdown FILE`` writes the table.
``--write DIR`` only writes the scenes (GeoTIFF, truth CSV, plots, settings JSON) for use
with ``ecoscan detect`` and ``ecoscan validate``.

``--calibrated`` measures ``ecoscan calibrate`` instead: for each style and each seed of
``--seeds``, a scene is calibrated on its ``train`` plot (the top-left 12 % of the scene,
mapped positions only, no crown diameters), the detector is run on the ``test`` plot (the
rest) and scored with ``ecoscan validate``'s matching within half the style's smallest
diameter. Styles whose training plot would hold fewer than 20 plants at ``--size`` are
drawn at :data:`CALIBRATED_MIN_SIZE` instead (JPEG and coarse: 1000 px). Printed per
scene: the route chosen, cross-validated F1, test precision, recall, F1 and CPU seconds;
per style the mean and lowest test F1. ``--train-plots N --train-fraction F`` calibrate on
N square plots spread over the scene covering F of it in total instead (at most 0.15, the
issue's rule; ``calibrate_speed.spread_training_plots``), and score on the rest;
``--diameters`` also gives calibrate the mapped crown diameters. To measure an earlier
version of the code, run the same command with ``PYTHONPATH`` pointing to an export of it
(``git archive REV``): the script then imports ``ecoscan`` from there. ``--memory-size N``
also writes N×N scenes in fresh processes and reports their peak resident memory (the
renderer works in 512-row strips).

Run: ``nice python benchmarks/scene_suite.py`` (a few minutes of CPU at 1500 px);
``--size 800`` for a quick run. Not run by the test suite.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.append(str(ROOT))  # after PYTHONPATH, so an exported older version can be measured

#: Least scene side (pixels) for the calibrated mode, so the training plot holds 20 plants.
CALIBRATED_MIN_SIZE = {"jpeg-vignette": 1000, "coarse": 1000}


def scores(found_xy: np.ndarray, truth_xy: np.ndarray, tol: float) -> tuple[float, float, float]:
    """Precision, recall and F1 with one-to-one matching within ``tol`` metres."""
    from ecoscan.stats.matching import match_points

    m = match_points(found_xy, truth_xy, tol)
    nf, nt = len(found_xy), len(truth_xy)
    p = m.n_matched / nf if nf else 0.0
    r = m.n_matched / nt if nt else 0.0
    f1 = 2 * m.n_matched / (nf + nt) if nf + nt else 0.0
    return p, r, f1


def natural_layer(raster: Path, band_names: tuple[str, ...]) -> np.ndarray:
    """The layer a user would pick: NDVI when a near-infrared band exists, else ExG."""
    import rasterio

    with rasterio.open(raster) as src:
        img = src.read().astype(np.float32)
    b = {n: i for i, n in enumerate(band_names)}
    if "nir" in b:
        red, nir = img[b["red"]], img[b["nir"]]
        s = nir + red
        s[s == 0] = 1
        return (nir - red) / s  # Rouse et al. (1974)
    r, g, bl = img[b["red"]], img[b["green"]], img[b["blue"]]
    s = r + g + bl
    s[s == 0] = 1
    return (2 * g - r - bl) / s  # Woebbecke et al. (1995), chromatic coordinates


class BlobLogSweep:
    """:func:`skimage.feature.blob_log` at many thresholds, sharing the scale space.

    ``blob_log`` computes a scale-normalised Laplacian-of-Gaussian cube, finds its 3×3×3
    local maxima above the threshold, and prunes overlapping blobs. Only the last two
    steps depend on the threshold, so the cube and the local maxima are computed once
    here, exactly as ``blob_log`` does (skimage 0.2x: same σ list, same ``mode``, same
    ordering by decreasing response, skimage's own pruning). :meth:`check` compares the
    result with a real ``blob_log`` call.
    """

    def __init__(self, layer: np.ndarray, min_sigma: float, max_sigma: float, num: int):
        from scipy import ndimage

        self.layer, self.args = layer, (min_sigma, max_sigma, num)
        dt = layer.dtype  # blob_log keeps float32 input in float32, sigmas included
        lo = np.full(layer.ndim, min_sigma, dtype=dt)
        hi = np.full(layer.ndim, max_sigma, dtype=dt)
        sig = np.linspace(lo, hi, num)  # blob_log default: log_scale=False
        cube = np.empty((*layer.shape, num), dtype=dt)
        for i, s in enumerate(sig):
            cube[..., i] = -ndimage.gaussian_laplace(layer, s) * np.mean(s) ** 2
        peak = cube == ndimage.maximum_filter(cube, footprint=np.ones((3, 3, 3)), mode="nearest")
        idx = np.nonzero(peak & (cube > 0))
        val = cube[idx]
        order = np.argsort(-val, kind="stable")
        self.coords = np.transpose(idx)[order]
        self.values = val[order]
        self.sigmas = sig[:, 0]

    def blobs(self, threshold: float) -> np.ndarray:
        """Rows (row, col, sigma) as ``blob_log(..., threshold=threshold)`` returns them."""
        from skimage.feature.blob import _prune_blobs  # the pruning blob_log itself uses

        c = self.coords[self.values > threshold]
        if c.size == 0:
            return np.empty((0, 3))
        lm = np.hstack([c[:, :2].astype(self.layer.dtype), self.sigmas[c[:, 2]][:, None]])
        return _prune_blobs(lm, 0.5, sigma_dim=1)

    def check(self, threshold: float) -> bool:
        """True when a real ``blob_log`` call finds the same blobs."""
        from skimage.feature import blob_log

        lo, hi, num = self.args
        ref = blob_log(
            self.layer,
            min_sigma=lo,
            max_sigma=hi,
            num_sigma=num,
            threshold=threshold,
            exclude_border=False,
        )
        mine = self.blobs(threshold)
        key = lambda b: b[np.lexsort((b[:, 1], b[:, 0]))]  # noqa: E731
        return ref.shape == mine.shape and np.allclose(key(ref), key(mine))


def plain_tuned(scene, raster: Path, tol: float) -> dict:
    """``blob_log`` on the natural layer, threshold tuned on the truth (hindsight)."""
    layer = natural_layer(raster, scene.band_names)
    ps = scene.pixel_size_m
    lo, hi = scene.diameter_range_m
    smin, smax = lo / ps / 2 / math.sqrt(2), hi / ps / 2 / math.sqrt(2)
    truth = np.column_stack([scene.x_m, scene.y_m])
    t = scene.transform
    t0 = time.perf_counter()
    sweep = BlobLogSweep(layer, smin, smax, 10)
    t_cube = time.perf_counter() - t0

    def run(th: float) -> tuple[float, float, float]:
        b = sweep.blobs(th).astype(np.float64)  # float32 map coordinates lose metres
        rows, cols = b[:, 0], b[:, 1]
        xy = np.column_stack([t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e])
        return scores(xy, truth, tol)

    grid = list(np.geomspace(0.002, 0.5, 60))
    res = {th: run(th) for th in grid}
    best = max(res, key=lambda k: res[k][2])
    i = grid.index(best)
    for th in np.geomspace(grid[max(0, i - 1)], grid[min(len(grid) - 1, i + 1)], 10)[1:-1]:
        res[float(th)] = run(float(th))
    best = max(res, key=lambda k: res[k][2])
    t1 = time.perf_counter()
    same = sweep.check(best)
    t_one = time.perf_counter() - t1
    p, r, f1 = res[best]
    return {
        "precision": p,
        "recall": r,
        "f1": f1,
        "threshold": best,
        "thresholds": len(res),
        "seconds_per_run": t_one,
        "seconds_scale_space": t_cube,
        "checked": same,
    }


def ecoscan_default(scene, raster: Path, tol: float, workers: int) -> dict:
    """``detect_raster`` with only the diameter range (and bands) given."""
    from ecoscan.detect import DetectionSettings, detect_raster

    lo, hi = scene.diameter_range_m
    t0 = time.perf_counter()
    res = detect_raster(
        raster,
        DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, bands=scene.bands_option),
        workers=workers,
    )
    sec = time.perf_counter() - t0
    p, r, f1 = scores(res.points.xy, np.column_stack([scene.x_m, scene.y_m]), tol)
    return {
        "precision": p,
        "recall": r,
        "f1": f1,
        "seconds": sec,
        "found": res.n,
        "index": res.index,
    }


def calibrated(style: str, size: int, seed: int, folder: Path, layout: dict | None = None) -> dict:
    """Calibrate on the scene's ``train`` plot (or the plots ``layout`` places: keywords
    of :func:`calibrate_speed.calibrate_and_score`) and score on the rest."""
    from calibrate_speed import calibrate_and_score

    from ecoscan.synthetic import make_scene

    size = max(size, CALIBRATED_MIN_SIZE.get(style, 0))
    got = calibrate_and_score(
        make_scene(style, size, seed), folder, f"{style}_{seed}", **(layout or {})
    )
    res, row = got["result"], got["row"]
    d = res.detector
    split = getattr(d, "split", None) or {}
    route = d.layer + (" split" if split else "")
    route += f" +centre {split['centre_weight']:g}" if split.get("centre_weight") else ""
    return {
        "style": style,
        "seed": seed,
        "size": size,
        "route": route,
        "plants": d.training["plants"],
        "cv_f1": res.chosen.f1,
        "precision": row.precision,
        "recall": row.recall,
        "f1": row.f1,
        "calibrate_cpu_s": got["calibrate_cpu_s"],
        "detect_cpu_s": got["detect_cpu_s"],
        "routes": {
            k: (v.f1, tuple(round(float(f), 3) for f in v.fold_f1))
            for k, v in getattr(res, "routes", {}).items()
        },
    }


def calibrated_suite(
    styles: list[str], seeds: list[int], size: int, layout: dict | None = None
) -> list[dict]:
    """:func:`calibrated` for every style and seed, printed as it goes."""
    import ecoscan
    from ecoscan.errors import InputError

    print(
        f"calibrated, ecoscan from {Path(ecoscan.__file__).parent}; seeds {seeds}; "
        f"training plots {layout or 'the top-left 12 %'}",
        flush=True,
    )
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for style in styles:
            for seed in seeds:
                try:
                    r = calibrated(style, size, seed, Path(tmp), layout)
                except InputError as exc:
                    print(f"{style:16s} seed {seed}: not calibrated: {exc}", flush=True)
                    continue
                rows.append(r)
                print(
                    f"{style:16s} seed {seed} ({r['size']} px): {r['route']:28s} "
                    f"plants {r['plants']:4d} cv F1 {r['cv_f1']:.3f} | test P "
                    f"{r['precision']:.3f} R {r['recall']:.3f} F1 {r['f1']:.3f} | cpu "
                    f"{r['calibrate_cpu_s']:.1f} + {r['detect_cpu_s']:.1f} s",
                    flush=True,
                )
                for name, (f1, folds) in r["routes"].items():
                    print(f"    route {name:18s} cv F1 {f1:.3f}  folds {folds}", flush=True)
    print("\n| style | calibrated test F1, mean (lowest) |\n|---|---|")
    for style in styles:
        f1 = [r["f1"] for r in rows if r["style"] == style]
        if f1:
            print(f"| {style} | {np.mean(f1):.3f} ({np.min(f1):.3f}) |")
    return rows


def peak_memory(style: str, size: int, seed: int) -> dict:
    """Render and write an N×N scene in a fresh process; its peak resident memory."""
    code = (
        "import resource, tempfile, time, json\n"
        "from ecoscan.synthetic import make_scene, write_scene\n"
        "t = time.perf_counter()\n"
        f"sc = make_scene({style!r}, {size}, {seed})\n"
        "with tempfile.TemporaryDirectory() as d:\n"
        "    write_scene(sc, d)\n"
        "print(json.dumps({'peak_mb': resource.getrusage(resource.RUSAGE_SELF).ru_maxrss"
        " / 1024, 'seconds': time.perf_counter() - t, 'plants': sc.n}))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=str(ROOT),
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1500, help="scene size in pixels per side")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument(
        "--calibrated",
        action="store_true",
        help="measure ecoscan calibrate (train plot) scored on the test plot, per seed",
    )
    ap.add_argument("--seeds", help="comma-separated seeds for --calibrated (default --seed)")
    ap.add_argument(
        "--train-plots",
        type=int,
        default=1,
        metavar="N",
        help="--calibrated: N square training plots spread over the scene (default 1: the "
        "top-left corner)",
    )
    ap.add_argument(
        "--train-fraction",
        type=float,
        default=0.12,
        help="--calibrated: share of the scene the training plots cover in total (at most "
        "0.15, the issue's rule; default 0.12)",
    )
    ap.add_argument(
        "--diameters",
        action="store_true",
        help="--calibrated: give calibrate the mapped crown diameters (diameter_m), not "
        "positions only",
    )
    ap.add_argument("--styles", default=",".join(SCENE_STYLES), help="comma-separated styles")
    ap.add_argument("--workers", type=int, default=1, help="ecoscan detection processes")
    ap.add_argument("--markdown", metavar="FILE", help="also write the table as Markdown")
    ap.add_argument(
        "--memory-size",
        type=int,
        default=0,
        metavar="N",
        help="also measure peak memory of writing N x N scenes",
    )
    ap.add_argument("--memory-styles", default="dry-shrubs,multispectral")
    ap.add_argument("--skip-accuracy", action="store_true")
    ap.add_argument(
        "--write",
        metavar="DIR",
        help="only write each style's scene files (GeoTIFF, truth, plots) to DIR",
    )
    args = ap.parse_args(argv)
    if args.write:
        for style in args.styles.split(","):
            sc = make_scene(style, args.size, args.seed)
            paths = write_scene(sc, args.write)
            print(
                f"{paths.raster}  --diameter {sc.diameter_option}"
                + (f" --bands {sc.bands_option}" if sc.bands_option else "")
                + f"  ({sc.n} plants in {paths.truth.name})"
            )
        return 0

    if args.calibrated:
        seeds = [int(v) for v in (args.seeds or str(args.seed)).split(",")]
        if not 0 < args.train_fraction <= 0.15 or args.train_plots < 1:
            ap.error("--train-fraction must be in (0, 0.15] and --train-plots at least 1")
        layout = None
        if (args.train_plots, args.train_fraction, args.diameters) != (1, 0.12, False):
            layout = {
                "train_plots": args.train_plots,
                "train_fraction": args.train_fraction,
                "diameters": args.diameters,
            }
        calibrated_suite(args.styles.split(","), seeds, args.size, layout)
        return 0
    rows = []
    if not args.skip_accuracy:
        head = (
            f"{'style':16s} {'plants':>6s} | {'ecoscan P':>9s} {'R':>6s} {'F1':>6s} "
            f"{'s':>6s} | {'plain P':>7s} {'R':>6s} {'F1':>6s} {'thr':>7s} {'s/run':>6s}"
        )
        print(f"scene suite at {args.size} x {args.size} px, seed {args.seed}")
        print(head)
        print("-" * len(head))
        for style in args.styles.split(","):
            sc = make_scene(style, args.size, args.seed)
            tol = 0.5 * sc.diameter_range_m[0]
            with tempfile.TemporaryDirectory() as tmp:
                t0 = time.perf_counter()
                paths = write_scene(sc, tmp)
                render_s = time.perf_counter() - t0
                eco = ecoscan_default(sc, paths.raster, tol, args.workers)
                plain = plain_tuned(sc, paths.raster, tol)
            rows.append(
                {
                    "style": style,
                    "plants": sc.n,
                    "render_s": render_s,
                    "pixel_m": sc.pixel_size_m,
                    "diameter": sc.diameter_option,
                    "ecoscan": eco,
                    "plain": plain,
                }
            )
            print(
                f"{style:16s} {sc.n:6d} | {eco['precision']:9.3f} {eco['recall']:6.3f} "
                f"{eco['f1']:6.3f} {eco['seconds']:6.1f} | {plain['precision']:7.3f} "
                f"{plain['recall']:6.3f} {plain['f1']:6.3f} {plain['threshold']:7.4f} "
                f"{plain['seconds_per_run']:6.1f}",
                flush=True,
            )
    mem = []
    if args.memory_size:
        for style in args.memory_styles.split(","):
            m = peak_memory(style, args.memory_size, args.seed)
            mem.append({"style": style, **m})
            print(
                f"write {style} {args.memory_size}^2: peak {m['peak_mb']:.0f} MB, "
                f"{m['seconds']:.0f} s, {m['plants']} plants",
                flush=True,
            )
    if args.markdown:
        lines = []
        if rows:
            lines += [
                f"Scenes of {args.size} × {args.size} px, seed {args.seed}; match within half "
                "the smallest diameter.",
                "",
                "| style | pixel (m) | diameter (m) | plants | ecoscan precision | recall | "
                "F1 | plain tuned precision | recall | F1 | plain threshold |",
                "| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
            ]
            for r in rows:
                e, p = r["ecoscan"], r["plain"]
                lines.append(
                    f"| {r['style']} | {r['pixel_m']:g} | {r['diameter']} | {r['plants']} | "
                    f"{e['precision']:.3f} | {e['recall']:.3f} | **{e['f1']:.3f}** | "
                    f"{p['precision']:.3f} | {p['recall']:.3f} | **{p['f1']:.3f}** | "
                    f"{p['threshold']:.4f} |"
                )
        if mem:
            lines += [
                "",
                "| scene written | peak memory (MB) | seconds | plants |",
                "| --- | ---: | ---: | ---: |",
            ]
            for m in mem:
                lines.append(
                    f"| {m['style']} {args.memory_size}² | {m['peak_mb']:.0f} | "
                    f"{m['seconds']:.0f} | {m['plants']} |"
                )
        Path(args.markdown).write_text("\n".join(lines) + "\n", encoding="utf-8")
        print(f"wrote {args.markdown}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
