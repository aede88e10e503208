"""Counts, rates and proportions: two Poisson rates, the Wilson interval, Holm's adjustment.

References
----------
Przyborowski, J. & Wilenski, H. (1940). Homogeneity of results in testing samples from
Poisson series. Biometrika 31: 313–323. (Conditional binomial test of two Poisson rates.)

Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference.
Journal of the American Statistical Association 22: 209–212. (Score interval.)

Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scandinavian
Journal of Statistics 6: 65–70.

McNemar, Q. (1947). Note on the sampling error of the difference between correlated
proportions or percentages. Psychometrika 12: 153–157. (Paired counts: only the discordant
counts carry information; exact form as a binomial test.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

__all__ = [
    "PoissonRateTest",
    "holm_adjust",
    "paired_change_test",
    "poisson_rate_test",
    "wilson_interval",
]


@dataclass(frozen=True)
class PoissonRateTest:
    """Result of :func:`poisson_rate_test`.

    Attributes
    ----------
    statistic : float
        Rate ratio (count1 / exposure1) / (count2 / exposure2); ``inf`` when count2 is 0.
    pvalue : float
        Exact conditional p-value (binomial, conditional on count1 + count2).
    count1, count2 : int
        The counts.
    exposure1, exposure2 : float
        Their exposures (for plant counts: areas in m²).
    rate1, rate2 : float
        count / exposure.
    ratio_low, ratio_high : float
        Exact (Clopper–Pearson) confidence limits for the rate ratio, from the binomial
        proportion's limits p ↦ p / (1 − p) · exposure2 / exposure1.
    """

    statistic: float
    pvalue: float
    count1: int
    count2: int
    exposure1: float
    exposure2: float
    rate1: float
    rate2: float
    ratio_low: float
    ratio_high: float


def _alt(direction: str) -> str:
    # our words -> scipy.stats.binomtest's keyword values
    table = {"either": "two-sided", "higher": "greater", "lower": "less"}  # retired-name
    if direction not in table:
        raise ValueError("direction must be 'either', 'higher' or 'lower'")
    return table[direction]


def poisson_rate_test(
    count1: int,
    exposure1: float,
    count2: int,
    exposure2: float,
    *,
    direction: str = "either",
    confidence: float = 0.95,
) -> PoissonRateTest:
    """Exact conditional test that two Poisson counts come from the same rate.

    Parameters
    ----------
    count1, count2 : int
        Observed counts (e.g. plants), ≥ 0.
    exposure1, exposure2 : float
        Exposures (e.g. surveyed areas in m²), > 0.
    direction : {'either', 'higher', 'lower'}
        'higher': rate1 > rate2 is the departure looked for.
    confidence : float
        Confidence level of the rate-ratio interval.

    Returns
    -------
    PoissonRateTest

    Notes
    -----
    Under equal rates and conditional on the total k = count1 + count2, count1 is binomial
    with k trials and p = exposure1 / (exposure1 + exposure2) (Przyborowski & Wilenski 1940).
    The p-value is :func:`scipy.stats.binomtest`'s exact p-value; with no plants at all
    (k = 0) it is 1.

    Examples
    --------
    >>> res = poisson_rate_test(30, 1.0, 30, 1.0)  # same counts, same areas
    >>> float(res.pvalue)
    1.0
    """
    c1, c2 = int(count1), int(count2)
    e1, e2 = float(exposure1), float(exposure2)
    if c1 < 0 or c2 < 0:
        raise ValueError("counts must be non-negative")
    if not (e1 > 0 and e2 > 0):
        raise ValueError("exposures must be positive")
    k = c1 + c2
    r1, r2 = c1 / e1, c2 / e2
    ratio = r1 / r2 if c2 > 0 else (float("inf") if c1 > 0 else float("nan"))
    if k == 0:
        return PoissonRateTest(ratio, 1.0, c1, c2, e1, e2, r1, r2, 0.0, float("inf"))
    p0 = e1 / (e1 + e2)
    res = sps.binomtest(c1, k, p0, alternative=_alt(direction))  # scipy keyword
    ci = res.proportion_ci(confidence_level=confidence, method="exact")

    def to_ratio(p: float) -> float:
        return float("inf") if p >= 1.0 else p / (1.0 - p) * e2 / e1

    return PoissonRateTest(
        float(ratio), float(res.pvalue), c1, c2, e1, e2, r1, r2, to_ratio(ci.low), to_ratio(ci.high)
    )


def paired_change_test(lost: int, new: int) -> float:
    """Exact test that losses and recruits balance (no net change) in a re-surveyed plot.

    Parameters
    ----------
    lost : int
        Plants present on the earlier date only.
    new : int
        Plants present on the later date only.

    Returns
    -------
    float
        Two-sided exact p-value; 1 when nothing changed.

    Notes
    -----
    The two dates share their persisting plants, so the two counts are not independent and
    the two-rate test does not apply. Only the discordant counts carry information about net
    change: conditional on lost + new, ``lost`` is binomial(lost + new, ½) under no net change
    (McNemar 1947, exact form; the two-rate test of Przyborowski & Wilenski 1940 with equal
    exposures).

    Examples
    --------
    >>> paired_change_test(10, 10)  # as many lost as new: no evidence of change
    1.0
    >>> round(paired_change_test(12, 2), 4)  # exact binomial, 14 changes split 12 : 2
    0.0129
    """
    lost, new = int(lost), int(new)
    if lost + new == 0:
        return 1.0
    return float(sps.binomtest(lost, lost + new, 0.5).pvalue)


def wilson_interval(
    successes: int | np.ndarray, trials: int | np.ndarray, confidence: float = 0.95
) -> tuple[np.ndarray | float, np.ndarray | float]:
    """Wilson score interval for a binomial proportion (vectorised).

    Parameters
    ----------
    successes : int or array of int
        Number of successes (e.g. surviving plants).
    trials : int or array of int
        Number of trials (e.g. plants on the earlier date); NaN limits where it is 0.
    confidence : float
        Two-sided confidence level, e.g. 0.95.

    Returns
    -------
    low, high : float or numpy.ndarray
        Interval limits in [0, 1].

    Notes
    -----
    Wilson (1927): with p̂ = x / n and z the standard-normal quantile,
    centre = (p̂ + z²/2n) / (1 + z²/n), half-width = z √(p̂(1 − p̂)/n + z²/4n²) / (1 + z²/n).

    Examples
    --------
    >>> low, high = wilson_interval(8, 10)  # Wilson (1927); statsmodels gives the same
    >>> round(low, 4), round(high, 4)
    (0.4902, 0.9433)
    """
    x = np.asarray(successes, float)
    n = np.asarray(trials, float)
    if np.any(x < 0) or np.any(x > n):
        raise ValueError("successes must lie between 0 and trials")
    z = float(sps.norm.ppf(0.5 + confidence / 2.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        p = x / n
        denom = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denom
        half = z * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / denom
    low = np.where(n > 0, np.clip(centre - half, 0.0, 1.0), np.nan)
    high = np.where(n > 0, np.clip(centre + half, 0.0, 1.0), np.nan)
    if low.ndim == 0:
        return float(low), float(high)
    return low, high


def holm_adjust(pvalues: np.ndarray | list[float]) -> np.ndarray:
    """Holm's step-down adjustment of p-values for multiple comparisons.

    Parameters
    ----------
    pvalues : array-like of float
        Unadjusted p-values; NaN entries are ignored (left NaN) and do not count as tests.

    Returns
    -------
    numpy.ndarray
        Adjusted p-values (same order): with the m valid p-values sorted ascending,
        p̃₍ᵢ₎ = max_{j ≤ i} min(1, (m − j + 1) p₍ⱼ₎) (Holm 1979). Rejecting where p̃ ≤ α
        controls the family-wise error rate at α.

    Examples
    --------
    >>> holm_adjust([0.01, 0.04, 0.03])  # Holm (1979): 3p, 2p and 1p, kept monotone
    array([0.03, 0.06, 0.06])
    """
    p = np.asarray(pvalues, float).ravel()
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = ok.size
    if m == 0:
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    scaled = (m - np.arange(m)) * p[order]
    out[order] = np.minimum(1.0, np.maximum.accumulate(scaled))
    return out
