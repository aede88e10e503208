"""Closed-canopy crown split (ecoscan.detect.canopy): valley-following watershed.

External facts checked: the geometry of discs (two touching discs have their centres one
sum of radii apart; a disc's centroid is its centre), Lambert shading of a hemisphere (the
brightest point of a dome lit at elevation e lies r·cos(e) from its centre towards the
sun: Lambert's cosine law, common practice in shading models), and the robust standard
deviation 1.4826 × MAD (Hampel 1974, JASA 69: 383).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ecoscan.detect import canopy
from ecoscan.detect.canopy import (
    canopy_evidence,
    canopy_split,
    is_closed_canopy,
    split_crowns,
)


def _domes(shape, centres, radius, sun_elevation_deg=None):
    """Hemispherical crowns, each of unit height whatever its radius (brightness does not
    grow with crown size) when no sun, else Lambert brightness with the sun towards -x
    (left) at the given elevation and an ambient term of 0.2."""
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    out = np.zeros(shape)
    for cx, cy in centres:
        rho2 = (xx - cx) ** 2 + (yy - cy) ** 2
        inside = rho2 < radius**2
        if sun_elevation_deg is None:
            val = np.sqrt(np.clip(1 - rho2 / radius**2, 0, None))
        else:
            e = math.radians(sun_elevation_deg)
            nx = (xx - cx) / radius
            nz = np.sqrt(np.clip(1 - rho2 / radius**2, 0, None))
            val = 0.2 + np.clip(-math.cos(e) * nx + math.sin(e) * nz, 0, None)
        out = np.where(inside, np.maximum(out, val), out)
    # the ground between crowns is a valley: darker with distance from the nearest crown
    from scipy import ndimage

    ground = ndimage.distance_transform_edt(out <= 0)
    return np.where(out > 0, out, -0.01 * ground)


def test_two_touching_discs_give_two_points_within_a_pixel():
    # two discs of radius 14 whose centres lie exactly 2 r apart (they touch)
    centres = [(30.3, 40.0), (58.3, 40.0)]
    img = _domes((80, 89), centres, 14.0)
    got = split_crowns(img, 12.0, 0.05)
    assert got["col"].size == 2
    order = np.argsort(got["col"])
    for k, (cx, cy) in zip(order, centres, strict=True):
        assert math.hypot(got["col"][k] - cx, got["row"][k] - cy) < 1.0
    # equal-area regions: each is about one disc (pi r^2 = 616 px) plus its share of ground
    assert got["area_px"].min() > math.pi * 14.0**2 * 0.9


def test_overlapping_crowns_of_different_size_each_found():
    # radii 16 and 10, centres 20 apart: overlap (distance < 26) but each centre lies
    # outside the other crown (20 > 16), as in the scene suite's closed canopy
    img = np.maximum(_domes((70, 90), [(30, 35)], 16.0), _domes((70, 90), [(50, 35)], 10.0))
    got = split_crowns(img, 8.0, 0.05)
    assert got["col"].size == 2
    cols = np.sort(got["col"])
    # the smaller crown is seen only in part: its visible centre lies off its nominal one,
    # well within the matching tolerance of half the smallest diameter
    assert abs(cols[0] - 30) < 4.0 and abs(cols[1] - 50) < 5.0


def test_position_is_the_region_centre_not_the_brightness_peak():
    # one row of touching domes lit from the left at 45 degrees: the brightest point of
    # each lies r cos(45) = 0.71 r towards the sun (Lambert); the region, bounded by the
    # shaded valleys on both sides, is centred within 0.35 r of the crown (measured 0.3 r
    # sunwards: the valley floor is the flat shaded side, split at random)
    r = 15.0
    centres = [(20.0 + 2 * r * i, 30.0) for i in range(4)]
    img = _domes((60, 140), centres, r, sun_elevation_deg=45.0)
    got = split_crowns(img, 12.0, 0.05)
    assert got["col"].size == 4
    truth = np.array(centres)
    for c, rr in zip(got["col"], got["row"], strict=True):
        d_region = np.hypot(truth[:, 0] - c, truth[:, 1] - rr).min()
        assert d_region < 0.35 * r
    # and the brightness peak is where Lambert's law puts it: 0.71 r sunwards
    sm_peak = np.argmax(img[30, 5:35]) + 5
    assert sm_peak == pytest.approx(20.0 - r * math.cos(math.radians(45)), abs=1.0)


def test_small_regions_and_invalid_pixels_are_dropped():
    img = _domes((60, 60), [(30, 30)], 12.0)
    img[2:5, 2:5] += 0.3  # a 3 x 3 bright speck: far below a quarter of the smallest crown
    valid = np.ones(img.shape, bool)
    got = split_crowns(img, 10.0, 0.05, valid=valid, origin=(100, 200))
    assert got["col"].size == 1
    assert got["col"][0] == pytest.approx(130.0, abs=0.5)
    assert got["row"][0] == pytest.approx(230.0, abs=0.5)
    nothing = split_crowns(img, 10.0, 0.05, valid=np.zeros(img.shape, bool))
    assert nothing["col"].size == 0


def test_marker_height_follows_the_robust_spread():
    rng = np.random.default_rng(5)
    lay = rng.normal(0.0, 2.0, (200, 200)).astype(np.float32)
    cs = canopy_split([lay], [np.ones(lay.shape, bool)], 4.0, 12.0, h_share=1.0)
    from scipy import ndimage, stats

    sm = ndimage.gaussian_filter(lay, cs.smooth_px)
    # scipy's median_abs_deviation with scale="normal" is 1.4826 x MAD (Hampel 1974)
    assert cs.h == pytest.approx(stats.median_abs_deviation(sm.ravel(), scale="normal"), rel=1e-4)
    assert cs.min_area_px == pytest.approx(0.25 * math.pi * 16.0)


def _scene_arrays(style):
    from ecoscan.synthetic import make_scene

    sc = make_scene(style, 256, 3)
    img = sc.image.astype(np.float32)
    return img, sc


@pytest.mark.parametrize(
    ("style", "fires"),
    [("closed-canopy", True), ("dry-shrubs", False), ("conifer-pasture", False)],
)
def test_switch_rule_fires_on_a_packed_canopy_only(style, fires):
    img, sc = _scene_arrays(style)
    r_min = sc.diameter_range_m[0] / 2 / sc.pixel_size_m
    ev = canopy_evidence([img], [np.ones(img.shape[1:], bool)], ("red", "green", "blue"), r_min)
    assert is_closed_canopy(ev) is fires, ev


def test_switch_needs_colour_bands():
    img = np.ones((1, 32, 32), np.float32)
    ev = canopy_evidence([img], [np.ones((32, 32), bool)], ("band",), 4.0)
    assert not is_closed_canopy(ev)


def test_closed_canopy_detection_tiled_equals_whole_and_is_recorded(tmp_path):
    from ecoscan.detect import DetectionSettings, detect_raster, detection_metadata
    from ecoscan.stats.matching import match_points
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene("closed-canopy", 420, 3)
    paths = write_scene(sc, tmp_path)
    lo, hi = sc.diameter_range_m
    whole = detect_raster(
        paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=1024)
    )
    tiled = detect_raster(
        paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=128)
    )
    assert whole.thresholds["layer"] == "canopy"
    # colour edges (computed per tile) are on here, so tiles must cover them too
    assert whole.thresholds["canopy_colour_edge_gain"] > 0
    assert tiled.tiles_total > 1
    a = np.sort(np.round(whole.points.xy, 6), axis=0)
    b = np.sort(np.round(tiled.points.xy, 6), axis=0)
    assert a.shape == b.shape and np.array_equal(a, b)
    # the user is told that closed-canopy counts need checking
    assert any("closed-canopy counts are unreliable" in w for w in whole.warnings)
    meta = detection_metadata(whole)
    assert meta["thresholds"]["canopy_green_share"] >= 0.75
    # the split finds most crowns here (the blob path found about a quarter)
    m = match_points(whole.points.xy, np.column_stack([sc.x_m, sc.y_m]), 0.5 * lo)
    assert m.n_matched / sc.n > 0.6


# --- calibrated detectors: the [crown_split] table --------------------------------------


def _two_dome_raster(tmp_path):
    from rasterio.transform import from_origin

    from ecoscan.synthetic import write_geotiff

    # a row of touching domes 28 px across (1.4 m at 0.05 m pixels), grey values in 8 bits
    centres = [(30.0 + 28.0 * i, 40.0) for i in range(4)]
    img = _domes((80, 150), centres, 14.0)
    grey = np.clip(60 + 150 * img, 0, 255).astype(np.uint8)
    rgb = np.stack([grey, grey, grey])
    path = write_geotiff(
        tmp_path / "domes.tif", rgb, from_origin(500000.0, 4100000.0, 0.05, 0.05), "EPSG:32633"
    )
    return path, centres


def _detector(split):
    from ecoscan.detect.detector_file import CalibratedDetector

    return CalibratedDetector(
        "layer", "brightness", ("red", "green", "blue"), "uint8", 0.05, 1.2, 1.6,
        1.0, -1e9, 60.0, split=split,
    )  # fmt: skip


def test_crown_split_round_trips_through_the_detector_file_and_detects(tmp_path):
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.detect.detector_file import read_detector, to_toml, write_detector

    split = {"h": 2.0, "min_peak": 100.0, "smooth_share": 0.35, "min_area_share": 0.25}
    toml = tmp_path / "det.toml"
    write_detector(toml, _detector(split))
    assert "[crown_split]" in to_toml(_detector(split))
    assert "format_version = 2" in toml.read_text()
    back = read_detector(toml)
    # a file without join_fragments (written before it existed) reads as not joining
    assert back.split == {**split, "join_fragments": False}
    # a detector without the split still writes version 1 (older readers accept it)
    assert "format_version = 1" in to_toml(_detector({}))
    raster, centres = _two_dome_raster(tmp_path)
    res = detect_raster(raster, DetectionSettings(detector=str(toml)))
    assert res.thresholds["crown_split"] == {**split, "join_fragments": False}
    cols = np.sort((res.points.x - 500000.0) / 0.05 - 0.5)
    # one point per dome, each within a pixel of its centre (pixel 0 is centred at 0.5)
    assert cols.size == 4
    assert np.abs(cols - np.array([c for c, _ in centres])).max() < 1.0


def test_impossible_crown_split_table_is_refused(tmp_path):
    from ecoscan.detect.detector_file import read_detector, write_detector
    from ecoscan.errors import InputError

    toml = tmp_path / "det.toml"
    write_detector(toml, _detector({"h": 2.0, "min_peak": 100.0, "smooth_share": 0.35,
                                    "min_area_share": 0.25}))  # fmt: skip
    toml.write_text(toml.read_text().replace("h = 2.0", "h = -1.0"))
    with pytest.raises(InputError, match=r"crown_split"):
        read_detector(toml)


def test_split_scoring_counts_crowns_by_fold():
    import shapely

    from ecoscan.detect.calibration import _score_split, _Window

    # a probability map of touching crowns that blobs would merge: two folds (left, right)
    centres = [(30.0 + 28.0 * i, 40.0) for i in range(4)]
    prob = _domes((80, 150), centres, 14.0).clip(0, None)
    fold_map = np.zeros(prob.shape, int)
    fold_map[:, 75:] = 1
    ref = np.array(centres)
    w = _Window(
        plot=0, c0=0, r0=0, c1=150, r1=80, data=np.zeros((1, 80, 150)),
        valid=np.ones(prob.shape, bool), poly_px=shapely.box(0, 0, 150, 80), ref=ref,
        ref_fold=np.array([0, 0, 1, 1]), fold_map=fold_map, ref_index=np.arange(4),
    )  # fmt: skip
    got = _score_split([(0.0, [prob])], [w], 2, 5.0, 24.0, 32.0)  # centre-map weight 0
    assert got is not None
    score, split = got
    # every crown found in its own fold, nothing else
    assert (score.tp, score.fp, score.fn) == (4, 0, 0)
    assert split["h"] > 0 and set(split) == {
        "h",
        "min_peak",
        "smooth_share",
        "min_area_share",
        "join_fragments",
    }
    # one band: no tint, so fragments are never joined; smoothing from the grid
    from ecoscan.detect.calibration import SPLIT_SMOOTH_GRID

    assert split["join_fragments"] is False and split["smooth_share"] in SPLIT_SMOOTH_GRID


def test_joining_fragments_round_trips_through_the_detector_file(tmp_path):
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.detect.detector_file import read_detector, write_detector
    from ecoscan.errors import InputError

    split = {
        "h": 2.0,
        "min_peak": 100.0,
        "smooth_share": 0.35,
        "min_area_share": 0.25,
        "join_fragments": True,
    }
    toml = tmp_path / "det.toml"
    write_detector(toml, _detector(split))
    assert "join_fragments = true" in toml.read_text()
    assert read_detector(toml).split == split
    raster, centres = _two_dome_raster(tmp_path)
    res = detect_raster(raster, DetectionSettings(detector=str(toml)))
    assert res.thresholds["crown_split"]["join_fragments"] is True
    # the domes are round and touch: joining keeps one point per dome
    assert res.n == len(centres)
    toml.write_text(toml.read_text().replace("join_fragments = true", 'join_fragments = "yes"'))
    with pytest.raises(InputError, match=r"join_fragments"):
        read_detector(toml)


# --- joining fragments of one crown; the raster's lean towards the sun ---------------------


def test_roundness_agrees_with_scikit_image_moments():
    # area / (2 pi trace of the covariance) from raw moments against scikit-image's
    # regionprops (central moments; a disc of radius R has variance R^2/4 per axis and area
    # pi R^2, so roundness 1: geometry of the disc)
    from skimage.measure import regionprops

    from ecoscan.detect.canopy import _moments, _roundness

    yy, xx = np.mgrid[:90, :120]
    lab = np.zeros((90, 120), int)
    lab[(xx - 30) ** 2 + (yy - 30) ** 2 < 20**2] = 1
    lab[(yy > 60) & (yy < 70) & (xx > 10) & (xx < 100)] = 2  # a bar: far from round
    lab[((xx - 90) ** 2 + (yy - 30) ** 2 < 18**2) & (xx < 90)] = 3  # half a disc
    got = _roundness(_moments(lab, 3))
    for p, g in zip(regionprops(lab), got, strict=True):
        assert g == pytest.approx(p.area / (2 * math.pi * np.trace(p.inertia_tensor)), rel=1e-9)
    assert got[0] == pytest.approx(1.0, abs=0.02)
    # half a disc: area pi R^2/2, trace R^2/4 + R^2 (1/4 - 16/(9 pi^2)) -> 0.78 (geometry)
    assert got[2] == pytest.approx(0.5 / (2 * (0.5 - 16 / (9 * math.pi**2))), abs=0.03)
    assert got[1] < 0.4


def _textured_disc(radius, seed, shape=(100, 100)):
    """One crown: a dome with broad leaf clumps (a quarter of its radius across) deep enough
    to give its smoothed brightness several maxima."""
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    cy, cx = shape[0] / 2, shape[1] / 2
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    rho2 = ((xx - cx) ** 2 + (yy - cy) ** 2) / radius**2
    clumps = ndimage.gaussian_filter(rng.standard_normal(shape), radius / 4)
    clumps /= clumps.std()
    dome = np.sqrt(np.clip(1 - rho2, 0, None)) * (1 + 0.4 * np.clip(clumps, -2, 2))
    return np.where(rho2 < 1, 0.3 + dome, 0.0), (cx, cy)


def test_one_big_textured_crown_gives_one_point_when_fragments_are_joined():
    # ten crowns of radius 32 px, each bounded by neighbours at 1.15 r (valid mask); the
    # leaf clumps cut most of them without joining, joining leaves one point on most (the
    # deepest clump valleys stay: measured 8 of 10), each near the crown's centre
    split_plain = single = 0
    for seed in range(10):
        img, (cx, cy) = _textured_disc(32.0, seed)
        yy, xx = np.mgrid[: img.shape[0], : img.shape[1]]
        ok = (xx - cx) ** 2 + (yy - cy) ** 2 < (1.15 * 32.0) ** 2
        kw = dict(smooth_px=3.5, valid=ok)
        plain = split_crowns(img, 10.0, 0.02, **kw)
        joined = split_crowns(
            img, 10.0, 0.02, max_area_px=1.2 * math.pi * 35**2, tint=np.full(img.shape, 0.5), **kw
        )
        split_plain += plain["col"].size > 1
        if joined["col"].size == 1:
            single += 1
            assert math.hypot(joined["col"][0] - cx, joined["row"][0] - cy) < 0.25 * 32
        assert joined["col"].size <= plain["col"].size
    assert split_plain >= 6
    assert single >= 8


def test_touching_crowns_of_different_sizes_stay_two_when_joining():
    # radii 20 and 11, touching (centres 31 apart), same tint: the union is a peanut, less
    # round than the two discs, so they are not joined; each point on its disc's centre
    centres = [(35.0, 40.0), (66.0, 40.0)]
    img = np.maximum(_domes((80, 100), centres[:1], 20.0), _domes((80, 100), centres[1:], 11.0))
    got = split_crowns(
        img, 8.0, 0.05, max_area_px=1.2 * math.pi * 22**2, tint=np.full(img.shape, 0.5)
    )
    assert got["col"].size == 2
    order = np.argsort(got["col"])
    for k, (cx, cy) in zip(order, centres, strict=True):
        assert math.hypot(got["col"][k] - cx, got["row"][k] - cy) < 1.5


def test_halves_of_different_tint_are_not_joined():
    from ecoscan.detect.canopy import merge_fragments

    yy, xx = np.mgrid[:60, :60]
    disc = (xx - 30) ** 2 + (yy - 30) ** 2 < 20**2
    halves = np.where(disc, np.where(xx < 30, 1, 2), 0)
    same = np.full(halves.shape, 0.45)
    other = np.where(xx < 30, 0.40, 0.50)
    assert merge_fragments(halves, 2, 5000.0, tint=same).tolist() == [0, 1, 1]
    assert merge_fragments(halves, 2, 5000.0, tint=other).tolist() == [0, 1, 2]
    # too big a union for the largest crown: not joined
    assert merge_fragments(halves, 2, 1000.0, tint=same).tolist() == [0, 1, 2]


def test_lean_towards_the_sun_is_measured_and_removed():
    # a grid of Lambert domes lit from -x at 45 degrees (Lambert's cosine law, common
    # practice) with narrow dark gaps between them: the bright upper half of each lies
    # towards the sun, the region (bounded by the gaps) does not; the raster's lean,
    # measured once over all crowns, brings every centre back onto its crown
    r, step = 14.0, 32.0
    centres = [(18.0 + step * i, 18.0 + step * j) for i in range(5) for j in range(4)]
    img = _domes((4 * 32 + 4, 5 * 32 + 4), centres, r, sun_elevation_deg=45.0)
    ok = np.ones(img.shape, bool)
    tint = np.full(img.shape, 0.5)
    cs = canopy_split([img], [ok], 10.0, 16.0, h_share=0.05, tints=[tint])
    assert cs.merge and cs.lean_col < -0.02 and abs(cs.lean_row) < 0.01  # sun towards -x
    kw = dict(smooth_px=cs.smooth_px, max_area_px=cs.max_area_px, tint=tint)
    before = split_crowns(img, 10.0, cs.h, **kw)
    after = split_crowns(img, 10.0, cs.h, lean=(cs.lean_col, cs.lean_row), **kw)
    truth = np.array(centres)

    def miss(got):
        return np.array(
            [
                np.hypot(*(truth - (c, rr)).T).min()
                for c, rr in zip(got["col"], got["row"], strict=True)
            ]
        )

    assert before["col"].size == after["col"].size == len(centres)
    # measured: 0.27 r before, 0.09 r after (the level-set lean, canopy.level_set_lean;
    # the smoothing, 0.25 r here, and the valley floor below the unlit level keep it from
    # removing all of it); every centre is moved down-sun (+x), none past its crown's
    # centre
    assert np.median(miss(after)) < 0.5 * np.median(miss(before))
    assert np.median(miss(after)) < 0.15 * r
    assert np.all(after["col"] > before["col"])
    nearest = [
        np.argmin(np.hypot(*(truth - (c, rr)).T))
        for c, rr in zip(after["col"], after["row"], strict=True)
    ]
    assert np.all(after["col"] <= truth[nearest, 0] + 0.5)


def _flat_disc_grid(r=20.0):
    """Twelve flat discs of radius ``r`` on a 4 x 3 grid (value 1 on 0.1), all pixels valid,
    one tint: (r, centres, shape, layer, valid, tint)."""
    centres = [(24.0 + 44 * i, 24.0 + 44 * j) for i in range(4) for j in range(3)]
    shape = (3 * 44 + 4, 4 * 44 + 4)
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    flat = np.full(shape, 0.1)
    for cx, cy in centres:
        flat[(xx - cx) ** 2 + (yy - cy) ** 2 < r**2] = 1.0
    return r, centres, shape, flat, np.ones(shape, bool), np.full(shape, 0.5)


def _lambert_domes(shape, centres, radius, elevation_deg, azimuth_deg, ambient=0.2):
    """Hemispheres seen from straight above, brightness ambient + max(0, n·s) (Lambert's
    cosine law, common practice), sun at the given elevation and image azimuth (degrees
    from +column towards +row); the ground between crowns lies at the unlit level, falling
    very gently away from the crowns (valleys for the watershed)."""
    e, a = math.radians(elevation_deg), math.radians(azimuth_deg)
    sun = (math.cos(e) * math.cos(a), math.cos(e) * math.sin(a), math.sin(e))
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    out = np.full(shape, -np.inf)
    for cx, cy in centres:
        nx, ny = (xx - cx) / radius, (yy - cy) / radius
        nz = np.sqrt(np.clip(1 - nx**2 - ny**2, 0, None))
        val = ambient + np.clip(sun[0] * nx + sun[1] * ny + sun[2] * nz, 0, None)
        out = np.where(nx**2 + ny**2 < 1, np.maximum(out, val), out)
    from scipy import ndimage

    ground = ndimage.distance_transform_edt(~np.isfinite(out))
    return np.where(np.isfinite(out), out, ambient - 0.002 * ground)


def test_level_set_lean_recentres_lambert_domes_whose_peaks_lie_off_centre():
    # Lambert domes (radius 20 px) lit from elevation 65 degrees, azimuth 200 degrees: the
    # brightest point of a dome lies R cos(e) = 8.5 px towards the sun (the point whose
    # normal is the sun's direction); the level sets of brightness are centred k R cos(e)
    # towards the sun (canopy.level_set_lean), so twice the step between the level sets at
    # k = 0.5 and 0.75 brings each centre back onto its crown. The derivation's
    # assumptions hold here (caps uncut by the dome's edge as k >= cos e; floor at the
    # unlit level; smoothing 0.09 R, as for the suite's largest crowns).
    r, elev, azim = 20.0, 65.0, 200.0
    centres = [(24.0 + 44 * i, 24.0 + 44 * j) for i in range(4) for j in range(3)]
    img = _lambert_domes((3 * 44 + 4, 4 * 44 + 4), centres, r, elev, azim)
    truth = np.array(centres)
    yy, xx = np.mgrid[: img.shape[0], : img.shape[1]]
    expected_peak = r * math.cos(math.radians(elev))
    for cx, cy in centres:
        disc = (xx - cx) ** 2 + (yy - cy) ** 2 < r**2
        k = np.argmax(np.where(disc, img, -np.inf))
        assert abs(math.hypot(xx.flat[k] - cx, yy.flat[k] - cy) - expected_peak) <= 1.0

    ok = np.ones(img.shape, bool)
    tint = np.full(img.shape, 0.5)
    cs = canopy_split([img], [ok], 5.0, r, h_share=0.05, tints=[tint])
    # the raster's lean points at the sun's azimuth
    assert abs(math.degrees(math.atan2(cs.lean_row, cs.lean_col)) - (azim - 360)) < 5.0
    # shaded domes: the shift applied is DOME_LEAN_GAIN x the measured lean; the geometry
    # checked here is the measured lean's (the gain corrects the suite's textured,
    # overlapping crowns, where caps are cut and the estimate falls short)
    assert cs.lean_gain == canopy.DOME_LEAN_GAIN > 1.0
    lean = (cs.lean_col / cs.lean_gain, cs.lean_row / cs.lean_gain)
    kw = dict(smooth_px=cs.smooth_px, max_area_px=cs.max_area_px, tint=tint)
    before = split_crowns(img, 5.0, cs.h, **kw)
    after = split_crowns(img, 5.0, cs.h, lean=lean, **kw)
    assert before["col"].size == after["col"].size == len(centres)

    def miss(got):
        return np.hypot(*(truth[None] - np.column_stack([got["col"], got["row"]])[:, None]).T)

    # measured: 0.19 R before, at most 0.04 R after
    assert np.median(miss(before).min(axis=0)) > 0.15 * r
    assert miss(after).min(axis=0).max() < 0.06 * r
    # each crown's point and no other lies within the tolerance
    assert np.all(np.sort(miss(after), axis=1)[:, 1] > r)


def test_the_lean_gain_is_off_for_flat_crowns_and_scales_the_shift_for_domes():
    # flat-coloured discs (no shading): no lean, so no gain and no shift; the same discs
    # shaded as Lambert domes lit at 65 degrees: the shift is the gain times the lean
    # measured without it (Lambert's cosine law; common practice in shading models)
    r, centres, shape, flat, ok, tint = _flat_disc_grid()
    cs = canopy_split([flat], [ok], 5.0, r, h_share=0.05, tints=[tint])
    assert cs.lean_gain == 1.0 and not cs.crown_join
    assert math.hypot(cs.lean_col, cs.lean_row) < canopy.MIN_DOME_LEAN
    domes = _lambert_domes(shape, centres, r, 65.0, 200.0)
    cs = canopy_split([domes], [ok], 5.0, r, h_share=0.05, tints=[tint])
    got = split_crowns(domes, 5.0, cs.h, smooth_px=cs.smooth_px, min_area_px=cs.min_area_px,
                       max_area_px=cs.max_area_px, tint=tint)
    fine = np.isfinite(got["lean_col"]) & np.isfinite(got["lean_row"])
    measured = (np.median(got["lean_col"][fine]), np.median(got["lean_row"][fine]))
    assert cs.crown_join and cs.lean_gain == canopy.DOME_LEAN_GAIN
    assert cs.lean_col == pytest.approx(canopy.DOME_LEAN_GAIN * measured[0], rel=1e-9)
    assert cs.lean_row == pytest.approx(canopy.DOME_LEAN_GAIN * measured[1], rel=1e-9)
