"""Detection and surveys on a Dask cluster (issue 13): same results as the local run.

One ``LocalCluster`` (2 single-threaded worker processes) is shared by the module. Checked:
the same points for ``detect`` (imagery and canopy height model), a byte-identical
``dispersion.csv`` for a survey run with ``--dask-workers 2``, a worker killed mid-run
(Dask reruns its tasks: the output is complete and identical), the client's memory while
the tiles run, a raster that fails to read on a worker, and no processes left behind.
The reference is always ecoscan's own in-process run on the same inputs: the claim under
test is that the executor does not change the numbers.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from detect_helpers import UTM, X0, Y0, chm_scene, ortho_scene
from rasterio.transform import from_origin
from rasterio.windows import Window

from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.errors import InputError
from ecoscan.execution import DaskExecutor

distributed = pytest.importorskip("distributed")
psutil = pytest.importorskip("psutil")  # a dependency of distributed


@pytest.fixture(scope="module")
def cluster():
    cl = distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=":0",
        silence_logs=logging.CRITICAL,
    )
    client = distributed.Client(cl, set_as_default=False)
    yield client
    pids = set(client.run(os.getpid).values())
    client.close()
    cl.close()
    # no worker process outlives the cluster
    deadline = time.monotonic() + 10
    while deadline > time.monotonic() and any(psutil.pid_exists(p) for p in pids):
        time.sleep(0.1)
    alive = [p for p in pids if psutil.pid_exists(p) and psutil.Process(p).status() != "zombie"]
    assert not alive


@pytest.fixture(scope="module")
def scenes(tmp_path_factory):
    folder = tmp_path_factory.mktemp("dask-scenes")
    ortho, _ = ortho_scene(folder, shape=(600, 560))
    chm, _ = chm_scene(folder, shape=(700, 680), n=160)
    return folder, ortho, chm


def _same_points(a, b) -> None:
    assert a.points.n == b.points.n > 0
    np.testing.assert_array_equal(a.points.x, b.points.x)
    np.testing.assert_array_equal(a.points.y, b.points.y)
    assert list(a.points.attrs) == list(b.points.attrs)
    for k in a.points.attrs:
        np.testing.assert_array_equal(a.points.attrs[k], b.points.attrs[k], err_msg=k)
    assert (a.method, a.index, a.tiles_read) == (b.method, b.index, b.tiles_read)


def test_detect_same_points_on_dask(cluster, scenes):
    _, ortho, chm = scenes
    ex = DaskExecutor(cluster)
    s = DetectionSettings(tile_size_px=256)  # 9 tiles: seams, the split and prune steps
    _same_points(detect_raster(ortho, s), detect_raster(ortho, s, executor=ex))
    s = DetectionSettings(method="chm", tile_size_px=256, crowns=True)
    _same_points(detect_raster(chm, s), detect_raster(chm, s, executor=ex))


def test_gdal_virtual_path_read_by_the_workers(cluster, scenes, tmp_path):
    # a raster reached through one of GDAL's virtual file systems (/vsizip/ here; /vsis3/
    # and https:// go the same way) is opened by the workers at that path
    import zipfile

    _, _, chm = scenes
    with zipfile.ZipFile(tmp_path / "flight.zip", "w") as z:
        z.write(chm, "chm.tif")
    s = DetectionSettings(method="chm", tile_size_px=256)
    remote = detect_raster(
        f"/vsizip/{tmp_path}/flight.zip/chm.tif", s, executor=DaskExecutor(cluster)
    )
    _same_points(detect_raster(chm, s), remote)


def _worker_pids(client) -> dict[str, int]:
    return client.run(os.getpid)


def test_worker_lost_mid_run(cluster, scenes):
    # Dask reruns the tasks of a lost worker on the others ("worker resilience" in the
    # dask.distributed docs): the output must be complete and the same as the local run
    _, _, chm = scenes
    s = DetectionSettings(method="chm", tile_size_px=128)  # 36 tiles
    local = detect_raster(chm, s)
    ex = DaskExecutor(cluster)
    box: dict = {}

    def run():
        try:
            box["result"] = detect_raster(chm, s, executor=ex)
        except BaseException as exc:  # pragma: no cover - reported below
            box["error"] = exc

    def busy(dask_scheduler):
        done = sum(ts.state == "memory" for ts in dask_scheduler.tasks.values())
        return done, {a: len(w.processing) for a, w in dask_scheduler.workers.items()}

    before = _worker_pids(cluster)
    th = threading.Thread(target=run)
    th.start()
    killed = None
    while th.is_alive() and killed is None:
        done, processing = cluster.run_on_scheduler(busy)
        victim = next((a for a, n in processing.items() if n > 0), None)
        if done >= 1 and victim is not None:
            killed = before[victim]
            os.kill(killed, signal.SIGKILL)  # the worker process dies with its tasks
        time.sleep(0.02)
    th.join(timeout=120)
    assert killed is not None, "the run ended before a worker could be killed"
    assert "error" not in box, box.get("error")
    _same_points(local, box["result"])
    cluster.wait_for_workers(2, timeout=60)  # the nanny started a fresh worker
    assert killed not in _worker_pids(cluster).values()


def _big_chm(path: Path, side: int = 4500) -> Path:
    """A float32 canopy height model of side² pixels (81 MB decoded for 4500), written in
    strips: cone-shaped trees in the western 512 columns, open ground elsewhere."""
    strip = 512
    yy, xx = np.mgrid[0:strip, 0:side].astype(np.float32)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=side,
        height=side,
        count=1,
        dtype="float32",
        transform=from_origin(X0, Y0, 0.5, 0.5),
        crs=UTM,
        tiled=True,
        blockxsize=256,
        blockysize=256,
        compress="deflate",
    ) as dst:
        for r0 in range(0, side, strip):
            h = min(strip, side - r0)
            d = np.hypot((yy[:h] % 16) - 8, (xx[:h] % 16) - 8)
            a = np.where(xx[:h] < 512, np.clip(12 - 1.5 * d, 0, None), 0).astype(np.float32)
            dst.write(a[None], window=Window(0, r0, side, h))
    return path


class _TilePhasePeak:
    """An executor wrapper recording the caller's peak Python/numpy memory while the tiles
    run (tracemalloc sees numpy's buffers)."""

    def __init__(self, inner):
        self.inner = inner
        self.distributed = inner.distributed
        self.peak = 0

    def map(self, func, jobs, **kw):
        tracemalloc.start()
        base = tracemalloc.get_traced_memory()[0]
        try:
            out = self.inner.map(func, jobs, **kw)
            self.peak = tracemalloc.get_traced_memory()[1] - base
        finally:
            tracemalloc.stop()
        return out


def test_client_memory_stays_small(cluster, tmp_path):
    from ecoscan.io.raster import GDAL_CACHE_MB

    path = _big_chm(tmp_path / "wide.tif")
    decoded = 4500 * 4500 * 4
    assert decoded > 1.2 * GDAL_CACHE_MB * 2**20  # larger than the client's block cache
    s = DetectionSettings(method="chm")  # 1024-pixel tiles: 25
    ex = _TilePhasePeak(DaskExecutor(cluster))
    res = detect_raster(path, s, executor=ex)
    # 32 x 281 cone tops (16-pixel spacing in the 512 western columns) minus edge effects
    assert res.tiles_read == 25 and 8000 < res.n < 9100
    # one tile's window of float32 heights is (1024 + 2 overlap)² x 4 bytes; an executor
    # that held tiles (or the raster) in the client would need at least that
    one_tile = 1024 * 1024 * 4
    assert ex.peak < one_tile / 2, ex.peak


def test_unreadable_raster_named_in_one_line(cluster, scenes, tmp_path):
    # the client read the header; the file is then cut short, as a raster on a shared
    # disk still being copied would be: the worker's read fails, the run names the file
    from ecoscan.detect.detectors.chm import ChmPlan
    from ecoscan.detect.engine import TileJob, run_tile
    from ecoscan.detect.tiling import plan_tiles
    from ecoscan.io.raster import open_raster

    _, _, chm = scenes
    cut = tmp_path / "half-copied.tif"
    cut.write_bytes(chm.read_bytes())
    info = open_raster(cut)
    plan = ChmPlan(bands=(1,), pixel_size_m=info.pixel_size_m)
    jobs = [TileJob(info, t, plan, "chm") for t in plan_tiles(info.width, info.height, 256, 16)]
    data = cut.read_bytes()
    cut.write_bytes(data[: len(data) // 3])
    with pytest.raises(InputError) as err:
        DaskExecutor(cluster).map(run_tile, jobs)
    msg = str(err.value)
    assert "half-copied.tif" in msg and "\n" not in msg


def _survey(folder: Path, ortho: Path, chm: Path) -> Path:
    from ecoscan.io.vector import write_plots
    from ecoscan.model.plots import Plot, PlotLayer

    # the orthomosaic spans 28 m x 30 m at 0.05 m, the height model 170 m x 175 m at
    # 0.25 m, both from (X0, Y0) (detect_helpers): two plots on both, two more on the latter
    plots = [
        Plot("west", shapely.box(X0 + 1, Y0 - 29, X0 + 14, Y0 - 1)),
        Plot("east", shapely.box(X0 + 14, Y0 - 29, X0 + 27, Y0 - 1)),
    ]
    plots += [
        Plot(f"stand-{i}", shapely.box(X0 + 30 + 40 * i, Y0 - 170, X0 + 65 + 40 * i, Y0 - 40))
        for i in range(2)
    ]
    write_plots(PlotLayer(plots, rasterio.crs.CRS.from_string(UTM)), folder / "plots.gpkg")
    text = (
        '[survey]\nplots = "plots.gpkg"\noutput = "out"\n'
        "[statistics]\nsimulations = 99\nseed = 7\n"
        "[change]\nenabled = false\n[compare]\nenabled = false\n"
        f'[[raster]]\nname = "shrubs"\npath = "{ortho}"\nsite = "A"\ndate = "2026-05-01"\n'
        "[raster.detect]\ndiameter = [0.5, 2.0]\ntile_size_px = 256\n"
        f'[[raster]]\nname = "stand"\npath = "{chm}"\nsite = "B"\ndate = "2026-05-02"\n'
        '[raster.detect]\nmethod = "chm"\ntile_size_px = 256\n'
    )
    (folder / "s.toml").write_text(text)
    return folder / "s.toml"


def _children(me) -> list:
    out = []
    for p in me.children(recursive=True):
        try:
            if p.status() != "zombie" and "resource_tracker" not in " ".join(p.cmdline()):
                out.append(p)
        except psutil.NoSuchProcess:
            pass
    return out


def test_survey_byte_identical_with_dask_workers(scenes, tmp_path):
    from ecoscan.cli import main

    _, ortho, chm = scenes
    toml = _survey(tmp_path, ortho, chm)
    me = psutil.Process()
    before = {p.pid for p in _children(me)}
    a, b = tmp_path / "local", tmp_path / "dask"
    assert main(["survey", str(toml), "-o", str(a), "--no-report", "--quiet"]) == 0
    argv = ["survey", str(toml), "-o", str(b), "--no-report", "--quiet", "--dask-workers", "2"]
    assert main(argv) == 0
    assert (a / "dispersion.csv").read_bytes() == (b / "dispersion.csv").read_bytes()
    assert (a / "points.csv").read_bytes() == (b / "points.csv").read_bytes()
    rows = (a / "dispersion.csv").read_text().splitlines()
    assert len(rows) == 1 + 2 + 4  # two plots in the orthomosaic, four in the height model
    # the local cluster the command started is gone with its worker processes (the
    # standard library's resource tracker, one per process that ever spawned, stays)
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        left = [p for p in _children(me) if p.pid not in before]
        if not left:
            break
        time.sleep(0.1)
    assert not left


def test_detect_command_on_a_running_scheduler(cluster, scenes, tmp_path, capsys):
    from ecoscan.cli import main

    _, _, chm = scenes
    common = ["detect", str(chm), "--method", "chm", "--tile-size", "256"]
    assert main([*common, "-o", str(tmp_path / "local.csv"), "--quiet"]) == 0
    address = cluster.scheduler.address
    capsys.readouterr()
    assert main([*common, "-o", str(tmp_path / "dask.csv"), "--scheduler", address]) == 0
    err = capsys.readouterr().err
    assert f"tiles ran on the Dask scheduler at {address} with 2 worker(s)" in err
    assert (tmp_path / "local.csv").read_bytes() == (tmp_path / "dask.csv").read_bytes()
    # the command's client is gone; the cluster it used keeps running
    assert len(cluster.scheduler_info()["workers"]) == 2


def test_survey_failing_raster_leaves_nothing(cluster, scenes, tmp_path):
    # the rasters' detections run side by side on the cluster; when one fails, the others'
    # tasks are cancelled and the run leaves no output folder (nor a temporary one)
    from ecoscan.survey.config import load_survey
    from ecoscan.survey.runner import run_survey

    _, ortho, chm = scenes
    toml = _survey(tmp_path, ortho, chm)
    # the first raster fails on the client while the second one's detection is under way
    text = toml.read_text().replace("diameter = [0.5, 2.0]", 'diameter = [0.5, 2.0]\nbands = "9"')
    toml.write_text(text)
    with pytest.raises(InputError, match="band 9 is out of range"):
        run_survey(load_survey(toml), output=tmp_path / "out", executor=DaskExecutor(cluster))
    assert not (tmp_path / "out").exists()
    assert not [p for p in tmp_path.iterdir() if "tmp-ecoscan" in p.name]
