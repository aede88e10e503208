"""Monte Carlo nearest-neighbour test in the exact polygon (Besag & Diggle 1977), and the
calibration of the Monte Carlo, Donnelly and uncorrected tests under simulated CSR."""

import numpy as np
import pytest
import shapely
from scipy.spatial.distance import cdist

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import mean_nn_batch, monte_carlo_nn, rank_pvalues
from ecoscan.stats.nearest import clark_evans, donnelly

RECT = shapely.box(0, 0, 100, 50)
# an irregular plot with a hole (invented shape)
IRREGULAR = shapely.Polygon([(0, 0), (100, 0), (130, 60), (60, 110), (20, 80), (0, 40)]).difference(
    shapely.Point(60, 50).buffer(15)
)


def test_rank_pvalues_formula():
    # Besag & Diggle (1977), Applied Statistics 26:327: p = (1 + k) / (N + 1)
    sims = np.arange(1.0, 100.0)  # N = 99 values 1..99
    p, lo, up = rank_pvalues(100.0, sims)  # larger than all: k_upper = 0
    assert up == pytest.approx(1 / 100) and lo == pytest.approx(1.0)
    assert p == pytest.approx(2 / 100)  # two-sided: min(1, 2 min(p_lower, p_upper))
    p, lo, up = rank_pvalues(0.5, sims, "clustered")
    assert p == lo == pytest.approx(1 / 100)
    # ties count against the observed value: obs = 10 ties with one simulated value
    _, lo, up = rank_pvalues(10.0, sims)
    assert lo == pytest.approx((1 + 10) / 100) and up == pytest.approx((1 + 90) / 100)
    p, _, _ = rank_pvalues(50.0, sims)
    assert p == 1.0


def test_rank_pvalues_vectorised_rows():
    rng = np.random.default_rng(0)
    sims = rng.normal(size=(5, 19))
    obs = rng.normal(size=5)
    p, _lo, up = rank_pvalues(obs, sims, "regular")
    for i in range(5):
        assert up[i] == pytest.approx((1 + np.sum(sims[i] >= obs[i])) / 20)
    np.testing.assert_array_equal(p, up)


def test_mean_nn_batch_matches_brute_force():
    # reference: scipy.spatial.distance.cdist per pattern; patterns must not interact
    pats = uniform_in_polygon(IRREGULAR, 25, size=30, rng=2)
    got = mean_nn_batch(pats)
    for k, pat in enumerate(pats):
        d = cdist(pat, pat)
        np.fill_diagonal(d, np.inf)
        assert got[k] == pytest.approx(d.min(axis=1).mean(), rel=1e-12)


def test_same_seed_same_result_and_seed_matters():
    xy = uniform_in_polygon(IRREGULAR, 60, rng=3)
    a = monte_carlo_nn(xy, IRREGULAR, simulations=99, rng=42)
    b = monte_carlo_nn(xy, IRREGULAR, simulations=99, rng=42)
    c = monte_carlo_nn(xy, IRREGULAR, simulations=99, rng=43)
    np.testing.assert_array_equal(a.simulated_nn_m, b.simulated_nn_m)
    assert a.pvalue == b.pvalue
    assert not np.array_equal(a.simulated_nn_m, c.simulated_nn_m)


def test_batches_do_not_change_the_distribution(monkeypatch):
    # simulations split in small batches still give patterns of the right n in the polygon
    import ecoscan.stats.montecarlo as mc

    monkeypatch.setattr(mc, "BATCH_POINTS", 200)
    xy = uniform_in_polygon(RECT, 50, rng=3)
    res = mc.monte_carlo_nn(xy, RECT, simulations=50, rng=1)
    assert res.simulated_nn_m.shape == (50,)
    assert np.all(np.isfinite(res.simulated_nn_m))


def test_clustered_and_regular_patterns_are_detected():
    rng = np.random.default_rng(5)
    parents = uniform_in_polygon(RECT, 5, rng=rng)
    clus = np.repeat(parents, 20, axis=0) + rng.normal(0, 1.0, (100, 2))
    clus = clus[shapely.contains_xy(RECT, clus[:, 0], clus[:, 1])]
    res = monte_carlo_nn(clus, RECT, simulations=199, rng=1)
    assert res.side == "clustered" and res.pvalue == pytest.approx(2 / 200)
    j, i = np.mgrid[0:10, 0:20]
    grid = np.column_stack([i.ravel() * 5 + 2.5, j.ravel() * 5 + 2.5]).astype(float)
    res = monte_carlo_nn(grid, RECT, simulations=199, rng=1)
    assert res.side == "regular" and res.p_upper == pytest.approx(1 / 200)


def test_mc_expected_close_to_donnelly_in_rectangle():
    # In a rectangle the CSR mean of the simulated means approaches Donnelly's (1978) E
    xy = uniform_in_polygon(RECT, 80, rng=9)
    res = monte_carlo_nn(xy, RECT, simulations=2000, rng=1)
    e = donnelly(xy, RECT).expected_nn_m
    assert res.expected_nn_m == pytest.approx(e, rel=0.01)


def test_needs_two_points_and_valid_arguments():
    with pytest.raises(ValueError):
        monte_carlo_nn(np.zeros((1, 2)), RECT)
    with pytest.raises(ValueError):
        monte_carlo_nn(np.ones((5, 2)), RECT, simulations=0)
    with pytest.raises(ValueError):
        monte_carlo_nn(np.ones((5, 2)), RECT, direction="less")


# Calibration under complete spatial randomness. 400 random patterns of n = 30, each tested
# with 199 simulations: with N = 199 the two-sided Monte Carlo test rejects with probability
# exactly 10 / 200 = 0.05 (Besag & Diggle 1977). The binomial standard error of a rejection
# rate from 400 patterns is sqrt(0.05 * 0.95 / 400) = 0.011; the band 0.05 +/- 0.036 is
# about 3.3 standard errors.
N_PATTERNS, N_SIM, N_POINTS, BAND = 400, 199, 30, 0.036


@pytest.mark.slow
@pytest.mark.parametrize("poly", [RECT, IRREGULAR], ids=["rectangle", "irregular"])
def test_size_under_csr(poly):
    rng = np.random.default_rng(2026)
    obs = uniform_in_polygon(poly, N_POINTS, size=N_PATTERNS, rng=rng)
    p_mc = np.array([monte_carlo_nn(o, poly, simulations=N_SIM, rng=rng).pvalue for o in obs])
    p_dn = np.array([donnelly(o, poly).pvalue for o in obs])
    ce = [clark_evans(o, poly.area) for o in obs]
    assert abs(np.mean(p_mc <= 0.05) - 0.05) < BAND
    assert abs(np.mean(p_dn < 0.05) - 0.05) < BAND
    # uncorrected Clark-Evans: edge effects lengthen observed distances, so in small plots it
    # calls random patterns "regular" far more often than 2.5 % (Donnelly 1978)
    reg = np.mean([c.pvalue < 0.05 and c.z > 0 for c in ce])
    clu = np.mean([c.pvalue < 0.05 and c.z < 0 for c in ce])
    assert reg > 0.025 + BAND
    assert clu < reg / 4


def test_sequential_pvalues_follow_besag_clifford():
    # Besag & Clifford (1991), Biometrika 78: 301-304: p = h / l when the h-th simulated value
    # at least as extreme as the observed one comes at simulation l; (1 + g) / (N + 1) after N
    from ecoscan.stats.montecarlo import sequential_pvalues

    sims = np.array([3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0])[:, None]
    lo, up, used = sequential_pvalues(np.array([3.5]), sims, 99, 2)
    assert lo[0] == 2 / 2  # 3 and 1 are both <= 3.5 by l = 2
    assert up[0] == 2 / 5  # 4 (l = 3) and 5 (l = 5) are >= 3.5
    assert used == 5
    lo, up, used = sequential_pvalues(np.array([10.0]), sims, 8, 2)
    assert up[0] == 1 / 9 and used == 8  # never reached: fixed-N rank p with N = 8
    lo0, up0, _ = sequential_pvalues(np.array([3.5]), sims, 8, 0)
    _, lo_f, up_f = rank_pvalues(3.5, sims[:, 0])
    assert lo0[0] == lo_f and up0[0] == up_f


def test_sequential_verdicts_equal_fixed_n_on_seeded_patterns():
    # issue 10, item 10: verdicts unchanged by the sequential rule (seeded data); a random
    # pattern stops early, a clear one uses every simulation
    rng = np.random.default_rng(5)
    parents = uniform_in_polygon(RECT, 5, rng=rng)
    clus = np.repeat(parents, 20, axis=0) + rng.normal(0, 1.0, (100, 2))
    clus = clus[shapely.contains_xy(RECT, clus[:, 0], clus[:, 1])]
    j, i = np.mgrid[0:10, 0:20]
    grid = np.column_stack([i.ravel() * 5 + 2.5, j.ravel() * 5 + 2.5]).astype(float)
    rand = uniform_in_polygon(RECT, 100, rng=9)
    for xy, want in ((clus, "clustered"), (grid, "regular"), (rand, "random")):
        fixed = monte_carlo_nn(xy, RECT, simulations=499, rng=1)
        seq = monte_carlo_nn(xy, RECT, simulations=499, rng=1, stop_after=20)
        for res in (fixed, seq):
            assert (res.side if res.pvalue < 0.05 else "random") == want
    assert seq.simulations < 150 and fixed.simulations == 499


def test_numbers_do_not_depend_on_the_number_of_processes():
    xy = uniform_in_polygon(RECT, 60, rng=4)
    a = monte_carlo_nn(xy, RECT, simulations=150, rng=3, stop_after=20, workers=1)
    b = monte_carlo_nn(xy, RECT, simulations=150, rng=3, stop_after=20, workers=2)
    assert a.pvalue == b.pvalue and a.simulations == b.simulations
    np.testing.assert_array_equal(a.simulated_nn_m, b.simulated_nn_m)


def test_large_pattern_path_matches_plain_kdtree():
    # the path for n >= 2000 (patterns in spatial order, close-pair NN distances) gives the
    # same means as a plain scipy cKDTree query (reference library) on the same seeded patterns
    import shapely as shp

    from ecoscan.stats.csr import uniform_in_cells
    from ecoscan.stats.montecarlo import _block_stats

    ent = [1, 2, 3, 4]
    got = _block_stats(shp.to_wkb(RECT), None, 2500, 2, ent, 5)[:, 0]
    gen = np.random.default_rng(np.random.SeedSequence(ent, spawn_key=(5,)))
    pats = np.stack([uniform_in_cells(RECT, 2500, rng=gen)[0] for _ in range(2)])
    np.testing.assert_allclose(got, mean_nn_batch(pats), rtol=1e-12)
