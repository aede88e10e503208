"""Thomas cluster process: closed-form K, simulation and the minimum-contrast fit."""

import numpy as np
import pytest
import shapely
from scipy import integrate, stats

from ecoscan.stats.thomas import (
    fit_thomas,
    thomas_k,
    thomas_pair_correlation,
    thomas_pattern,
    thomas_patterns_given_n,
)


@pytest.mark.parametrize("kappa,sigma", [(0.002, 1.5), (0.05, 0.4)])
def test_closed_form_k_matches_integral_of_pair_correlation(kappa, sigma):
    # K(r) = 2π ∫0^r s g(s) ds for a stationary isotropic process (Stoyan, Kendall & Mecke
    # 1995, Stochastic Geometry, sec. 4.5); Thomas K and g from Møller & Waagepetersen (2004)
    for r in (0.3, 1.0, 4.0, 12.0):
        num, _ = integrate.quad(
            lambda s: 2 * np.pi * s * thomas_pair_correlation(np.array([s]), kappa, sigma)[0],
            0,
            r,
        )
        assert thomas_k(np.array([r]), kappa, sigma)[0] == pytest.approx(num, rel=1e-8)


def test_pattern_count_has_thomas_mean():
    # E[N(W)] = κ μ |W| for a stationary cluster process (Møller & Waagepetersen 2004)
    plot = shapely.box(0, 0, 80, 60)
    counts = [thomas_pattern(plot, 0.004, 1.5, 5.0, rng=s).shape[0] for s in range(200)]
    expected = 0.004 * 5.0 * plot.area
    # the count's spread is larger than Poisson; 200 replicates give a mean within ~3%
    assert np.mean(counts) == pytest.approx(expected, rel=0.06)


def test_given_n_patterns_are_clustered_and_inside():
    plot = shapely.Polygon([(0, 0), (60, 0), (60, 60), (30, 30), (0, 60)])
    pats = thomas_patterns_given_n(plot, 80, 0.002, 1.0, size=20, rng=4)
    assert pats.shape == (20, 80, 2)
    flat = pats.reshape(-1, 2)
    assert shapely.contains_xy(plot, flat[:, 0], flat[:, 1]).all()
    # tight clusters: mean NN distance far below the random value 0.5/√λ (Clark & Evans 1954)
    from ecoscan.stats.montecarlo import mean_nn_batch

    r = mean_nn_batch(pats) / (0.5 / np.sqrt(80 / plot.area))
    assert r.mean() < 0.5


def test_wide_clusters_approach_uniform():
    # with σ much larger than the plot, each point's law tends to uniform on the plot
    plot = shapely.box(0, 0, 10, 10)
    pats = thomas_patterns_given_n(plot, 50, 0.002, 12.0, size=20, rng=2)
    x = pats[:, :, 0].ravel() / 10
    assert stats.kstest(x, "uniform").pvalue > 0.001


def test_fit_recovers_known_parameters():
    # minimum contrast on K (Diggle 1983); 25 replicates in a 120 m square
    plot = shapely.box(0, 0, 120, 120)
    kappa, sigma, mu = 0.003, 2.0, 6.0
    fits = [
        fit_thomas(thomas_pattern(plot, kappa, sigma, mu, rng=100 + s), plot, replicates=0)
        for s in range(25)
    ]
    sig = np.median([f.sigma_m for f in fits])
    size = np.median([f.mean_cluster_size for f in fits])
    assert sig == pytest.approx(sigma, rel=0.2)
    assert size == pytest.approx(mu, rel=0.35)
    assert "plants" in fits[0].describe() and "clusters per hectare" in fits[0].describe()


def test_bootstrap_interval_and_fit_test():
    plot = shapely.box(0, 0, 100, 100)
    xy = thomas_pattern(plot, 0.003, 2.0, 6.0, rng=7)
    fit = fit_thomas(xy, plot, replicates=39, rng=1)
    assert fit.sigma_low_m < fit.sigma_m < fit.sigma_high_m
    assert fit.cluster_size_low < fit.mean_cluster_size < fit.cluster_size_high
    # the Monte Carlo p-value lies on the grid (1 + k) / (N + 1) (Besag & Diggle 1977)
    assert 1 / 40 <= fit.fit_pvalue <= 1
    assert fit.fit_pvalue > 0.01  # the true model fits


def test_fit_needs_points():
    with pytest.raises(ValueError, match="at least 10"):
        fit_thomas(np.zeros((5, 2)), shapely.box(0, 0, 1, 1))
