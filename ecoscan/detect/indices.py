"""Vegetation layers from image bands (published indices), computed in float32."""

from __future__ import annotations

import numpy as np

__all__ = ["darkness", "excess_green", "green_red", "ndvi"]


def excess_green(red: np.ndarray, green: np.ndarray, blue: np.ndarray) -> np.ndarray:
    """Excess Green index ExG = 2g − r − b on chromatic coordinates.

    Woebbecke, D. M. et al. (1995). Color indices for weed identification under various
    soil, residue, and lighting conditions. Trans. ASAE 38: 259–269. Chromatic coordinates
    r = R / (R + G + B), g = G / (R + G + B), b = B / (R + G + B).

    Parameters
    ----------
    red, green, blue : numpy.ndarray
        Band values (any consistent radiometric unit, e.g. digital numbers).

    Returns
    -------
    numpy.ndarray
        float32 ExG in [−1, 2]; 0 where R + G + B = 0.
    """
    r = np.asarray(red, np.float32)
    g = np.asarray(green, np.float32)
    b = np.asarray(blue, np.float32)
    s = r + g
    s += b
    out = 2.0 * g  # (2g - r - b) / s, in place: the same float32 operations, fewer copies
    out -= r
    out -= b
    with np.errstate(invalid="ignore", divide="ignore"):
        np.divide(out, s, out=out)
    out[~(s > 0)] = 0.0
    return out.astype(np.float32, copy=False)


def ndvi(red: np.ndarray, nir: np.ndarray) -> np.ndarray:
    """Normalised Difference Vegetation Index NDVI = (NIR − Red) / (NIR + Red).

    Rouse, J. W. et al. (1974). Monitoring vegetation systems in the Great Plains with ERTS.
    NASA SP-351.

    Parameters
    ----------
    red, nir : numpy.ndarray
        Red and near-infrared reflectance (or digital numbers on the same scale).

    Returns
    -------
    numpy.ndarray
        float32 NDVI in [−1, 1]; 0 where NIR + Red = 0.
    """
    return _normalised_difference(nir, red)


def green_red(red: np.ndarray, green: np.ndarray) -> np.ndarray:
    """Green-red vegetation index GRVI = (Green − Red) / (Green + Red).

    Tucker, C. J. (1979). Red and photographic infrared linear combinations for monitoring
    vegetation. Remote Sensing of Environment 8: 127–150 (the green-red difference over
    the sum); Motohashi, K. et al. (2010) used it as the green-red vegetation index for
    phenology (cited from memory). Reddish soil and dry litter are negative, green
    foliage positive, and grey, olive or senescent foliage near zero: above the soil
    even where Excess Green barely rises.

    Parameters
    ----------
    red, green : numpy.ndarray
        Red and green band values (any consistent radiometric unit).

    Returns
    -------
    numpy.ndarray
        float32 GRVI in [−1, 1]; 0 where Green + Red = 0.

    Examples
    --------
    >>> import numpy as np
    >>> round(float(green_red(np.array([150.0]), np.array([116.0]))[0]), 4)  # reddish soil
    -0.1278
    """
    return _normalised_difference(green, red)


def _normalised_difference(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """(a − b) / (a + b) in float32; 0 where a + b = 0 (NDVI, GRVI)."""
    a = np.asarray(a, np.float32)
    b = np.asarray(b, np.float32)
    s = a + b
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (a - b) / s
    out[~(s != 0)] = 0.0
    return out.astype(np.float32, copy=False)


def darkness(*bands: np.ndarray) -> np.ndarray:
    """Darkness: minus the mean of the given bands (plants darker than the ground score high).

    Crowns are usually darker than bare soil, dry grass or litter because of self-shading
    inside the canopy (common practice in crown delineation from panchromatic imagery). The
    sign is flipped so that, like the vegetation indices, plants are the bright blobs.

    Parameters
    ----------
    *bands : numpy.ndarray
        Visible bands (any consistent radiometric unit).

    Returns
    -------
    numpy.ndarray
        float32, −mean of the bands.

    Examples
    --------
    >>> import numpy as np
    >>> float(darkness(np.array([30.0]), np.array([60.0]), np.array([30.0]))[0])
    -40.0
    """
    acc = np.asarray(bands[0], np.float32).copy()
    for b in bands[1:]:
        acc += np.asarray(b, np.float32)
    acc *= np.float32(-1.0 / len(bands))
    return acc
