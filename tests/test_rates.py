"""Rates, proportions and multiple-comparison adjustment, checked against outside references."""

import numpy as np
import pytest
from scipy import stats as sps
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import proportion_confint
from statsmodels.stats.rates import test_poisson_2indep as sm_poisson_2indep

from ecoscan.stats.rates import (
    holm_adjust,
    paired_change_test,
    poisson_rate_test,
    wilson_interval,
)


# Newcombe, R. G. (1998). Two-sided confidence intervals for the single proportion: comparison
# of seven methods. Statistics in Medicine 17: 857-872, Table I, Wilson score method (values
# quoted from memory; they agree with statsmodels below to 4 decimals).
@pytest.mark.parametrize(
    ("x", "n", "low", "high"),
    [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_worked_examples(x, n, low, high):
    lo, hi = wilson_interval(x, n)
    assert lo == pytest.approx(low, abs=5e-5)
    assert hi == pytest.approx(high, abs=5e-5)


def test_wilson_matches_statsmodels_grid():
    # Reference library: statsmodels proportion_confint(method="wilson")
    n = np.repeat(np.arange(1, 60), 3)
    x = (n * np.tile([0.0, 0.37, 1.0], 59)).round().astype(int)
    for conf in (0.90, 0.95, 0.99):
        lo, hi = wilson_interval(x, n, confidence=conf)
        ref_lo, ref_hi = proportion_confint(x, n, alpha=1 - conf, method="wilson")
        np.testing.assert_allclose(lo, ref_lo, atol=1e-12)
        np.testing.assert_allclose(hi, ref_hi, atol=1e-12)


def test_wilson_empty_and_invalid():
    lo, hi = wilson_interval(0, 0)
    assert np.isnan(lo) and np.isnan(hi)
    with pytest.raises(ValueError):
        wilson_interval(5, 3)


@pytest.mark.parametrize(
    ("c1", "e1", "c2", "e2"),
    [
        (30, 1000.0, 15, 1200.0),
        (0, 50.0, 7, 80.0),
        (120, 2500.0, 118, 2500.0),
        (3, 10.0, 40, 400.0),
    ],
)
def test_poisson_rate_test_is_conditional_binomial(c1, e1, c2, e2):
    # Przyborowski & Wilenski (1940): given k = c1 + c2, c1 ~ Binomial(k, e1 / (e1 + e2)).
    # References: scipy.stats.binomtest and statsmodels' exact conditional two-rate test.
    res = poisson_rate_test(c1, e1, c2, e2)
    ref = sps.binomtest(c1, c1 + c2, e1 / (e1 + e2))
    assert res.pvalue == pytest.approx(ref.pvalue, rel=1e-12)
    sm = sm_poisson_2indep(c1, e1, c2, e2, method="exact-cond")
    assert res.pvalue == pytest.approx(float(sm.pvalue), rel=1e-9)
    assert res.rate1 == pytest.approx(c1 / e1)
    if c2:
        assert res.statistic == pytest.approx((c1 / e1) / (c2 / e2))
        assert res.ratio_low <= res.statistic <= res.ratio_high


def test_poisson_rate_ratio_interval_from_clopper_pearson():
    # Exact binomial limits (scipy) mapped to the rate ratio: p/(1-p) * e2/e1
    res = poisson_rate_test(30, 1000.0, 15, 1200.0)
    ci = sps.binomtest(30, 45, 1000 / 2200).proportion_ci(method="exact")
    assert res.ratio_low == pytest.approx(ci.low / (1 - ci.low) * 1.2)
    assert res.ratio_high == pytest.approx(ci.high / (1 - ci.high) * 1.2)


def test_poisson_rate_test_rejects_at_most_nominal_under_equal_rates():
    # Exact tests hold their level: under equal rates the rejection rate is at most alpha
    # (up to simulation error) and, for counts of about a hundred, not far below it.
    rng = np.random.default_rng(12)
    e1, e2 = 1600.0, 2400.0
    c1 = rng.poisson(0.025 * e1, 800)
    c2 = rng.poisson(0.025 * e2, 800)
    p = np.array([poisson_rate_test(a, e1, b, e2).pvalue for a, b in zip(c1, c2, strict=True)])
    rate = float(np.mean(p < 0.05))
    assert 0.025 < rate < 0.065


def test_poisson_rate_test_detects_a_real_difference():
    res = poisson_rate_test(200, 1000.0, 100, 1000.0)
    assert res.pvalue < 1e-6


def test_poisson_rate_test_bad_input():
    with pytest.raises(ValueError):
        poisson_rate_test(-1, 1.0, 2, 1.0)
    with pytest.raises(ValueError):
        poisson_rate_test(1, 0.0, 2, 1.0)
    assert poisson_rate_test(0, 1.0, 0, 2.0).pvalue == 1.0


@pytest.mark.parametrize(("lost", "new"), [(12, 4), (0, 9), (30, 31), (5, 0)])
def test_paired_change_is_exact_mcnemar(lost, new):
    # McNemar (1947), exact form; reference: statsmodels mcnemar(exact=True)
    ref = mcnemar([[100, lost], [new, 0]], exact=True)
    assert paired_change_test(lost, new) == pytest.approx(float(ref.pvalue), rel=1e-12)
    assert paired_change_test(0, 0) == 1.0


def test_holm_hand_example():
    # Holm (1979): sorted p (0.01, 0.03, 0.04) times (3, 2, 1) = (0.03, 0.06, 0.04), then the
    # running maximum gives (0.03, 0.06, 0.06); returned in input order.
    np.testing.assert_allclose(holm_adjust([0.01, 0.04, 0.03]), [0.03, 0.06, 0.06])


def test_holm_matches_statsmodels_and_ignores_nan():
    # Reference library: statsmodels multipletests(method="holm")
    rng = np.random.default_rng(4)
    for _ in range(50):
        p = rng.uniform(0, 0.2, rng.integers(1, 12))
        ref = multipletests(p, method="holm")[1]
        np.testing.assert_allclose(holm_adjust(p), ref, atol=1e-12)
    out = holm_adjust([0.02, np.nan, 0.01])
    assert np.isnan(out[1])
    np.testing.assert_allclose(out[[0, 2]], multipletests([0.02, 0.01], method="holm")[1])
