"""Ripley's K, Besag's L and the pair correlation g against theory and brute force."""

import numpy as np
import pytest
import shapely
from scipy.integrate import quad

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.edge import boundary_distance, circle_fraction_inside
from ecoscan.stats.second_order import default_max_distance, pcf_bandwidth, second_order


def ring_by_quadrature(r: float, h: float) -> float:
    """2π ∫₀^∞ k_h(r − d) d dd by scipy.integrate.quad: the ring the kernel sum is divided by
    (2πr for r ≥ h; larger below h, where the kernel window is cut at d = 0)."""

    def kern(t):
        return 0.75 / h * (1.0 - (t / h) ** 2) if abs(t) < h else 0.0

    val, _ = quad(lambda d: kern(r - d) * d, 0.0, r + h, points=[max(r - h, 0.0), r])
    return 2 * np.pi * val


RECT = shapely.box(0, 0, 60, 30)
IRREG = shapely.Polygon(
    [(0, 0), (40, 0), (40, 15), (22, 22), (10, 40), (0, 30)],
    [[(8, 8), (14, 8), (12, 14)]],
)


def _mean_ratio(poly, n, reps, seed):
    pats = uniform_in_polygon(poly, n, size=reps, rng=seed)
    max_distance = default_max_distance(poly, n)
    res = [second_order(p, poly, max_distance, steps=50) for p in pats]
    r = res[0].r_m
    k = np.mean([x.K_iso_m2 for x in res], axis=0)
    kb = np.nanmean([x.K_reduced_sample_m2 for x in res], axis=0)
    L = np.mean([x.L_iso_m for x in res], axis=0)
    g = np.mean([x.g_iso for x in res], axis=0)
    return r, k, kb, L, g, res[0].bandwidth_m


@pytest.mark.parametrize("poly", [RECT, IRREG], ids=["rectangle", "irregular-with-hole"])
def test_csr_mean_K_is_pi_r2_and_L_is_r(poly):
    # Ripley (1977), JRSS B 39: 172–212: K(r) = πr² under complete spatial randomness; the
    # isotropic estimator in the n(n − 1) form is unbiased for a uniform pattern of n points.
    # 300 patterns of 80 points: the standard error of the mean ratio is ~1-2% at mid r.
    r, k, kb, L, g, h = _mean_ratio(poly, 80, 300, 11)
    mid = r > r[-1] * 0.3
    np.testing.assert_allclose(k[mid] / (np.pi * r[mid] ** 2), 1.0, atol=0.04)
    np.testing.assert_allclose(kb[mid] / (np.pi * r[mid] ** 2), 1.0, atol=0.06)
    # Besag (1977): L(r) = r; the mean of a square root is a little below √ of the mean
    np.testing.assert_allclose(L[mid] / r[mid], 1.0, atol=0.03)
    # g = 1 away from r = 0, where the kernel is cut off (Stoyan & Stoyan 1994)
    far = r > 3 * h
    np.testing.assert_allclose(g[far], 1.0, atol=0.12)
    assert abs(np.mean(g[far]) - 1.0) < 0.03


@pytest.mark.parametrize("h", [1.3, 1.0, 0.25], ids=["h-2.6-steps", "h-2-steps", "h-half-step"])
def test_estimates_match_brute_force_sums(h):
    # the defining double sums evaluated directly over all ordered pairs, with the circle
    # proportion from shapely's clipping of a fine polygonal circle (reference library)
    rng = np.random.default_rng(4)
    xy = uniform_in_polygon(IRREG, 40, rng=rng)
    res = second_order(xy, IRREG, 8.0, steps=16, bandwidth_m=h)
    # the bandwidth is rounded to whole eighths of the 0.5 m step (documented rule)
    assert abs(res.bandwidth_m - h) <= 0.5 / 16 + 1e-12
    h = res.bandwidth_m
    n, area = 40, IRREG.area
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    ii, jj = np.nonzero((d > 0) & (d <= 8.0 + h))
    frac = np.array(
        [
            shapely.intersection(
                shapely.Point(*xy[i]).buffer(d[i, j], quad_segs=1024).exterior, IRREG
            ).length
            / (2 * np.pi * d[i, j])
            for i, j in zip(ii, jj, strict=True)
        ]
    )
    w = 1 / frac
    dd = d[ii, jj]
    b = boundary_distance(xy, IRREG)
    for k, r in enumerate(res.r_m):
        K = area / (n * (n - 1)) * np.sum(w * (dd <= r))
        t = (r - dd) / h
        kern = np.where(np.abs(t) < 1, 0.75 / h * (1 - t**2), 0.0)
        g = area / (n * (n - 1)) * np.sum(w * kern) / ring_by_quadrature(r, h)
        centres = b >= r
        with np.errstate(invalid="ignore"):
            kb = area / (n - 1) * np.sum((dd <= r) * centres[ii]) / centres.sum()
        assert res.K_iso_m2[k] == pytest.approx(K, rel=1e-4)
        assert res.g_iso[k] == pytest.approx(g, rel=1e-4, abs=1e-9)
        assert res.K_reduced_sample_m2[k] == pytest.approx(kb, rel=1e-9, nan_ok=True)
    # and the exact edge weights agree with the polygonised circle
    np.testing.assert_allclose(circle_fraction_inside(xy[ii], dd, IRREG), frac, atol=1e-5)


def test_hard_core_pattern_has_K_zero_below_the_hard_core_distance():
    # a square lattice of spacing 2 m with jitter of at most 0.2 m: no two plants are closer
    # than 2 − 2·0.2·√2 ≈ 1.43 m (exact geometry), so K(r) = 0 and L(r) − r = −r below it
    rng = np.random.default_rng(2)
    g = np.arange(1, 40, 2.0)
    X, Y = np.meshgrid(g, g)
    xy = np.column_stack([X.ravel(), Y.ravel()]) + rng.uniform(
        -0.2 / np.sqrt(2), 0.2 / np.sqrt(2), (X.size, 2)
    )
    poly = shapely.box(0, 0, 40, 40)
    res = second_order(xy, poly, 10.0, steps=100)
    below = res.r_m < 2 - 0.4 * np.sqrt(2) * 1.0001
    assert np.all(res.K_iso_m2[below] == 0)
    np.testing.assert_allclose(res.L_minus_r_m[below], -res.r_m[below])
    assert np.all(res.K_iso_m2[res.r_m >= 2.2] > 0)
    # without jitter every neighbour is at exactly 2 m: K(r) counts d ≤ r, so K jumps at r = 2
    exact = second_order(np.column_stack([X.ravel(), Y.ravel()]), poly, 10.0, steps=100)
    assert exact.K_iso_m2[19] > 0 and exact.K_iso_m2[18] == 0  # r = 2.0 m and 1.9 m


def test_thomas_process_is_clustered_at_its_cluster_scale():
    # Thomas process (Gaussian offspring, σ = 1 m; Thomas 1949, Biometrika 36: 18, from
    # memory): pairs in the same cluster lie at ~2σ (offset difference has s.d. σ√2), so
    # L(r) − r > 0 there and g(r) > 1 at short range
    rng = np.random.default_rng(7)
    poly = shapely.box(0, 0, 50, 50)
    parents = uniform_in_polygon(poly.buffer(4), 25, rng=rng)
    kids = np.repeat(parents, 12, axis=0) + rng.normal(0, 1.0, (300, 2))
    kids = kids[shapely.contains_xy(poly, kids[:, 0], kids[:, 1])]
    res = second_order(kids, poly, 10.0, steps=50)
    scale = (res.r_m >= 1) & (res.r_m <= 4)
    assert np.all(res.L_minus_r_m[scale] > 0.5)
    assert np.all(res.g_iso[(res.r_m >= 0.5) & (res.r_m <= 2)] > 2)


def test_default_r_max_and_bandwidth_rules():
    # documented rules: min(shorter side / 4, 10 / √λ); h = 0.15 / √λ (Stoyan & Stoyan 1994,
    # constant from memory)
    assert default_max_distance(RECT, 50) == pytest.approx(30 / 4)
    assert default_max_distance(RECT, 10_000) == pytest.approx(10 * np.sqrt(1800 / 10_000))
    assert pcf_bandwidth(4.0) == pytest.approx(0.075)
