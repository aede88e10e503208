"""A second evidence layer for pale and grey crowns, used only to add crowns Excess Green lacks.

Grey, olive and senescent shrubs have an Excess Green value close to the soil's: about
half of the grey crowns of the scene suite's dry shrubs form no Excess Green blob at all.
On the green-red index GRVI = (G − R) / (G + R) (:func:`ecoscan.detect.indices.green_red`)
they do stand out, because reddish soil is clearly negative and grey foliage near zero;
but so do the cast shadows next to every crown (shade is bluer and less red than lit
soil), and bright soil patches of a less red tint. So GRVI does not replace Excess Green:
its blobs are searched as a second layer, with thresholds from its own background
statistics (:func:`ecoscan.detect.autotune.choose_layer`), and a GRVI blob becomes a crown
only where

1. no Excess Green crown lies within :data:`CLEAR_RADII` of that crown's radius (plus half
   the GRVI blob's radius, the pruning margin). A cast shadow starts at its crown's edge
   and reaches about one crown height beyond it; at the suite's and tuning scenes' sun
   elevations (35–55°) its blob centre lies 1.2–1.7 crown radii from the crown's centre
   (measured on the suite's development seeds), inside the cleared zone;
2. the brightness (mean of the visible bands) at its centre, smoothed at the smallest
   searched scale, is at most :data:`MAX_BRIGHTNESS` times the median brightness of the
   sampled pixels. A crown shades itself and is darker than the open ground around it
   (the premise of the darkness layer; common practice in crown delineation); a bright
   soil patch of a less red tint is not.

GRVI blobs left after these tests are pruned among themselves like Excess Green blobs and
added to the points. Before that, a GRVI blob that holds only smaller Excess Green points
stands for the whole crown and replaces them (:func:`whole_crowns`): big dry and grey
crowns are green only in their lobes and leaf clumps, which Excess Green finds off the
crown's centre. The layer is used only where the main layer is Excess Green alone
(with a darkness term it added pale grass patches on the tuning scenes ``grass``) on
smooth ground (no threshold raise) and not a closed canopy, and only when GRVI itself
separates (its own threshold raised at most :data:`MAX_SECOND_RAISE` times, at least ten
candidates in the sample windows); elsewhere detection is unchanged.

Everything a tile needs is fixed once per raster in :class:`SecondLayer`; the GRVI blobs
and their brightness are exact in every tile's core (the brightness smoothing reaches less
far than the blob filters), and the clearing and pruning run over all tiles at once, so
tiled runs equal whole-image runs.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ecoscan.detect import blobs

__all__ = [
    "CLEAR_RADII",
    "LAYER",
    "MAX_BRIGHTNESS",
    "MAX_SECOND_RAISE",
    "SecondLayer",
    "added_points",
    "find_second",
    "plain_excess_green",
    "second_layer",
    "spare_layers",
    "whole_crowns",
]

#: Base layer of the second evidence layer (:func:`ecoscan.detect.engine.base_layer`).
LAYER = "grvi"
#: A GRVI blob is dropped when an Excess Green crown's centre lies within this many of that
#: crown's radii (plus half the GRVI blob's radius): the crown's own cast shadow. Chosen on
#: the suite's development seeds 0, 7, 11 (2.0, 2.5 and 3.0 tried) and checked on the
#: tuning scenes (docs/detection-history.md, "Grey crowns: a second evidence layer").
CLEAR_RADII = 2.0
#: A GRVI blob replaces the Excess Green points inside its radius when each of them is at
#: most this share of its radius (they are lobes of the crown it covers, not crowns of
#: their own) and none scores higher (:func:`whole_crowns`). Chosen on suite seeds 0, 7,
#: 11 and 500-520 of dry shrubs (0.6, 0.7 and 0.8 tried) and checked on the tuning scenes
#: (docs/detection-history.md, "Big dry crowns placed whole (dry11)").
WHOLE_SHARE = 0.7
#: A GRVI blob must be at most this many times as bright as the median sampled pixel.
MAX_BRIGHTNESS = 1.0
#: The main (Excess Green) layer at a GRVI blob's centre, smoothed at the smallest searched
#: scale, must reach its background median plus this many robust SDs: grey foliage is a
#: little greener than soil, dark rocks and stones (neutral grey) are not.
MAIN_VALUE_MADS = 0.5
#: Fewest GRVI candidates in the sample windows for the layer to be used.
MIN_SECOND_CANDIDATES = 10
#: Highest threshold raise of GRVI's own layer choice (:func:`ecoscan.detect.autotune.
#: threshold_raise`) for the second layer to be used; its response thresholds carry the
#: raise. GRVI blobs of the suite's dry shrubs sit on mottled soil and shadows as well as
#: on grey crowns, so on some scenes the gap search lifts GRVI's threshold by one or two
#: grid steps (1.08 or 1.25) while Excess Green needs none; with a bound of 1.0 the second
#: layer was off on exactly those scenes (3 of 24 dry-shrub diagnosis scenes, the two
#: lowest among them). Chosen on suite seeds 0, 7, 11 and 900-920 (dry12); the tuning
#: styles mixed, grass, clumps, coarse, jpeg and pasture and the development seeds of the
#: other RGB suite styles gave the same points
#: (docs/detection-history.md, "Dry shrubs: the GRVI second layer where GRVI's
#: threshold is raised a little").
MAX_SECOND_RAISE = 1.3


@dataclass(frozen=True)
class SecondLayer:
    """The second evidence layer of a raster, fixed once (picklable, sent to every tile).

    Attributes
    ----------
    terms : tuple of (str, float)
        The layer as a weighted sum of base layers (:func:`ecoscan.detect.engine.compose_layer`).
    min_response : tuple of float
        Response threshold per scale of the blob scales.
    min_value : float
        Lowest smoothed layer value at a blob's centre.
    background : float
        Median of the layer over background pixels (also the fill value).
    max_brightness : float
        Highest smoothed brightness (mean of the visible bands) at a kept blob's centre.
    main_min_value : float
        Lowest smoothed value of the main (Excess Green) layer at a kept blob's centre.
    score_scale : float
        Factor that puts a GRVI response on the main layer's scale (ratio of the two
        layers' median response thresholds), so scores of added points compare with the
        others'.
    """

    terms: tuple[tuple[str, float], ...]
    min_response: tuple[float, ...]
    min_value: float
    background: float
    max_brightness: float
    main_min_value: float
    score_scale: float


def plain_excess_green(choice, roles: tuple[str, ...]) -> bool:
    """True when the main layer is Excess Green alone on smooth ground, in an RGB image.

    Smooth ground: no threshold raise (on rough ground the ring test judges each blob) and
    not a closed canopy. With a darkness term the second layer added pale grass patches on
    the tuning scenes ``grass``; with near infrared the main layer is NDVI. The second
    layer (:func:`second_layer`) and the lobed-crown rule
    (:func:`ecoscan.detect.blobs.lobed_parents`) are used only here.

    Examples
    --------
    >>> from ecoscan.detect.autotune import LayerChoice
    >>> exg = LayerChoice("exg", (("exg", 1.0),), 0.0, 1.0, (1.0,), 1.0, 1.0, 5.0, 0.0, 20)
    >>> plain_excess_green(exg, ("red", "green", "blue"))
    True
    >>> plain_excess_green(exg, ("red", "green", "blue", "nir"))
    False
    """
    if not {"red", "green", "blue"} <= set(roles) or "nir" in roles:
        return False
    if choice.closed or choice.threshold_raise > 1.0 or not math.isfinite(choice.min_value):
        return False
    return tuple(n for n, _w in choice.terms) == ("exg",)


def second_layer(
    choice, windows, roles: tuple[str, ...], scales, scoring=None
) -> SecondLayer | None:
    """The second evidence layer for a raster whose main layer is ``choice``, or None.

    Parameters
    ----------
    choice : ecoscan.detect.autotune.LayerChoice
        The main layer chosen from the image.
    windows : list of ecoscan.detect.autotune.SampleWindow
        The sample windows it was chosen on (bands in the order of ``roles``).
    roles : tuple of str
        Band roles.
    scales : ecoscan.detect.blobs.BlobScales
        The scales searched.
    scoring : ecoscan.detect.autotune.LayerScoring, optional
        The layer choice's scoring, begun with :data:`LAYER` as a spare layer
        (:func:`spare_layers`): its score is then taken from the worker that scored it
        while the choice was made. The same thresholds either way.

    Returns
    -------
    SecondLayer or None
        None unless the main layer is Excess Green alone on smooth ground (no threshold
        raise, not a closed canopy) and GRVI separates there too.

    Examples
    --------
    >>> from ecoscan.detect.autotune import LayerChoice
    >>> dark = LayerChoice("darkness", (("darkness", 1.0),), 0.0, 1.0, (1.0,), 1.0, 1.0,
    ...                    5.0, 0.0, 20)
    >>> second_layer(dark, [], ("red", "green", "blue"), None) is None
    True
    """
    from ecoscan.detect.autotune import choose_layer

    if not plain_excess_green(choice, roles):
        return None
    if scoring is not None:  # scored beside the choice (its blobs' elongation not needed)
        grvi = scoring.spare_choice(LAYER)
    else:
        grvi = choose_layer(windows, roles, scales, options=[(LAYER,)], chroma=False)
    if (
        grvi.closed
        or grvi.threshold_raise > MAX_SECOND_RAISE
        or grvi.candidates < MIN_SECOND_CANDIDATES
    ):
        return None
    pos = {r: i for i, r in enumerate(roles)}
    vis = [pos["red"], pos["green"], pos["blue"]]
    bright = np.concatenate(
        [w.data[vis][:, w.core[0], w.core[1]].mean(axis=0)[w.valid[w.core]] for w in windows]
    )
    level = float(np.median(bright)) if bright.size else math.inf
    main_thr = float(np.median(choice.min_response))
    own_thr = float(np.median(grvi.min_response))
    return SecondLayer(
        terms=grvi.terms,
        min_response=grvi.min_response,
        min_value=grvi.min_value,
        background=grvi.background,
        max_brightness=MAX_BRIGHTNESS * level,
        main_min_value=choice.background + MAIN_VALUE_MADS * choice.spread,
        score_scale=main_thr / own_thr if own_thr > 0 else 1.0,
    )


def spare_layers(roles: tuple[str, ...]) -> list[tuple[str, ...]]:
    """The second evidence layer as a spare layer of the layer choice
    (:func:`ecoscan.detect.autotune.begin_layer_choice`, ``spare``) where it may be used:
    red, green and blue bands without near infrared; none elsewhere.

    Examples
    --------
    >>> spare_layers(("red", "green", "blue"))
    [('grvi',)]
    >>> spare_layers(("blue", "green", "red", "nir"))
    []
    """
    if not {"red", "green", "blue"} <= set(roles) or "nir" in roles:
        return []
    return [(LAYER,)]


def find_second(
    data: np.ndarray,
    main_layer: np.ndarray,
    roles: tuple[str, ...],
    second: SecondLayer,
    scales: blobs.BlobScales,
    valid: np.ndarray,
    origin: tuple[int, int],
) -> dict[str, np.ndarray]:
    """GRVI blobs of one window that pass the brightness and main-layer tests (raster
    pixel frame).

    Parameters
    ----------
    data : numpy.ndarray
        The window's bands, shape (bands, rows, columns), in the order of ``roles``.
    main_layer : numpy.ndarray
        The main detection layer of the window (invalid pixels filled).
    roles : tuple of str
        Band roles.
    second : SecondLayer
        The raster's second layer.
    scales : ecoscan.detect.blobs.BlobScales
        The scales searched.
    valid : numpy.ndarray of bool
        Valid pixels of the window.
    origin : (int, int)
        Column and row of the window's first pixel in the raster.

    Returns
    -------
    dict of numpy.ndarray
        ``row``, ``col``, ``sigma``, ``response`` (on the main layer's scale: times
        ``score_scale``) and ``value`` (GRVI at the centre) of the kept blobs.
    """
    from ecoscan.detect.engine import compose_layer

    layer = compose_layer(data, roles, second.terms)
    if not valid.all():
        layer[~valid] = second.background
    found = blobs.detect_blobs(
        layer,
        scales,
        np.asarray(second.min_response),
        second.min_value,
        valid,
        origin=origin,
        background=second.background,
    )
    if found["row"].size == 0:
        return found
    pos = {r: i for i, r in enumerate(roles)}
    bright = (data[pos["red"]] + data[pos["green"]] + data[pos["blue"]]) / np.float32(3.0)
    sigma = float(scales.sigmas[1])
    h, w = bright.shape
    r = np.clip(np.rint(found["row"] - origin[1]).astype(int), 0, h - 1)
    c = np.clip(np.rint(found["col"] - origin[0]).astype(int), 0, w - 1)
    # float32 already (the bands are): no copy of the window
    keep = smoothed_at(np.asarray(bright, np.float32), r, c, sigma) <= second.max_brightness
    # the main-layer test only where the brightness test passed (the same blobs kept)
    main_at = smoothed_at(np.asarray(main_layer, np.float32), r[keep], c[keep], sigma)
    keep[keep] = main_at >= second.main_min_value
    out = {k: v[keep] for k, v in found.items()}
    out["response"] = out["response"] * second.score_scale
    return out


def smoothed_at(
    image: np.ndarray, rows: np.ndarray, cols: np.ndarray, sigma: float
) -> np.ndarray:
    """The Gaussian-smoothed image at some pixels only, the same floats as
    ``scipy.ndimage.gaussian_filter(image, sigma)[rows, cols]``.

    Each pixel's value depends only on the pixels within the filter's radius (its
    ``truncate`` of 4 σ). The filter makes two separable passes, along rows and then
    along columns, each summing in double precision the centre times its weight and then
    the pairs of pixels at equal distance, farthest pair first, times their weight, and
    rounding to the image's type. Here the first pass is made only on the patch's centre
    row and the second only at its centre, in that same order, so the value is the
    filter's to the bit (tested against scipy), at about a fortieth of the work of
    filtering the patch. Patches that reach past the image's edge are mirrored as the
    filter's default ``reflect`` mode does. A window holds a few hundred candidate crowns
    and about a million pixels: this costs far less than one whole-window filter.

    Parameters
    ----------
    image : numpy.ndarray
        A 2-D float image.
    rows, cols : numpy.ndarray of int
        Pixel indices inside the image.
    sigma : float
        Gaussian σ in pixels.

    Returns
    -------
    numpy.ndarray
        One smoothed value per pixel, of the image's dtype.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import ndimage
    >>> img = np.arange(100, dtype=np.float32).reshape(10, 10) ** 1.5
    >>> rows, cols = np.array([0, 4, 9]), np.array([9, 5, 0])
    >>> bool(np.array_equal(smoothed_at(img, rows, cols, 1.2),
    ...                     ndimage.gaussian_filter(img, 1.2)[rows, cols]))
    True
    """
    from numpy.lib.stride_tricks import sliding_window_view

    rows = np.asarray(rows, np.intp)
    cols = np.asarray(cols, np.intp)
    radius = int(4.0 * float(sigma) + 0.5)
    size = 2 * radius + 1
    weights = blobs._gaussian_weights(float(sigma))  # scipy.ndimage's kernel
    h, w = image.shape
    inside = (rows >= radius) & (rows < h - radius) & (cols >= radius) & (cols < w - radius)
    view = sliding_window_view(image, (size, size)) if min(h, w) >= size else None
    offsets = np.arange(-radius, radius + 1)
    out = np.empty(rows.size, image.dtype)
    for start in range(0, rows.size, 1024):  # at most 1024 patches in memory at once
        part = slice(start, start + 1024)
        r, c, ins = rows[part], cols[part], inside[part]
        patches = np.empty((r.size, size, size), image.dtype)
        if view is not None and ins.any():
            patches[ins] = view[r[ins] - radius, c[ins] - radius]
        if not ins.all():  # mirrored at the image's edges
            edge = ~ins
            rr = _mirrored(r[edge, None] + offsets, h)
            cc = _mirrored(c[edge, None] + offsets, w)
            patches[edge] = image[rr[:, :, None], cc[:, None, :]]
        # along rows (the image's first axis) at the centre row, then along that row
        across = _centre_sum(np.swapaxes(patches, 1, 2), weights).astype(image.dtype)
        out[part] = _centre_sum(across, weights).astype(image.dtype)
    return out


def _mirrored(index: np.ndarray, n: int) -> np.ndarray:
    """Indices beyond ``[0, n)`` mirrored about the edges (``d c b a | a b c d | d c b a``,
    scipy.ndimage's ``reflect`` mode), repeatedly where they reach further than ``n``."""
    index = np.mod(index, 2 * n)
    return np.where(index >= n, 2 * n - 1 - index, index)


def _centre_sum(lines: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The symmetric correlation of each line (last axis, odd length) at its centre, in
    float64: centre times its weight, then each pair at equal distance (farthest first)
    times its weight, in the order scipy.ndimage's ``correlate1d`` sums them."""
    radius = lines.shape[-1] // 2
    acc = lines[..., radius].astype(np.float64) * weights[radius]
    for j in range(radius):
        acc += (lines[..., j].astype(np.float64) + lines[..., 2 * radius - j]) * weights[j]
    return acc


def whole_crowns(
    main_x: np.ndarray,
    main_y: np.ndarray,
    main_radius: np.ndarray,
    main_score: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    score: np.ndarray,
    share: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Second-layer blobs that stand for a whole crown whose main-layer points are lobes.

    A big dry or grey crown is green only in a few lobes or leaf clumps; Excess Green finds
    those, each a small blob 0.4-0.8 crown radii from the centre (beyond the matching
    tolerance), while the green-red index sees the crown whole, one blob at its centre.
    Such a blob is then dropped by :func:`added_points` (main points lie inside it). Here a
    second-layer blob takes over when at least one main point lies within its radius, every
    such point has at most ``share`` of its radius (a part, not a crown of the blob's own
    size or bigger) and none scores higher; those main points are dropped. Blobs are taken
    strongest first (ties by position); a main point is replaced at most once. A cast
    shadow holds no Excess Green point and a green crown's own blob is not smaller than its
    GRVI blob, so neither takes over.

    Parameters
    ----------
    main_x, main_y, main_radius, main_score : numpy.ndarray
        The main layer's crowns (any consistent unit; scores on one scale with ``score``).
    x, y, radius, score : numpy.ndarray
        The second layer's blobs.
    share : float, optional
        Largest main-point radius, as a share of the blob's radius (default
        :data:`WHOLE_SHARE`; 0 turns the rule off).

    Returns
    -------
    (numpy.ndarray of bool, numpy.ndarray of bool)
        Main points replaced, and second-layer blobs that replace them.

    Examples
    --------
    >>> import numpy as np
    >>> lobes = (np.array([-6.0, 6.0, 40.0]), np.zeros(3), np.array([4.0, 4.0, 4.0]),
    ...          np.array([1.0, 1.0, 1.0]))
    >>> drop, take = whole_crowns(*lobes, np.array([0.0, 40.0]), np.zeros(2),
    ...                           np.array([10.0, 5.0]), np.array([2.0, 2.0]))
    >>> drop.tolist(), take.tolist()
    ([True, True, False], [True, False])
    """
    from scipy.spatial import cKDTree

    if share is None:
        share = WHOLE_SHARE
    drop = np.zeros(main_x.size, dtype=bool)
    take = np.zeros(x.size, dtype=bool)
    if x.size == 0 or main_x.size == 0 or share <= 0:
        return drop, take
    # every blob-point pair within the blob's radius at once, then the blobs whose points
    # are all parts of it; only those few go through the greedy pass (strongest first,
    # each main point replaced once), so the result is the blob-by-blob rule's
    tree = cKDTree(np.column_stack([main_x, main_y]))
    near = tree.query_ball_point(np.column_stack([x, y]), radius)
    counts = np.fromiter((len(n) for n in near), dtype=np.intp, count=x.size)
    if counts.sum() == 0:
        return drop, take
    blob = np.repeat(np.arange(x.size), counts)
    point = np.fromiter((j for n in near for j in n), dtype=np.intp, count=int(counts.sum()))
    inside = np.hypot(main_x[point] - x[blob], main_y[point] - y[blob]) < radius[blob]
    blob, point = blob[inside], point[inside]
    part = (main_radius[point] <= share * radius[blob]) & (main_score[point] <= score[blob])
    has = np.bincount(blob, minlength=x.size) > 0
    whole = has & (np.bincount(blob, weights=~part, minlength=x.size) == 0)
    if not whole.any():
        return drop, take
    by_blob = np.argsort(blob, kind="stable")
    starts = np.searchsorted(blob[by_blob], np.arange(x.size + 1))
    order = np.lexsort((x, y, -score))
    for k in order[whole[order]]:
        j = point[by_blob[starts[k] : starts[k + 1]]]
        if not drop[j].any():
            drop[j] = True
            take[k] = True
    return drop, take


def added_points(
    main_x: np.ndarray,
    main_y: np.ndarray,
    main_radius: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    score: np.ndarray,
    clear_radii: float | None = None,
    margin: float = 0.5,
) -> np.ndarray:
    """Which second-layer blobs become crowns: clear of every main crown, then pruned.

    A blob is dropped when a main crown's centre lies closer than
    ``max(radius, clear_radii × main radius) + margin × min(radius, main radius)`` (its
    cast shadow, a lobe or the rim of a crown already found); the rest are pruned among
    themselves (:func:`ecoscan.detect.blobs.prune_blobs`, the same margin).

    Parameters
    ----------
    main_x, main_y, main_radius : numpy.ndarray
        The main layer's final crowns (any consistent unit).
    x, y, radius, score : numpy.ndarray
        The second layer's blobs.
    clear_radii : float, optional
        Cleared zone around each main crown, in its radii (default :data:`CLEAR_RADII`).
    margin : float
        Pruning margin, as a share of the smaller radius.

    Returns
    -------
    numpy.ndarray of bool
        True for the blobs added as crowns.

    Examples
    --------
    >>> import numpy as np
    >>> main = (np.array([0.0]), np.array([0.0]), np.array([10.0]))
    >>> x = np.array([15.0, 40.0, 44.0]); y = np.zeros(3)
    >>> added_points(*main, x, y, np.full(3, 5.0), np.array([1.0, 1.0, 2.0])).tolist()
    [False, False, True]
    """
    from scipy.spatial import cKDTree

    if clear_radii is None:
        clear_radii = CLEAR_RADII
    n = x.size
    keep = np.ones(n, dtype=bool)
    if n == 0:
        return keep
    if main_x.size:
        tree = cKDTree(np.column_stack([main_x, main_y]))
        reach = max(float(radius.max()), clear_radii * float(main_radius.max()))
        reach += margin * float(max(radius.max(), main_radius.max()))
        pairs = tree.query_ball_point(np.column_stack([x, y]), reach)
        # every (blob k, main crown j) pair within reach at once
        counts = np.fromiter((len(p) for p in pairs), dtype=np.intp, count=n)
        j = np.fromiter(itertools.chain.from_iterable(pairs), np.intp, int(counts.sum()))
        k = np.repeat(np.arange(n), counts)
        d = np.hypot(main_x[j] - x[k], main_y[j] - y[k])
        lim = np.maximum(radius[k], clear_radii * main_radius[j])
        lim = lim + margin * np.minimum(radius[k], main_radius[j])
        keep[k[d < lim]] = False
    idx = np.flatnonzero(keep)
    if idx.size:
        kept = blobs.prune_blobs(x[idx], y[idx], radius[idx], score[idx], margin=margin)
        keep[idx[~kept]] = False
    return keep
