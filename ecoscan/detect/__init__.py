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

import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.crs import crs_label, to_metric, transform_xy
from ecoscan.detect.blobs import DISC_RESPONSE, blob_scales, prune_blobs
from ecoscan.detect.engine import DetectorParams, TileJob, run_tile, vegetation_layer
from ecoscan.detect.settings import CROWN_RULES, DetectionSettings, parse_band_spec
from ecoscan.detect.tiling import Tile, plan_tiles, run_plan
from ecoscan.errors import InputError
from ecoscan.points import PointSet
from ecoscan.raster import RasterInfo, open_raster, pixel_to_map, read_decimated

if TYPE_CHECKING:  # worker processes import this package: keep its import light
    from ecoscan.vector import PlotLayer

__all__ = [
    "DetectionResult",
    "DetectionSettings",
    "choose_method",
    "detect_raster",
    "parse_band_spec",
]

#: Columns every detection table may carry, in output order after x, y.
ATTRIBUTE_ORDER = (
    "diameter_m",
    "height_m",
    "area_m2",
    "score",
    "index_value",
    "class_value",
    "plot_id",
    "plot_count",
    "tile",
)


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


def _band_error(info: RasterInfo, idx: int) -> InputError:
    return InputError(
        f"band {idx} is out of range: {Path(info.path).name} has data bands "
        f"{', '.join(map(str, info.data_bands))}; choose one of them with --bands"
    )


def choose_method(
    info: RasterInfo, settings: DetectionSettings
) -> tuple[str, tuple[int, ...], str | None, list[str]]:
    """Pick the detector, the bands and the vegetation index.

    The automatic rule (``method="auto"``): three or more data bands, or named red and
    near-infrared bands, give ``imagery``; one floating-point band gives ``chm``; one
    integer band gives ``classes`` when class values are given, otherwise ``imagery`` on
    that band as it is.

    Returns
    -------
    method, bands, index, notes
    """
    notes: list[str] = []
    spec = dict(settings.band_spec)
    for idx in spec.values():
        if idx not in info.data_bands:
            raise _band_error(info, idx)
    names_in_file = {d: i for d, i in zip(info.descriptions, info.data_bands, strict=True) if d}
    method = settings.method
    if method == "auto":
        if len(spec) >= 2 or (not spec and info.count >= 3):
            method = "imagery"
        elif np.dtype(info.dtype).kind == "f":
            method = "chm"
        elif settings.classes:
            method = "classes"
        else:
            method = "imagery"
        notes.append(
            f"detector chosen automatically: {method} ({info.count} band(s) of {info.dtype}); "
            "set --method to override"
        )
    if method in ("chm", "classes"):
        band = next(iter(spec.values()), info.data_bands[0])
        return method, (band,), None, notes
    # imagery: find red/green/blue/nir
    lookup = dict(spec)
    if not spec:
        for key in ("red", "green", "blue", "nir"):
            for name, i in names_in_file.items():
                if name == key or (key == "nir" and ("nir" in name or "infrared" in name)):
                    lookup.setdefault(key, i)
        for key, i in zip(info.colorinterp, info.data_bands, strict=True):
            if key in ("red", "green", "blue"):
                lookup.setdefault(key, i)
        if info.count >= 3:
            for key, i in zip(("red", "green", "blue"), info.data_bands[:3], strict=True):
                lookup.setdefault(key, i)
    index = settings.index
    if index == "auto":
        if "red" in lookup and "nir" in lookup:
            index = "ndvi"
        elif all(k in lookup for k in ("red", "green", "blue")):
            index = "exg"
        else:
            index = "band"
    if index == "ndvi":
        if not ("red" in lookup and "nir" in lookup):
            raise InputError(
                "NDVI needs the red and near-infrared bands; name them, e.g. --bands red=3,nir=4"
            )
        bands = (lookup["red"], lookup["nir"])
    elif index == "exg":
        if not all(k in lookup for k in ("red", "green", "blue")):
            raise InputError(
                "Excess Green needs red, green and blue bands; give them with --bands 1,2,3"
            )
        bands = (lookup["red"], lookup["green"], lookup["blue"])
    else:
        bands = (next(iter(spec.values()), info.data_bands[0]),)
    label = {"ndvi": "NDVI", "exg": "Excess Green", "band": "the band values"}[index]
    notes.append(f"vegetation layer: {label} from band(s) {', '.join(map(str, bands))}")
    return method, bands, index, notes


def _global_params(
    info: RasterInfo, settings: DetectionSettings, method: str, bands, index
) -> tuple[DetectorParams | None, int, int, dict, list[str]]:
    """Thresholds and scales from the whole raster (decimated), never per tile."""
    ps = info.pixel_size_m
    name = Path(info.path).name
    data, valid = read_decimated(info, bands)
    if not valid.any():
        raise InputError(
            f"{name} is entirely nodata (every pixel is masked); check the file and its "
            "nodata value"
        )
    notes: list[str] = []
    dmin_px, dmax_px = settings.diameter_min_m / ps, settings.diameter_max_m / ps
    if method in ("imagery", "classes"):
        if dmin_px < 1.0:
            raise InputError(
                f"the smallest diameter {settings.diameter_min_m:g} m is below one pixel "
                f"({ps:.3g} m); raise --diameter to at least {2 * ps:.2g}:... m"
            )
        if dmin_px < 3.0:
            notes.append(
                f"the smallest crowns are only {dmin_px:.1f} pixels across; detection of "
                "crowns under about 3 pixels is unreliable"
            )
        if dmax_px > 0.5 * min(info.width, info.height):
            notes.append(
                f"the largest diameter ({dmax_px:.0f} pixels) is more than half the raster; "
                "check --diameter"
            )
    if method == "imagery":
        from skimage.filters import threshold_otsu

        layer = vegetation_layer(data, index)[valid]
        if float(np.ptp(layer)) == 0.0:
            return None, 0, 1, {}, [*notes, "the vegetation layer is constant: no plants found"]
        t = (
            float(settings.threshold)
            if settings.threshold is not None
            else float(threshold_otsu(layer))
        )
        lo_vals, hi_vals = layer[layer < t], layer[layer >= t]
        lo = float(lo_vals.mean()) if lo_vals.size else float(layer.min())
        hi = float(hi_vals.mean()) if hi_vals.size else float(layer.max())
        contrast = (
            float(settings.min_contrast)
            if settings.min_contrast is not None
            else 0.5 * max(hi - lo, 1e-6)
        )
        scales = blob_scales(dmin_px / 2.0, dmax_px / 2.0, settings.scales_per_octave)
        params = DetectorParams(
            method="imagery",
            bands=bands,
            pixel_size_m=ps,
            index=index,
            scales=scales,
            min_response=DISC_RESPONSE * contrast,
            min_value=t,
            fill_value=lo,
        )
        overlap = max(scales.support_px, math.ceil(dmax_px))
        how = "given" if settings.threshold is not None else "Otsu on the whole raster"
        notes.append(
            f"vegetation threshold {t:.4g} ({how}); smallest crown contrast {contrast:.4g}"
        )
        th = {"vegetation_threshold": t, "min_contrast": contrast, "background": lo}
        return params, overlap, scales.align, th, notes
    if method == "chm":
        hmax = float(np.max(data[0][valid]))
        a, b, c = CROWN_RULES[settings.crown_rule]
        hcap = max(hmax * 1.2 + 1.0, settings.min_height_m)
        cap_px = math.ceil((a + b * hcap + c * hcap**2) / 2.0 / ps)
        smooth_px = (settings.smooth_m if settings.smooth_m is not None else ps) / ps
        params = DetectorParams(
            method="chm",
            bands=bands,
            pixel_size_m=ps,
            min_height=settings.min_height_m,
            smooth_px=smooth_px,
            crown_rule=settings.crown_rule,
            radius_cap_px=max(1, cap_px),
            crown_floor_m=0.5 * settings.min_height_m,
            crowns=settings.crowns,
        )
        overlap = 2 * cap_px + math.ceil(3 * smooth_px) + 2
        if hmax < settings.min_height_m:
            notes.append(
                f"the highest pixel ({hmax:.3g}) is below --min-height {settings.min_height_m:g}: "
                "no trees can be found"
            )
        th = {"min_height_m": settings.min_height_m, "max_height_m": hmax}
        return params, overlap, 1, th, notes
    # classes
    if not settings.classes:
        raise InputError("the classes detector needs the plant class values, e.g. --classes 3,4")
    vals = data[0][valid]
    present = set(np.unique(vals).astype(np.int64).tolist())
    missing = [c for c in settings.classes if c not in present]
    if len(missing) == len(settings.classes):
        shown = ", ".join(map(str, sorted(present)[:12]))
        raise InputError(
            f"class value(s) {', '.join(map(str, settings.classes))} do not occur in {name} "
            f"(values present: {shown}); choose plant classes with --classes"
        )
    if missing:
        notes.append(f"class value(s) {', '.join(map(str, missing))} do not occur in {name}")
    min_area = (
        settings.min_area_m2
        if settings.min_area_m2 is not None
        else 0.25 * math.pi * (settings.diameter_min_m / 2.0) ** 2
    )
    params = DetectorParams(
        method="classes",
        bands=bands,
        pixel_size_m=ps,
        class_values=tuple(settings.classes),
        min_area_px=min_area / ps**2,
        split=settings.split_touching,
        h_px=max(1.0, 0.2 * dmin_px / 2.0),
    )
    overlap = math.ceil(1.5 * dmax_px) + 2
    th = {"min_area_m2": min_area}
    return params, overlap, 1, th, notes


def _tile_polygons(info: RasterInfo, tiles: list[Tile]) -> np.ndarray:
    import shapely

    t = info.transform
    c0 = np.array([tl.core[0] for tl in tiles], float)
    r0 = np.array([tl.core[1] for tl in tiles], float)
    c1 = np.array([tl.core[2] for tl in tiles], float)
    r1 = np.array([tl.core[3] for tl in tiles], float)
    cs = np.stack([c0, c1, c1, c0], axis=1)
    rs = np.stack([r0, r0, r1, r1], axis=1)
    xs = t.a * cs + t.b * rs + t.c
    ys = t.d * cs + t.e * rs + t.f
    rings = np.stack([xs, ys], axis=2)
    return shapely.polygons(rings)


def _raster_polygon(info: RasterInfo):
    """The raster's outline (pixel corners) in its own CRS."""
    import shapely

    t = info.transform
    cs = np.array([0, info.width, info.width, 0], float)
    rs = np.array([0, 0, info.height, info.height], float)
    return shapely.Polygon(np.column_stack([t.a * cs + t.b * rs + t.c, t.d * cs + t.e * rs + t.f]))


def _plots_in(layer: PlotLayer, crs) -> np.ndarray:
    from ecoscan.vector import reproject_geometries

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
    import shapely

    from ecoscan.inputs import (
        assign_plots,
        overlap_note,
        points_by_plot,
        unsurveyed_note,
    )
    from ecoscan.vector import PlotLayer

    settings = settings or DetectionSettings()
    if workers < 1:
        raise InputError(f"--workers must be at least 1 (got {workers})")
    info = open_raster(path, pixel_size_m=settings.pixel_size_m)
    notes = list(info.notes)
    if settings.detector:  # calibrated detector (ecoscan calibrate): its file sets the layer
        from ecoscan.detect.detector_file import calibrated_params, read_detector

        det = read_detector(settings.detector)
        method, index = "imagery", f"calibrated:{det.layer}"
        params, overlap, align, thresholds, more = calibrated_params(det, info, str(path))
    else:
        method, bands, index, more = choose_method(info, settings)
        notes += more
        params, overlap, align, thresholds, more = _global_params(
            info, settings, method, bands, index
        )
    warn = [n for n in more if "unreliable" in n or "no plants" in n or "no trees" in n]
    notes += more
    ps = info.pixel_size_m
    # target metric CRS, chosen from the raster centre (not the detections)
    cx, cy = pixel_to_map(info, np.array([info.width / 2 - 0.5]), np.array([info.height / 2 - 0.5]))
    _mx, _my, frame = to_metric(cx, cy, info.crs)
    if frame.note:
        notes.append(frame.note.replace("input CRS", "raster CRS"))
    tiles: list[Tile] = []
    selected: list[Tile] = []
    plot_geoms = None
    if params is not None:
        tiles = plan_tiles(info.width, info.height, settings.tile_size_px, overlap, align=align)
        selected = tiles
        if plots is not None:
            if info.local and plots.crs is not None:
                notes.append(
                    "the raster has no CRS: plot coordinates are taken as its local metres"
                )
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
    jobs = [TileJob(info, t, params) for t in selected]
    parts = run_plan(run_tile, jobs, workers=workers) if jobs else []
    table: dict[str, np.ndarray] = {}
    if parts:
        for k in parts[0]:
            table[k] = np.concatenate([p[k] for p in parts])
    n = table["col"].size if table else 0
    attrs: dict[str, np.ndarray] = {}
    if n and method == "imagery":
        radius = math.sqrt(2.0) * table["sigma_px"]
        keep = prune_blobs(table["col"], table["row"], radius, table["score"])
        table = {k: v[keep] for k, v in table.items()}
        attrs["diameter_m"] = 2.0 * math.sqrt(2.0) * table["sigma_px"] * ps
        attrs["score"] = table["score"]
        attrs["index_value"] = table["index_value"]
    elif n and method == "chm":
        attrs["height_m"] = table["height_m"]
        if "area_m2" in table:
            attrs["area_m2"] = table["area_m2"]
    elif n and method == "classes":
        attrs["diameter_m"] = 2.0 * np.sqrt(table["area_m2"] / math.pi)
        attrs["area_m2"] = table["area_m2"]
        attrs["class_value"] = table["class_value"].astype(np.int64)
        cut = int(table["_edge"].sum())
        if cut:
            msg = (
                f"{cut} patch(es) are larger than the tile overlap and may be cut at tile "
                "edges; raise the largest --diameter"
            )
            notes.append(msg)
            warn.append(msg)
    if table:
        attrs["tile"] = table["tile"]
        col, row = table["col"], table["row"]
    else:
        col = row = np.empty(0)
        if method == "imagery":
            attrs = {"diameter_m": np.empty(0), "score": np.empty(0)}
        elif method == "chm":
            attrs = {"height_m": np.empty(0)}
        else:
            attrs = {"diameter_m": np.empty(0), "area_m2": np.empty(0)}
        attrs["tile"] = np.empty(0, dtype=np.int64)
    x, y = pixel_to_map(info, col, row)
    if frame.reprojected_from is not None:
        x, y = transform_xy(x, y, info.crs, frame.crs)
    pts = PointSet(x, y, attrs, frame.crs, [])
    unsurveyed: list[str] = []
    if plots is not None:
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
        pts = points_by_plot(pts, layer, member)
    ordered = {k: pts.attrs[k] for k in ATTRIBUTE_ORDER if k in pts.attrs}
    pts = PointSet(pts.x, pts.y, ordered, pts.crs, [])
    if pts.n == 0:
        msg = "no plants were found; check --diameter, thresholds and bands"
        notes.append(msg)
        warn.append(msg)
    notes.append(
        "automated counts need field checks on a sample of plots before they inform "
        "management decisions"
    )
    pts.notes = list(notes)
    mp_read = sum(t.pixels for t in selected) / 1e6
    return DetectionResult(
        points=pts,
        notes=notes,
        method=method,
        pixel_size_m=ps,
        index=index,
        thresholds=thresholds,
        tiles_total=len(tiles),
        tiles_read=len(selected),
        megapixels_read=mp_read,
        warnings=warn,
        raster=info,
        unsurveyed=unsurveyed,
    )
