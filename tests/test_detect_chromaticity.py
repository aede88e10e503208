"""The log-chromaticity layer: colour without brightness, on its most structured axis
(invented scenes)."""

import math

import numpy as np
import pytest
from detect_helpers import suite_scene_f1
from scipy import stats

from ecoscan.detect.chromaticity import (
    BAND_BLUR,
    VALLEY_MAX,
    VALLEY_MIN,
    entropy_angle,
    floor_spread,
    invariant_terms,
    log_chromaticity,
    projection_entropy,
    recentre,
    valley_factor,
)
from ecoscan.detect.engine import compose_layer

RGB = ("red", "green", "blue")


def test_log_chromaticity_ignores_brightness_and_sums_to_zero_with_green():
    # chromaticity over the geometric mean: scaling all bands by k cancels (Finlayson,
    # Drew & Lu 2004); the three log-chromaticities sum to zero
    rng = np.random.default_rng(0)
    rgb = rng.uniform(20, 200, (3, 50)) - 1.0  # LOG_OFFSET is added back inside
    r, b = log_chromaticity(*rgb)
    r2, b2 = log_chromaticity(*((rgb + 1.0) * 1.7 - 1.0))
    np.testing.assert_allclose(r, r2, atol=1e-5)
    np.testing.assert_allclose(b, b2, atol=1e-5)
    lg = np.log(rgb[1] + 1.0) - np.log(rgb + 1.0).mean(axis=0)
    np.testing.assert_allclose(r + b + lg, 0.0, atol=1e-5)


def test_fixed_width_entropy_of_a_normal_sample_is_its_differential_entropy():
    # histogram entropy with bin width w ~ h(X) - log2(w) for small w (Cover & Thomas,
    # Elements of Information Theory, 2nd ed., Theorem 8.3.1); the middle 90 % of a
    # normal sample is a normal truncated at its 5 % and 95 % quantiles (scipy's truncnorm)
    rng = np.random.default_rng(1)
    v = rng.normal(0, 1, 200000)
    z = stats.norm.ppf(0.95)
    h_bits = stats.truncnorm(-z, z).entropy() / math.log(2)
    assert projection_entropy(v, 0.05) == pytest.approx(h_bits - math.log2(0.05), abs=0.02)


def _ground_with_shade(size=160, seed=3):
    """Green pasture, its right half in shade (the bands scaled by 0.45, 0.5, 0.6: darker
    and a little bluer), and a darker blue-green crown in the lit half."""
    rng = np.random.default_rng(seed)
    img = np.empty((3, size, size), np.float32)
    img[:] = np.array([90.0, 140.0, 60.0], np.float32)[:, None, None]
    img *= np.exp(0.05 * rng.standard_normal((1, size, size))).astype(np.float32)
    img *= np.exp(0.03 * rng.standard_normal((3, size, size))).astype(np.float32)  # colour
    img[:, :, size // 2 :] *= np.array([0.45, 0.5, 0.6], np.float32)[:, None, None]
    img[:, 30:70, 20:60] = np.array([40.0, 55.0, 50.0], np.float32)[:, None, None]
    img += rng.normal(0, 0.5, img.shape).astype(np.float32)
    return img


def test_the_least_entropy_axis_is_the_one_that_separates_a_minority_colour():
    # projection pursuit with an entropy index (Jones & Sibson 1987, JRSS A 150: 1): the
    # standardised projection of least entropy is the most structured one; a minority
    # offset along (1, -2)/sqrt(5) in the plane gives an axis at atan2(-2, 1) mod 180
    rng = np.random.default_rng(4)
    chi = rng.normal(0, 0.04, (20000, 2))
    chi[:2000] += 0.25 * np.array([1.0, -2.0]) / math.sqrt(5)
    expect = math.degrees(math.atan2(-2.0, 1.0)) % 180.0
    assert entropy_angle(chi[:, 0], chi[:, 1]) == pytest.approx(expect, abs=5.0)


def test_shade_mostly_vanishes_from_the_layer_and_the_crown_stands_out_positive():
    img = _ground_with_shade()
    terms, _angle, gap = invariant_terms([img], [np.ones(img.shape[1:], bool)], RGB)
    lay = compose_layer(img, RGB, terms)
    lit, shaded, crown = lay[100:150, 10:70], lay[100:150, 90:150], lay[35:65, 25:55]
    step_shade = abs(float(np.median(shaded) - np.median(lit)))
    step_crown = float(np.median(crown) - np.median(lit))
    assert step_crown > 0  # plants bright
    assert step_shade < 0.5 * step_crown  # the shade's blue shift leaks in, its darkening not
    # on brightness the shade step is larger than the crown's: the darkness layer would
    # see the shade at least as strongly as the crown
    bright = img.mean(axis=0)
    assert (
        abs(np.median(bright[100:150, 90:150]) - np.median(bright[100:150, 10:70]))
        > abs(np.median(bright[35:65, 25:55]) - np.median(bright[100:150, 10:70])) * 0.5
    )
    assert gap > 0


def test_dark_crowns_with_long_shadows_on_pasture_are_found_one_point_each(tmp_path):
    # the tuning style `pines` (benchmarks/tuning_scenes.py): near-black crowns whose
    # shadows, 1.2-2.4 radii long, are as dark as the crowns. Before the colour layer
    # the defaults reached F1 0.51 on this seed (crowns joined to their shadows); F1 is
    # scored against the scene's known positions, matched one-to-one within half the
    # smallest diameter as `ecoscan validate` does (van Rijsbergen 1979 for F1)
    from benchmarks import tuning_scenes as ts
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points

    path, truth = ts.write_tuning_scene(tmp_path, "pines", 100)
    lo, hi = ts.DIAMETER_M
    res = detect_raster(path, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    m = match_points(res.points.xy, truth.xy, 0.5 * lo)
    f1 = 2 * m.n_matched / (res.n + truth.n)
    assert res.thresholds["layer"] == "chroma"
    assert f1 >= 0.9
    assert res.thresholds["shadow_joined"] is False
    # a clean valley on the layer of single pixels (no kept candidate near the threshold):
    # the bands are not smoothed and the points not recentred
    assert "band_blur_px" not in res.thresholds and "recentre" not in res.thresholds


# --- thresholds of the colour layer where the classic choice is unusable ------------------


def test_noise_response_spread_falls_as_one_over_sigma():
    # the premise of floor_spread: the scale-normalised DoG (sigma^2 times the Laplacian of
    # a Gaussian, Lindeberg 1998, IJCV 30: 79-116) of white noise has a standard deviation
    # proportional to 1/sigma in 2-D (its kernel's L2 norm scales as sigma^2 * sigma^-3);
    # a spread that rises with scale is therefore not noise
    from ecoscan.detect.blobs import blob_scales, response_spread

    sc = blob_scales(2, 20)
    noise = np.random.default_rng(3).standard_normal((512, 512)).astype(np.float32)
    sp = response_spread(noise, sc, np.ones(noise.shape, bool), 0.0)[1:-1]
    scaled = sp * sc.sigmas[1:-1]
    assert np.all(np.diff(sp) < 0)
    np.testing.assert_allclose(scaled, np.median(scaled), rtol=0.15)


def test_floor_spread_is_the_running_minimum_over_scales():
    # numpy's fmin.accumulate (NaN skipped) as the reference
    rng = np.random.default_rng(5)
    sp = rng.uniform(0.01, 0.1, 40)
    sp[[0, 7, 19]] = np.nan
    expect = np.fmin.accumulate(sp)
    np.testing.assert_allclose(floor_spread(sp)[1:], expect[1:])
    assert math.isnan(floor_spread(sp)[0])  # nothing measured yet: left as it was
    np.testing.assert_allclose(floor_spread(np.array([0.03, 0.05, 0.07])), 0.03)


def _between_variance(v, t):
    # Otsu (1979), IEEE Trans. SMC 9: 62: the between-class variance w0 w1 (mu0 - mu1)^2
    # of the split of the values at t
    lo, hi = v[v <= t], v[v > t]
    w0, w1 = lo.size / v.size, hi.size / v.size
    return w0 * w1 * (lo.mean() - hi.mean()) ** 2


def test_valley_factor_splits_log_responses_by_otsu_criterion():
    rng = np.random.default_rng(6)
    ground = np.exp(rng.normal(np.log(1.3), 0.2, 300))
    plants = np.exp(rng.normal(np.log(4.0), 0.25, 150))
    ratio = np.r_[ground, plants, rng.uniform(0.2, 0.99, 100)]  # below noise: ignored
    f = valley_factor(ratio, np.ones(ratio.size, bool))
    lv = np.sort(np.log(ratio[ratio >= 1.0]))
    gaps = 0.5 * (lv[1:] + lv[:-1])
    best = max(_between_variance(lv, t) for t in gaps)  # exhaustive, every split
    assert _between_variance(lv, math.log(f)) == pytest.approx(best, rel=1e-9)
    # scikit-image's histogram version (256 bins) finds no better split
    from skimage.filters import threshold_otsu

    assert _between_variance(lv, threshold_otsu(lv)) <= best * (1 + 1e-9)
    assert 1.6 < f < 3.5  # between the two groups
    # two overlapping normal modes of equal weight and spread: by symmetry the split is
    # halfway between them on the log scale
    sym = np.exp(np.r_[rng.normal(1.0, 0.3, 20000), rng.normal(2.0, 0.3, 20000)])
    assert math.log(valley_factor(sym, np.ones(sym.size, bool))) == pytest.approx(1.5, abs=0.03)


def test_valley_factor_limits():
    rng = np.random.default_rng(7)
    few = rng.uniform(1.0, 5.0, VALLEY_MIN - 1)
    assert valley_factor(few, np.ones(few.size, bool)) == 1.0
    # no fixed upper bound (it was 6): two groups far apart are cut in the middle of
    # their gap on the log scale, sqrt(1.1 * 1000) = 33.2, whatever the noise floor
    far = np.r_[np.full(50, 1.1), np.full(50, 1000.0)]
    assert VALLEY_MAX == math.inf
    assert valley_factor(far, np.ones(100, bool)) == pytest.approx(math.sqrt(1100.0))
    # a clean gap is cut in its middle on the log scale: sqrt(1.2 * 4.8) = 2.4
    gap = np.r_[np.full(50, 1.2), np.full(50, 4.8)]
    assert valley_factor(gap, np.ones(100, bool)) == pytest.approx(2.4)
    # candidates failing the other tests do not count
    mixed = np.r_[np.full(50, 1.2), np.full(50, 9.0)]
    keep = np.r_[np.zeros(50, bool), np.ones(50, bool)]
    assert valley_factor(mixed, keep) == 1.0  # one group left: its ptp is 0


def test_valley_factor_is_not_bounded_by_the_noise_floor():
    # With the bands smoothed before the log, the noise floor the factor multiplies can
    # be small against the ground's bumps: ground bumps at 6-10 times it and crowns at
    # 14-30 times it (as measured on conifer-pasture diagnosis seeds 300-320). The split
    # must lie between the two groups, where a bound of 6 would keep most of the bumps.
    # Otsu (1979), IEEE Trans. SMC 9: 62, between-class variance checked exhaustively
    rng = np.random.default_rng(11)
    ground = np.exp(rng.uniform(np.log(6.0), np.log(10.0), 180))
    plants = np.exp(rng.uniform(np.log(14.0), np.log(30.0), 120))
    ratio = np.r_[ground, plants]
    f = valley_factor(ratio, np.ones(ratio.size, bool))
    assert 10.0 <= f <= 14.0
    kept = ratio >= f
    assert kept[180:].all() and not kept[:180].any()  # every crown, no bump
    lv = np.sort(np.log(ratio))
    best = max(_between_variance(lv, t) for t in 0.5 * (lv[1:] + lv[:-1]))
    assert _between_variance(lv, math.log(f)) == pytest.approx(best, rel=1e-9)


def test_conifers_joined_to_shadows_are_found_on_the_colour_layer(tmp_path):
    # the scene suite's conifer pasture (development seed 0): the classic layers are
    # unusable (Excess Green keeps too few candidates, darkness joins crowns to their
    # shadows); before this rule the defaults gave F1 0.46 at 512 px. F1 against the
    # scene's known positions, one-to-one within half the smallest diameter
    f1, res = suite_scene_f1("conifer-pasture", 384, 0, tmp_path)
    th = res.thresholds
    assert th["layer"] == "chroma"
    # the bands are smoothed before the log, at a share of the smallest blob scale
    assert th["band_blur_px"] > 0 and "smallest blob scale" in th["band_blur_px_from"]
    assert "chroma-valley" in th["layer_scores"]
    assert th["vegetation_threshold"] == th["background"]  # the valley rule's value test
    assert th["vegetation_threshold_from"] == "background median"
    assert th["threshold_raise"] > 1.0
    # the notes say why a layer with a lower separation score was used
    assert any("better-scored layers were unusable" in str(n) for n in res.notes)
    # measured 0.778 before the bands were smoothed (5 December 2026), 0.826 after, 0.860
    # with the points recentred
    assert f1 >= 0.83, f"F1 {f1:.3f}"
    assert "recentre" in th


def test_valley_factor_above_six_on_a_conifer_scene(tmp_path):
    # conifer pasture, diagnosis seed 300 (one of the seeds 300-320 kept for tuning this
    # rule, never a held-out figure): with the bands smoothed, the ground's bumps (shadow
    # edges, crown rims) reach 5-8 times the noise floor and the valley lies above 6.
    # Measured at 384 px (5 December 2026): bounded at 6, precision 0.836 and F1 0.857;
    # unbounded, factor 7.99, precision 0.962, F1 0.909. F1 against the scene's known
    # positions, one-to-one within half the smallest diameter
    f1, res = suite_scene_f1("conifer-pasture", 384, 300, tmp_path)
    th = res.thresholds
    assert th["layer"] == "chroma"
    # in a shallow valley the detection's threshold sits at VALLEY_SHARE of the valley
    # factor, with the open ring test (conifer12)
    from ecoscan.detect.chromaticity import VALLEY_SHARE

    opened = "sectors" in th["ring_mads_from"]
    assert th["threshold_raise"] / (VALLEY_SHARE if opened else 1.0) > 6.5
    assert f1 >= 0.89, f"F1 {f1:.3f}"


def test_a_classic_winner_that_sees_few_plants_gives_way(tmp_path):
    # conifer pasture, diagnosis seed 308: Excess Green won the contest keeping 25
    # candidates in the sample windows against 270 for darkness (0.09 of them), was not
    # flagged, and gave F1 0.578 (points off the crowns' middles). The classic choice now
    # counts as unusable below FEW_SHARE of the layer that kept most, and the colour
    # layer's valley takes over (measured F1 0.935 at 512 px)
    from ecoscan.detect.autotune import FEW_SHARE

    f1, res = suite_scene_f1("conifer-pasture", 512, 308, tmp_path)
    th = res.thresholds
    assert th["layer"] == "chroma"
    assert th["layer_scores"]["exg"] > th["layer_scores"]["chroma-valley"]  # won on score
    assert "few against" in th["layer_chosen_by"]
    assert f1 >= 0.9, f"F1 {f1:.3f}"
    # and where a classic layer works while darkness counts rocks as well (rocky
    # shrubland keeps 0.41-0.50 of the darkness count, the lowest working share), it
    # stays: FEW_SHARE must sit below that
    assert FEW_SHARE < 0.41
    _f1, rocky = suite_scene_f1("rocky-shrubland", 384, 0, tmp_path)
    assert rocky.thresholds["layer"] != "chroma"
    assert "chroma-valley" not in rocky.thresholds["layer_scores"]


def test_the_valley_rule_stays_off_where_a_classic_layer_works(tmp_path):
    _f1, res = suite_scene_f1("dry-shrubs", 384, 7, tmp_path)
    assert res.thresholds["layer"] != "chroma"
    assert "chroma-valley" not in res.thresholds["layer_scores"]
    assert "band_blur_px" not in res.thresholds
    assert not any("valley between ground" in str(n) for n in res.notes)


def test_smoothed_bands_keep_brightness_invariance_and_flat_colours():
    # the Gaussian filter is linear and keeps constants, so smoothing the bands before the
    # log keeps the log-chromaticities blind to a common scaling of the bands, and leaves
    # a patch of one colour as it was
    rng = np.random.default_rng(3)
    rgb = rng.uniform(20, 200, (3, 40, 40)) - 1.0  # LOG_OFFSET is added back inside
    r, b = log_chromaticity(*rgb, 2.0)
    r2, b2 = log_chromaticity(*((rgb + 1.0) * 0.4 - 1.0), 2.0)
    np.testing.assert_allclose(r, r2, atol=1e-5)
    np.testing.assert_allclose(b, b2, atol=1e-5)
    flat = np.broadcast_to(np.array([36.0, 60.0, 40.0])[:, None, None], (3, 30, 30))
    np.testing.assert_allclose(
        log_chromaticity(*flat, 2.0)[0], log_chromaticity(*flat)[0], atol=1e-6
    )


def test_smoothed_bands_quiet_pixel_noise_by_the_gaussian_filter_factor():
    # white noise of SD s filtered by a normalised 2-D Gaussian of sigma w keeps SD
    # s / (2 sqrt(pi) w) (the sum of the squared kernel weights is 1 / (4 pi w^2); from
    # memory, a standard result); for noise small against the signal the log-chromaticity
    # is linear in it (delta method), so its SD falls by the same factor
    rng = np.random.default_rng(4)
    base = np.array([90.0, 130.0, 60.0])[:, None, None]
    img = base + rng.normal(0.0, 2.0, (3, 256, 256))
    w = 2.0
    raw = log_chromaticity(*img)[0][16:-16, 16:-16].std()
    smooth = log_chromaticity(*img, w)[0][16:-16, 16:-16].std()
    expected = 1.0 / (2.0 * math.sqrt(math.pi) * w)  # 0.141
    assert smooth / raw == pytest.approx(expected, rel=0.1)


def test_tiled_detection_equals_the_whole_image_with_smoothed_bands(tmp_path):
    # the bands' smoothing reaches 4 sigma beyond the blob filters: the tiles' overlap
    # grows by as much (here the ring test's reach already covers it), so tiled runs
    # still give the whole image's points to the bit
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene("conifer-pasture", 384, 0)
    path = write_scene(sc, tmp_path).raster
    lo, hi = sc.diameter_range_m
    whole = detect_raster(path, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    tiled = detect_raster(
        path, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=128)
    )
    assert whole.thresholds["layer"] == "chroma"
    sigma_min = 0.5 * lo / sc.pixel_size_m / math.sqrt(2.0)  # r = sqrt(2) sigma
    assert whole.thresholds["band_blur_px"] == pytest.approx(BAND_BLUR * sigma_min, rel=0.3)
    assert tiled.tiles_total > 4
    a = np.array(sorted(map(tuple, whole.points.xy)))
    b = np.array(sorted(map(tuple, tiled.points.xy)))
    assert a.shape == b.shape and a.shape[0] > 20
    np.testing.assert_array_equal(a, b)


def test_recentring_moves_points_off_the_shadow_to_the_crown_middle():
    # a crown (radius 10 px) whose cast shadow lies next to it at 0.4 of its level on the
    # layer, noise added; points started on the shadow side, on the far side and at the
    # middle settle within a tenth of the radius of the middle, and never move more than
    # the blob radius
    rng = np.random.default_rng(5)
    yy, xx = np.mgrid[:80, :80]
    crown = (yy - 40) ** 2 + (xx - 40) ** 2 <= 100
    shadow = ((yy - 55) ** 2 + (xx - 40) ** 2 <= 100) & ~crown
    layer = np.where(crown, 1.0, np.where(shadow, 0.4, 0.0)) + rng.normal(0, 0.05, (80, 80))
    cols = np.array([40.0, 40.0, 40.0, 44.0])
    rows = np.array([45.0, 35.0, 40.0, 40.0])
    c, r = recentre(layer, cols, rows, np.full(4, 10.0), 0.0)
    assert np.all(np.hypot(c - 40.0, r - 40.0) < 1.0), (c, r)
    # with a blob radius of 2 px the point may move 2 px at most
    c2, r2 = recentre(layer, np.array([40.0]), np.array([49.0]), np.array([2.0]), 0.0)
    assert math.hypot(c2[0] - 40.0, r2[0] - 49.0) <= 2.0 + 1e-9


def test_valley_factor_inside_one_group_keeps_the_bound():
    # One tight group of crop plants at about 6.8 times the noise floor and nothing else
    # above it: Otsu (1979) cuts the group itself (no valley), which would drop about
    # half of the plants; the split is crowded, so the factor stops at CROWDED_BOUND.
    from ecoscan.detect.chromaticity import CROWDED_BOUND, CROWDED_SHARE, CROWDED_WIDTH, otsu_split

    rng = np.random.default_rng(202)
    plants = np.exp(rng.normal(math.log(6.8), 0.06, 240))
    ratio = plants
    split = otsu_split(np.log(ratio))
    near = np.mean(np.abs(np.log(ratio) - split) < CROWDED_WIDTH)
    assert math.exp(split) > CROWDED_BOUND and near > CROWDED_SHARE  # the case guarded
    f = valley_factor(ratio, np.ones(ratio.size, bool))
    assert f == CROWDED_BOUND
    assert np.mean(plants > f) > 0.95  # the plants are kept
    # two groups with a gap above the bound are still split in the gap (not crowded)
    two = np.r_[
        np.exp(rng.normal(math.log(8.0), 0.1, 150)), np.exp(rng.normal(math.log(20.0), 0.1, 150))
    ]
    assert valley_factor(two, np.ones(two.size, bool)) > 10.0
