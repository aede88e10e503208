"""Bivariate second-order analysis: cross-K / cross-L with a random-labelling envelope.

For two kinds of plants A and B in one plot (two species; live and dead), with n_A and n_B
points and isotropic edge weights w (:mod:`ecoscan.stats.edge`):

* K_AB(r) = A / (n_A n_B) · Σ_{i∈A} Σ_{j∈B} w(x_i, d_ij) 1(d_ij ≤ r), L_AB = √(K_AB / π);
* K_AA, K_BB the univariate K of each kind (n(n − 1) form), and D(r) = K_BB(r) − K_AA(r).

Under **random labelling** (the kinds are a random split of the plants, whatever the plants'
own pattern) the expected K_AB, K_AA and K_BB all equal the K of all plants, so D = 0. The
envelope comes from relabelling the same positions at random (same n_A, n_B). Reading:

* L_AB above its envelope: B plants lie closer to A plants than a random split gives;
  below: the kinds are segregated.
* D above its envelope: B plants are more clustered among themselves than A plants (e.g. dead
  plants in patches among the living); below: B are more evenly spread than A.

The pairs and their edge weights are computed once; each relabelling only re-sums them.

References
----------
Ripley (1977), JRSS B 39: 172–212 (bivariate K). Diggle, P. J. (2003). Statistical Analysis
of Spatial Point Patterns, 2nd ed., Arnold (random labelling and K_BB − K_AA; from memory).
Myllymäki et al. (2017), JRSS B 79: 381–404 (global envelope).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from ecoscan.stats.csr import as_rng
from ecoscan.stats.envelopes import Envelope, envelope_test
from ecoscan.stats.second_order import PairTable, default_max_distance, r_grid

__all__ = ["CrossResult", "cross_k", "random_labelling_test"]


@dataclass(frozen=True)
class CrossResult:
    """Cross-L and D = K_BB − K_AA with random-labelling envelopes.

    Attributes
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    label_a, label_b : str
        The two kinds.
    n_a, n_b : int
        Plants of each kind.
    L_between_kinds : Envelope
        L_AB(r) in metres, with its envelope.
    D : Envelope
        K_BB(r) − K_AA(r) in m², with its envelope (centre 0).
    """

    r_m: np.ndarray
    label_a: str
    label_b: str
    n_a: int
    n_b: int
    L_between_kinds: Envelope
    D: Envelope


def _label_sums(pt: PairTable, is_b: np.ndarray, kc: np.ndarray, steps: int) -> np.ndarray:
    """Cumulative weighted pair sums per label combination, shape (4, steps): AA, AB, BA, BB."""
    code = 2 * is_b[pt.i].astype(np.intp) + is_b[pt.j]
    wt = np.where(code == 1, pt.w_i, np.where(code == 2, pt.w_j, pt.w_i + pt.w_j))
    c = np.bincount(code * (steps + 2) + kc, weights=wt, minlength=4 * (steps + 2))
    return np.cumsum(c.reshape(4, steps + 2), axis=1)[:, 1 : steps + 1]


def _functions(sums: np.ndarray, area: float, n_a: int, n_b: int) -> tuple[np.ndarray, ...]:
    k_ab = area / (n_a * n_b) * (sums[1] + sums[2])
    k_aa = area / (n_a * (n_a - 1)) * sums[0] if n_a > 1 else np.full(sums.shape[1], np.nan)
    k_bb = area / (n_b * (n_b - 1)) * sums[3] if n_b > 1 else np.full(sums.shape[1], np.nan)
    return np.sqrt(k_ab / np.pi), k_bb - k_aa


def _bins(d: np.ndarray, dr: float, steps: int) -> np.ndarray:
    return np.minimum(np.ceil(d / dr - 1e-9), steps + 1).astype(np.intp)


def cross_k(
    xy_a: np.ndarray,
    xy_b: np.ndarray,
    polygon: shapely.Geometry,
    max_distance_m: float,
    *,
    steps: int = 100,
) -> tuple[np.ndarray, np.ndarray]:
    """Isotropic-corrected cross-K of kind B around kind A.

    Parameters
    ----------
    xy_a, xy_b : numpy.ndarray, shape (n_a, 2), (n_b, 2)
        Points of each kind, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.
    max_distance_m : float
        Largest distance, metres.
    steps : int
        Number of distances.

    Returns
    -------
    r_m, K_ab_m2 : numpy.ndarray
        Distances (m) and K_AB (m²); K_AB = πr² when A and B are independent uniform patterns.

    References
    ----------
    Ripley (1977), JRSS B 39: 172–212.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> rng = np.random.default_rng(6)
    >>> a, b = rng.uniform(0, 50, (150, 2)), rng.uniform(0, 50, (150, 2))
    >>> r, k = cross_k(a, b, shapely.box(0, 0, 50, 50), 5.0, steps=5)
    >>> r
    array([1., 2., 3., 4., 5.])
    >>> bool(np.all(np.abs(k / (np.pi * r**2) - 1) < 0.3))  # independent: K_AB near pi r^2
    True
    """
    xy_a = np.asarray(xy_a, float).reshape(-1, 2)
    xy_b = np.asarray(xy_b, float).reshape(-1, 2)
    xy = np.vstack([xy_a, xy_b])
    is_b = np.r_[np.zeros(len(xy_a), bool), np.ones(len(xy_b), bool)]
    r = r_grid(max_distance_m, steps)
    pt = PairTable(xy, polygon, max_distance_m)
    sums = _label_sums(pt, is_b, _bins(pt.d, max_distance_m / steps, steps), steps)
    k_ab = polygon.area / (len(xy_a) * len(xy_b)) * (sums[1] + sums[2])
    return r, k_ab


def random_labelling_test(
    xy: np.ndarray,
    is_b: np.ndarray,
    polygon: shapely.Geometry,
    *,
    max_distance_m: float | None = None,
    steps: int = 100,
    simulations: int = 199,
    alpha: float = 0.05,
    test: str = "rank-length",
    rng: int | np.random.Generator | None = None,
    labels: tuple[str, str] = ("A", "B"),
) -> CrossResult:
    """Cross-L and K_BB − K_AA with global random-labelling envelopes.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        All plants of both kinds, metres.
    is_b : numpy.ndarray of bool, shape (n,)
        True for kind B, False for kind A.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The window.
    max_distance_m : float, optional
        Largest distance, metres (default :func:`ecoscan.stats.second_order.default_max_distance`).
    steps : int
        Number of distances.
    simulations : int
        Random relabellings.
    alpha : float
        Envelope level.
    test : {'rank-length', 'max-deviation'}
        Global test.
    rng : int or numpy.random.Generator, optional
        Seed or generator.
    labels : (str, str)
        Names of kinds A and B, for the record.

    Returns
    -------
    CrossResult

    References
    ----------
    Diggle (2003), Statistical Analysis of Spatial Point Patterns (random labelling; from
    memory); Myllymäki et al. (2017), JRSS B 79: 381–404.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> rng = np.random.default_rng(7)
    >>> xy = rng.uniform(0, 40, (120, 2))
    >>> is_dead = rng.random(120) < 0.4  # deaths at random among the plants
    >>> res = random_labelling_test(xy, is_dead, shapely.box(0, 0, 40, 40), max_distance_m=5.0,
    ...                             steps=10, simulations=39, rng=1, labels=("live", "dead"))
    >>> res.n_a + res.n_b, res.label_b
    (120, 'dead')
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    is_b = np.asarray(is_b, bool)
    n_b = int(is_b.sum())
    n_a = int(is_b.size - n_b)
    if n_a < 2 or n_b < 2:
        raise ValueError("each kind needs at least 2 plants")
    gen = as_rng(rng)
    if max_distance_m is None:
        max_distance_m = default_max_distance(polygon, xy.shape[0])
    r = r_grid(max_distance_m, steps)
    area = float(polygon.area)
    pt = PairTable(xy, polygon, max_distance_m)
    kc = _bins(pt.d, max_distance_m / steps, steps)
    l_obs, d_obs = _functions(_label_sums(pt, is_b, kc, steps), area, n_a, n_b)
    l_sim = np.empty((simulations, steps))
    d_sim = np.empty((simulations, steps))
    for s in range(simulations):
        lab = gen.permutation(is_b)
        l_sim[s], d_sim[s] = _functions(_label_sums(pt, lab, kc, steps), area, n_a, n_b)
    env_l = envelope_test(l_obs, l_sim, alpha=alpha, test=test)
    env_d = envelope_test(d_obs, d_sim, csr_value=np.zeros(steps), alpha=alpha, test=test)
    return CrossResult(r, str(labels[0]), str(labels[1]), n_a, n_b, env_l, env_d)
