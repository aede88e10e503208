"""Survey plots: :class:`Plot` and :class:`PlotLayer` (polygons in a metric CRS)."""

from __future__ import annotations

from dataclasses import dataclass, field

import shapely
from pyproj import CRS

__all__ = ["Plot", "PlotLayer"]


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
