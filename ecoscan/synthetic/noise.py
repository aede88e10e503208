"""Position-hashed noise: texture that depends on the pixel's place, not on how it is cut.

Every value here is a pure function of (row, column, seed): a strip, a tile or the whole
image rendered alone give the same pixels. That lets the scene suite render rasters of any
size strip by strip in bounded memory with bit-identical results.

The hash is a 32-bit integer mix (multiply, xor-shift), vectorised in numpy ``uint32``
arithmetic, which wraps modulo 2**32 by design.
"""

from __future__ import annotations

import numpy as np

__all__ = ["fbm", "hash01", "pixel_gauss", "value_noise"]

_M1 = np.uint32(0x8DA6B343)
_M2 = np.uint32(0xD8163841)
_M3 = np.uint32(0xCB1AB31F)
_M4 = np.uint32(0x2C1B3C6D)
_M5 = np.uint32(0x297A2D39)


def hash01(i: np.ndarray, j: np.ndarray, seed: int) -> np.ndarray:
    """Uniform numbers in [0, 1) from integer lattice positions and a seed.

    Parameters
    ----------
    i, j : numpy.ndarray of int
        Lattice row and column (broadcast together; any sign).
    seed : int
        Stream number; different seeds give unrelated values.

    Returns
    -------
    numpy.ndarray
        float32 values in [0, 1), shape of ``i`` and ``j`` broadcast.

    Examples
    --------
    >>> import numpy as np
    >>> v = hash01(np.arange(3)[:, None], np.arange(4)[None, :], 7)
    >>> v.shape, bool(((v >= 0) & (v < 1)).all())
    ((3, 4), True)
    """
    s = np.uint32(int(seed) & 0xFFFFFFFF)
    with np.errstate(over="ignore"):
        h = np.asarray(i).astype(np.int64).astype(np.uint32) * _M1
        h = h + np.asarray(j).astype(np.int64).astype(np.uint32) * _M2
        h = h + s * _M3
        h ^= h >> np.uint32(15)
        h *= _M4
        h ^= h >> np.uint32(12)
        h *= _M5
        h ^= h >> np.uint32(15)
    return (h >> np.uint32(8)).astype(np.float32) * np.float32(1.0 / 2**24)


def _smooth(t: np.ndarray) -> np.ndarray:
    return t * t * (3.0 - 2.0 * t)


def value_noise(
    rows: tuple[int, int], cols: tuple[int, int], scale_px: float, seed: int
) -> np.ndarray:
    """Smooth random field with features about ``scale_px`` pixels across.

    Random values on a square lattice of spacing ``scale_px`` (hashed from the lattice
    position and the seed), interpolated with a smooth-step weight, separably along
    columns then rows. Scales of one pixel or less give independent values per pixel.

    Parameters
    ----------
    rows, cols : (int, int)
        Half-open pixel ranges ``(start, stop)`` of the block to compute.
    scale_px : float
        Lattice spacing in pixels.
    seed : int
        Stream number.

    Returns
    -------
    numpy.ndarray
        float32, shape (rows, columns), zero mean, values in [−1, 1], standard deviation
        about 0.4 (0.58 at one pixel).

    Examples
    --------
    >>> a = value_noise((0, 64), (0, 64), 8.0, 1)
    >>> b = value_noise((32, 64), (0, 64), 8.0, 1)
    >>> bool((a[32:] == b).all())
    True
    """
    r = np.arange(*rows, dtype=np.float64)
    c = np.arange(*cols, dtype=np.float64)
    if scale_px <= 1.0:
        return 2.0 * hash01(r[:, None], c[None, :], seed) - 1.0
    # each seed gets its own lattice offset so that octaves do not share grid lines
    off_r, off_c = (float(v) for v in hash01(np.array([seed, seed]), np.array([1, 2]), 99991))
    fr = (r + 0.5) / scale_px + off_r
    fc = (c + 0.5) / scale_px + off_c
    ir, ic = np.floor(fr).astype(np.int64), np.floor(fc).astype(np.int64)
    wr = _smooth(fr - ir).astype(np.float32)[:, None]
    wc = _smooth(fc - ic).astype(np.float32)[None, :]
    li = np.arange(ir.min(), ir.max() + 2)
    lj = np.arange(ic.min(), ic.max() + 2)
    lat = 2.0 * hash01(li[:, None], lj[None, :], seed) - 1.0
    a, b = ir - li[0], ic - lj[0]
    along = lat[:, b] * (1.0 - wc) + lat[:, b + 1] * wc
    return along[a] * (1.0 - wr) + along[a + 1] * wr


def fbm(
    rows: tuple[int, int],
    cols: tuple[int, int],
    scales_px: tuple[float, ...],
    weights: tuple[float, ...],
    seed: int,
) -> np.ndarray:
    """Weighted sum of value-noise octaves (texture at several scales), unit-ish variance.

    Parameters
    ----------
    rows, cols : (int, int)
        Half-open pixel ranges.
    scales_px : tuple of float
        Feature sizes in pixels, one per octave.
    weights : tuple of float
        Weight of each octave.
    seed : int
        Stream number (octave k uses ``seed * 131 + k``).

    Returns
    -------
    numpy.ndarray
        float32, shape (rows, columns), standard deviation about 1.

    Examples
    --------
    >>> f = fbm((0, 100), (0, 100), (40.0, 10.0, 2.0), (0.6, 0.3, 0.1), 3)
    >>> 0.5 < float(f.std()) < 1.5
    True
    """
    out = np.zeros((rows[1] - rows[0], cols[1] - cols[0]), np.float32)
    norm = 0.0
    for k, (s, w) in enumerate(zip(scales_px, weights, strict=True)):
        sd = 0.58 if s <= 1.0 else 0.4
        out += np.float32(w / sd) * value_noise(rows, cols, s, seed * 131 + k)
        norm += w * w
    return out / np.float32(np.sqrt(norm) if norm > 0 else 1.0)


def pixel_gauss(rows: tuple[int, int], cols: tuple[int, int], seed: int) -> np.ndarray:
    """Approximately standard normal noise per pixel (sum of three hashed uniforms).

    Parameters
    ----------
    rows, cols : (int, int)
        Half-open pixel ranges.
    seed : int
        Stream number.

    Returns
    -------
    numpy.ndarray
        float32, mean 0, standard deviation 1 (Irwin–Hall with three terms).

    Examples
    --------
    >>> g = pixel_gauss((0, 200), (0, 200), 5)
    >>> abs(float(g.mean())) < 0.05 and abs(float(g.std()) - 1) < 0.05
    True
    """
    r = np.arange(*rows)[:, None]
    c = np.arange(*cols)[None, :]
    u = hash01(r, c, seed) + hash01(r, c, seed + 7919) + hash01(r, c, seed + 15485)
    return (u - 1.5) * np.float32(2.0)
