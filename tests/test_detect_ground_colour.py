"""Colour distance from the ground (ecoscan.detect.ground_colour)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from ecoscan.detect.engine import base_layer
from ecoscan.detect.ground_colour import (
    GroundColour,
    estimate_ground_colour,
    ground_distance,
    layer_name,
    parse_layer_name,
    reach_px,
)

SHADE = np.array([0.42, 0.46, 0.55])  # light left in a cast shadow, per band (invented)


def _scene(n: int = 40000, seed: int = 0):
    """Soil with brightness mottling, 15 % of it shaded, and 15 % grey crowns."""
    rng = np.random.default_rng(seed)
    soil = np.array([178.0, 148.0, 112.0])[:, None] * rng.uniform(0.85, 1.15, n)
    shaded = np.arange(n) < 0.15 * n
    soil[:, shaded] *= SHADE[:, None]
    grey = (np.arange(n) >= 0.15 * n) & (np.arange(n) < 0.30 * n)
    soil[:, grey] = np.array([128.0, 132.0, 116.0])[:, None] * rng.uniform(0.9, 1.1, grey.sum())
    return soil + rng.normal(0, 1.0, soil.shape), shaded, grey


def test_ground_mode_is_the_soil_colour():
    rgb, _shaded, _grey = _scene()
    g = estimate_ground_colour(*rgb)
    # log((178 + 1) / (148 + 1)) and log((112 + 1) / (148 + 1)), computed by hand
    assert g.red == pytest.approx(math.log(179 / 149), abs=0.02)
    assert g.blue == pytest.approx(math.log(113 / 149), abs=0.02)


def test_uniform_brightness_change_leaves_the_distance_unchanged():
    # log-chromaticity is invariant to scaling all bands alike (Finlayson, Drew & Lu 2009,
    # IJCV 85: 35-57, section 2); the offset of 1 breaks it only slightly at these levels
    g = GroundColour(0.18, -0.28, 0.05, 0.05)
    rgb = np.array([[150.0], [120.0], [140.0]])
    d1 = ground_distance(*(rgb - 1), g)
    d2 = ground_distance(*(2 * rgb - 1), g)
    assert d1[0] == pytest.approx(d2[0], rel=1e-5)
    # by hand: hypot(log(150/120) - 0.18, log(140/120) + 0.28) / 0.05
    want = math.hypot(math.log(150 / 120) - 0.18, math.log(140 / 120) + 0.28) / 0.05
    assert d1[0] == pytest.approx(want, rel=1e-5)


def test_shade_is_taken_out_and_grey_crowns_stand_out():
    rgb, shaded, grey = _scene()
    g = estimate_ground_colour(*rgb)
    d = ground_distance(*rgb, g)
    soil = ~shaded & ~grey
    assert np.median(d[soil]) < 1.5
    assert np.median(d[shaded]) < 2.0  # without the shade term it is ~5
    flat = ground_distance(*rgb, GroundColour(g.red, g.blue, g.red_spread, g.blue_spread))
    assert np.median(flat[shaded]) > 3.0
    assert np.median(d[grey]) > 3.0


def test_layer_name_round_trip_and_base_layer():
    g = GroundColour(0.18, -0.31, 0.03, 0.04, 5.0, 0.1, -0.24, 2.1)
    name = layer_name(g)
    assert parse_layer_name(name) == g
    assert reach_px(name) == int(4 * 2.1 + 0.5)
    rng = np.random.default_rng(1)
    data = rng.uniform(50, 200, (3, 40, 40)).astype(np.float32)
    np.testing.assert_array_equal(
        base_layer(data, ("red", "green", "blue"), name), ground_distance(*data, g)
    )
    with pytest.raises(ValueError, match="eight finite"):
        parse_layer_name("ground_colour@0.1,0.2")
    with pytest.raises(ValueError, match="eight finite"):
        parse_layer_name("ground_colour@0,0,0,0.1,0,0,0,0")


def test_dry_shrubs_use_the_ground_colour_and_tiles_stay_exact(tmp_path, monkeypatch):
    # suite development seed 0: shrubs on soil (not green ground), so with the switch on
    # Excess Green gets the colour distance added; its band smoothing widens the overlap
    from ecoscan.detect import DetectionSettings, autotune, detect_raster
    from ecoscan.synthetic import make_scene, write_scene

    monkeypatch.setattr(autotune, "GROUND_COLOUR", True)
    sc = make_scene("dry-shrubs", 320, 0)
    paths = write_scene(sc, tmp_path)
    lo, hi = sc.diameter_range_m
    whole = detect_raster(paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    assert whole.thresholds["layer"] == "exg+ground"
    tiled = detect_raster(
        paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=96)
    )
    assert tiled.tiles_total > 9
    a = whole.points.xy[np.lexsort(whole.points.xy.T[::-1])]
    b = tiled.points.xy[np.lexsort(tiled.points.xy.T[::-1])]
    np.testing.assert_array_equal(a, b)
    monkeypatch.setattr(autotune, "GROUND_COLOUR", False)  # the default: Excess Green alone
    off = detect_raster(paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    assert off.thresholds["layer"] == "exg"


def test_green_ground_keeps_plain_excess_green():
    # pasture: the ground's own Excess Green is high, so the colour term is not added
    from ecoscan.detect.ground_colour import ground_excess_green

    rgb, _s, _g = _scene()
    soil = estimate_ground_colour(*rgb)
    grass = estimate_ground_colour(*(rgb[[2, 0, 1]] * np.array([[0.6], [1.2], [0.5]])))
    assert ground_excess_green(soil) < 0.2 <= ground_excess_green(grass)
