"""``ecoscan validate``: detection accuracy against reference positions."""

from __future__ import annotations

import argparse
from pathlib import Path

from ecoscan.analysis.validation.compute import COLUMNS, align_points, validate_points
from ecoscan.cli._common import add_crs_arg, add_plots_args, print_notes
from ecoscan.errors import InputError
from ecoscan.io.outputs import write_csv
from ecoscan.io.vector import read_plots, read_points
from ecoscan.lifecycle import check_output_path
from ecoscan.model.membership import overlap_note, unsurveyed_note
from ecoscan.report.tables import format_table

NAME = "validate"
HELP = "score detected plants against reference positions (precision, recall, F1)"
DESCRIPTION = (
    "Pair detections with reference plants one-to-one within a tolerance (optimal "
    "assignment) and report true positives, false positives, misses, precision, recall, "
    "F1, count error and mean offset, per plot when --plots is given."
)
EXAMPLE = (
    "ecoscan validate plants.csv field_plants.csv --tolerance 0.5 --plots plots.gpkg "
    "-o accuracy.csv"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan validate``."""
    p.add_argument("detected", help="detected points (.csv, .gpkg, .geojson)")
    p.add_argument("reference", help="reference points, e.g. mapped in the field")
    p.add_argument(
        "--tolerance",
        type=float,
        required=True,
        metavar="METRES",
        help="largest distance at which a detection counts as a reference plant",
    )
    p.add_argument("-o", "--output", metavar="FILE.csv", help="write the table as CSV")
    add_plots_args(p, required=False)
    add_crs_arg(p)


def run(args: argparse.Namespace) -> int:
    """Match, print the table, optionally write it."""
    if args.output and Path(args.output).suffix.lower() != ".csv":
        raise InputError(f"-o {args.output}: the accuracy table is written as .csv")
    if not args.tolerance > 0:
        raise InputError(f"--tolerance must be positive metres (got {args.tolerance:g})")
    if args.output:
        check_output_path(
            args.output,
            overwrite=args.overwrite,
            inputs=[args.detected, args.reference, args.plots],
        )
    det = read_points(args.detected, args.crs)
    ref = read_points(args.reference, args.crs)
    plots = None
    if args.plots:
        plots = read_plots(
            args.plots,
            id_field=args.id_field,
            target_crs=det.crs,
            points_have_crs=det.crs is not None,
        )
    _ref, notes = align_points(det, ref)
    rows = validate_points(det, ref, args.tolerance, plots=plots)
    if plots is not None:
        ov = overlap_note(plots)
        if ov:
            notes.append(ov)
        scored = {r.plot_id for r in rows}
        gone = [p.plot_id for p in plots.plots if p.plot_id not in scored]
        if gone:
            notes.append(unsurveyed_note(gone, "both point sets (no plant of either)"))
    records = [r.as_dict() for r in rows]
    if args.output:
        write_csv(args.output, records, COLUMNS)
    print_notes(det.notes + [n for n in ref.notes if n not in det.notes] + notes, args.quiet)
    print(format_table(records, COLUMNS))
    return 0
