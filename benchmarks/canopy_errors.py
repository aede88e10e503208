"""Closed-canopy error classes of the default detector: missed, split, merged, offset.

For each scene, detections are matched one-to-one with the truth within half the smallest
diameter (as ``benchmarks/suite_defaults.py`` does). The errors left are sorted into:

* **split**: an unmatched detection inside a crown (nearest crown by distance over radius,
  within one radius) that already has its matched point: one crown, two points;
* **offset**: an unmatched detection inside an unmatched crown: the crown has its point,
  but farther from its centre than the tolerance;
* **merged**: an unmatched crown with no point of its own whose nominal circle holds a
  point matched to a neighbour: the neighbour's region took it;
* **missed**: an unmatched crown with no point inside its circle at all;
* **gap**: an unmatched detection inside no crown.

Per class the crowns' diameters (small: the lowest third of the stated range on a log
scale, large: the top third) and their brightness (mean log green inside half the radius,
minus the scene's median, in robust SD: negative = shaded) are printed.

Run: ``nice python benchmarks/canopy_errors.py --suite-seeds 0,7,11 --tuning
canopy:100,stand:100,domes:100,oaks:100``. Suite seeds 0, 7 and 11 are the development
seeds; tuning scenes use seeds 100-199 only.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.append(str(ROOT))
sys.path.append(str(ROOT / "benchmarks"))

CLASSES = ("missed", "merged", "split", "offset", "gap")


def classify(det_xy, truth_xy, radius, tol):
    """Error classes of one scene (see the module docstring).

    Returns
    -------
    dict
        ``tp``, ``fp``, ``fn``, and for each class the indices of the crowns concerned
        (``gap``: detection indices).
    """
    from scipy.spatial import cKDTree

    from ecoscan.stats.matching import match_points

    m = match_points(det_xy, truth_xy, tol)
    matched_t = np.zeros(len(truth_xy), bool)
    matched_t[m.index_b] = True
    matched_d = np.zeros(len(det_xy), bool)
    matched_d[m.index_a] = True
    out = {k: [] for k in CLASSES}
    tree = cKDTree(truth_xy)
    offset_owner = set()
    for k in np.flatnonzero(~matched_d):
        cand = tree.query_ball_point(det_xy[k], float(radius.max()))
        if not cand:
            out["gap"].append(k)
            continue
        cand = np.asarray(cand)
        rel = np.hypot(*(truth_xy[cand] - det_xy[k]).T) / radius[cand]
        j = cand[int(np.argmin(rel))]
        if rel.min() > 1:
            out["gap"].append(k)
        elif matched_t[j]:
            out["split"].append(j)
        else:
            out["offset"].append(j)
            offset_owner.add(j)
    dtree = cKDTree(det_xy) if len(det_xy) else None
    for j in np.flatnonzero(~matched_t):
        if j in offset_owner:
            continue
        near = dtree.query_ball_point(truth_xy[j], float(radius[j])) if dtree else []
        if any(matched_d[k] for k in near):
            out["merged"].append(j)
        else:
            out["missed"].append(j)
    out["tp"], out["fp"] = m.n_matched, len(det_xy) - m.n_matched
    out["fn"] = len(truth_xy) - m.n_matched
    return out


def _brightness(image, roles, xy_px, radius_px):
    """Mean log green inside half of each crown's radius, in robust SD from the median."""
    from ecoscan.detect.canopy import canopy_layer

    lay = canopy_layer(image.astype(np.float32), roles)
    med = np.median(lay)
    sd = 1.4826 * np.median(np.abs(lay - med))
    out = np.empty(len(xy_px))
    h, w = lay.shape
    for i, ((c, r), rad) in enumerate(zip(xy_px, radius_px, strict=True)):
        rr = max(1.0, 0.5 * rad)
        r0, r1 = int(max(0, r - rr)), int(min(h, r + rr + 1))
        c0, c1 = int(max(0, c - rr)), int(min(w, c + rr + 1))
        yy, xx = np.mgrid[r0:r1, c0:c1]
        sel = (yy - r) ** 2 + (xx - c) ** 2 <= rr * rr
        out[i] = (lay[r0:r1, c0:c1][sel].mean() - med) / sd if sel.any() else np.nan
    return out


def _report(name, res, diam, bright, lo, hi, extra=""):
    cuts = np.exp(np.log(lo) + np.array([1, 2]) / 3 * np.log(hi / lo))
    size = np.where(diam < cuts[0], "small", np.where(diam < cuts[1], "mid", "large"))
    n = len(diam)
    p = res["tp"] / max(res["tp"] + res["fp"], 1)
    r = res["tp"] / max(n, 1)
    f1 = 2 * res["tp"] / max(2 * res["tp"] + res["fp"] + res["fn"], 1)
    print(f"{name}: truth {n} tp {res['tp']} fp {res['fp']} fn {res['fn']} "
          f"P {p:.3f} R {r:.3f} F1 {f1:.3f} {extra}")
    for k in CLASSES:
        idx = np.asarray(res[k], int)
        if k == "gap":
            print(f"   {k:7} {idx.size}")
            continue
        sizes = Counter(size[idx])
        b = f"{np.nanmedian(bright[idx]):+.2f}" if idx.size else "  - "
        print(f"   {k:7} {idx.size:3}  small {sizes['small']:2} mid {sizes['mid']:2} "
              f"large {sizes['large']:2}  median brightness {b} SD "
              f"(all crowns {np.nanmedian(bright):+.2f})")
    return {k: len(res[k]) for k in CLASSES} | {"f1": f1}


def main(argv=None):
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.synthetic import make_scene, write_scene

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--suite-seeds", default="0,7,11")
    ap.add_argument("--size", type=int, default=512)
    ap.add_argument("--tuning", default="", help="style:seed,... (seeds 100-199)")
    args = ap.parse_args(argv)
    total = Counter()
    with tempfile.TemporaryDirectory() as tmp:
        for s in [int(v) for v in args.suite_seeds.split(",") if v]:
            sc = make_scene("closed-canopy", args.size, s)
            paths = write_scene(sc, Path(tmp))
            lo, hi = sc.diameter_range_m
            settings = DetectionSettings(diameter_min_m=lo, diameter_max_m=hi)
            res = detect_raster(paths.raster, settings)
            truth = np.column_stack([sc.x_m, sc.y_m])
            cls = classify(res.points.xy, truth, sc.diameter_m / 2, 0.5 * lo)
            ps = 0.1
            br = _brightness(sc.image, ("red", "green", "blue"),
                             np.column_stack([sc.col_px, sc.row_px]), sc.diameter_m / 2 / ps)
            got = _report(f"suite closed-canopy seed {s}", cls, sc.diameter_m, br, lo, hi,
                          f"layer {res.thresholds.get('layer')}")
            total.update({f"suite {k}": v for k, v in got.items() if k != "f1"})
        for item in [v for v in args.tuning.split(",") if v]:
            import tuning_scenes as ts

            style, seed = item.split(":")
            seed = int(seed)
            if not 100 <= seed <= 199:
                ap.error("tuning seeds are 100-199")
            path, truth = ts.write_tuning_scene(Path(tmp), style, seed)
            lo, hi = ts.DIAMETER_M
            res = detect_raster(path, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
            img, xy, d = ts.make_tuning_scene(style, seed)
            cls = classify(res.points.xy, truth.xy, truth.attrs["diameter_m"] / 2, 0.3)
            br = _brightness(img, ("red", "green", "blue"), xy, d / 2)
            got = _report(f"tuning {style} {seed}", cls, truth.attrs["diameter_m"], br, lo, hi,
                          f"layer {res.thresholds.get('layer')}")
            total.update({f"tuning {k}": v for k, v in got.items() if k != "f1"})
    print("totals:", dict(total))


if __name__ == "__main__":
    main()
