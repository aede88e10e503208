"""Closed canopy: one point per crown by valley-following watershed of smoothed brightness.

Where crowns touch and overlap, there is almost no ground to contrast them with and
neighbours of one species form one plateau in any colour index; blob detection then finds
only a fraction of the crowns. What still separates them is light: each crown is a lit
dome, and between crowns lie darker *valleys* (shaded rims, narrow gaps onto the
understorey). Following those valleys is the classic way to delineate individual crowns
in optical imagery:

* Gougeon, F. A. (1995). A crown-following approach to the automatic delineation of
  individual tree crowns in high spatial resolution aerial images. *Canadian Journal of
  Remote Sensing* 21: 274–284 (valley-following: the dark inter-crown valleys are the
  crown boundaries);
* Culvenor, D. S. (2002). TIDA: an algorithm for the delineation of tree crowns in high
  spatial resolution remotely sensed imagery. *Computers & Geosciences* 28: 33–44 (crowns
  grown from local brightness maxima down to the valleys);
* the valleys are followed by a marker-controlled watershed (Meyer, F. & Beucher, S. 1990,
  Morphological segmentation, *J. Visual Communication and Image Representation* 1: 21–46)
  whose markers are the regional maxima of dynamic at least ``h`` (h-maxima; Soille, P.
  2003, *Morphological Image Analysis*, 2nd ed., Springer, section 6.3.4).

What this module does (:func:`split_crowns`): smooth a brightness layer at a fraction of
the smallest crown radius; take the h-maxima as markers (one per lit dome; a dome's leaf
texture makes maxima shallower than ``h``, which merge); flood the inverted layer from them
so that each region ends on the valleys around its crown; drop regions smaller than a share
of the smallest crown's area (bits of gap, slivers between overlaps). Each crown's position
is its region's centroid weighted by the squared distance to the region's edge, not its
brightness peak: a dome lit from one side has its brightest point well towards the sun
(about 0.7 of the radius in the scene suite's closed canopy) while its region, bounded by
valleys on every side, is centred on the crown. The centre of the region's bright part
still lies towards the sun; that lean is estimated from the centroids of two brightness
level sets of each region (:func:`level_set_lean`) and removed once per raster, by the
median over the sampled crowns (:func:`canopy_split`).

When the imagery default switches to this path is decided once per raster on the sample
windows (:func:`canopy_evidence`, :func:`is_closed_canopy`): nearly all pixels are green
vegetation and brightness does not run against greenness, or the brighter places are
clearly the greener ones (the bright phase of the image is canopy, the dark phase the
gaps). On open ground most pixels are soil, not green; dark crowns on green pasture make
brightness and greenness run opposite.

Everything here is a pure function of arrays; thresholds come from the whole raster
beforehand, so tiled runs with an overlap of two largest crown diameters give the whole
image's result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage

__all__ = [
    "CanopySplit",
    "canopy_evidence",
    "canopy_layer",
    "canopy_split",
    "canopy_tint",
    "colour_edges",
    "is_closed_canopy",
    "join_at_crown_scale",
    "level_set_lean",
    "merge_fragments",
    "split_crowns",
]

#: Smoothing of the brightness layer, as a share of the smallest crown radius: leaf
#: texture merges, the valleys between crowns stay. Tuned on benchmarks/tuning_scenes.py
#: (``canopy``, ``stand``, seeds 100-102).
SMOOTH_SHARE = 0.35
#: Marker dynamic ``h`` as a share of the robust standard deviation of the smoothed layer
#: over the raster's sample windows. Tuned as above.
H_SHARE = 0.1
#: A region's crown part lies above this share of the way from its valley floor to its
#: peak; its centre is computed there. Tuned as above.
CORE_SHARE = 0.5
#: Regions smaller than this share of the smallest crown's disc are gaps or slivers.
MIN_AREA_SHARE = 0.25
#: Neighbouring regions are joined when one crown fits their union better than two by
#: this much roundness (:func:`merge_fragments`). Tuned on benchmarks/tuning_scenes.py.
MERGE_GAIN = 0.1
#: ... and the union is no larger than this share of the largest crown's disc.
MERGE_MAX_AREA_SHARE = 1.2
#: ... and they meet at least this share of the way from the lower valley floor to the
#: lower peak (the valley between them is shallow). Tuned as above.
MERGE_PASS = 0.7
#: ... and their mean tint (green share g / (r + g + b)) differs by at most this much: the
#: fragments of one crown have its colour, neighbours of another species do not. Tuned as
#: above.
MERGE_TINT_STEP = 0.01
#: Joining at the crown's own scale (:func:`join_at_crown_scale`): the layer is smoothed
#: further, to this share of the larger region's equal-area radius, so that leaf clumps
#: inside one crown blur into its dome while the valley between two crowns stays. Chosen
#: on benchmarks/tuning_scenes.py (``canopy``, ``stand``, ``domes``, ``oaks``, seeds
#: 100-103) with the four limits below.
CROWN_SCALE_SHARE = 0.25
#: ... at that scale the two must meet at least this share of the way from the lower
#: valley floor to the lower peak (no valley left between them) ...
CROWN_SCALE_PASS = 0.93
#: ... one disc must fit their union better than two by at least this much roundness ...
CROWN_SCALE_GAIN = 0.05
#: ... their centroids must lie within this many of the union's equal-area radii (two
#: crowns whose centres lie outside each other's crowns lie farther apart) ...
CROWN_SCALE_REACH = 1.05
#: ... and their mean tint g / (r + g + b) may differ by at most this much. One crown's lit
#: and shaded parts differ in tint too: on the tuning style ``oaks`` (seeds 100-101) the
#: pairs of regions of one crown differ by up to 0.033 (95th percentile 0.021), while
#: pairs of two crowns that pass the three tests above differ by a median of 0.038
#: (``canopy``) and 0.045 (``oaks``). 0.02 until the sixth round (canopy10).
CROWN_SCALE_TINT_STEP = 0.03
#: A second way to show there is no valley between two neighbours: on the layer they were
#: grown on, the valley between them is no deeper than this many standard deviations of
#: the layer within the two (the leaf texture inside a crown), with looser geometry and
#: a tighter tint limit (the next three). Chosen on the tuning scenes as above.
TEXTURE_VALLEY_SDS = 0.3
TEXTURE_GAIN = 0.0
TEXTURE_REACH = 1.1
TEXTURE_TINT_STEP = 0.015
#: Joining at the crown's scale presumes shaded domes (leaf clumps make extra maxima on
#: one lit dome); it is switched on only when the raster's lean (:func:`level_set_lean`,
#: in region radii) reaches this: flat-coloured crowns without shading measure 0.019-0.026
#: (tuning ``stand``), shaded ones 0.045-0.089 (``canopy``, ``oaks``, ``domes``).
MIN_DOME_LEAN = 0.035
#: Joining neighbours that are one blob at their union's scale (:func:`join_single_blobs`,
#: on with ``crown_join``): the union's scale-normalised blob response at the midpoint of
#: the two centres must beat this multiple of the weaker part's response at its own
#: scale ...
BLOB_JOIN_RATIO = 1.0
#: ... the two centres must lie within this many of the union's equal-area radii ...
BLOB_JOIN_REACH = 0.9
#: ... a part's own scales reach σ = this × its equal-area radius, the union's from half
#: the centres' distance / √2 up to ``BLOB_JOIN_TOP`` × the largest crown radius / √2
#: (nine scales, geometric, from the smallest crown's r / √2). Chosen on development
#: suite seeds 0, 7, 11 and extra suite seeds 400-405 with the tuning styles ``canopy``,
#: ``oaks``, ``domes`` as the bound (docs/detection-history.md, "Closed canopy, seventh round").
BLOB_JOIN_PART = math.sqrt(2.0)
BLOB_JOIN_TOP = 1.2
#: Rounds of joining at the crown's scale (a crown cut in three needs two).
CROWN_SCALE_ROUNDS = 2
#: The two brightness levels (shares of the way from a region's valley floor to its peak)
#: whose level-set centroids measure the sunward lean (:func:`level_set_lean`).
LEAN_LEVELS = (CORE_SHARE, 0.75)
#: The lean of the crown part's centre is this multiple of the step between the two
#: level-set centroids: LEAN_LEVELS[0] / (LEAN_LEVELS[1] - LEAN_LEVELS[0]) = 2, from the
#: geometry of a Lambertian dome (:func:`level_set_lean`), not tuned.
LEAN_SHARE = LEAN_LEVELS[0] / (LEAN_LEVELS[1] - LEAN_LEVELS[0])
#: With shaded domes (the lean reaches ``MIN_DOME_LEAN``) the centres are moved back by
#: this multiple of the measured lean. The level-set estimate falls short of the drift:
#: a cap that reaches over the dome's visible edge is cut there, so its centroid lies
#: nearer the centre (:func:`level_set_lean`, approximations), and the watershed regions
#: drift with the light too. After the shift by 1 × the lean, matched points on the suite's
#: closed canopy (diagnosis seeds 0, 7, 11, 800-811) still lie a median 0.08-0.12 crown
#: radii towards the sun. Chosen on those seeds and bounded by the tuning styles
#: ``canopy``, ``oaks`` and ``domes`` (seeds 100-103): 1.4 lowers ``canopy`` 103 by
#: 0.006, more than the adoption rule's 0.005 (docs/detection-history.md, "Closed
#: canopy, eighth round").
DOME_LEAN_GAIN = 1.25
#: Colour edges as valleys (:func:`colour_edges`, on with shaded domes): the split's
#: layer is lowered by this many times the colour step across each pixel (σ × the
#: gradient magnitude of the chromatic coordinates r / (r + g + b) and b / (r + g + b),
#: smoothed at σ). A crown's chromaticity is nearly the same over its lit and shaded
#: parts (shading scales all bands alike), while neighbours of other species or of other
#: vigour differ; so the boundary between a darker crown and the flank of a brighter one,
#: where brightness alone has no valley, becomes one. Chosen on suite diagnosis seeds
#: 1200-1220, 0, 7, 11 (docs/detection-history.md): 12 with σ = 0.3 × the smallest crown
#: radius.
EDGE_GAIN = 12.0
#: ... σ of the colour edges, as a share of the smallest crown radius.
EDGE_SHARE = 0.3
#: The lean is measured only over at least this many regions (else no shift).
MIN_LEAN_REGIONS = 10
#: Chromatic Excess Green above which a pixel counts as green vegetation in the switch
#: rule (about the level of dry grass and olive crowns in the tuning scenes).
GREEN_EXG = 0.1
#: The switch fires when nearly all sampled pixels are green vegetation and brightness does
#: not run against greenness (dark trees on a green field give a clearly negative
#: correlation: -0.27 to -0.54 on the tuning scenes ``pasture`` and ``conifers``) ...
CLOSED_GREEN_SHARE = 0.75
CLOSED_MIN_CORR = -0.15
#: ... or when brightness follows greenness closely (crowns packed over dark ground) on a
#: scene that is at least partly green. Open tuning scenes: green share <= 0.50 and
#: correlation <= 0.11; packed ones (``canopy``, ``stand``, ``domes``): 0.49-1.00 and
#: 0.01-0.80 (seeds 100-103).
PACKED_MIN_CORR = 0.4
PACKED_GREEN_SHARE = 0.3
#: ... but never when there is open ground: bright areas wider than any crown. The share of
#: sampled pixels on the bright side of Otsu's split of the smoothed brightness that lie
#: more than ``OPEN_REACH`` largest crown radii from the dark side. Packed tuning scenes
#: (``canopy``, ``stand``, ``domes``, seeds 100-102): at most 0.004; open ones (``grass``,
#: ``pasture``, ``conifers``): at least 0.085. The rule stays closed below ``MAX_OPEN_SHARE``
#: (about the geometric mean of the two). Dark conifers with long shadows on green pasture
#: can look like canopy to the two figures above (correlation -0.12 on one scene), never
#: to this one.
OPEN_REACH = 0.75
MAX_OPEN_SHARE = 0.02


@dataclass(frozen=True)
class CanopySplit:
    """Settings of the watershed crown split, fixed once per raster.

    Attributes
    ----------
    r_min_px, r_max_px : float
        Smallest and largest crown radius, pixels.
    smooth_px : float
        Gaussian smoothing of the layer, pixels.
    h : float
        Marker dynamic, layer units.
    min_area_px : float
        Smallest region kept, pixels.
    layer : str
        ``brightness`` (log of the green band, or of the first band) or ``given`` (the
        caller's layer, e.g. a calibrated plant probability).
    min_peak : float
        Regions whose smoothed peak is lower are ground, not crowns (``-inf``: keep all).
        With shaded domes (``crown_join``) the median of the smoothed layer over the
        sample windows: a crown's lit top is brighter than the typical pixel of a closed
        canopy, a patch of understorey or a shaded gap never reaches it.
    merge : bool
        Join fragments of one crown (:func:`merge_fragments`); needs the tint layer.
    lean_col, lean_row : float
        The shift, in region radii, by which every centre is moved back: the raster's lean
        (how far the centre of a region's bright part lies towards the sun: the median
        over the sampled regions of ``LEAN_SHARE`` × the step between two level-set
        centroids, :func:`level_set_lean`) times ``lean_gain``.
    lean_gain : float
        ``DOME_LEAN_GAIN`` with shaded domes (``crown_join``), else 1.
    crown_join : bool
        Also join neighbours with no valley between them at the crown's own scale
        (:func:`join_at_crown_scale`); on when ``merge`` is and the raster's lean shows
        shaded domes (at least ``MIN_DOME_LEAN``).
    edge_gain : float
        Colour edges (:func:`colour_edges`) are subtracted from the layer this many times
        before the split: ``EDGE_GAIN`` with shaded domes (``crown_join``), else 0 (off).
    """

    r_min_px: float
    r_max_px: float
    smooth_px: float
    h: float
    min_area_px: float
    layer: str = "brightness"
    min_peak: float = -math.inf
    merge: bool = False
    lean_col: float = 0.0
    lean_row: float = 0.0
    crown_join: bool = False
    lean_gain: float = 1.0
    edge_gain: float = 0.0

    @property
    def edge_px(self) -> float:
        """σ of the colour edges (:func:`colour_edges`), pixels."""
        return EDGE_SHARE * self.r_min_px

    @property
    def max_area_px(self) -> float | None:
        """Largest union :func:`merge_fragments` may make (``None``: no joining)."""
        return MERGE_MAX_AREA_SHARE * math.pi * self.r_max_px**2 if self.merge else None

    @property
    def overlap_px(self) -> int:
        """Tile overlap that keeps tiled results equal to whole-image ones."""
        return math.ceil(4.0 * self.r_max_px + 4.0 * self.smooth_px) + 2


def canopy_layer(data: np.ndarray, roles: tuple[str, ...]) -> np.ndarray:
    """Brightness layer for valley following: log(1 + green band).

    The green band is the brightest visible band of foliage; the logarithm makes shading
    (a factor on reflectance) an additive offset, so a valley's depth does not depend on
    how bright the species is. Without a green band the first band is used.

    Parameters
    ----------
    data : numpy.ndarray
        Bands, shape (bands, rows, columns).
    roles : tuple of str
        Role of each band (``red``, ``green``, ``blue``, ``nir``, ...).

    Returns
    -------
    numpy.ndarray
        float32 layer.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[10.0]], [[np.e - 1]], [[5.0]]])
    >>> round(float(canopy_layer(d, ("red", "green", "blue"))[0, 0]), 6)
    1.0
    """
    i = roles.index("green") if "green" in roles else 0
    return np.log1p(np.maximum(np.asarray(data[i], np.float32), 0.0)).astype(np.float32)


def canopy_tint(data: np.ndarray, roles: tuple[str, ...]) -> np.ndarray | None:
    """Green share g / (r + g + b) of each pixel (chromatic coordinate), or ``None``
    without red, green and blue bands.

    A crown's fragments share its tint; neighbouring crowns of other species differ.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[20.0]], [[60.0]], [[20.0]]])
    >>> round(float(canopy_tint(d, ("red", "green", "blue"))[0, 0]), 6)
    0.6
    """
    if not all(r in roles for r in ("red", "green", "blue")):
        return None
    r, g, b = (np.asarray(data[roles.index(k)], np.float32) for k in ("red", "green", "blue"))
    return (g / np.maximum(r + g + b, 1e-6)).astype(np.float32)


def colour_edges(data: np.ndarray, roles: tuple[str, ...], sigma_px: float) -> np.ndarray | None:
    """Colour step across each pixel: σ × the gradient magnitude of the chromaticity.

    The chromatic coordinates r / (r + g + b) and b / (r + g + b) do not change when all
    bands are scaled alike, as by a dome's shading (Lambert's law scales the reflected
    light, not its colour; chromaticity as an illumination-invariant colour: Gevers, T. &
    Smeulders, A. W. M. 1999, Color-based object recognition, *Pattern Recognition* 32:
    453–464). So over one crown they are nearly flat and they step where two crowns of
    different colour meet. Each coordinate is smoothed by a Gaussian of ``sigma_px`` and
    its gradient magnitude taken (``scipy.ndimage.gaussian_gradient_magnitude``); the two
    are added in quadrature and multiplied by σ, so that a step of height Δ gives a ridge
    of height Δ / √(2π) whatever σ is.

    Parameters
    ----------
    data : numpy.ndarray
        Bands, shape (bands, rows, columns).
    roles : tuple of str
        Band roles; red, green and blue are needed.
    sigma_px : float
        Gaussian σ, pixels.

    Returns
    -------
    numpy.ndarray or None
        float32 edge layer (chromaticity units), or ``None`` without red, green and blue.

    Examples
    --------
    Shading alone gives no edge; a step of 0.1 in both coordinates gives a ridge of
    about √2 × 0.1 / √(2π) = 0.056:

    >>> import numpy as np
    >>> ramp = np.linspace(0.5, 1.5, 40)[None, None, :] * np.ones((3, 20, 40))
    >>> shaded = ramp * np.array([60.0, 100.0, 40.0])[:, None, None]
    >>> rgb = ("red", "green", "blue")
    >>> float(colour_edges(shaded, rgb, 2.0).max()) < 1e-6
    True
    >>> step = np.where(np.arange(40) < 20, 1.0, 0.0)[None, None, :]
    >>> two = step * np.array([60.0, 100.0, 40.0])[:, None, None] + (1 - step) * np.array(
    ...     [40.0, 100.0, 60.0])[:, None, None] * np.ones((3, 20, 40))
    >>> ridge = float(colour_edges(two, rgb, 2.0).max())
    >>> abs(ridge - 0.1 * 2**0.5 / (2 * np.pi) ** 0.5) < 0.002  # the grid samples it
    True
    """
    if not all(r in roles for r in ("red", "green", "blue")):
        return None
    r, g, b = (
        np.maximum(np.asarray(data[roles.index(k)], np.float32), 0.0)
        for k in ("red", "green", "blue")
    )
    total = np.maximum(r + g + b, 1e-6)
    sq = np.zeros(r.shape, np.float32)
    for share in (r / total, b / total):
        sq += ndimage.gaussian_gradient_magnitude(share, float(sigma_px)) ** 2
    return (float(sigma_px) * np.sqrt(sq)).astype(np.float32)


def _moments(regions: np.ndarray, n: int) -> np.ndarray:
    """Area and first and second raw moments of labels 1..n: shape (n, 6)."""
    rows, cols = np.indices(regions.shape, dtype=np.float64)
    lab = regions.ravel()
    out = np.empty((n, 6))
    for k, w in enumerate((None, rows, cols, rows * rows, cols * cols, rows * cols)):
        out[:, k] = np.bincount(lab, None if w is None else w.ravel(), minlength=n + 1)[1:]
    return out


def _roundness(mom: np.ndarray) -> np.ndarray:
    """How well one disc fits each region: area / (2 π trace of its covariance), 1 for a
    disc (a disc of radius R has area π R² and second central moment R²/2 per axis)."""
    a = np.maximum(mom[:, 0], 1e-12)
    vr = mom[:, 3] / a - (mom[:, 1] / a) ** 2
    vc = mom[:, 4] / a - (mom[:, 2] / a) ** 2
    return a / (2.0 * math.pi * np.maximum(vr + vc, 1e-12))


def _neighbour_pairs(
    regions: np.ndarray, layer: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Labels that touch (4-connected) and the pass between them.

    Returns
    -------
    pairs : numpy.ndarray, shape (k, 2)
        Label pairs (i, j), i < j.
    passes : numpy.ndarray, shape (k,)
        The highest value of ``layer`` at which the two meet (the larger of the two sides'
        smaller value over their shared border); zeros without a layer.
    """
    a = np.concatenate([regions[:, :-1].ravel(), regions[:-1, :].ravel()])
    b = np.concatenate([regions[:, 1:].ravel(), regions[1:, :].ravel()])
    sel = (a != b) & (a > 0) & (b > 0)
    if layer is None:
        v = np.zeros(int(sel.sum()))
    else:
        va = np.concatenate([layer[:, :-1].ravel(), layer[:-1, :].ravel()])
        vb = np.concatenate([layer[:, 1:].ravel(), layer[1:, :].ravel()])
        v = np.minimum(va[sel], vb[sel]).astype(np.float64)
    p = np.sort(np.column_stack([a[sel], b[sel]]), axis=1)
    return _pair_max(p, v)


def _pair_max(p: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unique rows of ``p`` with the largest ``v`` of each."""
    if p.size == 0:
        return np.zeros((0, 2), np.int64), np.zeros(0)
    order = np.lexsort((-v, p[:, 1], p[:, 0]))
    p, v = p[order], v[order]
    first = np.r_[True, np.any(p[1:] != p[:-1], axis=1)]
    return p[first], v[first]


def merge_fragments(
    regions: np.ndarray,
    n: int,
    max_area_px: float,
    gain: float = MERGE_GAIN,
    layer: np.ndarray | None = None,
    min_pass: float = 0.0,
    tint: np.ndarray | None = None,
    max_tint_step: float = MERGE_TINT_STEP,
) -> np.ndarray:
    """Join neighbouring regions that one crown fits better than two.

    A big crown with broad leaf clumps can carry two or three brightness maxima, and the
    watershed cuts it into fragments; each fragment is a half or third of a disc, while
    their union is round. Two touching crowns are each round and their union is a peanut.
    So two neighbours are joined when the union's roundness (area over 2π × the trace of
    its second-moment matrix: 1 for a disc) exceeds the area-weighted roundness of the two
    by ``gain`` and the union is no larger than ``max_area_px`` (the largest crown's disc).
    Joins are made best first, each region at most once per round, until none is left.

    Parameters
    ----------
    regions : numpy.ndarray of int
        Labels 0 (none) and 1..n.
    n : int
        Number of labels.
    max_area_px : float
        Largest plausible crown area, pixels.
    gain : float
        Least gain in roundness for a join.
    layer : numpy.ndarray, optional
        The smoothed layer the regions were grown on.
    min_pass : float
        With ``layer``: the two must meet at least this share of the way from the lower of
        their valley floors up to the lower of their peaks (a shallow valley).

    Returns
    -------
    numpy.ndarray of int
        For each label 0..n, the label it now belongs to (``lut[regions]`` relabels).

    Examples
    --------
    Two halves of one disc are joined; two touching discs are not:

    >>> import numpy as np
    >>> yy, xx = np.mgrid[:40, :80]
    >>> disc = (xx - 20) ** 2 + (yy - 20) ** 2 < 15**2
    >>> halves = np.where(disc, np.where(xx < 20, 1, 2), 0)
    >>> merge_fragments(halves, 2, 2000.0).tolist()
    [0, 1, 1]
    >>> two = np.where(disc, 1, np.where((xx - 50) ** 2 + (yy - 20) ** 2 < 15**2, 2, 0))
    >>> merge_fragments(two, 2, 2000.0).tolist()
    [0, 1, 2]
    """
    lut = np.arange(n + 1)
    mom = np.vstack([np.zeros((1, 6)), _moments(regions, n)])
    pairs, passes = _neighbour_pairs(regions, layer)
    idx = np.arange(1, n + 1)
    tsum = np.zeros(n + 1)
    if tint is not None:
        tsum[1:] = np.bincount(regions.ravel(), np.asarray(tint, float).ravel(), n + 1)[1:]
    if layer is not None:
        peak = np.r_[-np.inf, np.asarray(ndimage.maximum(layer, regions, idx), float)]
        low = np.r_[np.inf, np.asarray(ndimage.minimum(layer, regions, idx), float)]
    for _round in range(8):
        if pairs.size == 0:
            break
        i, j = pairs[:, 0], pairs[:, 1]
        mi, mj = mom[i], mom[j]
        mu = mi + mj
        ri, rj, ru = _roundness(mi), _roundness(mj), _roundness(mu)
        parts = (ri * mi[:, 0] + rj * mj[:, 0]) / np.maximum(mu[:, 0], 1e-12)
        score = ru - parts
        ok = (score > gain) & (mu[:, 0] <= max_area_px)
        if tint is not None:
            step = np.abs(tsum[i] / np.maximum(mi[:, 0], 1) - tsum[j] / np.maximum(mj[:, 0], 1))
            ok &= step <= max_tint_step
        if layer is not None:
            floor = np.minimum(low[i], low[j])
            ok &= passes >= floor + min_pass * (np.minimum(peak[i], peak[j]) - floor)
        if not ok.any():
            break
        order = np.flatnonzero(ok)[np.argsort(-score[ok], kind="stable")]
        used = np.zeros(n + 1, bool)
        for k in order:
            a, b = i[k], j[k]
            if used[a] or used[b]:
                continue
            used[a] = used[b] = True
            mom[a] += mom[b]
            mom[b] = 0.0
            tsum[a] += tsum[b]
            lut[lut == b] = a
            if layer is not None:
                peak[a], low[a] = max(peak[a], peak[b]), min(low[a], low[b])
        # relabel the pairs to the surviving labels, drop self-pairs, keep the highest pass
        pairs = np.sort(lut[pairs], axis=1)
        keep = pairs[:, 0] != pairs[:, 1]
        pairs, passes = _pair_max(pairs[keep], passes[keep])
    return lut


def join_at_crown_scale(
    regions: np.ndarray,
    n: int,
    layer: np.ndarray,
    smooth_px: float,
    r_max_px: float,
    max_area_px: float,
    *,
    tint: np.ndarray | None = None,
    share: float = CROWN_SCALE_SHARE,
    min_pass: float = CROWN_SCALE_PASS,
    gain: float = CROWN_SCALE_GAIN,
    reach: float = CROWN_SCALE_REACH,
    max_tint_step: float = CROWN_SCALE_TINT_STEP,
    rounds: int = CROWN_SCALE_ROUNDS,
    texture_sds: float | None = TEXTURE_VALLEY_SDS,
) -> np.ndarray:
    """Join neighbouring regions that show no valley at the larger one's own scale.

    A scale-consistency test (scale-space: Lindeberg, T. 1994, *Scale-Space Theory in
    Computer Vision*, Kluwer, ch. 7 and 9: a structure is real at the scales where it
    persists). The markers are found on a layer smoothed for the *smallest* crown, so on a
    big crown with coarse leaf clumps each clump can start a region of its own. Smoothed
    again at ``share`` × the larger region's equal-area radius, the clumps of one lit dome
    blur into the dome and the valley between its fragments disappears, while the shaded
    valley between two crowns, as wide as their rims, stays. Two neighbours are joined
    when, on that smoothing, they meet at least ``min_pass`` of the way from the lower of
    their valley floors to the lower of their peaks, one disc fits their union better than
    two by ``gain`` in roundness (:func:`merge_fragments`), their centroids lie within
    ``reach`` × the union's equal-area radius (two crowns whose centres lie outside each
    other's crowns lie farther apart), their mean tint differs by at most
    ``max_tint_step`` and the union is no larger than ``max_area_px``. A pair is also
    joined when, on ``layer`` itself, the valley between the two is no deeper (from the
    lower peak down to their pass) than ``texture_sds`` standard deviations of the layer
    within them (the valley is no deeper than the leaf texture inside a crown), one disc
    fits their union no worse than two (``TEXTURE_GAIN``), their centroids lie within
    ``TEXTURE_REACH`` union radii and their tint differs by at most
    ``TEXTURE_TINT_STEP``. Joins are made best first (highest pass at the crown's
    scale), each region at most once per round.

    Parameters
    ----------
    regions : numpy.ndarray of int
        Labels 0 (none) and 1..n (after :func:`merge_fragments`: labels may be missing).
    n : int
        Largest label.
    layer : numpy.ndarray
        The layer the regions were grown on, already smoothed at ``smooth_px``.
    smooth_px : float
        Its smoothing, pixels (the further smoothing adds to it in quadrature).
    r_max_px : float
        Largest crown radius, pixels (bounds the smoothing scales tried).
    max_area_px : float
        Largest union, pixels.
    tint : numpy.ndarray, optional
        :func:`canopy_tint` of the window.
    share, min_pass, gain, reach, max_tint_step, rounds
        The rule's limits (module constants by default).
    texture_sds : float, optional
        The texture-relative valley test's limit (``None``: not used).

    Returns
    -------
    numpy.ndarray of int
        For each label 0..n, the label it now belongs to.

    Examples
    --------
    One dome with two leaf clumps gives two regions at a fine smoothing; at its own scale
    they are one. Two touching domes stay two.

    >>> import numpy as np
    >>> from skimage.segmentation import watershed
    >>> yy, xx = np.mgrid[:60, :120].astype(float)
    >>> def dome(cx, r):
    ...     return np.sqrt(np.clip(r * r - (xx - cx) ** 2 - (yy - 30) ** 2, 0, None)) / r
    >>> clumps = 0.08 * (np.exp(-((xx - 22) ** 2 + (yy - 30) ** 2) / 20)
    ...                  + np.exp(-((xx - 38) ** 2 + (yy - 30) ** 2) / 20))
    >>> one = dome(30, 24) + clumps
    >>> markers = np.zeros(one.shape, int); markers[30, 22] = 1; markers[30, 38] = 2
    >>> reg = watershed(-one, markers, mask=dome(30, 24) > 0)
    >>> join_at_crown_scale(reg, 2, one, 1.0, 25.0, 3000.0).tolist()
    [0, 1, 1]
    >>> two = np.maximum(dome(30, 20), dome(68, 20))
    >>> markers = np.zeros(two.shape, int); markers[30, 30] = 1; markers[30, 68] = 2
    >>> reg = watershed(-two, markers, mask=two > 0)
    >>> join_at_crown_scale(reg, 2, two, 1.0, 25.0, 3000.0).tolist()
    [0, 1, 2]
    """
    lut = np.arange(n + 1)
    lay = np.asarray(layer, np.float32)
    top = max(share * r_max_px, smooth_px)
    # a few smoothing scales between the present one and the largest crown's; each pair
    # is tested on the one nearest its own
    ladder = np.geomspace(max(smooth_px, 1.0), max(top, smooth_px, 1.0), 6)
    cache: dict[int, np.ndarray] = {}

    def smoothed(k: int) -> np.ndarray:
        if k not in cache:
            extra = math.sqrt(max(float(ladder[k]) ** 2 - smooth_px**2, 0.0))
            cache[k] = ndimage.gaussian_filter(lay, extra) if extra > 0 else lay
        return cache[k]

    tint_flat = None if tint is None else np.asarray(tint, np.float64).ravel()
    for _round in range(rounds):
        reg = lut[regions]
        mom = np.vstack([np.zeros((1, 6)), _moments(reg, n)])
        area = mom[:, 0]
        pairs, fine_pass = _neighbour_pairs(reg, lay)
        if pairs.size == 0:
            break
        i, j = pairs[:, 0], pairs[:, 1]
        mu = mom[i] + mom[j]
        parts = (_roundness(mom[i]) * area[i] + _roundness(mom[j]) * area[j]) / np.maximum(
            mu[:, 0], 1e-12
        )
        score = _roundness(mu) - parts
        safe = np.maximum(area, 1.0)
        dist = np.hypot(
            mom[i, 1] / safe[i] - mom[j, 1] / safe[j], mom[i, 2] / safe[i] - mom[j, 2] / safe[j]
        )
        union_r = np.sqrt(mu[:, 0] / math.pi)
        small = mu[:, 0] <= max_area_px
        cand = (score >= gain) & small & (dist <= reach * union_r)
        tint_step = np.zeros(len(i))
        if tint_flat is not None:
            mean_tint = np.bincount(reg.ravel(), tint_flat, n + 1) / safe
            tint_step = np.abs(mean_tint[i] - mean_tint[j])
        cand &= tint_step <= max_tint_step
        texture = np.zeros(len(i), bool)
        if texture_sds is not None:
            depth, sd = _valley_and_texture(reg, lay, n, area, pairs, fine_pass)
            texture = (depth <= texture_sds * sd) & (score >= TEXTURE_GAIN) & small
            texture &= (dist <= TEXTURE_REACH * union_r) & (tint_step <= TEXTURE_TINT_STEP)
        if not (cand.any() or texture.any()):
            break
        r_big = np.sqrt(np.maximum(area[i], area[j]) / math.pi)
        pick = np.argmin(np.abs(np.log(ladder[None, :] / (share * r_big[:, None]))), axis=1)
        passed = np.full(len(i), -np.inf)
        for k in np.unique(pick[cand]):
            sel = cand & (pick == k)
            passed[sel] = _pass_share(reg, n, smoothed(int(k)), pairs[sel])
        ok = (cand & (passed >= min_pass)) | texture
        passed[texture & ~np.isfinite(passed)] = min_pass
        if not ok.any():
            break
        used = np.zeros(n + 1, bool)
        for k in np.flatnonzero(ok)[np.argsort(-passed[ok], kind="stable")]:
            a, b = i[k], j[k]
            if used[a] or used[b]:
                continue
            used[a] = used[b] = True
            lut[lut == b] = a
    return lut


def _valley_and_texture(
    reg: np.ndarray,
    lay: np.ndarray,
    n: int,
    area: np.ndarray,
    pairs: np.ndarray,
    passes: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """For each pair: the valley's depth (the lower of the two peaks minus their pass) and
    the pooled standard deviation of ``lay`` within the two regions (their texture)."""
    i, j = pairs[:, 0], pairs[:, 1]
    flat = lay.ravel().astype(np.float64)
    safe = np.maximum(area, 1.0)
    s1 = np.bincount(reg.ravel(), flat, n + 1)
    s2 = np.bincount(reg.ravel(), flat * flat, n + 1)
    var = np.maximum(s2 / safe - (s1 / safe) ** 2, 0.0)
    sd = np.sqrt((var[i] * area[i] + var[j] * area[j]) / np.maximum(area[i] + area[j], 1.0))
    top = np.full(n + 1, -np.inf)
    present = np.flatnonzero(area > 0)
    present = present[present > 0]
    top[present] = ndimage.maximum(lay, reg, present)
    return np.minimum(top[i], top[j]) - passes, sd


def _pass_share(reg: np.ndarray, n: int, layer: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """For each pair of touching labels: how far up they meet on ``layer``, as a share of
    the way from the lower of their floors to the lower of their peaks."""
    idx = np.flatnonzero(np.bincount(reg.ravel(), minlength=n + 1))
    idx = idx[idx > 0]
    peak = np.full(n + 1, -np.inf)
    low = np.full(n + 1, np.inf)
    peak[idx] = ndimage.maximum(layer, reg, idx)
    low[idx] = ndimage.minimum(layer, reg, idx)
    pp, pas = _neighbour_pairs(reg, layer)
    key = pairs[:, 0] * (n + 1) + pairs[:, 1]
    at = np.clip(np.searchsorted(pp[:, 0] * (n + 1) + pp[:, 1], key), 0, len(pas) - 1)
    i, j = pairs[:, 0], pairs[:, 1]
    floor = np.minimum(low[i], low[j])
    rise = np.minimum(peak[i], peak[j]) - floor
    return (pas[at] - floor) / np.maximum(rise, 1e-12)


def level_set_lean(
    layer: np.ndarray,
    regions: np.ndarray,
    idx: np.ndarray,
    *,
    valid: np.ndarray | None = None,
    levels: tuple[float, float] = LEAN_LEVELS,
) -> tuple[np.ndarray, np.ndarray]:
    """Each region's lean towards the sun from the centroids of two of its level sets.

    Geometry (Lambert's cosine law; orthographic view from straight above). A crown is a
    dome of radius R lit from elevation e in the horizontal direction u; a point of its
    surface with unit normal n has brightness A + D max(0, n·s), s = (u cos e, sin e), A
    the unlit level and A + D the peak (at n = s). The pixels brighter than A + k D have
    n·s ≥ k: a cap of the sphere whose rim is the circle where it meets the plane
    perpendicular to s at distance k R from the centre. That circle is centred at k R s,
    so its ground projection, an ellipse, is centred at c(k) = k R cos(e) u: the level
    sets are centred further towards the sun the higher the level, linearly in k. Hence,
    for two levels k₁ < k₂,

        c(k₁) − c(0) = k₁ / (k₂ − k₁) × (c(k₂) − c(k₁)),

    and with k₁ = 0.5 (the crown part whose centre :func:`split_crowns` takes) and
    k₂ = 0.75 the lean of that centre off the crown's centre is twice the step between the
    two level-set centroids, whatever the sun's elevation and the crown's size: the share
    2 comes from the geometry, not from tuning (``LEAN_SHARE``).

    Approximations: a cap with k < cos e reaches over the dome's visible edge and is cut
    there (its centroid lies a little nearer the centre); neighbours overlapping a crown
    cut its level sets too; the layer is smoothed and is the logarithm of brightness, so
    a share of the way in the layer is another share of the way in brightness (the level
    sets are still caps, the ratio of their shares shifts); the floor is the region's
    valley floor, not the unlit level.

    Parameters
    ----------
    layer : numpy.ndarray
        The smoothed layer the regions were grown on.
    regions : numpy.ndarray of int
        Region labels (0: none).
    idx : numpy.ndarray of int
        Labels to measure.
    valid : numpy.ndarray of bool, optional
        Pixels that carry data.
    levels : (float, float)
        The two levels k₁ < k₂, as shares of the way from each region's lowest value to
        its highest.

    Returns
    -------
    d_col, d_row : numpy.ndarray
        Centroid of the upper level set minus that of the lower one, pixels, per label in
        ``idx`` (NaN for a label with no pixels).

    Examples
    --------
    A dome of radius 25 pixels lit from the left (-x) at 60 degrees: twice the step is
    close to the half-level centroid's lean, 0.5 R cos 60° = 0.25 R towards the sun.

    >>> import numpy as np
    >>> yy, xx = np.mgrid[:61, :61].astype(float)
    >>> rho2 = ((xx - 30) ** 2 + (yy - 30) ** 2) / 25.0**2
    >>> nz = np.sqrt(np.clip(1 - rho2, 0, None))
    >>> lit = np.clip(-0.5 * (xx - 30) / 25.0 + np.sqrt(0.75) * nz, 0, None)
    >>> d_col, d_row = level_set_lean(lit, (rho2 < 1).astype(int), np.array([1]))
    >>> round(float(2 * d_col[0] / 25.0), 2), round(float(d_row[0]), 6)
    (-0.26, 0.0)
    """
    lay = np.asarray(layer, np.float64)
    idx = np.asarray(idx, np.int64)
    nlab = int(max(int(regions.max(initial=0)), int(idx.max(initial=0)))) + 1
    lab = np.asarray(regions).ravel()
    inside = lab > 0
    if valid is not None:
        inside &= np.asarray(valid, bool).ravel()
    lab = np.where(inside, lab, 0)
    v = lay.ravel()
    every = np.arange(1, nlab)
    masked = lab.reshape(lay.shape)
    low = np.r_[np.inf, np.asarray(ndimage.minimum(lay, masked, every), float)]
    peak = np.r_[-np.inf, np.asarray(ndimage.maximum(lay, masked, every), float)]
    rows, cols = np.indices(lay.shape, dtype=np.float64)
    rows, cols = rows.ravel(), cols.ravel()
    cents = []
    with np.errstate(invalid="ignore", divide="ignore"):
        for k in levels:
            above = inside & (v >= (low + k * (peak - low))[lab])
            n = np.bincount(lab, above, nlab)
            r = np.bincount(lab, above * rows, nlab) / n
            c = np.bincount(lab, above * cols, nlab) / n
            cents.append((c[idx], r[idx]))
    (c1, r1), (c2, r2) = cents
    return c2 - c1, r2 - r1


def split_crowns(
    layer: np.ndarray,
    r_min_px: float,
    h: float,
    *,
    smooth_px: float | None = None,
    min_area_px: float | None = None,
    valid: np.ndarray | None = None,
    origin: tuple[int, int] = (0, 0),
    min_peak: float = -math.inf,
    max_area_px: float | None = None,
    lean: tuple[float, float] = (0.0, 0.0),
    merge_gain: float = MERGE_GAIN,
    merge_pass: float = MERGE_PASS,
    tint: np.ndarray | None = None,
    max_tint_step: float = MERGE_TINT_STEP,
    crown_join: bool = False,
    edges: np.ndarray | None = None,
    edge_gain: float = 0.0,
) -> dict[str, np.ndarray]:
    """One point per crown: watershed of the smoothed layer from its h-maxima.

    Parameters
    ----------
    layer : numpy.ndarray
        2-D layer in which crowns are bright domes and the gaps between them dark valleys
        (brightness, or a plant probability).
    r_min_px : float
        Smallest crown radius, pixels.
    h : float
        Marker dynamic (layer units): a maximum must rise at least ``h`` above the saddle
        to a higher one to start a crown of its own.
    smooth_px : float, optional
        Gaussian smoothing, pixels (default ``SMOOTH_SHARE * r_min_px``).
    min_area_px : float, optional
        Smallest region kept, pixels (default ``MIN_AREA_SHARE`` × π ``r_min_px``²).
    valid : numpy.ndarray of bool, optional
        Pixels that carry data; the others belong to no crown.
    origin : (int, int)
        Column and row of ``layer[0, 0]`` in the raster.
    min_peak : float
        Regions whose smoothed peak is below this are dropped (ground in a probability map).
    max_area_px : float, optional
        When given, fragments of one crown are joined (:func:`merge_fragments`) into
        unions no larger than this.
    lean : (float, float)
        Column and row shift, in region radii, subtracted from every centre (the raster's
        lean towards the sun; :func:`canopy_split` measures it).
    merge_gain, merge_pass, tint, max_tint_step
        Passed to :func:`merge_fragments`.
    crown_join : bool
        With ``max_area_px``: then also join neighbours without a valley at the crown's
        own scale (:func:`join_at_crown_scale`).
    edges : numpy.ndarray, optional
        Colour edges of the window (:func:`colour_edges`); ``edge_gain`` times them is
        subtracted from ``layer`` first, so that where two crowns of different colour
        meet there is a valley even where brightness has none.
    edge_gain : float
        Their weight, layer units per chromaticity unit (0: not used).

    Returns
    -------
    dict of numpy.ndarray
        ``col``, ``row`` (weighted region centroids, raster pixel coordinates),
        ``lean_col``, ``lean_row`` (the region's own lean estimate, ``LEAN_SHARE`` × the
        step between its level-set centroids, :func:`level_set_lean`, in region radii;
        not applied: the shift applied is ``lean``), ``area_px`` (region area), ``peak`` (highest
        smoothed value in the region) and ``prominence`` (peak minus the region's lowest
        value).

    Examples
    --------
    Two touching discs of radius 12 whose centres lie 22 pixels apart give two points,
    each within a pixel of its disc's centre:

    >>> import numpy as np
    >>> yy, xx = np.mgrid[:48, :70].astype(float)
    >>> dome = lambda cx: np.sqrt(np.clip(144 - (xx - cx) ** 2 - (yy - 24) ** 2, 0, None))
    >>> img = np.maximum(dome(24.0), dome(46.0))
    >>> got = split_crowns(img, 10.0, 0.5)
    >>> bool(np.all(np.abs(got["col"] - [24.0, 46.0]) < 1)), np.round(got["row"]).tolist()
    (True, [24.0, 24.0])
    """
    from skimage.morphology import h_maxima
    from skimage.segmentation import watershed

    lay = np.asarray(layer, np.float32)
    if edges is not None and edge_gain > 0:
        lay = lay - np.float32(edge_gain) * np.asarray(edges, np.float32)
    ok = np.ones(lay.shape, bool) if valid is None else np.asarray(valid, bool)
    empty = {
        k: np.zeros(0)
        for k in ("col", "row", "lean_col", "lean_row", "area_px", "peak", "prominence")
    }
    if not ok.any():
        return empty
    s = SMOOTH_SHARE * r_min_px if smooth_px is None else float(smooth_px)
    amin = MIN_AREA_SHARE * math.pi * r_min_px**2 if min_area_px is None else min_area_px
    lo = float(lay[ok].min())
    work = np.where(ok, lay, lo)
    smooth = ndimage.gaussian_filter(work, s) if s > 0 else work
    smooth[~ok] = lo
    # h_maxima needs h > 0 and works on the value grid; float64 avoids rounding at h
    peaks = h_maxima(smooth.astype(np.float64), max(float(h), 1e-12)) & ok
    markers, n = ndimage.label(peaks, structure=np.ones((3, 3), bool))
    if n == 0:
        return empty
    regions = watershed(-smooth, markers, mask=ok)
    if max_area_px is not None:
        lut = merge_fragments(
            regions, n, max_area_px, merge_gain, smooth, merge_pass, tint, max_tint_step
        )
        regions = lut[regions]
        if crown_join:
            # max_area_px is MERGE_MAX_AREA_SHARE x the largest crown's disc
            r_max = math.sqrt(max_area_px / (MERGE_MAX_AREA_SHARE * math.pi))
            joined = join_at_crown_scale(regions, n, smooth, s, r_max, max_area_px, tint=tint)
            regions = joined[regions]
        idx = np.unique(regions[regions > 0])
    else:
        idx = np.arange(1, n + 1)
    col, row, area, wsum, peak, low = _crown_centres(smooth, regions, idx, ok)
    if max_area_px is not None and crown_join:
        # one crown cut in two whose union is a single blob at its own scale
        r_max = math.sqrt(max_area_px / (MERGE_MAX_AREA_SHARE * math.pi))
        lut = join_single_blobs(regions, idx, work, col, row, area, r_min_px, r_max, max_area_px)
        if np.any(lut != np.arange(lut.size)):
            regions = lut[regions]
            idx = np.unique(regions[regions > 0])
            col, row, area, wsum, peak, low = _crown_centres(smooth, regions, idx, ok)
    # the lean: how far the centre of each region's bright part lies towards the sun, in
    # region radii: LEAN_SHARE (= 2) times the step between the centroids of its level
    # sets halfway and three quarters of the way from floor to peak (a Lambert dome's
    # level sets are centred k R cos e from its centre towards the sun: level_set_lean)
    radius = np.sqrt(area / math.pi)
    d_col, d_row = level_set_lean(smooth, regions, idx, valid=ok)
    with np.errstate(invalid="ignore", divide="ignore"):
        lean_row = LEAN_SHARE * d_row / radius
        lean_col = LEAN_SHARE * d_col / radius
    col = col - lean[0] * radius
    row = row - lean[1] * radius
    keep = (area >= amin) & (wsum > 0) & (peak >= min_peak)
    return {
        "col": col[keep] + origin[0],
        "row": row[keep] + origin[1],
        "lean_col": lean_col[keep],
        "lean_row": lean_row[keep],
        "area_px": area[keep].astype(float),
        "peak": np.asarray(peak, float)[keep],
        "prominence": np.asarray(peak - low, float)[keep],
    }


def _crown_centres(
    smooth: np.ndarray, regions: np.ndarray, idx: np.ndarray, ok: np.ndarray
) -> tuple[np.ndarray, ...]:
    """Centre (column, row), area, weight sum, peak and floor of each region in ``idx``.

    The centre is the centroid of the region's crown part (above ``CORE_SHARE`` of the way
    from its valley floor to its peak), weighted by the squared distance to that part's
    edge: the crown's middle counts, lobes and slivers squeezed between neighbours hardly
    do, and flat ground or gap floors attached by the flooding do not pull it.
    """
    from skimage.segmentation import find_boundaries

    area = ndimage.sum_labels(ok, regions, idx)
    peak = np.asarray(ndimage.maximum(smooth, regions, idx), float)
    low = np.asarray(ndimage.minimum(smooth, regions, idx), float)
    level = np.full(int(regions.max()) + 1, np.inf)
    level[idx] = low + CORE_SHARE * (peak - low)
    core = ok & (smooth >= level[regions])
    inner = core & ~find_boundaries(np.where(core, regions, 0), mode="inner")
    # the raster's edge bounds a region too (padding); a tile's edge lies in its overlap
    dist = ndimage.distance_transform_edt(np.pad(inner, 1))[1:-1, 1:-1].astype(np.float64)
    weight = dist * dist
    wsum = ndimage.sum_labels(weight, regions, idx)
    rows, cols = np.indices(smooth.shape, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        row = ndimage.sum_labels(weight * rows, regions, idx) / wsum
        col = ndimage.sum_labels(weight * cols, regions, idx) / wsum
    return col, row, area, wsum, peak, low


def _blob_responses(layer: np.ndarray, points: np.ndarray, sigmas: np.ndarray) -> np.ndarray:
    """Scale-normalised blob response −σ² ∇²(G_σ * layer) at ``points`` (column, row),
    one row per σ (Lindeberg 1998, *Int. J. Computer Vision* 30: 79–116)."""
    lay = np.asarray(layer, np.float32)
    out = np.empty((len(sigmas), len(points)))
    for k, q in enumerate(sigmas):
        lg = -(q * q) * ndimage.gaussian_laplace(lay, float(q))
        out[k] = ndimage.map_coordinates(lg, [points[:, 1], points[:, 0]], order=1, mode="nearest")
    return out


def join_single_blobs(
    regions: np.ndarray,
    idx: np.ndarray,
    layer: np.ndarray,
    col: np.ndarray,
    row: np.ndarray,
    area: np.ndarray,
    r_min_px: float,
    r_max_px: float,
    max_area_px: float,
    *,
    ratio: float = BLOB_JOIN_RATIO,
    reach: float = BLOB_JOIN_REACH,
) -> np.ndarray:
    """Join neighbouring regions that are one blob at the scale of their union.

    A scale-selection test (Lindeberg, T. 1998, Feature detection with automatic scale
    selection, *Int. J. Computer Vision* 30: 79–116): the scale-normalised blob response
    −σ² ∇²(G_σ * layer) of a bright dome is largest at its centre and at σ ≈ r / √2. When
    a big crown is cut in two by a leaf clump's valley, the point half-way between the two
    fragments' centres lies near the crown's centre, and there, at the union's scale, the
    response is stronger than each fragment's own (at scales up to ``BLOB_JOIN_PART`` × its
    equal-area radius). Between two crowns the midpoint lies on their shared valley or on
    the flank of the bigger one, and its response at large scales stays below the weaker
    crown's. Two neighbours are joined when their centres lie within ``reach`` × the
    union's equal-area radius, the union is no larger than ``max_area_px``, and the
    midpoint's best response at scales from half their distance / √2 upward is positive
    and beats ``ratio`` × the weaker part's best response. Best first (highest ratio),
    each region at most once.

    Parameters
    ----------
    regions : numpy.ndarray of int
        Region labels (0: none).
    idx : numpy.ndarray of int
        Labels that carry a centre, in the order of ``col``, ``row`` and ``area``.
    layer : numpy.ndarray
        The layer the regions were grown on, before smoothing.
    col, row, area : numpy.ndarray
        Each region's centre (pixels) and area (pixels).
    r_min_px, r_max_px : float
        Crown radius range, pixels (the scales searched).
    max_area_px : float
        Largest union, pixels.
    ratio, reach : float
        The rule's limits (module constants by default).

    Returns
    -------
    numpy.ndarray of int
        For each label 0..max, the label it now belongs to.

    Examples
    --------
    A dome (radius 20) cut through its centre is joined; two touching domes are not:

    >>> import numpy as np
    >>> yy, xx = np.mgrid[:50, :100].astype(float)
    >>> def dome(cx):
    ...     return np.sqrt(np.clip(400 - (xx - cx) ** 2 - (yy - 25) ** 2, 0, None))
    >>> one = dome(30)
    >>> halves = np.where(one > 0, np.where(xx < 30, 1, 2), 0)
    >>> kw = dict(r_min_px=6.0, r_max_px=24.0, max_area_px=3000.0)
    >>> a = np.array([(halves == k).sum() for k in (1, 2)], float)
    >>> join_single_blobs(halves, np.array([1, 2]), one, np.array([21.5, 38.5]),
    ...                   np.array([25.0, 25.0]), a, **kw).tolist()
    [0, 1, 1]
    >>> two = np.maximum(dome(30), dome(70))
    >>> pair = np.where(two > 0, np.where(xx < 50, 1, 2), 0)
    >>> a = np.array([(pair == k).sum() for k in (1, 2)], float)
    >>> join_single_blobs(pair, np.array([1, 2]), two, np.array([30.0, 70.0]),
    ...                   np.array([25.0, 25.0]), a, **kw).tolist()
    [0, 1, 2]
    """
    nlab = int(regions.max(initial=0)) + 1
    lut = np.arange(nlab)
    pos = np.full(nlab, -1)
    pos[idx] = np.arange(idx.size)
    pairs, _ = _neighbour_pairs(regions)
    if pairs.size == 0:
        return lut
    a, b = pos[pairs[:, 0]], pos[pairs[:, 1]]
    fine = (a >= 0) & (b >= 0)
    pairs, a, b = pairs[fine], a[fine], b[fine]
    pa = np.column_stack([col[a], row[a]])
    pb = np.column_stack([col[b], row[b]])
    d = np.hypot(*(pa - pb).T)
    union = area[a] + area[b]
    cand = np.isfinite(d) & (d <= reach * np.sqrt(union / math.pi)) & (union <= max_area_px)
    if not cand.any():
        return lut
    pairs, a, b, pa, pb, d = pairs[cand], a[cand], b[cand], pa[cand], pb[cand], d[cand]
    sig = np.geomspace(r_min_px / math.sqrt(2.0), BLOB_JOIN_TOP * r_max_px / math.sqrt(2.0), 9)
    m = len(d)
    resp = _blob_responses(layer, np.concatenate([0.5 * (pa + pb), pa, pb]), sig)
    r_mid, r_a, r_b = resp[:, :m], resp[:, m : 2 * m], resp[:, 2 * m :]

    def own(r: np.ndarray, part_area: np.ndarray) -> np.ndarray:
        # a part's best response at its own scales (at least the smallest one)
        at_own = sig[:, None] <= BLOB_JOIN_PART * np.sqrt(part_area / math.pi)[None, :]
        at_own[0] = True
        return np.where(at_own, r, -np.inf).max(axis=0)

    mid = np.where(sig[:, None] >= d[None, :] / (2.0 * math.sqrt(2.0)), r_mid, -np.inf)
    best_mid = mid.max(axis=0)
    weak = np.minimum(own(r_a, area[a]), own(r_b, area[b]))
    ok = (best_mid > 0) & (best_mid > ratio * weak)
    score = best_mid / np.maximum(np.abs(weak), 1e-12)
    used = np.zeros(nlab, bool)
    for k in np.flatnonzero(ok)[np.argsort(-score[ok], kind="stable")]:
        i, j = pairs[k]
        if used[i] or used[j]:
            continue
        used[i] = used[j] = True
        lut[lut == j] = i
    return lut


def canopy_split(
    layers: list[np.ndarray],
    valids: list[np.ndarray],
    r_min_px: float,
    r_max_px: float,
    *,
    layer: str = "brightness",
    h_share: float = H_SHARE,
    tints: list[np.ndarray] | None = None,
) -> CanopySplit:
    """Settings of the crown split for a raster, from its sample windows.

    ``h`` is ``h_share`` × the robust standard deviation (1.4826 × MAD; Hampel 1974,
    *JASA* 69: 383–393) of the smoothed layer over all sampled pixels, so it follows the
    image's contrast and is the same for every tile.

    With ``tints`` (colour imagery), fragments of one crown are joined
    (:func:`merge_fragments`) and the raster's *lean* is measured: crowns lit from one side
    have their brightest point towards the sun (a Lambert dome lit at elevation e: r cos e
    from its centre), and the centre of their bright part too, by a smaller share of the
    radius. Each region's lean is ``LEAN_SHARE`` (2, from the dome's geometry) times the
    step between the centroids of its level sets halfway and three quarters of the way
    from its valley floor to its peak (:func:`level_set_lean`), in region radii; the
    median over the windows' regions of each axis is removed from every centre (times its
    radius): the sun's direction and elevation are estimated once per raster, from the
    crowns themselves. When that lean reaches ``MIN_DOME_LEAN`` (the crowns are shaded
    domes), the shift is ``DOME_LEAN_GAIN`` times the lean, fragments are also joined at
    the crown's own scale (:func:`join_at_crown_scale`; ``crown_join``), and regions whose
    smoothed peak stays below the median of the smoothed layer over the windows are dropped as gaps
    (``min_peak``): where crowns cover most pixels the median pixel lies on a crown's
    flank, so a crown's lit top rises above it, while a patch of dark understorey or a
    shaded gap that happens to hold a maximum of its own does not (on the tuning style
    ``canopy``, seeds 100-103, 88 of 106 points in gaps go and no crown is lost; on
    ``oaks`` 25 of 5 310 shaded crowns are lost). One crown's own estimate is too rough
    to use alone (leaf texture,
    neighbours cutting its level sets): on the tuning style ``canopy`` (seeds 100-103)
    shifting each crown by its own estimate gave F1 0.87-0.88 against 0.93 with the
    median.

    Parameters
    ----------
    layers : list of numpy.ndarray
        The layer (:func:`canopy_layer` or a calibrated one) on each sample window.
    valids : list of numpy.ndarray of bool
        Valid pixels of each window.
    r_min_px, r_max_px : float
        Crown radius range, pixels.
    layer : str
        What the layer is (recorded).
    h_share : float
        Marker dynamic in robust standard deviations.
    tints : list of numpy.ndarray, optional
        :func:`canopy_tint` of each window (joins fragments and measures the lean).

    Returns
    -------
    CanopySplit

    Examples
    --------
    >>> import numpy as np
    >>> lay = np.random.default_rng(0).normal(0, 1, (64, 64)).astype(np.float32)
    >>> cs = canopy_split([lay], [np.ones((64, 64), bool)], 10, 20)
    >>> cs.smooth_px, cs.h > 0
    (3.5, True)
    """
    s = SMOOTH_SHARE * r_min_px
    vals = []
    for lay, ok in zip(layers, valids, strict=True):
        sm = ndimage.gaussian_filter(np.asarray(lay, np.float32), s)
        vals.append(sm[ok])
    v = np.concatenate(vals) if vals else np.zeros(1)
    med = float(np.median(v))
    sd = 1.4826 * float(np.median(np.abs(v - med)))
    if not sd > 0:
        sd = float(np.std(v)) or 1e-6
    split = CanopySplit(
        r_min_px=float(r_min_px),
        r_max_px=float(r_max_px),
        smooth_px=s,
        h=h_share * sd,
        min_area_px=MIN_AREA_SHARE * math.pi * r_min_px**2,
        layer=layer,
        merge=tints is not None,
    )
    if tints is None:
        return split
    lean_c, lean_r = [], []
    for lay, ok, tint in zip(layers, valids, tints, strict=True):
        got = split_crowns(
            lay,
            split.r_min_px,
            split.h,
            smooth_px=split.smooth_px,
            min_area_px=split.min_area_px,
            valid=ok,
            max_area_px=split.max_area_px,
            tint=tint,
        )
        lean_c.append(got["lean_col"])
        lean_r.append(got["lean_row"])
    lc, lr = np.concatenate(lean_c), np.concatenate(lean_r)
    # the median of each axis: robust to crowns whose peak is a bright leaf clump
    fine = np.isfinite(lc) & np.isfinite(lr)
    if fine.sum() < MIN_LEAN_REGIONS:
        return split
    lean_col, lean_row = float(np.median(lc[fine])), float(np.median(lr[fine]))
    domes = math.hypot(lean_col, lean_row) >= MIN_DOME_LEAN
    # with shaded domes the level-set estimate falls short of the drift (DOME_LEAN_GAIN)
    gain = DOME_LEAN_GAIN if domes else 1.0
    return replace(
        split,
        lean_col=gain * lean_col,
        lean_row=gain * lean_row,
        lean_gain=gain,
        # shaded domes (their bright part lies off-centre): leaf clumps can cut one crown
        crown_join=domes,
        # ... and a darker crown beside a brighter one has no valley of its own: colour
        # edges make one (the lean above is measured without them)
        edge_gain=EDGE_GAIN if domes else 0.0,
        # a lit dome's top is brighter than the raster's median pixel; a region that never
        # reaches it is understorey or a shaded gap (only with shaded domes, as above)
        min_peak=med if domes else split.min_peak,
    )


def canopy_evidence(
    datas: list[np.ndarray],
    valids: list[np.ndarray],
    roles: tuple[str, ...],
    r_min_px: float,
    r_max_px: float | None = None,
) -> dict[str, float]:
    """How canopy-like a raster is, measured on its sample windows.

    Parameters
    ----------
    datas : list of numpy.ndarray
        Bands of each window, shape (bands, rows, columns).
    valids : list of numpy.ndarray of bool
        Valid pixels of each window.
    roles : tuple of str
        Band roles; red, green and blue are needed (otherwise nothing is measured).
    r_min_px : float
        Smallest crown radius, pixels (the smoothing scale).
    r_max_px : float, optional
        Largest crown radius, pixels; when given, ``open_share`` is measured too.

    Returns
    -------
    dict
        ``green_share``: share of valid pixels whose chromatic Excess Green (Woebbecke et
        al. 1995) exceeds ``GREEN_EXG``; ``bright_green_corr``: Pearson correlation of
        log green-band brightness and Excess Green, both smoothed at ``SMOOTH_SHARE`` ×
        ``r_min_px``. Both NaN without red, green and blue bands. ``open_share`` (with
        ``r_max_px``): share of valid pixels on the bright side of Otsu's split (Otsu 1979)
        of the smoothed brightness and farther than ``OPEN_REACH`` × ``r_max_px`` from the
        dark side or the invalid pixels: open ground wider than any crown.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> lit = rng.uniform(0.5, 1.5, (1, 40, 40))
    >>> canopy = np.concatenate([40 * lit, 100 * lit ** 1.3, 30 * lit])
    >>> ev = canopy_evidence([canopy], [np.ones((40, 40), bool)], ("red", "green", "blue"), 4)
    >>> ev["green_share"], ev["bright_green_corr"] > 0.5
    (1.0, True)
    """
    from ecoscan.detect.indices import excess_green

    if not all(r in roles for r in ("red", "green", "blue")):
        out = {"green_share": math.nan, "bright_green_corr": math.nan}
        return out if r_max_px is None else {**out, "open_share": math.nan}
    ir, ig, ib = (roles.index(r) for r in ("red", "green", "blue"))
    s = SMOOTH_SHARE * r_min_px
    green = total = 0
    br_all, ex_all, smoothed = [], [], []
    for data, ok in zip(datas, valids, strict=True):
        ex = excess_green(data[ir], data[ig], data[ib])
        green += int((ex[ok] > GREEN_EXG).sum())
        total += int(ok.sum())
        br = ndimage.gaussian_filter(canopy_layer(data, roles), s)
        exs = ndimage.gaussian_filter(ex, s)
        step = max(1, int(s))  # neighbouring smoothed pixels add nothing new
        sel = ok[::step, ::step]
        br_all.append(br[::step, ::step][sel])
        ex_all.append(exs[::step, ::step][sel])
        if r_max_px is not None:
            smoothed.append(br)
    b, e = np.concatenate(br_all), np.concatenate(ex_all)
    corr = float(np.corrcoef(b, e)[0, 1]) if b.size > 2 and b.std() > 0 and e.std() > 0 else 0.0
    out = {"green_share": green / max(total, 1), "bright_green_corr": corr}
    if r_max_px is not None:
        out["open_share"] = _open_share(smoothed, valids, b, OPEN_REACH * r_max_px)
    return out


def _open_share(
    smoothed: list[np.ndarray], valids: list[np.ndarray], values: np.ndarray, reach_px: float
) -> float:
    """Share of valid pixels that are bright (above Otsu's threshold of ``values``) and
    farther than ``reach_px`` from every dark or invalid pixel of their window."""
    from skimage.filters import threshold_otsu

    if values.size < 2 or not values.std() > 0:
        return 0.0
    t = float(threshold_otsu(values))
    far = total = 0
    for br, ok in zip(smoothed, valids, strict=True):
        bright = (br > t) & ok
        total += int(ok.sum())
        if bright.any():
            far += int((ndimage.distance_transform_edt(bright) > reach_px).sum())
    return far / max(total, 1)


def is_closed_canopy(evidence: dict[str, float]) -> bool:
    """The switch rule: the image is canopy with gaps, not plants on open ground.

    Fires when nearly all pixels are green (``CLOSED_GREEN_SHARE``) and brightness does not
    run against greenness (``CLOSED_MIN_CORR``), or when brightness follows greenness
    closely (``PACKED_MIN_CORR``) on a partly green scene (``PACKED_GREEN_SHARE``); in
    both cases only while open ground wider than any crown stays below
    ``MAX_OPEN_SHARE`` (when ``open_share`` was measured).

    Examples
    --------
    >>> is_closed_canopy({"green_share": 0.97, "bright_green_corr": 0.2})
    True
    >>> is_closed_canopy({"green_share": 0.95, "bright_green_corr": -0.3})  # trees on grass
    False
    >>> is_closed_canopy({"green_share": 0.5, "bright_green_corr": 0.8})  # over dark ground
    True
    >>> is_closed_canopy({"green_share": 0.45, "bright_green_corr": 0.1})  # shrubs, grass
    False
    >>> is_closed_canopy({"green_share": 0.96, "bright_green_corr": -0.1, "open_share": 0.07})
    False
    """
    g, c = evidence.get("green_share", math.nan), evidence.get("bright_green_corr", math.nan)
    closed = g >= CLOSED_GREEN_SHARE and c > CLOSED_MIN_CORR
    packed = g >= PACKED_GREEN_SHARE and c >= PACKED_MIN_CORR
    open_ground = evidence.get("open_share", 0.0) >= MAX_OPEN_SHARE
    return bool((closed or packed) and not open_ground)
