"""Colour edges as valleys in the closed-canopy split (canopy.colour_edges, EDGE_GAIN).

Sources: the chromatic coordinates r / (r + g + b), b / (r + g + b) do not change when all
bands are scaled alike, as by shading (Gevers, T. & Smeulders, A. W. M. 1999,
*Pattern Recognition* 32: 453-464); a step of height Δ convolved with a Gaussian's
derivative peaks at Δ / (σ √(2π)) (the Gaussian's peak value); scipy.ndimage's
Gaussian gradient magnitude as the reference operator. Scenes are synthetic ground
truth (ecoscan.synthetic); matching within half the smallest diameter, as
``ecoscan validate`` does (common practice in crown-detection accuracy studies).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage

from ecoscan.detect import canopy
from ecoscan.detect.canopy import (
    canopy_layer,
    canopy_split,
    canopy_tint,
    colour_edges,
    split_crowns,
)
from tests.detect_helpers import rule_on_and_off
from tests.test_canopy_split import _flat_disc_grid, _lambert_domes

RGB = ("red", "green", "blue")


def test_colour_edges_ignore_shading():
    # crowns of four colours under a smooth shading field: the edges are those of the
    # unshaded colours (chromaticity is invariant to a common factor on all bands)
    rng = np.random.default_rng(5)
    labels = np.repeat(np.repeat(rng.integers(0, 4, (4, 6)), 16, axis=0), 16, axis=1)
    colours = np.array([[70, 120, 45], [40, 80, 45], [90, 120, 50], [50, 100, 60]], float)
    flat = np.moveaxis(colours[labels], -1, 0)
    yy, xx = np.mgrid[: labels.shape[0], : labels.shape[1]]
    shade = 0.4 + 0.6 * (0.5 + 0.5 * np.sin(xx / 7.0) * np.cos(yy / 5.0))
    plain = colour_edges(flat, RGB, 2.5)
    shaded = colour_edges(flat * shade[None], RGB, 2.5)
    assert plain.max() > 0.02
    np.testing.assert_allclose(shaded, plain, atol=1e-5)


@pytest.mark.parametrize("sigma", [1.5, 3.0, 6.0])
def test_a_colour_step_gives_a_ridge_of_known_height_at_every_scale(sigma):
    # r share 0.3 -> 0.2 and b share 0.2 -> 0.3: Δ = 0.1 in both, ridge √2 Δ / √(2π)
    # (σ times the Gaussian derivative's peak Δ / (σ √(2π)))
    step = (np.arange(80) < 40)[None, None, :] * np.ones((3, 10, 80))
    left = np.array([60.0, 100.0, 40.0])[:, None, None]
    right = np.array([40.0, 100.0, 60.0])[:, None, None]
    img = np.where(step > 0, left, right)
    got = colour_edges(img, RGB, sigma)
    assert got.max() == pytest.approx(math.sqrt(2) * 0.1 / math.sqrt(2 * math.pi), rel=0.04)
    # and it agrees with scipy's Gaussian gradient magnitude of each share
    s = img.sum(0)
    ref = sigma * np.hypot(
        ndimage.gaussian_gradient_magnitude(img[0] / s, sigma),
        ndimage.gaussian_gradient_magnitude(img[2] / s, sigma),
    )
    np.testing.assert_allclose(got, ref, atol=1e-6)
    assert colour_edges(img[:2], ("red", "green"), sigma) is None


def _crown_in_half_shadow():
    """A bright dome and a smaller crown of another colour overlapped by it, lying in the
    dome's half-shadow (brightening towards it, so it has no brightness maximum of its
    own). Returns the image, the valid mask and the small crown's visible centre."""
    yy, xx = np.mgrid[:80, :120].astype(float)
    rb, rs = 28.0, 13.0
    cb, cs = (40.0, 40.0), (40.0 + rb + 0.6 * rs, 40.0)
    big = (xx - cb[0]) ** 2 + (yy - cb[1]) ** 2 < rb**2
    small = ((xx - cs[0]) ** 2 + (yy - cs[1]) ** 2 < rs**2) & ~big
    nz = np.sqrt(np.clip(1 - ((xx - cb[0]) ** 2 + (yy - cb[1]) ** 2) / rb**2, 0, None))
    lit = np.where(big, 0.4 + 0.6 * nz, 0.25)
    lit = np.where(small, 0.25 + 0.2 * np.clip((cs[0] + rs - xx) / (2 * rs), 0, 1), lit)
    colour = np.where(
        big[None],
        np.array([70.0, 120.0, 45.0])[:, None, None],
        np.array([45.0, 110.0, 70.0])[:, None, None],
    )
    cols = np.flatnonzero(small.any(axis=0))
    return colour * lit[None], big | small, 0.5 * (cols.min() + cols.max())


def test_a_crown_in_its_neighbours_half_shadow_is_found_only_with_colour_edges():
    img, ok, centre = _crown_in_half_shadow()
    lay = canopy_layer(img, RGB)
    kw = dict(
        smooth_px=3.0,
        min_area_px=0.25 * math.pi * 100,
        max_area_px=1.2 * math.pi * 30**2,
        tint=canopy_tint(img, RGB),
        crown_join=True,
        valid=ok,
    )
    without = split_crowns(lay, 10.0, 0.05, **kw)
    edges = colour_edges(img, RGB, 3.0)
    with_edges = split_crowns(lay, 10.0, 0.05, edges=edges, edge_gain=canopy.EDGE_GAIN, **kw)
    assert len(without["col"]) == 1  # the big crown's region swallowed the small one
    assert len(with_edges["col"]) == 2
    near = np.abs(with_edges["col"] - centre) < 3.0
    assert near.sum() == 1 and abs(with_edges["row"][near][0] - 40.0) < 1.0
    # a zero gain is the plain split
    same = split_crowns(lay, 10.0, 0.05, edges=edges, edge_gain=0.0, **kw)
    np.testing.assert_array_equal(same["col"], without["col"])


def test_colour_edges_are_on_for_shaded_domes_only():
    r, centres, shape, flat, ok, tint = _flat_disc_grid()
    cs = canopy_split([flat], [ok], 5.0, r, h_share=0.05, tints=[tint])
    assert cs.edge_gain == 0.0
    domes = _lambert_domes(shape, centres, r, 65.0, 200.0)
    cs = canopy_split([domes], [ok], 5.0, r, h_share=0.05, tints=[tint])
    assert cs.crown_join and cs.edge_gain == canopy.EDGE_GAIN > 0
    assert cs.edge_px == pytest.approx(canopy.EDGE_SHARE * 5.0)
    # without colour (no tints) nothing is joined and no edges are used
    assert canopy_split([domes], [ok], 5.0, r, h_share=0.05).edge_gain == 0.0


def test_colour_edges_find_more_crowns_on_the_closed_canopy(tmp_path, monkeypatch):
    # development seed 11 of the scene suite's closed canopy, with the rule and without
    run = rule_on_and_off("closed-canopy", 11, tmp_path, monkeypatch, canopy, "EDGE_GAIN", 0.0)
    on, off = run.on.thresholds, run.off.thresholds
    assert on["layer"] == off["layer"] == "canopy"
    # (the module constant is patched to 0 by now: 12 is its value)
    assert on["canopy_colour_edge_gain"] == 12.0 and off["canopy_colour_edge_gain"] == 0
    n = len(run.truth)

    def f1(res, m):
        return 2 * m.n_matched / (res.n + n)

    # measured: F1 0.935 without, 0.953 with (129 crowns)
    assert f1(run.on, run.matched_on) > f1(run.off, run.matched_off) + 0.01
    assert run.matched_on.n_matched > run.matched_off.n_matched
