"""Detector files: every setting ``ecoscan calibrate`` learnt, as readable TOML.

A detector file holds the plant layer, thresholds, crown diameter range, the pixel size and
band layout it was learnt for, the cross-validated accuracy and the hashes of the files it
was learnt from. A pixel classifier is stored beside it in a model file (joblib, which is
pickle-based): **loading a model file can run code, so use detector files only from a
trusted source.** The model file's SHA-256 is stored in the TOML and checked before the
model is loaded, so a model file that was swapped or damaged is refused.
"""

from __future__ import annotations

import hashlib
import math
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ecoscan.detect.centres import WIDTH_SHARE
from ecoscan.detect.pixel_model import SIMPLE_LAYERS, FeatureSpec, PlantLayer
from ecoscan.errors import InputError
from ecoscan.io.outputs import atomic_path

__all__ = [
    "FORMAT_VERSION",
    "PIXEL_SIZE_TOLERANCE",
    "CalibratedDetector",
    "check_raster",
    "read_detector",
    "write_detector",
]

#: Version of the detector-file layout (raised when keys change meaning). Version 2 added
#: ``[crown_split]``, version 3 the crown-centre map (``[centre_map]``, kind ``centres``
#: with ``[centre_peaks]``, ``centre_weight`` in ``[crown_split]``; the model file then
#: holds a mapping of models); a file is written with the lowest version that holds its
#: content, so older readers still read what they can and refuse the rest with one line.
FORMAT_VERSION = 3

#: Largest relative difference between the raster's pixel size and the detector's.
PIXEL_SIZE_TOLERANCE = 0.05


def sha256_file(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes (hex)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(1 << 20):
            h.update(block)
    return h.hexdigest()


@dataclass
class CalibratedDetector:
    """A detector learnt from mapped plants.

    Attributes
    ----------
    kind : str
        ``layer``, ``classifier`` or ``centres``.
    layer : str
        Simple layer name, ``probability`` for the classifier, or ``centre_map`` for the
        crown-centre regressor (:mod:`ecoscan.detect.centres`).
    band_names : tuple of str
        Name of each raster band, in band order (``red``, ``green``, ``blue``, ``nir``,
        ``bandN``).
    dtype : str
        Data type of the raster's bands (``uint8``, ``uint16``, ``float32``...).
    pixel_size_m : float
        Ground pixel size the detector was learnt at, metres.
    diameter_min_m, diameter_max_m : float
        Crown diameter range searched, metres.
    min_response : float
        Smallest scale-normalised blob response, layer units.
    min_value : float
        Smallest smoothed layer value at a blob centre, layer units.
    background : float
        Layer value of bare ground (used beyond the raster's edge and for nodata).
    scales_per_octave : int
        Scales per doubling of the diameter.
    features : FeatureSpec or None
        Classifier features.
    model_file : str
        Model file name, beside the TOML (classifier only).
    model_sha256 : str
        SHA-256 of the model file.
    cross_validation : dict
        Scores and fold description.
    training : dict
        Files learnt from, with hashes, and counts.
    candidates : list of dict
        Cross-validated scores of every layer tried.
    software : dict
        Versions of ecoscan and scikit-learn.
    split : dict
        Closed canopy: crowns are regions of a watershed of the smoothed layer instead of
        blobs (:mod:`ecoscan.detect.canopy`): marker height ``h`` and least region peak
        ``min_peak`` (layer units), smoothing and least area as shares of the smallest
        crown radius and disc (``smooth_share``, ``min_area_share``). Empty: blobs.
        With ``centre_weight``, the split runs on the probability plus that weight times
        the centre map.
    centres : dict
        Kind ``centres``: crowns are the peaks of the centre map (:mod:`ecoscan.detect.
        centres`), with smoothing and least distance as shares of the smallest crown
        radius (``smooth_share``, ``distance_share``), least peak ``min_peak`` and the
        median calibrated ``crown_diameter_m`` (written for every point).
    centre_features : FeatureSpec or None
        Features of the crown-centre regressor.
    centre_model : object or None
        The crown-centre regressor (loaded from the model file).
    """

    kind: str
    layer: str
    band_names: tuple[str, ...]
    dtype: str
    pixel_size_m: float
    diameter_min_m: float
    diameter_max_m: float
    min_response: float
    min_value: float
    background: float
    scales_per_octave: int = 3
    features: FeatureSpec | None = None
    model_file: str = ""
    model_sha256: str = ""
    cross_validation: dict = field(default_factory=dict)
    training: dict = field(default_factory=dict)
    candidates: list = field(default_factory=list)
    software: dict = field(default_factory=dict)
    forest: Any = None
    source: str = ""
    split: dict = field(default_factory=dict)
    centres: dict = field(default_factory=dict)
    centre_features: FeatureSpec | None = None
    centre_model: Any = None

    @property
    def learnt(self) -> bool:
        """True when a model file goes with the detector (classifier or centre map)."""
        return self.kind in ("classifier", "centres")

    def plant_layer(self) -> PlantLayer:
        """The picklable layer function used by the tile workers."""
        return PlantLayer(
            self.kind,
            self.layer,
            self.band_names,
            self.features,
            self.forest,
            self.centre_model,
            self.centre_features,
            float(self.split.get("centre_weight", 0.0)),
        )


# --- writing -------------------------------------------------------------------------------


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        if math.isnan(v):
            return "nan"
        return repr(float(v))
    if isinstance(v, str):
        esc = v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
        return f'"{esc}"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _toml_table(name: str, table: dict, comments: dict | None = None) -> list[str]:
    lines = [f"[{name}]"]
    for k, v in table.items():
        if isinstance(v, dict):
            continue
        c = (comments or {}).get(k)
        lines.append(f"{k} = {_toml_value(v)}" + (f"  # {c}" if c else ""))
    lines.append("")
    for k, v in table.items():
        if isinstance(v, dict):
            lines += _toml_table(f"{name}.{k}", v)
    return lines


def _model_tables(det: CalibratedDetector) -> list[str]:
    """TOML lines of the model file, the centre map, the crown split and the centre peaks."""
    lines: list[str] = []
    if det.learnt:
        table = {"model_file": det.model_file, "model_sha256": det.model_sha256}
        if det.features is not None:
            table.update(
                sigma_min_px=det.features.sigma_min,
                sigma_max_px=det.features.sigma_max,
                num_sigma=det.features.num_sigma,
                brightness_scale=det.features.brightness_scale,
            )
        lines += _toml_table("classifier", table)
    if det.centre_features is not None:
        lines += _toml_table(
            "centre_map",
            {
                "sigma_min_px": det.centre_features.sigma_min,
                "sigma_max_px": det.centre_features.sigma_max,
                "num_sigma": det.centre_features.num_sigma,
                "brightness_scale": det.centre_features.brightness_scale,
                "target_width_share": WIDTH_SHARE,
            },
            {
                "sigma_max_px": "features of the crown-centre regressor (in the model file)",
                "target_width_share": "trained on Gaussians of this share of each crown radius",
            },
        )
    if det.split:
        lines += _toml_table(
            "crown_split",
            dict(det.split),
            {
                "h": "marker height (h-maxima) of the smoothed layer, layer units",
                "min_peak": "regions whose smoothed peak is lower are ground",
                "smooth_share": "Gaussian smoothing, share of the smallest crown radius",
                "min_area_share": "smallest region, share of the smallest crown's disc",
                "centre_weight": "the layer is the probability plus this times the centre map",
            },
        )
    if det.centres:
        lines += _toml_table(
            "centre_peaks",
            dict(det.centres),
            {
                "smooth_share": "Gaussian smoothing of the map, share of the smallest radius",
                "distance_share": "a crown is the highest value within this share of the "
                "smallest crown radius",
                "min_peak": "least peak of the centre map (1 = a mapped crown centre)",
                "crown_diameter_m": "median calibrated crown diameter (written per plant)",
            },
        )
    return lines


def to_toml(det: CalibratedDetector) -> str:
    """The detector as TOML text (see :func:`write_detector`)."""
    head = [
        "# ecoscan detector file, written by `ecoscan calibrate`.",
        "# Use it with `ecoscan detect RASTER --detector FILE` or, in a survey file,",
        '# detector = "FILE" in a [raster.detect] table.',
    ]
    if det.learnt:
        head.append(
            "# The model file beside it is pickle-based: load detector files only from a "
            "trusted source."
        )
    lines = [*head, ""]
    lines += _toml_table(
        "detector",
        # version 2 adds [crown_split], 3 the centre map; other files stay readable by older
        # readers
        {"format_version": _version(det), "kind": det.kind, "layer": det.layer},
        {
            "kind": "layer: a simple per-pixel layer; classifier: random-forest probability; "
            "centres: peaks of a learnt crown-centre map"
        },
    )
    lines += _toml_table(
        "raster",
        {
            "pixel_size_m": det.pixel_size_m,
            "band_names": list(det.band_names),
            "dtype": det.dtype,
        },
        {"pixel_size_m": f"rasters within {PIXEL_SIZE_TOLERANCE:.0%} of this are accepted"},
    )
    lines += _toml_table(
        "blobs",
        {
            "diameter_min_m": det.diameter_min_m,
            "diameter_max_m": det.diameter_max_m,
            "scales_per_octave": det.scales_per_octave,
            "min_response": det.min_response,
            "min_value": det.min_value,
            "background": det.background,
        },
        {
            "min_response": "smallest scale-normalised blob response, layer units",
            "min_value": "smallest smoothed layer value at a blob centre",
            "background": "layer value of bare ground",
        },
    )
    lines += _model_tables(det)
    lines += _toml_table("cross_validation", dict(det.cross_validation))
    for cand in det.candidates:
        lines.append("[[cross_validation.candidates]]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in cand.items()]
        lines.append("")
    lines += _toml_table("training", dict(det.training))
    lines += _toml_table("software", dict(det.software))
    return "\n".join(lines).rstrip() + "\n"


def _version(det: CalibratedDetector) -> int:
    """The lowest format version that holds the detector."""
    if det.centre_features is not None:
        return 3
    return 2 if det.split else 1


def write_detector(path: str | os.PathLike, det: CalibratedDetector) -> list[Path]:
    """Write a detector file (and its model file) atomically.

    The model file is written first, then its hash goes into the TOML, which is written
    last: a failure leaves no TOML pointing at a missing or different model.

    Parameters
    ----------
    path : path-like
        Destination ``.toml``.
    det : CalibratedDetector
        With ``forest`` set for a classifier.

    Returns
    -------
    list of pathlib.Path
        The files written.

    Examples
    --------
    >>> import tempfile
    >>> d = CalibratedDetector("layer", "exg", ("red", "green", "blue"), "uint8", 0.05,
    ...                        0.5, 2.0, 0.02, 0.05, 0.0)
    >>> out = Path(tempfile.mkdtemp()) / "detector.toml"
    >>> [p.name for p in write_detector(out, d)]
    ['detector.toml']
    >>> read_detector(out).layer
    'exg'
    """
    dest = Path(path)
    written: list[Path] = []
    if det.learnt:
        import joblib

        model = dest.with_suffix(".model.joblib")
        content = det.forest
        if det.centre_model is not None:  # format 3: a mapping of the models
            content = {"forest": det.forest, "centre_map": det.centre_model}
        with atomic_path(model) as tmp:
            joblib.dump(content, tmp, compress=3)
        det.model_file = model.name
        det.model_sha256 = sha256_file(model)
        written.append(model)
    with atomic_path(dest) as tmp:
        tmp.write_text(to_toml(det), encoding="utf-8", newline="\n")
    return [dest, *written]


# --- reading -------------------------------------------------------------------------------


def _need(d: dict, table: str, key: str, kind, name: str):
    t = d.get(table)
    if not isinstance(t, dict) or key not in t:
        raise InputError(
            f"detector file {name} lacks [{table}] {key}; make it again with ecoscan calibrate"
        )
    v = t[key]
    ok = isinstance(v, kind) and not (kind is not bool and isinstance(v, bool))
    if not ok:
        raise InputError(
            f"detector file {name}: [{table}] {key} has the wrong type; make it again with "
            "ecoscan calibrate"
        )
    return v


def read_detector(path: str | os.PathLike, *, load_model: bool = True) -> CalibratedDetector:
    """Read and check a detector file (and load its model file after checking its hash).

    Parameters
    ----------
    path : path-like
        The ``.toml`` written by ``ecoscan calibrate``.
    load_model : bool
        Load the classifier (False only checks the TOML and the model's hash).

    Returns
    -------
    CalibratedDetector

    Raises
    ------
    InputError
        A missing file, TOML that does not parse, missing or mistyped keys, an unknown
        layer, a missing model file or one whose SHA-256 differs from the recorded one.
    """
    p = Path(path)
    name = str(path)
    d = _load_toml(p, name)
    num = (int, float)
    version = _need(d, "detector", "format_version", int, name)
    if version > FORMAT_VERSION:
        raise InputError(
            f"detector file {name} has format version {version}, newer than this ecoscan "
            f"reads ({FORMAT_VERSION}); update ecoscan"
        )
    kind = _need(d, "detector", "kind", str, name)
    layer = _need(d, "detector", "layer", str, name)
    known = {"classifier": ("probability",), "centres": ("centre_map",)}
    bad = layer not in SIMPLE_LAYERS if kind == "layer" else layer not in known.get(kind, ())
    if bad:
        raise InputError(
            f"detector file {name}: unknown detector kind/layer {kind}/{layer}; make it again "
            "with ecoscan calibrate"
        )
    det = CalibratedDetector(
        kind=kind,
        layer=layer,
        band_names=tuple(_need(d, "raster", "band_names", list, name)),
        dtype=_need(d, "raster", "dtype", str, name),
        pixel_size_m=float(_need(d, "raster", "pixel_size_m", num, name)),
        diameter_min_m=float(_need(d, "blobs", "diameter_min_m", num, name)),
        diameter_max_m=float(_need(d, "blobs", "diameter_max_m", num, name)),
        min_response=float(_need(d, "blobs", "min_response", num, name)),
        min_value=float(_need(d, "blobs", "min_value", num, name)),
        background=float(_need(d, "blobs", "background", num, name)),
        scales_per_octave=int(_need(d, "blobs", "scales_per_octave", int, name)),
        cross_validation=d.get("cross_validation", {}),
        training=d.get("training", {}),
        software=d.get("software", {}),
        source=str(p.resolve()),
    )
    det.candidates = list(det.cross_validation.pop("candidates", []))
    if "crown_split" in d:
        det.split = _crown_split(d, name)
    if kind == "centres":
        det.centres = _centres(d, name)
    if "centre_map" in d:
        det.centre_features = _features(d, "centre_map", name)
    _check_values(det, name)
    if det.learnt:
        _read_classifier(det, d, p, name, load_model)
    return det


def _load_toml(p: Path, name: str) -> dict:
    """The parsed TOML of a detector file; refuses a missing or unparsable file."""
    if not p.is_file():
        raise InputError(f"detector file {name} does not exist; make one with ecoscan calibrate")
    try:
        return tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        first = str(exc).splitlines()[0]
        raise InputError(
            f"detector file {name} is not valid TOML ({first}); make it again with "
            "ecoscan calibrate"
        ) from None


def _crown_split(d: dict, name: str) -> dict[str, float | bool]:
    """The ``[crown_split]`` table, checked."""
    split = {
        k: float(_need(d, "crown_split", k, (int, float), name))
        for k in ("h", "min_peak", "smooth_share", "min_area_share")
    }
    join = d["crown_split"].get("join_fragments", False)  # absent in older files
    if not isinstance(join, bool):
        raise InputError(
            f"detector file {name}: [crown_split] join_fragments must be true or false; "
            "make it again with ecoscan calibrate"
        )
    split["join_fragments"] = join
    weight = d["crown_split"].get("centre_weight", 0.0)  # format 3 only
    if isinstance(weight, bool) or not isinstance(weight, (int, float)) or not weight >= 0:
        raise InputError(
            f"detector file {name}: [crown_split] centre_weight must be a number of at least "
            "0; make it again with ecoscan calibrate"
        )
    if weight:
        if "centre_map" not in d:
            raise InputError(
                f"detector file {name}: [crown_split] centre_weight needs a [centre_map] "
                "table; make it again with ecoscan calibrate"
            )
        split["centre_weight"] = float(weight)
    if not all(math.isfinite(v) for v in split.values()) or split["h"] <= 0:
        raise InputError(
            f"detector file {name} holds an impossible [crown_split] table; make it "
            "again with ecoscan calibrate"
        )
    return split


def _features(d: dict, table: str, name: str) -> FeatureSpec:
    """Pixel-feature settings from a ``[classifier]`` or ``[centre_map]`` table, checked."""
    num = (int, float)
    spec = FeatureSpec(
        sigma_min=float(_need(d, table, "sigma_min_px", num, name)),
        sigma_max=float(_need(d, table, "sigma_max_px", num, name)),
        num_sigma=int(_need(d, table, "num_sigma", int, name)),
        brightness_scale=float(_need(d, table, "brightness_scale", num, name)),
    )
    ok = (
        0 < spec.sigma_min <= spec.sigma_max <= 256
        and 1 <= spec.num_sigma <= 32
        and math.isfinite(spec.brightness_scale)
        and spec.brightness_scale > 0
    )
    if not ok:
        raise InputError(
            f"detector file {name} holds impossible [{table}] feature settings; make it "
            "again with ecoscan calibrate"
        )
    return spec


def _centres(d: dict, name: str) -> dict[str, float]:
    """The ``[centre_peaks]`` table, checked."""
    keys = ("smooth_share", "distance_share", "min_peak", "crown_diameter_m")
    out = {k: float(_need(d, "centre_peaks", k, (int, float), name)) for k in keys}
    ok = (
        all(math.isfinite(v) for v in out.values())
        and out["smooth_share"] >= 0
        and out["distance_share"] > 0
        and out["crown_diameter_m"] > 0
    )
    if not ok:
        raise InputError(
            f"detector file {name} holds an impossible [centre_peaks] table; make it again with "
            "ecoscan calibrate"
        )
    return out


def _check_values(det: CalibratedDetector, name: str) -> None:
    """Refuse impossible pixel sizes, diameters or thresholds."""
    bad = (
        not (det.pixel_size_m > 0)
        or not (0 < det.diameter_min_m <= det.diameter_max_m)
        or not math.isfinite(det.min_response)
        or not 1 <= det.scales_per_octave <= 12
        or not det.band_names
    )
    if bad:
        raise InputError(
            f"detector file {name} holds impossible values (pixel size, diameters or "
            "thresholds); make it again with ecoscan calibrate"
        )


def _read_classifier(
    det: CalibratedDetector, d: dict, p: Path, name: str, load_model: bool
) -> None:
    """The models' features and model file (hash checked before loading), in place."""
    if det.kind == "classifier":
        det.features = _features(d, "classifier", name)
    elif det.centre_features is None:
        raise InputError(
            f"detector file {name} lacks [centre_map]; make it again with ecoscan calibrate"
        )
    det.model_file = _need(d, "classifier", "model_file", str, name)
    det.model_sha256 = _need(d, "classifier", "model_sha256", str, name)
    model = p.parent / det.model_file
    if Path(det.model_file).name != det.model_file:
        raise InputError(
            f"detector file {name}: model_file must be a file name beside the TOML, "
            f"not {det.model_file!r}"
        )
    if not model.is_file():
        raise InputError(
            f"the model file {det.model_file} named by {name} is missing; keep it beside "
            "the detector file or run ecoscan calibrate again"
        )
    if sha256_file(model) != det.model_sha256:
        raise InputError(
            f"the model file {det.model_file} does not match the SHA-256 recorded in "
            f"{name}; it was changed or damaged: run ecoscan calibrate again"
        )
    if not load_model:
        return
    import joblib

    try:
        content = joblib.load(model)
    except Exception as exc:  # a file with the right hash but unreadable here
        raise InputError(
            f"cannot load the model file {det.model_file} ({type(exc).__name__}); "
            "it may come from another scikit-learn version: run ecoscan calibrate "
            "again"
        ) from None
    if isinstance(content, dict):  # format 3: forest and centre map
        det.forest = content.get("forest")
        det.centre_model = content.get("centre_map")
    else:
        det.forest = content
    need_forest = det.kind == "classifier"
    need_centre = det.centre_features is not None
    if (need_forest and det.forest is None) or (need_centre and det.centre_model is None):
        raise InputError(
            f"the model file {det.model_file} lacks a model that {name} names; run ecoscan "
            "calibrate again"
        )


def check_raster(det: CalibratedDetector, raster_name: str, info) -> list[str]:
    """Refuse a raster whose pixel size or band layout differs from the detector's.

    Parameters
    ----------
    det : CalibratedDetector
    raster_name : str
        As the user wrote it, for messages.
    info : ecoscan.io.raster.RasterInfo

    Returns
    -------
    list of str
        Notes.

    Raises
    ------
    InputError
        Another pixel size (beyond :data:`PIXEL_SIZE_TOLERANCE`), band count or data type.
    """
    src = Path(det.source).name or "the detector file"
    ps = info.pixel_size_m
    if abs(ps - det.pixel_size_m) > PIXEL_SIZE_TOLERANCE * det.pixel_size_m:
        raise InputError(
            f"{raster_name} has {ps:.4g} m pixels but detector file {src} was made for "
            f"{det.pixel_size_m:.4g} m; calibrate on imagery of this pixel size"
        )
    if len(info.data_bands) != len(det.band_names) or str(info.dtype) != det.dtype:
        raise InputError(
            f"{raster_name} has {len(info.data_bands)} band(s) of {info.dtype} but detector "
            f"file {src} was made for {len(det.band_names)} band(s) of {det.dtype} "
            f"({', '.join(det.band_names)}); calibrate on imagery from this camera"
        )
    return [
        f"detector file {src}: {det.kind} {det.layer}, diameters "
        f"{det.diameter_min_m:.3g}-{det.diameter_max_m:.3g} m, cross-validated F1 "
        f"{det.cross_validation.get('f1', float('nan')):.3f}"
    ]
