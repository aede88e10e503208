"""Distance distribution functions: nearest-neighbour G, empty-space F, and J.

* G(r): distribution of the distance from a plant to its nearest neighbour.
* F(r): distribution of the distance from an arbitrary location in the plot to the nearest
  plant (the "empty space" function), estimated from a regular grid of test locations.
* J(r) = (1 − G(r)) / (1 − F(r)): 1 under complete spatial randomness, < 1 clustered,
  > 1 regular (van Lieshout & Baddeley 1996).

Under complete spatial randomness with intensity λ, G(r) = F(r) = 1 − exp(−λπr²).

Edge corrections: the Kaplan–Meier estimator treats the distance to the boundary as a
censoring time (Baddeley & Gill 1997), and the border (reduced-sample) estimator uses at
distance r only the points at least r from the boundary.

References
----------
Baddeley, A. J. & Gill, R. D. (1997). Kaplan–Meier estimators of interpoint distance
distributions for spatial point processes. Annals of Statistics 25: 263–292.
van Lieshout, M. N. M. & Baddeley, A. J. (1996). A nonparametric measure of spatial
interaction in point patterns. Statistica Neerlandica 50: 344–361.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from scipy.spatial import cKDTree

from ecoscan.stats.edge import boundary_distance
from ecoscan.stats.nearest import nn_distances

__all__ = [
    "DistanceFunction",
    "EmptySpaceGrid",
    "csr_distance_cdf",
    "empty_space_function",
    "j_function",
    "kaplan_meier_cdf",
    "nn_function",
    "reduced_sample_cdf",
]

#: Default number of test locations for F.
F_GRID_POINTS = 4096


@dataclass(frozen=True)
class DistanceFunction:
    """A distance distribution function on a grid of distances.

    Attributes
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    km : numpy.ndarray
        Kaplan–Meier estimate (probability, 0–1).
    border : numpy.ndarray
        Border (reduced-sample) estimate; NaN where no location is r from the boundary.
    theoretical : numpy.ndarray
        1 − exp(−λπr²), the value under complete spatial randomness.
    """

    r_m: np.ndarray
    km: np.ndarray
    reduced_sample: np.ndarray
    csr_value: np.ndarray


def csr_distance_cdf(r_m: np.ndarray, intensity_per_m2: float) -> np.ndarray:
    """1 − exp(−λπr²): G and F under complete spatial randomness (Poisson process).

    Parameters
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    intensity_per_m2 : float
        λ, points per m².

    Examples
    --------
    >>> import numpy as np
    >>> r = np.sqrt(np.log(2) / np.pi)  # the median distance at intensity 1 per m²
    >>> csr_distance_cdf(np.array([0.0, r]), 1.0)
    array([0. , 0.5])
    """
    r = np.asarray(r_m, float)
    return 1.0 - np.exp(-intensity_per_m2 * np.pi * r**2)


def kaplan_meier_cdf(distance_m: np.ndarray, censor_m: np.ndarray, r_m: np.ndarray) -> np.ndarray:
    """Kaplan–Meier estimate of P(distance ≤ r) with right-censoring at ``censor_m``.

    Parameters
    ----------
    distance_m : numpy.ndarray
        Observed distances (to the nearest plant), metres.
    censor_m : numpy.ndarray
        Censoring distances (to the plot boundary), metres.
    r_m : numpy.ndarray
        Where to evaluate, metres.

    Returns
    -------
    numpy.ndarray
        The estimate at each r.

    References
    ----------
    Baddeley & Gill (1997), Ann. Statist. 25: 263–292: observation min(d, c), an event when
    d ≤ c. Tied events and censorings at the same distance: events first (common practice).

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([1.0, 2.0, 3.0, 4.0])
    >>> kaplan_meier_cdf(d, np.full(4, 10.0), np.array([0.5, 2.0, 4.0]))  # no censoring: ECDF
    array([0. , 0.5, 1. ])
    """
    d = np.asarray(distance_m, float)
    c = np.asarray(censor_m, float)
    t = np.minimum(d, c)
    event = d <= c
    order = np.lexsort((~event, t))
    t, event = t[order], event[order]
    m = t.size
    if m == 0:
        return np.full(np.shape(r_m), np.nan)
    at_risk = m - np.arange(m)
    surv = np.cumprod(1.0 - event / at_risk)
    k = np.searchsorted(t, r_m, side="right")
    s = np.where(k > 0, surv[np.maximum(k - 1, 0)], 1.0)
    return 1.0 - s


def reduced_sample_cdf(distance_m: np.ndarray, censor_m: np.ndarray, r_m: np.ndarray) -> np.ndarray:
    """Reduced-sample estimate #{d ≤ r ≤ c} / #{c ≥ r} (NaN where no location has c ≥ r).

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([1.0, 2.0, 3.0, 4.0])
    >>> reduced_sample_cdf(d, np.array([10.0, 10.0, 10.0, 1.5]), np.array([1.0, 2.0]))
    array([0.25      , 0.66666667])
    """
    d = np.asarray(distance_m, float)
    c = np.asarray(censor_m, float)
    r = np.asarray(r_m, float)
    cs = np.sort(c)
    denom = c.size - np.searchsorted(cs, r, side="left")
    # numerator: locations with d <= r <= c, counted with sorted arrays
    ok = d <= c
    lo = np.sort(d[ok])
    hi = np.sort(c[ok])
    num = np.searchsorted(lo, r, side="right") - np.searchsorted(hi, r, side="left")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denom > 0, num / denom, np.nan)


def nn_function(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    r_m: np.ndarray,
    *,
    boundary_m: np.ndarray | None = None,
) -> DistanceFunction:
    """The nearest-neighbour distance distribution G(r).

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points inside the window, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.
    r_m : numpy.ndarray
        Distances, metres.
    boundary_m : numpy.ndarray, optional
        Precomputed distances of the points to the boundary.

    Returns
    -------
    DistanceFunction

    References
    ----------
    Baddeley & Gill (1997), Ann. Statist. 25: 263–292 (Kaplan–Meier G).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T  # every neighbour 2 m away
    >>> G = nn_function(grid, shapely.box(0, 0, 20, 20), np.array([1.9, 2.1]))
    >>> G.km
    array([0., 1.])
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    r = np.asarray(r_m, float)
    b = boundary_distance(xy, polygon) if boundary_m is None else boundary_m
    d = nn_distances(xy)
    lam = xy.shape[0] / polygon.area
    return DistanceFunction(
        r, kaplan_meier_cdf(d, b, r), reduced_sample_cdf(d, b, r), csr_distance_cdf(r, lam)
    )


class EmptySpaceGrid:
    """A regular grid of test locations inside the window, with their boundary distances.

    Built once per plot and reused for every simulated pattern.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window, metres.
    n_points : int
        About how many test locations.
    """

    def __init__(self, polygon: shapely.Geometry, n_points: int = F_GRID_POINTS) -> None:
        x0, y0, x1, y1 = polygon.bounds
        step = float(np.sqrt(polygon.area / max(n_points, 16)))
        gx = np.arange(x0 + step / 2, x1, step)
        gy = np.arange(y0 + step / 2, y1, step)
        X, Y = np.meshgrid(gx, gy)
        X, Y = X.ravel(), Y.ravel()
        shapely.prepare(polygon)
        inside = shapely.contains_xy(polygon, X, Y)
        self.xy = np.column_stack([X[inside], Y[inside]])
        if self.xy.shape[0] == 0:  # a sliver narrower than the step: use a representative point
            p = polygon.representative_point()
            self.xy = np.array([[p.x, p.y]])
        self.step_m = step
        self.boundary_m = boundary_distance(self.xy, polygon)


def empty_space_function(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    r_m: np.ndarray,
    *,
    grid: EmptySpaceGrid | None = None,
) -> DistanceFunction:
    """The empty-space function F(r) from a regular grid of test locations.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points inside the window, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.
    r_m : numpy.ndarray
        Distances, metres.
    grid : EmptySpaceGrid, optional
        Precomputed test locations (default: about 4,096 in the window).

    Returns
    -------
    DistanceFunction

    References
    ----------
    Baddeley & Gill (1997), Ann. Statist. 25: 263–292 (Kaplan–Meier F on a grid).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T  # square lattice, 2 m apart
    >>> F = empty_space_function(grid, shapely.box(0, 0, 20, 20), np.array([1.0, 1.5]))
    >>> bool(abs(F.km[0] - np.pi / 4) < 0.02)  # discs of 1 m cover pi/4 of each 2 x 2 m cell
    True
    >>> float(F.km[1])  # no place is farther than sqrt(2) m from a plant
    1.0
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    r = np.asarray(r_m, float)
    grid = EmptySpaceGrid(polygon) if grid is None else grid
    lam = xy.shape[0] / polygon.area
    if xy.shape[0] == 0:
        zero = np.zeros_like(r)
        return DistanceFunction(r, zero, zero, csr_distance_cdf(r, lam))
    e, _ = cKDTree(xy).query(grid.xy, k=1)
    b = grid.boundary_m
    return DistanceFunction(
        r, kaplan_meier_cdf(e, b, r), reduced_sample_cdf(e, b, r), csr_distance_cdf(r, lam)
    )


def j_function(G: np.ndarray, F: np.ndarray) -> np.ndarray:
    """J = (1 − G) / (1 − F); NaN where F = 1 (no empty space left at that distance).

    References
    ----------
    van Lieshout & Baddeley (1996), Statistica Neerlandica 50: 344–361.

    Examples
    --------
    >>> import numpy as np
    >>> j_function(np.array([0.2, 0.5]), np.array([0.2, 1.0]))  # J = 1 under randomness
    array([ 1., nan])
    """
    G = np.asarray(G, float)
    F = np.asarray(F, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(1.0 - F > 1e-12, (1.0 - G) / (1.0 - F), np.nan)
