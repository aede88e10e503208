"""Nearest-neighbour distances and the Clark–Evans aggregation index.

Clark, P. J. & Evans, F. C. (1954). Distance to nearest neighbor as a measure of spatial
relationships in populations. Ecology 35(4): 445–453.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats as sps
from scipy.spatial import cKDTree

__all__ = ["CE_SE_CONSTANT", "ClarkEvansResult", "clark_evans", "nn_distances"]

#: Standard-error constant of Clark & Evans (1954): sqrt((4 - pi) / (4 pi)) = 0.26136.
CE_SE_CONSTANT = float(np.sqrt((4.0 - np.pi) / (4.0 * np.pi)))


def nn_distances(xy: np.ndarray, others: np.ndarray | None = None) -> np.ndarray:
    """Distance from each point to its nearest neighbour, with a KD-tree.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Focal points, metres.
    others : numpy.ndarray, shape (m, 2), optional
        Candidate neighbours (default: ``xy`` itself, excluding each point from its own
        search). When given, each focal point must also appear in ``others``; the nearest
        *other* point is returned (the point itself, at distance 0, is skipped once).

    Returns
    -------
    numpy.ndarray, shape (n,)
        Distances in metres; ``inf`` when there is no other point. Coincident points give 0.
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    pool = xy if others is None else np.asarray(others, float).reshape(-1, 2)
    if xy.shape[0] == 0:
        return np.empty(0)
    if pool.shape[0] < 2:
        return np.full(xy.shape[0], np.inf)
    tree = cKDTree(pool)
    d, _ = tree.query(xy, k=2)
    return d[:, 1]


@dataclass(frozen=True)
class ClarkEvansResult:
    """Clark–Evans test result.

    Attributes
    ----------
    statistic : float
        R = observed mean NN distance / expected mean under CSR.
    z : float
        (observed − expected) / standard error.
    pvalue : float
        p-value for ``alternative`` from the normal approximation.
    n : int
        Number of points.
    density_per_m2 : float
        n / area.
    mean_nn_m : float
        Observed mean nearest-neighbour distance.
    expected_nn_m : float
        0.5 / sqrt(density).
    se_m : float
        0.26136 / sqrt(n · density).
    """

    statistic: float
    z: float
    pvalue: float
    n: int
    density_per_m2: float
    mean_nn_m: float
    expected_nn_m: float
    se_m: float


def _normal_p(z: float, alternative: str) -> float:
    if not np.isfinite(z):
        return float("nan")
    if alternative == "two-sided":
        return float(min(1.0, 2.0 * sps.norm.sf(abs(z))))
    if alternative == "clustered":  # smaller NN distances than CSR
        return float(sps.norm.cdf(z))
    if alternative == "regular":
        return float(sps.norm.sf(z))
    raise ValueError("alternative must be 'two-sided', 'clustered' or 'regular'")


def clark_evans(
    xy: np.ndarray, area_m2: float, *, alternative: str = "two-sided"
) -> ClarkEvansResult:
    """Clark–Evans nearest-neighbour index without edge correction.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Point coordinates in metres.
    area_m2 : float
        Area of the study window in m².
    alternative : {'two-sided', 'clustered', 'regular'}
        Alternative hypothesis.

    Returns
    -------
    ClarkEvansResult

    References
    ----------
    Clark & Evans (1954), Ecology 35: 445–453: r̄_E = 1 / (2 √ρ), σ = 0.26136 / √(n ρ),
    R = r̄_A / r̄_E, z = (r̄_A − r̄_E) / σ.
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    rho = n / area_m2
    if n < 2:
        nan = float("nan")
        return ClarkEvansResult(nan, nan, nan, n, rho, nan, nan, nan)
    d = nn_distances(xy)
    mean = float(d.mean())
    expected = 0.5 / np.sqrt(rho)
    se = CE_SE_CONSTANT / np.sqrt(n * rho)
    z = (mean - expected) / se
    return ClarkEvansResult(
        float(mean / expected),
        float(z),
        _normal_p(z, alternative),
        n,
        rho,
        mean,
        float(expected),
        float(se),
    )
