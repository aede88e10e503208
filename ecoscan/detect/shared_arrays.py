"""Hand large arrays to worker processes through shared memory instead of a pipe.

A job sent to a process pool is pickled, written through a pipe and unpickled by the
worker: for the layer choice's jobs (tens of megabytes of sample-window layers) that copy
costs about 0.15 s per job. :func:`pack` instead puts every large array of a job into one
POSIX shared-memory segment (:class:`multiprocessing.shared_memory.SharedMemory`) and
pickles the rest with references to it; the worker maps the segment and rebuilds the job
with arrays that are views of it (:func:`run_packed`), so nothing large goes through the
pipe and nothing is copied on the worker's side.

The job the worker sees equals the one pickling would give: the same values, dtypes,
shapes and memory order, and an array referenced twice in a job is one array there too.
Each job has its own segment, so a worker that writes into its arrays changes nothing that
another job or the caller reads.

Segments are named ``ecoscan-PID-N-TOKEN`` and released by :class:`Segments` (the caller
unlinks each one when its job is done, and all that are left when the work ends, on an
error or Ctrl-C too). A caller killed outright cannot unlink them: Python's resource
tracker process, with which every segment is registered, removes them when the caller
is gone. Workers only map segments, never register them, so a worker ending removes
nothing.
"""

from __future__ import annotations

import io
import itertools
import mmap
import os
import pickle
import secrets
import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np

__all__ = ["MIN_SHARED_BYTES", "PREFIX", "PackedJob", "Segments", "pack", "run_packed"]

J = TypeVar("J")
R = TypeVar("R")

#: Arrays smaller than this are pickled with the job as usual.
MIN_SHARED_BYTES = 1 << 16
#: Name prefix of every segment ecoscan makes (then the process id of the maker).
PREFIX = "ecoscan-"
#: Arrays start at multiples of this many bytes in a segment (cache lines, SIMD loads).
ALIGN = 64

_COUNTER = itertools.count()


@dataclass(frozen=True)
class PackedJob:
    """A job whose large arrays wait in a shared-memory segment.

    Attributes
    ----------
    segment : str
        The segment's name (without the leading slash).
    payload : bytes
        The job pickled, its large arrays replaced by their place in ``arrays``.
    arrays : tuple
        Per array: byte offset in the segment, shape, dtype (``numpy.dtype.str``) and
        memory order (``C`` or ``F``).
    """

    segment: str
    payload: bytes
    arrays: tuple[tuple[int, tuple[int, ...], str, str], ...]


class _Collect(pickle.Pickler):
    """Pickles a job, setting its large arrays aside (each distinct array once)."""

    def __init__(self, file, min_bytes: int) -> None:
        super().__init__(file, protocol=pickle.HIGHEST_PROTOCOL)
        self.min_bytes = min_bytes
        self.found: list[np.ndarray] = []
        self._index: dict[int, int] = {}

    def persistent_id(self, obj):
        if type(obj) is not np.ndarray or obj.dtype.hasobject or obj.nbytes < self.min_bytes:
            return None
        key = id(obj)  # the array stays referenced by ``found``, so its id stays its own
        if key not in self._index:
            self._index[key] = len(self.found)
            self.found.append(obj)
        return self._index[key]


class _Restore(pickle.Unpickler):
    """Unpickles a packed job, its large arrays taken from the segment."""

    def __init__(self, file, arrays: list[np.ndarray]) -> None:
        super().__init__(file)
        self.arrays = arrays

    def persistent_load(self, pid):
        return self.arrays[pid]


class Segments:
    """The shared-memory segments made for jobs not finished yet; each released once.

    Thread-safe: jobs are packed in one thread and finish in another. :meth:`close`
    releases every segment left and refuses new ones (a job packed after it is not
    shared, so nothing can outlive the work).

    Examples
    --------
    >>> with Segments() as segs:
    ...     job, name = pack({"a": np.zeros(20_000)}, segs)
    ...     segs.release(name)
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._live: dict[str, Any] = {}
        self._closed = False

    def make(self, size: int):
        """A new segment of ``size`` bytes, or None once closed."""
        from multiprocessing.shared_memory import SharedMemory

        with self._lock:
            if self._closed:
                return None
            name = f"{PREFIX}{os.getpid()}-{next(_COUNTER)}-{secrets.token_hex(4)}"
            shm = SharedMemory(name=name, create=True, size=max(size, 1))
            self._live[name] = shm
            return shm

    def release(self, name: str | None) -> None:
        """Unlink one segment (its job is done); a name already released is ignored."""
        if name is None:
            return
        # unlinked under the lock, so that :meth:`close` returning means every segment is
        # gone: a job's done-callback may still be releasing its segment after the caller
        # already has the job's result (seen under load as a segment left for a moment)
        with self._lock:
            shm = self._live.pop(name, None)
            if shm is not None:
                _unlink(shm)

    def close(self) -> None:
        """Release every segment left; make no more."""
        with self._lock:
            self._closed = True
            left, self._live = list(self._live.values()), {}
        for shm in left:
            _unlink(shm)

    @property
    def names(self) -> list[str]:
        """Segments not released yet."""
        with self._lock:
            return list(self._live)

    def __enter__(self) -> Segments:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _unlink(shm) -> None:
    try:
        shm.unlink()
    except FileNotFoundError:
        pass


def _order(a: np.ndarray) -> str:
    """The memory order pickling keeps: F for Fortran-contiguous arrays only."""
    return "F" if a.flags.f_contiguous and not a.flags.c_contiguous else "C"


def pack(job: J, segments: Segments, min_bytes: int = MIN_SHARED_BYTES):
    """The job ready to send: ``(PackedJob, segment name)``, or ``(job, None)`` as it is.

    The job is left as it is when it holds no array of ``min_bytes`` or more, or when
    ``segments`` is closed.

    Examples
    --------
    >>> with Segments() as segs:
    ...     packed, name = pack([np.arange(10_000.0), "label"], segs)
    ...     run_packed(len, packed), name.startswith(PREFIX)
    (2, True)
    """
    buf = io.BytesIO()
    pickler = _Collect(buf, min_bytes)
    pickler.dump(job)
    if not pickler.found:
        return job, None
    layout, size = [], 0
    for a in pickler.found:
        layout.append((size, tuple(a.shape), a.dtype.str, _order(a)))
        size += -(-a.nbytes // ALIGN) * ALIGN
    shm = segments.make(size)
    if shm is None:
        return job, None
    for a, (off, shape, dtype, order) in zip(pickler.found, layout, strict=True):
        np.ndarray(shape, dtype, buffer=shm.buf, offset=off, order=order)[...] = a
    shm.close()  # this process needs no mapping of it: only the worker reads it
    return PackedJob(shm.name, buf.getvalue(), tuple(layout)), shm.name


def _attach(name: str):
    """Map a segment without registering it with a resource tracker (only its maker
    unlinks it): an ``mmap.mmap`` (POSIX) or a ``SharedMemory`` (Windows, where a
    segment is freed when its last handle closes)."""
    if os.name != "posix":
        from multiprocessing.shared_memory import SharedMemory

        return SharedMemory(name=name)
    import _posixshmem

    fd = _posixshmem.shm_open("/" + name, os.O_RDWR, mode=0o600)
    try:
        return mmap.mmap(fd, os.fstat(fd).st_size)
    finally:
        os.close(fd)


def run_packed(func: Callable[[J], R], job: PackedJob | J) -> R:
    """``func(job)`` on the job :func:`pack` made (in the worker), or on a plain job.

    Examples
    --------
    >>> run_packed(abs, -3)
    3
    """
    if not isinstance(job, PackedJob):
        return func(job)
    handle = _attach(job.segment)
    try:
        return func(_restore(job, getattr(handle, "buf", handle)))
    finally:
        try:
            handle.close()
        except BufferError:  # the result holds a view of it: unmapped when that is freed
            pass


def _restore(job: PackedJob, buf) -> Any:
    """The job, its large arrays views of the mapped segment ``buf``."""
    arrays = [
        np.ndarray(shape, dtype, buffer=buf, offset=off, order=order)
        for off, shape, dtype, order in job.arrays
    ]
    return _Restore(io.BytesIO(job.payload), arrays).load()
