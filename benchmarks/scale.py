"""Throughput and memory of detection on a local process pool and on a local Dask cluster,
and a projection to a regional programme.

The scene is an invented RGB orthomosaic (``ecoscan.synthetic``: discs of shrubs on
textured soil, 5 cm pixels, one crown per 2,500 pixels on average), ``--size`` pixels
square (16384 by default: 268 megapixels, 805 MB decoded), rendered strip by strip into a
tiled GeoTIFF. Then, each in a fresh process so that peak memory is measured cleanly:

* single: :func:`ecoscan.detect.detect_raster` in one process (``workers=1``): its CPU
  seconds give the per-core throughput used for the projection;
* pool: the same call with ``workers=2`` (the local process pool);
* dask: the same call with a 2-worker local Dask cluster
  (:func:`ecoscan.execution.open_executor` with ``dask_workers=2``); the cluster's start-up
  is timed apart.

Printed for each: seconds, megapixels per second, CPU seconds (client and workers),
megapixels per CPU-second (the per-core throughput), the client's peak resident memory
(with a Dask cluster it hosts the scheduler too) and how far it grew while the tiles ran,
the client-side seconds (thresholds from sample windows, merging), and the largest
worker's peak; then the ratios dask / pool and whether all runs found the same points. A
short second part times the per-plot statistics
(:func:`ecoscan.analysis.dispersion.compute.analyse_plot`, 999 simulations, 80 to 150 plants
in 50 m squares, half of them clustered) in this process.

Last, the projection used in docs/scaling.md: hours, core-hours and cost for 100 mosaics
of 2 gigapixels and 10,000 plots on clusters of N single-core workers, from the single
process's CPU seconds split into the tiles (per megapixel) and the client's per-mosaic
threshold step (assumptions printed with it).

Run: ``nice python benchmarks/scale.py`` (``--size 8192`` for a quicker run on a shared
machine). Not run by the test suite.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from detect_speed import DescendantPeaks, _peak_self_mb  # noqa: E402

PIXEL_M = 0.05
DIAMETER_M = (0.6, 2.0)
#: Programme to project (issue 13): 100 mosaics of 2 gigapixels, 10,000 plots.
MOSAICS, MOSAIC_GP, PLOTS = 100, 2.0, 10_000
#: Assumed price of one cloud vCPU-hour, US dollars (an assumption: on-demand general-purpose
#: instances cost roughly 0.03-0.05 per vCPU-hour; from memory, check current prices).
VCPU_HOUR_USD = 0.04
#: Assumed parallel efficiency on a real cluster (object-storage reads, stragglers, the
#: client's per-raster threshold step); 1.0 would be perfect scaling.
EFFICIENCY = 0.8


def make_scene(path: Path, size: int, seed: int = 11) -> dict:
    """Render the orthomosaic strip by strip; returns facts about it."""
    from rasterio.transform import from_origin

    from ecoscan.synthetic import place_crowns, write_orthomosaic_geotiff

    rng = np.random.default_rng(seed)
    dpx = (DIAMETER_M[0] / PIXEL_M, DIAMETER_M[1] / PIXEL_M)
    n = size * size // 2500
    xy, d = place_crowns((size, size), n, dpx, rng, min_gap=0.95)
    write_orthomosaic_geotiff(
        path,
        xy,
        d,
        (size, size),
        rng,
        from_origin(500_000.0, 4_600_000.0, PIXEL_M, PIXEL_M),
        "EPSG:32631",
    )
    return {"crowns": int(xy.shape[0]), "megapixels": size * size / 1e6}


def _rss_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return float(line.split()[1]) / 1024
    return float("nan")


class _TilePhase:
    """Executor wrapper: how far the client's resident memory grows while the tiles run
    (sampled every 0.1 s; tracemalloc would slow the in-process scheduler down), and the
    seconds spent there (the rest is the client's own work: thresholds, merging)."""

    def __init__(self, inner):
        self.inner, self.distributed = inner, inner.distributed
        self.growth_mb = self.seconds = self.cpu_s = 0.0

    def map(self, func, jobs, **kw):
        import threading

        base = peak = _rss_mb()
        stop = threading.Event()

        def sample():
            nonlocal peak
            while not stop.wait(0.1):
                peak = max(peak, _rss_mb())

        th = threading.Thread(target=sample, daemon=True)
        th.start()
        t0, c0 = time.perf_counter(), time.process_time()
        try:
            return self.inner.map(func, jobs, **kw)
        finally:
            self.seconds = time.perf_counter() - t0
            self.cpu_s = time.process_time() - c0  # all the tiles' CPU when run in-process
            stop.set()
            th.join()
            self.growth_mb = max(peak, _rss_mb()) - base


def run_mode(tif: Path, mode: str, out_npy: Path) -> dict:
    """One detection run (in its own process)."""
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.execution import open_executor

    s = DetectionSettings(diameter_min_m=DIAMETER_M[0], diameter_max_m=DIAMETER_M[1])
    with DescendantPeaks() as kids:
        t0 = time.perf_counter()
        with open_executor(
            workers={"single": 1, "pool": 2}.get(mode), dask_workers=2 if mode == "dask" else None
        ) as ex:
            started = time.perf_counter() - t0
            wrapped = _TilePhase(ex)
            c0 = time.process_time()
            t1 = time.perf_counter()
            res = detect_raster(tif, s, executor=wrapped)
            dt = time.perf_counter() - t1
            cpu = time.process_time() - c0
    np.save(out_npy, res.points.xy)
    return {
        "mode": mode,
        "startup_s": started,
        "seconds": dt,
        "megapixels": res.raster.megapixels,
        "tiles": res.tiles_read,
        "n": res.n,
        "cpu_s": cpu + kids.cpu_seconds,
        "client_peak_rss_mb": _peak_self_mb(),
        "client_growth_mb": wrapped.growth_mb,
        "client_side_s": dt - wrapped.seconds,
        "client_side_cpu_s": cpu - wrapped.cpu_s,
        "tile_cpu_in_process_s": wrapped.cpu_s,
        "worker_peak_mb": kids.largest_mb,
    }


def time_plots(count: int = 8) -> float:
    """CPU seconds per plot of the per-plot statistics: 999 simulations, 50 m squares (each
    a different outline, so no cached result is reused) holding 80 to 150 plants, half at
    random and half in clusters (clustered plots run all simulations)."""
    import shapely

    from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
    from ecoscan.stats.csr import uniform_in_polygon

    s = DispersionSettings(simulations=999)
    rng = np.random.default_rng(3)
    jobs = []
    for i in range(count + 1):
        poly = shapely.box(0, 0, 50 + i * 0.37, 50)
        n = int(rng.integers(80, 151))
        if i % 2:
            parents = uniform_in_polygon(poly, max(2, n // 10), rng=rng)
            xy = parents[rng.integers(0, parents.shape[0], n)] + rng.normal(0, 1.5, (n, 2))
            xy = xy[shapely.contains_xy(poly, xy[:, 0], xy[:, 1])]
        else:
            xy = uniform_in_polygon(poly, n, rng=rng)
        jobs.append((xy, poly, f"p{i}"))
    analyse_plot(*jobs[0], s)  # warm-up (imports)
    t0 = time.process_time()
    for job in jobs[1:]:
        analyse_plot(*job, s)
    return (time.process_time() - t0) / count


def _child(args: list[str]) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, *args], capture_output=True, text=True, check=True
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def projection(
    tile_mp_per_cpu_s: float,
    client_cpu_per_mosaic_s: float,
    s_per_plot: float,
    workers=(8, 32, 128, 512),
) -> list[dict]:
    """Hours, core-hours and cost of the programme on N single-core workers.

    The tiles and the plots spread over the workers (at :data:`EFFICIENCY`); each mosaic's
    threshold step runs on the client, :data:`ecoscan.execution.RASTERS_AT_ONCE` at a time
    (taken as one client core each), overlapping the workers' tiles, so it is a floor.
    """
    from ecoscan.execution import RASTERS_AT_ONCE

    worker_core_s = MOSAICS * MOSAIC_GP * 1e3 / tile_mp_per_cpu_s + PLOTS * s_per_plot
    client_floor_s = MOSAICS * client_cpu_per_mosaic_s / RASTERS_AT_ONCE
    rows = []
    for n in workers:
        hours = max(worker_core_s / (n * EFFICIENCY), client_floor_s) / 3600
        rows.append(
            {
                "workers": n,
                "hours": hours,
                "core_hours": hours * n,
                "usd": hours * (n + RASTERS_AT_ONCE) * VCPU_HOUR_USD,
                "client_bound": client_floor_s >= worker_core_s / (n * EFFICIENCY),
            }
        )
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=16384, help="scene side in pixels")
    ap.add_argument("--keep", metavar="DIR", help="write the scene here and keep it")
    ap.add_argument(
        "--modes", default="single,pool,dask", help="runs to make (default single,pool,dask)"
    )
    ap.add_argument("--child", nargs=3, metavar=("TIF", "MODE", "NPY"), help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.child:
        print(json.dumps(run_mode(Path(a.child[0]), a.child[1], Path(a.child[2]))))
        return
    folder = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="ecoscan-scale-"))
    folder.mkdir(parents=True, exist_ok=True)
    tif = folder / f"ortho_{a.size}.tif"
    t0 = time.perf_counter()
    facts = make_scene(tif, a.size) if not tif.exists() else {"megapixels": a.size**2 / 1e6}
    print(
        f"scene {a.size} x {a.size} ({facts['megapixels']:.0f} MP, "
        f"{3 * facts['megapixels']:.0f} MB decoded) in {time.perf_counter() - t0:.0f} s; "
        f"{os.cpu_count()} CPU cores"
    )
    runs = {}
    for mode in a.modes.split(","):
        r = _child(["--child", str(tif), mode, str(folder / f"{mode}.npy")])
        runs[mode] = r
        print(
            f"{mode:>6}: {r['seconds']:7.1f} s  {r['megapixels'] / r['seconds']:5.2f} MP/s  "
            f"cpu {r['cpu_s']:7.1f} s  {r['megapixels'] / r['cpu_s']:5.2f} MP/cpu-s  "
            f"client peak rss {r['client_peak_rss_mb']:4.0f} MB (grew {r['client_growth_mb']:4.0f}"
            f" MB while tiles ran)  largest worker {r['worker_peak_mb']:4.0f} MB  start-up "
            f"{r['startup_s']:.1f} s  client-side {r['client_side_s']:.1f} s  plants {r['n']}"
            f"  tiles {r['tiles']}"
        )
    if {"pool", "dask"} <= set(runs):
        p, d = runs["pool"], runs["dask"]
        print(
            f"dask / pool: time {d['seconds'] / p['seconds']:.2f}, cpu "
            f"{d['cpu_s'] / p['cpu_s']:.2f}, client rss "
            f"{d['client_peak_rss_mb'] / p['client_peak_rss_mb']:.2f}, worker peak "
            f"{d['worker_peak_mb'] / max(p['worker_peak_mb'], 1):.2f}"
        )
    first = np.load(folder / f"{next(iter(runs))}.npy")
    same = all(np.array_equal(first, np.load(folder / f"{m}.npy")) for m in runs)
    print(f"same points in every run: {'yes' if same else 'NO'} ({first.shape[0]} plants)")
    if "single" not in runs:
        return
    one = runs["single"]
    tile_rate = one["megapixels"] / one["tile_cpu_in_process_s"]
    client_cpu = one["client_side_cpu_s"]
    spp = time_plots()
    print(
        f"single process: tiles {one['tile_cpu_in_process_s']:.1f} cpu-s "
        f"({tile_rate:.2f} MP per cpu-s), client side (thresholds, merging) {client_cpu:.1f} "
        "cpu-s per mosaic"
    )
    print(f"per-plot statistics: {spp:.2f} cpu-s per plot (999 simulations, 80-150 plants)")
    print(
        f"projection: {MOSAICS} mosaics x {MOSAIC_GP:g} GP + {PLOTS} plots; efficiency "
        f"{EFFICIENCY:g}; ${VCPU_HOUR_USD}/vCPU-hour (assumed)"
    )
    for row in projection(tile_rate, client_cpu, spp):
        print(
            f"  {row['workers']:4d} workers: {row['hours']:7.2f} h  "
            f"{row['core_hours']:7.1f} worker core-h  ~${row['usd']:.2f}"
            + ("  (client-bound)" if row["client_bound"] else "")
        )
    if not a.keep:
        for f in folder.iterdir():
            f.unlink()
        folder.rmdir()


if __name__ == "__main__":
    main()
