"""Synthetic renderers: deterministic, streamed equals in-memory, crowns where placed."""

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin
from scipy.spatial.distance import pdist, squareform

from ecoscan.detect.indices import excess_green, ndvi
from ecoscan.synthetic import (
    place_crowns,
    render_chm,
    render_orthomosaic,
    write_orthomosaic_geotiff,
)


def test_same_seed_same_image_and_streaming_matches(tmp_path):
    xy, d = place_crowns((700, 300), 80, (8, 20), 5)
    a = render_orthomosaic(xy, d, (700, 300), 42)
    b = render_orthomosaic(xy, d, (700, 300), 42)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, render_orthomosaic(xy, d, (700, 300), 43))
    p = write_orthomosaic_geotiff(
        tmp_path / "s.tif", xy, d, (700, 300), 42, from_origin(0, 700, 1, 1), "EPSG:32633"
    )
    with rasterio.open(p) as src:
        assert np.array_equal(src.read(), a)


def test_crowns_are_green_and_soil_is_not():
    xy, d = place_crowns((200, 200), 20, (14, 24), 1, margin_px=12)
    img = render_orthomosaic(xy, d, (200, 200), 2)
    ex = excess_green(*img)
    c, r = np.rint(xy).astype(int).T
    assert np.all(ex[r, c] > 0.3)
    assert np.median(ex) < 0.15


def test_placement_respects_the_gap():
    xy, d = place_crowns((400, 400), 200, (10, 30), 3, min_gap=0.9)
    dist = squareform(pdist(xy))
    need = 0.9 * (d[:, None] + d[None, :]) / 2
    np.fill_diagonal(dist, np.inf)
    assert np.all(dist >= need - 1e-9)


def test_chm_peaks_at_tree_heights():
    xy = np.array([[20.0, 20.0], [60.0, 50.0]])
    chm = render_chm(xy, np.array([10.0, 15.0]), np.array([16.0, 20.0]), (80, 80), 0, noise_m=0.0)
    assert chm[20, 20] == np.float32(10.0) and chm[50, 60] == np.float32(15.0)
    assert chm[0, 79] == 0


def test_indices_against_their_formulas():
    # Woebbecke et al. (1995): ExG = 2g - r - b on chromatic coordinates
    ex = excess_green(np.array([58.0, 0, 90]), np.array([128.0, 255, 90]), np.array([46.0, 0, 90]))
    s = 58 + 128 + 46
    assert ex[0] == np.float32((2 * 128 - 58 - 46) / s)
    assert ex[1] == 2.0 and ex[2] == 0.0
    # Rouse et al. (1974): NDVI = (NIR - Red) / (NIR + Red)
    assert float(ndvi(np.array([0.1]), np.array([0.5]))[0]) == pytest.approx(0.4 / 0.6, rel=1e-6)
    assert ndvi(np.array([0.0]), np.array([0.0]))[0] == 0.0
