"""The shadow-free colour layer: log-chromaticity projected where illumination cancels
(invented scenes)."""

import math

import numpy as np
import pytest
from scipy import stats

from ecoscan.detect.chromaticity import (
    entropy_angle,
    invariant_terms,
    log_chromaticity,
    projection_entropy,
)
from ecoscan.detect.engine import compose_layer

RGB = ("red", "green", "blue")


def test_log_chromaticity_ignores_brightness_and_sums_to_zero_with_green():
    # chromaticity over the geometric mean: scaling all bands by k cancels (Finlayson,
    # Drew & Lu 2004); the three log-chromaticities sum to zero
    rng = np.random.default_rng(0)
    rgb = rng.uniform(20, 200, (3, 50)) - 1.0  # LOG_OFFSET is added back inside
    r, b = log_chromaticity(*rgb)
    r2, b2 = log_chromaticity(*((rgb + 1.0) * 1.7 - 1.0))
    np.testing.assert_allclose(r, r2, atol=1e-5)
    np.testing.assert_allclose(b, b2, atol=1e-5)
    lg = np.log(rgb[1] + 1.0) - np.log(rgb + 1.0).mean(axis=0)
    np.testing.assert_allclose(r + b + lg, 0.0, atol=1e-5)


def test_fixed_width_entropy_of_a_normal_sample_is_its_differential_entropy():
    # histogram entropy with bin width w ~ h(X) - log2(w) for small w (Cover & Thomas,
    # Elements of Information Theory, 2nd ed., Theorem 8.3.1); the middle 90 % of a
    # normal sample is a normal truncated at its 5 % and 95 % quantiles (scipy's truncnorm)
    rng = np.random.default_rng(1)
    v = rng.normal(0, 1, 200000)
    z = stats.norm.ppf(0.95)
    h_bits = stats.truncnorm(-z, z).entropy() / math.log(2)
    assert projection_entropy(v, 0.05) == pytest.approx(h_bits - math.log2(0.05), abs=0.02)


def _ground_with_shade(size=160, seed=3):
    """Green pasture, its right half in shade: sunlight removed, bluer skylight left (the
    bands scaled by 0.45, 0.5, 0.75), and a darker blue-green crown in the lit half."""
    rng = np.random.default_rng(seed)
    img = np.empty((3, size, size), np.float32)
    img[:] = np.array([90.0, 140.0, 60.0], np.float32)[:, None, None]
    img *= np.exp(0.05 * rng.standard_normal((1, size, size))).astype(np.float32)
    shade = np.array([0.45, 0.5, 0.75], np.float32)
    img[:, :, size // 2 :] *= shade[:, None, None]
    img[:, 30:70, 20:60] = np.array([40.0, 55.0, 50.0], np.float32)[:, None, None]
    img += rng.normal(0, 0.5, img.shape).astype(np.float32)
    return np.clip(img, 0, None), shade


def test_the_entropy_angle_is_perpendicular_to_the_shading_shift():
    # multiplying the bands by k moves log-chromaticity by (log k_r, log k_b) minus their
    # mean with log k_g; the least-entropy projection is perpendicular to that shift
    # (Finlayson, Drew & Lu 2004)
    img, k = _ground_with_shade()
    lk = np.log(k.astype(float))
    shift = np.array([lk[0] - lk.mean(), lk[2] - lk.mean()])
    expect = (math.degrees(math.atan2(shift[1], shift[0])) + 90.0) % 180.0
    r, b = log_chromaticity(*img)
    assert entropy_angle(r.ravel(), b.ravel()) == pytest.approx(expect, abs=4.0)


def test_shade_vanishes_from_the_layer_and_the_crown_stands_out_positive():
    img, _k = _ground_with_shade()
    terms, _angle, gap = invariant_terms([img], [np.ones(img.shape[1:], bool)], RGB)
    lay = compose_layer(img, RGB, terms)
    lit, shaded, crown = lay[100:150, 10:70], lay[100:150, 90:150], lay[35:65, 25:55]
    spread = float(np.std(lit))
    assert abs(float(np.median(shaded) - np.median(lit))) < 1.0 * spread
    assert float(np.median(crown) - np.median(lit)) > 5.0 * spread  # plants bright
    assert gap > 0
