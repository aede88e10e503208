"""Count what a run opens and reads: rasters (by purpose), vector layers and plain files.

Used by tests/test_survey_one_pass.py and benchmarks/survey_one_pass.py (which also runs it
against an older checkout, so it relies only on names that every version has:
``rasterio.open``, ``pyogrio.raw.read`` and Python's ``open``).
"""

from __future__ import annotations

import builtins
import io
import os
import sys
from collections import Counter
from contextlib import contextmanager
from pathlib import Path

#: Function names on the stack that say why a raster is opened, innermost first wins.
PURPOSES = {
    "open_raster": "header",
    "read_window": "tile window",
    "read_decimated": "decimated read",
    "preview": "report preview",
    "open_for_previews": "report preview",
}


def _purpose(frame) -> str:
    while frame is not None:
        name = frame.f_code.co_name
        if name in PURPOSES:
            return PURPOSES[name]
        if "habitat" in frame.f_code.co_filename:
            return "covariate"
        frame = frame.f_back
    return "other"


class Reads:
    """What was opened: ``rasters[(path, purpose)]``, ``vectors[path]``, ``files[path]``."""

    def __init__(self) -> None:
        self.rasters: Counter = Counter()
        self.vectors: Counter = Counter()
        self.files: Counter = Counter()

    def raster_opens(self, path, purpose: str | None = None) -> int:
        """Opens of one raster (for one purpose, or all)."""
        p = str(Path(path).resolve())
        return sum(n for (q, why), n in self.rasters.items() if q == p and purpose in (None, why))

    def under(self, folder) -> dict[str, int]:
        """Reads (vector layers and plain files) of files inside ``folder``."""
        root = str(Path(folder).resolve())
        out: Counter = Counter()
        for c in (self.vectors, self.files):
            for p, n in c.items():
                if p.startswith(root + os.sep):
                    out[p] += n
        return dict(out)


@contextmanager
def count_reads():
    """Patch the openers for the duration; yields a :class:`Reads`."""
    import pyogrio.raw
    import rasterio

    reads = Reads()
    real_open, real_io_open = builtins.open, io.open
    real_rio, real_ogr = rasterio.open, pyogrio.raw.read

    def rio_open(fp, mode="r", *a, **k):
        if mode == "r" and isinstance(fp, (str, os.PathLike)):
            reads.rasters[(str(Path(fp).resolve()), _purpose(sys._getframe(1)))] += 1
        return real_rio(fp, mode, *a, **k)

    def ogr_read(path, *a, **k):
        if isinstance(path, (str, os.PathLike)):
            reads.vectors[str(Path(path).resolve())] += 1
        return real_ogr(path, *a, **k)

    def py_open(file, mode="r", *a, **k):
        if isinstance(file, (str, os.PathLike)) and not set(mode) & set("wax+"):
            reads.files[str(Path(file).resolve())] += 1
        return real_open(file, mode, *a, **k)

    rasterio.open, pyogrio.raw.read = rio_open, ogr_read
    builtins.open = io.open = py_open
    try:
        yield reads
    finally:
        rasterio.open, pyogrio.raw.read = real_rio, real_ogr
        builtins.open, io.open = real_open, real_io_open
