"""The report's "Why the pattern" section: habitat covariates, clustering beyond them, and
how plant size relates to spacing (one table of verdicts, one of covariate effects, one
figure per plot)."""

from __future__ import annotations

import html
from pathlib import Path

from ecoscan.report.html import ReportSection, figure_html, table_html

__all__ = ["why_section"]

_INTRO = (
    "<p>Clustered plants may gather on better ground (habitat) or cluster by themselves "
    "(seed fall, shelter). Plant density is fitted to the habitat covariates, and the "
    "pattern is tested again against that varying density: clustering that the covariates "
    "explain disappears, clustering beyond them remains. The size test asks whether close "
    "neighbours are smaller or larger than average, as competition or shared good ground "
    "would make them.</p>"
)
_CAUTION = (
    '<p class="muted">A covariate that follows plant density is an association, not proof '
    "of its cause: other factors that vary with it over the plot act the same way. Check on "
    "the ground, and follow local rules and licensed practice before acting on it.</p>"
)


def _esc(s) -> str:
    return html.escape(str(s), quote=True)


def why_section(run, figdir: Path) -> tuple[ReportSection, list[Path]]:
    """The section and its figures for a survey run with covariates or a mark.

    Parameters
    ----------
    run : ecoscan.survey.runner.SurveyRun
        A finished run whose scales results carry ``habitat``.
    figdir : pathlib.Path
        Folder for the figures.

    Returns
    -------
    (ReportSection, list of pathlib.Path)
    """
    from ecoscan.analysis.habitat import effect_rows, habitat_row
    from ecoscan.report.figures.habitat import plot_habitat_figure
    from ecoscan.survey.runner import slug

    rows, effects, figs, files = [], [], [], []
    for rr in run.rasters:
        for s in rr.scales or []:
            h = s.habitat
            if h is None:
                continue
            lab = {"site": rr.entry.site, "date": rr.entry.date, "plot_id": s.plot_id}
            rows.append({**lab, "verdict": s.verdict, **habitat_row(h)})
            effects += [{**lab, **e} for e in effect_rows(s.plot_id, h)]
            png = plot_habitat_figure(
                s, figdir / f"{slug(rr.entry.name)}_{slug(s.plot_id)}_why.png"
            )
            if png is not None:
                files.append(png)
                figs.append(
                    figure_html(
                        png,
                        f"{rr.entry.site}, {rr.entry.date}, plot {s.plot_id}: fitted density, "
                        "inhomogeneous L(r) − r against the fitted process, and size against "
                        "spacing (k_mm) against random permutations of the sizes.",
                    )
                )
    parts = [_INTRO]
    vcols = [
        c
        for c in ("site", "date", "plot_id", "verdict", "habitat_verdict", "marks_verdict")
        if any(r.get(c) for r in rows)
    ]
    parts.append(table_html(rows, vcols, sortable=True))
    if effects:
        parts.append(
            "<h3>Covariate effects on plant density</h3>"
            + table_html(
                effects,
                ["site", "date", "plot_id", "covariate", "effect", "p_covariate"],
                sortable=True,
            )
        )
    parts.append(_CAUTION)
    if figs:
        parts.append(
            "<details><summary>Figures, plot by plot</summary>" + "".join(figs) + "</details>"
        )
    return ReportSection("Why the pattern", "".join(parts), "why"), files
