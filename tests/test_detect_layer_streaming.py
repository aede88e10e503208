"""The layer choice starts on the workers early: each candidate layer is handed to them as
soon as it is made, and they score while the closed-canopy check runs. None of it may
change a result.

The references: the serial layer choice in this process (every layer scored here, one
after the other), the same detection run in this process alone, and the two
log-chromaticities computed one at a time (:func:`ecoscan.detect.engine.base_layer`).
Invented scenes only.
"""

from __future__ import annotations

import dataclasses
import os
import threading
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from detect_helpers import sample_windows

from ecoscan.detect import autotune, engine
from ecoscan.detect.autotune import begin_layer_choice, choose_layer
from ecoscan.detect.shared_arrays import PREFIX
from ecoscan.detect.tiling import EarlyPool, WorkShare
from ecoscan.synthetic import make_scene

SHM = Path("/dev/shm")


class _Lent:
    """A stand-in for EarlyPool lending ``executor``."""

    def __init__(self, executor, workers: int = 1) -> None:
        self.executor, self.workers = executor, workers

    def wait(self):
        return self.executor


_STARTED = threading.Event()
_GO = threading.Event()


def _flag(x):
    _STARTED.set()
    return -x


def _held(x):
    _GO.wait(10)
    return -x


def test_a_job_is_handed_to_a_worker_as_soon_as_it_is_added():
    _STARTED.clear()
    with ThreadPoolExecutor(1) as ex, WorkShare(_flag, _Lent(ex)) as share:
        share.add(5)
        # the worker runs it before any result is asked for (the old share_work handed
        # jobs out only once the whole list was there)
        assert _STARTED.wait(10)
        share.add(6)
        share.add(7)
        assert share.results() == [-5, -6, -7]
        with pytest.raises(RuntimeError):
            share.add(8)  # no job after the results


def test_work_left_without_asking_for_results_is_abandoned_cleanly():
    _GO.clear()
    big = np.ones(50_000)  # large enough to travel through shared memory
    ex = ThreadPoolExecutor(1)
    try:
        with WorkShare(_held, _Lent(ex)) as share:
            for _ in range(4):
                share.add(big)
            helper = share._state.helper
        # left at once (the closed-canopy case): the helper thread has ended, the jobs no
        # worker started are cancelled, and no shared-memory segment is left behind
        assert not helper.is_alive()
        futures = share._state.futures
        assert len(futures) <= 1  # one worker: one job handed out, the others never
        if SHM.is_dir():
            assert not list(SHM.glob(f"{PREFIX}{os.getpid()}-*"))
    finally:
        _GO.set()
        ex.shutdown()


def _windows(style: str = "dry-shrubs", size: int = 320, seed: int = 0):
    """Four windows with margins of a suite scene (development seed), one with nodata."""
    return sample_windows(style, size, seed)


@pytest.fixture(scope="module")
def pool():
    early = EarlyPool(2)
    yield early
    early.stop()


@pytest.mark.parametrize("style", ["dry-shrubs", "conifer-pasture"])
def test_a_choice_begun_early_is_the_serial_one(pool, style):
    wins, scales = _windows(style)
    roles = ("red", "green", "blue")
    serial = choose_layer(wins, roles, scales)  # no pool: every layer scored here
    assert pool.wait() is not None
    with begin_layer_choice(wins, roles, scales, pool=pool) as scoring:
        assert [j.label for j in scoring.jobs] == ["exg"]  # one handed out before the check
        early = choose_layer(wins, roles, scales, pool=pool, scoring=scoring)
    # every layer was scored (conifer pasture adds "chroma-valley": the log-chromaticity
    # layer with valley thresholds took over the classic choice)
    assert {"exg", "darkness", "exg+darkness", "chroma"} <= set(early.scores)
    assert ("chroma-valley" in early.scores) == (style == "conifer-pasture")
    # every field, to the bit
    assert dataclasses.asdict(early) == dataclasses.asdict(serial)


def test_both_log_chromaticities_made_once_are_those_made_one_by_one():
    # engine.compose_layer computes log_chromaticity once for the two terms; the
    # reference sums base_layer's arrays (each computing it anew) in the same order
    sc = make_scene("conifer-pasture", 200, 7)
    data = np.asarray(sc.image, np.float32)[:3]
    roles = ("red", "green", "blue")
    for terms in (
        (("logchroma_r", 0.6), ("logchroma_b", -0.8)),
        (("logchroma_b", 1.0), ("logchroma_r", 0.25)),
    ):
        ref = None
        for name, w in terms:
            layer = engine.base_layer(data, roles, name)
            if w != 1.0:
                layer *= np.float32(w)
            ref = layer if ref is None else ref + layer
        got = engine.compose_layer(data, roles, terms)
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got.view(np.uint32), ref.view(np.uint32))


@pytest.mark.parametrize("style", ["dry-shrubs", "closed-canopy"])
def test_detection_with_early_scoring_matches_one_process(tmp_path, style):
    # closed canopy: the scoring begun on the workers is abandoned for the canopy path
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.synthetic import write_scene

    sc = make_scene(style, 480, 3)
    raster = write_scene(sc, tmp_path).raster
    lo, hi = sc.diameter_range_m
    settings = DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=200)
    two = detect_raster(raster, settings, workers=2)
    one = detect_raster(raster, settings, workers=1)
    assert (two.thresholds.get("layer") == "canopy") == (style == "closed-canopy")
    assert two.thresholds == one.thresholds
    assert two.n > 20
    np.testing.assert_array_equal(two.points.xy, one.points.xy)
    if SHM.is_dir():
        assert not list(SHM.glob(f"{PREFIX}{os.getpid()}-*"))


def test_layer_jobs_are_made_one_at_a_time():
    # a generator: the first job exists before the others are made
    wins, scales = _windows(size=160)
    gen = autotune._layer_jobs(wins, ("red", "green", "blue"), scales, [("exg",), ("darkness",)], 1)
    first = next(gen)
    assert first.label == "exg"
    assert [j.label for j in gen] == ["darkness"]
