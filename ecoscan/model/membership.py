"""Which plants lie in which plots: :class:`PlotMembership` and the helpers around it.

Pure geometry on the data model (points in metres, plot polygons): membership with plots
that may overlap (a plant on a shared edge belongs to both), overlaps between plots, plots
left without plants, and the points regrouped plot by plot. Nothing here reads a file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import shapely

from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet

__all__ = [
    "PlotMembership",
    "assign_plots",
    "drop_plots",
    "overlap_note",
    "overlapping_plots",
    "plot_membership",
    "points_by_plot",
    "points_in_plot",
    "unsurveyed_note",
    "unsurveyed_plots",
]


def points_in_plot(x: np.ndarray, y: np.ndarray, plot: shapely.Geometry) -> np.ndarray:
    """Boolean mask of points inside a plot; points exactly on its boundary count as inside.

    Parameters
    ----------
    x, y : numpy.ndarray
        Coordinates in the plot's CRS (metres).
    plot : shapely.Polygon or shapely.MultiPolygon
        The plot outline.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> points_in_plot(np.array([1.0, 2.0, 3.0]), np.ones(3), shapely.box(0, 0, 2, 2))
    array([ True,  True, False])
    """
    shapely.prepare(plot)
    return shapely.intersects_xy(plot, x, y)  # intersects: the boundary counts


@dataclass(frozen=True)
class PlotMembership:
    """Which plots hold which points: one entry per (point, plot) pair.

    A point can lie in several plots (overlapping or nested plots), so membership is a list
    of pairs, not one plot per point. Pairs are sorted by plot, then point.

    Attributes
    ----------
    point : numpy.ndarray of int
        Point index of each pair.
    plot : numpy.ndarray of int
        Plot index (into the layer) of each pair.
    n_points, n_plots : int
        Sizes of the point set and the plot layer.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> sq = [shapely.box(0, 0, 10, 10), shapely.box(5, 0, 15, 10)]
    >>> m = plot_membership(np.array([2.0, 7.0]), np.array([5.0, 5.0]), sq)
    >>> m.counts().tolist(), m.points_of(1).tolist()
    ([2, 1], [1])
    """

    point: np.ndarray
    plot: np.ndarray
    n_points: int
    n_plots: int

    def points_of(self, i: int) -> np.ndarray:
        """Indices (ascending) of the points in plot ``i``."""
        lo, hi = np.searchsorted(self.plot, [i, i + 1])
        return self.point[lo:hi]

    def counts(self) -> np.ndarray:
        """Points per plot, in layer order."""
        return np.bincount(self.plot, minlength=self.n_plots)

    def plots_per_point(self) -> np.ndarray:
        """How many plots hold each point (0 outside every plot)."""
        return np.bincount(self.point, minlength=self.n_points)

    def in_any(self) -> np.ndarray:
        """Boolean mask of the points inside at least one plot."""
        return self.plots_per_point() > 0

    def first_plot(self) -> np.ndarray:
        """Lowest plot index holding each point, -1 outside every plot."""
        out = np.full(self.n_points, self.n_plots, dtype=np.int64)
        np.minimum.at(out, self.point, self.plot)
        out[out == self.n_plots] = -1
        return out


def plot_membership(
    x: np.ndarray, y: np.ndarray, geometries: Sequence[shapely.Geometry]
) -> PlotMembership:
    """Every (point, plot) pair where the plot holds the point, boundary included.

    Parameters
    ----------
    x, y : numpy.ndarray
        Point coordinates (metres), in the plots' CRS.
    geometries : sequence of shapely.Polygon or shapely.MultiPolygon
        Plot outlines in layer order.

    Returns
    -------
    PlotMembership
        One pair per point and plot holding it; a point in two overlapping plots gives two
        pairs.

    Notes
    -----
    One vectorised query of a shapely ``STRtree`` over the plots with the ``intersects``
    predicate (points on a boundary count as inside, as in :func:`points_in_plot`).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> m = plot_membership(np.array([1.0, 50.0]), np.array([1.0, 50.0]), [shapely.box(0, 0, 2, 2)])
    >>> m.point.tolist(), m.plot.tolist()
    ([0], [0])
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    geoms = np.asarray(list(geometries), dtype=object)
    if x.size == 0 or geoms.size == 0:
        e = np.empty(0, dtype=np.int64)
        return PlotMembership(e, e.copy(), int(x.size), int(geoms.size))
    tree = shapely.STRtree(geoms)
    pt, pl = tree.query(shapely.points(x, y), predicate="intersects")
    order = np.lexsort((pt, pl))
    return PlotMembership(
        pt[order].astype(np.int64), pl[order].astype(np.int64), int(x.size), int(geoms.size)
    )


def overlapping_plots(layer: PlotLayer) -> list[tuple[str, str, float]]:
    """Pairs of plots whose interiors overlap, with the shared area in m².

    Parameters
    ----------
    layer : PlotLayer
        Plot polygons in a metric CRS.

    Returns
    -------
    list of (str, str, float)
        ``(plot_id_a, plot_id_b, overlap_m2)`` in layer order; plots that only touch along
        an edge are not listed.

    Examples
    --------
    >>> import shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 2, 2)), Plot("B", shapely.box(1, 0, 3, 2))
    >>> lay = PlotLayer([a, b], None)
    >>> overlapping_plots(lay)
    [('A', 'B', 2.0)]
    """
    geoms = np.asarray([p.geometry for p in layer.plots], dtype=object)
    if geoms.size < 2:
        return []
    a, b = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    keep = a < b
    a, b = a[keep], b[keep]
    area = shapely.area(shapely.intersection(geoms[a], geoms[b]))
    ids = layer.ids
    return [
        (ids[i], ids[j], float(s))
        for i, j, s in sorted(zip(a.tolist(), b.tolist(), area.tolist(), strict=True))
        if s > 1e-9 * max(1.0, min(geoms[i].area, geoms[j].area))
    ]


def overlap_note(layer: PlotLayer) -> str | None:
    """One warning naming the overlapping plots, or None when no plots overlap.

    Examples
    --------
    >>> import shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 2, 2)), Plot("B", shapely.box(1, 0, 3, 2))
    >>> lay = PlotLayer([a, b], None)
    >>> overlap_note(lay).split(":")[0]
    '1 pair of plots overlap'
    """
    pairs = overlapping_plots(layer)
    if not pairs:
        return None
    shown = ", ".join(f"{a} & {b} ({s:.0f} m²)" for a, b, s in pairs[:6])
    more = f" and {len(pairs) - 6} more" if len(pairs) > 6 else ""
    k = len(pairs)
    return (
        f"{k} pair{'s' if k > 1 else ''} of plots overlap: {shown}{more}; a plant in "
        "several plots counts in each of them (the points table has one row per plant and "
        "plot), so those plots' results are not independent"
    )


def assign_plots(points: PointSet, layer: PlotLayer) -> PlotMembership:
    """Plot membership of every point: all plots holding it (see :func:`plot_membership`).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 2, 2)), Plot("B", shapely.box(0, 0, 1, 1))
    >>> lay = PlotLayer([a, b], None)
    >>> assign_plots(PointSet(np.array([0.5]), np.array([0.5])), lay).counts().tolist()
    [1, 1]
    """
    return plot_membership(points.x, points.y, [p.geometry for p in layer.plots])


def points_by_plot(points: PointSet, layer: PlotLayer, membership: PlotMembership) -> PointSet:
    """The points in plots, one row per (point, plot) pair, with ``plot_id`` and ``plot_count``.

    A plant inside two overlapping plots appears twice, once with each ``plot_id`` (a
    one-to-many spatial join, as GIS tools make it); ``plot_count`` says in how many plots
    it lies, so that totals over all plots can be made without double counting (keep the
    rows with the first of its plots, or divide by ``plot_count``).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 2, 2)), Plot("B", shapely.box(0, 0, 1, 1))
    >>> lay = PlotLayer([a, b], None)
    >>> pts = PointSet(np.array([0.5, 1.5]), np.array([0.5, 1.5]))
    >>> out = points_by_plot(pts, lay, assign_plots(pts, lay))
    >>> out.attrs["plot_id"].tolist(), out.attrs["plot_count"].tolist()
    (['A', 'B', 'A'], [2, 2, 1])
    """
    ids = np.array(layer.ids, dtype=object)
    # in the points' own order, the rows of a plant in several plots next to each other
    order = np.lexsort((membership.plot, membership.point))
    pt, pl = membership.point[order], membership.plot[order]
    sub = points.subset(pt)
    attrs = {
        "plot_id": ids[pl],
        "plot_count": membership.plots_per_point()[pt].astype(np.int64),
    }
    attrs.update({k: v for k, v in sub.attrs.items() if k not in attrs})
    return PointSet(sub.x, sub.y, attrs, sub.crs, list(sub.notes))


def unsurveyed_plots(
    layer: PlotLayer, membership: PlotMembership, extent: shapely.Geometry | None
) -> list[int]:
    """Indices of the plots that hold no point and lie wholly outside the surveyed extent.

    Parameters
    ----------
    layer : PlotLayer
        The plots.
    membership : PlotMembership
        Points per plot.
    extent : shapely.Geometry or None
        What was surveyed: a raster's footprint, or for a points file the convex hull of
        all its points. None: every plot counts as surveyed.

    Returns
    -------
    list of int
        Plots to leave out: an empty plot outside the extent was not looked at, so it is
        "not surveyed", not "no plants".

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 2, 2)), Plot("B", shapely.box(9, 9, 10, 10))
    >>> lay = PlotLayer([a, b], None)
    >>> m = plot_membership(np.array([1.0]), np.array([1.0]), [p.geometry for p in lay.plots])
    >>> unsurveyed_plots(lay, m, shapely.box(0, 0, 3, 3))
    [1]
    """
    if extent is None or not layer.plots:
        return []
    geoms = np.asarray([p.geometry for p in layer.plots], dtype=object)
    touches = shapely.intersects(geoms, extent)
    empty = membership.counts() == 0
    return np.flatnonzero(empty & ~touches).tolist()


def unsurveyed_note(ids: Sequence[str], what: str) -> str:
    """The one note naming plots left out as not surveyed.

    Examples
    --------
    >>> unsurveyed_note(["P7"], "the raster's footprint")
    "plot P7 lies outside the raster's footprint: not surveyed (not 'no plants'), left out"
    """
    ids = list(ids)
    shown = ", ".join(ids[:10]) + (f" and {len(ids) - 10} more" if len(ids) > 10 else "")
    one = len(ids) == 1
    return (
        f"plot{'' if one else 's'} {shown} lie{'s' if one else ''} outside {what}: not "
        "surveyed (not 'no plants'), left out"
    )


def drop_plots(
    layer: PlotLayer, membership: PlotMembership, drop: Sequence[int]
) -> tuple[PlotLayer, PlotMembership]:
    """The layer without the plots ``drop`` and the membership renumbered to match.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.model.plots import Plot, PlotLayer
    >>> a, b = Plot("A", shapely.box(0, 0, 1, 1)), Plot("B", shapely.box(0, 0, 2, 2))
    >>> lay = PlotLayer([a, b], None)
    >>> m = plot_membership(np.array([1.5]), np.array([1.5]), [p.geometry for p in lay.plots])
    >>> lay2, m2 = drop_plots(lay, m, [0])
    >>> lay2.ids, m2.plot.tolist()
    (['B'], [0])
    """
    if not len(drop):
        return layer, membership
    keep = np.ones(len(layer.plots), bool)
    keep[list(drop)] = False
    new_index = np.cumsum(keep) - 1
    sel = keep[membership.plot]
    new_layer = PlotLayer(
        [p for p, k in zip(layer.plots, keep, strict=True) if k], layer.crs, list(layer.notes)
    )
    m = PlotMembership(
        membership.point[sel],
        new_index[membership.plot[sel]],
        membership.n_points,
        int(keep.sum()),
    )
    return new_layer, m
