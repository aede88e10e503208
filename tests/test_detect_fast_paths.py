"""The layer choice filters each layer once and reuses it: same decisions as filtering anew.

The references here are the straightforward computations: numpy's median, and the blob
detector and response spread run on the layer filled with the requested value
(``detect_blobs``/``response_spread``). Invented scenes only.
"""

import dataclasses
import math

import numpy as np
import pytest

from ecoscan.detect import autotune
from ecoscan.detect.autotune import SampleWindow, choose_layer
from ecoscan.detect.blobs import (
    blob_pyramid,
    blob_scales,
    detect_blobs,
    level_masks,
    pyramid_blobs,
    pyramid_spread,
    response_spread,
)


def _shrubs(size=260, seed=3, nodata=True):
    """Green and grey discs on noisy soil, with a nodata corner touching the window core."""
    rng = np.random.default_rng(seed)
    img = np.empty((3, size, size), np.float32)
    img[:] = np.array([150.0, 125.0, 95.0], np.float32)[:, None, None]
    img += rng.normal(0, 4.0, img.shape).astype(np.float32)
    yy, xx = np.mgrid[:size, :size]
    for i in range(40):
        cy, cx = rng.uniform(10, size - 10, 2)
        r = rng.uniform(5, 11)
        disc = (yy - cy) ** 2 + (xx - cx) ** 2 <= r * r
        colour = (60.0, 115.0, 50.0) if i % 3 else (110.0, 112.0, 100.0)
        img[:, disc] = np.asarray(colour, np.float32)[:, None] + rng.normal(0, 3.0, (3, 1))
    valid = np.ones((size, size), bool)
    if nodata:
        valid[: size // 4, : size // 3] = False
        img[:, ~valid] = 0.0
    return img, valid


def test_median_is_numpys_float64_median_to_the_bit():
    # numpy.median of the float64 values is the reference (both parities of the count)
    rng = np.random.default_rng(0)
    for n in (10_001, 10_000):
        v = rng.gamma(2.0, 3.0, n).astype(np.float32)
        assert autotune._median(v) == np.median(v.astype(np.float64))


def test_kept_pyramid_finds_the_same_blobs_to_the_bit():
    img, valid = _shrubs()
    layer = np.where(valid, img[1] - img[0], np.float32(-7.0)).astype(np.float32)
    sc = blob_scales(4.0, 12.0)
    direct = detect_blobs(layer, sc, 2.0, -np.inf, valid, background=-7.0)
    kept = pyramid_blobs(blob_pyramid(layer, sc, -7.0), sc, 2.0, -np.inf, level_masks(valid, sc))
    assert direct["row"].size > 10
    for k in direct:
        np.testing.assert_array_equal(kept[k], direct[k])


def test_fill_value_shift_matches_filtering_with_that_fill():
    # the DoG is linear: response(fill m) = response(fill m0) + (m - m0) x response of the
    # invalid-pixel indicator with 1 beyond the edges; the reference filters anew with m
    img, valid = _shrubs()
    lay = (img[1] - img[0]).astype(np.float32)
    sc = blob_scales(4.0, 12.0)
    m0, m = -5.0, 12.5
    mask = valid.copy()
    mask[100:140, 100:140] = False
    ref = response_spread(np.where(valid, lay, np.float32(m)), sc, mask, m)
    pyr = blob_pyramid(np.where(valid, lay, np.float32(m0)), sc, m0)
    edge = blob_pyramid((~valid).astype(np.float32), sc, 1.0)
    got = pyramid_spread(pyr, sc, level_masks(mask, sc), shift=(m - m0, edge))
    unshifted = pyramid_spread(pyr, sc, level_masks(mask, sc))
    np.testing.assert_allclose(got, ref, rtol=1e-4)
    assert np.max(np.abs(unshifted / ref - 1)) > 1e-2  # the shift matters here


def _direct_candidates(lp, floor, lower=None):
    """Reference: detect anew on each window's layer filled with the pyramids' fill."""
    out = {k: [] for k in ("w", "row", "col", "sigma", "response", "value")}
    for wi, (lay, win) in enumerate(zip(lp.layers, lp.cache.windows, strict=True)):
        img = np.where(win.valid, lay, np.float32(lp.fill)).astype(np.float32)
        f = detect_blobs(img, lp.cache.scales, floor, -np.inf, win.valid, background=lp.fill)
        ys, xs = win.core
        inside = (
            (f["row"] >= ys.start - 0.5)
            & (f["row"] < ys.stop - 0.5)
            & (f["col"] >= xs.start - 0.5)
            & (f["col"] < xs.stop - 0.5)
        )
        f = {k: v[inside] for k, v in f.items()}
        if f["row"].size:
            keep = autotune.prune_blobs(
                f["col"], f["row"], math.sqrt(2) * f["sigma"], f["response"]
            )
            f = {k: v[keep] for k, v in f.items()}
        for k in ("row", "col", "sigma", "response", "value"):
            out[k].append(f[k])
        out["w"].append(np.full(f["row"].size, wi))
    return {k: np.concatenate(v) for k, v in out.items()}


def _direct_spreads(lp, masks, fill, clearances=None):
    """Reference: filter every window anew with ``fill`` (what each round used to do)."""
    per = []
    clears = clearances or [None] * len(lp.layers)
    for lay, win, mask, clear in zip(lp.layers, lp.cache.windows, masks, clears, strict=True):
        img = np.where(win.valid, lay, np.float32(fill)).astype(np.float32)
        core = np.zeros(mask.shape, bool)
        core[win.core] = True
        per.append(
            response_spread(
                img,
                lp.cache.scales,
                mask & core & win.valid,
                fill,
                clearance=clear,
                clearance_sigmas=autotune.CLEARANCE,
                min_pixels=autotune.MIN_SPREAD_PX if clear is not None else 1,
            )
        )
    stack = np.vstack(per)
    has = np.isfinite(stack).any(axis=0)
    sp = np.full(stack.shape[1], np.nan)
    sp[has] = np.nanmedian(stack[:, has], axis=0)
    if clearances is not None and clearances[0] is not None:
        return np.where(np.isfinite(sp) & (sp > 0), sp, np.nan)
    return np.where(np.isfinite(sp) & (sp > 0), sp, np.nanmax(sp))


def _packed(n=300, seed=12):
    """Crowns packed on a jittered grid over dark ground (a dense stand), nodata corner."""
    rng = np.random.default_rng(seed)
    img = np.stack([np.full((n, n), 40.0), np.full((n, n), 34.0), np.full((n, n), 28.0)])
    yy, xx = np.mgrid[:n, :n]
    for cy in range(9, n - 9, 18):
        for cx in range(9, n - 9, 18):
            r = rng.uniform(6.5, 7.5)
            y, x = cy + rng.uniform(-1, 1), cx + rng.uniform(-1, 1)
            m = (yy - y) ** 2 + (xx - x) ** 2 <= r * r
            img[:, m] = (np.array([70.0, 130.0, 50.0]) * rng.uniform(0.85, 1.15))[:, None]
    img += rng.normal(0, 3.0, img.shape)
    valid = np.ones((n, n), bool)
    valid[: n // 4, : n // 3] = False
    img[:, ~valid] = 0.0
    return img.astype(np.float32), valid


@pytest.mark.parametrize("dense", [False, True])
def test_layer_choice_equals_filtering_anew_every_round(monkeypatch, dense):
    img, valid = _packed() if dense else _shrubs()
    n = valid.shape[0]
    # the whole scene (its core reaches the nodata corner and the edges), and for the
    # open scene a window whose core is away from its edges
    wins = [SampleWindow(img, valid, (slice(0, n), slice(0, n)))]
    if not dense:
        wins.append(
            SampleWindow(img[:, 60:, 60:], valid[60:, 60:], (slice(40, 160), slice(40, 160)))
        )
    sc = blob_scales(4.0, 11.0) if not dense else blob_scales(5.0, 9.0)
    roles = ("red", "green", "blue")
    fast = choose_layer(wins, roles, sc)
    cleared = []

    def spreads(lp, masks, fill, clearances=None):
        cleared.append(clearances is not None)
        return _direct_spreads(lp, masks, fill, clearances)

    monkeypatch.setattr(autotune, "_candidates", _direct_candidates)
    monkeypatch.setattr(autotune, "_spreads", spreads)
    ref = choose_layer(wins, roles, sc)
    assert any(cleared) == dense  # the dense-stand branch (clearances) ran when meant to
    assert ref.candidates > 20
    assert fast.name == ref.name and fast.candidates == ref.candidates
    assert fast.closed == ref.closed
    assert [n for n, _w in fast.terms] == [n for n, _w in ref.terms]
    assert [w for _n, w in fast.terms] == pytest.approx([w for _n, w in ref.terms], rel=1e-6)
    for f in dataclasses.fields(ref):
        a, b = getattr(ref, f.name), getattr(fast, f.name)
        if isinstance(a, float):
            assert b == pytest.approx(a, rel=1e-4), f.name
    np.testing.assert_allclose(fast.min_response, ref.min_response, rtol=1e-4)
    assert fast.scores == pytest.approx(ref.scores, rel=1e-3)


def test_scale_space_maxima_equal_a_3x3x3_maximum_filter():
    # reference: scipy.ndimage.maximum_filter over (scale, row, column), edges repeated
    # ("nearest"), which is what the candidate search claims to equal
    from scipy import ndimage

    from ecoscan.detect.blobs import _scale_space_maxima

    rng = np.random.default_rng(2)
    for t in range(12):
        shape = (int(rng.integers(3, 6)), int(rng.integers(4, 60)), int(rng.integers(4, 60)))
        resp = ndimage.gaussian_filter(rng.standard_normal(shape), (0, 1.5, 1.5))
        resp = resp.astype(np.float32)
        if t % 3 == 0:
            resp = np.round(resp, 1)  # plateaus: ties count as maxima
        valid = rng.random(shape[1:]) > 0.1
        thr = (-1.0, 0.0, 0.2)[t % 3]
        peak = resp >= ndimage.maximum_filter(resp, size=3, mode="nearest")
        peak &= (resp >= thr) & valid[None]
        peak[[0, -1]] = False
        ref = np.nonzero(peak)
        got = _scale_space_maxima(resp, thr, valid)
        order = np.lexsort(got[::-1])
        for a, b in zip(got, ref, strict=True):
            np.testing.assert_array_equal(a[order], b)


def test_pyramid_gaussian_equals_scipys_gaussian_filter_to_the_bit():
    # reference: scipy.ndimage.gaussian_filter (truncate 4, constant edges), which the
    # pyramid used to call for every blur; the kernel is now computed once per sigma
    from scipy import ndimage

    from ecoscan.detect.blobs import _gaussian

    rng = np.random.default_rng(6)
    for sigma in (0.2, 0.9, 1.37, 3.1):
        img = rng.standard_normal((45, 61)).astype(np.float32)
        ref = ndimage.gaussian_filter(img, sigma, truncate=4.0, mode="constant", cval=0.37)
        np.testing.assert_array_equal(_gaussian(img, sigma, 0.37), ref)


def test_disc_mask_equals_testing_every_pixel():
    # reference: the definition, (y - row)^2 + (x - col)^2 <= radius^2 tested on every
    # pixel, for centres on and off the grid, radii whose square is an integer (pixels
    # exactly on the circle) and discs cut by the array's edges
    rng = np.random.default_rng(9)
    yy, xx = np.mgrid[:70, :90]
    for t in range(40):
        n = int(rng.integers(1, 30))
        rows, cols = rng.uniform(-6, 76, n), rng.uniform(-6, 96, n)
        radii = rng.uniform(0.0, 20.0, n)
        if t % 2:
            rows, cols = np.round(rows), np.round(cols)
            radii = np.sqrt(rng.integers(0, 400, n).astype(float))
        ref = np.zeros((70, 90), bool)
        for r0, c0, rad in zip(rows, cols, radii, strict=True):
            ref |= (yy - r0) ** 2 + (xx - c0) ** 2 <= rad * rad
        np.testing.assert_array_equal(autotune._disc_mask((70, 90), rows, cols, radii), ref)
