"""Do two versions of ecoscan detect the same plants, byte for byte?

A refactor of ``ecoscan/detect/`` must not change a single output byte. This script runs
``ecoscan detect`` (every detector, the automatic layer choice and the given-index path,
a closed canopy, a tiled run on two workers, a calibrated detector made by ``ecoscan
calibrate``) and optionally the demo survey, and records the SHA-256 of every file written
(JSON without the clock fields; see :data:`UNSTABLE_FIELDS`). Record on the old code,
compare on the new::

    python benchmarks/detect_identity.py --record before.json
    python benchmarks/detect_identity.py --compare before.json         # exit 1 on any change
    python benchmarks/detect_identity.py --compare before.json --survey  # plus the demo survey

The scenes are synthetic (``ecoscan.synthetic.make_scene``), small, with fixed seeds.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import shutil
import sys
import tempfile
from pathlib import Path

#: JSON fields that hold the clock, or the bytes of GeoPackage inputs (a GeoPackage records
#: the time it was written, so its SHA-256, its modification time and the rerun-cache key
#: built on them differ on every run): left out of the digests.
UNSTABLE_FIELDS = ("started_utc", "finished_utc", "seconds", "sha256", "mtime_ns", "key")


def _stable(value):
    if isinstance(value, str) and "/sample_rasters/" in value:
        # the demo's inputs, wherever the old code ran from (e.g. an exported copy)
        return "<sample_rasters>/" + value.split("/sample_rasters/", 1)[1]
    if isinstance(value, dict):
        return {k: _stable(v) for k, v in value.items() if k not in UNSTABLE_FIELDS}
    if isinstance(value, list):
        return [_stable(v) for v in value]
    return value


def _digest(path: Path) -> str:
    data = path.read_bytes()
    if path.name == "run.json" or path.name.endswith(".key.json"):
        data = json.dumps(_stable(json.loads(data)), sort_keys=True).encode()
    elif path.suffix == ".toml":  # the training plots' SHA-256 (a GeoPackage)
        lines = data.decode().splitlines(keepends=True)
        data = "".join(t for t in lines if not t.startswith("plots_sha256")).encode()
    return hashlib.sha256(data).hexdigest()


def _folder_digests(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): _digest(p)
        for p in sorted(folder.rglob("*"))
        if p.is_file()
        and p.suffix in (".csv", ".json", ".prj", ".toml", ".gpkg", ".geojson")
        and p.suffix != ".gpkg"  # GeoPackages carry a write time
    }


def _run(args: list[str]) -> None:
    from ecoscan.cli import main

    code = main([*args, "--quiet"])
    if code != 0:
        raise SystemExit(f"ecoscan {' '.join(args)} exited with {code}")


def _scene(style: str, size: int, seed: int, folder: Path):
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene(style, size, seed)
    return sc, write_scene(sc, folder)


def _cases(work: Path) -> dict[str, list[str]]:
    """Case name -> ``ecoscan detect`` arguments (the output path is added per case)."""
    cases: dict[str, list[str]] = {}
    for style, size, seed in (
        ("dry-shrubs", 320, 0),
        ("conifer-pasture", 320, 7),
        ("multispectral", 320, 0),
        ("rocky-shrubland", 256, 11),
        ("coarse", 256, 0),
        ("closed-canopy", 320, 3),
    ):
        sc, paths = _scene(style, size, seed, work / "scenes")
        base = [str(paths.raster), "--diameter", sc.diameter_option]
        if sc.bands_option:
            base += ["--bands", sc.bands_option]
        cases[f"auto-{style}"] = base
        if style in ("dry-shrubs", "closed-canopy"):
            cases[f"tiled2-{style}"] = [*base, "--tile-size", "128", "--workers", "2"]
            cases[f"plots-{style}"] = [*base, "--plots", str(paths.plots), "--tile-size", "160"]
        if style == "dry-shrubs":
            cases["exg-otsu"] = [*base, "--index", "exg"]
            cases["threshold-given"] = [*base, "--index", "exg", "--threshold", "0.05"]
            cases["darkness"] = [*base, "--index", "darkness", "--min-contrast", "3"]
            cases["no-split"] = [*base, "--no-split"]
            cases["no-split-otsu"] = [*base, "--no-split", "--index", "exg", "--tile-size", "96"]
        if style == "multispectral":
            cases["ndvi"] = [*base, "--index", "ndvi"]
    return cases


def _chm_and_classes(work: Path) -> dict[str, list[str]]:
    import numpy as np
    from rasterio.transform import from_origin

    from ecoscan.synthetic import place_crowns, render_chm, render_classes, write_geotiff

    rng = np.random.default_rng(5)
    shape = (300, 300)
    xy, d = place_crowns(shape, 120, (8, 22), rng, min_gap=1.0)
    heights = rng.uniform(4.0, 14.0, len(d))
    t = from_origin(400000.0, 5600000.0, 0.25, 0.25)
    chm_data = render_chm(xy, heights, d, shape, rng, flat_top=0.2).astype(np.float32)
    chm = write_geotiff(work / "chm.tif", chm_data, t, "EPSG:32633")
    cls_data = render_classes(xy, d, shape, rng).astype(np.uint8)
    cls = write_geotiff(work / "classes.tif", cls_data, t, "EPSG:32633")
    return {
        "chm": [str(chm)],
        "chm-crowns": [str(chm), "--crowns", "--crown-rule", "pines", "--tile-size", "128"],
        "chm-tiled2": [str(chm), "--tile-size", "100", "--workers", "2", "--min-height", "6"],
        "chm-none": [str(chm), "--min-height", "40"],
        "classes": [str(cls), "--classes", "3", "--diameter", "2:5.5"],
        "classes-tiled": [str(cls), "--classes", "3", "--diameter", "2:5.5", "--tile-size", "64"],
        "classes-no-split": [str(cls), "--classes", "3", "--diameter", "2:5.5", "--no-split"],
    }


def _calibrated(work: Path) -> dict[str, list[str]]:
    """``ecoscan calibrate`` on a scene's training plot; its detector file is a case too."""
    from ecoscan.io.vector import write_plots
    from ecoscan.synthetic import training_plots

    cases = {}
    for style, extra in (
        ("conifer-pasture", []),
        ("closed-canopy", []),
        ("dry-shrubs", ["--classifier", "never"]),
    ):
        sc, paths = _scene(style, 400, 0, work / "calib")
        layer = training_plots(sc, 0.5)
        layer = type(layer)(layer.plots[:1], layer.crs)  # the training square alone
        train = write_plots(layer, work / "calib" / f"{style}_train.gpkg")
        toml = work / "calib" / f"{style}.toml"
        args = ["calibrate", str(paths.raster), str(paths.truth), "--plots", str(train)]
        args += ["--diameter", sc.diameter_option, "-o", str(toml), *extra]
        if sc.bands_option:
            args += ["--bands", sc.bands_option]
        _run(args)
        cases[f"calibrated-{style}"] = [str(paths.raster), "--detector", str(toml)]
        cases[f"calibrated-{style}-tiled"] = [
            str(paths.raster),
            "--detector",
            str(toml),
            "--tile-size",
            "128",
        ]
    return cases


def collect(survey: bool, work: Path) -> dict[str, dict[str, str]]:
    """Digests of every output, by case (``work``: an empty folder; the same path in both
    runs, since detector files and metadata name the files they were made from)."""
    out: dict[str, dict[str, str]] = {}
    cases = _cases(work)
    cases.update(_chm_and_classes(work))
    cases.update(_calibrated(work))
    tomls = {p.name: _digest(p) for p in sorted((work / "calib").glob("*.toml"))}
    out["calibrate (detector files)"] = tomls
    for name, args in cases.items():
        folder = work / "out" / name
        folder.mkdir(parents=True)
        _run(["detect", *args, "-o", str(folder / "points.csv")])
        out[name] = _folder_digests(folder)
        print(f"{name}: {len(out[name])} files", file=sys.stderr)
    if survey:
        _run(["demo", "-o", str(work / "demo")])
        out["demo survey"] = _folder_digests(work / "demo")
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    group = ap.add_mutually_exclusive_group(required=True)
    group.add_argument("--record", metavar="JSON", help="write the digests here")
    group.add_argument("--compare", metavar="JSON", help="compare with digests written before")
    ap.add_argument("--survey", action="store_true", help="also run the demo survey (~2 min)")
    ap.add_argument(
        "--work",
        default=str(Path(tempfile.gettempdir()) / "ecoscan-detect-identity"),
        help="working folder, emptied first (default: ecoscan-detect-identity in the "
        "temporary folder)",
    )
    a = ap.parse_args(argv)
    work = Path(a.work)
    if work.exists():
        shutil.rmtree(work)
    work.mkdir(parents=True)
    found = collect(a.survey, work)
    if a.record:
        Path(a.record).write_text(json.dumps(found, indent=1, sort_keys=True))
        print(f"{sum(len(v) for v in found.values())} digests in {len(found)} cases -> {a.record}")
        return 0
    before = json.loads(Path(a.compare).read_text())
    changed = []
    for case, files in found.items():
        if case not in before:
            print(f"{case}: not recorded before (skipped)")
            continue
        for f, h in files.items():
            if before[case].get(f) != h:
                changed.append(f"{case}/{f}")
        changed += [f"{case}/{f} (missing)" for f in before[case] if f not in files]
    same = sum(len(v) for k, v in found.items() if k in before) - len(changed)
    print(f"identical files: {same}; changed: {len(changed)}")
    for c in changed:
        print(f"  changed: {c}")
    return 1 if changed else 0


if __name__ == "__main__":
    raise SystemExit(main())
