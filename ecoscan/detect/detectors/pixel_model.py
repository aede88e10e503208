"""The calibrated detector: blobs of a plant layer learnt by ``ecoscan calibrate``.

The detector file (:mod:`ecoscan.detect.detector_file`) fixes the layer (a simple layer or
a pixel classifier's plant probability, :mod:`ecoscan.detect.pixel_model`), the thresholds
and the crown range; tiles then run as the ``imagery`` detector's blobs (or its watershed
crown split when the file asks for one), or, for a crown-centre map, as the peaks of the
map (:mod:`ecoscan.detect.centres`). Chosen by ``--detector FILE``, never by ``--method``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.detect.centres import CentrePeaks
from ecoscan.detect.detectors.base import Prepared, TilePoints
from ecoscan.detect.detectors.blob import BlobPlan, ImageryDetector

if TYPE_CHECKING:
    from ecoscan.detect.detector_file import CalibratedDetector
    from ecoscan.detect.settings import DetectionSettings

__all__ = ["CalibratedBlobDetector", "CentrePlan", "calibrated_plan"]


@dataclass(frozen=True)
class CentrePlan(BlobPlan):
    """A blob plan whose tiles give the peaks of a crown-centre map instead of blobs.

    Attributes
    ----------
    peaks : CentrePeaks or None
        The peak search (pixels).
    diameter_px : float
        Crown diameter written for every point (the median calibrated diameter), pixels.
    """

    peaks: CentrePeaks | None = None
    diameter_px: float = 0.0


def _crown_split(det: CalibratedDetector, r_min: float, r_max: float):
    """The watershed crown split the detector file asks for."""
    from ecoscan.detect.canopy import CanopySplit

    return CanopySplit(
        r_min_px=r_min,
        r_max_px=r_max,
        smooth_px=det.split["smooth_share"] * r_min,
        h=det.split["h"],
        min_area_px=det.split["min_area_share"] * math.pi * r_min**2,
        layer="given",
        min_peak=det.split["min_peak"],
        merge=bool(det.split.get("join_fragments", False)),
    )


def calibrated_plan(det: CalibratedDetector, info, raster_name: str):
    """The plan for a raster from a calibrated detector.

    Parameters
    ----------
    det : CalibratedDetector
        With its model loaded for a classifier.
    info : ecoscan.io.raster.RasterInfo
    raster_name : str
        As the user wrote it, for messages.

    Returns
    -------
    plan : BlobPlan
    overlap : int
        Tile overlap in pixels (blob support plus the classifier's feature reach).
    align : int
        Tile alignment.
    thresholds : dict
        For the detection metadata.
    notes : list of str

    Raises
    ------
    InputError
        From :func:`ecoscan.detect.detector_file.check_raster`.
    """
    from ecoscan.detect.blobs import blob_scales
    from ecoscan.detect.detector_file import check_raster

    notes = check_raster(det, raster_name, info)
    ps = info.pixel_size_m
    dmin_px, dmax_px = det.diameter_min_m / ps, det.diameter_max_m / ps
    scales = blob_scales(dmin_px / 2.0, dmax_px / 2.0, det.scales_per_octave)
    layer = det.plant_layer()
    plan = BlobPlan(
        bands=tuple(info.data_bands),
        pixel_size_m=ps,
        index=f"calibrated:{det.layer}",
        scales=scales,
        min_response=det.min_response,
        min_value=det.min_value,
        fill_value=det.background,
        layer_model=layer,
    )
    overlap = max(scales.support_px, math.ceil(dmax_px)) + layer.halo_px
    thresholds = {
        "detector_file": Path(det.source).name,
        "layer": det.layer,
        "min_response": det.min_response,
        "min_value": det.min_value,
        "background": det.background,
        "how": "calibrated from mapped plants",
    }
    if det.centres:  # peaks of the crown-centre map
        r_min = dmin_px / 2.0
        peaks = CentrePeaks(
            min_distance_px=det.centres["distance_share"] * r_min,
            smooth_px=det.centres["smooth_share"] * r_min,
            min_peak=det.centres["min_peak"],
        )
        plan = CentrePlan(
            **{f: getattr(plan, f) for f in BlobPlan.__dataclass_fields__},
            peaks=peaks,
            diameter_px=det.centres["crown_diameter_m"] / ps,
        )
        overlap = peaks.reach_px + layer.halo_px
        thresholds["centres"] = dict(det.centres)
    elif det.split:  # closed canopy: watershed crown split of the calibrated layer
        split = _crown_split(det, dmin_px / 2.0, dmax_px / 2.0)
        plan = replace(plan, canopy=split, roles=tuple(det.band_names))
        overlap = max(overlap, split.overlap_px + layer.halo_px)
        thresholds["crown_split"] = dict(det.split)
    return plan, overlap, scales.align, thresholds, notes


class CalibratedBlobDetector(ImageryDetector):
    """Blobs of a calibrated plant layer (``--detector FILE``); tiles run as ``imagery``."""

    name = "calibrated"
    method = "imagery"
    auto_order = None
    on_method = False

    def overrides(self, settings: DetectionSettings) -> bool:
        """A detector file is given."""
        return bool(settings.detector)

    def prepare(self, info, settings, bands, index, source):
        """Read the detector file and check the raster against it."""
        from ecoscan.detect.detector_file import read_detector

        det = read_detector(settings.detector)
        plan, overlap, align, th, notes = calibrated_plan(det, info, source)
        return Prepared(plan, overlap, align, th, notes, f"calibrated:{det.layer}")

    def run(self, window, plan):
        """Peaks of the centre map in one window, or the imagery detector's tile."""
        if not isinstance(plan, CentrePlan):
            return super().run(window, plan)
        layer = plan.layer_model(window.pop_data())
        valid = window.valid
        if not valid.all():
            layer[~valid] = 0.0
        found = plan.peaks(layer, valid, window.origin)
        n = found["col"].size
        return TilePoints(
            found["col"],
            found["row"],
            {
                "sigma_px": np.full(n, plan.diameter_px / (2.0 * math.sqrt(2.0))),
                "score": found["peak"],
                "index_value": found["peak"],
            },
        )

    def finish(self, points, plan):
        """Centre-map peaks are final (each is the highest within its disc); otherwise the
        imagery detector's pruning."""
        if not isinstance(plan, CentrePlan):
            return super().finish(points, plan)
        c = points.columns
        attrs = {
            "diameter_m": 2.0 * math.sqrt(2.0) * c["sigma_px"] * plan.pixel_size_m,
            "score": c["score"],
            "index_value": c["index_value"],
        }
        return points, attrs, []


DETECTOR = CalibratedBlobDetector()
