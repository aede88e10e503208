"""The classified-raster detector, and an outside check on a library image."""

import numpy as np
import pytest
import skimage.data
from detect_helpers import UTM, X0, Y0, classes_scene, f1_against, sorted_xy
from rasterio.transform import from_origin

from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.errors import InputError
from ecoscan.stats.matching import match_points
from ecoscan.synthetic import render_classes, write_geotiff

SET = DetectionSettings(classes=(3,), diameter_min_m=1.0, diameter_max_m=4.0)


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    return classes_scene(tmp_path_factory.mktemp("cls"))


@pytest.fixture(scope="module")
def whole(scene):
    return detect_raster(scene[0], SET)


def test_patches_match_known_crowns(scene, whole):
    _p, truth = scene
    assert whole.method == "classes"
    assert f1_against(whole.points, truth, 0.5) >= 0.95
    m = match_points(whole.points.xy, truth.xy, 0.5)
    d = whole.points.attrs["diameter_m"][m.index_a] / truth.attrs["diameter_m"][m.index_b]
    assert np.median(d) == pytest.approx(1.0, abs=0.08)


def test_tiled_equals_untiled(scene, whole):
    tiled = detect_raster(scene[0], DetectionSettings(**{**SET.to_dict(), "tile_size_px": 96}))
    assert tiled.tiles_total >= 16
    # centroids are means of pixel positions: equal to rounding (far within one pixel)
    np.testing.assert_allclose(sorted_xy(tiled.points), sorted_xy(whole.points), atol=1e-6)


def test_touching_crowns_are_split(tmp_path):
    # Two discs of radius 10 px whose centres are 19 px apart touch over a short neck; the
    # distance-transform watershed (Meyer & Beucher 1990) separates them.
    xy = np.array([[40.0, 50.0], [59.0, 50.0], [40.0, 20.0]])
    cls = render_classes(xy, np.full(3, 20.0), (100, 100), 0, clutter=0.0)
    path = write_geotiff(tmp_path / "touch.tif", cls, from_origin(X0, Y0, 0.1, 0.1), UTM)
    split = detect_raster(path, SET)
    assert split.n == 3
    merged = detect_raster(path, DetectionSettings(**{**SET.to_dict(), "split_touching": False}))
    assert merged.n == 2
    # area of a pixelated disc of radius 10 px at 0.1 m: close to pi * 1 m^2 (exact geometry)
    assert np.sort(split.points.attrs["area_m2"])[0] == pytest.approx(np.pi, rel=0.05)


def test_min_area_removes_specks(tmp_path):
    xy = np.array([[30.0, 30.0], [70.0, 70.0]])
    cls = render_classes(xy, np.array([20.0, 3.0]), (100, 100), 0, clutter=0.0)
    path = write_geotiff(tmp_path / "speck.tif", cls, from_origin(X0, Y0, 0.1, 0.1), UTM)
    res = detect_raster(path, DetectionSettings(**{**SET.to_dict(), "min_area_m2": 0.5}))
    assert res.n == 1


def test_absent_class_is_refused(scene):
    with pytest.raises(InputError, match="do not occur"):
        detect_raster(scene[0], DetectionSettings(**{**SET.to_dict(), "classes": (9,)}))


def test_coins_image_count(tmp_path):
    # Outside check on an image shipped inside the scikit-image wheel: skimage.data.coins(),
    # documented as "Greek coins from Pompeii". The count of 24 coins (four rows of six) was
    # made by looking at the image, not taken from the documentation.
    img = skimage.data.coins()
    path = write_geotiff(tmp_path / "coins.tif", img, None, None)
    res = detect_raster(
        path,
        DetectionSettings(
            method="imagery",
            index="band",  # the classic path (Otsu); the image-chosen default finds 21
            pixel_size_m=1.0,
            diameter_min_m=30,
            diameter_max_m=80,
            tile_size_px=128,
        ),
    )
    assert res.n == 24
    assert any("local pixel-based coordinates" in n for n in res.notes)
