"""Per-tile work: job in, table of detections out; and the vegetation layers of band data.

A :class:`TileJob` carries everything a worker needs (raster description, tile, the
detector's plan fixed globally beforehand, the detector's name); :func:`run_tile` reads
the tile's window, runs the detector (:mod:`ecoscan.detect.detectors`) and returns the
detections whose centres lie in the tile's core, in raster pixel coordinates. No global
state, so jobs can run anywhere.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from typing import Any

import numpy as np

from ecoscan.detect.detectors.base import Detector, TilePoints, TileWindow
from ecoscan.detect.detectors.registry import get_detector
from ecoscan.detect.indices import darkness, excess_green, green_red, ndvi
from ecoscan.detect.tiling import (
    GROUP_WINDOW_PX,
    Tile,
    group_tiles,
    group_window,
    in_pool_worker,
)
from ecoscan.io.raster import RasterInfo, opened, read_window

__all__ = [
    "TileJob",
    "base_layer",
    "compose_layer",
    "run_tile",
    "tile_jobs",
    "vegetation_layer",
]

#: In a worker process of ecoscan's own pools, the raster its tiles come from, kept open
#: between tiles: ``{"path": str, "stack": ExitStack, "src": dataset}``.
_KEPT: dict[str, Any] = {}


def _kept_open(info: RasterInfo):
    """The raster open for reading, kept open between the tiles of a pool worker; None
    elsewhere (the tile opens it for its own read).

    A tile's read window overlaps its neighbours'; with the raster open, GDAL's block
    cache (at most ``ecoscan.io.raster.GDAL_CACHE_MB``) decodes the blocks they share
    once: about a third less decoding when every second tile comes to this worker. Only
    in workers that end with the run (:func:`ecoscan.detect.tiling.in_pool_worker`): a
    process that lives on (the caller's, a Dask worker) opens the raster for each tile,
    so it never reads a file changed since, and never forks with a dataset open.
    """
    if not in_pool_worker():
        return None
    if _KEPT.get("path") != info.path:
        if "stack" in _KEPT:
            _KEPT.pop("stack").close()
            _KEPT.pop("path", None)
        stack = contextlib.ExitStack()
        try:
            _KEPT["src"] = stack.enter_context(opened(info))
        except Exception:  # read_window opens it itself and reports what is wrong
            stack.close()
            return None
        _KEPT.update(stack=stack, path=info.path)
    return _KEPT["src"]


@dataclass(frozen=True)
class TileJob:
    """One unit of work: a raster, a tile, the detector's plan and the detector's name.

    Attributes
    ----------
    info : RasterInfo
        The raster (each job reads its own window from ``info.path``).
    tile : Tile
        The window (core plus overlap) to read.
    plan : object
        The detector's plan (:meth:`ecoscan.detect.detectors.base.Detector.prepare`),
        picklable; ``plan.bands`` are read.
    detector : str
        The detector's name in the registry (:mod:`ecoscan.detect.detectors.registry`).
    members : tuple of Tile
        When not empty, the tiles of the plan that ``tile`` holds
        (:func:`ecoscan.detect.tiling.group_window`): read as one window, run once, and
        each tile's plants returned as its own, one tile after the other.
    """

    info: RasterInfo
    tile: Tile
    plan: Any
    detector: str
    members: tuple[Tile, ...] = ()


def vegetation_layer(data: np.ndarray, index: str) -> np.ndarray:
    """The vegetation layer of band data (bands in the order the index needs).

    ``exg``: bands red, green, blue (Woebbecke et al. 1995); ``ndvi``: red, nir (Rouse et
    al. 1974); ``band``: the first band unchanged.
    """
    if index == "exg":
        return excess_green(data[0], data[1], data[2])
    if index == "ndvi":
        return ndvi(data[0], data[1])
    if index == "darkness":
        return darkness(*data)
    return np.asarray(data[0], np.float32)


def base_layer(
    data: np.ndarray, roles: tuple[str, ...], name: str, band_blur_px: float = 0.0
) -> np.ndarray:
    """One base layer from bands whose roles are known.

    Parameters
    ----------
    data : numpy.ndarray
        Bands, shape (bands, rows, columns).
    roles : tuple of str
        Role of each band: ``red``, ``green``, ``blue``, ``nir`` or anything else.
    name : str
        ``exg`` (Excess Green, Woebbecke et al. 1995), ``ndvi`` (Rouse et al. 1974),
        ``darkness`` (minus the mean of the visible bands, or of all bands when none is
        named), ``band`` (the first band as it is), ``grvi`` (green-red index,
        :func:`ecoscan.detect.indices.green_red`), ``logchroma_r`` / ``logchroma_b``
        (log of red / blue over the geometric mean of red, green and blue:
        :func:`ecoscan.detect.chromaticity.log_chromaticity`).
    band_blur_px : float, optional
        Gaussian σ (pixels) by which the bands are smoothed before the log-chromaticities
        (the other layers ignore it).

    Returns
    -------
    numpy.ndarray
        float32 layer.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[10.0]], [[30.0]], [[10.0]]])
    >>> round(float(base_layer(d, ("red", "green", "blue"), "exg")[0, 0]), 6)  # 2*0.6 - 0.2 - 0.2
    0.8
    """
    pos = {r: i for i, r in enumerate(roles)}
    if name == "exg":
        return excess_green(data[pos["red"]], data[pos["green"]], data[pos["blue"]])
    if name == "ndvi":
        return ndvi(data[pos["red"]], data[pos["nir"]])
    if name == "darkness":
        vis = [data[pos[r]] for r in ("red", "green", "blue") if r in pos] or list(data)
        return darkness(*vis)
    if name == "band":
        return np.asarray(data[0], np.float32).copy()
    if name == "grvi":  # the second evidence layer for pale crowns (detect/autotune.py)
        return green_red(data[pos["red"]], data[pos["green"]])
    if name in ("logchroma_r", "logchroma_b"):
        # log-chromaticities for the log-chromaticity layer (ecoscan.detect.chromaticity)
        from ecoscan.detect.chromaticity import log_chromaticity

        rgb = (data[pos["red"]], data[pos["green"]], data[pos["blue"]])
        return log_chromaticity(*rgb, band_blur_px)[0 if name == "logchroma_r" else 1]
    raise ValueError(f"unknown layer {name!r}")


def compose_layer(
    data: np.ndarray,
    roles: tuple[str, ...],
    terms: tuple[tuple[str, float], ...],
    band_blur_px: float = 0.0,
) -> np.ndarray:
    """The detection layer: a weighted sum of base layers (see :func:`base_layer`).

    The weights are fixed once per raster (:mod:`ecoscan.detect.autotune`), so every tile
    computes the same layer. A calibrated detector can supply its own layer instead.
    ``band_blur_px`` smooths the bands of the log-chromaticities (:func:`base_layer`).

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[10.0]], [[30.0]], [[10.0]]])
    >>> round(float(compose_layer(d, ("red", "green", "blue"), (("darkness", 0.5),))[0, 0]), 4)
    -8.3333
    """
    out: np.ndarray | None = None
    made = _paired_layers(data, roles, [name for name, _w in terms], band_blur_px)
    for name, w in terms:
        layer = made.pop(name) if name in made else base_layer(data, roles, name, band_blur_px)
        if w != 1.0:
            layer *= np.float32(w)
        if out is None:
            out = layer
        else:
            out += layer
    if out is None:
        raise ValueError("a detection layer needs at least one term")
    return out


def _paired_layers(
    data: np.ndarray, roles: tuple[str, ...], names: list[str], band_blur_px: float = 0.0
) -> dict[str, np.ndarray]:
    """Base layers that come out of one computation, made once when a layer uses both:
    the two log-chromaticities (:func:`ecoscan.detect.chromaticity.log_chromaticity`
    gives both; :func:`base_layer` would compute it once for each). The same arrays as
    :func:`base_layer`'s."""
    if names.count("logchroma_r") != 1 or names.count("logchroma_b") != 1:
        return {}
    from ecoscan.detect.chromaticity import log_chromaticity

    pos = {r: i for i, r in enumerate(roles)}
    rgb = (data[pos["red"]], data[pos["green"]], data[pos["blue"]])
    chi_r, chi_b = log_chromaticity(*rgb, band_blur_px)
    return {"logchroma_r": chi_r, "logchroma_b": chi_b}


def run_tile(job: TileJob) -> TilePoints:
    """Detect plants in one tile; keep those whose centre lies in the tile's core.

    A job with ``members`` (a group of tiles read as one window) keeps each member's
    plants as that tile's, in the members' order: for a detector whose plants in a core
    do not depend on how far the window reaches beyond the overlap
    (:meth:`ecoscan.detect.detectors.base.Detector.reads_together`), the same table as
    the members' own jobs one after the other.

    Returns
    -------
    TilePoints
        ``col``, ``row`` in raster pixel coordinates (0 = centre of the first pixel), the
        detector's columns, and ``tile``.
    """
    detector = get_detector(job.detector)
    data, valid = read_window(
        job.info, job.plan.bands, job.tile.window, skip_empty=True, src=_kept_open(job.info)
    )
    if data is None:
        return detector.empty_tile(job.plan)  # all nodata: only the mask was read
    window = TileWindow(job.info, job.tile, data, valid)
    del data
    found = detector.run(window, job.plan)
    if not job.members:
        return found.in_core(job.tile)
    return TilePoints.concat([found.in_core(t) for t in job.members])


def tile_jobs(info: RasterInfo, tiles: list[Tile], plan: Any, detector: Detector) -> list[TileJob]:
    """The jobs that run ``tiles`` with ``plan``: neighbouring tiles in groups read as one
    window (:func:`ecoscan.detect.tiling.group_tiles`) where the detector allows it, else
    one job per tile. Their results, one after the other, are those of one job per tile.

    A group's window holds at most twice the pixels of the plan's largest tile window and
    at most :data:`ecoscan.detect.tiling.GROUP_WINDOW_PX`, so memory still follows the
    tile size: with 1024-pixel tiles, two tiles side by side.

    Examples
    --------
    Two rows of three tiles, for a detector that allows groups: pairs side by side.

    >>> from types import SimpleNamespace
    >>> from ecoscan.detect.tiling import plan_tiles
    >>> together = SimpleNamespace(name="imagery", reads_together=lambda plan: True)
    >>> jobs = tile_jobs(None, plan_tiles(3000, 2000, 1000, 100), None, together)
    >>> [[t.index for t in j.members] or [j.tile.index] for j in jobs]
    [[0, 1], [2], [3, 4], [5]]
    """
    if not detector.reads_together(plan):
        return [TileJob(info, t, plan, detector.name) for t in tiles]
    largest = max((t.pixels for t in tiles), default=0)
    return [
        TileJob(info, t[0], plan, detector.name)
        if len(t) == 1
        else TileJob(info, group_window(t), plan, detector.name, t)
        for t in group_tiles(tiles, max_pixels=min(GROUP_WINDOW_PX, 2 * largest))
    ]
