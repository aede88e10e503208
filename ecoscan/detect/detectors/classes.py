"""The ``classes`` detector: one plant per patch of chosen values in a classified raster.

Patches of the plant classes are labelled; touching crowns are split by a marker-controlled
watershed of the distance transform (:mod:`ecoscan.detect.classes`). Patches wider than
the tile overlap may be cut at tile edges: they are flagged and counted in a warning.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.detect.classes import class_patches
from ecoscan.detect.detectors.base import (
    Detector,
    Prepared,
    TilePoints,
    TileWindow,
    check_diameters,
    check_tile_memory,
    decimated,
    disc_diameter_m,
    raster_name,
)
from ecoscan.errors import InputError

if TYPE_CHECKING:
    from ecoscan.detect.settings import DetectionSettings
    from ecoscan.io.raster import RasterInfo

__all__ = ["ClassPatchDetector", "ClassesPlan"]


@dataclass(frozen=True)
class ClassesPlan:
    """Parameters of a patch run, fixed once for the whole raster.

    Attributes
    ----------
    bands : tuple of int
        The class band.
    pixel_size_m : float
        Ground pixel size.
    class_values : tuple of int
        Plant classes.
    min_area_px : float
        Smallest patch, pixels.
    split : bool
        Split touching crowns.
    h_px : float
        Depth of the distance-transform minima that separate crowns, pixels.
    """

    bands: tuple[int, ...]
    pixel_size_m: float
    class_values: tuple[int, ...] = field(default_factory=tuple)
    min_area_px: float = 1.0
    split: bool = True
    h_px: float = 1.0


def _classes_plan(info: RasterInfo, settings: DetectionSettings, bands):
    """(plan, overlap, align, thresholds, notes) of the patch detector."""
    ps = info.pixel_size_m
    name = raster_name(info)
    data, valid = decimated(info, bands, name)
    notes: list = []
    dmin_px, dmax_px = check_diameters(info, settings, notes)
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
    plan = ClassesPlan(
        bands=bands,
        pixel_size_m=ps,
        class_values=tuple(settings.classes),
        min_area_px=min_area / ps**2,
        split=settings.split_touching,
        h_px=max(1.0, 0.2 * dmin_px / 2.0),
    )
    overlap = math.ceil(1.5 * dmax_px) + 2
    check_tile_memory(name, settings, overlap, 1, 6, "the patch search")
    th = {"min_area_m2": min_area}
    return plan, overlap, 1, th, notes


class ClassPatchDetector(Detector):
    """Patches of plant classes (``--method classes``)."""

    name = "classes"
    method = "classes"
    auto_order = 2
    empty_columns = ("diameter_m", "area_m2")

    def fits(self, info: RasterInfo, settings: DetectionSettings) -> bool:
        """Plant class values are given."""
        return bool(settings.classes)

    def prepare(self, info, settings, bands, index, source):
        """Smallest patch and split depth from the diameters; the classes must occur."""
        plan, overlap, align, th, notes = _classes_plan(info, settings, bands)
        return Prepared(plan, overlap, align, th, notes, index)

    def run(self, window: TileWindow, plan: ClassesPlan) -> TilePoints:
        """Patches in one window, flagged when cut by a window side inside the raster."""
        c0, r0, c1, r1 = window.tile.window
        info = window.info
        cut = (r0 > 0, r1 < info.height, c0 > 0, c1 < info.width)
        found = class_patches(
            window.pop_data()[0],
            window.valid,
            plan.class_values,
            plan.min_area_px,
            split=plan.split,
            h_px=plan.h_px,
            cut_sides=cut,
        )
        columns = {
            "area_m2": found["area_px"] * plan.pixel_size_m**2,
            "class_value": found["class_value"].astype(float),
        }
        return TilePoints(
            found["col"] + c0, found["row"] + r0, columns, cut=np.asarray(found["edge"])
        )

    def empty_tile(self, plan: ClassesPlan) -> TilePoints:
        """No patches."""
        return TilePoints.empty(("area_m2", "class_value"))

    def finish(self, points: TilePoints, plan: ClassesPlan):
        """Equal-area diameters; a warning when patches may be cut at tile edges."""
        area = points.columns["area_m2"]
        attrs = {"diameter_m": disc_diameter_m(area), "area_m2": area}
        attrs["class_value"] = points.columns["class_value"].astype(np.int64)
        notes = []
        cut = int(points.cut.sum())
        if cut:
            notes.append(
                f"{cut} patch(es) are larger than the tile overlap and may be cut at tile "
                "edges; raise the largest --diameter"
            )
        return points, attrs, notes


DETECTOR = ClassPatchDetector()
