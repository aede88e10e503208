"""Clear blobs below the centre-value threshold: pale crowns on a vegetation index.

A pale, senescent crown has an Excess Green value close to the ground's, so the layer at
its centre can fall short of the background median plus one robust SD while its blob
response (its contrast with the ground right around it) is clear. On smooth ground and a
vegetation-index layer, a blob whose smoothed centre value reaches the background median
and whose response is ``STRONG_RATIO`` (3) times its scale's threshold is kept
(``ecoscan.detect.blobs.detect_blobs``, argument ``strong``).
"""

import math

import numpy as np
import pytest
from detect_helpers import layer_choice
from scipy import ndimage

from ecoscan.detect import DetectionSettings, autotune, detect_raster, pale_crowns
from ecoscan.detect.autotune import strong_test
from ecoscan.detect.blobs import DISC_RESPONSE, blob_scales, detect_blobs
from ecoscan.stats.matching import match_points
from ecoscan.synthetic import make_scene, write_scene


def _disc(shape, row, col, radius, value):
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    return np.where(np.hypot(yy - row, xx - col) <= radius, value, 0.0)


def _scene():
    """Ground at 0 with a broad low patch (-0.6) holding two discs of radius 8 px: one
    with a large step over the patch (0.9: centre value about +0.3), one with a small step
    (0.45: centre about -0.15); a third disc (0.3) stands on open ground."""
    shape = (240, 240)
    rng = np.random.default_rng(3)
    img = rng.normal(0.0, 0.01, shape)
    img += _disc(shape, 120, 120, 70, -0.6)
    img += _disc(shape, 90, 100, 8, 0.9)  # clear pale crown on a darker patch
    img += _disc(shape, 150, 140, 8, 0.45)  # below the ground's median at its centre
    img += _disc(shape, 30, 30, 8, 0.3)  # faint crown on open ground
    return img.astype(np.float32)


def test_strong_blobs_keep_clear_crowns_below_the_centre_value():
    img = _scene()
    scales = blob_scales(6.0, 10.0)
    min_value = 0.5  # background median 0 + 1 robust SD of 0.5 (as the defaults set it)
    min_resp = 0.1  # scale-normalised response threshold, layer units
    base = detect_blobs(img, scales, min_resp, min_value)
    strong = detect_blobs(img, scales, min_resp, min_value, strong=(0.0, 3.0))

    def near(found, row, col):
        return bool(np.any(np.hypot(found["row"] - row, found["col"] - col) < 3))

    # the centre-value test alone drops all three (their smoothed centres are below 0.5)
    assert not any(near(base, r, c) for r, c in [(90, 100), (150, 140), (30, 30)])
    # Reference for the kept blob: a flat disc of contrast c peaks at sigma = r / sqrt(2)
    # with a scale-normalised response of c * 2/e (Lindeberg 1998, IJCV 30: 79-116), and
    # its value is the layer smoothed at the lower half-step of that scale, computed here
    # with scipy.ndimage.gaussian_filter
    i = int(np.argmin(np.hypot(strong["row"] - 90, strong["col"] - 100)))
    assert near(strong, 90, 100)
    assert strong["response"][i] == pytest.approx(0.9 * DISC_RESPONSE, rel=0.15)
    assert strong["response"][i] >= 3.0 * min_resp
    blur = strong["sigma"][i] / math.sqrt(scales.k)
    ref = ndimage.gaussian_filter(img.astype(float), blur)[90, 100]
    assert 0.0 <= ref < min_value
    # below the background median at its centre: still dropped, however clear its edge
    assert ndimage.gaussian_filter(img.astype(float), blur)[150, 140] < 0.0
    assert not near(strong, 150, 140)
    # a faint crown on open ground: response 0.3 * 2/e = 0.22 < 3 x 0.1, value 0.3 < 0.5
    assert not near(strong, 30, 30)
    # the rule only adds blobs: every blob of the plain run is still there, unchanged
    for r, c, s in zip(base["row"], base["col"], base["sigma"], strict=True):
        assert np.any((strong["row"] == r) & (strong["col"] == c) & (strong["sigma"] == s))


def test_strong_rule_only_on_smooth_ground_and_vegetation_indices():
    assert strong_test(layer_choice("exg", (("exg", 1.0),))) == (0.01, autotune.STRONG_RATIO)
    assert strong_test(layer_choice("exg+darkness", (("exg", 2.0), ("darkness", 0.1)))) is not None
    # rough ground (threshold raised: the ring test is on), NDVI, the log-chromaticity and
    # darkness layers (no index value for a pale crown to fall short of) and closed canopy
    assert strong_test(layer_choice("exg", (("exg", 1.0),), raise_by=1.7)) is None
    chroma = layer_choice("chroma", (("logchroma_r", 1.0), ("logchroma_b", -0.5)))
    assert strong_test(chroma) is None
    assert strong_test(layer_choice("darkness", (("darkness", 1.0),))) is None
    assert strong_test(layer_choice("ndvi", (("ndvi", 1.0),))) is None
    assert strong_test(layer_choice("exg", (("exg", 1.0),), closed=True)) is None


def test_dry_shrubs_find_more_pale_crowns_and_tiles_stay_exact(tmp_path, monkeypatch):
    # suite development seed 0 (never a held-out seed); ground truth by construction.
    # The second (GRVI) layer finds the same pale crowns when this rule is off, so it is
    # off here to measure the rule alone (tests/test_detect_pale_crowns.py measures it)
    monkeypatch.setattr(pale_crowns, "MIN_SECOND_CANDIDATES", 10**9)
    sc = make_scene("dry-shrubs", 512, 0)
    paths = write_scene(sc, tmp_path)
    lo, hi = sc.diameter_range_m
    truth = np.column_stack([sc.x_m, sc.y_m])
    whole = detect_raster(paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    th = whole.thresholds
    assert th["strong_blob"] == [pytest.approx(th["background"]), autotune.STRONG_RATIO]
    tiled = detect_raster(
        paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=192)
    )
    assert tiled.tiles_total >= 9
    a = whole.points.xy[np.lexsort(whole.points.xy.T[::-1])]
    b = tiled.points.xy[np.lexsort(tiled.points.xy.T[::-1])]
    np.testing.assert_array_equal(a, b)
    monkeypatch.setattr(autotune, "STRONG_RATIO", None)  # the rule off
    off = detect_raster(paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    assert off.thresholds["strong_blob"] is None
    m_on = match_points(whole.points.xy, truth, 0.5 * lo)
    m_off = match_points(off.points.xy, truth, 0.5 * lo)
    assert m_on.n_matched > m_off.n_matched
    assert m_on.n_matched - m_off.n_matched >= whole.n - off.n - 1  # nearly all added match
