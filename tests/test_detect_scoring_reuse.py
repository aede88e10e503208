"""Candidate-layer scoring reuses what it already computed: the same numbers to the bit.

Each shortcut of the layer scoring (``ecoscan.detect.autotune``) is checked against the
straightforward computation it replaces: numpy's partition and median, a fresh search of
the DoG pyramids at the higher floor, the response spread of one scale at a time, and
the background rounds measured anew every round. Invented scenes only (a dry-shrub scene
of the suite, development seed 0).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from detect_helpers import sample_windows

from ecoscan.detect import autotune
from ecoscan.detect.autotune import choose_layer
from ecoscan.detect.blobs import blob_pyramid, blob_scales, level_masks, pyramid_spread


def _windows(size: int = 480):
    """Four windows of a dry-shrub suite scene, one with a zeroed nodata corner."""
    return sample_windows(size=size, zero_nodata=True)


@pytest.fixture(scope="module")
def windows():
    return _windows()


def _same(a, b, path="") -> None:
    """Equal to the bit: arrays (dtype, shape, values, NaN where NaN), floats (sign of
    zero too), containers field by field."""
    if isinstance(a, dict):
        assert set(a) == set(b), path
        for k in a:
            _same(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _same(x, y, f"{path}[{i}]")
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and a.shape == b.shape, path
        np.testing.assert_array_equal(a, b, err_msg=path)
    elif isinstance(a, float):
        assert (a == b and np.signbit(a) == np.signbit(b)) or (a != a and b != b), (path, a, b)
    else:
        assert a == b, (path, a, b)


def test_order_stats_are_a_full_partitions_to_the_bit():
    # reference: numpy.partition of the whole array; arrays long enough for the bracket,
    # with ties, sorted runs (a regular sample of them is not random), NaN, many zeros
    # (whose sign a partition leaves to chance: the whole array is partitioned then)
    rng = np.random.default_rng(4)
    n = autotune.BRACKET_MIN + 1001
    cases = [
        rng.standard_normal(n).astype(np.float32),
        np.round(rng.standard_normal(n) * 2).astype(np.float32),
        np.sort(rng.gamma(2.0, 1.0, n)),
        np.where(rng.random(n) < 0.3, np.nan, rng.standard_normal(n)).astype(np.float32),
        np.where(rng.random(n) < 0.6, 0.0, rng.standard_normal(n)).astype(np.float32),
    ]
    for v in cases:
        for ks in ((n // 2,), (n // 2 - 1, n // 2), (3,), (n - 2, n - 1)):
            ref = np.partition(v, ks)[list(ks)]
            got = autotune._order_stats(v, ks)
            np.testing.assert_array_equal(got, ref)
    for v in cases[:3]:  # and the median is numpy's, computed in float64
        assert autotune._median(v) == np.median(v.astype(np.float64))
        assert autotune._median(v[:-1]) == np.median(v[:-1].astype(np.float64))


def _pyramids(windows, scales, label="exg"):
    cache = autotune._WindowCache(windows, scales)
    roles = ("red", "green", "blue")
    jobs = autotune._layer_jobs(windows, roles, scales, autotune.candidate_layers(roles), 1)
    job = next(j for j in jobs if j.label == label)
    return autotune._LayerPyramids(job.layers, cache, job.centre[0]), job


def test_candidates_filtered_from_a_lower_floor_equal_a_new_search(windows):
    wins, scales = windows
    lp, _job = _pyramids(wins, scales)
    noise = lp.noise() * lp.cache.white_spread(lp.layers[0].shape)
    rng = np.random.default_rng(1)
    low = 0.5 * noise
    found = autotune._core_blobs(lp, low)
    assert sum(f["row"].size for f in found) > 50
    for _ in range(4):  # higher floors, different at every scale
        high = low * rng.uniform(1.0, 4.0, low.size)
        ref = autotune._candidates(lp, high)
        got = autotune._candidates(lp, high, lower=found)
        assert ref["row"].size > 5
        _same(got, ref)


def test_a_blob_half_a_scale_off_is_searched_again_where_the_floors_disagree():
    # the refined sigma sits exactly between scales 2 and 3: which floor the search used
    # cannot be told, so filtering refuses when the two floors would decide differently
    scales = blob_scales(3.0, 12.0)
    sigma = scales.sigmas[2] * scales.k**0.5
    floor = np.linspace(1.0, 2.0, scales.sigmas.size)
    between = 0.5 * (floor[2] + floor[3])
    blob = {k: np.array([1.0]) for k in ("row", "col", "value")}
    unclear = [{**blob, "sigma": np.array([sigma]), "response": np.array([between])}]
    assert autotune._above(scales, unclear, floor) is None
    clear = [{**blob, "sigma": np.array([sigma]), "response": np.array([floor[3] + 0.1])}]
    assert autotune._above(scales, clear, floor)[0]["row"].size == 1
    # a blob refined a little off its scale keeps its own scale's floor
    own = [{**blob, "sigma": np.array([scales.sigmas[2] * scales.k**0.3]),
            "response": np.array([between])}]  # fmt: skip
    assert autotune._above(scales, own, floor)[0]["row"].size == 1


def test_spreads_of_a_level_at_once_equal_one_scale_at_a_time(windows):
    # reference: numpy.median of each scale's masked responses, one scale at a time
    wins, scales = windows
    lay = wins[3].data[1] - wins[3].data[0]
    valid = wins[3].valid
    pyr = blob_pyramid(np.where(valid, lay, np.float32(-3.0)), scales, -3.0)
    edge = blob_pyramid((~valid).astype(np.float32), scales, 1.0)
    mask = valid.copy()
    mask[50:120, 60:200] = False
    masks = level_masks(mask, scales)
    for shift in (None, (2.5, edge)):
        ref = np.full(scales.sigmas.size, np.nan)
        for i, (lev, ext, resp, _b) in enumerate(pyr):
            for j, e in enumerate(ext):
                if 1 <= e < scales.sigmas.size - 1 and scales.levels[e] == lev:
                    v = resp[j][masks[lev]]
                    if shift is not None:
                        v = v + np.float32(shift[0]) * edge[i][2][j][masks[lev]]
                    ref[e] = 1.4826 * float(np.median(np.abs(v - np.median(v))))
        ref[0], ref[-1] = ref[1], ref[-2]
        got = pyramid_spread(pyr, scales, masks, shift=shift)
        np.testing.assert_array_equal(got, ref)


class _Forgetful(dict):
    """A memo that never keeps anything: every round computed anew."""

    def __setitem__(self, key, value) -> None:
        pass


@pytest.mark.parametrize("label", ["exg", "darkness"])
def test_background_rounds_reusing_unchanged_windows_equal_rounds_anew(windows, monkeypatch, label):
    wins, scales = windows
    cache = autotune._WindowCache(wins, scales)
    _lp, job = _pyramids(wins, scales, label)
    drawn = []
    draw = autotune._disc_mask

    def counted(*args):
        drawn.append(1)
        return draw(*args)

    monkeypatch.setattr(autotune, "_disc_mask", counted)
    fast = autotune._score_layer(job.layers, cache, centre=job.centre)
    n_fast = len(drawn)
    init = autotune._LayerPyramids.__init__

    def forgetting(self, *args, **kwargs):
        init(self, *args, **kwargs)
        self.rounds_seen = _Forgetful()
        self.levels_seen = _Forgetful()

    monkeypatch.setattr(autotune._LayerPyramids, "__init__", forgetting)
    ref = autotune._score_layer(job.layers, cache, centre=job.centre)
    # never more discs drawn; on darkness the third round reuses two windows (on exg the
    # second round already repeats the first, so there is nothing to reuse)
    assert n_fast <= len(drawn) - n_fast
    if label == "darkness":
        assert n_fast < len(drawn) - n_fast
    _same(fast, ref)


def test_layer_choice_is_unchanged_field_by_field(windows):
    # the whole choice against the same choice with every memo forgetting (a new process
    # state each round): every field of the LayerChoice the same
    wins, scales = windows
    roles = ("red", "green", "blue")
    fast = choose_layer(wins, roles, scales)
    with pytest.MonkeyPatch.context() as mp:
        init = autotune._LayerPyramids.__init__

        def forgetting(self, *args, **kwargs):
            init(self, *args, **kwargs)
            self.rounds_seen = _Forgetful()
            self.levels_seen = _Forgetful()

        mp.setattr(autotune._LayerPyramids, "__init__", forgetting)
        mp.setattr(autotune, "BRACKET_MIN", 10**12)  # every median a full partition
        ref = choose_layer(wins, roles, scales)
    for f in dataclasses.fields(ref):
        _same(getattr(fast, f.name), getattr(ref, f.name), f.name)


def test_pixel_noise_of_an_all_valid_window_equals_the_masked_sum():
    # reference: the masked computation (a window with one invalid row), whose last row no
    # sampled 3 x 3 neighbourhood reaches at stride 2 (an even height): the same pixels
    # count, so the all-valid shortcut must give the same float to the bit
    rng = np.random.default_rng(8)
    for scale in (0.01, 3.0, 250.0):
        lay = (rng.standard_normal((96, 80)) * scale).astype(np.float32)
        lay += np.linspace(0, 5 * scale, 80, dtype=np.float32)[None]
        every = np.ones(lay.shape, bool)
        masked = every.copy()
        masked[-1] = False
        ref = autotune.pixel_noise(lay, masked, stride=2)
        lay[-1] = 1e6  # never looked at
        assert autotune.pixel_noise(lay, every, stride=2) == ref
