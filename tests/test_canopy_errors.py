"""The closed-canopy error classes of benchmarks/canopy_errors.py on hand-made layouts.

Each case places crowns and detections so that exactly one class of error arises; the
classes are defined in the script's docstring (one-to-one matching within the tolerance,
as ``ecoscan validate`` does; a detection belongs to the crown nearest in distance over
radius).
"""

import numpy as np

from benchmarks.canopy_errors import classify

# three crowns of radius 2 m on a line, 5 m apart; tolerance 1 m
TRUTH = np.array([[0.0, 0.0], [5.0, 0.0], [10.0, 0.0]])
RADIUS = np.array([2.0, 2.0, 2.0])


def _counts(det):
    got = classify(np.asarray(det, float), TRUTH, RADIUS, 1.0)
    return {k: len(got[k]) for k in ("missed", "merged", "split", "offset", "gap")}, got


def test_perfect_detection_has_no_errors():
    counts, got = _counts(TRUTH + 0.2)
    assert got["tp"] == 3 and got["fp"] == 0 and got["fn"] == 0
    assert sum(counts.values()) == 0


def test_second_point_in_a_matched_crown_is_a_split():
    counts, got = _counts([*TRUTH, [6.5, 0.0]])  # 1.5 m from crown 1: inside, beyond tolerance
    assert counts == {"missed": 0, "merged": 0, "split": 1, "offset": 0, "gap": 0}
    assert got["split"] == [1]


def test_only_point_of_a_crown_beyond_tolerance_is_an_offset():
    counts, got = _counts([TRUTH[0], [5.0, 1.5], TRUTH[2]])
    assert counts == {"missed": 0, "merged": 0, "split": 0, "offset": 1, "gap": 0}
    assert got["offset"] == [1] and got["fp"] == 1 and got["fn"] == 1


def test_crown_without_a_point_is_missed_or_merged():
    # crown 1 has no point; nothing lies inside its circle: missed
    counts, _ = _counts([TRUTH[0], TRUTH[2]])
    assert counts["missed"] == 1 and counts["merged"] == 0
    # crown 0's point sits 0.9 m towards crown 1 and crown 1 lies 2.8 m from crown 0
    truth = np.array([[0.0, 0.0], [2.8, 0.0]])
    got = classify(np.array([[0.9, 0.0]]), truth, np.array([2.0, 2.0]), 1.0)
    assert got["merged"] == [1] and got["missed"] == [] and got["tp"] == 1


def test_point_in_no_crown_is_a_gap():
    counts, _ = _counts([*TRUTH, [20.0, 20.0]])
    assert counts == {"missed": 0, "merged": 0, "split": 0, "offset": 0, "gap": 1}
