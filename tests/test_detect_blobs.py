"""Multi-scale blob detection: scale selection, response level and pruning."""

import math

import numpy as np
import pytest
from skimage.feature import blob_log

from ecoscan.detect.blobs import DISC_RESPONSE, blob_scales, detect_blobs, prune_blobs


def _gaussian_blob(shape, cx, cy, s, amp=1.0):
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    return (amp * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * s * s))).astype(np.float32)


def _disc(shape, cx, cy, r, amp=1.0, aa=True):
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    d = np.hypot(xx - cx, yy - cy)
    return (amp * np.clip(r - d + 0.5, 0, 1)).astype(np.float32)


@pytest.mark.parametrize("s", [3.0, 6.0, 11.0])
def test_gaussian_blob_selects_its_own_sigma(s):
    # Lindeberg (1998), IJCV 30: 79-116: for a Gaussian blob of standard deviation s the
    # scale-normalised Laplacian -sigma^2 lap L at the centre is 2 A sigma^2 s^2/(s^2+sigma^2)^2,
    # largest at sigma = s with value A/2. On the coarse pyramid levels (sigma of about one
    # pixel there) the discrete response runs up to ~10 % low; the scale stays within 8 %.
    img = _gaussian_blob((160, 160), 80.3, 79.6, s)
    sc = blob_scales(0.6 * s * math.sqrt(2), 1.6 * s * math.sqrt(2), scales_per_octave=4)
    b = detect_blobs(img, sc, min_response=0.1, min_value=-1)
    i = int(np.argmax(b["response"]))
    assert b["sigma"][i] == pytest.approx(s, rel=0.08)
    assert b["response"][i] == pytest.approx(0.5, rel=0.12)
    assert b["col"][i] == pytest.approx(80.3, abs=0.35)
    assert b["row"][i] == pytest.approx(79.6, abs=0.35)


@pytest.mark.parametrize("r", [5.0, 9.0, 16.0])
def test_disc_radius_is_sqrt2_sigma(r):
    # Lindeberg (1998): a flat disc of radius r responds most at sigma = r / sqrt(2), with
    # normalised response 2C/e for contrast C (derived from L(0; sigma) = C(1 - exp(-r^2/2sigma^2)))
    img = _disc((200, 200), 100.0, 100.0, r, amp=0.8)
    sc = blob_scales(0.5 * r, 2.0 * r, scales_per_octave=4)
    b = detect_blobs(img, sc, min_response=0.05, min_value=-1)
    i = int(np.argmax(b["response"]))
    assert math.sqrt(2) * b["sigma"][i] == pytest.approx(r, rel=0.1)
    assert b["response"][i] == pytest.approx(0.8 * DISC_RESPONSE, rel=0.1)


def test_matches_scikit_image_blob_log_on_separate_blobs():
    # Reference library: skimage.feature.blob_log on the same image finds the same blobs
    # (positions within 1.5 px, radius sqrt(2) sigma within 20 %).
    rng = np.random.default_rng(5)
    img = np.zeros((300, 300), np.float32)
    centres = [(50, 60, 6), (150, 70, 10), (240, 60, 14), (70, 200, 8), (200, 210, 12)]
    for cx, cy, r in centres:
        img += _disc(img.shape, cx, cy, r, amp=0.6)
    img += rng.normal(0, 0.02, img.shape).astype(np.float32)
    ours = detect_blobs(img, blob_scales(4, 18, 4), min_response=0.2, min_value=0.1)
    keep = prune_blobs(ours["col"], ours["row"], math.sqrt(2) * ours["sigma"], ours["response"])
    ref = blob_log(
        img, min_sigma=4 / math.sqrt(2), max_sigma=18 / math.sqrt(2), num_sigma=12, threshold=0.1
    )
    assert keep.sum() == len(centres) == ref.shape[0]
    oxy = np.column_stack([ours["col"][keep], ours["row"][keep]])
    for y, x, s in ref:
        d = np.hypot(oxy[:, 0] - x, oxy[:, 1] - y)
        j = int(np.argmin(d))
        assert d[j] < 1.5
        assert math.sqrt(2) * ours["sigma"][keep][j] == pytest.approx(math.sqrt(2) * s, rel=0.2)


def _greedy_reference(x, y, r, s):
    order = np.lexsort((r, x, y, -s))
    keep = np.zeros(x.size, bool)
    dead = np.zeros(x.size, bool)
    for i in order:
        if dead[i]:
            continue
        keep[i] = True
        d = np.hypot(x - x[i], y - y[i])
        dead |= d < np.maximum(r, r[i])
    return keep


def test_prune_equals_plain_greedy_suppression():
    # Reference: the textbook greedy non-maximum suppression written as a plain loop.
    rng = np.random.default_rng(11)
    for _ in range(20):
        n = 300
        x, y = rng.uniform(0, 100, n), rng.uniform(0, 100, n)
        r = rng.uniform(1, 6, n)
        s = rng.integers(0, 30, n).astype(float)  # many ties, to exercise the tie-break
        assert np.array_equal(prune_blobs(x, y, r, s), _greedy_reference(x, y, r, s))


def test_candidates_are_local_so_windows_agree():
    # Exactness of the seam rule: candidates found in a window equal those of the whole
    # image inside the window's interior (window start aligned to the pyramid).
    rng = np.random.default_rng(8)
    img = rng.normal(0, 0.05, (640, 640)).astype(np.float32)
    for _ in range(150):
        img += _disc(img.shape, *rng.uniform(20, 620, 2), rng.uniform(4, 14), amp=0.5)
    sc = blob_scales(4, 16, 3)
    whole = detect_blobs(img, sc, 0.1, 0.0)
    a = sc.align
    c0, r0 = (96 // a) * a, (128 // a) * a
    size = 384
    win = detect_blobs(img[r0 : r0 + size, c0 : c0 + size], sc, 0.1, 0.0, origin=(c0, r0))
    m = sc.support_px

    def inner(b, oc, orow):
        c, r = b["col"] + oc, b["row"] + orow
        sel = (c >= c0 + m) & (c < c0 + size - m) & (r >= r0 + m) & (r < r0 + size - m)
        return np.column_stack([c[sel], r[sel], b["sigma"][sel], b["response"][sel]])

    w1 = inner(whole, 0, 0)
    w2 = inner(win, 0, 0)
    w1 = w1[np.lexsort(w1.T[::-1])]
    w2 = w2[np.lexsort(w2.T[::-1])]
    assert w1.shape[0] > 10
    np.testing.assert_array_equal(w1, w2)
