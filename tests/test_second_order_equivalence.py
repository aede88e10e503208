"""The fast second-order machinery against independent references, pair by pair.

The fast path finds pairs with a KD-tree, weights only the pair ends whose circle reaches the
boundary, visits only the edges within reach of each centre, works in chunks of pairs and sums
the kernel from per-cell moments. Each of these is checked here against a direct evaluation:
exact geometry for the circle proportions, shapely's clipping of a fine polygonal circle, and
the defining double sums over all ordered pairs in long-double arithmetic.
"""

import numpy as np
import pytest
import shapely

import ecoscan.stats.second_order as so
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.edge import circle_fraction_inside
from ecoscan.stats.second_order import PairTable, second_order
from tests.test_second_order import ring_by_quadrature

SQUARE = shapely.box(0, 0, 40, 40)
# an invented L-shaped plot with a pond (hole)
L_HOLE = shapely.Polygon(
    [(0, 0), (50, 0), (50, 18), (22, 18), (22, 45), (0, 45)],
    [[(6, 6), (14, 5), (15, 13), (7, 14)]],
)
# two invented plots in one window, one with a hole
MULTI = shapely.MultiPolygon(
    [
        shapely.box(0, 0, 20, 30),
        shapely.Polygon([(26, 0), (50, 0), (50, 30), (26, 30)], [[(32, 8), (42, 9), (38, 20)]]),
    ]
)
CASES = {"square": SQUARE, "l-with-hole": L_HOLE, "multipolygon": MULTI}


def _shapely_fraction(u: np.ndarray, r: float, poly: shapely.Geometry) -> float:
    # reference library: the circle as a 4 · 1024-gon clipped by shapely, its length rescaled
    # by (circumference / polygon perimeter) so the chord-for-arc shortfall cancels
    ring = shapely.Point(*u).buffer(r, quad_segs=1024).exterior
    return shapely.intersection(ring, poly).length / ring.length


@pytest.mark.parametrize(
    "a, b, r",
    [(1.0, 2.0, 1.5), (1.0, 2.0, 2.1), (0.5, 0.7, 0.8), (0.5, 0.7, 3.0), (3.0, 0.2, 2.9)],
)
def test_near_a_corner_matches_closed_form(a, b, r):
    # exact geometry: a circle of radius r about (a, b) near the corner (0, 0) of a large
    # square. Each edge it crosses (distance s < r) cuts off an arc of half-angle arccos(s/r);
    # the two cut-off arcs overlap when the corner lies inside the circle (a² + b² < r²), and
    # then the lost arc is π/2 + arccos(a/r) + arccos(b/r) instead of their sum.
    lost = sum(2 * np.arccos(s / r) for s in (a, b) if s < r)
    if a * a + b * b < r * r:
        lost = np.pi / 2 + np.arccos(a / r) + np.arccos(b / r)
    f = circle_fraction_inside([[a, b]], r, SQUARE)[0]
    assert f == pytest.approx(1 - lost / (2 * np.pi), abs=1e-13)


@pytest.mark.parametrize("name", list(CASES))
def test_circle_fractions_match_shapely(name):
    # reference library: shapely-clipped circles, for centres anywhere in the window and radii
    # from tiny (no edge in reach) to larger than the window's parts (many edges in reach); the
    # polygonal circle is good to ~1e-6 where it crosses the boundary
    poly = CASES[name]
    rng = np.random.default_rng(7)
    xy = uniform_in_polygon(poly, 80, rng=rng)
    r = rng.uniform(0.05, 25.0, 80)
    ref = [_shapely_fraction(u, rr, poly) for u, rr in zip(xy, r, strict=True)]
    np.testing.assert_allclose(circle_fraction_inside(xy, r, poly), ref, atol=5e-6)


def _brute_force(xy, poly, r, h):
    """K and g from the defining sums over all ordered pairs i ≠ j, in long double."""
    n = xy.shape[0]
    diff = xy[:, None, :] - xy[None, :, :]
    dist = np.hypot(diff[..., 0], diff[..., 1])
    ii, jj = np.nonzero((dist > 0) & (dist <= r[-1] + h))
    d = dist[ii, jj]
    # the exact proportion for every ordered pair, one circle per pair (no pair table, no
    # boundary-distance shortcut, no chunks)
    w = 1.0 / np.maximum(circle_fraction_inside(xy[ii], d, poly), 1e-9)
    d, w = d.astype(np.longdouble), w.astype(np.longdouble)
    scale = np.longdouble(poly.area) / (n * (n - 1))
    K = np.array([scale * np.sum(w * (d <= rk)) for rk in r], dtype=float)
    g = np.full(r.size, np.nan)
    for k, rk in enumerate(r if h > 0 else []):
        t = (rk - d) / h
        kern = np.where(np.abs(t) < 1, 0.75 / h * (1 - t * t), 0)
        g[k] = scale * np.sum(w * kern) / ring_by_quadrature(float(rk), h)
    return K, g, ii, jj, w


@pytest.mark.parametrize("chunk", [None, 257], ids=["default-chunks", "many-small-chunks"])
@pytest.mark.parametrize("name", list(CASES))
def test_K_and_g_equal_the_defining_sums(name, chunk, monkeypatch):
    # Ripley (1976), J. Appl. Prob. 13: 255–266 (isotropic K); Stoyan & Stoyan (1994)
    # (Epanechnikov kernel estimate of g): the estimators' double sums, evaluated directly.
    # The fast path must agree to rounding (1e-12 relative; g also to 1e-12 of its largest
    # value, since g may be 0 at small r), whatever the chunk size.
    if chunk is not None:
        monkeypatch.setattr(so, "_PAIR_CHUNK", chunk)
    poly = CASES[name]
    xy = uniform_in_polygon(poly, 600, rng=np.random.default_rng(3))
    res = second_order(xy, poly, 6.0, steps=60, bandwidth_m=0.35, reduced_sample=False)
    K, g, *_ = _brute_force(xy, poly, res.r_m, res.bandwidth_m)
    np.testing.assert_allclose(res.K_iso_m2, K, rtol=1e-12)
    np.testing.assert_allclose(res.g_iso, g, rtol=1e-12, atol=1e-12 * np.max(np.abs(g)))
    assert res.n_pairs > 8 * 257  # the small chunks really split the pairs


def test_pair_table_weights_are_the_exact_per_pair_weights(monkeypatch):
    # every pair once, with the weight from each end equal to the exact circle proportion of
    # that end (brute force over all pairs), including pairs far from any edge (weight 1)
    monkeypatch.setattr(so, "_PAIR_CHUNK", 101)
    xy = uniform_in_polygon(L_HOLE, 400, rng=np.random.default_rng(9))
    pt = PairTable(xy, L_HOLE, 7.0)
    _, _, ii, jj, w = _brute_force(xy, L_HOLE, np.array([7.0]), 0.0)
    ref = dict(zip(zip(ii.tolist(), jj.tolist(), strict=True), w.astype(float), strict=True))
    got = {}
    for i, j, wi, wj in zip(pt.i.tolist(), pt.j.tolist(), pt.w_i, pt.w_j, strict=True):
        got[(i, j)], got[(j, i)] = wi, wj
    assert got.keys() == ref.keys()
    np.testing.assert_allclose([got[k] for k in ref], list(ref.values()), rtol=1e-13)
    np.testing.assert_allclose(pt.w_sum, pt.w_i + pt.w_j, rtol=1e-15)
