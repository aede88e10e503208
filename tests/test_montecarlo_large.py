"""The Monte Carlo test for large plots: spatially ordered CSR and close-pair NN distances."""

import numpy as np
import pytest
import shapely
from scipy import stats as sps
from scipy.spatial.distance import cdist

from ecoscan.stats import montecarlo
from ecoscan.stats.csr import uniform_in_cells
from ecoscan.stats.montecarlo import monte_carlo_nn
from ecoscan.stats.nearest import nn_distances_close_pairs

#: An L-shaped plot with a hole (7,275 m²).
L_HOLE = shapely.Polygon([(0, 0), (100, 0), (100, 50), (50, 50), (50, 100), (0, 100)]).difference(
    shapely.box(20, 20, 35, 35)
)


@pytest.mark.parametrize("radius", [0.2, 1.5, 50.0])
def test_close_pair_distances_equal_brute_force(radius):
    # brute force over all pairs with scipy's cdist (reference library), including coincident
    # points and a radius so small that most points fall back to the one-by-one query
    rng = np.random.default_rng(2)
    xy = np.vstack([rng.uniform(0, 60, (1500, 2)), rng.normal(30, 0.3, (300, 2))])
    xy = np.vstack([xy, xy[:5]])  # five coincident pairs: distance 0
    d = cdist(xy, xy)
    np.fill_diagonal(d, np.inf)
    got = nn_distances_close_pairs(xy, radius)
    np.testing.assert_allclose(got, d.min(axis=1), rtol=0, atol=1e-12)
    assert np.sum(got == 0) == 10


def test_cells_sampler_is_uniform_and_marks_the_inner_region():
    inner = L_HOLE.buffer(-4.0)
    xy, focal = uniform_in_cells(L_HOLE, 20_000, inner=inner, rng=7)
    assert shapely.contains_xy(L_HOLE, xy[:, 0], xy[:, 1]).all()
    # focal marks equal a point-in-polygon test (shapely)
    np.testing.assert_array_equal(focal, shapely.contains_xy(inner, xy[:, 0], xy[:, 1]))

    # x coordinates follow the exact CDF A(polygon ∩ {x ≤ t}) / A, from shapely clipping:
    # Kolmogorov–Smirnov test (scipy)
    def cdf(t):
        t = np.atleast_1d(t)
        strips = shapely.box(-1.0, -1.0, np.clip(t, -1.0, 101.0), 101.0)
        return shapely.area(shapely.intersection(strips, L_HOLE)) / L_HOLE.area

    assert sps.kstest(xy[:, 0], cdf).pvalue > 0.001
    assert sps.kstest(xy[:, 1], lambda t: cdf(t)).pvalue > 0.001  # symmetric L-shape
    # the count in the inner region is binomial with the area share (scipy binomtest)
    share = inner.area / L_HOLE.area
    assert sps.binomtest(int(focal.sum()), focal.size, share).pvalue > 0.001


def test_large_path_null_distribution_and_verdicts_match_the_earlier_code(monkeypatch):
    # issue 10, item 10: verdicts unchanged on seeded data. The same test with the earlier
    # simulation (uniform_in_polygon, KD-tree queries, point-in-polygon guard zone) and the
    # new one: same verdicts, and simulated means from the same distribution (two-sample
    # Kolmogorov–Smirnov, scipy).
    n = 2500
    rng = np.random.default_rng(11)
    rand = uniform_in_cells(L_HOLE, n, rng=rng)[0]
    parents = uniform_in_cells(L_HOLE, 120, rng=rng)[0]
    clus = parents[rng.integers(0, 120, 3 * n)] + rng.normal(0, 1.0, (3 * n, 2))
    clus = clus[shapely.contains_xy(L_HOLE, clus[:, 0], clus[:, 1])][:n]
    guard = L_HOLE.buffer(-1.5)
    out = {}
    for version, large in (("earlier", 10**12), ("now", montecarlo.LARGE_PATTERN)):
        monkeypatch.setattr(montecarlo, "LARGE_PATTERN", large)
        for name, xy in (("random", rand), ("clustered", clus)):
            res = monte_carlo_nn(xy, L_HOLE, simulations=199, rng=3, guard_region=guard)
            out[version, name] = res
    for name, want in (("random", "no departure"), ("clustered", "clustered")):
        for version in ("earlier", "now"):
            res = out[version, name]
            got = res.side if res.pvalue < 0.05 else "no departure"
            assert got == want, (version, name, res.pvalue)
            assert np.isfinite(res.guard_pvalue)
    a, b = out["earlier", "random"].simulated_nn_m, out["now", "random"].simulated_nn_m
    assert sps.ks_2samp(a, b).pvalue > 0.001
