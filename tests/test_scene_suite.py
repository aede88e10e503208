"""The scene suite: deterministic, georeferenced, truthful, and as hard as each style says.

Every scene is invented (synthetic ground truth made by ecoscan.synthetic). The checks look
at the rendered pixels with formulas from outside the project (Excess Green of Woebbecke
et al. 1995, NDVI of Rouse et al. 1974, a JPEG blockiness measure) and with the truth.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
import rasterio
from detect_helpers import suite_scene_f1
from pyproj import CRS
from scipy import ndimage

from ecoscan.errors import InputError
from ecoscan.synthetic import SCENE_STYLES, make_scene, write_scene
from ecoscan.synthetic.noise import value_noise

SMALL = 320  # tests render small scenes; benchmarks render large ones
DETECT = 512


@pytest.fixture(scope="module")
def scenes():
    return {s: make_scene(s, SMALL, 3) for s in SCENE_STYLES}


def exg(img: np.ndarray) -> np.ndarray:
    # Woebbecke et al. (1995), Trans. ASAE 38: 259: ExG = 2g - r - b on chromatic
    # coordinates r = R/(R+G+B), g = G/(R+G+B), b = B/(R+G+B); written out here, not imported
    rgb = img[:3].astype(float)
    s = rgb.sum(axis=0)
    s[s == 0] = 1
    r, g, b = rgb / s
    return 2 * g - r - b


def centre_values(layer: np.ndarray, sc, sel=None) -> np.ndarray:
    """Mean of the 3x3 pixels at each selected crown centre."""
    mean3 = ndimage.uniform_filter(layer.astype(float), 3)
    c = np.rint(sc.col_px).astype(int)
    r = np.rint(sc.row_px).astype(int)
    if sel is not None:
        c, r = c[sel], r[sel]
    return mean3[r, c]


def outside_crowns(sc, factor: float = 1.3) -> np.ndarray:
    """Pixels farther than ``factor`` radii from every crown centre."""
    n = sc.size_px
    near = np.zeros((n, n), bool)
    rad = factor * sc.diameter_m / sc.pixel_size_m / 2
    for c, r, rr in zip(sc.col_px, sc.row_px, rad, strict=True):
        x0, x1 = max(0, int(c - rr)), min(n, int(c + rr) + 2)
        y0, y1 = max(0, int(r - rr)), min(n, int(r + rr) + 2)
        yy, xx = np.mgrid[y0:y1, x0:x1]
        near[y0:y1, x0:x1] |= np.hypot(xx - c, yy - r) <= rr
    return ~near


def test_eight_styles_with_descriptions():
    assert len(SCENE_STYLES) >= 8
    assert all(isinstance(v, str) and len(v) > 20 for v in SCENE_STYLES.values())


@pytest.mark.parametrize("style", list(SCENE_STYLES))
def test_same_seed_same_bytes_other_seed_other_scene(style):
    a = make_scene(style, 160, 11)
    b = make_scene(style, 160, 11)
    c = make_scene(style, 160, 12)
    assert a.image.tobytes() == b.image.tobytes()
    np.testing.assert_array_equal(a.x_m, b.x_m)
    assert a.image.tobytes() != c.image.tobytes()


@pytest.mark.parametrize("style", ["dry-shrubs", "multispectral", "coarse"])
def test_any_rows_render_the_same_alone_as_in_the_whole(style):
    # position-hashed texture and a blur halo: strips join without seams, so a 6144-px
    # scene rendered strip by strip equals what a whole-image render would give
    sc = make_scene(style, 700, 2)
    alone = sc.recipe.render(300, 650)  # crosses the 512-row strip boundary
    np.testing.assert_array_equal(alone, sc.image[:, 300:650])


def test_noise_is_a_function_of_position():
    a = value_noise((0, 100), (0, 90), 7.0, 4)
    b = value_noise((40, 70), (10, 90), 7.0, 4)
    np.testing.assert_array_equal(a[40:70, 10:90], b)


def test_truth_inside_raster_in_metric_crs_with_stated_diameters(scenes):
    for style, sc in scenes.items():
        assert sc.n >= 10, style
        assert CRS.from_user_input(sc.crs).is_projected
        assert CRS.from_user_input(sc.crs).axis_info[0].unit_name == "metre"
        t = sc.transform
        assert t.a == pytest.approx(sc.pixel_size_m) and t.e == pytest.approx(-sc.pixel_size_m)
        left, top = t.c, t.f
        side = sc.size_px * sc.pixel_size_m
        assert np.all((sc.x_m > left) & (sc.x_m < left + side)), style
        assert np.all((sc.y_m < top) & (sc.y_m > top - side)), style
        # pixel and map positions agree (pixel centres at integers)
        np.testing.assert_allclose(sc.x_m, left + (sc.col_px + 0.5) * sc.pixel_size_m)
        lo, hi = sc.diameter_range_m
        assert np.all((sc.diameter_m >= lo - 1e-9) & (sc.diameter_m <= hi + 1e-9)), style
        assert sc.diameter_option == f"{lo:g}:{hi:g}"
        assert sc.image.shape == (len(sc.band_names), SMALL, SMALL)


def test_multispectral_layout_and_ndvi(scenes):
    sc = scenes["multispectral"]
    assert sc.image.dtype == np.uint16 and sc.band_names == ("blue", "green", "red", "nir")
    assert sc.bands_option == "blue=1,green=2,red=3,nir=4"
    img = sc.image.astype(float)
    # NDVI = (NIR - Red) / (NIR + Red), Rouse et al. (1974); green crowns well above soil
    nd = (img[3] - img[2]) / (img[3] + img[2])
    green = sc.kind == "green"
    assert np.median(centre_values(nd, sc, green)) > 0.5
    assert np.median(nd[outside_crowns(sc)]) < 0.3
    assert int(img.max()) > 255  # really 16-bit digital numbers


def test_multispectral_cloud_shadow_darkens_the_ground():
    sc = make_scene("multispectral", 400, 5)
    cl = sc.extras["cloud"]
    yy, xx = np.mgrid[0:400, 0:400]
    d = np.hypot(xx - cl["col"], yy - cl["row"])
    ground = outside_crowns(sc, 2.0)
    nir = sc.image[3].astype(float)
    inside = np.median(nir[ground & (d < 0.5 * cl["radius"])])
    outside = np.median(nir[ground & (d > 1.6 * cl["radius"])])
    assert inside < 0.75 * outside


def test_jpeg_style_carries_compression_artefacts(scenes):
    sc = scenes["jpeg-vignette"]
    assert sc.image.dtype == np.uint8 and sc.band_names == ("red", "green", "blue")
    raw = dataclasses.replace(sc.recipe, jpeg_quality=None).render(0, SMALL)
    jpg = sc.image
    diff = np.abs(jpg.astype(int) - raw.astype(int))
    assert 0.5 < diff.mean() < 10  # changed, but still the same picture

    def blockiness(img):
        # Ratio of the mean column-to-column step across 8x8 block borders to the mean
        # step elsewhere: about 1 for natural images, above 1 after block DCT coding
        # (a common JPEG blockiness measure; from memory, after Wang, Bovik & Evans 2000)
        g = np.abs(np.diff(img[1].astype(float), axis=1))
        border = (np.arange(g.shape[1]) % 8) == 7
        return g[:, border].mean() / g[:, ~border].mean()

    assert blockiness(jpg) > 1.08
    assert blockiness(raw) < 1.03


def test_vignetting_darkens_frame_corners():
    sc = make_scene("jpeg-vignette", 840, 1)
    f = sc.extras["frame_px"]
    oy, ox = sc.extras["frame_offset_px"]
    yy, xx = np.mgrid[0:840, 0:840]
    dy = np.mod(yy + oy, f) / f - 0.5
    dx = np.mod(xx + ox, f) / f - 0.5
    rad = np.hypot(dx, dy)
    bright = sc.image.astype(float).sum(axis=0)
    ground = outside_crowns(sc, 2.0)
    centre = np.median(bright[ground & (rad < 0.2)])
    corner = np.median(bright[ground & (rad > 0.6)])
    assert corner < 0.9 * centre


def test_dry_and_grey_crowns_are_less_green(scenes):
    sc = scenes["dry-shrubs"]
    ex = exg(sc.image)
    green = np.median(centre_values(ex, sc, sc.kind == "green"))
    dry = np.median(centre_values(ex, sc, sc.kind == "dry"))
    grey = np.median(centre_values(ex, sc, sc.kind == "grey"))
    assert dry < green - 0.15 and grey < green - 0.15
    soil = np.median(ex[outside_crowns(sc)])
    assert green > soil + 0.2


def test_cast_shadows_fall_away_from_the_one_sun(scenes):
    sc = scenes["dry-shrubs"]
    sun = sc.recipe.sun
    ux, uy = sun.shadow_dir
    bright = ndimage.uniform_filter(sc.image.astype(float).sum(axis=0), 3)
    rad = sc.diameter_m / sc.pixel_size_m / 2
    free = outside_crowns(sc, 1.15)
    dark = light = 0
    for i in range(sc.n):
        off = 1.35 * rad[i] + 2
        p = np.rint([sc.col_px[i] + ux * off, sc.row_px[i] + uy * off]).astype(int)
        q = np.rint([sc.col_px[i] - ux * off, sc.row_px[i] - uy * off]).astype(int)
        if p.min() < 0 or q.min() < 0 or p.max() >= SMALL or q.max() >= SMALL:
            continue
        if not (free[p[1], p[0]] and free[q[1], q[0]]):
            continue  # a sample point falls on another crown
        light += 1
        dark += bright[p[1], p[0]] < 0.8 * bright[q[1], q[0]]
    assert light >= 15 and dark / light > 0.85


def test_rocks_tracks_and_litter_are_dark_but_not_plants():
    sc = make_scene("rocky-shrubland", 480, 2)
    img = sc.image.astype(float)
    bright = img.sum(axis=0)
    ground = outside_crowns(sc, 1.6)
    soil = np.median(bright[ground])
    # plenty of dark pixels away from every crown
    assert np.mean(bright[ground] < 0.7 * soil) > 0.02
    rc = np.rint(sc.extras["rocks_col_px"]).astype(int)
    rr = np.rint(sc.extras["rocks_row_px"]).astype(int)
    assert rc.size >= 5
    assert np.median(bright[rr, rc]) < 0.6 * soil
    # rocks and ruts are not green: Excess Green (Woebbecke et al. 1995) near zero
    assert np.median(exg(sc.image)[rr, rc]) < 0.08
    tr = sc.extras["track"]
    cols = np.arange(480)
    mid = (
        tr["row0"]
        + tr["slope"] * cols
        + tr["amp"] * np.sin(2 * np.pi * cols / tr["wave"] + tr["phase"])
    )
    rut = np.rint(mid - tr["gauge_px"] / 2).astype(int)
    ok = (rut >= 0) & (rut < 480) & ground[np.clip(rut, 0, 479), cols]
    assert ok.sum() > 50
    assert np.median(bright[rut[ok], cols[ok]]) < 0.85 * soil


def test_conifers_differ_by_darkness_not_greenness(scenes):
    sc = scenes["conifer-pasture"]
    ex = exg(sc.image)
    bright = sc.image.astype(float).sum(axis=0)
    ground = outside_crowns(sc, 2.5)
    crown_ex = np.median(centre_values(ex, sc))
    assert abs(crown_ex - np.median(ex[ground])) < 0.1
    assert np.median(centre_values(bright, sc)) < 0.6 * np.median(bright[ground])
    assert {"planted", "regeneration"} <= set(sc.kind)


def test_closed_canopy_crowns_touch_and_overlap(scenes):
    sc = scenes["closed-canopy"]
    xy = np.column_stack([sc.x_m, sc.y_m])
    r = sc.diameter_m / 2
    d = np.hypot(*(xy[:, None] - xy[None]).transpose(2, 0, 1))
    np.fill_diagonal(d, np.inf)
    overlapping = d < (r[:, None] + r[None])
    assert overlapping.any(axis=1).mean() > 0.3
    # the stated rule: every centre outside the other crowns' nominal circles
    need = np.maximum(r[:, None], r[None]) + 0.45 * np.minimum(r[:, None], r[None])
    assert np.all(d >= need - 1e-6)
    # canopy closed: little ground shows
    assert outside_crowns(sc, 1.0).mean() < 0.35


def test_row_crop_rows_and_weeds(scenes):
    sc = scenes["row-crop"]
    a = math.radians(sc.extras["row_angle_deg"])
    sp = sc.extras["row_spacing_m"] / sc.pixel_size_m
    v = -sc.col_px * math.sin(a) + sc.row_px * math.cos(a)
    # plants on rows: the offsets modulo the row spacing are concentrated (circular)
    assert abs(np.mean(np.exp(2j * np.pi * v / sp))) > 0.9
    # weeds: green specks away from the crop, each far smaller than the smallest crop
    green = exg(sc.image) > 0.15
    lab, n = ndimage.label(green & outside_crowns(sc, 1.4))
    areas = np.bincount(lab.ravel())[1:]
    smallest_crop = math.pi / 4 * (sc.diameter_range_m[0] / sc.pixel_size_m) ** 2
    assert n > 20 and np.median(areas) < 0.25 * smallest_crop


def test_coarse_smallest_crown_is_about_four_pixels(scenes):
    sc = make_scene("coarse", 640, 0)
    d_px = sc.diameter_m / sc.pixel_size_m
    assert sc.diameter_range_m[0] / sc.pixel_size_m == pytest.approx(4.0)
    assert 3.9 <= d_px.min() <= 4.3
    assert d_px.max() <= 16.0 + 1e-9


def test_bad_style_or_size_is_a_clear_error():
    with pytest.raises(InputError, match="unknown scene style 'shrubs'; choose one of"):
        make_scene("shrubs")
    with pytest.raises(InputError, match="out of range"):
        make_scene("coarse", 10)


def test_written_scene_reads_back_as_raster_truth_and_plots(tmp_path):
    from ecoscan.io.vector import read_plots, read_points

    sc = make_scene("multispectral", 200, 4)
    paths = write_scene(sc, tmp_path)
    with rasterio.open(paths.raster) as src:
        assert src.descriptions == sc.band_names
        assert src.dtypes[0] == "uint16" and src.crs == CRS.from_user_input(sc.crs)
        assert src.transform == sc.transform
        np.testing.assert_array_equal(src.read(), sc.image)
    truth = read_points(paths.truth)
    np.testing.assert_allclose(truth.x, sc.x_m, atol=5e-4)
    np.testing.assert_allclose(truth.attrs["diameter_m"], sc.diameter_m, atol=5e-4)
    plots = read_plots(paths.plots)
    assert plots.ids == ["train", "test"]
    area = (200 * sc.pixel_size_m) ** 2
    assert plots.plots[0].geometry.area == pytest.approx(0.12 * area, rel=1e-6)
    assert plots.plots[1].geometry.area == pytest.approx(0.88 * area, rel=1e-6)


# --- today's default detector on each style ----------------------------------------------
# F1 >= 0.90 with only --diameter (and --bands) given is the goal of issue 9. Styles where
# the default detector falls short are marked xfail(strict=True): when the detector
# improves, the test passes, xfail turns into a failure, and the mark must be removed.

# Measured with the default detector at 512 px, seed 7 (F1 at 0.5 x smallest diameter);
# causes as diagnosed in docs/detection-history.md ("Why conifer pasture, closed canopy and JPEG
# fail"):
_FAILS: dict[str, str] = {}
# closed-canopy was here (F1 0.899 at this seed: big crowns cut in two, small shaded
# crowns missed); since regions that are one blob at their union's scale are joined
# (December 2026, canopy11) it reaches 0.908 here, though held-out seeds stay near 0.90
# (docs/detection-history.md, "Closed canopy, seventh round").
# jpeg-vignette was here (F1 0.899 at this seed, precision 0.88: grass patches and chroma
# blocks above the raised threshold); since the ring test on rough ground (December 2026)
# it reaches 0.95 and is an ordinary test. conifer-pasture was here (F1 0.81 at this seed:
# dark crowns speckle on the log-chromaticity layer); with smoothed bands and recentred
# points (December 2026) it reaches 0.93 here, though held-out seeds stay below 0.90
# (docs/detection-history.md, "Conifer pasture, fifth round").


def _detect_params():
    out = []
    for s in SCENE_STYLES:
        marks = [pytest.mark.xfail(strict=True, reason=_FAILS[s])] if s in _FAILS else []
        out.append(pytest.param(s, marks=marks))
    return out


@pytest.mark.parametrize("style", _detect_params())
def test_default_detector_f1_per_style(style, tmp_path):
    # a detection counts when within half the smallest stated diameter of a plant
    f1, _res = suite_scene_f1(style, DETECT, 7, tmp_path)
    assert f1 >= 0.90, f"{style}: F1 {f1:.3f}"
