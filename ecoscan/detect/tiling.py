"""Tile plans, the seam rule and a local executor.

A plan is a list of :class:`Tile`: a *core* rectangle (the tiles' cores cover the raster
without overlap) and a *read window* (the core grown by the overlap, clipped to the raster).
A detection belongs to the tile whose core holds its centre, so seams neither lose nor
duplicate plants, provided the overlap covers the detector's reach.

The plan is independent of the executor: :func:`run_plan` takes a picklable function and
a list of jobs and returns their results in plan order, locally in-process (``workers=1``)
or on local processes; a distributed engine can run the same jobs.
"""

from __future__ import annotations

import contextlib
import contextvars
import math
import multiprocessing as mp
import os
import threading
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np

from ecoscan.progress import progress

__all__ = [
    "EarlyPool",
    "Tile",
    "WorkShare",
    "fork_is_safe",
    "group_tiles",
    "in_core",
    "in_pool_worker",
    "lend_pool",
    "lent_pool",
    "plan_tiles",
    "run_plan",
    "share_work",
    "start_pool",
]

J = TypeVar("J")
R = TypeVar("R")


@dataclass(frozen=True)
class Tile:
    """One tile of a plan, in pixels (end exclusive).

    Attributes
    ----------
    index : int
        Position in the plan (row-major).
    core : (col0, row0, col1, row1)
        The pixels this tile owns.
    window : (col0, row0, col1, row1)
        The pixels it reads (core plus overlap, clipped to the raster).
    """

    index: int
    core: tuple[int, int, int, int]
    window: tuple[int, int, int, int]

    @property
    def pixels(self) -> int:
        """Pixels read."""
        c0, r0, c1, r1 = self.window
        return (c1 - c0) * (r1 - r0)


def _round_up(v: int, m: int) -> int:
    return int(math.ceil(v / m) * m)


def plan_tiles(
    width: int,
    height: int,
    tile_size: int,
    overlap: int,
    *,
    align: int = 1,
) -> list[Tile]:
    """Cut a raster into tiles with overlapping read windows.

    Parameters
    ----------
    width, height : int
        Raster size in pixels.
    tile_size : int
        Core size in pixels (rounded up to a multiple of ``align``).
    overlap : int
        Pixels added on every side of the core to form the read window (rounded up to a
        multiple of ``align``).
    align : int
        Cores and windows start at multiples of this (a pyramid's ``2 ** levels``).

    Returns
    -------
    list of Tile
    """
    size = _round_up(max(tile_size, align), align)
    ov = _round_up(max(overlap, 0), align)
    tiles = []
    for r0 in range(0, height, size):
        for c0 in range(0, width, size):
            c1, r1 = min(width, c0 + size), min(height, r0 + size)
            win = (max(0, c0 - ov), max(0, r0 - ov), min(width, c1 + ov), min(height, r1 + ov))
            tiles.append(Tile(len(tiles), (c0, r0, c1, r1), win))
    return tiles


#: Largest read window (pixels) of a group of tiles read and run together
#: (:func:`group_tiles`): two 1024-pixel tiles with an overlap of 160 pixels on every
#: side (2368 x 1344 = 3.2 million pixels) fit, three do not.
GROUP_WINDOW_PX = 3_500_000

#: Most tiles in one group.
GROUP_MOST = 4


def group_tiles(
    tiles: Sequence[Tile], max_pixels: int = GROUP_WINDOW_PX, most: int = GROUP_MOST
) -> list[tuple[Tile, ...]]:
    """Runs of neighbouring tiles in a row of the plan, each read as one window.

    Neighbouring read windows share their overlaps: two tiles read as one window read
    those pixels once, and their detector runs once over them. A group is a run of tiles
    of ``tiles`` (in plan order) whose cores touch side by side in the same row of the
    plan, as long as the window that holds all of theirs has at most ``max_pixels``
    pixels and there are at most ``most`` of them; a tile with no such neighbour is a
    group alone. :func:`group_window` gives the group's window and core.

    The groups keep the plan's order, so their tiles, one after the other, are ``tiles``.
    Only for a detector whose plants in a core do not depend on how far the window
    reaches beyond the overlap (:meth:`ecoscan.detect.detectors.base.Detector.reads_together`).

    Examples
    --------
    >>> plan = plan_tiles(3000, 2000, 1000, 100)  # two rows of three tiles
    >>> [[t.index for t in g] for g in group_tiles(plan, max_pixels=2_500_000)]
    [[0, 1], [2], [3, 4], [5]]
    >>> [[t.index for t in g] for g in group_tiles(plan, max_pixels=1_000_000)]
    [[0], [1], [2], [3], [4], [5]]
    """
    groups: list[list[Tile]] = []
    for t in tiles:
        last = groups[-1] if groups else None
        if last is not None and len(last) < most:
            prev = last[-1]
            side_by_side = (
                prev.core[2] == t.core[0]
                and prev.core[1] == t.core[1]
                and prev.core[3] == t.core[3]
            )
            if side_by_side and group_window((*last, t)).pixels <= max_pixels:
                last.append(t)
                continue
        groups.append([t])
    return [tuple(g) for g in groups]


def group_window(group: Sequence[Tile]) -> Tile:
    """One tile whose core and read window hold those of every tile of ``group`` (its
    index is the first tile's). Windows of a plan start at multiples of its alignment, so
    the group's does too.

    Examples
    --------
    >>> a, b = plan_tiles(2000, 1000, 1000, 100)
    >>> group_window([a, b])
    Tile(index=0, core=(0, 0, 2000, 1000), window=(0, 0, 2000, 1000))
    """
    cores = np.array([t.core for t in group]).reshape(-1, 4)
    wins = np.array([t.window for t in group]).reshape(-1, 4)
    core = (*cores[:, :2].min(axis=0).tolist(), *cores[:, 2:].max(axis=0).tolist())
    window = (*wins[:, :2].min(axis=0).tolist(), *wins[:, 2:].max(axis=0).tolist())
    return Tile(group[0].index, tuple(core), tuple(window))


def in_core(tile: Tile, col: np.ndarray, row: np.ndarray) -> np.ndarray:
    """Seam rule: True for positions (raster pixel frame) whose centre lies in the core.

    Pixel ``i`` covers [i − 0.5, i + 0.5); a centre exactly on a core edge goes to the tile
    on its right / below, so every position has exactly one owner.
    """
    c0, r0, c1, r1 = tile.core
    return (col >= c0 - 0.5) & (col < c1 - 0.5) & (row >= r0 - 0.5) & (row < r1 - 0.5)


#: Modules the fork server imports once, so that every worker forked from it starts with
#: them loaded (no dataset is open in the server, so no GDAL state is copied): the tile
#: detector and the layer scoring (:func:`ecoscan.detect.autotune.choose_layer`).
PRELOAD = ["ecoscan.detect.engine", "ecoscan.detect.autotune", "ecoscan.lifecycle"]


def _context(preload: bool = False):
    # GDAL state does not survive fork well; start workers fresh (from a fork server that
    # has only imported the modules, or spawned). Preloading applies only if this call
    # starts the fork server. (:class:`EarlyPool` forks when that is safe: see
    # :func:`fork_is_safe`.)
    methods = mp.get_all_start_methods()
    if "forkserver" in methods:
        ctx = mp.get_context("forkserver")
        if preload:
            ctx.set_forkserver_preload(PRELOAD)
        return ctx
    return mp.get_context("spawn")


def fork_is_safe() -> bool:
    """Whether worker processes may be forked from this process now.

    A forked worker starts at once with every module of its parent loaded (a fork server
    first imports the detector, about a second of CPU), but it inherits the parent's
    locks as they were: a lock held by another thread at that moment (inside GDAL, say)
    would never be released in the child. So fork only where it exists and this thread is
    the only one, and GDAL was not asked for threads of its own (``GDAL_NUM_THREADS``).
    No dataset is open in ecoscan's process between reads (each read opens and closes
    its own), so none is shared with the workers.

    Examples
    --------
    >>> isinstance(fork_is_safe(), bool)
    True
    """
    return (
        "fork" in mp.get_all_start_methods()
        and threading.active_count() == 1
        and not os.environ.get("GDAL_NUM_THREADS")
    )


#: True in a worker process of the pools started here (they end with the run).
_POOL_WORKER = False


def in_pool_worker() -> bool:
    """Whether this process is a worker of a pool started here, which ends with the run
    (:func:`ecoscan.detect.engine.run_tile` then keeps the raster open between tiles).

    Examples
    --------
    >>> in_pool_worker()
    False
    """
    return _POOL_WORKER


def _pool_worker_init(parent_pid: int, forked: bool = False) -> None:
    """Set up a worker of these pools: :func:`ecoscan.lifecycle.worker_init` (ignore Ctrl-C,
    die with the parent), mark it (:func:`in_pool_worker`), and let a forked worker, which
    inherited its parent's signal handlers, end on SIGTERM as a fresh process would."""
    import signal

    from ecoscan.lifecycle import worker_init

    global _POOL_WORKER
    if forked:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
    worker_init(parent_pid)
    _POOL_WORKER = True


def _same_package_in_fresh_python() -> bool:
    """Whether a fresh interpreter imports this very ``ecoscan`` package.

    The fork server imports its preloaded modules before it learns the caller's
    ``sys.path`` (Python 3.11), so a caller that put another copy of ecoscan first on its
    path would get workers running the installed one; preloading is safe only when both
    are the same files. Costs one interpreter start (in the background thread).
    """
    import subprocess
    import sys
    from pathlib import Path

    import ecoscan

    code = "import importlib.util as u; print(u.find_spec('ecoscan').origin)"
    try:
        out = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, timeout=30
        )
    except (OSError, subprocess.SubprocessError):
        return False
    found = out.stdout.strip()
    return bool(found) and Path(found).resolve() == Path(ecoscan.__file__).resolve()


def _ready() -> None:
    """A job that does nothing: makes the pool start a worker."""


def start_pool(workers: int, preload: bool = False, fork: bool = False) -> ProcessPoolExecutor:
    """Start ``workers`` local worker processes now, for :func:`run_plan` later.

    Starting them early lets the workers come up while the caller does other work (the
    global layer choice); :func:`run_plan` given the pool uses it and shuts it down. Stop
    it with :func:`ecoscan.lifecycle.stop_pool` if it is never used. ``preload``: the fork
    server (if this starts it) imports the detector once for all workers (:data:`PRELOAD`).
    ``fork``: fork the workers from this process instead (only when :func:`fork_is_safe`).

    Examples
    --------
    >>> from ecoscan.lifecycle import stop_pool
    >>> pool = start_pool(1)
    >>> stop_pool(pool)
    """
    from ecoscan.lifecycle import deferred_signals, stop_pool

    ex = ProcessPoolExecutor(
        max_workers=workers,
        mp_context=mp.get_context("fork") if fork else _context(preload),
        initializer=_pool_worker_init,
        initargs=(os.getpid(), fork),
    )
    try:
        with deferred_signals():  # workers start on submit; never leave one half-started
            for _ in range(workers):
                ex.submit(_ready)
    except BaseException:
        stop_pool(ex)
        raise
    return ex


class EarlyPool:
    """Workers started while the caller works, for the layer choice and the tiles.

    Forked from this process when :func:`fork_is_safe` (a few milliseconds: the workers
    are ready at once, with the detector already imported); otherwise started from a fork
    server that imports the detector (about a second) in a background thread, so that the
    caller does not wait. :meth:`get` waits for the pool (None if it could not start:
    :func:`run_plan` then starts its own); :meth:`stop` ends it if it was never handed to
    :func:`run_plan`.

    Examples
    --------
    >>> early = EarlyPool(1)
    >>> early.stop()
    """

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self._pool: ProcessPoolExecutor | None = None
        self._thread: threading.Thread | None = None
        if fork_is_safe():
            with contextlib.suppress(Exception):
                self._pool = start_pool(workers, fork=True)
            self.forked = self._pool is not None
            if self.forked:
                return
        self.forked = False
        self._thread = threading.Thread(target=self._start, args=(workers,), daemon=True)
        self._thread.start()

    def _start(self, workers: int) -> None:
        with contextlib.suppress(Exception):
            self._pool = start_pool(workers, preload=_same_package_in_fresh_python())

    def _join(self) -> None:
        if self._thread is not None:
            self._thread.join()

    def wait(self) -> ProcessPoolExecutor | None:
        """The started pool, lent (not handed over: :meth:`get` or :meth:`stop` follow)."""
        self._join()
        return self._pool

    def get(self) -> ProcessPoolExecutor | None:
        """The started pool (handed over: :meth:`stop` no longer ends it)."""
        self._join()
        pool, self._pool = self._pool, None
        return pool

    def stop(self) -> None:
        """End the workers unless the pool was handed over."""
        self._join()
        if self._pool is not None:
            from ecoscan.lifecycle import stop_pool

            stop_pool(self._pool)
            self._pool = None


def run_plan(
    func: Callable[[J], R],
    jobs: Sequence[J],
    *,
    workers: int = 1,
    desc: str = "tiles",
    pool: ProcessPoolExecutor | None = None,
    cost: Callable[[J], float] | None = None,
) -> list[R]:
    """Run ``func`` on every job, in-process or on local worker processes.

    Parameters
    ----------
    func : callable
        A module-level (picklable) function of one job.
    jobs : sequence
        Picklable job descriptions.
    workers : int
        1 runs in this process; more uses a process pool of that size.
    desc : str
        Progress bar label.
    pool : ProcessPoolExecutor, optional
        Workers already started (:func:`start_pool`), used instead of new ones and shut
        down at the end.
    cost : callable, optional
        A job's expected cost: on worker processes the costliest jobs are handed out
        first, so that the last ones, which may leave a worker idle, are the cheapest.
        The results keep the jobs' order.

    Returns
    -------
    list
        One result per job, in job order.
    """
    if workers < 1:
        raise ValueError("workers must be at least 1")
    from ecoscan.lifecycle import deferred_signals, stop_pool

    if workers == 1 or len(jobs) <= 1:
        if pool is not None:
            stop_pool(pool)
        return [func(j) for j in progress(jobs, total=len(jobs), desc=desc, unit="tile")]
    results: list[Any] = [None] * len(jobs)
    from concurrent.futures import as_completed

    # workers ignore Ctrl-C and die with their parent; on any error or signal the pool is
    # stopped at once, so no worker outlives the run or holds the caller's pipes open
    ex = pool or ProcessPoolExecutor(
        max_workers=min(workers, len(jobs)),
        mp_context=_context(),
        initializer=_pool_worker_init,
        initargs=(os.getpid(),),
    )
    try:
        with deferred_signals():  # workers start on submit; never leave one half-started
            order = range(len(jobs))
            if cost is not None:  # stable: equal costs keep the plan's order
                order = sorted(order, key=lambda i: -cost(jobs[i]))
            futures = {ex.submit(func, jobs[i]): i for i in order}
        for fut in progress(as_completed(futures), total=len(jobs), desc=desc, unit="tile"):
            results[futures[fut]] = fut.result()
    except BaseException:
        stop_pool(ex)
        raise
    ex.shutdown(wait=True)
    return results


def share_work(
    func: Callable[[J], R],
    jobs: Sequence[J],
    *,
    pool: EarlyPool | None = None,
    local: Callable[[J], R] | None = None,
) -> list[R]:
    """Run ``func`` on every job, here and on the workers of a pool that may still be starting.

    This process takes jobs from the end of the list (with ``local`` when given: the same
    computation without pickling, e.g. reusing what this process already holds) while a
    background thread waits for ``pool`` and hands jobs from the front to its workers, one
    per idle worker. A job a worker could not run (the pool broke or was stopped) is run
    here. The results, in job order, are those of ``[func(j) for j in jobs]``: each job is
    computed once, whole, by the same code. :class:`WorkShare` does the same for jobs
    that are made one by one (the workers start on the first while this process makes
    the next).

    Parameters
    ----------
    func : callable
        A module-level (picklable) function of one picklable job.
    jobs : sequence
        The jobs.
    pool : EarlyPool, optional
        Workers started early (:class:`EarlyPool`), lent for these jobs and left running.
        None runs every job here.
    local : callable, optional
        Used instead of ``func`` for the jobs run here; must give the same result.

    Returns
    -------
    list
        One result per job, in job order.

    Examples
    --------
    >>> share_work(abs, [-1, 2, -3])
    [1, 2, 3]
    """
    with WorkShare(func, pool) as share:
        for job in jobs:
            share.add(job)
        return share.results(local)


class WorkShare:
    """Jobs handed to a pool's workers as soon as they are added; the rest run here.

    A background thread waits for ``pool`` (an :class:`EarlyPool`, possibly still
    starting) and hands jobs from the front, one per idle worker, as they are added with
    :meth:`add`, so that the workers start on the first jobs while this process is still
    making the next. :meth:`results` then takes the jobs left from the end, runs them
    here, and returns every result in job order: those of ``[func(j) for j in jobs]``.
    A job a worker could not run (the pool broke or was stopped) is run here.

    Leaving the ``with`` block without :meth:`results` abandons the work: no more jobs
    are handed out, those waiting in the pool are cancelled (one a worker already runs
    finishes there, its result unused) and every shared-memory segment is released.

    ``after``: another share whose jobs come first. No job of this one is handed to a
    worker before every job of ``after`` has been taken (by a worker or by the process
    that asked for its results), so spare work (a layer that may be needed later) never
    delays the work that is needed.

    Examples
    --------
    >>> with WorkShare(abs, None) as share:
    ...     share.add(-2)
    ...     share.add(3)
    ...     share.results()
    [2, 3]
    """

    def __init__(
        self, func: Callable[[J], R], pool: EarlyPool | None, after: WorkShare | None = None
    ) -> None:
        from ecoscan.detect.shared_arrays import Segments

        self.func = func
        self._segments = Segments()
        first = after._state if after is not None else None
        self._state = _Dispatch(func, pool, self._segments, first)

    def add(self, job: J) -> None:
        """Queue one more job (handed to the next idle worker)."""
        self._state.add(job)

    def results(self, local: Callable[[J], R] | None = None) -> list[R]:
        """No more jobs: run the ones no worker took here (``local`` instead of ``func``
        when given; it must give the same result) and return every result in job order."""
        from concurrent.futures import CancelledError

        state = self._state
        run_here = local or self.func
        jobs = state.close()
        results: list[Any] = [None] * len(jobs)
        while (i := state.take(front=False)) is not None:
            results[i] = run_here(jobs[i])
        state.join()
        while (i := state.take(front=False)) is not None:  # left by a pool that failed
            results[i] = run_here(jobs[i])
        for i, fut in sorted(state.futures.items()):
            try:
                results[i] = fut.result() if fut is not None else run_here(jobs[i])
            except (BrokenProcessPool, CancelledError):
                results[i] = run_here(jobs[i])
        return results

    def __enter__(self) -> WorkShare:
        return self

    def __exit__(self, *exc) -> None:
        try:
            self._state.drain()  # done, an error, Ctrl-C or abandoned: hand out no more
        finally:
            self._segments.close()


class _Dispatch:
    """The jobs of a :class:`WorkShare` not taken yet, and a thread that hands jobs from
    the front to the workers of a pool (one per idle worker) once it has started and a
    job is there.

    A job's large arrays go through a shared-memory segment
    (:mod:`ecoscan.detect.shared_arrays`), released when the job is done.
    """

    def __init__(self, func, pool: EarlyPool | None, segments, after=None) -> None:
        self.func, self.pool, self.segments = func, pool, segments
        self.after = after  # a _Dispatch whose jobs must all be taken before ours start
        self.stopped = False
        self.jobs: list[Any] = []
        self.ready = threading.Condition()
        self.span = [0, None]  # jobs [span[0], span[1]) not taken; span[1] None: still open
        self.futures: dict[int, Any] = {}  # job -> future (None: submitting it failed)
        self.free = threading.Semaphore(max(1, pool.workers) if pool is not None else 1)
        self.helper = None
        if pool is not None:
            self.helper = threading.Thread(target=self._dispatch, daemon=True)
            self.helper.start()

    def add(self, job) -> None:
        with self.ready:
            if self.span[1] is not None:
                raise RuntimeError("no job can be added once the results are asked for")
            self.jobs.append(job)
            self.ready.notify_all()

    def close(self) -> list:
        """No more jobs (this process now takes them from the end); all of them."""
        with self.ready:
            if self.span[1] is None:
                self.span[1] = len(self.jobs)
            self.ready.notify_all()
            return list(self.jobs)

    def take(self, front: bool) -> int | None:
        """The next job from the front (for a worker: waits while more may come) or the
        end (for this process, once closed)."""
        with self.ready:
            if front:
                while self.span[1] is None and self.span[0] >= len(self.jobs):
                    self.ready.wait()
            end = len(self.jobs) if self.span[1] is None else self.span[1]
            if self.span[0] >= end:
                return None
            self.ready.notify_all()  # a share waiting for this one to be exhausted
            if front:
                self.span[0] += 1
                return self.span[0] - 1
            self.span[1] = end - 1
            return self.span[1]

    def _exhausted(self) -> bool:
        """Every job taken (no more can come), or the work abandoned (hold ``ready``)."""
        return self.span[1] is not None and self.span[0] >= self.span[1]

    def _wait_for_after(self) -> None:
        """Wait until every job of ``after`` is taken, or this work is abandoned."""
        after = self.after
        with after.ready:
            while not after._exhausted() and not self.stopped:
                after.ready.wait()

    def drain(self) -> None:
        """Hand out no more jobs and cancel those a worker has not started; wait for the
        helper thread."""
        with self.ready:
            self.span[1] = self.span[0]
            self.ready.notify_all()
            pending = [f for f in self.futures.values() if f is not None]
        for fut in pending:
            fut.cancel()  # no effect on a finished job or one a worker runs
        self.stopped = True
        if self.after is not None:  # a helper waiting for the other share's jobs ends
            with self.after.ready:
                self.after.ready.notify_all()
        self.free.release()  # a helper waiting for an idle worker finds no job and ends
        self.join()

    def join(self) -> None:
        if self.helper is not None:
            self.helper.join()

    def _dispatch(self) -> None:
        from ecoscan.detect.shared_arrays import pack, run_packed

        assert self.pool is not None
        ex = self.pool.wait()
        if ex is None:
            return
        if self.after is not None:
            self._wait_for_after()
        free = self.free
        while True:
            free.acquire()
            i = self.take(front=True)
            if i is None:
                return
            segment = None
            try:
                job, segment = pack(self.jobs[i], self.segments)
                fut = ex.submit(run_packed, self.func, job)
            except Exception:  # the pool was shut down or broke: run it here instead
                self.segments.release(segment)
                with self.ready:
                    self.futures[i] = None
                return

            def done(_f, segment=segment) -> None:
                self.segments.release(segment)
                free.release()

            fut.add_done_callback(done)
            with self.ready:
                self.futures[i] = fut


_LENT: contextvars.ContextVar[EarlyPool | None] = contextvars.ContextVar(
    "ecoscan_lent_pool", default=None
)


@contextlib.contextmanager
def lend_pool(pool: EarlyPool | None) -> Iterator[None]:
    """Lend ``pool``'s workers to the work done inside this block, before the tiles.

    :func:`ecoscan.detect.autotune.choose_layer` (called by the detector's preparation)
    then scores some candidate layers on them (:func:`share_work`). The pool stays the
    caller's: it is not stopped or handed over here.

    Examples
    --------
    >>> with lend_pool(None):
    ...     lent_pool() is None
    True
    """
    token = _LENT.set(pool)
    try:
        yield
    finally:
        _LENT.reset(token)


def lent_pool() -> EarlyPool | None:
    """The pool lent by the innermost :func:`lend_pool` block, or None."""
    return _LENT.get()
