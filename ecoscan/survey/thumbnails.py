"""Small previews of a raster around a plot, for the report's maps."""

from __future__ import annotations

import os
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
import rasterio
from rasterio.errors import NotGeoreferencedWarning
from rasterio.transform import array_bounds
from rasterio.windows import Window, from_bounds

__all__ = ["open_for_previews", "preview"]


def _stretch(a: np.ndarray, valid: np.ndarray) -> np.ndarray:
    v = a[valid]
    if v.size == 0:
        return np.zeros_like(a)
    lo, hi = np.percentile(v, [1, 99])
    if hi <= lo:
        hi = lo + 1
    out = np.clip((a - lo) / (hi - lo), 0, 1)
    out[~valid] = 1.0
    return out


@contextmanager
def open_for_previews(path: str | os.PathLike | None) -> Iterator[Any]:
    """Open a raster once for the previews of many plots (yields None for None).

    Examples
    --------
    >>> with open_for_previews(None) as src:
    ...     print(src)
    None
    """
    if path is None:
        yield None
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        src = rasterio.open(path)
    with src:
        yield src


def preview(
    path: Any,
    bounds: tuple[float, float, float, float],
    *,
    rgb: bool,
    max_side: int = 520,
    stretch: bool = True,
) -> tuple[np.ndarray, tuple[float, float, float, float]] | None:
    """Read a reduced-resolution preview of a raster over map bounds.

    Parameters
    ----------
    path : str or rasterio.io.DatasetReader
        The raster, or the raster already open (:func:`open_for_previews`).
    bounds : (xmin, ymin, xmax, ymax)
        Area to preview, in the raster's CRS.
    rgb : bool
        Read the first three bands as colour; otherwise the first band in grey.
    max_side : int
        Longest side of the preview in pixels.
    stretch : bool
        Stretch a one-band preview to [0, 1] for grey display; False keeps the values
        (heights in metres, class codes; nearest-neighbour sampling) with NaN where invalid.

    Returns
    -------
    (image, extent) or None
        ``image`` is (h, w, 3) or (h, w) floats in [0, 1]; ``extent`` is (left, right,
        bottom, top) in map units. None when the bounds miss the raster.
    """
    if isinstance(path, (str, os.PathLike)):
        with open_for_previews(path) as src:
            return preview(src, bounds, rgb=rgb, max_side=max_side, stretch=stretch)
    src = path
    win = from_bounds(*bounds, transform=src.transform)
    full = Window(0, 0, src.width, src.height)
    try:
        win = win.intersection(full).round_offsets().round_lengths()
    except rasterio.errors.WindowError:
        return None
    if win.width < 1 or win.height < 1:
        return None
    f = max(1.0, max(win.width, win.height) / max_side)
    shape = (max(1, int(win.height / f)), max(1, int(win.width / f)))
    bands = [1, 2, 3] if rgb and src.count >= 3 else [1]
    data = src.read(bands, window=win, out_shape=(len(bands), *shape), out_dtype="float32")
    mask = src.read_masks(bands, window=win, out_shape=(len(bands), *shape))
    t = src.window_transform(win)
    valid = np.all(mask > 0, axis=0) & np.all(np.isfinite(data), axis=0)
    west, south, east, north = array_bounds(win.height, win.width, t)
    extent = (west, east, south, north)
    if len(bands) == 3:
        # one stretch for all three bands keeps the colours true (no hue shift)
        flat = _stretch(data.reshape(3 * data.shape[1], data.shape[2]), np.tile(valid, (3, 1)))
        img = np.moveaxis(flat.reshape(data.shape), 0, -1)
    elif stretch:
        img = _stretch(data[0], valid)
    else:
        img = np.where(valid, data[0], np.nan)
    return img, extent
