"""Detection settings, automatic method choice, and CRS handling of the output."""

import numpy as np
import pytest
from detect_helpers import UTM, X0, Y0
from pyproj import CRS
from rasterio.transform import from_origin

from ecoscan.cli import main
from ecoscan.detect import DetectionSettings, choose_method, detect_raster
from ecoscan.detect.settings import parse_band_spec
from ecoscan.errors import InputError
from ecoscan.io.raster import open_raster
from ecoscan.io.vector import read_points
from ecoscan.synthetic import place_crowns, render_classes, render_orthomosaic, write_geotiff


def test_mapping_round_trip_and_unknown_keys():
    s = DetectionSettings.from_mapping({"diameter": "0.4:2.5", "classes": "3,4", "crowns": True})
    assert (s.diameter_min_m, s.diameter_max_m, s.classes) == (0.4, 2.5, (3, 4))
    assert DetectionSettings.from_mapping(s.to_dict()) == s
    with pytest.raises(InputError, match="unknown detection setting"):
        DetectionSettings.from_mapping({"diametre": "1:2"})


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"diameter_min_m": 3.0, "diameter_max_m": 1.0}, "empty"),
        ({"diameter_min_m": -1.0}, "positive"),
        ({"method": "lidar"}, "unknown"),
        ({"bands": "red=x"}, "not a band number"),
        ({"bands": "0"}, "start at 1"),
    ],
)
def test_bad_settings(kw, match):
    with pytest.raises(InputError, match=match):
        DetectionSettings(**kw)


def test_band_spec():
    assert parse_band_spec("3,2,1") == (("red", 3), ("green", 2), ("blue", 1))
    assert parse_band_spec("red=3, nir=4") == (("red", 3), ("nir", 4))


def test_automatic_choice(tmp_path):
    tr = from_origin(X0, Y0, 0.1, 0.1)
    rgb = write_geotiff(tmp_path / "rgb.tif", np.zeros((3, 8, 8), np.uint8), tr, UTM)
    chm = write_geotiff(tmp_path / "chm.tif", np.zeros((8, 8), np.float32), tr, UTM)
    cls = write_geotiff(tmp_path / "cls.tif", np.zeros((8, 8), np.uint8), tr, UTM)
    assert choose_method(open_raster(rgb), DetectionSettings())[:3] == ("imagery", (1, 2, 3), "exg")
    assert choose_method(open_raster(chm), DetectionSettings())[0] == "chm"
    assert choose_method(open_raster(cls), DetectionSettings(classes=(3,)))[0] == "classes"
    assert choose_method(open_raster(cls), DetectionSettings())[:3] == ("imagery", (1,), "band")
    named = write_geotiff(
        tmp_path / "ms.tif",
        np.zeros((4, 8, 8), np.uint16),
        tr,
        UTM,
        band_names=["blue", "green", "red", "nir"],
    )
    assert choose_method(open_raster(named), DetectionSettings())[1:3] == ((3, 4), "ndvi")


def test_geographic_raster_gives_utm_points(tmp_path):
    # 1e-6 deg pixels near 15 E, 45 N: points must come out in UTM zone 33N (EPSG:32633,
    # zone = floor((15 + 180) / 6) + 1 = 33, common practice) with a note, never in degrees.
    rng = np.random.default_rng(1)
    shape = (200, 200)
    xy, d = place_crowns(shape, 30, (12, 24), rng)
    img = render_orthomosaic(xy, d, shape, rng)
    path = write_geotiff(
        tmp_path / "geo.tif", img, from_origin(15.0, 45.0, 1e-6, 1e-6), "EPSG:4326"
    )
    res = detect_raster(path, DetectionSettings(diameter_min_m=0.8, diameter_max_m=2.5))
    assert res.points.crs == CRS.from_epsg(32633)
    assert res.n >= 27
    assert any("reprojected" in n and "UTM" in n for n in res.notes)
    assert np.all(res.points.x > 100000) and np.all(res.points.y > 4.9e6)


def test_mask_raster_restricts_and_labels(tmp_path, capsys):
    rng = np.random.default_rng(2)
    shape = (240, 240)
    xy, d = place_crowns(shape, 60, (12, 24), rng)
    tr = from_origin(X0, Y0, 0.1, 0.1)
    write_geotiff(tmp_path / "c.tif", render_classes(xy, d, shape, rng), tr, UTM)
    ids = np.zeros(shape, np.uint8)
    ids[:120, :120] = 1
    ids[120:, 120:] = 2
    write_geotiff(tmp_path / "ids.tif", ids, tr, UTM)
    out = tmp_path / "p.csv"
    assert (
        main(
            [
                "detect",
                str(tmp_path / "c.tif"),
                "-o",
                str(out),
                "--classes",
                "3",
                "--diameter",
                "1:3",
                "--mask",
                str(tmp_path / "ids.tif"),
                "--quiet",
            ]
        )
        == 0
    )
    pts = read_points(out)
    ids_read = pts.attrs["plot_id"]  # plot ids come back from CSV as text labels
    assert set(ids_read.tolist()) == {"1", "2"}
    col = (pts.x - X0) / 0.1
    row = (Y0 - pts.y) / 0.1
    one = ids_read == "1"
    assert np.all((col[one] < 120) & (row[one] < 120))
    assert np.all((col[~one] >= 120) & (row[~one] >= 120))


def test_feet_raster_gives_metre_points(tmp_path):
    # EPSG:2263 is in US survey feet (1 ftUS = 1200/3937 m, NIST): at 0.2 ftUS per pixel
    # (0.061 m) crowns drawn 14-26 px across are 0.85-1.6 m; points come out in UTM metres.
    rng = np.random.default_rng(3)
    shape = (200, 200)
    xy, d = place_crowns(shape, 30, (14, 26), rng)
    img = render_orthomosaic(xy, d, shape, rng)
    path = write_geotiff(
        tmp_path / "ft.tif", img, from_origin(1000000, 200000, 0.2, 0.2), "EPSG:2263"
    )
    ps = 0.2 * 1200 / 3937
    res = detect_raster(path, DetectionSettings(diameter_min_m=12 * ps, diameter_max_m=28 * ps))
    assert res.pixel_size_m == pytest.approx(ps)
    assert res.points.crs.to_epsg() == 32618  # Long Island lies in UTM zone 18N
    assert res.n >= 27
    med = np.median(res.points.attrs["diameter_m"])
    assert med == pytest.approx(np.median(d) * ps, rel=0.15)
