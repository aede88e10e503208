"""``ecoscan change``: follow plants between two survey dates."""

from __future__ import annotations

import argparse
from pathlib import Path

from ecoscan.analysis.change.columns import CHANGE_SUMMARY_COLUMNS, change_rows
from ecoscan.analysis.change.compute import detect_change
from ecoscan.cli._common import (
    add_crs_arg,
    add_plots_args,
    add_renamed,
    print_notes,
    print_warnings,
)
from ecoscan.errors import InputError
from ecoscan.io.vector import read_plots, read_points
from ecoscan.lifecycle import output_folder
from ecoscan.report.folders import write_change
from ecoscan.report.tables import format_table
from ecoscan.safety import simulations_arg

NAME = "change"
HELP = "follow plants between two dates: persisting, lost and new plants, survival per plot"
DESCRIPTION = (
    "Match plants between an earlier and a later survey one-to-one within a tolerance, after "
    "removing the overall shift between the two mosaics. Every plant is persisting, lost or "
    "new; per plot: survival with a 95% Wilson interval, recruitment, change in density and in "
    "Clark-Evans R. Writes plants.csv, plants.gpkg, change.csv, change.json and change_map.png.\n"
    "Automated counts need field checks before they drive management decisions."
)
EXAMPLE = (
    "ecoscan change spring/points.csv autumn/points.csv --tolerance 0.5 "
    "--plots plots.gpkg -o change_spring_autumn"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan change``."""
    p.add_argument(
        "earlier",
        metavar="EARLIER",
        help="plant points of the earlier date (a points file, or an analyse results folder)",
    )
    p.add_argument(
        "later",
        metavar="LATER",
        help="plant points of the later date (a points file, or an analyse results folder)",
    )
    p.add_argument(
        "--tolerance",
        type=float,
        required=True,
        metavar="METRES",
        help="largest distance between a plant's two positions after removing the shift, in "
        "metres; above the positional error, well below the plant spacing (e.g. 0.5)",
    )
    p.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="output folder")
    add_renamed(p, "--out")  # retired-name
    add_plots_args(p, required=False)
    add_crs_arg(p)
    p.add_argument(
        "--no-shift",
        action="store_true",
        help="do not estimate and remove a shift between the two surveys",
    )
    p.add_argument(
        "--simulations",
        type=simulations_arg("--simulations"),
        default=199,
        metavar="N",
        help="Monte Carlo simulations for the test of a change in R beyond random losses and "
        "recruits (default 199; 0 skips it)",
    )
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")


def _points_file(path: str) -> Path:
    """A points file, or ``points.csv`` inside a results folder."""
    p = Path(path)
    if p.is_dir():
        if not (p / "points.csv").exists():
            raise InputError(
                f"{p} is a folder without points.csv; give a points file or a results folder "
                "of 'ecoscan analyse'"
            )
        return p / "points.csv"
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``ecoscan change``."""
    earlier_path, later_path = _points_file(args.earlier), _points_file(args.later)
    with output_folder(
        args.output, overwrite=args.overwrite, inputs=[args.earlier, args.later, args.plots]
    ) as tmp:
        result, paths, plots, extra_notes = _change(args, earlier_path, later_path, tmp)
    _print(args, result, paths, plots, extra_notes)
    return 0


def _change(args, earlier_path: Path, later_path: Path, tmp: Path):
    earlier = read_points(earlier_path, args.crs)
    later = read_points(later_path, args.crs)
    plots_path = args.plots
    extra_notes = []
    if (
        plots_path is None
        and (earlier_path.parent / "plots.gpkg").exists()
        and Path(args.earlier).is_dir()
    ):
        plots_path = earlier_path.parent / "plots.gpkg"
        extra_notes.append(f"plots taken from {plots_path} (the earlier results folder)")
    plots = None
    if plots_path:
        plots = read_plots(
            plots_path,
            target_crs=earlier.crs,
            id_field=args.id_field,
            points_have_crs=earlier.crs is not None,
        )
    result = detect_change(
        earlier,
        later,
        args.tolerance,
        plots=plots,
        estimate_shift=not args.no_shift,
        simulations=args.simulations,
        rng=args.seed,
    )
    return result, write_change(tmp, result), plots, extra_notes


def _print(args, result, paths, plots, extra_notes) -> None:
    notes = extra_notes + list(result.notes) + ([] if plots is None else plots.notes)
    c = result.counts
    print(
        f"shift removed: {result.shift_x_m:+.3f} m east, {result.shift_y_m:+.3f} m north; "
        f"{c['persisting']} persisting, {c['lost']} lost, {c['new']} new "
        f"(tolerance {result.tolerance_m:g} m)"
    )
    print(format_table(change_rows(result), CHANGE_SUMMARY_COLUMNS))
    print_warnings(list(result.warnings))
    notes.append(f"wrote {len(paths)} files to {args.output}")
    notes.append("automated counts: check lost and new plants in the field before acting on them")
    print_notes(notes, args.quiet)
