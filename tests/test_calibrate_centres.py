"""The crown-centre route of calibrated detection: target, peak search, detector files.

Peaks are checked against scikit-image's ``peak_local_max`` (an outside reference
implementation of the same local-maximum rule); detection on an invented packed-crown scene
is scored with ``ecoscan validate``'s one-to-one matching (Kuhn 1955) and F1 as in van
Rijsbergen (1979). All scenes are synthetic ground truth.
"""

from __future__ import annotations

import numpy as np
import pytest
from calibrate_helpers import UTM, X0, Y0
from pyproj import CRS
from rasterio.transform import from_origin

from ecoscan.analysis.validation.compute import validate_points
from ecoscan.cli import main
from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.detect.centres import centre_target, find_centres
from ecoscan.detect.detector_file import CalibratedDetector, read_detector, write_detector
from ecoscan.detect.pixel_model import FeatureSpec, pixel_features
from ecoscan.errors import InputError
from ecoscan.model.points import PointSet
from ecoscan.synthetic import place_crowns, write_geotiff

PS = 0.05
BANDS = ("red", "green", "blue")


def _canopy(seed: int, size: int = 240):
    """Packed, overlapping lit domes of one green over dark understorey (uint8 RGB)."""
    rng = np.random.default_rng(seed)
    xy, d = place_crowns((size, size), 400, (16, 30), rng, min_gap=0.8, margin_px=6)
    rr, cc = np.mgrid[0:size, 0:size].astype(np.float32)
    height = np.full((size, size), -1.0, np.float32)
    shade = np.zeros((size, size), np.float32)
    for (x, y), dd in zip(xy, d, strict=True):
        r = dd / 2.0
        z2 = r * r - (cc - x) ** 2 - (rr - y) ** 2
        z = np.sqrt(np.clip(z2, 0, None))
        top = (z2 > 0) & (z > height)
        # Lambert shading of a hemisphere lit from the upper left at 45 degrees
        nx, ny, nz = (cc - x) / r, (rr - y) / r, z / r
        lam = np.clip((-nx - ny) * 0.5 + nz * 0.7071, 0.05, None)
        height[top] = z[top]
        shade[top] = lam[top]
    img = np.empty((3, size, size), np.float32)
    for b, (crown, ground) in enumerate(zip((60, 120, 50), (25, 30, 22), strict=True)):
        img[b] = np.where(height >= 0, crown * (0.35 + 0.8 * shade), ground)
    img += rng.normal(0, 3.0, img.shape)
    return np.clip(img, 0, 255).astype(np.uint8), xy, d


def _regressor(img: np.ndarray, xy: np.ndarray, d: np.ndarray, spec: FeatureSpec):
    from sklearn.ensemble import HistGradientBoostingRegressor
    from threadpoolctl import threadpool_limits

    f = pixel_features(img, BANDS, spec)
    rows, cols = np.mgrid[0 : img.shape[1] : 2, 0 : img.shape[2] : 2]
    y = centre_target(xy, d / 2.0, cols.ravel(), rows.ravel())
    x = f[rows.ravel(), cols.ravel()]
    model = HistGradientBoostingRegressor(max_iter=60, early_stopping=False, random_state=0)
    with threadpool_limits(limits=1):  # OpenMP threads spin on a loaded machine
        return model.fit(x, y)


@pytest.fixture(scope="module")
def centre_detector(tmp_path_factory):
    """A centre-map detector trained on one packed scene, and another scene to detect on."""
    folder = tmp_path_factory.mktemp("centres")
    spec = FeatureSpec(1.0, 8.0, 4, 255.0)
    img, xy, d = _canopy(1)
    model = _regressor(img, xy, d, spec)
    det = CalibratedDetector(
        "centres",
        "centre_map",
        BANDS,
        "uint8",
        PS,
        16 * PS,
        30 * PS,
        0.0,
        0.0,
        0.0,
        centre_features=spec,
        centre_model=model,
        centres={
            "smooth_share": 0.25,
            "distance_share": 0.8,
            "min_peak": 0.3,
            "crown_diameter_m": float(np.median(d) * PS),
        },
        cross_validation={"fold_by": "block", "folds": 4, "f1": 0.9},
    )
    toml = folder / "centres.toml"
    write_detector(toml, det)
    img2, xy2, d2 = _canopy(2)
    raster = write_geotiff(folder / "canopy.tif", img2, from_origin(X0, Y0, PS, PS), UTM)
    truth = PointSet(
        X0 + (xy2[:, 0] + 0.5) * PS, Y0 - (xy2[:, 1] + 0.5) * PS, {}, CRS.from_user_input(UTM)
    )
    return toml, raster, truth, float(d2.min() * PS)


def test_centre_target_is_the_highest_gaussian():
    # each plant contributes exp(-d^2 / (2 s^2)), s = width_share * radius (a Gaussian
    # heat map; common practice in keypoint regression)
    plants = np.array([[10.0, 10.0], [20.0, 10.0]])
    radius = np.array([5.0, 10.0])
    col, row = np.array([14.0, 16.0, 10.0]), np.array([10.0, 10.0, 30.0])
    got = centre_target(plants, radius, col, row, 0.5)
    s = 0.5 * radius
    d = np.hypot(col[:, None] - plants[None, :, 0], row[:, None] - plants[None, :, 1])
    want = np.max(np.exp(-0.5 * (d / s[None, :]) ** 2), axis=1)
    np.testing.assert_allclose(got, want, rtol=1e-6)


def test_peaks_equal_scikit_image_peak_local_max():
    from scipy import ndimage
    from skimage.feature import peak_local_max

    rng = np.random.default_rng(4)
    m = ndimage.gaussian_filter(rng.normal(size=(120, 150)), 3.0)
    radius = 4.0
    yy, xx = np.mgrid[-4:5, -4:5]
    disc = xx * xx + yy * yy <= radius * radius
    want = peak_local_max(m, footprint=disc, threshold_abs=0.0, exclude_border=False)
    got = find_centres(m, radius, 0.0, 0.0)
    rc = np.column_stack([got["row"], got["col"]])
    a = sorted(map(tuple, np.round(rc).astype(int).tolist()))
    b = sorted(map(tuple, want.tolist()))
    assert a == b and len(a) > 20


def test_peaks_in_tiles_equal_the_whole_map():
    from scipy import ndimage

    rng = np.random.default_rng(5)
    m = ndimage.gaussian_filter(rng.normal(size=(100, 160)), 2.5)
    dist, smooth = 5.0, 1.5
    whole = find_centres(m, dist, smooth, 0.02)
    from ecoscan.detect.centres import peak_reach_px

    reach = peak_reach_px(dist, smooth)
    cut = 80
    left = find_centres(m[:, : cut + reach], dist, smooth, 0.02)
    right = find_centres(m[:, cut - reach :], dist, smooth, 0.02, origin=(cut - reach, 0))
    got = np.concatenate(
        [
            np.column_stack([left["col"], left["row"]])[left["col"] < cut - 0.5],
            np.column_stack([right["col"], right["row"]])[right["col"] >= cut - 0.5],
        ]
    )
    want = np.column_stack([whole["col"], whole["row"]])
    key = lambda a: a[np.lexsort((a[:, 1], a[:, 0]))]  # noqa: E731
    np.testing.assert_allclose(key(got), key(want), atol=1e-4)


def test_centre_detector_round_trip_and_detection(centre_detector, tmp_path):
    toml, raster, truth, dmin = centre_detector
    det = read_detector(toml)
    assert det.kind == "centres" and det.layer == "centre_map"
    assert det.centres["distance_share"] == 0.8 and det.centres["min_peak"] == 0.3
    assert "format_version = 3" in toml.read_text()
    again = tmp_path / "again.toml"
    write_detector(again, det)
    assert read_detector(again).centres == det.centres
    # detection on a packed scene the model never saw, scored against its known centres
    # (tolerance: half the smallest crown diameter, common practice)
    res = detect_raster(raster, DetectionSettings(detector=str(toml), tile_size_px=128))
    row = validate_points(res.points, truth, 0.5 * dmin)[-1]
    assert row.f1 >= 0.95, row
    # tiles overlap by the features' and the peak search's reach: same points as one tile
    whole = detect_raster(raster, DetectionSettings(detector=str(toml), tile_size_px=1024))
    np.testing.assert_allclose(np.sort(whole.points.x), np.sort(res.points.x), atol=1e-6)


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda t: t.replace("min_peak = 0.3", "min_peak = nan"), "impossible [centre_peaks]"),
        (lambda t: t.replace("distance_share", "distanc_share"), "lacks [centre_peaks]"),
        (lambda t: t.replace("format_version = 3", "format_version = 4"), "newer"),
        (lambda t: t.replace('layer = "centre_map"', 'layer = "exg"'), "unknown detector"),
        (lambda t: t.replace("pixel_size_m = 0.05", "pixel_size_m = 0.1"), "0.1 m"),
        (lambda t: t.replace('"blue"]', '"blue", "nir"]'), "4 band(s)"),
    ],
)
def test_bad_centre_files_are_refused(centre_detector, tmp_path, capsys, change, words):
    import shutil

    toml, raster, _truth, _d = centre_detector
    dst = tmp_path / toml.name
    shutil.copy(toml, dst)
    det = read_detector(toml, load_model=False)
    shutil.copy(toml.parent / det.model_file, tmp_path / det.model_file)
    dst.write_text(change(dst.read_text()))
    out = tmp_path / "p.csv"
    code = main(["detect", str(raster), "--detector", str(dst), "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert words in err and err.startswith("error:") and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_older_detector_files_still_load(centre_detector, tmp_path):
    # a version-1 file (simple layer, no [crown_split], no [centres]) reads as before
    old = tmp_path / "old.toml"
    old.write_text(
        '[detector]\nformat_version = 1\nkind = "layer"\nlayer = "darkness"\n\n'
        '[raster]\npixel_size_m = 0.05\nband_names = ["red", "green", "blue"]\n'
        'dtype = "uint8"\n\n[blobs]\ndiameter_min_m = 0.6\ndiameter_max_m = 1.8\n'
        "scales_per_octave = 3\nmin_response = 0.5\nmin_value = -200.0\n"
        "background = -120.0\n"
    )
    det = read_detector(old)
    assert det.kind == "layer" and det.centres == {} and det.split == {}
    with pytest.raises(InputError, match="does not exist"):
        read_detector(tmp_path / "missing.toml")


def test_calibrated_on_a_packed_canopy_scores_on_unseen_ground(tmp_path, monkeypatch):
    """``calibrate`` end to end on a small closed canopy (training plot 15 % of the scene),
    scored on the rest against the known centres. Smaller forests and samples than the
    defaults keep the test cheap; the split and the centre map are always tried here."""
    import shapely

    from ecoscan.detect import calibration as cal
    from ecoscan.io.raster import open_raster
    from ecoscan.model.plots import Plot, PlotLayer

    for name, value in {
        "N_TREES": 15,
        "N_TREES_FIRST": 15,
        "N_PLANT_SAMPLES": 1500,
        "N_GROUND_SAMPLES": 2500,
        "N_CENTRE_NEAR": 3000,
        "N_CENTRE_UNIFORM": 1500,
        "CENTRE_ITERATIONS": 40,
        "SPLIT_TRY_BELOW": 1.01,  # always try the crown split and the centre map
    }.items():
        monkeypatch.setattr(cal, name, value)
    size = 300
    img, xy, d = _canopy(3, size)
    raster = write_geotiff(tmp_path / "c.tif", img, from_origin(X0, Y0, PS, PS), UTM)
    crs = CRS.from_user_input(UTM)
    pts = PointSet(X0 + (xy[:, 0] + 0.5) * PS, Y0 - (xy[:, 1] + 0.5) * PS, {}, crs)
    side = np.sqrt(0.15) * size * PS  # 15 % of the scene
    train = shapely.box(X0, Y0 - side, X0 + side, Y0)
    rest = PlotLayer(
        [Plot("rest", shapely.box(X0, Y0 - size * PS, X0 + size * PS, Y0) - train)], crs
    )
    info = open_raster(raster)
    res = cal.calibrate_detector(
        info, pts, PlotLayer([Plot("train", train)], crs), band_names=cal.band_names_for(info)
    )
    names = {s.layer for s in res.scores}
    assert {"probability", "centre_map"} <= names  # both learnt routes were cross-validated
    # every route compared has a detector of its own (benchmarks score each on new ground):
    # the chosen one is the detector itself, each holds its own route's settings and score
    assert set(res.route_detectors) == set(res.routes)
    assert sum(d is res.detector for d in res.route_detectors.values()) == 1
    assert res.route_detectors["probability blobs"].split == {}
    assert res.route_detectors["centre peaks"].kind == "centres"
    if "probability split" in res.routes:
        assert res.route_detectors["probability split"].split["h"] in cal.SPLIT_H_GRID
    for name, one in res.route_detectors.items():
        assert one.cross_validation["f1"] == pytest.approx(res.routes[name].f1, abs=1e-4), name
        write_detector(tmp_path / f"{name.replace(' ', '_')}.toml", one)
        back = read_detector(tmp_path / f"{name.replace(' ', '_')}.toml")
        assert (back.kind, back.split, back.centres) == (one.kind, one.split, one.centres)
    toml = tmp_path / "d.toml"
    write_detector(toml, res.detector)
    back = read_detector(toml)
    assert (back.kind, back.layer, back.split, back.centres) == (
        res.detector.kind,
        res.detector.layer,
        res.detector.split,
        res.detector.centres,
    )
    found = detect_raster(raster, DetectionSettings(detector=str(toml)), plots=rest)
    # tolerance: half the smallest crown diameter (common practice: within the crown)
    row = validate_points(found.points, pts, 0.5 * float(d.min()) * PS, plots=rest)[-1]
    assert row.f1 >= 0.95, row
