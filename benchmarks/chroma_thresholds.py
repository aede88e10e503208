"""Why the log-chromaticity layer's default thresholds fail, and what a rule would give.

A diagnosis tool for the ``chroma`` layer of the imagery defaults
(``ecoscan/detect/chromaticity.py``; docs/detection-history.md, "Conifer pasture, third round").
For each scene it builds the layer as ``choose_layer`` does (projection chosen on the
whole image), finds every blob candidate, and reports:

* the background statistics the defaults use (median, robust SD, response spread) and
  the separation score of every layer, the factor the chroma layer needs to win;
* the best F1 of the layer with the response threshold chosen in hindsight;
* F1 of full detection (split and prune as ``ecoscan detect``) with the thresholds of
  each background rule under test.

Scenes: tuning scenes (``benchmarks/tuning_scenes.py``, seeds 100-199) and, with
``--suite``, scene-suite styles on the development seeds (0, 7, 11 only).

Run: ``nice python benchmarks/chroma_thresholds.py --tuning pines:100,pasture:100
--suite conifer-pasture:0,conifer-pasture:7``
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

DEV_SEEDS = (0, 7, 11)


def _scenes(tuning: list[str], suite: list[str]):
    from benchmarks.tuning_scenes import DIAMETER_M, PIXEL_M, make_tuning_scene
    from ecoscan.synthetic import make_scene

    for item in tuning:
        style, seed = item.split(":")
        img, xy, _d = make_tuning_scene(style, int(seed), 640)
        f = 3 if style == "coarse" else 1
        lo, hi = DIAMETER_M[0] / PIXEL_M / f, DIAMETER_M[1] / PIXEL_M / f
        roles = ("blue", "green", "red", "nir") if style == "nir" else ("red", "green", "blue")
        yield f"tuning {item}", img.astype(np.float32), roles, xy, lo, hi
    for item in suite:
        style, seed = item.split(":")
        sc = make_scene(style, 512, int(seed))
        lo, hi = sc.diameter_range_m
        roles = ("blue", "green", "red", "nir") if sc.bands_option else ("red", "green", "blue")
        yield (
            f"suite {item}",
            sc.image.astype(np.float32),
            roles,
            np.column_stack([sc.col_px, sc.row_px]),
            lo / sc.pixel_size_m,
            hi / sc.pixel_size_m,
        )


def detect_f1(layer, scales, min_response, min_value, background, xy, dmin, ring=None):
    """F1 of full detection on one layer (split and prune as ``ecoscan detect``)."""
    from ecoscan.detect.blobs import detect_blobs, prune_blobs, split_merged
    from ecoscan.detect.detectors.blob import PRUNE_MARGIN, SPLIT_RATIO
    from ecoscan.stats.matching import match_points

    b = detect_blobs(
        np.ascontiguousarray(layer, np.float32),
        scales,
        min_response,
        min_value,
        background=background,
        ring_mads=ring,
    )
    x, y, r, s = b["col"], b["row"], math.sqrt(2.0) * b["sigma"], b["response"]
    m = split_merged(x, y, r, s, SPLIT_RATIO)
    x, y, r, s = x[~m], y[~m], r[~m], s[~m]
    k = prune_blobs(x, y, r, s, margin=PRUNE_MARGIN)
    x, y = x[k], y[k]
    mm = match_points(np.column_stack([x, y]), xy, 0.5 * dmin)
    return 2 * mm.n_matched / max(x.size + len(xy), 1), int(x.size)


def _chroma_detail(at, job, cache, res, scales, xy, dmin) -> None:
    """Candidates of the chroma layer against the truth; hindsight sweep."""
    from scipy.spatial import cKDTree

    layer = job.layers[0]
    vals = layer.ravel()
    m = float(np.median(vals))
    q = np.quantile(vals, [0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99])
    lo = vals[vals <= m]
    hi = vals[vals >= m]
    print(
        "    layer quantiles 1/5/25/50/75/95/99 %: "
        + " ".join(f"{v:.3f}" for v in q)
        + f" | robust SD lower side {1.4826 * np.median(m - lo):.4f}"
        f" upper side {1.4826 * np.median(hi - m):.4f}"
    )
    lp = at._LayerPyramids(job.layers, cache, res["background"])
    cand = at._candidates(lp, 0.0)
    d, _i = cKDTree(xy).query(np.column_stack([cand["col"], cand["row"]]))
    true = d < 0.5 * dmin
    si = at._scale_index(scales, cand["sigma"])
    kk = at.response_mads(scales)
    qq = cand["response"] / res["response_spread"][si] * (at.RESPONSE_MADS / kk[si])
    z = (cand["value"] - res["background"]) / res["spread"]
    for name, arr in (("q", qq), ("z", z)):
        print(
            f"    {name}: near a crown {true.sum()} quantiles 10/50/90 "
            + " ".join(f"{v:.2f}" for v in np.quantile(arr[true], [0.1, 0.5, 0.9]))
            + f" | others {(~true).sum()} (top 200) "
            + " ".join(f"{v:.2f}" for v in np.quantile(np.sort(arr[~true])[-200:], [0.1, 0.5, 0.9]))
        )
    best = (0.0, 0.0)
    for t in np.quantile(cand["response"][cand["response"] > 0], np.linspace(0, 0.995, 50)):
        f1, _n = detect_f1(layer, scales, float(t), -np.inf, res["background"], xy, dmin)
        best = max(best, (f1, float(t)))
    print(f"    hindsight F1 {best[0]:.3f} at response {best[1]:.4g}")


def main(argv: list[str] | None = None) -> None:
    from ecoscan.detect import autotune as at
    from ecoscan.detect.blobs import blob_scales

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tuning", default="pines:100,conifers:100,pasture:100")
    ap.add_argument("--suite", default="", help="style:seed, development seeds only")
    args = ap.parse_args(argv)
    tuning = [s for s in args.tuning.split(",") if s]
    if any(not 100 <= int(s.split(":")[1]) <= 199 for s in tuning):
        ap.error("tuning seeds are 100-199")
    suite = [s for s in args.suite.split(",") if s]
    if any(int(s.split(":")[1]) not in DEV_SEEDS for s in suite):
        ap.error(f"--suite: only the development seeds {DEV_SEEDS}")
    for label, img, roles, xy, dmin, dmax in _scenes(tuning, suite):
        scales = blob_scales(dmin / 2, dmax / 2, 3)
        h, w = img.shape[1:]
        win = at.SampleWindow(img, np.ones((h, w), bool), (slice(0, h), slice(0, w)))
        choice = at.choose_layer([win], roles, scales, pool=None)
        cache = at._WindowCache([win], scales)
        jobs = at._layer_jobs([win], roles, scales, at.candidate_layers(roles), cache.stride)
        if at._has_colour(roles):
            jobs.extend(at._invariant_jobs([win], roles, scales))
        print(f"== {label}: chosen {choice.name}, scores {choice.scores}")
        for job in jobs:
            res = at._score_layer(job.layers, cache, centre=job.centre)
            layer = job.layers[0]
            thr = res["raise"] * at.response_mads(scales) * res["response_spread"]
            mv = -math.inf if res["closed"] else res["background"] + at.VALUE_MADS * res["spread"]
            f1, n = detect_f1(
                layer,
                scales,
                thr,
                mv,
                res["background"],
                xy,
                dmin,
                at.RING_MADS if res["raise"] > 1 else None,
            )
            print(
                f"  {job.label:13} sep {res['separation']:6.2f} kept {res['candidates']:4} "
                f"raise {res['raise']:.2f} near {res['near_share']:.2f} | default F1 {f1:.3f} "
                f"({n} pts, truth {len(xy)}) bg {res['background']:.4g} sd {res['spread']:.4g}"
            )
            if job.label == at.INVARIANT:
                _chroma_detail(at, job, cache, res, scales, xy, dmin)


if __name__ == "__main__":
    main()
