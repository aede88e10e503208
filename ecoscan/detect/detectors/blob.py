"""The ``imagery`` detector: crowns as blobs of a vegetation layer of an orthomosaic.

The layer and thresholds are chosen from the image (:mod:`.blob_auto`, which also switches
to the closed-canopy watershed split), or come from ``--index``, ``--threshold`` and
``--min-contrast`` with Otsu-based defaults (here). Each tile runs a scale-normalised blob
detector (Lindeberg 1998) on the layer; blobs of touching crowns are split and lobes of one
crown pruned once all tiles are in (:meth:`ImageryDetector.finish`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ecoscan.detect import below_range, blobs, canopy
from ecoscan.detect.detectors.base import (
    Detector,
    Prepared,
    TilePoints,
    TileWindow,
    check_diameters,
    check_tile_memory,
    decimated,
    no_plants,
    raster_name,
)
from ecoscan.detect.engine import compose_layer, vegetation_layer
from ecoscan.errors import InputError
from ecoscan.model.notes import WARNING, Note

if TYPE_CHECKING:
    from ecoscan.detect.settings import DetectionSettings
    from ecoscan.io.raster import RasterInfo

__all__ = [
    "LAYER_LABELS",
    "MIN_CANDIDATES",
    "PRUNE_MARGIN",
    "SPLIT_RATIO",
    "BlobPlan",
    "ImageryDetector",
    "auto_layer",
    "band_lookup",
]

#: Split a blob into two or more smaller ones inside it reaching this share of its response
#: (touching crowns). Tuned on benchmarks/tuning_scenes.py.
SPLIT_RATIO = 0.6

#: A blob whose centre is within this share of its radius of a stronger crown's edge (a lobe
#: or branch) is pruned with it. Tuned on benchmarks/tuning_scenes.py.
PRUNE_MARGIN = 0.5

#: Fewer clear candidates than this on the best layer: fall back to the classic Otsu split.
MIN_CANDIDATES = 10

#: Readable names of the detection layers.
LAYER_LABELS = {
    "exg": "Excess Green",
    "ndvi": "NDVI",
    "darkness": "darkness",
    "band": "the band values",
    "exg+darkness": "Excess Green + darkness",
    "ndvi+darkness": "NDVI + darkness",
    "chroma": "log-chromaticity (most structured axis)",
}

#: Columns of the tile tables.
TILE_COLUMNS = ("sigma_px", "score", "index_value")
#: Column marking the blobs of a second evidence layer (:mod:`ecoscan.detect.pale_crowns`).
SECOND = "second_layer"


@dataclass(frozen=True)
class BlobPlan:
    """Parameters of a blob run, fixed once for the whole raster (never per tile).

    Attributes
    ----------
    bands : tuple of int
        1-based bands read.
    pixel_size_m : float
        Ground pixel size.
    index : str
        ``exg``, ``ndvi``, ``darkness`` or ``band`` (when ``terms`` is empty).
    scales : BlobScales or None
        Scales searched.
    min_response, min_value, fill_value : float
        Response and vegetation thresholds, and the value given to invalid pixels.
    roles : tuple of str
        What each band read is (``red``, ``green``, ``blue``, ``nir``, ``band``).
    terms : tuple of (str, float)
        The detection layer as a weighted sum of base layers
        (:func:`ecoscan.detect.engine.compose_layer`); empty means
        ``vegetation_layer(data, index)``.
    split_ratio : float
        A blob is replaced by two or more smaller blobs inside it whose responses reach this
        fraction of its own (touching crowns of similar size); 0 disables.
    min_response_by_scale : tuple of float
        Response threshold per scale of ``scales.sigmas`` (overrides ``min_response`` when
        given).
    layer_model : callable or None
        Calibrated detectors (``ecoscan calibrate``): a picklable callable turning the band
        data into the plant layer, used instead of the layers above when set.
    canopy : CanopySplit or None
        Closed canopy (:mod:`ecoscan.detect.canopy`): crowns are then regions of a
        valley-following watershed instead of blobs.
    ring_mads : float or None
        Each blob must also stand out from its own ring of background by this many robust
        SDs of the ring (:func:`ecoscan.detect.blobs.ring_contrast`); None skips the test.
        Set by the image-chosen defaults on rough ground (threshold raised).
    shadow_dir : tuple of float or None
        Unit (column, row) vector in which cast shadows fall: each blob is moved to the
        sun-side end of its crown-plus-shadow region
        (:func:`ecoscan.detect.shadows.crown_ends`). Set by the image-chosen defaults when
        the blobs are joined to their shadows; None leaves blobs where they are.
    shadow_radius_max : float
        Largest crown radius in pixels, for the walk of ``shadow_dir``.
    strong : tuple of float or None
        Clear blobs below the centre-value threshold
        (:func:`ecoscan.detect.autotune.strong_test`).
    second : SecondLayer or None
        A second evidence layer whose blobs only add crowns the main layer lacks
        (:mod:`ecoscan.detect.pale_crowns`); None: the main layer alone.
    pale_band : PaleBand or None
        The main layer clipped to its pale band, whose crown blobs replace the lobe points
        of big pale crowns (:mod:`ecoscan.detect.clipped_crowns`); None: off.
    lobe_share : float or None
        Merged-pair parents whose centre value stands this share as high as their
        children's are one lobed crown and kept (:func:`ecoscan.detect.blobs.lobed_parents`);
        None: every merged pair is split.
    band_blur_px : float
        Gaussian σ (pixels) by which the bands are smoothed before log-chromaticities in
        ``terms`` (:func:`ecoscan.detect.chromaticity.log_chromaticity`); 0 for none.
    recentre : bool
        Move each blob to the middle of its crown on the layer
        (:func:`ecoscan.detect.chromaticity.recentre`); set with the log-chromaticity layer.
    ring_open : bool
        The ring test measures the ring's open sectors only and drops shoulders
        (:func:`ecoscan.detect.chromaticity.open_ring_contrast`); set with the
        log-chromaticity layer.
    below : BelowRange or None
        Isolated small crowns searched one scale below the stated range
        (:mod:`ecoscan.detect.below_range`); None: the stated range only.
    """

    bands: tuple[int, ...]
    pixel_size_m: float
    index: str = "exg"
    scales: blobs.BlobScales | None = None
    min_response: float = 0.0
    min_value: float = -np.inf
    fill_value: float = 0.0
    roles: tuple[str, ...] = ()
    terms: tuple[tuple[str, float], ...] = ()
    split_ratio: float = 0.0
    min_response_by_scale: tuple[float, ...] = ()
    layer_model: object = None
    canopy: object = None
    ring_mads: float | None = None
    shadow_dir: tuple[float, float] | None = None
    shadow_radius_max: float = 0.0
    strong: tuple[float, float] | None = None
    second: object = None
    lobe_share: float | None = None
    pale_band: object = None
    band_blur_px: float = 0.0
    recentre: bool = False
    ring_open: bool = False
    below: object = None


def auto_layer(settings: DetectionSettings) -> bool:
    """True when the imagery layer and thresholds are chosen from the image."""
    return settings.index == "auto" and settings.threshold is None and settings.min_contrast is None


def band_lookup(info: RasterInfo, settings: DetectionSettings) -> dict[str, int]:
    """Band of each role (red, green, blue, nir) from --bands, names or colour interpretation."""
    spec = dict(settings.band_spec)
    names_in_file = {d: i for d, i in zip(info.descriptions, info.data_bands, strict=True) if d}
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
    return lookup


def _index_bands(index: str, lookup: dict[str, int], spec: dict, info: RasterInfo):
    """The bands a named vegetation layer needs."""
    if index == "ndvi":
        if not ("red" in lookup and "nir" in lookup):
            raise InputError(
                "NDVI needs the red and near-infrared bands; name them, e.g. --bands red=3,nir=4"
            )
        return (lookup["red"], lookup["nir"])
    if index == "darkness":
        rgb = tuple(lookup[k] for k in ("red", "green", "blue") if k in lookup)
        return rgb or (next(iter(spec.values()), info.data_bands[0]),)
    if index == "exg":
        if not all(k in lookup for k in ("red", "green", "blue")):
            raise InputError(
                "Excess Green needs red, green and blue bands; give them with --bands 1,2,3"
            )
        return (lookup["red"], lookup["green"], lookup["blue"])
    return (next(iter(spec.values()), info.data_bands[0]),)


def _otsu_plan(info, settings, bands, index, scales, overlap, data, valid, fallback, notes):
    """The classic path: Otsu's split of the decimated layer, or the thresholds given."""
    from skimage.filters import threshold_otsu

    layer = vegetation_layer(data, index)[valid]
    if float(np.ptp(layer)) == 0.0:
        flat = no_plants("the vegetation layer is constant: no plants found")
        return None, 0, 1, {}, [*notes, flat]
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
    plan = BlobPlan(
        bands=bands,
        pixel_size_m=info.pixel_size_m,
        index=index,
        scales=scales,
        min_response=blobs.DISC_RESPONSE * contrast,
        min_value=t,
        fill_value=lo,
        split_ratio=SPLIT_RATIO if settings.split_touching else 0.0,
    )
    how = "given" if settings.threshold is not None else "Otsu on the whole raster"
    if fallback:
        how += " (fallback: nothing stood out from the background)"
    notes.append(f"vegetation threshold {t:.4g} ({how}); smallest crown contrast {contrast:.4g}")
    th = {
        "layer": index,
        "layer_chosen_by": (
            "fallback to the classic index"
            if fallback
            else "given (--index, --threshold or --min-contrast)"
        ),
        "weak_separation": bool(fallback),
        "vegetation_threshold": t,
        "vegetation_threshold_from": how,
        "min_contrast": contrast,
        "min_contrast_from": (
            "given" if settings.min_contrast is not None else "half the Otsu class gap"
        ),
        "background": lo,
    }
    return plan, overlap, scales.align, th, notes


def _weak_separation_fallback() -> Note:
    return Note(
        "weak separation: no layer showed at least "
        f"{MIN_CANDIDATES} clear plant candidates in the sample windows; fell back to "
        "Otsu's split of the whole raster; calibrate a detector on mapped plants "
        "(ecoscan calibrate) or set --threshold, and check with ecoscan validate",
        "weak-separation",
        WARNING,
    )


def _imagery_plan(info: RasterInfo, settings: DetectionSettings, bands, index):
    """(plan, overlap, align, thresholds, notes) of the imagery detector."""
    from ecoscan.io.raster import all_pixels_valid

    name = raster_name(info)
    if auto_layer(settings) and all_pixels_valid(info, info.data_bands):
        # the automatic layer choice reads its own windows: the decimated whole raster is
        # read only if it falls back to Otsu (no pixel can be nodata here)
        data = valid = None
    else:
        data, valid = decimated(info, bands, name)
    notes: list = []
    dmin_px, dmax_px = check_diameters(info, settings, notes)
    scales = blobs.blob_scales(dmin_px / 2.0, dmax_px / 2.0, settings.scales_per_octave)
    overlap = max(scales.support_px, math.ceil(dmax_px))
    check_tile_memory(
        name, settings, overlap, len(bands) + 1, 2 * (scales.sigmas.size + 2), "the blob filter"
    )
    fallback = None
    if auto_layer(settings):
        from ecoscan.detect.detectors.blob_auto import auto_imagery

        auto = auto_imagery(info, settings, bands, scales, overlap, dmax_px, notes)
        if auto is not None:
            return below_range.plan_below(auto)
        fallback = _weak_separation_fallback()
        notes.append(fallback)
    if data is None:
        data, valid = decimated(info, bands, name)
    return _otsu_plan(info, settings, bands, index, scales, overlap, data, valid, fallback, notes)


def _crown_ends(layer, col, row, sigma, origin, plan: BlobPlan):
    """Blobs moved to the sun-side ends of their crown-plus-shadow regions (raster pixels)."""
    from ecoscan.detect.shadows import crown_ends

    c, r = crown_ends(
        layer,
        col - origin[0],
        row - origin[1],
        math.sqrt(2.0) * sigma,
        np.asarray(plan.shadow_dir),
        plan.fill_value,
        plan.shadow_radius_max,
    )
    return c + origin[0], r + origin[1]


def _canopy_points(
    window: TileWindow,
    layer: np.ndarray,
    cs,
    tint: np.ndarray | None = None,
    edges: np.ndarray | None = None,
) -> TilePoints:
    """Closed canopy: crowns as watershed regions (:func:`ecoscan.detect.canopy.split_crowns`)."""
    found = canopy.split_crowns(
        layer,
        cs.r_min_px,
        cs.h,
        smooth_px=cs.smooth_px,
        min_area_px=cs.min_area_px,
        valid=window.valid,
        origin=window.origin,
        min_peak=cs.min_peak,
        max_area_px=cs.max_area_px,
        lean=(cs.lean_col, cs.lean_row),
        tint=tint,
        crown_join=cs.crown_join,
        edges=edges,
        edge_gain=cs.edge_gain,
    )
    return TilePoints(
        np.asarray(found["col"], float),
        np.asarray(found["row"], float),
        {
            # the radius of the region's equal-area disc, as a blob scale (r = sqrt(2) sigma)
            "sigma_px": np.asarray(np.sqrt(found["area_px"] / np.pi) / np.sqrt(2.0), float),
            "score": np.asarray(found["prominence"], float),
            "index_value": np.asarray(found["peak"], float),
        },
    )


class ImageryDetector(Detector):
    """Blobs of a vegetation layer (``--method imagery``), with the closed-canopy variant."""

    name = "imagery"
    method = "imagery"
    auto_order = 0
    empty_columns = ("diameter_m", "score")

    def fits(self, info: RasterInfo, settings: DetectionSettings) -> bool:
        """Three or more bands, or two or more named with ``--bands``."""
        spec = dict(settings.band_spec)
        return len(spec) >= 2 or (not spec and info.count >= 3)

    def choose_bands(self, info, settings):
        """Bands and vegetation layer from ``--index`` and the band roles."""
        notes: list[str] = []
        lookup = band_lookup(info, settings)
        index = settings.index
        if index == "auto":
            if "red" in lookup and "nir" in lookup:
                index = "ndvi"
            elif all(k in lookup for k in ("red", "green", "blue")):
                index = "exg"
            else:
                index = "band"
        bands = _index_bands(index, lookup, dict(settings.band_spec), info)
        if not auto_layer(settings):
            label = LAYER_LABELS[index]
            notes.append(f"vegetation layer: {label} from band(s) {', '.join(map(str, bands))}")
        return bands, index, notes

    def prepare(self, info, settings, bands, index, source):
        """Layer, thresholds and scales from the image or the settings."""
        plan, overlap, align, th, notes = _imagery_plan(info, settings, bands, index)
        return Prepared(plan, overlap, align, th, notes, th.get("layer") or index)

    def run(self, window: TileWindow, plan: BlobPlan) -> TilePoints:
        """Blobs (or closed-canopy crowns) of the plan's layer in one window."""
        data = window.pop_data()
        joins = plan.canopy is not None and plan.canopy.merge
        tint = canopy.canopy_tint(data, plan.roles) if joins else None
        cs = plan.canopy
        # colour edges as valleys (shaded domes only; canopy.colour_edges)
        edges = canopy.colour_edges(data, plan.roles, cs.edge_px) if cs and cs.edge_gain else None
        if plan.canopy is not None and plan.canopy.layer == "brightness":
            layer = canopy.canopy_layer(data, plan.roles)
        elif plan.layer_model is not None:  # calibrated detector (ecoscan.detect.pixel_model)
            layer = plan.layer_model(data)
        elif plan.terms:
            layer = compose_layer(data, plan.roles, plan.terms, plan.band_blur_px)
        else:
            layer = vegetation_layer(data, plan.index)
        valid = window.valid
        if not valid.all():
            layer[~valid] = plan.fill_value
        extra = None
        if plan.second is not None or plan.pale_band is not None:  # pale crowns
            extra = _pale_blobs(data, layer, plan, valid, window.origin)
        del data
        if plan.canopy is not None:
            return _canopy_points(window, layer, plan.canopy, tint, edges)
        found = blobs.detect_blobs(
            layer,
            plan.scales,
            np.asarray(plan.min_response_by_scale)
            if plan.min_response_by_scale
            else plan.min_response,
            plan.min_value,
            valid,
            origin=window.origin,
            background=plan.fill_value,
            ring_mads=plan.ring_mads,
            strong=plan.strong,
            ring_open=plan.ring_open,
        )
        columns = {"sigma_px": found["sigma"], "score": found["response"]}
        columns["index_value"] = found["value"]
        col, row = found["col"], found["row"]
        if plan.shadow_dir is not None:  # crowns joined to their shadows (detect/shadows.py)
            col, row = _crown_ends(layer, col, row, found["sigma"], window.origin, plan)
        if plan.recentre:  # log-chromaticity layer: points to the crowns' middles
            from ecoscan.detect.chromaticity import recentre

            radii = math.sqrt(2.0) * found["sigma"]
            col, row = recentre(layer, col, row, radii, plan.fill_value, window.origin)
        if extra is not None:  # second-layer blobs, marked; kept or not in finish()
            columns = {
                "sigma_px": np.concatenate([found["sigma"], extra["sigma"]]),
                "score": np.concatenate([found["response"], extra["response"]]),
                "index_value": np.concatenate([found["value"], extra["value"]]),
                SECOND: np.concatenate([np.zeros(col.size), extra["kind"]]),
            }
            col = np.concatenate([col, extra["col"]])
            row = np.concatenate([row, extra["row"]])
        if plan.below is not None:  # small crowns one scale below the range (below_range.py)
            col, row, columns = below_range.add_below(
                layer, plan, valid, window.origin, col, row, columns
            )
        return TilePoints(col, row, columns)

    def empty_tile(self, plan: BlobPlan) -> TilePoints:
        """No blobs."""
        marked = plan.second is not None or plan.pale_band is not None
        more = ((SECOND,) if marked else ()) + (
            (below_range.BELOW,) if plan.below is not None else ()
        )
        return TilePoints.empty(TILE_COLUMNS + more)

    def reads_together(self, plan: BlobPlan) -> bool:
        """The blob layers chosen from the image (not closed canopy's watershed, nor a
        calibrated detector's own plan): every step reaches at most the plan's overlap, so
        the plants in a core are those of the whole image whatever the window
        (``tests/test_detect_tile_groups.py``)."""
        return type(plan) is BlobPlan and plan.canopy is None and plan.layer_model is None

    def finish(self, points: TilePoints, plan: BlobPlan):
        """Split blobs of touching crowns, prune lobes, then diameters in metres."""
        added, notes = None, []
        points, below = below_range.split_off(points)
        if SECOND in points.columns:  # second-layer blobs apart from the main layer's
            is_second = points.columns[SECOND] > 0
            added = points.take(is_second)
            points = points.take(~is_second)
            points.columns.pop(SECOND)
        c = points.columns
        radius = math.sqrt(2.0) * c["sigma_px"]
        if plan.split_ratio > 0 and plan.canopy is None:
            merged = blobs.split_merged(
                points.col, points.row, radius, c["score"], plan.split_ratio
            )
            if plan.lobe_share is not None and merged.any():  # one lobed crown, kept
                merged &= ~blobs.lobed_parents(
                    points.col,
                    points.row,
                    radius,
                    c["score"],
                    c["index_value"],
                    plan.fill_value,
                    merged,
                    plan.split_ratio,
                    plan.lobe_share,
                )
            points = points.take(~merged)
            radius = radius[~merged]
        if plan.canopy is None:  # watershed regions are disjoint: nothing to prune
            keep = blobs.prune_blobs(
                points.col,
                points.row,
                radius,
                points.columns["score"],
                margin=PRUNE_MARGIN if plan.split_ratio > 0 else 0.0,
            )
            points = points.take(keep)
        if added is not None:
            points, note = _with_second(points, added, plan)
            notes += [note] if note else []
        if below is not None:  # isolated small crowns below the range (below_range.py)
            points, note = below_range.add_isolated(points, below, plan.below.sigma_reported)
            notes.append(note)
        c = points.columns
        attrs = {"diameter_m": 2.0 * math.sqrt(2.0) * c["sigma_px"] * plan.pixel_size_m}
        attrs["score"] = c["score"]
        attrs["index_value"] = c["index_value"]
        return points, attrs, notes


def _pale_blobs(data, layer: np.ndarray, plan: BlobPlan, valid, origin) -> dict:
    """The GRVI second layer's blobs (``kind`` 1; :mod:`ecoscan.detect.pale_crowns`)
    followed by the clipped main layer's crown blobs (``kind`` 2;
    :mod:`ecoscan.detect.clipped_crowns`), one dict; each part where its plan is set."""
    from ecoscan.detect.clipped_crowns import crown_blobs
    from ecoscan.detect.pale_crowns import find_second

    parts = []
    if plan.second is not None:
        grvi = find_second(data, layer, plan.roles, plan.second, plan.scales, valid, origin)
        parts.append(dict(grvi, kind=np.ones(grvi["col"].size)))
    band = plan.pale_band
    if band is not None:
        crowns = crown_blobs(
            layer, (band.low, band.high), band.min_response, plan.scales, valid, origin
        )
        parts.append(dict(crowns, kind=np.full(crowns["col"].size, 2.0)))
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def _with_second(points: TilePoints, added: TilePoints, plan: BlobPlan) -> tuple[TilePoints, str]:
    """The main layer's crowns plus the second layer's blobs clear of them, then big pale
    crowns placed whole by the clipped main layer's blobs (one note)."""
    from ecoscan.detect.pale_crowns import added_points, whole_crowns

    kind = added.columns.pop(SECOND)
    crowns = added.take(kind == 2)
    added = added.take(kind == 1)
    if plan.second is None:  # GRVI off: only the clipped layer's crowns
        points, n_clip = _pale_crowns_whole(points, crowns, plan.pale_band, points.n)
        return points, _clip_note(n_clip)
    n_main = points.n
    root2 = math.sqrt(2.0)
    # big dry crowns whose Excess Green points are lobes: the GRVI blob replaces them
    drop, take = whole_crowns(
        points.col,
        points.row,
        root2 * points.columns["sigma_px"],
        points.columns["score"],
        added.col,
        added.row,
        root2 * added.columns["sigma_px"],
        added.columns["score"],
    )
    n_whole = int(take.sum())
    n_main -= int(drop.sum())
    if n_whole:
        points = TilePoints.concat([points.take(~drop), added.take(take)])
        added = added.take(~take)
    keep = added_points(
        points.col,
        points.row,
        root2 * points.columns["sigma_px"],
        added.col,
        added.row,
        root2 * added.columns["sigma_px"],
        added.columns["score"],
    )
    n = int(keep.sum())
    whole = (
        f"; {n_whole} big crown(s) placed at the GRVI blob's centre instead of at the "
        "Excess Green lobes found on it"
        if n_whole
        else ""
    )
    if n == 0:
        note = (
            "the green-red index (GRVI) was searched for pale or grey crowns that Excess "
            "Green missed: none found clear of the Excess Green crowns and their shadows" + whole
        )
    else:
        note = (
            f"{n} crown(s) added from the green-red index (GRVI) where Excess Green showed "
            "none (pale or grey crowns; their index_value is GRVI)" + whole
        )
        points = TilePoints.concat([points, added.take(keep)])
    points, n_clip = _pale_crowns_whole(points, crowns, plan.pale_band, n_main)
    return points, note + ("; " + _clip_note(n_clip) if n_clip else "")


def _clip_note(n_clip: int) -> str:
    """The note of :func:`_pale_crowns_whole` (empty when no crown was placed so)."""
    if not n_clip:
        return ""
    return (
        f"{n_clip} pale crown(s) placed whole from Excess Green clipped to its pale band, "
        "instead of at lobes found on them"
    )


def _pale_crowns_whole(
    points: TilePoints, crowns: TilePoints, band, n_main: int
) -> tuple[TilePoints, int]:
    """Pale lobe points replaced by the clipped main layer's crown blobs
    (:func:`ecoscan.detect.clipped_crowns.crown_points`). The first ``n_main`` points are
    the main layer's; the rest were placed by the GRVI second layer (pale by construction).
    A new point keeps the score and ``index_value`` of the strongest point it replaces."""
    from ecoscan.detect.clipped_crowns import crown_points

    if band is None or crowns.n == 0 or points.n == 0:
        return points, 0
    root2 = math.sqrt(2.0)
    c = points.columns
    pale = (c["index_value"] <= band.pale_value) | (np.arange(points.n) >= n_main)
    drop, take, by = crown_points(
        points.col,
        points.row,
        root2 * c["sigma_px"],
        pale,
        crowns.col,
        crowns.row,
        root2 * crowns.columns["sigma_px"],
        crowns.columns["score"],
    )
    if not take.any():
        return points, 0
    new = crowns.take(take)
    # the strongest replaced point of each taking blob: its score and index_value
    gone = np.flatnonzero(drop)
    to = (np.cumsum(take) - 1)[by[gone]]  # the new point each replaced point goes to
    order = np.lexsort((c["score"][gone], to))  # by new point, then by ascending score
    gone, to = gone[order], to[order]
    last = np.append(to[1:] != to[:-1], True)  # the strongest of each new point's group
    best = np.full(new.n, -1, dtype=np.intp)
    best[to[last]] = gone[last]
    new.columns["score"] = c["score"][best]
    new.columns["index_value"] = c["index_value"][best]
    return TilePoints.concat([points.take(~drop), new]), int(take.sum())


DETECTOR = ImageryDetector()
