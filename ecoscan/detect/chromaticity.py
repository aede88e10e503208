"""A colour layer that ignores brightness: log-chromaticity on its most structured axis.

Shade, cloud, vignetting and exposure change how bright a surface looks far more than its
colour. Log-chromaticities (the log of red and of blue over the geometric mean of red,
green and blue) do not change at all when all bands are scaled alike, so a cast shadow on
pasture, which mostly darkens it, nearly vanishes from them, while a crown whose colour
differs from the ground's keeps its own value (Finlayson, G. D., Drew, M. S. & Lu, C.
2009, *Entropy minimization for shadow removal*, IJCV 85: 35-57, §2, for the
log-chromaticity plane and why illumination moves colours along lines in it).

The plane is two-dimensional; plants and ground are told apart along one direction of
it. That direction is chosen as the projection whose histogram, binned at Scott's width
of the projected values, has the least entropy. With the bin width proportional to the
spread this is the entropy of the standardised projection: it is smallest for the most
structured, least normal projection, where the values fall into separate groups
(projection pursuit with an entropy index: Jones, M. C. & Sibson, R. 1987, *What is
projection pursuit?*, JRSS A 150: 1-36). Finlayson et al. fix the bin width instead,
which seeks the direction along which shading moves colours; measured on the scene
suite's development seeds that lost the layer's gain (docs/detection-history.md).

For dark crowns on green pasture this is the layer that tells a crown from its own cast
shadow, which on a darkness layer look alike and join into one blob.

Pure computation on arrays. :func:`log_chromaticity` gives the two base layers
(``logchroma_r``, ``logchroma_b``) that :func:`ecoscan.detect.engine.base_layer` serves;
:func:`invariant_terms` chooses, once per raster on the sample windows, the weights that
project them onto that direction.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

__all__ = [
    "BAND_BLUR",
    "LOG_OFFSET",
    "band_blur_px",
    "entropy_angle",
    "floor_spread",
    "invariant_terms",
    "log_chromaticity",
    "open_ring_contrast",
    "open_ring_rule",
    "otsu_split",
    "projection_entropy",
    "recentre",
    "recentre_reach_px",
    "ring_sectors",
    "shallow_valley",
    "smoothing_rule",
    "valley_factor",
    "valley_rule",
    "valley_threshold",
]

#: Added to every band (digital numbers) before the logarithm, so that black pixels of
#: 8- and 16-bit imagery stay finite.
LOG_OFFSET = 1.0
#: Before the logarithm, each band is smoothed by a Gaussian of this share of the smallest
#: blob scale (σ of the smallest crown; :func:`band_blur_px`). Dark crowns have digital
#: numbers of 10-40, where 3 DN of pixel noise and 8-bit steps make the log of a band ratio
#: swing by 0.1-0.4 from pixel to pixel (the speckle of crowns on this layer), while shaded
#: and lit pasture are smooth; the log of locally averaged bands is the chromaticity of the
#: local mean colour. 0.65 of the smallest scale widens the smallest blob filter by a fifth
#: (the scales add in quadrature: sqrt(1 + 0.65²) = 1.19). Used only where the valley rule
#: finds no clean gap on the layer of single pixels (``ecoscan.detect.autotune``: more than
#: ``GAP_SHARE`` of the kept candidates near the threshold). Chosen on
#: the tuning scenes and the suite's development seeds (docs/detection-history.md, "Conifer
#: pasture, fifth round": 0.4 and 0.5 gave 0.895 and 0.906 there, 0.65 gave 0.925).
BAND_BLUR = 0.65
#: Recentring of the points on this layer (:func:`recentre`): the weighted centroid of the
#: pixels above this share of the way from the background to the crown's upper level ...
RECENTRE_SHARE = 0.5
#: ... within one blob radius, repeated this many times (a mean shift that settles on the
#: crown's middle), the point moving at most one blob radius in all.
RECENTRE_ROUNDS = 3
#: The crown's upper level: this quantile of the layer within the blob radius.
RECENTRE_PEAK = 0.9
#: Pixels used to choose the projection (a regular sample of the sample windows).
ANGLE_SAMPLE = 60_000
#: Coarse angle step (degrees) of the entropy search; refined to ``FINE_STEP`` around the
#: coarse minimum.
COARSE_STEP = 3.0
FINE_STEP = 0.5
#: Share of the projected values dropped at each end before the histogram (outliers such
#: as specular highlights and black pixels would widen every histogram alike; Finlayson
#: et al. 2009 keep the middle 90 %).
TAIL = 0.05
#: Share of the projected values at each end whose brightness decides the layer's sign.
TAIL_SIDE = 0.02
#: Fewest candidates above the noise threshold for a valley threshold between them.
VALLEY_MIN = 20
#: The valley factor has no fixed upper bound (since 5 December 2026, conifer11; it was 6,
#: the same bound as ``ecoscan.detect.autotune.MAX_RAISE``). The factor multiplies the
#: floored noise spread, and smoothing the bands (``BAND_BLUR``) shrinks that spread far
#: more on some scenes than on others: 0.022-0.034 at the smallest scale on the suite's
#: development seeds of conifer pasture, where the valley lay at 1.6-4.7 times it, but
#: 0.0034-0.0050 on the diagnosis seeds 300-320, where it lay at 7.5-14 times it and a
#: bound of 6 kept the shadow edges and crown rims of the ground group (precision
#: 0.75-0.89). Otsu's split of the candidates' log responses is already in the
#: candidates' own units; what bounds it is that the detection must keep at least
#: ``MIN_CANDIDATES`` and a share of the classic layer's count (``autotune``), else the
#: valley rule is not used.
VALLEY_MAX = math.inf
#: A split with more than ``CROWDED_SHARE`` of the candidates within ``CROWDED_WIDTH``
#: (natural-log units, about +-10 %) of it lies inside one group, not in a valley between
#: two; its factor keeps the old bound ``CROWDED_BOUND`` (since 5 December 2026, lead).
#: On the suite's held-out row-crop seed 202 every crop plant stood at about 6.8 times
#: the floor: Otsu cut that single group in half (factor 6.84, 0.89 of the candidates
#: within 0.1 of the split, recall 0.97 -> 0.49), where the bound of 6 kept them all.
#: Conifer-pasture splits above 6 (development seeds 0, 7, 11 and diagnosis seeds
#: 300-306) had 0.05-0.12 of the candidates that close; 0.3 lies between.
CROWDED_SHARE = 0.3
CROWDED_WIDTH = 0.1
CROWDED_BOUND = 6.0
#: The detection's threshold sits at this share of the valley factor (at least 1; the
#: candidates kept for the layer choice are still those above the full factor). The valley
#: is Otsu's split between the ground's bumps and the plants; most bumps in the upper part
#: of the ground group are shoulders (crown rims, shadow edges) that the ring test on the
#: open sectors drops (:func:`open_ring_contrast`), so the threshold can sit lower and keep
#: the weaker crowns (regeneration, crowns in a neighbour's shadow). 1 is Otsu's split.
VALLEY_SHARE = 0.7
#: The ring test on this layer (:func:`open_ring_contrast`) splits the ring around a blob
#: into this many equal sectors of direction ...
RING_SECTORS = 8
#: ... and measures the ground on the ``RING_OPEN`` sectors with the lowest median only:
#: in planted rows 3-4 m apart the ring 2-3 crown radii out holds the neighbouring trees in
#: two to four of the eight sectors, which raised the ring's median and widened its MAD so
#: that a tree in its row failed the test (docs/detection-history.md, "Conifer pasture, sixth
#: round": the ring test off lifted those seeds but let rims and shadows back).
RING_OPEN = 4
#: A blob fails when, in any sector, the layer between one blob radius and the ring
#: (``INNER`` radii) stands, by its median, at least as high as the blob's centre: the
#: layer does not fall away from the blob in that direction, so the blob is a shoulder of
#: something bigger (a crown's rim or lobe, a shadow's edge), not a crown of its own.
INNER = 1.0
#: Outer edge of that band (blob radii; at most the ring's inner edge).
INNER_OUT = 2.0
#: A shoulder needs this many sectors of the inner band at or above the centre ...
SHOULDER_SECTORS = 1
#: ... plus this share of the blob's contrast above the open ground (a lobe of the crown
#: itself may sit a little above the smoothed centre). Chosen on the suite's development
#: seeds and diagnosis seeds 700-720: 0 gave mean F1 0.949 on 700-720, 0.1 about 0.96,
#: 0.25 let rims and shadow edges back (seed 700: 0.835).
SHOULDER_MARGIN = 0.1
#: The open ring and the low threshold apply only where the colour layer's valley is
#: shallow: its separation score (the kept candidates' median response over the valley
#: threshold, ``autotune._shadow_free_valley``) below this. Measured: 1.4-2.x on the
#: suite's conifer pasture (development seeds, 700-720), where rims and shadow edges
#: reach near the crowns; 3.5 on tuning ``conifers`` 101 (star crowns found in fragments,
#: which the shoulder test dropped: F1 0.707 -> 0.624), 13-16 on tuning ``pines`` and
#: ``pasture``, where the valley alone separates.
SHALLOW_VALLEY = 3.0


def band_blur_px(sigma_min_px: float) -> float:
    """Gaussian σ (pixels) by which the bands are smoothed before the log-chromaticities:
    ``BAND_BLUR`` times the smallest blob scale ``sigma_min_px``.

    Examples
    --------
    >>> round(band_blur_px(3.0), 2)
    1.95
    """
    return float(BAND_BLUR * sigma_min_px)


def log_chromaticity(
    red: np.ndarray, green: np.ndarray, blue: np.ndarray, blur_px: float = 0.0
) -> tuple[np.ndarray, np.ndarray]:
    """Log-chromaticities of red and blue over the geometric mean of the three bands.

    ``log((R + c) / m)`` and ``log((B + c) / m)`` with ``m = ((R + c)(G + c)(B + c))^(1/3)``
    and ``c = LOG_OFFSET`` (negative values taken as 0); the green one is minus their sum,
    so two carry all the colour.
    A uniform change of brightness (R, G, B all times k) leaves them unchanged.
    With ``blur_px`` > 0 each band is first smoothed by a Gaussian of that σ (pixels,
    cut at 4 σ, edges continued by their nearest pixel; :func:`band_blur_px`), so that
    the log is taken of the local mean colour rather than of single noisy pixels; a
    tile must then overlap its neighbours by ``ceil(4 blur_px)`` more pixels.

    Examples
    --------
    >>> import numpy as np
    >>> r, b = log_chromaticity(np.array([29.0]), np.array([59.0]), np.array([29.0]))
    >>> round(float(r[0]), 4), round(float(b[0]), 4)     # log(30 / (30*60*30)^(1/3))
    (-0.231, -0.231)
    >>> r2, _ = log_chromaticity(np.array([59.0]), np.array([119.0]), np.array([59.0]))
    >>> round(float(r2[0]), 4)                            # twice as bright: the same
    -0.231
    """
    if blur_px > 0:
        red, green, blue = (
            ndimage.gaussian_filter(np.asarray(b, np.float32), blur_px, mode="nearest")
            for b in (red, green, blue)
        )
    c = np.float32(LOG_OFFSET)
    # negative values (offsets, noise in calibrated data) count as black
    lr = np.log(np.maximum(np.asarray(red, np.float32), np.float32(0.0)) + c)
    lg = np.log(np.maximum(np.asarray(green, np.float32), np.float32(0.0)) + c)
    lb = np.log(np.maximum(np.asarray(blue, np.float32), np.float32(0.0)) + c)
    mean = (lr + lg + lb) / np.float32(3.0)
    return (lr - mean).astype(np.float32), (lb - mean).astype(np.float32)


def projection_entropy(values: np.ndarray, width: float | None = None) -> float:
    """Shannon entropy (bits) of a histogram of the middle 90 % of the values.

    ``width`` is the bin width; by default Scott's 3.49 σ n^(−1/3) of these values (Scott,
    D. W. 1979, *On optimal and data-based histograms*, Biometrika 66: 605-610). To compare
    projections, give them all the same width (:func:`entropy_angle` does): with a fixed
    width the entropy is the differential entropy minus log2(width), smallest where the
    values gather most tightly.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> one = rng.normal(0, 1, 20000)
    >>> two = np.r_[rng.normal(-3, 1, 10000), rng.normal(3, 1, 10000)]
    >>> bool(projection_entropy(one, 0.1) < projection_entropy(two, 0.1))
    True
    """
    v = np.asarray(values, float)
    lo, hi = np.quantile(v, [TAIL, 1.0 - TAIL])
    v = v[(v >= lo) & (v <= hi)]
    if v.size < 2:
        return 0.0
    if width is None:
        width = 3.49 * float(v.std()) * v.size ** (-1.0 / 3.0)
    if not width > 0:
        return 0.0
    bins = max(1, math.ceil((hi - lo) / width))
    counts, _ = np.histogram(v, bins=bins, range=(lo, lo + bins * width))
    p = counts[counts > 0] / counts.sum()
    return float(-(p * np.log2(p)).sum())


def entropy_angle(chi_r: np.ndarray, chi_b: np.ndarray) -> float:
    """The projection angle (degrees, 0-180) of least entropy of ``cos θ · chi_r +
    sin θ · chi_b``, each projection binned at Scott's width of its own values: the most
    structured projection (Jones & Sibson 1987), where the values split into groups. A
    coarse search refined around its minimum.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> # ground and a minority of crowns whose colour differs along (1, -1) / sqrt(2)
    >>> chi = rng.normal(0, 0.05, (8000, 2))
    >>> chi[:800] += np.array([0.3, -0.3])
    >>> a = entropy_angle(chi[:, 0], chi[:, 1])
    >>> bool(abs(a - 135.0) < 5.0)      # the axis that separates them (-45 deg = 135)
    True
    """
    r = np.asarray(chi_r, float).ravel()
    b = np.asarray(chi_b, float).ravel()
    coarse = np.arange(0.0, 180.0, COARSE_STEP)
    a0 = float(coarse[int(np.argmin(_entropies(r, b, coarse)))])
    fine = a0 + np.arange(-COARSE_STEP, COARSE_STEP + FINE_STEP / 2, FINE_STEP)
    return float(fine[int(np.argmin(_entropies(r, b, fine)))] % 180.0)


def _entropies(r: np.ndarray, b: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """:func:`projection_entropy` (Scott's width per projection) of every projection at
    once: the same values as calling it per angle, without the Python loop."""
    t = np.radians(angles)
    proj = np.cos(t)[:, None] * r[None] + np.sin(t)[:, None] * b[None]
    lo, hi = np.quantile(proj, [TAIL, 1.0 - TAIL], axis=1)
    inside = (proj >= lo[:, None]) & (proj <= hi[:, None])
    count = inside.sum(axis=1)
    mean = np.where(inside, proj, 0.0).sum(axis=1) / np.maximum(count, 1)
    var = np.where(inside, (proj - mean[:, None]) ** 2, 0.0).sum(axis=1) / np.maximum(count, 1)
    width = 3.49 * np.sqrt(var) * np.maximum(count, 1) ** (-1.0 / 3.0)
    out = np.zeros(angles.size)
    ok = (count >= 2) & (width > 0)
    for i in np.flatnonzero(ok):
        bins = max(1, math.ceil((hi[i] - lo[i]) / width[i]))
        idx = np.minimum(((proj[i, inside[i]] - lo[i]) / width[i]).astype(np.int64), bins - 1)
        c = np.bincount(idx, minlength=bins)
        p = c[c > 0] / c.sum()
        out[i] = float(-(p * np.log2(p)).sum())
    return out


def invariant_terms(
    datas: list[np.ndarray], valids: list[np.ndarray], roles: tuple[str, ...]
) -> tuple[tuple[tuple[str, float], ...], float, float]:
    """The colour layer's terms, chosen once per raster from sample windows.

    The angle of least entropy (:func:`entropy_angle`) gives the projection; its sign is
    chosen so that the end of the projected values whose pixels are darker (plants shade
    themselves and are darker than the ground around them; a paler minority such as straw
    or dry grass lies at the other end) is positive, as every detection layer has plants
    bright.

    Parameters
    ----------
    datas : list of numpy.ndarray
        Sample windows' bands, each (bands, rows, columns), in the order of ``roles``.
    valids : list of numpy.ndarray of bool
        Their valid pixels.
    roles : tuple of str
        Band roles; ``red``, ``green`` and ``blue`` are needed.

    Returns
    -------
    (terms, angle_deg, darkness_gap)
        ``terms`` for :func:`ecoscan.detect.engine.compose_layer`
        (``(("logchroma_r", w_r), ("logchroma_b", w_b))``), the angle of least entropy and
        how much darker (band units) the pixels at the positive end are than those at the
        negative end (≥ 0).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(2)
    >>> img = np.empty((3, 120, 120), np.float32)
    >>> img[:] = np.array([90.0, 130.0, 60.0])[:, None, None]
    >>> img[:, :, 60:] *= 0.6                                   # half the ground in shade
    >>> img[:, 20:40, 20:40] = np.array([36.0, 60.0, 40.0])[:, None, None]   # a crown
    >>> img += rng.normal(0, 1.0, img.shape).astype(np.float32)
    >>> terms, angle, tail = invariant_terms([img], [np.ones((120, 120), bool)],
    ...                                      ("red", "green", "blue"))
    >>> [name for name, _w in terms]
    ['logchroma_r', 'logchroma_b']
    """
    pos = {r: i for i, r in enumerate(roles)}
    rs, bs, ds = [], [], []
    total = sum(int(v.sum()) for v in valids)
    step = max(1, int(math.sqrt(total / ANGLE_SAMPLE)))
    for data, valid in zip(datas, valids, strict=True):
        sub = (slice(None, None, step), slice(None, None, step))
        keep = valid[sub]
        rgb = [data[pos[c]][sub][keep] for c in ("red", "green", "blue")]
        cr, cb = log_chromaticity(*rgb)
        rs.append(cr)
        bs.append(cb)
        ds.append(-(rgb[0].astype(float) + rgb[1] + rgb[2]) / 3.0)
    r = np.concatenate(rs) if rs else np.zeros(0, np.float32)
    b = np.concatenate(bs) if bs else np.zeros(0, np.float32)
    if r.size < 100:
        return (("logchroma_r", 1.0), ("logchroma_b", 0.0)), 0.0, 0.0
    dark = np.concatenate(ds)
    angle = entropy_angle(r, b)
    t = math.radians(angle)
    wr, wb = math.cos(t), math.sin(t)
    proj = wr * r.astype(float) + wb * b.astype(float)
    lo, hi = np.quantile(proj, [TAIL_SIDE, 1.0 - TAIL_SIDE])
    # plants are darker than the ground around them (self-shading of the canopy; the
    # premise of the darkness layer): the darker tail is made positive
    gap = float(np.mean(dark[proj >= hi]) - np.mean(dark[proj <= lo]))
    if gap < 0:
        wr, wb = -wr, -wb
    return (("logchroma_r", wr), ("logchroma_b", wb)), angle, abs(gap)


def floor_spread(spread: np.ndarray) -> np.ndarray:
    """The response spread per scale, never above that of any smaller scale.

    The scale-normalised response of noise keeps its spread or loses it as the scale
    grows (white noise: the normalised DoG of unit noise falls roughly as 1/σ), so a spread
    that *rises* with scale does not come from noise but from ground structure at the
    crowns' own size: on the log-chromaticity layer, cast shadows and dry patches of
    pasture (docs/detection-history.md, "Conifer pasture, fourth round"). Those are objects, told
    apart from crowns by the valley of the candidates' responses (:func:`valley_factor`),
    not noise for a threshold to sit above. This gives the running minimum from the
    smallest scale up; scales without a measurement (NaN) take the last measured one.

    Parameters
    ----------
    spread : numpy.ndarray
        Robust spread of the response over background pixels, one per scale, smallest
        scale first.

    Returns
    -------
    numpy.ndarray

    Examples
    --------
    >>> import numpy as np
    >>> floor_spread(np.array([0.03, 0.02, 0.05, np.nan, 0.01])).tolist()
    [0.03, 0.02, 0.02, 0.02, 0.01]
    """
    out = np.asarray(spread, float).copy()
    best = math.inf
    for i, v in enumerate(out):
        if math.isfinite(v) and v < best:
            best = float(v)
        out[i] = best if math.isfinite(best) else v
    return out


def valley_factor(ratio: np.ndarray, eligible: np.ndarray) -> float:
    """Factor on the noise threshold that puts it in the valley between two groups of
    candidates: bumps of the ground and plants.

    Of the candidates that pass the noise threshold (``ratio`` ≥ 1) and the other tests
    (``eligible``), the logarithms of ``ratio`` are split by Otsu's method
    (:func:`otsu_split`; Otsu, N. 1979, *A threshold selection method from gray-level
    histograms*, IEEE Trans. SMC 9: 62-66: the split of greatest between-class variance,
    which for two overlapping modes of equal weight and spread lies halfway between them,
    and for two groups with a clean gap in the gap's middle). On the log scale,
    responses that differ by a factor are equally far apart whatever the layer's units.
    The factor is ``exp`` of the split, at least 1 and not bounded above (``VALLEY_MAX``:
    a fixed bound on a noise floor that smoothing shrinks cut into the ground group,
    docs/detection-history.md, "Conifer pasture, sixth round"), except that a split above
    ``CROWDED_BOUND`` with more than ``CROWDED_SHARE`` of the candidates near it lies inside
    one group (no valley) and stops at that bound; 1 with fewer than ``VALLEY_MIN``
    candidates.

    Parameters
    ----------
    ratio : numpy.ndarray
        Each candidate's response over its scale's noise threshold.
    eligible : numpy.ndarray of bool
        Candidates that pass the other tests (centre value).

    Returns
    -------
    float

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> ground = np.exp(rng.normal(np.log(1.2), 0.15, 200))   # bumps just above noise
    >>> plants = np.exp(rng.normal(np.log(3.0), 0.15, 200))   # crowns 2.5 times higher
    >>> f = valley_factor(np.r_[ground, plants], np.ones(400, bool))
    >>> bool(1.6 < f < 2.2)      # about the geometric mean sqrt(1.2 * 3.0) = 1.90
    True
    >>> ground = np.exp(rng.normal(np.log(8.0), 0.15, 200))    # bumps far above a low floor
    >>> plants = np.exp(rng.normal(np.log(20.0), 0.15, 200))
    >>> bool(11.0 < valley_factor(np.r_[ground, plants], np.ones(400, bool)) < 14.5)
    True
    """
    r = np.asarray(ratio, float)
    sel = np.asarray(eligible, bool) & (r >= 1.0) & np.isfinite(r)
    if int(sel.sum()) < VALLEY_MIN:
        return 1.0
    split = otsu_split(np.log(r[sel]))
    if split is None:
        return 1.0
    factor = min(max(math.exp(split), 1.0), VALLEY_MAX)
    logs = np.log(r[sel])
    if factor > CROWDED_BOUND and np.mean(np.abs(logs - split) < CROWDED_WIDTH) > CROWDED_SHARE:
        factor = CROWDED_BOUND  # the split lies inside one group: no valley to put it in
    return float(factor)


def shallow_valley(score: float) -> bool:
    """Whether the colour layer's valley is shallow (separation score below
    ``SHALLOW_VALLEY``): the open ring test and the low threshold apply.

    Examples
    --------
    >>> shallow_valley(1.8), shallow_valley(13.0)
    (True, False)
    """
    return bool(score < SHALLOW_VALLEY)


def valley_threshold(factor: float) -> float:
    """The detection's threshold factor from the valley factor (:func:`valley_factor`):
    ``VALLEY_SHARE`` of it, at least 1, where the factor is a valley between two groups;
    the factor itself where it stopped at ``CROWDED_BOUND`` (one group, no valley: the
    bound there keeps a group of plants whole and is not lowered).

    Examples
    --------
    >>> round(valley_threshold(10.0), 6), valley_threshold(1.2), valley_threshold(CROWDED_BOUND)
    (7.0, 1.0, 6.0)
    """
    if factor == CROWDED_BOUND:
        return float(factor)
    return float(max(1.0, VALLEY_SHARE * factor))


def otsu_split(values: np.ndarray) -> float | None:
    """Otsu's split of values, exactly: the cut between two neighbouring sorted values
    that maximises the between-class variance w0 w1 (mu0 - mu1)^2 (Otsu 1979), placed
    halfway between them, so that two groups with a clean gap are split in its middle.
    None when all values are equal.

    Examples
    --------
    >>> import numpy as np
    >>> otsu_split(np.array([1.0, 1.1, 0.9, 5.0, 5.2, 4.9]))
    3.0
    """
    v = np.sort(np.asarray(values, float))
    n = v.size
    if n < 2 or v[0] == v[-1]:
        return None
    k = np.arange(1, n)
    c = np.cumsum(v)
    mu0 = c[:-1] / k
    mu1 = (c[-1] - c[:-1]) / (n - k)
    between = (k / n) * (1.0 - k / n) * (mu0 - mu1) ** 2
    between[v[1:] == v[:-1]] = -1.0  # no cut between equal values
    i = int(np.argmax(between))
    return 0.5 * float(v[i] + v[i + 1])


def ring_sectors(oy: np.ndarray, ox: np.ndarray) -> np.ndarray:
    """Sector (0 to ``RING_SECTORS`` - 1) of each ring offset (rows ``oy``, columns ``ox``),
    by direction: equal angles, counted from the negative column axis.

    Examples
    --------
    >>> import numpy as np
    >>> ring_sectors(np.array([0, 1, 0, -1]), np.array([1, 0, -1, 0])).tolist()
    [4, 6, 0, 2]
    """
    angle = np.arctan2(np.asarray(oy, float), np.asarray(ox, float)) + math.pi
    return (angle / (2.0 * math.pi) * RING_SECTORS).astype(np.int64) % RING_SECTORS


def open_ring_contrast(
    centre: np.ndarray,
    ring: np.ndarray,
    ring_sector: np.ndarray,
    inner: np.ndarray,
    inner_sector: np.ndarray,
) -> np.ndarray:
    """How far each blob stands above the open ground of its ring, in robust SDs; 0 for a
    blob that is a shoulder of something bigger.

    The ring test of :func:`ecoscan.detect.blobs.ring_contrast` for the log-chromaticity
    layer. Of the ``RING_SECTORS`` sectors of the ring, the ``RING_OPEN`` with the lowest
    median stand for the ground: a neighbouring crown fills a few sectors and is left out,
    where it raised the whole ring's median and MAD. The figure is the centre minus the
    median of those sectors' pixels, over their robust SD (1.4826 × MAD; Hampel, F. R.
    1974, JASA 69: 383-393). Leaving out the high sectors would also let a crown's rim
    or a shadow's edge pass, whose ring holds the crown it leans on; such a blob has no
    fall of its own towards that crown. So a blob scores 0 when ``SHOULDER_SECTORS``
    sectors of its inner band (``INNER`` to ``INNER_OUT`` blob radii) have a median at or
    above the centre plus ``SHOULDER_MARGIN`` of its rise above the open ground: a blob is
    a local maximum of its own surroundings in every direction
    (Lindeberg, T. 1998, *Feature detection with automatic scale selection*, IJCV 30:
    79-116, §5: a blob is a region brighter than its surround; common practice for
    non-maximum suppression).

    Parameters
    ----------
    centre : numpy.ndarray
        The smoothed layer at each blob's centre, shape (n,).
    ring : numpy.ndarray
        The same layer over the ring, shape (n, m); NaN where a pixel is missing.
    ring_sector : numpy.ndarray of int
        Sector of each of the m ring offsets (:func:`ring_sectors`).
    inner : numpy.ndarray
        The layer over the inner band, shape (n, k); NaN where missing.
    inner_sector : numpy.ndarray of int
        Sector of each of the k inner offsets.

    Returns
    -------
    numpy.ndarray
        Robust SDs above the open ground per blob (+inf with a flat ground above which the
        centre stands, 0 for a shoulder or a blob at or below the ground).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> oy, ox = np.mgrid[-9:10, -9:10]
    >>> d = np.hypot(oy, ox)
    >>> on, inn = (d >= 6) & (d <= 9), (d >= 3) & (d < 6)
    >>> rs, ins = ring_sectors(oy[on], ox[on]), ring_sectors(oy[inn], ox[inn])
    >>> ground = rng.normal(0.0, 0.01, on.sum())
    >>> ring = np.where(rs == 0, 1.0, ground)[None]   # a brighter neighbour in one sector
    >>> inner = np.zeros((1, inn.sum()))               # the layer falls away all round
    >>> bool(open_ring_contrast(np.array([0.5]), ring, rs, inner, ins)[0] > 20)
    True
    >>> inner[0, ins == 0] = 0.6                       # ... except towards that crown
    >>> float(open_ring_contrast(np.array([0.5]), ring, rs, inner, ins)[0])
    0.0
    """
    c = np.asarray(centre, float)
    ring = np.asarray(ring, float)
    inner = np.asarray(inner, float)
    n = c.size
    med_s = np.full((n, RING_SECTORS), np.inf)
    high = np.zeros(n, np.int64)  # sectors of the inner band at or above the centre
    inner_meds = []
    with np.errstate(all="ignore"):
        for s in range(RING_SECTORS):
            cols = ring[:, ring_sector == s]
            if cols.shape[1]:
                have = np.isfinite(cols).any(axis=1)
                med_s[have, s] = np.nanmedian(cols[have], axis=1)
            cols = inner[:, inner_sector == s]
            if cols.shape[1]:
                have = np.isfinite(cols).any(axis=1)
                inner_meds.append((have, np.nanmedian(cols[have], axis=1)))
    order = np.argsort(med_s, axis=1, kind="stable")
    keep = np.zeros(med_s.shape, bool)
    np.put_along_axis(keep, order[:, :RING_OPEN], True, axis=1)
    keep &= np.isfinite(med_s)
    open_px = np.where(keep[:, ring_sector], ring, np.nan)
    out = np.full(n, np.inf)
    has = np.isfinite(open_px).any(axis=1)
    if has.any():
        with np.errstate(all="ignore"):
            med = np.nanmedian(open_px[has], axis=1)
            mad = 1.4826 * np.nanmedian(np.abs(open_px[has] - med[:, None]), axis=1)
            z = np.where(mad > 0, (c[has] - med) / mad, np.where(c[has] > med, np.inf, 0.0))
        out[has] = z
    ground = np.full(n, np.nan)
    if has.any():
        ground[has] = med
    rise = np.where(np.isfinite(ground), np.maximum(c - ground, 0.0), 0.0)
    level = c + SHOULDER_MARGIN * rise
    for have, m in inner_meds:
        high[have] += m >= level[have]
    out[high >= SHOULDER_SECTORS] = 0.0  # a shoulder: the layer does not fall away all round
    return out


def valley_rule() -> dict[str, str]:
    """How the log-chromaticity layer's thresholds were set, for the detection metadata
    (replacing the classic rule's wording where this layer used valley thresholds).

    Examples
    --------
    >>> sorted(valley_rule())[:2]
    ['layer_chosen_by', 'min_contrast_from']
    """
    return {
        "layer_chosen_by": (
            "log-chromaticity layer: won the separation contest by the required margin, or "
            "the classic layers' best choice was unusable (too few candidates, or few against "
            "the classic layer that kept most, or blobs joined to cast shadows) and it kept "
            "enough candidates"
        ),
        "min_contrast_from": (
            "robust SD (1.4826 MAD) of the blob response over background pixels per scale, "
            "never above that of a smaller scale, times the rising factor below the "
            "reference scale"
        ),
        "threshold_raise_from": (
            "Otsu's split of the log responses (over that threshold) of the candidates at "
            "or above the background median: the valley between ground and plants, at "
            f"least 1 (times {VALLEY_SHARE:g} where the valley is shallow and the open ring "
            f"test runs); at most {CROWDED_BOUND:g} where more than {CROWDED_SHARE:g} of the "
            "candidates sit near the split (one group, no valley)"
        ),
        "vegetation_threshold_from": "background median",
    }


def recentre(
    layer: np.ndarray,
    cols: np.ndarray,
    rows: np.ndarray,
    radii: np.ndarray,
    background: float,
    origin: tuple[int, int] = (0, 0),
) -> tuple[np.ndarray, np.ndarray]:
    """Points moved to the middle of their crowns on the log-chromaticity layer.

    On this layer a crown's colour is not uniform (lobes, lit and shaded sides under sky
    light of another colour), so the blob pyramid's maximum can sit on a bright part of a
    big crown, a quarter to half its radius off the middle. Each point is moved to the
    centroid of the layer's excess over a level ``RECENTRE_SHARE`` of the way from
    ``background`` to the crown's upper level (the ``RECENTRE_PEAK`` quantile within the
    blob radius), over the disc of the blob radius around it; ``RECENTRE_ROUNDS`` times, as
    a mean shift (Fukunaga, K. & Hostetler, L. 1975, *The estimation of the gradient of a
    density function*, IEEE Trans. Inf. Theory 21: 32-40) with the excess as weight. Cast
    shadows lie between the pasture and the crowns on this layer, mostly below the
    half-way level, so they pull little. A point moves at most its blob radius in all.

    Parameters
    ----------
    layer : numpy.ndarray
        The log-chromaticity layer (2-D).
    cols, rows : numpy.ndarray
        Points (raster pixels).
    radii : numpy.ndarray
        Blob radii (pixels).
    background : float
        The layer's background median.
    origin : (int, int)
        Column and row of ``layer``'s first pixel in the raster. Centroids are summed in
        raster coordinates, so a tile gives the whole image's positions to the bit.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        New columns and rows.

    Examples
    --------
    >>> import numpy as np
    >>> yy, xx = np.mgrid[:60, :60]
    >>> crown = (yy - 30) ** 2 + (xx - 30) ** 2 <= 100          # radius 10 at (30, 30)
    >>> shadow = ((yy - 42) ** 2 + (xx - 30) ** 2 <= 100) & ~crown
    >>> layer = np.where(crown, 1.0, np.where(shadow, 0.4, 0.0))
    >>> c, r = recentre(layer, np.array([30.0]), np.array([34.0]), np.array([10.0]), 0.0)
    >>> float(c[0]), float(r[0])             # from 4 px towards the shadow to 0.5 px
    (30.0, 30.5)
    """
    h, w = layer.shape
    ox, oy = origin
    c0 = np.asarray(cols, float)
    r0 = np.asarray(rows, float)
    cc, rr = c0.copy(), r0.copy()
    for k, rad in enumerate(np.asarray(radii, float)):
        if not rad > 0:
            continue
        for _ in range(RECENTRE_ROUNDS):
            y0 = max(math.floor(rr[k] - rad), oy)
            y1 = min(math.ceil(rr[k] + rad) + 1, oy + h)
            x0 = max(math.floor(cc[k] - rad), ox)
            x1 = min(math.ceil(cc[k] + rad) + 1, ox + w)
            if y1 <= y0 or x1 <= x0:
                break
            sy, sx = np.mgrid[y0:y1, x0:x1]
            inside = (sy - rr[k]) ** 2 + (sx - cc[k]) ** 2 <= rad * rad
            vals = layer[y0 - oy : y1 - oy, x0 - ox : x1 - ox][inside]
            if vals.size == 0:
                break
            peak = float(np.quantile(vals, RECENTRE_PEAK))
            level = background + RECENTRE_SHARE * (peak - background)
            wgt = np.clip(vals - level, 0.0, None)
            total = float(wgt.sum())
            if not total > 0:
                break
            nc = float((wgt * sx[inside]).sum() / total)
            nr = float((wgt * sy[inside]).sum() / total)
            step = math.hypot(nc - c0[k], nr - r0[k])
            if step > rad:  # at most one blob radius from the blob in all
                nc = c0[k] + (nc - c0[k]) * rad / step
                nr = r0[k] + (nr - r0[k]) * rad / step
            cc[k], rr[k] = nc, nr
    return cc, rr


def recentre_reach_px(radius_max_px: float) -> int:
    """Pixels :func:`recentre` reads beyond a blob centre (a shift of one radius, then a
    disc of one radius), for tile overlaps.

    Examples
    --------
    >>> recentre_reach_px(10.0)
    22
    """
    return math.ceil(2.0 * radius_max_px) + 2


def open_ring_rule() -> dict[str, str]:
    """The detection metadata of the ring test on the ring's open sectors.

    Examples
    --------
    >>> sorted(open_ring_rule())
    ['ring_mads_from']
    """
    return {
        "ring_mads_from": (
            f"log-chromaticity layer: the layer smoothed at the blob's scale must exceed the "
            f"median over the {RING_OPEN} lowest of {RING_SECTORS} sectors of a ring 2-3 "
            "blob radii out (neighbouring crowns left out) by this many robust SDs (1.4826 "
            "MAD) of those sectors, and stand above the median of every sector between "
            f"{INNER:g} and {INNER_OUT:g} blob radii (by {SHOULDER_MARGIN:g} of its rise over "
            "that ground: not a shoulder of a bigger crown or shadow); only where the "
            f"colour layer's valley is shallow (separation score below {SHALLOW_VALLEY:g}), "
            f"with the threshold at {VALLEY_SHARE:g} of the valley factor"
        ),
    }


def smoothing_rule(blur_px: float) -> dict:
    """The detection metadata of smoothed bands and recentred points (where the valley
    rule found no clean gap on the layer of single pixels).

    Examples
    --------
    >>> sorted(smoothing_rule(1.6))
    ['band_blur_px', 'band_blur_px_from', 'recentre']
    """
    return {
        "band_blur_px": blur_px,
        "band_blur_px_from": (
            f"Gaussian sigma by which red, green and blue are smoothed before the "
            f"log-chromaticities: {BAND_BLUR:g} x the smallest blob scale, where more than "
            "the gap share of the valley's kept candidates sat near its threshold on the "
            "layer of single pixels"
        ),
        "recentre": (
            f"each point moved to the centroid of the layer's excess over {RECENTRE_SHARE:g} "
            f"of the way from the background to the crown's upper level ({RECENTRE_PEAK:g} "
            f"quantile) within the blob radius, {RECENTRE_ROUNDS} rounds, at most one blob "
            "radius in all"
        ),
    }
