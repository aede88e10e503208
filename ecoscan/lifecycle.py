"""Run lifecycle: output folders that appear whole or not at all, signals, worker processes.

A command that writes a folder builds it in a hidden temporary sibling
(``.NAME.tmp-ecoscan-PID``) and moves it into place only when every file is written; an
interrupted, failed or killed run therefore never leaves a half-written results folder, and
an existing folder is never mixed with files of an older run. Temporary files and folders
carry the process id of their writer, so that a later run can tell debris of a killed run
(its writer is gone) from the work of a run still going, and remove only the former.

SIGTERM is turned into :class:`Terminated` (a :class:`KeyboardInterrupt`), so that the same
clean-up runs for Ctrl-C and for ``kill``. Worker processes ignore SIGINT (the parent decides)
and end themselves as soon as their parent is gone, so that a killed run never leaves workers
holding the caller's pipes open.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import signal
import sys
import threading
import time
from collections.abc import Iterable, Iterator
from pathlib import Path

from ecoscan.errors import InputError

__all__ = [
    "TEMP_TAG",
    "Terminated",
    "check_output_path",
    "clean_stale",
    "deferred_signals",
    "install_signal_handlers",
    "output_folder",
    "pid_alive",
    "stop_pool",
    "worker_init",
]

#: Every temporary file or folder ecoscan makes carries this tag and its writer's pid.
TEMP_TAG = ".tmp-ecoscan"
_STALE = re.compile(r"^\..*\.(?:tmp|old)-ecoscan-(\d+)(?:[.-].*)?$")


class Terminated(KeyboardInterrupt):
    """The run was asked to stop by SIGTERM (handled like Ctrl-C, exit code 143)."""


def _on_sigterm(signum, frame) -> None:  # pragma: no cover - exercised in a subprocess
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # one clean-up, not two
    raise Terminated()


def install_signal_handlers() -> None:
    """Turn SIGTERM into :class:`Terminated` in the main thread (no-op elsewhere).

    Examples
    --------
    >>> install_signal_handlers()
    """
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _on_sigterm)


def pid_alive(pid: int) -> bool:
    """Whether a process with this id exists (on this machine).

    Examples
    --------
    >>> pid_alive(os.getpid())
    True
    """
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    try:  # a killed process stays a zombie until its parent reaps it: that is gone too
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return True
    return stat.rsplit(")", 1)[-1].split()[0] not in ("Z", "X")


def clean_stale(folder: str | os.PathLike) -> list[Path]:
    """Remove temporary files and folders left in ``folder`` by ecoscan runs that were killed.

    Only names made by ecoscan (``.NAME.tmp-ecoscan-PID...``) whose writer process no longer
    exists are removed; the work of runs still going is left alone.

    Returns
    -------
    list of pathlib.Path
        What was removed.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> _ = (d / ".points.tmp-ecoscan-999999999.csv").write_text("x")
    >>> [p.name for p in clean_stale(d)]
    ['.points.tmp-ecoscan-999999999.csv']
    """
    removed: list[Path] = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for e in entries:
        m = _STALE.match(e.name)
        if not m or pid_alive(int(m.group(1))):
            continue
        p = Path(e.path)
        with contextlib.suppress(OSError):
            if e.is_dir(follow_symlinks=False):
                shutil.rmtree(p)
            else:
                p.unlink()
            removed.append(p)
    return removed


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
    except ValueError:
        return False
    return True


def check_output_path(
    path: str | os.PathLike,
    *,
    overwrite: bool,
    inputs: Iterable[str | os.PathLike | None] = (),
    option: str = "-o",
    folder: bool = False,
) -> Path:
    """Refuse an output that would replace existing results or one of the run's inputs.

    Parameters
    ----------
    path : path-like
        The output file or folder, as the user gave it.
    overwrite : bool
        Whether ``--overwrite`` was given.
    inputs : iterable of path-like
        The run's input files and folders (``None`` entries are skipped).
    option : str
        The option that named the output, for the message.
    folder : bool
        The output is a folder (a file there is refused, and inputs inside it too).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InputError
        When the output is an input, holds an input, exists without ``overwrite``, or is a
        file where a folder is wanted (or the reverse).

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> check_output_path(d / "new", overwrite=False, folder=True).name
    'new'
    """
    out = Path(path)
    for up in out.absolute().parents:
        if up.exists():
            if not up.is_dir():
                raise InputError(f"{option} {path}: {up} is a file, not a folder; check the path")
            break
    real = Path(os.path.realpath(out))
    for src in inputs:
        if src is None:
            continue
        s = Path(os.path.realpath(src))
        if s == real or (folder and _inside(s, real)):
            what = "is" if s == real else "holds"
            raise InputError(
                f"{option} {path} {what} the input {src}; write the results somewhere else"
            )
    if out.exists() or out.is_symlink():
        if folder and not out.is_dir():
            raise InputError(f"{option} {path} is a file; give a folder for the results")
        if not folder and out.is_dir():
            raise InputError(f"{option} {path} is a folder; give a file name for the output")
        if not overwrite and not (folder and not any(out.iterdir())):  # empty: fill it
            kind = "folder" if folder else "file"
            raise InputError(
                f"{option} {path}: the {kind} exists; add --overwrite to replace it, or "
                "choose another name"
            )
    return out


@contextlib.contextmanager
def output_folder(
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    inputs: Iterable[str | os.PathLike | None] = (),
    option: str = "-o",
) -> Iterator[Path]:
    """Build a results folder in a hidden temporary sibling and move it into place at the end.

    On success the finished folder replaces ``path`` as a whole (an older folder there is
    removed, so no file of an earlier run survives). On any exception, Ctrl-C or SIGTERM the
    temporary folder is removed and ``path`` is left as it was. Debris of killed runs in the
    parent folder is cleaned first.

    Parameters
    ----------
    path : path-like
        The final results folder.
    overwrite : bool
        Replace an existing folder (otherwise it is refused before any work).
    inputs : iterable of path-like
        Input files and folders, which the output may neither be nor hold.
    option : str
        The option that named the folder, for messages.

    Yields
    ------
    pathlib.Path
        The temporary folder to write into.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> with output_folder(d / "res") as tmp:
    ...     _ = (tmp / "a.csv").write_text("x\\n")
    >>> sorted(p.name for p in (d / "res").iterdir())
    ['a.csv']
    """
    dest = check_output_path(path, overwrite=overwrite, inputs=inputs, option=option, folder=True)
    parent = dest.parent
    parent.mkdir(parents=True, exist_ok=True)
    clean_stale(parent)
    tmp = parent / f".{dest.name}{TEMP_TAG}-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        yield tmp
        old = None
        if dest.exists():
            old = parent / f".{dest.name}.old-ecoscan-{os.getpid()}"
            os.replace(dest, old)
        os.replace(tmp, dest)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)


@contextlib.contextmanager
def deferred_signals() -> Iterator[None]:
    """Hold SIGINT and SIGTERM until the block ends (e.g. while worker processes start).

    A signal that arrives meanwhile is acted on when the block ends, so a process pool is
    never interrupted half-way through starting a worker (which would leave a worker the
    pool does not know about, and so cannot stop). Python runs signal handlers in the main
    thread whichever thread received the signal, so the handlers themselves defer.

    Examples
    --------
    >>> with deferred_signals():
    ...     pass
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[int] = []

    def hold(signum, frame) -> None:
        pending.append(signum)

    old = {s: signal.signal(s, hold) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if signal.SIGTERM in pending:
            signal.signal(signal.SIGTERM, signal.SIG_IGN)
            raise Terminated()
        if pending:
            raise KeyboardInterrupt()


def worker_init(parent_pid: int) -> None:
    """Set up a worker process: ignore Ctrl-C, and exit as soon as the parent is gone.

    Used as the ``initializer`` of process pools. SIGINT is left to the parent (which stops
    the pool); a watchdog thread ends the worker within half a second of the parent's death,
    even when the parent was killed with SIGKILL and could not clean up.

    Examples
    --------
    >>> callable(worker_init)
    True
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        with contextlib.suppress(Exception):
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG: die with the direct parent

    def _watch() -> None:
        while True:
            time.sleep(0.5)
            if not pid_alive(parent_pid) or os.getppid() == 1:
                os._exit(1)

    threading.Thread(target=_watch, daemon=True, name="ecoscan-parent-watch").start()


def stop_pool(executor) -> None:
    """Stop a :class:`concurrent.futures.ProcessPoolExecutor` now: cancel jobs, end workers.

    Examples
    --------
    >>> from concurrent.futures import ProcessPoolExecutor
    >>> stop_pool(ProcessPoolExecutor(max_workers=1))
    """
    procs = list((getattr(executor, "_processes", None) or {}).values())
    executor.shutdown(wait=False, cancel_futures=True)
    for p in procs:  # workers hold no state worth saving: end them at once
        with contextlib.suppress(Exception):
            p.kill()
    for p in procs:
        with contextlib.suppress(Exception):
            p.join(timeout=2)
