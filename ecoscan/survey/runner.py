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
import logging
import re
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from ecoscan import __version__
from ecoscan.errors import InputError
from ecoscan.execution import Executor, LocalExecutor
from ecoscan.io.crs import crs_label
from ecoscan.io.inputs import SurveyInputs, one_row_per_plant
from ecoscan.io.outputs import write_csv, write_json
from ecoscan.io.vector import (
    read_plots,
    read_points,
    reproject_geometries,
    write_plots,
    write_points,
)
from ecoscan.model.membership import assign_plots, points_by_plot, unsurveyed_note
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.progress import progress
from ecoscan.survey.cache import file_sha256, is_fresh, mark_done, settings_key
from ecoscan.survey.config import RasterEntry, SurveyConfig

log = logging.getLogger("ecoscan")

__all__ = ["RasterRun", "SurveyRun", "run_survey", "slug"]


def slug(text: str) -> str:
    """A file-name-safe version of a label."""
    s = re.sub(r"[^A-Za-z0-9._-]+", "-", str(text)).strip("-")
    return s or "x"


@dataclass
class RasterRun:
    """What the survey found in one raster."""

    entry: RasterEntry
    method: str
    points: PointSet  # survey CRS, analysed points only, with a plot_id attribute
    inputs: SurveyInputs
    dispersion: list
    scales: list | None
    notes: list[str]
    cached: bool
    pixel_size_m: float
    raster_crs: Any = None  # the raster's own CRS (the report's previews need it)
    detection: dict = field(default_factory=dict)  # layer, thresholds and how chosen


@dataclass
class ChangeRun:
    """Change between two consecutive dates of one site."""

    site: str
    earlier: str
    later: str
    result: Any
    folder: Path


@dataclass
class SurveyRun:
    """Everything a survey run produced."""

    config: SurveyConfig
    output: Path
    crs_text: str
    layer: PlotLayer | None = None  # all plots, in the survey CRS
    rasters: list[RasterRun] = field(default_factory=list)
    rows: list[dict] = field(default_factory=list)
    changes: list[ChangeRun] = field(default_factory=list)
    comparisons: list = field(default_factory=list)
    compare_by: str = ""
    notes: list[str] = field(default_factory=list)
    files: list[Path] = field(default_factory=list)


def _layer_subset(layer: PlotLayer, keep: np.ndarray) -> PlotLayer:
    return PlotLayer(
        [p for p, k in zip(layer.plots, keep, strict=True) if k], layer.crs, list(layer.notes)
    )


def _raster_footprint(path: Path, survey_crs, pixel_size_m: float | None = None):
    """The raster's footprint polygon in the survey CRS (``pixel_size_m`` for rasters
    without georeferencing, as in the detector settings)."""

    from ecoscan.io.raster import open_raster, window_polygons

    info = open_raster(path, pixel_size_m=pixel_size_m)
    poly = window_polygons(info.transform, 0, 0, info.width, info.height)[0]
    if info.crs is not None and survey_crs is not None and info.crs != survey_crs:
        poly = reproject_geometries(
            np.array([poly.segmentize(max(poly.length / 400, 1e-9))]), info.crs, survey_crs
        )[0]
    return poly, info


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


def _detect(
    entry: RasterEntry,
    layer: PlotLayer,
    out: Path,
    plots_hash: str,
    executor: Executor,
    previous: Path | None = None,
):
    from ecoscan.detect import DetectionSettings, detect_raster, detection_metadata

    settings = DetectionSettings.from_mapping(entry.detect)
    pts_dir = out / "points"
    stem = slug(entry.name)
    gpkg, csv = pts_dir / f"{stem}.gpkg", pts_dir / f"{stem}.csv"
    key_file = pts_dir / f"{stem}.key.json"
    key = settings_key(
        raster=file_sha256(entry.path),
        plots=plots_hash,
        detect=settings.to_dict(),
        # a calibrated detector's file (its TOML records its model file's hash)
        detector=file_sha256(settings.detector) if settings.detector else None,
    )
    old = (previous / "points") if previous is not None else None
    if old is not None and is_fresh(old / key_file.name, key, [old / gpkg.name, old / csv.name]):
        import json
        import shutil

        # the previous run's detections are unchanged and intact: carry them over
        pts_dir.mkdir(parents=True, exist_ok=True)
        for name in (gpkg.name, csv.name, f"{stem}.prj", key_file.name):
            if (old / name).exists():
                shutil.copy2(old / name, pts_dir / name)
        info = json.loads(key_file.read_text(encoding="utf-8"))
        pts = read_points(csv, allow_empty=True)
        log.info(
            "reused detection for %s (raster, plots and detector settings unchanged)",
            entry.path.name,
        )
        return (
            pts,
            info.get("method", settings.method),
            info.get("notes", []),
            True,
            float(info.get("pixel_size_m", float("nan"))),
            info.get("detection", {}),
        )
    log.info("detecting plants in %s", entry.path.name)
    res = detect_raster(entry.path, settings, plots=layer, executor=executor)
    detection = detection_metadata(res)
    write_points(res.points, gpkg)
    write_points(res.points, csv)
    mark_done(
        key_file,
        key,
        method=res.method,
        notes=list(res.notes),
        pixel_size_m=float(res.pixel_size_m),
        raster=entry.path.name,
        files={csv.name: file_sha256(csv), gpkg.name: file_sha256(gpkg)},
        detection=detection,
    )
    # analyse what was written (coordinates to the millimetre), so that a rerun from the
    # cache gives byte-identical tables
    pts = read_points(csv, allow_empty=True)
    return pts, res.method, list(res.notes), False, float(res.pixel_size_m), detection


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
        run = _run_survey(config, tmp, previous, workers, report, executor)
    # the finished folder is in place: point the run's record at it
    run.files = [dest / Path(f).relative_to(tmp) for f in run.files]
    for ch in run.changes:
        ch.folder = dest / Path(ch.folder).relative_to(tmp)
    run.output = dest
    return run


def _plan_raster(entry: RasterEntry, layer: PlotLayer, survey_crs, config: SurveyConfig):
    """The raster's header and the plots it touches (refused when it touches none)."""
    import shapely

    footprint, info = _raster_footprint(entry.path, survey_crs, entry.detect.get("pixel_size_m"))
    touches = shapely.intersects(np.array([p.geometry for p in layer.plots]), footprint)
    gone = [p.plot_id for p, t in zip(layer.plots, touches, strict=True) if not t]
    if not np.any(touches):
        raise InputError(
            f"raster {entry.path.name} (line {entry.line} of {config.path.name}) covers "
            "none of the plots; check its CRS and the plots file"
        )
    return entry, info, _layer_subset(layer, touches), gone


def _detect_all(planned: list, out: Path, plots_hash: str, previous: Path | None, ex) -> list:
    """Detections of every raster, in survey order.

    On a local executor the rasters run one after the other, each over the local pool. On a
    distributed one up to :data:`ecoscan.execution.RASTERS_AT_ONCE` rasters choose their
    thresholds here and submit their tiles together, so the cluster works on the tiles of
    several rasters at once; the results are the same.
    """
    if not ex.distributed or len(planned) == 1:
        return [_detect(e, sub, out, plots_hash, ex, previous) for e, _i, sub, _g in planned]
    from concurrent.futures import ThreadPoolExecutor

    from ecoscan.execution import RASTERS_AT_ONCE

    with ThreadPoolExecutor(max_workers=min(RASTERS_AT_ONCE, len(planned))) as pool:
        futures = [
            pool.submit(_detect, e, sub, out, plots_hash, ex, previous)
            for e, _i, sub, _g in planned
        ]
        try:
            return [f.result() for f in futures]
        except BaseException:
            # stop the other rasters' tiles; the pool waits for their threads to end, so no
            # file is written into the output folder after this run has failed
            for f in futures:
                f.cancel()
            ex.abort()
            raise


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


def _run_survey(
    config: SurveyConfig,
    out: Path,
    previous: Path | None,
    workers: int | None,
    report: bool,
    executor: Executor | None = None,
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
    plots_hash = file_sha256(config.plots)
    scales_settings = None
    if config.scales_enabled:
        from ecoscan.analysis.scales.compute import ScalesSettings

        scales_settings = ScalesSettings.from_mapping(
            {k: v for k, v in config.scales.items() if k != "enabled"}
        )

    ex = executor or LocalExecutor(workers or config.workers)
    planned = [
        _plan_raster(entry, layer, survey_crs, config)
        for entry in progress(config.rasters, desc="rasters", unit="raster")
    ]
    found = _detect_all(planned, out, plots_hash, previous, ex)
    prepared = []
    for (entry, info, sub, gone), (pts, method, notes, cached, px, detection) in zip(
        planned, found, strict=True
    ):
        pts = _to_survey_crs(pts, survey_crs)
        pts = one_row_per_plant(pts)  # the detection table repeats plants of overlapping plots
        member = assign_plots(pts, sub)
        if gone:
            notes = [*notes, unsurveyed_note(gone, f"raster {entry.name}")]
        inputs = SurveyInputs(pts, sub, member, list(notes), gone)
        pts = points_by_plot(pts, sub, member)
        prepared.append((entry, info, inputs, pts, method, notes, cached, px, detection))
    results = _analyse_all([p[2] for p in prepared], stat_settings, ex)
    for (entry, info, inputs, pts, method, notes, cached, px, detection), disp in zip(
        prepared, results, strict=True
    ):
        scl = None
        if scales_settings is not None:
            from ecoscan.analysis.scales.compute import analyse_scales

            scl = analyse_scales(
                inputs,
                scales_settings,
                points_label=f"the plants detected in {entry.path.name}",
                notes=notes,
            )
        run.rasters.append(
            RasterRun(entry, method, pts, inputs, disp, scl, notes, cached, px, info.crs, detection)
        )
        for row in dispersion_rows(disp):
            run.rows.append({"site": entry.site, "date": entry.date, "raster": entry.name, **row})
        for n in notes:
            text = n if "field check" in n else f"{entry.name}: {n}"
            if text not in run.notes:
                run.notes.append(text)

    _write_tables(run, stat_settings)
    _run_change(run)
    _run_compare(run)
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
                plots = PlotLayer(
                    [p for p in a.inputs.plots if p.plot_id in set(b.inputs.layer.ids)],
                    a.inputs.layer.crs,
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
                run.files += write_change(folder, res)
                run.changes.append(ChangeRun(site, a.entry.date, b.entry.date, res, folder))


def _run_compare(run: SurveyRun) -> None:
    cfg = run.config.compare
    if not cfg.get("enabled", True) or not run.rasters:
        return
    from ecoscan.analysis.compare.compute import CompareSettings, compare_groups, read_results
    from ecoscan.report.folders import write_comparison

    settings = _section_settings(run, CompareSettings, cfg)
    if settings.by == "auto":
        many_sites = len({r.entry.site for r in run.rasters}) > 1
        groupings = ["site", "plot"] if many_sites else ["plot"]
    else:
        groupings = [settings.by]
    table = read_results(run.output)
    for g in groupings:
        res = compare_groups([table], by=g, permutations=settings.permutations, rng=settings.seed)
        run.files += write_comparison(run.output / f"compare-by-{g}", res)
        run.comparisons.append((g, res))
    run.compare_by = ",".join(groupings)


def _write_provenance(run, stat_settings, scales_settings, started, finished, seconds) -> None:
    cfg = run.config
    inputs = [
        {
            "role": "survey",
            "path": str(cfg.path),
            "bytes": cfg.path.stat().st_size,
            "sha256": file_sha256(cfg.path),
        },
        {
            "role": "plots",
            "path": str(cfg.plots),
            "bytes": cfg.plots.stat().st_size,
            "sha256": file_sha256(cfg.plots),
        },
    ]
    for cname, cpath in (cfg.scales.get("covariates") or {}).items():
        cp = Path(cpath)
        if cp.is_file():
            inputs.append(
                {
                    "role": "covariate",
                    "name": cname,
                    "path": str(cp),
                    "bytes": cp.stat().st_size,
                    "sha256": file_sha256(cp),
                }
            )
    for e in cfg.rasters:
        inputs.append(
            {
                "role": "raster",
                "name": e.name,
                "site": e.site,
                "date": e.date,
                "path": str(e.path),
                "bytes": e.path.stat().st_size,
                "sha256": file_sha256(e.path),
                "detect": e.detect,
            }
        )
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
            "inputs": inputs,
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
