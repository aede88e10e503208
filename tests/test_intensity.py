"""Plant density from covariates (Berman–Turner Poisson GLM) and kernel intensity."""

import numpy as np
import pytest
import shapely
from scipy import optimize, stats

from ecoscan.stats.intensity import (
    CovariateEffect,
    CovariateSurface,
    effect_step,
    fit_intensity,
    kernel_bandwidth,
    kernel_intensity,
    quadrature,
    refit_coefficients,
    simulate_inhomogeneous,
)

W, H = 60.0, 40.0
BOX = shapely.box(0, 0, W, H)


def _pattern(beta0, beta1, rng, poly=BOX):
    """Inhomogeneous Poisson pattern with λ = exp(β₀ + β₁ x) (Poisson count)."""
    # ∫ exp(β₀ + β₁ x) over the box = H e^β₀ (e^{β₁ W} − 1) / β₁ (calculus)
    mean = H * np.exp(beta0) * np.expm1(beta1 * W) / beta1
    n = rng.poisson(mean)
    lam_max = np.exp(beta0 + max(0.0, beta1 * W))
    return simulate_inhomogeneous(
        poly, n, lambda p: np.exp(beta0 + beta1 * p[:, 0]), lam_max, rng=rng
    )[0]


def test_quadrature_weights_cover_the_plot_exactly():
    # counting weights share each cell's area inside the plot: they sum to the plot's area
    # (exact geometry), also for a plot with a hole and a slanted edge
    poly = shapely.Polygon([(0, 0), (37, 3), (40, 30), (2, 25)], [[(10, 10), (20, 10), (20, 18)]])
    xy = np.array([[5.0, 5.0], [12.0, 16.0], [30.0, 20.0]])
    q = quadrature(xy, poly, 1.3)
    assert q.weights_m2.sum() == pytest.approx(poly.area, rel=1e-9)
    assert q.n_data == 3 and np.all(q.weights_m2 > 0)
    assert np.all(shapely.contains_xy(poly.buffer(1e-6), q.xy[:, 0], q.xy[:, 1]))


def test_fit_matches_the_exact_maximum_likelihood_on_a_rectangle():
    # For λ = exp(a + b x) on [0, W] × [0, H] the likelihood equations are closed-form:
    # mean x of the plants = ∫ x e^{bx} dx / ∫ e^{bx} dx = W e^{bW}/(e^{bW} − 1) − 1/b
    # (calculus). The Berman–Turner fit approximates that MLE; with a fine grid it must
    # agree to well within one standard error.
    rng = np.random.default_rng(7)
    xy = _pattern(np.log(0.1), 0.03, rng)
    xbar = xy[:, 0].mean()

    def eq(b):
        return W * np.exp(b * W) / np.expm1(b * W) - 1.0 / b - xbar

    b_exact = optimize.brentq(eq, 1e-6, 1.0)
    q = quadrature(xy, BOX, 0.5)
    fit = fit_intensity(q, q.xy[:, :1], ["east"], ["m"])
    e = fit.effects[0]
    assert abs(e.coefficient - b_exact) < 0.1 * e.std_error
    # the intercept makes the fitted density integrate to the count (first score equation)
    assert np.sum(q.weights_m2 * fit.intensity(q.xy[:, :1])) == pytest.approx(len(xy), rel=1e-6)


def test_numpy_refit_equals_statsmodels_fit():
    # the fast refit used for the simulations maximises the same likelihood as statsmodels
    rng = np.random.default_rng(3)
    xy = _pattern(np.log(0.08), -0.02, rng)
    q = quadrature(xy, BOX)
    z = np.column_stack([q.xy[:, 0], np.sin(q.xy[:, 1] / 7.0)])
    fit = fit_intensity(q, z, ["east", "wave"])
    beta = refit_coefficients(q, z, fit.centres)
    assert np.allclose(beta, np.r_[fit.intercept, fit.coefficients], atol=1e-8)


def test_interval_coverage_on_simulated_patterns():
    # 95% Wald intervals from statsmodels' Poisson GLM on the Berman–Turner quadrature must
    # cover the true coefficient in about 95% of patterns (Baddeley & Turner 2000). 80
    # replicates: coverage below 0.85 has probability < 0.001 if it is really 0.95
    # (binomial), so the check fails when the standard errors are wrong by ~30% or more.
    # The 200-replicate figure is in benchmarks/covariate_coverage.py.
    rng = np.random.default_rng(2026)
    b1 = -0.04
    hits, est = 0, []
    for _ in range(80):
        xy = _pattern(np.log(0.12), b1, rng)
        q = quadrature(xy, BOX)
        e = fit_intensity(q, q.xy[:, :1], ["east"], ["m"]).effects[0]
        hits += e.ci_low <= b1 <= e.ci_high
        est.append(e.coefficient)
    assert hits / 80 >= 0.85
    assert abs(np.mean(est) - b1) < 3 * np.std(est) / np.sqrt(80) + 0.002


def test_thinning_draws_from_the_right_density():
    # points of an inhomogeneous Poisson process given their count are iid with density
    # ∝ λ (Lewis & Shedler 1979): x then has CDF (e^{bx} − 1)/(e^{bW} − 1) on [0, W]
    b = 0.05
    xy = simulate_inhomogeneous(BOX, 3000, lambda p: np.exp(b * p[:, 0]), np.exp(b * W), rng=11)[0]

    def cdf(x):
        return np.expm1(b * np.asarray(x)) / np.expm1(b * W)

    assert stats.kstest(xy[:, 0], cdf).pvalue > 0.01
    assert stats.kstest(xy[:, 1] / H, "uniform").pvalue > 0.01
    assert np.all(shapely.contains_xy(BOX, xy[:, 0], xy[:, 1]))


def test_bilinear_surface_matches_a_plane():
    # bilinear interpolation is exact for a plane (common practice)
    xs = np.arange(5) + 0.5
    ys = 4.5 - np.arange(5)
    gx, gy = np.meshgrid(xs, ys)
    s = CovariateSurface("z", "m", 2.0 * gx - 3.0 * gy + 1.0, 0.5, 4.5, 1.0)
    p = np.random.default_rng(0).uniform(0.5, 4.5, (50, 2))
    assert np.allclose(s.at(p), 2.0 * p[:, 0] - 3.0 * p[:, 1] + 1.0)
    assert np.isnan(s.at(np.array([[9.0, 1.0]]))[0])


def test_effect_sentence_says_direction_and_factor():
    e = CovariateEffect("elevation", "m", -np.log(2.3) / 10, 0.01, -0.1, -0.06, 0.001, 10.0)
    s = e.sentence()
    assert s.startswith("plants are 2.3 times denser per 10 m lower elevation")
    up = CovariateEffect("wetness", "", np.log(1.5), 0.1, 0.2, 0.6, 0.01, 1.0)
    assert "denser per 1 unit of higher wetness" in up.sentence()
    flat = CovariateEffect("slope", "deg", 0.0, 0.1, -0.2, 0.2, 0.9, 5.0)
    assert flat.sentence().startswith("no clear effect of slope")
    assert effect_step(np.linspace(0, 37, 500)) == 20.0


def test_kernel_intensity_recovers_a_known_gradient():
    # Scott's rule (Scott 1992, from memory): h = mean coordinate SD × n^(-1/6)
    rng = np.random.default_rng(5)
    xy = _pattern(np.log(0.05), 0.04, rng)
    h = kernel_bandwidth(xy)
    assert h == pytest.approx(np.mean(np.std(xy, axis=0, ddof=1)) * len(xy) ** (-1 / 6))
    q = quadrature(xy, BOX, 1.0)
    ki = kernel_intensity(xy, q)
    assert np.allclose(kernel_intensity(xy, q, h, points_only=True).at_points, ki.at_points)
    true = np.exp(np.log(0.05) + 0.04 * q.xy[len(xy) :, 0])
    # the smoothed density follows the true one (correlation) and is edge-corrected
    # (Diggle 1985): its mean over the plot is close to n / A
    assert np.corrcoef(ki.at_quadrature[len(xy) :], true)[0, 1] > 0.9
    assert np.average(ki.at_quadrature, weights=q.weights_m2) == pytest.approx(
        len(xy) / BOX.area, rel=0.1
    )
