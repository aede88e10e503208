"""Loading points together with their plots: CRS alignment and plot membership."""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
import shapely

from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label
from ecoscan.io.vector import read_plots, read_points
from ecoscan.model.membership import (
    PlotMembership,
    assign_plots,
    drop_plots,
    overlap_note,
    unsurveyed_note,
    unsurveyed_plots,
)
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet

__all__ = [
    "SurveyInputs",
    "load_points_and_plots",
    "one_row_per_plant",
]


@dataclass
class SurveyInputs:
    """Points and plots in one metric CRS, with the plots holding each point.

    Attributes
    ----------
    points : PointSet
        All points read.
    layer : PlotLayer
        The plots, in the points' CRS (plots left out as not surveyed are not in it).
    membership : PlotMembership
        Every (point, plot) pair; a point in overlapping plots is in each of them.
    notes : list of str
        What was assumed or converted, for the user.
    unsurveyed : list of str
        Ids of the plots left out because the points do not reach them.
    """

    points: PointSet
    layer: PlotLayer
    membership: PlotMembership
    notes: list[str] = field(default_factory=list)
    unsurveyed: list[str] = field(default_factory=list)

    def plot_points(self, i: int) -> np.ndarray:
        """Coordinates (n, 2) of the points in plot ``i``."""
        idx = self.membership.points_of(i)
        return np.column_stack([self.points.x[idx], self.points.y[idx]])

    def plot_mask(self, i: int) -> np.ndarray:
        """Boolean mask over all points of those in plot ``i``."""
        m = np.zeros(self.points.n, bool)
        m[self.membership.points_of(i)] = True
        return m

    @property
    def plots(self) -> list[Plot]:
        """The plots in layer order."""
        return self.layer.plots


def one_row_per_plant(points: PointSet) -> PointSet:
    """Undo the one-row-per-plot layout of ecoscan's points tables.

    ecoscan writes a plant that lies in several overlapping plots once per plot, with
    ``plot_count`` > 1 (see :func:`points_by_plot`). Read back, such a table must count
    each plant once: rows at the same position are merged, their plot ids joined by ';'.
    Tables without ``plot_count`` > 1 are returned unchanged.

    Examples
    --------
    >>> import numpy as np
    >>> pts = PointSet(np.array([1.0, 1.0, 5.0]), np.array([1.0, 1.0, 5.0]),
    ...                {"plot_id": np.array(["A", "B", "A"], dtype=object),
    ...                 "plot_count": np.array([2, 2, 1])})
    >>> one = one_row_per_plant(pts)
    >>> one.n, one.attrs["plot_id"].tolist()
    (2, ['A;B', 'A'])
    """
    cnt = points.attrs.get("plot_count")
    if cnt is None or points.n == 0 or not np.any(np.asarray(cnt, float) > 1):
        return points
    _u, first, inv = np.unique(points.xy, axis=0, return_index=True, return_inverse=True)
    inv = np.asarray(inv).ravel()
    keep = np.sort(first)
    out = points.subset(keep)
    if "plot_id" in points.attrs:
        joined: dict[int, list[str]] = {}
        for k, g in zip(inv.tolist(), points.attrs["plot_id"].tolist(), strict=True):
            joined.setdefault(k, []).append(str(g))
        out.attrs["plot_id"] = np.array([";".join(joined[k]) for k in inv[keep]], dtype=object)
    return out


def load_points_and_plots(
    points_path: str | os.PathLike,
    plots_path: str | os.PathLike,
    *,
    crs: str | None = None,
    id_field: str | None = None,
    points_layer: str | None = None,
    plots_layer: str | None = None,
) -> SurveyInputs:
    """Read points and plots, put them in one metric CRS and find each point's plots.

    Parameters
    ----------
    points_path, plots_path : path-like
        Points (CSV / GeoPackage / GeoJSON) and plot polygons.
    crs : str, optional
        CRS of the points when their file does not carry one.
    id_field : str, optional
        Plot id field (see :func:`ecoscan.io.vector.read_plots`).
    points_layer, plots_layer : str, optional
        Layer names in multi-layer files.

    Returns
    -------
    SurveyInputs
        A point in several plots (overlapping or nested plots) belongs to each; a note warns
        when plots overlap. A plot that holds no point and lies wholly outside the convex
        hull of all the points read is left out as not surveyed (a points file has no
        footprint; its hull is the surveyed extent we can vouch for), with one note naming it.

    Raises
    ------
    InputError
        From reading, or when no point falls inside any plot (most often a CRS mix-up).
    """
    pts = one_row_per_plant(read_points(points_path, crs, layer=points_layer))
    layer = read_plots(
        plots_path,
        target_crs=pts.crs,
        id_field=id_field,
        layer=plots_layer,
        points_have_crs=pts.crs is not None,
    )
    if pts.crs is None and layer.crs is not None:
        pts = PointSet(pts.x, pts.y, pts.attrs, layer.crs, pts.notes)
    member = assign_plots(pts, layer)
    inside = member.in_any()
    if not np.any(inside):
        px0, py0 = float(pts.x.min()), float(pts.y.min())
        bx0, by0, _bx1, _by1 = shapely.total_bounds([p.geometry for p in layer.plots])
        raise InputError(
            f"none of the {pts.n} points lies inside any plot (points start near "
            f"{px0:.1f}, {py0:.1f}; plots near {bx0:.1f}, {by0:.1f} in "
            f"{crs_label(pts.crs)}); this is most often a CRS mix-up: check --crs and the "
            "CRS of both files"
        )
    notes = list(pts.notes) + [n for n in layer.notes if n not in pts.notes]
    outside = int(np.sum(~inside))
    if outside:
        notes.append(f"{outside} of {pts.n} points lie outside every plot and were left out")
    ov = overlap_note(layer)
    if ov:
        notes.append(ov)
    hull = shapely.convex_hull(shapely.multipoints(pts.xy))
    drop = unsurveyed_plots(layer, member, hull)
    gone = [layer.plots[i].plot_id for i in drop]
    if gone:
        notes.append(unsurveyed_note(gone, "the area the points cover (their convex hull)"))
        layer, member = drop_plots(layer, member, drop)
    return SurveyInputs(pts, layer, member, notes, gone)
