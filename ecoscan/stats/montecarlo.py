"""Monte Carlo nearest-neighbour test in the exact plot polygon.

The observed mean nearest-neighbour distance is ranked among the means of ``N`` patterns of
the same number of points placed by complete spatial randomness (CSR) in the same polygon.
Because the simulated patterns meet the same edges as the observed one, the test needs no
edge correction and is exact for any plot shape, holes included.

Besag, J. & Diggle, P. J. (1977). Simple Monte Carlo tests for spatial pattern. Applied
Statistics 26(3): 327–333.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ecoscan.stats.csr import as_rng, uniform_in_polygon

__all__ = [
    "BATCH_POINTS",
    "DIRECTIONS",
    "MonteCarloResult",
    "mean_nn_batch",
    "monte_carlo_nn",
    "rank_pvalues",
]

#: Accepted alternatives: 'clustered' = shorter NN distances than CSR, 'regular' = longer.
DIRECTIONS = ("either", "clustered", "regular")

#: Points simulated per batch; fixed so that the same seed always gives the same numbers.
BATCH_POINTS = 1_000_000


def mean_nn_batch(patterns: np.ndarray) -> np.ndarray:
    """Mean nearest-neighbour distance of each of many patterns.

    Parameters
    ----------
    patterns : numpy.ndarray, shape (m, n, 2)
        ``m`` patterns of ``n ≥ 2`` points each, metres.

    Returns
    -------
    numpy.ndarray, shape (m,)
        Mean NN distance of each pattern, metres.

    Notes
    -----
    One small KD-tree per pattern (the loop runs over patterns, never over points). For
    patterns of 300–1,000 points this measured 1.2–2.5 times faster than one joint tree over
    all patterns laid side by side (each small tree fits in the processor cache); for very
    small patterns the joint tree was about 1.5 times faster, but per-pattern trees keep one
    code path and bounded memory.
    """
    p = np.asarray(patterns, float)
    if p.ndim != 3 or p.shape[2] != 2 or p.shape[1] < 2:
        raise ValueError("patterns must have shape (m, n, 2) with n >= 2")
    out = np.empty(p.shape[0])
    for i in range(p.shape[0]):
        d, _ = cKDTree(p[i]).query(p[i], k=2)
        out[i] = d[:, 1].mean()
    return out


def rank_pvalues(
    observed: np.ndarray | float, simulated: np.ndarray, direction: str = "either"
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Monte Carlo rank p-values, (1 + k) / (N + 1), vectorised over tests.

    Parameters
    ----------
    observed : float or numpy.ndarray, shape (t,)
        Observed mean NN distance(s), metres.
    simulated : numpy.ndarray, shape (N,) or (t, N)
        Simulated values under the null hypothesis, metres.
    direction : {'either', 'clustered', 'regular'}
        'clustered' uses the lower tail (short distances), 'regular' the upper tail,
        'either' min(1, 2 · min(p_lower, p_upper)).

    Returns
    -------
    pvalue, p_lower, p_upper : numpy.ndarray
        ``p_lower = (1 + #{sim ≤ obs}) / (N + 1)``, ``p_upper = (1 + #{sim ≥ obs}) / (N + 1)``;
        ties count against the observed value (conservative).

    References
    ----------
    Besag & Diggle (1977), Applied Statistics 26: 327–333.
    """
    if direction not in DIRECTIONS:
        raise ValueError("direction must be 'either', 'clustered' or 'regular'")
    obs = np.asarray(observed, float)
    sim = np.asarray(simulated, float)
    big_n = sim.shape[-1]
    lower = (1.0 + np.sum(sim <= obs[..., None], axis=-1)) / (big_n + 1.0)
    upper = (1.0 + np.sum(sim >= obs[..., None], axis=-1)) / (big_n + 1.0)
    if direction == "clustered":
        p = lower
    elif direction == "regular":
        p = upper
    else:
        p = np.minimum(1.0, 2.0 * np.minimum(lower, upper))
    return p, lower, upper


@dataclass(frozen=True)
class MonteCarloResult:
    """Monte Carlo test of the mean nearest-neighbour distance.

    Attributes
    ----------
    statistic : float
        Observed mean NN distance, metres.
    pvalue : float
        Rank p-value for ``direction``.
    p_lower : float
        (1 + #{simulated ≤ observed}) / (N + 1): small when the points are clustered.
    p_upper : float
        (1 + #{simulated ≥ observed}) / (N + 1): small when the points are regular.
    simulations : int
        N, the number of simulated patterns.
    direction : str
        The alternative hypothesis.
    expected_nn_m : float
        Mean of the simulated means: the expected mean NN distance under CSR in this exact
        polygon, metres.
    simulated_nn_m : numpy.ndarray, shape (N,)
        The simulated means, metres (for histograms).
    side : str
        ``'clustered'`` when the observed mean lies below the simulated median, else
        ``'regular'``.
    """

    statistic: float
    pvalue: float
    p_lower: float
    p_upper: float
    simulations: int
    direction: str
    expected_nn_m: float
    simulated_nn_m: np.ndarray
    side: str


def monte_carlo_nn(
    xy: np.ndarray,
    polygon,
    *,
    simulations: int = 999,
    direction: str = "either",
    rng: int | np.random.Generator | None = None,
    observed_mean_m: float | None = None,
) -> MonteCarloResult:
    """Monte Carlo test of complete spatial randomness with the mean NN distance.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Observed points inside ``polygon``, metres (n ≥ 2).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The exact plot outline, metres; holes are excluded from the simulations.
    simulations : int
        Number of simulated CSR patterns N (≥ 1; 999 gives p-values in steps of 0.001).
    direction : {'either', 'clustered', 'regular'}
        Alternative hypothesis; see :func:`rank_pvalues`.
    rng : int or numpy.random.Generator, optional
        Seed or generator; the same seed gives the same p-value.
    observed_mean_m : float, optional
        The observed mean NN distance in metres when already known.

    Returns
    -------
    MonteCarloResult

    Notes
    -----
    Each simulated pattern has the same n as the observed one (CSR conditional on n, i.e. a
    binomial process), drawn by vectorised rejection sampling with shapely's ``contains_xy``
    (:func:`ecoscan.stats.csr.uniform_in_polygon`). Simulations are made in batches of about
    one million points so memory stays bounded for large plots; the batch size depends only
    on n, so results are reproducible.

    References
    ----------
    Besag & Diggle (1977), Applied Statistics 26: 327–333.
    """
    if direction not in DIRECTIONS:
        raise ValueError("direction must be 'either', 'clustered' or 'regular'")
    if int(simulations) < 1:
        raise ValueError("simulations must be at least 1")
    simulations = int(simulations)
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    if n < 2:
        raise ValueError("the Monte Carlo NN test needs at least 2 points")
    gen = as_rng(rng)
    if observed_mean_m is None:
        observed_mean_m = float(mean_nn_batch(xy[None])[0])
    per_batch = max(1, BATCH_POINTS // n)
    sims = np.empty(simulations)
    done = 0
    while done < simulations:
        b = min(per_batch, simulations - done)
        pats = uniform_in_polygon(polygon, n, size=b, rng=gen)
        sims[done : done + b] = mean_nn_batch(pats)
        done += b
    p, lo, up = rank_pvalues(observed_mean_m, sims, direction)
    side = "clustered" if observed_mean_m < float(np.median(sims)) else "regular"
    return MonteCarloResult(
        float(observed_mean_m),
        float(p),
        float(lo),
        float(up),
        simulations,
        direction,
        float(sims.mean()),
        sims,
        side,
    )
