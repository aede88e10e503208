"""G, F and J against theory, hand-worked Kaplan–Meier values and brute force."""

import numpy as np
import shapely

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.distance_functions import (
    EmptySpaceGrid,
    csr_distance_cdf,
    empty_space_function,
    j_function,
    kaplan_meier_cdf,
    nn_function,
    reduced_sample_cdf,
)
from ecoscan.stats.edge import boundary_distance

POLY = shapely.Polygon(
    [(0, 0), (50, 0), (50, 20), (30, 35), (0, 35)], [[(10, 10), (16, 10), (13, 16)]]
)


def test_kaplan_meier_hand_worked():
    # hand-worked product-limit estimate (Kaplan & Meier 1958, JASA 53: 457): times 1, 2c, 3, 4
    # (c = censored): S(1) = 3/4, S(3) = 3/4 · (1 − 1/2) = 3/8, S(4) = 0
    d = np.array([1.0, 5.0, 3.0, 4.0])
    c = np.array([9.0, 2.0, 9.0, 9.0])
    got = kaplan_meier_cdf(d, c, np.array([0.5, 1.0, 2.5, 3.0, 4.0]))
    np.testing.assert_allclose(got, [0, 0.25, 0.25, 1 - 3 / 8, 1.0])


def test_kaplan_meier_without_censoring_is_the_empirical_cdf():
    # with no censoring the product-limit estimate is the empirical distribution (Kaplan &
    # Meier 1958); checked against numpy's sorted counts
    rng = np.random.default_rng(0)
    d = rng.exponential(size=200)
    r = np.linspace(0, 3, 31)
    ecdf = np.searchsorted(np.sort(d), r, side="right") / d.size
    np.testing.assert_allclose(kaplan_meier_cdf(d, np.full(200, np.inf), r), ecdf)


def test_border_cdf_brute_force():
    # reduced-sample estimator #{d ≤ r ≤ c} / #{c ≥ r}, counted directly
    rng = np.random.default_rng(1)
    d, c = rng.uniform(0, 3, 50), rng.uniform(0, 3, 50)
    r = np.linspace(0.05, 2.5, 20)
    ref = [np.sum((d <= x) & (c >= x)) / np.sum(c >= x) for x in r]
    np.testing.assert_allclose(reduced_sample_cdf(d, c, r), ref)


def test_csr_G_F_J_match_theory_on_average():
    # G(r) = F(r) = 1 − exp(−λπr²) under complete spatial randomness and J = 1 (van Lieshout &
    # Baddeley 1996, Statistica Neerlandica 50: 344). A uniform pattern of fixed n is a
    # binomial process; at n = 200 the Poisson formula is within ~1% (common practice).
    n = 200
    lam = n / POLY.area
    r = np.linspace(0.1, 1.5 / np.sqrt(lam), 25)
    grid = EmptySpaceGrid(POLY, 2000)
    G, F, Gb, Fb = [], [], [], []
    for xy in uniform_in_polygon(POLY, n, size=150, rng=3):
        g = nn_function(xy, POLY, r)
        f = empty_space_function(xy, POLY, r, grid=grid)
        G.append(g.km)
        F.append(f.km)
        Gb.append(g.reduced_sample)
        Fb.append(f.reduced_sample)
    theo = csr_distance_cdf(r, lam)
    np.testing.assert_allclose(np.mean(G, axis=0), theo, atol=0.02)
    np.testing.assert_allclose(np.mean(F, axis=0), theo, atol=0.02)
    np.testing.assert_allclose(np.nanmean(Gb, axis=0), theo, atol=0.03)
    np.testing.assert_allclose(np.nanmean(Fb, axis=0), theo, atol=0.03)
    J = j_function(np.mean(G, axis=0), np.mean(F, axis=0))
    np.testing.assert_allclose(J[r < 1 / np.sqrt(lam)], 1.0, atol=0.08)


def test_G_of_a_lattice_jumps_at_the_spacing():
    # exact geometry: on a square lattice of spacing 2 m every nearest neighbour is at 2 m,
    # so G = 0 below 2 m and 1 from 2 m on; no location is farther than √2 m from a plant, so
    # F = 1 from 1.42 m and J = (1 − G)/(1 − F) is > 1 (regular) below and undefined above
    g = np.arange(1, 30, 2.0)
    X, Y = np.meshgrid(g, g)
    xy = np.column_stack([X.ravel(), Y.ravel()])
    poly = shapely.box(0, 0, 30, 30)
    r = np.array([0.5, 1.0, 1.99, 2.0, 2.5])
    G = nn_function(xy, poly, r)
    np.testing.assert_allclose(G.km, [0, 0, 0, 1, 1])
    F = empty_space_function(xy, poly, r)
    J = j_function(G.km, F.km)
    assert np.all(J[:2] > 1) and np.all(np.isnan(J[2:]))
    assert np.isnan(j_function(np.array([0.5]), np.array([1.0]))[0])


def test_empty_space_grid_boundary_distances():
    grid = EmptySpaceGrid(POLY, 500)
    assert shapely.contains_xy(POLY, grid.xy[:, 0], grid.xy[:, 1]).all()
    np.testing.assert_allclose(grid.boundary_m, boundary_distance(grid.xy, POLY))
    assert 350 < grid.xy.shape[0] < 650
