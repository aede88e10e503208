"""The detector interface, the records it passes around, and checks detectors share.

A detector turns a raster into plants in two steps:

1. :meth:`Detector.prepare` looks at the whole raster once (the header, a decimated copy or
   sample windows) and fixes every parameter: a picklable *plan*, the tile overlap and
   alignment it needs, the thresholds for the metadata and notes for the user
   (:class:`Prepared`).
2. :meth:`Detector.run` finds the plants in one window of the raster with that plan and
   returns a :class:`TilePoints` table. Tiles run anywhere (this process, a pool, a Dask
   cluster): the plan is all they share.

:meth:`Detector.finish` then works on all tiles' points together (e.g. prunes blobs that
two tiles both found a part of) and names the output columns.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from ecoscan.detect.tiling import Tile, in_core
from ecoscan.errors import InputError
from ecoscan.model.notes import WARNING, Note

if TYPE_CHECKING:
    from ecoscan.detect.settings import DetectionSettings
    from ecoscan.io.raster import RasterInfo

__all__ = [
    "MAX_REACH_PX",
    "MAX_TILE_BYTES",
    "Detector",
    "Prepared",
    "TilePoints",
    "TileWindow",
    "check_diameters",
    "check_tile_memory",
    "decimated",
    "no_plants",
]

#: Largest crown search window or blob, in pixels: beyond this the filters and windows
#: would need gigabytes per tile (memory is checked before anything is allocated).
MAX_REACH_PX = 2048
#: Memory one tile may use (bytes), estimated before the work starts.
MAX_TILE_BYTES = 1.5e9


@dataclass
class Prepared:
    """What :meth:`Detector.prepare` fixed for the whole raster.

    Attributes
    ----------
    plan : object or None
        The detector's parameters, picklable (sent to every tile); None when the raster
        cannot hold any plant (the notes say why) and no tile is read.
    overlap : int
        Pixels read around each tile's core.
    align : int
        Tile origins are multiples of this (so pyramids line up across tiles).
    thresholds : dict
        Thresholds and their origins, for the detection metadata.
    notes : list of str or Note
        Choices and warnings, for the user.
    index : str or None
        The detection layer reported (imagery detectors).
    """

    plan: Any
    overlap: int
    align: int
    thresholds: dict
    notes: list
    index: str | None = None


@dataclass
class TileWindow:
    """One tile's pixels, as :func:`ecoscan.detect.engine.run_tile` read them.

    ``data`` holds the plan's bands, shape (bands, rows, columns); ``valid`` marks the
    pixels with data. A detector that no longer needs the band data once it has made its
    layer calls :meth:`pop_data`, so the memory is freed while it runs.
    """

    info: RasterInfo
    tile: Tile
    data: np.ndarray | None
    valid: np.ndarray

    @property
    def origin(self) -> tuple[int, int]:
        """Column and row of the window's first pixel in the raster."""
        return self.tile.window[0], self.tile.window[1]

    def pop_data(self) -> np.ndarray:
        """The band data, dropping this window's reference to it."""
        data, self.data = self.data, None
        if data is None:
            raise RuntimeError("the band data of this window were taken already")
        return data


def _floats(n: int = 0) -> np.ndarray:
    return np.zeros(n, dtype=float)


@dataclass(frozen=True)
class TilePoints:
    """Plants found in one tile or in all of them: a table in raster pixel coordinates.

    Attributes
    ----------
    col, row : numpy.ndarray
        Position in raster pixels (0 = centre of the first pixel).
    columns : dict of str to numpy.ndarray
        The detector's own columns (e.g. ``sigma_px``, ``score``), one value per plant.
    tile : numpy.ndarray of int64
        Index of the tile whose core holds the plant (-1 before :meth:`in_core`).
    cut : numpy.ndarray of bool
        The plant may be cut at a tile edge (a patch wider than the overlap).

    Examples
    --------
    >>> import numpy as np
    >>> t = TilePoints(np.array([1.0, 5.0]), np.array([2.0, 2.0]), {"score": np.array([3, 4])})
    >>> t.n, t.take(t.col > 2).columns["score"].tolist()
    (2, [4])
    """

    col: np.ndarray
    row: np.ndarray
    columns: dict[str, np.ndarray] = field(default_factory=dict)
    tile: np.ndarray | None = None
    cut: np.ndarray | None = None

    def __post_init__(self) -> None:
        n = np.asarray(self.col).size
        if self.tile is None:
            object.__setattr__(self, "tile", np.full(n, -1, dtype=np.int64))
        if self.cut is None:
            object.__setattr__(self, "cut", np.zeros(n, dtype=bool))

    @property
    def n(self) -> int:
        """Number of plants."""
        return int(np.asarray(self.col).size)

    @classmethod
    def empty(cls, names: tuple[str, ...]) -> TilePoints:
        """No plants, with the given columns (floats)."""
        return cls(_floats(), _floats(), {k: _floats() for k in names}, np.zeros(0, np.int64))

    def take(self, keep: np.ndarray) -> TilePoints:
        """The plants selected by a boolean mask or index array."""
        return TilePoints(
            np.asarray(self.col)[keep],
            np.asarray(self.row)[keep],
            {k: np.asarray(v)[keep] for k, v in self.columns.items()},
            self.tile[keep],
            self.cut[keep],
        )

    def in_core(self, tile: Tile) -> TilePoints:
        """The plants whose centre lies in the tile's core, labelled with its index."""
        out = self.take(in_core(tile, self.col, self.row))
        return replace(out, tile=np.full(out.n, tile.index, dtype=np.int64))

    @classmethod
    def concat(cls, parts: list[TilePoints]) -> TilePoints:
        """All parts' plants in one table (the columns of the first part)."""
        return cls(
            np.concatenate([p.col for p in parts]),
            np.concatenate([p.row for p in parts]),
            {k: np.concatenate([p.columns[k] for p in parts]) for k in parts[0].columns},
            np.concatenate([p.tile for p in parts]),
            np.concatenate([p.cut for p in parts]),
        )


class Detector:
    """One detector: prepare a plan for the whole raster, run it on each tile.

    Subclasses set the class attributes and implement :meth:`prepare`, :meth:`run`,
    :meth:`finish` and :meth:`empty_tile`; :meth:`fits` and :meth:`choose_bands` have
    defaults for a one-band detector. A module of :mod:`ecoscan.detect.detectors` that
    defines ``DETECTOR = MyDetector()`` is registered under ``MyDetector.name``
    (:mod:`ecoscan.detect.detectors.registry`).

    Attributes
    ----------
    name : str
        Registry key; the ``--method`` value when :attr:`on_method` is true.
    method : str
        The method reported in results and metadata (``DetectionResult.method``).
    auto_order : int or None
        Place in the automatic choice (``--method auto``: the first detector in this order
        whose :meth:`fits` is true; the first in the order when none fits). None: never
        chosen automatically.
    on_method : bool
        Offered by ``--method``.
    empty_columns : tuple of str
        Output columns of a run that read no tile.
    """

    name: ClassVar[str] = ""
    method: ClassVar[str] = ""
    auto_order: ClassVar[int | None] = None
    on_method: ClassVar[bool] = True
    empty_columns: ClassVar[tuple[str, ...]] = ()

    def fits(self, info: RasterInfo, settings: DetectionSettings) -> bool:
        """True when ``--method auto`` should pick this detector for the raster."""
        return False

    def overrides(self, settings: DetectionSettings) -> bool:
        """True when the settings name this detector whatever ``--method`` says."""
        return False

    def choose_bands(
        self, info: RasterInfo, settings: DetectionSettings
    ) -> tuple[tuple[int, ...], str | None, list]:
        """Bands read, detection layer and notes: by default the one band of ``--bands``
        (or band 1), no layer."""
        band = next(iter(dict(settings.band_spec).values()), info.data_bands[0])
        return (band,), None, []

    def prepare(
        self,
        info: RasterInfo,
        settings: DetectionSettings,
        bands: tuple[int, ...],
        index: str | None,
        source: str,
    ) -> Prepared:
        """Fix the plan for the whole raster (``source``: the raster as the user named it)."""
        raise NotImplementedError

    def run(self, window: TileWindow, plan: Any) -> TilePoints:
        """The plants in one tile's window (all of them; the caller keeps the core's)."""
        raise NotImplementedError

    def empty_tile(self, plan: Any) -> TilePoints:
        """The result of a tile without valid pixels: every column, no rows."""
        raise NotImplementedError

    def reads_together(self, plan: Any) -> bool:
        """Whether neighbouring tiles may be read as one window and run once
        (:func:`ecoscan.detect.engine.tile_jobs`): true only when the plants whose centres
        lie in a core, their order and columns do not depend on how far the window
        reaches beyond the plan's overlap. False unless a detector says so."""
        return False

    def finish(self, points: TilePoints, plan: Any) -> tuple[TilePoints, dict, list]:
        """All tiles' plants (at least one): the points kept, their output columns and
        notes that are warnings too."""
        raise NotImplementedError


def no_plants(text: str) -> Note:
    """A warning that the raster cannot hold any plant (constant layer, too low heights)."""
    return Note(text, "no-plants", WARNING)


def decimated(info: RasterInfo, bands, name: str):
    """The whole raster decimated (:func:`ecoscan.io.raster.read_decimated`); refuses an
    all-nodata raster."""
    from ecoscan.io.raster import read_decimated

    data, valid = read_decimated(info, bands)
    if not valid.any():
        raise InputError(
            f"{name} is entirely nodata (every pixel is masked); check the file and its "
            "nodata value"
        )
    return data, valid


def check_tile_memory(
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


def check_diameters(
    info: RasterInfo, settings: DetectionSettings, notes: list
) -> tuple[float, float]:
    """The crown diameter range in pixels, refused when sub-pixel or beyond reach.

    Notes on crowns too small to detect reliably or too large for the raster are added to
    ``notes``.
    """
    ps = info.pixel_size_m
    dmin_px, dmax_px = settings.diameter_min_m / ps, settings.diameter_max_m / ps
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
    return dmin_px, dmax_px


def raster_name(info: RasterInfo) -> str:
    """The raster's file name, for messages."""
    return Path(info.path).name


def disc_diameter_m(area_m2: np.ndarray) -> np.ndarray:
    """Diameter of the disc of the same area (metres)."""
    return 2.0 * np.sqrt(area_m2 / math.pi)
