"""``ecoscan analyse`` end to end: outputs, reprojection note, reproducibility, bad input."""

import json

import numpy as np
import pytest
import shapely
from pyproj import CRS

from ecoscan.analysis.dispersion.columns import DISPERSION_COLUMNS
from ecoscan.cli import main
from ecoscan.io.crs import transform_xy
from ecoscan.stats.csr import uniform_in_polygon

X0, Y0 = 512_000.0, 5_210_000.0
PLOTS = {
    "meadow": shapely.box(X0, Y0, X0 + 50, Y0 + 50),
    "slope": shapely.Polygon([(X0 + 80, Y0), (X0 + 150, Y0 + 10), (X0 + 140, Y0 + 70)]),
    "bare": shapely.box(X0 + 200, Y0, X0 + 230, Y0 + 30),
}


def _geojson(path, plots, to_wgs84=True):
    feats = []
    for pid, g in plots.items():
        c = np.asarray(g.exterior.coords)
        x, y = c[:, 0], c[:, 1]
        if to_wgs84:
            x, y = transform_xy(x, y, CRS.from_epsg(32633), CRS.from_epsg(4326))
        ring = [[float(a), float(b)] for a, b in zip(x, y, strict=True)]
        feats.append(
            {
                "type": "Feature",
                "properties": {"plot_id": pid},
                "geometry": {"type": "Polygon", "coordinates": [ring]},
            }
        )
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    return path


@pytest.fixture()
def survey(tmp_path):
    rng = np.random.default_rng(4)
    xy = np.vstack(
        [
            uniform_in_polygon(PLOTS["meadow"], 60, rng=rng),
            uniform_in_polygon(PLOTS["slope"], 35, rng=rng),
        ]
    )
    pts = tmp_path / "plants.csv"
    pts.write_text("x,y\n" + "".join(f"{a:.3f},{b:.3f}\n" for a, b in xy))
    plots = _geojson(tmp_path / "plots.geojson", PLOTS)
    return pts, plots


def _run(argv, capsys):
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def test_analyse_writes_results_and_table(survey, tmp_path, capsys):
    pts, plots = survey
    out = tmp_path / "res"
    argv = [
        "analyse", str(pts), "--plots", str(plots), "--crs", "EPSG:32633",
        "-o", str(out), "--simulations", "99",
    ]  # fmt: skip
    rc, stdout, stderr = _run(argv, capsys)
    assert rc == 0, stderr
    for name in ("dispersion.csv", "dispersion.json", "points.csv", "points.prj", "plots.gpkg"):
        assert (out / name).is_file()
    header = (out / "dispersion.csv").read_text().splitlines()[0].split(",")
    assert header[: len(DISPERSION_COLUMNS)] == list(DISPERSION_COLUMNS)
    assert "meadow" in stdout and "slope" in stdout
    # "bare" lies beyond every point (outside their convex hull): not surveyed, so it is
    # left out with a note naming it instead of reading as a plot with no plants
    assert "bare" not in stdout and "plot bare lies outside" in stderr
    # plots came in WGS 84 and were reprojected: the output says so
    assert "reprojected" in stderr
    doc = json.loads((out / "dispersion.json").read_text())
    assert any("reprojected" in n for n in doc["notes"])
    assert [p["plot_id"] for p in doc["plots"]] == ["meadow", "slope"]
    assert any("plot bare" in n and "not surveyed" in n for n in doc["notes"])
    # same seed, same output
    first = (out / "dispersion.csv").read_bytes()
    rc, _, err = _run(argv, capsys)  # an existing folder is kept without --overwrite
    assert rc == 2 and "--overwrite" in err and (out / "dispersion.csv").read_bytes() == first
    rc, _, _ = _run([*argv, "--overwrite"], capsys)
    assert rc == 0 and (out / "dispersion.csv").read_bytes() == first


def _bad_case(tmp_path, case, survey):
    pts, plots = survey
    args = [str(pts), "--plots", str(plots), "--crs", "EPSG:32633"]
    if case == "missing points file":
        args[0] = str(tmp_path / "nope.csv")
    elif case == "missing plots file":
        args[2] = str(tmp_path / "nope.gpkg")
    elif case == "csv without x/y":
        f = tmp_path / "noxy.csv"
        f.write_text("east,north\n1,2\n")
        args[0] = str(f)
    elif case == "non-numeric coordinate":
        f = tmp_path / "text.csv"
        f.write_text(f"x,y\n{X0 + 5},{Y0 + 5}\nabc,{Y0 + 6}\n")
        args[0] = str(f)
    elif case == "nan coordinate":
        f = tmp_path / "nan.csv"
        f.write_text(f"x,y\n{X0 + 5},{Y0 + 5}\nnan,{Y0 + 6}\n")
        args[0] = str(f)
    elif case == "no points":
        f = tmp_path / "empty.csv"
        f.write_text("x,y\n")
        args[0] = str(f)
    elif case == "plots without polygons":
        f = tmp_path / "lines.geojson"
        line = {"type": "LineString", "coordinates": [[13.1, 47.0], [13.2, 47.1]]}
        feat = {"type": "Feature", "properties": {"plot_id": "a"}, "geometry": line}
        f.write_text(json.dumps({"type": "FeatureCollection", "features": [feat]}))
        args[2] = str(f)
    elif case == "degrees without crs":
        f = tmp_path / "deg.csv"
        f.write_text("x,y\n13.151,47.012\n13.152,47.013\n")
        args = [str(f), "--plots", str(plots)]
    elif case == "no point in any plot":
        f = tmp_path / "far.csv"
        f.write_text(f"x,y\n{X0 + 9000},{Y0 + 9000}\n{X0 + 9001},{Y0 + 9003}\n")
        args[0] = str(f)
    elif case == "zero simulations":
        args += ["--simulations", "0"]
    elif case == "alpha out of range":
        args += ["--alpha", "5"]
    elif case == "negative quadrat":
        args += ["--quadrat", "-2"]
    return args


BAD = {
    "missing points file": "does not exist",
    "missing plots file": "does not exist",
    "csv without x/y": "no 'x' and 'y'",
    "non-numeric coordinate": "not a number",
    "nan coordinate": "missing or infinite",
    "no points": "no points",
    "plots without polygons": "no polygons",
    "degrees without crs": "--crs",
    "no point in any plot": "CRS mix-up",
    "zero simulations": "simulations",
    "alpha out of range": "alpha",
    "negative quadrat": "quadrat",
}


@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_one_line_exit_2_no_output(case, survey, tmp_path, capsys):
    out = tmp_path / "res"
    args = _bad_case(tmp_path, case, survey)
    argv = ["analyse", *args, "-o", str(out)]
    if "--simulations" not in args:
        argv += ["--simulations", "19"]
    rc, stdout, stderr = _run(argv, capsys)
    assert rc == 2 and stdout == ""
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), stderr
    assert BAD[case] in lines[0]
    assert "Traceback" not in stderr
    assert not out.exists() or not any(out.iterdir())


def test_output_path_that_is_a_file_is_refused(survey, tmp_path, capsys):
    pts, plots = survey
    f = tmp_path / "taken.txt"
    f.write_text("keep me")
    argv = ["analyse", str(pts), "--plots", str(plots), "--crs", "EPSG:32633", "-o", str(f)]
    rc, _, stderr = _run(argv, capsys)
    assert rc == 2 and stderr.startswith("error: ") and "is a file" in stderr
    assert f.read_text() == "keep me"


def test_options_reach_the_analysis(survey, tmp_path, capsys):
    pts, plots = survey
    out = tmp_path / "res"
    argv = [
        "analyse", str(pts), "--plots", str(plots), "--crs", "EPSG:32633", "-o", str(out),
        "--simulations", "49", "--seed", "5", "--alpha", "0.1", "--direction", "clustered",
        "--guard", "3", "--quadrat", "20", "--stop-after", "0",
    ]  # fmt: skip
    rc, _, stderr = _run(argv, capsys)
    assert rc == 0, stderr
    doc = json.loads((out / "dispersion.json").read_text())
    assert doc["parameters"] == {
        "simulations": 49,
        "seed": 5,
        "alpha": 0.1,
        "direction": "clustered",
        "guard_m": 3.0,
        "quadrat_m": 20.0,
        "min_points": 30,
        "stop_after": 0,
    }
    meadow = doc["plots"][0]
    assert meadow["guard_m"] == 3.0 and meadow["quadrat_size_m"] == 20.0
    assert meadow["simulations"] == 49
    # one-sided: p_mc is the lower-tail rank p-value
    assert meadow["p_mc"] == meadow["p_mc_clustered"]
