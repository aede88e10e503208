"""How detection hands work to its worker processes: shared memory, forked workers, open
rasters. None of it may change a result, and no shared-memory segment may outlive a run.

The references: :mod:`pickle` (what a job looks like after the usual trip to a worker),
the operating system's list of shared-memory segments (``/dev/shm`` on Linux), and the
same detection run in this process alone. Invented scenes only.
"""

from __future__ import annotations

import multiprocessing
import os
import pickle
import signal
import subprocess
import sys
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest

from ecoscan.detect import tiling
from ecoscan.detect.shared_arrays import PREFIX, Segments, pack, run_packed
from ecoscan.detect.tiling import EarlyPool, fork_is_safe, share_work

SHM = Path("/dev/shm")
pytestmark = pytest.mark.skipif(not SHM.is_dir(), reason="needs POSIX shared memory in /dev/shm")


def _mine() -> list[str]:
    """Segments made by this process and not removed."""
    return sorted(p.name for p in SHM.glob(f"{PREFIX}{os.getpid()}-*"))


def _job():
    rng = np.random.default_rng(0)
    big = rng.normal(size=(300, 200)).astype(np.float32)
    mask = rng.random((256, 256)) > 0.5
    return {
        "label": "exg",
        "layers": [big, big[::2, 1:], np.asfortranarray(big)],
        "same": big,  # the same array twice: one array after the trip, as with pickle
        "valid": [mask],
        "small": np.arange(5),
        "core": (slice(3, 9), slice(0, 4)),
    }


def _describe(job) -> list:
    """Everything pickling keeps: values, dtypes, shapes, memory order, sharing."""
    out = [job["label"], job["core"], job["same"] is job["layers"][0]]
    for a in [*job["layers"], job["same"], *job["valid"], job["small"]]:
        out.append((a.dtype.str, a.shape, a.flags.f_contiguous, a.tobytes()))
    return out


def test_a_packed_job_arrives_as_pickling_would_deliver_it():
    job = _job()
    reference = _describe(pickle.loads(pickle.dumps(job)))
    with Segments() as segs:
        packed, name = pack(job, segs)
        assert name is not None and name in segs.names and _mine() == [name]
        # only references travel with the job: the arrays wait in the segment
        assert len(pickle.dumps(packed)) < 2_000
        assert run_packed(_describe, packed) == reference
        # in another process too, which maps the segment by its name
        with ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("fork")) as ex:
            assert ex.submit(run_packed, _describe, packed).result() == reference
        # the worker mapped it without taking it over: it ended, the segment is still here
        assert _mine() == [name]
        segs.release(name)
        assert _mine() == []
    plain, none = pack({"x": np.arange(10)}, Segments())
    assert none is None and plain == {"x": plain["x"]}  # nothing large: sent as it is


def _fails_on_zero(job):
    if job["n"] == 0:
        raise ZeroDivisionError("a worker failed")
    time.sleep(0.05)
    return float(job["a"].sum())


def _jobs(n: int = 6):
    return [{"n": i, "a": np.full(40_000, float(i))} for i in range(n)]


@pytest.fixture(scope="module")
def pool():
    early = EarlyPool(2)
    yield early
    early.stop()


def test_no_segment_outlives_share_work_on_success_error_or_interrupt(pool):
    assert _mine() == []
    jobs = _jobs()
    got = share_work(_fails_on_zero, jobs[1:], pool=pool)
    assert got == [40_000.0 * i for i in range(1, 6)] and _mine() == []
    # a worker's error reaches the caller; every segment is gone all the same
    with pytest.raises(ZeroDivisionError):
        share_work(_fails_on_zero, jobs, pool=pool, local=lambda j: _fails_on_zero({**j, "n": 1}))
    assert _mine() == []

    # Ctrl-C while this process works on its own share and the workers on theirs
    def interrupted(job):
        time.sleep(0.2)  # the helper has handed jobs to both workers meanwhile
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        share_work(_fails_on_zero, _jobs(8)[1:], pool=pool, local=interrupted)
    assert _mine() == []
    assert share_work(_fails_on_zero, jobs[1:3], pool=pool) == [40_000.0, 80_000.0]


KILLED = """
import os, signal, sys
import numpy as np
from ecoscan.detect.shared_arrays import Segments, pack
segs = Segments()
job, name = pack({"a": np.ones(100_000)}, segs)
print(name, flush=True)
os.kill(os.getpid(), signal.SIGKILL)  # no clean-up of any kind runs
"""


def test_a_caller_killed_outright_leaves_no_segment():
    # Python's resource tracker, with which every segment is registered, removes what a
    # killed caller could not (it warns about it on stderr)
    out = subprocess.run([sys.executable, "-c", KILLED], capture_output=True, text=True)
    assert out.returncode == -signal.SIGKILL
    name = out.stdout.split()[0]
    deadline = time.monotonic() + 10
    while (SHM / name).exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not (SHM / name).exists()


def test_workers_are_forked_only_when_this_is_the_only_thread(monkeypatch):
    stop = threading.Event()
    other = threading.Thread(target=stop.wait, daemon=True)
    other.start()
    try:
        assert not fork_is_safe()  # another thread might hold a lock a child would inherit
    finally:
        stop.set()
        other.join()
    if threading.active_count() == 1 and "fork" in tiling.mp.get_all_start_methods():
        assert fork_is_safe()
        monkeypatch.setenv("GDAL_NUM_THREADS", "4")
        assert not fork_is_safe()  # GDAL's own threads would not exist in the child


def _settings(sc, tile: int):
    from ecoscan.detect import DetectionSettings

    lo, hi = sc.diameter_range_m
    return DetectionSettings(
        diameter_min_m=lo, diameter_max_m=hi, tile_size_px=tile, bands=sc.bands_option
    )


def _same(a, b) -> None:
    np.testing.assert_array_equal(a.points.xy, b.points.xy)
    assert a.points.attrs.keys() == b.points.attrs.keys()
    for k in a.points.attrs:
        np.testing.assert_array_equal(a.points.attrs[k], b.points.attrs[k], err_msg=k)
    assert a.thresholds == b.thresholds and a.notes == b.notes


def test_one_and_two_workers_forked_or_not_give_the_same_detections(tmp_path, monkeypatch):
    from ecoscan.detect import detect_raster
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene("dry-shrubs", 448, 7)  # a development seed
    raster = write_scene(sc, tmp_path).raster
    settings = _settings(sc, 128)  # 16 tiles: neighbours share overlap blocks
    forked = []
    real = tiling.start_pool

    def spy(workers, preload=False, fork=False):
        forked.append(fork)
        return real(workers, preload=preload, fork=fork)

    monkeypatch.setattr(tiling, "start_pool", spy)
    one = detect_raster(raster, settings, workers=1)
    two = detect_raster(raster, settings, workers=2)
    assert forked == [fork_is_safe()]
    _same(one, two)
    assert one.tiles_read == 16 and one.n > 50
    monkeypatch.setattr(tiling, "fork_is_safe", lambda: False)  # a fork server's workers
    _same(one, detect_raster(raster, settings, workers=2))
    assert forked[-1] is False
    assert _mine() == []
