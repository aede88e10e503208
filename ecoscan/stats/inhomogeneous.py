"""Inhomogeneous K, L and pair correlation, and the test of clustering beyond habitat.

When plant density varies over a plot (better ground holds more plants), the ordinary K and
L read that variation as clustering. The inhomogeneous versions weight every pair of plants
by the inverse of the fitted intensity at both ends (Baddeley, Møller & Waagepetersen 2000):

    K_inhom(r) = n / (n − 1) · (1 / A) · Σ_{i≠j} w_ij 1(d_ij ≤ r) / (λ(x_i) λ(x_j)),
    L_inhom(r) = √(K_inhom(r) / π),
    g_inhom(r) = n / (n − 1) · (1 / A) · Σ_{i≠j} w_ij k_h(r − d_ij) / (λ(x_i) λ(x_j)) / (2π c_h(r)),

with w_ij the exact isotropic edge weight, k_h the Epanechnikov kernel and c_h(r) the
smoothed distance of :mod:`ecoscan.stats.second_order`. For a Poisson process with
intensity λ, K_inhom(r) = πr², L_inhom(r) = r and g_inhom(r) = 1, whatever λ; departures
are interaction among plants beyond what the intensity explains. The factor n / (n − 1)
makes the estimator equal to the ordinary one (A / (n(n − 1)) Σ w_ij 1(d_ij ≤ r)) when λ is
the constant n / A.

The test: simulate the fitted inhomogeneous Poisson process in the exact plot polygon
(thinning, :func:`ecoscan.stats.intensity.simulate_inhomogeneous`), refit the intensity to
every simulated pattern exactly as to the plants (so that the estimation of λ is part of the
null distribution), and compare L_inhom with a global envelope
(:func:`ecoscan.stats.envelopes.envelope_test`).

References
----------
Baddeley, A. J., Møller, J. & Waagepetersen, R. (2000). Non- and semi-parametric estimation
of interaction in inhomogeneous point patterns. Statistica Neerlandica 54: 329–350.
Myllymäki, M. et al. (2017). Global envelope tests for spatial processes. JRSS B 79: 381–404.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import shapely

from ecoscan.stats.csr import as_rng
from ecoscan.stats.edge import boundary_distance
from ecoscan.stats.envelopes import Envelope, distance_runs, envelope_test
from ecoscan.stats.second_order import (
    PairTable,
    _k_and_kernel_sums,
    pcf_bandwidth,
    r_grid,
    smoothed_distance,
    snap_bandwidth,
)

__all__ = [
    "HabitatTest",
    "InhomogeneousResult",
    "habitat_test",
    "habitat_verdict",
    "inhomogeneous_second_order",
]


@dataclass(frozen=True)
class InhomogeneousResult:
    """Inhomogeneous K and g of one pattern.

    Attributes
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    K_inhom_m2 : numpy.ndarray
        Inhomogeneous K, m² (πr² for a Poisson process with the given intensity).
    g_inhom : numpy.ndarray
        Inhomogeneous pair correlation (1 for a Poisson process).
    n : int
        Plants.
    area_m2 : float
        Plot area.
    bandwidth_m : float
        Kernel half-width of g, metres.
    """

    r_m: np.ndarray
    K_inhom_m2: np.ndarray
    g_inhom: np.ndarray
    n: int
    area_m2: float
    bandwidth_m: float

    @property
    def L_inhom_m(self) -> np.ndarray:
        """√(K_inhom / π), metres."""
        return np.sqrt(np.maximum(self.K_inhom_m2, 0.0) / np.pi)


def inhomogeneous_second_order(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    intensity_per_m2: np.ndarray,
    max_distance_m: float,
    *,
    steps: int = 100,
    bandwidth_m: float | None = None,
    boundary_m: np.ndarray | None = None,
) -> InhomogeneousResult:
    """Inhomogeneous K and g (Baddeley, Møller & Waagepetersen 2000), isotropic correction.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    intensity_per_m2 : numpy.ndarray, shape (n,)
        Intensity λ(x_i) at each plant, plants per m² (positive).
    max_distance_m : float
        Largest distance, metres.
    steps : int
        Number of distances.
    bandwidth_m : float, optional
        Kernel half-width of g; default 0.15 / √(n / A) as for the ordinary g.
    boundary_m : numpy.ndarray, optional
        Distances of the plants to the boundary.

    Returns
    -------
    InhomogeneousResult

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.stats.csr import uniform_in_polygon
    >>> from ecoscan.stats.second_order import second_order
    >>> poly = shapely.box(0, 0, 30, 30)
    >>> xy = uniform_in_polygon(poly, 80, rng=3)
    >>> inh = inhomogeneous_second_order(xy, poly, np.full(80, 80 / 900), 5.0, steps=10)
    >>> bool(np.allclose(inh.K_inhom_m2, second_order(xy, poly, 5.0, steps=10).K_iso_m2))
    True
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    lam = np.asarray(intensity_per_m2, float).reshape(-1)
    area = float(polygon.area)
    r = r_grid(max_distance_m, steps)
    dr = max_distance_m / steps
    nan = np.full(steps, np.nan)
    if n < 2:
        return InhomogeneousResult(r, nan, nan, n, area, float("nan"))
    if lam.size != n or not np.all(lam > 0):
        raise ValueError("one positive intensity per point is needed")
    h = pcf_bandwidth(n / area) if bandwidth_m is None else float(bandwidth_m)
    h = snap_bandwidth(h, dr)
    pt = PairTable(xy, polygon, max_distance_m + h, boundary_m)
    w = pt.w_sum / (lam[pt.i] * lam[pt.j])
    k_sum, kern_sum = _k_and_kernel_sums(pt.d, w, dr, steps, h)
    scale = n / ((n - 1) * area)
    K = scale * k_sum
    g = scale * kern_sum / (2 * np.pi * smoothed_distance(r, h))
    return InhomogeneousResult(r, K, g, n, area, float(h))


@dataclass(frozen=True)
class HabitatTest:
    """Clustering beyond what a fitted intensity explains: L_inhom and g_inhom with envelopes.

    Attributes
    ----------
    observed : InhomogeneousResult
        The plants' inhomogeneous functions.
    L : Envelope
        L_inhom(r) with its envelopes and global test (the verdict's test).
    g : Envelope
        g_inhom(r) with envelopes (same simulations).
    K : Envelope
        K_inhom(r) with envelopes.
    simulations : int
        Simulated patterns of the fitted process.
    """

    observed: InhomogeneousResult
    L: Envelope
    g: Envelope
    K: Envelope
    simulations: int

    @property
    def r_m(self) -> np.ndarray:
        """Distances, metres."""
        return self.observed.r_m

    @property
    def pvalue(self) -> float:
        """Global test p-value on L_inhom."""
        return self.L.pvalue


def habitat_test(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    fit_pattern: Callable[[np.ndarray], np.ndarray],
    simulate: Callable[[int, np.random.Generator], np.ndarray],
    max_distance_m: float,
    *,
    steps: int = 100,
    simulations: int = 199,
    alpha: float = 0.05,
    test: str = "rank-length",
    rng: int | np.random.Generator | None = None,
) -> HabitatTest:
    """Test for interaction beyond the intensity with simulation envelopes of L_inhom.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    fit_pattern : callable
        Given a pattern (k, 2), fits the intensity model to it and returns λ at its points
        (k,). Called on the plants and on every simulated pattern.
    simulate : callable
        ``simulate(size, rng)`` returns ``size`` patterns of the fitted process, shape
        (size, n, 2), in the exact plot.
    max_distance_m : float
        Largest distance, metres.
    steps, simulations, alpha, test
        Distances, simulated patterns, level, global test (``rank-length`` or
        ``max-deviation``).
    rng : int or numpy.random.Generator, optional

    Returns
    -------
    HabitatTest

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.stats.csr import uniform_in_polygon
    >>> poly = shapely.box(0, 0, 30, 30)
    >>> xy = uniform_in_polygon(poly, 60, rng=4)
    >>> flat = lambda p: np.full(len(p), len(p) / poly.area)
    >>> sim = lambda k, g: uniform_in_polygon(poly, 60, size=k, rng=g)
    >>> res = habitat_test(xy, poly, flat, sim, 5.0, steps=20, simulations=19, rng=1)
    >>> bool(res.pvalue > 0.05)
    True
    """
    gen = as_rng(rng)
    xy = np.asarray(xy, float).reshape(-1, 2)
    h = snap_bandwidth(pcf_bandwidth(xy.shape[0] / polygon.area), max_distance_m / steps)

    def functions(p: np.ndarray) -> InhomogeneousResult:
        return inhomogeneous_second_order(
            p,
            polygon,
            fit_pattern(p),
            max_distance_m,
            steps=steps,
            bandwidth_m=h,
            boundary_m=boundary_distance(p, polygon),
        )

    obs = functions(xy)
    sims = simulate(simulations, gen)
    sim_k = np.empty((simulations, steps))
    sim_g = np.empty((simulations, steps))
    for k in range(simulations):
        res = functions(sims[k])
        sim_k[k] = res.K_inhom_m2
        sim_g[k] = res.g_inhom
    r = obs.r_m
    sim_l = np.sqrt(np.maximum(sim_k, 0.0) / np.pi)
    L = envelope_test(obs.L_inhom_m, sim_l, csr_value=r.copy(), alpha=alpha, test=test)
    g = envelope_test(obs.g_inhom, sim_g, csr_value=np.ones_like(r), alpha=alpha, test=test)
    K = envelope_test(obs.K_inhom_m2, sim_k, csr_value=np.pi * r**2, alpha=alpha, test=test)
    return HabitatTest(obs, L, g, K, simulations)


def _fmt_m(v: float) -> str:
    v = float(v)
    if v >= 10:
        return f"{v:.0f}"
    if v >= 1:
        return f"{v:.1f}"
    return f"{v:.2g}"


def _span(ranges: list[tuple[float, float]]) -> str:
    a = min(x for x, _ in ranges)
    b = max(y for _, y in ranges)
    return f"from {_fmt_m(a)} to {_fmt_m(b)} m"


def habitat_verdict(
    result: HabitatTest,
    explained_by: str,
    alpha: float,
    *,
    clustered_without: bool,
    min_run_steps: int = 3,
) -> tuple[list[tuple[float, float]], list[tuple[float, float]], str]:
    """The two causes of clustering told apart, in words.

    Parameters
    ----------
    result : HabitatTest
    explained_by : str
        What the intensity stands for, e.g. ``elevation`` or ``elevation and wetness``.
    alpha : float
        Level of the global test.
    clustered_without : bool
        Whether the ordinary (homogeneous) analysis found the plot clustered.
    min_run_steps : int
        Runs of the observed curve outside the envelope shorter than this many distance
        steps are not named in the verdict (they stay in the ranges).

    Returns
    -------
    clustered_ranges, regular_ranges : list of (float, float)
        Distance ranges (metres) where L_inhom leaves the global envelope, when the global
        test rejects.
    verdict : str
        E.g. "clustering explained by elevation (...)" or "clustering beyond what
        elevation explains, from 1.0 to 6.0 m (...)".

    Examples
    --------
    >>> import numpy as np
    >>> from ecoscan.stats.envelopes import Envelope
    >>> r = np.arange(1.0, 11.0)
    >>> env = Envelope(r + 0.5 * (r < 7), r, r - 0.2, r + 0.2, r - 0.2, r + 0.2, 0.01,
    ...                "rank-length", 0.05, 99)
    >>> obs = InhomogeneousResult(r, np.pi * r**2, np.ones(10), 50, 900.0, 0.5)
    >>> habitat_verdict(HabitatTest(obs, env, env, env, 99), "elevation", 0.05,
    ...                 clustered_without=True)[2]
    'clustering beyond what elevation explains, from 1.0 to 6.0 m (global test p = 0.01)'
    """
    env = result.L
    r = result.r_m
    p = env.pvalue
    p_txt = f"global test p = {float(p):.3g}" if np.isfinite(p) else "global test not computed"
    if not (np.isfinite(p) and p <= alpha):
        if clustered_without:
            return [], [], f"clustering explained by {explained_by} ({p_txt})"
        return [], [], (f"no interaction among plants once {explained_by} is allowed for ({p_txt})")
    clu = distance_runs(env.above, r)
    reg = distance_runs(env.below, r)
    step = float(r[1] - r[0]) if r.size > 1 else 1.0

    def long(ranges):
        return [(a, b) for a, b in ranges if (b - a) / step + 1 >= min_run_steps] or ranges

    parts = []
    if clu:
        parts.append(f"clustering beyond what {explained_by} explains, {_span(long(clu))}")
    elif clustered_without:
        parts.append(f"clustering explained by {explained_by}")
    if reg:
        parts.append(f"more even spacing than {explained_by} implies, {_span(long(reg))}")
    if not parts:
        parts.append(f"departs from the {explained_by} model without one clear distance range")
    return clu, reg, "; ".join(parts) + f" ({p_txt})"
