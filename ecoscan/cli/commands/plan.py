"""``ecoscan plan``: how many plants and plots of what size a monitoring survey needs."""

from __future__ import annotations

import argparse
import re

import shapely

from ecoscan.analysis.planning import DESIGN_COLUMNS, PATTERN_COLUMNS, PlanSettings, make_plan
from ecoscan.cli._common import print_notes
from ecoscan.errors import InputError
from ecoscan.report.folders import write_plan
from ecoscan.report.tables import format_table

NAME = "plan"
HELP = "power of a monitoring design: plants per plot, plot size and number of plots"
DESCRIPTION = (
    "For a plot shape (a rectangle given by --plot-size, or the polygons of --plots) and an\n"
    "expected density, simulate in the exact plot the weakest clustering and regularity the\n"
    "Monte Carlo nearest-neighbour test would detect, across a range of plants per plot, and\n"
    "give the power to detect a change in density between dates and a survival difference\n"
    "between sites against the number of plots. Planning figures are a guide: check the design\n"
    "with a pilot survey and local monitoring standards."
)
EXAMPLE = "ecoscan plan --plot-size 30x30 --density 200:600 --plot-count 6 -o plan"


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan plan``."""
    shape = p.add_mutually_exclusive_group(required=True)
    shape.add_argument(
        "--plot-size", metavar="WxH", help="rectangular plot, width x height in metres, e.g. 30x30"
    )
    shape.add_argument("--plots", metavar="PLOTS", help="plot polygons whose shapes to plan for")
    p.add_argument(
        "--density",
        required=True,
        metavar="PER_HA",
        help="expected plants per hectare, one value or a range LOW:HIGH",
    )
    p.add_argument("--plot-count", type=int, default=5, metavar="N", help="plots per site or date")
    p.add_argument("--alpha", type=float, default=0.05, help="level of the tests (default 0.05)")
    p.add_argument("--power", type=float, default=0.8, help="target power (default 0.8)")
    p.add_argument(
        "--change",
        type=float,
        default=-20.0,
        metavar="PERCENT",
        help="density change between dates to detect, percent (default -20)",
    )
    p.add_argument(
        "--survival",
        default="0.8:0.65",
        metavar="A:B",
        help="survival proportions at two sites to tell apart (default 0.8:0.65)",
    )
    p.add_argument(
        "--target-r",
        default="0.8:1.2",
        metavar="LOW:HIGH",
        help="clustered and regular Clark-Evans R to detect (default 0.8:1.2)",
    )
    p.add_argument(
        "--patterns",
        type=int,
        default=120,
        metavar="N",
        help="simulated patterns per alternative strength (default 120)",
    )
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    p.add_argument("-o", "--output", metavar="OUTDIR", help="write tables (CSV) and a figure")


def _pair(text: str, option: str, low: float, high: float) -> tuple[float, ...]:
    try:
        vals = tuple(float(v) for v in text.split(":"))
    except ValueError:
        raise InputError(f"{option} {text!r}: expected numbers such as 0.8:0.6") from None
    if not 1 <= len(vals) <= 2 or not all(low < v < high for v in vals):
        raise InputError(f"{option} {text!r}: expected one or two values between {low} and {high}")
    return vals


def _shapes(args: argparse.Namespace) -> dict[str, shapely.Geometry]:
    if args.plot_size:
        m = re.fullmatch(r"\s*([0-9.]+)\s*[xX×]\s*([0-9.]+)\s*", args.plot_size)
        if not m or not (float(m[1]) > 0 and float(m[2]) > 0):
            raise InputError(
                f"--plot-size {args.plot_size!r}: give width x height in metres, e.g. 30x30"
            )
        w, h = float(m[1]), float(m[2])
        return {f"{w:g}x{h:g} m": shapely.box(0, 0, w, h)}
    from ecoscan.io.vector import read_plots

    layer = read_plots(args.plots)
    shapes = {f"plot {pl.plot_id}": pl.geometry for pl in layer.plots}
    if not shapes:
        raise InputError(f"{args.plots}: no polygons; give a polygon layer or --plot-size")
    return shapes


def run(args: argparse.Namespace) -> int:
    """Make the plan, print its tables and answers, optionally write them."""
    from ecoscan.lifecycle import check_output_path, output_folder

    if args.output:  # refuse existing results before the simulations, not after
        check_output_path(args.output, overwrite=args.overwrite, folder=True)
    densities = _pair(args.density, "--density", 0, 1e7)
    survival = _pair(args.survival, "--survival", 0, 1)
    target = _pair(args.target_r, "--target-r", 0, 2.1491)
    if len(survival) != 2 or len(target) != 2:
        raise InputError("--survival and --target-r take two values, e.g. 0.8:0.65")
    if not 0 < args.power < 1:
        raise InputError(f"--power must lie between 0 and 1 (got {args.power:g})")
    if not 0 < args.alpha < 0.5:
        raise InputError(f"--alpha must lie between 0 and 0.5 (got {args.alpha:g})")
    if not args.change > -100 or args.change == 0:
        raise InputError(f"--change must be a non-zero percent above -100 (got {args.change:g})")
    if not 1 <= args.plot_count <= 10_000:
        raise InputError(f"--plot-count must be between 1 and 10000 (got {args.plot_count})")
    if not 10 <= args.patterns <= 5000:
        raise InputError(f"--patterns must be between 10 and 5000 (got {args.patterns})")
    settings = PlanSettings(
        densities_per_ha=densities,
        plot_count=args.plot_count,
        alpha=args.alpha,
        power=args.power,
        relative_change=args.change / 100.0,
        survival=(survival[0], survival[1]),
        clustered_r=min(target),
        regular_r=max(target),
        patterns=args.patterns,
        seed=args.seed,
    )
    try:
        plan = make_plan(_shapes(args), settings)
    except ValueError as e:
        raise InputError(str(e)) from None
    if args.output:
        with output_folder(args.output, overwrite=args.overwrite) as tmp:
            write_plan(plan, tmp)
    print(format_table(plan.pattern_rows, PATTERN_COLUMNS))
    print()
    print(format_table(plan.design_rows, DESIGN_COLUMNS))
    print()
    for a in plan.answers:
        print(a)
    print_notes(plan.notes, args.quiet)
    return 0
