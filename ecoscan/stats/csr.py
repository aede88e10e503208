"""Complete spatial randomness (CSR) in an arbitrary polygon.

Uniform points in a polygon (with holes, or a MultiPolygon) by vectorised rejection sampling
from its bounding box, using shapely 2's prepared ``contains_xy``. Used by every Monte Carlo
test in ecoscan, so that simulations happen in the exact plot shape.
"""

from __future__ import annotations

import zlib

import numpy as np
import shapely

__all__ = ["as_rng", "plot_rng", "uniform_in_polygon"]


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
    Rejection sampling: candidates are uniform in the bounding box and kept when inside the
    polygon, so the accepted points are exactly uniform on the polygon. Candidates are drawn
    in vectorised batches sized by the polygon's share of its bounding box.
    """
    gen = as_rng(rng)
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        raise ValueError("the polygon has no area")
    total = n * (1 if size is None else size)
    out = np.empty((total, 2))
    if total:
        shapely.prepare(polygon)
        x0, y0, x1, y1 = polygon.bounds
        frac = polygon.area / max((x1 - x0) * (y1 - y0), 1e-300)
        filled = 0
        while filled < total:
            need = total - filled
            m = int(need / frac * 1.1) + 16
            cx = gen.uniform(x0, x1, m)
            cy = gen.uniform(y0, y1, m)
            ok = shapely.contains_xy(polygon, cx, cy)
            k = min(int(ok.sum()), need)
            idx = np.flatnonzero(ok)[:k]
            out[filled : filled + k, 0] = cx[idx]
            out[filled : filled + k, 1] = cy[idx]
            filled += k
    if size is None:
        return out
    return out.reshape(size, n, 2)
