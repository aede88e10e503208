"""Each job's results folder: its tables (CSV, JSON, GIS layers) and its figures.

The writers of the commands and of the survey: ``analyse`` (``dispersion.csv`` ...), ``scales``,
``change``, ``compare`` and ``plan``. Rows come from each job's ``columns`` module in
:mod:`ecoscan.analysis`; figures from :mod:`ecoscan.report.figures`. Every file is written
atomically (:mod:`ecoscan.io.outputs`).
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from ecoscan import __version__
from ecoscan.analysis.change.columns import (
    CHANGE_COLUMNS,
    PLANT_COLUMNS,
    change_rows,
    change_summary,
)
from ecoscan.analysis.change.compute import ChangeResult
from ecoscan.analysis.compare.columns import (
    GROUP_COLUMNS,
    PAIR_COLUMNS,
    comparison_rows,
    group_rows,
)
from ecoscan.analysis.compare.compute import ComparisonResult
from ecoscan.analysis.dispersion.columns import DISPERSION_COLUMNS, EXTRA_COLUMNS, dispersion_rows
from ecoscan.analysis.dispersion.compute import CAUTION, DispersionSettings, PlotDispersion
from ecoscan.analysis.planning import DESIGN_COLUMNS, PATTERN_COLUMNS, PlanResult
from ecoscan.analysis.scales.columns import (
    FUNCTION_COLUMNS,
    SCALES_COLUMNS,
    effect_rows_of,
    function_rows,
    scales_rows,
)
from ecoscan.analysis.scales.compute import PlotScales, ScalesSettings
from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label
from ecoscan.io.inputs import SurveyInputs
from ecoscan.io.outputs import write_csv, write_json, write_text
from ecoscan.io.vector import write_plots, write_points
from ecoscan.model.points import PointSet

__all__ = [
    "check_outdir",
    "figure_name",
    "write_analysis",
    "write_change",
    "write_comparison",
    "write_plan",
    "write_scales",
]


def _analysed_points(inputs: SurveyInputs) -> PointSet:
    from ecoscan.model.membership import points_by_plot

    return points_by_plot(inputs.points, inputs.layer, inputs.membership)


def check_outdir(outdir: str | os.PathLike) -> Path:
    """Refuse an output path that exists and is not a folder (before anything is written)."""
    p = Path(outdir)
    if p.exists() and not p.is_dir():
        raise InputError(f"output path {str(p)!r} is a file; give a folder for the results")
    return p


def write_analysis(
    outdir: str | os.PathLike,
    inputs: SurveyInputs,
    results: Sequence[PlotDispersion],
    settings: DispersionSettings,
    *,
    notes: Sequence[str] = (),
) -> list[Path]:
    """Write the results folder of an analysis.

    Parameters
    ----------
    outdir : path-like
        Folder to write into (created if needed).
    inputs : SurveyInputs
        The analysed points and plots.
    results : sequence of PlotDispersion
        From :func:`analyse`.
    settings : DispersionSettings
        The parameters used (recorded in ``dispersion.json``).
    notes : sequence of str
        Notes for the reader (reprojection, points left out...).

    Returns
    -------
    list of pathlib.Path
        ``dispersion.csv``, ``dispersion.json``, ``points.csv``, ``points.prj`` (when the CRS
        is known) and ``plots.gpkg``, each written atomically.
    """
    out = check_outdir(outdir)
    rows = dispersion_rows(results)
    columns = list(DISPERSION_COLUMNS) + list(EXTRA_COLUMNS)
    json_rows = []
    for res, r in zip(results, rows, strict=True):
        jr = dict(r)
        jr["warnings"] = list(res.warnings)
        json_rows.append(jr)
    doc = {
        "ecoscan_version": __version__,
        "command": "analyse",
        "parameters": settings.to_dict(),
        "crs": crs_label(inputs.points.crs),
        "crs_wkt": inputs.points.crs.to_wkt() if inputs.points.crs is not None else None,
        "methods": {
            "verdict": "Monte Carlo rank test of the mean nearest-neighbour distance in the "
            "exact plot polygon (Besag & Diggle 1977), with sequential stopping after "
            "stop_after simulations as extreme in each tail (Besag & Clifford 1991)",
            "R": "Clark & Evans (1954), no edge correction",
            "R_donnelly": "Donnelly (1978): E = 0.5 sqrt(A/n) + (0.0514 + 0.041/sqrt(n)) P/n, "
            "Var = 0.0703 A/n^2 + 0.037 P sqrt(A/n^5)",
            "R_guard": "guard zone: focal points at least guard_m inside the edge; p_guard "
            "ranks the focal mean among the same simulated patterns as p_mc",
            "quadrat": "Pearson X^2 on a grid of equal cells fitted to the plot and clipped "
            "to it, two-sided p; quadrat_p_mc and the morisita_std limits from a multinomial "
            "simulation",
        },
        "notes": list(notes),
        "caution": CAUTION,
        "columns": columns,
        "plots": json_rows,
    }
    pts = _analysed_points(inputs)
    written = [
        write_csv(out / "dispersion.csv", rows, columns),
        write_json(out / "dispersion.json", doc),
        write_points(pts, out / "points.csv"),
    ]
    if pts.crs is not None:
        written.append(out / "points.prj")
    written.append(write_plots(inputs.layer, out / "plots.gpkg"))
    return written


def figure_name(plot_id: str) -> str:
    """File name of a plot's figure: ``scales_<plot id>.png`` with unsafe characters
    replaced."""
    safe = re.sub(r"[^A-Za-z0-9._-]+", "_", plot_id).strip("._") or "plot"
    return f"scales_{safe}.png"


def write_scales(
    outdir: str | os.PathLike, results: Sequence[PlotScales], settings: ScalesSettings
) -> list[Path]:
    """Write ``functions.csv``, ``scales.csv``, ``scales.json`` and one figure per plot.

    Parameters
    ----------
    outdir : path-like
        Output folder (created if needed).
    results : sequence of PlotScales
    settings : ScalesSettings

    Returns
    -------
    list of pathlib.Path
        The files written.

    Raises
    ------
    InputError
        When ``outdir`` exists and is not a folder.
    """
    from ecoscan.report.figures.scales import plot_scales_figure

    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise InputError(f"output path {str(out)!r} is a file; give a folder for -o")
    rows = scales_rows(results)
    frows = function_rows(results, settings.alpha)
    cols = SCALES_COLUMNS + [k for r in rows for k in r if k not in SCALES_COLUMNS]
    cols = list(dict.fromkeys(cols))
    erows = effect_rows_of(results)
    paths = [
        write_csv(out / "functions.csv", frows, FUNCTION_COLUMNS),
        write_csv(out / "scales.csv", rows, cols),
        write_json(
            out / "scales.json",
            {
                "settings": settings.to_dict(),
                "plots": rows,
                "caution": (
                    "Automated plant counts need field checks; a significant pattern describes "
                    "the plot and does not show its cause. Follow local rules and licensed "
                    "practice before management decisions."
                ),
            },
        ),
    ]
    if erows:
        from ecoscan.analysis.habitat import EFFECT_COLUMNS

        paths.append(write_csv(out / "effects.csv", erows, EFFECT_COLUMNS))
    used: set[str] = set()
    for res in results:
        if not res.curves:
            continue
        name = figure_name(res.plot_id)
        while name in used:
            name = name.replace(".png", "_.png")
        used.add(name)
        paths.append(plot_scales_figure(res, out / "figures" / name))
        if res.habitat is not None:
            from ecoscan.report.figures.habitat import plot_habitat_figure

            hab = plot_habitat_figure(res, out / "figures" / name.replace("scales_", "habitat_", 1))
            if hab is not None:
                paths.append(hab)
    return paths


def write_change(outdir: str | os.PathLike, result: ChangeResult) -> list[Path]:
    """Write ``plants.csv``, ``plants.gpkg``, ``change.csv``, ``change.json`` and the map.

    Parameters
    ----------
    outdir : path-like
        Output folder (created if needed).
    result : ChangeResult
        From :func:`detect_change`.

    Returns
    -------
    list of pathlib.Path
        The files written (each written atomically).
    """
    from ecoscan.report.figures import save_figure
    from ecoscan.report.figures.change import change_map

    out = Path(outdir)
    coords = ("x", "y", "x_earlier_m", "y_earlier_m", "x_later_m", "y_later_m")
    rows = result.plant_rows()
    for r in rows:  # map coordinates to the millimetre, as ecoscan.io.vector.write_points does
        for c in coords:
            r[c] = f"{r[c]:.3f}" if np.isfinite(r[c]) else ""
    paths = [
        write_csv(out / "plants.csv", rows, PLANT_COLUMNS),
        write_points(result.plants_pointset(), out / "plants.gpkg", layer="plants"),
        write_csv(out / "change.csv", change_rows(result), CHANGE_COLUMNS),
        write_json(out / "change.json", change_summary(result)),
    ]
    if result.crs is not None:
        paths.append(write_text(out / "plants.prj", result.crs.to_wkt()))
    if result.layer is not None:
        paths.append(write_plots(result.layer, out / "plots.gpkg"))
    fig = change_map(
        result.x_m,
        result.y_m,
        result.status,
        plots=None if result.layer is None else [p.geometry for p in result.layer.plots],
        plot_ids=None if result.layer is None else result.layer.ids,
        shift_m=(result.shift_x_m, result.shift_y_m),
    )
    paths.append(save_figure(fig, out / "change_map.png"))
    return paths


def write_comparison(outdir: str | os.PathLike, result: ComparisonResult) -> list[Path]:
    """Write ``comparison.csv``, ``groups.csv``, ``comparison.json`` and ``comparison.png``.

    Parameters
    ----------
    outdir : path-like
        Output folder (created if needed).
    result : ComparisonResult
        From :func:`compare_groups`.

    Returns
    -------
    list of pathlib.Path
        The files written (each atomically).
    """
    from ecoscan.report.figures import save_figure
    from ecoscan.report.figures.compare import r_by_group

    out = Path(outdir)
    groups = group_rows(result)
    pairs = comparison_rows(result)
    fig = r_by_group(
        [g["group"] for g in groups],
        np.array([g["R"] for g in groups], float),
        np.array([g["R_low95"] for g in groups], float),
        np.array([g["R_high95"] for g in groups], float),
        r_donnelly=np.array([g["R_donnelly"] for g in groups], float),
        by=result.by,
    )
    return [
        write_csv(out / "comparison.csv", pairs, PAIR_COLUMNS),
        write_csv(out / "groups.csv", groups, GROUP_COLUMNS),
        write_json(
            out / "comparison.json",
            {
                "by": result.by,
                "groups": groups,
                "pairs": pairs,
                "notes": result.notes,
                "parameters": result.parameters,
                "caution": (
                    "automated detections need field checks before differences between sites "
                    "or dates drive management decisions; defer to local rules and licensed "
                    "practice"
                ),
            },
        ),
        save_figure(fig, out / "comparison.png"),
    ]


def write_plan(result: PlanResult, folder: str | os.PathLike) -> list[Path]:
    """Write the plan's tables (CSV) and figure (PNG) into a folder.

    Parameters
    ----------
    result : PlanResult
        A plan from :func:`make_plan`.
    folder : path-like
        Output folder (created).

    Returns
    -------
    list of pathlib.Path
        Files written.

    Examples
    --------
    >>> import shapely, tempfile
    >>> from ecoscan.analysis.planning import PlanSettings, make_plan
    >>> plan = make_plan({"square": shapely.box(0, 0, 20, 20)},
    ...                  PlanSettings(densities_per_ha=(600.0,), patterns=20))
    >>> [p.name for p in write_plan(plan, tempfile.mkdtemp())]
    ['plan-pattern.csv', 'plan-design.csv', 'plan.png']
    """
    from ecoscan.io.outputs import write_csv
    from ecoscan.report.figures.planning import plot_plan

    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    written = [
        write_csv(out / "plan-pattern.csv", result.pattern_rows, PATTERN_COLUMNS),
        write_csv(out / "plan-design.csv", result.design_rows, DESIGN_COLUMNS),
        plot_plan(result, out / "plan.png"),
    ]
    return [Path(p) for p in written]
