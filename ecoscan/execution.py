"""Where the work runs: this process, a local process pool, or a Dask cluster.

An *executor* is chosen once per command (:func:`open_executor`) and passed down. Detection
hands it the tile plan (:func:`ecoscan.detect.detect_raster`), and a survey also hands it
its rasters and the Monte Carlo tests of every plot. Every job is a small picklable
description (a raster path and a window, or a plot's points and outline); the job reads its
own pixels, and only compact tables come back, so the caller's memory stays small.

* :class:`LocalExecutor` runs jobs in this process (``workers=1``) or on a local process
  pool (:func:`ecoscan.detect.tiling.run_plan`).
* :class:`DaskExecutor` runs them on a ``dask.distributed`` cluster: a local one of N worker
  processes (``--dask-workers N``) or a running scheduler (``--scheduler ADDRESS``). Dask
  reruns the jobs of a worker lost mid-run on the others.

Results are returned in job order and every job is deterministic (seeded per plot), so the
numbers do not depend on the executor or on the schedule.

Dask is optional: ``pip install "ecoscan[dask]"``.
"""

from __future__ import annotations

import contextlib
import functools
import logging
import threading
import uuid
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import CancelledError
from typing import Any, Protocol, TypeVar

from ecoscan.errors import InputError
from ecoscan.progress import progress

__all__ = [
    "DaskExecutor",
    "Executor",
    "LocalExecutor",
    "check_executor_options",
    "open_executor",
]

J = TypeVar("J")
R = TypeVar("R")

#: What to install for the Dask options (the optional extra in pyproject.toml).
DASK_EXTRA = 'pip install "ecoscan[dask]"'

#: Rasters of a survey whose detection is prepared and submitted at once on a cluster (each
#: holds up to ~1.6 megapixels of sample windows on the client while its thresholds are
#: chosen; their tiles then run on the workers together).
RASTERS_AT_ONCE = 4


class Executor(Protocol):
    """What the detection and survey code needs from an executor."""

    #: True when jobs run on other machines or processes managed by an engine, so that a
    #: survey should hand over all its rasters and plots together.
    distributed: bool

    def map(
        self, func: Callable[[J], R], jobs: Sequence[J], *, desc: str = "tiles", unit: str = "tile"
    ) -> list[R]:
        """Run ``func`` on every job; results in job order."""
        ...  # pragma: no cover

    def abort(self) -> None:
        """Cancel the jobs still pending (another part of the run failed)."""
        ...  # pragma: no cover

    def describe(self) -> str:
        """One line for notes and provenance."""
        ...  # pragma: no cover


class LocalExecutor:
    """Jobs in this process (``workers=1``) or on a pool of local processes.

    Examples
    --------
    >>> LocalExecutor(1).map(abs, [-2, 3])
    [2, 3]
    """

    distributed = False

    def __init__(self, workers: int = 1) -> None:
        if int(workers) < 1:
            raise InputError(f"--workers must be at least 1 (got {workers})")
        self.workers = int(workers)

    def map(
        self, func: Callable[[J], R], jobs: Sequence[J], *, desc: str = "tiles", unit: str = "tile"
    ) -> list[R]:
        """Run ``func`` on every job (see :func:`ecoscan.detect.tiling.run_plan`)."""
        from ecoscan.detect.tiling import run_plan

        return run_plan(func, jobs, workers=self.workers, desc=desc)

    def abort(self) -> None:
        """Nothing to cancel: a local map stops its own pool when it fails."""

    def describe(self) -> str:
        """One line for notes."""
        if self.workers == 1:
            return "in this process"
        return f"{self.workers} local processes"


class DaskExecutor:
    """Jobs as tasks on a ``dask.distributed`` cluster.

    Parameters
    ----------
    client : distributed.Client
        A connected client.
    cluster : distributed.LocalCluster, optional
        The local cluster this executor started (closed with it).

    Notes
    -----
    Every call submits tasks under fresh keys (``ecoscan-tile-...``, ``ecoscan-plot-...``)
    and releases each as soon as its result is gathered. A worker lost mid-run has its tasks
    rerun by the scheduler; a task that kills workers repeatedly (Dask's
    ``allowed-failures``) fails the run with a one-line error.

    Examples
    --------
    >>> with open_executor(dask_workers=2) as ex:  # doctest: +SKIP
    ...     ex.map(abs, [-2, 3])
    [2, 3]
    """

    distributed = True

    def __init__(self, client, cluster=None) -> None:
        self.client = client
        self.cluster = cluster
        self._live: set = set()
        self._lock = threading.Lock()
        self._stopped = threading.Event()

    def map(
        self, func: Callable[[J], R], jobs: Sequence[J], *, desc: str = "tiles", unit: str = "tile"
    ) -> list[R]:
        """Run ``func`` on every job as one Dask task each; results in job order."""
        from distributed import as_completed

        if self._stopped.is_set():  # another part of the run failed: submit nothing more
            raise CancelledError("the run was stopped")
        if not jobs:
            return []
        # named keys ("ecoscan-tile-...") group the tasks on Dask's dashboard; fresh per call
        token = uuid.uuid4().hex[:12]
        keys = [f"ecoscan-{unit}-{token}-{i}" for i in range(len(jobs))]
        futures = self.client.map(functools.partial(_run_job, func), list(jobs), key=keys)
        index = {f.key: i for i, f in enumerate(futures)}
        with self._lock:
            self._live.update(futures)
        results: list[Any] = [None] * len(futures)
        try:
            done = as_completed(futures, loop=self.client.loop)
            for fut in progress(done, total=len(futures), desc=desc, unit=unit):
                results[index[fut.key]] = _result(fut, desc)
                fut.release()
        except BaseException:
            self.client.cancel(futures)
            raise
        finally:
            with self._lock:
                self._live.difference_update(futures)
        return results

    def abort(self) -> None:
        """Cancel every task this executor waits for, and refuse new ones (the run failed)."""
        self._stopped.set()
        with self._lock:
            live = list(self._live)
        if live:
            self.client.cancel(live)

    def describe(self) -> str:
        """One line for notes: where the scheduler is and how many workers it has."""
        n = len(self.client.nthreads())
        where = "a local Dask cluster" if self.cluster is not None else "the Dask scheduler at"
        addr = "" if self.cluster is not None else f" {self.client.scheduler.address}"
        return f"{where}{addr} with {n} worker(s)"

    def close(self) -> None:
        """Close the client, and the local cluster when this executor started it."""
        with contextlib.suppress(Exception):
            self.client.close()
        if self.cluster is not None:
            with contextlib.suppress(Exception):
                self.cluster.close()


def _run_job(func: Callable[[J], R], job: J) -> R:
    """Run one job on a worker; a bad-input error travels back as a plain InputError."""
    try:
        return func(job)
    except InputError as exc:
        # raised outside the handler, so no chained exception (a GDAL error, say, which
        # cannot be rebuilt on the client) travels with it: the client gets this one line
        err = InputError(str(exc))
    raise err


def _result(fut, desc: str):
    """A finished task's result, with one-line errors for what the user can fix."""
    from distributed.scheduler import KilledWorker

    try:
        return fut.result()
    except KilledWorker:
        raise InputError(
            f"Dask workers died repeatedly while running the same {desc[:-1] or 'job'} (out of "
            "memory?); lower --tile-size, or give each worker more memory"
        ) from None
    except ModuleNotFoundError as exc:
        raise InputError(
            f"a Dask worker cannot import {exc.name or 'ecoscan'}: install ecoscan (the same "
            "version as here, with its dependencies) on every worker"
        ) from None


def _import_distributed(option: str):
    try:
        import distributed
    except ImportError:
        raise InputError(
            f"{option} needs the optional Dask support, which is not installed: {DASK_EXTRA}"
        ) from None
    return distributed


def check_executor_options(
    workers: int | None = None,
    dask_workers: int | None = None,
    scheduler: str | None = None,
) -> None:
    """Refuse impossible combinations of ``--workers``, ``--dask-workers``, ``--scheduler``.

    Raises
    ------
    InputError
        A count below 1, both Dask options, or a Dask option with ``--workers``.

    Examples
    --------
    >>> check_executor_options(dask_workers=2)
    >>> check_executor_options(dask_workers=0)
    Traceback (most recent call last):
    ...
    ecoscan.errors.InputError: --dask-workers must be at least 1 (got 0)
    """
    if dask_workers is not None and dask_workers < 1:
        raise InputError(f"--dask-workers must be at least 1 (got {dask_workers})")
    if scheduler is not None and not str(scheduler).strip():
        raise InputError("--scheduler needs the scheduler's address, e.g. tcp://10.0.0.5:8786")
    if dask_workers is not None and scheduler is not None:
        raise InputError(
            "give either --dask-workers (start a local Dask cluster) or --scheduler (use a "
            "running one), not both"
        )
    if workers is not None and (dask_workers is not None or scheduler is not None):
        which = "--dask-workers" if dask_workers is not None else "--scheduler"
        raise InputError(
            f"--workers sets local processes, but with {which} the Dask workers do the "
            "work; drop --workers"
        )


def _connect(distributed, address: str):
    import dask
    from distributed.comm import get_address_host_port

    try:
        get_address_host_port(address)
    except (ValueError, TypeError) as exc:
        first = (str(exc).splitlines() or ["not an address"])[0]
        raise InputError(
            f"--scheduler {address} is not a scheduler address ({first}); write it as "
            "tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786"
        ) from None
    timeout = dask.config.get("distributed.comm.timeouts.connect")
    try:
        return distributed.Client(address, timeout=timeout, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise InputError(
            f"cannot reach the Dask scheduler at --scheduler {address} within {timeout}: "
            f"{first}; check that `dask scheduler` runs there and the address and port "
            "(e.g. tcp://10.0.0.5:8786)"
        ) from None


@contextlib.contextmanager
def _quiet_dask_logs() -> Iterator[None]:
    """Dask's start-up and shutdown chatter at ERROR level while ecoscan runs (restored)."""
    names = ["distributed"] + [
        n for n in logging.root.manager.loggerDict if n.startswith("distributed.")
    ]
    loggers = [logging.getLogger(n) for n in names]
    old = [lg.level for lg in loggers]
    if not logging.getLogger("ecoscan").isEnabledFor(logging.DEBUG):  # --verbose shows it all
        for lg in loggers:
            lg.setLevel(logging.ERROR)
    try:
        yield
    finally:
        for lg, level in zip(loggers, old, strict=True):
            lg.setLevel(level)


@contextlib.contextmanager
def open_executor(
    *,
    workers: int | None = None,
    dask_workers: int | None = None,
    scheduler: str | None = None,
    quiet: bool = False,
) -> Iterator[Executor]:
    """The executor the options ask for, closed (with any cluster it started) on exit.

    Parameters
    ----------
    workers : int, optional
        Local processes (default 1), capped at the CPU cores with a note.
    dask_workers : int, optional
        Start a local Dask cluster of this many single-threaded worker processes (capped at
        the CPU cores with a note).
    scheduler : str, optional
        Address of a running Dask scheduler, e.g. ``tcp://10.0.0.5:8786``. The connection
        waits at most Dask's ``distributed.comm.timeouts.connect`` (30 s by default; set
        ``DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT=5s`` to change it).
    quiet : bool
        No notes.

    Yields
    ------
    Executor

    Raises
    ------
    InputError
        Bad combinations (:func:`check_executor_options`), Dask not installed, or a
        scheduler that cannot be reached.

    Examples
    --------
    >>> with open_executor() as ex:
    ...     ex.map(abs, [-1, 2, -3])
    [1, 2, 3]
    """
    from ecoscan.safety import cap_workers

    check_executor_options(workers, dask_workers, scheduler)
    if dask_workers is None and scheduler is None:
        yield LocalExecutor(cap_workers(workers or 1, quiet=quiet))
        return
    option = "--dask-workers" if dask_workers is not None else "--scheduler"
    distributed = _import_distributed(option)
    with _quiet_dask_logs():
        cluster = None
        if scheduler is not None:
            client = _connect(distributed, str(scheduler).strip())
        else:
            n = cap_workers(dask_workers, quiet=quiet, option="--dask-workers")
            cluster = distributed.LocalCluster(
                n_workers=n,
                threads_per_worker=1,  # numpy-heavy jobs: one per process, as the local pool
                processes=True,
                dashboard_address=":0",  # any free port: never collides with another cluster
                silence_logs=logging.CRITICAL,  # a failed task is reported here, once
            )
            client = distributed.Client(cluster, set_as_default=False)
        ex = DaskExecutor(client, cluster)
        try:
            yield ex
        finally:
            ex.close()
