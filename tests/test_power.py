"""Detectable effect per plot and the design-power formulas."""

import numpy as np
import pytest
import shapely
from scipy import stats
from scipy.spatial.distance import pdist

from ecoscan.stats.planning import density_change_power, survival_difference_power
from ecoscan.stats.power import detectable_range, hard_core_patterns, normal_detectable_r


def test_hard_core_respects_distance_in_irregular_plot():
    plot = shapely.Polygon([(0, 0), (40, 0), (40, 40), (20, 20), (0, 40)])
    pats = hard_core_patterns(plot, 50, 3.0, size=5, rng=1)
    for p in pats:
        assert pdist(p).min() >= 3.0  # the definition of a hard core (Diggle 1983)
        assert shapely.contains_xy(plot, p[:, 0], p[:, 1]).all()


def test_hard_core_refuses_impossible_packing():
    with pytest.raises(ValueError, match="too large"):
        hard_core_patterns(shapely.box(0, 0, 10, 10), 100, 2.0)


def test_detectable_range_agrees_with_normal_approximation_in_large_square():
    # In a large square with many plants the mean NN distance is close to normal
    # (Clark & Evans 1954), so the detectable R lies near null mean ∓ (z_0.975 + z_0.8) SD.
    plot = shapely.box(0, 0, 100, 100)
    d = detectable_range(plot, 200, simulations=299, patterns=80, rng=3)
    lo, hi = normal_detectable_r(d.null_r_mean, d.null_r_sd, 0.05, 0.8)
    assert d.clustered_r == pytest.approx(lo, abs=0.025)
    assert d.regular_r == pytest.approx(hi, abs=0.025)
    # SD of R under CSR ≈ 0.5227 / √n (Clark & Evans 1954: SE of r̄ = 0.26136 / √(nλ))
    assert d.null_r_sd == pytest.approx(0.5227 / np.sqrt(200), rel=0.15)


def test_small_plot_cannot_tell():
    d = detectable_range(shapely.box(0, 0, 20, 20), 8, simulations=199, patterns=60, rng=1)
    assert d.describe() == "too few plants to tell"
    big = detectable_range(shapely.box(0, 0, 60, 60), 150, simulations=199, patterns=60, rng=1)
    assert big.describe().startswith("this plot could detect R below")
    assert big.clustered_r < 1 < big.regular_r
    assert 0.7 < big.power_at(0.8) <= 1.0


@pytest.mark.parametrize(
    "density,change,area",
    [(400, -0.1, 40_000), (250, 0.2, 20_000)],
)
def test_density_power_matches_statsmodels_at_large_counts(density, change, area):
    # the exact conditional test approaches the normal score test at large counts
    # (statsmodels.stats.rates.power_poisson_ratio_2indep, Zhu & Lakkis 2014)
    from statsmodels.stats.rates import power_poisson_ratio_2indep

    mu1 = density * area / 1e4
    ref = power_poisson_ratio_2indep(
        mu1 * (1 + change),
        mu1,
        1,
        value=1,
        alpha=0.05,
        alternative="two-sided",
        method_var="score",
        return_results=False,
    )
    assert density_change_power(density, change, area) == pytest.approx(float(ref), abs=0.015)


def test_density_power_matches_simulation_of_the_exact_test():
    # scipy.stats.binomtest's exact conditional test on simulated Poisson counts
    rng = np.random.default_rng(0)
    mu1 = 36.0
    n1 = rng.poisson(mu1, 1500)
    n2 = rng.poisson(mu1 * 0.7, 1500)
    p = np.array([stats.binomtest(a, a + b, 0.5).pvalue for a, b in zip(n1, n2, strict=True)])
    sim = float(np.mean(p <= 0.05))
    # binomial standard error of 1500 replicates ≈ 0.013
    assert density_change_power(400, -0.3, 900) == pytest.approx(sim, abs=0.04)


def test_density_power_without_change_is_at_most_alpha():
    assert density_change_power(400, 1e-12, 900) <= 0.05


@pytest.mark.parametrize("pa,pb,n", [(0.8, 0.6, 100), (0.9, 0.8, 200), (0.5, 0.4, 300)])
def test_survival_power_close_to_statsmodels(pa, pb, n):
    # statsmodels' arcsine (Cohen's h) normal power: a different approximation of the same test
    from statsmodels.stats.power import NormalIndPower
    from statsmodels.stats.proportion import proportion_effectsize

    ref = NormalIndPower().power(proportion_effectsize(pa, pb), n, 0.05)
    assert survival_difference_power(pa, pb, n) == pytest.approx(ref, abs=0.012)


def test_every_plot_row_carries_what_it_could_detect():
    from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
    from ecoscan.stats.csr import uniform_in_polygon
    from ecoscan.stats.thomas import thomas_pattern

    plot = shapely.box(0, 0, 60, 60)
    s = DispersionSettings(simulations=199)
    rand = analyse_plot(uniform_in_polygon(plot, 80, rng=3), plot, "r", s)
    row = rand.row()
    assert row["detectable_clustered_R"] < 1 < row["detectable_regular_R"]
    assert "could detect R below" in rand.summary and rand.verdict == "no departure detected"
    lo, hi = row["detectable_clustered_R"], row["detectable_regular_R"]
    assert row["verdict_in_words"] == (
        f"no departure detected (this plot could detect R below {lo:.2f} or above {hi:.2f})"
    )
    few = analyse_plot(uniform_in_polygon(plot, 8, rng=3), plot, "f", s)
    assert few.row()["detectable_reading"] == "too few plants to tell"
    assert few.summary.startswith("too few plants to tell")
    assert few.verdict == "too few plants to tell"
    # a strongly clustered Thomas pattern (κ = 40/ha, μ = 6, σ = 1.5 m) is described in metres
    clus = analyse_plot(thomas_pattern(plot, 0.004, 1.5, 6.0, rng=1), plot, "c", s)
    assert clus.verdict == "clustered" and "m across (2σ" in clus.summary
    assert clus.row()["verdict_in_words"] == "clustered"
    # the cluster description carries its parametric-bootstrap 95% interval, and the interval
    # brackets the point estimate (a percentile interval of refits of the fitted process)
    crow = clus.row()
    assert "95% interval" in crow["pattern_in_metres"]
    assert crow["cluster_plants_low95"] < crow["cluster_plants_high95"]
    assert crow["cluster_width_low95_m"] < crow["cluster_width_m"] < crow["cluster_width_high95_m"]
