"""Every route calibration compares, scored on new ground, and what each choice rule picks.

Calibration compares routes by cross-validated F1 on the training plot: each simple layer
(Excess Green, NDVI, darkness, brightness), and, once the classifier is trained, the plant
probability's blobs, their crown split and the crown-centre peaks. With 20-40 mapped
plants their cross-validated F1 differ by less than their fold-to-fold noise, so the rule
that picks a route matters. This script calibrates each scene once, writes the detector
of *every* route (``CalibrationResult.route_detectors``), detects with each on the test
plot (the rest of the scene) and scores it there, then reports which route each choice
rule picks from the cross-validated scores alone and the test F1 that pick gets:

* ``margin``: a learnt route must beat the best simple layer by ``CLASSIFIER_MARGIN``
  (``ROUTE_LEAN = "simple"``, the rule up to calib11);
* ``learnt k``: the learnt route is kept unless the best simple layer beats it by the
  margin and k standard errors of the paired fold differences (``ROUTE_LEAN = "learnt"``,
  ``LEARNT_SE = k``; k = inf always keeps it); ``learnt k always``: the same, with the
  classifier trained even where a simple layer reaches ``GOOD_ENOUGH_F1`` in every fold
  (the other rules keep calibration's skip; ``--always-classifier`` trains it so that
  the ``always`` rules can be scored);
* ``best``: the highest cross-validated F1, no margin.

``--defaults`` also scores the default detector (``--diameter`` of the style) on the test
plot. The calibrated scenes are the scene suite's (``benchmarks/scene_suite.py
--calibrated``'s protocol: the top-left 12 %, positions only; JPEG and coarse at 1000 px);
only the development seeds 0, 7, 11 and the diagnosis block 1000-1020 are accepted.
``--jsonl FILE`` appends one JSON row per scene; ``--summary FILE...`` prints the table of
rules from such files without running anything.

Run: ``nice python benchmarks/calibrate_routes.py --styles dry-shrubs --seeds 0,7,11``.
Not run by the test suite.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))
if str(ROOT) not in sys.path:
    sys.path.append(str(ROOT))

ALLOWED_SEEDS = {0, 7, 11, *range(1000, 1021)}
LEARNT = ("probability blobs", "probability split", "centre peaks")
RULES = (
    "margin",
    "best",
    "learnt 0",
    "learnt 1",
    "learnt 2",
    "learnt inf",
    "learnt 1 always",
    "learnt 2 always",
)


def _score(cv: dict):
    from ecoscan.detect.calibration import LayerScore

    return LayerScore.from_counts(cv["name"], (cv["tp"], cv["fp"], cv["fn"]), cv["folds"])


def _gate(score) -> bool:
    """Calibration's skip of the classifier (``good_enough`` at GOOD_ENOUGH_F1 = 0.98),
    whatever ``--always-classifier`` set in this process."""
    f = np.asarray(score.fold_f1, float)
    f = f[np.isfinite(f)]
    return bool(score.f1 >= 0.98 and (f.size == 0 or f.min() >= 0.98))


def pick(routes: dict[str, dict], rule: str) -> str:
    """The route ``rule`` picks from cross-validated scores (``routes``: name -> counts and
    fold F1, as stored by :func:`scene_row`).

    Examples
    --------
    >>> r = {"exg": {"name": "exg", "tp": 30, "fp": 0, "fn": 1, "folds": [1, 1, .96, 1]},
    ...      "probability blobs": {"name": "probability", "tp": 30, "fp": 1, "fn": 1,
    ...                            "folds": [1, .9, 1, 1]}}
    >>> pick(r, "margin"), pick(r, "learnt 1")
    ('exg', 'probability blobs')
    """
    from ecoscan.detect.calibration import beats

    sc = {k: _score(v) for k, v in routes.items()}
    f1 = {k: (s.f1 if math.isfinite(s.f1) else -1.0) for k, s in sc.items()}
    simple = [k for k in sc if k not in LEARNT]
    best_simple = max(simple, key=lambda k: f1[k]) if simple else None
    if not rule.endswith("always") and best_simple is not None and _gate(sc[best_simple]):
        return best_simple  # calibration trains no classifier then (GOOD_ENOUGH_F1)
    rule = rule.removesuffix(" always")
    prob = None
    if "probability blobs" in sc:
        prob = "probability blobs"
        if "probability split" in sc and beats(
            sc["probability split"], sc["probability blobs"], 0.0
        ):
            prob = "probability split"
    if rule == "best":
        return max(sc, key=lambda k: f1[k])
    if rule == "margin":
        order = sorted(sc, key=lambda k: -f1[k])
        cand = [k for k in order if k not in ("probability blobs", "probability split")]
        if prob is not None:
            cand = sorted([*cand, prob], key=lambda k: -f1[k])

        def usable(k):
            return k in simple or best_simple is None or beats(sc[k], sc[best_simple], 0.0)

        chosen = next(k for k in cand if usable(k))
        if chosen == "centre peaks" and prob is not None and usable(prob):
            if not beats(sc[chosen], sc[prob], 0.0):
                chosen = prob
        return chosen
    k_se = float(rule.split()[1])
    learnt = prob
    if "centre peaks" in sc and (prob is None or beats(sc["centre peaks"], sc[prob], 0.0)):
        learnt = "centre peaks"
    if learnt is None:
        return best_simple
    if best_simple is None or math.isinf(k_se):
        return learnt
    return best_simple if beats(sc[best_simple], sc[learnt], k_se) else learnt


def scene_row(style: str, seed: int, size: int, folder: Path, defaults: bool) -> dict:
    """Calibrate one suite scene, score every route's detector on its test plot."""
    from calibrate_speed import calibrate_and_score
    from scene_suite import CALIBRATED_MIN_SIZE

    from ecoscan.analysis.validation.compute import validate_points
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.detect.detector_file import write_detector
    from ecoscan.io.vector import read_points
    from ecoscan.synthetic import make_scene, write_scene

    size = max(size, CALIBRATED_MIN_SIZE.get(style, 0))
    sc = make_scene(style, size, seed)
    stem = f"{style}_{seed}"
    got = calibrate_and_score(sc, folder, stem)
    res, test = got["result"], got["test_plots"]
    paths = write_scene(sc, folder)
    ref = read_points(paths.truth)
    tol = 0.5 * sc.diameter_range_m[0]
    row = {
        "style": style,
        "seed": seed,
        "size": size,
        "plants": res.detector.training["plants"],
        "chosen_f1": got["row"].f1,
        "chosen_layer": res.detector.layer,
        "routes": {},
    }
    for name, det in res.route_detectors.items():
        cv = res.routes[name]
        toml = folder / f"{stem}_{name.replace(' ', '_')}.toml"
        write_detector(toml, det)
        t0 = time.process_time()
        found = detect_raster(paths.raster, DetectionSettings(detector=str(toml)), plots=test)
        v = validate_points(found.points, ref, tol, plots=test)[-1]
        row["routes"][name] = {
            "name": cv.layer,
            "tp": cv.tp,
            "fp": cv.fp,
            "fn": cv.fn,
            "cv_f1": cv.f1,
            "folds": [float(f) for f in cv.fold_f1],
            "test_f1": v.f1,
            "test_precision": v.precision,
            "test_recall": v.recall,
            "detect_cpu_s": time.process_time() - t0,
        }
    if defaults:
        from scene_suite import scores
        from shapely import contains_xy

        pts = detect_raster(
            paths.raster,
            DetectionSettings(
                diameter_min_m=sc.diameter_range_m[0],
                diameter_max_m=sc.diameter_range_m[1],
                bands=sc.bands_option,
            ),
            plots=test,
        ).points
        truth = np.column_stack([sc.x_m, sc.y_m])
        inside = contains_xy(test.plots[0].geometry, truth[:, 0], truth[:, 1])
        row["defaults_f1"] = scores(pts.xy, truth[inside], tol)[2]
    return row


def summary(rows: list[dict]) -> None:
    """Per rule: mean and lowest test F1 over the scenes, per style and in all."""
    styles = sorted({r["style"] for r in rows})
    head = f"{'rule':12s} " + " ".join(f"{s[:16]:>18s}" for s in styles) + f" {'all':>14s}"
    print(f"\ntest F1 of the route each rule picks, mean (lowest) over {len(rows)} scenes")
    print(head)
    allr = {}
    for rule in RULES:
        cells, every = [], []
        for s in styles:
            v = [r["routes"][pick(r["routes"], rule)]["test_f1"] for r in rows if r["style"] == s]
            every += v
            cells.append(f"{np.mean(v):.3f} ({np.min(v):.3f})")
        allr[rule] = every
        print(
            f"{rule:12s} "
            + " ".join(f"{c:>18s}" for c in cells)
            + f" {np.mean(every):.3f} ({np.min(every):.3f})"
        )
    if any("defaults_f1" in r for r in rows):
        v = [r.get("defaults_f1", np.nan) for r in rows]
        print(f"{'defaults':12s} mean {np.nanmean(v):.3f} (lowest {np.nanmin(v):.3f})")
    base = np.asarray(allr["margin"])
    for rule in RULES[1:]:
        d = np.asarray(allr[rule]) - base
        print(
            f"{rule:12s} against margin: better on {int((d > 0.001).sum())}, worse on "
            f"{int((d < -0.001).sum())}, mean change {d.mean():+.4f}"
        )


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--styles", default="dry-shrubs")
    ap.add_argument("--seeds", default="0,7,11")
    ap.add_argument("--size", type=int, default=800)
    ap.add_argument("--defaults", action="store_true", help="also score the defaults")
    ap.add_argument(
        "--always-classifier",
        action="store_true",
        help="train the classifier even when a simple layer is good enough in every fold "
        "(rules without 'always' still skip it then, as calibration does)",
    )
    ap.add_argument("--jsonl", help="append one JSON row per scene to this file")
    ap.add_argument("--summary", nargs="+", metavar="FILE", help="only summarise JSONL files")
    args = ap.parse_args(argv)
    if args.summary:
        rows = [json.loads(x) for f in args.summary for x in Path(f).read_text().splitlines()]
        # a scene measured twice: keep the run that compared more routes
        best: dict[tuple, dict] = {}
        for r in rows:
            key = (r["style"], r["seed"])
            if key not in best or len(r["routes"]) > len(best[key]["routes"]):
                best[key] = r
        summary(list(best.values()))
        return 0
    seeds = [int(s) for s in args.seeds.split(",")]
    if not set(seeds) <= ALLOWED_SEEDS:
        ap.error("only the development seeds 0, 7, 11 and the block 1000-1020 are accepted")
    from ecoscan.errors import InputError

    if args.always_classifier:
        import ecoscan.detect.calibration as cal

        cal.good_enough = lambda score: False

    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for style in args.styles.split(","):
            for seed in seeds:
                try:
                    r = scene_row(style, seed, args.size, Path(tmp), args.defaults)
                except InputError as exc:
                    print(f"{style} {seed}: not calibrated: {exc}", flush=True)
                    continue
                rows.append(r)
                picks = {rule: pick(r["routes"], rule) for rule in RULES}
                print(
                    f"{style} {seed}: plants {r['plants']} chosen {r['chosen_layer']} "
                    f"test F1 {r['chosen_f1']:.3f}"
                    + (f" defaults {r['defaults_f1']:.3f}" if "defaults_f1" in r else ""),
                    flush=True,
                )
                for name, v in r["routes"].items():
                    by = [k for k, p in picks.items() if p == name]
                    print(
                        f"    {name:18s} cv {v['cv_f1']:.3f} folds "
                        f"{[round(f, 3) for f in v['folds']]} test F1 {v['test_f1']:.3f} "
                        f"(P {v['test_precision']:.3f} R {v['test_recall']:.3f}) "
                        f"{' '.join(by)}",
                        flush=True,
                    )
                if args.jsonl:
                    with open(args.jsonl, "a", encoding="utf-8") as fh:
                        fh.write(json.dumps(r) + "\n")
    if rows:
        summary(rows)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
