"""Big pale crowns seen whole on a clipped Excess Green layer, to replace their lobe points.

A big dry or grey crown has an Excess Green value only a little above the soil's, and its
Excess Green blobs are lobes and leaf clumps 0.3-0.8 crown radii from its centre (the
crown-scale response is weakened by the negative surround of bright green neighbours,
whose Excess Green is ten times higher). Clipping Excess Green to the band from the
background median to :data:`CLIP_MADS` robust SDs above it makes every crown a plateau of
the same height: the lobes are flattened into the crown and green neighbours no longer
dominate, so the scale-normalised Laplacian (:mod:`ecoscan.detect.blobs`) peaks at the
crown's centre and scale. (On the scene suite's dry shrubs, 57 of the 65 crowns found at a
lobe on the diagnosis scenes had such a blob within the matching tolerance of the centre;
on plain Excess Green, GRVI or their sum, 8-11; ``docs/detection-history.md``.)

A blob of the clipped layer replaces the final points inside its radius
(:func:`crown_points`) when

1. each of them is a *pale* point: its Excess Green value (smoothed at its scale, the
   point's ``index_value``) is at most :data:`PALE_MADS` robust SDs above the background,
   or it was placed by the GRVI second layer. Green crowns stand 9-14 SDs above it on dry
   shrubs, rocky-shrubland shrubs 6 or more and row-crop plants about 10 (development
   seeds), so the rule does not touch them;
2. each has at most :data:`PART_SHARE` of the blob's radius (a lobe, not a crown of its
   own size), and the blob responds at least :data:`MIN_RESPONSE` times as strongly as a
   flat disc at the clip level (:data:`ecoscan.detect.blobs.DISC_RESPONSE`).

Strongest blob first (ties by position); a point is replaced once. The new point takes the
blob's position and diameter, and the score and ``index_value`` of the strongest point it
replaces (so scores stay on the main layer's scale). The rule runs where the main layer is
Excess Green alone on smooth ground in an RGB image
(:func:`ecoscan.detect.pale_crowns.plain_excess_green`; also where GRVI does not separate
and the second layer is off) and touching crowns are split. The blobs are exact in every
tile's core (the clipped layer is a pixel-wise function of the main layer and uses the
same scales), and the replacement runs once over all tiles' points, so tiled runs equal
whole-image runs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ecoscan.detect import blobs

__all__ = [
    "CLIP_MADS",
    "MIN_RESPONSE",
    "PALE_MADS",
    "PART_SHARE",
    "PaleBand",
    "clip_band",
    "crown_blobs",
    "crown_points",
]

#: Upper end of the clipped band, in robust SDs of the main layer's background above its
#: median. Chosen on dry-shrub suite seeds 0, 7, 11 and 1100-1120 from recorded points
#: (1 and 2 tried, 2 better; 3 placed fewer crowns).
CLIP_MADS = 2.0
#: Least response of a replacing blob, as a share of a flat disc's response at the clip
#: level. Chosen as above (0.2 and 0.3 tried).
MIN_RESPONSE = 0.2
#: Highest Excess Green value of a point the rule may replace, in robust SDs above the
#: background median. Chosen as above (4, 5 and no limit tried; without it the rule
#: moved row-crop and rocky-shrubland points).
PALE_MADS = 5.0
#: Largest radius of a replaced point as a share of the blob's radius. Chosen as above
#: (0.8 and 1.0 tried; 1.0 also re-placed hundreds of pale crowns already found, for
#: a small further gain).
PART_SHARE = 0.8


@dataclass(frozen=True)
class PaleBand:
    """The clipped layer of a raster, fixed once (picklable, sent to every tile).

    Attributes
    ----------
    low, high : float
        The band the main layer is clipped to.
    min_response : float
        Least response of a crown blob.
    pale_value : float
        Highest main-layer value of a point a crown blob may replace.
    """

    low: float
    high: float
    min_response: float
    pale_value: float


def pale_band(choice, roles: tuple[str, ...]) -> PaleBand | None:
    """The clipped layer for a raster whose main layer is ``choice``, or None.

    Only where the main layer is Excess Green alone on smooth ground in an RGB image
    (:func:`ecoscan.detect.pale_crowns.plain_excess_green`); the band from its background
    statistics (:func:`clip_band`).

    Examples
    --------
    >>> from ecoscan.detect.autotune import LayerChoice
    >>> exg = LayerChoice("exg", (("exg", 1.0),), 0.01, 0.02, (1.0,), 1.0, 1.0, 5.0, 0.0, 20)
    >>> band = pale_band(exg, ("red", "green", "blue"))
    >>> round(band.low, 3), round(band.high, 3)
    (0.01, 0.05)
    >>> pale_band(exg, ("red", "green", "blue", "nir")) is None
    True
    """
    from ecoscan.detect.pale_crowns import plain_excess_green

    if not plain_excess_green(choice, roles):
        return None
    return PaleBand(*clip_band(choice.background, choice.spread))


def clip_band(background: float, spread: float) -> tuple[float, float, float, float]:
    """The clipped layer's band, the blobs' least response and the pale points' highest value.

    Parameters
    ----------
    background, spread : float
        Median and robust SD of the main layer over background pixels
        (:class:`ecoscan.detect.autotune.LayerChoice`).

    Returns
    -------
    (float, float, float, float)
        Low and high end of the clipped band, least blob response, highest pale value.

    Examples
    --------
    >>> lo, hi, resp, pale = clip_band(0.01, 0.02)
    >>> round(lo, 3), round(hi, 3), round(resp, 4), round(pale, 3)
    (0.01, 0.05, 0.0059, 0.11)
    """
    height = CLIP_MADS * spread
    min_response = MIN_RESPONSE * blobs.DISC_RESPONSE * height
    return background, background + height, min_response, background + PALE_MADS * spread


def crown_blobs(
    main_layer: np.ndarray,
    band: tuple[float, float],
    min_response: float,
    scales: blobs.BlobScales,
    valid: np.ndarray,
    origin: tuple[int, int],
) -> dict[str, np.ndarray]:
    """Blobs of the main layer clipped to ``band`` (raster pixel frame).

    Parameters
    ----------
    main_layer : numpy.ndarray
        The main detection layer of the window (invalid pixels filled).
    band : (float, float)
        Low and high end of the clipped band (:func:`clip_band`).
    min_response : float
        Least scale-normalised response of a blob.
    scales : ecoscan.detect.blobs.BlobScales
        The scales searched.
    valid : numpy.ndarray of bool
        Valid pixels of the window.
    origin : (int, int)
        Column and row of the window's first pixel in the raster.

    Returns
    -------
    dict of numpy.ndarray
        ``row``, ``col``, ``sigma``, ``response`` and ``value`` as
        :func:`ecoscan.detect.blobs.detect_blobs` gives them.

    Examples
    --------
    >>> import numpy as np
    >>> from ecoscan.detect.blobs import blob_scales
    >>> yy, xx = np.mgrid[:96, :96]
    >>> crown = np.hypot(yy - 48, xx - 48) < 14          # a pale crown, 0.04 above soil
    >>> lobe = np.hypot(yy - 40, xx - 52) < 5            # a green lobe on it
    >>> layer = np.where(lobe, 0.5, np.where(crown, 0.04, 0.0)).astype(np.float32)
    >>> found = crown_blobs(layer, (0.0, 0.04), 0.005, blob_scales(6, 20),
    ...                     np.ones(layer.shape, bool), (0, 0))
    >>> k = int(np.argmax(found["sigma"]))
    >>> bool(abs(found["row"][k] - 48) < 2 and abs(found["col"][k] - 48) < 2)
    True
    """
    lo, hi = float(band[0]), float(band[1])
    clipped = np.clip(np.asarray(main_layer, np.float32), np.float32(lo), np.float32(hi))
    return blobs.detect_blobs(
        clipped, scales, float(min_response), lo, valid, origin=origin, background=lo
    )


def crown_points(
    x: np.ndarray,
    y: np.ndarray,
    radius: np.ndarray,
    pale: np.ndarray,
    blob_x: np.ndarray,
    blob_y: np.ndarray,
    blob_radius: np.ndarray,
    blob_response: np.ndarray,
    share: float | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Clipped-layer blobs that replace the pale lobe points inside them.

    A blob takes over when at least one point lies within its radius and every such point
    is pale and has at most ``share`` of its radius (see the
    module doc). Blobs are taken strongest first (ties by position); a point is replaced
    once.

    Parameters
    ----------
    x, y, radius : numpy.ndarray
        The final points (any consistent unit).
    pale : numpy.ndarray of bool
        Points that may be replaced: main-layer value at most the pale value
        (:func:`clip_band`), or placed by the GRVI second layer (pale by construction).
    blob_x, blob_y, blob_radius, blob_response : numpy.ndarray
        The clipped layer's blobs.
    share : float, optional
        Largest point radius as a share of the blob's (default :data:`PART_SHARE`).

    Returns
    -------
    (numpy.ndarray of bool, numpy.ndarray of bool, numpy.ndarray of int)
        Points replaced; blobs that replace them; for each point, the blob replacing it
        (-1 if none).

    Examples
    --------
    >>> import numpy as np
    >>> pts = (np.array([-6.0, 6.0, 40.0, 80.0]), np.zeros(4), np.full(4, 5.0),
    ...        np.array([True, True, True, False]))
    >>> blob = (np.array([0.0, 40.0, 80.0]), np.zeros(3), np.array([15.0, 5.5, 15.0]),
    ...         np.array([1.0, 1.0, 1.0]))
    >>> drop, take, by = crown_points(*pts, *blob)
    >>> drop.tolist(), take.tolist(), by.tolist()
    ([True, True, False, False], [True, False, False], [0, 0, -1, -1])
    """
    from scipy.spatial import cKDTree

    if share is None:
        share = PART_SHARE
    by = np.full(x.size, -1, dtype=np.intp)
    take = np.zeros(blob_x.size, dtype=bool)
    if x.size == 0 or blob_x.size == 0:
        return by >= 0, take, by
    tree = cKDTree(np.column_stack([x, y]))
    near = tree.query_ball_point(np.column_stack([blob_x, blob_y]), blob_radius)
    order = np.lexsort((blob_x, blob_y, -blob_response))
    pale = np.asarray(pale, dtype=bool)
    for k in order:
        j = np.asarray(near[k], dtype=np.intp)
        if j.size == 0:
            continue
        j = j[np.hypot(x[j] - blob_x[k], y[j] - blob_y[k]) < blob_radius[k]]
        if j.size == 0 or (by[j] >= 0).any() or not pale[j].all():
            continue
        if (radius[j] > share * blob_radius[k]).any():
            continue
        by[j] = k
        take[k] = True
    return by >= 0, take, by
