"""How a plant's size relates to its neighbours: the mark correlation function and the mark
variogram, with random-permutation envelopes.

For plants x_i with a numeric mark m_i (crown diameter, height, area), mean μ and variance
σ², and pairs at distance d_ij weighted by the Epanechnikov kernel k_h(r − d_ij) and the
exact isotropic edge weight w_ij:

    k_mm(r) = Σ w_ij k_h(r − d_ij) m_i m_j / (μ² Σ w_ij k_h(r − d_ij)),
    γ(r)    = Σ w_ij k_h(r − d_ij) (m_i − m_j)² / 2 / Σ w_ij k_h(r − d_ij).

k_mm is the mean product of the marks of two plants r apart relative to the square of the
mean mark (Stoyan 1984): 1 when marks do not depend on position (independent marks, random
labelling); below 1 when close neighbours are smaller than average, which is what
competition leaves behind; above 1 when close neighbours are larger (shared good ground,
facilitation). γ(r) is half the mean squared difference of the marks of two plants r apart:
σ² under independent marks; below σ² when neighbours are alike.

The null hypothesis of independent marks is tested by random permutation of the marks
among the plants (positions kept), with a global envelope test on k_mm
(:func:`ecoscan.stats.envelopes.envelope_test`).

References
----------
Stoyan, D. (1984). On correlations of marked point processes. Mathematische Nachrichten
116: 197–207.
Illian, J., Penttinen, A., Stoyan, H. & Stoyan, D. (2008). Statistical Analysis and
Modelling of Spatial Point Patterns. Wiley (mark correlation function and mark variogram,
their kernel estimators and the random-labelling test).
Wälder, O. & Stoyan, D. (1996). On variograms in point process statistics. Biometrical
Journal 38: 895–905 (the mark variogram).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import shapely

from ecoscan.stats.csr import as_rng
from ecoscan.stats.envelopes import Envelope, distance_runs, envelope_test
from ecoscan.stats.second_order import (
    PairTable,
    _k_and_kernel_sums,
    pcf_bandwidth,
    r_grid,
    snap_bandwidth,
)

__all__ = ["MarkResult", "mark_correlation", "mark_test", "mark_verdict"]


def _kernel(d: np.ndarray, w: np.ndarray, dr: float, steps: int, h: float) -> np.ndarray:
    return _k_and_kernel_sums(d, w, dr, steps, h)[1]


def mark_correlation(
    xy: np.ndarray,
    marks: np.ndarray,
    polygon: shapely.Geometry,
    max_distance_m: float,
    *,
    steps: int = 100,
    bandwidth_m: float | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """k_mm(r) and the mark variogram γ(r) of one marked pattern.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    marks : numpy.ndarray, shape (n,)
        Numeric marks (finite; positive for k_mm to be meaningful).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    max_distance_m : float
        Largest distance, metres.
    steps : int
        Number of distances.
    bandwidth_m : float, optional
        Kernel half-width; default 0.15 / √(n / A), as for the pair correlation.

    Returns
    -------
    r_m, k_mm, variogram : numpy.ndarray
        Distances (metres), the mark correlation function (dimensionless) and the mark
        variogram (in the mark's unit squared); NaN where no pair is within h of r.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> poly = shapely.box(0, 0, 10, 10)
    >>> xy = np.array([[2.0, 2.0], [3.0, 2.0], [7.0, 7.0], [8.0, 7.0]])
    >>> r, k, g = mark_correlation(xy, np.array([1.0, 1.0, 3.0, 3.0]), poly, 2.0, steps=4,
    ...                            bandwidth_m=0.5)
    >>> round(float(k[1]), 3), round(float(g[1]), 3)  # at r = 1 m: pairs (1,1) and (3,3)
    (1.25, 0.0)
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    m = np.asarray(marks, float).reshape(-1)
    n = xy.shape[0]
    r = r_grid(max_distance_m, steps)
    dr = max_distance_m / steps
    h = pcf_bandwidth(n / polygon.area) if bandwidth_m is None else float(bandwidth_m)
    h = snap_bandwidth(h, dr)
    pt = PairTable(xy, polygon, max_distance_m + h)
    k, g = _mark_sums(pt, m, dr, steps, h)
    return r, k, g


def _mark_sums(
    pt: PairTable, m: np.ndarray, dr: float, steps: int, h: float, w: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    w = pt.w_sum if w is None else w
    i, j = pt.i, pt.j
    den = _kernel(pt.d, w, dr, steps, h)
    prod = _kernel(pt.d, w * m[i] * m[j], dr, steps, h)
    sq = _kernel(pt.d, w * 0.5 * (m[i] - m[j]) ** 2, dr, steps, h)
    mu = float(np.mean(m))
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = den > 1e-12 * max(float(den.max(initial=0.0)), 1e-300)
        k = np.where(ok, prod / den / mu**2, np.nan)
        g = np.where(ok, sq / den, np.nan)
    return k, g


@dataclass(frozen=True)
class MarkResult:
    """Mark correlation and mark variogram of one plot, with permutation envelopes.

    Attributes
    ----------
    mark : str
        The mark's column name.
    r_m : numpy.ndarray
        Distances, metres.
    k_mm : Envelope
        Mark correlation function with envelopes and the global test (the verdict's test).
    variogram : Envelope
        Mark variogram with envelopes (mark unit squared).
    mean, variance : float
        Mean and variance (ddof 0) of the marks.
    n : int
        Plants.
    permutations : int
        Random permutations of the marks.
    """

    mark: str
    r_m: np.ndarray
    k_mm: Envelope
    variogram: Envelope
    mean: float
    variance: float
    n: int
    permutations: int

    @property
    def pvalue(self) -> float:
        """Global test p-value on k_mm."""
        return self.k_mm.pvalue


def mark_test(
    xy: np.ndarray,
    marks: np.ndarray,
    polygon: shapely.Geometry,
    max_distance_m: float,
    *,
    mark: str = "mark",
    steps: int = 100,
    permutations: int = 199,
    alpha: float = 0.05,
    test: str = "rank-length",
    rng: int | np.random.Generator | None = None,
) -> MarkResult:
    """Test independent marks by random permutation; k_mm and γ with envelopes.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    marks : numpy.ndarray, shape (n,)
        Numeric marks (finite).
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    max_distance_m : float
        Largest distance, metres.
    mark : str
        The mark's name (for the verdict).
    steps, permutations, alpha, test
        Distances, random permutations, level, global test.
    rng : int or numpy.random.Generator, optional

    Returns
    -------
    MarkResult

    Notes
    -----
    The pairs, their distances and edge weights are found once; each permutation only
    reassigns the marks, so the test costs about three kernel sums per permutation.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.stats.csr import uniform_in_polygon
    >>> poly = shapely.box(0, 0, 30, 30)
    >>> xy = uniform_in_polygon(poly, 80, rng=5)
    >>> m = np.random.default_rng(5).uniform(1, 2, 80)
    >>> res = mark_test(xy, m, poly, 5.0, steps=20, permutations=19, rng=1)
    >>> res.k_mm.value.shape
    (20,)
    """
    gen = as_rng(rng)
    xy = np.asarray(xy, float).reshape(-1, 2)
    m = np.asarray(marks, float).reshape(-1)
    n = xy.shape[0]
    r = r_grid(max_distance_m, steps)
    dr = max_distance_m / steps
    h = snap_bandwidth(pcf_bandwidth(n / polygon.area), dr)
    pt = PairTable(xy, polygon, max_distance_m + h)
    w = pt.w_sum
    k_obs, g_obs = _mark_sums(pt, m, dr, steps, h, w)
    sim_k = np.empty((permutations, steps))
    sim_g = np.empty((permutations, steps))
    for s in range(permutations):
        sim_k[s], sim_g[s] = _mark_sums(pt, gen.permutation(m), dr, steps, h, w)
    var = float(np.var(m))
    with warnings.catch_warnings():  # distances with no pair at all are NaN in every curve
        warnings.simplefilter("ignore", RuntimeWarning)
        k_env = envelope_test(k_obs, sim_k, csr_value=np.ones(steps), alpha=alpha, test=test)
        g_env = envelope_test(g_obs, sim_g, csr_value=np.full(steps, var), alpha=alpha, test=test)
    return MarkResult(mark, r, k_env, g_env, float(np.mean(m)), var, n, permutations)


def _fmt_m(v: float) -> str:
    v = float(v)
    return f"{v:.0f}" if v >= 10 else (f"{v:.1f}" if v >= 1 else f"{v:.2g}")


def mark_verdict(
    result: MarkResult, alpha: float, *, min_run_steps: int = 3
) -> tuple[list[tuple[float, float]], list[tuple[float, float]], str]:
    """Plain words for the mark correlation test.

    Parameters
    ----------
    result : MarkResult
    alpha : float
        Level of the global test.
    min_run_steps : int
        Shorter runs outside the envelope are not named in the verdict.

    Returns
    -------
    smaller_ranges, larger_ranges : list of (float, float)
        Distances (metres) at which neighbours' marks are smaller / larger than average
        (k_mm below / above the global envelope), when the test rejects.
    verdict : str
        E.g. "neighbours closer than 2.0 m are smaller than average (diameter_m): a sign
        of competition (permutation test p = 0.005)".

    Examples
    --------
    >>> import numpy as np
    >>> from ecoscan.stats.envelopes import Envelope
    >>> r = np.arange(0.5, 5.5, 0.5)
    >>> one = np.ones(10)
    >>> env = Envelope(one - 0.3 * (r <= 2), one, one - .1, one + .1, one - .1, one + .1,
    ...                0.005, "rank-length", 0.05, 199)
    >>> res = MarkResult("diameter_m", r, env, env, 1.0, 0.1, 80, 199)
    >>> mark_verdict(res, 0.05)[2][:66]
    'neighbours closer than 2.0 m are smaller than average (diameter_m)'
    """
    env = result.k_mm
    r = result.r_m
    p = env.pvalue
    p_txt = f"permutation test p = {float(p):.3g}" if np.isfinite(p) else "test not computed"
    name = result.mark
    if not (np.isfinite(p) and p <= alpha):
        return (
            [],
            [],
            (
                f"{name} does not depend on how close the neighbours are, at distances up to "
                f"{_fmt_m(r[-1])} m ({p_txt})"
            ),
        )
    small = distance_runs(env.below, r)
    large = distance_runs(env.above, r)
    step = float(r[1] - r[0]) if r.size > 1 else 1.0
    first = (
        float(r[np.flatnonzero(np.isfinite(env.band_low))[0]])
        if np.isfinite(env.band_low).any()
        else float(r[0])
    )

    def say(ranges, word, why):
        ranges = [(a, b) for a, b in ranges if (b - a) / step + 1 >= min_run_steps] or ranges
        a, b = ranges[0]
        if a <= first + step * 1.001:
            where = f"neighbours closer than {_fmt_m(b)} m"
        else:
            where = f"neighbours {_fmt_m(a)} to {_fmt_m(b)} m apart"
        return f"{where} are {word} than average ({name}){why}"

    parts = []
    if small:
        parts.append(say(small, "smaller", ": a sign of competition"))
    if large:
        parts.append(say(large, "larger", ": shared good ground or shelter"))
    if not parts:
        parts.append(f"{name} depends on neighbours without one clear distance range")
    return small, large, "; ".join(parts) + f" ({p_txt})"
