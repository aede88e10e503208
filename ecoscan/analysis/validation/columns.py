"""The table of a validation: ``accuracy.csv``, one row per plot and one for all plots."""

from __future__ import annotations

__all__ = [
    "COLUMNS",
]

#: Output columns, in order.
COLUMNS = (
    "plot_id",
    "tp",
    "fp",
    "fn",
    "precision",
    "recall",
    "f1",
    "count_error",
    "mean_offset_m",
)
