"""Comparing NN-distance distributions by permuting whole plots, and the paired date test."""

import itertools
import math

import numpy as np
import pytest
import shapely
from scipy import stats as sps

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.nearest import nn_distances
from ecoscan.stats.nn_distribution import ecdf_distance, nn_distribution_test
from ecoscan.stats.paired import paired_sign_flip_test


def test_gap_is_the_two_sample_ks_distance():
    # reference: scipy.stats.ks_2samp (its statistic is sup |F_a - F_b|), ties included
    rng = np.random.default_rng(1)
    for _ in range(20):
        a = np.round(rng.exponential(size=rng.integers(3, 40)), 1)
        b = np.round(1.3 * rng.exponential(size=rng.integers(3, 40)), 1)
        assert ecdf_distance(a, b) == pytest.approx(sps.ks_2samp(a, b).statistic, abs=1e-12)


def test_exact_p_matches_brute_force_enumeration():
    # brute force: every split of the 7 plots into 3 + 4, KS distance from scipy
    rng = np.random.default_rng(4)
    plots = [rng.gamma(2.0, 1.0 + 0.2 * k, size=rng.integers(5, 15)) for k in range(7)]
    res = nn_distribution_test(plots[:3], plots[3:], permutations=999)
    obs = sps.ks_2samp(np.concatenate(plots[:3]), np.concatenate(plots[3:])).statistic
    ds = []
    for a in itertools.combinations(range(7), 3):
        b = [i for i in range(7) if i not in a]
        pa = np.concatenate([plots[i] for i in a])
        pb = np.concatenate([plots[i] for i in b])
        ds.append(sps.ks_2samp(pa, pb).statistic)
    want = np.mean(np.array(ds) >= obs - 1e-12)
    assert res.exact and res.arrangements == math.comb(7, 3) == 35
    assert res.statistic == pytest.approx(obs)
    assert res.pvalue == pytest.approx(want)
    # one plot per group: no rearrangement of whole plots exists, so no p-value
    assert math.isnan(nn_distribution_test(plots[:1], plots[1:2]).pvalue)


def test_size_under_randomness_with_plots_as_units():
    # 250 pairs of groups of 4 random plots (40 plants each) in an L-shape: the exact
    # permutation test's size cannot exceed alpha (p is uniform over 70 splits, mirrored
    # pairs: P(p <= 0.05) = 2/70 = 0.029). Binomial bound: 0.05 + 2.58 sqrt(.05*.95/250)
    # = 0.086 (99% one-sided). Pooling the same distances as independent (scipy's
    # ks_2samp) rejects about 15% of such pairs (benchmarks/nn_distribution_validity.py).
    shape = shapely.Polygon([(0, 0), (60, 0), (60, 25), (25, 25), (25, 60), (0, 60)])
    rng = np.random.default_rng(11)
    hits = pooled = 0
    reps = 250
    for _ in range(reps):
        nn = [nn_distances(uniform_in_polygon(shape, 40, rng=rng)) for _ in range(8)]
        hits += nn_distribution_test(nn[:4], nn[4:], permutations=99).pvalue <= 0.05
        pooled += sps.ks_2samp(np.concatenate(nn[:4]), np.concatenate(nn[4:])).pvalue <= 0.05
    assert hits / reps <= 0.086
    assert pooled > hits  # the independence shortcut is the liberal one


def test_sign_flip_p_matches_enumeration_and_the_sign_test_limit():
    # reference: with all 2^m sign patterns enumerated by hand; for differences of equal
    # size and one sign, p = 2 / 2^m, the two-sided sign test's p (scipy binomtest)
    d = np.array([0.08, 0.11, 0.05, 0.09])
    res = paired_sign_flip_test(d)
    want = np.mean([abs(np.dot(s, d)) >= abs(d.sum()) - 1e-12
                    for s in itertools.product((1, -1), repeat=4)])  # fmt: skip
    assert res.exact and res.pvalue == pytest.approx(want) == pytest.approx(2 / 16)
    same = paired_sign_flip_test(np.full(6, 0.1))
    assert same.pvalue == pytest.approx(sps.binomtest(6, 6, 0.5).pvalue)
    assert same.min_pvalue == pytest.approx(2 / 64)
