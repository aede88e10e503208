"""The detector registry and the records tiles pass around (ecoscan.detect.detectors)."""

from __future__ import annotations

import pickle
from dataclasses import dataclass

import numpy as np
import pytest
from detect_helpers import chm_scene
from scipy.ndimage import maximum_filter

from ecoscan.detect import DetectionSettings, choose_method, detect_raster
from ecoscan.detect.chm import crown_areas, tree_tops
from ecoscan.detect.detectors.base import Detector, Prepared, TilePoints
from ecoscan.detect.detectors.registry import (
    automatic,
    detectors,
    get_detector,
    method_names,
    overriding,
)
from ecoscan.detect.settings import method_choices
from ecoscan.detect.tiling import in_core, plan_tiles
from ecoscan.errors import InputError
from ecoscan.io.raster import open_raster


def test_every_detector_module_is_registered_once():
    found = detectors()
    assert set(found) == {"imagery", "chm", "classes", "calibrated"}
    assert all(isinstance(d, Detector) and d.name == k for k, d in found.items())
    # --method offers the detectors chosen by name, in the automatic order
    assert method_names() == ("imagery", "chm", "classes")
    assert method_choices() == ("auto", "imagery", "chm", "classes")
    # the calibrated detector reports the imagery columns and is chosen by its file only
    assert get_detector("calibrated").method == "imagery"
    assert overriding(DetectionSettings()) is None
    assert overriding(DetectionSettings(detector="d.toml")).name == "calibrated"
    with pytest.raises(ValueError, match="no detector"):
        get_detector("lidar")


def test_settings_and_the_cli_take_their_methods_from_the_registry():
    with pytest.raises(InputError, match="use one of auto, imagery, chm, classes"):
        DetectionSettings(method="calibrated")
    from ecoscan.cli import build_parser

    parser = build_parser()
    with pytest.raises(InputError, match="choose from 'auto', 'imagery', 'chm', 'classes'"):
        parser.parse_args(["detect", "a.tif", "-o", "b.csv", "--method", "calibrated"])


def test_automatic_choice_asks_the_detectors_in_order(tmp_path):
    path, _truth = chm_scene(tmp_path, shape=(64, 64))
    info = open_raster(path)
    # one float band: the first detector in the order that fits is the tree-top detector
    assert automatic(info, DetectionSettings()).name == "chm"
    method, bands, index, notes = choose_method(info, DetectionSettings())
    assert (method, bands, index) == ("chm", (1,), None)
    assert "chosen automatically: chm" in notes[0]


def test_tile_points_keep_columns_aligned_through_take_concat_and_core():
    tiles = plan_tiles(200, 100, 100, 10)
    rng = np.random.default_rng(0)
    col, row = rng.uniform(-5, 205, 50), rng.uniform(-5, 105, 50)
    pts = TilePoints(col, row, {"score": np.arange(50.0)}, cut=col > 100)
    core = pts.in_core(tiles[1])
    keep = in_core(tiles[1], col, row)
    np.testing.assert_array_equal(core.col, col[keep])
    np.testing.assert_array_equal(core.columns["score"], np.flatnonzero(keep))
    np.testing.assert_array_equal(core.cut, (col > 100)[keep])
    assert core.tile.dtype == np.int64 and set(core.tile) <= {tiles[1].index}
    both = TilePoints.concat([pts.in_core(t) for t in tiles])
    # every point inside the raster lies in exactly one core
    inside = (col >= -0.5) & (col < 199.5) & (row >= -0.5) & (row < 99.5)
    assert both.n == int(inside.sum())
    assert sorted(both.columns["score"]) == list(np.flatnonzero(inside).astype(float))
    empty = TilePoints.empty(("score",))
    assert empty.n == 0 and empty.tile.dtype == np.int64 and empty.cut.dtype == bool


def test_plans_are_picklable_and_runs_use_them(tmp_path):
    path, truth = chm_scene(tmp_path, shape=(160, 160), n=30)
    info = open_raster(path)
    det = get_detector("chm")
    prepared = det.prepare(info, DetectionSettings(method="chm"), (1,), None, str(path))
    assert pickle.loads(pickle.dumps(prepared.plan)) == prepared.plan
    tiled = detect_raster(path, DetectionSettings(method="chm", tile_size_px=64))
    whole = detect_raster(path, DetectionSettings(method="chm"))
    assert tiled.tiles_total > 1 and whole.tiles_total == 1
    assert tiled.n == whole.n == pytest.approx(truth.n, abs=2)
    np.testing.assert_allclose(np.sort(tiled.points.x), np.sort(whole.points.x))


def test_tree_tops_record_indices_feed_the_crown_areas():
    # two cones of heights 10 m and 6 m: two tops, at the cone centres
    rr, cc = np.mgrid[0:40, 0:60].astype(float)
    h = np.maximum(10 - np.hypot(rr - 20, cc - 15) * 0.8, 6 - np.hypot(rr - 20, cc - 45) * 0.8)
    h = np.clip(h, 0, None).astype(np.float32)
    valid = np.ones(h.shape, bool)
    tops = tree_tops(h, valid, 2.0, lambda x: np.full_like(x, 9.0), 8, origin=(100, 200))
    order = np.argsort(tops.col)
    np.testing.assert_allclose(tops.col[order], [115, 145])
    np.testing.assert_allclose(tops.row[order], [220, 220])
    np.testing.assert_allclose(tops.height[order], [10, 6])
    np.testing.assert_array_equal(tops.array_col[order], [15, 45])
    area = crown_areas(h, h, valid, tops.array_row, tops.array_col, 1.0)
    # cone radius above 1 m: (10-1)/0.8 = 11.25 px and (6-1)/0.8 = 6.25 px; area ~ pi r^2
    np.testing.assert_allclose(area[order], np.pi * np.array([11.25, 6.25]) ** 2, rtol=0.1)


@dataclass(frozen=True)
class _PeakPlan:
    bands: tuple[int, ...]
    floor: float
    reach_px: int


class _PeakDetector(Detector):
    """A detector written only here: local maxima above a floor, with a column of its own."""

    name = "peaks"
    method = "peaks"

    def prepare(self, info, settings, bands, index, source):
        plan = _PeakPlan(bands, floor=2.0, reach_px=6)
        return Prepared(plan, overlap=8, align=1, thresholds={"floor": 2.0}, notes=[])

    def run(self, window, plan):
        img = window.pop_data()[0]
        peak = (img == maximum_filter(img, size=2 * plan.reach_px + 1)) & (img > plan.floor)
        rows, cols = np.nonzero(peak & window.valid)
        c0, r0 = window.origin
        return TilePoints(cols + float(c0), rows + float(r0), {"peak_m": img[rows, cols]})

    def empty_tile(self, plan):
        return TilePoints.empty(("peak_m",))

    def finish(self, points, plan):
        return points, {"peak_m": points.columns["peak_m"], "score": points.columns["peak_m"]}, []


def test_a_detector_added_in_one_place_runs_and_writes_its_own_column(tmp_path, monkeypatch):
    # issue 14: "adding a detector touches one file": register one object, nothing else
    path, truth = chm_scene(tmp_path, shape=(120, 120), n=12)
    monkeypatch.setitem(detectors(), "peaks", _PeakDetector())
    assert "peaks" in method_choices()
    res = detect_raster(
        path, DetectionSettings(method="peaks", diameter_min_m=3.0, diameter_max_m=8.5)
    )
    assert res.method == "peaks"
    # the usual columns first, then the detector's own, then the tile (detect.output_order)
    assert list(res.points.attrs) == ["score", "peak_m", "tile"]
    # every true tree top is a local maximum of the height model above 2 m: one point each
    # (exact construction of the synthetic height model, tops well apart)
    d = np.hypot(res.points.x[:, None] - truth.x[None], res.points.y[:, None] - truth.y[None])
    assert np.sum(d.min(axis=0) < 0.5) >= 0.9 * truth.n
    assert np.allclose(res.points.attrs["peak_m"], res.points.attrs["score"])
