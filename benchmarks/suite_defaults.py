"""Default-detector F1 per scene-suite style on chosen seeds: the held-out check of the
imagery defaults.

The defaults (``ecoscan.detect.autotune``) are tuned only on ``benchmarks/tuning_scenes.py``;
this script measures them on the scene suite (``ecoscan.synthetic``), a different
generator. For each style and seed a scene is rendered, written as a GeoTIFF and detected
with only the style's ``--diameter`` (and ``--bands`` for multispectral) given. A detection
matches a plant one-to-one within half the smallest stated diameter. Printed per scene:
found, truth, precision, recall, F1, the layer and the threshold factor; per style the mean
and lowest F1. Seeds used by the documentation: 0, 7 and 11 for diagnosis only; 31-33,
41-43, 51-53, 61-63 and 71-73 each measured once for a table in docs/detection-history.md.

Run: ``nice python benchmarks/suite_defaults.py --seeds 61,62,63 --size 512``. To compare
with an earlier version of the code, run the same command with ``PYTHONPATH`` pointing to
an export of that version (``git archive REV | tar -x -C DIR``).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.append(str(ROOT))


def main(argv: list[str] | None = None) -> None:
    import ecoscan
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points
    from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="61,62,63", help="comma-separated suite seeds")
    ap.add_argument("--size", type=int, default=512, help="scene side in pixels")
    ap.add_argument("--styles", default=",".join(SCENE_STYLES), help="comma-separated styles")
    args = ap.parse_args(argv)
    seeds = [int(s) for s in args.seeds.split(",")]
    print(f"ecoscan from {Path(ecoscan.__file__).parent}", flush=True)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for style in args.styles.split(","):
            f1s = []
            for seed in seeds:
                sc = make_scene(style, args.size, seed)
                paths = write_scene(sc, Path(tmp))
                lo, hi = sc.diameter_range_m
                t0 = time.process_time()
                res = detect_raster(
                    paths.raster,
                    DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, bands=sc.bands_option),
                )
                cpu = time.process_time() - t0
                m = match_points(res.points.xy, np.column_stack([sc.x_m, sc.y_m]), 0.5 * lo)
                p = m.n_matched / max(res.n, 1)
                r = m.n_matched / max(sc.n, 1)
                f1 = 2 * m.n_matched / max(res.n + sc.n, 1)
                f1s.append(f1)
                th = res.thresholds
                print(
                    f"{style:16} seed {seed}: found {res.n:4} truth {sc.n:4} precision {p:.3f} "
                    f"recall {r:.3f} F1 {f1:.3f} layer {th.get('layer', res.index)} "
                    f"raise {th.get('threshold_raise', 1.0):.2f} weak "
                    f"{th.get('weak_separation', '-')} cpu {cpu:.1f} s",
                    flush=True,
                )
            rows.append((style, float(np.mean(f1s)), float(np.min(f1s))))
    print("\n| style | F1 mean (lowest) |\n|---|---|")
    for style, mean, low in rows:
        print(f"| {style} | {mean:.3f} ({low:.3f}) |")


if __name__ == "__main__":
    main()
