"""The tables of the multi-scale analysis: ``scales.csv``, ``functions.csv`` and ``effects.csv``.

Column lists and the row builders that turn :class:`~ecoscan.analysis.scales.compute.PlotScales`
records into rows; the files are written by :mod:`ecoscan.report.folders`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ecoscan.analysis.scales.compute import FunctionCurve, PlotScales, format_ranges

__all__ = [
    "FUNCTION_COLUMNS",
    "SCALES_COLUMNS",
    "effect_rows_of",
    "function_rows",
    "scales_rows",
]

SCALES_COLUMNS = [
    "plot_id",
    "n",
    "global_test",
    "p_global",
    "clustered_ranges_m",
    "regular_ranges_m",
    "verdict",
    "test_function",
    "max_distance_m",
    "bandwidth_m",
    "simulations",
    "warnings",
]


FUNCTION_COLUMNS = [
    "plot_id",
    "function",
    "distance_m",
    "value",
    "csr_value",
    "band_low",
    "band_high",
    "pointwise_low",
    "pointwise_high",
    "band",
    "unit",
]


def _test_label(test: str, fn: str) -> str:
    name = {"rank-length": "extreme rank length", "max-deviation": "maximum absolute deviation"}[
        test
    ]
    return f"{name} on {'L(r)' if fn == 'L' else 'g(r)'}"


def scales_rows(results: Sequence[PlotScales]) -> list[dict[str, Any]]:
    """One row per plot for ``scales.csv`` (columns :data:`SCALES_COLUMNS`, then cross)."""
    rows = []
    for res in results:
        row = {
            "plot_id": res.plot_id,
            "n": res.n,
            "global_test": _test_label(res.global_test, res.test_function) if res.curves else "",
            "p_global": res.p_global,
            "clustered_ranges_m": format_ranges(res.clustered_ranges_m),
            "regular_ranges_m": format_ranges(res.regular_ranges_m),
            "verdict": res.verdict,
            "test_function": res.test_function,
            "max_distance_m": res.max_distance_m,
            "bandwidth_m": res.bandwidth_m,
            "simulations": res.simulations,
            "warnings": "; ".join(res.warnings),
        }
        if res.cross is not None or res.kinds_verdict:
            c = res.cross
            row.update(
                {
                    "kind_a": c.label_a if c else "",
                    "kind_b": c.label_b if c else "",
                    "n_a": c.n_a if c else None,
                    "n_b": c.n_b if c else None,
                    "p_kinds": c.L_between_kinds.pvalue if c else None,
                    "p_kind_difference": c.D.pvalue if c else None,
                    "kinds_verdict": res.kinds_verdict,
                }
            )
        if res.habitat is not None:
            from ecoscan.analysis.habitat import habitat_row

            row.update(habitat_row(res.habitat))
        rows.append(row)
    return rows


def _curve_rows(plot_id: str, c: FunctionCurve, alpha: float) -> list[dict[str, Any]]:
    e = c.envelope
    nan = np.full(c.r_m.size, np.nan)
    lo, hi = (e.band_low, e.band_high) if e is not None else (nan, nan)
    lop, hip = (e.pointwise_low, e.pointwise_high) if e is not None else (nan, nan)
    if e is None:
        label = "none"
    else:
        label = f"{100 * (1 - alpha):g}% global band, {e.test} test"
    theo = c.csr_value
    return [
        {
            "plot_id": plot_id,
            "function": c.name,
            "distance_m": c.r_m[k],
            "value": c.value[k],
            "csr_value": theo[k],
            "band_low": lo[k],
            "band_high": hi[k],
            "pointwise_low": lop[k],
            "pointwise_high": hip[k],
            "band": label,
            "unit": c.unit,
        }
        for k in range(c.r_m.size)
    ]


def function_rows(
    results: Sequence[PlotScales], alpha: float | None = None
) -> list[dict[str, Any]]:
    """Long-form rows for ``functions.csv`` (columns :data:`FUNCTION_COLUMNS`).

    ``alpha`` only labels the envelopes; by default each result's own level.

    The bivariate curves appear as ``L_between_kinds`` (m) and ``K_difference`` = K_BB − K_AA
    (m²), with the mean of the relabellings as ``csr_value`` for L_between_kinds.
    """
    rows: list[dict[str, Any]] = []
    for res in results:
        a = res.alpha if alpha is None else alpha
        for c in res.curves.values():
            rows += _curve_rows(res.plot_id, c, a)
        if res.cross is not None:
            x = res.cross
            rows += _curve_rows(
                res.plot_id,
                FunctionCurve(
                    "L_between_kinds",
                    "m",
                    x.r_m,
                    x.L_between_kinds.value,
                    x.L_between_kinds.centre,
                    x.L_between_kinds,
                ),
                a,
            )
            rows += _curve_rows(
                res.plot_id,
                FunctionCurve("K_difference", "m2", x.r_m, x.D.value, x.D.centre, x.D),
                a,
            )
        if res.habitat is not None:
            from ecoscan.analysis.habitat import habitat_curves

            for name, unit, r, env in habitat_curves(res.habitat):
                rows += _curve_rows(
                    res.plot_id, FunctionCurve(name, unit, r, env.value, env.centre, env), a
                )
    return rows


def effect_rows_of(results: Sequence[PlotScales]) -> list[dict[str, Any]]:
    """Rows of ``effects.csv``: each covariate's effect on density, per plot."""
    from ecoscan.analysis.habitat import effect_rows

    return [r for res in results for r in effect_rows(res.plot_id, res.habitat)]
