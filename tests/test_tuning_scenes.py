"""The detector's tuning scenes (benchmarks/tuning_scenes.py) show the phenomena they are
meant to reproduce, kept apart from the evaluation suite (invented scenes, truth known)."""

import numpy as np
import pytest

from benchmarks import tuning_scenes as ts

SIZE = 240


def _near_crowns(xy, d, shape, factor):
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    near = np.zeros(shape, bool)
    for (cx, cy), dd in zip(xy, d, strict=True):
        near |= np.hypot(xx - cx, yy - cy) <= factor * dd / 2
    return near


@pytest.mark.parametrize("style", ["conifers", "stand", "jpeg"])
def test_same_seed_same_scene(style):
    a, xa, _ = ts.make_tuning_scene(style, 100, SIZE)
    b, xb, _ = ts.make_tuning_scene(style, 100, SIZE)
    c, _, _ = ts.make_tuning_scene(style, 101, SIZE)
    assert a.tobytes() == b.tobytes() and np.array_equal(xa, xb)
    assert a.tobytes() != c.tobytes()


def test_stand_crowns_overlap_but_centres_stay_outside_each_other():
    _img, xy, d = ts.make_tuning_scene("stand", 100, SIZE)
    r = d / 2
    dist = np.hypot(*(xy[:, None] - xy[None]).transpose(2, 0, 1))
    np.fill_diagonal(dist, np.inf)
    need = np.maximum(r[:, None], r[None]) + 0.5 * np.minimum(r[:, None], r[None])
    assert np.all(dist >= need - 1e-9)
    assert (dist < r[:, None] + r[None]).any(axis=1).mean() > 0.5  # most crowns overlap one
    assert r.max() / r.min() > 2.5  # sizes differ widely


def test_conifers_are_dark_and_rough_on_smoother_pasture():
    img, xy, d = ts.make_tuning_scene("conifers", 100, SIZE)
    bright = img.astype(float).sum(axis=0)
    inner = _near_crowns(xy, d, bright.shape, 0.6)
    ground = ~_near_crowns(xy, d, bright.shape, 2.5)
    assert np.median(bright[inner]) < 0.5 * np.median(bright[ground])
    # relative (log) texture: pixel-to-pixel steps of log brightness
    lg = np.log(bright + 1.0)
    step = np.abs(np.diff(lg, axis=1))
    assert np.median(step[inner[:, 1:]]) > 2.0 * np.median(step[ground[:, 1:]])


def test_jpeg_scene_is_block_coded():
    img, _xy, _d = ts.make_tuning_scene("jpeg", 100, SIZE)
    assert img.dtype == np.uint8 and img.shape[0] == 3
    # mean column step across 8x8 block borders over the mean step elsewhere: above 1 after
    # block DCT coding (common JPEG blockiness measure; from memory, after Wang, Bovik &
    # Evans 2000)
    g = np.abs(np.diff(img[1].astype(float), axis=1))
    border = (np.arange(g.shape[1]) % 8) == 7
    assert g[:, border].mean() / g[:, ~border].mean() > 1.05


def test_only_tuning_seeds_are_accepted():
    with pytest.raises(SystemExit):
        ts.main(["--styles", "mixed", "--seeds", "31"])


def test_pines_shadows_are_nearly_as_dark_as_crowns_but_smooth():
    """``pines``: long cast shadows of almost the crowns' brightness, told apart only by
    texture (the phenomenon of dark conifers on pasture)."""
    img, xy, d = ts.make_tuning_scene("pines", 100, 320)
    a, xa, _ = ts.make_tuning_scene("pines", 100, 320)
    assert a.tobytes() == img.tobytes() and np.array_equal(xa, xy)
    bright = img.astype(float).mean(axis=0)
    inner = _near_crowns(xy, d, bright.shape, 0.6)
    ring = _near_crowns(xy, d, bright.shape, 3.5) & ~_near_crowns(xy, d, bright.shape, 1.2)
    ground = ~_near_crowns(xy, d, bright.shape, 5.0)
    shadow = ring & (bright < 0.6 * np.median(bright[ground]))  # the dark part near a tree
    assert shadow.sum() > 0.5 * inner.sum()  # shadows are long: as large as crown cores
    assert np.median(bright[shadow]) < 1.5 * np.median(bright[inner])
    lg = np.log(bright + 1.0)
    step = np.abs(np.diff(lg, axis=1))
    assert np.median(step[inner[:, 1:]]) > 1.5 * np.median(step[shadow[:, 1:]])
