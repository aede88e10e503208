"""Pooled Clark-Evans R, its difference between groups, and the plot-permutation test."""

import itertools
import math

import numpy as np
import pytest
import shapely
from scipy.spatial.distance import cdist

from ecoscan.stats.compare_r import (
    PlotNN,
    combine_r_change,
    plot_nn,
    pooled_clark_evans,
    r_change_test,
    r_difference,
    r_permutation_test,
)
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.nearest import clark_evans

SQUARE = shapely.box(0, 0, 30, 30)


def _csr_units(k, n, rng, poly=SQUARE):
    return [plot_nn(uniform_in_polygon(poly, n, rng=rng), poly.area, poly.length) for _ in range(k)]


def test_single_plot_equals_clark_evans():
    # Clark & Evans (1954), via ecoscan.stats.nearest.clark_evans
    rng = np.random.default_rng(0)
    xy = uniform_in_polygon(SQUARE, 80, rng=rng)
    ref = clark_evans(xy, 900.0)
    r = pooled_clark_evans([plot_nn(xy, 900.0, 120.0)])
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert r.se == pytest.approx(ref.se_m / ref.expected_nn_m, rel=1e-12)
    assert r.z == pytest.approx(ref.z, rel=1e-9)


def test_square_and_hexagonal_lattices():
    # Clark & Evans (1954): R = 2 for a square lattice and 2.1491 = 2^(1/2) * 2 / 3^(1/4)
    # for a hexagonal one, when the area per point is that of the lattice cell (geometry).
    s = 1.5
    sq = np.mgrid[0:20, 0:20].reshape(2, -1).T * s
    r = pooled_clark_evans([PlotNN(np.full(400, s), 400, 400 * s * s)])
    assert r.statistic == pytest.approx(2.0)
    hex_cell = math.sqrt(3) / 2 * s * s
    r = pooled_clark_evans([PlotNN(np.full(400, s), 400, 400 * hex_cell)])
    assert r.statistic == pytest.approx(2 * math.sqrt(2) / 3**0.25, abs=1e-4)
    assert r.statistic == pytest.approx(2.1491, abs=1e-4)
    # plot_nn measures the lattice spacing as every point's neighbour distance
    assert np.allclose(plot_nn(sq, 900.0).nn_m, s)


def test_pooling_matches_hand_formula():
    # Pooled R = sum of NN distances / sum of per-plot expectations n * 0.5 * sqrt(A / n);
    # SE = 0.26136 * sqrt(sum A) / sum E (Clark & Evans 1954, sigma = 0.26136 / sqrt(n rho)).
    rng = np.random.default_rng(1)
    units = [
        plot_nn(uniform_in_polygon(SQUARE, 50, rng=rng), 900.0),
        plot_nn(uniform_in_polygon(SQUARE, 200, rng=rng), 900.0),
    ]
    s = sum(u.nn_m.sum() for u in units)
    e = sum(0.5 * math.sqrt(u.area_m2 * u.n) for u in units)
    r = pooled_clark_evans(units)
    assert r.statistic == pytest.approx(s / e)
    assert r.se == pytest.approx(0.26136 * math.sqrt(1800.0) / e, rel=1e-4)
    pooled = pooled_clark_evans(units, expected="pooled")
    assert pooled.statistic == pytest.approx(s / (0.5 * math.sqrt(250 * 1800.0)))
    assert r.n == 250 and r.n_plots == 2 and r.area_m2 == 1800.0


def test_plots_with_fewer_than_two_plants_are_left_out():
    u1 = plot_nn(np.array([[1.0, 1.0]]), 100.0)
    u2 = plot_nn(np.array([[1.0, 1.0], [2.0, 1.0]]), 100.0)
    r = pooled_clark_evans([u1, u2])
    assert r.n_plots == 1 and r.n == 2
    assert math.isnan(pooled_clark_evans([u1]).statistic)


def test_donnelly_removes_edge_bias_under_csr():
    # Donnelly (1978): in a bounded window the uncorrected R of a random pattern exceeds 1;
    # the perimeter-corrected expectation brings the mean back to about 1 (simulation).
    rng = np.random.default_rng(2)
    rs = np.array([pooled_clark_evans(_csr_units(1, 50, rng)) for _ in range(300)], dtype=object)
    r = np.array([x.statistic for x in rs])
    rd = np.array([x.statistic_donnelly for x in rs])
    assert r.mean() > 1.04
    assert abs(rd.mean() - 1.0) < 0.015
    # and its SE matches the simulated spread (Donnelly's variance formula)
    assert rd.std(ddof=1) / rs[0].se_donnelly == pytest.approx(1.0, abs=0.15)


def test_difference_z_test_formula():
    rng = np.random.default_rng(3)
    a = pooled_clark_evans(_csr_units(2, 60, rng))
    b = pooled_clark_evans(_csr_units(2, 60, rng))
    d = r_difference(a, b)
    assert d.statistic == pytest.approx(a.statistic - b.statistic)
    assert d.se == pytest.approx(math.hypot(a.se, b.se))
    assert d.z == pytest.approx(d.statistic / d.se)


def test_edge_corrected_difference_holds_its_level_under_no_difference():
    # Two groups of random (CSR) plots: the Donnelly-based z test rejects at about 5%
    rng = np.random.default_rng(4)
    p = [
        r_difference(
            pooled_clark_evans(_csr_units(2, 100, rng)),
            pooled_clark_evans(_csr_units(2, 100, rng)),
            edge_corrected=True,
        ).pvalue
        for _ in range(400)
    ]
    assert 0.02 < np.mean(np.array(p) < 0.05) < 0.085


def test_exact_permutation_enumerates_every_arrangement():
    # Brute force over all C(5, 2) = 10 ways to give 2 of 5 plots to group a
    rng = np.random.default_rng(5)
    units = [plot_nn(uniform_in_polygon(SQUARE, n, rng=rng), 900.0) for n in (30, 40, 50, 60, 70)]
    res = r_permutation_test(units[:2], units[2:], permutations=999)
    assert res.exact and res.arrangements == 10

    def diff(ia):
        a = [units[i] for i in ia]
        b = [units[i] for i in range(5) if i not in ia]
        return pooled_clark_evans(a).statistic - pooled_clark_evans(b).statistic

    obs = diff((0, 1))
    all_d = [diff(c) for c in itertools.combinations(range(5), 2)]
    want = np.mean(np.abs(all_d) >= abs(obs) - 1e-12)
    assert res.statistic == pytest.approx(obs)
    assert res.pvalue == pytest.approx(want)


def test_monte_carlo_permutation_calibrated_and_seeded():
    rng = np.random.default_rng(6)
    p = []
    for _ in range(150):
        p.append(
            r_permutation_test(
                _csr_units(6, 40, rng), _csr_units(6, 40, rng), permutations=199, rng=rng
            ).pvalue
        )
    assert 0.015 < np.mean(np.array(p) < 0.05) < 0.1
    a, b = _csr_units(6, 40, rng), _csr_units(6, 40, rng)
    assert r_permutation_test(a, b, rng=9) == r_permutation_test(a, b, rng=9)


def test_permutation_detects_regular_vs_clustered():
    rng = np.random.default_rng(7)
    lattice = np.mgrid[1:30:2.0, 1:30:2.0].reshape(2, -1).T
    reg = [plot_nn(lattice + rng.normal(0, 0.2, lattice.shape), 900.0) for _ in range(6)]
    clu = []
    for _ in range(6):
        c = uniform_in_polygon(SQUARE, 20, rng=rng)
        clu.append(plot_nn((c[:, None] + rng.normal(0, 0.7, (20, 10, 2))).reshape(-1, 2), 900.0))
    res = r_permutation_test(reg, clu, permutations=999)
    assert res.exact and res.arrangements == 924
    assert res.pvalue == pytest.approx(2 / 924)  # the observed split and its mirror image


def test_one_plot_per_group_has_no_permutation_test():
    rng = np.random.default_rng(8)
    res = r_permutation_test(_csr_units(1, 30, rng), _csr_units(1, 30, rng))
    assert math.isnan(res.pvalue)


def test_r_change_test_calibrated_under_random_turnover():
    # Null of the test holds exactly: random 20% loss from a CSR pattern, CSR recruits
    rng = np.random.default_rng(9)
    p = []
    for _ in range(150):
        a = uniform_in_polygon(SQUARE, 120, rng=rng)
        keep = rng.uniform(size=120) > 0.2
        b = np.vstack([a[keep], uniform_in_polygon(SQUARE, 25, rng=rng)])
        p.append(r_change_test([(a, keep, b, SQUARE)], simulations=99, rng=rng).pvalue)
    assert 0.015 < np.mean(np.array(p) < 0.05) < 0.1


def test_r_change_test_detects_self_thinning():
    # Density-dependent mortality: remove the plant of each close pair (nearest neighbour
    # under 1 m) -> the survivors are more regular than random losses would leave.
    rng = np.random.default_rng(10)
    a = uniform_in_polygon(SQUARE, 300, rng=rng)
    d = cdist(a, a)
    np.fill_diagonal(d, np.inf)
    keep = np.ones(300, bool)
    for i in np.argsort(d.min(axis=1)):
        if keep[i] and np.any(keep & (d[i] < 1.0)):
            keep[i] = False
    res = r_change_test([(a, keep, a[keep], SQUARE)], simulations=199, rng=1)
    assert res.statistic > res.expected
    assert res.pvalue <= 0.01


def test_combined_change_test_pools_plots():
    rng = np.random.default_rng(11)
    parts = []
    for _ in range(3):
        a = uniform_in_polygon(SQUARE, 60, rng=rng)
        keep = rng.uniform(size=60) > 0.3
        parts.append((a, keep, a[keep], SQUARE))
    one = r_change_test(parts, simulations=49, rng=3)
    each = [r_change_test([p], simulations=49, rng=3) for p in parts]
    comb = combine_r_change(each)
    s = sum(plot_nn(p[2], 900.0).nn_m.sum() for p in parts)
    e = sum(0.5 * math.sqrt(900.0 * p[2].shape[0]) for p in parts)
    assert one.statistic == pytest.approx(s / e) and comb.statistic == pytest.approx(s / e)
