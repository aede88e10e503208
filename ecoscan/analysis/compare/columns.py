"""The tables of a comparison: ``groups.csv`` and ``comparison.csv``.

Column lists and the row builders over a
:class:`~ecoscan.analysis.compare.compute.ComparisonResult`; the files are written by
:mod:`ecoscan.report.folders`.
"""

from __future__ import annotations

import math
from typing import Any

from ecoscan.analysis.compare.compute import (
    FEW_PLANTS,
    ComparisonResult,
    _label_interval,
    _pattern,
)
from ecoscan.analysis.dispersion.compute import DONNELLY_MIN_HALF_WIDTH, donnelly_strip_warning
from ecoscan.model.notes import WARNING, JoinedNotes, Note

__all__ = [
    "GROUP_COLUMNS",
    "GROUP_SUMMARY_COLUMNS",
    "PAIR_COLUMNS",
    "comparison_rows",
    "group_rows",
    "pair_summary_columns",
]

#: The group columns worth reading first (terminal table and report).
GROUP_SUMMARY_COLUMNS = (
    "rank_regularity",
    "group",
    "n_plots",
    "n",
    "density_per_ha",
    "mean_nn_m",
    "R",
    "R_low95",
    "R_high95",
    "R_donnelly",
    "R_donnelly_low95",
    "R_donnelly_high95",
    "verdict",
)


def pair_summary_columns(n_pairs: int, *, paired: bool = False) -> tuple[str, ...]:
    """The pair columns worth reading first; Holm-adjusted p-values when there are several.

    ``paired``: the groups are dates of the same plots; the paired tests come first.
    """
    sfx = "_holm" if n_pairs > 1 else ""
    if paired:
        return (
            "group_a",
            "group_b",
            "paired_plots",
            "density_diff_paired_per_ha",
            f"p_density_paired{sfx}",
            "R_diff_paired",
            f"p_R_paired{sfx}",
        )
    return (
        "group_a",
        "group_b",
        "density_diff_per_ha",
        f"p_density{sfx}",
        "R_diff",
        "R_donnelly_diff",
        f"p_R_donnelly_diff{sfx}",
        f"p_R_perm{sfx}",
        f"p_nn_distribution{sfx}",
    )


#: Columns of ``groups.csv`` (one row per group) in order.
GROUP_COLUMNS = (
    "group",
    "rank_regularity",
    "n_plots",
    "n",
    "area_m2",
    "density_per_ha",
    "mean_nn_m",
    "expected_nn_m",
    "R",
    "R_se",
    "R_low95",
    "R_high95",
    "z",
    "p",
    "R_donnelly",
    "R_donnelly_se",
    "R_donnelly_low95",
    "R_donnelly_high95",
    "verdict",
    "warnings",
)


#: Columns of ``comparison.csv`` (one row per pair of groups) in order.
PAIR_COLUMNS = (
    "group_a",
    "group_b",
    "n_a",
    "n_b",
    "area_a_m2",
    "area_b_m2",
    "density_a_per_ha",
    "density_b_per_ha",
    "density_diff_per_ha",
    "density_ratio",
    "density_ratio_low95",
    "density_ratio_high95",
    "p_density",
    "R_a",
    "R_b",
    "R_diff",
    "R_diff_se",
    "z_R_diff",
    "p_R_diff",
    "R_donnelly_a",
    "R_donnelly_b",
    "R_donnelly_diff",
    "R_donnelly_diff_se",
    "z_R_donnelly_diff",
    "p_R_donnelly_diff",
    "p_R_perm",
    "perm_arrangements",
    "perm_exact",
    "mw_u",
    "p_mw",
    "ks_d",
    "p_ks",
    "nn_distribution_gap",
    "p_nn_distribution",
    "nn_distribution_arrangements",
    "paired_plots",
    "density_diff_paired_per_ha",
    "p_density_paired",
    "R_diff_paired",
    "p_R_paired",
    "paired_arrangements",
    "p_density_holm",
    "p_R_diff_holm",
    "p_R_donnelly_diff_holm",
    "p_R_perm_holm",
    "p_mw_holm",
    "p_ks_holm",
    "p_nn_distribution_holm",
    "p_density_paired_holm",
    "p_R_paired_holm",
    "warnings",
)


def group_rows(result: ComparisonResult) -> list[dict[str, Any]]:
    """One row per group (columns :data:`GROUP_COLUMNS`), ranked from most regular (1)."""
    rs = [g.r.statistic for g in result.groups]
    order = sorted(range(len(rs)), key=lambda i: -(rs[i] if math.isfinite(rs[i]) else -math.inf))
    rank = {i: k + 1 for k, i in enumerate(order)}
    rows = []
    for i, g in enumerate(result.groups):
        lo, hi = g.r.ci()
        dlo, dhi = _label_interval(g.r)
        if not (math.isfinite(g.r.statistic_donnelly) and g.r.se_donnelly > 0):
            dlo = dhi = float("nan")
        warn = []
        if g.n < 30:
            warn.append(Note("fewer than 30 plants", FEW_PLANTS, WARNING))
        narrow = [
            u.plot_id
            for u in g.units
            if math.isfinite(u.nn.perimeter_m)
            and donnelly_strip_warning(u.nn.n, u.nn.area_m2, u.nn.perimeter_m)
        ]
        if narrow:
            # measured: the label rejects 98% of random patterns in a 400 x 5 m strip at
            # n = 30 (docs/validity.md); Donnelly's correction does not hold there
            warn.append(
                Note(
                    f"verdict approximate: plot(s) {', '.join(narrow[:5])} narrower than "
                    f"{DONNELLY_MIN_HALF_WIDTH:g} plant spacings, where Donnelly's edge "
                    "correction fails; use each plot's Monte Carlo test",
                    "narrow-plot",
                    WARNING,
                )
            )
        rows.append(
            {
                "group": g.name,
                "rank_regularity": rank[i],
                "n_plots": len(g.units),
                "n": g.n,
                "area_m2": g.area_m2,
                "density_per_ha": g.density_per_ha,
                "mean_nn_m": g.r.mean_nn_m,
                "expected_nn_m": g.r.expected_nn_m,
                "R": g.r.statistic,
                "R_se": g.r.se,
                "R_low95": lo,
                "R_high95": hi,
                "z": g.r.z,
                "p": g.r.pvalue,
                "R_donnelly": g.r.statistic_donnelly,
                "R_donnelly_se": g.r.se_donnelly,
                "R_donnelly_low95": dlo,
                "R_donnelly_high95": dhi,
                "verdict": _pattern(g.r),
                "warnings": JoinedNotes(warn),
            }
        )
    return rows


def comparison_rows(result: ComparisonResult) -> list[dict[str, Any]]:
    """One row per pair of groups (columns :data:`PAIR_COLUMNS`)."""
    return [{k: p.get(k, "") for k in PAIR_COLUMNS} for p in result.pairs]
