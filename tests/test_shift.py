"""Co-registration shift estimate on synthetic surveys with a known shift (ground truth)."""

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from ecoscan.stats.shift import estimate_shift, mutual_pairs


def _surveys(shift, *, lost=0.2, new=0.15, n_side=40, spacing=2.0, noise=0.05, seed=0):
    """Jittered planting grid; later = survivors moved by ``shift`` plus recruits."""
    rng = np.random.default_rng(seed)
    g = np.mgrid[0:n_side, 0:n_side].reshape(2, -1).T * spacing
    a = g + rng.normal(0, 0.3, g.shape)
    keep = rng.uniform(size=len(a)) > lost
    b = a[keep] + np.asarray(shift) + rng.normal(0, noise, (keep.sum(), 2))
    recruits = rng.uniform(0, n_side * spacing, (int(new * len(a)), 2))
    return a, np.vstack([b, recruits])


@pytest.mark.parametrize("shift", [(0.3, -0.2), (-0.15, 0.25), (0.0, 0.0)])
def test_recovers_known_shift_despite_losses_and_recruits(shift):
    # Synthetic ground truth: 20% lost, 15% new, 5 cm detection noise
    a, b = _surveys(shift)
    r = estimate_shift(a, b, 0.6)
    assert r.shift_x_m == pytest.approx(shift[0], abs=0.01)
    assert r.shift_y_m == pytest.approx(shift[1], abs=0.01)
    assert r.converged
    assert r.n_pairs > 0.7 * len(a)
    # the residual after the shift is about the noise: median of a Rayleigh(0.05) = 0.059
    assert r.residual_m == pytest.approx(0.05 * np.sqrt(2 * np.log(2)), rel=0.15)


@pytest.mark.parametrize("factor", [0.5, 0.7, 1.2])
def test_shifts_up_to_and_beyond_the_tolerance(factor):
    tol = 0.6
    shift = factor * tol * np.array([np.cos(0.7), np.sin(0.7)])
    a, b = _surveys(shift, seed=3)
    r = estimate_shift(a, b, tol)
    assert np.hypot(r.shift_x_m - shift[0], r.shift_y_m - shift[1]) < 0.01


def test_heavy_turnover_does_not_fool_the_median():
    a, b = _surveys((0.25, 0.1), lost=0.45, new=0.4, seed=5)
    r = estimate_shift(a, b, 0.6)
    assert np.hypot(r.shift_x_m - 0.25, r.shift_y_m - 0.1) < 0.015


def test_standard_error_matches_spread_over_replicates():
    # The SE formula (median's asymptotic SE) against the spread of estimates over replicates
    est = np.array(
        [estimate_shift(*_surveys((0.2, 0.0), seed=s), 0.6).shift_x_m for s in range(20)]
    )
    se = estimate_shift(*_surveys((0.2, 0.0), seed=99), 0.6).se_x_m
    assert 0.5 < est.std(ddof=1) / se < 2.0


def test_same_seed_same_shift():
    a, b = _surveys((0.3, 0.3), seed=8)
    assert estimate_shift(a, b, 0.6, rng=4) == estimate_shift(a, b, 0.6, rng=4)


def test_no_pairs_gives_zero_shift():
    a = np.array([[0.0, 0.0], [10.0, 0.0]])
    b = np.array([[100.0, 100.0]])
    r = estimate_shift(a, b, 0.5)
    assert (r.shift_x_m, r.shift_y_m, r.n_pairs) == (0.0, 0.0, 0)


def test_mutual_pairs_against_brute_force():
    rng = np.random.default_rng(1)
    a = rng.uniform(0, 10, (60, 2))
    b = rng.uniform(0, 10, (50, 2))
    ia, ib = mutual_pairs(a, b, 1.0)
    d = cdist(a, b)
    want = {
        (i, j)
        for i in range(60)
        for j in [int(np.argmin(d[i]))]
        if d[i, j] <= 1.0 and int(np.argmin(d[:, j])) == i
    }
    assert set(zip(ia.tolist(), ib.tolist(), strict=True)) == want


def test_tolerance_must_be_positive():
    with pytest.raises(ValueError):
        estimate_shift(np.zeros((2, 2)), np.zeros((2, 2)), 0.0)


def test_identical_surveys_give_zero_shift():
    # Exact geometry: a survey compared with itself has no shift, every plant pairs up
    a, _b = _surveys((0.0, 0.0), seed=12)
    r = estimate_shift(a, a.copy(), 0.6)
    assert (r.shift_x_m, r.shift_y_m) == (0.0, 0.0)
    assert r.n_pairs == len(a)
