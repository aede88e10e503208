"""The :class:`PointSet`: plant positions in map coordinates with their attributes and CRS."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from pyproj import CRS

__all__ = ["PointSet"]


@dataclass
class PointSet:
    """Plant positions in a metric map CRS.

    Attributes
    ----------
    x, y : numpy.ndarray
        Easting and northing in metres, float64, shape (n,).
    attrs : dict of str to numpy.ndarray
        Per-point attributes (e.g. ``diameter_m``, ``height_m``, ``score``), each of shape (n,).
    crs : pyproj.CRS or None
        The CRS of ``x``, ``y``; None means local coordinates assumed to be metres.
    notes : list of str
        Sentences for the user about how the points were read (reprojection, assumptions).
    """

    x: np.ndarray
    y: np.ndarray
    attrs: dict[str, np.ndarray] = field(default_factory=dict)
    crs: CRS | None = None
    notes: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.x = np.ascontiguousarray(self.x, dtype=float)
        self.y = np.ascontiguousarray(self.y, dtype=float)
        if self.x.shape != self.y.shape or self.x.ndim != 1:
            raise ValueError("x and y must be 1-D arrays of the same length")
        for k, v in list(self.attrs.items()):
            v = np.asarray(v)
            if v.shape != self.x.shape:
                raise ValueError(f"attribute {k!r} has {v.shape[0]} values for {self.n} points")
            self.attrs[k] = v

    @property
    def n(self) -> int:
        """Number of points."""
        return int(self.x.size)

    @property
    def xy(self) -> np.ndarray:
        """Coordinates as an (n, 2) array."""
        return np.column_stack([self.x, self.y])

    def subset(self, mask: np.ndarray) -> PointSet:
        """The points where ``mask`` (boolean or index array) selects them."""
        return PointSet(
            self.x[mask],
            self.y[mask],
            {k: v[mask] for k, v in self.attrs.items()},
            self.crs,
            list(self.notes),
        )

    @classmethod
    def concat(cls, parts: list[PointSet]) -> PointSet:
        """Join point sets that share a CRS; attributes missing from a part are filled."""
        if not parts:
            return cls(np.empty(0), np.empty(0))
        keys: list[str] = []
        for p in parts:
            keys += [k for k in p.attrs if k not in keys]
        attrs = {}
        for k in keys:
            cols = []
            for p in parts:
                if k in p.attrs:
                    cols.append(p.attrs[k])
                else:
                    cols.append(np.full(p.n, np.nan))
            attrs[k] = np.concatenate(cols) if cols else np.empty(0)
        notes: list[str] = []
        for p in parts:
            notes += [s for s in p.notes if s not in notes]
        return cls(
            np.concatenate([p.x for p in parts]),
            np.concatenate([p.y for p in parts]),
            attrs,
            parts[0].crs,
            notes,
        )
