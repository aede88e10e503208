"""Disc scenes: the original synthetic renderers (tests, benchmarks and demo data).

Everything here is invented: crowns are soft-edged discs of varied size and brightness on a
textured soil, canopy heights are domes, class maps are discs of a chosen class value. The
renderers are deterministic for a seed and work in horizontal strips, so that large rasters
can be streamed to disk without holding float copies of the whole image in memory.

Coordinates are in pixels: ``xy_px[:, 0]`` is the column and ``xy_px[:, 1]`` the row of a
crown centre, pixel centres at integer positions (the centre of the top-left pixel is 0, 0).
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import rasterio
from rasterio.errors import NotGeoreferencedWarning
from rasterio.transform import Affine
from scipy import ndimage
from scipy.spatial import cKDTree

from ecoscan.io.outputs import atomic_path
from ecoscan.stats.csr import as_rng

__all__ = [
    "place_crowns",
    "render_chm",
    "render_classes",
    "render_orthomosaic",
    "write_geotiff",
    "write_orthomosaic_geotiff",
]

_STRIP = 512
_SOIL = np.array([150.0, 118.0, 88.0])  # a dry brown soil (invented)
_LEAF = np.array([58.0, 128.0, 46.0])  # a mid green crown (invented)


def place_crowns(
    shape: tuple[int, int],
    n: int,
    diameter_px: tuple[float, float],
    rng: int | np.random.Generator | None,
    *,
    min_gap: float = 0.9,
    margin_px: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Place up to ``n`` crowns at random, allowing touching but not stacked crowns.

    Parameters
    ----------
    shape : (int, int)
        Raster rows and columns.
    n : int
        Crowns wanted; fewer are returned when the raster is full.
    diameter_px : (float, float)
        Smallest and largest crown diameter in pixels (uniform in between).
    rng : int or numpy.random.Generator
        Seed or generator.
    min_gap : float
        Two centres are at least ``min_gap * (r1 + r2)`` apart (1 = just touching,
        below 1 = overlapping crowns).
    margin_px : float
        Keep centres this far from the raster edge.

    Returns
    -------
    xy_px : numpy.ndarray, shape (k, 2)
        Column, row of each centre.
    diameters_px : numpy.ndarray, shape (k,)
    """
    gen = as_rng(rng)
    h, w = shape
    dmin, dmax = diameter_px
    xy = np.empty((0, 2))
    rad = np.empty(0)
    for _attempt in range(40):
        if xy.shape[0] >= n:
            break
        m = max(64, 2 * (n - xy.shape[0]))
        cand = np.column_stack(
            [
                gen.uniform(margin_px, w - 1 - margin_px, m),
                gen.uniform(margin_px, h - 1 - margin_px, m),
            ]
        )
        cr = gen.uniform(dmin, dmax, m) / 2.0
        ok = np.ones(m, dtype=bool)
        if xy.shape[0]:
            tree = cKDTree(xy)
            for i, nb in enumerate(tree.query_ball_point(cand, r=min_gap * (cr + rad.max()))):
                if nb and np.any(np.hypot(*(xy[nb] - cand[i]).T) < min_gap * (cr[i] + rad[nb])):
                    ok[i] = False
        cand, cr = cand[ok], cr[ok]
        # resolve conflicts inside the batch, first come first served
        tree = cKDTree(cand)
        keep = np.ones(cand.shape[0], dtype=bool)
        for i, j in sorted(tree.query_pairs(r=min_gap * 2 * dmax / 2.0)):
            if keep[i] and keep[j] and np.hypot(*(cand[i] - cand[j])) < min_gap * (cr[i] + cr[j]):
                keep[j] = False
        xy = np.vstack([xy, cand[keep]])[:n]
        rad = np.concatenate([rad, cr[keep]])[:n]
    return xy, 2.0 * rad


def _texture(shape: tuple[int, int], gen: np.random.Generator, scale_px: float) -> np.ndarray:
    """Smooth zero-mean, unit-ish texture (Gaussian-filtered white noise on a coarse grid)."""
    h, w = shape
    f = max(1, int(scale_px // 4))
    coarse = gen.standard_normal((h // f + 3, w // f + 3)).astype(np.float32)
    coarse = ndimage.gaussian_filter(coarse, 1.0)
    fine = ndimage.zoom(coarse, f, order=1, grid_mode=False)[:h, :w]
    return fine / (fine.std() + 1e-6)


def _strip_seeds(gen: np.random.Generator, n: int) -> list[np.random.SeedSequence]:
    return np.random.SeedSequence(int(gen.integers(2**63))).spawn(n)


def _orthomosaic_strips(
    xy_px: np.ndarray,
    diameters_px: np.ndarray,
    shape: tuple[int, int],
    rng: int | np.random.Generator | None,
    brightness: tuple[float, float],
    soil_texture: float,
    noise: float,
    shadows: bool,
) -> Iterator[tuple[int, np.ndarray]]:
    gen = as_rng(rng)
    h, w = shape
    xy = np.asarray(xy_px, float).reshape(-1, 2)
    rad = np.asarray(diameters_px, float) / 2.0
    bright = gen.uniform(brightness[0], brightness[1], xy.shape[0])
    hue = gen.uniform(-0.08, 0.08, xy.shape[0])  # small colour shifts between plants
    nstrips = (h + _STRIP - 1) // _STRIP
    seeds = _strip_seeds(gen, nstrips)
    # one soil texture field for the whole raster at coarse resolution, cut per strip
    tex_gen = np.random.default_rng(seeds[0].spawn(1)[0])
    coarse_f = 16
    coarse = ndimage.gaussian_filter(
        tex_gen.standard_normal((h // coarse_f + 4, w // coarse_f + 4)).astype(np.float32), 1.5
    )
    coarse /= coarse.std() + 1e-6
    order = np.argsort(xy[:, 1] - rad) if xy.size else np.empty(0, int)
    for s in range(nstrips):
        r0, r1 = s * _STRIP, min(h, (s + 1) * _STRIP)
        sg = np.random.default_rng(seeds[s])
        rows = (np.arange(r0, r1) + 0.5) / coarse_f
        cols = (np.arange(w) + 0.5) / coarse_f
        low = ndimage.map_coordinates(
            coarse, np.meshgrid(rows, cols, indexing="ij"), order=1, mode="nearest"
        )
        grain = sg.standard_normal((r1 - r0, w)).astype(np.float32)
        soil_v = 1.0 + soil_texture * (0.6 * low + 0.4 * grain)
        img = _SOIL[:, None, None].astype(np.float32) * soil_v[None]
        sel = order[(xy[order, 1] + rad[order] + 2 >= r0) & (xy[order, 1] - rad[order] - 2 < r1)]
        for i in sel:
            cx, cy, r = xy[i, 0], xy[i, 1], rad[i]
            x0, x1 = max(0, int(cx - r - 2)), min(w, int(cx + r + 3))
            y0, y1 = max(r0, int(cy - r - 2)), min(r1, int(cy + r + 3))
            if x0 >= x1 or y0 >= y1:
                continue
            yy, xx = np.mgrid[y0:y1, x0:x1]
            d = np.hypot(xx - cx, yy - cy)
            alpha = np.clip(r - d + 0.5, 0.0, 1.0).astype(np.float32)
            if shadows:  # a darker soil patch to the lower right
                ds = np.hypot(xx - cx - 0.35 * r, yy - cy - 0.35 * r)
                sh = np.clip(r - ds + 0.5, 0, 1) * (1 - alpha) * 0.35
                img[:, y0 - r0 : y1 - r0, x0:x1] *= 1 - sh[None]
            dome = 0.8 + 0.2 * np.sqrt(np.clip(1 - (d / max(r, 0.5)) ** 2, 0, 1))
            col = _LEAF * bright[i] * np.array([1 + hue[i], 1.0, 1 - hue[i]])
            patch = img[:, y0 - r0 : y1 - r0, x0:x1]
            patch *= 1 - alpha[None]
            patch += (col[:, None, None] * dome[None] * alpha[None]).astype(np.float32)
        img += sg.normal(0.0, noise, img.shape).astype(np.float32)
        yield r0, np.clip(np.rint(img), 0, 255).astype(np.uint8)


def render_orthomosaic(
    xy_px: np.ndarray,
    diameters_px: np.ndarray,
    shape: tuple[int, int],
    rng: int | np.random.Generator | None,
    *,
    brightness: tuple[float, float] = (0.7, 1.3),
    soil_texture: float = 0.12,
    noise: float = 4.0,
    shadows: bool = False,
) -> np.ndarray:
    """Render an RGB drone orthomosaic with crowns at known positions.

    Parameters
    ----------
    xy_px : numpy.ndarray, shape (n, 2)
        Crown centres (column, row) in pixels.
    diameters_px : numpy.ndarray, shape (n,)
        Crown diameters in pixels.
    shape : (int, int)
        Rows, columns.
    rng : int or numpy.random.Generator
        Seed or generator; same seed, same image.
    brightness : (float, float)
        Range of the per-crown brightness factor applied to the leaf colour.
    soil_texture : float
        Relative amplitude of soil brightness variation (coarse patches and grain).
    noise : float
        Standard deviation of sensor noise in digital numbers (0–255).
    shadows : bool
        Darken the soil beside each crown.

    Returns
    -------
    numpy.ndarray
        uint8, shape (3, rows, columns), bands red, green, blue.
    """
    out = np.empty((3, *shape), dtype=np.uint8)
    for r0, strip in _orthomosaic_strips(
        xy_px, diameters_px, shape, rng, brightness, soil_texture, noise, shadows
    ):
        out[:, r0 : r0 + strip.shape[1]] = strip
    return out


def write_orthomosaic_geotiff(
    path: str | os.PathLike,
    xy_px: np.ndarray,
    diameters_px: np.ndarray,
    shape: tuple[int, int],
    rng: int | np.random.Generator | None,
    transform: Affine,
    crs: str | None,
    **kwargs,
) -> Path:
    """Render an orthomosaic strip by strip straight into a tiled GeoTIFF (atomic).

    Same image as :func:`render_orthomosaic` for the same seed, without holding it in memory.
    ``kwargs`` go to :func:`render_orthomosaic`.
    """
    opts = {"brightness": (0.7, 1.3), "soil_texture": 0.12, "noise": 4.0, "shadows": False}
    opts.update(kwargs)
    p = Path(path)
    with atomic_path(p) as tmp:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=shape[1],
            height=shape[0],
            count=3,
            dtype="uint8",
            transform=transform,
            crs=crs,
            tiled=True,
            blockxsize=256,
            blockysize=256,
            photometric="RGB",
        ) as dst:
            for r0, strip in _orthomosaic_strips(
                xy_px,
                diameters_px,
                shape,
                rng,
                opts["brightness"],
                opts["soil_texture"],
                opts["noise"],
                opts["shadows"],
            ):
                win = rasterio.windows.Window(0, r0, shape[1], strip.shape[1])
                dst.write(strip, window=win)
    return p


def render_chm(
    xy_px: np.ndarray,
    heights_m: np.ndarray,
    crown_diameters_px: np.ndarray,
    shape: tuple[int, int],
    rng: int | np.random.Generator | None,
    *,
    noise_m: float = 0.05,
    flat_top: float = 0.0,
) -> np.ndarray:
    """Render a canopy height model: one dome per tree on bare ground.

    Parameters
    ----------
    xy_px : numpy.ndarray, shape (n, 2)
        Tree tops (column, row) in pixels.
    heights_m : numpy.ndarray, shape (n,)
        Tree heights in metres.
    crown_diameters_px : numpy.ndarray, shape (n,)
        Crown diameters in pixels.
    shape : (int, int)
        Rows, columns.
    rng : int or numpy.random.Generator
        Seed or generator.
    noise_m : float
        Standard deviation of height noise in metres.
    flat_top : float
        Fraction of the height cut off each crown to make a flat top (a plateau), e.g. 0.02.

    Returns
    -------
    numpy.ndarray
        float32 heights in metres, shape (rows, columns); where crowns overlap, the higher wins.
    """
    gen = as_rng(rng)
    h, w = shape
    chm = np.zeros(shape, dtype=np.float32)
    xy = np.asarray(xy_px, float).reshape(-1, 2)
    for (cx, cy), ht, dd in zip(xy, heights_m, crown_diameters_px, strict=True):
        r = dd / 2.0
        x0, x1 = max(0, int(cx - r - 1)), min(w, int(cx + r + 2))
        y0, y1 = max(0, int(cy - r - 1)), min(h, int(cy + r + 2))
        yy, xx = np.mgrid[y0:y1, x0:x1]
        q = np.clip(1 - (np.hypot(xx - cx, yy - cy) / r) ** 2, 0, None)
        # a crown from 40 % of the height up to the top (an ellipsoid dome)
        dome = np.where(q > 0, ht * (0.4 + 0.6 * np.sqrt(q)), 0.0)
        if flat_top > 0:
            dome = np.minimum(dome, ht * (1 - flat_top))
        np.maximum(chm[y0:y1, x0:x1], dome.astype(np.float32), out=chm[y0:y1, x0:x1])
    if noise_m > 0:
        chm += gen.normal(0, noise_m, shape).astype(np.float32)
    return np.clip(chm, 0, None)


def render_classes(
    xy_px: np.ndarray,
    diameters_px: np.ndarray,
    shape: tuple[int, int],
    rng: int | np.random.Generator | None,
    *,
    plant_class: int | np.ndarray = 3,
    background: int = 1,
    clutter_class: int = 2,
    clutter: float = 0.02,
) -> np.ndarray:
    """Render a classified land-cover raster with plant crowns as discs of a class value.

    Parameters
    ----------
    xy_px : numpy.ndarray, shape (n, 2)
        Crown centres (column, row) in pixels.
    diameters_px : numpy.ndarray, shape (n,)
        Crown diameters in pixels.
    shape : (int, int)
        Rows, columns.
    rng : int or numpy.random.Generator
        Seed or generator (places the clutter).
    plant_class : int or array of int
        Class value of every crown, or one per crown.
    background : int
        Class value of bare ground.
    clutter_class : int
        Class of small scattered non-plant patches (e.g. litter).
    clutter : float
        Fraction of pixels seeding clutter patches.

    Returns
    -------
    numpy.ndarray
        uint8 class values, shape (rows, columns).
    """
    gen = as_rng(rng)
    h, w = shape
    out = np.full(shape, background, dtype=np.uint8)
    if clutter > 0:
        seeds = gen.uniform(size=shape) < clutter / 5
        out[ndimage.binary_dilation(seeds, iterations=1)] = clutter_class
    xy = np.asarray(xy_px, float).reshape(-1, 2)
    cls = np.broadcast_to(np.asarray(plant_class), (xy.shape[0],))
    for (cx, cy), dd, c in zip(xy, diameters_px, cls, strict=True):
        r = dd / 2.0
        x0, x1 = max(0, int(cx - r - 1)), min(w, int(cx + r + 2))
        y0, y1 = max(0, int(cy - r - 1)), min(h, int(cy + r + 2))
        yy, xx = np.mgrid[y0:y1, x0:x1]
        inside = np.hypot(xx - cx, yy - cy) <= r
        out[y0:y1, x0:x1][inside] = c
    return out


def write_geotiff(
    path: str | os.PathLike,
    array: np.ndarray,
    transform: Affine | None,
    crs: str | None,
    nodata: float | None = None,
    *,
    band_names: list[str] | None = None,
) -> Path:
    """Write an array as a tiled GeoTIFF, atomically.

    Parameters
    ----------
    path : path-like
        Destination ``.tif``.
    array : numpy.ndarray
        Shape (rows, columns) or (bands, rows, columns).
    transform : affine.Affine or None
        Pixel-to-map transform (map units per pixel); None writes no georeferencing.
    crs : str or None
        CRS such as ``EPSG:32633``; None writes none.
    nodata : float, optional
        The nodata value to record.
    band_names : list of str, optional
        Band descriptions (e.g. ``["red", "green", "blue", "nir"]``).

    Returns
    -------
    pathlib.Path
    """
    arr = np.asarray(array)
    if arr.ndim == 2:
        arr = arr[None]
    count, h, w = arr.shape
    p = Path(path)
    kw = {}
    if transform is not None:
        kw["transform"] = transform
    with atomic_path(p) as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=w,
            height=h,
            count=count,
            dtype=arr.dtype.name,
            crs=crs,
            nodata=nodata,
            tiled=w >= 256 and h >= 256,
            photometric="RGB" if count == 3 and arr.dtype == np.uint8 else "MINISBLACK",
            **kw,
        ) as dst:
            dst.write(arr)
            if band_names:
                for i, name in enumerate(band_names, start=1):
                    dst.set_band_description(i, name)
    return p
