"""One-to-one matching of two point sets within a distance tolerance.

Used to score detections against reference positions and to follow plants between survey
dates. The assignment is optimal: as many pairs as possible, then the smallest total distance,
solved with the Hungarian method (Kuhn 1955, Naval Research Logistics Quarterly 2: 83–97) as
implemented by :func:`scipy.optimize.linear_sum_assignment`, one connected group of nearby
points at a time so that memory follows the size of the groups, not n².
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

__all__ = ["MatchResult", "match_points"]


@dataclass(frozen=True)
class MatchResult:
    """Pairs found by :func:`match_points`.

    Attributes
    ----------
    index_a, index_b : numpy.ndarray of int
        Matched pairs: ``a[index_a[k]]`` goes with ``b[index_b[k]]``.
    distance_m : numpy.ndarray
        Distance of each pair in metres.
    unmatched_a, unmatched_b : numpy.ndarray of int
        Indices with no partner within the tolerance.
    """

    index_a: np.ndarray
    index_b: np.ndarray
    distance_m: np.ndarray
    unmatched_a: np.ndarray
    unmatched_b: np.ndarray

    @property
    def n_matched(self) -> int:
        """Number of pairs."""
        return int(self.index_a.size)


def match_points(a: np.ndarray, b: np.ndarray, tolerance_m: float) -> MatchResult:
    """Match points of ``a`` to points of ``b`` one-to-one within ``tolerance_m``.

    Parameters
    ----------
    a : numpy.ndarray, shape (n, 2)
        First point set, metres.
    b : numpy.ndarray, shape (m, 2)
        Second point set, metres.
    tolerance_m : float
        Largest distance at which two points may be paired (> 0).

    Returns
    -------
    MatchResult

    Notes
    -----
    The objective puts the number of pairs first and the total distance second: each allowed
    pair costs ``d / tolerance − (n + m + 1)``, so one more pair always outweighs any saving in
    distance. Groups of points linked by allowed pairs are solved independently.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array([[0.0, 0.0], [5.0, 0.0]])
    >>> b = np.array([[5.2, 0.0], [0.1, 0.0], [20.0, 0.0]])
    >>> m = match_points(a, b, 0.5)
    >>> m.index_a, m.index_b, m.unmatched_b
    (array([0, 1]), array([1, 0]), array([2]))
    """
    if not tolerance_m > 0:
        raise ValueError("tolerance must be positive")
    a = np.asarray(a, float).reshape(-1, 2)
    b = np.asarray(b, float).reshape(-1, 2)
    na, nb = a.shape[0], b.shape[0]
    empty = np.empty(0, dtype=np.int64)
    if na == 0 or nb == 0:
        return MatchResult(empty, empty, np.empty(0), np.arange(na), np.arange(nb))
    ta, tb = cKDTree(a), cKDTree(b)
    sdm = ta.sparse_distance_matrix(tb, tolerance_m, output_type="coo_matrix")
    rows, cols, dist = sdm.row, sdm.col, sdm.data
    # sparse_distance_matrix drops exact zeros; recover coincident pairs
    zero_pairs = ta.query_ball_tree(tb, r=0.0)
    zr = [i for i, js in enumerate(zero_pairs) for _ in js]
    zc = [j for js in zero_pairs for j in js]
    if zr:
        rows = np.concatenate([rows, np.asarray(zr, dtype=rows.dtype)])
        cols = np.concatenate([cols, np.asarray(zc, dtype=cols.dtype)])
        dist = np.concatenate([dist, np.zeros(len(zr))])
    if rows.size == 0:
        return MatchResult(empty, empty, np.empty(0), np.arange(na), np.arange(nb))
    # connected groups over the bipartite graph (a nodes 0..na-1, b nodes na..na+nb-1)
    graph = coo_matrix((np.ones(rows.size), (rows, cols + na)), shape=(na + nb, na + nb))
    _ncomp, label = connected_components(graph, directed=False)
    big = float(na + nb + 1)
    pair_label = label[rows]
    order = np.argsort(pair_label, kind="stable")
    rows, cols, dist, pair_label = rows[order], cols[order], dist[order], pair_label[order]
    starts = np.flatnonzero(np.r_[True, pair_label[1:] != pair_label[:-1]])
    ends = np.r_[starts[1:], rows.size]
    out_a, out_b, out_d = [], [], []
    single = (ends - starts) == 1
    # groups with one allowed pair: take it directly (vectorised)
    s = starts[single]
    out_a.append(rows[s])
    out_b.append(cols[s])
    out_d.append(dist[s])
    for s0, e0 in zip(starts[~single], ends[~single], strict=True):
        r, c, d = rows[s0:e0], cols[s0:e0], dist[s0:e0]
        ur, ri = np.unique(r, return_inverse=True)
        uc, ci = np.unique(c, return_inverse=True)
        cost = np.zeros((ur.size, uc.size))
        cost[ri, ci] = d / tolerance_m - big
        allowed = np.zeros_like(cost, dtype=bool)
        allowed[ri, ci] = True
        dd = np.full_like(cost, np.inf)
        dd[ri, ci] = d
        ra, cb = linear_sum_assignment(cost)
        ok = allowed[ra, cb]
        out_a.append(ur[ra[ok]])
        out_b.append(uc[cb[ok]])
        out_d.append(dd[ra[ok], cb[ok]])
    ia = np.concatenate(out_a).astype(np.int64)
    ib = np.concatenate(out_b).astype(np.int64)
    dm = np.concatenate(out_d)
    o = np.argsort(ia, kind="stable")
    ia, ib, dm = ia[o], ib[o], dm[o]
    ua = np.setdiff1d(np.arange(na), ia)
    ub = np.setdiff1d(np.arange(nb), ib)
    return MatchResult(ia, ib, dm, ua, ub)
