"""Mark correlation function and mark variogram with permutation envelopes."""

import numpy as np
import shapely
from scipy.spatial import cKDTree

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.marks import mark_correlation, mark_test, mark_verdict

BOX = shapely.box(0, 0, 40, 40)


def _brute(xy, m, r, h):
    """Direct double sum over all ordered pairs (Epanechnikov kernel, no edge weight)."""
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    np.fill_diagonal(d, np.inf)
    out_k, out_g = [], []
    for rk in r:
        t = rk - d
        k = np.where(np.abs(t) < h, 0.75 / h * (1 - (t / h) ** 2), 0.0)
        den = k.sum()
        out_k.append((k * np.outer(m, m)).sum() / den / m.mean() ** 2)
        out_g.append((k * 0.5 * (m[:, None] - m[None, :]) ** 2).sum() / den)
    return np.array(out_k), np.array(out_g)


def test_estimator_equals_the_direct_double_sum_away_from_the_edge():
    # points far from the boundary have isotropic edge weight 1 at these distances, so the
    # estimator must equal the textbook double sum (Illian et al. 2008, kernel estimator of
    # k_mm and of the mark variogram)
    rng = np.random.default_rng(1)
    xy = rng.uniform(15, 25, (60, 2))
    m = rng.uniform(1, 3, 60)
    r, k, g = mark_correlation(xy, m, BOX, 4.0, steps=8, bandwidth_m=0.5)
    bk, bg = _brute(xy, m, r, 0.5)
    assert np.allclose(k, bk) and np.allclose(g, bg)


def test_k_mm_is_one_under_random_labelling():
    # independent marks: k_mm(r) = 1 and the mark variogram equals the mark variance at every
    # r (Stoyan 1984; Illian et al. 2008). Averaged over 40 random labellings of one pattern.
    rng = np.random.default_rng(2)
    xy = uniform_in_polygon(BOX, 150, rng=rng)
    ks, gs = [], []
    for _ in range(40):
        m = rng.lognormal(0.3, 0.3, 150)
        _r, k, g = mark_correlation(xy, m, BOX, 8.0, steps=16)
        ks.append(k)
        gs.append(g / np.var(m))
    assert np.all(np.abs(np.nanmean(ks, axis=0)[2:] - 1.0) < 0.03)
    assert np.all(np.abs(np.nanmean(gs, axis=0)[2:] - 1.0) < 0.1)


def test_permutation_test_holds_its_level_under_random_labelling():
    # size under the null: 20 patterns with independent marks and 39 permutations each;
    # P(4 or more rejections) = 0.016 at a true level of 5% (binomial)
    rng = np.random.default_rng(3)
    rejects = 0
    for _ in range(20):
        xy = uniform_in_polygon(BOX, 100, rng=rng)
        res = mark_test(xy, rng.uniform(1, 2, 100), BOX, 8.0, steps=20, permutations=39, rng=rng)
        rejects += res.pvalue <= 0.05
    assert rejects <= 3


def test_competition_is_found_and_said_in_words():
    # plants with a close neighbour are smaller (a planted competition effect): the test
    # must reject and the verdict must say neighbours closer than some distance are smaller
    rng = np.random.default_rng(4)
    xy = uniform_in_polygon(BOX, 160, rng=rng)
    nn = cKDTree(xy).query(xy, k=2)[0][:, 1]
    m = 0.8 + 0.6 * np.minimum(nn, 2.5) + rng.normal(0, 0.05, 160)
    res = mark_test(xy, m, BOX, 8.0, mark="diameter_m", steps=40, permutations=99, rng=5)
    small, _large, verdict = mark_verdict(res, 0.05)
    assert res.pvalue <= 0.02
    assert small and small[0][0] < 1.5
    assert verdict.startswith("neighbours closer than") and "smaller than average" in verdict
    assert "competition" in verdict
