"""The threshold grid of calibration: counts per (response, value, fold) cell.

The grid scores every distinct candidate set once and reuses it for the cells that keep
the same candidates; these tests check the counts against a direct computation with an
outside matcher (maximum one-to-one matching within the tolerance by
``scipy.optimize.linear_sum_assignment``, a minimum-cost assignment: Kuhn 1955, Naval
Research Logistics Quarterly 2: 83-97).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from scipy.optimize import linear_sum_assignment
from scipy.spatial.distance import cdist

from ecoscan.detect.calibration import _grid_counts


def _matched(a: np.ndarray, b: np.ndarray, tol: float) -> int:
    if a.shape[0] == 0 or b.shape[0] == 0:
        return 0
    d = cdist(a, b)
    cost = (d > tol).astype(float)  # 0 for an allowed pair: the optimum maximises pairs
    r, c = linear_sum_assignment(cost)
    return int(np.sum(d[r, c] <= tol))


def test_grid_counts_equal_direct_matching_per_cell_and_fold():
    rng = np.random.default_rng(5)
    # candidates on a 12 px lattice with jitter and radius about 2.8 px: none overlap, so
    # non-maximum suppression keeps every candidate above the thresholds
    gx, gy = np.meshgrid(np.arange(6, 120, 12.0), np.arange(6, 120, 12.0))
    col = gx.ravel() + rng.uniform(-1, 1, gx.size)
    row = gy.ravel() + rng.uniform(-1, 1, gx.size)
    n = col.size
    cands = {
        "col": col,
        "row": row,
        "sigma": np.full(n, 2.0),
        "response": rng.uniform(0, 1, n),
        "value": rng.uniform(0, 1, n),
        "fold": (col > 60).astype(int) + 2 * (row > 60),
    }
    # mapped plants: two thirds of the lattice sites (shifted by up to 2 px), plus misses
    take = rng.uniform(size=n) < 0.67
    ref = np.column_stack([col[take], row[take]]) + rng.uniform(-2, 2, (take.sum(), 2))
    ref_fold = (ref[:, 0] > 60).astype(int) + 2 * (ref[:, 1] > 60)
    win = SimpleNamespace(ref=ref, ref_fold=ref_fold)
    resp_grid = np.array([0.0, 0.2, 0.2, 0.5, 0.8])  # a repeated cell reuses its counts
    val_grid = np.array([-np.inf, 0.3, 0.6])
    tol = 3.0
    counts = _grid_counts([cands], [win], 4, resp_grid, val_grid, tol)
    for i, tr in enumerate(resp_grid):
        for j, tv in enumerate(val_grid):
            keep = (cands["response"] >= tr) & (cands["value"] >= tv)
            for f in range(4):
                a = np.column_stack([col, row])[keep & (cands["fold"] == f)]
                b = ref[ref_fold == f]
                tp = _matched(a, b, tol)
                assert tuple(counts[i, j, f]) == (tp, a.shape[0] - tp, b.shape[0] - tp)
    # every mapped plant is a hit or a miss in every cell
    per_fold = np.broadcast_to(np.bincount(ref_fold, minlength=4), counts.shape[:3])
    np.testing.assert_array_equal(counts[..., 0] + counts[..., 2], per_fold)
