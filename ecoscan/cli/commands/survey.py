"""``ecoscan survey``: run a whole survey described in a TOML file."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

NAME = "survey"
HELP = "run detection, statistics, comparison and change for a whole survey file"
DESCRIPTION = (
    "Run every raster of a survey file through detection and the per-plot statistics, compare "
    "sites or plots, follow plants between consecutive dates, and write one output folder with "
    "tables, GIS layers, figures, provenance (run.json) and report.html. A rerun skips rasters "
    "whose detections are already done and unchanged."
)
EXAMPLE = "ecoscan survey sample_rasters/survey.toml -o results"


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan survey``."""
    p.add_argument("survey", metavar="SURVEY.toml", help="the survey file")
    p.add_argument(
        "-o", "--output", metavar="DIR", help="output folder (default: [survey] output in the file)"
    )
    p.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="detection worker processes (default: [survey] workers, else 1)",
    )
    from ecoscan.cli._common import add_dask_args

    add_dask_args(p)
    p.add_argument("--no-report", action="store_true", help="skip figures and report.html")


def print_summary(run, quiet: bool = False) -> None:
    """Print the per-plot table (stdout) and where the outputs are (a note on stderr)."""
    from ecoscan.analysis.dispersion.detectable import detectable_range_short
    from ecoscan.cli._common import print_notes
    from ecoscan.report.tables import format_table

    cols = ["site", "date", "plot_id", "n", "density_per_ha", "R", "R_donnelly", "p_mc", "verdict"]
    cols.append("detectable_range")
    shown = [{**r, "detectable_range": detectable_range_short(r)} for r in run.rows]
    print(format_table(shown, cols))
    for ch in run.changes:
        print(
            f"change {ch.site} {ch.earlier} -> {ch.later}: shift "
            f"{ch.result.shift_x_m:+.2f} m E, {ch.result.shift_y_m:+.2f} m N"
        )
    report = run.output / "report.html"
    print_notes(
        [f"results in {run.output}"] + ([f"report: {report}"] if report.exists() else []), quiet
    )


def run(args: argparse.Namespace) -> int:
    """Run ``ecoscan survey``."""
    from ecoscan.cli._common import print_notes
    from ecoscan.execution import check_executor_options, open_executor
    from ecoscan.safety import cap_workers
    from ecoscan.survey.config import load_survey
    from ecoscan.survey.runner import run_survey

    check_executor_options(args.workers, args.dask_workers, args.scheduler)
    dask = args.dask_workers is not None or args.scheduler is not None
    workers = cap_workers(args.workers, quiet=args.quiet)
    cfg = load_survey(args.survey)
    if dask and cfg.workers > 1:
        print_notes(
            [f"[survey] workers = {cfg.workers} is not used: the Dask workers do the work"],
            args.quiet,
        )
    elif workers is None and cfg.workers > 1:
        workers = cap_workers(cfg.workers, quiet=args.quiet, option="[survey] workers")
    with open_executor(
        workers=workers, dask_workers=args.dask_workers, scheduler=args.scheduler, quiet=args.quiet
    ) as executor:
        res = run_survey(
            cfg,
            output=Path(args.output) if args.output else None,
            report=not args.no_report,
            overwrite=args.overwrite,
            executor=executor,
        )
        if executor.distributed:
            res.notes.append(f"detection and per-plot tests ran on {executor.describe()}")
    print_notes(res.notes, args.quiet)
    print_summary(res, args.quiet)
    sys.stdout.flush()
    return 0
