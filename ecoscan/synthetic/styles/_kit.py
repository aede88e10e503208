"""Building blocks shared by the scene styles: colours, crowns, ground layers."""

from __future__ import annotations

import math

import numpy as np

from ecoscan.synthetic.crowns import Stamps, lobes, place_separated
from ecoscan.synthetic.noise import fbm, value_noise

__all__ = [
    "crowns_from",
    "mix_ground",
    "scatter",
    "varied_colours",
]


def varied_colours(
    gen: np.random.Generator,
    base: tuple[float, ...],
    n: int,
    *,
    bright: tuple[float, float] = (0.85, 1.15),
    hue: float = 0.05,
) -> np.ndarray:
    """Per-object colours: a base colour times a brightness, with small per-band shifts.

    Returns
    -------
    numpy.ndarray, shape (n, bands)
    """
    b = np.asarray(base, float)
    k = gen.uniform(*bright, (n, 1))
    shift = 1.0 + gen.uniform(-hue, hue, (n, b.size))
    return b[None, :] * k * shift


def scatter(
    gen: np.random.Generator,
    size: int,
    density_per_px: float,
    d_px: tuple[float, float],
    *,
    overlap: float = 1.0,
    visible: float = 0.0,
    existing=None,
    log_sizes: bool = True,
    tries: int = 30,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Random non-overlapping objects: returns column, row and diameter (pixels).

    The number tried is ``density_per_px · size²``; diameters are log-uniform (or uniform)
    in ``d_px``; centres are kept at least half the smallest diameter inside the raster.
    """
    n = max(1, round(density_per_px * size * size))
    lo, hi = d_px
    if log_sizes:
        d = np.exp(gen.uniform(math.log(lo), math.log(hi), n))
    else:
        d = gen.uniform(lo, hi, n)
    c, r, keep = place_separated(
        size,
        size,
        d / 2.0,
        gen,
        overlap=overlap,
        visible=visible,
        margin=lo / 2.0,
        existing=existing,
        tries=tries,
    )
    return c, r, d[keep]


def crowns_from(
    gen: np.random.Generator,
    col: np.ndarray,
    row: np.ndarray,
    diameter_px: np.ndarray,
    colour: np.ndarray,
    *,
    k: tuple[int, ...] = (2, 3, 5, 7),
    amp: tuple[float, float] = (0.03, 0.09),
    texture: tuple[float, float] = (0.15, 0.3),
    height: tuple[float, float] = (0.8, 1.3),
    **kw,
) -> Stamps:
    """Stamps for crowns: lobed outline, texture and height (in radii) drawn at random."""
    n = col.size
    kk, a, phi = lobes(gen, n, k, amp)
    r = diameter_px / 2.0
    return Stamps(
        col=np.asarray(col, float),
        row=np.asarray(row, float),
        radius=r,
        lobe_k=kk,
        lobe_a=a,
        lobe_phi=phi,
        colour=np.asarray(colour, float),
        texture=gen.uniform(*texture, n),
        height=r * gen.uniform(*height, n),
        **kw,
    )


def mix_ground(
    rows: tuple[int, int],
    width: int,
    colours: list[tuple[float, ...]],
    *,
    patch_px: float,
    seed: int,
    grain: float = 0.06,
    mottle: float = 0.1,
    scales: tuple[float, ...] | None = None,
) -> np.ndarray:
    """Mottled ground: several materials mixed by low-frequency noise, with texture at
    several scales (patches, clods, grain).

    Parameters
    ----------
    rows : (int, int)
        Half-open row range.
    width : int
        Columns.
    colours : list of tuples
        Material colours (band values); the first is the most common.
    patch_px : float
        Size of the material patches in pixels.
    seed : int
        Stream number.
    grain : float
        Relative amplitude of the fine texture.
    mottle : float
        Relative amplitude of the mid-scale brightness variation.
    scales : tuple of float, optional
        Texture scales (pixels) for the brightness variation; default from ``patch_px``.

    Returns
    -------
    numpy.ndarray
        float32, shape (bands, rows, width).
    """
    cols = (0, width)
    cs = np.asarray(colours, np.float32)
    out = np.broadcast_to(cs[0][:, None, None], (cs.shape[1], rows[1] - rows[0], width)).copy()
    for m in range(1, cs.shape[0]):
        f = fbm(rows, cols, (patch_px, patch_px / 3.0), (0.8, 0.2), seed * 7 + m)
        w = np.clip((f - 0.3 * m) * 1.2 + 0.2, 0.0, 1.0)
        out += (cs[m] - cs[0])[:, None, None] * w[None]
    sc = scales or (patch_px / 2.0, patch_px / 8.0, 3.0, 1.0)
    wts = (0.4, 0.3, 0.2, 0.1)[: len(sc)]
    bright = 1.0 + mottle * fbm(rows, cols, sc, wts, seed * 7 + 50)
    bright += grain * value_noise(rows, cols, 1.0, seed * 7 + 51)
    out *= bright[None]
    return out
