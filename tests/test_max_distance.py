"""The largest distance of the analysis across scales is capped at what the plot supports."""

import numpy as np
import shapely
from shapely import affinity

from ecoscan.analysis.scales.compute import ScalesSettings, analyse_plot, supported_max_distance
from ecoscan.stats.csr import uniform_in_polygon


def test_requested_distance_beyond_the_plot_is_capped_with_a_note():
    # issue 10, case 10: --max-distance far beyond the plot silently reversed a verdict. Common
    # practice: at most a quarter of the shorter side (exact geometry: 40 m → 10 m)
    plot = shapely.box(0, 0, 100, 40)
    r, note = supported_max_distance(plot, 200, 60.0)
    assert r == 10.0 and "capped at 10 m" in note
    assert supported_max_distance(plot, 200, 8.0) == (8.0, "")
    # the rule follows the plot's own orientation: the same plot turned by 30° gives 10 m
    turned = affinity.rotate(plot, 30, origin="centroid")
    assert np.isclose(supported_max_distance(turned, 200, 60.0)[0], 10.0)


def test_scales_analysis_uses_the_capped_distance():
    plot = shapely.box(0, 0, 60, 30)
    xy = uniform_in_polygon(plot, 80, rng=3)
    res = analyse_plot(xy, plot, "A", ScalesSettings(simulations=19, max_distance_m=40.0, steps=20))
    assert res.max_distance_m == 7.5
    assert any("capped at 7.5 m" in w for w in res.warnings)
