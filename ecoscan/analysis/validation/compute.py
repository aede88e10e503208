"""Accuracy of detected plant positions against reference positions.

Detections are paired with reference points one-to-one within a distance tolerance by an
optimal assignment (as many pairs as possible, then the smallest total distance; see
:func:`ecoscan.stats.matching.match_points`, Kuhn 1955). A paired detection is a true
positive, an unpaired detection a false positive, an unpaired reference point a miss (false
negative). Precision = TP / (TP + FP), recall = TP / (TP + FN) and F1 = 2TP / (2TP + FP + FN),
the harmonic mean of the two (van Rijsbergen 1979, Information Retrieval, 2nd ed., ch. 7).
With plots, matching is done within each plot, so a detection is never paired with a
reference plant of another plot.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ecoscan.analysis.validation.columns import COLUMNS
from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, transform_xy
from ecoscan.io.vector import reproject_geometries
from ecoscan.model.membership import assign_plots
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.stats.matching import match_points

__all__ = ["COLUMNS", "AccuracyRow", "accuracy", "align_points", "validate_points"]


@dataclass(frozen=True)
class AccuracyRow:
    """Detection accuracy for one plot (or ``all``).

    Attributes
    ----------
    plot_id : str
    tp, fp, fn : int
        True positives, false positives and misses.
    precision, recall, f1 : float
        NaN when undefined (no detections, no reference points, or neither).
    count_error : int
        Detected minus reference count (positive: over-counting).
    mean_offset_m : float
        Mean distance of the matched pairs in metres (NaN without pairs).
    """

    plot_id: str
    tp: int
    fp: int
    fn: int
    precision: float
    recall: float
    f1: float
    count_error: int
    mean_offset_m: float

    def as_dict(self) -> dict:
        """The row as a mapping in :data:`COLUMNS` order."""
        return {c: getattr(self, c) for c in COLUMNS}


def _ratio(a: float, b: float) -> float:
    return a / b if b > 0 else math.nan


def accuracy(plot_id: str, tp: int, fp: int, fn: int, offset_sum_m: float) -> AccuracyRow:
    """Build an :class:`AccuracyRow` from counts and the sum of matched distances (metres)."""
    return AccuracyRow(
        plot_id=plot_id,
        tp=int(tp),
        fp=int(fp),
        fn=int(fn),
        precision=_ratio(tp, tp + fp),
        recall=_ratio(tp, tp + fn),
        f1=_ratio(2 * tp, 2 * tp + fp + fn),
        count_error=int((tp + fp) - (tp + fn)),
        mean_offset_m=_ratio(offset_sum_m, tp),
    )


def align_points(detected: PointSet, reference: PointSet) -> tuple[PointSet, list[str]]:
    """Bring the reference points into the detections' CRS.

    Returns
    -------
    reference : PointSet
        In ``detected.crs``.
    notes : list of str
    """
    notes: list[str] = []
    if detected.crs is not None and reference.crs is not None:
        if detected.crs != reference.crs:
            x, y = transform_xy(reference.x, reference.y, reference.crs, detected.crs)
            reference = PointSet(x, y, reference.attrs, detected.crs, reference.notes)
            notes.append(f"reference points reprojected to {crs_label(detected.crs)}")
    elif (detected.crs is None) != (reference.crs is None):
        notes.append("one point file has no CRS; both are taken to be in the same coordinates")
    return reference, notes


def validate_points(
    detected: PointSet,
    reference: PointSet,
    tolerance_m: float,
    *,
    plots: PlotLayer | None = None,
) -> list[AccuracyRow]:
    """Score detections against reference positions, per plot and overall.

    Parameters
    ----------
    detected : PointSet
        Detected plants (metric CRS).
    reference : PointSet
        Reference plants (e.g. field-mapped), same or another metric CRS.
    tolerance_m : float
        Largest distance in metres at which a detection can stand for a reference plant.
    plots : PlotLayer, optional
        Plot polygons: one row per plot (points outside every plot are left out), then an
        ``all`` row with the summed counts.

    Returns
    -------
    list of AccuracyRow
        Plot rows in layer order, then ``all``.

    Raises
    ------
    InputError
        A tolerance that is not a positive number of metres.
    """
    if not (isinstance(tolerance_m, (int, float)) and math.isfinite(tolerance_m)):
        raise InputError(f"--tolerance must be a number of metres (got {tolerance_m!r})")
    if tolerance_m <= 0:
        raise InputError(f"--tolerance must be positive metres (got {tolerance_m:g})")
    reference, _notes = align_points(detected, reference)
    if plots is None:
        m = match_points(detected.xy, reference.xy, tolerance_m)
        tp = m.n_matched
        row = accuracy("all", tp, detected.n - tp, reference.n - tp, float(m.distance_m.sum()))
        return [row]
    geoms = np.array([p.geometry for p in plots.plots], dtype=object)
    if plots.crs is not None and detected.crs is not None and plots.crs != detected.crs:
        geoms = reproject_geometries(geoms, plots.crs, detected.crs)
    layer = PlotLayer(
        [type(p)(p.plot_id, g, p.attrs) for p, g in zip(plots.plots, geoms, strict=True)],
        detected.crs,
    )
    di = assign_plots(detected, layer)
    ri = assign_plots(reference, layer)
    rows = []
    # a plot holding neither a detection nor a reference plant was not surveyed by either
    # (another site, or outside both): left out, not scored as a perfect empty plot
    for i, p in enumerate(layer.plots):
        a = detected.xy[di.points_of(i)]
        b = reference.xy[ri.points_of(i)]
        if a.shape[0] == 0 and b.shape[0] == 0:
            continue
        m = match_points(a, b, tolerance_m)
        tp = m.n_matched
        fp, fn = a.shape[0] - tp, b.shape[0] - tp
        rows.append(accuracy(p.plot_id, tp, fp, fn, float(m.distance_m.sum())))
    # overall: every plant once, also where plots overlap (each scored in the first plot
    # holding it), and never matched across plots
    tot = np.zeros(3, dtype=np.int64)
    tot_off = 0.0
    df, rf = di.first_plot(), ri.first_plot()
    for i in range(len(layer.plots)):
        a, b = detected.xy[df == i], reference.xy[rf == i]
        m = match_points(a, b, tolerance_m)
        tot += (m.n_matched, a.shape[0] - m.n_matched, b.shape[0] - m.n_matched)
        tot_off += float(m.distance_m.sum())
    rows.append(accuracy("all", int(tot[0]), int(tot[1]), int(tot[2]), tot_off))
    return rows
