"""Multi-scale blob detection on a vegetation layer: a pyramid of differences of Gaussians.

The scale-normalised Laplacian σ²∇²L has an extremum at the scale of a blob (Lindeberg,
T. 1998, Feature detection with automatic scale selection, IJCV 30: 79–116): a flat disc of
radius r responds most at σ = r / √2, a Gaussian blob of standard deviation s at σ = s.
Following Lowe (2004, Distinctive image features from scale-invariant keypoints, IJCV 60:
91–110) the normalised Laplacian is approximated by a difference of Gaussians between
neighbouring scales, and large scales are computed on an image halved once per octave, so
the filters stay short and the cost is dominated by the full-resolution octave.

Everything here works on one array (a tile's read window) and is exactly local: a
candidate's value depends only on pixels within :attr:`BlobScales.support_px` of it, and the
pyramid grid is aligned to multiples of ``2 ** max_level`` pixels, so a tiled run finds the
same candidates as a whole-image run. Overlapping candidates are pruned afterwards, over all
tiles at once, by :func:`prune_blobs`.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.spatial import cKDTree

__all__ = [
    "BlobScales",
    "blob_pyramid",
    "blob_scales",
    "detect_blobs",
    "level_masks",
    "lobed_parents",
    "prune_blobs",
    "pyramid_blobs",
    "pyramid_spread",
    "response_spread",
    "ring_contrast",
    "ring_reach_px",
    "split_merged",
]

#: Scale-normalised Laplacian response of a flat disc of unit contrast at its best scale:
#: −σ²∇²L at the centre equals 2x·e^(−x) with x = r² / (2σ²), largest (2/e) at σ = r/√2.
DISC_RESPONSE = 2.0 / math.e

_TRUNCATE = 4.0  # Gaussian kernels are cut at 4 standard deviations (scipy's default)


@dataclass(frozen=True)
class BlobScales:
    """The scales searched, in full-resolution pixels.

    Attributes
    ----------
    sigmas : numpy.ndarray
        Scale-space σ of each searched scale, with one extra scale below and above the
        range (needed to recognise a maximum over scale; never reported).
    levels : numpy.ndarray of int
        Pyramid level of each scale (the image is halved ``level`` times).
    k : float
        Ratio between neighbouring scales, 2 ** (1 / scales_per_octave).
    """

    sigmas: np.ndarray
    levels: np.ndarray
    k: float

    @property
    def max_level(self) -> int:
        """Deepest pyramid level."""
        return int(self.levels.max())

    @property
    def align(self) -> int:
        """Tile windows must start at multiples of this many pixels."""
        return 2**self.max_level

    @property
    def support_px(self) -> int:
        """How far (pixels) the filters reach: the overlap tiles need for exact candidates."""
        # widest blur (half a step above the top scale, cut at 4 sigma), plus the 3x3
        # neighbourhood and the 2x2 steps of the deepest pyramid level
        f = 2**self.max_level
        reach = _TRUNCATE * float(self.sigmas[-1]) * math.sqrt(self.k) + 3 * f
        return math.ceil(reach) + 2


def blob_scales(
    radius_min_px: float, radius_max_px: float, scales_per_octave: int = 3, base: float = 1.0
) -> BlobScales:
    """Scales for crowns of radius ``radius_min_px`` to ``radius_max_px``.

    Parameters
    ----------
    radius_min_px, radius_max_px : float
        Smallest and largest crown radius in pixels.
    scales_per_octave : int
        Scales per doubling of σ.
    base : float
        A scale is computed on the pyramid level where its σ is between ``base`` and
        ``2 * base`` pixels of that level. Lowe (2004) starts octaves at 1.6; 1.0 halves the
        work for the same accuracy on crowns (measured by ``benchmarks/detect_speed.py``:
        F1 and diameter error unchanged, mean offset 0.3 instead of 0.2 pixels).

    Returns
    -------
    BlobScales
    """
    k = 2.0 ** (1.0 / scales_per_octave)
    smin = radius_min_px / math.sqrt(2.0)
    smax = radius_max_px / math.sqrt(2.0)
    n = max(1, math.ceil(math.log(smax / smin) / math.log(k) - 1e-9) + 1)
    i = np.arange(-1, n + 1)
    sig = smin * k**i
    lev = np.maximum(0, np.floor(np.log2(sig / base) + 1e-9)).astype(int)
    # the padding scales live on the level of their inner neighbour
    lev[0], lev[-1] = lev[1], lev[-2]
    return BlobScales(sig, lev, k)


@functools.lru_cache(maxsize=512)
def _gaussian_weights(sigma: float) -> np.ndarray:
    """The sampled Gaussian of ``scipy.ndimage.gaussian_filter`` (cut at 4 σ, sum 1)."""
    radius = int(_TRUNCATE * sigma + 0.5)
    x = np.arange(-radius, radius + 1)
    phi = np.exp(-0.5 / (sigma * sigma) * x**2)
    phi = phi / phi.sum()
    return phi[::-1]  # correlation weights


def _gaussian(img: np.ndarray, sigma: float, cval: float) -> np.ndarray:
    """``ndimage.gaussian_filter(img, sigma, truncate=4, mode="constant", cval=cval)``.

    The same two separable passes, with the kernel computed once per σ (the pyramid asks
    for the same few σ in every tile and window).
    """
    w = _gaussian_weights(float(sigma))
    out = np.empty_like(img)
    ndimage.correlate1d(img, w, 0, out, "constant", cval, 0)
    ndimage.correlate1d(out, w, 1, out, "constant", cval, 0)
    return out


def _halve(img: np.ndarray) -> np.ndarray:
    """Mean of 2×2 blocks; a partial block at the far edge averages the pixels it has."""
    h, w = img.shape
    he, we = h - h % 2, w - w % 2
    out = np.empty(((h + 1) // 2, (w + 1) // 2), dtype=np.float32)
    acc = img[0:he:2, 0:we:2] + img[1:he:2, 0:we:2]
    acc += img[0:he:2, 1:we:2]
    acc += img[1:he:2, 1:we:2]
    out[: he // 2, : we // 2] = acc * np.float32(0.25)
    if w % 2:
        out[: he // 2, -1] = (img[0:he:2, -1] + img[1:he:2, -1]) * np.float32(0.5)
    if h % 2:
        out[-1, : we // 2] = (img[-1, 0:we:2] + img[-1, 1:we:2]) * np.float32(0.5)
    if h % 2 and w % 2:
        out[-1, -1] = img[-1, -1]
    return out


def _halve_mask(valid: np.ndarray) -> np.ndarray:
    """A coarse pixel is valid when every fine pixel it covers is valid."""
    h, w = valid.shape
    pad = np.ones((h + h % 2, w + w % 2), dtype=bool)
    pad[:h, :w] = valid
    return pad[0::2, 0::2] & pad[1::2, 0::2] & pad[0::2, 1::2] & pad[1::2, 1::2]


_NEIGHBOURS = [
    (dz, dy, dx)
    for dz in (0, -1, 1)
    for dy in (-1, 0, 1)
    for dx in (-1, 0, 1)
    if (dz, dy, dx) != (0, 0, 0)
]


def _scale_space_maxima(
    resp: np.ndarray, min_response: float | np.ndarray, valid: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Positions that reach ``min_response`` and are ≥ all 26 neighbours (inner scales).

    Same result as comparing with a 3×3×3 maximum filter (edges repeated), but only the few
    pixels above the threshold are compared, 26 vectorised gathers instead of three passes
    over the whole stack.
    """
    _m, h, w = resp.shape
    mid = resp[1:-1]
    cand = mid >= min_response
    cand &= valid[None]
    # the four edge neighbours in the same scale, compared over whole rows and columns
    # (cheap, and most non-maxima fail one of them); at the array's edge the repeated
    # neighbour is the pixel itself, which never fails the test
    cand[:, :, :-1] &= mid[:, :, :-1] >= mid[:, :, 1:]
    cand[:, :, 1:] &= mid[:, :, 1:] >= mid[:, :, :-1]
    cand[:, :-1] &= mid[:, :-1] >= mid[:, 1:]
    cand[:, 1:] &= mid[:, 1:] >= mid[:, :-1]
    zi, yi, xi = np.nonzero(cand)
    zi = zi + 1
    v = resp[zi, yi, xi]
    # the other neighbours gathered for the few pixels left (rows and columns clamped once)
    rows = {0: yi, -1: np.maximum(yi - 1, 0), 1: np.minimum(yi + 1, h - 1)}
    cols = {0: xi, -1: np.maximum(xi - 1, 0), 1: np.minimum(xi + 1, w - 1)}
    flat = resp.reshape(-1)
    keep = np.arange(zi.size)
    for dz, dy, dx in _NEIGHBOURS:
        if keep.size == 0:
            break
        if dz == 0 and (dy == 0 or dx == 0):
            continue  # compared above
        nb = flat[((zi[keep] + dz) * h + rows[dy][keep]) * w + cols[dx][keep]]
        keep = keep[v[keep] >= nb]
    return zi[keep], yi[keep], xi[keep]


def _pyramid(img, scales: BlobScales, valid: np.ndarray, background: float):
    """Yield, per pyramid level, the normalised DoG stack of the scales computed there.

    Yields (level, ext, resp, blurs, level_valid, level_shape): ``ext`` are the indices in
    ``scales.sigmas`` of the stack's scales, ``resp`` the stack (scale, row, column) and
    ``blurs`` the blurred images below each scale.
    """
    k = scales.k
    norm = 1.0 / (math.sqrt(k) - 1.0 / math.sqrt(k))
    inner = np.arange(1, scales.sigmas.size - 1)
    level_img, level_valid = img, valid
    every = bool(valid.all())  # every pixel valid: so is every coarse pixel
    for lev in range(scales.max_level + 1):
        if lev > 0:
            level_img = _halve(level_img)
            if not every:
                level_valid = _halve_mask(level_valid)
        mine = inner[scales.levels[inner] == lev]
        if mine.size == 0:
            continue
        if every:
            level_valid = np.ones(level_img.shape, dtype=bool)
        f = 2**lev
        # scales computed on this level: its own, one below, and two above, so that the
        # next level's first scale is also tested here at the finer (more accurate)
        # resolution: a maximum between two levels is never lost, and the duplicate is
        # pruned later
        ext = np.arange(mine[0] - 1, min(mine[-1] + 2, scales.sigmas.size - 1) + 1)
        blur_s = scales.sigmas[ext[0]] * k ** (np.arange(ext.size + 1) - 0.5)
        box_var = (f * f - 1) / 12.0  # blur already applied by the 2×2 means, in full-res px²
        blurs = []
        for b in blur_s:
            local = math.sqrt(max(b * b - box_var, 0.04)) / f
            blurs.append(_gaussian(level_img, local, background))
        resp = np.empty((ext.size, *level_img.shape), dtype=np.float32)
        for j in range(ext.size):
            np.subtract(blurs[j], blurs[j + 1], out=resp[j])
            resp[j] *= norm
        del blurs[-1]
        yield lev, ext, resp, blurs, level_valid, level_img.shape


def level_masks(mask: np.ndarray, scales: BlobScales) -> dict[int, np.ndarray]:
    """A full-resolution mask halved to every pyramid level that computes a scale.

    A coarse pixel is in the mask when every full-resolution pixel it covers is (the same
    halving the detector applies to its valid pixels).
    """
    out: dict[int, np.ndarray] = {}
    inner = scales.levels[1:-1]
    m = np.asarray(mask, bool)
    for lev in range(scales.max_level + 1):
        if lev > 0:
            m = _halve_mask(m)
        if np.any(inner == lev):
            out[lev] = m
    return out


def blob_pyramid(layer: np.ndarray, scales: BlobScales, background: float = 0.0) -> list[tuple]:
    """The whole DoG pyramid of a layer, kept in memory for repeated measurements.

    Each entry is ``(level, ext, resp, blurs)`` as computed by :func:`detect_blobs` (which
    streams the levels instead). Used where one layer is measured many times with
    different masks (:mod:`ecoscan.detect.autotune`); the stacks of the coarse levels are
    small, so keeping them costs little.

    Examples
    --------
    >>> import numpy as np
    >>> pyr = blob_pyramid(np.zeros((64, 64), np.float32), blob_scales(3, 6))
    >>> [lev for lev, *_ in pyr]
    [1, 2]
    """
    img = np.asarray(layer, np.float32)
    ones = np.ones(img.shape, bool)
    return [
        (lev, ext, resp, blurs)
        for lev, ext, resp, blurs, _v, _s in _pyramid(img, scales, ones, background)
    ]


def _level_spread(
    out: np.ndarray,
    lev: int,
    ext: np.ndarray,
    resp: np.ndarray,
    sel_level: np.ndarray,
    scales: BlobScales,
    clearance: np.ndarray | None,
    clearance_sigmas: float,
    min_pixels: int,
    shift: tuple[float, np.ndarray] | None = None,
) -> None:
    """Fill ``out`` with the response spread of the scales computed on this level."""
    f = 2**lev
    if clearance is None:
        # one mask for every scale: the medians of all of them in one call per statistic
        # (row by row the same float32 operations as one scale at a time)
        js = [
            j
            for j, e in enumerate(ext)
            if 1 <= e < scales.sigmas.size - 1 and scales.levels[e] == lev
        ]
        n = int(np.count_nonzero(sel_level))
        if not js or n < min_pixels or n == 0:
            return
        take = slice(js[0], js[-1] + 1) if js[-1] - js[0] == len(js) - 1 else js
        v = resp[take][:, sel_level]
        if shift is not None and shift[0] != 0.0:
            v = v + np.float32(shift[0]) * shift[1][take][:, sel_level]
        med = np.median(v, axis=1)
        mad = np.median(np.abs(v - med[:, None]), axis=1)
        for j, m in zip(js, mad, strict=True):
            out[ext[j]] = 1.4826 * float(m)
        return
    for j, e in enumerate(ext):
        if 1 <= e < scales.sigmas.size - 1 and scales.levels[e] == lev:
            sel = sel_level
            if clearance is not None:
                # away from plants by ``clearance_sigmas`` of this scale: the filter
                # does not see them
                far = clearance[::f, ::f][: sel.shape[0], : sel.shape[1]]
                sel = sel & (far >= clearance_sigmas * scales.sigmas[e])
            v = resp[j][sel]
            if shift is not None and shift[0] != 0.0:
                v = v + np.float32(shift[0]) * shift[1][j][sel]
            if v.size < min_pixels:
                continue
            if v.size:
                med = np.median(v)
                out[e] = 1.4826 * float(np.median(np.abs(v - med)))


def pyramid_spread(
    pyramid: list[tuple],
    scales: BlobScales,
    masks: dict[int, np.ndarray],
    clearance: np.ndarray | None = None,
    clearance_sigmas: float = 2.0,
    min_pixels: int = 1,
    shift: tuple[float, list[tuple]] | None = None,
) -> np.ndarray:
    """:func:`response_spread` measured on a kept pyramid (:func:`blob_pyramid`).

    ``masks`` are the measured pixels per level (:func:`level_masks`). ``shift``
    ``(d, edge_pyramid)`` adds ``d`` times the stacks of ``edge_pyramid``: the response of
    the same layer with its fill value (invalid pixels and beyond the edges) raised by
    ``d``, since the filters are linear (see ``ecoscan.detect.autotune``).
    """
    out = np.full(scales.sigmas.size, np.nan)
    for i, (lev, ext, resp, _blurs) in enumerate(pyramid):
        sh = None if shift is None else (shift[0], shift[1][i][2])
        _level_spread(
            out, lev, ext, resp, masks[lev], scales, clearance, clearance_sigmas, min_pixels, sh
        )
    out[0], out[-1] = out[1], out[-2]
    return out


def response_spread(
    layer: np.ndarray,
    scales: BlobScales,
    mask: np.ndarray,
    background: float = 0.0,
    clearance: np.ndarray | None = None,
    clearance_sigmas: float = 2.0,
    min_pixels: int = 1,
) -> np.ndarray:
    """Robust spread (1.4826 × MAD) of the normalised DoG response at each scale.

    The spread is taken over the pixels of ``mask`` (e.g. the background between plants)
    on the pyramid level where the detector computes that scale, so it measures the noise
    and texture the detector actually sees at each scale (median absolute deviation scaled
    to a normal standard deviation: Hampel 1974, JASA 69: 383-393).

    Parameters
    ----------
    layer : numpy.ndarray
        2-D layer (invalid pixels filled).
    scales : BlobScales
        Scales searched.
    mask : numpy.ndarray of bool
        Pixels to measure.
    background : float
        Value beyond the edges.
    clearance : numpy.ndarray, optional
        Distance (full-resolution pixels) of each pixel from the nearest plant. At scale σ
        only pixels at least ``clearance_sigmas`` × σ away count, so that the response of
        nearby crowns, which the filter spreads over a few σ, does not inflate the spread.
    clearance_sigmas : float
        See ``clearance``.
    min_pixels : int
        Fewer counted pixels than this at a scale leave that scale NaN.

    Returns
    -------
    numpy.ndarray
        One spread per entry of ``scales.sigmas`` (the padding scales copy their
        neighbour); NaN where the mask has no pixel on that level.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> noise = rng.normal(0, 1, (256, 256)).astype(np.float32)
    >>> s = response_spread(noise, blob_scales(3, 6), np.ones((256, 256), bool))
    >>> bool(s[1] > s[-2])  # white noise fades at larger scales
    True
    """
    img = np.asarray(layer, np.float32)
    out = np.full(scales.sigmas.size, np.nan)
    for lev, ext, resp, _blurs, level_valid, _shape in _pyramid(img, scales, mask, background):
        _level_spread(
            out, lev, ext, resp, level_valid, scales, clearance, clearance_sigmas, min_pixels
        )
    out[0], out[-1] = out[1], out[-2]
    return out


def detect_blobs(
    layer: np.ndarray,
    scales: BlobScales,
    min_response: float | np.ndarray,
    min_value: float,
    valid: np.ndarray | None = None,
    origin: tuple[int, int] = (0, 0),
    background: float = 0.0,
    ring_mads: float | None = None,
    strong: tuple[float, float] | None = None,
    ring_open: bool = False,
) -> dict[str, np.ndarray]:
    """Find bright blobs as maxima of the normalised DoG over position and scale.

    Parameters
    ----------
    layer : numpy.ndarray
        2-D vegetation layer (index units), invalid pixels already filled with the
        background level.
    scales : BlobScales
        Scales to search.
    min_response : float or numpy.ndarray
        Smallest scale-normalised response (index units): one value, or one per scale of
        ``scales.sigmas`` (thresholds set from the noise of the response at each scale).
    min_value : float
        Smallest value of the layer smoothed at the blob's scale, at its centre.
    valid : numpy.ndarray of bool, optional
        Pixels that may hold a blob centre.
    origin : (int, int)
        Column and row of the array's first pixel in the raster (multiples of
        ``scales.align``). Positions are returned in raster pixels, computed as an integer
        pixel plus a sub-pixel offset so that tiled and whole-image runs agree to the bit.
    background : float
        Layer value assumed beyond the array's edges (bare ground), so that a crown cut by
        the raster edge is not mirrored into a larger blob centred on the edge.
    ring_mads : float, optional
        Also require each blob to stand out from its own ring of background: the layer
        smoothed at the blob's scale must exceed the median of the same smoothed layer on
        a ring ``RING`` blob radii out by ``ring_mads`` robust standard deviations of the
        ring (:func:`ring_contrast`). None (default) skips the test.
    ring_open : bool
        Measure the ring on its open sectors only and drop shoulders
        (:func:`ecoscan.detect.chromaticity.open_ring_contrast`; the log-chromaticity
        layer, conifer12).

    Returns
    -------
    dict of numpy.ndarray
        ``row``, ``col`` (sub-pixel, full resolution, raster pixel frame),
        ``sigma`` (full-resolution pixels), ``response`` and ``value``.
    """
    img = np.asarray(layer, np.float32)
    if valid is None:
        valid = np.ones(img.shape, dtype=bool)
    out: dict[str, list[np.ndarray]] = {n: [] for n in _BLOB_FIELDS}
    for lev, ext, resp, blurs, level_valid, _shape in _pyramid(img, scales, valid, background):
        _level_maxima(
            out,
            lev,
            ext,
            resp,
            blurs,
            level_valid,
            scales,
            min_response,
            min_value,
            origin,
            ring_mads,
            strong,
            ring_open,
        )
    return {n: (np.concatenate(v).astype(float) if v else np.empty(0)) for n, v in out.items()}


_BLOB_FIELDS = ("row", "col", "sigma", "response", "value")


def pyramid_blobs(
    pyramid: list[tuple],
    scales: BlobScales,
    min_response: float | np.ndarray,
    min_value: float,
    masks: dict[int, np.ndarray],
    origin: tuple[int, int] = (0, 0),
) -> dict[str, np.ndarray]:
    """:func:`detect_blobs` on a kept pyramid (:func:`blob_pyramid`).

    ``masks`` are the valid pixels per level (:func:`level_masks`). The result is the same,
    to the bit, as :func:`detect_blobs` on the layer the pyramid was made from.
    """
    out: dict[str, list[np.ndarray]] = {n: [] for n in _BLOB_FIELDS}
    for lev, ext, resp, blurs in pyramid:
        _level_maxima(
            out, lev, ext, resp, blurs, masks[lev], scales, min_response, min_value, origin
        )
    return {n: (np.concatenate(v).astype(float) if v else np.empty(0)) for n, v in out.items()}


def _level_maxima(
    out,
    lev,
    ext,
    resp,
    blurs,
    level_valid,
    scales,
    min_response,
    min_value,
    origin,
    ring_mads=None,
    strong=None,
    ring_open=False,
):
    """Append the blobs of one pyramid level to ``out`` (see :func:`detect_blobs`)."""
    f = 2**lev
    if np.ndim(min_response):
        thr = np.asarray(min_response, np.float32)[ext[1:-1]][:, None, None]
    else:
        thr = min_response
    zi, yi, xi = _scale_space_maxima(resp, thr, level_valid)
    if zi.size == 0:
        return
    # value: the layer smoothed at the lower blur of the chosen scale, at the centre
    value = np.empty(zi.size, dtype=np.float32)
    for z in np.unique(zi):
        sel = zi == z
        value[sel] = blurs[z][yi[sel], xi[sel]]
    ok = value >= min_value
    if strong is not None:
        # a blob below the centre-value threshold is kept when its value reaches the lower
        # level strong[0] and its response is strong[1] times its scale's threshold
        thr_b = thr[zi - 1, 0, 0] if np.ndim(thr) else np.float32(thr)
        ok |= (value >= strong[0]) & (resp[zi, yi, xi] >= np.float32(strong[1]) * thr_b)
    if ring_mads is not None and ok.any():
        ok[ok] = (
            ring_contrast(blurs, zi[ok], yi[ok], xi[ok], level_valid, scales, ext, f, ring_open)
            >= ring_mads
        )
    zi, yi, xi, value = zi[ok], yi[ok], xi[ok], value[ok]
    r = resp[zi, yi, xi]
    h, w = resp.shape[1:]
    dy = _vertex(resp, zi, yi, xi, axis=1, size=h)
    dx = _vertex(resp, zi, yi, xi, axis=2, size=w)
    dz = _vertex(resp, zi, yi, xi, axis=0, size=ext.size)
    sig = scales.sigmas[ext[zi]] * scales.k**dz
    out["row"].append((yi * f + origin[1]) + ((dy + 0.5) * f - 0.5))
    out["col"].append((xi * f + origin[0]) + ((dx + 0.5) * f - 0.5))
    out["sigma"].append(sig)
    out["response"].append(r)
    out["value"].append(value)


#: The ring around a blob whose pixels stand for its own background, in blob radii
#: (:func:`ring_contrast`): beyond twice the radius the smoothed crown has faded (for a
#: flat disc smoothed at σ = r/√2, to under a tenth of its contrast).
RING = (2.0, 3.0)


def ring_contrast(
    blurs: list[np.ndarray],
    zi: np.ndarray,
    yi: np.ndarray,
    xi: np.ndarray,
    level_valid: np.ndarray,
    scales: BlobScales,
    ext: np.ndarray,
    f: int,
    open_sectors: bool = False,
) -> np.ndarray:
    """How far each blob stands out from its own ring of background, in robust SDs.

    For a blob at stack scale ``zi`` and level pixel (``yi``, ``xi``), the layer smoothed
    at its scale (``blurs[zi]``, the same smoothing as the centre-value test) at the centre
    minus the median of that smoothed layer over a ring ``RING`` blob radii out, divided by
    the ring's robust standard deviation (1.4826 × MAD; Hampel 1974). Rough ground (grass
    patches, compression blocks, mottling at the blob's own scale) gives a wide ring and a
    low figure; a crown on ground stands high above its ring. Ring pixels beyond the array
    or invalid do not count; a blob with no ring pixel gets +inf (nothing to compare).

    Parameters
    ----------
    blurs : list of numpy.ndarray
        The smoothed layer below each scale of one pyramid level's stack.
    zi, yi, xi : numpy.ndarray of int
        Each blob's stack scale, row and column on that level.
    level_valid : numpy.ndarray of bool
        Valid pixels of the level.
    scales : BlobScales
        The scales searched.
    ext : numpy.ndarray of int
        Index in ``scales.sigmas`` of each scale of the stack.
    f : int
        Full-resolution pixels per level pixel (``2 ** level``).
    open_sectors : bool
        Use the ring's open sectors only and score shoulders 0
        (:func:`ecoscan.detect.chromaticity.open_ring_contrast`).

    Returns
    -------
    numpy.ndarray
        Centre minus ring median, in ring robust SDs, per blob.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> ground = rng.normal(0.0, 0.01, (40, 40))
    >>> ground[18:23, 18:23] += 0.5                       # a crown on quiet ground
    >>> z = ring_contrast([ground], np.array([0]), np.array([20]), np.array([20]),
    ...                   np.ones((40, 40), bool), blob_scales(2, 3), np.array([1]), 1)
    >>> bool(z[0] > 20)
    True
    """
    out = np.full(zi.size, np.inf)
    for z in np.unique(zi):
        sel = np.flatnonzero(zi == z)
        img = blurs[z]
        h, w = img.shape
        radius = math.sqrt(2.0) * float(scales.sigmas[ext[z]]) / f  # level pixels
        reach = math.ceil(RING[1] * radius)
        oy, ox = np.mgrid[-reach : reach + 1, -reach : reach + 1]
        dist = np.hypot(oy, ox)
        on = (dist >= RING[0] * radius) & (dist <= RING[1] * radius)
        oy, ox = oy[on], ox[on]
        ry = yi[sel][:, None] + oy[None]
        rx = xi[sel][:, None] + ox[None]
        inside = (ry >= 0) & (ry < h) & (rx >= 0) & (rx < w)
        ry, rx = np.clip(ry, 0, h - 1), np.clip(rx, 0, w - 1)
        inside &= level_valid[ry, rx]
        ring = np.where(inside, img[ry, rx], np.nan).astype(float)
        has = inside.any(axis=1)
        if not has.any():
            continue
        ring = ring[has]
        if open_sectors:  # the log-chromaticity layer's ring test (conifer12)
            out[sel[has]] = _open_ring(
                img, yi[sel][has], xi[sel][has], level_valid, radius, oy, ox, ring
            )
            continue
        med = np.nanmedian(ring, axis=1)
        mad = _MAD_TO_SD * np.nanmedian(np.abs(ring - med[:, None]), axis=1)
        centre = img[yi[sel][has], xi[sel][has]].astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            z_ring = np.where(mad > 0, (centre - med) / mad, np.where(centre > med, np.inf, 0.0))
        out[sel[has]] = z_ring
    return out


_MAD_TO_SD = 1.4826  # normal consistency constant of the MAD (Hampel 1974)


def _open_ring(img, yi, xi, level_valid, radius, oy, ox, ring):
    """:func:`ecoscan.detect.chromaticity.open_ring_contrast` of blobs at one scale: the
    ring values ``ring`` at offsets (``oy``, ``ox``) and the inner band read here."""
    from ecoscan.detect import chromaticity as chroma

    h, w = img.shape
    reach = math.ceil(RING[0] * radius)
    iy, ix = np.mgrid[-reach : reach + 1, -reach : reach + 1]
    dist = np.hypot(iy, ix)
    outer = min(chroma.INNER_OUT, RING[0])
    band = (dist >= chroma.INNER * radius) & (dist < outer * radius)
    iy, ix = iy[band], ix[band]
    ry, rx = yi[:, None] + iy[None], xi[:, None] + ix[None]
    inside = (ry >= 0) & (ry < h) & (rx >= 0) & (rx < w)
    ry, rx = np.clip(ry, 0, h - 1), np.clip(rx, 0, w - 1)
    inside &= level_valid[ry, rx]
    inner = np.where(inside, img[ry, rx], np.nan).astype(float)
    centre = img[yi, xi].astype(float)
    sectors = chroma.ring_sectors
    return chroma.open_ring_contrast(centre, ring, sectors(oy, ox), inner, sectors(iy, ix))


def ring_reach_px(scales: BlobScales) -> int:
    """Overlap (pixels) a tile needs so that :func:`ring_contrast` is exact in its core.

    The ring of the largest searched blob reaches ``RING[1]`` radii from its centre, and
    each ring pixel is the layer smoothed at that blob's scale, which reads up to the
    widest blur's reach beyond it (plus the 2 × 2 steps of the deepest level).

    Examples
    --------
    >>> sc = blob_scales(3, 12)
    >>> ring_reach_px(sc) > sc.support_px
    True
    """
    sig = float(scales.sigmas[-2])
    f = 2**scales.max_level
    reach = RING[1] * math.sqrt(2.0) * sig + _TRUNCATE * float(scales.sigmas[-1]) * math.sqrt(
        scales.k
    )
    return math.ceil(reach + 3 * f) + 2


def _vertex(
    a: np.ndarray, zi: np.ndarray, yi: np.ndarray, xi: np.ndarray, axis: int, size: int
) -> np.ndarray:
    """Offset (−0.5..0.5) of the parabola through a peak and its two neighbours on one axis."""
    idx = [zi, yi, xi]
    c = idx[axis]
    lo = c - 1
    hi = c + 1
    inside = (lo >= 0) & (hi < size)
    lo = np.clip(lo, 0, size - 1)
    hi = np.clip(hi, 0, size - 1)
    i_lo, i_hi = list(idx), list(idx)
    i_lo[axis], i_hi[axis] = lo, hi
    f0 = a[tuple(idx)].astype(float)
    fm = a[tuple(i_lo)].astype(float)
    fp = a[tuple(i_hi)].astype(float)
    den = fm - 2 * f0 + fp
    with np.errstate(invalid="ignore", divide="ignore"):
        off = np.where(den < 0, 0.5 * (fm - fp) / den, 0.0)
    off = np.where(inside, np.clip(off, -0.5, 0.5), 0.0)
    return off


def split_merged(
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    score: np.ndarray,
    ratio: float,
    *,
    child_size: tuple[float, float] = (0.4, 0.8),
) -> np.ndarray:
    """Blobs that stand for two or more touching crowns (to be dropped before pruning).

    Two touching crowns of similar size also give a blob at a larger scale centred between
    them; when it is stronger, greedy pruning keeps it and loses both crowns. A blob is
    marked here when it contains (centre within its radius) at least two smaller blobs,
    each of ``child_size`` times its radius and at least ``ratio`` times its score, whose
    centres are too far apart to be the same crown seen at two scales (spread of the
    child centres at least the largest child radius).

    Parameters
    ----------
    x, y, radius, score : numpy.ndarray
        Candidate blobs (any consistent unit).
    ratio : float
        Smallest child score as a fraction of the parent's.
    child_size : (float, float)
        Range of child radius as a fraction of the parent's.

    Returns
    -------
    numpy.ndarray of bool
        True for the blobs that are merged pairs or groups.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([0.0, -5.0, 5.0]); y = np.zeros(3)
    >>> split_merged(x, y, np.array([10.0, 5.0, 5.0]), np.array([1.0, 0.9, 0.9]), 0.7)
    array([ True, False, False])
    """
    n = x.size
    merged = np.zeros(n, dtype=bool)
    if n < 3 or ratio <= 0:
        return merged
    xy = np.column_stack([x, y])
    pairs = cKDTree(xy).query_pairs(r=float(radius.max()), output_type="ndarray")
    if pairs.size == 0:
        return merged
    i, j = pairs[:, 0], pairs[:, 1]
    swap = radius[i] < radius[j]
    par = np.where(swap, j, i)
    chi = np.where(swap, i, j)
    d = np.hypot(x[par] - x[chi], y[par] - y[chi])
    rel = radius[chi] / radius[par]
    ok = (
        (d < radius[par])
        & (rel >= child_size[0])
        & (rel <= child_size[1])
        & (score[chi] >= ratio * score[par])
    )
    par, chi = par[ok], chi[ok]
    if par.size == 0:
        return merged
    cnt = np.bincount(par, minlength=n)
    big = np.full(n, -np.inf)
    lo_x, hi_x = np.full(n, np.inf), np.full(n, -np.inf)
    lo_y, hi_y = np.full(n, np.inf), np.full(n, -np.inf)
    np.minimum.at(lo_x, par, x[chi])
    np.maximum.at(hi_x, par, x[chi])
    np.minimum.at(lo_y, par, y[chi])
    np.maximum.at(hi_y, par, y[chi])
    np.maximum.at(big, par, radius[chi])
    has = cnt >= 2
    spread = np.zeros(n)
    spread[has] = np.hypot(hi_x[has] - lo_x[has], hi_y[has] - lo_y[has])
    merged[has] = spread[has] >= big[has]
    return merged


#: A merged-pair parent (:func:`split_merged`) is one lobed crown, not touching crowns, when
#: the layer at its centre stands at least this share as high above the background as at
#: its children's centres on average (:func:`lobed_parents`). Chosen on the tuning scenes
#: and checked on the suite's development seeds (docs/detection-history.md).
LOBE_SHARE = 0.8


def lobed_parents(
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    score: np.ndarray,
    value: np.ndarray,
    background: float,
    merged: np.ndarray,
    ratio: float,
    share: float = LOBE_SHARE,
    *,
    child_size: tuple[float, float] = (0.4, 0.8),
) -> np.ndarray:
    """Which merged-pair parents are one lobed crown (to be kept after all).

    :func:`split_merged` drops a blob that holds two or more smaller strong blobs, taking
    them for touching crowns. A big crown with a few leaf clumps or lobes gives the same
    pattern, and its points then sit on the lobes, off the crown's centre. The two differ
    at the parent's centre: between two touching crowns lies their rim, shade or soil, so
    the layer smoothed at the parent's scale is lower there than at the children's
    centres; inside one crown it stays at the foliage's level. A parent is kept when its
    centre value (``value``, the layer smoothed at its scale) stands at least ``share`` as
    high above ``background`` as the mean of its children's.

    Parameters
    ----------
    x, y, radius, score, value : numpy.ndarray
        Candidate blobs (the ``value`` of :func:`detect_blobs`).
    background : float
        The layer's background level.
    merged : numpy.ndarray of bool
        Output of :func:`split_merged` for the same blobs.
    ratio, child_size
        The arguments given to :func:`split_merged` (which blobs count as children).
    share : float
        Least centre excess of the parent, as a share of its children's mean excess.

    Returns
    -------
    numpy.ndarray of bool
        True for the merged parents that are one crown.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([0.0, -5.0, 5.0]); y = np.zeros(3)
    >>> r = np.array([10.0, 5.0, 5.0]); s = np.array([1.0, 0.9, 0.9])
    >>> m = split_merged(x, y, r, s, 0.7)
    >>> lobed_parents(x, y, r, s, np.array([0.9, 1.0, 1.0]), 0.0, m, 0.7).tolist()
    [True, False, False]
    >>> lobed_parents(x, y, r, s, np.array([0.5, 1.0, 1.0]), 0.0, m, 0.7).tolist()
    [False, False, False]
    """
    out = np.zeros(x.size, dtype=bool)
    for p in np.flatnonzero(merged):
        d = np.hypot(x - x[p], y - y[p])
        rel = radius / radius[p]
        child = (d < radius[p]) & (rel >= child_size[0]) & (rel <= child_size[1])
        child &= score >= ratio * score[p]
        child[p] = False
        if child.sum() >= 2:
            out[p] = value[p] - background >= share * float(np.mean(value[child] - background))
    return out


def prune_blobs(
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    score: np.ndarray,
    *,
    overlap: float = 1.0,
    margin: float = 0.0,
) -> np.ndarray:
    """Keep the strongest of overlapping blobs (greedy non-maximum suppression, vectorised).

    Two blobs conflict when their centres are closer than ``overlap`` times the larger
    radius (one centre lies inside the other crown). The result equals the greedy rule
    "take the strongest remaining blob, drop everything that conflicts with it", computed in
    rounds over a KD-tree's pair list instead of a Python loop over pairs. Ties in score are
    broken by position (lower y, then lower x) so the outcome never depends on input order.

    Parameters
    ----------
    x, y : numpy.ndarray
        Blob centres (any consistent unit, e.g. pixels).
    radius : numpy.ndarray
        Blob radii in the same unit.
    score : numpy.ndarray
        Larger is stronger.
    overlap : float
        Conflict distance as a fraction of the larger radius.
    margin : float
        Added to the conflict distance, as a fraction of the smaller radius (0.5: a blob
        whose centre lies within half its own radius of another crown's edge, such as a
        lobe or a branch of a large crown, conflicts with it).

    Returns
    -------
    numpy.ndarray of bool
        True for the blobs kept.
    """
    n = x.size
    keep = np.zeros(n, dtype=bool)
    if n == 0:
        return keep
    order = np.lexsort((radius, x, y, -score))
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    xy = np.column_stack([x, y])
    reach = (overlap + margin) * float(radius.max())
    pairs = cKDTree(xy).query_pairs(r=reach, output_type="ndarray")
    if pairs.size:
        i, j = pairs[:, 0], pairs[:, 1]
        d = np.hypot(x[i] - x[j], y[i] - y[j])
        conflict = d < overlap * np.maximum(radius[i], radius[j]) + margin * np.minimum(
            radius[i], radius[j]
        )
        i, j = i[conflict], j[conflict]
        # orient each edge from the stronger (lower rank) to the weaker blob
        swap = rank[i] > rank[j]
        better = np.where(swap, j, i)
        worse = np.where(swap, i, j)
    else:
        better = worse = np.empty(0, dtype=np.int64)
    alive = np.ones(n, dtype=bool)
    while alive.any():
        live = alive[better] & alive[worse]
        dominated = np.zeros(n, dtype=bool)
        dominated[worse[live]] = True
        leaders = alive & ~dominated
        keep |= leaders
        alive &= ~leaders
        hit = leaders[better] & alive[worse]
        alive[worse[hit]] = False
    return keep
