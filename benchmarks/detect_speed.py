"""Speed, memory and accuracy of ``ecoscan detect`` against the plain whole-image approach.

A synthetic RGB orthomosaic (invented scene, crowns at known positions) is written as a tiled
GeoTIFF. Then, each in a fresh process so that peak memory is measured cleanly:

* ecoscan: :func:`ecoscan.detect.detect_raster` with tiles on all cores;
* plain: what a user would write by hand: read the whole raster, Excess Green on the whole
  image, :func:`skimage.feature.blob_log` over the same scales and the same response
  threshold, radius = √2 σ.

Printed: megapixels per second, peak resident memory, F1 against the known positions, and
the ratios. A second, 4× smaller raster shows whether ecoscan's peak memory stays flat as
the raster grows (it should depend on the tile size only).

Run: ``python benchmarks/detect_speed.py`` (a few minutes; ``--size 4096`` for a quick run).
Not run by the test suite.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

_TICKS = os.sysconf("SC_CLK_TCK") if hasattr(os, "sysconf") else 100

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

PIXEL = 0.05  # m
DIAM = (0.6, 2.0)  # m, crown diameters drawn and searched
UTM = "EPSG:32633"
X0, Y0 = 400000.0, 5600000.0


class DescendantPeaks:
    """Sample the peak resident memory (VmHWM) of every descendant process (Linux /proc).

    Worker processes started through a fork server are not our direct children, so
    ``RUSAGE_CHILDREN`` misses them; this walks the process tree a few times a second.
    """

    def __init__(self) -> None:
        self.peaks: dict[int, float] = {}
        self.cpu: dict[int, float] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)

    def _scan(self) -> None:
        me = os.getpid()
        parent: dict[int, int] = {}
        hwm: dict[int, float] = {}
        cpu: dict[int, float] = {}
        for d in Path("/proc").iterdir():
            if not d.name.isdigit():
                continue
            try:
                text = (d / "status").read_text()
            except OSError:
                continue
            fields = dict(line.split(":", 1) for line in text.splitlines() if ":" in line)
            parent[int(d.name)] = int(fields.get("PPid", "0").strip() or 0)
            if "VmHWM" in fields:
                hwm[int(d.name)] = float(fields["VmHWM"].split()[0]) / 1024
            try:
                stat = (d / "stat").read_text().rsplit(")", 1)[1].split()
                cpu[int(d.name)] = (int(stat[11]) + int(stat[12])) / _TICKS
            except (OSError, IndexError, ValueError):
                pass
        for pid, kb in hwm.items():
            p, seen = pid, 0
            while p and p != me and seen < 50:
                p, seen = parent.get(p, 0), seen + 1
            if p == me and pid != me:
                self.peaks[pid] = max(self.peaks.get(pid, 0.0), kb)
                self.cpu[pid] = max(self.cpu.get(pid, 0.0), cpu.get(pid, 0.0))

    def _loop(self) -> None:
        while not self._stop.is_set():
            self._scan()
            self._stop.wait(0.2)

    def __enter__(self) -> DescendantPeaks:
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()

    @property
    def largest_mb(self) -> float:
        return max(self.peaks.values(), default=0.0)

    @property
    def total_mb(self) -> float:
        return sum(self.peaks.values())

    @property
    def cpu_seconds(self) -> float:
        """CPU time of the descendants (a lower bound: the last 0.2 s may be missed)."""
        return sum(self.cpu.values())


def _peak_self_mb() -> float:
    """Peak RSS (MB) of this process (Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def make_scene(folder: Path, size: int, seed: int) -> tuple[Path, Path]:
    """Write the orthomosaic and its truth (pixel positions, .npy)."""
    from rasterio.transform import from_origin

    from ecoscan.synthetic import place_crowns, write_orthomosaic_geotiff

    rng = np.random.default_rng(seed)
    n = int(4000 * (size / 8192) ** 2)
    xy, d = place_crowns((size, size), n, (DIAM[0] / PIXEL, DIAM[1] / PIXEL), rng, min_gap=0.95)
    tif = folder / f"ortho_{size}.tif"
    truth = folder / f"truth_{size}.npy"
    write_orthomosaic_geotiff(
        tif, xy, d, (size, size), rng, from_origin(X0, Y0, PIXEL, PIXEL), UTM, shadows=True
    )
    np.save(truth, np.column_stack([xy, d]))
    return tif, truth


def _f1(det_xy_px: np.ndarray, truth_px: np.ndarray, tol_px: float) -> float:
    from ecoscan.stats.matching import match_points

    m = match_points(det_xy_px, truth_px[:, :2], tol_px)
    return 2 * m.n_matched / (det_xy_px.shape[0] + truth_px.shape[0])


def run_ecoscan(tif: Path, truth: Path, workers: int, tile: int) -> dict:
    """ecoscan detect on the raster; returns figures (run in its own process)."""
    from ecoscan.detect import DetectionSettings, detect_raster

    s = DetectionSettings(diameter_min_m=DIAM[0], diameter_max_m=DIAM[1], tile_size_px=tile)
    with DescendantPeaks() as kids:
        t0 = time.perf_counter()
        c0 = time.process_time()
        res = detect_raster(tif, s, workers=workers)
        dt = time.perf_counter() - t0
        cpu = time.process_time() - c0
    col = (res.points.x - X0) / PIXEL - 0.5
    row = (Y0 - res.points.y) / PIXEL - 0.5
    tr = np.load(truth)
    return {
        "seconds": dt,
        "megapixels": res.raster.megapixels,
        "n": res.n,
        "f1": _f1(np.column_stack([col, row]), tr, 0.25 / PIXEL),
        "peak_main_mb": _peak_self_mb(),
        "peak_worker_mb": kids.largest_mb,
        "peak_workers_total_mb": kids.total_mb,
        "cpu_seconds": cpu + kids.cpu_seconds,
        "min_response": res.thresholds["min_contrast"] * 2 / math.e,
    }


def run_plain(tif: Path, truth: Path, threshold: float, per_octave: int) -> dict:
    """The plain approach on the whole image (run in its own process)."""
    import rasterio
    from skimage.feature import blob_log

    from ecoscan.detect.blobs import blob_scales
    from ecoscan.detect.indices import excess_green

    sc = blob_scales(DIAM[0] / PIXEL / 2, DIAM[1] / PIXEL / 2, per_octave)
    inner = sc.sigmas[1:-1]
    t0 = time.perf_counter()
    c0 = time.process_time()
    with rasterio.open(tif) as src:
        rgb = src.read()
        mp = src.width * src.height / 1e6
    exg = excess_green(*rgb).astype(float)
    del rgb
    blobs = blob_log(
        exg,
        min_sigma=float(inner[0]),
        max_sigma=float(inner[-1]),
        num_sigma=inner.size,
        threshold=threshold,
    )
    dt = time.perf_counter() - t0
    cpu = time.process_time() - c0
    tr = np.load(truth)
    return {
        "cpu_seconds": cpu,
        "seconds": dt,
        "megapixels": mp,
        "n": int(blobs.shape[0]),
        "f1": _f1(blobs[:, [1, 0]], tr, 0.25 / PIXEL),
        "peak_main_mb": _peak_self_mb(),
        "peak_worker_mb": 0.0,
        "peak_workers_total_mb": 0.0,
    }


def _child(args: list[str]) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, *args], check=True, capture_output=True, text=True
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def _mem_available_mb() -> float:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable"):
                return float(line.split()[1]) / 1024
    except OSError:
        pass
    return math.inf


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=8192, help="raster side in pixels")
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    ap.add_argument("--tile", type=int, default=1024)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--folder", help="keep the rasters here (default: a temporary folder)")
    ap.add_argument("--skip-plain", action="store_true")
    ap.add_argument("--_run", help=argparse.SUPPRESS)
    ap.add_argument("--_tif", help=argparse.SUPPRESS)
    ap.add_argument("--_truth", help=argparse.SUPPRESS)
    ap.add_argument("--_thr", type=float, help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a._run == "ecoscan":
        print(json.dumps(run_ecoscan(Path(a._tif), Path(a._truth), a.workers, a.tile)))
        return
    if a._run == "plain":
        print(json.dumps(run_plain(Path(a._tif), Path(a._truth), a._thr, 3)))
        return

    tmp = tempfile.TemporaryDirectory() if not a.folder else None
    folder = Path(a.folder or tmp.name)
    folder.mkdir(parents=True, exist_ok=True)
    small = a.size // 2
    print(
        f"scene: {a.size}x{a.size} RGB at {PIXEL} m, crowns {DIAM[0]}-{DIAM[1]} m; "
        f"workers {a.workers}, tile {a.tile}; load average {os.getloadavg()[0]:.2f} on "
        f"{os.cpu_count()} cores (other work on a shared machine slows both runs)"
    )
    t0 = time.perf_counter()
    big_tif, big_truth = make_scene(folder, a.size, a.seed)
    small_tif, small_truth = make_scene(folder, small, a.seed + 1)
    print(f"rasters written in {time.perf_counter() - t0:.1f} s")
    common = ["--workers", str(a.workers), "--tile", str(a.tile)]
    eco = _child(["--_run", "ecoscan", "--_tif", str(big_tif), "--_truth", str(big_truth), *common])
    eco_s = _child(
        ["--_run", "ecoscan", "--_tif", str(small_tif), "--_truth", str(small_truth), *common]
    )
    rows = [("ecoscan", a.size, eco), ("ecoscan", small, eco_s)]
    plain = None
    if not a.skip_plain:
        px = a.size * a.size
        need_mb = (2 * 8 + 4) * 8 * px / 1e6  # float64 scale stack, its maximum filter, copies
        avail = _mem_available_mb()
        if need_mb > 0.6 * avail:
            print(
                f"plain approach needs about {need_mb:.0f} MB, only {avail:.0f} MB free: "
                f"running it on the {small}x{small} raster instead"
            )
            plain = _child(
                [
                    "--_run",
                    "plain",
                    "--_tif",
                    str(small_tif),
                    "--_truth",
                    str(small_truth),
                    "--_thr",
                    str(eco_s["min_response"]),
                ]
            )
            rows.append(("plain", small, plain))
            ref = eco_s
        else:
            plain = _child(
                [
                    "--_run",
                    "plain",
                    "--_tif",
                    str(big_tif),
                    "--_truth",
                    str(big_truth),
                    "--_thr",
                    str(eco["min_response"]),
                ]
            )
            rows.append(("plain", a.size, plain))
            ref = eco
    print()
    print(
        f"{'run':8} {'size':>6} {'MPx':>7} {'wall s':>8} {'MPx/s':>8} {'CPU s':>8} "
        f"{'MPx/CPU-s':>10} {'plants':>7} {'F1':>6} {'peak main MB':>13} {'peak worker MB':>15}"
    )
    for name, size, r in rows:
        print(
            f"{name:8} {size:>6} {r['megapixels']:7.1f} {r['seconds']:8.2f} "
            f"{r['megapixels'] / r['seconds']:8.2f} {r['cpu_seconds']:8.2f} "
            f"{r['megapixels'] / r['cpu_seconds']:10.2f} {r['n']:7d} {r['f1']:6.3f} "
            f"{r['peak_main_mb']:13.0f} {r['peak_worker_mb']:15.0f}"
        )
    print()
    tot = eco["peak_main_mb"] + eco["peak_workers_total_mb"]
    tot_s = eco_s["peak_main_mb"] + eco_s["peak_workers_total_mb"]
    print(
        f"ecoscan peak memory, main + all worker processes (sum of peaks): {tot:.0f} MB at "
        f"{a.size}^2, {tot_s:.0f} MB at {small}^2 (ratio for 4x the area: {tot / tot_s:.2f})"
    )
    if plain is not None:
        speed = (ref["megapixels"] / ref["seconds"]) / (plain["megapixels"] / plain["seconds"])
        per_cpu = (ref["megapixels"] / ref["cpu_seconds"]) / (
            plain["megapixels"] / plain["cpu_seconds"]
        )
        print(
            f"throughput ecoscan / plain: {speed:.1f}x wall-clock (goal >= 10x), "
            f"{per_cpu:.1f}x per CPU-second; "
            f"F1 ecoscan {ref['f1']:.3f} vs plain {plain['f1']:.3f}; "
            f"peak memory plain {plain['peak_main_mb']:.0f} MB"
        )
    print(f"load average at the end: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    if tmp is not None:
        tmp.cleanup()


if __name__ == "__main__":
    main()
