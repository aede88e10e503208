"""Small crowns whose blob peaks one scale below the searched range (isolated crowns only).

A blurred small crown is Gaussian-like, and a Gaussian blob of standard deviation s peaks in
the scale-normalised Laplacian at σ = s (Lindeberg 1998, IJCV 30: 79–116), below the
σ = r/√2 of a flat disc of the same radius. On soft imagery (JPEG blocks and vignetting,
coarse pixels) the smallest stated crowns therefore peak at the scale just below the
smallest searched one, and a strict maximum over the searched scales never finds them
(docs/detection-history.md, "Searched with one more scale below").

Searching the whole pyramid one scale lower would also split medium crowns into lobe
points (the touching-crown split) and add ground points. Here the extra scale is searched
apart, and its maxima are used in one way only: as *isolated small crowns*. A maximum at the
extra scale

* must be clearly stronger than its own scale's noise: :data:`CLEARNESS` times the
  smallest stated scale's threshold raised by the white-noise rise of the response spread
  and the density rise of the response threshold (:func:`extra_threshold`), and
  :data:`CLEARNESS` times the centre-value excess of the main search; and it must pass
  the ring test (the plan's figure, or the rough-ground one where the plan has none:
  textured ground such as NDVI mottling peaks at this scale too);
* never enters the touching-crown split or the pruning of the main blobs;
* is kept only when no kept crown overlaps it (:func:`isolated`), and only in an image
  where such isolated blobs are common (:data:`MIN_ISOLATED_SHARE` of the extra scale's
  blobs);
* is reported with the smallest stated diameter (the range the user gave is respected).

The rule runs with the image-chosen defaults of the blob detector only (not with set
thresholds, calibrated detectors, closed canopy, shadow-joined or log-chromaticity layers).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.spatial import cKDTree

from ecoscan.detect.blobs import (
    BlobScales,
    detect_blobs,
    prune_blobs,
    response_spread,
    ring_reach_px,
)

__all__ = [
    "BELOW",
    "CLEARNESS",
    "MIN_ISOLATED_SHARE",
    "BelowRange",
    "below_scales",
    "extra_threshold",
    "find_below",
    "isolated",
    "plan_below",
]

#: Column marking the blobs of the extra scale in the tile tables.
BELOW = "below_range"

#: How much clearer than the stated scales a blob at the extra scale must be: its response
#: this many times the extrapolated threshold (:func:`extra_threshold`), and its smoothed
#: centre value this many times as far above the background as the centre-value test of
#: the main search asks. Measured on the diagnosis seeds of docs/detection-history.md: on JPEG
#: ground, whose 8-pixel compression blocks peak at about the extra scale, false maxima
#: reach 1.0-2.9 times the extrapolated threshold, true small crowns 2.0-15.
CLEARNESS = 2.0

#: The extra scale adds crowns only where at least this share of its blobs (over the whole
#: raster) is isolated. Where crowns peak inside the stated range, blobs at the scale below
#: sit almost all on kept crowns (their lobes and fine structure), and the rare isolated
#: one is a weed or a lobe of a missed large crown; where small soft crowns peak below the
#: range, a good share of them is isolated. Pooled over the diagnosis seeds
#: (docs/detection-history.md): row crop 0.4 %, rocky shrubland 1.6 %, dry shrubs 4 % against
#: JPEG 12 %, coarse and multispectral 26 %.
MIN_ISOLATED_SHARE = 0.05


@dataclass(frozen=True)
class BelowRange:
    """The extra scale searched below the stated range.

    Attributes
    ----------
    scales : BlobScales
        Three scales: the extra one in the middle, with its neighbours below and above
        (the one above is the smallest stated scale).
    min_response : float
        Response threshold at the extra scale.
    min_value : float
        Lowest smoothed centre value at the extra scale.
    ring_mads : float
        Ring test of the extra scale's blobs (:func:`ecoscan.detect.blobs.ring_contrast`):
        the plan's where it has one, else the rough-ground figure
        (``ecoscan.detect.autotune.RING_MADS``).
    sigma_reported : float
        σ (pixels) reported for the crowns found: the smallest stated scale.
    """

    scales: BlobScales
    min_response: float
    min_value: float
    ring_mads: float
    sigma_reported: float


def below_scales(scales: BlobScales, base: float = 1.0) -> BlobScales:
    """The extra scale one step below the smallest searched one, with its two neighbours.

    All three are computed on the pyramid level of the extra scale (where its σ is between
    ``base`` and ``2 * base`` level pixels, as in :func:`ecoscan.detect.blobs.blob_scales`).

    Examples
    --------
    >>> from ecoscan.detect.blobs import blob_scales
    >>> sc = blob_scales(6.25, 20.0)
    >>> b = below_scales(sc)
    >>> bool(np.isclose(b.sigmas[2], sc.sigmas[1])), bool(np.isclose(b.sigmas[1], sc.sigmas[0]))
    (True, True)
    """
    k = scales.k
    s1 = float(scales.sigmas[1])
    sig = s1 * k ** np.arange(-2.0, 1.0)
    lev = max(0, math.floor(math.log2(sig[1] / base) + 1e-9))
    return BlobScales(sig, np.full(3, lev, dtype=int), k)


def extra_threshold(scales: BlobScales, min_response_by_scale) -> float:
    """Response threshold at the scale below the range, from the smallest stated scale's.

    The threshold at the smallest searched scale is ``mads(σ) × spread(σ) × raise``
    (:mod:`ecoscan.detect.autotune`). One step lower, the spread of textured ground rises at
    most as fast as that of white noise (texture is correlated, so its response falls more
    slowly with scale; the same reasoning as autotune's ``_fill_scales``), and the
    ``mads`` factor rises as in ``autotune.response_mads``. Both rises are applied, so the
    threshold errs on the high side.

    Examples
    --------
    >>> from ecoscan.detect.blobs import blob_scales
    >>> sc = blob_scales(6.25, 20.0)
    >>> t = extra_threshold(sc, [1.0] * sc.sigmas.size)
    >>> bool(1.2 < t < 1.5)
    True
    """
    from ecoscan.detect.autotune import response_mads

    below = below_scales(scales)
    noise = np.random.default_rng(12345).standard_normal((256, 256)).astype(np.float32)
    ones = np.ones(noise.shape, bool)
    white = response_spread(noise, below, ones)[1] / response_spread(noise, scales, ones)[1]
    both = BlobScales(np.array([below.sigmas[1], scales.sigmas[1]]), np.zeros(2, int), 1.0)
    mads = response_mads(both)
    return float(min_response_by_scale[1]) * float(white) * float(mads[0] / mads[1])


def plan_below(auto: tuple) -> tuple:
    """Add the extra scale to an image-chosen blob plan, and say so in the metadata.

    Parameters
    ----------
    auto : tuple
        ``(plan, overlap, align, thresholds, notes)`` of the imagery detector's automatic
        choice.

    Returns
    -------
    tuple
        The same, with ``plan.below`` set, the overlap widened to the extra scale's ring
        and the rule recorded; plans the rule does not apply to unchanged.

    Examples
    --------
    >>> from ecoscan.detect.blobs import blob_scales
    >>> from ecoscan.detect.detectors.blob import BlobPlan
    >>> sc = blob_scales(6.25, 20.0)
    >>> plan = BlobPlan((1, 2, 3), 0.04, scales=sc, min_value=0.1, fill_value=0.0,
    ...                 min_response_by_scale=tuple([0.02] * sc.sigmas.size))
    >>> new, overlap, align, th, notes = plan_below((plan, 10, 4, {}, []))
    >>> round(th["below_range_sigma_px"], 2), new.below.min_value
    (3.51, 0.2)
    >>> plan_below((None, 0, 1, {}, []))[0] is None
    True
    """
    plan, overlap, align, th, notes = auto
    from ecoscan.detect.autotune import RING_MADS
    from ecoscan.detect.detectors.blob import BlobPlan

    if (
        type(plan) is not BlobPlan
        or plan.canopy is not None
        or plan.layer_model is not None
        or not plan.min_response_by_scale
        or not np.isfinite(plan.min_value)
        or plan.shadow_dir is not None
        or plan.recentre
    ):
        return auto
    below = BelowRange(
        below_scales(plan.scales),
        CLEARNESS * extra_threshold(plan.scales, plan.min_response_by_scale),
        plan.fill_value + CLEARNESS * (plan.min_value - plan.fill_value),
        RING_MADS if plan.ring_mads is None else plan.ring_mads,
        float(plan.scales.sigmas[1]),
    )
    overlap = max(overlap, ring_reach_px(below.scales))  # the ring is exact in every core
    th = {
        **th,
        "below_range_sigma_px": float(below.scales.sigmas[1]),
        "below_range_threshold": below.min_response,
        "below_range_min_value": below.min_value,
        "below_range_ring_mads": below.ring_mads,
        "below_range_from": (
            "small crowns peaking one scale below the stated range are searched there too "
            f"and kept only when isolated (no kept crown overlaps them); their threshold is "
            f"{CLEARNESS:g} x the smallest stated scale's raised by the white-noise and "
            f"density rises, their smoothed centre must stand {CLEARNESS:g} x as far above "
            "the background as the vegetation threshold, and they must pass the ring test "
            "(the plan's figure, or the rough-ground one where it has none); none is added "
            f"unless at least {MIN_ISOLATED_SHARE:.0%} of that scale's blobs in the raster "
            "are isolated; their reported diameter is clamped to the stated minimum"
        ),
    }
    return replace(plan, below=below), overlap, align, th, notes


def find_below(layer: np.ndarray, plan, valid: np.ndarray, origin: tuple[int, int]) -> dict:
    """Blobs at the extra scale of ``plan.below`` (:func:`detect_blobs` with its tests).

    Returns the fields of :func:`ecoscan.detect.blobs.detect_blobs`.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> from ecoscan.detect.blobs import blob_scales
    >>> sc = blob_scales(6.25, 20.0)
    >>> yy, xx = np.mgrid[:64, :64]
    >>> layer = np.exp(-((yy - 32) ** 2 + (xx - 30) ** 2) / (2 * 3.5**2)).astype(np.float32)
    >>> plan = SimpleNamespace(below=BelowRange(below_scales(sc), 0.05, 0.05, 1.0, 4.42),
    ...                        fill_value=0.0, ring_open=False)
    >>> found = find_below(layer, plan, np.ones(layer.shape, bool), (0, 0))
    >>> [round(float(found[k][0])) for k in ("row", "col")]
    [32, 30]
    """
    below: BelowRange = plan.below
    thr = np.full(3, below.min_response)
    return detect_blobs(
        layer,
        below.scales,
        thr,
        below.min_value,
        valid,
        origin=origin,
        background=plan.fill_value,
        ring_mads=below.ring_mads,
        ring_open=plan.ring_open,
    )


def isolated(
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    ex: np.ndarray,
    ey: np.ndarray,
    eradius: np.ndarray,
    escore: np.ndarray,
    margin: float = 0.5,
) -> np.ndarray:
    """Which extra-scale blobs to keep: clear of every kept crown, pruned among themselves.

    An extra blob is dropped when a kept crown overlaps it (centre distance below the sum of
    the two radii); the rest are pruned greedily among themselves
    (:func:`ecoscan.detect.blobs.prune_blobs` with ``margin``).

    Examples
    --------
    >>> import numpy as np
    >>> isolated(np.array([0.0]), np.array([0.0]), np.array([5.0]),
    ...          np.array([7.0, 30.0]), np.array([0.0, 0.0]), np.array([3.0, 3.0]),
    ...          np.array([1.0, 1.0])).tolist()
    [False, True]
    """
    keep = np.ones(ex.size, dtype=bool)
    if ex.size == 0:
        return keep
    if x.size:
        tree = cKDTree(np.column_stack([x, y]))
        reach = float(radius.max()) + float(eradius.max())
        near = tree.query_ball_point(np.column_stack([ex, ey]), r=reach)
        for i, js in enumerate(near):
            if js:
                js = np.asarray(js)
                d = np.hypot(x[js] - ex[i], y[js] - ey[i])
                keep[i] = not np.any(d < radius[js] + eradius[i])
    idx = np.flatnonzero(keep)
    if idx.size:
        kept = prune_blobs(ex[idx], ey[idx], eradius[idx], escore[idx], margin=margin)
        keep[idx[~kept]] = False
    return keep


def add_below(
    layer: np.ndarray,
    plan,
    valid: np.ndarray,
    origin: tuple[int, int],
    col: np.ndarray,
    row: np.ndarray,
    columns: dict,
) -> tuple[np.ndarray, np.ndarray, dict]:
    """A tile's main blobs (``col``, ``row``, ``columns``) with the extra-scale blobs
    appended and marked in the :data:`BELOW` column (the imagery detector's ``run``).

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> from ecoscan.detect.blobs import blob_scales
    >>> sc = blob_scales(6.25, 20.0)
    >>> plan = SimpleNamespace(below=BelowRange(below_scales(sc), 0.05, 0.05, 1.0, 4.42),
    ...                        fill_value=0.0, ring_open=False)
    >>> empty = np.zeros(0)
    >>> c, r, cols = add_below(np.zeros((32, 32), np.float32), plan, np.ones((32, 32), bool),
    ...                        (0, 0), empty, empty, {"sigma_px": empty, "score": empty})
    >>> sorted(cols), c.size
    (['below_range', 'score', 'sigma_px'], 0)
    """
    found = find_below(layer, plan, valid, origin)
    n, m = col.size, found["col"].size
    extra = {"sigma_px": found["sigma"], "score": found["response"], "index_value": found["value"]}
    out = {k: np.concatenate([v, extra.get(k, np.zeros(m))]) for k, v in columns.items()}
    out[BELOW] = np.concatenate([np.zeros(n), np.ones(m)])
    return np.concatenate([col, found["col"]]), np.concatenate([row, found["row"]]), out


def split_off(points):
    """(main points, extra-scale points or None), the :data:`BELOW` column dropped.

    Examples
    --------
    >>> from ecoscan.detect.detectors.base import TilePoints
    >>> t = TilePoints(np.array([1.0, 2.0]), np.zeros(2), {BELOW: np.array([0.0, 1.0])})
    >>> main, below = split_off(t)
    >>> main.col.tolist(), below.col.tolist(), BELOW in main.columns
    ([1.0], [2.0], False)
    """
    if BELOW not in points.columns:
        return points, None
    is_below = points.columns[BELOW] > 0
    below = points.take(is_below)
    points = points.take(~is_below)
    for p in (points, below):
        p.columns.pop(BELOW)
    return points, below


def add_isolated(points, below, sigma_reported: float):
    """The kept crowns plus the isolated extra-scale blobs, reported at ``sigma_reported``
    (the smallest stated scale), and a note saying how many were added.

    None is added when fewer than :data:`MIN_ISOLATED_SHARE` of the extra-scale blobs are
    isolated (small crowns do not commonly peak below the range in this image).

    Examples
    --------
    >>> from ecoscan.detect.detectors.base import TilePoints
    >>> def table(x, sigma):
    ...     n = len(x)
    ...     return TilePoints(np.array(x), np.zeros(n), {"sigma_px": np.array(sigma),
    ...                       "score": np.ones(n), "index_value": np.ones(n)})
    >>> kept, note = add_isolated(table([0.0], [10.0]), table([8.0, 60.0], [3.0, 3.5]), 4.4)
    >>> kept.col.tolist(), kept.columns["sigma_px"].tolist()
    ([0.0, 60.0], [10.0, 4.4])
    """
    from ecoscan.detect.detectors.base import TilePoints

    root2 = math.sqrt(2.0)
    keep = isolated(
        points.col,
        points.row,
        root2 * points.columns["sigma_px"],
        below.col,
        below.row,
        root2 * below.columns["sigma_px"],
        below.columns["score"],
    )
    share = float(keep.mean()) if below.n else 0.0
    if share < MIN_ISOLATED_SHARE:
        return points, (
            f"small crowns one scale below the stated diameter range: none added "
            f"({int(keep.sum())} of {below.n} blobs there are isolated, under the "
            f"{MIN_ISOLATED_SHARE:.0%} at which such crowns are taken to be common here)"
        )
    added = below.take(keep)
    cols = {k: added.columns[k] for k in points.columns}
    cols["sigma_px"] = np.full(added.n, sigma_reported)
    added = replace(added, columns=cols)
    note = (
        f"{added.n} isolated small crown(s) found one scale below the stated diameter range "
        "(their diameter is given as the stated minimum)"
    )
    return TilePoints.concat([points, added]), note
