"""Clark–Evans R for groups of plots, the difference between two groups, and its tests.

Each plant's nearest neighbour is looked for within its own plot only (a plant's neighbour
across a plot boundary was not part of that plot's survey). A group's R pools its plots:

    R = Σ_plots Σ_points d_i / Σ_plots E_p,

the summed nearest-neighbour distances over the summed expectations under complete spatial
randomness (CSR). With ``expected="per-plot"`` (the default) each plot's expectation uses its
own density, E_p = n_p · ½ √(A_p / n_p) (Clark & Evans 1954), so a group of random plots of
unequal density still has R ≈ 1. With ``expected="pooled"`` the expectation is
N · ½ √(ΣA / N) from the group's summed count and area. The two agree when the plots share
one density. The sum of a plot's n_p distances has variance 0.26136² · A_p under CSR (Clark &
Evans 1954: σ(r̄) = 0.26136 / √(n ρ)), so SE(R) = √(0.26136² ΣA_p) / Σ E_p.

The Donnelly (1978) variant replaces each plot's expectation and variance with the
edge-corrected ones for a window of area A and perimeter P:
E(r̄) = ½ √(A/n) + (0.0514 + 0.041 / √n) P / n, Var(r̄) = 0.0703 A / n² + 0.037 P √(A / n⁵).

References
----------
Clark, P. J. & Evans, F. C. (1954). Ecology 35: 445–453.
Donnelly, K. P. (1978). In Hodder (ed.), Simulation Studies in Archaeology, pp. 91–95.
Good, P. (2005). Permutation, Parametric and Bootstrap Tests of Hypotheses, 3rd ed.,
Springer (permuting whole experimental units, here plots, between groups).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import stats as sps

from ecoscan.stats.csr import as_rng
from ecoscan.stats.nearest import CE_SE_CONSTANT, nn_distances

__all__ = [
    "PlotNN",
    "PooledR",
    "RChangeTest",
    "RDifference",
    "RPermutationTest",
    "combine_r_change",
    "plot_nn",
    "pooled_clark_evans",
    "r_change_test",
    "r_difference",
    "r_permutation_test",
]


@dataclass(frozen=True)
class PlotNN:
    """Nearest-neighbour summary of one plot, the unit that pooling and permutation work on.

    Attributes
    ----------
    nn_m : numpy.ndarray
        Each plant's distance to its nearest neighbour in the same plot, metres (empty when
        the plot has fewer than two plants).
    n : int
        Plants in the plot (all of them, also when fewer than two).
    area_m2 : float
        Plot area, m².
    perimeter_m : float
        Plot perimeter, m (NaN when unknown: no Donnelly correction then).
    """

    nn_m: np.ndarray
    n: int
    area_m2: float
    perimeter_m: float = float("nan")


def plot_nn(xy: np.ndarray, area_m2: float, perimeter_m: float = float("nan")) -> PlotNN:
    """Summarise one plot's plants for pooling.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plant positions in the plot, metres.
    area_m2 : float
        Plot area, m².
    perimeter_m : float
        Plot perimeter, m.

    Returns
    -------
    PlotNN

    Examples
    --------
    >>> import numpy as np
    >>> unit = plot_nn(np.array([[0.0, 0.0], [3.0, 4.0]]), 100.0, 40.0)
    >>> unit.n, unit.nn_m
    (2, array([5., 5.]))
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    d = nn_distances(xy) if xy.shape[0] >= 2 else np.empty(0)
    return PlotNN(d, int(xy.shape[0]), float(area_m2), float(perimeter_m))


@dataclass(frozen=True)
class PooledR:
    """Clark–Evans R pooled over a group of plots.

    Attributes
    ----------
    statistic : float
        Pooled R.
    se : float
        Its standard error under CSR.
    z, pvalue : float
        Test of R = 1 (two-sided normal approximation).
    n : int
        Plants in plots with at least two plants (those that have a neighbour).
    n_plots : int
        Plots contributing (at least two plants).
    area_m2 : float
        Summed area of the contributing plots, m².
    mean_nn_m : float
        Mean nearest-neighbour distance over those plants, m.
    expected_nn_m : float
        Expected mean under CSR, m.
    statistic_donnelly, se_donnelly : float
        Donnelly (1978) edge-corrected R and its SE (NaN without perimeters).
    """

    statistic: float
    se: float
    z: float
    pvalue: float
    n: int
    n_plots: int
    area_m2: float
    mean_nn_m: float
    expected_nn_m: float
    statistic_donnelly: float
    se_donnelly: float

    def ci(self, confidence: float = 0.95) -> tuple[float, float]:
        """Normal-approximation confidence interval R ± z·SE."""
        z = float(sps.norm.ppf(0.5 + confidence / 2.0))
        return self.statistic - z * self.se, self.statistic + z * self.se


def _unit_arrays(units: Sequence[PlotNN], expected: str) -> tuple[np.ndarray, ...]:
    """Per-plot sums: S (summed NN), n, A, E (expected sum), V (variance of the sum)."""
    use = [u for u in units if u.n >= 2 and u.nn_m.size == u.n]
    s = np.array([float(np.sum(u.nn_m)) for u in use])
    n = np.array([u.n for u in use], float)
    a = np.array([u.area_m2 for u in use], float)
    p = np.array([u.perimeter_m for u in use], float)
    if expected not in ("per-plot", "pooled"):
        raise ValueError("expected must be 'per-plot' or 'pooled'")
    e = 0.5 * np.sqrt(a * n)
    v = CE_SE_CONSTANT**2 * a
    with np.errstate(invalid="ignore", divide="ignore"):
        ed = 0.5 * np.sqrt(a * n) + (0.0514 + 0.041 / np.sqrt(n)) * p
        vd = 0.0703 * a + 0.037 * p * np.sqrt(a / n)
    return s, n, a, e, v, ed, vd


def pooled_clark_evans(units: Sequence[PlotNN], *, expected: str = "per-plot") -> PooledR:
    """Clark–Evans R of a group of plots, with its standard error.

    Parameters
    ----------
    units : sequence of PlotNN
        The group's plots (see :func:`plot_nn`); plots with fewer than two plants are left
        out of R.
    expected : {'per-plot', 'pooled'}
        How the expectation under CSR is formed (module docstring).

    Returns
    -------
    PooledR

    References
    ----------
    Clark & Evans (1954), Ecology 35: 445–453; Donnelly (1978).

    Examples
    --------
    >>> import numpy as np
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T
    >>> units = [plot_nn(grid, 400.0, 80.0), plot_nn(grid + 100, 400.0, 80.0)]
    >>> round(pooled_clark_evans(units).statistic, 3)  # two square lattices: R = 2
    2.0
    """
    s, n, a, e, v, ed, vd = _unit_arrays(units, expected)
    nan = float("nan")
    if n.size == 0:
        return PooledR(nan, nan, nan, nan, 0, 0, 0.0, nan, nan, nan, nan)
    total_n, total_a = float(n.sum()), float(a.sum())
    e_sum = float(e.sum()) if expected == "per-plot" else 0.5 * math.sqrt(total_n * total_a)
    r = float(s.sum()) / e_sum
    se = math.sqrt(float(v.sum())) / e_sum
    z = (r - 1.0) / se
    p = float(min(1.0, 2.0 * sps.norm.sf(abs(z))))
    if np.all(np.isfinite(ed)):
        rd = float(s.sum() / ed.sum())
        sed = float(math.sqrt(vd.sum()) / ed.sum())
    else:
        rd = sed = nan
    return PooledR(
        r,
        se,
        float(z),
        p,
        int(total_n),
        int(n.size),
        total_a,
        float(s.sum() / total_n),
        e_sum / total_n,
        rd,
        sed,
    )


@dataclass(frozen=True)
class RDifference:
    """Difference in R between two groups: ``statistic`` = R_a − R_b, its SE, z and p."""

    statistic: float
    se: float
    z: float
    pvalue: float


def r_difference(a: PooledR, b: PooledR, *, edge_corrected: bool = False) -> RDifference:
    """z test of the difference between two independent Clark–Evans R values.

    Parameters
    ----------
    a, b : PooledR
        The two groups' R (from :func:`pooled_clark_evans`).
    edge_corrected : bool
        False: Clark & Evans (1954) R and SE. True: Donnelly's (1978) edge-corrected R and
        SE (NaN when a group lacks plot perimeters).

    Returns
    -------
    RDifference
        SE = √(SE_a² + SE_b²), z = (R_a − R_b) / SE, two-sided normal p-value.

    Notes
    -----
    Both versions use standard errors under complete spatial randomness, so they are exact
    in their assumptions only near R = 1; the permutation test (:func:`r_permutation_test`)
    makes no such assumption. Without edge correction, small plots make the SE too small
    (plants near the boundary have no neighbours outside), so the uncorrected test rejects
    too often in plots of a few hundred plants; the Donnelly version holds its level (see
    docs/methods-compare.md for measured rates). For two dates of the same plants the
    groups are not independent and either test is conservative (the shared plants make the
    two R values positively correlated).

    Examples
    --------
    >>> import numpy as np
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T
    >>> rand = np.random.default_rng(2).uniform(0, 20, (100, 2))
    >>> a = pooled_clark_evans([plot_nn(grid, 400.0, 80.0)])
    >>> b = pooled_clark_evans([plot_nn(rand, 400.0, 80.0)])
    >>> d = r_difference(a, b)
    >>> d.statistic > 0.8, d.pvalue < 0.001
    (True, True)
    """
    if edge_corrected:
        ra, rb, sa, sb = a.statistic_donnelly, b.statistic_donnelly, a.se_donnelly, b.se_donnelly
    else:
        ra, rb, sa, sb = a.statistic, b.statistic, a.se, b.se
    d = ra - rb
    se = math.hypot(sa, sb)
    if not (np.isfinite(d) and se > 0):
        nan = float("nan")
        return RDifference(float(d) if np.isfinite(d) else nan, nan, nan, nan)
    z = d / se
    return RDifference(float(d), float(se), float(z), float(min(1.0, 2 * sps.norm.sf(abs(z)))))


@dataclass(frozen=True)
class RPermutationTest:
    """Permutation test of R_a − R_b that moves whole plots between the groups.

    Attributes
    ----------
    statistic : float
        Observed R_a − R_b.
    pvalue : float
        Two-sided p-value (NaN when fewer than two arrangements exist).
    arrangements : int
        Arrangements used: every distinct one when ``exact``, else the Monte Carlo count.
    exact : bool
        True when all distinct arrangements were enumerated.
    min_pvalue : float
        The smallest p-value this design can give (1 / number of distinct arrangements for
        exact enumeration, 1 / (N + 1) for Monte Carlo).
    """

    statistic: float
    pvalue: float
    arrangements: int
    exact: bool
    min_pvalue: float


def r_permutation_test(
    units_a: Sequence[PlotNN],
    units_b: Sequence[PlotNN],
    *,
    permutations: int = 999,
    expected: str = "per-plot",
    rng: int | np.random.Generator | None = 1,
) -> RPermutationTest:
    """Permutation test of the difference in pooled R, permuting whole plots.

    Parameters
    ----------
    units_a, units_b : sequence of PlotNN
        The plots of the two groups.
    permutations : int
        Monte Carlo arrangements when there are more distinct arrangements than this.
    expected : {'per-plot', 'pooled'}
        As in :func:`pooled_clark_evans`.
    rng : int or numpy.random.Generator
        Seed; same seed, same p-value.

    Returns
    -------
    RPermutationTest

    Notes
    -----
    The plants of one plot share its density, its shape and whatever made them grow there,
    so they are not independent of each other; the exchangeable units are plots. Under the
    null hypothesis that the groups do not differ in pattern, the group labels of the plots
    are exchangeable, so every re-labelling that keeps the group sizes (in plots) is equally
    likely. Each plot keeps its own nearest-neighbour distances (measured within the plot).
    When the number of distinct re-labellings, C(m_a + m_b, m_a), does not exceed
    ``permutations`` + 1 all of them are enumerated (exact test, p = k / C); otherwise
    ``permutations`` random ones are drawn and p = (1 + k) / (N + 1) (Besag & Diggle 1977),
    with k the count at least as extreme as observed. With one plot per group no
    re-labelling other than the swap exists and the p-value is NaN.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(3)
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T
    >>> a = [plot_nn(grid + rng.normal(0, 0.1, grid.shape), 400.0) for _ in range(4)]
    >>> b = [plot_nn(rng.uniform(0, 20, (100, 2)), 400.0) for _ in range(4)]
    >>> res = r_permutation_test(a, b, permutations=99, rng=1)
    >>> res.arrangements, res.exact, res.pvalue  # 8 plots, 4 + 4: all 70 splits enumerated
    (70, True, 0.02857142857142857)
    """
    part_a = _unit_arrays(units_a, expected)
    part_b = _unit_arrays(units_b, expected)
    ma, mb = part_a[0].size, part_b[0].size
    nan = float("nan")
    if ma == 0 or mb == 0:
        return RPermutationTest(nan, nan, 0, False, nan)
    # per plot: summed NN distances, plants, area, expected sum under CSR
    s, n_all, a_all, e = (
        np.concatenate([x, y]) for x, y in zip(part_a[:4], part_b[:4], strict=True)
    )

    def stat(mask: np.ndarray) -> np.ndarray:
        # mask: (k, m) boolean, True = group a
        mf = mask.astype(float)
        if expected == "per-plot":
            ra = (mf @ s) / (mf @ e)
            rb = ((1 - mf) @ s) / ((1 - mf) @ e)
        else:
            ra = (mf @ s) / (0.5 * np.sqrt((mf @ n_all) * (mf @ a_all)))
            rb = ((1 - mf) @ s) / (0.5 * np.sqrt(((1 - mf) @ n_all) * ((1 - mf) @ a_all)))
        return ra - rb

    observed_mask = np.r_[np.ones(ma, bool), np.zeros(mb, bool)][None, :]
    obs = float(stat(observed_mask)[0])
    m = ma + mb
    total = math.comb(m, ma)
    if total < 3:
        return RPermutationTest(obs, nan, total, True, nan)
    eps = 1e-12 * max(1.0, abs(obs))
    if total <= permutations + 1:
        combos = np.array(list(itertools.combinations(range(m), ma)))
        masks = np.zeros((total, m), bool)
        masks[np.repeat(np.arange(total), ma), combos.ravel()] = True
        d = stat(masks)
        k = int(np.sum(np.abs(d) >= abs(obs) - eps))
        # with equal group sizes every arrangement has a mirror image with the opposite sign
        smallest = (2.0 if ma == mb else 1.0) / total
        return RPermutationTest(obs, k / total, total, True, smallest)
    gen = as_rng(rng)
    masks = gen.permuted(np.tile(observed_mask[0], (permutations, 1)), axis=1)
    d = stat(masks)
    k = int(np.sum(np.abs(d) >= abs(obs) - eps))
    return RPermutationTest(
        obs, (1 + k) / (permutations + 1), permutations, False, 1.0 / (permutations + 1)
    )


@dataclass(frozen=True)
class RChangeTest:
    """Monte Carlo test that R changed by more than random losses and recruits explain.

    Attributes
    ----------
    statistic : float
        Observed pooled R on the later date.
    expected : float
        Mean pooled R of the later date under the null (random losses, random recruits).
    pvalue : float
        Two-sided Monte Carlo p-value.
    simulations : int
        Number of simulated later patterns.
    sum_nn_m : float
        Observed sum of the later date's nearest-neighbour distances, metres (for pooling).
    expected_sum_m : float
        The CSR expectation of that sum, Σ ½ √(A n), metres.
    simulated_sums_m : numpy.ndarray
        The simulated sums, one per simulation, metres.
    """

    statistic: float
    expected: float
    pvalue: float
    simulations: int
    sum_nn_m: float = 0.0
    expected_sum_m: float = 0.0
    simulated_sums_m: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)


def _nn_sums_batched(patterns: np.ndarray, spacing: float) -> np.ndarray:
    """Sum of nearest-neighbour distances of each of k patterns (k, n, 2) with one KD-tree.

    The patterns are laid side by side, ``spacing`` apart (more than any within-pattern
    distance), so each point's nearest neighbour is always in its own pattern.
    """
    k, n, _ = patterns.shape
    if n < 2:
        return np.zeros(k)
    shifted = patterns.copy()
    shifted[:, :, 0] += (np.arange(k) * spacing)[:, None]
    d = nn_distances(shifted.reshape(-1, 2))
    return d.reshape(k, n).sum(axis=1)


def _combine(parts: Sequence[RChangeTest], nsim: int) -> RChangeTest:
    nan = float("nan")
    e_tot = float(sum(p.expected_sum_m for p in parts))
    if e_tot == 0 or nsim < 1:
        return RChangeTest(nan, nan, nan, nsim)
    s_obs = float(sum(p.sum_nn_m for p in parts))
    sims = [p.simulated_sums_m for p in parts if p.simulated_sums_m.size]
    s_sim = np.sum(sims, axis=0) if sims else np.zeros(nsim)
    r_obs = s_obs / e_tot
    r_sim = s_sim / e_tot
    eps = 1e-12 * max(1.0, abs(r_obs))
    lo = 1 + int(np.sum(r_sim <= r_obs + eps))
    hi = 1 + int(np.sum(r_sim >= r_obs - eps))
    p = min(1.0, 2.0 * min(lo, hi) / (nsim + 1))
    return RChangeTest(float(r_obs), float(r_sim.mean()), float(p), nsim, s_obs, e_tot, s_sim)


def combine_r_change(tests: Sequence[RChangeTest]) -> RChangeTest:
    """Pool per-plot :class:`RChangeTest` results (same number of simulations) into one test.

    Parameters
    ----------
    tests : sequence of RChangeTest
        Per-plot results of :func:`r_change_test`, each run with the same ``simulations``.

    Returns
    -------
    RChangeTest
        The test of the pooled R over the plots (simulation k of every plot forms pooled
        simulation k, as the plots are simulated independently).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> rng = np.random.default_rng(5)
    >>> tests = []
    >>> for k in range(2):
    ...     box = shapely.box(0, 0, 30, 30)
    ...     before = rng.uniform(0, 30, (100, 2))
    ...     alive = rng.random(100) > 0.2
    ...     after = np.vstack([before[alive], rng.uniform(0, 30, (15, 2))])
    ...     tests.append(r_change_test([(before, alive, after, box)], simulations=49, rng=k))
    >>> pooled = combine_r_change(tests)
    >>> 0.0 < pooled.pvalue <= 1.0 and pooled.simulations == 49
    True
    """
    nsims = {t.simulations for t in tests}
    if len(nsims) > 1:
        raise ValueError("all tests must use the same number of simulations")
    return _combine(tests, nsims.pop() if nsims else 0)


def r_change_test(
    plots: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray, object]],
    *,
    simulations: int = 199,
    rng: int | np.random.Generator | None = 1,
) -> RChangeTest:
    """Did R change between two dates more than random mortality and recruitment would make it?

    Parameters
    ----------
    plots : sequence of (earlier_xy, survived, later_xy, polygon)
        Per plot: the earlier plants (n, 2) in metres, a boolean mask of those that persist,
        the later plants (m, 2), and the plot polygon (shapely, metres).
    simulations : int
        Simulated later patterns.
    rng : int or numpy.random.Generator
        Seed; same seed, same p-value.

    Returns
    -------
    RChangeTest

    Notes
    -----
    Null hypothesis: the plants lost are a random subset of the earlier plants (as many as
    were lost) and the recruits fall uniformly at random in the plot (as many as appeared),
    independently of the survivors. Each simulation keeps the earlier pattern, removes a
    random set of plants of the observed size, adds uniform recruits in the exact plot
    polygon (:func:`ecoscan.stats.csr.uniform_in_polygon`) and computes the later date's R
    pooled over the plots as in :func:`pooled_clark_evans`. The p-value is the two-sided rank
    p-value 2 · min(1 + #{R* ≤ R}, 1 + #{R* ≥ R}) / (N + 1), capped at 1 (Besag & Diggle
    1977, Applied Statistics 26: 327–333). Because the earlier pattern is held fixed, the
    strong dependence between the two dates (the survivors are the same plants) is respected,
    which a z test of two independent R values ignores. Density-dependent (non-random)
    mortality, e.g. self-thinning that spares evenly spaced plants, shows as R_later above
    its null expectation.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> rng = np.random.default_rng(4)
    >>> box = shapely.box(0, 0, 30, 30)
    >>> before = rng.uniform(0, 30, (150, 2))
    >>> alive = rng.random(150) > 0.2                     # random deaths
    >>> after = np.vstack([before[alive], rng.uniform(0, 30, (20, 2))])  # random recruits
    >>> res = r_change_test([(before, alive, after, box)], simulations=99, rng=1)
    >>> res.pvalue > 0.05  # nothing beyond random mortality and recruitment
    True
    """
    from ecoscan.stats.csr import uniform_in_polygon

    gen = as_rng(rng)
    nsim = int(simulations)
    parts: list[RChangeTest] = []
    for exy, survived, lxy, poly in plots:
        exy = np.asarray(exy, float).reshape(-1, 2)
        lxy = np.asarray(lxy, float).reshape(-1, 2)
        survived = np.asarray(survived, bool)
        m = lxy.shape[0]
        if m < 2 or nsim < 1:
            continue
        area = float(poly.area)
        n_keep = int(survived.sum())
        n_new = m - n_keep
        recruits = uniform_in_polygon(poly, n_new, size=nsim, rng=gen)
        order = np.argsort(gen.uniform(size=(nsim, exy.shape[0])), axis=1)[:, :n_keep]
        patterns = np.concatenate([exy[order], recruits], axis=1)
        x0, y0, x1, y1 = poly.bounds
        sims = _nn_sums_batched(patterns, 2.0 * math.hypot(x1 - x0, y1 - y0) + 1.0)
        obs = float(nn_distances(lxy).sum())
        nan = float("nan")
        parts.append(RChangeTest(nan, nan, nan, nsim, obs, 0.5 * math.sqrt(area * m), sims))
    return _combine(parts, nsim)
