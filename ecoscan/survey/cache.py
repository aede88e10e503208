"""Provenance and the rerun cache: file hashes and settings keys."""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

from ecoscan import __version__
from ecoscan.io.outputs import write_json

__all__ = ["file_sha256", "is_fresh", "load_done", "mark_done", "settings_key", "stat_stamp"]


def file_sha256(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, read in chunks (hex)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()


def settings_key(**parts: Any) -> str:
    """A stable hash of the inputs and settings that determine a result."""
    text = json.dumps({"ecoscan": __version__, **parts}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def stat_stamp(path: str | os.PathLike) -> dict[str, int]:
    """A file's size and modification time (ns): a stamp that needs no read of its bytes.

    For outputs written by a library (a GeoPackage by SQLite) whose bytes are not in memory:
    a truncated or edited file changes its size or time. Copies keep the time
    (``shutil.copy2``); where a file system rounds it, the stamp differs and the cache is
    merely not used.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> _ = f.write_text("abc")
    >>> stat_stamp(f)["bytes"]
    3
    """
    st = os.stat(path)
    return {"bytes": int(st.st_size), "mtime_ns": int(st.st_mtime_ns)}


def _matches(path: Path, want: Any) -> bool:
    if isinstance(want, str):
        return file_sha256(path) == want
    if isinstance(want, dict):
        return stat_stamp(path) == want
    return False


def is_fresh(key_file: Path, key: str, outputs: list[Path]) -> bool:
    """True when ``key_file`` holds ``key``, every output exists and is as it was written.

    ``key_file`` records each output (``files``) by the SHA-256 of its bytes or, for files
    whose bytes the writer never held, by :func:`stat_stamp`; an output that has changed
    since (truncated, edited, half-copied) makes the cache stale, so a rerun never trusts a
    damaged file.
    """
    if not key_file.exists() or not all(p.exists() for p in outputs):
        return False
    try:
        info = json.loads(key_file.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    if not isinstance(info, dict) or info.get("key") != key:
        return False
    hashes = info.get("files")
    if not isinstance(hashes, dict):
        return False  # written before files were hashed: recompute
    return all(_matches(p, hashes.get(p.name)) for p in outputs)


def load_done(key_file: Path) -> dict[str, Any]:
    """What :func:`mark_done` recorded (an empty mapping when unreadable)."""
    try:
        info = json.loads(Path(key_file).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return info if isinstance(info, dict) else {}


def mark_done(key_file: Path, key: str, **info: Any) -> None:
    """Record that the outputs for ``key`` are complete (written last, atomically)."""
    write_json(key_file, {"key": key, **info})
