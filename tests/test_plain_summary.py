"""The plain-words sentence that puts a plot's nearest-neighbour and quadrat tests side by side."""

import numpy as np
import shapely

from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot


def test_pairs_on_a_grid_read_clumped_between_neighbours_and_even_over_quadrats():
    # Plants in pairs 0.3 m apart, the pairs on a 2 m grid: each plant's neighbour is its
    # twin (clumped, R << 1), yet every 4 m quadrat holds exactly 8 plants (more even than
    # random). Both are true at their own scale; the sentence must say so, not pick one.
    rng = np.random.default_rng(3)
    g = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T + rng.normal(0, 0.05, (100, 2))
    xy = np.vstack([g, g + np.array([0.3, 0.0])])
    box = shapely.box(0, 0, 20, 20)
    res = analyse_plot(xy, box, "pairs", DispersionSettings(simulations=99, quadrat_m=4.0))
    text = res.summary
    # variance-to-mean ratio of counts by hand (numpy histogram over the same 4 m cells);
    # index of dispersion below 1 = more even than Poisson (Fisher et al. 1922)
    counts, _, _ = np.histogram2d(xy[:, 0], xy[:, 1], bins=[np.arange(0, 21, 4)] * 2)
    vmr = counts.var(ddof=1) / counts.mean()
    assert vmr < 0.2
    assert text.startswith("clumped between neighbours (R = 0.")
    assert f"evenly spread over 4 m quadrats (variance/mean {vmr:.2f}" in text
    assert "different scales" in text
    assert res.row()["summary"].startswith(text)  # then the cluster size in metres


def test_random_pattern_says_not_significant_and_too_few_simulations_says_so():
    rng = np.random.default_rng(8)
    box = shapely.box(0, 0, 50, 50)
    xy = rng.uniform(0, 50, (120, 2))
    res = analyse_plot(xy, box, "r", DispersionSettings(simulations=99))
    assert res.verdict == "no departure detected"  # this seed: p_mc above 0.05
    assert res.summary.startswith("no departure detected (this plot could detect R below")
    assert "between neighbours, not significant" in res.summary
    few = analyse_plot(xy, box, "r", DispersionSettings(simulations=19))
    # 19 simulations, two-sided: the smallest p is 2/20 = 0.1 > 0.05 (Besag & Diggle 1977)
    assert "too few simulations: p cannot go below 0.1" in few.summary
    assert few.verdict_in_words.startswith("no departure detected (too few simulations")
