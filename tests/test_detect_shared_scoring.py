"""The layer choice shares its candidate layers with the tile workers: the same choice.

The reference is the serial computation in this process (every layer scored here, one
after the other); a layer scored by a worker process must give the same numbers to the
bit, since the job carries everything the score depends on. Invented scenes only.
"""

from __future__ import annotations

import dataclasses
from concurrent.futures import Future, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

import numpy as np
import pytest
from detect_helpers import sample_windows
from test_function_length import long_functions

from ecoscan.detect import autotune
from ecoscan.detect.autotune import choose_layer
from ecoscan.detect.tiling import EarlyPool, share_work
from ecoscan.synthetic import make_scene

ROOT = Path(__file__).resolve().parents[1]


def _windows(size: int = 320):
    """Four windows of a dry-shrub suite scene; the outer ones touch the scene's edges (the
    edge pyramids of the window statistics are then in use), one has a zeroed nodata corner."""
    return sample_windows(size=size, zero_nodata=True)


@pytest.fixture(scope="module")
def pool():
    early = EarlyPool(2)
    yield early
    early.stop()


def test_layer_choice_on_workers_is_the_serial_one(pool, monkeypatch):
    wins, scales = _windows()
    roles = ("red", "green", "blue")
    serial = choose_layer(wins, roles, scales)
    assert pool.wait() is not None  # workers up: the helper hands them jobs at once
    here = []
    score = autotune._score_layer

    def counted(*args, **kwargs):
        here.append(1)
        return score(*args, **kwargs)

    # counts the layers scored in this process only (workers import the module anew)
    monkeypatch.setattr(autotune, "_score_layer", counted)
    shared = choose_layer(wins, roles, scales, pool=pool)
    n_options = len(autotune.candidate_layers(roles))
    assert n_options == 3
    assert len(here) < n_options  # at least one layer was scored by a worker
    assert serial.candidates > 10
    # every field, to the bit (floats, thresholds per scale, weights of the combined layer)
    assert dataclasses.asdict(shared) == dataclasses.asdict(serial)


def test_a_job_scored_from_its_own_contents_equals_the_shared_window_statistics():
    # what a worker computes (window statistics rebuilt from the job) against this
    # process's cache, on windows at the scene's edges and with nodata
    wins, scales = _windows()
    roles = ("red", "green", "blue")
    cache = autotune._WindowCache(wins, scales)
    assert any(e is not None for e in cache.edges)  # the edge pyramids are exercised
    jobs = autotune._layer_jobs(wins, roles, scales, autotune.candidate_layers(roles), 1)
    for job in jobs:
        a = autotune._score_job(job)
        b = autotune._score_layer(job.layers, cache, centre=job.centre)
        assert a.keys() == b.keys()
        for k in a:
            np.testing.assert_array_equal(a[k], b[k], err_msg=f"{job.label}: {k}")


def test_share_work_keeps_job_order_across_this_process_and_workers(pool):
    jobs = list(range(-7, 5))
    assert share_work(abs, jobs, pool=pool) == [abs(j) for j in jobs]
    assert share_work(abs, jobs) == [abs(j) for j in jobs]  # no pool: all here
    assert share_work(abs, []) == []


class _Lent:
    """A stand-in for EarlyPool lending ``executor`` (or None: the pool never started)."""

    def __init__(self, executor, workers: int = 2) -> None:
        self.executor, self.workers = executor, workers

    def wait(self):
        return self.executor


class _Broken:
    """An executor whose workers die: every future fails with BrokenProcessPool."""

    def submit(self, func, *args):
        fut: Future = Future()
        fut.set_exception(BrokenProcessPool("a worker died"))
        return fut


def test_share_work_runs_here_what_the_pool_cannot():
    jobs = list(range(-6, 6))
    want = [abs(j) for j in jobs]
    closed = ThreadPoolExecutor(1)
    closed.shutdown()  # submit raises: the jobs not taken yet are run here
    for lent in (_Lent(None), _Lent(closed), _Lent(_Broken())):
        assert share_work(abs, jobs, pool=lent) == want


def test_share_work_passes_a_workers_error_on():
    with ThreadPoolExecutor(2) as ex, pytest.raises(ZeroDivisionError):
        share_work(_inverse, [1, 0, 2, 4, 5, 8], pool=_Lent(ex))


def _inverse(x):
    return 1 / x


def test_layer_scoring_functions_are_short():
    # issue 14's limit (tests/test_function_length.py) for the modules of this work
    for rel in ("ecoscan/detect/autotune.py", "ecoscan/detect/tiling.py"):
        assert long_functions((ROOT / rel).read_text(encoding="utf-8")) == {}, rel


def test_detection_lends_its_workers_to_the_layer_choice(tmp_path, monkeypatch):
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.synthetic import write_scene

    sc = make_scene("dry-shrubs", 512, 0)
    raster = write_scene(sc, tmp_path).raster
    lo, hi = sc.diameter_range_m
    settings = DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=256)
    lent = []
    real = autotune.WorkShare

    def spy(func, pool, **kw):
        lent.append(pool)
        return real(func, pool, **kw)

    monkeypatch.setattr(autotune, "WorkShare", spy)
    two = detect_raster(raster, settings, workers=2)
    n_two = len(lent)  # the main layer choice, and the second (GRVI) layer's spare share
    one = detect_raster(raster, settings, workers=1)
    # without workers the second layer is scored in this process, with no share of its own
    assert n_two >= 1 and len(lent) > n_two
    assert all(isinstance(p, EarlyPool) for p in lent[:n_two])
    assert all(p is None for p in lent[n_two:])
    assert two.thresholds == one.thresholds
    np.testing.assert_array_equal(two.points.xy, one.points.xy)
