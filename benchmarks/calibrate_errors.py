"""What the calibrated detector gets wrong on the scene suite, error by error.

For each style and seed: calibrate as ``benchmarks/scene_suite.py --calibrated`` does (the
top-left 12 % plot, or ``--train-plots N --train-fraction F`` spread plots; ``--diameters``
gives calibrate the mapped crown diameters), detect on the test plot, match within half the
style's smallest diameter (``ecoscan validate``'s rule) and sort every error into a class
(:func:`error_classes`):

* missed plants: *off-centre* (an unmatched detection lies inside its crown: found, but
  farther from the centre than the tolerance), *merged* (inside its crown lies a detection
  matched to a neighbour: two crowns gave one point), *missed* (no detection in its crown);
  each also split into the smaller and the larger half of the scene's crown diameters;
* false detections: *split* (inside the crown of a plant that another detection matched:
  one crown gave two points), *off-centre* (inside the crown of a missed plant), *ground*
  (inside no crown).

Run: ``nice python benchmarks/calibrate_errors.py --styles closed-canopy --seeds 0,7,11``.
Not run by the test suite.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.append(str(ROOT))


def error_classes(
    found: np.ndarray, truth: np.ndarray, diameter_m: np.ndarray, tol: float
) -> dict[str, int]:
    """Count the errors of ``found`` against ``truth`` (metres) by class (module docstring).

    Examples
    --------
    >>> t = np.array([[0.0, 0.0], [10.0, 0.0], [20.0, 0.0], [30.0, 0.0]])
    >>> f = np.array([[0.0, 0.0], [0.9, 0.0], [11.2, 0.0], [50.0, 50.0]])
    >>> c = error_classes(f, t, np.full(4, 3.0), 0.5)
    >>> c["false split"], c["false off-centre"], c["false ground"]
    (1, 1, 1)
    >>> c["missed off-centre"], c["missed"] + c["merged"]
    (1, 2)
    """
    from scipy.spatial import cKDTree

    from ecoscan.stats.matching import match_points

    m = match_points(found, truth, tol)
    matched_t = np.zeros(len(truth), bool)
    matched_t[m.index_b] = True
    matched_f = np.zeros(len(found), bool)
    matched_f[m.index_a] = True
    big = diameter_m > np.median(diameter_m)
    out = {
        k: 0
        for k in (
            "missed off-centre",
            "merged",
            "missed",
            "missed small",
            "missed large",
            "false split",
            "false off-centre",
            "false ground",
        )
    }
    tree_f = cKDTree(found) if len(found) else None
    for j in np.flatnonzero(~matched_t):
        out["missed large" if big[j] else "missed small"] += 1
        near = tree_f.query_ball_point(truth[j], 0.5 * diameter_m[j]) if tree_f else []
        if any(not matched_f[i] for i in near):
            out["missed off-centre"] += 1
        elif near:
            out["merged"] += 1
        else:
            out["missed"] += 1
    # the crown each false detection lies in (the nearest plant whose crown holds it)
    tree_t = cKDTree(truth)
    for i in np.flatnonzero(~matched_f):
        d, j = tree_t.query(found[i], k=min(4, len(truth)))
        d, j = np.atleast_1d(d), np.atleast_1d(j)
        inside = [jj for dd, jj in zip(d, j, strict=True) if dd <= 0.5 * diameter_m[jj]]
        if not inside:
            out["false ground"] += 1
        elif matched_t[inside[0]]:
            out["false split"] += 1
        else:
            out["false off-centre"] += 1
    return out


def main(argv: list[str] | None = None) -> int:
    from calibrate_speed import calibrate_and_score
    from scene_suite import CALIBRATED_MIN_SIZE

    from ecoscan.errors import InputError
    from ecoscan.synthetic import make_scene

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--styles", default="closed-canopy")
    ap.add_argument("--seeds", default="0,7,11")
    ap.add_argument("--size", type=int, default=800)
    ap.add_argument("--train-plots", type=int, default=1)
    ap.add_argument("--train-fraction", type=float, default=0.12)
    ap.add_argument("--diameters", action="store_true")
    args = ap.parse_args(argv)
    for style in args.styles.split(","):
        for seed in (int(s) for s in args.seeds.split(",")):
            size = max(args.size, CALIBRATED_MIN_SIZE.get(style, 0))
            sc = make_scene(style, size, seed)
            with tempfile.TemporaryDirectory() as tmp:
                try:
                    got = calibrate_and_score(
                        sc,
                        Path(tmp),
                        f"{style}_{seed}",
                        train_plots=args.train_plots,
                        train_fraction=args.train_fraction,
                        diameters=args.diameters,
                    )
                except InputError as exc:
                    print(f"{style} seed {seed}: not calibrated: {exc}", flush=True)
                    continue
            import shapely

            test = shapely.union_all([p.geometry for p in got["test_plots"].plots])
            xy = np.column_stack([sc.x_m, sc.y_m])
            inside = shapely.contains_xy(test, xy[:, 0], xy[:, 1])
            pts = got["points"].xy
            pts = pts[shapely.contains_xy(test, pts[:, 0], pts[:, 1])]
            tol = 0.5 * sc.diameter_range_m[0]
            c = error_classes(pts, xy[inside], sc.diameter_m[inside], tol)
            d = got["result"].detector
            route = d.layer + (" split" if getattr(d, "split", None) else "")
            row = got["row"]
            print(
                f"{style} seed {seed}: {route}, test F1 {row.f1:.3f} (P {row.precision:.3f} "
                f"R {row.recall:.3f}), {int(inside.sum())} plants; "
                + ", ".join(f"{k} {v}" for k, v in c.items()),
                flush=True,
            )
    return 0


if __name__ == "__main__":
    sys.exit(main())
