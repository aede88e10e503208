"""Survey plots: :class:`Plot` and :class:`PlotLayer` (polygons in a metric CRS)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely
from pyproj import CRS

__all__ = ["Plot", "PlotLayer", "id_text"]


def id_text(value: Any) -> str:
    """A plot, site or date value read from a table, as the text that identifies it.

    Whole numbers lose their decimal point (a plot id ``7`` read as ``7.0`` is ``"7"``),
    missing values (None, NaN) become ``""``, and surrounding spaces are removed.

    Parameters
    ----------
    value : Any
        The value as a table reader gave it.

    Returns
    -------
    str

    Examples
    --------
    >>> id_text(7.0), id_text(float("nan")), id_text(" P1 "), id_text(None)
    ('7', '', 'P1', '')
    """
    if value is None:
        return ""
    if isinstance(value, (float, np.floating)):
        if math.isnan(float(value)):
            return ""
        if float(value).is_integer():
            return str(int(value))
    return str(value).strip()


@dataclass
class Plot:
    """One survey plot.

    Attributes
    ----------
    plot_id : str
        The plot's identifier.
    geometry : shapely.Polygon or shapely.MultiPolygon
        The plot outline in the layer's metric CRS (holes allowed).
    attrs : dict
        Other fields of the feature.
    """

    plot_id: str
    geometry: shapely.Geometry
    attrs: dict = field(default_factory=dict)

    @property
    def area_m2(self) -> float:
        """Plot area in square metres."""
        return float(self.geometry.area)


@dataclass
class PlotLayer:
    """Plot polygons in a metric CRS, with notes on how they were read."""

    plots: list[Plot]
    crs: CRS | None
    notes: list[str] = field(default_factory=list)

    @property
    def ids(self) -> list[str]:
        """Plot ids in layer order."""
        return [p.plot_id for p in self.plots]
