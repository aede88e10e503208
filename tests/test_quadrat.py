"""Quadrat analysis: chi-square against scipy.stats, Morisita (1959), Smith-Gill (1975) via
Krebs (1999), the index of dispersion, exact clipped geometry and the boundary rule."""

import numpy as np
import pytest
import shapely
from scipy import stats as sps

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.quadrat import (
    default_quadrat_cells,
    morisita_index,
    quadrat_monte_carlo,
    quadrat_test,
    standardised_morisita,
)

SQUARE = shapely.box(0, 0, 100, 100)
IRREGULAR = shapely.Polygon([(0, 0), (100, 0), (130, 60), (60, 110), (20, 80), (0, 40)])


def test_chi_square_agrees_with_scipy_on_clipped_grid():
    # reference: scipy.stats.chisquare with expected counts n * a_i / A (upper tail) and
    # scipy.stats.chi2.cdf (lower tail); two-sided = min(1, 2 min(lower, upper))
    xy = uniform_in_polygon(IRREGULAR, 300, rng=1)
    r = quadrat_test(xy, IRREGULAR, 15.0)
    ref = sps.chisquare(r.counts, r.expected)
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert r.df == r.q - 1
    assert r.p_upper == pytest.approx(ref.pvalue, rel=1e-10)
    lower = sps.chi2.cdf(ref.statistic, r.q - 1)
    assert r.pvalue == pytest.approx(min(1.0, 2 * min(lower, ref.pvalue)), rel=1e-10)


def test_too_even_pattern_has_small_two_sided_p():
    # one point at the centre of every cell: X2 = 0, lower tail tiny (two-sided test)
    j, i = np.mgrid[0:10, 0:10]
    xy = np.column_stack([i.ravel() * 10 + 5, j.ravel() * 10 + 5]).astype(float)
    r = quadrat_test(xy, SQUARE, 10.0)
    assert r.statistic == 0.0
    assert r.pvalue == pytest.approx(2 * sps.chi2.cdf(0.0, 99))
    assert r.pvalue < 1e-10
    assert morisita_index(r.counts) == 0.0  # no cell holds two points


def test_clipped_cells_cover_plot_exactly():
    # exact geometry: the clipped cells' areas sum to the plot area; expected = n a_i / A
    xy = uniform_in_polygon(IRREGULAR, 50, rng=2)
    r = quadrat_test(xy, IRREGULAR, 12.0)
    assert r.cell_area_m2.sum() == pytest.approx(IRREGULAR.area, rel=1e-12)
    np.testing.assert_allclose(r.expected, 50 * r.cell_area_m2 / IRREGULAR.area)
    assert r.counts.sum() == 50
    assert shapely.union_all(r.cells).area == pytest.approx(IRREGULAR.area, rel=1e-9)


def test_counts_match_cell_membership():
    # every point is counted in the clipped cell that contains it (shapely as reference)
    xy = uniform_in_polygon(IRREGULAR, 200, rng=4)
    r = quadrat_test(xy, IRREGULAR, 9.0)
    pts = shapely.points(xy)
    for cell, c in zip(r.cells, r.counts, strict=True):
        assert int(shapely.covers(cell, pts).sum()) == c


def test_index_of_dispersion_equal_cells():
    # equal cells: X2 / (q - 1) equals the variance-to-mean ratio s2 / mean
    rng = np.random.default_rng(6)
    xy = rng.uniform(0, 100, (400, 2))
    r = quadrat_test(xy, SQUARE, 20.0)
    assert r.q == 25
    assert r.vmr == pytest.approx(np.var(r.counts, ddof=1) / np.mean(r.counts), rel=1e-12)


def test_morisita_all_in_one_quadrat_equals_q():
    # Morisita (1959): I_delta = q when all individuals fall in one quadrat
    rng = np.random.default_rng(7)
    xy = rng.uniform(20.5, 29.5, (40, 2))  # inside the cell [20, 30) x [20, 30)
    r = quadrat_test(xy, SQUARE, 10.0)
    assert r.q == 100
    assert r.morisita == pytest.approx(100.0, rel=1e-12)
    # Smith-Gill (1975) via Krebs (1999): the maximum standardised value is +1
    assert r.morisita_std == pytest.approx(1.0)


def test_morisita_formula_and_random_expectation():
    # Morisita (1959): I = q sum n(n-1) / (N (N-1)); about 1 for a random pattern
    counts = np.array([3, 0, 1, 4, 2])
    assert morisita_index(counts) == pytest.approx(5 * (6 + 0 + 0 + 12 + 2) / (10 * 9))
    vals = [
        quadrat_test(uniform_in_polygon(IRREGULAR, 100, rng=s), IRREGULAR, 20.0).morisita
        for s in range(200)
    ]
    se = np.std(vals, ddof=1) / np.sqrt(len(vals))
    assert abs(np.mean(vals) - 1.0) < 4 * se


def test_standardised_morisita_limits():
    # Smith-Gill (1975) as given by Krebs (1999): I_p = +0.5 at the clumped index M_c and
    # -0.5 at the uniform index M_u, 0 at I = 1; M from chi-square quantiles with q-1 df
    q, n = 25, 100
    mu = (sps.chi2.ppf(0.025, q - 1) - q + n) / (n - 1)
    mc = (sps.chi2.ppf(0.975, q - 1) - q + n) / (n - 1)
    assert standardised_morisita(mc, n, q) == pytest.approx(0.5)
    assert standardised_morisita(mu, n, q) == pytest.approx(-0.5)
    assert standardised_morisita(1.0, n, q) == pytest.approx(0.0)
    assert standardised_morisita(q, n, q) == pytest.approx(1.0)
    # between M_c and q: 0.5 + 0.5 (I - M_c) / (q - M_c)
    i = (mc + q) / 2
    assert standardised_morisita(i, n, q) == pytest.approx(0.75)
    # below M_u: -0.5 + 0.5 (I - M_u) / M_u; at I = 0 this is -1
    assert standardised_morisita(0.0, n, q) == pytest.approx(-1.0)


def test_boundary_rule_half_open_cells():
    # documented rule: [x0, x1) x [y0, y1); last column and row closed
    xy = np.array([[10.0, 5.0], [100.0, 100.0], [0.0, 0.0], [5.0, 20.0]])
    r = quadrat_test(xy, SQUARE, 10.0)
    cell = {(int(a), int(b)): int(c) for a, b, c in zip(r.row, r.col, r.counts, strict=True)}
    assert cell[(0, 1)] == 1  # x = 10 on a grid line goes right
    assert cell[(9, 9)] == 1  # far corner stays in the last cell
    assert cell[(0, 0)] == 1
    assert cell[(2, 0)] == 1  # y = 20 on a grid line goes up
    assert r.counts.sum() == 4


def test_boundary_point_next_to_empty_cell_goes_across_the_line():
    # an L-shaped plot: the point (10, 15) lies on the plot boundary x = 10 and on a grid
    # line; the cell to its right has no plot area, so it is counted in the cell to its left
    plot = shapely.Polygon([(0, 0), (20, 0), (20, 10), (10, 10), (10, 20), (0, 20)])
    xy = np.array([[10.0, 15.0], [5.0, 5.0], [15.0, 5.0]])
    r = quadrat_test(xy, plot, 10.0)
    assert r.q == 3
    cell = {(int(a), int(b)): int(c) for a, b, c in zip(r.row, r.col, r.counts, strict=True)}
    assert cell[(1, 0)] == 1


def test_points_outside_refused():
    with pytest.raises(ValueError, match="outside"):
        quadrat_test(np.array([[150.0, 50.0], [50.0, 50.0]]), SQUARE, 10.0)


def test_default_grid_whole_cells_expect_five_and_no_thin_edge_cells():
    # issue 10, case 5. Cochran's rule: expected counts of at least 5 (common practice).
    # n = 50 in a 100 m square: 3 × 3 equal cells of 33.3 m, each expecting 5.6 points
    xy = uniform_in_polygon(SQUARE, 50, rng=3)
    r = quadrat_test(xy, SQUARE)
    assert r.cell_size_m == pytest.approx(100 / 3) and r.cell_height_m == pytest.approx(100 / 3)
    assert r.q == 9 and r.n_low_expected == 0
    # exact geometric fact: in a rectangle the fitted grid has equal cells, none thin
    for poly, n in ((shapely.box(0, 0, 50, 50), 100), (shapely.box(0, 0, 400, 5), 100)):
        w, h = default_quadrat_cells(poly, n)
        res = quadrat_test(uniform_in_polygon(poly, n, rng=1), poly)
        assert np.ptp(res.cell_area_m2) < 1e-9 * w * h
        assert res.expected.min() >= 5.0
    # two cells at least, even for very few points
    assert np.prod([round(s) for s in default_quadrat_cells(SQUARE, 4)]) == 5000
    assert quadrat_test(xy, SQUARE, 50.0).n_low_expected == 0


def test_absurd_grid_refused():
    with pytest.raises(ValueError, match="larger quadrats"):
        quadrat_test(np.array([[1.0, 1.0], [2.0, 2.0]]), SQUARE, 0.01)


def test_quadrat_monte_carlo_agrees_with_chi_square_when_counts_are_large():
    # with about 16 points expected per cell the chi-square approximation is good, so the
    # multinomial Monte Carlo p must match scipy.stats.chi2 (Besag & Diggle 1977 rank p);
    # 4999 simulations give a standard error below 0.008 for any p
    xy = uniform_in_polygon(IRREGULAR, 600, rng=11)
    r = quadrat_test(xy, IRREGULAR, 25.0)
    p, lo, up = quadrat_monte_carlo(r, 4999, rng=1)
    assert up == pytest.approx(sps.chi2.sf(r.statistic, r.df), abs=0.03)
    assert lo == pytest.approx(sps.chi2.cdf(r.statistic, r.df), abs=0.03)
    assert p == pytest.approx(min(1, 2 * min(lo, up)))
    assert quadrat_monte_carlo(r, 99, rng=5) == quadrat_monte_carlo(r, 99, rng=5)


def test_quadrat_monte_carlo_flags_clumping():
    rng = np.random.default_rng(12)
    xy = np.vstack([rng.uniform(0, 30, (60, 2)), rng.uniform(0, 100, (20, 2))])
    r = quadrat_test(xy, SQUARE)
    p, _, up = quadrat_monte_carlo(r, 199, rng=2)
    assert up == pytest.approx(1 / 200) and p == pytest.approx(2 / 200)


@pytest.mark.parametrize("case", range(40))
def test_every_point_counted_once_even_on_grid_lines(case):
    # points on integer positions fall on grid lines and the plot edge; the L-shaped plot
    # has cells outside it: the counts must still add up to n with no cell outside the plot
    rng = np.random.default_rng(case)
    cell = float(rng.choice([1.0, 2.0, 2.5, 5.0, 7.0]))
    plot = shapely.Polygon([(0, 0), (20, 0), (20, 10), (10, 10), (10, 20), (0, 20)])
    xy = rng.integers(0, 21, (int(rng.integers(2, 60)), 2)).astype(float)
    xy = xy[shapely.intersects_xy(plot, xy[:, 0], xy[:, 1])]
    if xy.shape[0] < 2:
        return
    r = quadrat_test(xy, plot, cell)
    assert r.counts.sum() == xy.shape[0]
    assert np.all(r.cell_area_m2 > 0)
    # a cell never holds more points than it covers (points on shared edges are covered by
    # two cells but counted in one)
    covered = shapely.covers(r.cells[:, None], shapely.points(xy)[None, :]).sum(axis=1)
    assert np.all(r.counts <= covered)
