"""Complete spatial randomness (CSR) in an arbitrary polygon.

Uniform points in a polygon (with holes, or a MultiPolygon) by area-weighted sampling from a
constrained Delaunay triangulation of the polygon: a triangle is chosen with probability
proportional to its area, then a point uniform inside it. No candidate ever falls outside
the polygon, so time and memory are proportional to the number of points asked for,
whatever the plot's shape (a thin diagonal strip costs the same as a square). Used by every
Monte Carlo test in ecoscan, so that simulations happen in the exact plot shape.
"""

from __future__ import annotations

import zlib
from functools import lru_cache

import numpy as np
import shapely

__all__ = [
    "SAMPLE_BLOCK",
    "as_rng",
    "plot_rng",
    "triangulate_polygon",
    "uniform_in_cells",
    "uniform_in_polygon",
]

#: Points drawn per block: bounds the temporary arrays (about 200 bytes per point) whatever
#: the number of points asked for. Fixed, so the same seed always gives the same points.
SAMPLE_BLOCK = 262_144


def as_rng(seed: int | np.random.Generator | None) -> np.random.Generator:
    """A :class:`numpy.random.Generator` from a seed, a generator, or None (fresh entropy)."""
    if isinstance(seed, np.random.Generator):
        return seed
    return np.random.default_rng(seed)


def plot_rng(seed: int, plot_id: str) -> np.random.Generator:
    """The random stream of one plot: ``SeedSequence([seed, crc32(plot_id)])``.

    A plot's numbers depend only on the run's seed and its own id (UTF-8 bytes hashed with
    :func:`zlib.crc32`), not on the other plots or their order.

    Parameters
    ----------
    seed : int
        The run's seed.
    plot_id : str
        The plot's id.

    Returns
    -------
    numpy.random.Generator
    """
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(plot_id.encode())]))


@lru_cache(maxsize=64)
def _triangles_from_wkb(wkb: bytes) -> tuple[np.ndarray, np.ndarray]:
    geom = shapely.from_wkb(wkb)
    tri = shapely.constrained_delaunay_triangles(geom)
    parts = shapely.get_parts(tri)
    parts = parts[shapely.area(parts) > 0]
    if parts.size == 0:
        raise ValueError("the polygon has no area")
    # each triangle is a closed ring of 4 vertices; keep the first 3
    corners = shapely.get_coordinates(shapely.get_exterior_ring(parts)).reshape(-1, 4, 2)[:, :3]
    area = shapely.area(parts)
    cum = np.cumsum(area)
    cum /= cum[-1]
    corners.setflags(write=False)
    cum.setflags(write=False)
    return corners, cum


def triangulate_polygon(polygon: shapely.Geometry) -> tuple[np.ndarray, np.ndarray]:
    """Constrained Delaunay triangles of a polygon and their cumulative area shares.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, metres; holes are respected (no triangle covers a hole).

    Returns
    -------
    corners : numpy.ndarray, shape (t, 3, 2)
        The three corners of each triangle, metres (read-only).
    cumulative_share : numpy.ndarray, shape (t,)
        Cumulative area share of the triangles, ending at 1 (read-only).

    Examples
    --------
    >>> import shapely
    >>> corners, cum = triangulate_polygon(shapely.box(0, 0, 2, 1))
    >>> corners.shape, float(cum[-1])
    ((2, 3, 2), 1.0)
    """
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        raise ValueError("the polygon has no area")
    return _triangles_from_wkb(shapely.to_wkb(polygon))


def uniform_in_polygon(
    polygon: shapely.Geometry,
    n: int,
    *,
    size: int | None = None,
    rng: int | np.random.Generator | None = None,
) -> np.ndarray:
    """Draw points uniformly at random inside a polygon.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, in metres. Holes are excluded.
    n : int
        Points per pattern.
    size : int, optional
        Number of independent patterns. When given the result has shape ``(size, n, 2)``,
        otherwise ``(n, 2)``.
    rng : int or numpy.random.Generator, optional
        Seed or generator; the same seed gives the same points.

    Returns
    -------
    numpy.ndarray
        Coordinates in metres.

    Notes
    -----
    The polygon is cut into triangles by a constrained Delaunay triangulation
    (:func:`shapely.constrained_delaunay_triangles`, cached per polygon). For each point a
    triangle is chosen with probability proportional to its area (inverse of the cumulative
    area share), and a point uniform in the triangle ABC is A + u·(B − A) + v·(C − A) with
    u, v uniform on [0, 1], reflected to (1 − u, 1 − v) when u + v > 1. The triangles tile
    the polygon exactly, so the points are exactly uniform on it; work and memory grow only
    with the number of points (drawn in blocks of :data:`SAMPLE_BLOCK`), never with the
    polygon's share of its bounding box.

    Examples
    --------
    >>> import shapely
    >>> xy = uniform_in_polygon(shapely.box(0, 0, 10, 2), 5, rng=1)
    >>> xy.shape, bool(((xy >= 0) & (xy <= [10, 2])).all())
    ((5, 2), True)
    """
    gen = as_rng(rng)
    corners, cum = triangulate_polygon(polygon)
    total = n * (1 if size is None else size)
    out = np.empty((total, 2))
    for start in range(0, total, SAMPLE_BLOCK):
        m = min(SAMPLE_BLOCK, total - start)
        u = gen.random((m, 3))
        t = np.minimum(np.searchsorted(cum, u[:, 0], side="right"), cum.size - 1)
        a, b = u[:, 1], u[:, 2]
        flip = a + b > 1.0
        a[flip] = 1.0 - a[flip]
        b[flip] = 1.0 - b[flip]
        c = corners[t]
        out[start : start + m] = (
            c[:, 0] + a[:, None] * (c[:, 1] - c[:, 0]) + b[:, None] * (c[:, 2] - c[:, 0])
        )
    if size is None:
        return out
    return out.reshape(size, n, 2)


#: Cells per side of the grid that orders :func:`uniform_in_cells` (fixed, so the same seed
#: always gives the same points).
ORDER_CELLS = 64


@lru_cache(maxsize=16)
def _cell_triangles(
    wkb: bytes, inner_wkb: bytes | None, cells: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    geom = shapely.from_wkb(wkb)
    x0, y0, x1, y1 = geom.bounds
    side = max(x1 - x0, y1 - y0) / cells
    nx = max(1, int(np.ceil((x1 - x0) / side)))
    ny = max(1, int(np.ceil((y1 - y0) / side)))
    # cells in serpentine order (east along even rows, west along odd rows): consecutive
    # cells are neighbours, so points drawn cell by cell come out in spatial order
    row, col = np.divmod(np.arange(nx * ny), nx)
    col = np.where(row % 2 == 0, col, nx - 1 - col)
    boxes = shapely.box(
        x0 + col * side, y0 + row * side, x0 + (col + 1) * side, y0 + (row + 1) * side
    )
    if inner_wkb is None:
        regions = [(geom, False)]
    else:
        inner = shapely.intersection(geom, shapely.from_wkb(inner_wkb))
        regions = [(inner, True), (shapely.difference(geom, inner), False)]
    parts, owner, focal = [], [], []
    for region, is_inner in regions:
        if region.is_empty:
            continue
        # polygonal parts of each cell's piece (clipping can leave lines or points too)
        pieces, cell = shapely.get_parts(shapely.intersection(boxes, region), return_index=True)
        keep = (shapely.get_type_id(pieces) == 3) & (shapely.area(pieces) > 0)
        pieces, cell = pieces[keep], cell[keep]
        tri, idx = shapely.get_parts(
            shapely.constrained_delaunay_triangles(pieces), return_index=True
        )
        ok = shapely.area(tri) > 0
        parts.append(tri[ok])
        owner.append(cell[idx[ok]])
        focal.append(np.full(int(ok.sum()), is_inner))
    tri = np.concatenate(parts)
    order = np.argsort(np.concatenate(owner), kind="stable")
    tri = tri[order]
    corners = shapely.get_coordinates(shapely.get_exterior_ring(tri)).reshape(-1, 4, 2)[:, :3]
    base = corners[:, 0].copy()
    e1 = corners[:, 1] - base
    e2 = corners[:, 2] - base
    share = shapely.area(tri)
    share = share / share.sum()
    flags = np.concatenate(focal)[order]
    for a in (base, e1, e2, share, flags):
        a.setflags(write=False)
    return base, e1, e2, share, flags


def uniform_in_cells(
    polygon: shapely.Geometry,
    n: int,
    *,
    inner: shapely.Geometry | None = None,
    rng: int | np.random.Generator | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Uniform random points in a polygon, in spatial order, marked inside/outside ``inner``.

    The same distribution as :func:`uniform_in_polygon` (n independent points uniform on the
    polygon), drawn differently for speed with many points: the polygon is cut by a grid of
    :data:`ORDER_CELLS` cells per side, each piece triangulated once (cached), the number of
    points per triangle drawn from one multinomial with the triangles' area shares, and each
    point placed uniformly in its triangle. The points come out cell by cell along a
    serpentine path, so neighbours in space are mostly neighbours in memory (a KD-tree over
    them builds and searches faster), and whether a point lies in ``inner`` is known from its
    triangle without a point-in-polygon test.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, metres; holes are excluded.
    n : int
        Number of points.
    inner : shapely.Polygon, optional
        A region inside the polygon (e.g. the plot shrunk by a guard width).
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    xy : numpy.ndarray, shape (n, 2)
        The points, metres, in the cells' order (not in draw order).
    in_inner : numpy.ndarray of bool, shape (n,)
        Whether each point lies in ``inner`` (all False without it).

    Notes
    -----
    Given the counts per triangle, the points are independent and uniform in their triangles,
    and multinomial counts with area shares make each point's triangle independent with
    probability proportional to its area: the unordered set is exactly n independent uniform
    points (a binomial process). Statistics that do not depend on the order of the points
    (nearest-neighbour distances, their mean) have exactly the distribution they have under
    :func:`uniform_in_polygon`; the numbers drawn from a given seed differ.

    Examples
    --------
    >>> import shapely
    >>> plot, west = shapely.box(0, 0, 10, 10), shapely.box(0, 0, 5, 10)
    >>> xy, inside = uniform_in_cells(plot, 500, inner=west, rng=1)
    >>> xy.shape, bool((inside == (xy[:, 0] < 5)).all())
    ((500, 2), True)
    """
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        raise ValueError("the polygon has no area")
    gen = as_rng(rng)
    inner_wkb = None if inner is None or inner.is_empty else shapely.to_wkb(inner)
    base, e1, e2, share, flags = _cell_triangles(shapely.to_wkb(polygon), inner_wkb, ORDER_CELLS)
    counts = gen.multinomial(int(n), share)
    u = gen.random((int(n), 2))
    a, b = u[:, 0], u[:, 1]
    flip = a + b > 1.0
    a[flip] = 1.0 - a[flip]
    b[flip] = 1.0 - b[flip]
    xy = np.repeat(base, counts, axis=0)
    xy += a[:, None] * np.repeat(e1, counts, axis=0)
    xy += b[:, None] * np.repeat(e2, counts, axis=0)
    return xy, np.repeat(flags, counts)
