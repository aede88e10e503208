"""The second evidence layer (pale crowns) made cheaper without changing a result.

* Its smoothed brightness and main-layer tests are computed at the blob centres only
  (:func:`ecoscan.detect.pale_crowns.smoothed_at`); the reference is
  ``scipy.ndimage.gaussian_filter`` on the whole image (general-purpose library), bit for
  bit, including images smaller than the filter (mirrored more than once).
* Its layer (GRVI) is scored as a spare layer beside the layer choice, on a worker that
  would otherwise wait (:meth:`ecoscan.detect.autotune.LayerScoring.spare_choice`); the
  reference is :func:`ecoscan.detect.autotune.choose_layer` of that layer alone, scored
  in this process.
* A spare share (:class:`ecoscan.detect.tiling.WorkShare` with ``after``) hands nothing to
  a worker before every job of the share it follows has been taken.
* The tile step (:func:`ecoscan.detect.pale_crowns.find_second`, whose brightness is now
  used without a copy) keeps the GRVI blobs that the same tests written out with
  ``scipy.ndimage.gaussian_filter`` over whole images keep.

Invented scenes only.
"""

from __future__ import annotations

import dataclasses
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from detect_helpers import sample_windows
from scipy import ndimage

from ecoscan.detect.autotune import begin_layer_choice, choose_layer
from ecoscan.detect.pale_crowns import LAYER, _mirrored, smoothed_at, spare_layers
from ecoscan.detect.tiling import EarlyPool, WorkShare


def test_smoothed_at_every_pixel_equals_scipy_even_on_tiny_images():
    # scipy.ndimage.gaussian_filter (mode "reflect", truncate 4) is the reference; images
    # from 3 pixels wide (the filter reaches several times past both edges) to 200
    rng = np.random.default_rng(11)
    for h, w, sigma in ((3, 5, 2.0), (17, 9, 3.3), (60, 41, 1.0), (200, 150, 5.35)):
        img = rng.normal(100.0, 30.0, (h, w)).astype(np.float32) ** 2 / 100.0
        rows, cols = np.nonzero(np.ones((h, w), bool))
        want = ndimage.gaussian_filter(img, sigma).ravel()
        got = smoothed_at(img, rows, cols, sigma)
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got.view(np.uint32), want.view(np.uint32))


def test_smoothed_at_a_few_thousand_blobs_of_a_scene_layer():
    # an Excess Green layer of a suite scene (the values the detector sees), more centres
    # than one chunk of patches
    from ecoscan.detect.indices import excess_green
    from ecoscan.synthetic import make_scene

    data = np.asarray(make_scene("dry-shrubs", 256, 0).image, np.float32)
    layer = excess_green(data[0], data[1], data[2])
    rng = np.random.default_rng(2)
    rows, cols = rng.integers(0, 256, 2500), rng.integers(0, 256, 2500)
    want = ndimage.gaussian_filter(layer, 5.345)[rows, cols]
    np.testing.assert_array_equal(smoothed_at(layer, rows, cols, 5.345), want)


def test_mirrored_indices_are_numpy_symmetric_padding():
    # numpy.pad(mode="symmetric") repeats the edge pixel, as ndimage's "reflect" does
    for n in (1, 2, 5, 13):
        base = np.arange(n)
        pad = 3 * n + 2
        want = np.pad(base, pad, mode="symmetric")
        got = base[_mirrored(np.arange(-pad, n + pad), n)]
        np.testing.assert_array_equal(got, want)


def test_the_spare_layer_is_offered_only_with_red_green_and_blue():
    assert spare_layers(("red", "green", "blue")) == [(LAYER,)]
    assert spare_layers(("red", "green", "blue", "nir")) == []
    assert spare_layers(("band",)) == []


class _Lent:
    """A stand-in for EarlyPool lending ``executor``."""

    def __init__(self, executor, workers: int = 1) -> None:
        self.executor, self.workers = executor, workers

    def wait(self):
        return self.executor


_GO = threading.Event()


def _held(x):
    _GO.wait(10)
    return -x


def test_a_spare_share_waits_until_every_job_of_the_first_is_taken():
    _GO.clear()
    with ThreadPoolExecutor(2) as ex:
        lent = _Lent(ex, workers=2)
        with WorkShare(_held, lent) as first, WorkShare(abs, lent, after=first) as spare:
            first.add(1)
            spare.add(-7)
            first.add(2)
            first.add(3)  # the third job waits for a free worker
            for _ in range(100):  # both workers busy with the first share's jobs
                if len(first._state.futures) == 2:
                    break
                time.sleep(0.02)
            time.sleep(0.2)  # time enough for a spare helper that did not wait
            assert not spare._state.futures  # nothing handed out: first's jobs come first
            _GO.set()
            assert first.results() == [-1, -2, -3]
            assert spare.results() == [7]


def test_an_abandoned_spare_share_stops_its_helper():
    _GO.clear()
    with ThreadPoolExecutor(1) as ex:
        lent = _Lent(ex)
        try:
            first = WorkShare(_held, lent)
            first.add(1)
            first.add(2)  # never taken: the first share stays open
            with WorkShare(abs, lent, after=first) as spare:
                spare.add(-3)
                helper = spare._state.helper
            assert not helper.is_alive()  # left without results: no wait for ``first``
            assert not spare._state.futures
        finally:
            _GO.set()
            first.__exit__(None, None, None)


@pytest.fixture(scope="module")
def pool():
    early = EarlyPool(2)
    yield early
    early.stop()


@pytest.mark.parametrize("lend", [True, False])
def test_the_spare_choice_is_that_layer_chosen_alone(pool, lend):
    wins, scales = sample_windows("dry-shrubs", 320, 0)
    roles = ("red", "green", "blue")
    alone = choose_layer(wins, roles, scales, options=[(LAYER,)], chroma=False, pool=None)
    use = pool if lend else None
    if lend:
        assert pool.wait() is not None
    with begin_layer_choice(wins, roles, scales, pool=use, spare=[(LAYER,)]) as scoring:
        choice = choose_layer(wins, roles, scales, pool=use, scoring=scoring)
        spare = scoring.spare_choice(LAYER)
    assert (scoring._spare is not None) == lend  # scored on a worker only with workers
    assert LAYER not in choice.scores  # a spare layer is no candidate
    # every field to the bit, except the blobs' elongation, which is not measured
    want = {k: v for k, v in dataclasses.asdict(alone).items() if k != "elongation"}
    got = {k: v for k, v in dataclasses.asdict(spare).items() if k != "elongation"}
    assert got == want
    assert spare.elongation["blobs"] == 0


def _added_by_loop(main_x, main_y, main_r, x, y, r, score, clear=2.0, margin=0.5):
    """The clearing rule blob by blob over every main crown (no tree), then the pruning."""
    from ecoscan.detect import blobs

    keep = np.ones(x.size, bool)
    for k in range(x.size):
        d = np.hypot(main_x - x[k], main_y - y[k])
        lim = np.maximum(r[k], clear * main_r) + margin * np.minimum(r[k], main_r)
        keep[k] = not np.any(d < lim)
    idx = np.flatnonzero(keep)
    if idx.size:
        kept = blobs.prune_blobs(x[idx], y[idx], r[idx], score[idx], margin=margin)
        keep[idx[~kept]] = False
    return keep


def test_added_points_at_once_equal_the_rule_blob_by_blob():
    # the reference tests every blob against every main crown in a plain loop
    from ecoscan.detect.pale_crowns import added_points

    rng = np.random.default_rng(5)
    for n_main, n in ((300, 500), (0, 40), (50, 0), (1, 1)):
        mx, my = rng.uniform(0, 400, (2, n_main))
        mr = rng.uniform(3, 20, n_main)
        x, y = rng.uniform(0, 400, (2, n))
        r, score = rng.uniform(3, 20, n), rng.uniform(0, 1, n)
        got = added_points(mx, my, mr, x, y, r, score)
        want = _added_by_loop(mx, my, mr, x, y, r, score)
        np.testing.assert_array_equal(got, want)
        if n_main == 300:
            assert 0 < got.sum() < n  # some cleared, some kept


def test_find_second_keeps_the_blobs_the_whole_image_filters_keep():
    # the tile step's brightness and main-layer tests against the rule written out with
    # scipy.ndimage.gaussian_filter (general-purpose library) over whole images: the
    # brightness is the mean of red, green and blue in float32, used without a copy
    from ecoscan.detect import blobs
    from ecoscan.detect.engine import compose_layer
    from ecoscan.detect.pale_crowns import SecondLayer, find_second
    from ecoscan.synthetic import make_scene

    sc = make_scene("dry-shrubs", 400, 7)  # a development seed
    data = np.asarray(sc.image, np.float32)[:3]
    roles = ("red", "green", "blue")
    ps = sc.pixel_size_m
    scales = blobs.blob_scales(sc.diameter_range_m[0] / ps / 2, sc.diameter_range_m[1] / ps / 2)
    valid = np.ones(data.shape[1:], bool)
    main = compose_layer(data, roles, (("exg", 1.0),))
    grvi = compose_layer(data, roles, (("grvi", 1.0),))
    bright = (data[0] + data[1] + data[2]) / np.float32(3.0)
    floor = tuple(np.full(scales.sigmas.size, 0.01))
    middle = float(np.median(grvi))
    every = blobs.detect_blobs(grvi, scales, np.asarray(floor), middle, valid, background=middle)
    r = np.clip(np.rint(every["row"]).astype(int), 0, bright.shape[0] - 1)
    c = np.clip(np.rint(every["col"]).astype(int), 0, bright.shape[1] - 1)
    sigma = float(scales.sigmas[1])
    bright_at = ndimage.gaussian_filter(bright, sigma)[r, c]
    main_at = ndimage.gaussian_filter(main, sigma)[r, c]
    # thresholds in the middle of the blobs' values, so that both tests decide something
    second = SecondLayer(
        terms=(("grvi", 1.0),),
        min_response=floor,
        min_value=middle,
        background=middle,
        max_brightness=float(np.median(bright_at)),
        main_min_value=float(np.quantile(main_at, 0.3)),
        score_scale=2.0,
    )
    got = find_second(data, main, roles, second, scales, valid, (0, 0))
    keep = (bright_at <= second.max_brightness) & (main_at >= second.main_min_value)
    assert 0 < keep.sum() < keep.size and every["row"].size > 30
    np.testing.assert_array_equal(got["row"], every["row"][keep])
    np.testing.assert_array_equal(got["col"], every["col"][keep])
    np.testing.assert_array_equal(got["response"], every["response"][keep] * 2.0)
