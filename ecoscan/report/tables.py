"""Plain-text tables for the terminal, with headings and number formats from the vocabulary."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from ecoscan.vocabulary import COLUMNS, format_cell, label

__all__ = ["format_table"]


def _numeric(key: str, rows: Sequence[Mapping[str, Any]]) -> bool:
    col = COLUMNS.get(key)
    if col is not None:
        return col.fmt not in ("text", "bool")
    return all(isinstance(r.get(key), (int, float)) or r.get(key) is None for r in rows)


def format_table(
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[str],
    *,
    max_width: int = 40,
) -> str:
    """Format records as an aligned text table (numbers right-aligned).

    Headings and number formats come from :mod:`ecoscan.vocabulary`, so a column reads the
    same in every command and in the report.

    Parameters
    ----------
    rows : sequence of mappings
        Records to show.
    columns : sequence of str
        Column keys to show, in order.
    max_width : int
        Longer cells are cut with an ellipsis.

    Returns
    -------
    str

    Examples
    --------
    >>> print(format_table([{"plot_id": "a", "n": 12, "p_mc": 0.0002}], ["plot_id", "n", "p_mc"]))
    plot   n  p Monte Carlo
    ----  --  -------------
    a     12         <0.001
    """
    headers = [label(c) for c in columns]
    body = []
    for r in rows:
        cells = []
        for c in columns:
            s = format_cell(c, r.get(c)) or "-"
            cells.append(s if len(s) <= max_width else s[: max_width - 1] + "…")
        body.append(cells)
    numeric = [_numeric(c, rows) for c in columns]
    widths = [max([len(h)] + [len(b[i]) for b in body]) for i, h in enumerate(headers)]

    def line(cells: Sequence[str]) -> str:
        out = []
        for i, s in enumerate(cells):
            out.append(s.rjust(widths[i]) if numeric[i] else s.ljust(widths[i]))
        return "  ".join(out).rstrip()

    sep = "  ".join("-" * w for w in widths)
    return "\n".join([line(headers), sep, *[line(b) for b in body]])
