"""A plot's verdict: short stable values, the sentence with what the plot could detect."""

import numpy as np
import pytest
import shapely
from scipy import stats as sps

from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
from ecoscan.analysis.dispersion.detectable import (
    NO_DEPARTURE,
    TELL_LIMITS,
    TOO_FEW,
    VERDICTS,
    plot_detectable,
    settle_verdict,
)
from ecoscan.stats.csr import uniform_in_polygon


def _normal_range(n: int) -> tuple[float, float]:
    # Clark & Evans (1954), Ecology 35:445: under randomness SE(R) = 0.26136/√(nρ) / (0.5/√ρ)
    # = 0.52272/√n; the two-sided level-5% test detects with 80% power a shift of
    # (z_0.975 + z_0.8)·SE (normal approximation; quantiles from scipy)
    half = (sps.norm.ppf(0.975) + sps.norm.ppf(0.8)) * 0.52272 / np.sqrt(n)
    return 1 - half, 1 + half


@pytest.mark.parametrize("n", [8, 120])
def test_too_few_plants_to_tell_follows_the_clark_evans_approximation(n):
    # In a large square (edge effects small) the plot should read "too few plants to tell"
    # exactly when the normal approximation puts its detectable range beyond 0.6–1.5: at n = 8
    # the approximation gives 0.48–1.52, at n = 120 0.87–1.13.
    plot = shapely.box(0, 0, 200, 200)
    lo, hi = _normal_range(n)
    beyond = lo < TELL_LIMITS[0] or hi > TELL_LIMITS[1]
    d = plot_detectable(plot, n, rng=5)
    assert settle_verdict("", d) == (TOO_FEW if beyond else NO_DEPARTURE)
    if n >= 100:  # the edge term of the naive R (Donnelly 1978) is then a few per cent
        assert d.clustered_r == pytest.approx(lo, abs=0.08)
        assert d.regular_r == pytest.approx(hi, abs=0.08)


def test_plot_rows_carry_a_short_verdict_and_a_sentence_with_the_numbers():
    plot = shapely.box(0, 0, 80, 80)
    s = DispersionSettings(simulations=99)
    small = analyse_plot(uniform_in_polygon(plot, 9, rng=2), plot, "few", s)
    row = small.row()
    assert row["verdict"] == TOO_FEW and row["verdict"] in VERDICTS
    lo, hi = row["detectable_clustered_R"], row["detectable_regular_R"]
    assert lo < TELL_LIMITS[0] or hi > TELL_LIMITS[1]
    assert row["verdict_in_words"] == (
        f"too few plants to tell (this plot could only detect R below {lo:.2f} or above {hi:.2f})"
    )
    # a significant verdict is stated alone, and a regular plot says how far apart plants keep
    j, i = np.mgrid[0:10, 0:10]
    grid = np.column_stack([i.ravel() * 8 + 4, j.ravel() * 8 + 4]).astype(float)
    reg = analyse_plot(grid, plot, "grid", s).row()
    assert reg["verdict"] == reg["verdict_in_words"] == "regular"
    # on an 8 m square lattice every nearest neighbour is exactly 8 m away (geometry)
    assert reg["inhibition_m"] == pytest.approx(8.0)
    assert reg["pattern_in_metres"].startswith("plants keep at least 8 m apart")
