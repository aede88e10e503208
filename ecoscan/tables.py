"""Plain-text tables for the terminal."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from ecoscan.outputs import format_value

__all__ = ["format_table"]


def _cell(v: Any, digits: int) -> str:
    if isinstance(v, float):
        s = format_value(round(v, digits) if abs(v) < 1e6 else v)
        return s if s else "-"
    s = format_value(v)
    return s if s else "-"


def format_table(
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[str],
    *,
    headers: Sequence[str] | None = None,
    digits: int = 3,
    max_width: int = 40,
) -> str:
    """Format records as an aligned text table (numbers right-aligned).

    Parameters
    ----------
    rows : sequence of mappings
        Records to show.
    columns : sequence of str
        Keys to show, in order.
    headers : sequence of str, optional
        Column titles (default: the keys).
    digits : int
        Decimal places for floats.
    max_width : int
        Longer cells are cut with an ellipsis.

    Returns
    -------
    str
    """
    headers = list(headers or columns)
    body = []
    for r in rows:
        cells = []
        for c in columns:
            s = _cell(r.get(c), digits)
            cells.append(s if len(s) <= max_width else s[: max_width - 1] + "…")
        body.append(cells)
    numeric = [
        all(isinstance(r.get(c), (int, float)) or r.get(c) is None for r in rows) for c in columns
    ]
    widths = [max([len(h)] + [len(b[i]) for b in body]) for i, h in enumerate(headers)]

    def line(cells: Sequence[str]) -> str:
        out = []
        for i, s in enumerate(cells):
            out.append(s.rjust(widths[i]) if numeric[i] else s.ljust(widths[i]))
        return "  ".join(out).rstrip()

    sep = "  ".join("-" * w for w in widths)
    return "\n".join([line(headers), sep, *[line(b) for b in body]])


def show_small_p(
    rows: Sequence[Mapping[str, Any]], columns: Sequence[str], *, below: float = 0.001
) -> list[dict[str, Any]]:
    """Copies of ``rows`` in which p-value columns (names starting with ``p``) below ``below``
    read ``<0.001`` rather than a string of zeros, for terminal tables."""
    out = []
    for r in rows:
        r = dict(r)
        for c in columns:
            v = r.get(c)
            if c.startswith("p") and isinstance(v, float) and v < below:
                r[c] = f"<{below:g}"
        out.append(r)
    return out
