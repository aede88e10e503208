"""Exact isotropic edge weights and boundary distances."""

import numpy as np
import pytest
import shapely

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.edge import boundary_distance, circle_fraction_inside, isotropic_weight

SQUARE = shapely.box(0, 0, 100, 100)


def test_centre_of_large_square_has_weight_one():
    # exact geometry: the whole circle lies inside (Ripley 1976, weight 2πr / 2πr)
    assert isotropic_weight([[50, 50]], 10.0, SQUARE)[0] == pytest.approx(1.0, abs=1e-12)


def test_corner_point_at_small_r_has_weight_four():
    # exact geometry: a quarter of the circle about a right-angled corner is inside
    w = isotropic_weight([[0, 0], [100, 100], [1e-9, 100]], 0.5, SQUARE)
    np.testing.assert_allclose(w, 4.0, rtol=1e-6)


def test_point_on_an_edge_has_weight_two():
    # exact geometry: half the circle about a point on a straight edge is inside
    assert isotropic_weight([[50, 0]], 3.0, SQUARE)[0] == pytest.approx(2.0, abs=1e-12)


@pytest.mark.parametrize("d, r", [(1.0, 2.0), (0.3, 5.0), (4.0, 4.5)])
def test_near_one_edge_matches_closed_form(d, r):
    # exact geometry: a circle crossing one straight edge at distance d loses the arc of
    # half-angle arccos(d / r), so the inside proportion is 1 − arccos(d / r) / π
    f = circle_fraction_inside([[d, 50]], r, SQUARE)[0]
    assert f == pytest.approx(1 - np.arccos(d / r) / np.pi, abs=1e-12)


def test_irregular_polygon_with_hole_matches_shapely_intersection():
    # reference library: length of a finely polygonised circle clipped by shapely; the
    # polygon approximation with 4 * 2048 segments is good to ~1e-6 relative
    poly = shapely.Polygon(
        [(0, 0), (30, 0), (30, 10), (12, 14), (0, 25)], [[(5, 5), (10, 5), (8, 9)]]
    )
    rng = np.random.default_rng(1)
    pts = uniform_in_polygon(poly, 60, rng=rng)
    r = rng.uniform(0.5, 12, 60)
    f = circle_fraction_inside(pts, r, poly)
    ref = [
        shapely.intersection(shapely.Point(*u).buffer(rr, quad_segs=2048).exterior, poly).length
        / (2 * np.pi * rr)
        for u, rr in zip(pts, r, strict=True)
    ]
    np.testing.assert_allclose(f, ref, atol=2e-5)


def test_multipolygon_parts_both_count():
    # exact geometry: two boxes with a gap |x| < 0.5; a unit circle centred in the gap has an
    # arc of half-angle arccos(0.5) = π/3 inside each box, so 2 · (2π/3) / (2π) = 2/3 inside
    mp = shapely.MultiPolygon([shapely.box(-10, -10, -0.5, 10), shapely.box(0.5, -10, 10, 10)])
    f = circle_fraction_inside([[0, 0]], 1.0, mp)[0]
    assert f == pytest.approx(2 / 3, abs=1e-12)


def test_boundary_distance_includes_holes():
    # exact geometry: distances to the outer square and to the inner hole
    poly = shapely.Polygon([(0, 0), (10, 0), (10, 10), (0, 10)], [[(4, 4), (6, 4), (6, 6), (4, 6)]])
    d = boundary_distance(np.array([[1, 5], [3, 5], [5, 9]]), poly)
    np.testing.assert_allclose(d, [1, 1, 1])


@pytest.mark.parametrize("quad_segs", [4, 100], ids=["few-edges", "many-edges"])
def test_boundary_distance_matches_shapely(quad_segs):
    # reference library: shapely's distance to the boundary; both code paths (numpy for few
    # edges, shapely for many)
    poly = shapely.Point(0, 0).buffer(20, quad_segs=quad_segs).difference(shapely.box(-3, -3, 4, 5))
    xy = uniform_in_polygon(poly, 300, rng=2)
    ref = shapely.distance(poly.boundary, shapely.points(xy))
    np.testing.assert_allclose(boundary_distance(xy, poly), ref, atol=1e-12)
