"""Closed canopy, sixth round: regions that never reach the raster's median brightness are
gaps, and the crown-scale join tolerates the tint step between a crown's lit and shaded
parts (ecoscan.detect.canopy).

The scenes are rendered here with numpy: each crown a Lambertian hemisphere (brightness
proportional to the cosine between the surface normal and the sun; Lambert's cosine law,
common practice in shading models), with known centres and radii, over a dark floor.
"""

from __future__ import annotations

import math

import numpy as np

from ecoscan.detect import canopy

SHAPE = (230, 230)
# a 4 x 4 grid of touching domes (radius 24, 56 px apart): the diagonal openings between
# four domes are the gaps
CROWNS = [(30.0 + 56 * i, 30.0 + 56 * j, 24.0) for i in range(4) for j in range(4)]
# understorey bumps in three diagonal openings: dark, but each a maximum of its own
GAPS = [(58.0, 58.0), (114.0, 170.0), (170.0, 114.0)]


def _render(sun_elev_deg: float, sun_az_deg: float = 200.0) -> np.ndarray:
    yy, xx = np.mgrid[: SHAPE[0], : SHAPE[1]].astype(float)
    e, a = math.radians(sun_elev_deg), math.radians(sun_az_deg)
    s = (math.cos(e) * math.cos(a), math.cos(e) * math.sin(a), math.sin(e))
    out = np.full(SHAPE, 0.05)
    for cx, cy, r in CROWNS:
        dx, dy = (xx - cx) / r, (yy - cy) / r
        rho2 = dx * dx + dy * dy
        nz = np.sqrt(np.clip(1 - rho2, 0, None))
        lit = np.clip(dx * s[0] + dy * s[1] + nz * s[2], 0, None)
        inside = rho2 < 1
        out[inside] = 0.35 + 0.7 * lit[inside]
    for gx, gy in GAPS:
        out += 0.1 * np.exp(-((xx - gx) ** 2 + (yy - gy) ** 2) / (2 * 3.0**2))
    return out


def _detect(img: np.ndarray, min_peak: float | None = None):
    lay = np.log1p(100 * img).astype(np.float32)
    tint = np.full(SHAPE, 0.4, np.float32)
    ok = np.ones(SHAPE, bool)
    split = canopy.canopy_split([lay], [ok], 10.0, 30.0, tints=[tint])
    got = canopy.split_crowns(
        lay,
        split.r_min_px,
        split.h,
        smooth_px=split.smooth_px,
        min_area_px=split.min_area_px,
        max_area_px=split.max_area_px,
        lean=(split.lean_col, split.lean_row),
        tint=tint,
        crown_join=split.crown_join,
        min_peak=split.min_peak if min_peak is None else min_peak,
    )
    return split, lay, np.column_stack([got["col"], got["row"]])


def _near(pts: np.ndarray, places, radius: float) -> list[int]:
    return [int((np.hypot(*(pts - np.asarray(p)).T) < radius).sum()) for p in places]


def test_points_in_gaps_are_dropped_under_shaded_domes():
    split, lay, pts = _detect(_render(45.0))
    assert split.crown_join  # lit at 45 degrees: shaded domes
    # the limit is the median of the smoothed layer (no tuned share of anything)
    from scipy import ndimage

    smooth = ndimage.gaussian_filter(lay, split.smooth_px)
    assert math.isclose(split.min_peak, float(np.median(smooth)), rel_tol=1e-6)
    # one point per dome and none in the openings
    assert _near(pts, [c[:2] for c in CROWNS], 12.0) == [1] * len(CROWNS)
    assert _near(pts, GAPS, 8.0) == [0, 0, 0]
    assert len(pts) == len(CROWNS)


def test_the_gap_bumps_are_regions_of_their_own_without_the_limit():
    # the premise of the test above: each bump holds a maximum that starts a region, so
    # without the limit every opening gets a point
    _, _, pts = _detect(_render(45.0), min_peak=-math.inf)
    assert _near(pts, GAPS, 8.0) == [1, 1, 1]
    assert _near(pts, [c[:2] for c in CROWNS], 12.0) == [1] * len(CROWNS)


def test_no_gap_limit_without_shaded_domes():
    # sun overhead: no lean, so neither the crown-scale join nor the gap limit is on
    # (flat-coloured crowns over dark ground keep every region, as before)
    split, _, pts = _detect(_render(90.0))
    assert not split.crown_join
    assert split.min_peak == -math.inf
    assert _near(pts, GAPS, 8.0) == [1, 1, 1]


def _halves_with_tint_step(step: float) -> np.ndarray:
    """Two halves of one dome (regions 1 and 2) and a touching neighbour (3), the second
    half's tint ``step`` above the first's; returns join_at_crown_scale's table."""
    from skimage.segmentation import watershed

    yy, xx = np.mgrid[:80, :160].astype(float)
    img = np.full((80, 160), 0.05)
    for cx, r in ((40.0, 30.0), (108.0, 22.0)):
        rho2 = ((xx - cx) ** 2 + (yy - 40) ** 2) / r**2
        inside = rho2 < 1
        img[inside] = np.maximum(img[inside], 0.35 + 0.7 * np.sqrt(1 - rho2[inside]))
    markers = np.zeros(img.shape, int)
    markers[40, 30], markers[40, 50], markers[40, 108] = 1, 2, 3
    reg = watershed(-img, markers, mask=img > 0.1)
    big = (xx - 40) ** 2 + (yy - 40) ** 2 < 30**2
    reg[big] = np.where(xx[big] < 40, 1, 2)
    tint = np.full(img.shape, 0.40, np.float32)
    tint[reg == 2] += step
    max_area = canopy.MERGE_MAX_AREA_SHARE * math.pi * 36.0**2
    return canopy.join_at_crown_scale(reg, 3, img, 1.0, 36.0, max_area, tint=tint)


def test_crown_scale_join_tolerates_a_lit_and_shaded_tint_step():
    # the lit and shaded halves of one crown differ in tint by 0.025: joined (the limit
    # was 0.02 until this round); a step of 0.05 (another species) keeps them apart
    lut = _halves_with_tint_step(0.025)
    assert lut[1] == lut[2]
    assert lut[3] not in (lut[1], lut[2])
    apart = _halves_with_tint_step(0.05)
    assert apart[1] != apart[2]
