"""Figures and the HTML report for a survey run."""

from __future__ import annotations

import html
from pathlib import Path

from ecoscan.detect import describe_settings
from ecoscan.figures.dispersion import (
    nn_histogram_figure,
    plot_map_figure,
    quadrat_map_figure,
    r_against_n_figure,
)
from ecoscan.report import (
    CAUTIONS_HTML,
    ReportSection,
    build_report,
    figure_html,
    methods_html,
    pattern_tag,
    table_html,
)
from ecoscan.survey.thumbnails import preview

__all__ = ["SUMMARY_COLUMNS", "write_report"]

SUMMARY_COLUMNS = [
    "site",
    "date",
    "raster",
    "plot_id",
    "n",
    "density_per_ha",
    "mean_nn_m",
    "R",
    "R_donnelly",
    "p_donnelly",
    "p_mc",
    "pattern",
    "quadrat_p",
    "morisita_std",
    "warnings",
]
SUMMARY_HEADERS = [
    "site",
    "date",
    "raster",
    "plot",
    "n",
    "plants / ha",
    "mean NN (m)",
    "R",
    "R (edge-corr.)",
    "p (edge-corr.)",
    "p (Monte Carlo)",
    "verdict",
    "quadrat p",
    "std. Morisita",
    "warnings",
]


_SHORT = (
    ("fewer than 30", "n < 30"),
    ("fewer than 2", "too few for a test"),
    ("expect fewer than 5", "few per quadrat"),
    ("coincid", "coincident points"),
    ("no points", "empty plot"),
    ("arrangements", "few permutations"),
)


def short_warnings(text: str) -> str:
    """Short flags for a plot's warnings, for the summary table (full text in the plot card)."""
    if not text:
        return ""
    flags = [label for key, label in _SHORT if key in text]
    return ", ".join(dict.fromkeys(flags)) if flags else text[:40]


def _esc(s) -> str:
    return html.escape(str(s))


def _plot_card(run, rr, res, plot, figdir: Path, alpha: float) -> tuple[str, list[Path]]:
    from ecoscan.survey.runner import slug

    files: list[Path] = []
    name = f"{slug(rr.entry.name)}_{slug(plot.plot_id)}"
    xy = rr.inputs.plot_points(rr.inputs.layer.ids.index(plot.plot_id))
    m = rr.points.attrs["plot_id"] == plot.plot_id
    sizes = rr.points.attrs.get("diameter_m")
    sizes = sizes[m] if sizes is not None else None
    bounds = plot.geometry.buffer(2.0).bounds
    pv = None
    same_crs = rr.inputs.layer.crs is None or rr.raster_crs == rr.inputs.layer.crs
    if same_crs:
        pv = preview(str(rr.entry.path), bounds, rgb=rr.method == "imagery")
    title = f"{rr.entry.site} · {rr.entry.date} · plot {plot.plot_id}"
    files.append(
        plot_map_figure(
            figdir / f"{name}_map.jpg",
            plot.geometry,
            xy,
            image=pv[0] if pv else None,
            image_extent=pv[1] if pv else None,
            title=f"{title}: detected plants",
            sizes_m=sizes,
        )
    )
    figs = [
        figure_html(
            files[-1],
            "Detected plants (+) over the image, plot outline in blue; "
            "circles show the estimated crown diameters to scale.",
        )
    ]
    if res.n >= 2 and res.nn_m is not None and len(res.nn_m):
        files.append(
            nn_histogram_figure(
                figdir / f"{name}_nn.png", res.nn_m, res.n / plot.area_m2, title=f"{title}: spacing"
            )
        )
        figs.append(
            figure_html(
                files[-1],
                "Nearest-neighbour distances against the "
                "distribution expected for a random pattern of the same "
                "density (no edge correction).",
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
    if rr.scales:
        sres = next((s for s in rr.scales if s.plot_id == plot.plot_id), None)
        if sres is not None and getattr(sres, "n", 0) >= 2:
            from ecoscan.figures.scales import plot_scales_figure

            files.append(plot_scales_figure(sres, figdir / f"{name}_scales.png"))
            figs.append(
                figure_html(
                    files[-1],
                    "Second-order summary functions with the "
                    "envelope of random patterns in the same plot shape.",
                )
            )
    row = next(r for r in run.rows if r["raster"] == rr.entry.name and r["plot_id"] == plot.plot_id)
    facts = (
        f"{row.get('n')} plants in {plot.area_m2:,.0f} m² "
        f"({_fmt(row.get('density_per_ha'), 0)} per ha); R = {_fmt(row.get('R'))}, "
        f"edge-corrected R = {_fmt(row.get('R_donnelly'))}, Monte Carlo p = "
        f"{_fmt(row.get('p_mc'))} at α = {alpha:g}."
    )
    warn = row.get("warnings") or ""
    body = (
        f'<div class="card"><h3>Plot {_esc(plot.plot_id)} {pattern_tag(row.get("pattern"))}</h3>'
        f'<p class="facts">{_esc(facts)}</p>'
        + (f"<p>In words: {_esc(row['summary'])}.</p>" if row.get("summary") else "")
        + (f'<p class="facts" style="color:#7a4b00">{_esc(warn)}</p>' if warn else "")
        + '<div class="figrow">'
        + "".join(figs)
        + "</div></div>"
    )
    return body, files


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

    Parameters
    ----------
    run : ecoscan.survey.runner.SurveyRun
        A finished run.
    stat_settings : ecoscan.analysis.DispersionSettings
        The statistics settings used (for alpha and the methods text).

    Returns
    -------
    list of pathlib.Path
        Figures and the report.
    """
    out = run.output
    figdir = out / "figures"
    files: list[Path] = []
    alpha = float(stat_settings.alpha)
    sections: list[ReportSection] = []

    n_plants = sum(rr.points.n for rr in run.rasters)
    files.append(r_against_n_figure(figdir / "R_against_n.png", run.rows, alpha=alpha))
    intro = (
        f"<p>{len(run.rasters)} rasters, {len({r['plot_id'] for r in run.rows})} plots, "
        f"{n_plants:,} plants analysed. Coordinates in {_esc(run.crs_text)}. The verdict comes "
        f"from a Monte Carlo test with {stat_settings.simulations} random patterns in the exact "
        f"shape of each plot, at α = {alpha:g}.</p>"
    )
    short = [{**r, "warnings": short_warnings(r.get("warnings", ""))} for r in run.rows]
    summary = intro + table_html(short, SUMMARY_COLUMNS, headers=SUMMARY_HEADERS)
    summary += figure_html(
        files[-1],
        "Clark–Evans R of every plot against its number of plants. Inside the grey band R is "
        "not significantly different from 1 (random) by the normal approximation; plots in "
        "small samples need a large departure to be significant. Marker shape and colour give "
        "the Monte Carlo verdict.",
    )
    sections.append(ReportSection("Summary", summary, "summary"))

    plot_children = []
    for rr in run.rasters:
        cards = []
        for res, plot in zip(rr.dispersion, rr.inputs.plots, strict=True):
            card, fs = _plot_card(run, rr, res, plot, figdir, alpha)
            cards.append(card)
            files += fs
        head = (
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
        plot_children.append(
            ReportSection(
                f"{rr.entry.site}, {rr.entry.date} ({rr.entry.name})",
                head + '<div class="cards">' + "".join(cards) + "</div>",
                f"r-{rr.entry.name}",
            )
        )
    sections.append(ReportSection("Plots", "", "plots", plot_children))

    if any(rr.scales for rr in run.rasters):
        from ecoscan.scales import scales_rows

        rows = []
        for rr in run.rasters:
            if rr.scales:
                rows += [
                    {"site": rr.entry.site, "date": rr.entry.date, **r}
                    for r in scales_rows(rr.scales)
                ]
        cols = [
            c
            for c in (
                "site",
                "date",
                "plot_id",
                "n",
                "global_test",
                "global_p",
                "clustered_ranges_m",
                "regular_ranges_m",
                "verdict",
            )
            if rows and c in rows[0]
        ]
        sections.append(
            ReportSection(
                "Pattern across scales",
                "<p>Where along the distance axis the pattern leaves the envelope of random "
                "patterns: competition shows as regularity at short range, patches of good ground "
                "as clustering at longer range. The global test controls the error rate over all "
                "distances at once.</p>" + table_html(rows, cols),
                "scales",
            )
        )

    if run.comparisons:
        sections.append(_comparison_section(run))
    if run.changes:
        sections.append(_change_section(run))

    topics = ["detection"]
    if any(rr.scales for rr in run.rasters):
        topics.append("scales")
    if run.comparisons:
        topics.append("compare")
    if run.changes:
        topics.append("change")
    sections.append(ReportSection("Methods and sources", methods_html(topics=topics), "methods"))
    sections.append(ReportSection("Cautions", CAUTIONS_HTML, "cautions"))
    notes = "".join(f"<li>{_esc(n)}</li>" for n in run.notes) or "<li>none</li>"
    sections.append(
        ReportSection(
            "Notes from this run",
            f"<ul>{notes}</ul><p>Full provenance is in <code>run.json</code>.</p>",
            "notes",
        )
    )
    files.append(
        build_report(
            out / "report.html",
            title=run.config.name,
            subtitle=f"ecoscan survey report · {len(run.rasters)} rasters · {run.crs_text}",
            sections=sections,
        )
    )
    return files


def _comparison_section(run) -> ReportSection:
    from ecoscan.compare import (
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
    for by, res in run.comparisons:
        groups = group_rows(res)
        pairs = comparison_rows(res)
        # the same short column sets as the terminal tables; every column is in the CSVs
        gcols = [*GROUP_SUMMARY_COLUMNS, "warnings"]
        pcols = [*pair_summary_columns(len(pairs), paired=res.paired), "warnings"]
        many = len(groups) > 2
        pairs = [{**r, "warnings": short_warnings(r.get("warnings", ""))} for r in pairs]
        png = run.output / f"compare-by-{by}" / "comparison.png"
        parts.append(f"<h3>By {_esc(by)}: groups</h3>" + table_html(groups, gcols))
        if png.exists():
            parts.append(
                figure_html(png, f"Clark–Evans R per {by} with 95% intervals, most regular first.")
            )
        adj = " (p-values Holm-adjusted; the full table is in comparison.csv)" if many else ""
        parts.append(f"<h3>By {_esc(by)}: pairs{adj}</h3>" + table_html(pairs, pcols))
        if res.notes:
            items = "".join(f"<li>{_esc(n)}</li>" for n in res.notes)
            parts.append(f"<p>What limits these comparisons:</p><ul>{items}</ul>")
    return ReportSection("Comparison", "".join(parts), "comparison")


def _change_section(run) -> ReportSection:
    from ecoscan.change import CHANGE_SUMMARY_COLUMNS, change_rows

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
        png = ch.folder / "change_map.png"
        if png.exists():
            parts.append(figure_html(png, "Persisting, lost and new plants."))
    return ReportSection("Change between dates", "".join(parts), "change")
