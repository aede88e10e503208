"""Per-tile work for the three detectors: job in, table of detections out.

A :class:`TileJob` carries everything a worker needs (raster description, tile, detector
parameters that were fixed globally beforehand); :func:`run_tile` reads the tile's window,
runs the detector and returns the detections whose centres lie in the tile's core, in
raster pixel coordinates. No global state, so jobs can run anywhere.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ecoscan.detect import blobs, canopy, chm, classes
from ecoscan.detect.indices import darkness, excess_green, ndvi
from ecoscan.detect.settings import CROWN_RULES
from ecoscan.detect.tiling import Tile, in_core
from ecoscan.io.raster import RasterInfo, read_window

__all__ = [
    "DetectorParams",
    "TileJob",
    "base_layer",
    "compose_layer",
    "run_tile",
    "vegetation_layer",
]


@dataclass(frozen=True)
class DetectorParams:
    """Detector parameters fixed once for the whole raster (never per tile).

    Attributes
    ----------
    method : str
        ``imagery``, ``chm`` or ``classes``.
    bands : tuple of int
        1-based bands read.
    index : str
        Imagery: ``exg``, ``ndvi`` or ``band``.
    scales : BlobScales or None
        Imagery: scales searched.
    min_response, min_value, fill_value : float
        Imagery: response and vegetation thresholds, and the value given to invalid pixels.
    min_height, smooth_px, crown_rule, radius_cap_px, crown_floor_m, crowns : ...
        CHM options.
    class_values, min_area_px, split, h_px : ...
        Classes options.
    roles : tuple of str
        Imagery: what each band read is (``red``, ``green``, ``blue``, ``nir``, ``band``).
    terms : tuple of (str, float)
        Imagery: the detection layer as a weighted sum of base layers (see
        :func:`compose_layer`); empty means ``vegetation_layer(data, index)``.
    min_response_by_scale : tuple of float
        Imagery: response threshold per scale of ``scales.sigmas`` (overrides
        ``min_response`` when given).
    split_ratio : float
        Imagery: a blob is replaced by two or more smaller blobs inside it whose responses
        reach this fraction of its own (touching crowns of similar size); 0 disables.
    pixel_size_m : float
        Ground pixel size.
    """

    method: str
    bands: tuple[int, ...]
    pixel_size_m: float
    index: str = "exg"
    scales: blobs.BlobScales | None = None
    min_response: float = 0.0
    min_value: float = -np.inf
    fill_value: float = 0.0
    min_height: float = 2.0
    smooth_px: float = 1.0
    crown_rule: str = "combined"
    radius_cap_px: int = 1
    crown_floor_m: float = 1.0
    crowns: bool = False
    class_values: tuple[int, ...] = field(default_factory=tuple)
    min_area_px: float = 1.0
    split: bool = True
    h_px: float = 1.0
    roles: tuple[str, ...] = ()
    terms: tuple[tuple[str, float], ...] = ()
    split_ratio: float = 0.0
    min_response_by_scale: tuple[float, ...] = ()
    #: calibrated detectors (``ecoscan calibrate``): a picklable callable turning the band
    #: data into the plant layer, used instead of :func:`vegetation_layer` when set
    layer_model: object = None
    #: closed canopy (:mod:`ecoscan.detect.canopy`): a :class:`CanopySplit`; crowns are
    #: then regions of a valley-following watershed instead of blobs
    canopy: object = None


@dataclass(frozen=True)
class TileJob:
    """One unit of work: a raster, a tile and the global parameters."""

    info: RasterInfo
    tile: Tile
    params: DetectorParams


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


def base_layer(data: np.ndarray, roles: tuple[str, ...], name: str) -> np.ndarray:
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
        named) or ``band`` (the first band as it is).

    Returns
    -------
    numpy.ndarray
        float32 layer.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[10.0]], [[30.0]], [[10.0]]])
    >>> float(base_layer(d, ("red", "green", "blue"), "exg")[0, 0])  # 2*0.6 - 0.2 - 0.2
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
    raise ValueError(f"unknown layer {name!r}")


def compose_layer(
    data: np.ndarray, roles: tuple[str, ...], terms: tuple[tuple[str, float], ...]
) -> np.ndarray:
    """The detection layer: a weighted sum of base layers (see :func:`base_layer`).

    The weights are fixed once per raster (:mod:`ecoscan.detect.autotune`), so every tile
    computes the same layer. A calibrated detector can supply its own layer instead.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([[[10.0]], [[30.0]], [[10.0]]])
    >>> float(compose_layer(d, ("red", "green", "blue"), (("darkness", 0.5),))[0, 0])
    -8.333333015441895
    """
    out: np.ndarray | None = None
    for name, w in terms:
        layer = base_layer(data, roles, name)
        if w != 1.0:
            layer *= np.float32(w)
        if out is None:
            out = layer
        else:
            out += layer
    if out is None:
        raise ValueError("a detection layer needs at least one term")
    return out


def _crown_width_px(rule: str, pixel_size_m: float):
    a, b, c = CROWN_RULES[rule]

    def f(h):
        return (a + b * h + c * h * h) / pixel_size_m

    return f


def _empty_tile(p: DetectorParams) -> dict[str, np.ndarray]:
    """The result of a tile without valid pixels: every column, no rows."""
    keys = {
        "imagery": ("col", "row", "sigma_px", "score", "index_value"),
        "chm": ("col", "row", "height_m", *(("area_m2",) if p.crowns else ())),
        "classes": ("col", "row", "area_m2", "class_value", "_edge"),
    }[p.method]
    res = {k: np.zeros(0, dtype=bool if k == "_edge" else float) for k in keys}
    res["tile"] = np.zeros(0, dtype=np.int64)
    return res


def _canopy_tile(
    job: TileJob, layer: np.ndarray, valid: np.ndarray, tint: np.ndarray | None = None
) -> dict[str, np.ndarray]:
    """Closed canopy: crowns as watershed regions (:func:`ecoscan.detect.canopy.split_crowns`)."""
    cs, tile = job.params.canopy, job.tile
    found = canopy.split_crowns(
        layer,
        cs.r_min_px,
        cs.h,
        smooth_px=cs.smooth_px,
        min_area_px=cs.min_area_px,
        valid=valid,
        origin=tile.window[:2],
        min_peak=cs.min_peak,
        max_area_px=cs.max_area_px,
        lean=(cs.lean_col, cs.lean_row),
        tint=tint,
    )
    out = {
        "col": found["col"],
        "row": found["row"],
        # the radius of the region's equal-area disc, as a blob scale (r = sqrt(2) sigma)
        "sigma_px": np.sqrt(found["area_px"] / np.pi) / np.sqrt(2.0),
        "score": found["prominence"],
        "index_value": found["peak"],
    }
    keep = in_core(tile, out["col"], out["row"])
    res = {k: np.asarray(v, float)[keep] for k, v in out.items()}
    res["tile"] = np.full(int(keep.sum()), tile.index, dtype=np.int64)
    return res


def run_tile(job: TileJob) -> dict[str, np.ndarray]:
    """Detect plants in one tile; keep those whose centre lies in the tile's core.

    Returns
    -------
    dict of numpy.ndarray
        ``col``, ``row`` in raster pixel coordinates (0 = centre of the first pixel),
        detector attributes, and ``tile``.
    """
    p, tile = job.params, job.tile
    c0, r0, _c1, _r1 = tile.window
    data, valid = read_window(job.info, p.bands, tile.window, skip_empty=True)
    if data is None:
        return _empty_tile(p)  # all nodata: only the mask was read
    if p.method == "imagery":
        tint = (
            canopy.canopy_tint(data, p.roles) if p.canopy is not None and p.canopy.merge else None
        )
        if p.canopy is not None and p.canopy.layer == "brightness":
            layer = canopy.canopy_layer(data, p.roles)
        elif p.layer_model is not None:  # calibrated detector (ecoscan.detect.pixel_model)
            layer = p.layer_model(data)
        elif p.terms:
            layer = compose_layer(data, p.roles, p.terms)
        else:
            layer = vegetation_layer(data, p.index)
        del data
        if not valid.all():
            layer[~valid] = p.fill_value
        if p.canopy is not None:
            return _canopy_tile(job, layer, valid, tint)
        found = blobs.detect_blobs(
            layer,
            p.scales,
            np.asarray(p.min_response_by_scale) if p.min_response_by_scale else p.min_response,
            p.min_value,
            valid,
            origin=(c0, r0),
            background=p.fill_value,
        )
        out = {
            "col": found["col"],
            "row": found["row"],
            "sigma_px": found["sigma"],
            "score": found["response"],
            "index_value": found["value"],
        }
    elif p.method == "chm":
        h = np.where(valid, data[0], 0.0).astype(np.float32)
        del data
        hs = chm.smooth_chm(h, p.smooth_px)
        tops = chm.tree_tops(
            hs,
            valid,
            p.min_height,
            _crown_width_px(p.crown_rule, p.pixel_size_m),
            p.radius_cap_px,
            origin=(c0, r0),
        )
        out = {"col": tops["col"], "row": tops["row"], "height_m": tops["height"]}
        if p.crowns:
            px = chm.crown_areas(hs, h, valid, tops["_irow"], tops["_icol"], p.crown_floor_m)
            out["area_m2"] = px * p.pixel_size_m**2
    elif p.method == "classes":
        c1w, r1w = tile.window[2], tile.window[3]
        cut = (r0 > 0, r1w < job.info.height, c0 > 0, c1w < job.info.width)
        found = classes.class_patches(
            data[0],
            valid,
            p.class_values,
            p.min_area_px,
            split=p.split,
            h_px=p.h_px,
            cut_sides=cut,
        )
        out = {
            "col": found["col"] + c0,
            "row": found["row"] + r0,
            "area_m2": found["area_px"] * p.pixel_size_m**2,
            "class_value": found["class_value"].astype(float),
            "_edge": found["edge"],
        }
    else:  # pragma: no cover - guarded by the caller
        raise ValueError(p.method)
    keep = in_core(tile, out["col"], out["row"])
    res = {k: np.asarray(v)[keep] for k, v in out.items()}
    res["tile"] = np.full(int(keep.sum()), tile.index, dtype=np.int64)
    return res
