"""Joining crown fragments at the crown's own scale (ecoscan.detect.canopy.join_at_crown_scale).

The scenes are rendered here with numpy: each crown a Lambertian hemisphere (brightness
proportional to the cosine between the surface normal and the sun; Lambert's cosine law,
common practice in shading models), with known centres and radii. Broad leaf clumps are
Gaussian bumps on the dome.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ecoscan.detect import canopy
from tests.detect_helpers import lambert_domes


def _clumps(shape, centres, sigma, amp):
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    out = np.zeros(shape)
    for cx, cy in centres:
        out += amp * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * sigma**2))
    return out


R_MIN, R_MAX = 10.0, 36.0
MAX_AREA = canopy.MERGE_MAX_AREA_SHARE * math.pi * R_MAX**2


def _split(img, crown_join, tint=None):
    # the open understorey is masked: in a closed canopy the gaps are narrow, so regions
    # end at the crowns' edges, not on wide bare floor
    return canopy.split_crowns(
        np.log1p(100 * img),
        R_MIN,
        0.02,
        smooth_px=canopy.SMOOTH_SHARE * R_MIN,
        valid=img > 0.1,
        max_area_px=MAX_AREA,
        tint=np.full(img.shape, 0.4, np.float32) if tint is None else tint,
        crown_join=crown_join,
    )


def _nearest(got, crowns):
    """For each crown: number of points within its radius, distance of the nearest / R."""
    pts = np.column_stack([got["col"], got["row"]])
    counts, errs = [], []
    for cx, cy, r in crowns:
        d = np.hypot(pts[:, 0] - cx, pts[:, 1] - cy)
        counts.append(int((d < r).sum()))
        errs.append(float(d.min() / r))
    return counts, errs


# a big crown (radius 32) with two broad leaf clumps on opposite sides of its centre,
# overlapped by smaller neighbours whose centres lie outside it by half their radius or
# more (as in a closed canopy)
CROWNS = [(70.0, 70.0, 32.0), (124.0, 64.0, 18.0), (70.0, 122.0, 16.0), (118.0, 112.0, 14.0)]
SHAPE = (150, 150)
CLUMPS = [(70 + 14 * math.cos(t), 70 + 14 * math.sin(t)) for t in (0.6, 0.6 + math.pi)]


def _scene():
    """Brightness and tint: the big crown's two clumps differ in tint by 0.015 (a sunlit
    clump is yellower), more than :func:`canopy.merge_fragments` allows (0.01); all
    crowns have one species' tint otherwise."""
    # half-spheroids half as high as wide: a broad crown top on which clumps stand out
    img = lambert_domes(SHAPE, CROWNS, height=0.5)
    yy, xx = np.mgrid[: SHAPE[0], : SHAPE[1]].astype(float)
    big = np.hypot(xx - 70, yy - 70) < 30
    tint = np.full(SHAPE, 0.4, np.float32)
    # the half of the big crown on the second clump's side
    far = big & ((xx - 70) * math.cos(0.6) + (yy - 70) * math.sin(0.6) < 0)
    tint[far] += 0.015
    return img + big * _clumps(SHAPE, CLUMPS, 5.0, 0.25), tint


def test_big_dome_with_leaf_clumps_is_cut_without_the_crown_scale_join():
    # the premise: at the smallest crown's smoothing the clumps start regions of their
    # own, and joining fragments (merge_fragments) leaves them apart
    img, tint = _scene()
    counts, _ = _nearest(_split(img, crown_join=False, tint=tint), CROWNS)
    assert counts[0] >= 2


def test_one_point_per_dome_within_a_tenth_of_its_radius():
    img, tint = _scene()
    counts, errs = _nearest(_split(img, crown_join=True, tint=tint), CROWNS)
    assert counts == [1, 1, 1, 1]
    # the clumps sit symmetrically about the big crown's centre: its region's centre must
    # come back there; sun overhead, so no lean to remove
    assert max(errs) < 0.1, errs


@pytest.mark.parametrize("gap", [0.45, 0.7, 1.0])
def test_touching_domes_of_one_size_and_colour_stay_two(gap):
    # centres 1 + gap radii apart: the other crown's centre lies outside this one by
    # gap radii (the scene suite's closed canopy allows gaps down to 0.45)
    r = 24.0
    crowns = [(40.0, 50.0, r), (40.0 + (1 + gap) * r, 50.0, r)]
    img = lambert_domes((100, 130), crowns)
    counts, errs = _nearest(_split(img, crown_join=True), crowns)
    assert counts == [1, 1]
    assert max(errs) < 0.1


def test_joins_only_neighbours_that_fit_one_crown():
    # two halves of one dome, cut along a line by two markers: joined; a pair of touching
    # domes of different size: not joined
    from skimage.segmentation import watershed

    img = lambert_domes((80, 160), [(40.0, 40.0, 30.0), (108.0, 40.0, 22.0)])
    markers = np.zeros(img.shape, int)
    markers[40, 30], markers[40, 50], markers[40, 108] = 1, 2, 3
    # regions 1 and 2 split the big dome down its middle, 3 is the neighbour
    yy, xx = np.mgrid[:80, :160]
    big = (xx - 40) ** 2 + (yy - 40) ** 2 < 30**2
    reg = watershed(-img, markers, mask=img > 0.1)
    reg[big] = np.where(xx[big] < 40, 1, 2)
    lut = canopy.join_at_crown_scale(reg, 3, img, 1.0, R_MAX, MAX_AREA)
    assert lut[1] == lut[2]
    assert lut[3] not in (lut[1], lut[2])


def _dome_grid(sun_elev_deg):
    crowns = [(30.0 + 56 * i, 30.0 + 56 * j, 24.0) for i in range(4) for j in range(4)]
    img = lambert_domes((230, 230), crowns, sun_elev_deg, 200.0)
    lay = np.log1p(100 * img).astype(np.float32)
    tint = np.full(img.shape, 0.4, np.float32)
    return canopy.canopy_split([lay], [np.ones(img.shape, bool)], 10.0, 30.0, tints=[tint])


def test_crown_scale_join_is_on_for_shaded_domes_only():
    # lit at 45 degrees a dome's bright part lies towards the sun (0.5 cos 45 = 0.35
    # radii for an uncut Lambert cap, less here where the log layer and the floor attached
    # to each region cut the caps; canopy.level_set_lean); lit from straight above it lies
    # on the centre
    slant = _dome_grid(45.0)
    assert math.hypot(slant.lean_col, slant.lean_row) > 0.1
    bearing = math.degrees(math.atan2(slant.lean_row, slant.lean_col)) % 360
    assert abs(bearing - 200.0) < 10.0
    assert slant.crown_join
    above = _dome_grid(90.0)
    assert math.hypot(above.lean_col, above.lean_row) < canopy.MIN_DOME_LEAN
    assert not above.crown_join


@pytest.mark.parametrize("valley_sds, joined", [(0.1, True), (1.5, False)])
def test_valley_no_deeper_than_the_leaf_texture_joins(valley_sds, joined):
    # two halves of one dome with fine leaf texture, cut by a groove valley_sds standard
    # deviations of the layer within the crown deep; the crown-scale pass test is
    # switched off (min_pass 2) so that only the texture-relative test can join them
    from scipy import ndimage

    rng = np.random.default_rng(3)
    yy, xx = np.mgrid[:80, :80].astype(float)
    rho = np.hypot(xx - 40, yy - 40) / 30
    disc = rho < 1
    layer = 10.0 * np.sqrt(np.clip(1 - rho**2, 0, None))
    layer += ndimage.gaussian_filter(rng.normal(0.0, 1.0, (80, 80)), 2.0)
    sd = layer[disc].std()
    layer -= valley_sds * sd * np.exp(-((xx - 40) ** 2) / 2.0)
    layer[~disc] = 0.0
    reg = np.where(disc, np.where(xx < 40, 1, 2), 0)
    common = dict(min_pass=2.0)
    lut = canopy.join_at_crown_scale(reg, 2, layer, 1.0, R_MAX, MAX_AREA, **common)
    assert (lut[1] == lut[2]) == joined
    off = canopy.join_at_crown_scale(
        reg, 2, layer, 1.0, R_MAX, MAX_AREA, texture_sds=None, **common
    )
    assert off[1] != off[2]
