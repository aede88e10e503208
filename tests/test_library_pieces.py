"""Pieces once written by hand, now the libraries' own functions, checked against those
libraries (rasterio, pyproj, the csv module, shapely) and the published constant of the
hexagonal lattice."""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest
import shapely
from pyproj import CRS
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info
from rasterio.transform import Affine, from_origin
from rasterio.transform import xy as rasterio_xy
from rasterio.windows import Window
from rasterio.windows import bounds as window_bounds

from ecoscan.io.crs import utm_crs_for
from ecoscan.io.raster import RasterInfo, pixel_to_map, window_polygons
from ecoscan.io.vector import read_points, write_points
from ecoscan.model.membership import points_in_plot
from ecoscan.model.points import PointSet
from ecoscan.stats.nearest import R_HEXAGONAL, clark_evans

NORTH_UP = from_origin(500_000.0, 4_100_000.0, 0.25, 0.25)
ROTATED = Affine.rotation(20.0) @ Affine.scale(0.5, -0.5)


def _info(transform, width=300, height=200):
    return RasterInfo(
        path="x.tif", width=width, height=height, count=3, dtype="uint8",
        transform=transform, crs=CRS.from_epsg(32633), pixel_size_m=0.25,
        descriptions=("", "", ""), colorinterp=("red", "green", "blue"), data_bands=(1, 2, 3),
    )  # fmt: skip


@pytest.mark.parametrize("transform", [NORTH_UP, ROTATED])
def test_pixel_centres_agree_with_rasterio(transform):
    rows = np.array([0.0, 10.0, 199.0])
    cols = np.array([0.0, 25.5, 299.0])
    x, y = pixel_to_map(_info(transform), cols, rows)
    rx, ry = rasterio_xy(transform, rows, cols, offset="center")
    assert np.allclose(x, rx, rtol=0, atol=1e-6) and np.allclose(y, ry, rtol=0, atol=1e-6)


def test_window_outline_is_rasterio_bounds_when_north_up():
    win = Window(40, 16, 64, 32)
    poly = window_polygons(NORTH_UP, 40, 16, 64, 32)[0]
    left, bottom, right, top = window_bounds(win, NORTH_UP)
    assert poly.bounds == pytest.approx((left, bottom, right, top), abs=1e-9)
    assert poly.area == pytest.approx(64 * 32 * 0.25**2)


def test_rotated_window_outline_keeps_its_area():
    # an affine map scales every area by |det|: 0.25 m² per pixel here
    poly = window_polygons(ROTATED, 0, 0, 10, 4)[0]
    assert poly.area == pytest.approx(40 * abs(ROTATED.determinant))
    assert poly.area < shapely.box(*poly.bounds).area  # a tilted rectangle, not its box


@pytest.mark.parametrize("lon, lat", [(13.4, 52.5), (-70.6, -33.4), (2.9, 0.5)])
def test_utm_zone_matches_pyproj_database(lon, lat):
    # pyproj's CRS database query (one candidate away from zone edges); it costs about
    # 0.3 s a call, so ecoscan keeps the closed-form zone number and checks it here
    found = query_utm_crs_info(
        datum_name="WGS 84", area_of_interest=AreaOfInterest(lon, lat, lon, lat)
    )
    codes = {int(c.code) for c in found}
    assert utm_crs_for(lon, lat).to_epsg() in codes and len(codes) == 1


def test_points_csv_is_read_by_the_csv_module(tmp_path):
    kinds = np.array(["oak, young", 'say "hi"', "plain"], dtype=object)
    pts = PointSet(np.array([1.0, 2.0, 3.0]), np.array([4.0, 5.0, 6.0]), {"kind": kinds})
    path = write_points(pts, tmp_path / "p.csv")
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["x", "y", "kind"]
    assert [r[2] for r in rows[1:]] == list(kinds)
    assert path.read_text(encoding="utf-8").splitlines()[1] == '1.000,4.000,"oak, young"'
    back = read_points(path)
    assert list(back.attrs["kind"]) == list(kinds)


def test_points_on_the_plot_edge_count_as_inside():
    square = shapely.box(0, 0, 10, 10)
    x = np.array([0.0, 10.0, 5.0, 10.000001, 5.0])
    y = np.array([5.0, 10.0, 5.0, 5.0, -1e-9])
    assert points_in_plot(x, y, square).tolist() == [True, True, True, False, False]


def test_hexagonal_constant():
    # Clark & Evans (1954), Ecology 35:445: R = 2.1491 for hexagonal packing; a triangular
    # lattice of spacing s has density 2 / (sqrt(3) s²), so R = 2 sqrt(2 / sqrt(3))
    assert R_HEXAGONAL == pytest.approx(2 * math.sqrt(2 / math.sqrt(3)), abs=1e-4)
    s = 1.0
    i, j = np.mgrid[0:30, 0:30]
    xy = np.column_stack([(i + 0.5 * (j % 2)).ravel() * s, (j * math.sqrt(3) / 2).ravel() * s])
    # the lattice's own area (one rhombus per point) so that the density is exact
    area = xy.shape[0] * s * s * math.sqrt(3) / 2
    assert clark_evans(xy, area).statistic == pytest.approx(R_HEXAGONAL, abs=1e-3)
