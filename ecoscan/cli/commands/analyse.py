"""``ecoscan analyse``: are the plants in each plot clustered, random or regular?"""

from __future__ import annotations

import argparse
import sys

from ecoscan.analysis import (
    CAUTION,
    DispersionSettings,
    analyse,
    check_outdir,
    dispersion_rows,
    write_analysis,
)
from ecoscan.cli._common import add_crs_arg, add_plots_args, add_seed_args, print_notes
from ecoscan.inputs import load_points_and_plots
from ecoscan.tables import format_table

NAME = "analyse"
HELP = "test per plot whether plants are clustered, random or regular"
DESCRIPTION = """\
For every plot: nearest-neighbour distances, the Clark-Evans index R (uncorrected, with
Donnelly's edge correction and with a guard zone), a Monte Carlo test in the exact plot
polygon that gives the verdict, and a quadrat analysis (chi-square, variance-to-mean ratio,
Morisita's index). Writes OUTDIR/dispersion.csv, dispersion.json, points.csv and plots.gpkg,
and prints a table. Automated counts need field checks before they drive decisions."""
EXAMPLE = "ecoscan analyse plants.csv --plots plots.geojson --crs EPSG:32633 -o results"

#: Columns of the terminal table, with their headings.
TABLE_COLUMNS = (
    ("plot_id", "plot"),
    ("n", "n"),
    ("density_per_ha", "per ha"),
    ("mean_nn_m", "NN mean m"),
    ("R", "R"),
    ("R_donnelly", "R Donnelly"),
    ("p_donnelly", "p Donnelly"),
    ("p_mc", "p MC"),
    ("pattern", "pattern"),
    ("quadrat_p", "quadrat p"),
    ("morisita_std", "Morisita std"),
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan analyse``."""
    p.add_argument("points", metavar="POINTS", help="plant positions (CSV with x, y; GeoPackage)")
    add_plots_args(p)
    add_crs_arg(p)
    p.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="results folder")
    add_seed_args(p)
    p.add_argument(
        "--alpha", type=float, default=0.05, help="significance level of the verdict (0.05)"
    )
    p.add_argument(
        "--alternative",
        choices=("two-sided", "clustered", "regular"),
        default="two-sided",
        help="alternative hypothesis of the tests (default two-sided)",
    )
    p.add_argument(
        "--guard",
        type=float,
        metavar="METRES",
        help="guard-zone width in metres (default 1/sqrt(density): twice the expected "
        "nearest-neighbour distance)",
    )
    p.add_argument(
        "--quadrat",
        type=float,
        metavar="METRES",
        help="quadrat side in metres (default: equal cells fitted to each plot, each "
        "expecting at least 5 plants where the count allows)",
    )
    p.add_argument(
        "--stop-after",
        type=int,
        default=20,
        metavar="H",
        help="stop simulating once H simulated patterns are as extreme as the observed one "
        "in each tail (sequential Monte Carlo, Besag & Clifford 1991; exact p); 0 runs every "
        "simulation (default 20)",
    )


def run(args: argparse.Namespace) -> int:
    """Run the analysis and write the results folder."""
    settings = DispersionSettings(
        simulations=args.simulations,
        seed=args.seed,
        alpha=args.alpha,
        alternative=args.alternative,
        guard_m=args.guard,
        quadrat_m=args.quadrat,
        stop_after=args.stop_after,
    )
    outdir = check_outdir(args.output)
    inputs = load_points_and_plots(args.points, args.plots, crs=args.crs, id_field=args.id_field)
    notes = list(inputs.notes)
    few = settings.too_few_simulations()
    if few:
        notes.append(few.replace("simulations (999", "--simulations (999"))
    results = analyse(inputs, settings)
    write_analysis(outdir, inputs, results, settings, notes=notes)
    rows = dispersion_rows(results)
    keys = [k for k, _ in TABLE_COLUMNS]
    print(format_table(rows, keys, headers=[h for _, h in TABLE_COLUMNS]))
    print()
    for r in rows:
        print(f"plot {r['plot_id']}: {r['summary']}")
    flagged = [(r["plot_id"], r["warnings"]) for r in rows if r["warnings"]]
    for pid, w in flagged:
        print(f"plot {pid}: {w}")
    print(
        f"pattern: Monte Carlo test ({settings.simulations} simulations, {settings.alternative}, "
        f"alpha {settings.alpha:g}); results in {outdir}"
    )
    print_notes(notes, quiet=args.quiet)
    if not args.quiet:
        print(f"caution: {CAUTION}", file=sys.stderr)
    return 0
