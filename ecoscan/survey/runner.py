"""Run a whole survey: detection and analysis for every raster and plot, then comparison,
change between dates, figures, provenance and the report.

Output folder layout::

    OUTDIR/
      dispersion.csv      one row per raster and plot (site, date, raster, then the
                          dispersion columns of ecoscan.analysis.dispersion.compute)
      dispersion.json     the same numbers with all parameters
      points.csv/.prj     every analysed plant (x, y, plot_id, site, date, raster, attributes)
      plots.gpkg          the plot outlines in the survey CRS
      points/NAME.gpkg    detected plants per raster (also NAME.csv); NAME.key.json marks a
                          finished detection for the rerun cache
      scales.csv, functions.csv   when [scales] is enabled
      effects.csv         each habitat covariate's effect on density (with [scales] covariates)
      change/SITE_D1_D2/  change between consecutive dates of a site
      compare/            comparison between sites (or plots)
      figures/            PNG figures
      run.json            provenance: version, parameters, input sizes and SHA-256, times
      report.html         the self-contained report
"""

from __future__ import annotations

import itertools
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from ecoscan import __version__
from ecoscan.execution import Executor, LocalExecutor
from ecoscan.io.crs import crs_label
from ecoscan.io.inputs import SurveyInputs, one_row_per_plant
from ecoscan.io.outputs import write_csv, write_json
from ecoscan.io.vector import as_stored, read_plots, write_plots, write_points
from ecoscan.model.membership import assign_plots, points_by_plot, unsurveyed_note
from ecoscan.model.notes import FIELD_CHECK, code_of
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.survey.config import SurveyConfig
from ecoscan.survey.detections import detect_all
from ecoscan.survey.manifest import build_manifest
from ecoscan.survey.model import ChangeRun, ComparisonRun, RasterRun, SurveyRun, slug

__all__ = ["ChangeRun", "ComparisonRun", "RasterRun", "SurveyRun", "run_survey", "slug"]


def _to_survey_crs(points: PointSet, crs) -> PointSet:
    if crs is None or points.crs is None or points.crs == crs:
        return points
    from ecoscan.io.crs import transform_xy

    x, y = transform_xy(points.x, points.y, points.crs, crs)
    return PointSet(
        x,
        y,
        points.attrs,
        crs,
        [*points.notes, f"points reprojected to the survey CRS {crs_label(crs)}"],
    )


def run_survey(
    config: SurveyConfig,
    *,
    output: Path | None = None,
    workers: int | None = None,
    report: bool = True,
    overwrite: bool = False,
    executor: Executor | None = None,
) -> SurveyRun:
    """Run every step of a survey and write its output folder.

    Parameters
    ----------
    config : SurveyConfig
        A checked survey file (:func:`ecoscan.survey.config.load_survey`).
    output : pathlib.Path, optional
        Output folder; default the one named in the survey file.
    workers : int, optional
        Detection worker processes; default from the survey file.
    executor : Executor, optional
        Where detection and the per-plot tests run instead of local processes
        (:func:`ecoscan.execution.open_executor`, e.g. a Dask cluster: the rasters' tiles
        and the plots' Monte Carlo tests then run there together). The tables are the same.
    report : bool
        Write figures and ``report.html``.
    overwrite : bool
        Replace an existing output folder (refused otherwise). The folder is built in a
        temporary sibling and swapped in whole at the end, so no file of an earlier run is
        kept; detections of the earlier run whose inputs, settings and file hashes are
        unchanged are carried over instead of being recomputed.

    Returns
    -------
    SurveyRun
    """
    from ecoscan.lifecycle import output_folder

    dest = Path(output or config.output)
    inputs = [config.path, config.plots, *(e.path for e in config.rasters)]
    with output_folder(dest, overwrite=overwrite, inputs=inputs) as tmp:
        previous = dest if (dest / "points").is_dir() else None
        run = _run_survey(config, tmp, previous, workers, report, executor, label=dest.name)
    # the finished folder is in place: point the run's record at it
    run.relocate(tmp, dest)
    return run


def _analyse_plot_job(job) -> Any:
    from ecoscan.analysis.dispersion.compute import analyse_plot

    return analyse_plot(*job)


def _analyse_all(inputs: list[SurveyInputs], stat_settings, ex) -> list[list]:
    """Per-plot statistics of every raster, in survey and plot order.

    A distributed executor gets one task per plot of every raster at once (each plot's
    Monte Carlo stream is seeded from its id, so the numbers do not depend on the
    schedule); locally the plots run in this process as in ``ecoscan analyse``.
    """
    from ecoscan.analysis.dispersion.compute import analyse

    if not ex.distributed:
        return [analyse(inp, stat_settings) for inp in inputs]
    jobs = [
        (inp.plot_points(i), plot.geometry, plot.plot_id, stat_settings)
        for inp in inputs
        for i, plot in enumerate(inp.plots)
    ]
    flat = iter(ex.map(_analyse_plot_job, jobs, desc="plots", unit="plot"))
    return [[next(flat) for _ in inp.plots] for inp in inputs]


def _raster_runs(manifest, found, survey_crs) -> list[tuple]:
    """Each raster's detections in the survey CRS, one row per plant, with the plots holding
    each plant (assigned once, in the survey CRS, on the coordinates as stored)."""
    prepared = []
    for item, det in zip(manifest.rasters, found, strict=True):
        pts = _to_survey_crs(det.points, survey_crs)
        reprojected = pts is not det.points
        pts = one_row_per_plant(pts)  # the detection table repeats plants of overlapping plots
        sub = item.plots
        member = assign_plots(pts, sub)
        notes = list(det.notes)
        if item.unsurveyed:
            # run notes carry the raster name in front (below), so the note does not repeat it
            notes.append(unsurveyed_note(item.unsurveyed, "the raster's footprint"))
        inputs = SurveyInputs(pts, sub, member, list(notes), list(item.unsurveyed))
        prepared.append((item, det, inputs, points_by_plot(pts, sub, member), notes, reprojected))
    return prepared


def _scales_all(prepared: list[tuple], settings) -> list:
    """The analysis across scales of every raster's plots (None each without ``[scales]``),
    with each covariate raster opened once for the whole survey."""
    if settings is None:
        return [None] * len(prepared)
    from ecoscan.analysis.habitat import CovariateRasters
    from ecoscan.analysis.scales.compute import analyse_scales

    with CovariateRasters() as covariates:
        return [
            analyse_scales(
                inputs,
                settings,
                points_label=f"the plants detected in {item.entry.path.name}",
                notes=notes,
                covariate_rasters=covariates,
            )
            for item, _det, inputs, _pts, notes, _moved in prepared
        ]


def _run_survey(
    config: SurveyConfig,
    out: Path,
    previous: Path | None,
    workers: int | None,
    report: bool,
    executor: Executor | None = None,
    *,
    label: str = "",
) -> SurveyRun:
    from ecoscan.analysis.dispersion.columns import dispersion_rows
    from ecoscan.analysis.dispersion.compute import DispersionSettings
    from ecoscan.safety import check_quadrat_cells

    started = datetime.now(UTC)
    t0 = time.perf_counter()
    stat_settings = DispersionSettings.from_mapping(config.statistics)
    layer = read_plots(config.plots, id_field=config.plot_id_field, layer=config.plots_layer)
    survey_crs = layer.crs
    check_quadrat_cells(
        stat_settings.quadrat_m, layer.plots, option=f"[statistics] quadrat_m in {config.path.name}"
    )
    run = SurveyRun(config, out, crs_label(survey_crs), layer=layer, notes=list(layer.notes))
    few = stat_settings.too_few_simulations()
    if few:  # the same line is in every plot's warnings
        run.notes.append(few)
    scales_settings = None
    if config.scales_enabled:
        from ecoscan.analysis.scales.compute import ScalesSettings

        scales_settings = ScalesSettings.from_mapping(
            {k: v for k, v in config.scales.items() if k != "enabled"}
        )

    ex = executor or LocalExecutor(workers or config.workers)
    run.manifest = manifest = build_manifest(config, layer)
    found = detect_all(manifest.rasters, out, manifest.plots.sha256, previous, ex)
    prepared = _raster_runs(manifest, found, survey_crs)
    results = _analyse_all([p[2] for p in prepared], stat_settings, ex)
    scales = _scales_all(prepared, scales_settings)
    for (item, det, inputs, pts, notes, moved), disp, scl in zip(
        prepared, results, scales, strict=True
    ):
        entry = item.entry
        run.rasters.append(
            RasterRun(
                entry, det.method, pts, inputs, disp, scl, notes, det.cached,
                det.pixel_size_m, item.info.crs, det.detection, moved,
            )
        )  # fmt: skip
        for row in dispersion_rows(disp):
            run.add_row({"site": entry.site, "date": entry.date, "raster": entry.name, **row})
        for n in notes:
            # the field-check caution is said once for the run, not once per raster
            text = n if code_of(n) == FIELD_CHECK else f"{entry.name}: {n}"
            if text not in run.notes:
                run.notes.append(text)

    _write_tables(run, stat_settings)
    _run_change(run)
    _run_compare(run, label or out.name)
    if report:
        from ecoscan.survey.reporting import write_report

        run.files += write_report(run, stat_settings)
    finished = datetime.now(UTC)
    _write_provenance(
        run, stat_settings, scales_settings, started, finished, time.perf_counter() - t0
    )
    return run


def _write_tables(run: SurveyRun, stat_settings) -> None:
    from ecoscan.analysis.dispersion.columns import DISPERSION_COLUMNS

    out = run.output
    cols = ["site", "date", "raster", *DISPERSION_COLUMNS]
    extra = [k for r in run.rows for k in r if k not in cols]
    cols += list(dict.fromkeys(extra))
    run.files.append(write_csv(out / "dispersion.csv", run.rows, cols))
    run.files.append(
        write_json(
            out / "dispersion.json",
            {
                "ecoscan_version": __version__,
                "survey": run.config.name,
                "crs": run.crs_text,
                "parameters": stat_settings.to_dict(),
                "plots": run.rows,
            },
        )
    )
    parts = []
    for rr in run.rasters:
        p = rr.points
        attrs = {
            "plot_id": p.attrs["plot_id"],
            "site": np.full(p.n, rr.entry.site, dtype=object),
            "date": np.full(p.n, rr.entry.date, dtype=object),
            "raster": np.full(p.n, rr.entry.name, dtype=object),
        }
        attrs.update({k: v for k, v in p.attrs.items() if k not in attrs})
        parts.append(PointSet(p.x, p.y, attrs, p.crs))
    allpts = PointSet.concat(parts)
    if allpts.crs is None and run.rasters:
        allpts.crs = run.rasters[0].inputs.layer.crs
    run.files.append(write_points(allpts, out / "points.csv"))
    run.files.append(write_plots(run.layer, out / "plots.gpkg"))
    if any(rr.scales for rr in run.rasters):
        from ecoscan.analysis.scales.columns import function_rows, scales_rows

        srows, frows = [], []
        for rr in run.rasters:
            if not rr.scales:
                continue
            lab = {"site": rr.entry.site, "date": rr.entry.date, "raster": rr.entry.name}
            srows += [{**lab, **r} for r in scales_rows(rr.scales)]
            frows += [{**lab, **r} for r in function_rows(rr.scales)]
        run.files.append(write_csv(out / "scales.csv", srows))
        run.files.append(write_csv(out / "functions.csv", frows))
        from ecoscan.analysis.habitat import EFFECT_COLUMNS
        from ecoscan.analysis.scales.columns import effect_rows_of

        erows = []
        for rr in run.rasters:
            lab = {"site": rr.entry.site, "date": rr.entry.date, "raster": rr.entry.name}
            erows += [{**lab, **r} for r in effect_rows_of(rr.scales or [])]
        if erows:
            cols = ["site", "date", "raster", *EFFECT_COLUMNS]
            run.files.append(write_csv(out / "effects.csv", erows, cols))


def _section_settings(run: SurveyRun, cls, cfg: dict):
    """A command's settings from its survey-file section; the run's seed unless it sets one."""
    seed = int(run.config.statistics.get("seed", 1))
    return cls.from_mapping({"seed": seed, **{k: v for k, v in cfg.items() if k != "enabled"}})


def _run_change(run: SurveyRun) -> None:
    cfg = run.config.change
    if not cfg.get("enabled", True):
        return
    from ecoscan.analysis.change.compute import ChangeSettings, detect_change
    from ecoscan.report.folders import write_change

    settings = _section_settings(run, ChangeSettings, cfg)
    by_site: dict[str, list[RasterRun]] = {}
    for rr in run.rasters:
        by_site.setdefault(rr.entry.site, []).append(rr)
    for site, rrs in by_site.items():
        for method in dict.fromkeys(r.method for r in rrs):
            seq = sorted((r for r in rrs if r.method == method), key=lambda r: r.entry.date)
            for a, b in itertools.pairwise(seq):
                later = set(b.inputs.layer.ids)
                plots = PlotLayer(
                    [p for p in a.inputs.plots if p.plot_id in later], a.inputs.layer.crs
                )
                # each plant once (the points table repeats a plant for every plot holding it)
                res = detect_change(
                    a.inputs.points.subset(a.inputs.membership.in_any()),
                    b.inputs.points.subset(b.inputs.membership.in_any()),
                    settings.tolerance_m,
                    plots=plots if plots.plots else None,
                    estimate_shift=settings.estimate_shift,
                    simulations=settings.simulations,
                    rng=settings.seed,
                )
                folder = run.output / "change" / slug(f"{site}_{a.entry.date}_{b.entry.date}")
                files = write_change(folder, res)
                run.files += files
                figure = next((f for f in files if Path(f).suffix == ".png"), None)
                run.changes.append(ChangeRun(site, a.entry.date, b.entry.date, res, folder, figure))


def _label(v) -> str:
    """A label as the tables give it back (text, surrounding blanks dropped)."""
    return "" if v is None else str(v).strip()


def _comparison_table(run: SurveyRun, label: str):
    """The survey's plots as units of comparison, from memory.

    The same units, in the same order and with the same numbers, as reading the finished
    folder back (:func:`ecoscan.compare.read_results`): one per site, date and plot, in the
    order of ``dispersion.csv``, holding the plants of that plot at the coordinates the
    points table stores, with the plot's own outline for its area and perimeter.
    """
    from ecoscan.analysis.compare.compute import PlotUnit, ResultsTable
    from ecoscan.stats.compare_r import plot_nn

    xy_of: dict[tuple[str, str, str], list[np.ndarray]] = {}
    geom_of: dict[tuple[str, str, str], object] = {}
    for rr in run.rasters:
        inp = rr.inputs
        # reprojected coordinates are analysed as computed but compared as stored (mm)
        pts = as_stored(inp.points) if rr.reprojected else inp.points
        for i, plot in enumerate(inp.plots):
            key = (_label(rr.entry.site), _label(rr.entry.date), _label(plot.plot_id))
            idx = inp.membership.points_of(i)
            xy_of.setdefault(key, []).append(np.column_stack([pts.x[idx], pts.y[idx]]))
            geom_of.setdefault(key, plot.geometry)
    units = []
    for key, parts in xy_of.items():
        g = geom_of[key]
        xy = np.concatenate(parts) if len(parts) > 1 else parts[0]
        units.append(PlotUnit(label, *key, plot_nn(xy, float(g.area), float(g.length))))
    crs = run.layer.crs if run.layer is not None else None
    points = PointSet(np.empty(0), np.empty(0), {}, crs)
    return ResultsTable(run.output, label, run.rows, points, units, True, True, [])


def _run_compare(run: SurveyRun, label: str) -> None:
    cfg = run.config.compare
    if not cfg.get("enabled", True) or not run.rasters:
        return
    from ecoscan.analysis.compare.compute import CompareSettings, compare_groups
    from ecoscan.report.folders import write_comparison

    settings = _section_settings(run, CompareSettings, cfg)
    if settings.by == "auto":
        many_sites = len({r.entry.site for r in run.rasters}) > 1
        groupings = ["site", "plot"] if many_sites else ["plot"]
    else:
        groupings = [settings.by]
    table = _comparison_table(run, label)
    for g in groupings:
        res = compare_groups([table], by=g, permutations=settings.permutations, rng=settings.seed)
        folder = run.output / f"compare-by-{g}"
        files = write_comparison(folder, res)
        run.files += files
        figure = next((f for f in files if Path(f).suffix == ".png"), None)
        run.comparisons.append(ComparisonRun(g, res, folder, figure))
    run.compare_by = ",".join(groupings)


def _write_provenance(run, stat_settings, scales_settings, started, finished, seconds) -> None:
    cfg = run.config
    write_json(
        run.output / "run.json",
        {
            "ecoscan_version": __version__,
            "survey": cfg.name,
            "crs": run.crs_text,
            "started_utc": started.isoformat(timespec="seconds"),
            "finished_utc": finished.isoformat(timespec="seconds"),
            "seconds": round(seconds, 2),
            "statistics": stat_settings.to_dict(),
            "scales": scales_settings.to_dict() if scales_settings else None,
            "change": cfg.change,
            "compare": {**cfg.compare, "by_used": run.compare_by},
            "inputs": run.manifest.provenance(),
            "rasters": [
                {
                    "name": r.entry.name,
                    "method": r.method,
                    "plants": r.points.n,
                    "from_cache": r.cached,
                    "pixel_size_m": r.pixel_size_m,
                    "detection": r.detection,
                }
                for r in run.rasters
            ],
            "notes": run.notes,
            "outputs": sorted(
                str(p.relative_to(run.output))
                for p in run.files
                if Path(p).is_relative_to(run.output)
            ),
        },
    )
