"""Coordinate reference systems: parsing, checking units, and choosing a local UTM zone.

ecoscan never measures distances or areas in degrees. Coordinates in a geographic CRS, or in
a projected CRS whose unit is not the metre (e.g. US survey feet), are reprojected to the
local UTM zone, and the CRS used is reported to the user.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from ecoscan.errors import InputError

__all__ = [
    "MetricFrame",
    "crs_label",
    "looks_like_degrees",
    "parse_crs",
    "to_metric",
    "transform_xy",
    "utm_crs_for",
]


def parse_crs(value: str | CRS | None, *, what: str = "--crs") -> CRS | None:
    """Parse a CRS given as ``EPSG:XXXX``, WKT, a PROJ string or a :class:`pyproj.CRS`.

    Parameters
    ----------
    value : str, pyproj.CRS or None
        The CRS to parse. ``None`` or an empty string gives ``None``.
    what : str
        Where the value came from, used in the error message.

    Returns
    -------
    pyproj.CRS or None
    """
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    if isinstance(value, CRS):
        return value
    try:
        return CRS.from_user_input(value.strip())
    except CRSError:
        raise InputError(
            f"{what}: cannot understand the coordinate reference system {value!r}; "
            "give it as EPSG:XXXX (for example EPSG:32633 for UTM zone 33N)"
        ) from None


def crs_label(crs: CRS | None) -> str:
    """Short human label for a CRS, e.g. ``EPSG:32633 (WGS 84 / UTM zone 33N)``."""
    if crs is None:
        return "local coordinates (no CRS, assumed metres)"
    epsg = crs.to_epsg()
    return f"EPSG:{epsg} ({crs.name})" if epsg else crs.name


def _is_metre_projected(crs: CRS) -> bool:
    if not crs.is_projected:
        return False
    units = {
        (ax.unit_name or "").lower()
        for ax in crs.axis_info
        if ax.direction in ("east", "north", "west", "south")
    }
    return bool(units) and units <= {"metre", "meter", "m"}


def utm_crs_for(lon: float, lat: float) -> CRS:
    """The WGS 84 UTM zone CRS that holds a longitude/latitude position.

    Parameters
    ----------
    lon, lat : float
        Position in decimal degrees.

    Returns
    -------
    pyproj.CRS
        EPSG:326zz (northern hemisphere) or EPSG:327zz (southern).
    """
    zone = int(np.floor((lon + 180.0) / 6.0)) % 60 + 1
    return CRS.from_epsg((32600 if lat >= 0 else 32700) + zone)


def transform_xy(x: np.ndarray, y: np.ndarray, src: CRS, dst: CRS) -> tuple[np.ndarray, np.ndarray]:
    """Transform coordinate arrays from ``src`` to ``dst`` (x = easting/longitude first)."""
    if src == dst:
        return np.asarray(x, float), np.asarray(y, float)
    tr = Transformer.from_crs(src, dst, always_xy=True)
    xx, yy = tr.transform(np.asarray(x, float), np.asarray(y, float))
    return np.asarray(xx, float), np.asarray(yy, float)


@dataclass(frozen=True)
class MetricFrame:
    """The result of choosing a metric CRS for a set of coordinates.

    Attributes
    ----------
    crs : pyproj.CRS or None
        The CRS the coordinates are now in (None: local, assumed metres).
    reprojected_from : pyproj.CRS or None
        The original CRS when a reprojection was made, else None.
    note : str
        A sentence for the user saying what was done, empty when nothing was done.
    """

    crs: CRS | None
    reprojected_from: CRS | None
    note: str


def to_metric(
    x: np.ndarray, y: np.ndarray, crs: CRS | None
) -> tuple[np.ndarray, np.ndarray, MetricFrame]:
    """Bring coordinates into a CRS measured in metres.

    A projected CRS in metres is kept. A geographic CRS, or a projected CRS in another unit
    (feet), is reprojected to the UTM zone of the data's centre.

    Parameters
    ----------
    x, y : numpy.ndarray
        Coordinates in ``crs``.
    crs : pyproj.CRS or None
        Their CRS; None means local coordinates assumed to be metres.

    Returns
    -------
    x, y : numpy.ndarray
        Coordinates in metres.
    frame : MetricFrame
        The CRS used and a note for the user.
    """
    if crs is None or _is_metre_projected(crs):
        return np.asarray(x, float), np.asarray(y, float), MetricFrame(crs, None, "")
    geo = crs.geodetic_crs or CRS.from_epsg(4326)
    lon, lat = transform_xy(x, y, crs, geo)
    if lon.size:
        clon, clat = float(np.nanmedian(lon)), float(np.nanmedian(lat))
    else:
        clon, clat = 0.0, 0.0
    utm = utm_crs_for(clon, clat)
    xx, yy = transform_xy(x, y, crs, utm)
    why = "is geographic (degrees)" if crs.is_geographic else "is not in metres"
    note = f"input CRS {crs_label(crs)} {why}; reprojected to {crs_label(utm)}"
    return xx, yy, MetricFrame(utm, crs, note)


def looks_like_degrees(x: np.ndarray, y: np.ndarray) -> bool:
    """True when every coordinate fits longitude/latitude ranges and the spread is tiny.

    Used to refuse CSVs that carry no CRS but are most likely in decimal degrees.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if x.size == 0:
        return False
    in_range = bool(np.all(np.abs(x) <= 180.0) and np.all(np.abs(y) <= 90.0))
    has_fraction = bool(np.any(np.abs(x - np.round(x)) > 0) or np.any(np.abs(y - np.round(y)) > 0))
    spread = max(float(np.ptp(x)), float(np.ptp(y)))
    return in_range and has_fraction and spread < 5.0
