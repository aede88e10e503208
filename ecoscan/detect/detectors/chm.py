"""The ``chm`` detector: tree tops in a canopy height model, optionally with crown areas.

A top is the highest pixel within the crown width its own height predicts (variable window,
Popescu & Wynne 2004; :mod:`ecoscan.detect.chm`); crowns are grown from the tops by a
marker-controlled watershed (Meyer & Beucher 1990) when ``--crowns`` is given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.detect.chm import crown_areas, smooth_chm, tree_tops
from ecoscan.detect.detectors.base import (
    MAX_REACH_PX,
    Detector,
    Prepared,
    TilePoints,
    TileWindow,
    check_tile_memory,
    decimated,
    no_plants,
    raster_name,
)
from ecoscan.detect.settings import CROWN_RULES
from ecoscan.errors import InputError

if TYPE_CHECKING:
    from ecoscan.detect.settings import DetectionSettings
    from ecoscan.io.raster import RasterInfo

__all__ = [
    "MAX_CHM_PIXEL_M",
    "MAX_TREE_HEIGHT_M",
    "ChmPlan",
    "TreeTopDetector",
    "check_height_model",
]

#: Tallest plausible height in a canopy height model, metres. The tallest measured living
#: trees are about 116 m (coast redwood; from memory); 150 m leaves a margin.
MAX_TREE_HEIGHT_M = 150.0
#: Coarsest pixel at which single crowns can be told apart, metres (common practice: tree
#: detection needs several pixels per crown; 20 m pixels are already coarser than most crowns).
MAX_CHM_PIXEL_M = 20.0


@dataclass(frozen=True)
class ChmPlan:
    """Parameters of a tree-top run, fixed once for the whole raster.

    Attributes
    ----------
    bands : tuple of int
        The height band.
    pixel_size_m : float
        Ground pixel size.
    min_height : float
        Lowest tree top, metres.
    smooth_px : float
        Gaussian smoothing of the heights, pixels.
    crown_rule : str
        Crown width from height (:data:`ecoscan.detect.settings.CROWN_RULES`).
    radius_cap_px : int
        Largest search radius, pixels.
    crown_floor_m : float
        Crown pixels are at least this high (``crowns``).
    crowns : bool
        Also measure each crown's area.
    """

    bands: tuple[int, ...]
    pixel_size_m: float
    min_height: float = 2.0
    smooth_px: float = 1.0
    crown_rule: str = "combined"
    radius_cap_px: int = 1
    crown_floor_m: float = 1.0
    crowns: bool = False


def check_height_model(info: RasterInfo, settings: DetectionSettings) -> None:
    """Refuse, before any work, a raster that cannot be a canopy height model in metres.

    Checks what the header tells: one band (or one chosen with ``--bands``), not 8-bit
    integers (ordinary images), a pixel size fine enough to separate crowns. Height values
    are checked after the decimated read (:func:`_chm_height_check`).

    Raises
    ------
    InputError
        With what is wrong and what to do.

    Examples
    --------
    ``check_height_model(open_raster("ortho.tif"), DetectionSettings(method="chm"))`` on a
    3-band RGB image raises ``InputError("ortho.tif has 3 bands, but --method chm needs a
    canopy height model ...")`` before any pixel is read.
    """
    name = raster_name(info)
    if info.count > 1 and not settings.band_spec:
        raise InputError(
            f"{name} has {info.count} bands, but --method chm needs a canopy height model "
            "(one band of heights in metres); use --method imagery for an image, or choose "
            "the height band with --bands N"
        )
    dt = np.dtype(info.dtype)
    if dt.kind in "ui" and dt.itemsize == 1:
        raise InputError(
            f"{name} holds 8-bit integers ({info.dtype}), which are image brightness values, "
            "not heights in metres; use --method imagery for an image, or give a canopy "
            "height model in metres"
        )
    ps = info.pixel_size_m
    if ps > MAX_CHM_PIXEL_M:
        raise InputError(
            f"{name} has {ps:g} m pixels, too coarse to separate tree crowns (at most "
            f"{MAX_CHM_PIXEL_M:g} m); check the pixel size (--pixel-size) or the raster"
        )


def _chm_height_check(name: str, heights: np.ndarray) -> float:
    """Highest height after the plausibility check; raise InputError when implausible."""
    finite = np.isfinite(heights)
    if not finite.all():
        raise InputError(
            f"{name} contains infinite or NaN heights that are not marked as nodata; set the "
            "raster's nodata value (e.g. gdal_edit.py -a_nodata) and retry"
        )
    hmax = float(heights.max())
    hmin = float(heights.min())
    if hmax > MAX_TREE_HEIGHT_M:
        raise InputError(
            f"{name} has heights up to {hmax:.4g}, implausible for trees in metres (at most "
            f"{MAX_TREE_HEIGHT_M:g} m); convert centimetres or feet to metres, subtract the "
            "ground (a surface model is not a height model), or declare the nodata value"
        )
    if hmin < -MAX_TREE_HEIGHT_M:
        raise InputError(
            f"{name} has heights down to {hmin:.4g}, implausible for a canopy height model "
            "in metres; declare the nodata value or check the units"
        )
    return hmax


def _crown_width_px(rule: str, pixel_size_m: float):
    a, b, c = CROWN_RULES[rule]

    def f(h):
        return (a + b * h + c * h * h) / pixel_size_m

    return f


def _chm_plan(info: RasterInfo, settings: DetectionSettings, bands):
    """(plan, overlap, align, thresholds, notes) of the tree-top detector."""
    ps = info.pixel_size_m
    name = raster_name(info)
    data, valid = decimated(info, bands, name)
    notes: list = []
    hmax = _chm_height_check(name, data[0][valid])
    a, b, c = CROWN_RULES[settings.crown_rule]
    hcap = max(hmax * 1.2 + 1.0, settings.min_height_m)
    cap_px = math.ceil((a + b * hcap + c * hcap**2) / 2.0 / ps)
    smooth_px = (settings.smooth_m if settings.smooth_m is not None else ps) / ps
    plan = ChmPlan(
        bands=bands,
        pixel_size_m=ps,
        min_height=settings.min_height_m,
        smooth_px=smooth_px,
        crown_rule=settings.crown_rule,
        radius_cap_px=max(1, cap_px),
        crown_floor_m=0.5 * settings.min_height_m,
        crowns=settings.crowns,
    )
    if cap_px > MAX_REACH_PX // 2 or smooth_px > MAX_REACH_PX // 8:
        raise InputError(
            f"at {ps:g} m pixels the crown search window of a {hcap:.0f} m tree is "
            f"{2 * cap_px} pixels across (smoothing {smooth_px:.0f} pixels): too large to "
            "process; check the pixel size and that heights are in metres"
        )
    overlap = 2 * cap_px + math.ceil(3 * smooth_px) + 2
    check_tile_memory(name, settings, overlap, 1, 4, "the crown search window")
    if hmax < settings.min_height_m:
        notes.append(
            no_plants(
                f"the highest pixel ({hmax:.3g}) is below --min-height "
                f"{settings.min_height_m:g}: no trees can be found"
            )
        )
    th = {"min_height_m": settings.min_height_m, "max_height_m": hmax}
    return plan, overlap, 1, th, notes


class TreeTopDetector(Detector):
    """Tree tops in a canopy height model (``--method chm``)."""

    name = "chm"
    method = "chm"
    auto_order = 1
    empty_columns = ("height_m",)

    def fits(self, info: RasterInfo, settings: DetectionSettings) -> bool:
        """One band of floating-point values (heights)."""
        return np.dtype(info.dtype).kind == "f"

    def prepare(self, info, settings, bands, index, source):
        """Search window and smoothing from the tallest height (decimated raster)."""
        check_height_model(info, settings)
        plan, overlap, align, th, notes = _chm_plan(info, settings, bands)
        return Prepared(plan, overlap, align, th, notes, index)

    def run(self, window: TileWindow, plan: ChmPlan) -> TilePoints:
        """Tree tops (and crown areas) in one window."""
        valid = window.valid
        h = np.where(valid, window.pop_data()[0], 0.0).astype(np.float32)
        hs = smooth_chm(h, plan.smooth_px)
        tops = tree_tops(
            hs,
            valid,
            plan.min_height,
            _crown_width_px(plan.crown_rule, plan.pixel_size_m),
            plan.radius_cap_px,
            origin=window.origin,
        )
        columns = {"height_m": tops.height}
        if plan.crowns:
            px = crown_areas(hs, h, valid, tops.array_row, tops.array_col, plan.crown_floor_m)
            columns["area_m2"] = px * plan.pixel_size_m**2
        return TilePoints(tops.col, tops.row, columns)

    def empty_tile(self, plan: ChmPlan) -> TilePoints:
        """No tops."""
        return TilePoints.empty(("height_m", *(("area_m2",) if plan.crowns else ())))

    def finish(self, points: TilePoints, plan: ChmPlan):
        """Heights (and crown areas) as they are."""
        attrs = {"height_m": points.columns["height_m"]}
        if "area_m2" in points.columns:
            attrs["area_m2"] = points.columns["area_m2"]
        return points, attrs, []


DETECTOR = TreeTopDetector()
