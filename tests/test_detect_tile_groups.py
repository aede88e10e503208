"""Neighbouring tiles read as one window (ecoscan.detect.tiling.group_tiles): the same plants,
columns and order as one job per tile.

Reference: the seam rule of a tiled detection (each plant belongs to the tile whose core
holds its centre; the overlap covers every step's reach), so a plant in a core does not
depend on how far the read window reaches beyond the overlap: common practice in tiled
raster processing, and the property the tiling tests (tests/test_detect_tiling.py) check
against whole-image runs.
"""

from __future__ import annotations

import numpy as np
import pytest

from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.detect.detectors.blob import ImageryDetector
from ecoscan.detect.engine import TileJob, run_tile, tile_jobs
from ecoscan.detect.tiling import group_tiles, group_window, plan_tiles, run_plan


def test_groups_join_side_by_side_tiles_of_one_row_within_the_budget():
    plan = plan_tiles(5000, 2000, 1000, 100)  # two rows of five tiles
    groups = group_tiles(plan, max_pixels=3_500_000)
    # 3 tiles: window 3100 x 1100 = 3.41 M px fits; 4 would be 4100 x 1100 = 4.51 M
    assert [[t.index for t in g] for g in groups] == [[0, 1, 2], [3, 4], [5, 6, 7], [8, 9]]
    # one after the other, the groups are the plan (its order kept)
    assert [t for g in groups for t in g] == plan
    assert [[t.index for t in g] for g in group_tiles(plan, most=2)][:3] == [[0, 1], [2, 3], [4]]


def test_groups_never_join_tiles_that_are_not_neighbours():
    plan = plan_tiles(4000, 2000, 1000, 100)
    chosen = [plan[i] for i in (0, 2, 3, 4, 5)]  # tile 1 left out (no plot there)
    groups = group_tiles(chosen, max_pixels=10_000_000)
    # 0 and 2 are not neighbours; 3 ends row 0 and 4 starts row 1
    assert [[t.index for t in g] for g in groups] == [[0], [2, 3], [4, 5]]


def test_group_window_holds_every_member_window_and_core():
    plan = plan_tiles(3072, 3072, 1024, 96, align=16)
    big = group_window(plan[3:5])
    assert big.index == 3
    assert big.core == (0, 1024, 2048, 2048)
    assert big.window == (0, 928, 2144, 2144)
    for t in plan[3:5]:
        assert big.window[0] <= t.window[0] and big.window[2] >= t.window[2]
        assert big.window[1] == t.window[1] and big.window[3] == t.window[3]
    assert big.window[0] % 16 == 0 and big.window[1] % 16 == 0


@pytest.mark.parametrize("style", ["dry-shrubs", "rocky-shrubland", "jpeg-vignette"])
def test_grouped_tiles_give_the_same_table_as_one_job_per_tile(style, tmp_path, monkeypatch):
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene(style, 768, 7)
    raster = write_scene(sc, tmp_path).raster
    lo, hi = sc.diameter_range_m
    settings = DetectionSettings(
        diameter_min_m=lo, diameter_max_m=hi, bands=sc.bands_option, tile_size_px=192
    )
    grouped = detect_raster(raster, settings)
    # the same run with one job per tile
    monkeypatch.setattr(ImageryDetector, "reads_together", lambda self, plan: False)
    single = detect_raster(raster, settings)
    assert grouped.n > 20
    assert grouped.tiles_read == single.tiles_read == 16
    assert grouped.megapixels_read < single.megapixels_read  # the overlaps read once
    np.testing.assert_array_equal(grouped.points.xy, single.points.xy)
    assert list(grouped.points.attrs) == list(single.points.attrs)
    for k, v in single.points.attrs.items():
        np.testing.assert_array_equal(grouped.points.attrs[k], v, err_msg=k)
    assert grouped.thresholds == single.thresholds
    assert [str(n) for n in grouped.notes] == [str(n) for n in single.notes]


def test_group_jobs_run_on_workers_in_any_order_return_the_plan_order(tmp_path):
    """Costliest first on worker processes; results in the jobs' order, as in-process."""
    from ecoscan.detect import _prepare
    from ecoscan.io.raster import open_raster
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene("dry-shrubs", 640, 0)
    raster = write_scene(sc, tmp_path).raster
    lo, hi = sc.diameter_range_m
    s = DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, tile_size_px=160)
    info = open_raster(raster)
    detector, prep = _prepare(raster, info, s, [])
    tiles = plan_tiles(info.width, info.height, 160, prep.overlap, align=prep.align)
    jobs = tile_jobs(info, tiles, prep.plan, detector)
    assert len(jobs) < len(tiles)
    assert [t.index for j in jobs for t in (j.members or (j.tile,))] == list(range(len(tiles)))
    # memory follows the tile size: no job reads more than twice the largest tile window
    assert max(j.tile.pixels for j in jobs) <= 2 * max(t.pixels for t in tiles)
    here = [run_tile(j) for j in jobs]
    there = run_plan(run_tile, jobs, workers=2, cost=lambda j: j.tile.pixels)
    for a, b in zip(here, there, strict=True):
        np.testing.assert_array_equal(a.col, b.col)
        np.testing.assert_array_equal(a.tile, b.tile)
    # one job per tile gives the same rows, tile by tile
    per_tile = [run_tile(TileJob(info, t, prep.plan, detector.name)) for t in tiles]
    for k in ("col", "row", "tile"):
        np.testing.assert_array_equal(
            np.concatenate([getattr(p, k) for p in per_tile]),
            np.concatenate([getattr(p, k) for p in here]),
        )
