"""``ecoscan detect`` end to end, followed by ``ecoscan validate``, and bad input."""

import csv

import numpy as np
import pytest
import shapely
from detect_helpers import UTM, X0, Y0, chm_scene, classes_scene, ortho_scene
from pyproj import CRS
from rasterio.transform import from_origin

from ecoscan.cli import build_parser, main
from ecoscan.io.vector import read_points, write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.synthetic import write_geotiff


def _f1_via_cli(tmp_path, raster, truth, extra, tol):
    write_points(truth, tmp_path / "truth.csv")
    out = tmp_path / "det.csv"
    assert main(["detect", str(raster), "-o", str(out), "--quiet", *extra]) == 0
    acc = tmp_path / "acc.csv"
    assert (
        main(
            [
                "validate",
                str(out),
                str(tmp_path / "truth.csv"),
                "--tolerance",
                str(tol),
                "-o",
                str(acc),
                "--quiet",
            ]
        )
        == 0
    )
    row = list(csv.DictReader(acc.open()))[-1]
    assert row["plot_id"] == "all"
    return float(row["f1"]), out


def test_imagery_detect_then_validate(tmp_path):
    raster, truth = ortho_scene(tmp_path)
    f1, out = _f1_via_cli(tmp_path, raster, truth, ["--diameter", "0.5:2.2"], 0.25)
    assert f1 >= 0.95
    header = out.read_text().splitlines()[0].split(",")
    assert header[:2] == ["x", "y"] and "diameter_m" in header and header[-1] == "tile"
    assert (tmp_path / "det.prj").exists()


def test_chm_detect_then_validate(tmp_path):
    raster, truth = chm_scene(tmp_path)
    f1, out = _f1_via_cli(tmp_path, raster, truth, ["--crowns", "--tile-size", "128"], 1.0)
    assert f1 >= 0.95
    assert "height_m" in out.read_text().splitlines()[0]


def test_classes_detect_then_validate(tmp_path):
    raster, truth = classes_scene(tmp_path)
    f1, _out = _f1_via_cli(tmp_path, raster, truth, ["--classes", "3", "--diameter", "1:4"], 0.5)
    assert f1 >= 0.95


def test_formats_and_crs(tmp_path):
    raster, _truth = classes_scene(tmp_path)
    for name in ("p.gpkg", "p.geojson"):
        assert (
            main(
                [
                    "detect",
                    str(raster),
                    "-o",
                    str(tmp_path / name),
                    "--classes",
                    "3",
                    "--diameter",
                    "1:4",
                    "--quiet",
                ]
            )
            == 0
        )
    gp = read_points(tmp_path / "p.gpkg")
    gj = read_points(tmp_path / "p.geojson")  # WGS 84 on disk (RFC 7946), back to UTM here
    assert gp.crs == CRS.from_user_input(UTM)
    assert any("4326" in n or "geographic" in n for n in gj.notes)
    np.testing.assert_allclose(np.sort(gj.x), np.sort(gp.x), atol=0.01)
    import json

    lon, lat = json.loads((tmp_path / "p.geojson").read_text())["features"][0]["geometry"][
        "coordinates"
    ]
    assert 12 < lon < 18 and 45 < lat < 55  # UTM zone 33N, northing 5.6e6 m


def test_plots_option_and_per_plot_table(tmp_path, capsys):
    raster, _truth = ortho_scene(tmp_path)
    crs = CRS.from_user_input(UTM)
    layer = PlotLayer(
        [
            Plot("north", shapely.box(X0 + 1, Y0 - 10, X0 + 10, Y0 - 1)),
            Plot("south", shapely.box(X0 + 1, Y0 - 25, X0 + 10, Y0 - 16)),
        ],
        crs,
    )
    write_plots(layer, tmp_path / "plots.gpkg")
    out = tmp_path / "d.csv"
    assert (
        main(
            [
                "detect",
                str(raster),
                "-o",
                str(out),
                "--diameter",
                "0.5:2.2",
                "--plots",
                str(tmp_path / "plots.gpkg"),
                "--tile-size",
                "128",
            ]
        )
        == 0
    )
    pts = read_points(out)
    assert set(pts.attrs["plot_id"]) == {"north", "south"}
    printed = capsys.readouterr().out
    assert "north" in printed and "tiles read" in printed


def test_help_has_examples():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    for name in ("detect", "validate"):
        assert "example:" in sub.choices[name].format_help()


def _bad(tmp_path, capsys, argv, match):
    out = tmp_path / "out" / "pts.csv"
    code = main(["detect", *argv, "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.startswith("error:") and len(err.strip().splitlines()) == 1, err
    assert match in err, err
    assert not out.exists()
    assert not (out.parent.exists() and any(out.parent.iterdir()))


@pytest.fixture(scope="module")
def ortho(tmp_path_factory):
    return ortho_scene(tmp_path_factory.mktemp("bad"), shape=(200, 200), n=20)[0]


def test_bad_inputs_give_one_line_and_no_file(tmp_path, capsys, ortho):
    _bad(tmp_path, capsys, [str(ortho), "--bands", "1,2,7"], "out of range")
    _bad(tmp_path, capsys, [str(ortho), "--diameter", "3:1"], "empty")
    _bad(tmp_path, capsys, [str(ortho), "--diameter", "0.02:1"], "below one pixel")
    _bad(tmp_path, capsys, [str(tmp_path / "nope.tif")], "does not exist")
    trunc = tmp_path / "trunc.tif"
    trunc.write_bytes(ortho.read_bytes()[:3000])
    _bad(tmp_path, capsys, [str(trunc)], "truncated")
    nod = write_geotiff(
        tmp_path / "nod.tif",
        np.zeros((3, 64, 64), np.uint8),
        from_origin(X0, Y0, 0.05, 0.05),
        UTM,
        nodata=0,
    )
    _bad(tmp_path, capsys, [str(nod)], "entirely nodata")
    cls = write_geotiff(
        tmp_path / "cls.tif", np.ones((64, 64), np.uint8), from_origin(X0, Y0, 0.05, 0.05), UTM
    )
    _bad(tmp_path, capsys, [str(cls), "--classes", "3,4"], "do not occur")
    raw = write_geotiff(tmp_path / "raw.tif", np.ones((64, 64), np.uint8), None, None)
    _bad(tmp_path, capsys, [str(raw)], "--pixel-size")
    far = PlotLayer([Plot("far", shapely.box(0, 0, 10, 10))], CRS.from_user_input(UTM))
    write_plots(far, tmp_path / "far.gpkg")
    _bad(tmp_path, capsys, [str(ortho), "--plots", str(tmp_path / "far.gpkg")], "do not overlap")
    code = main(["detect", str(ortho), "-o", str(tmp_path / "x.shp")])
    assert code == 2 and not (tmp_path / "x.shp").exists()
    capsys.readouterr()


def test_flat_raster_gives_explicit_zero_result(tmp_path, capsys):
    flat = write_geotiff(
        tmp_path / "flat.tif",
        np.full((3, 64, 64), 120, np.uint8),
        from_origin(X0, Y0, 0.05, 0.05),
        UTM,
    )
    out = tmp_path / "z.csv"
    assert main(["detect", str(flat), "-o", str(out)]) == 0
    assert out.read_text().splitlines()[0].startswith("x,y")
    assert len(out.read_text().splitlines()) == 1
    assert "no plants" in capsys.readouterr().err
