"""Edge corrections for second-order statistics in any polygon, computed exactly.

Two quantities are needed by every edge-corrected estimator in :mod:`ecoscan.stats`:

* the distance from a point to the window boundary (border / reduced-sample correction and
  the censoring distance of the Kaplan–Meier estimators);
* the proportion of the circle of radius ``r`` centred on a point that lies inside the window,
  whose reciprocal is Ripley's isotropic edge weight.

The circle proportion is exact for any polygon with holes or MultiPolygon. The window's
indicator is written as the signed sum of the triangles (u, a, b) spanned by the point u and
each oriented boundary edge a→b (exterior rings anticlockwise, holes clockwise), so the arc of
the circle inside the window is the signed sum of the arcs inside those triangles. Inside one
triangle the arc is the wedge between the directions to a and b, minus the part beyond the
edge's line, which is an interval of half-width ``arccos(d / r)`` around the foot of the
perpendicular (``d`` = distance from u to that line). Every step is a closed-form angle, so the
computation is vectorised over points, radii and edges.

References
----------
Ripley, B. D. (1976). The second-order analysis of stationary point processes. Journal of
Applied Probability 13: 255–266 (isotropic correction, weight 2πr / length(∂b(u, r) ∩ W)).
"""

from __future__ import annotations

import numpy as np
import shapely

__all__ = [
    "EdgeTable",
    "boundary_distance",
    "circle_fraction_inside",
    "isotropic_weight",
    "oriented_segments",
]

_TWO_PI = 2.0 * np.pi


def oriented_segments(polygon: shapely.Geometry) -> np.ndarray:
    """The boundary edges of a polygon, exterior anticlockwise and holes clockwise.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, coordinates in metres.

    Returns
    -------
    numpy.ndarray, shape (E, 4)
        One row ``(ax, ay, bx, by)`` per edge, in metres; zero-length edges and collinear
        vertices are dropped (they change nothing).

    Examples
    --------
    >>> import shapely
    >>> oriented_segments(shapely.box(0, 0, 2, 1))  # anticlockwise exterior, one row per edge
    array([[2., 0., 2., 1.],
           [2., 1., 0., 1.],
           [0., 1., 0., 0.],
           [0., 0., 2., 0.]])
    """
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        raise ValueError("the window has no area")
    rows = []
    for part in shapely.get_parts(polygon):
        if part.geom_type != "Polygon":
            continue
        part = shapely.geometry.polygon.orient(shapely.simplify(part, 0.0), sign=1.0)
        for ring in [part.exterior, *part.interiors]:
            c = np.asarray(ring.coords)[:, :2]
            seg = np.hstack([c[:-1], c[1:]])
            keep = np.hypot(seg[:, 2] - seg[:, 0], seg[:, 3] - seg[:, 1]) > 0
            rows.append(seg[keep])
    if not rows:
        raise ValueError("the window has no polygonal part")
    return np.vstack(rows)


def boundary_distance(xy: np.ndarray, polygon: shapely.Geometry) -> np.ndarray:
    """Distance from each point to the window boundary (outer edge and holes).

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points in metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Distances in metres (0 for points on the boundary).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> boundary_distance(np.array([[5.0, 5.0], [1.0, 8.0]]), shapely.box(0, 0, 10, 10))
    array([5., 1.])
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    if xy.shape[0] == 0:
        return np.empty(0)
    seg = oriented_segments(polygon)
    if seg.shape[0] > 256:  # many vertices: shapely's indexed distance is faster
        boundary = polygon.boundary
        shapely.prepare(boundary)
        return shapely.distance(boundary, shapely.points(xy[:, 0], xy[:, 1]))
    # few edges: point-to-segment distances in numpy, in chunks of points
    out = np.empty(xy.shape[0])
    ax, ay, bx, by = (seg[:, k : k + 1] for k in range(4))
    ex, ey = bx - ax, by - ay
    len2 = ex**2 + ey**2
    step = max(1, 2_000_000 // seg.shape[0])
    for s in range(0, xy.shape[0], step):
        px, py = xy[s : s + step, 0], xy[s : s + step, 1]
        t = np.clip(((px - ax) * ex + (py - ay) * ey) / len2, 0.0, 1.0)
        out[s : s + step] = np.sqrt(
            np.min((ax + t * ex - px) ** 2 + (ay + t * ey - py) ** 2, axis=0)
        )
    return out


class EdgeTable:
    """Per-point, per-edge geometry for fast exact circle proportions.

    Everything that depends on the point but not on the radius is computed once here, so that
    the proportion for many (point, radius) pairs costs a few vectorised operations per
    (circle, edge) pair, and only for the edges within reach of the circle's centre (a
    per-point list of edges closer than the largest radius asked for: most circles near the
    boundary reach one or two edges, whatever E is).

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Circle centres in metres (normally inside the window).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, metres.

    Notes
    -----
    Memory is ``6 · n · E`` floats for n points and E edges; callers pass only the points
    near the boundary (the others have proportion 1 for every radius up to their boundary
    distance).
    """

    def __init__(self, xy: np.ndarray, polygon: shapely.Geometry) -> None:
        xy = np.asarray(xy, float).reshape(-1, 2)
        seg = oriented_segments(polygon)
        ax, ay, bx, by = (seg[:, k : k + 1] for k in range(4))
        ex, ey = bx - ax, by - ay
        length = np.hypot(ex, ey)
        pax, pay = ax - xy[:, 0], ay - xy[:, 1]  # (E, n)
        pbx, pby = bx - xy[:, 0], by - xy[:, 1]
        cross = pax * pby - pay * pbx
        d = np.abs(cross) / length
        ta = (pax * ex + pay * ey) / length
        tb = ta + length
        self.n_points = xy.shape[0]
        self.n_edges = seg.shape[0]
        self.sign = np.sign(cross)
        self.line_dist = d
        self.psi_a = np.arctan2(ta, d)
        self.psi_b = np.arctan2(tb, d)
        # distance to the segment itself: the circle can only cross the edge beyond it
        self.seg_dist = np.where(
            ta > 0, np.hypot(pax, pay), np.where(tb < 0, np.hypot(pbx, pby), d)
        )
        # winding number of each point (1 inside, 1/2 on an edge, 0 outside)
        self.winding = np.sum(self.sign * (self.psi_b - self.psi_a), axis=0) / _TWO_PI
        self._theta0 = _TWO_PI * self.winding
        self._cache: tuple[float, tuple[np.ndarray, ...]] | None = None

    def fraction(self, index: np.ndarray, r: np.ndarray) -> np.ndarray:
        """Proportion of the circle of radius ``r`` about point ``index`` inside the window.

        Parameters
        ----------
        index : numpy.ndarray of int, shape (m,)
            Which of the table's points.
        r : numpy.ndarray, shape (m,)
            Radii in metres (> 0).

        Returns
        -------
        numpy.ndarray, shape (m,)
            Proportions in [0, 1].
        """
        index = np.asarray(index, dtype=np.intp)
        r = np.broadcast_to(np.asarray(r, float), index.shape)
        if index.size == 0:
            return np.empty(0)
        return self._fraction(index, r, float(r.max()))

    def _reachable(self, r_top: float) -> tuple[np.ndarray, ...]:
        """The (point, edge) entries closer than ``r_top``, as per-point lists (cached).

        Points are in order and each point's edges in increasing order: ``start[p]`` and
        ``count[p]`` locate point p's entries in the per-entry arrays ``sd`` (distance to the
        segment), ``ld`` (to its line), ``npa``, ``pb`` (the angles −ψ_a, ψ_b) and ``sg`` (the
        orientation sign).
        """
        if self._cache is not None and self._cache[0] == r_top:
            return self._cache[1]
        pts, edges = np.nonzero(self.seg_dist.T < r_top)
        count = np.bincount(pts, minlength=self.n_points)
        start = np.cumsum(count) - count
        entries = (
            count,
            start,
            self.seg_dist[edges, pts],
            self.line_dist[edges, pts],
            -self.psi_a[edges, pts],
            self.psi_b[edges, pts],
            self.sign[edges, pts],
        )
        self._cache = (r_top, entries)
        return entries

    def _fraction(self, index: np.ndarray, r: np.ndarray, r_top: float) -> np.ndarray:
        """:meth:`fraction` for radii ``r`` all ≤ ``r_top`` (the edge lists are for r_top)."""
        count, start, sd, ld, npa, pb, sg = self._reachable(r_top)
        theta = self._theta0[index]
        # slot k holds each point's k-th reachable edge. Going slot by slot takes the edges of
        # every circle in increasing order, and an edge the circle does not reach (distance to
        # the segment ≥ r) subtracts exactly 0: the same floating-point result as a loop over
        # all edges that skips those out of reach.
        left = count[index]
        first = start[index]
        sel = None if left.min() > 0 else np.flatnonzero(left > 0)
        for k in range(int(count.max(initial=0))):
            if k:
                sel = np.flatnonzero(left > k) if sel is None else sel[left[sel] > k]
            f = first + k if sel is None else first[sel] + k
            rr = r if sel is None else r[sel]
            beta = ld[f] / rr
            np.minimum(beta, 1.0, out=beta)
            np.arccos(beta, out=beta)
            over = np.minimum(pb[f], beta)
            over += np.minimum(npa[f], beta)  # min(ψ_b, β) − max(ψ_a, −β), exactly
            np.maximum(over, 0.0, out=over)
            over *= sg[f]
            over *= sd[f] < rr
            if sel is None:
                theta -= over
            else:
                theta[sel] -= over
        theta /= _TWO_PI
        return np.clip(theta, 0.0, 1.0, out=theta)


def circle_fraction_inside(
    xy: np.ndarray, r: float | np.ndarray, polygon: shapely.Geometry
) -> np.ndarray:
    """Exact proportion of each circle's circumference that lies inside a polygon.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Circle centres in metres.
    r : float or numpy.ndarray, shape (n,)
        Radii in metres (> 0).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window (holes allowed), metres.

    Returns
    -------
    numpy.ndarray, shape (n,)
        length(circle(u, r) ∩ W) / (2πr), in [0, 1].

    References
    ----------
    Ripley (1976), J. Appl. Prob. 13: 255–266. Exact by the signed-triangle decomposition
    described in this module's docstring.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> square = shapely.box(0, 0, 10, 10)
    >>> circle_fraction_inside(np.array([[5.0, 5.0], [0.0, 0.0]]), 1.0, square)  # corner: 1/4
    array([1.  , 0.25])
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    r = np.broadcast_to(np.asarray(r, float), (xy.shape[0],))
    if np.any(~(r > 0)):
        raise ValueError("radii must be positive")
    table = EdgeTable(xy, polygon)
    return table.fraction(np.arange(xy.shape[0]), r)


def isotropic_weight(
    xy: np.ndarray, r: float | np.ndarray, polygon: shapely.Geometry
) -> np.ndarray:
    """Ripley's isotropic edge weight 2πr / length(circle(u, r) ∩ W).

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points in metres.
    r : float or numpy.ndarray
        Radii in metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Weights ≥ 1 (1 when the whole circle is inside; 4 for a small circle about a
        rectangle's corner); ``inf`` when no part of the circle is inside.

    References
    ----------
    Ripley (1976), J. Appl. Prob. 13: 255–266; Ripley (1977), JRSS B 39: 172–212.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> isotropic_weight(np.array([[5.0, 5.0], [0.0, 0.0]]), 1.0, shapely.box(0, 0, 10, 10))
    array([1., 4.])
    """
    frac = circle_fraction_inside(xy, r, polygon)
    with np.errstate(divide="ignore"):
        return 1.0 / frac
