"""Inhibition distance of regular patterns."""

import numpy as np
import pytest
import shapely

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.power import hard_core_patterns
from ecoscan.stats.spacing import inhibition_distance


def test_random_pattern_matches_nn_distribution_quantile():
    # G(r) = 1 − exp(−λπr²) under complete spatial randomness (Diggle 1983); a large torus-free
    # square with 4000 points keeps edge effects on the 5% quantile small
    plot = shapely.box(0, 0, 1000, 1000)
    xy = uniform_in_polygon(plot, 4000, rng=5)
    res = inhibition_distance(xy, plot)
    assert res.distance_m == pytest.approx(res.random_distance_m, rel=0.08)


def test_hard_core_pattern_keeps_its_distance():
    plot = shapely.box(0, 0, 60, 60)
    xy = hard_core_patterns(plot, 150, 3.0, rng=2)[0]
    res = inhibition_distance(xy, plot)
    # every NN distance is at least the hard core δ = 3 m, by construction
    assert res.distance_m >= 3.0
    assert res.ratio > 1.5
    assert res.describe().startswith("plants keep at least 3")


def test_lattice_quantile_is_the_spacing():
    g = np.stack(np.meshgrid(np.arange(0.5, 10), np.arange(0.5, 10)), -1).reshape(-1, 2)
    assert inhibition_distance(g, shapely.box(0, 0, 10, 10)).distance_m == 1.0
