"""The tables of the change between two surveys: ``change.csv``, ``plants.csv`` and the summary.

Column lists and the row builders over a :class:`~ecoscan.analysis.change.compute.ChangeResult`;
the files are written by :mod:`ecoscan.report.folders`.
"""

from __future__ import annotations

from typing import Any

from ecoscan.analysis.change.compute import ChangeResult

__all__ = [
    "CHANGE_COLUMNS",
    "CHANGE_SUMMARY_COLUMNS",
    "PLANT_COLUMNS",
    "change_rows",
    "change_summary",
]

#: Columns of ``change.csv`` in order.
CHANGE_COLUMNS = (
    "plot_id",
    "area_m2",
    "n_earlier",
    "n_later",
    "persisting",
    "lost",
    "new",
    "survival",
    "survival_low95",
    "survival_high95",
    "mortality",
    "recruitment",
    "density_earlier_per_ha",
    "density_later_per_ha",
    "density_change_per_ha",
    "p_count_change",
    "R_earlier",
    "R_later",
    "R_change",
    "R_change_se",
    "z_R_change",
    "p_R_change",
    "R_later_null",
    "p_R_change_mc",
    "warnings",
)


#: The columns of ``change.csv`` worth reading first (terminal table and report).
CHANGE_SUMMARY_COLUMNS = (
    "plot_id",
    "n_earlier",
    "n_later",
    "persisting",
    "lost",
    "new",
    "survival",
    "survival_low95",
    "survival_high95",
    "density_change_per_ha",
    "R_earlier",
    "R_later",
    "p_R_change_mc",
)


#: Columns of ``plants.csv`` in order.
PLANT_COLUMNS = (
    "plant_id",
    "status",
    "plot_id",
    "x",
    "y",
    "x_earlier_m",
    "y_earlier_m",
    "x_later_m",
    "y_later_m",
    "offset_m",
    "earlier_row",
    "later_row",
)


def change_rows(result: ChangeResult, *, overall: bool = True) -> list[dict[str, Any]]:
    """Per-plot rows of a change result, then the overall row.

    Parameters
    ----------
    result : ChangeResult
        From :func:`detect_change`.
    overall : bool
        Append the overall row (``plot_id`` = ``all``).

    Returns
    -------
    list of dict
        Columns :data:`CHANGE_COLUMNS`.
    """
    rows = [dict(r) for r in result.plots]
    if overall:
        rows.append(dict(result.overall))
    return rows


def change_summary(result: ChangeResult) -> dict[str, Any]:
    """Everything of a change result that goes into ``change.json``."""
    sh = result.shift
    return {
        "shift_x_m": result.shift_x_m,
        "shift_y_m": result.shift_y_m,
        "shift": None
        if sh is None
        else {
            "estimated_x_m": sh.shift_x_m,
            "estimated_y_m": sh.shift_y_m,
            "se_x_m": sh.se_x_m,
            "se_y_m": sh.se_y_m,
            "pairs": sh.n_pairs,
            "median_residual_m": sh.residual_m,
            "iterations": sh.iterations,
            "converged": sh.converged,
            "applied": bool(result.shift_x_m != 0.0 or result.shift_y_m != 0.0),
            "method": "mode of displacement vectors, then iterated median of mutual "
            "nearest-neighbour residuals",
        },
        "counts": result.counts,
        "parameters": result.parameters,
        "plots": change_rows(result, overall=False),
        "overall": result.overall,
        "notes": result.notes,
        "warnings": result.warnings,
        "caution": (
            "automated counts need field checks before they drive management decisions: a "
            "lost plant may be a missed detection and a new one a weed or a double detection; "
            "defer to local rules and licensed practice"
        ),
    }
