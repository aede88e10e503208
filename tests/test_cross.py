"""Cross-K / cross-L and the random-labelling test."""

import numpy as np
import pytest
import shapely

from ecoscan.stats.cross import cross_k, random_labelling_test
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.edge import circle_fraction_inside

POLY = shapely.Polygon([(0, 0), (40, 0), (40, 25), (20, 32), (0, 25)])


def test_cross_k_of_independent_uniform_patterns_is_pi_r2():
    # Ripley (1977), JRSS B 39: 172–212: for independent stationary patterns K_AB(r) = πr²;
    # the isotropic estimator is unbiased for independent uniform patterns. 200 replicates.
    rng = np.random.default_rng(3)
    ks = []
    for _ in range(200):
        a = uniform_in_polygon(POLY, 40, rng=rng)
        b = uniform_in_polygon(POLY, 60, rng=rng)
        r, k = cross_k(a, b, POLY, 7.0, steps=35)
        ks.append(k)
    mid = r > 2
    np.testing.assert_allclose(np.mean(ks, axis=0)[mid] / (np.pi * r[mid] ** 2), 1, atol=0.05)


def test_cross_k_matches_brute_force():
    # the defining sum A / (n_A n_B) Σ_{i∈A} Σ_{j∈B} w(x_i, d_ij) 1(d_ij ≤ r), evaluated directly
    rng = np.random.default_rng(4)
    a = uniform_in_polygon(POLY, 15, rng=rng)
    b = uniform_in_polygon(POLY, 20, rng=rng)
    r, k = cross_k(a, b, POLY, 8.0, steps=8)
    d = np.hypot(*(a[:, None, :] - b[None, :, :]).transpose(2, 0, 1))
    ii, jj = np.nonzero(d <= 8.0)
    w = 1 / circle_fraction_inside(a[ii], d[ii, jj], POLY)
    for m, rr in enumerate(r):
        ref = POLY.area / (15 * 20) * np.sum(w * (d[ii, jj] <= rr))
        assert k[m] == pytest.approx(ref, rel=1e-10)


def test_random_labels_are_not_flagged():
    # under random labelling the Monte Carlo p-value is uniform (Besag & Diggle 1977), so a
    # truly random split should rarely be significant: 10 splits, two tests each
    rng = np.random.default_rng(5)
    ps = []
    for _ in range(10):
        xy = uniform_in_polygon(POLY, 120, rng=rng)
        lab = rng.uniform(size=120) < 0.3
        res = random_labelling_test(xy, lab, POLY, simulations=39, rng=rng)
        ps.append(min(res.D.pvalue, res.L_between_kinds.pvalue))
    assert np.mean(np.array(ps) <= 0.05) <= 0.3


def test_dead_plants_in_patches_are_detected():
    # synthetic ground truth: plants uniform, "dead" = the plants inside two 4 m discs plus a
    # few scattered ones; dead are clustered among the living, so K_BB − K_AA > 0 at short range
    # and dead lie farther from live plants than a random split gives (segregation)
    rng = np.random.default_rng(6)
    xy = uniform_in_polygon(POLY, 400, rng=rng)
    in_patch = (np.hypot(xy[:, 0] - 10, xy[:, 1] - 10) < 4) | (
        np.hypot(xy[:, 0] - 30, xy[:, 1] - 18) < 4
    )
    dead = in_patch | (rng.uniform(size=400) < 0.02)
    res = random_labelling_test(xy, dead, POLY, simulations=99, rng=7, labels=("live", "dead"))
    assert res.D.pvalue <= 0.02
    assert res.D.above[(res.r_m > 1) & (res.r_m < 4)].any()
    assert res.L_between_kinds.below.any()
    # same seed, same numbers
    again = random_labelling_test(xy, dead, POLY, simulations=99, rng=7, labels=("live", "dead"))
    np.testing.assert_array_equal(res.D.band_low, again.D.band_low)


def test_cross_verdict_reads_the_patches():
    # the same synthetic ground truth as above, in plain words
    from ecoscan.analysis.scales.compute import kinds_verdict

    rng = np.random.default_rng(6)
    xy = uniform_in_polygon(POLY, 400, rng=rng)
    in_patch = (np.hypot(xy[:, 0] - 10, xy[:, 1] - 10) < 4) | (
        np.hypot(xy[:, 0] - 30, xy[:, 1] - 18) < 4
    )
    dead = in_patch | (rng.uniform(size=400) < 0.02)
    res = random_labelling_test(xy, dead, POLY, simulations=99, rng=7, labels=("live", "dead"))
    text = kinds_verdict(res, 0.05)
    assert text.startswith("dead plants are more clustered among themselves than live plants")
    assert "random labelling: p = 0.01 for dead-dead clustering" in text
