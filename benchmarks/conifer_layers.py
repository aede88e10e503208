"""Which detection layer could find dark conifers that join their long cast shadows?

A diagnosis tool for the conifer-on-pasture failure of the imagery defaults (see
docs/detection-history.md, "Why conifer pasture ... fails"). For each scene it builds a few
candidate layers from the RGB bands and reports the best F1 that the blob pyramid reaches
on each **with its threshold chosen in hindsight** (a sweep over the response; touching
crowns split and overlapping blobs pruned as in ``ecoscan detect``): an upper bound of what
a layer offers, not what the defaults reach. Layers:

* ``darkness``: minus the mean of the bands (what the defaults use on such scenes);
* ``texture-rms``: local RMS of log brightness minus its 1-pixel Gaussian blur, averaged
  over a Gaussian of half the smallest crown radius;
* ``texture-share``: the share of pixels, in the same window, whose high-pass exceeds
  three times its median over the scene;
* ``texture-filled``: ``texture-rms`` above Otsu's threshold, closed with a disc of the
  smallest crown radius, holes filled (crowns whose texture is a ring);
* ``darkness-minus-shadow``: darkness minus half the darkness one shadow offset up-sun;
  the offset is estimated from the image as the peak of the antisymmetric part of the
  cross-correlation of ``texture-rms`` (where the crowns are) with smoothed darkness (the
  crowns and their shadows): a shadow is a copy of its crown moved down-sun;
* ``darkness-shifted (truth)``: darkness blobs moved by the mean offset to the true
  crowns, per unit blob radius (uses the truth: a ceiling for any shift correction).

Scenes: tuning scenes (``benchmarks/tuning_scenes.py``, seeds 100-199) by default; with
``--suite-seeds`` the scene suite's conifer-pasture style on development seeds (0, 7, 11
only: the others are held out).

Run: ``nice python benchmarks/conifer_layers.py --tuning pines:100,pines:101,conifers:100``
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
from scipy import ndimage
from scipy.signal import fftconvolve

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

DEV_SEEDS = (0, 7, 11)


def _scenes(tuning: list[str], suite_seeds: list[int]):
    from benchmarks.tuning_scenes import (
        DIAMETER_M,
        PIXEL_M,
        make_tuning_scene,
        pines_shadow_azimuth_deg,
    )
    from ecoscan.synthetic import make_scene

    for item in tuning:
        style, seed = item.split(":")
        img, xy, _d = make_tuning_scene(style, int(seed), 640)
        f = 3 if style == "coarse" else 1
        true = pines_shadow_azimuth_deg(int(seed)) if style == "pines" else None
        lo, hi = DIAMETER_M[0] / PIXEL_M / f, DIAMETER_M[1] / PIXEL_M / f
        yield item, img[:3].astype(np.float32), xy, lo, hi, true
    for seed in suite_seeds:
        sc = make_scene("conifer-pasture", 512, seed)
        lo, hi = sc.diameter_range_m
        az = sc.recipe.sun.azimuth_deg
        yield (
            f"suite:{seed}",
            sc.image.astype(np.float32),
            np.column_stack([sc.col_px, sc.row_px]),
            lo / sc.pixel_size_m,
            hi / sc.pixel_size_m,
            (az + 180.0) % 360.0,
        )


def _rms(lb: np.ndarray, window: float) -> np.ndarray:
    hp = lb - ndimage.gaussian_filter(lb, 1.0)
    return np.sqrt(ndimage.gaussian_filter(hp * hp, window))


def _share(lb: np.ndarray, window: float) -> np.ndarray:
    hp = np.abs(lb - ndimage.gaussian_filter(lb, 1.0))
    return ndimage.gaussian_filter((hp > 3.0 * np.median(hp)).astype(np.float32), window)


def _filled(rough: np.ndarray, r: float) -> np.ndarray:
    from skimage.filters import threshold_otsu
    from skimage.morphology import disk

    m = rough > threshold_otsu(rough)
    m = ndimage.binary_fill_holes(ndimage.binary_closing(m, disk(max(1, round(r)))))
    return ndimage.gaussian_filter(m.astype(np.float32), 1.0)


def shadow_offset(lb: np.ndarray, r_min: float, d_max: float) -> tuple[float, float]:
    """Crown-to-shadow offset (columns, rows) from the antisymmetric cross-correlation."""
    rough = _rms(lb, 0.5 * r_min)
    dark = ndimage.gaussian_filter(-lb, 0.5 * r_min)
    rs = (rough - rough.mean()) / (rough.std() or 1.0)
    ds = (dark - dark.mean()) / (dark.std() or 1.0)
    reach = math.ceil(1.25 * d_max)
    h, w = lb.shape
    full = fftconvolve(ds, rs[::-1, ::-1], mode="full")
    c = full[h - 1 - reach : h + reach, w - 1 - reach : w + reach]
    anti = c - c[::-1, ::-1]
    yy, xx = np.mgrid[-reach : reach + 1, -reach : reach + 1]
    anti[np.hypot(yy, xx) < r_min] = -np.inf
    iy, ix = np.unravel_index(int(np.argmax(anti)), anti.shape)
    return float(xx[iy, ix]), float(yy[iy, ix])


def _blobs(layer, dmin, dmax, t):
    from ecoscan.detect.blobs import blob_scales, detect_blobs, prune_blobs, split_merged
    from ecoscan.detect.detectors.blob import PRUNE_MARGIN, SPLIT_RATIO

    scales = blob_scales(dmin / 2, dmax / 2, 3)
    b = detect_blobs(
        np.ascontiguousarray(layer, np.float32),
        scales,
        float(t),
        -np.inf,
        background=float(np.median(layer)),
    )
    x, y, r, s = b["col"], b["row"], math.sqrt(2.0) * b["sigma"], b["response"]
    m = split_merged(x, y, r, s, SPLIT_RATIO)
    x, y, r, s = x[~m], y[~m], r[~m], s[~m]
    k = prune_blobs(x, y, r, s, margin=PRUNE_MARGIN)
    return x[k], y[k], r[k], s[k]


def _f1(x, y, xy, tol) -> float:
    from ecoscan.stats.matching import match_points

    m = match_points(np.column_stack([x, y]), xy, tol)
    return 2 * m.n_matched / max(len(x) + len(xy), 1)


def best_f1(layer, xy, dmin, dmax, shift_to=None) -> float:
    """Best F1 over a sweep of response thresholds (hindsight)."""
    x0, _y0, _r0, s0 = _blobs(layer, dmin, dmax, 0.0)
    if s0.size == 0:
        return 0.0
    best = 0.0
    for t in np.quantile(s0[s0 > 0], np.linspace(0.0, 0.98, 40)):
        x, y, r, _s = _blobs(layer, dmin, dmax, t)
        if shift_to is not None and x.size:
            x, y = shift_to(x, y, r)
        best = max(best, _f1(x, y, xy, 0.5 * dmin))
    del x0
    return best


def _truth_shift(xy):
    from scipy.spatial import cKDTree

    def f(x, y, r):
        d, i = cKDTree(xy).query(np.column_stack([x, y]))
        near = d < 1.5 * r
        if not near.any():
            return x, y
        off = ((xy[i] - np.column_stack([x, y]))[near] / r[near, None]).mean(axis=0)
        return x + off[0] * r, y + off[1] * r

    return f


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tuning", default="pines:100,pines:101,pines:102,conifers:100")
    ap.add_argument("--suite-seeds", default="", help=f"development seeds {DEV_SEEDS} only")
    args = ap.parse_args(argv)
    tuning = [s for s in args.tuning.split(",") if s]
    if any(not 100 <= int(s.split(":")[1]) <= 199 for s in tuning):
        ap.error("tuning seeds are 100-199")
    suite = [int(s) for s in args.suite_seeds.split(",") if s]
    if any(s not in DEV_SEEDS for s in suite):
        ap.error(f"--suite-seeds: only the development seeds {DEV_SEEDS}")
    names = (
        "darkness",
        "texture-rms",
        "texture-share",
        "texture-filled",
        "darkness-minus-shadow",
        "darkness-shifted (truth)",
    )
    print("| scene | shadow azimuth (est / true) | " + " | ".join(names) + " |")
    print("|---" * (len(names) + 2) + "|")
    for label, img, xy, dmin, dmax, true_az in _scenes(tuning, suite):
        r = dmin / 2
        lb = np.log1p(img.mean(axis=0))
        dark = -img.mean(axis=0)
        rough = _rms(lb, 0.5 * r)
        vx, vy = shadow_offset(lb, r, dmax)
        up = ndimage.shift(dark - np.median(dark), (vy, vx), order=1, mode="nearest")
        layers = {
            "darkness": dark,
            "texture-rms": rough,
            "texture-share": _share(lb, 0.5 * r),
            "texture-filled": _filled(rough, r),
            "darkness-minus-shadow": dark - 0.5 * up,
        }
        f1 = [best_f1(layers[n], xy, dmin, dmax) for n in names[:-1]]
        f1.append(best_f1(dark, xy, dmin, dmax, shift_to=_truth_shift(xy)))
        az = math.degrees(math.atan2(vx, -vy)) % 360.0
        true = "-" if true_az is None else f"{true_az:.0f}"
        print(f"| {label} | {az:.0f} / {true} | " + " | ".join(f"{v:.3f}" for v in f1) + " |")


if __name__ == "__main__":
    main()
