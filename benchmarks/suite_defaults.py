"""Default detector F1 per scene-suite style on chosen seeds (the held-out measurement).

Each scene is rendered with ``ecoscan.synthetic.make_scene(style, size, seed)``, written as
a GeoTIFF, and detected with only the style's ``--diameter`` (and ``--bands``); a detection
counts when it lies within half the smallest stated diameter of a plant (one-to-one).
Prints F1, precision, recall and the chosen layer per scene, and the mean (lowest) F1 per
style. Keep the seeds you report apart from those you tune on (docs/detection.md).

Run under nice:  nice python benchmarks/suite_defaults.py --seeds 61,62,63 --size 512
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main(argv: list[str] | None = None) -> None:
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points
    from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="61,62,63", help="comma-separated suite seeds")
    ap.add_argument("--size", type=int, default=512, help="scene size in pixels per side")
    ap.add_argument("--styles", default=",".join(SCENE_STYLES), help="comma-separated styles")
    args = ap.parse_args(argv)
    seeds = [int(s) for s in args.seeds.split(",")]
    with tempfile.TemporaryDirectory() as tmp:
        for style in args.styles.split(","):
            f1s = []
            for seed in seeds:
                sc = make_scene(style, args.size, seed)
                paths = write_scene(sc, tmp)
                lo, hi = sc.diameter_range_m
                res = detect_raster(
                    paths.raster,
                    DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, bands=sc.bands_option),
                )
                m = match_points(res.points.xy, np.column_stack([sc.x_m, sc.y_m]), 0.5 * lo)
                f1s.append(2 * m.n_matched / (res.n + sc.n))
                print(
                    f"{style} seed {seed}: F1 {f1s[-1]:.3f} precision "
                    f"{m.n_matched / max(res.n, 1):.3f} recall {m.n_matched / sc.n:.3f} "
                    f"layer {res.thresholds.get('layer')}",
                    flush=True,
                )
            print(f"{style}: mean F1 {np.mean(f1s):.3f} (lowest {np.min(f1s):.3f})", flush=True)


if __name__ == "__main__":
    main()
