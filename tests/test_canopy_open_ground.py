"""The closed-canopy switch's open-ground figure (ecoscan.detect.canopy.canopy_evidence).

Checked against an outside reference: the share computed by brute force with scipy's
KD-tree (distances from every bright pixel to the nearest dark pixel) and scikit-image's
Otsu threshold (Otsu, N. 1979, IEEE Trans. SMC 9: 62-66), and on a construction whose
answer is known exactly (a uniform field without any dark pixel is all open ground).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage
from scipy.spatial import cKDTree
from skimage.filters import threshold_otsu

from ecoscan.detect.canopy import (
    MAX_OPEN_SHARE,
    OPEN_REACH,
    SMOOTH_SHARE,
    canopy_evidence,
    canopy_layer,
    is_closed_canopy,
)
from ecoscan.synthetic import make_scene

RGB = ("red", "green", "blue")


def _field_with_trees(seed: int) -> np.ndarray:
    """Bright green field, a few dark discs (trees) of radius 6 px."""
    rng = np.random.default_rng(seed)
    img = np.empty((3, 120, 120), np.float32)
    img[:] = np.array([100.0, 140.0, 70.0])[:, None, None]
    yy, xx = np.mgrid[:120, :120]
    for cy, cx in rng.uniform(10, 110, (6, 2)):
        disc = (yy - cy) ** 2 + (xx - cx) ** 2 <= 36
        img[:, disc] = np.array([36.0, 60.0, 40.0])[:, None]
    return img + rng.normal(0, 2.0, img.shape).astype(np.float32)


def test_open_share_matches_a_brute_force_distance_count():
    img = _field_with_trees(4)
    r_min, r_max = 4.0, 12.0
    ok = np.ones(img.shape[1:], bool)
    ok[:, :5] = False  # an invalid strip counts as not open
    ev = canopy_evidence([img], [ok], RGB, r_min, r_max)
    # reference: Otsu on the same smoothed layer, brute-force nearest non-bright pixel
    s = SMOOTH_SHARE * r_min
    br = ndimage.gaussian_filter(canopy_layer(img, RGB), s)
    step = max(1, int(s))
    t = threshold_otsu(br[::step, ::step][ok[::step, ::step]])
    bright = (br > t) & ok
    rows, cols = np.nonzero(~bright)
    dist, _ = cKDTree(np.column_stack([rows, cols])).query(np.column_stack(np.nonzero(bright)))
    expected = float((dist > OPEN_REACH * r_max).sum()) / ok.sum()
    assert abs(ev["open_share"] - expected) < 1e-9
    assert 0.05 < expected < 0.9  # the construction has open ground, not all of it


def test_a_field_without_dark_pixels_is_all_open_and_never_canopy():
    img = np.empty((3, 60, 60), np.float32)
    img[:] = np.array([60.0, 160.0, 50.0])[:, None, None]
    ev = canopy_evidence([img], [np.ones((60, 60), bool)], RGB, 3.0, 8.0)
    assert ev["open_share"] == 0.0  # constant: no split, nothing measured as open
    ev = {"green_share": 1.0, "bright_green_corr": 0.5, "open_share": 1.0}
    assert not is_closed_canopy(ev)


def test_open_ground_keeps_dark_trees_on_pasture_off_the_canopy_path():
    """Scene suite: a packed canopy has almost no open ground, dark conifers on pasture
    have plenty; a correlation near the first rule's limit does not switch on its own."""
    shares = {}
    for style in ("closed-canopy", "conifer-pasture"):
        sc = make_scene(style, 256, 5)
        r_min = sc.diameter_range_m[0] / 2 / sc.pixel_size_m
        r_max = sc.diameter_range_m[1] / 2 / sc.pixel_size_m
        img = sc.image.astype(np.float32)
        shares[style] = canopy_evidence([img], [np.ones(img.shape[1:], bool)], RGB, r_min, r_max)
    assert shares["closed-canopy"]["open_share"] < MAX_OPEN_SHARE, shares
    assert shares["conifer-pasture"]["open_share"] > MAX_OPEN_SHARE, shares
    assert is_closed_canopy(shares["closed-canopy"])
    near_limit = {**shares["conifer-pasture"], "green_share": 0.95, "bright_green_corr": -0.1}
    assert not is_closed_canopy(near_limit)


def test_detection_records_the_rule_figures_when_the_switch_stays_off(tmp_path):
    """Dark conifers on pasture: the blob path is taken and the metadata say why (the
    open-ground share is above the rule's limit)."""
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.synthetic import write_scene

    sc = make_scene("conifer-pasture", 256, 5)
    paths = write_scene(sc, tmp_path)
    lo, hi = sc.diameter_range_m
    res = detect_raster(paths.raster, DetectionSettings(diameter_min_m=lo, diameter_max_m=hi))
    th = res.thresholds
    assert th["layer"] != "canopy"
    assert th["canopy_open_share"] > MAX_OPEN_SHARE
    assert 0.0 <= th["canopy_green_share"] <= 1.0 and -1.0 <= th["canopy_bright_green_corr"] <= 1.0
