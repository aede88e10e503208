"""Result rows and tables of the Python API: attributes named like the CSV columns.

A :class:`Row` is a read-only mapping from column name (the heading of the matching CSV
file, see :mod:`ecoscan.vocabulary`) to value, whose columns are also attributes
(``row.R``, ``row.p_mc``). A :class:`Table` is a sequence of rows. Both convert to plain
Python (``to_dict``, ``to_records``) that pandas reads directly
(``pandas.DataFrame(table)`` or ``pandas.DataFrame(table.to_records())``), and carry the
``__geo_interface__`` protocol when their rows have a geometry, which GeoPandas
(``geopandas.GeoDataFrame.from_features(table)``) and shapely (``shapely.geometry.shape``)
read. Neither library is needed by ecoscan.

Their ``repr`` is one short line (a few key columns), never the simulated values behind a
result; the full internal record is kept in ``detail``.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping, Sequence
from typing import Any, ClassVar

import numpy as np

__all__ = ["Row", "Table", "plain"]


def plain(value: Any) -> Any:
    """A JSON-ready Python value: numpy scalars to int/float/bool/str, arrays to lists.

    Examples
    --------
    >>> plain(np.float64(1.5)), plain(np.int32(3)), plain(np.array([1, 2]))
    (1.5, 3, [1, 2])
    """
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def _short(value: Any, width: int = 40) -> str:
    """A value for a one-line repr: 4 significant digits (0.1 beyond 10 000), text cut at
    ``width``.

    Examples
    --------
    >>> _short(1.23456), _short(400001.2081), _short("x" * 50, 10)
    ('1.235', '400001.2', "'xxxxxxxxx…'")
    """
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        # coordinates keep their decimetres: 400001.2, not 4e+05
        return f"{value:.1f}" if abs(value) >= 1e4 else f"{value:.4g}"
    if isinstance(value, str):
        text = value if len(value) <= width else value[: width - 1] + "…"
        return repr(text)
    return repr(value)


class Row(Mapping[str, Any]):
    """One result row: a read-only mapping whose keys are also attributes.

    Parameters
    ----------
    values : mapping
        Column name -> value, in column order (numpy scalars become Python numbers).
    geometry : shapely geometry, optional
        Where the row is (a plot's polygon, a plant's point), for ``__geo_interface__``.
    detail : object, optional
        The full internal result the row was made from (arrays, simulated values).

    Examples
    --------
    >>> r = Row({"plot_id": "A", "n": 12, "R": 1.234567})
    >>> r.R, r["n"], r.to_dict()
    (1.234567, 12, {'plot_id': 'A', 'n': 12, 'R': 1.234567})
    >>> r
    Row(plot_id='A', n=12, R=1.235)
    """

    __slots__ = ("_geometry", "_values", "detail")

    #: Columns shown by ``repr`` (all when empty).
    SHOWN: ClassVar[tuple[str, ...]] = ()

    def __init__(
        self, values: Mapping[str, Any], *, geometry: Any = None, detail: Any = None
    ) -> None:
        self._values = {str(k): plain(v) for k, v in values.items()}
        self._geometry = geometry
        self.detail = detail

    def __getattr__(self, name: str) -> Any:
        if name.startswith("_"):
            raise AttributeError(name)
        try:
            return self._values[name]
        except KeyError:
            raise AttributeError(
                f"{type(self).__name__} has no column {name!r}; columns: {', '.join(self._values)}"
            ) from None

    def __getitem__(self, key: str) -> Any:
        return self._values[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def __dir__(self) -> list[str]:
        return sorted(set(super().__dir__()) | set(self._values))

    @property
    def columns(self) -> list[str]:
        """Column names, in order."""
        return list(self._values)

    @property
    def geometry(self) -> Any:
        """The row's shapely geometry (None when it has none)."""
        return self._geometry

    def to_dict(self) -> dict[str, Any]:
        """The row as a plain dict, in column order (a copy)."""
        return dict(self._values)

    @property
    def __geo_interface__(self) -> dict[str, Any]:
        """A GeoJSON-like Feature: the geometry and the columns as properties."""
        geom = self._geometry.__geo_interface__ if self._geometry is not None else None
        return {"type": "Feature", "geometry": geom, "properties": self.to_dict()}

    def __repr__(self) -> str:
        keys = [k for k in self.SHOWN if k in self._values] or list(self._values)
        return f"{type(self).__name__}({', '.join(f'{k}={_short(self._values[k])}' for k in keys)})"


class Table(Sequence[Row]):
    """An ordered collection of rows with the same columns (one CSV file).

    Parameters
    ----------
    rows : sequence of Row
    columns : sequence of str
        Column names in file order.
    name : str
        What the rows are (e.g. ``dispersion``), for ``repr``.
    notes : sequence of str
        What was assumed or left out.

    Examples
    --------
    >>> t = Table([Row({"plot_id": "A", "n": 3}), Row({"plot_id": "B", "n": 5})],
    ...           ["plot_id", "n"], name="counts")
    >>> t
    Table(counts: 2 rows; columns plot_id, n)
    >>> t[1].n, t.to_dict()
    (5, {'plot_id': ['A', 'B'], 'n': [3, 5]})
    """

    def __init__(
        self,
        rows: Sequence[Row],
        columns: Sequence[str],
        *,
        name: str = "rows",
        notes: Sequence[str] = (),
    ) -> None:
        self._rows = list(rows)
        self.columns = list(columns)
        self.name = name
        self.notes = list(notes)

    def __getitem__(self, i):  # type: ignore[override]
        if isinstance(i, slice):
            return Table(self._rows[i], self.columns, name=self.name, notes=self.notes)
        return self._rows[i]

    def __len__(self) -> int:
        return len(self._rows)

    def to_records(self) -> list[dict[str, Any]]:
        """One plain dict per row, keys in column order (``pandas.DataFrame`` reads it)."""
        return [{c: r.get(c) for c in self.columns} for r in self._rows]

    def to_dict(self) -> dict[str, list[Any]]:
        """Column name -> list of values (``pandas.DataFrame`` reads it too)."""
        return {c: [r.get(c) for r in self._rows] for c in self.columns}

    def column(self, name: str) -> np.ndarray:
        """One column as a numpy array (float when every value is a number).

        Examples
        --------
        >>> Table([Row({"n": 3}), Row({"n": 5})], ["n"]).column("n")
        array([3., 5.])
        """
        if name not in self.columns:
            raise KeyError(f"no column {name!r}; columns: {', '.join(self.columns)}")
        vals = [r.get(name) for r in self._rows]
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in vals):
            return np.array(vals, dtype=float)
        return np.array(vals, dtype=object)

    @property
    def __geo_interface__(self) -> dict[str, Any]:
        """A GeoJSON-like FeatureCollection of the rows."""
        return {
            "type": "FeatureCollection",
            "features": [r.__geo_interface__ for r in self._rows],
        }

    def __repr__(self) -> str:
        shown = ", ".join(self.columns[:6]) + (", …" if len(self.columns) > 6 else "")
        n = len(self._rows)
        return f"Table({self.name}: {n} row{'' if n == 1 else 's'}; columns {shown})"
