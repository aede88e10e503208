"""Loading points together with their plots: CRS alignment and plot membership."""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
import shapely

from ecoscan.crs import crs_label
from ecoscan.errors import InputError
from ecoscan.points import PointSet
from ecoscan.vector import Plot, PlotLayer, read_plots, read_points

__all__ = ["SurveyInputs", "assign_plots", "load_points_and_plots", "points_in_plot"]


def points_in_plot(x: np.ndarray, y: np.ndarray, plot: shapely.Geometry) -> np.ndarray:
    """Boolean mask of points inside a plot; points exactly on its boundary count as inside.

    Parameters
    ----------
    x, y : numpy.ndarray
        Coordinates in the plot's CRS (metres).
    plot : shapely.Polygon or shapely.MultiPolygon
        The plot outline.
    """
    shapely.prepare(plot)
    inside = shapely.contains_xy(plot, x, y)
    # contains_xy excludes the boundary; pick up exact boundary points for the rare cases
    x0, y0, x1, y1 = plot.bounds
    cand = ~inside & (x >= x0) & (x <= x1) & (y >= y0) & (y <= y1)
    if np.any(cand):
        idx = np.flatnonzero(cand)
        on = shapely.intersects_xy(plot, x[idx], y[idx])
        inside[idx[on]] = True
    return inside


def assign_plots(points: PointSet, layer: PlotLayer) -> np.ndarray:
    """Index of the plot holding each point (first plot in layer order), or -1 for none."""
    out = np.full(points.n, -1, dtype=np.int64)
    for i, plot in enumerate(layer.plots):
        free = out < 0
        if not np.any(free):
            break
        idx = np.flatnonzero(free)
        m = points_in_plot(points.x[idx], points.y[idx], plot.geometry)
        out[idx[m]] = i
    return out


@dataclass
class SurveyInputs:
    """Points and plots in one metric CRS, with each point's plot.

    Attributes
    ----------
    points : PointSet
        All points read.
    layer : PlotLayer
        The plots, in the points' CRS.
    plot_index : numpy.ndarray
        For each point, the index into ``layer.plots`` of its plot, or -1.
    notes : list of str
        What was assumed or converted, for the user.
    """

    points: PointSet
    layer: PlotLayer
    plot_index: np.ndarray
    notes: list[str] = field(default_factory=list)

    def plot_points(self, i: int) -> np.ndarray:
        """Coordinates (n, 2) of the points in plot ``i``."""
        m = self.plot_index == i
        return np.column_stack([self.points.x[m], self.points.y[m]])

    @property
    def plots(self) -> list[Plot]:
        """The plots in layer order."""
        return self.layer.plots


def load_points_and_plots(
    points_path: str | os.PathLike,
    plots_path: str | os.PathLike,
    *,
    crs: str | None = None,
    id_field: str | None = None,
    points_layer: str | None = None,
    plots_layer: str | None = None,
) -> SurveyInputs:
    """Read points and plots, put them in one metric CRS and find each point's plot.

    Parameters
    ----------
    points_path, plots_path : path-like
        Points (CSV / GeoPackage / GeoJSON) and plot polygons.
    crs : str, optional
        CRS of the points when their file does not carry one.
    id_field : str, optional
        Plot id field (see :func:`ecoscan.vector.read_plots`).
    points_layer, plots_layer : str, optional
        Layer names in multi-layer files.

    Returns
    -------
    SurveyInputs

    Raises
    ------
    InputError
        From reading, or when no point falls inside any plot (most often a CRS mix-up).
    """
    pts = read_points(points_path, crs, layer=points_layer)
    layer = read_plots(
        plots_path,
        target_crs=pts.crs,
        id_field=id_field,
        layer=plots_layer,
        points_have_crs=pts.crs is not None,
    )
    if pts.crs is None and layer.crs is not None:
        pts = PointSet(pts.x, pts.y, pts.attrs, layer.crs, pts.notes)
    idx = assign_plots(pts, layer)
    if not np.any(idx >= 0):
        px0, py0 = float(pts.x.min()), float(pts.y.min())
        bx0, by0, _bx1, _by1 = shapely.total_bounds([p.geometry for p in layer.plots])
        raise InputError(
            f"none of the {pts.n} points lies inside any plot (points start near "
            f"{px0:.1f}, {py0:.1f}; plots near {bx0:.1f}, {by0:.1f} in "
            f"{crs_label(pts.crs)}); this is most often a CRS mix-up: check --crs and the "
            "CRS of both files"
        )
    notes = list(pts.notes) + [n for n in layer.notes if n not in pts.notes]
    outside = int(np.sum(idx < 0))
    if outside:
        notes.append(f"{outside} of {pts.n} points lie outside every plot and were left out")
    return SurveyInputs(pts, layer, idx, notes)
