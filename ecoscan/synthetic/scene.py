"""The scene suite's public face: :func:`make_scene`, :class:`Scene`, :func:`write_scene`.

Every style is an invented survey scene with known plant positions and crown diameters,
drawn to look like real imagery (lobed, textured, shaded crowns with cast shadows on
textured ground, and the nuisances of each survey type). See docs/detection.md.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
from rasterio.transform import Affine, from_origin

from ecoscan.errors import InputError
from ecoscan.synthetic.compose import STRIP_ROWS, Recipe

__all__ = ["SCENE_CRS", "Scene", "ScenePaths", "ScenePlan", "make_scene", "write_scene"]

#: All scenes lie in UTM zone 33 north (metres), with the top-left corner here (invented).
SCENE_CRS = "EPSG:32633"
SCENE_ORIGIN = (400000.0, 5600000.0)

#: Sizes accepted by :func:`make_scene` (pixels per side).
MIN_SIZE, MAX_SIZE = 64, 16384


@dataclass(frozen=True, eq=False)
class ScenePlan:
    """What a style builder returns: the recipe and the truth, in pixels."""

    recipe: Recipe
    pixel_size_m: float
    band_names: tuple[str, ...]
    col_px: np.ndarray
    row_px: np.ndarray
    diameter_px: np.ndarray
    kind: np.ndarray
    diameter_range_m: tuple[float, float]
    bands_option: str = ""
    extras: dict = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class Scene:
    """One synthetic survey scene with its ground truth.

    Attributes
    ----------
    style : str
        The style name (a key of :data:`ecoscan.synthetic.SCENE_STYLES`).
    seed : int
        Seed it was made from (same seed, same bytes).
    size_px : int
        Rows and columns (square).
    pixel_size_m : float
        Ground pixel size, metres.
    transform : affine.Affine
        Pixel-to-map transform (north up) in :attr:`crs`.
    crs : str
        A metric UTM CRS (``EPSG:32633``).
    band_names : tuple of str
        Band descriptions in file order (``red, green, blue`` or
        ``blue, green, red, nir``).
    dtype : str
        ``uint8`` or ``uint16``.
    col_px, row_px : numpy.ndarray
        Plant centres in pixels (the centre of the top-left pixel is 0, 0).
    x_m, y_m : numpy.ndarray
        Plant centres in map metres.
    diameter_m : numpy.ndarray
        Crown diameters in metres (twice the mean outline radius).
    kind : numpy.ndarray of str
        What each plant is in the style (``green``, ``dry``, ``planted``, ...).
    diameter_range_m : (float, float)
        The range the crowns were drawn from: pass it as ``--diameter``.
    bands_option : str
        What to pass as ``--bands`` ("" when the default band order is right).
    description : str
        One line on the style.
    extras : dict
        Style facts for checks (e.g. ``jpeg_quality``, masks of non-plant features are not
        stored; see the style module).
    """

    style: str
    seed: int
    size_px: int
    pixel_size_m: float
    transform: Affine
    crs: str
    band_names: tuple[str, ...]
    dtype: str
    col_px: np.ndarray
    row_px: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    diameter_m: np.ndarray
    kind: np.ndarray
    diameter_range_m: tuple[float, float]
    bands_option: str
    description: str
    recipe: Recipe = field(repr=False)
    extras: dict = field(default_factory=dict, repr=False)

    @property
    def n(self) -> int:
        """Number of plants in the truth."""
        return int(self.x_m.size)

    @property
    def diameter_option(self) -> str:
        """The ``--diameter`` value for ``ecoscan detect``, e.g. ``"0.6:2"``."""
        lo, hi = self.diameter_range_m
        return f"{lo:g}:{hi:g}"

    @property
    def shape(self) -> tuple[int, int, int]:
        """(bands, rows, columns)."""
        return (len(self.band_names), self.size_px, self.size_px)

    def strips(self) -> Iterator[tuple[int, np.ndarray]]:
        """Render the image strip by strip: yields ``(first_row, array)``.

        Memory stays bounded by one strip (512 rows) and its working copies, whatever
        the size.
        """
        for r0 in range(0, self.size_px, STRIP_ROWS):
            yield r0, self.recipe.render(r0, min(self.size_px, r0 + STRIP_ROWS))

    @cached_property
    def image(self) -> np.ndarray:
        """The whole image, (bands, rows, columns) in :attr:`dtype` (rendered on first use)."""
        out = np.empty(self.shape, dtype=self.dtype)
        for r0, strip in self.strips():
            out[:, r0 : r0 + strip.shape[1]] = strip
        return out

    def render_rows(self, r0: int, r1: int) -> np.ndarray:
        """Render image rows ``[r0, r1)`` only (for checks on part of a large scene).

        Rows are rendered in whole strips, so they equal the same rows of :attr:`image`.
        """
        s0 = (r0 // STRIP_ROWS) * STRIP_ROWS
        parts = [
            self.recipe.render(s, min(self.size_px, s + STRIP_ROWS))
            for s in range(s0, r1, STRIP_ROWS)
        ]
        return np.concatenate(parts, axis=1)[:, r0 - s0 : r1 - s0]


def make_scene(style: str, size_px: int = 800, seed: int = 0) -> Scene:
    """Make one synthetic survey scene of a style, with its ground truth.

    Parameters
    ----------
    style : str
        One of :data:`ecoscan.synthetic.SCENE_STYLES`.
    size_px : int
        Rows and columns of the square raster (64–16384). The plant density per hectare
        is fixed by the style, so larger scenes hold more plants.
    seed : int
        Random seed; the same style, size and seed give the same bytes.

    Returns
    -------
    Scene
        The image is rendered lazily (:attr:`Scene.image`, :meth:`Scene.strips`).

    Raises
    ------
    InputError
        Unknown style or an implausible size.

    Examples
    --------
    >>> from ecoscan.synthetic import make_scene
    >>> sc = make_scene("dry-shrubs", size_px=256, seed=1)
    >>> sc.image.shape, sc.image.dtype.name, sc.crs
    ((3, 256, 256), 'uint8', 'EPSG:32633')
    >>> bool(sc.n > 10)
    True
    """
    from ecoscan.synthetic.styles import BUILDERS, SCENE_STYLES

    if style not in BUILDERS:
        raise InputError(f"unknown scene style {style!r}; choose one of {', '.join(SCENE_STYLES)}")
    size = int(size_px)
    if not MIN_SIZE <= size <= MAX_SIZE:
        raise InputError(
            f"scene size {size_px} px is out of range; choose {MIN_SIZE} to {MAX_SIZE} pixels"
        )
    plan: ScenePlan = BUILDERS[style](size, int(seed))
    ps = plan.pixel_size_m
    x0, y0 = SCENE_ORIGIN
    transform = from_origin(x0, y0, ps, ps)
    x = x0 + (plan.col_px + 0.5) * ps
    y = y0 - (plan.row_px + 0.5) * ps
    return Scene(
        style=style,
        seed=int(seed),
        size_px=size,
        pixel_size_m=ps,
        transform=transform,
        crs=SCENE_CRS,
        band_names=plan.band_names,
        dtype=plan.recipe.dtype,
        col_px=plan.col_px,
        row_px=plan.row_px,
        x_m=x,
        y_m=y,
        diameter_m=plan.diameter_px * ps,
        kind=plan.kind,
        diameter_range_m=plan.diameter_range_m,
        bands_option=plan.bands_option,
        description=SCENE_STYLES[style],
        recipe=plan.recipe,
        extras=dict(plan.extras),
    )


@dataclass(frozen=True)
class ScenePaths:
    """Files written by :func:`write_scene`."""

    raster: Path
    truth: Path
    plots: Path
    metadata: Path


def training_plots(scene: Scene, fraction: float = 0.12):
    """Two plots: ``train``, a square in the top-left corner covering ``fraction`` of the
    scene, and ``test``, the rest of the scene (an L-shaped polygon).

    Returns
    -------
    ecoscan.model.plots.PlotLayer

    Examples
    --------
    >>> layer = training_plots(make_scene("coarse", 100, 0))
    >>> layer.ids, round(layer.plots[0].geometry.area / 625.0, 2)
    (['train', 'test'], 0.12)
    """
    import shapely
    from pyproj import CRS

    from ecoscan.model.plots import Plot, PlotLayer

    x0, y0 = SCENE_ORIGIN
    side = scene.size_px * scene.pixel_size_m
    t = side * float(np.sqrt(fraction))
    whole = shapely.box(x0, y0 - side, x0 + side, y0)
    train = shapely.box(x0, y0 - t, x0 + t, y0)
    test = whole.difference(train)
    return PlotLayer(
        [Plot("train", train, {}), Plot("test", test, {})], CRS.from_user_input(scene.crs)
    )


def write_scene(scene: Scene, folder: str | os.PathLike, *, name: str | None = None) -> ScenePaths:
    """Write a scene: GeoTIFF, truth points CSV, plots GeoPackage and a JSON of settings.

    The GeoTIFF is written strip by strip (tiled, deflate), so memory stays bounded at any
    size. The truth CSV is the points format ``ecoscan validate`` reads as reference
    (``x, y`` in metres, then ``diameter_m`` and ``kind``; CRS in a ``.prj`` beside it).
    The plots file holds ``train`` (the top-left 12 % of the scene) and ``test`` (the rest).

    Parameters
    ----------
    scene : Scene
        From :func:`make_scene`.
    folder : path-like
        Created if missing.
    name : str, optional
        File stem; default ``{style}_{size}_s{seed}``.

    Returns
    -------
    ScenePaths

    Examples
    --------
    >>> import tempfile
    >>> from ecoscan.synthetic import make_scene, write_scene
    >>> paths = write_scene(make_scene("coarse", 128, 0), tempfile.mkdtemp())
    >>> paths.raster.suffix, paths.truth.suffix
    ('.tif', '.csv')
    """
    import rasterio
    from pyproj import CRS

    from ecoscan.io.outputs import atomic_path
    from ecoscan.io.vector import write_plots, write_points
    from ecoscan.model.points import PointSet

    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    stem = name or f"{scene.style}_{scene.size_px}_s{scene.seed}"
    tif = out / f"{stem}.tif"
    nb = len(scene.band_names)
    with atomic_path(tif) as tmp:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=scene.size_px,
            height=scene.size_px,
            count=nb,
            dtype=scene.dtype,
            transform=scene.transform,
            crs=scene.crs,
            tiled=True,
            blockxsize=256,
            blockysize=256,
            compress="deflate",
            photometric="RGB" if nb == 3 else "MINISBLACK",
        ) as dst:
            for i, b in enumerate(scene.band_names, start=1):
                dst.set_band_description(i, b)
            for r0, strip in scene.strips():
                win = rasterio.windows.Window(0, r0, scene.size_px, strip.shape[1])
                dst.write(strip, window=win)
    crs = CRS.from_user_input(scene.crs)
    pts = PointSet(
        scene.x_m.copy(),
        scene.y_m.copy(),
        {"diameter_m": np.round(scene.diameter_m, 3), "kind": scene.kind.astype(object)},
        crs,
    )
    truth = write_points(pts, out / f"{stem}_truth.csv")
    plots = write_plots(training_plots(scene), out / f"{stem}_plots.gpkg")
    meta = {
        "style": scene.style,
        "description": scene.description,
        "seed": scene.seed,
        "size_px": scene.size_px,
        "pixel_size_m": scene.pixel_size_m,
        "crs": scene.crs,
        "band_names": list(scene.band_names),
        "dtype": scene.dtype,
        "plants": scene.n,
        "diameter_option": scene.diameter_option,
        "bands_option": scene.bands_option,
    }
    meta_path = out / f"{stem}_scene.json"
    with atomic_path(meta_path) as tmp:
        tmp.write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")
    return ScenePaths(tif, truth, plots, meta_path)
