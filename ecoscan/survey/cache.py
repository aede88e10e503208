"""Provenance and the rerun cache: file hashes and settings keys."""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

from ecoscan import __version__
from ecoscan.io.outputs import write_json

__all__ = ["file_sha256", "is_fresh", "mark_done", "settings_key"]


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


def is_fresh(key_file: Path, key: str, outputs: list[Path]) -> bool:
    """True when ``key_file`` holds ``key``, every output exists and is as it was written.

    ``key_file`` records the SHA-256 of each output (``files``); an output whose bytes have
    changed since (truncated, edited, half-copied) makes the cache stale, so a rerun never
    trusts a damaged file.
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
    for p in outputs:
        want = hashes.get(p.name)
        if not isinstance(want, str) or file_sha256(p) != want:
            return False
    return True


def mark_done(key_file: Path, key: str, **info: Any) -> None:
    """Record that the outputs for ``key`` are complete (written last, atomically)."""
    write_json(key_file, {"key": key, **info})
