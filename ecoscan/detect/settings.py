"""Every option of the plant detectors, in metres and height units, with documented defaults."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, ClassVar

from ecoscan.errors import InputError
from ecoscan.settings import Settings

__all__ = ["CROWN_RULES", "DetectionSettings", "parse_band_spec"]

INDICES = ("auto", "exg", "ndvi", "darkness", "band")

#: Crown width (m) from tree height H (m), quadratic fits of Popescu & Wynne (2004),
#: Photogrammetric Engineering & Remote Sensing 70: 589–604. Constants as listed in the
#: project's reference sheet, which flags them "check against the paper": not yet checked
#: against the original table.
CROWN_RULES: dict[str, tuple[float, float, float]] = {
    "deciduous": (3.09632, 0.0, 0.00895),
    "pines": (3.75105, -0.17919, 0.01241),
    "combined": (2.51503, 0.0, 0.00901),
}


def method_choices() -> tuple[str, ...]:
    """The ``method`` values: ``auto`` and every detector offered by name (the registry,
    :func:`ecoscan.detect.detectors.registry.method_names`).

    Examples
    --------
    >>> method_choices()
    ('auto', 'imagery', 'chm', 'classes')
    """
    from ecoscan.detect.detectors.registry import method_names

    return ("auto", *method_names())


def parse_band_spec(spec: str) -> tuple[tuple[str, int], ...]:
    """Parse ``--bands``: ``"1,2,3"`` (positions) or ``"red=3,nir=4"`` (named bands).

    Parameters
    ----------
    spec : str
        Comma-separated 1-based band numbers, optionally named with ``name=``. Names:
        ``red``/``r``, ``green``/``g``, ``blue``/``b``, ``nir`` (near infrared), ``height``,
        ``class``. Unnamed numbers are taken in the order red, green, blue.

    Returns
    -------
    tuple of (name, index)
    """
    if not spec or not spec.strip():
        return ()
    alias = {"r": "red", "g": "green", "b": "blue", "nir": "nir", "n": "nir"}
    out: list[tuple[str, int]] = []
    default_names = ["red", "green", "blue"]
    for k, part in enumerate(p.strip() for p in spec.split(",")):
        if not part:
            continue
        if "=" in part:
            name, num = (s.strip().lower() for s in part.split("=", 1))
            name = alias.get(name, name)
        else:
            name, num = (default_names[k] if k < 3 else f"band{k + 1}"), part
        try:
            idx = int(num)
        except ValueError:
            raise InputError(
                f"--bands: {part!r} is not a band number; write e.g. 1,2,3 or red=3,nir=4"
            ) from None
        if idx < 1:
            raise InputError(f"--bands: band numbers start at 1 (got {idx})")
        out.append((name, idx))
    names = [n for n, _ in out]
    if len(set(names)) != len(names):
        raise InputError(f"--bands names a band twice ({spec}); give each name once")
    return tuple(out)


@dataclass(frozen=True)
class DetectionSettings(Settings):
    """Options of :func:`ecoscan.detect.detect_raster`.

    Attributes
    ----------
    method : str
        ``auto``, ``imagery``, ``chm`` or ``classes``. ``auto``: three or more bands give
        ``imagery``; one floating-point band gives ``chm``; one integer band gives
        ``classes`` when ``classes`` is set, else ``imagery`` on that band.
    bands : str
        Band selection, e.g. ``"1,2,3"`` or ``"red=3,nir=4"`` (see :func:`parse_band_spec`).
        Default: bands 1–3 as red, green, blue for imagery (band descriptions or colour
        interpretation naming ``nir`` pick NDVI), band 1 otherwise.
    index : str
        Detection layer for imagery: ``exg`` (Excess Green, Woebbecke et al. 1995),
        ``ndvi`` (Rouse et al. 1974), ``darkness`` (minus the mean of the visible bands),
        ``band`` (the first selected band as it is) or ``auto``: chosen from the image
        (:mod:`ecoscan.detect.autotune`) when no threshold is given, else NDVI when red and
        near-infrared are known, else ExG for three bands.
    diameter_min_m, diameter_max_m : float
        Expected crown diameter range in metres (``--diameter 0.5:3``).
    threshold : float or None
        Vegetation threshold in index units (imagery): a blob centre must be at least this
        green. None: the background median plus one robust standard deviation (1.4826 ×
        MAD) of the chosen layer; with an explicit ``index`` or ``min_contrast``, Otsu
        (1979) on the valid pixels of the whole raster as before.
    min_contrast : float or None
        Weakest crown-to-ground contrast kept, in index units; a blob's scale-normalised
        response must reach 2/e of it (the response of a flat disc of that contrast,
        Lindeberg 1998). None: 2.5 robust standard deviations of the blob response over
        background pixels at each scale; with an explicit ``index`` or ``threshold``, half
        the difference between the means of the two Otsu classes.
    scales_per_octave : int
        Scales tried per doubling of the crown diameter.
    min_height_m : float
        CHM: lowest tree top kept, metres.
    crown_rule : str
        CHM: variable-window rule of Popescu & Wynne (2004): ``combined``, ``deciduous``
        or ``pines``.
    smooth_m : float or None
        CHM: Gaussian smoothing standard deviation in metres; None means one pixel.
    crowns : bool
        CHM: delineate crowns by marker-controlled watershed and report ``area_m2``.
    classes : tuple of int
        Classes: the class values that are plants.
    min_area_m2 : float or None
        Classes: smallest patch kept, m². None: a quarter of the area of a crown of
        ``diameter_min_m``.
    split_touching : bool
        Split touching crowns: classes by a distance-transform watershed; imagery by
        replacing a blob that holds two or more similar smaller blobs by those blobs.
    tile_size_px : int
        Tile core size in pixels (memory follows it, not the raster size).
    pixel_size_m : float or None
        Pixel size for rasters without georeferencing (then coordinates are local).
    detector : str or None
        A detector file written by ``ecoscan calibrate``: its layer, thresholds and diameter
        range replace the imagery options above.
    """

    method: str = "auto"
    bands: str = ""
    index: str = "auto"
    diameter_min_m: float = 0.5
    diameter_max_m: float = 3.0
    threshold: float | None = None
    min_contrast: float | None = None
    scales_per_octave: int = 3
    min_height_m: float = 2.0
    crown_rule: str = "combined"
    smooth_m: float | None = None
    crowns: bool = False
    classes: tuple[int, ...] = ()
    min_area_m2: float | None = None
    split_touching: bool = True
    tile_size_px: int = 1024
    pixel_size_m: float | None = None
    detector: str | None = None

    def __post_init__(self) -> None:
        methods = method_choices()
        if self.method not in methods:
            raise InputError(f"method {self.method!r} is unknown; use one of {', '.join(methods)}")
        if self.index not in INDICES:
            raise InputError(f"index {self.index!r} is unknown; use one of {', '.join(INDICES)}")
        if self.crown_rule not in CROWN_RULES:
            raise InputError(
                f"crown rule {self.crown_rule!r} is unknown; use one of {', '.join(CROWN_RULES)}"
            )
        for name in ("diameter_min_m", "diameter_max_m"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
                raise InputError(f"{name} must be a positive number of metres (got {v!r})")
        if self.diameter_min_m > self.diameter_max_m:
            raise InputError(
                f"the diameter range {self.diameter_min_m:g}:{self.diameter_max_m:g} m is empty; "
                "give the smallest diameter first, e.g. --diameter 0.5:3"
            )
        if not 1 <= int(self.scales_per_octave) <= 12:
            raise InputError("scales_per_octave must be between 1 and 12")
        if not 64 <= int(self.tile_size_px) <= 16384:
            raise InputError("tile size must be between 64 and 16384 pixels")
        if self.min_height_m < 0:
            raise InputError("--min-height must not be negative")
        if self.smooth_m is not None and self.smooth_m < 0:
            raise InputError("smoothing must not be negative")
        if self.min_area_m2 is not None and self.min_area_m2 < 0:
            raise InputError("--min-area must not be negative")
        if self.pixel_size_m is not None and not self.pixel_size_m > 0:
            raise InputError(f"--pixel-size must be positive (got {self.pixel_size_m})")
        object.__setattr__(self, "classes", tuple(int(c) for c in self.classes))
        parse_band_spec(self.bands)  # validate early

    @property
    def band_spec(self) -> tuple[tuple[str, int], ...]:
        """The parsed band selection."""
        return parse_band_spec(self.bands)

    def crown_width_m(self, height_m):
        """Crown width (m) predicted from height (m) by the chosen Popescu & Wynne rule."""
        a, b, c = CROWN_RULES[self.crown_rule]
        return a + b * height_m + c * height_m**2

    SECTION: ClassVar[str] = "detection"

    @classmethod
    def _normalise(cls, d: dict[str, Any]) -> dict[str, Any]:
        """``diameter`` as ``"0.5:3"`` or ``[0.5, 3]``; ``classes`` as ``"1,4"`` or a list."""
        d = dict(d)
        if "diameter" in d:
            v = d.pop("diameter")
            lo, hi = parse_diameter(v) if isinstance(v, str) else (float(v[0]), float(v[1]))
            d["diameter_min_m"], d["diameter_max_m"] = lo, hi
        if "classes" in d:
            c = d["classes"]
            d["classes"] = tuple(parse_classes(c) if isinstance(c, str) else c)
        return d


def parse_diameter(text: str) -> tuple[float, float]:
    """Parse ``"0.5:3"`` (metres) into (smallest, largest); a single number means both."""
    parts = [p.strip() for p in str(text).split(":")]
    try:
        vals = [float(p) for p in parts if p]
    except ValueError:
        raise InputError(
            f"--diameter {text!r} is not a range of metres; write e.g. --diameter 0.5:3"
        ) from None
    if len(vals) == 1:
        vals = vals * 2
    if len(vals) != 2:
        raise InputError(f"--diameter {text!r}: give MIN:MAX in metres, e.g. 0.5:3")
    return vals[0], vals[1]


def parse_classes(text: str) -> tuple[int, ...]:
    """Parse ``"3,4"`` into class values."""
    try:
        return tuple(int(p) for p in str(text).split(",") if p.strip())
    except ValueError:
        raise InputError(
            f"--classes {text!r}: give whole class values separated by commas, e.g. 3,4"
        ) from None
