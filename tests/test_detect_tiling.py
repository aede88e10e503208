"""Tile plans and the seam rule (exact geometry of pixel windows)."""

import numpy as np

from ecoscan.detect.tiling import in_core, plan_tiles


def _check_plan(w, h, size, overlap, align):
    tiles = plan_tiles(w, h, size, overlap, align=align)
    count = np.zeros((h, w), np.int32)
    for t in tiles:
        c0, r0, c1, r1 = t.core
        count[r0:r1, c0:c1] += 1
        wc0, wr0, wc1, wr1 = t.window
        # windows start on the pyramid grid and reach `overlap` past the core (or the edge)
        assert wc0 % align == 0 and wr0 % align == 0
        assert wc0 <= max(0, c0 - overlap) and wr0 <= max(0, r0 - overlap)
        assert wc1 >= min(w, c1 + overlap) and wr1 >= min(h, r1 + overlap)
        assert 0 <= wc0 and 0 <= wr0 and wc1 <= w and wr1 <= h
    assert np.all(count == 1)


def test_cores_cover_each_pixel_once_and_windows_hold_the_overlap():
    rng = np.random.default_rng(12)
    for _ in range(40):
        _check_plan(
            int(rng.integers(1, 700)),
            int(rng.integers(1, 700)),
            int(rng.integers(16, 300)),
            int(rng.integers(0, 90)),
            int(rng.choice([1, 2, 4, 8])),
        )


def test_every_position_has_exactly_one_owner():
    tiles = plan_tiles(300, 200, 64, 10)
    rng = np.random.default_rng(0)
    col = np.concatenate([rng.uniform(-0.5, 299.49, 5000), np.arange(0, 300, 0.5) - 0.5])
    row = np.concatenate([rng.uniform(-0.5, 199.49, 5000), np.full(600, 63.5)])  # on a seam
    owners = np.sum([in_core(t, col, row) for t in tiles], axis=0)
    assert np.all(owners == 1)
