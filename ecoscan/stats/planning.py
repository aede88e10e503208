"""Power for monitoring design: density change between dates, survival between sites.

Pure functions of design numbers (plot area, number of plots, densities, proportions); the
pattern part of a design (the smallest departure from random a plot can detect) is in
:mod:`ecoscan.stats.power`.
"""

from __future__ import annotations

import numpy as np
from scipy import stats as sps

__all__ = ["density_change_power", "survival_difference_power"]


def _check_alpha(alpha: float) -> None:
    if not 0 < alpha < 1:
        raise ValueError("alpha must lie between 0 and 1")


def density_change_power(
    density_per_ha: float,
    relative_change: float,
    area_m2: float,
    *,
    alpha: float = 0.05,
) -> float:
    """Power of the exact two-rate test to detect a change in plant density.

    Parameters
    ----------
    density_per_ha : float
        Density on the first date, plants per hectare.
    relative_change : float
        Change on the second date as a fraction (−0.2 for a 20% loss, 0.3 for 30% more).
    area_m2 : float
        Total surveyed area on each date (all plots together), m².
    alpha : float
        Two-sided level.

    Returns
    -------
    float
        Probability that the test rejects equal rates.

    Notes
    -----
    Counts are taken as independent Poisson counts on the two dates, tested with the exact
    conditional test (Przyborowski & Wilenski 1940) that ``ecoscan compare`` uses: given the
    total T, the first count is binomial(T, ½) under equal rates, and the test rejects in
    both tails at total level α. The power sums the binomial tail probabilities under the
    alternative over the Poisson law of T. Plots re-surveyed on both dates share their
    persisting plants; the paired test used for them then has at least this power when few
    plants turn over, so this figure is a cautious planning value. Counts that vary between
    plots more than a Poisson law allows (patchy sites) lower the real power.

    Examples
    --------
    >>> round(density_change_power(400, -0.3, 10_000), 3) > 0.99
    True
    """
    _check_alpha(alpha)
    if not density_per_ha > 0 or not area_m2 > 0:
        raise ValueError("density and area must be positive")
    if not relative_change > -1:
        raise ValueError("the relative change must be above -1 (-100%)")
    mu1 = density_per_ha * area_m2 / 1e4
    mu2 = mu1 * (1.0 + relative_change)
    total = mu1 + mu2
    if total > 5e6:
        raise ValueError("more than 5 million plants expected: check the density and area")
    spread = 12.0 * np.sqrt(total) + 20.0
    t = np.arange(max(1, int(total - spread)), int(total + spread) + 1)
    weights = sps.poisson.pmf(t, total)
    # largest c with 2 · P(Bin(T, ½) ≤ c) ≤ α, per total T (−1 where none)
    c = sps.binom.ppf(alpha / 2, t, 0.5).astype(np.int64)
    c = np.where(2 * sps.binom.cdf(c, t, 0.5) <= alpha + 1e-12, c, c - 1)
    share = mu1 / total
    reject = sps.binom.cdf(c, t, share) + sps.binom.sf(t - c - 1, t, share)
    reject = np.where(c >= 0, reject, 0.0)
    return float(np.clip(np.sum(weights * reject), 0.0, 1.0))


def survival_difference_power(
    survival_a: float,
    survival_b: float,
    plants_per_site: float,
    *,
    alpha: float = 0.05,
) -> float:
    """Power of a two-sided two-proportion test to detect a survival difference.

    Parameters
    ----------
    survival_a, survival_b : float
        Proportions of plants alive at the second date at the two sites, in (0, 1).
    plants_per_site : float
        Plants followed at each site (all plots together).
    alpha : float
        Two-sided level.

    Returns
    -------
    float
        Normal-approximation power.

    Notes
    -----
    Power = Φ((|p_a − p_b| √n − z_{1−α/2} √(2 p̄ q̄)) / √(p_a q_a + p_b q_b)), the usual
    normal approximation for equal group sizes (Fleiss, Levin & Paik 2003, Statistical
    Methods for Rates and Proportions, ch. 4; from memory). Plants of one plot share their
    plot's conditions, so plot-to-plot variation lowers the real power: plan with several
    plots per site.

    Examples
    --------
    >>> round(survival_difference_power(0.8, 0.6, 100), 2)  # by hand from the formula: 0.876
    0.88
    """
    _check_alpha(alpha)
    for p in (survival_a, survival_b):
        if not 0 < p < 1:
            raise ValueError("survival proportions must lie strictly between 0 and 1")
    if not plants_per_site > 0:
        raise ValueError("plants per site must be positive")
    pa, pb = float(survival_a), float(survival_b)
    pbar = (pa + pb) / 2
    z = sps.norm.ppf(1 - alpha / 2)
    num = abs(pa - pb) * np.sqrt(plants_per_site) - z * np.sqrt(2 * pbar * (1 - pbar))
    return float(sps.norm.cdf(num / np.sqrt(pa * (1 - pa) + pb * (1 - pb))))
