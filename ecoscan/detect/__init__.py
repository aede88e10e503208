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

from ecoscan.detect.blobs import DISC_RESPONSE, blob_scales, prune_blobs, split_merged
from ecoscan.detect.engine import DetectorParams, TileJob, run_tile, vegetation_layer
from ecoscan.detect.settings import CROWN_RULES, DetectionSettings, parse_band_spec
from ecoscan.detect.tiling import EarlyPool, Tile, plan_tiles, run_plan
from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, to_metric, transform_xy
from ecoscan.io.raster import (
    RasterInfo,
    all_pixels_valid,
    open_raster,
    pixel_to_map,
    read_decimated,
)
from ecoscan.model.notes import CAUTION, FIELD_CHECK, WARNING, Note, is_warning
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
}

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
        if th.get("weak_separation"):
            text += "; weak separation: check by eye or calibrate"
        return text
    if method == "chm":
        return f"chm detector; lowest tree top {th.get('min_height_m', float('nan')):g} m"
    if method == "classes":
        return f"classes detector; smallest patch {th.get('min_area_m2', float('nan')):.3g} m²"
    return f"{method} detector"


def _no_plants(text: str) -> Note:
    """A warning that the raster cannot hold any plant (constant layer, too low heights)."""
    return Note(text, "no-plants", WARNING)


def _band_error(info: RasterInfo, idx: int) -> InputError:
    return InputError(
        f"band {idx} is out of range: {Path(info.path).name} has data bands "
        f"{', '.join(map(str, info.data_bands))}; choose one of them with --bands"
    )


def _band_lookup(info: RasterInfo, settings: DetectionSettings) -> dict[str, int]:
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


def _auto_layer(settings: DetectionSettings) -> bool:
    """True when the imagery layer and thresholds are chosen from the image."""
    return settings.index == "auto" and settings.threshold is None and settings.min_contrast is None


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
    lookup = _band_lookup(info, settings)
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
    elif index == "darkness":
        rgb = tuple(lookup[k] for k in ("red", "green", "blue") if k in lookup)
        bands = rgb or (next(iter(spec.values()), info.data_bands[0]),)
    elif index == "exg":
        if not all(k in lookup for k in ("red", "green", "blue")):
            raise InputError(
                "Excess Green needs red, green and blue bands; give them with --bands 1,2,3"
            )
        bands = (lookup["red"], lookup["green"], lookup["blue"])
    else:
        bands = (next(iter(spec.values()), info.data_bands[0]),)
    label = LAYER_LABELS[index]
    if not _auto_layer(settings):
        notes.append(f"vegetation layer: {label} from band(s) {', '.join(map(str, bands))}")
    return method, bands, index, notes


def _decimated(info: RasterInfo, bands, name: str):
    """The whole raster decimated (:func:`read_decimated`); refuses an all-nodata raster."""
    data, valid = read_decimated(info, bands)
    if not valid.any():
        raise InputError(
            f"{name} is entirely nodata (every pixel is masked); check the file and its "
            "nodata value"
        )
    return data, valid


def _global_params(
    info: RasterInfo, settings: DetectionSettings, method: str, bands, index
) -> tuple[DetectorParams | None, int, int, dict, list[str]]:
    """Thresholds and scales from the whole raster (decimated), never per tile."""
    ps = info.pixel_size_m
    name = Path(info.path).name
    if method == "imagery" and _auto_layer(settings) and all_pixels_valid(info, info.data_bands):
        # the automatic layer choice reads its own windows: the decimated whole raster is
        # read only if it falls back to Otsu (no pixel can be nodata here)
        data = valid = None
    else:
        data, valid = _decimated(info, bands, name)
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
                Note(
                    f"the smallest crowns are only {dmin_px:.1f} pixels across; detection of "
                    "crowns under about 3 pixels is unreliable",
                    "small-crowns",
                    WARNING,
                )
            )
        if dmax_px > MAX_REACH_PX:
            raise InputError(
                f"the largest diameter {settings.diameter_max_m:g} m is {dmax_px:.0f} pixels at "
                f"{ps:.3g} m pixels (at most {MAX_REACH_PX}); check --diameter (metres) and the "
                "pixel size"
            )
        if dmax_px > 0.5 * min(info.width, info.height):
            notes.append(
                f"the largest diameter ({dmax_px:.0f} pixels) is more than half the raster; "
                "check --diameter"
            )
    if method == "imagery":
        scales = blob_scales(dmin_px / 2.0, dmax_px / 2.0, settings.scales_per_octave)
        overlap = max(scales.support_px, math.ceil(dmax_px))
        _check_tile_memory(
            name, settings, overlap, len(bands) + 1, 2 * (scales.sigmas.size + 2), "the blob filter"
        )
        fallback = ""
        if _auto_layer(settings):
            auto = _auto_imagery(info, settings, bands, scales, overlap, dmax_px, notes)
            if auto is not None:
                return auto
            fallback = Note(
                "weak separation: no layer showed at least "
                f"{MIN_CANDIDATES} clear plant candidates in the sample windows; fell back to "
                "Otsu's split of the whole raster; calibrate a detector on mapped plants "
                "(ecoscan calibrate) or set --threshold, and check with ecoscan validate",
                "weak-separation",
                WARNING,
            )
            notes.append(fallback)
        from skimage.filters import threshold_otsu

        if data is None:
            data, valid = _decimated(info, bands, name)
        layer = vegetation_layer(data, index)[valid]
        if float(np.ptp(layer)) == 0.0:
            flat = _no_plants("the vegetation layer is constant: no plants found")
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
        params = DetectorParams(
            method="imagery",
            bands=bands,
            pixel_size_m=ps,
            index=index,
            scales=scales,
            min_response=DISC_RESPONSE * contrast,
            min_value=t,
            fill_value=lo,
            split_ratio=SPLIT_RATIO if settings.split_touching else 0.0,
        )
        how = "given" if settings.threshold is not None else "Otsu on the whole raster"
        if fallback:
            how += " (fallback: nothing stood out from the background)"
        notes.append(
            f"vegetation threshold {t:.4g} ({how}); smallest crown contrast {contrast:.4g}"
        )
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
        return params, overlap, scales.align, th, notes
    if method == "chm":
        hmax = _chm_height_check(name, data[0][valid])
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
        if cap_px > MAX_REACH_PX // 2 or smooth_px > MAX_REACH_PX // 8:
            raise InputError(
                f"at {ps:g} m pixels the crown search window of a {hcap:.0f} m tree is "
                f"{2 * cap_px} pixels across (smoothing {smooth_px:.0f} pixels): too large to "
                "process; check the pixel size and that heights are in metres"
            )
        overlap = 2 * cap_px + math.ceil(3 * smooth_px) + 2
        _check_tile_memory(name, settings, overlap, 1, 4, "the crown search window")
        if hmax < settings.min_height_m:
            notes.append(
                _no_plants(
                    f"the highest pixel ({hmax:.3g}) is below --min-height "
                    f"{settings.min_height_m:g}: no trees can be found"
                )
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
    _check_tile_memory(name, settings, overlap, 1, 6, "the patch search")
    th = {"min_area_m2": min_area}
    return params, overlap, 1, th, notes


#: Pixels read at full resolution to choose the layer and thresholds (sample windows).
SAMPLE_BUDGET_PX = 1_600_000


def _sample_windows(info: RasterInfo, bands: tuple[int, ...], scales, dmax_px: float):
    """Full-resolution windows spread over the raster, for layer and threshold statistics.

    The whole raster when it is small; otherwise up to 16 windows on a regular grid whose
    cores total about :data:`SAMPLE_BUDGET_PX` pixels, each read with a margin of the
    filters' reach so that its candidates are those of a whole-image run.
    """
    from ecoscan.detect.autotune import SampleWindow
    from ecoscan.io.raster import read_window

    margin = scales.support_px
    w, h = info.width, info.height
    if w * h <= SAMPLE_BUDGET_PX:
        data, valid = read_window(info, bands, (0, 0, w, h))
        return [SampleWindow(data, valid, (slice(0, h), slice(0, w)))]
    side = int(min(max(384, 6 * dmax_px), w, h))
    n = int(np.clip(SAMPLE_BUDGET_PX // (side * side), 1, 16))
    per = math.ceil(math.sqrt(n))
    out = []
    for gy in range(per):
        for gx in range(per):
            cy = int((gy + 0.5) * h / per)
            cx = int((gx + 0.5) * w / per)
            c0 = int(np.clip(cx - side // 2, 0, w - side))
            r0 = int(np.clip(cy - side // 2, 0, h - side))
            win = (
                max(0, c0 - margin),
                max(0, r0 - margin),
                min(w, c0 + side + margin),
                min(h, r0 + side + margin),
            )
            data, valid = read_window(info, bands, win)
            core = (slice(r0 - win[1], r0 - win[1] + side), slice(c0 - win[0], c0 - win[0] + side))
            if valid[core].mean() > 0.2:
                out.append(SampleWindow(data, valid, core))
    if not out:  # mostly nodata: take the whole raster decimated would lose crowns; use any
        data, valid = read_window(info, bands, (0, 0, min(w, 2 * side), min(h, 2 * side)))
        out.append(SampleWindow(data, valid, (slice(0, data.shape[1]), slice(0, data.shape[2]))))
    return out


def _closed_canopy(info, settings, windows, roles, abands, scales, overlap, notes, seen=None):
    """The closed-canopy path (:mod:`ecoscan.detect.canopy`) when the switch rule fires.

    ``seen`` (a dict), when given, receives the rule's figures whether it fires or not.
    """
    from ecoscan.detect import canopy

    ps = info.pixel_size_m
    r_min, r_max = settings.diameter_min_m / 2 / ps, settings.diameter_max_m / 2 / ps
    datas = [w.data[:, w.core[0], w.core[1]] for w in windows]
    valids = [w.valid[w.core] for w in windows]
    evidence = canopy.canopy_evidence(datas, valids, roles, r_min, r_max)
    if seen is not None:
        # NaN without colour bands: nothing measured, nothing recorded
        seen.update({f"canopy_{k}": v for k, v in evidence.items() if math.isfinite(v)})
    if not canopy.is_closed_canopy(evidence):
        return None
    layers = [canopy.canopy_layer(w.data, roles) for w in windows]
    split = canopy.canopy_split(
        [lay[w.core] for lay, w in zip(layers, windows, strict=True)], valids, r_min, r_max
    )
    params = DetectorParams(
        method="imagery",
        bands=abands,
        pixel_size_m=ps,
        index="canopy",
        scales=scales,
        fill_value=0.0,
        roles=roles,
        canopy=split,
    )
    notes.append(
        f"closed canopy ({100 * evidence['green_share']:.0f}% of the sampled pixels green, "
        f"brightness and greenness correlated {evidence['bright_green_corr']:+.2f}): crowns "
        "split along the dark valleys between them (watershed of smoothed brightness)"
    )
    notes.append(
        Note(
            "closed-canopy counts are unreliable (about two thirds of the crowns found on the "
            "scene suite, big crowns sometimes counted twice): calibrate a detector on mapped "
            "crowns (ecoscan calibrate) and check with ecoscan validate",
            "closed-canopy-unreliable",
            WARNING,
        )
    )
    th = {
        "layer": "canopy",
        "layer_bands": list(abands),
        "layer_roles": list(roles),
        "layer_chosen_by": (
            "closed-canopy rule on sample windows: green share (chromatic Excess Green > "
            f"{canopy.GREEN_EXG:g}) >= {canopy.CLOSED_GREEN_SHARE:g} and brightness-greenness "
            f"correlation > {canopy.CLOSED_MIN_CORR:g}, or green share >= "
            f"{canopy.PACKED_GREEN_SHARE:g} and correlation >= {canopy.PACKED_MIN_CORR:g}; "
            f"either only with open ground (bright, > {canopy.OPEN_REACH:g} largest crown "
            f"radii from dark) below {canopy.MAX_OPEN_SHARE:g}"
        ),
        "canopy_green_share": evidence["green_share"],
        "canopy_bright_green_corr": evidence["bright_green_corr"],
        "canopy_open_share": evidence["open_share"],
        "canopy_layer": "log(1 + green band), Gaussian smoothed",
        "canopy_smooth_px": split.smooth_px,
        "canopy_marker_h": split.h,
        "canopy_marker_h_from": (
            f"{canopy.H_SHARE:g} x robust SD (1.4826 MAD) of the smoothed layer on sample windows"
        ),
        "canopy_min_area_px": split.min_area_px,
        "weak_separation": False,
        "split_touching": True,
    }
    return params, max(overlap, split.overlap_px), scales.align, th, notes


def _auto_imagery(info, settings, bands, scales, overlap, dmax_px, notes):
    """Layer and thresholds chosen from the image (robust background statistics)."""
    from ecoscan.detect.autotune import (
        GAP_SHARE,
        MAX_RAISE,
        NEAR,
        REFERENCE_SIGMA_PX,
        RESPONSE_MADS,
        VALUE_MADS,
        choose_layer,
    )

    lookup = _band_lookup(info, settings)
    roles = tuple(r for r in ("red", "green", "blue", "nir") if r in lookup)
    abands = tuple(lookup[r] for r in roles)
    if not roles:
        roles, abands = ("band",), bands
    windows = _sample_windows(info, abands, scales, dmax_px)
    if all(float(np.ptp(w.data[:, w.valid])) == 0.0 for w in windows if w.valid.any()):
        return None, 0, 1, {}, [*notes, _no_plants("the image is constant: no plants found")]
    rule: dict[str, float] = {}  # the closed-canopy rule's figures, recorded when it stays off
    if settings.split_touching:
        closed = _closed_canopy(
            info, settings, windows, roles, abands, scales, overlap, notes, rule
        )
        if closed is not None:
            return closed
    choice = choose_layer(windows, roles, scales)
    del windows
    if choice.candidates < MIN_CANDIDATES:
        return None
    params = DetectorParams(
        method="imagery",
        bands=abands,
        pixel_size_m=info.pixel_size_m,
        index=choice.name,
        scales=scales,
        min_response=DISC_RESPONSE * choice.min_contrast,
        min_response_by_scale=choice.min_response,
        min_value=choice.min_value,
        fill_value=choice.background,
        roles=roles,
        terms=choice.terms,
        split_ratio=SPLIT_RATIO if settings.split_touching else 0.0,
    )
    tried = ", ".join(f"{k} {v:.2f}" for k, v in choice.scores.items())
    notes.append(
        f"detection layer: {LAYER_LABELS.get(choice.name, choice.name)}, chosen from the image "
        f"(separation score {tried})"
    )
    notes.append(
        f"thresholds from the background (median {choice.background:.4g}, robust SD "
        f"{choice.spread:.4g}): crown contrast at least {choice.min_contrast:.4g}, centre "
        f"value at least {choice.min_value:.4g}"
    )
    if choice.threshold_raise > 1.0:
        notes.append(
            f"response threshold raised {choice.threshold_raise:.2f}x above the background "
            "noise level: many weak candidates (rough ground, compression blocks or noise) "
            "sat just above it"
        )
    if choice.weak:
        notes.append(
            Note(
                f"weak separation: {100 * choice.near_share:.0f}% of the plant candidates sit "
                "near the threshold; counts may be unreliable: calibrate a detector on mapped "
                "plants (ecoscan calibrate) or set --threshold and check with ecoscan validate",
                "weak-separation",
                WARNING,
            )
        )
    th = {
        "layer": choice.name,
        "layer_bands": list(abands),
        "layer_roles": list(roles),
        "layer_terms": [[n, w] for n, w in choice.terms],
        "layer_chosen_by": "largest separation score on sample windows",
        "layer_scores": choice.scores,
        "background": choice.background,
        "background_spread": choice.spread,
        "min_contrast": choice.min_contrast,
        "min_contrast_from": (
            f"{RESPONSE_MADS:g} (rising below sigma {REFERENCE_SIGMA_PX:g} px) x robust SD "
            "(1.4826 MAD) of the blob response over background pixels, per scale (median "
            "over scales shown as disc contrast)"
        ),
        "min_response_by_scale": list(choice.min_response),
        "threshold_raise": choice.threshold_raise,
        "threshold_raise_from": (
            f"lowest factor (1 to {MAX_RAISE:g}) on the background-based response threshold "
            f"at which at most {GAP_SHARE:g} of the kept candidates sit within a factor "
            f"{NEAR:g} of it (a gap in the candidates' responses); the factor with the "
            "smallest such share when none reaches it; chosen once on the sample windows"
        ),
        "vegetation_threshold": choice.min_value,
        "vegetation_threshold_from": f"background median + {VALUE_MADS:g} x robust SD",
        "near_threshold_share": choice.near_share,
        "weak_separation": choice.weak,
        "split_touching": params.split_ratio > 0,
        **rule,
    }
    return params, overlap, scales.align, th, notes


#: Tallest plausible height in a canopy height model, metres. The tallest measured living
#: trees are about 116 m (coast redwood; from memory); 150 m leaves a margin.
MAX_TREE_HEIGHT_M = 150.0
#: Coarsest pixel at which single crowns can be told apart, metres (common practice: tree
#: detection needs several pixels per crown; 20 m pixels are already coarser than most crowns).
MAX_CHM_PIXEL_M = 20.0
#: Largest crown search window or blob, in pixels: beyond this the filters and windows
#: would need gigabytes per tile (memory is checked before anything is allocated).
MAX_REACH_PX = 2048
#: Memory one tile may use (bytes), estimated before the work starts.
MAX_TILE_BYTES = 1.5e9


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
    ``detect_raster("ortho.tif", DetectionSettings(method="chm"))`` on a 3-band RGB image
    raises ``InputError("ortho.tif has 3 bands, but --method chm needs a canopy height
    model ...")`` before any pixel is read.
    """
    name = Path(info.path).name
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


def _check_tile_memory(
    name: str, settings: DetectionSettings, overlap: int, nbands: int, arrays: int, what: str
) -> None:
    """Refuse a plan whose tiles would need more than :data:`MAX_TILE_BYTES`."""
    side = settings.tile_size_px + 2 * overlap
    need = float(side) * side * 4 * (nbands + arrays)
    if overlap > MAX_REACH_PX or need > MAX_TILE_BYTES:
        raise InputError(
            f"{what} reaches {overlap} pixels around each tile of {name}, so one tile would "
            f"need about {need / 1e9:.1f} GB; check the pixel size and --diameter (in metres), "
            "or lower --tile-size"
        )


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
    if plots is not None:  # (the vector stack is slow to import: only when needed)
        import shapely

        from ecoscan.model.membership import (
            assign_plots,
            overlap_note,
            points_by_plot,
            unsurveyed_note,
        )
        from ecoscan.model.plots import PlotLayer

    notes = list(info.notes)
    if settings.detector:  # calibrated detector (ecoscan calibrate): its file sets the layer
        from ecoscan.detect.detector_file import calibrated_params, read_detector

        det = read_detector(settings.detector)
        method, index = "imagery", f"calibrated:{det.layer}"
        params, overlap, align, thresholds, more = calibrated_params(det, info, str(path))
    else:
        method, bands, index, more = choose_method(info, settings)
        notes += more
        if method == "chm":
            check_height_model(info, settings)
        params, overlap, align, thresholds, more = _global_params(
            info, settings, method, bands, index
        )
        if method == "imagery" and thresholds.get("layer"):
            index = thresholds["layer"]
    warn = [n for n in more if is_warning(n)]
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
    if executor is None:
        pool = early.get() if early is not None and jobs else None
        parts = run_plan(run_tile, jobs, workers=workers, pool=pool) if jobs else []
    else:
        parts = executor.map(run_tile, jobs, desc="tiles", unit="tile")
    table: dict[str, np.ndarray] = {}
    if parts:
        for k in parts[0]:
            table[k] = np.concatenate([p[k] for p in parts])
    n = table["col"].size if table else 0
    attrs: dict[str, np.ndarray] = {}
    if n and method == "imagery":
        radius = math.sqrt(2.0) * table["sigma_px"]
        if params.split_ratio > 0 and params.canopy is None:
            merged = split_merged(
                table["col"], table["row"], radius, table["score"], params.split_ratio
            )
            table = {k: v[~merged] for k, v in table.items()}
            radius = radius[~merged]
        if params.canopy is None:  # watershed regions are disjoint: nothing to prune
            keep = prune_blobs(
                table["col"],
                table["row"],
                radius,
                table["score"],
                margin=PRUNE_MARGIN if params.split_ratio > 0 else 0.0,
            )
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
        Note(
            "automated counts need field checks on a sample of plots before they inform "
            "management decisions",
            FIELD_CHECK,
            CAUTION,
        )
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


# `ecoscan.detect(path)` is the public API function of that name: calling this package runs it
# (ecoscan/__init__.py, docs/architecture.md "The Python API")
from ecoscan import _callable_package  # noqa: E402

_callable_package(__name__)
