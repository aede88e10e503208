"""Plant detection: one point per plant from an orthomosaic, a canopy height model or a
classified raster, tiled so that rasters far larger than memory run on a laptop.

Public API
----------
:class:`DetectionSettings`
    Every detector option, with documented defaults.
:func:`detect_raster`
    Raster in, :class:`DetectionResult` out (points in a metric CRS plus notes).

Automated counts are estimates: check a sample of plots in the field before using them for
management decisions, and follow local survey rules.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.detect.detectors.base import Detector, Prepared, TilePoints
from ecoscan.detect.detectors.blob import LAYER_LABELS
from ecoscan.detect.detectors.registry import automatic, get_detector, overriding
from ecoscan.detect.engine import run_tile, tile_jobs
from ecoscan.detect.settings import DetectionSettings, parse_band_spec
from ecoscan.detect.tiling import EarlyPool, Tile, lend_pool, plan_tiles, run_plan
from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, to_metric, transform_xy
from ecoscan.io.raster import RasterInfo, open_raster, pixel_to_map
from ecoscan.model.notes import CAUTION, FIELD_CHECK, Note, is_warning
from ecoscan.model.points import PointSet

if TYPE_CHECKING:  # worker processes import this package: keep its import light
    from ecoscan.execution import Executor
    from ecoscan.model.plots import PlotLayer

__all__ = [
    "DetectionResult",
    "DetectionSettings",
    "choose_method",
    "describe_settings",
    "detect_raster",
    "detection_metadata",
    "parse_band_spec",
]

#: The detectors' usual columns, in output order after x, y. A detector's other columns
#: follow them in the detector's own order, then the columns every table ends with.
ATTRIBUTE_ORDER = (
    "diameter_m",
    "height_m",
    "area_m2",
    "score",
    "index_value",
    "class_value",
)
#: Columns added after detection (plot membership, tile), last in every table.
TRAILING_COLUMNS = ("plot_id", "plot_count", "tile")


def output_order(names) -> list[str]:
    """Column names in output order: the usual detector columns, then the detector's other
    columns as given, then plot membership and tile.

    Examples
    --------
    >>> output_order(["tile", "score", "crown_depth_m", "diameter_m"])
    ['diameter_m', 'score', 'crown_depth_m', 'tile']
    """
    names = list(names)
    usual = [k for k in ATTRIBUTE_ORDER if k in names]
    own = [k for k in names if k not in ATTRIBUTE_ORDER and k not in TRAILING_COLUMNS]
    return usual + own + [k for k in TRAILING_COLUMNS if k in names]


@dataclass
class DetectionResult:
    """What :func:`detect_raster` found.

    Attributes
    ----------
    points : PointSet
        One point per plant in a metric CRS (the raster's, the local UTM zone for
        geographic or foot-based rasters, or local pixel-based metres), with attributes
        such as ``diameter_m``, ``height_m``, ``area_m2``, ``score`` and ``tile``.
    notes : list of str
        Choices, conversions and warnings, for the user.
    method : str
        ``imagery``, ``chm`` or ``classes``.
    pixel_size_m : float
        Ground pixel size in metres.
    index : str or None
        Vegetation layer used by ``imagery`` (``exg``, ``ndvi`` or ``band``).
    thresholds : dict
        Global thresholds used (index or height units).
    tiles_total, tiles_read : int
        Tiles in the plan and tiles actually read (those touching the plots).
    megapixels_read : float
        Pixels read, including overlaps, in millions.
    warnings : list of str
        The notes that need attention.
    raster : RasterInfo
        The raster read.
    unsurveyed : list of str
        Plots given that lie wholly outside the raster: not surveyed, so left out (no
        count, not a zero).
    """

    points: PointSet
    notes: list[str]
    method: str
    pixel_size_m: float
    index: str | None = None
    thresholds: dict = field(default_factory=dict)
    tiles_total: int = 0
    tiles_read: int = 0
    megapixels_read: float = 0.0
    warnings: list[str] = field(default_factory=list)
    raster: RasterInfo | None = None
    unsurveyed: list[str] = field(default_factory=list)

    @property
    def n(self) -> int:
        """Number of plants found."""
        return self.points.n


def _plain(v):
    """JSON-safe copy (numpy scalars and arrays to Python numbers and lists)."""
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, np.generic):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    return v


def detection_metadata(result: DetectionResult, settings: DetectionSettings | None = None) -> dict:
    """What a detection run chose and why, as a JSON-ready mapping.

    Recorded beside the points (``ecoscan detect`` writes it to ``NAME.detection.json``)
    and in a survey's ``run.json``: the detector, the layer and how it was chosen, every
    threshold with its origin, and the warnings.

    Examples
    --------
    >>> meta = detection_metadata(result)  # doctest: +SKIP
    >>> meta["thresholds"]["layer"]  # doctest: +SKIP
    'exg'
    """
    out = {
        "method": result.method,
        "layer": result.index,
        "pixel_size_m": float(result.pixel_size_m),
        "plants": int(result.n),
        "thresholds": _plain(result.thresholds),
        "warnings": list(result.warnings),
        "tiles": {"total": result.tiles_total, "read": result.tiles_read},
    }
    if settings is not None:
        out["settings"] = _plain(settings.to_dict())
    if result.raster is not None:
        out["raster"] = Path(result.raster.path).name
    return out


def describe_settings(meta: dict) -> str:
    """One line on the detection settings of a run, for reports.

    Examples
    --------
    >>> describe_settings({"method": "chm", "thresholds": {"min_height_m": 2.0}})
    'chm detector; lowest tree top 2 m'
    """
    th = meta.get("thresholds") or {}
    method = meta.get("method", "")
    if method == "imagery" and th:
        layer = LAYER_LABELS.get(th.get("layer", ""), th.get("layer", ""))
        chosen = th.get("layer_chosen_by", "")
        how = "chosen from the image" if chosen.startswith("largest") else "as given"
        text = (
            f"imagery detector; layer {layer} ({how}); crown contrast at least "
            f"{th.get('min_contrast', float('nan')):.3g}, centre value at least "
            f"{th.get('vegetation_threshold', float('nan')):.3g}"
        )
        if th.get("threshold_raise", 1.0) > 1.0:
            text += f"; response threshold raised {th['threshold_raise']:.2f}x (rough ground)"
        if th.get("ring_mads") is not None:
            text += "; each plant tested against its own ring of ground"
        if th.get("weak_separation"):
            text += "; weak separation: check by eye or calibrate"
        return text
    if method == "chm":
        return f"chm detector; lowest tree top {th.get('min_height_m', float('nan')):g} m"
    if method == "classes":
        return f"classes detector; smallest patch {th.get('min_area_m2', float('nan')):.3g} m²"
    return f"{method} detector"


def _band_error(info: RasterInfo, idx: int) -> InputError:
    return InputError(
        f"band {idx} is out of range: {Path(info.path).name} has data bands "
        f"{', '.join(map(str, info.data_bands))}; choose one of them with --bands"
    )


def choose_method(
    info: RasterInfo, settings: DetectionSettings
) -> tuple[str, tuple[int, ...], str | None, list[str]]:
    """Pick the detector, the bands and the vegetation index.

    The automatic rule (``method="auto"``) asks the detector registry
    (:func:`ecoscan.detect.detectors.registry.automatic`): three or more data bands, or
    named red and near-infrared bands, give ``imagery``; one floating-point band gives
    ``chm``; one integer band gives ``classes`` when class values are given, otherwise
    ``imagery`` on that band as it is. The detector then picks its bands.

    Returns
    -------
    method, bands, index, notes

    Examples
    --------
    >>> choose_method(open_raster("ortho.tif"), DetectionSettings())[:3]  # doctest: +SKIP
    ('imagery', (1, 2, 3), 'exg')
    """
    notes: list[str] = []
    for idx in dict(settings.band_spec).values():
        if idx not in info.data_bands:
            raise _band_error(info, idx)
    method = settings.method
    if method == "auto":
        method = automatic(info, settings).name
        notes.append(
            f"detector chosen automatically: {method} ({info.count} band(s) of {info.dtype}); "
            "set --method to override"
        )
    bands, index, more = get_detector(method).choose_bands(info, settings)
    return method, bands, index, notes + more


def _tile_polygons(info: RasterInfo, tiles: list[Tile]) -> np.ndarray:
    from ecoscan.io.raster import window_polygons

    core = np.array([tl.core for tl in tiles], float).reshape(-1, 4)
    c0, r0, c1, r1 = core.T
    return window_polygons(info.transform, c0, r0, c1 - c0, r1 - r0)


def _raster_polygon(info: RasterInfo):
    """The raster's outline (pixel corners) in its own CRS."""
    from ecoscan.io.raster import window_polygons

    return window_polygons(info.transform, 0, 0, info.width, info.height)[0]


def _plots_in(layer: PlotLayer, crs) -> np.ndarray:
    from ecoscan.io.vector import reproject_geometries

    geoms = np.array([p.geometry for p in layer.plots], dtype=object)
    if crs is not None and layer.crs is not None and crs != layer.crs:
        geoms = reproject_geometries(geoms, layer.crs, crs)
    return geoms


def detect_raster(
    path: str | os.PathLike,
    settings: DetectionSettings | None = None,
    *,
    plots: PlotLayer | None = None,
    workers: int = 1,
    executor: Executor | None = None,
    info: RasterInfo | None = None,
) -> DetectionResult:
    """Detect plants in a raster: one point per plant, in a metric CRS.

    Parameters
    ----------
    path : path-like
        GeoTIFF or any GDAL raster: an RGB or multispectral orthomosaic (``imagery``), a
        canopy height model in metres (``chm``) or a classified land-cover map
        (``classes``).
    settings : DetectionSettings, optional
        Detector options (defaults documented there).
    plots : PlotLayer, optional
        Plot polygons: only tiles touching them are read and points are clipped to them
        (each point gets its ``plot_id``).
    workers : int
        Local processes for the tiles (1 runs in this process). Workers are started fresh
        (fork server or spawn), so a script calling this with ``workers > 1`` must do so
        under ``if __name__ == "__main__":``.
    executor : Executor, optional
        Where the tiles run instead (:func:`ecoscan.execution.open_executor`, e.g. a Dask
        cluster); ``workers`` is then not used. Each tile reads its own window from
        ``path``, which must be reachable from the workers. The result is the same.
    info : RasterInfo, optional
        The raster's header when the caller has opened it already
        (:func:`ecoscan.raster.open_raster` of ``path`` with ``settings.pixel_size_m``), so
        that it is not opened again.

    Returns
    -------
    DetectionResult

    Raises
    ------
    InputError
        Unreadable raster, bad bands, an empty or sub-pixel diameter range, class values
        not present, an entirely nodata raster, or plots that miss the raster.

    Notes
    -----
    Methods and sources: Excess Green (Woebbecke et al. 1995), NDVI (Rouse et al. 1974),
    scale-normalised blob detection (Lindeberg 1998) by a difference-of-Gaussians pyramid
    (Lowe 2004), Otsu (1979) thresholds, variable-window tree tops (Popescu & Wynne 2004),
    marker-controlled watershed (Meyer & Beucher 1990). See docs/detection.md.
    """
    settings = settings or DetectionSettings()
    if workers < 1:
        raise InputError(f"--workers must be at least 1 (got {workers})")
    if info is None:
        info = open_raster(path, pixel_size_m=settings.pixel_size_m)
    if executor is not None and not executor.distributed and hasattr(executor, "workers"):
        # a local executor runs the tiles as run_plan does with its workers: take that path,
        # whose workers start early and share the layer choice (the same results)
        workers, executor = int(executor.workers), None
    early = None
    if executor is None and workers > 1 and info.width * info.height > settings.tile_size_px**2:
        # workers start (and import the detector) while this process chooses the layer
        early = EarlyPool(workers)
    try:
        return _detect(path, info, settings, plots, workers, executor, early)
    finally:
        if early is not None:
            early.stop()  # on an error before the tiles ran; a no-op after


def _detect(path, info, settings, plots, workers, executor, early) -> DetectionResult:
    """The body of :func:`detect_raster` (``early``: an :class:`EarlyPool` or None)."""
    notes = list(info.notes)
    with lend_pool(early):  # the workers may score candidate layers meanwhile
        detector, prepared = _prepare(path, info, settings, notes)
    warn = [n for n in prepared.notes if is_warning(n)]
    notes += prepared.notes
    # target metric CRS, chosen from the raster centre (not the detections)
    cx, cy = pixel_to_map(info, np.array([info.width / 2 - 0.5]), np.array([info.height / 2 - 0.5]))
    _mx, _my, frame = to_metric(cx, cy, info.crs)
    if frame.note:
        notes.append(frame.note.replace("input CRS", "raster CRS"))
    tiles, selected = _select_tiles(info, settings, prepared, plots, notes)
    jobs = tile_jobs(info, selected, prepared.plan, detector)
    if executor is None:
        pool = early.get() if early is not None and jobs else None
        parts = (
            run_plan(run_tile, jobs, workers=workers, pool=pool, cost=_pixels_read) if jobs else []
        )
    else:
        parts = executor.map(run_tile, jobs, desc="tiles", unit="tile")
    col, row, attrs = _collect(detector, prepared.plan, parts, notes, warn)
    x, y = pixel_to_map(info, col, row)
    if frame.reprojected_from is not None:
        x, y = transform_xy(x, y, info.crs, frame.crs)
    pts = PointSet(x, y, attrs, frame.crs, [])
    unsurveyed: list[str] = []
    if plots is not None:
        pts, unsurveyed = _clip_to_plots(pts, plots, info, frame, notes, warn)
    ordered = {k: pts.attrs[k] for k in output_order(pts.attrs)}
    pts = PointSet(pts.x, pts.y, ordered, pts.crs, [])
    if pts.n == 0:
        msg = "no plants were found; check --diameter, thresholds and bands"
        notes.append(msg)
        warn.append(msg)
    notes.append(
        Note(
            "automated counts need field checks on a sample of plots before they inform "
            "management decisions",
            FIELD_CHECK,
            CAUTION,
        )
    )
    pts.notes = list(notes)
    return DetectionResult(
        points=pts,
        notes=notes,
        method=detector.method,
        pixel_size_m=info.pixel_size_m,
        index=prepared.index,
        thresholds=prepared.thresholds,
        tiles_total=len(tiles),
        tiles_read=len(selected),
        megapixels_read=sum(j.tile.pixels for j in jobs) / 1e6,
        warnings=warn,
        raster=info,
        unsurveyed=unsurveyed,
    )


def _pixels_read(job) -> int:
    """A tile job's cost for :func:`ecoscan.detect.tiling.run_plan`: its window's pixels."""
    return job.tile.pixels


def _prepare(path, info: RasterInfo, settings: DetectionSettings, notes: list):
    """The detector and its plan: a detector the settings name directly (a calibrated
    detector file), else the one ``--method`` names or the automatic rule picks."""
    detector = overriding(settings)
    if detector is not None:
        return detector, detector.prepare(info, settings, (), None, str(path))
    method, bands, index, more = choose_method(info, settings)
    notes += more
    detector = get_detector(method)
    return detector, detector.prepare(info, settings, bands, index, str(path))


def _select_tiles(
    info: RasterInfo, settings: DetectionSettings, prepared: Prepared, plots, notes: list
) -> tuple[list[Tile], list[Tile]]:
    """The tile plan, and the tiles to read: those touching the plots, or all."""
    if prepared.plan is None:
        return [], []
    tiles = plan_tiles(
        info.width, info.height, settings.tile_size_px, prepared.overlap, align=prepared.align
    )
    if plots is None:
        return tiles, tiles
    import shapely  # (the vector stack is slow to import: only when needed)

    if info.local and plots.crs is not None:
        notes.append("the raster has no CRS: plot coordinates are taken as its local metres")
    plot_geoms = _plots_in(plots, None if info.local else info.crs)
    union = shapely.union_all(plot_geoms)
    shapely.prepare(union)
    hit = shapely.intersects(_tile_polygons(info, tiles), union)
    selected = [t for t, h in zip(tiles, hit, strict=True) if h]
    if not selected:
        raise InputError(
            f"the plots do not overlap {Path(info.path).name}; check that the plots and "
            f"the raster ({crs_label(info.crs)}) cover the same ground"
        )
    return tiles, selected


def _collect(
    detector: Detector, plan, parts: list[TilePoints], notes: list, warn: list
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Pixel positions and output columns of all tiles' plants (the detector's
    :meth:`~ecoscan.detect.detectors.base.Detector.finish`)."""
    if not parts:
        attrs = {k: np.empty(0) for k in detector.empty_columns}
        attrs["tile"] = np.empty(0, dtype=np.int64)
        return np.empty(0), np.empty(0), attrs
    points = TilePoints.concat(parts)
    attrs: dict[str, np.ndarray] = {}
    if points.n:
        points, attrs, more = detector.finish(points, plan)
        notes += more
        warn += more
    attrs["tile"] = points.tile
    return points.col, points.row, attrs


def _clip_to_plots(pts: PointSet, plots: PlotLayer, info: RasterInfo, frame, notes, warn):
    """Points with their ``plot_id``, kept inside the plots; and the plots not surveyed."""
    import shapely

    from ecoscan.model.membership import (
        assign_plots,
        overlap_note,
        points_by_plot,
        unsurveyed_note,
    )
    from ecoscan.model.plots import PlotLayer

    geoms = _plots_in(plots, None if info.local else frame.crs)
    layer = PlotLayer(
        [type(p)(p.plot_id, g, p.attrs) for p, g in zip(plots.plots, geoms, strict=True)],
        frame.crs,
    )
    ov = overlap_note(layer)
    if ov:
        notes.append(ov)
        warn.append(ov)
    # what the raster covers, in the plots' frame: plots outside it were not surveyed
    rgeoms = _plots_in(plots, None if info.local else info.crs)
    foot = _raster_polygon(info)
    covered = shapely.area(shapely.intersection(rgeoms, foot)) / np.maximum(
        shapely.area(rgeoms), 1e-12
    )
    unsurveyed = [p.plot_id for p, c in zip(plots.plots, covered, strict=True) if c <= 0]
    if unsurveyed:
        notes.append(unsurveyed_note(unsurveyed, f"{Path(info.path).name}"))
    part = [
        f"{p.plot_id} ({100 * c:.0f}%)"
        for p, c in zip(plots.plots, covered, strict=True)
        if 0 < c < 0.99
    ]
    if part:
        msg = (
            f"plot(s) {', '.join(part[:8])} lie only partly inside "
            f"{Path(info.path).name}: their counts cover that part only; use a raster "
            "that covers them or leave them out"
        )
        notes.append(msg)
        warn.append(msg)
    member = assign_plots(pts, layer)
    return points_by_plot(pts, layer, member), unsurveyed


# `ecoscan.detect(path)` is the public API function of that name: calling this package runs it
# (ecoscan/__init__.py, docs/architecture.md "The Python API")
from ecoscan import _callable_package  # noqa: E402

_callable_package(__name__)
