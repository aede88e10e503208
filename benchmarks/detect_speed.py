"""Speed, memory and accuracy of ``ecoscan detect`` against the plain whole-image approach.

The scene is the suite's dry-shrub style (:func:`ecoscan.synthetic.make_scene`, green,
dry and grey shrubs with cast shadows on mottled soil; invented, with known plants),
6144 × 6144 pixels by default, written as a tiled GeoTIFF strip by strip. Its seed (5 by
default) is one the detector's defaults were never tuned on (they were tuned on
``benchmarks/tuning_scenes.py`` only). Then, each in a fresh process so that peak memory is
measured cleanly:

* ecoscan: :func:`ecoscan.detect.detect_raster` with only ``--diameter`` given (layer and
  thresholds chosen from the image), tiles on ``--workers`` processes;
* plain: what a user would write by hand: read the whole raster, Excess Green on the whole
  image, :func:`skimage.feature.blob_log` over the same scales, radius = √2 σ, with its
  threshold tuned in hindsight: the best F1 of a sweep against the truth on a 2048 × 2048
  corner of the scene (a sweep on the whole image would take an hour), then timed once on
  the whole image.

Printed: megapixels per second, CPU seconds, peak resident memory (main and workers), F1
against the known positions (one-to-one within half the smallest diameter), and the
ratios. A second, 4× smaller scene shows whether ecoscan's peak memory stays flat as the
raster grows (it should depend on the tile size only).

Run: ``nice python benchmarks/detect_speed.py`` (about 10 min on a shared 2-core machine;
``--size 3072`` for a quick run). Not run by the test suite.
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

STYLE = "dry-shrubs"


def _status(pid: int) -> dict[str, str] | None:
    try:
        text = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    return dict(line.split(":", 1) for line in text.splitlines() if ":" in line)


def _pss_mb(pid: int) -> float:
    """Proportional set size (MB): pages shared by n processes count 1/n in each, so the
    sum over processes is the memory they use together (Linux smaps_rollup)."""
    try:
        for line in Path(f"/proc/{pid}/smaps_rollup").read_text().splitlines():
            if line.startswith("Pss:"):
                return float(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


class DescendantPeaks:
    """Sample the peak resident memory (VmHWM) of every descendant process (Linux /proc).

    Worker processes started through a fork server are not our direct children, so
    ``RUSAGE_CHILDREN`` misses them; this walks the process tree a few times a second.
    With ``separate=True`` the sampling runs in a process of its own (its CPU is not
    counted as ours, and this process keeps a single thread, so detection may fork its
    workers), which also records the peak of the summed proportional set size (PSS) of
    this process and its descendants: forked workers share their parent's pages, which
    every process's VmHWM counts in full.
    """

    def __init__(self, separate: bool = False, root: int | None = None) -> None:
        self.root = root or os.getpid()
        self.separate = separate
        self.peaks: dict[int, float] = {}
        self.cpu: dict[int, float] = {}
        self.pss_peak_mb = 0.0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self._proc: subprocess.Popen | None = None

    def scan(self, pss: bool = False) -> None:
        me = os.getpid()
        parent: dict[int, int] = {}
        hwm: dict[int, float] = {}
        cpu: dict[int, float] = {}
        for d in Path("/proc").iterdir():
            if not d.name.isdigit() or int(d.name) == me:
                continue
            fields = _status(int(d.name))
            if fields is None:
                continue
            parent[int(d.name)] = int(fields.get("PPid", "0").strip() or 0)
            if "VmHWM" in fields:
                hwm[int(d.name)] = float(fields["VmHWM"].split()[0]) / 1024
            try:
                stat = (d / "stat").read_text().rsplit(")", 1)[1].split()
                cpu[int(d.name)] = (int(stat[11]) + int(stat[12])) / _TICKS
            except (OSError, IndexError, ValueError):
                pass
        tree = []
        for pid in hwm:
            p, seen = pid, 0
            while p and p != self.root and seen < 50:
                p, seen = parent.get(p, 0), seen + 1
            if p == self.root and pid != self.root:
                tree.append(pid)
                self.peaks[pid] = max(self.peaks.get(pid, 0.0), hwm[pid])
                self.cpu[pid] = max(self.cpu.get(pid, 0.0), cpu.get(pid, 0.0))
        if pss:
            total = sum(_pss_mb(p) for p in [self.root, *tree])
            self.pss_peak_mb = max(self.pss_peak_mb, total)

    def _loop(self) -> None:
        while not self._stop.is_set():
            self.scan()
            self._stop.wait(0.2)

    def __enter__(self) -> DescendantPeaks:
        if not self.separate:
            self._thread.start()
            return self
        self._proc = subprocess.Popen(
            [sys.executable, __file__, "--_watch", str(self.root)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
        )
        assert self._proc.stdout is not None
        self._proc.stdout.readline()  # "ready": sampling has begun
        return self

    def __exit__(self, *exc) -> None:
        if self._proc is None:
            self._stop.set()
            self._thread.join()
            return
        out, _ = self._proc.communicate("")
        got = json.loads(out.strip().splitlines()[-1])
        self.peaks = {int(k): v for k, v in got["peaks"].items()}
        self.cpu = {int(k): v for k, v in got["cpu"].items()}
        self.pss_peak_mb = got["pss_peak_mb"]

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


def watch(root: int) -> None:
    """The separate sampling process of :class:`DescendantPeaks`: samples ``root``'s
    process tree until its standard input closes, then prints what it saw as JSON."""
    import select

    kids = DescendantPeaks(root=root)
    kids.scan(pss=True)
    print("ready", flush=True)
    while not select.select([sys.stdin], [], [], 0.2)[0]:
        kids.scan(pss=True)
    kids.scan(pss=True)
    print(json.dumps({"peaks": kids.peaks, "cpu": kids.cpu, "pss_peak_mb": kids.pss_peak_mb}))


def _peak_self_mb() -> float:
    """Peak RSS (MB) of this process (Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def make_scene(folder: Path, size: int, seed: int) -> tuple[Path, Path, dict]:
    """Write the suite scene and its truth (map metres, .npy); returns paths and facts."""
    from ecoscan.synthetic import make_scene as suite_scene
    from ecoscan.synthetic import write_scene

    facts_path = folder / f"facts_{size}.json"
    truth = folder / f"truth_{size}.npy"
    tif = folder / f"{STYLE}_{size}_s{seed}.tif"
    if facts_path.exists() and truth.exists() and tif.exists():  # kept from a former run
        facts = json.loads(facts_path.read_text())
        if facts.get("seed") == seed:
            return tif, truth, facts
    sc = suite_scene(STYLE, size, seed)
    paths = write_scene(sc, folder)
    np.save(truth, np.column_stack([sc.x_m, sc.y_m]))
    t = sc.transform
    facts = {
        "diameter": list(sc.diameter_range_m),
        "pixel": sc.pixel_size_m,
        "x0": t.c,
        "y0": t.f,
        "n": sc.n,
        "bands": sc.bands_option,
        "seed": seed,
    }
    facts_path.write_text(json.dumps(facts))
    return paths.raster, truth, facts


def _f1(det_xy_m: np.ndarray, truth_m: np.ndarray, tol_m: float) -> float:
    from ecoscan.stats.matching import match_points

    m = match_points(det_xy_m, truth_m[:, :2], tol_m)
    return 2 * m.n_matched / (det_xy_m.shape[0] + truth_m.shape[0])


class PhaseClock:
    """Wall and CPU seconds (this process) spent inside some functions, by label.

    Wraps module attributes for the duration of a ``with`` block; used to split
    ecoscan's run into its phases (reading the sample windows, choosing the layer).
    """

    def __init__(self, targets: dict[str, tuple[object, str]]) -> None:
        self.targets = targets
        self.wall: dict[str, float] = dict.fromkeys(targets, 0.0)
        self.cpu: dict[str, float] = dict.fromkeys(targets, 0.0)
        self._saved: list[tuple[object, str, object]] = []

    def __enter__(self) -> PhaseClock:
        for label, (module, name) in self.targets.items():
            func = getattr(module, name, None)
            if func is None:  # an older version without this step (a before/after run)
                continue

            def timed(*args, __f=func, __label=label, **kwargs):
                t, c = time.perf_counter(), time.process_time()
                try:
                    return __f(*args, **kwargs)
                finally:
                    self.wall[__label] += time.perf_counter() - t
                    self.cpu[__label] += time.process_time() - c

            self._saved.append((module, name, func))
            setattr(module, name, timed)
        return self

    def __exit__(self, *exc) -> None:
        for module, name, func in self._saved:
            setattr(module, name, func)


def run_ecoscan(tif: Path, truth: Path, facts: dict, workers: int, tile: int) -> dict:
    """ecoscan detect on the raster; returns figures (run in its own process)."""
    import ecoscan.detect as det
    import ecoscan.detect.autotune as auto
    import ecoscan.detect.detectors.blob as blob
    import ecoscan.detect.detectors.blob_auto as blob_auto
    from ecoscan.detect import DetectionSettings, detect_raster

    try:
        from ecoscan.detect.tiling import fork_is_safe
    except ImportError:  # a version before the workers were forked (a before/after run)

        def fork_is_safe() -> bool:
            return False

    lo, hi = facts["diameter"]
    s = DetectionSettings(
        diameter_min_m=lo, diameter_max_m=hi, tile_size_px=tile, bands=facts["bands"]
    )
    phases = PhaseClock(
        {
            "sample windows read": (blob_auto, "_sample_windows"),
            "layer choice begun": (auto, "begin_layer_choice"),
            "closed-canopy check": (blob_auto, "_closed_canopy"),
            "layer choice (the rest)": (auto, "choose_layer"),
            "  layers scored in main": (auto, "_score_layer"),
            "second layer scored": (blob_auto, "_second_layer"),
            "global parameters (all)": (blob, "_imagery_plan"),
            "tiles (run_plan)": (det, "run_plan"),
            "points joined (finish)": (det, "_collect"),
        }
    )
    with DescendantPeaks(separate=True) as kids, phases:
        forked = fork_is_safe() and workers > 1  # the early workers will be forked
        load0 = os.getloadavg()[0]
        t0 = time.perf_counter()
        c0 = time.process_time()
        k0 = _children_cpu()
        res = detect_raster(tif, s, workers=workers)
        dt = time.perf_counter() - t0
        cpu = time.process_time() - c0
        reaped = _children_cpu() - k0  # workers forked from this process, ended and reaped
    tr = np.load(truth)
    cpu_kids = max(kids.cpu_seconds, reaped)
    return {
        "phases": {k: [phases.wall[k], phases.cpu[k]] for k in phases.targets},
        "cpu_main": cpu,
        "cpu_workers": cpu_kids,
        "seconds": dt,
        "megapixels": res.raster.megapixels,
        "megapixels_read": res.megapixels_read,
        "n": res.n,
        "f1": _f1(res.points.xy, tr, 0.5 * lo),
        "peak_main_mb": _peak_self_mb(),
        "peak_worker_mb": kids.largest_mb,
        "peak_workers_total_mb": kids.total_mb,
        "peak_pss_total_mb": kids.pss_peak_mb,
        "cpu_seconds": cpu + cpu_kids,
        "layer": res.thresholds.get("layer", res.index),
        "digest": _digest(res),
        "workers_forked": forked,
        "load_start": load0,
        "load": os.getloadavg()[0],
    }


def _digest(res) -> str:
    """SHA-256 of the points, metadata and notes (the same digest as
    ``benchmarks/detect_suite_identity.py``): equal digests, equal detections."""
    import hashlib

    h = hashlib.sha256()
    h.update(np.ascontiguousarray(res.points.xy, dtype=np.float64).tobytes())
    h.update(json.dumps(res.thresholds, sort_keys=True, default=str).encode())
    h.update(json.dumps([str(n) for n in res.notes]).encode())
    return h.hexdigest()


def _children_cpu() -> float:
    t = os.times()
    return t.children_user + t.children_system


def _plain_blobs(exg: np.ndarray, facts: dict, threshold: float) -> np.ndarray:
    from skimage.feature import blob_log

    from ecoscan.detect.blobs import blob_scales

    lo, hi = facts["diameter"]
    ps = facts["pixel"]
    inner = blob_scales(lo / ps / 2, hi / ps / 2, 3).sigmas[1:-1]
    return blob_log(
        exg,
        min_sigma=float(inner[0]),
        max_sigma=float(inner[-1]),
        num_sigma=inner.size,
        threshold=threshold,
    )


def _pixel_to_map(blobs: np.ndarray, facts: dict, r0: int = 0, c0: int = 0) -> np.ndarray:
    ps = facts["pixel"]
    x = facts["x0"] + (blobs[:, 1] + c0 + 0.5) * ps
    y = facts["y0"] - (blobs[:, 0] + r0 + 0.5) * ps
    return np.column_stack([x, y])


def tune_plain(tif: Path, truth: Path, facts: dict, crop: int) -> dict:
    """Best blob_log threshold by F1 on a corner crop (hindsight: uses the truth)."""
    import rasterio
    from rasterio.windows import Window

    from ecoscan.detect.indices import excess_green

    with rasterio.open(tif) as src:
        side = min(crop, src.width, src.height)
        rgb = src.read([1, 2, 3], window=Window(0, 0, side, side))
    exg = excess_green(*rgb).astype(float)
    tr = np.load(truth)
    ps = facts["pixel"]
    x1, y1 = facts["x0"] + side * ps, facts["y0"] - side * ps
    inside = (tr[:, 0] < x1) & (tr[:, 1] > y1)
    lo = facts["diameter"][0]
    best = (-1.0, 0.0)
    grid = list(np.geomspace(0.005, 0.2, 10))
    for th in grid:
        f1 = _f1(_pixel_to_map(_plain_blobs(exg, facts, th), facts), tr[inside], 0.5 * lo)
        best = max(best, (f1, th))
    for th in np.linspace(best[1] * 0.7, best[1] * 1.4, 6):
        f1 = _f1(_pixel_to_map(_plain_blobs(exg, facts, th), facts), tr[inside], 0.5 * lo)
        best = max(best, (f1, float(th)))
    return {"threshold": best[1], "f1_crop": best[0], "crop": side}


def run_plain(tif: Path, truth: Path, facts: dict, threshold: float) -> dict:
    """The plain approach on the whole image (run in its own process)."""
    import rasterio

    from ecoscan.detect.indices import excess_green

    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    c0 = time.process_time()
    with rasterio.open(tif) as src:
        rgb = src.read([1, 2, 3])
        mp = src.width * src.height / 1e6
    exg = excess_green(*rgb).astype(float)
    del rgb
    blobs = _plain_blobs(exg, facts, threshold)
    dt = time.perf_counter() - t0
    cpu = time.process_time() - c0
    tr = np.load(truth)
    return {
        "threads": int((_status(os.getpid()) or {}).get("Threads", "0").strip() or 0),
        "load_start": load0,
        "load": os.getloadavg()[0],
        "cpu_seconds": cpu,
        "seconds": dt,
        "megapixels": mp,
        "n": int(blobs.shape[0]),
        "f1": _f1(_pixel_to_map(blobs, facts), tr, 0.5 * facts["diameter"][0]),
        "peak_main_mb": _peak_self_mb(),
        "peak_worker_mb": 0.0,
        "peak_workers_total_mb": 0.0,
        "layer": "exg",
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
    ap.add_argument("--size", type=int, default=6144, help="raster side in pixels")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--tile", type=int, default=1024)
    ap.add_argument("--seed", type=int, default=5)
    ap.add_argument("--crop", type=int, default=2048, help="side of the plain tuning crop")
    ap.add_argument(
        "--folder",
        help="keep the rasters here, and reuse those a former run left (default: a temporary "
        "folder)",
    )
    ap.add_argument("--skip-plain", action="store_true")
    ap.add_argument(
        "--repeat",
        type=int,
        default=1,
        help="run ecoscan on the large raster this many times (fresh processes); the "
        "ratio uses the median wall-clock and CPU time",
    )
    ap.add_argument("--_run", help=argparse.SUPPRESS)
    ap.add_argument("--_watch", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--_tif", help=argparse.SUPPRESS)
    ap.add_argument("--_truth", help=argparse.SUPPRESS)
    ap.add_argument("--_facts", help=argparse.SUPPRESS)
    ap.add_argument("--_thr", type=float, help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a._watch:
        watch(a._watch)
        return
    if a._run:
        facts = json.loads(Path(a._facts).read_text())
        tif, truth = Path(a._tif), Path(a._truth)
        if a._run == "ecoscan":
            out = run_ecoscan(tif, truth, facts, a.workers, a.tile)
        elif a._run == "tune":
            out = tune_plain(tif, truth, facts, a.crop)
        else:
            out = run_plain(tif, truth, facts, a._thr)
        print(json.dumps(out))
        return

    tmp = tempfile.TemporaryDirectory() if not a.folder else None
    folder = Path(a.folder or tmp.name)
    folder.mkdir(parents=True, exist_ok=True)
    small = a.size // 2
    print(
        f"scene: suite style {STYLE}, {a.size}x{a.size}, seed {a.seed}; workers {a.workers}, "
        f"tile {a.tile}; load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores "
        "(other work on a shared machine slows both runs)"
    )
    t0 = time.perf_counter()
    big = make_scene(folder, a.size, a.seed)
    sml = make_scene(folder, small, a.seed + 1)
    print(f"rasters ready in {time.perf_counter() - t0:.1f} s; {big[2]['n']} plants")

    def args_for(run, scene):
        tif, truth, _f = scene
        size = a.size if scene is big else small
        return [
            "--_run", run, "--_tif", str(tif), "--_truth", str(truth),
            "--_facts", str(folder / f"facts_{size}.json"),
            "--workers", str(a.workers), "--tile", str(a.tile), "--crop", str(a.crop),
        ]  # fmt: skip

    # with --repeat, half the ecoscan runs come before the plain run and half after it, so
    # that a load that changes meanwhile affects both sides of the ratio alike
    before = (max(1, a.repeat) + 1) // 2 if not a.skip_plain else max(1, a.repeat)
    runs = [_child(args_for("ecoscan", big)) for _ in range(before)]
    eco_s = _child(args_for("ecoscan", sml))
    rows = [("ecoscan", a.size, runs[0]), ("ecoscan", small, eco_s)]
    plain = None
    ref = None
    if not a.skip_plain:
        tuned = _child(args_for("tune", big))
        print(
            f"plain blob_log threshold tuned in hindsight on a {tuned['crop']}^2 corner: "
            f"{tuned['threshold']:.4g} (F1 there {tuned['f1_crop']:.3f})"
        )
        px = a.size * a.size
        need_mb = (2 * 8 + 4) * 8 * px / 1e6  # float64 scale stack, its maximum filter, copies
        avail = _mem_available_mb()
        use, size_used = big, a.size
        if need_mb > 0.6 * avail:
            print(
                f"plain approach needs about {need_mb:.0f} MB, only {avail:.0f} MB free: "
                f"running it on the {small}x{small} raster instead"
            )
            use, size_used, ref = sml, small, eco_s
        plain = _child([*args_for("plain", use), "--_thr", str(tuned["threshold"])])
        print(f"plain run: {plain['seconds']:.2f} s wall, load average {os.getloadavg()[0]:.1f}")
        runs += [_child(args_for("ecoscan", big)) for _ in range(max(1, a.repeat) - before)]
    eco = sorted(runs, key=lambda r: r["seconds"])[(len(runs) - 1) // 2]  # the median run
    rows[0] = ("ecoscan", a.size, eco)
    ref = eco_s if ref is eco_s else eco  # the run the plain one is compared with
    if len(runs) > 1:
        print(
            "ecoscan runs at full size, in order (wall s / CPU s / load average at the end): "
            + ", ".join(
                f"{r['seconds']:.2f} / {r['cpu_seconds']:.2f} / {r['load']:.1f}" for r in runs
            )
        )
    if plain is not None:
        rows.append(("plain", size_used, plain))
    print()
    print(
        f"{'run':8} {'size':>6} {'MPx':>7} {'wall s':>8} {'MPx/s':>8} {'CPU s':>8} "
        f"{'MPx/CPU-s':>10} {'plants':>7} {'F1':>6} {'peak main MB':>13} "
        f"{'peak worker MB':>15} layer"
    )
    for name, size, r in rows:
        print(
            f"{name:8} {size:>6} {r['megapixels']:7.1f} {r['seconds']:8.2f} "
            f"{r['megapixels'] / r['seconds']:8.2f} {r['cpu_seconds']:8.2f} "
            f"{r['megapixels'] / r['cpu_seconds']:10.2f} {r['n']:7d} {r['f1']:6.3f} "
            f"{r['peak_main_mb']:13.0f} {r['peak_worker_mb']:15.0f} {r['layer']}"
        )
    print()
    tot = eco["peak_main_mb"] + eco["peak_workers_total_mb"]
    tot_s = eco_s["peak_main_mb"] + eco_s["peak_workers_total_mb"]
    print(
        f"ecoscan peak memory, main + all worker processes (sum of peaks): {tot:.0f} MB at "
        f"{a.size}^2, {tot_s:.0f} MB at {small}^2 (ratio for 4x the area: {tot / tot_s:.2f}; "
        "goal <= 1024 MB)"
    )
    print(
        f"ecoscan peak of the summed proportional set size (pages shared by forked workers "
        f"counted once): {eco['peak_pss_total_mb']:.0f} MB at {a.size}^2, "
        f"{eco_s['peak_pss_total_mb']:.0f} MB at {small}^2; workers "
        f"{'forked from the main process' if eco['workers_forked'] else 'from a fork server'}"
    )
    if plain is not None:
        speed = (ref["megapixels"] / ref["seconds"]) / (plain["megapixels"] / plain["seconds"])
        per_cpu = (ref["megapixels"] / ref["cpu_seconds"]) / (
            plain["megapixels"] / plain["cpu_seconds"]
        )
        print(
            f"throughput ecoscan / plain: {speed:.1f}x wall-clock (goal >= 20x), "
            f"{per_cpu:.1f}x per CPU-second; "
            f"F1 ecoscan {ref['f1']:.3f} vs plain {plain['f1']:.3f} (goal: not lower); "
            f"peak memory plain {plain['peak_main_mb']:.0f} MB"
        )
        # the two runs under the same conditions? (one process, its threads, the load)
        nan = float("nan")
        print(
            f"conditions: plain {plain['seconds']:.2f} s wall, {plain['cpu_seconds']:.2f} CPU-s "
            f"in one process with {plain.get('threads', 0)} threads at the end, load average "
            f"{plain.get('load_start', nan):.2f} -> {plain.get('load', nan):.2f}; "
            f"ecoscan {ref['seconds']:.2f} s wall, {ref['cpu_seconds']:.2f} CPU-s "
            f"({ref['cpu_main']:.2f} main + {ref['cpu_workers']:.2f} in {a.workers} workers), "
            f"load average {ref.get('load_start', nan):.2f} -> {ref['load']:.2f}"
        )
    print()
    print(
        f"where ecoscan's time goes at {a.size}^2 (main process; the workers score the "
        "candidate layers the main process does not take, then run the tiles):"
    )
    print(f"{'phase':28} {'wall s':>8} {'CPU s (main)':>13}")
    for name, (wall, cpu) in eco["phases"].items():
        print(f"{name:28} {wall:8.2f} {cpu:13.2f}")
    print(
        f"{'whole run':28} {eco['seconds']:8.2f} {eco['cpu_main']:13.2f}   "
        f"+ {eco['cpu_workers']:.2f} CPU s in the fork server and workers"
    )
    if "megapixels_read" in eco:  # tile windows (overlaps included) over the raster
        print(
            f"tiles read {eco['megapixels_read']:.1f} MPx of the {eco['megapixels']:.1f} MPx "
            f"raster ({eco['megapixels_read'] / eco['megapixels']:.2f}x)"
        )
    digests = sorted({r.get("digest", "?") for r in runs})
    print(f"SHA-256 of points, metadata and notes at {a.size}^2: {', '.join(digests)}")
    print(f"load average at the end: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    if tmp is not None:
        tmp.cleanup()


if __name__ == "__main__":
    main()
