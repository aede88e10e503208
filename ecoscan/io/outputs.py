"""Atomic output: every file ecoscan writes appears whole or not at all.

Files are written to a temporary name in the destination folder and moved into place with
:func:`os.replace`, which is atomic on the same file system. A run that fails part-way leaves
no half-written file behind.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
import tempfile
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "atomic_path",
    "format_value",
    "write_csv",
    "write_json",
    "write_text",
]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it onto ``path`` when the block succeeds.

    Parameters
    ----------
    path : path-like
        The final destination. Its folder is created if needed.
    suffix : str, optional
        Suffix for the temporary file (defaults to the destination's), so that writers that
        choose a format from the extension (GDAL drivers) still work.

    Yields
    ------
    pathlib.Path
        Where to write. On an exception the temporary file is removed and ``path`` untouched.
    """
    dest = Path(path)
    dest.parent.mkdir(parents=True, exist_ok=True)
    sfx = dest.suffix if suffix is None else suffix
    # the writer's pid in the name lets a later run remove debris of a killed one
    from ecoscan.lifecycle import TEMP_TAG, clean_stale

    clean_stale(dest.parent)
    fd, tmp = tempfile.mkstemp(
        prefix=f".{dest.stem}{TEMP_TAG}-{os.getpid()}-", suffix=sfx, dir=dest.parent
    )
    os.close(fd)
    tmp_path = Path(tmp)
    tmp_path.unlink()  # writers such as GDAL want to create the file themselves
    try:
        yield tmp_path
        os.replace(tmp_path, dest)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write text (UTF-8, ``\\n`` newlines) atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")
    return Path(path)


def format_value(value: Any) -> str:
    """Format one table cell: floats with up to 6 significant digits, NaN as empty."""
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isnan(v):
            return ""
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return f"{v:.6g}"
    if isinstance(value, (list, tuple)):
        return "; ".join(format_value(v) for v in value)
    return str(value)


def write_csv(
    path: str | os.PathLike,
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[str] | None = None,
) -> Path:
    """Write records as CSV atomically.

    Parameters
    ----------
    path : path-like
        Destination file.
    rows : sequence of mappings
        One mapping per row.
    columns : sequence of str, optional
        Column order; defaults to the keys of the first row, then any new keys in order.

    Returns
    -------
    pathlib.Path
    """
    if columns is None:
        columns = []
        for r in rows:
            columns += [k for k in r if k not in columns]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([format_value(r.get(c)) for c in columns])
    return write_text(path, buf.getvalue())


def _json_default(o: Any) -> Any:
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return None if math.isnan(float(o)) else float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"cannot write {type(o).__name__} to JSON")


def _clean_nan(o: Any) -> Any:
    if isinstance(o, float) and (math.isnan(o) or math.isinf(o)):
        return None
    if isinstance(o, dict):
        return {k: _clean_nan(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_clean_nan(v) for v in o]
    return o


def write_json(path: str | os.PathLike, obj: Any) -> Path:
    """Write an object as indented JSON atomically (NaN and infinities become null)."""
    text = json.dumps(_clean_nan(obj), indent=2, default=_json_default, sort_keys=False)
    return write_text(path, text + "\n")
