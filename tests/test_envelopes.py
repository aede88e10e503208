"""Pointwise and global envelope tests."""

import numpy as np
import pytest

from ecoscan.stats.envelopes import envelope_test, pointwise_envelope, rank_length_measure


def _curves(rng, s, m=40):
    # smooth random curves (Gaussian random walk), exchangeable under the null
    return np.cumsum(rng.normal(size=(s, m)), axis=1)


def test_pointwise_envelope_ranks():
    # with s = 39 and α = 0.05, k = ⌊40 · 0.025⌋ = 1: the envelope is the min and max
    # (Besag & Diggle 1977); with s = 199, k = 5: the 5th smallest and 5th largest
    sims = np.tile(np.arange(39.0)[:, None], (1, 3))
    lo, hi = pointwise_envelope(sims, 0.05)
    np.testing.assert_array_equal(lo, 0)
    np.testing.assert_array_equal(hi, 38)
    lo, hi = pointwise_envelope(np.tile(np.arange(199.0)[:, None], (1, 2)), 0.05)
    np.testing.assert_array_equal(lo, 4)
    np.testing.assert_array_equal(hi, 194)


@pytest.mark.parametrize("test", ["rank-length", "max-deviation"])
def test_global_test_controls_the_error_rate(test):
    # Myllymäki et al. (2017), JRSS B 79: 381 and Baddeley et al. (2014), Ecol. Monogr. 84: 477:
    # under the null the observed curve is exchangeable with the simulations, so the global
    # p-value is (super-)uniform and P(p ≤ 0.05) ≤ 0.05. 400 replicates: binomial SE ~1.1%.
    rng = np.random.default_rng(5)
    ps = []
    for _ in range(400):
        c = _curves(rng, 40)
        ps.append(envelope_test(c[0], c[1:], csr_value=np.zeros(40), alpha=0.05, test=test).pvalue)
    ps = np.array(ps)
    assert np.mean(ps <= 0.05) < 0.05 + 3 * 0.011
    assert np.mean(ps <= 0.5) == pytest.approx(0.5, abs=0.1)


def test_extreme_curve_gets_the_smallest_p_and_leaves_the_global_envelope():
    # rank p-value (1 + 0) / (s + 1) for a curve more extreme than every simulation
    # (Besag & Diggle 1977); the rejection shows where the curve leaves the global envelope
    rng = np.random.default_rng(6)
    sims = rng.normal(size=(199, 30))
    obs = np.zeros(30)
    obs[10:15] = 8.0
    for test in ("rank-length", "max-deviation"):
        env = envelope_test(obs, sims, csr_value=np.zeros(30), test=test)
        assert env.pvalue == pytest.approx(1 / 200)
        assert np.all(env.above[10:15]) and not env.above[:10].any() and not env.below.any()


def test_global_envelope_agrees_with_test():
    # Myllymäki et al. (2017): the observed curve leaves the global ERL envelope when p ≤ α
    # and stays inside otherwise (up to ties at the critical rank); the envelope is made of
    # the curves themselves, so it lies within their range
    rng = np.random.default_rng(8)
    agree = 0
    for k in range(60):
        c = _curves(rng, 100, 25)
        obs = c[0] + (k % 3) * np.linspace(0, 3, 25)
        env = envelope_test(obs, c[1:], alpha=0.05)
        allc = np.vstack([obs, c[1:]])
        assert np.all(env.band_low >= allc.min(axis=0)) and np.all(
            env.band_high <= allc.max(axis=0)
        )
        assert np.all(env.band_low < env.band_high)
        out = bool(env.above.any() or env.below.any())
        agree += out == (env.pvalue <= 0.05)
    assert agree >= 58


def test_erl_measure_orders_by_extremeness_and_handles_ties():
    # lexicographic order of sorted pointwise ranks (Myllymäki et al. 2017): the curve at the
    # top everywhere is most extreme; identical curves share a measure
    c = np.array([[5.0, 5.0], [0.0, 1.0], [1.0, 0.0], [0.5, 0.5], [0.5, 0.5]])
    e = rank_length_measure(c)
    assert e[0] == e.min()
    assert e[3] == e[4] == e.max()


def test_bad_arguments():
    with pytest.raises(ValueError, match="alpha"):
        envelope_test(np.zeros(3), np.zeros((9, 3)), alpha=1.5)
    with pytest.raises(ValueError, match="unknown global test"):
        envelope_test(np.zeros(3), np.zeros((9, 3)), test="nope")
