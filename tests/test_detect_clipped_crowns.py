"""Big pale crowns placed whole from Excess Green clipped to its pale band.

`clipped_crowns`: the main layer clipped to [background, background + 2 robust SDs] makes
every crown a plateau, so a pale crown with a green lobe and a bright green neighbour
peaks at its own centre and scale; such a blob replaces the pale lobe points inside it.
The scale-space facts used: the scale-normalised Laplacian of a flat disc of radius r
peaks at sigma = r / sqrt(2) with response 2/e times its contrast (Lindeberg 1998, IJCV
30: 79-116; `blobs.DISC_RESPONSE`). Geometry is checked on drawn layers and points; the
detector on a development scene of the suite (ground truth by construction).
"""

import math
from dataclasses import replace

import numpy as np

from ecoscan.detect import clipped_crowns, detect_raster
from ecoscan.detect.blobs import blob_scales, detect_blobs
from ecoscan.detect.clipped_crowns import clip_band, crown_blobs, crown_points
from tests.detect_helpers import rule_on_and_off, sorted_xy


def _pale_crown_scene():
    """A pale crown (radius 16 px, 0.04 above the soil) with a green lobe (radius 5 px,
    0.5) off its centre, and a bright green neighbour (radius 14 px, 0.5) beside it."""
    yy, xx = np.mgrid[:128, :128]
    crown = np.hypot(yy - 64, xx - 56) < 16
    lobe = np.hypot(yy - 55, xx - 62) < 5
    neighbour = np.hypot(yy - 64, xx - 90) < 14
    layer = np.where(crown, 0.04, 0.0)
    layer = np.where(lobe | neighbour, 0.5, layer).astype(np.float32)
    return layer


def test_clip_band_from_the_background_statistics():
    lo, hi, resp, pale = clip_band(0.01, 0.02)
    assert lo == 0.01
    assert math.isclose(hi, 0.01 + clipped_crowns.CLIP_MADS * 0.02)
    # a share of a flat disc's response at the clip level (Lindeberg 1998: 2/e)
    disc = 2.0 / math.e * clipped_crowns.CLIP_MADS * 0.02
    assert math.isclose(resp, clipped_crowns.MIN_RESPONSE * disc)
    assert math.isclose(pale, 0.01 + clipped_crowns.PALE_MADS * 0.02)


def test_clipped_layer_sees_the_pale_crown_whole():
    layer = _pale_crown_scene()
    scales = blob_scales(6.0, 20.0)
    valid = np.ones(layer.shape, bool)
    found = crown_blobs(layer, (0.0, 0.04), 0.005, scales, valid, (0, 0))
    radius = math.sqrt(2.0) * found["sigma"]
    at_centre = np.hypot(found["row"] - 64, found["col"] - 56) < 3
    # one blob at the crown's centre, about its size (a disc peaks at r / sqrt(2))
    assert at_centre.sum() == 1
    assert abs(radius[at_centre][0] - 16) < 4
    # the unclipped layer has no crown-scale maximum there: the lobe and the neighbour
    # dominate (the reason for the clipping)
    plain = detect_blobs(layer, scales, 0.005, 0.0, valid)
    near = np.hypot(plain["row"] - 64, plain["col"] - 56) < 3
    assert not np.any(near & (math.sqrt(2.0) * plain["sigma"] > 10))


def test_pale_lobes_are_replaced_and_green_crowns_left():
    # lobes of a crown at x = 0; a point at x = 40 as big as the blob around it; a green
    # (not pale) lobe inside a blob at x = 80; a pale lobe beside a green point in a blob
    # at x = 120
    x = np.array([-6.0, 6.0, 40.0, 80.0, 116.0, 124.0])
    y = np.zeros(6)
    r = np.array([5.0, 5.0, 10.0, 5.0, 5.0, 5.0])
    pale = np.array([True, True, True, False, True, False])
    bx = np.array([0.0, 40.0, 80.0, 120.0])
    by_ = np.zeros(4)
    br = np.full(4, 12.0)
    bs = np.ones(4)
    drop, take, by = crown_points(x, y, r, pale, bx, by_, br, bs)
    assert drop.tolist() == [True, True, False, False, False, False]
    assert take.tolist() == [True, False, False, False]
    assert by.tolist() == [0, 0, -1, -1, -1, -1]
    # share 0 turns the rule off
    d0, t0, _ = crown_points(x, y, r, pale, bx, by_, br, bs, share=0.0)
    assert not d0.any() and not t0.any()


def test_a_point_is_replaced_once_by_the_strongest_blob():
    x, y = np.array([-4.0, 4.0]), np.zeros(2)
    r, pale = np.full(2, 3.0), np.ones(2, bool)
    drop, take, by = crown_points(
        x, y, r, pale, np.array([0.0, 1.0]), np.zeros(2), np.full(2, 9.0), np.array([1.0, 2.0])
    )
    assert drop.all() and take.tolist() == [False, True] and by.tolist() == [1, 1]


def test_dry_shrubs_development_seed_gains_big_pale_crowns(tmp_path, monkeypatch):
    # suite development seed 7 (never a held-out seed); ground truth by construction
    run = rule_on_and_off("dry-shrubs", 7, tmp_path, monkeypatch, clipped_crowns, "PART_SHARE", 0.0)
    sc, truth, on, off = run.scene, run.truth, run.on, run.off
    lo = sc.diameter_range_m[0]
    # measured: 0.927 -> 0.963 (three crowns found at a lobe placed whole)
    assert run.matched_on.n_matched >= run.matched_off.n_matched + 2
    assert on.n <= off.n  # points replaced, none added
    assert any("placed whole" in str(n) for n in on.notes)
    assert not any("placed whole" in str(n) for n in off.notes)
    # every point the rule places lies within the tolerance of a pale (dry or grey) crown,
    # with that crown's diameter to within a quarter (measured: 0.83-1.93 m crowns)
    xy, diam = on.points.xy, np.asarray(on.points.attrs["diameter_m"])
    new = np.array([not np.any(np.all(off.points.xy == p, axis=1)) for p in xy])
    assert new.sum() >= 2
    d = np.hypot(xy[new, None, 0] - truth[None, :, 0], xy[new, None, 1] - truth[None, :, 1])
    assert np.all(d.min(axis=1) <= 0.5 * lo)
    crown = d.argmin(axis=1)
    assert set(np.asarray(sc.kind)[crown]) <= {"dry", "grey"}
    np.testing.assert_allclose(diam[new], np.asarray(sc.diameter_m)[crown], rtol=0.25)
    # the rule runs once over all tiles' points: tiled runs equal the whole image
    monkeypatch.undo()
    tiled = detect_raster(run.raster, replace(run.settings, tile_size_px=192))
    assert tiled.tiles_total >= 9
    np.testing.assert_array_equal(sorted_xy(on.points), sorted_xy(tiled.points))


def test_rule_leaves_rocky_shrubland_alone(tmp_path, monkeypatch):
    # the second layer runs on rocky shrubland (Excess Green alone on smooth ground), but
    # its olive shrubs are not pale: the rule must not move a point (development seed 0)
    run = rule_on_and_off(
        "rocky-shrubland", 0, tmp_path, monkeypatch, clipped_crowns, "PART_SHARE", 0.0
    )
    assert run.on.thresholds.get("second_layer") is not None
    np.testing.assert_array_equal(sorted_xy(run.on.points), sorted_xy(run.off.points))
