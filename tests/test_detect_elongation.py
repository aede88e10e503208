"""Blobs stretched along one axis: crowns joined to their cast shadows (invented scenes)."""

import math

import numpy as np
import pytest

from benchmarks import tuning_scenes as ts
from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.detect.autotune import SampleWindow, choose_layer
from ecoscan.detect.blobs import blob_scales
from ecoscan.detect.detectors.blob_auto import _auto_thresholds, _describe_choice
from ecoscan.detect.elongation import (
    ALIGNED_MIN,
    blob_elongations,
    common_elongation,
    is_aligned,
)


@pytest.mark.parametrize("a, b", [(6.0, 3.0), (4.0, 9.0)])
def test_gaussian_ellipse_elongation_follows_the_product_of_gaussians(a, b):
    # a Gaussian blob times the Gaussian window (sd R) is a Gaussian with variance
    # s^2 R^2 / (s^2 + R^2) per axis (product of Gaussians; common practice), so the
    # elongation is (ax^2 - ay^2) / (ax^2 + ay^2) of those variances
    size, rad = 121, 8.0
    yy, xx = np.mgrid[:size, :size].astype(float)
    c = 60.0
    blob = np.exp(-((xx - c) ** 2) / (2 * a * a) - (yy - c) ** 2 / (2 * b * b))
    e = blob_elongations(
        blob, np.ones(blob.shape, bool), np.array([c]), np.array([c]), np.array([rad]), 0.0
    )
    # the window reaches 2 radii, where the weights are e^-2 of the centre's: integrate the
    # truncated moments numerically from the same formula instead of in closed form
    vx = a * a * rad * rad / (a * a + rad * rad)
    vy = b * b * rad * rad / (b * b + rad * rad)
    half = math.ceil(2 * rad)
    d = np.arange(-half, half + 1, dtype=float)
    gx, gy = np.exp(-d * d / (2 * vx)), np.exp(-d * d / (2 * vy))
    mxx = (gx * d * d).sum() / gx.sum()
    myy = (gy * d * d).sum() / gy.sum()
    assert e[0, 0] == pytest.approx((mxx - myy) / (mxx + myy), abs=1e-9)
    assert e[0, 1] == pytest.approx(0.0, abs=1e-9)
    # without truncation the value is the closed form; 2 radii keep it within 0.1
    assert e[0, 0] == pytest.approx((vx - vy) / (vx + vy), abs=0.1)


def test_rotated_blob_gives_twice_its_angle_and_a_compass_axis():
    size, rad = 121, 10.0
    yy, xx = np.mgrid[:size, :size].astype(float)
    theta = math.radians(30.0)  # long axis 30 deg below the column axis (rows grow down)
    u = (xx - 60) * math.cos(theta) + (yy - 60) * math.sin(theta)
    v = -(xx - 60) * math.sin(theta) + (yy - 60) * math.cos(theta)
    blob = np.exp(-u * u / (2 * 49.0) - v * v / (2 * 9.0))
    e = blob_elongations(
        blob, np.ones(blob.shape, bool), np.array([60.0]), np.array([60.0]), np.array([rad]), 0.0
    )
    assert math.degrees(math.atan2(e[0, 1], e[0, 0])) / 2 == pytest.approx(30.0, abs=0.5)
    # bearing clockwise from up: east is 90, 30 deg below east is 120
    assert common_elongation(np.tile(e, (5, 1)))["axis_deg"] == pytest.approx(120.0, abs=0.5)


def test_random_axes_cancel_and_one_axis_does_not():
    # mean resultant length of doubled angles (Mardia & Jupp 2000, Directional
    # Statistics, axial data): uniform axes give about 1/sqrt(n)
    rng = np.random.default_rng(0)
    ang = rng.uniform(0, 2 * np.pi, 400)
    rand = 0.3 * np.column_stack([np.cos(ang), np.sin(ang)])
    r = common_elongation(rand)
    assert r["coherence"] < 3 / math.sqrt(400)
    assert not is_aligned(r)
    one = rand.copy()
    one[:, 0] = np.abs(one[:, 0]) + 0.2
    r = common_elongation(one)
    assert r["alignment"] > ALIGNED_MIN and r["z"] > 100 and is_aligned(r)
    assert common_elongation(np.full((3, 2), np.nan))["blobs"] == 0


def _crowns(shadows: bool, bearing_deg: float, size=480, seed=2):
    """Dark crowns on green pasture, each with a shadow as dark as itself stretching 1.6
    radii down-sun (towards ``bearing_deg``, clockwise from up) when ``shadows``."""
    rng = np.random.default_rng(seed)
    img = np.empty((3, size, size), np.float32)
    img[:] = np.array([70.0, 110.0, 50.0], np.float32)[:, None, None]
    img *= 1 + 0.04 * rng.standard_normal((size, size)).astype(np.float32)
    yy, xx = np.mgrid[:size, :size].astype(np.float32)
    b = math.radians(bearing_deg)
    ux, uy = math.sin(b), -math.cos(b)
    for gy in range(8):
        for gx in range(8):
            cy, cx = 30 + gy * 60 + rng.uniform(-8, 8), 30 + gx * 60 + rng.uniform(-8, 8)
            r = rng.uniform(7, 11)
            if shadows:
                t = np.clip((xx - cx) * ux + (yy - cy) * uy, 0, 1.6 * r)
                img[:, (xx - cx - t * ux) ** 2 + (yy - cy - t * uy) ** 2 <= r * r] *= 0.45
            disc = (yy - cy) ** 2 + (xx - cx) ** 2 <= r * r
            tex = (1 + 0.25 * rng.standard_normal(int(disc.sum()))).astype(np.float32)
            img[:, disc] = np.array([35.0, 55.0, 30.0], np.float32)[:, None] * tex[None]
    img += rng.normal(0, 2.0, img.shape).astype(np.float32)
    return SampleWindow(img, np.ones((size, size), bool), (slice(0, size), slice(0, size)))


@pytest.mark.parametrize("bearing", [135.0, 60.0])
def test_crowns_joined_to_shadows_are_flagged_along_the_shadow_axis(bearing):
    # the classic layers only: the log-chromaticity layer (tested in
    # test_detect_chromaticity.py) separates these crowns from their shadows
    choice = choose_layer(
        [_crowns(True, bearing)], ("red", "green", "blue"), blob_scales(5, 13), chroma=False
    )
    assert choice.aligned and choice.weak
    assert choice.elongation["axis_deg"] == pytest.approx(bearing, abs=5.0)
    th = _auto_thresholds(choice, (1, 2, 3), ("red", "green", "blue"), True)
    assert th["shadow_joined"] is True and th["weak_separation"] is True
    assert th["blob_alignment"] == pytest.approx(choice.elongation["alignment"])
    notes: list = []
    _describe_choice(choice, notes)
    codes = [getattr(n, "code", "") for n in notes]
    assert "shadow-joined" in codes
    text = next(n for n in notes if getattr(n, "code", "") == "shadow-joined")
    assert "ecoscan calibrate" in text and "--threshold" in text


def test_the_same_crowns_without_shadows_are_not_flagged():
    choice = choose_layer(
        [_crowns(False, 135.0)], ("red", "green", "blue"), blob_scales(5, 13), chroma=False
    )
    assert choice.candidates >= 50
    assert not choice.aligned
    assert choice.elongation["alignment"] < 0.5 * ALIGNED_MIN


@pytest.mark.parametrize("style, flagged", [("conifers", True), ("mixed", False)])
def test_tuning_scene_detection_records_the_flag(tmp_path, style, flagged):
    # the tuning `conifers` crowns join their long shadows on the darkness layer (F1 about
    # 0.5, precision 0.42 at seed 100); the `mixed` shrubs on soil are found (F1 0.97)
    path, _truth = ts.write_tuning_scene(tmp_path, style, 100)
    res = detect_raster(path, DetectionSettings(diameter_min_m=0.6, diameter_max_m=2.0))
    assert res.thresholds["shadow_joined"] is flagged
    assert ("shadow-joined" in [getattr(n, "code", "") for n in res.notes]) is flagged
    if flagged:
        assert res.thresholds["weak_separation"] is True
        # the tuning conifers' shadows fall to the upper right (bearing 45 deg)
        assert res.thresholds["blob_alignment_axis_deg"] == pytest.approx(45.0, abs=10.0)
