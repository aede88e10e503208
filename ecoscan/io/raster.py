"""Opening and checking rasters, windowed reads with masks, and global statistics.

Rasters are read with rasterio (GDAL), so GeoTIFF and any GDAL format work. Validity comes
from GDAL's dataset mask, which combines nodata values, internal masks and alpha bands.
Pixel sizes are in metres: projected rasters in feet are converted with the CRS unit factor,
geographic rasters get the ground size of a pixel at the raster centre (and detected points
are reprojected to the local UTM zone by the caller). A raster without georeferencing is
refused unless a pixel size is given; its coordinates are then local, pixel-based metres
with the origin at the lower-left corner and y pointing up.
"""

from __future__ import annotations

import contextlib
import math
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import rasterio
from pyproj import CRS
from rasterio.enums import MaskFlags
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.transform import Affine
from rasterio.windows import Window

from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, to_metric, transform_xy

if TYPE_CHECKING:  # tile workers import this module: keep the vector stack out of them
    from ecoscan.model.plots import PlotLayer

__all__ = [
    "RasterInfo",
    "is_gdal_virtual",
    "open_raster",
    "pixel_to_map",
    "plots_from_mask",
    "read_decimated",
    "read_window",
    "window_polygons",
]


@dataclass(frozen=True)
class RasterInfo:
    """What ecoscan needs to know about a raster before reading it.

    Attributes
    ----------
    path : str
        The file (absolute), or the GDAL virtual path or URL as given.
    width, height : int
        Columns and rows.
    count : int
        Number of data bands (alpha bands excluded).
    dtype : str
        Data type of the first band, e.g. ``uint8``, ``float32``.
    transform : affine.Affine
        Pixel-corner to map transform (for a raster without georeferencing: a local one in
        metres built from the given pixel size).
    crs : pyproj.CRS or None
        The raster's CRS; None for local pixel-based coordinates.
    pixel_size_m : float
        Ground size of one pixel in metres (geometric mean of width and height).
    descriptions : tuple of str
        Band descriptions (lower case, '' when unset), one per data band.
    colorinterp : tuple of str
        GDAL colour interpretation per data band (``red``, ``green``, ``undefined``...).
    data_bands : tuple of int
        1-based indices of the data bands (alpha bands are left out).
    always_valid : tuple of int
        1-based bands with no nodata value, internal mask or alpha band and an integer
        type, so that no pixel of them can be invalid (:func:`all_pixels_valid`).
    notes : list of str
        What was assumed or converted, for the user.
    """

    path: str
    width: int
    height: int
    count: int
    dtype: str
    transform: Affine
    crs: CRS | None
    pixel_size_m: float
    descriptions: tuple[str, ...]
    colorinterp: tuple[str, ...]
    data_bands: tuple[int, ...]
    always_valid: tuple[int, ...] = ()
    local: bool = False
    notes: list[str] = field(default_factory=list)

    @property
    def shape(self) -> tuple[int, int]:
        """Rows, columns."""
        return self.height, self.width

    @property
    def megapixels(self) -> float:
        """Raster size in megapixels."""
        return self.width * self.height / 1e6


def _unit_factor(crs: CRS) -> float:
    for ax in crs.axis_info:
        if ax.direction in ("east", "north", "west", "south"):
            return float(ax.unit_conversion_factor or 1.0)
    return 1.0


def _ground_pixel_size(transform: Affine, crs: CRS, width: int, height: int) -> float:
    """Ground pixel size in metres at the raster centre for a geographic or odd-unit CRS."""
    c, r = width / 2.0, height / 2.0
    cc = np.array([c, c + 1, c])
    rr = np.array([r, r, r + 1])
    xs = np.column_stack(transform @ (cc, rr))
    _x, _y, frame = to_metric(xs[:, 0], xs[:, 1], crs)
    mx, my = transform_xy(xs[:, 0], xs[:, 1], crs, frame.crs)
    dx = math.hypot(mx[1] - mx[0], my[1] - my[0])
    dy = math.hypot(mx[2] - mx[0], my[2] - my[0])
    return math.sqrt(dx * dy)


def is_gdal_virtual(path: str) -> bool:
    """True for a path GDAL reads through a virtual file system or a URL rather than from
    a local file: ``/vsis3/...``, ``/vsicurl/...``, ``/vsizip/...``, ``https://...``.

    Examples
    --------
    >>> is_gdal_virtual("/vsis3/survey-bucket/ortho.tif"), is_gdal_virtual("ortho.tif")
    (True, False)
    """
    return path.startswith("/vsi") or "://" in path


def open_raster(path: str | os.PathLike, *, pixel_size_m: float | None = None) -> RasterInfo:
    """Open a raster, check it, and describe it in metres.

    Parameters
    ----------
    path : path-like
        GeoTIFF or any raster GDAL reads: a local file, or a path GDAL reads remotely
        (``/vsis3/bucket/ortho.tif``, ``https://.../ortho.tif``, ``/vsizip/...``).
    pixel_size_m : float, optional
        Pixel size in metres for a raster without georeferencing (required then); with a
        georeferenced raster it is ignored and a note says so.

    Returns
    -------
    RasterInfo

    Raises
    ------
    InputError
        Missing, unreadable or truncated file; no georeferencing and no pixel size; a
        non-positive pixel size.
    """
    text = os.fspath(path)
    remote = is_gdal_virtual(text)
    p = Path(text)  # for its name in messages; a remote path is opened as given
    if not remote and not p.exists():
        raise InputError(f"raster file {str(p)!r} does not exist; check the path")
    if p.is_dir():
        raise InputError(f"raster path {str(p)!r} is a folder; give the raster file itself")
    notes: list[str] = []
    info, data_bands, desc = _read_header(text if remote else p, p.name)
    transform, ps, local = _ground_frame(p.name, info, pixel_size_m, notes)
    return RasterInfo(
        # absolute, so that a tile job read elsewhere (another process or a Dask worker
        # started in another folder) opens the same file
        path=text if remote else str(p.absolute()),
        width=info["width"],
        height=info["height"],
        count=len(data_bands),
        dtype=info["dtype"],
        transform=transform,
        crs=None if local else info["crs"],
        pixel_size_m=ps,
        descriptions=desc,
        colorinterp=info["colorinterp"],
        data_bands=data_bands,
        always_valid=info["always_valid"],
        local=local,
        notes=notes,
    )


def _read_header(
    source: str | Path, name: str
) -> tuple[dict[str, Any], tuple[int, ...], tuple[str, ...]]:
    """The raster's size, transform, CRS and data bands, checked by reading one pixel."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(source) as src:
                if src.count < 1:
                    raise InputError(f"{name} has no bands")
                # read one pixel at the far corner: catches many truncated files early
                src.read(1, window=Window(src.width - 1, src.height - 1, 1, 1))
                ci = tuple(c.name for c in src.colorinterp)
                data_bands = tuple(i + 1 for i, c in enumerate(ci) if c != "alpha")
                if not data_bands:
                    raise InputError(f"{name} holds only an alpha band; it has no data")
                desc = tuple((src.descriptions[i - 1] or "").strip().lower() for i in data_bands)
                info = dict(
                    width=src.width,
                    height=src.height,
                    transform=src.transform,
                    crs=CRS.from_user_input(src.crs.to_wkt()) if src.crs else None,
                    dtype=src.dtypes[data_bands[0] - 1],
                    colorinterp=tuple(ci[i - 1] for i in data_bands),
                    always_valid=tuple(
                        b for b in range(1, src.count + 1) if all(_mask_facts(src, (b,)))
                    ),
                )
    except InputError:
        raise
    except (RasterioIOError, rasterio.errors.RasterioError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(
            f"cannot read raster {name}: {msg}; give a GeoTIFF or another raster GDAL reads "
            "(the file may be truncated or not a raster)"
        ) from None
    return info, data_bands, desc


def _ground_frame(
    name: str, info: dict[str, Any], pixel_size_m: float | None, notes: list[str]
) -> tuple[Affine, float, bool]:
    """The transform to use, the ground pixel size in metres, and whether it is local."""
    transform: Affine = info["transform"]
    crs: CRS | None = info["crs"]
    georef = not transform.is_identity or crs is not None
    local = False
    if not georef:
        if pixel_size_m is None:
            raise InputError(
                f"{name} has no georeferencing (no CRS and no pixel size); give "
                "--pixel-size METRES to work in local pixel-based coordinates"
            )
        if not pixel_size_m > 0:
            raise InputError(f"--pixel-size must be positive (got {pixel_size_m})")
        ps = float(pixel_size_m)
        transform = Affine(ps, 0, 0, 0, -ps, info["height"] * ps)
        local = True
        notes.append(
            f"{name} has no georeferencing; points are in local pixel-based coordinates "
            f"(metres from the lower-left corner, {ps:g} m per pixel)"
        )
    else:
        if pixel_size_m is not None:
            notes.append(f"--pixel-size is ignored: {name} carries its own georeferencing")
        sx = math.hypot(transform.a, transform.d)
        sy = math.hypot(transform.b, transform.e)
        if crs is None:
            ps = math.sqrt(sx * sy)
            notes.append(f"{name} has no CRS; its map units are taken as metres")
        elif crs.is_geographic:
            ps = _ground_pixel_size(transform, crs, info["width"], info["height"])
            notes.append(
                f"{name} is in {crs_label(crs)} (degrees); pixel size taken as {ps:.3g} m at "
                "the raster centre and points are reprojected to the local UTM zone"
            )
        else:
            f = _unit_factor(crs)
            ps = math.sqrt(sx * sy) * f
            if abs(f - 1.0) > 1e-9:
                notes.append(
                    f"{name} is in {crs_label(crs)} with units of {f:.6g} m; pixel size "
                    f"converted to {ps:.3g} m"
                )
        if not (ps > 0 and math.isfinite(ps)):
            raise InputError(f"{name} has a zero or invalid pixel size; fix its georeferencing")
        if abs(sx - sy) > 0.01 * max(sx, sy):
            notes.append(f"{name} has non-square pixels; the mean pixel size {ps:.3g} m is used")
    return transform, ps, local


#: GDAL's block cache (default 5 % of RAM) would otherwise grow with the raster while a
#: decimated read walks every block; ecoscan reads each block once, so a small cache is enough.
GDAL_CACHE_MB = 64


def _open(info: RasterInfo):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        return rasterio.open(info.path)


def _env() -> rasterio.Env:
    # rasterio passes an integer GDAL_CACHEMAX to GDAL as bytes
    return rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB * 1024 * 1024)


@contextlib.contextmanager
def opened(info: RasterInfo):
    """The raster open for several :func:`read_window` calls (``src=``), with ecoscan's
    GDAL settings: blocks that neighbouring windows share (their overlaps) are then
    decoded once, from GDAL's block cache (at most ``GDAL_CACHE_MB``).

    Examples
    --------
    >>> with opened(info) as src:  # doctest: +SKIP
    ...     data, valid = read_window(info, (1, 2, 3), (0, 0, 256, 256), src=src)
    """
    with _env(), _open(info) as src:
        yield src


def _mask_facts(src, bands) -> tuple[bool, bool]:
    """(no GDAL mask on any of the bands, none of them a floating-point type)."""
    unmasked = all(src.mask_flag_enums[b - 1] == [MaskFlags.all_valid] for b in bands)
    floating = any(np.issubdtype(np.dtype(src.dtypes[b - 1]), np.floating) for b in bands)
    return unmasked, not floating


def all_pixels_valid(info: RasterInfo, bands: tuple[int, ...]) -> bool:
    """True when no pixel of these bands can be invalid, known without reading pixels.

    That is when GDAL reports no nodata value, internal mask or alpha band for them and
    their type is an integer (always finite): :func:`read_window` then marks every pixel
    valid.

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> from rasterio.transform import from_origin
    >>> from ecoscan.synthetic import write_geotiff
    >>> p = write_geotiff(tempfile.mkdtemp() + "/a.tif", np.zeros((1, 8, 8), np.uint8),
    ...                   from_origin(0, 8, 1, 1), "EPSG:32631")
    >>> all_pixels_valid(open_raster(p), (1,))
    True
    """
    return all(b in info.always_valid for b in bands)


def read_window(
    info: RasterInfo,
    bands: tuple[int, ...],
    window: tuple[int, int, int, int],
    *,
    skip_empty: bool = False,
    src=None,
) -> tuple[np.ndarray | None, np.ndarray]:
    """Read bands in a pixel window, with the validity mask.

    Parameters
    ----------
    info : RasterInfo
        The raster.
    bands : tuple of int
        1-based band indices.
    window : (col0, row0, col1, row1)
        Pixel window, end exclusive, inside the raster.
    skip_empty : bool
        When every pixel is masked, return ``None`` for the data without reading the pixels
        (only GDAL's masks are read).
    src : rasterio dataset, optional
        The raster already open (:func:`opened`); by default it is opened for this read.

    Returns
    -------
    data : numpy.ndarray or None
        float32, shape (len(bands), rows, columns); None for an empty window with
        ``skip_empty``.
    valid : numpy.ndarray
        bool, shape (rows, columns): False where GDAL's mask (nodata, internal mask or
        alpha) marks a pixel invalid in any of the bands, or the value is not finite.
    """
    c0, r0, c1, r1 = window
    win = Window(c0, r0, c1 - c0, r1 - r0)
    try:
        with contextlib.nullcontext(src) if src is not None else opened(info) as ds:
            unmasked, integer = _mask_facts(ds, bands)
            if unmasked:  # no nodata value, internal mask or alpha: GDAL's mask is all valid
                valid = np.ones((win.height, win.width), dtype=bool)
            else:
                valid = np.all(ds.read_masks(list(bands), window=win) > 0, axis=0)
            if skip_empty and not valid.any():
                return None, valid
            data = _read_float32(ds, bands, win)
    except RasterioIOError as exc:
        raise InputError(
            f"cannot read pixels {c0}-{c1}, {r0}-{r1} of {Path(info.path).name}: "
            f"{str(exc).splitlines()[0]}; the file may be truncated"
        ) from None
    if not integer:  # integer bands are always finite
        valid &= np.all(np.isfinite(data), axis=0)
    return data, valid


def _read_float32(src, bands: tuple[int, ...], win: Window) -> np.ndarray:
    """Bands as float32. Integer bands of at most 16 bits (exact in float32) are read in
    their own type and converted here: the same values, a tenth less CPU than GDAL's
    conversion while reading."""
    types = {np.dtype(src.dtypes[b - 1]) for b in bands}
    if len(types) == 1 and (kind := types.pop()).kind in "ui" and kind.itemsize <= 2:
        raw = src.read(list(bands), window=win)
        data = np.empty(raw.shape, np.float32)
        data[...] = raw
        return data
    return src.read(list(bands), window=win, out_dtype="float32")


def read_decimated(
    info: RasterInfo, bands: tuple[int, ...], max_pixels: int = 4_000_000
) -> tuple[np.ndarray, np.ndarray]:
    """Read the whole raster at reduced resolution, strip by strip, for global statistics.

    Parameters
    ----------
    info : RasterInfo
        The raster.
    bands : tuple of int
        1-based band indices.
    max_pixels : int
        Largest number of pixels to read per band; the raster is decimated by a whole factor
        to fit.

    Returns
    -------
    data, valid : numpy.ndarray
        As :func:`read_window`, at the decimated resolution.
    """
    f = max(1, math.ceil(math.sqrt(info.width * info.height / max_pixels)))
    out_h, out_w = max(1, info.height // f), max(1, info.width // f)
    span_w = min(info.width, out_w * f)
    data = np.empty((len(bands), out_h, out_w), dtype=np.float32)
    masks = np.empty((len(bands), out_h, out_w), dtype=np.uint8)
    try:
        with _env(), _open(info) as src:
            # strips about one block high, so that every block is decoded once while the
            # data and the masks of the strip are read (a small block cache suffices)
            block_h = max(1, src.block_shapes[0][0]) if src.block_shapes else 256
            step = max(1, math.ceil(block_h / f))  # output rows per strip
            for o0 in range(0, out_h, step):
                o1 = min(out_h, o0 + step)
                r0 = o0 * f
                r1 = min(info.height, o1 * f)
                win = Window(0, r0, span_w, r1 - r0)
                shp = (len(bands), o1 - o0, out_w)
                data[:, o0:o1] = src.read(
                    list(bands), window=win, out_shape=shp, out_dtype="float32"
                )
                masks[:, o0:o1] = src.read_masks(list(bands), window=win, out_shape=shp)
    except RasterioIOError as exc:
        raise InputError(
            f"cannot read {Path(info.path).name}: {str(exc).splitlines()[0]}; "
            "the file may be truncated"
        ) from None
    valid = np.all(masks > 0, axis=0) & np.all(np.isfinite(data), axis=0)
    return data, valid


def pixel_to_map(info: RasterInfo, col: np.ndarray, row: np.ndarray) -> tuple[np.ndarray, ...]:
    """Map coordinates of pixel positions (pixel centres at integer col, row).

    Parameters
    ----------
    info : RasterInfo
        The raster.
    col, row : numpy.ndarray
        Sub-pixel column and row, 0 at the centre of the first pixel.

    Returns
    -------
    x, y : numpy.ndarray
        Coordinates in the raster's CRS (or local metres).
    """
    # the affine library's own product (x = a·col + b·row + c, y = d·col + e·row + f), not
    # rasterio.transform.xy, whose matrix product can round the last bit differently
    return info.transform @ (np.asarray(col, float) + 0.5, np.asarray(row, float) + 0.5)


def window_polygons(
    transform: Affine,
    col_off: np.ndarray | float,
    row_off: np.ndarray | float,
    width: np.ndarray | float,
    height: np.ndarray | float,
) -> np.ndarray:
    """Outlines of pixel windows in map coordinates, one polygon per window.

    The four pixel corners go through the affine transform, so a rotated raster gives its
    true quadrilateral (``rasterio.windows.bounds`` gives the bounding box instead).

    Parameters
    ----------
    transform : affine.Affine
        Pixel-to-map transform.
    col_off, row_off, width, height : array-like or float
        Windows in pixels (broadcast together).

    Returns
    -------
    numpy.ndarray of shapely.Polygon

    Examples
    --------
    >>> from rasterio.transform import from_origin
    >>> t = from_origin(500000.0, 4100000.0, 0.5, 0.5)
    >>> window_polygons(t, 0, 0, 100, 40)[0].bounds
    (500000.0, 4099980.0, 500050.0, 4100000.0)
    """
    import shapely

    c0, r0, w, h = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(v, float)) for v in (col_off, row_off, width, height))
    )
    c1, r1 = c0 + w, r0 + h
    cs = np.stack([c0, c1, c1, c0], axis=1)
    rs = np.stack([r0, r0, r1, r1], axis=1)
    xs, ys = transform @ (cs, rs)
    return shapely.polygons(np.stack([xs, ys], axis=2))


def plots_from_mask(path: str | os.PathLike, *, pixel_size_m: float | None = None) -> PlotLayer:
    """Turn a raster of plot ids (or a 0/1 mask) into plot polygons.

    Every non-zero, valid value becomes one plot whose id is that value; a 0/1 mask gives a
    single plot ``1``. Polygons come from :func:`rasterio.features.shapes` and are brought to
    a metric CRS like any plot layer.

    Parameters
    ----------
    path : path-like
        Single-band integer raster aligned with (or at least in the CRS of) the imagery.
    pixel_size_m : float, optional
        Pixel size in metres when the mask has no georeferencing.

    Returns
    -------
    PlotLayer

    Raises
    ------
    InputError
        Unreadable file, non-integer values, or no non-zero pixels.
    """
    import rasterio.features
    import shapely

    from ecoscan.io.vector import plots_from_geometries, reproject_geometries
    from ecoscan.model.plots import PlotLayer

    info = open_raster(path, pixel_size_m=pixel_size_m)
    if np.dtype(info.dtype).kind not in "iub":
        raise InputError(
            f"{Path(path).name} is not an integer raster; --mask needs plot ids or 0/1 values"
        )
    with _open(info) as src:
        band = src.read(info.data_bands[0])
        valid = src.read_masks(info.data_bands[0]) > 0
    use = valid & (band != 0)
    if not np.any(use):
        raise InputError(f"{Path(path).name} has no non-zero pixels; it marks no plot")
    values = band.astype(np.int32)
    geoms: dict[int, list] = {}
    for geom, val in rasterio.features.shapes(values, mask=use, transform=info.transform):
        geoms.setdefault(int(val), []).append(shapely.geometry.shape(geom))
    ids = sorted(geoms)
    polys = np.array([shapely.union_all(geoms[i]) for i in ids], dtype=object)
    crs = info.crs
    notes = list(info.notes)
    if crs is not None:
        coords = shapely.get_coordinates(polys)
        _x, _y, frame = to_metric(coords[:, 0], coords[:, 1], crs)
        if frame.reprojected_from is not None:
            polys = reproject_geometries(polys, crs, frame.crs)
            notes.append(frame.note.replace("input", "mask"))
        crs = frame.crs
    plots, more = plots_from_geometries(polys, [str(i) for i in ids], None, Path(path).name)
    return PlotLayer(plots, crs, notes + more)
