"""Provenance and the rerun cache: file hashes and settings keys."""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

from ecoscan import __version__
from ecoscan.outputs import write_json

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
    """True when ``key_file`` holds ``key`` and every output exists."""
    if not key_file.exists() or not all(p.exists() for p in outputs):
        return False
    try:
        return json.loads(key_file.read_text(encoding="utf-8")).get("key") == key
    except (OSError, ValueError):
        return False


def mark_done(key_file: Path, key: str, **info: Any) -> None:
    """Record that the outputs for ``key`` are complete (written last, atomically)."""
    write_json(key_file, {"key": key, **info})
