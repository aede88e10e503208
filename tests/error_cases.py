"""The catalogue of bad and odd inputs (docs/errors.md is written from this table).

Each case builds its inputs in a folder, runs one ``ecoscan`` command in-process and states
what ecoscan must do: the exit code, words the one-line message must contain, and for some
cases a check of the files left behind. ``tests/test_error_catalogue.py`` runs every case;
``python tests/error_cases.py`` rewrites the table in docs/errors.md.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import shapely
from rasterio.transform import from_origin

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.synthetic import render_chm, write_geotiff

X0, Y0 = 512_000.0, 5_210_000.0
UTM = "EPSG:32633"
PLOTS = {
    "meadow": shapely.box(X0, Y0, X0 + 40, Y0 + 40),
    "slope": shapely.box(X0 + 50, Y0, X0 + 90, Y0 + 40),
}
SIMS = ["--simulations", "19"]


def _plots_geojson(path: Path, plots=PLOTS, ids=None) -> Path:
    import json

    feats = []
    for i, (pid, g) in enumerate(plots.items()):
        ring = [list(c) for c in g.exterior.coords]
        feats.append(
            {
                "type": "Feature",
                "properties": {"plot_id": ids[i] if ids else pid},
                "geometry": {"type": "Polygon", "coordinates": [ring]},
            }
        )
    crs = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    path.write_text(json.dumps({"type": "FeatureCollection", "crs": crs, "features": feats}))
    return path


def make_base(folder: Path) -> Path:
    """Points, plots, a small canopy height model and a finished analyse folder."""
    rng = np.random.default_rng(11)
    xy = np.vstack([uniform_in_polygon(g, 40, rng=rng) for g in PLOTS.values()])
    (folder / "plants.csv").write_text("x,y\n" + "".join(f"{a:.3f},{b:.3f}\n" for a, b in xy))
    _plots_geojson(folder / "plots.geojson")
    shape = (90, 190)  # 0.5 m pixels over both plots
    tops = rng.uniform([5, 5], [185, 85], size=(25, 2))
    chm = render_chm(tops, rng.uniform(6, 12, 25), np.full(25, 8.0), shape, rng)
    write_geotiff(folder / "chm.tif", chm, from_origin(X0 - 2, Y0 + 43, 0.5, 0.5), UTM)
    from ecoscan.cli import main

    assert (
        main(
            [
                "analyse",
                str(folder / "plants.csv"),
                "--plots",
                str(folder / "plots.geojson"),
                "--crs",
                UTM,
                "-o",
                str(folder / "results"),
                "--quiet",
                *SIMS,
            ]
        )
        == 0
    )
    return folder


@dataclass(frozen=True)
class Case:
    """One catalogue entry."""

    id: str
    command: str
    what: str  # the input, as a user would describe it
    does: str  # what ecoscan does
    argv: Callable[[Path, Path], list[str]]  # (base folder, case folder) -> arguments
    code: int = 2
    says: tuple[str, ...] = ()
    check: Callable[[Path, Path], None] | None = field(default=None)


def _analyse(base: Path, out: Path, *extra: str, points: str | Path | None = None) -> list[str]:
    return [
        "analyse",
        str(points or base / "plants.csv"),
        "--plots",
        str(base / "plots.geojson"),
        "--crs",
        UTM,
        "-o",
        str(out / "res"),
        "--quiet",
        *SIMS,
        *extra,
    ]


def _csv(text: str | bytes, name: str = "p.csv"):
    """A case whose points file holds ``text``."""

    def argv(base: Path, out: Path) -> list[str]:
        p = out / name
        (p.write_bytes if isinstance(text, bytes) else p.write_text)(text)
        return _analyse(base, out, points=p)

    return argv


def _points_with_prj(prj: bytes):
    def argv(base: Path, out: Path) -> list[str]:
        shutil.copy(base / "plants.csv", out / "p.csv")
        (out / "p.prj").write_bytes(prj)
        a = _analyse(base, out, points=out / "p.csv")
        i = a.index("--crs")
        return a[:i] + a[i + 2 :]

    return argv


def _no_scales_output(base: Path, out: Path) -> None:
    assert not (out / "sc").exists()
    assert not [p for p in out.iterdir() if ".tmp-ecoscan" in p.name]


def _nothing_written(out: Path) -> None:
    assert not [p for p in out.iterdir() if p.suffix != ".toml"], list(out.iterdir())


def _free_port() -> int:
    """A local TCP port nobody listens on (bound, then released)."""
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _no_output(base: Path, out: Path) -> None:
    assert not (out / "res").exists()
    assert not [p for p in out.iterdir() if ".tmp-ecoscan" in p.name]


def _detect(base: Path, out: Path, *extra: str, raster: str | Path | None = None) -> list[str]:
    return [
        "detect",
        str(raster or base / "chm.tif"),
        "--method",
        "chm",
        "--quiet",
        "-o",
        str(out / "trees.csv"),
        *extra,
    ]


def _compare(base: Path, out: Path, *extra: str) -> list[str]:
    return ["compare", str(base / "results"), "-o", str(out / "cmp"), "--quiet", *extra]


def _change(base: Path, out: Path, *extra: str) -> list[str]:
    p = base / "plants.csv"
    return ["change", str(p), str(p), "--crs", UTM, "-o", str(out / "chg"), "--quiet", *extra]


def _scales(base: Path, out: Path, *extra: str) -> list[str]:
    return [
        "scales",
        str(base / "plants.csv"),
        "--plots",
        str(base / "plots.geojson"),
        "--crs",
        UTM,
        "-o",
        str(out / "sc"),
        "--quiet",
        *extra,
    ]


SURVEY = """\
[survey]
plots = "{plots}"
output = "out"
[statistics]
simulations = 19
[[raster]]
path = "{chm}"
site = "North slope"
date = "2026-05-01"
[raster.detect]
method = "chm"
"""


def _survey(extra: str = "", *, replace: tuple[str, str] | None = None, raw: bytes | None = None):
    def argv(base: Path, out: Path) -> list[str]:
        f = out / "s.toml"
        if raw is not None:
            f.write_bytes(raw)
        else:
            text = SURVEY.format(plots=base / "plots.geojson", chm=base / "chm.tif") + extra
            if replace:
                text = text.replace(*replace)
            f.write_text(text)
        return ["survey", str(f), "--quiet", "--no-report"]

    return argv


def _survey_file(out: Path) -> Path:
    return out / "s.toml"


def _existing_folder(kind: str):
    def argv(base: Path, out: Path) -> list[str]:
        (out / "res").mkdir()
        (out / "res" / "keep.txt").write_text("earlier results\n")
        return _analyse(base, out, *(["--overwrite"] if kind == "overwrite" else []))

    return argv


def _check_kept(base: Path, out: Path) -> None:
    assert (out / "res" / "keep.txt").read_text() == "earlier results\n"
    assert not (out / "res" / "dispersion.csv").exists()


def _check_replaced(base: Path, out: Path) -> None:
    assert not (out / "res" / "keep.txt").exists()  # no file of the earlier run survives
    assert (out / "res" / "dispersion.csv").exists()


def _stale_temp(base: Path, out: Path) -> list[str]:
    # debris of a run killed with SIGKILL: a temporary file and folder whose writer is gone
    (out / ".res.tmp-ecoscan-999999999").mkdir()
    (out / ".trees.tmp-ecoscan-999999999-x1y2.csv").write_text("x,y\n1,")
    return _analyse(base, out)


def _check_stale_removed(base: Path, out: Path) -> None:
    assert sorted(p.name for p in out.iterdir()) == ["res"]


def _full_disk(base: Path, out: Path) -> list[str]:
    return _analyse(base, out)


def _detect_over_plots(base: Path, out: Path) -> list[str]:
    shutil.copy(base / "plots.geojson", out / "p.geojson")
    a = _detect(base, out, "--plots", str(out / "p.geojson"))
    a[a.index("-o") + 1] = str(out / "p.geojson")
    return a


def _check_plots_intact(base: Path, out: Path) -> None:
    assert (out / "p.geojson").read_bytes() == (base / "plots.geojson").read_bytes()


def _inside_output(base: Path, out: Path) -> list[str]:
    shutil.copytree(base / "results", out / "res")
    return _analyse(base, out, "--overwrite", points=out / "res" / "points.csv")


def _survey_rerun_stale(base: Path, out: Path) -> list[str]:
    a = _survey()(base, out)
    from ecoscan.cli import main

    assert main(a) == 0
    (out / "out" / "compare-by-site").mkdir()
    (out / "out" / "scales.csv").write_text("old\n")
    return [*a, "--overwrite"]


def _check_survey_clean(base: Path, out: Path) -> None:
    names = {p.name for p in (out / "out").iterdir()}
    assert "scales.csv" not in names and "compare-by-site" not in names
    assert "run.json" in names


def _survey_truncated_cache(base: Path, out: Path) -> list[str]:
    a = _survey()(base, out)
    from ecoscan.cli import main

    assert main(a) == 0
    csv = next((out / "out" / "points").glob("*.csv"))
    lines = csv.read_text().splitlines()
    csv.write_text("\n".join(lines[: len(lines) // 2]) + "\n")  # truncated cached detections
    (out / "n_before").write_text(str(len(lines)))
    return [*a, "--overwrite"]


def _check_cache_recomputed(base: Path, out: Path) -> None:
    import json

    run = json.loads((out / "out" / "run.json").read_text())
    assert run["rasters"][0]["from_cache"] is False
    csv = next((out / "out" / "points").glob("*.csv"))
    assert len(csv.read_text().splitlines()) == int((out / "n_before").read_text())


def _plain(*args: str):
    return lambda base, out: list(args)


def _nodata_raster(base: Path, out: Path) -> list[str]:
    arr = np.full((64, 64), -9999.0, dtype="float32")
    write_geotiff(out / "empty.tif", arr, from_origin(X0, Y0 + 32, 0.5, 0.5), UTM, nodata=-9999.0)
    return _detect(base, out, raster=out / "empty.tif")


def _text_raster(base: Path, out: Path) -> list[str]:
    (out / "fake.tif").write_text("this is not an image\n")
    return _detect(base, out, raster=out / "fake.tif")


def _truncated_raster(base: Path, out: Path) -> list[str]:
    data = (base / "chm.tif").read_bytes()
    (out / "cut.tif").write_bytes(data[: len(data) // 3])
    return _detect(base, out, raster=out / "cut.tif")


def _garbage_plots(base: Path, out: Path) -> list[str]:
    (out / "plots.geojson").write_text("{ not json")
    a = _analyse(base, out)
    a[a.index("--plots") + 1] = str(out / "plots.geojson")
    return a


def _metre_geojson_plots(base: Path, out: Path) -> list[str]:
    # projected metres in a GeoJSON file without a "crs" member, which RFC 7946 reads as
    # WGS 84 longitude/latitude
    import json

    feats = [
        {"type": "Feature", "properties": {"plot_id": pid}, "geometry": shapely.geometry.mapping(g)}
        for pid, g in PLOTS.items()
    ]
    (out / "plots.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    a = _analyse(base, out)
    a[a.index("--plots") + 1] = str(out / "plots.geojson")
    return a


def _point_plots(base: Path, out: Path) -> list[str]:
    a = _analyse(base, out)
    a[a.index("--plots") + 1] = str(base / "results" / "points.csv")
    return a


def _bowtie(base: Path, out: Path) -> list[str]:
    bow = shapely.Polygon([(X0, Y0), (X0 + 40, Y0 + 40), (X0 + 40, Y0), (X0, Y0 + 40)])
    _plots_geojson(out / "bow.geojson", {"bow": bow, "slope": PLOTS["slope"]})
    a = _analyse(base, out)
    a[a.index("--plots") + 1] = str(out / "bow.geojson")
    return a


def _dup_ids(base: Path, out: Path) -> list[str]:
    _plots_geojson(out / "dup.geojson", ids=["A", "A"])
    a = _analyse(base, out)
    a[a.index("--plots") + 1] = str(out / "dup.geojson")
    return a


def _folder_as_csv(base: Path, out: Path) -> list[str]:
    (out / "p.csv").mkdir()
    return _analyse(base, out, points=out / "p.csv")


def _results_without_points(base: Path, out: Path) -> list[str]:
    (out / "empty").mkdir()
    return ["change", str(out / "empty"), str(base / "plants.csv"), "--crs", UTM,
            "-o", str(out / "chg"), "--quiet", "--tolerance", "0.5"]  # fmt: skip


def _compare_into_input(base: Path, out: Path) -> list[str]:
    shutil.copytree(base / "results", out / "r")
    return ["compare", str(out / "r"), "-o", str(out / "r"), "--overwrite", "--quiet"]


def _compare_missing_table(base: Path, out: Path) -> list[str]:
    (out / "r").mkdir()
    return ["compare", str(out / "r"), "-o", str(out / "cmp"), "--quiet"]


def _validate_existing(base: Path, out: Path) -> list[str]:
    (out / "acc.csv").write_text("old\n")
    p = str(base / "plants.csv")
    return ["validate", p, p, "--crs", UTM, "--tolerance", "0.5", "-o", str(out / "acc.csv")]


def _validate_over_input(base: Path, out: Path) -> list[str]:
    shutil.copy(base / "plants.csv", out / "p.csv")
    p = str(out / "p.csv")
    return ["validate", p, p, "--crs", UTM, "--tolerance", "0.5", "-o", p, "--overwrite"]


def _detect_existing(base: Path, out: Path) -> list[str]:
    (out / "trees.csv").write_text("x,y\n")
    return _detect(base, out)


def _detect_existing_ok(base: Path, out: Path) -> list[str]:
    (out / "trees.csv").write_text("x,y\n")
    return _detect(base, out, "--overwrite")


def _parent_is_file(base: Path, out: Path) -> list[str]:
    (out / "afile").write_text("x")
    a = _analyse(base, out)
    a[a.index("-o") + 1] = str(out / "afile" / "res")
    return a


def _survey_5_problems(base, out):
    extra = '[change]\ntolerance_m = "abc"\n[compare]\npermutations = "many"\n'
    return _survey(
        extra.replace("[change]", "[scales]\nsimulations = -1\n[change]"),
        replace=('method = "chm"', 'method = "chm"\ndiameter = 5\ntile_size_px = "big"'),
    )(base, out)


def _survey_output_exists(base: Path, out: Path) -> list[str]:
    (out / "out").mkdir()
    (out / "out" / "old.csv").write_text("x\n")
    return _survey()(base, out)


def _check_survey_kept(base: Path, out: Path) -> None:
    assert [p.name for p in (out / "out").iterdir()] == ["old.csv"]


def _plan_existing(base: Path, out: Path) -> list[str]:
    (out / "plan").mkdir()
    (out / "plan" / "old.csv").write_text("x\n")
    return ["plan", "--plot-size", "30x30", "--density", "400", "-o", str(out / "plan")]


def _check_plan_kept(base: Path, out: Path) -> None:
    assert [p.name for p in (out / "plan").iterdir()] == ["old.csv"]


def _two_sites(base: Path, out: Path) -> list[str]:
    extra = (
        f'[[raster]]\npath = "{base / "chm.tif"}"\nname = "b"\nsite = "North-slope"\n'
        'date = "2026-06-01"\n[raster.detect]\nmethod = "chm"\n'
    )
    return _survey(extra)(base, out)


def _covariate(*, constant=False, origin=(X0 - 5, Y0 + 45), pixel=1.0, crs=UTM, shape=(50, 100)):
    """A case running ``scales --covariate elevation=<raster>`` with the raster described."""

    def argv(base: Path, out: Path) -> list[str]:
        rows, cols = shape
        arr = np.full((rows, cols), 350.0, "float32")
        if not constant:  # a slope, 0.1 units per pixel
            arr += 0.1 * np.arange(cols, dtype="float32")[None, :]
        write_geotiff(out / "dem.tif", arr, from_origin(origin[0], origin[1], pixel, pixel), crs)
        return _scales(base, out, *SIMS, "--covariate", f"elevation={out / 'dem.tif'}")

    return argv


def _marks(column: list[str]):
    """A case running ``scales --mark diameter_m`` on points whose diameters are given."""

    def argv(base: Path, out: Path) -> list[str]:
        lines = (base / "plants.csv").read_text().splitlines()
        body = [
            f"{ln},{column[i % len(column)] if i < len(column) else '1.5'}"
            for i, ln in enumerate(lines[1:])
        ]
        (out / "sized.csv").write_text("x,y,diameter_m\n" + "\n".join(body) + "\n")
        a = _scales(base, out, *SIMS, "--mark", "diameter_m")
        a[1] = str(out / "sized.csv")
        return a

    return argv


CASES: list[Case] = [
    # ---------------------------------------------------------------- options (all commands)
    Case(
        "unknown-command",
        "any",
        "`ecoscan frobnicate`",
        "exit 2, names the valid commands",
        _plain("frobnicate"),
        says=("invalid choice",),
    ),
    Case(
        "missing-required-option",
        "analyse",
        "`--plots` left out",
        "exit 2, names --plots",
        lambda b, o: ["analyse", str(b / "plants.csv"), "-o", str(o / "res")],
        says=("--plots",),
    ),
    Case(
        "simulations-text",
        "analyse",
        "`--simulations abc`",
        "exit 2: a whole number",
        lambda b, o: [*_analyse(b, o), "--simulations", "abc"],
        says=("--simulations", "whole"),
    ),
    Case(
        "simulations-huge",
        "analyse",
        "`--simulations 5000000`",
        "exit 2 before any work, says the cap and what 999/9999 give",
        lambda b, o: [*_analyse(b, o), "--simulations", "5000000"],
        says=("99999",),
        check=_no_output,
    ),
    Case(
        "simulations-negative",
        "analyse",
        "`--simulations -1`",
        "exit 2",
        lambda b, o: [*_analyse(b, o), "--simulations", "-1"],
        says=("at least 0",),
    ),
    Case(
        "permutations-huge",
        "compare",
        "`--permutations 10000000`",
        "exit 2, cap named",
        lambda b, o: _compare(b, o, "--permutations", "10000000"),
        says=("--permutations",),
    ),
    Case(
        "change-simulations-huge",
        "change",
        "`--simulations 9999999`",
        "exit 2",
        lambda b, o: _change(b, o, "--tolerance", "0.5", "--simulations", "9999999"),
        says=("--simulations",),
    ),
    Case(
        "alpha-out-of-range",
        "analyse",
        "`--alpha 2`",
        "exit 2",
        lambda b, o: _analyse(b, o, "--alpha", "2"),
        says=("alpha",),
        check=_no_output,
    ),
    Case(
        "quadrat-tiny",
        "analyse",
        "`--quadrat 0.03` (would be 1.8 million quadrats)",
        "exit 2 before allocating, says the smallest side that works",
        lambda b, o: _analyse(b, o, "--quadrat", "0.03"),
        says=("--quadrat", "at least"),
        check=_no_output,
    ),
    Case(
        "quadrat-negative",
        "analyse",
        "`--quadrat -1`",
        "exit 2",
        lambda b, o: _analyse(b, o, "--quadrat", "-1"),
        says=("quadrat",),
    ),
    Case(
        "guard-negative",
        "analyse",
        "`--guard -5`",
        "exit 2",
        lambda b, o: _analyse(b, o, "--guard", "-5"),
        says=("guard",),
    ),
    Case(
        "workers-zero",
        "detect",
        "`--workers 0`",
        "exit 2",
        lambda b, o: _detect(b, o, "--workers", "0"),
        says=("--workers", "at least 1"),
    ),
    Case(
        "workers-huge",
        "detect",
        "`--workers 999`",
        "runs with one worker per CPU core and a note",
        lambda b, o: [x for x in _detect(b, o, "--workers", "999") if x != "--quiet"],
        code=0,
        says=("note: --workers 999 is more than",),
    ),
    Case(
        "diameter-text",
        "detect",
        "`--diameter abc`",
        "exit 2 with an example",
        lambda b, o: _detect(b, o, "--diameter", "abc"),
        says=("--diameter",),
    ),
    Case(
        "diameter-reversed",
        "detect",
        "`--diameter 3:1`",
        "exit 2",
        lambda b, o: _detect(b, o, "--diameter", "3:1"),
        says=("diameter",),
    ),
    Case(
        "tile-size-zero",
        "detect",
        "`--tile-size 0`",
        "exit 2",
        lambda b, o: _detect(b, o, "--tile-size", "0"),
        says=("tile",),
    ),
    Case(
        "plots-and-mask",
        "detect",
        "both `--plots` and `--mask`",
        "exit 2",
        lambda b, o: _detect(
            b, o, "--plots", str(b / "plots.geojson"), "--mask", str(b / "chm.tif")
        ),
        says=("--plots or --mask",),
    ),
    Case(
        "covariate-not-covering",
        "scales",
        "`--covariate elevation=dem.tif` whose raster covers only one of the two plots",
        "exit 2, names the covariate, its file and the plot it misses",
        _covariate(shape=(50, 48)),
        says=("covariate elevation", "dem.tif", "does not cover plot slope"),
        check=_no_scales_output,
    ),
    Case(
        "covariate-constant",
        "scales",
        "`--covariate` raster with the same value everywhere",
        "exit 2: its effect cannot be estimated; names the file and the plot",
        _covariate(constant=True),
        says=("constant over plot meadow", "dem.tif"),
        check=_no_scales_output,
    ),
    Case(
        "covariate-degrees-without-crs",
        "scales",
        "`--covariate` raster without a CRS whose coordinates are degrees",
        "exit 2: assign its CRS or reproject it",
        _covariate(origin=(14.5, 47.1), pixel=1e-5, crs=None),
        says=("no CRS", "degrees", "dem.tif"),
        check=_no_scales_output,
    ),
    Case(
        "covariate-no-name",
        "scales",
        "`--covariate dem.tif` (no NAME=)",
        "exit 2: write NAME=PATH",
        lambda b, o: _scales(b, o, "--covariate", "dem.tif"),
        says=("NAME=PATH",),
    ),
    Case(
        "mark-column-missing",
        "scales",
        "`--mark diameter_m` on points without that column",
        "exit 2, names the points file and its columns",
        lambda b, o: _scales(b, o, *SIMS, "--mark", "diameter_m"),
        says=("plants.csv", "'diameter_m'", "--mark"),
        check=_no_scales_output,
    ),
    Case(
        "mark-not-numeric",
        "scales",
        "`--mark diameter_m` with a value `big`",
        "exit 2, names the file, the value and the plot",
        _marks(["1.2", "big"]),
        says=("sized.csv", "'big'", "plot meadow"),
        check=_no_scales_output,
    ),
    Case(
        "mark-missing-value",
        "scales",
        "`--mark diameter_m` with an empty value",
        "exit 2, names the file and the plot",
        _marks(["1.2", ""]),
        says=("sized.csv", "missing value", "plot meadow"),
        check=_no_scales_output,
    ),
    Case(
        "kinds-without-field",
        "scales",
        "`--kinds live,dead` without `--kind-field`",
        "exit 2",
        lambda b, o: _scales(b, o, "--kinds", "live,dead"),
        says=("--kind-field",),
    ),
    Case(
        "validate-tolerance-zero",
        "validate",
        "`--tolerance 0`",
        "exit 2",
        lambda b, o: [
            "validate",
            str(b / "plants.csv"),
            str(b / "plants.csv"),
            "--crs",
            UTM,
            "--tolerance",
            "0",
        ],
        says=("--tolerance",),
    ),
    Case(
        "validate-output-not-csv",
        "validate",
        "`-o accuracy.txt`",
        "exit 2",
        lambda b, o: [
            "validate",
            str(b / "plants.csv"),
            str(b / "plants.csv"),
            "--crs",
            UTM,
            "--tolerance",
            "0.5",
            "-o",
            str(o / "a.txt"),
        ],
        says=(".csv",),
    ),
    Case(
        "bad-crs",
        "analyse",
        "`--crs EPSG:99999999`",
        "exit 2, names --crs",
        lambda b, o: [*_analyse(b, o)[:-3], "--crs", "EPSG:99999999", *SIMS],
        says=("--crs",),
    ),
    # ------------------------------------------------------------------------ points files
    Case(
        "points-missing",
        "analyse",
        "points file does not exist",
        "exit 2, names it",
        lambda b, o: _analyse(b, o, points=o / "nope.csv"),
        says=("nope.csv",),
    ),
    Case("points-empty", "analyse", "empty CSV", "exit 2", _csv(""), says=("p.csv", "empty")),
    Case(
        "points-header-only",
        "analyse",
        "CSV with a header and no rows",
        "exit 2",
        _csv("x,y\n"),
        says=("no points",),
    ),
    Case(
        "points-no-xy",
        "analyse",
        "CSV without x/y columns",
        "exit 2, lists the columns found",
        _csv("east,north\n1,2\n"),
        says=("east, north",),
    ),
    Case(
        "points-text-in-x",
        "analyse",
        "a word in the x column",
        "exit 2, names the row",
        _csv(f"x,y\n{X0 + 1},{Y0 + 1}\nabc,{Y0 + 2}\n"),
        says=("p.csv",),
    ),
    Case(
        "points-not-utf8",
        "analyse",
        "CSV in a legacy 8-bit encoding with binary bytes",
        "exit 2: save as UTF-8",
        _csv(b"x,y\n\xff\xfe\x00\x81,1\n"),
        says=("UTF-8",),
    ),
    Case(
        "points-is-folder",
        "analyse",
        "points path is a folder named p.csv",
        "exit 2: cannot read, names the path",
        _folder_as_csv,
        says=("p.csv",),
    ),
    Case(
        "points-bom",
        "analyse",
        "CSV with a UTF-8 byte-order mark",
        "read normally",
        _csv(
            "\ufeffx,y\n" + "".join(f"{X0 + 1 + i % 37},{Y0 + 1 + i * 7 % 37}\n" for i in range(40))
        ),
        code=0,
    ),
    Case(
        "points-semicolons",
        "analyse",
        "CSV separated by semicolons",
        "read normally",
        _csv("x;y\n" + "".join(f"{X0 + 1 + i % 37};{Y0 + 1 + i * 7 % 37}\n" for i in range(40))),
        code=0,
    ),
    Case(
        "points-crlf",
        "analyse",
        "CSV with Windows line ends",
        "read normally",
        _csv(
            "x,y\r\n" + "".join(f"{X0 + 1 + i % 37},{Y0 + 1 + i * 7 % 37}\r\n" for i in range(40))
        ),
        code=0,
    ),
    Case(
        "points-huge-coordinates",
        "analyse",
        "coordinates near 1e15 m",
        "exit 2: beyond any map projection (float64 would lose precision)",
        _csv("x,y\n1e15,1e15\n1.000000000001e15,1e15\n"),
        says=("beyond any map projection",),
    ),
    Case(
        "points-degrees-no-crs",
        "analyse",
        "longitude/latitude without a CRS",
        "exit 2: pass --crs EPSG:4326",
        lambda b, o: [
            x
            for x in _analyse(b, o, points=_write(o / "deg.csv", "x,y\n15.1,47.0\n15.2,47.1\n"))
            if x not in ("--crs", UTM)
        ],
        says=("--crs",),
    ),
    Case(
        "prj-not-utf8",
        "analyse",
        "sidecar .prj with binary bytes",
        "exit 2, names p.prj",
        _points_with_prj(b"\x00\xff\xfe\x81garbage"),
        says=("p.prj",),
    ),
    Case(
        "prj-garbage",
        "analyse",
        "sidecar .prj with text that is no CRS",
        "exit 2, names p.prj",
        _points_with_prj(b"hello world"),
        says=("p.prj",),
    ),
    # ------------------------------------------------------------------------- plots files
    Case(
        "plots-missing",
        "analyse",
        "plots file does not exist",
        "exit 2, names it",
        lambda b, o: [*_analyse(b, o)[:2], "--plots", str(o / "none.gpkg"), *_analyse(b, o)[4:]],
        says=("none.gpkg",),
    ),
    Case(
        "plots-garbage",
        "analyse",
        "plots file that is not a vector file",
        "exit 2 with GDAL's reason folded into the line",
        _garbage_plots,
        says=("plots.geojson",),
    ),
    Case(
        "plots-geojson-in-metres",
        "analyse",
        "GeoJSON plots in projected metres with no CRS (RFC 7946 makes that longitude/latitude)",
        "exit 2 before any work, says to write longitude/latitude or a GeoPackage",
        _metre_geojson_plots,
        says=("plots.geojson", "longitude/latitude", "GeoPackage"),
        check=_no_output,
    ),
    Case(
        "plots-are-points",
        "analyse",
        "a point layer given as plots",
        "exit 2",
        _point_plots,
        says=("points.csv",),
    ),
    Case(
        "plots-id-field-missing",
        "analyse",
        "`--id-field nosuch`",
        "exit 2, lists the fields",
        lambda b, o: _analyse(b, o, "--id-field", "nosuch"),
        says=("nosuch",),
    ),
    Case(
        "plots-duplicate-ids",
        "analyse",
        "two plots with the same id",
        "exit 2",
        _dup_ids,
        says=("A",),
    ),
    Case(
        "plots-bowtie",
        "analyse",
        "self-intersecting (bow-tie) plot",
        "repaired, with a note",
        _bowtie,
        code=0,
    ),
    # ---------------------------------------------------------------------- rasters
    Case(
        "raster-missing",
        "detect",
        "raster file does not exist",
        "exit 2, names it",
        lambda b, o: _detect(b, o, raster=o / "none.tif"),
        says=("none.tif",),
    ),
    Case(
        "raster-not-an-image",
        "detect",
        "a text file named .tif",
        "exit 2, GDAL's reason in the one line, nothing printed raw",
        _text_raster,
        says=("fake.tif",),
    ),
    Case(
        "raster-truncated",
        "detect",
        "a GeoTIFF cut to a third",
        "exit 2, names the file",
        _truncated_raster,
        says=("cut.tif",),
    ),
    Case(
        "raster-all-nodata",
        "detect",
        "a raster that is entirely nodata",
        "exit 2: check the file and its nodata value",
        _nodata_raster,
        says=("empty.tif", "nodata"),
    ),
    Case(
        "raster-band-out-of-range",
        "detect",
        "`--bands 9` on a one-band raster",
        "exit 2",
        lambda b, o: _detect(b, o, "--bands", "9"),
        says=("9",),
    ),
    Case(
        "detect-output-suffix",
        "detect",
        "`-o trees.shp`",
        "exit 2: use .csv, .gpkg, .geojson",
        lambda b, o: [*_detect(b, o)[:-1], str(o / "t.shp")],
        says=(".gpkg",),
    ),
    # ------------------------------------------------------------------- outputs
    Case(
        "output-is-file",
        "analyse",
        "`-o` names an existing file",
        "exit 2",
        lambda b, o: [*_analyse(b, o)[:-4], str(_write(o / "f", "x")), "--quiet", *SIMS],
        says=("is a file",),
    ),
    Case(
        "output-exists",
        "analyse",
        "`-o` folder exists (earlier results)",
        "exit 2, folder untouched: add --overwrite",
        _existing_folder("keep"),
        says=("--overwrite",),
        check=_check_kept,
    ),
    Case(
        "output-overwrite",
        "analyse",
        "`-o` folder exists, with `--overwrite`",
        "replaced as a whole: no file of the earlier run is kept",
        _existing_folder("overwrite"),
        code=0,
        check=_check_replaced,
    ),
    Case(
        "output-holds-input",
        "analyse",
        "`-o res --overwrite` where the points are res/points.csv",
        "exit 2: the output holds the input",
        _inside_output,
        says=("holds the input",),
    ),
    Case(
        "output-parent-is-file",
        "analyse",
        "`-o afile/res` where afile is a file",
        "exit 2",
        _parent_is_file,
        says=("afile",),
    ),
    Case(
        "output-stale-temp",
        "analyse",
        "hidden temporary file and folder left by a killed run",
        "removed (their writer is gone)",
        _stale_temp,
        code=0,
        check=_check_stale_removed,
    ),
    Case(
        "detect-output-is-plots",
        "detect",
        "`--plots p.geojson -o p.geojson`",
        "exit 2: the output is the input; plots untouched",
        _detect_over_plots,
        says=("is the input",),
        check=_check_plots_intact,
    ),
    Case(
        "detect-output-exists",
        "detect",
        "`-o trees.csv` exists",
        "exit 2: add --overwrite",
        _detect_existing,
        says=("--overwrite",),
    ),
    Case(
        "detect-output-overwrite",
        "detect",
        "`-o trees.csv` exists, with `--overwrite`",
        "replaced",
        _detect_existing_ok,
        code=0,
    ),
    Case(
        "validate-output-exists",
        "validate",
        "`-o acc.csv` exists",
        "exit 2",
        _validate_existing,
        says=("--overwrite",),
    ),
    Case(
        "validate-output-is-input",
        "validate",
        "`-o` is the detected points file",
        "exit 2",
        _validate_over_input,
        says=("is the input",),
    ),
    Case(
        "change-folder-without-points",
        "change",
        "a folder without points.csv",
        "exit 2",
        _results_without_points,
        says=("points.csv",),
    ),
    Case(
        "change-negative-tolerance",
        "change",
        "`--tolerance -1`",
        "exit 2",
        lambda b, o: _change(b, o, "--tolerance", "-1"),
        says=("tolerance",),
    ),
    Case(
        "compare-missing-folder",
        "compare",
        "a results folder that does not exist",
        "exit 2",
        lambda b, o: ["compare", str(o / "none"), "-o", str(o / "cmp")],
        says=("none",),
    ),
    Case(
        "compare-missing-table",
        "compare",
        "a folder without dispersion.csv",
        "exit 2",
        _compare_missing_table,
        says=("dispersion.csv",),
    ),
    Case(
        "compare-into-input",
        "compare",
        "`-o` is one of the results folders",
        "exit 2",
        _compare_into_input,
        says=("is the input",),
    ),
    Case(
        "full-disk",
        "analyse",
        "the disk fills while writing",
        "exit 2: free some disk space; no partial folder",
        _full_disk,
        says=("No space left",),
        check=_no_output,
    ),
    # ---------------------------------------------------------------------- survey files
    Case(
        "plan-output-exists",
        "plan",
        "`-o` folder exists",
        "exit 2 before any simulation; folder untouched",
        _plan_existing,
        says=("--overwrite",),
        check=_check_plan_kept,
    ),
    Case(
        "survey-missing",
        "survey",
        "survey file does not exist",
        "exit 2",
        _plain("survey", "/nonexistent/s.toml"),
        says=("does not exist",),
    ),
    Case(
        "survey-not-utf8",
        "survey",
        "survey file in Latin-1 with accents",
        "exit 2: save as UTF-8",
        _survey(raw=b'[survey]\nname = "Pr\xe9 du lac"\n'),
        says=("UTF-8",),
    ),
    Case(
        "survey-not-toml",
        "survey",
        "survey file with a TOML syntax error",
        "exit 2",
        _survey(raw=b"[survey\nplots = 1\n"),
        says=("not valid TOML",),
    ),
    Case(
        "survey-diameter-number",
        "survey",
        "`diameter = 5`",
        "exit 2 at the key's line",
        _survey(replace=('method = "chm"', 'method = "chm"\ndiameter = 5')),
        says=("line 12: [raster.detect] diameter",),
    ),
    Case(
        "survey-tolerance-text",
        "survey",
        '`[change] tolerance_m = "abc"`',
        "exit 2 at the key's line, before any detection",
        _survey('[change]\ntolerance_m = "abc"\n'),
        says=("line 13: [change] tolerance_m",),
    ),
    Case(
        "survey-permutations-text",
        "survey",
        '`[compare] permutations = "many"`',
        "exit 2",
        _survey('[compare]\npermutations = "many"\n'),
        says=("[compare] permutations",),
    ),
    Case(
        "survey-simulations-huge",
        "survey",
        "`simulations = 5000000`",
        "exit 2",
        _survey(replace=("simulations = 19", "simulations = 5000000")),
        says=("line 5: [statistics] simulations",),
    ),
    Case(
        "survey-five-problems",
        "survey",
        "five bad values in one file",
        "all five reported at once, each at its key's line",
        _survey_5_problems,
        says=("5 problems",),
    ),
    Case(
        "survey-unknown-key",
        "survey",
        "`simulatons = 99` (typo)",
        "exit 2 with a suggestion",
        _survey(replace=("simulations = 19", "simulatons = 19")),
        says=("did you mean",),
    ),
    Case(
        "survey-workers-text",
        "survey",
        '`workers = "two"`',
        "exit 2",
        _survey(replace=('output = "out"', 'output = "out"\nworkers = "two"')),
        says=("workers",),
    ),
    Case(
        "survey-same-file-name",
        "survey",
        'sites "North slope" and "North-slope"',
        "exit 2: they would share a folder name",
        _two_sites,
        says=("would share",),
    ),
    Case(
        "survey-output-exists",
        "survey",
        "output folder exists",
        "exit 2, untouched",
        _survey_output_exists,
        says=("--overwrite",),
        check=_check_survey_kept,
    ),
    Case(
        "survey-rerun-clean",
        "survey",
        "rerun with `--overwrite` into a folder holding "
        "compare-by-site/ and scales.csv of an older run",
        "the folder is replaced whole; the old files are gone",
        _survey_rerun_stale,
        code=0,
        check=_check_survey_clean,
    ),
    Case(
        "survey-truncated-cache",
        "survey",
        "rerun after the cached points CSV was truncated",
        "the cache's file hash does not match: detection runs again",
        _survey_truncated_cache,
        code=0,
        check=_check_cache_recomputed,
    ),
    Case(
        "dask-workers-zero",
        "detect",
        "`--dask-workers 0`",
        "exit 2 before any cluster starts",
        lambda b, o: _detect(b, o, "--dask-workers", "0"),
        says=("--dask-workers", "at least 1"),
        check=lambda b, o: _nothing_written(o),
    ),
    Case(
        "dask-workers-negative",
        "survey",
        "`--dask-workers -2`",
        "exit 2 before the survey file is read",
        lambda b, o: [*_survey()(b, o), "--dask-workers", "-2"],
        says=("--dask-workers", "at least 1"),
    ),
    Case(
        "dask-workers-and-scheduler",
        "detect",
        "`--dask-workers 2 --scheduler tcp://10.0.0.5:8786`",
        "exit 2: one or the other",
        lambda b, o: _detect(b, o, "--dask-workers", "2", "--scheduler", "tcp://10.0.0.5:8786"),
        says=("--dask-workers", "--scheduler", "not both"),
    ),
    Case(
        "dask-workers-and-workers",
        "survey",
        "`--dask-workers 2 --workers 2`",
        "exit 2: --workers is for local processes",
        lambda b, o: [*_survey()(b, o), "--dask-workers", "2", "--workers", "2"],
        says=("--workers", "--dask-workers", "drop --workers"),
    ),
    Case(
        "dask-not-installed",
        "detect",
        "`--dask-workers 2` without the optional Dask support installed",
        "exit 2, names the extra to install",
        lambda b, o: _detect(b, o, "--dask-workers", "2"),
        says=("--dask-workers", "ecoscan[dask]"),
        check=lambda b, o: _nothing_written(o),
    ),
    Case(
        "scheduler-malformed",
        "survey",
        "`--scheduler http://10.0.0.5:8786` (a web address, not a scheduler's)",
        "exit 2 at once with the expected form",
        lambda b, o: [*_survey()(b, o), "--scheduler", "http://10.0.0.5:8786"],
        says=("--scheduler http://10.0.0.5:8786", "tcp://HOST:PORT"),
    ),
    Case(
        "scheduler-unreachable",
        "detect",
        "`--scheduler` at an address where no scheduler listens",
        "exit 2 after Dask's connect timeout (`distributed.comm.timeouts.connect`)",
        lambda b, o: _detect(b, o, "--scheduler", f"tcp://127.0.0.1:{_free_port()}"),
        says=("cannot reach the Dask scheduler", "--scheduler tcp://127.0.0.1:"),
        check=lambda b, o: _nothing_written(o),
    ),
]


def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def markdown_table() -> str:
    """The catalogue as a Markdown table."""
    rows = ["| # | id | command | input | what ecoscan does | exit |", "|---|---|---|---|---|---|"]
    for i, c in enumerate(CASES, 1):
        rows.append(f"| {i} | `{c.id}` | {c.command} | {c.what} | {c.does} | {c.code} |")
    return "\n".join(rows)


if __name__ == "__main__":  # rewrite the table in docs/errors.md
    doc = Path(__file__).resolve().parents[1] / "docs" / "errors.md"
    text = doc.read_text()
    start, end = "<!-- catalogue:start -->", "<!-- catalogue:end -->"
    head, rest = text.split(start)
    _, tail = rest.split(end)
    doc.write_text(f"{head}{start}\n{markdown_table()}\n{end}{tail}")
    print(f"{len(CASES)} cases written to {doc}")
    os.sys.exit(0)
