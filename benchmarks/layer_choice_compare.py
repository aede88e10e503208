"""Layer, thresholds and F1 of default detection, two versions side by side.

For changes to the automatic layer choice (``ecoscan/detect/autotune.py``,
``ecoscan/detect/detectors/blob_auto.py``) that change thresholds a little rather than not
at all, e.g. fewer or other sample windows: runs :func:`ecoscan.detect.detect_raster` with
only the diameters (and bands) on the scenes of ``benchmarks/detect_suite_identity.py``
(the scene suite, every style, at ``--size`` pixels; ``--tuning`` adds the tuning scenes)
and records, per scene, the chosen layer, every layer's separation score, the background
statistics and thresholds, the number of points, the F1 against the known plants
(one-to-one within half the smallest diameter) and the SHA-256 of points, metadata and
notes. Record each version, then compare::

    python benchmarks/layer_choice_compare.py --src OLD_TREE --record old.json --tuning
    python benchmarks/layer_choice_compare.py --record new.json --tuning
    python benchmarks/layer_choice_compare.py --compare old.json new.json

The comparison prints, per scene, whether the layer is the same, the largest relative
change of the thresholds and F1 old -> new, then how many scenes kept their layer and
their exact points, and the mean and lowest F1 per style. Scenes are synthetic
(``ecoscan.synthetic.make_scene``); suite seeds are given with ``--seeds`` (development
seeds 0, 7, 11 by default). About 10 minutes per version with ``--tuning`` on a shared
2-core machine; run it under ``nice``.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: Threshold fields compared (numbers or lists of numbers in the detection metadata).
FIELDS = (
    "background",
    "background_spread",
    "min_contrast",
    "min_response_by_scale",
    "vegetation_threshold",
    "threshold_raise",
    "ring_mads",
    "strong_blob",
)


def _record(args) -> int:
    sys.path.insert(0, str(Path(args.src).resolve() if args.src else ROOT))
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from detect_suite_identity import _f1, _suite_cases, _tuning_cases, digest

    from ecoscan.detect import DetectionSettings, detect_raster

    folder = Path(args.scenes)
    folder.mkdir(parents=True, exist_ok=True)
    seeds = tuple(int(s) for s in args.seeds.split(","))
    cases = [_suite_cases(folder, args.size, seeds)]
    if args.tuning:
        cases.append(_tuning_cases(folder / "tuning"))
    out: dict[str, dict] = {}
    t0 = time.perf_counter()
    for group in cases:
        for name, tif, kw, truth, tol in group:
            res = detect_raster(tif, DetectionSettings(tile_size_px=args.tile, **kw))
            th = res.thresholds
            out[name] = {
                "layer": th.get("layer"),
                "scores": th.get("layer_scores"),
                **{k: th.get(k) for k in FIELDS},
                "second": th.get("second_layer_thresholds"),
                "n": int(res.n),
                "f1": round(_f1(res.points.xy, truth, tol), 4),
                "digest": digest(res),
            }
            print(name, out[name]["layer"], out[name]["f1"], f"{time.perf_counter() - t0:.0f}s")
    Path(args.record).write_text(json.dumps(out, indent=1))
    return 0


def _numbers(v) -> list[float]:
    if v is None:
        return []
    if isinstance(v, dict):
        return [x for k in sorted(v) for x in _numbers(v[k])]
    if isinstance(v, (list, tuple)):
        return [x for item in v for x in _numbers(item)]
    return [float(v)] if isinstance(v, (int, float)) else []


def _largest_change(a: dict, b: dict) -> float:
    """Largest relative change over the threshold fields (0 when identical)."""
    worst = 0.0
    for k in (*FIELDS, "second"):
        x, y = _numbers(a.get(k)), _numbers(b.get(k))
        if len(x) != len(y):
            return float("inf")
        for p, q in zip(x, y, strict=True):
            if p != q:
                worst = max(worst, abs(q - p) / max(abs(p), abs(q), 1e-12))
    return worst


def _compare(old_path: str, new_path: str) -> int:
    old = json.loads(Path(old_path).read_text())
    new = json.loads(Path(new_path).read_text())
    by_style: dict[str, list[tuple[float, float]]] = {}
    same_layer = identical = 0
    print(f"{'scene':28} {'layer old -> new':28} {'max rel. change':>15} {'F1 old -> new':>16}")
    for name in old:
        if name not in new:
            continue
        a, b = old[name], new[name]
        same_layer += a["layer"] == b["layer"]
        identical += a["digest"] == b["digest"]
        change = _largest_change(a, b)
        lay = a["layer"] if a["layer"] == b["layer"] else f"{a['layer']} -> {b['layer']}"
        print(f"{name:28} {lay:28} {change:15.3f} {a['f1']:7.4f} -> {b['f1']:.4f}")
        style = name.rsplit("-", 1)[0]
        by_style.setdefault(style, []).append((a["f1"], b["f1"]))
    n = sum(len(v) for v in by_style.values())
    print(f"\nsame layer {same_layer} of {n}; identical points, metadata and notes {identical}")
    print(f"{'style':22} {'mean F1 old':>11} {'new':>7} {'lowest old':>11} {'new':>7}")
    for style, pairs in by_style.items():
        o = [p[0] for p in pairs]
        m = [p[1] for p in pairs]
        print(
            f"{style:22} {sum(o) / len(o):11.4f} {sum(m) / len(m):7.4f} {min(o):11.4f} "
            f"{min(m):7.4f}"
        )
    return 0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    todo = ap.add_mutually_exclusive_group(required=True)
    todo.add_argument("--record", metavar="FILE", help="write this version's figures to FILE")
    todo.add_argument("--compare", nargs=2, metavar=("OLD", "NEW"), help="compare two records")
    ap.add_argument("--src", help="import ecoscan from this source tree")
    ap.add_argument("--scenes", default="/tmp/ecoscan-suite-identity", help="scene cache")
    ap.add_argument("--size", type=int, default=1536, help="suite scene side in pixels")
    ap.add_argument("--seeds", default="0,7,11", help="suite seeds")
    ap.add_argument("--tile", type=int, default=1024, help="tile side in pixels")
    ap.add_argument("--tuning", action="store_true", help="also the tuning scenes")
    args = ap.parse_args(argv)
    if args.compare:
        return _compare(*args.compare)
    return _record(args)


if __name__ == "__main__":
    raise SystemExit(main())
