"""One-to-one matching within a tolerance, checked against scipy's dense assignment."""

import numpy as np
from scipy.optimize import linear_sum_assignment
from scipy.spatial.distance import cdist

from ecoscan.stats.matching import match_points


def test_recovers_known_pairs_and_leftovers():
    rng = np.random.default_rng(3)
    a = rng.uniform(0, 100, (300, 2))
    keep = rng.uniform(size=300) > 0.2
    b = a[keep] + rng.normal(0, 0.1, (keep.sum(), 2))
    extra = rng.uniform(0, 100, (40, 2))
    b = np.vstack([b, extra])
    m = match_points(a, b, 0.5)
    truth = np.flatnonzero(keep)
    assert m.n_matched >= keep.sum() - 3
    ok = m.index_b < keep.sum()
    assert np.mean(truth[m.index_b[ok]] == m.index_a[ok]) > 0.98
    assert np.all(m.distance_m <= 0.5)
    assert len(set(m.index_a)) == m.n_matched and len(set(m.index_b)) == m.n_matched


def test_cardinality_then_distance_matches_dense_reference():
    # Reference: dense Hungarian (Kuhn 1955) on the same objective via scipy
    rng = np.random.default_rng(7)
    for _ in range(20):
        a = rng.uniform(0, 5, (12, 2))
        b = rng.uniform(0, 5, (10, 2))
        tol = 1.0
        m = match_points(a, b, tol)
        d = cdist(a, b)
        cost = np.where(d <= tol, d / tol - 100.0, 0.0)
        r, c = linear_sum_assignment(cost)
        ok = d[r, c] <= tol
        assert m.n_matched == ok.sum()
        assert abs(m.distance_m.sum() - d[r[ok], c[ok]].sum()) < 1e-9


def test_coincident_points_match_at_zero():
    a = np.array([[1.0, 1.0], [5.0, 5.0]])
    m = match_points(a, a.copy(), 0.1)
    assert m.n_matched == 2 and np.all(m.distance_m == 0)
