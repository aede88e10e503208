"""Do two versions of the default imagery detection find the same points, to the bit?

For speed work on ``ecoscan/detect/`` that must not change a single detection: runs
:func:`ecoscan.detect.detect_raster` with only the diameters (and bands) given on

* the scene suite's development seeds 0, 7 and 11 of every style (``--size`` pixels,
  1536 by default: 16 sample windows and four 1024-pixel tiles, so the sample-window and
  tiling paths are both taken), and
* every tuning scene (``benchmarks/tuning_scenes.py``, every style, seeds 100-103),

and records, per scene, the SHA-256 of the points (x, y as float64 bytes), the detection
metadata and the notes, with the layer and the F1 against the known plants. Record on the
old code, compare on the new::

    python benchmarks/detect_suite_identity.py --src OLD_TREE --record before.json
    python benchmarks/detect_suite_identity.py --compare before.json   # exit 1 on a change

``--src`` imports ecoscan from another source tree (e.g. ``git archive main`` unpacked),
so both runs use this script and the same cached scenes (``--scenes``). About 76 scenes:
10-40 minutes on a shared 2-core machine; run it under ``nice``.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def digest(res) -> str:
    """SHA-256 of a detection's points, metadata and notes."""
    import numpy as np

    h = hashlib.sha256()
    h.update(np.ascontiguousarray(res.points.xy, dtype=np.float64).tobytes())
    h.update(json.dumps(res.thresholds, sort_keys=True, default=str).encode())
    h.update(json.dumps([str(n) for n in res.notes]).encode())
    return h.hexdigest()


def _f1(found, truth, tol: float) -> float:
    from ecoscan.stats.matching import match_points

    m = match_points(found, truth, tol)
    total = len(found) + len(truth)
    return 2 * m.n_matched / total if total else 1.0


def _suite_cases(folder: Path, size: int, seeds: tuple[int, ...]):
    """(name, raster path, settings keywords, truth xy, matching tolerance) per scene."""
    import numpy as np

    from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene

    for style in SCENE_STYLES:
        for seed in seeds:
            name = f"{style}_{size}_{seed}"
            meta = folder / f"{name}.json"
            if not meta.exists():
                sc = make_scene(style, size, seed)
                paths = write_scene(sc, folder, name=name)
                np.save(folder / f"{name}_truth.npy", np.column_stack([sc.x_m, sc.y_m]))
                facts = {
                    "d": list(sc.diameter_range_m),
                    "bands": sc.bands_option,
                    "tif": str(paths.raster),
                }
                meta.write_text(json.dumps(facts))
            m = json.loads(meta.read_text())
            kw = {"diameter_min_m": m["d"][0], "diameter_max_m": m["d"][1], "bands": m["bands"]}
            truth = np.load(folder / f"{name}_truth.npy")
            yield f"{style}-{seed}", m["tif"], kw, truth, 0.5 * m["d"][0]


def _tuning_cases(folder: Path):
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from tuning_scenes import DIAMETER_M, STYLES, TUNING_SEEDS, write_tuning_scene

    for style in STYLES:
        for seed in TUNING_SEEDS:
            path, truth = write_tuning_scene(folder, style, seed)
            kw = {
                "diameter_min_m": DIAMETER_M[0],
                "diameter_max_m": DIAMETER_M[1],
                "bands": "blue=1,green=2,red=3,nir=4" if style == "nir" else "",
            }
            yield f"tune-{style}-{seed}", str(path), kw, truth.xy, 0.3


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    todo = ap.add_mutually_exclusive_group(required=True)
    todo.add_argument("--record", metavar="FILE", help="write the digests to FILE")
    todo.add_argument("--compare", metavar="FILE", help="compare with digests in FILE")
    ap.add_argument("--src", help="import ecoscan from this source tree")
    ap.add_argument("--scenes", default="/tmp/ecoscan-suite-identity", help="scene cache")
    ap.add_argument("--size", type=int, default=1536, help="suite scene side in pixels")
    ap.add_argument("--seeds", default="0,7,11", help="suite seeds (development seeds)")
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--tile", type=int, default=1024, help="tile side in pixels")
    ap.add_argument("--no-tuning", action="store_true", help="suite scenes only")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(Path(args.src).resolve() if args.src else ROOT))
    from ecoscan.detect import DetectionSettings, detect_raster

    folder = Path(args.scenes)
    folder.mkdir(parents=True, exist_ok=True)
    seeds = tuple(int(s) for s in args.seeds.split(","))
    cases = [_suite_cases(folder, args.size, seeds)]
    if not args.no_tuning:
        cases.append(_tuning_cases(folder / "tuning"))
    out: dict[str, list] = {}
    t0 = time.perf_counter()
    for group in cases:
        for name, tif, kw, truth, tol in group:
            s = DetectionSettings(tile_size_px=args.tile, **kw)
            res = detect_raster(tif, s, workers=args.workers)
            f1 = round(_f1(res.points.xy, truth, tol), 4)
            out[name] = [digest(res), res.thresholds.get("layer"), f1]
            print(name, *out[name], f"{time.perf_counter() - t0:.0f}s", flush=True)
    if args.record:
        Path(args.record).write_text(json.dumps(out, indent=1))
        print(f"recorded {len(out)} scenes in {args.record}")
        return 0
    before = json.loads(Path(args.compare).read_text())
    changed = [k for k in out if before.get(k) != out[k]]
    missing = [k for k in before if k not in out]
    print(f"identical {len(out) - len(changed)} of {len(out)}; changed: {changed or 'none'}")
    for k in changed:
        print(" ", k, "before", before.get(k), "now", out[k])
    if missing:
        print("not run now:", missing)
    return 1 if changed else 0


if __name__ == "__main__":
    raise SystemExit(main())
