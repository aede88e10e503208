"""Reading and writing points and plot polygons (CSV, GeoPackage, GeoJSON, Shapefile).

Vector layers are read with pyogrio to WKB, which shapely 2 takes directly. Every CSV of points
that ecoscan writes has its CRS beside it in a sidecar ``NAME.prj`` (WKT), read back
automatically.
"""

from __future__ import annotations

import csv
import io
import math
import os
from pathlib import Path

import numpy as np
import pyogrio
import shapely
from pyproj import CRS

from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, looks_like_degrees, parse_crs, to_metric, transform_xy
from ecoscan.io.outputs import atomic_path, format_value
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.safety import check_coordinates

__all__ = [
    "as_stored",
    "plots_from_geometries",
    "points_csv_text",
    "read_plots",
    "read_points",
    "reproject_geometries",
    "sidecar_prj",
    "write_plots",
    "write_points",
]

VECTOR_SUFFIXES = {".gpkg", ".geojson", ".json", ".shp", ".fgb"}
PLOT_ID_FIELDS = ("plot_id", "id", "name")


def _check_exists(path: Path, what: str) -> None:
    if not path.exists():
        raise InputError(f"{what} file {str(path)!r} does not exist; check the path")
    if path.is_dir() and path.suffix.lower() not in {".gdb"}:
        raise InputError(f"{what} path {str(path)!r} is a folder; give the file itself")


def sidecar_prj(path: str | os.PathLike) -> Path:
    """The sidecar CRS file beside a CSV: ``points.csv`` -> ``points.prj``."""
    p = Path(path)
    return p.with_suffix(".prj")


# --------------------------------------------------------------------------- points: read


def _parse_float_column(values: list[str], name: str, path: Path) -> np.ndarray:
    out = np.empty(len(values))
    for i, v in enumerate(values):
        try:
            out[i] = float(v)
        except ValueError:
            raise InputError(
                f"{path.name}: row {i + 2} has {name} = {v!r}, which is not a number; "
                "fix or delete that row"
            ) from None
        if not math.isfinite(out[i]):
            raise InputError(
                f"{path.name}: row {i + 2} has a missing or infinite {name} ({v!r}); "
                "every point needs finite coordinates"
            )
    return out


#: Columns that hold labels even when every value looks like a number ("1", "2026").
TEXT_COLUMNS = {"plot_id", "plant_id", "id", "name", "site", "date", "raster", "status"}


def _attribute_column(values: list[str], name: str = "") -> np.ndarray:
    if name.lower() in TEXT_COLUMNS:
        return np.array(values, dtype=object)
    try:
        return np.array([float(v) if v.strip() else np.nan for v in values])
    except ValueError:
        return np.array(values, dtype=object)


def _read_prj(prj: Path) -> str:
    """The text of a sidecar CRS file; one-line errors for unreadable or non-text files."""
    try:
        return prj.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        try:  # WKT is ASCII; an old tool may have written Latin-1 names in it
            return prj.read_bytes().decode("latin-1")
        except OSError:
            pass
        raise InputError(f"{prj.name} is not a text file; it should hold the CRS as WKT") from None
    except OSError as exc:
        raise InputError(
            f"cannot read {prj}: {exc.strerror or exc}; check its permissions, or delete it and "
            "pass --crs"
        ) from None


def _read_points_csv(
    path: Path, allow_empty: bool = False
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            sample = fh.read(4096)
            fh.seek(0)
            try:
                dialect = csv.Sniffer().sniff(sample, delimiters=",;\t")
            except csv.Error:
                dialect = csv.excel
            rows = list(csv.reader(fh, dialect))
    except UnicodeDecodeError:
        raise InputError(f"{path.name} is not a text CSV file; save it as UTF-8 CSV") from None
    except OSError as exc:
        raise InputError(
            f"cannot read points file {path}: {exc.strerror or exc}; check the path and its "
            "permissions"
        ) from None
    except csv.Error as exc:
        raise InputError(f"{path.name} is not a readable CSV file ({exc}); check it") from None
    rows = [r for r in rows if any(c.strip() for c in r)]
    if not rows:
        raise InputError(f"{path.name} is empty; it needs a header row with x and y columns")
    header = [h.strip() for h in rows[0]]
    lower = [h.lower() for h in header]
    if "x" not in lower or "y" not in lower:
        shown = ", ".join(" ".join(h.split()) for h in header)  # one line, even if quoted
        raise InputError(
            f"{path.name} has no 'x' and 'y' columns (found: {shown or 'none'}); "
            "name the easting column x and the northing column y"
        )
    body = rows[1:]
    if not body and allow_empty:
        empty = np.empty(0)
        return (
            empty,
            empty.copy(),
            {
                h: np.empty(0)
                for h, lo in zip(header, lower, strict=True)
                if h and lo not in ("x", "y")
            },
        )
    if not body:
        raise InputError(f"{path.name} has a header but no points")
    ncol = len(header)
    for i, r in enumerate(body):
        if len(r) < ncol:
            body[i] = r + [""] * (ncol - len(r))
    cols = list(zip(*body, strict=False))
    ix, iy = lower.index("x"), lower.index("y")
    x = _parse_float_column([c.strip() for c in cols[ix]], header[ix], path)
    y = _parse_float_column([c.strip() for c in cols[iy]], header[iy], path)
    attrs = {}
    for j, name in enumerate(header):
        if j in (ix, iy) or not name:
            continue
        attrs[name] = _attribute_column(list(cols[j]), name)
    return x, y, attrs


def _read_layer(path: Path, layer: str | None, what: str):
    try:
        meta, _fids, geom, field_data = pyogrio.raw.read(path, layer=layer)
    except Exception as exc:  # pyogrio raises several DataSourceError/DataLayerError types
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(
            f"cannot read {what} file {path.name}: {msg}; give a GeoPackage, GeoJSON or Shapefile"
        ) from None
    geoms = shapely.from_wkb(geom) if geom is not None else np.array([], dtype=object)
    fields = [str(f) for f in meta.get("fields", [])]
    crs = parse_crs(meta.get("crs"), what=path.name) if meta.get("crs") else None
    if crs is not None and crs.is_geographic and len(geoms):
        _check_degree_ranges(shapely.get_coordinates(geoms), crs, path.name)
    return geoms, fields, list(field_data), crs


def _check_degree_ranges(coords: np.ndarray, crs: CRS, name: str) -> None:
    """Refuse coordinates a longitude/latitude CRS cannot hold (projected metres written
    into a GeoJSON file, which RFC 7946 fixes to WGS 84 longitude/latitude)."""
    out = (np.abs(coords[:, 0]) > 180.0) | (np.abs(coords[:, 1]) > 90.0)
    if np.any(out):
        x, y = coords[np.argmax(out)]
        raise InputError(
            f"{name}: coordinates such as ({x:.6g}, {y:.6g}) are outside longitude/latitude "
            f"ranges, but the file's CRS is {crs_label(crs)} (GeoJSON is always WGS 84 "
            "longitude/latitude, RFC 7946); write the file in longitude/latitude, or as a "
            "GeoPackage that stores its projected CRS"
        )


def _vector_attr(values) -> np.ndarray:
    arr = np.asarray(values)
    if arr.dtype.kind in "iufb":
        return arr.astype(float) if arr.dtype.kind != "b" else arr
    return np.array([("" if v is None else str(v)) for v in arr], dtype=object)


def read_points(
    path: str | os.PathLike,
    crs: str | CRS | None = None,
    *,
    layer: str | None = None,
    allow_empty: bool = False,
) -> PointSet:
    """Read plant positions and bring them into a metric CRS.

    Parameters
    ----------
    path : path-like
        A CSV with ``x`` and ``y`` columns (other columns become attributes; the CRS comes
        from a sidecar ``.prj`` if present), or a GeoPackage / GeoJSON / Shapefile point layer.
    crs : str or pyproj.CRS, optional
        The CRS of the coordinates (``EPSG:XXXX``). Needed only for CSVs from elsewhere; it
        overrides a sidecar or embedded CRS.
    layer : str, optional
        Layer name for multi-layer files such as GeoPackage.
    allow_empty : bool
        Accept a CSV with a header and no rows (ecoscan's own table of a raster where
        detection found nothing) and return an empty set; by default that is an error.

    Returns
    -------
    PointSet
        Coordinates in metres. Geographic or non-metre input is reprojected to the local UTM
        zone, and ``notes`` says so.

    Raises
    ------
    InputError
        Missing file, missing columns, non-numeric or missing coordinates, no points, or
        coordinates that look like degrees with no CRS.
    """
    p = Path(path)
    _check_exists(p, "points")
    user_crs = parse_crs(crs)
    notes: list[str] = []
    suffix = p.suffix.lower()
    if suffix in (".csv", ".txt", ".tsv"):
        x, y, attrs = _read_points_csv(p, allow_empty)
        file_crs = None
        prj = sidecar_prj(p)
        if prj.exists():
            file_crs = parse_crs(_read_prj(prj), what=prj.name)
    elif suffix in VECTOR_SUFFIXES:
        geoms, fields, data, file_crs = _read_layer(p, layer, "points")
        if len(geoms) == 0:
            raise InputError(f"{p.name} has no features; it needs a layer of points")
        types = shapely.get_type_id(geoms)
        if np.any(types == 4):  # MultiPoint: one row per part
            parts, index = shapely.get_parts(geoms, return_index=True)
            geoms, data = parts, [np.asarray(d)[index] for d in data]
            types = shapely.get_type_id(geoms)
        bad = (types != 0) | shapely.is_empty(geoms)
        if np.all(bad):
            raise InputError(
                f"{p.name} holds no point geometries; give a point layer (plots go to --plots)"
            )
        if np.any(bad):
            notes.append(f"{int(bad.sum())} non-point or empty features in {p.name} were skipped")
        keep = ~bad
        geoms = geoms[keep]
        x, y = shapely.get_x(geoms), shapely.get_y(geoms)
        attrs = {f: _vector_attr(np.asarray(d)[keep]) for f, d in zip(fields, data, strict=True)}
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
            raise InputError(f"{p.name} has points with missing coordinates; remove them")
    else:
        raise InputError(
            f"{p.name}: unknown points format {p.suffix!r}; use .csv, .gpkg, .geojson or .shp"
        )
    if x.size == 0 and not allow_empty:
        raise InputError(f"{p.name} contains no points")
    use_crs = user_crs or file_crs
    if user_crs is not None and file_crs is not None and user_crs != file_crs:
        notes.append(f"--crs {crs_label(user_crs)} overrides the CRS stored with {p.name}")
    if use_crs is None and looks_like_degrees(x, y):
        raise InputError(
            f"{p.name} has no CRS and its coordinates look like longitude/latitude degrees; "
            "pass --crs EPSG:4326 (or the right CRS) so distances can be computed in metres"
        )
    x, y, frame = to_metric(x, y, use_crs)
    check_coordinates(x, y, p.name)
    if frame.note:
        notes.append(frame.note)
    if use_crs is None:
        notes.append(f"{p.name} has no CRS; coordinates are taken as metres")
    return PointSet(x, y, attrs, frame.crs, notes)


# -------------------------------------------------------------------------- points: write


def _fields_for_write(points: PointSet) -> tuple[list[str], list[np.ndarray]]:
    names, data = [], []
    for k, v in points.attrs.items():
        arr = np.asarray(v)
        if arr.dtype.kind == "O":
            arr = np.array(["" if a is None else str(a) for a in arr], dtype=object)
        names.append(k)
        data.append(arr)
    return names, data


def _csv_cells(points: PointSet) -> tuple[list[str], list[str], dict[str, list[str]]]:
    """The cells of a points table as written: x, y to the millimetre, attributes formatted
    by :func:`ecoscan.outputs.format_value`."""
    xs = [f"{v:.3f}" for v in points.x]
    ys = [f"{v:.3f}" for v in points.y]
    cols = {k: [format_value(v) for v in points.attrs[k]] for k in points.attrs}
    return xs, ys, cols


def points_csv_text(points: PointSet) -> str:
    """The text of a CSV points table (``x``, ``y`` to the millimetre, then the attributes).

    :func:`write_points` writes exactly this; a caller that needs the file's bytes (e.g. to
    record their hash) takes them from here instead of reading the file back.

    Examples
    --------
    >>> import numpy as np
    >>> pts = PointSet(np.array([1.23456]), np.array([2.0]), {"plot_id": np.array(["A"])})
    >>> points_csv_text(pts)
    'x,y,plot_id\\n1.235,2.000,A\\n'
    """
    xs, ys, cols = _csv_cells(points)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")  # quotes cells holding , " or a newline
    w.writerow(["x", "y", *cols])
    w.writerows([xs[i], ys[i], *(c[i] for c in cols.values())] for i in range(points.n))
    return buf.getvalue()


def as_stored(points: PointSet) -> PointSet:
    """The points as a CSV points table stores them: what :func:`read_points` gives back.

    Coordinates are rounded to the millimetre and attributes pass through their text form
    (numbers to 6 significant digits, labels as text), exactly as writing the table and
    reading it again would give, without the file. Analysing these values makes a run and
    a rerun from stored tables agree to the last digit.

    Examples
    --------
    >>> import numpy as np
    >>> pts = PointSet(np.array([1.23456]), np.array([2.0]), {"score": np.array([0.1234567])})
    >>> s = as_stored(pts)
    >>> float(s.x[0]), float(s.attrs["score"][0])
    (1.235, 0.123457)
    """
    xs, ys, cols = _csv_cells(points)
    if not points.n:  # as read_points gives an empty table: every column empty floats
        attrs = {k: np.empty(0) for k in cols}
    else:
        attrs = {k: _attribute_column(v, k) for k, v in cols.items()}
    x = np.array([float(v) for v in xs], dtype=float)
    y = np.array([float(v) for v in ys], dtype=float)
    return PointSet(x, y, attrs, points.crs, list(points.notes))


def write_points(points: PointSet, path: str | os.PathLike, *, layer: str = "points") -> Path:
    """Write points atomically; the extension picks the format.

    Parameters
    ----------
    points : PointSet
        The points to write.
    path : path-like
        ``.csv`` (``x``, ``y`` first, then attributes; CRS in a sidecar ``.prj``), ``.gpkg``
        (CRS stored), or ``.geojson`` (reprojected to WGS 84 longitude/latitude, RFC 7946).
    layer : str
        Layer name inside a GeoPackage.

    Returns
    -------
    pathlib.Path
    """
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix == ".csv":
        if points.crs is not None:
            with atomic_path(sidecar_prj(p)) as tmp:
                tmp.write_text(points.crs.to_wkt(), encoding="utf-8")
        text = points_csv_text(points)
        with atomic_path(p) as tmp:
            tmp.write_text(text, encoding="utf-8")
        return p
    if suffix in (".gpkg", ".geojson", ".json"):
        x, y, crs = points.x, points.y, points.crs
        if suffix != ".gpkg" and crs is not None:
            wgs = CRS.from_epsg(4326)
            x, y = transform_xy(x, y, crs, wgs)
            crs = wgs
        geoms = shapely.to_wkb(shapely.points(x, y)) if points.n else np.array([], dtype=object)
        names, data = _fields_for_write(points)
        driver = "GPKG" if suffix == ".gpkg" else "GeoJSON"
        with atomic_path(p) as tmp:
            pyogrio.raw.write(
                tmp,
                np.asarray(geoms, dtype=object),
                data,
                names,
                layer=layer if driver == "GPKG" else None,
                driver=driver,
                geometry_type="Point",
                crs=crs.to_wkt() if crs is not None else None,
            )
        return p
    raise InputError(f"unknown output format {p.suffix!r}; use .csv, .gpkg or .geojson")


# ---------------------------------------------------------------------------------- plots


def reproject_geometries(geoms, src: CRS, dst: CRS):
    """Reproject shapely geometries from ``src`` to ``dst`` (vectorised over vertices)."""
    if src == dst:
        return geoms

    def _tr(coords: np.ndarray) -> np.ndarray:
        xx, yy = transform_xy(coords[:, 0], coords[:, 1], src, dst)
        return np.column_stack([xx, yy])

    return shapely.transform(geoms, _tr)


def _polygonal(geom):
    """Keep only the polygonal part of a geometry (after make_valid)."""
    if geom is None or geom.is_empty:
        return None
    t = geom.geom_type
    if t in ("Polygon", "MultiPolygon"):
        return geom
    if t == "GeometryCollection":
        polys = [g for g in shapely.get_parts(geom) if g.geom_type in ("Polygon", "MultiPolygon")]
        if not polys:
            return None
        return shapely.union_all(polys)
    return None


def plots_from_geometries(
    geoms,
    ids: list[str],
    attrs: list[dict] | None = None,
    source: str = "plots",
) -> tuple[list[Plot], list[str]]:
    """Build :class:`Plot` records, repairing invalid polygons and skipping non-polygons.

    Parameters
    ----------
    geoms : array of shapely geometries
        Candidate plot outlines.
    ids : list of str
        One id per geometry.
    attrs : list of dict, optional
        Other fields per geometry.
    source : str
        File name for messages.

    Returns
    -------
    plots : list of Plot
    notes : list of str
        What was repaired or skipped.
    """
    notes: list[str] = []
    plots: list[Plot] = []
    attrs = attrs or [{} for _ in ids]
    for g, pid, a in zip(geoms, ids, attrs, strict=True):
        if g is None or g.is_empty:
            continue
        if g.geom_type not in ("Polygon", "MultiPolygon"):
            notes.append(f"feature {pid} in {source} is a {g.geom_type}, not a polygon; skipped")
            continue
        if not g.is_valid:
            reason = shapely.is_valid_reason(g)
            g = _polygonal(shapely.make_valid(g))
            notes.append(f"plot {pid} in {source} was an invalid polygon ({reason}); repaired")
            if g is None:
                notes.append(f"plot {pid} has no area after repair; skipped")
                continue
        if g.area <= 0:
            notes.append(f"plot {pid} has zero area; skipped")
            continue
        plots.append(Plot(str(pid), g, a))
    return plots, notes


def read_plots(
    path: str | os.PathLike,
    *,
    target_crs: CRS | None = None,
    id_field: str | None = None,
    layer: str | None = None,
    points_have_crs: bool = True,
) -> PlotLayer:
    """Read plot polygons, pick their ids, repair them and bring them into a metric CRS.

    Parameters
    ----------
    path : path-like
        A GeoPackage, GeoJSON or Shapefile polygon layer. MultiPolygons and holes work.
    target_crs : pyproj.CRS, optional
        The CRS of the points the plots go with; plots are reprojected to it. When None the
        plots are brought to a metric CRS on their own (UTM for degrees).
    id_field : str, optional
        Field holding the plot id. Default: a field named ``plot_id``, ``id`` or ``name``
        (case-insensitive), else the feature number starting at 1.
    layer : str, optional
        Layer name for multi-layer files.
    points_have_crs : bool
        False when the points carry no CRS: then the plots must already be in metres, and the
        points are taken to share the plots' CRS.

    Returns
    -------
    PlotLayer

    Raises
    ------
    InputError
        Missing or unreadable file, unknown id field, duplicate ids, no polygons.
    """
    p = Path(path)
    _check_exists(p, "plots")
    geoms, fields, data, src_crs = _read_layer(p, layer, "plots")
    notes: list[str] = []
    lower = {f.lower(): f for f in fields}
    if id_field is not None:
        if id_field not in fields:
            match = lower.get(id_field.lower())
            if match is None:
                raise InputError(
                    f"{p.name} has no field {id_field!r} for plot ids "
                    f"(fields: {', '.join(fields) or 'none'}); choose one with --id-field"
                )
            id_field = match
        chosen = id_field
    else:
        chosen = next((lower[f] for f in PLOT_ID_FIELDS if f in lower), None)
    if chosen is not None:
        col = data[fields.index(chosen)]
        ids = [_id_text(v, i) for i, v in enumerate(col)]
    else:
        ids = [str(i + 1) for i in range(len(geoms))]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise InputError(
            f"{p.name}: plot ids are not unique ({', '.join(dup[:5])}); "
            "give a field with one id per plot using --id-field"
        )
    attrs = [
        {f: _plain(data[j][i]) for j, f in enumerate(fields) if f != chosen}
        for i in range(len(geoms))
    ]
    if len(geoms) and src_crs is not None:
        if target_crs is not None:
            if src_crs != target_crs:
                geoms = reproject_geometries(geoms, src_crs, target_crs)
                notes.append(
                    f"plots in {crs_label(src_crs)} were reprojected to the points' CRS "
                    f"{crs_label(target_crs)}"
                )
            out_crs = target_crs
        else:
            coords = shapely.get_coordinates(geoms)
            _x, _y, frame = to_metric(coords[:, 0], coords[:, 1], src_crs)
            if frame.reprojected_from is not None:
                if not points_have_crs:
                    raise InputError(
                        f"the points carry no CRS but the plots in {p.name} are in "
                        f"{crs_label(src_crs)}; pass --crs with the points' CRS"
                    )
                geoms = reproject_geometries(geoms, src_crs, frame.crs)
                notes.append(frame.note.replace("input", "plots"))
            elif not points_have_crs:
                notes.append(
                    f"points without CRS are taken to be in the plots' CRS {crs_label(src_crs)}"
                )
            out_crs = frame.crs
    else:
        out_crs = target_crs
        if len(geoms) and target_crs is not None:
            notes.append(
                f"{p.name} has no CRS; taken to be the points' CRS {crs_label(target_crs)}"
            )
    plots, more = plots_from_geometries(geoms, ids, attrs, p.name)
    notes += more
    if not plots:
        raise InputError(
            f"{p.name} contains no polygons with area; the plots layer needs polygon features"
        )
    return PlotLayer(plots, out_crs, notes)


def _id_text(v, i: int) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return str(i + 1)
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return str(v)


def _plain(v):
    if isinstance(v, np.generic):
        return v.item()
    return v


def write_plots(layer: PlotLayer, path: str | os.PathLike) -> Path:
    """Write plot outlines (GeoPackage or GeoJSON, by extension) atomically, with ``plot_id``."""
    p = Path(path)
    suffix = p.suffix.lower()
    geoms = [pl.geometry for pl in layer.plots]
    crs = layer.crs
    if suffix != ".gpkg" and crs is not None:
        wgs = CRS.from_epsg(4326)
        geoms = list(reproject_geometries(np.array(geoms, dtype=object), crs, wgs))
        crs = wgs
    geoms = [shapely.MultiPolygon([g]) if g.geom_type == "Polygon" else g for g in geoms]
    driver = "GPKG" if suffix == ".gpkg" else "GeoJSON"
    ids = np.array([pl.plot_id for pl in layer.plots], dtype=object)
    with atomic_path(p) as tmp:
        pyogrio.raw.write(
            tmp,
            np.array(shapely.to_wkb(geoms), dtype=object),
            [ids],
            ["plot_id"],
            layer="plots" if driver == "GPKG" else None,
            driver=driver,
            geometry_type="MultiPolygon",
            crs=crs.to_wkt() if crs is not None else None,
        )
    return p
