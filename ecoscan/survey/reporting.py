"""Figures and the HTML report for a survey run."""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np

from ecoscan.analysis.change import compute as change
from ecoscan.analysis.compare import compute as compare
from ecoscan.analysis.dispersion.detectable import NO_DEPARTURE, TOO_FEW, detectable_range_short
from ecoscan.detect import describe_settings
from ecoscan.model.notes import code_of, notes_in
from ecoscan.report.figures.dispersion import (
    nn_histogram_figure,
    plot_map_figure,
    quadrat_map_figure,
    r_against_n_figure,
)
from ecoscan.report.html import (
    CAUTIONS_HTML,
    ReportSection,
    build_report,
    figure_html,
    methods_html,
    pattern_tag,
    table_html,
)
from ecoscan.survey.model import slug
from ecoscan.survey.thumbnails import open_for_previews, preview
from ecoscan.vocabulary import format_cell, label

__all__ = [
    "DETAIL_COLUMNS",
    "SUMMARY_COLUMNS",
    "plain_warnings",
    "plot_flags",
    "short_warnings",
    "write_report",
]

#: The index table at the top of the report: what a land manager reads first.
SUMMARY_COLUMNS = [
    "site",
    "date",
    "plot_id",
    "n",
    "density_per_ha",
    "verdict",
    "detectable_range",
    "p_mc",
    "flags",
]

#: Every statistic of a plot, in the folded analyst detail.
DETAIL_COLUMNS = [
    "area_m2",
    "density_per_ha",
    "mean_nn_m",
    "expected_nn_m",
    "R",
    "z",
    "p",
    "R_donnelly",
    "z_donnelly",
    "p_donnelly",
    "R_guard",
    "p_guard",
    "guard_m",
    "p_mc",
    "p_mc_clustered",
    "p_mc_regular",
    "simulations",
    "quadrat_size_m",
    "quadrat_height_m",
    "quadrat_cells",
    "quadrat_chi2",
    "quadrat_df",
    "quadrat_p",
    "quadrat_p_mc",
    "vmr",
    "morisita",
    "morisita_std",
]

#: Jargon in warnings, and the plain words the report uses instead.
_PLAIN = (
    (
        r"only (\d+) points \(fewer than (\d+)\): the tests have little power; read the "
        r"verdict with caution",
        r"Only \1 plants (fewer than \2): only a strong pattern can show; read the verdict "
        r"with caution.",
    ),
    (
        r"(\d+) of (\d+) quadrats expect fewer than 5 points: quadrat_p is approximate "
        r"\(quadrat_p_mc is exact\)",
        r"\1 of \2 quadrats expect fewer than 5 plants, so the chi-square quadrat p is rough; "
        r"the simulated quadrat p is the one to read.",
    ),
    (r"no points in this plot: no statistics", "No plants were found in this plot."),
    (
        r"only (\d+) plants: only strong patterns can be detected",
        r"Only \1 plants: only a strong pattern can show.",
    ),
)

_MEANING = {
    "regular": "plants are spaced more evenly than chance would give, as in planted rows or "
    "where neighbours compete for light and water",
    "clustered": "plants grow in groups, as in natural regeneration near seed trees or on "
    "patches of better ground",
    NO_DEPARTURE: "the test found no departure from chance placement, in a plot large enough "
    "to have detected a moderate pattern",
    TOO_FEW: "the test found no departure, but the plot holds too few plants (or has too "
    "odd a shape) for even a fairly strong pattern to show: it says nothing either way",
}


def _verdict_phrase(verdict: str, ids: list[str]) -> str:
    """'plots a and b are clustered', 'no departure was detected in plot c'..."""
    one = len(ids) == 1
    if verdict == NO_DEPARTURE:
        return f"no departure from chance placement was detected in {_join(ids)}"
    if verdict == TOO_FEW:
        return f"{_join(ids)} {'has' if one else 'have'} too few plants to tell"
    return f"{_join(ids)} {_verb(ids)} {verdict}"


#: The short flag for a warning, by the warning's code (a plot's warnings:
#: ecoscan.analysis.dispersion.compute; a change row's: ecoscan.analysis.change.compute;
#: a pair of groups': ecoscan.analysis.compare.compute); the full text is in the CSV and,
#: for a plot, in its section. A table cell's flags are given in this order.
_FLAGS = {
    "few-points": "few plants",
    change.FEW_PLANTS: "few plants",
    compare.FEW_PLANTS: "few plants",
    "one-point": "too few for a test",
    "duplicates": "duplicates?",
    "empty-plot": "empty plot",
    compare.FEW_ARRANGEMENTS: "few permutations",
    compare.NO_REARRANGEMENT: "no permutation test",
}


def _opening(text: str, limit: int = 40) -> str:
    """The start of a warning for a narrow cell: whole words, with an ellipsis when cut.

    Examples
    --------
    >>> _opening("a group has no nearest-neighbour distances")
    'a group has no nearest-neighbour…'
    >>> _opening("empty")
    'empty'
    """
    if len(text) <= limit:
        return text
    cut = text[: limit + 1].rsplit(" ", 1)[0] if " " in text[:limit] else text[:limit]
    return cut.rstrip(" ,;:") + "…"


def _analyst_only(note) -> bool:
    """Warnings on the quadrat test concern the analyst: they go with the statistics."""
    return code_of(note).startswith("quadrat-")


def plot_flags(warnings) -> str:
    """Short flags for a plot's warnings (records with codes), for the index table.

    Examples
    --------
    >>> from ecoscan.model.notes import Note
    >>> plot_flags([Note("only 22 points (fewer than 30): ...", "few-points", "warning"),
    ...             Note("3 of 8 quadrats expect fewer than 5 points", "quadrat-approximate",
    ...                  "warning")])
    'few plants'
    """
    shown = [w for w in warnings if not _analyst_only(w)]
    if not shown:
        return ""
    flags = [_FLAGS[code_of(w)] for w in shown if code_of(w) in _FLAGS]
    return ", ".join(dict.fromkeys(flags)) if flags else _opening(str(shown[0]))


def short_warnings(cell) -> str:
    """Short flags for a table cell of warnings (the comparison and change tables' cells,
    :class:`ecoscan.model.notes.JoinedNotes`), found by the warnings' codes.

    The flags come in a fixed order; a cell whose warnings have no flag shows the start of
    its first warning. Notes on the quadrat test are for the analyst and are not flagged.

    Examples
    --------
    >>> from ecoscan.model.notes import JoinedNotes, Note
    >>> short_warnings(JoinedNotes([
    ...     Note("3 and 2 plots give 10 arrangements: ...", "few-arrangements", "warning"),
    ...     Note("fewer than 30 plants in a group: ...", "few-plants", "warning")]))
    'few plants, few permutations'
    >>> short_warnings(JoinedNotes([Note("a group has no nearest-neighbour distances",
    ...                                  "no-distances", "warning")]))
    'a group has no nearest-neighbour…'
    >>> short_warnings("")
    ''
    """
    notes = [n for n in notes_in(cell) if not _analyst_only(n)]
    if not notes:
        return ""
    codes = {n.code for n in notes}
    flags = [flag for code, flag in _FLAGS.items() if code in codes]
    return ", ".join(dict.fromkeys(flags)) if flags else _opening(notes[0].text)


def plain_warnings(*texts: str) -> list[str]:
    """A plot's warnings (dispersion, scales...) in plain words, each once.

    Examples
    --------
    >>> plain_warnings("no points in this plot: no statistics", "")
    ['No plants were found in this plot.']
    """
    import re

    out: list[str] = []
    for text in texts:
        text = text or ""
        for pattern, plain in _PLAIN:
            text = re.sub(pattern, plain, text)
        for part in text.split("; "):
            part = part.strip()
            if not part:
                continue
            if out and not part[0].isupper() and not out[-1].endswith("."):
                out[-1] = f"{out[-1]}; {part}"  # a clause of the previous warning
                continue
            part = part[0].upper() + part[1:]
            # the same warning from two analyses (e.g. few plants) is said once
            if not any(_head(o) == _head(part) for o in out):
                out.append(part)
    return [w if w.endswith(".") else w + "." for w in out]


def _head(sentence: str) -> list[str]:
    return [w.strip(":;,.()") for w in sentence.split()[:3]]


def _esc(s) -> str:
    return html.escape(str(s))


def plot_anchor(raster: str, plot_id: str) -> str:
    """The HTML id of a plot's section."""
    return f"plot-{slug(raster)}-{slug(plot_id)}"


def _backdrop_kind(method: str) -> str:
    return {"imagery": "rgb", "chm": "height", "classes": "classes"}.get(method, "grey")


def _plot_section(
    run, rr, res, i: int, figdir: Path, alpha: float, source=None
) -> tuple[str, list[Path]]:
    """One plot's section: its map, facts and warnings, and the folded analyst detail.

    ``i`` is the plot's index in the raster's plots; ``source`` the raster opened for the
    previews (None: no backdrop).
    """
    plot = rr.inputs.plots[i]
    name = f"{slug(rr.entry.name)}_{slug(plot.plot_id)}"
    title = f"{rr.entry.site} · {rr.entry.date} · plot {plot.plot_id}"
    map_file, map_fig = _plot_map(rr, i, figdir / f"{name}_map.jpg", title, source)
    sres = _scales_of(rr, plot.plot_id)
    detail_files, detail_figs = _detail_figures(res, sres, plot, figdir, name, title)
    row = run.row(rr.entry.name, plot.plot_id)
    verdict = row.get("verdict") or ""
    scale_warn = "; ".join(sres.warnings) if sres is not None else ""
    quad_html, stats = _analyst_statistics(row, res)
    body = (
        f'<article class="plot" id="{plot_anchor(rr.entry.name, plot.plot_id)}">'
        f"<h4>Plot {_esc(plot.plot_id)} {pattern_tag(verdict)}</h4>"
        f'<div class="plotmain">{map_fig}<div class="plottext">'
        + _plot_findings(row, plot.area_m2, alpha)
        + f"{_warnings_list(res, scale_warn)}</div></div>"
        "<details><summary>Analyst detail: every statistic, spacing, quadrats, scales"
        f'</summary>{quad_html}<div class="detail">{stats}{"".join(detail_figs)}</div></details>'
        "</article>"
    )
    return body, [map_file, *detail_files]


def _plot_map(rr, i: int, path: Path, title: str, source) -> tuple[Path, str]:
    """The plot card's map: detected plants over the raster's preview, and its caption."""
    plot = rr.inputs.plots[i]
    idx = rr.inputs.membership.points_of(i)
    xy = np.column_stack([rr.inputs.points.x[idx], rr.inputs.points.y[idx]])
    sizes = rr.inputs.points.attrs.get("diameter_m")
    sizes = np.asarray(sizes, float)[idx] if sizes is not None else None
    bounds = plot.geometry.buffer(2.0).bounds
    pv = None
    kind = _backdrop_kind(rr.method)
    if source is not None:
        pv = preview(source, bounds, rgb=kind == "rgb", stretch=kind == "grey")
    path = plot_map_figure(
        path,
        plot.geometry,
        xy,
        image=pv[0] if pv else None,
        image_extent=pv[1] if pv else None,
        title=f"{title}: detected plants",
        sizes_m=sizes,
        image_kind=kind,
    )
    backdrop = {
        "rgb": "the image",
        "height": "the canopy height model",
        "classes": "the class map",
        "grey": "the raster",
    }[kind]
    caption = f"Detected plants (white dots) over {backdrop}, plot outline in blue" + (
        "; circles show crown diameters to scale." if sizes is not None else "."
    )
    return path, figure_html(path, caption)


def _scales_of(rr, plot_id: str):
    """The plot's result across distances (None without the scales job)."""
    if not rr.scales:
        return None
    return next((s for s in rr.scales if s.plot_id == plot_id), None)


def _detail_figures(res, sres, plot, figdir: Path, name: str, title: str):
    """The analyst detail's figures: spacing, quadrats and functions across distances.

    Returns the files drawn and their HTML, in the order they are shown.
    """
    files: list[Path] = []
    figs: list[str] = []
    if res.n >= 2 and res.nn_m is not None and len(res.nn_m):
        files.append(
            nn_histogram_figure(
                figdir / f"{name}_nn.png", res.nn_m, res.n / plot.area_m2, title=f"{title}: spacing"
            )
        )
        figs.append(
            figure_html(
                files[-1],
                "Nearest-neighbour distances against the distribution expected for a random "
                "pattern of the same density (no edge correction).",
            )
        )
    if res.quadrat is not None:
        q = res.quadrat
        files.append(
            quadrat_map_figure(
                figdir / f"{name}_quadrats.png",
                plot.geometry,
                list(q.cells),
                q.counts,
                title=f"{title}: {q.cell_size_m:.3g} m quadrats",
            )
        )
        figs.append(
            figure_html(files[-1], "Plants counted in square quadrats clipped to the plot.")
        )
    if sres is not None and getattr(sres, "n", 0) >= 2 and sres.curves:
        from ecoscan.report.figures.scales import plot_scales_figure

        files.append(plot_scales_figure(sres, figdir / f"{name}_scales.png"))
        figs.append(
            figure_html(
                files[-1],
                "Summary functions across distances with the band of random patterns in "
                "the same plot shape; marks along the bottom show where the plants leave it.",
            )
        )
    return files, figs


def _plot_findings(row: dict, area_m2: float, alpha: float) -> str:
    """The plot card's findings: plants and density, the verdict in words, what the plot
    could detect, the pattern's size in metres and the summary in words (HTML)."""
    verdict = row.get("verdict") or ""
    facts = (
        f"{row.get('n')} plants in {area_m2:,.0f} m² "
        f"({format_cell('density_per_ha', row.get('density_per_ha'))} plants/ha)."
    )
    if verdict in _MEANING:
        facts += (
            f" {verdict[:1].upper() + verdict[1:]}: {_MEANING[verdict]} (Monte Carlo p "
            f"{format_cell('p_mc', row.get('p_mc'))}, α = {alpha:g})."
        )
    reach = detectable_range_short(row)
    if reach and verdict not in (NO_DEPARTURE, TOO_FEW):  # those say it in their sentence
        facts += f" With 80% power this plot could detect {reach}."
    pattern = str(row.get("pattern_in_metres") or "")
    pattern_html = ""
    if pattern:
        what = "Clusters" if verdict == "clustered" else "Spacing"
        pattern_html = f"<p><strong>{what}:</strong> {_esc(pattern)}.</p>"
    in_words = str(row.get("summary") or "")
    if pattern and in_words.endswith("; " + pattern):
        in_words = in_words[: -len(pattern) - 2]  # said above, with its interval
    return (
        f"<p>{_esc(facts)}</p>"
        + pattern_html
        + (f"<p>In words: {_esc(in_words)}.</p>" if in_words else "")
    )


def _warnings_list(res, scale_warn: str) -> str:
    """The plot card's warnings in plain words (HTML list; empty without warnings).

    The quadrat notes matter to the analyst only: they go with the statistics.
    """
    mine = [w for w in res.warnings if not _analyst_only(w)]
    warns = plain_warnings("; ".join(mine), scale_warn)
    if not warns:
        return ""
    return '<ul class="warnings">' + "".join(f"<li>{_esc(w)}</li>" for w in warns) + "</ul>"


def _analyst_statistics(row: dict, res) -> tuple[str, str]:
    """The analyst detail's quadrat notes and its table of every statistic (HTML)."""
    quad = plain_warnings("; ".join(w for w in res.warnings if _analyst_only(w)))
    quad_html = "".join(f'<p class="muted">{_esc(w)}</p>' for w in quad)
    detail_rows = [{"what": label(c), "value": format_cell(c, row.get(c))} for c in DETAIL_COLUMNS]
    stats = (
        '<table class="data kv"><tbody>'
        + "".join(
            f'<tr><th scope="row" class="text">{_esc(d["what"])}</th><td>{_esc(d["value"] or "–")}'
            "</td></tr>"
            for d in detail_rows
        )
        + "</tbody></table>"
    )
    return quad_html, stats


def _site_meaning(run) -> str:
    """One short paragraph per site: what the verdicts mean, in plain words."""
    paras = []
    by_site: dict[str, dict[str, list[dict]]] = {}  # site -> date -> rows, in table order
    for r in run.rows:
        by_site.setdefault(r["site"], {}).setdefault(r["date"], []).append(r)
    for site, dates in by_site.items():
        rows = [r for on in dates.values() for r in on]
        parts = []
        for date, on in dates.items():
            by: dict[str, list[str]] = {}
            for r in on:
                by.setdefault(r.get("verdict") or "not tested", []).append(str(r["plot_id"]))
            said = "; ".join(_verdict_phrase(v, ids) for v, ids in by.items())
            parts.append(f"On {date}: {said}.")
        verdicts = [
            v
            for v in ("regular", "clustered", NO_DEPARTURE, TOO_FEW)
            if any(r.get("verdict") == v for r in rows)
        ]
        parts += [f"{v[:1].upper() + v[1:]} means {_MEANING[v]}." for v in verdicts]
        few = sorted({str(r["plot_id"]) for r in rows if (r.get("n") or 0) < 30})
        if few:
            text = (
                f"{_join(few)} {'has' if len(few) == 1 else 'have'} fewer than 30 plants, so "
                "only a strong pattern would show there."
            )
            parts.append(text[:1].upper() + text[1:])
        for ch in run.changes:
            if ch.site != site:
                continue
            c = ch.result.counts
            total = c["persisting"] + c["lost"]
            surv = f" ({100 * c['persisting'] / total:.0f}% survival)" if total else ""
            parts.append(
                f"Between {ch.earlier} and {ch.later}, {c['persisting']} plants persisted, "
                f"{c['lost']} were lost and {c['new']} were new{surv}."
            )
        paras.append(f"<p><strong>{_esc(site)}.</strong> {_esc(' '.join(parts))}</p>")
    paras.append(
        '<p class="muted">These are automated counts: check a sample of plots in the field '
        "before acting on them, and follow local rules and licensed practice.</p>"
    )
    return "".join(paras)


def _join(items: list[str]) -> str:
    items = [f"plot {i}" if len(items) == 1 else i for i in items]
    if len(items) == 1:
        return items[0]
    return "plots " + ", ".join(items[:-1]) + " and " + items[-1]


def _verb(items: list[str]) -> str:
    return "is" if len(items) == 1 else "are"


def _fmt(v, digits: int = 3) -> str:
    if v is None or v == "":
        return "–"
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if f != f:
        return "–"
    return f"{f:,.{digits}f}"


def write_report(run, stat_settings) -> list[Path]:
    """Draw every figure of a survey run and write ``report.html``.

    The first section is an index a land manager can read and print on one page (site, date,
    plot, plants, plants/ha, verdict, Monte Carlo p), then a short paragraph per site on what
    the verdicts mean; each plot follows with its map and plain-words warnings, and its
    analyst detail folded away.

    Parameters
    ----------
    run : ecoscan.survey.runner.SurveyRun
        A finished run.
    stat_settings : ecoscan.analysis.dispersion.compute.DispersionSettings
        The statistics settings used (for alpha and the methods text).

    Returns
    -------
    list of pathlib.Path
        Figures and the report.
    """
    out = run.output
    figdir = out / "figures"
    alpha = float(stat_settings.alpha)
    plots, files = _plots_section(run, figdir, alpha)
    overview, overview_file = _overview_section(run, figdir, alpha)
    files.append(overview_file)
    sections = [_summary_section(run, stat_settings), plots, overview]
    has_scales = any(rr.scales for rr in run.rasters)
    has_habitat = any(s.habitat is not None for rr in run.rasters for s in rr.scales or [])
    if has_scales:
        sections.append(_scales_section(run))
    if has_habitat:
        from ecoscan.survey.reporting_why import why_section

        why, why_files = why_section(run, figdir)
        sections.append(why)
        files += why_files
    if run.comparisons:
        sections.append(_comparison_section(run))
    if run.changes:
        sections.append(_change_section(run))
    topics = ["detection"]
    topics += ["scales"] if has_scales else []
    topics += ["habitat"] if has_habitat else []
    topics += ["compare"] if run.comparisons else []
    topics += ["change"] if run.changes else []
    sections.append(ReportSection("Methods and sources", methods_html(topics=topics), "methods"))
    sections.append(ReportSection("Cautions", CAUTIONS_HTML, "cautions"))
    sections.append(_run_notes_section(run))
    files.append(
        build_report(
            out / "report.html",
            title=run.config.name,
            subtitle=f"ecoscan survey report · {len(run.rasters)} rasters · {run.crs_text}",
            sections=sections,
        )
    )
    return files


def _summary_section(run, stat_settings) -> ReportSection:
    """The report's first section: what was surveyed, the sortable index of plots and a
    paragraph per site on what the verdicts mean."""
    alpha = float(stat_settings.alpha)
    n_plants = sum(rr.points.n for rr in run.rasters)
    n_sites = len({r["site"] for r in run.rows})
    intro = (
        f'<p class="lede">{len({(r["raster"], r["plot_id"]) for r in run.rows})} plot surveys '
        f"on {len(run.rasters)} rasters at {n_sites} site{'s' if n_sites != 1 else ''}; "
        f"{n_plants:,} plants. The verdict comes from a Monte Carlo test with "
        f"{stat_settings.simulations} random patterns in the exact shape of each plot, at "
        f"α = {alpha:g}. Click a heading to sort; click a plot for its map and detail.</p>"
    )
    warnings_of = {
        (rr.entry.name, plot.plot_id): res.warnings
        for rr in run.rasters
        for res, plot in zip(rr.dispersion, rr.inputs.plots, strict=True)
    }
    index = [
        {
            **r,
            "flags": plot_flags(warnings_of[(r["raster"], r["plot_id"])]),
            "detectable_range": detectable_range_short(r),
            "_href": "#" + plot_anchor(r["raster"], r["plot_id"]),
        }
        for r in run.rows
    ]
    summary = intro + table_html(index, SUMMARY_COLUMNS, sortable=True, link="plot_id")
    summary += "<h3>What this means</h3>" + _site_meaning(run)
    return ReportSection("Summary", summary, "summary")


def _plots_section(run, figdir: Path, alpha: float) -> tuple[ReportSection, list[Path]]:
    """The plots, one sub-section per raster: how it was detected, then each plot's card.

    Returns the section and the figures drawn for it.
    """
    files: list[Path] = []
    children = []
    for rr in run.rasters:
        cards = []
        # the raster is opened once for the previews of all its plots
        same_crs = rr.inputs.layer.crs is None or rr.raster_crs == rr.inputs.layer.crs
        with open_for_previews(rr.entry.path if same_crs else None) as source:
            for i, res in enumerate(rr.dispersion):
                card, fs = _plot_section(run, rr, res, i, figdir, alpha, source)
                cards.append(card)
                files += fs
        children.append(
            ReportSection(
                f"{rr.entry.site}, {rr.entry.date} ({rr.entry.name})",
                _raster_header(rr) + "".join(cards),
                f"r-{rr.entry.name}",
            )
        )
    return ReportSection("Plots", "", "plots", children), files


def _raster_header(rr) -> str:
    """A raster's header in the plots section: plants found, detector, pixel and settings."""
    return (
        f"<p>{rr.points.n:,} plants detected with the <code>{_esc(rr.method)}</code> "
        f"detector (pixel {_fmt(rr.pixel_size_m, 3)} m"
        + ("; reused from the previous run" if rr.cached else "")
        + ").</p>"
        + (
            f"<p>Detection settings: {_esc(describe_settings(rr.detection))}.</p>"
            if rr.detection
            else ""
        )
    )


def _overview_section(run, figdir: Path, alpha: float) -> tuple[ReportSection, Path]:
    """Every plot's Clark–Evans R against its number of plants, with the figure drawn."""
    path = r_against_n_figure(figdir / "R_against_n.png", run.rows, alpha=alpha)
    overview = figure_html(
        path,
        "Clark–Evans R of every plot against its number of plants. Inside the grey band R is "
        "not significantly different from 1 (random) by the normal approximation; small plots "
        "need a large departure to be significant. Marker shape and colour give the Monte "
        "Carlo verdict.",
    )
    return ReportSection("All plots: R and plant numbers", overview, "overview"), path


def _scales_section(run) -> ReportSection:
    """The pattern across distances: each plot's global test and where it leaves the band."""
    from ecoscan.analysis.scales.columns import scales_rows

    rows = []
    for rr in run.rasters:
        if rr.scales:
            rows += [
                {"site": rr.entry.site, "date": rr.entry.date, **r} for r in scales_rows(rr.scales)
            ]
    wanted = ("site", "date", "plot_id", "n", "p_global", "clustered_ranges_m", "regular_ranges_m")
    cols = [c for c in wanted if rows and c in rows[0]]
    return ReportSection(
        "Pattern across distances",
        "<p>Where along the distance axis the plants leave the band of random "
        "patterns: competition shows as regularity at short range, patches of good "
        "ground as clustering at longer range. The global test (rank-length on L by "
        "default) controls the error over all distances at once; each plot's verdict "
        "in words is under its figure in the plot's analyst detail.</p>"
        + table_html(rows, cols, sortable=True),
        "scales",
    )


def _run_notes_section(run) -> ReportSection:
    """The run's notes (or 'none') and where the full provenance is."""
    notes = "".join(f"<li>{_esc(n)}</li>" for n in run.notes) or "<li>none</li>"
    return ReportSection(
        "Notes from this run",
        f"<ul>{notes}</ul><p>Full provenance is in <code>run.json</code>.</p>",
        "notes",
    )


def _comparison_section(run) -> ReportSection:
    from ecoscan.analysis.compare.columns import (
        GROUP_SUMMARY_COLUMNS,
        comparison_rows,
        group_rows,
        pair_summary_columns,
    )

    parts = [
        "<p>Differences between groups of plots: density (exact test for two Poisson "
        "rates), Clark–Evans R (z test and a permutation test that moves whole plots "
        "between groups) and the distributions of nearest-neighbour distances "
        "(Kolmogorov–Smirnov distance, whole plots permuted). Dates of the same plots are "
        "never pooled; compared by date they are paired plot by plot (sign-flip test). "
        "With more than two groups the p-values are adjusted for multiple comparisons "
        "(Holm 1979).</p>"
    ]
    for c in run.comparisons:
        by, res = c.by, c.result
        groups = group_rows(res)
        pairs = comparison_rows(res)
        # the same short column sets as the terminal tables; every column is in the CSVs
        gcols = [*GROUP_SUMMARY_COLUMNS, "warnings"]
        pcols = [*pair_summary_columns(len(pairs), paired=res.paired), "warnings"]
        many = len(groups) > 2
        pairs = [{**r, "warnings": short_warnings(r.get("warnings", ""))} for r in pairs]
        parts.append(f"<h3>By {_esc(by)}: groups</h3>" + table_html(groups, gcols))
        if c.figure is not None:
            parts.append(
                figure_html(
                    c.figure, f"Clark–Evans R per {by} with 95% intervals, most regular first."
                )
            )
        adj = " (p-values Holm-adjusted; the full table is in comparison.csv)" if many else ""
        parts.append(f"<h3>By {_esc(by)}: pairs{adj}</h3>" + table_html(pairs, pcols))
        if res.notes:
            items = "".join(f"<li>{_esc(n)}</li>" for n in res.notes)
            parts.append(f"<p>What limits these comparisons:</p><ul>{items}</ul>")
    return ReportSection("Comparison", "".join(parts), "comparison")


def _change_section(run) -> ReportSection:
    from ecoscan.analysis.change.columns import CHANGE_SUMMARY_COLUMNS, change_rows

    parts = [
        "<p>Plants matched one-to-one between consecutive dates after removing the "
        "overall shift between the two mosaics; unmatched earlier plants are counted as "
        "lost, unmatched later plants as new. Survival has a Wilson 95% interval.</p>"
    ]
    for ch in run.changes:
        rows = change_rows(ch.result)
        shift = (
            f"Shift found between the mosaics: {ch.result.shift_x_m:+.2f} m east, "
            f"{ch.result.shift_y_m:+.2f} m north."
        )
        cols = [*CHANGE_SUMMARY_COLUMNS, "warnings"]
        rows = [{**r, "warnings": short_warnings(r.get("warnings", ""))} for r in rows]
        parts.append(
            f"<h3>{_esc(ch.site)}: {_esc(ch.earlier)} to {_esc(ch.later)}</h3>"
            f"<p>{_esc(shift)}</p>" + table_html(rows, cols)
        )
        if ch.figure is not None:
            parts.append(figure_html(ch.figure, "Persisting, lost and new plants."))
    return ReportSection("Change between dates", "".join(parts), "change")
