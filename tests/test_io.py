"""Reading and writing points and plots; CRS handling."""

import numpy as np
import pytest
import shapely
from pyproj import CRS

from ecoscan.errors import InputError
from ecoscan.io.inputs import load_points_and_plots
from ecoscan.io.vector import read_plots, read_points, write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet

UTM33 = CRS.from_epsg(32633)


def _points(n=50, seed=0):
    rng = np.random.default_rng(seed)
    x = 500_000 + rng.uniform(0, 100, n)
    y = 5_000_000 + rng.uniform(0, 100, n)
    return PointSet(x, y, {"score": rng.uniform(size=n)}, UTM33)


@pytest.mark.parametrize("ext", [".csv", ".gpkg", ".geojson"])
def test_points_round_trip(tmp_path, ext):
    pts = _points()
    path = write_points(pts, tmp_path / f"p{ext}")
    back = read_points(path)
    assert back.crs == UTM33
    np.testing.assert_allclose(back.x, pts.x, atol=1e-3)
    np.testing.assert_allclose(back.attrs["score"], pts.attrs["score"], atol=1e-6)


def test_csv_sidecar_prj_written(tmp_path):
    write_points(_points(), tmp_path / "p.csv")
    assert CRS.from_wkt((tmp_path / "p.prj").read_text()) == UTM33


def test_degree_csv_without_crs_refused(tmp_path):
    f = tmp_path / "deg.csv"
    f.write_text("x,y\n13.40,52.52\n13.41,52.53\n")
    with pytest.raises(InputError, match="--crs"):
        read_points(f)


def test_degree_csv_with_crs_goes_to_utm(tmp_path):
    f = tmp_path / "deg.csv"
    f.write_text("x,y\n13.40,52.52\n13.41,52.52\n")
    pts = read_points(f, "EPSG:4326")
    assert pts.crs.to_epsg() == 32633  # 13.4 E lies in UTM zone 33 (6-degree zones from 180 W)
    # 0.01 degree of longitude at 52.52 N is about 677 m (111.32 km * cos 52.52 deg)
    assert abs(abs(pts.x[1] - pts.x[0]) - 677.0) < 3.0


@pytest.mark.parametrize(
    "text, match",
    [
        ("a,b\n1,2\n", "no 'x' and 'y'"),
        ("x,y\n1,2\nfoo,3\n", "not a number"),
        ("x,y\n1,2\nnan,3\n", "missing or infinite"),
        ("x,y\n", "no points"),
    ],
)
def test_bad_csv(tmp_path, text, match):
    f = tmp_path / "bad.csv"
    f.write_text(text)
    with pytest.raises(InputError, match=match):
        read_points(f, "EPSG:32633")


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_points(tmp_path / "nope.csv")


def test_plots_ids_reprojection_and_repair(tmp_path):
    bowtie = shapely.Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])  # self-intersecting
    lay = PlotLayer(
        [
            Plot("north", shapely.box(500_000, 5_000_000, 500_050, 5_000_050)),
            Plot("bow", shapely.affinity.translate(bowtie, 500_000, 5_000_000)),
        ],
        UTM33,
    )
    write_plots(lay, tmp_path / "plots.geojson")  # GeoJSON is written in WGS 84
    back = read_plots(tmp_path / "plots.geojson", target_crs=UTM33)
    assert back.ids == ["north", "bow"]
    assert any("reprojected" in n for n in back.notes)
    assert any("repaired" in n for n in back.notes)
    assert abs(back.plots[0].area_m2 - 2500.0) < 0.5
    assert back.plots[1].geometry.is_valid


def test_projected_metres_in_a_geojson_file_are_refused(tmp_path):
    # RFC 7946 §4: GeoJSON coordinates are WGS 84 longitude/latitude; metres written there
    # (a common mistake) used to give "no polygons with area" after a failed reprojection
    import json

    ring = [[500_000, 5_000_000], [500_050, 5_000_000], [500_050, 5_000_050], [500_000, 5_000_000]]
    feature = {
        "type": "Feature",
        "properties": {},
        "geometry": {"type": "Polygon", "coordinates": [ring]},
    }
    (tmp_path / "plots.geojson").write_text(
        json.dumps({"type": "FeatureCollection", "features": [feature]})
    )
    with pytest.raises(InputError, match=r"outside longitude/latitude ranges.*RFC 7946"):
        read_plots(tmp_path / "plots.geojson", target_crs=UTM33)
    point = {
        "type": "Feature",
        "properties": {},
        "geometry": {"type": "Point", "coordinates": ring[0]},
    }
    (tmp_path / "pts.geojson").write_text(
        json.dumps({"type": "FeatureCollection", "features": [point]})
    )
    with pytest.raises(InputError, match="outside longitude/latitude ranges"):
        read_points(tmp_path / "pts.geojson")


def test_no_point_in_any_plot_hints_at_crs(tmp_path):
    write_points(_points(), tmp_path / "p.csv")
    far = PlotLayer([Plot("x", shapely.box(0, 0, 10, 10))], UTM33)
    write_plots(far, tmp_path / "plots.gpkg")
    with pytest.raises(InputError, match="CRS mix-up"):
        load_points_and_plots(tmp_path / "p.csv", tmp_path / "plots.gpkg")


def test_label_columns_stay_text(tmp_path):
    f = tmp_path / "p.csv"
    f.write_text("x,y,plot_id,height_m\n10.5,20.5,1,3.5\n30.5,40.5,2,4\n")
    pts = read_points(f, "EPSG:32633")
    assert list(pts.attrs["plot_id"]) == ["1", "2"]  # plot "1" is not the number 1.0
    assert pts.attrs["height_m"].dtype.kind == "f"
