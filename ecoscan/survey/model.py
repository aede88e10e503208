"""What a survey run holds in memory: per raster, per change and per comparison.

The runner fills these records once and hands them on: statistics, comparison, change and
the report read them, never the files written from them. Figures are carried as the paths
they were written to, so nothing checks the disk to learn whether a figure exists.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ecoscan.io.inputs import SurveyInputs
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.survey.config import RasterEntry, SurveyConfig

__all__ = ["ChangeRun", "ComparisonRun", "RasterRun", "SurveyRun", "slug"]


def slug(text: str) -> str:
    """A file-name-safe version of a label.

    Examples
    --------
    >>> slug("Tansy Hollow_2026-04-20")
    'Tansy-Hollow_2026-04-20'
    """
    s = re.sub(r"[^A-Za-z0-9._-]+", "-", str(text)).strip("-")
    return s or "x"


@dataclass
class RasterRun:
    """What the survey found in one raster."""

    entry: RasterEntry
    method: str
    points: PointSet  # survey CRS, analysed points only, with a plot_id attribute
    inputs: SurveyInputs
    dispersion: list
    scales: list | None
    notes: list[str]
    cached: bool
    pixel_size_m: float
    raster_crs: Any = None  # the raster's own CRS (the report's previews need it)
    detection: dict = field(default_factory=dict)  # layer, thresholds and how chosen
    reprojected: bool = False  # points brought from the raster's CRS to the survey's


@dataclass
class ChangeRun:
    """Change between two consecutive dates of one site.

    ``figure`` is the change map written (None when none was drawn).
    """

    site: str
    earlier: str
    later: str
    result: Any
    folder: Path
    figure: Path | None = None


@dataclass
class ComparisonRun:
    """One comparison of the survey (by site or by plot) and the figure written for it."""

    by: str
    result: Any
    folder: Path
    figure: Path | None = None


@dataclass
class SurveyRun:
    """Everything a survey run produced.

    ``rows`` are the rows of ``dispersion.csv`` in order; :meth:`row` finds one by raster
    and plot without searching them.
    """

    config: SurveyConfig
    output: Path
    crs_text: str
    layer: PlotLayer | None = None  # all plots, in the survey CRS
    rasters: list[RasterRun] = field(default_factory=list)
    rows: list[dict] = field(default_factory=list)
    changes: list[ChangeRun] = field(default_factory=list)
    comparisons: list[ComparisonRun] = field(default_factory=list)
    compare_by: str = ""
    notes: list[str] = field(default_factory=list)
    files: list[Path] = field(default_factory=list)
    manifest: Any = None  # survey.manifest.SurveyManifest
    _index: dict[tuple[str, str], dict] = field(default_factory=dict, repr=False)

    def add_row(self, row: dict) -> None:
        """Append a ``dispersion.csv`` row (keyed by its ``raster`` and ``plot_id``)."""
        self.rows.append(row)
        self._index[(str(row["raster"]), str(row["plot_id"]))] = row

    def row(self, raster: str, plot_id: str) -> dict:
        """The row of one plot of one raster."""
        return self._index[(str(raster), str(plot_id))]

    def figures(self) -> list[Path]:
        """The figures the run wrote outside ``figures/`` (change maps, comparisons)."""
        return [
            f
            for f in [*(c.figure for c in self.changes), *(c.figure for c in self.comparisons)]
            if f is not None
        ]

    def relocate(self, old: Path, new: Path) -> None:
        """Point every path of the run from folder ``old`` to ``new`` (after the swap)."""

        def move(p: Path | None) -> Path | None:
            return None if p is None else new / Path(p).relative_to(old)

        self.files = [move(f) for f in self.files]
        for c in [*self.changes, *self.comparisons]:
            c.folder = move(c.folder)
            c.figure = move(c.figure)
        self.output = new
