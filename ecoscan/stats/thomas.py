"""Thomas cluster process: closed-form K, simulation in a polygon, minimum-contrast fit.

A (modified) Thomas process places parents as a Poisson process of intensity κ; each parent
has a Poisson number of offspring with mean μ, displaced from it by independent isotropic
Gaussian offsets of standard deviation σ in each coordinate. Only the offspring are seen.
Its intensity is λ = κ μ, and its K function is known in closed form,

    K(r) = π r² + (1 − exp(−r² / (4 σ²))) / κ,

with pair correlation g(r) = 1 + exp(−r² / (4 σ²)) / (4 π κ σ²).

References
----------
Thomas, M. (1949). A generalization of Poisson's binomial limit for use in ecology.
Biometrika 36: 18–25. Diggle, P. J. (1983). Statistical Analysis of Spatial Point Patterns,
Academic Press (minimum-contrast estimation, the exponent 1/4). Møller, J. & Waagepetersen,
R. P. (2004). Statistical Inference and Simulation for Spatial Point Processes, Chapman &
Hall (the K function above).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from scipy.optimize import minimize

from ecoscan.stats.csr import as_rng
from ecoscan.stats.envelopes import envelope_test
from ecoscan.stats.second_order import default_max_distance, second_order

__all__ = [
    "ThomasFit",
    "fit_thomas",
    "thomas_k",
    "thomas_pair_correlation",
    "thomas_pattern",
    "thomas_patterns_given_n",
]

#: Parents are placed in the plot's bounding box grown by this many σ: beyond it a parent's
#: offspring reach the plot with probability below 1e-4 per coordinate (Gaussian tail).
PARENT_MARGIN_SIGMAS = 4.0

#: Exponent c of the contrast ∫ (K̂^c − K^c)² dr (Diggle 1983 recommends 1/4 for clustered
#: patterns; from memory).
CONTRAST_EXPONENT = 0.25

#: Largest number of rejection rounds when keeping offspring inside the plot.
_MAX_ROUNDS = 400
#: Largest number of fresh parent draws for patterns whose offspring rarely land inside.
_MAX_RESTARTS = 50


def thomas_k(r_m: np.ndarray, parent_intensity_per_m2: float, sigma_m: float) -> np.ndarray:
    """Ripley's K of a Thomas process, m².

    Parameters
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    parent_intensity_per_m2 : float
        κ, parents per m².
    sigma_m : float
        σ, standard deviation of the offspring offsets in each coordinate, metres.

    Returns
    -------
    numpy.ndarray
        K(r) = π r² + (1 − exp(−r²/(4σ²))) / κ, m².

    Examples
    --------
    >>> import numpy as np
    >>> bool(thomas_k(np.array([0.0]), 0.01, 1.0)[0] == 0.0)
    True
    """
    r = np.asarray(r_m, float)
    return np.pi * r**2 + (1.0 - np.exp(-(r**2) / (4.0 * sigma_m**2))) / parent_intensity_per_m2


def thomas_pair_correlation(
    r_m: np.ndarray, parent_intensity_per_m2: float, sigma_m: float
) -> np.ndarray:
    """Pair correlation g(r) of a Thomas process (dimensionless).

    Parameters
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    parent_intensity_per_m2 : float
        κ, parents per m².
    sigma_m : float
        σ, metres.

    Returns
    -------
    numpy.ndarray
        g(r) = 1 + exp(−r²/(4σ²)) / (4 π κ σ²).

    Examples
    --------
    >>> import numpy as np
    >>> round(float(thomas_pair_correlation(np.array([1e6]), 0.01, 1.0)[0]), 6)
    1.0
    """
    r = np.asarray(r_m, float)
    s2 = sigma_m**2
    return 1.0 + np.exp(-(r**2) / (4.0 * s2)) / (4.0 * np.pi * parent_intensity_per_m2 * s2)


def _parents(
    polygon: shapely.Geometry, kappa: float, sigma: float, gen: np.random.Generator
) -> np.ndarray:
    x0, y0, x1, y1 = polygon.bounds
    m = PARENT_MARGIN_SIGMAS * sigma
    x0, y0, x1, y1 = x0 - m, y0 - m, x1 + m, y1 + m
    count = gen.poisson(kappa * (x1 - x0) * (y1 - y0))
    return np.column_stack([gen.uniform(x0, x1, count), gen.uniform(y0, y1, count)])


def _check(polygon: shapely.Geometry, kappa: float, sigma: float) -> None:
    if polygon is None or polygon.is_empty or not polygon.area > 0:
        raise ValueError("the polygon has no area")
    if not (kappa > 0 and np.isfinite(kappa)):
        raise ValueError("the parent intensity must be positive")
    if not (sigma > 0 and np.isfinite(sigma)):
        raise ValueError("the cluster sigma must be positive")
    x0, y0, x1, y1 = polygon.bounds
    m = PARENT_MARGIN_SIGMAS * sigma
    expected_parents = kappa * (x1 - x0 + 2 * m) * (y1 - y0 + 2 * m)
    if expected_parents > 5e6:
        raise ValueError(
            f"{expected_parents:.3g} parents expected: the parent intensity is implausible "
            "for this plot"
        )


def thomas_pattern(
    polygon: shapely.Geometry,
    parent_intensity_per_m2: float,
    sigma_m: float,
    mean_cluster_size: float,
    *,
    rng: int | np.random.Generator | None = None,
) -> np.ndarray:
    """One realisation of a Thomas process in a polygon (random number of points).

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres; holes excluded.
    parent_intensity_per_m2 : float
        κ, parents per m².
    sigma_m : float
        σ, metres.
    mean_cluster_size : float
        μ, mean number of offspring per parent.
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    numpy.ndarray, shape (n, 2)
        Offspring inside the polygon, metres.

    Examples
    --------
    >>> import shapely
    >>> xy = thomas_pattern(shapely.box(0, 0, 100, 100), 0.002, 2.0, 5.0, rng=1)
    >>> xy.shape[1]
    2
    """
    _check(polygon, parent_intensity_per_m2, sigma_m)
    gen = as_rng(rng)
    parents = _parents(polygon, parent_intensity_per_m2, sigma_m, gen)
    counts = gen.poisson(mean_cluster_size, parents.shape[0])
    if counts.sum() > 5e7:
        raise ValueError("the Thomas process would hold more than 50 million points")
    xy = np.repeat(parents, counts, axis=0) + gen.normal(0.0, sigma_m, (int(counts.sum()), 2))
    inside = shapely.contains_xy(polygon, xy[:, 0], xy[:, 1])
    return xy[inside]


def thomas_patterns_given_n(
    polygon: shapely.Geometry,
    n: int,
    parent_intensity_per_m2: float,
    sigma_m: float,
    *,
    size: int = 1,
    rng: int | np.random.Generator | None = None,
) -> np.ndarray:
    """Thomas patterns with exactly ``n`` points in a polygon.

    Given its parents, a Thomas process is a Poisson process whose intensity is a sum of
    equal Gaussian bumps, one per parent; given that ``n`` of its points fall in the plot,
    they are independent draws from that intensity restricted to the plot. This draws the
    parents, then each point from a parent chosen uniformly plus a Gaussian offset, and
    draws again any point that falls outside the plot.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    n : int
        Points per pattern (≥ 1).
    parent_intensity_per_m2 : float
        κ, parents per m².
    sigma_m : float
        σ, metres.
    size : int
        Number of patterns.
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    numpy.ndarray, shape (size, n, 2)
        Metres.

    Notes
    -----
    The parents are drawn unconditionally (at least one is kept), so the number of clusters
    follows the Poisson law of the unconditioned process: a close approximation of the
    process conditioned on n, exact given the parents.

    Examples
    --------
    >>> import shapely
    >>> thomas_patterns_given_n(shapely.box(0, 0, 50, 50), 40, 0.004, 1.5, size=3, rng=0).shape
    (3, 40, 2)
    """
    _check(polygon, parent_intensity_per_m2, sigma_m)
    if n < 1 or size < 1:
        raise ValueError("n and size must be at least 1")
    gen = as_rng(rng)
    shapely.prepare(polygon)
    out = np.empty((size, n, 2))
    pending = np.arange(size)
    for _ in range(_MAX_RESTARTS):
        filled = _fill_given_parents(
            polygon, n, pending.size, parent_intensity_per_m2, sigma_m, gen
        )
        done = np.all(np.isfinite(filled[:, :, 0]), axis=1)
        out[pending[done]] = filled[done]
        pending = pending[~done]
        if pending.size == 0:
            return out
    raise ValueError("could not place the cluster offspring inside the plot")


def _fill_given_parents(
    polygon: shapely.Geometry,
    n: int,
    size: int,
    kappa: float,
    sigma: float,
    gen: np.random.Generator,
) -> np.ndarray:
    """Draw parents for ``size`` patterns and their ``n`` points; NaN rows where the
    parents lie so far out that points rarely land in the plot (the caller redraws them:
    such parents are very unlikely given n points in the plot)."""
    reach = PARENT_MARGIN_SIGMAS * sigma
    parent_list = []
    for _ in range(size):
        parents = np.zeros((0, 2))
        while parents.shape[0] == 0:
            parents = _parents(polygon, kappa, sigma, gen)
            if parents.size:
                parents = parents[shapely.dwithin(polygon, shapely.points(parents), reach)]
        parent_list.append(parents)
    counts = np.array([p.shape[0] for p in parent_list])
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    all_parents = np.concatenate(parent_list)
    owner = np.repeat(np.arange(size), n)
    pts = np.full((size * n, 2), np.nan)
    todo = np.arange(size * n)
    for _ in range(_MAX_ROUNDS):
        k = owner[todo]
        pick = first[k] + (gen.random(todo.size) * counts[k]).astype(np.int64)
        cand = all_parents[pick] + gen.normal(0.0, sigma, (todo.size, 2))
        ok = shapely.contains_xy(polygon, cand[:, 0], cand[:, 1])
        pts[todo[ok]] = cand[ok]
        todo = todo[~ok]
        if todo.size == 0:
            break
    return pts.reshape(size, n, 2)


@dataclass(frozen=True)
class ThomasFit:
    """A Thomas process fitted by minimum contrast on K.

    Attributes
    ----------
    parent_intensity_per_m2 : float
        κ, clusters per m².
    sigma_m : float
        σ, metres; about 95% of a cluster's plants lie within 2.45 σ of its centre.
    mean_cluster_size : float
        μ = λ / κ, plants per cluster.
    intensity_per_m2 : float
        λ = n / area.
    parent_intensity_low, parent_intensity_high : float
        Parametric-bootstrap interval for κ (NaN without bootstrap).
    sigma_low_m, sigma_high_m : float
        Bootstrap interval for σ, metres.
    cluster_size_low, cluster_size_high : float
        Bootstrap interval for μ.
    fit_pvalue : float
        Global maximum-deviation envelope test of L under the fitted model (NaN without
        bootstrap); small values mean the Thomas model does not describe the pattern.
    max_distance_m : float
        Largest distance used in the contrast, metres.
    replicates : int
        Bootstrap replicates.
    """

    parent_intensity_per_m2: float
    sigma_m: float
    mean_cluster_size: float
    intensity_per_m2: float
    parent_intensity_low: float
    parent_intensity_high: float
    sigma_low_m: float
    sigma_high_m: float
    cluster_size_low: float
    cluster_size_high: float
    fit_pvalue: float
    max_distance_m: float
    replicates: int

    @property
    def clusters_per_ha(self) -> float:
        """κ in clusters per hectare."""
        return self.parent_intensity_per_m2 * 1e4

    @property
    def cluster_diameter_m(self) -> float:
        """2σ, a typical cluster width in metres."""
        return 2.0 * self.sigma_m

    def describe(self) -> str:
        """The fit in plain words, with the bootstrap 95% intervals when there are any.

        Examples
        --------
        >>> nan = float("nan")
        >>> fit = ThomasFit(0.003, 1.5, 6.0, 0.018, nan, nan, nan, nan, nan, nan, nan, 10.0, 0)
        >>> fit.describe()
        'clusters of about 6.0 plants, about 3 m across (2σ), about 30 clusters per hectare'
        >>> fit = ThomasFit(0.003, 1.5, 6.0, 0.018, 0.002, 0.005, 1.1, 2.0, 3.5, 9.0, 0.3,
        ...                 10.0, 99)
        >>> fit.describe()  # doctest: +NORMALIZE_WHITESPACE
        'clusters of about 6.0 plants (95% interval 3.5–9), about 3 m across (2σ; 2.2–4 m),
        about 30 clusters per hectare (20–50)'
        """
        size = f"clusters of about {self.mean_cluster_size:.1f} plants"
        width = f"about {self.cluster_diameter_m:.2g} m across (2σ"
        count = f"about {self.clusters_per_ha:.3g} clusters per hectare"
        if np.isfinite(self.cluster_size_low) and np.isfinite(self.cluster_size_high):
            size += f" (95% interval {self.cluster_size_low:.2g}–{self.cluster_size_high:.2g})"
        if np.isfinite(self.sigma_low_m) and np.isfinite(self.sigma_high_m):
            width += f"; {2 * self.sigma_low_m:.2g}–{2 * self.sigma_high_m:.2g} m"
        if np.isfinite(self.parent_intensity_low) and np.isfinite(self.parent_intensity_high):
            count += (
                f" ({self.parent_intensity_low * 1e4:.3g}–{self.parent_intensity_high * 1e4:.3g})"
            )
        text = f"{size}, {width}), {count}"
        if np.isfinite(self.fit_pvalue) and self.fit_pvalue < 0.05:
            text += (
                f"; the Thomas model fits poorly (p = {self.fit_pvalue:.2g}), so take these as "
                "rough"
            )
        return text


def _contrast_fit(r: np.ndarray, k_hat: np.ndarray, intensity: float) -> tuple[float, float]:
    ok = np.isfinite(k_hat) & (k_hat > 0)
    r, k_hat = r[ok], k_hat[ok]
    if r.size < 3:
        return float("nan"), float("nan")
    target = k_hat**CONTRAST_EXPONENT

    def loss(theta: np.ndarray) -> float:
        kappa, sigma = np.exp(theta)
        model = thomas_k(r, kappa, sigma) ** CONTRAST_EXPONENT
        return float(np.sum((target - model) ** 2))

    best = None
    rmax = float(r[-1])
    for s0 in (rmax / 12, rmax / 3):
        for mu0 in (4.0,):
            res = minimize(
                loss,
                np.log([intensity / mu0, s0]),
                method="Nelder-Mead",
                options={"xatol": 1e-6, "fatol": 1e-12, "maxiter": 2000},
            )
            if best is None or res.fun < best.fun:
                best = res
    kappa, sigma = np.exp(best.x)
    return float(kappa), float(sigma)


def _k_hat(xy: np.ndarray, polygon: shapely.Geometry, rmax: float) -> tuple[np.ndarray, np.ndarray]:
    res = second_order(xy, polygon, rmax, steps=50, reduced_sample=False)
    return res.r_m, res.K_iso_m2


def fit_thomas(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    *,
    max_distance_m: float | None = None,
    replicates: int = 99,
    confidence: float = 0.95,
    rng: int | np.random.Generator | None = None,
) -> ThomasFit:
    """Fit a Thomas process to a pattern by minimum contrast on Ripley's K.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points inside the plot, metres (n ≥ 10).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    max_distance_m : float, optional
        Largest distance in the contrast (default: the scale functions' default distance).
    replicates : int
        Parametric-bootstrap replicates for the intervals and the fit test (0 to skip).
    confidence : float
        Level of the bootstrap percentile intervals.
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    ThomasFit

    Notes
    -----
    κ and σ minimise Σ_r (K̂(r)^¼ − K(r; κ, σ)^¼)² over 50 distances up to the maximum,
    with K̂ the isotropic edge-corrected estimate (Diggle 1983); μ = λ / κ. The bootstrap
    simulates the fitted process in the same polygon, refits each pattern and takes the
    percentile interval; the fit test ranks the largest absolute deviation of L̂ from the
    fitted model's L among those of the simulated patterns.

    Examples
    --------
    >>> import shapely
    >>> plot = shapely.box(0, 0, 100, 100)
    >>> xy = thomas_pattern(plot, 0.003, 2.0, 6.0, rng=3)
    >>> fit = fit_thomas(xy, plot, replicates=0)
    >>> fit.sigma_m > 0
    True
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    if n < 10:
        raise ValueError("a Thomas fit needs at least 10 points")
    gen = as_rng(rng)
    area = float(polygon.area)
    lam = n / area
    rmax = default_max_distance(polygon, n) if max_distance_m is None else float(max_distance_m)
    r, k_hat = _k_hat(xy, polygon, rmax)
    kappa, sigma = _contrast_fit(r, k_hat, lam)
    nan = float("nan")
    lows = highs = (nan, nan, nan)
    fit_p = nan
    if replicates > 0 and np.isfinite(kappa):
        mu = lam / kappa
        params = np.full((replicates, 3), np.nan)
        l_sims = np.full((replicates, r.size), np.nan)
        for b in range(replicates):
            sim = thomas_pattern(polygon, kappa, sigma, mu, rng=gen)
            if sim.shape[0] < 10:
                continue
            rb, kb = _k_hat(sim, polygon, rmax)
            l_sims[b] = np.sqrt(np.maximum(kb, 0) / np.pi)
            kb_kappa, kb_sigma = _contrast_fit(rb, kb, sim.shape[0] / area)
            params[b] = (kb_kappa, kb_sigma, sim.shape[0] / area / kb_kappa)
        q = [(1 - confidence) / 2 * 100, (1 + confidence) / 2 * 100]
        good = np.all(np.isfinite(params), axis=1)
        if good.sum() >= 10:
            lo, hi = np.percentile(params[good], q, axis=0)
            lows, highs = tuple(map(float, lo)), tuple(map(float, hi))
        l_model = np.sqrt(thomas_k(r, kappa, sigma) / np.pi)
        l_obs = np.sqrt(np.maximum(k_hat, 0) / np.pi)
        ok = np.all(np.isfinite(l_sims), axis=1)
        if ok.sum() >= 10:
            fit_p = envelope_test(l_obs, l_sims[ok], csr_value=l_model, test="max-deviation").pvalue
    return ThomasFit(
        parent_intensity_per_m2=kappa,
        sigma_m=sigma,
        mean_cluster_size=lam / kappa if np.isfinite(kappa) else nan,
        intensity_per_m2=lam,
        parent_intensity_low=lows[0],
        parent_intensity_high=highs[0],
        sigma_low_m=lows[1],
        sigma_high_m=highs[1],
        cluster_size_low=lows[2],
        cluster_size_high=highs[2],
        fit_pvalue=fit_p,
        max_distance_m=rmax,
        replicates=int(replicates),
    )
