"""Conifer-pasture errors by class, and variants of the colour layer's valley rule side by
side: a diagnosis tool.

For each suite scene of conifer pasture (development seeds 0, 7, 11 and the extra
diagnosis seeds 300-320, which are this tool's own and never a held-out figure) and each
tuning scene, the default detector runs with only ``--diameter`` given; its points are
matched one-to-one to the truth within half the smallest diameter. Misses are counted by
the plant's kind (``planted`` or ``regeneration``) and by whether the plant lies in the cast
shadow of a bigger tree (its centre within the shadow reach down-sun of a planted crown);
false points by what they sit on: a crown's rim (within two radii of a plant), a shadow
(down-sun of a planted tree within its shadow reach) or open pasture. The valley factor
of the log-chromaticity layer is printed with it, so scenes where it stops at its bound
show.

``--variant NAME`` runs the same scenes with one named change of the valley rule applied
in this process (for comparing before adopting); ``--variant base`` is the code as it is.

Run: ``nice python benchmarks/conifer_errors.py --seeds 0,7,11,300,301 --size 512``;
``--tuning pines:100,conifers:100`` adds tuning scenes (seeds 100-199).
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

HELD_OUT = set(range(21, 24)) | {
    s for d in range(3, 21) for s in (10 * d + 1, 10 * d + 2, 10 * d + 3)
}
HELD_OUT |= set(range(200, 210))
#: the suite's sun for conifer pasture (``ecoscan.synthetic.styles.forest``: Sun(160, 42)):
#: shadows fall towards this bearing (degrees clockwise from north, image up)
SHADOW_BEARING_DEG = 340.0
SHADOW_REACH = 3.0  # crown radii down-sun that count as "in the shadow"


def _in_shadow(xy: np.ndarray, trees_xy: np.ndarray, trees_r: np.ndarray) -> np.ndarray:
    """Whether each point lies in the cast shadow of one of ``trees`` (down-sun, within
    ``SHADOW_REACH`` radii along the shadow and one radius across it)."""
    b = math.radians(SHADOW_BEARING_DEG)
    u = np.array([math.sin(b), math.cos(b)])  # map x east, y north
    out = np.zeros(len(xy), bool)
    for k, p in enumerate(xy):
        d = trees_xy - p[None]
        along = -(d @ u)  # how far down-sun the point is from each tree
        across = np.abs(d[:, 0] * u[1] - d[:, 1] * u[0])
        hit = (along > 0.5 * trees_r) & (along < SHADOW_REACH * trees_r) & (across < trees_r)
        out[k] = bool(hit.any())
    return out


def classify(raster, truth_xy, truth_d, kind, dmin, dmax) -> dict:
    from scipy.spatial import cKDTree

    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points

    res = detect_raster(raster, DetectionSettings(diameter_min_m=dmin, diameter_max_m=dmax))
    th = res.thresholds
    det = res.points.xy
    m = match_points(det, truth_xy, 0.5 * dmin)
    found_t = np.zeros(len(truth_xy), bool)
    found_t[m.index_b] = True
    found_d = np.zeros(len(det), bool)
    found_d[m.index_a] = True
    rad = 0.5 * truth_d
    planted = kind == "planted"
    shade_t = np.zeros(len(truth_xy), bool)
    if planted.any():
        idx = np.flatnonzero(planted)
        for i in range(len(truth_xy)):
            keep = idx != i
            shade_t[i] = _in_shadow(truth_xy[i : i + 1], truth_xy[idx[keep]], rad[idx[keep]])[0]
    out = {
        "tp": m.n_matched,
        "n_truth": len(truth_xy),
        "n_found": len(det),
        "layer": th.get("layer", res.index),
        "raise": float(th.get("threshold_raise", 1.0)),
        "blur": float(th.get("band_blur_px", 0.0) or 0.0),
        "miss": Counter(),
        "false": Counter(),
        "truth": Counter(),
    }
    for i in range(len(truth_xy)):
        key = ("regen" if kind[i] == "regeneration" else "plant") + ("-shade" if shade_t[i] else "")
        out["truth"][key] += 1
        if not found_t[i]:
            out["miss"][key] += 1
    tree = cKDTree(truth_xy)
    fx = det[~found_d]
    shade_f = np.zeros(len(fx), bool)
    if len(fx) and planted.any():
        shade_f = _in_shadow(fx, truth_xy[planted], rad[planted])
    for k, p in enumerate(fx):
        dd, i = tree.query(p)
        if dd < rad[i]:
            out["false"]["on-crown"] += 1
        elif dd < 2 * rad[i]:
            out["false"]["rim"] += 1
        elif shade_f[k]:
            out["false"]["shadow"] += 1
        else:
            out["false"]["pasture"] += 1
    return out


MISS_KEYS = ("plant", "plant-shade", "regen", "regen-shade")
FALSE_KEYS = ("on-crown", "rim", "shadow", "pasture")


def _row(name: str, r: dict) -> str:
    f1 = 2 * r["tp"] / max(r["n_truth"] + r["n_found"], 1)
    p = r["tp"] / max(r["n_found"], 1)
    rc = r["tp"] / max(r["n_truth"], 1)
    miss = " ".join(f"{r['miss'][k]:2d}/{r['truth'][k]:<3d}" for k in MISS_KEYS)
    fals = " ".join(f"{r['false'][k]:3d}" for k in FALSE_KEYS)
    return (
        f"{name:18} F1 {f1:.3f} P {p:.3f} R {rc:.3f} n {r['n_found']:4d}/{r['n_truth']:4d} "
        f"{r['layer']:9} x{r['raise']:.2f} blur {r['blur']:.1f} | miss {miss} | false {fals}"
    )


def apply_variant(name: str) -> None:
    """Apply one named change of the valley rule in this process (for comparison)."""
    import os

    from ecoscan.detect import chromaticity

    if os.environ.get("VALLEY_TRACE"):
        orig = chromaticity.valley_factor

        def traced(ratio, eligible):
            f = orig(ratio, eligible)
            r = np.asarray(ratio, float)
            sel = np.asarray(eligible, bool) & (r >= 1.0)
            v = np.sort(r[sel])
            sp = chromaticity.otsu_split(np.log(v)) if v.size > 1 else None
            up = v[np.log(v) > sp] if sp is not None else v
            lo = v[np.log(v) <= sp] if sp is not None else v
            print(
                f"   valley n {v.size} split {math.exp(sp) if sp is not None else 0:.2f} "
                f"factor {f:.2f} lower n {lo.size} med {np.median(lo) if lo.size else 0:.2f} "
                f"upper n {up.size} q10/50 {np.quantile(up, 0.1) if up.size else 0:.2f}/"
                f"{np.median(up) if up.size else 0:.2f}",
                flush=True,
            )
            return f

        chromaticity.valley_factor = traced
    if name == "base":
        return
    if "+" in name:  # several changes together
        for part in name.split("+"):
            apply_variant(part)
        return
    if name.startswith("margin"):  # chromaticity.SHOULDER_MARGIN
        chromaticity.SHOULDER_MARGIN = float(name[6:])
        return
    if name.startswith("shsec"):  # chromaticity.SHOULDER_SECTORS
        chromaticity.SHOULDER_SECTORS = int(name[5:])
        return
    if name.startswith("inner"):  # chromaticity.INNER_OUT (the shoulder band's outer edge)
        chromaticity.INNER_OUT = float(name[5:])
        return
    if name.startswith("vshare"):  # chromaticity.VALLEY_SHARE
        chromaticity.VALLEY_SHARE = float(name[6:])
        return
    if name.startswith("vscale"):  # the valley factor times this (at least 1)
        orig_vf = chromaticity.valley_factor
        k = float(name[6:])

        def scaled(ratio, eligible):
            return max(1.0, k * orig_vf(ratio, eligible))

        chromaticity.valley_factor = scaled
        return
    if name == "forcevalley":
        from ecoscan.detect import autotune

        orig_sfv = autotune._shadow_free_valley

        def forced(jobs, results, cache, label, res, elong, roles):
            out = orig_sfv(jobs, results, cache, label, {**res, "candidates": 0}, elong, roles)
            if out is not None:
                print(
                    f"   forced valley: classic {label} score {res['separation']:.2f} "
                    f"n {res['candidates']}; valley score {out[3]['separation']:.2f} "
                    f"n {out[3]['candidates']} near {out[3]['near_share']:.2f}",
                    flush=True,
                )
            return out

        autotune._shadow_free_valley = forced
        return
    if name.startswith("ring"):
        from ecoscan.detect import autotune

        orig_r = autotune.ring_test
        level = float(name[4:])

        def ring_k(choice):
            return level if choice.name == autotune.INVARIANT else orig_r(choice)

        autotune.ring_test = ring_k
        return
    if name == "noring":
        from ecoscan.detect import autotune
        from ecoscan.detect.detectors import blob_auto

        orig_ring = autotune.ring_test

        def ring(choice):
            return None if choice.name == autotune.INVARIANT else orig_ring(choice)

        autotune.ring_test = ring
        blob_auto.ring_test = ring
        return
    if name == "plainring":  # the ring test on the whole ring (before conifer12)
        from ecoscan.detect.detectors import blob_auto

        blob_auto._ring_open = lambda choice: False
        return
    if name == "noshoulder":  # the open sectors without the shoulder test
        orig_open = chromaticity.open_ring_contrast

        def open_only(centre, ring, ring_sector, inner, inner_sector):
            return orig_open(centre, ring, ring_sector, inner[:, :0], inner_sector[:0])

        chromaticity.open_ring_contrast = open_only
        return
    if name.startswith("cap"):
        chromaticity.VALLEY_MAX = float(name[3:])
        return
    raise SystemExit(f"error: unknown variant {name!r}")


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="0,7,11", help="suite seeds (0, 7, 11, 300-320)")
    ap.add_argument("--style", default="conifer-pasture", help="suite style")
    ap.add_argument("--tuning", default="", help="style:seed tuning scenes (seeds 100-199)")
    ap.add_argument("--size", type=int, default=512)
    ap.add_argument("--variant", default="base")
    args = ap.parse_args(argv)
    apply_variant(args.variant)
    seeds = [int(s) for s in args.seeds.split(",") if s]
    if HELD_OUT & set(seeds):
        ap.error("held-out seeds are not for diagnosis")
    print(
        f"variant {args.variant}; miss " + " ".join(MISS_KEYS) + " | false " + " ".join(FALSE_KEYS)
    )
    f1s = []
    with tempfile.TemporaryDirectory() as tmp:
        from ecoscan.synthetic import make_scene, write_scene

        for seed in seeds:
            sc = make_scene(args.style, args.size, seed)
            paths = write_scene(sc, Path(tmp))
            lo, hi = sc.diameter_range_m
            r = classify(
                paths.raster,
                np.column_stack([sc.x_m, sc.y_m]),
                np.asarray(sc.diameter_m),
                np.asarray(sc.kind),
                lo,
                hi,
            )
            f1s.append(2 * r["tp"] / max(r["n_truth"] + r["n_found"], 1))
            print(_row(f"{args.style[:8]} {seed}", r), flush=True)
        for spec in filter(None, args.tuning.split(",")):
            sys.path.insert(0, str(ROOT / "benchmarks"))
            from tuning_scenes import DIAMETER_M, write_tuning_scene

            style, seed = spec.split(":")
            path, truth = write_tuning_scene(Path(tmp), style, int(seed))
            r = classify(
                path,
                truth.xy,
                np.asarray(truth.attrs["diameter_m"]),
                np.array(["plant"] * len(truth.xy)),
                DIAMETER_M[0],
                DIAMETER_M[1],
            )
            print(_row(f"tune {style} {seed}", r), flush=True)
    if f1s:
        print(f"suite F1 mean {np.mean(f1s):.3f} lowest {np.min(f1s):.3f} over {len(f1s)} scenes")


if __name__ == "__main__":
    main()
