"""Nearest-neighbour distances, Clark–Evans R and its edge corrections, checked against
published formulas and constants, exact lattice geometry and scipy."""

import numpy as np
import pytest
import shapely
from scipy.spatial.distance import cdist

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import mean_nn_batch
from ecoscan.stats.nearest import (
    CE_SE_CONSTANT,
    DONNELLY_MEAN_BASE,
    DONNELLY_MEAN_N,
    DONNELLY_VAR_AREA,
    DONNELLY_VAR_PERIMETER,
    clark_evans,
    default_guard_m,
    donnelly,
    donnelly_expected,
    guard_zone,
    nn_distances,
)


def _hex_lattice(rows=40, cols=40, a=1.0):
    j, i = np.mgrid[0:rows, 0:cols]
    x = a * (i + 0.5 * (j % 2))
    y = a * (np.sqrt(3) / 2) * j
    return np.column_stack([x.ravel(), y.ravel()]).astype(float)


def test_nn_distances_match_brute_force():
    # reference: scipy.spatial.distance.cdist, all pairs, self excluded
    rng = np.random.default_rng(3)
    xy = rng.uniform(0, 50, (300, 2))
    d = cdist(xy, xy)
    np.fill_diagonal(d, np.inf)
    np.testing.assert_allclose(nn_distances(xy), d.min(axis=1), rtol=0, atol=1e-12)


def test_nn_distances_with_other_pool_matches_brute_force():
    # reference: cdist; focal points are a subset of the pool, self skipped once
    rng = np.random.default_rng(4)
    pool = rng.uniform(0, 20, (200, 2))
    focal = pool[::3]
    d = cdist(focal, pool)
    d[np.arange(focal.shape[0]), np.arange(0, 200, 3)] = np.inf
    np.testing.assert_allclose(nn_distances(focal, pool), d.min(axis=1), atol=1e-12)


def test_coincident_points_have_distance_zero():
    xy = np.array([[0.0, 0.0], [0.0, 0.0], [5.0, 0.0], [9.0, 0.0]])
    np.testing.assert_allclose(nn_distances(xy), [0.0, 0.0, 4.0, 4.0])


def test_se_constant():
    # Clark & Evans (1954), Ecology 35:445: sigma = 0.26136 / sqrt(n rho)
    assert CE_SE_CONSTANT == pytest.approx(0.26136, abs=5e-6)


def test_hexagonal_lattice_gives_maximum_R():
    # Clark & Evans (1954): R = 2.1491 for a hexagonal lattice (= 2 sqrt(2) / 3^(1/4), lattice
    # geometry). Every lattice point has its nearest neighbour at distance a; the area is n
    # hexagonal cells of sqrt(3)/2 a^2, so no edge effect enters.
    a = 2.5
    xy = _hex_lattice(a=a)
    res = clark_evans(xy, xy.shape[0] * np.sqrt(3) / 2 * a * a)
    assert res.statistic == pytest.approx(2 * np.sqrt(2) / 3**0.25, rel=1e-12)
    assert round(res.statistic, 4) == 2.1491


def test_square_lattice_gives_two():
    # Clark & Evans (1954): R = 2.0 for a square lattice (rho = 1/a^2, r_E = a/2, r_A = a)
    a = 3.0
    j, i = np.mgrid[0:30, 0:30]
    xy = np.column_stack([i.ravel() * a, j.ravel() * a]).astype(float)
    res = clark_evans(xy, xy.shape[0] * a * a)
    assert res.statistic == pytest.approx(2.0, rel=1e-12)
    # z = (r_A - r_E) / (0.26136 / sqrt(n rho)) computed by hand from the published formula
    n, rho = 900, 1 / 9
    assert res.z == pytest.approx((3.0 - 1.5) / (0.26136 / np.sqrt(n * rho)), rel=1e-4)


def test_all_points_coincident_give_R_zero():
    # Clark & Evans (1954): R = 0 when all individuals occupy the same spot
    xy = np.zeros((12, 2))
    assert clark_evans(xy, 100.0).statistic == 0.0


def test_donnelly_constants_as_quoted():
    # Donnelly (1978) as quoted by secondary sources (project reference list; not checked
    # against the original chapter): 0.0514, 0.041, 0.0703, 0.037
    assert (DONNELLY_MEAN_BASE, DONNELLY_MEAN_N) == (0.0514, 0.041)
    assert (DONNELLY_VAR_AREA, DONNELLY_VAR_PERIMETER) == (0.0703, 0.037)


def test_donnelly_worked_value():
    # n = 100 in a 100 m x 100 m square (A = 10 000 m2, P = 400 m), by hand from Donnelly (1978):
    # E = 0.5 * 10 + (0.0514 + 0.041 / 10) * 4 = 5.222 m
    # Var = 0.0703 * 10000 / 100^2 + 0.037 * 400 * sqrt(10000 / 100^5) = 0.0703 + 0.0148 = 0.0851
    mean, var = donnelly_expected(100, 10_000.0, 400.0)
    assert mean == pytest.approx(5.222, abs=1e-12)
    assert var == pytest.approx(0.0851, abs=1e-12)


def test_donnelly_constant_variant_is_negligible():
    # 0.041 vs 0.0412 (sources differ, see REFERENCES): the difference in E(r) is below
    # 0.02 % for n >= 10 in a square, so the choice cannot change a conclusion
    for n in (10, 30, 100, 1000):
        a, p = 10_000.0, 400.0
        e, _ = donnelly_expected(n, a, p)
        diff = 0.0002 / np.sqrt(n) * p / n
        assert diff / e < 2e-4


def test_donnelly_matches_simulation_in_rectangle():
    # Donnelly (1978) fitted his constants to simulations of random patterns in rectangles,
    # so a fresh simulation must reproduce E and Var: 20 000 patterns of n = 40 in 100 x 50 m.
    poly = shapely.box(0, 0, 100, 50)
    n, m = 40, 20_000
    sims = mean_nn_batch(uniform_in_polygon(poly, n, size=m, rng=20260))
    e, var = donnelly_expected(n, poly.area, poly.length)
    se_of_mean = np.sqrt(var / m)
    assert abs(sims.mean() - e) < 4 * se_of_mean + 0.002 * e
    assert sims.var(ddof=1) == pytest.approx(var, rel=0.05)
    # and the uncorrected Clark-Evans expectation 0.5/sqrt(rho) is clearly too small
    assert 0.5 * np.sqrt(poly.area / n) < 0.93 * sims.mean()


def test_donnelly_z_uses_donnelly_variance():
    rng = np.random.default_rng(8)
    poly = shapely.box(0, 0, 60, 40)
    xy = uniform_in_polygon(poly, 45, rng=rng)
    res = donnelly(xy, poly)
    e, var = donnelly_expected(45, poly.area, poly.length)
    mean = nn_distances(xy).mean()
    assert res.z == pytest.approx((mean - e) / np.sqrt(var), rel=1e-12)
    assert res.statistic == pytest.approx(mean / e, rel=1e-12)


def test_guard_zone_zero_width_equals_clark_evans():
    rng = np.random.default_rng(9)
    poly = shapely.box(0, 0, 50, 50)
    xy = uniform_in_polygon(poly, 80, rng=rng)
    g = guard_zone(xy, poly, 0.0)
    ce = clark_evans(xy, poly.area)
    assert g.n_focal == 80
    assert g.statistic == pytest.approx(ce.statistic, rel=1e-12)
    assert g.z == pytest.approx(ce.z, rel=1e-12)


def test_guard_zone_focal_points_and_neighbours():
    # focal points: farther than the guard width from the plot edge (exact geometry through
    # shapely distance); neighbours come from all points, density from the whole plot
    rng = np.random.default_rng(10)
    poly = shapely.Polygon([(0, 0), (60, 0), (70, 40), (30, 55), (0, 35)])
    xy = uniform_in_polygon(poly, 150, rng=rng)
    w = 6.0
    edge = shapely.distance(poly.boundary, shapely.points(xy))
    focal = edge > w
    d = cdist(xy, xy)
    np.fill_diagonal(d, np.inf)
    mean = d.min(axis=1)[focal].mean()
    rho = 150 / poly.area
    g = guard_zone(xy, poly, w)
    assert g.n_focal == int(focal.sum())
    assert g.mean_nn_m == pytest.approx(mean, rel=1e-12)
    assert g.statistic == pytest.approx(mean / (0.5 / np.sqrt(rho)), rel=1e-12)
    assert g.se_m == pytest.approx(0.26136 / np.sqrt(focal.sum() * rho), rel=1e-4)


def test_guard_zone_removes_edge_bias():
    # Under complete spatial randomness the guard-zone R averages about 1 while the
    # uncorrected R is biased upwards in a small plot (Donnelly 1978: edge effect)
    poly = shapely.box(0, 0, 40, 40)
    pats = uniform_in_polygon(poly, 40, size=600, rng=5)
    w = default_guard_m(40, poly.area)
    rg = np.array([guard_zone(p, poly, w).statistic for p in pats])
    r0 = np.array([clark_evans(p, poly.area).statistic for p in pats])
    se = rg.std(ddof=1) / np.sqrt(rg.size)
    assert abs(rg.mean() - 1.0) < 4 * se + 0.01
    assert r0.mean() > 1.05


def test_default_guard_rule():
    # 1/sqrt(rho): twice the CSR expected NN distance 0.5/sqrt(rho) (Clark & Evans 1954)
    assert default_guard_m(100, 10_000.0) == pytest.approx(10.0)
    assert np.isnan(default_guard_m(0, 10_000.0))


def test_guard_zone_too_wide_gives_nan():
    poly = shapely.box(0, 0, 10, 10)
    xy = uniform_in_polygon(poly, 20, rng=1)
    g = guard_zone(xy, poly, 6.0)  # buffer(-6) of a 10 m square is empty
    assert g.n_focal == 0 and np.isnan(g.statistic)


def test_direction_follows_sign_of_z():
    # Clark & Evans (1954): R < 1 (z < 0) aggregation, R > 1 (z > 0) regular spacing
    j, i = np.mgrid[0:20, 0:20]
    grid = np.column_stack([i.ravel() * 2.0, j.ravel() * 2.0])
    assert clark_evans(grid, 40.0 * 40.0).side == "regular"
    clumped = np.vstack([grid[:200] * 0.01, grid[:200] * 0.01 + 0.001])
    assert clark_evans(clumped, 40.0 * 40.0).side == "clustered"
    assert clark_evans(grid[:1], 10.0).side == ""
