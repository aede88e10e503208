"""A layer of colour distance from the ground, blind to shade.

Grey and pale straw shrubs on bare soil have almost no Excess Green contrast, and on a
darkness layer they look like the cast shadows beside them. What sets them apart is their
*colour*: soil is reddish, a grey crown is neutral, a straw crown yellower. Chromaticity
in log form, ``(log(R/G), log(B/G))``, does not change when all bands are scaled alike
(Finlayson, G. D., Drew, M. S. & Lu, C. 2009, *Entropy minimization for shadow removal*,
IJCV 85: 35-57, §2), so brightness changes of the ground, from mottling to most of a cast
shadow's darkening, move it little, while every crown colour that differs from the
ground's lies away from it.

The ground's chromaticity is the mode of the 2-D histogram of the sampled pixels (the
ground is the commonest surface of an open survey); its spread along each axis is the
median absolute deviation about that mode, scaled to a standard deviation (1.4826 × MAD;
Hampel, F. R. 1974, JASA 69: 383-393). The layer is the distance from that mode in those
units (a diagonal Mahalanobis distance). Both are estimated once per raster, so every tile
computes the same layer; the four figures travel in the layer's name
(:func:`layer_name`, :func:`parse_layer_name`) so that
:func:`ecoscan.detect.engine.base_layer` can rebuild the layer from the recorded terms.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

__all__ = [
    "PREFIX",
    "GroundColour",
    "estimate_ground_colour",
    "ground_distance",
    "ground_excess_green",
    "layer_name",
    "parse_layer_name",
    "reach_px",
]

#: Name prefix of the layer in a detection's terms (followed by the four figures).
PREFIX = "ground_colour@"
#: Added to every band (digital numbers) before the logarithm, so black pixels stay finite.
LOG_OFFSET = 1.0
#: Bins per axis of the chromaticity histogram, over the 0.5-99.5 % range of each axis.
BINS = 128
#: Smoothing of the histogram (bins) before its mode is taken.
HIST_SMOOTH = 2.0
#: Pixels used to estimate the ground colour (a regular sample of the sample windows).
SAMPLE_PX = 400_000
#: Smallest spread along an axis (log units): a perfectly flat synthetic ground must not
#: divide by zero; 0.005 is half a percent of colour change.
MIN_SPREAD = 0.005
#: Shaded ground: at least this much darker (log brightness) than the ground ...
SHADE_STEP = 0.3
#: ... and at most this much greener (chromatic Excess Green) than the ground.
SHADE_GREEN = 0.03
#: Fewest shaded pixels (in the sample) from which the shade direction is measured.
SHADE_MIN_PX = 500
_MAD_TO_SD = 1.4826


@dataclass(frozen=True)
class GroundColour:
    """The ground's log-chromaticity and its robust spread.

    Attributes
    ----------
    red, blue : float
        Mode of ``log(R/G)`` and ``log(B/G)`` (bands plus :data:`LOG_OFFSET`).
    red_spread, blue_spread : float
        1.4826 × median absolute deviation about the mode along each axis.
    brightness : float
        Median log brightness (log of the mean band plus :data:`LOG_OFFSET`) of the pixels
        within 3 spreads of the mode.
    shade_red, shade_blue : float
        Change of ``log(R/G)`` and ``log(B/G)`` per unit of log brightness below
        ``brightness``: how shade moves the ground's colour (0, 0 when it cannot be told).
    smooth_px : float
        Standard deviation (pixels) of the Gaussian that smooths the bands before the
        layer is computed (0: none); its reach is :func:`reach_px`.
    """

    red: float
    blue: float
    red_spread: float
    blue_spread: float
    brightness: float = 0.0
    shade_red: float = 0.0
    shade_blue: float = 0.0
    smooth_px: float = 0.0


def _log_ratios(red, green, blue) -> tuple[np.ndarray, np.ndarray]:
    r = np.maximum(np.asarray(red, np.float32), 0) + np.float32(LOG_OFFSET)
    g = np.maximum(np.asarray(green, np.float32), 0) + np.float32(LOG_OFFSET)
    b = np.maximum(np.asarray(blue, np.float32), 0) + np.float32(LOG_OFFSET)
    lg = np.log(g)
    return np.log(r) - lg, np.log(b) - lg


def estimate_ground_colour(
    red: np.ndarray, green: np.ndarray, blue: np.ndarray, smooth_px: float = 0.0
) -> GroundColour:
    """The ground's chromaticity: the mode of the pixels' 2-D log-chromaticity histogram.

    Parameters
    ----------
    red, green, blue : numpy.ndarray
        Sampled band values (1-D or any shape; invalid pixels already removed).
    smooth_px : float, optional
        Recorded as :attr:`GroundColour.smooth_px` (the layer's smoothing).

    Returns
    -------
    GroundColour

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> n = 20000                       # 80 % soil (180, 150, 110), 20 % green crowns
    >>> colour = np.where(np.arange(n) < n // 5, [[60.0], [110.0], [45.0]],
    ...                   [[180.0], [150.0], [110.0]])
    >>> rgb = colour * rng.uniform(0.5, 1.2, n) + rng.normal(0, 2, (3, n))
    >>> g = estimate_ground_colour(*rgb)
    >>> round(g.red, 2), round(g.blue, 2)        # log(181/151) = 0.18, log(111/151) = -0.31
    (0.18, -0.31)
    """
    lr, lb = _log_ratios(red, green, blue)
    lr, lb = lr.ravel(), lb.ravel()
    ok = np.isfinite(lr) & np.isfinite(lb)
    lr, lb = lr[ok], lb[ok]
    if lr.size == 0:
        raise ValueError("no valid pixels to estimate the ground colour from")
    step = max(1, lr.size // SAMPLE_PX)
    lr, lb = lr[::step], lb[::step]
    rng_r = np.quantile(lr, [0.005, 0.995])
    rng_b = np.quantile(lb, [0.005, 0.995])
    rng_r[1] = max(rng_r[1], rng_r[0] + 1e-3)
    rng_b[1] = max(rng_b[1], rng_b[0] + 1e-3)
    hist, er, eb = np.histogram2d(lr, lb, bins=BINS, range=[rng_r, rng_b])
    hist = ndimage.gaussian_filter(hist, HIST_SMOOTH, mode="constant")
    i, j = np.unravel_index(int(np.argmax(hist)), hist.shape)
    cr = 0.5 * (er[i] + er[i + 1])
    cb = 0.5 * (eb[j] + eb[j + 1])
    sr = max(_MAD_TO_SD * float(np.median(np.abs(lr - cr))), MIN_SPREAD)
    sb = max(_MAD_TO_SD * float(np.median(np.abs(lb - cb))), MIN_SPREAD)
    rgb = [np.asarray(v, np.float32).ravel()[ok][::step] for v in (red, green, blue)]
    ly = np.log(np.maximum((rgb[0] + rgb[1] + rgb[2]) / 3, 0) + np.float32(LOG_OFFSET))
    near = (np.abs(lr - cr) < 3 * sr) & (np.abs(lb - cb) < 3 * sb)
    y0 = float(np.median(ly[near])) if near.any() else float(np.median(ly))
    # shaded ground: much darker than the ground and no greener than it
    tot = rgb[0] + rgb[1] + rgb[2]
    with np.errstate(invalid="ignore", divide="ignore"):
        exg = (2 * rgb[1] - rgb[0] - rgb[2]) / tot
    e0 = float(np.median(exg[near])) if near.any() else 0.0
    dark = (ly < y0 - SHADE_STEP) & (exg < e0 + SHADE_GREEN)
    vr = vb = 0.0
    if dark.sum() >= SHADE_MIN_PX:
        dy = float(np.median(ly[dark] - y0))
        vr = float(np.median(lr[dark] - cr)) / dy
        vb = float(np.median(lb[dark] - cb)) / dy
    return GroundColour(float(cr), float(cb), sr, sb, y0, vr, vb, float(smooth_px))


def ground_excess_green(ground: GroundColour) -> float:
    """Chromatic Excess Green (Woebbecke et al. 1995) of the ground's modal colour.

    With ``R/G = exp(red)`` and ``B/G = exp(blue)``: ``(2 − R/G − B/G) / (R/G + 1 + B/G)``.

    Examples
    --------
    >>> round(ground_excess_green(GroundColour(0.0, 0.0, 0.1, 0.1)), 3)   # grey: 0
    0.0
    >>> round(ground_excess_green(GroundColour(-0.42, -0.84, 0.1, 0.1)), 2)  # grass
    0.43
    """
    r, b = math.exp(ground.red), math.exp(ground.blue)
    return (2.0 - r - b) / (r + 1.0 + b)


def ground_distance(
    red: np.ndarray, green: np.ndarray, blue: np.ndarray, ground: GroundColour
) -> np.ndarray:
    """Distance of each pixel's log-chromaticity from the ground's, in robust SDs.

    ``sqrt(((log(R/G) − r0) / sr)² + ((log(B/G) − b0) / sb)²)``; scaling all bands alike
    (shade) leaves it unchanged.

    Returns
    -------
    numpy.ndarray
        float32, ≥ 0, same shape as the bands.

    Examples
    --------
    >>> import numpy as np
    >>> g = GroundColour(0.0, 0.0, 0.1, 0.1)
    >>> d = ground_distance(np.array([29.0, 59.0]), np.array([29.0, 59.0]),
    ...                     np.array([29.0 * math.e ** 0.3 + math.e ** 0.3 - 1, 59.0]), g)
    >>> [round(float(v), 3) for v in d]          # 0.3 log units bluer = 3 SDs; grey = 0
    [3.0, 0.0]
    """
    if ground.smooth_px > 0:  # the log of a ratio amplifies noise in dark pixels
        red, green, blue = (
            ndimage.gaussian_filter(np.asarray(b, np.float32), ground.smooth_px)
            for b in (red, green, blue)
        )
    lr, lb = _log_ratios(red, green, blue)
    if ground.shade_red or ground.shade_blue:
        ly = np.asarray(red, np.float32) + np.asarray(green, np.float32)
        ly += np.asarray(blue, np.float32)
        ly *= np.float32(1 / 3)
        np.maximum(ly, 0, out=ly)
        ly += np.float32(LOG_OFFSET)
        np.log(ly, out=ly)
        ly -= np.float32(ground.brightness)
        np.minimum(ly, 0, out=ly)  # only darkening is shade
        lr -= np.float32(ground.shade_red) * ly
        lb -= np.float32(ground.shade_blue) * ly
    lr -= np.float32(ground.red)
    lr *= np.float32(1.0 / ground.red_spread)
    lb -= np.float32(ground.blue)
    lb *= np.float32(1.0 / ground.blue_spread)
    np.square(lr, out=lr)
    np.square(lb, out=lb)
    lr += lb
    return np.sqrt(lr, out=lr)


def reach_px(name: str) -> int:
    """Pixels beyond a tile's edge that a ground-colour layer's smoothing reads (0 for any
    other layer): the radius of scipy's Gaussian filter, ``int(4 σ + 0.5)``.

    Examples
    --------
    >>> reach_px("ground_colour@0,0,0.1,0.1,5,0,0,2.1"), reach_px("exg")
    (8, 0)
    """
    if not name.startswith(PREFIX):
        return 0
    return int(4.0 * parse_layer_name(name).smooth_px + 0.5)


def layer_name(ground: GroundColour) -> str:
    """The layer's name in a detection's terms, carrying the ground's four figures.

    Examples
    --------
    >>> layer_name(GroundColour(0.18, -0.31, 0.03, 0.04))
    'ground_colour@0.18,-0.31,0.03,0.04,0.0,0.0,0.0,0.0'
    """
    figs = (
        ground.red,
        ground.blue,
        ground.red_spread,
        ground.blue_spread,
        ground.brightness,
        ground.shade_red,
        ground.shade_blue,
        ground.smooth_px,
    )
    return PREFIX + ",".join(repr(float(v)) for v in figs)


def parse_layer_name(name: str) -> GroundColour:
    """The :class:`GroundColour` recorded in a layer name made by :func:`layer_name`.

    Examples
    --------
    >>> parse_layer_name("ground_colour@0.18,-0.31,0.03,0.04,5.0,0.1,-0.2,2.0").blue_spread
    0.04
    """
    if not name.startswith(PREFIX):
        raise ValueError(f"not a ground-colour layer: {name!r}")
    try:
        figs = [float(v) for v in name[len(PREFIX) :].split(",")]
    except ValueError:
        figs = []
    if len(figs) != 8 or not all(math.isfinite(v) for v in figs) or min(figs[2:4]) <= 0:
        raise ValueError(f"a ground-colour layer needs eight finite figures: {name!r}")
    return GroundColour(*figs)
