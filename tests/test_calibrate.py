"""``ecoscan calibrate``: learning a detector from mapped plants, detector files, refusals.

Scenes are invented (tests/calibrate_helpers.py): dark conifers on green pasture, where the
default Excess Green layer does not separate plants from ground. Accuracy is scored with
the one-to-one optimal matching of ``ecoscan validate`` (Kuhn 1955) on ground the detector
never saw, and precision/recall/F1 follow van Rijsbergen (1979).
"""

from __future__ import annotations

import contextlib
import io
import shutil

import numpy as np
import pytest
import shapely
from calibrate_helpers import UTM, X0, Y0, scene_files
from pyproj import CRS

from ecoscan.analysis.validation.compute import validate_points
from ecoscan.cli import main
from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.detect.calibration import fold_blocks
from ecoscan.detect.detector_file import read_detector
from ecoscan.errors import InputError
from ecoscan.io.vector import read_plots, read_points, write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.survey.config import load_survey


@pytest.fixture(scope="module")
def conifer(tmp_path_factory):
    """A calibrated detector for the conifer scene, made once through the CLI."""
    folder = tmp_path_factory.mktemp("conifer")
    f = scene_files(folder, "conifer")
    out = folder / "detector.toml"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed), contextlib.redirect_stderr(printed):
        code = main(
            [
                "calibrate",
                str(f["raster"]),
                str(f["truth"]),
                "--plots",
                str(f["train"]),
                "-o",
                str(out),
            ]
        )
    assert code == 0
    f["printed"] = printed.getvalue()
    return f, out


def test_one_training_plot_is_printed_with_its_caution(conifer):
    # a plot in one corner does not show all the ground: the user is told to check the
    # detector on a second plot (common practice: validate on independent ground)
    f, _ = conifer
    assert "note: one training plot: its cross-validated F1 is a guide" in f["printed"]
    assert "ecoscan validate" in f["printed"]
    assert "cross-validated accuracy of each layer (4 folds by block" in f["printed"]


def test_calibrated_detector_scores_on_unseen_ground(conifer):
    f, out = conifer
    det = read_detector(out)
    # cross-validation ran by spatial block of the single training plot
    assert det.cross_validation["fold_by"] == "block"
    assert det.cross_validation["folds"] == 4
    # Excess Green cannot separate dark-green crowns from green pasture (the scene's design)
    cands = {c["layer"]: c["f1"] for c in det.candidates}
    assert cands["exg"] < 0.8
    assert det.cross_validation["f1"] >= 0.9
    test = read_plots(f["test"])
    res = detect_raster(f["raster"], DetectionSettings(detector=str(out)), plots=test)
    truth = f["truth_points"]
    # tolerance: half the smallest crown diameter (common practice: within the crown)
    row = validate_points(res.points, truth, 0.5 * f["diameter_m"][0], plots=test)[-1]
    assert row.f1 >= 0.95, row
    # the default detector on the same ground does clearly worse (why calibrate exists)
    default = detect_raster(
        f["raster"], DetectionSettings(diameter_min_m=0.6, diameter_max_m=1.8), plots=test
    )
    row0 = validate_points(default.points, truth, 0.5 * f["diameter_m"][0], plots=test)[-1]
    assert row0.f1 < row.f1


def test_detector_file_round_trip(conifer, tmp_path):
    _f, out = conifer
    det = read_detector(out)
    assert det.band_names == ("red", "green", "blue")
    assert det.dtype == "uint8"
    assert det.pixel_size_m == pytest.approx(0.05)
    assert 0 < det.diameter_min_m < det.diameter_max_m
    assert det.training["plants"] >= 20
    assert len(det.training["raster_sha256"]) == 64
    # write it again from what was read: same settings come back
    from ecoscan.detect.detector_file import write_detector

    again = tmp_path / "again.toml"
    write_detector(again, det)
    det2 = read_detector(again)
    for key in ("kind", "layer", "band_names", "min_response", "min_value", "background"):
        assert getattr(det2, key) == getattr(det, key)
    assert det2.cross_validation["f1"] == det.cross_validation["f1"]


def _copy_detector(out, tmp_path):
    det = read_detector(out, load_model=False)
    dst = tmp_path / "d.toml"
    shutil.copy(out, dst)
    if det.model_file:
        shutil.copy(out.parent / det.model_file, tmp_path / det.model_file)
    return dst, det


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda t: "this is [not toml", "not valid TOML"),
        (lambda t: t.replace("min_response", "min_respons"), "lacks [blobs] min_response"),
        (lambda t: t.replace("pixel_size_m = 0.05", "pixel_size_m = 0.1"), "0.1 m"),
        (lambda t: t.replace('"blue"]', '"blue", "nir"]'), "4 band(s)"),
    ],
)
def test_bad_detector_files_are_refused(conifer, tmp_path, capsys, change, words):
    f, out = conifer
    dst, _det = _copy_detector(out, tmp_path)
    dst.write_text(change(dst.read_text()))
    pts = tmp_path / "p.csv"
    code = main(["detect", str(f["raster"]), "--detector", str(dst), "-o", str(pts)])
    err = capsys.readouterr().err
    assert code == 2
    assert words in err and err.startswith("error:") and len(err.strip().splitlines()) == 1
    assert not pts.exists()


def test_model_file_missing_or_changed_is_refused(conifer, tmp_path, capsys):
    _f, out = conifer
    dst, det = _copy_detector(out, tmp_path)
    if det.kind != "classifier":
        pytest.skip("the conifer scene chose a simple layer: no model file to check")
    model = tmp_path / det.model_file
    with open(model, "ab") as fh:
        fh.write(b"x")
    with pytest.raises(InputError, match="SHA-256"):
        read_detector(dst)
    model.unlink()
    with pytest.raises(InputError, match="missing"):
        read_detector(dst)


def _run_calibrate(tmp_path, raster, ref, plots):
    out = tmp_path / "det.toml"
    code = main(["calibrate", str(raster), str(ref), "--plots", str(plots), "-o", str(out)])
    return code, out


def test_refusals(conifer, tmp_path, capsys):
    f, _out = conifer
    crs = CRS.from_user_input(UTM)
    # reference points with none inside the training plot
    pts = read_points(f["truth"])
    far = write_points(PointSet(pts.x + 1000.0, pts.y, {}, crs), tmp_path / "far.csv")
    code, out = _run_calibrate(tmp_path, f["raster"], far, f["train"])
    err = capsys.readouterr().err
    assert code == 2 and "no point of" in err and not out.exists()
    # training plot outside the raster
    off = write_plots(
        PlotLayer([Plot("off", shapely.box(X0 - 50, Y0 - 10, X0 - 40, Y0))], crs),
        tmp_path / "off.gpkg",
    )
    code, out = _run_calibrate(tmp_path, f["raster"], f["truth"], off)
    err = capsys.readouterr().err
    assert code == 2 and "lies outside" in err and not out.exists()
    # fewer than 20 mapped plants
    few = write_points(pts.subset(np.arange(pts.n) < 8), tmp_path / "few.csv")
    code, out = _run_calibrate(tmp_path, f["raster"], few, f["train"])
    err = capsys.readouterr().err
    assert code == 2 and "at least 20" in err and not out.exists()
    assert err.startswith("error:") and len(err.strip().splitlines()) == 1


def test_folds_are_spatial_blocks():
    # a square plot is cut into four quadrants; membership depends only on position, so
    # neighbouring pixels (strongly correlated: Roberts et al. 2017, Ecography 40: 913)
    # never straddle training and held-out data except along the block edges
    rng = np.random.default_rng(0)
    col, row = rng.uniform(0, 100, 500), rng.uniform(0, 100, 500)
    f = fold_blocks((0, 0, 100, 100), col, row)
    expect = 2 * (row >= 50) + (col >= 50)
    assert np.array_equal(f, expect)
    # a long strip is cut along its length
    f = fold_blocks((0, 0, 400, 50), np.array([10, 110, 210, 390]), np.array([5, 5, 5, 5]))
    assert f.tolist() == [0, 1, 2, 3]


def test_survey_takes_detector_relative_to_survey_file(conifer, tmp_path):
    f, out = conifer
    dst, _det = _copy_detector(out, tmp_path)
    plots = shutil.copy(f["test"], tmp_path / "plots.gpkg")
    raster = shutil.copy(f["raster"], tmp_path / "r.tif")
    survey = tmp_path / "survey.toml"
    survey.write_text(
        f'[survey]\nplots = "{plots.name}"\n\n[[raster]]\npath = "{raster.name}"\n'
        f'[raster.detect]\ndetector = "{dst.name}"\n'
    )
    cfg = load_survey(survey)
    assert cfg.rasters[0].detect["detector"] == str(dst.resolve())
    # a damaged detector file is reported when the survey file is read, before any work
    dst.write_text("[detector]\nformat_version = 1\n")
    with pytest.raises(InputError, match="lacks"):
        load_survey(survey)


def test_survey_cache_key_follows_detector_file(conifer, tmp_path):
    import dataclasses

    from ecoscan.survey.cache import file_sha256
    from ecoscan.survey.config import RasterEntry
    from ecoscan.survey.detections import cache_key
    from ecoscan.survey.manifest import InputFile, RasterInput

    f, out = conifer
    dst, _det = _copy_detector(out, tmp_path)
    entry = RasterEntry(f["raster"], "r", "site", "", {"detector": str(dst)}, 0)
    item = RasterInput(entry, None, InputFile("raster", f["raster"], 1, "a" * 64), None, None, [])
    keys = []
    for _ in range(2):
        # the manifest hashes the detector file once per run; the key follows that hash
        keys.append(cache_key(dataclasses.replace(item, detector_sha256=file_sha256(dst)), "p"))
        dst.write_text(dst.read_text() + "\n# edited\n")
    assert keys[0] != keys[1]
