"""The matching tolerance calibration scores with, and the error classes of the benchmark.

Common practice in crown-detection accuracy assessment: a detection is credited to a
mapped plant only when it falls within that plant's crown; with one tolerance for all
plants, that is the radius of the smallest crowns (a larger tolerance credits a point
lying in a neighbouring small crown). The one-to-one matching is checked against
``scipy.optimize.linear_sum_assignment`` (a minimum-cost assignment; Kuhn 1955, Naval
Research Logistics Quarterly 2: 83-97), a reference outside the project.
"""

from __future__ import annotations

import numpy as np
import pytest
from pyproj import CRS
from scipy.optimize import linear_sum_assignment
from scipy.spatial.distance import cdist

from ecoscan.detect.calibration import _search_range, tolerance_from_diameters
from ecoscan.model.points import PointSet


def _points(diameters: np.ndarray, spacing: float = 8.0) -> PointSet:
    n = diameters.size
    x = (np.arange(n) % 10) * spacing
    y = (np.arange(n) // 10) * spacing
    return PointSet(x, y, {"diameter_m": diameters}, CRS.from_epsg(32633))


def test_tolerance_from_mapped_diameters_is_the_smallest_crowns_radius():
    # closed canopy: a few 2 m crowns among 5-7 m ones (the suite's range is 2-7 m)
    rng = np.random.default_rng(1)
    d = np.r_[np.full(6, 2.0), rng.uniform(5.0, 7.0, 94)]
    notes: list[str] = []
    tol, broad, given = _search_range(_points(d), 0.1, None, None, notes)
    # within the smallest crowns' radius (1 m), never the median crown's (about 3 m)
    assert tol == pytest.approx(1.0)
    assert tol <= 0.5 * 2.0 < 0.5 * float(np.median(d))
    assert "matching tolerance 1 m" in notes[0]
    # the diameters (pixels) still set the searched range
    assert broad[0] == pytest.approx(2.0 / 0.1 / 1.3)
    assert given is not None and given.size == 100


def test_one_tiny_mis_typed_crown_does_not_set_the_tolerance():
    d = np.r_[0.05, np.full(99, 2.0)]
    assert tolerance_from_diameters(d) == pytest.approx(1.0)


def test_an_explicit_tolerance_wins_and_positions_only_keep_the_spacing_rule():
    d = np.r_[np.full(6, 2.0), np.full(94, 6.0)]
    notes: list[str] = []
    tol, _b, _g = _search_range(_points(d), 0.1, 0.4, None, notes)
    assert tol == 0.4 and notes == []
    pts = _points(d)
    bare = PointSet(pts.x, pts.y, {}, pts.crs)
    tol, _b, given = _search_range(bare, 0.1, None, None, notes)
    assert given is None
    assert tol == pytest.approx(0.25 * 8.0)  # a quarter of the median spacing, as before


def _reference_matches(a: np.ndarray, b: np.ndarray, tol: float) -> int:
    d = cdist(a, b)
    r, c = linear_sum_assignment((d > tol).astype(float))
    return int(np.sum(d[r, c] <= tol))


def test_error_classes_split_merge_off_centre_and_ground():
    from benchmarks.calibrate_errors import error_classes

    # plants: a big crown (6 m) and two small ones (2 m) touching each other, one lone
    truth = np.array([[0.0, 0.0], [10.0, 0.0], [12.0, 0.0], [30.0, 0.0]])
    diam = np.array([6.0, 2.0, 2.0, 2.0])
    found = np.array(
        [
            [0.2, 0.0],  # the big crown, matched
            [2.0, 1.0],  # a second point in the big crown: a split
            [11.0, 0.0],  # between the two small crowns: matches one, the other merged
            [30.0, 0.8],  # inside the lone crown but 0.8 m off its centre
            [50.0, 50.0],  # on the ground
        ]
    )
    tol = 0.5 * diam.min() * 0.5  # 0.5 m
    c = error_classes(found, truth, diam, tol)
    tp = _reference_matches(found, truth, tol)
    # the classes add up to the reference matcher's errors
    n_false = found.shape[0] - tp
    n_missed = truth.shape[0] - tp
    assert c["false split"] + c["false off-centre"] + c["false ground"] == n_false
    assert c["missed off-centre"] + c["merged"] + c["missed"] == n_missed
    assert c["missed small"] + c["missed large"] == n_missed
    assert tp == 1  # (11, 0) is 1 m from both small crowns: beyond the tolerance
    assert c["false split"] == 1 and c["false ground"] == 1
    assert c["false off-centre"] == 2  # (11, 0) in a missed small crown, (30, 0.8) too
    assert c["missed off-centre"] == 3 and c["missed large"] == 0
