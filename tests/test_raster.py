"""Opening rasters: pixel sizes in metres, masks, georeferencing and bad files."""

import math

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from ecoscan.errors import InputError
from ecoscan.io.raster import (
    open_raster,
    pixel_to_map,
    plots_from_mask,
    read_decimated,
    read_window,
)
from ecoscan.synthetic import write_geotiff


def test_projected_metres(tmp_path):
    p = write_geotiff(
        tmp_path / "m.tif",
        np.zeros((20, 30), np.uint8),
        from_origin(500000, 6000000, 0.05, 0.05),
        "EPSG:32633",
    )
    info = open_raster(p)
    assert info.pixel_size_m == pytest.approx(0.05)
    assert info.shape == (20, 30)
    # centre of pixel (col 0, row 0) is half a pixel in from the corner
    x, y = pixel_to_map(info, np.array([0.0]), np.array([0.0]))
    assert x[0] == pytest.approx(500000.025) and y[0] == pytest.approx(5999999.975)


def test_us_survey_feet_converted(tmp_path):
    # EPSG:2263 is in US survey feet; 1 US survey foot = 1200/3937 m (NIST definition)
    p = write_geotiff(
        tmp_path / "ft.tif",
        np.zeros((10, 10), np.uint8),
        from_origin(1000000, 200000, 1.0, 1.0),
        "EPSG:2263",
    )
    info = open_raster(p)
    assert info.pixel_size_m == pytest.approx(1200 / 3937, rel=1e-9)
    assert any("converted" in n for n in info.notes)


def test_geographic_pixel_size_from_ellipsoid(tmp_path):
    # At 45 deg latitude on WGS 84 one degree of longitude is about 78 847 m and one of
    # latitude about 111 132 m (values from memory, common geodesy tables), so a pixel of
    # 1e-6 deg is about sqrt(0.078847 * 0.111132) = 0.09361 m across.
    p = write_geotiff(
        tmp_path / "geo.tif",
        np.zeros((50, 50), np.uint8),
        from_origin(15.0, 45.0 + 25e-6, 1e-6, 1e-6),
        "EPSG:4326",
    )
    info = open_raster(p)
    assert info.pixel_size_m == pytest.approx(math.sqrt(0.078847 * 0.111132), rel=0.005)
    assert any("degrees" in n for n in info.notes)


def test_no_georeferencing_needs_pixel_size(tmp_path):
    p = write_geotiff(tmp_path / "raw.tif", np.zeros((10, 12), np.uint8), None, None)
    with pytest.raises(InputError, match="--pixel-size"):
        open_raster(p)
    info = open_raster(p, pixel_size_m=0.1)
    assert info.local and info.crs is None
    x, y = pixel_to_map(info, np.array([0.0]), np.array([9.0]))  # lower-left pixel
    assert x[0] == pytest.approx(0.05) and y[0] == pytest.approx(0.05)


def test_nodata_and_alpha_are_masked(tmp_path):
    rgba = np.full((4, 16, 16), 100, np.uint8)
    rgba[3] = 255
    rgba[3, :, :5] = 0  # transparent left strip
    p = tmp_path / "rgba.tif"
    with rasterio.open(
        p,
        "w",
        driver="GTiff",
        width=16,
        height=16,
        count=4,
        dtype="uint8",
        crs="EPSG:32633",
        transform=from_origin(0, 16, 1, 1),
        photometric="RGB",
        alpha="YES",
    ) as dst:
        dst.write(rgba)
    info = open_raster(p)
    assert info.data_bands == (1, 2, 3) and info.count == 3
    _data, valid = read_window(info, (1, 2, 3), (0, 0, 16, 16))
    assert not valid[:, :5].any() and valid[:, 5:].all()
    band = np.full((16, 16), 7.0, np.float32)
    band[2:4, 2:4] = -9999
    q = write_geotiff(
        tmp_path / "nd.tif", band, from_origin(0, 16, 1, 1), "EPSG:32633", nodata=-9999
    )
    _d, v = read_window(open_raster(q), (1,), (0, 0, 16, 16))
    assert v.sum() == 256 - 4


def test_internal_mask_respected(tmp_path):
    p = tmp_path / "mask.tif"
    with rasterio.Env(GDAL_TIFF_INTERNAL_MASK=True):
        with rasterio.open(
            p,
            "w",
            driver="GTiff",
            width=8,
            height=8,
            count=1,
            dtype="uint8",
            crs="EPSG:32633",
            transform=from_origin(0, 8, 1, 1),
        ) as dst:
            dst.write(np.ones((1, 8, 8), np.uint8))
            m = np.full((8, 8), 255, np.uint8)
            m[:2] = 0
            dst.write_mask(m)
    _d, v = read_window(open_raster(p), (1,), (0, 0, 8, 8))
    assert not v[:2].any() and v[2:].all()


def test_decimated_read_is_small(tmp_path):
    p = write_geotiff(
        tmp_path / "big.tif", np.ones((400, 500), np.uint8), from_origin(0, 400, 1, 1), "EPSG:32633"
    )
    data, valid = read_decimated(open_raster(p), (1,), max_pixels=10_000)
    assert data.shape[1] * data.shape[2] <= 10_000 and valid.all()


def test_truncated_and_non_raster_files_refused(tmp_path):
    p = write_geotiff(
        tmp_path / "t.tif",
        np.random.default_rng(0).integers(0, 255, (3, 512, 512), dtype=np.uint8),
        from_origin(0, 512, 1, 1),
        "EPSG:32633",
    )
    raw = p.read_bytes()
    p.write_bytes(raw[: len(raw) // 2])
    with pytest.raises(InputError, match=r"truncated|cannot read"):
        info = open_raster(p)
        read_window(info, (1, 2, 3), (0, 0, 512, 512))
    txt = tmp_path / "notes.tif"
    txt.write_text("not a raster")
    with pytest.raises(InputError, match="cannot read raster"):
        open_raster(txt)
    with pytest.raises(InputError, match="does not exist"):
        open_raster(tmp_path / "missing.tif")


def test_plots_from_mask_raster(tmp_path):
    ids = np.zeros((20, 20), np.uint8)
    ids[2:8, 2:12] = 1  # 60 pixels
    ids[10:18, 10:18] = 2  # 64 pixels
    p = write_geotiff(tmp_path / "ids.tif", ids, from_origin(1000, 2000, 0.5, 0.5), "EPSG:32633")
    layer = plots_from_mask(p)
    assert layer.ids == ["1", "2"]
    # exact geometry: pixel counts times pixel area (0.25 m^2)
    assert [pl.area_m2 for pl in layer.plots] == pytest.approx([15.0, 16.0])
