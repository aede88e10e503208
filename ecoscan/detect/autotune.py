"""Choose the detection layer and its thresholds from the image itself.

The imagery detector looks for bright blobs in one layer. Which layer shows the plants best
depends on the imagery: Excess Green for green shrubs on soil, NDVI when a near-infrared
band is present, darkness for dark conifers on green pasture or grey shrubs on pale
soil. This module scores every candidate layer on a few sample windows of the raster and
keeps the one whose blob candidates stand out most clearly from the background.

Thresholds come from robust statistics of the background (median and median absolute
deviation, MAD, scaled by 1.4826 to estimate a normal standard deviation: Hampel, F. R.
1974, The influence curve and its role in robust estimation, JASA 69: 383-393), not from a
split of all pixels into two classes. The background is the layer outside the discs of the
candidates that already stand out, so a few pale crowns on much soil, closed canopy (little
background) and plants among grass are all judged against what is actually between them.

Where rough ground (grass among soil, JPEG chroma blocks, noise at crowns of a few pixels)
puts many candidates just above that threshold, it is raised into the gap between them and
the plants (:func:`threshold_raise`), once per raster.

Pure computation on arrays: :func:`choose_layer` takes sample windows and returns a
:class:`LayerChoice`. The constants ``RESPONSE_MADS``, ``VALUE_MADS``, ``MAX_RAISE`` and
``GAP_SHARE`` were tuned on the tuning scenes of ``benchmarks/tuning_scenes.py`` only
(seeds 100-103), never on the evaluation suite.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ecoscan.detect.blobs import (
    DISC_RESPONSE,
    BlobScales,
    blob_pyramid,
    level_masks,
    prune_blobs,
    pyramid_blobs,
    pyramid_spread,
    response_spread,
)
from ecoscan.detect.engine import compose_layer
from ecoscan.detect.tiling import EarlyPool, WorkShare, lent_pool

__all__ = [
    "LayerChoice",
    "LayerScoring",
    "SampleWindow",
    "begin_layer_choice",
    "candidate_layers",
    "choose_layer",
    "near_shares",
    "open_ring",
    "ring_test",
    "robust_centre_scale",
    "strong_test",
    "threshold_raise",
]

#: A blob's response must reach this many background standard deviations (MAD-based) of
#: disc-equivalent contrast. Tuned on benchmarks/tuning_scenes.py.
RESPONSE_MADS = 2.5
#: The layer at a blob's centre (smoothed at its scale) must exceed the background median
#: by this many background standard deviations. Tuned on benchmarks/tuning_scenes.py.
VALUE_MADS = 1.0
#: Background pixels are those farther than this many crown radii from a plant candidate.
EXCLUDE = 2.0
#: Smallest share of the sampled pixels that must remain as background at the widest
#: exclusion before narrower ones are tried.
MIN_BACKGROUND = 0.05
#: Scale (pixels) from which the response threshold rises (see :func:`response_mads`).
REFERENCE_SIGMA_PX = 4.0
#: Closed canopy: response noise is this many times that of the pixel noise alone.
TEXTURE = 3.0
#: Rounds of background estimation (each excludes the candidates the last one found).
ROUNDS = 4
#: Candidates within this factor of the response threshold count as "near the threshold".
NEAR = 1.3
#: Warn about weak separation when more than this share of the kept candidates is near it.
NEAR_SHARE = 0.2
#: Response spread at scale σ is measured only on background pixels at least this many σ
#: from the nearest plant candidate (the filter spreads a crown's response over a few σ).
CLEARANCE = 2.0
#: Dense stands: when candidates above the pixel-noise threshold leave less than this share
#: of the pixels as background, the background rounds start from pixel noise (with room
#: for texture) instead of from the spread of all pixels, which the many crowns inflate so
#: much that the rounds never exclude them. Tuned on benchmarks/tuning_scenes.py.
DENSE_BACKGROUND = 0.15
#: Largest factor by which the response threshold is raised to sit in a gap of the
#: candidates' responses (:func:`threshold_raise`). Tuned on benchmarks/tuning_scenes.py.
MAX_RAISE = 6.0
#: Grid of factors tried between 1 and ``MAX_RAISE`` (geometric).
RAISE_STEPS = 25
#: A threshold sits in a gap when at most this share of the kept candidates is near it.
#: Tuned on benchmarks/tuning_scenes.py.
GAP_SHARE = 0.08
#: Fewest background pixels that measure the response spread at one scale.
MIN_SPREAD_PX = 200
#: Sample windows holding more pixels than this give the layer's median and spread
#: (background and all pixels) from every second row and column only: a regular sample
#: with the same distribution and a quarter of the sorting. Measured on a 2048² dry-shrubs
#: scene (5.6 million window pixels): the same layer and candidates, thresholds within
#: 0.2 %. Smaller windows (the tuning scenes) use every pixel.
VALUE_SAMPLE_PX = 2_000_000
#: On rough ground (the response threshold had to be raised into a gap), each blob must
#: also stand out from its own ring of background by this many robust SDs of the ring
#: (:func:`ecoscan.detect.blobs.ring_contrast`): the local roughness at the blob's scale,
#: where one spread for the whole raster is too low for grass patches and compression
#: blocks. The same 1 as ``VALUE_MADS``, applied locally.
RING_MADS = 1.0
#: Clear blobs below the centre-value threshold (:func:`strong_test`): kept when the
#: layer at the centre reaches the background median plus this many robust SDs ...
STRONG_VALUE_MADS = 0.0
#: ... and the response this many times the scale's threshold (None: the rule off).
#: Chosen on benchmarks/tuning_scenes.py (1.5 lowered tuning ``pines`` and ``grass``)
#: and the suite's development seeds (2 added ground points on rocky shrubland, whose
#: responses were 2.05-2.11 times the threshold; docs/detection-history.md).
STRONG_RATIO: float | None = 3.0
#: Label of the colour layer that ignores brightness (:mod:`ecoscan.detect.chromaticity`).
INVARIANT = "chroma"
#: The log-chromaticity layers.
SHADOW_FREE = (INVARIANT,)
#: A log-chromaticity layer is chosen only when its separation score is at least this many
#: times the best classic layer's. Measured on the tuning scenes and the suite's
#: development seeds: where it won by less than 1.8 times it could lower F1 (dry shrubs
#: 0.939 -> 0.919 at 1.77, JPEG 0.952 -> 0.927 at 1.02), where it won by 6.6-8.3 times
#: (tuning ``pasture``) it lifted F1 by 0.06-0.11.
SHADOW_FREE_MARGIN = 2.0
#: Where the classic choice is unusable, the log-chromaticity layer takes over only when it
#: keeps at least this share of the candidates of the classic layer that kept most. Blobs
#: joined to their shadows count each crown at most about three times (crown, shadow, a
#: patch between them). Measured (docs/detection-history.md, "Conifer pasture, fourth round"):
#: 0.35-0.37 of the darkness blobs on the suite's conifer pasture (development seeds;
#: F1 0.19-0.46 -> 0.81-0.86), 0.09 and 0.21 on tuning ``conifers`` 102 and 103, where it
#: would lower F1 (0.46 -> 0.04, 0.54 -> 0.26), 0.48 on tuning ``conifers`` 101 (0.56 ->
#: 0.67). With the bands smoothed before the log (``chromaticity.BAND_BLUR``) the layer
#: keeps more: 0.37-0.43 on the suite's development seeds, 0.46 on ``conifers`` 101, but
#: 0.28 on ``conifers`` 103 (F1 0.80 -> 0.33 if taken over), so 0.25 became 0.32, about
#: the geometric mean of 0.28 and 0.37 (docs/detection-history.md, "Conifer pasture, fifth round").
SHADOW_FREE_SHARE = 0.32
#: The classic layers' best choice also counts as unusable when it keeps fewer than this
#: share of the candidates of the classic layer that kept most: it sees only a few of the
#: plants that another layer sees (since 5 December 2026, conifer11). On the suite's
#: conifer-pasture diagnosis seed 308, Excess Green won with 25 candidates against 270
#: for darkness (0.09; F1 0.58, its points off the crowns' middles); working scenes keep
#: at least 0.41 (rocky shrubland, darkness counting the rocks), most 0.65-1.0 (tuning
#: scenes and the suite's development seeds; docs/detection-history.md, "Conifer pasture, sixth
#: round"). 0.2 is about the geometric mean of 0.09 and 0.41.
FEW_SHARE = 0.2
_MAD_TO_SD = 1.4826  # normal consistency constant of the MAD (Hampel 1974)


@dataclass(frozen=True)
class SampleWindow:
    """A window of the raster read at full resolution for the statistics.

    Attributes
    ----------
    data : numpy.ndarray
        Bands, shape (bands, rows, columns), float32.
    valid : numpy.ndarray of bool
        Valid pixels.
    core : (slice, slice)
        The part of the window whose candidates count (away from the window's edges, where
        the filters would see beyond the read).
    """

    data: np.ndarray
    valid: np.ndarray
    core: tuple[slice, slice]


@dataclass(frozen=True)
class LayerChoice:
    """The layer and thresholds chosen for a raster.

    Attributes
    ----------
    name : str
        Layer label, e.g. ``exg``, ``ndvi``, ``darkness`` or ``exg+darkness``.
    terms : tuple of (str, float)
        The layer as a weighted sum of base layers (:func:`ecoscan.detect.engine.compose_layer`).
    background : float
        Median of the layer over background pixels (layer units).
    spread : float
        1.4826 × MAD of the layer over background pixels (layer units).
    min_response : tuple of float
        Response threshold per scale: ``threshold_raise`` × k(σ) × the robust spread of
        the response over background pixels at that scale (:func:`response_mads`).
    min_contrast : float
        The median response threshold expressed as the contrast of a flat disc (layer
        units), for reports.
    min_value : float
        Lowest smoothed layer value at a crown centre: ``background + VALUE_MADS × spread``.
    separation : float
        Score of the layer: median contrast of the kept candidates in background standard
        deviations divided by ``threshold_raise``, times the share of candidates that are
        clearly kept or clearly rejected.
    near_share : float
        Share of the kept candidates whose response is within a factor ``NEAR`` of the
        (raised) threshold.
    candidates : int
        Candidates kept in the sample windows.
    closed : bool
        Little background between the candidates (closed canopy): the background came
        from narrow gaps and the centre-value test is off (``min_value`` is −inf).
    scores : dict
        Separation of every layer tried.
    threshold_raise : float
        Factor (≥ 1) by which the background-based response threshold was raised to sit in
        a gap of the candidates' responses (:func:`threshold_raise`).
    elongation : dict
        How the kept candidates are stretched along one common direction
        (:func:`ecoscan.detect.elongation.common_elongation`): blobs of crowns joined to
        their cast shadows all share the sun's axis.
    band_blur_px : float
        Gaussian σ (pixels) by which the bands are smoothed before the log-chromaticities
        of the ``chroma`` layer (:func:`ecoscan.detect.chromaticity.band_blur_px`); 0 for
        the other layers.
    """

    name: str
    terms: tuple[tuple[str, float], ...]
    background: float
    spread: float
    min_response: tuple[float, ...]
    min_contrast: float
    min_value: float
    separation: float
    near_share: float
    candidates: int
    scores: dict = field(default_factory=dict)
    closed: bool = False
    threshold_raise: float = 1.0
    elongation: dict = field(default_factory=dict)
    band_blur_px: float = 0.0

    @property
    def crowded_threshold(self) -> bool:
        """True when many candidates sit near the threshold or nothing stands out."""
        return self.near_share > NEAR_SHARE or self.separation < 2.0

    @property
    def aligned(self) -> bool:
        """True when the kept blobs share one long axis: crowns joined to their cast
        shadows (:func:`ecoscan.detect.elongation.is_aligned`)."""
        from ecoscan.detect.elongation import is_aligned

        return is_aligned(self.elongation)

    @property
    def weak(self) -> bool:
        """True when many candidates sit near the threshold, nothing stands out, or the
        kept blobs are stretched along one direction (joined to their shadows)."""
        return self.crowded_threshold or self.aligned


def robust_centre_scale(values: np.ndarray) -> tuple[float, float]:
    """Median and 1.4826 × MAD (a robust standard deviation; Hampel 1974).

    Examples
    --------
    >>> import numpy as np
    >>> robust_centre_scale(np.array([1.0, 2.0, 3.0, 4.0, 100.0]))
    (3.0, 1.4826)
    """
    v = np.asarray(values)
    if v.dtype not in (np.float32, np.float64):
        v = v.astype(float)
    if v.size == 0:
        return 0.0, 0.0
    med = _median(v)
    # float32 values stay float32 (half the memory traffic of a float64 copy); the
    # deviations then differ from float64 ones by at most a float32 rounding (~1e-7)
    mad = _median(np.abs(v - med))
    return med, _MAD_TO_SD * mad


def _median(v: np.ndarray) -> float:
    """The median as ``numpy.median`` of the values in float64 gives it, to the bit.

    Selecting the middle order statistics (``numpy.partition``) in the values' own dtype
    gives the same elements as in float64 (the conversion is exact and keeps the order);
    the two middle ones are averaged in float64 as ``numpy.median`` does.
    """
    n = v.size
    k = n // 2
    if n % 2:
        return float(_order_stats(v, (k,))[0])
    lo, hi = _order_stats(v, (k - 1, k))
    return (float(lo) + float(hi)) / 2.0


#: Arrays at least this long have their order statistics selected from a bracket
#: (:func:`_order_stats`); shorter ones are partitioned whole.
BRACKET_MIN = 100_000


def _order_stats(v: np.ndarray, ks: tuple[int, ...]) -> np.ndarray:
    """The ``ks``-th smallest values of ``v`` (as ``numpy.partition(v, ks)[ks]``, to the
    bit), for a large ``v`` without partitioning all of it.

    A regular sample of about 4 000 values brackets the wanted ranks (their sample
    quantiles ± 6 binomial standard deviations); the values below the bracket are counted,
    the few inside it partitioned. When the bracket misses a rank (the check is exact),
    or a wanted value is zero (whose sign a partition leaves to chance), or NaN is near,
    the whole array is partitioned as before. Selection of the same ranks gives the same
    values: the result never depends on which path was taken.
    """
    n = v.size
    if n < BRACKET_MIN:
        return np.partition(v, ks)[list(ks)]
    step = n // 4096
    sample = np.sort(v[::step])
    m = sample.size
    q0, q1 = min(ks) / n, max(ks) / n
    width = 6.0 * math.sqrt(max(q0 * (1 - q0), q1 * (1 - q1)) * m) + 8.0
    lo = sample[max(0, int(q0 * m - width))]
    hi = sample[min(m - 1, math.ceil(q1 * m + width))]
    if lo == lo and hi == hi:  # not NaN
        below = int(np.count_nonzero(v < lo))
        inside = v[(v >= lo) & (v <= hi)]
        if below <= min(ks) and max(ks) < below + inside.size:
            got = np.partition(inside, [k - below for k in ks])[[k - below for k in ks]]
            if np.all(got != 0):
                return got
    return np.partition(v, ks)[list(ks)]


def clipped_centre_scale(values: np.ndarray, k: float = 3.0, rounds: int = 5):
    """Median and robust SD after dropping values beyond ``k`` robust SDs, repeated.

    Sigma clipping (common practice in astronomy for sky backgrounds among stars): crown
    pixels that remain among the background pull the median and the MAD up; dropping
    values far from the centre and estimating again converges on the dominant mode.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> v = np.concatenate([rng.normal(0, 1, 6000), rng.normal(8, 1, 4000)])
    >>> m, s = clipped_centre_scale(v)
    >>> bool(abs(m) < 0.3 and 0.8 < s < 1.3)
    True
    """
    v = np.asarray(values, float)
    m, s = robust_centre_scale(v)
    for _ in range(rounds):
        if not s > 0:
            break
        keep = np.abs(v - m) <= k * s
        if keep.all() or keep.sum() < 100:
            break
        v = v[keep]
        m, s = robust_centre_scale(v)
    return m, s


def ring_test(choice: LayerChoice) -> float | None:
    """``RING_MADS`` on rough ground, else None.

    The ground is rough when the layer's threshold was raised into a gap of the
    candidates' responses, or when no factor up to ``MAX_RAISE`` found a gap and the least
    crowded one was the base threshold (``near_share`` above ``GAP_SHARE`` with no raise):
    weak candidates of grass patches or compression blocks spread over a wide range of
    responses, up to the weakest crowns' (JPEG-vignette suite seed 507, dry11).

    Examples
    --------
    >>> c = LayerChoice("exg", (("exg", 1.0),), 0.0, 1.0, (1.0,), 1.0, 1.0, 5.0, 0.0, 20)
    >>> ring_test(c) is None
    True
    >>> from dataclasses import replace
    >>> ring_test(replace(c, near_share=GAP_SHARE + 0.01)) == RING_MADS
    True
    """
    rough = choice.threshold_raise > 1.0 or choice.near_share > GAP_SHARE
    # the colour layer's threshold low in a shallow valley relies on the ring test (conifer12)
    rough = rough or open_ring(choice)
    return RING_MADS if rough else None


def open_ring(choice: LayerChoice) -> bool:
    """Whether the ring test measures the ring's open sectors and drops shoulders
    (:func:`ecoscan.detect.chromaticity.open_ring_contrast`), with the threshold low in
    the valley (:func:`ecoscan.detect.chromaticity.valley_threshold`): on the
    log-chromaticity layer where its valley is shallow
    (:func:`ecoscan.detect.chromaticity.shallow_valley`; conifer12).

    Examples
    --------
    >>> c = LayerChoice("chroma", (), 0.0, 1.0, (1.0,), 1.0, 0.0, 1.8, 0.0, 90,
    ...                 scores={"chroma-valley": 1.8})
    >>> open_ring(c)
    True
    >>> from dataclasses import replace
    >>> open_ring(replace(c, scores={"chroma-valley": 13.0}))
    False
    """
    from ecoscan.detect.chromaticity import shallow_valley

    score = choice.scores.get(f"{choice.name}-valley")
    return choice.name in SHADOW_FREE and score is not None and shallow_valley(score)


def strong_test(choice: LayerChoice) -> tuple[float, float] | None:
    """``(lowest centre value, response factor)`` for clear blobs below the centre-value
    threshold (:func:`ecoscan.detect.blobs.detect_blobs`, ``strong``), or None.

    A pale or senescent crown has a vegetation-index value near the ground's: the layer at
    its centre can fall short of ``background + VALUE_MADS × spread`` while its blob
    response, its contrast with the ground right around it, is clear. Such a blob is kept
    when its centre value reaches ``background + STRONG_VALUE_MADS × spread`` and its
    response ``STRONG_RATIO`` times its scale's threshold. Only on smooth ground (no
    threshold raise: on rough ground the ring test is the local check), only on layers
    holding Excess Green (a darkness or log-chromaticity layer has no index value for a
    pale crown to fall short of; on NDVI it added ground points on the suite's
    multispectral development seed 7) and never on closed canopy.

    Examples
    --------
    >>> c = LayerChoice("exg", (("exg", 1.0),), 0.02, 0.01, (1.0,), 1.0, 0.03, 5.0, 0.0, 20)
    >>> strong_test(c)
    (0.02, 3.0)
    >>> strong_test(LayerChoice("darkness", (("darkness", 1.0),), 0.0, 1.0, (1.0,), 1.0,
    ...                         1.0, 5.0, 0.0, 20)) is None
    True
    """
    if STRONG_RATIO is None or choice.closed or not math.isfinite(choice.min_value):
        return None
    if choice.threshold_raise > 1.0:
        return None
    if not any(n == "exg" for n, _w in choice.terms):
        return None
    return (choice.background + STRONG_VALUE_MADS * choice.spread, STRONG_RATIO)


def candidate_layers(roles: tuple[str, ...]) -> list[tuple[str, ...]]:
    """Base layers worth trying for bands with these roles.

    Examples
    --------
    >>> candidate_layers(("red", "green", "blue"))
    [('exg',), ('darkness',), ('exg', 'darkness')]
    >>> candidate_layers(("red", "nir"))
    [('ndvi',), ('darkness',)]
    """
    have = set(roles)
    out: list[tuple[str, ...]] = []
    if {"red", "nir"} <= have:
        out.append(("ndvi",))
    if {"red", "green", "blue"} <= have:
        out.append(("exg",))
    out.append(("darkness",))
    if {"red", "green", "blue"} <= have and "nir" not in have:
        out.append(("exg", "darkness"))
    if not out[:-1] and "band" in have:
        out.insert(0, ("band",))
    return out


def _disc_mask(shape: tuple[int, int], rows, cols, radii) -> np.ndarray:
    """Pixels inside any of the discs: (y − row)² + (x − col)² ≤ radius².

    Each disc row is one run of pixels; the runs of all discs are found at once (the
    square root gives each run's ends, then the exact test above moves them by a pixel
    where rounding put them off) and drawn by a cumulative sum along the rows. The same
    pixels as testing every pixel of each disc's box.
    """
    h, w = shape
    rows = np.asarray(rows, float)
    cols = np.asarray(cols, float)
    radii = np.asarray(radii, float)
    if rows.size == 0:
        return np.zeros(shape, dtype=bool)
    rr = np.ceil(radii).astype(np.int64)
    iy, ix = rows.astype(np.int64), cols.astype(np.int64)  # int(): towards zero
    y0, y1 = np.maximum(0, iy - rr), np.minimum(h, iy + rr + 2)
    x0, x1 = np.maximum(0, ix - rr), np.minimum(w, ix + rr + 2)
    n_rows = np.where((y0 < y1) & (x0 < x1), y1 - y0, 0)
    d = np.repeat(np.arange(rows.size), n_rows)  # disc of each run
    first = np.cumsum(n_rows) - n_rows
    y = y0[d] + (np.arange(d.size) - first[d])
    dy2 = (y - rows[d]) ** 2
    r2 = radii[d] * radii[d]
    c = cols[d]

    def inside(x):
        return dy2 + (x - c) ** 2 <= r2

    half = np.sqrt(np.maximum(r2 - dy2, 0.0))
    lo = np.ceil(c - half).astype(np.int64)
    hi = np.floor(c + half).astype(np.int64)
    for _ in range(8):  # rounding moves an end by at most a pixel; settle it exactly
        moved = False
        for step in (-1, 1):
            grow = inside(lo - 1) & (lo - 1 <= hi) if step < 0 else inside(hi + 1) & (hi >= lo - 1)
            shrink = ~inside(lo) & (lo <= hi) if step < 0 else ~inside(hi) & (hi >= lo)
            end = lo if step < 0 else hi
            end[grow] += step
            end[shrink & ~grow] -= step
            moved = moved or bool(grow.any() or shrink.any())
        if not moved:
            break
    lo = np.maximum(lo, x0[d])
    hi = np.minimum(hi, x1[d] - 1)
    run = lo <= hi
    flat = (w + 1) * y[run]
    # +1 where a run starts, -1 after it ends; a pixel is covered where the running sum
    # along its row is positive (int32 counts: never more runs than discs overlap)
    edges = np.zeros(h * (w + 1), np.int32)
    ones = np.ones(flat.size, np.int32)  # an array (not 1): numpy's fast path of add.at
    np.add.at(edges, flat + lo[run], ones)
    np.subtract.at(edges, flat + hi[run] + 1, ones)
    return np.cumsum(edges.reshape(h, w + 1), axis=1, dtype=np.int32)[:, :w] > 0


class _WindowCache:
    """What the layer choice computes once per sample window and reuses for every layer.

    Attributes
    ----------
    valid_levels : list of dict
        Valid pixels of each window halved to every pyramid level.
    core_valid : list of numpy.ndarray
        Valid pixels in each window's core.
    edges : list of list or None
        Per window, the DoG pyramid of the invalid-pixel indicator with 1 beyond the
        window's edges: the filters are linear, so raising the fill value (invalid pixels
        and beyond the edges) by ``d`` raises every response by ``d`` times this one.
        None where it is zero over the core (every pixel valid, core farther than the
        filters reach from the window's edges).
    inner : list of numpy.ndarray
        Valid pixels whose 3 × 3 neighbourhood is valid (for :func:`pixel_noise`).
    """

    def __init__(self, windows: list[SampleWindow], scales: BlobScales) -> None:
        self.windows = windows
        self.scales = scales
        #: rows and columns between the pixels whose values give medians (VALUE_SAMPLE_PX)
        self.stride = 2 if sum(w.valid.size for w in windows) > VALUE_SAMPLE_PX else 1
        self.valid_levels = [level_masks(w.valid, scales) for w in windows]
        self.core_valid = []
        self.edges = []
        self.inner = []
        for w in windows:
            core = np.zeros(w.valid.shape, dtype=bool)
            core[w.core] = True
            self.core_valid.append(core & w.valid)
            # the fill value reaches the core only through invalid pixels or a core closer
            # to the window's edge than the filters reach; otherwise its response is zero
            ys, xs = w.core
            h, wd = w.valid.shape
            reach = scales.support_px
            sealed = (
                ys.start >= reach
                and xs.start >= reach
                and h - ys.stop >= reach
                and wd - xs.stop >= reach
                and bool(w.valid.all())
            )
            self.edges.append(
                None if sealed else blob_pyramid((~w.valid).astype(np.float32), scales, 1.0)
            )
            self.inner.append(
                ndimage.binary_erosion(w.valid, iterations=1, border_value=0)
                if self.stride == 1
                else None
            )
        self._white: dict[int, np.ndarray] = {}

    def white_spread(self, shape: tuple[int, int]) -> np.ndarray:
        """:func:`_white_spread` for this many pixels, computed once."""
        side = int(min(max(shape), 512))
        if side not in self._white:
            self._white[side] = _white_spread(self.scales, shape)
        return self._white[side]


class _LayerPyramids:
    """One candidate layer in every sample window, with its DoG pyramids kept.

    The pyramids are computed once, with invalid pixels (and the area beyond each window)
    filled with ``fill``; responses for another fill value come from the window's edge
    pyramid (:class:`_WindowCache`), so the rounds of background estimation filter nothing
    again.
    """

    def __init__(self, layers: list[np.ndarray], cache: _WindowCache, fill: float) -> None:
        self.layers = layers
        self.cache = cache
        self.fill = fill
        self.pyramids = [
            blob_pyramid(
                np.where(w.valid, lay, np.float32(fill)).astype(np.float32), cache.scales, fill
            )
            for lay, w in zip(layers, cache.windows, strict=True)
        ]
        self._noise: float | None = None
        #: per (window, exclusion factor, dense): the last round's excluded candidates
        #: and what they gave (:func:`_background_pixels`)
        self.rounds_seen: dict[tuple, tuple] = {}
        #: per window: the last mask measured by :func:`_spreads`, its level masks and
        #: the spreads measured on it (by fill shift)
        self.levels_seen: dict[int, tuple] = {}

    def noise(self) -> float:
        """Median over the windows of the pixel noise (:func:`pixel_noise`), computed once."""
        if self._noise is None:
            self._noise = float(
                np.median(
                    [
                        pixel_noise(lay, w.valid, inner, self.cache.stride)
                        for lay, w, inner in zip(
                            self.layers, self.cache.windows, self.cache.inner, strict=True
                        )
                    ]
                )
            )
        return self._noise


def _candidates(lp: _LayerPyramids, floor, lower: list[dict] | None = None):
    """All blob candidates in the windows' cores (pruned per window), at the fill value
    the pyramids were made with.

    ``lower``: the blobs :func:`_core_blobs` found at a floor nowhere higher, which are
    filtered (:func:`_above`) instead of searching the pyramids again where that is exact.
    """
    found = None if lower is None else _above(lp.cache.scales, lower, floor)
    return _pruned(_core_blobs(lp, floor) if found is None else found)


def _core_blobs(lp: _LayerPyramids, floor) -> list[dict]:
    """Per window, the blobs reaching ``floor`` in its core, before pruning."""
    scales = lp.cache.scales
    out = []
    for wi, win in enumerate(lp.cache.windows):
        found = pyramid_blobs(lp.pyramids[wi], scales, floor, -np.inf, lp.cache.valid_levels[wi])
        ys, xs = win.core
        inside = (
            (found["row"] >= ys.start - 0.5)
            & (found["row"] < ys.stop - 0.5)
            & (found["col"] >= xs.start - 0.5)
            & (found["col"] < xs.stop - 0.5)
        )
        out.append({k: v[inside] for k, v in found.items()})
    return out


def _above(scales: BlobScales, blobs: list[dict], floor) -> list[dict] | None:
    """The blobs of :func:`_core_blobs` at a floor that reach a higher ``floor`` (per
    scale): what :func:`_core_blobs` at that floor finds, without filtering again.

    A blob is a maximum over its neighbours whatever the floor, and is found when its
    response reaches the floor of its own (integer) scale in float32. That scale is the
    refined σ's nearest one unless the refinement sits half a step off (the parabola's
    offset clipped at ±0.5); then, where the two scales' floors would disagree, None
    (filter again).
    """
    thr = np.asarray(floor, np.float32).astype(float)

    def passes(r, at):  # the response against the floor of scale ``at`` (clipped)
        return r >= thr[np.clip(at.astype(int), 0, thr.size - 1)]

    out = []
    for found in blobs:
        r = found["response"]
        x = np.log(found["sigma"] / scales.sigmas[0]) / math.log(scales.k)
        odd = np.abs(x - np.rint(x)) > 0.5 - 1e-6
        if np.any(passes(r[odd], np.floor(x[odd])) != passes(r[odd], np.ceil(x[odd]))):
            return None
        keep = passes(r, np.rint(x))
        out.append({k: v[keep] for k, v in found.items()})
    return out


def _pruned(blobs: list[dict]) -> dict:
    """:func:`_core_blobs` pruned per window and joined, with each blob's window ``w``."""
    out = {k: [] for k in ("w", "row", "col", "sigma", "response", "value")}
    for wi, found in enumerate(blobs):
        if found["row"].size:
            keep = prune_blobs(
                found["col"], found["row"], math.sqrt(2) * found["sigma"], found["response"]
            )
            found = {k: v[keep] for k, v in found.items()}
        for k in ("row", "col", "sigma", "response", "value"):
            out[k].append(found[k])
        out["w"].append(np.full(found["row"].size, wi))
    return {k: np.concatenate(v) if v else np.empty(0) for k, v in out.items()}


def _spreads(lp: _LayerPyramids, masks, fill, clearances=None):
    """Response spread per scale over the masked pixels of all windows (pooled median),
    with invalid pixels and the area beyond the windows filled with ``fill``."""
    per = []
    cache = lp.cache
    clearances = clearances or [None] * len(lp.layers)
    shift = float(fill) - float(lp.fill)
    for wi, (mask, clear) in enumerate(zip(masks, clearances, strict=True)):
        seen = lp.levels_seen.get(wi)
        if seen is None or seen[0] is not mask:
            levels = level_masks(mask & cache.core_valid[wi], cache.scales)
            seen = lp.levels_seen[wi] = (mask, levels, {})
        edge = cache.edges[wi] if shift != 0.0 and cache.edges[wi] is not None else None
        # the same mask as a round before, measured at the same fill (or at any fill
        # where the fill does not reach the core): the same spreads
        key = None if edge is None else shift
        if clear is None and key in seen[2]:
            per.append(seen[2][key])
            continue
        per.append(
            pyramid_spread(
                lp.pyramids[wi],
                cache.scales,
                seen[1],
                clearance=clear,
                clearance_sigmas=CLEARANCE,
                min_pixels=MIN_SPREAD_PX if clear is not None else 1,
                shift=None if edge is None else (shift, edge),
            )
        )
        if clear is None:
            seen[2][key] = per[-1]
    stack = np.vstack(per)
    has = np.isfinite(stack).any(axis=0)
    sp = np.full(stack.shape[1], np.nan)
    if has.any():
        sp[has] = np.nanmedian(stack[:, has], axis=0)
    if clearances is not None and clearances[0] is not None:
        return np.where(np.isfinite(sp) & (sp > 0), sp, np.nan)
    return np.where(
        np.isfinite(sp) & (sp > 0), sp, np.nanmax(sp) if np.isfinite(sp).any() else 1e-6
    )


def pixel_noise(
    layer: np.ndarray, valid: np.ndarray, inner: np.ndarray | None = None, stride: int = 1
) -> float:
    """Standard deviation of pixel noise by Immerkær's Laplacian-difference estimator.

    Immerkær, J. (1996). Fast noise variance estimation. Computer Vision and Image
    Understanding 64: 300-302: σ = √(π/2) · mean |I ∗ N| / 6 with
    N = [[1, −2, 1], [−2, 4, −2], [1, −2, 1]], which cancels smooth structure (crowns,
    gradients), so the estimate holds where plants cover most of the image. The mean is
    taken over valid interior pixels (``inner``, the valid pixels eroded by one pixel,
    computed when not given), or with ``stride`` > 1 over those of every ``stride``-th row
    and column only (a regular sample, for large windows).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> img = rng.normal(0, 2.0, (400, 400)) + np.linspace(0, 50, 400)[None]
    >>> round(pixel_noise(img, np.ones(img.shape, bool)), 1)
    2.0
    >>> round(pixel_noise(img, np.ones(img.shape, bool), stride=2), 1)
    2.0
    """
    kern = np.array([[1, -2, 1], [-2, 4, -2], [1, -2, 1]], np.float32)
    if stride > 1:
        # the operator at interior pixels of the sampled rows and columns only (an interior
        # valid pixel's neighbourhood never reaches beyond the array)
        lay = np.asarray(layer, np.float32)
        h, w = lay.shape
        if h < 3 or w < 3:
            return 0.0
        acc = np.zeros(((h - 2 + stride - 1) // stride, (w - 2 + stride - 1) // stride))
        # every pixel valid (most windows): every sampled pixel counts, no mask to build
        ok = None if valid.all() else np.ones(acc.shape, bool)
        for dy in (-1, 0, 1):
            for dx in (-1, 0, 1):
                win = (slice(1 + dy, h - 1 + dy, stride), slice(1 + dx, w - 1 + dx, stride))
                c = float(kern[dy + 1, dx + 1])
                acc += lay[win] if c == 1.0 else c * lay[win]  # 1 × x is x
                if ok is not None:
                    ok &= valid[win]
        if ok is not None and not ok.any():
            return 0.0
        dev = np.abs(acc, out=acc)
        return float(math.sqrt(math.pi / 2.0) * (dev if ok is None else dev[ok]).mean() / 6.0)
    conv = np.abs(ndimage.convolve(np.asarray(layer, np.float32), kern, mode="nearest"))
    if inner is None:  # valid pixels whose 3 x 3 neighbourhood is valid
        inner = ndimage.binary_erosion(valid, iterations=1, border_value=0)
    if not inner.any():
        return 0.0
    return float(math.sqrt(math.pi / 2.0) * conv[inner].mean() / 6.0)


def _white_spread(scales: BlobScales, shape: tuple[int, int]) -> np.ndarray:
    """Response spread per scale of unit white noise (fixed seed, so deterministic)."""
    side = int(min(max(shape), 512))
    noise = np.random.default_rng(12345).standard_normal((side, side)).astype(np.float32)
    return response_spread(noise, scales, np.ones((side, side), bool), 0.0)


def response_mads(scales: BlobScales) -> np.ndarray:
    """Response threshold per scale, in background standard deviations.

    Noise maxima get denser at small scales (about one per σ² pixels), so for the same
    number of false candidates per area the threshold rises as σ falls. For a normal tail
    P(X > k) ∝ exp(−k²/2), a density ratio ρ is offset by k² + 2 ln ρ: here
    k(σ) = √(K² + 2 ln max(1, (σ_ref/σ)²)) with K = ``RESPONSE_MADS`` and σ_ref =
    ``REFERENCE_SIGMA_PX`` (the smallest scale of the tuning scenes).

    Examples
    --------
    >>> from ecoscan.detect.blobs import blob_scales
    >>> k = response_mads(blob_scales(2, 20))
    >>> bool(k[1] > k[-2] == RESPONSE_MADS)
    True
    """
    ratio = np.maximum(1.0, (REFERENCE_SIGMA_PX / scales.sigmas) ** 2)
    return np.sqrt(RESPONSE_MADS**2 + 2.0 * np.log(ratio))


def _fill_scales(measured: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """Scales without a measurement take the nearest smaller measured scale's spread.

    Texture is correlated, so its response falls more slowly with scale than white noise's;
    keeping the last measured spread is the cautious choice. With nothing measured, the
    ``fallback`` (pixel noise with room for texture) is used.
    """
    out = np.array(measured, float)
    ok = np.isfinite(out)
    if not ok.any():
        return np.asarray(fallback, float).copy()
    idx = np.where(ok, np.arange(out.size), -1)
    idx = np.maximum.accumulate(idx)
    first = int(np.flatnonzero(ok)[0])
    idx[idx < 0] = first
    return out[idx]


def _scale_index(scales: BlobScales, sigma: np.ndarray) -> np.ndarray:
    i = np.rint(np.log(sigma / scales.sigmas[0]) / math.log(scales.k)).astype(int)
    return np.clip(i, 0, scales.sigmas.size - 1)


def _background_share(windows, cand, spread) -> float:
    """Share of valid pixels farther than ``EXCLUDE`` radii from every candidate whose
    response reaches ``RESPONSE_MADS`` × ``spread`` (its own scale's)."""
    strong = cand["response"] >= RESPONSE_MADS * spread
    free = total = 0
    for wi, win in enumerate(windows):
        sel = strong & (cand["w"] == wi)
        covered = _disc_mask(
            win.valid.shape,
            cand["row"][sel],
            cand["col"][sel],
            EXCLUDE * math.sqrt(2) * cand["sigma"][sel],
        )
        free += int((win.valid & ~covered).sum())
        total += int(win.valid.sum())
    return free / max(total, 1)


def _values(layer: np.ndarray, mask: np.ndarray, stride: int) -> np.ndarray:
    """The layer at the masked pixels of every ``stride``-th row and column."""
    if stride == 1:
        return layer[mask]
    return layer[::stride, ::stride][mask[::stride, ::stride]]


def _score_layer(layers, cache: _WindowCache, vals=None, centre=None):
    """Background statistics, thresholds and separation score of one layer.

    ``vals`` (the layer's valid pixels, all windows) and ``centre`` (their
    :func:`robust_centre_scale`) may be passed when already computed.
    """
    windows = cache.windows
    if vals is None:
        vals = np.concatenate(
            [_values(lay, w.valid, cache.stride) for lay, w in zip(layers, windows, strict=True)]
        )
    m0, s0 = centre if centre is not None else robust_centre_scale(vals)
    if not s0 > 0:
        s0 = float(np.std(vals)) or 1e-6
    # every DoG pyramid of this layer, filtered once (see _LayerPyramids)
    lp = _LayerPyramids(layers, cache, m0)
    cand, sr0, dense = _first_candidates(lp, m0)
    bg = _background_rounds(lp, cand, dense, (m0, s0, sr0), vals.size)
    res = _separation(cache.scales, cand, bg)
    kept = res.pop("kept")
    # the kept candidates, for the chosen layer's elongation check (_kept_elongation):
    # rows window, row, column, sigma, response
    res["kept_blobs"] = np.array([cand[k][kept] for k in _KEPT_FIELDS], dtype=float).reshape(
        len(_KEPT_FIELDS), -1
    )
    return res


_KEPT_FIELDS = ("w", "row", "col", "sigma", "response")


def _first_candidates(lp: _LayerPyramids, m0: float):
    """Blob candidates against the response spread of all pixels, that spread, and
    whether the stand is dense (see ``DENSE_BACKGROUND``): then the crowns inflate the
    spread of all pixels so much that the background rounds would never exclude them, and
    both start from pixel noise (with room for texture) instead."""
    cache = lp.cache
    sr0 = _spreads(lp, [w.valid for w in cache.windows], m0)
    noise = lp.noise()
    sr_noise = TEXTURE * noise * cache.white_spread(lp.layers[0].shape)
    if noise > 0 and np.any(sr_noise < sr0):
        low = np.minimum(sr0, sr_noise)
        found = _core_blobs(lp, 0.5 * low)
        cand = _pruned(found)
        spread_low = low[_scale_index(cache.scales, cand["sigma"])]
        if _background_share(cache.windows, cand, spread_low) < DENSE_BACKGROUND:
            return cand, low, True
        # the blobs at the higher floor are among those found at the lower one
        return _candidates(lp, 0.5 * sr0, lower=found), sr0, False
    return _candidates(lp, 0.5 * sr0), sr0, False


def _background_rounds(lp: _LayerPyramids, cand, dense: bool, start, n_values: int) -> dict:
    """Background median, spread and response spread per scale, in rounds.

    The background is the pixels away from candidates that stand out (their discs and the
    ring the filters spread around them), found again as the noise estimate improves, up
    to ``ROUNDS`` times. ``start`` is ``(median, spread, response spread)`` of all pixels;
    ``n_values`` the number of valid pixels sampled (``MIN_BACKGROUND``).
    """
    cache = lp.cache
    si = _scale_index(cache.scales, cand["sigma"])
    m0, s0, _sr0 = start
    m, s, sr = start
    closed = False
    last = None
    for _round in range(ROUNDS):
        strong = cand["response"] >= RESPONSE_MADS * sr[si]
        if not dense:
            strong &= cand["value"] >= m
        if last is not None and np.array_equal(strong, last):
            break  # the same background as the last round: its statistics would repeat
        last = strong
        # the widest exclusion that leaves enough background; closed canopy leaves little
        for factor in (EXCLUDE, 1.0, 0.6):
            bg_masks, bg, clears = _background_pixels(lp, cand, strong, factor, dense)
            if bg.size >= MIN_BACKGROUND * n_values:
                break
        closed = factor < EXCLUDE
        if closed:
            # crowns cover most of the image: background statistics are contaminated by
            # them; the response noise comes from the pixel noise instead, with room for
            # texture inside crowns
            sr = TEXTURE * lp.noise() * cache.white_spread(lp.layers[0].shape)
            m, s = robust_centre_scale(bg) if bg.size else (m0, s0)
            break
        m1, s1 = clipped_centre_scale(bg) if dense else robust_centre_scale(bg)
        if not s1 > 0:
            break
        m, s = m1, s1
        if dense:
            # scales without enough clear background keep the nearest smaller one's spread
            sr_noise = TEXTURE * lp.noise() * cache.white_spread(lp.layers[0].shape)
            sr = _fill_scales(_spreads(lp, bg_masks, m, clears), sr_noise)
        else:
            sr = _spreads(lp, bg_masks, m)
    return {"background": m, "spread": s, "response_spread": sr, "closed": closed}


def _background_pixels(lp: _LayerPyramids, cand, strong, factor: float, dense: bool):
    """Background masks per window (valid pixels farther than ``factor`` crown radii from
    every ``strong`` candidate), their layer values (all windows) and, for a dense stand,
    each pixel's distance from the excluded discs (None otherwise)."""
    cache = lp.cache
    bg_masks, bg_vals, clears = [], [], []
    for wi, (lay, win) in enumerate(zip(lp.layers, cache.windows, strict=True)):
        sel = strong & (cand["w"] == wi)
        # a window whose excluded candidates did not change since the last round gives
        # the same pixels again (the rounds of one layer share their candidates)
        picked = np.flatnonzero(sel)
        last = lp.rounds_seen.get((wi, factor, dense))
        if last is not None and last[0] is cand and np.array_equal(last[1], picked):
            bg_masks.append(last[2])
            bg_vals.append(last[3])
            if dense:
                clears.append(last[4])
            continue
        covered = _disc_mask(
            lay.shape,
            cand["row"][sel],
            cand["col"][sel],
            factor * math.sqrt(2) * cand["sigma"][sel],
        )
        if dense:
            # response spread only where the crowns' filter ringing has faded
            clears.append(
                ndimage.distance_transform_edt(~covered).astype(np.float32)
                if covered.any()
                else np.full(lay.shape, np.inf, np.float32)
            )
        bg_masks.append(win.valid & ~covered)
        bg_vals.append(_values(lay, bg_masks[-1], cache.stride))
        lp.rounds_seen[(wi, factor, dense)] = (
            cand,
            picked,
            bg_masks[-1],
            bg_vals[-1],
            clears[-1] if dense else None,
        )
    return bg_masks, np.concatenate(bg_vals), (clears if dense else None)


def _separation(scales: BlobScales, cand, bg: dict) -> dict:
    """The threshold raise and separation score of a layer from its candidates and
    background (:func:`_background_rounds`); the result of :func:`_score_layer`."""
    m, s, sr, closed = bg["background"], bg["spread"], bg["response_spread"], bg["closed"]
    si = _scale_index(scales, cand["sigma"])
    kk = response_mads(scales)
    q = cand["response"] / sr[si] * (RESPONSE_MADS / kk[si])
    z = (cand["value"] - m) / s
    # with little background between crowns (closed canopy) the background median is
    # not the level crowns must exceed: the centre-value test is dropped
    zmin = -np.inf if closed else VALUE_MADS
    zok = z >= zmin
    raise_by, near_share = threshold_raise(q / RESPONSE_MADS, zok)
    t = RESPONSE_MADS * raise_by
    kept = (q >= t) & zok
    n_kept = int(kept.sum())
    # contrast in units of the raised threshold's noise: a layer that needed a raise has a
    # rougher background than its spread said
    med_q = float(np.median(q[kept])) / raise_by if n_kept else 0.0
    clear = 1.0 - min(1.0, near_share)
    return {
        **bg,
        "separation": med_q * clear,
        "near_share": near_share,
        "candidates": n_kept,
        "raise": raise_by,
        "q": q,
        "z": z,
        "zmin": zmin,
        "kept": kept,
    }


def _weighted_sum(parts: list[np.ndarray], terms) -> np.ndarray:
    """``compose_layer`` from base layers already computed (the same float32 operations)."""
    out: np.ndarray | None = None
    for part, (_name, w) in zip(parts, terms, strict=True):
        layer = part * np.float32(w) if w != 1.0 else part.copy()
        if out is None:
            out = layer
        else:
            out += layer
    assert out is not None
    return out


def near_shares(ratio: np.ndarray, eligible: np.ndarray, factors: np.ndarray) -> np.ndarray:
    """Share of candidates near the threshold, for each threshold factor.

    A candidate with response ``ratio`` times the base threshold is kept at factor ``t``
    when ``ratio >= t``. It is *near* the threshold when it is kept and ``ratio < t × NEAR``
    or rejected and ``ratio >= t / NEAR``. The share is the count near divided by the
    count kept (candidates that fail other tests, ``eligible`` False, never count).

    Examples
    --------
    >>> import numpy as np
    >>> r = np.array([1.1, 1.2, 5.0, 6.0, 7.0])
    >>> near_shares(r, np.ones(5, bool), np.array([1.0, 2.0])).round(3).tolist()
    [0.4, 0.0]
    """
    r = np.asarray(ratio, float)[eligible]
    t = np.asarray(factors, float)[:, None]
    kept = r[None] >= t
    near = (kept & (r[None] < t * NEAR)) | (~kept & (r[None] >= t / NEAR))
    return near.sum(axis=1) / np.maximum(kept.sum(axis=1), 1)


def threshold_raise(ratio: np.ndarray, eligible: np.ndarray) -> tuple[float, float]:
    """Factor on the noise-based response threshold that puts it in a gap of the candidates.

    The base threshold (``RESPONSE_MADS`` background standard deviations) assumes the
    background between plants is as smooth everywhere as where it was measured. Rough
    patches (grass among soil, JPEG chroma blocks, noise maxima at crowns of a few pixels)
    give many candidates just above it, which shows as a high share of candidates near the
    threshold. The threshold is then raised, on a geometric grid up to ``MAX_RAISE``, to
    the lowest factor at which at most ``GAP_SHARE`` of the kept candidates sit near it
    (a gap in the candidates' responses); when no factor reaches that, the one with the
    smallest share. Once per raster, from the candidates of the sample windows.

    Parameters
    ----------
    ratio : numpy.ndarray
        Each candidate's response divided by its scale's base threshold.
    eligible : numpy.ndarray of bool
        Candidates that pass the other tests (centre value).

    Returns
    -------
    (float, float)
        The factor (1 when the base threshold already sits in a gap) and the share of
        kept candidates near the raised threshold.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> noise = rng.uniform(1.0, 2.0, 60)       # rough background just above the threshold
    >>> crowns = rng.uniform(4.0, 9.0, 80)      # plants well above
    >>> t, share = threshold_raise(np.r_[noise, crowns], np.ones(140, bool))
    >>> bool(2.0 < t < 4.0 / NEAR and share <= GAP_SHARE)
    True
    """
    grid = np.exp(np.linspace(0.0, math.log(MAX_RAISE), RAISE_STEPS))
    shares = near_shares(ratio, eligible, grid)
    ok = np.flatnonzero(shares <= GAP_SHARE)
    i = int(ok[0]) if ok.size else int(np.argmin(shares))
    return float(grid[i]), float(shares[i])


@dataclass(frozen=True)
class _LayerJob:
    """One candidate layer to score, self-contained so that a worker process can score it.

    ``layers`` are the layer in every sample window, ``valid`` and ``core`` the windows'
    valid pixels and cores, ``centre`` the robust centre and scale of the layer's sampled
    values when already known (single base layers).
    """

    label: str
    terms: tuple[tuple[str, float], ...]
    layers: list[np.ndarray]
    valid: list[np.ndarray]
    core: list[tuple[slice, slice]]
    scales: BlobScales
    centre: tuple[float, float] | None


def _score_job(job: _LayerJob) -> dict:
    """:func:`_score_layer` of a job (in a worker: the window statistics built here)."""
    windows = [
        SampleWindow(lay[None], valid, core)
        for lay, valid, core in zip(job.layers, job.valid, job.core, strict=True)
    ]
    return _score_layer(job.layers, _WindowCache(windows, job.scales), centre=job.centre)


def _layer_jobs(windows, roles, scales, options, stride: int) -> Iterator[_LayerJob]:
    """A job per option, each as soon as it is made (a worker may start on it while the
    next is made). Base layers, their sampled values and robust centre and scale are
    computed once, shared by the single-layer options and the weights of the combined
    ones (each base layer divided by its robust standard deviation)."""
    base: dict[str, tuple[list[np.ndarray], tuple[float, float]]] = {}

    def base_of(name: str):
        if name not in base:
            single = [compose_layer(w.data, roles, ((name, 1.0),)) for w in windows]
            vals = np.concatenate(
                [_values(s, w.valid, stride) for s, w in zip(single, windows, strict=True)]
            )
            base[name] = (single, robust_centre_scale(vals))
        return base[name]

    valid = [w.valid for w in windows]
    core = [w.core for w in windows]
    for opt in options:
        if len(opt) == 1:
            layers, centre = base_of(opt[0])
            terms: tuple[tuple[str, float], ...] = ((opt[0], 1.0),)
        else:
            sds = [base_of(name)[1][1] for name in opt]
            terms = tuple((n, 1.0 / sd if sd > 0 else 1.0) for n, sd in zip(opt, sds, strict=True))
            layers = [
                _weighted_sum([base_of(n)[0][i] for n, _w in terms], terms)
                for i in range(len(windows))
            ]
            centre = None
        yield _LayerJob("+".join(opt), terms, layers, valid, core, scales, centre)


class _Queued(list):
    """Layer jobs in order; each one added is handed at once to a :class:`WorkShare`."""

    def __init__(self, share: WorkShare) -> None:
        super().__init__()
        self._share = share

    def append(self, job: _LayerJob) -> None:
        super().append(job)
        self._share.add(job)

    def extend(self, jobs) -> None:
        for job in jobs:
            self.append(job)


class LayerScoring:
    """Candidate layers being scored, started before the layer choice needs them.

    Made by :func:`begin_layer_choice`: the window statistics are computed and the first
    ``BEGIN_JOBS`` classic layers (:func:`candidate_layers`, or ``options``) are made and
    handed to the lent workers, which score them while this process does other work
    (the closed-canopy check). :meth:`classic_jobs` makes the other classic layers, each
    handed out as soon as it is made; :func:`choose_layer` given this object adds the
    log-chromaticity layer, scores here what no worker took and chooses. Leaving the
    ``with`` block without choosing abandons the scoring (see :class:`WorkShare`): at
    most ``BEGIN_JOBS`` layers were scored for nothing.

    Attributes
    ----------
    jobs : list
        The layer jobs made so far, in order (adding one hands it to the workers).
    cache : _WindowCache
        The window statistics shared by every layer.
    """

    #: Layers handed out before the closed-canopy check: one keeps one worker busy
    #: beside this process (two cores) and wastes at most one layer when the canopy is
    #: closed and the layer choice is abandoned.
    BEGIN_JOBS = 1

    def __init__(self, windows, roles, scales, options=None, pool=None, spare=None):
        pool = pool if pool is not None else lent_pool()
        self._share = WorkShare(_score_job, pool)
        # spare layers (not candidates): scored on a worker once every candidate job is
        # taken, used if asked for (spare_choice), else abandoned with the choice
        self._pool, self._spare_options = pool, list(spare or ())
        self._spare: WorkShare | None = None
        self._spare_jobs: list[_LayerJob] = []
        self._windows, self._roles, self._scales = windows, roles, scales
        try:
            self.cache = cache = _WindowCache(windows, scales)
            self.jobs = _Queued(self._share)
            options = options or candidate_layers(roles)
            self._rest = _layer_jobs(windows, roles, scales, options, cache.stride)
            for _i, job in zip(range(self.BEGIN_JOBS), self._rest, strict=False):
                self.jobs.append(job)
        except BaseException:
            self._share.__exit__(None, None, None)
            raise

    def classic_jobs(self) -> _Queued:
        """The job list with every classic layer made (each handed out as it is made)."""
        self.jobs.extend(self._rest)
        return self.jobs

    def results(self) -> list[dict]:
        """Every job's score (:func:`_score_layer`) in job order; no job can be added after."""
        cache = self.cache
        return self._share.results(lambda job: _score_layer(job.layers, cache, centre=job.centre))

    def queue_spare(self) -> None:
        """Make the spare layers' jobs and queue them for the workers, which start on them
        once every candidate job is taken (:class:`ecoscan.detect.tiling.WorkShare`,
        ``after``). Only with workers: without them a spare layer is scored when asked for."""
        if self._spare is not None or not self._spare_options or self._pool is None:
            return
        self._spare = WorkShare(_score_job, self._pool, after=self._share)
        jobs = _layer_jobs(
            self._windows, self._roles, self._scales, self._spare_options, self.cache.stride
        )
        for job in jobs:
            self._spare_jobs.append(job)
            self._spare.add(job)

    def spare_choice(self, name: str) -> LayerChoice:
        """The choice :func:`choose_layer` makes among ``[(name,)]`` alone (``chroma`` off),
        from the spare layer's score: its worker's result, or scored here now. Every field
        is the same except ``elongation``, which is not measured (left empty)."""
        if self._spare is not None:
            results = self._spare.results(
                lambda job: _score_layer(job.layers, self.cache, centre=job.centre)
            )
            found = [
                (job, res)
                for job, res in zip(self._spare_jobs, results, strict=True)
                if job.label == name
            ]
            if found:
                job, res = found[0]
                return _single_choice(job, res, self.cache.scales)
        job = next(
            _layer_jobs(self._windows, self._roles, self._scales, [(name,)], self.cache.stride)
        )
        return _single_choice(
            job, _score_layer(job.layers, self.cache, centre=job.centre), self._scales
        )

    def __enter__(self) -> LayerScoring:
        return self

    def __exit__(self, *exc) -> None:
        try:  # the spare first: its helper may wait for the candidates' share
            if self._spare is not None:
                self._spare.__exit__(*exc)
        finally:
            self._share.__exit__(*exc)


def begin_layer_choice(
    windows: list[SampleWindow],
    roles: tuple[str, ...],
    scales: BlobScales,
    options: list[tuple[str, ...]] | None = None,
    pool: EarlyPool | None = None,
    spare: list[tuple[str, ...]] | None = None,
) -> LayerScoring:
    """Start scoring the classic candidate layers; :func:`choose_layer` finishes the choice.

    Detection calls this before its closed-canopy check (:mod:`ecoscan.detect.canopy`),
    so that the lent workers (:func:`ecoscan.detect.tiling.lend_pool`) score layers while
    this process runs the check; the choice is the same, to the bit, as
    :func:`choose_layer` alone. Use it as a context manager: leaving the block without
    choosing (the canopy is closed) abandons the scoring.

    Parameters
    ----------
    windows, roles, scales, options, pool
        As for :func:`choose_layer`.
    spare : list of tuple of str, optional
        Layers that are not candidates but may be needed once the choice is made (the
        second evidence layer, :mod:`ecoscan.detect.pale_crowns`): scored on a worker
        that would otherwise wait, once every candidate is taken, and read with
        :meth:`LayerScoring.spare_choice`; abandoned with the block when not asked for.

    Returns
    -------
    LayerScoring

    Examples
    --------
    >>> import numpy as np
    >>> from ecoscan.detect.blobs import blob_scales
    >>> rng = np.random.default_rng(0)
    >>> img = rng.normal(100.0, 2.0, (3, 96, 96)).astype(np.float32)
    >>> win = SampleWindow(img, np.ones((96, 96), bool), (slice(0, 96), slice(0, 96)))
    >>> roles = ("red", "green", "blue")
    >>> with begin_layer_choice([win], roles, blob_scales(6, 12)) as scoring:
    ...     first = [job.label for job in scoring.jobs]  # Excess Green goes first
    ...     every = [job.label for job in scoring.classic_jobs()]
    >>> first, every
    (['exg'], ['exg', 'darkness', 'exg+darkness'])
    """
    return LayerScoring(windows, roles, scales, options, pool, spare)


def choose_layer(
    windows: list[SampleWindow],
    roles: tuple[str, ...],
    scales: BlobScales,
    options: list[tuple[str, ...]] | None = None,
    pool: EarlyPool | None = None,
    chroma: bool = True,
    scoring: LayerScoring | None = None,
) -> LayerChoice:
    """Score candidate layers on sample windows and keep the best separated one.

    Parameters
    ----------
    windows : list of SampleWindow
        Full-resolution windows of the raster (bands in the order of ``roles``).
    roles : tuple of str
        Band roles (``red``, ``green``, ``blue``, ``nir``, ``band``).
    scales : BlobScales
        The scales the detector will search.
    options : list of tuple of str, optional
        Layers to try (default :func:`candidate_layers`); a layer of several base layers is
        their sum, each scaled by its own background standard deviation.
    pool : EarlyPool, optional
        Worker processes started for the tiles (:class:`ecoscan.detect.tiling.EarlyPool`):
        while this process scores some layers, the workers score others
        (:class:`ecoscan.detect.tiling.WorkShare`). The choice is the same, to the bit.
        Default: the pool lent by :func:`ecoscan.detect.tiling.lend_pool` (detection
        lends the workers it started), else none.
    chroma : bool, optional
        Also try the log-chromaticity layer (:mod:`ecoscan.detect.chromaticity`) on
        red, green and blue bands without near infrared (default True).
    scoring : LayerScoring, optional
        The classic layers already being scored (:func:`begin_layer_choice`, called with
        the same windows, roles, scales, options and pool); default: start them here.

    Returns
    -------
    LayerChoice

    Examples
    --------
    >>> import numpy as np
    >>> from ecoscan.detect.blobs import blob_scales
    >>> rng = np.random.default_rng(0)
    >>> img = np.stack([np.full((96, 96), 150.0), np.full((96, 96), 120.0),
    ...                 np.full((96, 96), 90.0)]) + rng.normal(0, 2, (3, 96, 96))
    >>> yy, xx = np.mgrid[:96, :96]
    >>> disc = (yy - 48) ** 2 + (xx - 48) ** 2 < 64
    >>> img[:, disc] = np.array([60.0, 120.0, 50.0])[:, None]
    >>> win = SampleWindow(img.astype(np.float32), np.ones((96, 96), bool),
    ...                    (slice(0, 96), slice(0, 96)))
    >>> choice = choose_layer([win], ("red", "green", "blue"), blob_scales(6, 12))
    >>> choice.candidates
    1
    """
    own = scoring is None
    if scoring is None:
        scoring = begin_layer_choice(windows, roles, scales, options, pool)
    try:
        jobs = scoring.classic_jobs()  # adding a job hands it to the workers
        if chroma and _has_colour(roles):
            jobs.extend(_invariant_jobs(windows, roles, scales))
        scoring.queue_spare()  # for idle workers, after every candidate job
        results = scoring.results()
    finally:
        if own:
            scoring.__exit__(None, None, None)
    scores: dict[str, float] = {}
    best: tuple | None = None
    classic = max(
        (r["separation"] for j, r in zip(jobs, results, strict=True) if j.label not in SHADOW_FREE),
        default=0.0,
    )
    for job, res in zip(jobs, results, strict=True):
        scores[job.label] = round(res["separation"], 3)
        if job.label in SHADOW_FREE and res["separation"] < SHADOW_FREE_MARGIN * classic:
            continue  # the log-chromaticity layers must clearly beat the classic ones
        if best is None or res["separation"] > best[2]["separation"]:
            best = (job.label, job.terms, res)
    assert best is not None
    label, terms, res = best
    layers = next(job.layers for job in jobs if job.label == label)
    elong = _kept_elongation(layers, windows, res.get("kept_blobs"), res["background"])
    # the log-chromaticity layer takes thresholds from the valley of its candidates, and
    # takes over where the classic choice is unusable (_shadow_free_valley)
    valley = _shadow_free_valley(jobs, results, scoring.cache, label, res, elong, roles)
    blur = 0.0
    if valley is not None:
        label, terms, layers, res, elong = valley
        scores[label + "-valley"] = round(res["separation"], 3)
        blur = res["band_blur_px"]
    return _as_choice(label, terms, res, scales, scores, elong, blur)


def _as_choice(label, terms, res: dict, scales, scores: dict, elong: dict, blur: float):
    """The :class:`LayerChoice` of a scored layer (:func:`_score_layer`'s result)."""
    m, s = res["background"], res["spread"]
    thresholds = res["raise"] * response_mads(scales) * res["response_spread"]
    return LayerChoice(
        name=label,
        terms=terms,
        background=m,
        spread=s,
        min_response=tuple(float(v) for v in thresholds),
        min_contrast=float(np.median(thresholds) / DISC_RESPONSE),
        threshold_raise=res["raise"],
        min_value=-math.inf if res["closed"] else res.get("min_value", m + VALUE_MADS * s),
        closed=res["closed"],
        separation=res["separation"],
        near_share=res["near_share"],
        candidates=res["candidates"],
        scores=scores,
        elongation=elong,
        band_blur_px=blur,
    )


def _single_choice(job: _LayerJob, res: dict, scales: BlobScales) -> LayerChoice:
    """:func:`choose_layer`'s choice among one classic layer alone, without the elongation
    of its blobs: with no log-chromaticity job the valley rule (:func:`_shadow_free_valley`)
    never takes over, so nothing else depends on it."""
    from ecoscan.detect.elongation import common_elongation

    empty = common_elongation(np.empty((0, 2)))
    scores = {job.label: round(res["separation"], 3)}
    return _as_choice(job.label, job.terms, res, scales, scores, empty, 0.0)


def _has_colour(roles: tuple[str, ...]) -> bool:
    """Red, green and blue bands and no near infrared (where NDVI is the better layer)."""
    return {"red", "green", "blue"} <= set(roles) and "nir" not in roles


def _invariant_jobs(windows, roles, scales) -> list[_LayerJob]:
    """The log-chromaticity layer (:func:`ecoscan.detect.chromaticity.invariant_terms`,
    its projection chosen on the sample windows) as a job to score like the others.

    Tried and not kept: the same plus darkness (each scaled by its robust standard
    deviation) as a second job. On the suite's development seeds of conifer pasture it won
    on seeds 7 and 11 (F1 0.26 -> 0.38, 0.19 -> 0.42, its blobs still joined to the
    shadows) and nowhere else; a fifth layer to score costs a fifth more layer choice."""
    from ecoscan.detect.chromaticity import invariant_terms

    terms, _angle, _tail = invariant_terms(
        [w.data for w in windows], [w.valid for w in windows], roles
    )
    layers = [compose_layer(w.data, roles, terms) for w in windows]
    valid = [w.valid for w in windows]
    core = [w.core for w in windows]
    return [_LayerJob(INVARIANT, terms, layers, valid, core, scales, None)]


def _band_blur(scales: BlobScales) -> float:
    """Smoothing of the bands before the log-chromaticities, from the smallest blob scale."""
    from ecoscan.detect.chromaticity import band_blur_px

    return band_blur_px(float(scales.sigmas[0]))


def _shadow_free_valley(
    jobs, results, cache: _WindowCache, label: str, res: dict, elong, roles: tuple[str, ...]
):
    """The log-chromaticity layer with thresholds from the valley between its candidates:
    ``(label, terms, layers, result, elongation)`` to use instead of the choice made, or
    None to keep it.

    Where that layer won the separation contest, and where the classic layers' best choice
    is unusable: fewer than ``MIN_CANDIDATES`` kept (the detector would fall back to Otsu's
    split) or fewer than ``FEW_SHARE`` of the classic layer that kept most, or blobs
    stretched along one axis (crowns joined to their cast shadows,
    :func:`ecoscan.detect.elongation.is_aligned`). Unless the valley on the layer of single
    pixels is clean (at most ``GAP_SHARE`` of the kept candidates within a factor ``NEAR``
    of the threshold, as in :func:`threshold_raise`), the layer is then made of the bands
    smoothed before the log (:func:`ecoscan.detect.chromaticity.band_blur_px`) and scored
    afresh; the contest used the layer of single pixels, so the smoothing changes no layer
    choice elsewhere. The layer's response noise is the spread
    of its background response floored over scales
    (:func:`ecoscan.detect.chromaticity.floor_spread`); a candidate must reach the ground's
    median level and a response in the valley between the ground's bumps and the plants
    (:func:`ecoscan.detect.chromaticity.valley_factor`); at least ``MIN_CANDIDATES`` must
    be kept. Taking over an unusable choice needs, besides, at least
    ``SHADOW_FREE_SHARE`` as many kept candidates as the classic layer that kept most
    (docs/detection-history.md, "Conifer pasture, fourth round").
    """
    from ecoscan.detect.chromaticity import shallow_valley, valley_threshold
    from ecoscan.detect.detectors.blob import MIN_CANDIDATES
    from ecoscan.detect.elongation import is_aligned

    won = label in SHADOW_FREE
    most_classic = max(
        (r["candidates"] for j, r in zip(jobs, results, strict=True) if j.label not in SHADOW_FREE),
        default=0,
    )
    few = res["candidates"] < max(MIN_CANDIDATES, FEW_SHARE * most_classic)
    if not won and not few and not is_aligned(elong):
        return None
    found = [(j, r) for j, r in zip(jobs, results, strict=True) if j.label in SHADOW_FREE]
    if not found or found[0][1]["closed"]:
        return None
    job, cres = found[0]
    layers, blur = job.layers, 0.0
    cand, sr, ratio, zok, factor = _valley_candidates(layers, cres, cache)
    if near_shares(ratio, zok, np.array([factor]))[0] > GAP_SHARE:
        # no clean gap on the layer of single pixels (measured: 0 on tuning ``pines`` and
        # ``pasture``, 0.24-0.34 on ``conifers``, 0.54-0.80 on the suite's conifer
        # pasture): the layer of locally averaged bands (chromaticity.band_blur_px),
        # scored afresh. The contest above used the layer of single pixels, so the
        # smoothing changes no layer choice elsewhere
        blur = _band_blur(cache.scales)
        layers = [compose_layer(w.data, roles, job.terms, blur) for w in cache.windows]
        cres = _score_layer(layers, cache)
        if cres["closed"]:
            return None
        cand, sr, ratio, zok, factor = _valley_candidates(layers, cres, cache)
    m = cres["background"]
    kept = (ratio >= factor) & zok
    n_kept = int(kept.sum())
    others = [r["candidates"] for j, r in zip(jobs, results, strict=True) if j is not job]
    most = max(others, default=0)
    if n_kept < MIN_CANDIDATES or (not won and n_kept < SHADOW_FREE_SHARE * most):
        return None
    near = float(near_shares(ratio, zok, np.array([factor]))[0])
    blobs = np.array([cand[k][kept] for k in _KEPT_FIELDS], dtype=float)
    own = _kept_elongation(layers, cache.windows, blobs, m)
    med = RESPONSE_MADS * float(np.median(ratio[kept])) / factor
    separation = med * (1.0 - min(1.0, near))
    out = {
        **cres,
        "response_spread": sr,
        # in a shallow valley the detection's threshold sits lower: the open ring test
        # drops the shoulders (rims, shadow edges) of the ground group (conifer12)
        # (the score as recorded in choice.scores, which open_ring reads)
        "raise": valley_threshold(factor) if shallow_valley(round(separation, 3)) else factor,
        "separation": separation,
        "near_share": near,
        "candidates": n_kept,
        "min_value": m,
        "kept_blobs": blobs,
        "band_blur_px": blur,
    }
    return job.label, job.terms, layers, out, own


def _valley_candidates(layers, cres: dict, cache: _WindowCache):
    """Candidates of the log-chromaticity layer under the valley rule: the candidates, the
    floored response spread, each candidate's ratio to its noise threshold, whether it
    reaches the background median, and the valley factor."""
    from ecoscan.detect.chromaticity import floor_spread, valley_factor

    m = cres["background"]
    sr = floor_spread(cres["response_spread"])
    cand = _candidates(_LayerPyramids(layers, cache, m), 0.5 * sr)
    si = _scale_index(cache.scales, cand["sigma"])
    ratio = cand["response"] / sr[si] / response_mads(cache.scales)[si]
    zok = cand["value"] >= m
    return cand, sr, ratio, zok, valley_factor(ratio, zok)


def _kept_elongation(layers, windows, kept, level: float) -> dict:
    """:func:`ecoscan.detect.elongation.common_elongation` of the kept candidates (the
    strongest ``MAX_BLOBS``) on the chosen layer in the sample windows."""
    from ecoscan.detect.elongation import MAX_BLOBS, blob_elongations, common_elongation

    if kept is None or kept.shape[1] == 0:
        return common_elongation(np.empty((0, 2)))
    kept = dict(zip(_KEPT_FIELDS, kept, strict=True))
    order = np.argsort(-kept["response"], kind="stable")[:MAX_BLOBS]
    parts = []
    for wi, (lay, win) in enumerate(zip(layers, windows, strict=True)):
        sel = order[kept["w"][order] == wi]
        if sel.size:
            parts.append(
                blob_elongations(
                    lay,
                    win.valid,
                    kept["row"][sel],
                    kept["col"][sel],
                    math.sqrt(2) * kept["sigma"][sel],
                    level,
                )
            )
    return common_elongation(np.vstack(parts) if parts else np.empty((0, 2)))
